//! Correlation surfaces: how well a reference patch matches a resampled target window at each
//! whole-sample shift.
//!
//! **In:** the reference patch and the target window, both on the reference's grid, with a
//! one-sample margin (for gradients): the reference `(p + 2)²`, the target `(p + 2s + 2)²`
//! (p = patch side, s = search radius). **Out:** a [`Surface`] of `(2s + 1)²` values, where
//! the value at shift (dx, dy) compares the reference at u with the target at u + (dx, dy).
//!
//! Five measures ([`Measure`]): zero-mean normalised cross-correlation of the intensities
//! (Lewis 1995; computed directly, normalised at each shift), the same of the gradient vectors,
//! phase correlation (Kuglin & Hines 1975; Hann-windowed p × p windows), orientation
//! correlation (Fitch, Kadyrov, Christmas & Kittler, BMVC 2002: the correlation of the unit
//! gradient directions, sgn(∂I/∂x + i·∂I/∂y)), and the same of the doubled angles (blind to a
//! reversal of contrast). The FFT measures (phase, both orientations) compare the central
//! p × p of the target window with the reference patch, cyclically; the direct ones slide the
//! p × p reference over the larger target window.

use rustfft::num_complex::Complex64;
use rustfft::{Fft, FftPlanner};
use serde::{Deserialize, Serialize};
use std::sync::Arc;

/// How a reference patch and a target window are compared.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Measure {
    /// Zero-mean normalised cross-correlation of the intensities, in [−1, 1].
    Intensity,
    /// Zero-mean normalised cross-correlation of the gradient vectors (∂I/∂x, ∂I/∂y), in [−1, 1].
    Gradient,
    /// Phase correlation of the Hann-windowed intensities: the inverse transform of the
    /// whitened cross-power spectrum, in [−1, 1] (1 for a pure whole-sample shift).
    Phase,
    /// Orientation correlation (Fitch et al. 2002): the mean cosine of the angle between the
    /// gradient directions at corresponding samples, in [−1, 1].
    Orientation,
    /// Orientation correlation of the doubled gradient angles (sgn(g)², g = ∂I/∂x + i·∂I/∂y):
    /// the mean cosine of twice the angle between the gradient directions, in [−1, 1]. Blind to
    /// the sign of the gradient, so an edge whose contrast is reversed between the two images
    /// (vegetation against soil in red and near infrared) still counts.
    AxialOrientation,
}

impl Measure {
    /// Every measure, in the order the module doc's table lists them.
    pub const ALL: [Measure; 5] = [
        Measure::Intensity,
        Measure::Gradient,
        Measure::Phase,
        Measure::Orientation,
        Measure::AxialOrientation,
    ];

    /// The name used in pipeline files and reports.
    pub fn name(self) -> &'static str {
        match self {
            Measure::Intensity => "intensity",
            Measure::Gradient => "gradient",
            Measure::Phase => "phase",
            Measure::Orientation => "orientation",
            Measure::AxialOrientation => "axial-orientation",
        }
    }
}

/// A correlation surface over whole-sample shifts −s..=s on both axes, row by row (dy outer).
#[derive(Debug, Clone, PartialEq)]
pub struct Surface {
    /// The search radius s.
    pub radius: usize,
    /// `(2s + 1)²` values; the value for shift (dx, dy) is at `(dy + s)·(2s + 1) + dx + s`.
    pub values: Vec<f64>,
}

impl Surface {
    /// The side 2s + 1.
    pub fn side(&self) -> usize {
        2 * self.radius + 1
    }

    /// The value at shift (dx, dy); `None` outside the search range.
    pub fn at(&self, dx: i64, dy: i64) -> Option<f64> {
        let s = self.radius as i64;
        if dx.abs() > s || dy.abs() > s {
            return None;
        }
        Some(self.values[((dy + s) * (2 * s + 1) + dx + s) as usize])
    }
}

