//! What the target's own georeferencing already says, and the transforms that compete with the
//! best one.
//!
//! **In:** the fit options' bounds ([`super::FitParams::max_shift_m`] and its siblings), the
//! target's centre, and hypotheses. **Out:** a [`Prior`] that admits or refuses a transform,
//! and a [`Competitor`] summary of a transform for reports.
//!
//! A georeferenced target is already close to the reference: the transform between the two is
//! near the identity (a shift of metres, a rotation of a fraction of a degree, a scale error of
//! some hundred ppm). Nearly regular layouts (planned lots, terraced rows, orchards, solar
//! arrays) fit equally well under rotations by the layout's symmetry and shifts by its period;
//! bounding the search by the georeferencing rules most of them out, and whatever is left is
//! compared by support ([`super::robust_fit`]).

use super::similarity::Similarity;

/// Largest shift, at the target's centre, that a georeferenced target may have by default
/// (metres): generous for GNSS-referenced surveys and orthophotos, whose errors are metres
/// (common practice; no published source).
pub const DEFAULT_MAX_SHIFT_M: f64 = 100.0;
/// Largest rotation a georeferenced target may have by default (degrees): well below the
/// 60° and 90° symmetries of hexagonal and square layouts (common practice).
pub const DEFAULT_MAX_ROTATION_DEG: f64 = 5.0;
/// Largest scale error a georeferenced target may have by default (ppm): a projection's scale
/// factor varies by up to about 1000 ppm across a UTM zone, paper maps shrink by a few parts
/// per thousand (common practice).
pub const DEFAULT_MAX_SCALE_PPM: f64 = 5000.0;

/// Bounds on the transform, in working units around the target's centre.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Prior {
    /// The target's centre (working frame), where the shift is measured.
    pub centre: [f64; 2],
    /// Largest shift at `centre`, working units.
    pub max_shift: f64,
    /// Largest rotation, radians.
    pub max_rotation: f64,
    /// Largest scale error, as a fraction (1e-6 = 1 ppm), measured against `unit_scale`.
    pub max_scale_error: f64,
    /// The scale of a fit with no scale error: 1, or for a local grid of a declared unit that
    /// unit in working units (0.3048 for a grid in feet on a CRS in metres).
    pub unit_scale: f64,
}

impl Prior {
    /// True when `s` is within every bound.
    pub fn admits(&self, s: &Similarity) -> bool {
        self.admits_within(s, &Slack::default())
    }

    /// True when `s` is within every bound widened by `slack`: for a hypothesis whose own
    /// noise exceeds the bounds (see [`Slack::for_hypothesis`]), so that a transform the truth
    /// would pass is not set aside for its noise.
    pub fn admits_within(&self, s: &Similarity, slack: &Slack) -> bool {
        let c = s.apply(self.centre);
        let shift = (c[0] - self.centre[0]).hypot(c[1] - self.centre[1]);
        shift <= self.max_shift + slack.shift
            && s.rotation().abs() <= self.max_rotation + slack.rotation
            && (s.scale() / self.unit_scale - 1.0).abs() <= self.max_scale_error + slack.scale
    }
}

/// How far a transform fitted on a few landmarks may stray from the truth by their noise
/// alone; the bounds of a [`Prior`] are widened by it before a hypothesis is set aside.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Slack {
    /// Shift at the prior's centre, working units.
    pub shift: f64,
    /// Rotation, radians.
    pub rotation: f64,
    /// Scale error, as a fraction.
    pub scale: f64,
}

