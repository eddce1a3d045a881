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
