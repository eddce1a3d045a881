//! The raster outputs (`tiemark::emit::raster`) checked with GDAL as the outside reference:
//! every file is read back through GDAL 3.6 (Debian 12's package, the library tiemark links),
//! never through tiemark's own code. A synthetic target (a seeded pattern of Gaussian blobs)
//! has a geotransform off by a known similarity; the VRTs must carry exactly the GCPs and the
//! geotransform that undo it, and GDAL's warp of them must land the blobs where a rendering of
//! the same pattern on the reference grid has them.

use gdal::raster::{Buffer, GdalDataType};
use gdal::spatial_ref::{AxisMappingStrategy, SpatialRef};
use gdal::{Dataset, DriverManager, Metadata};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::path::{Path, PathBuf};
use tiemark::emit::raster::{
    georeferenced_geotransform, warp_to_reference, write_gcp_vrt, write_georeferenced_vrt,
    Compression, Gcp, ReferenceGrid, Resampling, WarpExtent, WarpOptions, WarpTransform,
};
use tiemark::emit::EmitError;
use tiemark::fit::similarity::Similarity;
use tiemark::image::GeoTransform;

/// A blob: centre (map units), amplitude, σ (map units).
#[derive(Clone, Copy)]
struct Blob {
    c: [f64; 2],
    amp: f64,
    sigma: f64,
}

const BACKGROUND: f64 = 10.0;

/// One synthetic survey pair. Map units are metres for a projected CRS and degrees for a
/// geographic one; `unit` is the reference pixel size in them.
struct Scene {
    dir: tempfile::TempDir,
    crs_wkt: String,
    reference: ReferenceGrid,
    /// The target's own (wrong) geotransform.
    target_gt: GeoTransform,
    /// From the target's own map coordinates to the reference's: the truth.
    truth: Similarity,
    target_size: (usize, usize),
    blobs: Vec<Blob>,
    target: PathBuf,
}

fn value(blobs: &[Blob], p: [f64; 2]) -> f64 {
    BACKGROUND
        + blobs
            .iter()
            .map(|b| {
                let r2 = (p[0] - b.c[0]).powi(2) + (p[1] - b.c[1]).powi(2);
                b.amp * (-r2 / (2.0 * b.sigma * b.sigma)).exp()
            })
            .sum::<f64>()
}

/// The pattern sampled at every pixel centre of a grid, the map position of pixel/line (p, l)
/// being `to_map(p, l)`.
fn render(blobs: &[Blob], w: usize, h: usize, to_map: impl Fn(f64, f64) -> [f64; 2]) -> Vec<f32> {
    let mut out = Vec::with_capacity(w * h);
    for l in 0..h {
        for p in 0..w {
            out.push(value(blobs, to_map(p as f64 + 0.5, l as f64 + 0.5)) as f32);
        }
    }
    out
}

fn write_tif(
    path: &Path,
    (w, h): (usize, usize),
    gt: &GeoTransform,
    crs_wkt: &str,
    data: Vec<f32>,
    nodata: Option<f64>,
) {
    let driver = DriverManager::get_driver_by_name("GTiff").unwrap();
    let mut ds = driver
        .create_with_band_type::<f32, _>(path, w, h, 1)
        .unwrap();
    ds.set_geo_transform(&gt.0).unwrap();
    ds.set_spatial_ref(&SpatialRef::from_wkt(crs_wkt).unwrap())
        .unwrap();
    let mut band = ds.rasterband(1).unwrap();
    band.write((0, 0), (w, h), &mut Buffer::new((w, h), data))
        .unwrap();
    band.set_no_data_value(nodata).unwrap();
}

