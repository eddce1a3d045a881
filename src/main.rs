//! The `tiemark` command: parses arguments, calls the library, turns the outcome into an exit
//! code. Exit codes: 0 control points written, 1 no consistent transform (nothing written),
//! 2 bad input or any other error.

use clap::{Args, Parser, Subcommand, ValueEnum};
use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;
use tiemark::fit::FitParams;
use tiemark::ingest::IngestOptions;
use tiemark::matching::Rank;
use tiemark::pipeline::config::{FrameSection, MatchingParams, OutputOptions, SurveyInput};
use tiemark::pipeline::{self, MatchConfig, MatchOutcome};
use tiemark::signatures::{KeySpace, SignatureChoice, SignatureParams, VertexOrder};

const EXIT_HELP: &str = "Exit codes: 0 control points written; 1 no consistent transform found (nothing written); 2 bad input or error.

Control points found automatically must be verified against independent checkpoints before use. Legal or engineering survey work defers to local regulations and licensed surveyors.";

#[derive(Parser)]
#[command(name = "tiemark", version, about = "Find the same landmarks in two georeferenced surveys and turn them into control points.", after_help = EXIT_HELP)]
struct Cli {
    #[command(subcommand)]
    command: Command,
    /// No progress bars.
    #[arg(long, short, global = true)]
    quiet: bool,
}

#[derive(Subcommand)]
enum Command {
    /// Match a target survey to a reference survey and write control points, transform and report.
    #[command(after_help = EXIT_HELP)]
    Match(Box<MatchArgs>),
    /// Write the landmarks tiemark extracts from one dataset (to inspect them).
    Landmarks(LandmarksArgs),
    /// Measure the signature stage (quality benchmarks; writes tables and a plot).
    #[command(subcommand)]
    Experiment(ExperimentCommand),
    /// Run a pipeline file (TOML; see pipelines/ for examples).
    #[command(after_help = EXIT_HELP)]
    Run {
        /// The pipeline file.
        pipeline: PathBuf,
    },
}

