//! Runs the stages in order: the library's entry point for a match. Computes; never writes.
//!
//! **In:** a [`MatchConfig`] and a [`Progress`] receiver.
//! **Out:** a [`MatchOutcome`]: both surveys as read, the working frame, what the search
//! produced, and the accepted transform with its control points and its accuracy statement
//! (module `accuracy`: checkpoints read before the search, the hold-out split, leave-one-out
//! residuals) or why none was accepted.
//! Errors are [`Error`]s that name the file and the option, and say what to do.
//!
//! [`match_surveys`] reads files; [`solve_points`] runs signatures, matching and the robust
//! fit on points already in a working frame (benchmarks and experiments call it, so they
//! measure what ships). Writing is the front ends' business ([`crate::emit`]).

mod accuracy;
mod area_seed;
mod pixels;

use crate::config::{ConfigError, MatchConfig};
use crate::fit::{self, FitInput, Rejection, Solution};
use crate::frame::{self, FrameError};
use crate::ingest::{self, IngestError, LandmarkSet, SurveyInput};
use crate::keypoints::KeypointParams;
use crate::matching::{self, Candidate, MatchingError};
use crate::outcome::{MatchOutcome, Search};
use crate::progress::{stage, Progress};
use crate::resources::{self, ResourceError};
use crate::signatures::{self, SignatureError, Signatures};
use crate::spatial::{median_spacing, morton_order, PointIndex, Survey};
pub use pixels::MAX_REFERENCE_PIXELS;
use std::path::PathBuf;

