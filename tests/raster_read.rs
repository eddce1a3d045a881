//! The raster reader (`tiemark::ingest::RasterSource`) on small images written here with GDAL:
//! formats (GeoTIFF striped, tiled, BigTIFF, COG, VRT, JPEG 2000), data types, geotransforms
//! (GDAL's own `GDALApplyGeoTransform` / `GDALInvGeoTransform` as the reference), decimated
//! reads (against GDAL's overview builder and against a direct block mean), validity from
//! no-data values, alpha bands and masks, the bounded strips of a large sparse mosaic, and the
//! refusals.

use gdal::cpl::CslStringList;
use gdal::raster::{Buffer, ColorInterpretation, GdalType};
use gdal::spatial_ref::SpatialRef;
use gdal::{Dataset, DriverManager};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::path::{Path, PathBuf};
use tiemark::image::{GeoTransform, Image};
use tiemark::ingest::{
    open_raster, BandChoice, IngestError, RasterError, RasterSource, ReadLevel, SurveyInput,
    LUMINANCE_WEIGHTS, STRIP_PIXELS,
};

const GT: [f64; 6] = [500_000.0, 0.25, 0.0, 6_000_000.0, 0.0, -0.25];

/// Writes a GTiff of `bands` (each `w × h`, row-major) with creation options and geotransform.
fn write_tiff<T: GdalType + Copy>(
    path: &Path,
    w: usize,
    h: usize,
    bands: &[Vec<T>],
    options: &[&str],
    gt: Option<[f64; 6]>,
) -> Dataset {
    let driver = DriverManager::get_driver_by_name("GTiff").unwrap();
    let opts = CslStringList::from_iter(options.iter().copied());
    let mut ds = driver
        .create_with_band_type_with_options::<T, _>(path, w, h, bands.len(), &opts)
        .unwrap();
    if let Some(g) = gt {
        ds.set_geo_transform(&g).unwrap();
    }
    for (i, data) in bands.iter().enumerate() {
        let mut b = ds.rasterband(i + 1).unwrap();
        b.write((0, 0), (w, h), &mut Buffer::new((w, h), data.clone()))
            .unwrap();
    }
    ds
}

fn random_f32(w: usize, h: usize, seed: u64) -> Vec<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..w * h).map(|_| rng.gen_range(0.0..1000.0)).collect()
}

fn open(path: &Path) -> RasterSource {
    RasterSource::open(path, None).unwrap_or_else(|e| panic!("{e}"))
}

/// The direct oracle: the mean of every whole `d × d` block, and whether all its pixels are
/// valid (the reader's documented rule).
fn block_means(
    data: &[f32],
    valid: &[bool],
    w: usize,
    h: usize,
    d: usize,
) -> (Vec<f32>, Vec<bool>) {
    let (ow, oh) = (w / d, h / d);
    let mut means = Vec::new();
    let mut ok = Vec::new();
    for r in 0..oh {
        for c in 0..ow {
            let mut s = 0.0f64;
            let mut all = true;
            for y in r * d..(r + 1) * d {
                for x in c * d..(c + 1) * d {
                    s += f64::from(data[y * w + x]);
                    all &= valid.is_empty() || valid[y * w + x];
                }
            }
            means.push(if all {
                (s / (d * d) as f64) as f32
            } else {
                0.0
            });
            ok.push(all);
        }
    }
    (means, ok)
}

fn valid_of(img: &Image) -> Vec<bool> {
    if img.valid.is_empty() {
        vec![true; img.width * img.height]
    } else {
        img.valid.clone()
    }
}

fn assert_close(got: &[f32], want: &[f32], tol: f32, what: &str) {
    assert_eq!(got.len(), want.len(), "{what}: length");
    for (i, (g, w)) in got.iter().zip(want).enumerate() {
        assert!(
            (g - w).abs() <= tol * w.abs().max(1.0),
            "{what}: sample {i}: {g} vs {w}"
        );
    }
}

// ---------------------------------------------------------------------------------------------
// Geotransforms against GDAL's own.

#[allow(unsafe_code)]
fn gdal_apply(gt: &[f64; 6], p: f64, l: f64) -> [f64; 2] {
    let mut g = *gt;
    let (mut x, mut y) = (0.0, 0.0);
    // SAFETY: GDAL reads six doubles from `g` and writes one double to each of `x`, `y`.
    unsafe { gdal_sys::GDALApplyGeoTransform(g.as_mut_ptr(), p, l, &mut x, &mut y) };
    [x, y]
}

