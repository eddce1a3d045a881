//! Bad input, end to end: the real binary on fixtures written here, one test per way an input
//! or an option can be wrong. Each test checks the exit code (2 for bad input), that the
//! message names the offending file or option, that nothing was written (no `--out` folder, no
//! hidden `.…tiemark-partial…` staging folder) and that the inputs are byte-for-byte unchanged.
//! A positive control shows that the valid fixtures the failing cases are built from really
//! match.
//!
//! The cases are grouped by topic: this file holds the fixtures and the first cases; each
//! submodule (`mod` lines below) adds the cases of one topic and reaches the fixtures through
//! `use super::*`.

mod outputs;

use gdal::spatial_ref::SpatialRef;
use gdal::vector::{
    Feature, FieldDefn, Geometry, LayerAccess, LayerOptions, OGRFieldType, OGRwkbGeometryType,
};
use gdal::DriverManager;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

mod checkpoints;
mod epochs;
mod georef;
mod ingest;
mod messages;
mod rasters;
mod words;

/// The GeoJSON `crs` member value for WGS 84 / UTM zone 33N.
const UTM33: &str = "urn:ogc:def:crs:EPSG::32633";

/// Grid spacing of the fixtures, metres.
const SPACING: f64 = 10.0;

/// A tiny deterministic generator (64-bit LCG, Knuth's MMIX constants).
struct Lcg(u64);

impl Lcg {
    /// Uniform in [0, 1).
    fn next(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// `side` × `side` points on a grid of [`SPACING`] around UTM 33N (500000, 5200000), each moved
/// by up to 0.3 spacings in x and y.
fn jittered_grid(side: usize, seed: u64) -> Vec<[f64; 2]> {
    let mut rng = Lcg(seed);
    let mut pts = Vec::with_capacity(side * side);
    for i in 0..side {
        for j in 0..side {
            let jx = (rng.next() - 0.5) * 0.6 * SPACING;
            let jy = (rng.next() - 0.5) * 0.6 * SPACING;
            pts.push([
                500_000.0 + i as f64 * SPACING + jx,
                5_200_000.0 + j as f64 * SPACING + jy,
            ]);
        }
    }
    pts
}

/// Reference ids: `r0`, `r1`, …
fn reference_ids(n: usize) -> Vec<String> {
    (0..n).map(|i| format!("r{i}")).collect()
}

/// A GeoJSON FeatureCollection of points with properties `name` (the id) and `kind`, with a
/// `crs` member when `crs` is given (without one GDAL takes the file as WGS 84).
fn geojson(points: &[[f64; 2]], ids: &[String], crs: Option<&str>) -> String {
    let features: Vec<String> = points
        .iter()
        .zip(ids)
        .map(|(p, id)| {
            format!(
                r#"{{"type":"Feature","properties":{{"name":"{id}","kind":"marker"}},"geometry":{{"type":"Point","coordinates":[{},{}]}}}}"#,
                p[0], p[1]
            )
        })
        .collect();
    let crs = crs
        .map(|c| format!(r#""crs":{{"type":"name","properties":{{"name":"{c}"}}}},"#))
        .unwrap_or_default();
    format!(
        "{{\"type\":\"FeatureCollection\",{crs}\"features\":[\n{}\n]}}\n",
        features.join(",\n")
    )
}

/// A CSV `id,x,y` of text cells, one row per entry.
fn csv_text(rows: &[(String, String, String)]) -> String {
    let mut s = String::from("id,x,y\n");
    for (id, x, y) in rows {
        s.push_str(&format!("{id},{x},{y}\n"));
    }
    s
}

/// The rows of a point CSV.
fn csv_rows(points: &[[f64; 2]], ids: &[String]) -> Vec<(String, String, String)> {
    points
        .iter()
        .zip(ids)
        .map(|(p, id)| (id.clone(), p[0].to_string(), p[1].to_string()))
        .collect()
}

/// The target survey of the positive control: the reference turned 30° counter-clockwise
/// about its first point, scaled 2×, shifted, with about 10% of the points dropped, in a local
/// grid, in reverse order. Ids `t<i>` where `r<i>` is the same landmark in the reference.
fn target_survey(reference: &[[f64; 2]], seed: u64) -> (Vec<[f64; 2]>, Vec<String>) {
    let (s, c) = 30f64.to_radians().sin_cos();
    let o = reference[0];
    let mut rng = Lcg(seed);
    let mut pts = Vec::new();
    let mut ids = Vec::new();
    for (i, p) in reference.iter().enumerate() {
        if rng.next() < 0.1 {
            continue;
        }
        let (x, y) = (p[0] - o[0], p[1] - o[1]);
        pts.push([
            2.0 * (c * x - s * y) + 1000.0,
            2.0 * (s * x + c * y) + 2000.0,
        ]);
        ids.push(format!("t{i}"));
    }
    pts.reverse();
    ids.reverse();
    (pts, ids)
}

/// The reference landmarks of the valid pair: a 20 × 20 jittered grid.
fn reference_points() -> Vec<[f64; 2]> {
    jittered_grid(20, 7)
}

/// The target landmarks of the valid pair, and their ids.
fn target_points() -> (Vec<[f64; 2]>, Vec<String>) {
    target_survey(&reference_points(), 11)
}

/// What one run of the binary did.
#[derive(Debug)]
struct Outcome {
    code: Option<i32>,
    stdout: String,
    stderr: String,
}

/// Arguments of `tiemark match REFERENCE TARGET --target-crs local EXTRA… --out out`.
fn local_match<'a>(reference: &'a str, target: &'a str, extra: &[&'a str]) -> Vec<&'a str> {
    let mut args = vec!["match", reference, target, "--target-crs", "local"];
    args.extend_from_slice(extra);
    args.extend_from_slice(&["--out", "out"]);
    args
}

/// Every file in a folder tree (relative path → bytes; folders → `None`).
type Snapshot = BTreeMap<PathBuf, Option<Vec<u8>>>;

/// A fresh temporary folder holding the fixtures of one test; the binary runs in it.
struct Site {
    dir: tempfile::TempDir,
}

impl Site {
    fn new() -> Site {
        Site {
            dir: tempfile::tempdir().expect("a temporary folder"),
        }
    }

    fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }

    /// Writes a fixture file; returns its name (relative to the site).
    fn write<'a>(&self, name: &'a str, contents: impl AsRef<[u8]>) -> &'a str {
        let p = self.path(name);
        if let Some(parent) = p.parent() {
            std::fs::create_dir_all(parent).unwrap();
        }
        std::fs::write(&p, contents).unwrap();
        name
    }

    /// The reference (a jittered grid in a GeoJSON declared UTM 33N, ids in `name`) and the
    /// target (the same landmarks moved, in a local-grid CSV): a pair that matches (see
    /// [`positive_control_matches_and_writes_four_files`]).
    fn valid_pair(&self) -> (&'static str, &'static str) {
        let r = reference_points();
        let ids = reference_ids(r.len());
        let (t, tids) = target_points();
        (
            self.write("reference.geojson", geojson(&r, &ids, Some(UTM33))),
            self.write("target.csv", csv_text(&csv_rows(&t, &tids))),
        )
    }

    /// Writes `contents` as the file `name`, matches it against the valid survey of the other
    /// side (it is the reference when `as_reference`, else the target) and expects exit 2 with
    /// `words`.
    fn refuses(
        &self,
        as_reference: bool,
        name: &'static str,
        contents: impl AsRef<[u8]>,
        words: &[&str],
    ) {
        let bad = self.write(name, contents);
        let (r, t) = if as_reference {
            (Some(bad), None)
        } else {
            (None, Some(bad))
        };
        self.refuses_match(r, t, &[], words);
    }

    /// Matches `reference` against `target` (`None`: the valid survey of that side) with the
    /// `extra` arguments and expects exit 2 with `words`.
    fn refuses_match(
        &self,
        reference: Option<&'static str>,
        target: Option<&'static str>,
        extra: &[&str],
        words: &[&str],
    ) {
        let (r, t) = self.valid_pair();
        let args = local_match(reference.unwrap_or(r), target.unwrap_or(t), extra);
        self.expect_failure(&args, 2, words);
    }

    /// Runs a match of the valid reference against the target written as `name` with a count
    /// column `n` before `y`.
    fn match_with_a_count_column_named_n(&self, name: &'static str, extra: &[&str]) -> Outcome {
        let (reference, _) = self.valid_pair();
        let target = self.write(name, target_with_a_count_column_named_n());
        self.run(&local_match(reference, target, extra))
    }

    /// `file` (of `count` landmarks) reads whole (the control); cut to half its bytes, a match
    /// of it against the valid target exits 2 with `words`.
    fn refuses_when_cut_in_half(&self, file: &'static str, count: usize, words: &[&str]) {
        let (_, target) = self.valid_pair();
        let out = self.run(&["landmarks", file, "--out", "seen.csv"]);
        assert_eq!(out.code, Some(0), "{out:#?}");
        assert!(
            out.stdout.starts_with(&format!("{count} landmarks")),
            "{out:#?}"
        );
        truncate_to_half(&self.path(file));
        self.expect_failure(&local_match(file, target, &[]), 2, words);
    }

    fn snapshot(&self) -> Snapshot {
        fn walk(root: &Path, dir: &Path, into: &mut Snapshot) {
            for entry in std::fs::read_dir(dir).unwrap() {
                let p = entry.unwrap().path();
                let rel = p.strip_prefix(root).unwrap().to_path_buf();
                if p.is_dir() {
                    into.insert(rel, None);
                    walk(root, &p, into);
                } else {
                    into.insert(rel, Some(std::fs::read(&p).unwrap()));
                }
            }
        }
        let mut s = Snapshot::new();
        walk(self.dir.path(), self.dir.path(), &mut s);
        s
    }

    fn run(&self, args: &[&str]) -> Outcome {
        let out = Command::new(env!("CARGO_BIN_EXE_tiemark"))
            .args(args)
            .current_dir(self.dir.path())
            .stdin(Stdio::null())
            .output()
            .expect("the tiemark binary runs");
        Outcome {
            code: out.status.code(),
            stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
            stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
        }
    }

    /// Runs tiemark and checks that it failed as it should: exit `code`, a message (stderr for
    /// exit 2, stdout for exit 1) containing every one of `words`, no `--out` folder that was
    /// not there before, no staging folder, and every file in the site exactly as it was.
    fn expect_failure(&self, args: &[&str], code: i32, words: &[&str]) {
        let before = self.snapshot();
        let out = self.run(args);
        assert_eq!(
            out.code,
            Some(code),
            "exit code of tiemark {args:?}:\n{out:#?}"
        );
        let message = if code == 1 { &out.stdout } else { &out.stderr };
        eprintln!("tiemark {args:?} -> {:?}\n{message}", out.code);
        for w in words {
            assert!(
                message.contains(w),
                "the message of tiemark {args:?} does not contain {w:?}:\n{message}"
            );
        }
        let after = self.snapshot();
        if let Some(i) = args.iter().position(|a| *a == "--out") {
            let dir = Path::new(args[i + 1]);
            if !before.contains_key(dir) {
                assert!(
                    !self.path(args[i + 1]).exists(),
                    "--out {dir:?} was created"
                );
            }
        }
        assert_no_staging_left(&after);
        let changed: Vec<&PathBuf> = before
            .keys()
            .chain(after.keys())
            .filter(|k| before.get(*k) != after.get(*k))
            .collect();
        assert!(
            changed.is_empty(),
            "files created, changed or removed by tiemark {args:?}: {changed:?}"
        );
    }
}

