//! Raster outputs for a raster target: two GDAL virtual rasters (VRT) and the co-registered
//! GeoTIFF.
//!
//! **In:** the target image's path and either its control points as GDAL ground control points
//! ([`Gcp`]: target pixel/line → reference map coordinates) with the reference CRS, or the
//! target's geotransform and the fitted [`Similarity`]; for the warp, one of those VRTs, the
//! [`ReferenceGrid`] and the [`WarpOptions`].
//! **Out:** one file at the path given (a path in the staging folder of module `atomic`; the
//! caller renames it into place with the other outputs):
//!
//! - `target-gcps.vrt` ([`write_gcp_vrt`]): the target image, unchanged, with the GCP list and
//!   the reference CRS and no geotransform, so that a first-order (`gdalwarp -order 1`), a
//!   second-order (`-order 2`) or a thin-plate-spline (`-tps`) warp co-registers it with no
//!   further work (which one [`warp_to_reference`] makes follows `fit.model`).
//! - `target-georeferenced.vrt` ([`write_georeferenced_vrt`]): the target image, unchanged,
//!   with the geotransform of [`georeferenced_geotransform`] (the target's geotransform
//!   followed by the similarity) and the reference CRS: re-georeferenced without resampling.
//!   Only right when the similarity maps the target's map coordinates (those of the
//!   geotransform given) straight to the reference CRS's: target and reference in the same
//!   projected CRS and the fit made in it, or a target whose geotransform is in the frame the
//!   similarity was fitted in. When the working CRS differs from either, the similarity holds in
//!   the working CRS only and this file would be wrong: write the GCP VRT instead.
//! - `target-coregistered.tif` ([`warp_to_reference`]): one of those VRTs warped by GDAL onto the
//!   reference's CRS and pixel grid (same pixel size, pixel edges on the reference's), tiled,
//!   compressed (DEFLATE or LZW with a predictor), `BIGTIFF=IF_SAFER`. Where the target has no data
//!   stays so: the source's no-data value is the output's; a source without one (alpha band,
//!   mask or neither) gets an alpha band marking where the target has data.
//!
//! **Where the VRTs find the target image:** by its absolute path (`relativeToVRT="0"`).
//! Output folders get moved and copied while the surveys stay where they are; a path relative
//! to the VRT's folder would break on every such move. The price: moving the target image
//! breaks the VRTs (edit the `SourceFilename` element, a plain path). GDAL virtual file names
//! (`/vsizip/…`) are kept as given.
//!
//! **Complete before the rename:** the VRT text is made here and written by one
//! `std::fs::write`; GDAL never writes it, so nothing is written later when a dataset closes.
//! The GeoTIFF is written by GDAL and closed (flushed) before [`warp_to_reference`] returns;
//! any GDAL error on the way, the close included, is an [`EmitError::Raster`] naming the file,
//! and the partial file is removed.

use super::{io_err, EmitError};
use crate::fit::similarity::Similarity;
use crate::image::GeoTransform;
use gdal::spatial_ref::{AxisMappingStrategy, SpatialRef};
use gdal::Dataset;
use std::fmt::Write as _;
use std::marker::PhantomData;
use std::path::Path;

/// File name of the target with its control points as GCPs.
pub const GCP_VRT: &str = "target-gcps.vrt";
/// File name of the target re-georeferenced by the similarity.
pub const GEOREFERENCED_VRT: &str = "target-georeferenced.vrt";
/// File name of the target warped onto the reference's grid.
pub const COREGISTERED_TIF: &str = "target-coregistered.tif";

/// One ground control point: a position in the target image and the reference map
/// coordinates of the same landmark.
#[derive(Debug, Clone, PartialEq)]
pub struct Gcp {
    /// Identifier written into the VRT (the control point's ids, for instance).
    pub id: String,
    /// Column in GDAL's pixel/line convention (0 is the left edge of the first pixel; a pixel
    /// centre is at c + 0.5).
    pub pixel: f64,
    /// Row in GDAL's pixel/line convention (0 is the top edge).
    pub line: f64,
    /// Reference CRS, first data axis (easting, or longitude for a geographic CRS).
    pub x: f64,
    /// Reference CRS, second data axis (northing, or latitude).
    pub y: f64,
}

/// The grid of the reference image: the co-registered image is made on it.
#[derive(Debug, Clone, PartialEq)]
pub struct ReferenceGrid {
    /// The reference CRS, as WKT.
    pub crs_wkt: String,
    /// The reference image's geotransform (north-up: GDAL warps onto north-up grids only).
    pub geotransform: GeoTransform,
    /// Columns of the reference image.
    pub width: usize,
    /// Rows of the reference image.
    pub height: usize,
}

/// GDAL's resampling algorithms offered for the warp.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Resampling {
    /// The nearest sample (classes, labels).
    Nearest,
    /// Bilinear.
    Bilinear,
    /// Cubic convolution.
    Cubic,
    /// Lanczos windowed sinc.
    Lanczos,
    /// Average of the samples a target pixel covers (for downsampling).
    Average,
}

impl Resampling {
    /// The names [`Resampling::from_name`] accepts.
    pub const NAMES: [&'static str; 5] = ["nearest", "bilinear", "cubic", "lanczos", "average"];

    /// The resampling of that name (`nearest` or GDAL's `near`, `bilinear`, `cubic`, `lanczos`,
    /// `average`); case does not matter.
    pub fn from_name(name: &str) -> Option<Resampling> {
        Some(match name.to_ascii_lowercase().as_str() {
            "nearest" | "near" => Resampling::Nearest,
            "bilinear" => Resampling::Bilinear,
            "cubic" => Resampling::Cubic,
            "lanczos" => Resampling::Lanczos,
            "average" => Resampling::Average,
            _ => return None,
        })
    }

    /// GDAL's name, as `gdalwarp -r` takes it.
    pub fn gdal_name(self) -> &'static str {
        match self {
            Resampling::Nearest => "near",
            Resampling::Bilinear => "bilinear",
            Resampling::Cubic => "cubic",
            Resampling::Lanczos => "lanczos",
            Resampling::Average => "average",
        }
    }
}

