//! Persistent control points across survey epochs: the landmarks that stay put over several
//! surveys of one site, expressed in the frame of a chosen base epoch. Computes; never writes.
//!
//! **In:** an [`EpochsConfig`]: N ≥ 2 surveys (any that `match` reads, each with its own CRS or
//! a local grid), the base epoch, the filters (`min_epochs`, `stability_m`), the pair plan
//! and the match options. **Out:** an [`EpochsOutcome`]: every epoch as read, the pairwise
//! matches, and the [`Library`]: one similarity per epoch to the base with standard errors,
//! the closure checks, the tracks (kept, moved, filtered) and the counts.
//!
//! # Steps
//!
//! 1. Every epoch is read and brought into the base's working frame ([`crate::frame`]; a
//!    local-grid epoch keeps its own coordinates). The base must be georeferenced. A raster
//!    epoch's landmarks are its keypoints, read as `match` reads them
//!    ([`engine::read_survey_of_set`]) at one feature size for all epochs (the default for
//!    the coarsest pixel among them, [`engine::coarsest_pixel_m`]), at their detected
//!    sub-pixel positions. The pairs take the engine's keypoint path (signatures, matching,
//!    robust fit); its area-based seed and refinement on the pixels are not run, because they
//!    replace or move a pair's landmarks and a track must be one landmark of each epoch at
//!    one position: two rasters whose keypoints do not match (different wavelengths, such as
//!    near-infrared against red) are a failed pair, joined, if at all, through other epochs.
//! 2. **Pairs matched** ([`PairPlan`]). The default, [`PairPlan::BaseAndNeighbours`], matches
//!    every epoch against the base (a spanning star) and each non-base epoch against the next
//!    non-base epoch in the order given (a chain): 2N − 3 matches, linear in N, against
//!    N(N − 1)/2 for all pairs (45 for ten epochs, 4,950 for a hundred). Why: each non-base
//!    epoch gets two independent links (one failed match does not cut it off); the chain links
//!    epochs adjacent in time, which share the most landmarks the base lacks (built after it);
//!    and every chain pair closes a triangle with the base, so each is checked by closure.
//!    [`PairPlan::All`] matches every pair (more links and closure checks, quadratic cost).
//!    Each match is the engine's own ([`engine::solve_points`]); the cost of the run is the
//!    sum of the matches, plus linking and adjusting, which are linear in the control points.
//! 3. **Tracks** ([`tracks::link`]): union-find over the control points of all matches; a
//!    track never holds two landmarks of one epoch (conflicting links refused, best-fitting
//!    first, and counted).
//! 4. **Joint adjustment** ([`adjust::adjust`]): one similarity per epoch to the base (base
//!    fixed) from all tracks by least squares, so that a landmark missing from the base still
//!    ties the epochs that saw it; per-epoch noise estimated; covariance σ̂₀²N⁻¹.
//! 5. **Moved landmarks**: per track, T = Σ_k |e_k|² / σ_k² over its epochs (e_k: the epoch's
//!    position in the base frame minus the track's weighted mean) is χ² with 2(m − 1) degrees
//!    of freedom under "the landmark stayed put" (m epochs; the transforms' own uncertainty is
//!    neglected, small beside one landmark's). A track with P(χ² > T) < [`MOVED_ALPHA`]
//!    (0.001) moved: it is reported as moved, counted, not kept, and left out of the
//!    adjustment, which is repeated until no further track is flagged. Only movements within
//!    the matching tolerance can be seen: a landmark that moved further is not paired at all
//!    and appears as a landmark that disappeared and a new one.
//! 6. **Closure** of chained transforms: for every triangle (base, i, j) whose three pairs
//!    were matched, the pairwise fits j → i → base against j → base, compared in the linear
//!    part (a, b) and the mapped position at the centroid of the (i, j) control points:
//!    Δᵀ C⁻¹ Δ with C the sum of the three fits' propagated covariances (the fits treated as
//!    independent) is χ² with 4 degrees of freedom; above its 99 % point (13.28) the closure
//!    is flagged with a warning.
//! 7. **Filters and grade**: tracks seen in fewer than `min_epochs` epochs (default: all) or,
//!    with `stability_m`, whose largest movement between epochs exceeds it, are not kept. The
//!    stability grade of a kept track (p = P(χ² > T) of step 5):
//!    **A** seen in every epoch and p ≥ 0.05 (its scatter is what the noise gives);
//!    **B** seen in at least half of the epochs with p ≥ 0.05, or in every epoch with
//!    0.001 ≤ p < 0.05; **C** any other kept track (seen in fewer than half the epochs, or
//!    partly seen with a scatter at the edge of the noise).

pub mod adjust;
pub mod pipeline;
pub mod tracks;

use crate::config::{
    ConfigError, FitParams, FrameOptions, KeypointParams, MatchConfig, MatchingParams,
    SignatureChoice, SurveyInput,
};
use crate::engine::{self, FrameFacts};
use crate::fit::similarity::Similarity;
use crate::fit::Rejection;
use crate::frame::crs::Crs;
use crate::frame::grid::GridUnit;
use crate::frame::{self, WorkingFrame};
use crate::ingest::{IngestError, LandmarkSet};
use crate::progress::{stage, Progress};
use crate::spatial::{morton_order, PointIndex, Survey};
use adjust::{CentredFit, Obs};
use serde::{Deserialize, Serialize};
use std::path::PathBuf;
pub use tracks::{Link, MAX_EPOCHS};

