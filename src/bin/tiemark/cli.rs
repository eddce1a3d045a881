//! The command line: arguments (clap), parsed and checked without I/O, turned into the
//! library's configuration. Every default comes from the library's `Default`s; the library
//! names options by their pipeline-file keys, which [`flags`] renders as this command line's
//! flags.

use clap::{Args, Parser, Subcommand};
use serde::de::DeserializeOwned;
use std::path::PathBuf;
use tiemark::config::{
    AccuracyParams, FitParams, FrameOptions, KeypointParams, MatchConfig, MatchingParams,
    OutputOptions, RefineParams, SignatureChoice, SurveyInput,
};
use tiemark::fit::prior;
use tiemark::ingest::BandChoice;
use tiemark::matching::Rank;
use tiemark::signatures::{size_rule, KeySpace, VertexOrder};

/// Exit codes and the caution, after every command's help.
pub fn after_help() -> String {
    format!(
        "Exit codes: 0 control points written; 1 no consistent transform found, or an ambiguous one (nothing written); 2 bad input or error; 3 (a drift check, also through `tiemark run`) tolerance exceeded.\n\n{}",
        tiemark::report::CAUTION
    )
}

/// Exit codes of `drift` and the caution, after its help.
pub fn drift_after_help() -> String {
    format!(
        "Exit codes: 0 drift within the tolerance; 3 tolerance exceeded (globally somewhere over the overlap, or by an area that moved); 1 no consistent transform found (nothing written); 2 bad input or error.\n\n{}",
        tiemark::report::CAUTION
    )
}

#[derive(Parser)]
#[command(
    name = "tiemark",
    version,
    about = "Find the same landmarks in two georeferenced surveys and turn them into control points.",
    after_help = after_help()
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
    /// No progress bars.
    #[arg(long, short, global = true)]
    pub quiet: bool,
}

#[derive(Subcommand)]
pub enum Command {
    /// Match a target survey to a reference survey and write control points, transform and report.
    #[command(after_help = after_help())]
    Match(Box<MatchArgs>),
    /// Check the target against the reference for drift: match them, state how the target moved (globally and in local areas) and whether that exceeds --tolerance; writes the match's files plus drift.json and drift-areas.gpkg.
    #[command(
        after_help = drift_after_help(),
        mut_arg("tolerance", |a| a
            .help("The drift tolerance in metres: the largest movement allowed, globally anywhere over the overlap of the two surveys and for any area that moved")
            .value_name("M")
            .hide(false)
            .required(true))
    )]
    Drift(Box<MatchArgs>),
    /// Run a pipeline file (TOML; its keys are listed in the README, "Pipeline files").
    #[command(after_help = after_help())]
    Run {
        /// The pipeline file.
        pipeline: PathBuf,
    },
    /// Write the landmarks tiemark extracts from one dataset (to inspect them).
    Landmarks(LandmarksArgs),
    /// Build a library of persistent control points from several epochs of one site (per-epoch ids and CRSs: a pipeline file with [[epoch]] blocks, run with `tiemark run`).
    #[command(after_help = epochs_after_help())]
    Epochs(EpochsArgs),
    /// Measure the signature stage (quality benchmarks; writes tables and a plot).
    #[cfg(feature = "experiments")]
    #[command(subcommand)]
    Experiment(crate::experiments::ExperimentCommand),
}

/// Parses a value by its name in the library's serde form (one home for the names).
fn choice<T: DeserializeOwned>(s: &str) -> Result<T, String> {
    use serde::de::{value::StrDeserializer, IntoDeserializer};
    let d: StrDeserializer<serde::de::value::Error> = s.into_deserializer();
    T::deserialize(d).map_err(|e| e.to_string())
}

/// Parses a count (a whole number, no sign): clap's own error for `-1` would suggest `-- -1`,
/// which makes it a positional argument.
fn count<T: std::str::FromStr>(s: &str) -> Result<T, String> {
    s.parse()
        .map_err(|_| "expected a whole number such as 5 (no sign, no decimals)".to_string())
}

