//! Where independent residuals come from: the options (`[accuracy]`), the seeded hold-out
//! split, leave-one-out residuals in closed form, and what a match reports.
//!
//! **In:** the options, point pairs in the working frame. **Out:** a split, residual vectors,
//! and the [`AccuracyReport`] a [`crate::outcome::MatchOutcome`] carries.
//!
//! ## Leave-one-out in closed form
//!
//! In the centred parametrisation of [`super::statement`] the normal matrix is diag(S, S, n, n),
//! so the 2 × 2 block of the hat matrix H = A(AᵀA)⁻¹Aᵀ that belongs to point i is h_i·I with
//! h_i = 1/n + |z_i|²/S (z_i = p_i − c). Deleting a block of rows from a linear least-squares
//! problem changes the residual of those rows to (I − H_ii)⁻¹ e_i (the Sherman–Morrison–
//! Woodbury identity), so each point's residual under the fit of all the others is
//! e_i / (1 − h_i): exact, and O(n) for all points together (a million control points take
//! milliseconds; no cap is needed). The test compares it with refitting without each point.

use super::statement::TransformStatement;
use super::Accuracy;
use crate::fit::similarity::Similarity;
use serde::{Deserialize, Serialize};
use std::path::PathBuf;

/// Options of the accuracy statement (`[accuracy]` in a pipeline file).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct AccuracyParams {
    /// A CSV of surveyed checkpoints ([`super::checkpoints`]); the accuracy figure then comes
    /// from them.
    pub checkpoints: Option<PathBuf>,
    /// A share in (0, 1) of the control points kept out of the final fit (seeded by
    /// `fit.seed`) and used as checkpoints.
    pub holdout: Option<f64>,
}

/// Unusable accuracy options.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum AccuracyParamsError {
    /// Share outside (0, 1).
    #[error("accuracy.holdout must be a share between 0 and 1, exclusive, of the control points to keep out of the fit (got {0}); e.g. 0.2")]
    InvalidHoldout(f64),
    /// Both sources asked for.
    #[error("accuracy.checkpoints and accuracy.holdout exclude each other: the accuracy figure comes from one source; give one of them")]
    BothSources,
    /// The share leaves too few control points for the fit.
    #[error("accuracy.holdout = {share} keeps {held} of the {total} control points out of the fit, leaving {left}, fewer than fit.min_control_points ({required}); lower accuracy.holdout, or survey checkpoints and give them with accuracy.checkpoints")]
    HoldoutTooLarge {
        /// The share.
        share: f64,
        /// Points held out.
        held: usize,
        /// Control points found.
        total: usize,
        /// Left for the fit.
        left: usize,
        /// [`crate::fit::FitParams::min_control_points`].
        required: usize,
    },
}

impl AccuracyParams {
    /// Checks the options alone.
    pub fn validate(&self) -> Result<(), AccuracyParamsError> {
        if let Some(h) = self.holdout {
            if !(h > 0.0 && h < 1.0) {
                return Err(AccuracyParamsError::InvalidHoldout(h));
            }
            if self.checkpoints.is_some() {
                return Err(AccuracyParamsError::BothSources);
            }
        }
        Ok(())
    }
}

/// Mixed into `fit.seed` so that the split draws differ from the fit's own draws.
const HOLDOUT_SALT: u64 = 0x6b1d_e0a7_c4ec_0001;

/// Which of `n` control points are held out for a `share` with `seed`: `round(share · n)`
/// indices (at least one), sorted. The same `n`, share and seed give the same split.
pub fn holdout_split(n: usize, share: f64, seed: u64) -> Vec<usize> {
    use rand::SeedableRng;
    if n == 0 {
        return Vec::new();
    }
    let k = ((share * n as f64).round() as usize).clamp(1, n);
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed ^ HOLDOUT_SALT);
    let mut picked = rand::seq::index::sample(&mut rng, n, k).into_vec();
    picked.sort_unstable();
    picked
}

/// Each pair's residual `to − T₍₋ᵢ₎(from)` under the least-squares similarity of all the other
/// pairs (working units), in closed form (see the module doc). `None` with fewer than three
/// pairs or all `from` at one place.
pub fn leave_one_out<F>(n: usize, pair: F) -> Option<Vec<[f64; 2]>>
where
    F: Fn(usize) -> ([f64; 2], [f64; 2]) + Sync,
{
    if n < 3 {
        return None;
    }
    let fit = crate::fit::similarity::fit_similarity_indexed(n, &pair)?;
    let nf = n as f64;
    let mut c = [0.0, 0.0];
    for i in 0..n {
        let (f, _) = pair(i);
        c = [c[0] + f[0] / nf, c[1] + f[1] / nf];
    }
    let mut s = 0.0;
    for i in 0..n {
        let (f, _) = pair(i);
        s += (f[0] - c[0]).powi(2) + (f[1] - c[1]).powi(2);
    }
    let t = fit.transform;
    Some(
        (0..n)
            .map(|i| {
                let (f, to) = pair(i);
                let p = t.apply(f);
                let h = 1.0 / nf + ((f[0] - c[0]).powi(2) + (f[1] - c[1]).powi(2)) / s;
                let k = 1.0 / (1.0 - h);
                [(to[0] - p[0]) * k, (to[1] - p[1]) * k]
            })
            .collect(),
    )
}

