//! Raster surveys: a georeferenced image opened read-only and read, one band (or the luminance
//! of its colour bands) at a time, into an [`Image`].
//!
//! **In:** the path of a raster GDAL opens (GeoTIFF striped or tiled, BigTIFF, COG, VRT,
//! JPEG 2000 where the GDAL build reads it, …) and an optional [`BandChoice`].
//! **Out:** a [`RasterSource`]: what the image is ([`RasterInfo`]: size, bands, data type,
//! no-data value, geotransform, CRS as WKT, pixel size; [`RasterSource::describe`] in words),
//! and from it [`Image`]s: the whole image at 1/`decimation` resolution
//! ([`RasterSource::read`]) or a full-resolution window ([`RasterSource::read_window`]).
//! Or a [`RasterError`] naming the file and what to do.
//!
//! **Georeferencing** (`georef.rs`). An image on a projected map grid (a geotransform: rotated
//! and skewed ones are fine, they are affine) is read as it is. An image georeferenced by
//! ground control points only is read with their first-order fit as its geotransform when
//! every GCP lies within a tenth of a pixel of it, else through a warp of their second-order
//! polynomial (GCPs too few or inconsistent for either are refused:
//! [`RasterError::TooFewGcps`], [`RasterError::GcpsInconsistent`]). An image in a geographic
//! CRS (degrees), or warped through its GCPs, is read through a GDAL warped VRT on a projected
//! grid ([`RasterSource::open_on`]: the CRS asked for, else its GCPs' projected CRS, else the
//! UTM zone of its centre): then [`RasterInfo`]'s size, geotransform, CRS and pixel size are
//! the view's, and [`RasterSource::pixel_map`] takes the view's map positions back to the
//! file's own pixel/line. An image with no georeferencing — GDAL's default
//! `[0, 1, 0, 0, 0, 1]` and no GCPs — is refused ([`RasterError::NotGeoreferenced`]).
//!
//! **Band.** [`BandChoice::Band`] (numbered from 1, as GDAL does) or [`BandChoice::Luminance`]
//! of bands 1-3 as red, green, blue, weighted by [`LUMINANCE_WEIGHTS`] (ITU-R BT.709). Without
//! a choice: the band of a one-band image; the luminance of an image of 3 or 4 bands whose
//! bands 1-3 are tagged red, green, blue; otherwise band 1, which `describe` says.
//!
//! **Validity.** GDAL's mask band of every band read says which pixels are data (GDAL's
//! `GetMaskBand` / `GetMaskFlags`: all valid, a no-data value, an alpha band, a mask shared by
//! the dataset). A full-resolution pixel is valid when its mask is non-zero — for an alpha band,
//! when it is 255, fully opaque: a partly transparent pixel is blended with what lies behind —
//! and its value is finite. A luminance sample needs all three bands valid. **A sample
//! averaged here is valid only when every pixel it covers is** (read from the mask of the level
//! averaged: the full resolution, unless an overview is read), so that no collar or no-data
//! border leaks into an average. An overview's pixels take the overview's own mask as the file
//! stores it: there, a pixel astride a collar is as valid as the overview's maker left it (not
//! checked against the full resolution). Invalid samples hold 0 and are `false` in [`Image::valid`].
//!
//! **Decimation and memory.** `read(d)` returns sample (c, r) = the mean of the
//! full-resolution pixels [c·d, (c+1)·d) × [r·d, (r+1)·d) on the grid `GeoTransform::scaled(d)`
//! — the last `W mod d` columns and `H mod d` rows are left out — computed here from
//! full-resolution strips, in `f64` (GDAL's decimated RasterIO with average resampling rounds
//! the means of integer bands to whole numbers; see [`ReadLevel::Averaged`]). When the file has
//! an overview at that factor (⌈W/d⌉ × ⌈H/d⌉ or ⌊W/d⌋ × ⌊H/d⌋ pixels) it is read instead, as
//! it is, on GDAL's grid for it (`GeoTransform::scaled_xy(W/w, H/h)`), with validity from the
//! overview's own mask; failing that, the coarsest overview at a factor f that divides d,
//! averaged here d/f × d/f pixels a sample (on that grid, `scaled(d/f)`). Either way the image
//! is read in strips of rows ([`ReadPlan`]): no buffer holds more than [`STRIP_PIXELS`] pixels
//! of the level read (or one strip row when a single row needs more), so a 30 000 × 30 000 px
//! mosaic is never in memory whole at full resolution. Only the result is.
//! [`RasterSource::fastest_decimation`] says when a somewhat finer grid, read from an
//! overview as it is, serves a caller better than block means of the full resolution.
//!
//! **Threads.** A GeoTIFF's blocks are decoded by GDAL on the current rayon pool's threads, and
//! the sums and means of each strip are shared between them by rows; the samples are the same
//! with any number of threads (`tests/parallel.rs`).

use super::georef::{self, PixelMap};
use super::open::open_source;
use super::{IngestError, SourceKind};
use crate::image::{GeoTransform, Image};
use gdal::raster::{ColorInterpretation, RasterBand};
use gdal::Dataset;
use serde::{Deserialize, Deserializer, Serialize, Serializer};
use std::fmt;
use std::path::{Path, PathBuf};
use std::str::FromStr;

