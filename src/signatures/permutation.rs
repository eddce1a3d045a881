//! The fixed pseudo-random permutation of a polygon's vertex order.
//!
//! Applying one fixed permutation to the vertex order of every polygon (the same on both
//! surveys) keeps the key similarity-invariant — a similarity does not touch the order — but
//! spreads a smooth outline's energy over all harmonics, so that the ratio Z_j / Z_{−j} of a
//! convex polygon is no longer dominated by one tiny coefficient. The permutation depends only
//! on the polygon length; it is drawn once from a seeded generator and is part of the method:
//! changing [`PERMUTATION_SEED`] changes every key.

use rand::seq::SliceRandom;
use rand::SeedableRng;

/// Seed of the fixed permutations (part of the key definition; never change it silently).
pub const PERMUTATION_SEED: u64 = 0x7469_656d_6172_6b31; // "tiemark1"

/// The fixed permutation of `n` vertex positions: polygon vertex `i` of the permuted polygon is
/// vertex `perm[i]` of the original. Never the identity for n ≥ 3.
pub fn fixed_permutation(n: usize) -> Vec<usize> {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(PERMUTATION_SEED ^ n as u64);
    let mut perm: Vec<usize> = (0..n).collect();
    loop {
        perm.shuffle(&mut rng);
        if n < 3 || perm.iter().enumerate().any(|(i, &p)| i != p) {
            return perm;
        }
    }
}

/// Reorders `vertices` in place by `perm` (see [`fixed_permutation`]).
pub fn apply<T: Copy>(perm: &[usize], vertices: &mut [T], scratch: &mut Vec<T>) {
    scratch.clear();
    scratch.extend(perm.iter().map(|&i| vertices[i]));
    vertices.copy_from_slice(scratch);
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fixed_seeded_and_a_true_permutation() {
        for n in 3..20 {
            let p = fixed_permutation(n);
            assert_eq!(p, fixed_permutation(n), "same on every call (both surveys)");
            let mut s = p.clone();
            s.sort();
            assert_eq!(s, (0..n).collect::<Vec<_>>());
            assert!(p.iter().enumerate().any(|(i, &v)| i != v));
        }
    }

    #[test]
    fn golden_permutations() {
        // Pinned literals: the permutation is part of the key definition, so a change of rand's
        // shuffle or of ChaCha8's stream (a dependency upgrade) must fail here rather than
        // silently change every permuted key. Recorded from this implementation (rand 0.8,
        // rand_chacha 0.3); there is no outside source for them.
        assert_eq!(fixed_permutation(5), [3, 0, 1, 2, 4]);
        assert_eq!(fixed_permutation(6), [5, 3, 2, 0, 4, 1]);
        assert_eq!(fixed_permutation(10), [9, 0, 7, 1, 2, 4, 6, 5, 3, 8]);
    }

    #[test]
    fn apply_reorders() {
        let mut v = [10, 11, 12, 13];
        let mut scratch = Vec::new();
        apply(&[2, 0, 3, 1], &mut v, &mut scratch);
        assert_eq!(v, [12, 10, 13, 11]);
    }
}
