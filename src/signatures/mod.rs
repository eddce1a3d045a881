//! Stage 3 — signatures: one similarity-invariant key per landmark neighbourhood.
//!
//! **In:** landmark positions in the working frame (`&[[f64; 2]]`) and [`SignatureParams`].
//! **Out:** [`Signatures`]: for each usable landmark, the polygon it was built from (vertex
//! indices, landmark first) and its key: per harmonic, a point of the unit disc or of the
//! unit sphere ([`KeySpace`]).
//!
//! For each landmark the k nearest neighbours (found through the survey's uniform grid,
//! [`crate::spatial::PointGrid::nearest_n`]: of neighbours at exactly the same distance, the
//! one of the lower index is the nearer) are put in a canonical order
//! ([`neighbourhood`]), giving a polygon of k + 1 complex vertices. Its discrete Fourier
//! transform (RustFFT, planned once) yields the ratio r_j = Z_j / Z_{−j}, unchanged by
//! rotation, scale and translation ([`fourier`]); the key is r_j mapped into the unit disc or
//! onto the unit sphere.
//! Because each key keeps its polygon, one key match proposes a full similarity (k + 1 point
//! pairs).

pub mod fourier;
pub mod neighbourhood;
pub mod permutation;

pub use fourier::KeySpace;
pub use neighbourhood::VertexOrder;

use crate::spatial::Survey;
use rayon::prelude::*;
use rustfft::num_complex::Complex64;
use serde::{Deserialize, Serialize};

/// Options of the signature stage.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SignatureParams {
    /// Neighbours per polygon (k); the polygon has k + 1 vertices.
    pub neighbours: usize,
    /// Vertex order of the polygon.
    pub order: VertexOrder,
    /// Fourier harmonics j of the ratios Z_j / Z_{−j}; each gives two key dimensions in the
    /// disc, three on the sphere.
    pub harmonics: Vec<usize>,
    /// Where the ratios live as key coordinates.
    pub key_space: KeySpace,
    /// Reorder every polygon by the fixed pseudo-random permutation before the transform.
    pub permuted: bool,
    /// Subset signatures: from the k + `leave_out` nearest neighbours, one signature for every
    /// way of leaving `leave_out` of them out (0, 1 or 2), so that a neighbour missing from, or
    /// new in, one survey still leaves an exact match.
    pub leave_out: usize,
    /// Ambiguity-aware walk: where two steps are within this relative margin, emit both orders
    /// (0 = off).
    pub ambiguity: f64,
}

/// The signature options as a user gives them: neighbours and subset depth may be left to the
/// automatic choice by survey size ([`SignatureChoice::resolve`]).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct SignatureChoice {
    /// Neighbours per polygon (k); `None`: automatic.
    pub neighbours: Option<usize>,
    /// Subset depth; `None`: automatic.
    pub leave_out: Option<usize>,
    /// Vertex order of the polygon.
    pub order: VertexOrder,
    /// Fourier harmonics; empty: automatic, following the neighbours
    /// ([`automatic_harmonics`]: 1 and 2, or 1 alone with 3 neighbours).
    pub harmonics: Vec<usize>,
    /// Where the ratios live as key coordinates.
    pub key_space: KeySpace,
    /// Fixed pseudo-random permutation of the vertex order.
    pub permuted: bool,
    /// Ambiguity-aware walk margin (0 = off).
    pub ambiguity: f64,
}

impl Default for SignatureChoice {
    /// The tool's default: neighbours and subset depth by survey size
    /// ([`SignatureChoice::resolve`]), the nearest-neighbour walk, harmonics following the
    /// neighbours ([`automatic_harmonics`]: 1 and 2), keys on the sphere, no permutation, no
    /// ambiguity branching.
    fn default() -> Self {
        SignatureChoice {
            neighbours: None,
            leave_out: None,
            order: VertexOrder::Walk,
            harmonics: Vec::new(),
            key_space: KeySpace::Sphere,
            permuted: false,
            ambiguity: 0.0,
        }
    }
}

