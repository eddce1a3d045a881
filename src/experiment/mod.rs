//! Experiments that measure the signature stage (benchmarks of quality, not timed tests).
//!
//! - [`retrieval`]: random polygons of four classes, nearest-neighbour retrieval of their
//!   signatures under vertex noise, with and without the fixed vertex permutation.
//! - [`landmarks`]: neighbourhood signatures on generated landmark sets with missing and new
//!   landmarks and noise, per signature variant, up to the end-to-end match.

pub mod landmarks;
pub mod polygons;
pub mod retrieval;

/// An experiment could not write its results.
#[derive(Debug, thiserror::Error)]
pub enum ExperimentError {
    /// File-system trouble.
    #[error("{path}: {source}")]
    Io {
        /// Where.
        path: std::path::PathBuf,
        /// Cause.
        source: std::io::Error,
    },
    /// The plot could not be drawn.
    #[error("{path}: drawing the plot failed: {detail}")]
    Plot {
        /// Where.
        path: std::path::PathBuf,
        /// Why.
        detail: String,
    },
    /// Zero trials asked for: every share would be 0/0.
    #[error("--trials must be at least 1 (got 0): a share of no trials is not a number")]
    NoTrials,
    /// A stage failed on generated data (a bug, not a user error).
    #[error("the experiment's own data failed in the engine: {0}")]
    Engine(String),
}
