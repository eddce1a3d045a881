//! The peak of a correlation surface: where it is to a fraction of a sample, and how clear it
//! is.
//!
//! **In:** a [`Surface`]. **Out:** a [`Peak`]: the whole-sample maximum, a sub-pixel offset
//! from a fit per axis through the maximum and its two neighbours ([`SubPixel`]), and the
//! [`Clarity`] figures the keep test reads.

use super::measure::Surface;
use serde::{Deserialize, Serialize};

/// How the sub-pixel offset of a peak is found from the maximum and its two neighbours on each
/// axis.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SubPixel {
    /// A parabola through the three values: δ = (c₋ − c₊) / (2(c₋ − 2c₀ + c₊)).
    Parabola,
    /// A Gaussian through the three values (a parabola through their logarithms); falls back to
    /// the parabola where a value is not positive.
    Gaussian,
}

/// How clear a correlation peak is: the figures the keep test compares with its thresholds.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Clarity {
    /// The surface's maximum (the measure's value at the best whole-sample shift).
    pub peak: f64,
    /// The highest other local maximum (no higher neighbour among the eight inside the search
    /// range; so a value rising towards the border counts) at least two samples (Chebyshev
    /// distance) from the best; −1 when there is none.
    pub second: f64,
    /// `peak / second` (infinite when `second` ≤ 0).
    pub ratio: f64,
    /// The smaller eigenvalue of the negated Hessian at the maximum (finite differences),
    /// divided by `peak`: how sharply the peak falls off in its flattest direction, per
    /// sample². Small on an edge (the aperture problem) or a flat patch.
    pub curvature: f64,
}

/// The maximum of a surface with its sub-pixel position and clarity.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Peak {
    /// The best whole-sample shift (dx, dy).
    pub whole: [i64; 2],
    /// The sub-pixel offset from `whole`, each in (−1, 1) (0 on an axis where the fit fails).
    pub fraction: [f64; 2],
    /// True when the best shift lies on the border of the search range (its true maximum may
    /// lie outside it).
    pub on_border: bool,
    /// The clarity figures.
    pub clarity: Clarity,
}

impl Peak {
    /// `whole + fraction`.
    pub fn shift(&self) -> [f64; 2] {
        [
            self.whole[0] as f64 + self.fraction[0],
            self.whole[1] as f64 + self.fraction[1],
        ]
    }
}

/// The offset of the vertex of the curve through (−1, a), (0, b), (1, c); 0 when the three do
/// not make a maximum.
fn vertex(a: f64, b: f64, c: f64) -> f64 {
    let d = a - 2.0 * b + c;
    if d < 0.0 {
        let v = 0.5 * (a - c) / d;
        if v.abs() < 1.0 {
            return v;
        }
    }
    0.0
}

fn fit(fit: SubPixel, a: f64, b: f64, c: f64) -> f64 {
    match fit {
        SubPixel::Gaussian if a > 0.0 && b > 0.0 && c > 0.0 => vertex(a.ln(), b.ln(), c.ln()),
        _ => vertex(a, b, c),
    }
}

