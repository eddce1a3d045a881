//! `control-points.gpkg` and landmark files: GeoPackages through GDAL and SQLite, GeoJSON and FlatGeobuf through GDAL.
//!
//! **In:** an accepted match (or a landmark set), a path in the staging folder, and a callback
//! told how many features are written so far. **Out:** the GeoPackage (or GeoJSON, FlatGeobuf)
//! file, every layer with its spatial index.
//!
//! A GeoPackage is made in two steps. GDAL makes the file and its layers, empty: the tables,
//! the CRS entries, and each layer's empty spatial index through GDAL's own SQL function
//! `CreateSpatialIndex(table, column)` (the R*Tree virtual table `rtree_<layer>_geom`, the
//! triggers that keep it up to date and the `gpkg_extensions` row of GeoPackage's "RTree
//! Spatial Indexes" extension, exactly as GDAL makes them), and closes it. Then the features go
//! in through SQLite directly (rusqlite, the system's libsqlite3), in one transaction, one
//! layer after another: the layer's triggers are set aside; what each row needs is made and
//! looked up on the cores at once, a block of rows at a time (the geometry blobs in the
//! GeoPackage encoding GDAL writes, their bounding boxes, the field values; a control point's
//! two ids are gathered end to end once for the three layers), so that SQLite's thread reads
//! memory in order; every row goes in through one prepared multi-row statement with its
//! values bound, its feature id left to SQLite (1..n in order: each row is appended at the end
//! of the table's B-tree rather than looked up); the spatial index is packed from the
//! features' bounding boxes (made first, on the cores; packed on another thread while SQLite
//! takes the rows) and stored; the layer's extent and feature count are set as GDAL
//! would set them, and the triggers are put back. Feature-by-feature through GDAL (a
//! `Feature`, an OGR geometry, GDAL's own encoding and statement work per row) was most of the
//! cost of `control-points.gpkg`; see README, "Writing the outputs". Filling layers on other
//! threads into scratch databases and copying them in (`INSERT … SELECT`, SQLite's transfer
//! of whole records) was tried: the copy costs most of what filling costs, and it was slower.
//! GeoJSON and FlatGeobuf landmark files go through GDAL as they are.
//!
//! # The spatial index, packed at the end
//!
//! GDAL maintains a GeoPackage layer's R-tree one feature at a time: for 662,715 points that
//! is most of the cost of writing (GEOSTACK.md: 7.9 s with it, 1.6 s without). Here the tree
//! is packed in one pass from the features' bounding boxes (`PackedTree`: sort-tile-recursive,
//! full nodes) and stored straight into the R*Tree module's shadow tables (`_node`, `_parent`,
//! `_rowid`, whose layout is SQLite's, see `PackedTree`; `_parent` and `_rowid` in key order,
//! so that they go in at the end of their B-trees). The result is the index the
//! trigger-by-trigger way would have built, in another shape (SQLite's `rtreecheck()` passes
//! on it, GDAL reports `HasSpatialIndex` and uses it for spatial filters), and later edits
//! maintain it as usual.

use super::EmitError;
use crate::fit::Solution;
use crate::ingest::LandmarkSet;
use crate::outcome::MatchOutcome;
use gdal::spatial_ref::{AxisMappingStrategy, SpatialRef};
use gdal::vector::{
    Feature, FieldDefn, Geometry, LayerAccess, LayerOptions, OGRFieldType, OGRwkbGeometryType,
};
use gdal::{Dataset, DriverManager};
use std::path::Path;

pub(super) fn gdal_err(path: &Path) -> impl Fn(gdal::errors::GdalError) -> EmitError + '_ {
    move |source| {
        let detail = source.to_string();
        if super::atomic::disk_full_text(&detail) {
            EmitError::DiskFull {
                path: path.to_path_buf(),
                detail,
            }
        } else {
            EmitError::Gdal {
                path: path.to_path_buf(),
                source,
            }
        }
    }
}

/// The date GDAL's GeoPackage driver writes as the last change of every table
/// (`gpkg_contents.last_change`), through its configuration option `OGR_CURRENT_DATE` (GDAL's
/// GPKG driver documentation): fixed, so that a GeoPackage is the same bytes every run.
const FIXED_DATE: &str = "2000-01-01T00:00:00.000Z";

/// Creates a GeoPackage with [`FIXED_DATE`] as its timestamps (the option is set for this
/// thread while GDAL writes and cleared by `DateFixed`'s drop).
pub(super) fn create_gpkg(path: &Path) -> Result<(Dataset, DateFixed), EmitError> {
    let e = gdal_err(path);
    gdal::config::set_thread_local_config_option("OGR_CURRENT_DATE", FIXED_DATE).map_err(&e)?;
    let fixed = DateFixed;
    let driver = DriverManager::get_driver_by_name("GPKG").map_err(&e)?;
    let ds = driver.create_vector_only(path).map_err(&e)?;
    Ok((ds, fixed))
}

/// Clears the thread's `OGR_CURRENT_DATE` on drop (after the dataset is closed).
pub(super) struct DateFixed;

impl Drop for DateFixed {
    fn drop(&mut self) {
        let _ = gdal::config::clear_thread_local_config_option("OGR_CURRENT_DATE");
    }
}

/// Closes `ds` and returns a failure GDAL raised while closing but did not return: GDAL 3.6's
/// GeoPackage driver builds the spatial index at close, and on a full disk only prints the
/// error and leaves the file without it.
pub(super) fn close_checked(ds: Dataset, path: &Path) -> Result<(), EmitError> {
    crate::ingest::clear_gdal_error();
    ds.close().map_err(gdal_err(path))?;
    match crate::ingest::take_gdal_failure() {
        Some(e) => Err(gdal_err(path)(e)),
        None => Ok(()),
    }
}

pub(super) fn srs_from_wkt(wkt: &str, path: &Path) -> Result<SpatialRef, EmitError> {
    let mut srs = SpatialRef::from_wkt(wkt).map_err(gdal_err(path))?;
    srs.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
    Ok(srs)
}

pub(super) fn add_fields<L: LayerAccess>(
    layer: &L,
    fields: &[(&str, OGRFieldType::Type)],
    path: &Path,
) -> Result<(), EmitError> {
    for (name, ty) in fields {
        FieldDefn::new(name, *ty)
            .and_then(|d| d.add_to_layer(layer))
            .map_err(gdal_err(path))?;
    }
    Ok(())
}

/// One field's value of a row for [`write_layer`].
pub(super) enum FieldValue<'a> {
    Int(i32),
    Real(f64),
    Text(&'a str),
}

/// Writes one small layer `name` into the open GeoPackage `ds` through GDAL, feature by
/// feature: its `fields`, then a feature per row of `rows` (the values in the fields' order,
/// and what `geometry` makes the row's shape into). For the drift areas and the epochs
/// library; the control points' large layers go through SQLite instead (module doc).
pub(super) fn write_layer<'a, G>(
    ds: &mut Dataset,
    name: &str,
    ty: OGRwkbGeometryType::Type,
    srs: &SpatialRef,
    fields: &[(&str, OGRFieldType::Type)],
    rows: impl IntoIterator<Item = (Vec<FieldValue<'a>>, G)>,
    geometry: impl Fn(G) -> gdal::errors::Result<Geometry>,
    path: &Path,
) -> Result<(), EmitError> {
    let e = gdal_err(path);
    let layer = ds
        .create_layer(LayerOptions {
            name,
            srs: Some(srs),
            ty,
            options: None,
        })
        .map_err(&e)?;
    add_fields(&layer, fields, path)?;
    for (values, shape) in rows {
        let mut f = Feature::new(layer.defn()).map_err(&e)?;
        for (i, v) in values.iter().enumerate() {
            match v {
                FieldValue::Int(x) => f.set_field_integer(i, *x),
                FieldValue::Real(x) => f.set_field_double(i, *x),
                FieldValue::Text(x) => f.set_field_string(i, x),
            }
            .map_err(&e)?;
        }
        f.set_geometry(geometry(shape).map_err(&e)?).map_err(&e)?;
        f.create(&layer).map_err(&e)?;
    }
    Ok(())
}

pub(super) fn point(p: [f64; 2]) -> gdal::errors::Result<Geometry> {
    let mut g = Geometry::empty(OGRwkbGeometryType::wkbPoint)?;
    g.add_point_2d((p[0], p[1]));
    Ok(g)
}

/// The bounding box `[min_x, max_x, min_y, max_y]` of some points (the R*Tree's column order).
fn bbox(points: &[[f64; 2]]) -> [f64; 4] {
    points.iter().fold(
        [
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::INFINITY,
            f64::NEG_INFINITY,
        ],
        |b, p| {
            [
                b[0].min(p[0]),
                b[1].max(p[0]),
                b[2].min(p[1]),
                b[3].max(p[1]),
            ]
        },
    )
}

