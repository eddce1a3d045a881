#![allow(missing_docs)]
//! End-to-end checks of the solving stages on seeded synthetic surveys (no I/O): any rotation,
//! scale 0.2-5, 25-30% missing on each side, new landmarks, noise about 1% of the spacing.

use std::collections::HashSet;
use tiemark::config::MatchConfig;
use tiemark::engine::{solve_pair, FrameFacts};
use tiemark::fit::{RejectReason, Rejection, Similarity, Solution};
use tiemark::progress::Silent;
use tiemark::synth::{make_pair, SynthParams};

fn config() -> MatchConfig {
    MatchConfig::new("synthetic-reference".into(), "synthetic-target".into())
}

/// (found fraction of true pairs, wrong fraction among control points, transform error).
fn run(seed: u64, scale: f64, angle: f64, missing: f64, n: usize) -> Option<(f64, f64, f64)> {
    let truth = Similarity::from_params(scale, angle, 1234.5, -987.0);
    let p = make_pair(&SynthParams {
        landmarks: n,
        missing,
        extra: 0.25,
        noise: 0.01,
        truth,
        seed,
    });
    let (_, fit) = solve_pair(
        &config(),
        &p.reference,
        &p.target,
        &FrameFacts::LOCAL_METRES,
        &Silent,
    )
    .unwrap();
    let solution = fit.ok()?;
    let truth_set: HashSet<(u32, u32)> = p.pairs.iter().copied().collect();
    let right = solution
        .pairs
        .iter()
        .filter(|q| truth_set.contains(&(q.reference, q.target)))
        .count();
    let found = right as f64 / p.pairs.len() as f64;
    let wrong = 1.0 - right as f64 / solution.pairs.len() as f64;
    // Transform error: largest displacement over the extent between fitted and true.
    let t = solution.fit.transform;
    let err = p
        .target
        .iter()
        .step_by(50)
        .map(|&q| {
            let (a, b) = (t.apply(q), truth.apply(q));
            ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2)).sqrt()
        })
        .fold(0.0, f64::max);
    Some((found, wrong, err / p.spacing))
}

#[test]
fn recovers_any_rotation_and_scale() {
    let cases = [
        (1, 1.0, 0.3),
        (2, 0.2, 2.5),
        (3, 5.0, -1.7),
        (4, 0.37, 3.1),
        (5, 3.3, -3.0),
    ];
    for (seed, scale, angle) in cases {
        let (found, wrong, err) = run(seed, scale, angle, 0.28, 3000).expect("a transform");
        eprintln!("seed {seed}: found {found:.3} wrong {wrong:.4} err {err:.4} spacings");
        assert!(found >= 0.9, "seed {seed}: found {found}");
        assert!(wrong <= 0.01, "seed {seed}: wrong {wrong}");
        assert!(err < 0.01, "seed {seed}: transform error {err} spacings");
    }
}

#[test]
fn unrelated_surveys_give_no_transform() {
    for seed in 0..4u64 {
        let mk = |s: u64| {
            make_pair(&SynthParams {
                landmarks: 3000,
                missing: 0.0,
                extra: 0.0,
                noise: 0.0,
                truth: Similarity::IDENTITY,
                seed: s,
            })
            .reference
        };
        let (a, b) = (mk(100 + seed), mk(200 + seed));
        let (_, fit) = solve_pair(&config(), &a, &b, &FrameFacts::LOCAL_METRES, &Silent).unwrap();
        match fit {
            Err(rejection) => eprintln!(
                "seed {seed}: {}",
                tiemark::report::reason(&rejection.reason)
            ),
            Ok(solution) => panic!(
                "seed {seed}: chance transform with {} pairs, {:?}",
                solution.pairs.len(),
                solution.significance
            ),
        }
    }
}

/// A georeferenced target off by `ppm`, `deg` and (1.5, −0.8) m at its centre, with 0.4 m of
/// noise on 20 m spacing, matched under bounds of 10 ppm, 0.005° and 5 m. Returns the fit and
/// the truth.
fn under_tight_bounds(ppm: f64, deg: f64) -> (Result<Solution, Rejection>, Similarity) {
    let side = (2000f64).sqrt() * 20.0;
    let c = [side / 2.0, side / 2.0];
    let (s, th) = (1.0 + ppm * 1e-6, deg.to_radians());
    let tx = c[0] - s * (th.cos() * c[0] - th.sin() * c[1]) + 1.5;
    let ty = c[1] - s * (th.sin() * c[0] + th.cos() * c[1]) - 0.8;
    let truth = Similarity::from_params(s, th, tx, ty);
    let pair = make_pair(&SynthParams {
        landmarks: 2000,
        missing: 0.15,
        extra: 0.05,
        noise: 0.02,
        truth,
        seed: 41,
    });
    let mut config = config();
    config.fit.max_scale_ppm = Some(10.0);
    config.fit.max_rotation_deg = Some(0.005);
    config.fit.max_shift_m = Some(5.0);
    let facts = FrameFacts {
        metres_per_unit: 1.0,
        georeferenced: true,
        unit_scale: 1.0,
    };
    let (_, fit) = solve_pair(&config, &pair.reference, &pair.target, &facts, &Silent).unwrap();
    (fit, truth)
}

#[test]
fn tight_bounds_that_the_truth_meets_admit_it() {
    // The truth (2 ppm, 0.001°) is inside the bounds, but a hypothesis fitted on one
    // neighbourhood is far noisier (its scale is off by about σ / its extent, some 10,000 ppm
    // here), and even the final fit's scale has a standard error of about 30 ppm: the bounds
    // may set aside only what is outside them by more than such noise.
    let (fit, truth) = under_tight_bounds(2.0, 0.001);
    let solution = fit.unwrap_or_else(|r| panic!("rejected: {:?}", r.reason));
    let got = solution.fit.transform;
    assert!(
        ((got.scale() - truth.scale()) * 1e6).abs() < 100.0,
        "{got:?}"
    );
    assert!(
        (got.rotation() - truth.rotation()).abs().to_degrees() < 0.01,
        "{got:?}"
    );
    let c = [447.2, 447.2];
    let (at, want) = (got.apply(c), truth.apply(c));
    assert!((at[0] - want[0]).hypot(at[1] - want[1]) < 0.1, "{got:?}");
}

#[test]
fn tight_bounds_that_the_truth_breaks_refuse_it() {
    // The same surveys off by 400 ppm and 0.05°: more than ten standard errors outside the
    // bounds. No transform may be accepted.
    let (fit, _) = under_tight_bounds(400.0, 0.05);
    match fit {
        Err(r) => assert!(
            matches!(
                r.reason,
                RejectReason::OutsidePrior { .. } | RejectReason::NoHypothesis { .. }
            ),
            "{:?}",
            r.reason
        ),
        Ok(s) => panic!("accepted {:?}", s.fit.transform),
    }
}
