//! The outputs of `tiemark epochs`: the library of persistent control points.
//!
//! **In:** an [`EpochsOutcome`] whose epochs were all joined to the base, a checked
//! [`Destination`] and the report text. **Out:** in the output folder, all or none (the
//! staging machinery of `emit/atomic.rs`):
//!
//! - `persistent-control-points.csv`: one row per kept track —
//!   `track,<epoch>…,epochs_seen,x,y,sd_x_m,sd_y_m,largest_movement_m,grade`: a column per
//!   epoch named after its file's stem holding that epoch's landmark id (empty where not
//!   seen); `x`, `y` the track's weighted mean position in the base epoch's own CRS (4
//!   decimals, 9 in a geographic CRS); `sd_x_m`, `sd_y_m` the sample standard deviation of its
//!   per-epoch positions along the working CRS's axes; `largest_movement_m` the largest
//!   distance between two of them; `grade` the stability grade (A, B, C; see
//!   [`crate::epochs`]).
//! - `moved-landmarks.csv`: the tracks that moved between epochs, same leading columns, then
//!   `x,y,largest_movement_m,statistic,p_value` (a drift finding, not control).
//! - `persistent-control-points.gpkg`: layer `persistent_control_points` (the kept tracks as
//!   points in the base CRS: track, epochs_seen, sd_x_m, sd_y_m, largest_movement_m, grade),
//!   layer `epoch_positions` (each kept or moved track's position in every epoch that saw it,
//!   mapped into the base CRS: track, epoch, landmark_id, offset_m from the track's mean,
//!   status) and layer `moved_landmarks`.
//! - `epochs.json`: every epoch (file, CRS, landmarks) and its transform to the base with
//!   standard errors, the pairs matched, the closure checks, the adjustment's variance factor
//!   and redundancy, the counts.
//! - `report.txt`: the summary, with the cautions.
//! - `report.html` ([`page`], rendered by `emit/html.rs`): the epochs; the verdict (every
//!   epoch joined, closure warnings); the counts; a table of every epoch's transform to the
//!   base with standard errors, of the pairs matched, of the closure checks (with their
//!   warnings) and of the residuals per epoch; the adjustment's figures; a map of the kept
//!   tracks coloured and shaped by stability grade ([`GRADE_INKS`]) with the moved tracks
//!   marked ([`MOVED_INK`]); a histogram of the kept tracks' offsets from their means; the
//!   cautions. Every number is tagged with its key in `epochs.json` (or `page`).

use super::gpkg::FieldValue;
use super::html::{self, Grid, Line, Number, Page, Row, Verdict, VerdictKind};
use super::plot::{Ink, MapLayers, PointClass};
use super::{atomic, destination, gpkg, io_err, Destination, EmitError};
use crate::epochs::{EpochsOutcome, Track, TrackStatus};
use gdal::vector::{OGRFieldType, OGRwkbGeometryType};
use serde_json::json;
use std::io::Write;
use std::path::{Path, PathBuf};

/// The files an epochs run writes.
pub const FILES: [&str; 6] = [
    "persistent-control-points.csv",
    "persistent-control-points.gpkg",
    "moved-landmarks.csv",
    "epochs.json",
    "report.txt",
    html::FILE,
];

/// The inks of the kept tracks on the map, grades A, B, C: they differ in marker shape (dot,
/// square, ring) and step down in relative luminance from C to A (about 0.40, 0.26, 0.04),
/// so that the best tracks stand out most and the grades read in greyscale. A is the match
/// map's control-point blue; B and C are Okabe–Ito bluish green and sky blue (see
/// `emit/plot.rs` for the scheme and its source).
pub const GRADE_INKS: [Ink; 3] = [
    Ink {
        class: "grade-a",
        label: "grade A tracks",
        shape: "dot",
        rgb: (0x00, 0x3a, 0x66),
    },
    Ink {
        class: "grade-b",
        label: "grade B tracks",
        shape: "square",
        rgb: (0x00, 0x9e, 0x73),
    },
    Ink {
        class: "grade-c",
        label: "grade C tracks",
        shape: "ring",
        rgb: (0x56, 0xb4, 0xe9),
    },
];

/// The moved tracks on the map: vermilion crosses (Okabe–Ito), drawn over the kept ones.
pub const MOVED_INK: Ink = Ink {
    class: "moved",
    label: "moved landmarks",
    shape: "cross",
    rgb: (0xd5, 0x5e, 0x00),
};

/// The caution of a library besides the crate's own ([`crate::report::CAUTION`]).
pub const LATER_CAUTION: &str = "A persistent landmark is one that stayed put in these epochs; it may still move later: re-check the library against each new survey.";

