#![allow(missing_docs)]
//! Symmetric and periodic layouts: where another transform fits about as well as the true one,
//! the match must refuse (ambiguous) unless the target's georeferencing rules the others out;
//! a nearly regular layout whose irregularities decide must succeed. Layouts are generated
//! here (invented data, seeded): square and hexagonal lattices, rows of identical houses, and
//! a jittered lattice with an irregular outline.

use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, Normal};
use tiemark::config::MatchConfig;
use tiemark::engine::{solve_pair, FrameFacts};
use tiemark::fit::{RejectReason, Rejection, Similarity, Solution};
use tiemark::progress::Silent;
use tiemark::spatial::Extent;

/// A pair of surveys of `base`: each keeps 85% of the landmarks; the target has 2 cm of noise
/// and is off by a georeferencing error of 0.2°, 100 ppm and a shift of (1.3, −0.7) m at the
/// centre. Returns (reference, target, truth target → reference).
fn pair(base: &[[f64; 2]], seed: u64) -> (Vec<[f64; 2]>, Vec<[f64; 2]>, Similarity) {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let c = Extent::of(base).centre();
    // Target = centre + s·R·(p − centre) + shift; its inverse is the truth.
    let r = Similarity::from_params(1.0001, 0.2f64.to_radians(), 0.0, 0.0);
    let rc = r.apply(c);
    let error = Similarity {
        tx: c[0] - rc[0] + 1.3,
        ty: c[1] - rc[1] - 0.7,
        ..r
    };
    let noise = Normal::new(0.0, 0.02).unwrap();
    let reference: Vec<[f64; 2]> = base
        .iter()
        .copied()
        .filter(|_| rng.gen::<f64>() < 0.85)
        .collect();
    let mut target = Vec::new();
    for p in base {
        if rng.gen::<f64>() < 0.85 {
            let noisy = [p[0] + noise.sample(&mut rng), p[1] + noise.sample(&mut rng)];
            target.push(error.apply(noisy));
        }
    }
    (reference, target, error.inverse())
}

fn solve(
    reference: &[[f64; 2]],
    target: &[[f64; 2]],
    georeferenced: bool,
    max_shift_m: Option<f64>,
) -> Result<Solution, Rejection> {
    let mut config = MatchConfig::new("reference".into(), "target".into());
    config.fit.max_shift_m = max_shift_m;
    let facts = FrameFacts {
        metres_per_unit: 1.0,
        georeferenced,
        unit_scale: 1.0,
    };
    let (_, fit) = solve_pair(&config, reference, target, &facts, &Silent).unwrap();
    fit
}

const X0: f64 = 455_000.0;
const Y0: f64 = 5_210_000.0;

fn square(n: usize, spacing: f64) -> Vec<[f64; 2]> {
    (0..n * n)
        .map(|k| [X0 + (k % n) as f64 * spacing, Y0 + (k / n) as f64 * spacing])
        .collect()
}

fn hexagonal(n: usize, spacing: f64) -> Vec<[f64; 2]> {
    (0..n * n)
        .map(|k| {
            let (i, j) = ((k % n) as f64, (k / n) as f64);
            [
                X0 + (i + 0.5 * (j as usize % 2) as f64) * spacing,
                Y0 + j * spacing * 3f64.sqrt() / 2.0,
            ]
        })
        .collect()
}

/// Terraced rows: houses every 12 m along each row, rows at irregular distances.
fn rows_of_houses() -> Vec<[f64; 2]> {
    let rows = [0.0, 31.0, 55.0, 90.0, 118.0, 151.0, 177.0, 214.0];
    rows.iter()
        .flat_map(|&y| (0..60).map(move |i| [X0 + i as f64 * 12.0, Y0 + y]))
        .collect()
}

fn assert_ambiguous(fit: Result<Solution, Rejection>, what: &str) {
    match fit {
        Err(Rejection {
            reason: RejectReason::Ambiguous { best, runner_up },
            ..
        }) => {
            assert!(best.support > 0 && runner_up.support > 0, "{what}")
        }
        Err(r) => panic!("{what}: refused, but not as ambiguous: {:?}", r.reason),
        Ok(s) => panic!(
            "{what}: accepted a transform (rotation {:.4}°, {} pairs) where another fits as well",
            s.fit.transform.rotation().to_degrees(),
            s.pairs.len()
        ),
    }
}