/// A reference grid of 400 × 400 pixels of `unit`, a target of 300 × 300 pixels of 0.8 `unit`
/// near its middle, turned by 3° and scaled by 1.002 and shifted by (14.6, −8.2) pixels by
/// the truth. `geographic`: EPSG:4326 near (14.4° E, 47.04° N), else UTM zone 33N.
fn scene(seed: u64, geographic: bool, nodata: Option<f64>) -> Scene {
    let dir = tempfile::tempdir().unwrap();
    let (epsg, x0, y0, unit) = if geographic {
        (4326, 14.40, 47.04, 1e-5)
    } else {
        (32633, 455_000.0, 5_210_000.0, 0.5)
    };
    let crs_wkt = SpatialRef::from_epsg(epsg).unwrap().to_wkt().unwrap();
    let reference = ReferenceGrid {
        crs_wkt: crs_wkt.clone(),
        geotransform: GeoTransform([x0, unit, 0.0, y0, 0.0, -unit]),
        width: 400,
        height: 400,
    };
    let target_size = (300, 300);
    let tu = 0.8 * unit;
    let target_gt = GeoTransform([x0 + 80.0 * unit, tu, 0.0, y0 - 80.0 * unit, 0.0, -tu]);
    // The truth turns the target about its centre c, scales it and shifts it.
    let c = target_gt.pixel_to_map(150.0, 150.0);
    let turn = Similarity::from_params(1.002, 3f64.to_radians(), 0.0, 0.0);
    let tc = turn.apply(c);
    let truth = Similarity {
        tx: c[0] - tc[0] + 14.6 * unit,
        ty: c[1] - tc[1] - 8.2 * unit,
        ..turn
    };
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let blobs: Vec<Blob> = (0..60)
        .map(|_| Blob {
            c: [
                x0 + rng.gen_range(20.0..380.0) * unit,
                y0 - rng.gen_range(20.0..380.0) * unit,
            ],
            amp: rng.gen_range(60.0..200.0),
            sigma: rng.gen_range(2.5..4.0) * unit,
        })
        .collect();
    let mut data = render(&blobs, target_size.0, target_size.1, |p, l| {
        truth.apply(target_gt.pixel_to_map(p, l))
    });
    if let Some(nd) = nodata {
        // A no-data corner: 20 × 20 target pixels at the top left.
        for l in 0..20 {
            for p in 0..20 {
                data[l * target_size.0 + p] = nd as f32;
            }
        }
    }
    let target = dir.path().join("target.tif");
    write_tif(&target, target_size, &target_gt, &crs_wkt, data, nodata);
    Scene {
        dir,
        crs_wkt,
        reference,
        target_gt,
        truth,
        target_size,
        blobs,
        target,
    }
}

impl Scene {
    /// GCPs on a 5 × 5 grid over the target: pixel/line → where the truth puts it.
    fn gcps(&self) -> Vec<Gcp> {
        let (w, h) = self.target_size;
        let mut out = Vec::new();
        for i in 0..5 {
            for j in 0..5 {
                let (p, l) = (
                    w as f64 * (0.1 + 0.2 * i as f64),
                    h as f64 * (0.1 + 0.2 * j as f64),
                );
                let [x, y] = self.truth.apply(self.target_gt.pixel_to_map(p, l));
                out.push(Gcp {
                    id: format!("cp-{i}{j}"),
                    pixel: p,
                    line: l,
                    x,
                    y,
                });
            }
        }
        out
    }

    fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }
}

/// GDAL's least-squares affine through a dataset's GCPs (`GDALGCPsToGeoTransform`, exact fit
/// required), or None.
#[allow(unsafe_code)]
fn gdal_gcp_affine(ds: &Dataset) -> Option<[f64; 6]> {
    let gcps = ds.gcps();
    let mut gt = [0.0f64; 6];
    // SAFETY: `GcpRef` is `repr(transparent)` over `GDAL_GCP`: the slice is GDAL's own GCP
    // array of the open dataset; GDAL writes six doubles.
    let ok = unsafe {
        gdal_sys::GDALGCPsToGeoTransform(
            gcps.len() as i32,
            gcps.as_ptr() as *const gdal_sys::GDAL_GCP,
            gt.as_mut_ptr(),
            0,
        )
    };
    (ok != 0).then_some(gt)
}

/// The CRS in the GIS data axis order (easting or longitude first), as GDAL returns the CRS of
/// a raster. GDAL's `OSRIsSame` (the `==` of `SpatialRef`) compares the data axis mapping too.
fn gis_order(wkt: &str) -> SpatialRef {
    let mut srs = SpatialRef::from_wkt(wkt).unwrap();
    srs.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
    srs
}

