//! Stage 6 — emit: write the control points, the transform and the report.
//!
//! **In:** an accepted [`MatchOutcome`], the [`OutputOptions`] and the report text.
//! **Out:** in the output folder:
//!
//! - `control-points.csv` ([`csv`]): one row per control point —
//!   `reference_id,target_id,reference_x,reference_y,target_x,target_y,residual_m,residual_dx_m,residual_dy_m`.
//!   Reference coordinates are in the reference's own CRS, target coordinates in the target's
//!   own CRS (or local grid), exactly as read; residuals are after the final fit, in metres,
//!   `dx, dy` = reference − mapped target along the working CRS's axes; coordinates with 4
//!   decimals in a projected CRS, 9 in a geographic one, residuals with 4. Example row (the
//!   sample town):
//!   `B-00001,S26-7988,455180.0000,5209670.0000,14.410252965,47.038975595,0.3609,-0.3437,-0.1101`
//! - `control-points.gpkg` ([`gpkg`]): layer `control_points` (points at the reference
//!   position, reference CRS, fields reference_id, target_id, residual_m) and layer
//!   `displacements` (one line per control point from where the target puts the landmark to
//!   where the reference has it, reference CRS, fields reference_id, target_id, length_m). For a
//!   georeferenced target the line starts at the target's position as georeferenced (its
//!   length is the drift between the surveys); for a local-grid target it starts at the fitted
//!   position (its length is the residual).
//! - `transform.json` ([`json`]): the similarity, its standard errors, RMSE, counts, CRSs,
//!   thresholds, seed and version.
//! - `report.txt`: the text summary, with the cautions.
//!
//! Nothing is written until everything is ready: the files are made in a hidden staging folder
//! beside the output folder and put in place at the end, all four or none (module `atomic`): a new
//! output folder is renamed into place; in an existing one (`--force`) the previous four files
//! are moved into a hidden backup folder beside it while the new ones go in, and put back if
//! anything fails. Other files in the output folder are never touched. On any error the
//! staging folder is removed and the output folder is left as it was; what a crash leaves and
//! how to recover is in that module's doc.

pub(crate) mod atomic;
pub mod csv;
pub mod gpkg;
pub mod json;
pub mod raster;

use crate::config::OutputOptions;
use crate::ingest::LandmarkSet;
use crate::outcome::MatchOutcome;
use atomic::Staging;
use std::path::{Path, PathBuf};

/// Names of the files a match writes.
pub const FILES: [&str; 4] = [
    "control-points.csv",
    "control-points.gpkg",
    "transform.json",
    "report.txt",
];

/// Writing failed.
#[derive(Debug, thiserror::Error)]
pub enum EmitError {
    /// The output folder has files in it.
    #[error("{0}: the output folder exists and is not empty; choose another output.dir, empty it, or set output.force to replace tiemark's files in it")]
    NotEmpty(PathBuf),
    /// The output path is a file.
    #[error("{0}: exists and is not a folder; choose another output.dir")]
    NotADirectory(PathBuf),
    /// The output file exists.
    #[error("{0}: exists; choose another output file or set output.force")]
    FileExists(PathBuf),
    /// File-system trouble.
    #[error("{path}: {source}")]
    Io {
        /// Where.
        path: PathBuf,
        /// Cause.
        source: std::io::Error,
    },
    /// GDAL trouble while writing.
    #[error("{path}: writing failed: {source}")]
    Gdal {
        /// Where.
        path: PathBuf,
        /// GDAL's error.
        #[source]
        source: gdal::errors::GdalError,
    },
    /// A raster output could not be made (the message says which step failed and what to do).
    #[error("{path}: {message}")]
    Raster {
        /// The output (or input) concerned.
        path: PathBuf,
        /// What failed, GDAL's words, and what to do.
        message: String,
    },
    /// Unsupported output format.
    #[error("{0}: unknown output format; use a .gpkg, .geojson, .fgb or .csv file name")]
    UnknownFormat(PathBuf),
    /// Coordinates could not be converted back to the reference CRS.
    #[error("converting outputs to the reference CRS failed: {0}")]
    Frame(#[source] crate::frame::FrameError),
    /// Asked to write the control points of a match that found none (a programmer error of
    /// the front end).
    #[error("no transform was accepted, so there are no control points to write")]
    NothingAccepted,
}

pub(crate) fn io_err(path: &Path) -> impl FnOnce(std::io::Error) -> EmitError + '_ {
    move |source| EmitError::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// Refuses an output folder that exists with files in it (unless `force`), or is a file.
/// Called before any work, so a long run cannot end in this error.
pub fn check_output_dir(dir: &Path, force: bool) -> Result<(), EmitError> {
    if !dir.exists() {
        return Ok(());
    }
    if !dir.is_dir() {
        return Err(EmitError::NotADirectory(dir.to_path_buf()));
    }
    let non_empty = std::fs::read_dir(dir)
        .map_err(io_err(dir))?
        .next()
        .is_some();
    if non_empty && !force {
        return Err(EmitError::NotEmpty(dir.to_path_buf()));
    }
    Ok(())
}

/// Writes every output file of an accepted match into `output.dir`; returns their final
/// paths.
pub fn write_all(
    outcome: &MatchOutcome,
    output: &OutputOptions,
    report: &str,
) -> Result<Vec<PathBuf>, EmitError> {
    let solution = outcome.solution().ok_or(EmitError::NothingAccepted)?;
    let out = &output.dir;
    check_output_dir(out, output.force)?;
    let staging = Staging::beside(out)?;
    csv::write_control_points(outcome, solution, &staging.path.join(FILES[0]))?;
    gpkg::write_control_points(outcome, solution, &staging.path.join(FILES[1]))?;
    json::write_transform(outcome, solution, &staging.path.join(FILES[2]))?;
    let report_path = staging.path.join(FILES[3]);
    std::fs::write(&report_path, report).map_err(io_err(&report_path))?;
    atomic::put_in_place(staging, out, &FILES)?;
    Ok(FILES.iter().map(|f| out.join(f)).collect())
}

/// Writes a landmark set (id, x, y in its own CRS) to one file, format by extension; the file
/// is written under a temporary name beside it and renamed, so it is either whole or as it was.
pub fn write_landmarks(set: &LandmarkSet, out: &Path, force: bool) -> Result<(), EmitError> {
    if out.exists() && !force {
        return Err(EmitError::FileExists(out.to_path_buf()));
    }
    if out.is_dir() {
        return Err(EmitError::NotADirectory(out.to_path_buf()));
    }
    let ext = out
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase())
        .unwrap_or_default();
    if !matches!(ext.as_str(), "csv" | "gpkg" | "geojson" | "json" | "fgb") {
        return Err(EmitError::UnknownFormat(out.to_path_buf()));
    }
    atomic::write_file(out, |tmp| match ext.as_str() {
        "csv" => csv::write_landmarks(set, tmp),
        _ => gpkg::write_landmarks(set, tmp, &ext),
    })
}