/// No hidden staging folder of a run is left in `snapshot`.
fn assert_no_staging_left(snapshot: &Snapshot) {
    let partial: Vec<&PathBuf> = snapshot
        .keys()
        .filter(|k| k.to_string_lossy().contains("tiemark-partial"))
        .collect();
    assert!(
        partial.is_empty(),
        "staging folder left behind: {partial:?}"
    );
}

#[test]
fn positive_control_matches_and_writes_four_files() {
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    let inputs = site.snapshot();
    let out = site.run(&local_match(
        reference,
        target,
        &["--target-id", "id", "--reference-id", "name"],
    ));
    assert_eq!(out.code, Some(0), "{out:#?}");
    assert!(!out.stdout.trim().is_empty(), "no summary on stdout");
    for f in [
        "control-points.csv",
        "control-points.gpkg",
        "transform.json",
        "report.txt",
    ] {
        let p = site.path("out").join(f);
        assert!(
            p.is_file() && std::fs::metadata(&p).unwrap().len() > 0,
            "{f} missing or empty"
        );
    }
    let after = site.snapshot();
    assert_no_staging_left(&after);
    for (name, bytes) in &inputs {
        assert_eq!(after.get(name), Some(bytes), "{name:?} changed");
    }

    // The control points are the true pairs (r<i> with t<i>), and most of them.
    let kept = std::fs::read_to_string(site.path(target))
        .unwrap()
        .lines()
        .count()
        - 1;
    let csv = std::fs::read_to_string(site.path("out/control-points.csv")).unwrap();
    let mut lines = csv.lines();
    assert!(lines.next().unwrap().starts_with("reference_id,target_id,"));
    let mut pairs = 0;
    for line in lines {
        let mut cells = line.split(',');
        let (r, t) = (cells.next().unwrap(), cells.next().unwrap());
        assert_eq!(
            r.strip_prefix('r'),
            t.strip_prefix('t'),
            "wrong pair: {line}"
        );
        pairs += 1;
    }
    assert!(
        pairs * 10 >= kept * 8,
        "{pairs} control points of {kept} target landmarks"
    );

    // The transform undoes the one the target was made with (2×, 30° counter-clockwise).
    let t: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(site.path("out/transform.json")).unwrap())
            .unwrap();
    let scale = t["scale"].as_f64().unwrap();
    let rotation = t["rotation_deg"].as_f64().unwrap();
    assert!((scale - 0.5).abs() < 1e-6, "scale {scale}");
    assert!((rotation + 30.0).abs() < 1e-4, "rotation {rotation}°");
}

