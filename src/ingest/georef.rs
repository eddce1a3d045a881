//! How a raster image's pixels reach a projected map grid, and the view the pipeline reads
//! them through.
//!
//! **In:** a raster dataset GDAL opened read-only (its geotransform, its CRS, its ground
//! control points and their CRS), the bands to be read, and optionally the CRS an image that
//! needs warping is put on (`grid`: the match's working CRS, so that both images of a match
//! share one grid). **Out:** an [`Analysis`] of the file's georeferencing, and for an image
//! that is not on a projected grid a [`Warped`] view: a GDAL warped VRT over the file on a
//! projected grid, with a [`PixelMap`] from that grid back to the file's own pixel/line; or a
//! [`RasterError`] naming the file and what to do.
//!
//! **The cases.**
//! - A geotransform (not GDAL's default `[0, 1, 0, 0, 0, 1]`) in a projected CRS, or with no
//!   CRS: read as it is.
//! - Ground control points only (no geotransform): GDAL's least-squares first-order fit of
//!   the GCPs (`GDALGCPsToGeoTransform`, the fit `gdalwarp -order 1` makes) serves as the
//!   geotransform when **every GCP lies within [`AFFINE_TOLERANCE_PX`] of it** (the residual
//!   measured in the image's pixels: the GCP's map position taken back through the inverse
//!   affine, against its pixel/line). The report and the log say so, with the largest
//!   residual. Otherwise, with at least [`MIN_GCPS_ORDER_2`] GCPs, the image is warped through
//!   GDAL's second-order polynomial of its GCPs (`METHOD=GCP_POLYNOMIAL`, `MAX_GCP_ORDER=2`)
//!   when every GCP lies within [`GCP_TOLERANCE_PX`] of that polynomial; else the GCPs are
//!   inconsistent (a blunder, or a GCP of another image) and the image is refused
//!   ([`RasterError::GcpsInconsistent`], naming the worst GCP). Fewer than [`MIN_GCPS`] GCPs
//!   fix no affine ([`RasterError::TooFewGcps`]). No thin-plate spline: it passes through
//!   every GCP, so it cannot tell a consistent set from one with a blunder.
//! - A CRS in degrees (from the file or its GCPs): the pixels have no single size on the
//!   ground, so the image is warped onto a projected grid.
//!
//! **The warped view.** `GDALAutoCreateWarpedVRTEx` over the file: the bands read (and an
//! alpha band that marks where the file has data: outside its footprint, on the collar the
//! warp adds, and wherever the file is no-data or transparent, samples are invalid), cubic
//! resampling, GDAL's approximate transformer held to [`WARP_MAX_ERROR_PX`], on the grid CRS:
//! `grid` when given and projected, else the GCPs' own CRS when projected, else the WGS 84 /
//! UTM zone of the image's centre ([`crate::spatial::utm_zone_for`], the working frame's
//! rule). GDAL chooses the grid's square pixel (`GDALSuggestedWarpOutput`: as many pixels
//! along the diagonal as the file has), so detection runs on near-square ground pixels, and
//! the view is warped block by block as it is read: memory stays bounded as for any file.
//! Keypoints, refinement and the area-based seed work on the view; every pixel/line an output
//! gives (control points, `target-gcps.vrt`) is taken back to the file's own pixel/line
//! through the [`PixelMap`], so that a GCP warp of the original file (gdalwarp) uses them as
//! they are.
//!
//! **The pixel map back.** The exact transformer of the warp (`GDALCreateGenImgProjTransformer2`
//! with the same options, no approximation) is sampled on a grid of nodes over the view and
//! interpolated bilinearly; the nodes are made denser until the interpolation is within
//! [`PIXEL_MAP_TOLERANCE_PX`] of the exact transformer at every cell centre (checked, and kept
//! in [`PixelMap::max_error_px`]).

