//! Transform models beyond the similarity, fitted on the same control points, and whether the
//! data warrant them.
//!
//! **In:** the control points' positions in the working frame (target `from`, reference `to`),
//! the similarity fitted on them, and the [`Model`] asked for (`fit.model`).
//! **Out:** a [`Comparison`]: each model's least-squares fit ([`ModelFit`]: coefficients,
//! residuals, RMSE, parameter count), the nested-model F tests of each richer model against the
//! next simpler one ([`NestedTest`]), and the model asked for. Nothing switches on its own: the
//! tests are reported, the model written is the one asked for.
//!
//! Models (target working (x, y) → reference working (x', y')):
//! - similarity, 4 parameters ([`super::similarity`]);
//! - affine, 6 parameters: x' = a₀ + a₁u + a₂v, y' = b₀ + b₁u + b₂v;
//! - second-order polynomial, 12 parameters: x' = a₀ + a₁u + a₂v + a₃u² + a₄uv + a₅v², y' alike;
//! - thin-plate spline (`tps`, raster targets only): through every control point exactly, used
//!   by the warp (GDAL's thin-plate spline); not fitted here, since its residuals at the control
//!   points are zero by construction and say nothing.
//!
//! with u = (x − x₀)/k, v = (y − y₀)/k, (x₀, y₀) the control points' target centroid and k their
//! RMS distance from it: centred and scaled so that the normal equations stay well conditioned
//! for coordinates of hundreds of kilometres.
//!
//! The test: with N = 2n observations (two coordinates per control point), RSS_s and RSS_r the
//! residual sums of squares of the simpler and the richer model with p_s < p_r parameters,
//! F = ((RSS_s − RSS_r)/(p_r − p_s)) / (RSS_r/(N − p_r)) follows the F distribution with
//! (p_r − p_s, N − p_r) degrees of freedom when the simpler model is true and the coordinate
//! errors are independent and normal with one σ. The richer model is warranted when the
//! probability of an F this large by chance is below 5%. This is the extra-sum-of-squares
//! (nested-model) F test of linear regression: NIST/SEMATECH e-Handbook of Statistical Methods,
//! section 4.4.4 ("How can I tell if a model fits my data?") and the lack-of-fit F test of
//! section 4.6.1.5, and Draper & Smith, *Applied Regression Analysis*, 3rd ed. (1998), "extra
//! sum of squares" (from memory). The F distribution's tail is the regularised incomplete beta
//! function, evaluated by its continued fraction (DLMF 8.17.22).

use super::similarity::Similarity;
use serde::{Deserialize, Serialize};

/// The transform model written (`fit.model`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Model {
    /// Shift, rotation, one scale: 4 parameters.
    #[default]
    Similarity,
    /// Shift and a general linear map (two scales, rotation, shear): 6 parameters.
    Affine,
    /// Second-order polynomial in each coordinate: 12 parameters.
    Polynomial2,
    /// Thin-plate spline through every control point: the warp of a raster target only.
    Tps,
}

impl Model {
    /// Every model, simplest first.
    pub const ALL: [Model; 4] = [
        Model::Similarity,
        Model::Affine,
        Model::Polynomial2,
        Model::Tps,
    ];

    /// The name in pipeline files and on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Model::Similarity => "similarity",
            Model::Affine => "affine",
            Model::Polynomial2 => "polynomial2",
            Model::Tps => "tps",
        }
    }

    /// Parameters of the least-squares model (`None` for the spline, which interpolates).
    pub fn parameters(self) -> Option<usize> {
        match self {
            Model::Similarity => Some(4),
            Model::Affine => Some(6),
            Model::Polynomial2 => Some(12),
            Model::Tps => None,
        }
    }

    /// Fewest control points that leave the model's residuals some freedom (N − p ≥ 2).
    pub fn min_control_points(self) -> usize {
        match self.parameters() {
            Some(p) => p / 2 + 1,
            None => 3,
        }
    }
}