/// Which band of a raster becomes the image's samples.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BandChoice {
    /// One band, numbered from 1 as GDAL numbers them.
    Band(usize),
    /// The luminance of bands 1-3 taken as red, green and blue ([`LUMINANCE_WEIGHTS`]).
    Luminance,
}

/// Weights of red, green and blue in the luminance: Y = 0.2126 R + 0.7152 G + 0.0722 B,
/// Recommendation ITU-R BT.709-6 (2015), Part 1, item 3.2, "Derivation of luminance signal"
/// (from memory). BT.709 is chosen over BT.601's 0.299/0.587/0.114 because orthophotos are
/// mostly sRGB, whose primaries are BT.709's (IEC 61966-2-1, from memory). Applied to the
/// stored values as they are (no gamma decoding): for keypoints only the contrast matters.
pub const LUMINANCE_WEIGHTS: [f64; 3] = [0.2126, 0.7152, 0.0722];

/// The most full-resolution pixels one strip of a read covers — the bound of every buffer a
/// read allocates besides its result (unless one strip row alone is larger: then one row).
pub const STRIP_PIXELS: usize = 1 << 20;

impl fmt::Display for BandChoice {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            BandChoice::Band(n) => write!(f, "band {n}"),
            BandChoice::Luminance => f.write_str("luminance"),
        }
    }
}

/// `2` (a band number, from 1) or `luminance` (any case).
impl FromStr for BandChoice {
    type Err = String;

    fn from_str(s: &str) -> Result<BandChoice, String> {
        let t = s.trim();
        if t.eq_ignore_ascii_case("luminance") {
            return Ok(BandChoice::Luminance);
        }
        match t.parse::<usize>() {
            Ok(0) => Err("bands are numbered from 1; give 1 or more, or \"luminance\"".into()),
            Ok(n) => Ok(BandChoice::Band(n)),
            Err(_) => Err(format!(
                "'{s}' is not a band: give a band number (1, 2, …) or \"luminance\""
            )),
        }
    }
}

/// A band as its number, the luminance as `"luminance"` (the pipeline file's `band` key).
impl Serialize for BandChoice {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        match self {
            BandChoice::Band(n) => s.serialize_u64(*n as u64),
            BandChoice::Luminance => s.serialize_str("luminance"),
        }
    }
}

impl<'de> Deserialize<'de> for BandChoice {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<BandChoice, D::Error> {
        struct Visitor;
        impl serde::de::Visitor<'_> for Visitor {
            type Value = BandChoice;
            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a band number (1, 2, …) or \"luminance\"")
            }
            fn visit_u64<E: serde::de::Error>(self, v: u64) -> Result<BandChoice, E> {
                match usize::try_from(v) {
                    Ok(0) | Err(_) => Err(E::invalid_value(
                        serde::de::Unexpected::Unsigned(v),
                        &"a band number from 1, or \"luminance\"",
                    )),
                    Ok(n) => Ok(BandChoice::Band(n)),
                }
            }
            fn visit_i64<E: serde::de::Error>(self, v: i64) -> Result<BandChoice, E> {
                match u64::try_from(v) {
                    Ok(u) => self.visit_u64(u),
                    Err(_) => Err(E::invalid_value(
                        serde::de::Unexpected::Signed(v),
                        &"a band number from 1, or \"luminance\"",
                    )),
                }
            }
            fn visit_str<E: serde::de::Error>(self, v: &str) -> Result<BandChoice, E> {
                v.parse().map_err(E::custom)
            }
        }
        d.deserialize_any(Visitor)
    }
}

/// What a raster image is, as GDAL reports it.
#[derive(Debug, Clone, PartialEq)]
pub struct RasterInfo {
    /// Columns (pixels across).
    pub width: usize,
    /// Rows (lines).
    pub height: usize,
    /// Bands in the file.
    pub band_count: usize,
    /// GDAL's name of the data type of the first band read (`Byte`, `UInt16`, `Float32`, …).
    pub data_type: String,
    /// The no-data value of the first band read, if it declares one (NaN possible).
    pub nodata: Option<f64>,
    /// Pixel/line to map coordinates.
    pub geotransform: GeoTransform,
    /// The image's CRS as WKT; `None` when it declares none.
    pub crs_wkt: Option<String>,
    /// Side of a square of the area of one pixel, in map units ([`GeoTransform::pixel_size`]).
    pub pixel_size: f64,
    /// Short name of the GDAL driver that opened it (`GTiff`, `VRT`, `JP2OpenJPEG`, …).
    pub driver: String,
}

/// Where a read takes its samples from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ReadLevel {
    /// The full-resolution bands, as they are (decimation 1).
    FullResolution,
    /// The file's overview with this index (0 = the largest), as it is or averaged here
    /// ([`ReadPlan::block`]).
    Overview {
        /// GDAL's overview index.
        index: usize,
    },
    /// The full-resolution bands read strip by strip and averaged here, `d × d` pixels a
    /// sample. (Not GDAL's decimated RasterIO with average resampling: it rounds each mean to
    /// the band's type — to whole numbers for 8- and 16-bit bands — as seen with GDAL 3.6.2.)
    Averaged,
}

