//! The scale-normalised Laplacian over a band of scales, its extrema, and their sub-sample,
//! sub-scale positions.
//!
//! **In:** a [`Grid`] (normalised, with validity), the band's σ at its lowest level, the
//! levels per octave, the number of octaves, the blur already in the grid, and the thresholds.
//! **Out:** [`Candidate`]s in grid coordinates: position (sample index, sub-sample), level
//! (fractional), σ (grid samples) and the signed response.
//!
//! Level i has σ_i = σ_lo · 2^((i − 1)/S); levels 1 ..= n·S + 1 span the band and levels 0 and
//! n·S + 2 are there so that the band's ends can be extrema in scale too. Each level is the
//! grid blurred once, from the grid itself, to σ_i (less the blur already there), so that the
//! support of every level is one kernel. Its response is
//! D = −(2^(1/S) − 1) · σ_i² · ∇²L, with ∇² the five-point Laplacian: the scale-normalised
//! Laplacian of Lindeberg (IJCV 30(2), 1998), scaled to what Lowe's difference of Gaussians
//! between adjacent levels would give (IJCV 60(2), 2004: DoG ≈ (k − 1) σ² ∇²G, from memory),
//! so that Lowe's contrast threshold applies as published. Bright blobs respond positively,
//! dark ones negatively. Only three levels of response are kept at a time.

use super::gaussian::{blur, half_kernel};
use super::prepare::Grid;
use rayon::prelude::*;

/// A local extremum of the response, refined.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Candidate {
    /// Column, sample index in the grid (sub-sample).
    pub x: f64,
    /// Row, sample index in the grid (sub-sample).
    pub y: f64,
    /// σ in grid samples.
    pub sigma: f64,
    /// The interpolated response (positive: bright blob).
    pub response: f64,
}

/// What the extremum search needs besides the grid.
#[derive(Debug, Clone, Copy)]
pub struct Band {
    /// σ of level 1 (the band's lowest), grid samples.
    pub sigma_lo: f64,
    /// Levels per octave (S).
    pub per_octave: usize,
    /// Octaves the band spans.
    pub octaves: usize,
    /// Blur already in the grid (σ, grid samples).
    pub blur_in: f64,
    /// Smallest |response| kept, after interpolation.
    pub contrast: f64,
    /// Largest ratio of principal curvatures kept (Lowe's r).
    pub edge_ratio: f64,
}

impl Band {
    /// σ of level `i` (fractional levels allowed), grid samples.
    pub fn sigma(&self, level: f64) -> f64 {
        self.sigma_lo * 2f64.powf((level - 1.0) / self.per_octave as f64)
    }

    /// The half kernel that blurs the grid to level `i`.
    fn kernel(&self, level: usize) -> Vec<f32> {
        let s = self.sigma(level as f64);
        half_kernel((s * s - self.blur_in * self.blur_in).max(0.0).sqrt())
    }

    /// Half-width of the square around a sample whose response at levels up to `level`, and
    /// the finite differences of it, read only these samples of the grid.
    pub fn support(&self, level: usize) -> usize {
        self.kernel(level).len() - 1 + 2
    }
}

/// Finds and refines the extrema of the response within the band.
pub fn extrema(grid: &Grid, band: &Band) -> Vec<Candidate> {
    let (w, h) = (grid.width, grid.height);
    let last = band.octaves * band.per_octave + 2;
    let norm = 2f64.powf(1.0 / band.per_octave as f64) - 1.0;
    let (mut tmp, mut smooth) = (Vec::new(), Vec::new());
    let mut levels: Vec<Vec<f32>> = Vec::with_capacity(3);
    let mut found = Vec::new();
    for i in 0..=last {
        blur(&grid.values, w, h, &band.kernel(i), &mut tmp, &mut smooth);
        let mut d = if levels.len() == 3 {
            levels.remove(0)
        } else {
            Vec::new()
        };
        let s = band.sigma(i as f64);
        response(&smooth, w, h, (-norm * s * s) as f32, &mut d);
        levels.push(d);
        if levels.len() == 3 {
            found.extend(level_extrema(
                grid,
                band,
                [&levels[0], &levels[1], &levels[2]],
                i - 1,
            ));
        }
    }
    found
}

/// D = c · ∇²L (five-point stencil; zero on the grid's outermost samples).
fn response(smooth: &[f32], w: usize, h: usize, c: f32, out: &mut Vec<f32>) {
    out.resize(w * h, 0.0);
    out.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
        if y == 0 || y + 1 >= h || w < 3 {
            row.fill(0.0);
            return;
        }
        let (up, mid, down) = (
            &smooth[(y - 1) * w..y * w],
            &smooth[y * w..(y + 1) * w],
            &smooth[(y + 1) * w..(y + 2) * w],
        );
        row[0] = 0.0;
        row[w - 1] = 0.0;
        for x in 1..w - 1 {
            row[x] = c * (up[x] + down[x] + mid[x - 1] + mid[x + 1] - 4.0 * mid[x]);
        }
    });
}

