//! The separable Gaussian filter of the scale space.
//!
//! **In:** a row-major `f32` grid, σ in samples. **Out:** the grid convolved with a sampled
//! Gaussian truncated at [`TRUNCATION`] σ, edges continued by their last sample (clamp).
//!
//! Written here rather than taken from an image crate: the detector works on `f32` grids of
//! its own (normalised, decimated, with a validity mask beside them) and needs the exact
//! support of every kernel to keep keypoints off invalid samples; an image crate would mean
//! conversions to and from its image types and a support it does not state. Both passes are
//! sums of shifted, contiguous slices (the compiler vectorises them); the vertical one runs on
//! strips of columns so that the rows under the kernel stay in the cache; rows (and blocks of
//! rows) are shared between the cores with rayon; the caller keeps the buffers from one scale
//! to the next.

use rayon::prelude::*;

/// Kernels are truncated at this many σ (weight outside ±3σ: 0.27 % in one dimension; common
/// practice).
pub const TRUNCATION: f64 = 3.0;

/// The half kernel of a sampled Gaussian of standard deviation `sigma` samples: `[w0, w1, …,
/// wR]` with R = ⌈3σ⌉, normalised so that w0 + 2·Σ wj = 1. σ ≤ 0 gives the identity `[1]`.
pub fn half_kernel(sigma: f64) -> Vec<f32> {
    if sigma <= 0.0 || !sigma.is_finite() {
        return vec![1.0];
    }
    let radius = (TRUNCATION * sigma).ceil() as usize;
    let w: Vec<f64> = (0..=radius)
        .map(|j| (-((j * j) as f64) / (2.0 * sigma * sigma)).exp())
        .collect();
    let total = w[0] + 2.0 * w[1..].iter().sum::<f64>();
    w.iter().map(|v| (v / total) as f32).collect()
}

/// Convolves `src` (`width × height`, row-major) with the symmetric kernel `half` in x and
/// then in y, into `out`; `tmp` holds the intermediate. Both buffers are resized as needed, so
/// the caller can keep them from one call to the next.
pub fn blur(
    src: &[f32],
    width: usize,
    height: usize,
    half: &[f32],
    tmp: &mut Vec<f32>,
    out: &mut Vec<f32>,
) {
    assert_eq!(src.len(), width * height, "grid size");
    tmp.resize(width * height, 0.0);
    out.resize(width * height, 0.0);
    if width == 0 || height == 0 {
        return;
    }
    let r = half.len() - 1;
    // x: each row padded by its edge samples, then a sum of shifted slices.
    tmp.par_chunks_mut(width).enumerate().for_each_init(
        || vec![0f32; width + 2 * r],
        |pad, (y, row)| {
            let line = &src[y * width..(y + 1) * width];
            pad[..r].fill(line[0]);
            pad[r..r + width].copy_from_slice(line);
            pad[r + width..].fill(line[width - 1]);
            for (o, &v) in row.iter_mut().zip(&pad[r..r + width]) {
                *o = half[0] * v;
            }
            for (j, &wj) in half.iter().enumerate().skip(1) {
                let left = &pad[r - j..r - j + width];
                let right = &pad[r + j..r + j + width];
                for ((o, &a), &b) in row.iter_mut().zip(left).zip(right) {
                    *o += wj * (a + b);
                }
            }
        },
    );
    // y: each output row a weighted sum of whole rows of the intermediate, done in blocks of
    // rows and strips of columns so that the rows a strip reads stay in the cache.
    let tmp = &tmp[..];
    let line = |y: isize, x0: usize, x1: usize| {
        let y = y.clamp(0, height as isize - 1) as usize;
        &tmp[y * width + x0..y * width + x1]
    };
    out.par_chunks_mut(width * ROWS)
        .enumerate()
        .for_each(|(b, block)| {
            for x0 in (0..width).step_by(STRIP) {
                let x1 = (x0 + STRIP).min(width);
                for (k, row) in block.chunks_mut(width).enumerate() {
                    let y = (b * ROWS + k) as isize;
                    let row = &mut row[x0..x1];
                    for (o, &v) in row.iter_mut().zip(line(y, x0, x1)) {
                        *o = half[0] * v;
                    }
                    for (j, &wj) in half.iter().enumerate().skip(1) {
                        let above = line(y - j as isize, x0, x1);
                        let below = line(y + j as isize, x0, x1);
                        for ((o, &a), &b) in row.iter_mut().zip(above).zip(below) {
                            *o += wj * (a + b);
                        }
                    }
                }
            }
        });
}