use super::raster::RasterError;
use crate::image::GeoTransform;
use gdal::cpl::CslStringList;
use gdal::spatial_ref::SpatialRef;
use gdal::Dataset;
use std::ffi::{c_int, c_void, CString};
use std::path::Path;

/// The largest distance of a GCP from the first-order fit for that fit to serve as the image's
/// geotransform, in pixels of the image (a tenth of a pixel: well inside the 0.3 px the
/// co-registration is held to at the corners — common practice).
pub const AFFINE_TOLERANCE_PX: f64 = 0.1;
/// The largest distance of a GCP from the second-order polynomial of the GCPs for the
/// polynomial to be used, in pixels of the image; beyond it the GCPs are inconsistent
/// (hand-measured GCPs are usually good to about a pixel — common practice).
pub const GCP_TOLERANCE_PX: f64 = 1.0;
/// GCPs a first-order fit needs (three points not on one line).
pub const MIN_GCPS: usize = 3;
/// GCPs a second-order polynomial needs (six coefficients an axis).
pub const MIN_GCPS_ORDER_2: usize = 6;
/// The error GDAL's approximate transformer may make in the warped view, in pixels.
pub const WARP_MAX_ERROR_PX: f64 = 0.05;
/// The largest error of the [`PixelMap`]'s interpolation, in pixels of the file.
pub const PIXEL_MAP_TOLERANCE_PX: f64 = 0.01;

/// How the file's pixels reach its CRS.
#[derive(Debug, Clone, PartialEq)]
pub enum Source {
    /// The file's own geotransform.
    Geotransform,
    /// The first-order fit of the file's GCPs, used as its geotransform.
    GcpAffine {
        /// GCPs in the file.
        count: usize,
        /// Largest distance of a GCP from the fit, pixels.
        max_residual_px: f64,
    },
    /// The second-order polynomial of the file's GCPs (the image is warped through it).
    GcpPolynomial {
        /// GCPs in the file.
        count: usize,
        /// Largest distance of a GCP from the first-order fit, pixels.
        affine_residual_px: f64,
        /// Largest distance of a GCP from the polynomial, pixels.
        max_residual_px: f64,
    },
}

/// What the file's georeferencing is.
#[derive(Debug, Clone)]
pub struct Analysis {
    /// Where it comes from.
    pub source: Source,
    /// The geotransform of the file's pixels (the GCPs' affine for [`Source::GcpAffine`] and,
    /// as an approximation, for [`Source::GcpPolynomial`]).
    pub geotransform: GeoTransform,
    /// The CRS of that map (the file's, or its GCPs'), as WKT; `None` when it declares none.
    pub crs_wkt: Option<String>,
    /// That CRS is geographic (degrees).
    pub geographic: bool,
}

impl Analysis {
    /// Whether the pipeline reads the image through a warped view.
    pub fn needs_warp(&self) -> bool {
        self.geographic || matches!(self.source, Source::GcpPolynomial { .. })
    }

    /// The georeferencing in words, for [`super::RasterSource::describe`].
    pub fn words(&self) -> String {
        match &self.source {
            Source::Geotransform => "georeferenced by its geotransform".to_string(),
            Source::GcpAffine {
                count,
                max_residual_px,
            } => format!(
                "georeferenced by {count} ground control points only: their first-order (affine) fit leaves at most {max_residual_px:.3} px (within {AFFINE_TOLERANCE_PX} px), so it is used as the geotransform"
            ),
            Source::GcpPolynomial {
                count,
                affine_residual_px,
                max_residual_px,
            } => format!(
                "georeferenced by {count} ground control points only: their first-order fit leaves up to {affine_residual_px:.3} px (over {AFFINE_TOLERANCE_PX} px), their second-order polynomial at most {max_residual_px:.3} px (within {GCP_TOLERANCE_PX} px), so the image is warped through the polynomial"
            ),
        }
    }
}

