//! Area-based refinement of control points on the pixels.
//!
//! **In:** the reference and target images ([`Image`], one band each, with their
//! geotransforms), the fitted target → reference [`Similarity`] (map coordinates), control
//! points as reference map positions, and [`RefineParams`]. **Out:** per point either a
//! [`Refined`] correspondence (the reference position, the target position the image
//! correlation puts it at, the correlation value and its clarity figures, the shift the
//! refinement made, in reference samples and map units) or a [`NotRefined`] reason (the caller
//! keeps the fitted position then).
//!
//! How: around the point, a `patch_px × patch_px` patch of reference samples (on the
//! reference's own grid, no resampling) is compared with a window of the target resampled
//! through the inverse of the fitted transform onto the same grid (Keys' cubic convolution,
//! [`resample`]), over whole-sample shifts of up to `search_px` each way ([`measure`]). The
//! peak of that surface is located to a fraction of a sample ([`peak`]); the window is then
//! resampled again at the shift found and the residual shift measured, until it is below
//! 0.01 sample (at most `max_iterations` times). Near zero residual the per-axis peak fit is
//! unbiased (its error vanishes at zero offset by symmetry), so the iteration removes the
//! peak-fit bias that one pass leaves. The refined position is kept only where the final peak
//! is clear: its value at least `min_peak`, at least `min_ratio` times the best other local
//! maximum two or more samples away, curving down by at least `min_curvature` (per sample²,
//! relative to the peak) in its flattest direction (refuses edges and flat patches), and not
//! on the border of the search range.
//!
//! Invalid samples (no data, outside the footprint) are refused, not masked: a patch or window
//! that needs one gives [`NotRefined::InvalidSamples`] (or [`NotRefined::OutsideReference`] /
//! [`NotRefined::OutsideTarget`] past an image's edge).
//!
//! The target should be at about the reference's ground sampling distance (a raster reader can
//! read it decimated): the resampling is a point read, without a low-pass filter against
//! aliasing.
//!
//! # Which measure: the measurement
//!
//! On the Landsat 7 ETM+ sample scene (`tests/data/README.md`; 28.5 m samples), each band pair
//! below was refined at 225 grid points, with the target band moved by three known shifts
//! ((0.3, −0.45), (−0.5, 0.2), (1.7, −2.35) samples, by the Fourier shift theorem), patch 32,
//! search 8, 4 passes, parabola fit, each measure with its thresholds from
//! [`RefineParams::for_measure`]. "kept" is the share of points whose peak passed the keep
//! test; "rel" the rms error (samples) of the change of shift against the known one (each
//! point's shift measured once unshifted is its baseline: the bands' own misregistration and
//! content differ); "abs" the rms error of the shift itself; "false" the share kept of
//! unrelated patches (the transform 60 and 45 samples off). B3 = red, B4 = near infrared (the
//! contrast of vegetation against soil reverses between them), B1 blue, B2 green, B5 and B7
//! short-wave infrared. Reproduce: `cargo test --test refine -- --ignored --nocapture
//! measurement` (about 5 minutes on 2 busy cores).
//!
//! | measure | B3→B3 kept / rel | B2→B5 | B3→B5 | B3→B4 | B1→B4 | B4→B7 | abs, reversed pairs | false |
//! |---|---|---|---|---|---|---|---|---|
//! | intensity ZNCC | 92 % / 0.036 | 76 % / 0.056 | 87 % / 0.054 | 0.5 % | 2.6 % | 0 % | 0.05-0.24 | 0 % |
//! | gradient ZNCC | 99 % / 0.038 | 96 % / 0.067 | 96 % / 0.060 | 10 % / 0.062 | 7 % / 0.062 | 5 % / 0.065 | 0.65-0.77 | ≤ 1.8 % |
//! | phase | 100 % / 0.068 | 93 % / 0.104 | 97 % / 0.098 | 16 % / 0.094 | 9 % / 0.087 | 7 % / 0.113 | 0.77-1.44 | ≤ 3.6 % |
//! | **orientation** | 100 % / **0.032** | 95 % / 0.058 | 97 % / 0.055 | 10 % / 0.074 | 3 % / 0.121 | 3 % / 0.117 | 0.29-0.31 | **0 %** |
//! | axial orientation | 100 % / 0.038 | 89 % / 0.075 | 93 % / 0.069 | 36 % / 0.144 | 24 % / 0.172 | 37 % / 0.158 | 0.31-0.39 | 0 % |
//!
//! Orientation correlation (Fitch et al.) is the default: the smallest error on the same band
//! and on pairs of like contrast, no unrelated patch kept, and (unlike the ZNCCs and phase
//! correlation) small absolute errors where it does keep a point on a contrast-reversed pair:
//! the ZNCCs and phase correlation keep some points there with a consistent whole-sample
//! error. Intensity correlation fails across the visible/near-infrared divide, as expected.
//! Where contrast reverses (visible against near infrared, or seasons), axial orientation
//! keeps 3 to 10 times as many points at about the same absolute error but twice the
//! relative error (0.14-0.17 sample rms, over the 0.1-sample target): choose it for such pairs
//! (`measure = "axial-orientation"`).
//!
//! Thresholds: set from the unrelated patches' distributions in the same run, to keep about
//! none of them while losing few true peaks. Orientation: unrelated peak value p99 0.166,
//! max 0.196, true p5 0.218 → `min_peak` 0.2; unrelated ratio p99 1.79, true p5 2.13 →
//! `min_ratio` 1.5 (with the peak test, no unrelated patch passed); curvature of true peaks
//! p1 0.52, of flat or edge-like unrelated ones 0 at the median → `min_curvature` 0.2. The
//! other measures' thresholds were read off their distributions the same way (gradient:
//! unrelated peak p99 0.23; phase 0.27; axial 0.098; intensity 0.45).
//!
//! Sub-pixel fit bias (mean signed error of the x shift, same band, 90 points, known
//! fractional shift 0.1 … 0.5 sample; `peak_fit_bias` in `tests/refine.rs`): one pass,
//! parabola −0.05, −0.08, −0.10, −0.09, −0.03 (the ~0.1-sample bias of the textbook
//! parabola); one pass, Gaussian −0.01 … −0.02; four passes (the default), parabola +0.016,
//! +0.025, +0.024, +0.014, −0.002; four passes, Gaussian +0.02 … +0.04. The small positive
//! bias left after the passes comes from the cubic resampling, not from the peak fit. A
//! single Gaussian pass is less biased on one band but doubles the error across bands (red to
//! near infrared 0.24 against 0.074 sample rms), so the default iterates with the parabola.
//!
//! [`refine_all`] spreads the points over the machine's cores with `std::thread::scope`, one
//! [`Refiner`] (FFT plans and buffers) a thread, points dealt round-robin (refused points are
//! cheap, kept ones cost up to `max_iterations` resamplings and transforms, so dealing mixes
//! them). The points are independent and few (hundreds), so a work-stealing pool would add a
//! dependency for no gain; the measurement above (about 6 750 refinements a measure) took about
//! 50 s a measure in the test build on 2 shared, busy cores.