/// Largest distance between the fitted and the true mapping over the target's extent.
fn error_m(s: &Solution, truth: &Similarity, target: &[[f64; 2]]) -> f64 {
    Extent::of(target)
        .corners()
        .iter()
        .map(|&p| {
            let (a, b) = (s.fit.transform.apply(p), truth.apply(p));
            (a[0] - b[0]).hypot(a[1] - b[1])
        })
        .fold(0.0, f64::max)
}

#[test]
fn square_lattice_is_ambiguous_until_the_shift_is_bounded_below_its_period() {
    let (r, t, truth) = pair(&square(40, 10.0), 1);
    // Georeferenced, default bounds (100 m): shifts by the 10 m period compete.
    assert_ambiguous(solve(&r, &t, true, None), "square lattice, default bounds");
    // A local grid (no bounds): the 90° rotations compete as well.
    assert_ambiguous(solve(&r, &t, false, None), "square lattice, local grid");
    // What the user knows resolves it: the georeferencing is good to 4 m.
    let s = solve(&r, &t, true, Some(4.0)).expect("a shift bound below the period decides");
    assert!(
        error_m(&s, &truth, &t) < 0.05,
        "{}",
        error_m(&s, &truth, &t)
    );
    let runner_up = s.runner_up.map(|c| c.support).unwrap_or(0);
    assert!(runner_up < s.chosen.support, "the report's margin");
}

#[test]
fn hexagonal_lattice_is_ambiguous_until_the_shift_is_bounded() {
    let (r, t, truth) = pair(&hexagonal(40, 10.0), 2);
    assert_ambiguous(
        solve(&r, &t, true, None),
        "hexagonal lattice, default bounds",
    );
    let s = solve(&r, &t, true, Some(4.0)).expect("bounded below the period");
    assert!(error_m(&s, &truth, &t) < 0.05);
}

#[test]
fn rows_of_identical_houses_are_ambiguous_along_the_rows() {
    let (r, t, truth) = pair(&rows_of_houses(), 3);
    assert_ambiguous(solve(&r, &t, true, None), "rows of houses, default bounds");
    let s = solve(&r, &t, true, Some(5.0)).expect("bounded below the 12 m period");
    assert!(error_m(&s, &truth, &t) < 0.05);
}

#[test]
fn nearly_regular_layout_with_an_irregular_outline_matches() {
    // A lattice whose landmarks sit up to a metre off their nodes (σ 0.8 m on a 10 m period)
    // inside a wavy outline: the shifted copies no longer fit within the inlier tolerance.
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(4);
    let jitter = Normal::new(0.0, 0.8).unwrap();
    let base: Vec<[f64; 2]> = square(40, 10.0)
        .into_iter()
        .filter(|p| {
            let (dx, dy) = ((p[0] - X0) / 10.0 - 20.0, (p[1] - Y0) / 10.0 - 20.0);
            let edge = 20.0 * (0.7 + 0.3 * (5.0 * dy.atan2(dx)).sin());
            dx.hypot(dy) <= edge
        })
        .map(|p| {
            [
                p[0] + jitter.sample(&mut rng),
                p[1] + jitter.sample(&mut rng),
            ]
        })
        .collect();
    let (r, t, truth) = pair(&base, 5);
    let s = solve(&r, &t, true, None).expect("the irregularities decide");
    assert!(
        error_m(&s, &truth, &t) < 0.05,
        "{}",
        error_m(&s, &truth, &t)
    );
    if let Some(second) = s.runner_up {
        assert!(second.support * 2 < s.chosen.support, "{second:?}");
    }
}

#[test]
fn a_transform_outside_the_bounds_is_never_reported() {
    // A real, irregular pattern whose target is off by 30 m: with the shift bounded to 10 m,
    // no transform may be accepted.
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(6);
    let base: Vec<[f64; 2]> = (0..1500)
        .map(|_| {
            [
                X0 + rng.gen_range(0.0..600.0),
                Y0 + rng.gen_range(0.0..600.0),
            ]
        })
        .collect();
    let (r, t, _) = pair(&base, 7);
    let far: Vec<[f64; 2]> = t.iter().map(|p| [p[0] + 30.0, p[1]]).collect();
    assert!(
        solve(&r, &far, true, None).is_ok(),
        "within the default 100 m"
    );
    if let Ok(s) = solve(&r, &far, true, Some(10.0)) {
        panic!("accepted a shift beyond the bound: {:?}", s.chosen)
    }
}