#[allow(unsafe_code)]
fn gdal_inverse(gt: &[f64; 6]) -> Option<[f64; 6]> {
    let mut g = *gt;
    let mut inv = [0.0; 6];
    // SAFETY: GDAL reads six doubles from `g` and writes six to `inv`.
    let ok = unsafe { gdal_sys::GDALInvGeoTransform(g.as_mut_ptr(), inv.as_mut_ptr()) };
    (ok != 0).then_some(inv)
}

#[test]
fn geotransforms_agree_with_gdals_apply_and_invert() {
    // Reference: GDAL's GDALApplyGeoTransform and GDALInvGeoTransform (gdal_sys, GDAL 3.6).
    let mut rng = ChaCha8Rng::seed_from_u64(20_261_202);
    for case in 0..2000 {
        let size = 10f64.powf(rng.gen_range(-2.0..1.5));
        let turn: f64 = if case % 4 == 0 {
            0.0
        } else {
            rng.gen_range(-3.2..3.2)
        };
        let skew = if case % 3 == 0 {
            0.0
        } else {
            rng.gen_range(-0.2..0.2) * size
        };
        let flip = if case % 5 == 0 { 1.0 } else { -1.0 };
        let g = [
            rng.gen_range(-1e6..1e6),
            size * turn.cos(),
            size * turn.sin() + skew,
            rng.gen_range(-1e7..1e7),
            size * turn.sin(),
            flip * size * turn.cos(),
        ];
        let gt = GeoTransform(g);
        for _ in 0..5 {
            let (p, l) = (
                rng.gen_range(-100.0..40_000.0),
                rng.gen_range(-100.0..40_000.0),
            );
            let ours = gt.pixel_to_map(p, l);
            let theirs = gdal_apply(&g, p, l);
            for k in 0..2 {
                assert!(
                    (ours[k] - theirs[k]).abs() <= 1e-9 * theirs[k].abs().max(1.0),
                    "case {case}: {ours:?} vs {theirs:?}"
                );
            }
        }
        let ours = gt.inverse().expect("invertible");
        let theirs = gdal_inverse(&g).expect("GDAL inverts it");
        for k in 0..6 {
            assert!(
                (ours.0[k] - theirs[k]).abs() <= 1e-9 * theirs[k].abs().max(1e-9 / size),
                "case {case} term {k}: {:?} vs {theirs:?}",
                ours.0
            );
        }
    }
    for singular in [
        [0.0, 1.0, 2.0, 0.0, 0.5, 1.0],
        [5.0, 0.0, 0.0, 7.0, 0.0, 0.0],
    ] {
        assert!(GeoTransform(singular).inverse().is_none());
        assert!(gdal_inverse(&singular).is_none());
    }
}

#[test]
fn a_rotated_geotiff_keeps_its_geotransform_and_its_decimated_grid() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("rotated.tif");
    let (s, c) = (25f64.to_radians().sin(), 25f64.to_radians().cos());
    let g = [1000.0, 0.1 * c, 0.1 * s, 2000.0, 0.1 * s, -0.1 * c];
    let data = random_f32(40, 30, 1);
    drop(write_tiff(
        &p,
        40,
        30,
        std::slice::from_ref(&data),
        &[],
        Some(g),
    ));
    let src = open(&p);
    for k in 0..6 {
        assert!((src.info().geotransform.0[k] - g[k]).abs() < 1e-12);
    }
    let img = src.read(4).unwrap();
    assert_eq!((img.width, img.height), (10, 7));
    // Sample (3, 2) of the decimated read covers pixels 12..16 × 8..12: its centre is at
    // pixel/line (14, 10) of the file, where GDAL puts it too.
    let ours = img.geotransform.sample_to_map(3.0, 2.0);
    let theirs = gdal_apply(&g, 14.0, 10.0);
    assert!((ours[0] - theirs[0]).abs() < 1e-9 && (ours[1] - theirs[1]).abs() < 1e-9);
    let (want, _) = block_means(&data, &[], 40, 30, 4);
    assert_close(&img.pixels, &want, 1e-5, "rotated");
}

// ---------------------------------------------------------------------------------------------
// Decimated reads.

