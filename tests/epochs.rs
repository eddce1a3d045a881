//! `tiemark epochs` on a real point pattern the project did not design: the airports extract
//! of tests/data (PyPI package `airportsdata`, MIT; see tests/data/PROVENANCE.md), in WGS 84 /
//! UTM 16N, observed in four epochs with independent dropouts, new landmarks, each epoch's own
//! georeferencing error (one in a rotated, scaled local grid) and noise. Plus the joint
//! adjustment against the pairwise fits on noise-free data, its standard errors against a
//! Monte Carlo, the closure test on a perturbed transform, a planted moved landmark, and the
//! sample library's files (report.html's numbers against epochs.json).

#[path = "common/landsat.rs"]
mod landsat;

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use std::collections::{HashMap, HashSet};
use std::path::{Path, PathBuf};
use tiemark::epochs::adjust::{self, CentredFit, Obs};
use tiemark::epochs::{self, EpochOptions, EpochsConfig, TrackStatus};
use tiemark::fit::Similarity;
use tiemark::frame::crs::{Converter, Crs};
use tiemark::progress::Silent;
#[path = "common/sample_epochs.rs"]
mod sample_epochs;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// The airports in UTM 16N (tests/data/PROVENANCE.md).
fn airports() -> Vec<[f64; 2]> {
    let text = std::fs::read_to_string(root().join("tests/data/airports-us-utm16n.csv")).unwrap();
    let c = Converter::new(
        &Crs::parse("EPSG:4326", "t").unwrap(),
        &Crs::parse("EPSG:32616", "t").unwrap(),
    )
    .unwrap();
    text.lines()
        .skip(1)
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            c.convert([f[1].parse().unwrap(), f[2].parse().unwrap()])
                .unwrap()
        })
        .collect()
}

/// How an epoch sees the world: `error` maps the truth (UTM), taken about the pattern's
/// centroid, to the epoch's coordinates (about the centroid too for a georeferenced epoch,
/// whose georeferencing error is small there; the local grid's is a transform of its own).
struct EpochPlan {
    error: Similarity,
    local: bool,
}

/// Four epochs of the airports: each keeps an airport with probability `keep`, adds 10 % new
/// points, applies its error and Gaussian noise `sigma` per coordinate. `moved`: airports
/// shifted by the vector given in the epoch given. Returns the files, and per epoch the
/// airport index of each id (None for new points).
#[allow(clippy::type_complexity)]
fn write_epochs(
    dir: &Path,
    seed: u64,
    keep: f64,
    sigma: f64,
    moved: &[(usize, usize, [f64; 2])],
) -> (Vec<PathBuf>, Vec<HashMap<String, Option<usize>>>) {
    let truth = airports();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let plans = [
        EpochPlan {
            error: Similarity::IDENTITY,
            local: false,
        },
        EpochPlan {
            error: Similarity::from_params(1.0 + 40e-6, 0.002f64.to_radians(), 35.0, -20.0),
            local: false,
        },
        EpochPlan {
            // A local grid: rotated 71°, scaled, far from UTM.
            error: Similarity::from_params(0.37, 71f64.to_radians(), 120_000.0, -4_000_000.0)
                .inverse(),
            local: true,
        },
        EpochPlan {
            error: Similarity::from_params(1.0 - 25e-6, -0.003f64.to_radians(), -50.0, 42.0),
            local: false,
        },
    ];
    let (lo, hi) = truth
        .iter()
        .fold(([f64::MAX; 2], [f64::MIN; 2]), |(lo, hi), p| {
            (
                [lo[0].min(p[0]), lo[1].min(p[1])],
                [hi[0].max(p[0]), hi[1].max(p[1])],
            )
        });
    let n = truth.len() as f64;
    let c = truth
        .iter()
        .fold([0.0, 0.0], |s, p| [s[0] + p[0] / n, s[1] + p[1] / n]);
    let place = |plan: &EpochPlan, p: [f64; 2]| {
        if plan.local {
            plan.error.apply(p)
        } else {
            let q = plan.error.apply([p[0] - c[0], p[1] - c[1]]);
            [q[0] + c[0], q[1] + c[1]]
        }
    };
    let mut files = Vec::new();
    let mut maps = Vec::new();
    for (k, plan) in plans.iter().enumerate() {
        let noise = Normal::new(0.0, sigma.max(1e-300)).unwrap();
        let mut text = String::from("id,x,y\n");
        let mut map = HashMap::new();
        let mut n_new = 0;
        for (i, p) in truth.iter().enumerate() {
            if rng.gen::<f64>() >= keep {
                continue;
            }
            let mut q = *p;
            for (e, a, d) in moved {
                if *e == k && *a == i {
                    q = [q[0] + d[0], q[1] + d[1]];
                }
            }
            if sigma > 0.0 {
                q = [q[0] + noise.sample(&mut rng), q[1] + noise.sample(&mut rng)];
            }
            let w = place(plan, q);
            let id = format!("E{k}-{i}");
            text += &format!("{id},{:.6},{:.6}\n", w[0], w[1]);
            map.insert(id, Some(i));
            if rng.gen::<f64>() < 0.1 {
                let p = [rng.gen_range(lo[0]..hi[0]), rng.gen_range(lo[1]..hi[1])];
                let w = place(plan, p);
                let id = format!("E{k}-N{n_new}");
                n_new += 1;
                text += &format!("{id},{:.6},{:.6}\n", w[0], w[1]);
                map.insert(id, None);
            }
        }
        let path = dir.join(format!("airports-epoch-{k}.csv"));
        std::fs::write(&path, text).unwrap();
        files.push(path);
        maps.push(map);
    }
    (files, maps)
}

