//! Canonical vertex orders for a landmark's neighbourhood polygon.
//!
//! The polygon always starts at the landmark itself (vertex 0), so the start vertex is fixed
//! and the ratio needs no start-shift normalisation. The remaining vertices are the landmark's
//! k nearest neighbours in one of two orders:
//!
//! - [`VertexOrder::Walk`]: the nearest-neighbour walk. From the current vertex step to the
//!   nearest neighbour not yet visited, starting at the landmark.
//! - [`VertexOrder::Angular`]: counter-clockwise by bearing around the landmark, starting at
//!   its nearest neighbour.
//!
//! Both orders depend only on distance ratios and angles, so they are preserved by any
//! similarity (a mirror reverses the angular order).

use serde::{Deserialize, Serialize};

/// How a neighbourhood's vertices are ordered into a polygon.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum VertexOrder {
    /// Nearest-neighbour walk from the landmark.
    #[default]
    Walk,
    /// Counter-clockwise around the landmark, starting at its nearest neighbour.
    Angular,
}

impl std::fmt::Display for VertexOrder {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            VertexOrder::Walk => "walk",
            VertexOrder::Angular => "angular",
        })
    }
}

/// Orders `neighbours` (indices into `points`, nearest to `centre` first) into `out`, which
/// receives `centre` followed by the ordered neighbours.
pub fn order_polygon(
    order: VertexOrder,
    points: &[[f64; 2]],
    centre: u32,
    neighbours: &[u32],
    out: &mut Vec<u32>,
) {
    out.clear();
    out.push(centre);
    match order {
        VertexOrder::Walk => walk(points, centre, neighbours, out),
        VertexOrder::Angular => angular(points, centre, neighbours, out),
    }
}

fn walk(points: &[[f64; 2]], centre: u32, neighbours: &[u32], out: &mut Vec<u32>) {
    let mut left: Vec<u32> = neighbours.to_vec();
    let mut here = points[centre as usize];
    while !left.is_empty() {
        let mut best = 0;
        let mut best_d = f64::INFINITY;
        for (i, &c) in left.iter().enumerate() {
            let d = crate::spatial::dist2(here, points[c as usize]);
            // Ties (exact, as in a perfect grid) resolve to the neighbour nearer the landmark,
            // which comes first in `neighbours`.
            if d < best_d {
                best_d = d;
                best = i;
            }
        }
        let next = left.remove(best);
        here = points[next as usize];
        out.push(next);
    }
}

fn angular(points: &[[f64; 2]], centre: u32, neighbours: &[u32], out: &mut Vec<u32>) {
    let c = points[centre as usize];
    let Some(&first) = neighbours.first() else {
        return;
    };
    let bearing = |i: u32| {
        let p = points[i as usize];
        (p[1] - c[1]).atan2(p[0] - c[0])
    };
    let b0 = bearing(first);
    let mut keyed: Vec<(f64, u32)> = neighbours
        .iter()
        .map(|&i| ((bearing(i) - b0).rem_euclid(std::f64::consts::TAU), i))
        .collect();
    keyed.sort_by(|a, b| a.0.total_cmp(&b.0));
    out.extend(keyed.into_iter().map(|(_, i)| i));
}

/// Most vertex orders one neighbourhood may yield when the walk branches.
pub const MAX_ORDERS: usize = 4;

/// Like [`order_polygon`], but where a step of the walk is ambiguous — the second-nearest
/// unvisited neighbour is within a factor (1 + `margin`) of the nearest — both continuations
/// are followed, so that noise which swaps two nearly equal distances still yields the other
/// survey's order. At most [`MAX_ORDERS`] orders, depth first (the unambiguous order first).
/// The angular order does not branch. Each order (centre first) is appended to `out` as
/// `neighbours.len() + 1` indices; returns how many were appended.
pub fn order_polygons(
    order: VertexOrder,
    points: &[[f64; 2]],
    centre: u32,
    neighbours: &[u32],
    margin: f64,
    out: &mut Vec<u32>,
) -> usize {
    if order == VertexOrder::Angular || margin <= 0.0 {
        let mut one = Vec::with_capacity(neighbours.len() + 1);
        order_polygon(order, points, centre, neighbours, &mut one);
        out.extend_from_slice(&one);
        return 1;
    }
    let mut path = vec![centre];
    let mut count = 0;
    branch(points, &mut path, neighbours, margin, out, &mut count);
    count
}

fn branch(
    points: &[[f64; 2]],
    path: &mut Vec<u32>,
    left: &[u32],
    margin: f64,
    out: &mut Vec<u32>,
    count: &mut usize,
) {
    if *count >= MAX_ORDERS {
        return;
    }
    if left.is_empty() {
        out.extend_from_slice(path);
        *count += 1;
        return;
    }
    let here = points[*path.last().expect("path starts at the centre") as usize];
    let mut ranked: Vec<(f64, usize)> = left
        .iter()
        .enumerate()
        .map(|(i, &c)| (crate::spatial::dist2(here, points[c as usize]).sqrt(), i))
        .collect();
    // Stable: ties keep the neighbour nearer the landmark first, as in the plain walk.
    ranked.sort_by(|a, b| a.0.total_cmp(&b.0));
    let limit = ranked[0].0 * (1.0 + margin);
    for &(d, i) in ranked.iter().take(2) {
        if d > limit && i != ranked[0].1 {
            break;
        }
        let mut rest = left.to_vec();
        let next = rest.remove(i);
        path.push(next);
        branch(points, path, &rest, margin, out, count);
        path.pop();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn walk_follows_nearest_unvisited() {
        // Landmark at the origin; neighbours nearest first: (1,0), (0,1.5), (2.2,0).
        let pts = [[0.0, 0.0], [1.0, 0.0], [0.0, 1.5], [2.2, 0.0]];
        let mut out = Vec::new();
        order_polygon(VertexOrder::Walk, &pts, 0, &[1, 2, 3], &mut out);
        // From (1,0) the nearest unvisited is (2.2,0) at 1.2, then (0,1.5).
        assert_eq!(out, vec![0, 1, 3, 2]);
    }

    #[test]
    fn ambiguous_steps_yield_both_orders() {
        // From the landmark, (1,0) and (0,1.02) are within 5% of each other.
        let pts = [[0.0, 0.0], [1.0, 0.0], [0.0, 1.02], [3.0, 3.0]];
        let mut out = Vec::new();
        let n = order_polygons(VertexOrder::Walk, &pts, 0, &[1, 2, 3], 0.05, &mut out);
        assert_eq!(n, 2);
        assert_eq!(&out[..4], &[0, 1, 2, 3]);
        assert_eq!(&out[4..], &[0, 2, 1, 3]);
        out.clear();
        assert_eq!(
            order_polygons(VertexOrder::Walk, &pts, 0, &[1, 2, 3], 0.01, &mut out),
            1
        );
        assert_eq!(out, vec![0, 1, 2, 3]);
    }

    #[test]
    fn angular_goes_counter_clockwise_from_nearest() {
        let pts = [[0.0, 0.0], [0.0, -1.0], [2.0, 0.0], [0.0, 3.0], [-4.0, 0.0]];
        let mut out = Vec::new();
        order_polygon(VertexOrder::Angular, &pts, 0, &[1, 2, 3, 4], &mut out);
        assert_eq!(out, vec![0, 1, 2, 3, 4]);
    }
}
