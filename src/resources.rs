//! Resources: whether a run's memory fits the machine, checked before the signature stage
//! starts, so that a run too large for the machine is refused with the estimate and what to
//! change instead of aborting in an allocation halfway through.
//!
//! **In:** the landmark counts of the two surveys, the resolved [`SignatureParams`], the
//! [`MatchingParams`] and [`FitParams`]; the memory available (`MemAvailable` in
//! `/proc/meminfo`, or the room a memory cgroup's limit leaves, where that is less).
//! **Out:** a [`MemoryEstimate`] (the peak bytes stages 3-5 add to what is already allocated),
//! or a [`ResourceError`] when that exceeds the memory available. Where `/proc/meminfo` cannot
//! be read (not Linux), there is no check.
//!
//! The estimate counts, from the sizes alone, what the stages allocate and which of it is
//! alive at once:
//! - signatures per landmark: C(k + leave_out, leave_out) subsets, times [`MAX_ORDERS`] when
//!   the ambiguity-aware walk is on (an upper bound: most polygons branch less);
//! - per signature: its polygon (k + 1 `u32`), its key (`key_dims` `f64`), its sensitivity
//!   (`f32`) when the ranking reads it;
//! - while one survey's signatures are computed, the chunk buffers of
//!   [`crate::signatures::CHUNK_LANDMARKS`] landmarks (polygon vertices as complex numbers,
//!   vertex indices, ratios);
//! - matching: the key tree built on the reference keys (`matching/tree.rs`: while it is
//!   built, each key with its index; then the keys by dimension and their indices), a copy of the target keys, their first two
//!   coordinates and Morton order, and the candidates (`matching.candidates` per target
//!   signature, [`Candidate`] each); sorting the candidates takes half their size again;
//! - the robust fit: `fit.max_rounds` drawn pairs, the target's Morton order and the paired
//!   landmarks.
//!
//! The peak is the largest of the five phases (reference signatures, target signatures,
//! matching queries, candidate sort, fit). The surveys' points, their grids and Morton
//! orders exist before the check and are already out of `MemAvailable`; they are counted in
//! [`MemoryEstimate::inputs_bytes`] for the record only.
//!
//! Measured against the peak resident set (`VmHWM` in `/proc/self/status`, reset before stage
//! 3, minus the resident set at that moment) on seeded synthetic pairs (28% missing and 25% new
//! landmarks on each side), in one ad-hoc run each on 2026-12-02 (ratio = measured / estimated):
//!
//! | landmarks per survey | options | estimated | measured | ratio |
//! |---:|---|---:|---:|---:|
//! | 97 000 | k = 8, leave-out 2 (45 per landmark), sphere keys | 1.77 GB | 1.71 GB | 0.965 |
//! | 194 000 | k = 16, leave-out 1 (17 per landmark), sensitivity ranking | 1.57 GB | 1.51 GB | 0.959 |
//! | 970 000 | k = 5, no subsets (the default at this size) | 0.37 GB | 0.35 GB | 0.936 |
//! | 48 600 | k = 6, leave-out 2, ambiguity 0.05, disc keys | 1.68 GB | 0.63 GB | 0.372 |
//!
//! Without the branching walk the estimate is a few percent above the real peak. With it, the
//! bound of [`MAX_ORDERS`] orders per polygon is far above what a layout gives (41.6 of at
//! most 112 signatures per landmark in the last row), so the estimate is then an upper bound.

use crate::fit::FitParams;
use crate::matching::{Candidate, MatchingParams};
use crate::signatures::neighbourhood::MAX_ORDERS;
use crate::signatures::{SignatureParams, VertexOrder, CHUNK_LANDMARKS};
use rustfft::num_complex::Complex64;
use std::mem::size_of;

/// What stages 3-5 of one run are estimated to allocate, in bytes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct MemoryEstimate {
    /// Landmarks of the reference and the target.
    pub landmarks: [u64; 2],
    /// Signatures per landmark, at most.
    pub per_landmark: u64,
    /// Both surveys' signatures as stored.
    pub signatures_bytes: u64,
    /// The candidate correspondences.
    pub candidates_bytes: u64,
    /// The key tree over the reference keys, with the key copy it is built from.
    pub key_tree_bytes: u64,
    /// The points, 2-D trees and Morton orders of both surveys (allocated before the check).
    pub inputs_bytes: u64,
    /// The most stages 3-5 hold at once, on top of the inputs.
    pub peak_bytes: u64,
}

