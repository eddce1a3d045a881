//! The area-based seed of a raster match: when the keypoints of two raster surveys do not
//! recur (another season, another sun, another band), the transform is searched on the
//! images themselves, then control points are made on a grid of patches and fitted robustly.
//!
//! **In:** both raster surveys (opened by [`crate::ingest`]), on the working CRS, the bounds
//! the target's georeferencing sets ([`crate::fit::prior::Prior`]: largest shift, rotation,
//! scale error), the fit and refinement options. **Out:** an [`AreaMatch`]: what the seed
//! search did ([`AreaSeed`], for the report and `transform.json`) and either a [`Solution`]
//! on new landmark sets — the grid points of the reference and where the correlation puts
//! them in the target, each with its keypoint record in [`RasterLandmarks::keypoints`] (the
//! file's pixel/line, σ = half the refinement patch, the correlation as the response) and a
//! layer name saying how many detected keypoints they replace — or a [`Rejection`] saying why
//! none was accepted.
//!
//! **When it runs** ([`crate::outcome::AREA_SEED_RULE`]): both surveys are rasters on the
//! working CRS and the keypoint match was rejected. When the keypoints match, the seed is not
//! needed and does not run (the report and `transform.json` say so).
//!
//! **Coarse search.** Both images are read through GDAL's overviews or averaged strips
//! ([`crate::ingest::RasterSource::read`]) at a common ground sample of about 1/[`COARSE_SIDE`]
//! of the target's footprint (never finer than the coarser image's pixels), so memory stays
//! bounded whatever the mosaic's size. For every similarity of a grid over the bounds —
//! rotations and scales about the target's centre in steps that move the footprint's corner by
//! at most one coarse sample — the target is resampled onto the reference's coarse grid and
//! the two images compared at every shift within the shift bound at once, by the FFT, with
//! orientation correlation (the mean cosine of the angle between the two images' gradient
//! directions: Fitch, Kadyrov, Christmas & Kittler, "Orientation correlation", BMVC 2002),
//! the registration of the whole image by the correlation theorem as in Reddy & Chatterji,
//! "An FFT-based technique for translation, rotation, and scale-invariant image
//! registration", IEEE TIP 5(8), 1996 (rotation and scale here searched on a grid within the
//! bounds rather than in log-polar form: the bounds are a few degrees and a few parts per
//! thousand). Orientation correlation keeps only the direction of the gradient, so the
//! brightness, gain and most changes of colour between epochs do not matter; a contrast
//! reversed everywhere would turn the peak into a trough, so the doubled angle (blind to the
//! sign) is used where [`crate::refine::Measure::AxialOrientation`] is the refinement's
//! measure. The [`SEEDS`] best distinct peaks (apart by more than three coarse samples at a
//! corner of the target) become seeds.
//!
//! **Control points and the robust fit.** For each seed, points on a spatially even grid of
//! the reference (about [`GRID_POINTS`], no closer than three quarters of a patch) inside the
//! target's footprint are refined on the pixels ([`crate::refine`], the match's measure and
//! thresholds, its search widened to cover the coarse sample), and the refined pairs are
//! fitted by RANSAC over two-point similarities with the seed itself as the first hypothesis,
//! refitted on the consensus until it stops changing (the local optimisation of LO-RANSAC,
//! Chum, Matas & Kittler, DAGM 2003). The inlier tolerance is one sample of the refinement's
//! reference grid. The seed whose fit has the largest support is chosen; then the tool's
//! acceptance rules apply as to a keypoint match: at least `fit.min_control_points` control
//! points; the significance test ([`crate::fit::significance`]) against chance — a patch of
//! unrelated content that passes the refinement's keep test has its peak anywhere in the
//! search square of (2s + 1)² samples, so it lands within the tolerance τ of a transform with
//! probability p₀ = πτ²/(2s + 1)², over the grid points where a peak was sought, with every
//! coarse shift and similarity and RANSAC round counted as a hypothesis; inside the bounds;
//! and clearly ahead of the best other seed's support ([`crate::fit::prior::clearly_ahead`]),
//! else ambiguous.

use crate::config::MatchConfig;
use crate::fit::guided::Pair;
use crate::fit::prior::{self, Competitor, Prior};
use crate::fit::sample_count::sample_count;
use crate::fit::significance::Significance;
use crate::fit::similarity::{fit_similarity, similarity_from_two, Similarity};
use crate::fit::{RejectReason, Rejection, Solution};
use crate::image::Image;
use crate::ingest::{IngestError, LandmarkSet, RasterLandmarks};
use crate::keypoints::Keypoint;
use crate::outcome::{AreaSeed, SeedTried};
use crate::refine::{self, Measure, NotRefined, RefineParams};
use rand::{Rng, SeedableRng};
use rayon::prelude::*;
use rustfft::num_complex::Complex64;
use rustfft::{Fft, FftPlanner};
use std::sync::Arc;

/// The coarse search's grid spans about this many samples across the target's footprint.
pub const COARSE_SIDE: f64 = 320.0;
/// Distinct coarse peaks tried as seeds.
pub const SEEDS: usize = 3;
/// About this many grid points are refined per seed.
pub const GRID_POINTS: f64 = 400.0;
/// Largest coarse search domain, in samples (beyond it the bounds are too wide to search).
const MAX_DOMAIN: usize = 1 << 22;
/// Largest rotation bound searched, degrees.
const MAX_ROTATION_DEG: f64 = 20.0;

