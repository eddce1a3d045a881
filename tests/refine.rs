//! Area-based refinement (`tiemark::refine`) on real imagery: the Landsat 7 ETM+ sample scene
//! that Debian's package r-cran-stars ships (see `tests/data/README.md`; `bash .ci/setup`
//! fetches it into `target/reference-data/`).
//!
//! The target images are bands of the scene shifted by known sub-pixel amounts with the
//! Fourier shift theorem (exact for a band-limited periodic image; the band is mirrored to
//! twice its size first so that its periodic extension has no seam), not with the
//! refinement's own interpolator.

use rustfft::num_complex::Complex64;
use rustfft::FftPlanner;
use tiemark::fit::similarity::Similarity;
use tiemark::image::{GeoTransform, Image};
use tiemark::refine::{refine_all, refine_point, Measure, NotRefined, RefineParams, Side};

/// The scene's six bands (ETM+ bands 1, 2, 3, 4, 5, 7), in file order.
fn landsat() -> Vec<Image> {
    let path =
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("target/reference-data/L7_ETMs.tif");
    assert!(
        path.is_file(),
        "{} is missing: run `bash .ci/setup` to fetch it (Debian package r-cran-stars)",
        path.display()
    );
    let ds = gdal::Dataset::open(&path).unwrap_or_else(|e| {
        panic!(
            "cannot open {}: {e}; run `bash .ci/setup` again",
            path.display()
        )
    });
    let gt = GeoTransform(ds.geo_transform().expect("geotransform"));
    (1..=ds.raster_count())
        .map(|b| {
            let band = ds.rasterband(b).expect("band");
            let (w, h) = band.size();
            let (_, data) = band
                .read_as::<f32>((0, 0), (w, h), (w, h), None)
                .expect("read band")
                .into_shape_and_vec();
            let mut img = Image::new(w, h, data, gt);
            if let Some(nd) = band.no_data_value() {
                img.valid = img.pixels.iter().map(|&v| f64::from(v) != nd).collect();
            }
            img
        })
        .collect()
}

/// In-place 2-D FFT of a `w × h` row-major buffer.
fn fft2(buf: &mut [Complex64], w: usize, h: usize, inverse: bool) {
    let mut planner = FftPlanner::new();
    let (row, col) = if inverse {
        (planner.plan_fft_inverse(w), planner.plan_fft_inverse(h))
    } else {
        (planner.plan_fft_forward(w), planner.plan_fft_forward(h))
    };
    row.process(buf);
    let mut t = vec![Complex64::default(); w * h];
    for r in 0..h {
        for c in 0..w {
            t[c * h + r] = buf[r * w + c];
        }
    }
    col.process(&mut t);
    for r in 0..h {
        for c in 0..w {
            buf[r * w + c] = t[c * h + r];
        }
    }
}

/// The image with its content moved by (dx, dy) samples: out(x) = in(x − d), by the Fourier
/// shift theorem on the band mirrored to 2w × 2h.
fn fourier_shift(img: &Image, dx: f64, dy: f64) -> Image {
    let (w, h) = (img.width, img.height);
    let (n, m) = (2 * w, 2 * h);
    let mut buf = vec![Complex64::default(); n * m];
    for r in 0..m {
        for c in 0..n {
            let sc = if c < w { c } else { 2 * w - 1 - c };
            let sr = if r < h { r } else { 2 * h - 1 - r };
            buf[r * n + c] = Complex64::new(f64::from(img.at(sc, sr)), 0.0);
        }
    }
    fft2(&mut buf, n, m, false);
    let freq = |k: usize, len: usize| {
        if k <= len / 2 {
            k as f64 / len as f64
        } else {
            k as f64 / len as f64 - 1.0
        }
    };
    for r in 0..m {
        for c in 0..n {
            let phase = -2.0 * std::f64::consts::PI * (freq(c, n) * dx + freq(r, m) * dy);
            buf[r * n + c] *= Complex64::from_polar(1.0, phase);
        }
    }
    fft2(&mut buf, n, m, true);
    let scale = 1.0 / (n * m) as f64;
    let pixels = (0..w * h)
        .map(|i| (buf[(i / w) * n + i % w].re * scale) as f32)
        .collect();
    Image::new(w, h, pixels, img.geotransform)
}

