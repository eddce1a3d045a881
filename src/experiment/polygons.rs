//! Random polygons of four shape classes, the test material of the [retrieval
//! experiment](super::retrieval).
//!
//! **Out:** polygons as vertex lists `Vec<[f64; 2]>` (pixels, y up, the closing edge from the
//! last vertex back to vertex 0 implied). Every generator takes the caller's random generator,
//! so a seeded caller gets the same polygons on every run.
//!
//! All polygons live on a canvas of [`CANVAS_PX`] × [`CANVAS_PX`] pixels and span about the
//! whole canvas:
//!
//! | class | sampler | shape guarantee |
//! |---|---|---|
//! | [`PolygonClass::Convex`] | `n` parametric angles t, uniform on [0, 2π) and sorted, on an ellipse centred on the canvas: semi-major axis 500 px, axis ratio uniform on [0.3, 1], major axis at an angle uniform on [0, π); vertex = centre + R(tilt)·(500 cos t, 500·ratio·sin t) | convex position, counter-clockwise (points of an ellipse in angular order) |
//! | [`PolygonClass::Star`] | `n` angles uniform on [0, 2π), sorted, redrawn as a whole while any gap between consecutive angles (the wrap-around gap included) is π or more (about 2 % of draws for n = 10); radius per vertex uniform on [100, 500] px around the canvas centre [`CENTRE`] | star-shaped with respect to [`CENTRE`], counter-clockwise; in general not convex |
//! | [`PolygonClass::Simple`] | `n` points uniform on the canvas in draw order, then untangled by 2-opt moves ([`untangle`]) | simple (no two edges meet except neighbours at their shared vertex); in general neither convex nor star-shaped; either orientation |
//! | [`PolygonClass::General`] | `n` points uniform on the canvas in draw order | none: usually self-intersecting |
//!
//! The 2-opt untangling: scan the edge pairs (i, j), i ascending, then j ascending, skipping
//! neighbouring edges; at the first pair whose closed segments meet, reverse the vertices at
//! positions i + 1 ..= j (this replaces edges (v_i, v_{i+1}) and (v_j, v_{j+1}) by (v_i, v_j)
//! and (v_{i+1}, v_{j+1}) and keeps vertex 0 in place); repeat until no pair meets. Each move
//! at a proper crossing shortens the perimeter strictly (triangle inequality), so the loop
//! ends; a draw still tangled after [`MAX_UNTANGLE_MOVES`] moves (possible only for
//! degenerate touching, which has probability zero) is discarded and redrawn.
//!
//! Intersection tests use geo's robust orientation predicate, so the "simple" guarantee holds
//! exactly for the floating-point coordinates returned.

use geo::kernels::{Kernel, Orientation, RobustKernel};
use geo::Coord;
use rand::Rng;
use std::f64::consts::{PI, TAU};

/// Side of the square canvas, pixels.
pub const CANVAS_PX: f64 = 1000.0;

/// Centre of the canvas; convex and star-shaped polygons are built around it.
pub const CENTRE: [f64; 2] = [CANVAS_PX / 2.0, CANVAS_PX / 2.0];

/// Largest radius (semi-major axis of the ellipses, outer radius of the stars), pixels: half
/// the canvas, so that a polygon spans about the whole canvas.
pub const OUTER_RADIUS_PX: f64 = CANVAS_PX / 2.0;

/// Smallest star radius as a fraction of [`OUTER_RADIUS_PX`].
pub const STAR_INNER_FRACTION: f64 = 0.2;

/// Smallest axis ratio (minor / major) of the convex polygons' ellipses.
pub const MIN_AXIS_RATIO: f64 = 0.3;

/// Most 2-opt moves tried on one draw before it is discarded (see the module doc).
pub const MAX_UNTANGLE_MOVES: usize = 10_000;

/// A shape class of random polygons.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum PolygonClass {
    /// Vertices of an ellipse in angular order.
    Convex,
    /// Random radii at sorted angles around the centre: star-shaped, in general not convex.
    Star,
    /// Random points untangled by 2-opt: simple, in general not star-shaped.
    Simple,
    /// Random points in random order: usually self-intersecting.
    General,
}

