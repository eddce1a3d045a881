//! Stage 5 — robust fit: from candidate correspondences to a verified similarity and its
//! control points.
//!
//! **In:** both surveys' landmarks in the working frame with their spatial indexes, their signatures,
//! the candidates of the matching stage, and [`FitParams`].
//! **Out:** either a [`Solution`] (transform, standard errors, control-point pairs with
//! residuals, significance) or a [`Rejection`] saying why no consistent transform was
//! accepted ([`RejectReason`]: data, rendered to words by the report).
//!
//! Steps: [`ransac`] over 1-signature and 2-point hypotheses; [`guided`] matching from the best
//! few (coarse on a spread subset, then on every landmark); the [`significance`] test against
//! chance; the final closed-form least-squares fit ([`similarity`]) with standard errors.

pub mod guided;
pub mod models;
pub mod prior;
pub mod ransac;
pub mod sample_count;
pub mod significance;
pub mod similarity;

pub use guided::Pair;
pub use models::Model;
pub use similarity::{Similarity, SimilarityFit};

use crate::matching::Candidate;
use crate::signatures::Signatures;
use crate::spatial::PointIndex;
use guided::{guided_match, Frames};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use significance::Significance;

/// Options of the robust fit.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct FitParams {
    /// Radius of the search in metres: how far a mapped target landmark may lie from its
    /// reference landmark to count as paired in RANSAC, guided matching and the significance
    /// test; `None`: a quarter of the reference's median landmark spacing.
    pub search_radius_m: Option<f64>,
    /// The largest residual a control point may have, in metres; `None`: 99.9% of the
    /// residual spread (Rayleigh, from the median residual), at most the search radius.
    pub max_residual_m: Option<f64>,
    /// Retired: it set both of the above. Kept only to refuse it by name: a pipeline file
    /// holding it is refused as it is read (with its line), a value set here by
    /// [`FitParams::validate`] ([`FitError::RetiredTolerance`]); never written.
    #[serde(skip_serializing, deserialize_with = "refuse_retired_tolerance")]
    pub tolerance_m: Option<f64>,
    /// The transform model written ([`models`]): fitted on the similarity's control points,
    /// compared with the others in every report, never chosen on its own. `tps` (a thin-plate
    /// spline, for the warp) only for a raster target.
    pub model: Model,
    /// RANSAC confidence of drawing one all-inlier sample.
    pub confidence: f64,
    /// Upper bound on RANSAC rounds.
    pub max_rounds: usize,
    /// Seed of every random choice.
    pub seed: u64,
    /// Accept a transform when the expected number of chance detections is below this.
    pub false_alarm_level: f64,
    /// Fewest control points to accept a transform.
    pub min_control_points: usize,
    /// Largest shift, at the target's centre, that the target's georeferencing may have
    /// (metres); `None`: [`prior::DEFAULT_MAX_SHIFT_M`] for a georeferenced target, unbounded
    /// for a local grid. `inf` lifts the bound.
    pub max_shift_m: Option<f64>,
    /// Largest rotation the target's georeferencing may have (degrees); `None`:
    /// [`prior::DEFAULT_MAX_ROTATION_DEG`] for a georeferenced target, unbounded for a local
    /// grid.
    pub max_rotation_deg: Option<f64>,
    /// Largest scale error the target's georeferencing may have (ppm); `None`:
    /// [`prior::DEFAULT_MAX_SCALE_PPM`] for a georeferenced target, unbounded for a local grid.
    pub max_scale_ppm: Option<f64>,
}

impl Default for FitParams {
    fn default() -> Self {
        FitParams {
            search_radius_m: None,
            max_residual_m: None,
            tolerance_m: None,
            model: Model::Similarity,
            confidence: 0.999,
            max_rounds: 300_000,
            seed: 20_261_201,
            false_alarm_level: 0.01,
            min_control_points: 5,
            max_shift_m: None,
            max_rotation_deg: None,
            max_scale_ppm: None,
        }
    }
}

/// What a pipeline file's `fit.tolerance_m` is told (the command line's `--tolerance` gets
/// [`FitError::RetiredTolerance`], rendered with its flags).
const RETIRED_TOLERANCE: &str = "fit.tolerance_m no longer exists: it set two different things, now set apart: fit.search_radius_m (the radius of the search: how far a mapped landmark may lie from its partner in RANSAC, guided matching and the significance test) and fit.max_residual_m (the largest residual a control point may have); give either or both in metres instead";

