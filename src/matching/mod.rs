//! Stage 4 — matching: candidate correspondences between the two surveys' signatures.
//!
//! **In:** reference and target [`Signatures`] and the number of candidates per query.
//! **Out:** [`Candidate`]s: (target signature, reference signature, key distance), best first.
//!
//! The reference keys go into a 2-D kiddo k-d tree; every target key asks for its nearest few.
//! Queries run in Morton order of the keys so that consecutive queries touch nearby leaves.

use crate::signatures::Signatures;
use crate::spatial::{morton_order, PointIndex};

/// One candidate correspondence between a target and a reference signature.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Candidate {
    /// Index into the target signatures.
    pub target: u32,
    /// Index into the reference signatures.
    pub reference: u32,
    /// Euclidean distance between the two keys (smaller is better).
    pub distance: f64,
}

/// Finds, for every target signature, its `per_query` nearest reference signatures.
/// The result is sorted by key distance, best first.
pub fn candidates(
    reference: &Signatures,
    target: &Signatures,
    per_query: usize,
    progress: &mut dyn FnMut(usize),
) -> Vec<Candidate> {
    let Some(index) = PointIndex::new(&reference.keys) else {
        return Vec::new();
    };
    let mut out = Vec::with_capacity(target.len() * per_query);
    let mut found = Vec::with_capacity(per_query);
    for (i, &t) in morton_order(&target.keys).iter().enumerate() {
        index.nearest_n(target.keys[t as usize], per_query, &mut found);
        out.extend(found.iter().map(|&(r, d2)| Candidate {
            target: t,
            reference: r,
            distance: d2.sqrt(),
        }));
        if i % 65536 == 65535 {
            progress(i + 1);
        }
    }
    progress(target.len());
    out.sort_by(|a, b| a.distance.total_cmp(&b.distance));
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    #[test]
    fn candidates_agree_with_brute_force() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2);
        let mk = |rng: &mut rand_chacha::ChaCha8Rng, n: usize| Signatures {
            vertices_per_polygon: 1,
            polygons: (0..n as u32).collect(),
            keys: (0..n)
                .map(|_| [rng.gen_range(-1.0..1.0), rng.gen_range(-1.0..1.0)])
                .collect(),
        };
        let r = mk(&mut rng, 2000);
        let t = mk(&mut rng, 300);
        let c = candidates(&r, &t, 3, &mut |_| {});
        assert_eq!(c.len(), 900);
        assert!(c.windows(2).all(|w| w[0].distance <= w[1].distance));
        for ti in 0..t.len() {
            let mut brute: Vec<(usize, f64)> = r
                .keys
                .iter()
                .enumerate()
                .map(|(i, k)| (i, crate::spatial::dist2(*k, t.keys[ti]).sqrt()))
                .collect();
            brute.sort_by(|a, b| a.1.total_cmp(&b.1));
            let mut got: Vec<&Candidate> = c.iter().filter(|x| x.target as usize == ti).collect();
            got.sort_by(|a, b| a.distance.total_cmp(&b.distance));
            for (g, b) in got.iter().zip(&brute) {
                assert_eq!(g.reference as usize, b.0);
            }
        }
    }
}