fn read_f32(ds: &Dataset, band: usize) -> Vec<f32> {
    ds.rasterband(band)
        .unwrap()
        .read_band_as::<f32>()
        .unwrap()
        .data()
        .to_vec()
}

fn check_gcp_vrt_reads_back(geographic: bool) {
    let s = scene(11, geographic, None);
    let gcps = s.gcps();
    let out = s.path("target-gcps.vrt");
    write_gcp_vrt(&s.target, &gcps, &s.crs_wkt, &out).unwrap();
    let ds = Dataset::open(&out).unwrap();
    assert_eq!(ds.raster_size(), s.target_size);
    // Only the GCPs georeference it: no geotransform, no dataset CRS, so that GDAL's warper
    // takes the GCPs.
    assert!(
        ds.geo_transform().is_err(),
        "the GCP VRT has a geotransform"
    );
    assert!(ds.spatial_ref().is_err(), "the GCP VRT has a dataset CRS");
    // The same CRS, in the GIS data axis order (easting or longitude first): GDAL's
    // `OSRIsSame` compares the data axis mapping too, so a GCP CRS read in the authority's
    // order (latitude first for EPSG:4326) would differ.
    let srs = ds.gcp_spatial_ref().expect("GCP CRS");
    let gis = gis_order(&s.crs_wkt);
    assert!(srs == gis, "GCP CRS differs");
    // And GDAL's CoordTransform from the GCP CRS as read to the same CRS in the GIS order
    // leaves every GCP where it is (a swap of axes would not).
    let ct = gdal::spatial_ref::CoordTransform::new(&srs, &gis).unwrap();
    let read = ds.gcps();
    assert_eq!(read.len(), gcps.len());
    for (r, g) in read.iter().zip(&gcps) {
        assert_eq!(r.id(), g.id);
        assert_eq!(
            (r.pixel(), r.line(), r.x(), r.y()),
            (g.pixel, g.line, g.x, g.y)
        );
        let (mut xs, mut ys, mut zs) = ([r.x()], [r.y()], [0.0]);
        ct.transform_coords(&mut xs, &mut ys, &mut zs).unwrap();
        assert!(
            (xs[0] - g.x).abs() < 1e-9 * g.x.abs().max(1.0)
                && (ys[0] - g.y).abs() < 1e-9 * g.y.abs().max(1.0),
            "GCP {} read in another axis order: ({}, {}) -> ({}, {})",
            g.id,
            r.x(),
            r.y(),
            xs[0],
            ys[0]
        );
    }
    // GDAL's affine through the GCPs is the similarity after the target's geotransform.
    let want = georeferenced_geotransform(&s.target_gt, &s.truth).0;
    let got = gdal_gcp_affine(&ds).expect("GDAL fits an exact affine");
    let unit = s.reference.geotransform.0[1];
    for k in [1, 2, 4, 5] {
        assert!(
            (got[k] - want[k]).abs() < 1e-9 * unit,
            "{got:?} vs {want:?}"
        );
    }
    for k in [0, 3] {
        assert!(
            (got[k] - want[k]).abs() < 1e-6 * unit,
            "{got:?} vs {want:?}"
        );
    }
    // The pixels are the target's, untouched.
    let target = Dataset::open(&s.target).unwrap();
    assert_eq!(read_f32(&ds, 1), read_f32(&target, 1));
    assert_eq!(ds.rasterband(1).unwrap().band_type(), GdalDataType::Float32);
}

#[test]
fn the_gcp_vrt_reads_back_through_gdal_projected() {
    check_gcp_vrt_reads_back(false);
}

#[test]
fn the_gcp_vrt_reads_back_through_gdal_geographic_in_lon_lat_order() {
    check_gcp_vrt_reads_back(true);
}

#[test]
fn the_gcp_vrt_still_works_after_its_folder_is_moved() {
    let s = scene(5, false, None);
    let first = s.path("out-a");
    std::fs::create_dir(&first).unwrap();
    write_gcp_vrt(
        &s.target,
        &s.gcps(),
        &s.crs_wkt,
        &first.join("target-gcps.vrt"),
    )
    .unwrap();
    let moved = s.path("elsewhere/deeper");
    std::fs::create_dir_all(moved.parent().unwrap()).unwrap();
    std::fs::rename(&first, &moved).unwrap();
    let ds = Dataset::open(moved.join("target-gcps.vrt")).unwrap();
    let target = Dataset::open(&s.target).unwrap();
    assert_eq!(read_f32(&ds, 1), read_f32(&target, 1));
}

