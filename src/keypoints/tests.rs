//! Detector tests on analytically rendered scenes.

use super::*;
use crate::image::GeoTransform;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// A Gaussian blob: centre (sample index or map), σ (same units), amplitude.
#[derive(Clone, Copy, Debug)]
struct Blob {
    at: [f64; 2],
    sigma: f64,
    amplitude: f64,
}

/// Samples of `background` plus the blobs, evaluated at each sample's centre in the units the
/// blobs are given in (`to_units` maps a sample index to them).
fn render(
    w: usize,
    h: usize,
    background: impl Fn([f64; 2]) -> f64,
    blobs: &[Blob],
    to_units: impl Fn(f64, f64) -> [f64; 2],
) -> Vec<f32> {
    let mut out = Vec::with_capacity(w * h);
    for r in 0..h {
        for c in 0..w {
            let p = to_units(c as f64, r as f64);
            let mut v = background(p);
            for b in blobs {
                let d2 = (p[0] - b.at[0]).powi(2) + (p[1] - b.at[1]).powi(2);
                if d2 < 36.0 * b.sigma * b.sigma {
                    v += b.amplitude * (-d2 / (2.0 * b.sigma * b.sigma)).exp();
                }
            }
            out.push(v as f32);
        }
    }
    out
}

/// One-metre pixels, north up: sample index and metres coincide up to the half-pixel shift.
fn unit_gt() -> GeoTransform {
    GeoTransform([0.0, 1.0, 0.0, 0.0, 0.0, -1.0])
}

/// Sample-index image of blobs given in sample-index units.
fn image_of(w: usize, h: usize, background: f64, blobs: &[Blob]) -> Image {
    let pixels = render(w, h, |_| background, blobs, |c, r| [c, r]);
    Image::new(w, h, pixels, unit_gt())
}

/// Exact samples: no camera blur.
fn exact() -> KeypointParams {
    KeypointParams {
        input_blur_px: 0.0,
        ..KeypointParams::default()
    }
}

/// The feature size whose band centre is `sigma_centre` samples of one metre.
fn size_for(sigma_centre: f64) -> f64 {
    sigma_centre * 2.0 * std::f64::consts::SQRT_2
}

#[test]
fn the_selected_scale_of_a_gaussian_blob_is_its_sigma() {
    // Lindeberg, "Feature detection with automatic scale selection", IJCV 30(2), 1998: for a
    // Gaussian blob of variance σ², the scale-normalised Laplacian t·∇²L at the centre peaks
    // at t = σ², so the selected σ is the blob's. Several σ, centres off the samples, band
    // centres off the blob's σ; σ = 7 is found on a grid decimated by 2.
    for (i, &sigma) in [2.0, 3.0, 4.5, 7.0].iter().enumerate() {
        for offset in [
            [0.27 + 0.11 * i as f64, 0.62 - 0.19 * i as f64],
            [0.5, -0.31],
        ] {
            let side = (24.0 * sigma) as usize + 20;
            let centre = [side as f64 / 2.0 + offset[0], side as f64 / 2.0 + offset[1]];
            let img = image_of(
                side,
                side,
                0.0,
                &[Blob {
                    at: centre,
                    sigma,
                    amplitude: 1.0,
                }],
            );
            let d = detect(&img, size_for(sigma * 1.13), 1.0, &exact()).unwrap();
            assert_eq!(d.decimation, if sigma > 6.0 { 2 } else { 1 });
            let k = d.keypoints[0];
            let err = (k.sample[0] - centre[0]).hypot(k.sample[1] - centre[1]);
            assert!(
                err <= 0.05,
                "σ {sigma}: found at {:?}, is at {centre:?}",
                k.sample
            );
            assert!(
                (k.sigma_px / sigma - 1.0).abs() < 0.03,
                "σ {sigma}: selected {}",
                k.sigma_px
            );
            assert!(k.is_bright());
            assert_eq!(k.pixel, [k.sample[0] + 0.5, k.sample[1] + 0.5]);
            assert_eq!(k.map, [k.pixel[0], -k.pixel[1]]);
            assert!((k.sigma_m - k.sigma_px).abs() < 1e-12);
        }
    }
}