/// How the warp maps the source's pixels to the reference CRS.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum WarpTransform {
    /// The least-squares affine of the source's GCPs (a first-order polynomial): for
    /// [`GCP_VRT`].
    FirstOrder,
    /// The least-squares second-order polynomial of the source's GCPs (at least 6): for
    /// [`GCP_VRT`].
    SecondOrder,
    /// A thin-plate spline through the source's GCPs (every GCP met exactly): for
    /// [`GCP_VRT`].
    ThinPlateSpline,
    /// The source's geotransform: for [`GEOREFERENCED_VRT`] (the similarity, exactly).
    Geotransform,
}

/// Which part of the reference grid the co-registered image covers.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum WarpExtent {
    /// The target's footprint, widened to whole reference pixels.
    Footprint,
    /// The whole reference image (same size and geotransform as the reference).
    Reference,
}

/// GeoTIFF compression of the co-registered image (lossless, with GDAL's predictor: 2 for
/// integer samples, 3 for floating point).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Compression {
    /// DEFLATE.
    Deflate,
    /// LZW.
    Lzw,
}

/// How to make the co-registered image.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct WarpOptions {
    /// Resampling algorithm.
    pub resampling: Resampling,
    /// Pixel → reference map.
    pub transform: WarpTransform,
    /// Area covered.
    pub extent: WarpExtent,
    /// Compression.
    pub compression: Compression,
}

impl Default for WarpOptions {
    /// Bilinear, first order, the target's footprint, DEFLATE.
    fn default() -> Self {
        WarpOptions {
            resampling: Resampling::Bilinear,
            transform: WarpTransform::FirstOrder,
            extent: WarpExtent::Footprint,
            compression: Compression::Deflate,
        }
    }
}

fn raster_err(path: &Path, message: impl Into<String>) -> EmitError {
    EmitError::Raster {
        path: path.to_path_buf(),
        message: message.into(),
    }
}

/// Writes `target-gcps.vrt` at `out`: the target image with `gcps` (target pixel/line →
/// reference map coordinates, in the data axis order of GIS: easting or longitude first) in
/// the reference CRS `reference_crs_wkt`. The VRT has no geotransform and no dataset CRS, only
/// the GCP list, so GDAL's warper uses the GCPs. The target is referred to by its absolute
/// path (module doc). Every band of the target is carried with its data type, no-data value,
/// colour interpretation and colour table, and a per-dataset mask as the VRT's mask.
pub fn write_gcp_vrt(
    target_image: &Path,
    gcps: &[Gcp],
    reference_crs_wkt: &str,
    out: &Path,
) -> Result<(), EmitError> {
    if gcps.len() < 3 {
        return Err(raster_err(
            out,
            format!(
                "a GCP VRT needs at least 3 control points for a first-order warp, {} given; \
                 leave out the raster outputs or find more control points",
                gcps.len()
            ),
        ));
    }
    if let Some(g) = gcps
        .iter()
        .find(|g| ![g.pixel, g.line, g.x, g.y].iter().all(|v| v.is_finite()))
    {
        return Err(raster_err(
            out,
            format!(
                "control point {} has a coordinate that is not a number ({}, {} → {}, {}); \
                 this is a bug in tiemark: please report it",
                g.id, g.pixel, g.line, g.x, g.y
            ),
        ));
    }
    let source = describe(target_image)?;
    let mapping = axis_mapping(reference_crs_wkt, out)?;
    let mut xml = format!(
        "<VRTDataset rasterXSize=\"{}\" rasterYSize=\"{}\">\n",
        source.width, source.height
    );
    let _ = writeln!(
        xml,
        "  <GCPList Projection=\"{}\" dataAxisToSRSAxisMapping=\"{mapping}\">",
        escape(&one_line(reference_crs_wkt))
    );
    for g in gcps {
        let _ = writeln!(
            xml,
            "    <GCP Id=\"{}\" Pixel=\"{}\" Line=\"{}\" X=\"{}\" Y=\"{}\" Z=\"0\" />",
            escape(&g.id),
            g.pixel,
            g.line,
            g.x,
            g.y
        );
    }
    xml.push_str("  </GCPList>\n");
    source.push_bands(&mut xml);
    xml.push_str("</VRTDataset>\n");
    std::fs::write(out, xml).map_err(io_err(out))
}

/// The geotransform of the target re-georeferenced by `similarity`: pixel/line → the target's
/// map coordinates (`target`) → the reference's (`similarity`), one affine.
pub fn georeferenced_geotransform(target: &GeoTransform, similarity: &Similarity) -> GeoTransform {
    let g = &target.0;
    let (a, b) = (similarity.a, similarity.b);
    let [x0, y0] = similarity.apply([g[0], g[3]]);
    GeoTransform([
        x0,
        a * g[1] - b * g[4],
        a * g[2] - b * g[5],
        y0,
        b * g[1] + a * g[4],
        b * g[2] + a * g[5],
    ])
}

/// Writes `target-georeferenced.vrt` at `out`: the target image with the geotransform
/// [`georeferenced_geotransform`]`(target_geotransform, similarity)` and the CRS
/// `reference_crs_wkt`, no resampling. `target_geotransform` must map the target's pixel/line
/// to the coordinates the similarity takes (see the module doc for when that holds). The target
/// is referred to by its absolute path.
pub fn write_georeferenced_vrt(
    target_image: &Path,
    target_geotransform: &GeoTransform,
    similarity: &Similarity,
    reference_crs_wkt: &str,
    out: &Path,
) -> Result<(), EmitError> {
    let gt = georeferenced_geotransform(target_geotransform, similarity);
    if !similarity.is_valid() || gt.inverse().is_none() || !gt.0.iter().all(|v| v.is_finite()) {
        return Err(raster_err(
            out,
            format!(
                "the re-georeferenced geotransform {:?} is degenerate (similarity {similarity:?}); \
                 this is a bug in tiemark: please report it",
                gt.0
            ),
        ));
    }
    let source = describe(target_image)?;
    let mapping = axis_mapping(reference_crs_wkt, out)?;
    let mut xml = format!(
        "<VRTDataset rasterXSize=\"{}\" rasterYSize=\"{}\">\n",
        source.width, source.height
    );
    let _ = writeln!(
        xml,
        "  <SRS dataAxisToSRSAxisMapping=\"{mapping}\">{}</SRS>",
        escape(&one_line(reference_crs_wkt))
    );
    let g = gt.0;
    let _ = writeln!(
        xml,
        "  <GeoTransform>{}, {}, {}, {}, {}, {}</GeoTransform>",
        g[0], g[1], g[2], g[3], g[4], g[5]
    );
    source.push_bands(&mut xml);
    xml.push_str("</VRTDataset>\n");
    std::fs::write(out, xml).map_err(io_err(out))
}

