//! The residual field of a match and the local drift areas found in it, in the working frame.
//!
//! **In:** both surveys' landmarks in the working frame and the match's accepted [`Solution`]
//! ([`FieldInput`]). **Out:** an [`Analysis`]: the global drift statement over the landmarks
//! that follow the global transform, the areas that moved relative to the rest, the overlap of
//! the two surveys and the largest global movement over it.
//!
//! Steps:
//!
//! 1. **Wider guided pass.** Under the match's transform, every target landmark is paired with
//!    its mutual nearest reference landmark within the search radius
//!    `max(½ × the reference's median landmark spacing, the match's search tolerance)`
//!    ([`search_radius`]): local movements up to that radius can be found; beyond half the
//!    spacing a moved landmark may land nearer its neighbour's counterpart and nearest-landmark
//!    pairing is no longer unambiguous. A pair the global fit had rejected is kept only when
//!    its neighbourhood agrees: at least [`AGREEING`] of its [`NEIGHBOURS`] nearest target
//!    landmarks are paired with a movement within the match's inlier tolerance of its own.
//! 2. **Movements.** For each pair (r, t), the movement relative to the global drift D
//!    (reference → target): t − D(r).
//! 3. **Region growing** on the neighbour graph (each landmark joined to its [`NEIGHBOURS`]
//!    nearest, by reference position, within [`GRAPH_REACH`] median spacings): seeds are
//!    movements unusual at 1 % (|m| > 3.035 σ̂, the 99 % point of a 2-D Gaussian length with
//!    σ̂ per coordinate), largest first; a neighbour joins an area when its movement is within
//!    2.448 σ̂ √(1 + 1/n) of the area's mean (95 %) and nearer to that mean than to zero;
//!    neighbours turned down are tested again against the grown area's mean. Areas whose
//!    means agree and that come within [`GRAPH_REACH`] median spacings of each other are
//!    merged (one movement on both sides of a gap in the graph, such as a street).
//!    Areas of fewer than [`MIN_AREA`] landmarks are dropped (one landmark is an outlier, not an
//!    area).
//! 4. **Significance** of an area of n landmarks with mean movement m̄: Q = n |m̄|² / σ̂² (a χ²
//!    with 2 degrees of freedom for a fixed set of landmarks under the global fit's noise). As
//!    the areas are chosen for their large movements, Q is compared with the distribution of
//!    the **largest** Q over all areas the same region growing finds in [`DRAWS`] residual
//!    fields drawn from the null hypothesis (independent Gaussian movements of σ̂ per
//!    coordinate on the same landmarks and graph; a parametric Monte Carlo test, seeded from
//!    the match's seed). The p-value is (1 + #{draws with max Q ≥ Q}) / (DRAWS + 1); an area is
//!    flagged when p ≤ [`LEVEL`]. Because the reference distribution is that of the survey-wide
//!    maximum, the chance of flagging any area at all in a survey that did not move locally is
//!    at most 5 % (family-wise error over the whole survey, as a Bonferroni correction would
//!    aim at, without assuming the areas independent).
//! 5. The landmarks of flagged areas are taken out, the global transform is refitted on the
//!    rest (those within the inlier tolerance), and steps 2-4 run again, at most
//!    [`MAX_PASSES`] times, until the flagged landmarks no longer change.
//!
//! The global drift statement is the least-squares reference → target similarity over the
//! remaining landmarks, stated at their centroid ([`TransformStatement`]), with a joint test of
//! its four parameters: Σ (value / SE)², χ² with 4 degrees of freedom (the four are
//! uncorrelated at the centroid), p = e^(−x/2)(1 + x/2), significant when p < 0.05.

use super::geometry;
use crate::accuracy::{Accuracy, AccuracySource, TransformStatement};
use crate::fit::guided::{mutual_pairs, Frames};
use crate::fit::similarity::fit_similarity_indexed;
use crate::fit::{Pair, Similarity, Solution};
use crate::spatial::{dist2, PointIndex};
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};

