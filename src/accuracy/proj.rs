//! The fitted similarity in the forms other software applies directly: a PROJ pipeline string
//! (for `cct`, `cs2cs`, `ogr2ogr -ct`) and the parameters of EPSG method 9621.
//!
//! **In:** the similarity (target working → reference working coordinates) and the PROJ
//! definitions of the conversions target CRS → working CRS and working CRS → reference CRS (as
//! PROJ states them; the caller asks PROJ). **Out:** a pipeline string, or [`Epsg9621`].
//!
//! ## PROJ's 2-D Helmert
//!
//! PROJ's documentation, "Helmert transform" (proj.org, operations/transformations/helmert,
//! section "2D Helmert"), gives X_B = T_x + s (cos θ X_A + sin θ Y_A),
//! Y_B = T_y + s (−sin θ X_A + cos θ Y_A) with θ (`+theta`) in arc-seconds and, in the 2-D
//! case, `+s` a plain factor ("unitless for the 2D Helmert, as opposed to the 3D version where
//! the scaling parameter is given in units of ppm"). No `+convention` is needed: that choice
//! is about the 3-D rotations. Our similarity x' = a x − b y + tx, y' = b x + a y + ty
//! (counter-clockwise angle t, scale s) is therefore `+x=tx +y=ty +s=s +theta=−t″`. A positive
//! `+theta` turns points clockwise, which is also EPSG 9621's sign (below).
//!
//! ## EPSG method 9621, "Similarity transformation"
//!
//! IOGP Guidance Note 7-2 (as transcribed on the EPSG method page for code 9621):
//! XT = XT0 + XS·M·cos θ + YS·M·sin θ, YT = YT0 − XS·M·sin θ + YS·M·cos θ, where XT0, YT0
//! are the source CRS's origin in the target CRS, M the length of one source unit in target
//! units, and θ the angle the source axes must be rotated through to coincide with the target
//! axes, counter-clockwise positive. Its parameters (names and codes as in PROJ's
//! `proj_constants.h`): "Ordinate 1 of evaluation point in target CRS" (8621), "Ordinate 2 of
//! evaluation point in target CRS" (8622), "Scale factor for source CRS axes" (1061),
//! "Rotation angle of source CRS axes" (8614). For our similarity: XT0 = tx, YT0 = ty, M = s,
//! θ = −t.

use super::statement::ARCSEC_PER_RAD;
use crate::fit::similarity::Similarity;
use serde::{Deserialize, Serialize};

/// The `+step +proj=helmert …` of PROJ that applies `t` (see the module doc).
pub fn helmert_step(t: &Similarity) -> String {
    format!(
        "+step +proj=helmert +x={} +y={} +s={} +theta={}",
        t.tx,
        t.ty,
        t.scale(),
        -t.rotation() * ARCSEC_PER_RAD
    )
}

/// The steps of one PROJ definition (`proj=pipeline step … step …`, or a single operation),
/// each as `+step +key=value …`; none for `proj=noop`. `Err` with the reason when the
/// definition has pipeline-wide options, which cannot be carried into another pipeline.
pub fn steps_of(definition: &str) -> Result<Vec<String>, String> {
    let tokens: Vec<&str> = definition
        .split_whitespace()
        .map(|t| t.trim_start_matches('+'))
        .filter(|t| !t.is_empty())
        .collect();
    match tokens.first() {
        None | Some(&"proj=noop") => return Ok(Vec::new()),
        Some(&"proj=pipeline") => {}
        Some(_) => {
            return Ok(vec![format!(
                "+step {}",
                tokens
                    .iter()
                    .map(|t| format!("+{t}"))
                    .collect::<Vec<_>>()
                    .join(" ")
            )])
        }
    }
    let rest = &tokens[1..];
    let first_step = rest.iter().position(|t| *t == "step").unwrap_or(rest.len());
    if first_step > 0 {
        return Err(format!(
            "PROJ's conversion has pipeline-wide options ({}) that cannot be carried into another pipeline",
            rest[..first_step].join(" ")
        ));
    }
    let mut steps = Vec::new();
    for group in rest.split(|t| *t == "step").skip(1) {
        if group == ["proj=noop"] || group.is_empty() {
            continue;
        }
        let body: Vec<String> = group.iter().map(|t| format!("+{t}")).collect();
        steps.push(format!("+step {}", body.join(" ")));
    }
    Ok(steps)
}

/// The pipeline target CRS → reference CRS: `into_working` (target CRS → working CRS, `None`
/// for a local grid taken as is), the similarity, `out_of_working` (working CRS → reference
/// CRS); each a PROJ definition (see [`steps_of`]).
pub fn pipeline(
    into_working: Option<&str>,
    t: &Similarity,
    out_of_working: Option<&str>,
) -> Result<String, String> {
    let mut steps = match into_working {
        Some(d) => steps_of(d)?,
        None => Vec::new(),
    };
    steps.push(helmert_step(t));
    if let Some(d) = out_of_working {
        steps.extend(steps_of(d)?);
    }
    Ok(format!("+proj=pipeline {}", steps.join(" ")))
}

/// One parameter of an EPSG operation method.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EpsgParameter {
    /// The EPSG parameter name.
    pub name: String,
    /// The EPSG parameter code.
    pub code: u32,
    /// The value.
    pub value: f64,
    /// Its unit.
    pub unit: String,
}