/// What a VRT needs to know of the target image.
struct SourceRaster {
    /// The path written into the VRT.
    path: String,
    width: usize,
    height: usize,
    bands: Vec<BandInfo>,
    /// The target has a per-dataset mask (not alpha, not no-data).
    mask: bool,
}

struct BandInfo {
    data_type: String,
    nodata: Option<f64>,
    colour: String,
    /// The colour table (RGBA entries) of a paletted band; empty otherwise.
    palette: Vec<[i16; 4]>,
}

/// Opens the target image (read only) and describes it.
fn describe(target: &Path) -> Result<SourceRaster, EmitError> {
    let text = target.to_str().ok_or_else(|| {
        raster_err(
            target,
            "the target image's path is not valid UTF-8 and cannot be written into a VRT; \
             rename the file or a folder on its path",
        )
    })?;
    let path = if text.starts_with("/vsi") {
        text.to_string()
    } else {
        let abs = std::fs::canonicalize(target).map_err(|e| {
            raster_err(
                target,
                format!(
                    "the target image cannot be found for the VRT: {e}; check that it is still \
                     in place"
                ),
            )
        })?;
        abs.to_str()
            .ok_or_else(|| {
                raster_err(
                    &abs,
                    "the target image's path is not valid UTF-8 and cannot be written into a \
                     VRT; rename the file or a folder on its path",
                )
            })?
            .to_string()
    };
    let ds = Dataset::open(&path).map_err(|e| {
        raster_err(
            target,
            format!(
                "cannot be opened as a raster for the VRT: {e}; check that the target image is \
                 a readable raster"
            ),
        )
    })?;
    let (width, height) = ds.raster_size();
    if ds.raster_count() == 0 || width == 0 || height == 0 {
        return Err(raster_err(
            target,
            "has no raster bands or no pixels, so no VRT can show it; check the target image",
        ));
    }
    let mut bands = Vec::with_capacity(ds.raster_count());
    let mut mask = false;
    for i in 1..=ds.raster_count() {
        let band = ds.rasterband(i).map_err(|e| {
            raster_err(
                target,
                format!("band {i} cannot be read: {e}; check the target image"),
            )
        })?;
        if i == 1 {
            mask = band
                .mask_flags()
                .is_ok_and(|f| f.is_per_dataset() && !f.is_alpha() && !f.is_nodata());
        }
        let palette = band
            .color_table()
            .map(|t| {
                (0..t.entry_count())
                    .filter_map(|k| t.entry_as_rgb(k))
                    .map(|e| [e.r, e.g, e.b, e.a])
                    .collect()
            })
            .unwrap_or_default();
        bands.push(BandInfo {
            data_type: band.band_type().name(),
            nodata: band.no_data_value(),
            colour: band.color_interpretation().name(),
            palette,
        });
    }
    Ok(SourceRaster {
        path,
        width,
        height,
        bands,
        mask,
    })
}

impl SourceRaster {
    /// Appends one `VRTRasterBand` a band (a simple source over the whole image) and the mask.
    fn push_bands(&self, xml: &mut String) {
        let (w, h) = (self.width, self.height);
        let source = |xml: &mut String, band: &str, indent: &str| {
            let _ = write!(
                xml,
                "{indent}<SimpleSource>\n\
                 {indent}  <SourceFilename relativeToVRT=\"0\">{}</SourceFilename>\n\
                 {indent}  <SourceBand>{band}</SourceBand>\n\
                 {indent}  <SrcRect xOff=\"0\" yOff=\"0\" xSize=\"{w}\" ySize=\"{h}\" />\n\
                 {indent}  <DstRect xOff=\"0\" yOff=\"0\" xSize=\"{w}\" ySize=\"{h}\" />\n\
                 {indent}</SimpleSource>\n",
                escape(&self.path)
            );
        };
        for (i, b) in self.bands.iter().enumerate() {
            let _ = writeln!(
                xml,
                "  <VRTRasterBand dataType=\"{}\" band=\"{}\">",
                escape(&b.data_type),
                i + 1
            );
            if let Some(v) = b.nodata {
                let _ = writeln!(xml, "    <NoDataValue>{}</NoDataValue>", number(v));
            }
            if !b.colour.is_empty() {
                let _ = writeln!(xml, "    <ColorInterp>{}</ColorInterp>", escape(&b.colour));
            }
            if !b.palette.is_empty() {
                xml.push_str("    <ColorTable>\n");
                for [r, g, bl, a] in &b.palette {
                    let _ = writeln!(
                        xml,
                        "      <Entry c1=\"{r}\" c2=\"{g}\" c3=\"{bl}\" c4=\"{a}\" />"
                    );
                }
                xml.push_str("    </ColorTable>\n");
            }
            source(xml, &(i + 1).to_string(), "    ");
            xml.push_str("  </VRTRasterBand>\n");
        }
        if self.mask {
            xml.push_str("  <MaskBand>\n    <VRTRasterBand dataType=\"Byte\">\n");
            source(xml, "mask,1", "      ");
            xml.push_str("    </VRTRasterBand>\n  </MaskBand>\n");
        }
    }
}

