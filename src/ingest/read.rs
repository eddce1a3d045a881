//! Reading a GDAL vector layer into a [`LandmarkSet`].

use super::{IngestError, IngestOptions, LandmarkSet};
use gdal::errors::GdalError;
use gdal::vector::{Geometry, LayerAccess};
use gdal::{Dataset, DatasetOptions, GdalOpenFlags};
use geo::Centroid;
use std::collections::HashSet;
use std::path::Path;

/// Names of the CSV columns that hold x and y, in order of preference (matched
/// case-insensitively, as GDAL does). One column per axis is chosen here and handed to GDAL:
/// GDAL 3.6 crashes when two columns match its X_POSSIBLE_NAMES (or Y_POSSIBLE_NAMES) and the
/// second comes before the other axis's column, and it takes the first match in column order
/// (an attribute `n` before `y` would become the northing).
const CSV_X_NAMES: &[&str] = &["x", "lon", "long", "longitude", "easting", "east", "e"];
const CSV_Y_NAMES: &[&str] = &["y", "lat", "latitude", "northing", "north", "n"];

/// The other open options that make a CSV read as points (see GDAL's CSV driver documentation).
const CSV_OPEN_OPTIONS: &[&str] = &["AUTODETECT_TYPE=YES", "KEEP_GEOM_COLUMNS=NO"];

fn open(path: &Path, open_options: Option<&[&str]>) -> Result<Dataset, IngestError> {
    let open = DatasetOptions {
        open_flags: GdalOpenFlags::GDAL_OF_VECTOR | GdalOpenFlags::GDAL_OF_READONLY,
        open_options,
        ..Default::default()
    };
    Dataset::open_ex(path, open).map_err(|e| IngestError::Unreadable {
        path: path.to_path_buf(),
        detail: match e {
            GdalError::NullPointer { msg, .. } if msg.trim().is_empty() => {
                "no GDAL driver recognises it".to_string()
            }
            GdalError::NullPointer { msg, .. } => msg.trim().to_string(),
            other => other.to_string(),
        },
    })
}

/// The x and y columns of a CSV file: for each axis the column whose name comes first in
/// [`CSV_X_NAMES`] / [`CSV_Y_NAMES`]; `None` when an axis has none (GDAL may still find a WKT
/// geometry column).
fn csv_coordinate_columns(path: &Path) -> Result<Option<(String, String)>, IngestError> {
    let ds = open(path, None)?;
    let Ok(layer) = ds.layer(0) else {
        return Ok(None);
    };
    let columns: Vec<String> = layer.defn().fields().map(|f| f.name()).collect();
    let pick = |names: &[&str], axis: &str| -> Result<Option<String>, IngestError> {
        for name in names {
            let found: Vec<&String> = columns
                .iter()
                .filter(|c| c.eq_ignore_ascii_case(name))
                .collect();
            match found.as_slice() {
                [] => continue,
                [one] => return Ok(Some((*one).clone())),
                [a, b, ..] => {
                    return Err(IngestError::AmbiguousColumns {
                        path: path.to_path_buf(),
                        axis: axis.to_string(),
                        first: (*a).clone(),
                        second: (*b).clone(),
                    })
                }
            }
        }
        Ok(None)
    };
    Ok(pick(CSV_X_NAMES, "x")?.zip(pick(CSV_Y_NAMES, "y")?))
}

/// GDAL's CSV driver gives a row whose x or y is not a number (`nan`, `inf`, `-inf`, text) no
/// geometry at all, which would make it a silently skipped feature. Re-reads the rows that had
/// no geometry as text and rejects the first one with anything in its coordinate columns.
fn check_csv_rows_without_geometry(
    path: &Path,
    layer_name: &str,
    (x_column, y_column): &(String, String),
    id_field: Option<&str>,
    without_geometry: &HashSet<u64>,
) -> Result<(), IngestError> {
    let ds = open(path, None)?;
    let gdal_err = |e: GdalError| IngestError::Gdal {
        path: path.to_path_buf(),
        detail: e.to_string(),
    };
    let mut layer = ds.layer(0).map_err(gdal_err)?;
    let names: Vec<String> = layer.defn().fields().map(|f| f.name()).collect();
    let index = |name: &str| names.iter().position(|n| n == name);
    let (Some(xi), Some(yi)) = (index(x_column), index(y_column)) else {
        return Ok(());
    };
    let id_index = id_field.and_then(index);
    for feature in layer.features() {
        let Some(fid) = feature.fid() else { continue };
        if !without_geometry.contains(&fid) {
            continue;
        }
        let text = |i: usize| {
            feature
                .field_as_string(i)
                .ok()
                .flatten()
                .unwrap_or_default()
        };
        let (x, y) = (text(xi), text(yi));
        if x.trim().is_empty() && y.trim().is_empty() {
            continue;
        }
        return Err(IngestError::UnreadableCoordinate {
            path: path.to_path_buf(),
            layer: layer_name.to_string(),
            id: id_index
                .and_then(|i| field_text(&feature, i))
                .unwrap_or_else(|| fid.to_string()),
            cells: format!("{x_column} '{x}', {y_column} '{y}'"),
        });
    }
    Ok(())
}