impl PolygonClass {
    /// Every class, from the most regular to the least.
    pub const ALL: [PolygonClass; 4] = [
        PolygonClass::Convex,
        PolygonClass::Star,
        PolygonClass::Simple,
        PolygonClass::General,
    ];

    /// Name used in files and reports: `convex`, `star`, `simple`, `general`.
    pub fn name(self) -> &'static str {
        match self {
            PolygonClass::Convex => "convex",
            PolygonClass::Star => "star",
            PolygonClass::Simple => "simple",
            PolygonClass::General => "general",
        }
    }

    /// Draws one polygon of this class with `n` vertices.
    ///
    /// # Panics
    /// When `n < 3`.
    pub fn generate<R: Rng + ?Sized>(self, rng: &mut R, n: usize) -> Vec<[f64; 2]> {
        assert!(n >= 3, "a polygon needs at least 3 vertices (got {n})");
        match self {
            PolygonClass::Convex => convex(rng, n),
            PolygonClass::Star => star(rng, n),
            PolygonClass::Simple => simple(rng, n),
            PolygonClass::General => general(rng, n),
        }
    }
}

impl std::fmt::Display for PolygonClass {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

fn sorted_angles<R: Rng + ?Sized>(rng: &mut R, n: usize) -> Vec<f64> {
    let mut t: Vec<f64> = (0..n).map(|_| rng.gen_range(0.0..TAU)).collect();
    t.sort_by(f64::total_cmp);
    t
}

/// Largest gap between consecutive sorted angles, the wrap-around gap included.
fn largest_gap(sorted: &[f64]) -> f64 {
    let wrap = sorted[0] + TAU - sorted[sorted.len() - 1];
    sorted.windows(2).map(|w| w[1] - w[0]).fold(wrap, f64::max)
}

fn convex<R: Rng + ?Sized>(rng: &mut R, n: usize) -> Vec<[f64; 2]> {
    let ratio = rng.gen_range(MIN_AXIS_RATIO..=1.0);
    let tilt = rng.gen_range(0.0..PI);
    let (s, c) = tilt.sin_cos();
    let (a, b) = (OUTER_RADIUS_PX, OUTER_RADIUS_PX * ratio);
    sorted_angles(rng, n)
        .into_iter()
        .map(|t| {
            let (x, y) = (a * t.cos(), b * t.sin());
            [CENTRE[0] + c * x - s * y, CENTRE[1] + s * x + c * y]
        })
        .collect()
}

fn star<R: Rng + ?Sized>(rng: &mut R, n: usize) -> Vec<[f64; 2]> {
    let angles = loop {
        let t = sorted_angles(rng, n);
        if largest_gap(&t) < PI {
            break t;
        }
    };
    angles
        .into_iter()
        .map(|t| {
            let r = rng.gen_range(STAR_INNER_FRACTION * OUTER_RADIUS_PX..=OUTER_RADIUS_PX);
            [CENTRE[0] + r * t.cos(), CENTRE[1] + r * t.sin()]
        })
        .collect()
}

fn uniform_points<R: Rng + ?Sized>(rng: &mut R, n: usize) -> Vec<[f64; 2]> {
    (0..n)
        .map(|_| [rng.gen_range(0.0..CANVAS_PX), rng.gen_range(0.0..CANVAS_PX)])
        .collect()
}

fn simple<R: Rng + ?Sized>(rng: &mut R, n: usize) -> Vec<[f64; 2]> {
    loop {
        let mut p = uniform_points(rng, n);
        if untangle(&mut p, MAX_UNTANGLE_MOVES) {
            return p;
        }
    }
}

fn general<R: Rng + ?Sized>(rng: &mut R, n: usize) -> Vec<[f64; 2]> {
    uniform_points(rng, n)
}

fn coord(p: [f64; 2]) -> Coord<f64> {
    Coord { x: p[0], y: p[1] }
}

fn orient(p: [f64; 2], q: [f64; 2], r: [f64; 2]) -> Orientation {
    <RobustKernel as Kernel<f64>>::orient2d(coord(p), coord(q), coord(r))
}

/// True when `q`, known to be collinear with segment `a`–`b`, lies within its bounding box.
fn within_box(a: [f64; 2], q: [f64; 2], b: [f64; 2]) -> bool {
    (a[0].min(b[0])..=a[0].max(b[0])).contains(&q[0])
        && (a[1].min(b[1])..=a[1].max(b[1])).contains(&q[1])
}

/// Whether the closed segments `a`–`b` and `c`–`d` have a point in common (crossing, touching
/// or overlapping), by exact orientation tests.
pub fn segments_meet(a: [f64; 2], b: [f64; 2], c: [f64; 2], d: [f64; 2]) -> bool {
    use Orientation::Collinear;
    let (o1, o2) = (orient(a, b, c), orient(a, b, d));
    let (o3, o4) = (orient(c, d, a), orient(c, d, b));
    if o1 != o2 && o3 != o4 {
        return true;
    }
    (o1 == Collinear && within_box(a, c, b))
        || (o2 == Collinear && within_box(a, d, b))
        || (o3 == Collinear && within_box(c, a, d))
        || (o4 == Collinear && within_box(c, b, d))
}

/// The first pair of non-neighbouring edges (i, j), i < j, that meet, in the scan order of the
/// module doc; edge i runs from vertex i to vertex i + 1 (mod n).
pub fn first_meeting_edges(poly: &[[f64; 2]]) -> Option<(usize, usize)> {
    let n = poly.len();
    for i in 0..n {
        for j in i + 2..n {
            if i == 0 && j == n - 1 {
                continue; // neighbours through vertex 0
            }
            if segments_meet(poly[i], poly[i + 1], poly[j], poly[(j + 1) % n]) {
                return Some((i, j));
            }
        }
    }
    None
}

/// Whether the closed polygon is not simple: two non-neighbouring edges meet, or two
/// neighbouring edges fold back onto each other (or a vertex repeats).
pub fn self_intersects(poly: &[[f64; 2]]) -> bool {
    let n = poly.len();
    let folds = (0..n).any(|i| {
        let (prev, here, next) = (poly[(i + n - 1) % n], poly[i], poly[(i + 1) % n]);
        let back =
            (prev[0] - here[0]) * (next[0] - here[0]) + (prev[1] - here[1]) * (next[1] - here[1]);
        here == next || (orient(prev, here, next) == Orientation::Collinear && back > 0.0)
    });
    folds || first_meeting_edges(poly).is_some()
}

/// Untangles `poly` in place by 2-opt moves (module doc) until no two non-neighbouring edges
/// meet. Returns false, leaving `poly` part-way, when `max_moves` moves did not suffice.
pub fn untangle(poly: &mut [[f64; 2]], max_moves: usize) -> bool {
    for _ in 0..max_moves {
        match first_meeting_edges(poly) {
            None => return true,
            Some((i, j)) => poly[i + 1..=j].reverse(),
        }
    }
    first_meeting_edges(poly).is_none()
}

/// Signed area (shoelace formula): positive for a counter-clockwise simple polygon.
pub fn signed_area(poly: &[[f64; 2]]) -> f64 {
    let n = poly.len();
    0.5 * (0..n)
        .map(|i| {
            let (p, q) = (poly[i], poly[(i + 1) % n]);
            p[0] * q[1] - q[0] * p[1]
        })
        .sum::<f64>()
}

/// Keeps the part of the convex polygon `region` on the left of the directed line a → b
/// (Sutherland–Hodgman step).
fn clip_left(region: &[[f64; 2]], a: [f64; 2], b: [f64; 2]) -> Vec<[f64; 2]> {
    let side = |p: [f64; 2]| (b[0] - a[0]) * (p[1] - a[1]) - (b[1] - a[1]) * (p[0] - a[0]);
    let mut out = Vec::with_capacity(region.len() + 1);
    for k in 0..region.len() {
        let (p, q) = (region[k], region[(k + 1) % region.len()]);
        let (sp, sq) = (side(p), side(q));
        if sp >= 0.0 {
            out.push(p);
        }
        if (sp >= 0.0) != (sq >= 0.0) {
            let t = sp / (sp - sq);
            out.push([p[0] + t * (q[0] - p[0]), p[1] + t * (q[1] - p[1])]);
        }
    }
    out
}

/// Whether the polygon is star-shaped: simple, with a kernel (the points that see the whole
/// polygon) of positive area. The kernel of a simple polygon is the intersection of the inner
/// half-planes of its edges (standard result); it is computed by clipping a square around
/// the polygon by each of them. A kernel of area below 1e-9 of the polygon's bounding box
/// counts as empty.
pub fn is_star_shaped(poly: &[[f64; 2]]) -> bool {
    if poly.len() < 3 || self_intersects(poly) {
        return false;
    }
    let crate::spatial::Extent { min: lo, max: hi } = crate::spatial::Extent::of(poly);
    let box_area = (hi[0] - lo[0]) * (hi[1] - lo[1]);
    let mut kernel = vec![lo, [hi[0], lo[1]], hi, [lo[0], hi[1]]];
    let ccw = signed_area(poly) > 0.0;
    let n = poly.len();
    for i in 0..n {
        let (a, b) = (poly[i], poly[(i + 1) % n]);
        // The inside of a counter-clockwise polygon is on the left of each edge.
        kernel = if ccw {
            clip_left(&kernel, a, b)
        } else {
            clip_left(&kernel, b, a)
        };
        if kernel.len() < 3 {
            return false;
        }
    }
    signed_area(&kernel) > 1e-9 * box_area
}

#[cfg(test)]
mod tests {
    use super::*;
    use geo::{IsConvex, LineString, Polygon, Validation};
    use rand::SeedableRng;

