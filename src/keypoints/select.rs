//! Non-maximum suppression and the spatially balanced selection.
//!
//! **In:** refined [`Candidate`]s (grid coordinates), the grid's size, a target count.
//! **Out:** the candidates kept, strongest first.
//!
//! - Suppression: strongest first, a candidate is dropped when a stronger one kept lies within
//!   the blob radius √2·σ of the larger of the two (Lindeberg 1998's blob radius, from memory),
//!   whatever their signs: one blob seen at two scales, or the ring of opposite sign around a
//!   strong blob, counts once.
//! - Selection: the grid is cut into about `target / CELL_SHARE` square cells; the cells give
//!   their candidates in rounds, each its strongest not yet given, until the target is reached.
//!   A cell never gives more than one more than the fewest given by any cell that still has
//!   candidates, and what it gives are its strongest.

use super::scale_space::Candidate;
use std::collections::HashMap;

/// Candidates a cell holds at the target count when they are spread evenly (our choice: cells
/// fine enough to spread, coarse enough that a cell's best few survive).
pub const CELL_SHARE: usize = 4;

/// Drops every candidate that lies within the blob radius of a stronger one kept.
pub fn suppress(mut cands: Vec<Candidate>) -> Vec<Candidate> {
    cands.sort_by(|a, b| b.response.abs().total_cmp(&a.response.abs()));
    let largest = cands.iter().fold(0f64, |m, c| m.max(c.sigma));
    let cell = (std::f64::consts::SQRT_2 * largest).max(1.0);
    let key = |c: &Candidate| ((c.x / cell).floor() as i64, (c.y / cell).floor() as i64);
    let mut kept: Vec<Candidate> = Vec::with_capacity(cands.len());
    let mut index: HashMap<(i64, i64), Vec<usize>> = HashMap::new();
    for c in cands {
        let (kx, ky) = key(&c);
        let near = (kx - 1..=kx + 1)
            .flat_map(|i| (ky - 1..=ky + 1).map(move |j| (i, j)))
            .filter_map(|k| index.get(&k))
            .flatten()
            .any(|&k| {
                let o = &kept[k];
                let r = std::f64::consts::SQRT_2 * o.sigma.max(c.sigma);
                (o.x - c.x).powi(2) + (o.y - c.y).powi(2) < r * r
            });
        if !near {
            index.entry((kx, ky)).or_default().push(kept.len());
            kept.push(c);
        }
    }
    kept
}

/// The cell size (grid samples) of the selection for a `width × height` grid and a target.
pub fn cell_size(width: usize, height: usize, target: usize) -> f64 {
    let cells = (target as f64 / CELL_SHARE as f64).max(1.0);
    ((width * height) as f64 / cells).sqrt().max(1.0)
}

/// Keeps at most `target` candidates, spread over cells of side `cell` (grid samples), cell by
/// cell in rounds as the module doc says; the result is strongest first.
pub fn balanced(cands: Vec<Candidate>, cell: f64, target: usize) -> Vec<Candidate> {
    if cands.len() <= target {
        let mut all = cands;
        all.sort_by(|a, b| b.response.abs().total_cmp(&a.response.abs()));
        return all;
    }
    let mut cells: HashMap<(i64, i64), Vec<Candidate>> = HashMap::new();
    for c in cands {
        let k = ((c.x / cell).floor() as i64, (c.y / cell).floor() as i64);
        cells.entry(k).or_default().push(c);
    }
    let mut cells: Vec<Vec<Candidate>> = cells.into_values().collect();
    for c in &mut cells {
        // Weakest first, so that `pop` gives the strongest left.
        c.sort_by(|a, b| a.response.abs().total_cmp(&b.response.abs()));
    }
    let mut chosen = Vec::with_capacity(target);
    while chosen.len() < target {
        let mut round: Vec<Candidate> = cells.iter_mut().filter_map(|c| c.pop()).collect();
        round.sort_by(|a, b| b.response.abs().total_cmp(&a.response.abs()));
        round.truncate(target - chosen.len());
        chosen.extend(round);
    }
    chosen.sort_by(|a, b| b.response.abs().total_cmp(&a.response.abs()));
    chosen
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    fn cand(x: f64, y: f64, sigma: f64, response: f64) -> Candidate {
        Candidate {
            x,
            y,
            sigma,
            response,
        }
    }

    #[test]
    fn suppression_keeps_the_stronger_of_two_close_candidates() {
        let kept = suppress(vec![
            cand(10.0, 10.0, 2.0, 0.1),
            cand(11.0, 10.5, 2.5, -0.3),
            cand(30.0, 10.0, 2.0, 0.05),
        ]);
        assert_eq!(kept.len(), 2);
        assert_eq!(kept[0].response, -0.3);
        assert_eq!(kept[1].x, 30.0);
    }

    #[test]
    fn balanced_selection_is_spread_and_keeps_each_cells_strongest() {
        // 2000 candidates, 90 % of them crowded into one corner of a 400 × 400 grid.
        let mut rng = ChaCha8Rng::seed_from_u64(8);
        let cands: Vec<Candidate> = (0..2000)
            .map(|i| {
                let span = if i % 10 == 0 { 400.0 } else { 60.0 };
                cand(
                    rng.gen_range(0.0..span),
                    rng.gen_range(0.0..span),
                    2.0,
                    rng.gen_range(0.03..1.0) * if i % 3 == 0 { -1.0 } else { 1.0 },
                )
            })
            .collect();
        let target = 200;
        let cell = cell_size(400, 400, target);
        let key = |c: &Candidate| ((c.x / cell).floor() as i64, (c.y / cell).floor() as i64);
        let chosen = balanced(cands.clone(), cell, target);
        assert_eq!(chosen.len(), target);
        let mut per_cell: HashMap<(i64, i64), (usize, usize)> = HashMap::new();
        for c in &cands {
            per_cell.entry(key(c)).or_default().0 += 1;
        }
        for c in &chosen {
            per_cell.get_mut(&key(c)).unwrap().1 += 1;
        }
        // The share: the water level L at which every cell giving min(n, L) reaches the target.
        let level = (1..)
            .find(|&l| per_cell.values().map(|&(n, _)| n.min(l)).sum::<usize>() >= target)
            .unwrap();
        for &(n, k) in per_cell.values() {
            assert!(k <= level, "a cell gave {k} of {n} (share {level})");
            assert!(
                k >= n.min(level - 1),
                "a cell gave {k} of {n} (share {level})"
            );
        }
        // Within each cell the chosen are its strongest.
        for (k, &(_, taken)) in &per_cell {
            let mut all: Vec<f64> = cands
                .iter()
                .filter(|c| key(c) == *k)
                .map(|c| c.response.abs())
                .collect();
            all.sort_by(|a, b| b.total_cmp(a));
            let mut got: Vec<f64> = chosen
                .iter()
                .filter(|c| key(c) == *k)
                .map(|c| c.response.abs())
                .collect();
            got.sort_by(|a, b| b.total_cmp(a));
            assert_eq!(got, all[..taken].to_vec());
        }
        // Crowding is undone: the crowded corner holds most candidates, but not most of the
        // chosen.
        let corner = chosen.iter().filter(|c| c.x < 60.0 && c.y < 60.0).count();
        assert!(corner < target / 2, "{corner}");
        // Fewer candidates than the target: all of them, strongest first.
        let few = balanced(cands[..50].to_vec(), cell, target);
        assert_eq!(few.len(), 50);
        assert!(few
            .windows(2)
            .all(|p| p[0].response.abs() >= p[1].response.abs()));
    }
}
