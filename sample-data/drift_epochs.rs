//! Two monitoring epochs of the fictional town's centre for the drift check (`tiemark drift`,
//! `pipelines/site-drift-check.toml`): ENTIRELY INVENTED data.
//!
//! The 2019 reference buildings whose centroid lies in a window around the town centre are
//! surveyed as points (one per building: its centroid) in May and again in June 2026:
//!
//! | file | what |
//! |---|---|
//! | `drift-epoch-2026-05.csv` | May: `pt,easting,northing` (EPSG:32633, metres, 3 decimals) |
//! | `drift-epoch-2026-06.csv` | June: the same buildings moved by a known global drift, one block moved further |
//! | `drift-epochs-truth.json` | the drift, the block, its buildings, the noise, the expected verdict |
//!
//! Each epoch misses a few buildings (independently) and adds independent Gaussian noise per
//! coordinate to the true centroid. June is May's world moved by the **global drift** (a
//! similarity about the window's centre: `q = pivot + s R(t)(p − pivot) + shift`, reference →
//! target, the movement of June relative to May) and, for the buildings within a radius of a
//! point (**the block**), by a further local shift. Point ids are the buildings' 2019 ids
//! (`B-…`), the same in both epochs, so that a reader can check every pairing; tiemark does not
//! use them to match.
//!
//! Uses its own random stream (seed, stream 20), so that the other sample files do not change.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde_json::json;
use std::error::Error;
use std::f64::consts::TAU;
use std::path::Path;

type Res<T> = Result<T, Box<dyn Error>>;

/// May's file.
pub const MAY: &str = "drift-epoch-2026-05.csv";
/// June's file.
pub const JUNE: &str = "drift-epoch-2026-06.csv";
/// The truth.
pub const TRUTH: &str = "drift-epochs-truth.json";

/// Standard normal deviate (Box-Muller, cosine branch).
fn gauss(rng: &mut ChaCha8Rng) -> f64 {
    let u1: f64 = 1.0 - rng.gen::<f64>();
    let u2: f64 = rng.gen::<f64>();
    (-2.0 * u1.ln()).sqrt() * (TAU * u2).cos()
}

fn csv(rows: &[(String, (f64, f64))]) -> String {
    let mut s = String::from("pt,easting,northing\n");
    for (id, p) in rows {
        s.push_str(&format!("{id},{:.3},{:.3}\n", p.0, p.1));
    }
    s
}