/// The estimate of one run (see the module documentation for what is counted).
pub fn estimate(
    landmarks: [usize; 2],
    params: &SignatureParams,
    matching: &MatchingParams,
    fit: &FitParams,
) -> MemoryEstimate {
    let [nr, nt] = landmarks.map(|n| n as u64);
    let k = params.neighbours as u64;
    let n = k + 1;
    let subsets = match params.leave_out {
        0 => 1,
        1 => k + 1,
        _ => (k + 2) * (k + 1) / 2,
    };
    let branches = params.ambiguity > 0.0 && params.order == VertexOrder::Walk;
    let per_landmark = subsets * if branches { MAX_ORDERS as u64 } else { 1 };
    let harmonics = params.harmonics.len() as u64;
    let dims = params.key_space.dims() as u64 * harmonics;
    let (sr, st) = (
        nr.saturating_mul(per_landmark),
        nt.saturating_mul(per_landmark),
    );
    let sens = if matching.needs_sensitivity() { 4 } else { 0 };
    let stored = 4 * n + 8 * dims + sens;
    let sigs = |count: u64| count.saturating_mul(stored);
    let signatures_bytes = sigs(sr).saturating_add(sigs(st));
    // One chunk of landmarks: vertices as complex numbers, vertex indices, ratios, sensitivity.
    let complex = size_of::<Complex64>() as u64;
    let per_chunk_signature = complex * n + 4 * n + complex * harmonics + sens;
    let chunk =
        |landmarks: u64| landmarks.min(CHUNK_LANDMARKS as u64) * per_landmark * per_chunk_signature;
    let candidates_bytes = st
        .saturating_mul(matching.candidates as u64)
        .saturating_mul(size_of::<Candidate>() as u64);
    // The key tree (matching/tree.rs) at the end of its build: each key with its u32 index as
    // the build moved them (8·dims + 8 bytes with padding) beside the keys laid out by
    // dimension (8·dims); its splits and leaf starts, one each per 16 keys, under half a byte
    // per key. (Its 4-byte index per key is not counted: within the estimate's measured
    // margin, module doc.)
    let key_copy = sr.saturating_mul(8 * dims);
    let tree = sr.saturating_mul(8 * dims + 4 + 4) + sr / 2;
    let key_tree_bytes = key_copy.saturating_add(tree);
    // Target keys copied, their first two coordinates, and their Morton order (a (u64, u32)
    // sort key each, then the u32 order).
    let queries = st.saturating_mul(8 * dims + 16 + 16 + 4);
    let fit_bytes = (fit.max_rounds as u64)
        .saturating_mul(32)
        .saturating_add(nt.saturating_mul(20 + 3 * 16));
    let phases = [
        sigs(sr).saturating_add(chunk(nr)),
        signatures_bytes.saturating_add(chunk(nt)),
        signatures_bytes
            .saturating_add(key_tree_bytes)
            .saturating_add(queries)
            .saturating_add(candidates_bytes),
        signatures_bytes.saturating_add(candidates_bytes.saturating_mul(3) / 2),
        signatures_bytes
            .saturating_add(candidates_bytes)
            .saturating_add(fit_bytes),
    ];
    // Points (16 bytes), their grid (a copy of the point and its u32 index, and at most four
    // cells of a u32 start each per point), Morton order (4).
    let inputs_bytes = (nr + nt).saturating_mul(16 + 20 + 16 + 4);
    MemoryEstimate {
        landmarks: [nr, nt],
        per_landmark,
        signatures_bytes,
        candidates_bytes,
        key_tree_bytes,
        inputs_bytes,
        peak_bytes: phases.into_iter().max().expect("five phases"),
    }
}

/// A run needs more memory than the machine has.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ResourceError {
    /// The estimated peak exceeds the memory available.
    #[error("not enough memory: matching {reference} ({reference_landmarks} landmarks) with {target} ({target_landmarks} landmarks) at {per_landmark} signatures per landmark needs an estimated {} GB for signatures, matching and the fit, against {} GB available; use fewer signatures.neighbours (now {neighbours}), a smaller signatures.leave_out (now {leave_out}){}, or tile the survey into smaller areas and match them one at a time", gb(*.estimated), gb(*.available), ambiguity_hint(*.ambiguity))]
    Memory {
        /// Label of the reference ("the reference (path)").
        reference: String,
        /// Label of the target.
        target: String,
        /// Reference landmarks.
        reference_landmarks: u64,
        /// Target landmarks.
        target_landmarks: u64,
        /// Signatures per landmark, at most.
        per_landmark: u64,
        /// Estimated peak bytes.
        estimated: u64,
        /// Bytes available.
        available: u64,
        /// signatures.neighbours in use.
        neighbours: usize,
        /// signatures.leave_out in use.
        leave_out: usize,
        /// signatures.ambiguity when the walk branches (a third thing to change).
        ambiguity: Option<f64>,
    },
}

