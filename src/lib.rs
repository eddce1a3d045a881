//! # tiemark
//!
//! Finds the same landmarks in two georeferenced surveys of one place and turns them into
//! control points: the similarity transform between the surveys, its accuracy, and the residual
//! of every point.
//!
//! The stages, one module each, data flowing one way:
//!
//! | stage | module | in | out |
//! |---|---|---|---|
//! | 1 | [`ingest`] | a GDAL vector dataset | [`ingest::LandmarkSet`]: ids, positions, CRS |
//! | 2 | [`frame`] | two landmark sets, CRS choices | [`frame::WorkingFrame`]: both in one projected CRS |
//! | 3 | [`signatures`] | positions | [`signatures::Signatures`]: one invariant key per neighbourhood |
//! | 4 | [`matching`] | two signature sets | [`matching::Candidate`]s |
//! | 5 | [`fit`] | candidates, positions | [`fit::FitOutcome`]: transform, control points, significance |
//! | 6 | [`emit`], [`report`] | a [`pipeline::MatchResult`] | control-point files, transform, report |
//!
//! [`pipeline`] holds the configuration shared by the command line and pipeline files, and
//! runs the stages in order. [`synth`] makes seeded synthetic surveys for tests, benchmarks
//! and experiments.
//!
//! Automatically found control points must be verified against independent checkpoints
//! before use; legal or engineering survey work defers to local regulations and licensed
//! surveyors.

pub mod emit;
pub mod experiment;
pub mod fit;
pub mod frame;
pub mod ingest;
pub mod matching;
pub mod pipeline;
pub mod report;
pub mod signatures;
pub mod spatial;
pub mod synth;
