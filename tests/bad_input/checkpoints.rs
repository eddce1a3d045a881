//! The accuracy options: a checkpoints file (`--checkpoints`) that cannot be used, a hold-out
//! share (`--holdout`) out of range or too large, and both at once are each refused with the
//! file or option and what to do, nothing written, inputs untouched. Controls show that a good
//! checkpoints file and a hold-out share are used, and say so.

use super::*;

const HEADER: &str = "id,reference_x,reference_y,target_x,target_y\n";

/// Checkpoint rows (without the header) for `count` landmarks of the valid pair: the
/// reference position of `r<i>` and the target position of `t<i>`, ids `CP<i>`.
fn checkpoint_rows(count: usize) -> String {
    let r = reference_points();
    let (t, ids) = target_points();
    let mut s = String::new();
    for (p, id) in t.iter().zip(&ids).take(count) {
        let i: usize = id[1..].parse().unwrap();
        s.push_str(&format!(
            "CP{i},{},{},{},{}\n",
            r[i][0], r[i][1], p[0], p[1]
        ));
    }
    s
}

fn read_json(site: &Site, path: &str) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(site.path(path)).unwrap()).unwrap()
}

#[test]
fn checkpoints_file_is_used_and_said_to_be() {
    let site = Site::new();
    let (r, t) = site.valid_pair();
    let marks = site.write("marks.csv", format!("{HEADER}{}", checkpoint_rows(8)));
    let out = site.run(&local_match(r, t, &["--checkpoints", marks]));
    assert_eq!(out.code, Some(0), "{out:#?}");
    assert!(
        out.stdout
            .contains("accuracy         from independent checkpoints from marks.csv"),
        "{}",
        out.stdout
    );
    assert!(out
        .stdout
        .contains("only 8 points stand behind these figures"));
    let doc = read_json(&site, "out/transform.json");
    let a = &doc["accuracy"];
    assert_eq!(a["source"]["kind"], "checkpoints");
    assert_eq!(a["independent"], true);
    assert_eq!(a["n"], 8);
    assert_eq!(a["points"].as_array().unwrap().len(), 8);
    // The marks are landmarks of the two surveys, so they land within the fit's residuals.
    let rmse = a["rmse_r_m"].as_f64().unwrap();
    let tol = doc["thresholds"]["max_residual_m"].as_f64().unwrap();
    assert!(
        rmse < tol,
        "checkpoint RMSE {rmse} m, largest residual {tol} m"
    );
}

#[test]
fn holdout_keeps_a_seeded_share_out_of_the_fit() {
    let site = Site::new();
    let (r, t) = site.valid_pair();
    let run = |out: &str, seed: &str| {
        let o = site.run(&[
            "match",
            r,
            t,
            "--target-crs",
            "local",
            "--holdout",
            "0.25",
            "--seed",
            seed,
            "--out",
            out,
        ]);
        assert_eq!(o.code, Some(0), "{o:#?}");
        (o.stdout, read_json(&site, &format!("{out}/transform.json")))
    };
    let (report, doc) = run("a", "5");
    let a = &doc["accuracy"];
    assert_eq!(a["source"]["kind"], "holdout");
    assert_eq!(a["source"]["share"], 0.25);
    let held = a["points_total"].as_u64().unwrap();
    let fitted = doc["control_points"].as_u64().unwrap();
    let total = held + fitted;
    assert_eq!(held, (0.25 * total as f64).round() as u64);
    let line = report
        .lines()
        .find(|l| l.starts_with(&format!("control points   {fitted} (")))
        .unwrap_or_else(|| panic!("{report}"));
    assert!(
        line.ends_with(&format!("({held} more held out of the fit as checkpoints)")),
        "{report}"
    );
    let rows = std::fs::read_to_string(site.path("a/control-points.csv"))
        .unwrap()
        .lines()
        .count()
        - 1;
    assert_eq!(
        rows as u64, fitted,
        "the held-out points are not control points"
    );
    // Same seed, same split; another seed, another one.
    let (_, again) = run("b", "5");
    assert_eq!(again["accuracy"]["points"], a["points"]);
    let (_, other) = run("c", "6");
    assert_ne!(other["accuracy"]["points"], a["points"]);
}