/// The extrema at level `i` (the middle of `d`), refined and tested.
fn level_extrema(grid: &Grid, band: &Band, d: [&Vec<f32>; 3], i: usize) -> Vec<Candidate> {
    let (w, h) = (grid.width, grid.height);
    if !(1..=band.octaves * band.per_octave + 1).contains(&i) || w < 3 || h < 3 {
        return Vec::new();
    }
    let half = band.support(i + 1);
    let pre = (0.5 * band.contrast) as f32;
    (1..h - 1)
        .into_par_iter()
        .flat_map_iter(|y| {
            let mut out = Vec::new();
            for x in 1..w - 1 {
                let v = d[1][y * w + x];
                if v.abs() < pre || !is_extremum(d, w, x, y) || !grid.window_is_valid(x, y, half) {
                    continue;
                }
                if let Some(c) = refine(grid, band, d, x, y, i, half) {
                    out.push(c);
                }
            }
            out
        })
        .collect()
}

/// True when sample (x, y) of the middle level is above, or below, its 26 neighbours in space
/// and scale: strictly for the neighbours after it in (level, row, column) order, or equal for
/// those before it, so that of two equal neighbouring extrema (a blob exactly midway between
/// two samples) exactly one is kept.
fn is_extremum(d: [&Vec<f32>; 3], w: usize, x: usize, y: usize) -> bool {
    let v = d[1][y * w + x];
    let mut above = true;
    let mut below = true;
    for (l, level) in d.iter().enumerate() {
        for yy in y - 1..=y + 1 {
            for xx in x - 1..=x + 1 {
                let before = (l, yy, xx) < (1, y, x);
                if (l, yy, xx) == (1, y, x) {
                    continue;
                }
                let u = level[yy * w + xx];
                if before {
                    above &= v >= u;
                    below &= v <= u;
                } else {
                    above &= v > u;
                    below &= v < u;
                }
            }
        }
        if !above && !below {
            return false;
        }
    }
    above || below
}

/// The refinement moves to the next sample when the fitted peak is further than this from the
/// current one: a little over half a sample, so that a peak midway between two samples does
/// not send it back and forth.
const MOVE: f64 = 0.6;

/// Fits a quadratic in (x, y, level) to the 3 × 3 × 3 samples around (x, y, i), moving the
/// centre in x and y (at most five times) while the fitted peak is more than [`MOVE`] samples
/// away; keeps the peak when it converges, stays within a level of `i`, passes the contrast
/// test and the edge test (Lowe 2004: tr(H)²/det(H) < (r + 1)²/r on the 2 × 2 spatial Hessian),
/// and its square of half-width `half` holds valid samples only. The position is then taken
/// from [`peak_at_scale`] at the fitted level (the 3-D fit's own where that has none).
fn refine(
    grid: &Grid,
    band: &Band,
    d: [&Vec<f32>; 3],
    mut x: usize,
    mut y: usize,
    i: usize,
    half: usize,
) -> Option<Candidate> {
    let w = grid.width;
    for _ in 0..5 {
        let at = |l: usize, dx: isize, dy: isize| {
            f64::from(d[l][(y as isize + dy) as usize * w + (x as isize + dx) as usize])
        };
        let v = at(1, 0, 0);
        let g = [
            0.5 * (at(1, 1, 0) - at(1, -1, 0)),
            0.5 * (at(1, 0, 1) - at(1, 0, -1)),
            0.5 * (at(2, 0, 0) - at(0, 0, 0)),
        ];
        let dxx = at(1, 1, 0) + at(1, -1, 0) - 2.0 * v;
        let dyy = at(1, 0, 1) + at(1, 0, -1) - 2.0 * v;
        let dss = at(2, 0, 0) + at(0, 0, 0) - 2.0 * v;
        let dxy = 0.25 * (at(1, 1, 1) - at(1, -1, 1) - at(1, 1, -1) + at(1, -1, -1));
        let dxs = 0.25 * (at(2, 1, 0) - at(2, -1, 0) - at(0, 1, 0) + at(0, -1, 0));
        let dys = 0.25 * (at(2, 0, 1) - at(2, 0, -1) - at(0, 0, 1) + at(0, 0, -1));
        let hess = [[dxx, dxy, dxs], [dxy, dyy, dys], [dxs, dys, dss]];
        let step = solve3(hess, g)?;
        let off = [-step[0], -step[1], -step[2]];
        if off[0].abs() > MOVE || off[1].abs() > MOVE {
            // The peak is nearer another sample: move there and fit again.
            let nx = x as isize + off[0].round().clamp(-1.0, 1.0) as isize;
            let ny = y as isize + off[1].round().clamp(-1.0, 1.0) as isize;
            if nx < 1 || ny < 1 || nx as usize + 1 >= w || ny as usize + 1 >= grid.height {
                return None;
            }
            (x, y) = (nx as usize, ny as usize);
            if !grid.window_is_valid(x, y, half) {
                return None;
            }
            continue;
        }
        if off[2].abs() > 1.0 {
            return None;
        }
        let value = v + 0.5 * (g[0] * off[0] + g[1] * off[1] + g[2] * off[2]);
        if value.abs() < band.contrast || value.signum() != v.signum() {
            return None;
        }
        let (tr, det) = (dxx + dyy, dxx * dyy - dxy * dxy);
        let r = band.edge_ratio;
        if det <= 0.0 || tr * tr * r >= (r + 1.0) * (r + 1.0) * det {
            return None;
        }
        let [ox, oy] = peak_at_scale(d, w, x, y, off[2]).unwrap_or([off[0], off[1]]);
        return Some(Candidate {
            x: x as f64 + ox,
            y: y as f64 + oy,
            sigma: band.sigma(i as f64 + off[2]),
            response: value,
        });
    }
    None
}

