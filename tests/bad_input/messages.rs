//! Messages that used to mislead: options and inputs that were refused with the wrong words,
//! or not refused at all. Each case checks the exit code, the words of the message, that
//! nothing was written and that the inputs are untouched (`Site::expect_failure`).

use super::*;

/// A pipeline of the valid pair (reference ids in `name`, the target a local grid) with the
/// given `[output]` folder and extra tables, written as `pipelines/p.toml`.
fn pipeline(site: &Site, dir: &str, extra: &str) -> &'static str {
    site.valid_pair();
    site.write(
        "pipelines/p.toml",
        format!(
            "[reference]\npath = \"../reference.geojson\"\nid = \"name\"\n\n[target]\npath = \"../target.csv\"\ncrs = \"local\"\n\n[output]\ndir = \"{dir}\"\n{extra}"
        ),
    )
}

#[test]
fn pipeline_with_an_empty_output_dir() {
    // `dir = ""` used to mean the pipeline file's own folder: the four outputs appeared beside
    // it.
    let site = Site::new();
    let p = pipeline(&site, "", "");
    site.expect_failure(
        &["run", p],
        2,
        &["p.toml", "output.dir is empty", "dir = \"out\""],
    );
    // Control: with a folder named, the same pipeline runs.
    pipeline(&site, "out", "");
    let out = site.run(&["run", p]);
    assert_eq!(out.code, Some(0), "{out:#?}");
    assert!(site.path("pipelines/out/transform.json").is_file());
}

/// The first `n` target landmarks of the valid pair as a local-grid CSV named `name`.
fn small_target(site: &Site, name: &'static str, n: usize) -> &'static str {
    let (t, ids) = target_points();
    site.write(name, csv_text(&csv_rows(&t[..n], &ids[..n])))
}

#[test]
fn too_few_landmarks_for_one_signature_with_leave_out() {
    // Six target landmarks with leave-out 2: every signature needs 4 + 2 neighbours and the
    // landmark itself, so no target landmark got one and the run ended in "the neighbourhoods
    // of the two surveys never agreed" (exit 1), which blamed the data.
    let site = Site::new();
    let target = small_target(&site, "six.csv", 6);
    site.refuses_match(
        None,
        Some(target),
        &[
            "--leave-out",
            "2",
            "--neighbours",
            "4",
            "--min-control-points",
            "3",
        ],
        &[
            "the target (six.csv) has 6 landmarks",
            "(the reference (reference.geojson) has 400)",
            "needs 7",
            "its 4 nearest neighbours (--neighbours)",
            "2 more for leave-out 2 (--leave-out)",
            "set --leave-out to 1 or 0",
        ],
    );
}

#[test]
fn too_few_landmarks_for_one_signature_of_the_neighbours_asked_for() {
    let site = Site::new();
    let target = small_target(&site, "five.csv", 5);
    site.refuses_match(
        None,
        Some(target),
        &["--neighbours", "6", "--min-control-points", "3"],
        &[
            "has 5 landmarks",
            "needs 7",
            "set --neighbours to 4 and --leave-out to 0",
        ],
    );
}

#[test]
fn fewer_landmarks_than_control_points_required() {
    // Four target landmarks can never give the five control points the fit requires: that
    // used to end in exit 1 as if the surveys did not match.
    let site = Site::new();
    let target = small_target(&site, "four.csv", 4);
    site.refuses_match(
        None,
        Some(target),
        &["--neighbours", "3"],
        &[
            "the target (four.csv) has 4 landmarks",
            "5 control points",
            "--min-control-points",
        ],
    );
}

#[test]
fn neighbours_three_takes_harmonic_one_by_itself() {
    // `--neighbours 3` alone used to fail on `--harmonics [1, 2]`, the default the user never
    // set: 4-vertex polygons carry harmonic 1 only. Now the harmonics follow the neighbours.
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    let out = site.run(&local_match(reference, target, &["--neighbours", "3"]));
    assert_eq!(out.code, Some(0), "{out:#?}");
    let t: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(site.path("out/transform.json")).unwrap())
            .unwrap();
    assert_eq!(t["thresholds"]["neighbours"], 3);
    assert_eq!(t["thresholds"]["harmonics"], serde_json::json!([1]));
}

#[test]
fn harmonics_that_need_more_neighbours_name_both_values() {
    let site = Site::new();
    site.refuses_match(
        None,
        None,
        &["--neighbours", "3", "--harmonics", "1,2"],
        &[
            "--harmonics [1, 2]",
            "--neighbours of at least 4",
            "--neighbours is 3",
            "[1]",
        ],
    );
    // With the neighbours left automatic, the message says so.
    site.refuses_match(
        None,
        None,
        &["--harmonics", "3"],
        &["--harmonics [3]", "at least 6", "--neighbours is automatic"],
    );
}

