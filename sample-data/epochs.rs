//! Five survey epochs of one district of the fictional town, for `tiemark epochs` (the
//! control-point library pipeline, `pipelines/control-point-library.toml`).
//!
//! The district's 2019 buildings (their reference centroids) are the world of 2019; between
//! epochs some buildings are demolished and new ones built. Each epoch observes most of the
//! buildings standing then (a few are missed), with its own georeferencing error (a small
//! similarity about the district's centre) and Gaussian noise of 0.10 m per coordinate, and is
//! written as a small CSV of points (`point,x,y`, its own point numbers):
//!
//! | file | CRS |
//! |---|---|
//! | `epoch-2019.csv` | EPSG:32633 (the base) |
//! | `epoch-2021.csv` | EPSG:32633 |
//! | `epoch-2023.csv` | EPSG:32633 |
//! | `epoch-2024-site-grid.csv` | a local site grid in metres (rotated 32°, false origin 1000, 5000) |
//! | `epoch-2026.csv` | EPSG:32633 |
//!
//! `epochs-truth.json` gives each epoch's applied error (truth → epoch, origin form and about
//! the pivot) and counts; `epochs-true-tracks.csv` one row per building with its point number
//! in every epoch that observed it. One stream of its own (`rng_stream(seed, 40)`), so the
//! other sample files do not change. Fixed size (not scaled by `--scale`).

use super::{district, rng_stream, write_json, Pt, Res};
use rand::seq::SliceRandom;
use rand::Rng;
use serde_json::json;
use std::path::Path;

/// The epochs: file stem, CRS (`None`: local grid), year.
const EPOCHS: [(&str, Option<&str>); 5] = [
    ("epoch-2019", Some("EPSG:32633")),
    ("epoch-2021", Some("EPSG:32633")),
    ("epoch-2023", Some("EPSG:32633")),
    ("epoch-2024-site-grid", None),
    ("epoch-2026", Some("EPSG:32633")),
];

/// Errors about the pivot: (scale − 1 in ppm, rotation in degrees, shift east, north in m).
const ERRORS: [(f64, f64, f64, f64); 5] = [
    (0.0, 0.0, 0.0, 0.0),
    (60.0, 0.004, 1.2, -0.8),
    (-40.0, -0.006, -2.0, 1.5),
    (0.0, 32.0, 0.0, 0.0),
    (25.0, 0.002, 0.6, 2.4),
];

const SIGMA: f64 = 0.10;

fn gauss(rng: &mut rand_chacha::ChaCha8Rng) -> f64 {
    super::gauss(rng)
}