/// How a read proceeds: from which level, to which grid, in strips of what size.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ReadPlan {
    /// Where the samples come from.
    pub level: ReadLevel,
    /// Columns of the result.
    pub width: usize,
    /// Rows of the result.
    pub height: usize,
    /// The result's grid.
    pub geotransform: GeoTransform,
    /// Level pixels a sample spans across and down: each sample is the mean of `block ×
    /// block` level pixels (1: the level as it is).
    pub block: usize,
    /// Rows of the result read per strip.
    pub rows_per_strip: usize,
    /// Pixels of the level (the full-resolution image for [`ReadLevel::Averaged`]) one strip
    /// covers: the length of every buffer a read allocates besides its result (one `f32`,
    /// `f64`, byte of mask or flag a pixel). At most [`STRIP_PIXELS`] unless one row of the
    /// result alone covers more.
    pub strip_source_pixels: usize,
}

/// A raster image opened read-only, with the band (or luminance) it will be read as.
pub struct RasterSource {
    path: PathBuf,
    /// What is read: the file, or a warped view over it (declared before `_file`, so that the
    /// view is closed before the file it refers to).
    dataset: Dataset,
    info: RasterInfo,
    choice: BandChoice,
    /// Why this band: `None` when the caller chose it.
    default_reason: Option<String>,
    /// 1-based bands read of `dataset`, in order (one, or red, green, blue).
    bands: Vec<usize>,
    /// The file's georeferencing.
    georeferencing: georef::Analysis,
    /// For a warped view: the view's grid and the map back to the file's pixels.
    view: Option<View>,
    /// The file itself under a warped view (kept open while the view is).
    _file: Option<Dataset>,
}

/// A warped view's grid and the map back to the file's pixel/line.
#[derive(Debug, Clone)]
struct View {
    grid: String,
    grid_because: String,
    map: PixelMap,
}

impl fmt::Debug for RasterSource {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("RasterSource")
            .field("path", &self.path)
            .field("info", &self.info)
            .field("choice", &self.choice)
            .finish()
    }
}

impl RasterSource {
    /// Opens the raster at `path` read-only and resolves the band to read (`None`: the default
    /// rule of the module doc). Errors: the file is missing or unreadable, is a vector
    /// dataset, is not georeferenced usably, or has no such band. An image that needs a warped
    /// view goes on the default grid ([`open_on`](Self::open_on) with no grid).
    pub fn open(path: &Path, band: Option<BandChoice>) -> Result<RasterSource, IngestError> {
        RasterSource::open_on(path, band, None)
    }

    /// As [`open`](Self::open), with the CRS (any definition GDAL reads) that an image in a
    /// geographic CRS or warped through its GCPs is put on, when it is projected; `None`: its
    /// GCPs' CRS when projected, else the UTM zone of its centre. An image on a projected grid
    /// is read as it is whatever `grid` says.
    pub fn open_on(
        path: &Path,
        band: Option<BandChoice>,
        grid: Option<&str>,
    ) -> Result<RasterSource, IngestError> {
        let opened = open_source(path).map_err(|e| match e {
            IngestError::Unreadable { path, source } => {
                IngestError::Raster(RasterError::Unreadable { path, source })
            }
            other => other,
        })?;
        if opened.kind != SourceKind::Raster || opened.dataset.raster_count() == 0 {
            return Err(RasterError::NotRaster {
                path: path.to_path_buf(),
                driver: opened.driver,
            }
            .into());
        }
        let ds = opened.dataset;
        let analysis = georef::analyse(path, &ds)?;
        let band_count = ds.raster_count();
        let (choice, default_reason) = match band {
            Some(c) => (c, None),
            None => {
                let (c, why) = default_band(&ds);
                (c, Some(why))
            }
        };
        let bands = match choice {
            BandChoice::Band(n) if (1..=band_count).contains(&n) => vec![n],
            BandChoice::Band(n) => {
                return Err(RasterError::NoSuchBand {
                    path: path.to_path_buf(),
                    band: n,
                    count: band_count,
                }
                .into())
            }
            BandChoice::Luminance if band_count >= 3 => vec![1, 2, 3],
            BandChoice::Luminance => {
                return Err(RasterError::NotColour {
                    path: path.to_path_buf(),
                    count: band_count,
                }
                .into())
            }
        };
        let (data_type, nodata) = {
            let first = ds.rasterband(bands[0]).map_err(|e| gdal_error(path, e))?;
            (first.band_type().name(), first.no_data_value())
        };
        let driver = opened.driver;
        if !analysis.needs_warp() {
            let (width, height) = ds.raster_size();
            let geotransform = analysis.geotransform;
            let info = RasterInfo {
                width,
                height,
                band_count,
                data_type,
                nodata,
                geotransform,
                crs_wkt: analysis.crs_wkt.clone(),
                pixel_size: geotransform.pixel_size(),
                driver,
            };
            return Ok(RasterSource {
                path: path.to_path_buf(),
                dataset: ds,
                info,
                choice,
                default_reason,
                bands,
                georeferencing: analysis,
                view: None,
                _file: None,
            });
        }
        // The file's alpha band, if any, marks where the view has data (with no-data values
        // and masks, which the warp honours itself).
        let alpha = (1..=band_count).find(|&b| {
            ds.rasterband(b)
                .is_ok_and(|x| x.color_interpretation() == ColorInterpretation::AlphaBand)
        });
        let warped = georef::warp(path, &ds, &bands, alpha, &analysis, grid)?;
        let map = PixelMap::new(path, &ds, &analysis, &warped)?;
        let info = RasterInfo {
            width: warped.size.0,
            height: warped.size.1,
            band_count,
            data_type,
            nodata,
            geotransform: warped.geotransform,
            crs_wkt: Some(warped.crs_wkt.clone()),
            pixel_size: warped.geotransform.pixel_size(),
            driver,
        };
        Ok(RasterSource {
            path: path.to_path_buf(),
            dataset: warped.dataset,
            info,
            choice,
            default_reason,
            bands: (1..=bands.len()).collect(),
            georeferencing: analysis,
            view: Some(View {
                grid: warped.grid,
                grid_because: warped.grid_because,
                map,
            }),
            _file: Some(ds),
        })
    }