fn refuse_retired_tolerance<'de, D: serde::Deserializer<'de>>(
    _: D,
) -> Result<Option<f64>, D::Error> {
    Err(serde::de::Error::custom(RETIRED_TOLERANCE))
}

/// Why the options are unusable.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum FitError {
    /// A distance (search radius, largest residual) not a positive number.
    #[error("{key} must be a positive number of metres (got {value})")]
    InvalidDistance {
        /// The option's key.
        key: &'static str,
        /// The value given.
        value: f64,
    },
    /// `fit.model = tps` for a target that is not a raster image.
    #[error("fit.model = tps (a thin-plate spline through every control point) is how a raster image is warped; {target} is not a raster image: choose fit.model = similarity, affine or polynomial2")]
    TpsNeedsRaster {
        /// The target ("the target (path)").
        target: String,
    },
    /// The retired key `fit.tolerance_m` was given.
    #[error("{RETIRED_TOLERANCE} (got {0})")]
    RetiredTolerance(f64),
    /// Confidence outside (0, 1).
    #[error("fit.confidence must be between 0 and 1, exclusive (got {0})")]
    InvalidConfidence(f64),
    /// False-alarm level outside (0, 1].
    #[error("fit.false_alarm_level must be in (0, 1] (got {0})")]
    InvalidFalseAlarmLevel(f64),
    /// Too few control points asked for.
    #[error(
        "fit.min_control_points must be at least 3: fewer leave a similarity unchecked (got {0})"
    )]
    InvalidMinControlPoints(usize),
    /// RANSAC rounds of zero.
    #[error("fit.max_rounds must be at least 1 (got 0)")]
    InvalidMaxRounds,
    /// A survey has fewer landmarks than a transform needs control points.
    #[error("{role} has {found} landmarks, fewer than the {required} control points a transform needs (fit.min_control_points), so no transform could be accepted; lower fit.min_control_points (at least 3) or use a larger area with more landmarks")]
    FewerLandmarksThanControlPoints {
        /// The survey ("the target (path)").
        role: String,
        /// Its landmarks.
        found: usize,
        /// [`FitParams::min_control_points`].
        required: usize,
    },
    /// A bound of the prior is not a positive number (or inf).
    #[error("{key} must be a positive number, or inf for no bound (got {value})")]
    InvalidBound {
        /// The option's key.
        key: &'static str,
        /// The value given.
        value: f64,
    },
}

impl FitParams {
    /// Checks the options alone.
    pub fn validate(&self) -> Result<(), FitError> {
        if let Some(t) = self.tolerance_m {
            return Err(FitError::RetiredTolerance(t));
        }
        for (key, v) in [
            ("fit.search_radius_m", self.search_radius_m),
            ("fit.max_residual_m", self.max_residual_m),
        ] {
            if let Some(value) = v {
                if !(value.is_finite() && value > 0.0) {
                    return Err(FitError::InvalidDistance { key, value });
                }
            }
        }
        if !(self.confidence > 0.0 && self.confidence < 1.0) {
            return Err(FitError::InvalidConfidence(self.confidence));
        }
        if !(self.false_alarm_level > 0.0 && self.false_alarm_level <= 1.0) {
            return Err(FitError::InvalidFalseAlarmLevel(self.false_alarm_level));
        }
        if self.min_control_points < 3 {
            return Err(FitError::InvalidMinControlPoints(self.min_control_points));
        }
        if self.max_rounds == 0 {
            return Err(FitError::InvalidMaxRounds);
        }
        for (key, v) in [
            ("fit.max_shift_m", self.max_shift_m),
            ("fit.max_rotation_deg", self.max_rotation_deg),
            ("fit.max_scale_ppm", self.max_scale_ppm),
        ] {
            if let Some(value) = v {
                if value.is_nan() || value <= 0.0 {
                    return Err(FitError::InvalidBound { key, value });
                }
            }
        }
        Ok(())
    }

    /// Refuses surveys with fewer landmarks than [`FitParams::min_control_points`]: no
    /// transform could ever be accepted. `sizes` and `labels`: the reference's and the target's
    /// landmark counts and names.
    pub fn check_sizes(&self, sizes: [usize; 2], labels: &[String; 2]) -> Result<(), FitError> {
        let small = if sizes[1] < sizes[0] { 1 } else { 0 };
        if sizes[small] < self.min_control_points {
            return Err(FitError::FewerLandmarksThanControlPoints {
                role: labels[small].clone(),
                found: sizes[small],
                required: self.min_control_points,
            });
        }
        Ok(())
    }

