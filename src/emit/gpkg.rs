//! `control-points.gpkg` and landmark files through GDAL's vector drivers.
//!
//! **In:** an accepted match (or a landmark set), a path in the staging folder, and a callback
//! told how many features are written so far. **Out:** the GeoPackage (or GeoJSON, FlatGeobuf)
//! file, every layer with its spatial index.
//!
//! Each GeoPackage layer is written inside one transaction (orders of magnitude faster than one
//! per feature); drivers without transactions (GeoJSON, FlatGeobuf) write directly. The dataset
//! is closed explicitly so that an error while finishing (flush) is reported.
//!
//! # The spatial index, packed at the end
//!
//! GDAL maintains a GeoPackage layer's R-tree (the SQLite R*Tree module's virtual table
//! `rtree_<layer>_geom`, GeoPackage's "RTree Spatial Indexes" extension) one feature at a time:
//! for 662,715 points that is most of the cost of writing (GEOSTACK.md: 7.9 s with it, 1.6 s
//! without). Here every layer is created without it (layer creation option
//! `SPATIAL_INDEX=NO`), its empty index is then made by GDAL's own SQL function
//! `CreateSpatialIndex(table, column)` (the virtual table, the triggers that keep it up to date
//! and the `gpkg_extensions` row, exactly as GDAL makes them), the index's triggers are set
//! aside while the features go in, the tree is packed in one pass from the features' bounding
//! boxes (`PackedTree`: sort-tile-recursive, full nodes) and stored straight into the R*Tree
//! module's shadow tables (`_node`, `_parent`, `_rowid`, whose layout is SQLite's, see
//! `PackedTree`), and the triggers are put back as GDAL made them. The result is the index
//! the trigger-by-trigger way would have built, in another shape (SQLite's `rtreecheck()`
//! passes on it, GDAL reports `HasSpatialIndex` and uses it for spatial filters), and later
//! edits maintain it as usual.

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

pub(super) fn point(p: [f64; 2]) -> gdal::errors::Result<Geometry> {
    let mut g = Geometry::empty(OGRwkbGeometryType::wkbPoint)?;
    g.add_point_2d((p[0], p[1]));
    Ok(g)
}

