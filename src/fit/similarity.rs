//! The 2-D similarity transform and its closed-form least-squares fit.
//!
//! Convention (stated once, used everywhere): a similarity maps a target point (x, y) to a
//! reference point (x', y') as
//!
//! ```text
//! x' = a·x − b·y + tx        a = s·cos t,  b = s·sin t
//! y' = b·x + a·y + ty        t counter-clockwise, s > 0
//! ```
//!
//! In complex numbers this is w = (a + ib)·z + (tx + i·ty). The least-squares fit on point pairs
//! is the closed form of Umeyama (IEEE TPAMI 13(4), 1991) restricted to the plane: with centred
//! points, a + ib = Σ conj(z)·w / Σ |z|². Standard errors follow from the usual linear
//! least-squares covariance σ̂²(AᵀA)⁻¹ with σ̂² = SSR / (2n − 4).

use serde::{Deserialize, Serialize};

/// A 2-D similarity x' = a·x − b·y + tx, y' = b·x + a·y + ty (see the module doc).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Similarity {
    /// s·cos t.
    pub a: f64,
    /// s·sin t.
    pub b: f64,
    /// Translation in x (reference units).
    pub tx: f64,
    /// Translation in y (reference units).
    pub ty: f64,
}

impl Similarity {
    /// The identity.
    pub const IDENTITY: Similarity = Similarity {
        a: 1.0,
        b: 0.0,
        tx: 0.0,
        ty: 0.0,
    };

    /// Builds a similarity from scale, counter-clockwise rotation in radians and translation.
    pub fn from_params(scale: f64, rotation_rad: f64, tx: f64, ty: f64) -> Self {
        Similarity {
            a: scale * rotation_rad.cos(),
            b: scale * rotation_rad.sin(),
            tx,
            ty,
        }
    }

    /// The scale factor s.
    pub fn scale(&self) -> f64 {
        self.a.hypot(self.b)
    }

    /// The counter-clockwise rotation t in radians, in (−π, π].
    pub fn rotation(&self) -> f64 {
        self.b.atan2(self.a)
    }

    /// Maps one point.
    #[inline]
    pub fn apply(&self, p: [f64; 2]) -> [f64; 2] {
        [
            self.a * p[0] - self.b * p[1] + self.tx,
            self.b * p[0] + self.a * p[1] + self.ty,
        ]
    }

    /// The inverse similarity. Panics never; a degenerate (zero-scale) input gives non-finite
    /// values, which callers reject with [`Similarity::is_valid`].
    pub fn inverse(&self) -> Similarity {
        let d = self.a * self.a + self.b * self.b;
        let (ia, ib) = (self.a / d, -self.b / d);
        Similarity {
            a: ia,
            b: ib,
            tx: -(ia * self.tx - ib * self.ty),
            ty: -(ib * self.tx + ia * self.ty),
        }
    }

    /// `self` after `first`: p ↦ self(first(p)).
    pub fn compose(&self, first: &Similarity) -> Similarity {
        Similarity {
            a: self.a * first.a - self.b * first.b,
            b: self.a * first.b + self.b * first.a,
            tx: self.a * first.tx - self.b * first.ty + self.tx,
            ty: self.b * first.tx + self.a * first.ty + self.ty,
        }
    }

    /// True when every coefficient is finite and the scale is positive.
    pub fn is_valid(&self) -> bool {
        [self.a, self.b, self.tx, self.ty]
            .iter()
            .all(|v| v.is_finite())
            && self.scale() > 0.0
    }
}

/// A least-squares similarity with its residual statistics and parameter standard errors.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct SimilarityFit {
    /// The fitted transform (target → reference).
    pub transform: Similarity,
    /// Number of point pairs used.
    pub n: usize,
    /// Root mean square of the 2-D residual lengths, reference units.
    pub rmse: f64,
    /// σ̂ = sqrt(SSR / (2n − 4)), per coordinate, reference units (NaN for n ≤ 2).
    pub sigma: f64,
    /// Standard error of the scale factor.
    pub se_scale: f64,
    /// Standard error of the rotation, radians.
    pub se_rotation: f64,
    /// Standard error of tx.
    pub se_tx: f64,
    /// Standard error of ty.
    pub se_ty: f64,
}

