//! Small spatial helpers shared by the stages: a survey's spatial index ([`PointIndex`]: a
//! uniform grid over its points, [`PointGrid`], for the nearest points to a place and for
//! searches within a short radius), a survey's points with their index and Morton order
//! ([`Survey`]), spatial ordering of queries, bounding boxes ([`Extent`]), the median spacing,
//! and the UTM zone of a place ([`utm_zone_for`]). The grid is checked against brute force in
//! this file's tests.
//!
//! Distances are compared squared; every function here says whether it takes or gives squared
//! values.

/// The spatial index of a survey's points: their [`PointGrid`], built once, answering the n
/// nearest points to any place (items are indices into the slice it was
/// built from; among points at exactly the same distance, the lower index counts as nearer).
pub struct PointIndex {
    grid: PointGrid,
}

impl PointIndex {
    /// Builds the index. An empty slice gives an index that finds nothing.
    ///
    /// Returns `None` for more than 4,294,967,295 points (items are `u32`). Callers report
    /// that as too many landmarks.
    pub fn new(points: &[[f64; 2]]) -> Option<Self> {
        u32::try_from(points.len()).ok()?;
        Some(PointIndex {
            grid: PointGrid::new(points),
        })
    }

    /// The uniform grid of the points (it holds its own copy of them, by cell).
    pub fn grid(&self) -> &PointGrid {
        &self.grid
    }

    /// The `n` nearest points, nearest first, written to `out` as (index, squared distance)
    /// ([`PointGrid::nearest_n`]).
    pub fn nearest_n(&self, p: [f64; 2], n: usize, out: &mut Vec<(u32, f64)>) {
        self.grid.nearest_n(p, n, out);
    }
}

/// A uniform grid over points: their indices and coordinates sorted by cell (rows of cells,
/// each row west to east), with cells about as large as the mean spacing of the points over
/// their bounding box. It answers searches within a radius exactly, scanning the cells that
/// the radius reaches; it pays where the radius spans few cells (a fraction of the spacing up
/// to a few spacings) and the queries come in spatial order.
///
/// Squared distances are computed by [`dist2`], (Δx)² + (Δy)², as every other search of the
/// stages computes them (the same value bit for bit). Among points at exactly the same
/// distance, the one of the lowest index counts as the nearer.
pub struct PointGrid {
    /// The south-west corner of cell (0, 0).
    origin: [f64; 2],
    /// Cells per unit of length (one over the cell's side).
    per_unit: f64,
    /// Columns (west to east) and rows (south to north).
    cols: usize,
    rows: usize,
    /// `starts[c]..starts[c + 1]`: cell `c`'s (row-major) entries in `points` and `items`.
    starts: Vec<u32>,
    /// Coordinates, by cell.
    points: Vec<[f64; 2]>,
    /// Indices into the slice the grid was built from, by cell (ascending within a cell).
    items: Vec<u32>,
}

/// At most this many cells per point (where the points fill only a little of their bounding
/// box, the cells grow instead).
const CELLS_PER_POINT: usize = 4;