/// Reference map positions on a grid of sample centres, `margin` samples from the edges.
fn grid(img: &Image, margin: usize, step: usize) -> Vec<[f64; 2]> {
    let mut out = Vec::new();
    for r in (margin..img.height - margin).step_by(step) {
        for c in (margin..img.width - margin).step_by(step) {
            out.push(img.geotransform.sample_to_map(c as f64, r as f64));
        }
    }
    out
}

/// The target as a georeferenced copy of `img` moved by (`ox`, `oy`) map units, and the
/// similarity that maps it back onto the reference.
fn moved(img: Image, ox: f64, oy: f64) -> (Image, Similarity) {
    let g = img.geotransform.0;
    let target = Image {
        geotransform: GeoTransform([g[0] + ox, g[1], g[2], g[3] + oy, g[4], g[5]]),
        ..img
    };
    (
        target,
        Similarity {
            tx: -ox,
            ty: -oy,
            ..Similarity::IDENTITY
        },
    )
}

/// Errors (refined − true shift, in samples) of the kept points and the count refused.
fn errors(
    reference: &Image,
    target: &Image,
    t: &Similarity,
    points: &[[f64; 2]],
    truth: [f64; 2],
    params: &RefineParams,
) -> (Vec<f64>, usize) {
    let mut errs = Vec::new();
    let mut refused = 0;
    for r in refine_all(reference, target, t, points, params) {
        match r {
            Ok(r) => errs.push((r.shift_px[0] - truth[0]).hypot(r.shift_px[1] - truth[1])),
            Err(_) => refused += 1,
        }
    }
    (errs, refused)
}

#[test]
fn known_sub_pixel_shifts_are_recovered_in_the_red_and_the_near_infrared() {
    // Each band against its own shifted copy: the true shift is exactly the one applied.
    let bands = landsat();
    assert_eq!(bands.len(), 6, "the ETM+ sample scene has six bands");
    let params = RefineParams::default();
    for (band, name) in [(2, "red (ETM+ band 3)"), (3, "near infrared (band 4)")] {
        let reference = &bands[band];
        let points = grid(reference, 40, 45);
        for truth in [[0.3, -0.45], [-0.5, 0.2], [1.7, 0.85]] {
            let shifted = fourier_shift(&bands[band], truth[0], truth[1]);
            let (target, t) = moved(shifted, 1234.5, -987.0);
            let (errs, refused) = errors(reference, &target, &t, &points, truth, &params);
            assert!(
                errs.len() * 10 >= points.len() * 8,
                "{name} {truth:?}: only {} of {} kept",
                errs.len(),
                points.len()
            );
            let worst = errs.iter().cloned().fold(0.0, f64::max);
            assert!(
                worst <= 0.1,
                "{name} {truth:?}: worst error {worst:.3} px ({refused} refused)"
            );
        }
    }
}

/// Red reference, near-infrared target, content moved by `truth`: the errors of the kept
/// points. The two bands differ in content (vegetation is dark in red, bright in near infrared)
/// and in their own registration, so each point's shift is measured once unshifted (its
/// baseline) and the known shift is checked against the change.
fn red_to_near_infrared(params: &RefineParams, truth: [f64; 2]) -> Vec<f64> {
    let bands = landsat();
    let (reference, nir) = (&bands[2], &bands[3]);
    let points = grid(reference, 40, 20);
    let (target, t) = moved(nir.clone(), 300.0, -600.0);
    let base: Vec<Option<[f64; 2]>> = refine_all(reference, &target, &t, &points, params)
        .into_iter()
        .map(|r| r.ok().map(|r| r.shift_px))
        .collect();
    let (target, t) = moved(fourier_shift(nir, truth[0], truth[1]), 300.0, -600.0);
    let mut rel = Vec::new();
    for (r, b) in refine_all(reference, &target, &t, &points, params)
        .into_iter()
        .zip(&base)
    {
        if let (Ok(r), Some(b)) = (r, b) {
            rel.push((r.shift_px[0] - b[0] - truth[0]).hypot(r.shift_px[1] - b[1] - truth[1]));
        }
    }
    assert!(
        rel.len() >= 10,
        "only {} of {} points kept in both",
        rel.len(),
        points.len()
    );
    rel.sort_by(f64::total_cmp);
    rel
}