#[derive(Args)]
pub struct MatchArgs {
    /// The reference survey (older, trusted): any GDAL vector dataset, or a georeferenced raster image.
    reference: PathBuf,
    /// The target survey (to bring onto the reference).
    target: PathBuf,
    /// Output folder (created; must be empty unless --force).
    #[arg(long)]
    out: PathBuf,
    /// Replace tiemark's files in a non-empty output folder.
    #[arg(long)]
    force: bool,
    /// Raster target: also write it warped onto the reference's grid (target-coregistered.tif), resampled with nearest, bilinear, cubic, lanczos or average.
    #[arg(long, num_args = 0..=1, default_missing_value = "bilinear", value_name = "RESAMPLING")]
    warp: Option<String>,
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
    /// CSV reference: the column holding x (easting or longitude) [default: by name: x, lon, easting, …].
    #[arg(long)]
    reference_x_column: Option<String>,
    /// CSV reference: the column holding y (northing or latitude) [default: by name: y, lat, northing, …].
    #[arg(long)]
    reference_y_column: Option<String>,
    /// CSV target: the column holding x.
    #[arg(long)]
    target_x_column: Option<String>,
    /// CSV target: the column holding y.
    #[arg(long)]
    target_y_column: Option<String>,
    /// CRS of the reference, overriding the file's (anything PROJ accepts, e.g. EPSG:32633).
    #[arg(long)]
    reference_crs: Option<String>,
    /// CRS of the target, or "local" for an unreferenced local grid (the fit is then the site calibration); "local:m", "local:ft" (0.3048 m) or "local:us-ft" (1200/3937 m) declares its unit, and the report separates the grid scale factor from the unit conversion.
    #[arg(long)]
    target_crs: Option<String>,
    /// Band of a raster reference: a number from 1, or "luminance" (default: the only band, the luminance of an RGB image, else band 1).
    #[arg(long, value_parser = choice::<BandChoice>)]
    reference_band: Option<BandChoice>,
    /// Band of a raster target (as --reference-band).
    #[arg(long, value_parser = choice::<BandChoice>)]
    target_band: Option<BandChoice>,
    /// Projected CRS to work in (default: the reference's, or the UTM zone of a geographic reference).
    #[arg(long)]
    working_crs: Option<String>,
    /// Radius of the search in metres: how far a mapped landmark may lie from its partner in RANSAC, guided matching and the significance test (default: a quarter of the reference's median landmark spacing).
    #[arg(long, allow_negative_numbers = true, value_name = "M")]
    search_radius: Option<f64>,
    /// The largest residual in metres a control point may have (default: 99.9% of the residual spread, at most the search radius).
    #[arg(long, allow_negative_numbers = true, value_name = "M")]
    max_residual: Option<f64>,
    /// Transform model written: similarity, affine, polynomial2 (second order), or tps (thin-plate spline: the warp of a raster target only). Every model is fitted on the same control points and compared in the report, which says whether each richer one is warranted; none is chosen on its own.
    #[arg(long, value_parser = choice::<tiemark::fit::Model>, default_value_t = FitParams::default().model)]
    model: tiemark::fit::Model,
    /// Retired (it set both --search-radius and --max-residual): refused with a message naming them.
    #[arg(long, allow_negative_numbers = true, hide = true)]
    tolerance: Option<f64>,
    #[arg(long, allow_negative_numbers = true, help = format!("Largest shift in metres, at the target's centre, that the target's georeferencing may have; inf: no bound [default: {} for a georeferenced target, no bound for a local grid]", prior::DEFAULT_MAX_SHIFT_M))]
    max_shift: Option<f64>,
    #[arg(long, allow_negative_numbers = true, help = format!("Largest rotation in degrees the target's georeferencing may have [default: {} for a georeferenced target, no bound for a local grid]", prior::DEFAULT_MAX_ROTATION_DEG))]
    max_rotation: Option<f64>,
    #[arg(long, allow_negative_numbers = true, help = format!("Largest scale error in ppm the target's georeferencing may have [default: {} for a georeferenced target, no bound for a local grid]", prior::DEFAULT_MAX_SCALE_PPM))]
    max_scale_error: Option<f64>,

    /// Neighbours per signature polygon, 3-16 [default: by size, see --leave-out].
    #[arg(long, help_heading = "Signatures", allow_negative_numbers = true, value_parser = count::<usize>)]
    neighbours: Option<usize>,
    #[arg(long, help_heading = "Signatures", allow_negative_numbers = true, value_parser = count::<usize>, help = format!("Subset signatures: leave out 0, 1 or 2 of the nearest neighbours in every possible way [default: {}]", size_rule()))]
    leave_out: Option<usize>,