impl From<SignatureParams> for SignatureChoice {
    /// The choice that resolves to exactly `p` at every survey size.
    fn from(p: SignatureParams) -> Self {
        SignatureChoice {
            neighbours: Some(p.neighbours),
            leave_out: Some(p.leave_out),
            order: p.order,
            harmonics: p.harmonics,
            key_space: p.key_space,
            permuted: p.permuted,
            ambiguity: p.ambiguity,
        }
    }
}

/// Landmark count (of the smaller survey) up to which the automatic choice leaves out two
/// neighbours (15 signatures per landmark): on 2000-landmark sets with 40% missing and 40% new
/// landmarks on each side and noise 0.5-5% of the spacing (100 trials per noise level) it
/// matched in 400 of 400 trials with keys on the sphere and 396 with keys in the disc, against
/// 357 for leaving out one, disc keys (README, "Signature experiments").
pub const LEAVE_TWO_UP_TO: usize = 20_000;
/// Landmark count up to which it leaves out one neighbour (5 signatures per landmark); above
/// it the plain signatures are several times faster and the many landmarks give enough intact
/// neighbourhoods.
pub const LEAVE_ONE_UP_TO: usize = 50_000;

/// The automatic choice by survey size, the one statement of it: (landmarks of the smaller
/// survey up to, neighbours, leave-out), first match wins.
const SIZE_RULE: [(usize, usize, usize); 3] = [
    (LEAVE_TWO_UP_TO, 4, 2),
    (LEAVE_ONE_UP_TO, 4, 1),
    (usize::MAX, 5, 0),
];

/// The automatic choice in words, for help texts.
pub fn size_rule() -> String {
    let mut parts = Vec::new();
    for (up_to, k, leave) in SIZE_RULE {
        if up_to == usize::MAX {
            parts.push(format!("else {k} and {leave}"));
        } else {
            parts.push(format!("{k} and {leave} up to {up_to} landmarks"));
        }
    }
    format!(
        "by the size of the smaller survey (neighbours and leave-out): {}",
        parts.join(", ")
    )
}

impl SignatureChoice {
    /// The concrete options for surveys whose smaller one has `landmarks` landmarks: what the
    /// user fixed, and for the rest the size rule ([`size_rule`]: k = 4 leaving out two
    /// neighbours up to [`LEAVE_TWO_UP_TO`] landmarks, k = 4 leaving out one up to
    /// [`LEAVE_ONE_UP_TO`], k = 5 without subsets above). An automatic leave-out is lowered
    /// until one signature fits in `landmarks` (k + leave-out + 1 landmarks); automatic
    /// harmonics follow k ([`automatic_harmonics`]).
    pub fn resolve(&self, landmarks: usize) -> SignatureParams {
        let (_, k, leave) = SIZE_RULE
            .into_iter()
            .find(|r| landmarks <= r.0)
            .expect("the last rule takes every size");
        let neighbours = self.neighbours.unwrap_or(k);
        let room = landmarks.saturating_sub(neighbours + 1);
        SignatureParams {
            neighbours,
            leave_out: self.leave_out.unwrap_or(leave.min(room)),
            order: self.order,
            harmonics: if self.harmonics.is_empty() {
                automatic_harmonics(neighbours)
            } else {
                self.harmonics.clone()
            },
            key_space: self.key_space,
            permuted: self.permuted,
            ambiguity: self.ambiguity,
        }
    }

    /// Checks the options alone, for every automatic outcome. Harmonics that need more
    /// neighbours than are given (or than the automatic choice gives) are named with both.
    pub fn validate(&self) -> Result<(), SignatureError> {
        if !self.harmonics.is_empty() {
            check_harmonic_list(&self.harmonics)?;
            let automatic: Vec<usize> = match self.neighbours {
                Some(k) => vec![k],
                None => SIZE_RULE.iter().map(|r| r.1).collect(),
            };
            for k in automatic {
                if (3..=16).contains(&k) && !harmonics_fit(&self.harmonics, k) {
                    return Err(SignatureError::HarmonicsNeedMoreNeighbours {
                        harmonics: self.harmonics.clone(),
                        neighbours: k,
                        needed: 2 * self.harmonics.iter().max().expect("not empty"),
                        automatic: self.neighbours.is_none(),
                    });
                }
            }
        }
        for n in [0, LEAVE_ONE_UP_TO, usize::MAX] {
            self.resolve(n).validate()?;
        }
        Ok(())
    }
}

