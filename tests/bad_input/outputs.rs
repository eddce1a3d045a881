//! Outputs: all or nothing, never onto what is there (issue 12). The output path is resolved
//! before it is checked, no run writes onto one of its inputs, a new output folder goes to one
//! run only, an interrupt leaves nothing, an unwritable output fails before any work, and
//! the GeoPackage is the same bytes every run.

use super::*;
use std::time::{Duration, Instant};

/// The test hook of `emit` (debug builds): the run writes this file once its staging folder
/// is being written and waits until the file is removed.
const PAUSE: &str = "TIEMARK_TEST_PAUSE_WHILE_STAGING";

/// The files of a match.
const FILES: [&str; 5] = [
    "control-points.csv",
    "control-points.gpkg",
    "transform.json",
    "report.txt",
    "report.html",
];

/// Starts tiemark in the site with the pause hook writing `flag`.
fn spawn_paused(site: &Site, args: &[&str], flag: &Path) -> std::process::Child {
    Command::new(env!("CARGO_BIN_EXE_tiemark"))
        .args(args)
        .current_dir(site.path(""))
        .env(PAUSE, flag)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the tiemark binary runs")
}

/// Waits (at most a minute) until `flag` exists: the run is writing its staging folder.
fn wait_for(flag: &Path, child: &mut std::process::Child) {
    let start = Instant::now();
    while !flag.exists() {
        if let Some(status) = child.try_wait().unwrap() {
            panic!("tiemark ended before staging: {status:?}");
        }
        assert!(start.elapsed() < Duration::from_secs(60), "no staging");
        std::thread::sleep(Duration::from_millis(10));
    }
}

fn finish(child: std::process::Child) -> Outcome {
    let out = child.wait_with_output().unwrap();
    Outcome {
        code: out.status.code(),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    }
}

/// The names in the site (at any depth) holding `tiemark-partial`, not what is inside them.
fn staging_in(site: &Site) -> Vec<PathBuf> {
    let all: Vec<PathBuf> = site
        .snapshot()
        .into_keys()
        .filter(|k| k.to_string_lossy().contains("tiemark-partial"))
        .collect();
    all.iter()
        .filter(|k| !all.iter().any(|o| o != *k && k.starts_with(o)))
        .cloned()
        .collect()
}

#[test]
fn dot_dot_after_a_new_name_is_the_folder_before_it() {
    // `--out A/new/..` is A. The check used to look at A/new/.. (which does not exist), find
    // nothing, and then write into A without --force.
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    site.write("A/keep.txt", "precious\n");
    site.write("A/report.txt", "the user's report\n");
    site.expect_failure(
        &[
            "match",
            reference,
            target,
            "--target-crs",
            "local",
            "--out",
            "A/new/..",
        ],
        2,
        &["A/new/..", "not empty", "--force"],
    );
    // Landmarks: the same path is a folder, not a file; no panic, nothing made.
    site.expect_failure(
        &["landmarks", reference, "--out", "newdir/.."],
        2,
        &["newdir/..", "is a folder", "give the name of a file"],
    );
    // A/new/../seen.csv is A/seen.csv: written there, and A/new is not made.
    let before = site.snapshot();
    let out = site.run(&["landmarks", reference, "--out", "A/new/../seen.csv"]);
    assert_eq!(out.code, Some(0), "{out:#?}");
    let mut after = site.snapshot();
    assert!(after.remove(Path::new("A/seen.csv")).is_some(), "{out:#?}");
    assert_eq!(after, before, "more than A/seen.csv written");
}

#[test]
fn no_panic_on_odd_output_paths() {
    // Every error in the output path is a message and exit 2.
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    site.write("file.txt", "a file\n");
    let before = site.snapshot();
    let refused = |args: &[&str]| {
        let out = site.run(args);
        assert_eq!(out.code, Some(2), "{args:?}: {out:#?}");
        assert!(
            out.stderr.starts_with("tiemark: error: "),
            "{args:?}: {out:#?}"
        );
        assert!(!out.stderr.contains("panicked"), "{args:?}: {out:#?}");
        assert_eq!(site.snapshot(), before, "{args:?} changed the site");
    };
    for out in ["newdir/..", "/", ".", "..", "seen.csv/", "file.txt/x.csv"] {
        refused(&["landmarks", reference, "--out", out]);
    }
    for out in ["/", ".", "newdir/..", "file.txt", "file.txt/sub"] {
        refused(&[
            "match",
            reference,
            target,
            "--target-crs",
            "local",
            "--out",
            out,
        ]);
    }
}