    /// Reference signatures proposed per target signature.
    #[arg(long, help_heading = "Robust fit", allow_negative_numbers = true, value_parser = count::<usize>, default_value_t = MatchingParams::default().candidates)]
    candidates: usize,
    /// RANSAC confidence.
    #[arg(long, help_heading = "Robust fit", allow_negative_numbers = true, default_value_t = FitParams::default().confidence)]
    confidence: f64,
    /// Upper bound on RANSAC rounds.
    #[arg(long, help_heading = "Robust fit", allow_negative_numbers = true, value_parser = count::<usize>, default_value_t = FitParams::default().max_rounds)]
    max_rounds: usize,
    /// Seed of every random choice (results are reproducible for a given seed).
    #[arg(long, help_heading = "Robust fit", allow_negative_numbers = true, value_parser = count::<u64>, default_value_t = FitParams::default().seed)]
    seed: u64,
    /// Accept a transform only if the expected number of chance detections is below this.
    #[arg(long, help_heading = "Robust fit", allow_negative_numbers = true, default_value_t = FitParams::default().false_alarm_level)]
    false_alarm_level: f64,
    /// Fewest control points to accept a transform.
    #[arg(long, help_heading = "Robust fit", allow_negative_numbers = true, value_parser = count::<usize>, default_value_t = FitParams::default().min_control_points)]
    min_control_points: usize,

    /// Research: vertex order of the signature polygon (walk or angular).
    #[arg(long, help_heading = "Signature research (to compare variants; the defaults are measured best)", value_parser = choice::<VertexOrder>, default_value_t = SignatureChoice::default().order)]
    order: VertexOrder,
    /// Research: Fourier harmonics of the signature ratios, comma-separated (one or two) [default: 1,2; 1 with 3 neighbours].
    #[arg(
        long,
        help_heading = "Signature research (to compare variants; the defaults are measured best)",
        value_delimiter = ','
    )]
    harmonics: Vec<usize>,
    /// Research: where the signature ratios live as key coordinates (sphere or disc).
    #[arg(long, help_heading = "Signature research (to compare variants; the defaults are measured best)", value_parser = choice::<KeySpace>, default_value_t = SignatureChoice::default().key_space)]
    key_space: KeySpace,
    /// Research: apply the fixed pseudo-random permutation to every polygon's vertex order.
    #[arg(
        long,
        help_heading = "Signature research (to compare variants; the defaults are measured best)"
    )]
    permuted: bool,
    /// Research: follow both steps of the walk when they are within this relative margin (0: off).
    #[arg(long, help_heading = "Signature research (to compare variants; the defaults are measured best)", allow_negative_numbers = true, default_value_t = SignatureChoice::default().ambiguity)]
    ambiguity: f64,
    /// Research: rank candidates by key distance, or by key distance over the keys' predicted noise (distance or sensitivity).
    #[arg(long, help_heading = "Signature research (to compare variants; the defaults are measured best)", value_parser = choice::<Rank>, default_value_t = MatchingParams::default().rank)]
    rank: Rank,
    #[command(flatten)]
    raster: KeypointArgs,

    /// A CSV of surveyed checkpoints (columns id, reference_x, reference_y in the reference's CRS, target_x, target_y in the target's): the accuracy figure comes from them.
    #[arg(long, help_heading = "Accuracy", value_name = "FILE")]
    checkpoints: Option<PathBuf>,
    /// Keep this share (0-1) of the control points out of the final fit, seeded by --seed, and measure the accuracy on them [default: neither; leave-one-out residuals of the control points].
    #[arg(
        long,
        help_heading = "Accuracy",
        allow_negative_numbers = true,
        value_name = "SHARE"
    )]
    holdout: Option<f64>,
}