fn config(files: &[PathBuf], local: &[bool]) -> EpochsConfig {
    let mut c = EpochsConfig::new(files.to_vec());
    for (e, l) in c.epochs.iter_mut().zip(local) {
        e.id = Some("id".into());
        e.crs = Some(if *l {
            "local".into()
        } else {
            "EPSG:32616".into()
        });
    }
    // Control points up to 500 m apart (25 noise standard deviations of a pair), searched
    // that far: wide enough for a landmark that moved 200 m to stay paired, so that the moved
    // test can see it.
    c.fit.search_radius_m = Some(500.0);
    c.fit.max_residual_m = Some(500.0);
    c
}

const LOCAL: [bool; 4] = [false, false, true, false];

/// The airport of each member of a track, if they all agree.
fn airport_of(
    track: &epochs::Track,
    outcome: &epochs::EpochsOutcome,
    maps: &[HashMap<String, Option<usize>>],
) -> Option<usize> {
    let mut found: Option<usize> = None;
    for (k, m) in track.members.iter().enumerate() {
        let Some(i) = m else { continue };
        let id = &outcome.epochs[k].set.ids[*i as usize];
        let a = maps[k][id]?;
        if found.is_some_and(|f| f != a) {
            return None;
        }
        found = Some(a);
    }
    found
}

/// Precision and recall of the kept tracks against the airports seen in at least `m` epochs.
fn score(
    outcome: &epochs::EpochsOutcome,
    library: &epochs::Library,
    maps: &[HashMap<String, Option<usize>>],
    m: usize,
) -> (f64, f64, usize) {
    let mut seen: HashMap<usize, usize> = HashMap::new();
    for map in maps {
        for a in map.values().flatten() {
            *seen.entry(*a).or_default() += 1;
        }
    }
    let expected: HashSet<usize> = seen
        .iter()
        .filter(|(_, c)| **c >= m)
        .map(|(a, _)| *a)
        .collect();
    let kept: Vec<&epochs::Track> = library
        .tracks
        .iter()
        .filter(|t| t.status == TrackStatus::Kept)
        .collect();
    let right: HashSet<usize> = kept
        .iter()
        .filter_map(|t| airport_of(t, outcome, maps))
        .filter(|a| expected.contains(a))
        .collect();
    let correct = kept
        .iter()
        .filter(|t| {
            airport_of(t, outcome, maps).is_some_and(|a| {
                expected.contains(&a)
                    && t.epochs_seen() == seen[&a].min(maps.len())
                    && t.epochs_seen() >= m
            })
        })
        .count();
    (
        correct as f64 / kept.len().max(1) as f64,
        right.len() as f64 / expected.len().max(1) as f64,
        expected.len(),
    )
}

#[test]
fn tracks_in_all_epochs_and_in_three_are_found_and_a_moved_airport_is_reported() {
    let tmp = tempfile::tempdir().unwrap();
    // Airport 100 moved 200 m (10 σ) north-east in epoch 3.
    let moved_airport = 100;
    let (files, maps) = write_epochs(
        tmp.path(),
        20260,
        0.85,
        20.0,
        &[(3, moved_airport, [141.0, 141.0])],
    );
    assert!(maps[3].contains_key(&format!("E3-{moved_airport}")));
    assert!(maps[0].contains_key(&format!("E0-{moved_airport}")));
    let cfg = config(&files, &LOCAL);
    let outcome = epochs::run(&cfg, &tiemark::emit::epochs::COLUMNS, &Silent).unwrap();
    assert!(outcome.library.unjoined().is_empty());
    let (precision, recall, expected) = score(&outcome, &outcome.library, &maps, 4);
    assert!(expected > 900, "{expected}");
    assert!(
        precision >= 0.99 && recall >= 0.95,
        "all epochs: precision {precision} recall {recall}"
    );
    // The moved airport: reported as moved, not kept.
    let t = outcome
        .library
        .tracks
        .iter()
        .find(|t| airport_of(t, &outcome, &maps) == Some(moved_airport))
        .expect("the moved airport is linked");
    assert_eq!(t.status, TrackStatus::Moved, "{t:?}");
    assert!((t.largest_movement_m - 200.0).abs() < 100.0, "{t:?}");
    assert!(outcome.library.counts.moved >= 1);
    // Few false moves: at the test's level 0.001 about one in a thousand tracks.
    assert!(
        outcome.library.counts.moved <= 1 + outcome.library.counts.tracks / 200,
        "{:?}",
        outcome.library.counts
    );
    // --min-epochs 3 on the same matches.
    let points: Vec<&[[f64; 2]]> = outcome
        .epochs
        .iter()
        .map(|e| e.working.as_slice())
        .collect();
    let three = epochs::combine(
        &points,
        0,
        &outcome.pairs,
        outcome.library.metres_per_unit,
        &EpochOptions {
            min_epochs: Some(3),
            ..EpochOptions::default()
        },
        4,
    );
    let (precision, recall, expected) = score(&outcome, &three, &maps, 3);
    assert!(expected > 1300, "{expected}");
    assert!(
        precision >= 0.99 && recall >= 0.95,
        "three epochs: precision {precision} recall {recall}"
    );
    // The transforms: the local grid's is the inverse of its error.
    let t2 = outcome.library.transforms[2].as_ref().unwrap();
    assert!((t2.similarity.scale() / 0.37 - 1.0).abs() < 1e-4, "{t2:?}");
    assert!(
        (t2.similarity.rotation() - 71f64.to_radians()).abs() < 1e-4,
        "{t2:?}"
    );
    for c in &outcome.library.closures {
        assert!(!c.flagged, "{c:?}");
    }
}

