//! The joint least-squares adjustment of epochs onto the base frame, the pairwise fits with
//! their covariances, and the closure test of chained transforms. Pure: no I/O.
//!
//! **In:** tracks (one landmark per epoch, positions in each epoch's own centred
//! coordinates), per-epoch weights; pairwise control points. **Out:** one similarity per epoch
//! to the base (base fixed) with its covariance, per-observation residuals, the a-posteriori
//! variance factor; closure misfits with their χ² statistics.
//!
//! # The model
//!
//! Every epoch k ≠ base has an unknown similarity S_k(p) = m_k·p + t_k (complex m = a + ib,
//! coordinates centred on the epoch's own centroid, so the normal equations are well
//! conditioned); the base's is the identity. Every track t has an unknown position X_t in the
//! base frame. Each landmark of epoch k in track t is one observation of two coordinates:
//! S_k(p_kt) = X_t + e_kt, e_kt ~ N(0, σ_k² I), independent. This is linear in (a, b, tx, ty)
//! and X; the track positions are eliminated in closed form (X_t = the weighted mean of the
//! mapped observations), which leaves 4·(N − 1) normal equations, assembled track by track
//! (cost linear in the observations; a track of m epochs adds m² 4×4 blocks). A landmark the
//! base never saw still ties the epochs that saw it. The covariance of the transforms is
//! σ̂₀²·N⁻¹ with σ̂₀² = Ω / r, Ω = Σ w_k |e_kt|², r = 2·(observations) − 2·(tracks) − 4·(N − 1)
//! (the usual Gauss-Markov estimate). The per-epoch variances σ_k² are estimated from the
//! epoch's own residuals (a simplified variance-component estimate: Σ|e_kt|² over
//! Σ 2·(1 − w_k/W_t), the parameters' share of the redundancy neglected) and the adjustment is
//! repeated with w_k = 1/σ_k² a few times.

use crate::fit::similarity::Similarity;

/// A similarity in centred coordinates with its covariance: `p ↦ m·p + t`, parameters
/// `(a, b, tx, ty)`, `m = a + ib`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CentredFit {
    /// `(a, b, tx, ty)`.
    pub theta: [f64; 4],
    /// Covariance of `theta` (squared units of the output coordinates).
    pub cov: [[f64; 4]; 4],
}

impl CentredFit {
    /// The identity with no uncertainty.
    pub const IDENTITY: CentredFit = CentredFit {
        theta: [1.0, 0.0, 0.0, 0.0],
        cov: [[0.0; 4]; 4],
    };

    /// Maps a (centred) point.
    pub fn apply(&self, p: [f64; 2]) -> [f64; 2] {
        let [a, b, tx, ty] = self.theta;
        [a * p[0] - b * p[1] + tx, b * p[0] + a * p[1] + ty]
    }

    /// As an origin-form [`Similarity`] from coordinates centred on `from` to coordinates
    /// centred on `to`: `x ↦ S(x − from) + to`.
    pub fn uncentred(&self, from: [f64; 2], to: [f64; 2]) -> Similarity {
        let [a, b, tx, ty] = self.theta;
        let m = Similarity { a, b, tx, ty };
        let o = m.apply(from);
        Similarity {
            a,
            b,
            tx: tx - (o[0] - tx) + to[0],
            ty: ty - (o[1] - ty) + to[1],
        }
    }
}

/// The row pair of the design matrix of one point: `A(p)·θ = S(p)`.
fn design(p: [f64; 2]) -> [[f64; 4]; 2] {
    [[p[0], -p[1], 1.0, 0.0], [p[1], p[0], 0.0, 1.0]]
}

/// `AᵀB` of two 2×4 design blocks.
fn ata(a: &[[f64; 4]; 2], b: &[[f64; 4]; 2]) -> [[f64; 4]; 4] {
    let mut out = [[0.0; 4]; 4];
    for (i, row) in out.iter_mut().enumerate() {
        for (j, v) in row.iter_mut().enumerate() {
            *v = a[0][i] * b[0][j] + a[1][i] * b[1][j];
        }
    }
    out
}

