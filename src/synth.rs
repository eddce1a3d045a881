//! Seeded synthetic survey pairs for tests, benchmarks and experiments (never for results).
//!
//! A base pattern of landmarks (a jittered grid: one landmark at a uniform random place in
//! each cell of a square grid, which keeps landmarks apart as buildings are) becomes the
//! reference after removing a fraction; the target keeps another subset, moved by the inverse
//! of a known similarity, with Gaussian noise, plus new landmarks of its own.

use crate::fit::Similarity;
use crate::spatial::Extent;
use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, Normal};

/// How to make a pair.
#[derive(Debug, Clone, Copy)]
pub struct SynthParams {
    /// Landmarks in the base pattern.
    pub landmarks: usize,
    /// Fraction of the base missing from each survey (independently).
    pub missing: f64,
    /// New landmarks in each survey, as a fraction of the base.
    pub extra: f64,
    /// Noise σ per coordinate, as a fraction of the grid spacing (≈ mean landmark spacing).
    pub noise: f64,
    /// Target → reference transform (the truth).
    pub truth: Similarity,
    /// Seed.
    pub seed: u64,
}

/// A synthetic pair with its truth.
#[derive(Debug, Clone)]
pub struct SynthPair {
    /// Reference landmarks.
    pub reference: Vec<[f64; 2]>,
    /// Target landmarks.
    pub target: Vec<[f64; 2]>,
    /// Target → reference.
    pub truth: Similarity,
    /// True (reference index, target index) pairs.
    pub pairs: Vec<(u32, u32)>,
    /// Grid spacing of the base pattern, reference units (NaN when the base is not a grid).
    pub spacing: f64,
}

/// Jittered-grid pattern of about `n` points with spacing `spacing`.
pub fn jittered_grid(n: usize, spacing: f64, rng: &mut impl Rng) -> Vec<[f64; 2]> {
    let side = (n as f64).sqrt().ceil() as usize;
    let mut pts = Vec::with_capacity(side * side);
    for i in 0..side {
        for j in 0..side {
            pts.push([
                (i as f64 + rng.gen_range(0.05..0.95)) * spacing,
                (j as f64 + rng.gen_range(0.05..0.95)) * spacing,
            ]);
        }
    }
    pts.shuffle(rng);
    pts.truncate(n);
    pts
}

/// How a base pattern is split into a reference and a target survey ([`split_base`]).
#[derive(Debug, Clone, Copy)]
pub struct Split {
    /// Probability that a base landmark is missing from the reference, and from the target
    /// (independently).
    pub missing: [f64; 2],
    /// Gaussian noise σ per coordinate of the target's base landmarks, base units.
    pub sigma: f64,
    /// Target → reference transform (the truth); the target is the base moved by its inverse.
    pub truth: Similarity,
    /// New landmarks added to each survey, uniform over `area`.
    pub extra: usize,
    /// Where the new landmarks fall (base coordinates).
    pub area: Extent,
}

/// Splits a base pattern into a survey pair: each survey keeps each base landmark with
/// probability 1 − missing, the target's kept landmarks get the noise and are moved by the
/// inverse of the truth, then each survey gains `extra` new landmarks. The one generator
/// behind every synthetic pair (tests, benchmark, experiments), so that they all draw the
/// same way: per base landmark two draws (kept in reference, kept in target), then two normal
/// draws if kept in the target; then per new pair of landmarks four uniform draws.
pub fn split_base(base: &[[f64; 2]], split: &Split, rng: &mut impl Rng) -> SynthPair {
    let normal = Normal::new(0.0, split.sigma).expect("finite noise");
    let to_target = split.truth.inverse();
    let mut reference = Vec::new();
    let mut target = Vec::new();
    let mut pairs = Vec::new();
    for b in base {
        let in_ref = rng.gen::<f64>() >= split.missing[0];
        let in_tgt = rng.gen::<f64>() >= split.missing[1];
        let ri = reference.len() as u32;
        let ti = target.len() as u32;
        if in_ref {
            reference.push(*b);
        }
        if in_tgt {
            let noisy = [b[0] + normal.sample(rng), b[1] + normal.sample(rng)];
            target.push(to_target.apply(noisy));
        }
        if in_ref && in_tgt {
            pairs.push((ri, ti));
        }
    }
    let Extent { min, max } = split.area;
    for _ in 0..split.extra {
        reference.push([rng.gen_range(min[0]..max[0]), rng.gen_range(min[1]..max[1])]);
        let q = [rng.gen_range(min[0]..max[0]), rng.gen_range(min[1]..max[1])];
        target.push(to_target.apply(q));
    }
    SynthPair {
        reference,
        target,
        truth: split.truth,
        pairs,
        spacing: f64::NAN,
    }
}

/// Makes a pair on a jittered grid of spacing 20.
pub fn make_pair(p: &SynthParams) -> SynthPair {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(p.seed);
    let spacing = 20.0;
    let base = jittered_grid(p.landmarks, spacing, &mut rng);
    let side = (p.landmarks as f64).sqrt() * spacing;
    let split = Split {
        missing: [p.missing; 2],
        sigma: p.noise * spacing,
        truth: p.truth,
        extra: (p.extra * p.landmarks as f64) as usize,
        area: Extent {
            min: [0.0, 0.0],
            max: [side, side],
        },
    };
    SynthPair {
        spacing,
        ..split_base(&base, &split, &mut rng)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pairs_map_onto_each_other_within_the_noise() {
        let truth = Similarity::from_params(3.0, 2.0, 100.0, -50.0);
        let s = make_pair(&SynthParams {
            landmarks: 2000,
            missing: 0.25,
            extra: 0.2,
            noise: 0.01,
            truth,
            seed: 1,
        });
        let f = s.pairs.len() as f64 / 2000.0;
        assert!((f - 0.5625).abs() < 0.05, "{f}");
        for &(r, t) in &s.pairs {
            let d =
                crate::spatial::dist2(truth.apply(s.target[t as usize]), s.reference[r as usize])
                    .sqrt();
            assert!(d < 6.0 * 0.01 * s.spacing);
        }
    }
}