#[derive(Args)]
pub struct LandmarksArgs {
    /// The dataset.
    pub file: PathBuf,
    /// Output file (.gpkg, .geojson, .fgb or .csv).
    #[arg(long)]
    pub out: PathBuf,
    /// Layer (default: the only or first layer).
    #[arg(long)]
    pub layer: Option<String>,
    /// Attribute holding landmark ids (default: the feature id).
    #[arg(long)]
    pub id: Option<String>,
    /// Band of a raster image: a number from 1, or "luminance" (default: the only band, the luminance of an RGB image, else band 1).
    #[arg(long, value_parser = choice::<BandChoice>)]
    pub band: Option<BandChoice>,
    /// CSV only: the column holding x (easting or longitude) [default: by name: x, lon, easting, …].
    #[arg(long)]
    pub x_column: Option<String>,
    /// CSV only: the column holding y (northing or latitude) [default: by name: y, lat, northing, …].
    #[arg(long)]
    pub y_column: Option<String>,
    /// Replace an existing output file.
    #[arg(long)]
    pub force: bool,
    #[command(flatten)]
    pub raster: KeypointArgs,
}

/// Options of the keypoint detector for raster surveys (`match` and `landmarks`).
#[derive(Args, Debug)]
pub struct KeypointArgs {
    #[arg(long, help_heading = "Raster surveys", allow_negative_numbers = true, help = format!("Size (diameter) in metres on the ground of the features found as keypoints in a raster [default: {} of the coarser image's pixels]", KeypointParams::default().default_feature_size_m(1.0, 1.0)))]
    feature_size: Option<f64>,
    /// Keypoints kept at most in a raster, spread over the image.
    #[arg(long, help_heading = "Raster surveys", default_value_t = KeypointParams::default().target_count)]
    keypoints: usize,
}

impl KeypointArgs {
    /// The detector's options.
    pub fn params(&self) -> KeypointParams {
        KeypointParams {
            feature_size_m: self.feature_size,
            target_count: self.keypoints,
            ..KeypointParams::default()
        }
    }
}

impl MatchArgs {
    /// For `drift`: the match, where its outputs go, and the drift options (`--tolerance` is
    /// the drift tolerance there, and sets no fit option).
    pub fn into_drift(mut self) -> (MatchConfig, OutputOptions, tiemark::drift::DriftParams) {
        let tolerance_m = self.tolerance.take().unwrap_or(f64::NAN);
        let (config, output) = self.into_config();
        (config, output, tiemark::drift::DriftParams { tolerance_m })
    }

    /// The match and where its outputs go.
    pub fn into_config(self) -> (MatchConfig, OutputOptions) {
        let config = MatchConfig {
            reference: SurveyInput {
                path: self.reference,
                layer: self.reference_layer,
                id: self.reference_id,
                crs: self.reference_crs,
                band: self.reference_band,
                x_column: self.reference_x_column,
                y_column: self.reference_y_column,
            },
            target: SurveyInput {
                path: self.target,
                layer: self.target_layer,
                id: self.target_id,
                crs: self.target_crs,
                band: self.target_band,
                x_column: self.target_x_column,
                y_column: self.target_y_column,
            },
            frame: FrameOptions {
                working_crs: self.working_crs,
            },
            signatures: SignatureChoice {
                neighbours: self.neighbours,
                leave_out: self.leave_out,
                order: self.order,
                harmonics: self.harmonics,
                key_space: self.key_space,
                permuted: self.permuted,
                ambiguity: self.ambiguity,
            },
            matching: MatchingParams {
                candidates: self.candidates,
                rank: self.rank,
            },
            fit: FitParams {
                search_radius_m: self.search_radius,
                max_residual_m: self.max_residual,
                tolerance_m: self.tolerance,
                model: self.model,
                confidence: self.confidence,
                max_rounds: self.max_rounds,
                seed: self.seed,
                false_alarm_level: self.false_alarm_level,
                min_control_points: self.min_control_points,
                max_shift_m: self.max_shift,
                max_rotation_deg: self.max_rotation,
                max_scale_ppm: self.max_scale_error,
            },
            keypoints: self.raster.params(),
            refine: RefineParams::default(),
            accuracy: AccuracyParams {
                checkpoints: self.checkpoints,
                holdout: self.holdout,
            },
        };
        let output = OutputOptions {
            dir: self.out,
            force: self.force,
            warp: self.warp,
        };
        (config, output)
    }
}

// ---- tiemark epochs --------------------------------------------------------------------------

