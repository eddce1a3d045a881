//! `transform.json`: the fitted similarity and everything needed to reproduce or judge it.
//!
//! Fields: `scale`, `rotation_deg`, `translation_x`, `translation_y` map target working
//! coordinates to reference working coordinates as x' = s(cos t·x − sin t·y) + tx,
//! y' = s(sin t·x + cos t·y) + ty, t counter-clockwise; `standard_errors` of each; `rmse_m`;
//! `sigma_m` (per-coordinate σ̂); `control_points` (their count); `working_crs` (authority code, name, WKT and why it
//! was chosen); `reference_crs`, `target_crs` (for a local grid: name "local grid", its
//! declared `unit` or null, and the WKT of its engineering CRS); `local_grid` (null for a
//! georeferenced target; else the declared `unit`, `unit_name`, `metres_per_unit`,
//! `unit_factor` = working units per grid unit, and what remains of `scale` once that is taken
//! out: `grid_scale_factor`, `grid_scale_ppm` and its standard error `grid_scale_ppm_se`; only
//! `unit: null` when no unit was declared); `thresholds` (`search_radius_m` and `max_residual_m`, each with
//! whether it was the default);
//! `significance` (its `paired_within_search_radius`: target landmarks paired while searching); `chosen` and `runner_up` (rotation, scale error in ppm, shift at the
//! target's centre in metres, support); `bounds` (from the target's georeferencing, or null);
//! `seed`; `version`. Translation standard errors are at the working frame's
//! origin; `centroid` gives the target centroid of the control points, where the position
//! error is smallest (σ̂/√n per coordinate).
//!
//! The accuracy statement ([`crate::accuracy`]): `at_centroid` — the transform stated at the
//! control points' centroid (`target_x`, `target_y` in the working frame; `reference_x`,
//! `reference_y` in the reference's CRS), `shift_east_m`, `shift_north_m`, `rotation_arcsec`
//! (counter-clockwise), `scale_ppm`, each `{value, se, significant}` (significant: differs from
//! zero at 95 %); `accuracy` — `rmse_x_m`, `rmse_y_m`, `rmse_r_m`, `n`, `nssda_95_m` with
//! `nssda_rule` (`equal`, `approximation` or `outside_limit`), `exact_95_m`, `asprs_rmse_h_m`,
//! `source` (`kind`: `fit_residuals`, `leave_one_out`, `holdout` with `share` and `seed`, or
//! `checkpoints` with `file`), `independent`, `warnings`, the same figures of the fit's own
//! residuals in `fit_residuals`, and `points` (id, `dx_m`, `dy_m` of each checkpoint or
//! held-out control point; at most [`MAX_LISTED_POINTS`], `points_total` counts them all).
//! `proj_pipeline`: the transform target CRS → reference CRS as a PROJ pipeline string
//! ([`crate::accuracy::proj`]; null, with the reason in `proj_pipeline_applies`, when PROJ
//! cannot state a conversion); for a local-grid target `epsg_9621`: the similarity (grid →
//! working CRS) as EPSG method 9621 with its parameters' names, codes, values and units.

use super::{io_err, EmitError};
use crate::fit::Solution;
use crate::outcome::MatchOutcome;
use serde_json::json;
use std::path::Path;

/// Per-point residuals written at most (the rest are counted in `points_total`).
pub const MAX_LISTED_POINTS: usize = 10_000;