    /// Refuses `fit.model = tps` unless the target (named `label`) is a raster image.
    pub fn check_model(&self, target_is_raster: bool, label: &str) -> Result<(), FitError> {
        if self.model == Model::Tps && !target_is_raster {
            return Err(FitError::TpsNeedsRaster {
                target: label.to_string(),
            });
        }
        Ok(())
    }

    /// The bounds on the transform around the target's `centre` (working units; `metres` per
    /// unit): the options given, else the defaults when the target is `georeferenced`; `None`
    /// when nothing bounds it (a local grid with no bound given).
    pub fn prior(
        &self,
        georeferenced: bool,
        centre: [f64; 2],
        metres_per_unit: f64,
        unit_scale: f64,
    ) -> Option<prior::Prior> {
        let given = [self.max_shift_m, self.max_rotation_deg, self.max_scale_ppm];
        if !georeferenced && given.iter().all(Option::is_none) {
            return None;
        }
        let pick = |v: Option<f64>, default: f64| match v {
            Some(x) => x,
            None if georeferenced => default,
            None => f64::INFINITY,
        };
        Some(prior::Prior {
            centre,
            max_shift: pick(self.max_shift_m, prior::DEFAULT_MAX_SHIFT_M) / metres_per_unit,
            max_rotation: pick(self.max_rotation_deg, prior::DEFAULT_MAX_ROTATION_DEG).to_radians(),
            max_scale_error: pick(self.max_scale_ppm, prior::DEFAULT_MAX_SCALE_PPM) * 1e-6,
            unit_scale,
        })
    }
}

/// Everything the robust fit reads.
pub struct FitInput<'a> {
    /// Reference landmarks, working frame.
    pub reference: &'a [[f64; 2]],
    /// Target landmarks, working frame.
    pub target: &'a [[f64; 2]],
    /// Spatial index of `reference`.
    pub reference_index: &'a PointIndex,
    /// Spatial index of `target`.
    pub target_index: &'a PointIndex,
    /// Indices of `target` in Morton order ([`crate::spatial::morton_order`]).
    pub target_order: &'a [u32],
    /// Reference signatures.
    pub reference_signatures: &'a Signatures,
    /// Target signatures.
    pub target_signatures: &'a Signatures,
    /// Candidates, best first.
    pub candidates: &'a [Candidate],
    /// Metres per working-frame unit.
    pub metres_per_unit: f64,
    /// Median nearest-neighbour spacing of the reference, working units.
    pub reference_spacing: f64,
    /// Whether the target is georeferenced (its own CRS, not a local grid): then its
    /// georeferencing bounds the transform by default ([`FitParams::prior`]).
    pub georeferenced: bool,
    /// The scale of a fit with no scale error ([`prior::Prior::unit_scale`]).
    pub unit_scale: f64,
}

/// An accepted transform and its control points.
#[derive(Debug, Clone)]
pub struct Solution {
    /// Final least-squares fit on all control points.
    pub fit: SimilarityFit,
    /// Control points, residuals under the model written ([`models::Comparison::written`]:
    /// the similarity `fit.transform` unless `fit.model` chose another), working units.
    pub pairs: Vec<Pair>,
    /// Every model fitted on the control points, the tests between them and the one written.
    pub models: models::Comparison,
    /// Largest residual a control point may have, working units
    /// ([`FitParams::max_residual_m`], or 99.9% of the residual spread).
    pub max_residual: f64,
    /// Radius of the search (RANSAC, guided matching, significance), working units
    /// ([`FitParams::search_radius_m`], or a quarter of the reference's median spacing).
    pub search_radius: f64,
    /// The significance test.
    pub significance: Significance,
    /// RANSAC rounds run.
    pub ransac_rounds: usize,
    /// Consensus of the RANSAC hypothesis that led here (of the scoring sample).
    pub ransac_consensus: usize,
    /// Size of the RANSAC scoring sample.
    pub ransac_sample: usize,
    /// Guided-matching refit rounds.
    pub guided_rounds: usize,
    /// The chosen transform as reports state it, with its support.
    pub chosen: prior::Competitor,
    /// The best transform that is not the chosen one (within the bounds), with its support
    /// on the same landmarks: the margin to it is what makes the choice unambiguous.
    pub runner_up: Option<prior::Competitor>,
    /// The bounds the target's georeferencing set on the search, if any.
    pub bounds: Option<prior::Prior>,
}

