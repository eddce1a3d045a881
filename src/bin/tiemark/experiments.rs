//! `tiemark experiment …`: the signature experiments (built with the `experiments` feature).

use clap::Subcommand;
use std::path::PathBuf;
use std::process::ExitCode;
use tiemark::emit;

#[derive(Subcommand)]
pub enum ExperimentCommand {
    /// Random polygons of four classes: nearest-neighbour retrieval of their signatures under noise.
    Retrieval {
        /// Output folder for retrieval.csv, retrieval.md and retrieval.svg (created; must be empty unless --force).
        #[arg(long)]
        out: PathBuf,
        /// Replace those files in a non-empty output folder.
        #[arg(long)]
        force: bool,
        /// Smaller sizes, for a quick look.
        #[arg(long)]
        quick: bool,
    },
    /// Landmark sets with missing and new landmarks and noise: each signature variant up to the end-to-end match.
    Landmarks {
        /// Output folder for landmark-robustness.csv and .md (created; must be empty unless --force).
        #[arg(long)]
        out: PathBuf,
        /// Replace those files in a non-empty output folder.
        #[arg(long)]
        force: bool,
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

/// The files each experiment writes (as the library names them).
const RETRIEVAL_FILES: [&str; 3] = ["retrieval.csv", "retrieval.md", "retrieval.svg"];
const LANDMARK_FILES: [&str; 2] = ["landmark-robustness.csv", "landmark-robustness.md"];

/// Runs one experiment and lists what it wrote. The output folder follows the rule of
/// `match`: new or empty, or `--force` (the files replaced all or none), checked before any
/// work and again before writing.
pub fn run(e: ExperimentCommand, quiet: bool) -> ExitCode {
    use tiemark::experiment::{landmarks, retrieval};
    let mut say = |m: &str| {
        if !quiet {
            eprintln!("{m}");
        }
    };
    let (out, force, files): (PathBuf, bool, &[&str]) = match &e {
        ExperimentCommand::Retrieval { out, force, .. } => (out.clone(), *force, &RETRIEVAL_FILES),
        ExperimentCommand::Landmarks { out, force, .. } => (out.clone(), *force, &LANDMARK_FILES),
    };
    let checked = match emit::check_output_dir(&out, force, files, &[]) {
        Ok(d) => d,
        Err(e) => return crate::fail(&crate::cli::flags(&e.to_string())),
    };
    let recheck = || emit::check_output_dir(&out, force, files, &[]).map(|_| ());
    let dir = checked.path.clone();
    let written = match e {
        ExperimentCommand::Retrieval { quick, .. } => {
            let options = retrieval::RetrievalOptions { quick, seed: 1 };
            let run = retrieval::run_retrieval(&options, &mut say);
            match recheck() {
                Ok(()) => {
                    retrieval::write_retrieval(&run, &options, &dir).map_err(|e| e.to_string())
                }
                Err(e) => Err(e.to_string()),
            }
        }
        ExperimentCommand::Landmarks {
            quick,
            trials,
            variant,
            setting,
            ..
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
            match landmarks::run_landmarks(&options, &mut say) {
                Ok(rows) => match recheck() {
                    Ok(()) => landmarks::write_landmarks(&rows, &dir).map_err(|e| e.to_string()),
                    Err(e) => Err(e.to_string()),
                },
                Err(e) => Err(e.to_string()),
            }
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
        Err(e) => crate::fail(&crate::cli::flags(&e)),
    }
}
