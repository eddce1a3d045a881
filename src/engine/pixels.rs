//! Stage 6 of a raster match: every control point refined on the pixels, then the transform
//! refitted on the refined points.
//!
//! **In:** an accepted [`Solution`] of two raster surveys, both landmark sets (with their
//! [`RasterLandmarks`]), the working frame and the refinement options. **Out:** the solution
//! refitted on the control points whose correlation peak was clear (their target positions
//! moved to where the correlation puts them), and a [`PixelRefinement`] saying, per control
//! point, what the refinement found; or, when it cannot apply, the solution unchanged and the
//! reason in words.
//!
//! The reference is read whole at its own resolution (decimated only when over
//! [`MAX_REFERENCE_PIXELS`]), the target decimated to about the reference's pixel size (the
//! correlation resamples without a low-pass filter, see [`crate::refine`]). Both images must be
//! on the working CRS: the correlation resamples the target through the fitted similarity, in
//! map coordinates, so a target whose CRS differs from the working one is left unrefined (and
//! the report says so).

use crate::fit::guided::Pair;
use crate::fit::similarity::fit_similarity;
use crate::fit::Solution;
use crate::frame::WorkingFrame;
use crate::image::Image;
use crate::ingest::{self, IngestError, LandmarkSet, RasterLandmarks, RasterSource, SurveyInput};
use crate::outcome::{PixelRefinement, PointRefinement};
use crate::refine::{self, RefineParams};

/// Largest reference read whole for the refinement, in pixels (64 Mpx of `f32`, 256 MB).
pub const MAX_REFERENCE_PIXELS: usize = 1 << 26;

/// Refines `solution` on the pixels of both images; see the module doc. `Ok(None)`: the
/// refinement does not apply (not two rasters).
pub(super) fn refine_on_pixels(
    inputs: [&SurveyInput; 2],
    sets: [&LandmarkSet; 2],
    frame: &mut WorkingFrame,
    solution: &mut Solution,
    params: &RefineParams,
    min_control_points: usize,
) -> Result<Option<PixelRefinement>, IngestError> {
    let (Some(rr), Some(tr)) = (&sets[0].raster, &sets[1].raster) else {
        return Ok(None);
    };
    let skipped = |why: String| {
        Ok(Some(PixelRefinement {
            measure: params.measure.name().to_string(),
            tried: 0,
            kept: 0,
            not_kept: Vec::new(),
            per_point: Vec::new(),
            median_shift_m: f64::NAN,
            not_applied: Some(why),
        }))
    };
    let same_crs = |s: &LandmarkSet| s.crs_wkt.as_deref() == Some(frame.crs.wkt.as_str());
    if !same_crs(sets[0]) || !same_crs(sets[1]) {
        return skipped(
            "the images are not both on the working CRS; warp the target to the reference's CRS first"
                .into(),
        );
    }
    let reference = ingest::reopen_raster(inputs[0], rr)?;
    let target = ingest::reopen_raster(inputs[1], tr)?;
    let (ref_image, tgt_image) = read_for_refinement(&reference, &target, rr, tr)?;
    let points: Vec<[f64; 2]> = solution
        .pairs
        .iter()
        .map(|p| frame.reference[p.reference as usize])
        .collect();
    let results = refine::refine_all(
        &ref_image,
        &tgt_image,
        &solution.fit.transform,
        &points,
        params,
    );
    let kept: Vec<usize> = (0..results.len()).filter(|&i| results[i].is_ok()).collect();
    let mut not_kept: Vec<(String, usize)> = Vec::new();
    for why in results.iter().filter_map(|r| r.as_ref().err()) {
        let cause = cause(why).to_string();
        match not_kept.iter_mut().find(|(c, _)| *c == cause) {
            Some((_, n)) => *n += 1,
            None => not_kept.push((cause, 1)),
        }
    }
    let mut summary = PixelRefinement {
        measure: params.measure.name().to_string(),
        tried: results.len(),
        kept: kept.len(),
        not_kept,
        per_point: Vec::new(),
        median_shift_m: f64::NAN,
        not_applied: None,
    };
    if kept.len() < min_control_points.max(3) {
        summary.not_applied = Some(format!(
            "only {} of {} control points had a clear correlation peak (fit.min_control_points is {min_control_points}); the fit on the keypoints stands",
            kept.len(),
            results.len()
        ));
        return Ok(Some(summary));
    }
    let refined: Vec<&refine::Refined> = kept
        .iter()
        .map(|&i| results[i].as_ref().expect("kept"))
        .collect();
    let from: Vec<[f64; 2]> = refined.iter().map(|r| r.target).collect();
    let to: Vec<[f64; 2]> = kept.iter().map(|&i| points[i]).collect();
    let Some(fit) = fit_similarity(&from, &to) else {
        summary.not_applied = Some("the refined control points fix no transform".into());
        return Ok(Some(summary));
    };
    // The refined target positions replace the keypoints' in the working frame, so that every
    // writer states residuals of what was fitted.
    for (&i, p) in kept.iter().zip(&from) {
        frame.target[solution.pairs[i].target as usize] = *p;
    }
    let pairs: Vec<Pair> = kept
        .iter()
        .map(|&i| {
            let p = solution.pairs[i];
            let m = fit.transform.apply(frame.target[p.target as usize]);
            let r = frame.reference[p.reference as usize];
            Pair {
                residual: (m[0] - r[0]).hypot(m[1] - r[1]),
                ..p
            }
        })
        .collect();
    let mpu = frame.metres_per_unit();
    summary.per_point = refined
        .iter()
        .map(|r| PointRefinement {
            correlation: r.correlation,
            shift_m: r.shift_length() * mpu,
        })
        .collect();
    let mut shifts: Vec<f64> = summary.per_point.iter().map(|p| p.shift_m).collect();
    shifts.sort_by(f64::total_cmp);
    summary.median_shift_m = shifts[shifts.len() / 2];
    solution.fit = fit;
    solution.pairs = pairs;
    Ok(Some(summary))
}

/// Both images as the refinement reads them (module doc): the reference whole at its own
/// resolution (decimated only when over [`MAX_REFERENCE_PIXELS`]), the target decimated to
/// about the reference's pixel size.
pub(super) fn read_for_refinement(
    reference: &RasterSource,
    target: &RasterSource,
    rr: &RasterLandmarks,
    tr: &RasterLandmarks,
) -> Result<(Image, Image), IngestError> {
    let ref_pixels = rr.width * rr.height;
    let dr = ((ref_pixels as f64 / MAX_REFERENCE_PIXELS as f64)
        .sqrt()
        .ceil() as usize)
        .max(1);
    let ref_pixel_m = rr.pixel_m * dr as f64;
    let dt = ((ref_pixel_m / tr.pixel_m).round() as usize).clamp(1, tr.width.min(tr.height).max(1));
    // A finer target grid served by an overview instead of block means of the full resolution.
    let dt = target.fastest_decimation(dt)?;
    Ok((reference.read(dr)?, target.read(dt)?))
}

/// A short cause for a control point the refinement did not keep.
fn cause(why: &refine::NotRefined) -> &'static str {
    use refine::NotRefined as N;
    match why {
        N::NoGeometry => "no transform to resample through",
        N::OutsideReference | N::OutsideTarget => "too near an image's edge",
        N::InvalidSamples { .. } => "patch touches no-data",
        N::NoTexture => "no texture",
        N::Unclear { .. } => "no clear correlation peak",
        N::Unsettled { .. } => "did not settle",
    }
}
