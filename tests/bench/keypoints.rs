//! Speed of the keypoint detector on a seeded synthetic image.
//!
//! Run: `cargo bench --bench keypoints` (a 4000 × 4000 image), or
//! `cargo bench --bench keypoints -- 2000` for another side. The image: 5 cm pixels, a smooth
//! background, 20 000 bright and dark Gaussian blobs (σ 3-60 cm), Gaussian noise, and a
//! nodata collar on the left (an eighth of the width). Two feature sizes: 0.6 m (12 pixels:
//! detection at full resolution, the slowest case) and the default for this image against a
//! 25 cm orthophoto (2.5 m, detected on 5 × 5 blocks). Prints one Markdown table row each:
//! the best of three runs, in seconds and in megapixels of the image per second.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use std::time::Instant;
use tiemark::image::{GeoTransform, Image};
use tiemark::keypoints::{detect, KeypointParams};

fn synthetic(side: usize, pixel: f64) -> Image {
    let mut rng = ChaCha8Rng::seed_from_u64(20261202);
    let noise = Normal::new(0.0, 2.0).unwrap();
    let mut pixels: Vec<f32> = (0..side * side)
        .map(|i| {
            let (x, y) = (
                (i % side) as f64 / side as f64,
                (i / side) as f64 / side as f64,
            );
            (120.0 + 40.0 * (3.0 * x).sin() * (2.0 * y).cos() + noise.sample(&mut rng)) as f32
        })
        .collect();
    for _ in 0..20_000 {
        let (cx, cy) = (
            rng.gen_range(0.0..side as f64),
            rng.gen_range(0.0..side as f64),
        );
        let sigma = rng.gen_range(0.03..0.6) / pixel;
        let amp = rng.gen_range(20.0..90.0) * if rng.gen_bool(0.5) { 1.0 } else { -1.0 };
        let r = (3.0 * sigma).ceil() as isize;
        for y in (cy as isize - r).max(0)..(cy as isize + r).min(side as isize) {
            for x in (cx as isize - r).max(0)..(cx as isize + r).min(side as isize) {
                let d2 = (x as f64 - cx).powi(2) + (y as f64 - cy).powi(2);
                pixels[y as usize * side + x as usize] +=
                    (amp * (-d2 / (2.0 * sigma * sigma)).exp()) as f32;
            }
        }
    }
    let gt = GeoTransform([500_000.0, pixel, 0.0, 6_000_000.0, 0.0, -pixel]);
    let mut img = Image::new(side, side, pixels, gt);
    img.valid = (0..side * side).map(|i| i % side >= side / 8).collect();
    for (p, &ok) in img.pixels.iter_mut().zip(&img.valid) {
        if !ok {
            *p = 0.0;
        }
    }
    img
}

fn main() {
    let side: usize = std::env::args()
        .skip(1)
        .find(|a| !a.starts_with('-'))
        .map(|a| a.parse().expect("the image side, in pixels"))
        .unwrap_or(4000);
    let pixel = 0.05;
    let t = Instant::now();
    let img = synthetic(side, pixel);
    eprintln!(
        "synthetic {side} × {side} image in {:.1} s",
        t.elapsed().as_secs_f64()
    );
    let params = KeypointParams::default();
    let megapixels = (side * side) as f64 / 1e6;
    println!("| feature size | decimation | keypoints (of distinct) | seconds | Mpx/s |");
    println!("|---:|---:|---:|---:|---:|");
    for size in [0.6, params.default_feature_size_m(pixel, 0.25)] {
        let mut best = f64::INFINITY;
        let mut last = None;
        for _ in 0..3 {
            let t = Instant::now();
            let d = detect(&img, size, 1.0, &params).expect("detection");
            best = best.min(t.elapsed().as_secs_f64());
            last = Some(d);
        }
        let d = last.unwrap();
        println!(
            "| {size} m | {} | {} ({}) | {best:.2} | {:.1} |",
            d.decimation,
            d.keypoints.len(),
            d.distinct,
            megapixels / best
        );
    }
}
