//! The accuracy statement of an accepted match, after the fit (and the refinement on the
//! pixels): the checkpoints read and brought into the working frame, the hold-out split
//! applied, and the [`AccuracyReport`] computed.
//!
//! **In:** the `[accuracy]` options, the working frame, both landmark sets, the solution.
//! **Out:** [`Checkpoints`] in the working frame (read before the search, so that a bad file is
//! refused at once), and an [`AccuracyReport`]. With `accuracy.holdout` the solution itself
//! changes: the held-out control points leave it and the transform is refitted on the rest.

use crate::accuracy::checkpoints::{self, CheckpointError, CheckpointRows};
use crate::accuracy::sources::{self, AccuracyParamsError};
use crate::accuracy::{
    Accuracy, AccuracyParams, AccuracyReport, AccuracySource, CheckResidual, TransformStatement,
};
use crate::fit::similarity::fit_similarity_indexed;
use crate::fit::Solution;
use crate::frame::crs::{Converter, Crs};
use crate::frame::{FrameError, WorkingFrame};
use crate::ingest::LandmarkSet;
use crate::outcome::PixelRefinement;
use std::path::Path;

/// Surveyed checkpoints in the working frame.
#[derive(Debug, Clone)]
pub struct Checkpoints {
    /// As read.
    pub rows: CheckpointRows,
    /// Reference positions, working frame.
    pub reference: Vec<[f64; 2]>,
    /// Target positions, working frame (local-grid coordinates as they are).
    pub target: Vec<[f64; 2]>,
}

/// Reads the checkpoints file `path` and brings both sides into the working frame.
pub fn read_checkpoints(path: &Path, frame: &WorkingFrame) -> Result<Checkpoints, CheckpointError> {
    let bytes = std::fs::read(path).map_err(|e| CheckpointError::Read {
        file: path.to_path_buf(),
        detail: e.to_string().to_lowercase(),
        columns: checkpoints::COLUMNS.join(","),
    })?;
    let rows = checkpoints::parse(&bytes, path)?;
    let reference = convert(
        &rows,
        &rows.reference,
        "reference",
        &frame.reference_crs,
        &frame.crs,
    )?;
    let target = match &frame.target_crs {
        Some(t) => convert(&rows, &rows.target, "target", t, &frame.crs)?,
        None => rows.target.clone(),
    };
    Ok(Checkpoints {
        rows,
        reference,
        target,
    })
}

/// One side of the checkpoints from `from` into the working CRS `to`.
fn convert(
    rows: &CheckpointRows,
    points: &[[f64; 2]],
    side: &'static str,
    from: &Crs,
    to: &Crs,
) -> Result<Vec<[f64; 2]>, CheckpointError> {
    let fail = |i: usize, from: String, to: String| {
        let p = points[i];
        CheckpointError::Conversion {
            file: rows.file.clone(),
            line: rows.lines[i],
            id: rows.ids[i].clone(),
            side,
            x: p[0],
            y: p[1],
            from,
            to,
        }
    };
    if from.geographic {
        if let Some(i) = points
            .iter()
            .position(|p| !(-360.0..=360.0).contains(&p[0]) || !(-90.0..=90.0).contains(&p[1]))
        {
            return Err(CheckpointError::NotLonLat {
                file: rows.file.clone(),
                line: rows.lines[i],
                id: rows.ids[i].clone(),
                side,
                x: points[i][0],
                y: points[i][1],
                crs: from.label(),
            });
        }
    }
    if from.wkt == to.wkt {
        return Ok(points.to_vec());
    }
    let c = Converter::new(from, to).map_err(|_| fail(0, from.label(), to.label()))?;
    points
        .iter()
        .enumerate()
        .map(|(i, &p)| {
            c.convert(p)
                .ok_or_else(|| fail(i, from.label(), to.label()))
        })
        .collect()
}