#[test]
fn decimated_read_matches_gdals_overview_builder_and_the_block_mean() {
    // Reference: GDAL's own overview builder with AVERAGE resampling (GDALBuildOverviews), a
    // different code path from the decimated RasterIO the reader uses; and the block mean.
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (64, 48);
    let data = random_f32(w, h, 7);
    let plain = dir.path().join("plain.tif");
    drop(write_tiff(
        &plain,
        w,
        h,
        std::slice::from_ref(&data),
        &[],
        Some(GT),
    ));
    let with_ovr = dir.path().join("ovr.tif");
    let mut ds = write_tiff(&with_ovr, w, h, std::slice::from_ref(&data), &[], Some(GT));
    ds.build_overviews("AVERAGE", &[4], &[]).unwrap();
    let gdal_ovr: Vec<f32> = {
        let b = ds.rasterband(1).unwrap();
        let o = b.overview(0).unwrap();
        assert_eq!(o.size(), (16, 12));
        o.read_band_as::<f32>().unwrap().data().to_vec()
    };
    drop(ds);

    let src = open(&plain);
    assert_eq!(src.plan(4).unwrap().level, ReadLevel::Averaged);
    let ours = src.read(4).unwrap();
    assert_eq!((ours.width, ours.height), (16, 12));
    assert_eq!(ours.geotransform, GeoTransform(GT).scaled(4.0));
    assert_close(&ours.pixels, &gdal_ovr, 1e-4, "against GDAL's overview");
    let (mean, _) = block_means(&data, &[], w, h, 4);
    assert_close(&ours.pixels, &mean, 1e-5, "against the block mean");

    let src = open(&with_ovr);
    assert_eq!(src.plan(4).unwrap().level, ReadLevel::Overview { index: 0 });
    let from_ovr = src.read(4).unwrap();
    assert_eq!(from_ovr.pixels, gdal_ovr, "the overview is read as it is");
    assert_eq!(from_ovr.geotransform, GeoTransform(GT).scaled(4.0));
    // At 8, the overview at 4 averaged 2 × 2; at 6 (not a multiple of 4), the file averaged.
    let plan = src.plan(8).unwrap();
    assert_eq!(
        (plan.level, plan.block),
        (ReadLevel::Overview { index: 0 }, 2)
    );
    let (mean, _) = block_means(&data, &[], w, h, 8);
    assert_close(
        &src.read(8).unwrap().pixels,
        &mean,
        1e-5,
        "overview averaged",
    );
    assert_eq!(src.plan(6).unwrap().level, ReadLevel::Averaged);
}

#[test]
fn a_size_that_is_not_a_multiple_drops_the_partial_blocks() {
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (67, 50);
    let data = random_f32(w, h, 8);
    let p = dir.path().join("odd.tif");
    drop(write_tiff(
        &p,
        w,
        h,
        std::slice::from_ref(&data),
        &[],
        Some(GT),
    ));
    let img = open(&p).read(3).unwrap();
    assert_eq!((img.width, img.height), (22, 16));
    let (want, _) = block_means(&data, &[], w, h, 3);
    assert_close(&img.pixels, &want, 1e-5, "odd size");
}

#[test]
fn striped_tiled_bigtiff_and_vrt_read_the_same() {
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (70, 45);
    let data: Vec<u16> = {
        let mut rng = ChaCha8Rng::seed_from_u64(9);
        (0..w * h).map(|_| rng.gen_range(0..65535)).collect()
    };
    let as_f32: Vec<f32> = data.iter().map(|&v| f32::from(v)).collect();
    let striped = dir.path().join("striped.tif");
    let tiled = dir.path().join("tiled.tif");
    let big = dir.path().join("big.tif");
    drop(write_tiff(
        &striped,
        w,
        h,
        std::slice::from_ref(&data),
        &["BLOCKYSIZE=7"],
        Some(GT),
    ));
    drop(write_tiff(
        &tiled,
        w,
        h,
        std::slice::from_ref(&data),
        &[
            "TILED=YES",
            "BLOCKXSIZE=16",
            "BLOCKYSIZE=16",
            "COMPRESS=DEFLATE",
        ],
        Some(GT),
    ));
    drop(write_tiff(
        &big,
        w,
        h,
        std::slice::from_ref(&data),
        &["BIGTIFF=YES"],
        Some(GT),
    ));
    let vrt = dir.path().join("copy.vrt");
    {
        let src = Dataset::open(&tiled).unwrap();
        let driver = DriverManager::get_driver_by_name("VRT").unwrap();
        drop(
            src.create_copy(&driver, &vrt, &CslStringList::new())
                .unwrap(),
        );
    }
    let (want, _) = block_means(&as_f32, &[], w, h, 5);
    for (p, driver) in [
        (&striped, "GTiff"),
        (&tiled, "GTiff"),
        (&big, "GTiff"),
        (&vrt, "VRT"),
    ] {
        let src = open(p);
        let i = src.info();
        assert_eq!((i.width, i.height, i.band_count), (w, h, 1));
        assert_eq!(
            (i.data_type.as_str(), i.driver.as_str()),
            ("UInt16", driver)
        );
        assert_eq!(i.geotransform, GeoTransform(GT));
        assert!((i.pixel_size - 0.25).abs() < 1e-15);
        let full = src.read(1).unwrap();
        assert_eq!(full.pixels, as_f32, "{}", p.display());
        assert!(full.valid.is_empty());
        let dec = src.read(5).unwrap();
        assert_close(&dec.pixels, &want, 1e-5, &p.display().to_string());
        let win = src.read_window(13, 20, 9, 11).unwrap();
        for r in 0..11 {
            for c in 0..9 {
                assert_eq!(win.at(c, r), as_f32[(20 + r) * w + 13 + c]);
            }
        }
        assert_eq!(win.geotransform, GeoTransform(GT).window(13.0, 20.0));
    }
}

