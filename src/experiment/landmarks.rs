//! The landmark-robustness experiment: how each signature variant copes with missing and new
//! landmarks and with noise, from the per-landmark candidate quality to the end-to-end match.
//!
//! Each trial draws a base pattern of [`LANDMARKS`] landmarks (a jittered grid,
//! [`crate::synth::jittered_grid`]). Each survey keeps every base landmark with probability
//! 1 − f and gains f·N new landmarks scattered uniformly (f = `missing_fraction`, the same on
//! both sides); the target is moved into a local grid by a random similarity (any rotation,
//! scale 0.2-5 log-uniform) and its kept landmarks get Gaussian noise of σ = `noise_fraction`
//! × the base pattern's mean nearest-neighbour spacing, per coordinate. For every variant the
//! same trials are used (seeded by trial number).
//!
//! Reported per variant and setting:
//! - `top1`, `top5`: over the target landmarks that have a true partner, the share whose best
//!   (or five best) candidates, over all their signatures, include the partner;
//! - `success_rate`: share of trials in which the match pipeline accepted a transform and found
//!   at least 90% of the true pairs;
//! - `ms_per_landmark`: signatures of both surveys plus matching, per target landmark;
//! - `signatures_per_landmark`: index size per reference landmark.
//!
//! Each trial's match runs with at most [`MAX_ROUNDS`] RANSAC rounds.
//!
#![doc = include_str!("landmark-robustness.md")]

use crate::config::{MatchConfig, MatchingParams};
use crate::engine::{find_candidates, fit_candidates, FrameFacts};
use crate::fit::Similarity;
use crate::matching::Rank;
use crate::progress::Silent;
use crate::signatures::{KeySpace, SignatureParams, VertexOrder};
use crate::spatial::{morton_order, Extent, PointIndex, Survey};
use crate::synth::{split_base, Split};
use rand::{Rng, SeedableRng};
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::time::Instant;

use super::ExperimentError;

/// Landmarks in each trial's base pattern.
pub const LANDMARKS: usize = 2000;

/// RANSAC rounds allowed per trial (the tool's default is higher; a trial that needs more
/// than this counts as a failure, which keeps the hopeless settings from dominating the run
/// time).
pub const MAX_ROUNDS: usize = 100_000;

/// One signature variant under test.
#[derive(Debug, Clone)]
pub struct Variant {
    /// Name in the tables.
    pub name: &'static str,
    /// Signature options.
    pub signatures: SignatureParams,
    /// Candidate ranking.
    pub rank: Rank,
}

/// The variants measured: `default` is what the tool chooses for surveys of [`LANDMARKS`]
/// landmarks, `default-disc` the same with keys in the disc; the others start from k = 5,
/// walk, harmonics 1 and 2, keys in the disc, no subsets, and change one thing.
pub fn variants() -> Vec<Variant> {
    let base = SignatureParams {
        key_space: KeySpace::Disc,
        ..SignatureParams::plain(5)
    };
    let v = |name, f: &dyn Fn(&mut SignatureParams), rank| {
        let mut s = base.clone();
        f(&mut s);
        Variant {
            name,
            signatures: s,
            rank,
        }
    };
    vec![
        Variant {
            name: "default",
            signatures: crate::signatures::SignatureChoice::default().resolve(LANDMARKS),
            rank: MatchingParams::default().rank,
        },
        v("walk", &|_| {}, Rank::Distance),
        v("walk-permuted", &|s| s.permuted = true, Rank::Distance),
        v(
            "angular",
            &|s| s.order = VertexOrder::Angular,
            Rank::Distance,
        ),
        v(
            "angular-permuted",
            &|s| {
                s.order = VertexOrder::Angular;
                s.permuted = true
            },
            Rank::Distance,
        ),
        Variant {
            name: "default-disc",
            signatures: SignatureParams {
                key_space: KeySpace::Disc,
                ..crate::signatures::SignatureChoice::default().resolve(LANDMARKS)
            },
            rank: MatchingParams::default().rank,
        },
        v("walk-ratio-1", &|s| s.harmonics = vec![1], Rank::Distance),
        v(
            "walk-sphere",
            &|s| s.key_space = KeySpace::Sphere,
            Rank::Distance,
        ),
        v("walk-sensitivity", &|_| {}, Rank::Sensitivity),
        v("walk-ambiguous", &|s| s.ambiguity = 0.05, Rank::Distance),
        v("walk-leave-1", &|s| s.leave_out = 1, Rank::Distance),
        v(
            "walk-k4-leave-1",
            &|s| {
                s.neighbours = 4;
                s.leave_out = 1
            },
            Rank::Distance,
        ),
        v(
            "walk-k4-leave-2",
            &|s| {
                s.neighbours = 4;
                s.leave_out = 2
            },
            Rank::Distance,
        ),
    ]
}

