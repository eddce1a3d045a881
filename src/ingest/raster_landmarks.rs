//! Landmarks of a raster survey: the keypoints of its image, found at a scale on the ground.
//!
//! **In:** an opened [`RasterSource`], the feature size in metres and the detector's
//! [`KeypointParams`]. **Out:** a [`LandmarkSet`] whose landmarks are the image's keypoints
//! (strongest first, ids `k1`, `k2`, …, positions in the image's CRS) with its
//! [`RasterLandmarks`]: what the image is and, per keypoint, its full-resolution pixel/line,
//! scale and response.
//!
//! The image is read decimated by the factor the detector would choose for itself, so that
//! the band's finest scale is still at least Lowe's σ0 = 1.6 samples (see
//! [`crate::keypoints`]), or by a somewhat smaller factor when the file has an overview at it
//! and the larger one would mean decoding the full resolution
//! ([`RasterSource::fastest_decimation`]): a 20,000 px mosaic of 5 cm pixels searched for
//! 2.5 m features (at most 5-fold) is read from its 1/4 overview. The blur of that averaging
//! is passed on to the detector
//! (a block mean of d × d pixels adds a variance of (d² − 1)/12 pixels², the variance of a
//! uniform distribution over a pixel's width — common practice).
//!
//! The detector needs pixels of one size in both directions, which a grid in degrees does not
//! have away from the equator: an image in a geographic CRS (or one warped through its GCPs)
//! is read through its warped view on a projected grid ([`RasterSource::open_on`]), the
//! landmarks' positions and CRS are the view's, the feature size is in metres on that grid,
//! and each keypoint's `pixel` is taken back to the file's own pixel/line
//! ([`RasterLandmarks::view`]), so that outputs name the pixels of the file. A raster without a
//! CRS is read with its geotransform in metres (a local grid).

use super::georef::PixelMap;
use super::raster::{RasterError, RasterSource};
use super::{IngestError, LandmarkSet, SkipCounts};
use crate::image::GeoTransform;
use crate::keypoints::{self, Keypoint, KeypointParams, SIGMA0};
use gdal::spatial_ref::SpatialRef;

/// What a raster survey's landmarks came from.
#[derive(Debug, Clone, PartialEq)]
pub struct RasterLandmarks {
    /// The image in words (size, band, pixel size, …).
    pub description: String,
    /// Full-resolution columns (of the warped view, for an image read through one).
    pub width: usize,
    /// Full-resolution rows (of the warped view, for an image read through one).
    pub height: usize,
    /// Full-resolution geotransform (of the warped view, for an image read through one):
    /// pixel/line of what is read → the landmarks' CRS.
    pub geotransform: GeoTransform,
    /// For an image read through a warped view: its grid and the map back to the file's own
    /// pixel/line; `None` when the file is read as it is.
    pub view: Option<RasterView>,
    /// Metres per unit of the image's CRS.
    pub metres_per_unit: f64,
    /// Ground size of a full-resolution pixel, metres.
    pub pixel_m: f64,
    /// The feature size searched, metres.
    pub feature_size_m: f64,
    /// The image was read with every `decimation × decimation` block as one sample.
    pub decimation: usize,
    /// One a landmark, same order: the keypoint with its position as full-resolution
    /// pixel/line of the file in `pixel` (its `sample` and `sigma_px` are on the decimated
    /// grid read).
    pub keypoints: Vec<Keypoint>,
}

/// A warped view an image was read through ([`RasterSource::open_on`]).
#[derive(Debug, Clone, PartialEq)]
pub struct RasterView {
    /// The definition of the grid's CRS (to open the same view again).
    pub grid: String,
    /// From the view's map positions back to the file's pixel/line.
    pub map: PixelMap,
}

impl RasterLandmarks {
    /// The file's own full-resolution pixel/line of a position in the landmarks' CRS: through
    /// the view's [`PixelMap`], or the inverse of the geotransform. `None` only for a
    /// geotransform without an inverse (refused on reading).
    pub fn file_pixel(&self, map: [f64; 2]) -> Option<[f64; 2]> {
        match &self.view {
            Some(v) => Some(v.map.original_pixel(map)),
            None => self
                .geotransform
                .inverse()
                .map(|g| g.pixel_to_map(map[0], map[1])),
        }
    }