#[test]
fn a_count_given_as_a_negative_number() {
    // clap's own answer to `--max-rounds -1` was "unexpected argument '-1'" with the tip to
    // write `-- -1`, which makes it a positional argument.
    let site = Site::new();
    site.refuses_match(
        None,
        None,
        &["--max-rounds", "-1"],
        &["'-1'", "--max-rounds", "whole number"],
    );
}

#[test]
fn zero_rounds_and_other_senseless_numbers_are_refused_by_key() {
    // Every numeric option of the fit, matching and signature stages at a value that makes no
    // sense: refused, naming the pipeline key (and on the command line its flag).
    let site = Site::new();
    for (table, line, key) in [
        ("fit", "max_rounds = 0", "fit.max_rounds"),
        ("fit", "confidence = nan", "fit.confidence"),
        ("fit", "confidence = 0.0", "fit.confidence"),
        ("fit", "search_radius_m = -2.0", "fit.search_radius_m"),
        ("fit", "search_radius_m = nan", "fit.search_radius_m"),
        ("fit", "max_residual_m = 0.0", "fit.max_residual_m"),
        ("fit", "false_alarm_level = 0.0", "fit.false_alarm_level"),
        ("fit", "min_control_points = 0", "fit.min_control_points"),
        ("fit", "max_shift_m = 0.0", "fit.max_shift_m"),
        ("fit", "max_rotation_deg = nan", "fit.max_rotation_deg"),
        ("fit", "max_scale_ppm = -5.0", "fit.max_scale_ppm"),
        ("matching", "candidates = 0", "matching.candidates"),
        ("signatures", "neighbours = 0", "signatures.neighbours"),
        ("signatures", "leave_out = 3", "signatures.leave_out"),
        ("signatures", "ambiguity = nan", "signatures.ambiguity"),
        ("signatures", "harmonics = [0]", "signatures.harmonics"),
    ] {
        let p = pipeline(&site, "out", &format!("\n[{table}]\n{line}\n"));
        site.expect_failure(&["run", p], 2, &[key]);
    }
    site.refuses_match(
        None,
        None,
        &["--max-rounds", "0"],
        &["--max-rounds", "(got 0)"],
    );
}

#[cfg(feature = "experiments")]
#[test]
fn experiment_with_zero_trials() {
    // `--trials 0` used to write tables of NaN shares.
    Site::new().expect_failure(
        &[
            "experiment",
            "landmarks",
            "--quick",
            "--trials",
            "0",
            "--out",
            "out",
        ],
        2,
        &["--trials", "at least 1", "(got 0)"],
    );
}

#[test]
fn latitude_first_target_is_asked_about_swapped_axes() {
    // The target holds the reference's landmarks in WGS 84, but latitude first: read as
    // (longitude, latitude) it lies near 47°E 46.9°N, far east of the reference, and the
    // message only said the surveys do not overlap.
    let site = Site::new();
    let (reference, _) = site.valid_pair();
    let to_ll = tiemark::frame::crs::Converter::new(
        &tiemark::frame::crs::Crs::parse("EPSG:32633", "test").unwrap(),
        &tiemark::frame::crs::Crs::parse("EPSG:4326", "test").unwrap(),
    )
    .unwrap();
    let r = reference_points();
    let rows: Vec<(String, String, String)> = r
        .iter()
        .enumerate()
        .map(|(i, &p)| {
            let q = to_ll.convert(p).unwrap();
            (
                format!("t{i}"),
                format!("{:.9}", q[1]),
                format!("{:.9}", q[0]),
            )
        })
        .collect();
    let target = site.write("lat-lon.csv", csv_text(&rows));
    site.expect_failure(
        &[
            "match",
            reference,
            target,
            "--target-crs",
            "EPSG:4326",
            "--out",
            "out",
        ],
        2,
        &[
            "do not overlap",
            "Are the axes swapped?",
            "target (lat-lon.csv) overlaps the reference once its x and y are swapped",
            "swap the x and y columns",
        ],
    );
}

#[test]
fn local_grid_of_an_unknown_unit() {
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    site.expect_failure(
        &[
            "match",
            reference,
            target,
            "--target-crs",
            "local:yd",
            "--out",
            "out",
        ],
        2,
        &[
            "'yd' is not a unit of a local grid",
            "local:us-ft",
            "local:ft",
        ],
    );
}

