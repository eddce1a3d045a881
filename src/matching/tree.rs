//! A static k-d tree over K-dimensional keys, for the n nearest keys of a query.
//!
//! **In:** the keys to index, `[f64; K]` each (the matching stage uses K = 2, 3, 4 and 6; any
//! K ≥ 1 works), named by their place in the slice; then, query by query, a key and a count n.
//! **Out:** per query, the n nearest keys as (index, squared distance), nearest first, exactly
//! equal distances by the lower index first; all the keys, so ordered, when there are n or
//! fewer.
//!
//! The answer is exactly the brute-force one: the squared distance of a key is computed as
//! Σ_d (q_d − k_d)² summed in dimension order, the same floating-point number a plain loop over
//! the dimensions gives (`spatial::dist2` sums the same way in two dimensions), and the search
//! prunes a cell of the tree only when its lower bound is strictly above the n-th best distance
//! so far.
//! That bound (Arya and Mount's incremental distance to the cell) is kept per dimension, each
//! term the rounded square of the rounded gap between the query and the cell's nearest split
//! plane, and summed in dimension order too; rounding is monotone, so the bound never exceeds
//! the computed distance of a key inside the cell, and a pruned cell holds no key that would
//! have entered the list, ties included.
//!
//! Layout: the keys are split at the median (`select_nth_unstable`) of their widest dimension
//! into 2^levels leaves of at most [`LEAF`] keys (the top splits built in parallel with
//! rayon); the split nodes are stored in pre-order (a node's near child is next to it); the
//! leaves' keys are stored in tree order one dimension at a time, so that the distance loop
//! runs over the keys of a leaf and vectorises with plain SSE2, each key's sum still in
//! dimension order.
//!
//! Keys are NaN-free upstream. Were they not: the tree still builds (splits order values with
//! `total_cmp`), a key with a NaN coordinate is never found (its distance compares false with
//! everything), and a query with a NaN coordinate finds nothing; the other queries' answers are
//! unchanged over the other keys.

/// The most keys a leaf holds.
pub const LEAF: usize = 16;

/// Keys below which a subtree is built on one thread.
const PARALLEL_BUILD: usize = 32_768;

/// One split of the tree: keys with `key[dim] <= value` lie in the lower child, keys with
/// `key[dim] >= value` in the upper one (`value` is a key's own coordinate, the median's).
#[derive(Debug, Clone, Copy, Default)]
struct Split {
    value: f64,
    dim: u32,
}

/// The k-d tree: built once by [`KeyTree::new`], then read by [`KeyTree::nearest`] from any
/// number of threads.
#[derive(Debug)]
pub struct KeyTree<const K: usize> {
    /// Levels of splits: the tree has 2^levels leaves.
    levels: u32,
    /// The 2^levels − 1 splits in pre-order: the node at `p` of height `h` has its lower child
    /// at `p + 1` and its upper child at `p + 2^(h−1)`.
    splits: Vec<Split>,
    /// Where each leaf starts in `coords` and `index`, left to right, then the number of keys.
    leaf_start: Vec<u32>,
    /// `coords[d][i]`: coordinate d of the i-th key in tree order.
    coords: [Vec<f64>; K],
    /// `index[i]`: the place, in the slice given to [`KeyTree::new`], of the i-th key in tree
    /// order.
    index: Vec<u32>,
}

/// A key and its place, as the build moves them.
type Row<const K: usize> = ([f64; K], u32);

impl<const K: usize> KeyTree<K> {
    /// Indexes `keys`.
    ///
    /// # Panics
    /// When there are more than `u32::MAX` keys (the caller refuses those first).
    pub fn new(keys: &[[f64; K]]) -> Self {
        assert!(
            keys.len() <= u32::MAX as usize,
            "too many keys for u32 indices"
        );
        let n = keys.len();
        let mut levels = 0u32;
        while n.div_ceil(1 << levels) > LEAF {
            levels += 1;
        }
        let mut rows: Vec<Row<K>> = keys
            .iter()
            .enumerate()
            .map(|(i, k)| (*k, i as u32))
            .collect();
        let mut splits = vec![Split::default(); (1usize << levels) - 1];
        let mut leaf_start = vec![0u32; (1usize << levels) + 1];
        leaf_start[1 << levels] = n as u32;
        build(
            &mut rows,
            &mut splits,
            &mut leaf_start[..1 << levels],
            0,
            levels,
        );
        let coords = std::array::from_fn(|d| rows.iter().map(|r| r.0[d]).collect());
        let index = rows.iter().map(|r| r.1).collect();
        KeyTree {
            levels,
            splits,
            leaf_start,
            coords,
            index,
        }
    }