/// Level of the moved-landmark test (per track): common practice in geodetic outlier
/// testing (Baarda's α₀ = 0.001 — from memory).
pub const MOVED_ALPHA: f64 = 0.001;
/// Level of the closure test (per triangle).
pub const CLOSURE_ALPHA: f64 = 0.01;
/// The p-value above which a track's scatter counts as plain noise in the grade.
pub const GRADE_ALPHA: f64 = 0.05;

/// Which epoch pairs are matched (see the module doc).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum PairPlan {
    /// Every epoch against the base, and each non-base epoch against the next: 2N − 3.
    #[default]
    BaseAndNeighbours,
    /// Every pair: N(N − 1)/2.
    All,
}

/// The options of an epochs run (`[epochs]` in a pipeline file).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EpochOptions {
    /// The base epoch, numbered from 1 in the order given: its frame (CRS) is the library's.
    #[serde(default = "one")]
    pub base: usize,
    /// Keep tracks seen in at least this many epochs; `None`: all epochs.
    #[serde(default)]
    pub min_epochs: Option<usize>,
    /// Keep tracks whose largest movement between epochs (base frame) is at most this, metres.
    #[serde(default)]
    pub stability_m: Option<f64>,
    /// Which pairs are matched.
    #[serde(default)]
    pub pairs: PairPlan,
}

fn one() -> usize {
    1
}

impl Default for EpochOptions {
    fn default() -> Self {
        EpochOptions {
            base: 1,
            min_epochs: None,
            stability_m: None,
            pairs: PairPlan::default(),
        }
    }
}

/// Everything an epochs run needs.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct EpochsConfig {
    /// The surveys, in order (time order makes the chain of [`PairPlan::BaseAndNeighbours`]
    /// link neighbours in time).
    pub epochs: Vec<SurveyInput>,
    /// Base, filters, pairs.
    pub options: EpochOptions,
    /// Working frame.
    pub frame: FrameOptions,
    /// Signature stage of every match.
    pub signatures: SignatureChoice,
    /// Matching stage.
    pub matching: MatchingParams,
    /// Robust fit.
    pub fit: FitParams,
    /// Keypoints of raster surveys.
    pub keypoints: KeypointParams,
}

impl EpochsConfig {
    /// The surveys with every option at its default.
    pub fn new(epochs: Vec<PathBuf>) -> EpochsConfig {
        EpochsConfig {
            epochs: epochs.into_iter().map(SurveyInput::new).collect(),
            options: EpochOptions::default(),
            frame: FrameOptions::default(),
            signatures: SignatureChoice::default(),
            matching: MatchingParams::default(),
            fit: FitParams::default(),
            keypoints: KeypointParams::default(),
        }
    }

    /// The base, from 0.
    pub fn base_index(&self) -> usize {
        self.options.base.saturating_sub(1)
    }

    /// The fewest epochs a kept track is seen in.
    pub fn min_epochs(&self) -> usize {
        self.options.min_epochs.unwrap_or(self.epochs.len())
    }

    /// Checks everything that needs no data (and that no survey is given twice).
    pub fn validate(&self) -> Result<(), EpochsError> {
        let n = self.epochs.len();
        if n < 2 {
            return Err(EpochsError::TooFew { given: n });
        }
        if n > MAX_EPOCHS {
            return Err(EpochsError::TooMany { given: n });
        }
        if self.options.base == 0 || self.options.base > n {
            return Err(EpochsError::BaseOutOfRange {
                base: self.options.base,
                n,
            });
        }
        if let Some(m) = self.options.min_epochs {
            if m < 2 || m > n {
                return Err(EpochsError::MinEpochs { given: m, n });
            }
        }
        if let Some(s) = self.options.stability_m {
            if !(s.is_finite() && s > 0.0) {
                return Err(EpochsError::Stability { value: s });
            }
        }
        let key = |s: &SurveyInput| {
            (
                std::fs::canonicalize(&s.path).unwrap_or_else(|_| s.path.clone()),
                s.layer.clone(),
            )
        };
        let keys: Vec<_> = self.epochs.iter().map(key).collect();
        for j in 0..n {
            for i in 0..j {
                if keys[i] == keys[j] {
                    return Err(EpochsError::SameSurvey {
                        path: self.epochs[j].path.clone(),
                        first: i + 1,
                        second: j + 1,
                    });
                }
            }
        }
        let base = &self.epochs[self.base_index()];
        if base
            .crs
            .as_deref()
            .is_some_and(|c| c.trim().to_ascii_lowercase().starts_with("local"))
        {
            return Err(EpochsError::BaseLocal {
                path: base.path.clone(),
            });
        }
        self.match_config(0, 1).validate()?;
        Ok(())
    }

    /// The match options for the pair (reference `i`, target `j`).
    fn match_config(&self, i: usize, j: usize) -> MatchConfig {
        MatchConfig {
            reference: self.epochs[i].clone(),
            target: self.epochs[j].clone(),
            frame: self.frame.clone(),
            signatures: self.signatures.clone(),
            matching: self.matching,
            fit: self.fit,
            keypoints: self.keypoints.clone(),
            refine: Default::default(),
            // The epochs' accuracy is the joint adjustment's; the pairwise matches state
            // theirs from leave-one-out residuals (no checkpoints, no hold-out).
            accuracy: Default::default(),
        }
    }
}

