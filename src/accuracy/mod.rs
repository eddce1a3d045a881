//! Accuracy as the trade states it: the transform at a stated point, and horizontal accuracy
//! from residual vectors by the published standards. Pure: no I/O.
//!
//! **In:** point pairs (for [`TransformStatement`]) or residual vectors in metres with where
//! they came from (for [`Accuracy`]); the text of a checkpoints file ([`checkpoints`]); the
//! `[accuracy]` options, the hold-out split and leave-one-out residuals ([`sources`]); the
//! transform as a PROJ pipeline string and as EPSG method 9621 ([`proj`]). **Out:** a [`TransformStatement`] (shift, rotation,
//! scale with standard errors and 95 % significance, see [`statement`]) and an [`Accuracy`]:
//! RMSE_x, RMSE_y, RMSE_r with the count behind them, the NSSDA horizontal accuracy at 95 %
//! with the rule used, the ASPRS Edition 2 RMSE_H, and warnings; an [`AccuracyReport`] for a
//! match.
//!
//! ## The standards
//!
//! - **NSSDA**, FGDC-STD-007.3-1998, *Geospatial Positioning Accuracy Standards Part 3:
//!   National Standard for Spatial Data Accuracy*, Appendix 3-A (formulas from memory; the
//!   constants are recomputed in the tests): RMSE_r = √(RMSE_x² + RMSE_y²). Case 1, RMSE_x =
//!   RMSE_y: Accuracy_r = 2.4477 · RMSE_x = 1.7308 · RMSE_r, where 2.4477 = √χ²₂(0.95) =
//!   √(−2 ln 0.05) is the 95 % point of the Rayleigh distribution in units of σ and 1.7308 =
//!   2.4477 / √2. Case 2, RMSE_x ≠ RMSE_y with 0.6 ≤ RMSE_min / RMSE_max ≤ 1: Accuracy_r ≈
//!   2.4477 · 0.5 · (RMSE_x + RMSE_y) (the standard cites Greenwalt and Schultz, 1968, for
//!   the circular standard error 0.5 (RMSE_x + RMSE_y)). Below 0.6 the standard gives no
//!   formula and the approximation understates the 95 % radius; this module still reports
//!   the approximation there, as [`NssdaRule::OutsideLimit`], with a warning and, beside it,
//!   the exact 95 % radius of a normal error with those RMSEs ([`radius_95`]). The standard
//!   asks for at least 20 checkpoints (from memory).
//! - **ASPRS**, *Positional Accuracy Standards for Digital Geospatial Data*, Edition 2,
//!   Version 1.0 (August 2023): horizontal accuracy is stated as RMSE_H = √(RMSE_x² +
//!   RMSE_y²) (the 95 % figure was dropped), and a product accuracy assessment needs at least
//!   30 checkpoints (raised from 20; read in GPS World's summary of Edition 2, 6 December
//!   2023). Edition 2 also adds the checkpoints' own survey error to the product's; this
//!   module reports the product against the checkpoints as given (their own accuracy is not
//!   known here).
//!
//! Accuracy figures from the fit's own residuals overstate accuracy: the transform was chosen
//! to make them small. [`AccuracySource`] says which residuals a figure came from.

pub mod checkpoints;
pub mod proj;
pub mod sources;
pub mod statement;

pub use checkpoints::{CheckpointError, CheckpointRows};
pub use sources::{AccuracyParams, AccuracyParamsError, AccuracyReport, CheckResidual};
pub use statement::{Estimate, TransformStatement, ARCSEC_PER_RAD, Z_95_TWO_SIDED};

use serde::{Deserialize, Serialize};