/// Bytes as decimal gigabytes, one decimal (two below 1 GB).
fn gb(bytes: u64) -> String {
    let g = bytes as f64 / 1e9;
    if g < 1.0 {
        format!("{g:.2}")
    } else {
        format!("{g:.1}")
    }
}

/// The advice on the branching walk, when it branches.
fn ambiguity_hint(ambiguity: Option<f64>) -> String {
    ambiguity
        .map(|a| format!(", signatures.ambiguity = 0 (now {a})"))
        .unwrap_or_default()
}

/// The check with the memory available given: refuses when `estimate` exceeds `available`
/// bytes; `None` (unknown) passes. `labels` name the reference and the target.
pub fn check(
    estimate: &MemoryEstimate,
    available: Option<u64>,
    params: &SignatureParams,
    labels: &[String; 2],
) -> Result<(), ResourceError> {
    let Some(available) = available else {
        return Ok(());
    };
    if estimate.peak_bytes <= available {
        return Ok(());
    }
    let branches = params.ambiguity > 0.0 && params.order == VertexOrder::Walk;
    Err(ResourceError::Memory {
        reference: labels[0].clone(),
        target: labels[1].clone(),
        reference_landmarks: estimate.landmarks[0],
        target_landmarks: estimate.landmarks[1],
        per_landmark: estimate.per_landmark,
        estimated: estimate.peak_bytes,
        available,
        neighbours: params.neighbours,
        leave_out: params.leave_out,
        ambiguity: branches.then_some(params.ambiguity),
    })
}

/// Estimates the run and checks it against the memory available now ([`available_memory`]).
pub fn ensure_memory(
    landmarks: [usize; 2],
    params: &SignatureParams,
    matching: &MatchingParams,
    fit: &FitParams,
    labels: &[String; 2],
) -> Result<MemoryEstimate, ResourceError> {
    let e = estimate(landmarks, params, matching, fit);
    check(&e, available_memory(), params, labels)?;
    Ok(e)
}

/// `MemAvailable` of `/proc/meminfo` in bytes, or less where a memory cgroup of this process
/// (a container's or a batch job's limit) leaves less (`cgroup_room`); `None` where
/// `/proc/meminfo` cannot be read.
pub fn available_memory() -> Option<u64> {
    let read = |path: &str| std::fs::read_to_string(path).ok();
    let machine = parse_mem_available(&read("/proc/meminfo")?)?;
    Some(cgroup_room(&read).map_or(machine, |room| room.min(machine)))
}

/// A limit at or above this is no limit (cgroup v1 reports "unlimited" as the largest page
/// count times the page size, 9,223,372,036,854,771,712 on x86-64).
const NO_LIMIT: u64 = 1 << 62;