/// Anything that stops an epochs run (exit code 2). Messages name the file or the option by
/// its pipeline-file key (`epochs.base`) and say what to do.
#[derive(Debug, thiserror::Error)]
pub enum EpochsError {
    /// Fewer than two epochs.
    #[error("tiemark epochs needs at least two epochs (given {given}); give two or more surveys of the site")]
    TooFew {
        /// How many.
        given: usize,
    },
    /// More than [`MAX_EPOCHS`].
    #[error("{given} epochs given; at most 128 are taken at once: build the library from fewer epochs (e.g. one a month of the last ten years)")]
    TooMany {
        /// How many.
        given: usize,
    },
    /// `base` out of range.
    #[error("epochs.base = {base} is out of range: there are {n} epochs; give a number from 1 (the first epoch given) to {n}")]
    BaseOutOfRange {
        /// Given.
        base: usize,
        /// Epochs.
        n: usize,
    },
    /// `min_epochs` out of range.
    #[error("epochs.min_epochs = {given} is out of range: give a number from 2 to the number of epochs ({n})")]
    MinEpochs {
        /// Given.
        given: usize,
        /// Epochs.
        n: usize,
    },
    /// `stability_m` not a positive number.
    #[error("epochs.stability_m = {value} must be a positive number of metres (e.g. 0.5)")]
    Stability {
        /// Given.
        value: f64,
    },
    /// One survey given twice.
    #[error("{path}: given twice (epochs {first} and {second}); each epoch must be a different survey (or a different layer of one file)")]
    SameSurvey {
        /// File.
        path: PathBuf,
        /// First position (from 1).
        first: usize,
        /// Second position.
        second: usize,
    },
    /// The base is a local grid.
    #[error("{path}: the base epoch is a local grid; the base fixes the frame of the library and must be georeferenced: choose a georeferenced epoch with epochs.base")]
    BaseLocal {
        /// File.
        path: PathBuf,
    },
    /// An option of the matches is out of range.
    #[error(transparent)]
    Config(#[from] ConfigError),
    /// An epoch could not be read.
    #[error(transparent)]
    Ingest(#[from] IngestError),
    /// An epoch could not be brought into the base's frame.
    #[error("epoch {number} ({path}): {message}")]
    Frame {
        /// Epoch number (from 1).
        number: usize,
        /// File.
        path: PathBuf,
        /// What went wrong and what to do (the frame stage's words, with this run's keys).
        message: String,
    },
    /// A match could not run (too few landmarks, memory, ...).
    #[error("matching epochs {a} and {b}: {source}")]
    Match {
        /// First epoch (from 1).
        a: usize,
        /// Second epoch.
        b: usize,
        /// The engine's error.
        #[source]
        source: Box<engine::Error>,
    },
}

/// One epoch as read and placed.
#[derive(Debug, Clone)]
pub struct Epoch {
    /// Its name: the file's stem (made unique; the CSV's column).
    pub name: String,
    /// Landmarks as read.
    pub set: LandmarkSet,
    /// Positions in the base's working CRS, or a local grid's own coordinates.
    pub working: Vec<[f64; 2]>,
    /// Its own CRS; `None` for a local grid.
    pub crs: Option<Crs>,
    /// A local grid's declared unit.
    pub unit: Option<GridUnit>,
    /// Metres per unit of `working` (1 for a local grid of undeclared unit).
    pub metres_per_unit: f64,
}

/// One pairwise match: `target` onto `reference` (epoch indices from 0).
#[derive(Debug, Clone)]
pub struct PairMatch {
    /// Reference epoch.
    pub reference: usize,
    /// Target epoch.
    pub target: usize,
    /// The control points, or why no transform was accepted.
    pub result: Result<PairControl, Rejection>,
}

/// The control points of an accepted pairwise match.
#[derive(Debug, Clone, PartialEq)]
pub struct PairControl {
    /// (reference landmark, target landmark, residual in metres).
    pub points: Vec<(u32, u32, f64)>,
    /// The engine's transform, target working → reference working.
    pub transform: Similarity,
    /// RMSE of the engine's fit, metres.
    pub rmse_m: f64,
}

/// An epoch's transform to the base, from the joint adjustment.
#[derive(Debug, Clone, PartialEq)]
pub struct EpochTransform {
    /// Epoch working coordinates → base working coordinates.
    pub similarity: Similarity,
    /// The same in centred coordinates, with covariance (base units²).
    pub centred: CentredFit,
    /// The epoch's centroid (its working coordinates): the point the standard errors of the
    /// position refer to.
    pub origin: [f64; 2],
    /// Standard error of the scale.
    pub se_scale: f64,
    /// Standard error of the rotation, radians.
    pub se_rotation: f64,
    /// Standard errors of the mapped centroid, east and north, metres.
    pub se_position_m: [f64; 2],
    /// Landmarks of this epoch in the adjustment.
    pub landmarks: usize,
    /// RMS of its residuals to the track means (per coordinate), metres.
    pub rms_m: f64,
    /// Estimated noise of one coordinate of its landmarks, metres.
    pub sigma_m: f64,
}

/// The closure of one triangle of epochs (see the module doc).
#[derive(Debug, Clone, PartialEq)]
pub struct ClosureCheck {
    /// (base, i, j): j → i → base against j → base.
    pub epochs: [usize; 3],
    /// Misfit of the mapped position at the test point, metres.
    pub misfit_m: f64,
    /// Largest misfit over the (i, j) control points, metres.
    pub largest_misfit_m: f64,
    /// Rotation of the chain minus the direct one, arcseconds.
    pub rotation_arcsec: f64,
    /// Scale of the chain over the direct one, minus 1, ppm.
    pub scale_ppm: f64,
    /// χ² statistic (4 degrees of freedom).
    pub statistic: f64,
    /// Its 99 % point.
    pub threshold: f64,
    /// Statistic above the threshold.
    pub flagged: bool,
}

/// What became of a track.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum TrackStatus {
    /// A persistent control point.
    Kept,
    /// Moved between epochs beyond its noise.
    Moved,
    /// Seen in fewer than `min_epochs` epochs.
    TooFewEpochs,
    /// Largest movement above `stability_m`.
    Unstable,
}

/// One physical landmark across epochs.
#[derive(Debug, Clone, PartialEq)]
pub struct Track {
    /// Its id (`T-00001`, in linking order).
    pub id: String,
    /// Per epoch the landmark index, or `None`.
    pub members: Vec<Option<u32>>,
    /// Per epoch its position in the base working frame.
    pub positions: Vec<Option<[f64; 2]>>,
    /// Weighted mean position, base working frame.
    pub mean: [f64; 2],
    /// Sample standard deviation of the positions per axis, metres (0 for one epoch).
    pub sd_m: [f64; 2],
    /// Largest distance between two of its positions, metres.
    pub largest_movement_m: f64,
    /// The moved test's statistic and p-value.
    pub statistic: f64,
    /// P(χ² > statistic).
    pub p_value: f64,
    /// Kept, moved or filtered.
    pub status: TrackStatus,
    /// Stability grade of a kept track ('A', 'B', 'C').
    pub grade: Option<char>,
}

impl Track {
    /// Epochs it is seen in.
    pub fn epochs_seen(&self) -> usize {
        self.positions.iter().flatten().count()
    }
}

/// The counts of a run.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct Counts {
    /// Tracks (landmarks linked in two or more epochs).
    pub tracks: usize,
    /// Kept as persistent control points.
    pub kept: usize,
    /// Moved between epochs.
    pub moved: usize,
    /// Seen in too few epochs.
    pub too_few_epochs: usize,
    /// Beyond `stability_m`.
    pub unstable: usize,
    /// Links refused (two landmarks of one epoch in one track).
    pub conflicts: usize,
    /// Redundant links that agreed.
    pub agreeing_links: usize,
    /// Tracks by epochs seen: index m = seen in m epochs.
    pub by_epochs_seen: Vec<usize>,
    /// Kept by grade A, B, C.
    pub grades: [usize; 3],
}