#[test]
fn known_sub_pixel_shifts_are_recovered_from_red_to_near_infrared() {
    // The default (orientation correlation): each kept point within 0.1 sample rms.
    let rel = red_to_near_infrared(&RefineParams::default(), [0.35, -0.6]);
    let rms = (rel.iter().map(|e| e * e).sum::<f64>() / rel.len() as f64).sqrt();
    assert!(
        rms <= 0.1,
        "rms error {rms:.3} px over {} points",
        rel.len()
    );
}

/// The bias of the sub-pixel peak fit, one pass against the default passes (not a check; the
/// module doc records it): `cargo test --test refine -- --ignored --nocapture peak_fit_bias`.
#[test]
#[ignore]
fn peak_fit_bias() {
    let bands = landsat();
    let reference = &bands[2];
    let points = grid(reference, 40, 30);
    for sub in [
        tiemark::refine::SubPixel::Parabola,
        tiemark::refine::SubPixel::Gaussian,
    ] {
        for passes in [1, 4] {
            let params = RefineParams {
                subpixel: sub,
                max_iterations: passes,
                ..RefineParams::default()
            };
            let mut line = format!("{sub:?} passes {passes}:");
            for f in [0.1, 0.2, 0.3, 0.4, 0.5] {
                let (target, t) = moved(fourier_shift(reference, f, 0.0), 0.0, 0.0);
                let (mut sum, mut n) = (0.0, 0);
                for r in refine_all(reference, &target, &t, &points, &params)
                    .into_iter()
                    .flatten()
                {
                    sum += r.shift_px[0] - f;
                    n += 1;
                }
                line += &format!("  {f}: {:+.3} ({n})", sum / n.max(1) as f64);
            }
            println!("{line}");
        }
    }
}

#[test]
fn the_refined_target_position_and_shift_in_metres_agree() {
    let bands = landsat();
    let reference = &bands[2];
    let truth = [0.6, -1.3];
    let (target, t) = moved(fourier_shift(&bands[2], truth[0], truth[1]), 500.0, 250.0);
    let at = reference.geotransform.sample_to_map(170.0, 180.0);
    let r = refine_point(reference, &target, &t, at, &RefineParams::default()).expect("kept");
    // Content moved by +d samples: the point's target position is d samples (28.5 m each,
    // east and south on this north-up grid) from the prediction.
    let px = reference.geotransform.pixel_size();
    assert!((px - 28.5).abs() < 1e-9, "pixel size {px}");
    assert!((r.shift_map[0] - truth[0] * px).abs() <= 0.1 * px, "{r:?}");
    assert!((r.shift_map[1] + truth[1] * px).abs() <= 0.1 * px, "{r:?}");
    let back = t.apply(r.target);
    assert!((back[0] - (at[0] + r.shift_map[0])).abs() < 1e-6);
    assert!((back[1] - (at[1] + r.shift_map[1])).abs() < 1e-6);
    assert_eq!(r.predicted_target, t.inverse().apply(at));
    assert_eq!(r.correlation, r.clarity.peak);
}

#[test]
fn unrelated_imagery_is_not_kept() {
    let bands = landsat();
    let reference = &bands[2];
    // The transform is off by 60 samples (far beyond the search range): every window shows
    // another part of the scene.
    let (target, t) = moved(bands[3].clone(), 60.0 * 28.5, -60.0 * 28.5);
    let t = Similarity {
        tx: t.tx + 60.0 * 28.5 * 2.0,
        ..t
    };
    let params = RefineParams::default();
    let points = grid(reference, 40, 30);
    let results = refine_all(reference, &target, &t, &points, &params);
    let attempted = results
        .iter()
        .filter(|r| !matches!(r, Err(NotRefined::OutsideTarget)))
        .count();
    assert!(
        attempted >= 20,
        "only {attempted} windows inside the target"
    );
    let kept = results.iter().filter(|r| r.is_ok()).count();
    assert!(
        kept * 50 <= attempted,
        "{kept} of {attempted} unrelated patches kept"
    );
    // Noise: a target of seeded uniform noise.
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(8);
    let noise = Image::new(
        reference.width,
        reference.height,
        (0..reference.width * reference.height)
            .map(|_| rng.gen_range(0.0..255.0))
            .collect(),
        reference.geotransform,
    );
    let kept = refine_all(reference, &noise, &Similarity::IDENTITY, &points, &params)
        .iter()
        .filter(|r| r.is_ok())
        .count();
    assert_eq!(kept, 0, "noise kept at {kept} points");
}

