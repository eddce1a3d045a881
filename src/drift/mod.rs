//! Drift: has the target moved relative to the reference, where, and by more than a
//! tolerance?
//!
//! **In:** an accepted match ([`MatchOutcome`]: both surveys in the working frame and the
//! solution with its control points) and [`DriftParams`] (the tolerance in metres).
//! **Out:** a [`Drift`] (public and serialisable; `drift.json` is its serde form, see
//! [`crate::emit::drift`]): the verdict, the global drift stated at the control points'
//! centroid (shift east / north in metres, rotation in arc-seconds counter-clockwise, scale in
//! ppm, each with its standard error and significance at 95 %, and a joint test), the largest
//! movement of the global drift anywhere over the overlap of the two surveys, the accuracy over
//! the landmarks that follow the global transform, and the **local drift areas**: areas that
//! moved relative to the rest, found from the residual field (module [`field`], which states
//! the method, the search bound and the significance test), each with its centre, outline,
//! mean shift with standard error, its landmarks and its significance.
//!
//! Drift is the movement of the target relative to the reference: the reference → target
//! similarity (the inverse of the match's target → reference one), stated at the centroid of
//! the reference positions of the landmarks that follow it. Landmarks in flagged areas are
//! reported with their areas and take no part in the global statement or the accuracy.
//!
//! **Verdict:** `exceeded` when the global drift moves some point of the overlap by more than
//! the tolerance (`max_drift_m`), or when a flagged area's movement relative to the reference
//! (the global drift at its centre plus its own shift) is larger than the tolerance; else
//! `within`. Drift compares two georeferenced surveys: a local-grid target has no movement to
//! state ([`DriftError::LocalGrid`]).

pub mod field;
pub mod geometry;

use crate::accuracy::Estimate;
use crate::outcome::MatchOutcome;
use serde::Serialize;
use std::fmt::Write;

pub use field::{GlobalTest, DRAWS, LEVEL};

/// Options of the drift check (pipeline table `[drift]`); defined with the configuration,
/// below this module, so that the module graph has no cycle.
pub use crate::config::DriftParams;

impl DriftParams {
    /// Checks the options alone.
    pub fn validate(&self) -> Result<(), DriftError> {
        if self.tolerance_m.is_finite() && self.tolerance_m > 0.0 {
            Ok(())
        } else {
            Err(DriftError::InvalidTolerance(self.tolerance_m))
        }
    }
}

/// Why no drift could be stated.
#[derive(Debug, thiserror::Error)]
pub enum DriftError {
    /// The tolerance is not a positive number of metres.
    #[error("drift.tolerance_m must be a positive number of metres, the largest movement allowed (got {0})")]
    InvalidTolerance(f64),
    /// The target is a local grid.
    #[error("{0}: the target is an unreferenced local grid; drift compares two georeferenced surveys of one place: give the target's CRS (target.crs), or use match for a site calibration")]
    LocalGrid(String),
    /// The match found no transform.
    #[error("no transform was accepted, so there is no drift to state")]
    NothingAccepted,
    /// Too few landmarks follow the global transform once the moved areas are taken out.
    #[error("fewer than three landmarks follow the global transform once the areas that moved are taken out; the drift cannot be stated: check that the surveys cover the same place")]
    TooFewStable,
    /// Coordinates could not be converted to the reference CRS.
    #[error("converting the drift outputs to the reference CRS failed: {0}")]
    Frame(#[source] crate::frame::FrameError),
}

/// The verdict against the tolerance.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Verdict {
    /// Nothing moved by more than the tolerance.
    Within,
    /// The global drift somewhere over the overlap, or a flagged area, moved by more.
    Exceeded,
}

/// The accuracy behind the drift statement.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DriftAccuracy {
    /// RMSE of the east residuals, metres.
    pub rmse_x_m: f64,
    /// RMSE of the north residuals, metres.
    pub rmse_y_m: f64,
    /// √(RMSE_x² + RMSE_y²), metres.
    pub rmse_r_m: f64,
    /// Horizontal accuracy at 95 % (NSSDA), metres.
    pub nssda_95_m: f64,
    /// Points behind the figures.
    pub n: usize,
    /// Whether they are independent checkpoints (the fit's own residuals are not).
    pub independent: bool,
    /// Where the residuals came from, in words.
    pub source: String,
}