#[test]
fn bright_and_dark_blobs_keep_their_sign() {
    let blobs = [
        Blob {
            at: [40.4, 50.2],
            sigma: 3.0,
            amplitude: 0.4,
        },
        Blob {
            at: [100.7, 49.6],
            sigma: 3.0,
            amplitude: -0.4,
        },
    ];
    let img = image_of(140, 100, 0.5, &blobs);
    let d = detect(&img, size_for(3.2), 1.0, &exact()).unwrap();
    for b in &blobs {
        let k = d
            .keypoints
            .iter()
            .find(|k| (k.sample[0] - b.at[0]).hypot(k.sample[1] - b.at[1]) < 0.2)
            .unwrap_or_else(|| panic!("no keypoint at {:?}: {:?}", b.at, d.keypoints));
        assert_eq!(k.is_bright(), b.amplitude > 0.0);
        assert!(k.response.abs() >= 0.03);
    }
}

#[test]
fn a_ridge_is_rejected_by_the_edge_test_alone() {
    // An elongated ridge (σ 25 along x, 3 across) has a true extremum at its centre, but its
    // principal curvatures differ by far more than r = 10 allows (Lowe 2004, section 4.1).
    let (w, h) = (220, 100);
    let pixels = render(
        w,
        h,
        |[x, y]| {
            0.2 + 0.6
                * (-((x - 110.3) / 25.0).powi(2) / 2.0 - ((y - 50.4) / 3.0).powi(2) / 2.0).exp()
        },
        &[],
        |c, r| [c, r],
    );
    let img = Image::new(w, h, pixels, unit_gt());
    let size = size_for(4.5);
    let lowe = detect(&img, size, 1.0, &exact()).unwrap();
    assert!(lowe.keypoints.is_empty(), "{:?}", lowe.keypoints);
    let no_edge_test = KeypointParams {
        edge_ratio: 1e9,
        ..exact()
    };
    let all = detect(&img, size, 1.0, &no_edge_test).unwrap();
    assert!(
        all.keypoints
            .iter()
            .any(|k| (k.sample[0] - 110.3).abs() < 2.0 && (k.sample[1] - 50.4).abs() < 1.0),
        "{:?}",
        all.keypoints
    );
}

#[test]
fn a_straight_or_curved_edge_makes_no_keypoint() {
    // A disc of radius 60 samples, far larger than the band: only its edge varies.
    let (w, h) = (200, 200);
    let pixels = render(
        w,
        h,
        |[x, y]| {
            let r = (x - 100.2).hypot(y - 99.7);
            0.3 + 0.4 / (1.0 + ((r - 60.0) / 1.5).exp())
        },
        &[],
        |c, r| [c, r],
    );
    let img = Image::new(w, h, pixels, unit_gt());
    let d = detect(&img, size_for(3.0), 1.0, &exact()).unwrap();
    assert!(d.keypoints.is_empty(), "{:?}", d.keypoints);
    // A straight step across the image.
    let pixels = render(
        w,
        h,
        |[x, _]| if x < 97.0 { 0.2 } else { 0.8 },
        &[],
        |c, r| [c, r],
    );
    let d = detect(
        &Image::new(w, h, pixels, unit_gt()),
        size_for(3.0),
        1.0,
        &exact(),
    )
    .unwrap();
    assert!(d.keypoints.is_empty(), "{:?}", d.keypoints);
}

#[test]
fn a_constant_image_has_no_keypoints() {
    let mut img = image_of(120, 90, 0.7, &[]);
    let d = detect(&img, size_for(3.0), 1.0, &KeypointParams::default()).unwrap();
    assert!(d.keypoints.is_empty() && d.extrema == 0);
    // Nor with a nodata collar (samples 0) around the constant.
    img.valid = (0..120 * 90).map(|i| i % 120 >= 20).collect();
    for (p, &ok) in img.pixels.iter_mut().zip(&img.valid) {
        if !ok {
            *p = 0.0;
        }
    }
    let d = detect(&img, size_for(3.0), 1.0, &KeypointParams::default()).unwrap();
    assert!(d.keypoints.is_empty());
}