impl std::fmt::Display for Model {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// Level of the tests: a richer model is warranted when chance would give its residual
/// reduction with a probability below this.
pub const LEVEL: f64 = 0.05;

/// A model fitted by least squares on the control points.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ModelFit {
    /// Which model.
    pub model: Model,
    /// Its parameters.
    pub parameters: usize,
    /// Control points it was fitted on.
    pub n: usize,
    /// Centre (x₀, y₀) of the normalised target coordinates, working units (module doc).
    pub centre: [f64; 2],
    /// Length k of the normalisation, working units.
    pub scale_length: f64,
    /// Coefficients of x' on the basis 1, u, v (, u², uv, v²); for the similarity: a, b, tx,
    /// ty of [`Similarity`] (raw working coordinates).
    pub x_coefficients: Vec<f64>,
    /// Coefficients of y' (empty for the similarity).
    pub y_coefficients: Vec<f64>,
    /// Residual sum of squares, working units squared.
    pub ssr: f64,
    /// RMS of the 2-D residual lengths, working units.
    pub rmse: f64,
    /// σ̂ = √(SSR / (2n − p)) per coordinate, working units.
    pub sigma: f64,
    /// Residuals reference − mapped target (dx, dy), working units, in the control points'
    /// order.
    #[serde(skip)]
    pub residuals: Vec<[f64; 2]>,
}

impl ModelFit {
    /// Maps a target working point to the reference working frame.
    pub fn apply(&self, p: [f64; 2]) -> [f64; 2] {
        if self.model == Model::Similarity {
            let c = &self.x_coefficients;
            return Similarity {
                a: c[0],
                b: c[1],
                tx: c[2],
                ty: c[3],
            }
            .apply(p);
        }
        let phi = basis(self.model, self.normalise(p));
        let dot = |c: &[f64]| c.iter().zip(&phi).map(|(a, b)| a * b).sum::<f64>();
        [dot(&self.x_coefficients), dot(&self.y_coefficients)]
    }

    fn normalise(&self, p: [f64; 2]) -> [f64; 2] {
        [
            (p[0] - self.centre[0]) / self.scale_length,
            (p[1] - self.centre[1]) / self.scale_length,
        ]
    }
}

/// A richer model tested against a simpler one it contains.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct NestedTest {
    /// The simpler model.
    pub simpler: Model,
    /// The richer one.
    pub richer: Model,
    /// The F statistic (module doc).
    pub f: f64,
    /// Numerator degrees of freedom: the parameters spent, p_r − p_s.
    pub df1: usize,
    /// Denominator degrees of freedom: N − p_r.
    pub df2: usize,
    /// Probability of an F at least this large when the simpler model is true.
    pub p_value: f64,
    /// `p_value` < [`LEVEL`]: the residual reduction is worth the parameters.
    pub warranted: bool,
}

/// Every model on the same control points, the tests between them, and the model asked for.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Comparison {
    /// The model written (`fit.model`).
    pub chosen: Model,
    /// Similarity, affine and second-order polynomial, those with enough control points.
    pub fits: Vec<ModelFit>,
    /// Affine against similarity, polynomial against affine (where both were fitted).
    pub tests: Vec<NestedTest>,
    /// The level of the tests.
    pub level: f64,
}

impl Comparison {
    /// The fit of `model`, if it was fitted.
    pub fn fit(&self, model: Model) -> Option<&ModelFit> {
        self.fits.iter().find(|f| f.model == model)
    }

    /// The fit whose residuals the outputs give: the chosen model's, the similarity's for the
    /// spline (which meets every control point exactly) or when the chosen one could not be
    /// fitted.
    pub fn written(&self) -> &ModelFit {
        self.fit(self.chosen).unwrap_or(&self.fits[0])
    }

    /// The test of `richer` against the next simpler model.
    pub fn test(&self, richer: Model) -> Option<&NestedTest> {
        self.tests.iter().find(|t| t.richer == richer)
    }
}

/// Fits every least-squares model on the control points `from[i]` → `to[i]` (working frame),
/// the similarity being `similarity` (fitted on the same points), and tests each richer model
/// against the next simpler one.
pub fn compare(
    from: &[[f64; 2]],
    to: &[[f64; 2]],
    similarity: &Similarity,
    chosen: Model,
) -> Comparison {
    // The three fits are independent: taken at once, kept in this order.
    let (similarity, (affine, polynomial)) = rayon::join(
        || similarity_fit(from, to, similarity),
        || {
            rayon::join(
                || fit_model(Model::Affine, from, to),
                || fit_model(Model::Polynomial2, from, to),
            )
        },
    );
    let mut fits = vec![similarity];
    fits.extend(affine);
    fits.extend(polynomial);
    let tests = fits.windows(2).map(|w| nested_test(&w[0], &w[1])).collect();
    Comparison {
        chosen,
        fits,
        tests,
        level: LEVEL,
    }
}