/// Why no transform was accepted: the ways the robust fit ends without one.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RejectReason {
    /// No candidate correspondence produced a hypothesis that passed the local pre-test: the
    /// neighbourhoods of the two surveys never agreed.
    NoHypothesis {
        /// Hypotheses set aside as outside the bounds of the target's georeferencing.
        outside_bounds: usize,
        /// Hypotheses made.
        made: usize,
    },
    /// On a large survey, no hypothesis refined on the spread subset stood out from chance.
    ChanceOnSubset {
        /// Landmarks the best of them paired.
        paired: usize,
        /// Landmarks of the subset in the reference's coverage.
        sampled: usize,
        /// The chance rate (Poisson) at the reference's density.
        chance_rate: f64,
    },
    /// The best transform pairs fewer landmarks than [`FitParams::min_control_points`].
    TooFewControlPoints {
        /// Landmarks paired.
        paired: usize,
        /// The least accepted.
        required: usize,
    },
    /// Chance explains the best transform's pairs (the significance test failed).
    NotSignificant {
        /// Landmarks paired.
        paired: usize,
        /// Landmarks in the reference's coverage.
        trials: usize,
        /// The larger of the Poisson and the decoy chance rates.
        chance_rate: f64,
        /// log10 of the expected number of false detections.
        log10_false_alarms: f64,
        /// The level it had to be below ([`FitParams::false_alarm_level`]).
        level: f64,
    },
    /// The control points are degenerate (all at one place): no similarity can be fitted.
    DegenerateControlPoints,
    /// The model asked for (`fit.model`) could not be fitted on the control points: too few,
    /// or placed so that they do not determine it.
    ModelNotFitted {
        /// The model.
        model: Model,
        /// Control points.
        paired: usize,
        /// The fewest it needs.
        required: usize,
    },
    /// The best transform lies outside the bounds the target's georeferencing sets.
    OutsidePrior {
        /// The transform found.
        found: prior::Competitor,
    },
    /// Another transform fits about as well (a symmetric or periodic layout): the data do not
    /// decide between them.
    Ambiguous {
        /// The best transform.
        best: prior::Competitor,
        /// The one that fits about as well.
        runner_up: prior::Competitor,
    },
}

/// No transform was accepted.
#[derive(Debug, Clone)]
pub struct Rejection {
    /// Why.
    pub reason: RejectReason,
    /// Radius of the search, working units.
    pub search_radius: f64,
    /// The best attempt's significance, if any attempt got that far.
    pub significance: Option<Significance>,
    /// RANSAC rounds run.
    pub ransac_rounds: usize,
    /// Transforms the neighbourhoods proposed, and how many of them lay outside the bounds
    /// of the target's georeferencing (by more than their own noise).
    pub hypotheses: [usize; 2],
}

/// Landmark count above which guided matching first converges on a spread subset.
const COARSE_ABOVE: usize = 40_000;
/// Size of that subset, and of the subset on which decoys run.
const COARSE_SIZE: usize = 20_000;
/// 99.9% point of the Rayleigh distribution in units of σ: √(−2 ln 0.001).
const RAYLEIGH_999: f64 = 3.716_922;
/// Mirrored decoys run for the empirical chance rate.
const DECOYS: usize = 6;

