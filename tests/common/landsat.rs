//! The real image and the known georeferencing error shared by the raster tests: the Landsat 7
//! ETM+ scene that Debian's package r-cran-stars ships (USGS imagery, public domain; the
//! package is Apache-2.0; `stars/tif/L7_ETMs.tif`, 349 × 352 px of 28.5 m — see
//! tests/data/README.md; `bash .ci/setup` fetches it into `target/reference-data/`), and a
//! runner of the binary.

// Each test file that includes this module uses a part of it.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

/// The georeferencing error given to a target: scale 1 + 500 ppm, 1.5° counter-clockwise
/// about the image centre, then 47 m east-north-east (the size of the error issue 8's
/// feasibility check used).
pub const SCALE: f64 = 1.0 + 500e-6;
/// Its rotation, degrees counter-clockwise.
pub const ROTATION_DEG: f64 = 1.5;
/// Its shift, metres east and north.
pub const SHIFT: [f64; 2] = [28.2, 37.6];

/// The scene's path; a clear failure when `bash .ci/setup` has not fetched it.
pub fn landsat() -> PathBuf {
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("target/reference-data/L7_ETMs.tif");
    assert!(
        p.is_file(),
        "{} is missing: run `bash .ci/setup` (it fetches Debian's r-cran-stars and extracts the file)",
        p.display()
    );
    p
}

/// The error similarity (true map → the target's claimed map) about `centre`.
pub fn error(centre: [f64; 2], p: [f64; 2]) -> [f64; 2] {
    let (s, c) = ROTATION_DEG.to_radians().sin_cos();
    let (x, y) = (p[0] - centre[0], p[1] - centre[1]);
    [
        centre[0] + SCALE * (c * x - s * y) + SHIFT[0],
        centre[1] + SCALE * (s * x + c * y) + SHIFT[1],
    ]
}

/// The geotransform that `map` (an affine map of the ground, such as a similarity) makes of
/// `gt`: the claimed georeferencing of pixels whose true one is `gt`.
pub fn moved_geotransform(gt: [f64; 6], map: impl Fn([f64; 2]) -> [f64; 2]) -> [f64; 6] {
    let o = map([gt[0], gt[3]]);
    let ex = map([gt[0] + gt[1], gt[3] + gt[4]]);
    let ey = map([gt[0] + gt[2], gt[3] + gt[5]]);
    [
        o[0],
        ex[0] - o[0],
        ey[0] - o[0],
        o[1],
        ex[1] - o[1],
        ey[1] - o[1],
    ]
}

/// The geotransform `gt` with the error applied about `centre`: the target's claimed
/// georeferencing when its pixels are the true scene's.
pub fn with_error(gt: [f64; 6], centre: [f64; 2]) -> [f64; 6] {
    moved_geotransform(gt, |p| error(centre, p))
}

/// The scene's size in pixels (width, height).
pub const SIZE: (f64, f64) = (349.0, 352.0);

/// The similarity of a transform.json `t` (target map → reference map).
pub fn fitted(t: &serde_json::Value) -> impl Fn([f64; 2]) -> [f64; 2] {
    let f = |k: &str| t[k].as_f64().unwrap_or_else(|| panic!("{k} in {t}"));
    let (s, th, tx, ty) = (
        f("scale"),
        f("rotation_deg").to_radians(),
        f("translation_x"),
        f("translation_y"),
    );
    move |p: [f64; 2]| {
        [
            s * (th.cos() * p[0] - th.sin() * p[1]) + tx,
            s * (th.sin() * p[0] + th.cos() * p[1]) + ty,
        ]
    }
}

/// The worst distance, in pixels of the scene (geotransform `gt`, north-up), between where
/// transform.json `t` puts a target's four corners (their claimed positions, which the error
/// about the scene's centre gives) and where the truth puts them.
pub fn corner_error(t: &serde_json::Value, gt: &[f64; 6]) -> f64 {
    let fit = fitted(t);
    let (w, h) = SIZE;
    let centre = [gt[0] + gt[1] * w / 2.0, gt[3] + gt[5] * h / 2.0];
    let mut worst: f64 = 0.0;
    for (p, l) in [(0.0, 0.0), (w, 0.0), (0.0, h), (w, h)] {
        let truth = [gt[0] + gt[1] * p + gt[2] * l, gt[3] + gt[4] * p + gt[5] * l];
        let got = fit(error(centre, truth));
        worst = worst.max((got[0] - truth[0]).hypot(got[1] - truth[1]) / gt[1]);
    }
    worst
}

/// Runs the binary in `dir`: its exit code and stdout + stderr.
pub fn tiemark(dir: &Path, args: &[&str]) -> (Option<i32>, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_tiemark"))
        .args(args)
        .current_dir(dir)
        .output()
        .unwrap();
    (
        out.status.code(),
        format!(
            "{}{}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        ),
    )
}