#[test]
fn missing_reference_file() {
    Site::new().refuses_match(
        Some("no-such-survey.geojson"),
        None,
        &[],
        &["no-such-survey.geojson", "no such file"],
    );
}

#[test]
fn missing_target_file() {
    Site::new().refuses_match(
        None,
        Some("no-such-survey.csv"),
        &[],
        &["no-such-survey.csv", "no such file"],
    );
}

#[test]
fn text_file_named_gpkg() {
    Site::new().refuses(
        true,
        "survey.gpkg",
        "id,x,y\nthis is not a GeoPackage\n",
        &["survey.gpkg", "not a vector dataset"],
    );
}

#[test]
fn garbage_geojson() {
    Site::new().refuses(
        false,
        "broken.geojson",
        "{\"type\": \"FeatureCollection\", \"features\": [ {{{ 12 ]\n",
        &["broken.geojson", "not a vector dataset"],
    );
}

#[test]
fn unknown_layer_lists_the_layers() {
    let site = Site::new();
    let (_, target) = site.valid_pair();
    // A GeoPackage with two layers, written with GDAL itself.
    {
        let driver = DriverManager::get_driver_by_name("GPKG").unwrap();
        let mut ds = driver.create_vector_only(site.path("survey.gpkg")).unwrap();
        let srs = SpatialRef::from_epsg(32633).unwrap();
        let grid = jittered_grid(6, 3);
        for (name, pts) in [("buildings", &grid[..20]), ("trees", &grid[20..])] {
            let layer = ds
                .create_layer(LayerOptions {
                    name,
                    srs: Some(&srs),
                    ty: OGRwkbGeometryType::wkbPoint,
                    options: None,
                })
                .unwrap();
            FieldDefn::new("label", OGRFieldType::OFTString)
                .unwrap()
                .add_to_layer(&layer)
                .unwrap();
            for (i, p) in pts.iter().enumerate() {
                let mut f = Feature::new(layer.defn()).unwrap();
                f.set_field_string(0, &format!("{name}-{i}")).unwrap();
                let mut g = Geometry::empty(OGRwkbGeometryType::wkbPoint).unwrap();
                g.add_point_2d((p[0], p[1]));
                f.set_geometry(g).unwrap();
                f.create(&layer).unwrap();
            }
        }
    }
    site.expect_failure(
        &local_match("survey.gpkg", target, &["--reference-layer", "nope"]),
        2,
        &["survey.gpkg", "'nope'", "buildings", "trees"],
    );
}

#[test]
fn unknown_id_field_lists_the_fields() {
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    site.expect_failure(
        &local_match(reference, target, &["--reference-id", "nope"]),
        2,
        &["reference.geojson", "'nope'", "name", "kind"],
    );
}

#[test]
fn empty_feature_collection() {
    Site::new().refuses(
        true,
        "empty.geojson",
        geojson(&[], &[], Some(UTM33)),
        &["empty.geojson", "no features with a geometry"],
    );
}