/// The spatial peak near sample (x, y) at the fractional level `ds` from the middle one: the
/// 3 × 3 responses interpolated to that level (quadratic in level), then a quadratic fit to the
/// logarithm of their magnitudes, whose vertex is the peak of a Gaussian-shaped response
/// without the bias a fit to the values themselves has. `None` when the nine differ in sign or
/// the fit has no maximum within a sample.
fn peak_at_scale(d: [&Vec<f32>; 3], w: usize, x: usize, y: usize, ds: f64) -> Option<[f64; 2]> {
    let mut v = [[0f64; 3]; 3];
    for (j, row) in v.iter_mut().enumerate() {
        for (i, cell) in row.iter_mut().enumerate() {
            let k = (y + j - 1) * w + x + i - 1;
            let (lo, mid, hi) = (f64::from(d[0][k]), f64::from(d[1][k]), f64::from(d[2][k]));
            *cell = mid + 0.5 * ds * (hi - lo) + 0.5 * ds * ds * (hi + lo - 2.0 * mid);
        }
    }
    let sign = v[1][1].signum();
    let mut l = [[0f64; 3]; 3];
    for j in 0..3 {
        for i in 0..3 {
            let m = v[j][i] * sign;
            if m.is_nan() || m <= 0.0 {
                return None;
            }
            l[j][i] = m.ln();
        }
    }
    let gx = 0.5 * (l[1][2] - l[1][0]);
    let gy = 0.5 * (l[2][1] - l[0][1]);
    let hxx = l[1][2] + l[1][0] - 2.0 * l[1][1];
    let hyy = l[2][1] + l[0][1] - 2.0 * l[1][1];
    let hxy = 0.25 * (l[2][2] - l[2][0] - l[0][2] + l[0][0]);
    let det = hxx * hyy - hxy * hxy;
    if !(hxx < 0.0 && det > 0.0) {
        return None;
    }
    let ox = -(hyy * gx - hxy * gy) / det;
    let oy = -(hxx * gy - hxy * gx) / det;
    (ox.abs() <= 1.0 && oy.abs() <= 1.0).then_some([ox, oy])
}

/// Solves the symmetric 3 × 3 system `a · s = b` (Cramer's rule); `None` when `a` is
/// singular.
fn solve3(a: [[f64; 3]; 3], b: [f64; 3]) -> Option<[f64; 3]> {
    let det3 = |m: [[f64; 3]; 3]| {
        m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1])
            - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0])
            + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0])
    };
    let det = det3(a);
    let scale = a.iter().flatten().fold(0f64, |s, v| s.max(v.abs()));
    if !det.is_finite() || det.abs() <= 1e-12 * scale * scale * scale {
        return None;
    }
    let mut s = [0.0; 3];
    for (k, sk) in s.iter_mut().enumerate() {
        let mut m = a;
        for r in 0..3 {
            m[r][k] = b[r];
        }
        *sk = det3(m) / det;
    }
    Some(s)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn solve3_solves() {
        let a = [[4.0, 1.0, 0.5], [1.0, 3.0, -0.2], [0.5, -0.2, 2.0]];
        let x = [0.3, -1.2, 2.0];
        let b = [0, 1, 2].map(|r| (0..3).map(|c| a[r][c] * x[c]).sum::<f64>());
        let s = solve3(a, b).unwrap();
        for k in 0..3 {
            assert!((s[k] - x[k]).abs() < 1e-12);
        }
        assert!(solve3([[1.0, 2.0, 3.0], [2.0, 4.0, 6.0], [0.0, 0.0, 1.0]], b).is_none());
    }
}