/// Central-difference gradients of the interior of an `n × n` grid (row-major): `(n − 2)²`
/// pairs (∂/∂x, ∂/∂y).
fn gradients(grid: &[f64], n: usize) -> Vec<[f64; 2]> {
    let m = n - 2;
    let mut out = Vec::with_capacity(m * m);
    for r in 1..n - 1 {
        for c in 1..n - 1 {
            out.push([
                0.5 * (grid[r * n + c + 1] - grid[r * n + c - 1]),
                0.5 * (grid[(r + 1) * n + c] - grid[(r - 1) * n + c]),
            ]);
        }
    }
    out
}

/// The interior `(n − 2)²` of an `n × n` grid.
fn interior(grid: &[f64], n: usize) -> Vec<f64> {
    let mut out = Vec::with_capacity((n - 2) * (n - 2));
    for r in 1..n - 1 {
        out.extend_from_slice(&grid[r * n + 1..r * n + n - 1]);
    }
    out
}

/// The `p × p` block at (offset, offset) of a `n × n` grid.
fn centre<T: Copy>(grid: &[T], n: usize, offset: usize, p: usize) -> Vec<T> {
    let mut out = Vec::with_capacity(p * p);
    for r in offset..offset + p {
        out.extend_from_slice(&grid[r * n + offset..r * n + offset + p]);
    }
    out
}

/// Zero-mean normalised correlation of a `p × p` template of `K`-vectors against every `p × p`
/// window of a `q × q` search grid (q = p + 2s), at shifts −s..=s. A shift where the window
/// (or the template) has no variance gets 0.
fn zncc<const K: usize>(template: &[[f64; K]], search: &[[f64; K]], p: usize, s: usize) -> Surface {
    let q = p + 2 * s;
    let n = (p * p) as f64;
    let mut mean_t = [0.0; K];
    for v in template {
        for k in 0..K {
            mean_t[k] += v[k] / n;
        }
    }
    let centred: Vec<[f64; K]> = template
        .iter()
        .map(|v| std::array::from_fn(|k| v[k] - mean_t[k]))
        .collect();
    let norm_t: f64 = centred
        .iter()
        .map(|v| v.iter().map(|x| x * x).sum::<f64>())
        .sum();
    let side = 2 * s + 1;
    let mut values = vec![0.0; side * side];
    for oy in 0..side {
        for ox in 0..side {
            // Σ t'·w = Σ t'·(w − w̄) because Σ t' = 0; the window's variance needs Σw, Σw².
            let (mut cross, mut sum, mut sum2) = (0.0, [0.0; K], 0.0);
            for r in 0..p {
                let trow = &centred[r * p..(r + 1) * p];
                let wrow = &search[(r + oy) * q + ox..(r + oy) * q + ox + p];
                for (t, w) in trow.iter().zip(wrow) {
                    for k in 0..K {
                        cross += t[k] * w[k];
                        sum[k] += w[k];
                        sum2 += w[k] * w[k];
                    }
                }
            }
            let norm_w = sum2 - sum.iter().map(|x| x * x / n).sum::<f64>();
            let denom = (norm_t * norm_w).sqrt();
            values[oy * side + ox] = if denom > 1e-12 * (1.0 + sum2) {
                cross / denom
            } else {
                0.0
            };
        }
    }
    Surface { radius: s, values }
}

/// Computes correlation surfaces for one patch size, reusing its FFT plans and buffers. One a
/// thread.
pub struct Correlator {
    p: usize,
    forward: Arc<dyn Fft<f64>>,
    inverse: Arc<dyn Fft<f64>>,
    hann: Vec<f64>,
    a: Vec<Complex64>,
    b: Vec<Complex64>,
    scratch: Vec<Complex64>,
    transposed: Vec<Complex64>,
}

impl std::fmt::Debug for Correlator {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Correlator").field("p", &self.p).finish()
    }
}

