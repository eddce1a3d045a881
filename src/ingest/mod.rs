//! Stage 1 — ingest: read landmarks from a GDAL vector dataset or a raster image.
//!
//! **In:** a [`SurveyInput`]: the path of a dataset GDAL opens (GeoPackage, Shapefile,
//! GeoJSON, FlatGeobuf, CSV with x/y or lon/lat columns, or anything else GDAL reads as
//! vectors; or a georeferenced image: GeoTIFF, COG, VRT, JPEG 2000, …), and optionally the
//! layer and the id field (vectors) or the band (rasters); for rasters also the keypoint
//! detector's options. (Its `crs` is for the working-frame stage; ingest does not use it.)
//! **Out:** a [`LandmarkSet`]: one landmark per feature or keypoint — id, position in the
//! file's own coordinates, the CRS as WKT if it has one — and the skipped features counted by
//! cause; for a raster also [`RasterLandmarks`] (the image, and each keypoint's pixel/line,
//! scale and response).
//!
//! What a dataset holds is decided from what GDAL opens, not from the file's name
//! ([`SourceKind`]): vector layers are read (`vector.rs`). A raster image is opened as a
//! [`RasterSource`] (`raster.rs`: a band or the luminance, its geotransform and CRS, read
//! decimated or by windows into an `Image`, with its validity mask) and its keypoints become
//! the landmarks (`raster_landmarks.rs`, through [`crate::keypoints`]).
//!
//! Points are taken as they are; polygons and multipolygons as their area-weighted centroid
//! (`geo`'s `Centroid`); any other geometry as its centroid. Z and M are dropped. Features with
//! no geometry, or an empty one, are skipped and counted ([`SkipCounts`]). A GDAL error while
//! fetching the features (a truncated or damaged file) is an error naming the feature, not a
//! short read. The input is opened read-only and is never modified.
//!
//! When GDAL reads the file with its CSV driver, x is the column named x, lon, long, longitude,
//! easting, east or e (the first of these names present, any case), y the column named y, lat,
//! latitude, northing, north or n; a row whose coordinate text is not a finite number is an
//! error, not a skipped feature (`csv.rs`).
//!
//! Checks that make the rest of the pipeline meaningful happen here, with the file named in
//! the error (`validate.rs`): non-finite coordinates, duplicate positions, and a set that is
//! all on one line.

mod csv;
mod open;
mod raster;
mod raster_landmarks;
mod validate;
mod vector;

pub use raster::{
    BandChoice, RasterError, RasterInfo, RasterSource, ReadLevel, ReadPlan, LUMINANCE_WEIGHTS,
    STRIP_PIXELS,
};
pub use raster_landmarks::RasterLandmarks;

use crate::keypoints::KeypointParams;
use gdal::errors::GdalError;
use serde::{Deserialize, Serialize};
use std::fmt;
use std::path::PathBuf;

/// One input survey: which dataset, which layer and id field, and which CRS it is in. Used by
/// the command line and, as a table, by pipeline files.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SurveyInput {
    /// The dataset (any file or name GDAL opens).
    pub path: PathBuf,
    /// Layer name; `None`: the only layer, or the first one.
    #[serde(default)]
    pub layer: Option<String>,
    /// Attribute holding each landmark's id; `None`: the feature id.
    #[serde(default)]
    pub id: Option<String>,
    /// CRS override, or "local" for an unreferenced local grid (target only); `None`: the
    /// layer's own CRS. Read by the working-frame stage, not by ingest.
    #[serde(default)]
    pub crs: Option<String>,
    /// Band of a raster image: a number from 1, or "luminance" of red, green, blue; `None`:
    /// the default rule of [`RasterSource`]. Not used for vector datasets.
    #[serde(default)]
    pub band: Option<BandChoice>,
}

impl SurveyInput {
    /// A survey read with every option at its default.
    pub fn new(path: PathBuf) -> SurveyInput {
        SurveyInput {
            path,
            layer: None,
            id: None,
            crs: None,
            band: None,
        }
    }
}

/// Opens the raster image of one survey read-only, with its `band` choice. Errors: the file is
/// missing, unreadable, a vector dataset, not on a map grid, or has no such band.
pub fn open_raster(input: &SurveyInput) -> Result<RasterSource, IngestError> {
    RasterSource::open(&input.path, input.band)
}

/// What a dataset holds, as GDAL opens it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SourceKind {
    /// One or more vector layers.
    Vector,
    /// Raster bands and no vector layers.
    Raster,
}

/// Features skipped while reading a layer, by cause.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct SkipCounts {
    /// Features without a geometry (a null one).
    pub no_geometry: usize,
    /// Features whose geometry is empty (e.g. a point with no coordinates).
    pub empty: usize,
}

impl SkipCounts {
    /// All skipped features.
    pub fn total(&self) -> usize {
        self.no_geometry + self.empty
    }
}

