//! Reading a vector layer into a [`LandmarkSet`].
//!
//! **In:** the [`SurveyInput`] and the dataset as `open.rs` opened it. **Out:** the layer's
//! landmarks, checked (`validate.rs`), with the skipped features counted by cause; or an
//! [`IngestError`] naming the file (and the layer, field or feature at fault).
//!
//! Every feature is fetched with GDAL's error state watched: GDAL reports a feature it cannot
//! read (a truncated FlatGeobuf or Shapefile) by an error message and then ends the layer as
//! if it were complete, which is turned into [`IngestError::ReadFailed`] here. The rows of a
//! CSV table get their position from its x and y columns (`csv.rs`); other features from their
//! geometry. Ids are read as GDAL's raw bytes ([`field_bytes`]) and must be UTF-8.

use super::csv::{self, RowPosition};
use super::open::{clear_gdal_error, take_gdal_failure, Opened};
use super::validate::{self, in_range};
use super::{IngestError, LandmarkSet, SkipCounts, SurveyInput};
use gdal::vector::{
    geometry_type_flatten, geometry_type_has_m, geometry_type_has_z, Feature, Geometry, LayerAccess,
};
use gdal_sys::OGRFieldType;
use gdal_sys::OGRwkbGeometryType;
use geo::Centroid;
use std::path::Path;

