//! Is a consensus more than chance? A binomial test of the inlier count with a correction for
//! the number of hypotheses tried.
//!
//! Under the null hypothesis (the two surveys are unrelated, or the transform is wrong), a
//! mapped target landmark that falls inside the reference's coverage finds a reference landmark
//! within the tolerance τ with some probability p₀, independently of the others, so the inlier
//! count among n such landmarks is Binomial(n, p₀). Two estimates of p₀ are taken and the
//! larger kept (the conservative choice):
//!
//! - **Poisson**: for landmarks scattered at random with the reference's density, whose median
//!   nearest-neighbour distance is m, p₀ = 1 − exp(−ln 2 · τ²/m²) (the median of the Poisson
//!   nearest-neighbour distance is √(ln 2 / (πρ))).
//! - **Empirical**: the inlier rate that the whole guided matching reaches when started on mirror
//!   images of the target (which no similarity can truly align). This catches patterns — street
//!   grids, rows of houses — that align by chance far more often than random points.
//!
//! The tail P(X ≥ k) is bounded above by the Chernoff–Hoeffding bound exp(−n·D(k/n ‖ p₀)), with
//! D the Kullback–Leibler divergence of two Bernoulli laws (Hoeffding, JASA 58, 1963), so the
//! reported value never understates how likely chance is. Multiplying by the number of
//! hypotheses H gives the expected number of false alarms, the criterion of the a-contrario
//! approach (Moisan & Stival, IJCV 57(3), 2004 — from memory); a transform is accepted when
//! H·P < `alpha` (default 0.01).

/// log10 of the Chernoff–Hoeffding upper bound on P(X ≥ k) for X ~ Binomial(n, p).
/// Zero (probability one) when k ≤ n·p.
pub fn log10_tail_bound(k: usize, n: usize, p: f64) -> f64 {
    if n == 0 || k == 0 {
        return 0.0;
    }
    let q = (k as f64 / n as f64).min(1.0);
    let p = p.clamp(1e-300, 1.0);
    if q <= p {
        return 0.0;
    }
    let kl = if q >= 1.0 {
        -(p.ln())
    } else {
        q * (q / p).ln() + (1.0 - q) * ((1.0 - q) / (1.0 - p)).ln()
    };
    -(n as f64) * kl / std::f64::consts::LN_10
}

/// The chance rate for random points: p₀ = 1 − exp(−ln 2 · τ²/m²).
pub fn poisson_chance_rate(tolerance: f64, median_spacing: f64) -> f64 {
    if median_spacing <= 0.0 {
        return 1.0;
    }
    1.0 - (-(std::f64::consts::LN_2) * (tolerance / median_spacing).powi(2)).exp()
}

/// Outcome of the significance test.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Significance {
    /// Target landmarks mapped into the reference's coverage (n).
    pub trials: usize,
    /// Inliers among them (k).
    pub inliers: usize,
    /// Chance rate from the Poisson model.
    pub chance_rate_poisson: f64,
    /// Chance rate reached on mirrored decoys.
    pub chance_rate_decoys: f64,
    /// Hypotheses tried (H).
    pub hypotheses: usize,
    /// log10 of the expected number of false alarms, H·P(X ≥ k) (upper bound).
    pub log10_false_alarms: f64,
}

impl Significance {
    /// Computes the test.
    pub fn new(
        trials: usize,
        inliers: usize,
        poisson: f64,
        decoys: f64,
        hypotheses: usize,
    ) -> Self {
        let p0 = poisson.max(decoys).min(0.999_999);
        let log10_false_alarms =
            (hypotheses.max(1) as f64).log10() + log10_tail_bound(inliers, trials, p0);
        Significance {
            trials,
            inliers,
            chance_rate_poisson: poisson,
            chance_rate_decoys: decoys,
            hypotheses,
            log10_false_alarms,
        }
    }

    /// True when the expected number of false alarms is below `alpha`.
    pub fn is_significant(&self, alpha: f64) -> bool {
        self.log10_false_alarms < alpha.log10()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Exact binomial upper tail by direct summation (oracle for small n).
    fn exact_tail(k: usize, n: usize, p: f64) -> f64 {
        let mut total = 0.0;
        for i in k..=n {
            let mut c = 1.0f64;
            for j in 0..i {
                c *= (n - j) as f64 / (j + 1) as f64;
            }
            total += c * p.powi(i as i32) * (1.0 - p).powi((n - i) as i32);
        }
        total
    }

    #[test]
    fn chernoff_bound_is_an_upper_bound() {
        for &(n, p) in &[(20usize, 0.1f64), (50, 0.05), (100, 0.3), (60, 0.5)] {
            for k in 0..=n {
                let exact = exact_tail(k, n, p);
                let bound = 10f64.powf(log10_tail_bound(k, n, p));
                assert!(
                    bound >= exact * (1.0 - 1e-9),
                    "n={n} p={p} k={k}: {bound} < {exact}"
                );
            }
        }
    }

    #[test]
    fn bound_is_tight_enough_to_decide() {
        // 30 inliers of 100 at a 5% chance rate is overwhelming; 7 of 100 is not.
        assert!(log10_tail_bound(30, 100, 0.05) < -10.0);
        assert!(log10_tail_bound(7, 100, 0.05) > -1.0);
    }

    #[test]
    fn poisson_rate_at_the_median_spacing_is_one_half() {
        // By definition of the median nearest-neighbour distance.
        assert!((poisson_chance_rate(3.0, 3.0) - 0.5).abs() < 1e-12);
    }

    #[test]
    fn hypotheses_raise_the_false_alarm_count() {
        let a = Significance::new(1000, 80, 0.05, 0.0, 1);
        let b = Significance::new(1000, 80, 0.05, 0.0, 10_000);
        assert!((b.log10_false_alarms - a.log10_false_alarms - 4.0).abs() < 1e-9);
    }
}