impl Correlator {
    /// Plans the FFTs of side `p` (the patch side).
    pub fn new(p: usize) -> Correlator {
        let mut planner = FftPlanner::new();
        let forward = planner.plan_fft_forward(p);
        let inverse = planner.plan_fft_inverse(p);
        let scratch_len = forward
            .get_inplace_scratch_len()
            .max(inverse.get_inplace_scratch_len());
        let w: Vec<f64> = (0..p)
            .map(|i| 0.5 - 0.5 * (2.0 * std::f64::consts::PI * (i as f64 + 0.5) / p as f64).cos())
            .collect();
        let hann = (0..p * p).map(|i| w[i % p] * w[i / p]).collect();
        Correlator {
            p,
            forward,
            inverse,
            hann,
            a: vec![Complex64::default(); p * p],
            b: vec![Complex64::default(); p * p],
            scratch: vec![Complex64::default(); scratch_len],
            transposed: vec![Complex64::default(); p * p],
        }
    }

    /// The patch side these plans are for.
    pub fn patch(&self) -> usize {
        self.p
    }

    /// In-place 2-D transform of a `p × p` buffer: rows, transpose, rows, transpose.
    fn fft2(
        plan: &Arc<dyn Fft<f64>>,
        buf: &mut [Complex64],
        scratch: &mut [Complex64],
        t: &mut [Complex64],
        p: usize,
    ) {
        plan.process_with_scratch(buf, scratch);
        for r in 0..p {
            for c in 0..p {
                t[c * p + r] = buf[r * p + c];
            }
        }
        plan.process_with_scratch(t, scratch);
        for r in 0..p {
            for c in 0..p {
                buf[c * p + r] = t[r * p + c];
            }
        }
    }

    /// The surface of `measure` for a reference patch `(p + 2)²` and a target window
    /// `(p + 2s + 2)²` (row-major, on the reference grid, see the module doc).
    pub fn surface(
        &mut self,
        measure: Measure,
        reference: &[f64],
        target: &[f64],
        s: usize,
    ) -> Surface {
        let p = self.p;
        let (nr, nt) = (p + 2, p + 2 * s + 2);
        debug_assert_eq!(reference.len(), nr * nr);
        debug_assert_eq!(target.len(), nt * nt);
        match measure {
            Measure::Intensity => {
                let t: Vec<[f64; 1]> = interior(reference, nr).into_iter().map(|v| [v]).collect();
                let w: Vec<[f64; 1]> = interior(target, nt).into_iter().map(|v| [v]).collect();
                zncc(&t, &w, p, s)
            }
            Measure::Gradient => zncc(&gradients(reference, nr), &gradients(target, nt), p, s),
            Measure::Phase => {
                let t = interior(reference, nr);
                let w = centre(&interior(target, nt), p + 2 * s, s, p);
                let (mt, mw) = (mean(&t), mean(&w));
                for i in 0..p * p {
                    self.a[i] = Complex64::new((t[i] - mt) * self.hann[i], 0.0);
                    self.b[i] = Complex64::new((w[i] - mw) * self.hann[i], 0.0);
                }
                self.cross_power(true);
                self.read_surface(s, 1.0 / (p * p) as f64)
            }
            Measure::Orientation | Measure::AxialOrientation => {
                let t = gradients(reference, nr);
                let w = centre(&gradients(target, nt), p + 2 * s, s, p);
                let axial = measure == Measure::AxialOrientation;
                let f = |g| if axial { unit(g) * unit(g) } else { unit(g) };
                for i in 0..p * p {
                    self.a[i] = f(t[i]);
                    self.b[i] = f(w[i]);
                }
                self.cross_power(false);
                // The unnormalised inverse transform gives p² times the cyclic correlation, a sum
                // over p² samples: divide by p⁴ for the mean cosine.
                self.read_surface(s, 1.0 / ((p * p) as f64).powi(2))
            }
        }
    }

