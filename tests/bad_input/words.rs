//! One meaning per word: options whose names used to mean two things are refused with the
//! names that now say each (exit 2, nothing written, inputs untouched).

use super::*;

#[test]
fn the_retired_tolerance_flag_names_its_two_successors() {
    // `--tolerance` set both the radius of the search and the largest residual of a control
    // point; it is refused, naming the two flags that now set each.
    for value in ["2", "-1"] {
        Site::new().refuses_match(
            None,
            None,
            &["--tolerance", value],
            &[
                "--tolerance no longer exists",
                "--search-radius",
                "--max-residual",
                "the largest residual a control point may have",
            ],
        );
    }
}

#[test]
fn the_retired_tolerance_key_names_its_two_successors_with_its_line() {
    let site = Site::new();
    site.valid_pair();
    let text = "[reference]\npath = \"../reference.geojson\"\nid = \"name\"\n\n[target]\npath = \"../target.csv\"\ncrs = \"local\"\n\n[output]\ndir = \"out\"\n\n[fit]\ntolerance_m = 2.0\n";
    site.write("pipelines/p.toml", text);
    let line = text
        .lines()
        .position(|l| l.starts_with("tolerance_m"))
        .unwrap()
        + 1;
    site.expect_failure(
        &["run", "pipelines/p.toml"],
        2,
        &[
            "p.toml",
            &format!("line {line}"),
            "fit.tolerance_m no longer exists",
            "fit.search_radius_m",
            "fit.max_residual_m",
        ],
    );
    // Control: the two keys that replace it run.
    site.write(
        "pipelines/p.toml",
        text.replace(
            "tolerance_m = 2.0",
            "search_radius_m = 2.0\nmax_residual_m = 1.5",
        ),
    );
    let out = site.run(&["run", "pipelines/p.toml"]);
    assert_eq!(out.code, Some(0), "{out:#?}");
    let doc: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(site.path("pipelines/out/transform.json")).unwrap(),
    )
    .unwrap();
    assert_eq!(doc["thresholds"]["search_radius_m"], 2.0);
    assert_eq!(doc["thresholds"]["max_residual_m"], 1.5);
}

#[test]
fn a_thin_plate_spline_is_refused_for_a_vector_target_and_a_model_is_written_when_asked() {
    // tps warps a raster image through its control points; a vector target has no warp.
    let site = Site::new();
    site.refuses_match(
        None,
        None,
        &["--model", "tps"],
        &[
            "--model = tps",
            "target.csv",
            "is not a raster image",
            "polynomial2",
        ],
    );
    site.refuses_match(None, None, &["--model", "cubic"], &["--model", "cubic"]);
    // Control: the affine is written when asked for, its residuals in control-points.csv.
    let (r, t) = site.valid_pair();
    let out = site.run(&local_match(r, t, &["--model", "affine"]));
    assert_eq!(out.code, Some(0), "{out:#?}");
    assert!(out.stdout.contains("written: affine"), "{}", out.stdout);
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(site.path("out/transform.json")).unwrap())
            .unwrap();
    assert_eq!(doc["model"]["chosen"], "affine");
    assert_eq!(doc["model"]["residuals_of"], "affine");
    let affine = doc["model"]["fits"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["model"] == "affine")
        .unwrap();
    assert_eq!(affine["x_coefficients"].as_array().unwrap().len(), 3);
    let csv = std::fs::read_to_string(site.path("out/control-points.csv")).unwrap();
    let residuals: Vec<f64> = csv
        .lines()
        .skip(1)
        .map(|l| l.split(',').nth(6).unwrap().parse().unwrap())
        .collect();
    let rms = (residuals.iter().map(|r| r * r).sum::<f64>() / residuals.len() as f64).sqrt();
    let want = affine["rmse_m"].as_f64().unwrap();
    // The CSV rounds residuals to 0.1 mm.
    assert!(
        (rms - want).abs() < 1e-4,
        "CSV RMS {rms} m, affine {want} m"
    );
}