/// The library: transforms, closure, tracks.
#[derive(Debug, Clone, PartialEq)]
pub struct Library {
    /// Per epoch its transform to the base; `None` for an epoch no accepted match joins.
    pub transforms: Vec<Option<EpochTransform>>,
    /// Closure of every triangle whose pairs were all matched.
    pub closures: Vec<ClosureCheck>,
    /// All tracks.
    pub tracks: Vec<Track>,
    /// Counts.
    pub counts: Counts,
    /// A-posteriori variance factor of the adjustment.
    pub variance_factor: f64,
    /// Redundancy of the adjustment.
    pub redundancy: usize,
    /// Metres per base working unit.
    pub metres_per_unit: f64,
}

impl Library {
    /// Epochs no accepted match joins to the base (from 0).
    pub fn unjoined(&self) -> Vec<usize> {
        (0..self.transforms.len())
            .filter(|k| self.transforms[*k].is_none())
            .collect()
    }
}

/// An epochs run.
#[derive(Debug, Clone)]
pub struct EpochsOutcome {
    /// The configuration used.
    pub config: EpochsConfig,
    /// The epochs.
    pub epochs: Vec<Epoch>,
    /// The base's working frame (the CRS facts; its point vectors are left empty).
    pub frame: WorkingFrame,
    /// The pairwise matches.
    pub pairs: Vec<PairMatch>,
    /// The result.
    pub library: Library,
}

/// The pairs matched for `n` epochs, `base` (from 0): (reference, target).
pub fn plan_pairs(n: usize, base: usize, plan: PairPlan) -> Vec<(usize, usize)> {
    let mut pairs: Vec<(usize, usize)> = (0..n).filter(|k| *k != base).map(|k| (base, k)).collect();
    let others: Vec<usize> = (0..n).filter(|k| *k != base).collect();
    match plan {
        PairPlan::BaseAndNeighbours => pairs.extend(others.windows(2).map(|w| (w[0], w[1]))),
        PairPlan::All => {
            for (x, &i) in others.iter().enumerate() {
                for &j in &others[x + 1..] {
                    pairs.push((i, j));
                }
            }
        }
    }
    pairs
}

