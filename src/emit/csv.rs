//! `control-points.csv` and landmark CSV files (RFC 4180 quoting).

use super::{io_err, EmitError};
use crate::fit::Solution;
use crate::ingest::LandmarkSet;
use crate::outcome::MatchOutcome;
use rayon::prelude::*;
use std::fmt::Write as _;
use std::io::Write;
use std::path::Path;

/// Rows of `control-points.csv` formatted at once before they are written.
const ROWS_PER_BLOCK: usize = 1 << 16;
/// Rows one task formats.
const ROWS_PER_TASK: usize = 2048;

/// Appends `v` with `decimals` digits after the point, exactly as `format!("{v:.decimals$}")`
/// does (the exact binary value rounded half to even), several times faster: the integer
/// arithmetic is used where the product `|v| * 10^decimals` cannot be on the other side of a
/// half than the exact one, and the standard formatting everywhere else (ties, large values,
/// NaN, infinities).
pub fn push_fixed(out: &mut String, v: f64, decimals: usize) {
    const POW10: [f64; 10] = [1.0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9];
    if v.is_finite() && decimals < POW10.len() {
        let scaled = v.abs() * POW10[decimals];
        // `scaled` is within half an ulp of the exact product; away from a half by more than
        // two ulps, rounding it gives the exact product's rounding.
        let ulp = f64::from_bits(scaled.to_bits() + 1) - scaled;
        let frac = scaled - scaled.floor();
        if scaled < (1u64 << 52) as f64 && (frac - 0.5).abs() > 2.0 * ulp {
            let n = scaled.round() as u64;
            let unit = 10u64.pow(decimals as u32);
            if v.is_sign_negative() {
                out.push('-');
            }
            let _ = write!(out, "{}", n / unit);
            if decimals > 0 {
                let _ = write!(out, ".{:0decimals$}", n % unit);
            }
            return;
        }
    }
    let _ = write!(out, "{v:.decimals$}");
}

/// Quotes a field when it holds a comma, quote or line break.
pub fn field(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    push_field(&mut out, s);
    out
}

/// Appends `s` as [`field`] quotes it.
fn push_field(out: &mut String, s: &str) {
    if s.contains([',', '"', '\n', '\r']) {
        out.push('"');
        out.push_str(&s.replace('"', "\"\""));
        out.push('"');
    } else {
        out.push_str(s);
    }
}

/// Digits after the point for coordinates: degrees need more than metres.
pub fn coordinate_decimals(geographic: bool) -> usize {
    if geographic {
        9
    } else {
        4
    }
}

/// The header of `control-points.csv`.
pub const HEADER: &str =
    "reference_id,target_id,reference_x,reference_y,target_x,target_y,residual_m,residual_dx_m,residual_dy_m";

/// The pairs in the order of their reference ids (byte order). Ids are unique in a survey, so
/// the unstable sort gives the one order there is. Each pair is sorted with its id's first
/// eight bytes as a number (zeros after a shorter id): two ids whose first bytes differ are in
/// the order of those numbers, so the ids themselves are compared only where they agree (a
/// fraction of the cache misses of comparing the strings every time).
fn by_reference_id(pairs: &[crate::fit::Pair], ids: &[String]) -> Vec<crate::fit::Pair> {
    let id_of = |p: &crate::fit::Pair| ids[p.reference as usize].as_bytes();
    let mut keyed: Vec<(u64, &crate::fit::Pair)> = pairs
        .iter()
        .map(|p| {
            let mut head = [0u8; 8];
            let id = id_of(p);
            let n = id.len().min(8);
            head[..n].copy_from_slice(&id[..n]);
            (u64::from_be_bytes(head), p)
        })
        .collect();
    keyed.par_sort_unstable_by(|a, b| a.0.cmp(&b.0).then_with(|| id_of(a.1).cmp(id_of(b.1))));
    keyed.into_iter().map(|(_, p)| *p).collect()
}