/// Exit codes of `epochs`, and the caution.
pub fn epochs_after_help() -> String {
    format!(
        "Exit codes: 0 library written; 1 some epoch could not be joined to the base (no accepted match links it; nothing written); 2 bad input or error.\n\n{}",
        tiemark::report::CAUTION
    )
}

#[derive(Args)]
pub struct EpochsArgs {
    /// The epochs: two or more surveys of the site (any dataset `match` reads), in time order.
    #[arg(required = true, num_args = 1..)]
    epochs: Vec<PathBuf>,
    /// Output folder (created; must be empty unless --force).
    #[arg(long)]
    out: PathBuf,
    /// Replace tiemark's files in a non-empty output folder.
    #[arg(long)]
    force: bool,
    /// Attribute holding landmark ids in every epoch (default: the feature id).
    #[arg(long)]
    id: Option<String>,
    /// The base epoch, numbered from 1 in the order given: the library is expressed in its CRS.
    #[arg(long, allow_negative_numbers = true, value_parser = count::<usize>, default_value_t = tiemark::epochs::EpochOptions::default().base)]
    base: usize,
    /// Keep the landmarks seen in at least this many epochs [default: all].
    #[arg(long, allow_negative_numbers = true, value_parser = count::<usize>)]
    min_epochs: Option<usize>,
    /// Keep the landmarks whose positions in the base frame agree within this many metres.
    #[arg(long, allow_negative_numbers = true)]
    stability: Option<f64>,
    /// Match every pair of epochs (default: each against the base and the next, 2N-3 matches).
    #[arg(long)]
    all_pairs: bool,
    /// Seed of every random choice.
    #[arg(long, allow_negative_numbers = true, value_parser = count::<u64>, default_value_t = FitParams::default().seed)]
    seed: u64,
}

impl EpochsArgs {
    /// The run and where its outputs go.
    pub fn into_config(self) -> (tiemark::epochs::EpochsConfig, OutputOptions) {
        let mut config = tiemark::epochs::EpochsConfig::new(self.epochs);
        for e in &mut config.epochs {
            e.id.clone_from(&self.id);
        }
        config.options = tiemark::epochs::EpochOptions {
            base: self.base,
            min_epochs: self.min_epochs,
            stability_m: self.stability,
            pairs: if self.all_pairs {
                tiemark::epochs::PairPlan::All
            } else {
                tiemark::epochs::PairPlan::BaseAndNeighbours
            },
        };
        config.fit.seed = self.seed;
        let output = OutputOptions {
            dir: self.out,
            force: self.force,
            warp: None,
        };
        (config, output)
    }
}

/// Pipeline-file keys of an epochs run and the flags of `epochs` that set them.
const EPOCH_FLAGS: &[(&str, &str)] = &[
    ("epochs.base", "--base"),
    ("epochs.min_epochs", "--min-epochs"),
    ("epochs.stability_m", "--stability"),
    ("fit.seed", "--seed"),
    ("output.dir", "--out"),
    ("output.force", "--force"),
];

/// A library message of an epochs run with its keys rendered as the flags of `epochs`.
pub fn epoch_flags(message: &str) -> String {
    let mut out = message.to_string();
    for (key, flag) in EPOCH_FLAGS {
        out = out.replace(key, flag);
    }
    out
}