/// Anything that stops a run. Each variant's message names the file or option and the fix.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// Configuration trouble (pipeline file or option values).
    #[error(transparent)]
    Config(#[from] ConfigError),
    /// Input dataset trouble.
    #[error(transparent)]
    Ingest(#[from] IngestError),
    /// CRS or overlap trouble.
    #[error(transparent)]
    Frame(#[from] FrameError),
    /// Too few landmarks for a signature.
    #[error(transparent)]
    Signature(#[from] SignatureError),
    /// The signature keys cannot be indexed.
    #[error(transparent)]
    Matching(#[from] MatchingError),
    /// The run needs more memory than the machine has (refused before stage 3; boxed, it is
    /// the largest error).
    #[error(transparent)]
    Resources(Box<ResourceError>),
    /// The checkpoints file cannot be used.
    #[error(transparent)]
    Checkpoints(#[from] crate::accuracy::CheckpointError),
    /// The accuracy statement cannot be made as asked (a hold-out share too large).
    #[error(transparent)]
    Accuracy(#[from] accuracy::StatementError),
    /// More landmarks than the spatial index's 32-bit item indices hold.
    #[error("{path}: more than 4,294,967,295 landmarks, which the spatial index cannot hold; split the survey into tiles and match them one by one")]
    Degenerate {
        /// File.
        path: PathBuf,
    },
}

impl From<ResourceError> for Error {
    fn from(e: ResourceError) -> Self {
        Error::Resources(Box::new(e))
    }
}

/// Reads one survey's landmarks: a vector layer's features, or a raster's keypoints at
/// `keypoints.feature_size_m` (or the default size for its own pixels).
pub fn read_survey(
    input: &SurveyInput,
    keypoints: &KeypointParams,
) -> Result<LandmarkSet, IngestError> {
    ingest::read_landmarks_with(input, keypoints, None)
}

/// The coarsest pixel (metres on the ground) among the raster surveys of `inputs`, `None` when
/// none is a raster: surveys matched with one another (a pair, the epochs of a site) search
/// their keypoints at the default feature size for it, so that the same features are found in
/// all ([`KeypointParams::feature_size_for`]).
pub fn coarsest_pixel_m(inputs: &[&SurveyInput]) -> Result<Option<f64>, IngestError> {
    let mut coarsest: Option<f64> = None;
    for input in inputs {
        if let Some(p) = ingest::raster_pixel_metres(input)? {
            coarsest = Some(coarsest.map_or(p, |c| c.max(p)));
        }
    }
    Ok(coarsest)
}

/// Reads one survey of a set matched with one another: a vector layer's features, or a
/// raster's keypoints at the feature size given or else the default for the set's coarsest
/// pixel (`coarsest_pixel_m`, from [`coarsest_pixel_m`]).
pub fn read_survey_of_set(
    input: &SurveyInput,
    keypoints: &KeypointParams,
    coarsest_pixel_m: Option<f64>,
) -> Result<LandmarkSet, IngestError> {
    ingest::read_landmarks_with(input, keypoints, coarsest_pixel_m)
}

/// Reads both surveys of a match. When both are rasters and no feature size is given, both
/// are searched at the default size for the pair's pixel sizes, so that the same features are
/// found in both ([`KeypointParams::feature_size_for`]). A raster that needs a warped view (a
/// geographic CRS, GCPs warped through their polynomial) is put on the working CRS asked for;
/// without one, the target goes on the reference's CRS (`reference.crs`, or the reference
/// image's CRS as read), so that both images share the grid the refinement works on.
pub fn read_surveys(config: &MatchConfig) -> Result<(LandmarkSet, LandmarkSet), IngestError> {
    let reference_grid = config.frame.working_crs.as_deref();
    let reference = ingest::open_survey(&config.reference, reference_grid)?;
    let target_grid = match reference_grid.or(config.reference.crs.as_deref()) {
        Some(g) => Some(g.to_string()),
        None => reference.raster_crs_wkt(),
    };
    let target = ingest::open_survey(&config.target, target_grid.as_deref())?;
    let pixels = [reference.pixel_metres()?, target.pixel_metres()?];
    if reference.is_vector() && target.is_vector() {
        // Two vector layers are read at once, one on each thread (GDAL's datasets and error
        // states are per thread); the reference's error comes first, as in a serial read.
        // Images stay one after the other: each read already uses every core.
        let keypoints = &config.keypoints;
        let (reference, target) = std::thread::scope(|scope| {
            let target = scope.spawn(move || target.read(keypoints, pixels[0]));
            let reference = reference.read(keypoints, pixels[1]);
            (reference, target.join())
        });
        let target = target.unwrap_or_else(|panic| std::panic::resume_unwind(panic));
        return Ok((reference?, target?));
    }
    Ok((
        reference.read(&config.keypoints, pixels[1])?,
        target.read(&config.keypoints, pixels[0])?,
    ))
}

/// What the robust fit needs to know of the working frame.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FrameFacts {
    /// Metres per working unit.
    pub metres_per_unit: f64,
    /// Whether the target is georeferenced (not a local grid): then its georeferencing bounds
    /// the transform by default.
    pub georeferenced: bool,
    /// The scale of a fit with no scale error: 1, or a local grid's declared unit in working
    /// units.
    pub unit_scale: f64,
}

impl FrameFacts {
    /// Points in metres in an unreferenced local frame (synthetic surveys, experiments).
    pub const LOCAL_METRES: FrameFacts = FrameFacts {
        metres_per_unit: 1.0,
        georeferenced: false,
        unit_scale: 1.0,
    };
}

/// Runs a whole match: ingest, working frame, signatures, matching, robust fit. Writes
/// nothing.
pub fn match_surveys(config: &MatchConfig, progress: &dyn Progress) -> Result<MatchOutcome, Error> {
    config.validate()?;
    let (reference, target) = stage(progress, "reading surveys", None, |_| read_surveys(config))?;
    config
        .fit
        .check_model(
            target.raster.is_some(),
            &format!("the target ({})", target.source.display()),
        )
        .map_err(ConfigError::from)?;
    let frame = frame::working_frame(
        &reference,
        config.reference.crs.as_deref(),
        &target,
        config.target.crs.as_deref(),
        &config.frame,
    )?;
    // Read before the search, so that a bad checkpoints file is refused at once.
    let checkpoints = match &config.accuracy.checkpoints {
        Some(path) => Some(accuracy::read_checkpoints(path, &frame)?),
        None => None,
    };
    let unit_scale = frame.grid_scale(1.0, 0.0).map_or(1.0, |g| g.unit_factor);
    let index = |points: &[[f64; 2]], path: &std::path::Path| {
        PointIndex::new(points).ok_or_else(|| Error::Degenerate {
            path: path.to_path_buf(),
        })
    };
    // Each survey's tree and Morton order, the two surveys at once.
    let ((ri, ro), (ti, to)) = rayon::join(
        || {
            let points = &frame.reference;
            (index(points, &reference.source), morton_order(points))
        },
        || {
            let points = &frame.target;
            (index(points, &target.source), morton_order(points))
        },
    );
    let (ri, ti) = (ri?, ti?);
    let labels = [
        format!("the reference ({})", reference.source.display()),
        format!("the target ({})", target.source.display()),
    ];
    let (search, fit) = solve_points(
        config,
        &Survey {
            points: &frame.reference,
            index: &ri,
            order: &ro,
        },
        &Survey {
            points: &frame.target,
            index: &ti,
            order: &to,
        },
        &FrameFacts {
            metres_per_unit: frame.metres_per_unit(),
            georeferenced: frame.target_crs.is_some(),
            unit_scale,
        },
        progress,
        &labels,
    )?;
    let mut frame = frame;
    let mut fit = fit;
    let (mut reference, mut target) = (reference, target);
    // Two rasters: the area-based seed when the keypoints found no transform.
    let both_rasters = reference.raster.is_some() && target.raster.is_some();
    let area_seed = match fit.as_ref().err().cloned() {
        None if both_rasters => Some(crate::outcome::AreaSeed {
            ran: false,
            why: "not run: the keypoints matched, so the seed is not needed".into(),
            keypoints: None,
            coarse_m: f64::NAN,
            measure: String::new(),
            hypotheses: 0,
            z: f64::NAN,
            seeds: Vec::new(),
            chosen: None,
        }),
        Some(rejection) if both_rasters => {
            let same_crs = |s: &LandmarkSet| s.crs_wkt.as_deref() == Some(frame.crs.wkt.as_str());
            let same = same_crs(&reference) && same_crs(&target);
            let area = stage(progress, "area-based seed", None, |_| {
                area_seed::area_match(
                    config,
                    [&reference, &target],
                    same,
                    frame.metres_per_unit(),
                    &rejection,
                )
            })?;
            match area.fit {
                Some(Ok((solution, r, t))) => {
                    frame.reference = r.points.clone();
                    frame.target = t.points.clone();
                    reference = r;
                    target = t;
                    fit = Ok(solution);
                }
                Some(Err(why)) => fit = Err(why),
                None => {}
            }
            Some(area.summary)
        }
        _ => None,
    };
    let pixels = match fit.as_mut() {
        Ok(solution) if reference.raster.is_some() && target.raster.is_some() => stage(
            progress,
            "refining control points on the pixels",
            None,
            |_| {
                pixels::refine_on_pixels(
                    [&config.reference, &config.target],
                    [&reference, &target],
                    &mut frame,
                    solution,
                    &config.refine,
                    config.fit.min_control_points,
                )
            },
        )?,
        _ => None,
    };
    // Refined on the pixels, the target's positions are the working frame's (one CRS), and
    // every model is fitted again on the refined control points.
    if pixels.as_ref().is_some_and(|p| p.not_applied.is_none()) {
        target.points = frame.target.clone();
        if let Ok(solution) = fit.as_mut() {
            solution.refresh_models(&frame.reference, &frame.target, config.fit.model);
        }
    }
    let mut pixels = pixels;
    let accuracy = match fit.as_mut() {
        Ok(solution) => stage(progress, "stating the accuracy", None, |_| {
            accuracy::state(
                &config.accuracy,
                config.fit.seed,
                config.fit.min_control_points,
                &frame,
                [&reference, &target],
                solution,
                &mut pixels,
                checkpoints.as_ref(),
                unit_scale,
            )
        })?,
        Err(_) => None,
    };
    Ok(MatchOutcome {
        config: config.clone(),
        reference,
        target,
        frame,
        search,
        fit,
        pixels,
        accuracy,
        area_seed,
    })
}

/// Signatures, matching and robust fit on two surveys already in one working frame (no I/O):
/// [`find_candidates`] then [`fit_candidates`]. `labels` name the two surveys in errors. The
/// stage benchmark and the experiments call these, so that they measure what ships.
pub fn solve_points(
    config: &MatchConfig,
    reference: &Survey,
    target: &Survey,
    facts: &FrameFacts,
    progress: &dyn Progress,
    labels: &[String; 2],
) -> Result<(Search, Result<Solution, Rejection>), Error> {
    let mut found = find_candidates(config, reference, target, progress, labels)?;
    found.release_keys();
    let fit = fit_candidates(config, reference, target, &found, facts, progress);
    Ok((found.search, fit))
}

/// As [`solve_points`] on plain point arrays: builds their spatial indexes and Morton orders first.
/// The surveys are named "reference" and "target" in errors.
pub fn solve_pair(
    config: &MatchConfig,
    reference: &[[f64; 2]],
    target: &[[f64; 2]],
    facts: &FrameFacts,
    progress: &dyn Progress,
) -> Result<(Search, Result<Solution, Rejection>), Error> {
    let index = |points: &[[f64; 2]], name: &str| {
        PointIndex::new(points).ok_or_else(|| Error::Degenerate { path: name.into() })
    };
    let (ri, ti) = (index(reference, "reference")?, index(target, "target")?);
    let (ro, to) = (morton_order(reference), morton_order(target));
    solve_points(
        config,
        &Survey {
            points: reference,
            index: &ri,
            order: &ro,
        },
        &Survey {
            points: target,
            index: &ti,
            order: &to,
        },
        facts,
        progress,
        &["reference".into(), "target".into()],
    )
}

/// What the signature and matching stages produced: the signatures of both surveys and the
/// candidate correspondences, best first.
pub struct Candidates {
    /// Counts and the options used.
    pub search: Search,
    /// Reference signatures.
    pub reference_signatures: Signatures,
    /// Target signatures.
    pub target_signatures: Signatures,
    /// Candidate correspondences, best first.
    pub candidates: Vec<Candidate>,
}

impl Candidates {
    /// Frees both surveys' signature keys: stage 4 is done with them and the fit reads only
    /// the polygons (at 1M + 1M landmarks about 100 MB less at the fit, the run's peak).
    pub fn release_keys(&mut self) {
        for s in [&mut self.reference_signatures, &mut self.target_signatures] {
            s.keys = Vec::new();
            s.sensitivity = Vec::new();
        }
    }
}

/// Stages 3 and 4: signatures of both surveys and their candidate correspondences. First
/// refuses a run whose estimated memory exceeds what the machine has available
/// ([`resources::ensure_memory`]).
pub fn find_candidates(
    config: &MatchConfig,
    reference: &Survey,
    target: &Survey,
    progress: &dyn Progress,
    labels: &[String; 2],
) -> Result<Candidates, Error> {
    let spacing = median_spacing(reference.points, reference.index, 10_000)
        .unwrap_or(1.0)
        .max(f64::MIN_POSITIVE);
    let used = config
        .signatures
        .resolve(reference.points.len().min(target.points.len()));
    let sizes = [reference.points.len(), target.points.len()];
    signatures::check_sizes(&used, sizes, labels)?;
    config
        .fit
        .check_sizes(sizes, labels)
        .map_err(ConfigError::from)?;
    resources::ensure_memory(sizes, &used, &config.matching, &config.fit, labels)?;
    let sensitivity = config.matching.needs_sensitivity();
    let mut sigs = Vec::with_capacity(2);
    for (survey, (label, name)) in [reference, target].into_iter().zip(
        labels
            .iter()
            .zip(["reference signatures", "target signatures"]),
    ) {
        let total = Some(survey.points.len() as u64);
        sigs.push(stage(progress, name, total, |advance| {
            signatures::compute(label, survey, &used, sensitivity, advance)
        })?);
    }
    let target_signatures = sigs.pop().expect("two");
    let reference_signatures = sigs.pop().expect("two");
    let (rs, ts) = (&reference_signatures, &target_signatures);
    let candidates = stage(
        progress,
        "matching signatures",
        Some(ts.len() as u64),
        |advance| {
            matching::candidates(
                rs,
                ts,
                config.matching.candidates,
                config.matching.rank,
                advance,
            )
            .map_err(|e| e.in_survey(&labels[0]))
        },
    )?;
    Ok(Candidates {
        search: Search {
            reference_spacing: spacing,
            reference_signatures: rs.len(),
            target_signatures: ts.len(),
            candidates: candidates.len(),
            signatures: used,
        },
        reference_signatures,
        target_signatures,
        candidates,
    })
}

/// Stage 5: the robust fit on the candidates.
pub fn fit_candidates(
    config: &MatchConfig,
    reference: &Survey,
    target: &Survey,
    found: &Candidates,
    facts: &FrameFacts,
    progress: &dyn Progress,
) -> Result<Solution, Rejection> {
    let input = FitInput {
        reference: reference.points,
        target: target.points,
        reference_index: reference.index,
        target_index: target.index,
        target_order: target.order,
        reference_signatures: &found.reference_signatures,
        target_signatures: &found.target_signatures,
        candidates: &found.candidates,
        metres_per_unit: facts.metres_per_unit,
        reference_spacing: found.search.reference_spacing,
        georeferenced: facts.georeferenced,
        unit_scale: facts.unit_scale,
    };
    stage(progress, "robust fit", None, |_| {
        fit::robust_fit(&input, &config.fit, &mut |m| progress.message(m))
    })
}