/// Names of the epochs from their files' stems: unique, and none equal to a fixed column
/// of `persistent-control-points.csv`.
pub fn epoch_names(inputs: &[SurveyInput], reserved: &[&str]) -> Vec<String> {
    let stem = |s: &SurveyInput| {
        s.path
            .file_stem()
            .map(|v| v.to_string_lossy().into_owned())
            .unwrap_or_else(|| "epoch".into())
    };
    let stems: Vec<String> = inputs.iter().map(stem).collect();
    let mut names = stems.clone();
    for i in 0..names.len() {
        let clash = stems.iter().filter(|n| **n == stems[i]).count() > 1;
        if clash {
            let layer = inputs[i].layer.clone();
            let parent = inputs[i]
                .path
                .parent()
                .and_then(|p| p.file_name())
                .map(|p| p.to_string_lossy().into_owned());
            names[i] = match (layer, parent) {
                (Some(l), _) => format!("{}_{l}", names[i]),
                (None, Some(p)) => format!("{p}_{}", names[i]),
                (None, None) => names[i].clone(),
            };
        }
    }
    let mut out: Vec<String> = Vec::with_capacity(names.len());
    for (i, n) in names.into_iter().enumerate() {
        let mut n = if reserved.contains(&n.as_str()) {
            format!("{n}_id")
        } else {
            n
        };
        if out.contains(&n) {
            n = format!("{n}_{}", i + 1);
        }
        out.push(n);
    }
    out
}

/// An epoch placed in the base's frame: working points, own CRS, local grid unit.
type Placed = (Vec<[f64; 2]>, Option<Crs>, Option<GridUnit>);

/// Runs an epochs job: reads every epoch, matches the planned pairs, links and adjusts.
/// Writes nothing. `reserved`: column names the epoch names must avoid.
pub fn run(
    config: &EpochsConfig,
    reserved: &[&str],
    progress: &dyn Progress,
) -> Result<EpochsOutcome, EpochsError> {
    config.validate()?;
    let n = config.epochs.len();
    let base = config.base_index();
    let names = epoch_names(&config.epochs, reserved);
    // Raster epochs: keypoints at one feature size for all, the engine's for the coarsest
    // pixel among them, so that every epoch finds the same features.
    let coarsest = engine::coarsest_pixel_m(&config.epochs.iter().collect::<Vec<_>>())?;
    let mut sets = Vec::with_capacity(n);
    for (k, input) in config.epochs.iter().enumerate() {
        let label = format!("reading epoch {} of {n}", k + 1);
        sets.push(stage(progress, &label, None, |_| {
            engine::read_survey_of_set(input, &config.keypoints, coarsest)
        })?);
    }
    let frame_error = |k: usize, e: frame::FrameError| EpochsError::Frame {
        number: k + 1,
        path: config.epochs[k].path.clone(),
        message: e
            .to_string()
            .replace("reference.crs", "the base epoch's crs")
            .replace(
                "target.crs",
                "this epoch's crs (crs in its [[epoch]] block)",
            )
            .replace("the reference", "the base epoch")
            .replace("the target", "this epoch"),
    };
    let mut placed: Vec<Option<Placed>> = vec![None; n];
    let mut base_frame: Option<WorkingFrame> = None;
    for k in (0..n).filter(|k| *k != base) {
        let f = frame::working_frame(
            &sets[base],
            config.epochs[base].crs.as_deref(),
            &sets[k],
            config.epochs[k].crs.as_deref(),
            &config.frame,
        )
        .map_err(|e| {
            frame_error(
                if matches!(e, frame::FrameError::LocalReference) {
                    base
                } else {
                    k
                },
                e,
            )
        })?;
        let mut f = f;
        placed[k] = Some((
            std::mem::take(&mut f.target),
            f.target_crs.clone(),
            f.target_unit,
        ));
        if base_frame.is_none() {
            placed[base] = Some((
                std::mem::take(&mut f.reference),
                Some(f.reference_crs.clone()),
                None,
            ));
            base_frame = Some(f);
        }
    }
    let frame = base_frame.expect("two or more epochs");
    let mpu = frame.metres_per_unit();
    let epochs: Vec<Epoch> = sets
        .into_iter()
        .zip(placed)
        .zip(names)
        .map(|((set, p), name)| {
            let (working, crs, unit) = p.expect("every epoch placed");
            let metres_per_unit = match (&crs, unit) {
                (Some(_), _) => mpu,
                (None, Some(u)) => u.metres(),
                (None, None) => 1.0,
            };
            Epoch {
                name,
                set,
                working,
                crs,
                unit,
                metres_per_unit,
            }
        })
        .collect();
    let pairs = match_pairs(config, &epochs, progress)?;
    let geometry: Vec<&[[f64; 2]]> = epochs.iter().map(|e| e.working.as_slice()).collect();
    let library = stage(progress, "linking and adjusting epochs", None, |_| {
        combine(&geometry, base, &pairs, mpu, &config.options, n)
    });
    Ok(EpochsOutcome {
        config: config.clone(),
        epochs,
        frame,
        pairs,
        library,
    })
}

