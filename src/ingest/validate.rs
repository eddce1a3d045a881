//! Checks on a [`LandmarkSet`] that make the rest of the pipeline meaningful.
//!
//! **In:** the landmarks of one layer as read, and the id field they were read from. **Out:**
//! `Ok(())`, or the first problem found, naming the file and the layer: repeated ids, a
//! position outside the coordinate range, fewer than [`MIN_LANDMARKS`] landmarks, duplicated
//! positions, or a set that is all on one line.

use super::{IngestError, LandmarkSet, COORDINATE_LIMIT, MIN_LANDMARKS};
use std::collections::HashMap;

/// Runs every check, in this order: ids distinct, coordinates in range, enough landmarks,
/// positions distinct, points spread over an area. `id_field` is the field the ids came from
/// (`None`: feature ids).
pub(super) fn check(set: &LandmarkSet, id_field: Option<&str>) -> Result<(), IngestError> {
    check_ids(set, id_field)?;
    check_range(set)?;
    if set.points.len() < MIN_LANDMARKS {
        return Err(IngestError::TooFewLandmarks {
            path: set.source.clone(),
            layer: set.layer.clone(),
            count: set.points.len(),
        });
    }
    check_duplicates(set)?;
    check_spread(set)?;
    Ok(())
}

/// Whether both coordinates are finite and within ±[`COORDINATE_LIMIT`].
pub(super) fn in_range(p: [f64; 2]) -> bool {
    p.iter().all(|v| v.abs() <= COORDINATE_LIMIT)
}

/// How many example values a repeated-id message shows.
const EXAMPLES: usize = 3;

/// Rejects ids that occur more than once: counts the values that repeat and shows the
/// [`EXAMPLES`] most frequent (ties in reading order) with their counts.
///
/// Ids that are all integers written the one way Rust and GDAL print them (feature ids,
/// integer fields) are the same text exactly when they are the same number, so they are
/// compared as numbers, sorted on the cores; any other ids through a hash map.
fn check_ids(set: &LandmarkSet, id_field: Option<&str>) -> Result<(), IngestError> {
    // Per repeated value: (value, count, first position).
    let mut repeated: Vec<(&str, usize, usize)> = match integer_ids(&set.ids) {
        Some(mut numbers) => {
            use rayon::slice::ParallelSliceMut;
            numbers.par_sort_unstable();
            numbers
                .chunk_by(|a, b| a.0 == b.0)
                .filter(|run| run.len() > 1)
                .map(|run| {
                    let first = run[0].1 as usize;
                    (set.ids[first].as_str(), run.len(), first)
                })
                .collect()
        }
        None => {
            let mut seen: HashMap<&str, (usize, usize)> = HashMap::with_capacity(set.ids.len());
            for (i, id) in set.ids.iter().enumerate() {
                seen.entry(id.as_str()).or_insert((0, i)).0 += 1;
            }
            seen.into_iter()
                .filter(|(_, (n, _))| *n > 1)
                .map(|(id, (n, first))| (id, n, first))
                .collect()
        }
    };
    if repeated.is_empty() {
        return Ok(());
    }
    repeated.sort_by(|a, b| b.1.cmp(&a.1).then(a.2.cmp(&b.2)));
    let mut examples: Vec<String> = repeated
        .iter()
        .take(EXAMPLES)
        .map(|(id, n, _)| format!("'{id}' {n} times"))
        .collect();
    if repeated.len() > EXAMPLES {
        examples.push("…".into());
    }
    Err(IngestError::DuplicateIds {
        path: set.source.clone(),
        layer: set.layer.clone(),
        field: id_field.unwrap_or("feature id").to_string(),
        repeated: repeated.len(),
        examples: examples.join(", "),
    })
}

/// Every id as (number, position) when all are integers in canonical decimal form (an
/// optional minus, no leading zero, not "-0", within i64); else `None`.
fn integer_ids(ids: &[String]) -> Option<Vec<(i64, u32)>> {
    let number = |s: &str| -> Option<i64> {
        let digits = s.strip_prefix('-').unwrap_or(s);
        let canonical = !digits.is_empty()
            && digits.bytes().all(|b| b.is_ascii_digit())
            && (digits == "0" || !digits.starts_with('0'))
            && s != "-0";
        if canonical {
            s.parse().ok()
        } else {
            None
        }
    };
    if ids.len() > u32::MAX as usize {
        return None;
    }
    ids.iter()
        .enumerate()
        .map(|(i, s)| number(s).map(|v| (v, i as u32)))
        .collect()
}

/// Rejects the first landmark (in reading order) outside the coordinate range. (The reader
/// refuses such a feature already, naming its feature id; this keeps the promise for any set.)
fn check_range(set: &LandmarkSet) -> Result<(), IngestError> {
    match set.points.iter().position(|p| !in_range(*p)) {
        Some(i) => Err(IngestError::OutOfRange {
            path: set.source.clone(),
            layer: set.layer.clone(),
            id: set.ids[i].clone(),
            fid: format!("number {}", i + 1),
            x: set.points[i][0],
            y: set.points[i][1],
        }),
        None => Ok(()),
    }
}

