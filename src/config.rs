//! The configuration of one match, shared by the command line and pipeline files: one home
//! for every option and its default.
//!
//! [`MatchConfig`] is what the engine ([`crate::engine::match_surveys`]) needs: the two surveys
//! and the options of each stage. Each stage's options live with the stage
//! ([`FrameOptions`], [`SignatureChoice`], [`MatchingParams`], [`FitParams`]); their `Default`
//! is the tool's default, and the command line and pipeline files take their defaults from it.
//! Where the outputs go ([`OutputOptions`]) is not part of the match: the front ends decide
//! what to write.
//!
//! A pipeline file ([`PipelineFile`]) is TOML with the tables `[reference]`, `[target]`,
//! `[output]`, `[frame]`, `[signatures]`, `[matching]`, `[fit]`, `[keypoints]`, `[refine]` and
//! `[accuracy]` (and `[drift]` for a drift check); every key is listed in the
//! README ("Pipeline files"). Unknown keys are an error with line and column; relative paths
//! are taken from the pipeline file's folder. Errors name options by their pipeline-file key
//! (`fit.search_radius_m`); the command line renders those as its flags.
//!
//! ```toml
//! [reference]
//! path = "../sample-data/town-footprints-2019.gpkg"
//! id = "bldg_id"
//!
//! [target]
//! path = "../sample-data/town-survey-2026.geojson"
//! id = "uid"
//!
//! [output]
//! dir = "../target/demo-output"
//! ```

pub use crate::accuracy::AccuracyParams;
pub use crate::fit::FitParams;
pub use crate::frame::FrameOptions;
pub use crate::ingest::SurveyInput;
pub use crate::keypoints::KeypointParams;
pub use crate::matching::MatchingParams;
pub use crate::refine::RefineParams;
pub use crate::signatures::SignatureChoice;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// Where the outputs go (the front ends' business; the engine never writes).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct OutputOptions {
    /// Output folder (created).
    pub dir: PathBuf,
    /// Replace tiemark's files in an existing non-empty folder.
    #[serde(default)]
    pub force: bool,
    /// For a raster target: also write it warped onto the reference's grid
    /// (`target-coregistered.tif`) with this resampling (`nearest`, `bilinear`, `cubic`,
    /// `lanczos` or `average`); `None`: no warp.
    #[serde(default)]
    pub warp: Option<String>,
}

/// Everything one match needs.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MatchConfig {
    /// The older, trusted survey.
    pub reference: SurveyInput,
    /// The survey to bring onto the reference.
    pub target: SurveyInput,
    /// Working frame.
    pub frame: FrameOptions,
    /// Signature stage.
    pub signatures: SignatureChoice,
    /// Matching stage.
    pub matching: MatchingParams,
    /// Robust fit.
    pub fit: FitParams,
    /// Keypoints of raster surveys.
    pub keypoints: KeypointParams,
    /// Refinement of a raster match's control points on the pixels.
    pub refine: RefineParams,
    /// Where the accuracy figure comes from: checkpoints, a hold-out share, or leave-one-out.
    pub accuracy: AccuracyParams,
}

/// A pipeline file: a match and where its outputs go.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PipelineFile {
    /// `[reference]`.
    pub reference: SurveyInput,
    /// `[target]`.
    pub target: SurveyInput,
    /// `[output]`.
    pub output: OutputOptions,
    /// `[frame]`.
    #[serde(default)]
    pub frame: FrameOptions,
    /// `[signatures]`.
    #[serde(default)]
    pub signatures: SignatureChoice,
    /// `[matching]`.
    #[serde(default)]
    pub matching: MatchingParams,
    /// `[fit]`.
    #[serde(default)]
    pub fit: FitParams,
    /// `[keypoints]` (raster surveys).
    #[serde(default)]
    pub keypoints: KeypointParams,
    /// `[refine]` (two raster surveys).
    #[serde(default)]
    pub refine: RefineParams,
    /// `[accuracy]`: `checkpoints` (a CSV of surveyed marks), `holdout` (a share of the
    /// control points kept out of the fit).
    #[serde(default)]
    pub accuracy: AccuracyParams,
    /// `[drift]`: with it, `tiemark run` makes the drift check (`tiemark drift`) instead of a
    /// plain match.
    #[serde(default)]
    pub drift: Option<DriftParams>,
}

