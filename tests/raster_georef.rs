//! Rasters that are not on a projected map grid, co-registered end to end through the binary:
//! an image in a geographic CRS (longitude/latitude, as drone mosaics are often exported) and
//! images georeferenced by ground control points only (as scanned or older images often are).
//!
//! The real image is the Landsat 7 ETM+ scene of tests/common/landsat.rs (USGS, public domain,
//! as shipped by Debian's r-cran-stars, Apache-2.0; 349 × 352 px of 28.5 m, SIRGAS 2000 / UTM
//! 25S). The reference is its band 3 with the true geotransform. Each target is band 2 given
//! the known georeferencing error of tests/common/landsat.rs (1.5°, 500 ppm, 47 m):
//! - warped by GDAL's warp API (`gdal::raster::reproject`) onto a WGS 84 longitude/latitude
//!   grid from a copy whose geotransform carries the error;
//! - the scene's own pixels with no geotransform and a 5 × 5 grid of GCPs placed by the error
//!   (a first-order fit of them is exact, so it becomes the geotransform);
//! - the same with a quadratic bend of up to half a pixel added to the GCPs (no affine fits
//!   them within a tenth of a pixel, so the image is read through the warp of their
//!   second-order polynomial; there only the GCPs are checked, the transform being bent).
//!
//! Checks: the transform `transform.json` states maps the target's corners to within 0.3 px of
//! where the truth puts them (the bar of issue 8, as in tests/raster_match.rs), and the GCPs
//! of `target-gcps.vrt` give pixel/line of the target FILE: a least-squares first-order fit of
//! them (what `gdalwarp -order 1` does with the file) puts the file's corners within 0.3 px of
//! the truth too. Had the GCPs carried pixel/line of the warped view instead, the corners would
//! be off by many pixels (the view is another grid).
//!
//! Also: when the area-based seed matches (band 4 against band 3, where the keypoints do not
//! recur), the report's target line says its grid control points replace the detected
//! keypoints, and the corners are still within 0.3 px.

use gdal::raster::Buffer;
use gdal::spatial_ref::SpatialRef;
use gdal::{Dataset, DriverManager, Gcp};
#[path = "common/landsat.rs"]
mod landsat;
use landsat::{corner_error, landsat, tiemark, with_error, ROTATION_DEG, SCALE, SHIFT};
use std::path::Path;
use tiemark::frame::crs::{Converter, Crs};

/// The scene's size, columns and rows.
const W: f64 = 349.0;
/// See [`W`].
const H: f64 = 352.0;
/// The co-registration bar at the image corners, pixels of 28.5 m (issue 8).
const CORNER_PX: f64 = 0.3;

/// The scene's band `band` as bytes, its geotransform and its CRS (WKT).
fn band(band: usize) -> (Vec<u8>, [f64; 6], String) {
    let src = Dataset::open(landsat()).unwrap();
    let (w, h) = src.raster_size();
    let data: Buffer<u8> = src
        .rasterband(band)
        .unwrap()
        .read_as((0, 0), (w, h), (w, h), None)
        .unwrap();
    (
        data.data().to_vec(),
        src.geo_transform().unwrap(),
        src.projection(),
    )
}

/// The true centre of the scene, about which the error turns and scales it.
fn centre(gt: &[f64; 6]) -> [f64; 2] {
    [gt[0] + gt[1] * W / 2.0, gt[3] + gt[5] * H / 2.0]
}

/// Where the truth puts pixel/line (p, l) of the scene.
fn true_map(gt: &[f64; 6], p: f64, l: f64) -> [f64; 2] {
    [gt[0] + gt[1] * p + gt[2] * l, gt[3] + gt[4] * p + gt[5] * l]
}

/// The inverse of the error: the true position of a claimed one.
fn truth_of(centre: [f64; 2], claimed: [f64; 2]) -> [f64; 2] {
    let (s, c) = ROTATION_DEG.to_radians().sin_cos();
    let (x, y) = (
        (claimed[0] - SHIFT[0] - centre[0]) / SCALE,
        (claimed[1] - SHIFT[1] - centre[1]) / SCALE,
    );
    [centre[0] + c * x + s * y, centre[1] - s * x + c * y]
}

