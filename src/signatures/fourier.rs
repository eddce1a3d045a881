//! Similarity-invariant Fourier ratio of a closed polygon.
//!
//! DFT convention (RustFFT's forward transform, unnormalised):
//! Z_k = Σ_m z_m · exp(−2πi·m·k/n). Translation lives only in Z_0; a similarity z ↦ a·z + b
//! multiplies every other Z_k by a (Jähne, *Digital Image Processing*, section on Fourier
//! descriptors). Hence r_j = Z_j / Z_{−j} = Z_j / Z_{n−j} is unchanged by rotation, scale and
//! translation. A cyclic shift of the start vertex by s multiplies r_j by exp(−4πi·j·s/n);
//! reversing the vertex order gives 1/r_j; a mirror image gives 1/conj(r_j).

use rustfft::num_complex::Complex64;
use rustfft::{Fft, FftPlanner};
use std::sync::Arc;

/// A planned transform for polygons of one length and a set of harmonics: plan once, run on
/// many.
pub struct RatioPlan {
    fft: Arc<dyn Fft<f64>>,
    n: usize,
    js: Vec<usize>,
    scratch: Vec<Complex64>,
}

impl RatioPlan {
    /// Plans for polygons of `n` vertices and harmonics `js` (each 1 ≤ j < n/2, for a ratio
    /// that is not identically one).
    ///
    /// # Panics
    /// When `n < 3`, `js` is empty, or a harmonic is out of range (programmer error: the
    /// options are validated before this is called).
    pub fn new(n: usize, js: &[usize]) -> Self {
        assert!(
            n >= 3 && !js.is_empty() && js.iter().all(|&j| j >= 1 && 2 * j < n),
            "bad polygon length {n} or harmonics {js:?}"
        );
        let fft = FftPlanner::new().plan_fft_forward(n);
        let scratch = vec![Complex64::new(0.0, 0.0); fft.get_inplace_scratch_len()];
        RatioPlan {
            fft,
            n,
            js: js.to_vec(),
            scratch,
        }
    }

    /// Polygon length this plan serves.
    pub fn len(&self) -> usize {
        self.n
    }

    /// Always false: a plan serves polygons of at least three vertices.
    pub fn is_empty(&self) -> bool {
        false
    }

    /// Transforms `polygons` (a whole number of polygons laid end to end, each `n` vertices)
    /// in place and appends, per polygon, one ratio per harmonic to `out`. Non-finite ratios (a
    /// polygon with Z_{−j} = 0) are appended as they are; the caller decides what to do.
    ///
    /// # Panics
    /// When `polygons.len()` is not a multiple of `n`.
    pub fn ratios(&mut self, polygons: &mut [Complex64], out: &mut Vec<Complex64>) {
        self.transform(polygons);
        for z in polygons.chunks_exact(self.n) {
            for &j in &self.js {
                out.push(z[j] / z[self.n - j]);
            }
        }
    }

    /// As [`RatioPlan::ratios`], and appends per polygon the first-order noise sensitivity of
    /// its key in `space` to `sensitivity` (see [`key_sensitivity`]).
    pub fn ratios_and_sensitivity(
        &mut self,
        polygons: &mut [Complex64],
        space: KeySpace,
        out: &mut Vec<Complex64>,
        sensitivity: &mut Vec<f32>,
    ) {
        self.transform(polygons);
        for z in polygons.chunks_exact(self.n) {
            for &j in &self.js {
                out.push(z[j] / z[self.n - j]);
            }
            sensitivity.push(key_sensitivity(z, &self.js, space) as f32);
        }
    }

    fn transform(&mut self, polygons: &mut [Complex64]) {
        assert_eq!(polygons.len() % self.n, 0, "buffer is not whole polygons");
        if !polygons.is_empty() {
            self.fft.process_with_scratch(polygons, &mut self.scratch);
        }
    }
}