/// The reference landmarks of the valid pair in a local grid of `metres_per_unit`, at grid
/// scale factor `k` (reference metres per grid metre), turned 40° and with a false origin
/// (5000, 10000): grid = R(40°)(p − p₀) / (k·u) + (5000, 10000). Written with every digit.
fn local_grid_target(
    site: &Site,
    name: &'static str,
    metres_per_unit: f64,
    k: f64,
) -> &'static str {
    let r = reference_points();
    let (s, c) = 40f64.to_radians().sin_cos();
    let o = r[0];
    let rows: Vec<(String, String, String)> = r
        .iter()
        .enumerate()
        .map(|(i, p)| {
            let (x, y) = (p[0] - o[0], p[1] - o[1]);
            let f = 1.0 / (k * metres_per_unit);
            (
                format!("t{i}"),
                format!("{}", 5000.0 + f * (c * x - s * y)),
                format!("{}", 10000.0 + f * (s * x + c * y)),
            )
        })
        .collect();
    site.write(name, csv_text(&rows))
}

#[test]
fn local_grid_in_us_survey_feet_reports_its_scale_factor_apart_from_the_unit() {
    // A site grid in US survey feet (1200/3937 m) at a grid scale factor of 1 − 150 ppm: the
    // fitted scale is 0.3048006096 × 0.99985; with the unit declared, the report and
    // transform.json give the unit and the 150 ppm apart, to 0.1 ppm. The same grid declared
    // in international feet (0.3048 m) comes out 2 ppm higher, the difference of the two feet
    // ((1200/3937) / 0.3048 = 1 + 2.000004 ppm, computed).
    let us_ft = 1200.0 / 3937.0;
    let k = 1.0 - 150e-6;
    let site = Site::new();
    let (reference, _) = site.valid_pair();
    let target = local_grid_target(&site, "site-usft.csv", us_ft, k);
    let run = |unit: &str, out: &str| {
        let crs = format!("local:{unit}");
        let o = site.run(&[
            "match",
            reference,
            target,
            "--target-crs",
            &crs,
            "--out",
            out,
        ]);
        assert_eq!(o.code, Some(0), "{o:#?}");
        let doc: serde_json::Value = serde_json::from_str(
            &std::fs::read_to_string(site.path(out).join("transform.json")).unwrap(),
        )
        .unwrap();
        (o.stdout, doc)
    };
    let (report, doc) = run("us-ft", "out-us");
    let g = &doc["local_grid"];
    assert_eq!(g["unit"], "us-ft");
    assert_eq!(g["metres_per_unit"].as_f64(), Some(us_ft));
    let ppm = g["grid_scale_ppm"].as_f64().unwrap();
    assert!((ppm + 150.0).abs() < 0.1, "grid scale {ppm} ppm");
    let scale = doc["scale"].as_f64().unwrap();
    assert!((scale / (k * us_ft) - 1.0).abs() < 1e-7, "scale {scale}");
    assert!(
        report.contains("unit           US survey foot (1200/3937 m exactly)"),
        "{report}"
    );
    assert!(report.contains("-150.0"), "{report}");
    assert_eq!(doc["target_crs"]["unit"], "us-ft");

    // The GeoPackage's target layer, read back through GDAL: an engineering CRS in US feet.
    let ds = gdal::Dataset::open(site.path("out-us/control-points.gpkg")).unwrap();
    use gdal::vector::LayerAccess;
    let layer = ds.layer_by_name("target_points").unwrap();
    let srs = layer.spatial_ref().expect("a CRS");
    assert!(srs.is_local() && !srs.is_geographic(), "{:?}", srs.to_wkt());
    assert!(
        (srs.linear_units() - us_ft).abs() < 1e-12,
        "{}",
        srs.linear_units()
    );
    assert_eq!(srs.linear_units_name().as_deref(), Some("US survey foot"));
    assert_eq!(
        layer.feature_count(),
        doc["control_points"].as_u64().unwrap()
    );

    // Declared in international feet: 2 ppm higher.
    let (_, doc) = run("ft", "out-ft");
    let ppm_ft = doc["local_grid"]["grid_scale_ppm"].as_f64().unwrap();
    assert!((ppm_ft - ppm - 2.0).abs() < 0.01, "{ppm_ft} against {ppm}");

    // Undeclared: no split, and the layer is tagged "Undefined Cartesian", not geographic.
    let o = site.run(&[
        "match",
        reference,
        target,
        "--target-crs",
        "local",
        "--out",
        "out-none",
    ]);
    assert_eq!(o.code, Some(0), "{o:#?}");
    assert!(
        o.stdout.contains("grid scale     not separated"),
        "{}",
        o.stdout
    );
    let ds = gdal::Dataset::open(site.path("out-none/control-points.gpkg")).unwrap();
    let srs = ds
        .layer_by_name("target_points")
        .unwrap()
        .spatial_ref()
        .unwrap();
    assert!(srs.is_local(), "{:?}", srs.to_wkt());
    assert_eq!(srs.name().as_deref(), Some("Undefined Cartesian SRS"));
}