/// The file's georeferencing, or why it has none usable.
pub fn analyse(path: &Path, ds: &Dataset) -> Result<Analysis, RasterError> {
    const DEFAULT: [f64; 6] = [0.0, 1.0, 0.0, 0.0, 0.0, 1.0];
    let crs_of = |wkt: String| (!wkt.trim().is_empty()).then_some(wkt);
    let is_geographic = |wkt: &Option<String>| {
        wkt.as_deref()
            .and_then(|w| SpatialRef::from_wkt(w).ok())
            .is_some_and(|s| s.is_geographic())
    };
    if let Ok(g) = ds.geo_transform() {
        if g != DEFAULT {
            let gt = GeoTransform(g);
            if gt.inverse().is_none() || g.iter().any(|v| !v.is_finite()) {
                return Err(RasterError::SingularGeotransform {
                    path: path.to_path_buf(),
                    geotransform: g,
                });
            }
            let crs_wkt = crs_of(ds.projection());
            return Ok(Analysis {
                source: Source::Geotransform,
                geotransform: gt,
                geographic: is_geographic(&crs_wkt),
                crs_wkt,
            });
        }
    }
    let gcps = ds.gcps();
    if gcps.is_empty() {
        return Err(RasterError::NotGeoreferenced {
            path: path.to_path_buf(),
        });
    }
    let count = gcps.len();
    if count < MIN_GCPS {
        return Err(RasterError::TooFewGcps {
            path: path.to_path_buf(),
            count,
        });
    }
    let crs_wkt = ds.gcp_projection().and_then(crs_of);
    let geographic = is_geographic(&crs_wkt);
    let inconsistent = |order: usize, worst: (f64, String)| RasterError::GcpsInconsistent {
        path: path.to_path_buf(),
        count,
        order,
        residual_px: worst.0,
        gcp: worst.1,
    };
    let Some(gt) = gcp_affine(ds).filter(|g| g.inverse().is_some()) else {
        return Err(inconsistent(
            1,
            (f64::INFINITY, "(all: on one line)".into()),
        ));
    };
    let inverse = gt.inverse().expect("checked");
    let affine_worst = worst(ds, |x, y| Some(inverse.pixel_to_map(x, y)));
    if affine_worst.0 <= AFFINE_TOLERANCE_PX {
        return Ok(Analysis {
            source: Source::GcpAffine {
                count,
                max_residual_px: affine_worst.0,
            },
            geotransform: gt,
            crs_wkt,
            geographic,
        });
    }
    if count < MIN_GCPS_ORDER_2 {
        return Err(inconsistent(1, affine_worst));
    }
    let polynomial =
        GcpTransformer::new(ds, 2).ok_or_else(|| inconsistent(2, affine_worst.clone()))?;
    let poly_worst = worst(ds, |x, y| polynomial.to_pixel(x, y));
    if poly_worst.0 > GCP_TOLERANCE_PX {
        return Err(inconsistent(2, poly_worst));
    }
    Ok(Analysis {
        source: Source::GcpPolynomial {
            count,
            affine_residual_px: affine_worst.0,
            max_residual_px: poly_worst.0,
        },
        geotransform: gt,
        crs_wkt,
        geographic,
    })
}

/// The largest distance, in pixels, between a GCP's pixel/line and where `to_pixel` puts its
/// map position, and that GCP's id (a failed point counts as infinitely far).
fn worst(ds: &Dataset, to_pixel: impl Fn(f64, f64) -> Option<[f64; 2]>) -> (f64, String) {
    ds.gcps()
        .iter()
        .map(|g| {
            let d = to_pixel(g.x(), g.y())
                .map_or(f64::INFINITY, |[p, l]| (p - g.pixel()).hypot(l - g.line()));
            (if d.is_finite() { d } else { f64::INFINITY }, g.id())
        })
        .fold((0.0, String::new()), |a, b| if b.0 > a.0 { b } else { a })
}