/// First-order noise sensitivity of a key, from the polygon's spectrum `z` (Z_0 … Z_{n−1}).
///
/// With independent vertex noise σ per coordinate, δZ_k has variance 2nσ², so
/// Var(δr_j) ≈ 2nσ²(1 + |r_j|²)/|Z_{−j}|² (first order; derived here, see
/// ../shared/REFERENCES.md — not a published formula). The disc map r ↦ r/(1 + |r|)
/// ([`KeySpace::Disc`]) shrinks a displacement by at most 1/(1 + |r|); the sphere map
/// ([`KeySpace::Sphere`], conformal) by exactly 2/(1 + |r|²), which leaves
/// 8nσ²/(|Z_j|² + |Z_{−j}|²), the same for r and 1/r. σ is taken relative to the polygon's
/// size: the RMS distance ρ of the vertices from their centroid, which by Parseval is
/// ρ² = Σ_{k≠0} |Z_k|² / n². The result is the predicted standard deviation of the key per
/// unit of relative vertex noise σ/ρ, summed over the harmonics in quadrature.
pub fn key_sensitivity(z: &[Complex64], js: &[usize], space: KeySpace) -> f64 {
    let n = z.len();
    let rho2: f64 = z[1..].iter().map(|c| c.norm_sqr()).sum::<f64>() / (n * n) as f64;
    js.iter()
        .map(|&j| {
            let (zp, zm) = (z[j].norm_sqr(), z[n - j].norm_sqr());
            match space {
                KeySpace::Disc => {
                    let r = (zp / zm).sqrt();
                    2.0 * n as f64 * (1.0 + r * r) * rho2 / (zm * (1.0 + r).powi(2))
                }
                KeySpace::Sphere => 8.0 * n as f64 * rho2 / (zp + zm),
            }
        })
        .sum::<f64>()
        .sqrt()
}

/// Where a signature's ratios live as key coordinates.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum KeySpace {
    /// The open unit disc, [`bounded`]: two coordinates per harmonic.
    Disc,
    /// The unit sphere, [`spherical`]: three coordinates per harmonic; Euclidean distance is
    /// the chordal distance between ratios. The default: it kept more polygons apart under
    /// noise in the retrieval experiment and more landmarks right in the landmark experiment
    /// (README, "Signature experiments").
    #[default]
    Sphere,
}

impl KeySpace {
    /// Key coordinates per harmonic.
    pub fn dims(self) -> usize {
        match self {
            KeySpace::Disc => 2,
            KeySpace::Sphere => 3,
        }
    }

    /// Writes the coordinates of ratio `r` into `out`, which holds [`KeySpace::dims`] values.
    #[inline]
    pub fn write(self, r: Complex64, out: &mut [f64]) {
        match self {
            KeySpace::Disc => out.copy_from_slice(&bounded(r)),
            KeySpace::Sphere => out.copy_from_slice(&spherical(r)),
        }
    }

    /// Appends the coordinates of ratio `r` to `key`.
    #[inline]
    pub fn push(self, r: Complex64, key: &mut Vec<f64>) {
        let start = key.len();
        key.resize(start + self.dims(), 0.0);
        self.write(r, &mut key[start..]);
    }

    /// Name in files and reports: `disc` or `sphere`.
    pub fn name(self) -> &'static str {
        match self {
            KeySpace::Disc => "disc",
            KeySpace::Sphere => "sphere",
        }
    }
}