/// Pipeline-file keys the library names in its messages, and the flags of `match` and
/// `landmarks` that set them.
const FLAGS: &[(&str, &str)] = &[
    ("reference.layer", "--reference-layer"),
    ("reference.id", "--reference-id"),
    ("reference.crs", "--reference-crs"),
    ("reference.x_column", "--reference-x-column"),
    ("reference.y_column", "--reference-y-column"),
    ("target.layer", "--target-layer"),
    ("target.id", "--target-id"),
    ("target.crs", "--target-crs"),
    ("reference.band", "--reference-band"),
    ("target.band", "--target-band"),
    ("target.x_column", "--target-x-column"),
    ("target.y_column", "--target-y-column"),
    ("frame.working_crs", "--working-crs"),
    ("signatures.neighbours", "--neighbours"),
    ("signatures.leave_out", "--leave-out"),
    ("signatures.order", "--order"),
    ("signatures.harmonics", "--harmonics"),
    ("signatures.key_space", "--key-space"),
    ("signatures.permuted", "--permuted"),
    ("signatures.ambiguity", "--ambiguity"),
    ("matching.candidates", "--candidates"),
    ("matching.rank", "--rank"),
    ("fit.search_radius_m", "--search-radius"),
    ("fit.max_residual_m", "--max-residual"),
    ("fit.tolerance_m", "--tolerance"),
    ("fit.model", "--model"),
    ("fit.confidence", "--confidence"),
    ("fit.max_rounds", "--max-rounds"),
    ("keypoints.feature_size_m", "--feature-size"),
    ("output.warp", "--warp"),
    ("keypoints.target_count", "--keypoints"),
    ("fit.seed", "--seed"),
    ("fit.false_alarm_level", "--false-alarm-level"),
    ("fit.min_control_points", "--min-control-points"),
    ("fit.max_shift_m", "--max-shift"),
    ("fit.max_rotation_deg", "--max-rotation"),
    ("fit.max_scale_ppm", "--max-scale-error"),
    ("accuracy.checkpoints", "--checkpoints"),
    ("accuracy.holdout", "--holdout"),
    ("drift.tolerance_m", "--tolerance"),
    ("output.dir", "--out"),
    ("output.force", "--force"),
];

/// A library message with its option keys rendered as command-line flags.
pub fn flags(message: &str) -> String {
    let mut out = message.to_string();
    for (key, flag) in FLAGS {
        out = out.replace(key, flag);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::CommandFactory;

    #[test]
    fn arguments_are_consistent() {
        Cli::command().debug_assert();
    }

    #[test]
    fn every_flag_in_the_table_exists() {
        let cmd = Cli::command();
        let m = cmd.find_subcommand("match").expect("match");
        for (_, flag) in FLAGS {
            let name = flag.trim_start_matches("--");
            assert!(
                m.get_arguments().any(|a| a.get_long() == Some(name)),
                "{flag} is not a flag of match"
            );
        }
    }

    #[test]
    fn defaults_are_the_librarys() {
        let cli = Cli::try_parse_from(["tiemark", "match", "a", "b", "--out", "o"]).unwrap();
        let Command::Match(args) = cli.command else {
            panic!("not match")
        };
        let (config, _) = args.into_config();
        assert_eq!(config, MatchConfig::new("a".into(), "b".into()));
    }

    #[test]
    fn band_flags_take_a_number_or_luminance() {
        let cli = Cli::try_parse_from([
            "tiemark",
            "match",
            "a",
            "b",
            "--out",
            "o",
            "--reference-band",
            "2",
            "--target-band",
            "luminance",
        ])
        .unwrap();
        let Command::Match(args) = cli.command else {
            panic!("not match")
        };
        let (config, _) = args.into_config();
        assert_eq!(config.reference.band, Some(BandChoice::Band(2)));
        assert_eq!(config.target.band, Some(BandChoice::Luminance));
        for bad in ["0", "red", "-1"] {
            assert!(
                Cli::try_parse_from(["tiemark", "landmarks", "f", "--out", "o", "--band", bad])
                    .is_err(),
                "{bad}"
            );
        }
    }

    #[test]
    fn drift_takes_the_match_options_and_a_required_tolerance() {
        let cli = Cli::try_parse_from([
            "tiemark",
            "drift",
            "a",
            "b",
            "--out",
            "o",
            "--tolerance",
            "0.05",
            "--seed",
            "7",
        ])
        .unwrap();
        let Command::Drift(args) = cli.command else {
            panic!("not drift")
        };
        let (config, _, drift) = args.into_drift();
        assert_eq!(drift.tolerance_m, 0.05);
        assert_eq!(config.fit.seed, 7);
        let mut plain = MatchConfig::new("a".into(), "b".into());
        plain.fit.seed = 7;
        assert_eq!(config, plain, "--tolerance sets no fit option under drift");
        assert!(Cli::try_parse_from(["tiemark", "drift", "a", "b", "--out", "o"]).is_err());
    }

    #[test]
    fn keys_become_flags() {
        assert_eq!(
            flags("signatures.neighbours must be between 3 and 16"),
            "--neighbours must be between 3 and 16"
        );
    }
}