/// Matches the planned pairs with the engine.
fn match_pairs(
    config: &EpochsConfig,
    epochs: &[Epoch],
    progress: &dyn Progress,
) -> Result<Vec<PairMatch>, EpochsError> {
    let n = epochs.len();
    let plan = plan_pairs(n, config.base_index(), config.options.pairs);
    let mut indexes = Vec::with_capacity(n);
    for (k, e) in epochs.iter().enumerate() {
        let index = PointIndex::new(&e.working).ok_or_else(|| EpochsError::Match {
            a: k + 1,
            b: k + 1,
            source: Box::new(engine::Error::Degenerate {
                path: e.set.source.clone(),
            }),
        })?;
        indexes.push((index, morton_order(&e.working)));
    }
    let mut out = Vec::with_capacity(plan.len());
    for (i, j) in plan {
        let (ri, rj) = (&epochs[i], &epochs[j]);
        let facts = FrameFacts {
            metres_per_unit: ri.metres_per_unit,
            georeferenced: ri.crs.is_some() && rj.crs.is_some(),
            unit_scale: rj.metres_per_unit / ri.metres_per_unit,
        };
        let labels = [
            format!("epoch {} ({})", i + 1, ri.set.source.display()),
            format!("epoch {} ({})", j + 1, rj.set.source.display()),
        ];
        let (search, fit) = engine::solve_points(
            &config.match_config(i, j),
            &Survey {
                points: &ri.working,
                index: &indexes[i].0,
                order: &indexes[i].1,
            },
            &Survey {
                points: &rj.working,
                index: &indexes[j].0,
                order: &indexes[j].1,
            },
            &facts,
            progress,
            &labels,
        )
        .map_err(|e| EpochsError::Match {
            a: i + 1,
            b: j + 1,
            source: Box::new(e),
        })?;
        let _ = search;
        let result = fit.map(|s| PairControl {
            points: s
                .pairs
                .iter()
                .map(|p| (p.reference, p.target, p.residual * ri.metres_per_unit))
                .collect(),
            transform: s.fit.transform,
            rmse_m: s.fit.rmse * ri.metres_per_unit,
        });
        out.push(PairMatch {
            reference: i,
            target: j,
            result,
        });
    }
    Ok(out)
}

fn centroid(points: &[[f64; 2]]) -> [f64; 2] {
    let n = points.len().max(1) as f64;
    let s = points
        .iter()
        .fold([0.0, 0.0], |a, p| [a[0] + p[0], a[1] + p[1]]);
    [s[0] / n, s[1] / n]
}

fn sub(a: [f64; 2], b: [f64; 2]) -> [f64; 2] {
    [a[0] - b[0], a[1] - b[1]]
}