/// A configuration could not be used.
#[derive(Debug, thiserror::Error)]
pub enum ConfigError {
    /// Not readable.
    #[error("{path}: cannot read the pipeline file: {source}")]
    Read {
        /// File.
        path: PathBuf,
        /// Cause.
        source: std::io::Error,
    },
    /// Not valid.
    #[error("{path}: {message}")]
    Parse {
        /// File.
        path: PathBuf,
        /// The parser's message, with line and column.
        message: String,
    },
    /// A path key holds an empty string (which would silently mean the pipeline file's own
    /// folder).
    #[error("{path}: {key} is empty; {what} (relative paths are taken from the pipeline file's folder, e.g. {example})")]
    EmptyPath {
        /// File.
        path: PathBuf,
        /// The key (`output.dir`, `reference.path`, `target.path`).
        key: &'static str,
        /// What it should name.
        what: &'static str,
        /// An example value.
        example: &'static str,
    },
    /// A signature option is out of range.
    #[error(transparent)]
    Signatures(#[from] crate::signatures::SignatureError),
    /// A matching option is out of range.
    #[error(transparent)]
    Matching(#[from] crate::matching::MatchingParamsError),
    /// A fit option is out of range.
    #[error(transparent)]
    Fit(#[from] crate::fit::FitError),
    /// A keypoint option is out of range.
    #[error(transparent)]
    Keypoints(#[from] crate::keypoints::KeypointError),
    /// A refinement option is out of range.
    #[error(transparent)]
    Refine(#[from] crate::refine::ParamError),
    /// An accuracy option is out of range.
    #[error(transparent)]
    Accuracy(#[from] crate::accuracy::AccuracyParamsError),
}

impl MatchConfig {
    /// A configuration with every option at its default.
    pub fn new(reference: PathBuf, target: PathBuf) -> MatchConfig {
        MatchConfig {
            reference: SurveyInput::new(reference),
            target: SurveyInput::new(target),
            frame: FrameOptions::default(),
            signatures: SignatureChoice::default(),
            matching: MatchingParams::default(),
            fit: FitParams::default(),
            keypoints: KeypointParams::default(),
            refine: RefineParams::default(),
            accuracy: AccuracyParams::default(),
        }
    }

    /// Checks every option that needs no data.
    pub fn validate(&self) -> Result<(), ConfigError> {
        self.signatures.validate()?;
        self.matching.validate()?;
        self.fit.validate()?;
        self.keypoints.validate()?;
        self.refine.validate()?;
        self.accuracy.validate()?;
        Ok(())
    }
}

impl PipelineFile {
    /// Reads a pipeline file; relative paths are resolved against its folder.
    pub fn read(path: &Path) -> Result<PipelineFile, ConfigError> {
        let text = std::fs::read_to_string(path).map_err(|source| ConfigError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        let mut file: PipelineFile = toml::from_str(&text).map_err(|e| ConfigError::Parse {
            path: path.to_path_buf(),
            message: describe_toml_error(&text, &e),
        })?;
        for (key, value, what, example) in [
            (
                "output.dir",
                &file.output.dir,
                "give the folder the outputs go to",
                "dir = \"out\"",
            ),
            (
                "reference.path",
                &file.reference.path,
                "give the reference survey's file",
                "path = \"reference.gpkg\"",
            ),
            (
                "target.path",
                &file.target.path,
                "give the target survey's file",
                "path = \"target.gpkg\"",
            ),
        ] {
            if value.as_os_str().is_empty() {
                return Err(ConfigError::EmptyPath {
                    path: path.to_path_buf(),
                    key,
                    what,
                    example,
                });
            }
        }
        let base = path.parent().unwrap_or(Path::new("."));
        for p in [
            &mut file.reference.path,
            &mut file.target.path,
            &mut file.output.dir,
        ]
        .into_iter()
        .chain(file.accuracy.checkpoints.as_mut())
        {
            if p.is_relative() {
                *p = lexical_clean(&base.join(&*p));
            }
        }
        Ok(file)
    }

    /// The match and the output options.
    pub fn into_parts(self) -> (MatchConfig, OutputOptions) {
        let PipelineFile {
            reference,
            target,
            output,
            frame,
            signatures,
            matching,
            fit,
            keypoints,
            refine,
            accuracy,
            drift: _,
        } = self;
        let config = MatchConfig {
            reference,
            target,
            frame,
            signatures,
            matching,
            fit,
            keypoints,
            refine,
            accuracy,
        };
        (config, output)
    }
}

/// Removes `.` and `dir/..` from a path without touching the file system.
pub(crate) fn lexical_clean(p: &Path) -> PathBuf {
    use std::path::Component;
    let mut out: Vec<Component> = Vec::new();
    for c in p.components() {
        match c {
            Component::CurDir => {}
            Component::ParentDir if matches!(out.last(), Some(Component::Normal(_))) => {
                out.pop();
            }
            other => out.push(other),
        }
    }
    if out.is_empty() {
        PathBuf::from(".")
    } else {
        out.iter().collect()
    }
}

/// A TOML error with its line and column.
pub(crate) fn describe_toml_error(text: &str, e: &toml::de::Error) -> String {
    let msg = e.message().trim().to_string();
    match e.span() {
        Some(span) => {
            let before = &text[..span.start.min(text.len())];
            let line = before.matches('\n').count() + 1;
            let col = before
                .rsplit('\n')
                .next()
                .map(|l| l.chars().count())
                .unwrap_or(0)
                + 1;
            format!("line {line}, column {col}: {msg}")
        }
        None => msg,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unknown_key_reports_line_and_column() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("p.toml");
        std::fs::write(
            &p,
            "[reference]\npath = \"a.gpkg\"\n[target]\npath = \"b.gpkg\"\n[output]\ndir = \"o\"\n[fit]\ntolerence_m = 2\n",
        )
        .unwrap();
        let e = PipelineFile::read(&p).unwrap_err().to_string();
        assert!(e.contains("line 8, column 1"), "{e}");
        assert!(e.contains("tolerence_m"), "{e}");
    }

    #[test]
    fn relative_paths_follow_the_pipeline_file() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("p.toml");
        std::fs::write(&p, "[reference]\npath = \"a.gpkg\"\n[target]\npath = \"/abs/b.gpkg\"\n[output]\ndir = \"o\"\n").unwrap();
        let c = PipelineFile::read(&p).unwrap();
        assert_eq!(c.reference.path, dir.path().join("a.gpkg"));
        assert_eq!(c.target.path, PathBuf::from("/abs/b.gpkg"));
        assert_eq!(c.signatures, SignatureChoice::default());
    }

    #[test]
    fn empty_paths_are_refused_by_key() {
        // An empty output.dir used to be joined to the file's folder: the outputs went next to
        // the pipeline file.
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("p.toml");
        let body = |r: &str, t: &str, o: &str| {
            format!(
                "[reference]\npath = \"{r}\"\n[target]\npath = \"{t}\"\n[output]\ndir = \"{o}\"\n"
            )
        };
        for (text, key) in [
            (body("a.gpkg", "b.gpkg", ""), "output.dir"),
            (body("", "b.gpkg", "o"), "reference.path"),
            (body("a.gpkg", "", "o"), "target.path"),
        ] {
            std::fs::write(&p, text).unwrap();
            let e = PipelineFile::read(&p).unwrap_err().to_string();
            assert!(
                e.contains("p.toml") && e.contains(&format!("{key} is empty")),
                "{e}"
            );
        }
        std::fs::write(&p, body("a.gpkg", "b.gpkg", "o")).unwrap();
        assert_eq!(
            PipelineFile::read(&p).unwrap().output.dir,
            dir.path().join("o")
        );
    }

    #[test]
    fn key_space_is_read_and_a_wrong_one_is_named() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("p.toml");
        let head = "[reference]\npath = \"a.gpkg\"\n[target]\npath = \"b.gpkg\"\n[output]\ndir = \"o\"\n[signatures]\n";
        std::fs::write(&p, format!("{head}key_space = \"disc\"\n")).unwrap();
        let c = PipelineFile::read(&p).unwrap();
        assert_eq!(c.signatures.key_space, crate::signatures::KeySpace::Disc);
        std::fs::write(&p, format!("{head}key_space = \"cube\"\n")).unwrap();
        let e = PipelineFile::read(&p).unwrap_err().to_string();
        assert!(e.contains("line 8"), "{e}");
        assert!(e.contains("cube") && e.contains("sphere"), "{e}");
    }
}

/// Options of the drift check (pipeline table `[drift]`; checked by `crate::drift`).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DriftParams {
    /// The largest movement allowed, metres (globally anywhere over the overlap, and for any
    /// flagged area).
    pub tolerance_m: f64,
}