#[test]
fn jpeg2000_lossless_reads_back_exactly() {
    // Debian's GDAL 3.6 has the JP2OpenJPEG driver (../shared/GEOSTACK.md): its absence fails.
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (48, 40);
    let data: Vec<u8> = (0..w * h).map(|i| ((i * 37) % 251) as u8).collect();
    let tif = dir.path().join("src.tif");
    let jp2 = dir.path().join("image.jp2");
    let ds = write_tiff(&tif, w, h, std::slice::from_ref(&data), &[], Some(GT));
    let driver = DriverManager::get_driver_by_name("JP2OpenJPEG").expect("JP2OpenJPEG driver");
    let opts = CslStringList::from_iter(["REVERSIBLE=YES", "QUALITY=100"]);
    drop(ds.create_copy(&driver, &jp2, &opts).unwrap());
    let src = open(&jp2);
    assert_eq!(src.info().driver, "JP2OpenJPEG");
    assert_eq!(src.info().geotransform, GeoTransform(GT));
    let img = src.read(1).unwrap();
    let want: Vec<f32> = data.iter().map(|&v| f32::from(v)).collect();
    assert_eq!(img.pixels, want);
}

#[test]
fn a_cog_is_read_from_its_overviews() {
    // A COG of 512 × 512 px in 128 px tiles has overviews at 2 (index 0) and 4 (index 1).
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (512, 512);
    let data = random_f32(w, h, 10);
    let tif = dir.path().join("src.tif");
    let cog = dir.path().join("cog.tif");
    let ds = write_tiff(&tif, w, h, std::slice::from_ref(&data), &[], Some(GT));
    let driver = DriverManager::get_driver_by_name("COG").unwrap();
    let opts = CslStringList::from_iter(["BLOCKSIZE=128", "RESAMPLING=AVERAGE", "OVERVIEWS=AUTO"]);
    drop(ds.create_copy(&driver, &cog, &opts).unwrap());
    let src = open(&cog);
    for (d, index, block) in [(2, 0, 1), (4, 1, 1), (8, 1, 2), (12, 1, 3)] {
        let plan = src.plan(d).unwrap();
        assert_eq!(
            (plan.level, plan.block),
            (ReadLevel::Overview { index }, block),
            "{d}"
        );
        let img = src.read(d).unwrap();
        assert_eq!((img.width, img.height), (w / d, h / d));
        assert_eq!(img.geotransform, GeoTransform(GT).scaled(d as f64));
        let (want, _) = block_means(&data, &[], w, h, d);
        assert_close(&img.pixels, &want, 1e-4, &format!("COG at 1/{d}"));
    }
    // No overview at a factor of 3: the full resolution, averaged.
    assert_eq!(src.plan(3).unwrap().level, ReadLevel::Averaged);
    // The fastest decimation up to a factor: an overview's own factor above half of it when
    // the factor itself would be read from the full resolution; else the factor.
    for (most, fastest) in [
        (1, 1),
        (2, 2),
        (3, 2),
        (4, 4),
        (5, 4),
        (6, 6),
        (7, 4),
        (8, 8),
    ] {
        assert_eq!(src.fastest_decimation(most).unwrap(), fastest, "{most}");
    }
    // Without overviews every factor is its own.
    let plain = open(&tif);
    for most in 1..=8 {
        assert_eq!(plain.fastest_decimation(most).unwrap(), most, "{most}");
    }
}

// ---------------------------------------------------------------------------------------------
// Validity.

