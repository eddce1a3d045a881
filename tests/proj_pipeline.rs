//! The transform as others apply it: transform.json's `proj_pipeline`, run by PROJ itself
//! (`proj::Proj::new`), lands every control point's target position on its reference position
//! within the fit's residual; for a local grid, `epsg_9621`'s parameters do the same through
//! the formula of EPSG method 9621.
//!
//! PROJ's conventions are those of its documentation, "Helmert transform"
//! (proj.org, operations/transformations/helmert, section "2D Helmert"); EPSG 9621's formula is
//! that of IOGP Guidance Note 7-2 as transcribed on the EPSG method page for code 9621.

use std::path::Path;
use std::process::Command;

/// Runs `tiemark match` on two sample files into a fresh folder; returns transform.json and
/// the rows of control-points.csv.
fn run(reference: &str, target: &str, extra: &[&str]) -> (serde_json::Value, Vec<Vec<String>>) {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let o = Command::new(env!("CARGO_BIN_EXE_tiemark"))
        .arg("match")
        .arg(root.join(reference))
        .arg(root.join(target))
        .args(extra)
        .arg("--out")
        .arg(&out)
        .arg("-q")
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("transform.json")).unwrap())
            .unwrap();
    let csv = std::fs::read_to_string(out.join("control-points.csv")).unwrap();
    let mut lines = csv.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    assert_eq!(
        &header[2..9],
        [
            "reference_x",
            "reference_y",
            "target_x",
            "target_y",
            "residual_m",
            "residual_dx_m",
            "residual_dy_m"
        ]
    );
    let rows = lines
        .map(|l| l.split(',').map(str::to_string).collect())
        .collect();
    (doc, rows)
}

fn num(row: &[String], i: usize) -> f64 {
    row[i].parse().unwrap()
}

/// Checks that `apply` maps every row's target position to its reference position minus its
/// residual vector, to `tol` metres (the rounding of the CSV).
fn lands_on_reference(rows: &[Vec<String>], tol: f64, apply: impl Fn([f64; 2]) -> [f64; 2]) {
    assert!(rows.len() > 20, "{} control points", rows.len());
    for row in rows {
        let [rx, ry, tx, ty, res, dx, dy] = [2, 3, 4, 5, 6, 7, 8].map(|i| num(row, i));
        let p = apply([tx, ty]);
        // The fitted target is the reference minus the residual (dx, dy = reference − fitted).
        let (ex, ey) = (p[0] - (rx - dx), p[1] - (ry - dy));
        assert!(
            ex.hypot(ey) < tol,
            "{row:?}: PROJ puts it at {p:?}, off by ({ex}, {ey})"
        );
        let landed = (p[0] - rx).hypot(p[1] - ry);
        assert!(
            (landed - res).abs() < tol,
            "{row:?}: {landed} against {res}"
        );
    }
}

#[test]
fn the_pipeline_applied_by_proj_lands_the_target_on_the_reference() {
    // The sample town: the target in longitude/latitude (EPSG:4326), the reference in UTM 33N.
    let (doc, rows) = run(
        "sample-data/town-footprints-2019.gpkg",
        "sample-data/town-survey-2026.geojson",
        &[],
    );
    let pipeline = doc["proj_pipeline"].as_str().expect("a pipeline");
    assert!(pipeline.starts_with("+proj=pipeline "), "{pipeline}");
    assert!(pipeline.contains("+proj=helmert"), "{pipeline}");
    let p = proj::Proj::new(pipeline).unwrap();
    lands_on_reference(&rows, 0.002, |q| {
        let (x, y) = p.convert((q[0], q[1])).unwrap();
        [x, y]
    });
    assert!(doc.get("epsg_9621").is_none(), "only for a local grid");
}

#[test]
fn a_local_grid_as_pipeline_and_as_epsg_9621() {
    // The sample site grid in international feet against the town's footprints (UTM 33N).
    let (doc, rows) = run(
        "sample-data/town-footprints-2019.gpkg",
        "sample-data/site-grid.csv",
        &[
            "--reference-id",
            "bldg_id",
            "--target-id",
            "pt",
            "--target-crs",
            "local:ft",
            "--min-control-points",
            "8",
        ],
    );
    let pipeline = doc["proj_pipeline"].as_str().expect("a pipeline");
    let p = proj::Proj::new(pipeline).unwrap();
    lands_on_reference(&rows, 0.002, |q| {
        let (x, y) = p.convert((q[0], q[1])).unwrap();
        [x, y]
    });
    let e = &doc["epsg_9621"];
    let param = |code: u64| {
        e["parameters"]
            .as_array()
            .unwrap()
            .iter()
            .find(|p| p["code"] == code)
            .unwrap()["value"]
            .as_f64()
            .unwrap()
    };
    let (x0, y0, m, theta) = (
        param(8621),
        param(8622),
        param(1061),
        param(8614) / 206_264.806_247_096_36,
    );
    // The sample grid's unit is the foot: M is about 0.3048 metres per foot.
    assert!((m / 0.3048 - 1.0).abs() < 1e-3, "M = {m}");
    // XT = XT0 + XS·M·cos θ + YS·M·sin θ; YT = YT0 − XS·M·sin θ + YS·M·cos θ.
    lands_on_reference(&rows, 0.002, |q| {
        [
            x0 + q[0] * m * theta.cos() + q[1] * m * theta.sin(),
            y0 - q[0] * m * theta.sin() + q[1] * m * theta.cos(),
        ]
    });
}
