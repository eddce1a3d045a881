//! The `tiemark` command: parses arguments, calls the library, writes what the library
//! computed, and turns the outcome into an exit code. Exit codes: 0 control points written,
//! 1 no consistent transform (nothing written), 2 bad input or any other error; `drift` (and a
//! pipeline with a `[drift]` table) also 3: the drift exceeds the tolerance (0: within it).

mod bars;
mod cli;
#[cfg(feature = "experiments")]
mod experiments;

use clap::Parser;
use cli::{Cli, Command};
use std::io::Write;
use std::path::Path;
use std::process::ExitCode;
use tiemark::config::{MatchConfig, OutputOptions, PipelineFile, SurveyInput};
use tiemark::{emit, engine, report};

/// Prints to stdout; a closed pipe is not an error.
fn print(text: &str) {
    let mut out = std::io::stdout().lock();
    let _ = out.write_all(text.as_bytes()).and_then(|_| out.flush());
}

/// Reports an error on stderr; exit code 2.
fn fail(message: &str) -> ExitCode {
    eprintln!("tiemark: error: {message}");
    ExitCode::from(2)
}

/// Where a configuration came from: the command line renders option keys as its flags.
#[derive(Clone, Copy)]
enum Source {
    CommandLine,
    PipelineFile,
}

impl Source {
    fn render(self, message: &str) -> String {
        match self {
            Source::CommandLine => cli::flags(message),
            Source::PipelineFile => message.to_string(),
        }
    }
}

/// What `match` and `drift` check before any work, so that a long run cannot end in these
/// errors: the resampling `output.warp` names, and the output folder (which may hold none of
/// the inputs: the surveys, the pipeline file, the checkpoints). `extra_files`: the names the
/// command writes besides the match's own.
fn prepare_outputs(
    config: &MatchConfig,
    output: &OutputOptions,
    pipeline: Option<&Path>,
    extra_files: &[&str],
) -> Result<(emit::Destination, Option<emit::raster::Resampling>), String> {
    let warp = match output.warp.as_deref() {
        None => None,
        Some(name) => Some(emit::raster::Resampling::from_name(name).ok_or_else(|| {
            format!(
                "output.warp = {name:?} is not a resampling; choose one of {}",
                emit::raster::Resampling::NAMES.join(", ")
            )
        })?),
    };
    let mut inputs = vec![
        config.reference.path.as_path(),
        config.target.path.as_path(),
    ];
    inputs.extend(pipeline);
    inputs.extend(config.accuracy.checkpoints.as_deref());
    let names: Vec<&str> = emit::FILES
        .iter()
        .chain(&emit::RASTER_FILES)
        .chain(extra_files)
        .copied()
        .collect();
    let out = emit::check_output_dir(&output.dir, output.force, &names, &inputs)
        .map_err(|e| e.to_string())?;
    Ok((out, warp))
}

/// Computes a match, writes its outputs if a transform was accepted, prints the summary.
/// `pipeline`: the pipeline file it came from, an input too.
fn run_match(
    config: &MatchConfig,
    output: &OutputOptions,
    pipeline: Option<&Path>,
    quiet: bool,
    source: Source,
) -> ExitCode {
    let error = |e: &dyn std::fmt::Display| fail(&source.render(&e.to_string()));
    let (out, warp) = match prepare_outputs(config, output, pipeline, &[]) {
        Ok(prepared) => prepared,
        Err(e) => return error(&e),
    };
    let bars = bars::Bars::new(quiet);
    let outcome = match engine::match_surveys(config, &bars) {
        Ok(o) => o,
        Err(e) => return error(&e),
    };
    let summary = source.render(&report::summary(&outcome));
    if outcome.solution().is_none() {
        print(&summary);
        return ExitCode::from(1);
    }
    match emit::write_all(&outcome, &out, &summary, warp, &bars) {
        Ok(files) => {
            print(&report::with_files(&summary, &files));
            ExitCode::SUCCESS
        }
        Err(e) => error(&e),
    }
}