/// The area-based seed's result: what it did and the fit on its control points.
pub(super) struct AreaMatch {
    /// What the seed did.
    pub summary: AreaSeed,
    /// The fit on the grid control points (with the landmark sets it indexes:
    /// reference, target), or why none was accepted; `None` when the search did not get as
    /// far as control points.
    pub fit: Option<Result<(Solution, LandmarkSet, LandmarkSet), Rejection>>,
}

/// A coarse peak: the similarity it stands for and its score.
#[derive(Debug, Clone, Copy)]
struct Peak {
    transform: Similarity,
    score: f64,
}

/// One similarity's correlation surface: its best peaks inside the bounds (score, transform)
/// and the sums of its values, for the surface's spread.
struct Scan {
    peaks: Vec<(f64, Similarity)>,
    sum: f64,
    sum2: f64,
    count: usize,
}

/// What the coarse search found.
struct Coarse {
    /// Distinct peaks, best first.
    peaks: Vec<Peak>,
    /// Similarities × shifts compared.
    cells: usize,
    /// Similarities (rotation × scale steps) compared.
    hypotheses: usize,
    /// The coarse sample, working units.
    sample: f64,
    /// Robust z-score of the best peak over the whole surface.
    z: f64,
}

/// The unit gradient direction (doubled when `axial`) of each sample of a grid of
/// `w × h` values with validity, zero where a neighbour is invalid or the gradient vanishes.
fn orientations(v: &[f32], ok: &[bool], w: usize, h: usize, axial: bool) -> Vec<Complex64> {
    let mut out = vec![Complex64::default(); w * h];
    for r in 1..h.saturating_sub(1) {
        for c in 1..w.saturating_sub(1) {
            let i = r * w + c;
            if !(ok[i - 1] && ok[i + 1] && ok[i - w] && ok[i + w]) {
                continue;
            }
            let gx = f64::from(v[i + 1]) - f64::from(v[i - 1]);
            let gy = f64::from(v[i + w]) - f64::from(v[i - w]);
            let m = gx.hypot(gy);
            if m > 1e-9 {
                let u = Complex64::new(gx / m, gy / m);
                out[i] = if axial { u * u } else { u };
            }
        }
    }
    out
}

/// The smallest 2^a 3^b 5^c ≥ n (fast FFT sizes).
fn fast_size(n: usize) -> usize {
    (n.max(1)..)
        .find(|&m| {
            let mut k = m;
            for p in [2, 3, 5] {
                while k % p == 0 {
                    k /= p;
                }
            }
            k == 1
        })
        .expect("a smooth number exists")
}

/// 2-D FFT plans for `nx × ny` buffers (row-major).
struct Fft2 {
    nx: usize,
    ny: usize,
    x: Arc<dyn Fft<f64>>,
    y: Arc<dyn Fft<f64>>,
}

impl Fft2 {
    fn new(nx: usize, ny: usize, inverse: bool) -> Fft2 {
        let mut planner = FftPlanner::new();
        let (x, y) = if inverse {
            (planner.plan_fft_inverse(nx), planner.plan_fft_inverse(ny))
        } else {
            (planner.plan_fft_forward(nx), planner.plan_fft_forward(ny))
        };
        Fft2 { nx, ny, x, y }
    }

    /// Transforms `buf` in place (rows, then columns through a transposed copy).
    fn run(&self, buf: &mut [Complex64]) {
        let (nx, ny) = (self.nx, self.ny);
        let mut scratch = vec![
            Complex64::default();
            self.x
                .get_inplace_scratch_len()
                .max(self.y.get_inplace_scratch_len())
        ];
        self.x.process_with_scratch(buf, &mut scratch);
        let mut t = vec![Complex64::default(); nx * ny];
        for r in 0..ny {
            for c in 0..nx {
                t[c * ny + r] = buf[r * nx + c];
            }
        }
        self.y.process_with_scratch(&mut t, &mut scratch);
        for c in 0..nx {
            for r in 0..ny {
                buf[r * nx + c] = t[c * ny + r];
            }
        }
    }
}

/// `S(p) = centre + s·R(θ)·(p − centre)`.
fn about(centre: [f64; 2], scale: f64, rotation: f64) -> Similarity {
    let r = Similarity::from_params(scale, rotation, 0.0, 0.0);
    let c = r.apply(centre);
    Similarity {
        tx: centre[0] - c[0],
        ty: centre[1] - c[1],
        ..r
    }
}

/// True when `a` and `b` put some corner more than `d` apart.
fn differ(a: &Similarity, b: &Similarity, corners: &[[f64; 2]; 4], d: f64) -> bool {
    corners.iter().any(|&p| {
        let (u, v) = (a.apply(p), b.apply(p));
        (u[0] - v[0]).hypot(u[1] - v[1]) > d
    })
}

/// The map corners of an image's footprint.
fn footprint(img: &Image) -> [[f64; 2]; 4] {
    let g = &img.geotransform;
    let (w, h) = (img.width as f64, img.height as f64);
    [
        g.pixel_to_map(0.0, 0.0),
        g.pixel_to_map(w, 0.0),
        g.pixel_to_map(0.0, h),
        g.pixel_to_map(w, h),
    ]
}