/// The similarity as a [`ModelFit`].
fn similarity_fit(from: &[[f64; 2]], to: &[[f64; 2]], s: &Similarity) -> ModelFit {
    let residuals: Vec<[f64; 2]> = from
        .iter()
        .zip(to)
        .map(|(&p, q)| {
            let m = s.apply(p);
            [q[0] - m[0], q[1] - m[1]]
        })
        .collect();
    finish(
        Model::Similarity,
        [0.0, 0.0],
        1.0,
        vec![s.a, s.b, s.tx, s.ty],
        Vec::new(),
        residuals,
    )
}

fn finish(
    model: Model,
    centre: [f64; 2],
    scale_length: f64,
    x_coefficients: Vec<f64>,
    y_coefficients: Vec<f64>,
    residuals: Vec<[f64; 2]>,
) -> ModelFit {
    let n = residuals.len();
    let parameters = model.parameters().unwrap_or(0);
    let ssr: f64 = residuals.iter().map(|r| r[0] * r[0] + r[1] * r[1]).sum();
    let dof = (2 * n).saturating_sub(parameters);
    ModelFit {
        model,
        parameters,
        n,
        centre,
        scale_length,
        x_coefficients,
        y_coefficients,
        ssr,
        rmse: (ssr / n.max(1) as f64).sqrt(),
        sigma: if dof > 0 {
            (ssr / dof as f64).sqrt()
        } else {
            f64::NAN
        },
        residuals,
    }
}

/// The basis functions of a polynomial model at normalised (u, v): the affine model's three
/// (then zeros), or the second-order polynomial's six. A fixed array, not a vector: the fits
/// take it for every control point (661,878 heap blocks at 1M + 1M before).
fn basis(model: Model, [u, v]: [f64; 2]) -> [f64; 6] {
    match model {
        Model::Affine => [1.0, u, v, 0.0, 0.0, 0.0],
        _ => [1.0, u, v, u * u, u * v, v * v],
    }
}

/// The affine or second-order polynomial by least squares; `None` with too few control points
/// or when they do not determine it (all on a line, or on a conic for the polynomial).
pub fn fit_model(model: Model, from: &[[f64; 2]], to: &[[f64; 2]]) -> Option<ModelFit> {
    if !matches!(model, Model::Affine | Model::Polynomial2) {
        return None;
    }
    let n = from.len();
    if n < model.min_control_points() || to.len() != n {
        return None;
    }
    let mean = |pts: &[[f64; 2]]| {
        pts.iter().fold([0.0, 0.0], |a, p| {
            [a[0] + p[0] / n as f64, a[1] + p[1] / n as f64]
        })
    };
    let (c, d) = (mean(from), mean(to));
    let k = (from
        .iter()
        .map(|p| (p[0] - c[0]).powi(2) + (p[1] - c[1]).powi(2))
        .sum::<f64>()
        / n as f64)
        .sqrt();
    if !(k > 0.0 && k.is_finite()) {
        return None;
    }
    let m = if model == Model::Affine { 3 } else { 6 };
    // Normal equations AᵀA c = Aᵀb for both coordinates (one design matrix), the outputs
    // centred on their mean too.
    let mut ata = vec![0.0; m * m];
    let mut atb = [vec![0.0; m], vec![0.0; m]];
    let phis: Vec<[f64; 6]> = from
        .iter()
        .map(|p| basis(model, [(p[0] - c[0]) / k, (p[1] - c[1]) / k]))
        .collect();
    for (phi, q) in phis.iter().zip(to) {
        let out = [q[0] - d[0], q[1] - d[1]];
        for i in 0..m {
            for j in 0..m {
                ata[i * m + j] += phi[i] * phi[j];
            }
            for (axis, rhs) in atb.iter_mut().enumerate() {
                rhs[i] += phi[i] * out[axis];
            }
        }
    }
    let mut cx = solve(ata.clone(), atb[0].clone(), m)?;
    let mut cy = solve(ata, atb[1].clone(), m)?;
    cx[0] += d[0];
    cy[0] += d[1];
    let dot = |coef: &[f64], phi: &[f64; 6]| coef.iter().zip(phi).map(|(a, b)| a * b).sum::<f64>();
    let residuals = phis
        .iter()
        .zip(to)
        .map(|(phi, q)| [q[0] - dot(&cx, phi), q[1] - dot(&cy, phi)])
        .collect();
    Some(finish(model, c, k, cx, cy, residuals))
}