impl std::fmt::Display for KeySpace {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// Maps a ratio r from the whole complex plane into the open unit disc, r / (1 + |r|), so that
/// signatures can be indexed by a 2-D k-d tree with bounded coordinates. An infinite ratio
/// maps to the point of the unit circle in its direction, so it can never be near a finite one
/// by accident; NaN maps to NaN, and the signature stage drops every key with a non-finite
/// coordinate.
#[inline]
pub fn bounded(r: Complex64) -> [f64; 2] {
    if r.re.is_nan() || r.im.is_nan() {
        return [f64::NAN, f64::NAN];
    }
    let m = r.norm();
    if !m.is_finite() {
        let a = r.im.atan2(r.re);
        return [a.cos(), a.sin()];
    }
    [r.re / (1.0 + m), r.im / (1.0 + m)]
}

/// Maps a ratio r onto the unit sphere by inverse stereographic projection (the Riemann
/// sphere): r ↦ (2·Re r, 2·Im r, |r|² − 1) / (|r|² + 1). Euclidean distance between two such
/// points is the chordal distance 2|a − b| / √((1 + |a|²)(1 + |b|²)) (the chordal metric of
/// complex analysis, e.g. Ahlfors, *Complex Analysis*, 3rd ed., ch. 1 — from memory), which
/// treats r and 1/r alike: 0 and ∞ are the two poles, and reversing a walk (r ↦ 1/r) is a
/// half-turn of the sphere about its first axis. A ratio of two independent, equally spread
/// complex Gaussian coefficients is uniform on this sphere (its density 1/(π(1 + |r|²)²) is
/// the sphere's area element carried to the plane; checked by sampling in the tests), so its keys neither
/// crowd near the rim, as the disc map's do for large |r|, nor near the centre. `∞` maps to
/// the pole (0, 0, 1); NaN to NaN (the signature stage drops such keys).
#[inline]
pub fn spherical(r: Complex64) -> [f64; 3] {
    if r.re.is_nan() || r.im.is_nan() {
        return [f64::NAN; 3];
    }
    let q = r.norm_sqr();
    if !q.is_finite() {
        return [0.0, 0.0, 1.0];
    }
    let d = 1.0 + q;
    [2.0 * r.re / d, 2.0 * r.im / d, (q - 1.0) / d]
}

/// Direct O(n²) DFT coefficient Z_k, the oracle against which the planned FFT is checked.
pub fn dft_coefficient(z: &[Complex64], k: usize) -> Complex64 {
    let n = z.len() as f64;
    z.iter()
        .enumerate()
        .map(|(m, v)| {
            let ang = -std::f64::consts::TAU * (m as f64) * (k as f64) / n;
            v * Complex64::new(ang.cos(), ang.sin())
        })
        .sum()
}

/// r_j of one polygon by the direct DFT (oracle).
///
/// ```
/// use rustfft::num_complex::Complex64 as C;
/// use tiemark::signatures::fourier::ratio_direct;
/// let square = [C::new(0.0, 0.0), C::new(1.0, 0.2), C::new(1.3, 1.1), C::new(-0.1, 0.9), C::new(-0.5, 0.4)];
/// // Rotate by 40°, scale by 3, shift: the ratio does not change.
/// let a = C::from_polar(3.0, 40f64.to_radians());
/// let moved: Vec<C> = square.iter().map(|z| a * z + C::new(5.0, -2.0)).collect();
/// assert!((ratio_direct(&square, 1) - ratio_direct(&moved, 1)).norm() < 1e-12);
/// ```
pub fn ratio_direct(z: &[Complex64], j: usize) -> Complex64 {
    dft_coefficient(z, j) / dft_coefficient(z, z.len() - j)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use rand::{Rng, SeedableRng};
    use std::f64::consts::TAU;

    fn c(re: f64, im: f64) -> Complex64 {
        Complex64::new(re, im)
    }

    #[test]
    fn direct_dft_on_known_pairs() {
        // A unit impulse transforms to all ones; a pure harmonic exp(2πi·m/n) to n at k = 1.
        let n = 7;
        let mut delta = vec![c(0.0, 0.0); n];
        delta[0] = c(1.0, 0.0);
        for k in 0..n {
            assert_relative_eq!(dft_coefficient(&delta, k).re, 1.0, epsilon = 1e-12);
            assert_relative_eq!(dft_coefficient(&delta, k).im, 0.0, epsilon = 1e-12);
        }
        let harmonic: Vec<Complex64> = (0..n)
            .map(|m| {
                c(
                    (TAU * m as f64 / n as f64).cos(),
                    (TAU * m as f64 / n as f64).sin(),
                )
            })
            .collect();
        assert_relative_eq!(dft_coefficient(&harmonic, 1).re, n as f64, epsilon = 1e-9);
        for k in [0, 2, 3, 6] {
            assert!(dft_coefficient(&harmonic, k).norm() < 1e-9);
        }
    }

    #[test]
    fn planned_fft_agrees_with_direct_dft() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        for n in [5usize, 7, 8, 9, 12] {
            let polys: Vec<Vec<Complex64>> = (0..50)
                .map(|_| {
                    (0..n)
                        .map(|_| c(rng.gen_range(-1.0..1.0), rng.gen_range(-1.0..1.0)))
                        .collect()
                })
                .collect();
            let mut buf: Vec<Complex64> = polys.iter().flatten().copied().collect();
            let mut plan = RatioPlan::new(n, &[1]);
            let mut out = Vec::new();
            plan.ratios(&mut buf, &mut out);
            for (p, r) in polys.iter().zip(&out) {
                let d = ratio_direct(p, 1);
                assert!((d - r).norm() < 1e-9 * (1.0 + d.norm()), "n={n}");
            }
        }
    }

    fn random_polygon(rng: &mut impl Rng, n: usize) -> Vec<Complex64> {
        (0..n)
            .map(|_| c(rng.gen_range(-10.0..10.0), rng.gen_range(-10.0..10.0)))
            .collect()
    }