#[test]
fn features_all_without_geometry() {
    let site = Site::new();
    let (_, target) = site.valid_pair();
    let features: Vec<String> = (0..3)
        .map(|i| format!(r#"{{"type":"Feature","properties":{{"name":"r{i}"}},"geometry":null}}"#))
        .collect();
    let reference = site.write(
        "nulls.geojson",
        format!(
            "{{\"type\":\"FeatureCollection\",\"features\":[{}]}}\n",
            features.join(",")
        ),
    );
    site.expect_failure(
        &local_match(reference, target, &[]),
        2,
        &["nulls.geojson", "no features with a geometry", "3 skipped"],
    );
}

#[test]
fn fewer_landmarks_than_one_neighbourhood() {
    let four = jittered_grid(2, 5);
    Site::new().refuses(
        true,
        "four.geojson",
        geojson(&four, &reference_ids(4), Some(UTM33)),
        &["reference", "4 landmarks", "--neighbours"],
    );
}

/// The valid target with the coordinate text of row `row` (0-based, after the header) replaced.
fn target_with_bad_row(
    site: &Site,
    name: &'static str,
    row: usize,
    x: Option<&str>,
    y: Option<&str>,
) -> (&'static str, String) {
    let (reference, _) = site.valid_pair();
    let (t, ids) = target_points();
    let mut rows = csv_rows(&t, &ids);
    if let Some(x) = x {
        rows[row].1 = x.to_string();
    }
    if let Some(y) = y {
        rows[row].2 = y.to_string();
    }
    site.write(name, csv_text(&rows));
    (reference, rows[row].0.clone())
}

/// A target CSV whose row `row` has `x` / `y` replaced is refused (exit 2), naming the file,
/// the row's id, "non-finite" and `shown` (the cell as the message quotes it).
fn bad_coordinate_is_refused(
    name: &'static str,
    row: usize,
    x: Option<&str>,
    y: Option<&str>,
    shown: &str,
) {
    let site = Site::new();
    let (reference, bad_id) = target_with_bad_row(&site, name, row, x, y);
    site.expect_failure(
        &local_match(reference, name, &["--target-id", "id"]),
        2,
        &[name, &format!("'{bad_id}'"), "non-finite", shown],
    );
}

#[test]
fn csv_nan_coordinate() {
    // GDAL 3.6's CSV driver gives a row whose x is `nan` no geometry at all (it does not read
    // NaN); tiemark used to skip such a row silently as a feature without geometry.
    bad_coordinate_is_refused("target-nan.csv", 17, Some("nan"), None, "'nan'");
}

#[test]
fn csv_inf_coordinate() {
    // As with `nan`: GDAL reads `inf` / `-inf` as no geometry.
    bad_coordinate_is_refused("target-inf.csv", 40, None, Some("-inf"), "'-inf'");
}

#[test]
fn csv_overflowing_coordinate() {
    // A number too large for f64: GDAL reads it as an infinite coordinate.
    bad_coordinate_is_refused("target-huge.csv", 3, Some("1e999"), None, "inf");
}

#[test]
fn csv_two_columns_for_one_axis() {
    // Two columns GDAL would both take as x: GDAL 3.6 crashed (SIGSEGV) on this layout.
    let site = Site::new();
    let (reference, _) = site.valid_pair();
    let (t, ids) = target_points();
    let mut text = String::from("id,x,X,y\n");
    for (p, id) in t.iter().zip(&ids) {
        text.push_str(&format!("{id},{},{},{}\n", p[0], p[0], p[1]));
    }
    let target = site.write("two-x.csv", text);
    site.expect_failure(
        &local_match(reference, target, &[]),
        2,
        &["two-x.csv", "'x'", "'X'", "rename"],
    );
}

/// The target survey as CSV text with a column `n` (a count) before `y`.
fn target_with_a_count_column_named_n() -> String {
    let (t, ids) = target_points();
    let mut text = String::from("id,n,x,y\n");
    for (k, (p, id)) in t.iter().zip(&ids).enumerate() {
        text.push_str(&format!("{id},{},{},{}\n", k % 7, p[0], p[1]));
    }
    text
}

#[test]
fn csv_attribute_named_like_a_coordinate_is_not_taken_for_one() {
    // A column `n` (a count) before `y`: GDAL takes the first matching column, so `n` became the
    // northing. The match must work as in the positive control.
    let site = Site::new();
    let out = site.match_with_a_count_column_named_n("with-n.csv", &[]);
    assert_eq!(out.code, Some(0), "{out:#?}");
    assert!(site.path("out/transform.json").is_file());
}

#[test]
fn duplicate_positions() {
    let site = Site::new();
    let (_, target) = site.valid_pair();
    let mut r = reference_points();
    let mut ids = reference_ids(r.len());
    r.push(r[5]);
    ids.push("r5-copy".into());
    let reference = site.write("dup.geojson", geojson(&r, &ids, Some(UTM33)));
    site.expect_failure(
        &local_match(reference, target, &["--reference-id", "name"]),
        2,
        &["dup.geojson", "duplicated positions", "'r5'", "'r5-copy'"],
    );
}

#[test]
fn all_points_collinear() {
    // 50 points 7.1 m apart along a line (a road), at full precision: collinear up to rounding,
    // at several angles.
    let site = Site::new();
    let (_, target) = site.valid_pair();
    for angle in [30.0f64, 45.0, 108.0, -17.0] {
        let (s, c) = angle.to_radians().sin_cos();
        let line: Vec<[f64; 2]> = (0..50)
            .map(|i| {
                let d = 7.1 * i as f64;
                [500_000.123 + d * c, 5_200_000.456 + d * s]
            })
            .collect();
        let name = format!("line{angle}.geojson");
        site.write(
            &name,
            geojson(&line, &reference_ids(line.len()), Some(UTM33)),
        );
        site.expect_failure(
            &local_match(&name, target, &[]),
            2,
            &[&name, "one straight line"],
        );
    }
}

#[test]
fn reference_csv_without_crs() {
    let site = Site::new();
    let (_, target) = site.valid_pair();
    let r = reference_points();
    let reference = site.write(
        "reference.csv",
        csv_text(&csv_rows(&r, &reference_ids(r.len()))),
    );
    site.expect_failure(
        &local_match(reference, target, &[]),
        2,
        &["reference.csv", "declares no CRS", "--reference-crs"],
    );
}

#[test]
fn target_csv_without_crs() {
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    site.expect_failure(
        &["match", reference, target, "--out", "out"],
        2,
        &["target.csv", "declares no CRS", "--target-crs", "local"],
    );
}

#[test]
fn no_overlap_after_reprojection() {
    // The same numbers, but the target declared in UTM zone 34N: about 470 km east of the
    // reference once converted to zone 33N.
    let site = Site::new();
    let (reference, _) = site.valid_pair();
    let r = reference_points();
    let target = site.write("far.geojson", geojson(&r, &reference_ids(r.len()), None));
    site.expect_failure(
        &[
            "match",
            reference,
            target,
            "--target-crs",
            "EPSG:32634",
            "--out",
            "out",
        ],
        2,
        &["do not overlap", "--reference-crs", "--target-crs"],
    );
}

#[test]
fn output_folder_not_empty() {
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    site.write("out/keep.txt", "precious\n");
    site.expect_failure(
        &local_match(reference, target, &[]),
        2,
        &["out", "not empty", "--force"],
    );
    // Refused before any work: before the (here missing) inputs are even looked at.
    site.expect_failure(
        &local_match("no-such-survey.geojson", target, &[]),
        2,
        &["out", "not empty", "--force"],
    );
}

#[test]
fn forced_output_folder_with_a_folder_under_a_tiemark_name() {
    // With --force into a folder holding the previous four files, a folder named like one of
    // them makes the move fail. The files used to be renamed one by one, so this left the
    // csv and gpkg new and the rest old; now the move is refused before any file moves.
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    let previous = ["control-points.csv", "control-points.gpkg", "report.txt"];
    for f in previous {
        site.write(&format!("out/{f}"), format!("previous {f}\n"));
    }
    site.write("out/transform.json/mine.txt", "not tiemark's\n");
    site.write("out/keep.txt", "precious\n");
    site.expect_failure(
        &local_match(reference, target, &["--force"]),
        2,
        &["out/transform.json", "is a folder", "move it away"],
    );
    // Control: without that folder the forced run replaces the four files, keeps the user's,
    // and leaves nothing of its own beside them.
    std::fs::remove_dir_all(site.path("out/transform.json")).unwrap();
    let before = site.snapshot();
    let out = site.run(&local_match(reference, target, &["--force"]));
    assert_eq!(out.code, Some(0), "{out:#?}");
    let after = site.snapshot();
    for f in previous.iter().chain(&["transform.json"]) {
        let bytes = after.get(&Path::new("out").join(f)).cloned().flatten();
        assert!(
            bytes.is_some_and(|b| !b.is_empty() && b != format!("previous {f}\n").into_bytes()),
            "{f} not replaced"
        );
    }
    let mut others = after.clone();
    for f in previous.iter().chain(&["transform.json", "report.html"]) {
        others.remove(&Path::new("out").join(f));
    }
    let mut others_before = before;
    for f in previous {
        others_before.remove(&Path::new("out").join(f));
    }
    assert_eq!(
        others, others_before,
        "files beside tiemark's appeared, went or changed"
    );
}

#[test]
fn neighbours_too_small() {
    Site::new().refuses_match(
        None,
        None,
        &["--neighbours", "2"],
        &["--neighbours", "(got 2)"],
    );
}

#[test]
fn negative_search_radius() {
    let words = ["--search-radius", "positive", "(got -1)"];
    Site::new().refuses_match(None, None, &["--search-radius=-1"], &words);
}

#[test]
fn negative_max_residual_as_separate_argument() {
    // `--max-residual -1`, as a user types it, must get the same answer as `--max-residual=-1`
    // (clap takes `-1` for an unknown flag unless the argument allows negative numbers).
    let words = ["--max-residual", "positive", "(got -1)"];
    Site::new().refuses_match(None, None, &["--max-residual", "-1"], &words);
}

#[test]
fn pipeline_with_unknown_key() {
    let site = Site::new();
    site.valid_pair();
    let text = "[reference]\npath = \"../reference.geojson\"\nid = \"name\"\n\n[target]\npath = \"../target.csv\"\ncrs = \"local\"\n\n[output]\ndir = \"out\"\n\n[fit]\nsearch_radios_m = 2.0\n";
    site.write("pipelines/p.toml", text);
    // Where the misspelt key is, counted from the text written.
    let line = text
        .lines()
        .position(|l| l.contains("search_radios_m"))
        .unwrap()
        + 1;
    let column = text
        .lines()
        .nth(line - 1)
        .unwrap()
        .find("search_radios_m")
        .unwrap()
        + 1;
    site.expect_failure(
        &["run", "pipelines/p.toml"],
        2,
        &[
            "p.toml",
            &format!("line {line}, column {column}"),
            "search_radios_m",
        ],
    );
    assert!(!site.path("pipelines/out").exists());
    // Control: spelt right, the same pipeline runs.
    site.write(
        "pipelines/p.toml",
        text.replace("search_radios_m", "search_radius_m"),
    );
    let out = site.run(&["run", "pipelines/p.toml"]);
    assert_eq!(out.code, Some(0), "{out:#?}");
    assert!(site.path("pipelines/out/transform.json").is_file());
}

/// Writes points with ids (field `name`) in UTM 33N with one of GDAL's vector drivers.
fn write_with_gdal(driver: &str, path: &Path, points: &[[f64; 2]], ids: &[String]) {
    let driver = DriverManager::get_driver_by_name(driver).unwrap();
    let mut ds = driver.create_vector_only(path).unwrap();
    let srs = SpatialRef::from_epsg(32633).unwrap();
    let layer = ds
        .create_layer(LayerOptions {
            name: "landmarks",
            srs: Some(&srs),
            ty: OGRwkbGeometryType::wkbPoint,
            options: None,
        })
        .unwrap();
    FieldDefn::new("name", OGRFieldType::OFTString)
        .unwrap()
        .add_to_layer(&layer)
        .unwrap();
    for (p, id) in points.iter().zip(ids) {
        let mut f = Feature::new(layer.defn()).unwrap();
        f.set_field_string(0, id).unwrap();
        let mut g = Geometry::empty(OGRwkbGeometryType::wkbPoint).unwrap();
        g.add_point_2d((p[0], p[1]));
        f.set_geometry(g).unwrap();
        f.create(&layer).unwrap();
    }
}

/// Cuts a file to the first half of its bytes.
fn truncate_to_half(path: &Path) {
    let bytes = std::fs::read(path).unwrap();
    std::fs::write(path, &bytes[..bytes.len() / 2]).unwrap();
}

#[test]
fn raster_named_gpkg_is_read_as_a_raster() {
    // What the file is comes from what GDAL opens, not from its name: read as a raster, this
    // one is refused for what is wrong with it as an image.
    let site = Site::new();
    let (_, target) = site.valid_pair();
    let driver = DriverManager::get_driver_by_name("GTiff").unwrap();
    drop(
        driver
            .create_with_band_type::<u8, _>(site.path("survey.gpkg"), 8, 6, 1)
            .unwrap(),
    );
    site.expect_failure(
        &local_match("survey.gpkg", target, &[]),
        2,
        &[
            "survey.gpkg",
            "raster image has no georeferencing",
            "geotransform",
        ],
    );
}

#[test]
fn geojson_named_dat_is_read_as_vector() {
    let site = Site::new();
    let r = reference_points();
    site.write(
        "survey.dat",
        geojson(&r, &reference_ids(r.len()), Some(UTM33)),
    );
    let out = site.run(&[
        "landmarks",
        "survey.dat",
        "--id",
        "name",
        "--out",
        "seen.csv",
    ]);
    assert_eq!(out.code, Some(0), "{out:#?}");
    assert!(
        out.stdout
            .starts_with(&format!("{} landmarks from survey.dat", r.len())),
        "{out:#?}"
    );
    let written = std::fs::read_to_string(site.path("seen.csv")).unwrap();
    assert_eq!(written.lines().count(), r.len() + 1, "{written}");
}

#[test]
fn csv_named_txt_gets_the_csv_column_handling() {
    // GDAL's CSV driver recognises only .csv/.tsv/.psv names; a .txt table is handed to it
    // explicitly. Its columns are chosen as for a .csv: `n` is not taken for the northing.
    let site = Site::new();
    let out = site.match_with_a_count_column_named_n(
        "with-n.txt",
        &["--target-id", "id", "--reference-id", "name"],
    );
    assert_eq!(out.code, Some(0), "{out:#?}");
    let t: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(site.path("out/transform.json")).unwrap())
            .unwrap();
    let scale = t["scale"].as_f64().unwrap();
    assert!((scale - 0.5).abs() < 1e-6, "scale {scale}");
    // And its rows without geometry are looked at, as for a .csv.
    bad_coordinate_is_refused("target-nan.txt", 17, Some("nan"), None, "'nan'");
}

#[test]
fn truncated_flatgeobuf() {
    // GDAL prints an error for the feature it cannot read and then ends the layer as if it were
    // complete: tiemark used to go on with the features before it.
    let site = Site::new();

    let r = reference_points();
    let ids = reference_ids(r.len());
    write_with_gdal("FlatGeobuf", &site.path("half.fgb"), &r, &ids);
    site.refuses_when_cut_in_half(
        "half.fgb",
        r.len(),
        &[
            "half.fgb",
            "layer 'landmarks'",
            "GDAL failed reading feature number",
            &format!("of {}", r.len()),
            "truncated",
        ],
    );
}

#[test]
fn truncated_shapefile() {
    let site = Site::new();
    let r = reference_points();
    std::fs::create_dir(site.path("shp")).unwrap();
    write_with_gdal(
        "ESRI Shapefile",
        &site.path("shp/landmarks.shp"),
        &r,
        &reference_ids(r.len()),
    );
    site.refuses_when_cut_in_half(
        "shp/landmarks.shp",
        r.len(),
        &[
            "landmarks.shp",
            "GDAL failed reading feature number",
            // The Shapefile driver hands back the feature it failed on.
            "(feature id ",
            ".shp file; ",
            "truncated",
        ],
    );
}

#[test]
fn landmarks_command_counts_skipped_features_by_cause() {
    let site = Site::new();
    let r = reference_points();
    let ids = reference_ids(r.len());
    let text = geojson(&r, &ids, Some(UTM33));
    let extra = [
        r#"{"type":"Feature","properties":{"name":"nothing1"},"geometry":null}"#,
        r#"{"type":"Feature","properties":{"name":"nothing2"},"geometry":null}"#,
        r#"{"type":"Feature","properties":{"name":"hollow"},"geometry":{"type":"GeometryCollection","geometries":[]}}"#,
    ];
    let text = text.replacen(
        "\"features\":[\n",
        &format!("\"features\":[\n{},\n", extra.join(",\n")),
        1,
    );
    site.write("mixed.geojson", text);
    let out = site.run(&["landmarks", "mixed.geojson", "--out", "seen.csv"]);
    assert_eq!(out.code, Some(0), "{out:#?}");
    assert!(
        out.stdout.contains(&format!(
            "{} landmarks from mixed.geojson (layer mixed); 3 features skipped (2 without a geometry, 1 with an empty geometry)",
            r.len()
        )),
        "{out:#?}"
    );
}