/// The harmonics used when none are given: 1 and 2, or 1 alone for 3 neighbours (a 4-vertex
/// polygon carries only harmonic 1: each harmonic must be below half the vertex count).
pub fn automatic_harmonics(neighbours: usize) -> Vec<usize> {
    if neighbours >= 4 {
        vec![1, 2]
    } else {
        vec![1]
    }
}

/// Whether every harmonic j is informative on polygons of k + 1 vertices: 2j < k + 1.
fn harmonics_fit(harmonics: &[usize], neighbours: usize) -> bool {
    harmonics.iter().all(|&j| 2 * j < neighbours + 1)
}

/// One or two different harmonics, each at least 1.
fn check_harmonic_list(h: &[usize]) -> Result<(), SignatureError> {
    let repeated = h.len() == 2 && h[0] == h[1];
    if h.is_empty() || h.len() > 2 || repeated || h.contains(&0) {
        return Err(SignatureError::InvalidHarmonics(h.to_vec()));
    }
    Ok(())
}

/// Refuses surveys too small for one signature: each landmark's signature needs the landmark
/// and its `neighbours + leave_out` nearest neighbours. `sizes` and `labels` are the reference's
/// and the target's landmark counts and names.
pub fn check_sizes(
    params: &SignatureParams,
    sizes: [usize; 2],
    labels: &[String; 2],
) -> Result<(), SignatureError> {
    let needed = params.neighbours + params.leave_out + 1;
    let small = if sizes[1] < sizes[0] { 1 } else { 0 };
    if sizes[small] >= needed {
        return Ok(());
    }
    Err(too_few(
        &labels[small],
        sizes[small],
        Some((&labels[1 - small], sizes[1 - small])),
        params,
    ))
}

/// The [`SignatureError::TooFewLandmarks`] of a survey of `found` landmarks named `role`
/// (`other`: the other survey and its count, if known).
fn too_few(
    role: &str,
    found: usize,
    other: Option<(&str, usize)>,
    params: &SignatureParams,
) -> SignatureError {
    let (k, leave) = (params.neighbours, params.leave_out);
    let needed = k + leave + 1;
    let mut parts = Vec::new();
    if found < 4 {
        parts.push("a signature needs at least 4 landmarks (3 neighbours and the landmark itself), so use a larger area with more landmarks".to_string());
    } else {
        if leave > 0 && k < found {
            let most = found - k - 1;
            parts.push(format!(
                "set signatures.leave_out to {most}{} (needs {} landmarks)",
                if most > 0 { " or 0" } else { "" },
                k + most + 1
            ));
        }
        if k + 1 > found {
            parts.push(format!(
                "set signatures.neighbours to {} and signatures.leave_out to 0 (needs {found} landmarks)",
                found - 1
            ));
        }
        parts.push("use a larger area with more landmarks".into());
    }
    SignatureError::TooFewLandmarks {
        role: role.to_string(),
        found,
        needed,
        other: other
            .map(|(o, n)| format!(" ({o} has {n})"))
            .unwrap_or_default(),
        detail: if leave > 0 {
            format!(
                "the landmark itself, its {k} nearest neighbours (signatures.neighbours) and {leave} more for leave-out {leave} (signatures.leave_out)"
            )
        } else {
            format!("the landmark itself and its {k} nearest neighbours (signatures.neighbours)")
        },
        advice: parts.join(", or "),
    }
}

