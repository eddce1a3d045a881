//! Stage 1 — ingest: read landmarks from a GDAL vector dataset or a raster image.
//!
//! **In:** a [`SurveyInput`]: the path of a dataset GDAL opens (GeoPackage, Shapefile,
//! GeoJSON, FlatGeobuf, CSV with x/y, lon/lat or easting/northing columns, or anything else
//! GDAL reads as vectors; or a georeferenced image: GeoTIFF, COG, VRT, JPEG 2000, …), and
//! optionally the layer, the id field and, for a CSV table, the x and y columns (vectors) or
//! the band (rasters); for rasters also the keypoint detector's options. (Its `crs` is for the
//! working-frame stage; ingest does not use it.)
//! **Out:** a [`LandmarkSet`]: one landmark per feature or keypoint — id, position in the
//! file's own coordinates, the CRS as WKT if it has one — and the skipped features counted by
//! cause; for a raster also [`RasterLandmarks`] (the image, and each keypoint's pixel/line,
//! scale and response).
//!
//! What a dataset holds is decided from what GDAL opens, not from the file's name
//! ([`SourceKind`]): vector layers are read (`vector.rs`). A raster image is opened as a
//! [`RasterSource`] (`raster.rs`: a band or the luminance, its geotransform and CRS, read
//! decimated or by windows into an `Image`, with its validity mask; an image in a geographic
//! CRS or georeferenced by GCPs only through `georef.rs`: a geotransform from the GCPs, or a
//! warped view on a projected grid) and its keypoints become the landmarks
//! (`raster_landmarks.rs`, through [`crate::keypoints`]). A file that exists but
//! cannot be read (permission denied) is said to be so before GDAL is asked.
//!
//! Points are taken as they are; polygons and multipolygons as their area-weighted centroid
//! (`geo`'s `Centroid`); any other geometry as its centroid. Z and M are dropped. A GDAL error
//! while fetching the features (a truncated or damaged file) is an error naming the feature,
//! not a short read. The input is opened read-only and is never modified.
//!
//! **Skipped or refused.** A feature that carries no position is skipped and counted by cause
//! ([`SkipCounts`], shown in every report): no geometry, an empty geometry, or an invalid one
//! (coordinates from which no finite centroid follows, e.g. a polygon whose area overflows).
//! Such a feature offers nothing to match and the matcher is built for landmarks missing on
//! either side, so the run goes on and says how many were left out; a layer left with no
//! landmark is an error. A feature whose position is there but unusable is an error naming it,
//! never a skip, because it means the numbers of the file are damaged or in the wrong units:
//! a coordinate that is not finite or whose magnitude exceeds [`COORDINATE_LIMIT`] (1e15,
//! far beyond any CRS's range on Earth, whose circumference is about 4e7 m), a CSV cell that
//! is not a number. So are fewer than 3 landmarks, duplicated positions and a
//! set all on one line (`validate.rs`).
//!
//! **Ids** are the id field's text exactly as GDAL hands it over, byte for byte: not trimmed
//! (`" 12"` and `"12"` are two ids), not converted lossily. An id field whose values repeat, a
//! value that is not valid UTF-8 (the file's encoding is not declared), and a number GDAL may
//! have clamped or rounded (an Integer64 at its limit, a Real beyond 2^53 or with more digits
//! than GDAL prints) are errors. A blank value is a missing id, an error too.
//!
//! When GDAL reads the file with its CSV driver, every column is read as text (no type
//! detection, which would turn `0012` into `12` and a 25-digit id into a rounded real) and the
//! position is parsed here from the x and y columns (`csv.rs`): the columns named by
//! `x_column` / `y_column`, else one pair of conventional names (x/y, lon/lat,
//! easting/northing, any case); two pairs, or two columns for one axis, are refused as
//! ambiguous. A cell that is not a finite number is an error, not a skipped feature.

mod csv;
pub mod georef;
mod gpkg_points;
pub(crate) use open::{clear_gdal_error, take_gdal_failure};
mod open;
mod raster;
mod raster_landmarks;
mod validate;
mod vector;