/// Residual vectors `to − t(from)` of pairs, working units.
pub fn residuals<F>(n: usize, pair: F, t: &Similarity) -> Vec<[f64; 2]>
where
    F: Fn(usize) -> ([f64; 2], [f64; 2]),
{
    (0..n)
        .map(|i| {
            let (f, to) = pair(i);
            let p = t.apply(f);
            [to[0] - p[0], to[1] - p[1]]
        })
        .collect()
}

/// One point the accuracy figure was measured on: a surveyed checkpoint or a held-out control
/// point, with its residual (reference − transformed target, metres, along the working CRS's
/// axes).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CheckResidual {
    /// The checkpoint's id, or `reference_id/target_id` of a held-out control point.
    pub id: String,
    /// East residual, metres.
    pub dx_m: f64,
    /// North residual, metres.
    pub dy_m: f64,
}

/// The accuracy statement of an accepted match.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AccuracyReport {
    /// The final transform (target → reference) stated at the control points' target
    /// centroid (working frame).
    pub statement: TransformStatement,
    /// That centroid mapped onto the reference, i.e. the centroid of the reference control
    /// points, in the reference's own CRS.
    pub centroid_reference: [f64; 2],
    /// The accuracy figure, from `accuracy.source`.
    pub accuracy: Accuracy,
    /// The control points' own residuals under the final fit, for comparison (they overstate
    /// accuracy).
    pub fit: Accuracy,
    /// The checkpoints or held-out control points behind `accuracy`, with their residuals
    /// (empty for leave-one-out, whose points are the control points).
    pub points: Vec<CheckResidual>,
    /// The transform target CRS → reference CRS as a PROJ pipeline string
    /// ([`super::proj::pipeline`]), or why there is none.
    pub proj_pipeline: Result<String, String>,
    /// For a local-grid target: the similarity (grid → working CRS) as EPSG method 9621.
    pub epsg_9621: Option<super::proj::Epsg9621>,
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::similarity::fit_similarity;
    use rand::{Rng, SeedableRng};

    #[test]
    fn leave_one_out_in_closed_form_equals_refitting_without_each_point() {
        let mut r = rand_chacha::ChaCha8Rng::seed_from_u64(9);
        let t = Similarity::from_params(0.9997, 0.3, 120.0, -40.0);
        let from: Vec<[f64; 2]> = (0..25)
            .map(|_| [r.gen_range(0.0..500.0), r.gen_range(0.0..300.0)])
            .collect();
        let to: Vec<[f64; 2]> = from
            .iter()
            .map(|&p| {
                let q = t.apply(p);
                [q[0] + r.gen_range(-0.1..0.1), q[1] + r.gen_range(-0.1..0.1)]
            })
            .collect();
        let loo = leave_one_out(from.len(), |i| (from[i], to[i])).unwrap();
        for i in 0..from.len() {
            let (f, o): (Vec<_>, Vec<_>) = (0..from.len())
                .filter(|&j| j != i)
                .map(|j| (from[j], to[j]))
                .unzip();
            let fit = fit_similarity(&f, &o).unwrap().transform;
            let p = fit.apply(from[i]);
            let want = [to[i][0] - p[0], to[i][1] - p[1]];
            assert!(
                (loo[i][0] - want[0]).abs() < 1e-9 && (loo[i][1] - want[1]).abs() < 1e-9,
                "{i}: {:?} against {want:?}",
                loo[i]
            );
        }
        // Larger than the fit's own residuals, point by point.
        let full = fit_similarity(&from, &to).unwrap().transform;
        let own = residuals(from.len(), |i| (from[i], to[i]), &full);
        for (a, b) in loo.iter().zip(&own) {
            assert!(a[0].hypot(a[1]) > b[0].hypot(b[1]));
        }
        assert!(leave_one_out(2, |i| (from[i], to[i])).is_none());
    }

    #[test]
    fn holdout_split_is_seeded_and_of_the_share() {
        let a = holdout_split(1000, 0.2, 7);
        assert_eq!(a.len(), 200);
        assert_eq!(a, holdout_split(1000, 0.2, 7));
        assert_ne!(a, holdout_split(1000, 0.2, 8));
        assert!(a.windows(2).all(|w| w[0] < w[1]) && *a.last().unwrap() < 1000);
        assert_eq!(holdout_split(3, 0.01, 1).len(), 1, "at least one");
        assert!(holdout_split(0, 0.5, 1).is_empty());
    }

    #[test]
    fn options_are_checked_by_key() {
        for h in [0.0, 1.0, f64::NAN, -0.2] {
            let e = AccuracyParams {
                holdout: Some(h),
                ..Default::default()
            }
            .validate()
            .unwrap_err()
            .to_string();
            assert!(e.starts_with("accuracy.holdout"), "{e}");
        }
        let both = AccuracyParams {
            holdout: Some(0.2),
            checkpoints: Some("m.csv".into()),
        };
        assert_eq!(both.validate(), Err(AccuracyParamsError::BothSources));
        assert!(AccuracyParams::default().validate().is_ok());
    }
}