#[test]
fn the_georeferenced_vrt_carries_the_composed_geotransform() {
    let s = scene(7, false, Some(-9999.0));
    let out = s.path("target-georeferenced.vrt");
    write_georeferenced_vrt(&s.target, &s.target_gt, &s.truth, &s.crs_wkt, &out).unwrap();
    let ds = Dataset::open(&out).unwrap();
    let got = ds.geo_transform().unwrap();
    let want = georeferenced_geotransform(&s.target_gt, &s.truth).0;
    for k in 0..6 {
        assert!((got[k] - want[k]).abs() < 1e-9, "{got:?} vs {want:?}");
    }
    assert!(ds.spatial_ref().unwrap() == gis_order(&s.crs_wkt));
    // A pixel's map position by GDAL's geotransform is where the similarity puts the target's.
    let gt = GeoTransform(got);
    for (p, l) in [(0.0, 0.0), (299.5, 10.5), (37.25, 288.0)] {
        let by_gdal = gt.pixel_to_map(p, l);
        let by_truth = s.truth.apply(s.target_gt.pixel_to_map(p, l));
        assert!((by_gdal[0] - by_truth[0]).abs() < 1e-6 && (by_gdal[1] - by_truth[1]).abs() < 1e-6);
    }
    assert_eq!(ds.rasterband(1).unwrap().no_data_value(), Some(-9999.0));
    let target = Dataset::open(&s.target).unwrap();
    assert_eq!(read_f32(&ds, 1), read_f32(&target, 1));
}

/// Pearson correlation of `a` and `b` where `keep`.
fn correlation(a: &[f32], b: &[f32], keep: &[bool]) -> f64 {
    let n = keep.iter().filter(|&&k| k).count() as f64;
    let pairs = || {
        a.iter()
            .zip(b)
            .zip(keep)
            .filter(|(_, &k)| k)
            .map(|((x, y), _)| (*x as f64, *y as f64))
    };
    let (ma, mb) = pairs().fold((0.0, 0.0), |(s, t), (x, y)| (s + x / n, t + y / n));
    let (mut sab, mut saa, mut sbb) = (0.0, 0.0, 0.0);
    for (x, y) in pairs() {
        sab += (x - ma) * (y - mb);
        saa += (x - ma) * (x - ma);
        sbb += (y - mb) * (y - mb);
    }
    sab / (saa * sbb).sqrt()
}

/// Weighted centroid (sample-index coordinates) of `img − BACKGROUND` in the window of
/// half-size `r` around (c, l); None when the window leaves the image or is not all valid.
fn centroid(
    img: &[f32],
    keep: &[bool],
    w: usize,
    h: usize,
    c: f64,
    l: f64,
    r: i64,
) -> Option<[f64; 2]> {
    let (ci, li) = (c.round() as i64, l.round() as i64);
    if ci - r < 0 || li - r < 0 || ci + r >= w as i64 || li + r >= h as i64 {
        return None;
    }
    let (mut sw, mut sx, mut sy) = (0.0, 0.0, 0.0);
    for y in li - r..=li + r {
        for x in ci - r..=ci + r {
            let i = y as usize * w + x as usize;
            if !keep[i] {
                return None;
            }
            let v = (img[i] as f64 - BACKGROUND).max(0.0);
            sw += v;
            sx += v * x as f64;
            sy += v * y as f64;
        }
    }
    Some([sx / sw, sy / sw])
}

/// Warps `source` with `options` onto the scene's reference grid and checks the result
/// against the pattern rendered on the output's grid (see [`check_warp_on`]).
fn check_warp(s: &Scene, source: &Path, options: WarpOptions, name: &str) -> Dataset {
    check_warp_on(s, &s.reference, source, options, name, &|p| p, &|p| p)
}

