//! Raster images georeferenced by ground control points that cannot place them: too few GCPs,
//! GCPs on one line, and GCPs that disagree (a blunder) so that no first- or second-order
//! polynomial fits them. Each is refused before any work, naming the file and what to do, and
//! nothing is written.

use super::*;
use gdal::raster::Buffer;

/// Writes a one-band 64 × 48 GeoTIFF of seeded dots at `name`, with no geotransform and the
/// GCPs given as (pixel, line, x, y) in WGS 84 / UTM 33N.
fn gcp_tif(site: &Site, name: &'static str, gcps: &[(f64, f64, f64, f64)]) -> &'static str {
    let mut rng = Lcg(11);
    let mut px = vec![128u8; 64 * 48];
    for _ in 0..40 {
        let (c, r) = (
            (rng.next() * 60.0) as usize + 2,
            (rng.next() * 44.0) as usize + 2,
        );
        px[r * 64 + c] = if rng.next() < 0.5 { 20 } else { 235 };
    }
    let ds = DriverManager::get_driver_by_name("GTiff")
        .unwrap()
        .create_with_band_type::<u8, _>(site.path(name), 64, 48, 1)
        .unwrap();
    let mut buffer = Buffer::new((64, 48), px);
    ds.rasterband(1)
        .unwrap()
        .write((0, 0), (64, 48), &mut buffer)
        .unwrap();
    let list = gcps
        .iter()
        .enumerate()
        .map(|(i, &(pixel, line, x, y))| gdal::Gcp {
            id: format!("p{}", i + 1),
            info: String::new(),
            pixel,
            line,
            x,
            y,
            z: 0.0,
        })
        .collect();
    ds.set_gcps(list, &SpatialRef::from_epsg(32633).unwrap())
        .unwrap();
    name
}

/// GCP (pixel, line) → (x, y) on a 2 m grid at UTM 33N (455000, 5211000), plus `dx` east.
fn on_grid(p: f64, l: f64, dx: f64) -> (f64, f64, f64, f64) {
    (p, l, 455_000.0 + 2.0 * p + dx, 5_211_000.0 - 2.0 * l)
}

#[test]
fn raster_with_too_few_gcps() {
    let site = Site::new();
    let name = gcp_tif(
        &site,
        "two-gcps.tif",
        &[on_grid(0.0, 0.0, 0.0), on_grid(64.0, 48.0, 0.0)],
    );
    site.refuses_match(
        Some(name),
        None,
        &[],
        &[
            "two-gcps.tif",
            "2 ground control point(s) only",
            "at least 3",
            "add ground control points",
        ],
    );
}

#[test]
fn raster_with_gcps_on_one_line() {
    let site = Site::new();
    let name = gcp_tif(
        &site,
        "line-gcps.tif",
        &[
            on_grid(0.0, 0.0, 0.0),
            on_grid(32.0, 24.0, 0.0),
            on_grid(64.0, 48.0, 0.0),
        ],
    );
    site.refuses_match(
        Some(name),
        None,
        &[],
        &["line-gcps.tif", "do not agree", "on one line", "gdalwarp"],
    );
}

#[test]
fn raster_with_a_blunder_among_few_gcps() {
    // Five GCPs, one 30 m (15 px) off: too few for a second-order polynomial, and no affine
    // fits them.
    let site = Site::new();
    let name = gcp_tif(
        &site,
        "blunder-5.tif",
        &[
            on_grid(0.0, 0.0, 0.0),
            on_grid(64.0, 0.0, 0.0),
            on_grid(0.0, 48.0, 0.0),
            on_grid(64.0, 48.0, 0.0),
            on_grid(32.0, 24.0, 30.0),
        ],
    );
    site.refuses_match(
        Some(name),
        None,
        &[],
        &[
            "blunder-5.tif",
            "5 ground control points",
            "do not agree",
            "order 1",
            "check that GCP",
            "gdalwarp",
        ],
    );
}

#[test]
fn raster_with_a_blunder_among_many_gcps() {
    // A 3 × 3 grid of GCPs with the centre one 100 m (50 px) off: even the second-order
    // polynomial leaves it far away, and the message names it (GeoTIFF keeps no GCP ids:
    // GDAL numbers them from 1, so the centre one, the fifth, is '5').
    let site = Site::new();
    let mut gcps = Vec::new();
    for j in 0..3 {
        for i in 0..3 {
            let dx = if (i, j) == (1, 1) { 100.0 } else { 0.0 };
            gcps.push(on_grid(32.0 * f64::from(i), 24.0 * f64::from(j), dx));
        }
    }
    let name = gcp_tif(&site, "blunder-9.tif", &gcps);
    site.refuses_match(
        Some(name),
        None,
        &[],
        &[
            "blunder-9.tif",
            "9 ground control points",
            "order 2",
            "GCP '5'",
            "gdalwarp",
        ],
    );
}