impl PointGrid {
    /// Builds the grid (a counting sort of the points by cell). Points with a coordinate that
    /// is not finite are left out (no finite point is at a finite distance from them).
    pub fn new(points: &[[f64; 2]]) -> Self {
        let finite = |p: &&[f64; 2]| p[0].is_finite() && p[1].is_finite();
        let extent = Extent::of(points.iter().filter(finite));
        let n = points.iter().filter(finite).count();
        if n == 0 {
            return PointGrid {
                origin: [0.0; 2],
                per_unit: 1.0,
                cols: 1,
                rows: 1,
                starts: vec![0, 0],
                points: Vec::new(),
                items: Vec::new(),
            };
        }
        let [w, h] = extent.size();
        // The mean spacing over the bounding box; along the longer side where the box is flat.
        let mut side = (w * h / n as f64).sqrt();
        if !(side > 0.0 && side.is_finite()) {
            side = w.max(h) / n as f64;
        }
        if !(side > 0.0 && side.is_finite()) {
            side = 1.0;
        }
        let fits = |side: f64| {
            let (c, r) = ((w / side) as usize + 1, (h / side) as usize + 1);
            c.checked_mul(r)
                .filter(|&cells| cells <= CELLS_PER_POINT * n + 16)
                .map(|_| (c, r))
        };
        let (cols, rows) = loop {
            match fits(side) {
                Some(cr) => break cr,
                None => side *= 2.0,
            }
        };
        let mut grid = PointGrid {
            origin: extent.min,
            per_unit: 1.0 / side,
            cols,
            rows,
            starts: vec![0; cols * rows + 1],
            points: Vec::with_capacity(n),
            items: Vec::with_capacity(n),
        };
        let cells: Vec<u32> = points
            .iter()
            .map(|p| {
                if finite(&p) {
                    let c =
                        grid.cell(p[0], 0, grid.cols) + grid.cols * grid.cell(p[1], 1, grid.rows);
                    c as u32
                } else {
                    u32::MAX
                }
            })
            .collect();
        for &c in &cells {
            if c != u32::MAX {
                grid.starts[c as usize + 1] += 1;
            }
        }
        for c in 0..cols * rows {
            grid.starts[c + 1] += grid.starts[c];
        }
        let mut next = grid.starts.clone();
        grid.points.resize(n, [0.0; 2]);
        grid.items.resize(n, 0);
        for (i, &c) in cells.iter().enumerate() {
            if c != u32::MAX {
                let at = next[c as usize] as usize;
                next[c as usize] += 1;
                grid.points[at] = points[i];
                grid.items[at] = i as u32;
            }
        }
        grid
    }

    /// The cell, along axis `d` of `count` cells, holding coordinate `v` (clamped to the grid).
    /// (`as` truncates, which is the floor for the non-negative values it is given: the floor
    /// itself is a library call on the baseline x86-64 target.)
    #[inline]
    fn cell(&self, v: f64, d: usize, count: usize) -> usize {
        let c = (v - self.origin[d]) * self.per_unit;
        if c >= 0.0 {
            (c as usize).min(count - 1)
        } else {
            0
        }
    }

    /// The cells `[x0, x1] × [y0, y1]` that hold every point within `radius` of `p` (a little
    /// wider, for rounding), or `None` when no cell does.
    #[inline]
    fn window(&self, p: [f64; 2], radius: f64) -> Option<[usize; 4]> {
        // Whatever rounds (p ± r, then the cell), a point whose computed squared distance is
        // below r² lies within r·(1 + 2ε) on each axis: the margin covers it many times over.
        let r = radius * (1.0 + 1e-9) + 1e-12 * (p[0].abs().max(p[1].abs()) + radius);
        let span = |d: usize, count: usize| -> Option<[usize; 2]> {
            let a = (p[d] - r - self.origin[d]) * self.per_unit;
            let b = (p[d] + r - self.origin[d]) * self.per_unit;
            // floor(b) ≥ 0 and floor(a) < count; also false for NaN.
            if !(b >= 0.0 && a < count as f64) {
                return None;
            }
            Some([
                if a > 0.0 { a as usize } else { 0 },
                (b as usize).min(count - 1),
            ])
        };
        let [x0, x1] = span(0, self.cols)?;
        let [y0, y1] = span(1, self.rows)?;
        Some([x0, x1, y0, y1])
    }

    /// The entries of row `y`, columns `x0..=x1`: a range of `points` and `items`.
    #[inline]
    fn row(&self, y: usize, x0: usize, x1: usize) -> std::ops::Range<usize> {
        let base = y * self.cols;
        self.starts[base + x0] as usize..self.starts[base + x1 + 1] as usize
    }

