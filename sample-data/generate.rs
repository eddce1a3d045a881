//! Deterministic generator of tiemark's bundled, entirely FICTIONAL sample data.
//!
//! # What it makes
//!
//! A made-up small town, "Tessaloom", surveyed in 2019 (the reference) and again in 2026 by
//! three different, imperfect surveys (the targets):
//!
//! | file                            | role      | CRS              | ids      |
//! |---------------------------------|-----------|------------------|----------|
//! | `town-footprints-2019.gpkg`     | reference | EPSG:32633       | `bldg_id`|
//! | `town-survey-2026.geojson`      | target    | EPSG:4326 (lon, lat) | `uid` |
//! | `drone-outlines-2026.fgb`       | target    | EPSG:32633       | `oid`    |
//! | `site-grid.csv`                 | target    | none (local grid, international feet) | `pt` |
//!
//! plus, for every target, `<name>-truth.json` (expected transform, applied error, counts) and
//! `<name>-true-pairs.csv` (`reference_id,target_id`, one row per building present in both).
//!
//! # How
//!
//! 1. A street network is laid out around E 455000, N 5210000 (UTM 33N): a slightly rotated
//!    grid whose lines are warped by smooth sinusoids and whose block size grows from ~75 m in
//!    the centre to ~190 m at the edge (some block faces are dropped), plus a diagonal main road,
//!    a curved ring road, a winding southern road and country lanes leading out of town.
//! 2. Buildings are placed along both sides of every street, in rows: each slot draws a plan
//!    (frontage, depth, setback, gap, use) from the land-use zone (dense old centre, inner and
//!    outer suburbs, an industrial estate, an old brickworks) and is oriented along the street.
//!    A candidate is kept only if its oriented rectangle clears all earlier buildings, the
//!    street corridors, a plaza and a park. Houses get garages/sheds behind them; farms
//!    (farmhouse plus barns around a yard) are scattered along the lanes outside the town.
//!    Footprints are rectangles or L-shapes (6 vertices), always counter-clockwise.
//! 3. The 2026 "world" is derived from the 2019 one: the brickworks is demolished and rebuilt
//!    as apartment blocks, a new housing estate appears east of the old town (where the 2019
//!    reference has no buildings at all), buildings are demolished elsewhere and new ones are
//!    built in gaps (infill). Demolition/new counts are set by quotas per area, so the stated
//!    fractions hold for any seed.
//! 4. Each target observes the part of the 2026 world inside its coverage (membership by the
//!    building's centroid in the reference frame), distorted by a known similarity (the
//!    "applied error") and independent Gaussian noise, and is written in its own format/CRS.
//!    The town survey's coverage is a fixed window (about 72% of the 2019 town box, reaching
//!    east over the new estate and south into empty fields); the drone and site-grid districts
//!    are rectangles sized by bisection to hold about 420 x scale and 260 x scale reference
//!    buildings.
//!
//! # Truth conventions
//!
//! * Working CRS: EPSG:32633 (easting, northing in metres). The lon/lat target is brought to
//!   it with PROJ (EPSG:4326 -> EPSG:32633, lon/lat order); the drone target is already in
//!   it; the site grid's "working" coordinates are its raw feet values.
//! * The expected transform maps TARGET working coordinates to REFERENCE coordinates:
//!   `x' = s (cos t x - sin t y) + tx`, `y' = s (sin t x + cos t y) + ty`, `t` counter-clockwise,
//!   stored as `scale`, `rotation_deg`, `translation_x`, `translation_y` (origin form, so the
//!   translations are large when the rotation is not zero). It is the closed-form inverse of
//!   the applied error, and the generator asserts that it maps every error-free target
//!   centroid onto its reference centroid within 1e-6 m.
//! * The applied errors are defined about a pivot: `q = pivot + s R(t) (p - pivot) + shift`;
//!   the truth files give both that pivot form and the equivalent origin form.
//! * A polygon's landmark is the area-weighted centroid of its outer ring (shoelace formula,
//!   computed relative to the first vertex for precision).
//! * Noise: independent N(0, sigma^2) per coordinate, in metres. Polygon targets: per vertex,
//!   added after the applied error (a ring the noise would make self-intersecting is redrawn,
//!   and each ring starts at a random vertex). Site grid: per point, added to the reference
//!   centroid before G (so in feet it is sigma / 0.3048); values are rounded to 0.001 ft.
//!
//! # Determinism
//!
//! Everything derives from one seed (`ChaCha8Rng::seed_from_u64`), with one ChaCha stream per
//! stage so the stages do not disturb each other. Re-running with the same arguments rewrites
//! identical coordinates (GDAL may still stamp files with the current time).
//!
//! Usage: `generate-sample-data [OUT_DIR] [--seed N] [--scale F] [--large]` (defaults:
//! `sample-data`, seed 20192026, scale 1). `--scale F` multiplies the number of buildings: the
//! town's linear size grows with sqrt(F) at constant density, and so do all coverages and
//! districts.
//!
//! # The raster scene
//!
//! After the town, the module `scene` (`scene.rs`) writes a raster pair of a made-up hamlet
//! east of the town: `scene-orthophoto-2019.tif` (reference), `scene-drone-2026.tif` (target)
//! and `scene-drone-2026-truth.json`; it does not change with `--scale`. `--large` writes only
//! a large raster pair (4000 x 4000 px orthophoto, 20,000 x 20,000 px mosaic) for benchmarks,
//! into OUT_DIR (default `target/scene-large`).
//!
//! This file is built as the `generate-sample-data` example of the tiemark crate but uses only
//! gdal, proj, rand, rand_chacha, serde_json and std (never the tiemark library).

mod drift_epochs;
mod epochs;
mod scene;

use std::collections::HashMap;
use std::error::Error;
use std::f64::consts::TAU;
use std::fs;
use std::path::{Path, PathBuf};

use gdal::spatial_ref::{AxisMappingStrategy, SpatialRef};
use gdal::vector::{
    Feature, Geometry, LayerAccess, LayerOptions, OGRFieldType, OGRwkbGeometryType,
};
use gdal::{Dataset, DriverManager};
use proj::Proj;
use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde_json::{json, Value};

type Res<T> = Result<T, Box<dyn Error>>;
/// A 2-D point or vector (x = easting, y = northing).
type Pt = (f64, f64);

const DEFAULT_SEED: u64 = 20_192_026;
/// The working (and reference) CRS.
const WORK_CRS: &str = "EPSG:32633";
const WORK_EPSG: u32 = 32633;
/// Town centre in EPSG:32633; all layout is done in offsets from it.
const CENTRE: Pt = (455_000.0, 5_210_000.0);
/// Half extent of the 2019 town box at scale 1 (2.5 km x 2 km). No reference building has a
/// vertex outside it.
const HALF_X: f64 = 1250.0;
const HALF_Y: f64 = 1000.0;

const REF_FILE: &str = "town-footprints-2019.gpkg";
const SURVEY_FILE: &str = "town-survey-2026.geojson";
const DRONE_FILE: &str = "drone-outlines-2026.fgb";
const SITE_FILE: &str = "site-grid.csv";

const CENTROID_DEF: &str = "area-weighted centroid of the outer ring (shoelace formula), computed in the working CRS EPSG:32633";
const CONVENTION: &str = "maps TARGET working coordinates (x, y) to REFERENCE coordinates: x' = s(cos t * x - sin t * y) + tx, y' = s(sin t * x + cos t * y) + ty, t counter-clockwise";

// ---------------------------------------------------------------------------------------------
// Small vector helpers
// ---------------------------------------------------------------------------------------------

fn add(a: Pt, b: Pt) -> Pt {
    (a.0 + b.0, a.1 + b.1)
}
fn sub(a: Pt, b: Pt) -> Pt {
    (a.0 - b.0, a.1 - b.1)
}
fn mul(a: Pt, k: f64) -> Pt {
    (a.0 * k, a.1 * k)
}
fn dot(a: Pt, b: Pt) -> f64 {
    a.0 * b.0 + a.1 * b.1
}
/// Counter-clockwise perpendicular.
fn perp(a: Pt) -> Pt {
    (-a.1, a.0)
}
fn unit(angle: f64) -> Pt {
    (angle.cos(), angle.sin())
}
fn norm(a: Pt) -> f64 {
    a.0.hypot(a.1)
}
fn normalize(a: Pt) -> Pt {
    let n = norm(a);
    (a.0 / n, a.1 / n)
}
/// Rotate counter-clockwise by `angle` radians about the origin.
fn rot(p: Pt, angle: f64) -> Pt {
    let (s, c) = angle.sin_cos();
    (c * p.0 - s * p.1, s * p.0 + c * p.1)
}
fn abs_pt(p: Pt) -> Pt {
    add(CENTRE, p)
}

/// Standard normal deviate (Box-Muller, cosine branch only: simple and deterministic).
fn gauss(rng: &mut ChaCha8Rng) -> f64 {
    let u1: f64 = 1.0 - rng.gen::<f64>(); // (0, 1]
    let u2: f64 = rng.gen::<f64>();
    (-2.0 * u1.ln()).sqrt() * (TAU * u2).cos()
}

/// Area-weighted centroid and signed area of an open ring (first vertex not repeated).
/// Computed relative to the first vertex so that UTM-sized coordinates lose no precision.
fn ring_centroid(ring: &[Pt]) -> (Pt, f64) {
    let o = ring[0];
    let n = ring.len();
    let (mut a2, mut cx, mut cy) = (0.0, 0.0, 0.0);
    for i in 0..n {
        let p = sub(ring[i], o);
        let q = sub(ring[(i + 1) % n], o);
        let c = p.0 * q.1 - q.0 * p.1;
        a2 += c;
        cx += (p.0 + q.0) * c;
        cy += (p.1 + q.1) * c;
    }
    ((o.0 + cx / (3.0 * a2), o.1 + cy / (3.0 * a2)), a2 / 2.0)
}

/// True if segments ab and cd properly cross.
fn segments_cross(a: Pt, b: Pt, c: Pt, d: Pt) -> bool {
    let orient = |p: Pt, q: Pt, r: Pt| (q.0 - p.0) * (r.1 - p.1) - (q.1 - p.1) * (r.0 - p.0);
    let (d1, d2) = (orient(a, b, c), orient(a, b, d));
    let (d3, d4) = (orient(c, d, a), orient(c, d, b));
    d1 * d2 < 0.0 && d3 * d4 < 0.0
}

/// A ring is simple if no two non-adjacent edges cross.
fn ring_is_simple(ring: &[Pt]) -> bool {
    let n = ring.len();
    for i in 0..n {
        for j in i + 2..n {
            if i == 0 && j == n - 1 {
                continue; // adjacent through the closing vertex
            }
            if segments_cross(ring[i], ring[(i + 1) % n], ring[j], ring[(j + 1) % n]) {
                return false;
            }
        }
    }
    true
}

// ---------------------------------------------------------------------------------------------
// Similarity transforms
// ---------------------------------------------------------------------------------------------

/// Origin-form similarity: q = s R(t) p + (tx, ty), t counter-clockwise (degrees stored exactly).
#[derive(Clone, Copy, Debug)]
struct Similarity {
    scale: f64,
    rotation_deg: f64,
    tx: f64,
    ty: f64,
}