/// Rows of one block of the vertical pass (one task for rayon).
const ROWS: usize = 32;

/// Columns of one strip of the vertical pass: 512 samples, so that the rows under a kernel
/// (up to about a hundred) fit in a core's cache.
const STRIP: usize = 512;

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    #[test]
    fn blur_of_a_wide_image_equals_two_plain_one_dimensional_passes() {
        // Wider than a strip and taller than a block: every seam of the vertical pass.
        let (w, h) = (1100, 70);
        let mut rng = ChaCha8Rng::seed_from_u64(6);
        let src: Vec<f32> = (0..w * h).map(|_| rng.gen_range(-1.0..1.0)).collect();
        let half = half_kernel(4.2);
        let r = half.len() as isize - 1;
        let at = |v: &[f64], x: isize, y: isize| {
            v[(y.clamp(0, h as isize - 1) as usize) * w + x.clamp(0, w as isize - 1) as usize]
        };
        let src64: Vec<f64> = src.iter().map(|&v| v as f64).collect();
        let pass = |v: &[f64], dx: isize, dy: isize| -> Vec<f64> {
            (0..w * h)
                .map(|i| {
                    let (x, y) = ((i % w) as isize, (i / w) as isize);
                    (-r..=r)
                        .map(|j| half[j.unsigned_abs()] as f64 * at(v, x + j * dx, y + j * dy))
                        .sum()
                })
                .collect()
        };
        let want = pass(&pass(&src64, 1, 0), 0, 1);
        let (mut tmp, mut out) = (Vec::new(), Vec::new());
        blur(&src, w, h, &half, &mut tmp, &mut out);
        for (i, (&got, &want)) in out.iter().zip(&want).enumerate() {
            assert!(
                (got as f64 - want).abs() < 1e-5,
                "sample {i}: {got} vs {want}"
            );
        }
    }

    #[test]
    fn kernel_sums_to_one_and_has_the_stated_support() {
        for sigma in [0.6, 1.0, 1.6, 2.5, 7.3] {
            let h = half_kernel(sigma);
            assert_eq!(h.len() - 1, (3.0 * sigma).ceil() as usize);
            let sum = h[0] as f64 + 2.0 * h[1..].iter().map(|&v| v as f64).sum::<f64>();
            assert!((sum - 1.0).abs() < 1e-6, "{sigma}: {sum}");
            // Its second moment is σ² up to the truncation and the sampling.
            let var: f64 = h
                .iter()
                .enumerate()
                .map(|(j, &v)| 2.0 * (j * j) as f64 * v as f64)
                .sum();
            assert!((var.sqrt() / sigma - 1.0).abs() < 0.03, "{sigma}: {var}");
        }
        assert_eq!(half_kernel(0.0), vec![1.0]);
    }

    #[test]
    fn blur_equals_a_direct_two_dimensional_convolution() {
        // Oracle: the 2-D sum over the outer product of the kernel, edges clamped.
        let (w, h) = (23, 17);
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let src: Vec<f32> = (0..w * h).map(|_| rng.gen_range(-1.0..1.0)).collect();
        let half = half_kernel(1.7);
        let r = half.len() as isize - 1;
        let k = |j: isize| half[j.unsigned_abs()] as f64;
        let (mut tmp, mut out) = (Vec::new(), Vec::new());
        blur(&src, w, h, &half, &mut tmp, &mut out);
        for y in 0..h as isize {
            for x in 0..w as isize {
                let mut s = 0.0;
                for dy in -r..=r {
                    for dx in -r..=r {
                        let xx = (x + dx).clamp(0, w as isize - 1) as usize;
                        let yy = (y + dy).clamp(0, h as isize - 1) as usize;
                        s += k(dx) * k(dy) * src[yy * w + xx] as f64;
                    }
                }
                let got = out[y as usize * w + x as usize] as f64;
                assert!((got - s).abs() < 1e-5, "({x}, {y}): {got} vs {s}");
            }
        }
        // A constant stays constant.
        let flat = vec![0.25f32; w * h];
        blur(&flat, w, h, &half, &mut tmp, &mut out);
        assert!(out.iter().all(|&v| (v - 0.25).abs() < 1e-6));
    }
}