#[test]
fn joint_adjustment_equals_the_pairwise_fits_without_noise() {
    let tmp = tempfile::tempdir().unwrap();
    let (files, _) = write_epochs(tmp.path(), 77, 0.8, 0.0, &[]);
    // The default search radius and largest residual (from the spacing and the residual
    // spread): on exact data no new landmark that happens to lie near a missing airport is
    // taken as a control point.
    let mut cfg = config(&files, &LOCAL);
    cfg.fit.search_radius_m = None;
    cfg.fit.max_residual_m = None;
    let outcome = epochs::run(&cfg, &[], &Silent).unwrap();
    for p in outcome.pairs.iter().filter(|p| p.reference == 0) {
        let pairwise = p.result.as_ref().unwrap().transform;
        let joint = outcome.library.transforms[p.target].as_ref().unwrap();
        // Compared where the epoch's landmarks are: the mapped positions of its extent agree
        // to the rounding of the coordinates written (1e-6 units).
        for q in &outcome.epochs[p.target].working {
            let (a, b) = (pairwise.apply(*q), joint.similarity.apply(*q));
            let d = (a[0] - b[0]).hypot(a[1] - b[1]);
            assert!(d < 1e-4, "epoch {}: {d} m", p.target);
        }
    }
}

/// Synthetic tracks on the airports: `n` epochs with `errors[k]` (truth → epoch, centred),
/// dropouts and noise.
fn synthetic_tracks(
    truth: &[[f64; 2]],
    errors: &[CentredFit],
    sigma: f64,
    rng: &mut ChaCha8Rng,
) -> Vec<Vec<Obs>> {
    let noise = Normal::new(0.0, sigma).unwrap();
    let inv = |f: &CentredFit, q: [f64; 2]| {
        let [a, b, tx, ty] = f.theta;
        let (x, y) = (q[0] - tx, q[1] - ty);
        let d = a * a + b * b;
        [(a * x + b * y) / d, (-b * x + a * y) / d]
    };
    truth
        .iter()
        .map(|q| {
            let mut obs = Vec::new();
            for (k, e) in errors.iter().enumerate() {
                if rng.gen::<f64>() < 0.8 {
                    let p = [q[0] + noise.sample(rng), q[1] + noise.sample(rng)];
                    obs.push((k, inv(e, p)));
                }
            }
            obs
        })
        .collect()
}

fn centred_airports() -> Vec<[f64; 2]> {
    let a = airports();
    let n = a.len() as f64;
    let c = a
        .iter()
        .fold([0.0, 0.0], |s, p| [s[0] + p[0] / n, s[1] + p[1] / n]);
    a.iter().map(|p| [p[0] - c[0], p[1] - c[1]]).collect()
}

fn errors() -> Vec<CentredFit> {
    let f = |theta| CentredFit {
        theta,
        cov: [[0.0; 4]; 4],
    };
    vec![
        CentredFit::IDENTITY,
        f([1.00004, 0.00003, 35.0, -20.0]),
        f([0.12, 0.35, 1000.0, 20.0]),
        f([0.99997, -0.00005, -50.0, 42.0]),
    ]
}