/// Reads the landmarks of one layer. The file is opened read-only.
pub fn read_landmarks(path: &Path, options: &IngestOptions) -> Result<LandmarkSet, IngestError> {
    if !path.exists() {
        return Err(IngestError::NotFound {
            path: path.to_path_buf(),
        });
    }
    let is_csv = path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("csv"));
    let csv_columns = if is_csv {
        csv_coordinate_columns(path)?
    } else {
        None
    };
    let csv_options: Vec<String> = csv_columns
        .iter()
        .flat_map(|(x, y)| {
            [
                format!("X_POSSIBLE_NAMES={x}"),
                format!("Y_POSSIBLE_NAMES={y}"),
            ]
        })
        .chain(CSV_OPEN_OPTIONS.iter().map(|o| o.to_string()))
        .collect();
    let csv_options: Vec<&str> = csv_options.iter().map(String::as_str).collect();
    let ds = open(path, is_csv.then_some(csv_options.as_slice()))?;
    if ds.layer_count() == 0 {
        return Err(IngestError::NoLayers {
            path: path.to_path_buf(),
        });
    }
    let mut layer = match &options.layer {
        Some(name) => ds
            .layer_by_name(name)
            .map_err(|_| IngestError::UnknownLayer {
                path: path.to_path_buf(),
                layer: name.clone(),
                available: ds.layers().map(|l| l.name()).collect::<Vec<_>>().join(", "),
            })?,
        None => ds.layer(0).map_err(|e| IngestError::Gdal {
            path: path.to_path_buf(),
            detail: e.to_string(),
        })?,
    };
    let layer_name = layer.name();
    let field_names: Vec<String> = layer.defn().fields().map(|f| f.name()).collect();
    let id_index = match &options.id_field {
        Some(f) => Some(
            field_names
                .iter()
                .position(|n| n == f)
                .or_else(|| field_names.iter().position(|n| n.eq_ignore_ascii_case(f)))
                .ok_or_else(|| IngestError::UnknownField {
                    path: path.to_path_buf(),
                    layer: layer_name.clone(),
                    field: f.clone(),
                    available: if field_names.is_empty() {
                        "(none)".into()
                    } else {
                        field_names.join(", ")
                    },
                })?,
        ),
        None => None,
    };
    let crs_wkt = layer.spatial_ref().and_then(|s| s.to_wkt().ok());
    let mut ids = Vec::new();
    let mut points = Vec::new();
    let mut skipped = 0usize;
    // Feature ids of CSV rows without geometry, to look at their text afterwards.
    let mut csv_without_geometry = HashSet::new();
    for (n, feature) in layer.features().enumerate() {
        let fid = feature
            .fid()
            .map(|f| f.to_string())
            .unwrap_or_else(|| n.to_string());
        let Some(p) = feature.geometry().and_then(position) else {
            skipped += 1;
            if let (Some(_), Some(fid)) = (&csv_columns, feature.fid()) {
                csv_without_geometry.insert(fid);
            }
            continue;
        };
        let id = match id_index {
            Some(i) => field_text(&feature, i).ok_or_else(|| IngestError::MissingId {
                path: path.to_path_buf(),
                layer: layer_name.clone(),
                fid: fid.clone(),
                field: field_names[i].clone(),
            })?,
            None => fid,
        };
        if !(p[0].is_finite() && p[1].is_finite()) {
            return Err(IngestError::NonFinite {
                path: path.to_path_buf(),
                layer: layer_name,
                id,
                x: p[0],
                y: p[1],
            });
        }
        ids.push(id);
        points.push(p);
    }
    if let Some(columns) = &csv_columns {
        if !csv_without_geometry.is_empty() {
            let id_field = id_index.map(|i| field_names[i].as_str());
            check_csv_rows_without_geometry(
                path,
                &layer_name,
                columns,
                id_field,
                &csv_without_geometry,
            )?;
        }
    }
    if points.is_empty() {
        return Err(IngestError::Empty {
            path: path.to_path_buf(),
            layer: layer_name,
            skipped,
        });
    }
    let set = LandmarkSet {
        source: path.to_path_buf(),
        layer: layer_name,
        ids,
        points,
        crs_wkt,
        skipped_without_geometry: skipped,
    };
    check_duplicates(&set)?;
    check_spread(&set)?;
    Ok(set)
}