/// GDAL's least-squares affine through the dataset's GCPs (`GDALGCPsToGeoTransform` with
/// `bApproxOK` set, so that it fits whatever the residuals, which [`analyse`] tests itself);
/// `None` when the GCPs fix none (on one line).
#[allow(unsafe_code)]
fn gcp_affine(ds: &Dataset) -> Option<GeoTransform> {
    let gcps = ds.gcps();
    let mut gt = [0.0f64; 6];
    // SAFETY: `GcpRef` is `repr(transparent)` over `GDAL_GCP`, so the slice is GDAL's array of
    // `len` GCPs, alive while `ds` is; GDAL writes six doubles into `gt`.
    let ok = unsafe {
        gdal_sys::GDALGCPsToGeoTransform(
            gcps.len() as c_int,
            gcps.as_ptr() as *const gdal_sys::GDAL_GCP,
            gt.as_mut_ptr(),
            1,
        )
    };
    (ok != 0 && gt.iter().all(|v| v.is_finite())).then_some(GeoTransform(gt))
}

/// GDAL's polynomial of a dataset's GCPs (`GDALCreateGCPTransformer`), freed on drop.
struct GcpTransformer(*mut c_void);

impl GcpTransformer {
    #[allow(unsafe_code)]
    fn new(ds: &Dataset, order: c_int) -> Option<GcpTransformer> {
        let gcps = ds.gcps();
        let _quiet = super::open::QuietGdal::new();
        // SAFETY: as in `gcp_affine`; GDAL copies the GCPs into the transformer it returns.
        let t = unsafe {
            gdal_sys::GDALCreateGCPTransformer(
                gcps.len() as c_int,
                gcps.as_ptr() as *const gdal_sys::GDAL_GCP,
                order,
                0,
            )
        };
        (!t.is_null()).then_some(GcpTransformer(t))
    }

    /// Map position → pixel/line (GDAL's fit in that direction).
    #[allow(unsafe_code)]
    fn to_pixel(&self, x: f64, y: f64) -> Option<[f64; 2]> {
        let (mut x, mut y, mut z, mut ok) = (x, y, 0.0, 0 as c_int);
        // SAFETY: one point, in three doubles and one success flag that live on the stack.
        unsafe { gdal_sys::GDALGCPTransform(self.0, 1, 1, &mut x, &mut y, &mut z, &mut ok) };
        (ok != 0 && x.is_finite() && y.is_finite()).then_some([x, y])
    }
}

impl Drop for GcpTransformer {
    #[allow(unsafe_code)]
    fn drop(&mut self) {
        // SAFETY: the transformer `new` created, freed once.
        unsafe { gdal_sys::GDALDestroyGCPTransformer(self.0) };
    }
}

/// A warped view of a file on a projected grid.
pub struct Warped {
    /// The warped VRT (GDAL warps it block by block as it is read). Its bands are the bands
    /// asked for, in order, then an alpha band.
    pub dataset: Dataset,
    /// The view's geotransform.
    pub geotransform: GeoTransform,
    /// Its size, columns and rows.
    pub size: (usize, usize),
    /// The grid's CRS as WKT.
    pub crs_wkt: String,
    /// The definition of that CRS the view was made with (to make the same view again).
    pub grid: String,
    /// How the grid was chosen, in words.
    pub grid_because: String,
}

/// The CRS a view of `analysis` goes on, and why: `grid` when given and projected, else the
/// GCPs' own CRS when projected, else the UTM zone of the image's centre.
fn grid_crs(
    analysis: &Analysis,
    size: (usize, usize),
    grid: Option<&str>,
) -> Result<(String, String), String> {
    let projected = |d: &str| SpatialRef::from_definition(d).is_ok_and(|s| s.is_projected());
    if let Some(g) = grid.filter(|g| projected(g)) {
        return Ok((g.to_string(), "the working CRS of the match".into()));
    }
    if !analysis.geographic {
        if let Some(w) = &analysis.crs_wkt {
            return Ok((w.clone(), "the CRS of its ground control points".into()));
        }
        return Err("the ground control points declare no CRS".into());
    }
    let [lon, lat] = analysis
        .geotransform
        .pixel_to_map(size.0 as f64 / 2.0, size.1 as f64 / 2.0);
    if !((-180.0..=180.0).contains(&lon) && (-90.0..=90.0).contains(&lat)) {
        return Err(format!(
            "its centre ({lon}, {lat}) is not a longitude and latitude although its CRS is geographic"
        ));
    }
    Ok((
        crate::spatial::utm_zone_for(lon, lat),
        format!("the UTM zone of the image's centre ({lon:.4}, {lat:.4})"),
    ))
}

