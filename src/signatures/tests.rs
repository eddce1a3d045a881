//! Invariance and oracle tests of the signature stage.

use super::*;
use crate::fit::similarity::Similarity;
use crate::spatial::{morton_order, PointIndex};
use proptest::prelude::*;
use proptest::test_runner::RngSeed;
use rand::{Rng, SeedableRng};
use std::collections::HashMap;

fn random_points(seed: u64, n: usize) -> Vec<[f64; 2]> {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    (0..n)
        .map(|_| [rng.gen_range(0.0..1000.0), rng.gen_range(0.0..1000.0)])
        .collect()
}

fn sigs_of(points: &[[f64; 2]], params: &SignatureParams) -> Signatures {
    let index = PointIndex::new(points).unwrap();
    let order = morton_order(points);
    let survey = Survey {
        points,
        index: &index,
        order: &order,
    };
    compute("test", &survey, params, true, &mut |_| {}).unwrap()
}

/// Key of each landmark, indexed by landmark.
fn key_by_landmark(s: &Signatures, n: usize) -> Vec<Option<Vec<f64>>> {
    let mut out = vec![None; n];
    for i in 0..s.len() {
        out[s.landmark(i) as usize] = Some(s.key(i).to_vec());
    }
    out
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: 24,
        rng_seed: RngSeed::Fixed(0x5eed_0000),
        ..ProptestConfig::default()
    })]
    #[test]
    fn keys_are_unchanged_by_any_similarity(
        seed in 0u64..1000,
        scale in 0.05f64..20.0,
        angle in -3.2f64..3.2,
        tx in -1e6f64..1e6,
        ty in -1e6f64..1e6,
        angular in any::<bool>(),
    ) {
        let pts = random_points(seed, 300);
        let s = Similarity::from_params(scale, angle, tx, ty);
        let moved: Vec<[f64; 2]> = pts.iter().map(|&p| s.apply(p)).collect();
        let params = SignatureParams {
            order: if angular { VertexOrder::Angular } else { VertexOrder::Walk },
            ..SignatureParams::plain(5)
        };
        let a = key_by_landmark(&sigs_of(&pts, &params), pts.len());
        let b = key_by_landmark(&sigs_of(&moved, &params), pts.len());
        for (ka, kb) in a.iter().zip(&b) {
            let (ka, kb) = (ka.as_ref().unwrap(), kb.as_ref().unwrap());
            prop_assert_eq!(ka.len(), 6);
            for (a, b) in ka.iter().zip(kb) {
                prop_assert!((a - b).abs() < 1e-7);
            }
        }
    }
}

/// Key of each signature, indexed by its polygon (landmark first, then the ordered
/// neighbours, as landmark ids): with subset signatures a landmark has several keys, and the
/// polygon names each one.
fn key_by_polygon(s: &Signatures) -> HashMap<Vec<u32>, Vec<f64>> {
    (0..s.len())
        .map(|i| (s.polygon(i).to_vec(), s.key(i).to_vec()))
        .collect()
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: 24,
        rng_seed: RngSeed::Fixed(0x5eed_0001),
        ..ProptestConfig::default()
    })]
    #[test]
    fn shipped_default_keys_are_unchanged_by_any_similarity(
        seed in 0u64..1000,
        scale in 0.05f64..20.0,
        angle in -3.2f64..3.2,
        tx in -1e6f64..1e6,
        ty in -1e6f64..1e6,
    ) {
        // The options the tool ships for this survey size (today, for 300 landmarks: k = 4,
        // every way of leaving out 2 of the 6 nearest, keys on the sphere, harmonics 1 and
        // 2), so that this follows the default when it changes.
        let pts = random_points(seed, 300);
        let params = SignatureChoice::default().resolve(pts.len());
        let s = Similarity::from_params(scale, angle, tx, ty);
        let moved: Vec<[f64; 2]> = pts.iter().map(|&p| s.apply(p)).collect();
        let (sa, sb) = (sigs_of(&pts, &params), sigs_of(&moved, &params));
        // Every landmark has all its subset signatures: C(k + leave_out, leave_out) of them.
        let pool = params.neighbours + params.leave_out;
        let per_landmark = subsets(pool, params.leave_out).len();
        prop_assert_eq!(sa.len(), pts.len() * per_landmark);
        prop_assert_eq!(sb.len(), sa.len());
        let dims = params.key_space.dims() * params.harmonics.len();
        let (a, b) = (key_by_polygon(&sa), key_by_polygon(&sb));
        // Polygons are unique per signature, so the maps lose nothing.
        prop_assert_eq!(a.len(), sa.len());
        for (poly, ka) in &a {
            let kb = b.get(poly);
            prop_assert!(kb.is_some(), "polygon {:?} is missing after the similarity", poly);
            let kb = kb.unwrap();
            prop_assert_eq!(ka.len(), dims);
            // Rounding only: the worst seen was 8e-10, at scale 0.05 with a 1e6 translation.
            for (x, y) in ka.iter().zip(kb) {
                prop_assert!((x - y).abs() < 1e-7, "polygon {:?}: {:?} vs {:?}", poly, ka, kb);
            }
        }
    }
}