/// Warps `source` with `options` onto `grid` and checks the result against the pattern
/// rendered on the output's grid (which must be `grid`, or a window of it): correlation > 0.99
/// and every blob's centroid within 0.1 reference pixel. `to_pattern` maps the grid's CRS to
/// the pattern's (the scene's CRS), `from_pattern` back. Returns the output dataset.
fn check_warp_on(
    s: &Scene,
    grid: &ReferenceGrid,
    source: &Path,
    options: WarpOptions,
    name: &str,
    to_pattern: &dyn Fn([f64; 2]) -> [f64; 2],
    from_pattern: &dyn Fn([f64; 2]) -> [f64; 2],
) -> Dataset {
    let out = s.path(name);
    let mut calls = Vec::new();
    let mut record = |f: f64| calls.push(f);
    warp_to_reference(source, grid, &options, &out, Some(&mut record)).unwrap();
    assert!(
        !calls.is_empty() && calls.windows(2).all(|p| p[0] <= p[1]),
        "{calls:?}"
    );
    assert!((calls.last().unwrap() - 1.0).abs() < 1e-9, "{calls:?}");
    let ds = Dataset::open(&out).unwrap();
    let (w, h) = ds.raster_size();
    let gt = ds.geo_transform().unwrap();
    let rg = grid.geotransform.0;
    // On the reference's grid: same pixel size, pixel edges on the reference's.
    assert!(
        (gt[1] - rg[1]).abs() < 1e-12 * rg[1].abs().max(1.0)
            && (gt[5] - rg[5]).abs() < 1e-12 * rg[1].abs().max(1.0)
    );
    assert_eq!((gt[2], gt[4]), (0.0, 0.0));
    let (dp, dl) = ((gt[0] - rg[0]) / rg[1], (gt[3] - rg[3]) / rg[5]);
    assert!(
        (dp - dp.round()).abs() < 1e-6 && (dl - dl.round()).abs() < 1e-6,
        "{dp} {dl}"
    );
    assert!(ds.spatial_ref().unwrap() == gis_order(&grid.crs_wkt));
    // Tiled and compressed, as asked.
    let band = ds.rasterband(1).unwrap();
    assert_eq!(band.block_size(), (256, 256));
    let want_compression = match options.compression {
        Compression::Deflate => "DEFLATE",
        Compression::Lzw => "LZW",
    };
    assert_eq!(
        ds.metadata_item("COMPRESSION", "IMAGE_STRUCTURE")
            .as_deref(),
        Some(want_compression)
    );
    // Valid where the target has data: the alpha band, or the no-data value.
    let warped = read_f32(&ds, 1);
    let keep: Vec<bool> = match band.no_data_value() {
        Some(nd) => warped.iter().map(|&v| v as f64 != nd).collect(),
        None => {
            assert_eq!(ds.raster_count(), 2, "an alpha band is expected");
            assert_eq!(
                ds.rasterband(2).unwrap().color_interpretation(),
                gdal::raster::ColorInterpretation::AlphaBand
            );
            read_f32(&ds, 2).iter().map(|&a| a == 255.0).collect()
        }
    };
    let valid = keep.iter().filter(|&&k| k).count();
    assert!(valid > w * h / 4, "only {valid} of {} pixels valid", w * h);
    let ogt = GeoTransform(gt);
    let rendered = render(&s.blobs, w, h, |p, l| to_pattern(ogt.pixel_to_map(p, l)));
    let r = correlation(&warped, &rendered, &keep);
    assert!(r > 0.99, "correlation {r}");
    let inv = ogt.inverse().unwrap();
    let mut compared = 0;
    for b in &s.blobs {
        let at = from_pattern(b.c);
        let [c, l] = inv.pixel_to_map(at[0], at[1]);
        let reach = |d: [f64; 2]| {
            let q = from_pattern([b.c[0] + d[0], b.c[1] + d[1]]);
            (q[0] - at[0]).hypot(q[1] - at[1]) / rg[1]
        };
        let radius = (3.0 * reach([b.sigma, 0.0]).max(reach([0.0, b.sigma]))).ceil() as i64;
        let (Some(a), Some(e)) = (
            centroid(&warped, &keep, w, h, c - 0.5, l - 0.5, radius),
            centroid(&rendered, &keep, w, h, c - 0.5, l - 0.5, radius),
        ) else {
            continue;
        };
        compared += 1;
        let d = (a[0] - e[0]).hypot(a[1] - e[1]);
        assert!(
            d < 0.1,
            "blob at {:?}: centroid off by {d} reference pixels",
            b.c
        );
    }
    assert!(compared >= 10, "only {compared} blobs compared");
    ds
}

