//! Stage 6 (text) — the report: a plain-text summary for the terminal and `report.txt`.
//!
//! **In:** a [`MatchOutcome`]. **Out:** text: counts, the transform stated at the control
//! points' centroid (shift east/north in metres, rotation in arc-seconds, scale in ppm, each
//! with its standard error and whether it differs from zero at 95 %; the standard errors at
//! the working origin are in transform.json only), the accuracy (RMSE_x/y/r with the count,
//! NSSDA at 95 % with the rule used, ASPRS RMSE_H, where the residuals came from, warnings),
//! how well the control points cover the overlap, the significance, and the cautions; or,
//! for a rejected match, why (the robust fit's [`RejectReason`] put into words) and what to try.

use crate::fit::prior::Competitor;
use crate::fit::{RejectReason, Rejection, Solution};
use crate::outcome::MatchOutcome;
use geo::{MultiPoint, MultiPolygon, Point};
use std::fmt::Write;
use std::path::PathBuf;

/// The caution every report carries (defined with the outcome, which the library's own
/// results such as the drift check also carry).
pub use crate::outcome::CAUTION;

/// The overlap of the two surveys in the working frame: the intersection of the convex hull
/// of the reference landmarks with that of the target landmarks mapped by the transform.
/// `None` when the hulls do not overlap (or a survey has fewer than three distinct points).
pub fn overlap(reference: &[[f64; 2]], target_mapped: &[[f64; 2]]) -> Option<MultiPolygon<f64>> {
    use geo::{Area, BooleanOps, ConvexHull};
    let hull = |pts: &[[f64; 2]]| {
        MultiPoint::from(
            pts.iter()
                .map(|p| Point::new(p[0], p[1]))
                .collect::<Vec<_>>(),
        )
        .convex_hull()
    };
    let (a, b) = rayon::join(|| hull(reference), || hull(target_mapped));
    if a.unsigned_area() <= 0.0 || b.unsigned_area() <= 0.0 {
        return None;
    }
    let both = a.intersection(&b);
    (both.unsigned_area() > 0.0).then_some(both)
}

/// How well control points cover a region (the overlap of the two surveys, [`overlap`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Spread {
    /// Share of the cells of a 4 × 4 grid over the region's bounding box, those whose centre
    /// lies in the region, that hold at least one control point.
    pub share: f64,
    /// Those cells.
    pub cells: usize,
    /// Control points in the emptiest quadrant of the bounding box (of those the region
    /// reaches).
    pub fewest_in_quadrant: usize,
}

/// The [`Spread`] of `points` over `region`.
pub fn spread(points: &[[f64; 2]], region: &MultiPolygon<f64>) -> Spread {
    use geo::{BoundingRect, Contains};
    let Some(rect) = region.bounding_rect() else {
        return Spread {
            share: 0.0,
            cells: 0,
            fewest_in_quadrant: 0,
        };
    };
    let (lo, hi) = ([rect.min().x, rect.min().y], [rect.max().x, rect.max().y]);
    let size = [(hi[0] - lo[0]).max(1e-12), (hi[1] - lo[1]).max(1e-12)];
    let cell = |p: &[f64; 2], d: usize| (((p[d] - lo[d]) / size[d]) * 4.0).clamp(0.0, 3.0) as usize;
    let mut inside = [false; 16];
    for (k, c) in inside.iter_mut().enumerate() {
        let centre = Point::new(
            lo[0] + size[0] * ((k % 4) as f64 + 0.5) / 4.0,
            lo[1] + size[1] * ((k / 4) as f64 + 0.5) / 4.0,
        );
        *c = region.contains(&centre);
    }
    if !inside.iter().any(|c| *c) {
        inside = [true; 16];
    }
    let mut held = [false; 16];
    let mut quads = [0usize; 4];
    for p in points {
        let (i, j) = (cell(p, 0), cell(p, 1));
        held[i + 4 * j] = true;
        quads[i / 2 + 2 * (j / 2)] += 1;
    }
    let cells = inside.iter().filter(|c| **c).count();
    let hit = (0..16).filter(|&k| inside[k] && held[k]).count();
    let reached = |q: usize| (0..16).any(|k| inside[k] && (k % 4) / 2 + 2 * ((k / 4) / 2) == q);
    Spread {
        share: hit as f64 / cells as f64,
        cells,
        fewest_in_quadrant: (0..4)
            .filter(|&q| reached(q))
            .map(|q| quads[q])
            .min()
            .unwrap_or(0),
    }
}