/// Links, adjusts, tests and filters (steps 3-7 of the module doc) on epochs already placed:
/// `points[k]` epoch k's working coordinates, `mpu` metres per base unit. Pure.
pub fn combine(
    points: &[&[[f64; 2]]],
    base: usize,
    pairs: &[PairMatch],
    mpu: f64,
    options: &EpochOptions,
    n: usize,
) -> Library {
    let origins: Vec<[f64; 2]> = points.iter().map(|p| centroid(p)).collect();
    let centred = |k: usize, i: u32| sub(points[k][i as usize], origins[k]);
    // Epochs joined to the base through accepted matches.
    let mut joined = vec![false; n];
    joined[base] = true;
    loop {
        let mut grew = false;
        for p in pairs.iter().filter(|p| p.result.is_ok()) {
            if joined[p.reference] != joined[p.target] {
                joined[p.reference] = true;
                joined[p.target] = true;
                grew = true;
            }
        }
        if !grew {
            break;
        }
    }
    let links: Vec<Link> = pairs
        .iter()
        .filter_map(|p| p.result.as_ref().ok().map(|c| (p, c)))
        .flat_map(|(p, c)| {
            c.points.iter().map(move |&(a, b, r)| Link {
                epoch_a: p.reference,
                landmark_a: a,
                epoch_b: p.target,
                landmark_b: b,
                residual_m: r,
            })
        })
        .collect();
    let sizes: Vec<usize> = points.iter().map(|p| p.len()).collect();
    let linked = tracks::link(&sizes, &links);
    let observations: Vec<Vec<Obs>> = linked
        .tracks
        .iter()
        .map(|t| {
            t.iter()
                .enumerate()
                .filter_map(|(k, m)| m.filter(|_| joined[k]).map(|i| (k, centred(k, i))))
                .collect()
        })
        .collect();
    // Adjust, flag moved tracks, repeat without them.
    let mut moved = vec![false; observations.len()];
    let mut joint = None;
    for _ in 0..6 {
        let active: Vec<Vec<Obs>> = observations
            .iter()
            .zip(&moved)
            .map(|(o, m)| if *m { Vec::new() } else { o.clone() })
            .collect();
        let Some(j) = adjust::adjust(n, base, &joined, &active) else {
            break;
        };
        let mut newly = 0;
        for (t, obs) in observations.iter().enumerate() {
            if moved[t] || obs.len() < 2 {
                continue;
            }
            let (stat, dof) = track_statistic(obs, &j);
            if dof > 0 && adjust::chi2_sf_even(stat, dof) < MOVED_ALPHA {
                moved[t] = true;
                newly += 1;
            }
        }
        joint = Some(j);
        if newly == 0 {
            break;
        }
    }
    let Some(joint) = joint else {
        // Singular: no epoch but the base can be placed.
        let mut transforms = vec![None; n];
        transforms[base] = Some(identity_transform(origins[base], points[base].len()));
        return Library {
            transforms,
            closures: Vec::new(),
            tracks: Vec::new(),
            counts: Counts::default(),
            variance_factor: 0.0,
            redundancy: 0,
            metres_per_unit: mpu,
        };
    };
    // Tracks.
    let min_epochs = options.min_epochs.unwrap_or(n);
    let n_joined = joined.iter().filter(|j| **j).count();
    let mut counts = Counts {
        conflicts: linked.conflicts,
        agreeing_links: linked.agreeing,
        by_epochs_seen: vec![0; n + 1],
        ..Counts::default()
    };
    let mut residual_sums = vec![(0.0, 0usize); n];
    let mut out_tracks = Vec::with_capacity(observations.len());
    for (t, (members, obs)) in linked.tracks.iter().zip(&observations).enumerate() {
        if obs.len() < 2 {
            continue;
        }
        let mut positions = vec![None; n];
        for (k, p) in obs {
            let q = joint.transforms[*k].expect("joined").apply(*p);
            positions[*k] = Some([q[0] + origins[base][0], q[1] + origins[base][1]]);
        }
        let (stat, dof) = track_statistic(obs, &joint);
        let p_value = adjust::chi2_sf_even(stat, dof);
        let pts: Vec<[f64; 2]> = positions.iter().flatten().copied().collect();
        let w: Vec<f64> = obs
            .iter()
            .map(|(k, _)| 1.0 / joint.sigma[*k].max(1e-300).powi(2))
            .collect();
        let sw: f64 = w.iter().sum();
        let mean = pts.iter().zip(&w).fold([0.0, 0.0], |a, (p, w)| {
            [a[0] + w * p[0] / sw, a[1] + w * p[1] / sw]
        });
        let m = pts.len() as f64;
        let plain = centroid(&pts);
        let sd = |axis: usize| {
            (pts.iter()
                .map(|p| (p[axis] - plain[axis]).powi(2))
                .sum::<f64>()
                / (m - 1.0))
                .sqrt()
                * mpu
        };
        let mut largest = 0.0f64;
        for a in 0..pts.len() {
            for b in a + 1..pts.len() {
                largest = largest.max(crate::spatial::dist2(pts[a], pts[b]).sqrt() * mpu);
            }
        }
        if !moved[t] {
            for ((k, _), p) in obs.iter().zip(&pts) {
                let d2 = crate::spatial::dist2(*p, mean) * mpu * mpu;
                residual_sums[*k].0 += d2;
                residual_sums[*k].1 += 1;
            }
        }
        let seen = pts.len();
        let status = if moved[t] {
            TrackStatus::Moved
        } else if seen < min_epochs {
            TrackStatus::TooFewEpochs
        } else if options.stability_m.is_some_and(|s| largest > s) {
            TrackStatus::Unstable
        } else {
            TrackStatus::Kept
        };
        let grade = (status == TrackStatus::Kept).then(|| {
            if seen == n_joined && p_value >= GRADE_ALPHA {
                'A'
            } else if (2 * seen >= n_joined && p_value >= GRADE_ALPHA) || seen == n_joined {
                'B'
            } else {
                'C'
            }
        });
        counts.tracks += 1;
        counts.by_epochs_seen[seen] += 1;
        match status {
            TrackStatus::Kept => counts.kept += 1,
            TrackStatus::Moved => counts.moved += 1,
            TrackStatus::TooFewEpochs => counts.too_few_epochs += 1,
            TrackStatus::Unstable => counts.unstable += 1,
        }
        if let Some(g) = grade {
            counts.grades[(g as u8 - b'A') as usize] += 1;
        }
        out_tracks.push(Track {
            id: String::new(),
            members: members.clone(),
            positions,
            mean,
            sd_m: [sd(0), sd(1)],
            largest_movement_m: largest,
            statistic: stat,
            p_value,
            status,
            grade,
        });
    }
    let width = 5.max(out_tracks.len().to_string().len());
    for (i, t) in out_tracks.iter_mut().enumerate() {
        t.id = format!("T-{:0width$}", i + 1);
    }
    // Transforms.
    let transforms: Vec<Option<EpochTransform>> = (0..n)
        .map(|k| {
            let c = joint.transforms[k]?;
            let [a, b, _, _] = c.theta;
            let s = a.hypot(b);
            let g_scale = [a / s, b / s];
            let g_rot = [-b / (s * s), a / (s * s)];
            let quad = |g: [f64; 2]| {
                (g[0] * g[0] * c.cov[0][0]
                    + 2.0 * g[0] * g[1] * c.cov[0][1]
                    + g[1] * g[1] * c.cov[1][1])
                    .max(0.0)
                    .sqrt()
            };
            let (sum, count) = residual_sums[k];
            Some(EpochTransform {
                similarity: c.uncentred(origins[k], origins[base]),
                centred: c,
                origin: origins[k],
                se_scale: quad(g_scale),
                se_rotation: quad(g_rot),
                se_position_m: [
                    c.cov[2][2].max(0.0).sqrt() * mpu,
                    c.cov[3][3].max(0.0).sqrt() * mpu,
                ],
                landmarks: count,
                rms_m: if count > 0 {
                    (sum / (2 * count) as f64).sqrt()
                } else {
                    0.0
                },
                sigma_m: joint.sigma[k] * mpu,
            })
        })
        .collect();
    let closures = closure_checks(points, &origins, base, pairs, mpu);
    Library {
        transforms,
        closures,
        tracks: out_tracks,
        counts,
        variance_factor: joint.variance_factor,
        redundancy: joint.redundancy,
        metres_per_unit: mpu,
    }
}