#[derive(Subcommand)]
enum ExperimentCommand {
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

#[derive(Clone, Copy, ValueEnum)]
enum OrderArg {
    /// Nearest-neighbour walk from the landmark.
    Walk,
    /// Counter-clockwise around the landmark from its nearest neighbour.
    Angular,
}

#[derive(Clone, Copy, ValueEnum)]
enum KeySpaceArg {
    /// Each ratio r as r / (1 + |r|) in the unit disc (two key dimensions per harmonic).
    Disc,
    /// Each ratio on the unit sphere by inverse stereographic projection (three per harmonic).
    Sphere,
}

#[derive(Clone, Copy, ValueEnum)]
enum RankArg {
    /// Plain distance between keys.
    Distance,
    /// Distance divided by the predicted noise of the two keys.
    Sensitivity,
}

#[derive(Args)]
struct MatchArgs {
    /// The reference survey (older, trusted): any GDAL vector dataset.
    reference: PathBuf,
    /// The target survey (to bring onto the reference).
    target: PathBuf,
    /// Output folder (created; must be empty unless --force).
    #[arg(long)]
    out: PathBuf,
    /// Replace tiemark's files in a non-empty output folder.
    #[arg(long)]
    force: bool,
    /// Layer of the reference (default: the only or first layer).
    #[arg(long)]
    reference_layer: Option<String>,
    /// Layer of the target.
    #[arg(long)]
    target_layer: Option<String>,
    /// Attribute holding reference landmark ids (default: the feature id).
    #[arg(long)]
    reference_id: Option<String>,
    /// Attribute holding target landmark ids.
    #[arg(long)]
    target_id: Option<String>,
    /// CRS of the reference, overriding the file's (anything PROJ accepts, e.g. EPSG:32633).
    #[arg(long)]
    reference_crs: Option<String>,
    /// CRS of the target, or "local" for an unreferenced local grid (the fit is then the site calibration).
    #[arg(long)]
    target_crs: Option<String>,
    /// Projected CRS to work in (default: the reference's, or the UTM zone of a geographic reference).
    #[arg(long)]
    working_crs: Option<String>,
    /// Inlier tolerance in metres (default: a quarter of the reference's median landmark spacing).
    #[arg(long, allow_negative_numbers = true)]
    tolerance: Option<f64>,
    /// Neighbours per signature polygon (default: 4 when the smaller survey has up to 50 000 landmarks, else 5).
    #[arg(long)]
    neighbours: Option<usize>,
    /// Vertex order of the signature polygon.
    #[arg(long, value_enum, default_value = "walk")]
    order: OrderArg,
    /// Fourier harmonics of the signature ratios, comma-separated (one or two).
    #[arg(long, value_delimiter = ',', default_value = "1,2")]
    harmonics: Vec<usize>,
    /// Where the signature ratios live as key coordinates.
    #[arg(long, value_enum, default_value = "sphere")]
    key_space: KeySpaceArg,
    /// Apply the fixed pseudo-random permutation to every polygon's vertex order.
    #[arg(long)]
    permuted: bool,
    /// Subset signatures: leave out 0, 1 or 2 of the nearest neighbours in every possible way (default: 2 up to 20 000 landmarks, 1 up to 50 000, else 0).
    #[arg(long)]
    leave_out: Option<usize>,
    /// Ambiguity-aware walk: follow both steps when they are within this relative margin (0: off).
    #[arg(long, allow_negative_numbers = true, default_value_t = SignatureParams::default().ambiguity)]
    ambiguity: f64,
    /// How candidates are ranked: by key distance, or by key distance over the keys' predicted noise sensitivity.
    #[arg(long, value_enum, default_value = "distance")]
    rank: RankArg,
    /// Reference signatures proposed per target signature.
    #[arg(long, default_value_t = MatchingParams::default().candidates)]
    candidates: usize,
    /// RANSAC confidence.
    #[arg(long, allow_negative_numbers = true, default_value_t = FitParams::default().confidence)]
    confidence: f64,
    /// Upper bound on RANSAC rounds.
    #[arg(long, default_value_t = FitParams::default().max_rounds)]
    max_rounds: usize,
    /// Seed of every random choice (results are reproducible for a given seed).
    #[arg(long, default_value_t = FitParams::default().seed)]
    seed: u64,
    /// Accept a transform only if the expected number of chance detections is below this.
    #[arg(long, allow_negative_numbers = true, default_value_t = FitParams::default().false_alarm_level)]
    false_alarm_level: f64,
    /// Fewest control points to accept a transform.
    #[arg(long, default_value_t = FitParams::default().min_control_points)]
    min_control_points: usize,
}

#[derive(Args)]
struct LandmarksArgs {
    /// The dataset.
    file: PathBuf,
    /// Output file (.gpkg, .geojson, .fgb or .csv).
    #[arg(long)]
    out: PathBuf,
    /// Layer (default: the only or first layer).
    #[arg(long)]
    layer: Option<String>,
    /// Attribute holding landmark ids (default: the feature id).
    #[arg(long)]
    id: Option<String>,
    /// Replace an existing output file.
    #[arg(long)]
    force: bool,
}

impl MatchArgs {
    fn into_config(self) -> MatchConfig {
        MatchConfig {
            reference: SurveyInput {
                path: self.reference,
                layer: self.reference_layer,
                id: self.reference_id,
                crs: self.reference_crs,
            },
            target: SurveyInput {
                path: self.target,
                layer: self.target_layer,
                id: self.target_id,
                crs: self.target_crs,
            },
            output: OutputOptions {
                dir: self.out,
                force: self.force,
            },
            frame: FrameSection {
                working_crs: self.working_crs,
            },
            signatures: SignatureChoice {
                neighbours: self.neighbours,
                order: match self.order {
                    OrderArg::Walk => VertexOrder::Walk,
                    OrderArg::Angular => VertexOrder::Angular,
                },
                harmonics: self.harmonics,
                key_space: match self.key_space {
                    KeySpaceArg::Disc => KeySpace::Disc,
                    KeySpaceArg::Sphere => KeySpace::Sphere,
                },
                permuted: self.permuted,
                leave_out: self.leave_out,
                ambiguity: self.ambiguity,
            },
            matching: MatchingParams {
                candidates: self.candidates,
                rank: match self.rank {
                    RankArg::Distance => Rank::Distance,
                    RankArg::Sensitivity => Rank::Sensitivity,
                },
            },
            fit: FitParams {
                tolerance_m: self.tolerance,
                confidence: self.confidence,
                max_rounds: self.max_rounds,
                seed: self.seed,
                false_alarm_level: self.false_alarm_level,
                min_control_points: self.min_control_points,
            },
        }
    }
}

/// Prints to stdout; a closed pipe is not an error.
fn print(text: &str) {
    let mut out = std::io::stdout().lock();
    let _ = out.write_all(text.as_bytes()).and_then(|_| out.flush());
}

fn run_config(cfg: &MatchConfig, quiet: bool) -> ExitCode {
    match pipeline::run_match(cfg, quiet) {
        Ok(MatchOutcome::Written { summary, .. }) => {
            print(&summary);
            ExitCode::SUCCESS
        }
        Ok(MatchOutcome::NoTransform { summary, .. }) => {
            print(&summary);
            ExitCode::from(1)
        }
        Err(e) => fail(&e),
    }
}

fn fail(e: &dyn std::fmt::Display) -> ExitCode {
    eprintln!("tiemark: error: {e:#}");
    ExitCode::from(2)
}

fn run_experiment(e: ExperimentCommand, quiet: bool) -> ExitCode {
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
                return fail(&format!(
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
            print(&format!("written:\n{}", list.concat()));
            ExitCode::SUCCESS
        }
        Err(e) => fail(&e),
    }
}

fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    match cli.command {
        Command::Match(args) => run_config(&args.into_config(), cli.quiet),
        Command::Experiment(e) => run_experiment(e, cli.quiet),
        Command::Run { pipeline } => match MatchConfig::from_file(&pipeline) {
            Ok(cfg) => run_config(&cfg, cli.quiet),
            Err(e) => fail(&e),
        },
        Command::Landmarks(a) => {
            let opts = IngestOptions {
                layer: a.layer,
                id_field: a.id,
            };
            match pipeline::extract_landmarks(&a.file, &opts, &a.out, a.force) {
                Ok(set) => {
                    print(&format!(
                        "{} landmarks from {} (layer {}){} written to {}\n",
                        set.points.len(),
                        set.source.display(),
                        set.layer,
                        if set.skipped_without_geometry > 0 {
                            format!(
                                "; {} features without geometry skipped",
                                set.skipped_without_geometry
                            )
                        } else {
                            String::new()
                        },
                        a.out.display()
                    ));
                    ExitCode::SUCCESS
                }
                Err(e) => fail(&e),
            }
        }
    }
}