/// The transformer options of the view: the grid, and for GCPs the polynomial's order.
fn transformer_options(analysis: &Analysis, dst_wkt: &str) -> gdal::errors::Result<CslStringList> {
    let mut o = CslStringList::new();
    o.set_name_value("DST_SRS", dst_wkt)?;
    match analysis.source {
        Source::Geotransform => {}
        Source::GcpAffine { .. } => {
            o.set_name_value("METHOD", "GCP_POLYNOMIAL")?;
            o.set_name_value("MAX_GCP_ORDER", "1")?;
        }
        Source::GcpPolynomial { .. } => {
            o.set_name_value("METHOD", "GCP_POLYNOMIAL")?;
            o.set_name_value("MAX_GCP_ORDER", "2")?;
        }
    }
    Ok(o)
}

/// The warped view of `ds` (module doc) with bands `bands` (1-based, of the file), or why it
/// cannot be made.
#[allow(unsafe_code)]
pub fn warp(
    path: &Path,
    ds: &Dataset,
    bands: &[usize],
    alpha: Option<usize>,
    analysis: &Analysis,
    grid: Option<&str>,
) -> Result<Warped, RasterError> {
    let failed = |why: String| RasterError::WarpFailed {
        path: path.to_path_buf(),
        why,
    };
    let (grid, grid_because) = grid_crs(analysis, ds.raster_size(), grid).map_err(&failed)?;
    let dst_wkt = SpatialRef::from_definition(&grid)
        .and_then(|s| s.to_wkt())
        .map_err(|e| failed(format!("the grid CRS {grid} cannot be used ({e})")))?;
    let options = transformer_options(analysis, &dst_wkt).map_err(|e| failed(e.to_string()))?;
    let c_dst = CString::new(dst_wkt.clone()).map_err(|e| failed(e.to_string()))?;
    let mut warp_options = CslStringList::new();
    warp_options
        .set_name_value("DST_ALPHA_MAX", "255")
        .map_err(|e| failed(e.to_string()))?;
    let _quiet = super::open::QuietGdal::new();
    super::open::clear_gdal_error();
    // SAFETY: the warp options are GDAL's own allocation, filled with arrays from CPLMalloc
    // that GDALDestroyWarpOptions frees; GDALAutoCreateWarpedVRTEx clones them (and the
    // option lists) before returning, so they are freed right after. The dataset handle
    // returned is owned by the `Dataset` made from it; it refers to `ds`, which the caller
    // keeps open for as long as the view (and closes after it).
    let handle = unsafe {
        let wo = gdal_sys::GDALCreateWarpOptions();
        let n = bands.len();
        (*wo).nBandCount = n as c_int;
        let src = gdal_sys::CPLMalloc(n * std::mem::size_of::<c_int>()) as *mut c_int;
        let dst = gdal_sys::CPLMalloc(n * std::mem::size_of::<c_int>()) as *mut c_int;
        for (i, &b) in bands.iter().enumerate() {
            *src.add(i) = b as c_int;
            *dst.add(i) = (i + 1) as c_int;
        }
        (*wo).panSrcBands = src;
        (*wo).panDstBands = dst;
        (*wo).nSrcAlphaBand = alpha.map_or(0, |a| a as c_int);
        (*wo).nDstAlphaBand = (n + 1) as c_int;
        (*wo).papszWarpOptions = gdal_sys::CSLDuplicate(warp_options.as_ptr());
        let h = gdal_sys::GDALAutoCreateWarpedVRTEx(
            ds.c_dataset(),
            std::ptr::null(),
            c_dst.as_ptr(),
            gdal_sys::GDALResampleAlg::GRA_Cubic,
            WARP_MAX_ERROR_PX,
            wo,
            options.as_ptr(),
        );
        gdal_sys::GDALDestroyWarpOptions(wo);
        h
    };
    if handle.is_null() {
        let why = super::open::take_gdal_failure()
            .map_or_else(|| "GDAL made no warped view".to_string(), |e| e.to_string());
        return Err(failed(why));
    }
    // SAFETY: a dataset handle GDAL just returned, owned by nobody else.
    let view = unsafe { Dataset::from_c_dataset(handle) };
    let geotransform = view
        .geo_transform()
        .map_err(|e| failed(format!("the warped view has no geotransform ({e})")))?;
    let size = view.raster_size();
    if view.raster_count() != bands.len() + 1 {
        return Err(failed(format!(
            "the warped view has {} bands, not the {} read and an alpha band",
            view.raster_count(),
            bands.len()
        )));
    }
    Ok(Warped {
        dataset: view,
        geotransform: GeoTransform(geotransform),
        size,
        crs_wkt: dst_wkt,
        grid,
        grid_because,
    })
}