/// Inverse of a symmetric positive definite matrix (Cholesky); `None` when it is not
/// (numerically) positive definite.
pub fn spd_inverse(m: &[Vec<f64>]) -> Option<Vec<Vec<f64>>> {
    let n = m.len();
    let scale = (0..n).map(|i| m[i][i].abs()).fold(0.0, f64::max);
    if n == 0 || scale <= 0.0 || !scale.is_finite() {
        return None;
    }
    let mut l = vec![vec![0.0; n]; n];
    for i in 0..n {
        for j in 0..=i {
            let s: f64 = m[i][j] - (0..j).map(|k| l[i][k] * l[j][k]).sum::<f64>();
            if i == j {
                if s <= 1e-13 * m[i][i].abs().max(f64::MIN_POSITIVE) || s <= 0.0 {
                    return None;
                }
                l[i][i] = s.sqrt();
            } else {
                l[i][j] = s / l[j][j];
            }
        }
    }
    // Inverse of L, then L⁻ᵀL⁻¹.
    let mut li = vec![vec![0.0; n]; n];
    for i in 0..n {
        li[i][i] = 1.0 / l[i][i];
        for j in 0..i {
            let s: f64 = (j..i).map(|k| l[i][k] * li[k][j]).sum();
            li[i][j] = -s / l[i][i];
        }
    }
    let mut inv = vec![vec![0.0; n]; n];
    for i in 0..n {
        for j in 0..=i {
            let s: f64 = (i..n).map(|k| li[k][i] * li[k][j]).sum();
            inv[i][j] = s;
            inv[j][i] = s;
        }
    }
    Some(inv)
}

/// Least-squares similarity `from[i] ↦ to[i]` (both already centred near their centroids),
/// with covariance σ̂²(AᵀA)⁻¹, σ̂² = SSR / (2n − 4), and σ̂. `None` for fewer than 3 points or
/// degenerate ones.
pub fn fit_pairs(from: &[[f64; 2]], to: &[[f64; 2]]) -> Option<(CentredFit, f64)> {
    let n = from.len();
    if n < 3 || to.len() != n {
        return None;
    }
    let mut nm = [[0.0; 4]; 4];
    let mut rhs = [0.0; 4];
    for (p, q) in from.iter().zip(to) {
        let a = design(*p);
        let n1 = ata(&a, &a);
        for i in 0..4 {
            for j in 0..4 {
                nm[i][j] += n1[i][j];
            }
            rhs[i] += a[0][i] * q[0] + a[1][i] * q[1];
        }
    }
    let inv = spd_inverse(&nm.iter().map(|r| r.to_vec()).collect::<Vec<_>>())?;
    let mut theta = [0.0; 4];
    for i in 0..4 {
        theta[i] = (0..4).map(|j| inv[i][j] * rhs[j]).sum();
    }
    let fit = CentredFit {
        theta,
        cov: [[0.0; 4]; 4],
    };
    let ssr: f64 = from
        .iter()
        .zip(to)
        .map(|(p, q)| {
            let m = fit.apply(*p);
            (m[0] - q[0]).powi(2) + (m[1] - q[1]).powi(2)
        })
        .sum();
    let s2 = if n > 2 { ssr / (2 * n - 4) as f64 } else { 0.0 };
    let mut cov = [[0.0; 4]; 4];
    for i in 0..4 {
        for j in 0..4 {
            cov[i][j] = s2 * inv[i][j];
        }
    }
    Some((CentredFit { theta, cov }, s2.sqrt()))
}

/// One observation: epoch and position in that epoch's centred coordinates.
pub type Obs = (usize, [f64; 2]);

/// What the joint adjustment computed.
#[derive(Debug, Clone)]
pub struct Joint {
    /// Per epoch: the similarity to the base (centred coordinates) with its covariance;
    /// `None` for an epoch the adjustment could not determine. The base's is the identity.
    pub transforms: Vec<Option<CentredFit>>,
    /// Per epoch: the estimated standard deviation of one coordinate of its landmarks (base
    /// units), as used for the weights (σ̂₀ applied).
    pub sigma: Vec<f64>,
    /// A-posteriori variance factor σ̂₀² of the last adjustment.
    pub variance_factor: f64,
    /// Redundancy r.
    pub redundancy: usize,
    /// Observations (landmarks) used.
    pub observations: usize,
}

