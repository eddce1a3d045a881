//! What one match computed: the result type below the engine and the writers.
//!
//! **In:** filled in by [`crate::engine`]. **Out:** read by the front ends, [`crate::emit`]
//! and [`crate::report`]. This module imports the stages' data types and nothing that imports
//! it back, so the module graph has no cycle: engine → outcome ← emit, report.

use crate::config::MatchConfig;
use crate::fit::{Rejection, Solution};
use crate::frame::WorkingFrame;
use crate::ingest::LandmarkSet;
use crate::signatures::SignatureParams;

/// What the signature and matching stages produced, and with which options.
#[derive(Debug, Clone)]
pub struct Search {
    /// Median nearest-neighbour spacing of the reference, working units.
    pub reference_spacing: f64,
    /// Reference signatures built.
    pub reference_signatures: usize,
    /// Target signatures built.
    pub target_signatures: usize,
    /// Candidate correspondences proposed.
    pub candidates: usize,
    /// The signature options used (the automatic choices resolved).
    pub signatures: SignatureParams,
}

/// One match, accepted or not (errors aside).
#[derive(Debug, Clone)]
pub struct MatchOutcome {
    /// The configuration used.
    pub config: MatchConfig,
    /// Reference landmarks as read.
    pub reference: LandmarkSet,
    /// Target landmarks as read.
    pub target: LandmarkSet,
    /// Both in the working frame.
    pub frame: WorkingFrame,
    /// What the signature and matching stages produced.
    pub search: Search,
    /// The accepted transform and its control points, or why none was accepted.
    pub fit: Result<Solution, Rejection>,
}

impl MatchOutcome {
    /// The accepted solution, if any.
    pub fn solution(&self) -> Option<&Solution> {
        self.fit.as_ref().ok()
    }

    /// Metres per working-frame unit.
    pub fn metres_per_unit(&self) -> f64 {
        self.frame.metres_per_unit()
    }
}