/// The causes with a count, e.g. `2 without a geometry, 1 with an empty geometry`; `none` when
/// nothing was skipped.
impl fmt::Display for SkipCounts {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let parts: Vec<String> = [
            (self.no_geometry, "without a geometry"),
            (self.empty, "with an empty geometry"),
        ]
        .iter()
        .filter(|(n, _)| *n > 0)
        .map(|(n, cause)| format!("{n} {cause}"))
        .collect();
        if parts.is_empty() {
            f.write_str("none")
        } else {
            f.write_str(&parts.join(", "))
        }
    }
}

/// Landmarks read from one dataset.
#[derive(Debug, Clone, PartialEq)]
pub struct LandmarkSet {
    /// The dataset read.
    pub source: PathBuf,
    /// The layer read.
    pub layer: String,
    /// One id per landmark (the id field's text, or the feature id).
    pub ids: Vec<String>,
    /// Positions in the file's coordinates (x = easting or longitude, y = northing or
    /// latitude, whatever the CRS's own axis order).
    pub points: Vec<[f64; 2]>,
    /// The layer's CRS as WKT, if it declares one.
    pub crs_wkt: Option<String>,
    /// Features skipped, by cause.
    pub skipped: SkipCounts,
    /// For a raster survey, the image and its keypoints (one a landmark); `None` for vectors.
    pub raster: Option<Box<RasterLandmarks>>,
}

/// Reads the landmarks of one survey, with the detector's defaults for a raster. The dataset is
/// opened read-only; what it holds is decided from what GDAL opens ([`SourceKind`]).
pub fn read_landmarks(input: &SurveyInput) -> Result<LandmarkSet, IngestError> {
    read_landmarks_with(input, &KeypointParams::default(), None)
}

/// Reads the landmarks of one survey: a vector layer's features, or a raster's keypoints found
/// at `keypoints.feature_size_m`, or — without one — at the default size for this image and an
/// image of `other_pixel_m` metres a pixel (the other survey of the match, when it is a raster;
/// [`KeypointParams::feature_size_for`]).
pub fn read_landmarks_with(
    input: &SurveyInput,
    keypoints: &KeypointParams,
    other_pixel_m: Option<f64>,
) -> Result<LandmarkSet, IngestError> {
    let opened = open::open_source(&input.path)?;
    match opened.kind {
        SourceKind::Vector => vector::read_vector(input, opened),
        SourceKind::Raster => {
            let source = RasterSource::open(&input.path, input.band)?;
            let own = raster_landmarks::pixel_metres(&source)?;
            let size = keypoints.feature_size_for(own, other_pixel_m.unwrap_or(own));
            raster_landmarks::read_keypoints(&source, size, keypoints)
        }
    }
}

/// The ground size of a raster survey's pixels in metres; `None` for a vector survey.
pub fn raster_pixel_metres(input: &SurveyInput) -> Result<Option<f64>, IngestError> {
    let opened = open::open_source(&input.path)?;
    match opened.kind {
        SourceKind::Vector => Ok(None),
        SourceKind::Raster => {
            let source = RasterSource::open(&input.path, input.band)?;
            raster_landmarks::pixel_metres(&source).map(Some)
        }
    }
}

