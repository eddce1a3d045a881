//! Stage 4 — matching: candidate correspondences between the two surveys' signatures.
//!
//! **In:** reference and target [`Signatures`] and the number of candidates per query.
//! **Out:** [`Candidate`]s: (target signature, reference signature, ranking score), best
//! first.
//!
//! The reference keys go into a kiddo k-d tree of the keys' dimension (per harmonic 2 in the
//! unit disc, 3 on the unit sphere: 2, 3, 4 or 6); every target key asks for its nearest few.
//! Queries run in Morton order of the keys' first two coordinates, so that consecutive queries
//! touch nearby leaves.

mod params;

pub use params::{MatchingError, MatchingParams, MatchingParamsError};

use crate::signatures::Signatures;
use crate::spatial::morton_order;
use kiddo::{ImmutableKdTree, SquaredEuclidean};
use std::num::NonZero;

/// How the candidates of one query are ranked.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Rank {
    /// By Euclidean distance between keys.
    #[default]
    Distance,
    /// By key distance divided by the predicted noise of the two keys,
    /// √(s_t² + s_r²) from [`crate::signatures::fourier::key_sensitivity`]: twice as many
    /// neighbours are fetched and the best half kept.
    Sensitivity,
}

/// One candidate correspondence between a target and a reference signature.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Candidate {
    /// Index into the target signatures.
    pub target: u32,
    /// Index into the reference signatures.
    pub reference: u32,
    /// Ranking score, smaller is better: the key distance under [`Rank::Distance`], that
    /// distance over the keys' predicted noise under [`Rank::Sensitivity`].
    pub score: f64,
}

/// Finds, for every target signature, its `per_query` best reference signatures by `rank`.
/// The result is sorted by score, best first.
///
/// # Panics
/// When the two signature sets have different key dimensions, or a dimension other than 2, 3,
/// 4 or 6 (programmer error: both come from one validated [`crate::signatures::SignatureParams`]).
pub fn candidates(
    reference: &Signatures,
    target: &Signatures,
    per_query: usize,
    rank: Rank,
    progress: &mut dyn FnMut(usize),
) -> Vec<Candidate> {
    assert_eq!(reference.key_dims, target.key_dims, "key dimensions differ");
    let mut out = match reference.key_dims {
        2 => candidates_k::<2>(reference, target, per_query, rank, progress),
        3 => candidates_k::<3>(reference, target, per_query, rank, progress),
        4 => candidates_k::<4>(reference, target, per_query, rank, progress),
        6 => candidates_k::<6>(reference, target, per_query, rank, progress),
        d => panic!("unsupported key dimension {d}"),
    };
    out.sort_by(|a, b| a.score.total_cmp(&b.score));
    out
}

fn as_points<const K: usize>(s: &Signatures) -> Vec<[f64; K]> {
    s.keys
        .chunks_exact(K)
        .map(|c| std::array::from_fn(|d| c[d]))
        .collect()
}

fn candidates_k<const K: usize>(
    reference: &Signatures,
    target: &Signatures,
    per_query: usize,
    rank: Rank,
    progress: &mut dyn FnMut(usize),
) -> Vec<Candidate> {
    let fetch = match rank {
        Rank::Distance => per_query,
        Rank::Sensitivity => 2 * per_query,
    };
    let (Some(n), false) = (NonZero::new(fetch), reference.is_empty()) else {
        return Vec::new();
    };
    let rkeys = as_points::<K>(reference);
    let Ok(tree) = ImmutableKdTree::<f64, K>::new_from_slice(&rkeys) else {
        return Vec::new();
    };
    let tkeys = as_points::<K>(target);
    let first_two: Vec<[f64; 2]> = tkeys.iter().map(|k| [k[0], k[1]]).collect();
    let mut out = Vec::with_capacity(target.len() * per_query);
    for (i, &t) in morton_order(&first_two).iter().enumerate() {
        let found = tree
            .query(&tkeys[t as usize])
            .nearest_n::<SquaredEuclidean<f64>>(n)
            .execute();
        let start = out.len();
        out.extend(found.into_iter().map(|r| Candidate {
            target: t,
            reference: r.item,
            score: r.distance.sqrt(),
        }));
        if rank == Rank::Sensitivity {
            let st = target.sensitivity[t as usize] as f64;
            let mine = &mut out[start..];
            for c in mine.iter_mut() {
                let sr = reference.sensitivity[c.reference as usize] as f64;
                c.score /= (st * st + sr * sr).sqrt().max(f64::MIN_POSITIVE);
            }
            mine.sort_by(|a, b| a.score.total_cmp(&b.score));
            out.truncate(start + per_query);
        }
        if i % 65536 == 65535 {
            progress(i + 1);
        }
    }
    progress(target.len());
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    fn random_sigs(rng: &mut rand_chacha::ChaCha8Rng, n: usize, dims: usize) -> Signatures {
        Signatures {
            vertices_per_polygon: 1,
            polygons: (0..n as u32).collect(),
            key_dims: dims,
            keys: (0..n * dims).map(|_| rng.gen_range(-1.0..1.0)).collect(),
            sensitivity: vec![1.0; n],
        }
    }

    #[test]
    fn candidates_agree_with_brute_force() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2);
        for dims in [2, 4] {
            let r = random_sigs(&mut rng, 2000, dims);
            let t = random_sigs(&mut rng, 300, dims);
            let c = candidates(&r, &t, 3, Rank::Distance, &mut |_| {});
            assert_eq!(c.len(), 900);
            assert!(c.windows(2).all(|w| w[0].score <= w[1].score));
            for ti in 0..t.len() {
                let mut brute: Vec<(usize, f64)> = (0..r.len())
                    .map(|i| {
                        let d2: f64 = r
                            .key(i)
                            .iter()
                            .zip(t.key(ti))
                            .map(|(a, b)| (a - b).powi(2))
                            .sum();
                        (i, d2.sqrt())
                    })
                    .collect();
                brute.sort_by(|a, b| a.1.total_cmp(&b.1));
                let mut got: Vec<&Candidate> =
                    c.iter().filter(|x| x.target as usize == ti).collect();
                got.sort_by(|a, b| a.score.total_cmp(&b.score));
                for (g, b) in got.iter().zip(&brute) {
                    assert_eq!(g.reference as usize, b.0, "dims {dims}");
                }
            }
        }
    }
}