fn line(a: [f64; 2], b: [f64; 2]) -> gdal::errors::Result<Geometry> {
    let mut g = Geometry::empty(OGRwkbGeometryType::wkbLineString)?;
    g.add_point_2d((a[0], a[1]));
    g.add_point_2d((b[0], b[1]));
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

/// Runs one SQL statement that returns no rows (GDAL's GeoPackage driver hands it to SQLite).
fn sql(ds: &Dataset, statement: &str, path: &Path) -> Result<(), EmitError> {
    crate::ingest::clear_gdal_error();
    let rows = ds
        .execute_sql(statement, None, gdal::vector::sql::Dialect::DEFAULT)
        .map_err(gdal_err(path))?;
    drop(rows);
    match crate::ingest::take_gdal_failure() {
        Some(e) => Err(gdal_err(path)(e)),
        None => Ok(()),
    }
}

/// The rows of one SQL query, each as its fields' text (NULL as "").
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

/// A GeoPackage layer being written whose spatial index is packed at the end (module doc).
struct IndexedLayer {
    name: String,
    /// The index's triggers as GDAL created them (`CREATE TRIGGER …`), set aside meanwhile.
    triggers: Vec<String>,
    /// The R*Tree's node size in bytes (SQLite's choice for this file's page size).
    node_bytes: usize,
    /// Feature id and bounding box of every feature written.
    boxes: Vec<(i64, [f64; 4])>,
}

/// The R*Tree of layer `name`: the virtual table's name.
fn rtree_name(name: &str) -> String {
    format!("rtree_{name}_{GEOMETRY_COLUMN}")
}

impl IndexedLayer {
    /// Creates layer `name` without its index, then its empty index, and sets the index's
    /// triggers aside.
    fn create(
        ds: &mut Dataset,
        name: &str,
        ty: OGRwkbGeometryType::Type,
        srs: Option<&SpatialRef>,
        fields: &[(&str, OGRFieldType::Type)],
        path: &Path,
    ) -> Result<IndexedLayer, EmitError> {
        let e = gdal_err(path);
        let layer = ds
            .create_layer(LayerOptions {
                name,
                srs,
                ty,
                options: Some(&["SPATIAL_INDEX=NO"]),
            })
            .map_err(&e)?;
        add_fields(&layer, fields, path)?;
        let made = query(
            ds,
            &format!("SELECT CreateSpatialIndex('{name}', '{GEOMETRY_COLUMN}')"),
            path,
        )?;
        if made.first().and_then(|r| r.first()).map(String::as_str) != Some("1") {
            return Err(gdal_err(path)(gdal::errors::GdalError::BadArgument(
                format!("GDAL did not create the spatial index of layer {name}"),
            )));
        }
        let rtree = rtree_name(name);
        let triggers = query(
            ds,
            &format!(
                "SELECT name, sql FROM sqlite_master WHERE type = 'trigger' \
                 AND tbl_name = '{name}' AND name LIKE '{rtree}%' ORDER BY name"
            ),
            path,
        )?;
        for t in &triggers {
            sql(ds, &format!("DROP TRIGGER \"{}\"", t[0]), path)?;
        }
        let node_bytes = query(
            ds,
            &format!("SELECT length(data) FROM \"{rtree}_node\" WHERE nodeno = 1"),
            path,
        )?
        .first()
        .and_then(|r| r.first())
        .and_then(|v| v.parse::<usize>().ok())
        .filter(|&n| n >= 4 + 2 * CELL_BYTES)
        .ok_or_else(|| {
            gdal_err(path)(gdal::errors::GdalError::BadArgument(format!(
                "the spatial index of layer {name} has no root node"
            )))
        })?;
        Ok(IndexedLayer {
            name: name.to_string(),
            triggers: triggers.into_iter().map(|mut t| t.swap_remove(1)).collect(),
            node_bytes,
            boxes: Vec::new(),
        })
    }

    /// Stores the packed index of every feature written and puts the triggers back.
    fn finish(self, ds: &Dataset, path: &Path) -> Result<(), EmitError> {
        let rtree = rtree_name(&self.name);
        let tree = PackedTree::pack(&self.boxes, (self.node_bytes - 4) / CELL_BYTES);
        let mut batch = Batch::new(ds, path);
        for (i, (node, cells)) in tree.nodes.iter().enumerate() {
            let blob = tree.node_blob(i, cells, self.node_bytes);
            let mut hex = String::new();
            push_hex(&mut hex, &blob);
            batch.row(
                &format!("INSERT OR REPLACE INTO \"{rtree}_node\" (nodeno, data) VALUES "),
                &format!("({node}, X'{hex}')"),
            )?;
        }
        batch.flush()?;
        for (node, parent) in &tree.parents {
            batch.row(
                &format!("INSERT INTO \"{rtree}_parent\" (nodeno, parentnode) VALUES "),
                &format!("({node}, {parent})"),
            )?;
        }
        batch.flush()?;
        for (id, node) in &tree.rowids {
            batch.row(
                &format!("INSERT INTO \"{rtree}_rowid\" (rowid, nodeno) VALUES "),
                &format!("({id}, {node})"),
            )?;
        }
        batch.flush()?;
        for t in &self.triggers {
            sql(ds, t, path)?;
        }
        Ok(())
    }
}

/// Appends `bytes` to `out` as hex digits (an SQL blob literal's body).
fn push_hex(out: &mut String, bytes: &[u8]) {
    const DIGITS: &[u8; 16] = b"0123456789ABCDEF";
    out.reserve(2 * bytes.len());
    for b in bytes {
        out.push(DIGITS[(b >> 4) as usize] as char);
        out.push(DIGITS[(b & 15) as usize] as char);
    }
}

/// Multi-row `INSERT … VALUES (…), (…)` statements of at most about a megabyte each.
struct Batch<'a> {
    ds: &'a Dataset,
    path: &'a Path,
    statement: String,
    rows: usize,
}

impl<'a> Batch<'a> {
    const BYTES: usize = 1 << 20;