/// The accuracy statement's members of transform.json: `at_centroid` and `accuracy` (see the
/// module doc).
pub fn accuracy_members(result: &MatchOutcome) -> serde_json::Map<String, serde_json::Value> {
    let mut m = serde_json::Map::new();
    let Some(a) = &result.accuracy else {
        return m;
    };
    let st = &a.statement;
    m.insert(
        "at_centroid".into(),
        json!({
            "stated_at": "the control points' centroid: target working coordinates target_x, target_y; in the reference CRS reference_x, reference_y (the reference control points' centroid)",
            "target_x": st.at[0],
            "target_y": st.at[1],
            "reference_x": a.centroid_reference[0],
            "reference_y": a.centroid_reference[1],
            "shift_east_m": st.shift_east_m,
            "shift_north_m": st.shift_north_m,
            "rotation_arcsec": st.rotation_arcsec,
            "scale_ppm": st.scale_ppm,
            "scale_ppm_against": if result.frame.target_unit.is_some() { "the local grid's declared unit" } else { "1" },
            "control_points": st.n,
            "sigma_m": st.sigma_m,
            "significance": "significant = |value| > 1.959964 × se (two-sided, 95%)",
        }),
    );
    let figures = |acc: &crate::accuracy::Accuracy| {
        json!({
            "n": acc.n,
            "rmse_x_m": acc.rmse_x_m,
            "rmse_y_m": acc.rmse_y_m,
            "rmse_r_m": acc.rmse_r_m,
            "mean_x_m": acc.mean_x_m,
            "mean_y_m": acc.mean_y_m,
            "rmse_ratio": acc.rmse_ratio,
            "nssda_95_m": acc.nssda_95_m,
            "nssda_rule": acc.nssda_rule,
            "nssda_rule_text": acc.nssda_rule.describe(),
            "nssda_standard": "FGDC-STD-007.3-1998",
            "exact_95_m": acc.exact_95_m,
            "asprs_rmse_h_m": acc.asprs_rmse_h_m,
            "asprs_standard": "ASPRS Positional Accuracy Standards for Digital Geospatial Data, Edition 2 (2023)",
            "source": acc.source,
            "source_text": acc.source.describe(),
            "independent": acc.source.independent(),
            "warnings": acc.warnings,
        })
    };
    let mut doc = figures(&a.accuracy);
    doc["fit_residuals"] = figures(&a.fit);
    doc["points"] = json!(a.points.iter().take(MAX_LISTED_POINTS).collect::<Vec<_>>());
    doc["points_total"] = json!(a.points.len());
    m.insert("accuracy".into(), doc);
    match &a.proj_pipeline {
        Ok(p) => {
            m.insert("proj_pipeline".into(), json!(p));
            m.insert(
                "proj_pipeline_applies".into(),
                json!("to the target's coordinates in its own CRS (x = easting or longitude in degrees, y = northing or latitude), giving the reference CRS's in the same order: e.g. cct -z 0 -t 0 PIPELINE, or ogr2ogr -ct PIPELINE; the similarity acts in the working CRS"),
            );
        }
        Err(why) => {
            m.insert("proj_pipeline".into(), serde_json::Value::Null);
            m.insert("proj_pipeline_applies".into(), json!(why));
        }
    }
    if let Some(e) = &a.epsg_9621 {
        let mpu = result.frame.metres_per_unit();
        let unit = if mpu == 1.0 {
            "metre".to_string()
        } else {
            format!("{mpu} metres")
        };
        m.insert(
            "epsg_9621".into(),
            json!({
                "method": "Similarity transformation (EPSG method 9621; IOGP Guidance Note 7-2)",
                "source_crs": "the target's local grid",
                "target_crs": result.frame.crs.label(),
                "formula": "XT = XT0 + XS*M*cos(theta) + YS*M*sin(theta); YT = YT0 - XS*M*sin(theta) + YS*M*cos(theta); theta counter-clockwise positive (rotation of the source axes)",
                "parameters": e.parameters(&unit),
            }),
        );
    }
    m
}