impl Similarity {
    fn apply(&self, p: Pt) -> Pt {
        let r = rot(p, self.rotation_deg.to_radians());
        (self.scale * r.0 + self.tx, self.scale * r.1 + self.ty)
    }

    /// Closed-form inverse: p = (1/s) R(-t) (q - T)  =>  s' = 1/s, t' = -t, T' = -(1/s) R(-t) T.
    fn inverse(&self) -> Similarity {
        let s = 1.0 / self.scale;
        let t = -self.rotation_deg;
        let r = rot((self.tx, self.ty), t.to_radians());
        Similarity {
            scale: s,
            rotation_deg: t,
            tx: -s * r.0,
            ty: -s * r.1,
        }
    }

    fn to_json(self) -> Value {
        json!({
            "scale": self.scale,
            "rotation_deg": self.rotation_deg,
            "translation_x": self.tx,
            "translation_y": self.ty,
        })
    }
}

/// Pivot-form similarity used to apply the errors: q = pivot + s R(t) (p - pivot) + shift.
#[derive(Clone, Copy, Debug)]
struct PivotSimilarity {
    pivot: Pt,
    scale: f64,
    rotation_deg: f64,
    shift: Pt,
}

impl PivotSimilarity {
    fn apply(&self, p: Pt) -> Pt {
        let r = rot(sub(p, self.pivot), self.rotation_deg.to_radians());
        add(add(self.pivot, mul(r, self.scale)), self.shift)
    }

    /// The same map in origin form: T = pivot + shift - s R(t) pivot.
    fn origin_form(&self) -> Similarity {
        let r = rot(self.pivot, self.rotation_deg.to_radians());
        Similarity {
            scale: self.scale,
            rotation_deg: self.rotation_deg,
            tx: self.pivot.0 + self.shift.0 - self.scale * r.0,
            ty: self.pivot.1 + self.shift.1 - self.scale * r.1,
        }
    }

    fn to_json(self, maps: &str) -> Value {
        json!({
            "maps": maps,
            "form": "q = pivot + s R(t) (p - pivot) + shift, t counter-clockwise",
            "pivot_x": self.pivot.0,
            "pivot_y": self.pivot.1,
            "scale": self.scale,
            "rotation_deg": self.rotation_deg,
            "shift_x": self.shift.0,
            "shift_y": self.shift.1,
            "origin_form": self.origin_form().to_json(),
        })
    }
}

// ---------------------------------------------------------------------------------------------
// Collision geometry: oriented boxes in a hash grid
// ---------------------------------------------------------------------------------------------

/// Oriented rectangle: centre, unit axis u, half sizes along u and perp(u).
#[derive(Clone, Copy, Debug)]
struct Obb {
    c: Pt,
    u: Pt,
    hu: f64,
    hv: f64,
}

impl Obb {
    fn v(&self) -> Pt {
        perp(self.u)
    }
    fn inflate(&self, m: f64) -> Obb {
        Obb {
            hu: self.hu + m,
            hv: self.hv + m,
            ..*self
        }
    }
    fn corners(&self) -> [Pt; 4] {
        let (a, b) = (mul(self.u, self.hu), mul(self.v(), self.hv));
        [
            add(self.c, add(mul(a, -1.0), mul(b, -1.0))),
            add(self.c, sub(a, b)),
            add(self.c, add(a, b)),
            add(self.c, sub(b, a)),
        ]
    }
    fn aabb(&self) -> (Pt, Pt) {
        let v = self.v();
        let ex = self.hu * self.u.0.abs() + self.hv * v.0.abs();
        let ey = self.hu * self.u.1.abs() + self.hv * v.1.abs();
        (
            (self.c.0 - ex, self.c.1 - ey),
            (self.c.0 + ex, self.c.1 + ey),
        )
    }
    /// Separating-axis test.
    fn overlaps(&self, o: &Obb) -> bool {
        let d = sub(o.c, self.c);
        let (sv, ov) = (self.v(), o.v());
        for axis in [self.u, sv, o.u, ov] {
            let ra = self.hu * dot(self.u, axis).abs() + self.hv * dot(sv, axis).abs();
            let rb = o.hu * dot(o.u, axis).abs() + o.hv * dot(ov, axis).abs();
            if dot(d, axis).abs() > ra + rb {
                return false;
            }
        }
        true
    }
    fn dist_to_point(&self, p: Pt) -> f64 {
        let d = sub(p, self.c);
        let (lu, lv) = (dot(d, self.u), dot(d, self.v()));
        let cu = lu.clamp(-self.hu, self.hu);
        let cv = lv.clamp(-self.hv, self.hv);
        (lu - cu).hypot(lv - cv)
    }
}

/// Uniform hash grid of box ids (only ever queried for "any overlap", so the HashMap's
/// iteration order never influences the output).
struct Grid {
    cell: f64,
    map: HashMap<(i64, i64), Vec<u32>>,
}

impl Grid {
    fn new(cell: f64) -> Self {
        Grid {
            cell,
            map: HashMap::new(),
        }
    }
    fn range(&self, lo: Pt, hi: Pt) -> (i64, i64, i64, i64) {
        (
            (lo.0 / self.cell).floor() as i64,
            (hi.0 / self.cell).floor() as i64,
            (lo.1 / self.cell).floor() as i64,
            (hi.1 / self.cell).floor() as i64,
        )
    }
    fn insert(&mut self, id: u32, lo: Pt, hi: Pt) {
        let (x0, x1, y0, y1) = self.range(lo, hi);
        for gx in x0..=x1 {
            for gy in y0..=y1 {
                self.map.entry((gx, gy)).or_default().push(id);
            }
        }
    }
    fn query(&self, lo: Pt, hi: Pt, out: &mut Vec<u32>) {
        out.clear();
        let (x0, x1, y0, y1) = self.range(lo, hi);
        for gx in x0..=x1 {
            for gy in y0..=y1 {
                if let Some(v) = self.map.get(&(gx, gy)) {
                    out.extend_from_slice(v);
                }
            }
        }
    }
}

/// Everything a new building must keep clear of.
struct Site {
    bldg: Vec<Obb>,
    bgrid: Grid,
    road: Vec<Obb>,
    rgrid: Grid,
    /// Open spaces (plaza, park): centre and radius.
    circles: Vec<(Pt, f64)>,
    /// If set, every corner must lie inside this box.
    bounds: Option<(Pt, Pt)>,
    scratch: Vec<u32>,
}

impl Site {
    fn new(bounds: Option<(Pt, Pt)>) -> Self {
        Site {
            bldg: Vec::new(),
            bgrid: Grid::new(40.0),
            road: Vec::new(),
            rgrid: Grid::new(40.0),
            circles: Vec::new(),
            bounds,
            scratch: Vec::new(),
        }
    }

    /// Does `o` keep `mb` metres from every building and `mr` metres from every street?
    fn fits(&mut self, o: &Obb, mb: f64, mr: f64) -> bool {
        if let Some((lo, hi)) = self.bounds {
            for c in o.corners() {
                if c.0 < lo.0 || c.0 > hi.0 || c.1 < lo.1 || c.1 > hi.1 {
                    return false;
                }
            }
        }
        for &(cc, r) in &self.circles {
            if o.dist_to_point(cc) < r {
                return false;
            }
        }
        let ob = o.inflate(mb);
        let (lo, hi) = ob.aabb();
        self.bgrid.query(lo, hi, &mut self.scratch);
        if self
            .scratch
            .iter()
            .any(|&i| ob.overlaps(&self.bldg[i as usize]))
        {
            return false;
        }
        let or = o.inflate(mr);
        let (lo, hi) = or.aabb();
        self.rgrid.query(lo, hi, &mut self.scratch);
        if self
            .scratch
            .iter()
            .any(|&i| or.overlaps(&self.road[i as usize]))
        {
            return false;
        }
        true
    }

    fn add_building(&mut self, o: Obb) {
        let id = self.bldg.len() as u32;
        let (lo, hi) = o.aabb();
        self.bgrid.insert(id, lo, hi);
        self.bldg.push(o);
    }