/// The coarse search over the bounds (module doc). `Err`: why it cannot run, in words.
fn coarse_search(rimg: &Image, timg: &Image, prior: &Prior, axial: bool) -> Result<Coarse, String> {
    let g = rimg.geotransform.pixel_size();
    let rinv = rimg
        .geotransform
        .inverse()
        .ok_or("the reference's geotransform has no inverse")?;
    let tinv = timg
        .geotransform
        .inverse()
        .ok_or("the target's geotransform has no inverse")?;
    let corners = footprint(timg);
    let centre = prior.centre;
    let r_max = corners
        .iter()
        .map(|p| (p[0] - centre[0]).hypot(p[1] - centre[1]))
        .fold(0.0, f64::max)
        / g;
    if prior.max_rotation.to_degrees() > MAX_ROTATION_DEG {
        return Err(format!(
            "it searches rotations of at most {MAX_ROTATION_DEG}°; set fit.max_rotation_deg to at most that"
        ));
    }
    let max_scale = prior.max_scale_error.min(0.05);
    let shift_px = (prior.max_shift / g).min(8192.0);
    let m = shift_px.ceil() as i64 + 2;
    let slack = (r_max * (prior.max_rotation.sin() + max_scale)).ceil() as i64 + 2;
    // The domain: the target's footprint on the reference's coarse pixels, widened by the
    // shift bound and the rotation and scale slack.
    let px: Vec<[f64; 2]> = corners
        .iter()
        .map(|p| rinv.pixel_to_map(p[0], p[1]))
        .collect();
    let lo = |k: usize| px.iter().map(|p| p[k]).fold(f64::INFINITY, f64::min);
    let hi = |k: usize| px.iter().map(|p| p[k]).fold(f64::NEG_INFINITY, f64::max);
    let (x0, y0) = (
        lo(0).floor() as i64 - m - slack,
        lo(1).floor() as i64 - m - slack,
    );
    let (x1, y1) = (
        hi(0).ceil() as i64 + m + slack,
        hi(1).ceil() as i64 + m + slack,
    );
    let (dw, dh) = ((x1 - x0) as usize, (y1 - y0) as usize);
    if dw * dh > MAX_DOMAIN {
        return Err(format!(
            "the bounds make a search of {dw} × {dh} coarse samples, over {MAX_DOMAIN}; narrow fit.max_shift_m"
        ));
    }
    let (nx, ny) = (fast_size(dw), fast_size(dh));
    // The reference's orientations on the domain (zero outside the image or where invalid).
    let rok: Vec<bool> = (0..rimg.width * rimg.height)
        .map(|i| rimg.is_valid(i % rimg.width, i / rimg.width))
        .collect();
    let ro = orientations(&rimg.pixels, &rok, rimg.width, rimg.height, axial);
    let mut fa = vec![Complex64::default(); nx * ny];
    for j in 0..dh {
        for i in 0..dw {
            let (c, r) = (x0 + i as i64, y0 + j as i64);
            if c >= 0 && r >= 0 && (c as usize) < rimg.width && (r as usize) < rimg.height {
                fa[j * nx + i] = ro[r as usize * rimg.width + c as usize];
            }
        }
    }
    let forward = Fft2::new(nx, ny, false);
    let inverse = Fft2::new(nx, ny, true);
    forward.run(&mut fa);
    // The grid of similarities: steps that move the farthest corner by at most one sample.
    let step = 1.0 / r_max.max(1.0);
    let nr = (prior.max_rotation / step).ceil() as i64;
    let ns = if max_scale * r_max < 0.5 {
        0
    } else {
        (max_scale / step).ceil() as i64
    };
    let mut grid = Vec::new();
    for i in -nr..=nr {
        for j in -ns..=ns {
            let rot = if nr == 0 {
                0.0
            } else {
                prior.max_rotation * i as f64 / nr as f64
            };
            let sc = if ns == 0 {
                1.0
            } else {
                1.0 + max_scale * j as f64 / ns as f64
            };
            grid.push((rot, prior.unit_scale * sc));
        }
    }
    let origin = [x0 as f64, y0 as f64];
    let lin = |d: [f64; 2]| {
        let q = rimg.geotransform.0;
        [q[1] * d[0] + q[2] * d[1], q[4] * d[0] + q[5] * d[1]]
    };
    let results: Vec<Scan> = grid
        .par_iter()
        .map(|&(rot, sc)| {
            let s = about(centre, sc, rot);
            let inv = s.inverse();
            // The target resampled onto the domain through S.
            let mut v = vec![0f32; dw * dh];
            let mut ok = vec![false; dw * dh];
            let sp: Vec<[f64; 2]> = corners
                .iter()
                .map(|&p| {
                    let q = s.apply(p);
                    let u = rinv.pixel_to_map(q[0], q[1]);
                    [u[0] - origin[0], u[1] - origin[1]]
                })
                .collect();
            let b0 = |k: usize| {
                (sp.iter()
                    .map(|p| p[k])
                    .fold(f64::INFINITY, f64::min)
                    .floor() as i64
                    - 1)
                .max(0) as usize
            };
            let b1 = |k: usize, n: usize| {
                (sp.iter()
                    .map(|p| p[k])
                    .fold(f64::NEG_INFINITY, f64::max)
                    .ceil() as i64
                    + 1)
                .clamp(0, n as i64) as usize
            };
            for j in b0(1)..b1(1, dh) {
                for i in b0(0)..b1(0, dw) {
                    let mp = rimg
                        .geotransform
                        .pixel_to_map(origin[0] + i as f64 + 0.5, origin[1] + j as f64 + 0.5);
                    let q = inv.apply(mp);
                    let t = tinv.pixel_to_map(q[0], q[1]);
                    if let Some(val) = timg.bilinear(t[0] - 0.5, t[1] - 0.5) {
                        v[j * dw + i] = val as f32;
                        ok[j * dw + i] = true;
                    }
                }
            }
            let to = orientations(&v, &ok, dw, dh, axial);
            let n = to.iter().filter(|z| z.norm_sqr() > 0.0).count();
            let mut fb = vec![Complex64::default(); nx * ny];
            for j in 0..dh {
                fb[j * nx..j * nx + dw].copy_from_slice(&to[j * dw..(j + 1) * dw]);
            }
            forward.run(&mut fb);
            for (b, a) in fb.iter_mut().zip(&fa) {
                *b = a * b.conj();
            }
            inverse.run(&mut fb);
            let norm = 1.0 / ((nx * ny) as f64 * n.max(1) as f64);
            let at = |kx: i64, ky: i64| {
                let (c, r) = (
                    kx.rem_euclid(nx as i64) as usize,
                    ky.rem_euclid(ny as i64) as usize,
                );
                fb[r * nx + c].re * norm
            };
            let mut peaks: Vec<(f64, Similarity)> = Vec::new();
            let (mut sum, mut sum2, mut count) = (0.0, 0.0, 0usize);
            let k = m - 1;
            for ky in -k..=k {
                for kx in -k..=k {
                    let c0 = at(kx, ky);
                    sum += c0;
                    sum2 += c0 * c0;
                    count += 1;
                    if ky.abs() == k || kx.abs() == k {
                        continue;
                    }
                    let local = (-1..=1).all(|dy| {
                        (-1..=1).all(|dx| (dx == 0 && dy == 0) || at(kx + dx, ky + dy) < c0)
                    });
                    if !local || n == 0 {
                        continue;
                    }
                    // The sub-sample position: a parabola per axis.
                    let vtx = |a: f64, b: f64, c: f64| {
                        let d = a - 2.0 * b + c;
                        if d < 0.0 {
                            (0.5 * (a - c) / d).clamp(-0.5, 0.5)
                        } else {
                            0.0
                        }
                    };
                    let fx = vtx(at(kx - 1, ky), c0, at(kx + 1, ky));
                    let fy = vtx(at(kx, ky - 1), c0, at(kx, ky + 1));
                    let d = lin([kx as f64 + fx, ky as f64 + fy]);
                    let t = Similarity {
                        tx: s.tx + d[0],
                        ty: s.ty + d[1],
                        ..s
                    };
                    if prior.admits(&t) {
                        peaks.push((c0, t));
                    }
                }
            }
            peaks.sort_by(|a, b| b.0.total_cmp(&a.0));
            peaks.truncate(SEEDS * 2);
            Scan {
                peaks,
                sum,
                sum2,
                count,
            }
        })
        .collect();
    let (mut sum, mut sum2, mut count) = (0.0, 0.0, 0usize);
    let mut all: Vec<(f64, Similarity)> = Vec::new();
    for r in results {
        all.extend(r.peaks);
        sum += r.sum;
        sum2 += r.sum2;
        count += r.count;
    }
    all.sort_by(|a, b| b.0.total_cmp(&a.0));
    let mut peaks: Vec<Peak> = Vec::new();
    for (score, t) in all {
        if peaks
            .iter()
            .all(|p| differ(&p.transform, &t, &corners, 3.0 * g))
        {
            peaks.push(Peak {
                transform: t,
                score,
            });
            if peaks.len() == SEEDS {
                break;
            }
        }
    }
    let mean = sum / count.max(1) as f64;
    let sd = (sum2 / count.max(1) as f64 - mean * mean).max(0.0).sqrt();
    let z = peaks
        .first()
        .map_or(f64::NAN, |p| (p.score - mean) / sd.max(1e-12));
    Ok(Coarse {
        peaks,
        cells: count,
        hypotheses: grid.len(),
        sample: g,
        z,
    })
}