    /// `a` ← IFFT(conj(FFT a) · FFT b), whitened (divided by its modulus) when `whiten`.
    fn cross_power(&mut self, whiten: bool) {
        let p = self.p;
        Self::fft2(
            &self.forward,
            &mut self.a,
            &mut self.scratch,
            &mut self.transposed,
            p,
        );
        Self::fft2(
            &self.forward,
            &mut self.b,
            &mut self.scratch,
            &mut self.transposed,
            p,
        );
        for (x, y) in self.a.iter_mut().zip(&self.b) {
            let c = x.conj() * y;
            *x = if whiten {
                let m = c.norm();
                if m > 1e-300 {
                    c / m
                } else {
                    Complex64::default()
                }
            } else {
                c
            };
        }
        Self::fft2(
            &self.inverse,
            &mut self.a,
            &mut self.scratch,
            &mut self.transposed,
            p,
        );
    }

    /// The real part of `a` at cyclic shifts −s..=s, scaled.
    fn read_surface(&self, s: usize, scale: f64) -> Surface {
        let p = self.p as i64;
        let side = 2 * s + 1;
        let mut values = Vec::with_capacity(side * side);
        for dy in -(s as i64)..=s as i64 {
            for dx in -(s as i64)..=s as i64 {
                let (c, r) = (dx.rem_euclid(p) as usize, dy.rem_euclid(p) as usize);
                values.push(self.a[r * self.p + c].re * scale);
            }
        }
        Surface { radius: s, values }
    }
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

/// sgn(gx + i·gy): the unit gradient direction, 0 where there is no gradient.
#[inline]
fn unit(g: [f64; 2]) -> Complex64 {
    let m = g[0].hypot(g[1]);
    if m > 1e-12 {
        Complex64::new(g[0] / m, g[1] / m)
    } else {
        Complex64::default()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    /// A random smooth field on an n × n grid and the same shifted by whole samples (dx, dy):
    /// `shifted[u] = base[u + (dx, dy)]`.
    fn pair(p: usize, s: usize, dx: i64, dy: i64) -> (Vec<f64>, Vec<f64>) {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        let big = p + 2 * s + 40;
        let noise: Vec<f64> = (0..big * big).map(|_| rng.gen_range(0.0..1.0)).collect();
        // Box-smooth once so gradients are meaningful.
        let f = |c: i64, r: i64| {
            let mut v = 0.0;
            for j in -1..=1 {
                for i in -1..=1 {
                    v += noise[((r + j) as usize) * big + (c + i) as usize];
                }
            }
            v
        };
        let (nr, nt) = (p + 2, p + 2 * s + 2);
        let o = 20i64;
        let reference = (0..nr * nr)
            .map(|k| {
                f(
                    o + s as i64 + (k % nr) as i64,
                    o + s as i64 + (k / nr) as i64,
                )
            })
            .collect();
        let target = (0..nt * nt)
            .map(|k| f(o + (k % nt) as i64 - dx, o + (k / nt) as i64 - dy))
            .collect();
        (reference, target)
    }

    #[test]
    fn every_measure_peaks_at_the_whole_sample_shift() {
        // The target window shows the reference content moved by (+3, −2): the reference at u
        // is the target at u + (3, −2).
        let (p, s) = (32, 5);
        let (reference, target) = pair(p, s, 3, -2);
        let mut corr = Correlator::new(p);
        for m in Measure::ALL {
            let surf = corr.surface(m, &reference, &target, s);
            let best = (0..surf.values.len())
                .max_by(|&i, &j| surf.values[i].total_cmp(&surf.values[j]))
                .unwrap();
            let side = surf.side() as i64;
            let (dx, dy) = (best as i64 % side - s as i64, best as i64 / side - s as i64);
            assert_eq!((dx, dy), (3, -2), "{m:?}");
            let peak = surf.values[best];
            assert!(peak > 0.3 && peak <= 1.0 + 1e-9, "{m:?} peak {peak}");
        }
        // The direct measures are exactly 1 at a pure shift.
        let surf = corr.surface(Measure::Intensity, &reference, &target, s);
        assert!((surf.at(3, -2).unwrap() - 1.0).abs() < 1e-9);
    }
}