/// What to run.
#[derive(Debug, Clone)]
pub struct LandmarkOptions {
    /// Fewer trials and settings.
    pub quick: bool,
    /// Trials per setting (overrides the default 100, quick 10).
    pub trials: Option<usize>,
    /// Only these variants (by name); all when empty.
    pub only: Vec<String>,
    /// Only these (missing, noise) settings; the full grid when empty.
    pub settings: Vec<(f64, f64)>,
}

/// One row of the results.
#[derive(Debug, Clone)]
pub struct LandmarkRow {
    /// Variant name.
    pub variant: &'static str,
    /// Missing (and new) fraction on each side.
    pub missing_fraction: f64,
    /// Noise σ over the mean spacing.
    pub noise_fraction: f64,
    /// Trials run.
    pub trials: usize,
    /// Share of partnered target landmarks whose best candidate is right.
    pub top1: f64,
    /// Share whose five best candidates include the partner.
    pub top5: f64,
    /// Share of trials with a transform and ≥ 90% of the true pairs.
    pub success_rate: f64,
    /// Signature and matching time per landmark, milliseconds.
    pub ms_per_landmark: f64,
    /// Reference signatures per reference landmark.
    pub signatures_per_landmark: f64,
}

struct Trial {
    reference: Vec<[f64; 2]>,
    target: Vec<[f64; 2]>,
    /// Target index → reference index of the true partner.
    partner: HashMap<u32, u32>,
}

fn make_trial(seed: u64, missing: f64, noise: f64) -> Trial {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let base = crate::synth::jittered_grid(LANDMARKS, 20.0, &mut rng);
    let index = PointIndex::new(&base).expect("a jittered grid indexes");
    let mut near = Vec::new();
    let mean_spacing = base
        .iter()
        .map(|&p| {
            index.nearest_n(p, 2, &mut near);
            near[1].1.sqrt()
        })
        .sum::<f64>()
        / base.len() as f64;
    let side = (LANDMARKS as f64).sqrt() * 20.0;
    let scale = rng.gen_range(0.2f64.ln()..5f64.ln()).exp();
    let truth = Similarity::from_params(
        scale,
        rng.gen_range(-3.2..3.2),
        rng.gen_range(-1e4..1e4),
        rng.gen_range(-1e4..1e4),
    );
    let split = Split {
        missing: [missing; 2],
        sigma: noise * mean_spacing,
        truth,
        extra: (missing * LANDMARKS as f64) as usize,
        area: Extent {
            min: [0.0, 0.0],
            max: [side, side],
        },
    };
    let pair = split_base(&base, &split, &mut rng);
    Trial {
        partner: pair.pairs.iter().map(|&(r, t)| (t, r)).collect(),
        reference: pair.reference,
        target: pair.target,
    }
}

#[derive(Default)]
struct Tally {
    partnered: usize,
    top1: usize,
    top5: usize,
    successes: usize,
    seconds: f64,
    target_landmarks: usize,
    signatures: usize,
    reference_landmarks: usize,
}

