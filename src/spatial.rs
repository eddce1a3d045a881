//! Small spatial helpers shared by the stages: a k-d tree over points ([`PointIndex`]), a
//! survey's points with their tree and Morton order ([`Survey`]), spatial ordering of queries,
//! bounding boxes ([`Extent`]), the median spacing, and the UTM zone of a place
//! ([`utm_zone_for`]). The k-d tree is checked against brute force in this file's tests.
//!
//! kiddo's `SquaredEuclidean` metric returns *squared* distances; every function here says
//! whether it takes or gives squared values.

use kiddo::{ImmutableKdTree, SquaredEuclidean};
use std::num::NonZero;

/// An immutable 2-D k-d tree whose items are indices into the slice it was built from.
pub struct PointIndex {
    tree: Option<ImmutableKdTree<f64, 2>>,
    len: usize,
}

impl PointIndex {
    /// Builds the tree. An empty slice gives an index that finds nothing.
    ///
    /// Returns `None` when kiddo refuses the input: its item indices are `u32`, so it takes at
    /// most 4,294,967,295 points (kiddo 6.3's `ConstructionError`; repeated coordinates are
    /// accepted). Callers report that as too many landmarks.
    pub fn new(points: &[[f64; 2]]) -> Option<Self> {
        if points.is_empty() {
            return Some(PointIndex { tree: None, len: 0 });
        }
        let tree = ImmutableKdTree::new_from_slice(points).ok()?;
        Some(PointIndex {
            tree: Some(tree),
            len: points.len(),
        })
    }

    /// Number of points indexed.
    pub fn len(&self) -> usize {
        self.len
    }

    /// True when nothing is indexed.
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// The nearest point: (index, squared distance).
    #[inline]
    pub fn nearest(&self, p: [f64; 2]) -> Option<(u32, f64)> {
        let tree = self.tree.as_ref()?;
        let r = tree
            .query(&p)
            .nearest_one::<SquaredEuclidean<f64>>()
            .execute();
        Some((r.item, r.distance))
    }

    /// The `n` nearest points, nearest first, appended to `out` as (index, squared distance).
    pub fn nearest_n(&self, p: [f64; 2], n: usize, out: &mut Vec<(u32, f64)>) {
        out.clear();
        let (Some(tree), Some(n)) = (self.tree.as_ref(), NonZero::new(n)) else {
            return;
        };
        let found = tree
            .query(&p)
            .nearest_n::<SquaredEuclidean<f64>>(n)
            .execute();
        out.extend(found.into_iter().map(|r| (r.item, r.distance)));
    }
}

/// One survey's landmarks in the working frame with what every stage reuses: their k-d tree
/// and their Morton order (computed once per run).
pub struct Survey<'a> {
    /// Positions, working frame.
    pub points: &'a [[f64; 2]],
    /// k-d tree of `points`.
    pub index: &'a PointIndex,
    /// Indices of `points` in Morton order ([`morton_order`]).
    pub order: &'a [u32],
}

/// An axis-aligned bounding box.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Extent {
    /// Smallest x and y.
    pub min: [f64; 2],
    /// Largest x and y.
    pub max: [f64; 2],
}

impl Extent {
    /// The bounding box of `points`; for an empty slice min is +∞ and max −∞.
    pub fn of<'a>(points: impl IntoIterator<Item = &'a [f64; 2]>) -> Extent {
        let mut e = Extent {
            min: [f64::INFINITY; 2],
            max: [f64::NEG_INFINITY; 2],
        };
        for p in points {
            for d in 0..2 {
                e.min[d] = e.min[d].min(p[d]);
                e.max[d] = e.max[d].max(p[d]);
            }
        }
        e
    }

    /// Width and height.
    pub fn size(&self) -> [f64; 2] {
        [self.max[0] - self.min[0], self.max[1] - self.min[1]]
    }

    /// The centre.
    pub fn centre(&self) -> [f64; 2] {
        [
            (self.min[0] + self.max[0]) / 2.0,
            (self.min[1] + self.max[1]) / 2.0,
        ]
    }

    /// The four corners, counter-clockwise from (min x, min y).
    pub fn corners(&self) -> [[f64; 2]; 4] {
        [
            [self.min[0], self.min[1]],
            [self.max[0], self.min[1]],
            [self.max[0], self.max[1]],
            [self.min[0], self.max[1]],
        ]
    }

    /// True when the two boxes share at least a point.
    pub fn overlaps(&self, other: &Extent) -> bool {
        self.min[0] <= other.max[0]
            && other.min[0] <= self.max[0]
            && self.min[1] <= other.max[1]
            && other.min[1] <= self.max[1]
    }
}