/// Fixed columns of `persistent-control-points.csv` (epoch names must avoid them).
pub const COLUMNS: [&str; 10] = [
    "track",
    "epochs_seen",
    "x",
    "y",
    "sd_x_m",
    "sd_y_m",
    "largest_movement_m",
    "grade",
    "statistic",
    "p_value",
];

/// Writes every file into the checked output folder; returns their paths as shown.
pub fn write_all(
    outcome: &EpochsOutcome,
    out: &Destination,
    report: &str,
) -> Result<Vec<PathBuf>, EmitError> {
    destination::check_dir_state(out)?;
    let staging = atomic::Staging::for_target(&out.path)?;
    let means = base_crs(outcome, |t| Some(t.mean))?;
    let dir = staging.path.clone();
    (|| -> Result<(), EmitError> {
        write_csv(outcome, &means, &dir.join(FILES[0]), false)?;
        super::pause_for_tests();
        write_gpkg(outcome, &means, &dir.join(FILES[1]))?;
        write_csv(outcome, &means, &dir.join(FILES[2]), true)?;
        let doc = document(outcome);
        let p = dir.join(FILES[3]);
        let text = serde_json::to_string_pretty(&doc).expect("JSON of plain values") + "\n";
        std::fs::write(&p, text).map_err(io_err(&p))?;
        let p = dir.join(FILES[4]);
        std::fs::write(&p, report).map_err(io_err(&p))?;
        let p = dir.join(FILES[5]);
        std::fs::write(&p, html::render(&page(outcome, &doc))).map_err(io_err(&p))
    })()
    .map_err(|e| match e {
        EmitError::DiskFull { path, detail } => EmitError::DiskFull {
            path: out.given.clone(),
            detail: format!(
                "writing {}: {detail}",
                path.file_name().unwrap_or_default().to_string_lossy()
            ),
        },
        other => other,
    })?;
    atomic::put_in_place(staging, &out.path, &FILES, out.mode())?;
    Ok(FILES.iter().map(|f| out.shown(f)).collect())
}

/// Per track, a point chosen by `pick` (base working frame) converted to the base's CRS.
fn base_crs(
    outcome: &EpochsOutcome,
    pick: impl Fn(&Track) -> Option<[f64; 2]>,
) -> Result<Vec<Option<[f64; 2]>>, EmitError> {
    let picked: Vec<Option<[f64; 2]>> = outcome.library.tracks.iter().map(pick).collect();
    let flat: Vec<[f64; 2]> = picked.iter().flatten().copied().collect();
    let conv = outcome
        .frame
        .to_reference_crs(&flat)
        .map_err(EmitError::Frame)?;
    let mut it = conv.into_iter();
    Ok(picked.iter().map(|p| p.and_then(|_| it.next())).collect())
}

fn shown(t: &Track) -> bool {
    matches!(t.status, TrackStatus::Kept)
}

fn write_csv(
    outcome: &EpochsOutcome,
    means: &[Option<[f64; 2]>],
    path: &Path,
    moved: bool,
) -> Result<(), EmitError> {
    let f = std::fs::File::create(path).map_err(io_err(path))?;
    let mut w = std::io::BufWriter::new(f);
    let d = super::csv::coordinate_decimals(outcome.frame.reference_crs.geographic);
    let names: Vec<String> = outcome
        .epochs
        .iter()
        .map(|e| super::csv::field(&e.name))
        .collect();
    let tail = if moved {
        "epochs_seen,x,y,largest_movement_m,statistic,p_value"
    } else {
        "epochs_seen,x,y,sd_x_m,sd_y_m,largest_movement_m,grade"
    };
    let e = io_err(path);
    (|| -> std::io::Result<()> {
        writeln!(w, "track,{},{tail}", names.join(","))?;
        for (t, mean) in outcome.library.tracks.iter().zip(means) {
            let keep = if moved {
                t.status == TrackStatus::Moved
            } else {
                shown(t)
            };
            if !keep {
                continue;
            }
            let ids: Vec<String> = t
                .members
                .iter()
                .zip(&t.positions)
                .zip(&outcome.epochs)
                .map(|((m, p), e)| match (m, p) {
                    (Some(i), Some(_)) => super::csv::field(&e.set.ids[*i as usize]),
                    _ => String::new(),
                })
                .collect();
            let [x, y] = mean.expect("every track has a mean");
            write!(
                w,
                "{},{},{},{x:.d$},{y:.d$}",
                t.id,
                ids.join(","),
                t.epochs_seen()
            )?;
            if moved {
                writeln!(
                    w,
                    ",{:.4},{:.2},{:.3e}",
                    t.largest_movement_m, t.statistic, t.p_value
                )?;
            } else {
                writeln!(
                    w,
                    ",{:.4},{:.4},{:.4},{}",
                    t.sd_m[0],
                    t.sd_m[1],
                    t.largest_movement_m,
                    t.grade.unwrap_or('-')
                )?;
            }
        }
        w.flush()
    })()
    .map_err(e)
}