/// Neighbours per landmark in the neighbour graph and in the neighbourhood check.
pub const NEIGHBOURS: usize = 6;
/// Neighbours that must agree before a pair the global fit rejected is kept.
pub const AGREEING: usize = 2;
/// Graph edges reach at most this many median spacings.
pub const GRAPH_REACH: f64 = 4.0;
/// Fewest landmarks in an area.
pub const MIN_AREA: usize = 3;
/// Monte Carlo draws of the null distribution.
pub const DRAWS: usize = 199;
/// Family-wise level of the local test, and level of the global test.
pub const LEVEL: f64 = 0.05;
/// Growing passes per area (the last ones test turned-down neighbours again).
const GROW_PASSES: usize = 4;
/// Refits after taking flagged areas out.
pub const MAX_PASSES: usize = 3;
/// √(−2 ln 0.01): the 99 % point of the length of a 2-D Gaussian vector (σ = 1 per coordinate).
const SEED_K: f64 = 3.034_854_258_770_293;
/// √(−2 ln 0.05): its 95 % point.
const JOIN_K: f64 = 2.447_746_830_680_816;

/// What the analysis reads (working frame).
pub struct FieldInput<'a> {
    /// Reference landmarks.
    pub reference: &'a [[f64; 2]],
    /// Target landmarks.
    pub target: &'a [[f64; 2]],
    /// The match's accepted solution (target → reference).
    pub solution: &'a Solution,
    /// Median nearest-neighbour spacing of the reference, working units.
    pub reference_spacing: f64,
    /// Metres per working unit.
    pub metres_per_unit: f64,
    /// The scale of a target → reference fit with no scale error (1 for two georeferenced
    /// surveys).
    pub unit_scale: f64,
    /// Seed of the Monte Carlo draws.
    pub seed: u64,
}

/// One area that moved relative to the rest (working frame).
#[derive(Debug, Clone)]
pub struct Area {
    /// Its landmark pairs; `residual` is the length of each one's movement, working units.
    pub members: Vec<Pair>,
    /// Each member's movement relative to the global drift (t − D(r)), working units.
    pub movements: Vec<[f64; 2]>,
    /// Mean reference position of the members.
    pub centre: [f64; 2],
    /// Convex hull of the members' reference positions, counter-clockwise.
    pub outline: Vec<[f64; 2]>,
    /// Mean movement relative to the global drift, working units.
    pub shift: [f64; 2],
    /// Standard error of each coordinate of `shift` (σ̂ / √n), working units.
    pub shift_se: f64,
    /// Q = n |shift|² / σ̂².
    pub statistic: f64,
    /// Monte Carlo p-value against the survey-wide maximum of Q.
    pub p_value: f64,
    /// p ≤ [`LEVEL`].
    pub significant: bool,
}

/// The joint test of the global drift's four parameters.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct GlobalTest {
    /// Σ (value / SE)² over shift east, shift north, rotation, scale.
    pub statistic: f64,
    /// 4.
    pub degrees_of_freedom: usize,
    /// P(χ²₄ ≥ statistic).
    pub p_value: f64,
    /// The level.
    pub level: f64,
    /// p < level.
    pub significant: bool,
}

impl GlobalTest {
    fn of(s: &TransformStatement) -> GlobalTest {
        let statistic: f64 = [
            s.shift_east_m,
            s.shift_north_m,
            s.rotation_arcsec,
            s.scale_ppm,
        ]
        .iter()
        .map(|e| {
            if e.se > 0.0 {
                (e.value / e.se).powi(2)
            } else {
                0.0
            }
        })
        .sum();
        // Survival function of χ² with 4 degrees of freedom.
        let p_value = (-statistic / 2.0).exp() * (1.0 + statistic / 2.0);
        GlobalTest {
            statistic,
            degrees_of_freedom: 4,
            p_value,
            level: LEVEL,
            significant: p_value < LEVEL,
        }
    }
}

/// What the analysis found (working frame unless a name says metres).
#[derive(Debug, Clone)]
pub struct Analysis {
    /// The global drift: reference → target, stated at the centroid of `stable`'s reference
    /// positions.
    pub statement: TransformStatement,
    /// Joint test of the statement's four parameters.
    pub global: GlobalTest,
    /// Target → reference transform refitted on `stable`.
    pub transform: Similarity,
    /// The pairs that follow the global transform (flagged areas taken out); `residual` under
    /// `transform`.
    pub stable: Vec<Pair>,
    /// Accuracy over `stable` (fit residuals, metres).
    pub accuracy: Option<Accuracy>,
    /// σ̂ per coordinate of the stable fit.
    pub sigma: f64,
    /// Flagged areas, largest movement first.
    pub areas: Vec<Area>,
    /// Candidate areas tested (flagged or not) in the last pass.
    pub candidates: usize,
    /// Overlap of the two surveys (reference convex hull ∩ mapped target convex hull).
    pub overlap: Vec<[f64; 2]>,
    /// Largest movement of the global drift over the overlap, metres.
    pub max_drift_m: f64,
    /// Where it is (a vertex of `overlap`).
    pub max_drift_at: [f64; 2],
    /// Radius of the wider guided pass.
    pub search_radius: f64,
    /// Pairs the global fit had rejected that the wider pass kept (neighbourhood agreed).
    pub extra_pairs: usize,
}