/// The summary of a match: [`accepted`] or [`rejection`].
pub fn summary(r: &MatchOutcome) -> String {
    match &r.fit {
        Ok(s) => accepted(r, s),
        Err(rejection) => self::rejection(r, rejection),
    }
}

/// The summary of an accepted match.
pub fn accepted(r: &MatchOutcome, s: &Solution) -> String {
    let f = &s.fit;
    let t = f.transform;
    let mpu = r.frame.metres_per_unit();
    let mut o = String::new();
    let _ = writeln!(
        o,
        "tiemark {} — control points found",
        env!("CARGO_PKG_VERSION")
    );
    let _ = writeln!(o);
    let _ = writeln!(
        o,
        "reference  {} ({}): {} landmarks, {}",
        r.reference.source.display(),
        r.reference.what(),
        r.reference.points.len(),
        r.frame.reference_crs.label()
    );
    let tcrs = r
        .frame
        .target_crs
        .as_ref()
        .map(|c| c.label())
        .unwrap_or_else(|| match r.frame.target_unit {
            Some(u) => format!("local grid, unit {} (no CRS)", u.name()),
            None => "local grid (no CRS; unit not declared)".into(),
        });
    let _ = writeln!(
        o,
        "target     {} ({}): {} landmarks, {}",
        r.target.source.display(),
        r.target.what(),
        r.target.points.len(),
        tcrs
    );
    let _ = writeln!(o, "{}", skipped_line(r));
    let _ = writeln!(
        o,
        "working    {} — {}",
        r.frame.crs.label(),
        r.frame.chosen_because
    );
    let _ = writeln!(o);
    let held = match &r.accuracy {
        Some(a)
            if matches!(
                a.accuracy.source,
                crate::accuracy::AccuracySource::Holdout { .. }
            ) =>
        {
            format!(
                " ({} more held out of the fit as checkpoints)",
                a.points.len()
            )
        }
        _ => String::new(),
    };
    let _ = writeln!(
        o,
        "control points   {} (mutual pairs within the largest residual, {:.3} m){held}",
        s.pairs.len(),
        s.max_residual * mpu
    );
    let written = s.models.written();
    let _ = writeln!(
        o,
        "RMSE             {:.3} m   (sigma per coordinate {:.3} m; the fit's own {} residuals, as in control-points.csv)",
        written.rmse * mpu,
        written.sigma * mpu,
        written.model
    );
    let mut res: Vec<f64> = s.pairs.iter().map(|p| p.residual * mpu).collect();
    res.sort_by(f64::total_cmp);
    if let (Some(max), false) = (res.last(), res.is_empty()) {
        let _ = writeln!(
            o,
            "residuals        median {:.3} m, 95th percentile {:.3} m, max {:.3} m",
            res[res.len() / 2],
            res[(res.len() * 95 / 100).min(res.len() - 1)],
            max
        );
    }
    if r.area_seed.as_ref().is_some_and(|a| a.ran) {
        let _ = writeln!(
            o,
            "max residual     {:.3} m (one sample of the refinement's reference grid, for the area-based seed's control points)",
            s.max_residual * mpu
        );
    } else {
        let given = |g: bool, default: &str| if g { "as given" } else { default }.to_string();
        let _ = writeln!(
        o,
        "search radius    {:.3} m ({}): how far a mapped landmark may lie from its partner while searching",
        s.search_radius * mpu,
        given(r.config.fit.search_radius_m.is_some(), "a quarter of the reference's median spacing")
    );
        let _ = writeln!(
            o,
            "max residual     {:.3} m ({}): the largest residual a control point may have",
            s.max_residual * mpu,
            given(
                r.config.fit.max_residual_m.is_some(),
                "99.9% of the residual spread"
            )
        );
    }
    if let Some(px) = &r.pixels {
        let _ = writeln!(o, "{}", pixels_line(px));
    }
    if let Some(a) = &r.area_seed {
        let _ = writeln!(o, "{}", area_seed_line(a));
    }
    let _ = writeln!(o);
    match &r.accuracy {
        Some(a) => {
            let _ = write!(o, "{}", statement_lines(r, a));
        }
        None => {
            let _ = writeln!(
                o,
                "transform (target working -> reference working; rotation counter-clockwise)"
            );
            let _ = writeln!(
                o,
                "  rotation       {:.6}° ± {:.6}°",
                t.rotation().to_degrees(),
                f.se_rotation.to_degrees()
            );
        }
    }
    let _ = writeln!(o, "  scale factor   {:.9} ± {:.9}", t.scale(), f.se_scale);
    let _ = write!(o, "{}", grid_scale_lines(r, t.scale(), f.se_scale));
    if let Some(a) = &r.accuracy {
        let _ = writeln!(o);
        let _ = write!(o, "{}", accuracy_lines(a));
    }
    let refpts: Vec<[f64; 2]> = s
        .pairs
        .iter()
        .map(|p| r.frame.reference[p.reference as usize])
        .collect();
    let mapped: Vec<[f64; 2]> = r.frame.target.iter().map(|&p| t.apply(p)).collect();
    let _ = writeln!(o);
    match overlap(&r.frame.reference, &mapped) {
        Some(region) => {
            use geo::Area;
            let sp = spread(&refpts, &region);
            let _ = writeln!(o, "spread           {:.0}% of a 4x4 grid over the overlap of the two surveys (the intersection of their convex hulls, {:.3} km²) holds a control point; fewest in a quadrant of it: {}", sp.share * 100.0, region.unsigned_area() * mpu * mpu * 1e-6, sp.fewest_in_quadrant);
        }
        None => {
            let _ = writeln!(o, "spread           not measured: the two surveys' convex hulls do not overlap in an area");
        }
    }
    let _ = write!(o, "{}", models_lines(s, mpu));
    let sig = &s.significance;
    let _ = writeln!(o, "significance     {} of {} covered target landmarks paired within the search radius; chance would pair {:.1}%; expected false detections < 10^{:.0}", sig.inliers, sig.trials, 100.0 * sig.chance_rate_poisson.max(sig.chance_rate_decoys), sig.log10_false_alarms.ceil());
    let _ = writeln!(o, "{}", bounds_line(s, mpu));
    let _ = writeln!(o, "{}", runner_up_line(s));
    let c = &r.search;
    let _ = writeln!(
        o,
        "signatures       {} reference, {} target ({} neighbours, {} order, leave-out {}, {} keys); {} candidates; {} RANSAC rounds",
        c.reference_signatures, c.target_signatures, c.signatures.neighbours, c.signatures.order, c.signatures.leave_out, c.signatures.key_space, c.candidates, s.ransac_rounds
    );
    let _ = writeln!(o);
    let _ = writeln!(o, "CAUTION: {CAUTION}");
    o
}

