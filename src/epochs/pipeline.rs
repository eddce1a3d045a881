//! The pipeline file of an epochs run (TOML): one `[[epoch]]` block per survey, in order.
//!
//! **In:** the file. **Out:** an [`EpochsConfig`] and the [`OutputOptions`]. Keys: each
//! `[[epoch]]` takes the keys of `[reference]` in a match (`path`, `layer`, `id`, `crs` — a
//! CRS or `local`, `local:m`, `local:ft`, `local:us-ft` —, `band`, `x_column`, `y_column`);
//! `[epochs]` takes `base` (from 1; default 1), `min_epochs` (default: all), `stability_m`,
//! `pairs` (`base-and-neighbours` or `all`); `[output]`, `[frame]`, `[signatures]`,
//! `[matching]`, `[fit]`, `[keypoints]` as in a match. Unknown keys are an error with line
//! and column; relative paths are taken from the file's folder.
//!
//! ```toml
//! [[epoch]]
//! path = "../sample-data/epoch-2019.csv"
//! id = "point"
//! crs = "EPSG:32633"
//!
//! [[epoch]]
//! path = "../sample-data/epoch-2022-site-grid.csv"
//! crs = "local:m"
//!
//! [epochs]
//! min_epochs = 3
//!
//! [output]
//! dir = "../target/control-point-library"
//! ```

use super::{EpochOptions, EpochsConfig};
use crate::config::{
    describe_toml_error, lexical_clean, ConfigError, FitParams, FrameOptions, KeypointParams,
    MatchingParams, OutputOptions, SignatureChoice, SurveyInput,
};
use serde::Deserialize;
use std::path::Path;

/// An epochs pipeline file.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EpochsPipelineFile {
    /// `[[epoch]]`, in order.
    pub epoch: Vec<SurveyInput>,
    /// `[epochs]`.
    #[serde(default)]
    pub epochs: EpochOptions,
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
    /// `[keypoints]`.
    #[serde(default)]
    pub keypoints: KeypointParams,
}

/// Whether the file at `path` is an epochs pipeline (it has `[[epoch]]` blocks). A file that
/// cannot be read or parsed is not (the match reader then reports what is wrong).
pub fn is_epochs_pipeline(path: &Path) -> bool {
    std::fs::read_to_string(path)
        .ok()
        .and_then(|t| t.parse::<toml::Table>().ok())
        .is_some_and(|t| t.contains_key("epoch"))
}

impl EpochsPipelineFile {
    /// Reads the file; relative paths are resolved against its folder.
    pub fn read(path: &Path) -> Result<EpochsPipelineFile, ConfigError> {
        let text = std::fs::read_to_string(path).map_err(|source| ConfigError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        let mut file: EpochsPipelineFile =
            toml::from_str(&text).map_err(|e| ConfigError::Parse {
                path: path.to_path_buf(),
                message: describe_toml_error(&text, &e),
            })?;
        if file.output.dir.as_os_str().is_empty() {
            return Err(ConfigError::EmptyPath {
                path: path.to_path_buf(),
                key: "output.dir",
                what: "give the folder the outputs go to",
                example: "dir = \"library\"",
            });
        }
        if file.epoch.iter().any(|e| e.path.as_os_str().is_empty()) {
            return Err(ConfigError::EmptyPath {
                path: path.to_path_buf(),
                key: "epoch.path",
                what: "give each [[epoch]] block its survey's file",
                example: "path = \"epoch-2019.gpkg\"",
            });
        }
        let base = path.parent().unwrap_or(Path::new("."));
        for p in file
            .epoch
            .iter_mut()
            .map(|e| &mut e.path)
            .chain(std::iter::once(&mut file.output.dir))
        {
            if p.is_relative() {
                *p = lexical_clean(&base.join(&*p));
            }
        }
        Ok(file)
    }

    /// The run and where its outputs go.
    pub fn into_parts(self) -> (EpochsConfig, OutputOptions) {
        let EpochsPipelineFile {
            epoch,
            epochs,
            output,
            frame,
            signatures,
            matching,
            fit,
            keypoints,
        } = self;
        (
            EpochsConfig {
                epochs: epoch,
                options: epochs,
                frame,
                signatures,
                matching,
                fit,
                keypoints,
            },
            output,
        )
    }
}