/// Writes `control-points.csv` (see the module doc of [`crate::emit`]).
pub fn write_control_points(
    result: &MatchOutcome,
    s: &Solution,
    path: &Path,
) -> Result<(), EmitError> {
    let f = std::fs::File::create(path).map_err(io_err(path))?;
    let mut w = std::io::BufWriter::new(f);
    let mpu = result.frame.metres_per_unit();
    let rd = coordinate_decimals(result.frame.reference_crs.geographic);
    let td = coordinate_decimals(
        result
            .frame
            .target_crs
            .as_ref()
            .is_some_and(|c| c.geographic),
    );
    // A raster target adds where each control point is on its pixels (GDAL's pixel/line,
    // full resolution) and, when refined there, the correlation and the shift it made.
    let to_pixel = result.target.raster.as_deref();
    let refined: Option<std::collections::HashMap<(u32, u32), crate::outcome::PointRefinement>> =
        result
            .pixels
            .as_ref()
            .filter(|p| p.not_applied.is_none())
            .map(|p| {
                s.pairs
                    .iter()
                    .zip(&p.per_point)
                    .map(|(pair, r)| ((pair.reference, pair.target), *r))
                    .collect()
            });
    let mut header = HEADER.to_string();
    if to_pixel.is_some() {
        header.push_str(",target_pixel,target_line");
    }
    if refined.is_some() {
        header.push_str(",correlation,refine_shift_m");
    }
    writeln!(w, "{header}").map_err(io_err(path))?;
    let pairs = by_reference_id(&s.pairs, &result.reference.ids);
    let row = |out: &mut String, p: &crate::fit::Pair| {
        let (ri, ti) = (p.reference as usize, p.target as usize);
        let r = result.reference.points[ri];
        let tp = result.target.points[ti];
        let m = s.map(result.frame.target[ti]);
        let rw = result.frame.reference[ri];
        let (dx, dy) = ((rw[0] - m[0]) * mpu, (rw[1] - m[1]) * mpu);
        push_field(out, &result.reference.ids[ri]);
        out.push(',');
        push_field(out, &result.target.ids[ti]);
        for (v, d) in [
            (r[0], rd),
            (r[1], rd),
            (tp[0], td),
            (tp[1], td),
            (dx.hypot(dy), 4),
            (dx, 4),
            (dy, 4),
        ] {
            out.push(',');
            push_fixed(out, v, d);
        }
        if let Some(g) = to_pixel {
            let [px, ln] = g.file_pixel(tp).unwrap_or([f64::NAN; 2]);
            for v in [px, ln] {
                out.push(',');
                push_fixed(out, v, 3);
            }
        }
        if let Some(r) = refined
            .as_ref()
            .and_then(|m| m.get(&(p.reference, p.target)))
        {
            for v in [r.correlation, r.shift_m] {
                out.push(',');
                push_fixed(out, v, 4);
            }
        }
        out.push('\n');
    };
    // Rows are formatted on every core, a block at a time (so that the text in memory stays
    // small), and written in their order.
    for block in pairs.chunks(ROWS_PER_BLOCK) {
        let texts: Vec<String> = block
            .par_chunks(ROWS_PER_TASK)
            .map(|rows| {
                let mut text = String::with_capacity(rows.len() * 96);
                for p in rows {
                    row(&mut text, p);
                }
                text
            })
            .collect();
        for text in &texts {
            w.write_all(text.as_bytes()).map_err(io_err(path))?;
        }
    }
    w.flush().map_err(io_err(path))?;
    Ok(())
}

