#![allow(missing_docs)]
//! End-to-end tests of the `tiemark` binary on the bundled sample data and on an open
//! real-world point dataset, each in a fresh temporary folder.

use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, Normal};
use std::collections::{HashMap, HashSet};
use std::path::{Path, PathBuf};
use std::process::Command;
use tiemark::fit::Similarity;
use tiemark::frame::crs::{Converter, Crs};

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn tiemark(args: &[&str]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_tiemark"))
        .args(args)
        .stdin(std::process::Stdio::null())
        .output()
        .expect("run tiemark");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into(),
        String::from_utf8_lossy(&out.stderr).into(),
    )
}

/// control-points.csv rows as (reference_id, target_id, target_x, target_y, residual_m).
fn control_points(dir: &Path) -> Vec<(String, String, f64, f64, f64)> {
    let text = std::fs::read_to_string(dir.join("control-points.csv")).unwrap();
    let mut lines = text.lines();
    assert!(lines.next().unwrap().starts_with(
        "reference_id,target_id,reference_x,reference_y,target_x,target_y,residual_m"
    ));
    lines
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            (
                f[0].into(),
                f[1].into(),
                f[4].parse().unwrap(),
                f[5].parse().unwrap(),
                f[6].parse().unwrap(),
            )
        })
        .collect()
}

fn true_pairs(path: &Path) -> HashSet<(String, String)> {
    std::fs::read_to_string(path)
        .unwrap()
        .lines()
        .skip(1)
        .map(|l| {
            let (a, b) = l.split_once(',').unwrap();
            (a.to_string(), b.to_string())
        })
        .collect()
}

fn transform_of(v: &serde_json::Value) -> Similarity {
    let g = |k: &str| v[k].as_f64().unwrap();
    Similarity::from_params(
        g("scale"),
        g("rotation_deg").to_radians(),
        g("translation_x"),
        g("translation_y"),
    )
}

/// (share of true pairs found, share of control points that are wrong).
fn score(
    found: &[(String, String, f64, f64, f64)],
    truth: &HashSet<(String, String)>,
) -> (f64, f64) {
    let right = found
        .iter()
        .filter(|c| truth.contains(&(c.0.clone(), c.1.clone())))
        .count();
    (
        right as f64 / truth.len() as f64,
        1.0 - right as f64 / found.len() as f64,
    )
}

/// Runs a bundled pipeline with its output redirected to `out`; returns the exit code.
fn run_pipeline(name: &str, out: &Path) -> (i32, String) {
    let text = std::fs::read_to_string(root().join("pipelines").join(name)).unwrap();
    let sample = root().join("sample-data");
    let mut fixed = String::new();
    for line in text.lines() {
        if line.starts_with("dir =") {
            fixed.push_str(&format!("dir = {:?}\n", out.display().to_string()));
        } else {
            fixed.push_str(&line.replace("../sample-data", &sample.display().to_string()));
            fixed.push('\n');
        }
    }
    let p = out.parent().unwrap().join(name);
    std::fs::write(&p, fixed).unwrap();
    let (code, stdout, stderr) = tiemark(&["run", p.to_str().unwrap(), "--quiet"]);
    (code, format!("{stdout}{stderr}"))
}

