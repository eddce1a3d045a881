//! Stage 6 — emit: write the control points, the transform and the report.
//!
//! **In:** an accepted [`MatchOutcome`], a checked [`Destination`] (from the output options, see
//! [`check_output_dir`]) and the report text.
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
//!   position (its length is the residual). Layer `target_points`: the control points where the
//!   target has them, in the target's own CRS; for a local grid in its engineering CRS
//!   (`LOCAL_CS` with the unit declared by `target.crs = local:UNIT`, or GeoPackage's
//!   "Undefined Cartesian SRS" when none was declared; see [`crate::frame::grid`]).
//! - `transform.json` ([`json`]): the similarity, its standard errors, RMSE, counts, CRSs,
//!   thresholds, seed and version.
//! - `report.txt`: the text summary, with the cautions.
//! - `report.html` ([`html`], figures by [`plot`]): one self-contained page to look at — the
//!   verdict, key numbers, transform, accuracy, a map of the landmarks and residual vectors,
//!   a residual histogram and the cautions; every number tagged with its value in
//!   `transform.json`.
//!
//! Before any work the output is resolved and checked ([`check_output_dir`],
//! [`check_output_file`], module `destination`): new or empty (or `--force`), never an input of
//! the run, writable. Nothing is written until everything is ready: the files are made in a
//! hidden staging folder beside the output folder (on the same device) and put in place at the
//! end, all five or none (module `atomic`): a new output folder is renamed into place (and
//! refused if another run made it meanwhile); in an existing one (`--force`) the previous five
//! files are moved into a hidden backup folder while the new ones go in, and put back if
//! anything fails. Other files in the output folder are never touched. On any error, and on
//! SIGINT, SIGTERM or SIGHUP, the staging folder is removed and the output folder is left as it
//! was; what a crash leaves and how to recover is in that module's doc. A full disk is said as
//! such ([`EmitError::DiskFull`]).

pub(crate) mod atomic;
pub mod csv;
pub mod destination;
pub mod drift;
pub mod epochs;
pub mod gpkg;
pub mod html;
pub mod json;
pub mod plot;
pub mod raster;

use crate::fit::Solution;
use crate::ingest::LandmarkSet;
use crate::outcome::MatchOutcome;
use crate::progress::Progress;
use atomic::Staging;
pub use atomic::{remove_leftovers, Leftovers};
pub use destination::{check_output_dir, check_output_file, Destination};
use std::path::{Path, PathBuf};

/// The files a raster target adds (see [`raster`]).
pub const RASTER_FILES: [&str; 3] = [
    raster::GCP_VRT,
    raster::GEOREFERENCED_VRT,
    raster::COREGISTERED_TIF,
];

/// Names of the files a match writes.
pub const FILES: [&str; 5] = [
    "control-points.csv",
    "control-points.gpkg",
    "transform.json",
    "report.txt",
    html::FILE,
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
    /// The output file is a folder, or something other than a regular file.
    #[error("{0}: is a folder or not a regular file; give the name of a file to write (e.g. landmarks.gpkg)")]
    NotAFile(PathBuf),
    /// The output path resolves to a folder without a name (the root).
    #[error("{0}: names no folder of its own (it resolves to the root of the file system); choose another output")]
    NoName(PathBuf),
    /// The output is, or would replace, or lies inside an input of the run.
    #[error("{output}: is an input of this run ({input}) or would replace or lie inside one; tiemark never writes onto its inputs: choose another output")]
    OntoInput {
        /// The output (as given, and resolved).
        output: String,
        /// The input.
        input: PathBuf,
    },
    /// The output cannot be written (checked before any work).
    #[error("{output}: cannot be written (in {place}): {source}")]
    NotWritable {
        /// The output (as given, and resolved).
        output: String,
        /// The folder where writing failed.
        place: PathBuf,
        /// Why.
        source: std::io::Error,
    },
    /// The disk, or the user's quota on it, is full (ENOSPC, EDQUOT).
    #[error("{path}: disk full ({detail}); nothing was written: free space on that disk, or choose an output on another disk, then run again")]
    DiskFull {
        /// Where.
        path: PathBuf,
        /// The system's (or GDAL's) words.
        detail: String,
    },
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

impl EmitError {
    /// An I/O error at `path`; a full disk becomes [`EmitError::DiskFull`].
    pub(crate) fn from_io(path: &Path, source: std::io::Error) -> EmitError {
        if atomic::disk_full(&source) {
            EmitError::DiskFull {
                path: path.to_path_buf(),
                detail: source.to_string(),
            }
        } else {
            EmitError::Io {
                path: path.to_path_buf(),
                source,
            }
        }
    }
}

pub(crate) fn io_err(path: &Path) -> impl FnOnce(std::io::Error) -> EmitError + '_ {
    move |source| EmitError::from_io(path, source)
}