    fn new(ds: &'a Dataset, path: &'a Path) -> Batch<'a> {
        Batch {
            ds,
            path,
            statement: String::new(),
            rows: 0,
        }
    }

    /// Adds one row to the statement that begins with `head` (flushing when it is long).
    fn row(&mut self, head: &str, row: &str) -> Result<(), EmitError> {
        if self.rows == 0 {
            self.statement.push_str(head);
        } else {
            self.statement.push_str(", ");
        }
        self.statement.push_str(row);
        self.rows += 1;
        if self.statement.len() >= Self::BYTES {
            self.flush()?;
        }
        Ok(())
    }

    fn flush(&mut self) -> Result<(), EmitError> {
        if self.rows > 0 {
            sql(self.ds, &self.statement, self.path)?;
        }
        self.statement.clear();
        self.rows = 0;
        Ok(())
    }
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
    /// (node, parent) of every node but the root.
    parents: Vec<(i64, i64)>,
    /// (feature id, leaf node) of every feature.
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
                        parents.push((*child, 1));
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
                        parents.push((*child, node));
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
    items.sort_unstable_by(by(0));
    let mut groups = Vec::with_capacity(node_count);
    // Slices of whole nodes: slice k holds the nodes k * node_count / slices ..
    let mut start_node = 0;
    let mut start_item = 0;
    for k in 1..=slices {
        let end_node = k * node_count / slices;
        if end_node == start_node {
            continue;
        }
        // Items spread evenly over the nodes: node j ends at item j * n / node_count.
        let end_item = end_node * n / node_count;
        let slice = &mut items[start_item..end_item];
        slice.sort_unstable_by(by(1));
        let mut from = 0;
        for j in start_node + 1..=end_node {
            let to = j * n / node_count - start_item;
            groups.push(slice[from..to].to_vec());
            from = to;
        }
        start_node = end_node;
        start_item = end_item;
    }
    groups
}

/// Creates one layer of `control-points.gpkg` whose features are control points: fields
/// `reference_id`, `target_id` and one real field `measure`, one geometry each; `done` is told
/// how many features are written so far (every few thousand).
fn write_pair_layer(
    ds: &mut Dataset,
    name: &str,
    ty: OGRwkbGeometryType::Type,
    measure: &str,
    srs: &SpatialRef,
    rows: impl Iterator<Item = gdal::errors::Result<(usize, usize, f64, Geometry, [f64; 4])>>,
    result: &MatchOutcome,
    path: &Path,
    done: &mut dyn FnMut(usize),
) -> Result<(), EmitError> {
    let e = gdal_err(path);
    let mut txn = ds.start_transaction().map_err(&e)?;
    let fields = [
        ("reference_id", OGRFieldType::OFTString),
        ("target_id", OGRFieldType::OFTString),
        (measure, OGRFieldType::OFTReal),
    ];
    let mut index = IndexedLayer::create(&mut txn, name, ty, Some(srs), &fields, path)?;
    {
        let layer = txn.layer_by_name(name).map_err(&e)?;
        for (i, row) in rows.enumerate() {
            let (r, t, value, geometry, b) = row.map_err(&e)?;
            let mut f = Feature::new(layer.defn()).map_err(&e)?;
            f.set_field_string(0, &result.reference.ids[r])
                .map_err(&e)?;
            f.set_field_string(1, &result.target.ids[t]).map_err(&e)?;
            f.set_field_double(2, value).map_err(&e)?;
            f.set_geometry(geometry).map_err(&e)?;
            f.create(&layer).map_err(&e)?;
            index.boxes.push((feature_id(&f, path)?, b));
            if i % PROGRESS_EVERY == PROGRESS_EVERY - 1 {
                done(i + 1);
            }
        }
    }
    index.finish(&txn, path)?;
    txn.commit().map_err(&e)?;
    Ok(())
}

/// Features between two progress reports.
const PROGRESS_EVERY: usize = 16_384;

