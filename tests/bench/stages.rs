//! Stage and end-to-end timings on seeded synthetic surveys (ingest excluded): the trees and
//! Morton orders, then the engine's own [`solve_points`], timed stage by stage through its
//! progress reports (so the benchmark measures what ships). "trees" includes the Morton
//! orders; "end to end" also the median spacing.
//!
//! Run: `cargo bench --bench stages` (sizes 10k, 100k, 1M landmarks per survey), or
//! `cargo bench --bench stages -- 100000` for chosen sizes. Prints one Markdown table row per
//! size: seconds per stage, end to end, and the process's peak resident memory so far.
//! Surveys: jittered grid, 28% missing on each side, 25% new, noise 1% of the spacing, rotation
//! 37°, scale 2.7. Signature options: what the tool chooses for that survey size,
//! changed by `TIEMARK_K`, `TIEMARK_LEAVE_OUT`, `TIEMARK_H` and `TIEMARK_KEY_SPACE`
//! (`tests/common/overrides.rs`); `TIEMARK_MISSING`, `TIEMARK_EXTRA`, `TIEMARK_NOISE` the
//! surveys;
//! `TIEMARK_BENCH_VERBOSE=1` prints the robust fit's steps with their times, and the peak memory
//! at the end of each stage.

#[path = "../common/overrides.rs"]
mod overrides;

use std::cell::RefCell;
use std::collections::HashMap;
use std::time::Instant;
use tiemark::config::MatchConfig;
use tiemark::engine::{solve_points, FrameFacts};
use tiemark::fit::Similarity;
use tiemark::progress::Progress;
use tiemark::spatial::{morton_order, PointIndex, Survey};
use tiemark::synth::{make_pair, SynthParams};

/// Records how long each stage of the engine takes (seconds, summed by stage name).
struct StageClock {
    started: RefCell<Option<(String, Instant)>>,
    seconds: RefCell<HashMap<String, f64>>,
    verbose: bool,
}

impl Progress for StageClock {
    fn begin(&self, stage: &str, _total: Option<u64>) {
        *self.started.borrow_mut() = Some((stage.to_string(), Instant::now()));
    }
    fn advance(&self, _done: u64) {}
    fn message(&self, message: &str) {
        if let (true, Some((_, t))) = (self.verbose, self.started.borrow().as_ref()) {
            eprintln!("  {:>7.2} s  {message}", t.elapsed().as_secs_f64());
        }
    }
    fn end(&self) {
        if let Some((stage, t)) = self.started.borrow_mut().take() {
            if self.verbose {
                eprintln!(
                    "  {stage}: done, peak memory so far {:.0} MB",
                    peak_rss_mb()
                );
            }
            *self.seconds.borrow_mut().entry(stage).or_default() += t.elapsed().as_secs_f64();
        }
    }
}

impl StageClock {
    fn of(&self, stages: &[&str]) -> f64 {
        let s = self.seconds.borrow();
        stages
            .iter()
            .map(|n| s.get(*n).copied().unwrap_or(0.0))
            .sum()
    }
}

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
        let (ro, to) = (morton_order(&p.reference), morton_order(&p.target));
        let t1 = Instant::now();
        // What the tool would choose for surveys of this size, unless overridden.
        let mut config = MatchConfig::new("reference".into(), "target".into());
        config.signatures = overrides::signature_choice();
        let clock = StageClock {
            started: RefCell::new(None),
            seconds: RefCell::new(HashMap::new()),
            verbose: std::env::var_os("TIEMARK_BENCH_VERBOSE").is_some(),
        };
        let (search, fit) = solve_points(
            &config,
            &Survey {
                points: &p.reference,
                index: &ri,
                order: &ro,
            },
            &Survey {
                points: &p.target,
                index: &ti,
                order: &to,
            },
            &FrameFacts::LOCAL_METRES,
            &clock,
            &["reference".into(), "target".into()],
        )
        .expect("synthetic surveys are valid");
        let end_to_end = t0.elapsed().as_secs_f64();
        let params = search.signatures;
        let cps = match fit {
            Ok(s) => s.pairs.len().to_string(),
            Err(r) => format!("none ({})", tiemark::report::reason(&r.reason)),
        };
        let s = |x: f64| format!("{x:.2} s");
        println!(
            "| {n} | {}, {} | {} | {} | {} | {} | {} | {cps} | {:.0} MB |",
            params.neighbours,
            params.leave_out,
            s((t1 - t0).as_secs_f64()),
            s(clock.of(&["reference signatures", "target signatures"])),
            s(clock.of(&["matching signatures"])),
            s(clock.of(&["robust fit"])),
            s(end_to_end),
            peak_rss_mb()
        );
    }
}
