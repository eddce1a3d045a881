#![allow(missing_docs)]
//! The similarity fit against a published transformation run through PROJ.

use proj::Proj;
use tiemark::fit::similarity::fit_similarity;

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