/// "differs from zero at 95%" or not, for an estimate.
fn verdict(e: &crate::accuracy::Estimate) -> &'static str {
    if e.significant {
        "differs from zero at 95%"
    } else if e.se.is_finite() {
        "does not differ from zero at 95%"
    } else {
        "no standard error (too few control points)"
    }
}

/// The transform stated at the control points' centroid: shift east and north, rotation in
/// arc-seconds, scale in ppm, each with its standard error and 95 % verdict.
pub fn statement_lines(r: &MatchOutcome, a: &crate::accuracy::AccuracyReport) -> String {
    let st = &a.statement;
    let mut o = String::new();
    let digits = if r.frame.reference_crs.geographic {
        9
    } else {
        3
    };
    let _ = writeln!(
        o,
        "transform (target -> reference) at the control points' centroid, {:.digits$}, {:.digits$} in {}",
        a.centroid_reference[0],
        a.centroid_reference[1],
        r.frame.reference_crs.label()
    );
    if r.frame.target_crs.is_none() {
        let _ = writeln!(o, "  (a local grid: the shift is between the grid's coordinates and the reference's at that point)");
    }
    for (name, e) in [
        ("shift east ", &st.shift_east_m),
        ("shift north", &st.shift_north_m),
    ] {
        let _ = writeln!(
            o,
            "  {name}    {:+.4} ± {:.4} m   {}",
            e.value,
            e.se,
            verdict(e)
        );
    }
    let rot = &st.rotation_arcsec;
    let degrees = if rot.value.abs() >= 360.0 {
        format!(" ({:+.6}°)", rot.value / 3600.0)
    } else {
        String::new()
    };
    let _ = writeln!(
        o,
        "  rotation       {:+.3}″ ± {:.3}″ counter-clockwise{degrees}   {}",
        rot.value,
        rot.se,
        verdict(rot)
    );
    let sc = &st.scale_ppm;
    let _ = writeln!(
        o,
        "  scale          {:+.3} ± {:.3} ppm{}   {}",
        sc.value,
        sc.se,
        if r.frame.target_unit.is_some() {
            " (against the grid's unit)"
        } else {
            ""
        },
        verdict(sc)
    );
    o
}

