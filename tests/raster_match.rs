//! Raster surveys end to end, through the binary, on a real image: two bands of a Landsat 7
//! ETM+ scene (USGS, public domain) as shipped by Debian's package r-cran-stars (Apache-2.0;
//! `stars/tif/L7_ETMs.tif`, 349 × 352 px of 28.5 m, SIRGAS 2000 / UTM 25S; see
//! tests/data/README.md — `bash .ci/setup` fetches it into `target/reference-data/`).
//!
//! The target is one band given a known georeferencing error (a similarity written into its
//! geotransform, so its pixels are the scene's own); the reference another band with the
//! true geotransform. `tiemark match` must find the error and, after refining every control
//! point on the pixels, map the target's corners to within 0.3 px of where the truth puts
//! them (the bar issue 8 sets). The same image against unrelated imagery in the same spot
//! must end with exit 1, no control points.

use gdal::raster::Buffer;
use gdal::{Dataset, DriverManager};
#[path = "common/landsat.rs"]
mod landsat;
use landsat::{landsat, tiemark};
use std::path::Path;

/// Writes band `band` of the scene (or its mirror image, left to right) as a one-band GeoTIFF,
/// with the true geotransform or the one the error makes. Returns the true geotransform.
fn write_band(band: usize, path: &Path, with_error: bool, mirrored: bool) -> [f64; 6] {
    let src = Dataset::open(landsat()).unwrap();
    let (w, h) = src.raster_size();
    let gt = src.geo_transform().unwrap();
    let b = src.rasterband(band).unwrap();
    let mut data: Buffer<u8> = b.read_as((0, 0), (w, h), (w, h), None).unwrap();
    if mirrored {
        for row in data.data_mut().chunks_mut(w) {
            row.reverse();
        }
    }
    let driver = DriverManager::get_driver_by_name("GTiff").unwrap();
    let mut out = driver
        .create_with_band_type::<u8, _>(path, w, h, 1)
        .unwrap();
    out.set_projection(&src.projection()).unwrap();
    let moved = if with_error {
        let centre = [
            gt[0] + gt[1] * w as f64 / 2.0,
            gt[3] + gt[5] * h as f64 / 2.0,
        ];
        landsat::with_error(gt, centre)
    } else {
        gt
    };
    out.set_geo_transform(&moved).unwrap();
    out.rasterband(1)
        .unwrap()
        .write((0, 0), (w, h), &mut data)
        .unwrap();
    gt
}

#[test]
fn two_bands_with_a_known_georeferencing_error_are_coregistered_within_a_third_of_a_pixel() {
    let dir = tempfile::tempdir().unwrap();
    let gt = write_band(3, &dir.path().join("red.tif"), false, false);
    write_band(2, &dir.path().join("green-moved.tif"), true, false);
    let (code, text) = tiemark(
        dir.path(),
        &[
            "match",
            "red.tif",
            "green-moved.tif",
            "--out",
            "out",
            "--warp",
        ],
    );
    assert_eq!(code, Some(0), "{text}");
    assert!(text.contains("on the pixels"), "{text}");
    // transform.json maps target coordinates onto reference coordinates; the truth is the
    // inverse of the error; corner_error compares both at the target image's corners.
    let (worst, t) = corner_error(&dir.path().join("out"), &gt);
    let (w, h) = (349.0, 352.0);
    eprintln!("{text}\nworst corner error {worst:.4} px");
    assert!(worst <= 0.3, "corner error {worst:.3} px\n{text}");
    // GDAL (the reference library) reads both VRTs: the GCP list, one GCP a control point, in
    // the reference's CRS; the corrected geotransform puts the corners where the truth does.
    let gcps = Dataset::open(dir.path().join("out/target-gcps.vrt")).unwrap();
    let control_points = t["control_points"].as_u64().unwrap() as usize;
    assert_eq!(gcps.gcps().len(), control_points);
    assert!(gcps.gcp_spatial_ref().is_some());
    // The control-point table says where each point is on the target's pixels and what the
    // refinement found there.
    let table = std::fs::read_to_string(dir.path().join("out/control-points.csv")).unwrap();
    let mut rows = table.lines();
    let header: Vec<&str> = rows.next().unwrap().split(',').collect();
    let col = |name: &str| header.iter().position(|h| *h == name).unwrap();
    let (cp, cl, cc) = (col("target_pixel"), col("target_line"), col("correlation"));
    let mut n = 0;
    for row in rows {
        let f: Vec<f64> = row.split(',').skip(2).map(|v| v.parse().unwrap()).collect();
        let (p, l, c) = (f[cp - 2], f[cl - 2], f[cc - 2]);
        assert!((0.0..=w).contains(&p) && (0.0..=h).contains(&l), "{row}");
        assert!(c > 0.0 && c <= 1.0, "{row}");
        n += 1;
    }
    assert_eq!(n, control_points);
    let warped = Dataset::open(dir.path().join("out/target-coregistered.tif")).unwrap();
    assert_eq!(warped.projection(), gcps.gcp_projection().unwrap());
    assert!((warped.geo_transform().unwrap()[1] - gt[1]).abs() < 1e-6 * gt[1]);
    let fixed = Dataset::open(dir.path().join("out/target-georeferenced.vrt"))
        .unwrap()
        .geo_transform()
        .unwrap();
    for (p, l) in [(0.0, 0.0), (w, 0.0), (0.0, h), (w, h)] {
        let truth = [gt[0] + gt[1] * p, gt[3] + gt[5] * l];
        let got = [
            fixed[0] + fixed[1] * p + fixed[2] * l,
            fixed[3] + fixed[4] * p + fixed[5] * l,
        ];
        let px = (got[0] - truth[0]).hypot(got[1] - truth[1]) / gt[1];
        assert!(
            px <= 0.3,
            "corrected geotransform off by {px:.3} px at ({p}, {l})"
        );
    }
}