/// One landmark of a flagged area.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AreaLandmark {
    /// Reference landmark id.
    pub reference_id: String,
    /// Target landmark id.
    pub target_id: String,
    /// Reference position, reference CRS.
    pub x: f64,
    /// Reference position, reference CRS.
    pub y: f64,
    /// Its movement relative to the global drift, east, metres.
    pub shift_east_m: f64,
    /// Its movement relative to the global drift, north, metres.
    pub shift_north_m: f64,
}

/// An area that moved relative to the rest.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LocalArea {
    /// 1, 2, … (largest shift first).
    pub id: usize,
    /// Centre (mean of its landmarks' reference positions), reference CRS.
    pub x: f64,
    /// Centre, reference CRS.
    pub y: f64,
    /// Convex hull of its landmarks, reference CRS, counter-clockwise in the working frame.
    pub outline: Vec<[f64; 2]>,
    /// Mean shift relative to the global drift, east, metres.
    pub shift_east_m: f64,
    /// Mean shift relative to the global drift, north, metres.
    pub shift_north_m: f64,
    /// Its length, metres.
    pub shift_m: f64,
    /// Standard error of each component of the shift, metres.
    pub shift_se_m: f64,
    /// The area's movement relative to the reference (global drift at its centre plus its
    /// shift), east, metres.
    pub movement_east_m: f64,
    /// The same, north, metres.
    pub movement_north_m: f64,
    /// Its length, metres (what the tolerance is held against).
    pub movement_m: f64,
    /// movement_m > tolerance.
    pub exceeds_tolerance: bool,
    /// Q = n |shift|² / σ̂².
    pub statistic: f64,
    /// Monte Carlo p-value against the survey-wide maximum of Q.
    pub p_value: f64,
    /// p ≤ the level (always true for a listed area: only flagged areas are listed).
    pub significant: bool,
    /// Its landmarks.
    pub landmarks: Vec<AreaLandmark>,
}

/// How the local areas were tested.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LocalTest {
    /// The test, in words.
    pub method: String,
    /// Family-wise level over the whole survey.
    pub level: f64,
    /// Monte Carlo draws.
    pub draws: usize,
    /// Candidate areas tested.
    pub candidates: usize,
    /// Radius of the wider guided pass, metres: local movements up to it can be found.
    pub search_radius_m: f64,
    /// Pairs the global fit had rejected that the wider pass kept (their neighbourhood agreed).
    pub extra_pairs: usize,
    /// σ̂ per coordinate of the global fit over the stable landmarks, metres.
    pub sigma_m: f64,
}

/// Everything the drift check found (the serde form is `drift.json`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Drift {
    /// Within or exceeded.
    pub verdict: Verdict,
    /// The verdict in one line.
    pub verdict_line: String,
    /// The tolerance, metres.
    pub tolerance_m: f64,
    /// The point the global drift is stated at (reference CRS): the centroid of the stable
    /// control points' reference positions.
    pub centroid_x: f64,
    /// The same, y.
    pub centroid_y: f64,
    /// The global drift's shift east at the centroid, metres.
    pub shift_east_m: Estimate,
    /// Its shift north, metres.
    pub shift_north_m: Estimate,
    /// Its rotation, arc-seconds, counter-clockwise.
    pub rotation_arcsec: Estimate,
    /// Its scale error, ppm.
    pub scale_ppm: Estimate,
    /// Joint test of the four.
    pub global_test: GlobalTest,
    /// Largest movement of the global drift over the overlap, metres.
    pub max_drift_m: f64,
    /// Where (a corner of the overlap), reference CRS.
    pub max_drift_x: f64,
    /// The same, y.
    pub max_drift_y: f64,
    /// The overlap of the two surveys (reference CRS).
    pub overlap: Vec<[f64; 2]>,
    /// Accuracy over the landmarks that follow the global transform.
    pub accuracy: Option<DriftAccuracy>,
    /// Control points that follow the global transform.
    pub control_points: usize,
    /// Flagged areas.
    pub local_areas: Vec<LocalArea>,
    /// How they were tested.
    pub local_test: LocalTest,
    /// The caution.
    pub caution: &'static str,
}