/// The id GDAL gave a feature it wrote.
fn feature_id(f: &Feature, path: &Path) -> Result<i64, EmitError> {
    f.fid()
        .and_then(|id| i64::try_from(id).ok())
        .ok_or_else(|| {
            gdal_err(path)(gdal::errors::GdalError::BadArgument(
                "GDAL gave a written feature no id".to_string(),
            ))
        })
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
    let n = s.pairs.len();
    let (mut ds, _fixed) = create_gpkg(path)?;
    let reference_point = |p: &crate::fit::Pair| result.reference.points[p.reference as usize];
    let points = s.pairs.iter().map(|p| {
        let at = reference_point(p);
        let g = point(at)?;
        Ok((
            p.reference as usize,
            p.target as usize,
            p.residual * mpu,
            g,
            bbox(&[at]),
        ))
    });
    let ty = OGRwkbGeometryType::wkbPoint;
    write_pair_layer(
        &mut ds,
        "control_points",
        ty,
        "residual_m",
        &srs,
        points,
        result,
        path,
        &mut |k| done(k),
    )?;
    done(n);
    let lines = s
        .pairs
        .iter()
        .zip(&starts)
        .zip(&starts_working)
        .map(|((p, start), start_w)| {
            let end_w = result.frame.reference[p.reference as usize];
            let len = crate::spatial::dist2(*start_w, end_w).sqrt() * mpu;
            let end = reference_point(p);
            let g = line(*start, end)?;
            Ok((
                p.reference as usize,
                p.target as usize,
                len,
                g,
                bbox(&[*start, end]),
            ))
        });
    let ty = OGRwkbGeometryType::wkbLineString;
    write_pair_layer(
        &mut ds,
        "displacements",
        ty,
        "length_m",
        &srs,
        lines,
        result,
        path,
        &mut |k| done(n + k),
    )?;
    done(2 * n);
    // The control points where the target has them, in the target's own CRS; a local grid
    // is tagged with its engineering CRS (with the declared unit), not left without one
    // (which a GeoPackage stores as "undefined geographic").
    let target_srs = srs_from_wkt(&result.frame.target_wkt(), path)?;
    let target_points = s.pairs.iter().map(|p| {
        let at = result.target.points[p.target as usize];
        let g = point(at)?;
        Ok((
            p.reference as usize,
            p.target as usize,
            p.residual * mpu,
            g,
            bbox(&[at]),
        ))
    });
    write_pair_layer(
        &mut ds,
        "target_points",
        OGRwkbGeometryType::wkbPoint,
        "residual_m",
        &target_srs,
        target_points,
        result,
        path,
        &mut |k| done(2 * n + k),
    )?;
    done(3 * n);
    close_checked(ds, path)?;
    Ok(())
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
        Some(w) => Some(srs_from_wkt(w, path)?),
        None => Some(srs_from_wkt(
            &crate::frame::grid::engineering_wkt(None),
            path,
        )?),
    };
    if driver_name == "GPKG" {
        let (mut ds, _fixed) = create_gpkg(path)?;
        {
            let mut txn = ds.start_transaction().map_err(&e)?;
            let fields = [("id", OGRFieldType::OFTString)];
            let ty = OGRwkbGeometryType::wkbPoint;
            let mut index =
                IndexedLayer::create(&mut txn, "landmarks", ty, srs.as_ref(), &fields, path)?;
            {
                let layer = txn.layer_by_name("landmarks").map_err(&e)?;
                for (id, p) in set.ids.iter().zip(&set.points) {
                    let f = landmark_feature(&layer, id, *p, path)?;
                    index.boxes.push((feature_id(&f, path)?, bbox(&[*p])));
                }
            }
            index.finish(&txn, path)?;
            txn.commit().map_err(&e)?;
        }
        close_checked(ds, path)?;
    } else {
        let driver = DriverManager::get_driver_by_name(driver_name).map_err(&e)?;
        let mut ds = driver.create_vector_only(path).map_err(&e)?;
        {
            let layer = ds
                .create_layer(LayerOptions {
                    name: "landmarks",
                    srs: srs.as_ref(),
                    ty: OGRwkbGeometryType::wkbPoint,
                    options: None,
                })
                .map_err(&e)?;
            add_fields(&layer, &[("id", OGRFieldType::OFTString)], path)?;
            for (id, p) in set.ids.iter().zip(&set.points) {
                landmark_feature(&layer, id, *p, path)?;
            }
        }
        close_checked(ds, path)?;
    }
    Ok(())
}

/// Writes one landmark (field `id`, a point) into `layer`; the feature written.
fn landmark_feature<'a, L: LayerAccess>(
    layer: &'a L,
    id: &str,
    p: [f64; 2],
    path: &Path,
) -> Result<Feature<'a>, EmitError> {
    let e = gdal_err(path);
    let mut f = Feature::new(layer.defn()).map_err(&e)?;
    f.set_field_string(0, id).map_err(&e)?;
    f.set_geometry(point(p).map_err(&e)?).map_err(&e)?;
    f.create(layer).map_err(&e)?;
    Ok(f)
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
            for (node, parent) in &tree.parents {
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
}