/// transform.json in `out`, and the worst corner error it makes (pixels; see
/// [`landsat::corner_error`]).
fn corner_error(out: &Path, gt: &[f64; 6]) -> (f64, serde_json::Value) {
    let t: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("transform.json")).unwrap())
            .unwrap();
    (landsat::corner_error(&t, gt), t)
}

#[test]
fn red_against_near_infrared_with_a_known_error_is_coregistered_within_a_third_of_a_pixel() {
    // Band 3 (red) as the reference, band 4 (near infrared) with the 1.5° / 500 ppm / 47 m
    // error as the target: vegetation is dark in the red and bright in the near infrared, so
    // the contrast reverses over much of the scene and few keypoints recur; the area-based
    // seed must find the transform and the refinement make it sub-pixel.
    let dir = tempfile::tempdir().unwrap();
    let gt = write_band(3, &dir.path().join("red.tif"), false, false);
    write_band(4, &dir.path().join("nir-moved.tif"), true, false);
    let (code, text) = tiemark(
        dir.path(),
        &["match", "red.tif", "nir-moved.tif", "--out", "out"],
    );
    assert_eq!(code, Some(0), "{text}");
    let (worst, t) = corner_error(&dir.path().join("out"), &gt);
    eprintln!("{text}\nworst corner error {worst:.4} px");
    assert!(worst <= 0.3, "corner error {worst:.3} px\n{text}");
    // transform.json says whether the area-based seed ran and by which rule.
    let a = &t["area_seed"];
    assert!(
        a["rule"].as_str().unwrap().contains("keypoint match"),
        "{a}"
    );
    if a["ran"].as_bool().unwrap() {
        assert!(a["seeds"].as_array().is_some_and(|s| !s.is_empty()), "{a}");
        assert!(text.contains("area seed        ran because"), "{text}");
    }
}

#[test]
fn the_image_against_unrelated_imagery_in_the_same_spot_finds_no_transform() {
    // The scene mirrored left to right: the same kind of imagery, the same place, no
    // correspondence.
    let dir = tempfile::tempdir().unwrap();
    write_band(3, &dir.path().join("red.tif"), false, false);
    write_band(3, &dir.path().join("mirrored.tif"), false, true);
    let (code, text) = tiemark(
        dir.path(),
        &["match", "red.tif", "mirrored.tif", "--out", "out"],
    );
    assert_eq!(code, Some(1), "{text}");
    assert!(text.contains("No control points were written"), "{text}");
    assert!(!dir.path().join("out").exists(), "{text}");
    // The keypoints find nothing, so the area-based seed runs, and finds nothing either.
    assert!(text.contains("area seed        ran because"), "{text}");
}

#[test]
fn the_near_infrared_against_the_mirrored_red_finds_no_transform() {
    // Another band and a mirror image: nothing to find, by keypoints or by area.
    let dir = tempfile::tempdir().unwrap();
    write_band(3, &dir.path().join("red-mirrored.tif"), false, true);
    write_band(4, &dir.path().join("nir-moved.tif"), true, false);
    let (code, text) = tiemark(
        dir.path(),
        &["match", "red-mirrored.tif", "nir-moved.tif", "--out", "out"],
    );
    assert_eq!(code, Some(1), "{text}");
    assert!(text.contains("No control points were written"), "{text}");
    assert!(!dir.path().join("out").exists(), "{text}");
}