    /// The nearest point whose squared distance from `p` is below `radius`²: (index, squared
    /// distance, position); of several at that distance, the one of the lowest index.
    #[inline]
    pub fn nearest_within(&self, p: [f64; 2], radius: f64) -> Option<(u32, f64, [f64; 2])> {
        let [x0, x1, y0, y1] = self.window(p, radius)?;
        let mut best: Option<(u32, f64, [f64; 2])> = None;
        let mut limit = radius * radius;
        for y in y0..=y1 {
            let range = self.row(y, x0, x1);
            for (q, &item) in self.points[range.clone()].iter().zip(&self.items[range]) {
                let d2 = dist2(*q, p);
                if d2 < limit || (d2 == limit && best.is_some_and(|b| item < b.0)) {
                    limit = d2;
                    best = Some((item, d2, *q));
                }
            }
        }
        best
    }

    /// The `n` nearest points to `p`, nearest first and, among points at exactly the same
    /// distance, the lowest index first, written to `out` as (index, squared distance); fewer
    /// when the grid holds fewer. Nothing for a `p` that is not finite.
    ///
    /// The search scans the block of cells around `p`'s that holds about 2n points on average
    /// (its rows from `p`'s outwards), then further rings of cells, and stops once the `n`-th
    /// nearest found so far is nearer than any cell not yet scanned can be. With cells about
    /// the mean spacing and `n` a few, that is the 5 × 5 block alone. On the 1M-point survey
    /// of the end-to-end benchmark, the 6 nearest of every point in Morton order took 0.52-0.75
    /// s on one core against 0.93-1.44 s for kiddo's `nearest_n` (2 December 2026, the 2-core
    /// machine of README "Speed", loaded).
    pub fn nearest_n(&self, p: [f64; 2], n: usize, out: &mut Vec<(u32, f64)>) {
        out.clear();
        if n == 0 || self.items.is_empty() || !(p[0].is_finite() && p[1].is_finite()) {
            return;
        }
        let (cols, rows) = (self.cols, self.rows);
        let (cx, cy) = (self.cell(p[0], 0, cols), self.cell(p[1], 1, rows));
        let side = 1.0 / self.per_unit;
        // Cell edges computed here and cells computed for the points may differ by rounding:
        // the bound is lowered by far more than that.
        let slack = 1e-9
            * (side + p[0].abs().max(p[1].abs()) + self.origin[0].abs().max(self.origin[1].abs()));
        // Each point of a ring is offered to `out`, which keeps the n best in order.
        let scan = |range: std::ops::Range<usize>, out: &mut Vec<(u32, f64)>| {
            for (q, &item) in self.points[range.clone()].iter().zip(&self.items[range]) {
                let d2 = dist2(*q, p);
                if out.len() < n || d2 <= out[n - 1].1 {
                    offer_nearest(out, n, item, d2);
                }
            }
        };
        // First the block of cells around p's that holds about 2n points on average, row by
        // row (each row's cells are one run of `points`), then further rings one by one.
        let per_cell = self.items.len() as f64 / (cols * rows) as f64;
        let mut h = 0usize;
        while (((2 * h + 1) * (2 * h + 1)) as f64 * per_cell) < (2 * n) as f64 && h < cols.max(rows)
        {
            h += 1;
        }
        let (x0, x1) = (cx.saturating_sub(h), (cx + h).min(cols - 1));
        // p's row first, then outwards: near points first, so that the list is soon full of
        // near ones and most later points are turned away at once.
        scan(self.row(cy, x0, x1), out);
        for k in 1..=h {
            if cy >= k {
                scan(self.row(cy - k, x0, x1), out);
            }
            if cy + k < rows {
                scan(self.row(cy + k, x0, x1), out);
            }
        }
        // How far p lies outside the grid's span on each axis (0 within it): a cell beyond the
        // rings on one side is at least that far off on the other axis.
        let outside = |d: usize, count: usize| {
            let lo = self.origin[d];
            let hi = lo + count as f64 * side;
            ((lo - p[d]).max(p[d] - hi) - slack).max(0.0)
        };
        let (out_x, out_y) = (outside(0, cols), outside(1, rows));
        loop {
            // The nearest any cell outside the rings scanned can be, squared (sides beyond the
            // grid hold no cell): per side, the gap to that side's first unscanned column or
            // row, and p's distance outside the grid on the other axis.
            let mut bound2 = f64::INFINITY;
            let mut sides = 0;
            let mut side_bound = |gap: f64, across: f64| {
                let g = (gap - slack).max(0.0);
                bound2 = bound2.min(g * g + across * across);
                sides += 1;
            };
            if cx > h {
                side_bound(p[0] - (self.origin[0] + (cx - h) as f64 * side), out_y);
            }
            if cx + h + 1 < cols {
                side_bound(self.origin[0] + (cx + h + 1) as f64 * side - p[0], out_y);
            }
            if cy > h {
                side_bound(p[1] - (self.origin[1] + (cy - h) as f64 * side), out_x);
            }
            if cy + h + 1 < rows {
                side_bound(self.origin[1] + (cy + h + 1) as f64 * side - p[1], out_x);
            }
            if sides == 0 {
                return;
            }
            if out.len() == n && out[n - 1].1 < bound2 {
                return;
            }
            // Ring h + 1: the cells at Chebyshev distance h + 1 from (cx, cy), within the grid.
            h += 1;
            let x0 = cx.saturating_sub(h);
            let x1 = (cx + h).min(cols - 1);
            if cy >= h {
                scan(self.row(cy - h, x0, x1), out);
            }
            if cy + h < rows {
                scan(self.row(cy + h, x0, x1), out);
            }
            for y in (cy + 1).saturating_sub(h)..=(cy + h - 1).min(rows - 1) {
                if cx >= h {
                    scan(self.row(y, cx - h, cx - h), out);
                }
                if cx + h < cols {
                    scan(self.row(y, cx + h, cx + h), out);
                }
            }
        }
    }