/// Runs the drift check on an accepted match.
pub fn analyse(outcome: &MatchOutcome, params: &DriftParams) -> Result<Drift, DriftError> {
    params.validate()?;
    if outcome.frame.target_crs.is_none() {
        return Err(DriftError::LocalGrid(
            outcome.target.source.display().to_string(),
        ));
    }
    let solution = outcome.solution().ok_or(DriftError::NothingAccepted)?;
    let mpu = outcome.metres_per_unit();
    let a = field::analyse(&field::FieldInput {
        reference: &outcome.frame.reference,
        target: &outcome.frame.target,
        solution,
        reference_spacing: outcome.search.reference_spacing,
        metres_per_unit: mpu,
        unit_scale: 1.0,
        seed: outcome.config.fit.seed,
    })
    .ok_or(DriftError::TooFewStable)?;
    let to_ref = |pts: &[[f64; 2]]| {
        outcome
            .frame
            .to_reference_crs(pts)
            .map_err(DriftError::Frame)
    };
    let st = &a.statement;
    let drift = st.transform;
    let tol = params.tolerance_m;
    let mut local_areas = Vec::new();
    for (k, area) in a.areas.iter().enumerate() {
        let c = to_ref(&[area.centre])?[0];
        let global = {
            let q = drift.apply(area.centre);
            [q[0] - area.centre[0], q[1] - area.centre[1]]
        };
        let mv = [
            (global[0] + area.shift[0]) * mpu,
            (global[1] + area.shift[1]) * mpu,
        ];
        let positions: Vec<[f64; 2]> = area
            .members
            .iter()
            .map(|p| outcome.reference.points[p.reference as usize])
            .collect();
        let landmarks = area
            .members
            .iter()
            .zip(&area.movements)
            .zip(&positions)
            .map(|((p, m), xy)| AreaLandmark {
                reference_id: outcome.reference.ids[p.reference as usize].clone(),
                target_id: outcome.target.ids[p.target as usize].clone(),
                x: xy[0],
                y: xy[1],
                shift_east_m: m[0] * mpu,
                shift_north_m: m[1] * mpu,
            })
            .collect();
        let movement_m = mv[0].hypot(mv[1]);
        local_areas.push(LocalArea {
            id: k + 1,
            x: c[0],
            y: c[1],
            outline: to_ref(&area.outline)?,
            shift_east_m: area.shift[0] * mpu,
            shift_north_m: area.shift[1] * mpu,
            shift_m: area.shift[0].hypot(area.shift[1]) * mpu,
            shift_se_m: area.shift_se * mpu,
            movement_east_m: mv[0],
            movement_north_m: mv[1],
            movement_m,
            exceeds_tolerance: movement_m > tol,
            statistic: area.statistic,
            p_value: area.p_value,
            significant: area.significant,
            landmarks,
        });
    }
    let centroid = to_ref(&[st.at])?[0];
    let max_at = to_ref(&[a.max_drift_at])?[0];
    let verdict = if a.max_drift_m > tol || local_areas.iter().any(|l| l.exceeds_tolerance) {
        Verdict::Exceeded
    } else {
        Verdict::Within
    };
    let verdict_line = verdict_line(verdict, tol, a.max_drift_m, &local_areas);
    Ok(Drift {
        verdict,
        verdict_line,
        tolerance_m: tol,
        centroid_x: centroid[0],
        centroid_y: centroid[1],
        shift_east_m: st.shift_east_m,
        shift_north_m: st.shift_north_m,
        rotation_arcsec: st.rotation_arcsec,
        scale_ppm: st.scale_ppm,
        global_test: a.global,
        max_drift_m: a.max_drift_m,
        max_drift_x: max_at[0],
        max_drift_y: max_at[1],
        overlap: to_ref(&a.overlap)?,
        accuracy: a.accuracy.as_ref().map(|acc| DriftAccuracy {
            rmse_x_m: acc.rmse_x_m,
            rmse_y_m: acc.rmse_y_m,
            rmse_r_m: acc.rmse_r_m,
            nssda_95_m: acc.nssda_95_m,
            n: acc.n,
            independent: acc.source.independent(),
            source: acc.source.describe(),
        }),
        control_points: a.stable.len(),
        local_areas,
        local_test: LocalTest {
            method: format!(
                "region growing over the movements relative to the global drift on the {}-nearest-neighbour graph; each area's Q = n |mean shift|^2 / sigma^2 against the distribution of the survey-wide largest Q in {DRAWS} Monte Carlo residual fields of the global fit's noise (family-wise error over the whole survey)",
                field::NEIGHBOURS
            ),
            level: LEVEL,
            draws: DRAWS,
            candidates: a.candidates,
            search_radius_m: a.search_radius * mpu,
            extra_pairs: a.extra_pairs,
            sigma_m: a.sigma * mpu,
        },
        caution: crate::outcome::CAUTION,
    })
}