/// Closed-form least-squares similarity mapping `from[i]` onto `to[i]`.
///
/// Returns `None` when fewer than two pairs are given or all `from` points coincide.
///
/// ```
/// use tiemark::fit::similarity::{fit_similarity, Similarity};
/// let truth = Similarity::from_params(2.0, 30f64.to_radians(), 100.0, -50.0);
/// let from = [[0.0, 0.0], [10.0, 0.0], [0.0, 10.0], [7.0, 3.0]];
/// let to: Vec<[f64; 2]> = from.iter().map(|&p| truth.apply(p)).collect();
/// let fit = fit_similarity(&from, &to).unwrap();
/// assert!((fit.transform.scale() - 2.0).abs() < 1e-12);
/// assert!((fit.transform.rotation().to_degrees() - 30.0).abs() < 1e-9);
/// assert!(fit.rmse < 1e-9);
/// ```
pub fn fit_similarity(from: &[[f64; 2]], to: &[[f64; 2]]) -> Option<SimilarityFit> {
    fit_in_order(from.len().min(to.len()), |i| (from[i], to[i]))
}

/// Pairs from which [`fit_similarity_indexed`] first gathers them into one buffer.
const GATHER_FROM: usize = 32_768;

/// As [`fit_similarity`], with the pairs given by an accessor.
///
/// The fit reads every pair three times (the centroids, the sums, the residuals). From
/// 32,768 pairs on, they are first gathered into one buffer on the cores of the current rayon
/// pool, so that an accessor's scattered reads (control points look up both surveys) happen
/// once and in parallel; the sums still run over the pairs in order on one thread, so the fit
/// is bit for bit the same either way and with any number of threads.
pub fn fit_similarity_indexed<F>(n: usize, pair: F) -> Option<SimilarityFit>
where
    F: Fn(usize) -> ([f64; 2], [f64; 2]) + Sync,
{
    use rayon::prelude::*;
    if n >= GATHER_FROM {
        let pairs: Vec<([f64; 2], [f64; 2])> = (0..n)
            .into_par_iter()
            .with_min_len(4096)
            .map(&pair)
            .collect();
        return fit_in_order(n, |i| pairs[i]);
    }
    fit_in_order(n, pair)
}

/// The fit of [`fit_similarity_indexed`], reading `pair(i)` for i in order.
fn fit_in_order<F>(n: usize, pair: F) -> Option<SimilarityFit>
where
    F: Fn(usize) -> ([f64; 2], [f64; 2]),
{
    if n < 2 {
        return None;
    }
    let nf = n as f64;
    let (mut fx, mut fy, mut tx, mut ty) = (0.0, 0.0, 0.0, 0.0);
    for i in 0..n {
        let (f, t) = pair(i);
        fx += f[0];
        fy += f[1];
        tx += t[0];
        ty += t[1];
    }
    let (fx, fy, tx, ty) = (fx / nf, fy / nf, tx / nf, ty / nf);
    // Σ conj(z)·w and Σ |z|² on centred points.
    let (mut re, mut im, mut s) = (0.0, 0.0, 0.0);
    for i in 0..n {
        let (f, t) = pair(i);
        let (zx, zy) = (f[0] - fx, f[1] - fy);
        let (wx, wy) = (t[0] - tx, t[1] - ty);
        re += zx * wx + zy * wy;
        im += zx * wy - zy * wx;
        s += zx * zx + zy * zy;
    }
    if s <= 0.0 || !s.is_finite() {
        return None;
    }
    let a = re / s;
    let b = im / s;
    let transform = Similarity {
        a,
        b,
        tx: tx - (a * fx - b * fy),
        ty: ty - (b * fx + a * fy),
    };
    let mut ssr = 0.0;
    for i in 0..n {
        let (f, t) = pair(i);
        let p = transform.apply(f);
        ssr += (p[0] - t[0]).powi(2) + (p[1] - t[1]).powi(2);
    }
    let rmse = (ssr / nf).sqrt();
    let sigma = if n > 2 {
        (ssr / (2.0 * nf - 4.0)).sqrt()
    } else {
        f64::NAN
    };
    // Var(a) = Var(b) = σ²/S in centred coordinates; the translation at the origin adds the
    // centroid lever arm: Var(tx) = σ²(1/n + |c|²/S).
    let se_ab = sigma / s.sqrt();
    let se_t = sigma * (1.0 / nf + (fx * fx + fy * fy) / s).sqrt();
    let scale = transform.scale();
    Some(SimilarityFit {
        transform,
        n,
        rmse,
        sigma,
        se_scale: se_ab,
        se_rotation: se_ab / scale,
        se_tx: se_t,
        se_ty: se_t,
    })
}

