//! Reading a vector layer into a [`LandmarkSet`].
//!
//! **In:** the [`SurveyInput`] and the dataset as `open.rs` opened it. **Out:** the layer's
//! landmarks, checked (`validate.rs`), with the skipped features counted by cause; or an
//! [`IngestError`] naming the file (and the layer, field or feature at fault).
//!
//! A table GDAL opened with its CSV driver is opened again with the open options that make
//! its rows points (`csv.rs`). Every feature is fetched with GDAL's error state watched: GDAL
//! reports a feature it cannot read (a truncated FlatGeobuf or Shapefile) by an error message
//! and then ends the layer as if it were complete, which is turned into
//! [`IngestError::ReadFailed`] here.

use super::open::{clear_gdal_error, reopen_vector, take_gdal_failure, Opened};
use super::{csv, validate, IngestError, LandmarkSet, SkipCounts, SurveyInput};
use gdal::vector::{Feature, Geometry, LayerAccess};
use geo::Centroid;
use std::collections::HashSet;
use std::path::Path;

/// Reads the landmarks of one layer of a dataset GDAL opened as vectors.
pub(super) fn read_vector(input: &SurveyInput, opened: Opened) -> Result<LandmarkSet, IngestError> {
    let path = input.path.as_path();
    let is_csv = csv::is_csv(&opened);
    // The x and y columns of a CSV table, when it has both.
    let csv_columns = if is_csv {
        csv::coordinate_columns(path, &opened.dataset)?
    } else {
        None
    };
    let reopened = if is_csv {
        let options = csv::point_open_options(csv_columns.as_ref());
        let options: Vec<&str> = options.iter().map(String::as_str).collect();
        Some(reopen_vector(path, &opened, &options)?)
    } else {
        None
    };
    let ds = reopened.as_ref().unwrap_or(&opened.dataset);
    if ds.layer_count() == 0 {
        return Err(IngestError::NoLayers {
            path: path.to_path_buf(),
        });
    }
    let mut layer = match &input.layer {
        Some(name) => ds
            .layer_by_name(name)
            .map_err(|_| IngestError::UnknownLayer {
                path: path.to_path_buf(),
                layer: name.clone(),
                available: ds.layers().map(|l| l.name()).collect::<Vec<_>>().join(", "),
            })?,
        None => ds.layer(0).map_err(|source| IngestError::Gdal {
            path: path.to_path_buf(),
            source,
        })?,
    };
    let layer_name = layer.name();
    let field_names: Vec<String> = layer.defn().fields().map(|f| f.name()).collect();
    let id_index = match &input.id {
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
    let mut skipped = SkipCounts::default();
    // Feature ids of CSV rows without geometry, to look at their text afterwards.
    let mut csv_without_geometry = HashSet::new();
    let mut n = 0usize;
    each_feature(path, &layer_name, &mut layer, |feature| {
        let fid = feature
            .fid()
            .map(|f| f.to_string())
            .unwrap_or_else(|| n.to_string());
        n += 1;
        let p = match feature.geometry().map(position) {
            None | Some(Position::Missing) => {
                skipped.no_geometry += 1;
                if let (Some(_), Some(fid)) = (&csv_columns, feature.fid()) {
                    csv_without_geometry.insert(fid);
                }
                return Ok(());
            }
            Some(Position::Empty) => {
                skipped.empty += 1;
                return Ok(());
            }
            Some(Position::At(p)) => p,
        };
        let id = match id_index {
            Some(i) => field_text(feature, i).ok_or_else(|| IngestError::MissingId {
                path: path.to_path_buf(),
                layer: layer_name.clone(),
                fid: fid.clone(),
                field: field_names[i].clone(),
            })?,
            None => fid,
        };
        ids.push(id);
        points.push(p);
        Ok(())
    })?;
    if let Some(columns) = &csv_columns {
        if !csv_without_geometry.is_empty() {
            let id_field = id_index.map(|i| field_names[i].as_str());
            csv::check_rows_without_geometry(
                path,
                &opened.dataset,
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
        skipped,
        raster: None,
    };
    validate::check(&set)?;
    Ok(set)
}

/// Hands every feature of `layer`, from the first, to `each`, and stops at the first error
/// `each` returns. A GDAL error of class failure raised while fetching a feature is
/// [`IngestError::ReadFailed`] with the feature's position in reading order, its id when GDAL
/// still returned it, and the id of the last feature read well; GDAL's warnings pass.
pub(super) fn each_feature<L: LayerAccess>(
    path: &Path,
    layer_name: &str,
    layer: &mut L,
    mut each: impl FnMut(&Feature<'_>) -> Result<(), IngestError>,
) -> Result<(), IngestError> {
    let declared = layer.try_feature_count();
    layer.reset_feature_reading();
    let mut features = layer.features();
    let mut index = 0usize;
    let mut after_fid = None;
    loop {
        clear_gdal_error();
        let next = features.next();
        if let Some(source) = take_gdal_failure() {
            return Err(IngestError::ReadFailed {
                path: path.to_path_buf(),
                layer: layer_name.to_string(),
                index,
                fid: next.as_ref().and_then(|f| f.fid()),
                after_fid,
                declared,
                source: Box::new(source),
            });
        }
        let Some(feature) = next else {
            return Ok(());
        };
        each(&feature)?;
        index += 1;
        after_fid = feature.fid().or(after_fid);
    }
}

/// Where a feature's landmark is, if it has one.
enum Position {
    /// The geometry is null.
    Missing,
    /// The geometry has no coordinates.
    Empty,
    /// The landmark position.
    At([f64; 2]),
}

/// The landmark position of a geometry.
fn position(g: &Geometry) -> Position {
    if is_null(g) {
        return Position::Missing;
    }
    if g.is_empty() {
        return Position::Empty;
    }
    let mut flat = g.clone();
    flat.flatten_to_2d();
    match flat.to_geo() {
        Ok(geo::Geometry::Point(p)) => Position::At([p.x(), p.y()]),
        Ok(other) => match other.centroid() {
            Some(c) => Position::At([c.x(), c.y()]),
            None => Position::Empty,
        },
        // GDAL geometries that `geo` cannot hold (curves): fall back to the envelope centre.
        Err(_) => {
            let e = flat.envelope();
            Position::At([(e.MinX + e.MaxX) / 2.0, (e.MinY + e.MaxY) / 2.0])
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
pub(super) fn field_text(feature: &Feature, index: usize) -> Option<String> {
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