#[test]
fn a_nodata_collar_does_not_leak_into_decimated_samples() {
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (60, 40);
    let mut data: Vec<u8> = (0..w * h).map(|i| 1 + (i % 200) as u8).collect();
    let mut valid = vec![true; w * h];
    for r in 0..h {
        for c in 0..w {
            // A collar 7 px wide on the left and a notch, a no-data pixel alone at (30, 20).
            if c < 7 || (r < 3 && c > 50) || (c, r) == (30, 20) {
                data[r * w + c] = 0;
                valid[r * w + c] = false;
            }
        }
    }
    let p = dir.path().join("collar.tif");
    let ds = write_tiff(&p, w, h, std::slice::from_ref(&data), &[], Some(GT));
    ds.rasterband(1)
        .unwrap()
        .set_no_data_value(Some(0.0))
        .unwrap();
    drop(ds);
    let src = open(&p);
    assert_eq!(src.info().nodata, Some(0.0));
    assert!(
        src.describe().contains("no-data value 0"),
        "{}",
        src.describe()
    );
    let full = src.read(1).unwrap();
    assert_eq!(full.valid, valid);
    let as_f32: Vec<f32> = data.iter().map(|&v| f32::from(v)).collect();
    for d in [2, 4, 5] {
        let img = src.read(d).unwrap();
        let (want, ok) = block_means(&as_f32, &valid, w, h, d);
        assert_eq!(valid_of(&img), ok, "decimation {d}");
        assert_close(&img.pixels, &want, 1e-5, "collar");
        assert!(ok.iter().any(|v| !v) && ok.iter().any(|v| *v));
    }
}

#[test]
fn float_with_nan_nodata_marks_nan_invalid() {
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (30, 24);
    let mut data = random_f32(w, h, 11);
    let mut valid = vec![true; w * h];
    for i in (0..w * h).step_by(37) {
        data[i] = f32::NAN;
        valid[i] = false;
    }
    let p = dir.path().join("nan.tif");
    let ds = write_tiff(&p, w, h, std::slice::from_ref(&data), &[], Some(GT));
    ds.rasterband(1)
        .unwrap()
        .set_no_data_value(Some(f64::NAN))
        .unwrap();
    drop(ds);
    let src = open(&p);
    assert_eq!(src.info().data_type, "Float32");
    assert!(src.info().nodata.is_some_and(f64::is_nan));
    let full = src.read(1).unwrap();
    assert_eq!(full.valid, valid);
    assert!(full.pixels.iter().all(|v| v.is_finite()));
    let img = src.read(3).unwrap();
    let (want, ok) = block_means(&data, &valid, w, h, 3);
    assert_eq!(valid_of(&img), ok);
    assert_close(&img.pixels, &want, 1e-5, "NaN");
}

#[test]
fn rgba_reads_the_luminance_and_only_opaque_pixels() {
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (32, 20);
    let mut rng = ChaCha8Rng::seed_from_u64(12);
    let rgb: Vec<Vec<u8>> = (0..3)
        .map(|_| (0..w * h).map(|_| rng.gen()).collect())
        .collect();
    let mut alpha = vec![255u8; w * h];
    for r in 0..h {
        for c in 0..5 {
            alpha[r * w + c] = 0;
        }
    }
    alpha[10 * w + 20] = 128; // partly transparent: not valid
    let p = dir.path().join("rgba.tif");
    let mut bands = rgb.clone();
    bands.push(alpha.clone());
    let ds = write_tiff(
        &p,
        w,
        h,
        &bands,
        &["PHOTOMETRIC=RGB", "ALPHA=YES"],
        Some(GT),
    );
    assert_eq!(
        ds.rasterband(4).unwrap().color_interpretation(),
        ColorInterpretation::AlphaBand
    );
    drop(ds);
    let src = open(&p);
    assert_eq!(src.band(), BandChoice::Luminance);
    assert!(src.describe().contains("alpha band"), "{}", src.describe());
    let img = src.read(1).unwrap();
    let valid: Vec<bool> = alpha.iter().map(|&a| a == 255).collect();
    assert_eq!(img.valid, valid);
    for i in 0..w * h {
        let y: f64 = (0..3)
            .map(|b| LUMINANCE_WEIGHTS[b] * f64::from(rgb[b][i]))
            .sum();
        let want = if valid[i] { y as f32 } else { 0.0 };
        assert!((img.pixels[i] - want).abs() < 1e-3, "{i}");
    }
    let dec = src.read(4).unwrap();
    let lum: Vec<f32> = (0..w * h)
        .map(|i| {
            (0..3)
                .map(|b| LUMINANCE_WEIGHTS[b] * f64::from(rgb[b][i]))
                .sum::<f64>() as f32
        })
        .collect();
    let (want, ok) = block_means(&lum, &valid, w, h, 4);
    assert_eq!(valid_of(&dec), ok);
    assert_close(&dec.pixels, &want, 1e-4, "luminance, decimated");
    // One band asked for: that band, same mask.
    let g = RasterSource::open(&p, Some(BandChoice::Band(2))).unwrap();
    let img = g.read(1).unwrap();
    assert_eq!(img.valid, valid);
    assert_eq!(img.at(10, 3), f32::from(rgb[1][3 * w + 10]));
}

