//! Plane geometry the drift check needs: convex hulls (the outline of an area, of a survey),
//! the intersection of two convex polygons (the overlap of two surveys) and the largest
//! movement a similarity makes over a convex polygon.
//!
//! **In:** points in one plane frame. **Out:** polygons as counter-clockwise vertex lists
//! (first vertex not repeated), distances.

use crate::fit::Similarity;

/// Twice the signed area of the triangle o, a, b (positive when counter-clockwise).
fn cross(o: [f64; 2], a: [f64; 2], b: [f64; 2]) -> f64 {
    (a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0])
}

/// The convex hull of `points`, counter-clockwise, without collinear vertices (Andrew's
/// monotone chain). Fewer than three distinct points give those points.
pub fn convex_hull(points: &[[f64; 2]]) -> Vec<[f64; 2]> {
    let mut p: Vec<[f64; 2]> = points.to_vec();
    p.sort_by(|a, b| a[0].total_cmp(&b[0]).then(a[1].total_cmp(&b[1])));
    p.dedup();
    if p.len() < 3 {
        return p;
    }
    let mut hull: Vec<[f64; 2]> = Vec::with_capacity(2 * p.len());
    for pass in 0..2 {
        let start = hull.len();
        let iter: Box<dyn Iterator<Item = &[f64; 2]>> = if pass == 0 {
            Box::new(p.iter())
        } else {
            Box::new(p.iter().rev())
        };
        for &q in iter {
            while hull.len() >= start + 2
                && cross(hull[hull.len() - 2], hull[hull.len() - 1], q) <= 0.0
            {
                hull.pop();
            }
            hull.push(q);
        }
        hull.pop();
    }
    hull
}

/// Signed area of a polygon (positive when counter-clockwise).
pub fn area(polygon: &[[f64; 2]]) -> f64 {
    let n = polygon.len();
    if n < 3 {
        return 0.0;
    }
    let o = polygon[0];
    (1..n - 1)
        .map(|i| cross(o, polygon[i], polygon[i + 1]))
        .sum::<f64>()
        / 2.0
}

/// The part of the convex polygon `subject` inside the convex, counter-clockwise polygon
/// `clip` (Sutherland-Hodgman clipping against each edge of `clip`). Empty when they do not
/// overlap.
pub fn clip_convex(subject: &[[f64; 2]], clip: &[[f64; 2]]) -> Vec<[f64; 2]> {
    let mut out = subject.to_vec();
    let m = clip.len();
    if m < 3 {
        return Vec::new();
    }
    for i in 0..m {
        let (a, b) = (clip[i], clip[(i + 1) % m]);
        let input = std::mem::take(&mut out);
        let n = input.len();
        for j in 0..n {
            let (p, q) = (input[j], input[(j + 1) % n]);
            let (dp, dq) = (cross(a, b, p), cross(a, b, q));
            if dp >= 0.0 {
                out.push(p);
            }
            if (dp >= 0.0) != (dq >= 0.0) {
                let t = dp / (dp - dq);
                out.push([p[0] + t * (q[0] - p[0]), p[1] + t * (q[1] - p[1])]);
            }
        }
        if out.is_empty() {
            break;
        }
    }
    out
}

/// The largest movement |s(p) − p| over the convex polygon `polygon`, and where. The movement
/// of a similarity is |(A − I)p + t|, a convex function of p, so its maximum over a convex
/// polygon is at a vertex.
pub fn max_movement(s: &Similarity, polygon: &[[f64; 2]]) -> Option<(f64, [f64; 2])> {
    polygon
        .iter()
        .map(|&p| {
            let q = s.apply(p);
            ((q[0] - p[0]).hypot(q[1] - p[1]), p)
        })
        .max_by(|a, b| a.0.total_cmp(&b.0))
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    #[test]
    fn hull_of_a_square_with_inner_points() {
        let mut pts = vec![[0.0, 0.0], [2.0, 0.0], [2.0, 2.0], [0.0, 2.0], [1.0, 0.0]];
        pts.extend([[1.0, 1.0], [0.5, 1.5], [1.9, 0.1]]);
        let h = convex_hull(&pts);
        assert_eq!(h.len(), 4, "{h:?}");
        assert!((area(&h) - 4.0).abs() < 1e-12);
    }

    #[test]
    fn clipping_two_squares_gives_their_overlap() {
        let a = [[0.0, 0.0], [2.0, 0.0], [2.0, 2.0], [0.0, 2.0]];
        let b = [[1.0, 1.0], [3.0, 1.0], [3.0, 3.0], [1.0, 3.0]];
        assert!((area(&clip_convex(&a, &b)) - 1.0).abs() < 1e-12);
        let far = [[5.0, 5.0], [6.0, 5.0], [6.0, 6.0], [5.0, 6.0]];
        assert!(area(&clip_convex(&a, &far)).abs() < 1e-12);
    }

    #[test]
    fn the_largest_movement_is_at_a_vertex() {
        // Brute force over a dense grid inside the polygon against the vertex rule.
        let s = Similarity::from_params(1.0 + 3e-5, 2e-5, 0.04, -0.03);
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let pts: Vec<[f64; 2]> = (0..40)
            .map(|_| [rng.gen_range(0.0..900.0), rng.gen_range(0.0..600.0)])
            .collect();
        let hull = convex_hull(&pts);
        let (best, _) = max_movement(&s, &hull).unwrap();
        for &p in &pts {
            let q = s.apply(p);
            assert!((q[0] - p[0]).hypot(q[1] - p[1]) <= best + 1e-12);
        }
    }
}
