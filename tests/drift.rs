#![allow(missing_docs)]
//! `tiemark drift` end to end through the binary: exit codes (0 within, 3 exceeded globally or
//! by a moved block, 1 no consistent transform, 2 bad input), the fields of drift.json, and
//! drift-areas.gpkg read back by GDAL. Surveys are seeded synthetic points written as CSV in
//! EPSG:32633 (invented data).

use gdal::vector::LayerAccess;
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, Normal};
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::Command;

const CENTRE: [f64; 2] = [455_000.0, 5_210_000.0];

/// About `n` landmarks on a jittered 20 m grid around `CENTRE`.
fn base(n: usize, seed: u64) -> Vec<[f64; 2]> {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let side = (n as f64).sqrt().ceil() as usize;
    let half = side as f64 * 10.0;
    (0..side * side)
        .map(|i| {
            [
                CENTRE[0] - half + ((i % side) as f64 + rng.gen_range(0.1..0.9)) * 20.0,
                CENTRE[1] - half + ((i / side) as f64 + rng.gen_range(0.1..0.9)) * 20.0,
            ]
        })
        .collect()
}

fn write_csv(path: &Path, prefix: &str, points: &[[f64; 2]]) {
    let mut s = String::from("id,easting,northing\n");
    for (i, p) in points.iter().enumerate() {
        s.push_str(&format!("{prefix}{i},{:.4},{:.4}\n", p[0], p[1]));
    }
    std::fs::write(path, s).unwrap();
}

/// A target epoch: `base` moved by `shift` everywhere plus `block_shift` within `block_radius`
/// of `block_centre`, with Gaussian noise of `sigma` per coordinate.
fn epoch(
    base: &[[f64; 2]],
    shift: [f64; 2],
    block: Option<([f64; 2], f64, [f64; 2])>,
    sigma: f64,
    seed: u64,
) -> Vec<[f64; 2]> {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let noise = Normal::new(0.0, sigma).unwrap();
    base.iter()
        .map(|p| {
            let mut q = [p[0] + shift[0], p[1] + shift[1]];
            if let Some((c, r, s)) = block {
                if (p[0] - c[0]).hypot(p[1] - c[1]) < r {
                    q = [q[0] + s[0], q[1] + s[1]];
                }
            }
            [q[0] + noise.sample(&mut rng), q[1] + noise.sample(&mut rng)]
        })
        .collect()
}

struct Run {
    code: i32,
    stdout: String,
    stderr: String,
    out: PathBuf,
    _dir: tempfile::TempDir,
}

fn drift(reference: &[[f64; 2]], target: &[[f64; 2]], tolerance: &str) -> Run {
    let dir = tempfile::tempdir().unwrap();
    let (r, t) = (
        dir.path().join("epoch-1.csv"),
        dir.path().join("epoch-2.csv"),
    );
    write_csv(&r, "R", reference);
    write_csv(&t, "T", target);
    let out = dir.path().join("out");
    let o = Command::new(env!("CARGO_BIN_EXE_tiemark"))
        .args(["drift", "-q"])
        .arg(&r)
        .arg(&t)
        .args([
            "--reference-crs",
            "EPSG:32633",
            "--target-crs",
            "EPSG:32633",
        ])
        .args(["--reference-id", "id", "--target-id", "id"])
        .arg("--out")
        .arg(&out)
        .args(["--tolerance", tolerance])
        .output()
        .unwrap();
    Run {
        code: o.status.code().unwrap_or(-1),
        stdout: String::from_utf8_lossy(&o.stdout).into(),
        stderr: String::from_utf8_lossy(&o.stderr).into(),
        out,
        _dir: dir,
    }
}

fn json(run: &Run) -> Value {
    serde_json::from_str(&std::fs::read_to_string(run.out.join("drift.json")).unwrap()).unwrap()
}

