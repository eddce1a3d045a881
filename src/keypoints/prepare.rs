//! The grid the detector works on: decimated, normalised, with its validity.
//!
//! **In:** an [`Image`] and an integer decimation factor. **Out:** a [`Grid`]: each `k × k`
//! block of valid samples averaged into one (a block with any invalid sample is invalid),
//! intensities mapped robustly to [0, 1] (the 1st and 99th percentiles of the valid samples
//! go to 0 and 1; values beyond are kept, not clipped), invalid samples filled with the median
//! so that they ring as little as possible, and a summed-area table of the invalid samples
//! that answers "does this window touch an invalid sample or leave the grid?" at once.

use crate::image::Image;

/// Percentiles of the valid samples that become 0 and 1 (common practice).
pub const PERCENTILES: (f64, f64) = (0.01, 0.99);

/// Valid samples read for the percentiles: an even subsample of at most this many.
const PERCENTILE_SAMPLES: usize = 1 << 20;

/// A decimated, normalised grid with its validity.
#[derive(Debug, Clone)]
pub struct Grid {
    /// Columns.
    pub width: usize,
    /// Rows.
    pub height: usize,
    /// Normalised samples, row-major.
    pub values: Vec<f32>,
    /// Summed-area table of invalid samples, `(width + 1) × (height + 1)`.
    invalid_sums: Vec<u32>,
    /// The intensity that became 0 and the one that became 1 (input units); equal when the
    /// valid samples are all the same.
    pub range: (f64, f64),
    /// Valid samples in the grid.
    pub valid_count: usize,
}

impl Grid {
    /// Decimates `image` by `factor` (block means) and normalises it.
    pub fn new(image: &Image, factor: usize) -> Grid {
        let factor = factor.max(1);
        let (width, height) = (image.width / factor, image.height / factor);
        let mut values = vec![0f32; width * height];
        let mut valid = vec![false; width * height];
        let all_valid = image.valid.is_empty();
        let inv = 1.0 / (factor * factor) as f64;
        for r in 0..height {
            for c in 0..width {
                let mut sum = 0.0f64;
                let mut ok = true;
                'block: for rr in r * factor..(r + 1) * factor {
                    let row = rr * image.width;
                    for cc in c * factor..(c + 1) * factor {
                        if !all_valid && !image.valid[row + cc] {
                            ok = false;
                            break 'block;
                        }
                        let v = image.pixels[row + cc];
                        if !v.is_finite() {
                            ok = false;
                            break 'block;
                        }
                        sum += f64::from(v);
                    }
                }
                if ok {
                    values[r * width + c] = (sum * inv) as f32;
                    valid[r * width + c] = true;
                }
            }
        }
        let valid_count = valid.iter().filter(|&&v| v).count();
        let (lo, hi, median) = percentiles(&values, &valid, valid_count);
        let scale = if hi > lo { 1.0 / (hi - lo) } else { 0.0 };
        let fill = ((median - lo) * scale) as f32;
        for (v, &ok) in values.iter_mut().zip(&valid) {
            *v = if ok {
                ((f64::from(*v) - lo) * scale) as f32
            } else {
                fill
            };
        }
        let mut invalid_sums = vec![0u32; (width + 1) * (height + 1)];
        for r in 0..height {
            let mut row_sum = 0u32;
            for c in 0..width {
                row_sum += u32::from(!valid[r * width + c]);
                invalid_sums[(r + 1) * (width + 1) + c + 1] =
                    invalid_sums[r * (width + 1) + c + 1] + row_sum;
            }
        }
        Grid {
            width,
            height,
            values,
            invalid_sums,
            range: (lo, hi),
            valid_count,
        }
    }

    /// True when the square of half-width `half` around sample (c, r) lies inside the grid and
    /// holds valid samples only.
    pub fn window_is_valid(&self, c: usize, r: usize, half: usize) -> bool {
        if c < half || r < half || c + half >= self.width || r + half >= self.height {
            return false;
        }
        let w = self.width + 1;
        let (c0, r0, c1, r1) = (c - half, r - half, c + half + 1, r + half + 1);
        let s = &self.invalid_sums;
        s[r1 * w + c1] + s[r0 * w + c0] == s[r0 * w + c1] + s[r1 * w + c0]
    }
}

/// The low and high percentiles and the median of the valid samples (on an even subsample),
/// with the minimum and maximum standing in when the two percentiles are equal (an image of a
/// flat background with a few small features).
fn percentiles(values: &[f32], valid: &[bool], valid_count: usize) -> (f64, f64, f64) {
    if valid_count == 0 {
        return (0.0, 0.0, 0.0);
    }
    let stride = valid_count.div_ceil(PERCENTILE_SAMPLES);
    let mut sample: Vec<f32> = values
        .iter()
        .zip(valid)
        .filter(|(_, &ok)| ok)
        .map(|(&v, _)| v)
        .step_by(stride)
        .collect();
    let n = sample.len();
    let mut at = |q: f64| {
        let i = ((n - 1) as f64 * q).round() as usize;
        *sample.select_nth_unstable_by(i, f32::total_cmp).1 as f64
    };
    let (lo, hi, median) = (at(PERCENTILES.0), at(PERCENTILES.1), at(0.5));
    if hi > lo {
        return (lo, hi, median);
    }
    let (min, max) = sample
        .iter()
        .fold((f32::INFINITY, f32::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    (f64::from(min), f64::from(max), median)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::image::GeoTransform;

    fn gt() -> GeoTransform {
        GeoTransform([0.0, 1.0, 0.0, 0.0, 0.0, -1.0])
    }

    #[test]
    fn decimation_averages_blocks_and_drops_blocks_with_invalid_samples() {
        let (w, h) = (7, 4);
        let pixels: Vec<f32> = (0..w * h).map(|i| i as f32).collect();
        let mut img = Image::new(w, h, pixels, gt());
        img.valid = vec![true; w * h];
        img.valid[3 * w + 5] = false; // in block (2, 1)
        let g = Grid::new(&img, 2);
        assert_eq!((g.width, g.height), (3, 2));
        assert_eq!(g.valid_count, 5);
        // Block (0, 0) = mean of 0, 1, 7, 8 = 4; block (1, 1) = mean of 16, 17, 23, 24 = 20.
        let (lo, hi) = g.range;
        let raw = |v: f32| lo + f64::from(v) * (hi - lo);
        assert!((raw(g.values[0]) - 4.0).abs() < 1e-4);
        assert!((raw(g.values[4]) - 20.0).abs() < 1e-4);
        assert!(g.window_is_valid(1, 0, 0));
        assert!(!g.window_is_valid(2, 1, 0));
        assert!(!g.window_is_valid(1, 1, 1)); // touches the edge of the grid
    }

    #[test]
    fn percentiles_map_to_zero_and_one() {
        // 0..1000: the 1st and 99th percentiles are about 10 and 989.
        let img = Image::new(1000, 1, (0..1000).map(|i| i as f32).collect(), gt());
        let g = Grid::new(&img, 1);
        assert!((g.range.0 - 10.0).abs() <= 1.0 && (g.range.1 - 989.0).abs() <= 1.0);
        assert!(g.values[0] < 0.0 && g.values[999] > 1.0);
        // A flat background with one bright sample: min and max stand in.
        let mut p = vec![5.0f32; 1000];
        p[400] = 9.0;
        let g = Grid::new(&Image::new(1000, 1, p, gt()), 1);
        assert_eq!(g.range, (5.0, 9.0));
        assert_eq!(g.values[400], 1.0);
    }
}