/// Why the accuracy statement could not be made.
#[derive(Debug, thiserror::Error)]
pub enum StatementError {
    /// The hold-out share leaves too few control points.
    #[error(transparent)]
    Params(#[from] AccuracyParamsError),
    /// The centroid could not be converted to the reference's CRS.
    #[error(transparent)]
    Frame(#[from] FrameError),
}

/// The accuracy statement of `solution` (see the module doc). `unit_scale`: the scale of a fit
/// with no scale error. `None` when the control points are degenerate.
#[allow(clippy::too_many_arguments)]
pub fn state(
    params: &AccuracyParams,
    seed: u64,
    min_control_points: usize,
    frame: &WorkingFrame,
    sets: [&LandmarkSet; 2],
    solution: &mut Solution,
    pixels: &mut Option<PixelRefinement>,
    checkpoints: Option<&Checkpoints>,
    unit_scale: f64,
) -> Result<Option<AccuracyReport>, StatementError> {
    let mpu = frame.metres_per_unit();
    let pair_id =
        |r: u32, t: u32| format!("{}/{}", sets[0].ids[r as usize], sets[1].ids[t as usize]);
    let mut held = Vec::new();
    if let (Some(share), None) = (params.holdout, checkpoints) {
        let total = solution.pairs.len();
        let out = sources::holdout_split(total, share, seed);
        let left = total - out.len();
        if left < min_control_points.max(3) {
            return Err(AccuracyParamsError::HoldoutTooLarge {
                share,
                held: out.len(),
                total,
                left,
                required: min_control_points,
            }
            .into());
        }
        let mut is_out = vec![false; total];
        out.iter().for_each(|&i| is_out[i] = true);
        let keep: Vec<usize> = (0..total).filter(|&i| !is_out[i]).collect();
        held = out.iter().map(|&i| solution.pairs[i]).collect();
        let kept: Vec<_> = keep.iter().map(|&i| solution.pairs[i]).collect();
        let Some(fit) = fit_similarity_indexed(kept.len(), |i| {
            (
                frame.target[kept[i].target as usize],
                frame.reference[kept[i].reference as usize],
            )
        }) else {
            return Ok(None);
        };
        solution.fit = fit;
        solution.pairs = kept
            .into_iter()
            .map(|mut p| {
                let m = fit.transform.apply(frame.target[p.target as usize]);
                let r = frame.reference[p.reference as usize];
                p.residual = (m[0] - r[0]).hypot(m[1] - r[1]);
                p
            })
            .collect();
        if let Some(px) = pixels.as_mut() {
            if px.per_point.len() == total {
                px.per_point = keep.iter().map(|&i| px.per_point[i]).collect();
            }
        }
    }
    let pairs = &solution.pairs;
    let pair = |i: usize| {
        (
            frame.target[pairs[i].target as usize],
            frame.reference[pairs[i].reference as usize],
        )
    };
    let Some(statement) =
        TransformStatement::from_pairs_indexed(pairs.len(), pair, mpu, unit_scale)
    else {
        return Ok(None);
    };
    let t = solution.fit.transform;
    let centroid_working = t.apply(statement.at);
    let centroid_reference = frame.to_reference_crs(&[centroid_working])?[0];
    let metres = |v: Vec<[f64; 2]>| -> Vec<[f64; 2]> {
        v.into_iter().map(|d| [d[0] * mpu, d[1] * mpu]).collect()
    };
    let own = metres(sources::residuals(pairs.len(), pair, &t));
    let Some(fit) = Accuracy::from_residuals(&own, AccuracySource::FitResiduals) else {
        return Ok(None);
    };
    let (vectors, source, points) = if let Some(c) = checkpoints {
        let v = metres(sources::residuals(
            c.rows.ids.len(),
            |i| (c.target[i], c.reference[i]),
            &t,
        ));
        let points = c
            .rows
            .ids
            .iter()
            .zip(&v)
            .map(|(id, d)| CheckResidual {
                id: id.clone(),
                dx_m: d[0],
                dy_m: d[1],
            })
            .collect();
        let file = c.rows.file.display().to_string();
        (v, AccuracySource::Checkpoints { file }, points)
    } else if let Some(share) = params.holdout {
        let v = metres(sources::residuals(
            held.len(),
            |i| {
                (
                    frame.target[held[i].target as usize],
                    frame.reference[held[i].reference as usize],
                )
            },
            &t,
        ));
        let points = held
            .iter()
            .zip(&v)
            .map(|(p, d)| CheckResidual {
                id: pair_id(p.reference, p.target),
                dx_m: d[0],
                dy_m: d[1],
            })
            .collect();
        (v, AccuracySource::Holdout { share, seed }, points)
    } else {
        match sources::leave_one_out(pairs.len(), pair) {
            Some(v) => (metres(v), AccuracySource::LeaveOneOut, Vec::new()),
            None => (own.clone(), AccuracySource::FitResiduals, Vec::new()),
        }
    };
    let Some(accuracy) = Accuracy::from_residuals(&vectors, source) else {
        return Ok(None);
    };
    let sample_target = sets[1].points[pairs[0].target as usize];
    let proj_pipeline = (|| {
        let into = match &frame.target_crs {
            Some(c) => definition(c, &frame.crs, sample_target)?,
            None => None,
        };
        let out = definition(&frame.crs, &frame.reference_crs, centroid_working)?;
        crate::accuracy::proj::pipeline(into.as_deref(), &t, out.as_deref())
    })();
    let epsg_9621 = frame
        .target_crs
        .is_none()
        .then(|| crate::accuracy::proj::Epsg9621::of(&t));
    Ok(Some(AccuracyReport {
        statement,
        centroid_reference,
        accuracy,
        fit,
        points,
        proj_pipeline,
        epsg_9621,
    }))
}

/// PROJ's definition of the conversion `from` → `to` (axis order normalised to east/north,
/// longitude/latitude), as chosen for the point `at` (in `from`); `None` when they are one
/// CRS. When PROJ has several candidate operations it names the one chosen only after a
/// point is converted, hence `at`.
fn definition(from: &Crs, to: &Crs, at: [f64; 2]) -> Result<Option<String>, String> {
    if from.wkt == to.wkt {
        return Ok(None);
    }
    let p =
        proj::Proj::new_known_crs(&from.proj_string(), &to.proj_string(), None).map_err(|e| {
            format!(
                "PROJ cannot convert {} to {}: {e}",
                from.label(),
                to.label()
            )
        })?;
    p.convert((at[0], at[1])).map_err(|e| {
        format!(
            "PROJ cannot convert {} to {}: {e}",
            from.label(),
            to.label()
        )
    })?;
    let d = p.def().map_err(|e| e.to_string())?;
    if d.contains("unavailable") || d.trim().is_empty() {
        return Err(format!(
            "PROJ did not state its conversion from {} to {} as a definition",
            from.label(),
            to.label()
        ));
    }
    Ok(Some(d))
}
