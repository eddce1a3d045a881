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
//!
//! A GeoPackage point layer whose every row is plain is read through SQLite instead, at about
//! a third of GDAL's cost per feature (`gpkg_points.rs`: it reads only what it is sure GDAL
//! would read the same, and gives up otherwise; the layer is then read as above). A test
//! reads layers of both kinds both ways and compares.

use super::csv::{self, RowPosition};
use super::gpkg_points;
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
    // A GeoPackage point layer is read through SQLite when every row is plain
    // (`gpkg_points.rs`); else, and for every other layer, feature by feature through GDAL.
    let quick = (opened.driver == "GPKG"
        && quick_allowed()
        && geometry_type_flatten(layer.defn().geometry_type()) == OGRwkbGeometryType::wkbPoint)
        .then(|| {
            let (fid, geom) = fid_and_geometry_columns(&layer);
            let id = id_index.map(|i| (field_names[i].as_str(), field_types[i]));
            gpkg_points::read(path, &layer_name, &fid, &geom, id)
        })
        .flatten();
    if let Some(rows) = quick {
        #[cfg(test)]
        tests::QUICK_READS.with(|n| n.set(n.get() + 1));
        ids = rows.ids;
        points = rows.points;
        skipped.no_geometry = rows.no_geometry;
    } else {
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
    }
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

/// Whether the quick GeoPackage reader may be used (always, but in tests that compare it with
/// GDAL's feature loop).
fn quick_allowed() -> bool {
    #[cfg(test)]
    if tests::GDAL_ONLY.with(|g| g.get()) {
        return false;
    }
    true
}