/// (polygons in drift_areas, points in moved_landmarks, their reference ids), read by GDAL.
fn areas_gpkg(run: &Run) -> (u64, u64, Vec<String>) {
    let ds = gdal::Dataset::open(run.out.join("drift-areas.gpkg")).unwrap();
    let areas = ds.layer_by_name("drift_areas").unwrap();
    let srs = areas.spatial_ref().expect("a CRS");
    assert_eq!(srs.auth_code().unwrap(), 32633);
    let n_areas = areas.feature_count();
    let mut points = ds.layer_by_name("moved_landmarks").unwrap();
    let n_points = points.feature_count();
    let ids = points
        .features()
        .map(|f| {
            let i = f.field_index("reference_id").unwrap();
            f.field_as_string(i).unwrap().unwrap()
        })
        .collect();
    (n_areas, n_points, ids)
}

fn estimate(v: &Value, key: &str) -> (f64, f64, bool) {
    let e = &v[key];
    (
        e["value"].as_f64().unwrap(),
        e["se"].as_f64().unwrap(),
        e["significant"].as_bool().unwrap(),
    )
}

#[test]
fn a_small_global_drift_is_within_the_tolerance() {
    let b = base(900, 1);
    let run = drift(&b, &epoch(&b, [0.03, -0.02], None, 0.02, 2), "0.25");
    assert_eq!(run.code, 0, "{}{}", run.stdout, run.stderr);
    assert!(
        run.stdout
            .contains("drift: WITHIN the tolerance of 0.250 m"),
        "{}",
        run.stdout
    );
    let v = json(&run);
    assert_eq!(v["verdict"], "within");
    assert_eq!(v["tolerance_m"], 0.25);
    let (east, se, sig) = estimate(&v, "shift_east_m");
    assert!((east - 0.03).abs() < 3.5 * se && sig, "{east} ± {se}");
    let (north, se, _) = estimate(&v, "shift_north_m");
    assert!((north + 0.02).abs() < 3.5 * se, "{north} ± {se}");
    for key in ["rotation_arcsec", "scale_ppm"] {
        let (_, se, _) = estimate(&v, key);
        assert!(se > 0.0 && se.is_finite(), "{key}");
    }
    let c = [
        v["centroid_x"].as_f64().unwrap(),
        v["centroid_y"].as_f64().unwrap(),
    ];
    assert!(
        (c[0] - CENTRE[0]).abs() < 50.0 && (c[1] - CENTRE[1]).abs() < 50.0,
        "{c:?}"
    );
    let max = v["max_drift_m"].as_f64().unwrap();
    assert!(max >= east.hypot(north) - 0.01 && max < 0.25, "{max}");
    let acc = &v["accuracy"];
    assert_eq!(acc["independent"], false);
    assert!(acc["n"].as_u64().unwrap() > 800);
    // Both epochs' noise: 0.02 m per coordinate in the target only.
    let rx = acc["rmse_x_m"].as_f64().unwrap();
    assert!((rx - 0.02).abs() < 0.004, "{rx}");
    for key in ["rmse_y_m", "rmse_r_m", "nssda_95_m"] {
        assert!(acc[key].as_f64().unwrap() > 0.0, "{key}");
    }
    assert_eq!(v["local_areas"].as_array().unwrap().len(), 0);
    let (areas, points, _) = areas_gpkg(&run);
    assert_eq!((areas, points), (0, 0));
    for f in ["control-points.csv", "transform.json", "report.txt"] {
        assert!(run.out.join(f).exists(), "{f}");
    }
    let report = std::fs::read_to_string(run.out.join("report.txt")).unwrap();
    assert!(report.contains("drift: WITHIN"), "{report}");
}

#[test]
fn a_global_drift_beyond_the_tolerance_is_exceeded() {
    let b = base(900, 3);
    let run = drift(&b, &epoch(&b, [0.4, 0.3], None, 0.02, 4), "0.2");
    assert_eq!(run.code, 3, "{}{}", run.stdout, run.stderr);
    assert!(run
        .stdout
        .contains("drift: EXCEEDED the tolerance of 0.200 m: the global drift"));
    let v = json(&run);
    assert_eq!(v["verdict"], "exceeded");
    assert!(v["max_drift_m"].as_f64().unwrap() > 0.49);
    assert!(v["global_test"]["significant"].as_bool().unwrap());
}