/// `tiemark drift` (or a pipeline with a `[drift]` table): the match, then the drift check;
/// writes the match's files plus drift.json and drift-areas.gpkg, all or nothing. Exit codes:
/// 0 within the tolerance, 3 exceeded, 1 no consistent transform (nothing written), 2 error.
fn run_drift(
    config: &MatchConfig,
    output: &OutputOptions,
    params: &tiemark::drift::DriftParams,
    pipeline: Option<&Path>,
    quiet: bool,
    source: Source,
) -> ExitCode {
    use tiemark::drift::{self, Verdict};
    let error = |e: &dyn std::fmt::Display| fail(&source.render(&e.to_string()));
    // Refused before any work, so that a long run cannot end in these errors.
    if let Err(e) = params.validate() {
        return error(&e);
    }
    if config
        .target
        .crs
        .as_deref()
        .is_some_and(|c| c.trim().to_ascii_lowercase().starts_with("local"))
    {
        return error(&drift::DriftError::LocalGrid(
            config.target.path.display().to_string(),
        ));
    }
    let (out, warp) = match prepare_outputs(config, output, pipeline, &emit::drift::DRIFT_FILES) {
        Ok(prepared) => prepared,
        Err(e) => return error(&e),
    };
    let bars = bars::Bars::new(quiet);
    let outcome = match engine::match_surveys(config, &bars) {
        Ok(o) => o,
        Err(e) => return error(&e),
    };
    let summary = source.render(&report::summary(&outcome));
    if outcome.solution().is_none() {
        print(&summary);
        print("\ndrift: NO VERDICT: no consistent transform between the surveys, so their drift cannot be stated; nothing was written (exit code 1)\n");
        return ExitCode::from(1);
    }
    let found = match drift::analyse(&outcome, params) {
        Ok(d) => d,
        Err(e) => return error(&e),
    };
    let summary = format!("{summary}\n{}", found.summary());
    let wkt = outcome.frame.reference_crs.wkt.clone();
    let solution = outcome.solution().expect("an accepted match");
    let extra = |dir: &Path| {
        let names = emit::drift::write_drift_files(&found, &wkt, dir)?;
        // The drift check's page replaces the match's: its verdict, its numbers, its areas.
        emit::drift::write_drift_page(&outcome, solution, &found, &dir.join(emit::FILES[4]))?;
        Ok(names)
    };
    match emit::write_all_with(&outcome, &out, &summary, warp, &bars, &extra) {
        Ok(files) => {
            print(&report::with_files(&summary, &files));
            match found.verdict {
                Verdict::Within => ExitCode::SUCCESS,
                Verdict::Exceeded => ExitCode::from(3),
            }
        }
        Err(e) => error(&e),
    }
}

/// `tiemark landmarks`: read one dataset, write what tiemark sees in it.
fn run_landmarks(a: cli::LandmarksArgs) -> ExitCode {
    let input = SurveyInput {
        layer: a.layer,
        id: a.id,
        band: a.band,
        x_column: a.x_column,
        y_column: a.y_column,
        ..SurveyInput::new(a.file)
    };
    // Refused before reading, so that a long read cannot end in this error.
    let out = match emit::check_output_file(&a.out, a.force, &[input.path.as_path()]) {
        Ok(d) => d,
        Err(e) => return fail(&cli::flags(&e.to_string())),
    };
    let written = engine::read_survey(&input, &a.raster.params())
        .map_err(|e| e.to_string())
        .and_then(|set| {
            emit::write_landmarks(&set, &out).map_err(|e| e.to_string())?;
            Ok(set)
        });
    match written {
        Ok(set) => {
            print(&format!(
                "{} landmarks from {} ({}){} written to {}\n",
                set.points.len(),
                set.source.display(),
                set.what(),
                match set.skipped.total() {
                    0 => String::new(),
                    n => format!("; {n} features skipped ({})", set.skipped),
                },
                out.shown_path().display()
            ));
            ExitCode::SUCCESS
        }
        Err(e) => fail(&cli::flags(&e)),
    }
}

