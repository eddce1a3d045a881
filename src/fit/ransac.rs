//! RANSAC over 2-D similarity hypotheses drawn from candidate correspondences.
//!
//! Each round draws two hypotheses (Fischler & Bolles, CACM 24(6), 1981):
//! - a **1-signature hypothesis**: one candidate's two polygons give k + 1 point pairs, fitted in
//!   closed form; it is kept only if the polygons agree within the tolerance (a wrong key match
//!   rarely does);
//! - a **2-point hypothesis**: the exact similarity through the landmarks of two candidates.
//!
//! A hypothesis first has to pass a cheap local pre-test: the target landmarks just beyond its
//! polygon, nearest first, are mapped one by one, and Wald's sequential probability ratio test
//! decides between "a correct transform" (a landmark lands within the tolerance of a reference
//! landmark with probability at least [`HIT_RATE_IF_RIGHT`]) and "chance" (probability δ, the
//! chance rate at the reference's density), with error rates [`SPRT_ALPHA`] and [`SPRT_BETA`]
//! (Wald, *Sequential Analysis*, 1947; used for RANSAC by Matas & Chum, ICCV 2005). At most
//! [`LOCAL_RING`] landmarks are looked at; undecided counts as rejected. Only then is its
//! consensus counted: the landmarks of a fixed, spread sample of at most [`SCORE_SAMPLE`]
//! target landmarks that it maps within the tolerance of a reference landmark. A new best is
//! refitted on its consensus (the local optimisation of LO-RANSAC, Chum, Matas & Kittler,
//! DAGM 2003).
//!
//! Stopping: the inlier ratio w of the sample-count formula is the share of candidates drawn so
//! far whose landmarks the best hypothesis maps onto each other; rounds stop once the standard
//! count for the confidence (with s = 1, since every round has a 1-signature hypothesis) is
//! reached, or at `max_rounds`. The first rounds take candidates in order of key distance (the
//! ordered sampling of PROSAC, Chum & Matas, CVPR 2005), later ones at random.

use super::sample_count::sample_count;
use super::similarity::{fit_similarity_indexed, similarity_from_two, Similarity};
use crate::matching::Candidate;
use crate::signatures::Signatures;
use crate::spatial::{dist2, morton_order, PointIndex};
use rand::{Rng, SeedableRng};

/// Target landmarks scored per hypothesis (a spread sample).
pub const SCORE_SAMPLE: usize = 2_000;
/// Most landmarks beyond the polygon looked at by the local pre-test.
pub const LOCAL_RING: usize = 24;
/// Hit rate assumed for a correct transform: with 40% of the landmarks missing and 40% new on
/// each side, a target landmark has a reference partner with probability 0.6 · 0.6 = 0.36; the
/// test is set a little below that.
pub const HIT_RATE_IF_RIGHT: f64 = 0.25;
/// Probability of accepting a wrong hypothesis in the pre-test.
pub const SPRT_ALPHA: f64 = 0.01;
/// Probability of rejecting a correct one.
pub const SPRT_BETA: f64 = 0.05;

/// What RANSAC needs to see.
pub struct RansacInput<'a> {
    /// Reference landmarks (working frame).
    pub reference: &'a [[f64; 2]],
    /// Target landmarks (working frame).
    pub target: &'a [[f64; 2]],
    /// k-d tree of `reference`.
    pub reference_index: &'a PointIndex,
    /// k-d tree of `target`.
    pub target_index: &'a PointIndex,
    /// Reference signatures.
    pub reference_signatures: &'a Signatures,
    /// Target signatures.
    pub target_signatures: &'a Signatures,
    /// Candidate correspondences, best first.
    pub candidates: &'a [Candidate],
}

/// RANSAC settings.
#[derive(Debug, Clone, Copy)]
pub struct RansacParams {
    /// Inlier tolerance, reference units.
    pub tolerance: f64,
    /// Probability of drawing at least one all-inlier sample.
    pub confidence: f64,
    /// Upper bound on rounds.
    pub max_rounds: usize,
    /// Seed of the random generator.
    pub seed: u64,
    /// Keep this many distinct best hypotheses.
    pub keep: usize,
    /// Probability that a landmark mapped by a wrong transform lands within the tolerance of a
    /// reference landmark (δ of the pre-test).
    pub chance_rate: f64,
}