/// Writes `data` (349 × 352 bytes) as a one-band dataset of `driver` at `path`, with the
/// geotransform and CRS given (or none).
fn write(
    driver: &str,
    path: &Path,
    data: &[u8],
    gt: Option<[f64; 6]>,
    wkt: Option<&str>,
) -> Dataset {
    let (w, h) = (W as usize, H as usize);
    let mut ds = DriverManager::get_driver_by_name(driver)
        .unwrap()
        .create_with_band_type::<u8, _>(path, w, h, 1)
        .unwrap();
    if let Some(g) = gt {
        ds.set_geo_transform(&g).unwrap();
    }
    if let Some(w) = wkt {
        ds.set_projection(w).unwrap();
    }
    let mut buffer = Buffer::new((w, h), data.to_vec());
    ds.rasterband(1)
        .unwrap()
        .write((0, 0), (w, h), &mut buffer)
        .unwrap();
    ds
}

/// The reference: band 3 with the true geotransform, as `red.tif` in `dir`. Returns the true
/// geotransform and the CRS.
fn write_reference(dir: &Path) -> ([f64; 6], String) {
    let (red, gt, wkt) = band(3);
    drop(write(
        "GTiff",
        &dir.join("red.tif"),
        &red,
        Some(gt),
        Some(&wkt),
    ));
    (gt, wkt)
}

/// Runs `tiemark match red.tif TARGET --out out` in `dir` (plus `extra`); the report text and
/// transform.json.
fn run_match(dir: &Path, target: &str, extra: &[&str]) -> (String, serde_json::Value) {
    let mut args = vec!["match", "red.tif", target, "--out", "out"];
    args.extend_from_slice(extra);
    let (code, text) = tiemark(dir, &args);
    assert_eq!(code, Some(0), "{text}");
    let t: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("out/transform.json")).unwrap())
            .unwrap();
    (text, t)
}

/// The least-squares affine through the GCPs of `vrt` (pixel/line → x, y), as six terms in
/// GDAL's order, and the GCP count.
fn gcp_affine(vrt: &Path) -> ([f64; 6], usize) {
    let ds = Dataset::open(vrt).unwrap();
    let gcps = ds.gcps();
    // Normal equations of x = a0 + a1 p + a2 l (and the same for y), centred for conditioning.
    let n = gcps.len() as f64;
    let (mp, ml) = (
        gcps.iter().map(|g| g.pixel()).sum::<f64>() / n,
        gcps.iter().map(|g| g.line()).sum::<f64>() / n,
    );
    let (mut spp, mut spl, mut sll) = (0.0, 0.0, 0.0);
    let (mut sxp, mut sxl, mut syp, mut syl, mut sx, mut sy) = (0.0, 0.0, 0.0, 0.0, 0.0, 0.0);
    for g in gcps {
        let (p, l) = (g.pixel() - mp, g.line() - ml);
        spp += p * p;
        spl += p * l;
        sll += l * l;
        sxp += g.x() * p;
        sxl += g.x() * l;
        syp += g.y() * p;
        syl += g.y() * l;
        sx += g.x();
        sy += g.y();
    }
    let det = spp * sll - spl * spl;
    let solve = |bp: f64, bl: f64| ((bp * sll - bl * spl) / det, (spp * bl - spl * bp) / det);
    let (x1, x2) = solve(sxp, sxl);
    let (y1, y2) = solve(syp, syl);
    let (x0, y0) = (sx / n - x1 * mp - x2 * ml, sy / n - y1 * mp - y2 * ml);
    ([x0, x1, x2, y0, y1, y2], gcps.len())
}