#[test]
fn demo_recovers_the_true_transform_and_pairs() {
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("out");
    let (code, text) = run_pipeline("demo.toml", &out);
    assert_eq!(code, 0, "{text}");
    assert!(text.contains("verified against independent checkpoints"));
    for f in [
        "control-points.csv",
        "control-points.gpkg",
        "transform.json",
        "report.txt",
    ] {
        assert!(out.join(f).is_file(), "{f} missing");
    }
    let cps = control_points(&out);
    let truth = true_pairs(&root().join("sample-data/town-survey-2026-true-pairs.csv"));
    let (found, wrong) = score(&cps, &truth);
    assert!(found >= 0.95, "found {found}");
    assert!(wrong <= 0.01, "wrong {wrong}");
    // The fitted transform must put every control point where the true one does, within the
    // noise (the generator's vertex noise is 0.3 m; a centroid's is smaller).
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("transform.json")).unwrap())
            .unwrap();
    let fitted = transform_of(&doc);
    let truth_doc: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(root().join("sample-data/town-survey-2026-truth.json")).unwrap(),
    )
    .unwrap();
    let true_t = transform_of(&truth_doc["expected_transform"]);
    let to_utm = Converter::new(
        &Crs::parse("EPSG:4326", "t").unwrap(),
        &Crs::parse("EPSG:32633", "t").unwrap(),
    )
    .unwrap();
    let worst = cps
        .iter()
        .map(|c| {
            let w = to_utm.convert([c.2, c.3]).unwrap();
            let (a, b) = (fitted.apply(w), true_t.apply(w));
            (a[0] - b[0]).hypot(a[1] - b[1])
        })
        .fold(0.0, f64::max);
    assert!(worst < 0.1, "fitted transform is {worst} m from the truth");
    assert_eq!(doc["working_crs"]["authority"], "EPSG:32633");
    // The fit's RMSE is the centroid noise the true transform leaves: the truth file's RMS
    // residual of the noisy centroids over the true pairs (its vertex noise averaged over each
    // outline). Fitting four parameters to thousands of pairs barely lowers it, so the fitted
    // RMSE must be within 10% of it (it was 0.7% below). And a centroid's 2-D noise is below
    // one vertex's, √2 σ.
    let truth_rms = truth_doc["check"]["rms_residual_noisy_centroids_m"]
        .as_f64()
        .unwrap();
    let sigma = truth_doc["noise"]["sigma_m"].as_f64().unwrap();
    let rmse = doc["rmse_m"].as_f64().unwrap();
    assert!(
        (rmse / truth_rms - 1.0).abs() < 0.1,
        "fitted RMSE {rmse} m against the truth's {truth_rms} m"
    );
    assert!(
        rmse < 2f64.sqrt() * sigma,
        "fitted RMSE {rmse} m, vertex noise {sigma} m"
    );
}

#[test]
fn drone_and_site_grid_pipelines_find_their_pairs() {
    for (pipeline, pairs) in [
        (
            "drone-vs-footprints.toml",
            "drone-outlines-2026-true-pairs.csv",
        ),
        ("site-grid-calibration.toml", "site-grid-true-pairs.csv"),
    ] {
        let tmp = tempfile::tempdir().unwrap();
        let out = tmp.path().join("out");
        let (code, text) = run_pipeline(pipeline, &out);
        assert_eq!(code, 0, "{pipeline}: {text}");
        let (found, wrong) = score(
            &control_points(&out),
            &true_pairs(&root().join("sample-data").join(pairs)),
        );
        assert!(
            found >= 0.95 && wrong <= 0.01,
            "{pipeline}: found {found} wrong {wrong}"
        );
    }
}

/// The airports extract (tests/data/PROVENANCE.md) in WGS 84 / UTM 16N.
fn airports() -> (Vec<String>, Vec<[f64; 2]>, Vec<[f64; 2]>) {
    let text = std::fs::read_to_string(root().join("tests/data/airports-us-utm16n.csv")).unwrap();
    let c = Converter::new(
        &Crs::parse("EPSG:4326", "t").unwrap(),
        &Crs::parse("EPSG:32616", "t").unwrap(),
    )
    .unwrap();
    let (mut ids, mut ll, mut utm) = (Vec::new(), Vec::new(), Vec::new());
    for l in text.lines().skip(1) {
        let f: Vec<&str> = l.split(',').collect();
        let p = [f[1].parse().unwrap(), f[2].parse().unwrap()];
        ids.push(f[0].to_string());
        ll.push(p);
        utm.push(c.convert(p).unwrap());
    }
    (ids, ll, utm)
}