/// A scored hypothesis.
#[derive(Debug, Clone, Copy)]
pub struct Hypothesis {
    /// Transform target → reference.
    pub transform: Similarity,
    /// Consensus among the scoring sample.
    pub consensus: usize,
}

/// RANSAC result: the best distinct hypotheses, best first.
#[derive(Debug, Clone)]
pub struct RansacOutcome {
    /// Best distinct hypotheses, highest consensus first.
    pub best: Vec<Hypothesis>,
    /// Rounds run.
    pub rounds: usize,
    /// Hypotheses evaluated (two per round at most).
    pub hypotheses: usize,
    /// Size of the scoring sample.
    pub sample_size: usize,
}

/// Log-likelihood-ratio steps and thresholds of the pre-test.
struct Sprt {
    hit: f64,
    miss: f64,
    accept: f64,
    reject: f64,
}

impl Sprt {
    fn new(chance: f64) -> Sprt {
        let (e, d) = (HIT_RATE_IF_RIGHT, chance.clamp(0.01, 0.2));
        Sprt {
            hit: (e / d).ln(),
            miss: ((1.0 - e) / (1.0 - d)).ln(),
            accept: ((1.0 - SPRT_BETA) / SPRT_ALPHA).ln(),
            reject: (SPRT_BETA / (1.0 - SPRT_ALPHA)).ln(),
        }
    }
}

struct Scorer<'a> {
    input: &'a RansacInput<'a>,
    sample: Vec<u32>,
    tol2: f64,
    scratch: Vec<(u32, f64)>,
    sprt: Sprt,
}

impl Scorer<'_> {
    /// True when `t` lands within the tolerance of some reference landmark under `s`.
    #[inline]
    fn hits(&self, s: &Similarity, t: u32) -> bool {
        self.input
            .reference_index
            .nearest(s.apply(self.input.target[t as usize]))
            .is_some_and(|(_, d2)| d2 < self.tol2)
    }

    /// The local pre-test (SPRT) around target landmark `t0`, skipping its first `skip`
    /// neighbours (itself and the polygon's vertices, which the hypothesis was fitted to).
    fn local_test(&mut self, s: &Similarity, t0: u32, skip: usize) -> bool {
        let p = self.input.target[t0 as usize];
        let mut ring = std::mem::take(&mut self.scratch);
        self.input
            .target_index
            .nearest_n(p, skip + LOCAL_RING, &mut ring);
        let mut llr = 0.0;
        let mut accepted = false;
        for &(t, _) in ring.iter().skip(skip) {
            llr += if self.hits(s, t) {
                self.sprt.hit
            } else {
                self.sprt.miss
            };
            if llr >= self.sprt.accept {
                accepted = true;
                break;
            }
            if llr <= self.sprt.reject {
                break;
            }
        }
        self.scratch = ring;
        accepted
    }

    fn consensus(&self, s: &Similarity) -> usize {
        self.sample.iter().filter(|&&t| self.hits(s, t)).count()
    }

    /// Least-squares refit on the sample landmarks `s` maps onto a reference landmark.
    fn refit_on_consensus(&self, s: &Similarity) -> Option<Similarity> {
        let pairs: Vec<([f64; 2], [f64; 2])> = self
            .sample
            .iter()
            .filter_map(|&t| {
                let q = self.input.target[t as usize];
                let (r, d2) = self.input.reference_index.nearest(s.apply(q))?;
                (d2 < self.tol2).then(|| (q, self.input.reference[r as usize]))
            })
            .collect();
        fit_similarity_indexed(pairs.len(), |i| pairs[i])
            .map(|f| f.transform)
            .filter(|t| t.is_valid())
    }

    fn centres(&self, c: &Candidate) -> (u32, [f64; 2], [f64; 2]) {
        let i = self.input;
        let t = i.target_signatures.landmark(c.target as usize);
        (
            t,
            i.target[t as usize],
            i.reference[i.reference_signatures.landmark(c.reference as usize) as usize],
        )
    }
}

/// The similarity that maps candidate `c`'s target polygon onto its reference polygon, if they
/// agree within `tolerance` (RMS over the vertices).
pub fn polygon_hypothesis(
    input: &RansacInput,
    c: &Candidate,
    tolerance: f64,
) -> Option<Similarity> {
    let tp = input.target_signatures.polygon(c.target as usize);
    let rp = input.reference_signatures.polygon(c.reference as usize);
    let fit = fit_similarity_indexed(tp.len(), |i| {
        (
            input.target[tp[i] as usize],
            input.reference[rp[i] as usize],
        )
    })?;
    (fit.transform.is_valid() && fit.rmse <= tolerance).then_some(fit.transform)
}