#[test]
fn standard_errors_agree_with_a_monte_carlo() {
    // 300 seeded runs of the same four epochs with fresh noise and dropouts: the spread of
    // each estimated parameter against the mean standard error the adjustment reports. With
    // 300 runs the spread itself is known to about 1/sqrt(600) = 4 %; agreement within a
    // factor 1.2 either way.
    let truth = centred_airports();
    let errors = errors();
    let runs = 300;
    let mut est: Vec<Vec<[f64; 4]>> = vec![Vec::new(); 4];
    let mut se = [[0.0; 4]; 4];
    for run in 0..runs {
        let mut rng = ChaCha8Rng::seed_from_u64(1000 + run);
        let tracks = synthetic_tracks(&truth, &errors, 25.0, &mut rng);
        let j = adjust::adjust(4, 0, &[true; 4], &tracks).unwrap();
        for k in 1..4 {
            let t = j.transforms[k].unwrap();
            est[k].push(t.theta);
            for (i, s) in se[k].iter_mut().enumerate() {
                *s += t.cov[i][i].sqrt() / runs as f64;
            }
        }
    }
    for k in 1..4 {
        for i in 0..4 {
            let m = est[k].iter().map(|t| t[i]).sum::<f64>() / runs as f64;
            let sd =
                (est[k].iter().map(|t| (t[i] - m).powi(2)).sum::<f64>() / (runs - 1) as f64).sqrt();
            let ratio = sd / se[k][i];
            assert!(
                (1.0 / 1.2..=1.2).contains(&ratio),
                "epoch {k} parameter {i}: Monte Carlo {sd:e}, reported {:e}",
                se[k][i]
            );
            // Unbiased: the mean within 5 standard errors of the mean of the truth.
            let bias = (m - errors[k].theta[i]).abs();
            assert!(
                bias < 5.0 * sd / (runs as f64).sqrt(),
                "epoch {k} parameter {i}: bias {bias:e}"
            );
        }
    }
}

#[test]
fn a_perturbed_transform_is_flagged_by_closure_and_consistent_ones_are_not() {
    // Pairwise fits j → i, i → base, j → base on simulated control points of the airports;
    // in 200 seeded runs the closure statistic exceeds its 99 % point about 1 % of the time,
    // and with the j → i transform perturbed (rotated by 10 of its standard errors) always.
    let truth = centred_airports();
    let e = errors();
    let threshold = adjust::chi2_quantile_even(epochs::CLOSURE_ALPHA, 4);
    let noise = Normal::new(0.0, 25.0).unwrap();
    let (mut false_alarms, mut caught) = (0, 0);
    let runs = 200;
    for run in 0..runs {
        let mut rng = ChaCha8Rng::seed_from_u64(5000 + run);
        let obs: Vec<[[f64; 2]; 3]> = truth
            .iter()
            .map(|q| {
                let mut o = [[0.0; 2]; 3];
                for (slot, k) in [0usize, 1, 2].into_iter().enumerate() {
                    let p = [q[0] + noise.sample(&mut rng), q[1] + noise.sample(&mut rng)];
                    // Epoch k's coordinates: the inverse of its error.
                    let [a, b, tx, ty] = e[k].theta;
                    let (x, y) = (p[0] - tx, p[1] - ty);
                    let d = a * a + b * b;
                    o[slot] = [(a * x + b * y) / d, (-b * x + a * y) / d];
                }
                o
            })
            .collect();
        // Each pair on its own random two thirds of the airports.
        let pick = |rng: &mut ChaCha8Rng, from: usize, to: usize| {
            let sel: Vec<&[[f64; 2]; 3]> = obs.iter().filter(|_| rng.gen::<f64>() < 0.67).collect();
            let f: Vec<[f64; 2]> = sel.iter().map(|o| o[from]).collect();
            let t: Vec<[f64; 2]> = sel.iter().map(|o| o[to]).collect();
            (adjust::fit_pairs(&f, &t).unwrap().0, f)
        };
        let (ji, at_pts) = pick(&mut rng, 2, 1);
        let (ib, _) = pick(&mut rng, 1, 0);
        let (jb, _) = pick(&mut rng, 2, 0);
        let n = at_pts.len() as f64;
        let at = at_pts
            .iter()
            .fold([0.0, 0.0], |s, p| [s[0] + p[0] / n, s[1] + p[1] / n]);
        if adjust::closure(&ji, &ib, &jb, at).statistic > threshold {
            false_alarms += 1;
        }
        // Perturbed: rotate j → i by 10 standard errors of its b coefficient.
        let mut bad = ji;
        let db = 10.0 * ji.cov[1][1].sqrt();
        bad.theta[1] += db;
        if adjust::closure(&bad, &ib, &jb, at).statistic > threshold {
            caught += 1;
        }
    }
    assert_eq!(caught, runs, "perturbed transform not always flagged");
    // 1 % expected if the fits were independent; they share landmarks (and their noise) on
    // overlapping subsets, as the pairs of a real run do: at most 3.5 %.
    assert!(false_alarms <= 7, "false alarms {false_alarms} of {runs}");
}