/// Builds the JSON document.
pub fn transform_document(result: &MatchOutcome, s: &Solution) -> serde_json::Value {
    let f = &s.fit;
    let t = f.transform;
    let mpu = result.frame.metres_per_unit();
    let cfg = &result.config;
    let n = s.pairs.len() as f64;
    let centroid = s.pairs.iter().fold([0.0, 0.0], |a, p| {
        let q = result.frame.target[p.target as usize];
        [a[0] + q[0] / n, a[1] + q[1] / n]
    });
    let crs_doc = |c: &crate::frame::crs::Crs| json!({"authority": c.authority, "name": c.name, "wkt": c.wkt});
    let mut doc = json!({
        "tool": "tiemark",
        "version": env!("CARGO_PKG_VERSION"),
        "maps": "target working coordinates to reference working coordinates",
        "formula": "x' = scale*(cos(t)*x - sin(t)*y) + translation_x; y' = scale*(sin(t)*x + cos(t)*y) + translation_y; t = rotation, counter-clockwise",
        "scale": t.scale(),
        "rotation_deg": t.rotation().to_degrees(),
        "translation_x": t.tx,
        "translation_y": t.ty,
        "standard_errors": {
            "scale": f.se_scale,
            "rotation_deg": f.se_rotation.to_degrees(),
            "translation_x": f.se_tx,
            "translation_y": f.se_ty,
        },
        "centroid": {"target_x": centroid[0], "target_y": centroid[1], "position_se_m": f.sigma * mpu / n.sqrt()},
        "rmse_m": f.rmse * mpu,
        "sigma_m": f.sigma * mpu,
        "control_points": s.pairs.len(),
        "working_crs": {
            "authority": result.frame.crs.authority,
            "name": result.frame.crs.name,
            "wkt": result.frame.crs.wkt,
            "metres_per_unit": mpu,
            "chosen_because": result.frame.chosen_because,
        },
        "reference_crs": crs_doc(&result.frame.reference_crs),
        "target_crs": match &result.frame.target_crs {
            Some(c) => crs_doc(c),
            None => json!({
                "authority": null,
                "name": "local grid",
                "unit": result.frame.target_unit.map(|u| u.code()),
                "wkt": result.frame.target_wkt(),
            }),
        },
        "local_grid": result.frame.target_crs.is_none().then(|| match result.frame.grid_scale(t.scale(), f.se_scale) {
            Some(g) => json!({
                "unit": g.unit.code(),
                "unit_name": g.unit.name(),
                "metres_per_unit": g.unit.metres(),
                "unit_factor": g.unit_factor,
                "grid_scale_factor": g.grid_scale_factor,
                "grid_scale_ppm": g.grid_scale_ppm,
                "grid_scale_ppm_se": g.grid_scale_ppm_se,
            }),
            None => json!({"unit": null}),
        }),
        "inputs": {
            "reference": {"path": result.reference.source, "layer": result.reference.layer, "landmarks": result.reference.points.len()},
            "target": {"path": result.target.source, "layer": result.target.layer, "landmarks": result.target.points.len()},
        },
        "thresholds": {
            "search_radius_m": s.search_radius * mpu,
            "search_radius_default": cfg.fit.search_radius_m.is_none(),
            "max_residual_m": s.max_residual * mpu,
            "max_residual_default": cfg.fit.max_residual_m.is_none(),
            "reference_spacing_m": result.search.reference_spacing * mpu,
            "confidence": cfg.fit.confidence,
            "max_rounds": cfg.fit.max_rounds,
            "false_alarm_level": cfg.fit.false_alarm_level,
            "min_control_points": cfg.fit.min_control_points,
            "neighbours": result.search.signatures.neighbours,
            "leave_out": result.search.signatures.leave_out,
            "permuted": result.search.signatures.permuted,
            "ambiguity": result.search.signatures.ambiguity,
            "order": result.search.signatures.order.to_string(),
            "harmonics": result.search.signatures.harmonics,
            "key_space": result.search.signatures.key_space,
            "rank": cfg.matching.rank,
            "candidates": cfg.matching.candidates,
        },
        "significance": significance_document(&s.significance),
        "model": model_document(&s.models, mpu),
        "chosen": s.chosen,
        "runner_up": s.runner_up,
        "bounds": s.bounds.map(|b| json!({
            "max_shift_m": if b.max_shift.is_finite() { json!(b.max_shift * mpu) } else { json!("none") },
            "max_rotation_deg": if b.max_rotation.is_finite() { json!(b.max_rotation.to_degrees()) } else { json!("none") },
            "max_scale_ppm": if b.max_scale_error.is_finite() { json!(b.max_scale_error * 1e6) } else { json!("none") },
        })),
        "ransac": {"rounds": s.ransac_rounds, "consensus": s.ransac_consensus, "sample": s.ransac_sample},
        "guided_rounds": s.guided_rounds,
        "area_seed": result.area_seed.as_ref().map(|a| json!({
            "ran": a.ran,
            "why": a.why,
            "rule": crate::outcome::AREA_SEED_RULE,
            "coarse_m": if a.coarse_m.is_finite() { json!(a.coarse_m) } else { json!(null) },
            "measure": a.measure,
            "hypotheses": a.hypotheses,
            "peak_z": if a.z.is_finite() { json!(a.z) } else { json!(null) },
            "seeds": a.seeds,
            "chosen": a.chosen,
        })),
        "seed": cfg.fit.seed,
        "caution": crate::report::CAUTION,
    });
    if let Some(o) = doc.as_object_mut() {
        o.extend(accuracy_members(result));
    }
    doc
}

