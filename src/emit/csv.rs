//! `control-points.csv` and landmark CSV files (RFC 4180 quoting).

use super::{io_err, EmitError};
use crate::fit::Solution;
use crate::ingest::LandmarkSet;
use crate::outcome::MatchOutcome;
use std::io::Write;
use std::path::Path;

/// Quotes a field when it holds a comma, quote or line break.
pub fn field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
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
    let mut pairs = s.pairs.clone();
    pairs.sort_by(|a, b| {
        result.reference.ids[a.reference as usize].cmp(&result.reference.ids[b.reference as usize])
    });
    for p in &pairs {
        let (ri, ti) = (p.reference as usize, p.target as usize);
        let r = result.reference.points[ri];
        let tp = result.target.points[ti];
        let m = s.map(result.frame.target[ti]);
        let rw = result.frame.reference[ri];
        let (dx, dy) = ((rw[0] - m[0]) * mpu, (rw[1] - m[1]) * mpu);
        let mut extra = String::new();
        if let Some(g) = to_pixel {
            let [px, ln] = g.file_pixel(tp).unwrap_or([f64::NAN; 2]);
            extra.push_str(&format!(",{px:.3},{ln:.3}"));
        }
        if let Some(r) = refined
            .as_ref()
            .and_then(|m| m.get(&(p.reference, p.target)))
        {
            extra.push_str(&format!(",{:.4},{:.4}", r.correlation, r.shift_m));
        }
        writeln!(
            w,
            "{},{},{:.rd$},{:.rd$},{:.td$},{:.td$},{:.4},{:.4},{:.4}{extra}",
            field(&result.reference.ids[ri]),
            field(&result.target.ids[ti]),
            r[0],
            r[1],
            tp[0],
            tp[1],
            dx.hypot(dy),
            dx,
            dy
        )
        .map_err(io_err(path))?;
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
    #[test]
    fn quoting() {
        assert_eq!(super::field("a,b"), "\"a,b\"");
        assert_eq!(super::field("say \"x\""), "\"say \"\"x\"\"\"");
        assert_eq!(super::field("plain"), "plain");
    }
}
