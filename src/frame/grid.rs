//! Local grids: an unreferenced site grid's declared unit, the engineering CRS its outputs are
//! tagged with, and the grid scale factor that remains of a fitted scale once the unit
//! conversion is taken out.
//!
//! **In:** the target's CRS value (`local`, `local:m`, `local:ft`, `local:us-ft`), and for
//! [`GridScale::of`] a fitted scale with its standard error and the working CRS's metres per
//! unit. **Out:** a [`GridUnit`] (or none: `local` alone declares no unit), an engineering
//! (undefined Cartesian) CRS as WKT ([`engineering_wkt`]), and a [`GridScale`].
//!
//! The units: the metre; the international foot, 0.3048 m exactly, and the US survey foot,
//! 1200/3937 m exactly (Federal Register Vol. 85 No. 193, 5 October 2020, "Deprecation of the
//! United States (U.S.) Survey Foot", NIST and NOAA: the international foot is 0.3048 m
//! exactly — read; the US survey foot as 1200/3937 m dates from 1893 and was kept for geodetic
//! surveys in 1959 — from memory). Their ratio is (1200/3937) / 0.3048 = 1200 / 1199.9976
//! = 1 + 2.000004 ppm (computed), which is why a grid in the wrong foot shows a scale factor
//! 2 ppm off.

use serde::Serialize;

/// The word that marks a target in an unreferenced local grid; `local:UNIT` declares its unit.
pub const LOCAL: &str = "local";

/// The declared unit of a local grid.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum GridUnit {
    /// The metre (`local:m`).
    Metre,
    /// The international foot, 0.3048 m (`local:ft`).
    Foot,
    /// The US survey foot, 1200/3937 m (`local:us-ft`).
    UsSurveyFoot,
}

impl GridUnit {
    /// Every unit, in the order the messages list them.
    pub const ALL: [GridUnit; 3] = [GridUnit::Metre, GridUnit::Foot, GridUnit::UsSurveyFoot];

    /// The code after `local:`.
    pub fn code(self) -> &'static str {
        match self {
            GridUnit::Metre => "m",
            GridUnit::Foot => "ft",
            GridUnit::UsSurveyFoot => "us-ft",
        }
    }

    /// The unit's name.
    pub fn name(self) -> &'static str {
        match self {
            GridUnit::Metre => "metre",
            GridUnit::Foot => "international foot",
            GridUnit::UsSurveyFoot => "US survey foot",
        }
    }

    /// Metres per unit.
    pub fn metres(self) -> f64 {
        match self {
            GridUnit::Metre => 1.0,
            GridUnit::Foot => 0.3048,
            GridUnit::UsSurveyFoot => 1200.0 / 3937.0,
        }
    }

    /// The definition in words.
    pub fn definition(self) -> &'static str {
        match self {
            GridUnit::Metre => "1 m",
            GridUnit::Foot => "0.3048 m exactly",
            GridUnit::UsSurveyFoot => "1200/3937 m exactly",
        }
    }

    /// The EPSG code of the unit (9001 metre, 9002 foot, 9003 US survey foot).
    fn epsg(self) -> u32 {
        match self {
            GridUnit::Metre => 9001,
            GridUnit::Foot => 9002,
            GridUnit::UsSurveyFoot => 9003,
        }
    }
}

/// A CRS value that is not a local grid, or a local grid with a unit nobody knows.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{option} = {given}: '{unit}' is not a unit of a local grid; write {option} = local:m (metres), local:ft (international foot, 0.3048 m) or local:us-ft (US survey foot, 1200/3937 m), or local if the unit is not known")]
pub struct UnknownUnit {
    /// The option (`target.crs`).
    pub option: String,
    /// The value given.
    pub given: String,
    /// The unit part of it.
    pub unit: String,
}

/// Reads a CRS value as a local grid: `None` when it is not one (an ordinary CRS), else the
/// declared unit (`Ok(None)` for plain `local`). Case does not matter.
pub fn parse_local(value: &str, option: &str) -> Option<Result<Option<GridUnit>, UnknownUnit>> {
    let v = value.trim();
    if v.eq_ignore_ascii_case(LOCAL) {
        return Some(Ok(None));
    }
    let (head, unit) = v.split_once(':')?;
    if !head.trim().eq_ignore_ascii_case(LOCAL) {
        return None;
    }
    let unit = unit.trim();
    Some(
        GridUnit::ALL
            .into_iter()
            .find(|u| u.code().eq_ignore_ascii_case(unit))
            .map(Some)
            .ok_or_else(|| UnknownUnit {
                option: option.to_string(),
                given: value.to_string(),
                unit: unit.to_string(),
            }),
    )
}