/// Adjusts jointly: the tracks given (each a list of observations, at most one per epoch),
/// `n` epochs, `base` fixed, `solve[k]`: whether epoch k is to be determined (epochs not to be
/// determined, and their observations, are ignored). Returns `None` when the normal equations
/// are singular (an epoch with too few links).
pub fn adjust(n: usize, base: usize, solve: &[bool], tracks: &[Vec<Obs>]) -> Option<Joint> {
    let mut sigma2 = vec![1.0; n];
    let mut last = None;
    for _ in 0..6 {
        let j = adjust_weighted(n, base, solve, tracks, &sigma2)?;
        let (new, changed) = component_variances(n, base, solve, tracks, &j, &sigma2);
        last = Some(j);
        if !changed {
            break;
        }
        sigma2 = new;
    }
    last
}

/// Per-epoch variances from the residuals of `j` (see the module doc); `changed` when any
/// moved by more than 1 %.
fn component_variances(
    n: usize,
    base: usize,
    solve: &[bool],
    tracks: &[Vec<Obs>],
    j: &Joint,
    sigma2: &[f64],
) -> (Vec<f64>, bool) {
    let mut ssr = vec![0.0; n];
    let mut red = vec![0.0; n];
    // The size of the coordinates: residuals below 1e-10 of it are rounding, not noise.
    let mut size2 = 0.0f64;
    for t in tracks {
        let used: Vec<&Obs> = t.iter().filter(|(k, _)| usable(*k, base, solve)).collect();
        if used.len() < 2 {
            continue;
        }
        let w: f64 = used.iter().map(|(k, _)| 1.0 / sigma2[*k]).sum();
        let (mean, u) = mean_of(&used, &j.transforms, sigma2);
        for ((k, _), q) in used.iter().zip(&u) {
            size2 = size2.max(q[0] * q[0] + q[1] * q[1]);
            ssr[*k] += (q[0] - mean[0]).powi(2) + (q[1] - mean[1]).powi(2);
            red[*k] += 2.0 * (1.0 - (1.0 / sigma2[*k]) / w);
        }
    }
    let est: Vec<Option<f64>> = (0..n)
        .map(|k| (red[k] > 0.5).then(|| ssr[k] / red[k]))
        .collect();
    let tiny = 1e-20 * size2;
    let mut known: Vec<f64> = est
        .iter()
        .flatten()
        .copied()
        .filter(|v| *v > tiny)
        .collect();
    if known.is_empty() {
        // Noise-free data (or none to estimate from): equal weights.
        return (sigma2.to_vec(), false);
    }
    known.sort_by(f64::total_cmp);
    let floor = (known[known.len() / 2] * 1e-6).max(tiny);
    let new: Vec<f64> = est
        .iter()
        .zip(sigma2)
        .map(|(e, old)| e.map_or(*old, |v| v.max(floor)))
        .collect();
    let changed = new
        .iter()
        .zip(sigma2)
        .any(|(a, b)| ((a - b) / b).abs() > 0.01);
    (new, changed)
}

fn usable(k: usize, base: usize, solve: &[bool]) -> bool {
    k == base || solve[k]
}

/// The mapped observations of a track (base frame, centred) and their weighted mean.
fn mean_of(
    used: &[&Obs],
    transforms: &[Option<CentredFit>],
    sigma2: &[f64],
) -> ([f64; 2], Vec<[f64; 2]>) {
    let u: Vec<[f64; 2]> = used
        .iter()
        .map(|(k, p)| {
            transforms[*k]
                .expect("a usable epoch has a transform")
                .apply(*p)
        })
        .collect();
    let mut sw = 0.0;
    let mut m = [0.0, 0.0];
    for ((k, _), q) in used.iter().zip(&u) {
        let w = 1.0 / sigma2[*k];
        sw += w;
        m[0] += w * q[0];
        m[1] += w * q[1];
    }
    ([m[0] / sw, m[1] / sw], u)
}

/// One observation in the assembly: epoch, weight, design rows, position.
type Block = (usize, f64, [[f64; 4]; 2], [f64; 2]);