#[test]
fn planned_keys_agree_with_direct_dft() {
    let pts = random_points(9, 500);
    for key_space in [KeySpace::Disc, KeySpace::Sphere] {
        let params = SignatureParams {
            key_space,
            ..SignatureParams::plain(5)
        };
        let s = sigs_of(&pts, &params);
        assert_eq!(s.len(), pts.len());
        let d = key_space.dims();
        assert_eq!(s.key_dims, d * params.harmonics.len());
        for i in (0..s.len()).step_by(17) {
            let z: Vec<Complex64> = s
                .polygon(i)
                .iter()
                .map(|&v| Complex64::new(pts[v as usize][0], pts[v as usize][1]))
                .collect();
            for (h, &j) in params.harmonics.iter().enumerate() {
                let r = fourier::ratio_direct(&z, j);
                let want = match key_space {
                    KeySpace::Disc => fourier::bounded(r).to_vec(),
                    KeySpace::Sphere => fourier::spherical(r).to_vec(),
                };
                let got = &s.key(i)[d * h..d * h + d];
                assert!(want.iter().zip(got).all(|(a, b)| (a - b).abs() < 1e-9));
            }
        }
    }
}

#[test]
fn mirror_maps_key_to_inverse_conjugate_for_the_walk() {
    // Swapping the axes (the classic lat/lon mix-up) keeps distances, so the walk visits the
    // same vertices, and the ratio becomes 1/conj(r).
    let pts = random_points(4, 200);
    let swapped: Vec<[f64; 2]> = pts.iter().map(|p| [p[1], p[0]]).collect();
    let params = SignatureParams {
        key_space: KeySpace::Disc,
        ..SignatureParams::plain(5)
    };
    let a = sigs_of(&pts, &params);
    let b = sigs_of(&swapped, &params);
    let kb = key_by_landmark(&b, pts.len());
    for i in 0..a.len() {
        let got = kb[a.landmark(i) as usize].as_ref().unwrap();
        for h in 0..params.harmonics.len() {
            let k = &a.key(i)[2 * h..2 * h + 2];
            // Invert the bounded map: r = key / (1 − |key|).
            let m = k[0].hypot(k[1]);
            let r = Complex64::new(k[0], k[1]) / (1.0 - m);
            let want = fourier::bounded(1.0 / r.conj());
            let g = &got[2 * h..2 * h + 2];
            assert!((want[0] - g[0]).abs() < 1e-6 && (want[1] - g[1]).abs() < 1e-6);
        }
    }
    // On the sphere, 1/conj(r) is the mirror image in the equator: (x, y, z) -> (x, y, -z).
    let params = SignatureParams {
        key_space: KeySpace::Sphere,
        ..SignatureParams::plain(5)
    };
    let a = sigs_of(&pts, &params);
    let kb = key_by_landmark(&sigs_of(&swapped, &params), pts.len());
    for i in 0..a.len() {
        let got = kb[a.landmark(i) as usize].as_ref().unwrap();
        for (k, g) in a.key(i).chunks_exact(3).zip(got.chunks_exact(3)) {
            assert!((k[0] - g[0]).abs() < 1e-6 && (k[1] - g[1]).abs() < 1e-6);
            assert!((k[2] + g[2]).abs() < 1e-6);
        }
    }
}

#[test]
fn too_few_landmarks_is_an_error() {
    let pts = random_points(1, 5);
    let index = PointIndex::new(&pts).unwrap();
    let order = morton_order(&pts);
    let survey = Survey {
        points: &pts,
        index: &index,
        order: &order,
    };
    let err = compute(
        "reference",
        &survey,
        &SignatureParams::plain(5),
        false,
        &mut |_| {},
    );
    assert!(matches!(
        err,
        Err(SignatureError::TooFewLandmarks {
            found: 5,
            needed: 6,
            ..
        })
    ));
}

