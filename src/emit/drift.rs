//! The drift check's files: `drift.json` and `drift-areas.gpkg`.
//!
//! **In:** a [`Drift`] (from [`crate::drift::analyse`]), the reference CRS's WKT, and a path
//! in the staging folder (the front end writes them with the match's files through
//! [`super::write_all_with`], all or nothing).
//! **Out:**
//!
//! - `drift.json`: `tool`, `version`, then the [`Drift`]'s fields: `verdict` (`within` |
//!   `exceeded`), `verdict_line`, `tolerance_m`, `centroid_x`, `centroid_y` (reference CRS),
//!   `shift_east_m`, `shift_north_m`, `rotation_arcsec` (counter-clockwise), `scale_ppm` (each
//!   `{value, se, significant}`, significance at 95 % two-sided), `global_test` (χ² of the four
//!   with 4 degrees of freedom), `max_drift_m` with `max_drift_x`, `max_drift_y`, `overlap`
//!   (the polygon it is taken over), `accuracy` (`rmse_x_m`, `rmse_y_m`, `rmse_r_m`,
//!   `nssda_95_m`, `n`, `independent`, `source`), `control_points`, `local_areas` (each: `id`,
//!   `x`, `y`, `outline`, `shift_east_m`, `shift_north_m`, `shift_m`, `shift_se_m`,
//!   `movement_east_m`, `movement_north_m`, `movement_m`, `exceeds_tolerance`, `statistic`,
//!   `p_value`, `significant`, `landmarks`), `local_test` (method, level, draws, candidates,
//!   search radius), `caution`.
//! - `drift-areas.gpkg`, reference CRS: layer `drift_areas` (one polygon per flagged area, its
//!   outline; fields `area_id`, `landmarks`, `shift_east_m`, `shift_north_m`, `shift_m`,
//!   `shift_se_m`, `movement_m`, `exceeds_tolerance` (0/1), `p_value`) and layer
//!   `moved_landmarks` (the areas' landmarks as points at their reference positions; fields
//!   `area_id`, `reference_id`, `target_id`, `shift_east_m`, `shift_north_m`). Both layers exist
//!   (empty) when no area was flagged.

use super::gpkg::{
    close_checked, create_gpkg, gdal_err, point, srs_from_wkt, write_layer, FieldValue,
};
use super::{io_err, EmitError};
use crate::drift::Drift;
use gdal::vector::{Geometry, OGRFieldType, OGRwkbGeometryType};
use std::path::Path;

/// `drift.json`.
pub const DRIFT_JSON: &str = "drift.json";
/// `drift-areas.gpkg`.
pub const DRIFT_GPKG: &str = "drift-areas.gpkg";
/// The files the drift check adds to a match's.
pub const DRIFT_FILES: [&str; 2] = [DRIFT_JSON, DRIFT_GPKG];

/// The JSON document of `drift.json`.
pub fn drift_document(drift: &Drift) -> serde_json::Value {
    let mut doc = serde_json::Map::new();
    doc.insert("tool".into(), "tiemark".into());
    doc.insert("version".into(), env!("CARGO_PKG_VERSION").into());
    if let serde_json::Value::Object(fields) =
        serde_json::to_value(drift).expect("a drift serialises")
    {
        doc.extend(fields);
    }
    serde_json::Value::Object(doc)
}

/// Writes `drift.json`.
pub fn write_drift_json(drift: &Drift, path: &Path) -> Result<(), EmitError> {
    let text = serde_json::to_string_pretty(&drift_document(drift)).expect("JSON values serialise");
    std::fs::write(path, text + "\n").map_err(io_err(path))
}

fn ring(points: &[[f64; 2]]) -> gdal::errors::Result<Geometry> {
    let mut r = Geometry::empty(OGRwkbGeometryType::wkbLinearRing)?;
    for p in points {
        r.add_point_2d((p[0], p[1]));
    }
    if let Some(p) = points.first() {
        r.add_point_2d((p[0], p[1]));
    }
    let mut g = Geometry::empty(OGRwkbGeometryType::wkbPolygon)?;
    g.add_geometry(r)?;
    Ok(g)
}