/// Finds the peak of `surface` and its clarity. `None` when the surface has no finite value.
pub fn find_peak(surface: &Surface, sub: SubPixel) -> Option<Peak> {
    let s = surface.radius as i64;
    let side = surface.side();
    let best = (0..surface.values.len())
        .filter(|&i| surface.values[i].is_finite())
        .max_by(|&i, &j| surface.values[i].total_cmp(&surface.values[j]))?;
    let (bx, by) = ((best % side) as i64 - s, (best / side) as i64 - s);
    let c0 = surface.values[best];
    let on_border = bx.abs() == s || by.abs() == s;
    let v = |dx: i64, dy: i64| surface.at(bx + dx, by + dy);
    let mut fraction = [0.0; 2];
    let mut curvature = 0.0;
    if !on_border {
        let (l, r, u, d) = (
            v(-1, 0).unwrap(),
            v(1, 0).unwrap(),
            v(0, -1).unwrap(),
            v(0, 1).unwrap(),
        );
        fraction = [fit(sub, l, c0, r), fit(sub, u, c0, d)];
        let hxx = l - 2.0 * c0 + r;
        let hyy = u - 2.0 * c0 + d;
        let hxy =
            0.25 * (v(1, 1).unwrap() - v(1, -1).unwrap() - v(-1, 1).unwrap() + v(-1, -1).unwrap());
        // Eigenvalues of −H; the smaller one.
        let (m, q) = (
            -0.5 * (hxx + hyy),
            (0.25 * (hxx - hyy).powi(2) + hxy * hxy).sqrt(),
        );
        curvature = if c0 > 0.0 { (m - q) / c0 } else { 0.0 };
    }
    let mut second = f64::NEG_INFINITY;
    for (i, &val) in surface.values.iter().enumerate() {
        let (x, y) = ((i % side) as i64 - s, (i / side) as i64 - s);
        if (x - bx).abs().max((y - by).abs()) < 2 || !val.is_finite() || val <= second {
            continue;
        }
        let local_max = (-1..=1).all(|j| {
            (-1..=1)
                .all(|k| (j == 0 && k == 0) || surface.at(x + k, y + j).is_none_or(|w| w <= val))
        });
        if local_max {
            second = val;
        }
    }
    let second = if second.is_finite() { second } else { -1.0 };
    let ratio = if second > 0.0 {
        c0 / second
    } else {
        f64::INFINITY
    };
    Some(Peak {
        whole: [bx, by],
        fraction,
        on_border,
        clarity: Clarity {
            peak: c0,
            second,
            ratio,
            curvature,
        },
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn surface(s: usize, f: impl Fn(f64, f64) -> f64) -> Surface {
        let side = 2 * s + 1;
        let values = (0..side * side)
            .map(|i| f((i % side) as f64 - s as f64, (i / side) as f64 - s as f64))
            .collect();
        Surface { radius: s, values }
    }

    #[test]
    fn gaussian_fit_is_exact_on_a_gaussian_and_parabola_on_a_parabola() {
        let (x0, y0) = (1.3, -0.4);
        let g = surface(4, |x, y| {
            (-((x - x0).powi(2) + (y - y0).powi(2)) / 2.0).exp()
        });
        let p = find_peak(&g, SubPixel::Gaussian).unwrap();
        assert_eq!(p.whole, [1, 0]);
        assert!((p.shift()[0] - x0).abs() < 1e-9 && (p.shift()[1] - y0).abs() < 1e-9);
        let q = surface(4, |x, y| 10.0 - (x - x0).powi(2) - 2.0 * (y - y0).powi(2));
        let p = find_peak(&q, SubPixel::Parabola).unwrap();
        assert!((p.shift()[0] - x0).abs() < 1e-9 && (p.shift()[1] - y0).abs() < 1e-9);
        // −H = diag(2, 4); the smaller eigenvalue over the peak value.
        assert!((p.clarity.curvature - 2.0 / p.clarity.peak).abs() < 1e-9);
        assert!(!p.on_border);
    }

    #[test]
    fn second_peak_is_a_separate_local_maximum_not_the_shoulder() {
        // A broad main lobe at the origin and a smaller bump at (3, 3).
        let f = |x: f64, y: f64| {
            (-(x * x + y * y) / 8.0).exp() + 0.5 * (-((x - 3.0).powi(2) + (y - 3.0).powi(2))).exp()
        };
        let p = find_peak(&surface(5, f), SubPixel::Parabola).unwrap();
        assert_eq!(p.whole, [0, 0]);
        let bump = f(3.0, 3.0);
        assert!((p.clarity.second - bump).abs() < 1e-12, "{:?}", p.clarity);
        assert!((p.clarity.ratio - f(0.0, 0.0) / bump).abs() < 1e-9);
        // A ridge along x is nearly flat along it: the smaller eigenvalue is about 0.
        let ridge = find_peak(
            &surface(3, |x, y| 1.0 - y * y - 1e-4 * x * x),
            SubPixel::Parabola,
        );
        let ridge = ridge.unwrap();
        assert_eq!(ridge.whole, [0, 0]);
        assert!(ridge.clarity.curvature.abs() < 1e-3, "{:?}", ridge.clarity);
        // The maximum on the border is flagged.
        let edge = find_peak(&surface(3, |x, _| x), SubPixel::Parabola).unwrap();
        assert!(edge.on_border);
    }
}