/// Runs RANSAC, guided matching and the significance test. `progress` is told each step.
pub fn robust_fit(
    input: &FitInput,
    params: &FitParams,
    progress: &mut dyn FnMut(&str),
) -> Result<Solution, Rejection> {
    let radius = match params.search_radius_m {
        Some(t) => t / input.metres_per_unit,
        None => 0.25 * input.reference_spacing,
    };
    // Trials of the significance test: mapped targets whose nearest reference landmark is
    // within three median spacings, i.e. inside the reference's coverage.
    let coverage = 3.0 * input.reference_spacing;
    let frames = Frames {
        reference: input.reference,
        target: input.target,
        reference_index: input.reference_index,
        target_index: input.target_index,
    };
    let centre = crate::spatial::Extent::of(input.target).centre();
    let prior = params.prior(
        input.georeferenced,
        centre,
        input.metres_per_unit,
        input.unit_scale,
    );
    progress("searching for a consistent transform (RANSAC)");
    let rparams = ransac::RansacParams {
        tolerance: radius,
        confidence: params.confidence,
        max_rounds: params.max_rounds,
        seed: params.seed,
        keep: 4,
        chance_rate: significance::poisson_chance_rate(radius, input.reference_spacing),
        prior,
    };
    let r = ransac::ransac(input, &rparams);
    if r.best.is_empty() {
        return Err(Rejection {
            reason: RejectReason::NoHypothesis {
                outside_bounds: r.outside_bounds,
                made: r.hypotheses,
            },
            search_radius: radius,
            significance: None,
            ransac_rounds: r.rounds,
            hypotheses: [r.hypotheses, r.outside_bounds],
        });
    }
    progress("guided matching");
    // Each kept hypothesis is first refined on a spread subset; only the best of those, and only
    // if it stands out from chance there, is refined on every landmark. This keeps a wrong
    // hypothesis from costing full passes over a large survey.
    let coarse: Option<Vec<u32>> =
        (input.target.len() > COARSE_ABOVE).then(|| spread_subset(input.target_order, COARSE_SIZE));
    let poisson = significance::poisson_chance_rate(radius, input.reference_spacing);
    let mut ranked: Vec<(usize, Similarity, &ransac::Hypothesis)> = Vec::new();
    for h in &r.best {
        match &coarse {
            Some(sub) => {
                let g = guided_match(&frames, h.transform, radius, coverage, Some(sub), 20);
                let quick =
                    Significance::new(g.covered, g.pairs.len(), poisson, 0.0, r.hypotheses.max(1));
                if quick.is_significant(params.false_alarm_level) {
                    ranked.push((g.pairs.len(), g.transform, h));
                }
            }
            None => ranked.push((h.consensus, h.transform, h)),
        }
    }
    ranked.sort_by_key(|r| std::cmp::Reverse(r.0));
    let mut best: Option<(guided::Guided, &ransac::Hypothesis)> = None;
    let full_runs = if coarse.is_some() { 1 } else { ranked.len() };
    // The refined transforms of every kept hypothesis: the candidates for a competing
    // transform.
    let mut alternatives: Vec<Similarity> = ranked.iter().map(|r| r.1).collect();
    progress("guided matching on every landmark");
    // Every landmark, visited in Morton order: grid queries in spatial order are several
    // times faster than in file order.
    let everyone = input.target_order;
    for (i, (_, start, h)) in ranked.into_iter().take(full_runs).enumerate() {
        let g = guided_match(&frames, start, radius, coverage, Some(everyone), 20);
        alternatives[i] = g.transform;
        if best
            .as_ref()
            .is_none_or(|(b, _)| g.pairs.len() > b.pairs.len())
        {
            best = Some((g, h));
        }
    }
    let Some((g, h)) = best else {
        let h = &r.best[0];
        let sub = coarse.as_deref();
        let g = guided_match(&frames, h.transform, radius, coverage, sub, 20);
        let sig = Significance::new(g.covered, g.pairs.len(), poisson, 0.0, r.hypotheses.max(1));
        return Err(Rejection {
            reason: RejectReason::ChanceOnSubset {
                paired: g.pairs.len(),
                sampled: g.covered,
                chance_rate: poisson,
            },
            search_radius: radius,
            significance: Some(sig),
            ransac_rounds: r.rounds,
            hypotheses: [r.hypotheses, r.outside_bounds],
        });
    };
    progress("testing significance against mirrored decoys");
    let decoy_rate = decoy_chance_rate(
        &frames,
        input.target_order,
        &g.transform,
        radius,
        coverage,
        params.seed,
    );
    // Hypotheses: RANSAC's, the guided starts, and the decoys.
    let hypotheses = r.hypotheses + r.best.len() + DECOYS;
    let sig = Significance::new(g.covered, g.pairs.len(), poisson, decoy_rate, hypotheses);
    let reject = |reason: RejectReason| {
        Err(Rejection {
            reason,
            search_radius: radius,
            significance: Some(sig),
            ransac_rounds: r.rounds,
            hypotheses: [r.hypotheses, r.outside_bounds],
        })
    };
    if g.pairs.len() < params.min_control_points {
        return reject(RejectReason::TooFewControlPoints {
            paired: g.pairs.len(),
            required: params.min_control_points,
        });
    }
    if !sig.is_significant(params.false_alarm_level) {
        return reject(RejectReason::NotSignificant {
            paired: sig.inliers,
            trials: sig.trials,
            chance_rate: poisson.max(decoy_rate),
            log10_false_alarms: sig.log10_false_alarms,
            level: params.false_alarm_level,
        });
    }
    // The largest residual a control point may have: as given, or what the residuals show:
    // 3.717 σ̂ is the 99.9% point of the Rayleigh law of a 2-D residual with σ per coordinate,
    // and σ̂ comes from the median residual (Rayleigh median = σ·√(2 ln 2)), robust to the
    // outliers still inside the search radius.
    let mut g = g;
    let mut max_residual = radius;
    let wanted = match params.max_residual_m {
        Some(m) => m / input.metres_per_unit,
        None => {
            let mut res: Vec<f64> = g.pairs.iter().map(|p| p.residual).collect();
            let mid = res.len() / 2;
            res.select_nth_unstable_by(mid, f64::total_cmp);
            let sigma = res[mid] / (2.0 * std::f64::consts::LN_2).sqrt();
            (RAYLEIGH_999 * sigma).clamp(0.02 * radius, radius)
        }
    };
    if wanted != radius {
        progress("pairing the control points within the largest residual");
        let g2 = guided_match(&frames, g.transform, wanted, coverage, Some(everyone), 10);
        if g2.pairs.len() >= params.min_control_points {
            g = g2;
            max_residual = wanted;
        } else if params.max_residual_m.is_some() {
            return reject(RejectReason::TooFewControlPoints {
                paired: g2.pairs.len(),
                required: params.min_control_points,
            });
        }
    }
    let Some(fit) = guided::refit(&frames, &g.pairs) else {
        return reject(RejectReason::DegenerateControlPoints);
    };
    // A fit that the bounds of the target's own georeferencing rule out is never reported.
    let subset = coarse.as_deref().unwrap_or(everyone);
    let support = |t: &Similarity| {
        guided::mutual_pairs(&frames, t, max_residual, coverage, Some(subset))
            .0
            .len()
    };
    let summary = |t: Similarity, n: usize| {
        prior::Competitor::new(t, n, centre, input.metres_per_unit, input.unit_scale)
    };
    let chosen = summary(fit.transform, support(&fit.transform));
    // The bounds hold the fit to within three of its standard errors (common practice for
    // "the data rule it out"): a truth just inside a tight bound is not refused for the
    // fit's own noise. Shift at the bounds' centre, `d` from the control points' centroid:
    // σ/√n there plus what the rotation and scale errors add over `d`.
    let slack = |p: &prior::Prior| {
        let n = g.pairs.len() as f64;
        let m = g.pairs.iter().fold([0.0, 0.0], |m, q| {
            let t = input.target[q.target as usize];
            [m[0] + t[0] / n, m[1] + t[1] / n]
        });
        let d = (p.centre[0] - m[0]).hypot(p.centre[1] - m[1]);
        let finite = |v: f64| if v.is_finite() { v } else { 0.0 };
        prior::Slack {
            shift: 3.0 * finite(fit.sigma / n.sqrt() + (fit.se_rotation + fit.se_scale) * d),
            rotation: 3.0 * finite(fit.se_rotation),
            scale: 3.0 * finite(fit.se_scale / p.unit_scale),
        }
    };
    if prior.is_some_and(|p| !p.admits_within(&fit.transform, &slack(&p))) {
        return reject(RejectReason::OutsidePrior { found: chosen });
    }
    progress("comparing competing transforms");
    let runner_up = competing_transform(
        &frames,
        &alternatives,
        &fit.transform,
        prior.as_ref(),
        radius,
        coverage,
        Some(subset),
    )
    .map(|t| summary(t, support(&t)));
    if let Some(second) = runner_up {
        if !prior::clearly_ahead(chosen.support, second.support) {
            return reject(RejectReason::Ambiguous {
                best: chosen,
                runner_up: second,
            });
        }
    }
    let mut solution = Solution {
        fit,
        pairs: g.pairs,
        // Filled in just below, from the control points.
        models: models::compare(&[], &[], &fit.transform, params.model),
        max_residual,
        search_radius: radius,
        significance: sig,
        ransac_rounds: r.rounds,
        ransac_consensus: h.consensus,
        ransac_sample: r.sample_size,
        guided_rounds: g.rounds,
        chosen,
        runner_up,
        bounds: prior,
    };
    solution.refresh_models(input.reference, input.target, params.model);
    if solution.models.fit(params.model).is_none() && params.model != Model::Tps {
        return reject(RejectReason::ModelNotFitted {
            model: params.model,
            paired: solution.pairs.len(),
            required: params.model.min_control_points(),
        });
    }
    Ok(solution)
}