/// The worst distance, pixels of 28.5 m, between where `affine` (the target file's pixel/line
/// → reference map) puts the target file's pixel/line corners and where `truth` does.
fn affine_corner_error(
    affine: &[f64; 6],
    size: (f64, f64),
    truth: impl Fn(f64, f64) -> [f64; 2],
) -> f64 {
    let mut worst: f64 = 0.0;
    for (p, l) in [(0.0, 0.0), (size.0, 0.0), (0.0, size.1), size] {
        let got = true_map(affine, p, l);
        let want = truth(p, l);
        worst = worst.max((got[0] - want[0]).hypot(got[1] - want[1]) / 28.5);
    }
    worst
}

#[test]
fn a_target_in_longitude_latitude_is_coregistered_and_its_gcps_name_the_file_pixels() {
    let dir = tempfile::tempdir().unwrap();
    let (gt, wkt) = write_reference(dir.path());
    // Band 2 with the error in its geotransform, warped by GDAL onto a WGS 84 lon/lat grid of
    // square pixels of 28.5 m of latitude (1° of latitude ≈ 111.32 km, from memory), which
    // covers the whole moved scene.
    let (green, _, _) = band(2);
    let moved_src = write(
        "MEM",
        Path::new(""),
        &green,
        Some(with_error(gt, centre(&gt))),
        Some(&wkt),
    );
    let utm = Crs::parse(&wkt, "scene").unwrap();
    let lonlat = Crs::parse("EPSG:4326", "lon/lat").unwrap();
    let to_ll = Converter::new(&utm, &lonlat).unwrap();
    let to_utm = Converter::new(&lonlat, &utm).unwrap();
    let m = with_error(gt, centre(&gt));
    let corners: Vec<[f64; 2]> = [(0.0, 0.0), (W, 0.0), (0.0, H), (W, H)]
        .iter()
        .map(|&(p, l)| to_ll.convert(true_map(&m, p, l)).unwrap())
        .collect();
    let d = 28.5 / 111_320.0;
    let lon0 = corners.iter().map(|c| c[0]).fold(f64::INFINITY, f64::min) - d;
    let lon1 = corners
        .iter()
        .map(|c| c[0])
        .fold(f64::NEG_INFINITY, f64::max)
        + d;
    let lat0 = corners.iter().map(|c| c[1]).fold(f64::INFINITY, f64::min) - d;
    let lat1 = corners
        .iter()
        .map(|c| c[1])
        .fold(f64::NEG_INFINITY, f64::max)
        + d;
    let (gw, gh) = (
        ((lon1 - lon0) / d).ceil() as usize,
        ((lat1 - lat0) / d).ceil() as usize,
    );
    let geo_gt = [lon0, d, 0.0, lat1, 0.0, -d];
    {
        let mut geo = DriverManager::get_driver_by_name("GTiff")
            .unwrap()
            .create_with_band_type::<u8, _>(dir.path().join("green-lonlat.tif"), gw, gh, 1)
            .unwrap();
        geo.set_geo_transform(&geo_gt).unwrap();
        let mut srs = SpatialRef::from_epsg(4326).unwrap();
        srs.set_axis_mapping_strategy(gdal::spatial_ref::AxisMappingStrategy::TraditionalGisOrder);
        geo.set_spatial_ref(&srs).unwrap();
        // Outside the moved scene is no-data.
        geo.rasterband(1)
            .unwrap()
            .set_no_data_value(Some(0.0))
            .unwrap();
        gdal::raster::reproject(&moved_src, &geo).unwrap();
    }
    let (text, t) = run_match(dir.path(), "green-lonlat.tif", &["--warp"]);
    // The log says how the target was read.
    assert!(
        text.contains("read through a warped view on SIRGAS 2000 / UTM zone 25S")
            && text.contains("its CRS is geographic"),
        "{text}"
    );
    let worst = corner_error(&t, &gt);
    eprintln!("{text}\nworst corner error {worst:.4} px");
    assert!(worst <= CORNER_PX, "corner error {worst:.3} px\n{text}");
    // The GCPs carry pixel/line of green-lonlat.tif itself: their first-order fit (as
    // gdalwarp -order 1 makes it of that file) puts its corners where the truth does.
    let (affine, count) = gcp_affine(&dir.path().join("out/target-gcps.vrt"));
    assert_eq!(count as u64, t["control_points"].as_u64().unwrap());
    let c = centre(&gt);
    let truth = |p: f64, l: f64| {
        let ll = true_map(&geo_gt, p, l);
        truth_of(c, to_utm.convert(ll).unwrap())
    };
    let gcp_worst = affine_corner_error(&affine, (gw as f64, gh as f64), truth);
    eprintln!("GCP first-order fit: worst corner error {gcp_worst:.4} px");
    assert!(gcp_worst <= CORNER_PX, "GCP fit off by {gcp_worst:.3} px");
    // A warp of the file through those GCPs lands on the reference's grid; no corrected
    // geotransform is offered, since the file's own pixels are not on the view's grid.
    let warped = Dataset::open(dir.path().join("out/target-coregistered.tif")).unwrap();
    assert!((warped.geo_transform().unwrap()[1] - gt[1]).abs() < 1e-6 * gt[1]);
    assert!(!dir.path().join("out/target-georeferenced.vrt").exists());
    // Every control point's pixel/line in control-points.csv is inside the file.
    let table = std::fs::read_to_string(dir.path().join("out/control-points.csv")).unwrap();
    let mut rows = table.lines();
    let header: Vec<&str> = rows.next().unwrap().split(',').collect();
    let col = |name: &str| header.iter().position(|h| *h == name).unwrap();
    let (cp, cl) = (col("target_pixel"), col("target_line"));
    for row in rows {
        let f: Vec<&str> = row.split(',').collect();
        let (p, l): (f64, f64) = (f[cp].parse().unwrap(), f[cl].parse().unwrap());
        assert!(
            (0.0..=gw as f64).contains(&p) && (0.0..=gh as f64).contains(&l),
            "{row}"
        );
    }
}

