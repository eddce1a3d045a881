//! Guided matching: given a transform, pair every target landmark with its mutual nearest
//! reference landmark within the tolerance, refit, and repeat until the pairs stop changing.
//!
//! Mutual nearest neighbours are found with the two surveys' own uniform grids
//! ([`crate::spatial::PointGrid`], built once per survey on first use): the reference nearest
//! to S(t) within the tolerance, and whether any target is nearer to S⁻¹(r) than t. A
//! similarity scales all distances alike, so the second search asks exactly whether another
//! mapped target is nearer to r. Of landmarks at exactly the same distance, the one of the
//! lowest index counts as the nearer (deterministic; a k-d tree's choice among equals depends
//! on its layout).

use super::similarity::{fit_similarity_indexed, Similarity, SimilarityFit};
use crate::spatial::PointIndex;
use rayon::prelude::*;

/// One control point: a reference and a target landmark paired by the final transform.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Pair {
    /// Reference landmark index.
    pub reference: u32,
    /// Target landmark index.
    pub target: u32,
    /// Distance between the mapped target and the reference landmark, reference units.
    pub residual: f64,
}

/// The two surveys in the working frame with their indexes.
pub struct Frames<'a> {
    /// Reference landmark positions.
    pub reference: &'a [[f64; 2]],
    /// Target landmark positions.
    pub target: &'a [[f64; 2]],
    /// Index of `reference` (its grid is what the pairing searches).
    pub reference_index: &'a PointIndex,
    /// Index of `target` (its grid is what the pairing searches).
    pub target_index: &'a PointIndex,
}

/// Target landmarks one rayon task pairs.
const LANDMARKS_PER_TASK: usize = 4096;

/// Mutual nearest pairs under `s` within `tolerance`, for the target landmarks `subset`
/// (all when `None`), and the number of those landmarks whose nearest reference landmark lies
/// within `coverage` (the trials of the significance test). Pairs come in `subset` order.
///
/// The landmarks are shared between the threads of the current rayon pool in runs of
/// consecutive ones, and the runs' pairs put back in order: the result does not depend on the
/// number of threads.
pub fn mutual_pairs(
    frames: &Frames,
    s: &Similarity,
    tolerance: f64,
    coverage: f64,
    subset: Option<&[u32]>,
) -> (Vec<Pair>, usize) {
    pair_up(frames, &Visits::of(frames, subset), s, tolerance, coverage)
}

/// The target landmarks a pairing visits, with their positions in visiting order (read once
/// per guided match rather than once per round, and then in order).
struct Visits<'a> {
    ids: Option<&'a [u32]>,
    points: std::borrow::Cow<'a, [[f64; 2]]>,
}

impl<'a> Visits<'a> {
    fn of(frames: &Frames<'a>, subset: Option<&'a [u32]>) -> Self {
        let points = match subset {
            None => std::borrow::Cow::Borrowed(frames.target),
            Some(ids) => ids.iter().map(|&t| frames.target[t as usize]).collect(),
        };
        Visits {
            ids: subset,
            points,
        }
    }
}

/// [`mutual_pairs`] of `visits`.
fn pair_up(
    frames: &Frames,
    visits: &Visits,
    s: &Similarity,
    tolerance: f64,
    coverage: f64,
) -> (Vec<Pair>, usize) {
    let inv = s.inverse();
    let tol2 = tolerance * tolerance;
    let cov2 = coverage * coverage;
    let reference = frames.reference_index.grid();
    let target = frames.target_index.grid();
    // Landmark `t` at `at`: its pair, if any, pushed to `pairs`; true when it is covered. The
    // nearest reference landmark matters only within the tolerance (a pair) or the coverage
    // (a trial), so the grids' searches within those radii give what the nearest overall
    // would.
    let visit = |t: u32, at: [f64; 2], pairs: &mut Vec<Pair>| -> bool {
        let p = s.apply(at);
        let Some((r, d2, there)) = reference.nearest_within(p, tolerance) else {
            // The nearest lies at tol² or beyond: covered when one lies below cov².
            return cov2 > tol2 && reference.any_within(p, coverage);
        };
        let q = inv.apply(there);
        if !target.beaten(q, t, crate::spatial::dist2(at, q)) {
            pairs.push(Pair {
                reference: r,
                target: t,
                residual: d2.sqrt(),
            });
        }
        d2 < cov2
    };
    let total = visits.points.len();
    let id = |i: usize| visits.ids.map_or(i as u32, |ids| ids[i]);
    let runs: Vec<(Vec<Pair>, usize)> = (0..total.div_ceil(LANDMARKS_PER_TASK))
        .into_par_iter()
        .map(|run| {
            let mut pairs = Vec::new();
            let mut covered = 0;
            let end = ((run + 1) * LANDMARKS_PER_TASK).min(total);
            for i in run * LANDMARKS_PER_TASK..end {
                covered += usize::from(visit(id(i), visits.points[i], &mut pairs));
            }
            (pairs, covered)
        })
        .collect();
    let mut pairs = Vec::with_capacity(runs.iter().map(|r| r.0.len()).sum());
    let mut covered = 0;
    for (p, c) in runs {
        pairs.extend_from_slice(&p);
        covered += c;
    }
    (pairs, covered)
}