    /// For an image read through a warped view: the map from the view's map positions back to
    /// the file's own pixel/line; `None` when the file is read as it is (its pixel/line is then
    /// the inverse of [`RasterInfo::geotransform`]).
    pub fn pixel_map(&self) -> Option<&PixelMap> {
        self.view.as_ref().map(|v| &v.map)
    }

    /// For a warped view: the definition of the grid's CRS it was made on (give it to
    /// [`open_on`](Self::open_on) to make the same view again).
    pub fn grid(&self) -> Option<&str> {
        self.view.as_ref().map(|v| v.grid.as_str())
    }

    /// How the file is georeferenced.
    pub fn georeferencing(&self) -> &georef::Analysis {
        &self.georeferencing
    }

    /// How the image is georeferenced and read, in a few words (for the landmarks' layer
    /// name, which every report shows); `None` for a file read by its own geotransform.
    pub fn georeferencing_note(&self) -> Option<String> {
        let a = &self.georeferencing;
        let gcps = match &a.source {
            georef::Source::Geotransform => None,
            georef::Source::GcpAffine {
                count,
                max_residual_px,
            } => Some(format!(
                "georeferenced by the first-order (affine) fit of its {count} GCPs, largest residual {max_residual_px:.3} px"
            )),
            georef::Source::GcpPolynomial {
                count,
                max_residual_px,
                ..
            } => Some(format!(
                "warped through the second-order polynomial of its {count} GCPs, largest residual {max_residual_px:.3} px"
            )),
        };
        let view = self.view.as_ref().map(|v| {
            format!(
                "read through a warped view on {}{}",
                crs_name(&v.grid),
                if a.geographic {
                    " (its CRS is geographic)"
                } else {
                    ""
                }
            )
        });
        match (gcps, view) {
            (None, None) => None,
            (Some(g), None) | (None, Some(g)) => Some(g),
            (Some(g), Some(v)) => Some(format!("{g}; {v}")),
        }
    }

    /// The file opened.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// What the image is.
    pub fn info(&self) -> &RasterInfo {
        &self.info
    }

    /// The band (or luminance) read, after the default rule.
    pub fn band(&self) -> BandChoice {
        self.choice
    }

    /// One paragraph for a report or a log: the image, what is read of it and why, and how
    /// validity is known, e.g. `ortho.tif (GTiff): 30000 × 30000 px, 4 bands of Byte, pixel
    /// size 0.25 map units, with a CRS; read as the luminance of bands 1-3 as red, green, blue
    /// with ITU-R BT.709 weights (the default for an image whose bands 1-3 are red, green,
    /// blue); valid pixels from the alpha band (fully opaque only)`.
    pub fn describe(&self) -> String {
        let i = &self.info;
        let what = match self.choice {
            BandChoice::Band(n) => format!("band {n} of {}", i.band_count),
            BandChoice::Luminance => {
                "the luminance of bands 1-3 as red, green, blue with ITU-R BT.709 weights"
                    .to_string()
            }
        };
        let why = match &self.default_reason {
            Some(r) => format!(" ({r})"),
            None => " (as asked)".to_string(),
        };
        let validity = match self.validity_words() {
            Ok(w) => w,
            Err(e) => format!("validity unknown ({e})"),
        };
        let georeferencing = match &self.view {
            None if self.georeferencing.source == georef::Source::Geotransform => String::new(),
            None => format!("; {}", self.georeferencing.words()),
            Some(v) => format!(
                "; {}; {}read through a warped view (cubic) on {} ({}), {} × {} px (the file has {} × {}; its pixel/line is mapped back within {:.3} px)",
                self.georeferencing.words(),
                if self.georeferencing.geographic {
                    "its CRS is geographic, so it is "
                } else {
                    ""
                },
                crs_name(&v.grid),
                v.grid_because,
                i.width,
                i.height,
                v.map.file_size.0,
                v.map.file_size.1,
                v.map.max_error_px
            ),
        };
        format!(
            "{} ({}): {} × {} px, {} band{} of {}, pixel size {} map units, {}{georeferencing}; read as {what}{why}; {validity}",
            self.path.display(),
            i.driver,
            i.width,
            i.height,
            i.band_count,
            if i.band_count == 1 { "" } else { "s" },
            i.data_type,
            i.pixel_size,
            if i.crs_wkt.is_some() { "with a CRS" } else { "with no CRS" },
        )
    }

    fn validity_words(&self) -> Result<String, IngestError> {
        let band = self.band_handle(self.bands[0])?;
        let flags = band.mask_flags().map_err(|e| gdal_error(&self.path, e))?;
        Ok(if flags.is_all_valid() {
            "every pixel valid (no no-data value, mask or alpha band)".to_string()
        } else if flags.is_alpha() {
            "valid pixels from the alpha band (fully opaque only)".to_string()
        } else if flags.is_nodata() {
            match self.info.nodata {
                Some(v) => format!("no-data value {v}"),
                None => "no-data value".to_string(),
            }
        } else if flags.is_per_dataset() {
            "valid pixels from the dataset's mask".to_string()
        } else {
            "valid pixels from the band's mask".to_string()
        })
    }

