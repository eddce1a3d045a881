//! Stage and end-to-end timings on seeded synthetic surveys (ingest excluded).
//!
//! Run: `cargo bench --bench stages` (sizes 10k, 100k, 1M landmarks per survey), or
//! `cargo bench --bench stages -- 100000` for chosen sizes. Prints one Markdown table row per
//! size: seconds per stage, end to end, and the process's peak resident memory so far.
//! Surveys: jittered grid, 28% missing on each side, 25% new, noise 1% of the spacing, rotation
//! 37°, scale 2.7. Signature options: what the tool chooses for that survey size,
//! changed by `TIEMARK_K`, `TIEMARK_LEAVE_OUT`, `TIEMARK_H` and `TIEMARK_KEY_SPACE`
//! (`tests/common/overrides.rs`); `TIEMARK_MISSING`, `TIEMARK_EXTRA`, `TIEMARK_NOISE` the
//! surveys;
//! `TIEMARK_BENCH_VERBOSE=1` prints the robust fit's steps with their times.

#[path = "../common/overrides.rs"]
mod overrides;

use std::time::Instant;
use tiemark::fit::{self, Similarity};
use tiemark::matching;
use tiemark::pipeline::config::MatchingParams;
use tiemark::signatures;
use tiemark::spatial::{median_spacing, PointIndex};
use tiemark::synth::{make_pair, SynthParams};

fn peak_rss_mb() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines().find(|l| l.starts_with("VmHWM:")).and_then(|l| {
                l.split_whitespace()
                    .nth(1)
                    .and_then(|v| v.parse::<f64>().ok())
            })
        })
        .map(|kb| kb / 1024.0)
        .unwrap_or(f64::NAN)
}

fn main() {
    // `cargo bench` passes --bench; `cargo test --all-targets` (CI) does not: there the
    // benchmark is only built, not run.
    if !std::env::args().any(|a| a == "--bench") {
        println!("stages benchmark: built; run it with `cargo bench --bench stages`");
        return;
    }
    let sizes: Vec<usize> = {
        let args: Vec<usize> = std::env::args()
            .skip(1)
            .filter_map(|a| a.parse().ok())
            .collect();
        if args.is_empty() {
            vec![10_000, 100_000, 1_000_000]
        } else {
            args
        }
    };
    println!("| landmarks per survey | k, leave-out | trees | signatures | matching | robust fit | end to end | control points | peak memory |");
    println!("|---:|---:|---:|---:|---:|---:|---:|---:|---:|");
    for n in sizes {
        let truth = Similarity::from_params(2.7, 37f64.to_radians(), 5000.0, -300.0);
        let env = |k: &str, d: f64| {
            std::env::var(k)
                .ok()
                .and_then(|v| v.parse().ok())
                .unwrap_or(d)
        };
        let p = make_pair(&SynthParams {
            landmarks: n,
            missing: env("TIEMARK_MISSING", 0.28),
            extra: env("TIEMARK_EXTRA", 0.25),
            noise: env("TIEMARK_NOISE", 0.01),
            truth,
            seed: 7,
        });
        let t0 = Instant::now();
        let ri = PointIndex::new(&p.reference).expect("tree");
        let ti = PointIndex::new(&p.target).expect("tree");
        let spacing = median_spacing(&p.reference, &ri, 10_000).expect("spacing");
        let t1 = Instant::now();
        // What the tool would choose for surveys of this size, unless overridden.
        let choice = overrides::signature_choice();
        let params = choice.resolve(p.reference.len().min(p.target.len()));
        let rs = signatures::compute("reference", &p.reference, &ri, &params, &mut |_| {})
            .expect("signatures");
        let ts = signatures::compute("target", &p.target, &ti, &params, &mut |_| {})
            .expect("signatures");
        let t2 = Instant::now();
        let cands = matching::candidates(
            &rs,
            &ts,
            MatchingParams::default().candidates,
            MatchingParams::default().rank,
            &mut |_| {},
        );
        let t3 = Instant::now();
        let input = fit::FitInput {
            reference: &p.reference,
            target: &p.target,
            reference_index: &ri,
            target_index: &ti,
            reference_signatures: &rs,
            target_signatures: &ts,
            candidates: &cands,
            metres_per_unit: 1.0,
            reference_spacing: spacing,
        };
        let clock = Instant::now();
        let verbose = std::env::var_os("TIEMARK_BENCH_VERBOSE").is_some();
        let out = fit::robust_fit(&input, &fit::FitParams::default(), &mut |m| {
            if verbose {
                eprintln!("  {:>7.2} s  {m}", clock.elapsed().as_secs_f64());
            }
        });
        let t4 = Instant::now();
        let cps = match out {
            fit::FitOutcome::Found(s) => s.pairs.len().to_string(),
            fit::FitOutcome::NotFound(r) => format!("none ({})", r.reason),
        };
        let s = |a: Instant, b: Instant| format!("{:.2} s", (b - a).as_secs_f64());
        println!(
            "| {n} | {}, {} | {} | {} | {} | {} | {} | {cps} | {:.0} MB |",
            params.neighbours,
            params.leave_out,
            s(t0, t1),
            s(t1, t2),
            s(t2, t3),
            s(t3, t4),
            s(t0, t4),
            peak_rss_mb()
        );
    }
}