/// Least-squares similarity on pairs.
pub fn refit(frames: &Frames, pairs: &[Pair]) -> Option<SimilarityFit> {
    fit_similarity_indexed(pairs.len(), |i| {
        (
            frames.target[pairs[i].target as usize],
            frames.reference[pairs[i].reference as usize],
        )
    })
}

/// Result of guided matching.
#[derive(Debug, Clone)]
pub struct Guided {
    /// Final transform.
    pub transform: Similarity,
    /// Final pairs (under `transform`).
    pub pairs: Vec<Pair>,
    /// Trials: landmarks of the subset mapped into the reference's coverage.
    pub covered: usize,
    /// Refit rounds run.
    pub rounds: usize,
}

/// Iterates pairing and refitting from `start` until the pairs are stable, or the transform
/// moves less than a thousandth of the tolerance anywhere over the target's extent, or
/// `max_rounds` is reached. Pairs are those under the final transform.
pub fn guided_match(
    frames: &Frames,
    start: Similarity,
    tolerance: f64,
    coverage: f64,
    subset: Option<&[u32]>,
    max_rounds: usize,
) -> Guided {
    let probe = extent_corners(frames.target);
    let settled = |a: &Similarity, b: &Similarity| {
        probe
            .iter()
            .all(|&p| crate::spatial::dist2(a.apply(p), b.apply(p)) < (1e-3 * tolerance).powi(2))
    };
    let visits = Visits::of(frames, subset);
    let mut s = start;
    let (mut pairs, mut covered) = pair_up(frames, &visits, &s, tolerance, coverage);
    let mut rounds = 0;
    while rounds < max_rounds && pairs.len() >= 2 {
        let Some(fit) = refit(frames, &pairs) else {
            break;
        };
        if !fit.transform.is_valid() {
            break;
        }
        rounds += 1;
        let still = settled(&s, &fit.transform);
        let (next, next_covered) = pair_up(frames, &visits, &fit.transform, tolerance, coverage);
        let same = next.len() == pairs.len()
            && next
                .iter()
                .zip(&pairs)
                .all(|(a, b)| a.reference == b.reference && a.target == b.target);
        s = fit.transform;
        pairs = next;
        covered = next_covered;
        if same || still {
            break;
        }
    }
    Guided {
        transform: s,
        pairs,
        covered,
        rounds,
    }
}

/// Corners of the bounding box of `points` (from a strided pass).
pub fn extent_corners(points: &[[f64; 2]]) -> [[f64; 2]; 4] {
    crate::spatial::Extent::of(points.iter().step_by((points.len() / 1000).max(1))).corners()
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    #[test]
    fn converges_from_a_rough_start() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(8);
        let reference: Vec<[f64; 2]> = (0..2000)
            .map(|_| [rng.gen_range(0.0..1000.0), rng.gen_range(0.0..1000.0)])
            .collect();
        let truth = Similarity::from_params(0.5, 1.0, 300.0, -40.0);
        let inv = truth.inverse();
        let target: Vec<[f64; 2]> = reference.iter().map(|&p| inv.apply(p)).collect();
        let ri = PointIndex::new(&reference).unwrap();
        let ti = PointIndex::new(&target).unwrap();
        let frames = Frames {
            reference: &reference,
            target: &target,
            reference_index: &ri,
            target_index: &ti,
        };
        // Start a little off: 0.3 degrees and 2 units.
        let rough = Similarity::from_params(0.5 * 1.002, 1.0 + 0.005, 302.0, -39.0);
        let g = guided_match(&frames, rough, 8.0, 30.0, None, 20);
        assert_eq!(g.pairs.len(), 2000);
        assert!(g.pairs.iter().all(|p| p.reference == p.target));
        assert!((g.transform.scale() - 0.5).abs() < 1e-9);
    }
}