/// The robust fit of given pairs `from[i] → to[i]`: the seed, then two-point RANSAC, then
/// refits on the consensus. Returns (transform, inlier indices, rounds, best consensus before
/// refitting, refit rounds).
fn fit_pairs(
    from: &[[f64; 2]],
    to: &[[f64; 2]],
    start: Similarity,
    tolerance: f64,
    prior: &Prior,
    confidence: f64,
    seed: u64,
) -> (Similarity, Vec<usize>, usize, usize, usize) {
    let tol2 = tolerance * tolerance;
    let consensus = |s: &Similarity| -> Vec<usize> {
        (0..from.len())
            .filter(|&i| {
                let p = s.apply(from[i]);
                (p[0] - to[i][0]).powi(2) + (p[1] - to[i][1]).powi(2) < tol2
            })
            .collect()
    };
    let mut best = (start, consensus(&start));
    let n = from.len();
    let mut rounds = 0;
    if n >= 2 {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed ^ 0xa5ea_5eed);
        let cap = 2_000usize.min(n * (n - 1) / 2);
        while rounds < cap {
            let w = best.1.len() as f64 / n as f64;
            if rounds as u64 >= sample_count(confidence, w, 2) {
                break;
            }
            rounds += 1;
            let i = rng.gen_range(0..n);
            let j = rng.gen_range(0..n - 1);
            let j = if j >= i { j + 1 } else { j };
            let Some(s) = similarity_from_two([from[i], from[j]], [to[i], to[j]]) else {
                continue;
            };
            if !prior.admits(&s) {
                continue;
            }
            let c = consensus(&s);
            if c.len() > best.1.len() {
                best = (s, c);
            }
        }
    }
    let ransac_consensus = best.1.len();
    let mut refits = 0;
    while refits < 20 && best.1.len() >= 2 {
        let f: Vec<[f64; 2]> = best.1.iter().map(|&i| from[i]).collect();
        let t: Vec<[f64; 2]> = best.1.iter().map(|&i| to[i]).collect();
        let Some(fit) = fit_similarity(&f, &t) else {
            break;
        };
        refits += 1;
        let c = consensus(&fit.transform);
        let same = c == best.1;
        best = (fit.transform, c);
        if same {
            break;
        }
    }
    (best.0, best.1, rounds, ransac_consensus, refits)
}

