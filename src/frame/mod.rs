//! Stage 2 — the working frame: both surveys in one projected CRS.
//!
//! **In:** the reference and target [`LandmarkSet`]s, each survey's CRS override (or
//! [`LOCAL`] for a target in an unreferenced local grid, `local:m`, `local:ft` or `local:us-ft`
//! to declare its unit: [`grid`]), and [`FrameOptions`] (an optional working CRS).
//! **Out:** a [`WorkingFrame`]: both surveys' positions in one projected CRS (or, for a target
//! in an unreferenced local grid, the target's raw coordinates), plus what is needed to go back.
//!
//! The working CRS is, in order: the one asked for; the reference's CRS when it is projected;
//! else the WGS 84 / UTM zone of the reference's centre (said in every output). A target with a
//! CRS is converted into it; a local target is left as it is, and the fitted similarity is then
//! its site calibration. Both georeferenced surveys must overlap after conversion.

pub mod crs;
pub mod grid;

use crate::ingest::LandmarkSet;
use crate::spatial::Extent;
use crs::{utm_zone_for, Converter, Crs, CrsError};
pub use grid::{GridScale, GridUnit, LOCAL};
use serde::{Deserialize, Serialize};

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
    /// A local grid with an unknown unit.
    #[error(transparent)]
    UnknownUnit(#[from] grid::UnknownUnit),
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
    #[error("the surveys do not overlap in {crs}: the reference covers x {rx0:.1}..{rx1:.1}, y {ry0:.1}..{ry1:.1}; the target covers x {tx0:.1}..{tx1:.1}, y {ty0:.1}..{ty1:.1}. {hint}Check each file's CRS (reference.crs, target.crs), or set target.crs = local if the target is in a local grid")]
    NoOverlap {
        /// When a geographic survey looks like latitude stored before longitude: that question
        /// and how to fix it (ends in a space), else empty.
        hint: String,
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
    /// The declared unit of a local-grid target (`target.crs = local:UNIT`); `None` for a
    /// georeferenced target or a local grid of undeclared unit.
    pub target_unit: Option<GridUnit>,
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

    /// For a local-grid target of declared unit: a fitted `scale` (± `se_scale`) split into
    /// the unit conversion and the grid scale factor.
    pub fn grid_scale(&self, scale: f64, se_scale: f64) -> Option<GridScale> {
        self.target_unit
            .map(|u| GridScale::of(u, scale, se_scale, self.metres_per_unit()))
    }

    /// WKT of the target's own coordinates: its CRS, or for a local grid the engineering CRS
    /// of its declared unit ([`grid::engineering_wkt`]).
    pub fn target_wkt(&self) -> String {
        match &self.target_crs {
            Some(c) => c.wkt.clone(),
            None => grid::engineering_wkt(self.target_unit),
        }
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

/// A survey's CRS: `Err` of the unit for a local grid.
type CrsOrLocal = Result<Crs, Option<GridUnit>>;

fn crs_of(
    set: &LandmarkSet,
    given: Option<&str>,
    option: &str,
    is_target: bool,
) -> Result<CrsOrLocal, FrameError> {
    let what = format!(
        "{} ({})",
        if is_target { "target" } else { "reference" },
        set.source.display()
    );
    match given {
        Some(s) => match grid::parse_local(s, option) {
            Some(_) if !is_target => Err(FrameError::LocalReference),
            Some(unit) => Ok(Err(unit?)),
            None => Ok(Ok(Crs::parse(s, &what)?)),
        },
        None => match &set.crs_wkt {
            Some(w) => Ok(Ok(Crs::parse(w, &what)?)),
            None => Err(FrameError::MissingCrs {
                path: set.source.display().to_string(),
                option: option.to_string(),
                local_hint: if is_target {
                    ", or target.crs = local if it is in an unreferenced local grid (local:m, local:ft or local:us-ft declares its unit)".into()
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

/// For two surveys that do not overlap: whether one of them, in a geographic CRS, looks like
/// (latitude, longitude) pairs read as (longitude, latitude): all its x within ±90 and y within
/// ±180. Such a survey is tried with x and y swapped; if it then overlaps the other one (in its
/// own CRS), the axes are swapped for certain, else they may be. Returns the words for the
/// error (ending in a space), or nothing.
fn swapped_axes_hint(
    reference: &LandmarkSet,
    reference_crs: &Crs,
    target: &LandmarkSet,
    target_crs: &Crs,
) -> String {
    let sides = [
        (
            "target",
            target,
            target_crs,
            "reference",
            reference,
            reference_crs,
        ),
        (
            "reference",
            reference,
            reference_crs,
            "target",
            target,
            target_crs,
        ),
    ];
    let mut maybe = String::new();
    for (role, side, side_crs, other_role, other, other_crs) in sides {
        let latitude_first = side
            .points
            .iter()
            .all(|p| p[0].abs() <= 90.0 && p[1].abs() <= 180.0);
        if !side_crs.geographic || !latitude_first {
            continue;
        }
        let path = side.source.display();
        let swapped: Vec<[f64; 2]> = side.points.iter().map(|p| [p[1], p[0]]).collect();
        let other_here: Option<Vec<[f64; 2]>> = Converter::new(other_crs, side_crs)
            .ok()
            .and_then(|c| other.points.iter().map(|&p| c.convert(p)).collect());
        if other_here.is_some_and(|o| Extent::of(&o).overlaps(&Extent::of(&swapped))) {
            return format!(
                "Are the axes swapped? The {role} ({path}) overlaps the {other_role} once its x and y are swapped: its coordinates are latitude first. tiemark reads x as the longitude and y as the latitude: swap the x and y columns (or the coordinate order) of {path}. "
            );
        }
        if maybe.is_empty() {
            maybe = format!(
                "Are the axes swapped? All x of the {role} ({path}) are within ±90 and all y within ±180: if it stores the latitude first, swap its x and y (tiemark reads x as the longitude). "
            );
        }
    }
    maybe
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
    let (target_crs, target_unit) = match crs_of(target, target_crs, "target.crs", true)? {
        Ok(c) => (Some(c), None),
        Err(unit) => (None, unit),
    };
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
    if let Some(target_crs) = &target_crs {
        let (r, t) = (Extent::of(&ref_w), Extent::of(&tgt_w));
        if !r.overlaps(&t) {
            return Err(FrameError::NoOverlap {
                hint: swapped_axes_hint(reference, &reference_crs, target, target_crs),
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
        target_unit,
        reference: ref_w,
        target: tgt_w,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::path::PathBuf;

    /// A survey of `points` read from `name`, declaring `crs` (any definition GDAL reads) as
    /// its layer's CRS, or none.
    fn survey(name: &str, points: Vec<[f64; 2]>, crs: Option<&str>) -> LandmarkSet {
        LandmarkSet {
            source: PathBuf::from(name),
            layer: "landmarks".into(),
            ids: (0..points.len()).map(|i| format!("L{i}")).collect(),
            points,
            crs_wkt: crs.map(|c| Crs::parse(c, "test").unwrap().wkt),
            skipped: Default::default(),
            raster: None,
        }
    }

    /// Four corners of a box centred on (x, y) with half-widths (dx, dy).
    fn box_around(x: f64, y: f64, dx: f64, dy: f64) -> Vec<[f64; 2]> {
        vec![
            [x - dx, y - dy],
            [x + dx, y - dy],
            [x + dx, y + dy],
            [x - dx, y + dy],
        ]
    }

    /// The CRS choices of one test: each survey's override and the working CRS.
    #[derive(Default)]
    struct Choice {
        reference_crs: Option<&'static str>,
        target_crs: Option<&'static str>,
        working_crs: Option<&'static str>,
    }

    fn try_frame(
        reference: &LandmarkSet,
        target: &LandmarkSet,
        c: &Choice,
    ) -> Result<WorkingFrame, FrameError> {
        let options = FrameOptions {
            working_crs: c.working_crs.map(String::from),
        };
        working_frame(reference, c.reference_crs, target, c.target_crs, &options)
    }

    fn frame_of(reference: &LandmarkSet, target: &LandmarkSet, c: &Choice) -> WorkingFrame {
        try_frame(reference, target, c).unwrap()
    }

    #[test]
    fn geographic_reference_gets_the_utm_zone_of_its_centre() {
        // Near 14.4°E 47.0°N: zone 33 (12°E..18°E), northern hemisphere.
        let reference = survey(
            "ref.gpkg",
            box_around(14.4, 47.0, 0.02, 0.01),
            Some("EPSG:4326"),
        );
        let target = survey(
            "tgt.gpkg",
            box_around(14.4, 47.0, 0.01, 0.01),
            Some("EPSG:4326"),
        );
        let wf = frame_of(&reference, &target, &Choice::default());
        assert_eq!(wf.crs.authority.as_deref(), Some("EPSG:32633"));
        assert!(!wf.crs.geographic);
        assert!(
            wf.chosen_because.contains("UTM zone"),
            "{}",
            wf.chosen_because
        );
        assert!(wf.reference_crs.geographic);
        // The points are in metres now: 14.4°E is 0.6° west of the zone's central meridian 15°E
        // (x = 500 km), so x ≈ 500 km − 0.6° · 111 km · cos 47° ≈ 455 km; 47°N is about
        // 5 205 km north of the equator.
        for p in wf.reference.iter().chain(&wf.target) {
            assert!((440_000.0..470_000.0).contains(&p[0]), "{p:?}");
            assert!((5_190_000.0..5_220_000.0).contains(&p[1]), "{p:?}");
        }
        // Going back gives the longitudes and latitudes read.
        let back = wf.to_reference_crs(&wf.reference).unwrap();
        for (b, p) in back.iter().zip(&reference.points) {
            assert!(
                (b[0] - p[0]).abs() < 1e-9 && (b[1] - p[1]).abs() < 1e-9,
                "{b:?} {p:?}"
            );
        }
    }

    #[test]
    fn southern_reference_gets_a_south_zone() {
        // Near 151.2°E 33.9°S: zone 56 (150°E..156°E), south: EPSG:327zz.
        let reference = survey(
            "ref.gpkg",
            box_around(151.2, -33.9, 0.01, 0.01),
            Some("EPSG:4326"),
        );
        let target = survey(
            "tgt.gpkg",
            box_around(151.2, -33.9, 0.01, 0.01),
            Some("EPSG:4326"),
        );
        let wf = frame_of(&reference, &target, &Choice::default());
        assert_eq!(wf.crs.authority.as_deref(), Some("EPSG:32756"));
        // A south zone has its false northing of 10 000 km: 33.9°S is about 6 250 km.
        assert!(wf
            .reference
            .iter()
            .all(|p| (6_200_000.0..6_300_000.0).contains(&p[1])));
    }

    #[test]
    fn zone_choice_at_a_zone_edge_and_at_the_equator() {
        // Zone z spans longitudes [−180 + 6(z − 1), −180 + 6z): the edge at 12°E belongs to
        // zone 33. A centre of exactly 12°E (11.5 and 12.5 average exactly) is zone 33; a
        // centre just west of it is zone 32. The equator itself counts as north.
        let zone = |lon0: f64, lon1: f64, lat: f64| {
            let pts = vec![[lon0, lat - 0.2], [lon1, lat + 0.2], [lon0, lat + 0.2]];
            let reference = survey("ref.gpkg", pts.clone(), None);
            let target = survey("tgt.gpkg", pts, None);
            let options = Choice {
                reference_crs: Some("EPSG:4326"),
                target_crs: Some("EPSG:4326"),
                working_crs: None,
            };
            frame_of(&reference, &target, &options)
                .crs
                .authority
                .unwrap()
        };
        assert_eq!(zone(11.5, 12.5, 47.0), "EPSG:32633");
        assert_eq!(zone(11.5, 12.49, 47.0), "EPSG:32632");
        assert_eq!(zone(11.5, 12.5, 0.0), "EPSG:32633");
        assert_eq!(zone(11.5, 12.5, -0.01), "EPSG:32733");
    }

    #[test]
    fn projected_reference_is_the_working_crs_and_a_converted_target_overlaps() {
        // The reference in UTM 33N, the target the same place in lon/lat: the target is
        // converted into the reference's CRS and lands on it.
        let utm = box_around(455_000.0, 5_210_000.0, 500.0, 500.0);
        let to_ll = Converter::new(
            &Crs::parse("EPSG:32633", "test").unwrap(),
            &Crs::parse("EPSG:4326", "test").unwrap(),
        )
        .unwrap();
        let ll: Vec<[f64; 2]> = utm.iter().map(|&p| to_ll.convert(p).unwrap()).collect();
        let reference = survey("ref.gpkg", utm.clone(), Some("EPSG:32633"));
        let target = survey("tgt.geojson", ll, Some("EPSG:4326"));
        let wf = frame_of(&reference, &target, &Choice::default());
        assert_eq!(wf.crs.authority.as_deref(), Some("EPSG:32633"));
        assert_eq!(wf.chosen_because, "the reference's CRS");
        assert_eq!(wf.reference, utm, "the reference is not touched");
        for (t, r) in wf.target.iter().zip(&utm) {
            assert!((t[0] - r[0]).abs() < 1e-6 && (t[1] - r[1]).abs() < 1e-6);
        }
    }

    #[test]
    fn local_target_is_left_as_it_is() {
        // A target in a local grid far from the reference: no CRS, no conversion, and no
        // overlap check (the fitted similarity is its calibration).
        let reference = survey(
            "ref.gpkg",
            box_around(455_000.0, 5_210_000.0, 500.0, 500.0),
            Some("EPSG:32633"),
        );
        let local = vec![[5000.0, 10000.0], [5120.5, 10033.25], [4990.0, 10200.0]];
        let target = survey("grid.csv", local.clone(), None);
        let options = Choice {
            target_crs: Some("LOCAL"),
            ..Choice::default()
        };
        let wf = frame_of(&reference, &target, &options);
        assert!(wf.target_crs.is_none());
        assert_eq!(wf.target, local);
        // The word is not allowed for the reference.
        let options = Choice {
            reference_crs: Some("local"),
            ..Choice::default()
        };
        assert!(matches!(
            try_frame(&reference, &target, &options),
            Err(FrameError::LocalReference)
        ));
    }

    #[test]
    fn georeferenced_surveys_far_apart_do_not_overlap() {
        // Both in UTM 33N, 150 km apart.
        let reference = survey(
            "ref.gpkg",
            box_around(455_000.0, 5_210_000.0, 500.0, 500.0),
            Some("EPSG:32633"),
        );
        let target = survey(
            "tgt.gpkg",
            box_around(605_000.0, 5_210_000.0, 500.0, 500.0),
            Some("EPSG:32633"),
        );
        match try_frame(&reference, &target, &Choice::default()) {
            Err(FrameError::NoOverlap { crs, rx1, tx0, .. }) => {
                assert!(crs.starts_with("EPSG:32633"), "{crs}");
                assert_eq!((rx1, tx0), (455_500.0, 604_500.0));
            }
            other => panic!("expected NoOverlap, got {other:?}"),
        }
        // Apart in y only is also no overlap.
        let target = survey(
            "tgt.gpkg",
            box_around(455_000.0, 5_300_000.0, 500.0, 500.0),
            Some("EPSG:32633"),
        );
        assert!(matches!(
            try_frame(&reference, &target, &Choice::default()),
            Err(FrameError::NoOverlap { .. })
        ));
    }

    #[test]
    fn latitude_first_is_named_when_the_surveys_do_not_overlap() {
        // The reference in UTM 33N near 14.4°E 47.0°N; the target the same place in lon/lat,
        // but stored latitude first: read as lon/lat it lies at 47°E 14.4°N, in Yemen.
        let utm = box_around(455_000.0, 5_210_000.0, 500.0, 500.0);
        let to_ll = Converter::new(
            &Crs::parse("EPSG:32633", "test").unwrap(),
            &Crs::parse("EPSG:4326", "test").unwrap(),
        )
        .unwrap();
        let lat_lon: Vec<[f64; 2]> = utm
            .iter()
            .map(|&p| {
                let q = to_ll.convert(p).unwrap();
                [q[1], q[0]]
            })
            .collect();
        let reference = survey("ref.gpkg", utm.clone(), Some("EPSG:32633"));
        let target = survey("latlon.csv", lat_lon, Some("EPSG:4326"));
        let Err(e) = try_frame(&reference, &target, &Choice::default()) else {
            panic!("swapped axes overlapped");
        };
        let text = e.to_string();
        for part in [
            "do not overlap",
            "Are the axes swapped? The target (latlon.csv) overlaps the reference once its x and y are swapped",
            "swap the x and y columns",
        ] {
            assert!(text.contains(part), "{part}: {text}");
        }
        // Far apart but not swapped: only the question, from the look of the numbers.
        let far: Vec<[f64; 2]> = box_around(30.0, 10.0, 0.01, 0.01);
        let target = survey("far.csv", far, Some("EPSG:4326"));
        let text = try_frame(&reference, &target, &Choice::default())
            .unwrap_err()
            .to_string();
        assert!(
            text.contains("Are the axes swapped? All x of the target (far.csv) are within ±90"),
            "{text}"
        );
        // Projected surveys far apart get no such question.
        let target = survey(
            "tgt.gpkg",
            box_around(605_000.0, 5_210_000.0, 500.0, 500.0),
            Some("EPSG:32633"),
        );
        let text = try_frame(&reference, &target, &Choice::default())
            .unwrap_err()
            .to_string();
        assert!(!text.contains("swapped"), "{text}");
    }

    #[test]
    fn geographic_working_crs_is_refused() {
        let reference = survey(
            "ref.gpkg",
            box_around(14.4, 47.0, 0.01, 0.01),
            Some("EPSG:4326"),
        );
        let target = survey(
            "tgt.gpkg",
            box_around(14.4, 47.0, 0.01, 0.01),
            Some("EPSG:4326"),
        );
        let options = Choice {
            working_crs: Some("EPSG:4258"),
            ..Choice::default()
        };
        match try_frame(&reference, &target, &options) {
            Err(FrameError::GeographicWorking(label)) => {
                assert!(label.starts_with("EPSG:4258"), "{label}")
            }
            other => panic!("expected GeographicWorking, got {other:?}"),
        }
    }
}