/// Runs RANSAC.
pub fn ransac(input: &RansacInput, params: &RansacParams) -> RansacOutcome {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(params.seed);
    let cands = input.candidates;
    let mut out = RansacOutcome {
        best: Vec::new(),
        rounds: 0,
        hypotheses: 0,
        sample_size: 0,
    };
    if cands.is_empty() {
        return out;
    }
    let order = morton_order(input.target);
    let step = (order.len() / SCORE_SAMPLE).max(1);
    let mut scorer = Scorer {
        input,
        sample: order.into_iter().step_by(step).collect(),
        tol2: params.tolerance * params.tolerance,
        scratch: Vec::new(),
        sprt: Sprt::new(params.chance_rate),
    };
    out.sample_size = scorer.sample.len();
    let k = input.target_signatures.vertices_per_polygon;
    let probe = super::guided::extent_corners(input.target);
    let mut needed = params.max_rounds as u64;
    let mut best_consensus = 0usize;
    // Candidates drawn so far, and the (target, reference) landmarks of each 1-signature draw,
    // to estimate the inlier ratio against the current best.
    let mut drawn: Vec<([f64; 2], [f64; 2])> = Vec::new();
    let mut agreeing = 0usize;
    let ordered = cands.len().min(params.max_rounds / 4);
    let mut round = 0usize;
    while (round as u64) < needed && round < params.max_rounds {
        let c1 = if round < ordered {
            &cands[round]
        } else {
            &cands[rng.gen_range(0..cands.len())]
        };
        let c2 = &cands[rng.gen_range(0..cands.len())];
        round += 1;
        let (t1, p1, r1) = scorer.centres(c1);
        let (_, p2, r2) = scorer.centres(c2);
        drawn.push((p1, r1));
        if let Some(b) = out.best.first() {
            if dist2(b.transform.apply(p1), r1) < scorer.tol2 {
                agreeing += 1;
            }
        }
        let hyps = [
            polygon_hypothesis(input, c1, params.tolerance).map(|h| (h, k)),
            if p1 != p2 && r1 != r2 {
                similarity_from_two([p1, p2], [r1, r2]).map(|h| (h, 1))
            } else {
                None
            },
        ];
        let mut improved = false;
        for (h, skip) in hyps.into_iter().flatten() {
            out.hypotheses += 1;
            if !scorer.local_test(&h, t1, skip) {
                continue;
            }
            let mut h = h;
            let mut score = scorer.consensus(&h);
            for _ in 0..2 {
                let Some(better) = scorer.refit_on_consensus(&h) else {
                    break;
                };
                let s2 = scorer.consensus(&better);
                if s2 < score {
                    break;
                }
                h = better;
                score = s2;
            }
            keep_best(
                &mut out.best,
                Hypothesis {
                    transform: h,
                    consensus: score,
                },
                params,
                &probe,
            );
            if score > best_consensus {
                best_consensus = score;
                improved = true;
            }
        }
        if improved {
            // Recount the draws that agree with the new best.
            let b = out.best[0].transform;
            agreeing = drawn
                .iter()
                .filter(|(p, r)| dist2(b.apply(*p), *r) < scorer.tol2)
                .count();
        }
        if best_consensus > 0 {
            let w = agreeing.max(1) as f64 / drawn.len() as f64;
            needed = sample_count(params.confidence, w, 1).clamp(64, params.max_rounds as u64);
        }
    }
    out.rounds = round;
    out
}

/// Keeps the `keep` best hypotheses that map the target's extent to clearly different places.
fn keep_best(
    best: &mut Vec<Hypothesis>,
    h: Hypothesis,
    params: &RansacParams,
    probe: &[[f64; 2]; 4],
) {
    let same = |a: &Similarity, b: &Similarity| {
        probe.iter().all(|&p| {
            crate::spatial::dist2(a.apply(p), b.apply(p)) < 4.0 * params.tolerance.powi(2)
        })
    };
    if let Some(pos) = best.iter().position(|b| same(&b.transform, &h.transform)) {
        if best[pos].consensus >= h.consensus {
            return;
        }
        best.remove(pos);
    }
    let at = best.partition_point(|b| b.consensus >= h.consensus);
    best.insert(at, h);
    best.truncate(params.keep);
}