#[test]
fn a_first_order_warp_of_the_gcp_vrt_lands_on_the_reference_grid() {
    let s = scene(21, false, None);
    let vrt = s.path("target-gcps.vrt");
    write_gcp_vrt(&s.target, &s.gcps(), &s.crs_wkt, &vrt).unwrap();
    let before = std::fs::read(&vrt).unwrap();
    let options = WarpOptions {
        resampling: Resampling::Bilinear,
        transform: WarpTransform::FirstOrder,
        extent: WarpExtent::Reference,
        compression: Compression::Deflate,
    };
    let ds = check_warp(&s, &vrt, options, "target-coregistered.tif");
    assert_eq!(ds.raster_size(), (400, 400));
    assert_eq!(ds.geo_transform().unwrap(), s.reference.geotransform.0);
    // Reading the VRT for the warp did not rewrite it.
    assert_eq!(std::fs::read(&vrt).unwrap(), before);
}

#[test]
fn a_geographic_gcp_vrt_warps_in_lon_lat_order() {
    // If GDAL read the GCPs as (latitude, longitude) the footprint would be near (47° E,
    // 14.4° N), far outside the reference grid, and the warp would fail or be empty.
    let s = scene(23, true, None);
    let vrt = s.path("target-gcps.vrt");
    write_gcp_vrt(&s.target, &s.gcps(), &s.crs_wkt, &vrt).unwrap();
    let options = WarpOptions {
        resampling: Resampling::Cubic,
        extent: WarpExtent::Footprint,
        compression: Compression::Lzw,
        ..WarpOptions::default()
    };
    check_warp(&s, &vrt, options, "target-coregistered.tif");
}

#[test]
fn geographic_gcps_warped_onto_a_projected_grid_land_in_lon_lat_order() {
    // Warping to another CRS makes GDAL's warper transform the GCP coordinates, which it
    // takes as (longitude, latitude): points written in the other order would land some
    // 3 600 km away. (The warper rebuilds the GCP CRS from its WKT in the GIS order, so it
    // does not see the VRT's axis mapping; the read-back test checks that.) The footprint
    // must be converted to UTM too. The pattern is defined in degrees; the UTM grid's pixels
    // are rendered through GDAL's CoordTransform (PROJ), in the GIS order on both ends.
    let s = scene(37, true, None);
    let vrt = s.path("target-gcps.vrt");
    write_gcp_vrt(&s.target, &s.gcps(), &s.crs_wkt, &vrt).unwrap();
    let utm_wkt = SpatialRef::from_epsg(32633).unwrap().to_wkt().unwrap();
    let (ll, utm) = (gis_order(&s.crs_wkt), gis_order(&utm_wkt));
    let to_utm = gdal::spatial_ref::CoordTransform::new(&ll, &utm).unwrap();
    let to_ll = gdal::spatial_ref::CoordTransform::new(&utm, &ll).unwrap();
    let convert = |ct: &gdal::spatial_ref::CoordTransform, p: [f64; 2]| {
        let (mut x, mut y, mut z) = ([p[0]], [p[1]], [0.0]);
        ct.transform_coords(&mut x, &mut y, &mut z).unwrap();
        [x[0], y[0]]
    };
    let centre = convert(
        &to_utm,
        s.truth.apply(s.target_gt.pixel_to_map(150.0, 150.0)),
    );
    let grid = ReferenceGrid {
        crs_wkt: utm_wkt.clone(),
        geotransform: GeoTransform([
            centre[0].round() - 200.0,
            0.5,
            0.0,
            centre[1].round() + 200.0,
            0.0,
            -0.5,
        ]),
        width: 800,
        height: 800,
    };
    let options = WarpOptions {
        extent: WarpExtent::Footprint,
        ..WarpOptions::default()
    };
    let ds = check_warp_on(
        &s,
        &grid,
        &vrt,
        options,
        "target-coregistered.tif",
        &|p| convert(&to_ll, p),
        &|p| convert(&to_utm, p),
    );
    // The footprint: about 300 × 0.8e-5° = 0.0024° a side, some 180 m east-west and 267 m
    // north-south at 47° N: 360 × 534 half-metre pixels, give or take the 3° turn.
    let (w, h) = ds.raster_size();
    assert!(
        (350..420).contains(&w) && (520..580).contains(&h),
        "{w} × {h}"
    );
}