/// Reads the landmarks of one layer of a dataset GDAL opened as vectors.
pub(super) fn read_vector(input: &SurveyInput, opened: Opened) -> Result<LandmarkSet, IngestError> {
    let path = input.path.as_path();
    let is_csv = csv::is_csv(&opened);
    if !is_csv && (input.x_column.is_some() || input.y_column.is_some()) {
        return Err(IngestError::ColumnsNotApplicable {
            path: path.to_path_buf(),
            driver: opened.driver.clone(),
        });
    }
    if is_csv {
        csv::check_no_nul(path)?;
    }
    let ds = &opened.dataset;
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
    let (field_names, field_types): (Vec<String>, Vec<OGRFieldType::Type>) = layer
        .defn()
        .fields()
        .map(|f| (f.name(), f.field_type()))
        .unzip();
    let columns = if is_csv {
        csv::coordinate_columns(
            path,
            &field_names,
            input.x_column.as_deref(),
            input.y_column.as_deref(),
        )?
    } else {
        None
    };
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
    let mut n = 0usize;
    each_feature(path, &layer_name, &mut layer, |feature| {
        // The feature id as text: the landmark id when no id field is named, else only for
        // messages (made when needed: a million of them cost a tenth of a second).
        let number = n;
        n += 1;
        let fid_text = || {
            feature
                .fid()
                .map(|f| f.to_string())
                .unwrap_or_else(|| number.to_string())
        };
        let id_of = |feature: &Feature| -> Result<String, IngestError> {
            let Some(i) = id_index else {
                return Ok(fid_text());
            };
            let at = |e: IdProblem| {
                e.into_error(
                    path,
                    &layer_name,
                    &fid_text(),
                    &field_names[i],
                    &opened.driver,
                )
            };
            id_value(feature, i, field_types[i]).map_err(at)
        };
        let position = match &columns {
            Some(c) => match csv::row_position(
                c,
                field_bytes(feature, c.xi).as_deref(),
                field_bytes(feature, c.yi).as_deref(),
            ) {
                RowPosition::Blank => Position::Missing,
                RowPosition::At(p) => Position::At(p),
                RowPosition::Bad(cells) => {
                    return Err(IngestError::UnreadableCoordinate {
                        path: path.to_path_buf(),
                        layer: layer_name.clone(),
                        id: id_of(feature).unwrap_or_else(|_| fid_text()),
                        cells,
                    })
                }
            },
            None => feature.geometry().map_or(Position::Missing, position),
        };
        let p = match position {
            Position::Missing => {
                skipped.no_geometry += 1;
                return Ok(());
            }
            Position::Empty => {
                skipped.empty += 1;
                return Ok(());
            }
            Position::Invalid => {
                skipped.invalid += 1;
                return Ok(());
            }
            Position::At(p) => p,
        };
        let id = id_of(feature)?;
        if !in_range(p) {
            return Err(IngestError::OutOfRange {
                path: path.to_path_buf(),
                layer: layer_name.clone(),
                id,
                fid: fid_text(),
                x: p[0],
                y: p[1],
            });
        }
        ids.push(id);
        points.push(p);
        Ok(())
    })?;
    if points.is_empty() {
        if is_csv && columns.is_none() {
            return Err(IngestError::NoCoordinateColumns {
                path: path.to_path_buf(),
                columns: csv::listed(&field_names),
            });
        }
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
    validate::check(&set, id_index.map(|i| field_names[i].as_str()))?;
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
    /// The geometry has coordinates but no finite centroid.
    Invalid,
    /// The landmark position (checked against the coordinate range by the caller).
    At([f64; 2]),
}

/// The landmark position of a geometry. A point is its position, whatever its numbers (the
/// caller checks the range); a centroid that is undefined or not finite makes the geometry
/// [`Position::Invalid`].
fn position(g: &Geometry) -> Position {
    if is_null(g) {
        return Position::Missing;
    }
    if g.is_empty() {
        return Position::Empty;
    }
    let ty = g.geometry_type();
    if geometry_type_flatten(ty) == OGRwkbGeometryType::wkbPoint {
        // A point's x and y, whatever its z or m (as the flattened copy below would give).
        let (x, y, _) = g.get_point(0);
        return Position::At([x, y]);
    }
    // Only a geometry with z or m needs a flattened copy for `geo`.
    let flattened;
    let flat = if geometry_type_has_z(ty) || geometry_type_has_m(ty) {
        let mut copy = g.clone();
        copy.flatten_to_2d();
        flattened = copy;
        &flattened
    } else {
        g
    };
    match flat.to_geo() {
        Ok(geo::Geometry::Point(p)) => Position::At([p.x(), p.y()]),
        Ok(other) => match other.centroid() {
            Some(c) if c.x().is_finite() && c.y().is_finite() => Position::At([c.x(), c.y()]),
            _ => Position::Invalid,
        },
        // GDAL geometries that `geo` cannot hold (curves): fall back to the envelope centre.
        Err(_) => {
            let e = flat.envelope();
            let c = [(e.MinX + e.MaxX) / 2.0, (e.MinY + e.MaxY) / 2.0];
            if c.iter().all(|v| v.is_finite()) {
                Position::At(c)
            } else {
                Position::Invalid
            }
        }
    }
}

/// GDAL hands a feature without geometry back as a wrapper around a NULL pointer.
#[allow(unsafe_code)]
fn is_null(g: &Geometry) -> bool {
    // SAFETY: reading the wrapped pointer value; it is not dereferenced.
    unsafe { g.c_geometry().is_null() }
}

/// A field's value as GDAL's raw bytes (`OGR_F_GetFieldAsString`, no conversion); `None` when
/// unset or null. (GDAL reads an unset field as "" or 0, so the set-and-not-null flag is asked
/// first.)
#[allow(unsafe_code)]
pub(super) fn field_bytes(feature: &Feature, index: usize) -> Option<Vec<u8>> {
    // SAFETY: `feature` wraps a live OGRFeatureH for the duration of the call, and `index` is a
    // field index taken from the layer definition. The string GDAL returns is owned by the
    // feature (valid until the next call on it); it is checked for NULL and copied at once.
    unsafe {
        let h = feature.c_feature();
        if gdal_sys::OGR_F_IsFieldSetAndNotNull(h, index as i32) == 0 {
            return None;
        }
        let text = gdal_sys::OGR_F_GetFieldAsString(h, index as i32);
        if text.is_null() {
            return None;
        }
        Some(std::ffi::CStr::from_ptr(text).to_bytes().to_vec())
    }
}

/// Why a feature's id cannot be used as read.
#[derive(Debug, Clone, PartialEq)]
pub(super) enum IdProblem {
    /// Unset, null, or nothing but white space.
    Missing,
    /// Not valid UTF-8: the bytes shown with the invalid ones as `\xNN`.
    NotUtf8(String),
    /// A number GDAL may have clamped or rounded: its type, the value read, why.
    Lossy(&'static str, String, &'static str),
}

impl IdProblem {
    fn into_error(
        self,
        path: &Path,
        layer: &str,
        fid: &str,
        field: &str,
        driver: &str,
    ) -> IngestError {
        let (path, layer, fid, field) = (
            path.to_path_buf(),
            layer.to_string(),
            fid.to_string(),
            field.to_string(),
        );
        match self {
            IdProblem::Missing => IngestError::MissingId {
                path,
                layer,
                fid,
                field,
            },
            IdProblem::NotUtf8(shown) => IngestError::IdNotUtf8 {
                path,
                layer,
                fid,
                field,
                shown,
                driver: driver.to_string(),
            },
            IdProblem::Lossy(kind, value, why) => IngestError::LossyNumericId {
                path,
                layer,
                fid,
                field,
                kind: kind.into(),
                value,
                why: why.into(),
            },
        }
    }
}

/// The largest magnitude below which every integer is exactly a `f64`: 2^53.
const EXACT_INTEGERS: f64 = 9_007_199_254_740_992.0;

/// A feature's id from field `index` of type `field_type`: its text exactly, byte for byte
/// (white space kept), if it is valid UTF-8, not blank, and — for a numeric field — a number
/// GDAL cannot have clamped (an Integer64 at its limits) or rounded (a Real of magnitude 2^53
/// or more, or one whose text as GDAL prints it does not read back as the same number).
#[allow(unsafe_code)]
pub(super) fn id_value(
    feature: &Feature,
    index: usize,
    field_type: OGRFieldType::Type,
) -> Result<String, IdProblem> {
    let bytes = field_bytes(feature, index).ok_or(IdProblem::Missing)?;
    let text = match String::from_utf8(bytes) {
        Ok(t) => t,
        Err(e) => return Err(IdProblem::NotUtf8(escaped(e.as_bytes()))),
    };
    if text.trim().is_empty() {
        return Err(IdProblem::Missing);
    }
    // SAFETY: reads the wrapped handle; `feature` outlives its uses below.
    let h = unsafe { feature.c_feature() };
    match field_type {
        OGRFieldType::OFTInteger64 => {
            // SAFETY: as in `field_bytes`; the field is set (checked there).
            let v = unsafe { gdal_sys::OGR_F_GetFieldAsInteger64(h, index as i32) };
            if v == i64::MAX || v == i64::MIN {
                return Err(IdProblem::Lossy(
                    "64-bit integers",
                    text,
                    "GDAL clamps a larger integer to this limit",
                ));
            }
        }
        OGRFieldType::OFTReal => {
            // SAFETY: as above.
            let v = unsafe { gdal_sys::OGR_F_GetFieldAsDouble(h, index as i32) };
            let exact = v.abs() < EXACT_INTEGERS && text.parse::<f64>().ok() == Some(v);
            if !exact {
                return Err(IdProblem::Lossy(
                    "floating-point numbers",
                    text,
                    "such a number keeps about 15 significant digits and GDAL prints 15",
                ));
            }
        }
        _ => {}
    }
    Ok(text)
}

/// Bytes as text, each byte of an invalid UTF-8 sequence as `\xNN`.
pub(super) fn escaped(bytes: &[u8]) -> String {
    let mut out = String::new();
    for chunk in bytes.utf8_chunks() {
        out.push_str(chunk.valid());
        for b in chunk.invalid() {
            out.push_str(&format!("\\x{b:02X}"));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn at(wkt: &str) -> Option<[f64; 2]> {
        match position(&Geometry::from_wkt(wkt).expect("valid WKT")) {
            Position::At(p) => Some(p),
            _ => None,
        }
    }

    /// Points of every dimension give their x and y; polygons with z or m give the centroid
    /// of their plan (the flattened copy), as plain polygons do.
    #[test]
    fn positions_of_every_dimension() {
        assert_eq!(at("POINT (3.5 -2)"), Some([3.5, -2.0]));
        assert_eq!(at("POINT Z (3.5 -2 40)"), Some([3.5, -2.0]));
        assert_eq!(at("POINT M (3.5 -2 7)"), Some([3.5, -2.0]));
        assert_eq!(at("POINT ZM (3.5 -2 40 7)"), Some([3.5, -2.0]));
        let square = Some([1.0, 2.0]);
        assert_eq!(at("POLYGON ((0 1,2 1,2 3,0 3,0 1))"), square);
        assert_eq!(at("POLYGON Z ((0 1 5,2 1 6,2 3 7,0 3 8,0 1 5))"), square);
        assert_eq!(at("POLYGON M ((0 1 5,2 1 6,2 3 7,0 3 8,0 1 5))"), square);
        assert_eq!(
            at("MULTIPOLYGON Z (((0 1 5,2 1 6,2 3 7,0 3 8,0 1 5)))"),
            square
        );
        assert!(matches!(
            position(&Geometry::from_wkt("POINT EMPTY").unwrap()),
            Position::Empty
        ));
        assert!(matches!(
            position(&Geometry::from_wkt("POLYGON Z EMPTY").unwrap()),
            Position::Empty
        ));
    }
}
