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
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct SignatureParams {
    /// Neighbours per polygon (k); the polygon has k + 1 vertices.
    pub neighbours: usize,
    /// Vertex order of the polygon.
    pub order: VertexOrder,
    /// Fourier harmonic j of the ratio Z_j / Z_{−j}.
    pub harmonic: usize,
}

impl Default for SignatureParams {
    fn default() -> Self {
        SignatureParams {
            neighbours: 4,
            order: VertexOrder::Walk,
            harmonic: 1,
        }
    }
}

/// Why signatures could not be built.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum SignatureError {
    /// k is outside the supported range.
    #[error("--neighbours (neighbours in a pipeline file) must be between 3 and 16 (got {0})")]
    InvalidNeighbours(usize),
    /// The harmonic does not give an informative ratio for this polygon length.
    #[error("--harmonic must be at least 1 and less than half of neighbours + 1 (got {harmonic} for {vertices}-vertex polygons)")]
    InvalidHarmonic {
        /// Harmonic asked for.
        harmonic: usize,
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
    /// Key of each signature: r_j mapped into the unit disc.
    pub keys: Vec<[f64; 2]>,
}

impl Signatures {
    /// Number of signatures.
    pub fn len(&self) -> usize {
        self.keys.len()
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
        if self.harmonic == 0 || 2 * self.harmonic >= n {
            return Err(SignatureError::InvalidHarmonic {
                harmonic: self.harmonic,
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
    let mut plan = fourier::RatioPlan::new(n, params.harmonic);
    let order = morton_order(points);
    const CHUNK: usize = 1 << 14;
    let mut sigs = Signatures {
        vertices_per_polygon: n,
        polygons: Vec::with_capacity(points.len() * n),
        keys: Vec::with_capacity(points.len()),
    };
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
        for (i, r) in ratios.iter().enumerate() {
            let key = fourier::bounded(*r);
            if key[0].is_finite() && key[1].is_finite() {
                sigs.keys.push(key);
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