impl SignatureParams {
    /// Plain signatures of `neighbours` neighbours: the walk, harmonics 1 and 2, keys on the
    /// sphere, no permutation, no subsets, no ambiguity branching. The base from which tests
    /// and experiments vary one option; the tool's own default is
    /// [`SignatureChoice::default`] resolved by survey size.
    pub fn plain(neighbours: usize) -> SignatureParams {
        SignatureParams {
            neighbours,
            order: VertexOrder::Walk,
            harmonics: vec![1, 2],
            key_space: KeySpace::Sphere,
            permuted: false,
            leave_out: 0,
            ambiguity: 0.0,
        }
    }
}

/// Why signatures could not be built.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum SignatureError {
    /// k is outside the supported range.
    #[error("signatures.neighbours must be between 3 and 16 (got {0})")]
    InvalidNeighbours(usize),
    /// The harmonics are not one or two different numbers of at least 1.
    #[error("signatures.harmonics must be one or two different harmonics, each at least 1, e.g. [1, 2] (got {0:?})")]
    InvalidHarmonics(Vec<usize>),
    /// A harmonic does not give an informative ratio for the polygon of this many neighbours.
    #[error("signatures.harmonics {harmonics:?} needs signatures.neighbours of at least {needed} (each harmonic must be below half of the polygon's neighbours + 1 vertices), but signatures.neighbours {}; {}",
        if *automatic { format!("is automatic ({neighbours} at some survey sizes)") } else { format!("is {neighbours}") },
        if *automatic { format!("set signatures.neighbours to {needed} or more, or leave signatures.harmonics out to have it follow the neighbours") } else { format!("with {neighbours} neighbours use harmonics up to {} (e.g. [{}]), raise signatures.neighbours to {needed}, or leave signatures.harmonics out to have it follow the neighbours", neighbours / 2, automatic_harmonics(*neighbours).iter().map(|j| j.to_string()).collect::<Vec<_>>().join(", ")) })]
    HarmonicsNeedMoreNeighbours {
        /// Harmonics asked for.
        harmonics: Vec<usize>,
        /// Neighbours given (or chosen automatically).
        neighbours: usize,
        /// The fewest neighbours the harmonics need (twice the highest).
        needed: usize,
        /// Whether `neighbours` is the automatic choice, not the user's.
        automatic: bool,
    },
    /// Subset depth outside 0..=2.
    #[error("signatures.leave_out must be 0, 1 or 2 (got {0})")]
    InvalidLeaveOut(usize),
    /// Ambiguity margin outside [0, 0.5].
    #[error("signatures.ambiguity must be between 0 and 0.5 (got {0})")]
    InvalidAmbiguity(f64),
    /// Fewer landmarks than one signature needs.
    #[error("{role} has {found} landmarks{other}, too few for one signature, which needs {needed}: {detail}; {advice}")]
    TooFewLandmarks {
        /// The survey ("the target (path)").
        role: String,
        /// Landmarks found.
        found: usize,
        /// Landmarks needed (neighbours + leave-out + 1).
        needed: usize,
        /// The other survey's count, in words (" (the reference (path) has 400)"), or empty.
        other: String,
        /// What one signature is made of, in words.
        detail: String,
        /// What to change.
        advice: String,
    },
    /// An allocation for the signatures failed.
    #[error("{role}: not enough memory for its signatures ({:.1} GB asked for); use fewer signatures.neighbours, a smaller signatures.leave_out, or tile the survey into smaller areas", *bytes as f64 / 1e9)]
    OutOfMemory {
        /// The survey ("the reference (path)").
        role: String,
        /// Bytes of the allocation that failed.
        bytes: u64,
    },
}

/// Landmarks whose polygons [`compute`] transforms in one batch (its chunk buffers hold their
/// signatures; [`crate::resources`] counts them).
pub const CHUNK_LANDMARKS: usize = 1 << 14;