/// compute's allocations go through `reserve`: a request beyond what the machine can give is
/// an error naming the survey and what to change, not an abort (a request beyond the address
/// space fails the same way on every machine).
#[test]
fn an_impossible_allocation_is_an_error_not_an_abort() {
    let mut v: Vec<f64> = vec![0.0; 3];
    let err = reserve(&mut v, usize::MAX / 4, "the reference (a.gpkg)").unwrap_err();
    assert!(matches!(err, SignatureError::OutOfMemory { .. }), "{err:?}");
    let text = err.to_string();
    for part in [
        "the reference (a.gpkg)",
        "not enough memory",
        "signatures.neighbours",
        "signatures.leave_out",
        "tile the survey",
    ] {
        assert!(text.contains(part), "{part}: {text}");
    }
    assert_eq!(v.len(), 3);
    assert!(reserve(&mut v, 10, "the reference (a.gpkg)").is_ok());
    assert!(v.capacity() >= 13);
}

#[test]
fn options_are_validated() {
    let bad = SignatureParams {
        neighbours: 2,
        ..SignatureParams::plain(5)
    };
    assert!(bad.validate().is_err());
    let with = |neighbours: usize, harmonics: Vec<usize>| SignatureParams {
        neighbours,
        harmonics,
        ..SignatureParams::plain(5)
    };
    assert!(with(5, vec![3]).validate().is_err());
    assert!(with(5, vec![1, 1]).validate().is_err());
    assert!(with(3, vec![1, 2]).validate().is_err());
    assert!(with(5, vec![1, 2, 3]).validate().is_err());
    assert!(with(3, vec![1]).validate().is_ok());
    assert!(SignatureParams::plain(5).validate().is_ok());
}

// Golden values. The literals below pin the keys, so that an upgrade of rustfft or rand (the
// fixed permutation, see permutation.rs) cannot silently change every key; each literal is
// also recomputed here by a direct DFT written out in this file, independent of fourier.rs,
// which shows the literals are the documented quantities and not just whatever the code gave.

/// Z_k = Σ_m z_m · exp(−2πi·m·k/n), written out.
fn dft_by_hand(z: &[Complex64], k: usize) -> Complex64 {
    let n = z.len();
    let mut sum = Complex64::new(0.0, 0.0);
    for (m, v) in z.iter().enumerate() {
        let ang = -2.0 * std::f64::consts::PI * ((m * k) % n) as f64 / n as f64;
        sum += v * Complex64::new(ang.cos(), ang.sin());
    }
    sum
}

/// The key of polygon `z` by hand: per harmonic j, r_j = Z_j / Z_{−j} (Z_{−j} = Z_{n−j}),
/// mapped to the disc as r / (1 + |r|) or to the sphere as (2 Re r, 2 Im r, |r|² − 1) / (|r|² + 1)
/// (the maps documented in fourier.rs).
fn key_by_hand(z: &[Complex64], js: &[usize], space: KeySpace) -> Vec<f64> {
    let mut key = Vec::new();
    for &j in js {
        let r = dft_by_hand(z, j) / dft_by_hand(z, z.len() - j);
        let (m, q) = (r.norm(), r.norm_sqr());
        match space {
            KeySpace::Disc => key.extend([r.re / (1.0 + m), r.im / (1.0 + m)]),
            KeySpace::Sphere => key.extend([
                2.0 * r.re / (1.0 + q),
                2.0 * r.im / (1.0 + q),
                (q - 1.0) / (1.0 + q),
            ]),
        }
    }
    key
}

fn complex(points: &[[f64; 2]]) -> Vec<Complex64> {
    points.iter().map(|p| Complex64::new(p[0], p[1])).collect()
}

fn assert_close(got: &[f64], want: &[f64], what: &str) {
    assert_eq!(got.len(), want.len(), "{what}");
    for (g, w) in got.iter().zip(want) {
        assert!((g - w).abs() < 1e-12, "{what}: got {got:?}, want {want:?}");
    }
}