/// One seed's grid control points and their fit.
struct SeedFit {
    tried: SeedTried,
    transform: Similarity,
    /// (reference, target) positions of every refined point.
    refined: Vec<([f64; 2], [f64; 2])>,
    /// The correlation at each refined point's peak, same order.
    correlations: Vec<f64>,
    inliers: Vec<usize>,
    trials: usize,
    rounds: usize,
    consensus: usize,
    refits: usize,
}

/// Runs the area-based seed (module doc). `keypoints`: the keypoint match's rejection;
/// `same_crs`: both images are on the working CRS. Errors are reading errors.
pub(super) fn area_match(
    config: &MatchConfig,
    sets: [&LandmarkSet; 2],
    same_crs: bool,
    metres_per_unit: f64,
    keypoints: &Rejection,
) -> Result<AreaMatch, IngestError> {
    let axial = config.refine.measure == Measure::AxialOrientation;
    let measure = if axial {
        Measure::AxialOrientation
    } else {
        Measure::Orientation
    };
    let mut summary = AreaSeed {
        ran: false,
        why: String::new(),
        keypoints: Some(keypoints.clone()),
        coarse_m: f64::NAN,
        measure: measure.name().to_string(),
        hypotheses: 0,
        z: f64::NAN,
        seeds: Vec::new(),
        chosen: None,
    };
    let (Some(rr), Some(tr)) = (&sets[0].raster, &sets[1].raster) else {
        summary.why = "not run: a survey is not a raster".into();
        return Ok(AreaMatch { summary, fit: None });
    };
    if !same_crs {
        summary.why = "not run: the images are not both on the working CRS; warp the target to the reference's CRS first".into();
        return Ok(AreaMatch { summary, fit: None });
    }
    let reference = crate::ingest::reopen_raster(&config.reference, rr)?;
    let target = crate::ingest::reopen_raster(&config.target, tr)?;
    // The target's centre, where the bounds are measured (as for a keypoint match).
    let tcorners = {
        let g = &tr.geotransform;
        let (w, h) = (tr.width as f64, tr.height as f64);
        [
            g.pixel_to_map(0.0, 0.0),
            g.pixel_to_map(w, 0.0),
            g.pixel_to_map(0.0, h),
            g.pixel_to_map(w, h),
        ]
    };
    let centre = [
        tcorners.iter().map(|p| p[0]).sum::<f64>() / 4.0,
        tcorners.iter().map(|p| p[1]).sum::<f64>() / 4.0,
    ];
    let Some(prior) = config.fit.prior(true, centre, metres_per_unit, 1.0) else {
        summary.why = "not run: nothing bounds the transform".into();
        return Ok(AreaMatch { summary, fit: None });
    };
    // The coarse sample: 1/COARSE_SIDE of the target's footprint, at least the coarser pixel.
    let extent = tcorners
        .iter()
        .flat_map(|a| {
            tcorners
                .iter()
                .map(move |b| (a[0] - b[0]).abs().max((a[1] - b[1]).abs()))
        })
        .fold(0.0, f64::max);
    let want = (extent / COARSE_SIDE).max(rr.pixel_m.max(tr.pixel_m) / metres_per_unit);
    let rpx = rr.geotransform.pixel_size();
    let tpx = tr.geotransform.pixel_size();
    let dr = ((want / rpx).round() as usize).clamp(1, rr.width.min(rr.height).max(1));
    let dt = ((dr as f64 * rpx / tpx).floor() as usize).clamp(1, tr.width.min(tr.height).max(1));
    let rc = reference.read(dr)?;
    let tc = target.read(dt)?;
    summary.ran = true;
    summary.why = "ran because the keypoint match found no accepted transform".into();
    let coarse = match coarse_search(&rc, &tc, &prior, axial) {
        Ok(c) => c,
        Err(why) => {
            summary.ran = false;
            summary.why = format!("not run: {why}");
            return Ok(AreaMatch { summary, fit: None });
        }
    };
    summary.coarse_m = coarse.sample * metres_per_unit;
    summary.hypotheses = coarse.hypotheses;
    summary.z = coarse.z;
    if coarse.peaks.is_empty() {
        summary
            .why
            .push_str("; the coarse search found no peak inside the bounds");
        return Ok(AreaMatch { summary, fit: None });
    }
    // The images at the refinement's resolution, as the refinement of a keypoint match reads them.
    let (ref_image, tgt_image) = super::pixels::read_for_refinement(&reference, &target, rr, tr)?;
    let fine_px = ref_image.geotransform.pixel_size();
    // The search must cover the coarse sample's uncertainty.
    let search = config
        .refine
        .search_px
        .max((2.0 * coarse.sample / fine_px).ceil() as usize);
    let patch = config.refine.patch_px.max(4 * search).min(512);
    let params = RefineParams {
        patch_px: patch + patch % 2,
        search_px: search,
        ..config.refine
    };
    let tolerance = fine_px;
    let side = (2 * params.search_px + 1) as f64;
    let p0 = (std::f64::consts::PI / (side * side)).min(1.0);
    let mut fits: Vec<SeedFit> = Vec::new();
    for peak in &coarse.peaks {
        let seed = peak.transform;
        // The grid over the target's footprint as the seed places it on the reference.
        let rinv = ref_image.geotransform.inverse();
        let placed: Vec<[f64; 2]> = tcorners
            .iter()
            .filter_map(|&p| {
                let q = seed.apply(p);
                rinv.map(|g| g.pixel_to_map(q[0], q[1]))
            })
            .collect();
        let region = [
            placed.iter().map(|p| p[0]).fold(f64::INFINITY, f64::min),
            placed.iter().map(|p| p[1]).fold(f64::INFINITY, f64::min),
            placed
                .iter()
                .map(|p| p[0])
                .fold(f64::NEG_INFINITY, f64::max),
            placed
                .iter()
                .map(|p| p[1])
                .fold(f64::NEG_INFINITY, f64::max),
        ];
        let grid = grid_points(&ref_image, &params, region);
        let inv = seed.inverse();
        let tinv = tgt_image.geotransform.inverse();
        let points: Vec<[f64; 2]> = grid
            .iter()
            .copied()
            .filter(|&m| {
                let q = inv.apply(m);
                tinv.is_some_and(|g| {
                    let t = g.pixel_to_map(q[0], q[1]);
                    let (c, r) = (t[0].floor(), t[1].floor());
                    c >= 0.0 && r >= 0.0 && tgt_image.is_valid(c as usize, r as usize)
                })
            })
            .collect();
        let results = refine::refine_all(&ref_image, &tgt_image, &seed, &points, &params);
        let trials = results
            .iter()
            .filter(|r| {
                matches!(
                    r,
                    Ok(_) | Err(NotRefined::Unclear { .. }) | Err(NotRefined::Unsettled { .. })
                )
            })
            .count();
        let refined: Vec<([f64; 2], [f64; 2])> = results
            .iter()
            .filter_map(|r| r.as_ref().ok().map(|x| (x.reference, x.target)))
            .collect();
        let correlations: Vec<f64> = results
            .iter()
            .filter_map(|r| r.as_ref().ok().map(|x| x.correlation))
            .collect();
        let from: Vec<[f64; 2]> = refined.iter().map(|p| p.1).collect();
        let to: Vec<[f64; 2]> = refined.iter().map(|p| p.0).collect();
        let (transform, inliers, rounds, consensus, refits) = fit_pairs(
            &from,
            &to,
            seed,
            tolerance,
            &prior,
            config.fit.confidence,
            config.fit.seed,
        );
        let c = Competitor::new(seed, 0, centre, metres_per_unit, 1.0);
        fits.push(SeedFit {
            tried: SeedTried {
                rotation_deg: c.rotation_deg,
                scale_ppm: c.scale_ppm,
                shift_m: c.shift_m,
                score: peak.score,
                grid_points: points.len(),
                refined: refined.len(),
                support: inliers.len(),
            },
            transform,
            refined,
            correlations,
            inliers,
            trials,
            rounds,
            consensus,
            refits,
        });
    }
    summary.seeds = fits.iter().map(|f| f.tried).collect();
    let best = (0..fits.len())
        .max_by_key(|&i| (fits[i].inliers.len(), std::cmp::Reverse(i)))
        .expect("at least one seed");
    summary.chosen = Some(best);
    let chosen = &fits[best];
    let hypotheses = coarse.cells + fits.iter().map(|f| f.rounds + 1).sum::<usize>();
    let sig = Significance::new(chosen.trials, chosen.inliers.len(), p0, 0.0, hypotheses);
    let rounds = fits.iter().map(|f| f.rounds).sum();
    let reject = |reason: RejectReason| {
        Ok(AreaMatch {
            summary: summary.clone(),
            fit: Some(Err(Rejection {
                reason,
                search_radius: tolerance,
                significance: Some(sig),
                ransac_rounds: rounds,
                hypotheses: [hypotheses, 0],
            })),
        })
    };
    let k = chosen.inliers.len();
    if k < config.fit.min_control_points {
        return reject(RejectReason::TooFewControlPoints {
            paired: k,
            required: config.fit.min_control_points,
        });
    }
    if !sig.is_significant(config.fit.false_alarm_level) {
        return reject(RejectReason::NotSignificant {
            paired: k,
            trials: chosen.trials,
            chance_rate: p0,
            log10_false_alarms: sig.log10_false_alarms,
            level: config.fit.false_alarm_level,
        });
    }
    let from: Vec<[f64; 2]> = chosen
        .inliers
        .iter()
        .map(|&i| chosen.refined[i].1)
        .collect();
    let to: Vec<[f64; 2]> = chosen
        .inliers
        .iter()
        .map(|&i| chosen.refined[i].0)
        .collect();
    let Some(fit) = fit_similarity(&from, &to) else {
        return reject(RejectReason::DegenerateControlPoints);
    };
    let summarise = |t: Similarity, n: usize| Competitor::new(t, n, centre, metres_per_unit, 1.0);
    let chosen_c = summarise(fit.transform, k);
    if !prior.admits(&fit.transform) {
        return reject(RejectReason::OutsidePrior { found: chosen_c });
    }
    let corners = tcorners;
    let runner_up = fits
        .iter()
        .enumerate()
        .filter(|(i, f)| {
            *i != best
                && f.inliers.len() >= config.fit.min_control_points
                && differ(&f.transform, &fit.transform, &corners, 2.0 * tolerance)
        })
        .max_by_key(|(_, f)| f.inliers.len())
        .map(|(_, f)| summarise(f.transform, f.inliers.len()));
    if let Some(second) = runner_up {
        if !prior::clearly_ahead(chosen_c.support, second.support) {
            return reject(RejectReason::Ambiguous {
                best: chosen_c,
                runner_up: second,
            });
        }
    }
    // The grid points become the landmarks: every refined one, paired where an inlier, each
    // with its keypoint record (pixel/line of the file, the patch, the correlation), so that
    // the landmark list and its pixel positions stay one a landmark.
    let patch_m = params.patch_px as f64 * fine_px * metres_per_unit;
    let set = |base: &LandmarkSet, points: Vec<[f64; 2]>| {
        let mut raster = base.raster.clone();
        if let Some(r) = raster.as_mut() {
            r.keypoints = grid_keypoints(r, &points, &chosen.correlations, patch_m);
            // Their `sample` and `sigma_px` are at full resolution.
            r.decimation = 1;
        }
        LandmarkSet {
            source: base.source.clone(),
            // Every report shows the layer: what the landmarks are, and what they replace.
            layer: format!(
                "grid control points of the area-based seed, in place of the {} {}",
                base.points.len(),
                base.layer
            ),
            ids: (1..=points.len()).map(|i| format!("a{i}")).collect(),
            points,
            crs_wkt: base.crs_wkt.clone(),
            skipped: Default::default(),
            raster,
        }
    };
    let reference_set = set(sets[0], chosen.refined.iter().map(|p| p.0).collect());
    let target_set = set(sets[1], chosen.refined.iter().map(|p| p.1).collect());
    let pairs: Vec<Pair> = chosen
        .inliers
        .iter()
        .map(|&i| {
            let (r, t) = chosen.refined[i];
            let m = fit.transform.apply(t);
            Pair {
                reference: i as u32,
                target: i as u32,
                residual: (m[0] - r[0]).hypot(m[1] - r[1]),
            }
        })
        .collect();
    let mut solution = Solution {
        fit,
        pairs,
        // Filled in below from the control points.
        models: crate::fit::models::compare(&[], &[], &fit.transform, config.fit.model),
        max_residual: tolerance,
        search_radius: tolerance,
        significance: sig,
        ransac_rounds: rounds,
        ransac_consensus: chosen.consensus,
        ransac_sample: chosen.refined.len(),
        guided_rounds: chosen.refits,
        chosen: chosen_c,
        runner_up,
        bounds: Some(prior),
    };
    solution.refresh_models(&reference_set.points, &target_set.points, config.fit.model);
    Ok(AreaMatch {
        summary,
        fit: Some(Ok((solution, reference_set, target_set))),
    })
}