/// One weighted adjustment (weights 1/σ_k²).
fn adjust_weighted(
    n: usize,
    base: usize,
    solve: &[bool],
    tracks: &[Vec<Obs>],
    sigma2: &[f64],
) -> Option<Joint> {
    // Unknown slots.
    let mut slot = vec![usize::MAX; n];
    let mut epochs = Vec::new();
    for k in 0..n {
        if k != base && solve[k] {
            slot[k] = epochs.len();
            epochs.push(k);
        }
    }
    let u = 4 * epochs.len();
    let mut nm = vec![vec![0.0; u]; u];
    let mut rhs = vec![0.0; u];
    let mut observations = 0usize;
    let mut used_tracks = 0usize;
    for t in tracks {
        let used: Vec<&Obs> = t.iter().filter(|(k, _)| usable(*k, base, solve)).collect();
        if used.len() < 2 {
            continue;
        }
        observations += used.len();
        used_tracks += 1;
        let w_total: f64 = used.iter().map(|(k, _)| 1.0 / sigma2[*k]).sum();
        let blocks: Vec<Block> = used
            .iter()
            .map(|(k, p)| (*k, 1.0 / sigma2[*k], design(*p), *p))
            .collect();
        let base_obs = blocks.iter().find(|b| b.0 == base).map(|b| (b.1, b.3));
        for (k, wk, ak, _) in &blocks {
            if *k == base {
                continue;
            }
            let sk = 4 * slot[*k];
            for (l, wl, al, _) in &blocks {
                if *l == base {
                    continue;
                }
                let sl = 4 * slot[*l];
                let c = if k == l {
                    wk - wk * wk / w_total
                } else {
                    -wk * wl / w_total
                };
                let m = ata(ak, al);
                for i in 0..4 {
                    for jj in 0..4 {
                        nm[sk + i][sl + jj] += c * m[i][jj];
                    }
                }
            }
            if let Some((wb, pb)) = base_obs {
                let c = wk * wb / w_total;
                for i in 0..4 {
                    rhs[sk + i] += c * (ak[0][i] * pb[0] + ak[1][i] * pb[1]);
                }
            }
        }
    }
    let inv = if u == 0 {
        Vec::new()
    } else {
        spd_inverse(&nm)?
    };
    let x: Vec<f64> = (0..u)
        .map(|i| (0..u).map(|jj| inv[i][jj] * rhs[jj]).sum())
        .collect();
    let mut transforms: Vec<Option<CentredFit>> = vec![None; n];
    transforms[base] = Some(CentredFit::IDENTITY);
    for (s, &k) in epochs.iter().enumerate() {
        transforms[k] = Some(CentredFit {
            theta: [x[4 * s], x[4 * s + 1], x[4 * s + 2], x[4 * s + 3]],
            cov: [[0.0; 4]; 4],
        });
    }
    // Residuals and the variance factor.
    let mut omega = 0.0;
    for t in tracks {
        let used: Vec<&Obs> = t.iter().filter(|(k, _)| usable(*k, base, solve)).collect();
        if used.len() < 2 {
            continue;
        }
        let (mean, mapped) = mean_of(&used, &transforms, sigma2);
        for ((k, _), q) in used.iter().zip(&mapped) {
            omega += ((q[0] - mean[0]).powi(2) + (q[1] - mean[1]).powi(2)) / sigma2[*k];
        }
    }
    let redundancy = (2 * observations).saturating_sub(2 * used_tracks + u);
    let variance_factor = if redundancy > 0 {
        omega / redundancy as f64
    } else {
        0.0
    };
    for (s, &k) in epochs.iter().enumerate() {
        let t = transforms[k].as_mut().expect("set above");
        for i in 0..4 {
            for jj in 0..4 {
                t.cov[i][jj] = variance_factor * inv[4 * s + i][4 * s + jj];
            }
        }
    }
    Some(Joint {
        transforms,
        sigma: sigma2
            .iter()
            .map(|s| (s * variance_factor).sqrt())
            .collect(),
        variance_factor,
        redundancy,
        observations,
    })
}