/// Indices of `points` in Morton (Z-curve) order, so that consecutive queries touch nearby
/// parts of a k-d tree (several times faster on large sets than random order).
pub fn morton_order(points: &[[f64; 2]]) -> Vec<u32> {
    let Extent { min: lo, max: hi } = Extent::of(points);
    let span = [(hi[0] - lo[0]).max(1e-300), (hi[1] - lo[1]).max(1e-300)];
    let mut keyed: Vec<(u64, u32)> = points
        .iter()
        .enumerate()
        .map(|(i, p)| {
            let qx = (((p[0] - lo[0]) / span[0]) * 65535.0) as u32;
            let qy = (((p[1] - lo[1]) / span[1]) * 65535.0) as u32;
            (interleave(qx) | (interleave(qy) << 1), i as u32)
        })
        .collect();
    keyed.sort_unstable();
    keyed.into_iter().map(|(_, i)| i).collect()
}

fn interleave(v: u32) -> u64 {
    let mut x = v as u64 & 0xffff;
    x = (x | (x << 8)) & 0x00ff_00ff;
    x = (x | (x << 4)) & 0x0f0f_0f0f;
    x = (x | (x << 2)) & 0x3333_3333;
    x = (x | (x << 1)) & 0x5555_5555;
    x
}

/// Squared distance between two points.
#[inline]
pub fn dist2(a: [f64; 2], b: [f64; 2]) -> f64 {
    (a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2)
}

/// The median nearest-neighbour distance (not squared) of a point set, from at most
/// `sample` points spread over the set. `None` for fewer than two points.
pub fn median_spacing(points: &[[f64; 2]], index: &PointIndex, sample: usize) -> Option<f64> {
    if points.len() < 2 {
        return None;
    }
    let step = (points.len() / sample.max(1)).max(1);
    let mut out = Vec::with_capacity(2);
    let mut d: Vec<f64> = points
        .iter()
        .step_by(step)
        .filter_map(|&p| {
            index.nearest_n(p, 2, &mut out);
            out.get(1).map(|&(_, d2)| d2.sqrt())
        })
        .collect();
    if d.is_empty() {
        return None;
    }
    let mid = d.len() / 2;
    let (_, m, _) = d.select_nth_unstable_by(mid, |a, b| a.total_cmp(b));
    Some(*m)
}

/// The WGS 84 / UTM zone containing a longitude and latitude, as "EPSG:326zz" (north) or
/// "EPSG:327zz" (south). Here, below both the working frame (which picks a projected CRS with
/// it) and ingest (which puts a geographic image on it).
pub fn utm_zone_for(lon: f64, lat: f64) -> String {
    let zone = (((lon + 180.0) / 6.0).floor() as i64).rem_euclid(60) + 1;
    format!("EPSG:{}{:02}", if lat >= 0.0 { 326 } else { 327 }, zone)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    #[test]
    fn knn_agrees_with_brute_force() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(1);
        let pts: Vec<[f64; 2]> = (0..3000)
            .map(|_| [rng.gen_range(0.0..1000.0), rng.gen_range(0.0..1000.0)])
            .collect();
        let index = PointIndex::new(&pts).unwrap();
        let mut out = Vec::new();
        for q in pts.iter().step_by(37) {
            index.nearest_n(*q, 8, &mut out);
            let mut brute: Vec<(u32, f64)> = pts
                .iter()
                .enumerate()
                .map(|(i, p)| (i as u32, dist2(*p, *q)))
                .collect();
            brute.sort_by(|a, b| a.1.total_cmp(&b.1));
            let want: Vec<u32> = brute[..8].iter().map(|x| x.0).collect();
            let got: Vec<u32> = out.iter().map(|x| x.0).collect();
            assert_eq!(got, want);
            assert_eq!(out[7].1, brute[7].1);
        }
    }

    #[test]
    fn morton_order_is_a_permutation() {
        let pts: Vec<[f64; 2]> = (0..100).map(|i| [(i * 7 % 13) as f64, i as f64]).collect();
        let mut o = morton_order(&pts);
        o.sort();
        assert_eq!(o, (0..100).collect::<Vec<u32>>());
    }
}