/// The geometry column GDAL's GeoPackage driver gives a new layer (layer creation option
/// `GEOMETRY_NAME`, whose default this is, GDAL's GPKG driver documentation).
const GEOMETRY_COLUMN: &str = "geom";

/// The rows of one SQL query through GDAL, each as its fields' text (NULL as "").
fn query(ds: &Dataset, statement: &str, path: &Path) -> Result<Vec<Vec<String>>, EmitError> {
    crate::ingest::clear_gdal_error();
    let mut rows = Vec::new();
    if let Some(mut set) = ds
        .execute_sql(statement, None, gdal::vector::sql::Dialect::DEFAULT)
        .map_err(gdal_err(path))?
    {
        let n = set.defn().fields().count();
        for f in set.features() {
            let mut row = Vec::with_capacity(n);
            for i in 0..n {
                row.push(
                    f.field_as_string(i)
                        .map_err(gdal_err(path))?
                        .unwrap_or_default(),
                );
            }
            rows.push(row);
        }
    }
    match crate::ingest::take_gdal_failure() {
        Some(e) => Err(gdal_err(path)(e)),
        None => Ok(rows),
    }
}

/// An SQLite failure while filling `path`; a full disk becomes [`EmitError::DiskFull`].
fn sqlite_err(path: &Path) -> impl Fn(rusqlite::Error) -> EmitError + '_ {
    move |source| {
        let detail = source.to_string();
        let full = matches!(
            source.sqlite_error_code(),
            Some(rusqlite::ErrorCode::DiskFull)
        );
        if full || super::atomic::disk_full_text(&detail) {
            EmitError::DiskFull {
                path: path.to_path_buf(),
                detail,
            }
        } else {
            EmitError::Io {
                path: path.to_path_buf(),
                source: std::io::Error::other(format!(
                    "writing the GeoPackage failed in SQLite: {detail}"
                )),
            }
        }
    }
}

/// One layer of a GeoPackage to make: its name, geometry type, CRS and fields (after the
/// feature id and the geometry).
struct LayerSpec<'a> {
    name: &'a str,
    ty: OGRwkbGeometryType::Type,
    srs: &'a SpatialRef,
    fields: &'a [(&'a str, OGRFieldType::Type)],
}

/// Makes the GeoPackage at `path` through GDAL with the given layers, empty, each with its
/// empty spatial index (GDAL's `CreateSpatialIndex`), and closes it.
fn create_layers(path: &Path, specs: &[LayerSpec]) -> Result<(), EmitError> {
    let e = gdal_err(path);
    let (mut ds, fixed) = create_gpkg(path)?;
    for spec in specs {
        let layer = ds
            .create_layer(LayerOptions {
                name: spec.name,
                srs: Some(spec.srs),
                ty: spec.ty,
                options: Some(&["SPATIAL_INDEX=NO"]),
            })
            .map_err(&e)?;
        add_fields(&layer, spec.fields, path)?;
        let name = spec.name;
        let made = query(
            &ds,
            &format!("SELECT CreateSpatialIndex('{name}', '{GEOMETRY_COLUMN}')"),
            path,
        )?;
        if made.first().and_then(|r| r.first()).map(String::as_str) != Some("1") {
            return Err(e(gdal::errors::GdalError::BadArgument(format!(
                "GDAL did not create the spatial index of layer {name}"
            ))));
        }
    }
    close_checked(ds, path)?;
    drop(fixed);
    Ok(())
}

/// Opens the GeoPackage GDAL made for filling, in one transaction.
///
/// The rollback journal is kept in memory and nothing is synced to the disk meanwhile
/// (`journal_mode = MEMORY`, `synchronous = OFF`): the file is staged and only renamed into
/// place once complete (module [`super::atomic`]), so a crash leaves no half file where a user
/// looks, and the journal still undoes a failed statement. The file is then as durable as the
/// other outputs, which are plain writes too.
fn open_for_filling(path: &Path) -> Result<rusqlite::Connection, EmitError> {
    let e = sqlite_err(path);
    let conn = rusqlite::Connection::open_with_flags(
        path,
        rusqlite::OpenFlags::SQLITE_OPEN_READ_WRITE | rusqlite::OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )
    .map_err(&e)?;
    conn.pragma_update(None, "journal_mode", "MEMORY")
        .map_err(&e)?;
    conn.pragma_update(None, "synchronous", "OFF").map_err(&e)?;
    conn.execute_batch("BEGIN").map_err(&e)?;
    Ok(conn)
}

/// Commits and closes a connection of [`open_for_filling`].
fn finish_filling(conn: rusqlite::Connection, path: &Path) -> Result<(), EmitError> {
    let e = sqlite_err(path);
    conn.execute_batch("COMMIT").map_err(&e)?;
    conn.close().map_err(|(_, err)| e(err))
}

/// The geometry of one feature.
#[derive(Clone, Copy, Debug)]
enum Shape {
    Point([f64; 2]),
    Line([f64; 2], [f64; 2]),
}

impl Shape {
    /// The bounding box `[min_x, max_x, min_y, max_y]`.
    fn bbox(&self) -> [f64; 4] {
        match self {
            Shape::Point(p) => bbox(&[*p]),
            Shape::Line(a, b) => bbox(&[*a, *b]),
        }
    }

    /// Appends the geometry as a GeoPackage geometry blob (GeoPackageBinary: magic "GP",
    /// version 0, flags, the SRS id, an envelope, then the geometry as WKB; OGC GeoPackage
    /// Encoding Standard 12-128r18, clause 2.1.3, from memory; the tests read it back through
    /// GDAL) as GDAL's GeoPackage driver writes it: little-endian, no envelope for a point
    /// (flags 0x01), the 2-D envelope `[min_x, max_x, min_y, max_y]` for a line (flags 0x03).
    fn push_blob(&self, srs_id: i32, out: &mut Vec<u8>) {
        let flags = match self {
            Shape::Point(_) => 0x01,
            Shape::Line(..) => 0x03,
        };
        out.extend_from_slice(&[b'G', b'P', 0, flags]);
        out.extend_from_slice(&srs_id.to_le_bytes());
        let xy = |out: &mut Vec<u8>, p: &[f64; 2]| {
            out.extend_from_slice(&p[0].to_le_bytes());
            out.extend_from_slice(&p[1].to_le_bytes());
        };
        match self {
            Shape::Point(p) => {
                // WKB: byte order 1 (little-endian), type 1 (Point), x, y.
                out.push(1);
                out.extend_from_slice(&1u32.to_le_bytes());
                xy(out, p);
            }
            Shape::Line(a, b) => {
                for v in self.bbox() {
                    out.extend_from_slice(&v.to_le_bytes());
                }
                // WKB: byte order, type 2 (LineString), two points.
                out.push(1);
                out.extend_from_slice(&2u32.to_le_bytes());
                out.extend_from_slice(&2u32.to_le_bytes());
                xy(out, a);
                xy(out, b);
            }
        }
    }
}

/// A field's value in one feature (or a geometry blob).
#[derive(Clone, Copy, Debug)]
enum Value<'a> {
    Text(&'a str),
    Real(f64),
    Blob(&'a [u8]),
}

/// A prepared `INSERT` whose text and blob values are bound where they lie
/// (`SQLITE_STATIC`), not copied: rusqlite binds them as `SQLITE_TRANSIENT`, a copy each, and
/// every copy is an allocation under SQLite's global memory-statistics mutex. For the three
/// layers of a million control points that was some six million allocations on the writer's
/// thread. [`Insert::execute`] binds, steps, resets and clears the bindings in one call, so
/// that SQLite never holds a pointer to the values once it returns.
struct Insert<'c> {
    stmt: *mut rusqlite::ffi::sqlite3_stmt,
    db: *mut rusqlite::ffi::sqlite3,
    /// The connection the statement belongs to outlives it.
    _conn: std::marker::PhantomData<&'c rusqlite::Connection>,
}