/// A test hook (debug builds only): with `TIEMARK_TEST_PAUSE_WHILE_STAGING=FILE` set, a run
/// that has begun writing its staging folder writes FILE and waits until FILE is removed (at
/// most a minute), so that a test can interrupt it, or let it go on, at that moment.
fn pause_for_tests() {
    #[cfg(debug_assertions)]
    if let Some(flag) = std::env::var_os("TIEMARK_TEST_PAUSE_WHILE_STAGING") {
        if std::fs::write(&flag, b"staging\n").is_ok() {
            let start = std::time::Instant::now();
            while Path::new(&flag).exists() && start.elapsed().as_secs() < 60 {
                std::thread::sleep(std::time::Duration::from_millis(10));
            }
        }
    }
}

/// Writes every output file of an accepted match into the checked output folder; returns
/// their paths (as [`Destination::shown`]). `progress` sees one stage, "writing outputs",
/// counting the GeoPackage's features; the GeoPackage is written on this thread while
/// another writes the CSV, the JSON and the report (each GDAL dataset stays on one thread).
pub fn write_all(
    outcome: &MatchOutcome,
    out: &Destination,
    report: &str,
    warp: Option<raster::Resampling>,
    progress: &dyn Progress,
) -> Result<Vec<PathBuf>, EmitError> {
    write_all_with(outcome, out, report, warp, progress, &|_| Ok(Vec::new()))
}

/// As [`write_all`], and `extra` writes a front end's own files into the staging folder it is
/// given (returning their names), so that they are put in place with the match's files, all
/// or none (the drift check's files, [`drift`]).
pub fn write_all_with(
    outcome: &MatchOutcome,
    out: &Destination,
    report: &str,
    warp: Option<raster::Resampling>,
    progress: &dyn Progress,
    extra: &dyn Fn(&Path) -> Result<Vec<&'static str>, EmitError>,
) -> Result<Vec<PathBuf>, EmitError> {
    let solution = outcome.solution().ok_or(EmitError::NothingAccepted)?;
    // Again, after the work: another run may have written there meanwhile.
    destination::check_dir_state(out)?;
    let dir = &out.path;
    let staging = Staging::for_target(dir)?;
    let written = (|| {
        let features = Some(gpkg::control_point_features(solution));
        crate::progress::stage(progress, "writing outputs", features, |done| {
            std::thread::scope(|scope| {
                let others = scope.spawn(|| {
                    csv::write_control_points(outcome, solution, &staging.path.join(FILES[0]))?;
                    json::write_transform(outcome, solution, &staging.path.join(FILES[2]))?;
                    let report_path = staging.path.join(FILES[3]);
                    std::fs::write(&report_path, report).map_err(io_err(&report_path))?;
                    html::write_report(outcome, solution, &staging.path.join(FILES[4]))
                });
                pause_for_tests();
                let gpkg = gpkg::write_control_points(
                    outcome,
                    solution,
                    &staging.path.join(FILES[1]),
                    done,
                );
                let others = others.join().expect("the CSV writer does not panic");
                gpkg.and(others)
            })
        })?;
        let mut names = raster_outputs(outcome, solution, &staging.path, warp)?;
        names.extend(extra(&staging.path)?);
        Ok(names)
    })();
    // A full disk is said of the output folder (the staging folder is gone by then).
    let extra = written.map_err(|e| match e {
        EmitError::DiskFull { path, detail } => EmitError::DiskFull {
            path: out.given.clone(),
            detail: format!(
                "writing {}: {detail}",
                path.file_name().unwrap_or_default().to_string_lossy()
            ),
        },
        other => other,
    })?;
    let names: Vec<&str> = FILES.iter().copied().chain(extra.iter().copied()).collect();
    atomic::put_in_place(staging, dir, &names, out.mode())?;
    Ok(names.iter().map(|f| out.shown(f)).collect())
}