/// Survival function P(X > x) of a χ² variable with an even number `dof` of degrees of
/// freedom: e^(−x/2)·Σ_{i<dof/2} (x/2)^i / i! (closed form for even degrees of freedom, e.g.
/// Abramowitz & Stegun, Handbook of Mathematical Functions, 26.4.21 — from memory).
pub fn chi2_sf_even(x: f64, dof: usize) -> f64 {
    debug_assert!(dof >= 2 && dof.is_multiple_of(2));
    if x <= 0.0 {
        return 1.0;
    }
    let h = x / 2.0;
    let mut term = 1.0;
    let mut sum = 1.0;
    for i in 1..dof / 2 {
        term *= h / i as f64;
        sum += term;
    }
    // In logs: e^(−h) underflows long before the sum overflows.
    (sum.ln() - h).exp().min(1.0)
}

/// The χ² value with an even number `dof` of degrees of freedom exceeded with probability
/// `alpha` (bisection on [`chi2_sf_even`]).
pub fn chi2_quantile_even(alpha: f64, dof: usize) -> f64 {
    let (mut lo, mut hi) = (0.0, 10.0 * dof as f64 + 100.0);
    while chi2_sf_even(hi, dof) > alpha {
        hi *= 2.0;
    }
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if chi2_sf_even(mid, dof) > alpha {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// 2×2 matrix of multiplication by the complex number `z`.
fn cmul(z: [f64; 2]) -> [[f64; 2]; 2] {
    [[z[0], -z[1]], [z[1], z[0]]]
}

fn mat2(a: [[f64; 2]; 2], b: [[f64; 2]; 2]) -> [[f64; 2]; 2] {
    [
        [
            a[0][0] * b[0][0] + a[0][1] * b[1][0],
            a[0][0] * b[0][1] + a[0][1] * b[1][1],
        ],
        [
            a[1][0] * b[0][0] + a[1][1] * b[1][0],
            a[1][0] * b[0][1] + a[1][1] * b[1][1],
        ],
    ]
}

/// `J·C·Jᵀ` added into `out` (J 4×4).
fn add_jcj(out: &mut [[f64; 4]; 4], j: &[[f64; 4]; 4], c: &[[f64; 4]; 4]) {
    for a in 0..4 {
        for b in 0..4 {
            let mut s = 0.0;
            for k in 0..4 {
                for l in 0..4 {
                    s += j[a][k] * c[k][l] * j[b][l];
                }
            }
            out[a][b] += s;
        }
    }
}

/// Places 2×2 blocks into a 4×4 Jacobian: rows (m, v), columns (a b, tx ty).
fn jac(
    mm: [[f64; 2]; 2],
    mt: [[f64; 2]; 2],
    vm: [[f64; 2]; 2],
    vt: [[f64; 2]; 2],
) -> [[f64; 4]; 4] {
    let mut j = [[0.0; 4]; 4];
    for r in 0..2 {
        for c in 0..2 {
            j[r][c] = mm[r][c];
            j[r][c + 2] = mt[r][c];
            j[r + 2][c] = vm[r][c];
            j[r + 2][c + 2] = vt[r][c];
        }
    }
    j
}

/// The closure of a triangle: `via_first` maps j → i, `via_second` i → b, `direct` j → b
/// (all centred fits, independent). Compared at `at` (centred coordinates of j): the linear
/// part m and the mapped point v of the chain against the direct transform.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Closure {
    /// Chain minus direct: (Δa, Δb, Δx, Δy) at `at`.
    pub delta: [f64; 4],
    /// χ² statistic Δᵀ C⁻¹ Δ (4 degrees of freedom); infinite when C is singular and Δ is not 0.
    pub statistic: f64,
}

/// See [`Closure`].
pub fn closure(
    via_first: &CentredFit,
    via_second: &CentredFit,
    direct: &CentredFit,
    at: [f64; 2],
) -> Closure {
    let [a1, b1, tx1, ty1] = via_first.theta; // j → i
    let [a2, b2, _, _] = via_second.theta; // i → b
    let (m1, m2) = ([a1, b1], [a2, b2]);
    let z = via_first.apply(at);
    let chain_m = [a2 * a1 - b2 * b1, a2 * b1 + b2 * a1];
    let chain_v = via_second.apply(z);
    let dm = [direct.theta[0], direct.theta[1]];
    let dv = direct.apply(at);
    let delta = [
        chain_m[0] - dm[0],
        chain_m[1] - dm[1],
        chain_v[0] - dv[0],
        chain_v[1] - dv[1],
    ];
    let id = [[1.0, 0.0], [0.0, 1.0]];
    let zero = [[0.0; 2]; 2];
    let _ = (tx1, ty1);
    let mut c = [[0.0; 4]; 4];
    // Chain wrt the second (i → b): m = m2·m1, v = m2·z + t2.
    add_jcj(&mut c, &jac(cmul(m1), zero, cmul(z), id), &via_second.cov);
    // Chain wrt the first (j → i): m = m2·m1, v = m2·(m1·at + t1) + t2.
    add_jcj(
        &mut c,
        &jac(cmul(m2), zero, mat2(cmul(m2), cmul(at)), cmul(m2)),
        &via_first.cov,
    );
    // Direct: m = m3, v = m3·at + t3.
    add_jcj(&mut c, &jac(id, zero, cmul(at), id), &direct.cov);
    let inv = spd_inverse(&c.iter().map(|r| r.to_vec()).collect::<Vec<_>>());
    let statistic = match inv {
        Some(inv) => {
            let mut s = 0.0;
            for i in 0..4 {
                for j in 0..4 {
                    s += delta[i] * inv[i][j] * delta[j];
                }
            }
            s
        }
        None if delta.iter().all(|d| d.abs() < 1e-12) => 0.0,
        None => f64::INFINITY,
    };
    Closure { delta, statistic }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    #[test]
    fn chi2_even_matches_closed_forms() {
        // dof 2: P(X > x) = e^(−x/2) exactly; the 99 % point is −2 ln 0.01 = 9.2103.
        assert!((chi2_sf_even(3.0, 2) - (-1.5f64).exp()).abs() < 1e-15);
        assert!((chi2_quantile_even(0.01, 2) - 9.210340372).abs() < 1e-6);
        // dof 4, 99 %: 13.277 (tables of the χ² distribution, e.g. Abramowitz & Stegun
        // Table 26.8 — from memory).
        assert!((chi2_quantile_even(0.01, 4) - 13.2767).abs() < 1e-3);
    }

    #[test]
    fn spd_inverse_inverts() {
        let m = vec![
            vec![4.0, 1.0, 0.5],
            vec![1.0, 3.0, 0.2],
            vec![0.5, 0.2, 2.0],
        ];
        let inv = spd_inverse(&m).unwrap();
        for i in 0..3 {
            for j in 0..3 {
                let s: f64 = (0..3).map(|k| m[i][k] * inv[k][j]).sum();
                assert!((s - if i == j { 1.0 } else { 0.0 }).abs() < 1e-12);
            }
        }
        assert!(spd_inverse(&[vec![1.0, 1.0], vec![1.0, 1.0]]).is_none());
    }

    #[test]
    fn joint_equals_exact_transforms_without_noise() {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let truth: Vec<[f64; 2]> = (0..50)
            .map(|_| [rng.gen_range(-500.0..500.0), rng.gen_range(-500.0..500.0)])
            .collect();
        // Epoch k sees the truth through the inverse of S_k.
        let s = [
            CentredFit::IDENTITY,
            CentredFit {
                theta: [1.001, 0.002, 3.0, -4.0],
                cov: [[0.0; 4]; 4],
            },
            CentredFit {
                theta: [0.3, -0.01, -10.0, 2.0],
                cov: [[0.0; 4]; 4],
            },
        ];
        let inv = |f: &CentredFit, q: [f64; 2]| {
            let [a, b, tx, ty] = f.theta;
            let (x, y) = (q[0] - tx, q[1] - ty);
            let d = a * a + b * b;
            [(a * x + b * y) / d, (-b * x + a * y) / d]
        };
        let tracks: Vec<Vec<Obs>> = truth
            .iter()
            .enumerate()
            .map(|(i, q)| {
                // Every third landmark is missing from the base.
                (0..3)
                    .filter(|k| !(i % 3 == 0 && *k == 0))
                    .map(|k| (k, inv(&s[k], *q)))
                    .collect()
            })
            .collect();
        let j = adjust(3, 0, &[true; 3], &tracks).unwrap();
        for k in 1..3 {
            let t = j.transforms[k].unwrap();
            for i in 0..4 {
                assert!((t.theta[i] - s[k].theta[i]).abs() < 1e-9, "{k} {i}");
            }
        }
    }
}
