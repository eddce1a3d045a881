#![allow(missing_docs)]
//! The parallel stages give the serial answer: signatures, candidates, control points,
//! transform and every number of the report are bit for bit the same with 1, 2 and 4 threads,
//! on the sample town (read from its files) and on a seeded synthetic pair of about 200,000
//! landmarks a survey (large enough that every stage splits its work into many tasks).
//!
//! Each run goes into its own rayon pool ([`rayon::ThreadPool::install`]), so the thread count
//! is the one asked for, whatever the machine or `RAYON_NUM_THREADS`. Values are compared
//! through their `Debug` text, which writes every `f64` in the shortest form that reads back
//! to the same bits, so two equal texts mean equal values.

use std::path::{Path, PathBuf};
use tiemark::config::{MatchConfig, PipelineFile};
use tiemark::engine::{self, find_candidates, fit_candidates, FrameFacts};
use tiemark::fit::Similarity;
use tiemark::progress::Silent;
use tiemark::spatial::{morton_order, PointIndex, Survey};
use tiemark::synth::{make_pair, SynthParams};

fn in_pool<T: Send>(threads: usize, f: impl FnOnce() -> T + Send) -> T {
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .expect("a rayon pool")
        .install(f)
}

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).to_path_buf()
}

/// The sample town's match as the demo pipeline states it (`pipelines/demo.toml`).
fn town_config() -> MatchConfig {
    let file = PipelineFile::read(&root().join("pipelines/demo.toml")).expect("demo pipeline");
    let mut config = MatchConfig::new(file.reference.path.clone(), file.target.path.clone());
    config.reference = file.reference;
    config.target = file.target;
    config.frame = file.frame;
    config.signatures = file.signatures;
    config.matching = file.matching;
    config.fit = file.fit;
    config
}

#[test]
fn the_sample_town_gives_the_same_answer_with_one_two_and_four_threads() {
    let config = town_config();
    let run = |threads: usize| {
        in_pool(threads, || {
            let outcome = engine::match_surveys(&config, &Silent).expect("the demo runs");
            let solution = outcome.fit.as_ref().expect("the demo matches");
            assert!(solution.pairs.len() > 100, "{}", solution.pairs.len());
            (
                format!("{:?}", outcome.search),
                format!("{:?}", outcome.fit),
            )
        })
    };
    let serial = run(1);
    for threads in [2, 4] {
        let parallel = run(threads);
        assert_eq!(parallel.0, serial.0, "search counts with {threads} threads");
        assert_eq!(parallel.1, serial.1, "fit with {threads} threads");
    }
}

#[test]
fn a_200k_synthetic_pair_gives_the_same_answer_with_one_two_and_four_threads() {
    let p = make_pair(&SynthParams {
        landmarks: 200_000,
        missing: 0.28,
        extra: 0.25,
        noise: 0.01,
        truth: Similarity::from_params(2.7, 37f64.to_radians(), 5000.0, -300.0),
        seed: 11,
    });
    let (ri, ti) = (
        PointIndex::new(&p.reference).unwrap(),
        PointIndex::new(&p.target).unwrap(),
    );
    let (ro, to) = (morton_order(&p.reference), morton_order(&p.target));
    let reference = Survey {
        points: &p.reference,
        index: &ri,
        order: &ro,
    };
    let target = Survey {
        points: &p.target,
        index: &ti,
        order: &to,
    };
    let config = MatchConfig::new("reference".into(), "target".into());
    let labels = ["reference".to_string(), "target".to_string()];
    let run = |threads: usize| {
        in_pool(threads, || {
            let found = find_candidates(&config, &reference, &target, &Silent, &labels).unwrap();
            let fit = fit_candidates(
                &config,
                &reference,
                &target,
                &found,
                &FrameFacts::LOCAL_METRES,
                &Silent,
            );
            // Large enough that the signatures are built in several chunks.
            let made = found.reference_signatures.len();
            assert!(made > 4 * tiemark::signatures::CHUNK_LANDMARKS, "{made}");
            let solution = fit.as_ref().expect("the synthetic pair matches");
            assert!(solution.pairs.len() > 50_000, "{}", solution.pairs.len());
            let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<u64>>();
            let sigs = [&found.reference_signatures, &found.target_signatures]
                .map(|s| (bits(&s.keys), s.polygons.clone()));
            let candidates: Vec<(u32, u32, u64)> = found
                .candidates
                .iter()
                .map(|c| (c.target, c.reference, c.score.to_bits()))
                .collect();
            (
                sigs,
                candidates,
                format!("{:?}", found.search),
                format!("{fit:?}"),
            )
        })
    };
    let serial = run(1);
    for threads in [2, 4] {
        let parallel = run(threads);
        assert!(parallel.0 == serial.0, "signatures with {threads} threads");
        assert!(parallel.1 == serial.1, "candidates with {threads} threads");
        assert_eq!(parallel.2, serial.2, "search counts with {threads} threads");
        assert_eq!(parallel.3, serial.3, "fit with {threads} threads");
    }
}

/// The raster reader (GDAL decoding a read's blocks on the pool's threads, block means shared
/// by rows) and the keypoint detector give the same samples and keypoints with 1, 2 and 4
/// threads: the sample scene's drone mosaic (JPEG-compressed tiles, a dataset mask, overviews)
/// read whole at full resolution, by 3 × 3 block means of the full resolution, and from its
/// 1/2 overview; and its keypoints as a match finds them.
#[test]
fn raster_reads_and_keypoints_are_the_same_with_one_two_and_four_threads() {
    use tiemark::ingest::{read_landmarks_with, RasterSource, SurveyInput};
    use tiemark::keypoints::KeypointParams;
    let drone = root().join("sample-data/scene-drone-2026.tif");
    let run = |threads: usize| {
        in_pool(threads, || {
            let source = RasterSource::open(&drone, None).expect("the mosaic opens");
            let reads: Vec<(Vec<u32>, Vec<bool>)> = [1, 3, 2]
                .iter()
                .map(|&d| {
                    let img = source.read(d).expect("the mosaic reads");
                    (img.pixels.iter().map(|v| v.to_bits()).collect(), img.valid)
                })
                .collect();
            let input = SurveyInput::new(drone.clone());
            let set = read_landmarks_with(&input, &KeypointParams::default(), Some(0.25))
                .expect("keypoints");
            (
                reads,
                format!("{:?}", set.raster.expect("a raster").keypoints),
            )
        })
    };
    let one = run(1);
    assert!(one.0[0].1.iter().any(|&v| !v), "the mask is read");
    for threads in [2, 4] {
        let other = run(threads);
        for (d, (a, b)) in [1, 3, 2].iter().zip(one.0.iter().zip(&other.0)) {
            assert!(
                a == b,
                "decimation {d}: {threads} threads read other samples"
            );
        }
        assert_eq!(one.1, other.1, "{threads} threads found other keypoints");
    }
}