/// NSSDA factor of one component: √χ²₂(0.95) = √(−2 ln 0.05) = 2.44775, as FGDC-STD-007.3-1998
/// prints it.
pub const NSSDA_K_COMPONENT: f64 = 2.4477;
/// NSSDA factor of RMSE_r when RMSE_x = RMSE_y: 2.4477 / √2, as FGDC-STD-007.3-1998 prints it.
pub const NSSDA_K_RADIAL: f64 = 1.7308;
/// Lower limit of RMSE_min / RMSE_max for the NSSDA's approximation (FGDC-STD-007.3-1998,
/// Appendix 3-A, Case 2).
pub const NSSDA_RATIO_LIMIT: f64 = 0.6;
/// Fewest checkpoints the NSSDA asks for (FGDC-STD-007.3-1998, from memory).
pub const NSSDA_MIN_CHECKPOINTS: usize = 20;
/// Fewest checkpoints ASPRS Edition 2 (2023) asks for in a product accuracy assessment.
pub const ASPRS_MIN_CHECKPOINTS: usize = 30;

/// Where the residuals behind an accuracy figure came from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum AccuracySource {
    /// The control points' residuals under the final fit (not independent: they overstate
    /// accuracy).
    FitResiduals,
    /// Each control point's residual under the fit of all the others.
    LeaveOneOut,
    /// A seeded share of the control points kept out of the final fit.
    Holdout {
        /// The share kept out, (0, 1).
        share: f64,
        /// The seed of the split.
        seed: u64,
    },
    /// Surveyed marks read from a file, with reference and target coordinates.
    Checkpoints {
        /// The file.
        file: String,
    },
}

impl AccuracySource {
    /// True when the points behind the figure took no part in finding or fitting the
    /// transform: only surveyed checkpoints. Held-out control points were still found by
    /// matching under the transform (their residuals are cut off at the inlier tolerance).
    pub fn independent(&self) -> bool {
        matches!(self, AccuracySource::Checkpoints { .. })
    }

    /// In words, for reports.
    pub fn describe(&self) -> String {
        match self {
            AccuracySource::FitResiduals => {
                "the control points' residuals under the final fit (they overstate accuracy: the transform was fitted to make them small)".to_string()
            }
            AccuracySource::LeaveOneOut => {
                "leave-one-out residuals: each control point against the fit of all the others (not independent: the control points were found under the transform)".to_string()
            }
            AccuracySource::Holdout { share, seed } => format!(
                "{:.0}% of the control points held out of the final fit (seed {seed}; they were still found under the transform, so not fully independent)",
                share * 100.0
            ),
            AccuracySource::Checkpoints { file } => {
                format!("independent checkpoints from {file}")
            }
        }
    }
}

/// Which NSSDA rule gave the 95 % figure (FGDC-STD-007.3-1998, Appendix 3-A).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum NssdaRule {
    /// Case 1, RMSE_x = RMSE_y: 1.7308 × RMSE_r.
    Equal,
    /// Case 2 within its limit, 0.6 ≤ RMSE_min / RMSE_max < 1: 2.4477 × 0.5 × (RMSE_x +
    /// RMSE_y).
    Approximation,
    /// RMSE_min / RMSE_max < 0.6: the Case 2 approximation outside its stated limit (it
    /// understates the 95 % radius; see [`Accuracy::exact_95_m`]).
    OutsideLimit,
}

impl NssdaRule {
    /// The rule and its limit in words.
    pub fn describe(&self) -> &'static str {
        match self {
            NssdaRule::Equal => "1.7308 × RMSE_r (RMSE_x = RMSE_y)",
            NssdaRule::Approximation => {
                "2.4477 × 0.5 × (RMSE_x + RMSE_y), valid for 0.6 ≤ RMSE_min/RMSE_max ≤ 1"
            }
            NssdaRule::OutsideLimit => {
                "2.4477 × 0.5 × (RMSE_x + RMSE_y) OUTSIDE its limit (RMSE_min/RMSE_max < 0.6): it understates the 95% radius"
            }
        }
    }
}