    fn band_handle(&self, n: usize) -> Result<RasterBand<'_>, IngestError> {
        self.dataset
            .rasterband(n)
            .map_err(|e| gdal_error(&self.path, e))
    }

    /// The decimation to read at when any from 1 to `most` would serve (a detector that
    /// needs at least `most`-fold coarser samples than the image's is served as well by a
    /// finer grid): `most`, unless reading it means decoding the full resolution
    /// ([`ReadLevel::Averaged`]) while the file has an overview at a factor f with
    /// `most / 2 < f < most`; then the largest such f, read from that overview as it is. A
    /// 20,000 px JPEG mosaic with the usual halving overviews, asked for at most 5, is then read
    /// from its 1/4 overview (1/16 of the pixels to decode) instead of decoding all of it for
    /// 5 × 5 block means; the finer grid costs the detector at most four times the samples.
    /// Errors: those of [`plan`](Self::plan).
    pub fn fastest_decimation(&self, most: usize) -> Result<usize, IngestError> {
        if self.plan(most)?.level != ReadLevel::Averaged {
            return Ok(most);
        }
        for f in (most / 2 + 1..most).rev() {
            let plan = self.plan(f)?;
            if matches!(plan.level, ReadLevel::Overview { .. }) && plan.block == 1 {
                return Ok(f);
            }
        }
        Ok(most)
    }

    /// How [`read`](Self::read) at this decimation proceeds (no pixels read). Errors: a
    /// decimation of 0, or one that leaves no whole sample.
    pub fn plan(&self, decimation: usize) -> Result<ReadPlan, IngestError> {
        let (w, h) = (self.info.width, self.info.height);
        let d = decimation;
        if d == 0 || w / d.max(1) == 0 || h / d.max(1) == 0 {
            return Err(RasterError::BadDecimation {
                path: self.path.clone(),
                decimation: d,
                width: w,
                height: h,
            }
            .into());
        }
        let gt = self.info.geotransform;
        if d == 1 {
            return Ok(strip_plan(ReadLevel::FullResolution, w, h, 1, gt));
        }
        if let Some((index, ow, oh, f)) = self.overview_at(d)? {
            let m = d / f;
            if ow / m > 0 && oh / m > 0 {
                let ogt = gt.scaled_xy(w as f64 / ow as f64, h as f64 / oh as f64);
                let level = ReadLevel::Overview { index };
                return Ok(strip_plan(level, ow / m, oh / m, m, ogt.scaled(m as f64)));
            }
        }
        Ok(strip_plan(
            ReadLevel::Averaged,
            w / d,
            h / d,
            d,
            gt.scaled(d as f64),
        ))
    }

    /// The coarsest overview of every band read at a factor f that divides `d` — of
    /// ⌈W/f⌉ × ⌈H/f⌉ or ⌊W/f⌋ × ⌊H/f⌋ pixels — as (index, width, height, f).
    fn overview_at(&self, d: usize) -> Result<Option<(usize, usize, usize, usize)>, IngestError> {
        let (w, h) = (self.info.width, self.info.height);
        let first = self.band_handle(self.bands[0])?;
        let count = first.overview_count().unwrap_or(0).max(0) as usize;
        let mut best: Option<(usize, usize, usize, usize)> = None;
        for index in 0..count {
            let Ok(o) = first.overview(index) else {
                continue;
            };
            let (ow, oh) = o.size();
            if ow == 0 || oh == 0 {
                continue;
            }
            let f = (w as f64 / ow as f64).round() as usize;
            let fits = f > 1
                && d.is_multiple_of(f)
                && ((ow == w.div_ceil(f) && oh == h.div_ceil(f)) || (ow == w / f && oh == h / f));
            if !fits || best.is_some_and(|b| b.3 >= f) {
                continue;
            }
            let all = self.bands[1..].iter().all(|&b| {
                self.band_handle(b)
                    .is_ok_and(|band| band.overview(index).is_ok_and(|ob| ob.size() == (ow, oh)))
            });
            if all {
                best = Some((index, ow, oh, f));
            }
        }
        Ok(best)
    }

    /// The whole image at 1/`decimation` resolution, per the module doc (decimation 1: at full
    /// resolution), read strip by strip ([`plan`](Self::plan)).
    /// Errors besides the plan's: GDAL failing part-way ([`RasterError::PixelsUnreadable`]) and
    /// an image with no valid pixel at all ([`RasterError::NoValidPixels`]).
    pub fn read(&self, decimation: usize) -> Result<Image, IngestError> {
        let plan = self.plan(decimation)?;
        let image = self.read_level(&plan, plan.level, (0, 0), plan.block)?;
        if !image.valid.is_empty() && !image.valid.iter().any(|&v| v) {
            return Err(RasterError::NoValidPixels {
                path: self.path.clone(),
                validity: self
                    .validity_words()
                    .unwrap_or_else(|_| "its mask".to_string()),
            }
            .into());
        }
        Ok(image)
    }

    /// The window of `width × height` pixels whose top-left pixel is (`p0`, `l0`), at full
    /// resolution, on the grid `GeoTransform::window(p0, l0)`. Errors: a window that is empty
    /// or not wholly inside the image.
    pub fn read_window(
        &self,
        p0: usize,
        l0: usize,
        width: usize,
        height: usize,
    ) -> Result<Image, IngestError> {
        let (w, h) = (self.info.width, self.info.height);
        let inside = width > 0
            && height > 0
            && p0.checked_add(width).is_some_and(|e| e <= w)
            && l0.checked_add(height).is_some_and(|e| e <= h);
        if !inside {
            return Err(RasterError::WindowOutside {
                path: self.path.clone(),
                p0,
                l0,
                w: width,
                h: height,
                width: w,
                height: h,
            }
            .into());
        }
        let gt = self.info.geotransform.window(p0 as f64, l0 as f64);
        let plan = strip_plan(ReadLevel::FullResolution, width, height, 1, gt);
        self.read_level(&plan, ReadLevel::FullResolution, (p0, l0), 1)
    }

    /// A second read-only handle of a GeoTIFF through which GDAL decodes the blocks of one
    /// read on as many threads as the current rayon pool has (the GTiff open option
    /// `NUM_THREADS`, GDAL 3.6 and later; the decoded values are the same on any number of
    /// threads). Only for contiguous (pixel-interleaved) or one-band files: GDAL 3.6-3.7.0's
    /// threaded reader crashes on band-interleaved files read band by band (GDAL pull request
    /// 7963). `None` otherwise, or when the file does not open again: the read goes on through
    /// the handle already open.
    fn threaded_handle(&self) -> Option<Dataset> {
        use gdal::{DatasetOptions, GdalOpenFlags, Metadata};
        let threads = rayon::current_num_threads();
        let contiguous = self.info.band_count == 1
            || self
                .dataset
                .metadata_item("INTERLEAVE", "IMAGE_STRUCTURE")
                .is_some_and(|v| v.eq_ignore_ascii_case("PIXEL"));
        if threads < 2 || self.info.driver != "GTiff" || !contiguous {
            return None;
        }
        let option = format!("NUM_THREADS={threads}");
        let _quiet = super::open::QuietGdal::new();
        Dataset::open_ex(
            &self.path,
            DatasetOptions {
                open_flags: GdalOpenFlags::GDAL_OF_RASTER | GdalOpenFlags::GDAL_OF_READONLY,
                allowed_drivers: Some(&["GTiff"]),
                open_options: Some(&[option.as_str()]),
                sibling_files: None,
            },
        )
        .ok()
        .filter(|ds| ds.raster_size() == (self.info.width, self.info.height))
    }

    /// Reads `plan.width × plan.height` samples of `level`, strip by strip, starting at level
    /// pixel `origin`, each sample the mean of `d × d` level pixels. GDAL reads each strip
    /// (decoding its blocks on several threads where [`threaded_handle`](Self::threaded_handle)
    /// allows); the sums and means of a strip are shared between the cores by rows, each
    /// computed in the same order as on one core, so the result does not depend on the number
    /// of threads.
    fn read_level(
        &self,
        plan: &ReadPlan,
        level: ReadLevel,
        origin: (usize, usize),
        d: usize,
    ) -> Result<Image, IngestError> {
        use rayon::prelude::*;
        let path = &self.path;
        // Worth a second handle only for reads of more than a few blocks.
        let threaded = (plan.width * plan.height * d * d > 4 * STRIP_PIXELS)
            .then(|| self.threaded_handle())
            .flatten();
        let dataset = threaded.as_ref().unwrap_or(&self.dataset);
        let full: Vec<RasterBand<'_>> = self
            .bands
            .iter()
            .map(|&b| dataset.rasterband(b).map_err(|e| gdal_error(path, e)))
            .collect::<Result<_, _>>()?;
        let bands: Vec<RasterBand<'_>> = match level {
            ReadLevel::Overview { index } => full
                .iter()
                .map(|b| b.overview(index).map_err(|e| gdal_error(path, e)))
                .collect::<Result<_, _>>()?,
            _ => full,
        };
        let level_height = bands.first().map_or(1, |b| b.size().1);
        // The masks to read: one per band, or one for all when the dataset shares it.
        let mut masked = Vec::new();
        for (i, b) in bands.iter().enumerate() {
            let flags = b.mask_flags().map_err(|e| gdal_error(path, e))?;
            if flags.is_all_valid() {
                continue;
            }
            if flags.is_per_dataset() && masked.iter().any(|&(_, _, shared)| shared) {
                continue;
            }
            masked.push((i, flags.is_alpha(), flags.is_per_dataset()));
        }
        let (ow, oh) = (plan.width, plan.height);
        let weights: &[f64] = if bands.len() == 3 {
            &LUMINANCE_WEIGHTS
        } else {
            &[1.0]
        };
        let cap = plan.strip_source_pixels;
        let mut pixels = vec![0f32; ow * oh];
        let mut valid = vec![false; ow * oh];
        let mut values = vec![0f32; cap];
        let mut sum = vec![0f64; cap];
        let mut ok = vec![true; cap];
        let mut mask = vec![0u8; if masked.is_empty() { 0 } else { cap }];
        let block = (d * d) as f64;
        let mut r0 = 0;
        while r0 < oh {
            let k = plan.rows_per_strip.min(oh - r0);
            let (sw, sh) = (ow * d, k * d);
            let n = sw * sh;
            let window = (to_isize(origin.0), to_isize(origin.1 + r0 * d));
            sum[..n].fill(0.0);
            ok[..n].fill(true);
            // GDAL's own printing of a failed read is silenced; its error is reported once,
            // with the file and the row, below.
            let quiet = super::open::QuietGdal::new();
            let unreadable = |source| RasterError::PixelsUnreadable {
                path: path.clone(),
                // The level's row as a full-resolution row (an overview is smaller).
                row: (origin.1 + r0 * d) * self.info.height / level_height.max(1),
                last_row: ((origin.1 + (r0 + k) * d) * self.info.height / level_height.max(1))
                    .min(self.info.height)
                    .saturating_sub(1),
                height: self.info.height,
                source,
            };
            for (b, &weight) in bands.iter().zip(weights) {
                b.read_into_slice::<f32>(window, (sw, sh), (sw, sh), &mut values[..n], None)
                    .map_err(unreadable)?;
                sum[..n]
                    .par_chunks_mut(sw)
                    .zip(ok[..n].par_chunks_mut(sw))
                    .zip(values[..n].par_chunks(sw))
                    .for_each(|((sum, ok), values)| {
                        for ((s, good), v) in sum.iter_mut().zip(ok).zip(values) {
                            if v.is_finite() {
                                *s += weight * f64::from(*v);
                            } else {
                                *good = false;
                            }
                        }
                    });
            }
            for &(i, alpha, _) in &masked {
                let m = bands[i].open_mask_band().map_err(|e| gdal_error(path, e))?;
                m.read_into_slice::<u8>(window, (sw, sh), (sw, sh), &mut mask[..n], None)
                    .map_err(unreadable)?;
                for (good, &v) in ok[..n].iter_mut().zip(&mask[..n]) {
                    *good &= if alpha { v == 255 } else { v != 0 };
                }
            }
            drop(quiet);
            let (sum, ok) = (&sum[..n], &ok[..n]);
            pixels[r0 * ow..(r0 + k) * ow]
                .par_chunks_mut(ow)
                .zip(valid[r0 * ow..(r0 + k) * ow].par_chunks_mut(ow))
                .enumerate()
                .for_each(|(r, (prow, vrow))| {
                    for c in 0..ow {
                        let rows = r * d..(r + 1) * d;
                        let cols = c * d..(c + 1) * d;
                        let all = rows.clone().all(|y| {
                            ok[y * sw + cols.start..y * sw + cols.end]
                                .iter()
                                .all(|&g| g)
                        });
                        let mean = if all {
                            rows.map(|y| {
                                sum[y * sw + cols.start..y * sw + cols.end]
                                    .iter()
                                    .sum::<f64>()
                            })
                            .sum::<f64>()
                                / block
                        } else {
                            0.0
                        };
                        prow[c] = mean as f32;
                        vrow[c] = all;
                    }
                });
            r0 += k;
        }
        if valid.iter().all(|&v| v) {
            valid = Vec::new();
        }
        Ok(Image {
            width: ow,
            height: oh,
            pixels,
            valid,
            geotransform: plan.geotransform,
        })
    }
}