    /// Adds a street corridor as one box per polyline segment (slightly extended at the ends so
    /// the joints are covered).
    fn add_street(&mut self, st: &Street) {
        for w in st.pts.windows(2) {
            let d = sub(w[1], w[0]);
            let len = norm(d);
            if len < 1e-9 {
                continue;
            }
            let o = Obb {
                c: mul(add(w[0], w[1]), 0.5),
                u: mul(d, 1.0 / len),
                hu: len / 2.0 + st.hw * 0.5,
                hv: st.hw,
            };
            let id = self.road.len() as u32;
            let (lo, hi) = o.aabb();
            self.rgrid.insert(id, lo, hi);
            self.road.push(o);
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Town layout, zones and streets
// ---------------------------------------------------------------------------------------------

/// Land-use zone of a location; decides what gets built there.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Zone {
    Centre,
    Inner,
    Outer,
    Industrial,
    Brickworks,
    Rural,
}

/// Large-scale layout; all positions are offsets from `CENTRE`, scaled by `l` = sqrt(scale).
struct Layout {
    l: f64,
    half: Pt,
    grid_angle: f64,
    warp_phase: [f64; 4],
    boundary_phase: [f64; 2],
    industrial: (Pt, f64),
    brickworks: (Pt, f64),
    plaza: (Pt, f64),
    park: (Pt, f64),
}

impl Layout {
    fn new(l: f64, rng: &mut ChaCha8Rng) -> Self {
        let mut ph = || rng.gen_range(0.0..TAU);
        Layout {
            l,
            half: (HALF_X * l, HALF_Y * l),
            grid_angle: 7.0_f64.to_radians(),
            warp_phase: [ph(), ph(), ph(), ph()],
            boundary_phase: [ph(), ph()],
            industrial: ((-640.0 * l, -480.0 * l), 230.0 * l),
            brickworks: ((180.0 * l, -330.0 * l), 85.0 * l),
            plaza: ((10.0 * l, -5.0 * l), 30.0),
            park: ((-250.0 * l, 380.0 * l), 70.0 * l.sqrt()),
        }
    }

    /// Normalised elliptic radius (1 at the box edge midpoints).
    fn rho(&self, p: Pt) -> f64 {
        ((p.0 / self.half.0).powi(2) + (p.1 / self.half.1).powi(2)).sqrt()
    }

    /// Irregular town outline, as a fraction of `rho`, by direction.
    fn boundary(&self, p: Pt) -> f64 {
        let phi = (p.1 / self.half.1).atan2(p.0 / self.half.0);
        0.86 + 0.07 * (3.0 * phi + self.boundary_phase[0]).sin()
            + 0.04 * (5.0 * phi + self.boundary_phase[1]).sin()
    }

    fn in_town(&self, p: Pt) -> bool {
        self.rho(p) < self.boundary(p)
    }

    fn zone(&self, p: Pt) -> Zone {
        let inside = |(c, r): (Pt, f64)| norm(sub(p, c)) < r;
        if inside(self.brickworks) {
            return Zone::Brickworks;
        }
        if inside(self.industrial) {
            return Zone::Industrial; // also beyond the town outline, along the highway
        }
        if !self.in_town(p) {
            return Zone::Rural;
        }
        let rho = self.rho(p);
        if rho < 0.28 {
            Zone::Centre
        } else if rho < 0.6 {
            Zone::Inner
        } else {
            Zone::Outer
        }
    }

    /// Warped-grid coordinates (u, v) -> offset. Smooth, so neighbouring edges stay connected.
    fn warp(&self, u: f64, v: f64) -> Pt {
        let ph = &self.warp_phase;
        let wu = 13.0 * (v / 173.0 + ph[0]).sin() + 6.0 * (v / 61.0 + ph[1]).sin();
        let wv = 11.0 * (u / 211.0 + ph[2]).sin() + 5.0 * (u / 79.0 + ph[3]).sin();
        rot((u + wu, v + wv), self.grid_angle)
    }
}

/// A street centre line with its half width.
struct Street {
    pts: Vec<Pt>,
    cum: Vec<f64>,
    hw: f64,
}

impl Street {
    fn new(pts: Vec<Pt>, hw: f64) -> Self {
        let mut cum = vec![0.0];
        for w in pts.windows(2) {
            let last = *cum.last().unwrap_or(&0.0);
            cum.push(last + norm(sub(w[1], w[0])));
        }
        Street { pts, cum, hw }
    }
    fn len(&self) -> f64 {
        *self.cum.last().unwrap_or(&0.0)
    }
    fn at(&self, s: f64) -> Pt {
        let s = s.clamp(0.0, self.len());
        let i = match self.cum.binary_search_by(|c| c.total_cmp(&s)) {
            Ok(i) => i.min(self.pts.len() - 2),
            Err(i) => i.saturating_sub(1).min(self.pts.len() - 2),
        };
        let seg = self.cum[i + 1] - self.cum[i];
        let f = if seg > 0.0 {
            (s - self.cum[i]) / seg
        } else {
            0.0
        };
        add(self.pts[i], mul(sub(self.pts[i + 1], self.pts[i]), f))
    }
    /// Smoothed unit tangent (chord over +-3 m).
    fn tangent(&self, s: f64) -> Pt {
        normalize(sub(self.at(s + 3.0), self.at(s - 3.0)))
    }
}

/// Positions of grid lines along one axis: spacing grows from ~75 m at the centre to ~190 m.
fn grid_lines(half: f64, rng: &mut ChaCha8Rng) -> Vec<f64> {
    let first = rng.gen_range(-15.0..15.0);
    let mut lines = vec![first];
    for dir in [1.0, -1.0] {
        let mut last: f64 = first;
        loop {
            let rho = last.abs() / half;
            let step = (72.0 + 120.0 * rho * rho) * rng.gen_range(0.85..1.2);
            last += dir * step;
            if last.abs() > half * 1.05 {
                break;
            }
            lines.push(last);
        }
    }
    lines.sort_by(f64::total_cmp);
    lines
}

/// All 2019 streets (main roads first) and the country lanes.
fn make_streets(lay: &Layout, rng: &mut ChaCha8Rng) -> (Vec<Street>, Vec<Street>) {
    let l = lay.l;
    let mut main = Vec::new();
    // Diagonal main road (the old highway), gently bending, running out of town both ways.
    let dir = unit(36.0_f64.to_radians());
    let base = (-20.0 * l, 25.0 * l);
    let ph = rng.gen_range(0.0..TAU);
    let reach = 1.9 * lay.half.0;
    let pts: Vec<Pt> = (0..)
        .map(|k| -reach + 15.0 * k as f64)
        .take_while(|&s| s <= reach)
        .map(|s| {
            add(
                add(base, mul(dir, s)),
                mul(perp(dir), 22.0 * (s / 450.0 + ph).sin()),
            )
        })
        .collect();
    main.push(Street::new(pts, 7.0));
    // Curved ring road on the west and north-west.
    let (rc, rr) = ((-150.0 * l, 150.0 * l), 760.0 * l);
    let (a0, a1) = (100.0_f64.to_radians(), 250.0_f64.to_radians());
    let n = ((a1 - a0) * rr / 15.0).ceil() as usize;
    let pts = (0..=n)
        .map(|k| a0 + (a1 - a0) * k as f64 / n as f64)
        .map(|a| add(rc, mul(unit(a), rr + 12.0 * (3.0 * a).sin())))
        .collect();
    main.push(Street::new(pts, 6.0));
    // Winding road across the south.
    let ph = rng.gen_range(0.0..TAU);
    let pts = (0..)
        .map(|k| -950.0 * l + 15.0 * k as f64)
        .take_while(|&x| x <= 750.0 * l)
        .map(|x| (x, -560.0 * l + 55.0 * (x / 240.0 + ph).sin() + 0.12 * x))
        .collect();
    main.push(Street::new(pts, 5.5));

    // Warped grid: nodes inside the town outline, block faces kept with a probability.
    let us = grid_lines(lay.half.0, rng);
    let vs = grid_lines(lay.half.1, rng);
    let node = |i: usize, j: usize| lay.warp(us[i], vs[j]);
    let mut grid = Vec::new();
    let edge = |(u0, v0): Pt, (u1, v1): Pt, hw: f64| {
        let n = ((u1 - u0).hypot(v1 - v0) / 12.0).ceil().max(1.0) as usize;
        let pts: Vec<Pt> = (0..=n)
            .map(|k| {
                let f = k as f64 / n as f64;
                lay.warp(u0 + (u1 - u0) * f, v0 + (v1 - v0) * f)
            })
            .collect();
        // No public streets through the (walled) brickworks site.
        let (bc, br) = lay.brickworks;
        if pts.iter().any(|&p| norm(sub(p, bc)) < br + hw) {
            None
        } else {
            Some(Street::new(pts, hw))
        }
    };
    for i in 0..us.len() {
        for j in 0..vs.len() {
            let p = node(i, j);
            if !lay.in_town(p) {
                continue;
            }
            let rho = lay.rho(p);
            let keep = 0.93 - 0.18 * rho;
            let hw = if rho < 0.3 { 4.5 } else { 5.0 };
            if i + 1 < us.len() && lay.in_town(node(i + 1, j)) && rng.gen_bool(keep) {
                grid.extend(edge((us[i], vs[j]), (us[i + 1], vs[j]), hw));
            }
            if j + 1 < vs.len() && lay.in_town(node(i, j + 1)) && rng.gen_bool(keep - 0.05) {
                grid.extend(edge((us[i], vs[j]), (us[i], vs[j + 1]), hw));
            }
        }
    }
    grid.shuffle(rng);
    main.extend(grid);

    // Country lanes leading radially out of town to beyond the box.
    let n_lanes = ((6.0 * l).round() as usize).max(3);
    let mut lanes = Vec::new();
    for k in 0..n_lanes {
        let phi = TAU * (k as f64 + rng.gen_range(-0.3..0.3)) / n_lanes as f64;
        let d = normalize((phi.cos() * lay.half.0, phi.sin() * lay.half.1));
        let start = mul((phi.cos() * lay.half.0, phi.sin() * lay.half.1), 0.7);
        let ph = rng.gen_range(0.0..TAU);
        let mut pts = Vec::new();
        let mut s = 0.0;
        loop {
            let p = add(
                add(start, mul(d, s)),
                mul(perp(d), 15.0 * (s / 130.0 + ph).sin()),
            );
            pts.push(p);
            if p.0.abs() > lay.half.0 + 30.0 || p.1.abs() > lay.half.1 + 30.0 {
                break;
            }
            s += 20.0;
        }
        lanes.push(Street::new(pts, 3.5));
    }
    (main, lanes)
}

// ---------------------------------------------------------------------------------------------
// Buildings
// ---------------------------------------------------------------------------------------------

/// A footprint (open, counter-clockwise ring, offsets from CENTRE) and its bounding box.
#[derive(Clone, Debug)]
struct Building {
    ring: Vec<Pt>,
    obb: Obb,
    kind: &'static str,
    zone: Zone,
}

impl Building {
    /// Absolute EPSG:32633 ring.
    fn abs_ring(&self) -> Vec<Pt> {
        self.ring.iter().map(|&p| abs_pt(p)).collect()
    }
    /// Absolute area-weighted centroid (of the ring as written to the files).
    fn centroid(&self) -> Pt {
        ring_centroid(&self.abs_ring()).0
    }
}

/// Rectangle w x d (or an L-shape with one corner notched) centred at `c`, long side along
/// `angle`.
fn make_building(
    c: Pt,
    angle: f64,
    w: f64,
    d: f64,
    notch: bool,
    kind: &'static str,
    zone: Zone,
    rng: &mut ChaCha8Rng,
) -> Building {
    let (a, b) = (w / 2.0, d / 2.0);
    let mut local: Vec<Pt> = if notch {
        let nw = w * rng.gen_range(0.3..0.55);
        let nd = d * rng.gen_range(0.3..0.55);
        vec![
            (-a, -b),
            (a, -b),
            (a, b - nd),
            (a - nw, b - nd),
            (a - nw, b),
            (-a, b),
        ]
    } else {
        vec![(-a, -b), (a, -b), (a, b), (-a, b)]
    };
    if notch {
        let sa = if rng.gen_bool(0.5) { 1.0 } else { -1.0 };
        let sb = if rng.gen_bool(0.5) { 1.0 } else { -1.0 };
        for p in &mut local {
            *p = (p.0 * sa, p.1 * sb);
        }
        if sa * sb < 0.0 {
            local.reverse(); // a mirror flips the orientation: restore counter-clockwise
        }
    }
    Building {
        ring: local.iter().map(|&q| add(c, rot(q, angle))).collect(),
        obb: Obb {
            c,
            u: unit(angle),
            hu: a,
            hv: b,
        },
        kind,
        zone,
    }
}

/// What to build in one frontage slot.
struct Plan {
    w: f64,
    d: f64,
    setback: f64,
    gap: f64,
    kind: &'static str,
    notch: bool,
    /// Probability of a garage/shed behind it.
    outbuilding: f64,
    /// Probability that the slot is built at all.
    density: f64,
    jitter_deg: f64,
}

fn pick<'a>(rng: &mut ChaCha8Rng, choices: &[(&'a str, f64)]) -> &'a str {
    let total: f64 = choices.iter().map(|c| c.1).sum();
    let mut x = rng.gen_range(0.0..total);
    for &(name, w) in choices {
        if x < w {
            return name;
        }
        x -= w;
    }
    choices[choices.len() - 1].0
}