    /// The `n` keys nearest to `query`, as (index, squared distance), into `best` (cleared
    /// first): nearest first, equal distances by the lower index first.
    pub fn nearest(&self, query: &[f64; K], n: usize, best: &mut Vec<(u32, f64)>) {
        best.clear();
        if n == 0 || self.index.is_empty() {
            return;
        }
        let mut search = Search {
            tree: self,
            query,
            n,
            best,
            gap: [0.0; K],
        };
        search.descend(0, self.levels, 0);
    }
}

/// Splits `rows` at the median of their widest dimension into `2^h` leaves: the splits of
/// this subtree go to `splits` (pre-order), the leaves' starts (offset by `base`, the place
/// of `rows[0]` among all keys) to `starts`.
fn build<const K: usize>(
    rows: &mut [Row<K>],
    splits: &mut [Split],
    starts: &mut [u32],
    base: usize,
    h: u32,
) {
    if h == 0 {
        starts[0] = base as u32;
        return;
    }
    let dim = widest(rows);
    let mid = rows.len() / 2;
    let value = if rows.is_empty() {
        0.0
    } else {
        rows.select_nth_unstable_by(mid, |a, b| a.0[dim].total_cmp(&b.0[dim]));
        rows[mid].0[dim]
    };
    splits[0] = Split {
        value,
        dim: dim as u32,
    };
    let half = 1usize << (h - 1);
    let (lower_rows, upper_rows) = rows.split_at_mut(mid);
    let (lower_splits, upper_splits) = splits[1..].split_at_mut(half - 1);
    let (lower_starts, upper_starts) = starts.split_at_mut(half);
    let mut lower = move || build(lower_rows, lower_splits, lower_starts, base, h - 1);
    let mut upper = move || build(upper_rows, upper_splits, upper_starts, base + mid, h - 1);
    if mid >= PARALLEL_BUILD {
        rayon::join(lower, upper);
    } else {
        lower();
        upper();
    }
}

/// The dimension over which `rows` spread the most (the first of equal spreads).
fn widest<const K: usize>(rows: &[Row<K>]) -> usize {
    let mut lo = [f64::INFINITY; K];
    let mut hi = [f64::NEG_INFINITY; K];
    for (k, _) in rows {
        for d in 0..K {
            lo[d] = lo[d].min(k[d]);
            hi[d] = hi[d].max(k[d]);
        }
    }
    let mut best = 0;
    for d in 1..K {
        if hi[d] - lo[d] > hi[best] - lo[best] {
            best = d;
        }
    }
    best
}

/// One query's descent.
struct Search<'a, const K: usize> {
    tree: &'a KeyTree<K>,
    query: &'a [f64; K],
    n: usize,
    /// The best so far, sorted by distance and then index, at most `n`.
    best: &'a mut Vec<(u32, f64)>,
    /// Per dimension, the rounded square of the gap between the query and the current cell
    /// (0 where the query lies within the cell's extent).
    gap: [f64; K],
}