#[test]
fn the_sample_library_is_written_and_its_tracks_are_true() {
    // The bundled sample epochs (sample-data/epochs.rs) through the binary, with a pipeline
    // file like pipelines/control-point-library.toml writing into a temporary folder.
    let tmp = tempfile::tempdir().unwrap();
    let sample = root().join("sample-data");
    let pipeline = sample_epochs::library_pipeline(tmp.path(), 4);
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_tiemark"))
        .args(["run", pipeline.to_str().unwrap(), "--quiet"])
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{stdout}");
    assert!(stdout.contains("verified against independent checkpoints"));
    let dir = tmp.path().join("library");
    for f in tiemark::emit::epochs::FILES {
        assert!(dir.join(f).is_file(), "{f}");
    }
    // Every kept track is one building of the truth, seen in at least four epochs.
    let truth = std::fs::read_to_string(sample.join("epochs-true-tracks.csv")).unwrap();
    let mut building_of: HashMap<String, String> = HashMap::new();
    for line in truth.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        for id in &f[1..] {
            if !id.is_empty() {
                building_of.insert(id.to_string(), f[0].to_string());
            }
        }
    }
    let csv = std::fs::read_to_string(dir.join("persistent-control-points.csv")).unwrap();
    let mut lines = csv.lines();
    assert_eq!(
        lines.next().unwrap(),
        "track,epoch-2019,epoch-2021,epoch-2023,epoch-2024-site-grid,epoch-2026,epochs_seen,x,y,sd_x_m,sd_y_m,largest_movement_m,grade"
    );
    let (mut rows, mut true_rows) = (0, 0);
    for line in lines {
        let f: Vec<&str> = line.split(',').collect();
        let ids: Vec<&str> = f[1..6].iter().copied().filter(|s| !s.is_empty()).collect();
        assert!(ids.len() >= 4 && f[6] == ids.len().to_string(), "{line}");
        let buildings: HashSet<&String> = ids.iter().map(|i| &building_of[*i]).collect();
        rows += 1;
        if buildings.len() == 1 {
            true_rows += 1;
        }
    }
    assert!(rows > 200, "{rows}");
    assert!(
        true_rows as f64 >= 0.99 * rows as f64,
        "{true_rows} of {rows}"
    );
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("epochs.json")).unwrap()).unwrap();
    assert_eq!(doc["counts"]["kept"].as_u64().unwrap() as usize, rows);
    assert_eq!(doc["epochs"].as_array().unwrap().len(), 5);

    // The GeoPackage: its three layers, as many features as the counts say, with their
    // fields (GDAL reads it back).
    let gpkg = gdal::Dataset::open(dir.join("persistent-control-points.gpkg")).unwrap();
    let features = |name: &str, fields: &[&str]| -> u64 {
        let layer = gpkg.layer_by_name(name).unwrap();
        let have: Vec<String> = gdal::vector::LayerAccess::defn(&layer)
            .fields()
            .map(|f| f.name())
            .collect();
        assert_eq!(have, fields, "{name}");
        gdal::vector::LayerAccess::feature_count(&layer)
    };
    let track_fields = [
        "track",
        "epochs_seen",
        "sd_x_m",
        "sd_y_m",
        "largest_movement_m",
        "grade",
    ];
    assert_eq!(
        features("persistent_control_points", &track_fields) as usize,
        rows
    );
    assert_eq!(
        features("moved_landmarks", &track_fields),
        doc["counts"]["moved"].as_u64().unwrap()
    );
    assert!(
        features(
            "epoch_positions",
            &["track", "epoch", "landmark_id", "offset_m", "status"]
        ) as usize
            >= 4 * rows
    );

    // report.html: the numbers it tags are epochs.json's, one row per epoch in the
    // transform and residual tables, one per closure check, the kept tracks drawn by grade.
    let html = std::fs::read_to_string(dir.join("report.html")).unwrap();
    let tagged = |key: &str| -> serde_json::Value {
        let at = html
            .find(&format!("data-key=\"{key}\" data-source=\"epochs.json\""))
            .unwrap_or_else(|| panic!("{key} is not on the page"));
        let start = html[..at].rfind("<data value=\"").unwrap() + "<data value=\"".len();
        let value = &html[start..at - 2];
        serde_json::from_str(&value.replace("&quot;", "\"")).unwrap()
    };
    for key in [
        "counts.kept",
        "counts.moved",
        "counts.tracks",
        "counts.grades.0",
        "counts.grades.1",
        "epochs.3.to_base.scale",
        "epochs.3.to_base.standard_errors.scale",
        "epochs.3.to_base.rotation_deg",
        "epochs.1.to_base.standard_errors.position_at_centroid_m.y",
        "epochs.4.to_base.rms_residual_m",
        "epochs.4.to_base.kept_rms_offset_m",
        "adjustment.variance_factor",
    ] {
        let expected = key
            .split('.')
            .try_fold(&doc, |v, part| match part.parse::<usize>() {
                Ok(i) if v.is_array() => v.get(i),
                _ => v.get(part),
            })
            .unwrap();
        assert_eq!(&tagged(key), expected, "{key}");
    }
    let section = |id: &str| -> &str {
        let start = html.find(&format!("<section id=\"{id}\">")).unwrap();
        &html[start..start + html[start..].find("</section>").unwrap()]
    };
    let body_rows = |id: &str| section(id).matches("<tr><th scope=\"row\">").count();
    assert_eq!(body_rows("epoch-transforms"), 5);
    assert_eq!(body_rows("epoch-residuals"), 5);
    let checks = doc["closure"]["checks"].as_array().unwrap();
    assert!(!checks.is_empty());
    assert_eq!(body_rows("closure"), checks.len());
    let warned = checks.iter().filter(|c| c["warning"] == true).count();
    assert_eq!(section("closure").matches("WARNING").count(), warned);
    assert_eq!(body_rows("pairs"), doc["pairs"].as_array().unwrap().len());
    // Grade A tracks of the CSV are the map's grade A layer, as counted on the page.
    let grade_a = csv.lines().skip(1).filter(|l| l.ends_with(",A")).count();
    assert!(grade_a > 0);
    assert!(html.contains(&format!(
        "data-key=\"map.total.classes.grade_a\" data-source=\"page\">{grade_a}</data>"
    )));
    assert!(section("map").contains("<path class=\"grade-a\""));
    for words in [
        "independent checkpoints",
        "licensed surveyors",
        tiemark::emit::epochs::LATER_CAUTION,
    ] {
        assert!(html.contains(&words.replace('\'', "&#39;")), "{words}");
    }
}