pub mod measure;
pub mod peak;
pub mod resample;

pub use measure::{Correlator, Measure, Surface};
pub use peak::{find_peak, Clarity, Peak, SubPixel};

use crate::fit::similarity::Similarity;
use crate::image::{GeoTransform, Image};
use serde::{Deserialize, Serialize};

/// The options of the refinement. [`Default`] is the tool's default; [`RefineParams::for_measure`]
/// gives the thresholds measured for each measure (see the module doc).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct RefineParams {
    /// Side of the reference patch, in reference samples (even, 8 to 512).
    pub patch_px: usize,
    /// Largest shift searched each way, in reference samples (1 to `patch_px / 4`).
    pub search_px: usize,
    /// How patches are compared.
    pub measure: Measure,
    /// How the peak is located between samples.
    pub subpixel: SubPixel,
    /// Smallest peak value kept (the measure's own scale, see [`Measure`]). The three
    /// thresholds belong to the measure: when changing `measure`, start from
    /// [`RefineParams::for_measure`] (a pipeline file that sets only `measure` keeps the
    /// default measure's thresholds).
    pub min_peak: f64,
    /// Smallest ratio of the peak to the best other local maximum.
    pub min_ratio: f64,
    /// Smallest curvature of the peak in its flattest direction, per sample², relative to the
    /// peak value.
    pub min_curvature: f64,
    /// Most resampling passes (the first included). With more than one, a point whose last
    /// residual shift is still 0.05 sample or more is [`NotRefined::Unsettled`]; with one, the
    /// single pass's peak fit is taken as it is.
    pub max_iterations: usize,
}