/// The accuracy statement: RMSE with the count, NSSDA at 95 % with the rule used, ASPRS
/// RMSE_H, the fit's own residuals for comparison, and the warnings.
pub fn accuracy_lines(a: &crate::accuracy::AccuracyReport) -> String {
    let acc = &a.accuracy;
    let mut o = String::new();
    let _ = writeln!(o, "accuracy         from {}", acc.source.describe());
    let _ = writeln!(
        o,
        "  RMSE           x {:.4} m, y {:.4} m, r {:.4} m (n = {})",
        acc.rmse_x_m, acc.rmse_y_m, acc.rmse_r_m, acc.n
    );
    let _ = writeln!(
        o,
        "  NSSDA          {:.4} m horizontal accuracy at 95% (FGDC-STD-007.3-1998: {}; RMSE_min/RMSE_max = {:.2})",
        acc.nssda_95_m,
        acc.nssda_rule.describe(),
        acc.rmse_ratio
    );
    let _ = writeln!(
        o,
        "  ASPRS          RMSE_H {:.4} m (Positional Accuracy Standards for Digital Geospatial Data, Edition 2, 2023)",
        acc.asprs_rmse_h_m
    );
    if acc.source != crate::accuracy::AccuracySource::FitResiduals {
        let _ = writeln!(
            o,
            "  fit residuals  RMSE_r {:.4} m over the {} control points of the fit: the fit's own residuals overstate accuracy",
            a.fit.rmse_r_m, a.fit.n
        );
    }
    if let Some(worst) = a
        .points
        .iter()
        .max_by(|p, q| p.dx_m.hypot(p.dy_m).total_cmp(&q.dx_m.hypot(q.dy_m)))
    {
        let _ = writeln!(
            o,
            "  largest        {}: {:.4} m ({:+.4} m east, {:+.4} m north)",
            worst.id,
            worst.dx_m.hypot(worst.dy_m),
            worst.dx_m,
            worst.dy_m
        );
    }
    for w in &acc.warnings {
        let _ = writeln!(o, "  WARNING: {w}");
    }
    o
}