/// Records how long each stage of a run took (the binary draws bars from the same calls).
#[derive(Default)]
struct StageTimes {
    open: std::cell::RefCell<Option<(String, std::time::Instant)>>,
    done: std::cell::RefCell<Vec<(String, f64)>>,
}

impl tiemark::progress::Progress for StageTimes {
    fn begin(&self, stage: &str, _total: Option<u64>) {
        *self.open.borrow_mut() = Some((stage.to_string(), std::time::Instant::now()));
    }
    fn advance(&self, _done: u64) {}
    fn message(&self, _message: &str) {}
    fn end(&self) {
        if let Some((stage, at)) = self.open.borrow_mut().take() {
            self.done
                .borrow_mut()
                .push((stage, at.elapsed().as_secs_f64()));
        }
    }
}

impl StageTimes {
    /// Seconds spent reading epochs, matching pairs (everything else but linking), linking
    /// and adjusting.
    fn split(&self) -> (f64, f64, f64) {
        let (mut read, mut matching, mut link) = (0.0, 0.0, 0.0);
        for (stage, s) in self.done.borrow().iter() {
            if stage.starts_with("reading epoch") {
                read += s;
            } else if stage.starts_with("linking and adjusting") {
                link += s;
            } else {
                matching += s;
            }
        }
        (read, matching, link)
    }
}

/// (user + system CPU seconds, peak resident memory in kB) of this process so far.
fn cpu_and_peak() -> (f64, String) {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    let peak = status
        .lines()
        .find(|l| l.starts_with("VmHWM"))
        .unwrap_or("VmHWM: ?")
        .trim_start_matches("VmHWM:")
        .trim()
        .to_string();
    let stat = std::fs::read_to_string("/proc/self/stat").unwrap_or_default();
    // Fields 14 and 15 (utime, stime) in clock ticks, after the command's closing parenthesis.
    let after = stat.rsplit_once(')').map_or("", |x| x.1);
    let f: Vec<f64> = after
        .split_whitespace()
        .map(|v| v.parse().unwrap_or(0.0))
        .collect();
    // Clock ticks a second (USER_HZ), as `getconf CLK_TCK` says.
    let ticks: f64 = std::process::Command::new("getconf")
        .arg("CLK_TCK")
        .output()
        .ok()
        .and_then(|o| String::from_utf8_lossy(&o.stdout).trim().parse().ok())
        .unwrap_or(f64::NAN);
    let cpu = if f.len() > 13 && ticks > 0.0 {
        (f[11] + f[12]) / ticks
    } else {
        f64::NAN
    };
    (cpu, peak)
}