/// The memory the memory cgroups of this process leave it, read through `read` (a file's text
/// by path): for the process's own cgroup and each of its ancestors that has a limit, the
/// limit less what is charged to it and cannot simply be dropped (its usage less its inactive
/// file cache, which the kernel reclaims before it refuses memory); the least of those. `None`
/// where no limit is set or none can be read.
///
/// Both hierarchies are read: cgroup v2 (a `0::PATH` line in `/proc/self/cgroup`, files
/// `memory.max`, `memory.current` and `memory.stat`'s `inactive_file`, under `/sys/fs/cgroup`
/// or, on hybrid systems, `/sys/fs/cgroup/unified`) and cgroup v1 (the line naming the
/// `memory` controller, files `memory.limit_in_bytes`, `memory.usage_in_bytes` and
/// `memory.stat`'s `total_inactive_file`, under `/sys/fs/cgroup/memory`); the file names are
/// those of the Linux kernel's documentation (`Documentation/admin-guide/cgroup-v2.rst` and
/// `cgroup-v1/memory.rst`; from memory). Inside a container whose cgroup namespace shows its
/// own cgroup as `/`, that is the mount's root.
fn cgroup_room(read: &dyn Fn(&str) -> Option<String>) -> Option<u64> {
    let own = read("/proc/self/cgroup")?;
    let number = |text: &str| text.trim().parse::<u64>().ok();
    let stat_value = |stat: &str, key: &str| {
        stat.lines().find_map(|l| {
            let mut parts = l.split_whitespace();
            (parts.next() == Some(key))
                .then(|| parts.next().and_then(number))
                .flatten()
        })
    };
    let mut least: Option<u64> = None;
    for line in own.lines() {
        let mut parts = line.splitn(3, ':');
        let (Some(_), Some(controllers), Some(path)) = (parts.next(), parts.next(), parts.next())
        else {
            continue;
        };
        // (mounts, limit file, usage file, the stat's inactive file cache)
        let (bases, files): (&[&str], [&str; 3]) = if controllers.is_empty() {
            (
                &["/sys/fs/cgroup", "/sys/fs/cgroup/unified"],
                ["memory.max", "memory.current", "inactive_file"],
            )
        } else if controllers.split(',').any(|c| c == "memory") {
            (
                &["/sys/fs/cgroup/memory"],
                [
                    "memory.limit_in_bytes",
                    "memory.usage_in_bytes",
                    "total_inactive_file",
                ],
            )
        } else {
            continue;
        };
        // The cgroup's own directory, then each ancestor's up to the mount's root.
        let mut dirs = vec![path.trim_end_matches('/').to_string()];
        while let Some(cut) = dirs.last().and_then(|d| d.rfind('/')) {
            let up = dirs
                .last()
                .map(|d| d[..cut].to_string())
                .unwrap_or_default();
            dirs.push(up);
        }
        dirs.dedup();
        for base in bases {
            for dir in &dirs {
                let at = |file: &str| read(&format!("{base}{dir}/{file}"));
                let Some(limit) = at(files[0]) else {
                    continue;
                };
                let Some(limit) = number(&limit).filter(|&l| l < NO_LIMIT) else {
                    continue; // "max", or v1's "unlimited"
                };
                let usage = at(files[1]).as_deref().and_then(number).unwrap_or(0);
                let inactive = at("memory.stat")
                    .as_deref()
                    .and_then(|stat| stat_value(stat, files[2]))
                    .unwrap_or(0);
                let room = limit.saturating_sub(usage.saturating_sub(inactive));
                least = Some(least.map_or(room, |l| l.min(room)));
            }
        }
    }
    least
}

