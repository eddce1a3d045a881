//! `control-points.gpkg` and landmark files through GDAL's vector drivers.
//!
//! GeoPackage writes run inside one transaction (orders of magnitude faster than one per
//! feature); drivers without transactions (GeoJSON, FlatGeobuf) write directly. The dataset is
//! closed explicitly so that an error while finishing (spatial index, flush) is reported.

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

fn gdal_err(path: &Path) -> impl Fn(gdal::errors::GdalError) -> EmitError + '_ {
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
fn create_gpkg(path: &Path) -> Result<(Dataset, DateFixed), EmitError> {
    let e = gdal_err(path);
    gdal::config::set_thread_local_config_option("OGR_CURRENT_DATE", FIXED_DATE).map_err(&e)?;
    let fixed = DateFixed;
    let driver = DriverManager::get_driver_by_name("GPKG").map_err(&e)?;
    let ds = driver.create_vector_only(path).map_err(&e)?;
    Ok((ds, fixed))
}

/// Clears the thread's `OGR_CURRENT_DATE` on drop (after the dataset is closed).
struct DateFixed;

impl Drop for DateFixed {
    fn drop(&mut self) {
        let _ = gdal::config::clear_thread_local_config_option("OGR_CURRENT_DATE");
    }
}

/// Closes `ds` and returns a failure GDAL raised while closing but did not return: GDAL 3.6's
/// GeoPackage driver builds the spatial index at close, and on a full disk only prints the
/// error and leaves the file without it.
fn close_checked(ds: Dataset, path: &Path) -> Result<(), EmitError> {
    crate::ingest::clear_gdal_error();
    ds.close().map_err(gdal_err(path))?;
    match crate::ingest::take_gdal_failure() {
        Some(e) => Err(gdal_err(path)(e)),
        None => Ok(()),
    }
}

fn srs_from_wkt(wkt: &str, path: &Path) -> Result<SpatialRef, EmitError> {
    let mut srs = SpatialRef::from_wkt(wkt).map_err(gdal_err(path))?;
    srs.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
    Ok(srs)
}

fn add_fields<L: LayerAccess>(
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

fn point(p: [f64; 2]) -> gdal::errors::Result<Geometry> {
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

/// Creates one layer of `control-points.gpkg` whose features are control points: fields
/// `reference_id`, `target_id` and one real field `measure`, one geometry each.
fn write_pair_layer(
    ds: &mut Dataset,
    name: &str,
    ty: OGRwkbGeometryType::Type,
    measure: &str,
    srs: &SpatialRef,
    rows: impl Iterator<Item = gdal::errors::Result<(usize, usize, f64, Geometry)>>,
    result: &MatchOutcome,
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
    add_fields(
        &layer,
        &[
            ("reference_id", OGRFieldType::OFTString),
            ("target_id", OGRFieldType::OFTString),
            (measure, OGRFieldType::OFTReal),
        ],
        path,
    )?;
    for row in rows {
        let (r, t, value, geometry) = row.map_err(&e)?;
        let mut f = Feature::new(layer.defn()).map_err(&e)?;
        f.set_field_string(0, &result.reference.ids[r])
            .map_err(&e)?;
        f.set_field_string(1, &result.target.ids[t]).map_err(&e)?;
        f.set_field_double(2, value).map_err(&e)?;
        f.set_geometry(geometry).map_err(&e)?;
        f.create(&layer).map_err(&e)?;
    }
    Ok(())
}

/// Writes `control-points.gpkg` (see the module doc of [`crate::emit`]).
pub fn write_control_points(
    result: &MatchOutcome,
    s: &Solution,
    path: &Path,
) -> Result<(), EmitError> {
    let e = gdal_err(path);
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
    let (mut ds, _fixed) = create_gpkg(path)?;
    {
        let mut txn = ds.start_transaction().map_err(&e)?;
        let reference_point = |p: &crate::fit::Pair| result.reference.points[p.reference as usize];
        let points = s.pairs.iter().map(|p| {
            let g = point(reference_point(p))?;
            Ok((p.reference as usize, p.target as usize, p.residual * mpu, g))
        });
        let ty = OGRwkbGeometryType::wkbPoint;
        write_pair_layer(
            &mut txn,
            "control_points",
            ty,
            "residual_m",
            &srs,
            points,
            result,
            path,
        )?;
        let lines =
            s.pairs
                .iter()
                .zip(&starts)
                .zip(&starts_working)
                .map(|((p, start), start_w)| {
                    let end_w = result.frame.reference[p.reference as usize];
                    let len = crate::spatial::dist2(*start_w, end_w).sqrt() * mpu;
                    let g = line(*start, reference_point(p))?;
                    Ok((p.reference as usize, p.target as usize, len, g))
                });
        let ty = OGRwkbGeometryType::wkbLineString;
        write_pair_layer(
            &mut txn,
            "displacements",
            ty,
            "length_m",
            &srs,
            lines,
            result,
            path,
        )?;
        // The control points where the target has them, in the target's own CRS; a local grid
        // is tagged with its engineering CRS (with the declared unit), not left without one
        // (which a GeoPackage stores as "undefined geographic").
        let target_srs = srs_from_wkt(&result.frame.target_wkt(), path)?;
        let target_points = s.pairs.iter().map(|p| {
            let g = point(result.target.points[p.target as usize])?;
            Ok((p.reference as usize, p.target as usize, p.residual * mpu, g))
        });
        write_pair_layer(
            &mut txn,
            "target_points",
            OGRwkbGeometryType::wkbPoint,
            "residual_m",
            &target_srs,
            target_points,
            result,
            path,
        )?;
        txn.commit().map_err(&e)?;
    }
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
    let (mut ds, _fixed) = if driver_name == "GPKG" {
        let (ds, fixed) = create_gpkg(path)?;
        (ds, Some(fixed))
    } else {
        let driver = DriverManager::get_driver_by_name(driver_name).map_err(&e)?;
        (driver.create_vector_only(path).map_err(&e)?, None)
    };
    if driver_name == "GPKG" {
        let mut txn = ds.start_transaction().map_err(&e)?;
        fill_landmarks(&mut txn, set, srs.as_ref(), path)?;
        txn.commit().map_err(&e)?;
    } else {
        fill_landmarks(&mut ds, set, srs.as_ref(), path)?;
    }
    close_checked(ds, path)?;
    Ok(())
}

fn fill_landmarks(
    ds: &mut Dataset,
    set: &LandmarkSet,
    srs: Option<&SpatialRef>,
    path: &Path,
) -> Result<(), EmitError> {
    let e = gdal_err(path);
    let layer = ds
        .create_layer(LayerOptions {
            name: "landmarks",
            srs,
            ty: OGRwkbGeometryType::wkbPoint,
            options: None,
        })
        .map_err(&e)?;
    add_fields(&layer, &[("id", OGRFieldType::OFTString)], path)?;
    for (id, p) in set.ids.iter().zip(&set.points) {
        let mut f = Feature::new(layer.defn()).map_err(&e)?;
        f.set_field_string(0, id).map_err(&e)?;
        f.set_geometry(point(*p).map_err(&e)?).map_err(&e)?;
        f.create(&layer).map_err(&e)?;
    }
    Ok(())
}