fn write_gpkg(
    outcome: &EpochsOutcome,
    means: &[Option<[f64; 2]>],
    path: &Path,
) -> Result<(), EmitError> {
    use OGRFieldType::{OFTInteger, OFTReal, OFTString};
    let e = gpkg::gdal_err(path);
    let srs = gpkg::srs_from_wkt(&outcome.frame.reference_crs.wkt, path)?;
    let lib = &outcome.library;
    // Per-epoch positions of the kept and moved tracks, in the base CRS.
    let listed: Vec<(usize, usize, [f64; 2])> = lib
        .tracks
        .iter()
        .enumerate()
        .filter(|(_, t)| matches!(t.status, TrackStatus::Kept | TrackStatus::Moved))
        .flat_map(|(i, t)| {
            t.positions
                .iter()
                .enumerate()
                .filter_map(move |(k, p)| p.map(|p| (i, k, p)))
        })
        .collect();
    let converted = outcome
        .frame
        .to_reference_crs(&listed.iter().map(|x| x.2).collect::<Vec<_>>())
        .map_err(EmitError::Frame)?;
    let grades: Vec<String> = lib
        .tracks
        .iter()
        .map(|t| t.grade.map_or("moved".into(), |g| g.to_string()))
        .collect();
    let mpu = lib.metres_per_unit;
    let (mut ds, _fixed) = gpkg::create_gpkg(path)?;
    {
        let mut txn = ds.start_transaction().map_err(&e)?;
        for (name, status) in [
            ("persistent_control_points", TrackStatus::Kept),
            ("moved_landmarks", TrackStatus::Moved),
        ] {
            let rows = lib
                .tracks
                .iter()
                .zip(means)
                .zip(&grades)
                .filter(|((t, _), _)| t.status == status)
                .map(|((t, mean), grade)| {
                    (
                        vec![
                            FieldValue::Text(&t.id),
                            FieldValue::Int(t.epochs_seen() as i32),
                            FieldValue::Real(t.sd_m[0]),
                            FieldValue::Real(t.sd_m[1]),
                            FieldValue::Real(t.largest_movement_m),
                            FieldValue::Text(grade),
                        ],
                        mean.expect("every track has a mean"),
                    )
                });
            gpkg::write_layer(
                &mut txn,
                name,
                OGRwkbGeometryType::wkbPoint,
                &srs,
                &[
                    ("track", OFTString),
                    ("epochs_seen", OFTInteger),
                    ("sd_x_m", OFTReal),
                    ("sd_y_m", OFTReal),
                    ("largest_movement_m", OFTReal),
                    ("grade", OFTString),
                ],
                rows,
                gpkg::point,
                path,
            )?;
        }
        let rows = listed.iter().zip(&converted).map(|((i, k, working), p)| {
            let t = &lib.tracks[*i];
            let m = t.members[*k].expect("a position has a member");
            (
                vec![
                    FieldValue::Text(&t.id),
                    FieldValue::Text(&outcome.epochs[*k].name),
                    FieldValue::Text(&outcome.epochs[*k].set.ids[m as usize]),
                    FieldValue::Real(crate::spatial::dist2(*working, t.mean).sqrt() * mpu),
                    FieldValue::Text(if t.status == TrackStatus::Moved {
                        "moved"
                    } else {
                        "kept"
                    }),
                ],
                *p,
            )
        });
        gpkg::write_layer(
            &mut txn,
            "epoch_positions",
            OGRwkbGeometryType::wkbPoint,
            &srs,
            &[
                ("track", OFTString),
                ("epoch", OFTString),
                ("landmark_id", OFTString),
                ("offset_m", OFTReal),
                ("status", OFTString),
            ],
            rows,
            gpkg::point,
            path,
        )?;
        txn.commit().map_err(&e)?;
    }
    gpkg::close_checked(ds, path)?;
    Ok(())
}