/// A fixed irregular pentagon (a polygon of k = 4 neighbours) and hexagon (k = 5).
const PENTAGON: [[f64; 2]; 5] = [[0.0, 0.0], [3.2, 0.7], [4.1, 4.5], [0.6, 5.3], [-2.4, 1.9]];
const HEXAGON: [[f64; 2]; 6] = [
    [0.0, 0.0],
    [2.5, -1.2],
    [5.1, 0.3],
    [4.4, 3.6],
    [1.2, 4.1],
    [-1.3, 2.2],
];
/// fixed_permutation(5), pinned in permutation.rs.
const PERMUTATION_5: [usize; 5] = [3, 0, 1, 2, 4];

#[test]
fn golden_keys_of_fixed_polygons() {
    let permuted: Vec<[f64; 2]> = PERMUTATION_5.iter().map(|&i| PENTAGON[i]).collect();
    // (polygon, permute it with the library's fixed permutation first, disc key, sphere key),
    // harmonics 1 and 2.
    type Case<'a> = (&'a [[f64; 2]], bool, [f64; 4], [f64; 6]);
    let cases: [Case; 3] = [
        (
            &PENTAGON,
            false,
            [
                0.18494242266584524,
                0.8675690464960387,
                0.5260476523274152,
                -0.015061566858214224,
            ],
            [
                0.052241228921559996,
                0.24506477480912342,
                0.9680981924105213,
                0.9940897489195005,
                -0.028462343953390448,
                0.104763858605166,
            ],
        ),
        (
            &HEXAGON,
            false,
            [
                -0.23281749843547192,
                0.8902847460911879,
                0.5605729477596865,
                -0.25921044699202384,
            ],
            [
                -0.043539501690246875,
                0.1664933025555284,
                0.985080855562993,
                0.812500000000001,
                -0.3757021972300132,
                0.44574836959493047,
            ],
        ),
        (
            &PENTAGON,
            true,
            [
                0.35740317720613074,
                0.621844702269627,
                0.31914203138866415,
                -0.38293679224393856,
            ],
            [
                0.34005219962239663,
                0.5916557890820386,
                0.7309636986729777,
                0.6402059143153986,
                -0.7681796037231231,
                -0.0060401737864106755,
            ],
        ),
    ];
    let js = [1, 2];
    for (c, (polygon, permute, disc, sphere)) in cases.iter().enumerate() {
        let mut z = complex(polygon);
        if *permute {
            let mut scratch = Vec::new();
            permutation::apply(
                &permutation::fixed_permutation(z.len()),
                &mut z,
                &mut scratch,
            );
        }
        // The library's path: the planned FFT, then the key-space map.
        let mut ratios = Vec::new();
        fourier::RatioPlan::new(z.len(), &js).ratios(&mut z.clone(), &mut ratios);
        // The independent path: the permutation literal and the DFT by hand.
        let by_hand_polygon = if *permute {
            complex(&permuted)
        } else {
            complex(polygon)
        };
        for (space, want) in [(KeySpace::Disc, &disc[..]), (KeySpace::Sphere, &sphere[..])] {
            let mut key = Vec::new();
            for &r in &ratios {
                space.push(r, &mut key);
            }
            assert_close(&key, want, &format!("case {c}, {space}: library"));
            assert_close(
                &key_by_hand(&by_hand_polygon, &js, space),
                want,
                &format!("case {c}, {space}: by hand"),
            );
        }
    }
}

#[test]
fn golden_keys_of_a_fixed_point_set() {
    // The whole stage on the pentagon's five points as a survey: k = 4 (each polygon is all
    // five points), the nearest-neighbour walk, the fixed permutation, keys on the sphere.
    let params = SignatureParams {
        neighbours: 4,
        leave_out: 0,
        permuted: true,
        key_space: KeySpace::Sphere,
        harmonics: vec![1, 2],
        ..SignatureParams::plain(5)
    };
    let s = sigs_of(&PENTAGON, &params);
    assert_eq!(s.len(), 5);
    // Walk polygons (landmark first, then the nearest unvisited point each step), worked out
    // from the pairwise distances outside the library.
    let walks: [[u32; 5]; 5] = [
        [0, 4, 3, 2, 1],
        [1, 0, 4, 3, 2],
        [2, 3, 4, 0, 1],
        [3, 2, 1, 0, 4],
        [4, 0, 1, 2, 3],
    ];
    let golden: [(u32, [f64; 6]); 2] = [
        (
            0,
            [
                0.18667628399168495,
                0.767657842241364,
                -0.6130688397238837,
                0.626816773579219,
                -0.7668629927673771,
                -0.1379198415152793,
            ],
        ),
        (
            3,
            [
                0.05007395237520366,
                0.7513966182223767,
                -0.6579481145329787,
                0.8038328734946537,
                -0.5817967007517431,
                -0.12395688961778088,
            ],
        ),
    ];
    for i in 0..s.len() {
        let landmark = s.landmark(i);
        assert_eq!(s.polygon(i), &walks[landmark as usize][..]);
        let polygon: Vec<[f64; 2]> = PERMUTATION_5
            .iter()
            .map(|&p| PENTAGON[s.polygon(i)[p] as usize])
            .collect();
        let by_hand = key_by_hand(&complex(&polygon), &params.harmonics, KeySpace::Sphere);
        assert_close(s.key(i), &by_hand, &format!("landmark {landmark}: by hand"));
        if let Some((_, want)) = golden.iter().find(|g| g.0 == landmark) {
            assert_close(s.key(i), want, &format!("landmark {landmark}: golden"));
        }
    }
}

