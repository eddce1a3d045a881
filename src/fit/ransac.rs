//! RANSAC over 2-D similarity hypotheses drawn from candidate correspondences.
//!
//! Each round draws two hypotheses (Fischler & Bolles, CACM 24(6), 1981):
//! - a **1-signature hypothesis**: one candidate's two polygons give k + 1 point pairs, fitted in
//!   closed form; it is kept only if the polygons agree within the tolerance (a wrong key match
//!   almost never does);
//! - a **2-point hypothesis**: the exact similarity through the landmarks of two candidates.
//!
//! A hypothesis is scored by its consensus: the candidates (from a fixed, seeded sample of at
//! most [`SCORE_SAMPLE`]) whose target landmark it maps within the tolerance of their reference
//! landmark. When a hypothesis beats the best so far it is refitted on its consensus, twice
//! (the local optimisation of LO-RANSAC, Chum, Matas & Kittler, DAGM 2003). Rounds stop when
//! the standard sample count for the confidence and the best inlier ratio so far (with s = 1,
//! since every round includes a 1-signature hypothesis) is reached, or at `max_rounds`.

use super::sample_count::sample_count;
use super::similarity::{fit_similarity_indexed, similarity_from_two, Similarity};
use crate::matching::Candidate;
use crate::signatures::Signatures;
use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};

/// Most candidates used to score one hypothesis.
pub const SCORE_SAMPLE: usize = 20_000;

/// What RANSAC needs to see.
pub struct RansacInput<'a> {
    /// Reference landmarks (working frame).
    pub reference: &'a [[f64; 2]],
    /// Target landmarks (working frame).
    pub target: &'a [[f64; 2]],
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

struct Scorer<'a> {
    pairs: Vec<([f64; 2], [f64; 2])>,
    input: &'a RansacInput<'a>,
    tol2: f64,
}

impl Scorer<'_> {
    fn consensus(&self, s: &Similarity) -> usize {
        self.pairs
            .iter()
            .filter(|(t, r)| crate::spatial::dist2(s.apply(*t), *r) < self.tol2)
            .count()
    }

    fn refit_on_consensus(&self, s: &Similarity) -> Option<Similarity> {
        let inl: Vec<&([f64; 2], [f64; 2])> = self
            .pairs
            .iter()
            .filter(|(t, r)| crate::spatial::dist2(s.apply(*t), *r) < self.tol2)
            .collect();
        fit_similarity_indexed(inl.len(), |i| (inl[i].0, inl[i].1))
            .map(|f| f.transform)
            .filter(|t| t.is_valid())
    }

    fn centres(&self, c: &Candidate) -> ([f64; 2], [f64; 2]) {
        let i = self.input;
        (
            i.target[i.target_signatures.landmark(c.target as usize) as usize],
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
    let mut order: Vec<usize> = (0..cands.len()).collect();
    order.shuffle(&mut rng);
    order.truncate(SCORE_SAMPLE);
    let mut scorer = Scorer {
        pairs: Vec::new(),
        input,
        tol2: params.tolerance * params.tolerance,
    };
    scorer.pairs = order.iter().map(|&i| scorer.centres(&cands[i])).collect();
    out.sample_size = scorer.pairs.len();
    let sample = scorer.pairs.len() as f64;
    let probe = extent_probe(input.target);
    let mut needed = params.max_rounds as u64;
    let mut best_consensus = 0usize;
    let mut round = 0usize;
    // The first rounds walk the best-ranked candidates in order (ordered sampling, in the
    // spirit of PROSAC, Chum & Matas, CVPR 2005); later ones draw at random.
    let ordered = cands.len().min(params.max_rounds / 4);
    while (round as u64) < needed && round < params.max_rounds {
        let c1 = if round < ordered {
            &cands[round]
        } else {
            &cands[rng.gen_range(0..cands.len())]
        };
        let c2 = &cands[rng.gen_range(0..cands.len())];
        round += 1;
        let mut hyps: [Option<Similarity>; 2] = [None, None];
        hyps[0] = polygon_hypothesis(input, c1, params.tolerance);
        let (t1, r1) = scorer.centres(c1);
        let (t2, r2) = scorer.centres(c2);
        if t1 != t2 && r1 != r2 {
            hyps[1] = similarity_from_two([t1, t2], [r1, r2]);
        }
        for h in hyps.into_iter().flatten() {
            out.hypotheses += 1;
            let mut h = h;
            let mut score = scorer.consensus(&h);
            if score == 0 {
                continue;
            }
            // Local optimisation: refit on the consensus while it grows.
            for _ in 0..2 {
                if score < 3 {
                    break;
                }
                match scorer.refit_on_consensus(&h) {
                    Some(better) => {
                        let s2 = scorer.consensus(&better);
                        if s2 >= score {
                            h = better;
                            score = s2;
                        } else {
                            break;
                        }
                    }
                    None => break,
                }
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
                needed = sample_count(params.confidence, best_consensus as f64 / sample, 1)
                    .max(32)
                    .min(params.max_rounds as u64);
            }
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

/// Four probe points near the corners of the target's extent.
fn extent_probe(points: &[[f64; 2]]) -> [[f64; 2]; 4] {
    let (mut lo, mut hi) = ([f64::INFINITY; 2], [f64::NEG_INFINITY; 2]);
    // A strided pass is enough to place the probes.
    for p in points.iter().step_by((points.len() / 1000).max(1)) {
        for d in 0..2 {
            lo[d] = lo[d].min(p[d]);
            hi[d] = hi[d].max(p[d]);
        }
    }
    [
        [lo[0], lo[1]],
        [hi[0], lo[1]],
        [hi[0], hi[1]],
        [lo[0], hi[1]],
    ]
}