/// Radius of the wider guided pass: max(½ × median spacing, the search tolerance).
pub fn search_radius(reference_spacing: f64, solution: &Solution) -> f64 {
    (0.5 * reference_spacing).max(solution.search_radius)
}

/// Runs the analysis; `None` when too few landmarks follow the global transform to state it
/// (fewer than three).
pub fn analyse(input: &FieldInput) -> Option<Analysis> {
    let (reference, target, solution) = (input.reference, input.target, input.solution);
    let ri = PointIndex::new(reference)?;
    let ti = PointIndex::new(target)?;
    let frames = Frames {
        reference,
        target,
        reference_index: &ri,
        target_index: &ti,
    };
    let t0 = solution.fit.transform;
    let tol = solution.max_residual;
    let radius = search_radius(input.reference_spacing, solution);

    // 1. The nodes: the control points, and the wider pass's pairs whose neighbourhood agrees.
    let mut nodes: Vec<Pair> = solution.pairs.clone();
    let mut used_t = vec![false; target.len()];
    let mut used_r = vec![false; reference.len()];
    for p in &nodes {
        used_t[p.target as usize] = true;
        used_r[p.reference as usize] = true;
    }
    let (wide, _) = mutual_pairs(&frames, &t0, radius, radius, None);
    let d0 = t0.inverse();
    let mut movement_of: Vec<Option<[f64; 2]>> = vec![None; target.len()];
    for p in wide.iter().chain(&solution.pairs) {
        movement_of[p.target as usize] = Some(movement(
            target[p.target as usize],
            reference[p.reference as usize],
            &d0,
        ));
    }
    let mut near = Vec::new();
    let mut extra_pairs = 0;
    for p in &wide {
        if used_t[p.target as usize] || used_r[p.reference as usize] {
            continue;
        }
        let m = movement_of[p.target as usize].expect("set above");
        ti.nearest_n(target[p.target as usize], NEIGHBOURS + 1, &mut near);
        let agreeing = near
            .iter()
            .filter(|(j, _)| *j != p.target)
            .take(NEIGHBOURS)
            .filter(|(j, _)| movement_of[*j as usize].is_some_and(|o| dist2(o, m) <= tol * tol))
            .count();
        if agreeing >= AGREEING {
            used_t[p.target as usize] = true;
            used_r[p.reference as usize] = true;
            nodes.push(*p);
            extra_pairs += 1;
        }
    }
    let positions: Vec<[f64; 2]> = nodes
        .iter()
        .map(|p| reference[p.reference as usize])
        .collect();
    let reach = GRAPH_REACH * input.reference_spacing;
    let graph = neighbour_graph(&positions, reach)?;

    // 2-5. Movements, areas, refit without the flagged ones.
    let mut flagged = vec![false; nodes.len()];
    let stable_of = |flagged: &[bool], t: &Similarity| -> Vec<usize> {
        (0..nodes.len())
            .filter(|&i| {
                let p = &nodes[i];
                !flagged[i]
                    && dist2(
                        t.apply(target[p.target as usize]),
                        reference[p.reference as usize],
                    ) <= tol * tol
            })
            .collect()
    };
    let mut stable: Vec<usize> = stable_of(&flagged, &t0);
    let mut transform;
    let mut sigma;
    let mut areas: Vec<Candidate>;
    let mut candidates;
    let mut pass = 0;
    loop {
        pass += 1;
        if stable.len() < 3 {
            return None;
        }
        let fit = fit_similarity_indexed(stable.len(), |k| {
            let p = &nodes[stable[k]];
            (target[p.target as usize], reference[p.reference as usize])
        })?;
        if !fit.transform.is_valid() {
            return None;
        }
        transform = fit.transform;
        sigma = fit
            .sigma
            .max(1e-9 * input.reference_spacing.max(f64::MIN_POSITIVE));
        let d = transform.inverse();
        let moves: Vec<[f64; 2]> = nodes
            .iter()
            .map(|p| {
                movement(
                    target[p.target as usize],
                    reference[p.reference as usize],
                    &d,
                )
            })
            .collect();
        let found = find_areas(&moves, &graph, &positions, reach, sigma);
        candidates = found.len();
        let null = null_maxima(&graph, &positions, reach, input.seed ^ pass as u64);
        areas = found
            .into_iter()
            .map(|(members, q)| {
                let exceed = null.iter().filter(|&&m| m >= q).count();
                let p = (1 + exceed) as f64 / (DRAWS + 1) as f64;
                let mv = members.iter().map(|&i| moves[i]).collect();
                (members, mv, q, p)
            })
            .collect();
        let mut now = vec![false; nodes.len()];
        for (members, _, _, p) in &areas {
            if *p <= LEVEL {
                members.iter().for_each(|&i| now[i] = true);
            }
        }
        let next = stable_of(&now, &transform);
        let same = now == flagged;
        flagged = now;
        if same || pass >= MAX_PASSES {
            // The statement below is over `next` (the stable set under the final transform).
            stable = next;
            break;
        }
        stable = next;
    }

    // The global drift: reference → target over the stable pairs.
    let statement = TransformStatement::from_pairs_indexed(
        stable.len(),
        |k| {
            let p = &nodes[stable[k]];
            (reference[p.reference as usize], target[p.target as usize])
        },
        input.metres_per_unit,
        1.0 / input.unit_scale,
    )?;
    let drift = statement.transform;
    transform = drift.inverse();
    let stable_pairs: Vec<Pair> = stable
        .iter()
        .map(|&i| {
            let p = nodes[i];
            let r = dist2(
                transform.apply(target[p.target as usize]),
                reference[p.reference as usize],
            )
            .sqrt();
            Pair { residual: r, ..p }
        })
        .collect();
    let residuals_m: Vec<[f64; 2]> = stable_pairs
        .iter()
        .map(|p| {
            let q = transform.apply(target[p.target as usize]);
            let r = reference[p.reference as usize];
            [
                (r[0] - q[0]) * input.metres_per_unit,
                (r[1] - q[1]) * input.metres_per_unit,
            ]
        })
        .collect();
    let accuracy = Accuracy::from_residuals(&residuals_m, AccuracySource::FitResiduals);

    let mut flagged_areas: Vec<Area> = areas
        .into_iter()
        .filter(|a| a.3 <= LEVEL)
        .map(|(members, movements, q, p)| {
            let n = members.len() as f64;
            let pos: Vec<[f64; 2]> = members.iter().map(|&i| positions[i]).collect();
            let centre = mean(&pos);
            let shift = mean(&movements);
            Area {
                members: members
                    .iter()
                    .zip(&movements)
                    .map(|(&i, m)| Pair {
                        residual: m[0].hypot(m[1]),
                        ..nodes[i]
                    })
                    .collect(),
                movements,
                centre,
                outline: geometry::convex_hull(&pos),
                shift,
                shift_se: sigma / n.sqrt(),
                statistic: q,
                p_value: p,
                significant: true,
            }
        })
        .collect();
    flagged_areas.sort_by(|a, b| {
        let l = |x: &Area| x.shift[0].hypot(x.shift[1]);
        l(b).total_cmp(&l(a))
    });

    // The overlap: the reference's hull and the target's hull mapped onto the reference.
    let mapped: Vec<[f64; 2]> = target.iter().map(|&p| transform.apply(p)).collect();
    let overlap = geometry::clip_convex(
        &geometry::convex_hull(reference),
        &geometry::convex_hull(&mapped),
    );
    let overlap = if geometry::area(&overlap) > 0.0 {
        overlap
    } else {
        geometry::convex_hull(&positions)
    };
    let (max_drift, at) = geometry::max_movement(&drift, &overlap).unwrap_or((0.0, statement.at));
    Some(Analysis {
        global: GlobalTest::of(&statement),
        statement,
        transform,
        stable: stable_pairs,
        accuracy,
        sigma,
        areas: flagged_areas,
        candidates,
        overlap,
        max_drift_m: max_drift * input.metres_per_unit,
        max_drift_at: at,
        search_radius: radius,
        extra_pairs,
    })
}