/// The landmark position of a geometry, or `None` for a missing or empty one.
fn position(g: &Geometry) -> Option<[f64; 2]> {
    if is_null(g) || g.is_empty() {
        return None;
    }
    let mut flat = g.clone();
    flat.flatten_to_2d();
    match flat.to_geo() {
        Ok(geo::Geometry::Point(p)) => Some([p.x(), p.y()]),
        Ok(other) => other.centroid().map(|c| [c.x(), c.y()]),
        // GDAL geometries that `geo` cannot hold (curves): fall back to the envelope centre.
        Err(_) => {
            let e = flat.envelope();
            Some([(e.MinX + e.MaxX) / 2.0, (e.MinY + e.MaxY) / 2.0])
        }
    }
}

/// GDAL hands a feature without geometry back as a wrapper around a NULL pointer.
#[allow(unsafe_code)]
fn is_null(g: &Geometry) -> bool {
    // SAFETY: reading the wrapped pointer value; it is not dereferenced.
    unsafe { g.c_geometry().is_null() }
}

/// A field's value as text; `None` when unset, null or blank. (GDAL reads an unset field as
/// "" or 0, so the set-and-not-null flag is asked first.)
#[allow(unsafe_code)]
fn field_text(feature: &gdal::vector::Feature, index: usize) -> Option<String> {
    // SAFETY: `feature` wraps a live OGRFeatureH for the duration of the call, and `index` is a
    // field index taken from the layer definition.
    let set = unsafe { gdal_sys::OGR_F_IsFieldSetAndNotNull(feature.c_feature(), index as i32) };
    if set == 0 {
        return None;
    }
    let text = feature.field_as_string(index).ok().flatten()?;
    let text = text.trim().to_string();
    (!text.is_empty()).then_some(text)
}

fn check_duplicates(set: &LandmarkSet) -> Result<(), IngestError> {
    let mut order: Vec<usize> = (0..set.points.len()).collect();
    let p = &set.points;
    order.sort_unstable_by(|&a, &b| {
        p[a][0]
            .total_cmp(&p[b][0])
            .then(p[a][1].total_cmp(&p[b][1]))
    });
    let dups: Vec<(usize, usize)> = order
        .windows(2)
        .filter(|w| p[w[0]] == p[w[1]])
        .map(|w| (w[0].min(w[1]), w[0].max(w[1])))
        .collect();
    if let Some(&(a, b)) = dups.iter().min() {
        return Err(IngestError::DuplicatePositions {
            path: set.source.clone(),
            layer: set.layer.clone(),
            count: dups.len(),
            first: set.ids[a].clone(),
            second: set.ids[b].clone(),
            x: p[a][0],
            y: p[a][1],
        });
    }
    Ok(())
}

/// Rejects a set whose points lie on one line: their spread across the principal axis of the
/// point cloud is at most 1e-9 of their spread along it. The spread is measured on the points
/// themselves (from a local origin): the covariance's smaller eigenvalue is no test, as rounding
/// leaves it near 1e-16 of the larger even for points exactly on a line at an angle.
fn check_spread(set: &LandmarkSet) -> Result<(), IngestError> {
    let collinear = || IngestError::Collinear {
        path: set.source.clone(),
        layer: set.layer.clone(),
        count: set.points.len(),
    };
    if set.points.len() < 3 {
        return Err(collinear());
    }
    let origin = set.points[0];
    let local: Vec<[f64; 2]> = set
        .points
        .iter()
        .map(|p| [p[0] - origin[0], p[1] - origin[1]])
        .collect();
    let n = local.len() as f64;
    let (mx, my) = local
        .iter()
        .fold((0.0, 0.0), |a, p| (a.0 + p[0] / n, a.1 + p[1] / n));
    let (mut sxx, mut syy, mut sxy) = (0.0, 0.0, 0.0);
    for p in &local {
        let (dx, dy) = (p[0] - mx, p[1] - my);
        sxx += dx * dx;
        syy += dy * dy;
        sxy += dx * dy;
    }
    let (sin, cos) = (0.5 * (2.0 * sxy).atan2(sxx - syy)).sin_cos();
    let range = |f: &dyn Fn(&[f64; 2]) -> f64| {
        let (lo, hi) = local
            .iter()
            .map(f)
            .fold((f64::INFINITY, f64::NEG_INFINITY), |a, v| {
                (a.0.min(v), a.1.max(v))
            });
        hi - lo
    };
    let along = range(&|p| cos * p[0] + sin * p[1]);
    let across = range(&|p| cos * p[1] - sin * p[0]);
    if across <= 1e-9 * along {
        return Err(collinear());
    }
    Ok(())
}
