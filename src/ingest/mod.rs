//! Stage 1 — ingest: read landmarks from any GDAL vector dataset.
//!
//! **In:** a path (GeoPackage, Shapefile, GeoJSON, FlatGeobuf, CSV with x/y or lon/lat columns,
//! or anything else GDAL reads as vectors) and [`IngestOptions`] (layer, id field).
//! **Out:** a [`LandmarkSet`]: one landmark per feature — id, position in the file's own
//! coordinates, and the layer's CRS as WKT if it has one.
//!
//! Points are taken as they are; polygons and multipolygons as their area-weighted centroid
//! (`geo`'s `Centroid`); any other geometry as its centroid. Z and M are dropped. Features with
//! no geometry, or an empty one, are skipped and counted. The input is opened read-only and is
//! never modified.
//!
//! A CSV file's x is its column named x, lon, long, longitude, easting, east or e (the first of
//! these names present, any case), its y the column named y, lat, latitude, northing, north or
//! n; a row whose coordinate text is not a finite number is an error, not a skipped feature.
//!
//! Checks that make the rest of the pipeline meaningful happen here, with the file named in
//! the error: non-finite coordinates, duplicate positions, and a set that is all on one line.

mod read;

pub use read::read_landmarks;

use serde::{Deserialize, Serialize};
use std::path::PathBuf;

/// One input survey as the user names it: the dataset, and optionally its layer, id field and
/// CRS override (`[reference]` / `[target]` in a pipeline file).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SurveyInput {
    /// The dataset.
    pub path: PathBuf,
    /// Layer name; `None`: the only layer, or the first one.
    #[serde(default)]
    pub layer: Option<String>,
    /// Attribute holding each landmark's id; `None`: the feature id.
    #[serde(default)]
    pub id: Option<String>,
    /// CRS override (anything PROJ accepts), or "local" for an unreferenced local grid
    /// (target only); `None`: the file's own CRS.
    #[serde(default)]
    pub crs: Option<String>,
}

impl SurveyInput {
    /// A survey read with every option at its default.
    pub fn new(path: PathBuf) -> SurveyInput {
        SurveyInput {
            path,
            layer: None,
            id: None,
            crs: None,
        }
    }
}

/// Which layer and which id field to read.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct IngestOptions {
    /// Layer name; `None`: the only layer, or the first one.
    pub layer: Option<String>,
    /// Attribute holding each landmark's id; `None`: the feature id.
    pub id_field: Option<String>,
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
    /// Features skipped because they had no geometry or an empty one.
    pub skipped_without_geometry: usize,
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
    /// GDAL cannot open it as vector data.
    #[error("{path}: not a vector dataset GDAL can read ({detail}); give a GeoPackage, Shapefile, GeoJSON, FlatGeobuf or CSV file")]
    Unreadable {
        /// Path given.
        path: PathBuf,
        /// GDAL's words.
        detail: String,
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
    #[error("{path}, layer '{layer}': no features with a geometry ({skipped} skipped without one); choose another layer or file")]
    Empty {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Features without geometry.
        skipped: usize,
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
    /// Any other GDAL failure while reading.
    #[error("{path}: reading failed: {detail}")]
    Gdal {
        /// Path given.
        path: PathBuf,
        /// GDAL's words.
        detail: String,
    },
}