#[test]
fn a_dataset_mask_is_honoured() {
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (40, 32);
    let data = random_f32(w, h, 13);
    let p = dir.path().join("masked.tif");
    let ds = write_tiff(&p, w, h, &[data.clone(), data.clone()], &[], Some(GT));
    let mut valid = vec![true; w * h];
    {
        let mut b = ds.rasterband(1).unwrap();
        b.create_mask_band(true).unwrap();
        let mut m = b.open_mask_band().unwrap();
        let mut bytes = vec![255u8; w * h];
        for r in 20..h {
            for c in 0..w {
                bytes[r * w + c] = 0;
                valid[r * w + c] = false;
            }
        }
        m.write((0, 0), (w, h), &mut Buffer::new((w, h), bytes))
            .unwrap();
    }
    drop(ds);
    let src = open(&p);
    assert_eq!(src.band(), BandChoice::Band(1));
    assert!(
        src.describe().contains("dataset's mask"),
        "{}",
        src.describe()
    );
    assert!(src.describe().contains("not tagged red, green, blue"));
    let img = src.read(1).unwrap();
    assert_eq!(img.valid, valid);
    let dec = src.read(3).unwrap();
    let (want, ok) = block_means(&data, &valid, w, h, 3);
    assert_eq!(valid_of(&dec), ok);
    assert_close(&dec.pixels, &want, 1e-5, "mask");
}

// ---------------------------------------------------------------------------------------------
// Memory.

#[test]
fn a_large_sparse_mosaic_is_read_in_bounded_strips() {
    // 30 000 × 30 000 px (900 MB at full resolution), sparse: only a few tiles are written, the
    // rest are no data. The read at 1/16 holds no buffer larger than STRIP_PIXELS.
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("mosaic.tif");
    let n = 30_000;
    let driver = DriverManager::get_driver_by_name("GTiff").unwrap();
    let opts = CslStringList::from_iter([
        "TILED=YES",
        "BLOCKXSIZE=256",
        "BLOCKYSIZE=256",
        "SPARSE_OK=TRUE",
        "COMPRESS=DEFLATE",
    ]);
    {
        let mut ds = driver
            .create_with_band_type_with_options::<u8, _>(&p, n, n, 1, &opts)
            .unwrap();
        ds.set_geo_transform(&GT).unwrap();
        let mut b = ds.rasterband(1).unwrap();
        b.set_no_data_value(Some(0.0)).unwrap();
        // One 512 × 512 patch of value 100 at (4096, 8192).
        b.write(
            (4096, 8192),
            (512, 512),
            &mut Buffer::new((512, 512), vec![100u8; 512 * 512]),
        )
        .unwrap();
    }
    assert!(std::fs::metadata(&p).unwrap().len() < 10_000_000);
    let src = open(&p);
    let plan = src.plan(16).unwrap();
    assert_eq!(plan.level, ReadLevel::Averaged);
    assert_eq!((plan.width, plan.height), (1875, 1875));
    assert!(plan.strip_source_pixels <= STRIP_PIXELS, "{plan:?}");
    assert!(plan.rows_per_strip >= 1 && plan.strip_source_pixels * 100 < n * n);
    let img = src.read(16).unwrap();
    let valid = valid_of(&img);
    assert_eq!(valid.iter().filter(|v| **v).count(), 32 * 32);
    assert!(img.is_valid(4096 / 16, 8192 / 16) && img.at(4096 / 16, 8192 / 16) == 100.0);
    assert!(!img.is_valid(4096 / 16 - 1, 8192 / 16));
}

// ---------------------------------------------------------------------------------------------
// Band choices and refusals.

fn raster_error(r: Result<RasterSource, IngestError>) -> (RasterError, String) {
    match r {
        Err(IngestError::Raster(e)) => {
            let s = e.to_string();
            (e, s)
        }
        Err(e) => panic!("another error: {e}"),
        Ok(_) => panic!("accepted"),
    }
}