fn run_trial(v: &Variant, t: &Trial, tally: &mut Tally) -> Result<(), ExperimentError> {
    let bad = |e: String| ExperimentError::Engine(e);
    let ri = PointIndex::new(&t.reference).ok_or_else(|| bad("reference tree".into()))?;
    let ti = PointIndex::new(&t.target).ok_or_else(|| bad("target tree".into()))?;
    let (ro, to) = (morton_order(&t.reference), morton_order(&t.target));
    let reference = Survey {
        points: &t.reference,
        index: &ri,
        order: &ro,
    };
    let target = Survey {
        points: &t.target,
        index: &ti,
        order: &to,
    };
    let mut config = MatchConfig::new("reference".into(), "target".into());
    config.signatures = v.signatures.clone().into();
    config.matching.rank = v.rank;
    config.fit.max_rounds = MAX_ROUNDS;
    let labels = ["reference".to_string(), "target".to_string()];
    let clock = Instant::now();
    let found = find_candidates(&config, &reference, &target, &Silent, &labels)
        .map_err(|e| bad(e.to_string()))?;
    tally.seconds += clock.elapsed().as_secs_f64();
    let (rs, ts) = (&found.reference_signatures, &found.target_signatures);
    tally.target_landmarks += t.target.len();
    tally.signatures += rs.len();
    tally.reference_landmarks += t.reference.len();
    // Per landmark: its candidates over all its signatures, best first (sorted).
    let mut ranked: HashMap<u32, Vec<u32>> = HashMap::new();
    for c in &found.candidates {
        let tl = ts.landmark(c.target as usize);
        let list = ranked.entry(tl).or_default();
        let rl = rs.landmark(c.reference as usize);
        if list.len() < 5 && !list.contains(&rl) {
            list.push(rl);
        }
    }
    for (tl, rl) in &t.partner {
        tally.partnered += 1;
        if let Some(list) = ranked.get(tl) {
            if list.first() == Some(rl) {
                tally.top1 += 1;
            }
            if list.contains(rl) {
                tally.top5 += 1;
            }
        }
    }
    match fit_candidates(
        &config,
        &reference,
        &target,
        &found,
        &FrameFacts::LOCAL_METRES,
        &Silent,
    ) {
        Ok(s) => {
            let right = s
                .pairs
                .iter()
                .filter(|p| t.partner.get(&p.target) == Some(&p.reference))
                .count();
            if right as f64 >= 0.9 * t.partner.len() as f64 {
                tally.successes += 1;
            } else if std::env::var_os("TIEMARK_DEBUG").is_some() {
                eprintln!(
                    "DEBUG found {} right {} of {}",
                    s.pairs.len(),
                    right,
                    t.partner.len()
                );
            }
        }
        Err(r) => {
            if std::env::var_os("TIEMARK_DEBUG").is_some() {
                eprintln!(
                    "DEBUG {} rounds {}",
                    crate::report::reason(&r.reason),
                    r.ransac_rounds
                );
            }
        }
    }
    Ok(())
}

/// The (missing, noise) grid.
pub fn settings(quick: bool) -> Vec<(f64, f64)> {
    let missing: &[f64] = if quick {
        &[0.0, 0.2, 0.4]
    } else {
        &[0.0, 0.1, 0.2, 0.3, 0.4]
    };
    let noise: &[f64] = if quick {
        &[0.01, 0.05]
    } else {
        &[0.005, 0.01, 0.02, 0.05]
    };
    missing
        .iter()
        .flat_map(|&m| noise.iter().map(move |&n| (m, n)))
        .collect()
}