/// GDAL's exact transformer between a file's pixel/line and map positions on a grid CRS
/// (`GDALCreateGenImgProjTransformer2` with no destination dataset), freed on drop.
struct GridTransformer(*mut c_void);

impl GridTransformer {
    #[allow(unsafe_code)]
    fn new(ds: &Dataset, options: &CslStringList) -> Option<GridTransformer> {
        let _quiet = super::open::QuietGdal::new();
        // SAFETY: `ds` is open; GDAL copies what it needs from the option list.
        let t = unsafe {
            gdal_sys::GDALCreateGenImgProjTransformer2(
                ds.c_dataset(),
                std::ptr::null_mut(),
                options.as_ptr(),
            )
        };
        (!t.is_null()).then_some(GridTransformer(t))
    }

    /// Map positions on the grid → the file's pixel/line; `None` where GDAL fails.
    #[allow(unsafe_code)]
    fn to_pixels(&self, points: &[[f64; 2]]) -> Vec<Option<[f64; 2]>> {
        let mut x: Vec<f64> = points.iter().map(|p| p[0]).collect();
        let mut y: Vec<f64> = points.iter().map(|p| p[1]).collect();
        let mut z = vec![0.0; points.len()];
        let mut ok = vec![0 as c_int; points.len()];
        // SAFETY: four arrays of `points.len()` elements each, alive for the call.
        unsafe {
            gdal_sys::GDALGenImgProjTransform(
                self.0,
                1,
                points.len() as c_int,
                x.as_mut_ptr(),
                y.as_mut_ptr(),
                z.as_mut_ptr(),
                ok.as_mut_ptr(),
            )
        };
        (0..points.len())
            .map(|i| (ok[i] != 0 && x[i].is_finite() && y[i].is_finite()).then_some([x[i], y[i]]))
            .collect()
    }
}

impl Drop for GridTransformer {
    #[allow(unsafe_code)]
    fn drop(&mut self) {
        // SAFETY: the transformer `new` created, freed once.
        unsafe { gdal_sys::GDALDestroyGenImgProjTransformer(self.0) };
    }
}

/// From a view's map positions back to the file's own pixel/line (module doc): bilinear
/// interpolation between nodes every `step` view pixels.
#[derive(Debug, Clone, PartialEq)]
pub struct PixelMap {
    /// Map position → view pixel/line (the inverse of the view's geotransform).
    to_view: GeoTransform,
    /// View pixels between nodes.
    step: f64,
    /// Nodes across and down.
    cols: usize,
    rows: usize,
    /// The file's pixel/line at each node, row by row.
    nodes: Vec<[f64; 2]>,
    /// The file's size (columns, rows).
    pub file_size: (usize, usize),
    /// The largest difference between the interpolation and GDAL's exact transformer at the
    /// centres of the cells, pixels of the file.
    pub max_error_px: f64,
}