#[test]
fn landmarks_never_writes_onto_its_input() {
    // `landmarks IN --out IN --force` replaced the survey with what was read from it.
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    for input in [reference, target] {
        site.expect_failure(
            &["landmarks", input, "--out", input, "--force"],
            2,
            &[input, "is an input of this run", "choose another output"],
        );
        // The same file by another path.
        let other = format!("./sub/../{input}");
        site.expect_failure(
            &["landmarks", input, "--out", &other, "--force"],
            2,
            &["is an input of this run"],
        );
    }
    // A hard link to the input is the same file.
    std::fs::hard_link(site.path(target), site.path("linked.csv")).unwrap();
    site.expect_failure(
        &["landmarks", target, "--out", "linked.csv", "--force"],
        2,
        &["linked.csv", "is an input of this run"],
    );
}

#[test]
fn match_never_replaces_an_input_with_force() {
    // The target survey kept as out/control-points.csv: --force would replace it.
    let site = Site::new();
    let (reference, _) = site.valid_pair();
    let (t, ids) = target_points();
    let target = site.write("out/control-points.csv", csv_text(&csv_rows(&t, &ids)));
    site.expect_failure(
        &local_match(reference, target, &["--force"]),
        2,
        &["control-points.csv", "is an input of this run", target],
    );
    // The output folder is an input (a folder of Shapefile parts) or inside one.
    let r = reference_points();
    std::fs::create_dir(site.path("shp")).unwrap();
    write_with_gdal(
        "ESRI Shapefile",
        &site.path("shp/landmarks.shp"),
        &r,
        &reference_ids(r.len()),
    );
    for out in ["shp", "shp/results"] {
        site.expect_failure(
            &[
                "match",
                "shp",
                target,
                "--target-crs",
                "local",
                "--force",
                "--out",
                out,
            ],
            2,
            &[out, "is an input of this run", "shp"],
        );
    }
}

#[test]
fn run_never_replaces_its_pipeline_file() {
    // A pipeline file named report.txt in its output folder ("." is the pipeline's folder).
    let site = Site::new();
    site.valid_pair();
    let text = "[reference]\npath = \"../reference.geojson\"\nid = \"name\"\n\n[target]\npath = \"../target.csv\"\ncrs = \"local\"\n\n[output]\ndir = \".\"\nforce = true\n";
    site.write("pipelines/report.txt", text);
    site.expect_failure(
        &["run", "pipelines/report.txt"],
        2,
        &["report.txt", "is an input of this run"],
    );
}

#[test]
fn an_unwritable_output_fails_before_any_work() {
    // /proc takes no new folders: this used to fail after the whole match. Now it fails before
    // the inputs are even read (here the reference is missing and that is not what is said).
    let site = Site::new();
    let (_, target) = site.valid_pair();
    let start = Instant::now();
    site.expect_failure(
        &local_match("no-such-survey.geojson", target, &[])
            .into_iter()
            .map(|a| if a == "out" { "/proc/tiemark-out" } else { a })
            .collect::<Vec<_>>(),
        2,
        &["/proc/tiemark-out", "cannot be written", "/proc"],
    );
    assert!(start.elapsed() < Duration::from_secs(10));
    site.expect_failure(
        &["landmarks", target, "--out", "/proc/seen.csv"],
        2,
        &["/proc/seen.csv", "cannot be written"],
    );
}

#[test]
fn two_runs_on_one_new_folder_one_writes_the_other_refuses() {
    // Both find `out` new and stage; the first to finish makes it; the second used to find
    // the folder there and replace the first's files, both saying "written".
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    let flags = tempfile::tempdir().unwrap();
    let (fa, fb) = (flags.path().join("a"), flags.path().join("b"));
    let mut a = spawn_paused(
        &site,
        &local_match(reference, target, &["--seed", "11"]),
        &fa,
    );
    let mut b = spawn_paused(
        &site,
        &local_match(reference, target, &["--seed", "22"]),
        &fb,
    );
    wait_for(&fa, &mut a);
    wait_for(&fb, &mut b);
    assert!(!site.path("out").exists());
    std::fs::remove_file(&fa).unwrap();
    let a = finish(a);
    assert_eq!(a.code, Some(0), "{a:#?}");
    std::fs::remove_file(&fb).unwrap();
    let b = finish(b);
    assert_eq!(b.code, Some(2), "{b:#?}");
    assert!(b.stderr.contains("another run"), "{b:#?}");
    assert!(!b.stdout.contains("transform.json"), "{b:#?}");
    let t: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(site.path("out/transform.json")).unwrap())
            .unwrap();
    assert_eq!(
        t["seed"].as_u64(),
        Some(11),
        "the first run's files were replaced"
    );
    assert!(staging_in(&site).is_empty(), "{:?}", staging_in(&site));
}