/// `tiemark epochs` (or an epochs pipeline): computes the library, writes it if every epoch
/// was joined to the base (exit 0), else prints the summary and writes nothing (exit 1).
fn run_epochs(
    config: &tiemark::epochs::EpochsConfig,
    output: &OutputOptions,
    pipeline: Option<&Path>,
    quiet: bool,
    command_line: bool,
) -> ExitCode {
    let render = |m: &str| {
        if command_line {
            cli::epoch_flags(m)
        } else {
            m.to_string()
        }
    };
    let error = |e: &dyn std::fmt::Display| fail(&render(&e.to_string()));
    let mut inputs: Vec<&Path> = config.epochs.iter().map(|e| e.path.as_path()).collect();
    inputs.extend(pipeline);
    // Checked before any work, so that a long run cannot end in these errors.
    if let Err(e) = config.validate() {
        return error(&e);
    }
    let out = match emit::check_output_dir(&output.dir, output.force, &emit::epochs::FILES, &inputs)
    {
        Ok(d) => d,
        Err(e) => return error(&e),
    };
    let outcome =
        match tiemark::epochs::run(config, &emit::epochs::COLUMNS, &bars::Bars::new(quiet)) {
            Ok(o) => o,
            Err(e) => return error(&e),
        };
    let summary = render(&emit::epochs::summary(&outcome));
    if !outcome.library.unjoined().is_empty() {
        print(&summary);
        print("Nothing was written: every epoch must be joined to the base.\n");
        return ExitCode::from(1);
    }
    match emit::epochs::write_all(&outcome, &out, &summary) {
        Ok(files) => {
            print(&emit::epochs::with_files(&summary, &files));
            ExitCode::SUCCESS
        }
        Err(e) => error(&e),
    }
}

/// On SIGINT, SIGTERM or SIGHUP: removes this run's staging folders and temporary files
/// (after any move into place in progress), then ends with exit code 128 + the signal's
/// number. The handlers signal-hook installs only write to a pipe (async-signal-safe); the
/// clean-up runs on a watcher thread, and the process ends with `_exit`, which runs no exit
/// handlers that could race the main thread (GDAL's).
fn watch_signals() {
    use signal_hook::consts::{SIGHUP, SIGINT, SIGTERM};
    let Ok(mut signals) = signal_hook::iterator::Signals::new([SIGINT, SIGTERM, SIGHUP]) else {
        return;
    };
    std::thread::spawn(move || {
        if let Some(signal) = signals.forever().next() {
            let found = emit::remove_leftovers();
            let name = match signal {
                SIGINT => "SIGINT",
                SIGTERM => "SIGTERM",
                _ => "SIGHUP",
            };
            let what = if found.completed {
                "the outputs were already complete and are in place"
            } else if found.removed > 0 {
                "nothing was written (the unfinished outputs were removed)"
            } else {
                "nothing was written"
            };
            eprintln!("tiemark: stopped by {name}; {what}");
            signal_hook::low_level::exit(128 + signal);
        }
    });
}

fn main() -> ExitCode {
    watch_signals();
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    match cli.command {
        Command::Match(args) => {
            let (config, output) = args.into_config();
            run_match(&config, &output, None, cli.quiet, Source::CommandLine)
        }
        Command::Run { pipeline } if tiemark::epochs::pipeline::is_epochs_pipeline(&pipeline) => {
            match tiemark::epochs::pipeline::EpochsPipelineFile::read(&pipeline) {
                Ok(file) => {
                    let (config, output) = file.into_parts();
                    run_epochs(&config, &output, Some(&pipeline), cli.quiet, false)
                }
                Err(e) => fail(&e.to_string()),
            }
        }
        Command::Epochs(a) => {
            let (config, output) = a.into_config();
            run_epochs(&config, &output, None, cli.quiet, true)
        }
        Command::Drift(args) => {
            let (config, output, drift) = args.into_drift();
            run_drift(
                &config,
                &output,
                &drift,
                None,
                cli.quiet,
                Source::CommandLine,
            )
        }
        Command::Run { pipeline } => match PipelineFile::read(&pipeline) {
            Ok(file) if file.drift.is_some() => {
                let drift = file.drift.expect("checked");
                let (config, output) = file.into_parts();
                run_drift(
                    &config,
                    &output,
                    &drift,
                    Some(&pipeline),
                    cli.quiet,
                    Source::PipelineFile,
                )
            }
            Ok(file) => {
                let (config, output) = file.into_parts();
                run_match(
                    &config,
                    &output,
                    Some(&pipeline),
                    cli.quiet,
                    Source::PipelineFile,
                )
            }
            Err(e) => fail(&e.to_string()),
        },
        Command::Landmarks(a) => run_landmarks(a),
        #[cfg(feature = "experiments")]
        Command::Experiment(e) => experiments::run(e, cli.quiet),
    }
}