impl PixelMap {
    /// Samples the exact transformer of the view of `ds` made for `analysis` on `view`
    /// (module doc).
    pub fn new(
        path: &Path,
        ds: &Dataset,
        analysis: &Analysis,
        view: &Warped,
    ) -> Result<PixelMap, RasterError> {
        let failed = |why: String| RasterError::WarpFailed {
            path: path.to_path_buf(),
            why,
        };
        let options =
            transformer_options(analysis, &view.crs_wkt).map_err(|e| failed(e.to_string()))?;
        let exact = GridTransformer::new(ds, &options)
            .ok_or_else(|| failed("GDAL made no transformer back to the file's pixels".into()))?;
        let to_view = view
            .geotransform
            .inverse()
            .ok_or_else(|| failed("the warped view's geotransform has no inverse".into()))?;
        let (w, h) = (view.size.0 as f64, view.size.1 as f64);
        let mut step = (w.max(h) / 32.0).max(1.0);
        loop {
            let cols = (w / step).ceil() as usize + 1;
            let rows = (h / step).ceil() as usize + 1;
            let at = |c: f64, r: f64| view.geotransform.pixel_to_map(c * step, r * step);
            let grid: Vec<[f64; 2]> = (0..rows)
                .flat_map(|r| (0..cols).map(move |c| (c as f64, r as f64)))
                .map(|(c, r)| at(c, r))
                .collect();
            let nodes: Option<Vec<[f64; 2]>> = exact.to_pixels(&grid).into_iter().collect();
            let nodes = nodes.ok_or_else(|| {
                failed("a point of the warped view does not map back to the file's pixels".into())
            })?;
            let mut map = PixelMap {
                to_view,
                step,
                cols,
                rows,
                nodes,
                file_size: ds.raster_size(),
                max_error_px: 0.0,
            };
            let centres: Vec<[f64; 2]> = (0..rows - 1)
                .flat_map(|r| (0..cols - 1).map(move |c| (c as f64 + 0.5, r as f64 + 0.5)))
                .map(|(c, r)| at(c, r))
                .collect();
            let truth = exact.to_pixels(&centres);
            map.max_error_px = centres
                .iter()
                .zip(&truth)
                .map(|(m, t)| match t {
                    Some(t) => {
                        let p = map.original_pixel(*m);
                        (p[0] - t[0]).hypot(p[1] - t[1])
                    }
                    None => f64::INFINITY,
                })
                .fold(0.0, f64::max);
            if map.max_error_px <= PIXEL_MAP_TOLERANCE_PX || step <= 2.0 || cols * rows > 1 << 20 {
                return Ok(map);
            }
            step /= 2.0;
        }
    }

    /// The file's pixel/line of a map position on the view's grid (outside the nodes, the
    /// nearest cell's bilinear map extended).
    pub fn original_pixel(&self, map: [f64; 2]) -> [f64; 2] {
        let [p, l] = self.to_view.pixel_to_map(map[0], map[1]);
        let (u, v) = (p / self.step, l / self.step);
        let i = (u.floor().max(0.0) as usize).min(self.cols.saturating_sub(2));
        let j = (v.floor().max(0.0) as usize).min(self.rows.saturating_sub(2));
        let (fu, fv) = (u - i as f64, v - j as f64);
        let n = |c: usize, r: usize| self.nodes[r * self.cols + c];
        let (a, b, c, d) = (n(i, j), n(i + 1, j), n(i, j + 1), n(i + 1, j + 1));
        let mix = |k: usize| {
            (1.0 - fv) * ((1.0 - fu) * a[k] + fu * b[k]) + fv * ((1.0 - fu) * c[k] + fu * d[k])
        };
        [mix(0), mix(1)]
    }
}
