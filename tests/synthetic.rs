#![allow(missing_docs)]
//! End-to-end checks of the solving stages on seeded synthetic surveys (no I/O): any rotation,
//! scale 0.2-5, 25-30% missing on each side, new landmarks, noise about 1% of the spacing.

use std::collections::HashSet;
use tiemark::config::MatchConfig;
use tiemark::engine::{solve_pair, FrameFacts};
use tiemark::fit::Similarity;
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