/// The features each survey's reader skipped, by cause (every report has this line, so that a
/// survey read in part never passes for a whole one), e.g. `skipped    reference: none; target:
/// 3 (2 without a geometry, 1 with an empty geometry)`.
pub fn skipped_line(r: &MatchOutcome) -> String {
    let side = |s: &crate::ingest::SkipCounts| match s.total() {
        0 => "none".to_string(),
        n => format!("{n} ({s})"),
    };
    format!(
        "skipped    reference: {}; target: {}",
        side(&r.reference.skipped),
        side(&r.target.skipped)
    )
}

/// For a local-grid target: the fitted scale split into the unit conversion and the grid scale
/// factor (declared unit), or how to declare the unit; nothing for a georeferenced target.
fn grid_scale_lines(r: &MatchOutcome, scale: f64, se_scale: f64) -> String {
    if r.frame.target_crs.is_some() {
        return String::new();
    }
    match r.frame.grid_scale(scale, se_scale) {
        Some(g) => format!(
            "  unit           {} ({}): {:.12} working units per grid unit\n  grid scale     {:.9} = {:+.3} ± {:.3} ppm (working-CRS metres per local-grid metre: the scale with the unit taken out)\n",
            g.unit.name(),
            g.unit.definition(),
            g.unit_factor,
            g.grid_scale_factor,
            g.grid_scale_ppm,
            g.grid_scale_ppm_se
        ),
        None => "  grid scale     not separated: the scale above is unit conversion and grid scale together; declare the grid's unit with target.crs = local:m, local:ft or local:us-ft\n".into(),
    }
}

/// The summary with the list of files written.
pub fn with_files(summary: &str, files: &[PathBuf]) -> String {
    let mut o = summary.to_string();
    let _ = writeln!(o);
    let _ = writeln!(o, "written:");
    for f in files {
        let _ = writeln!(o, "  {}", f.display());
    }
    o
}

/// Why no transform was accepted, in words.
pub fn reason(r: &RejectReason) -> String {
    match *r {
        RejectReason::NoHypothesis { outside_bounds: 0, .. } => "no candidate correspondence produced a transform: the neighbourhoods of the two surveys never agreed".into(),
        RejectReason::NoHypothesis { outside_bounds, made } => format!("no candidate correspondence produced a transform: {outside_bounds} of the {made} transforms the neighbourhoods proposed were outside the bounds of the target's georeferencing (fit.max_shift_m, fit.max_rotation_deg, fit.max_scale_ppm) and the rest never agreed; if the bounds are too tight for this survey, widen them"),
        RejectReason::ChanceOnSubset { paired, sampled, chance_rate } => format!(
            "the best transform pairs {paired} of {sampled} sampled landmarks, which chance alone explains (chance rate {:.1}%)",
            100.0 * chance_rate
        ),
        RejectReason::TooFewControlPoints { paired, required } => format!(
            "the best transform pairs only {paired} landmarks (at least {required} are required)"
        ),
        RejectReason::NotSignificant { paired, trials, chance_rate, log10_false_alarms, level } => format!(
            "the best transform pairs {paired} of {trials} landmarks, which chance alone explains (chance rate {:.1}%, expected false detections 10^{log10_false_alarms:.1} ≥ {level})",
            100.0 * chance_rate
        ),
        RejectReason::DegenerateControlPoints => "the control points are degenerate (all at one place)".into(),
        RejectReason::ModelNotFitted { model, paired, required } => format!(
            "the transform pairs {paired} landmarks, but fit.model = {model} needs at least {required} control points placed so that they determine it; choose a simpler fit.model (similarity needs 3)"
        ),
        RejectReason::OutsidePrior { found } => format!(
            "the best transform ({}) lies outside the bounds of the target's georeferencing (fit.max_shift_m, fit.max_rotation_deg, fit.max_scale_ppm); if the target's georeferencing is that far off, raise those bounds",
            transform_words(&found)
        ),
        RejectReason::Ambiguous { best, runner_up } => format!(
            "ambiguous: two different transforms fit about equally well, as on a symmetric or periodic layout (a regular grid, rows of identical buildings):\n  best       {} — {} pairs\n  runner-up  {} — {} pairs\nThe data cannot decide between them. Bound the search by what the target's georeferencing allows (fit.max_shift_m below the layout's period, fit.max_rotation_deg), or add landmarks that break the pattern",
            transform_words(&best),
            best.support,
            transform_words(&runner_up),
            runner_up.support
        ),
    }
}