#[test]
fn real_airport_pattern_in_a_rotated_scaled_local_grid() {
    // Open real-world points: airportsdata (PyPI, MIT), see tests/data/PROVENANCE.md. The
    // target is the same airports, 27% dropped, 25% new ones scattered in, moved into a local
    // grid by a known similarity with noise 1% of the median spacing (9 km).
    let (ids, ll, utm) = airports();
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2114);
    let truth = Similarity::from_params(0.37, 71f64.to_radians(), 120_000.0, -4_000_000.0); // target -> reference
    let to_local = truth.inverse();
    let noise = Normal::new(0.0, 90.0).unwrap();
    let tmp = tempfile::tempdir().unwrap();
    let (mut rcsv, mut tcsv) = ("id,lon,lat\n".to_string(), "id,x,y\n".to_string());
    let mut pairs = HashSet::new();
    let mut order: Vec<usize> = (0..ids.len()).collect();
    order.shuffle(&mut rng);
    for &i in &order {
        let in_r = rng.gen::<f64>() >= 0.27;
        let in_t = rng.gen::<f64>() >= 0.27;
        if in_r {
            rcsv += &format!("{},{},{}\n", ids[i], ll[i][0], ll[i][1]);
        }
        if in_t {
            let p = [
                utm[i][0] + noise.sample(&mut rng),
                utm[i][1] + noise.sample(&mut rng),
            ];
            let q = to_local.apply(p);
            tcsv += &format!("T{},{:.3},{:.3}\n", i, q[0], q[1]);
        }
        if in_r && in_t {
            pairs.insert((ids[i].clone(), format!("T{i}")));
        }
    }
    let (lo, hi) = utm
        .iter()
        .fold(([f64::MAX; 2], [f64::MIN; 2]), |(lo, hi), p| {
            (
                [lo[0].min(p[0]), lo[1].min(p[1])],
                [hi[0].max(p[0]), hi[1].max(p[1])],
            )
        });
    for j in 0..ids.len() / 4 {
        let p = [rng.gen_range(lo[0]..hi[0]), rng.gen_range(lo[1]..hi[1])];
        let q = to_local.apply(p);
        tcsv += &format!("N{j},{:.3},{:.3}\n", q[0], q[1]);
    }
    let (r, t) = (
        tmp.path().join("airports-ref.csv"),
        tmp.path().join("airports-local.csv"),
    );
    std::fs::write(&r, rcsv).unwrap();
    std::fs::write(&t, tcsv).unwrap();
    let out = tmp.path().join("out");
    let (code, stdout, stderr) = tiemark(&[
        "match",
        r.to_str().unwrap(),
        t.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--reference-crs",
        "EPSG:4326",
        "--reference-id",
        "id",
        "--target-id",
        "id",
        "--target-crs",
        "local",
        "--quiet",
    ]);
    assert_eq!(code, 0, "{stdout}{stderr}");
    // A geographic reference gets the UTM zone of its centre as working CRS.
    assert!(stdout.contains("EPSG:32616"), "{stdout}");
    let cps = control_points(&out);
    let (found, wrong) = score(&cps, &pairs);
    assert!(found >= 0.9, "found {found}");
    assert!(wrong <= 0.01, "wrong {wrong}");
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("transform.json")).unwrap())
            .unwrap();
    let fitted = transform_of(&doc);
    assert!((fitted.scale() / truth.scale() - 1.0).abs() < 1e-3);
    assert!((fitted.rotation() - truth.rotation()).abs() < 1e-3);
}

#[test]
fn unrelated_surveys_exit_1_and_write_nothing() {
    // The town's footprints against the airport pattern declared as a local grid.
    let (ids, _, utm) = airports();
    let tmp = tempfile::tempdir().unwrap();
    let t = tmp.path().join("unrelated.csv");
    let mut csv = "id,x,y\n".to_string();
    for (i, p) in ids.iter().zip(&utm) {
        csv += &format!("{i},{},{}\n", p[0] / 200.0, p[1] / 200.0);
    }
    std::fs::write(&t, csv).unwrap();
    let out = tmp.path().join("out");
    let reference = root().join("sample-data/town-footprints-2019.gpkg");
    let (code, stdout, stderr) = tiemark(&[
        "match",
        reference.to_str().unwrap(),
        t.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--target-crs",
        "local",
        "--quiet",
    ]);
    assert_eq!(code, 1, "{stdout}{stderr}");
    assert!(stdout.contains("no consistent transform"), "{stdout}");
    assert!(!out.exists(), "nothing may be written");
    let leftovers: Vec<_> = std::fs::read_dir(tmp.path())
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().contains("tiemark-partial"))
        .collect();
    assert!(leftovers.is_empty());
}