#[test]
fn band_choices_and_their_refusals() {
    let dir = tempfile::tempdir().unwrap();
    let one = dir.path().join("one.tif");
    drop(write_tiff(&one, 8, 8, &[vec![1u8; 64]], &[], Some(GT)));
    let src = open(&one);
    assert_eq!(src.band(), BandChoice::Band(1));
    assert!(src.describe().contains("the only band"));
    let (e, s) = raster_error(RasterSource::open(&one, Some(BandChoice::Band(2))));
    assert!(
        matches!(
            e,
            RasterError::NoSuchBand {
                band: 2,
                count: 1,
                ..
            }
        ),
        "{s}"
    );
    assert!(
        s.contains("one.tif") && s.contains("numbered from 1"),
        "{s}"
    );
    let (_, s) = raster_error(RasterSource::open(&one, Some(BandChoice::Luminance)));
    assert!(
        s.contains("three bands") && s.contains("by its number"),
        "{s}"
    );

    let rgb = dir.path().join("rgb.tif");
    let bands = vec![vec![10u8; 64], vec![20u8; 64], vec![30u8; 64]];
    drop(write_tiff(
        &rgb,
        8,
        8,
        &bands,
        &["PHOTOMETRIC=RGB"],
        Some(GT),
    ));
    let src = open(&rgb);
    assert_eq!(src.band(), BandChoice::Luminance);
    assert_eq!(
        src.describe(),
        format!(
            "{} (GTiff): 8 × 8 px, 3 bands of Byte, pixel size 0.25 map units, with no CRS; read as the luminance of bands 1-3 as red, green, blue with ITU-R BT.709 weights (the default for an image whose bands 1-3 are red, green, blue); every pixel valid (no no-data value, mask or alpha band)",
            rgb.display()
        )
    );
    let want = (0.2126 * 10.0 + 0.7152 * 20.0 + 0.0722 * 30.0) as f32;
    assert!((src.read(2).unwrap().at(1, 1) - want).abs() < 1e-4);

    let survey = SurveyInput {
        band: Some(BandChoice::Band(3)),
        ..SurveyInput::new(rgb.clone())
    };
    let src = open_raster(&survey).unwrap();
    assert_eq!(src.read_window(0, 0, 2, 2).unwrap().pixels, vec![30.0; 4]);
    assert!(src.describe().contains("band 3 of 3 (as asked)"));
}

#[test]
fn images_not_on_a_map_grid_are_refused_and_say_what_to_do() {
    let dir = tempfile::tempdir().unwrap();
    let bare = dir.path().join("bare.tif");
    drop(write_tiff(&bare, 8, 8, &[vec![1u8; 64]], &[], None));
    let (e, s) = raster_error(RasterSource::open(&bare, None));
    assert!(matches!(e, RasterError::NotGeoreferenced { .. }));
    assert!(
        s.contains("bare.tif") && s.contains("no georeferencing") && s.contains("world file"),
        "{s}"
    );

    let gcps = dir.path().join("gcps.tif");
    let ds = write_tiff(&gcps, 8, 8, &[vec![1u8; 64]], &[], None);
    let points = (0..4)
        .map(|i| gdal::Gcp {
            id: i.to_string(),
            info: String::new(),
            pixel: f64::from(i % 2) * 8.0,
            line: f64::from(i / 2) * 8.0,
            x: 500_000.0 + f64::from(i % 2) * 2.0,
            y: 6_000_000.0 - f64::from(i / 2) * 2.0,
            z: 0.0,
        })
        .collect();
    ds.set_gcps(points, &SpatialRef::from_epsg(32633).unwrap())
        .unwrap();
    drop(ds);
    // Four GCPs that an affine fits exactly: that affine is the geotransform (see
    // tests/raster_georef.rs for GCP-only images end to end).
    let src = RasterSource::open(&gcps, None).unwrap_or_else(|e| panic!("{e}"));
    let g = src.info().geotransform.0;
    let want = [500_000.0, 0.25, 0.0, 6_000_000.0, 0.0, -0.25];
    assert!(
        g.iter().zip(&want).all(|(a, b)| (a - b).abs() < 1e-9),
        "{g:?}"
    );
    assert!(src.describe().contains("first-order (affine) fit"));
    assert!(src.pixel_map().is_none());

    let singular = dir.path().join("singular.tif");
    drop(write_tiff(
        &singular,
        8,
        8,
        &[vec![1u8; 64]],
        &[],
        Some([0.0, 1.0, 2.0, 0.0, 0.5, 1.0]),
    ));
    let (e, _) = raster_error(RasterSource::open(&singular, None));
    assert!(matches!(e, RasterError::SingularGeotransform { .. }));
}