/// Interrupts a match with `signal` while it writes its staging folder: exit 128 + the
/// signal's number, nothing written, no staging left, inputs unchanged.
fn interrupted(signal: &str, number: i32) {
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    let before = site.snapshot();
    let flags = tempfile::tempdir().unwrap();
    let flag = flags.path().join("staging");
    let mut child = spawn_paused(&site, &local_match(reference, target, &[]), &flag);
    wait_for(&flag, &mut child);
    let staged = staging_in(&site);
    assert_eq!(
        staged.len(),
        1,
        "not writing its staging folder: {staged:?}"
    );
    let kill = Command::new("kill")
        .args(["-s", signal, &child.id().to_string()])
        .status()
        .unwrap();
    assert!(kill.success());
    let out = finish(child);
    assert_eq!(out.code, Some(128 + number), "{signal}: {out:#?}");
    assert!(
        out.stderr.contains(&format!("stopped by {signal}")),
        "{out:#?}"
    );
    assert_eq!(site.snapshot(), before, "{signal}: the site changed");
}

#[test]
fn an_interrupt_while_writing_leaves_nothing() {
    // The staging folder (up to 156 MB for a large match) used to stay, named by the PID.
    for (signal, number) in [("INT", 2), ("TERM", 15), ("HUP", 1)] {
        interrupted(&format!("SIG{signal}"), number);
    }
}

#[test]
fn staging_left_by_a_killed_run_is_cleared_by_the_next() {
    // kill -9 cannot be caught: its staging folder stays until the next run stages beside it.
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    let before = site.snapshot();
    let flags = tempfile::tempdir().unwrap();
    let flag = flags.path().join("staging");
    let mut child = spawn_paused(&site, &local_match(reference, target, &[]), &flag);
    wait_for(&flag, &mut child);
    child.kill().unwrap();
    child.wait().unwrap();
    assert_eq!(staging_in(&site).len(), 1);
    let out = site.run(&[
        "match",
        reference,
        target,
        "--target-crs",
        "local",
        "--out",
        "other",
    ]);
    assert_eq!(out.code, Some(0), "{out:#?}");
    assert!(staging_in(&site).is_empty(), "{:?}", staging_in(&site));
    let mut after = site.snapshot();
    after.retain(|k, _| !k.starts_with("other"));
    assert_eq!(after, before);
}

#[test]
fn the_geopackage_is_the_same_bytes_every_run() {
    // Only its timestamps (gpkg_contents.last_change, metadata) used to differ.
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    for out in ["one", "two"] {
        let run = site.run(&[
            "match",
            reference,
            target,
            "--target-crs",
            "local",
            "--out",
            out,
        ]);
        assert_eq!(run.code, Some(0), "{run:#?}");
        let run = site.run(&["landmarks", reference, "--out", &format!("{out}.gpkg")]);
        assert_eq!(run.code, Some(0), "{run:#?}");
        // At least a second apart, so that a clock in the file would show.
        std::thread::sleep(Duration::from_millis(1100));
    }
    for f in FILES {
        let (a, b) = (
            std::fs::read(site.path("one").join(f)).unwrap(),
            std::fs::read(site.path("two").join(f)).unwrap(),
        );
        assert!(a == b, "{f} differs between two runs");
    }
    assert!(
        std::fs::read(site.path("one.gpkg")).unwrap()
            == std::fs::read(site.path("two.gpkg")).unwrap(),
        "landmarks .gpkg differs between two runs"
    );
}

#[test]
fn forced_replacement_keeps_every_other_file_and_writes_all_four() {
    // --force into a folder of an earlier run's files and the user's: all four replaced.
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    for f in FILES {
        site.write(&format!("out/{f}"), format!("previous {f}\n"));
    }
    site.write("out/keep.txt", "precious\n");
    let out = site.run(&local_match(reference, target, &["--force"]));
    assert_eq!(out.code, Some(0), "{out:#?}");
    for f in FILES {
        let now = std::fs::read(site.path("out").join(f)).unwrap();
        assert_ne!(now, format!("previous {f}\n").into_bytes(), "{f}");
    }
    assert_eq!(
        std::fs::read_to_string(site.path("out/keep.txt")).unwrap(),
        "precious\n"
    );
    assert!(staging_in(&site).is_empty());
}

#[cfg(feature = "experiments")]
#[test]
fn experiment_output_follows_the_rule_of_match() {
    // `experiment … --out DIR` replaced its files in any folder.
    let site = Site::new();
    site.write("A/retrieval.csv", "the user's table\n");
    site.expect_failure(
        &["experiment", "retrieval", "--quick", "--out", "A"],
        2,
        &["A", "not empty", "--force"],
    );
    site.expect_failure(
        &["experiment", "retrieval", "--quick", "--out", "/proc/x"],
        2,
        &["/proc/x", "cannot be written"],
    );
}