/// Writes band 2 as `name` in `dir` with no geotransform and GCPs on a 5 × 5 grid of its
/// pixels, placed where the error puts them, plus `bend(p, l)` (map units) — in the scene's
/// CRS.
fn write_gcp_target(
    dir: &Path,
    name: &str,
    gt: &[f64; 6],
    wkt: &str,
    bend: impl Fn(f64, f64) -> [f64; 2],
) {
    let (green, _, _) = band(2);
    let ds = write("GTiff", &dir.join(name), &green, None, None);
    let m = with_error(*gt, centre(gt));
    let mut gcps = Vec::new();
    for j in 0..5 {
        for i in 0..5 {
            let (p, l) = (W * f64::from(i) / 4.0, H * f64::from(j) / 4.0);
            let [x, y] = true_map(&m, p, l);
            let [bx, by] = bend(p, l);
            gcps.push(Gcp {
                id: format!("g{}", gcps.len() + 1),
                info: String::new(),
                pixel: p,
                line: l,
                x: x + bx,
                y: y + by,
                z: 0.0,
            });
        }
    }
    ds.set_gcps(gcps, &SpatialRef::from_wkt(wkt).unwrap())
        .unwrap();
}

#[test]
fn a_target_with_gcps_that_an_affine_fits_is_read_by_that_affine() {
    let dir = tempfile::tempdir().unwrap();
    let (gt, wkt) = write_reference(dir.path());
    write_gcp_target(dir.path(), "green-gcps.tif", &gt, &wkt, |_, _| [0.0, 0.0]);
    let (text, t) = run_match(dir.path(), "green-gcps.tif", &[]);
    // The log says the GCPs' affine is the geotransform.
    assert!(
        text.contains("georeferenced by the first-order (affine) fit of its 25 GCPs"),
        "{text}"
    );
    let worst = corner_error(&t, &gt);
    eprintln!("{text}\nworst corner error {worst:.4} px");
    assert!(worst <= CORNER_PX, "corner error {worst:.3} px\n{text}");
    // The file's pixels are on that affine: the corrected geotransform applies to the file.
    let fixed = Dataset::open(dir.path().join("out/target-georeferenced.vrt"))
        .unwrap()
        .geo_transform()
        .unwrap();
    let got = affine_corner_error(&fixed, (W, H), |p, l| true_map(&gt, p, l));
    assert!(
        got <= CORNER_PX,
        "corrected geotransform off by {got:.3} px"
    );
    let (affine, _) = gcp_affine(&dir.path().join("out/target-gcps.vrt"));
    let gcp_worst = affine_corner_error(&affine, (W, H), |p, l| true_map(&gt, p, l));
    assert!(gcp_worst <= CORNER_PX, "GCP fit off by {gcp_worst:.3} px");
}