#[test]
fn automatic_harmonics_follow_the_neighbours_and_given_ones_are_checked_against_them() {
    let with = |neighbours: Option<usize>, harmonics: Vec<usize>| SignatureChoice {
        neighbours,
        harmonics,
        ..SignatureChoice::default()
    };
    // Left out, the harmonics follow k: a 4-vertex polygon carries harmonic 1 only.
    assert_eq!(with(Some(3), vec![]).resolve(1000).harmonics, vec![1]);
    assert_eq!(with(Some(4), vec![]).resolve(1000).harmonics, vec![1, 2]);
    assert!(with(Some(3), vec![]).validate().is_ok());
    // Given, they are checked against the neighbours given, naming both.
    let e = with(Some(3), vec![1, 2]).validate().unwrap_err();
    assert_eq!(
        e,
        SignatureError::HarmonicsNeedMoreNeighbours {
            harmonics: vec![1, 2],
            neighbours: 3,
            needed: 4,
            automatic: false
        }
    );
    // ... or against the automatic neighbours, saying they are automatic.
    let e = with(None, vec![3]).validate().unwrap_err();
    assert!(
        matches!(
            e,
            SignatureError::HarmonicsNeedMoreNeighbours {
                needed: 6,
                automatic: true,
                ..
            }
        ),
        "{e:?}"
    );
    assert!(e.to_string().contains("is automatic"), "{e}");
    assert!(with(Some(6), vec![3]).validate().is_ok());
    assert!(matches!(
        with(None, vec![1, 1]).validate(),
        Err(SignatureError::InvalidHarmonics(_))
    ));
}

#[test]
fn automatic_leave_out_fits_the_smaller_survey_and_a_given_one_is_refused_with_sizes() {
    // Up to 20 000 landmarks the rule leaves out two of 4 neighbours: 7 landmarks a signature.
    // With 6 the automatic leave-out drops to 1, and with 5 to 0.
    let auto = SignatureChoice::default();
    assert_eq!(auto.resolve(7).leave_out, 2);
    assert_eq!(auto.resolve(6).leave_out, 1);
    assert_eq!(auto.resolve(5).leave_out, 0);
    let labels = [
        "the reference (r.gpkg)".to_string(),
        "the target (t.csv)".to_string(),
    ];
    assert!(check_sizes(&auto.resolve(6), [400, 6], &labels).is_ok());
    // A leave-out the user fixed is kept, and the sizes say why it cannot work.
    let fixed = SignatureChoice {
        leave_out: Some(2),
        ..SignatureChoice::default()
    };
    let e = check_sizes(&fixed.resolve(6), [400, 6], &labels).unwrap_err();
    assert!(matches!(
        e,
        SignatureError::TooFewLandmarks {
            found: 6,
            needed: 7,
            ..
        }
    ));
    let text = e.to_string();
    for part in [
        "the target (t.csv) has 6 landmarks (the reference (r.gpkg) has 400)",
        "needs 7",
        "2 more for leave-out 2",
        "set signatures.leave_out to 1 or 0",
    ] {
        assert!(text.contains(part), "{part}: {text}");
    }
    // The smaller survey is the one named, whichever side it is.
    let e = check_sizes(&SignatureParams::plain(5), [3, 400], &labels).unwrap_err();
    assert!(
        e.to_string()
            .starts_with("the reference (r.gpkg) has 3 landmarks"),
        "{e}"
    );
    assert!(e.to_string().contains("at least 4 landmarks"), "{e}");
}