/// Slot plan by zone; `modern` gives the 2020s infill style.
fn plan(zone: Zone, modern: bool, rng: &mut ChaCha8Rng) -> Plan {
    let mut p = Plan {
        w: 10.0,
        d: 10.0,
        setback: 5.0,
        gap: 8.0,
        kind: "house",
        notch: false,
        outbuilding: 0.0,
        density: 0.0,
        jitter_deg: 1.5,
    };
    match zone {
        Zone::Centre => {
            if rng.gen_bool(if modern { 0.25 } else { 0.12 }) {
                p.w = rng.gen_range(20.0..45.0);
                p.d = rng.gen_range(14.0..24.0);
                p.kind = pick(rng, &[("apartment", 0.55), ("public", 0.15), ("shop", 0.3)]);
                p.notch = rng.gen_bool(0.3);
            } else {
                p.w = rng.gen_range(7.0..14.0);
                p.d = rng.gen_range(9.0..15.0);
                p.kind = pick(rng, &[("shop", 0.45), ("house", 0.55)]);
                p.notch = rng.gen_bool(0.12);
            }
            p.setback = rng.gen_range(1.2..3.0);
            p.gap = rng.gen_range(1.0..3.0);
            p.outbuilding = 0.12;
            p.density = 0.95;
            p.jitter_deg = 0.8;
        }
        Zone::Inner | Zone::Outer => {
            let inner = zone == Zone::Inner;
            if rng.gen_bool(if inner { 0.05 } else { 0.02 }) {
                p.w = rng.gen_range(20.0..40.0);
                p.d = rng.gen_range(12.0..18.0);
                p.kind = "apartment";
                p.notch = rng.gen_bool(0.2);
            } else {
                p.w = rng.gen_range(8.0..if inner { 13.0 } else { 14.0 });
                p.d = rng.gen_range(8.0..12.0);
                p.notch = rng.gen_bool(if inner { 0.2 } else { 0.15 });
            }
            if inner {
                p.setback = rng.gen_range(4.0..9.0);
                p.gap = rng.gen_range(5.0..14.0);
                p.outbuilding = 0.4;
                p.density = 0.85;
            } else {
                p.setback = rng.gen_range(5.0..15.0);
                p.gap = rng.gen_range(8.0..30.0);
                p.outbuilding = 0.5;
                p.density = 0.55;
                p.jitter_deg = 2.0;
            }
            if modern {
                p.gap = rng.gen_range(3.0..8.0);
                p.outbuilding = 0.3;
            }
        }
        Zone::Industrial | Zone::Brickworks => {
            if rng.gen_bool(0.12) {
                p.w = rng.gen_range(10.0..18.0);
                p.d = rng.gen_range(8.0..12.0);
                p.kind = "office";
            } else {
                p.w = rng.gen_range(25.0..70.0);
                p.d = rng.gen_range(20.0..45.0);
                p.kind = pick(rng, &[("warehouse", 0.6), ("shed", 0.4)]);
                p.notch = rng.gen_bool(0.1);
            }
            p.setback = rng.gen_range(8.0..15.0);
            p.gap = rng.gen_range(6.0..15.0);
            p.outbuilding = 0.15;
            p.density = 0.8;
            p.jitter_deg = 1.0;
        }
        Zone::Rural => {}
    }
    if modern {
        p.density = 1.0;
    }
    p
}

/// Garage or shed behind building `b` (which faces the street along `t`, away from it along `n`).
fn outbuilding(b: &Building, t: Pt, n: Pt, angle: f64, rng: &mut ChaCha8Rng) -> Building {
    let garage = rng.gen_bool(0.45);
    let (sw, sd) = if garage {
        (rng.gen_range(3.0..4.2), rng.gen_range(5.0..7.5))
    } else {
        (rng.gen_range(3.0..6.0), rng.gen_range(3.0..6.0))
    };
    let back = b.obb.hv + rng.gen_range(2.0..8.0) + sd / 2.0;
    let side = rng.gen_range(-b.obb.hu / 1.5..b.obb.hu / 1.5);
    let c = add(add(b.obb.c, mul(n, back)), mul(t, side));
    let kind = if garage { "garage" } else { "shed" };
    make_building(
        c,
        angle + rng.gen_range(-2.0_f64..2.0).to_radians(),
        sw,
        sd,
        false,
        kind,
        b.zone,
        rng,
    )
}

/// Walks both sides of a street placing buildings in rows; pushes the ones that fit.
fn fill_street(
    st: &Street,
    lay: &Layout,
    site: &mut Site,
    modern: bool,
    rng: &mut ChaCha8Rng,
    out: &mut Vec<Building>,
) {
    let len = st.len();
    for side in [1.0, -1.0] {
        let mut s = rng.gen_range(2.0..8.0);
        while s < len - 4.0 {
            let zone = lay.zone(st.at(s));
            if zone == Zone::Rural {
                s += 10.0;
                continue;
            }
            let pl = plan(zone, modern, rng);
            if !rng.gen_bool(pl.density) {
                s += pl.w + pl.gap;
                continue;
            }
            if s + pl.w > len - 2.0 {
                break;
            }
            let angle_jitter = rng.gen_range(-pl.jitter_deg..pl.jitter_deg).to_radians();
            // The planned footprint, else a shallower, else a narrower one (corners, tight gaps).
            let mut placed = None;
            for (fw, fd) in [(1.0, 1.0), (1.0, 0.7), (0.7, 0.7)] {
                let (w, d) = (pl.w * fw, pl.d * fd);
                if w < 6.0 && fw < 1.0 {
                    continue;
                }
                let mid_s = s + w / 2.0;
                let t = st.tangent(mid_s);
                let n = mul(perp(t), side);
                let c = add(st.at(mid_s), mul(n, st.hw + pl.setback + d / 2.0));
                let angle = t.1.atan2(t.0) + angle_jitter;
                let b = make_building(c, angle, w, d, pl.notch, pl.kind, zone, rng);
                if site.fits(&b.obb, 0.7, 1.0) {
                    placed = Some((b, t, n, angle, w));
                    break;
                }
            }
            if let Some((b, t, n, angle, w)) = placed {
                site.add_building(b.obb);
                if rng.gen_bool(pl.outbuilding) {
                    let ob = outbuilding(&b, t, n, angle, rng);
                    if site.fits(&ob.obb, 0.8, 1.0) {
                        site.add_building(ob.obb);
                        out.push(b);
                        out.push(ob);
                    } else {
                        out.push(b);
                    }
                } else {
                    out.push(b);
                }
                s += w + pl.gap;
            } else {
                s += if modern { 2.0 } else { 3.0 };
            }
        }
    }
}

/// A farmstead around a yard at `f`: the farmhouse on the yard's south side (local frame
/// u = `angle`), then a barn, maybe a second barn and a shed, each on the first free side of the
/// yard (north, east, west) where it fits. Returns false (placing nothing) if the house does
/// not fit.
fn place_farm(
    f: Pt,
    angle: f64,
    site: &mut Site,
    rng: &mut ChaCha8Rng,
    out: &mut Vec<Building>,
) -> bool {
    let (u, v) = (unit(angle), perp(unit(angle)));
    let at = |a: f64, b: f64| add(f, add(mul(u, a), mul(v, b)));
    let yard = rng.gen_range(15.0..30.0);
    let (hw, hd) = (rng.gen_range(10.0..16.0), rng.gen_range(8.0..12.0));
    let house = make_building(
        at(0.0, -(yard + hd) / 2.0),
        angle,
        hw,
        hd,
        rng.gen_bool(0.3),
        "house",
        Zone::Rural,
        rng,
    );
    if !site.fits(&house.obb, 2.0, 3.0) {
        return false;
    }
    site.add_building(house.obb);
    out.push(house);
    let mut wanted = vec![("barn", rng.gen_range(15.0..40.0), rng.gen_range(10.0..20.0))];
    if rng.gen_bool(0.6) {
        wanted.push(("barn", rng.gen_range(15.0..35.0), rng.gen_range(10.0..18.0)));
    }
    if rng.gen_bool(0.5) {
        wanted.push(("shed", rng.gen_range(4.0..9.0), rng.gen_range(4.0..8.0)));
    }
    let mut free = [true; 3];
    for (kind, w, d) in wanted {
        for k in 0..3 {
            if !free[k] {
                continue;
            }
            let along = rng.gen_range(-4.0..4.0);
            let (c, a) = match k {
                0 => (at(along, (yard + d) / 2.0), angle),
                1 => (
                    at((yard + d) / 2.0 + 2.0, along),
                    angle + 90f64.to_radians(),
                ),
                _ => (
                    at(-(yard + d) / 2.0 - 2.0, along),
                    angle + 90f64.to_radians(),
                ),
            };
            let b = make_building(c, a, w, d, false, kind, Zone::Rural, rng);
            if site.fits(&b.obb, 2.0, 3.0) {
                site.add_building(b.obb);
                out.push(b);
                free[k] = false;
                break;
            }
        }
    }
    true
}

/// The 2019 town.
fn generate_reference(
    lay: &Layout,
    streets: &[Street],
    lanes: &[Street],
    rng: &mut ChaCha8Rng,
) -> Vec<Building> {
    let margin = 5.0;
    let mut site = Site::new(Some((
        (-lay.half.0 + margin, -lay.half.1 + margin),
        (lay.half.0 - margin, lay.half.1 - margin),
    )));
    site.circles.push(lay.plaza);
    site.circles.push(lay.park);
    for st in streets.iter().chain(lanes) {
        site.add_street(st);
    }
    let mut out = Vec::new();
    // The church on the plaza.
    let (pc, pr) = lay.plaza;
    let church = make_building(
        add(pc, rot((0.0, pr + 11.0), lay.grid_angle)),
        lay.grid_angle,
        30.0,
        18.0,
        false,
        "public",
        Zone::Centre,
        rng,
    );
    if site.fits(&church.obb, 1.0, 1.0) {
        site.add_building(church.obb);
        out.push(church);
    }
    fill_brickworks(lay, &mut site, 5.0, rng, brickworks_2019, &mut out);
    for st in streets {
        fill_street(st, lay, &mut site, false, rng, &mut out);
    }
    // Farms along the lanes (and a few off them) outside the town.
    let n_farms = (30.0 * lay.l * lay.l).round() as usize;
    let total_lane: f64 = lanes.iter().map(Street::len).sum();
    let (mut placed, mut tries) = (0, 0);
    while placed < n_farms && tries < 300 * n_farms {
        tries += 1;
        let (f, angle) = if rng.gen_bool(0.75) {
            let mut s = rng.gen_range(0.0..total_lane);
            let mut lane = &lanes[0];
            for ln in lanes {
                lane = ln;
                if s < ln.len() {
                    break;
                }
                s -= ln.len();
            }
            let t = lane.tangent(s);
            let side = if rng.gen_bool(0.5) { 1.0 } else { -1.0 };
            let off = lane.hw + rng.gen_range(25.0..60.0);
            // Farm frame: v points away from the lane, so the house (south of the yard) faces it.
            let angle = t.1.atan2(t.0)
                + if side < 0.0 {
                    std::f64::consts::PI
                } else {
                    0.0
                };
            (add(lane.at(s), mul(perp(t), side * off)), angle)
        } else {
            let p = (
                rng.gen_range(-lay.half.0..lay.half.0),
                rng.gen_range(-lay.half.1..lay.half.1),
            );
            (p, rng.gen_range(0.0..TAU))
        };
        if lay.zone(f) != Zone::Rural || lay.rho(f) < lay.boundary(f) + 0.05 {
            continue;
        }
        if place_farm(f, angle, &mut site, rng, &mut out) {
            placed += 1;
        }
    }
    eprintln!("reference: {placed} farms in {tries} tries");
    out
}

// ---------------------------------------------------------------------------------------------
// Areas (coverages and districts)
// ---------------------------------------------------------------------------------------------

