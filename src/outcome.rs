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

/// The caution every report and every result carries.
pub const CAUTION: &str = "Control points found automatically must be verified against independent checkpoints before use. Legal or engineering survey work defers to local regulations and licensed surveyors.";

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
    /// For two raster surveys: whether the area-based seed ran, and what it found
    /// (`crate::engine`'s area seed; when it ran and succeeded, `reference`, `target`,
    /// `frame` and `fit` are its grid control points).
    pub area_seed: Option<AreaSeed>,
}

/// One seed the area-based search tried: a coarse correlation peak and what the grid of
/// patches made of it.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct SeedTried {
    /// Rotation of the seed, degrees counter-clockwise.
    pub rotation_deg: f64,
    /// Scale error of the seed, ppm.
    pub scale_ppm: f64,
    /// Shift of the seed at the target's centre, east and north, metres.
    pub shift_m: [f64; 2],
    /// The coarse orientation correlation at the peak (mean cosine over the target).
    pub score: f64,
    /// Grid points inside the target's footprint under the seed.
    pub grid_points: usize,
    /// Of those, refined with a clear correlation peak.
    pub refined: usize,
    /// Of those, consistent with the fit on them (the support).
    pub support: usize,
}

/// When the area-based seed of a raster match runs, in the words the report and
/// `transform.json` use.
pub const AREA_SEED_RULE: &str = "runs when both surveys are rasters on the working CRS and the keypoint match found no accepted transform";

/// What the area-based seed of a raster match did.
#[derive(Debug, Clone)]
pub struct AreaSeed {
    /// Whether the search ran.
    pub ran: bool,
    /// Why it ran or did not, in words (with the rule).
    pub why: String,
    /// The keypoint match's rejection that made it run.
    pub keypoints: Option<Rejection>,
    /// Ground sample of the coarse search, metres (NaN when it did not run).
    pub coarse_m: f64,
    /// The coarse measure (`crate::refine::Measure` name).
    pub measure: String,
    /// Similarities (rotation × scale steps) the coarse search compared at every shift.
    pub hypotheses: usize,
    /// How far the best coarse peak stands above the surface: (peak − mean) / standard
    /// deviation over every similarity and shift.
    pub z: f64,
    /// The seeds tried, best coarse peak first.
    pub seeds: Vec<SeedTried>,
    /// Which of `seeds` was chosen (the largest support).
    pub chosen: Option<usize>,
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
