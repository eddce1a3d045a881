#![allow(missing_docs)]
//! The similarity fit against a published transformation run through PROJ.

use proj::Proj;
use tiemark::fit::similarity::{fit_similarity, Similarity};

#[test]
fn recovers_the_epsg_9621_parameters_of_epsg_5166_through_proj() {
    // EPSG method 9621 "Similarity transformation", published instance EPSG:5166 (ED50 / UTM 31N
    // to ETRS89 / UTM 31N): XT0 = -129.549 m, YT0 = -208.185 m, M = 1.0000015504,
    // t = 1.56504 arc-seconds (IOGP Guidance Note 7-2; EPSG dataset). PROJ 9.1 lacks EPSG:5166,
    // so the same operation runs as its 2-D Helmert, whose +theta has the EPSG 9621 sense.
    let helmert =
        Proj::new("+proj=helmert +x=-129.549 +y=-208.185 +s=1.0000015504 +theta=1.56504").unwrap();
    // Spot value seen with PROJ 9.1's cct: (300000, 4500000) -> (299905.0600, 4499796.5154).
    let (x, y): (f64, f64) = helmert.convert((300000.0, 4500000.0)).unwrap();
    assert!(
        (x - 299905.0600).abs() < 1e-3 && (y - 4499796.5154).abs() < 1e-3,
        "{x} {y}"
    );
    let from: Vec<[f64; 2]> = (0..25)
        .map(|i| {
            [
                250_000.0 + 10_000.0 * (i % 5) as f64,
                4_450_000.0 + 10_000.0 * (i / 5) as f64,
            ]
        })
        .collect();
    let to: Vec<[f64; 2]> = from
        .iter()
        .map(|p| {
            let (x, y): (f64, f64) = helmert.convert((p[0], p[1])).unwrap();
            [x, y]
        })
        .collect();
    let fit = fit_similarity(&from, &to).unwrap();
    let t = fit.transform;
    assert!(
        (t.scale() - 1.0000015504).abs() < 1e-10,
        "scale {}",
        t.scale()
    );
    // tiemark's rotation is counter-clockwise positive in x' = a x - b y; EPSG 9621's
    // XT = XT0 + M(cos t XS + sin t YS) turns the other way, so t_epsg = -rotation.
    let arcsec = -t.rotation().to_degrees() * 3600.0;
    assert!(
        (arcsec - 1.56504).abs() < 1e-5,
        "rotation {arcsec} arc-seconds"
    );
    assert!(
        (t.tx - -129.549).abs() < 1e-4 && (t.ty - -208.185).abs() < 1e-4,
        "{t:?}"
    );
    assert!(fit.rmse < 1e-6);
}

/// The PROJ 2-D Helmert step of a tiemark similarity. PROJ's form (PROJ Helmert documentation;
/// EPSG method 9621, IOGP Guidance Note 7-2) is x' = x0 + s(cos θ x + sin θ y),
/// y' = y0 + s(−sin θ x + cos θ y): with +theta present +s is a plain factor, +theta is in
/// arc-seconds and turns points clockwise. tiemark's x' = a x − b y + tx, y' = b x + a y + ty
/// turns them counter-clockwise, so s = hypot(a, b) and θ = −atan2(b, a).
fn helmert_step(t: &Similarity) -> String {
    let theta = -t.b.atan2(t.a).to_degrees() * 3600.0;
    format!(
        "+proj=helmert +x={} +y={} +s={} +theta={}",
        t.tx,
        t.ty,
        t.a.hypot(t.b),
        theta
    )
}

fn run(proj: &Proj, p: [f64; 2]) -> [f64; 2] {
    let (x, y): (f64, f64) = proj.convert((p[0], p[1])).unwrap();
    [x, y]
}

fn distance(p: [f64; 2], q: [f64; 2]) -> f64 {
    (p[0] - q[0]).hypot(p[1] - q[1])
}

#[test]
fn compose_and_inverse_agree_with_a_proj_helmert_pipeline() {
    // Two similarities with large rotations of both senses, so that a wrong rotation sense, a
    // wrong composition order or a wrong inverse shows up as metres, not micrometres.
    let first = Similarity::from_params(1.25, 30f64.to_radians(), 1200.0, -3400.0);
    let second = Similarity::from_params(0.8, -75f64.to_radians(), -50_000.0, 20_000.0);
    let composed = second.compose(&first);
    let points: Vec<[f64; 2]> = (0..16)
        .map(|i| {
            [
                -40_000.0 + 9_000.0 * (i % 4) as f64 + 13.7 * i as f64,
                25_000.0 + 11_000.0 * (i / 4) as f64,
            ]
        })
        .collect();
    let (s1, s2) = (helmert_step(&first), helmert_step(&second));
    // Each step alone: the parameter mapping above is right.
    for (t, step) in [(&first, &s1), (&second, &s2)] {
        let proj = Proj::new(step).unwrap();
        for &p in &points {
            assert!(distance(run(&proj, p), t.apply(p)) < 1e-6, "{step}");
        }
    }
    // A pipeline runs its steps in order: first, then second.
    let forward = Proj::new(&format!("+proj=pipeline +step {s1} +step {s2}")).unwrap();
    // Its inverse: each step inverted (+inv), in reverse order.
    let backward = Proj::new(&format!("+proj=pipeline +step +inv {s2} +step +inv {s1}")).unwrap();
    let first_inverse = Proj::new(&format!("+proj=pipeline +step +inv {s1}")).unwrap();
    let inverse = composed.inverse();
    let wrong_order = first.compose(&second);
    for &p in &points {
        let q = run(&forward, p);
        assert!(distance(q, composed.apply(p)) < 1e-6, "compose at {p:?}");
        // The check can tell the order apart.
        assert!(distance(q, wrong_order.apply(p)) > 1.0);
        assert!(
            distance(run(&backward, p), inverse.apply(p)) < 1e-6,
            "inverse at {p:?}"
        );
        assert!(distance(run(&first_inverse, p), first.inverse().apply(p)) < 1e-6);
    }
}