/// Horizontal accuracy from residual vectors (dx, dy in metres).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Accuracy {
    /// Residual vectors behind the figures.
    pub n: usize,
    /// √(Σ dx² / n), metres.
    pub rmse_x_m: f64,
    /// √(Σ dy² / n), metres.
    pub rmse_y_m: f64,
    /// √(RMSE_x² + RMSE_y²), metres.
    pub rmse_r_m: f64,
    /// Mean dx, metres (a systematic offset shows here).
    pub mean_x_m: f64,
    /// Mean dy, metres.
    pub mean_y_m: f64,
    /// RMSE_min / RMSE_max (1 when both are zero).
    pub rmse_ratio: f64,
    /// NSSDA horizontal accuracy at 95 %, metres, by `nssda_rule`.
    pub nssda_95_m: f64,
    /// The NSSDA rule used.
    pub nssda_rule: NssdaRule,
    /// The exact radius holding 95 % of a zero-mean normal error with standard deviations
    /// RMSE_x and RMSE_y (uncorrelated), metres: not a figure of either standard, given to show
    /// how far the NSSDA approximation is off.
    pub exact_95_m: f64,
    /// ASPRS Edition 2 (2023) horizontal accuracy RMSE_H = √(RMSE_x² + RMSE_y²), metres.
    pub asprs_rmse_h_m: f64,
    /// What a reader must know about these figures (too few points, rule outside its limit,
    /// residuals that are not independent).
    pub warnings: Vec<String>,
    /// Where the residuals came from.
    pub source: AccuracySource,
}

impl Accuracy {
    /// From residual vectors `[dx, dy]` in metres (any sign convention: only squares and means
    /// are taken). `None` when `residuals` is empty.
    ///
    /// ```
    /// use tiemark::accuracy::{Accuracy, AccuracySource, NssdaRule};
    /// let r = [[0.03, -0.04], [-0.03, 0.04], [0.03, 0.04], [-0.03, -0.04]];
    /// let a = Accuracy::from_residuals(&r, AccuracySource::FitResiduals).unwrap();
    /// assert!((a.rmse_r_m - 0.05).abs() < 1e-12);
    /// assert_eq!(a.nssda_rule, NssdaRule::Approximation); // 0.03/0.04 = 0.75
    /// assert!((a.nssda_95_m - 2.4477 * 0.5 * 0.07).abs() < 1e-12);
    /// ```
    pub fn from_residuals(residuals: &[[f64; 2]], source: AccuracySource) -> Option<Accuracy> {
        if residuals.is_empty() {
            return None;
        }
        let n = residuals.len();
        let nf = n as f64;
        let (mut sx, mut sy, mut mx, mut my) = (0.0, 0.0, 0.0, 0.0);
        for r in residuals {
            sx += r[0] * r[0];
            sy += r[1] * r[1];
            mx += r[0];
            my += r[1];
        }
        let rmse_x = (sx / nf).sqrt();
        let rmse_y = (sy / nf).sqrt();
        let rmse_r = rmse_x.hypot(rmse_y);
        let (lo, hi) = (rmse_x.min(rmse_y), rmse_x.max(rmse_y));
        let ratio = if hi > 0.0 { lo / hi } else { 1.0 };
        let (nssda, rule) = nssda_95(rmse_x, rmse_y);
        let exact = radius_95(rmse_x, rmse_y);
        let mut warnings = Vec::new();
        if n < ASPRS_MIN_CHECKPOINTS {
            warnings.push(format!(
                "only {n} points stand behind these figures: ASPRS Edition 2 (2023) asks for at least {ASPRS_MIN_CHECKPOINTS} checkpoints{}",
                if n < NSSDA_MIN_CHECKPOINTS {
                    format!(", the NSSDA for at least {NSSDA_MIN_CHECKPOINTS}")
                } else {
                    String::new()
                }
            ));
        }
        if rule == NssdaRule::OutsideLimit {
            warnings.push(format!(
                "RMSE_min/RMSE_max = {ratio:.2} is below the NSSDA's limit of 0.6: its approximation ({nssda:.4} m) understates the 95% radius, which for a normal error with these RMSEs is {exact:.4} m"
            ));
        }
        if !source.independent() {
            warnings.push(
                "these figures are not from independent checkpoints and may overstate accuracy; survey checkpoints and give them with accuracy.checkpoints".to_string(),
            );
        }
        Some(Accuracy {
            n,
            rmse_x_m: rmse_x,
            rmse_y_m: rmse_y,
            rmse_r_m: rmse_r,
            mean_x_m: mx / nf,
            mean_y_m: my / nf,
            rmse_ratio: ratio,
            nssda_95_m: nssda,
            nssda_rule: rule,
            exact_95_m: exact,
            asprs_rmse_h_m: rmse_r,
            warnings,
            source,
        })
    }
}