/// The speed benchmark (not run in CI; `cargo test --release --test epochs -- --ignored
/// --nocapture ten_epochs`): ten epochs of 100,000 landmarks (`TIEMARK_BENCH_EPOCH_SIZE` to
/// change) from CSV files to the written library, in this process, once with the default
/// pairs (2N − 3 = 17 matches) and once with every pair (45); prints per run the time of each
/// part, the CPU time, the peak memory (VmHWM, reset between the runs) and the matching time
/// per pair, so that the cost's growth in pairs matched can be read off: linear when the time
/// per pair stays put from 17 to 45 pairs.
#[test]
#[ignore]
fn ten_epochs_of_100000_landmarks() {
    let size: usize = std::env::var("TIEMARK_BENCH_EPOCH_SIZE")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(100_000);
    let tmp = tempfile::tempdir().unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(10);
    // A uniform pattern at about 30 m spacing.
    let side = (size as f64).sqrt() * 30.0;
    let truth: Vec<[f64; 2]> = (0..size)
        .map(|_| {
            [
                455_000.0 + rng.gen_range(0.0..side),
                5_200_000.0 + rng.gen_range(0.0..side),
            ]
        })
        .collect();
    let noise = Normal::new(0.0, 0.1).unwrap();
    let mut files = Vec::new();
    for k in 0..10 {
        let shift = [rng.gen_range(-3.0..3.0), rng.gen_range(-3.0..3.0)];
        let mut text = String::from("id,x,y\n");
        for (i, p) in truth.iter().enumerate() {
            if rng.gen::<f64>() < 0.1 {
                continue;
            }
            text += &format!(
                "E{k}-{i},{:.3},{:.3}\n",
                p[0] + shift[0] + noise.sample(&mut rng),
                p[1] + shift[1] + noise.sample(&mut rng)
            );
        }
        let path = tmp.path().join(format!("epoch-{k:02}.csv"));
        std::fs::write(&path, text).unwrap();
        files.push(path);
    }
    let mut per_pair = Vec::new();
    for (run, plan) in [epochs::PairPlan::BaseAndNeighbours, epochs::PairPlan::All]
        .into_iter()
        .enumerate()
    {
        let mut cfg = EpochsConfig::new(files.clone());
        for e in &mut cfg.epochs {
            e.id = Some("id".into());
            e.crs = Some("EPSG:32633".into());
        }
        cfg.options.pairs = plan;
        // The peak of this run only (Linux: writing 5 to clear_refs resets VmHWM).
        let _ = std::fs::write("/proc/self/clear_refs", "5");
        let (cpu0, _) = cpu_and_peak();
        let times = StageTimes::default();
        let start = std::time::Instant::now();
        let outcome = epochs::run(&cfg, &tiemark::emit::epochs::COLUMNS, &times).unwrap();
        let computed = start.elapsed();
        let out = tiemark::emit::check_output_dir(
            &tmp.path().join(format!("library-{run}")),
            false,
            &tiemark::emit::epochs::FILES,
            &[],
        )
        .unwrap();
        let summary = tiemark::emit::epochs::summary(&outcome);
        tiemark::emit::epochs::write_all(&outcome, &out, &summary).unwrap();
        let total = start.elapsed();
        let (cpu1, peak) = cpu_and_peak();
        let (read, matching, link) = times.split();
        let pairs = outcome.pairs.len();
        println!(
            "ten epochs of {size}, {plan:?}: {pairs} pairs matched, {} tracks, {} kept; reading {read:.1} s, matching {matching:.1} s ({:.2} s a pair), linking and adjusting {link:.1} s; read+match+adjust {:.1} s, with writing {:.1} s wall, {:.1} s CPU (user + sys); peak memory (VmHWM) {peak}",
            outcome.library.counts.tracks,
            outcome.library.counts.kept,
            matching / pairs as f64,
            computed.as_secs_f64(),
            total.as_secs_f64(),
            cpu1 - cpu0,
        );
        assert!(outcome.library.unjoined().is_empty());
        per_pair.push(matching / pairs as f64);
    }
    println!(
        "matching time per pair, 45 pairs against 17: {:.2}x (1 = linear in pairs matched)",
        per_pair[1] / per_pair[0]
    );
}

/// Writes band `band` of the Landsat scene as a one-band GeoTIFF whose geotransform carries
/// the georeferencing error `e` (true map → the file's claimed map, applied to the true
/// geotransform: the pixels are the scene's own). Returns the true geotransform.
fn write_landsat_band(band: usize, path: &Path, e: &Similarity) -> [f64; 6] {
    use gdal::raster::Buffer;
    let src = gdal::Dataset::open(landsat::landsat()).unwrap();
    let (w, h) = src.raster_size();
    let gt = src.geo_transform().unwrap();
    let mut data: Buffer<u8> = src
        .rasterband(band)
        .unwrap()
        .read_as((0, 0), (w, h), (w, h), None)
        .unwrap();
    let driver = gdal::DriverManager::get_driver_by_name("GTiff").unwrap();
    let mut out = driver
        .create_with_band_type::<u8, _>(path, w, h, 1)
        .unwrap();
    out.set_projection(&src.projection()).unwrap();
    out.set_geo_transform(&landsat::moved_geotransform(gt, |p| e.apply(p)))
        .unwrap();
    out.rasterband(1)
        .unwrap()
        .write((0, 0), (w, h), &mut data)
        .unwrap();
    gt
}