#[test]
fn a_block_moved_beyond_the_tolerance_is_found_and_exceeded() {
    let b = base(1600, 5);
    let c = [CENTRE[0] + 200.0, CENTRE[1] - 150.0];
    let block = Some((c, 70.0, [0.25, -0.15]));
    let target = epoch(&b, [0.0, 0.0], block, 0.03, 6);
    let in_block: Vec<String> = b
        .iter()
        .enumerate()
        .filter(|(_, p)| (p[0] - c[0]).hypot(p[1] - c[1]) < 70.0)
        .map(|(i, _)| format!("R{i}"))
        .collect();
    let run = drift(&b, &target, "0.2");
    assert_eq!(run.code, 3, "{}{}", run.stdout, run.stderr);
    let v = json(&run);
    assert_eq!(v["verdict"], "exceeded");
    // The global drift itself stays within: the block is what exceeds.
    assert!(v["max_drift_m"].as_f64().unwrap() < 0.2);
    let areas = v["local_areas"].as_array().unwrap();
    assert_eq!(areas.len(), 1, "{:#}", v["local_areas"]);
    let a = &areas[0];
    assert!(a["significant"].as_bool().unwrap() && a["exceeds_tolerance"].as_bool().unwrap());
    let centre = [a["x"].as_f64().unwrap(), a["y"].as_f64().unwrap()];
    assert!(
        (centre[0] - c[0]).hypot(centre[1] - c[1]) < 35.0,
        "{centre:?}"
    );
    let se = a["shift_se_m"].as_f64().unwrap();
    assert!((a["shift_east_m"].as_f64().unwrap() - 0.25).abs() < 3.5 * se);
    assert!((a["shift_north_m"].as_f64().unwrap() + 0.15).abs() < 3.5 * se);
    assert!(a["outline"].as_array().unwrap().len() >= 3);
    let landmarks = a["landmarks"].as_array().unwrap();
    let (n_areas, n_points, ids) = areas_gpkg(&run);
    assert_eq!(n_areas, 1);
    assert_eq!(n_points as usize, landmarks.len());
    let inside = ids.iter().filter(|id| in_block.contains(id)).count();
    assert!(
        inside as f64 >= 0.85 * in_block.len() as f64,
        "{inside} of {}",
        in_block.len()
    );
    assert!(
        ids.len() - inside <= 2,
        "{} outside the block",
        ids.len() - inside
    );
    // The block's landmarks are reported with it, not in the accuracy.
    let n_acc = v["accuracy"]["n"].as_u64().unwrap() as usize;
    assert!(n_acc + landmarks.len() <= b.len());
    assert!(v["control_points"].as_u64().unwrap() as usize == n_acc);
    // The page says the verdict in words and carries the area's numbers as drift.json has
    // them (each number a <data> element with its exact JSON value).
    let page = std::fs::read_to_string(run.out.join("report.html")).unwrap();
    assert!(page.contains("TOLERANCE EXCEEDED"));
    let tag = "data-key=\"local_areas.0.shift_m\"";
    let at = page.find(tag).expect("the area's shift on the page");
    let element = &page[page[..at].rfind("<data").unwrap()..at];
    let value: f64 = element
        .split("value=\"")
        .nth(1)
        .and_then(|r| r.split('"').next())
        .unwrap()
        .parse()
        .unwrap();
    assert_eq!(value, a["shift_m"].as_f64().unwrap());
}

#[test]
fn unrelated_surveys_give_no_verdict_and_write_nothing() {
    let b = base(400, 7);
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(8);
    let other: Vec<[f64; 2]> = (0..400)
        .map(|_| {
            [
                CENTRE[0] + rng.gen_range(-200.0..200.0),
                CENTRE[1] + rng.gen_range(-200.0..200.0),
            ]
        })
        .collect();
    let run = drift(&b, &other, "0.2");
    assert_eq!(run.code, 1, "{}{}", run.stdout, run.stderr);
    assert!(run.stdout.contains("drift: NO VERDICT"), "{}", run.stdout);
    assert!(!run.out.exists());
}

