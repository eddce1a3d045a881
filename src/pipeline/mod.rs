//! Runs the stages in order: the library's one entry point for a match.
//!
//! **In:** a [`MatchConfig`] (from the command line or a pipeline file).
//! **Out:** [`MatchOutcome`]: the written files and the summary, or why no consistent transform
//! was found. Errors are [`Error`]s that name the file and say what to do.

pub mod config;
pub mod progress;

pub use config::{ConfigError, MatchConfig};

use crate::emit::{self, EmitError};
use crate::fit::{self, FitError, FitOutcome, Rejection, Solution};
use crate::ingest::{self, IngestError, IngestOptions, LandmarkSet};
use crate::frame::{self, FrameError, FrameOptions, WorkingFrame};
use crate::matching;
use crate::signatures::{self, SignatureError};
use crate::spatial::{median_spacing, PointIndex};
use progress::Progress;
use std::path::PathBuf;

/// Anything that stops a run. Each variant's message names the file or option and the fix.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// Pipeline file trouble.
    #[error(transparent)]
    Config(#[from] ConfigError),
    /// Input dataset trouble.
    #[error(transparent)]
    Ingest(#[from] IngestError),
    /// CRS or overlap trouble.
    #[error(transparent)]
    Frame(#[from] FrameError),
    /// Signature options or too few landmarks.
    #[error(transparent)]
    Signature(#[from] SignatureError),
    /// Fit options.
    #[error(transparent)]
    Fit(#[from] FitError),
    /// Writing outputs.
    #[error(transparent)]
    Emit(#[from] EmitError),
    /// The landmarks defeat the k-d tree (e.g. a huge number sharing one coordinate).
    #[error("{path}: the landmarks are degenerate (too many share one coordinate value to index)")]
    Degenerate {
        /// File.
        path: PathBuf,
    },
}

/// Everything the emit and report stages need about an accepted match.
#[derive(Debug, Clone)]
pub struct MatchResult {
    /// The configuration used.
    pub config: MatchConfig,
    /// Reference landmarks as read.
    pub reference: LandmarkSet,
    /// Target landmarks as read.
    pub target: LandmarkSet,
    /// Both in the working frame.
    pub frame: WorkingFrame,
    /// The accepted solution.
    pub solution: Solution,
    /// Median reference spacing, working units.
    pub reference_spacing: f64,
    /// What the signature and matching stages produced.
    pub counts: Counts,
}

/// What the signature and matching stages produced, and with which options.
#[derive(Debug, Clone)]
pub struct Counts {
    /// Reference signatures built.
    pub reference_signatures: usize,
    /// Target signatures built.
    pub target_signatures: usize,
    /// Candidate correspondences proposed.
    pub candidates: usize,
    /// The signature options used (the automatic choices resolved).
    pub signatures: crate::signatures::SignatureParams,
}

/// How a run ended (errors aside).
#[derive(Debug)]
pub enum MatchOutcome {
    /// Control points written.
    Written {
        /// The result.
        result: Box<MatchResult>,
        /// Files written.
        files: Vec<PathBuf>,
        /// The text summary (also in the report file).
        summary: String,
    },
    /// No consistent transform; nothing written.
    NoTransform {
        /// Why.
        rejection: Rejection,
        /// The text summary.
        summary: String,
    },
}

fn ingest_options(s: &config::SurveyInput) -> IngestOptions {
    IngestOptions {
        layer: s.layer.clone(),
        id_field: s.id.clone(),
    }
}

/// Runs a whole match: ingest, working frame, signatures, matching, robust fit, emit.
pub fn run_match(config: &MatchConfig, quiet: bool) -> Result<MatchOutcome, Error> {
    config.validate()?;
    emit::check_output_dir(&config.output.dir, config.output.force)?;
    let progress = Progress::new(quiet);

    let spin = progress.spinner("reading surveys");
    let reference =
        ingest::read_landmarks(&config.reference.path, &ingest_options(&config.reference))?;
    let target = ingest::read_landmarks(&config.target.path, &ingest_options(&config.target))?;
    spin.finish_and_clear();
    let frame = frame::working_frame(
        &reference,
        &target,
        &FrameOptions {
            reference_crs: config.reference.crs.clone(),
            target_crs: config.target.crs.clone(),
            working_crs: config.frame.working_crs.clone(),
        },
    )?;
    let solved = solve(config, &frame, &progress, &reference.source, &target.source)?;
    match solved {
        Solved::Found {
            solution,
            spacing,
            counts,
        } => {
            let result = MatchResult {
                config: config.clone(),
                reference,
                target,
                frame,
                solution: *solution,
                reference_spacing: spacing,
                counts,
            };
            let summary = crate::report::summary(&result);
            let files = emit::write_all(&result, &summary)?;
            let summary = crate::report::with_files(&summary, &files);
            Ok(MatchOutcome::Written {
                result: Box::new(result),
                files,
                summary,
            })
        }
        Solved::NotFound {
            rejection,
            spacing,
            counts,
        } => {
            let summary = crate::report::rejection(config, &frame, &rejection, spacing, &counts);
            Ok(MatchOutcome::NoTransform { rejection, summary })
        }
    }
}

/// Result of the solving stages on a working frame.
pub enum Solved {
    /// Accepted.
    Found {
        /// The solution.
        solution: Box<Solution>,
        /// Median reference spacing, working units.
        spacing: f64,
        /// What the signature and matching stages produced.
        counts: Counts,
    },
    /// Rejected.
    NotFound {
        /// Why.
        rejection: Rejection,
        /// Median reference spacing, working units.
        spacing: f64,
        /// What the signature and matching stages produced.
        counts: Counts,
    },
}

/// Signatures, matching and robust fit on landmarks already in the working frame. Also the
/// entry point of benchmarks and experiments (no I/O).
pub fn solve(
    config: &MatchConfig,
    frame: &WorkingFrame,
    progress: &Progress,
    reference_path: &std::path::Path,
    target_path: &std::path::Path,
) -> Result<Solved, Error> {
    let ri = PointIndex::new(&frame.reference).ok_or_else(|| Error::Degenerate {
        path: reference_path.to_path_buf(),
    })?;
    let ti = PointIndex::new(&frame.target).ok_or_else(|| Error::Degenerate {
        path: target_path.to_path_buf(),
    })?;
    let labels = [
        format!("the reference ({})", reference_path.display()),
        format!("the target ({})", target_path.display()),
    ];
    solve_points(
        config,
        &frame.reference,
        &frame.target,
        &ri,
        &ti,
        frame.metres_per_unit(),
        progress,
        &labels,
    )
}

/// As [`solve`], on plain point arrays with their indexes; `labels` name the two surveys in
/// errors.
pub fn solve_points(
    config: &MatchConfig,
    reference: &[[f64; 2]],
    target: &[[f64; 2]],
    ri: &PointIndex,
    ti: &PointIndex,
    metres_per_unit: f64,
    progress: &Progress,
    labels: &[String; 2],
) -> Result<Solved, Error> {
    let spacing = median_spacing(reference, ri, 10_000)
        .unwrap_or(1.0)
        .max(f64::MIN_POSITIVE);
    let bar = progress.bar(reference.len() as u64, "reference signatures");
    let used = config.signatures.resolve(reference.len().min(target.len()));
    let rs = signatures::compute(&labels[0], reference, ri, &used, &mut |n| {
        bar.set_position(n as u64)
    })?;
    bar.finish_and_clear();
    let bar = progress.bar(target.len() as u64, "target signatures");
    let ts = signatures::compute(&labels[1], target, ti, &used, &mut |n| {
        bar.set_position(n as u64)
    })?;
    bar.finish_and_clear();
    let bar = progress.bar(ts.len() as u64, "matching signatures");
    let cands = matching::candidates(
        &rs,
        &ts,
        config.matching.candidates,
        config.matching.rank,
        &mut |n| bar.set_position(n as u64),
    );
    bar.finish_and_clear();
    let counts = Counts {
        reference_signatures: rs.len(),
        target_signatures: ts.len(),
        candidates: cands.len(),
        signatures: used.clone(),
    };
    let spin = progress.spinner("robust fit");
    let input = fit::FitInput {
        reference,
        target,
        reference_index: ri,
        target_index: ti,
        reference_signatures: &rs,
        target_signatures: &ts,
        candidates: &cands,
        metres_per_unit,
        reference_spacing: spacing,
    };
    let outcome = fit::robust_fit(&input, &config.fit, &mut |m| {
        spin.set_message(m.to_string())
    });
    spin.finish_and_clear();
    Ok(match outcome {
        FitOutcome::Found(solution) => Solved::Found {
            solution,
            spacing,
            counts,
        },
        FitOutcome::NotFound(rejection) => Solved::NotFound {
            rejection,
            spacing,
            counts,
        },
    })
}

/// Reads one dataset's landmarks and writes them (id, x, y in the file's CRS) to `out`
/// (GeoPackage, GeoJSON, FlatGeobuf or CSV by extension), to inspect what tiemark sees.
pub fn extract_landmarks(
    path: &std::path::Path,
    options: &IngestOptions,
    out: &std::path::Path,
    force: bool,
) -> Result<LandmarkSet, Error> {
    let set = ingest::read_landmarks(path, options)?;
    emit::write_landmarks(&set, out, force)?;
    Ok(set)
}
