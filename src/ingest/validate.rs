//! Checks on a [`LandmarkSet`] that make the rest of the pipeline meaningful.
//!
//! **In:** the landmarks of one layer as read. **Out:** `Ok(())`, or the first problem found,
//! naming the file and the layer: a non-finite coordinate, duplicated positions, or a set that
//! is all on one line.

use super::{IngestError, LandmarkSet};

/// Runs every check, in this order: coordinates finite, positions distinct, points spread over
/// an area.
pub(super) fn check(set: &LandmarkSet) -> Result<(), IngestError> {
    check_finite(set)?;
    check_duplicates(set)?;
    check_spread(set)?;
    Ok(())
}

/// Rejects the first landmark (in reading order) with a NaN or infinite coordinate.
fn check_finite(set: &LandmarkSet) -> Result<(), IngestError> {
    match set
        .points
        .iter()
        .position(|p| !(p[0].is_finite() && p[1].is_finite()))
    {
        Some(i) => Err(IngestError::NonFinite {
            path: set.source.clone(),
            layer: set.layer.clone(),
            id: set.ids[i].clone(),
            x: set.points[i][0],
            y: set.points[i][1],
        }),
        None => Ok(()),
    }
}

/// Rejects positions shared by two landmarks: counts them and names the pair that comes first
/// in reading order.
fn check_duplicates(set: &LandmarkSet) -> Result<(), IngestError> {
    let mut order: Vec<usize> = (0..set.points.len()).collect();
    let p = &set.points;
    order.sort_unstable_by(|&a, &b| {
        p[a][0]
            .total_cmp(&p[b][0])
            .then(p[a][1].total_cmp(&p[b][1]))
    });
    let dups: Vec<(usize, usize)> = order
        .windows(2)
        .filter(|w| p[w[0]] == p[w[1]])
        .map(|w| (w[0].min(w[1]), w[0].max(w[1])))
        .collect();
    if let Some(&(a, b)) = dups.iter().min() {
        return Err(IngestError::DuplicatePositions {
            path: set.source.clone(),
            layer: set.layer.clone(),
            count: dups.len(),
            first: set.ids[a].clone(),
            second: set.ids[b].clone(),
            x: p[a][0],
            y: p[a][1],
        });
    }
    Ok(())
}

/// Rejects a set whose points lie on one line: their spread across the principal axis of the
/// point cloud is at most 1e-9 of their spread along it. The spread is measured on the points
/// themselves (from a local origin): the covariance's smaller eigenvalue is no test, as rounding
/// leaves it near 1e-16 of the larger even for points exactly on a line at an angle.
fn check_spread(set: &LandmarkSet) -> Result<(), IngestError> {
    let collinear = || IngestError::Collinear {
        path: set.source.clone(),
        layer: set.layer.clone(),
        count: set.points.len(),
    };
    if set.points.len() < 3 {
        return Err(collinear());
    }
    let origin = set.points[0];
    let local: Vec<[f64; 2]> = set
        .points
        .iter()
        .map(|p| [p[0] - origin[0], p[1] - origin[1]])
        .collect();
    let n = local.len() as f64;
    let (mx, my) = local
        .iter()
        .fold((0.0, 0.0), |a, p| (a.0 + p[0] / n, a.1 + p[1] / n));
    let (mut sxx, mut syy, mut sxy) = (0.0, 0.0, 0.0);
    for p in &local {
        let (dx, dy) = (p[0] - mx, p[1] - my);
        sxx += dx * dx;
        syy += dy * dy;
        sxy += dx * dy;
    }
    let (sin, cos) = (0.5 * (2.0 * sxy).atan2(sxx - syy)).sin_cos();
    let range = |f: &dyn Fn(&[f64; 2]) -> f64| {
        let (lo, hi) = local
            .iter()
            .map(f)
            .fold((f64::INFINITY, f64::NEG_INFINITY), |a, v| {
                (a.0.min(v), a.1.max(v))
            });
        hi - lo
    };
    let along = range(&|p| cos * p[0] + sin * p[1]);
    let across = range(&|p| cos * p[1] - sin * p[0]);
    if across <= 1e-9 * along {
        return Err(collinear());
    }
    Ok(())
}