/// What is wrong with an input dataset. Every variant names the file.
#[derive(Debug, thiserror::Error)]
pub enum IngestError {
    /// The path does not exist.
    #[error("{path}: no such file; check the path")]
    NotFound {
        /// Path given.
        path: PathBuf,
    },
    /// GDAL cannot open it.
    #[error("{path}: not a vector dataset GDAL can read ({}); give a GeoPackage, Shapefile, GeoJSON, FlatGeobuf or CSV file", open_failure_words(.source))]
    Unreadable {
        /// Path given.
        path: PathBuf,
        /// GDAL's error.
        #[source]
        source: GdalError,
    },
    /// The dataset has no layers.
    #[error("{path}: the dataset has no vector layers")]
    NoLayers {
        /// Path given.
        path: PathBuf,
    },
    /// The asked-for layer does not exist.
    #[error("{path}: no layer named '{layer}'; the layers are: {available}")]
    UnknownLayer {
        /// Path given.
        path: PathBuf,
        /// Layer asked for.
        layer: String,
        /// The layers there are.
        available: String,
    },
    /// The asked-for id field does not exist.
    #[error("{path}, layer '{layer}': no field named '{field}'; the fields are: {available}")]
    UnknownField {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Field asked for.
        field: String,
        /// The fields there are.
        available: String,
    },
    /// The id field is empty on some feature.
    #[error("{path}, layer '{layer}': feature {fid} has no value in id field '{field}'; fill it in or choose another id field")]
    MissingId {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Feature id.
        fid: String,
        /// Id field.
        field: String,
    },
    /// No feature with a geometry.
    #[error("{path}, layer '{layer}': no features with a geometry ({}); choose another layer or file", empty_layer_words(.skipped))]
    Empty {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Features skipped, by cause.
        skipped: SkipCounts,
    },
    /// GDAL failed while fetching a feature: the layer was not read to its end.
    #[error("{path}, layer '{layer}': GDAL failed reading {}: {}; the file may be truncated or damaged — repair it or export it again", feature_position(*.index, *.fid, *.after_fid, *.declared), gdal_words(.source))]
    ReadFailed {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Features fetched before the failing one (its 0-based position in reading order).
        index: usize,
        /// The failing feature's id, when GDAL returned the feature along with the error.
        fid: Option<u64>,
        /// The id of the last feature fetched without error.
        after_fid: Option<u64>,
        /// The feature count the layer declares, when it can say without a scan.
        declared: Option<u64>,
        /// GDAL's error (boxed: it would make every `IngestError` larger).
        #[source]
        source: Box<GdalError>,
    },
    /// A coordinate is NaN or infinite.
    #[error("{path}, layer '{layer}': landmark '{id}' has a non-finite coordinate ({x}, {y}); fix or remove that feature")]
    NonFinite {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Landmark id.
        id: String,
        /// x read.
        x: f64,
        /// y read.
        y: f64,
    },
    /// A CSV row has text in its coordinate columns that is not a finite number (GDAL gives such
    /// a row no geometry).
    #[error("{path}, layer '{layer}': landmark '{id}' has a non-finite or unreadable coordinate ({cells}); fix or remove that row")]
    UnreadableCoordinate {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Landmark id.
        id: String,
        /// The coordinate cells as read, e.g. `x 'nan', y '5210044.87'`.
        cells: String,
    },
    /// Two CSV columns could both hold the same coordinate.
    #[error("{path}: the columns '{first}' and '{second}' could both hold the {axis} coordinate; rename or remove one of them")]
    AmbiguousColumns {
        /// Path given.
        path: PathBuf,
        /// "x" or "y".
        axis: String,
        /// One column.
        first: String,
        /// The other.
        second: String,
    },
    /// Two landmarks share a position.
    #[error("{path}, layer '{layer}': {count} duplicated positions, e.g. '{first}' and '{second}' at ({x}, {y}); remove or merge duplicated features and run again")]
    DuplicatePositions {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// How many duplicates.
        count: usize,
        /// One of them.
        first: String,
        /// Its twin.
        second: String,
        /// Where.
        x: f64,
        /// Where.
        y: f64,
    },
    /// All landmarks lie on one straight line.
    #[error("{path}, layer '{layer}': all {count} landmarks lie on one straight line, which fixes no 2-D transform; use landmarks spread over an area")]
    Collinear {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Landmarks read.
        count: usize,
    },
    /// A raster image that cannot be read as asked.
    #[error(transparent)]
    Raster(#[from] RasterError),
    /// The keypoint detector refused the image or its options.
    #[error("{path}: {source}")]
    Keypoints {
        /// Path given.
        path: PathBuf,
        /// The detector's reason.
        #[source]
        source: crate::keypoints::KeypointError,
    },
    /// Any other GDAL failure while reading.
    #[error("{path}: reading failed: {}", gdal_words(.source))]
    Gdal {
        /// Path given.
        path: PathBuf,
        /// GDAL's error.
        #[source]
        source: GdalError,
    },
}

/// GDAL's own words for an error: its message when it has one, else the error's description.
fn gdal_words(e: &GdalError) -> String {
    match e {
        GdalError::NullPointer { msg, .. } | GdalError::CplError { msg, .. }
            if !msg.trim().is_empty() =>
        {
            msg.trim().to_string()
        }
        other => other.to_string(),
    }
}

/// Why a dataset did not open: GDAL's message, or — when GDAL gave none, which is what
/// happens when no driver claims the file — that no driver recognises it.
fn open_failure_words(e: &GdalError) -> String {
    match e {
        GdalError::NullPointer { msg, .. } if msg.trim().is_empty() => {
            "no GDAL driver recognises it".to_string()
        }
        other => gdal_words(other),
    }
}

/// The skipped features of a layer that gave no landmark, e.g. `3 skipped: 3 without a
/// geometry`.
fn empty_layer_words(skipped: &SkipCounts) -> String {
    match skipped.total() {
        0 => "the layer has no features".to_string(),
        n => format!("{n} skipped: {skipped}"),
    }
}

/// Where in a layer reading failed, e.g. `feature number 149 of 300 (the one after feature id
/// 147)`.
fn feature_position(
    index: usize,
    fid: Option<u64>,
    after_fid: Option<u64>,
    declared: Option<u64>,
) -> String {
    let of = declared.map(|n| format!(" of {n}")).unwrap_or_default();
    let which = match (fid, after_fid) {
        (Some(f), _) => format!(" (feature id {f})"),
        (None, Some(a)) => format!(" (the one after feature id {a})"),
        (None, None) if index == 0 => " (the first one)".to_string(),
        (None, None) => String::new(),
    };
    format!("feature number {}{of}{which}", index + 1)
}