    const N: usize = 10;
    const DRAWS: usize = 500;

    fn rng(seed: u64) -> rand_chacha::ChaCha8Rng {
        rand_chacha::ChaCha8Rng::seed_from_u64(seed)
    }

    fn ring(poly: &[[f64; 2]]) -> LineString<f64> {
        let mut ls: LineString<f64> = poly.iter().map(|&[x, y]| (x, y)).collect();
        ls.close();
        ls
    }

    /// geo's validity check: the polygon's ring is simple.
    fn geo_valid(poly: &[[f64; 2]]) -> bool {
        Polygon::new(ring(poly), vec![]).is_valid()
    }

    fn draws(class: PolygonClass, seed: u64) -> Vec<Vec<[f64; 2]>> {
        let mut r = rng(seed);
        (0..DRAWS).map(|_| class.generate(&mut r, N)).collect()
    }

    fn spans_the_canvas(poly: &[[f64; 2]]) {
        assert!(poly
            .iter()
            .all(|p| p.iter().all(|&v| (0.0..=CANVAS_PX).contains(&v))));
        let width = |d: usize| {
            let v = poly.iter().map(|p| p[d]);
            v.clone().fold(f64::NEG_INFINITY, f64::max) - v.fold(f64::INFINITY, f64::min)
        };
        assert!(width(0).max(width(1)) > 0.3 * CANVAS_PX);
    }

