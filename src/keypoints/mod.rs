//! Keypoints in rasters: blobs found at a scale given in metres on the ground.
//!
//! **In:** one band of a georeferenced image ([`Image`]: samples, validity, geotransform), the
//! size of the features to find in metres, the metres per map unit of the image's CRS, and
//! [`KeypointParams`]. **Out:** a [`Detection`]: [`Keypoint`]s (sample index and pixel/line,
//! map position, σ in pixels and metres, signed response), strongest first and spread over the
//! image, with the decimation and counts of the run. Reads no file; writes nothing.
//!
//! Because the scale is set on the ground, a 3 cm mosaic and a 25 cm orthophoto of one place
//! give keypoints on the same physical features: the feature size D (metres, a blob's
//! diameter) becomes the band centre σ_c = D / (2√2) (a blob's radius is about √2·σ,
//! Lindeberg 1998, from memory), and the band spans
//! [`KeypointParams::octaves_either_side`] octaves either side of it. The image is decimated
//! by the whole factor that keeps the band's lowest σ at or above Lowe's σ0 = 1.6 samples
//! (block means; blocks with an invalid sample are invalid), so that every scale is resolved
//! and no more work is done than that needs. [`KeypointParams::default_feature_size_m`] gives
//! the feature size when the user gives none.
//!
//! The steps: robust normalisation to [0, 1] by percentiles ([`prepare`]); the
//! scale-normalised Laplacian over the band and its extrema in space and scale, refined by a
//! quadratic fit in x, y and scale, with Lowe's contrast and edge-response tests
//! ([`scale_space`]); only extrema whose filter support (every kernel used at their levels and
//! the level above, plus the finite differences) lies on valid samples inside the image, so the
//! nodata collar and the footprint's edge make no blobs; non-maximum suppression and a
//! selection spread over a grid of cells ([`select`]). The Gaussian filter is our own
//! separable one ([`gaussian`], which says why).
//!
//! ```
//! use tiemark::image::{GeoTransform, Image};
//! use tiemark::keypoints::{detect, KeypointParams};
//! // A bright Gaussian blob (σ = 0.5 m) on a 10 cm grid, centred at sample (40.3, 35.6).
//! let (w, h) = (96, 80);
//! let pixels = (0..w * h)
//!     .map(|i| {
//!         let (x, y) = ((i % w) as f64 - 40.3, (i / w) as f64 - 35.6);
//!         (100.0 * (-(x * x + y * y) / 50.0).exp()) as f32
//!     })
//!     .collect();
//! let img = Image::new(w, h, pixels, GeoTransform([1000.0, 0.1, 0.0, 2000.0, 0.0, -0.1]));
//! let params = KeypointParams { input_blur_px: 0.0, ..KeypointParams::default() };
//! let found = detect(&img, 1.4, 1.0, &params).unwrap();
//! let k = &found.keypoints[0];
//! assert!((k.sample[0] - 40.3).abs() < 0.05 && (k.sample[1] - 35.6).abs() < 0.05);
//! assert!((k.sigma_m - 0.5).abs() < 0.02 && k.response > 0.0);
//! ```

pub mod gaussian;
pub mod prepare;
pub mod scale_space;
pub mod select;

#[cfg(test)]
mod tests;

use crate::image::Image;
use serde::{Deserialize, Serialize};

/// Lowe's σ0 (IJCV 60(2), 2004): the smallest σ, in samples, the detector works at; the image
/// is decimated until the band's lowest σ is at or above it.
pub const SIGMA0: f64 = 1.6;

/// The band's lowest σ must be at least this many samples of the image as given: below it the
/// Laplacian is no longer that of the scene but of the sampling.
pub const SIGMA_MIN: f64 = 1.0;

/// Options of the keypoint detector.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct KeypointParams {
    /// Diameter of the features to find, metres on the ground; `None`: the default rule
    /// ([`KeypointParams::default_feature_size_m`]).
    pub feature_size_m: Option<f64>,
    /// Octaves of scale either side of the feature size (0-3).
    pub octaves_either_side: usize,
    /// Levels per octave (Lowe's S; 1-8).
    pub per_octave: usize,
    /// Smallest |response| of a keypoint, intensities normalised to [0, 1], on the scale of a
    /// difference of Gaussians between adjacent levels (Lowe 2004: 0.03).
    pub contrast: f64,
    /// Largest ratio of the principal curvatures of the response (Lowe 2004: r = 10); blobs
    /// more elongated than this are edges.
    pub edge_ratio: f64,
    /// Keypoints kept at most, spread over the image.
    pub target_count: usize,
    /// Blur already in the image as given, σ in its pixels (Lowe 2004 assumes 0.5 for a
    /// camera image; 0 for samples of an exact function).
    pub input_blur_px: f64,
}