#[test]
fn a_tolerance_that_is_not_positive_is_refused_before_any_work() {
    let b = base(100, 9);
    for bad in ["0", "-0.1", "nan"] {
        let run = drift(&b, &b, bad);
        assert_eq!(run.code, 2, "{bad}: {}", run.stderr);
        assert!(
            run.stderr
                .contains("--tolerance must be a positive number of metres"),
            "{}",
            run.stderr
        );
        assert!(!run.out.exists());
    }
}

#[test]
fn the_monthly_drift_check_on_the_sample_epochs_finds_the_moved_block() {
    // The pipeline as shipped, with its output redirected: a [drift] table makes `tiemark run`
    // the drift check. Truth: sample-data/drift-epochs-truth.json (invented data).
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let dir = tempfile::tempdir().unwrap();
    let text = std::fs::read_to_string(root.join("pipelines/site-drift-check.toml")).unwrap();
    let data = root.join("sample-data");
    let out = dir.path().join("out");
    let text = text
        .replace("../sample-data", data.to_str().unwrap())
        .replace("../target/site-drift-output", out.to_str().unwrap());
    let pipeline = dir.path().join("site-drift-check.toml");
    std::fs::write(&pipeline, text).unwrap();
    let o = Command::new(env!("CARGO_BIN_EXE_tiemark"))
        .args(["run", "-q"])
        .arg(&pipeline)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert_eq!(
        o.status.code(),
        Some(3),
        "{stdout}{}",
        String::from_utf8_lossy(&o.stderr)
    );
    let truth: Value = serde_json::from_str(
        &std::fs::read_to_string(data.join("drift-epochs-truth.json")).unwrap(),
    )
    .unwrap();
    let v: Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("drift.json")).unwrap()).unwrap();
    assert_eq!(v["verdict"], truth["expected"]["verdict"]);
    assert_eq!(v["tolerance_m"], truth["expected"]["tolerance_m"]);
    // The global drift at the stated centroid, from the truth's pivot form.
    let g = &truth["global_drift"];
    let f = |k: &str| g[k].as_f64().unwrap();
    let (px, py) = (f("pivot_x"), f("pivot_y"));
    let (cx, cy) = (
        v["centroid_x"].as_f64().unwrap(),
        v["centroid_y"].as_f64().unwrap(),
    );
    let s = 1.0 + f("scale_ppm") * 1e-6;
    let t = (f("rotation_arcsec") / 3600.0).to_radians();
    let moved = [
        px + s * (t.cos() * (cx - px) - t.sin() * (cy - py)) + f("shift_east_m"),
        py + s * (t.sin() * (cx - px) + t.cos() * (cy - py)) + f("shift_north_m"),
    ];
    for (key, want) in [
        ("shift_east_m", moved[0] - cx),
        ("shift_north_m", moved[1] - cy),
        ("rotation_arcsec", f("rotation_arcsec")),
        ("scale_ppm", f("scale_ppm")),
    ] {
        let (got, se, _) = estimate(&v, key);
        assert!(
            (got - want).abs() < 3.5 * se,
            "{key}: {got} ± {se} against {want}"
        );
    }
    assert!(v["max_drift_m"].as_f64().unwrap() < 0.1);
    // The block, to the building.
    let areas = v["local_areas"].as_array().unwrap();
    assert_eq!(areas.len(), 1, "{stdout}");
    let mut found: Vec<&str> = areas[0]["landmarks"]
        .as_array()
        .unwrap()
        .iter()
        .map(|l| l["reference_id"].as_str().unwrap())
        .collect();
    found.sort_unstable();
    let mut moved_ids: Vec<&str> = truth["block"]["moved_ids_in_both_epochs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_str().unwrap())
        .collect();
    moved_ids.sort_unstable();
    assert_eq!(found, moved_ids);
    let b = &truth["block"];
    let d = (areas[0]["x"].as_f64().unwrap() - b["centre_x"].as_f64().unwrap())
        .hypot(areas[0]["y"].as_f64().unwrap() - b["centre_y"].as_f64().unwrap());
    assert!(d < b["radius_m"].as_f64().unwrap() / 2.0, "{d}");
}
