//! Stage 3 — signatures: one similarity-invariant key per landmark neighbourhood.
//!
//! **In:** landmark positions in the working frame (`&[[f64; 2]]`) and [`SignatureParams`].
//! **Out:** [`Signatures`]: for each usable landmark, the polygon it was built from (vertex
//! indices, landmark first) and its key, a point of the unit disc.
//!
//! For each landmark the k nearest neighbours (kiddo k-d tree) are put in a canonical order
//! ([`neighbourhood`]), giving a polygon of k + 1 complex vertices. Its discrete Fourier
//! transform (RustFFT, planned once) yields the ratio r_j = Z_j / Z_{−j}, unchanged by
//! rotation, scale and translation ([`fourier`]); the key is r_j mapped into the unit disc.
//! Because each key keeps its polygon, one key match proposes a full similarity (k + 1 point
//! pairs).

pub mod fourier;
pub mod neighbourhood;

pub use neighbourhood::VertexOrder;

use crate::spatial::{morton_order, PointIndex};
use rustfft::num_complex::Complex64;
use serde::{Deserialize, Serialize};

/// Options of the signature stage.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct SignatureParams {
    /// Neighbours per polygon (k); the polygon has k + 1 vertices.
    pub neighbours: usize,
    /// Vertex order of the polygon.
    pub order: VertexOrder,
    /// Fourier harmonics j of the ratios Z_j / Z_{−j}; each gives two key dimensions (one
    /// harmonic: a 2-D key; two: a 4-D key).
    pub harmonics: Vec<usize>,
}

impl Default for SignatureParams {
    fn default() -> Self {
        SignatureParams {
            neighbours: 5,
            order: VertexOrder::Walk,
            harmonics: vec![1, 2],
        }
    }
}

/// Why signatures could not be built.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum SignatureError {
    /// k is outside the supported range.
    #[error("--neighbours (neighbours in a pipeline file) must be between 3 and 16 (got {0})")]
    InvalidNeighbours(usize),
    /// A harmonic does not give an informative ratio for this polygon length.
    #[error("--harmonics (harmonics in a pipeline file): each must be at least 1 and less than half of neighbours + 1, one or two of them, no repeats (got {harmonics:?} for {vertices}-vertex polygons)")]
    InvalidHarmonic {
        /// Harmonics asked for.
        harmonics: Vec<usize>,
        /// Polygon length.
        vertices: usize,
    },
    /// Fewer landmarks than one neighbourhood needs.
    #[error("{role} has {found} landmarks, but one neighbourhood needs {needed} (neighbours + 1); use a larger area or a smaller --neighbours")]
    TooFewLandmarks {
        /// "reference" or "target".
        role: String,
        /// Landmarks found.
        found: usize,
        /// Landmarks needed.
        needed: usize,
    },
}

/// Signatures of one survey.
#[derive(Debug, Clone, Default)]
pub struct Signatures {
    /// Vertices per polygon (k + 1).
    pub vertices_per_polygon: usize,
    /// Polygon vertices, `vertices_per_polygon` per signature, landmark first.
    pub polygons: Vec<u32>,
    /// Dimensions of a key: two per harmonic.
    pub key_dims: usize,
    /// Keys laid end to end, `key_dims` values each: per harmonic, r_j mapped into the unit
    /// disc.
    pub keys: Vec<f64>,
}

impl Signatures {
    /// Number of signatures.
    pub fn len(&self) -> usize {
        self.keys.len().checked_div(self.key_dims).unwrap_or(0)
    }

    /// Key of signature `i`.
    pub fn key(&self, i: usize) -> &[f64] {
        &self.keys[i * self.key_dims..(i + 1) * self.key_dims]
    }

    /// True when there are none.
    pub fn is_empty(&self) -> bool {
        self.keys.is_empty()
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
        let n = self.neighbours + 1;
        let h = &self.harmonics;
        let repeated = h.len() == 2 && h[0] == h[1];
        if h.is_empty() || h.len() > 2 || repeated || h.iter().any(|&j| j == 0 || 2 * j >= n) {
            return Err(SignatureError::InvalidHarmonic {
                harmonics: self.harmonics.clone(),
                vertices: n,
            });
        }
        Ok(())
    }
}

/// Builds the signatures of one survey. `index` must index `points`.
///
/// `progress` is called with the number of landmarks done so far, in chunks.
pub fn compute(
    role: &str,
    points: &[[f64; 2]],
    index: &PointIndex,
    params: &SignatureParams,
    progress: &mut dyn FnMut(usize),
) -> Result<Signatures, SignatureError> {
    params.validate()?;
    let k = params.neighbours;
    let n = k + 1;
    if points.len() < n {
        return Err(SignatureError::TooFewLandmarks {
            role: role.to_string(),
            found: points.len(),
            needed: n,
        });
    }
    let mut plan = fourier::RatioPlan::new(n, &params.harmonics);
    let per = params.harmonics.len();
    let order = morton_order(points);
    const CHUNK: usize = 1 << 14;
    let mut sigs = Signatures {
        vertices_per_polygon: n,
        polygons: Vec::with_capacity(points.len() * n),
        key_dims: 2 * per,
        keys: Vec::with_capacity(points.len() * 2 * per),
    };
    let mut key = Vec::with_capacity(2 * per);
    let mut found = Vec::with_capacity(n + 1);
    let mut nbrs = Vec::with_capacity(n);
    let mut poly = Vec::with_capacity(n);
    let mut buffer: Vec<Complex64> = Vec::with_capacity(CHUNK * n);
    let mut ratios = Vec::with_capacity(CHUNK);
    let mut chunk_polys: Vec<u32> = Vec::with_capacity(CHUNK * n);
    for (done, chunk) in order.chunks(CHUNK).enumerate() {
        buffer.clear();
        ratios.clear();
        chunk_polys.clear();
        for &c in chunk {
            index.nearest_n(points[c as usize], n, &mut found);
            nbrs.clear();
            nbrs.extend(found.iter().map(|x| x.0).filter(|&i| i != c).take(k));
            if nbrs.len() < k {
                continue;
            }
            neighbourhood::order_polygon(params.order, points, c, &nbrs, &mut poly);
            let o = points[c as usize];
            buffer.extend(poly.iter().map(|&v| {
                Complex64::new(points[v as usize][0] - o[0], points[v as usize][1] - o[1])
            }));
            chunk_polys.extend_from_slice(&poly);
        }
        plan.ratios(&mut buffer, &mut ratios);
        for (i, rs) in ratios.chunks_exact(per).enumerate() {
            key.clear();
            key.extend(rs.iter().flat_map(|r| fourier::bounded(*r)));
            if key.iter().all(|v| v.is_finite()) {
                sigs.keys.extend_from_slice(&key);
                sigs.polygons
                    .extend_from_slice(&chunk_polys[i * n..(i + 1) * n]);
            }
        }
        progress(((done + 1) * CHUNK).min(points.len()));
    }
    Ok(sigs)
}

#[cfg(test)]
mod tests;