/// A similarity as EPSG method 9621 states it (see the module doc).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Epsg9621 {
    /// XT0, target CRS units.
    pub ordinate_1: f64,
    /// YT0, target CRS units.
    pub ordinate_2: f64,
    /// M.
    pub scale_factor: f64,
    /// θ, arc-seconds, counter-clockwise positive (of the source axes).
    pub rotation_arcsec: f64,
}

impl Epsg9621 {
    /// The parameters of `t` (source: its input coordinates; target: its output ones).
    pub fn of(t: &Similarity) -> Self {
        Epsg9621 {
            ordinate_1: t.tx,
            ordinate_2: t.ty,
            scale_factor: t.scale(),
            rotation_arcsec: -t.rotation() * ARCSEC_PER_RAD,
        }
    }

    /// Applies the method's formula to a source point.
    pub fn apply(&self, p: [f64; 2]) -> [f64; 2] {
        let th = self.rotation_arcsec / ARCSEC_PER_RAD;
        let (m, c, s) = (self.scale_factor, th.cos(), th.sin());
        [
            self.ordinate_1 + p[0] * m * c + p[1] * m * s,
            self.ordinate_2 - p[0] * m * s + p[1] * m * c,
        ]
    }

    /// The parameters with their EPSG names, codes and units (`length_unit`: the target CRS's).
    pub fn parameters(&self, length_unit: &str) -> Vec<EpsgParameter> {
        let p = |name: &str, code, value, unit: &str| EpsgParameter {
            name: name.to_string(),
            code,
            value,
            unit: unit.to_string(),
        };
        vec![
            p(
                "Ordinate 1 of evaluation point in target CRS",
                8621,
                self.ordinate_1,
                length_unit,
            ),
            p(
                "Ordinate 2 of evaluation point in target CRS",
                8622,
                self.ordinate_2,
                length_unit,
            ),
            p(
                "Scale factor for source CRS axes",
                1061,
                self.scale_factor,
                "unity",
            ),
            p(
                "Rotation angle of source CRS axes",
                8614,
                self.rotation_arcsec,
                "arc-second",
            ),
        ]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn epsg_9621_reproduces_the_similarity_and_the_published_instance() {
        let t = Similarity::from_params(1.25, 0.4, 1000.0, -250.0);
        let e = Epsg9621::of(&t);
        for p in [[0.0, 0.0], [10.0, -3.0], [-400.0, 777.0]] {
            let (a, b) = (e.apply(p), t.apply(p));
            assert!((a[0] - b[0]).abs() < 1e-9 && (a[1] - b[1]).abs() < 1e-9);
        }
        // EPSG:5166 (ED50 / UTM 31N to ETRS89 / UTM 31N), read on the EPSG page: XT0 =
        // −129.549 m, YT0 = −208.185 m, M = 1.0000015504, θ = 1.56504″; (300000, 4500000)
        // becomes (299905.0600, 4499796.5154), seen with PROJ 9.1's cct (REFERENCES.md).
        let published = Epsg9621 {
            ordinate_1: -129.549,
            ordinate_2: -208.185,
            scale_factor: 1.0000015504,
            rotation_arcsec: 1.56504,
        };
        let q = published.apply([300000.0, 4500000.0]);
        assert!((q[0] - 299905.0600).abs() < 1e-4 && (q[1] - 4499796.5154).abs() < 1e-4);
        assert_eq!(published.parameters("metre")[3].code, 8614);
    }

    #[test]
    fn the_helmert_step_runs_in_proj_as_the_published_instance() {
        // The same EPSG:5166 instance as a similarity, written by helmert_step and applied by
        // PROJ itself (PROJ's documentation, "Helmert transform", section "2D Helmert").
        let th = 1.56504 / ARCSEC_PER_RAD;
        let m = 1.0000015504;
        let t = Similarity {
            a: m * th.cos(),
            b: -m * th.sin(),
            tx: -129.549,
            ty: -208.185,
        };
        let pipe = pipeline(None, &t, None).unwrap();
        let p = proj::Proj::new(&pipe).unwrap();
        let (x, y): (f64, f64) = p.convert((300000.0, 4500000.0)).unwrap();
        assert!((x - 299905.0600).abs() < 1e-4, "{x} ({pipe})");
        assert!((y - 4499796.5154).abs() < 1e-4, "{y}");
    }

    #[test]
    fn steps_are_flattened_from_proj_definitions() {
        let d = "proj=pipeline step proj=unitconvert xy_in=deg xy_out=rad step proj=utm zone=33 ellps=WGS84";
        assert_eq!(
            steps_of(d).unwrap(),
            [
                "+step +proj=unitconvert +xy_in=deg +xy_out=rad",
                "+step +proj=utm +zone=33 +ellps=WGS84"
            ]
        );
        assert!(steps_of("proj=noop").unwrap().is_empty());
        assert_eq!(
            steps_of("proj=utm zone=32").unwrap(),
            ["+step +proj=utm +zone=32"]
        );
        assert!(steps_of("proj=pipeline ellps=GRS80 step proj=utm zone=32").is_err());
    }
}