/// The models compared on the control points: a small table and which one is written.
pub fn models_lines(s: &Solution, mpu: f64) -> String {
    use crate::fit::Model;
    let c = &s.models;
    let mut o = String::new();
    let _ = writeln!(
        o,
        "models           fitted on the same {} control points; written: {} (fit.model; never chosen on its own)",
        s.pairs.len(),
        c.chosen
    );
    let _ = writeln!(
        o,
        "  model          parameters  RMSE m   sigma m  warranted? (F test of the residual reduction against the parameters spent, at 95%)"
    );
    for m in [Model::Similarity, Model::Affine, Model::Polynomial2] {
        let Some(f) = c.fit(m) else {
            let _ = writeln!(
                o,
                "  {:<14} {:<11} not fitted: needs at least {} control points",
                m.name(),
                m.parameters().unwrap_or(0),
                m.min_control_points()
            );
            continue;
        };
        let verdict = match c.test(m) {
            None => "the baseline".to_string(),
            Some(t) => format!(
                "{} (against {}): F({}, {}) = {:.2}, p = {:.3}",
                if t.warranted { "yes" } else { "no" },
                t.simpler,
                t.df1,
                t.df2,
                t.f,
                t.p_value
            ),
        };
        let _ = writeln!(
            o,
            "  {:<14} {:<11} {:<8.3} {:<8.3} {}",
            m.name(),
            f.parameters,
            f.rmse * mpu,
            f.sigma * mpu,
            verdict
        );
    }
    if c.chosen == Model::Tps {
        let _ = writeln!(o, "  tps            a thin-plate spline through every control point (the warp of target-gcps.vrt); it meets each exactly, so the residuals given are the similarity's");
    }
    o
}

/// The bounds of the search, in words.
fn bounds_line(s: &Solution, mpu: f64) -> String {
    match &s.bounds {
        None => "bounds           none (a local grid: any rotation, scale and shift was searched)"
            .into(),
        Some(b) => {
            let part = |v: f64, text: String| if v.is_finite() { text } else { "any".into() };
            format!(
                "bounds           shift {} at the target's centre, rotation {}, scale error {} (the target's georeferencing; fit.max_shift_m, fit.max_rotation_deg, fit.max_scale_ppm)",
                part(b.max_shift, format!("≤ {:.1} m", b.max_shift * mpu)),
                part(b.max_rotation, format!("≤ {:.2}°", b.max_rotation.to_degrees())),
                part(b.max_scale_error, format!("≤ {:.0} ppm", b.max_scale_error * 1e6)),
            )
        }
    }
}

/// The margin to the best competing transform, in words.
fn runner_up_line(s: &Solution) -> String {
    match &s.runner_up {
        None => {
            "runner-up        none: the search found no other transform within the bounds".into()
        }
        Some(r) => {
            let margin = s.chosen.support as f64 - r.support as f64;
            let sd = (s.chosen.support as f64 + r.support as f64).sqrt();
            format!(
                "runner-up        {} — {} pairs against {} for the chosen transform (mutual pairs within the largest residual; margin {:.0} pairs, {:.1} standard deviations)",
                transform_words(r),
                r.support,
                s.chosen.support,
                margin,
                margin / sd.max(1.0)
            )
        }
    }
}