/// Runs the experiment on two threads. `progress` gets a line per finished row.
pub fn run_landmarks(
    options: &LandmarkOptions,
    progress: &mut dyn FnMut(&str),
) -> Result<Vec<LandmarkRow>, ExperimentError> {
    let trials = options
        .trials
        .unwrap_or(if options.quick { 10 } else { 100 });
    if trials == 0 {
        return Err(ExperimentError::NoTrials);
    }
    let grid = if options.settings.is_empty() {
        settings(options.quick)
    } else {
        options.settings.clone()
    };
    let chosen: Vec<Variant> = variants()
        .into_iter()
        .filter(|v| options.only.is_empty() || options.only.iter().any(|o| o == v.name))
        .collect();
    let mut rows = Vec::new();
    for &(missing, noise) in &grid {
        for v in &chosen {
            let tallies: Vec<Result<Tally, ExperimentError>> = std::thread::scope(|scope| {
                let handles: Vec<_> = (0..2u64)
                    .map(|worker| {
                        scope.spawn(move || {
                            let mut tally = Tally::default();
                            for trial in (worker..trials as u64).step_by(2) {
                                let seed = trial * 1_000_003
                                    + (missing * 1000.0) as u64 * 7919
                                    + (noise * 1e5) as u64;
                                run_trial(v, &make_trial(seed, missing, noise), &mut tally)?;
                            }
                            Ok(tally)
                        })
                    })
                    .collect();
                handles
                    .into_iter()
                    .map(|h| h.join().expect("experiment worker"))
                    .collect()
            });
            let mut t = Tally::default();
            for r in tallies {
                let r = r?;
                t.partnered += r.partnered;
                t.top1 += r.top1;
                t.top5 += r.top5;
                t.successes += r.successes;
                t.seconds += r.seconds;
                t.target_landmarks += r.target_landmarks;
                t.signatures += r.signatures;
                t.reference_landmarks += r.reference_landmarks;
            }
            let row = LandmarkRow {
                variant: v.name,
                missing_fraction: missing,
                noise_fraction: noise,
                trials,
                top1: t.top1 as f64 / t.partnered.max(1) as f64,
                top5: t.top5 as f64 / t.partnered.max(1) as f64,
                success_rate: t.successes as f64 / trials as f64,
                ms_per_landmark: 1000.0 * t.seconds / t.target_landmarks.max(1) as f64,
                signatures_per_landmark: t.signatures as f64 / t.reference_landmarks.max(1) as f64,
            };
            progress(&format!(
                "{:18} missing {:.1} noise {:.3}: top1 {:.3} top5 {:.3} success {:.3}",
                row.variant, missing, noise, row.top1, row.top5, row.success_rate
            ));
            rows.push(row);
        }
    }
    Ok(rows)
}