/// `tiemark landmarks` on the sample site grid (ids in `pt`), written to `out`.
fn site_grid_landmarks(out: &Path) -> (i32, String, String) {
    let src = root().join("sample-data/site-grid.csv");
    tiemark(&[
        "landmarks",
        src.to_str().unwrap(),
        "--id",
        "pt",
        "--out",
        out.to_str().unwrap(),
    ])
}

#[test]
fn landmarks_command_writes_what_it_reads() {
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("landmarks.csv");
    let src = root().join("sample-data/site-grid.csv");
    let (code, stdout, stderr) = site_grid_landmarks(&out);
    assert_eq!(code, 0, "{stderr}");
    assert!(stdout.contains("250 landmarks"), "{stdout}");
    let text = std::fs::read_to_string(&out).unwrap();
    let rows: HashMap<&str, &str> = text
        .lines()
        .skip(1)
        .map(|l| l.split_once(',').unwrap())
        .collect();
    assert_eq!(rows.len(), 250);
    // Writing again without --force is refused and leaves the file as it was.
    let (code, _, stderr) = tiemark(&[
        "landmarks",
        src.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(code, 2);
    assert!(stderr.contains("--force"), "{stderr}");
    assert_eq!(std::fs::read_to_string(&out).unwrap(), text);
}

#[test]
fn landmarks_of_a_csv_with_no_crs_are_tagged_as_a_local_grid_in_a_geopackage() {
    // A GeoPackage stores a layer with no CRS as "undefined geographic" (srs_id 0, OGC
    // GeoPackage Encoding Standard, Requirement 11 — from memory), which a GIS then places in
    // degrees; local coordinates must be tagged as an engineering (Cartesian) CRS instead.
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("site.gpkg");
    let (code, _, stderr) = site_grid_landmarks(&out);
    assert_eq!(code, 0, "{stderr}");
    let ds = gdal::Dataset::open(&out).unwrap();
    use gdal::vector::LayerAccess;
    let layer = ds.layer_by_name("landmarks").unwrap();
    let srs = layer.spatial_ref().expect("a CRS on the layer");
    assert!(!srs.is_geographic(), "{:?}", srs.to_wkt());
    assert!(srs.is_local(), "{:?}", srs.to_wkt());
}

#[test]
fn a_scale_bound_on_a_grid_in_feet_is_measured_against_the_foot() {
    // The sample site grid is in international feet (sample-data/site-grid-truth.json: scale
    // 0.3048 from grid to metres). Declared as such, a scale bound of 5000 ppm admits the fit;
    // undeclared, the raw scale 0.3048 is 70% off 1 and the bound rightly refuses it.
    let r = root();
    let (reference, target) = (
        r.join("sample-data/town-footprints-2019.gpkg"),
        r.join("sample-data/site-grid.csv"),
    );
    let run = |crs: &str| {
        let out = tempfile::tempdir().unwrap();
        let dir = out.path().join("out");
        let (code, stdout, stderr) = tiemark(&[
            "match",
            reference.to_str().unwrap(),
            target.to_str().unwrap(),
            "--reference-id",
            "bldg_id",
            "--target-id",
            "pt",
            "--target-crs",
            crs,
            "--max-scale-error",
            "5000",
            "--out",
            dir.to_str().unwrap(),
        ]);
        (code, format!("{stdout}{stderr}"))
    };
    let (code, text) = run("local:ft");
    assert_eq!(code, 0, "{text}");
    let (code, text) = run("local");
    assert_eq!(code, 1, "{text}");
    assert!(text.contains("outside the bounds"), "{text}");
}