/// The verdict in one line, e.g. `drift: EXCEEDED the tolerance of 0.100 m: area 1 moved
/// 0.162 m (largest global drift over the overlap 0.071 m)`.
fn verdict_line(verdict: Verdict, tol: f64, max_drift_m: f64, areas: &[LocalArea]) -> String {
    let worst = areas
        .iter()
        .filter(|a| a.exceeds_tolerance)
        .max_by(|a, b| a.movement_m.total_cmp(&b.movement_m));
    match verdict {
        Verdict::Within => format!(
            "drift: WITHIN the tolerance of {tol:.3} m: the global drift moves no point of the overlap by more than {max_drift_m:.3} m{}",
            match areas.len() {
                0 => "; no area moved relative to the rest".to_string(),
                n => format!("; {n} area(s) moved relative to the rest, none beyond the tolerance"),
            }
        ),
        Verdict::Exceeded => {
            let mut why = Vec::new();
            if max_drift_m > tol {
                why.push(format!(
                    "the global drift moves part of the overlap by {max_drift_m:.3} m"
                ));
            }
            if let Some(a) = worst {
                why.push(format!(
                    "area {} ({} landmarks) moved {:.3} m",
                    a.id,
                    a.landmarks.len(),
                    a.movement_m
                ));
            }
            format!(
                "drift: EXCEEDED the tolerance of {tol:.3} m: {}",
                why.join("; ")
            )
        }
    }
}

impl Drift {
    /// The drift section of the text report.
    pub fn summary(&self) -> String {
        let mut o = String::new();
        let e = |x: &Estimate, unit: &str, digits: usize| {
            format!(
                "{:+.digits$} ± {:.digits$} {unit}{}",
                x.value,
                x.se,
                if x.significant {
                    "  (significant at 95%)"
                } else {
                    ""
                }
            )
        };
        let _ = writeln!(
            o,
            "drift (movement of the target relative to the reference)"
        );
        let _ = writeln!(
            o,
            "  at             x {:.3}, y {:.3} (reference CRS; the centroid of the {} control points that follow the global transform)",
            self.centroid_x, self.centroid_y, self.control_points
        );
        let _ = writeln!(o, "  shift east     {}", e(&self.shift_east_m, "m", 4));
        let _ = writeln!(o, "  shift north    {}", e(&self.shift_north_m, "m", 4));
        let _ = writeln!(
            o,
            "  rotation       {}",
            e(&self.rotation_arcsec, "arc-seconds counter-clockwise", 2)
        );
        let _ = writeln!(o, "  scale          {}", e(&self.scale_ppm, "ppm", 2));
        let g = &self.global_test;
        let _ = writeln!(
            o,
            "  joint test     chi-square {:.2} with 4 degrees of freedom, p = {:.3}: {}",
            g.statistic,
            g.p_value,
            if g.significant {
                "the surveys differ by more than their noise (95%)"
            } else {
                "no drift beyond the noise (95%)"
            }
        );
        let _ = writeln!(
            o,
            "  largest        {:.4} m over the overlap of the two surveys, at x {:.3}, y {:.3}",
            self.max_drift_m, self.max_drift_x, self.max_drift_y
        );
        if let Some(a) = &self.accuracy {
            let _ = writeln!(
                o,
                "  accuracy       RMSE x {:.4} m, y {:.4} m, r {:.4} m; NSSDA 95% {:.4} m over {} points ({}independent: {})",
                a.rmse_x_m, a.rmse_y_m, a.rmse_r_m, a.nssda_95_m, a.n,
                if a.independent { "" } else { "not " }, a.source
            );
        }
        let t = &self.local_test;
        let _ = writeln!(
            o,
            "  local areas    {} flagged of {} candidates (family-wise level {:.0}% over the survey, {} Monte Carlo draws; movements up to {:.3} m searched; {} pairs the global fit rejected were kept as their neighbours agree)",
            self.local_areas.len(),
            t.candidates,
            t.level * 100.0,
            t.draws,
            t.search_radius_m,
            t.extra_pairs
        );
        for a in &self.local_areas {
            let _ = writeln!(
                o,
                "    area {}      {} landmarks around x {:.3}, y {:.3}: shift {:+.4} m east, {:+.4} m north (± {:.4} m) relative to the rest; movement {:.4} m{}; p = {:.3}",
                a.id,
                a.landmarks.len(),
                a.x,
                a.y,
                a.shift_east_m,
                a.shift_north_m,
                a.shift_se_m,
                a.movement_m,
                if a.exceeds_tolerance { " (beyond the tolerance)" } else { "" },
                a.p_value
            );
        }
        let _ = writeln!(o);
        let _ = writeln!(o, "{}", self.verdict_line);
        o
    }
}