impl Solution {
    /// Fits every model on the control points again (after they changed, e.g. refined on the
    /// pixels) and sets their residuals to the written model's. `reference`, `target`: the
    /// landmarks in the working frame.
    pub fn refresh_models(&mut self, reference: &[[f64; 2]], target: &[[f64; 2]], chosen: Model) {
        let from: Vec<[f64; 2]> = self
            .pairs
            .iter()
            .map(|p| target[p.target as usize])
            .collect();
        let to: Vec<[f64; 2]> = self
            .pairs
            .iter()
            .map(|p| reference[p.reference as usize])
            .collect();
        self.models = models::compare(&from, &to, &self.fit.transform, chosen);
        let written = self.models.written();
        for (p, r) in self.pairs.iter_mut().zip(&written.residuals) {
            p.residual = r[0].hypot(r[1]);
        }
    }

    /// Maps a target working point to the reference working frame by the model written.
    pub fn map(&self, p: [f64; 2]) -> [f64; 2] {
        self.models.written().apply(p)
    }
}

/// The best of the `alternatives` (each refined again by guided matching) that is admitted by
/// the prior and is not `best` within the search radius anywhere over the target's extent:
/// the transform that competes with the chosen one.
fn competing_transform(
    frames: &Frames,
    alternatives: &[Similarity],
    best: &Similarity,
    prior: Option<&prior::Prior>,
    tolerance: f64,
    coverage: f64,
    subset: Option<&[u32]>,
) -> Option<Similarity> {
    let probe = guided::extent_corners(frames.target);
    let same = |a: &Similarity, b: &Similarity| {
        probe
            .iter()
            .all(|&p| crate::spatial::dist2(a.apply(p), b.apply(p)) < 4.0 * tolerance * tolerance)
    };
    let mut found: Vec<(usize, Similarity)> = Vec::new();
    for a in alternatives {
        let g = guided_match(frames, *a, tolerance, coverage, subset, 20);
        let t = g.transform;
        if same(&t, best)
            || prior.is_some_and(|p| !p.admits(&t))
            || found.iter().any(|(_, f)| same(f, &t))
        {
            continue;
        }
        found.push((g.pairs.len(), t));
    }
    found.into_iter().max_by_key(|f| f.0).map(|f| f.1)
}