    /// Whether some point lies at a squared distance below `radius`² from `p`.
    #[inline]
    pub fn any_within(&self, p: [f64; 2], radius: f64) -> bool {
        let Some([x0, x1, y0, y1]) = self.window(p, radius) else {
            return false;
        };
        let limit = radius * radius;
        // Rows from the one of `p` outwards: the likeliest first.
        let mid = self.cell(p[1], 1, self.rows).clamp(y0, y1);
        let rows = (mid..=y1).chain((y0..mid).rev());
        for y in rows {
            let range = self.row(y, x0, x1);
            if self.points[range].iter().any(|q| dist2(*q, p) < limit) {
                return true;
            }
        }
        false
    }

    /// Whether some point other than `item` is nearer to `p` than `d2` (squared), or as near
    /// with a lower index: false exactly when `item`, at squared distance `d2` from `p`, is the
    /// nearest point to `p` ([`PointGrid::nearest_within`]'s choice among equals).
    #[inline]
    pub fn beaten(&self, p: [f64; 2], item: u32, d2: f64) -> bool {
        let Some([x0, x1, y0, y1]) = self.window(p, d2.sqrt()) else {
            return false;
        };
        let mid = self.cell(p[1], 1, self.rows).clamp(y0, y1);
        let rows = (mid..=y1).chain((y0..mid).rev());
        for y in rows {
            let range = self.row(y, x0, x1);
            for (q, &other) in self.points[range.clone()].iter().zip(&self.items[range]) {
                let e = dist2(*q, p);
                if e < d2 || (e == d2 && other < item) {
                    return true;
                }
            }
        }
        false
    }
}

/// Puts (item, d2) into `best`, kept sorted by squared distance and then index and at most `n`
/// long, unless `n` better ones are there already (the grid's nearest-n search here and the
/// key tree's, `matching/tree.rs`).
#[inline(always)]
pub(crate) fn offer_nearest(best: &mut Vec<(u32, f64)>, n: usize, item: u32, d2: f64) {
    let before = |&(i, d): &(u32, f64)| d < d2 || (d == d2 && i < item);
    if best.len() == n {
        if best.last().is_some_and(before) {
            return;
        }
        best.pop();
    }
    // An insertion step from the end: the list is short.
    best.push((item, d2));
    let mut at = best.len() - 1;
    while at > 0 && !before(&best[at - 1]) {
        best[at] = best[at - 1];
        at -= 1;
    }
    best[at] = (item, d2);
}