#[test]
fn a_blob_whose_filter_support_touches_invalid_samples_is_not_reported() {
    let blob = Blob {
        at: [60.3, 50.6],
        sigma: 3.0,
        amplitude: 0.4,
    };
    let (w, h) = (140, 100);
    let size = size_for(3.2);
    // Invalid samples (a nodata collar holding 0) left of column `edge`.
    let with_collar = |edge: usize| {
        let mut img = image_of(w, h, 0.5, &[blob]);
        img.valid = (0..w * h).map(|i| i % w >= edge).collect();
        for (p, &ok) in img.pixels.iter_mut().zip(&img.valid) {
            if !ok {
                *p = 0.0;
            }
        }
        detect(&img, size, 1.0, &exact()).unwrap()
    };
    let near_blob = |d: &Detection| d.keypoints.iter().any(|k| (k.sample[0] - 60.3).abs() < 1.0);
    // Far from the collar: found, and the collar's edge makes no keypoint of its own.
    let far = with_collar(10);
    assert!(near_blob(&far), "{:?}", far.keypoints);
    assert_eq!(far.keypoints.len(), 1, "{:?}", far.keypoints);
    // Eight samples from the collar, inside the blob's filter support (3 σ of the level above
    // and more): not reported, and nothing else either.
    let near = with_collar(52);
    assert!(near.keypoints.is_empty(), "{:?}", near.keypoints);
    // The mask alone decides: the same samples (the collar holding the background) are
    // reported when valid and refused when not.
    let mut img = image_of(w, h, 0.5, &[blob]);
    let d = detect(&img, size, 1.0, &exact()).unwrap();
    assert!(near_blob(&d), "{:?}", d.keypoints);
    img.valid = (0..w * h).map(|i| i % w >= 52).collect();
    assert!(detect(&img, size, 1.0, &exact())
        .unwrap()
        .keypoints
        .is_empty());
    // Just outside the support it is found again: the refusal is no wider than the support
    // (3 σ of the level above the blob's, plus the finite differences).
    img.valid = (0..w * h).map(|i| i % w >= 60 - 20).collect();
    let d = detect(&img, size, 1.0, &exact()).unwrap();
    assert!(near_blob(&d), "{:?}", d.keypoints);
}