/// About `n` landmarks spread evenly over a set, from its Morton `order` (every m-th).
fn spread_subset(order: &[u32], n: usize) -> Vec<u32> {
    let step = (order.len() / n.max(1)).max(1);
    order.iter().copied().step_by(step).collect()
}

/// The highest inlier rate guided matching reaches from mirror images of the target: a spread
/// subset of at most 5000 target landmarks reflected about its centroid (along an axis at a seeded random angle), then placed by
/// `s`. No similarity can align a mirror image of a real scene, so what it reaches is chance.
fn decoy_chance_rate(
    frames: &Frames,
    target_order: &[u32],
    s: &Similarity,
    tolerance: f64,
    coverage: f64,
    seed: u64,
) -> f64 {
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed ^ 0x5eed_dec0);
    let subset = spread_subset(target_order, 5_000);
    let n = subset.len() as f64;
    let c = subset.iter().fold([0.0, 0.0], |a, &i| {
        let p = frames.target[i as usize];
        [a[0] + p[0] / n, a[1] + p[1] / n]
    });
    // The mirror axes are drawn first, in decoy order, from the one seeded stream; then the
    // decoys run in parallel, each on its own axis, and the highest rate is kept. The rate is
    // the same whatever the number of threads.
    let axes: Vec<f64> = (0..DECOYS)
        .map(|d| std::f64::consts::PI * (d as f64 + rng.gen::<f64>()) / DECOYS as f64)
        .collect();
    let rates: Vec<f64> = axes
        .par_iter()
        .map(|&axis| {
            let (cos2, sin2) = ((2.0 * axis).cos(), (2.0 * axis).sin());
            let mirrored: Vec<[f64; 2]> = subset
                .iter()
                .map(|&i| {
                    let p = frames.target[i as usize];
                    let (x, y) = (p[0] - c[0], p[1] - c[1]);
                    [c[0] + cos2 * x + sin2 * y, c[1] + sin2 * x - cos2 * y]
                })
                .collect();
            let Some(index) = PointIndex::new(&mirrored) else {
                return 0.0;
            };
            let decoy = Frames {
                reference: frames.reference,
                target: &mirrored,
                reference_index: frames.reference_index,
                target_index: &index,
            };
            let g = guided_match(&decoy, *s, tolerance, coverage, None, 10);
            if g.covered > 0 {
                g.pairs.len() as f64 / g.covered as f64
            } else {
                0.0
            }
        })
        .collect();
    rates.into_iter().fold(0.0, f64::max)
}

