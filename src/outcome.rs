//! What one match computed: the result type below the engine and the writers.
//!
//! **In:** filled in by [`crate::engine`]. **Out:** read by the front ends, [`crate::emit`]
//! and [`crate::report`]. This module imports the stages' data types and nothing that imports
//! it back, so the module graph has no cycle: engine → outcome ← emit, report.

use crate::accuracy::AccuracyReport;
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
    /// For two raster surveys: what refining the control points on the pixels did (the
    /// solution in `fit` is then the refitted one).
    pub pixels: Option<PixelRefinement>,
    /// The accuracy statement of an accepted match: the transform at the control points'
    /// centroid and the accuracy figure with its source (`None` when no transform was
    /// accepted).
    pub accuracy: Option<AccuracyReport>,
}

/// What the refinement on the pixels did to one control point it kept.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PointRefinement {
    /// The correlation measure's value at the peak.
    pub correlation: f64,
    /// How far the target position moved, metres.
    pub shift_m: f64,
}

/// What the refinement on the pixels did to the control points of a raster match.
#[derive(Debug, Clone, PartialEq)]
pub struct PixelRefinement {
    /// The correlation measure (`crate::refine::Measure` name).
    pub measure: String,
    /// Control points tried.
    pub tried: usize,
    /// Control points kept (refined, and the transform refitted on them).
    pub kept: usize,
    /// The ones not kept, by cause.
    pub not_kept: Vec<(String, usize)>,
    /// Per control point of the refitted solution, in its order.
    pub per_point: Vec<PointRefinement>,
    /// Median shift of the kept control points, metres.
    pub median_shift_m: f64,
    /// Why the refinement was not applied (the solution is then the keypoints' fit).
    pub not_applied: Option<String>,
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