impl Default for RefineParams {
    fn default() -> Self {
        RefineParams::for_measure(Measure::Orientation)
    }
}

impl RefineParams {
    /// The default patch and search sizes with the thresholds measured for `measure`.
    pub fn for_measure(measure: Measure) -> RefineParams {
        let (min_peak, min_ratio, min_curvature) = match measure {
            Measure::Intensity => (0.5, 1.5, 0.2),
            Measure::Gradient => (0.25, 1.5, 0.2),
            Measure::Phase => (0.25, 1.8, 0.2),
            Measure::Orientation => (0.2, 1.5, 0.2),
            Measure::AxialOrientation => (0.1, 1.5, 0.2),
        };
        RefineParams {
            patch_px: 32,
            search_px: 8,
            measure,
            subpixel: SubPixel::Parabola,
            min_peak,
            min_ratio,
            min_curvature,
            max_iterations: 4,
        }
    }

    /// Checks the options alone (no data needed); the error names the pipeline-file key.
    pub fn validate(&self) -> Result<(), ParamError> {
        let bad = |key: &'static str, value: String, want: &'static str| {
            Err(ParamError { key, value, want })
        };
        if self.patch_px < 8 || self.patch_px > 512 || !self.patch_px.is_multiple_of(2) {
            return bad(
                "refine.patch_px",
                self.patch_px.to_string(),
                "an even number from 8 to 512",
            );
        }
        if self.search_px < 1 || self.search_px > self.patch_px / 4 {
            return bad(
                "refine.search_px",
                self.search_px.to_string(),
                "from 1 to a quarter of refine.patch_px",
            );
        }
        for (key, v) in [
            ("refine.min_peak", self.min_peak),
            ("refine.min_ratio", self.min_ratio),
            ("refine.min_curvature", self.min_curvature),
        ] {
            if !v.is_finite() {
                return bad(key, v.to_string(), "a finite number");
            }
        }
        if self.max_iterations < 1 || self.max_iterations > 20 {
            return bad(
                "refine.max_iterations",
                self.max_iterations.to_string(),
                "from 1 to 20",
            );
        }
        Ok(())
    }
}

/// An option of the refinement out of range.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{key} = {value} is out of range: use {want}")]
pub struct ParamError {
    /// The pipeline-file key.
    pub key: &'static str,
    /// The value given.
    pub value: String,
    /// What is accepted.
    pub want: &'static str,
}

/// A control point refined on the pixels.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Refined {
    /// The reference map position (as given).
    pub reference: [f64; 2],
    /// The target map position the correlation puts it at.
    pub target: [f64; 2],
    /// The target map position the fitted transform put it at (before refinement).
    pub predicted_target: [f64; 2],
    /// The measure's value at the peak (`clarity.peak`).
    pub correlation: f64,
    /// The clarity figures of the final peak.
    pub clarity: Clarity,
    /// The shift the refinement made, in reference samples (columns, rows): the target
    /// content of the reference point was found this far from where the fitted transform put
    /// it, measured on the reference grid.
    pub shift_px: [f64; 2],
    /// The same shift in reference map units (metres in a projected CRS in metres):
    /// transform(`target`) − transform(`predicted_target`).
    pub shift_map: [f64; 2],
    /// Resampling passes made.
    pub iterations: usize,
}