#[test]
fn a_thin_plate_spline_warp_of_exact_gcps_matches_too() {
    let s = scene(29, false, None);
    let vrt = s.path("target-gcps.vrt");
    write_gcp_vrt(&s.target, &s.gcps(), &s.crs_wkt, &vrt).unwrap();
    let options = WarpOptions {
        transform: WarpTransform::ThinPlateSpline,
        ..WarpOptions::default()
    };
    check_warp(&s, &vrt, options, "target-coregistered.tif");
}

#[test]
fn the_georeferenced_vrt_warps_over_the_footprint_and_keeps_no_data() {
    let s = scene(31, false, Some(-9999.0));
    let vrt = s.path("target-georeferenced.vrt");
    write_georeferenced_vrt(&s.target, &s.target_gt, &s.truth, &s.crs_wkt, &vrt).unwrap();
    let options = WarpOptions {
        transform: WarpTransform::Geotransform,
        extent: WarpExtent::Footprint,
        ..WarpOptions::default()
    };
    let ds = check_warp(&s, &vrt, options, "target-coregistered.tif");
    assert_eq!(ds.raster_count(), 1);
    assert_eq!(ds.rasterband(1).unwrap().no_data_value(), Some(-9999.0));
    // The footprint: the target's 300 × 0.8 = 240 reference pixels turned by 3°, about
    // 240 · (cos 3° + sin 3°) ≈ 252, widened to whole pixels.
    let (w, h) = ds.raster_size();
    assert!(
        (250..=256).contains(&w) && (250..=256).contains(&h),
        "{w} × {h}"
    );
}

#[test]
fn failures_name_the_file_and_leave_nothing() {
    let s = scene(3, false, None);
    let missing = s.path("no-such-target.tif");
    let vrt = s.path("target-gcps.vrt");
    match write_gcp_vrt(&missing, &s.gcps(), &s.crs_wkt, &vrt) {
        Err(EmitError::Raster { path, message }) => {
            assert_eq!(path, missing);
            assert!(message.contains("cannot be found"), "{message}");
        }
        other => panic!("{other:?}"),
    }
    assert!(!vrt.exists());
    // Too few GCPs.
    let err = write_gcp_vrt(&s.target, &s.gcps()[..2], &s.crs_wkt, &vrt).unwrap_err();
    assert!(err.to_string().contains("at least 3"), "{err}");
    assert!(!vrt.exists());
    // A rotated reference grid: GDAL warps onto north-up grids only.
    write_gcp_vrt(&s.target, &s.gcps(), &s.crs_wkt, &vrt).unwrap();
    let mut grid = s.reference.clone();
    grid.geotransform.0[2] = 0.01;
    let out = s.path("target-coregistered.tif");
    let err = warp_to_reference(&vrt, &grid, &WarpOptions::default(), &out, None).unwrap_err();
    assert!(err.to_string().contains("north-up"), "{err}");
    assert!(!out.exists());
    // The similarity's transform asked of a VRT without a geotransform.
    let options = WarpOptions {
        transform: WarpTransform::Geotransform,
        ..WarpOptions::default()
    };
    let err = warp_to_reference(&vrt, &s.reference, &options, &out, None).unwrap_err();
    assert!(err.to_string().contains("no geotransform"), "{err}");
    assert!(!out.exists());
    // GDAL cannot create the output (its folder does not exist): GDAL's error, named file.
    let out = s.path("missing-folder/target-coregistered.tif");
    match warp_to_reference(&vrt, &s.reference, &WarpOptions::default(), &out, None) {
        Err(EmitError::Raster { path, message }) => {
            assert_eq!(path, out);
            assert!(message.contains("was not made"), "{message}");
        }
        other => panic!("{other:?}"),
    }
    assert!(!out.exists());
}