/// A transform in the trade's words: shift at the target's centre, rotation, scale error.
fn transform_words(c: &Competitor) -> String {
    format!(
        "shift {:+.3} m east, {:+.3} m north at the target's centre, rotation {:+.4}°, scale {:+.0} ppm",
        c.shift_m[0], c.shift_m[1], c.rotation_deg, c.scale_ppm
    )
}

/// The summary of a run that found no consistent transform.
pub fn rejection(r: &MatchOutcome, rejection: &Rejection) -> String {
    let (cfg, frame, counts) = (&r.config, &r.frame, &r.search);
    let mpu = frame.metres_per_unit();
    let mut o = String::new();
    let _ = writeln!(
        o,
        "tiemark {} — no consistent transform",
        env!("CARGO_PKG_VERSION")
    );
    let _ = writeln!(o);
    let _ = writeln!(
        o,
        "reference  {}: {} landmarks",
        cfg.reference.path.display(),
        frame.reference.len()
    );
    let _ = writeln!(
        o,
        "target     {}: {} landmarks",
        cfg.target.path.display(),
        frame.target.len()
    );
    let _ = writeln!(o, "{}", skipped_line(r));
    let _ = writeln!(o, "working    {}", frame.crs.label());
    let _ = writeln!(o);
    let _ = writeln!(o, "why: {}", reason(&rejection.reason));
    if let Some(a) = &r.area_seed {
        let _ = writeln!(o, "{}", area_seed_line(a));
    }
    if let Some(line) = bounds_hint(rejection) {
        let _ = writeln!(o, "{line}");
    }
    let _ = writeln!(o, "search radius {:.3} m; reference median spacing {:.3} m; {} reference and {} target signatures; {} candidates; {} RANSAC rounds", rejection.search_radius * mpu, counts.reference_spacing * mpu, counts.reference_signatures, counts.target_signatures, counts.candidates, rejection.ransac_rounds);
    let _ = writeln!(o);
    let _ = writeln!(o, "No control points were written. If the surveys should match: check that they cover the same place (CRS of each file), that the landmarks are the same kind of feature, and try fit.search_radius_m with the expected disagreement in metres, or more signatures.neighbours.");
    o
}

/// When most transforms the neighbourhoods proposed lay outside the bounds of the target's
/// georeferencing (and the reason does not already say so), a line that says it and how to
/// widen them: the bounds may be what kept the right transform out.
pub fn bounds_hint(rejection: &Rejection) -> Option<String> {
    let [made, outside] = rejection.hypotheses;
    let said = matches!(
        rejection.reason,
        RejectReason::NoHypothesis { .. } | RejectReason::OutsidePrior { .. }
    );
    (!said && made > 0 && outside * 2 > made).then(|| {
        format!(
            "bounds: {outside} of the {made} transforms the neighbourhoods proposed lay outside the bounds of the target's georeferencing (fit.max_shift_m, fit.max_rotation_deg, fit.max_scale_ppm); if the target's georeferencing may be worse than that, widen them"
        )
    })
}

/// Whether the area-based seed of a raster match ran and what it found, in one line, e.g.
/// `area seed        ran: the keypoint match found no accepted transform (…); coarse search
/// at 1.00 m, 285 rotations × scales (orientation correlation), best peak 9.8 σ; seeds
/// (rotation°, ppm, shift m: support/refined/grid points): …; chosen 1`.
pub fn area_seed_line(a: &crate::outcome::AreaSeed) -> String {
    let mut line = format!("area seed        {}", a.why);
    if let Some(k) = &a.keypoints {
        if a.ran {
            line.push_str(&format!(" (keypoints: {})", reason(&k.reason)));
        }
    }
    if a.ran {
        line.push_str(&format!(
            "; coarse search at {:.2} m, {} rotations × scales ({} correlation), best peak {:.1} σ above the surface",
            a.coarse_m, a.hypotheses, a.measure, a.z
        ));
        if !a.seeds.is_empty() {
            let seeds: Vec<String> = a
                .seeds
                .iter()
                .map(|s| {
                    format!(
                        "{:.3}°, {:.0} ppm, ({:.2}, {:.2}) m: {}/{}/{}",
                        s.rotation_deg,
                        s.scale_ppm,
                        s.shift_m[0],
                        s.shift_m[1],
                        s.support,
                        s.refined,
                        s.grid_points
                    )
                })
                .collect();
            line.push_str(&format!(
                "; seeds (rotation, scale, shift: support/refined/grid points): {}",
                seeds.join("; ")
            ));
        }
        if let Some(c) = a.chosen {
            line.push_str(&format!("; chosen seed {}", c + 1));
        }
    }
    line.push_str(&format!(" (the seed {})", crate::outcome::AREA_SEED_RULE));
    line
}