impl Default for KeypointParams {
    /// The tool's default: feature size by the default rule, an octave either side, three
    /// levels an octave, Lowe's thresholds (0.03, r = 10), 2000 keypoints, input blur 0.5
    /// pixels.
    fn default() -> Self {
        KeypointParams {
            feature_size_m: None,
            octaves_either_side: 1,
            per_octave: 3,
            contrast: 0.03,
            edge_ratio: 10.0,
            target_count: 2000,
            input_blur_px: 0.5,
        }
    }
}

impl KeypointParams {
    /// Checks the options alone (no data needed); the error names the pipeline-file key.
    pub fn validate(&self) -> Result<(), KeypointError> {
        let bad = |key: &'static str, value: String, need: &'static str| {
            Err(KeypointError::Option { key, value, need })
        };
        if let Some(d) = self.feature_size_m {
            if !(d.is_finite() && d > 0.0) {
                return bad(
                    "keypoints.feature_size_m",
                    d.to_string(),
                    "a positive number of metres",
                );
            }
        }
        if self.octaves_either_side > 3 {
            return bad(
                "keypoints.octaves_either_side",
                self.octaves_either_side.to_string(),
                "0 to 3",
            );
        }
        if !(1..=8).contains(&self.per_octave) {
            return bad(
                "keypoints.per_octave",
                self.per_octave.to_string(),
                "1 to 8",
            );
        }
        if !(self.contrast.is_finite() && self.contrast >= 0.0) {
            return bad(
                "keypoints.contrast",
                self.contrast.to_string(),
                "a number of 0 or more (0.03 is Lowe's)",
            );
        }
        if !(self.edge_ratio.is_finite() && self.edge_ratio > 1.0) {
            return bad(
                "keypoints.edge_ratio",
                self.edge_ratio.to_string(),
                "a number above 1 (10 is Lowe's)",
            );
        }
        if self.target_count == 0 {
            return bad("keypoints.target_count", "0".into(), "at least 1");
        }
        if !(self.input_blur_px.is_finite() && (0.0..SIGMA_MIN).contains(&self.input_blur_px)) {
            return bad(
                "keypoints.input_blur_px",
                self.input_blur_px.to_string(),
                "at least 0 and below 1 pixel",
            );
        }
        Ok(())
    }

    /// The default feature size for two images of `pixel_a_m` and `pixel_b_m` metres a pixel:
    /// the smallest whole number of the coarser image's pixels whose band starts at Lowe's
    /// σ0 = 1.6 of them, ⌈1.6 · 2√2 · 2^n⌉ coarse pixels for n octaves either side — 10 coarse
    /// pixels with the default band (2.5 m for a 25 cm orthophoto against a 3 cm mosaic).
    /// Smaller, and the coarser image could not resolve the band's lowest scales, so the two
    /// would not see the same features; larger, and fewer, coarser features are found in both.
    pub fn default_feature_size_m(&self, pixel_a_m: f64, pixel_b_m: f64) -> f64 {
        let pixels =
            (SIGMA0 * 2.0 * std::f64::consts::SQRT_2 * 2f64.powi(self.octaves_either_side as i32))
                .ceil();
        pixels * pixel_a_m.max(pixel_b_m)
    }

    /// The feature size given, or else the default for images of these pixel sizes (metres).
    pub fn feature_size_for(&self, pixel_a_m: f64, pixel_b_m: f64) -> f64 {
        self.feature_size_m
            .unwrap_or_else(|| self.default_feature_size_m(pixel_a_m, pixel_b_m))
    }
}

/// A keypoint: a bright or dark blob at one scale.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Keypoint {
    /// Sample-index position in the image as given (column, row; sub-pixel).
    pub sample: [f64; 2],
    /// The same position as pixel/line (`sample` + 0.5).
    pub pixel: [f64; 2],
    /// Map position, through the image's geotransform.
    pub map: [f64; 2],
    /// Scale σ in pixels of the image as given.
    pub sigma_px: f64,
    /// Scale σ in metres on the ground.
    pub sigma_m: f64,
    /// The interpolated response: positive for a bright blob, negative for a dark one; its
    /// size is on the scale of [`KeypointParams::contrast`].
    pub response: f64,
}

impl Keypoint {
    /// True for a blob brighter than its surroundings.
    pub fn is_bright(&self) -> bool {
        self.response > 0.0
    }
}