#[test]
fn invalid_samples_are_refused_and_named() {
    let bands = landsat();
    let reference = &bands[2];
    let params = RefineParams::default();
    let at = reference.geotransform.sample_to_map(150.0, 160.0);
    let mut target = fourier_shift(&bands[2], 0.25, 0.25);
    assert!(refine_point(reference, &target, &Similarity::IDENTITY, at, &params).is_ok());
    // One invalid sample in the target window, a few samples from the point.
    target.valid = vec![true; target.width * target.height];
    target.valid[163 * target.width + 147] = false;
    match refine_point(reference, &target, &Similarity::IDENTITY, at, &params) {
        Err(
            e @ NotRefined::InvalidSamples {
                side: Side::Target,
                count,
            },
        ) => {
            assert!(count >= 1);
            assert!(
                e.to_string().contains("of the target patch are not valid"),
                "{e}"
            );
        }
        other => panic!("expected invalid target samples, got {other:?}"),
    }
    // One in the reference patch.
    let mut masked = reference.clone();
    masked.valid = vec![true; masked.width * masked.height];
    masked.valid[155 * masked.width + 152] = false;
    let clean = fourier_shift(&bands[2], 0.25, 0.25);
    match refine_point(&masked, &clean, &Similarity::IDENTITY, at, &params) {
        Err(NotRefined::InvalidSamples {
            side: Side::Reference,
            count: 1,
        }) => {}
        other => panic!("expected one invalid reference sample, got {other:?}"),
    }
    // Near the edge: the patch does not fit.
    let edge = reference.geotransform.sample_to_map(5.0, 160.0);
    assert_eq!(
        refine_point(reference, &clean, &Similarity::IDENTITY, edge, &params),
        Err(NotRefined::OutsideReference)
    );
}