    #[test]
    fn start_shift_direction_and_mirror_behave_as_stated() {
        // Check values computed from the DFT shift theorem (Jähne, Fourier descriptors).
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        let n = 7;
        let j = 1;
        let z = random_polygon(&mut rng, n);
        let r = ratio_direct(&z, j);
        for s in 1..n {
            // Starting the walk s vertices later, z'_m = z_{m+s}, gives Z'_k = Z_k·exp(+2πi·k·s/n),
            // so r_j turns by exp(+4πi·j·s/n); starting s vertices earlier turns it by
            // exp(−4πi·j·s/n), the form in which the shift theorem is usually stated.
            let later: Vec<Complex64> = (0..n).map(|m| z[(m + s) % n]).collect();
            let earlier: Vec<Complex64> = (0..n).map(|m| z[(m + n - s) % n]).collect();
            let ang = 2.0 * TAU * (j * s) as f64 / n as f64;
            let turn = Complex64::new(ang.cos(), ang.sin());
            assert!((ratio_direct(&later, j) - r * turn).norm() < 1e-9);
            assert!((ratio_direct(&earlier, j) - r / turn).norm() < 1e-9);
        }
        let reversed: Vec<Complex64> = (0..n).map(|m| z[(n - m) % n]).collect();
        let rr = ratio_direct(&reversed, j);
        assert!((rr - 1.0 / r).norm() < 1e-9);
        let mirrored: Vec<Complex64> = z.iter().map(|v| c(v.im, v.re)).collect();
        let rm = ratio_direct(&mirrored, j);
        assert!((rm - 1.0 / r.conj()).norm() < 1e-9);
    }

    #[test]
    fn sphere_map_gives_the_chordal_distance_and_turns_reversal_into_a_half_turn() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        let norm = |p: [f64; 3]| (p[0] * p[0] + p[1] * p[1] + p[2] * p[2]).sqrt();
        for _ in 0..200 {
            let s = 10f64.powf(rng.gen_range(-3.0..3.0));
            let a = c(rng.gen_range(-1.0..1.0), rng.gen_range(-1.0..1.0)) * s;
            let b = c(rng.gen_range(-1.0..1.0), rng.gen_range(-1.0..1.0));
            let (pa, pb) = (spherical(a), spherical(b));
            assert!((norm(pa) - 1.0).abs() < 1e-12);
            let chord = norm([pa[0] - pb[0], pa[1] - pb[1], pa[2] - pb[2]]);
            // The chordal metric (Ahlfors, Complex Analysis, 3rd ed., ch. 1 — from memory).
            let expected =
                2.0 * (a - b).norm() / ((1.0 + a.norm_sqr()) * (1.0 + b.norm_sqr())).sqrt();
            assert!((chord - expected).abs() < 1e-12, "{chord} {expected}");
            // 1/r: the half-turn (x, y, z) -> (x, -y, -z).
            let inv = spherical(1.0 / a);
            assert!((inv[0] - pa[0]).abs() < 1e-12);
            assert!((inv[1] + pa[1]).abs() < 1e-12);
            assert!((inv[2] + pa[2]).abs() < 1e-12);
        }
        assert_eq!(spherical(c(0.0, 0.0)), [0.0, 0.0, -1.0]);
        assert_eq!(spherical(c(f64::INFINITY, 1.0)), [0.0, 0.0, 1.0]);
        assert!(spherical(c(f64::NAN, 0.0))[0].is_nan());
    }

    #[test]
    fn ratio_of_two_gaussian_coefficients_is_uniform_on_the_sphere() {
        // Archimedes' hat-box theorem: a point is uniform on the sphere exactly when its
        // height is uniform on [-1, 1] (and its azimuth uniform): mean 0, variance 1/3, and
        // each tenth of the height range holds a tenth of the points.
        use rand_distr::{Distribution, StandardNormal};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(8);
        let mut g = || -> f64 { StandardNormal.sample(&mut rng) };
        let n = 40_000;
        let mut bins = [0usize; 10];
        let (mut sum, mut sum2) = (0.0, 0.0);
        for _ in 0..n {
            let r = c(g(), g()) / c(g(), g());
            let h = spherical(r)[2];
            sum += h;
            sum2 += h * h;
            bins[(((h + 1.0) * 5.0) as usize).min(9)] += 1;
        }
        let (mean, var) = (sum / n as f64, sum2 / n as f64);
        assert!(mean.abs() < 0.02, "{mean}");
        assert!((var - 1.0 / 3.0).abs() < 0.01, "{var}");
        // 4 000 expected per bin, binomial sd about 60.
        for b in bins {
            assert!((b as f64 - 4000.0).abs() < 300.0, "{bins:?}");
        }
    }

    #[test]
    fn bounded_form_stays_in_the_unit_disc() {
        for r in [
            c(0.0, 0.0),
            c(1e9, -1e9),
            c(-0.3, 0.2),
            c(f64::INFINITY, 0.0),
        ] {
            let b = bounded(r);
            assert!(b[0].hypot(b[1]) <= 1.0);
        }
    }
}