/// Writes `landmark-robustness.csv` and `landmark-robustness.md` into `out_dir` (created),
/// both or neither; other files in `out_dir` are kept.
pub fn write_landmarks(
    rows: &[LandmarkRow],
    out_dir: &Path,
) -> Result<Vec<PathBuf>, ExperimentError> {
    let mut csv = String::from("variant,missing_fraction,noise_fraction,trials,top1,top5,success_rate,ms_per_landmark,signatures_per_landmark\n");
    let mut md = String::from("| variant | missing | noise | trials | top-1 | top-5 | success | ms/landmark | signatures/landmark |\n|---|---:|---:|---:|---:|---:|---:|---:|---:|\n");
    for r in rows {
        // Each cell as the CSV and as the Markdown table write it.
        let cells = [
            (r.variant.to_string(), r.variant.to_string()),
            (
                r.missing_fraction.to_string(),
                format!("{:.0}%", 100.0 * r.missing_fraction),
            ),
            (
                r.noise_fraction.to_string(),
                format!("{:.1}%", 100.0 * r.noise_fraction),
            ),
            (r.trials.to_string(), r.trials.to_string()),
            (format!("{:.4}", r.top1), format!("{:.3}", r.top1)),
            (format!("{:.4}", r.top5), format!("{:.3}", r.top5)),
            (
                format!("{:.4}", r.success_rate),
                format!("{:.3}", r.success_rate),
            ),
            (
                format!("{:.4}", r.ms_per_landmark),
                format!("{:.4}", r.ms_per_landmark),
            ),
            (
                format!("{:.2}", r.signatures_per_landmark),
                format!("{:.1}", r.signatures_per_landmark),
            ),
        ];
        let (c, m): (Vec<String>, Vec<String>) = cells.into_iter().unzip();
        csv += &format!("{}\n", c.join(","));
        md += &format!("| {} |\n", m.join(" | "));
    }
    crate::emit::atomic::write_set(
        out_dir,
        &[
            ("landmark-robustness.csv", csv.as_bytes()),
            ("landmark-robustness.md", md.as_bytes()),
        ],
    )
    .map_err(|f| ExperimentError::Io {
        path: f.path,
        source: f.source,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::signatures;

    #[test]
    fn subset_signatures_survive_one_missing_neighbour() {
        // Remove one of a landmark's nearest neighbours: with leave-one-out, some signature of
        // the landmark is still exactly equal on both sides.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        let pts = crate::synth::jittered_grid(400, 20.0, &mut rng);
        let index = PointIndex::new(&pts).unwrap();
        let mut near = Vec::new();
        index.nearest_n(pts[0], 3, &mut near);
        let gone = near[2].0 as usize; // the landmark's second-nearest neighbour
        let fewer: Vec<[f64; 2]> = pts
            .iter()
            .enumerate()
            .filter(|(i, _)| *i != gone)
            .map(|(_, p)| *p)
            .collect();
        let params = SignatureParams {
            leave_out: 1,
            ..SignatureParams::plain(5)
        };
        let (po, fo) = (morton_order(&pts), morton_order(&fewer));
        let fi = PointIndex::new(&fewer).unwrap();
        let all = Survey {
            points: &pts,
            index: &index,
            order: &po,
        };
        let some = Survey {
            points: &fewer,
            index: &fi,
            order: &fo,
        };
        let a = signatures::compute("a", &all, &params, false, &mut |_| {}).unwrap();
        let b = signatures::compute("b", &some, &params, false, &mut |_| {}).unwrap();
        let keys_of = |s: &signatures::Signatures, l: u32| -> Vec<Vec<f64>> {
            (0..s.len())
                .filter(|&i| s.landmark(i) == l)
                .map(|i| s.key(i).to_vec())
                .collect()
        };
        let (ka, kb) = (keys_of(&a, 0), keys_of(&b, 0));
        assert_eq!(ka.len(), 6);
        let exact = ka.iter().any(|x| {
            kb.iter()
                .any(|y| x.iter().zip(y).all(|(p, q)| (p - q).abs() < 1e-12))
        });
        assert!(exact, "no exact common signature");
        // Without subsets the one signature changes.
        let plain = SignatureParams::plain(5);
        let a = signatures::compute("a", &all, &plain, false, &mut |_| {}).unwrap();
        let b = signatures::compute("b", &some, &plain, false, &mut |_| {}).unwrap();
        let (ka, kb) = (keys_of(&a, 0), keys_of(&b, 0));
        assert!(ka[0].iter().zip(&kb[0]).any(|(p, q)| (p - q).abs() > 1e-6));
    }

    #[test]
    fn zero_trials_are_refused() {
        let opts = LandmarkOptions {
            quick: true,
            trials: Some(0),
            only: vec!["walk".into()],
            settings: vec![(0.0, 0.01)],
        };
        assert!(matches!(
            run_landmarks(&opts, &mut |_| {}),
            Err(ExperimentError::NoTrials)
        ));
    }

    #[test]
    fn quick_grid_runs_and_missing_landmarks_hurt_top1() {
        let opts = LandmarkOptions {
            quick: true,
            trials: Some(2),
            only: vec!["walk".into()],
            settings: vec![(0.0, 0.01), (0.4, 0.01)],
        };
        let rows = run_landmarks(&opts, &mut |_| {}).unwrap();
        assert_eq!(rows.len(), 2);
        assert!(rows[0].top1 > rows[1].top1, "{rows:?}");
        assert!(rows[0].success_rate == 1.0);
    }
}