#[test]
fn without_checkpoints_the_figure_is_leave_one_out() {
    let site = Site::new();
    let (r, t) = site.valid_pair();
    let out = site.run(&local_match(r, t, &[]));
    assert_eq!(out.code, Some(0), "{out:#?}");
    let doc = read_json(&site, "out/transform.json");
    let a = &doc["accuracy"];
    assert_eq!(a["source"]["kind"], "leave_one_out");
    assert_eq!(a["independent"], false);
    assert_eq!(a["n"], doc["control_points"]);
    // Each point left out of its own fit: larger than the fit's own residuals.
    assert!(a["rmse_r_m"].as_f64() > a["fit_residuals"]["rmse_r_m"].as_f64());
    assert!(out
        .stdout
        .contains("fit's own residuals overstate accuracy"));
    assert!(out.stdout.contains("--checkpoints"), "{}", out.stdout);
}

#[test]
fn missing_checkpoints_file() {
    Site::new().refuses_match(
        None,
        None,
        &["--checkpoints", "no-such-marks.csv"],
        &[
            "no-such-marks.csv",
            "cannot read the checkpoints file (--checkpoints)",
            "no such file",
            "id,reference_x,reference_y,target_x,target_y",
        ],
    );
}

#[test]
fn checkpoints_file_without_the_target_columns() {
    let site = Site::new();
    let marks = site.write(
        "marks.csv",
        "id,reference_x,reference_y\nA,500000,5200000\n",
    );
    site.refuses_match(
        None,
        None,
        &["--checkpoints", marks],
        &[
            "marks.csv",
            "no column target_x, target_y",
            "first line must name",
        ],
    );
}

#[test]
fn checkpoints_file_with_a_coordinate_that_is_not_a_number() {
    let site = Site::new();
    let marks = site.write(
        "marks.csv",
        format!("{HEADER}{}CPX,500010.5,52000x7,10,20\n", checkpoint_rows(2)),
    );
    site.refuses_match(
        None,
        None,
        &["--checkpoints", marks],
        &[
            "marks.csv, line 4",
            "reference_y is \"52000x7\"",
            "decimal number",
        ],
    );
}

#[test]
fn checkpoints_file_with_an_id_used_twice() {
    let site = Site::new();
    let rows = checkpoint_rows(3);
    let first = rows.lines().next().unwrap();
    let marks = site.write("marks.csv", format!("{HEADER}{rows}{first}\n"));
    site.refuses_match(
        None,
        None,
        &["--checkpoints", marks],
        &[
            "marks.csv, line 5",
            "is used again (first on line 2)",
            "unique id",
        ],
    );
}

#[test]
fn checkpoints_file_with_a_header_only() {
    let site = Site::new();
    let marks = site.write("marks.csv", HEADER);
    site.refuses_match(
        None,
        None,
        &["--checkpoints", marks],
        &["marks.csv", "no checkpoints", "one line per surveyed mark"],
    );
}

#[test]
fn checkpoints_file_that_is_not_text() {
    let site = Site::new();
    let marks = site.write(
        "marks.csv",
        b"id,reference_x\n\xff\xfe\x00\x01\n".as_slice(),
    );
    site.refuses_match(
        None,
        None,
        &["--checkpoints", marks],
        &["marks.csv", "not UTF-8 text (line 2)"],
    );
}

#[test]
fn checkpoints_and_holdout_together() {
    let site = Site::new();
    let marks = site.write("marks.csv", format!("{HEADER}{}", checkpoint_rows(3)));
    site.refuses_match(
        None,
        None,
        &["--checkpoints", marks, "--holdout", "0.2"],
        &["--checkpoints and --holdout exclude each other"],
    );
}

#[test]
fn holdout_share_out_of_range() {
    for share in ["1.5", "0", "-0.1", "NaN"] {
        Site::new().refuses_match(
            None,
            None,
            &["--holdout", share],
            &["--holdout must be a share between 0 and 1"],
        );
    }
}

#[test]
fn holdout_share_that_leaves_too_few_control_points() {
    Site::new().refuses_match(
        None,
        None,
        &["--holdout", "0.995"],
        &[
            "--holdout = 0.995 keeps",
            "fewer than --min-control-points (5)",
            "lower --holdout",
        ],
    );
}