#[test]
fn reads_outside_the_image_and_vector_files_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("small.tif");
    drop(write_tiff(&p, 10, 6, &[vec![1u8; 60]], &[], Some(GT)));
    let src = open(&p);
    for d in [0, 7, 100] {
        let e = src.read(d).expect_err("refused");
        assert!(
            matches!(e, IngestError::Raster(RasterError::BadDecimation { .. })),
            "{d}: {e}"
        );
    }
    assert_eq!(src.read(6).unwrap().width, 1);
    for (p0, l0, w, h) in [
        (0, 0, 11, 1),
        (9, 5, 2, 1),
        (0, 0, 0, 3),
        (usize::MAX, 0, 2, 2),
    ] {
        let e = src.read_window(p0, l0, w, h).expect_err("refused");
        assert!(e.to_string().contains("not inside the image"), "{e}");
    }
    assert!(src.read_window(9, 5, 1, 1).is_ok());

    let geojson = dir.path().join("points.geojson");
    std::fs::write(
        &geojson,
        r#"{"type":"FeatureCollection","features":[{"type":"Feature","properties":{},"geometry":{"type":"Point","coordinates":[1,2]}}]}"#,
    )
    .unwrap();
    let (e, s) = raster_error(RasterSource::open(&geojson, None));
    assert!(matches!(e, RasterError::NotRaster { .. }), "{s}");
    assert!(
        s.contains("GeoJSON") && s.contains("not a raster image"),
        "{s}"
    );

    let garbage = dir.path().join("garbage.tif");
    std::fs::write(&garbage, b"II*\0 not really a TIFF").unwrap();
    let (e, s) = raster_error(RasterSource::open(&garbage, None));
    assert!(matches!(e, RasterError::Unreadable { .. }), "{s}");
    assert!(
        s.contains("garbage.tif") && s.contains("not an image GDAL can read"),
        "{s}"
    );
    let missing = RasterSource::open(&dir.path().join("nowhere.tif"), None).unwrap_err();
    assert!(matches!(missing, IngestError::NotFound { .. }), "{missing}");
}

#[test]
fn the_band_key_of_a_survey_takes_a_number_or_luminance() {
    let parse = |text: &str| toml::from_str::<SurveyInput>(text);
    let s = parse("path = \"a.tif\"\nband = 2\n").unwrap();
    assert_eq!(s.band, Some(BandChoice::Band(2)));
    let s = parse("path = \"a.tif\"\nband = \"luminance\"\n").unwrap();
    assert_eq!(s.band, Some(BandChoice::Luminance));
    assert_eq!(parse("path = \"a.tif\"\n").unwrap().band, None);
    for bad in [
        "band = 0",
        "band = -2",
        "band = \"red\"",
        "band = 1.5",
        "bands = 2",
    ] {
        assert!(
            parse(&format!("path = \"a.tif\"\n{bad}\n")).is_err(),
            "{bad}"
        );
    }
    // Round trip through the serialised form.
    for b in [BandChoice::Band(4), BandChoice::Luminance] {
        let input = SurveyInput {
            band: Some(b),
            ..SurveyInput::new(PathBuf::from("x.tif"))
        };
        let text = toml::to_string(&input).unwrap();
        assert_eq!(parse(&text).unwrap(), input, "{text}");
    }
}

#[test]
fn gdal_average_resampling_rounds_integer_bands_which_is_why_the_reader_averages_itself() {
    // The reason for ReadLevel::Averaged (seen with GDAL 3.6.2): GDAL's decimated RasterIO with
    // average resampling into an f32 buffer gives whole numbers for a UInt16 band, where the
    // block means are not. If GDAL ever stops rounding, this fails and the doc is out of date.
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("u16.tif");
    let data: Vec<u16> = (0..16 * 16).map(|i| (i * 7 % 13) as u16).collect();
    let ds = write_tiff(&p, 16, 16, std::slice::from_ref(&data), &[], Some(GT));
    let band = ds.rasterband(1).unwrap();
    let mut gdal_avg = vec![0f32; 16];
    band.read_into_slice::<f32>(
        (0, 0),
        (16, 16),
        (4, 4),
        &mut gdal_avg,
        Some(gdal::raster::ResampleAlg::Average),
    )
    .unwrap();
    let as_f32: Vec<f32> = data.iter().map(|&v| f32::from(v)).collect();
    let (mean, _) = block_means(&as_f32, &[], 16, 16, 4);
    assert!(gdal_avg.iter().all(|v| v.fract() == 0.0), "{gdal_avg:?}");
    assert!(mean.iter().any(|v| v.fract() != 0.0));
    drop(ds);
    let ours = open(&p).read(4).unwrap();
    assert_close(&ours.pixels, &mean, 1e-6, "reader");
}