/// Writes the two epochs and the truth into `out`. `ids` and `centroids` are the 2019
/// reference buildings (EPSG:32633); `centre` is the town centre.
pub fn write_drift_epochs(
    out: &Path,
    seed: u64,
    ids: &[String],
    centroids: &[(f64, f64)],
    centre: (f64, f64),
) -> Res<()> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(20);
    // The window: 700 m x 500 m around the town centre.
    let (hx, hy) = (350.0, 250.0);
    let pivot = centre;
    let inside: Vec<usize> = (0..centroids.len())
        .filter(|&i| {
            let c = centroids[i];
            (c.0 - centre.0).abs() < hx && (c.1 - centre.1).abs() < hy
        })
        .collect();
    // The global drift (reference -> target: June relative to May).
    let scale = 1.0 + 6e-6;
    let rotation_arcsec: f64 = 1.5;
    let shift = (0.045, -0.030);
    let t = (rotation_arcsec / 3600.0).to_radians();
    let drift = |p: (f64, f64)| {
        let (dx, dy) = (p.0 - pivot.0, p.1 - pivot.1);
        let (s, c) = t.sin_cos();
        (
            pivot.0 + scale * (c * dx - s * dy) + shift.0,
            pivot.1 + scale * (s * dx + c * dy) + shift.1,
        )
    };
    // The block: buildings within 60 m of a point north-east of the centre, moved by a further
    // (0.14, 0.10) m in June.
    let block_centre = (centre.0 + 150.0, centre.1 + 80.0);
    let block_radius = 60.0;
    let block_shift = (0.14, 0.10);
    let in_block =
        |p: (f64, f64)| (p.0 - block_centre.0).hypot(p.1 - block_centre.1) < block_radius;
    let sigma = 0.015;
    let missing = 0.02;
    let mut may = Vec::new();
    let mut june = Vec::new();
    let mut moved = Vec::new();
    let mut both = 0;
    for &i in &inside {
        let c = centroids[i];
        let in_may = rng.gen::<f64>() >= missing;
        let in_june = rng.gen::<f64>() >= missing;
        let noise = [
            gauss(&mut rng),
            gauss(&mut rng),
            gauss(&mut rng),
            gauss(&mut rng),
        ];
        if in_may {
            may.push((
                ids[i].clone(),
                (c.0 + sigma * noise[0], c.1 + sigma * noise[1]),
            ));
        }
        if in_june {
            let mut q = drift(c);
            if in_block(c) {
                q = (q.0 + block_shift.0, q.1 + block_shift.1);
            }
            june.push((
                ids[i].clone(),
                (q.0 + sigma * noise[2], q.1 + sigma * noise[3]),
            ));
        }
        if in_may && in_june {
            both += 1;
            if in_block(c) {
                moved.push(ids[i].clone());
            }
        }
    }
    // June's file in another order than May's (a new survey's own order).
    let mut order: Vec<usize> = (0..june.len()).collect();
    for k in (1..order.len()).rev() {
        order.swap(k, rng.gen_range(0..=k));
    }
    let june: Vec<(String, (f64, f64))> = order.iter().map(|&k| june[k].clone()).collect();
    std::fs::write(out.join(MAY), csv(&may))?;
    std::fs::write(out.join(JUNE), csv(&june))?;
    // The block's total movement at its centre: the global drift there plus its own shift.
    let g = drift(block_centre);
    let total = (
        g.0 - block_centre.0 + block_shift.0,
        g.1 - block_centre.1 + block_shift.1,
    );
    let tolerance = 0.10;
    let truth = json!({
        "description": "Truth for the fictional Tessaloom drift epochs (monthly monitoring of the town centre, May and June 2026). All data are invented.",
        "generator": "sample-data/drift_epochs.rs",
        "seed": seed,
        "reference_file": MAY,
        "target_file": JUNE,
        "crs": "EPSG:32633 (both epochs; CSV columns pt, easting, northing)",
        "points": "one per 2019 reference building whose centroid lies in the window; ids are the buildings' bldg_id, the same in both epochs",
        "window": {"centre_x": centre.0, "centre_y": centre.1, "half_width_m": hx, "half_height_m": hy},
        "global_drift": {
            "maps": "May (reference) -> June (target): the movement of June relative to May",
            "form": "q = pivot + s R(t) (p - pivot) + shift, t counter-clockwise",
            "pivot_x": pivot.0,
            "pivot_y": pivot.1,
            "scale_ppm": (scale - 1.0) * 1e6,
            "rotation_arcsec": rotation_arcsec,
            "shift_east_m": shift.0,
            "shift_north_m": shift.1,
        },
        "block": {
            "centre_x": block_centre.0,
            "centre_y": block_centre.1,
            "radius_m": block_radius,
            "shift_east_m": block_shift.0,
            "shift_north_m": block_shift.1,
            "meaning": "buildings whose true centroid lies within radius_m of the centre moved by this shift in June, on top of the global drift",
            "movement_at_centre_m": total.0.hypot(total.1),
            "moved_ids_in_both_epochs": moved,
        },
        "noise": {"kind": "independent Gaussian per coordinate per epoch, added to the true centroid", "sigma_m": sigma},
        "missing_fraction_per_epoch": missing,
        "counts": {"window": inside.len(), "may": may.len(), "june": june.len(), "both": both, "block_in_both": moved.len()},
        "expected": {
            "tolerance_m": tolerance,
            "verdict": "exceeded",
            "why": "the global drift stays within the tolerance over the window; the block's movement relative to May exceeds it",
        },
    });
    let mut text = serde_json::to_string_pretty(&truth)?;
    text.push('\n');
    std::fs::write(out.join(TRUTH), text)?;
    eprintln!(
        "drift epochs: {} in the window, May {}, June {}, block {} (moved {:.3} m at its centre)",
        inside.len(),
        may.len(),
        june.len(),
        moved.len(),
        total.0.hypot(total.1)
    );
    Ok(())
}