impl Slack {
    /// The slack of a similarity fitted on the target landmarks `fitted`, each off by up to
    /// `tolerance` (working units), judged at `centre`. A landmark off by `tolerance` at
    /// distance `r` from the landmarks' centroid turns the fit by up to about `tolerance / r`
    /// and scales it by as much; the shift at `centre`, `d` from the centroid, then moves by
    /// up to `tolerance` plus both times `d` (small-angle geometry; the bound is generous on
    /// purpose, as the final fit on every control point is held to the bounds themselves).
    pub fn for_hypothesis(
        fitted: impl Iterator<Item = [f64; 2]>,
        tolerance: f64,
        centre: [f64; 2],
    ) -> Slack {
        let fitted: Vec<[f64; 2]> = fitted.collect();
        if fitted.is_empty() || tolerance.is_nan() || tolerance <= 0.0 {
            return Slack::default();
        }
        let n = fitted.len() as f64;
        let m = [
            fitted.iter().map(|p| p[0]).sum::<f64>() / n,
            fitted.iter().map(|p| p[1]).sum::<f64>() / n,
        ];
        let r = fitted
            .iter()
            .map(|p| (p[0] - m[0]).hypot(p[1] - m[1]))
            .fold(0.0, f64::max);
        if r.is_nan() || r <= 0.0 {
            return Slack::default();
        }
        let angular = tolerance / r;
        let d = (centre[0] - m[0]).hypot(centre[1] - m[1]);
        Slack {
            shift: tolerance + 2.0 * angular * d,
            rotation: angular,
            scale: angular,
        }
    }
}

/// A transform as reports state it, and the pairs it is supported by.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Competitor {
    /// The transform.
    #[serde(skip)]
    pub transform: Similarity,
    /// Rotation, degrees counter-clockwise.
    pub rotation_deg: f64,
    /// Scale error, ppm.
    pub scale_ppm: f64,
    /// Shift at the target's centre, east and north, metres.
    pub shift_m: [f64; 2],
    /// Mutual pairs within the inlier tolerance, on the landmarks compared.
    pub support: usize,
}

impl Competitor {
    /// Summarises `s` with its `support`; `centre` is the target's centre,
    /// `metres_per_unit` converts the shift and the scale error is measured against
    /// `unit_scale` (see [`Prior::unit_scale`]).
    pub fn new(
        s: Similarity,
        support: usize,
        centre: [f64; 2],
        metres_per_unit: f64,
        unit_scale: f64,
    ) -> Self {
        let c = s.apply(centre);
        Competitor {
            transform: s,
            rotation_deg: s.rotation().to_degrees(),
            scale_ppm: (s.scale() / unit_scale - 1.0) * 1e6,
            shift_m: [
                (c[0] - centre[0]) * metres_per_unit,
                (c[1] - centre[1]) * metres_per_unit,
            ],
            support,
        }
    }
}

/// Whether two supports are told apart: the runner-up's is more than three standard
/// deviations below the best's, taking each count as Poisson (the difference of two Poisson
/// counts has variance n₁ + n₂; the normal approximation, common practice).
pub fn clearly_ahead(best: usize, runner_up: usize) -> bool {
    let (b, r) = (best as f64, runner_up as f64);
    b - r > 3.0 * (b + r).sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bounds_are_measured_at_the_centre() {
        let prior = Prior {
            centre: [1000.0, 2000.0],
            max_shift: 10.0,
            max_rotation: 1f64.to_radians(),
            max_scale_error: 1e-3,
            unit_scale: 1.0,
        };
        assert!(prior.admits(&Similarity::IDENTITY));
        // A rotation of 0.5° about the centre moves nothing there: admitted, although it
        // moves the working origin by 19 units.
        let r = Similarity::from_params(1.0, 0.5f64.to_radians(), 0.0, 0.0);
        let about_centre = Similarity {
            tx: 1000.0 - r.apply([1000.0, 2000.0])[0],
            ty: 2000.0 - r.apply([1000.0, 2000.0])[1],
            ..r
        };
        assert!(prior.admits(&about_centre));
        assert!(
            !prior.admits(&r),
            "the same rotation about the origin shifts the centre"
        );
        let shifted = Similarity {
            tx: 9.0,
            ty: 5.0,
            ..Similarity::IDENTITY
        };
        assert!(!prior.admits(&shifted), "a shift of 10.3");
        let rotated = Similarity::from_params(1.0, 90f64.to_radians(), 0.0, 0.0);
        assert!(!prior.admits(&rotated));
        let scaled = Similarity::from_params(1.002, 0.0, 0.0, 0.0);
        assert!(!prior.admits(&scaled));
    }

    #[test]
    fn three_sigma_margin() {
        assert!(clearly_ahead(1000, 800));
        assert!(!clearly_ahead(1000, 950));
        // 10 − 0 > 3·√10 ≈ 9.49, but 9 − 0 > 3·√9 = 9 does not hold.
        assert!(clearly_ahead(10, 0));
        assert!(!clearly_ahead(9, 0));
    }
}