#[test]
fn the_same_scene_at_3_cm_and_25_cm_gives_keypoints_at_the_same_map_positions() {
    // 40 m × 40 m of ground, blobs of σ 0.55-1.4 m, rendered exactly at each sample's centre
    // for a 3 cm mosaic and a 25 cm orthophoto (grids not aligned), default feature size.
    let mut rng = ChaCha8Rng::seed_from_u64(20261202);
    let (x0, y0, side) = (500_000.0, 6_000_040.0, 40.0);
    let mut blobs: Vec<Blob> = Vec::new();
    while blobs.len() < 40 {
        let at = [
            x0 + rng.gen_range(5.0..side - 5.0),
            y0 - rng.gen_range(5.0..side - 5.0),
        ];
        if blobs
            .iter()
            .all(|b| (b.at[0] - at[0]).hypot(b.at[1] - at[1]) > 4.0)
        {
            let sign = if rng.gen_bool(0.5) { 1.0 } else { -1.0 };
            blobs.push(Blob {
                at,
                sigma: rng.gen_range(0.55..1.4),
                amplitude: sign * rng.gen_range(0.3..1.0),
            });
        }
    }
    let background = |[x, y]: [f64; 2]| 0.5 + 0.004 * (x - x0) - 0.002 * (y0 - y);
    let survey = |pixel: f64, shift: f64| {
        let gt = GeoTransform([x0 + shift, pixel, 0.0, y0 - shift, 0.0, -pixel]);
        let n = ((side - shift) / pixel) as usize;
        let pixels = render(n, n, background, &blobs, |c, r| gt.sample_to_map(c, r));
        Image::new(n, n, pixels, gt)
    };
    let (fine, coarse) = (survey(0.03, 0.011), survey(0.25, 0.0));
    let params = KeypointParams::default();
    let size = params.default_feature_size_m(0.03, 0.25);
    assert_eq!(size, 2.5);
    let a = detect(&fine, size, 1.0, &params).unwrap();
    let b = detect(&coarse, size, 1.0, &params).unwrap();
    assert!(
        a.decimation > 1 && b.decimation == 1,
        "{} {}",
        a.decimation,
        b.decimation
    );
    let nearest = |d: &Detection, p: [f64; 2]| {
        d.keypoints
            .iter()
            .min_by(|u, v| {
                let du = (u.map[0] - p[0]).hypot(u.map[1] - p[1]);
                let dv = (v.map[0] - p[0]).hypot(v.map[1] - p[1]);
                du.total_cmp(&dv)
            })
            .copied()
            .filter(|k| (k.map[0] - p[0]).hypot(k.map[1] - p[1]) < 0.5)
    };
    let mut both = 0;
    let mut agree = 0;
    for blob in &blobs {
        if let (Some(ka), Some(kb)) = (nearest(&a, blob.at), nearest(&b, blob.at)) {
            both += 1;
            let apart = (ka.map[0] - kb.map[0]).hypot(ka.map[1] - kb.map[1]);
            // Within a fifth of the coarse pixel (5 cm), same sign, σ within 10 %.
            if apart < 0.25 / 5.0
                && ka.is_bright() == kb.is_bright()
                && (ka.sigma_m / kb.sigma_m - 1.0).abs() < 0.1
            {
                agree += 1;
            }
        }
    }
    assert!(both >= 32, "{both} of 40 blobs found in both");
    assert!(agree >= 30, "{agree} of {both} agree");
}

#[test]
fn the_default_feature_size_is_ten_coarse_pixels() {
    let p = KeypointParams::default();
    assert_eq!(p.default_feature_size_m(0.03, 0.25), 2.5);
    assert_eq!(p.default_feature_size_m(0.5, 0.1), 5.0);
    assert_eq!(p.feature_size_for(0.03, 0.25), 2.5);
    let given = KeypointParams {
        feature_size_m: Some(1.2),
        ..p.clone()
    };
    assert_eq!(given.feature_size_for(0.03, 0.25), 1.2);
    // Two octaves either side need a larger feature: ⌈1.6 · 2√2 · 4⌉ = 19 pixels.
    let wide = KeypointParams {
        octaves_either_side: 2,
        ..p
    };
    assert_eq!(wide.default_feature_size_m(0.1, 0.1), 19.0 * 0.1);
}

#[test]
fn options_and_scales_out_of_range_are_refused_with_their_key() {
    let img = image_of(64, 64, 0.5, &[]);
    let bad = KeypointParams {
        edge_ratio: 0.5,
        ..KeypointParams::default()
    };
    let e = detect(&img, 10.0, 1.0, &bad).unwrap_err();
    assert!(e.to_string().contains("keypoints.edge_ratio"), "{e}");
    let bad = KeypointParams {
        target_count: 0,
        ..KeypointParams::default()
    };
    assert!(bad
        .validate()
        .unwrap_err()
        .to_string()
        .contains("keypoints.target_count"));
    // One-metre pixels: a 4 m feature has σ_lo = 0.71 pixels, finer than the pixels.
    let e = detect(&img, 4.0, 1.0, &KeypointParams::default()).unwrap_err();
    match &e {
        KeypointError::FeatureTooSmall { smallest_m, .. } => {
            assert!((smallest_m - 4.0 * std::f64::consts::SQRT_2).abs() < 1e-9)
        }
        other => panic!("{other}"),
    }
    assert!(e.to_string().contains("keypoints.feature_size_m"));
    let flat = Image::new(4, 4, vec![0.0; 16], GeoTransform([0.0; 6]));
    assert!(matches!(
        detect(&flat, 10.0, 1.0, &KeypointParams::default()),
        Err(KeypointError::NoPixelSize { .. })
    ));
}