/// Signatures of one survey.
#[derive(Debug, Clone, Default)]
pub struct Signatures {
    /// Vertices per polygon (k + 1).
    pub vertices_per_polygon: usize,
    /// Polygon vertices, `vertices_per_polygon` per signature, landmark first.
    pub polygons: Vec<u32>,
    /// Dimensions of a key: per harmonic two in the disc, three on the sphere.
    pub key_dims: usize,
    /// Keys laid end to end, `key_dims` values each: per harmonic, r_j mapped into the unit
    /// disc or onto the unit sphere. Emptied, with `sensitivity`, once stage 4 is done with
    /// them ([`crate::engine::Candidates::release_keys`]); the count is the polygons'.
    pub keys: Vec<f64>,
    /// Predicted standard deviation of each key per unit of relative vertex noise
    /// ([`fourier::key_sensitivity`]); empty unless asked for (see [`compute`]).
    pub sensitivity: Vec<f32>,
}

impl Signatures {
    /// Number of signatures.
    pub fn len(&self) -> usize {
        self.polygons
            .len()
            .checked_div(self.vertices_per_polygon)
            .unwrap_or(0)
    }

    /// Key of signature `i`.
    pub fn key(&self, i: usize) -> &[f64] {
        &self.keys[i * self.key_dims..(i + 1) * self.key_dims]
    }

    /// True when there are none.
    pub fn is_empty(&self) -> bool {
        self.polygons.is_empty()
    }

    /// Landmark (polygon vertex 0) of signature `i`.
    pub fn landmark(&self, i: usize) -> u32 {
        self.polygons[i * self.vertices_per_polygon]
    }

    /// Polygon of signature `i`, landmark first.
    pub fn polygon(&self, i: usize) -> &[u32] {
        let n = self.vertices_per_polygon;
        &self.polygons[i * n..(i + 1) * n]
    }
}

impl SignatureParams {
    /// Checks the options alone (no data needed).
    pub fn validate(&self) -> Result<(), SignatureError> {
        if !(3..=16).contains(&self.neighbours) {
            return Err(SignatureError::InvalidNeighbours(self.neighbours));
        }
        check_harmonic_list(&self.harmonics)?;
        if !harmonics_fit(&self.harmonics, self.neighbours) {
            return Err(SignatureError::HarmonicsNeedMoreNeighbours {
                harmonics: self.harmonics.clone(),
                neighbours: self.neighbours,
                needed: 2 * self.harmonics.iter().max().expect("checked"),
                automatic: false,
            });
        }
        if self.leave_out > 2 {
            return Err(SignatureError::InvalidLeaveOut(self.leave_out));
        }
        if !(self.ambiguity.is_finite() && (0.0..=0.5).contains(&self.ambiguity)) {
            return Err(SignatureError::InvalidAmbiguity(self.ambiguity));
        }
        Ok(())
    }
}