/// One survey's landmarks in the working frame with what every stage reuses: their spatial
/// index and their Morton order (computed once per run).
pub struct Survey<'a> {
    /// Positions, working frame.
    pub points: &'a [[f64; 2]],
    /// Spatial index (grid) of `points`.
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
/// parts of an index (several times faster on large sets than random order).
pub fn morton_order(points: &[[f64; 2]]) -> Vec<u32> {
    let Extent { min: lo, max: hi } = Extent::of(points);
    let span = [(hi[0] - lo[0]).max(1e-300), (hi[1] - lo[1]).max(1e-300)];
    use rayon::prelude::*;
    let mut keyed: Vec<(u64, u32)> = points
        .par_iter()
        .enumerate()
        .map(|(i, p)| {
            let qx = (((p[0] - lo[0]) / span[0]) * 65535.0) as u32;
            let qy = (((p[1] - lo[1]) / span[1]) * 65535.0) as u32;
            (interleave(qx) | (interleave(qy) << 1), i as u32)
        })
        .collect();
    // (code, index) pairs are distinct, so the unstable sort's order is the one order there
    // is, on any number of threads.
    keyed.par_sort_unstable();
    keyed.into_par_iter().map(|(_, i)| i).collect()
}

fn interleave(v: u32) -> u64 {
    let mut x = v as u64 & 0xffff;
    x = (x | (x << 8)) & 0x00ff_00ff;
    x = (x | (x << 4)) & 0x0f0f_0f0f;
    x = (x | (x << 2)) & 0x3333_3333;
    x = (x | (x << 1)) & 0x5555_5555;
    x
}

/// `v`'s bits as an unsigned key in [`f64::total_cmp`]'s order (-NaN, -inf, …, -0, +0, …,
/// +inf, NaN): sorting the keys sorts the values, as integers (the positions' duplicate check,
/// the candidates' sort by score).
#[inline]
pub fn total_order_bits(v: f64) -> u64 {
    let b = v.to_bits();
    if b >> 63 == 1 {
        !b
    } else {
        b | (1 << 63)
    }
}

