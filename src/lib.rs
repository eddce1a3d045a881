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
//! | 5 | [`fit`] | candidates, positions | [`fit::Solution`] (transform, control points, significance) or [`fit::Rejection`] |
//! | 5a | [`accuracy`] (pure) | point pairs, residual vectors (m) | [`accuracy::TransformStatement`] at the centroid; [`accuracy::Accuracy`]: RMSE, NSSDA 95 %, ASPRS RMSE_H |
//! | 6 | [`emit`], [`report`] | an [`outcome::MatchOutcome`] | control-point files, transform, report |
//! | drift | [`drift`] | an accepted [`outcome::MatchOutcome`], a tolerance | [`drift::Drift`]: verdict, global drift at the centroid, largest drift over the overlap, local drift areas |
//!
//! [`epochs`] builds a library of persistent control points from N surveys of one site: it
//! runs the engine's matches on pairs of epochs, links landmarks into tracks and adjusts one
//! similarity per epoch to a base epoch jointly.
//!
//! [`engine`] runs stages 1-5 in order and returns a [`outcome::MatchOutcome`]; it writes
//! nothing ([`engine::match_surveys`]; [`engine::solve_points`] for points already in a working
//! frame); before stage 3 it asks [`resources`] whether the run fits the machine's memory.
//! [`config`] holds the configuration shared by the command line and pipeline files, every
//! option with its one default. [`image`] holds one band of a georeferenced raster in memory
//! and converts between pixel/line and map coordinates; [`keypoints`] finds blobs in one at a
//! scale given in metres on the ground; [`refine`] refines control points on the pixels by
//! local image correlation, after the robust fit. [`progress`] is how stages report progress. The writers
//! ([`emit`], [`report`]) sit on top of the outcome, never the other way round. [`synth`] makes
//! seeded synthetic surveys for tests, benchmarks and experiments; `experiment` (cargo feature
//! `experiments`) measures the signature stage.
//!
//! Automatically found control points must be verified against independent checkpoints
//! before use; legal or engineering survey work defers to local regulations and licensed
//! surveyors.

pub mod accuracy;
pub mod config;
pub mod drift;
pub mod emit;
pub mod engine;
pub mod epochs;
#[cfg(feature = "experiments")]
pub mod experiment;
pub mod fit;
pub mod frame;
pub mod image;
pub mod ingest;
pub mod keypoints;
pub mod matching;
pub mod outcome;
pub mod progress;
pub mod refine;
pub mod report;
pub mod resources;
pub mod signatures;
pub mod spatial;
pub mod synth;