#[test]
fn a_target_with_bent_gcps_is_read_through_their_polynomial_and_its_gcps_name_the_file_pixels() {
    let dir = tempfile::tempdir().unwrap();
    let (gt, wkt) = write_reference(dir.path());
    // Half a pixel of quadratic bend across the image, east-west, growing with the line: no
    // affine fits it within a tenth of a pixel, a second-order polynomial fits it exactly.
    let k = 0.5 * 28.5 / (H / 2.0).powi(2);
    write_gcp_target(dir.path(), "green-bent.tif", &gt, &wkt, |_, l| {
        [k * (l - H / 2.0).powi(2), 0.0]
    });
    let (text, t) = run_match(dir.path(), "green-bent.tif", &[]);
    assert!(
        text.contains("warped through the second-order polynomial of its 25 GCPs")
            && text.contains("read through a warped view on SIRGAS 2000 / UTM zone 25S"),
        "{text}"
    );
    assert!(t["control_points"].as_u64().unwrap() >= 10, "{t}");
    // The bend is in the GCPs, not in the pixels: the file's pixels are the scene's own, so the
    // GCPs the match writes (file pixel/line → reference) must follow the true geotransform.
    let (affine, _) = gcp_affine(&dir.path().join("out/target-gcps.vrt"));
    let gcp_worst = affine_corner_error(&affine, (W, H), |p, l| true_map(&gt, p, l));
    eprintln!("{text}\nGCP first-order fit: worst corner error {gcp_worst:.4} px");
    // (The view is bent against the truth, but a control point's target pixel is where the
    // correlation finds the reference's content in the view, taken back to the file: the
    // content's own pixel of the file, whatever the bend. So the corner bar applies.)
    assert!(gcp_worst <= CORNER_PX, "GCP fit off by {gcp_worst:.3} px");
}

#[test]
fn grid_control_points_of_the_area_based_seed_say_what_they_replace() {
    // Band 4 (near infrared) with the error against band 3 (red): the keypoints do not recur
    // (tests/raster_match.rs), the area-based seed's grid points become the target's
    // landmarks, and the report says how many detected keypoints they replace.
    let dir = tempfile::tempdir().unwrap();
    let (gt, wkt) = write_reference(dir.path());
    let (nir, _, _) = band(4);
    drop(write(
        "GTiff",
        &dir.path().join("nir-moved.tif"),
        &nir,
        Some(with_error(gt, centre(&gt))),
        Some(&wkt),
    ));
    let (text, t) = run_match(dir.path(), "nir-moved.tif", &[]);
    // On this scene the keypoint match finds no transform (seen with the default options,
    // which are seeded), so the seed runs.
    assert!(t["area_seed"]["ran"].as_bool().unwrap(), "{text}");
    let line = text
        .lines()
        .find(|l| l.starts_with("target "))
        .unwrap_or_else(|| panic!("{text}"));
    assert!(
        line.contains("grid control points of the area-based seed, in place of the ")
            && line.contains(" keypoints of band 1"),
        "{line}"
    );
    assert!(corner_error(&t, &gt) <= CORNER_PX, "{text}");
}