/// The document of `epochs.json`.
pub fn document(outcome: &EpochsOutcome) -> serde_json::Value {
    let lib = &outcome.library;
    let base = outcome.config.base_index();
    let epochs: Vec<serde_json::Value> = outcome
        .epochs
        .iter()
        .enumerate()
        .map(|(k, e)| {
            let t = lib.transforms[k].as_ref();
            let (n_kept, rms_kept, largest_kept) = kept_offsets(outcome, k);
            json!({
                "number": k + 1,
                "name": e.name,
                "file": e.set.source.display().to_string(),
                "layer": e.set.layer,
                "crs": e.crs.as_ref().map(|c| c.label()),
                "local_grid_unit": e.crs.is_none().then(|| e.unit.map(|u| u.code())),
                "landmarks": e.set.ids.len(),
                "base": k == base,
                "to_base": t.map(|t| json!({
                    "maps": "this epoch's working coordinates (the base's working CRS, or the local grid's own) to the base's working CRS",
                    "scale": t.similarity.scale(),
                    "rotation_deg": t.similarity.rotation().to_degrees(),
                    "translation_x": t.similarity.tx,
                    "translation_y": t.similarity.ty,
                    "standard_errors": {
                        "scale": t.se_scale,
                        "rotation_arcsec": t.se_rotation.to_degrees() * 3600.0,
                        "position_at_centroid_m": {"x": t.se_position_m[0], "y": t.se_position_m[1]},
                    },
                    "centroid": {"x": t.origin[0], "y": t.origin[1]},
                    "landmarks_adjusted": t.landmarks,
                    "rms_residual_m": t.rms_m,
                    "sigma_m": t.sigma_m,
                    "kept_tracks": n_kept,
                    "kept_rms_offset_m": rms_kept,
                    "kept_largest_offset_m": largest_kept,
                })),
            })
        })
        .collect();
    let pairs: Vec<serde_json::Value> = outcome
        .pairs
        .iter()
        .map(|p| {
            let (name_r, name_t) = (
                &outcome.epochs[p.reference].name,
                &outcome.epochs[p.target].name,
            );
            match &p.result {
                Ok(c) => json!({"reference": name_r, "target": name_t, "accepted": true,
                    "control_points": c.points.len(), "rmse_m": c.rmse_m}),
                Err(r) => json!({"reference": name_r, "target": name_t, "accepted": false,
                    "reason": crate::report::reason(&r.reason)}),
            }
        })
        .collect();
    let closures: Vec<serde_json::Value> = lib
        .closures
        .iter()
        .map(|c| {
            let [b, i, j] = c.epochs;
            json!({
                "chain": [outcome.epochs[j].name, outcome.epochs[i].name, outcome.epochs[b].name],
                "direct": [outcome.epochs[j].name, outcome.epochs[b].name],
                "misfit_m": c.misfit_m,
                "largest_misfit_m": c.largest_misfit_m,
                "rotation_arcsec": c.rotation_arcsec,
                "scale_ppm": c.scale_ppm,
                "chi2": c.statistic,
                "chi2_99": c.threshold,
                "warning": c.flagged,
            })
        })
        .collect();
    let o = &outcome.config.options;
    json!({
        "tool": "tiemark",
        "version": env!("CARGO_PKG_VERSION"),
        "seed": outcome.config.fit.seed,
        "base": outcome.epochs[base].name,
        "base_crs": outcome.frame.reference_crs.label(),
        "working_crs": outcome.frame.crs.label(),
        "pairs_plan": o.pairs,
        "min_epochs": outcome.config.min_epochs(),
        "stability_m": o.stability_m,
        "epochs": epochs,
        "pairs": pairs,
        "closure": {
            "test": "chi-square, 4 degrees of freedom, of the chain j->i->base minus j->base (linear part and position at the centroid of the (i,j) control points), covariances of the three pairwise fits summed; warning above the 99% point",
            "checks": closures,
        },
        "adjustment": {
            "variance_factor": lib.variance_factor,
            "redundancy": lib.redundancy,
            "moved_test": format!("per track chi-square with 2(m-1) degrees of freedom, moved when p < {}", crate::epochs::MOVED_ALPHA),
        },
        "counts": lib.counts,
    })
}