/// The model written and every model compared on the same control points (`model`): `chosen`;
/// `residuals_of` (the model whose residuals `control-points.csv` gives: the chosen one, the
/// similarity's for `tps`); `formula`; `centre_x`, `centre_y`, `scale_length` and
/// `x_coefficients`, `y_coefficients` of each fit (working units; the similarity's are a, b,
/// tx, ty of the formula at the top); `parameters`, `control_points`, `rmse_m`, `sigma_m`;
/// `tests`: each richer model against the next simpler one (`f`, `df1`, `df2`, `p_value`,
/// `warranted` at `level`).
fn model_document(c: &crate::fit::models::Comparison, mpu: f64) -> serde_json::Value {
    let fits: Vec<serde_json::Value> = c
        .fits
        .iter()
        .map(|f| {
            json!({
                "model": f.model,
                "parameters": f.parameters,
                "control_points": f.n,
                "rmse_m": f.rmse * mpu,
                "sigma_m": f.sigma * mpu,
                "centre_x": f.centre[0],
                "centre_y": f.centre[1],
                "scale_length": f.scale_length,
                "x_coefficients": f.x_coefficients,
                "y_coefficients": f.y_coefficients,
            })
        })
        .collect();
    json!({
        "chosen": c.chosen,
        "residuals_of": c.written().model,
        "formula": "similarity: as at the top; affine: u = (x - centre_x)/scale_length, v = (y - centre_y)/scale_length, x' = X0 + X1*u + X2*v, y' = Y0 + Y1*u + Y2*v; polynomial2: the same plus X3*u^2 + X4*u*v + X5*v^2 (and Y3..Y5); Xi = x_coefficients[i], Yi = y_coefficients[i]; tps: a thin-plate spline through every control point (the GCP warp of a raster target)",
        "fits": fits,
        "tests": c.tests,
        "test": "nested-model (extra sum of squares) F test of the residual reduction against the parameters spent (NIST/SEMATECH e-Handbook of Statistical Methods, 4.4.4); warranted when p_value < level",
        "level": c.level,
    })
}

/// The significance test, its count named for what it counts: the target landmarks paired
/// within the search radius (`paired_within_search_radius`), which is not the number of
/// control points.
fn significance_document(sig: &crate::fit::significance::Significance) -> serde_json::Value {
    let mut v = serde_json::to_value(sig).expect("JSON values serialise");
    if let Some(m) = v.as_object_mut() {
        if let Some(n) = m.remove("inliers") {
            m.insert("paired_within_search_radius".into(), n);
        }
    }
    v
}

/// Writes `transform.json`.
pub fn write_transform(
    result: &MatchOutcome,
    solution: &Solution,
    path: &Path,
) -> Result<(), EmitError> {
    let text = serde_json::to_string_pretty(&transform_document(result, solution))
        .expect("JSON values serialise");
    std::fs::write(path, text + "\n").map_err(io_err(path))
}
