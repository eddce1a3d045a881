//! Raster surveys that cannot be matched: each is refused before any work, with the file and
//! what to do, and nothing is written.

use super::*;
use gdal::raster::Buffer;
use gdal::Dataset;

/// Writes a one-band 64 × 48 GeoTIFF of `pixels` (row-major) with `geotransform` (or none)
/// and the CRS of EPSG `epsg` (or none).
fn write_tif(
    site: &Site,
    name: &'static str,
    pixels: Vec<u8>,
    geotransform: Option<[f64; 6]>,
    epsg: Option<u32>,
) -> Dataset {
    let driver = DriverManager::get_driver_by_name("GTiff").unwrap();
    let mut ds = driver
        .create_with_band_type::<u8, _>(site.path(name), 64, 48, 1)
        .unwrap();
    if let Some(gt) = geotransform {
        ds.set_geo_transform(&gt).unwrap();
    }
    if let Some(code) = epsg {
        ds.set_spatial_ref(&SpatialRef::from_epsg(code).unwrap())
            .unwrap();
    }
    let mut buffer = Buffer::new((64, 48), pixels);
    ds.rasterband(1)
        .unwrap()
        .write((0, 0), (64, 48), &mut buffer)
        .unwrap();
    ds
}

/// A seeded pattern of bright and dark dots, so that a detector has something to find.
fn dots() -> Vec<u8> {
    let mut rng = Lcg(7);
    let mut px = vec![128u8; 64 * 48];
    for _ in 0..40 {
        let (c, r) = (
            (rng.next() * 60.0) as usize + 2,
            (rng.next() * 44.0) as usize + 2,
        );
        let v = if rng.next() < 0.5 { 20 } else { 235 };
        for (dc, dr) in [(0, 0), (1, 0), (0, 1), (1, 1)] {
            px[(r + dr) * 64 + c + dc] = v;
        }
    }
    px
}

const UTM_GT: [f64; 6] = [455_000.0, 2.0, 0.0, 5_211_000.0, 0.0, -2.0];

#[test]
fn raster_band_that_does_not_exist() {
    let site = Site::new();
    drop(write_tif(
        &site,
        "one-band.tif",
        dots(),
        Some(UTM_GT),
        Some(32633),
    ));
    site.refuses_match(
        Some("one-band.tif"),
        None,
        &["--reference-band", "3"],
        &["one-band.tif", "has no band 3", "1 band(s)"],
    );
}

#[test]
fn raster_with_nothing_to_find() {
    // A constant image has no keypoints: too few landmarks, said of the file.
    let site = Site::new();
    drop(write_tif(
        &site,
        "flat.tif",
        vec![90; 64 * 48],
        Some(UTM_GT),
        Some(32633),
    ));
    site.refuses_match(Some("flat.tif"), None, &[], &["flat.tif", "landmark"]);
}

#[test]
fn feature_size_below_the_pixels() {
    let site = Site::new();
    drop(write_tif(
        &site,
        "coarse.tif",
        dots(),
        Some(UTM_GT),
        Some(32633),
    ));
    site.refuses_match(
        Some("coarse.tif"),
        None,
        &["--feature-size", "0.5"],
        &[
            "coarse.tif",
            "too small for pixels of 2 m",
            "--feature-size of at least",
        ],
    );
}

#[test]
fn raster_that_is_no_data_everywhere() {
    // Every pixel equals the band's no-data value: the image has no footprint at all. It must
    // be said of the file (not "no keypoints" as if the image were merely flat).
    let site = Site::new();
    let ds = write_tif(&site, "empty.tif", dots(), Some(UTM_GT), Some(32633));
    {
        let mut band = ds.rasterband(1).unwrap();
        band.set_no_data_value(Some(0.0)).unwrap();
        let mut zeros = Buffer::new((64, 48), vec![0u8; 64 * 48]);
        band.write((0, 0), (64, 48), &mut zeros).unwrap();
    }
    drop(ds);
    site.refuses_match(Some("empty.tif"), None, &[], &["empty.tif", "no-data"]);
}

#[test]
fn truncated_geotiff() {
    // A GeoTIFF cut short (an interrupted copy): GDAL opens its header, and the pixel reads
    // fail part-way. That is an error naming the file, never a survey of what was read.
    let site = Site::new();
    let driver = DriverManager::get_driver_by_name("GTiff").unwrap();
    let (w, h) = (256usize, 256usize);
    {
        let mut ds = driver
            .create_with_band_type::<u8, _>(site.path("cut.tif"), w, h, 1)
            .unwrap();
        ds.set_geo_transform(&UTM_GT).unwrap();
        ds.set_spatial_ref(&SpatialRef::from_epsg(32633).unwrap())
            .unwrap();
        let mut rng = Lcg(11);
        let px: Vec<u8> = (0..w * h).map(|_| (rng.next() * 255.0) as u8).collect();
        let mut buffer = Buffer::new((w, h), px);
        ds.rasterband(1)
            .unwrap()
            .write((0, 0), (w, h), &mut buffer)
            .unwrap();
    }
    let full = std::fs::read(site.path("cut.tif")).unwrap();
    std::fs::write(site.path("cut.tif"), &full[..full.len() / 2]).unwrap();
    site.refuses_match(Some("cut.tif"), None, &[], &["cut.tif", "damaged"]);
}