/// Axis-aligned rectangle in absolute EPSG:32633 coordinates.
#[derive(Clone, Copy, Debug)]
struct Rect {
    lo: Pt,
    hi: Pt,
}

impl Rect {
    fn around(c: Pt, hx: f64, hy: f64) -> Rect {
        Rect {
            lo: (c.0 - hx, c.1 - hy),
            hi: (c.0 + hx, c.1 + hy),
        }
    }
    fn contains(&self, p: Pt) -> bool {
        p.0 >= self.lo.0 && p.0 <= self.hi.0 && p.1 >= self.lo.1 && p.1 <= self.hi.1
    }
    fn intersects(&self, o: &Rect) -> bool {
        self.lo.0 < o.hi.0 && o.lo.0 < self.hi.0 && self.lo.1 < o.hi.1 && o.lo.1 < self.hi.1
    }
    fn area(&self) -> f64 {
        (self.hi.0 - self.lo.0) * (self.hi.1 - self.lo.1)
    }
    fn to_json(self) -> Value {
        json!({
            "crs": WORK_CRS,
            "frame": "reference",
            "min_x": self.lo.0, "min_y": self.lo.1, "max_x": self.hi.0, "max_y": self.hi.1,
            "rule": "a building is in the coverage when its reference-frame centroid is inside this rectangle",
        })
    }
}

/// Smallest rectangle (aspect hx/hy fixed) around `c` holding at least `n` of `pts`;
/// whole metres, so the truth files show tidy numbers.
fn district(c: Pt, aspect: f64, n: usize, pts: &[Pt]) -> Rect {
    let count = |h: f64| {
        pts.iter()
            .filter(|&&p| Rect::around(c, aspect * h, h).contains(p))
            .count()
    };
    let (mut lo, mut hi) = (1.0, 1.0e5);
    for _ in 0..60 {
        let mid = 0.5 * (lo + hi);
        if count(mid) >= n {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    let h = hi.ceil();
    Rect::around(c, (aspect * h).ceil(), h)
}

/// Weighted sampling of `k` items without replacement (Efraimidis-Spirakis keys).
fn weighted_sample(
    items: &[usize],
    k: usize,
    weight: impl Fn(usize) -> f64,
    rng: &mut ChaCha8Rng,
) -> Vec<usize> {
    let mut keyed: Vec<(f64, usize)> = items
        .iter()
        .map(|&i| {
            let u: f64 = 1.0 - rng.gen::<f64>();
            (u.ln() / weight(i), i)
        })
        .collect();
    keyed.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(&b.1)));
    keyed.truncate(k);
    let mut out: Vec<usize> = keyed.into_iter().map(|x| x.1).collect();
    out.sort_unstable();
    out
}

fn demolition_weight(kind: &str) -> f64 {
    match kind {
        "shed" | "garage" => 2.0,
        "barn" | "warehouse" => 1.5,
        "apartment" => 0.6,
        "public" => 0.2,
        _ => 1.0,
    }
}

// ---------------------------------------------------------------------------------------------
// 2026 world: new buildings
// ---------------------------------------------------------------------------------------------

/// Where a new building comes from (for the record only).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Origin {
    Estate,
    Redevelopment,
    Farm,
    Infill,
}

/// New housing estate east of the old town (outside the 2019 box): a spine road with side
/// streets, modern detached houses (some with garages), a few terraces and a school.
fn build_estate(lay: &Layout, site: &mut Site, rng: &mut ChaCha8Rng, out: &mut Vec<Building>) {
    let l = lay.l;
    let x0 = lay.half.0 + 90.0;
    let width = 330.0 * l;
    let (y0, y1) = (-480.0 * l, 240.0 * l);
    let mut streets = Vec::new();
    let spine: Vec<Pt> = (0..)
        .map(|k| y0 + 15.0 * k as f64)
        .take_while(|&y| y <= y1)
        .map(|y| (x0 + 15.0 + 10.0 * (y / 150.0).sin(), y))
        .collect();
    streets.push(Street::new(spine, 5.0));
    let mut y = y0 + 45.0;
    let mut k = 0.0;
    while y < y1 - 30.0 {
        let ph = k * 1.7;
        let x_end = x0 + width - rng.gen_range(10.0..50.0);
        let pts: Vec<Pt> = (0..)
            .map(|i| x0 + 20.0 + 15.0 * i as f64)
            .take_while(|&x| x <= x_end)
            .map(|x| (x, y + 6.0 * (x / 90.0 + ph).sin()))
            .collect();
        streets.push(Street::new(pts, 4.0));
        y += rng.gen_range(80.0..95.0);
        k += 1.0;
    }
    for st in &streets {
        site.add_street(st);
    }
    for st in &streets {
        let len = st.len();
        for side in [1.0, -1.0] {
            let mut s = rng.gen_range(6.0..12.0);
            while s < len - 4.0 {
                let terrace = rng.gen_bool(0.08);
                let (w, d) = if terrace {
                    (rng.gen_range(24.0..36.0), rng.gen_range(9.0..11.0))
                } else {
                    (rng.gen_range(9.0..12.5), rng.gen_range(8.0..11.0))
                };
                let (setback, gap) = (rng.gen_range(5.0..7.0), rng.gen_range(4.0..8.0));
                if s + w > len - 2.0 || !rng.gen_bool(0.92) {
                    s += w + gap;
                    continue;
                }
                let t = st.tangent(s + w / 2.0);
                let n = mul(perp(t), side);
                let c = add(st.at(s + w / 2.0), mul(n, st.hw + setback + d / 2.0));
                let angle = t.1.atan2(t.0) + rng.gen_range(-0.5_f64..0.5).to_radians();
                let b = make_building(
                    c,
                    angle,
                    w,
                    d,
                    !terrace && rng.gen_bool(0.25),
                    "house",
                    Zone::Outer,
                    rng,
                );
                if site.fits(&b.obb, 0.8, 1.0) {
                    site.add_building(b.obb);
                    if !terrace && rng.gen_bool(0.35) {
                        let g = outbuilding(&b, t, n, angle, rng);
                        out.push(b);
                        if site.fits(&g.obb, 0.8, 1.0) {
                            site.add_building(g.obb);
                            out.push(g);
                        }
                    } else {
                        out.push(b);
                    }
                    s += w + gap;
                } else {
                    s += 2.0;
                }
            }
        }
    }
    // A new school at the estate's south end.
    let school = make_building(
        (x0 + width * 0.55, y0 - 45.0),
        lay.grid_angle,
        55.0,
        28.0,
        true,
        "public",
        Zone::Outer,
        rng,
    );
    if site.fits(&school.obb, 3.0, 3.0) {
        site.add_building(school.obb);
        out.push(school);
    }
}

/// Fills the brickworks circle greedily: candidate spots on a 6 m lattice aligned with the town
/// grid, nearest to the centre first; `make` draws a building for a spot (centre, angle), kept
/// if it clears everything by `gap` metres. In 2019 the site holds kilns, sheds and
/// warehouses; in 2026 apartment blocks.
fn fill_brickworks(
    lay: &Layout,
    site: &mut Site,
    gap: f64,
    rng: &mut ChaCha8Rng,
    make: impl Fn(Pt, f64, &mut ChaCha8Rng) -> Building,
    out: &mut Vec<Building>,
) {
    let (c, r) = lay.brickworks;
    let (u, v) = (unit(lay.grid_angle), perp(unit(lay.grid_angle)));
    let n = (r / 6.0).ceil() as i64;
    let mut spots: Vec<(f64, Pt)> = Vec::new();
    for i in -n..=n {
        for j in -n..=n {
            let p = add(c, add(mul(u, i as f64 * 6.0), mul(v, j as f64 * 6.0)));
            let dc = norm(sub(p, c));
            if dc < r - 8.0 {
                spots.push((dc, p));
            }
        }
    }
    spots.sort_by(|a, b| a.0.total_cmp(&b.0));
    for (_, p) in spots {
        let turn = if rng.gen_bool(0.3) {
            90f64.to_radians()
        } else {
            0.0
        };
        let b = make(p, lay.grid_angle + turn, rng);
        if norm(sub(b.obb.c, c)) + b.obb.hu.max(b.obb.hv) < r + 5.0 && site.fits(&b.obb, gap, 2.0) {
            site.add_building(b.obb);
            out.push(b);
        }
    }
}

fn brickworks_2019(c: Pt, angle: f64, rng: &mut ChaCha8Rng) -> Building {
    let (w, d, kind) = match rng.gen_range(0..10) {
        0..=1 => (rng.gen_range(5.0..8.0), rng.gen_range(5.0..8.0), "shed"), // kiln
        2..=5 => (rng.gen_range(20.0..45.0), rng.gen_range(12.0..22.0), "shed"),
        _ => (
            rng.gen_range(30.0..60.0),
            rng.gen_range(18.0..30.0),
            "warehouse",
        ),
    };
    make_building(
        c,
        angle + rng.gen_range(-1.0_f64..1.0).to_radians(),
        w,
        d,
        rng.gen_bool(0.1),
        kind,
        Zone::Brickworks,
        rng,
    )
}

fn brickworks_2026(c: Pt, angle: f64, rng: &mut ChaCha8Rng) -> Building {
    let (w, d) = (rng.gen_range(22.0..38.0), rng.gen_range(12.0..15.0));
    make_building(
        c,
        angle,
        w,
        d,
        rng.gen_bool(0.2),
        "apartment",
        Zone::Brickworks,
        rng,
    )
}

// ---------------------------------------------------------------------------------------------
// Output helpers
// ---------------------------------------------------------------------------------------------

fn polygon(ring: &[Pt]) -> Res<Geometry> {
    let mut lr = Geometry::empty(OGRwkbGeometryType::wkbLinearRing)?;
    for &p in ring {
        lr.add_point_2d(p);
    }
    lr.add_point_2d(ring[0]); // closed ring
    let mut poly = Geometry::empty(OGRwkbGeometryType::wkbPolygon)?;
    poly.add_geometry(lr)?;
    Ok(poly)
}

fn srs(epsg: u32) -> Res<SpatialRef> {
    let mut s = SpatialRef::from_epsg(epsg)?;
    s.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
    Ok(s)
}

fn remove_if_exists(path: &Path) -> Res<()> {
    if path.exists() {
        fs::remove_file(path)?;
    }
    Ok(())
}

/// One field value for `write_polygons`.
enum Val {
    Text(String),
    Int(i32),
}

