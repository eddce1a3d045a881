//! A pipeline over the five bundled sample epochs (sample-data/epochs.rs), like
//! pipelines/control-point-library.toml but writing into a folder of the test's.

use std::path::{Path, PathBuf};

/// Writes `library.toml` into `dir`: the five sample epochs (one in a local grid, ids in
/// `point`), tracks kept from `min_epochs` epochs, output folder `library` (beside the file).
/// Returns the file's path.
pub fn library_pipeline(dir: &Path, min_epochs: usize) -> PathBuf {
    let sample = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-data");
    let mut toml = String::new();
    for (stem, crs) in [
        ("epoch-2019", "EPSG:32633"),
        ("epoch-2021", "EPSG:32633"),
        ("epoch-2023", "EPSG:32633"),
        ("epoch-2024-site-grid", "local:m"),
        ("epoch-2026", "EPSG:32633"),
    ] {
        toml += &format!(
            "[[epoch]]\npath = {:?}\nid = \"point\"\ncrs = \"{crs}\"\n\n",
            sample.join(format!("{stem}.csv"))
        );
    }
    toml += &format!("[epochs]\nmin_epochs = {min_epochs}\n\n[output]\ndir = \"library\"\n");
    let pipeline = dir.join("library.toml");
    std::fs::write(&pipeline, toml).unwrap();
    pipeline
}