/// Rejects positions shared by two landmarks: counts them and names the pair that comes first
/// in reading order.
fn check_duplicates(set: &LandmarkSet) -> Result<(), IngestError> {
    use rayon::slice::ParallelSliceMut;
    let p = &set.points;
    // Sorted by position (in `f64::total_cmp`'s order, as integer keys; -0 counts as 0), then
    // by reading order: equal positions end up next to each other, earliest first.
    let key = |v: f64| crate::spatial::total_order_bits(v + 0.0);
    let mut order: Vec<(u64, u64, usize)> = p
        .iter()
        .enumerate()
        .map(|(i, q)| (key(q[0]), key(q[1]), i))
        .collect();
    order.par_sort_unstable();
    let dups: Vec<(usize, usize)> = order
        .windows(2)
        .filter(|w| (w[0].0, w[0].1) == (w[1].0, w[1].1))
        .map(|w| (w[0].2, w[1].2))
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
/// leaves it near 1e-16 of the larger even for points exactly on a line at an angle. Needs at
/// least [`MIN_LANDMARKS`] points within the coordinate range (checked before), so that no sum
/// overflows.
fn check_spread(set: &LandmarkSet) -> Result<(), IngestError> {
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
        return Err(IngestError::Collinear {
            path: set.source.clone(),
            layer: set.layer.clone(),
            count: set.points.len(),
        });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn set(points: Vec<[f64; 2]>) -> LandmarkSet {
        LandmarkSet {
            source: "survey.gpkg".into(),
            layer: "buildings".into(),
            ids: (0..points.len()).map(|i| format!("b{i}")).collect(),
            points,
            crs_wkt: None,
            skipped: Default::default(),
            raster: None,
        }
    }

    fn with_ids(ids: &[&str]) -> LandmarkSet {
        let mut s = set((0..ids.len()).map(|i| [i as f64, (i * i) as f64]).collect());
        s.ids = ids.iter().map(|v| v.to_string()).collect();
        s
    }

    /// Repeated ids: the same message whether the ids are compared as numbers or as text,
    /// most frequent first, ties in reading order; numbers only when written canonically.
    #[test]
    fn repeated_ids_are_named_alike_as_numbers_and_as_text() {
        let numbers = ["7", "-3", "12", "7", "0", "12", "7", "-3", "5"];
        let texts = ["g", "c", "b", "g", "a", "b", "g", "c", "e"];
        let message = |ids: &[&str]| match check_ids(&with_ids(ids), Some("id")) {
            Err(IngestError::DuplicateIds {
                repeated, examples, ..
            }) => (repeated, examples),
            other => panic!("repeats not found: {other:?}"),
        };
        assert!(integer_ids(&with_ids(&numbers).ids).is_some());
        assert!(integer_ids(&with_ids(&texts).ids).is_none());
        let (n, shown) = message(&numbers);
        assert_eq!(
            (n, shown.as_str()),
            (3, "'7' 3 times, '-3' 2 times, '12' 2 times")
        );
        let (n, shown) = message(&texts);
        assert_eq!(
            (n, shown.as_str()),
            (3, "'g' 3 times, 'c' 2 times, 'b' 2 times")
        );
        // "07" and "7", "-0" and "0", "+5" and "5" are different ids: compared as text.
        for ids in [["07", "7"], ["-0", "0"], ["+5", "5"], ["00", "0"]] {
            assert!(integer_ids(&with_ids(&ids).ids).is_none(), "{ids:?}");
            assert!(check_ids(&with_ids(&ids), None).is_ok(), "{ids:?}");
        }
        // Beyond i64: text.
        assert!(integer_ids(&with_ids(&["9223372036854775808"]).ids).is_none());
        assert!(check_ids(
            &with_ids(&["-9223372036854775808", "9223372036854775807"]),
            None
        )
        .is_ok());
        // Four repeated values: three shown, then an ellipsis.
        let (n, shown) = message(&["1", "1", "2", "2", "3", "3", "4", "4"]);
        assert_eq!(
            (n, shown.as_str()),
            (4, "'1' 2 times, '2' 2 times, '3' 2 times, …")
        );
    }

    /// Shared positions are counted once per extra landmark and the earliest pair in reading
    /// order is named; -0 and 0 are one position.
    #[test]
    fn duplicates_name_the_earliest_pair() {
        let mut points: Vec<[f64; 2]> = (0..20).map(|i| [i as f64, (i * i) as f64]).collect();
        points[17] = [5.0, 25.0];
        points[9] = [5.0, 25.0];
        points[12] = [-0.0, 0.0];
        match check_duplicates(&set(points)) {
            Err(IngestError::DuplicatePositions {
                count,
                first,
                second,
                ..
            }) => {
                assert_eq!(count, 3);
                assert_eq!((first.as_str(), second.as_str()), ("b0", "b12"));
            }
            other => panic!("duplicates not found: {other:?}"),
        }
        let distinct: Vec<[f64; 2]> = (0..20).map(|i| [i as f64, 0.5]).collect();
        assert!(check_duplicates(&set(distinct)).is_ok());
    }
}