/// A number as GDAL's XML reader (C `strtod`) takes it.
fn number(v: f64) -> String {
    if v.is_nan() {
        "nan".into()
    } else if v.is_infinite() {
        if v > 0.0 { "inf" } else { "-inf" }.into()
    } else {
        v.to_string()
    }
}

/// Text for an XML attribute or element.
fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            // XML 1.0 has no place for control characters (but tab and line breaks).
            c if c.is_control() && !matches!(c, '\t' | '\n' | '\r') => out.push(' '),
            c => out.push(c),
        }
    }
    out
}

/// WKT on one line: line breaks and tabs become spaces (white space between WKT tokens is not
/// significant; in an XML attribute a reader may or may not keep a line break).
fn one_line(wkt: &str) -> String {
    wkt.replace(['\n', '\r', '\t'], " ")
}

/// Checks that `wkt` is a CRS GDAL reads and returns GDAL's data-axis → CRS-axis mapping for
/// the GIS order (easting/longitude first), as the VRT's `dataAxisToSRSAxisMapping` ("1,2" for
/// most projected CRSs, "2,1" for EPSG:4326). Without it GDAL may read the coordinates of a
/// geographic CRS as (latitude, longitude).
#[allow(unsafe_code)]
fn axis_mapping(wkt: &str, out: &Path) -> Result<String, EmitError> {
    let mut srs = SpatialRef::from_wkt(wkt).map_err(|e| {
        raster_err(
            out,
            format!(
                "the reference CRS is not WKT that GDAL reads ({e}); this is a bug in tiemark: \
                 please report it"
            ),
        )
    })?;
    srs.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
    let mut n: std::ffi::c_int = 0;
    // SAFETY: `srs` is a live spatial reference; GDAL returns a pointer to `n` ints it owns,
    // valid while `srs` is unchanged; they are copied out at once.
    let axes = unsafe {
        let p = gdal_sys::OSRGetDataAxisToSRSAxisMapping(srs.to_c_hsrs(), &mut n);
        if p.is_null() || n <= 0 {
            Vec::new()
        } else {
            std::slice::from_raw_parts(p, n as usize).to_vec()
        }
    };
    if axes.len() < 2 {
        return Err(raster_err(
            out,
            "the reference CRS has fewer than two axes; raster outputs need a 2-D CRS",
        ));
    }
    Ok(axes
        .iter()
        .map(|a| a.to_string())
        .collect::<Vec<_>>()
        .join(","))
}

/// While alive, GDAL errors on this thread are recorded (GDAL's last-error state) but not
/// printed; the guard stays on the thread that made it.
struct Quiet(PhantomData<*const ()>);

impl Quiet {
    #[allow(unsafe_code)]
    fn new() -> Quiet {
        // SAFETY: pushes GDAL's own quiet handler and clears the error state, on this thread;
        // `Drop` pops the handler on the same thread (the guard is not `Send`).
        unsafe {
            gdal_sys::CPLPushErrorHandler(Some(gdal_sys::CPLQuietErrorHandler));
            gdal_sys::CPLErrorReset();
        }
        Quiet(PhantomData)
    }

    /// GDAL's last failure on this thread since [`Quiet::new`] (warnings do not count).
    #[allow(unsafe_code)]
    fn failure(&self) -> Option<String> {
        // SAFETY: reads this thread's error state; the message, owned by GDAL, is checked for
        // NULL and copied at once.
        unsafe {
            if gdal_sys::CPLGetLastErrorType() < gdal_sys::CPLErr::CE_Failure {
                return None;
            }
            let text = gdal_sys::CPLGetLastErrorMsg();
            Some(if text.is_null() {
                "GDAL gave no reason".to_string()
            } else {
                std::ffi::CStr::from_ptr(text)
                    .to_string_lossy()
                    .trim()
                    .to_string()
            })
        }
    }
}

impl Drop for Quiet {
    #[allow(unsafe_code)]
    fn drop(&mut self) {
        // SAFETY: pops the handler `new` pushed, on the thread that pushed it.
        unsafe { gdal_sys::CPLPopErrorHandler() };
    }
}

/// The least-squares affine through a dataset's GCPs (GDAL's `GDALGCPsToGeoTransform`, the map
/// a first-order warp fits) and the largest distance of a GCP from it, in map units.
#[allow(unsafe_code)]
fn gcp_affine(ds: &Dataset) -> Option<(GeoTransform, f64)> {
    let gcps = ds.gcps();
    let mut gt = [0.0f64; 6];
    // SAFETY: `GcpRef` is `repr(transparent)` over `GDAL_GCP`, so the slice is GDAL's array of
    // `len` GCPs, alive while `ds` is; GDAL writes six doubles into `gt`.
    let ok = unsafe {
        gdal_sys::GDALGCPsToGeoTransform(
            gcps.len() as std::ffi::c_int,
            gcps.as_ptr() as *const gdal_sys::GDAL_GCP,
            gt.as_mut_ptr(),
            1,
        )
    };
    if ok == 0 {
        return None;
    }
    let gt = GeoTransform(gt);
    let worst = gcps
        .iter()
        .map(|g| {
            let [x, y] = gt.pixel_to_map(g.pixel(), g.line());
            (x - g.x()).hypot(y - g.y())
        })
        .fold(0.0, f64::max);
    Some((gt, worst))
}

/// How the source's pixels reach the map: an affine (for a thin-plate spline, the GCPs'
/// affine), how far the true map may stray from it (in source pixels), and the CRS of that
/// map (None: the source has none, taken to be the grid's).
struct SourceMap {
    affine: GeoTransform,
    pad_pixels: f64,
    crs: Option<SpatialRef>,
}

