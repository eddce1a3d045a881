//! `tiemark epochs`: bad input is refused before any work, with the option or file and what
//! to do; exit 2, nothing written, inputs untouched.

use super::*;

/// Two valid epochs (the valid pair's surveys) and the arguments of an epochs run on them.
fn epochs_args<'a>(site: &Site, extra: &[&'a str]) -> Vec<&'a str> {
    let _ = site.valid_pair();
    let mut args = vec!["epochs", "reference.geojson", "target.csv"];
    args.extend_from_slice(extra);
    args.extend_from_slice(&["--out", "library"]);
    args
}

#[test]
fn fewer_than_two_epochs() {
    let site = Site::new();
    let _ = site.valid_pair();
    site.expect_failure(
        &["epochs", "reference.geojson", "--out", "library"],
        2,
        &["at least two epochs", "given 1"],
    );
}

#[test]
fn base_out_of_range() {
    let site = Site::new();
    for base in ["0", "3"] {
        site.expect_failure(
            &epochs_args(&site, &["--base", base]),
            2,
            &["--base", "out of range", "from 1", "to 2"],
        );
    }
}

#[test]
fn min_epochs_out_of_range_and_stability_not_positive() {
    let site = Site::new();
    site.expect_failure(
        &epochs_args(&site, &["--min-epochs", "3"]),
        2,
        &["--min-epochs = 3", "from 2"],
    );
    site.expect_failure(
        &epochs_args(&site, &["--stability", "-1"]),
        2,
        &["--stability = -1", "positive number of metres"],
    );
}

#[test]
fn the_same_file_twice() {
    let site = Site::new();
    let _ = site.valid_pair();
    site.expect_failure(
        &[
            "epochs",
            "reference.geojson",
            "target.csv",
            "./reference.geojson",
            "--out",
            "library",
        ],
        2,
        &["reference.geojson", "given twice", "epochs 1 and 3"],
    );
}

#[test]
fn an_epoch_without_a_crs_names_the_key_to_set() {
    // The CSV target has no CRS: on the command line it cannot be declared, so the message
    // says where (the epoch's crs in a pipeline file).
    let site = Site::new();
    site.expect_failure(
        &epochs_args(&site, &[]),
        2,
        &["epoch 2", "target.csv", "[[epoch]]"],
    );
}

#[test]
fn a_local_base_is_refused_in_a_pipeline_file() {
    let site = Site::new();
    let _ = site.valid_pair();
    site.write(
        "library.toml",
        "[[epoch]]\npath = \"target.csv\"\ncrs = \"local\"\n\n[[epoch]]\npath = \"reference.geojson\"\n\n[output]\ndir = \"library\"\n",
    );
    site.expect_failure(
        &["run", "library.toml"],
        2,
        &["target.csv", "base epoch is a local grid", "epochs.base"],
    );
}

#[test]
fn an_unknown_key_in_an_epoch_block() {
    let site = Site::new();
    let _ = site.valid_pair();
    site.write(
        "library.toml",
        "[[epoch]]\npath = \"reference.geojson\"\n\n[[epoch]]\npath = \"target.csv\"\ncrss = \"local\"\n\n[output]\ndir = \"library\"\n",
    );
    site.expect_failure(
        &["run", "library.toml"],
        2,
        &["library.toml", "line 6", "crss"],
    );
}

#[test]
fn the_output_onto_an_input() {
    let site = Site::new();
    let _ = site.valid_pair();
    site.expect_failure(
        &[
            "epochs",
            "reference.geojson",
            "target.csv",
            "--out",
            "reference.geojson",
        ],
        2,
        &["reference.geojson", "never writes onto its inputs"],
    );
}

#[test]
fn an_epoch_no_match_joins_exits_1_and_writes_nothing() {
    // The valid pair joins; a third epoch of unrelated random points cannot be joined to the
    // base: exit 1, the summary says which epoch and what to do, nothing written.
    let site = Site::new();
    let _ = site.valid_pair();
    let mut rng = Lcg(99);
    let rows: Vec<(String, String, String)> = (0..300)
        .map(|i| {
            (
                format!("u{i}"),
                format!("{:.3}", 5000.0 * rng.next()),
                format!("{:.3}", 5000.0 * rng.next()),
            )
        })
        .collect();
    site.write("unrelated.csv", csv_text(&rows));
    site.write(
        "library.toml",
        "[[epoch]]\npath = \"reference.geojson\"\n\n[[epoch]]\npath = \"target.csv\"\ncrs = \"local\"\n\n[[epoch]]\npath = \"unrelated.csv\"\ncrs = \"local\"\n\n[output]\ndir = \"library\"\n",
    );
    site.expect_failure(
        &["run", "library.toml"],
        1,
        &[
            "unrelated: NOT JOINED",
            "leave it out",
            "Nothing was written",
        ],
    );
}