/// The keypoint records of grid control points at map positions `points` of an image read as
/// `image` says: the file's full-resolution pixel/line, the position on the grid read (`sample`:
/// full resolution, pixel/line − 0.5), σ as half the refinement patch's side (the ground the
/// position stands for; the patch's side is `patch_m` metres) and the correlation at the peak
/// as the response.
fn grid_keypoints(
    image: &RasterLandmarks,
    points: &[[f64; 2]],
    correlations: &[f64],
    patch_m: f64,
) -> Vec<Keypoint> {
    let to_view = image.geotransform.inverse();
    let half_px = 0.5 * patch_m / image.pixel_m;
    points
        .iter()
        .zip(correlations)
        .map(|(&map, &correlation)| {
            let view = to_view.map_or([f64::NAN; 2], |g| g.pixel_to_map(map[0], map[1]));
            Keypoint {
                sample: [view[0] - 0.5, view[1] - 0.5],
                pixel: image.file_pixel(map).unwrap_or([f64::NAN; 2]),
                map,
                sigma_px: half_px,
                sigma_m: 0.5 * patch_m,
                response: correlation,
            }
        })
        .collect()
}

/// Reference map positions on an even grid over `region` (pixel/line bounds [p0, l0, p1, l1])
/// of the reference image, no closer than three
/// quarters of a patch, about [`GRID_POINTS`] of them, clear of the edges by half a patch and
/// the search, on valid samples.
fn grid_points(img: &Image, params: &RefineParams, region: [f64; 4]) -> Vec<[f64; 2]> {
    let margin = (params.patch_px / 2 + params.search_px + 3) as f64;
    // The region (pixel/line) inside the image's margins, as sample indices.
    let c0 = region[0].max(0.0) + margin;
    let r0 = region[1].max(0.0) + margin;
    let c1 = region[2].min(img.width as f64) - margin;
    let r1 = region[3].min(img.height as f64) - margin;
    if !(c1 > c0 && r1 > r0) {
        return Vec::new();
    }
    let (w, h) = (c1 - c0, r1 - r0);
    let spacing = (w * h / GRID_POINTS)
        .sqrt()
        .max(0.75 * params.patch_px as f64)
        .max(1.0);
    let (nc, nr) = (
        (w / spacing).floor() as usize + 1,
        (h / spacing).floor() as usize + 1,
    );
    let (oc, or) = (
        c0 + 0.5 * (w - (nc - 1) as f64 * spacing),
        r0 + 0.5 * (h - (nr - 1) as f64 * spacing),
    );
    let mut out = Vec::with_capacity(nc * nr);
    for j in 0..nr {
        for i in 0..nc {
            let (c, r) = (oc + i as f64 * spacing, or + j as f64 * spacing);
            if img.is_valid(c.round() as usize, r.round() as usize) {
                out.push(img.geotransform.sample_to_map(c.round(), r.round()));
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::image::GeoTransform;

    /// A field of seeded smooth blobs defined on the map.
    fn field(seed: u64) -> impl Fn(f64, f64) -> f64 {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        let blobs: Vec<[f64; 4]> = (0..900)
            .map(|_| {
                [
                    rng.gen_range(-50.0..1250.0),
                    rng.gen_range(-50.0..1250.0),
                    rng.gen_range(-1.0..1.0),
                    rng.gen_range(4.0..12.0),
                ]
            })
            .collect();
        move |x, y| {
            100.0
                + 60.0
                    * blobs
                        .iter()
                        .map(|b| {
                            let d2 = (x - b[0]).powi(2) + (y - b[1]).powi(2);
                            if d2 > 16.0 * b[3] * b[3] {
                                0.0
                            } else {
                                b[2] * (-d2 / (2.0 * b[3] * b[3])).exp()
                            }
                        })
                        .sum::<f64>()
        }
    }

    fn image(gt: GeoTransform, w: usize, h: usize, f: &dyn Fn(f64, f64) -> f64) -> Image {
        let pixels = (0..w * h)
            .map(|i| {
                let m = gt.sample_to_map((i % w) as f64, (i / w) as f64);
                f(m[0], m[1]) as f32
            })
            .collect();
        Image::new(w, h, pixels, gt)
    }

    #[test]
    fn fast_sizes_are_smooth_and_not_smaller() {
        assert_eq!(fast_size(1), 1);
        assert_eq!(fast_size(7), 8);
        assert_eq!(fast_size(31), 32);
        assert_eq!(fast_size(361), 375);
    }

    #[test]
    fn the_coarse_search_finds_a_known_rotation_and_shift_and_contrast_reversal_needs_the_axial_form(
    ) {
        // The reference: 300 × 300 samples of 4 m. The target: the same ground seen through a
        // georeferencing error of 2° and (13, −9) m about its centre, on a grid of 5 m, with
        // its contrast reversed (a negative of the same field).
        let f = field(5);
        let rgt = GeoTransform([0.0, 4.0, 0.0, 1200.0, 0.0, -4.0]);
        let reference = image(rgt, 300, 300, &f);
        let tgt_gt = GeoTransform([300.0, 5.0, 0.0, 900.0, 0.0, -5.0]);
        let centre = [300.0 + 5.0 * 60.0, 900.0 - 5.0 * 60.0];
        let error = about(centre, 1.0, 2f64.to_radians());
        let error = Similarity {
            tx: error.tx + 13.0,
            ty: error.ty - 9.0,
            ..error
        };
        // The target's pixel at claimed position w shows the ground at truth(w), truth = error⁻¹.
        let truth = error.inverse();
        let negative = |x: f64, y: f64| {
            let g = truth.apply([x, y]);
            200.0 - f(g[0], g[1])
        };
        let target = image(tgt_gt, 120, 120, &negative);
        let prior = Prior {
            centre,
            max_shift: 40.0,
            max_rotation: 5f64.to_radians(),
            max_scale_error: 5e-3,
            unit_scale: 1.0,
        };
        let found = coarse_search(&reference, &target, &prior, true).unwrap();
        let best = found.peaks[0].transform;
        for p in footprint(&target) {
            let (a, b) = (best.apply(p), truth.apply(p));
            let miss = (a[0] - b[0]).hypot(a[1] - b[1]);
            assert!(miss < 4.0, "corner {p:?} missed by {miss} m: {best:?}");
        }
        assert!(found.z > 6.0, "z {}", found.z);
        // The signed form sees the reversal as a trough: its best peak is elsewhere or weak.
        let signed = coarse_search(&reference, &target, &prior, false).unwrap();
        assert!(signed.peaks[0].score < 0.5 * found.peaks[0].score);
    }

    #[test]
    fn the_pair_fit_keeps_the_consistent_pairs() {
        let truth = Similarity::from_params(1.0002, 0.01, 5.0, -3.0);
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2);
        let from: Vec<[f64; 2]> = (0..60)
            .map(|_| [rng.gen_range(0.0..500.0), rng.gen_range(0.0..500.0)])
            .collect();
        let mut to: Vec<[f64; 2]> = from.iter().map(|&p| truth.apply(p)).collect();
        for p in to.iter_mut().take(20) {
            p[0] += rng.gen_range(3.0..9.0);
        }
        let prior = Prior {
            centre: [250.0, 250.0],
            max_shift: 50.0,
            max_rotation: 0.1,
            max_scale_error: 0.01,
            unit_scale: 1.0,
        };
        // A seed 1.5 units off: the pairs, not the seed, decide.
        let start = Similarity {
            tx: truth.tx + 1.5,
            ..truth
        };
        let (s, inliers, _, _, _) = fit_pairs(&from, &to, start, 0.5, &prior, 0.999, 7);
        assert_eq!(inliers, (20..60).collect::<Vec<_>>());
        assert!((s.tx - truth.tx).abs() < 1e-6 && (s.rotation() - 0.01).abs() < 1e-9);
    }
}