    #[test]
    fn convex_polygons_are_convex() {
        for p in draws(PolygonClass::Convex, 1) {
            assert_eq!(p.len(), N);
            spans_the_canvas(&p);
            let ls = ring(&p);
            assert!(ls.is_ccw_convex(), "geo IsConvex: {p:?}");
            assert!(ls.is_strictly_convex());
            assert!(geo_valid(&p));
            assert!(is_star_shaped(&p));
        }
    }

    #[test]
    fn star_polygons_are_star_shaped_around_the_centre_and_mostly_not_convex() {
        let polys = draws(PolygonClass::Star, 2);
        let mut convex = 0;
        for p in &polys {
            spans_the_canvas(p);
            assert!(geo_valid(p), "geo Validation: {p:?}");
            // Star-shaped w.r.t. the centre: every triangle (centre, v_i, v_i+1) is
            // counter-clockwise and the bearings of the vertices turn once around the centre.
            let mut turn = 0.0;
            for i in 0..N {
                let (a, b) = (p[i], p[(i + 1) % N]);
                assert_eq!(orient(CENTRE, a, b), Orientation::CounterClockwise);
                let ba = (a[1] - CENTRE[1]).atan2(a[0] - CENTRE[0]);
                let bb = (b[1] - CENTRE[1]).atan2(b[0] - CENTRE[0]);
                turn += (bb - ba).rem_euclid(TAU);
            }
            assert!((turn - TAU).abs() < 1e-9, "winds {turn} around the centre");
            assert!(is_star_shaped(p));
            convex += usize::from(ring(p).is_convex());
        }
        assert!(
            convex * 20 < DRAWS,
            "{convex} of {DRAWS} star polygons are convex"
        );
    }