/// Builds the signatures of one survey, visiting its landmarks in `survey.order`. The
/// per-signature noise sensitivity ([`Signatures::sensitivity`]) is computed only when
/// `with_sensitivity` is set (a ranking that reads it); otherwise it is left empty.
///
/// The landmarks are taken in chunks of [`CHUNK_LANDMARKS`] (of `survey.order`); the chunks
/// of a batch, one per thread of the current rayon pool, are built in parallel and appended in
/// chunk order, so the signatures are the same, in the same order, whatever the number of
/// threads (run inside [`rayon::ThreadPool::install`] to choose it).
///
/// `progress` is called with the number of landmarks done so far, after each batch.
pub fn compute(
    role: &str,
    survey: &Survey,
    params: &SignatureParams,
    with_sensitivity: bool,
    progress: &mut dyn FnMut(usize),
) -> Result<Signatures, SignatureError> {
    let points = survey.points;
    params.validate()?;
    let k = params.neighbours;
    let n = k + 1;
    if points.len() < n + params.leave_out {
        return Err(too_few(role, points.len(), None, params));
    }
    let per = params.harmonics.len();
    let pool = k + params.leave_out;
    let subsets = subsets(pool, params.leave_out);
    let builder = ChunkBuilder {
        role,
        survey,
        params,
        with_sensitivity,
        n,
        per,
        key_dims: params.key_space.dims() * per,
        pool,
        // Most signatures one landmark yields: every subset, each walk branching up to
        // MAX_ORDERS.
        most_per_landmark: subsets.len() * neighbourhood::MAX_ORDERS,
        subsets,
        perm: params.permuted.then(|| permutation::fixed_permutation(n)),
    };
    let mut sigs = Signatures {
        vertices_per_polygon: n,
        polygons: Vec::new(),
        key_dims: builder.key_dims,
        keys: Vec::new(),
        sensitivity: Vec::new(),
    };
    // At least one signature per landmark: reserved up front, fallibly (a survey too large
    // for the machine is an error here, never an abort).
    reserve(&mut sigs.polygons, points.len().saturating_mul(n), role)?;
    reserve(
        &mut sigs.keys,
        points.len().saturating_mul(sigs.key_dims),
        role,
    )?;
    let batch = CHUNK_LANDMARKS * rayon::current_num_threads().max(1);
    let mut done = 0;
    for landmarks in survey.order.chunks(batch) {
        let built: Vec<Result<ChunkSignatures, SignatureError>> = landmarks
            .par_chunks(CHUNK_LANDMARKS)
            .map_init(
                || ChunkScratch::new(n, &params.harmonics),
                |scratch, chunk| builder.build(scratch, chunk),
            )
            .collect();
        for chunk in built {
            let chunk = chunk?;
            reserve(&mut sigs.keys, chunk.keys.len(), role)?;
            reserve(&mut sigs.polygons, chunk.polygons.len(), role)?;
            reserve(&mut sigs.sensitivity, chunk.sensitivity.len(), role)?;
            sigs.keys.extend_from_slice(&chunk.keys);
            sigs.polygons.extend_from_slice(&chunk.polygons);
            sigs.sensitivity.extend_from_slice(&chunk.sensitivity);
        }
        done += landmarks.len();
        progress(done);
    }
    Ok(sigs)
}

/// What [`compute`] needs to build the signatures of one chunk of landmarks (shared, read
/// only, by the threads).
struct ChunkBuilder<'a> {
    role: &'a str,
    survey: &'a Survey<'a>,
    params: &'a SignatureParams,
    with_sensitivity: bool,
    /// Vertices per polygon (k + 1).
    n: usize,
    /// Harmonics.
    per: usize,
    key_dims: usize,
    /// Neighbours fetched per landmark (k + leave-out).
    pool: usize,
    most_per_landmark: usize,
    subsets: Vec<Vec<usize>>,
    perm: Option<Vec<usize>>,
}

/// One chunk's signatures, in the layout of [`Signatures`].
struct ChunkSignatures {
    keys: Vec<f64>,
    polygons: Vec<u32>,
    sensitivity: Vec<f32>,
}

/// One thread's working buffers, kept from chunk to chunk.
struct ChunkScratch {
    plan: fourier::RatioPlan,
    key: Vec<f64>,
    found: Vec<(u32, f64)>,
    nbrs: Vec<u32>,
    subset: Vec<u32>,
    buffer: Vec<Complex64>,
    ratios: Vec<Complex64>,
    sens: Vec<f32>,
    polys: Vec<u32>,
    vertices: Vec<Complex64>,
    scratch: Vec<Complex64>,
}

impl ChunkScratch {
    fn new(n: usize, harmonics: &[usize]) -> ChunkScratch {
        ChunkScratch {
            plan: fourier::RatioPlan::new(n, harmonics),
            key: Vec::new(),
            found: Vec::new(),
            nbrs: Vec::new(),
            subset: Vec::new(),
            buffer: Vec::new(),
            ratios: Vec::new(),
            sens: Vec::new(),
            polys: Vec::new(),
            vertices: Vec::new(),
            scratch: Vec::new(),
        }
    }
}