impl Refined {
    /// The length of the shift in reference map units.
    pub fn shift_length(&self) -> f64 {
        self.shift_map[0].hypot(self.shift_map[1])
    }
}

/// Which image a refusal is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Side {
    /// The reference image.
    Reference,
    /// The target image.
    Target,
}

impl std::fmt::Display for Side {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Side::Reference => "reference",
            Side::Target => "target",
        })
    }
}

/// Which part of the keep test a peak failed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Unclear {
    /// The peak value is below `min_peak`.
    LowPeak,
    /// Another local maximum comes within `min_ratio` of the peak.
    Ambiguous,
    /// The peak is flatter than `min_curvature` in some direction (an edge or a flat patch).
    Flat,
    /// The maximum is on the border of the search range.
    AtSearchEdge,
}

/// Why a control point was not refined (the caller keeps its fitted position).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, thiserror::Error)]
pub enum NotRefined {
    /// A geotransform has no inverse or the transform is not a valid similarity.
    #[error("the geotransforms or the fitted transform cannot be inverted")]
    NoGeometry,
    /// The reference patch reaches past the reference image's edge.
    #[error("the reference patch reaches past the edge of the reference image")]
    OutsideReference,
    /// The target window reaches past the target image's edge.
    #[error("the target window reaches past the edge of the target image")]
    OutsideTarget,
    /// The patch or window needs samples that are not valid data.
    #[error(
        "{count} samples of the {side} patch are not valid data (no data or outside the footprint)"
    )]
    InvalidSamples {
        /// Which image.
        side: Side,
        /// How many samples (or cubic-convolution reads) were invalid.
        count: usize,
    },
    /// The reference patch has no contrast to correlate.
    #[error("the reference patch is flat (no contrast to correlate)")]
    NoTexture,
    /// The correlation peak is not clear enough to keep.
    #[error("the correlation peak is not clear ({test:?}: peak {:.3}, ratio {:.2}, curvature {:.3})", clarity.peak, clarity.ratio, clarity.curvature)]
    Unclear {
        /// The part of the test that failed first (in the order of [`Unclear`]).
        test: Unclear,
        /// The figures.
        clarity: Clarity,
    },
    /// The shift left the search range or did not settle within `max_iterations`.
    #[error("the refinement did not settle (shift {:.2}, {:.2} samples)", shift_px[0], shift_px[1])]
    Unsettled {
        /// The shift reached, in reference samples.
        shift_px: [f64; 2],
    },
}

/// The refinement with its FFT plans and buffers, for many points of one image pair.
#[derive(Debug)]
pub struct Refiner {
    params: RefineParams,
    correlator: Correlator,
}

/// True when `v` fails a minimum (NaN fails).
fn below(v: f64, min: f64) -> bool {
    v.is_nan() || v < min
}

/// The linear part of a geotransform applied to a sample-index displacement.
fn linear(gt: &GeoTransform, d: [f64; 2]) -> [f64; 2] {
    let g = &gt.0;
    [g[1] * d[0] + g[2] * d[1], g[4] * d[0] + g[5] * d[1]]
}

impl Refiner {
    /// Plans for `params` (assumed valid: see [`RefineParams::validate`]).
    pub fn new(params: RefineParams) -> Refiner {
        Refiner {
            params,
            correlator: Correlator::new(params.patch_px),
        }
    }

    /// The options in use.
    pub fn params(&self) -> &RefineParams {
        &self.params
    }