/// A candidate area: its nodes, their movements, Q and the p-value.
type Candidate = (Vec<usize>, Vec<[f64; 2]>, f64, f64);

/// The movement t − D(r) of a pair relative to the drift D (reference → target).
fn movement(t: [f64; 2], r: [f64; 2], d: &Similarity) -> [f64; 2] {
    let q = d.apply(r);
    [t[0] - q[0], t[1] - q[1]]
}

fn mean(v: &[[f64; 2]]) -> [f64; 2] {
    let n = v.len().max(1) as f64;
    let s = v.iter().fold([0.0, 0.0], |a, p| [a[0] + p[0], a[1] + p[1]]);
    [s[0] / n, s[1] / n]
}

/// Each node's neighbours: its [`NEIGHBOURS`] nearest within `reach`, made symmetric.
fn neighbour_graph(positions: &[[f64; 2]], reach: f64) -> Option<Vec<Vec<u32>>> {
    let index = PointIndex::new(positions)?;
    let mut graph: Vec<Vec<u32>> = vec![Vec::new(); positions.len()];
    let mut near = Vec::new();
    for (i, &p) in positions.iter().enumerate() {
        index.nearest_n(p, NEIGHBOURS + 1, &mut near);
        for &(j, d2) in &near {
            if j as usize != i && d2 <= reach * reach {
                graph[i].push(j);
                graph[j as usize].push(i as u32);
            }
        }
    }
    for g in &mut graph {
        g.sort_unstable();
        g.dedup();
    }
    Some(graph)
}