/// The names of the layer's feature id column and (first) geometry column, as GDAL has them
/// (empty when it has none).
#[allow(unsafe_code)]
fn fid_and_geometry_columns<L: LayerAccess>(layer: &L) -> (String, String) {
    let text = |p: *const std::ffi::c_char| {
        if p.is_null() {
            String::new()
        } else {
            // SAFETY: GDAL returns a NUL-terminated string owned by the layer, valid until the
            // layer changes; it is copied at once.
            unsafe { std::ffi::CStr::from_ptr(p) }
                .to_string_lossy()
                .into_owned()
        }
    };
    // SAFETY: `layer` wraps a live OGRLayerH for the duration of both calls.
    unsafe {
        (
            text(gdal_sys::OGR_L_GetFIDColumn(layer.c_layer())),
            text(gdal_sys::OGR_L_GetGeometryColumn(layer.c_layer())),
        )
    }
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
    use crate::ingest::{read_landmarks, SurveyInput};
    use gdal::spatial_ref::SpatialRef;
    use gdal::vector::{FieldDefn, LayerOptions};
    use std::cell::Cell;

    thread_local! {
        /// Set: layers are read feature by feature through GDAL only.
        pub(super) static GDAL_ONLY: Cell<bool> = const { Cell::new(false) };
        /// Layers this thread read with the quick GeoPackage reader.
        pub(super) static QUICK_READS: Cell<usize> = const { Cell::new(0) };
    }

    /// A GeoPackage written by GDAL: one layer "sites" of `ty` in EPSG:32633, fields `fields`,
    /// one feature per row (its geometry as WKT, or none; its field values as text, or unset).
    /// Then the statements of `sql` are run on it (to store what GDAL would not write).
    fn gpkg(
        dir: &Path,
        name: &str,
        ty: OGRwkbGeometryType::Type,
        fields: &[(&str, OGRFieldType::Type)],
        rows: &[Row],
        sql: &str,
    ) -> std::path::PathBuf {
        let path = dir.join(name);
        {
            let driver = gdal::DriverManager::get_driver_by_name("GPKG").unwrap();
            let mut ds = driver.create_vector_only(&path).unwrap();
            let srs = SpatialRef::from_epsg(32633).unwrap();
            let layer = ds
                .create_layer(LayerOptions {
                    name: "sites",
                    srs: Some(&srs),
                    ty,
                    options: None,
                })
                .unwrap();
            for (f, t) in fields {
                FieldDefn::new(f, *t).unwrap().add_to_layer(&layer).unwrap();
            }
            for (wkt, values) in rows {
                let mut f = Feature::new(layer.defn()).unwrap();
                for (i, v) in values.iter().enumerate() {
                    if let Some(v) = v {
                        f.set_field_string(i, v).unwrap();
                    }
                }
                if let Some(w) = wkt {
                    f.set_geometry(Geometry::from_wkt(w).unwrap()).unwrap();
                }
                f.create(&layer).unwrap();
            }
            // GDAL's own SQL (the R-tree triggers call functions GDAL registers).
            for statement in sql.split(';').filter(|q| !q.trim().is_empty()) {
                ds.execute_sql(statement, None, gdal::vector::sql::Dialect::DEFAULT)
                    .unwrap();
            }
        }
        path
    }

    /// The layer read as the tool reads it, and through GDAL's feature loop alone, as text
    /// (landmarks or error), and whether the quick reader took it.
    fn both_ways(path: &Path, id: Option<&str>) -> (String, String, bool) {
        let mut input = SurveyInput::new(path.to_path_buf());
        input.id = id.map(str::to_string);
        let before = QUICK_READS.with(|n| n.get());
        let quick = format!("{:?}", read_landmarks(&input));
        let took = QUICK_READS.with(|n| n.get()) > before;
        GDAL_ONLY.with(|g| g.set(true));
        let gdal = format!("{:?}", read_landmarks(&input));
        GDAL_ONLY.with(|g| g.set(false));
        (quick, gdal, took)
    }

    /// One feature to write: its geometry as WKT (or none), its field values as text (or
    /// unset).
    type Row = (Option<String>, Vec<Option<String>>);

    /// Rows on a jittered grid: point `i` as WKT (with z and m where asked), id text `id(i)`.
    fn rows(n: usize, dims: &str, id: impl Fn(usize) -> Option<String>) -> Vec<Row> {
        (0..n)
            .map(|i| {
                let (x, y) = (
                    500_000.0 + (i % 7) as f64 * 31.25 + (i * i % 13) as f64 * 0.37,
                    5_300_000.0 + (i / 7) as f64 * 29.5 + (i * 7 % 11) as f64 * 0.41,
                );
                let extra = match dims {
                    "Z" => " 12.5",
                    "M" => " 3",
                    "ZM" => " 12.5 3",
                    _ => "",
                };
                (Some(format!("POINT {dims} ({x} {y}{extra})")), vec![id(i)])
            })
            .collect()
    }

    /// The quick GeoPackage reader gives what GDAL's feature loop gives, landmarks or error,
    /// on plain layers (which it must take) and on layers it must leave to GDAL.
    #[test]
    fn quick_geopackage_reading_agrees_with_gdal() {
        use OGRFieldType::{OFTInteger, OFTInteger64, OFTReal, OFTString};
        use OGRwkbGeometryType::{wkbPoint, wkbPoint25D, wkbPointM, wkbPointZM, wkbPolygon};
        let dir = tempfile::tempdir().unwrap();
        let text = |i: usize| Some(format!("site-{i} é"));
        let num = |i: usize| Some(format!("{}", 1000 + 7 * i as i64 - 300));
        let plain = || rows(40, "", text);
        let edited = |row: usize, edit: &dyn Fn(&mut Row)| {
            let mut r = plain();
            edit(&mut r[row]);
            r
        };
        let squares: Vec<_> = (0..40)
            .map(|i| {
                let (x, y) = (
                    500_000.0 + (i % 7) as f64 * 31.0,
                    5_300_000.0 + (i / 7) as f64 * 29.0 + (i % 3) as f64,
                );
                let (x1, y1) = (x + 8.0, y + 8.0);
                let wkt = format!("POLYGON (({x} {y},{x1} {y},{x1} {y1},{x} {y1},{x} {y}))");
                (Some(wkt), vec![text(i)])
            })
            .collect();
        let name = [("name", OFTString)];
        let int64 = [("num", OFTInteger64)];
        let int32 = [("num", OFTInteger)];
        let real = [("v", OFTReal)];
        let mut with_null = plain();
        with_null[5].0 = None;
        with_null[30].0 = None;
        // (file, layer type, fields, rows, SQL run after, id field, the quick reader takes it)
        type Case<'a> = (
            &'a str,
            OGRwkbGeometryType::Type,
            &'a [(&'a str, OGRFieldType::Type)],
            Vec<Row>,
            &'a str,
            Option<&'a str>,
            bool,
        );
        let cases: Vec<Case> = vec![
            // Taken: text, feature ids with gaps, 64- and 32-bit integers (the field named in
            // another case), points with z, m or both, null geometries, a repeated id (refused
            // afterwards by the checks, as after GDAL's loop).
            (
                "text.gpkg",
                wkbPoint,
                &name,
                plain(),
                "",
                Some("name"),
                true,
            ),
            (
                "fid.gpkg",
                wkbPoint,
                &name,
                plain(),
                "DELETE FROM sites WHERE fid IN (3, 17);",
                None,
                true,
            ),
            (
                "i64.gpkg",
                wkbPoint,
                &int64,
                rows(40, "", num),
                "",
                Some("num"),
                true,
            ),
            (
                "i32.gpkg",
                wkbPoint,
                &int32,
                rows(40, "", num),
                "",
                Some("NUM"),
                true,
            ),
            (
                "z.gpkg",
                wkbPoint25D,
                &name,
                rows(40, "Z", text),
                "",
                Some("name"),
                true,
            ),
            (
                "m.gpkg",
                wkbPointM,
                &name,
                rows(40, "M", text),
                "",
                Some("name"),
                true,
            ),
            (
                "zm.gpkg",
                wkbPointZM,
                &name,
                rows(40, "ZM", text),
                "",
                Some("name"),
                true,
            ),
            (
                "null-geometry.gpkg",
                wkbPoint,
                &name,
                with_null,
                "",
                Some("name"),
                true,
            ),
            (
                "twice.gpkg",
                wkbPoint,
                &name,
                edited(9, &|r| r.1[0] = text(3)),
                "",
                Some("name"),
                true,
            ),
            // Left to GDAL: a real-valued id, a blank or a missing id, a text value in an
            // integer column, an empty point, a point out of range, polygons.
            (
                "real.gpkg",
                wkbPoint,
                &real,
                rows(40, "", num),
                "",
                Some("v"),
                false,
            ),
            (
                "blank.gpkg",
                wkbPoint,
                &name,
                edited(9, &|r| r.1[0] = Some("  ".into())),
                "",
                Some("name"),
                false,
            ),
            (
                "unset.gpkg",
                wkbPoint,
                &name,
                edited(9, &|r| r.1[0] = None),
                "",
                Some("name"),
                false,
            ),
            (
                "text-in-int.gpkg",
                wkbPoint,
                &int64,
                rows(40, "", num),
                "UPDATE sites SET num = 'x7' WHERE fid = 4;",
                Some("num"),
                false,
            ),
            (
                "empty.gpkg",
                wkbPoint,
                &name,
                edited(11, &|r| r.0 = Some("POINT EMPTY".into())),
                "",
                Some("name"),
                false,
            ),
            (
                "far.gpkg",
                wkbPoint,
                &name,
                edited(12, &|r| r.0 = Some("POINT (1e300 5)".into())),
                "",
                Some("name"),
                false,
            ),
            (
                "polygons.gpkg",
                wkbPolygon,
                &name,
                squares,
                "",
                Some("name"),
                false,
            ),
        ];
        let mut read = Vec::new();
        for (file, ty, fields, rows, sql, id, quick) in &cases {
            let path = gpkg(dir.path(), file, *ty, fields, rows, sql);
            let (fast, gdal, took) = both_ways(&path, *id);
            assert_eq!(fast, gdal, "{file}");
            assert_eq!(took, *quick, "{file}");
            read.push((*file, fast));
        }
        // The plain cases read some landmarks; the odd ones fail as GDAL's loop says.
        let outcome = |file: &str| &read.iter().find(|r| r.0 == file).unwrap().1;
        assert!(outcome("text.gpkg").starts_with("Ok"));
        assert!(outcome("zm.gpkg").starts_with("Ok"));
        assert!(outcome("twice.gpkg").starts_with("Err"));
        assert!(outcome("blank.gpkg").starts_with("Err"));
    }

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