    #[test]
    fn simple_polygons_do_not_self_intersect_and_are_often_not_star_shaped() {
        let polys = draws(PolygonClass::Simple, 3);
        let mut star = 0;
        for p in &polys {
            spans_the_canvas(p);
            assert!(geo_valid(p), "geo Validation: {p:?}");
            assert!(!self_intersects(p));
            star += usize::from(is_star_shaped(p));
        }
        // Random untangled 10-gons are star-shaped only part of the time.
        assert!(star * 10 < DRAWS * 9, "{star} of {DRAWS} are star-shaped");
        assert!(star * 10 > DRAWS, "the kernel test never succeeds? {star}");
    }

    #[test]
    fn general_polygons_mostly_self_intersect() {
        let polys = draws(PolygonClass::General, 4);
        let valid = polys.iter().filter(|p| geo_valid(p)).count();
        let ours = polys.iter().filter(|p| !self_intersects(p)).count();
        assert_eq!(valid, ours, "our test agrees with geo's Validation");
        assert!(valid * 10 < DRAWS, "{valid} of {DRAWS} are simple");
    }

    #[test]
    fn untangle_fixes_a_bow_tie_and_keeps_vertex_zero() {
        let mut p = [[0.0, 0.0], [10.0, 10.0], [10.0, 0.0], [0.0, 10.0]];
        assert!(self_intersects(&p));
        assert!(untangle(&mut p, 5));
        assert_eq!(p[0], [0.0, 0.0]);
        assert!(!self_intersects(&p));
        assert!(geo_valid(&p));
    }

    #[test]
    fn segment_test_on_known_cases() {
        let (a, b) = ([0.0, 0.0], [4.0, 0.0]);
        assert!(segments_meet(a, b, [2.0, -1.0], [2.0, 1.0])); // crossing
        assert!(segments_meet(a, b, [4.0, 0.0], [5.0, 3.0])); // touching at an end
        assert!(segments_meet(a, b, [3.0, 0.0], [6.0, 0.0])); // overlapping
        assert!(!segments_meet(a, b, [5.0, 0.0], [6.0, 0.0])); // collinear, apart
        assert!(!segments_meet(a, b, [2.0, 0.5], [2.0, 1.0])); // above
    }

    #[test]
    fn kernel_test_on_known_shapes() {
        let square = [[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0]];
        assert!(is_star_shaped(&square));
        let mut cw = square;
        cw.reverse();
        assert!(is_star_shaped(&cw));
        // An "L": star-shaped (its kernel is the corner square); a "U" is not (the inner
        // sides of its two arms face away from each other).
        let l = [
            [0.0, 0.0],
            [2.0, 0.0],
            [2.0, 1.0],
            [1.0, 1.0],
            [1.0, 2.0],
            [0.0, 2.0],
        ];
        assert!(is_star_shaped(&l));
        let u = [
            [0.0, 0.0],
            [3.0, 0.0],
            [3.0, 3.0],
            [2.0, 3.0],
            [2.0, 1.0],
            [1.0, 1.0],
            [1.0, 3.0],
            [0.0, 3.0],
        ];
        assert!(geo_valid(&u));
        assert!(!is_star_shaped(&u));
        // A "Z" with long arms (an S-bend): no point sees both arms' ends.
        let z = [
            [0.0, 0.0],
            [5.0, 0.0],
            [5.0, 3.0],
            [1.0, 3.0],
            [1.0, 4.0],
            [5.0, 4.0],
            [5.0, 5.0],
            [0.0, 5.0],
            [0.0, 2.0],
            [4.0, 2.0],
            [4.0, 1.0],
            [0.0, 1.0],
        ];
        assert!(geo_valid(&z));
        assert!(!is_star_shaped(&z));
        let bow_tie = [[0.0, 0.0], [1.0, 1.0], [1.0, 0.0], [0.0, 1.0]];
        assert!(!is_star_shaped(&bow_tie));
    }
}
