//! Options of the matching stage, with the tool's defaults.

use super::Rank;
use serde::{Deserialize, Serialize};

/// Matching options (`[matching]` in a pipeline file).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct MatchingParams {
    /// Reference signatures proposed per target signature (1-32).
    pub candidates: usize,
    /// How candidates are ranked.
    pub rank: Rank,
}

impl Default for MatchingParams {
    fn default() -> Self {
        MatchingParams {
            candidates: 3,
            rank: Rank::Distance,
        }
    }
}

impl std::fmt::Display for Rank {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Rank::Distance => "distance",
            Rank::Sensitivity => "sensitivity",
        })
    }
}

/// A matching option is out of range.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum MatchingParamsError {
    /// Candidates per query outside 1..=32.
    #[error("matching.candidates must be between 1 and 32 (got {0})")]
    InvalidCandidates(usize),
}

impl MatchingParams {
    /// Checks the options alone.
    pub fn validate(&self) -> Result<(), MatchingParamsError> {
        if !(1..=32).contains(&self.candidates) {
            return Err(MatchingParamsError::InvalidCandidates(self.candidates));
        }
        Ok(())
    }

    /// Whether the ranking reads the keys' predicted noise (so the signature stage must
    /// compute it).
    pub fn needs_sensitivity(&self) -> bool {
        self.rank == Rank::Sensitivity
    }
}