/// Strips of whole result rows covering at most [`STRIP_PIXELS`] level pixels each (at least
/// one row).
fn strip_plan(
    level: ReadLevel,
    width: usize,
    height: usize,
    d: usize,
    gt: GeoTransform,
) -> ReadPlan {
    let per_row = width * d * d;
    let rows = (STRIP_PIXELS / per_row.max(1)).clamp(1, height.max(1));
    ReadPlan {
        level,
        width,
        height,
        geotransform: gt,
        block: d,
        rows_per_strip: rows,
        strip_source_pixels: rows * per_row,
    }
}

fn to_isize(v: usize) -> isize {
    isize::try_from(v).unwrap_or(isize::MAX)
}

/// A CRS definition's name (`WGS 84 / UTM zone 25S`), or the definition when GDAL gives none.
fn crs_name(definition: &str) -> String {
    gdal::spatial_ref::SpatialRef::from_definition(definition)
        .ok()
        .and_then(|s| s.name())
        .unwrap_or_else(|| definition.chars().take(60).collect())
}

/// The default rule of the module doc, and the reason in words.
fn default_band(ds: &Dataset) -> (BandChoice, String) {
    let count = ds.raster_count();
    if count == 1 {
        return (BandChoice::Band(1), "the only band".to_string());
    }
    let interp = |n: usize| ds.rasterband(n).map(|b| b.color_interpretation()).ok();
    let rgb = (3..=4).contains(&count)
        && interp(1) == Some(ColorInterpretation::RedBand)
        && interp(2) == Some(ColorInterpretation::GreenBand)
        && interp(3) == Some(ColorInterpretation::BlueBand);
    if rgb {
        (
            BandChoice::Luminance,
            "the default for an image whose bands 1-3 are red, green, blue".to_string(),
        )
    } else {
        (
            BandChoice::Band(1),
            format!(
                "the default: the image has {count} bands and they are not tagged red, green, blue; choose another with the band option"
            ),
        )
    }
}