impl ChunkBuilder<'_> {
    /// The signatures of the landmarks `chunk`, in its order.
    fn build(
        &self,
        s: &mut ChunkScratch,
        chunk: &[u32],
    ) -> Result<ChunkSignatures, SignatureError> {
        let (points, index, params, role) = (
            self.survey.points,
            self.survey.index,
            self.params,
            self.role,
        );
        let (n, per, pool) = (self.n, self.per, self.pool);
        s.buffer.clear();
        s.ratios.clear();
        s.sens.clear();
        s.polys.clear();
        let grid = index.grid();
        for &c in chunk {
            grid.nearest_n(points[c as usize], pool + 1, &mut s.found);
            s.nbrs.clear();
            s.nbrs
                .extend(s.found.iter().map(|x| x.0).filter(|&i| i != c).take(pool));
            if s.nbrs.len() < pool {
                continue;
            }
            let o = points[c as usize];
            reserve(&mut s.polys, self.most_per_landmark * n, role)?;
            reserve(&mut s.buffer, self.most_per_landmark * n, role)?;
            for omit in &self.subsets {
                s.subset.clear();
                s.subset.extend(
                    s.nbrs
                        .iter()
                        .enumerate()
                        .filter(|(i, _)| !omit.contains(i))
                        .map(|(_, &v)| v),
                );
                let start = s.polys.len();
                neighbourhood::order_polygons(
                    params.order,
                    points,
                    c,
                    &s.subset,
                    params.ambiguity,
                    &mut s.polys,
                );
                for poly in s.polys[start..].chunks_exact(n) {
                    s.vertices.clear();
                    s.vertices.extend(poly.iter().map(|&v| {
                        Complex64::new(points[v as usize][0] - o[0], points[v as usize][1] - o[1])
                    }));
                    if let Some(p) = &self.perm {
                        permutation::apply(p, &mut s.vertices, &mut s.scratch);
                    }
                    s.buffer.extend_from_slice(&s.vertices);
                }
            }
        }
        let polygons = s.buffer.len() / n;
        reserve(&mut s.ratios, polygons * per, role)?;
        if self.with_sensitivity {
            reserve(&mut s.sens, polygons, role)?;
            s.plan.ratios_and_sensitivity(
                &mut s.buffer,
                params.key_space,
                &mut s.ratios,
                &mut s.sens,
            );
        } else {
            s.plan.ratios(&mut s.buffer, &mut s.ratios);
        }
        let made = s.ratios.len() / per;
        let mut out = ChunkSignatures {
            keys: Vec::new(),
            polygons: Vec::new(),
            sensitivity: Vec::new(),
        };
        reserve(&mut out.keys, made * self.key_dims, role)?;
        reserve(&mut out.polygons, made * n, role)?;
        if self.with_sensitivity {
            reserve(&mut out.sensitivity, made, role)?;
        }
        for (i, rs) in s.ratios.chunks_exact(per).enumerate() {
            s.key.clear();
            for &r in rs {
                params.key_space.push(r, &mut s.key);
            }
            if s.key.iter().all(|v| v.is_finite()) {
                out.keys.extend_from_slice(&s.key);
                if self.with_sensitivity {
                    out.sensitivity.push(s.sens[i]);
                }
                out.polygons.extend_from_slice(&s.polys[i * n..(i + 1) * n]);
            }
        }
        Ok(out)
    }
}

/// Reserves room for `additional` more elements in `v`, or says that the machine has no
/// memory for `role`'s signatures.
fn reserve<T>(v: &mut Vec<T>, additional: usize, role: &str) -> Result<(), SignatureError> {
    v.try_reserve(additional)
        .map_err(|_| SignatureError::OutOfMemory {
            role: role.to_string(),
            bytes: v
                .len()
                .saturating_add(additional)
                .saturating_mul(std::mem::size_of::<T>()) as u64,
        })
}

/// The sets of neighbour positions (in 0..pool) to leave out: just the empty set for
/// `leave_out` = 0, every single position for 1, every pair for 2.
fn subsets(pool: usize, leave_out: usize) -> Vec<Vec<usize>> {
    match leave_out {
        0 => vec![vec![]],
        1 => (0..pool).map(|i| vec![i]).collect(),
        _ => (0..pool)
            .flat_map(|i| (i + 1..pool).map(move |j| vec![i, j]))
            .collect(),
    }
}

#[cfg(test)]
mod tests;