/// The NSSDA horizontal accuracy at 95 % from RMSE_x and RMSE_y, and the rule used
/// (FGDC-STD-007.3-1998, Appendix 3-A; see the module doc).
pub fn nssda_95(rmse_x: f64, rmse_y: f64) -> (f64, NssdaRule) {
    let (lo, hi) = (rmse_x.min(rmse_y), rmse_x.max(rmse_y));
    if lo == hi {
        return (NSSDA_K_RADIAL * rmse_x.hypot(rmse_y), NssdaRule::Equal);
    }
    let value = NSSDA_K_COMPONENT * 0.5 * (rmse_x + rmse_y);
    if lo / hi >= NSSDA_RATIO_LIMIT {
        (value, NssdaRule::Approximation)
    } else {
        (value, NssdaRule::OutsideLimit)
    }
}

/// The radius R with P(√(X² + Y²) ≤ R) = 0.95 for independent X ~ N(0, σx²), Y ~ N(0, σy²).
///
/// In polar coordinates the probability inside R is
/// (1 / 2π σx σy) ∫₀^{2π} (1 − exp(−R² g(θ) / 2)) / g(θ) dθ with g(θ) = cos²θ/σx² +
/// sin²θ/σy²; the integrand is smooth and periodic, so the trapezoid rule converges fast, and R
/// is found by bisection. With one σ zero it is the one-dimensional 1.959964 σ.
pub fn radius_95(sx: f64, sy: f64) -> f64 {
    radius_of_probability(sx, sy, 0.95)
}

/// As [`radius_95`] for any probability `p` in (0, 1).
pub fn radius_of_probability(sx: f64, sy: f64, p: f64) -> f64 {
    let (lo, hi) = (sx.abs().min(sy.abs()), sx.abs().max(sy.abs()));
    if hi == 0.0 {
        return 0.0;
    }
    if lo == 0.0 {
        // One-dimensional: P(|X| ≤ R) = p; bisect on the normal's probability.
        return hi * normal_two_sided_quantile(p);
    }
    const NODES: usize = 4096;
    let inside = |r: f64| {
        let mut sum = 0.0;
        for k in 0..NODES {
            let t = 2.0 * std::f64::consts::PI * k as f64 / NODES as f64;
            let g = (t.cos() / hi).powi(2) + (t.sin() / lo).powi(2);
            sum += (1.0 - (-0.5 * r * r * g).exp()) / g;
        }
        sum / NODES as f64 / (hi * lo)
    };
    bisect(|r| inside(r) - p, 0.0, 4.0 * hi)
}

/// z with P(|Z| ≤ z) = p for a standard normal Z, by bisection on Simpson's rule.
fn normal_two_sided_quantile(p: f64) -> f64 {
    let prob = |z: f64| {
        let m = 400;
        let h = z / m as f64;
        let f = |x: f64| (-0.5 * x * x).exp();
        let mut s = f(0.0) + f(z);
        for i in 1..m {
            s += f(i as f64 * h) * if i % 2 == 1 { 4.0 } else { 2.0 };
        }
        2.0 * s * h / 3.0 / (2.0 * std::f64::consts::PI).sqrt()
    };
    bisect(|z| prob(z) - p, 0.0, 10.0)
}

/// A root of an increasing `f` on [lo, hi].
fn bisect(f: impl Fn(f64) -> f64, mut lo: f64, mut hi: f64) -> f64 {
    for _ in 0..100 {
        let mid = 0.5 * (lo + hi);
        if f(mid) < 0.0 {
            lo = mid;
        } else {
            hi = mid;
        }
        if hi - lo <= 1e-12 * hi.max(1e-300) {
            break;
        }
    }
    0.5 * (lo + hi)
}

#[cfg(test)]
mod tests;