/// Writes `drift-areas.gpkg` in the reference CRS (`reference_wkt`).
pub fn write_drift_areas(drift: &Drift, reference_wkt: &str, path: &Path) -> Result<(), EmitError> {
    use OGRFieldType::{OFTInteger, OFTReal, OFTString};
    let e = gdal_err(path);
    let srs = srs_from_wkt(reference_wkt, path)?;
    // The fixed timestamp makes the same drift give the same bytes.
    let (mut ds, _fixed) = create_gpkg(path)?;
    {
        let mut txn = ds.start_transaction().map_err(&e)?;
        let mut areas = Vec::new();
        let mut points = Vec::new();
        for a in &drift.local_areas {
            let id = a.id as i32;
            areas.push((
                vec![
                    FieldValue::Int(id),
                    FieldValue::Int(a.landmarks.len() as i32),
                    FieldValue::Real(a.shift_east_m),
                    FieldValue::Real(a.shift_north_m),
                    FieldValue::Real(a.shift_m),
                    FieldValue::Real(a.shift_se_m),
                    FieldValue::Real(a.movement_m),
                    FieldValue::Int(a.exceeds_tolerance as i32),
                    FieldValue::Real(a.p_value),
                ],
                ring(&a.outline).map_err(&e)?,
            ));
            for l in &a.landmarks {
                points.push((
                    vec![
                        FieldValue::Int(id),
                        FieldValue::Text(&l.reference_id),
                        FieldValue::Text(&l.target_id),
                        FieldValue::Real(l.shift_east_m),
                        FieldValue::Real(l.shift_north_m),
                    ],
                    point([l.x, l.y]).map_err(&e)?,
                ));
            }
        }
        write_layer(
            &mut txn,
            "drift_areas",
            OGRwkbGeometryType::wkbPolygon,
            &srs,
            &[
                ("area_id", OFTInteger),
                ("landmarks", OFTInteger),
                ("shift_east_m", OFTReal),
                ("shift_north_m", OFTReal),
                ("shift_m", OFTReal),
                ("shift_se_m", OFTReal),
                ("movement_m", OFTReal),
                ("exceeds_tolerance", OFTInteger),
                ("p_value", OFTReal),
            ],
            areas,
            Ok,
            path,
        )?;
        write_layer(
            &mut txn,
            "moved_landmarks",
            OGRwkbGeometryType::wkbPoint,
            &srs,
            &[
                ("area_id", OFTInteger),
                ("reference_id", OFTString),
                ("target_id", OFTString),
                ("shift_east_m", OFTReal),
                ("shift_north_m", OFTReal),
            ],
            points,
            Ok,
            path,
        )?;
        txn.commit().map_err(&e)?;
    }
    close_checked(ds, path)
}

/// Writes both drift files into the staging folder `dir`; their names.
pub fn write_drift_files(
    drift: &Drift,
    reference_wkt: &str,
    dir: &Path,
) -> Result<Vec<&'static str>, EmitError> {
    write_drift_json(drift, &dir.join(DRIFT_JSON))?;
    write_drift_areas(drift, reference_wkt, &dir.join(DRIFT_GPKG))?;
    Ok(DRIFT_FILES.to_vec())
}

/// Writes `report.html` of a drift check to `path` (over the match's page in the staging
/// folder): the match's page with the drift verdict, the drift numbers (from `drift.json`'s
/// document) and the flagged areas drawn on the map.
pub fn write_drift_page(
    outcome: &crate::outcome::MatchOutcome,
    solution: &crate::fit::Solution,
    drift: &Drift,
    path: &Path,
) -> Result<(), EmitError> {
    use super::html::{self, AreaOutline, Line, Number, Row, VerdictKind};
    let doc = serde_json::to_value(drift).expect("a drift serialises");
    let source = DRIFT_JSON;
    let num = |key: &str, decimals: usize| Number::of(&doc, source, key, decimals);
    let mut page = html::match_page(outcome, solution);
    page.title = "tiemark — drift check".into();
    page.verdict.kind = match drift.verdict {
        crate::drift::Verdict::Within => VerdictKind::Within,
        crate::drift::Verdict::Exceeded => VerdictKind::Exceeded,
    };
    page.verdict.headline = drift.verdict_line.clone();
    page.verdict.lines.insert(
        0,
        Line::new()
            .text("Largest drift over the overlap of the two surveys ")
            .num(num("max_drift_m", 3))
            .text(" m against a tolerance of ")
            .num(num("tolerance_m", 3))
            .text(" m; ")
            .num(Some(Number::page("areas", drift.local_areas.len(), 0)))
            .text(" local drift area(s) flagged."),
    );
    let mut drift_rows: Vec<Row> = [
        ("drift east at the centroid", "shift_east_m", 3, "m"),
        ("drift north at the centroid", "shift_north_m", 3, "m"),
        ("rotation", "rotation_arcsec", 2, "″"),
        ("scale", "scale_ppm", 1, "ppm"),
    ]
    .into_iter()
    .filter_map(|(label, key, d, unit)| {
        Row::of(label, &doc, source, &format!("{key}.value"), d, unit)
            .map(|r| r.se(&doc, source, &format!("{key}.se"), d))
    })
    .collect();
    drift_rows.extend(Row::of(
        "largest drift over the overlap",
        &doc,
        source,
        "max_drift_m",
        3,
        "m",
    ));
    drift_rows.append(&mut page.transform);
    page.transform = drift_rows;
    // The areas' outlines are in the reference CRS; the map is drawn in the working frame.
    let to_working =
        crate::frame::crs::Converter::new(&outcome.frame.reference_crs, &outcome.frame.crs).ok();
    for (i, area) in drift.local_areas.iter().enumerate() {
        let outline: Option<Vec<[f64; 2]>> =
            if outcome.frame.reference_crs.wkt == outcome.frame.crs.wkt {
                Some(area.outline.clone())
            } else {
                to_working
                    .as_ref()
                    .and_then(|c| area.outline.iter().map(|&p| c.convert(p)).collect())
            };
        let key = |k: &str| format!("local_areas.{i}.{k}");
        let rows: Vec<Row> = [
            ("centre x", "x", 2, "m"),
            ("centre y", "y", 2, "m"),
            ("shift relative to the rest", "shift_m", 3, "m"),
            ("movement relative to the reference", "movement_m", 3, "m"),
            ("p-value", "p_value", 3, ""),
        ]
        .into_iter()
        .filter_map(|(label, k, d, unit)| Row::of(label, &doc, source, &key(k), d, unit))
        .collect();
        page.areas.push(AreaOutline {
            label: area.id.to_string(),
            outline: outline.unwrap_or_default(),
            rows,
        });
    }
    std::fs::write(path, html::render(&page)).map_err(io_err(path))
}