/// Region growing over the movements (see the module doc, step 3): the areas found (node
/// indices) with their Q.
fn grow(moves: &[[f64; 2]], graph: &[Vec<u32>], sigma: f64) -> Vec<(Vec<usize>, f64)> {
    let len2 = |m: [f64; 2]| m[0] * m[0] + m[1] * m[1];
    let seed2 = (SEED_K * sigma).powi(2);
    let mut seeds: Vec<usize> = (0..moves.len())
        .filter(|&i| len2(moves[i]) > seed2)
        .collect();
    seeds.sort_by(|&a, &b| len2(moves[b]).total_cmp(&len2(moves[a])).then(a.cmp(&b)));
    let mut assigned = vec![false; moves.len()];
    // The pass a node was last tested in (each pass tests a node once), and the region it is
    // in (seed index).
    let mut tested = vec![usize::MAX; moves.len()];
    let mut member = vec![usize::MAX; moves.len()];
    let mut pass = 0;
    let mut out = Vec::new();
    let mut queue = std::collections::VecDeque::new();
    for (k, &s) in seeds.iter().enumerate() {
        if assigned[s] {
            continue;
        }
        let mut region = vec![s];
        let mut sum = moves[s];
        member[s] = k;
        queue.clear();
        queue.extend(graph[s].iter().map(|&j| j as usize));
        // Grow; then test the neighbours that were turned down again against the final mean
        // (an early mean is noisy), until nothing more joins.
        for _ in 0..GROW_PASSES {
            pass += 1;
            let before = region.len();
            while let Some(j) = queue.pop_front() {
                if assigned[j] || member[j] == k || tested[j] == pass {
                    continue;
                }
                tested[j] = pass;
                let n = region.len() as f64;
                let m = [sum[0] / n, sum[1] / n];
                let off = dist2(moves[j], m);
                let join2 = JOIN_K * JOIN_K * sigma * sigma * (1.0 + 1.0 / n);
                if off <= join2 && off < len2(moves[j]) {
                    region.push(j);
                    member[j] = k;
                    sum = [sum[0] + moves[j][0], sum[1] + moves[j][1]];
                    queue.extend(graph[j].iter().map(|&i| i as usize));
                }
            }
            if region.len() == before {
                break;
            }
            queue.extend(
                region
                    .iter()
                    .flat_map(|&i| graph[i].iter().map(|&j| j as usize)),
            );
        }
        if region.len() >= MIN_AREA {
            region.iter().for_each(|&i| assigned[i] = true);
            let n = region.len() as f64;
            let q = len2(sum) / (n * sigma * sigma);
            region.sort_unstable();
            out.push((region, q));
        }
    }
    out
}