impl<const K: usize> Search<'_, K> {
    /// The n-th best squared distance so far, or infinity while fewer than n are known.
    fn worst(&self) -> f64 {
        if self.best.len() < self.n {
            f64::INFINITY
        } else {
            self.best[self.n - 1].1
        }
    }

    /// Searches the subtree of height `h` whose split is at `p` and whose first leaf is
    /// `leaf`.
    fn descend(&mut self, p: usize, h: u32, leaf: usize) {
        if h == 0 {
            self.scan(leaf);
            return;
        }
        let split = self.tree.splits[p];
        let d = split.dim as usize;
        let diff = self.query[d] - split.value;
        let half = 1usize << (h - 1);
        let (near, far, near_leaf, far_leaf) = if diff < 0.0 {
            (p + 1, p + half, leaf, leaf + half)
        } else {
            (p + half, p + 1, leaf + half, leaf)
        };
        self.descend(near, h - 1, near_leaf);
        let old = self.gap[d];
        self.gap[d] = (diff * diff).max(old);
        // The far cell's lower bound, summed in dimension order as the distances are.
        let mut bound = 0.0;
        for g in self.gap {
            bound += g;
        }
        if bound <= self.worst() {
            self.descend(far, h - 1, far_leaf);
        }
        self.gap[d] = old;
    }

    /// Offers the keys of leaf `leaf` to the best list.
    fn scan(&mut self, leaf: usize) {
        let tree = self.tree;
        let start = tree.leaf_start[leaf] as usize;
        let end = tree.leaf_start[leaf + 1] as usize;
        let mut dist = [0.0f64; LEAF];
        let dist = &mut dist[..end - start];
        // One dimension at a time over the leaf's keys: vectorisable, and each key's sum still
        // runs in dimension order.
        for d in 0..K {
            let q = self.query[d];
            for (s, &c) in dist.iter_mut().zip(&tree.coords[d][start..end]) {
                let t = q - c;
                *s += t * t;
            }
        }
        let mut worst = self.worst();
        for (&s, &i) in dist.iter().zip(&tree.index[start..end]) {
            if s <= worst {
                crate::spatial::offer_nearest(self.best, self.n, i, s);
                worst = self.worst();
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    /// The documented answer by brute force: every key's squared distance summed in dimension
    /// order, sorted by (distance, index), the first n.
    fn brute<const K: usize>(keys: &[[f64; K]], q: &[f64; K], n: usize) -> Vec<(u32, f64)> {
        let mut all: Vec<(f64, u32)> = keys
            .iter()
            .enumerate()
            .map(|(i, k)| {
                let mut s = 0.0;
                for d in 0..K {
                    s += (q[d] - k[d]) * (q[d] - k[d]);
                }
                (s, i as u32)
            })
            .collect();
        all.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        all.truncate(n);
        all.into_iter().map(|(s, i)| (i, s)).collect()
    }

    /// Keys of a coarse grid (so that many are exactly equal, and many distances tie), a
    /// quarter of them repeated, plus queries drawn on the grid and off it.
    fn tied_case<const K: usize>(
        rng: &mut rand_chacha::ChaCha8Rng,
        n: usize,
    ) -> (Vec<[f64; K]>, Vec<[f64; K]>) {
        let grid = |rng: &mut rand_chacha::ChaCha8Rng| {
            std::array::from_fn(|_| rng.gen_range(-3i32..=3) as f64 * 0.25)
        };
        let mut keys: Vec<[f64; K]> = (0..n).map(|_| grid(rng)).collect();
        for i in 0..n / 4 {
            let k = keys[rng.gen_range(0..n)];
            keys[i * 3 % n] = k;
        }
        let mut queries: Vec<[f64; K]> = (0..200).map(|_| grid(rng)).collect();
        queries.extend((0..200).map(|_| std::array::from_fn(|_| rng.gen_range(-1.0..1.0))));
        (keys, queries)
    }

    fn agrees<const K: usize>(keys: &[[f64; K]], queries: &[[f64; K]], ns: &[usize]) {
        let tree = KeyTree::new(keys);
        let mut best = Vec::new();
        for q in queries {
            for &n in ns {
                tree.nearest(q, n, &mut best);
                let want = brute(keys, q, n);
                // Bit for bit: the same keys, in the same order, with the same distances.
                let bits = |v: &[(u32, f64)]| -> Vec<(u32, u64)> {
                    v.iter().map(|&(i, s)| (i, s.to_bits())).collect()
                };
                assert_eq!(bits(&best), bits(&want), "K {K}, n {n}, query {q:?}");
            }
        }
    }

    #[test]
    fn nearest_agrees_with_brute_force_bit_for_bit_at_every_key_dimension() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        fn random<const K: usize>(rng: &mut rand_chacha::ChaCha8Rng, n: usize) -> Vec<[f64; K]> {
            (0..n)
                .map(|_| std::array::from_fn(|_| rng.gen_range(-1.0..1.0)))
                .collect()
        }
        let ns = [1, 3, 6, 17, 64];
        let (k, q) = (random::<2>(&mut rng, 3000), random::<2>(&mut rng, 300));
        agrees(&k, &q, &ns);
        let (k, q) = (random::<3>(&mut rng, 3000), random::<3>(&mut rng, 300));
        agrees(&k, &q, &ns);
        let (k, q) = (random::<4>(&mut rng, 3000), random::<4>(&mut rng, 300));
        agrees(&k, &q, &ns);
        let (k, q) = (random::<6>(&mut rng, 3000), random::<6>(&mut rng, 300));
        agrees(&k, &q, &ns);
    }

    /// Many exactly equal keys and distances: the tie rule (lower index first) decides which
    /// keys make the list and their order.
    #[test]
    fn exact_ties_go_to_the_lower_index_at_every_key_dimension() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(12);
        let ns = [1, 2, 3, 8, 33, 64];
        let (k, q) = tied_case::<2>(&mut rng, 4000);
        agrees(&k, &q, &ns);
        let (k, q) = tied_case::<3>(&mut rng, 4000);
        agrees(&k, &q, &ns);
        let (k, q) = tied_case::<4>(&mut rng, 4000);
        agrees(&k, &q, &ns);
        let (k, q) = tied_case::<6>(&mut rng, 4000);
        agrees(&k, &q, &ns);
        // The rule itself, on a case small enough to state: three keys at distance 1 from the
        // query, given in the order 5, 2, 7 of their indices among farther ones.
        let mut keys = vec![[9.0, 9.0]; 8];
        keys[5] = [1.0, 0.0];
        keys[2] = [0.0, -1.0];
        keys[7] = [-1.0, 0.0];
        let tree = KeyTree::new(&keys);
        let mut best = Vec::new();
        tree.nearest(&[0.0, 0.0], 2, &mut best);
        assert_eq!(best, vec![(2, 1.0), (5, 1.0)]);
    }

    #[test]
    fn empty_single_and_identical_inputs_and_n_beyond_the_keys() {
        let mut best = vec![(0, 0.0)];
        KeyTree::<6>::new(&[]).nearest(&[0.0; 6], 3, &mut best);
        assert!(best.is_empty());
        let tree = KeyTree::new(&[[0.5, -0.5, 0.25]]);
        tree.nearest(&[0.0; 3], 3, &mut best);
        assert_eq!(best, vec![(0, 0.5 * 0.5 + 0.5 * 0.5 + 0.25 * 0.25)]);
        tree.nearest(&[0.0; 3], 0, &mut best);
        assert!(best.is_empty());
        // 50 000 identical keys (an exactly repeated layout): every query gets the lowest
        // indices, and n beyond the keys gives them all.
        let same = vec![[0.1, 0.2, 0.3, 0.4, 0.5, 0.6]; 50_000];
        let tree = KeyTree::new(&same);
        tree.nearest(&[0.0; 6], 5, &mut best);
        assert_eq!(
            best.iter().map(|b| b.0).collect::<Vec<_>>(),
            [0, 1, 2, 3, 4]
        );
        assert!(best.iter().all(|b| b.1 == brute(&same, &[0.0; 6], 1)[0].1));
        let few: Vec<[f64; 4]> = (0..40).map(|i| [i as f64 % 7.0, 0.0, 1.0, -1.0]).collect();
        agrees(&few, &[[2.2, 0.1, 1.0, -1.0], [0.0; 4]], &[39, 40, 41, 64]);
        let tree = KeyTree::new(&few);
        tree.nearest(&[0.0; 4], 64, &mut best);
        assert_eq!(best.len(), 40);
    }

    /// As the module doc says: NaN keys are never found, NaN queries find nothing, and the
    /// other answers are those over the NaN-free keys.
    #[test]
    fn nan_keys_are_never_found_and_nan_queries_find_nothing() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(13);
        let mut keys: Vec<[f64; 3]> = (0..2000)
            .map(|_| std::array::from_fn(|_| rng.gen_range(-1.0..1.0)))
            .collect();
        for i in (0..2000).step_by(7) {
            keys[i][i % 3] = if i % 2 == 0 { f64::NAN } else { -f64::NAN };
        }
        let tree = KeyTree::new(&keys);
        let mut best = Vec::new();
        for _ in 0..100 {
            let q: [f64; 3] = std::array::from_fn(|_| rng.gen_range(-1.0..1.0));
            tree.nearest(&q, 5, &mut best);
            let want: Vec<(u32, f64)> = brute(&keys, &q, 2000)
                .into_iter()
                .filter(|b| !b.1.is_nan())
                .take(5)
                .collect();
            assert_eq!(best, want);
        }
        tree.nearest(&[0.0, f64::NAN, 0.0], 5, &mut best);
        assert!(best.is_empty());
    }
}
