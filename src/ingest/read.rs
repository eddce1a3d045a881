//! Reading a GDAL vector layer into a [`LandmarkSet`].

use super::{IngestError, IngestOptions, LandmarkSet};
use gdal::vector::{Geometry, LayerAccess};
use gdal::{Dataset, DatasetOptions, GdalOpenFlags};
use geo::Centroid;
use std::path::Path;

/// CSV columns GDAL should take as x and y (case-insensitive), and the other open options that
/// make a CSV read as points (see GDAL's CSV driver documentation).
const CSV_OPEN_OPTIONS: &[&str] = &[
    "X_POSSIBLE_NAMES=x,lon,long,longitude,easting,east,e",
    "Y_POSSIBLE_NAMES=y,lat,latitude,northing,north,n",
    "AUTODETECT_TYPE=YES",
    "KEEP_GEOM_COLUMNS=NO",
];

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
    let open = DatasetOptions {
        open_flags: GdalOpenFlags::GDAL_OF_VECTOR | GdalOpenFlags::GDAL_OF_READONLY,
        open_options: is_csv.then_some(CSV_OPEN_OPTIONS),
        ..Default::default()
    };
    let ds = Dataset::open_ex(path, open).map_err(|e| IngestError::Unreadable {
        path: path.to_path_buf(),
        detail: e.to_string(),
    })?;
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
    for (n, feature) in layer.features().enumerate() {
        let fid = feature
            .fid()
            .map(|f| f.to_string())
            .unwrap_or_else(|| n.to_string());
        let Some(p) = feature.geometry().and_then(position) else {
            skipped += 1;
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

/// Rejects a set whose points lie on one line: the smaller principal axis of the point cloud
/// is below 1e-9 of the larger.
fn check_spread(set: &LandmarkSet) -> Result<(), IngestError> {
    let n = set.points.len() as f64;
    let (mx, my) = set
        .points
        .iter()
        .fold((0.0, 0.0), |a, p| (a.0 + p[0] / n, a.1 + p[1] / n));
    let (mut sxx, mut syy, mut sxy) = (0.0, 0.0, 0.0);
    for p in &set.points {
        let (dx, dy) = (p[0] - mx, p[1] - my);
        sxx += dx * dx;
        syy += dy * dy;
        sxy += dx * dy;
    }
    let tr = sxx + syy;
    let det = sxx * syy - sxy * sxy;
    let disc = (tr * tr / 4.0 - det).max(0.0).sqrt();
    let (big, small) = (tr / 2.0 + disc, tr / 2.0 - disc);
    if set.points.len() < 3 || small <= 1e-18 * big.max(f64::MIN_POSITIVE) {
        return Err(IngestError::Collinear {
            path: set.source.clone(),
            layer: set.layer.clone(),
            count: set.points.len(),
        });
    }
    Ok(())
}