pub use georef::PixelMap;
pub use raster::{
    BandChoice, RasterError, RasterInfo, RasterSource, ReadLevel, ReadPlan, LUMINANCE_WEIGHTS,
    STRIP_PIXELS,
};
pub use raster_landmarks::{RasterLandmarks, RasterView};

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
    /// CSV tables only: the column holding x (easting or longitude); `None`: chosen by name.
    #[serde(default)]
    pub x_column: Option<String>,
    /// CSV tables only: the column holding y (northing or latitude); `None`: chosen by name.
    #[serde(default)]
    pub y_column: Option<String>,
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
            x_column: None,
            y_column: None,
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
    /// Features whose geometry has coordinates but no finite centroid (e.g. a polygon whose
    /// area overflows).
    pub invalid: usize,
}

impl SkipCounts {
    /// All skipped features.
    pub fn total(&self) -> usize {
        self.no_geometry + self.empty + self.invalid
    }
}

/// The largest coordinate magnitude accepted, in the file's units: 1e15 (common practice: no
/// CRS on Earth needs more than about 4e7 m or 360°; a larger number is damage or wrong units).
pub const COORDINATE_LIMIT: f64 = 1e15;

/// The causes with a count, e.g. `2 without a geometry, 1 with an empty geometry`; `none` when
/// nothing was skipped.
impl fmt::Display for SkipCounts {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let parts: Vec<String> = [
            (self.no_geometry, "without a geometry"),
            (self.empty, "with an empty geometry"),
            (
                self.invalid,
                "with an invalid geometry (no finite centroid)",
            ),
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

impl LandmarkSet {
    /// What was read, as the reports name it: `layer NAME` for a vector layer; for an image,
    /// its landmarks' own description (`keypoints of band 1`, or the area-based seed's grid
    /// points and what they replace), which is no layer.
    pub fn what(&self) -> String {
        if self.raster.is_some() {
            self.layer.clone()
        } else {
            format!("layer {}", self.layer)
        }
    }
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
    read_landmarks_on(input, keypoints, other_pixel_m, None)
}

/// As [`read_landmarks_with`], a raster that needs a warped view (a geographic CRS, GCPs
/// warped through their polynomial) put on `grid` when it is a projected CRS
/// ([`RasterSource::open_on`]; the match passes its working CRS, so that both images share
/// one grid).
pub fn read_landmarks_on(
    input: &SurveyInput,
    keypoints: &KeypointParams,
    other_pixel_m: Option<f64>,
    grid: Option<&str>,
) -> Result<LandmarkSet, IngestError> {
    open_survey(input, grid)?.read(keypoints, other_pixel_m)
}

/// A survey opened once, read-only, so that what the match asks of it before reading (the
/// pixel size, the CRS) costs no second open: GDAL parses some vector formats (GeoJSON, CSV)
/// whole when it opens them.
pub struct OpenedSurvey<'a> {
    input: &'a SurveyInput,
    opened: Opened,
}

enum Opened {
    Vector(open::Opened),
    Raster(Box<RasterSource>),
}

/// Opens `input`: a vector layer as it is, a raster on `grid` as [`read_landmarks_on`] reads
/// it. What it holds is decided from what GDAL opens ([`SourceKind`]).
pub fn open_survey<'a>(
    input: &'a SurveyInput,
    grid: Option<&str>,
) -> Result<OpenedSurvey<'a>, IngestError> {
    let opened = open::open_source(&input.path)?;
    let opened = match opened.kind {
        SourceKind::Vector => Opened::Vector(opened),
        SourceKind::Raster => {
            drop(opened);
            Opened::Raster(Box::new(RasterSource::open_on(
                &input.path,
                input.band,
                grid,
            )?))
        }
    };
    Ok(OpenedSurvey { input, opened })
}

