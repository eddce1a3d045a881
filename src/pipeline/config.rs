//! The configuration of one match, shared by the command line and pipeline files.
//!
//! A pipeline file is TOML with these tables (unknown keys are an error, with line and
//! column); relative paths are taken from the pipeline file's folder:
//!
//! ```toml
//! [reference]
//! path = "../sample-data/town-footprints-2019.gpkg"
//! layer = "buildings"        # optional: default the only/first layer
//! id = "bldg_id"             # optional: default the feature id
//! crs = "EPSG:32633"         # optional: default the file's CRS
//!
//! [target]
//! path = "../sample-data/town-survey-2026.geojson"
//! id = "uid"
//! crs = "local"              # "local": an unreferenced local grid
//!
//! [output]
//! dir = "../target/demo-output"
//! force = false
//!
//! [frame]
//! working_crs = "EPSG:32633" # optional
//!
//! [signatures]
//! neighbours = 4            # optional: default by size (4 up to 50 000 landmarks, else 5)
//! order = "walk"             # or "angular"
//! harmonics = [1, 2]       # one or two harmonics
//! key_space = "sphere"     # or "disc"
//! permuted = false         # fixed pseudo-random permutation of the vertex order
//! leave_out = 1            # optional: subset signatures, leave out 0, 1 or 2 neighbours
//!                          # (default by size: 2 up to 20 000 landmarks, 1 up to 50 000, else 0)
//! ambiguity = 0.0          # walk branches where two steps are within this margin
//!
//! [matching]
//! candidates = 3
//! rank = "distance"        # or "sensitivity"
//!
//! [fit]
//! tolerance_m = 2.0          # optional: default a quarter of the reference's spacing
//! confidence = 0.999
//! max_rounds = 300000
//! seed = 20261201
//! false_alarm_level = 0.01
//! min_control_points = 5
//! ```

use crate::fit::FitParams;
use crate::signatures::SignatureChoice;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// One input survey.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SurveyInput {
    /// The dataset.
    pub path: PathBuf,
    /// Layer name.
    #[serde(default)]
    pub layer: Option<String>,
    /// Id field.
    #[serde(default)]
    pub id: Option<String>,
    /// CRS override, or "local" (target only).
    #[serde(default)]
    pub crs: Option<String>,
}

/// Where the outputs go.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct OutputOptions {
    /// Output folder (created).
    pub dir: PathBuf,
    /// Replace the files of an existing non-empty folder.
    #[serde(default)]
    pub force: bool,
}

/// Working-frame options.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FrameSection {
    /// Working CRS instead of the automatic choice.
    #[serde(default)]
    pub working_crs: Option<String>,
}

/// Matching options.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct MatchingParams {
    /// Reference signatures proposed per target signature.
    pub candidates: usize,
    /// How candidates are ranked.
    pub rank: crate::matching::Rank,
}

impl Default for MatchingParams {
    fn default() -> Self {
        MatchingParams {
            candidates: 3,
            rank: crate::matching::Rank::Distance,
        }
    }
}

/// Everything one match needs.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct MatchConfig {
    /// The older, trusted survey.
    pub reference: SurveyInput,
    /// The survey to bring onto the reference.
    pub target: SurveyInput,
    /// Outputs.
    pub output: OutputOptions,
    /// Working frame.
    #[serde(default)]
    pub frame: FrameSection,
    /// Signature stage.
    #[serde(default)]
    pub signatures: SignatureChoice,
    /// Matching stage.
    #[serde(default)]
    pub matching: MatchingParams,
    /// Robust fit.
    #[serde(default)]
    pub fit: FitParams,
}

/// A pipeline file could not be used.
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
    /// Invalid candidate count.
    #[error("candidates per query must be between 1 and 32 (got {0})")]
    InvalidCandidates(usize),
}

impl MatchConfig {
    /// A configuration with every option at its default.
    pub fn new(reference: PathBuf, target: PathBuf, out: PathBuf) -> MatchConfig {
        let input = |path| SurveyInput {
            path,
            layer: None,
            id: None,
            crs: None,
        };
        MatchConfig {
            reference: input(reference),
            target: input(target),
            output: OutputOptions {
                dir: out,
                force: false,
            },
            frame: FrameSection::default(),
            signatures: SignatureChoice::default(),
            matching: MatchingParams::default(),
            fit: FitParams::default(),
        }
    }

    /// Reads a pipeline file; relative paths are resolved against its folder.
    pub fn from_file(path: &Path) -> Result<MatchConfig, ConfigError> {
        let text = std::fs::read_to_string(path).map_err(|source| ConfigError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        let mut cfg: MatchConfig = toml::from_str(&text).map_err(|e| ConfigError::Parse {
            path: path.to_path_buf(),
            message: describe_toml_error(&text, &e),
        })?;
        let base = path.parent().unwrap_or(Path::new("."));
        for p in [
            &mut cfg.reference.path,
            &mut cfg.target.path,
            &mut cfg.output.dir,
        ] {
            if p.is_relative() {
                *p = lexical_clean(&base.join(&*p));
            }
        }
        Ok(cfg)
    }

    /// Checks every option that needs no data.
    pub fn validate(&self) -> Result<(), crate::pipeline::Error> {
        self.signatures.validate()?;
        self.fit.validate()?;
        if !(1..=32).contains(&self.matching.candidates) {
            return Err(ConfigError::InvalidCandidates(self.matching.candidates).into());
        }
        Ok(())
    }
}

/// Removes `.` and `dir/..` from a path without touching the file system.
fn lexical_clean(p: &Path) -> PathBuf {
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

fn describe_toml_error(text: &str, e: &toml::de::Error) -> String {
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
        let e = MatchConfig::from_file(&p).unwrap_err().to_string();
        assert!(e.contains("line 8, column 1"), "{e}");
        assert!(e.contains("tolerence_m"), "{e}");
    }

    #[test]
    fn relative_paths_follow_the_pipeline_file() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("p.toml");
        std::fs::write(&p, "[reference]\npath = \"a.gpkg\"\n[target]\npath = \"/abs/b.gpkg\"\n[output]\ndir = \"o\"\n").unwrap();
        let c = MatchConfig::from_file(&p).unwrap();
        assert_eq!(c.reference.path, dir.path().join("a.gpkg"));
        assert_eq!(c.target.path, PathBuf::from("/abs/b.gpkg"));
        assert_eq!(c.signatures, SignatureChoice::default());
    }

    #[test]
    fn key_space_is_read_and_a_wrong_one_is_named() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("p.toml");
        let head = "[reference]\npath = \"a.gpkg\"\n[target]\npath = \"b.gpkg\"\n[output]\ndir = \"o\"\n[signatures]\n";
        std::fs::write(&p, format!("{head}key_space = \"disc\"\n")).unwrap();
        let c = MatchConfig::from_file(&p).unwrap();
        assert_eq!(c.signatures.key_space, crate::signatures::KeySpace::Disc);
        std::fs::write(&p, format!("{head}key_space = \"cube\"\n")).unwrap();
        let e = MatchConfig::from_file(&p).unwrap_err().to_string();
        assert!(e.contains("line 8"), "{e}");
        assert!(e.contains("cube") && e.contains("sphere"), "{e}");
    }
}