#[cfg(test)]
mod option_tests {
    use super::*;

    #[test]
    fn every_numeric_option_refuses_senseless_values_by_its_key() {
        let cases: Vec<(FitParams, &str)> = vec![
            (
                FitParams {
                    max_rounds: 0,
                    ..FitParams::default()
                },
                "fit.max_rounds",
            ),
            (
                FitParams {
                    confidence: f64::NAN,
                    ..FitParams::default()
                },
                "fit.confidence",
            ),
            (
                FitParams {
                    confidence: 1.0,
                    ..FitParams::default()
                },
                "fit.confidence",
            ),
            (
                FitParams {
                    search_radius_m: Some(0.0),
                    ..FitParams::default()
                },
                "fit.search_radius_m",
            ),
            (
                FitParams {
                    search_radius_m: Some(f64::INFINITY),
                    ..FitParams::default()
                },
                "fit.search_radius_m",
            ),
            (
                FitParams {
                    max_residual_m: Some(-1.0),
                    ..FitParams::default()
                },
                "fit.max_residual_m",
            ),
            (
                FitParams {
                    max_residual_m: Some(f64::NAN),
                    ..FitParams::default()
                },
                "fit.max_residual_m",
            ),
            (
                FitParams {
                    tolerance_m: Some(1.0),
                    ..FitParams::default()
                },
                "fit.tolerance_m",
            ),
            (
                FitParams {
                    false_alarm_level: f64::NAN,
                    ..FitParams::default()
                },
                "fit.false_alarm_level",
            ),
            (
                FitParams {
                    false_alarm_level: -1.0,
                    ..FitParams::default()
                },
                "fit.false_alarm_level",
            ),
            (
                FitParams {
                    min_control_points: 2,
                    ..FitParams::default()
                },
                "fit.min_control_points",
            ),
            (
                FitParams {
                    max_shift_m: Some(-1.0),
                    ..FitParams::default()
                },
                "fit.max_shift_m",
            ),
            (
                FitParams {
                    max_rotation_deg: Some(0.0),
                    ..FitParams::default()
                },
                "fit.max_rotation_deg",
            ),
            (
                FitParams {
                    max_scale_ppm: Some(f64::NAN),
                    ..FitParams::default()
                },
                "fit.max_scale_ppm",
            ),
        ];
        for (params, key) in cases {
            let e = params.validate().unwrap_err().to_string();
            assert!(e.starts_with(key), "{key}: {e}");
        }
        assert!(FitParams::default().validate().is_ok());
        let unbounded = FitParams {
            max_shift_m: Some(f64::INFINITY),
            ..FitParams::default()
        };
        assert!(unbounded.validate().is_ok(), "inf lifts a bound");
    }

    #[test]
    fn surveys_smaller_than_the_control_points_required_are_refused() {
        let labels = [
            "the reference (r.gpkg)".to_string(),
            "the target (t.csv)".to_string(),
        ];
        let p = FitParams::default();
        assert!(p.check_sizes([400, 5], &labels).is_ok());
        let e = p.check_sizes([400, 4], &labels).unwrap_err().to_string();
        assert!(
            e.starts_with("the target (t.csv) has 4 landmarks, fewer than the 5"),
            "{e}"
        );
        assert!(e.contains("fit.min_control_points"), "{e}");
    }
}