    /// Refines one control point; see [`refine_point`].
    pub fn refine(
        &mut self,
        reference: &Image,
        target: &Image,
        target_to_reference: &Similarity,
        at_reference_map: [f64; 2],
    ) -> Result<Refined, NotRefined> {
        let prm = self.params;
        let (p, s) = (prm.patch_px, prm.search_px);
        let (Some(ref_inv), Some(tgt_inv)) = (
            reference.geotransform.inverse(),
            target.geotransform.inverse(),
        ) else {
            return Err(NotRefined::NoGeometry);
        };
        let to_target = target_to_reference.inverse();
        if !target_to_reference.is_valid() || !to_target.is_valid() {
            return Err(NotRefined::NoGeometry);
        }
        let pl = ref_inv.pixel_to_map(at_reference_map[0], at_reference_map[1]);
        let (x, y) = (pl[0] - 0.5, pl[1] - 0.5);
        if !(x.is_finite() && y.is_finite()) {
            return Err(NotRefined::NoGeometry);
        }
        // The reference patch with its one-sample margin.
        let nr = p + 2;
        let (c0, r0) = (
            x.round() as i64 - (p / 2) as i64 - 1,
            y.round() as i64 - (p / 2) as i64 - 1,
        );
        if c0 < 0
            || r0 < 0
            || c0 + nr as i64 > reference.width as i64
            || r0 + nr as i64 > reference.height as i64
        {
            return Err(NotRefined::OutsideReference);
        }
        let (c0, r0) = (c0 as usize, r0 as usize);
        let mut patch = Vec::with_capacity(nr * nr);
        let mut invalid = 0;
        for r in r0..r0 + nr {
            for c in c0..c0 + nr {
                invalid += usize::from(!reference.is_valid(c, r));
                patch.push(f64::from(reference.at(c, r)));
            }
        }
        if invalid > 0 {
            return Err(NotRefined::InvalidSamples {
                side: Side::Reference,
                count: invalid,
            });
        }
        let m = patch.iter().sum::<f64>() / patch.len() as f64;
        let var = patch.iter().map(|v| (v - m).powi(2)).sum::<f64>() / patch.len() as f64;
        if var.sqrt() <= 1e-9 * (1.0 + m.abs()) {
            return Err(NotRefined::NoTexture);
        }
        // The target window: (p + 2s + 2)² reference-grid positions, first sample at
        // (c0 − s, r0 − s), moved by the shift found so far.
        let nt = p + 2 * s + 2;
        let mut window = vec![0.0; nt * nt];
        let mut shift = [0.0f64; 2];
        let mut last = None;
        let mut iterations = 0;
        for _ in 0..prm.max_iterations {
            iterations += 1;
            let (mut outside, mut invalid) = (0usize, 0usize);
            for j in 0..nt {
                for i in 0..nt {
                    let sc = (c0 + i) as f64 - s as f64 + shift[0];
                    let sr = (r0 + j) as f64 - s as f64 + shift[1];
                    let q = to_target.apply(reference.geotransform.sample_to_map(sc, sr));
                    let t = tgt_inv.pixel_to_map(q[0], q[1]);
                    let (tx, ty) = (t[0] - 0.5, t[1] - 0.5);
                    match resample::cubic(target, tx, ty) {
                        Some(v) => window[j * nt + i] = v,
                        None => {
                            let inside = tx >= 1.0
                                && ty >= 1.0
                                && tx + 2.0 < target.width as f64
                                && ty + 2.0 < target.height as f64;
                            if inside {
                                invalid += 1;
                            } else {
                                outside += 1;
                            }
                        }
                    }
                }
            }
            if outside > 0 {
                return Err(NotRefined::OutsideTarget);
            }
            if invalid > 0 {
                return Err(NotRefined::InvalidSamples {
                    side: Side::Target,
                    count: invalid,
                });
            }
            let surface = self.correlator.surface(prm.measure, &patch, &window, s);
            let Some(peak) = find_peak(&surface, prm.subpixel) else {
                return Err(NotRefined::NoTexture);
            };
            let d = peak.shift();
            shift = [shift[0] + d[0], shift[1] + d[1]];
            last = Some(peak);
            if peak.on_border {
                break;
            }
            if shift[0].abs() > s as f64 || shift[1].abs() > s as f64 {
                return Err(NotRefined::Unsettled { shift_px: shift });
            }
            if d[0].abs() < 0.01 && d[1].abs() < 0.01 {
                break;
            }
        }
        let peak = last.expect("at least one pass");
        let c = peak.clarity;
        let test = if peak.on_border {
            Some(Unclear::AtSearchEdge)
        } else if below(c.peak, prm.min_peak) {
            Some(Unclear::LowPeak)
        } else if below(c.ratio, prm.min_ratio) {
            Some(Unclear::Ambiguous)
        } else if below(c.curvature, prm.min_curvature) {
            Some(Unclear::Flat)
        } else {
            None
        };
        if let Some(test) = test {
            return Err(NotRefined::Unclear { test, clarity: c });
        }
        let last_d = peak.shift();
        if prm.max_iterations > 1 && (last_d[0].abs() >= 0.05 || last_d[1].abs() >= 0.05) {
            return Err(NotRefined::Unsettled { shift_px: shift });
        }
        let predicted_target = to_target.apply(at_reference_map);
        let moved = reference
            .geotransform
            .sample_to_map(x + shift[0], y + shift[1]);
        let target_pos = to_target.apply(moved);
        let d = linear(&reference.geotransform, shift);
        Ok(Refined {
            reference: at_reference_map,
            target: target_pos,
            predicted_target,
            correlation: c.peak,
            clarity: c,
            shift_px: shift,
            shift_map: d,
            iterations,
        })
    }
}