/// Writes the epochs, their truth and true tracks into `out`.
pub fn write_epochs(out: &Path, seed: u64, ref_ids: &[String], ref_c: &[Pt]) -> Res<()> {
    let mut rng = rng_stream(seed, 40);
    let centre = (super::CENTRE.0 - 150.0, super::CENTRE.1 - 450.0);
    let rect = district(centre, 1.1, 300, ref_c);
    // The world: (name, position); the 2019 buildings first.
    let mut world: Vec<(String, Pt)> = (0..ref_c.len())
        .filter(|&i| rect.contains(ref_c[i]))
        .map(|i| (ref_ids[i].clone(), ref_c[i]))
        .collect();
    let mut standing: Vec<bool> = vec![true; world.len()];
    let mut seen: Vec<Vec<Option<String>>> = Vec::new();
    let mut epochs_doc = Vec::new();
    let mut new_n = 0;
    for (k, ((stem, crs), err)) in EPOCHS.iter().zip(ERRORS).enumerate() {
        let (mut demolished, mut built) = (0, 0);
        if k > 0 {
            // Between epochs: 4 % of the standing buildings demolished, 5 % new ones built in
            // gaps (at least 12 m from any standing building).
            let up: Vec<usize> = (0..world.len()).filter(|&i| standing[i]).collect();
            let n_up = up.len();
            for &i in up.choose_multiple(&mut rng, n_up * 4 / 100) {
                standing[i] = false;
                demolished += 1;
            }
            let target = n_up * 5 / 100;
            let mut tries = 0;
            while built < target && tries < 10_000 {
                tries += 1;
                let p = (
                    rng.gen_range(rect.lo.0..rect.hi.0),
                    rng.gen_range(rect.lo.1..rect.hi.1),
                );
                let clear = world
                    .iter()
                    .zip(&standing)
                    .all(|((_, q), s)| !*s || (q.0 - p.0).hypot(q.1 - p.1) >= 12.0);
                if clear {
                    new_n += 1;
                    world.push((format!("N-{new_n:04}"), p));
                    standing.push(true);
                    for row in &mut seen {
                        row.push(None);
                    }
                    built += 1;
                }
            }
        }
        // The epoch's error about the district centre: q = c + s R (p − c) + shift.
        let (ppm, rot_deg, sx, sy) = err;
        let s = 1.0 + ppm * 1e-6;
        let (sin, cos) = rot_deg.to_radians().sin_cos();
        let (a, b) = (s * cos, s * sin);
        let origin = if crs.is_some() {
            (centre.0 + sx, centre.1 + sy)
        } else {
            (1000.0, 5000.0)
        };
        let apply = |p: Pt| {
            let (x, y) = (p.0 - centre.0, p.1 - centre.1);
            (a * x - b * y + origin.0, b * x + a * y + origin.1)
        };
        let mut observed: Vec<usize> = (0..world.len())
            .filter(|&i| standing[i])
            .filter(|_| rng.gen::<f64>() >= 0.06)
            .collect();
        observed.shuffle(&mut rng);
        let mut text = String::from("point,x,y\n");
        let mut row: Vec<Option<String>> = vec![None; world.len()];
        let prefix = &stem[6..10];
        for (n, &i) in observed.iter().enumerate() {
            let p = world[i].1;
            let noisy = (p.0 + SIGMA * gauss(&mut rng), p.1 + SIGMA * gauss(&mut rng));
            let q = apply(noisy);
            let id = format!("{prefix}-{:04}", n + 1);
            text += &format!("{id},{:.3},{:.3}\n", q.0, q.1);
            row[i] = Some(id);
        }
        std::fs::write(out.join(format!("{stem}.csv")), text)?;
        seen.push(row);
        // Origin form: q = a x − b y + tx with tx = origin − R c.
        let tx = origin.0 - (a * centre.0 - b * centre.1);
        let ty = origin.1 - (b * centre.0 + a * centre.1);
        epochs_doc.push(json!({
            "file": format!("{stem}.csv"),
            "crs": crs.unwrap_or("local grid, metres"),
            "applied_error": {
                "maps": "truth (EPSG:32633) to the epoch's coordinates",
                "pivot": {"x": centre.0, "y": centre.1},
                "scale_ppm": ppm, "rotation_deg": rot_deg,
                "pivot_maps_to": {"x": origin.0, "y": origin.1},
                "origin_form": {"scale": s, "rotation_deg": rot_deg, "translation_x": tx, "translation_y": ty},
            },
            "noise_sigma_m": SIGMA,
            "counts": {"standing": standing.iter().filter(|s| **s).count(), "observed": observed.len(),
                       "demolished_since_previous": demolished, "built_since_previous": built},
        }));
    }
    let n = EPOCHS.len();
    let counts = |m: usize| {
        (0..world.len())
            .filter(|&i| seen.iter().filter(|r| r[i].is_some()).count() >= m)
            .count()
    };
    let mut csv = String::from("building");
    for (stem, _) in EPOCHS {
        csv += &format!(",{stem}");
    }
    csv += "\n";
    for (i, (name, _)) in world.iter().enumerate() {
        if seen.iter().all(|r| r[i].is_none()) {
            continue;
        }
        csv += name;
        for r in &seen {
            csv += &format!(",{}", r[i].as_deref().unwrap_or(""));
        }
        csv += "\n";
    }
    std::fs::write(out.join("epochs-true-tracks.csv"), csv)?;
    write_json(
        &out.join("epochs-truth.json"),
        &json!({
            "what": "five epochs of one district of the fictional town, for tiemark epochs",
            "district": {"min_x": rect.lo.0, "min_y": rect.lo.1, "max_x": rect.hi.0, "max_y": rect.hi.1, "crs": "EPSG:32633"},
            "landmark": "building centroid (2019 reference centroid; new buildings: a point)",
            "epochs": epochs_doc,
            "buildings_seen_in_all_epochs": counts(n),
            "buildings_seen_in_at_least_3_epochs": counts(3),
            "true_tracks_file": "epochs-true-tracks.csv",
        }),
    )?;
    Ok(())
}