/// Writes polygons with attributes; uses a transaction where the driver has them (GeoPackage).
fn write_polygons(
    path: &Path,
    driver: &str,
    layer_name: &str,
    epsg: u32,
    layer_options: &[&str],
    fields: &[(&str, OGRFieldType::Type)],
    rows: &[(Vec<Val>, Vec<Pt>)],
) -> Res<()> {
    remove_if_exists(path)?;
    let drv = DriverManager::get_driver_by_name(driver)?;
    let mut ds: Dataset = drv.create_vector_only(path)?;
    let sr = srs(epsg)?;
    let write = |ds: &mut Dataset| -> Res<()> {
        let layer = ds.create_layer(LayerOptions {
            name: layer_name,
            srs: Some(&sr),
            ty: OGRwkbGeometryType::wkbPolygon,
            options: if layer_options.is_empty() {
                None
            } else {
                Some(layer_options)
            },
        })?;
        layer.create_defn_fields(fields)?;
        let defn = layer.defn();
        for (vals, ring) in rows {
            let mut f = Feature::new(defn)?;
            for (i, v) in vals.iter().enumerate() {
                match v {
                    Val::Text(s) => f.set_field_string(i, s)?,
                    Val::Int(n) => f.set_field_integer(i, *n)?,
                }
            }
            f.set_geometry(polygon(ring)?)?;
            f.create(&layer)?;
        }
        Ok(())
    };
    if driver == "GPKG" {
        let mut txn = ds.start_transaction()?;
        write(&mut txn)?;
        txn.commit()?;
    } else {
        write(&mut ds)?;
    }
    ds.close()?; // builds the spatial index: check its error
    Ok(())
}

fn write_pairs(path: &Path, pairs: &mut [(String, String)]) -> Res<()> {
    pairs.sort();
    let mut s = String::from("reference_id,target_id\n");
    for (r, t) in pairs.iter() {
        s.push_str(r);
        s.push(',');
        s.push_str(t);
        s.push('\n');
    }
    fs::write(path, s)?;
    Ok(())
}

fn write_json(path: &Path, v: &Value) -> Res<()> {
    let mut s = serde_json::to_string_pretty(v)?;
    s.push('\n');
    fs::write(path, s)?;
    Ok(())
}

/// The digitised version of a ring: applied error, independent vertex noise, redrawn if the
/// noise would make the ring self-intersecting, started at a random vertex.
fn digitise(ring_abs: &[Pt], err: &PivotSimilarity, sigma: f64, rng: &mut ChaCha8Rng) -> Vec<Pt> {
    let clean: Vec<Pt> = ring_abs.iter().map(|&p| err.apply(p)).collect();
    loop {
        let noisy: Vec<Pt> = clean
            .iter()
            .map(|&p| (p.0 + sigma * gauss(rng), p.1 + sigma * gauss(rng)))
            .collect();
        if ring_is_simple(&noisy) && ring_centroid(&noisy).1 > 0.0 {
            let k = rng.gen_range(0..noisy.len());
            let mut out = noisy[k..].to_vec();
            out.extend_from_slice(&noisy[..k]);
            return out;
        }
    }
}

/// `n` distinct random integers with the same number of digits (at least 4, and at least
/// twice as many candidates as needed), in random order.
fn unique_numbers(n: usize, rng: &mut ChaCha8Rng) -> Vec<usize> {
    let mut lo = 1000;
    while 9 * lo < 2 * n {
        lo *= 10;
    }
    let mut v: Vec<usize> = (lo..10 * lo).collect();
    v.shuffle(rng);
    v.truncate(n);
    v
}

/// Reference centroids in a hash grid, to find the nearest one quickly.
struct PointIndex<'a> {
    grid: Grid,
    pts: &'a [Pt],
    scratch: Vec<u32>,
}

impl<'a> PointIndex<'a> {
    fn new(pts: &'a [Pt]) -> Self {
        let mut grid = Grid::new(10.0);
        for (i, &p) in pts.iter().enumerate() {
            grid.insert(i as u32, p, p);
        }
        PointIndex {
            grid,
            pts,
            scratch: Vec::new(),
        }
    }

    /// Distance to the nearest point, if one is within `r`.
    fn nearest_within(&mut self, p: Pt, r: f64) -> Option<f64> {
        self.grid
            .query((p.0 - r, p.1 - r), (p.0 + r, p.1 + r), &mut self.scratch);
        self.scratch
            .iter()
            .map(|&i| norm(sub(self.pts[i as usize], p)))
            .filter(|&d| d <= r)
            .min_by(f64::total_cmp)
    }

    /// How many of `new_pts` (true reference-frame positions of new target buildings) lie
    /// within 1, 3 and 6 m of some reference centroid: replacements on demolished plots, which a
    /// centroid-only matcher cannot tell from the old building.
    fn decoys(&mut self, new_pts: impl Iterator<Item = Pt>) -> Value {
        let mut n = [0usize; 3];
        for p in new_pts {
            if let Some(d) = self.nearest_within(p, 6.0) {
                for (k, lim) in [1.0, 3.0, 6.0].into_iter().enumerate() {
                    if d < lim {
                        n[k] += 1;
                    }
                }
            }
        }
        json!({
            "within_1m": n[0], "within_3m": n[1], "within_6m": n[2],
            "meaning": "new target buildings whose true centroid lies this close to a reference centroid (a demolished building's plot rebuilt); not true pairs",
        })
    }
}

fn rng_stream(seed: u64, stream: u64) -> ChaCha8Rng {
    let mut r = ChaCha8Rng::seed_from_u64(seed);
    r.set_stream(stream);
    r
}

/// Residual statistics of the expected transform over true pairs.
struct Check {
    max_clean: f64,
    rms_noisy: f64,
    max_noisy: f64,
}

fn check_json(c: &Check) -> Value {
    json!({
        "max_residual_error_free_m": c.max_clean,
        "rms_residual_noisy_centroids_m": c.rms_noisy,
        "max_residual_noisy_centroids_m": c.max_noisy,
        "note": "residual |T(target centroid) - reference centroid| over the true pairs; error-free = before noise",
    })
}

/// Verifies the expected transform on (error-free target point, noisy target point, reference
/// point) triples; panics unless error-free residuals are below 1e-6 m.
fn verify(name: &str, t: &Similarity, triples: &[(Pt, Pt, Pt)]) -> Check {
    let (mut max_clean, mut max_noisy, mut ss) = (0.0_f64, 0.0_f64, 0.0);
    for &(clean, noisy, reference) in triples {
        let e = norm(sub(t.apply(clean), reference));
        max_clean = max_clean.max(e);
        let en = norm(sub(t.apply(noisy), reference));
        max_noisy = max_noisy.max(en);
        ss += en * en;
    }
    assert!(
        max_clean < 1e-6,
        "{name}: expected transform misses an error-free centroid by {max_clean} m"
    );
    let rms = (ss / triples.len().max(1) as f64).sqrt();
    eprintln!("{name}: {} pairs, error-free max {max_clean:.2e} m, noisy rms {rms:.3} m, max {max_noisy:.3} m", triples.len());
    Check {
        max_clean,
        rms_noisy: rms,
        max_noisy,
    }
}

// ---------------------------------------------------------------------------------------------
// Main
// ---------------------------------------------------------------------------------------------

struct Args {
    out: PathBuf,
    seed: u64,
    scale: f64,
    /// Only the large raster scene (benchmark data), into `out`.
    large: bool,
}

fn parse_args() -> Res<Args> {
    let mut a = Args {
        out: PathBuf::from("sample-data"),
        seed: DEFAULT_SEED,
        scale: 1.0,
        large: false,
    };
    let mut it = std::env::args().skip(1);
    let mut positional = false;
    while let Some(arg) = it.next() {
        let (key, inline) = match arg.split_once('=') {
            Some((k, v)) if k.starts_with("--") => (k.to_string(), Some(v.to_string())),
            _ => (arg.clone(), None),
        };
        let mut value = |name: &str| -> Res<String> {
            inline
                .clone()
                .or_else(|| it.next())
                .ok_or_else(|| format!("{name} needs a value").into())
        };
        match key.as_str() {
            "--seed" => a.seed = value("--seed")?.parse()?,
            "--scale" => a.scale = value("--scale")?.parse()?,
            "--large" => a.large = true,
            "-h" | "--help" => {
                println!("usage: generate-sample-data [OUT_DIR] [--seed N] [--scale F] [--large]\n  OUT_DIR defaults to ./sample-data (with --large: ./target/scene-large); --seed defaults to {DEFAULT_SEED}; --scale (default 1) multiplies the number of buildings; --large writes only the large raster scene (4000 x 4000 px orthophoto, 20,000 x 20,000 px mosaic) for benchmarks");
                std::process::exit(0);
            }
            k if k.starts_with('-') => return Err(format!("unknown option {k}").into()),
            _ if !positional => {
                a.out = PathBuf::from(arg);
                positional = true;
            }
            _ => return Err(format!("unexpected argument {arg}").into()),
        }
    }
    if !(a.scale.is_finite() && a.scale >= 0.05 && a.scale <= 400.0) {
        return Err("--scale must be between 0.05 and 400".into());
    }
    if a.large && !positional {
        a.out = PathBuf::from("target/scene-large");
    }
    Ok(a)
}