/// Solves the symmetric system `a x = b` (m × m, row-major) by Gaussian elimination with
/// partial pivoting; `None` when it is singular to working precision.
fn solve(mut a: Vec<f64>, mut b: Vec<f64>, m: usize) -> Option<Vec<f64>> {
    let scale = a.iter().fold(0.0f64, |s, v| s.max(v.abs()));
    for col in 0..m {
        let pivot =
            (col..m).max_by(|&i, &j| a[i * m + col].abs().total_cmp(&a[j * m + col].abs()))?;
        if a[pivot * m + col].abs() <= 1e-12 * scale {
            return None;
        }
        if pivot != col {
            for j in 0..m {
                a.swap(pivot * m + j, col * m + j);
            }
            b.swap(pivot, col);
        }
        for i in col + 1..m {
            let f = a[i * m + col] / a[col * m + col];
            for j in col..m {
                a[i * m + j] -= f * a[col * m + j];
            }
            b[i] -= f * b[col];
        }
    }
    let mut x = vec![0.0; m];
    for i in (0..m).rev() {
        let s: f64 = (i + 1..m).map(|j| a[i * m + j] * x[j]).sum();
        x[i] = (b[i] - s) / a[i * m + i];
    }
    x.iter().all(|v| v.is_finite()).then_some(x)
}

/// The F test of `richer` against `simpler`, fitted on the same control points.
pub fn nested_test(simpler: &ModelFit, richer: &ModelFit) -> NestedTest {
    let df1 = richer.parameters - simpler.parameters;
    let df2 = (2 * richer.n).saturating_sub(richer.parameters);
    let reduction = (simpler.ssr - richer.ssr).max(0.0);
    let f = if df2 == 0 {
        f64::NAN
    } else if richer.ssr > 0.0 {
        (reduction / df1 as f64) / (richer.ssr / df2 as f64)
    } else if reduction > 0.0 {
        f64::INFINITY
    } else {
        f64::NAN
    };
    let p_value = if f.is_nan() {
        1.0
    } else {
        f_upper_tail(f, df1 as f64, df2 as f64)
    };
    NestedTest {
        simpler: simpler.model,
        richer: richer.model,
        f,
        df1,
        df2,
        p_value,
        warranted: p_value < LEVEL,
    }
}

/// P(F > f) for the F distribution with (d1, d2) degrees of freedom: the regularised
/// incomplete beta I_x(d2/2, d1/2) at x = d2 / (d2 + d1·f).
pub fn f_upper_tail(f: f64, d1: f64, d2: f64) -> f64 {
    if f <= 0.0 {
        return 1.0;
    }
    if f.is_infinite() {
        return 0.0;
    }
    regularized_beta(d2 / (d2 + d1 * f), d2 / 2.0, d1 / 2.0)
}

/// ln Γ(z) for z > 0: the recurrence up to z ≥ 10, then Stirling's series (terms to z⁻⁷).
fn ln_gamma(z: f64) -> f64 {
    let mut z = z;
    let mut shift = 0.0;
    while z < 10.0 {
        shift -= z.ln();
        z += 1.0;
    }
    let z2 = z * z;
    shift + (z - 0.5) * z.ln() - z + 0.5 * (2.0 * std::f64::consts::PI).ln() + 1.0 / (12.0 * z)
        - 1.0 / (360.0 * z * z2)
        + 1.0 / (1260.0 * z * z2 * z2)
        - 1.0 / (1680.0 * z * z2 * z2 * z2)
}