fn source_map(
    ds: &Dataset,
    source: &Path,
    transform: WarpTransform,
) -> Result<SourceMap, EmitError> {
    match transform {
        WarpTransform::Geotransform => match ds.geo_transform() {
            Ok(gt) => Ok(SourceMap {
                affine: GeoTransform(gt),
                pad_pixels: 0.0,
                crs: ds.spatial_ref().ok(),
            }),
            Err(_) => Err(raster_err(
                source,
                "has no geotransform to warp with; warp target-gcps.vrt with the first-order \
                 transform instead",
            )),
        },
        WarpTransform::FirstOrder | WarpTransform::SecondOrder | WarpTransform::ThinPlateSpline => {
            let n = ds.gcps().len();
            if n < 3 {
                return Err(raster_err(
                    source,
                    format!(
                        "has {n} GCPs, a GCP warp needs at least 3; warp target-georeferenced.vrt \
                         with its geotransform instead"
                    ),
                ));
            }
            let (affine, worst) = gcp_affine(ds).ok_or_else(|| {
                raster_err(
                    source,
                    "its GCPs lie on a line, so no affine fits them; the control points cannot \
                     co-register the image",
                )
            })?;
            // How far the map may stray from the GCPs' affine: the spline by about the worst
            // GCP's distance from it; a second-order polynomial grows quadratically beyond the
            // GCPs, so up to the image corners by a few times that (our own margin: four).
            let pad_pixels = match transform {
                WarpTransform::ThinPlateSpline => (worst / affine.pixel_size()).ceil(),
                WarpTransform::SecondOrder => (4.0 * worst / affine.pixel_size()).ceil(),
                _ => 0.0,
            };
            Ok(SourceMap {
                affine,
                pad_pixels,
                crs: ds.gcp_spatial_ref(),
            })
        }
    }
}

/// The source's outline (its edges, 16 points each, widened by the pad) in the grid's CRS.
fn footprint(
    map: &SourceMap,
    (w, h): (usize, usize),
    grid: &ReferenceGrid,
    out: &Path,
) -> Result<Vec<[f64; 2]>, EmitError> {
    let pad = map.pad_pixels;
    let (p0, l0, p1, l1) = (-pad, -pad, w as f64 + pad, h as f64 + pad);
    let mut pts = Vec::with_capacity(64);
    for k in 0..16 {
        let t = k as f64 / 16.0;
        for (p, l) in [
            (p0 + t * (p1 - p0), l0),
            (p1, l0 + t * (l1 - l0)),
            (p1 - t * (p1 - p0), l1),
            (p0, l1 - t * (l1 - l0)),
        ] {
            pts.push(map.affine.pixel_to_map(p, l));
        }
    }
    let Some(from) = &map.crs else {
        return Ok(pts);
    };
    let cannot = |e: gdal::errors::GdalError| {
        raster_err(
            out,
            format!(
                "the target's outline cannot be converted to the reference CRS: {e}; warp onto \
                 a grid in the CRS of the control points"
            ),
        )
    };
    let gis = |s: &SpatialRef| -> Result<SpatialRef, EmitError> {
        let mut c = SpatialRef::from_wkt(&s.to_wkt().map_err(cannot)?).map_err(cannot)?;
        c.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
        Ok(c)
    };
    let from = gis(from)?;
    let mut to = SpatialRef::from_wkt(&grid.crs_wkt).map_err(cannot)?;
    to.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
    if from == to {
        return Ok(pts);
    }
    let ct = gdal::spatial_ref::CoordTransform::new(&from, &to).map_err(cannot)?;
    let (mut xs, mut ys): (Vec<f64>, Vec<f64>) = pts.iter().map(|p| (p[0], p[1])).unzip();
    let mut zs = vec![0.0; xs.len()];
    ct.transform_coords(&mut xs, &mut ys, &mut zs)
        .map_err(cannot)?;
    Ok(xs.into_iter().zip(ys).map(|(x, y)| [x, y]).collect())
}

/// `-te` bounds (xmin, ymin, xmax, ymax) on the reference grid: whole reference pixels.
fn output_bounds(
    grid: &ReferenceGrid,
    extent: WarpExtent,
    map: &SourceMap,
    size: (usize, usize),
    out: &Path,
) -> Result<[f64; 4], EmitError> {
    let g = grid.geotransform.0;
    let inverse = grid.geotransform.inverse();
    let Some(inverse) =
        inverse.filter(|_| grid.geotransform.is_north_up() && g[1] > 0.0 && g[5] < 0.0)
    else {
        return Err(raster_err(
            out,
            format!(
                "the reference's geotransform {g:?} is not north-up (rotated, skewed or \
                 flipped) and GDAL warps onto north-up grids only; leave out the warp and use \
                 target-gcps.vrt"
            ),
        ));
    };
    let (p0, l0, p1, l1) = match extent {
        WarpExtent::Reference => (0.0, 0.0, grid.width as f64, grid.height as f64),
        WarpExtent::Footprint => {
            let (mut p0, mut l0, mut p1, mut l1) = (f64::MAX, f64::MAX, f64::MIN, f64::MIN);
            for [x, y] in footprint(map, size, grid, out)? {
                let [rp, rl] = inverse.pixel_to_map(x, y);
                (p0, p1) = (p0.min(rp), p1.max(rp));
                (l0, l1) = (l0.min(rl), l1.max(rl));
            }
            // Widen to whole reference pixels (a hair of slack so that an edge on a pixel
            // edge stays there).
            (
                (p0 + 1e-9).floor(),
                (l0 + 1e-9).floor(),
                (p1 - 1e-9).ceil(),
                (l1 - 1e-9).ceil(),
            )
        }
    };
    let (cols, rows) = (p1 - p0, l1 - l0);
    if !(cols >= 1.0 && rows >= 1.0 && cols < 1e6 && rows < 1e6) {
        return Err(raster_err(
            out,
            format!(
                "the co-registered image would be {cols} × {rows} reference pixels; the \
                 control points do not map the target onto a sensible part of the reference \
                 grid, so no warp was made"
            ),
        ));
    }
    let [xmin, ymax] = grid.geotransform.pixel_to_map(p0, l0);
    let [xmax, ymin] = grid.geotransform.pixel_to_map(p1, l1);
    Ok([xmin, ymin, xmax, ymax])
}