/// What the refinement on the pixels did, e.g. `refined          240 of 251 control points on
/// the pixels (orientation correlation), median shift 0.041 m; not kept: 11 no clear
/// correlation peak`.
pub fn pixels_line(px: &crate::outcome::PixelRefinement) -> String {
    let not_kept = if px.not_kept.is_empty() {
        String::new()
    } else {
        let parts: Vec<String> = px
            .not_kept
            .iter()
            .map(|(c, n)| format!("{n} {c}"))
            .collect();
        format!("; not kept: {}", parts.join(", "))
    };
    match &px.not_applied {
        Some(why) => format!("refined          not applied: {why}{not_kept}"),
        None => format!(
            "refined          {} of {} control points on the pixels ({} correlation), the transform refitted on them; median shift {:.3} m{not_kept}",
            px.kept, px.tried, px.measure, px.median_shift_m
        ),
    }
}

#[cfg(test)]
mod tests {
    use super::{overlap, spread};

    /// A lattice of `n` × `n` points over [x0, x1] × [y0, y1].
    fn lattice(n: usize, x: [f64; 2], y: [f64; 2]) -> Vec<[f64; 2]> {
        let at = |a: [f64; 2], i: usize| a[0] + (a[1] - a[0]) * i as f64 / (n - 1) as f64;
        (0..n * n).map(|k| [at(x, k % n), at(y, k / n)]).collect()
    }

    #[test]
    fn spread_is_measured_over_the_overlap_of_the_surveys() {
        // Reference over 0-1000 m, target (mapped) over 500-1500 m east: they overlap in
        // 500-1000 × 0-1000.
        let reference = lattice(21, [0.0, 1000.0], [0.0, 1000.0]);
        let target = lattice(21, [500.0, 1500.0], [0.0, 1000.0]);
        let region = overlap(&reference, &target).expect("they overlap");
        use geo::Area;
        assert!((region.unsigned_area() - 500.0 * 1000.0).abs() < 1e-6);
        // Control points over the whole overlap: every cell held, every quadrant populated.
        let everywhere = lattice(8, [510.0, 990.0], [10.0, 990.0]);
        let s = spread(&everywhere, &region);
        assert_eq!((s.share, s.cells), (1.0, 16));
        assert!(s.fewest_in_quadrant >= 10, "{s:?}");
        // Control points bunched in one corner of the overlap: their own extent is covered
        // evenly (the old measure said 100%), the overlap is not.
        let corner = lattice(8, [505.0, 600.0], [5.0, 200.0]);
        let s = spread(&corner, &region);
        assert!(s.share <= 1.0 / 16.0 + 1e-12, "{s:?}");
        assert_eq!(s.fewest_in_quadrant, 0);
    }

    #[test]
    fn surveys_that_do_not_overlap_have_no_overlap() {
        let a = lattice(5, [0.0, 10.0], [0.0, 10.0]);
        let b = lattice(5, [20.0, 30.0], [0.0, 10.0]);
        assert!(overlap(&a, &b).is_none());
    }
}