/// Refines one control point: the reference map position `at_reference_map`, which the fitted
/// `target_to_reference` similarity (map coordinates) puts at its inverse image in the target.
/// Plans its FFTs anew; for many points use [`refine_all`] or a [`Refiner`].
pub fn refine_point(
    reference: &Image,
    target: &Image,
    target_to_reference: &Similarity,
    at_reference_map: [f64; 2],
    params: &RefineParams,
) -> Result<Refined, NotRefined> {
    Refiner::new(*params).refine(reference, target, target_to_reference, at_reference_map)
}

/// Refines every point (reference map positions), in order, on all cores (see the module doc).
pub fn refine_all(
    reference: &Image,
    target: &Image,
    target_to_reference: &Similarity,
    points: &[[f64; 2]],
    params: &RefineParams,
) -> Vec<Result<Refined, NotRefined>> {
    let threads = std::thread::available_parallelism()
        .map_or(1, |n| n.get())
        .min(points.len().div_ceil(8))
        .max(1);
    let run = |k: usize| {
        let mut refiner = Refiner::new(*params);
        (k..points.len())
            .step_by(threads)
            .map(|i| {
                (
                    i,
                    refiner.refine(reference, target, target_to_reference, points[i]),
                )
            })
            .collect::<Vec<_>>()
    };
    if threads == 1 {
        return run(0).into_iter().map(|(_, r)| r).collect();
    }
    let mut out: Vec<Option<Result<Refined, NotRefined>>> = vec![None; points.len()];
    std::thread::scope(|scope| {
        let handles: Vec<_> = (0..threads).map(|k| scope.spawn(move || run(k))).collect();
        for h in handles {
            for (i, r) in h.join().expect("refinement thread panicked") {
                out[i] = Some(r);
            }
        }
    });
    out.into_iter()
        .map(|r| r.expect("every point refined"))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn textured(w: usize, h: usize, gt: GeoTransform, dx: f64) -> Image {
        // A smooth two-frequency pattern, moved by dx samples: out(x) = f(x − dx).
        let f = |x: f64, y: f64| {
            100.0
                + 30.0 * (0.37 * x + 0.11 * y).sin()
                + 20.0 * (0.23 * y - 0.29 * x).cos()
                + 10.0 * (0.61 * x * 0.5 + 0.53 * y).sin()
        };
        let pixels = (0..w * h)
            .map(|i| f((i % w) as f64 - dx, (i / w) as f64) as f32)
            .collect();
        Image::new(w, h, pixels, gt)
    }

    #[test]
    fn validate_names_the_key() {
        assert!(RefineParams::default().validate().is_ok());
        for m in Measure::ALL {
            assert!(RefineParams::for_measure(m).validate().is_ok());
        }
        let e = RefineParams {
            patch_px: 33,
            ..RefineParams::default()
        }
        .validate()
        .unwrap_err();
        assert_eq!(e.key, "refine.patch_px");
        assert!(e.to_string().contains("refine.patch_px = 33"));
        let e = RefineParams {
            search_px: 9,
            ..RefineParams::default()
        }
        .validate()
        .unwrap_err();
        assert_eq!(e.key, "refine.search_px");
        let e = RefineParams {
            min_peak: f64::NAN,
            ..RefineParams::default()
        }
        .validate()
        .unwrap_err();
        assert_eq!(e.key, "refine.min_peak");
    }

    #[test]
    fn a_rotated_scaled_target_is_refined_through_the_transform() {
        // The target grid is the reference's turned by 20°, at 0.8 of its sample size, and
        // offset; the pattern (seeded Gaussian blobs, 25 m across) is defined on the map, so
        // the transform maps one grid onto the other and only the content's own move remains.
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let blobs: Vec<[f64; 3]> = (0..400)
            .map(|_| {
                [
                    rng.gen_range(900.0..2300.0),
                    rng.gen_range(3600.0..5100.0),
                    rng.gen_range(-1.0..1.0),
                ]
            })
            .collect();
        let f = |x: f64, y: f64| {
            100.0
                + 50.0
                    * blobs
                        .iter()
                        .map(|b| b[2] * (-((x - b[0]).powi(2) + (y - b[1]).powi(2)) / 312.5).exp())
                        .sum::<f64>()
        };
        let rgt = GeoTransform([1000.0, 10.0, 0.0, 5000.0, 0.0, -10.0]);
        let (w, h) = (120, 120);
        let mk = |gt: GeoTransform, dx_map: f64| {
            let pixels = (0..w * h)
                .map(|i| {
                    let m = gt.sample_to_map((i % w) as f64, (i / w) as f64);
                    f(m[0] - dx_map, m[1]) as f32
                })
                .collect();
            Image::new(w, h, pixels, gt)
        };
        let reference = mk(rgt, 0.0);
        let (c, s) = (20f64.to_radians().cos(), 20f64.to_radians().sin());
        let tgt_gt = GeoTransform([1100.0, 8.0 * c, 8.0 * s, 4700.0, 8.0 * s, -8.0 * c]);
        // Target content moved 4 m east on the map: the refinement finds +0.4 sample east.
        let target = mk(tgt_gt, 4.0);
        let at = reference.geotransform.sample_to_map(60.0, 60.0);
        let r = refine_point(
            &reference,
            &target,
            &Similarity::IDENTITY,
            at,
            &RefineParams::default(),
        )
        .expect("kept");
        assert!(
            (r.shift_map[0] - 4.0).abs() < 0.5 && r.shift_map[1].abs() < 0.5,
            "{r:?}"
        );
        assert!((r.target[0] - (at[0] + 4.0)).abs() < 0.5, "{r:?}");
        // The same point near the reference's edge is refused, not guessed.
        let edge = reference.geotransform.sample_to_map(3.0, 60.0);
        assert_eq!(
            refine_point(
                &reference,
                &target,
                &Similarity::IDENTITY,
                edge,
                &RefineParams::default()
            ),
            Err(NotRefined::OutsideReference)
        );
    }

    #[test]
    fn a_flat_patch_has_no_texture() {
        let gt = GeoTransform([0.0, 1.0, 0.0, 100.0, 0.0, -1.0]);
        let flat = Image::new(100, 100, vec![7.0; 10_000], gt);
        let other = textured(100, 100, gt, 0.0);
        let at = gt.sample_to_map(50.0, 50.0);
        assert_eq!(
            refine_point(
                &flat,
                &other,
                &Similarity::IDENTITY,
                at,
                &RefineParams::default()
            ),
            Err(NotRefined::NoTexture)
        );
    }
}