impl<'c> Insert<'c> {
    /// Prepares `sql` on `conn`.
    #[allow(unsafe_code)]
    fn prepare(conn: &'c rusqlite::Connection, sql: &str) -> rusqlite::Result<Insert<'c>> {
        // SAFETY: the handle of a live connection, used only while `conn` is borrowed; the
        // statement text is passed with its length (no NUL needed); `stmt` is written by
        // SQLite and checked below.
        unsafe {
            let db = conn.handle();
            let mut stmt = std::ptr::null_mut();
            let rc = rusqlite::ffi::sqlite3_prepare_v2(
                db,
                sql.as_ptr().cast(),
                sql.len() as std::ffi::c_int,
                &mut stmt,
                std::ptr::null_mut(),
            );
            let insert = Insert {
                stmt,
                db,
                _conn: std::marker::PhantomData,
            };
            insert.check(rc)?;
            if stmt.is_null() {
                return Err(rusqlite::Error::InvalidQuery);
            }
            Ok(insert)
        }
    }

    /// `Ok` for SQLite's `SQLITE_OK`, else the connection's error.
    #[allow(unsafe_code)]
    fn check(&self, rc: std::ffi::c_int) -> rusqlite::Result<()> {
        if rc == rusqlite::ffi::SQLITE_OK {
            return Ok(());
        }
        // SAFETY: the connection is live; SQLite's message is copied at once.
        let message = unsafe {
            let m = rusqlite::ffi::sqlite3_errmsg(self.db);
            (!m.is_null()).then(|| std::ffi::CStr::from_ptr(m).to_string_lossy().into_owned())
        };
        Err(rusqlite::Error::SqliteFailure(
            rusqlite::ffi::Error::new(rc),
            message,
        ))
    }

    /// Binds `v` to parameter `i` (from 1), without a copy. Only [`Insert::execute`] calls it,
    /// with values that stay in place until it has cleared the bindings.
    #[allow(unsafe_code)]
    fn bind(&mut self, i: usize, v: Value<'_>) -> rusqlite::Result<()> {
        use rusqlite::ffi;
        let i = i as std::ffi::c_int;
        // SAFETY: a live statement; text and blob pointers with their lengths, bound as
        // SQLITE_STATIC: `execute` keeps them borrowed until it has cleared the bindings.
        let rc = unsafe {
            match v {
                Value::Text(t) => ffi::sqlite3_bind_text64(
                    self.stmt,
                    i,
                    t.as_ptr().cast(),
                    t.len() as ffi::sqlite3_uint64,
                    ffi::SQLITE_STATIC(),
                    ffi::SQLITE_UTF8 as std::ffi::c_uchar,
                ),
                Value::Blob(b) => ffi::sqlite3_bind_blob64(
                    self.stmt,
                    i,
                    b.as_ptr().cast(),
                    b.len() as ffi::sqlite3_uint64,
                    ffi::SQLITE_STATIC(),
                ),
                Value::Real(r) => ffi::sqlite3_bind_double(self.stmt, i, r),
            }
        };
        self.check(rc)
    }

    /// Binds `values` to the parameters 1, 2, … (one each), runs the statement once, then
    /// resets it and clears its bindings, whatever happened.
    #[allow(unsafe_code)]
    fn execute(&mut self, values: &[Value<'_>]) -> rusqlite::Result<()> {
        use rusqlite::ffi;
        let bound = values
            .iter()
            .enumerate()
            .try_for_each(|(i, v)| self.bind(i + 1, *v));
        // SAFETY: a live statement whose parameters point into `values`, borrowed until this
        // function returns; the bindings are cleared before it does.
        let (step, reset) = unsafe {
            let step = if bound.is_ok() {
                ffi::sqlite3_step(self.stmt)
            } else {
                ffi::SQLITE_DONE
            };
            let reset = ffi::sqlite3_reset(self.stmt);
            ffi::sqlite3_clear_bindings(self.stmt);
            (step, reset)
        };
        bound?;
        if step != ffi::SQLITE_DONE {
            self.check(if reset != ffi::SQLITE_OK { reset } else { step })?;
            return Err(rusqlite::Error::ExecuteReturnedResults);
        }
        Ok(())
    }
}

impl Drop for Insert<'_> {
    #[allow(unsafe_code)]
    fn drop(&mut self) {
        // SAFETY: the statement was prepared by `prepare` and is finalized once, here.
        unsafe {
            rusqlite::ffi::sqlite3_finalize(self.stmt);
        }
    }
}

/// Rows whose geometry blobs and fields are made on the cores at once (in fixed
/// pieces, so that they and their order never depend on the thread count) before they go
/// into SQLite one by one.
const BLOCK: usize = 65_536;
/// Rows of one piece of a block.
const PIECE: usize = 4_096;

/// The rows `from..to` of a layer, ready to bind: their geometry blobs end to end (row k's
/// is `bytes[ends[k]..ends[k + 1]]`), their fields.
struct Piece<'v, const K: usize> {
    bytes: Vec<u8>,
    ends: Vec<usize>,
    values: Vec<[Value<'v>; K]>,
}

/// Fills layer `spec` (made empty by [`create_layers`]) with rows `0..n` in that order
/// (feature ids 1..=n, which SQLite gives them): `shape(i)` is row i's geometry, `values(i)`
/// its fields in the order of `spec.fields`. The index's triggers (and GDAL's feature-count
/// triggers) are set aside while the rows go in with one prepared statement, the packed
/// spatial index is stored (module doc), the layer's extent and feature count are set in
/// `gpkg_contents` and `gpkg_ogr_contents`, and the triggers are put back as GDAL made them.
/// `done` is told how many rows are in (every few thousand).
fn fill_layer<'v, const K: usize>(
    conn: &rusqlite::Connection,
    spec: &LayerSpec,
    n: usize,
    shape: &(dyn Fn(usize) -> Shape + Sync),
    values: &(dyn Fn(usize) -> [Value<'v>; K] + Sync),
    path: &Path,
    done: &mut dyn FnMut(usize),
) -> Result<(), EmitError> {
    use rayon::prelude::*;
    use rusqlite::OptionalExtension;
    assert_eq!(spec.fields.len(), K, "one value per field");
    let e = sqlite_err(path);
    let name = spec.name;
    let rtree = rtree_name(name);
    let missing = |what: &str| EmitError::Io {
        path: path.to_path_buf(),
        source: std::io::Error::other(format!(
            "the GeoPackage GDAL made has no {what} for layer {name}"
        )),
    };
    let srs_id: i32 = conn
        .query_row(
            "SELECT srs_id FROM gpkg_geometry_columns WHERE table_name = ?1",
            [name],
            |r| r.get(0),
        )
        .optional()
        .map_err(&e)?
        .ok_or_else(|| missing("geometry column"))?;
    let node_bytes = conn
        .query_row(
            &format!("SELECT length(data) FROM \"{rtree}_node\" WHERE nodeno = 1"),
            [],
            |r| r.get::<_, i64>(0),
        )
        .optional()
        .map_err(&e)?
        .and_then(|v| usize::try_from(v).ok())
        .filter(|&v| v >= 4 + 2 * CELL_BYTES)
        .ok_or_else(|| missing("spatial index root node"))?;
    let triggers: Vec<(String, String)> = {
        let mut st = conn
            .prepare(
                "SELECT name, sql FROM sqlite_master WHERE type = 'trigger' \
                 AND tbl_name = ?1 ORDER BY name",
            )
            .map_err(&e)?;
        let rows = st
            .query_map([name], |r| Ok((r.get(0)?, r.get(1)?)))
            .map_err(&e)?;
        rows.collect::<Result<_, _>>().map_err(&e)?
    };
    if !triggers.iter().any(|(t, _)| t.starts_with(&rtree)) {
        return Err(missing("spatial index trigger"));
    }
    for (t, _) in &triggers {
        conn.execute_batch(&format!("DROP TRIGGER \"{t}\""))
            .map_err(&e)?;
    }

    // The boxes first (a pass on the cores), so that the spatial index is packed, and its
    // node blobs made, on another thread while SQLite's takes the rows: 0.26-0.29 s at
    // 661,878 features that no longer wait on the rows' thread.
    let boxes: Vec<(i64, [f64; 4])> = (0..n)
        .into_par_iter()
        .map(|i| (i as i64 + 1, shape(i).bbox()))
        .collect();
    let capacity = (node_bytes - 4) / CELL_BYTES;
    let (index, inserted) = std::thread::scope(|scope| {
        let packing = scope.spawn(|| {
            let tree = PackedTree::pack(&boxes, capacity);
            let blobs: Vec<(i64, Vec<u8>)> = tree
                .nodes
                .iter()
                .enumerate()
                .map(|(i, (node, cells))| (*node, tree.node_blob(i, cells, node_bytes)))
                .collect();
            // The leaf of each feature, by feature id (1..=n): SQLite numbers them so, as
            // the features (and appends them as it goes).
            debug_assert!(tree.rowids.iter().zip(1..).all(|(r, id)| r.0 == id));
            let leaves: Vec<[i64; 1]> = tree.rowids.iter().map(|r| [r.1]).collect();
            (blobs, tree.parents, leaves)
        });
        let rows = insert_features(conn, spec, n, shape, values, srs_id, done);
        let index = packing.join().expect("packing the spatial index panicked");
        (index, rows)
    });
    inserted.map_err(&e)?;
    {
        let (blobs, parents, leaves) = index;
        let mut st = conn
            .prepare(&format!(
                "INSERT OR REPLACE INTO \"{rtree}_node\" (nodeno, data) VALUES (?1, ?2)"
            ))
            .map_err(&e)?;
        for (node, blob) in &blobs {
            st.execute(rusqlite::params![node, blob]).map_err(&e)?;
        }
        insert_rows(
            conn,
            &format!("\"{rtree}_parent\" (nodeno, parentnode)"),
            &parents,
        )
        .map_err(&e)?;
        insert_rows(conn, &format!("\"{rtree}_rowid\" (nodeno)"), &leaves).map_err(&e)?;
    }
    // The ids SQLite gave are the feature ids (they are not if a table was not empty).
    for table in [name.to_string(), format!("{rtree}_rowid")] {
        let last: Option<i64> = conn
            .query_row(&format!("SELECT max(rowid) FROM \"{table}\""), [], |r| {
                r.get(0)
            })
            .map_err(&e)?;
        if last.unwrap_or(0) != n as i64 {
            return Err(EmitError::Io {
                path: path.to_path_buf(),
                source: std::io::Error::other(format!(
                    "SQLite numbered the {n} rows of table {table} up to {last:?}, \
                     not 1 to {n}: the table was not empty"
                )),
            });
        }
    }
    if n > 0 {
        let b = boxes.iter().fold(
            [
                f64::INFINITY,
                f64::NEG_INFINITY,
                f64::INFINITY,
                f64::NEG_INFINITY,
            ],
            |a, (_, c)| {
                [
                    a[0].min(c[0]),
                    a[1].max(c[1]),
                    a[2].min(c[2]),
                    a[3].max(c[3]),
                ]
            },
        );
        conn.execute(
            "UPDATE gpkg_contents SET min_x = ?1, min_y = ?2, max_x = ?3, max_y = ?4 \
             WHERE table_name = ?5",
            rusqlite::params![b[0], b[2], b[1], b[3], name],
        )
        .map_err(&e)?;
    }
    conn.execute(
        "UPDATE gpkg_ogr_contents SET feature_count = ?1 WHERE lower(table_name) = lower(?2)",
        rusqlite::params![n as i64, name],
    )
    .map_err(&e)?;
    for (_, statement) in &triggers {
        conn.execute_batch(statement).map_err(&e)?;
    }
    done(n);
    Ok(())
}

/// Inserts rows `0..n` of layer `spec` (its triggers set aside by [`fill_layer`]) in that
/// order, through one prepared multi-row statement; `done` is told how many are in.
fn insert_features<'v, const K: usize>(
    conn: &rusqlite::Connection,
    spec: &LayerSpec,
    n: usize,
    shape: &(dyn Fn(usize) -> Shape + Sync),
    values: &(dyn Fn(usize) -> [Value<'v>; K] + Sync),
    srs_id: i32,
    done: &mut dyn FnMut(usize),
) -> rusqlite::Result<()> {
    use rayon::prelude::*;
    let name = spec.name;
    let columns: String = spec
        .fields
        .iter()
        .map(|(f, _)| format!(", \"{f}\""))
        .collect();
    // No feature id: SQLite gives row i the id i + 1 itself (the table is empty and the rows
    // go in in order), and so appends each at the end of the table's B-tree instead of
    // looking its place up (a descent and a binary search each).
    let width = K + 1;
    let statement = |rows: usize| {
        let mut text = format!("INSERT INTO \"{name}\" (\"{GEOMETRY_COLUMN}\"{columns}) VALUES ");
        push_marks(&mut text, rows, width);
        text
    };
    let mut full = Insert::prepare(conn, &statement(ROWS_PER_STATEMENT))?;
    for start in (0..n).step_by(BLOCK) {
        let end = (start + BLOCK).min(n);
        // Everything a row needs, looked up on the cores at once (the lookups wander over
        // the surveys: a cache miss or two a row), so that SQLite's thread only reads on.
        let pieces: Vec<Piece<'v, K>> = (start..end)
            .step_by(PIECE)
            .collect::<Vec<_>>()
            .into_par_iter()
            .map(|from| {
                let to = (from + PIECE).min(end);
                let mut piece = Piece {
                    bytes: Vec::with_capacity((to - from) * 81),
                    ends: Vec::with_capacity(to - from + 1),
                    values: Vec::with_capacity(to - from),
                };
                piece.ends.push(0);
                for i in from..to {
                    shape(i).push_blob(srs_id, &mut piece.bytes);
                    piece.ends.push(piece.bytes.len());
                    piece.values.push(values(i));
                }
                piece
            })
            .collect();
        let mut scratch: Vec<Value> = Vec::with_capacity(ROWS_PER_STATEMENT * width);
        let mut written = start;
        for piece in &pieces {
            let (bytes, ends) = (&piece.bytes, &piece.ends);
            let rows = ends.len() - 1;
            for group in (0..rows).step_by(ROWS_PER_STATEMENT) {
                let count = ROWS_PER_STATEMENT.min(rows - group);
                let mut partial;
                let st = if count == ROWS_PER_STATEMENT {
                    &mut full
                } else {
                    partial = Insert::prepare(conn, &statement(count))?;
                    &mut partial
                };
                scratch.clear();
                for k in group..group + count {
                    scratch.push(Value::Blob(&bytes[ends[k]..ends[k + 1]]));
                    scratch.extend_from_slice(&piece.values[k]);
                }
                st.execute(&scratch)?;
            }
            written += rows;
            done(written);
        }
    }
    Ok(())
}

/// Rows one multi-row `INSERT … VALUES (…), (…)` statement carries (its parameters stay well
/// under SQLite's limit of 32,766): one statement, and one pass through SQLite's statement
/// machinery, for many rows.
const ROWS_PER_STATEMENT: usize = 64;

/// Appends `rows` groups of `width` numbered parameters, `(?1, ?2), (?3, ?4), …`.
fn push_marks(text: &mut String, rows: usize, width: usize) {
    use std::fmt::Write;
    for r in 0..rows {
        text.push_str(if r == 0 { "(" } else { ", (" });
        for c in 0..width {
            let sep = if c == 0 { "" } else { ", " };
            let _ = write!(text, "{sep}?{}", r * width + c + 1);
        }
        text.push(')');
    }
}

/// Inserts rows of `N` integers into `table_columns` (e.g. `"t" (a, b)`, the columns
/// given, any others left to SQLite) with multi-row statements.
fn insert_rows<const N: usize>(
    conn: &rusqlite::Connection,
    table_columns: &str,
    rows: &[[i64; N]],
) -> rusqlite::Result<()> {
    let statement = |count: usize| {
        let mut text = format!("INSERT INTO {table_columns} VALUES ");
        push_marks(&mut text, count, N);
        text
    };
    let per = 8 * ROWS_PER_STATEMENT / N;
    let mut full = conn.prepare(&statement(per))?;
    for group in rows.chunks(per) {
        let mut partial;
        let st = if group.len() == per {
            &mut full
        } else {
            partial = conn.prepare(&statement(group.len()))?;
            &mut partial
        };
        for (j, row) in group.iter().enumerate() {
            for (k, v) in row.iter().enumerate() {
                st.raw_bind_parameter(N * j + k + 1, v)?;
            }
        }
        st.raw_execute()?;
    }
    Ok(())
}

/// The R*Tree of layer `name`: the virtual table's name.
fn rtree_name(name: &str) -> String {
    format!("rtree_{name}_{GEOMETRY_COLUMN}")
}

/// Bytes of one cell of a 2-D R*Tree node: the 64-bit id, then min x, max x, min y, max y as
/// 32-bit floats (SQLite's R*Tree module, `rtree.c`: the layout of its `_node` blobs).
const CELL_BYTES: usize = 8 + 4 * 4;

/// `v` as a 32-bit float no greater than `v` (a box's minimum, rounded outwards as SQLite's
/// R*Tree module stores it).
fn f32_down(v: f64) -> f32 {
    let f = v as f32;
    if f as f64 > v {
        f.next_down()
    } else {
        f
    }
}

/// `v` as a 32-bit float no less than `v` (a box's maximum).
fn f32_up(v: f64) -> f32 {
    let f = v as f32;
    if (f as f64) < v {
        f.next_up()
    } else {
        f
    }
}

/// An R-tree packed in one pass (sort-tile-recursive: the boxes sorted by the x of their
/// centres into vertical slices, each slice by y, and cut into full nodes; the nodes of each
/// level packed the same way into the level above), in the form of SQLite's R*Tree module:
/// node 1 is the root, whose blob begins with the tree's depth (levels above the leaves); every
/// node blob holds its number of cells and then its cells (id or child node number, and the
/// box as 32-bit floats rounded outwards), big-endian; `_parent` maps every other node to its
/// parent, `_rowid` every feature id to its leaf.
/// The cells of one R-tree node: (feature id or child node number, box).
type Cells = Vec<(i64, [f32; 4])>;

#[derive(Debug)]
struct PackedTree {
    /// Node number and cells (`(id or child, box)`), the root (node 1) last.
    nodes: Vec<(i64, Cells)>,
    /// Levels above the leaves.
    depth: u16,
    /// (node, parent) of every node but the root, by node.
    parents: Vec<[i64; 2]>,
    /// (feature id, leaf node) of every feature, by feature id.
    rowids: Vec<(i64, i64)>,
}

impl PackedTree {
    /// Packs `boxes` (feature id, `[min_x, max_x, min_y, max_y]`) into nodes of at most
    /// `capacity` cells; the same boxes give the same tree.
    fn pack(boxes: &[(i64, [f64; 4])], capacity: usize) -> PackedTree {
        let capacity = capacity.max(2);
        let mut level: Vec<(i64, [f32; 4])> = boxes
            .iter()
            .map(|(id, b)| {
                (
                    *id,
                    [f32_down(b[0]), f32_up(b[1]), f32_down(b[2]), f32_up(b[3])],
                )
            })
            .collect();
        let mut nodes = Vec::new();
        let mut parents = Vec::new();
        let mut rowids = Vec::new();
        let mut depth = 0u16;
        let mut next = 2i64;
        loop {
            let groups = str_groups(&mut level, capacity);
            let leaves = depth == 0;
            if groups.len() <= 1 {
                let cells = groups.into_iter().next().unwrap_or_default();
                for (child, _) in &cells {
                    if leaves {
                        rowids.push((*child, 1));
                    } else {
                        parents.push([*child, 1]);
                    }
                }
                nodes.push((1, cells));
                break;
            }
            let mut above = Vec::with_capacity(groups.len());
            for cells in groups {
                let node = next;
                next += 1;
                for (child, _) in &cells {
                    if leaves {
                        rowids.push((*child, node));
                    } else {
                        parents.push([*child, node]);
                    }
                }
                let b = cells.iter().fold(
                    [
                        f32::INFINITY,
                        f32::NEG_INFINITY,
                        f32::INFINITY,
                        f32::NEG_INFINITY,
                    ],
                    |a, (_, c)| {
                        [
                            a[0].min(c[0]),
                            a[1].max(c[1]),
                            a[2].min(c[2]),
                            a[3].max(c[3]),
                        ]
                    },
                );
                above.push((node, b));
                nodes.push((node, cells));
            }
            level = above;
            depth += 1;
        }
        // In key order, so that they go into their tables' B-trees at the end, page after
        // page (in leaf order they land all over the table, a page split and a cache miss
        // each: that was a quarter of the writer's time at 661,878 features).
        parents.sort_unstable();
        rowids.sort_unstable();
        PackedTree {
            nodes,
            depth,
            parents,
            rowids,
        }
    }

    /// The `_node` blob of node `i` (of `nodes`), `size` bytes.
    fn node_blob(&self, i: usize, cells: &[(i64, [f32; 4])], size: usize) -> Vec<u8> {
        let mut blob = Vec::with_capacity(size);
        let depth = if self.nodes[i].0 == 1 { self.depth } else { 0 };
        blob.extend_from_slice(&depth.to_be_bytes());
        blob.extend_from_slice(&(cells.len() as u16).to_be_bytes());
        for (id, b) in cells {
            blob.extend_from_slice(&id.to_be_bytes());
            for v in b {
                blob.extend_from_slice(&v.to_bits().to_be_bytes());
            }
        }
        blob.resize(size, 0);
        blob
    }
}

/// Cuts `items` into groups of at most `capacity` by sort-tile-recursive order (x of the box
/// centres into vertical slices of whole nodes, then y within each slice), nodes as evenly
/// filled as the count allows. Ties are broken by id, so the order is total.
fn str_groups(items: &mut [(i64, [f32; 4])], capacity: usize) -> Vec<Vec<(i64, [f32; 4])>> {
    use rayon::prelude::*;
    if items.is_empty() {
        return Vec::new();
    }
    let centre = |b: &[f32; 4], axis: usize| b[2 * axis] as f64 + b[2 * axis + 1] as f64;
    let by = |axis: usize| {
        move |a: &(i64, [f32; 4]), b: &(i64, [f32; 4])| {
            centre(&a.1, axis)
                .total_cmp(&centre(&b.1, axis))
                .then(a.0.cmp(&b.0))
        }
    };
    let n = items.len();
    let node_count = n.div_ceil(capacity);
    let slices = (node_count as f64).sqrt().ceil() as usize;
    // The sorts on the cores at once (the order is total: the same groups whatever the
    // thread count).
    items.par_sort_unstable_by(by(0));
    // Slices of whole nodes: slice k holds the nodes k * node_count / slices ..; items spread
    // evenly over the nodes: node j ends at item j * n / node_count.
    let mut bounds = Vec::with_capacity(slices);
    let mut start_node = 0;
    for k in 1..=slices {
        let end_node = k * node_count / slices;
        if end_node > start_node {
            bounds.push((start_node, end_node));
        }
        start_node = end_node;
    }
    let mut rest = &mut *items;
    let mut parts = Vec::with_capacity(bounds.len());
    for &(start_node, end_node) in &bounds {
        let len = end_node * n / node_count - start_node * n / node_count;
        let (slice, tail) = rest.split_at_mut(len);
        parts.push((start_node, end_node, slice));
        rest = tail;
    }
    parts
        .par_iter_mut()
        .for_each(|(_, _, slice)| slice.sort_unstable_by(by(1)));
    let mut groups = Vec::with_capacity(node_count);
    for (start_node, end_node, slice) in parts {
        let start_item = start_node * n / node_count;
        let mut from = 0;
        for j in start_node + 1..=end_node {
            let to = j * n / node_count - start_item;
            groups.push(slice[from..to].to_vec());
            from = to;
        }
    }
    groups
}

/// The number of features `control-points.gpkg` holds for `solution` (for a progress bar).
pub fn control_point_features(solution: &Solution) -> u64 {
    3 * solution.pairs.len() as u64
}

/// Writes `control-points.gpkg` (see the module doc of [`crate::emit`]); `done` is told how
/// many features of the file's [`control_point_features`] are written so far.
pub fn write_control_points(
    result: &MatchOutcome,
    s: &Solution,
    path: &Path,
    done: &mut dyn FnMut(usize),
) -> Result<(), EmitError> {
    let srs = srs_from_wkt(&result.frame.reference_crs.wkt, path)?;
    // The control points where the target has them, in the target's own CRS; a local grid
    // is tagged with its engineering CRS (with the declared unit), not left without one
    // (which a GeoPackage stores as "undefined geographic").
    let target_srs = srs_from_wkt(&result.frame.target_wkt(), path)?;
    let t = s.fit.transform;
    let mpu = result.frame.metres_per_unit();
    // Where the target puts each control point, in the reference CRS.
    let starts_working: Vec<[f64; 2]> = s
        .pairs
        .iter()
        .map(|p| {
            let w = result.frame.target[p.target as usize];
            if result.frame.target_crs.is_some() {
                w
            } else {
                t.apply(w)
            }
        })
        .collect();
    let starts = result
        .frame
        .to_reference_crs(&starts_working)
        .map_err(EmitError::Frame)?;
    let pair_fields = |measure| {
        [
            ("reference_id", OGRFieldType::OFTString),
            ("target_id", OGRFieldType::OFTString),
            (measure, OGRFieldType::OFTReal),
        ]
    };
    let (residual, length) = (pair_fields("residual_m"), pair_fields("length_m"));
    let layers = [
        LayerSpec {
            name: "control_points",
            ty: OGRwkbGeometryType::wkbPoint,
            srs: &srs,
            fields: &residual,
        },
        LayerSpec {
            name: "displacements",
            ty: OGRwkbGeometryType::wkbLineString,
            srs: &srs,
            fields: &length,
        },
        LayerSpec {
            name: "target_points",
            ty: OGRwkbGeometryType::wkbPoint,
            srs: &target_srs,
            fields: &residual,
        },
    ];
    create_layers(path, &layers)?;
    let n = s.pairs.len();
    let pairs = &s.pairs;
    let reference_ids = Gathered::new(n, |i| &result.reference.ids[pairs[i].reference as usize]);
    let target_ids = Gathered::new(n, |i| &result.target.ids[pairs[i].target as usize]);
    let ids = |i: usize| {
        (
            Value::Text(reference_ids.get(i)),
            Value::Text(target_ids.get(i)),
        )
    };
    let residual_m = |i: usize| {
        let (r, t) = ids(i);
        [r, t, Value::Real(pairs[i].residual * mpu)]
    };
    let reference_point = |i: usize| result.reference.points[pairs[i].reference as usize];
    let conn = open_for_filling(path)?;
    fill_layer(
        &conn,
        &layers[0],
        n,
        &|i| Shape::Point(reference_point(i)),
        &residual_m,
        path,
        &mut |k| done(k),
    )?;
    fill_layer(
        &conn,
        &layers[1],
        n,
        &|i| Shape::Line(starts[i], reference_point(i)),
        &|i| {
            let end_w = result.frame.reference[pairs[i].reference as usize];
            let len = crate::spatial::dist2(starts_working[i], end_w).sqrt() * mpu;
            let (r, t) = ids(i);
            [r, t, Value::Real(len)]
        },
        path,
        &mut |k| done(n + k),
    )?;
    fill_layer(
        &conn,
        &layers[2],
        n,
        &|i| Shape::Point(result.target.points[pairs[i].target as usize]),
        &residual_m,
        path,
        &mut |k| done(2 * n + k),
    )?;
    finish_filling(conn, path)
}

/// Strings laid end to end in pieces of [`PIECE`], gathered on the cores at once: the ids
/// of the control points in pairs order, which every layer binds, read one after another
/// instead of a pointer chase into the surveys' ids a row (two cache misses each).
struct Gathered {
    /// The text of each piece, and where each of its strings ends in it.
    pieces: Vec<(String, Vec<usize>)>,
}

impl Gathered {
    /// Strings `get(0..n)`.
    fn new<'a>(n: usize, get: impl Fn(usize) -> &'a str + Sync) -> Gathered {
        use rayon::prelude::*;
        let pieces = (0..n)
            .step_by(PIECE)
            .collect::<Vec<_>>()
            .into_par_iter()
            .map(|from| {
                let to = (from + PIECE).min(n);
                let mut text = String::with_capacity(16 * (to - from));
                let mut ends = Vec::with_capacity(to - from + 1);
                ends.push(0);
                for i in from..to {
                    text.push_str(get(i));
                    ends.push(text.len());
                }
                (text, ends)
            })
            .collect();
        Gathered { pieces }
    }

    /// String `i`.
    fn get(&self, i: usize) -> &str {
        let (text, ends) = &self.pieces[i / PIECE];
        let k = i % PIECE;
        &text[ends[k]..ends[k + 1]]
    }
}

/// Writes a landmark set as points (field `id`) in its own CRS.
pub fn write_landmarks(set: &LandmarkSet, path: &Path, ext: &str) -> Result<(), EmitError> {
    let e = gdal_err(path);
    let driver_name = match ext {
        "gpkg" => "GPKG",
        "fgb" => "FlatGeobuf",
        _ => "GeoJSON",
    };
    // Landmarks with no CRS (a CSV of local coordinates) are tagged as an engineering CRS
    // of unknown unit; with none at all a GeoPackage would call them "undefined geographic".
    let srs = match &set.crs_wkt {
        Some(w) => srs_from_wkt(w, path)?,
        None => srs_from_wkt(&crate::frame::grid::engineering_wkt(None), path)?,
    };
    let fields = [("id", OGRFieldType::OFTString)];
    if driver_name == "GPKG" {
        let layer = LayerSpec {
            name: "landmarks",
            ty: OGRwkbGeometryType::wkbPoint,
            srs: &srs,
            fields: &fields,
        };
        create_layers(path, std::slice::from_ref(&layer))?;
        let conn = open_for_filling(path)?;
        fill_layer(
            &conn,
            &layer,
            set.points.len(),
            &|i| Shape::Point(set.points[i]),
            &|i| [Value::Text(&set.ids[i])],
            path,
            &mut |_| {},
        )?;
        finish_filling(conn, path)?;
    } else {
        let driver = DriverManager::get_driver_by_name(driver_name).map_err(&e)?;
        let mut ds = driver.create_vector_only(path).map_err(&e)?;
        {
            let layer = ds
                .create_layer(LayerOptions {
                    name: "landmarks",
                    srs: Some(&srs),
                    ty: OGRwkbGeometryType::wkbPoint,
                    options: None,
                })
                .map_err(&e)?;
            add_fields(&layer, &fields, path)?;
            for (id, p) in set.ids.iter().zip(&set.points) {
                landmark_feature(&layer, id, *p, path)?;
            }
        }
        close_checked(ds, path)?;
    }
    Ok(())
}

/// Writes one landmark (field `id`, a point) into `layer` through GDAL.
fn landmark_feature<L: LayerAccess>(
    layer: &L,
    id: &str,
    p: [f64; 2],
    path: &Path,
) -> Result<(), EmitError> {
    let e = gdal_err(path);
    let mut f = Feature::new(layer.defn()).map_err(&e)?;
    f.set_field_string(0, id).map_err(&e)?;
    f.set_geometry(point(p).map_err(&e)?).map_err(&e)?;
    f.create(layer).map_err(&e)
}

#[cfg(test)]
mod tests {
    use super::*;
    use gdal::vector::sql::Dialect;
    use rand::{Rng, SeedableRng};

    /// Boxes of `n` seeded random points and short lines.
    fn boxes(n: usize, seed: u64) -> Vec<(i64, [f64; 4])> {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        (1..=n as i64)
            .map(|id| {
                let x = 455_000.0 + rng.gen_range(0.0..5000.0);
                let y = 5_209_000.0 + rng.gen_range(0.0..5000.0);
                let (dx, dy) = if id % 3 == 0 {
                    (rng.gen_range(-9.0..9.0), rng.gen_range(-9.0..9.0))
                } else {
                    (0.0, 0.0)
                };
                (id, bbox(&[[x, y], [x + dx, y + dy]]))
            })
            .collect()
    }

    #[test]
    fn a_packed_tree_holds_every_box_once_within_its_parents_in_full_nodes() {
        for n in [0usize, 1, 51, 52, 2601, 2602, 6000] {
            let input = boxes(n, 7);
            let capacity = 51;
            let tree = PackedTree::pack(&input, capacity);
            let nodes: std::collections::HashMap<i64, &Vec<(i64, [f32; 4])>> =
                tree.nodes.iter().map(|(k, c)| (*k, c)).collect();
            assert_eq!(nodes.len(), tree.nodes.len(), "node numbers are unique");
            assert!(nodes.contains_key(&1), "node 1 is the root");
            assert_eq!(tree.parents.len(), tree.nodes.len() - 1);
            // Every feature in exactly one leaf, whose cell contains its box.
            assert_eq!(tree.rowids.len(), n);
            let mut seen = std::collections::HashSet::new();
            for ((id, b), (rid, leaf)) in {
                let mut sorted = tree.rowids.clone();
                sorted.sort();
                input.iter().zip(sorted)
            } {
                assert_eq!(*id, rid);
                assert!(seen.insert(rid));
                let cell = nodes[&leaf].iter().find(|c| c.0 == rid).unwrap().1;
                assert!((cell[0] as f64) <= b[0] && (cell[1] as f64) >= b[1], "{n}");
                assert!((cell[2] as f64) <= b[2] && (cell[3] as f64) >= b[3], "{n}");
            }
            // Every child's cells within its parent's cell for it; nodes at most full and,
            // but for the root, at least half full.
            for [node, parent] in &tree.parents {
                let within = nodes[parent].iter().find(|c| c.0 == *node).unwrap().1;
                for (_, c) in nodes[node].iter() {
                    assert!(c[0] >= within[0] && c[1] <= within[1]);
                    assert!(c[2] >= within[2] && c[3] <= within[3]);
                }
            }
            for (node, cells) in &tree.nodes {
                assert!(cells.len() <= capacity);
                if *node != 1 {
                    assert!(
                        2 * cells.len() >= capacity,
                        "{n}: node {node} holds {}",
                        cells.len()
                    );
                }
            }
            let expected_depth = match n {
                0..=51 => 0,
                52..=2601 => 1,
                _ => 2,
            };
            assert_eq!(tree.depth, expected_depth, "{n}");
            // The root's blob begins with the depth, every blob with its count of cells.
            let (i, root) = tree
                .nodes
                .iter()
                .enumerate()
                .find(|(_, n)| n.0 == 1)
                .unwrap();
            let blob = tree.node_blob(i, &root.1, 1228);
            assert_eq!(blob.len(), 1228);
            assert_eq!(u16::from_be_bytes([blob[0], blob[1]]), tree.depth);
            assert_eq!(
                u16::from_be_bytes([blob[2], blob[3]]) as usize,
                root.1.len()
            );
        }
    }

    #[test]
    fn outward_rounding_contains_the_value() {
        for v in [455_180.123_456_789, -3.3, 0.1, 1e-40, 5_209_670.0] {
            assert!((f32_down(v) as f64) <= v && (f32_up(v) as f64) >= v, "{v}");
            assert!(f32_up(v) as f64 - f32_down(v) as f64 <= 2.0 * (v.abs() * 1.2e-7 + 1e-45));
        }
    }

    fn one_value(ds: &Dataset, statement: &str) -> String {
        let rows = query(ds, statement, Path::new("test.gpkg")).unwrap();
        rows[0][0].clone()
    }

    #[test]
    fn a_geopackage_keeps_a_spatial_index_that_sqlite_checks_and_gdal_uses_and_is_the_same_bytes_each_run(
    ) {
        let dir = tempfile::tempdir().unwrap();
        let input = boxes(6000, 11);
        let set = LandmarkSet {
            source: "seeded".into(),
            layer: "landmarks".to_string(),
            ids: input.iter().map(|(id, _)| format!("L-{id}")).collect(),
            points: input.iter().map(|(_, b)| [b[0], b[2]]).collect(),
            crs_wkt: Some(SpatialRef::from_epsg(32633).unwrap().to_wkt().unwrap()),
            skipped: Default::default(),
            raster: None,
        };
        let a = dir.path().join("a.gpkg");
        let b = dir.path().join("b.gpkg");
        write_landmarks(&set, &a, "gpkg").unwrap();
        write_landmarks(&set, &b, "gpkg").unwrap();
        assert_eq!(std::fs::read(&a).unwrap(), std::fs::read(&b).unwrap());

        let ds = Dataset::open(&a).unwrap();
        // The R*Tree table, listed as GeoPackage's extension, reported by GDAL, and whole.
        assert_eq!(
            one_value(
                &ds,
                "SELECT count(*) FROM sqlite_master WHERE name = 'rtree_landmarks_geom'"
            ),
            "1"
        );
        assert_eq!(
            one_value(
                &ds,
                "SELECT extension_name FROM gpkg_extensions WHERE table_name = 'landmarks' \
                 AND column_name = 'geom'"
            ),
            "gpkg_rtree_index"
        );
        assert_eq!(
            one_value(&ds, "SELECT HasSpatialIndex('landmarks', 'geom')"),
            "1"
        );
        assert_eq!(
            one_value(&ds, "SELECT rtreecheck('rtree_landmarks_geom')"),
            "ok"
        );
        assert_eq!(
            one_value(&ds, "SELECT count(*) FROM rtree_landmarks_geom"),
            "6000"
        );
        // The index's triggers are back: six, as GDAL made them.
        let triggers: usize = one_value(
            &ds,
            "SELECT count(*) FROM sqlite_master WHERE type = 'trigger' \
             AND name LIKE 'rtree_landmarks_geom%'",
        )
        .parse()
        .unwrap();
        assert!(triggers >= 5, "{triggers} triggers");

        // A spatial filter through the index finds exactly the points inside the box.
        let (x0, x1, y0, y1) = (456_000.0, 457_250.0, 5_210_500.0, 5_211_000.0);
        let mut expected: Vec<String> = set
            .ids
            .iter()
            .zip(&set.points)
            .filter(|(_, p)| p[0] >= x0 && p[0] <= x1 && p[1] >= y0 && p[1] <= y1)
            .map(|(id, _)| id.clone())
            .collect();
        expected.sort();
        assert!(expected.len() > 50, "{}", expected.len());
        let mut layer = ds.layer_by_name("landmarks").unwrap();
        layer.set_spatial_filter_rect(x0, y0, x1, y1);
        let mut found: Vec<String> = layer
            .features()
            .map(|f| f.field_as_string(0).unwrap().unwrap())
            .collect();
        found.sort();
        assert_eq!(found, expected);
        // The same through the R*Tree table itself.
        let hits = ds
            .execute_sql(
                format!(
                    "SELECT count(*) FROM rtree_landmarks_geom WHERE minx <= {x1} AND \
                     maxx >= {x0} AND miny <= {y1} AND maxy >= {y0}"
                ),
                None,
                Dialect::DEFAULT,
            )
            .unwrap()
            .unwrap()
            .features()
            .next()
            .unwrap()
            .field_as_integer(0)
            .unwrap()
            .unwrap();
        // The f32 boxes are a hair larger than the points: never fewer hits.
        assert!(hits as usize >= expected.len() && hits as usize <= expected.len() + 2);
        drop(ds);

        // Editing after the fact goes through the triggers into the packed tree.
        let mut ds = Dataset::open_ex(
            &a,
            gdal::DatasetOptions {
                open_flags: gdal::GdalOpenFlags::GDAL_OF_UPDATE
                    | gdal::GdalOpenFlags::GDAL_OF_VECTOR,
                ..Default::default()
            },
        )
        .unwrap();
        {
            let layer = ds.layer_by_name("landmarks").unwrap();
            landmark_feature(&layer, "added", [456_100.0, 5_210_600.0], Path::new("a")).unwrap();
        }
        assert_eq!(
            one_value(&ds, "SELECT count(*) FROM rtree_landmarks_geom"),
            "6001"
        );
        assert_eq!(
            one_value(&ds, "SELECT rtreecheck('rtree_landmarks_geom')"),
            "ok"
        );
        let _ = ds.flush_cache();
    }

    /// Every feature of layer `name` in feature-id order: id, fields as text, geometry as WKB.
    fn features_of(ds: &Dataset, name: &str) -> Vec<(u64, Vec<String>, Vec<u8>)> {
        let mut layer = ds.layer_by_name(name).unwrap();
        let k = layer.defn().fields().count();
        let mut all: Vec<(u64, Vec<String>, Vec<u8>)> = layer
            .features()
            .map(|f| {
                let fields = (0..k)
                    .map(|i| f.field_as_string(i).unwrap().unwrap_or_default())
                    .collect();
                (
                    f.fid().unwrap(),
                    fields,
                    f.geometry().unwrap().wkb().unwrap(),
                )
            })
            .collect();
        all.sort_by_key(|f| f.0);
        all
    }

    /// What `ogrinfo` would say of a layer (feature count and extent from the file's own
    /// metadata, not computed), and that its spatial index is there, whole, and used: a
    /// spatial filter through it finds exactly the features whose boxes meet the filter's.
    fn check_indexed_layer(ds: &Dataset, name: &str, shapes: &[Shape]) {
        let boxes: Vec<[f64; 4]> = shapes.iter().map(Shape::bbox).collect();
        let mut layer = ds.layer_by_name(name).unwrap();
        assert_eq!(
            layer.try_feature_count(),
            Some(boxes.len() as u64),
            "{name}"
        );
        let expected = boxes.iter().fold(
            [
                f64::INFINITY,
                f64::NEG_INFINITY,
                f64::INFINITY,
                f64::NEG_INFINITY,
            ],
            |a, b| {
                [
                    a[0].min(b[0]),
                    a[1].max(b[1]),
                    a[2].min(b[2]),
                    a[3].max(b[3]),
                ]
            },
        );
        let extent = layer
            .try_get_extent()
            .unwrap()
            .expect("extent in gpkg_contents");
        // GDAL reads the extent back to 15 significant digits (of its own files too).
        let got = [extent.MinX, extent.MaxX, extent.MinY, extent.MaxY];
        for (g, x) in got.iter().zip(expected) {
            assert!(
                (g - x).abs() <= 1e-14 * x.abs(),
                "{name}: {got:?} {expected:?}"
            );
        }
        let rtree = rtree_name(name);
        let value = |q: &str| one_value(ds, q);
        assert_eq!(
            value(&format!("SELECT HasSpatialIndex('{name}', 'geom')")),
            "1"
        );
        assert_eq!(value(&format!("SELECT rtreecheck('{rtree}')")), "ok");
        assert_eq!(
            value(&format!("SELECT count(*) FROM \"{rtree}\"")),
            boxes.len().to_string()
        );
        assert_eq!(
            value(&format!(
                "SELECT extension_name FROM gpkg_extensions WHERE table_name = '{name}' \
                 AND column_name = 'geom'"
            )),
            "gpkg_rtree_index"
        );
        // The index's triggers and GDAL's feature-count triggers are back.
        let triggers: usize = value(&format!(
            "SELECT count(*) FROM sqlite_master WHERE type = 'trigger' AND tbl_name = '{name}'"
        ))
        .parse()
        .unwrap();
        assert!(triggers >= 7, "{name}: {triggers} triggers");
        // A quarter of the extent, around its centre.
        let (cx, cy) = (
            (expected[0] + expected[1]) / 2.0,
            (expected[2] + expected[3]) / 2.0,
        );
        let (hx, hy) = (
            (expected[1] - expected[0]) / 4.0,
            (expected[3] - expected[2]) / 4.0,
        );
        let q = [cx - hx, cx + hx, cy - hy, cy + hy];
        // The index: every box that meets the filter's, no other (a hair more through the
        // 32-bit boxes, never fewer).
        let meets = boxes
            .iter()
            .filter(|b| b[0] <= q[1] && b[1] >= q[0] && b[2] <= q[3] && b[3] >= q[2])
            .count();
        let hits: usize = value(&format!(
            "SELECT count(*) FROM \"{rtree}\" WHERE minx <= {} AND maxx >= {} \
             AND miny <= {} AND maxy >= {}",
            q[1], q[0], q[3], q[2]
        ))
        .parse()
        .unwrap();
        assert!(hits >= meets && hits <= meets + 2, "{name}: {hits} {meets}");
        // GDAL's filter: the features whose geometry meets the rectangle (geo's test).
        use geo::Intersects;
        let rect = geo::Rect::new((q[0], q[2]), (q[1], q[3]));
        let inside = shapes
            .iter()
            .filter(|s| match s {
                Shape::Point(p) => rect.intersects(&geo::Point::new(p[0], p[1])),
                Shape::Line(a, b) => rect.intersects(&geo::Line::new((a[0], a[1]), (b[0], b[1]))),
            })
            .count();
        layer.set_spatial_filter_rect(q[0], q[2], q[1], q[3]);
        assert_eq!(layer.features().count(), inside, "{name}");
        assert!(inside > 0, "{name}");
    }

    /// The match of the sample town (2019 footprints, 2026 re-survey in lon/lat).
    fn town() -> MatchOutcome {
        let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-data");
        let mut config = crate::config::MatchConfig::new(
            root.join("town-footprints-2019.gpkg"),
            root.join("town-survey-2026.geojson"),
        );
        config.reference.layer = Some("buildings".to_string());
        config.reference.id = Some("bldg_id".to_string());
        config.target.id = Some("uid".to_string());
        crate::engine::match_surveys(&config, &crate::progress::Silent).unwrap()
    }

    #[test]
    fn control_points_read_back_through_gdal_as_the_match_with_spatial_indexes_and_crss() {
        let outcome = town();
        let s = outcome.solution().unwrap();
        let n = s.pairs.len();
        assert!(n > 100, "{n}");
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("control-points.gpkg");
        let mut told = Vec::new();
        write_control_points(&outcome, s, &path, &mut |k| told.push(k)).unwrap();
        assert!(told.windows(2).all(|w| w[0] <= w[1]), "{told:?}");
        assert_eq!(told.last(), Some(&(3 * n)));
        let again = dir.path().join("again.gpkg");
        write_control_points(&outcome, s, &again, &mut |_| {}).unwrap();
        assert_eq!(
            std::fs::read(&path).unwrap(),
            std::fs::read(&again).unwrap()
        );

        let ds = Dataset::open(&path).unwrap();
        let mpu = outcome.frame.metres_per_unit();
        let ids = |p: &crate::fit::Pair| {
            (
                outcome.reference.ids[p.reference as usize].clone(),
                outcome.target.ids[p.target as usize].clone(),
            )
        };
        // control_points: at the reference position, in pairs order.
        let got = features_of(&ds, "control_points");
        assert_eq!(got.len(), n);
        let mut boxes = Vec::new();
        for (i, (p, (fid, fields, wkb))) in s.pairs.iter().zip(&got).enumerate() {
            assert_eq!(*fid, i as u64 + 1);
            let (r, t) = ids(p);
            assert_eq!((&fields[0], &fields[1]), (&r, &t));
            let residual: f64 = fields[2].parse().unwrap();
            // GDAL's text of a real field, compared as a number.
            assert!((residual - p.residual * mpu).abs() < 1e-9 * (1.0 + residual));
            let at = outcome.reference.points[p.reference as usize];
            let g = Geometry::from_wkb(wkb).unwrap();
            assert_eq!(g.get_point(0), (at[0], at[1], 0.0));
            boxes.push(Shape::Point(at));
        }
        check_indexed_layer(&ds, "control_points", &boxes);

        // displacements: from where the target puts the landmark (here the lon/lat target
        // converted to the working CRS, which is the reference's) to the reference position.
        assert!(outcome.frame.target_crs.is_some());
        let got = features_of(&ds, "displacements");
        assert_eq!(got.len(), n);
        let mut boxes = Vec::new();
        for (p, (_, fields, wkb)) in s.pairs.iter().zip(&got) {
            let (r, t) = ids(p);
            assert_eq!((&fields[0], &fields[1]), (&r, &t));
            let g = Geometry::from_wkb(wkb).unwrap();
            assert_eq!(g.geometry_type(), OGRwkbGeometryType::wkbLineString);
            let (a, b) = (g.get_point(0), g.get_point(1));
            let start = outcome
                .frame
                .to_reference_crs(&[outcome.frame.target[p.target as usize]])
                .unwrap()[0];
            assert!((a.0 - start[0]).abs() < 1e-6 && (a.1 - start[1]).abs() < 1e-6);
            let end = outcome.reference.points[p.reference as usize];
            assert_eq!((b.0, b.1), (end[0], end[1]));
            let length: f64 = fields[2].parse().unwrap();
            assert!((length - (a.0 - b.0).hypot(a.1 - b.1) * mpu).abs() < 1e-6);
            boxes.push(Shape::Line([a.0, a.1], [b.0, b.1]));
        }
        check_indexed_layer(&ds, "displacements", &boxes);

        // target_points: where the target has them, in its own CRS (lon/lat).
        let got = features_of(&ds, "target_points");
        let mut boxes = Vec::new();
        for (p, (_, fields, wkb)) in s.pairs.iter().zip(&got) {
            assert_eq!(fields[1], ids(p).1);
            let at = outcome.target.points[p.target as usize];
            let g = Geometry::from_wkb(wkb).unwrap();
            assert_eq!(g.get_point(0), (at[0], at[1], 0.0));
            boxes.push(Shape::Point(at));
        }
        assert_eq!(got.len(), n);
        check_indexed_layer(&ds, "target_points", &boxes);

        // Each layer's CRS as the writer was given it.
        let code = |name: &str| {
            let srs = ds.layer_by_name(name).unwrap().spatial_ref().unwrap();
            srs.auth_code().unwrap()
        };
        assert_eq!(code("control_points"), 32633);
        assert_eq!(code("displacements"), 32633);
        assert_eq!(code("target_points"), 4326);
    }

    #[test]
    fn landmarks_read_back_exactly_as_gdals_own_feature_by_feature_writer_has_them() {
        let input = boxes(3000, 5);
        let set = LandmarkSet {
            source: "seeded".into(),
            layer: "landmarks".to_string(),
            ids: input.iter().map(|(id, _)| format!("L,{id}")).collect(),
            points: input.iter().map(|(_, b)| [b[0], b[2]]).collect(),
            crs_wkt: Some(SpatialRef::from_epsg(25833).unwrap().to_wkt().unwrap()),
            skipped: Default::default(),
            raster: None,
        };
        let dir = tempfile::tempdir().unwrap();
        let ours = dir.path().join("ours.gpkg");
        write_landmarks(&set, &ours, "gpkg").unwrap();
        // GDAL's way: one feature at a time, its R-tree maintained as they go in.
        let theirs = dir.path().join("theirs.gpkg");
        {
            let srs = srs_from_wkt(set.crs_wkt.as_deref().unwrap(), &theirs).unwrap();
            let (mut ds, _fixed) = create_gpkg(&theirs).unwrap();
            let mut txn = ds.start_transaction().unwrap();
            let rows = set.ids.iter().zip(&set.points);
            write_layer(
                &mut txn,
                "landmarks",
                OGRwkbGeometryType::wkbPoint,
                &srs,
                &[("id", OGRFieldType::OFTString)],
                rows.map(|(id, p)| (vec![FieldValue::Text(id)], *p)),
                point,
                &theirs,
            )
            .unwrap();
            txn.commit().unwrap();
            close_checked(ds, &theirs).unwrap();
        }
        let (a, b) = (
            Dataset::open(&ours).unwrap(),
            Dataset::open(&theirs).unwrap(),
        );
        let got = features_of(&a, "landmarks");
        assert_eq!(got, features_of(&b, "landmarks"));
        assert_eq!(got.len(), set.points.len());
        assert_eq!(got[7].1[0], set.ids[7]);
        // The same metadata rows: contents (extent, CRS), geometry column, feature count.
        for q in [
            "SELECT table_name, data_type, identifier, min_x, min_y, max_x, max_y, srs_id \
             FROM gpkg_contents",
            "SELECT * FROM gpkg_geometry_columns",
            "SELECT * FROM gpkg_ogr_contents",
            "SELECT srs_id, organization, organization_coordsys_id FROM gpkg_spatial_ref_sys",
            "SELECT * FROM gpkg_extensions",
            "SELECT name FROM sqlite_master ORDER BY name",
        ] {
            let rows = |ds: &Dataset| query(ds, q, Path::new("t")).unwrap();
            assert_eq!(rows(&a), rows(&b), "{q}");
        }
        let boxes: Vec<Shape> = set.points.iter().map(|p| Shape::Point(*p)).collect();
        check_indexed_layer(&a, "landmarks", &boxes);
        check_indexed_layer(&b, "landmarks", &boxes);
    }
}