/// The measurement behind the module doc's table and the default thresholds (not a check):
/// `cargo test --test refine -- --ignored --nocapture measurement`. Environment:
/// `TIEMARK_PATCH` (patch side), `TIEMARK_ITER` (passes), `TIEMARK_FIT` (`gaussian`),
/// `TIEMARK_MEASURES` (names, comma-separated).
///
/// For each band pair the scene is refined once unshifted (the bands' own misregistration and
/// content differences give each point a baseline shift) and then at known shifts; "rel" is the
/// error of (shift − baseline) against the known shift, "abs" of the shift itself.
#[test]
#[ignore]
fn measurement() {
    let bands = landsat();
    let env = |k: &str, d: usize| {
        std::env::var(k)
            .ok()
            .and_then(|v| v.parse().ok())
            .unwrap_or(d)
    };
    let wanted = std::env::var("TIEMARK_MEASURES").unwrap_or_default();
    let names = ["B1", "B2", "B3", "B4", "B5", "B7"];
    // (reference band, target band): same band, and pairs across the spectrum.
    let pairs = [(2, 2), (2, 3), (1, 4), (0, 3), (3, 5), (2, 4)];
    let shifts = [[0.3, -0.45], [-0.5, 0.2], [1.7, -2.35]];
    let pct = |v: &mut Vec<f64>, q: f64| {
        v.sort_by(f64::total_cmp);
        if v.is_empty() {
            f64::NAN
        } else {
            v[((v.len() - 1) as f64 * q).round() as usize]
        }
    };
    let rms = |v: &[f64]| (v.iter().map(|x| x * x).sum::<f64>() / v.len() as f64).sqrt();
    for measure in Measure::ALL {
        if !wanted.is_empty() && !wanted.split(',').any(|w| w == measure.name()) {
            continue;
        }
        let mut params = RefineParams::for_measure(measure);
        params.patch_px = env("TIEMARK_PATCH", params.patch_px);
        params.max_iterations = env("TIEMARK_ITER", params.max_iterations);
        if std::env::var("TIEMARK_FIT").as_deref() == Ok("gaussian") {
            params.subpixel = tiemark::refine::SubPixel::Gaussian;
        }
        let keep = |c: &tiemark::refine::Clarity| {
            c.peak >= params.min_peak
                && c.ratio >= params.min_ratio
                && c.curvature >= params.min_curvature
        };
        let mut open = params;
        open.min_peak = f64::NEG_INFINITY;
        open.min_ratio = f64::NEG_INFINITY;
        open.min_curvature = f64::NEG_INFINITY;
        let (mut tp, mut tr, mut tc, mut fp, mut fr, mut fc) =
            (vec![], vec![], vec![], vec![], vec![], vec![]);
        println!(
            "\n{} (patch {}, passes {}, {:?}): thresholds peak {} ratio {} curvature {}",
            measure.name(),
            params.patch_px,
            params.max_iterations,
            params.subpixel,
            params.min_peak,
            params.min_ratio,
            params.min_curvature
        );
        println!(
            "pair    kept%  rel: rms   p95   max | abs: rms  p95 | bias x, y | false kept% (tried)"
        );
        for &(rb, tb) in &pairs {
            let reference = &bands[rb];
            let points = grid(reference, 40, 20);
            let (target, t) = moved(bands[tb].clone(), 300.0, -600.0);
            let base: Vec<Option<[f64; 2]>> = refine_all(reference, &target, &t, &points, &open)
                .into_iter()
                .map(|r| r.ok().filter(|r| keep(&r.clarity)).map(|r| r.shift_px))
                .collect();
            let (mut kept, mut tried, mut rel, mut abs, mut bias) =
                (0, 0, vec![], vec![], [0.0; 2]);
            for truth in shifts {
                let (target, t) =
                    moved(fourier_shift(&bands[tb], truth[0], truth[1]), 300.0, -600.0);
                for (i, r) in refine_all(reference, &target, &t, &points, &open)
                    .into_iter()
                    .enumerate()
                {
                    tried += 1;
                    let Ok(r) = r else { continue };
                    let c = r.clarity;
                    let (ex, ey) = (r.shift_px[0] - truth[0], r.shift_px[1] - truth[1]);
                    if ex.hypot(ey) < 0.5 {
                        tp.push(c.peak);
                        tr.push(c.ratio);
                        tc.push(c.curvature);
                    }
                    if keep(&c) {
                        kept += 1;
                        abs.push(ex.hypot(ey));
                        bias[0] += ex;
                        bias[1] += ey;
                        if let Some(b) = base[i] {
                            rel.push((ex - b[0]).hypot(ey - b[1]));
                        }
                    }
                }
            }
            // Unrelated: the transform 60 and 45 samples off.
            let (target, t) = moved(bands[tb].clone(), 0.0, 0.0);
            let t = Similarity {
                tx: t.tx + 60.0 * 28.5,
                ty: t.ty - 45.0 * 28.5,
                ..t
            };
            let (mut ftried, mut fkept) = (0, 0);
            for r in refine_all(reference, &target, &t, &points, &open) {
                let c = match &r {
                    Ok(r) => r.clarity,
                    Err(NotRefined::Unclear { clarity, .. }) => *clarity,
                    _ => continue,
                };
                ftried += 1;
                fp.push(c.peak);
                fr.push(c.ratio);
                fc.push(c.curvature);
                if r.is_ok() && keep(&c) {
                    fkept += 1;
                }
            }
            let n = abs.len().max(1) as f64;
            println!(
                "{}->{}  {:5.1}  {:6.3} {:5.3} {:5.3} | {:5.3} {:5.3} | {:+5.2} {:+5.2} | {:4.1} ({ftried})",
                names[rb], names[tb], 100.0 * kept as f64 / tried as f64,
                rms(&rel), pct(&mut rel, 0.95), pct(&mut rel, 1.0),
                rms(&abs), pct(&mut abs, 0.95), bias[0] / n, bias[1] / n,
                100.0 * fkept as f64 / ftried.max(1) as f64,
            );
        }
        for (name, t, f) in [
            ("peak", &mut tp, &mut fp),
            ("ratio", &mut tr, &mut fr),
            ("curvature", &mut tc, &mut fc),
        ] {
            println!(
                "{name:9}: true p1 {:.3} p5 {:.3} p50 {:.3} | unrelated p50 {:.3} p95 {:.3} p99 {:.3} max {:.3}",
                pct(t, 0.01), pct(t, 0.05), pct(t, 0.5), pct(f, 0.5), pct(f, 0.95), pct(f, 0.99), pct(f, 1.0)
            );
        }
    }
}