/// Raster epochs: three epochs made from the visible bands (blue, green, red) of the Landsat 7
/// scene (tests/common/landsat.rs: USGS imagery, public domain, from Debian's r-cran-stars),
/// each but the base given its own georeferencing error through its geotransform. (The
/// near-infrared band's keypoints do not match the visible bands'; a match of two such
/// images needs the engine's area-based seed, which an epochs run does not take: see
/// `tiemark::epochs`.) The
/// epochs run reads each band's keypoints (at one feature size for all four), matches the
/// planned pairs and adjusts; every epoch's transform to the base must undo its planted
/// error, and every kept track must be one spot on the ground.
#[test]
fn raster_epochs_of_a_landsat_scene_undo_their_planted_georeferencing_errors() {
    let tmp = tempfile::tempdir().unwrap();
    let src = gdal::Dataset::open(landsat::landsat()).unwrap();
    let (w, h) = src.raster_size();
    let gt0 = src.geo_transform().unwrap();
    let pixel = gt0[1];
    let centre = [
        gt0[0] + gt0[1] * w as f64 / 2.0,
        gt0[3] + gt0[5] * h as f64 / 2.0,
    ];
    // Errors about the image centre: (scale, rotation °, shift east, north m). Sizes like the
    // shared raster tests' (tests/common/landsat.rs), different for each epoch.
    let about = |s: f64, deg: f64, dx: f64, dy: f64| {
        let r = Similarity::from_params(s, deg.to_radians(), 0.0, 0.0);
        let c = r.apply(centre);
        Similarity::from_params(
            s,
            deg.to_radians(),
            centre[0] - c[0] + dx,
            centre[1] - c[1] + dy,
        )
    };
    let plan = [
        (1, Similarity::IDENTITY),
        (2, about(1.0 + 300e-6, 0.8, 20.0, -15.0)),
        (3, about(1.0 - 400e-6, -1.2, -35.0, 25.0)),
    ];
    let mut files = Vec::new();
    for (k, (band, e)) in plan.iter().enumerate() {
        let path = tmp
            .path()
            .join(format!("landsat-epoch-{k}-band-{band}.tif"));
        write_landsat_band(*band, &path, e);
        files.push(path);
    }
    let cfg = EpochsConfig::new(files);
    let outcome = epochs::run(&cfg, &tiemark::emit::epochs::COLUMNS, &Silent).unwrap();
    for p in &outcome.pairs {
        eprintln!(
            "{} -> {}: {:?}",
            p.target,
            p.reference,
            p.result.as_ref().map(|c| (c.points.len(), c.rmse_m))
        );
    }
    assert!(outcome.library.unjoined().is_empty(), "{:?}", outcome.pairs);
    let lib = &outcome.library;
    eprintln!("{:?}", lib.counts);
    // Each transform (epoch's claimed map → base map) against the truth, the inverse of the
    // planted error, at the image's corners. The tracks are keypoints at their detected
    // sub-pixel positions in bands of different wavelengths (not refined on the pixels), so
    // one keypoint is placed to a fraction of a pixel; the adjustment averages hundreds of
    // them, and the corners, the farthest points from the centroid, are within 0.25 px (7 m)
    // and within five of the standard errors the adjustment states (propagated to the
    // corner, plus a floor of 0.05 px for band-to-band registration of the scene itself,
    // which no adjustment can see).
    let corners = [
        (0.0, 0.0),
        (w as f64, 0.0),
        (0.0, h as f64),
        (w as f64, h as f64),
    ];
    for (k, (_, e)) in plan.iter().enumerate().skip(1) {
        let t = lib.transforms[k].as_ref().unwrap();
        let mut worst: f64 = 0.0;
        for (p, l) in corners {
            let truth = [gt0[0] + gt0[1] * p, gt0[3] + gt0[5] * l];
            let got = t.similarity.apply(e.apply(truth));
            worst = worst.max((got[0] - truth[0]).hypot(got[1] - truth[1]) / pixel);
        }
        // The standard error of a mapped corner: the centroid's, plus the rotation's and the
        // scale's lever arm out to the farthest corner.
        let arm = corners
            .iter()
            .map(|(p, l)| {
                let q = e.apply([gt0[0] + gt0[1] * p, gt0[3] + gt0[5] * l]);
                (q[0] - t.origin[0]).hypot(q[1] - t.origin[1])
            })
            .fold(0.0, f64::max);
        let se = (t.se_position_m[0].hypot(t.se_position_m[1]).powi(2)
            + (arm * t.se_rotation).powi(2)
            + (arm * t.se_scale).powi(2))
        .sqrt()
            / pixel;
        eprintln!(
            "epoch {k}: worst corner {worst:.3} px, stated corner s.e. {se:.3} px, {} landmarks, RMS {:.2} m",
            t.landmarks, t.rms_m
        );
        assert!(worst <= 0.25, "epoch {k}: corner error {worst:.3} px");
        assert!(
            worst <= 5.0 * se + 0.05,
            "epoch {k}: corner error {worst:.3} px against a stated {se:.3} px"
        );
    }
    // Tracks: every kept track's members, put back on the true map, are one spot (within a
    // pixel); the keypoints of three bands give about a hundred or more.
    let kept: Vec<&epochs::Track> = lib
        .tracks
        .iter()
        .filter(|t| t.status == TrackStatus::Kept)
        .collect();
    assert!(kept.len() >= 100, "{} kept", kept.len());
    let mut wrong = 0;
    for t in &kept {
        let spots: Vec<[f64; 2]> = t
            .members
            .iter()
            .enumerate()
            .filter_map(|(k, m)| {
                let i = (*m)? as usize;
                Some(plan[k].1.inverse().apply(outcome.epochs[k].set.points[i]))
            })
            .collect();
        let spread = spots
            .iter()
            .flat_map(|a| spots.iter().map(move |b| (a[0] - b[0]).hypot(a[1] - b[1])))
            .fold(0.0, f64::max);
        if spread > pixel {
            wrong += 1;
        }
    }
    assert!(
        wrong as f64 <= 0.01 * kept.len() as f64,
        "{wrong} of {} kept tracks are not one spot",
        kept.len()
    );
}