/// Areas: [`grow`], then areas whose mean movements agree (within 2.448 σ̂ √(1/n₁ + 1/n₂))
/// and that come within `reach` of each other are merged (one movement on both sides of a
/// gap in the graph, such as a street), until no two can be; with their Q.
fn find_areas(
    moves: &[[f64; 2]],
    graph: &[Vec<u32>],
    positions: &[[f64; 2]],
    reach: f64,
    sigma: f64,
) -> Vec<(Vec<usize>, f64)> {
    let mut areas: Vec<(Vec<usize>, [f64; 2])> = grow(moves, graph, sigma)
        .into_iter()
        .map(|(members, _)| {
            let sum = members
                .iter()
                .fold([0.0, 0.0], |a, &i| [a[0] + moves[i][0], a[1] + moves[i][1]]);
            (members, sum)
        })
        .collect();
    let near = |a: &[usize], b: &[usize]| {
        a.iter().any(|&i| {
            b.iter()
                .any(|&j| dist2(positions[i], positions[j]) <= reach * reach)
        })
    };
    'merging: loop {
        for x in 0..areas.len() {
            for y in x + 1..areas.len() {
                let (nx, ny) = (areas[x].0.len() as f64, areas[y].0.len() as f64);
                let mx = [areas[x].1[0] / nx, areas[x].1[1] / nx];
                let my = [areas[y].1[0] / ny, areas[y].1[1] / ny];
                let agree =
                    dist2(mx, my) <= JOIN_K * JOIN_K * sigma * sigma * (1.0 / nx + 1.0 / ny);
                if agree && near(&areas[x].0, &areas[y].0) {
                    let (members, sum) = areas.swap_remove(y);
                    areas[x].0.extend(members);
                    areas[x].0.sort_unstable();
                    areas[x].1 = [areas[x].1[0] + sum[0], areas[x].1[1] + sum[1]];
                    continue 'merging;
                }
            }
        }
        break;
    }
    areas
        .into_iter()
        .map(|(members, sum)| {
            let q = (sum[0] * sum[0] + sum[1] * sum[1]) / (members.len() as f64 * sigma * sigma);
            (members, q)
        })
        .collect()
}

/// The survey-wide largest Q in [`DRAWS`] residual fields of independent standard Gaussian
/// movements on `graph` (σ = 1: Q does not depend on σ).
fn null_maxima(graph: &[Vec<u32>], positions: &[[f64; 2]], reach: f64, seed: u64) -> Vec<f64> {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut moves = vec![[0.0; 2]; graph.len()];
    (0..DRAWS)
        .map(|_| {
            for m in moves.iter_mut() {
                *m = [
                    StandardNormal.sample(&mut rng),
                    StandardNormal.sample(&mut rng),
                ];
            }
            find_areas(&moves, graph, positions, reach, 1.0)
                .iter()
                .map(|a| a.1)
                .fold(0.0, f64::max)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid(side: usize) -> Vec<[f64; 2]> {
        (0..side * side)
            .map(|i| [(i % side) as f64 * 10.0, (i / side) as f64 * 10.0])
            .collect()
    }

    #[test]
    fn a_block_of_equal_movements_grows_into_one_area() {
        let pos = grid(20);
        let graph = neighbour_graph(&pos, 40.0).unwrap();
        let moves: Vec<[f64; 2]> = pos
            .iter()
            .map(|p| {
                if p[0] < 45.0 && p[1] < 45.0 {
                    [5.0, 0.0]
                } else {
                    [0.0, 0.0]
                }
            })
            .collect();
        let areas = grow(&moves, &graph, 1.0);
        assert_eq!(areas.len(), 1);
        assert_eq!(areas[0].0.len(), 25);
        assert!((areas[0].1 - 25.0 * 25.0).abs() < 1e-9);
    }

    #[test]
    fn isolated_outliers_make_no_area() {
        let pos = grid(20);
        let graph = neighbour_graph(&pos, 40.0).unwrap();
        let mut moves = vec![[0.0, 0.0]; pos.len()];
        moves[45] = [9.0, 0.0];
        moves[210] = [0.0, -9.0];
        assert!(grow(&moves, &graph, 1.0).is_empty());
    }
}
