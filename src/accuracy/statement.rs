//! The similarity stated at a point, as the trade states it: shift east and north in metres,
//! rotation in arc-seconds, scale in ppm, each with its standard error and whether it differs
//! from zero at 95 %.
//!
//! **In:** point pairs `from[i] → to[i]` in one working frame (`metres_per_unit` metres per
//! unit) and the scale of a transform with no scale error (`unit_scale`). **Out:** a
//! [`TransformStatement`] at the centroid of `from`.
//!
//! The least-squares similarity is written about the centroid c of `from`:
//!
//! ```text
//! T(p) = (u, v) + [a −b; b a] (p − c)          s = √(a² + b²),  θ = atan2(b, a)
//! ```
//!
//! With centred points z = p − c the design matrix has the columns (z_x, −z_y, 1, 0) for the
//! x rows and (z_y, z_x, 0, 1) for the y rows, so the normal matrix is diagonal:
//! AᵀA = diag(S, S, n, n) with S = Σ|z|². Hence, with σ̂² = SSR / (2n − 4) (per coordinate):
//!
//! ```text
//! shift east  = u − c_x        SE = σ̂ / √n                 (× metres per unit)
//! shift north = v − c_y        SE = σ̂ / √n                 (× metres per unit)
//! scale (ppm) = (s / unit_scale − 1)·10⁶   SE = σ̂ / √S / unit_scale · 10⁶
//! rotation    = θ (counter-clockwise)      SE = σ̂ / (s √S)  (radians → arc-seconds)
//! ```
//!
//! The scale and rotation errors are first-order (linearised about a, b): ds = (a da + b db)/s
//! and dθ = (a db − b da)/s², with Var(a) = Var(b) = σ̂²/S and Cov(a, b) = 0. Because the
//! normal matrix is diagonal at the centroid, the four are uncorrelated there: this is why the
//! transform is stated at the centroid, and why the standard errors at the working origin
//! (where the shift picks up the lever arm |c|²/S) belong in transform.json only.
//!
//! An estimate is called significant when |value| > z·SE with z = 1.959964, the 97.5 % point
//! of the standard normal distribution (a two-sided test at 95 %). With few points a Student t
//! point would be slightly larger (2n − 4 degrees of freedom); the normal point is used, as
//! common practice does for n in the tens and more.

use crate::fit::similarity::{fit_similarity_indexed, Similarity};
use serde::{Deserialize, Serialize};

/// The two-sided 95 % point of the standard normal distribution: P(|Z| ≤ z) = 0.95.
pub const Z_95_TWO_SIDED: f64 = 1.959964;

/// Arc-seconds per radian.
pub const ARCSEC_PER_RAD: f64 = 180.0 * 3600.0 / std::f64::consts::PI;

/// A value with its standard error; `significant` = differs from zero at 95 % (two-sided).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Estimate {
    /// The estimate.
    pub value: f64,
    /// Its standard error (NaN when it cannot be estimated, e.g. from two pairs).
    pub se: f64,
    /// |value| > [`Z_95_TWO_SIDED`] · se (false when se is not finite).
    pub significant: bool,
}

impl Estimate {
    /// An estimate with its standard error; the significance follows.
    pub fn new(value: f64, se: f64) -> Self {
        Estimate {
            value,
            se,
            significant: se.is_finite() && value.abs() > Z_95_TWO_SIDED * se,
        }
    }
}

/// A similarity stated at a point as the trade does (see the module doc for the formulas).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TransformStatement {
    /// The point (working frame of the transform's input): the centroid of `from`.
    pub at: [f64; 2],
    /// T(at) − at, east, metres.
    pub shift_east_m: Estimate,
    /// T(at) − at, north, metres.
    pub shift_north_m: Estimate,
    /// Rotation, arc-seconds, counter-clockwise.
    pub rotation_arcsec: Estimate,
    /// (scale / unit_scale − 1) · 10⁶.
    pub scale_ppm: Estimate,
    /// Point pairs behind the statement.
    pub n: usize,
    /// σ̂ per coordinate, metres: √(SSR / (2n − 4)) (NaN for n = 2).
    pub sigma_m: f64,
    /// The fitted transform itself (from → to, working units).
    pub transform: Similarity,
}

impl TransformStatement {
    /// From point pairs `from[i]` → `to[i]` (T fitted by least squares, stated at the centroid
    /// of `from`). `metres_per_unit` converts the shift and σ̂; the scale error is measured
    /// against `unit_scale`. `None` for fewer than two pairs or when all `from` coincide.
    ///
    /// ```
    /// use tiemark::accuracy::TransformStatement;
    /// use tiemark::fit::Similarity;
    /// let t = Similarity::from_params(1.0 + 20e-6, 5e-5, 3.0, -2.0);
    /// let from = [[1000.0, 2000.0], [1100.0, 2000.0], [1000.0, 2100.0], [1080.0, 2070.0]];
    /// let to: Vec<[f64; 2]> = from.iter().map(|&p| t.apply(p)).collect();
    /// let s = TransformStatement::from_pairs(&from, &to, 1.0, 1.0).unwrap();
    /// assert!((s.scale_ppm.value - 20.0).abs() < 1e-6);
    /// let moved = t.apply(s.at);
    /// assert!((s.shift_east_m.value - (moved[0] - s.at[0])).abs() < 1e-9);
    /// ```
    pub fn from_pairs(
        from: &[[f64; 2]],
        to: &[[f64; 2]],
        metres_per_unit: f64,
        unit_scale: f64,
    ) -> Option<Self> {
        Self::from_pairs_indexed(
            from.len().min(to.len()),
            |i| (from[i], to[i]),
            metres_per_unit,
            unit_scale,
        )
    }

    /// As [`TransformStatement::from_pairs`], with the pairs given by an accessor (no copy of
    /// large sets).
    pub fn from_pairs_indexed<F>(
        n: usize,
        pair: F,
        metres_per_unit: f64,
        unit_scale: f64,
    ) -> Option<Self>
    where
        F: Fn(usize) -> ([f64; 2], [f64; 2]) + Sync,
    {
        let fit = fit_similarity_indexed(n, &pair)?;
        let nf = n as f64;
        let mut c = [0.0, 0.0];
        for i in 0..n {
            let (f, _) = pair(i);
            c[0] += f[0];
            c[1] += f[1];
        }
        c = [c[0] / nf, c[1] / nf];
        let mut s2 = 0.0;
        for i in 0..n {
            let (f, _) = pair(i);
            s2 += (f[0] - c[0]).powi(2) + (f[1] - c[1]).powi(2);
        }
        let t = fit.transform;
        let moved = t.apply(c);
        let sigma = fit.sigma;
        let scale = t.scale();
        let se_shift = sigma / nf.sqrt() * metres_per_unit;
        let se_ab = sigma / s2.sqrt();
        Some(TransformStatement {
            at: c,
            shift_east_m: Estimate::new((moved[0] - c[0]) * metres_per_unit, se_shift),
            shift_north_m: Estimate::new((moved[1] - c[1]) * metres_per_unit, se_shift),
            rotation_arcsec: Estimate::new(
                t.rotation() * ARCSEC_PER_RAD,
                se_ab / scale * ARCSEC_PER_RAD,
            ),
            scale_ppm: Estimate::new((scale / unit_scale - 1.0) * 1e6, se_ab / unit_scale * 1e6),
            n,
            sigma_m: sigma * metres_per_unit,
            transform: t,
        })
    }
}