impl OpenedSurvey<'_> {
    /// Whether the survey is a vector layer (not an image).
    pub fn is_vector(&self) -> bool {
        matches!(self.opened, Opened::Vector(_))
    }

    /// The ground size of a raster's pixels in metres; `None` for a vector survey.
    pub fn pixel_metres(&self) -> Result<Option<f64>, IngestError> {
        match &self.opened {
            Opened::Vector(_) => Ok(None),
            Opened::Raster(source) => raster_landmarks::pixel_metres(source).map(Some),
        }
    }

    /// A raster's CRS as it is read (a warped view's grid), as WKT; `None` for a vector
    /// survey or an image with none.
    pub fn raster_crs_wkt(&self) -> Option<String> {
        match &self.opened {
            Opened::Vector(_) => None,
            Opened::Raster(source) => source.info().crs_wkt.clone(),
        }
    }

    /// Reads the landmarks, as [`read_landmarks_with`] does.
    pub fn read(
        self,
        keypoints: &KeypointParams,
        other_pixel_m: Option<f64>,
    ) -> Result<LandmarkSet, IngestError> {
        match self.opened {
            Opened::Vector(opened) => vector::read_vector(self.input, opened),
            Opened::Raster(source) => {
                let own = raster_landmarks::pixel_metres(&source)?;
                let size = keypoints.feature_size_for(own, other_pixel_m.unwrap_or(own));
                raster_landmarks::read_keypoints(&source, size, keypoints)
            }
        }
    }
}

/// The ground size of a raster survey's pixels in metres; `None` for a vector survey.
pub fn raster_pixel_metres(input: &SurveyInput) -> Result<Option<f64>, IngestError> {
    raster_pixel_metres_on(input, None)
}

/// As [`raster_pixel_metres`], on the grid [`read_landmarks_on`] would use.
pub fn raster_pixel_metres_on(
    input: &SurveyInput,
    grid: Option<&str>,
) -> Result<Option<f64>, IngestError> {
    open_survey(input, grid)?.pixel_metres()
}