/// Hands GDAL's progress to the caller's closure.
#[allow(unsafe_code)]
unsafe extern "C" fn progress_trampoline(
    done: f64,
    _message: *const std::ffi::c_char,
    data: *mut std::ffi::c_void,
) -> std::ffi::c_int {
    // SAFETY: `data` is the `&mut &mut dyn FnMut(f64)` that `warp_to_reference` passed, alive
    // for the whole GDALWarp call that calls this.
    let f = unsafe { &mut *(data as *mut &mut dyn FnMut(f64)) };
    // GDAL's fractions may overshoot 1 by a rounding error (1.00001 was seen). A panic must
    // not unwind into GDAL: it stops the warp instead (an error).
    let done = done.clamp(0.0, 1.0);
    match std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| f(done))) {
        Ok(()) => 1,
        Err(_) => 0,
    }
}

/// Writes `target-coregistered.tif` at `out`: `source` (a [`GCP_VRT`] with
/// [`WarpTransform::FirstOrder`], [`WarpTransform::SecondOrder`] or
/// [`WarpTransform::ThinPlateSpline`], a [`GEOREFERENCED_VRT`]
/// with [`WarpTransform::Geotransform`]) warped by GDAL (`GDALWarp`) onto `grid`: the reference
/// CRS, its pixel size, pixel edges on the reference's, over the target's footprint or the whole
/// reference ([`WarpExtent`]). A tiled GeoTIFF, compressed losslessly with a predictor,
/// `BIGTIFF=IF_SAFER`, of the source's bands and data type; the source's no-data value is kept,
/// and a source without one (alpha band, mask or neither) gets an alpha band. `progress`, if
/// given, is called with the fraction done, rising from 0 to 1 (1 once the file is closed). On failure the partial file is removed
/// and the error names `out`, GDAL's reason and what to do.
#[allow(unsafe_code)]
pub fn warp_to_reference(
    source: &Path,
    grid: &ReferenceGrid,
    options: &WarpOptions,
    out: &Path,
    progress: Option<&mut dyn FnMut(f64)>,
) -> Result<(), EmitError> {
    let quiet = Quiet::new();
    let ds = Dataset::open(source).map_err(|e| {
        raster_err(
            source,
            format!("cannot be opened to warp it: {e}; write it first (or check the path)"),
        )
    })?;
    let map = source_map(&ds, source, options.transform)?;
    let bounds = output_bounds(grid, options.extent, &map, ds.raster_size(), out)?;
    let band = ds.rasterband(1).map_err(|e| {
        raster_err(
            source,
            format!("has no first band to warp: {e}; check the target image"),
        )
    })?;
    let floating = matches!(
        band.band_type(),
        gdal::raster::GdalDataType::Float32 | gdal::raster::GdalDataType::Float64
    );
    let has_nodata = band.no_data_value().is_some();
    let out_text = out.to_str().ok_or_else(|| {
        raster_err(
            out,
            "the output path is not valid UTF-8; choose another output folder",
        )
    })?;
    let g = grid.geotransform.0;
    let mut args: Vec<String> = vec!["-of".into(), "GTiff".into()];
    args.extend(["-t_srs".into(), grid.crs_wkt.clone()]);
    args.push("-te".into());
    args.extend(bounds.iter().map(|v| v.to_string()));
    args.extend(["-tr".into(), g[1].to_string(), (-g[5]).to_string()]);
    args.extend(["-r".into(), options.resampling.gdal_name().into()]);
    match options.transform {
        WarpTransform::FirstOrder => args.extend(
            ["-order", "1", "-to", "METHOD=GCP_POLYNOMIAL"]
                .iter()
                .map(|s| s.to_string()),
        ),
        WarpTransform::SecondOrder => args.extend(
            ["-order", "2", "-to", "METHOD=GCP_POLYNOMIAL"]
                .iter()
                .map(|s| s.to_string()),
        ),
        WarpTransform::ThinPlateSpline => args.extend(
            ["-tps", "-to", "METHOD=GCP_TPS"]
                .iter()
                .map(|s| s.to_string()),
        ),
        WarpTransform::Geotransform => {
            args.extend(["-to", "METHOD=GEOTRANSFORM"].iter().map(|s| s.to_string()))
        }
    }
    if !has_nodata {
        args.push("-dstalpha".into());
    }
    let compress = match options.compression {
        Compression::Deflate => "DEFLATE",
        Compression::Lzw => "LZW",
    };
    let predictor = if floating { 3 } else { 2 };
    for co in [
        "TILED=YES".to_string(),
        format!("COMPRESS={compress}"),
        format!("PREDICTOR={predictor}"),
        "BIGTIFF=IF_SAFER".to_string(),
    ] {
        args.extend(["-co".into(), co]);
    }
    let argv: gdal::cpl::CslStringList = args.iter().map(String::as_str).collect();
    let c_out = std::ffi::CString::new(out_text).map_err(|_| {
        raster_err(
            out,
            "the output path holds a NUL byte; choose another output folder",
        )
    })?;

    let failed = |quiet: &Quiet, step: &str| {
        let _ = std::fs::remove_file(out);
        raster_err(
            out,
            format!(
                "{step} failed: {}; the co-registered image was not made: check the free space \
                 of the output folder's file system and that the control points cover the \
                 target, or leave out the warp",
                quiet
                    .failure()
                    .unwrap_or_else(|| "GDAL gave no reason".into())
            ),
        )
    };

    let mut progress = progress;
    // SAFETY: `argv` is a NULL-terminated string list alive for the call (GDAL copies it);
    // the options are freed below on every path. The progress data is a pointer to the
    // caller's closure reference, alive until GDALWarp returns, used only by the trampoline.
    // `ds` is alive for the call; the returned handle is closed exactly once here.
    unsafe {
        let opts = gdal_sys::GDALWarpAppOptionsNew(argv.as_ptr(), std::ptr::null_mut());
        if opts.is_null() {
            return Err(failed(&quiet, "setting up GDAL's warp"));
        }
        if let Some(f) = progress.as_mut() {
            gdal_sys::GDALWarpAppOptionsSetProgress(
                opts,
                Some(progress_trampoline),
                f as *mut &mut dyn FnMut(f64) as *mut std::ffi::c_void,
            );
        }
        let mut src = ds.c_dataset();
        let mut usage = 0;
        let h = gdal_sys::GDALWarp(
            c_out.as_ptr(),
            std::ptr::null_mut(),
            1,
            &mut src,
            opts,
            &mut usage,
        );
        gdal_sys::GDALWarpAppOptionsFree(opts);
        if h.is_null() {
            return Err(failed(&quiet, "GDAL's warp"));
        }
        gdal_sys::GDALFlushCache(h);
        gdal_sys::GDALClose(h);
    }
    if quiet.failure().is_some() {
        return Err(failed(&quiet, "writing the GeoTIFF"));
    }
    drop(quiet);
    // GDAL's last report is that of the last chunk, short of 1.
    if let Some(f) = progress {
        f(1.0);
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::emit::atomic::{put_in_place, Mode, Staging};
    use gdal::raster::{Buffer, ColorInterpretation};
    use gdal::DriverManager;

    /// A 64 × 64 Byte GeoTIFF (UTM 33N, 1 m pixels) of `bands` bands holding a ramp; with
    /// `alpha`, the last band is alpha, 0 in the left 8 columns; with `mask`, a per-dataset
    /// mask instead, 0 in the top 8 rows.
    fn tif(path: &Path, bands: usize, alpha: bool, mask: bool) {
        let driver = DriverManager::get_driver_by_name("GTiff").unwrap();
        let mut ds = driver
            .create_with_band_type::<u8, _>(path, 64, 64, bands)
            .unwrap();
        ds.set_geo_transform(&[455_000.0, 1.0, 0.0, 5_210_000.0, 0.0, -1.0])
            .unwrap();
        ds.set_spatial_ref(&SpatialRef::from_epsg(32633).unwrap())
            .unwrap();
        for b in 1..=bands {
            let mut band = ds.rasterband(b).unwrap();
            let data: Vec<u8> = if alpha && b == bands {
                band.set_color_interpretation(ColorInterpretation::AlphaBand)
                    .unwrap();
                (0..64 * 64)
                    .map(|i| if i % 64 < 8 { 0 } else { 255 })
                    .collect()
            } else {
                (0..64 * 64).map(|i| ((i % 64) * 2 + b) as u8).collect()
            };
            band.write((0, 0), (64, 64), &mut Buffer::new((64, 64), data))
                .unwrap();
        }
        if mask {
            let mut band = ds.rasterband(1).unwrap();
            band.create_mask_band(true).unwrap();
            let mut m = band.open_mask_band().unwrap();
            let data: Vec<u8> = (0..64 * 64)
                .map(|i| if i < 8 * 64 { 0 } else { 255 })
                .collect();
            m.write((0, 0), (64, 64), &mut Buffer::new((64, 64), data))
                .unwrap();
        }
    }

    fn gcps_shifted(dx: f64, dy: f64) -> Vec<Gcp> {
        [(0.0, 0.0), (64.0, 0.0), (0.0, 64.0), (64.0, 64.0)]
            .iter()
            .enumerate()
            .map(|(i, &(p, l))| Gcp {
                id: format!("g{i}"),
                pixel: p,
                line: l,
                x: 455_000.0 + p + dx,
                y: 5_210_000.0 - l + dy,
            })
            .collect()
    }

    #[test]
    fn staged_outputs_work_from_the_output_folder_and_carry_alpha() {
        // GDAL (the reference) reads all three files after the staging folder is put in place.
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("rgba.tif");
        tif(&target, 4, true, false);
        let wkt = SpatialRef::from_epsg(32633).unwrap().to_wkt().unwrap();
        let out = dir.path().join("out");
        let staging = Staging::for_target(&out).unwrap();
        let stage = |name: &str| staging.path.join(name);
        write_gcp_vrt(&target, &gcps_shifted(3.0, 0.0), &wkt, &stage(GCP_VRT)).unwrap();
        let gt = GeoTransform([455_000.0, 1.0, 0.0, 5_210_000.0, 0.0, -1.0]);
        let shift = Similarity {
            tx: 3.0,
            ..Similarity::IDENTITY
        };
        write_georeferenced_vrt(&target, &gt, &shift, &wkt, &stage(GEOREFERENCED_VRT)).unwrap();
        let grid = ReferenceGrid {
            crs_wkt: wkt.clone(),
            geotransform: GeoTransform([454_990.0, 1.0, 0.0, 5_210_010.0, 0.0, -1.0]),
            width: 100,
            height: 100,
        };
        let options = WarpOptions {
            resampling: Resampling::Nearest,
            ..WarpOptions::default()
        };
        warp_to_reference(
            &stage(GCP_VRT),
            &grid,
            &options,
            &stage(COREGISTERED_TIF),
            None,
        )
        .unwrap();
        put_in_place(
            staging,
            &out,
            &[GCP_VRT, GEOREFERENCED_VRT, COREGISTERED_TIF],
            Mode::Fresh,
        )
        .unwrap();
        let leftovers: Vec<_> = std::fs::read_dir(dir.path())
            .unwrap()
            .flatten()
            .filter(|e| e.file_name().to_string_lossy().starts_with('.'))
            .collect();
        assert!(leftovers.is_empty(), "{leftovers:?}");

        let original = Dataset::open(&target).unwrap();
        for name in [GCP_VRT, GEOREFERENCED_VRT] {
            let vrt = Dataset::open(out.join(name)).unwrap();
            assert_eq!(vrt.raster_count(), 4);
            assert_eq!(
                vrt.rasterband(4).unwrap().color_interpretation(),
                ColorInterpretation::AlphaBand
            );
            for b in 1..=4 {
                let read = |ds: &Dataset| ds.rasterband(b).unwrap().read_band_as::<u8>().unwrap();
                assert_eq!(read(&vrt).data(), read(&original).data(), "{name} band {b}");
            }
        }
        // The warp: the target's footprint (64 × 64 pixels, shifted 3 m east) on the grid,
        // three colour bands and the alpha band; where the target's alpha is 0 (its left 8
        // columns) the output's is 0 too, and the colours are the target's, 3 pixels on.
        let tif = Dataset::open(out.join(COREGISTERED_TIF)).unwrap();
        assert_eq!(tif.raster_size(), (64, 64));
        assert_eq!(tif.geo_transform().unwrap()[0], 455_003.0);
        assert_eq!(tif.raster_count(), 4);
        let alpha = tif.rasterband(4).unwrap().read_band_as::<u8>().unwrap();
        let red = tif.rasterband(1).unwrap().read_band_as::<u8>().unwrap();
        let want_red = original
            .rasterband(1)
            .unwrap()
            .read_band_as::<u8>()
            .unwrap();
        for i in 0..64 * 64 {
            assert_eq!(
                alpha.data()[i],
                if i % 64 < 8 { 0 } else { 255 },
                "pixel {i}"
            );
            if i % 64 >= 8 {
                assert_eq!(red.data()[i], want_red.data()[i], "pixel {i}");
            }
        }
    }

    #[test]
    fn a_colour_table_is_carried() {
        use gdal::raster::{ColorEntry, ColorTable, PaletteInterpretation, RgbaEntry};
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("paletted.tif");
        tif(&target, 1, false, false);
        // (A TIFF colour map has no alpha: every entry reads back opaque.)
        let colours = [[0, 0, 0, 255], [200, 30, 10, 255], [10, 180, 40, 255]];
        {
            let ds = Dataset::open_ex(
                &target,
                gdal::DatasetOptions {
                    open_flags: gdal::GdalOpenFlags::GDAL_OF_UPDATE,
                    ..Default::default()
                },
            )
            .unwrap();
            let mut table = ColorTable::new(PaletteInterpretation::Rgba);
            for (k, [r, g, b, a]) in colours.iter().enumerate() {
                let e = ColorEntry::Rgba(RgbaEntry {
                    r: *r,
                    g: *g,
                    b: *b,
                    a: *a,
                });
                table.set_color_entry(k as u16, &e);
            }
            ds.rasterband(1).unwrap().set_color_table(&table);
        }
        let wkt = SpatialRef::from_epsg(32633).unwrap().to_wkt().unwrap();
        let vrt_path = dir.path().join(GCP_VRT);
        write_gcp_vrt(&target, &gcps_shifted(0.0, 0.0), &wkt, &vrt_path).unwrap();
        let vrt = Dataset::open(&vrt_path).unwrap();
        let band = vrt.rasterband(1).unwrap();
        let table = band.color_table().expect("a colour table");
        // GeoTIFF pads a Byte band's table to 256 entries: the VRT has all of the target's.
        let source = Dataset::open(&target).unwrap();
        let source_count = source
            .rasterband(1)
            .unwrap()
            .color_table()
            .unwrap()
            .entry_count();
        assert_eq!(table.entry_count(), source_count);
        for (k, want) in colours.iter().enumerate() {
            let e = table.entry_as_rgb(k).unwrap();
            assert_eq!([e.r, e.g, e.b, e.a], *want);
        }
    }

    #[test]
    fn a_per_dataset_mask_becomes_the_vrts_mask() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("masked.tif");
        tif(&target, 1, false, true);
        let wkt = SpatialRef::from_epsg(32633).unwrap().to_wkt().unwrap();
        let vrt_path = dir.path().join(GCP_VRT);
        write_gcp_vrt(&target, &gcps_shifted(0.0, 0.0), &wkt, &vrt_path).unwrap();
        let vrt = Dataset::open(&vrt_path).unwrap();
        let band = vrt.rasterband(1).unwrap();
        assert!(band.mask_flags().unwrap().is_per_dataset());
        let mask = band.open_mask_band().unwrap().read_band_as::<u8>().unwrap();
        let want: Vec<u8> = (0..64 * 64)
            .map(|i| if i < 8 * 64 { 0 } else { 255 })
            .collect();
        assert_eq!(mask.data(), &want[..]);
    }

    #[test]
    fn the_similarity_after_the_geotransform_is_one_affine() {
        let target = GeoTransform([1000.0, 0.5, 0.01, 2000.0, -0.02, -0.5]);
        let s = Similarity::from_params(1.0003, 0.7f64.to_radians(), 12.5, -3.25);
        let gt = georeferenced_geotransform(&target, &s);
        for (p, l) in [(0.0, 0.0), (100.5, 0.0), (0.0, 70.25), (333.0, 222.0)] {
            let want = s.apply(target.pixel_to_map(p, l));
            let got = gt.pixel_to_map(p, l);
            assert!((want[0] - got[0]).abs() < 1e-9 && (want[1] - got[1]).abs() < 1e-9);
        }
    }

    #[test]
    fn resampling_names_round_trip_and_unknown_ones_are_refused() {
        for name in Resampling::NAMES {
            let r = Resampling::from_name(name).unwrap();
            assert_eq!(Resampling::from_name(r.gdal_name()), Some(r));
        }
        assert_eq!(Resampling::from_name("NEAR"), Some(Resampling::Nearest));
        assert_eq!(Resampling::from_name("cubicspline"), None);
    }

    #[test]
    fn xml_text_is_escaped_and_wkt_put_on_one_line() {
        assert_eq!(escape("a<b & \"c\"'"), "a&lt;b &amp; &quot;c&quot;&apos;");
        assert_eq!(escape("id\u{1}7"), "id 7");
        assert_eq!(
            one_line("GEOGCS[\"x\",\n\tDATUM[\"y\"]]"),
            "GEOGCS[\"x\",  DATUM[\"y\"]]"
        );
        assert_eq!(number(f64::NAN), "nan");
        assert_eq!(number(-9999.0), "-9999");
        assert_eq!(number(0.1), "0.1");
    }
}