/// Squared distance between two points, (Δx)² + (Δy)², summed in that order: the one
/// expression of every 2-D search here (the same value bit for bit).
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

    /// Points on a coarse lattice (many exactly equal distances), a few exact duplicates, and
    /// random points; queries at lattice points, between them, and outside the points' box.
    fn grid_case(rng: &mut rand_chacha::ChaCha8Rng) -> (Vec<[f64; 2]>, Vec<[f64; 2]>) {
        let mut pts: Vec<[f64; 2]> = (0..1500)
            .map(|_| {
                [
                    rng.gen_range(0..40) as f64 * 2.5,
                    rng.gen_range(0..40) as f64 * 2.5,
                ]
            })
            .collect();
        pts.extend((0..1500).map(|_| [rng.gen_range(0.0..100.0), rng.gen_range(0.0..100.0)]));
        for i in 0..50 {
            pts.push(pts[i * 7]);
        }
        let mut queries: Vec<[f64; 2]> = (0..400)
            .map(|_| {
                [
                    rng.gen_range(-4..44) as f64 * 1.25,
                    rng.gen_range(-4..44) as f64 * 1.25,
                ]
            })
            .collect();
        queries
            .extend((0..400).map(|_| [rng.gen_range(-10.0..110.0), rng.gen_range(-10.0..110.0)]));
        queries.extend(pts.iter().step_by(11).copied());
        (pts, queries)
    }

    /// (index, squared distance) of every point, nearest first, lowest index first among equals.
    fn brute(pts: &[[f64; 2]], q: [f64; 2]) -> Vec<(u32, f64)> {
        let mut all: Vec<(u32, f64)> = pts
            .iter()
            .enumerate()
            .map(|(i, p)| (i as u32, dist2(*p, q)))
            .collect();
        all.sort_by(|a, b| a.1.total_cmp(&b.1).then(a.0.cmp(&b.0)));
        all
    }

    #[test]
    fn grid_searches_agree_with_brute_force_ties_included() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        let (pts, queries) = grid_case(&mut rng);
        let grid = PointGrid::new(&pts);
        let (mut ties, mut found, mut missed) = (0, 0, 0);
        for &q in &queries {
            let all = brute(&pts, q);
            ties += usize::from(all[0].1 == all[1].1);
            // Radii of a fraction of a cell up to many cells, and exactly a point's distance
            // (the search is for distances strictly below the radius).
            for r in [
                0.3,
                1.0,
                2.5,
                4.0,
                9.0,
                30.0,
                all[0].1.sqrt(),
                all[3].1.sqrt(),
            ] {
                let want = all.iter().copied().find(|a| a.1 < r * r);
                let got = grid.nearest_within(q, r);
                assert_eq!(got.map(|g| (g.0, g.1)), want, "query {q:?} radius {r}");
                if let Some((i, _, at)) = got {
                    assert_eq!(at, pts[i as usize]);
                }
                assert_eq!(
                    grid.any_within(q, r),
                    want.is_some(),
                    "query {q:?} radius {r}"
                );
                found += usize::from(want.is_some());
                missed += usize::from(want.is_none());
            }
            // The n nearest, in order, ties by the lower index.
            for n in [1, 2, 6, 25] {
                let mut out = Vec::new();
                grid.nearest_n(q, n, &mut out);
                assert_eq!(out, all[..n], "query {q:?} n {n}");
            }
            // Each of the nearest few: beaten exactly when it is not the first of `all`.
            for (k, &(item, d2)) in all.iter().take(4).enumerate() {
                assert_eq!(grid.beaten(q, item, d2), k > 0, "query {q:?} item {item}");
            }
        }
        // Else the test could not tell a tie rule or a radius rule from another.
        assert!(ties > 100, "{ties}");
        assert!(found > 1000 && missed > 1000, "{found} {missed}");
    }

    /// In survey coordinates (UTM magnitudes): the index's nearest and n nearest, and the
    /// grid's nearest within a radius, are brute force's, distances bit for bit, also for
    /// queries beyond the points.
    #[test]
    fn index_answers_are_brute_force_in_survey_coordinates() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(12);
        let pts: Vec<[f64; 2]> = (0..5000)
            .map(|_| [rng.gen_range(4.9e5..5.1e5), rng.gen_range(5.29e6..5.31e6)])
            .collect();
        let index = PointIndex::new(&pts).unwrap();
        let grid = index.grid();
        let mut got = Vec::new();
        for _ in 0..2000 {
            let q = [
                rng.gen_range(4.85e5..5.15e5),
                rng.gen_range(5.285e6..5.315e6),
            ];
            let all = brute(&pts, q);
            let (i, d2) = all[0];
            index.nearest_n(q, 1, &mut got);
            assert_eq!(got, [(i, d2)]);
            index.nearest_n(q, 6, &mut got);
            assert_eq!(got, all[..6]);
            let at = pts[i as usize];
            assert_eq!(grid.nearest_within(q, 1e5), Some((i, d2, at)));
            assert_eq!(
                grid.nearest_within(q, d2.sqrt() * 1.0001),
                Some((i, d2, at))
            );
        }
    }

    /// The keys sort as `f64::total_cmp` does, over the special values and some plain ones.
    #[test]
    fn total_order_bits_sort_as_total_cmp_does() {
        let mut values = vec![
            f64::NAN,
            -f64::NAN,
            f64::INFINITY,
            f64::NEG_INFINITY,
            0.0,
            -0.0,
            f64::MIN_POSITIVE,
            -f64::MIN_POSITIVE,
            5e-324,
            -5e-324,
            f64::MAX,
            f64::MIN,
            1.0,
            -1.0,
            1.0 + f64::EPSILON,
            0.3,
            -0.3,
        ];
        let mut by_key = values.clone();
        values.sort_by(f64::total_cmp);
        by_key.sort_by_key(|&v| total_order_bits(v));
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&by_key), bits(&values));
        // Distinct values, distinct keys.
        let mut keys: Vec<u64> = values.iter().map(|&v| total_order_bits(v)).collect();
        keys.dedup();
        assert_eq!(keys.len(), values.len());
    }

    /// Two tight clusters far apart (most cells empty, the cells grown) and queries in them,
    /// between them and beyond them.
    #[test]
    fn grid_nearest_n_on_clustered_points() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(13);
        let mut pts: Vec<[f64; 2]> = (0..2000)
            .map(|_| [rng.gen_range(0.0..10.0), rng.gen_range(0.0..10.0)])
            .collect();
        pts.extend((0..2000).map(|_| [rng.gen_range(9e3..9.01e3), rng.gen_range(5e3..5.01e3)]));
        let grid = PointGrid::new(&pts);
        let mut out = Vec::new();
        for _ in 0..300 {
            let q = match rng.gen_range(0..4) {
                0 => pts[rng.gen_range(0..pts.len())],
                1 => [rng.gen_range(-2e3..1.2e4), rng.gen_range(-2e3..8e3)],
                2 => [rng.gen_range(4e3..5e3), rng.gen_range(2e3..3e3)],
                // Far outside the grid, beside it or off a corner.
                _ => [rng.gen_range(-1e6..1e6), rng.gen_range(-1e6..1e6)],
            };
            let all = brute(&pts, q);
            for n in [1, 6, 40] {
                grid.nearest_n(q, n, &mut out);
                assert_eq!(out, all[..n], "query {q:?} n {n}");
            }
        }
    }

    #[test]
    fn grid_of_degenerate_point_sets() {
        // Empty, one point, all on one spot, on one line, and with points that are not finite.
        let sets: Vec<Vec<[f64; 2]>> = vec![
            vec![],
            vec![[3.0, 4.0]],
            vec![[1.0, 1.0]; 20],
            (0..100).map(|i| [i as f64, 7.0]).collect(),
            vec![
                [0.0, 0.0],
                [f64::NAN, 1.0],
                [f64::INFINITY, 0.0],
                [2.0, 2.0],
            ],
        ];
        let queries = [
            [0.0, 0.0],
            [1.0, 1.0],
            [50.2, 7.5],
            [2.0, 1.0],
            [-1e300, 5.0],
            [f64::NAN, 0.0],
        ];
        for pts in &sets {
            let grid = PointGrid::new(pts);
            for &q in &queries {
                for r in [0.5, 2.0, 1e3] {
                    let want = brute(pts, q).into_iter().find(|a| a.1 < r * r);
                    let got = grid.nearest_within(q, r).map(|g| (g.0, g.1));
                    assert_eq!(got, want, "{pts:?} {q:?} {r}");
                    assert_eq!(grid.any_within(q, r), want.is_some());
                }
                // Non-finite points are not in the grid; a non-finite query finds nothing.
                let finite: Vec<(u32, f64)> = brute(pts, q)
                    .into_iter()
                    .filter(|a| pts[a.0 as usize].iter().all(|v| v.is_finite()))
                    .filter(|_| q.iter().all(|v| v.is_finite()))
                    .collect();
                for n in [0, 1, 3, 50] {
                    let mut out = vec![(9, 9.0)];
                    grid.nearest_n(q, n, &mut out);
                    assert_eq!(out, finite[..n.min(finite.len())], "{pts:?} {q:?} {n}");
                }
            }
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