/// What one detection found.
#[derive(Debug, Clone, PartialEq)]
pub struct Detection {
    /// The keypoints, strongest (largest |response|) first.
    pub keypoints: Vec<Keypoint>,
    /// The image was detected on every `decimation × decimation` block as one sample.
    pub decimation: usize,
    /// The band of σ searched, pixels of the image as given.
    pub band_px: [f64; 2],
    /// Extrema that passed the contrast, edge and support tests.
    pub extrema: usize,
    /// Of those, the ones non-maximum suppression kept (before the selection).
    pub distinct: usize,
}

/// Why a detection could not run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum KeypointError {
    /// An option out of range.
    #[error("{key} = {value} is out of range: it must be {need}")]
    Option {
        /// Pipeline-file key.
        key: &'static str,
        /// The value given.
        value: String,
        /// What it must be.
        need: &'static str,
    },
    /// The geotransform gives no usable pixel size.
    #[error("the image's geotransform gives no pixel size ({pixel_size} m); the raster needs a geotransform with pixels of non-zero area")]
    NoPixelSize {
        /// `GeoTransform::pixel_size` times the metres per unit (metres).
        pixel_size: f64,
    },
    /// The feature size is not a positive length.
    #[error("feature size {feature_size_m} m is not a positive length; give keypoints.feature_size_m in metres, or leave it out for the default")]
    FeatureSize {
        /// The value given.
        feature_size_m: f64,
    },
    /// The feature size is too small for the image's pixels.
    #[error("feature size {feature_size_m} m is too small for pixels of {pixel_m} m: its smallest scales would be finer than the pixels; give keypoints.feature_size_m of at least {smallest_m:.3} m")]
    FeatureTooSmall {
        /// The value given.
        feature_size_m: f64,
        /// The image's pixel size.
        pixel_m: f64,
        /// The smallest feature size this image supports.
        smallest_m: f64,
    },
}

/// Finds keypoints of about `feature_size_m` metres across in `image`, whose map units are
/// `metres_per_unit` metres.
pub fn detect(
    image: &Image,
    feature_size_m: f64,
    metres_per_unit: f64,
    params: &KeypointParams,
) -> Result<Detection, KeypointError> {
    params.validate()?;
    let pixel_m = image.geotransform.pixel_size() * metres_per_unit;
    if !(pixel_m.is_finite() && pixel_m > 0.0) {
        return Err(KeypointError::NoPixelSize {
            pixel_size: pixel_m,
        });
    }
    if !(feature_size_m.is_finite() && feature_size_m > 0.0) {
        return Err(KeypointError::FeatureSize { feature_size_m });
    }
    let spread = 2f64.powi(params.octaves_either_side as i32);
    let sigma_centre_px = feature_size_m / (2.0 * std::f64::consts::SQRT_2) / pixel_m;
    let sigma_lo_px = sigma_centre_px / spread;
    if sigma_lo_px < SIGMA_MIN * (1.0 - 1e-9) {
        return Err(KeypointError::FeatureTooSmall {
            feature_size_m,
            pixel_m,
            smallest_m: feature_size_m * SIGMA_MIN / sigma_lo_px,
        });
    }
    let factor = ((sigma_lo_px / SIGMA0).floor() as usize).max(1);
    let k = factor as f64;
    let band = scale_space::Band {
        sigma_lo: sigma_lo_px / k,
        per_octave: params.per_octave,
        octaves: 2 * params.octaves_either_side,
        blur_in: (params.input_blur_px.powi(2) + (k * k - 1.0) / 12.0).sqrt() / k,
        contrast: params.contrast,
        edge_ratio: params.edge_ratio,
    };
    let band_px = [sigma_lo_px, sigma_centre_px * spread];
    let grid = prepare::Grid::new(image, factor);
    let mut detection = Detection {
        keypoints: Vec::new(),
        decimation: factor,
        band_px,
        extrema: 0,
        distinct: 0,
    };
    if grid.valid_count == 0 || grid.range.1 <= grid.range.0 {
        return Ok(detection);
    }
    let found = scale_space::extrema(&grid, &band);
    detection.extrema = found.len();
    let distinct = select::suppress(found);
    detection.distinct = distinct.len();
    let cell = select::cell_size(grid.width, grid.height, params.target_count);
    let chosen = select::balanced(distinct, cell, params.target_count);
    let gt = &image.geotransform;
    detection.keypoints = chosen
        .into_iter()
        .map(|c| {
            // Block (c, r) of the decimated grid covers samples k·c .. k·c + k − 1.
            let sample = [k * c.x + 0.5 * (k - 1.0), k * c.y + 0.5 * (k - 1.0)];
            Keypoint {
                sample,
                pixel: [sample[0] + 0.5, sample[1] + 0.5],
                map: gt.sample_to_map(sample[0], sample[1]),
                sigma_px: c.sigma * k,
                sigma_m: c.sigma * k * pixel_m,
                response: c.response,
            }
        })
        .collect();
    Ok(detection)
}