/// The summary printed and written to `report.txt`, with the cautions.
pub fn summary(outcome: &EpochsOutcome) -> String {
    let lib = &outcome.library;
    let base = outcome.config.base_index();
    let mut s = String::new();
    s += &format!(
        "Persistent control points across {} epochs; base: {} ({})\n\n",
        outcome.epochs.len(),
        outcome.epochs[base].name,
        outcome.frame.reference_crs.label()
    );
    s += "Pairs matched:\n";
    for p in &outcome.pairs {
        let (a, b) = (
            &outcome.epochs[p.reference].name,
            &outcome.epochs[p.target].name,
        );
        match &p.result {
            Ok(c) => {
                s += &format!(
                    "  {b} -> {a}: {} control points, RMSE {:.3} m\n",
                    c.points.len(),
                    c.rmse_m
                )
            }
            Err(r) => {
                s += &format!(
                    "  {b} -> {a}: no transform: {}\n",
                    crate::report::reason(&r.reason)
                )
            }
        }
    }
    s += "\nTransforms to the base (joint adjustment):\n";
    for (k, e) in outcome.epochs.iter().enumerate() {
        match &lib.transforms[k] {
            Some(_) if k == base => s += &format!("  {}: base (fixed)\n", e.name),
            Some(t) => {
                s += &format!(
                    "  {}: scale {:.8} ± {:.2e}, rotation {:.6}° ± {:.2}\", position at its centroid ± {:.3} m east, ± {:.3} m north; {} landmarks, RMS {:.3} m\n",
                    e.name,
                    t.similarity.scale(),
                    t.se_scale,
                    t.similarity.rotation().to_degrees(),
                    t.se_rotation.to_degrees() * 3600.0,
                    t.se_position_m[0],
                    t.se_position_m[1],
                    t.landmarks,
                    t.rms_m
                )
            }
            None => s += &format!(
                "  {}: NOT JOINED: no accepted match links it to the base; check its CRS (or declare it crs = local), its overlap with the other epochs, or leave it out\n",
                e.name
            ),
        }
    }
    if !lib.closures.is_empty() {
        s += "\nClosure of chained transforms (j -> i -> base against j -> base):\n";
        for c in &lib.closures {
            let [b, i, j] = c.epochs;
            let n = |k: usize| &outcome.epochs[k].name;
            s += &format!(
                "  {} -> {} -> {}: misfit {:.3} m at the centroid (largest {:.3} m), rotation {:.2}\", scale {:.1} ppm, chi2 {:.2} (99% point {:.2}){}\n",
                n(j),
                n(i),
                n(b),
                c.misfit_m,
                c.largest_misfit_m,
                c.rotation_arcsec,
                c.scale_ppm,
                c.statistic,
                c.threshold,
                if c.flagged {
                    " WARNING: the chained transforms disagree beyond what their standard errors allow; one of these epochs may be distorted (not a similarity of the others) or mismatched"
                } else {
                    ""
                }
            );
        }
    }
    let c = &lib.counts;
    s += &format!(
        "\nTracks (landmarks linked in two or more epochs): {}; kept: {} (grade A {}, B {}, C {}); moved between epochs: {}; seen in fewer than {} epochs: {}; beyond the stability limit: {}; conflicting links refused: {}\n",
        c.tracks,
        c.kept,
        c.grades[0],
        c.grades[1],
        c.grades[2],
        c.moved,
        outcome.config.min_epochs(),
        c.too_few_epochs,
        c.unstable,
        c.conflicts
    );
    if c.moved > 0 {
        s += &format!(
            "{} landmarks moved between epochs beyond their noise: they are listed in moved-landmarks.csv as a drift finding and are not control points.\n",
            c.moved
        );
    }
    s += &format!(
        "\nGrades: A seen in every epoch, scatter within the noise (p >= {g}); B seen in at least half of the epochs with p >= {g}, or in every epoch with {m} <= p < {g}; C the other kept tracks.\n",
        g = crate::epochs::GRADE_ALPHA,
        m = crate::epochs::MOVED_ALPHA
    );
    s += "\n";
    s += crate::report::CAUTION;
    s += "\n";
    s += LATER_CAUTION;
    s += "\n";
    s
}

/// `summary` with the list of files written.
pub fn with_files(summary: &str, files: &[PathBuf]) -> String {
    let mut s = summary.to_string();
    s += "\nWritten:\n";
    for f in files {
        s += &format!("  {}\n", f.display());
    }
    s
}

/// Epoch `k`'s residuals over the kept tracks it is seen in: how many, the RMS of their
/// offsets from the tracks' means per coordinate (as `rms_residual_m`), the largest offset;
/// metres.
fn kept_offsets(outcome: &EpochsOutcome, k: usize) -> (usize, f64, f64) {
    let mpu = outcome.library.metres_per_unit;
    let offsets: Vec<f64> = outcome
        .library
        .tracks
        .iter()
        .filter(|t| t.status == TrackStatus::Kept)
        .filter_map(|t| t.positions[k].map(|p| crate::spatial::dist2(p, t.mean).sqrt() * mpu))
        .collect();
    let n = offsets.len();
    let rms = if n > 0 {
        (offsets.iter().map(|d| d * d).sum::<f64>() / (2 * n) as f64).sqrt()
    } else {
        0.0
    };
    (n, rms, offsets.iter().copied().fold(0.0, f64::max))
}

const JSON: &str = "epochs.json";