fn gdal_error(path: &Path, source: gdal::errors::GdalError) -> IngestError {
    IngestError::Gdal {
        path: path.to_path_buf(),
        source,
    }
}

/// What is wrong with a raster survey. Every variant names the file.
#[derive(Debug, thiserror::Error)]
pub enum RasterError {
    /// GDAL cannot open it.
    #[error("{path}: not an image GDAL can read ({}); give a GeoTIFF, JPEG 2000, VRT or another raster GDAL reads", super::gdal_words(.source))]
    Unreadable {
        /// Path given.
        path: PathBuf,
        /// GDAL's error.
        #[source]
        source: gdal::errors::GdalError,
    },
    /// A vector dataset where a raster image was expected.
    #[error("{path}: is a vector dataset (GDAL driver {driver}), not a raster image; give a georeferenced image (GeoTIFF, JPEG 2000, VRT, …)")]
    NotRaster {
        /// Path given.
        path: PathBuf,
        /// Driver that opened it.
        driver: String,
    },
    /// No geotransform and no ground control points.
    #[error("{path}: the raster image has no georeferencing (no geotransform, no ground control points); give it a geotransform — e.g. a world file (.wld) beside it — or warp it onto a map grid first")]
    NotGeoreferenced {
        /// Path given.
        path: PathBuf,
    },
    /// Too few ground control points (and no geotransform) to fix an affine.
    #[error("{path}: the raster image is georeferenced by {count} ground control point(s) only, and at least 3 (not on one line) are needed to place it; add ground control points, or give it a geotransform")]
    TooFewGcps {
        /// Path given.
        path: PathBuf,
        /// Ground control points in the file.
        count: usize,
    },
    /// Ground control points that no first- or second-order polynomial fits.
    #[error("{path}: the {count} ground control points of the image do not agree: the polynomial of order {order} they allow leaves GCP '{gcp}' {residual_px:.2} px away (at most 0.1 px for the first order, 1 px for the second, is accepted); check that GCP (a blunder, or a point of another image), or warp the image with its GCPs yourself first (e.g. gdalwarp -tps) and give the warped image")]
    GcpsInconsistent {
        /// Path given.
        path: PathBuf,
        /// Ground control points in the file.
        count: usize,
        /// Order of the polynomial tried last.
        order: usize,
        /// The worst GCP's distance from it, pixels.
        residual_px: f64,
        /// That GCP's id.
        gcp: String,
    },
    /// The warped view of an image in a geographic CRS or georeferenced by GCPs could not be made.
    #[error("{path}: the image cannot be read on a projected grid ({why}); warp it to a projected CRS yourself first (e.g. gdalwarp -t_srs with its UTM zone) and give the warped image")]
    WarpFailed {
        /// Path given.
        path: PathBuf,
        /// What failed.
        why: String,
    },
    /// A geotransform without an inverse, or with a non-finite term.
    #[error("{path}: the geotransform {geotransform:?} maps pixels to no area (or has a non-finite term); fix the image's georeferencing")]
    SingularGeotransform {
        /// Path given.
        path: PathBuf,
        /// GDAL's six terms.
        geotransform: [f64; 6],
    },
    /// The band asked for does not exist.
    #[error("{path}: has no band {band}; the image has {count} band(s), numbered from 1 — choose one of them")]
    NoSuchBand {
        /// Path given.
        path: PathBuf,
        /// Band asked for.
        band: usize,
        /// Bands in the file.
        count: usize,
    },
    /// Luminance asked of an image with fewer than three bands.
    #[error("{path}: luminance needs three bands (red, green, blue) and the image has {count}; choose a band by its number instead")]
    NotColour {
        /// Path given.
        path: PathBuf,
        /// Bands in the file.
        count: usize,
    },
    /// A decimation of 0, or one larger than the image.
    #[error("{path}: cannot read the image ({width} × {height} px) at 1/{decimation} resolution; the decimation must be at least 1 and at most the image's smaller side")]
    BadDecimation {
        /// Path given.
        path: PathBuf,
        /// Decimation asked for.
        decimation: usize,
        /// Image columns.
        width: usize,
        /// Image rows.
        height: usize,
    },
    /// A window not inside the image.
    #[error("{path}: the window of {w} × {h} px at pixel {p0}, line {l0} is not inside the image ({width} × {height} px)")]
    WindowOutside {
        /// Path given.
        path: PathBuf,
        /// First column asked for.
        p0: usize,
        /// First row asked for.
        l0: usize,
        /// Columns asked for.
        w: usize,
        /// Rows asked for.
        h: usize,
        /// Image columns.
        width: usize,
        /// Image rows.
        height: usize,
    },
    /// GDAL failed while reading the pixels: the image was not read to its end.
    #[error("{path}: GDAL failed reading the pixels of rows {row}-{last_row} (of {height}): {}; the file may be truncated or damaged — repair it, copy it again or export it again", super::gdal_words(.source).trim_end_matches('.'))]
    PixelsUnreadable {
        /// Path given.
        path: PathBuf,
        /// First full-resolution row of the read that failed.
        row: usize,
        /// Its last row.
        last_row: usize,
        /// Image rows.
        height: usize,
        /// GDAL's error.
        #[source]
        source: gdal::errors::GdalError,
    },
    /// Not one pixel of the image is data.
    #[error("{path}: every pixel of the image is no-data ({validity}), so there is nothing to find landmarks in; check the no-data value or mask (e.g. with gdalinfo), or choose another band")]
    NoValidPixels {
        /// Path given.
        path: PathBuf,
        /// Where validity comes from (a no-data value, a mask, an alpha band).
        validity: String,
    },
}