/// For a raster target, the files that co-register it, written into `dir`; their names.
/// `target-gcps.vrt` carries every control point as a GCP (the target file's own pixel/line →
/// the reference's own coordinates) when the reference has a CRS; `target-georeferenced.vrt`
/// gives the target the corrected geotransform when the similarity maps the target's own
/// coordinates onto the reference's (one CRS for both and for the fit) and the file was read
/// as it is (not through a warped view).
fn raster_outputs(
    outcome: &MatchOutcome,
    solution: &Solution,
    dir: &Path,
    warp: Option<raster::Resampling>,
) -> Result<Vec<&'static str>, EmitError> {
    let Some(image) = &outcome.target.raster else {
        return Ok(Vec::new());
    };
    let Some(reference_wkt) = outcome.reference.crs_wkt.as_deref() else {
        return Ok(Vec::new());
    };
    let working = outcome.frame.crs.wkt.as_str();
    let one_crs = outcome.target.crs_wkt.as_deref() == Some(working) && reference_wkt == working;
    let gcps: Vec<raster::Gcp> = solution
        .pairs
        .iter()
        .map(|p| {
            let (r, t) = (p.reference as usize, p.target as usize);
            // The target position fitted: in the target's own CRS it is the working frame's
            // (refined on the pixels when that applied), else the keypoint as read.
            let at = if one_crs {
                outcome.frame.target[t]
            } else {
                outcome.target.points[t]
            };
            // The file's own pixel/line (through the warped view's map back, for an image
            // read through one), so that a GCP warp of the file itself uses them.
            let [pixel, line] = image
                .file_pixel(at)
                .expect("a raster survey's geotransform has an inverse (checked on reading)");
            let [x, y] = outcome.reference.points[r];
            raster::Gcp {
                id: outcome.reference.ids[r].clone(),
                pixel,
                line,
                x,
                y,
            }
        })
        .collect();
    let source = &outcome.target.source;
    raster::write_gcp_vrt(source, &gcps, reference_wkt, &dir.join(raster::GCP_VRT))?;
    let mut names = vec![raster::GCP_VRT];
    // Only for a file read as it is: a warped view's geotransform is not the file's.
    if one_crs && image.read_as_is() {
        raster::write_georeferenced_vrt(
            source,
            &image.geotransform,
            &solution.fit.transform,
            reference_wkt,
            &dir.join(raster::GEOREFERENCED_VRT),
        )?;
        names.push(raster::GEOREFERENCED_VRT);
    }
    if let Some(resampling) = warp {
        // Onto the reference's grid when it is an image; else onto a north-up grid of the
        // target's own pixel size in the reference's CRS.
        let grid = match &outcome.reference.raster {
            Some(r) => raster::ReferenceGrid {
                crs_wkt: reference_wkt.to_string(),
                geotransform: r.geotransform,
                width: r.width,
                height: r.height,
            },
            None => {
                let px = image.pixel_m / outcome.frame.metres_per_unit();
                raster::ReferenceGrid {
                    crs_wkt: reference_wkt.to_string(),
                    geotransform: crate::image::GeoTransform([0.0, px, 0.0, 0.0, 0.0, -px]),
                    width: 1,
                    height: 1,
                }
            }
        };
        // The GCP warp follows the model written: first order for the similarity and the
        // affine, second order for the polynomial, the thin-plate spline for tps.
        let transform = match outcome.config.fit.model {
            crate::fit::Model::Similarity | crate::fit::Model::Affine => {
                raster::WarpTransform::FirstOrder
            }
            crate::fit::Model::Polynomial2 => raster::WarpTransform::SecondOrder,
            crate::fit::Model::Tps => raster::WarpTransform::ThinPlateSpline,
        };
        let options = raster::WarpOptions {
            resampling,
            transform,
            ..raster::WarpOptions::default()
        };
        raster::warp_to_reference(
            &dir.join(raster::GCP_VRT),
            &grid,
            &options,
            &dir.join(raster::COREGISTERED_TIF),
            None,
        )?;
        names.push(raster::COREGISTERED_TIF);
    }
    Ok(names)
}

/// The landmark file format of an output path, by its extension (lower case): `csv`, `gpkg`,
/// `geojson`, `json` or `fgb`.
pub(crate) fn landmark_format(out: &Path) -> Option<String> {
    let ext = out
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase())?;
    matches!(ext.as_str(), "csv" | "gpkg" | "geojson" | "json" | "fgb").then_some(ext)
}

/// Writes a landmark set (id, x, y in its own CRS) to the checked output file, format by
/// extension; the file is written under a temporary name beside it and moved into place, so
/// it is either whole or as it was (and, without `--force`, never replaces a file that
/// appeared meanwhile).
pub fn write_landmarks(set: &LandmarkSet, out: &Destination) -> Result<(), EmitError> {
    let ext =
        landmark_format(&out.path).ok_or_else(|| EmitError::UnknownFormat(out.given.clone()))?;
    atomic::write_file(&out.path, out.mode(), |tmp| match ext.as_str() {
        "csv" => csv::write_landmarks(set, tmp),
        _ => gpkg::write_landmarks(set, tmp, &ext),
    })
}