/// A raster survey opened again as its landmarks were read: on the same grid when it was
/// read through a warped view.
pub fn reopen_raster(
    input: &SurveyInput,
    landmarks: &RasterLandmarks,
) -> Result<RasterSource, IngestError> {
    RasterSource::open_on(
        &input.path,
        input.band,
        landmarks.view.as_ref().map(|v| v.grid.as_str()),
    )
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
    /// A landmark's position is not finite or beyond [`COORDINATE_LIMIT`].
    #[error("{path}, layer '{layer}': landmark '{id}' (feature {fid}) has a coordinate that is non-finite or outside the range ±1e15: ({x:e}, {y:e}); fix or remove that feature, or check the file's units")]
    OutOfRange {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Landmark id.
        id: String,
        /// Feature id.
        fid: String,
        /// x read.
        x: f64,
        /// y read.
        y: f64,
    },
    /// A CSV row has text in its coordinate columns that is not a number within the
    /// coordinate range.
    #[error("{path}, layer '{layer}': landmark '{id}' has a non-finite, out-of-range (beyond ±1e15) or unreadable coordinate ({cells}); fix or remove that row")]
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
    #[error("{path}: the columns '{first}' and '{second}' could both hold the {axis} coordinate; rename or remove one of them{}", COLUMN_OPTIONS)]
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
    /// A CSV table has two pairs of coordinate columns (say lon/lat and easting/northing).
    #[error("{path}: two pairs of coordinate columns, '{first_x}'/'{first_y}' and '{second_x}'/'{second_y}'; say which pair holds the positions{}", COLUMN_OPTIONS)]
    AmbiguousPairs {
        /// Path given.
        path: PathBuf,
        /// x of one pair.
        first_x: String,
        /// y of that pair.
        first_y: String,
        /// x of the other pair.
        second_x: String,
        /// y of the other pair.
        second_y: String,
    },
    /// A CSV table has no recognised pair of coordinate columns (and no geometry column).
    #[error("{path}: no coordinate columns found: x is looked for under the names {}, y under {} (any case, as one pair), and the file's columns are {columns}{}", csv::X_NAMES.join(", "), csv::Y_NAMES.join(", "), COLUMN_OPTIONS)]
    NoCoordinateColumns {
        /// Path given.
        path: PathBuf,
        /// The file's columns.
        columns: String,
    },
    /// A column named by `x_column` / `y_column` is not in the table, or is unusable.
    #[error("{path}: {problem}; the file's columns are {columns}")]
    BadCoordinateColumn {
        /// Path given.
        path: PathBuf,
        /// What is wrong, e.g. `no column named 'east' (x_column)`.
        problem: String,
        /// The file's columns.
        columns: String,
    },
    /// `x_column` / `y_column` given for a dataset that is not a CSV table.
    #[error("{path}: x_column / y_column name the coordinate columns of a CSV table, but GDAL reads this file with its {driver} driver, whose geometries give the positions; leave them out")]
    ColumnsNotApplicable {
        /// Path given.
        path: PathBuf,
        /// Driver that opened it.
        driver: String,
    },
    /// A CSV table holds a NUL byte, which GDAL's CSV reader misreads.
    #[error("{path}: holds a NUL byte (at byte {offset}); GDAL's CSV reader ends a cell there and misreads the rows after it — remove it (the file may not be text)")]
    NulInCsv {
        /// Path given.
        path: PathBuf,
        /// Its byte offset.
        offset: u64,
    },
    /// The path exists but cannot be read.
    #[error("{path}: cannot be read ({reason}); check the file's permissions (your user needs read access, and access to its folders) or copy it somewhere readable")]
    CannotRead {
        /// Path given.
        path: PathBuf,
        /// Why, e.g. "permission denied".
        reason: String,
    },
    /// The id field's values repeat.
    #[error("{path}, layer '{layer}': the id field '{field}' does not tell the features apart: {repeated} of its values repeat ({examples}); choose a field with one value per feature, or none to use the feature ids")]
    DuplicateIds {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Id field (or "feature id").
        field: String,
        /// How many distinct values occur more than once.
        repeated: usize,
        /// A few of them with their counts, e.g. `'house' 120 times, 'shed' 4 times`.
        examples: String,
    },
    /// An id is not valid UTF-8 text.
    #[error("{path}, layer '{layer}': feature {fid}: the value of id field '{field}' is not valid UTF-8 text ({shown}); {}", encoding_advice(.driver))]
    IdNotUtf8 {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Feature id.
        fid: String,
        /// Id field.
        field: String,
        /// The bytes, invalid ones as `\xNN`.
        shown: String,
        /// GDAL driver that read it.
        driver: String,
    },
    /// An id is a number GDAL may have clamped or rounded.
    #[error("{path}, layer '{layer}': feature {fid}: id field '{field}' holds numbers that GDAL reads as {kind}, and this one reads as {value}, which may not be the number written ({why}); store the ids as text (a string field; quoted in GeoJSON), or choose another id field")]
    LossyNumericId {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Feature id.
        fid: String,
        /// Id field.
        field: String,
        /// "64-bit integers" or "floating-point numbers".
        kind: String,
        /// The value as read.
        value: String,
        /// Why it is not trusted.
        why: String,
    },
    /// Fewer landmarks than any 2-D transform needs.
    #[error("{path}, layer '{layer}': only {count} {} read; at least {MIN_LANDMARKS} landmarks, not all on one line, are needed to fix a 2-D transform (and signatures need more); use a survey with more landmarks", landmark_word(*count))]
    TooFewLandmarks {
        /// Path given.
        path: PathBuf,
        /// Layer read.
        layer: String,
        /// Landmarks read.
        count: usize,
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

/// The fewest landmarks a survey may have: three, not on one line.
pub const MIN_LANDMARKS: usize = 3;

/// "landmark" or "landmarks".
fn landmark_word(count: usize) -> &'static str {
    if count == 1 {
        "landmark"
    } else {
        "landmarks"
    }
}

/// How to name the coordinate columns of a CSV table, at the end of a message.
const COLUMN_OPTIONS: &str = "; or name the columns with x_column and y_column (on the command line --reference-x-column and --reference-y-column, --target-x-column and --target-y-column, or --x-column and --y-column of landmarks)";

/// How to make GDAL read text in the right encoding, by driver.
fn encoding_advice(driver: &str) -> &'static str {
    match driver {
        "ESRI Shapefile" => "declare the .dbf file's encoding: a .cpg file beside the .shp holding its code page (e.g. CP1252 or ISO-8859-1), or the environment variable SHAPE_ENCODING=CP1252 (GDAL then converts the text to UTF-8); or save the file again as UTF-8",
        "CSV" => "GDAL reads CSV text as it is: save the table as UTF-8 (e.g. iconv -f CP1252 -t UTF-8)",
        _ => "save the file again with its text in UTF-8 (GDAL's drivers for GeoPackage, GeoJSON and FlatGeobuf expect UTF-8)",
    }
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
