//! Stage 2 — the working frame: both surveys in one projected CRS.
//!
//! **In:** the reference and target [`LandmarkSet`]s, each survey's CRS override (or
//! [`LOCAL`] for a target in an unreferenced local grid), and [`FrameOptions`] (an optional
//! working CRS).
//! **Out:** a [`WorkingFrame`]: both surveys' positions in one projected CRS (or, for a target
//! in an unreferenced local grid, the target's raw coordinates), plus what is needed to go back.
//!
//! The working CRS is, in order: the one asked for; the reference's CRS when it is projected;
//! else the WGS 84 / UTM zone of the reference's centre (said in every output). A target with a
//! CRS is converted into it; a local target is left as it is, and the fitted similarity is then
//! its site calibration. Both georeferenced surveys must overlap after conversion.

pub mod crs;

use crate::ingest::LandmarkSet;
use crate::spatial::Extent;
use crs::{utm_zone_for, Converter, Crs, CrsError};
use serde::{Deserialize, Serialize};

/// The word that marks a target in an unreferenced local grid.
pub const LOCAL: &str = "local";

/// Options of the working frame (`[frame]` in a pipeline file).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FrameOptions {
    /// Working CRS to use instead of the automatic choice (must be projected); `None`: the
    /// reference's CRS when it is projected, else the WGS 84 / UTM zone of its centre.
    #[serde(default)]
    pub working_crs: Option<String>,
}

/// A problem bringing the surveys into one frame.
#[derive(Debug, thiserror::Error)]
pub enum FrameError {
    /// A survey has no CRS and none was given.
    #[error("{path}: the file declares no CRS; set {option} (e.g. {option} = EPSG:4326 for longitude/latitude){local_hint}")]
    MissingCrs {
        /// File.
        path: String,
        /// Option to set (`reference.crs` or `target.crs`).
        option: String,
        /// Extra hint for the target.
        local_hint: String,
    },
    /// The reference was declared local.
    #[error("the reference must be georeferenced: reference.crs = local is not allowed (the target may be local)")]
    LocalReference,
    /// CRS trouble.
    #[error(transparent)]
    Crs(#[from] CrsError),
    /// The working CRS asked for is geographic.
    #[error("the working CRS must be projected (metres or feet), but '{0}' is geographic")]
    GeographicWorking(String),
    /// Geographic coordinates out of range.
    #[error("{path}: landmark '{id}' at ({x}, {y}) is not a longitude/latitude although the CRS '{crs}' is geographic; are the axes swapped, or is the CRS wrong?")]
    NotLonLat {
        /// File.
        path: String,
        /// Landmark id.
        id: String,
        /// x read.
        x: f64,
        /// y read.
        y: f64,
        /// CRS label.
        crs: String,
    },
    /// A point failed to convert.
    #[error("{path}: landmark '{id}' at ({x}, {y}) cannot be converted from {from} to {to}; check the CRS of that file")]
    ConversionFailed {
        /// File.
        path: String,
        /// Landmark id.
        id: String,
        /// x read.
        x: f64,
        /// y read.
        y: f64,
        /// Source CRS.
        from: String,
        /// Destination CRS.
        to: String,
    },
    /// The surveys do not overlap.
    #[error("the surveys do not overlap in {crs}: the reference covers x {rx0:.1}..{rx1:.1}, y {ry0:.1}..{ry1:.1}; the target covers x {tx0:.1}..{tx1:.1}, y {ty0:.1}..{ty1:.1}. Check each file's CRS (reference.crs, target.crs), or set target.crs = local if the target is in a local grid")]
    NoOverlap {
        /// Working CRS.
        crs: String,
        /// Reference extent.
        rx0: f64,
        /// Reference extent.
        rx1: f64,
        /// Reference extent.
        ry0: f64,
        /// Reference extent.
        ry1: f64,
        /// Target extent.
        tx0: f64,
        /// Target extent.
        tx1: f64,
        /// Target extent.
        ty0: f64,
        /// Target extent.
        ty1: f64,
    },
}

/// Both surveys in the working frame.
#[derive(Debug, Clone)]
pub struct WorkingFrame {
    /// The working CRS.
    pub crs: Crs,
    /// How it was chosen, in words.
    pub chosen_because: String,
    /// The reference's own CRS.
    pub reference_crs: Crs,
    /// The target's own CRS; `None` for a local grid.
    pub target_crs: Option<Crs>,
    /// Reference positions in the working CRS (same order as the landmark set).
    pub reference: Vec<[f64; 2]>,
    /// Target positions in the working CRS, or raw local-grid coordinates.
    pub target: Vec<[f64; 2]>,
}

impl WorkingFrame {
    /// Metres per working unit.
    pub fn metres_per_unit(&self) -> f64 {
        self.crs.metres_per_unit
    }