fn identity_transform(origin: [f64; 2], landmarks: usize) -> EpochTransform {
    EpochTransform {
        similarity: Similarity::IDENTITY,
        centred: CentredFit::IDENTITY,
        origin,
        se_scale: 0.0,
        se_rotation: 0.0,
        se_position_m: [0.0, 0.0],
        landmarks,
        rms_m: 0.0,
        sigma_m: 0.0,
    }
}

/// The moved test's statistic of a track and its degrees of freedom (see the module doc).
fn track_statistic(obs: &[Obs], joint: &adjust::Joint) -> (f64, usize) {
    let u: Vec<([f64; 2], f64)> = obs
        .iter()
        .filter_map(|(k, p)| {
            let t = joint.transforms[*k]?;
            let s = joint.sigma[*k];
            Some((
                t.apply(*p),
                if s > 0.0 {
                    1.0 / (s * s)
                } else {
                    f64::INFINITY
                },
            ))
        })
        .collect();
    if u.len() < 2 || u.iter().any(|(_, w)| !w.is_finite()) {
        return (0.0, 2 * u.len().saturating_sub(1));
    }
    let sw: f64 = u.iter().map(|x| x.1).sum();
    let mean = u.iter().fold([0.0, 0.0], |a, (p, w)| {
        [a[0] + w * p[0] / sw, a[1] + w * p[1] / sw]
    });
    let stat = u
        .iter()
        .map(|(p, w)| w * ((p[0] - mean[0]).powi(2) + (p[1] - mean[1]).powi(2)))
        .sum();
    (stat, 2 * (u.len() - 1))
}

/// Closure of every triangle (base, i, j) whose three pairs were matched and fitted.
fn closure_checks(
    points: &[&[[f64; 2]]],
    origins: &[[f64; 2]],
    base: usize,
    pairs: &[PairMatch],
    mpu: f64,
) -> Vec<ClosureCheck> {
    let fits: Vec<Option<(CentredFit, Vec<[f64; 2]>)>> = pairs
        .iter()
        .map(|p| {
            let c = p.result.as_ref().ok()?;
            let from: Vec<[f64; 2]> = c
                .points
                .iter()
                .map(|x| sub(points[p.target][x.1 as usize], origins[p.target]))
                .collect();
            let to: Vec<[f64; 2]> = c
                .points
                .iter()
                .map(|x| sub(points[p.reference][x.0 as usize], origins[p.reference]))
                .collect();
            adjust::fit_pairs(&from, &to).map(|(f, _)| (f, from))
        })
        .collect();
    let find = |r: usize, t: usize| {
        pairs
            .iter()
            .position(|p| p.reference == r && p.target == t)
            .and_then(|i| fits[i].as_ref())
    };
    let threshold = adjust::chi2_quantile_even(CLOSURE_ALPHA, 4);
    let mut out = Vec::new();
    for p in pairs {
        let (i, j) = (p.reference, p.target);
        if i == base || j == base {
            continue;
        }
        let (Some(ji), Some(ib), Some(jb)) = (find(i, j), find(base, i), find(base, j)) else {
            continue;
        };
        let at = centroid(&ji.1);
        let c = adjust::closure(&ji.0, &ib.0, &jb.0, at);
        let chain = |q: [f64; 2]| ib.0.apply(ji.0.apply(q));
        let largest =
            ji.1.iter()
                .map(|q| crate::spatial::dist2(chain(*q), jb.0.apply(*q)).sqrt())
                .fold(0.0, f64::max);
        let chain_m = [c.delta[0] + jb.0.theta[0], c.delta[1] + jb.0.theta[1]];
        let (dm_s, dm_r) = (
            jb.0.theta[0].hypot(jb.0.theta[1]),
            jb.0.theta[1].atan2(jb.0.theta[0]),
        );
        let rot = chain_m[1].atan2(chain_m[0]) - dm_r;
        out.push(ClosureCheck {
            epochs: [base, i, j],
            misfit_m: c.delta[2].hypot(c.delta[3]) * mpu,
            largest_misfit_m: largest * mpu,
            rotation_arcsec: rot.to_degrees() * 3600.0,
            scale_ppm: (chain_m[0].hypot(chain_m[1]) / dm_s - 1.0) * 1e6,
            statistic: c.statistic,
            threshold,
            flagged: c.statistic > threshold,
        });
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pair_plans() {
        assert_eq!(
            plan_pairs(4, 0, PairPlan::BaseAndNeighbours),
            vec![(0, 1), (0, 2), (0, 3), (1, 2), (2, 3)]
        );
        assert_eq!(
            plan_pairs(4, 1, PairPlan::BaseAndNeighbours),
            vec![(1, 0), (1, 2), (1, 3), (0, 2), (2, 3)]
        );
        assert_eq!(plan_pairs(5, 0, PairPlan::All).len(), 10);
        for n in 2..12 {
            assert_eq!(
                plan_pairs(n, 0, PairPlan::BaseAndNeighbours).len(),
                2 * n - 3
            );
        }
    }

    #[test]
    fn names_are_unique_and_avoid_columns() {
        let inputs: Vec<SurveyInput> = ["a/2019.gpkg", "b/2019.gpkg", "x.csv", "c/2020.csv"]
            .iter()
            .map(|p| SurveyInput::new(p.into()))
            .collect();
        assert_eq!(
            epoch_names(&inputs, &["x", "y"]),
            vec!["a_2019", "b_2019", "x_id", "2020"]
        );
    }
}