#[test]
fn the_warp_follows_the_model_asked_for() {
    // --model polynomial2 warps with the GCPs' second-order polynomial, --model tps with the
    // thin-plate spline; both write the co-registered image, and transform.json names the model
    // and gives the polynomial's coefficients.
    let dir = tempfile::tempdir().unwrap();
    write_band(3, &dir.path().join("red.tif"), false, false);
    write_band(2, &dir.path().join("green-moved.tif"), true, false);
    for (model, coefficients) in [("polynomial2", 6), ("tps", 0)] {
        let out = format!("out-{model}");
        let (code, text) = tiemark(
            dir.path(),
            &[
                "match",
                "red.tif",
                "green-moved.tif",
                "--out",
                &out,
                "--warp",
                "--model",
                model,
            ],
        );
        assert_eq!(code, Some(0), "{text}");
        assert!(text.contains(&format!("written: {model}")), "{text}");
        let t: serde_json::Value = serde_json::from_str(
            &std::fs::read_to_string(dir.path().join(&out).join("transform.json")).unwrap(),
        )
        .unwrap();
        assert_eq!(t["model"]["chosen"], model);
        let fit = t["model"]["fits"]
            .as_array()
            .unwrap()
            .iter()
            .find(|f| f["model"] == model);
        assert_eq!(
            fit.map_or(0, |f| f["x_coefficients"].as_array().unwrap().len()),
            coefficients
        );
        let warped = Dataset::open(dir.path().join(&out).join("target-coregistered.tif")).unwrap();
        assert!(warped.raster_size().0 > 100, "{model}");
    }
}

/// Writes a 400 × 400 px one-band GeoTIFF of 2 m pixels showing a square lattice of equal
/// blobs, 14 m apart, its top-left corner at `origin` (UTM 25S, as the Landsat scene).
fn write_lattice(path: &Path, origin: [f64; 2]) {
    let (w, h) = (400usize, 400usize);
    let gt = [origin[0], 2.0, 0.0, origin[1], 0.0, -2.0];
    let mut data = Vec::with_capacity(w * h);
    for l in 0..h {
        for p in 0..w {
            // Ground position of the pixel centre; the lattice is fixed on the ground.
            let (x, y) = (
                gt[0] + 2.0 * (p as f64 + 0.5),
                gt[3] - 2.0 * (l as f64 + 0.5),
            );
            let (u, v) = (x.rem_euclid(14.0) - 7.0, y.rem_euclid(14.0) - 7.0);
            data.push((40.0 + 180.0 * (-(u * u + v * v) / 8.0).exp()) as u8);
        }
    }
    let src = Dataset::open(landsat()).unwrap();
    let driver = DriverManager::get_driver_by_name("GTiff").unwrap();
    let mut out = driver
        .create_with_band_type::<u8, _>(path, w, h, 1)
        .unwrap();
    out.set_projection(&src.projection()).unwrap();
    out.set_geo_transform(&gt).unwrap();
    let mut buf = Buffer::new((w, h), data);
    out.rasterband(1)
        .unwrap()
        .write((0, 0), (w, h), &mut buf)
        .unwrap();
}

#[test]
fn a_periodic_lattice_is_not_matched_confidently() {
    // Two images of one lattice of equal blobs, the target's georeferencing 30 m off: every
    // shift by the lattice's period fits as well, so no transform may be accepted (exit 1),
    // whatever the keypoints or the area-based seed find.
    let dir = tempfile::tempdir().unwrap();
    let src = Dataset::open(landsat()).unwrap();
    let gt = src.geo_transform().unwrap();
    write_lattice(&dir.path().join("a.tif"), [gt[0], gt[3]]);
    write_lattice(&dir.path().join("b.tif"), [gt[0] + 100.0, gt[3] - 130.0]);
    // The second image claims its pixels are 30 m east of where they are.
    let b = Dataset::open(dir.path().join("b.tif")).unwrap();
    let mut bgt = b.geo_transform().unwrap();
    drop(b);
    bgt[0] += 30.0;
    let mut b = Dataset::open_ex(
        dir.path().join("b.tif"),
        gdal::DatasetOptions {
            open_flags: gdal::GdalOpenFlags::GDAL_OF_UPDATE,
            ..Default::default()
        },
    )
    .unwrap();
    b.set_geo_transform(&bgt).unwrap();
    drop(b);
    let (code, text) = tiemark(dir.path(), &["match", "a.tif", "b.tif", "--out", "out"]);
    assert_eq!(code, Some(1), "{text}");
    assert!(text.contains("No control points were written"), "{text}");
    assert!(!dir.path().join("out").exists(), "{text}");
    eprintln!("{text}");
}