    /// Whether the file's own pixels are on [`geotransform`](Self::geotransform) (no warped
    /// view): then a geotransform written for the file applies to the file as it is.
    pub fn read_as_is(&self) -> bool {
        self.view.is_none()
    }
}

/// Metres per unit of a raster's CRS as read (1 without one). Never geographic: such an image
/// is read through a warped view on a projected grid.
pub(super) fn metres_per_unit(source: &RasterSource) -> Result<f64, IngestError> {
    let Some(wkt) = &source.info().crs_wkt else {
        return Ok(1.0);
    };
    let srs = SpatialRef::from_wkt(wkt).map_err(|e| IngestError::Gdal {
        path: source.path().to_path_buf(),
        source: e,
    })?;
    debug_assert!(!srs.is_geographic(), "a geographic image is read warped");
    Ok(srs.linear_units())
}

/// The ground size of a raster's pixels, metres.
pub(super) fn pixel_metres(source: &RasterSource) -> Result<f64, IngestError> {
    Ok(source.info().pixel_size * metres_per_unit(source)?)
}

/// Reads the image decimated as the detector needs and detects its keypoints.
pub(super) fn read_keypoints(
    source: &RasterSource,
    feature_size_m: f64,
    params: &KeypointParams,
) -> Result<LandmarkSet, IngestError> {
    let info = source.info();
    let mpu = metres_per_unit(source)?;
    let pixel_m = info.pixel_size * mpu;
    let path = source.path().to_path_buf();
    let detector_error = |e: keypoints::KeypointError| IngestError::Keypoints {
        path: path.clone(),
        source: e,
    };
    params.validate().map_err(detector_error)?;
    // The factor `keypoints::detect` would choose on the full-resolution image.
    let sigma_lo_px = feature_size_m
        / (2.0 * std::f64::consts::SQRT_2)
        / pixel_m
        / 2f64.powi(params.octaves_either_side as i32);
    let most =
        ((sigma_lo_px / SIGMA0).floor() as usize).clamp(1, info.width.min(info.height).max(1));
    // A finer grid served by an overview is cheaper than block means of the full resolution.
    let d = source.fastest_decimation(most)?;
    let image = source.read(d)?;
    let k = d as f64;
    let blurred = KeypointParams {
        input_blur_px: (params.input_blur_px.powi(2) + (k * k - 1.0) / 12.0).sqrt() / k,
        ..params.clone()
    };
    let found = keypoints::detect(&image, feature_size_m, mpu, &blurred).map_err(detector_error)?;
    let to_pixel = info
        .geotransform
        .inverse()
        .ok_or_else(|| IngestError::Raster(RasterError::NotGeoreferenced { path: path.clone() }))?;
    let map = source.pixel_map();
    let keypoints: Vec<Keypoint> = found
        .keypoints
        .into_iter()
        .map(|mut kp| {
            kp.pixel = match map {
                Some(m) => m.original_pixel(kp.map),
                None => to_pixel.pixel_to_map(kp.map[0], kp.map[1]),
            };
            kp
        })
        .collect();
    let set = LandmarkSet {
        source: path.clone(),
        layer: match source.georeferencing_note() {
            None => format!("keypoints of {}", source.band()),
            Some(note) => format!("keypoints of {}, {note}", source.band()),
        },
        ids: (1..=keypoints.len()).map(|i| format!("k{i}")).collect(),
        points: keypoints.iter().map(|kp| kp.map).collect(),
        crs_wkt: info.crs_wkt.clone(),
        skipped: SkipCounts::default(),
        raster: Some(Box::new(RasterLandmarks {
            description: source.describe(),
            width: info.width,
            height: info.height,
            geotransform: info.geotransform,
            view: source.grid().zip(map).map(|(grid, map)| RasterView {
                grid: grid.to_string(),
                map: map.clone(),
            }),
            metres_per_unit: mpu,
            pixel_m,
            feature_size_m,
            decimation: d * found.decimation,
            keypoints,
        })),
    };
    super::validate::check(&set, None)?;
    Ok(set)
}