/// Writes a landmark set as `id,x,y`.
pub fn write_landmarks(set: &LandmarkSet, path: &Path) -> Result<(), EmitError> {
    let f = std::fs::File::create(path).map_err(io_err(path))?;
    let mut w = std::io::BufWriter::new(f);
    writeln!(w, "id,x,y").map_err(io_err(path))?;
    for (id, p) in set.ids.iter().zip(&set.points) {
        writeln!(w, "{},{},{}", field(id), p[0], p[1]).map_err(io_err(path))?;
    }
    w.flush().map_err(io_err(path))?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use rand::{Rng, SeedableRng};

    /// The keyed sort gives the byte order of the ids: ids sharing their first eight bytes or
    /// more, ids that are prefixes of others, shorter than eight bytes, with multi-byte
    /// characters, and numbers of several lengths.
    #[test]
    fn pairs_come_in_the_byte_order_of_their_reference_ids() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(33);
        let stems = [
            "building-",
            "building-0",
            "b",
            "",
            "é",
            "éa",
            "Z",
            "12",
            "123456789",
        ];
        let mut ids: Vec<String> = Vec::new();
        for i in 0..3000 {
            let stem = stems[i % stems.len()];
            let id = match rng.gen_range(0..4) {
                0 => format!("{stem}{}", rng.gen_range(0..100_000)),
                1 => format!("{stem}{i}"),
                2 => format!("{}{stem}", rng.gen_range(0..1000)),
                _ => format!("{stem}{i:08}x"),
            };
            ids.push(id);
        }
        ids.sort();
        ids.dedup();
        // Shuffled pairs over the ids.
        let mut pairs: Vec<crate::fit::Pair> = (0..ids.len() as u32)
            .map(|i| crate::fit::Pair {
                reference: i,
                target: i * 7,
                residual: i as f64,
            })
            .collect();
        rand::seq::SliceRandom::shuffle(pairs.as_mut_slice(), &mut rng);
        let mut want = pairs.clone();
        want.sort_by(|a, b| ids[a.reference as usize].cmp(&ids[b.reference as usize]));
        let got = super::by_reference_id(&pairs, &ids);
        assert_eq!(got.len(), want.len());
        assert!(got
            .iter()
            .zip(&want)
            .all(|(g, w)| g.reference == w.reference));
        // Some ids share their first eight bytes (else the full comparison went untested).
        let shared = ids
            .windows(2)
            .filter(|w| {
                w[0].len() >= 8 && w[1].len() >= 8 && w[0].as_bytes()[..8] == w[1].as_bytes()[..8]
            })
            .count();
        assert!(shared > 100, "{shared}");
    }

    /// `push_fixed` against the standard formatting (the reference it must equal) on random
    /// values of every magnitude and sign, exact ties, near-ties and the special values.
    #[test]
    fn fixed_decimals_equal_the_standard_formatting() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(31);
        let mut values = vec![
            0.0,
            -0.0,
            0.125,
            -0.125,
            2.5,
            0.5,
            1e-300,
            -1e-9,
            4503599627370495.5,
            1e17,
            f64::NAN,
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::MAX,
            5_300_000.000_05,
            12.34565,
        ];
        for _ in 0..200_000 {
            let magnitude = 10f64.powi(rng.gen_range(-6..16));
            values.push(rng.gen_range(-1.0..1.0) * magnitude);
        }
        // Near-ties: halves at each precision, and their neighbours.
        for _ in 0..20_000 {
            let d = rng.gen_range(0..10);
            let k: i64 = rng.gen_range(-10_000_000..10_000_000);
            let half = (k as f64 + 0.5) / 10f64.powi(d);
            let up = f64::from_bits(half.to_bits() + 1);
            let down = f64::from_bits(half.to_bits() - 1);
            values.extend([half, up, down]);
        }
        for &v in &values {
            for d in 0..12 {
                let mut got = String::new();
                super::push_fixed(&mut got, v, d);
                assert_eq!(got, format!("{v:.d$}"), "{v:e} with {d} decimals");
            }
        }
    }

    #[test]
    fn quoting() {
        assert_eq!(super::field("a,b"), "\"a,b\"");
        assert_eq!(super::field("say \"x\""), "\"say \"\"x\"\"\"");
        assert_eq!(super::field("plain"), "plain");
    }
}