/// The exact similarity through two point pairs (a RANSAC minimal sample).
pub fn similarity_from_two(f: [[f64; 2]; 2], t: [[f64; 2]; 2]) -> Option<Similarity> {
    let (zx, zy) = (f[1][0] - f[0][0], f[1][1] - f[0][1]);
    let (wx, wy) = (t[1][0] - t[0][0], t[1][1] - t[0][1]);
    let d = zx * zx + zy * zy;
    if d <= 0.0 {
        return None;
    }
    let a = (zx * wx + zy * wy) / d;
    let b = (zx * wy - zy * wx) / d;
    let s = Similarity {
        a,
        b,
        tx: t[0][0] - (a * f[0][0] - b * f[0][1]),
        ty: t[0][1] - (b * f[0][0] + a * f[0][1]),
    };
    s.is_valid().then_some(s)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn recovers_parameters_exactly_on_clean_data() {
        let truth = Similarity::from_params(2.5, 0.7, -120.0, 33.0);
        let from: Vec<[f64; 2]> = (0..20)
            .map(|i| [(i as f64 * 1.7).sin() * 50.0, (i as f64 * 0.3).cos() * 80.0])
            .collect();
        let to: Vec<[f64; 2]> = from.iter().map(|&p| truth.apply(p)).collect();
        let fit = fit_similarity(&from, &to).unwrap();
        assert_relative_eq!(fit.transform.scale(), 2.5, epsilon = 1e-12);
        assert_relative_eq!(fit.transform.rotation(), 0.7, epsilon = 1e-12);
        assert_relative_eq!(fit.transform.tx, -120.0, epsilon = 1e-9);
        assert_relative_eq!(fit.transform.ty, 33.0, epsilon = 1e-9);
        assert!(fit.rmse < 1e-9);
    }

    #[test]
    fn inverse_and_compose_round_trip() {
        let s = Similarity::from_params(0.3, -2.0, 5.0, 7.0);
        let id = s.compose(&s.inverse());
        assert_relative_eq!(id.a, 1.0, epsilon = 1e-12);
        assert_relative_eq!(id.b, 0.0, epsilon = 1e-12);
        assert_relative_eq!(id.tx, 0.0, epsilon = 1e-12);
        assert_relative_eq!(id.ty, 0.0, epsilon = 1e-12);
        let p = [3.0, -4.0];
        let q = s.inverse().apply(s.apply(p));
        assert_relative_eq!(q[0], p[0], epsilon = 1e-12);
        assert_relative_eq!(q[1], p[1], epsilon = 1e-12);
    }

    #[test]
    fn two_point_sample_is_exact() {
        let truth = Similarity::from_params(4.0, 1.2, 10.0, -3.0);
        let f = [[0.0, 0.0], [3.0, 1.0]];
        let s = similarity_from_two(f, [truth.apply(f[0]), truth.apply(f[1])]).unwrap();
        assert_relative_eq!(s.scale(), 4.0, epsilon = 1e-12);
        assert_relative_eq!(s.rotation(), 1.2, epsilon = 1e-12);
        assert!(similarity_from_two([[1.0, 1.0], [1.0, 1.0]], f).is_none());
    }

    #[test]
    fn standard_errors_match_monte_carlo() {
        // The analytic σ/√S for the scale must agree with the spread over noisy repeats.
        use rand::{Rng, SeedableRng};
        use rand_distr::{Distribution, Normal};
        let normal = Normal::new(0.0, 1.0).unwrap();
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        let truth = Similarity::from_params(1.0, 0.2, 0.0, 0.0);
        let from: Vec<[f64; 2]> = (0..30)
            .map(|_| [rng.gen_range(-50.0..50.0), rng.gen_range(-50.0..50.0)])
            .collect();
        let sigma = 0.5;
        let mut scales = Vec::new();
        let mut predicted = 0.0;
        for _ in 0..2000 {
            let to: Vec<[f64; 2]> = from
                .iter()
                .map(|&p| {
                    let q = truth.apply(p);
                    [
                        q[0] + sigma * normal.sample(&mut rng),
                        q[1] + sigma * normal.sample(&mut rng),
                    ]
                })
                .collect();
            let fit = fit_similarity(&from, &to).unwrap();
            scales.push(fit.transform.scale());
            predicted += fit.se_scale / 2000.0;
        }
        let mean = scales.iter().sum::<f64>() / scales.len() as f64;
        let sd = (scales.iter().map(|s| (s - mean).powi(2)).sum::<f64>()
            / (scales.len() - 1) as f64)
            .sqrt();
        assert!(
            (sd / predicted - 1.0).abs() < 0.1,
            "sd {sd} predicted {predicted}"
        );
    }
}