    /// Converts working-frame points to the reference's own CRS (identity when they agree).
    pub fn to_reference_crs(&self, pts: &[[f64; 2]]) -> Result<Vec<[f64; 2]>, FrameError> {
        if self.crs.wkt == self.reference_crs.wkt {
            return Ok(pts.to_vec());
        }
        let c = Converter::new(&self.crs, &self.reference_crs)?;
        pts.iter()
            .map(|&p| {
                c.convert(p).ok_or_else(|| FrameError::ConversionFailed {
                    path: "(output)".into(),
                    id: "-".into(),
                    x: p[0],
                    y: p[1],
                    from: c.from_label().to_string(),
                    to: c.to_label().to_string(),
                })
            })
            .collect()
    }
}

fn crs_of(
    set: &LandmarkSet,
    given: Option<&str>,
    option: &str,
    is_target: bool,
) -> Result<Option<Crs>, FrameError> {
    let what = format!(
        "{} ({})",
        if is_target { "target" } else { "reference" },
        set.source.display()
    );
    match given {
        Some(s) if s.eq_ignore_ascii_case(LOCAL) => {
            if is_target {
                Ok(None)
            } else {
                Err(FrameError::LocalReference)
            }
        }
        Some(s) => Ok(Some(Crs::parse(s, &what)?)),
        None => match &set.crs_wkt {
            Some(w) => Ok(Some(Crs::parse(w, &what)?)),
            None => Err(FrameError::MissingCrs {
                path: set.source.display().to_string(),
                option: option.to_string(),
                local_hint: if is_target {
                    ", or target.crs = local if it is in an unreferenced local grid".into()
                } else {
                    String::new()
                },
            }),
        },
    }
}

fn check_lon_lat(set: &LandmarkSet, crs: &Crs) -> Result<(), FrameError> {
    if !crs.geographic {
        return Ok(());
    }
    if let Some(i) = set
        .points
        .iter()
        .position(|p| !(-360.0..=360.0).contains(&p[0]) || !(-90.0..=90.0).contains(&p[1]))
    {
        return Err(FrameError::NotLonLat {
            path: set.source.display().to_string(),
            id: set.ids[i].clone(),
            x: set.points[i][0],
            y: set.points[i][1],
            crs: crs.label(),
        });
    }
    Ok(())
}

fn convert_all(set: &LandmarkSet, from: &Crs, to: &Crs) -> Result<Vec<[f64; 2]>, FrameError> {
    if from.wkt == to.wkt {
        return Ok(set.points.clone());
    }
    let c = Converter::new(from, to)?;
    set.points
        .iter()
        .enumerate()
        .map(|(i, &p)| {
            c.convert(p).ok_or_else(|| FrameError::ConversionFailed {
                path: set.source.display().to_string(),
                id: set.ids[i].clone(),
                x: p[0],
                y: p[1],
                from: from.label(),
                to: to.label(),
            })
        })
        .collect()
}

/// Brings both surveys into the working frame. `reference_crs` and `target_crs` override the
/// files' own CRSs (anything PROJ accepts); `target_crs` may be [`LOCAL`].
pub fn working_frame(
    reference: &LandmarkSet,
    reference_crs: Option<&str>,
    target: &LandmarkSet,
    target_crs: Option<&str>,
    options: &FrameOptions,
) -> Result<WorkingFrame, FrameError> {
    let reference_crs = crs_of(reference, reference_crs, "reference.crs", false)?
        .expect("a reference CRS is never local");
    let target_crs = crs_of(target, target_crs, "target.crs", true)?;
    check_lon_lat(reference, &reference_crs)?;
    if let Some(t) = &target_crs {
        check_lon_lat(target, t)?;
    }
    let (crs, chosen_because) = match &options.working_crs {
        Some(w) => (Crs::parse(w, "working CRS")?, "asked for".to_string()),
        None if !reference_crs.geographic => {
            (reference_crs.clone(), "the reference's CRS".to_string())
        }
        None => {
            let [lon, lat] = Extent::of(&reference.points).centre();
            let code = utm_zone_for(lon, lat);
            (
                Crs::parse(&code, "working CRS")?,
                format!("the UTM zone of the reference's centre ({lon:.4}, {lat:.4}); the reference is geographic"),
            )
        }
    };
    if crs.geographic {
        return Err(FrameError::GeographicWorking(crs.label()));
    }
    let ref_w = convert_all(reference, &reference_crs, &crs)?;
    let tgt_w = match &target_crs {
        Some(t) => convert_all(target, t, &crs)?,
        None => target.points.clone(),
    };
    if target_crs.is_some() {
        let (r, t) = (Extent::of(&ref_w), Extent::of(&tgt_w));
        if !r.overlaps(&t) {
            return Err(FrameError::NoOverlap {
                crs: crs.label(),
                rx0: r.min[0],
                rx1: r.max[0],
                ry0: r.min[1],
                ry1: r.max[1],
                tx0: t.min[0],
                tx1: t.max[0],
                ty0: t.min[1],
                ty1: t.max[1],
            });
        }
    }
    Ok(WorkingFrame {
        crs,
        chosen_because,
        reference_crs,
        target_crs,
        reference: ref_w,
        target: tgt_w,
    })
}