/// The `MemAvailable:` line of a `/proc/meminfo` text, in bytes (the file says "kB" and
/// means KiB).
fn parse_mem_available(meminfo: &str) -> Option<u64> {
    let line = meminfo.lines().find(|l| l.starts_with("MemAvailable:"))?;
    let mut parts = line["MemAvailable:".len()..].split_whitespace();
    let value: u64 = parts.next()?.parse().ok()?;
    match parts.next() {
        Some("kB") => value.checked_mul(1024),
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::matching::Rank;
    use crate::signatures::KeySpace;

    fn labels() -> [String; 2] {
        [
            "the reference (a.gpkg)".into(),
            "the target (b.gpkg)".into(),
        ]
    }

    /// The arithmetic on small sizes, worked by hand: k = 4, leave-out 2, keys on the sphere
    /// with harmonics 1 and 2 (6 dimensions), 3 candidates, distance ranking, 1000 reference
    /// and 500 target landmarks.
    #[test]
    fn estimate_counts_what_the_stages_hold() {
        let params = SignatureParams {
            leave_out: 2,
            ..SignatureParams::plain(4)
        };
        let fit = FitParams {
            max_rounds: 1000,
            ..FitParams::default()
        };
        let e = estimate([1000, 500], &params, &MatchingParams::default(), &fit);
        // C(6, 2) = 15 signatures per landmark.
        assert_eq!(e.per_landmark, 15);
        // Per signature: 5 u32 (20 bytes) + 6 f64 (48 bytes) = 68 bytes.
        assert_eq!(e.signatures_bytes, (15_000 + 7_500) * 68);
        // 7 500 target signatures × 3 candidates × 16 bytes.
        assert_eq!(size_of::<Candidate>(), 16);
        assert_eq!(e.candidates_bytes, 7_500 * 3 * 16);
        // Key copy 48 bytes, tree 48 + 8 bytes per key, stems half a byte.
        assert_eq!(e.key_tree_bytes, 15_000 * (48 + 56) + 7_500);
        // Matching is the peak here: signatures, key tree, target queries (48 + 36 bytes each),
        // candidates.
        let matching = e.signatures_bytes + e.key_tree_bytes + 7_500 * 84 + e.candidates_bytes;
        assert_eq!(e.peak_bytes, matching);
        // Points 16, grid 20 + 16, Morton order 4 bytes per landmark.
        assert_eq!(e.inputs_bytes, 1500 * 56);
    }

    #[test]
    fn ambiguity_sensitivity_and_disc_keys_change_the_counts() {
        let params = SignatureParams {
            leave_out: 1,
            ambiguity: 0.1,
            key_space: KeySpace::Disc,
            harmonics: vec![1],
            ..SignatureParams::plain(8)
        };
        let matching = MatchingParams {
            candidates: 2,
            rank: Rank::Sensitivity,
        };
        let e = estimate([100, 100], &params, &matching, &FitParams::default());
        // 9 subsets × 4 walk orders.
        assert_eq!(e.per_landmark, 36);
        // Per signature: 9 u32 + 2 f64 + one f32 = 56 bytes.
        assert_eq!(e.signatures_bytes, 2 * 3600 * 56);
        assert_eq!(e.candidates_bytes, 3600 * 2 * 16);
        // The angular order never branches.
        let angular = SignatureParams {
            order: VertexOrder::Angular,
            ..params
        };
        assert_eq!(
            estimate([100, 100], &angular, &matching, &FitParams::default()).per_landmark,
            9
        );
    }

    /// k = 16 leaving out two on a pretend survey of 10^9 landmarks: C(18, 2) = 153 signatures
    /// per landmark, terabytes; refused, naming both surveys and what to change.
    #[test]
    fn a_run_beyond_the_machine_is_refused_with_the_estimate_and_the_fix() {
        let params = SignatureParams {
            leave_out: 2,
            ..SignatureParams::plain(16)
        };
        let (m, f) = (MatchingParams::default(), FitParams::default());
        let e = estimate([1_000_000_000; 2], &params, &m, &f);
        assert_eq!(e.per_landmark, 153);
        assert!(e.peak_bytes > 10_000_000_000_000, "{}", e.peak_bytes);
        let err = check(&e, Some(16_000_000_000), &params, &labels()).unwrap_err();
        let text = err.to_string();
        for part in [
            "not enough memory",
            "the reference (a.gpkg) (1000000000 landmarks)",
            "the target (b.gpkg)",
            "153 signatures per landmark",
            "against 16.0 GB available",
            "fewer signatures.neighbours (now 16)",
            "a smaller signatures.leave_out (now 2)",
            "tile the survey",
        ] {
            assert!(text.contains(part), "{part}: {text}");
        }
        assert!(!text.contains("ambiguity"), "{text}");
        let estimated = format!("estimated {} GB", gb(e.peak_bytes));
        assert!(text.contains(&estimated), "{text}");
        // And on this machine, whatever it has.
        assert!(ensure_memory([1_000_000_000; 2], &params, &m, &f, &labels()).is_err());
        // The branching walk is named as a third thing to change.
        let branching = SignatureParams {
            ambiguity: 0.05,
            ..params
        };
        let e = estimate([1_000_000_000; 2], &branching, &m, &f);
        let text = check(&e, Some(16_000_000_000), &branching, &labels())
            .unwrap_err()
            .to_string();
        assert!(
            text.contains("signatures.ambiguity = 0 (now 0.05)"),
            "{text}"
        );
    }

    #[test]
    fn a_run_that_fits_passes_and_an_unknown_amount_is_not_checked() {
        let params = SignatureParams {
            leave_out: 2,
            ..SignatureParams::plain(4)
        };
        let e = estimate(
            [20_000; 2],
            &params,
            &MatchingParams::default(),
            &FitParams::default(),
        );
        assert!(check(&e, Some(e.peak_bytes), &params, &labels()).is_ok());
        assert!(check(&e, Some(e.peak_bytes - 1), &params, &labels()).is_err());
        assert!(check(&e, None, &params, &labels()).is_ok());
    }

    /// A file system of the given files for [`cgroup_room`].
    fn files(list: &[(&str, &str)]) -> impl Fn(&str) -> Option<String> {
        let map: std::collections::HashMap<String, String> = list
            .iter()
            .map(|(p, t)| (p.to_string(), t.to_string()))
            .collect();
        move |path: &str| map.get(path).cloned()
    }

    #[test]
    fn cgroup_limits_are_read_from_either_hierarchy_and_every_ancestor() {
        // cgroup v2, a job of a batch scheduler: 8 GiB on the job's parent, none on the job;
        // 3 GiB charged, 1 GiB of it inactive file cache.
        let gib = 1u64 << 30;
        let v2 = files(&[
            ("/proc/self/cgroup", "0::/jobs/job-17\n"),
            ("/sys/fs/cgroup/jobs/job-17/memory.max", "max\n"),
            ("/sys/fs/cgroup/jobs/job-17/memory.current", "2000\n"),
            ("/sys/fs/cgroup/jobs/memory.max", &format!("{}\n", 8 * gib)),
            (
                "/sys/fs/cgroup/jobs/memory.current",
                &format!("{}\n", 3 * gib),
            ),
            (
                "/sys/fs/cgroup/jobs/memory.stat",
                &format!("anon 99\nfile 7\ninactive_file {}\nactive_file 5\n", gib),
            ),
            ("/sys/fs/cgroup/memory.max", "max\n"),
        ]);
        assert_eq!(cgroup_room(&v2), Some(8 * gib - 2 * gib));
        // A container (its cgroup namespace shows "/"): the mount's root is its cgroup.
        let container = files(&[
            ("/proc/self/cgroup", "0::/\n"),
            ("/sys/fs/cgroup/memory.max", "4294967296\n"),
            ("/sys/fs/cgroup/memory.current", "1073741824\n"),
        ]);
        assert_eq!(cgroup_room(&container), Some(3 * gib));
        // cgroup v1 as on this project's development machine: unlimited everywhere.
        let unlimited = files(&[
            (
                "/proc/self/cgroup",
                "9:name=systemd:/\n4:memory:/svc/e2\n1:cpu:/\n0::/\n",
            ),
            (
                "/sys/fs/cgroup/memory/svc/e2/memory.limit_in_bytes",
                "9223372036854771712\n",
            ),
            (
                "/sys/fs/cgroup/memory/svc/e2/memory.usage_in_bytes",
                "11075543040\n",
            ),
            (
                "/sys/fs/cgroup/memory/memory.limit_in_bytes",
                "9223372036854771712\n",
            ),
        ]);
        assert_eq!(cgroup_room(&unlimited), None);
        // cgroup v1 with a limit on the process's own cgroup and a tighter room above it: the
        // least room counts; the stat's key is total_inactive_file.
        let v1 = files(&[
            ("/proc/self/cgroup", "4:cpu,memory:/a/b\n"),
            ("/sys/fs/cgroup/memory/a/b/memory.limit_in_bytes", "1000\n"),
            ("/sys/fs/cgroup/memory/a/b/memory.usage_in_bytes", "400\n"),
            (
                "/sys/fs/cgroup/memory/a/b/memory.stat",
                "cache 300\ninactive_file 999\ntotal_inactive_file 100\n",
            ),
            ("/sys/fs/cgroup/memory/a/memory.limit_in_bytes", "900\n"),
            ("/sys/fs/cgroup/memory/a/memory.usage_in_bytes", "850\n"),
        ]);
        assert_eq!(cgroup_room(&v1), Some(50));
        // More charged than the limit (it can happen briefly): no room, not an overflow.
        let over = files(&[
            ("/proc/self/cgroup", "0::/\n"),
            ("/sys/fs/cgroup/memory.max", "100\n"),
            ("/sys/fs/cgroup/memory.current", "250\n"),
        ]);
        assert_eq!(cgroup_room(&over), Some(0));
        // Nothing readable, or no memory controller at all.
        assert_eq!(cgroup_room(&files(&[])), None);
        assert_eq!(
            cgroup_room(&files(&[("/proc/self/cgroup", "3:cpuset:/\n")])),
            None
        );
    }

    #[test]
    fn mem_available_is_read_in_kib() {
        let text = "MemTotal:       24731184 kB\nMemFree:        11445896 kB\nMemAvailable:   23421232 kB\n";
        assert_eq!(parse_mem_available(text), Some(23_421_232 * 1024));
        assert_eq!(parse_mem_available("MemTotal: 5 kB\n"), None);
        assert_eq!(parse_mem_available("MemAvailable: many kB\n"), None);
        assert_eq!(parse_mem_available("MemAvailable: 12 MB\n"), None);
    }
}
