//! `tiemark experiment …`: the signature experiments (built with the `experiments` feature).

use clap::Subcommand;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Subcommand)]
pub enum ExperimentCommand {
    /// Random polygons of four classes: nearest-neighbour retrieval of their signatures under noise.
    Retrieval {
        /// Output folder for retrieval.csv, retrieval.md and retrieval.svg.
        #[arg(long)]
        out: PathBuf,
        /// Smaller sizes, for a quick look.
        #[arg(long)]
        quick: bool,
    },
    /// Landmark sets with missing and new landmarks and noise: each signature variant up to the end-to-end match.
    Landmarks {
        /// Output folder for landmark-robustness.csv and .md.
        #[arg(long)]
        out: PathBuf,
        /// Fewer trials and settings, for a quick look.
        #[arg(long)]
        quick: bool,
        /// Trials per setting (default 100, quick 10).
        #[arg(long)]
        trials: Option<usize>,
        /// Only this variant (repeatable); see the module doc of tiemark::experiment::landmarks.
        #[arg(long)]
        variant: Vec<String>,
        /// Only this setting, as MISSING:NOISE fractions, e.g. 0.3:0.01 (repeatable).
        #[arg(long, value_parser = parse_setting)]
        setting: Vec<(f64, f64)>,
    },
}

fn parse_setting(s: &str) -> Result<(f64, f64), String> {
    let (m, n) = s
        .split_once(':')
        .ok_or("expected MISSING:NOISE, e.g. 0.3:0.01")?;
    let m: f64 = m.parse().map_err(|_| format!("'{m}' is not a number"))?;
    let n: f64 = n.parse().map_err(|_| format!("'{n}' is not a number"))?;
    if !(0.0..1.0).contains(&m) || !(0.0..1.0).contains(&n) {
        return Err("both fractions must be in [0, 1)".into());
    }
    Ok((m, n))
}

/// Runs one experiment and lists what it wrote.
pub fn run(e: ExperimentCommand, quiet: bool) -> ExitCode {
    use tiemark::experiment::{landmarks, retrieval};
    let mut say = |m: &str| {
        if !quiet {
            eprintln!("{m}");
        }
    };
    let written = match e {
        ExperimentCommand::Retrieval { out, quick } => {
            let options = retrieval::RetrievalOptions { quick, seed: 1 };
            let run = retrieval::run_retrieval(&options, &mut say);
            retrieval::write_retrieval(&run, &options, &out)
        }
        ExperimentCommand::Landmarks {
            out,
            quick,
            trials,
            variant,
            setting,
        } => {
            let known: Vec<&str> = landmarks::variants().iter().map(|v| v.name).collect();
            if let Some(bad) = variant.iter().find(|v| !known.contains(&v.as_str())) {
                return crate::fail(&format!(
                    "unknown variant '{bad}'; the variants are: {}",
                    known.join(", ")
                ));
            }
            let options = landmarks::LandmarkOptions {
                quick,
                trials,
                only: variant,
                settings: setting,
            };
            landmarks::run_landmarks(&options, &mut say)
                .and_then(|rows| landmarks::write_landmarks(&rows, &out))
        }
    };
    match written {
        Ok(files) => {
            let list: Vec<String> = files
                .iter()
                .map(|f| format!("  {}\n", f.display()))
                .collect();
            crate::print(&format!("written:\n{}", list.concat()));
            ExitCode::SUCCESS
        }
        Err(e) => crate::fail(&e.to_string()),
    }
}