/// The engineering CRS a local grid's coordinates are tagged with: a 2-D Cartesian CRS
/// (easting, northing) in the declared unit, or, without a unit, the "Undefined Cartesian SRS"
/// (which a GeoPackage stores as its srs_id −1, not the "undefined geographic" srs_id 0 of a
/// layer without a CRS).
pub fn engineering_wkt(unit: Option<GridUnit>) -> String {
    match unit {
        Some(u) => format!(
            "LOCAL_CS[\"local grid ({name})\",LOCAL_DATUM[\"local grid\",32767],UNIT[\"{name}\",{metres},AUTHORITY[\"EPSG\",\"{epsg}\"]],AXIS[\"Easting\",EAST],AXIS[\"Northing\",NORTH]]",
            name = u.name(),
            metres = u.metres(),
            epsg = u.epsg()
        ),
        None => "LOCAL_CS[\"Undefined Cartesian SRS\"]".to_string(),
    }
}

/// A local grid's calibration scale split into the unit conversion and the grid scale factor.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct GridScale {
    /// The declared unit.
    pub unit: GridUnit,
    /// Working-CRS units per grid unit from the units alone (metres per grid unit over metres
    /// per working unit).
    pub unit_factor: f64,
    /// What remains of the fitted scale: working-CRS distance per grid distance, both in
    /// metres (fitted scale / unit factor).
    pub grid_scale_factor: f64,
    /// The grid scale factor as ppm from 1: (factor − 1) · 10⁶.
    pub grid_scale_ppm: f64,
    /// Standard error of the grid scale factor, ppm.
    pub grid_scale_ppm_se: f64,
}

impl GridScale {
    /// Splits a fitted `scale` (± `se_scale`) of a grid in `unit` onto a working CRS of
    /// `working_metres_per_unit`.
    pub fn of(unit: GridUnit, scale: f64, se_scale: f64, working_metres_per_unit: f64) -> Self {
        let unit_factor = unit.metres() / working_metres_per_unit;
        let grid_scale_factor = scale / unit_factor;
        GridScale {
            unit,
            unit_factor,
            grid_scale_factor,
            grid_scale_ppm: (grid_scale_factor - 1.0) * 1e6,
            grid_scale_ppm_se: se_scale / unit_factor * 1e6,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn local_values_are_read_with_their_unit() {
        assert_eq!(parse_local("local", "target.crs"), Some(Ok(None)));
        assert_eq!(parse_local("LOCAL", "target.crs"), Some(Ok(None)));
        assert_eq!(
            parse_local("local:us-ft", "target.crs"),
            Some(Ok(Some(GridUnit::UsSurveyFoot)))
        );
        assert_eq!(
            parse_local("Local:FT", "target.crs"),
            Some(Ok(Some(GridUnit::Foot)))
        );
        assert_eq!(
            parse_local("local:m", "target.crs"),
            Some(Ok(Some(GridUnit::Metre)))
        );
        assert_eq!(parse_local("EPSG:32633", "target.crs"), None);
        let e = parse_local("local:yd", "target.crs").unwrap().unwrap_err();
        assert!(e.to_string().contains("'yd' is not a unit"), "{e}");
    }

    #[test]
    fn the_two_feet_differ_by_two_ppm() {
        // (1200/3937) / 0.3048 − 1 = 0.0024 / 1199.9976 = 2.000004 ppm (computed exactly).
        let ratio = GridUnit::UsSurveyFoot.metres() / GridUnit::Foot.metres();
        assert!(((ratio - 1.0) * 1e6 - 2.000004).abs() < 1e-6, "{ratio}");
        // The same fitted scale read in the two feet: grid scale factors 2 ppm apart.
        let s = 0.3048 * (1.0 - 150e-6);
        let ft = GridScale::of(GridUnit::Foot, s, 0.0, 1.0);
        let us = GridScale::of(GridUnit::UsSurveyFoot, s, 0.0, 1.0);
        assert!((ft.grid_scale_ppm + 150.0).abs() < 1e-6, "{ft:?}");
        assert!(
            (ft.grid_scale_ppm - us.grid_scale_ppm - 2.0).abs() < 1e-3,
            "{us:?}"
        );
        // A working CRS in US survey feet takes the conversion out for a grid in US feet.
        let same = GridScale::of(GridUnit::UsSurveyFoot, 1.0, 1e-7, 1200.0 / 3937.0);
        assert_eq!(same.unit_factor, 1.0);
        assert!((same.grid_scale_ppm_se - 0.1).abs() < 1e-9);
    }

    #[test]
    fn engineering_crs_carries_the_unit() {
        use gdal::spatial_ref::SpatialRef;
        for u in GridUnit::ALL {
            let srs = SpatialRef::from_wkt(&engineering_wkt(Some(u))).unwrap();
            assert!(srs.is_local() && !srs.is_geographic());
            assert!((srs.linear_units() - u.metres()).abs() < 1e-12, "{u:?}");
        }
        let undefined = SpatialRef::from_wkt(&engineering_wkt(None)).unwrap();
        assert!(undefined.is_local());
    }
}