/// The regularised incomplete beta function I_x(a, b), by the continued fraction of DLMF
/// 8.17.22 (evaluated with the modified Lentz method) on the side of x where it converges fast.
fn regularized_beta(x: f64, a: f64, b: f64) -> f64 {
    if x <= 0.0 {
        return 0.0;
    }
    if x >= 1.0 {
        return 1.0;
    }
    if x > (a + 1.0) / (a + b + 2.0) {
        return 1.0 - regularized_beta(1.0 - x, b, a);
    }
    let front =
        (a * x.ln() + b * (1.0 - x).ln() - (ln_gamma(a) + ln_gamma(b) - ln_gamma(a + b))).exp() / a;
    // K = 1 + d1 / (1 + d2 / (1 + …)), with d_{2m+1} = −(a+m)(a+b+m)x / ((a+2m)(a+2m+1))
    // and d_{2m} = m(b−m)x / ((a+2m−1)(a+2m)); I_x(a, b) = front / K.
    let tiny = 1e-300;
    let (mut k, mut c, mut d) = (1.0, 1.0, 0.0);
    for j in 1..10_000 {
        let m = (j / 2) as f64;
        let dj = if j % 2 == 0 {
            m * (b - m) * x / ((a + 2.0 * m - 1.0) * (a + 2.0 * m))
        } else {
            -(a + m) * (a + b + m) * x / ((a + 2.0 * m) * (a + 2.0 * m + 1.0))
        };
        d = 1.0 + dj * d;
        if d.abs() < tiny {
            d = tiny;
        }
        c = 1.0 + dj / c;
        if c.abs() < tiny {
            c = tiny;
        }
        d = 1.0 / d;
        let step = c * d;
        k *= step;
        if (step - 1.0).abs() < 1e-15 {
            break;
        }
    }
    front / k
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_distr::{Distribution, Normal, Uniform};

    /// `n` target points spread over a 1 km square at UTM-sized coordinates.
    fn points(n: usize, rng: &mut rand_chacha::ChaCha8Rng) -> Vec<[f64; 2]> {
        let u = Uniform::new(0.0, 1000.0);
        (0..n)
            .map(|_| [455_000.0 + u.sample(rng), 5_209_000.0 + u.sample(rng)])
            .collect()
    }

    fn similarity() -> Similarity {
        Similarity::from_params(1.000_2, 0.3f64.to_radians(), 12.0, -7.5)
    }

    #[test]
    fn the_f_tail_matches_its_closed_form_and_published_critical_values() {
        // With 2 numerator degrees of freedom the tail has a closed form:
        // P(F > f) = (1 + 2f/d2)^(−d2/2) (computed from the F density).
        for (f, d2) in [(0.5f64, 4.0f64), (3.0, 10.0), (7.7, 57.0), (40.0, 3.0)] {
            let exact = (1.0 + 2.0 * f / d2).powf(-d2 / 2.0);
            assert!((f_upper_tail(f, 2.0, d2) - exact).abs() < 1e-12, "{f} {d2}");
        }
        // Upper 5% critical values of F(d1, d2). 19.0 for (2, 2) is exact (computed from the
        // closed form above); the others are read from printed F tables: 18.5128 (1, 2),
        // 9.5521 (2, 3), 9.2766 (3, 3) (a four-decimal F table, atozmath.com "F
        // Distribution"), and 2.15 for (18, 20), the lack-of-fit critical value printed in the
        // NIST/SEMATECH e-Handbook of Statistical Methods, section 4.6.1.5 (load cell
        // calibration).
        for (f, d1, d2, tol) in [
            (19.0, 2.0, 2.0, 1e-12),
            (18.5128, 1.0, 2.0, 1e-5),
            (9.5521, 2.0, 3.0, 1e-5),
            (9.2766, 3.0, 3.0, 1e-5),
            (2.15, 18.0, 20.0, 2e-3),
        ] {
            let p = f_upper_tail(f, d1, d2);
            assert!((p - 0.05).abs() < tol, "F({d1}, {d2}) at {f}: {p}");
        }
        assert_eq!(f_upper_tail(0.0, 3.0, 7.0), 1.0);
        assert_eq!(f_upper_tail(f64::INFINITY, 3.0, 7.0), 0.0);
    }

    #[test]
    fn a_planted_affine_and_polynomial_are_recovered_exactly() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let from = points(40, &mut rng);
        let affine = |p: [f64; 2]| {
            let (x, y) = (p[0] - 455_500.0, p[1] - 5_209_500.0);
            [
                455_480.0 + 1.000_3 * x - 0.000_9 * y,
                5_209_530.0 + 0.001_4 * x + 0.999_6 * y,
            ]
        };
        let poly = |p: [f64; 2]| {
            let q = affine(p);
            let (x, y) = ((p[0] - 455_500.0) / 1000.0, (p[1] - 5_209_500.0) / 1000.0);
            [
                q[0] + 0.8 * x * x - 0.3 * x * y,
                q[1] + 0.5 * y * y + 0.2 * x * y,
            ]
        };
        let probe = [455_123.4, 5_209_876.5];
        for (model, truth) in [
            (Model::Affine, &affine as &dyn Fn([f64; 2]) -> [f64; 2]),
            (Model::Polynomial2, &poly),
        ] {
            let to: Vec<[f64; 2]> = from.iter().map(|&p| truth(p)).collect();
            let fit = fit_model(model, &from, &to).expect("fitted");
            assert_eq!(fit.parameters, model.parameters().unwrap());
            assert!(fit.rmse < 1e-6, "{model}: {}", fit.rmse);
            let (got, want) = (fit.apply(probe), truth(probe));
            assert!((got[0] - want[0]).abs() < 1e-6 && (got[1] - want[1]).abs() < 1e-6);
        }
        // The affine cannot follow the polynomial's curvature; the polynomial contains it.
        let to: Vec<[f64; 2]> = from.iter().map(|&p| poly(p)).collect();
        let c = compare(&from, &to, &similarity(), Model::Polynomial2);
        assert!(c.fit(Model::Affine).unwrap().rmse > 0.01);
        assert!(c.test(Model::Polynomial2).unwrap().warranted);
        assert_eq!(c.written().model, Model::Polynomial2);
    }

    /// The count k that `Binomial(n, p)` exceeds with probability below `alpha`.
    fn binomial_upper(n: u64, p: f64, alpha: f64) -> u64 {
        let mut cdf = 0.0;
        let mut pmf = (1.0 - p).powi(n as i32);
        for k in 0..=n {
            cdf += pmf;
            if 1.0 - cdf < alpha {
                return k;
            }
            pmf *= (n - k) as f64 / (k + 1) as f64 * p / (1.0 - p);
        }
        n
    }

    #[test]
    fn on_similarity_data_the_richer_models_are_rarely_called_warranted() {
        // 200 seeded trials: a similarity with 2 cm normal noise per coordinate on 50 control
        // points. At the 5% level the affine is called warranted in about 5% of the trials;
        // more than the binomial count exceeded with probability 0.1% would mean the test is
        // wrong.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(20_261_202);
        let noise = Normal::new(0.0, 0.02).unwrap();
        let s = similarity();
        let trials = 200;
        let mut alarms = [0u64; 2];
        for _ in 0..trials {
            let from = points(50, &mut rng);
            let to: Vec<[f64; 2]> = from
                .iter()
                .map(|&p| {
                    let q = s.apply(p);
                    [q[0] + noise.sample(&mut rng), q[1] + noise.sample(&mut rng)]
                })
                .collect();
            let fit = crate::fit::similarity::fit_similarity(&from, &to).unwrap();
            let c = compare(&from, &to, &fit.transform, Model::Similarity);
            for (i, m) in [Model::Affine, Model::Polynomial2].into_iter().enumerate() {
                alarms[i] += c.test(m).unwrap().warranted as u64;
            }
        }
        let bound = binomial_upper(trials, LEVEL, 1e-3);
        println!("false alarms (affine, polynomial2) {alarms:?} of {trials}; bound {bound}");
        assert!(
            alarms.iter().all(|&a| a <= bound),
            "false alarms {alarms:?} of {trials}, bound {bound}"
        );
        // Not blind either: some false alarms happen, as the level says they should.
        assert!(alarms.iter().all(|&a| a > 0), "{alarms:?}");
    }

    #[test]
    fn a_planted_shear_is_called_warranted() {
        // 150 ppm of shear over 1 km (7.5 cm at the edge from the centre) under 2 cm noise.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        let noise = Normal::new(0.0, 0.02).unwrap();
        let s = similarity();
        let from = points(60, &mut rng);
        let to: Vec<[f64; 2]> = from
            .iter()
            .map(|&p| {
                let q = s.apply(p);
                let shear = 150e-6 * (p[1] - 5_209_500.0);
                [
                    q[0] + shear + noise.sample(&mut rng),
                    q[1] + noise.sample(&mut rng),
                ]
            })
            .collect();
        let fit = crate::fit::similarity::fit_similarity(&from, &to).unwrap();
        let c = compare(&from, &to, &fit.transform, Model::Affine);
        let t = c.test(Model::Affine).unwrap();
        assert!(t.warranted && t.p_value < 1e-6, "{t:?}");
        assert_eq!((t.df1, t.df2), (2, 2 * 60 - 6));
        assert_eq!(c.written().model, Model::Affine);
        assert!(c.fit(Model::Affine).unwrap().rmse < c.fit(Model::Similarity).unwrap().rmse);
    }
}