fn main() -> Res<()> {
    let args = parse_args()?;
    let (seed, scale) = (args.seed, args.scale);
    let out = args.out;
    fs::create_dir_all(&out)?;
    if args.large {
        return scene::write_scene(&out, seed, scene::Size::Large);
    }
    let l = scale.sqrt();

    // ---- 2019 reference -------------------------------------------------------------------
    let mut rng = rng_stream(seed, 1);
    let lay = Layout::new(l, &mut rng);
    let (streets, lanes) = make_streets(&lay, &mut rng);
    let reference = generate_reference(&lay, &streets, &lanes, &mut rng);
    let n_ref = reference.len();
    let width = 5.max(n_ref.to_string().len());
    let ref_ids: Vec<String> = (1..=n_ref).map(|i| format!("B-{i:0width$}")).collect();
    let ref_c: Vec<Pt> = reference.iter().map(Building::centroid).collect();
    let rows: Vec<(Vec<Val>, Vec<Pt>)> = reference
        .iter()
        .zip(&ref_ids)
        .map(|(b, id)| {
            (
                vec![Val::Text(id.clone()), Val::Text(b.kind.to_string())],
                b.abs_ring(),
            )
        })
        .collect();
    write_polygons(
        &out.join(REF_FILE),
        "GPKG",
        "buildings",
        WORK_EPSG,
        &[],
        &[
            ("bldg_id", OGRFieldType::OFTString),
            ("use", OGRFieldType::OFTString),
        ],
        &rows,
    )?;
    let mut kinds: Vec<(&str, usize)> = Vec::new();
    for b in &reference {
        match kinds.iter_mut().find(|k| k.0 == b.kind) {
            Some(k) => k.1 += 1,
            None => kinds.push((b.kind, 1)),
        }
    }
    eprintln!("reference: {n_ref} buildings {kinds:?}");

    // ---- coverages ---------------------------------------------------------------------------
    let window = Rect {
        lo: abs_pt((-650.0 * l, -1300.0 * l)),
        hi: abs_pt((2000.0 * l, 900.0 * l)),
    };
    let town_box = Rect::around(CENTRE, lay.half.0, lay.half.1);
    let d1 = district(
        abs_pt((480.0 * l, 330.0 * l)),
        1.2,
        (420.0 * scale).round() as usize,
        &ref_c,
    );
    let d2 = district(
        abs_pt((-400.0 * l, 60.0 * l)),
        1.0,
        (260.0 * scale).round() as usize,
        &ref_c,
    );
    let (bc, br) = lay.brickworks;
    let brick = Rect::around(abs_pt(bc), br, br);
    assert!(
        !d1.intersects(&d2) && !d1.intersects(&brick) && !d2.intersects(&brick),
        "districts overlap"
    );
    for d in [&d1, &d2] {
        assert!(
            window.contains(d.lo) && window.contains(d.hi),
            "district outside the survey window"
        );
    }
    let in_w: Vec<usize> = (0..n_ref).filter(|&i| window.contains(ref_c[i])).collect();
    let in_d1: Vec<usize> = (0..n_ref).filter(|&i| d1.contains(ref_c[i])).collect();
    let in_d2: Vec<usize> = (0..n_ref).filter(|&i| d2.contains(ref_c[i])).collect();

    // ---- demolitions (quotas per area) -------------------------------------------------------
    let mut rng = rng_stream(seed, 2);
    let w = |i: usize| demolition_weight(reference[i].kind);
    let mut demolished = vec![false; n_ref];
    for &i in &in_w {
        if reference[i].zone == Zone::Brickworks {
            demolished[i] = true; // the whole brickworks is cleared
        }
    }
    for i in weighted_sample(
        &in_d1,
        (0.10 * in_d1.len() as f64).round() as usize,
        w,
        &mut rng,
    ) {
        demolished[i] = true;
    }
    for i in weighted_sample(
        &in_d2,
        (0.08 * in_d2.len() as f64).round() as usize,
        w,
        &mut rng,
    ) {
        demolished[i] = true;
    }
    let others: Vec<usize> = in_w
        .iter()
        .copied()
        .filter(|&i| !demolished[i] && !d1.contains(ref_c[i]) && !d2.contains(ref_c[i]))
        .collect();
    let done = in_w.iter().filter(|&&i| demolished[i]).count();
    let want = (0.24 * in_w.len() as f64).ceil() as usize;
    for i in weighted_sample(&others, want.saturating_sub(done), w, &mut rng) {
        demolished[i] = true;
    }
    // Buildings in the site-grid district that the site survey did not pick up.
    let d2_kept: Vec<usize> = in_d2.iter().copied().filter(|&i| !demolished[i]).collect();
    let mut unsurveyed = vec![false; n_ref];
    let mut pool_d2 = d2_kept.clone();
    pool_d2.shuffle(&mut rng);
    for &i in pool_d2
        .iter()
        .take((0.07 * in_d2.len() as f64).round() as usize)
    {
        unsurveyed[i] = true;
    }

    // ---- 2026 new buildings -------------------------------------------------------------------
    let mut rng = rng_stream(seed, 3);
    let mut site = Site::new(None);
    site.circles.push(lay.plaza);
    site.circles.push(lay.park);
    for st in streets.iter().chain(&lanes) {
        site.add_street(st);
    }
    for (i, b) in reference.iter().enumerate() {
        if !demolished[i] {
            site.add_building(b.obb);
        }
    }
    let mut new: Vec<(Building, Origin)> = Vec::new();
    let mut tmp = Vec::new();
    fill_brickworks(&lay, &mut site, 8.0, &mut rng, brickworks_2026, &mut tmp);
    new.extend(tmp.drain(..).map(|b| (b, Origin::Redevelopment)));
    build_estate(&lay, &mut site, &mut rng, &mut tmp);
    new.extend(tmp.drain(..).map(|b| (b, Origin::Estate)));
    // A new farmstead in the fields south of the old town.
    let mut placed_farms = 0;
    for _ in 0..200 {
        if placed_farms >= (2.0 * scale).ceil() as usize {
            break;
        }
        let f = (
            rng.gen_range(-600.0 * l..1800.0 * l),
            rng.gen_range(-1260.0 * l..-1060.0 * l),
        );
        if place_farm(f, rng.gen_range(0.0..TAU), &mut site, &mut rng, &mut tmp) {
            placed_farms += 1;
        }
    }
    new.extend(tmp.drain(..).map(|b| (b, Origin::Farm)));
    for (b, _) in &new {
        let c = b.centroid();
        assert!(window.contains(c) && !d1.contains(c) && !d2.contains(c));
        if b.zone != Zone::Brickworks {
            assert!(
                !town_box.contains(c),
                "estate/farm building inside the 2019 box"
            );
        }
    }
    // Infill candidates: modern buildings in street gaps, sheds/garages behind kept houses.
    let mut pool = Vec::new();
    for st in &streets {
        fill_street(st, &lay, &mut site, true, &mut rng, &mut pool);
    }
    for (i, b) in reference.iter().enumerate() {
        if demolished[i]
            || b.kind != "house"
            || !matches!(b.zone, Zone::Inner | Zone::Outer)
            || !rng.gen_bool(0.4)
        {
            continue;
        }
        let t = b.obb.u;
        let n = if rng.gen_bool(0.5) {
            b.obb.v()
        } else {
            mul(b.obb.v(), -1.0)
        };
        let ob = outbuilding(b, t, n, t.1.atan2(t.0), &mut rng);
        if site.fits(&ob.obb, 0.8, 1.0) {
            site.add_building(ob.obb);
            pool.push(ob);
        }
    }
    let pool_c: Vec<Pt> = pool.iter().map(Building::centroid).collect();
    let idx_in =
        |r: &Rect| -> Vec<usize> { (0..pool.len()).filter(|&i| r.contains(pool_c[i])).collect() };
    let pool_d1 = idx_in(&d1);
    let pool_d2i = idx_in(&d2);
    let pool_other: Vec<usize> = (0..pool.len())
        .filter(|&i| {
            window.contains(pool_c[i]) && !d1.contains(pool_c[i]) && !d2.contains(pool_c[i])
        })
        .collect();
    let kept_d1 = in_d1.iter().filter(|&&i| !demolished[i]).count();
    let surveyed_d2 = in_d2
        .iter()
        .filter(|&&i| !demolished[i] && !unsurveyed[i])
        .count();
    let k1 = ((kept_d1 as f64 * 0.1 / 0.9).round() as usize).min(pool_d1.len());
    let k2 = ((surveyed_d2 as f64 * 0.1 / 0.9).round() as usize).min(pool_d2i.len());
    let kept_w = in_w.iter().filter(|&&i| !demolished[i]).count();
    let need = (kept_w as f64 * 0.26 / 0.74).ceil() as usize;
    let fixed = new.len() + k1 + k2;
    let k_other = need
        .saturating_sub(fixed)
        .max(pool_other.len() / 5)
        .min(pool_other.len());
    let mut chosen = Vec::new();
    for (cands, k) in [(&pool_d1, k1), (&pool_d2i, k2), (&pool_other, k_other)] {
        let mut c = cands.clone();
        c.shuffle(&mut rng);
        c.truncate(k);
        chosen.extend(c);
    }
    chosen.sort_unstable();
    new.extend(chosen.iter().map(|&i| (pool[i].clone(), Origin::Infill)));
    let new_c: Vec<Pt> = new.iter().map(|(b, _)| b.centroid()).collect();
    eprintln!(
        "2026: pool {} (d1 {}, d2 {}, other {}), new {} (estate {}, redevelopment {}, farm {}, infill {})",
        pool.len(),
        pool_d1.len(),
        pool_d2i.len(),
        pool_other.len(),
        new.len(),
        new.iter().filter(|n| n.1 == Origin::Estate).count(),
        new.iter().filter(|n| n.1 == Origin::Redevelopment).count(),
        new.iter().filter(|n| n.1 == Origin::Farm).count(),
        new.iter().filter(|n| n.1 == Origin::Infill).count(),
    );

    let mut ref_index = PointIndex::new(&ref_c);

    // The 2026 world as (reference index or None, building).
    let world: Vec<(Option<usize>, &Building, Pt)> = (0..n_ref)
        .filter(|&i| !demolished[i])
        .map(|i| (Some(i), &reference[i], ref_c[i]))
        .chain(new.iter().zip(&new_c).map(|((b, _), &c)| (None, b, c)))
        .collect();

    let base = |name: &str, target: &str, layer: Value, id_field: &str, target_crs: &str| {
        json!({
            "description": format!("Truth for the fictional Tessaloom sample data: {name}. All data are invented."),
            "generator": "sample-data/generate.rs",
            "seed": seed,
            "scale": scale,
            "reference_file": REF_FILE,
            "reference_layer": "buildings",
            "reference_id_field": "bldg_id",
            "reference_crs": WORK_CRS,
            "target_file": target,
            "target_layer": layer,
            "target_id_field": id_field,
            "target_crs": target_crs,
            "working_crs": WORK_CRS,
            "centroid_definition": CENTROID_DEF,
        })
    };
    let merge = |mut a: Value, b: Value| {
        if let (Some(a), Value::Object(b)) = (a.as_object_mut(), b) {
            a.extend(b);
        }
        a
    };

    // ---- target 1: town survey 2026 (GeoJSON, lon/lat) -----------------------------------------
    let mut rng = rng_stream(seed, 4);
    let err_e = PivotSimilarity {
        pivot: CENTRE,
        scale: 1.0009,
        rotation_deg: 0.4,
        shift: (14.0, -7.0),
    };
    let sigma_e = 0.3;
    let expected_e = err_e.origin_form().inverse();
    let to_ll = Proj::new_known_crs(WORK_CRS, "EPSG:4326", None)?;
    let from_ll = Proj::new_known_crs("EPSG:4326", WORK_CRS, None)?;
    let mut members: Vec<usize> = (0..world.len())
        .filter(|&k| window.contains(world[k].2))
        .collect();
    members.shuffle(&mut rng);
    let uids = unique_numbers(members.len(), &mut rng);
    let mut rows = Vec::new();
    let mut pairs = Vec::new();
    let mut triples = Vec::new();
    let mut max_roundtrip = 0.0_f64;
    for (k, &m) in members.iter().enumerate() {
        let (ri, b, _) = world[m];
        let uid = format!("S26-{}", uids[k]);
        let ring = b.abs_ring();
        let noisy = digitise(&ring, &err_e, sigma_e, &mut rng);
        let mut ll = Vec::with_capacity(noisy.len());
        for &p in &noisy {
            ll.push(to_ll.convert(p)?);
        }
        if let Some(i) = ri {
            let clean_c =
                ring_centroid(&ring.iter().map(|&p| err_e.apply(p)).collect::<Vec<_>>()).0;
            // PROJ round trip of the error-free point (what a reader of the file does).
            let back = from_ll.convert(to_ll.convert(clean_c)?)?;
            max_roundtrip = max_roundtrip.max(norm(sub(back, clean_c)));
            triples.push((back, ring_centroid(&noisy).0, ref_c[i]));
            pairs.push((ref_ids[i].clone(), uid.clone()));
        }
        rows.push((vec![Val::Text(uid)], ll));
    }
    // Check lon/lat order once: the town is at about 14.4 E, 47.0 N.
    assert!(rows.iter().all(|r| r
        .1
        .iter()
        .all(|p| (13.0..16.0).contains(&p.0) && (46.0..48.5).contains(&p.1))));
    write_polygons(
        &out.join(SURVEY_FILE),
        "GeoJSON",
        "town_survey_2026",
        4326,
        &["RFC7946=YES", "COORDINATE_PRECISION=8"],
        &[("uid", OGRFieldType::OFTString)],
        &rows,
    )?;
    let chk = verify("town-survey-2026", &expected_e, &triples);
    let ref_in = in_w.len();
    let common = pairs.len();
    let demol = in_w.iter().filter(|&&i| demolished[i]).count();
    let n_new = members.len() - common;
    assert_eq!(ref_in, common + demol);
    assert!(demol as f64 >= 0.22 * ref_in as f64 && n_new as f64 >= 0.22 * members.len() as f64);
    let truth = merge(
        base(
            "town survey 2026",
            SURVEY_FILE,
            json!("town_survey_2026"),
            "uid",
            "EPSG:4326 (GeoJSON RFC 7946, lon/lat order, 8 decimals)",
        ),
        json!({
            "target_to_working": "PROJ EPSG:4326 -> EPSG:32633, coordinates in (lon, lat) -> (easting, northing) order",
            "expected_transform": merge(expected_e.to_json(), json!({"convention": CONVENTION})),
            "applied_error": err_e.to_json("reference EPSG:32633 -> target working EPSG:32633, applied before noise and before conversion to lon/lat"),
            "noise": {"kind": "independent Gaussian per vertex and per coordinate, in metres, in the projected plane after the applied error", "sigma_m": sigma_e},
            "coverage": window.to_json(),
            "coverage_fraction_of_2019_town_box": {
                "town_box_min_max": [town_box.lo.0, town_box.lo.1, town_box.hi.0, town_box.hi.1],
                "fraction": (Rect { lo: (window.lo.0.max(town_box.lo.0), window.lo.1.max(town_box.lo.1)), hi: (window.hi.0.min(town_box.hi.0), window.hi.1.min(town_box.hi.1)) }).area() / town_box.area(),
            },
            "counts": {
                "reference_n": n_ref,
                "reference_in_coverage_n": ref_in,
                "target_n": members.len(),
                "common_n": common,
                "demolished_n": demol,
                "new_n": n_new,
                "demolished_fraction_of_reference_in_coverage": demol as f64 / ref_in as f64,
                "new_fraction_of_target": n_new as f64 / members.len() as f64,
                "new_outside_2019_town_box_n": members.iter().filter(|&&m| world[m].0.is_none() && !town_box.contains(world[m].2)).count(),
                "new_near_reference_centroid": ref_index.decoys(members.iter().filter(|&&m| world[m].0.is_none()).map(|&m| world[m].2)),
            },
            "true_pairs_file": "town-survey-2026-true-pairs.csv",
            "max_proj_round_trip_m": max_roundtrip,
            "check": check_json(&chk),
        }),
    );
    write_json(&out.join("town-survey-2026-truth.json"), &truth)?;
    write_pairs(&out.join("town-survey-2026-true-pairs.csv"), &mut pairs)?;

    // ---- target 2: drone outlines (FlatGeobuf, EPSG:32633) ------------------------------------
    let mut rng = rng_stream(seed, 5);
    let d1_centre = (
        ((d1.lo.0 + d1.hi.0) / 2.0).round(),
        ((d1.lo.1 + d1.hi.1) / 2.0).round(),
    );
    let err_d = PivotSimilarity {
        pivot: d1_centre,
        scale: 1.0002,
        rotation_deg: 0.03,
        shift: (1.2, -0.9),
    };
    let sigma_d = 0.08;
    let expected_d = err_d.origin_form().inverse();
    let mut members: Vec<usize> = (0..world.len())
        .filter(|&k| d1.contains(world[k].2))
        .collect();
    members.shuffle(&mut rng);
    let mut rows = Vec::new();
    let mut pairs = Vec::new();
    let mut triples = Vec::new();
    for (k, &m) in members.iter().enumerate() {
        let (ri, b, _) = world[m];
        let oid = k as i32 + 1;
        let ring = b.abs_ring();
        let noisy = digitise(&ring, &err_d, sigma_d, &mut rng);
        if let Some(i) = ri {
            let clean_c =
                ring_centroid(&ring.iter().map(|&p| err_d.apply(p)).collect::<Vec<_>>()).0;
            triples.push((clean_c, ring_centroid(&noisy).0, ref_c[i]));
            pairs.push((ref_ids[i].clone(), oid.to_string()));
        }
        rows.push((vec![Val::Int(oid)], noisy));
    }
    write_polygons(
        &out.join(DRONE_FILE),
        "FlatGeobuf",
        "drone_outlines_2026",
        WORK_EPSG,
        &["SPATIAL_INDEX=YES"],
        &[("oid", OGRFieldType::OFTInteger)],
        &rows,
    )?;
    let chk = verify("drone-outlines-2026", &expected_d, &triples);
    let common = pairs.len();
    let demol = in_d1.iter().filter(|&&i| demolished[i]).count();
    assert_eq!(in_d1.len(), common + demol);
    let truth = merge(
        base(
            "drone outlines 2026",
            DRONE_FILE,
            json!("drone_outlines_2026"),
            "oid",
            WORK_CRS,
        ),
        json!({
            "target_to_working": "none (already EPSG:32633)",
            "expected_transform": merge(expected_d.to_json(), json!({"convention": CONVENTION})),
            "applied_error": err_d.to_json("reference EPSG:32633 -> target EPSG:32633 (GNSS offset of the drone mosaic), applied before noise"),
            "noise": {"kind": "independent Gaussian per vertex and per coordinate, in metres, after the applied error", "sigma_m": sigma_d},
            "coverage": d1.to_json(),
            "counts": {
                "reference_n": n_ref,
                "reference_in_coverage_n": in_d1.len(),
                "target_n": members.len(),
                "common_n": common,
                "demolished_n": demol,
                "new_n": members.len() - common,
                "demolished_fraction_of_reference_in_coverage": demol as f64 / in_d1.len() as f64,
                "new_fraction_of_target": (members.len() - common) as f64 / members.len() as f64,
                "new_near_reference_centroid": ref_index.decoys(members.iter().filter(|&&m| world[m].0.is_none()).map(|&m| world[m].2)),
            },
            "true_pairs_file": "drone-outlines-2026-true-pairs.csv",
            "note": "FlatGeobuf with a spatial index returns features in spatial order, not in oid order",
            "check": check_json(&chk),
        }),
    );
    write_json(&out.join("drone-outlines-2026-truth.json"), &truth)?;
    write_pairs(&out.join("drone-outlines-2026-true-pairs.csv"), &mut pairs)?;

    // ---- target 3: site grid (CSV, local grid in international feet) ---------------------------
    let mut rng = rng_stream(seed, 6);
    let d2_centre = (
        ((d2.lo.0 + d2.hi.0) / 2.0).round(),
        ((d2.lo.1 + d2.hi.1) / 2.0).round(),
    );
    let false_origin = (5000.0, 10000.0);
    let ft = 0.3048;
    // G: EPSG:32633 metres -> local feet; the pivot form with pivot = district centre and
    // shift = false origin - pivot puts the district centre at the false origin.
    let err_g = PivotSimilarity {
        pivot: d2_centre,
        scale: 1.0 / ft,
        rotation_deg: 112.5,
        shift: sub(false_origin, d2_centre),
    };
    let sigma_g = 0.05;
    let expected_g = err_g.origin_form().inverse();
    let mut members: Vec<usize> = (0..world.len())
        .filter(|&k| d2.contains(world[k].2) && !world[k].0.is_some_and(|i| unsurveyed[i]))
        .collect();
    members.shuffle(&mut rng);
    let mut csv = String::from("pt,e,n\n");
    let mut pairs = Vec::new();
    let mut triples = Vec::new();
    for (k, &m) in members.iter().enumerate() {
        let (ri, _, c) = world[m];
        let pt = format!("P{}", 101 + k);
        let noisy_m = (
            c.0 + sigma_g * gauss(&mut rng),
            c.1 + sigma_g * gauss(&mut rng),
        );
        let q = err_g.apply(noisy_m);
        let q = (
            (q.0 * 1000.0).round() / 1000.0,
            (q.1 * 1000.0).round() / 1000.0,
        );
        csv.push_str(&format!("{pt},{:.3},{:.3}\n", q.0, q.1));
        if let Some(i) = ri {
            triples.push((err_g.apply(c), q, ref_c[i]));
            pairs.push((ref_ids[i].clone(), pt));
        }
    }
    fs::write(out.join(SITE_FILE), csv)?;
    let chk = verify("site-grid", &expected_g, &triples);
    let common = pairs.len();
    let demol_only = in_d2.iter().filter(|&&i| demolished[i]).count();
    let unsurv = in_d2.iter().filter(|&&i| unsurveyed[i]).count();
    assert_eq!(in_d2.len(), common + demol_only + unsurv);
    let truth = merge(
        base(
            "site grid",
            SITE_FILE,
            json!("site-grid (GDAL CSV driver; x = e, y = n)"),
            "pt",
            "none: unreferenced local grid, international feet (columns pt,e,n)",
        ),
        json!({
            "target_to_working": "none: the raw e, n values (feet) are the target working coordinates",
            "target_units": "international foot (0.3048 m)",
            "expected_transform": merge(expected_g.to_json(), json!({"convention": CONVENTION, "units": "input feet, output EPSG:32633 metres"})),
            "applied_error": merge(err_g.to_json("reference EPSG:32633 metres -> local grid feet (G), applied after noise"), json!({"false_origin_e": false_origin.0, "false_origin_n": false_origin.1, "false_origin_is_image_of": "the pivot", "form_simplified": "q = false_origin + s R(t) (p - pivot)"})),
            "noise": {"kind": "independent Gaussian per point and per coordinate, added to the reference centroid in metres before G; values then rounded to 0.001 ft", "sigma_m": sigma_g, "sigma_ft": sigma_g / ft},
            "coverage": d2.to_json(),
            "counts": {
                "reference_n": n_ref,
                "reference_in_coverage_n": in_d2.len(),
                "target_n": members.len(),
                "common_n": common,
                "demolished_n": demol_only + unsurv,
                "absent_because_demolished_n": demol_only,
                "absent_because_not_surveyed_n": unsurv,
                "new_n": members.len() - common,
                "missing_fraction_of_reference_in_coverage": (demol_only + unsurv) as f64 / in_d2.len() as f64,
                "extra_fraction_of_target": (members.len() - common) as f64 / members.len() as f64,
                "new_near_reference_centroid": ref_index.decoys(members.iter().filter(|&&m| world[m].0.is_none()).map(|&m| world[m].2)),
            },
            "true_pairs_file": "site-grid-true-pairs.csv",
            "check": check_json(&chk),
        }),
    );
    write_json(&out.join("site-grid-truth.json"), &truth)?;
    write_pairs(&out.join("site-grid-true-pairs.csv"), &mut pairs)?;

    drift_epochs::write_drift_epochs(&out, seed, &ref_ids, &ref_c, CENTRE)?;

    // ---- the raster scene (orthophoto 2019, drone mosaic 2026) --------------------------------
    scene::write_scene(&out, seed, scene::Size::Small)?;

    // ---- survey epochs of one district (tiemark epochs) ----------------------------------------
    epochs::write_epochs(&out, seed, &ref_ids, &ref_c)?;

    eprintln!("wrote {}", out.display());
    Ok(())
}