/// The page of `report.html`, from the outcome and its `epochs.json` document `doc` (so that
/// every number tagged on the page is the JSON's).
pub fn page(outcome: &EpochsOutcome, doc: &serde_json::Value) -> Page {
    let lib = &outcome.library;
    let base = outcome.config.base_index();
    let num = |key: &str, decimals: usize| Number::of(doc, JSON, key, decimals);
    let name = |k: usize| outcome.epochs[k].name.clone();

    let mut inputs: Vec<Line> = outcome
        .epochs
        .iter()
        .enumerate()
        .map(|(k, e)| {
            let crs = match (&e.crs, e.unit) {
                (Some(c), _) => c.label(),
                (None, Some(u)) => format!("local grid, unit {} (no CRS)", u.name()),
                (None, None) => "local grid (no CRS; unit not declared)".into(),
            };
            Line::new()
                .text(format!(
                    "epoch {} {}{}: {} ({}): ",
                    k + 1,
                    e.name,
                    if k == base { " (base)" } else { "" },
                    e.set.source.display(),
                    e.set.what()
                ))
                .num(num(&format!("epochs.{k}.landmarks"), 0))
                .text(format!(" landmarks, {crs}"))
        })
        .collect();
    inputs.push(Line::new().text(format!(
        "working CRS: {} — the base epoch's frame, in which the library is adjusted",
        outcome.frame.crs.label()
    )));

    let flagged = lib.closures.iter().filter(|c| c.flagged).count();
    let accepted = outcome.pairs.iter().filter(|p| p.result.is_ok()).count();
    let mut lines = vec![
        Line::new()
            .num(num("counts.kept", 0))
            .text(" persistent control points (grade A ")
            .num(num("counts.grades.0", 0))
            .text(", B ")
            .num(num("counts.grades.1", 0))
            .text(", C ")
            .num(num("counts.grades.2", 0))
            .text(") of ")
            .num(num("counts.tracks", 0))
            .text(" tracks; ")
            .num(num("counts.moved", 0))
            .text(" landmarks moved between epochs (a drift finding, in moved-landmarks.csv; not control points)."),
        Line::new()
            .num(Some(Number::page("pairs.accepted", accepted, 0)))
            .text(" of ")
            .num(Some(Number::page("pairs.matched", outcome.pairs.len(), 0)))
            .text(" pairs matched found a transform."),
    ];
    if flagged > 0 {
        lines.push(
            Line::new()
                .text("WARNING: ")
                .num(Some(Number::page("closure.flagged", flagged, 0)))
                .text(" of ")
                .num(Some(Number::page("closure.checked", lib.closures.len(), 0)))
                .text(" closure checks disagree beyond what the standard errors allow: one of those epochs may be distorted (not a similarity of the others) or mismatched; see the closure table."),
        );
    }
    let verdict = Verdict {
        kind: VerdictKind::Accepted,
        headline: "every epoch was joined to the base; the library of persistent control points is written beside this page.".into(),
        lines,
    };

    let count = |label: &str, key: &str| Row::of(label, doc, JSON, key, 0, "");
    let mut key_numbers: Vec<Row> = [
        Some(Row {
            label: "epochs".into(),
            number: Number::page("epochs", outcome.epochs.len(), 0),
            unit: String::new(),
            se: None,
            note: Line::new().text(format!("base: {}", name(base))),
        }),
        count("tracks", "counts.tracks")
            .map(|r| r.note(Line::new().text("landmarks linked in two or more epochs"))),
        count("kept as persistent control points", "counts.kept"),
        count("grade A", "counts.grades.0"),
        count("grade B", "counts.grades.1"),
        count("grade C", "counts.grades.2"),
        count("moved between epochs", "counts.moved")
            .map(|r| r.note(Line::new().text("beyond their noise; not control points"))),
        count("seen in too few epochs", "counts.too_few_epochs").map(|r| {
            r.note(
                Line::new()
                    .text("fewer than ")
                    .num(num("min_epochs", 0))
                    .text(" epochs"),
            )
        }),
        count("beyond the stability limit", "counts.unstable"),
        count("conflicting links refused", "counts.conflicts").map(|r| {
            r.note(Line::new().text("would have put two landmarks of one epoch in one track"))
        }),
        count("redundant links that agreed", "counts.agreeing_links"),
    ]
    .into_iter()
    .flatten()
    .collect();
    if let Some(r) = Row::of("stability limit", doc, JSON, "stability_m", 3, "m") {
        key_numbers.push(r.note(Line::new().text("largest movement between epochs allowed")));
    }

    let transforms = Grid {
        id: "epoch-transforms".into(),
        title: "Transforms to the base".into(),
        head: [
            "epoch",
            "scale",
            "rotation",
            "translation x",
            "translation y",
            "position at its centroid ±",
            "landmarks",
        ]
        .map(String::from)
        .to_vec(),
        rows: (0..outcome.epochs.len())
            .map(|k| {
                let t = |f: &str| format!("epochs.{k}.to_base.{f}");
                let mut row = vec![Line::new().text(name(k))];
                if k == base {
                    row.push(Line::new().text("base (fixed): the identity"));
                    row.extend((0..5).map(|_| Line::new()));
                    return row;
                }
                row.push(
                    Line::new()
                        .num(num(&t("scale"), 9))
                        .text(" ± ")
                        .num(num(&t("standard_errors.scale"), 9)),
                );
                row.push(
                    Line::new()
                        .num(num(&t("rotation_deg"), 6))
                        .text("° ± ")
                        .num(num(&t("standard_errors.rotation_arcsec"), 2))
                        .text("″"),
                );
                row.push(Line::new().num(num(&t("translation_x"), 3)));
                row.push(Line::new().num(num(&t("translation_y"), 3)));
                row.push(
                    Line::new()
                        .num(num(&t("standard_errors.position_at_centroid_m.x"), 3))
                        .text(" m east, ")
                        .num(num(&t("standard_errors.position_at_centroid_m.y"), 3))
                        .text(" m north"),
                );
                row.push(Line::new().num(num(&t("landmarks_adjusted"), 0)));
                row
            })
            .collect(),
        notes: vec![
            Line::new().text("Each similarity maps the epoch's working coordinates (the base's working CRS, or a local grid's own) onto the base's working CRS: x' = scale·(cos t·x − sin t·y) + translation x, y' = scale·(sin t·x + cos t·y) + translation y, t the rotation counter-clockwise; translations in working units."),
            Line::new().text("All epochs are adjusted at once from every track (a landmark the base lacks still ties the epochs that saw it); standard errors from the adjustment's covariance (σ̂₀²N⁻¹); the position's is that of the epoch's centroid mapped into the base."),
        ],
    };

    let pairs = Grid {
        id: "pairs".into(),
        title: "Pairs matched".into(),
        head: ["target → reference", "control points", "RMSE", "result"]
            .map(String::from)
            .to_vec(),
        rows: outcome
            .pairs
            .iter()
            .enumerate()
            .map(|(i, p)| {
                let key = |f: &str| format!("pairs.{i}.{f}");
                vec![
                    Line::new().text(format!("{} → {}", name(p.target), name(p.reference))),
                    Line::new().num(num(&key("control_points"), 0)),
                    match num(&key("rmse_m"), 3) {
                        Some(n) => Line::new().num(Some(n)).text(" m"),
                        None => Line::new(),
                    },
                    match &p.result {
                        Ok(_) => Line::new().text("accepted"),
                        Err(_) => Line::new().text("no transform: ").num(num(&key("reason"), 0)),
                    },
                ]
            })
            .collect(),
        notes: vec![Line::new().text(match outcome.config.options.pairs {
            crate::epochs::PairPlan::BaseAndNeighbours => "Every epoch against the base, and each against the next non-base epoch: 2N − 3 matches; every chain pair closes a triangle with the base, checked below.",
            crate::epochs::PairPlan::All => "Every pair of epochs: N(N − 1)/2 matches.",
        })],
    };

    let closures = Grid {
        id: "closure".into(),
        title: "Closure of chained transforms".into(),
        head: [
            "chain j → i → base",
            "misfit at the centroid",
            "largest misfit",
            "rotation",
            "scale",
            "χ² (4 d.o.f.)",
            "99% point",
            "result",
        ]
        .map(String::from)
        .to_vec(),
        rows: lib
            .closures
            .iter()
            .enumerate()
            .map(|(i, c)| {
                let key = |f: &str| format!("closure.checks.{i}.{f}");
                let [b, ci, j] = c.epochs;
                vec![
                    Line::new().text(format!("{} → {} → {}", name(j), name(ci), name(b))),
                    Line::new().num(num(&key("misfit_m"), 3)).text(" m"),
                    Line::new().num(num(&key("largest_misfit_m"), 3)).text(" m"),
                    Line::new().num(num(&key("rotation_arcsec"), 2)).text("″"),
                    Line::new().num(num(&key("scale_ppm"), 1)).text(" ppm"),
                    Line::new().num(num(&key("chi2"), 2)),
                    Line::new().num(num(&key("chi2_99"), 2)),
                    Line::new().text(if c.flagged {
                        "WARNING: the chained transforms disagree beyond what their standard errors allow"
                    } else {
                        "consistent"
                    }),
                ]
            })
            .collect(),
        notes: vec![if lib.closures.is_empty() {
            Line::new().text("No triangle of epochs had all three of its pairs matched, so no closure could be checked (it takes three or more epochs).")
        } else {
            Line::new().text("For each triangle (base, i, j), the pairwise fits j → i → base against j → base: the differences of the linear part and of the mapped position at the centroid of the (i, j) control points, with the three fits' covariances summed, are χ² with 4 degrees of freedom under consistent transforms; a warning above its 99% point.")
        }],
    };

    let residuals = Grid {
        id: "epoch-residuals".into(),
        title: "Residuals per epoch".into(),
        head: [
            "epoch",
            "landmarks adjusted",
            "RMS residual",
            "noise σ",
            "kept tracks seen",
            "RMS offset of kept tracks",
            "largest offset of a kept track",
        ]
        .map(String::from)
        .to_vec(),
        rows: (0..outcome.epochs.len())
            .map(|k| {
                let t = |f: &str| format!("epochs.{k}.to_base.{f}");
                let metres = |f: &str| match num(&t(f), 3) {
                    Some(n) => Line::new().num(Some(n)).text(" m"),
                    None => Line::new(),
                };
                vec![
                    Line::new().text(name(k)),
                    Line::new().num(num(&t("landmarks_adjusted"), 0)),
                    metres("rms_residual_m"),
                    metres("sigma_m"),
                    Line::new().num(num(&t("kept_tracks"), 0)),
                    metres("kept_rms_offset_m"),
                    metres("kept_largest_offset_m"),
                ]
            })
            .collect(),
        notes: vec![Line::new().text("A residual is the offset of an epoch's landmark, mapped into the base, from its track's weighted mean; RMS per coordinate. The noise σ is the adjustment's estimate for one coordinate of the epoch's landmarks, which weights it; the histogram below shows the kept tracks' offsets of every epoch.")],
    };

    let accuracy = [
        Row::of(
            "variance factor σ̂₀²",
            doc,
            JSON,
            "adjustment.variance_factor",
            3,
            "",
        )
        .map(|r| r.note(Line::new().text("a-posteriori, of the joint adjustment"))),
        Row::of("redundancy", doc, JSON, "adjustment.redundancy", 0, "")
            .map(|r| r.note(Line::new().text("observations minus unknowns"))),
    ]
    .into_iter()
    .flatten()
    .collect();
    let accuracy_notes = vec![Line::new().text("These figures come from the tracks the transforms were adjusted on, which overstates the accuracy: verify the library against independent checkpoints before using it as control.")];

    let pick = |f: &dyn Fn(&crate::epochs::Track) -> bool| -> Vec<[f64; 2]> {
        lib.tracks.iter().filter(|t| f(t)).map(|t| t.mean).collect()
    };
    let mut classes: Vec<PointClass> = GRADE_INKS
        .iter()
        .zip(['A', 'B', 'C'])
        .map(|(ink, g)| PointClass {
            key: format!("grade_{}", g.to_ascii_lowercase()),
            label: ink.label.into(),
            ink: *ink,
            points: pick(&|t| t.status == TrackStatus::Kept && t.grade == Some(g)),
        })
        .collect();
    classes.push(PointClass {
        key: "moved".into(),
        label: MOVED_INK.label.into(),
        ink: MOVED_INK,
        points: pick(&|t| t.status == TrackStatus::Moved),
    });
    let map = MapLayers {
        crs_label: outcome.frame.crs.label(),
        metres_per_unit: lib.metres_per_unit,
        classes,
        ..MapLayers::default()
    };
    let map_notes = vec![
        Line::new().text("Each marker is a track at its weighted mean position in the base frame. Grade A: seen in every epoch, scatter within the noise; B: seen in at least half of them with a scatter within the noise, or in all at the edge of it; C: the other kept tracks. Crosses: landmarks that moved between epochs beyond their noise."),
    ];

    let residuals_m: Vec<f64> = lib
        .tracks
        .iter()
        .filter(|t| t.status == TrackStatus::Kept)
        .flat_map(|t| {
            t.positions
                .iter()
                .flatten()
                .map(move |p| crate::spatial::dist2(*p, t.mean).sqrt() * lib.metres_per_unit)
        })
        .filter(|v| v.is_finite())
        .collect();

    let mut cautions = html::cautions();
    cautions.push(LATER_CAUTION.into());
    let footer = vec![Line::new()
        .text(format!("tiemark {}, seed ", env!("CARGO_PKG_VERSION")))
        .num(num("seed", 0))
        .text(". Made from the files beside this page; it needs no network and no script.")];
    Page {
        title: "tiemark — persistent control points across epochs".into(),
        inputs,
        verdict,
        key_numbers,
        transform: Vec::new(),
        transform_notes: Vec::new(),
        grids: vec![transforms, pairs, closures, residuals],
        accuracy,
        accuracy_notes,
        map,
        map_notes,
        residuals_m,
        residual_limit_m: None,
        rmse_m: None,
        areas: Vec::new(),
        cautions,
        footer,
    }
}
