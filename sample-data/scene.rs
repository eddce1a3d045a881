//! The FICTIONAL raster scene: an older orthophoto and a new drone mosaic of one made-up hamlet.
//!
//! **In:** a seed and a size ([`Size::Small`] for the committed sample data, [`Size::Large`]
//! for the benchmark). **Out:** in the output folder,
//!
//! | file | what |
//! |---|---|
//! | `scene-orthophoto-2019.tif` | the reference: 25 cm, RGB byte, north up, EPSG:32633, JPEG (YCbCr) tiled GeoTIFF with internal overviews, every pixel valid |
//! | `scene-drone-2026.tif` | the target: 10 cm (5 cm large), RGB byte, north up, EPSG:32633, same compression, plus an internal per-dataset mask (GDAL's mask band: 255 inside the flight's irregular footprint, 0 in the collar, where RGB is 0 but for JPEG ringing within a few pixels of the footprint's edge) |
//! | `scene-drone-2026-truth.json` | the similarity between them (target working -> reference, the terms of `transform.json`), the applied error, the landmarks used to check it, what changed |
//!
//! # The scene
//!
//! A hamlet east of the fictional town of Tessaloom (around E 458250, N 5210250 in UTM 33N;
//! invented, like the town): a curved main road with centre and edge lines, side streets and a
//! back lane, houses with gable roofs oriented along the streets, garages with flat roofs,
//! driveways, swimming pools in some back gardens, deciduous and coniferous trees, parked and
//! moving cars, and fields with crop rows where no house stands. Everything is a shape in map
//! coordinates (oriented rectangles, discs, capsules) with a height, so it casts a shadow.
//!
//! # Rendering
//!
//! Analytic: each pixel averages the scene over a regular grid of sub-samples inside the
//! pixel (3 x 3 in the orthophoto, 2 x 2 in the mosaic), so both resolutions agree on where
//! every edge is. A sub-sample takes the highest object over it (crown above roof above car),
//! shaded by the sun (gable facets and crowns by their normals), or else the ground (fields,
//! roads, paving, pools over grass) darkened where an object's shadow falls. Texture is value
//! noise of the map position, so it is the same ground in both images. Then a camera: gain,
//! white balance, gamma, and per-pixel sensor noise from a hash of (seed, image, column, row).
//!
//! The two surveys differ as real ones do: summer 2019 (sun azimuth 165 deg, elevation 58
//! deg) against autumn 2026 (azimuth 232 deg, elevation 34 deg: long shadows to the north-east;
//! brown-orange deciduous crowns, yellower grass, harvested or ploughed fields; another gain,
//! gamma and white balance); cars parked elsewhere; a new house; two felled trees; a
//! demolished garage. The mosaic's georeferencing is off by a known similarity (about 1.1 deg,
//! +350 ppm, a few metres): its geotransform is north up, and its pixels show the ground at
//! `T(geotransform(pixel))`, with `T` the truth file's expected transform.
//!
//! # Determinism
//!
//! The layout draws from `ChaCha8Rng` seeded with the generator's seed (its own stream);
//! pixels are pure functions of their position. The images are written strip by strip (256
//! rows), so the large mosaic (20,000 x 20,000 px) never sits in memory.
//!
//! Used by `generate.rs` (the `generate-sample-data` example) and included by
//! `tests/sample_scene.rs`; it uses only gdal, rand, rand_chacha, serde_json and std.

use std::error::Error;
use std::f64::consts::{PI, TAU};
use std::path::Path;

use gdal::raster::{Buffer, RasterCreationOptions};
use gdal::spatial_ref::SpatialRef;
use gdal::DriverManager;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde_json::{json, Value};

type Res<T> = Result<T, Box<dyn Error>>;
/// A 2-D point or vector (x = easting, y = northing), metres.
type P = (f64, f64);

/// The orthophoto's file name.
pub const ORTHO_FILE: &str = "scene-orthophoto-2019.tif";
/// The drone mosaic's file name.
pub const DRONE_FILE: &str = "scene-drone-2026.tif";
/// The truth file's name.
pub const TRUTH_FILE: &str = "scene-drone-2026-truth.json";
/// The CRS of both images.
pub const EPSG: u32 = 32633;
/// Centre of the scene (EPSG:32633). Layout coordinates are offsets from it.
pub const CENTRE: P = (458_250.0, 5_210_250.0);
/// Rows per strip written (one row of 256 x 256 tiles).
const STRIP: usize = 256;

/// Which scene to make.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Size {
    /// Committed sample data: a 2000 x 2000 px orthophoto (500 m), a 2600 x 2200 px mosaic
    /// at 10 cm.
    Small,
    /// Benchmark data (never committed): a 4000 x 4000 px orthophoto (1 km), a 20,000 x
    /// 20,000 px mosaic at 5 cm.
    Large,
}

/// The dimensions of one size.
struct Dims {
    /// Half the side of the laid-out square (m).
    half: f64,
    ortho_px: usize,
    drone_w: usize,
    drone_h: usize,
    drone_gsd: f64,
    /// Centre of the drone frame, offset from CENTRE (m, in the drone's working frame).
    drone_centre: P,
    /// Half sizes of the core of the drone footprint (m), where the checked landmarks and
    /// the changed objects are put.
    core: P,
}

impl Size {
    fn dims(self) -> Dims {
        match self {
            Size::Small => Dims {
                half: 290.0,
                ortho_px: 2000,
                drone_w: 2600,
                drone_h: 2200,
                drone_gsd: 0.1,
                drone_centre: (10.0, -5.0),
                core: (95.0, 75.0),
            },
            Size::Large => Dims {
                half: 540.0,
                ortho_px: 4000,
                drone_w: 20_000,
                drone_h: 20_000,
                drone_gsd: 0.05,
                drone_centre: (0.0, 0.0),
                core: (380.0, 380.0),
            },
        }
    }
    fn name(self) -> &'static str {
        match self {
            Size::Small => "small",
            Size::Large => "large",
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Geometry
// ---------------------------------------------------------------------------------------------

fn add(a: P, b: P) -> P {
    (a.0 + b.0, a.1 + b.1)
}
fn sub(a: P, b: P) -> P {
    (a.0 - b.0, a.1 - b.1)
}
fn mul(a: P, k: f64) -> P {
    (a.0 * k, a.1 * k)
}
fn dot(a: P, b: P) -> f64 {
    a.0 * b.0 + a.1 * b.1
}
fn perp(a: P) -> P {
    (-a.1, a.0)
}
fn unit(angle: f64) -> P {
    (angle.cos(), angle.sin())
}
fn norm(a: P) -> f64 {
    a.0.hypot(a.1)
}
fn rot(p: P, angle: f64) -> P {
    let (s, c) = angle.sin_cos();
    (c * p.0 - s * p.1, s * p.0 + c * p.1)
}

/// Distance from `p` to the segment ab, and the position along it (0 at a, |ab| at b).
fn seg_dist(p: P, a: P, b: P) -> (f64, f64) {
    let ab = sub(b, a);
    let len2 = dot(ab, ab);
    let t = if len2 > 0.0 {
        (dot(sub(p, a), ab) / len2).clamp(0.0, 1.0)
    } else {
        0.0
    };
    (norm(sub(p, add(a, mul(ab, t)))), t * len2.sqrt())
}

/// Oriented rectangle: centre, unit axis u (the long axis), half sizes along u and perp(u).
#[derive(Clone, Copy, Debug)]
struct Rect {
    c: P,
    u: P,
    hu: f64,
    hv: f64,
}

impl Rect {
    fn new(c: P, angle: f64, len: f64, wid: f64) -> Rect {
        Rect {
            c,
            u: unit(angle),
            hu: len / 2.0,
            hv: wid / 2.0,
        }
    }
    fn v(&self) -> P {
        perp(self.u)
    }
    fn local(&self, p: P) -> P {
        let d = sub(p, self.c);
        (dot(d, self.u), dot(d, self.v()))
    }
    fn contains(&self, p: P) -> bool {
        let (a, b) = self.local(p);
        a.abs() <= self.hu && b.abs() <= self.hv
    }
    fn inflate(&self, m: f64) -> Rect {
        Rect {
            hu: self.hu + m,
            hv: self.hv + m,
            ..*self
        }
    }
    fn bbox(&self) -> (P, P) {
        let v = self.v();
        let ex = self.hu * self.u.0.abs() + self.hv * v.0.abs();
        let ey = self.hu * self.u.1.abs() + self.hv * v.1.abs();
        (
            (self.c.0 - ex, self.c.1 - ey),
            (self.c.0 + ex, self.c.1 + ey),
        )
    }
    /// Separating-axis test against `o` grown by `m`.
    fn overlaps(&self, o: &Rect, m: f64) -> bool {
        let o = o.inflate(m);
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
    /// Does the segment ab touch the rectangle grown by `m` (Liang-Barsky clipping)?
    fn hit_by_segment(&self, a: P, b: P, m: f64) -> bool {
        let (la, lb) = (self.local(a), self.local(b));
        let d = sub(lb, la);
        let (mut t0, mut t1) = (0.0_f64, 1.0_f64);
        for (p, dp, h) in [(la.0, d.0, self.hu + m), (la.1, d.1, self.hv + m)] {
            if dp.abs() < 1e-12 {
                if p.abs() > h {
                    return false;
                }
            } else {
                let (mut ta, mut tb) = ((-h - p) / dp, (h - p) / dp);
                if ta > tb {
                    std::mem::swap(&mut ta, &mut tb);
                }
                t0 = t0.max(ta);
                t1 = t1.min(tb);
                if t0 > t1 {
                    return false;
                }
            }
        }
        true
    }
}

// ---------------------------------------------------------------------------------------------
// Noise (pure functions of position)
// ---------------------------------------------------------------------------------------------

fn mix(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

fn unit_hash(a: u64, b: u64, salt: u64) -> f64 {
    let h = mix(a ^ mix(b ^ mix(salt)));
    (h >> 11) as f64 / (1u64 << 53) as f64
}

/// Value noise in [0, 1] at `p / scale`: smooth interpolation of hashed lattice values.
fn vnoise(p: P, scale: f64, salt: u64) -> f64 {
    let (x, y) = (p.0 / scale, p.1 / scale);
    let (fx, fy) = (x.floor(), y.floor());
    let (ix, iy) = (fx as i64 as u64, fy as i64 as u64);
    let (tx, ty) = (x - fx, y - fy);
    let (sx, sy) = (tx * tx * (3.0 - 2.0 * tx), ty * ty * (3.0 - 2.0 * ty));
    let l = |i: u64, j: u64| unit_hash(ix.wrapping_add(i), iy.wrapping_add(j), salt);
    let top = l(0, 0) + (l(1, 0) - l(0, 0)) * sx;
    let bottom = l(0, 1) + (l(1, 1) - l(0, 1)) * sx;
    top + (bottom - top) * sy
}

// ---------------------------------------------------------------------------------------------
// The scene
// ---------------------------------------------------------------------------------------------

const Y2019: u8 = 1;
const Y2026: u8 = 2;
const BOTH: u8 = 3;

type Rgb = [f64; 3];

#[derive(Clone, Copy, Debug)]
enum Shape {
    Rect(Rect),
    /// Segment a-b with a half width.
    Capsule(P, P, f64),
    /// Centre, radius.
    Disc(P, f64),
}

impl Shape {
    fn contains(&self, p: P) -> bool {
        match *self {
            Shape::Rect(r) => r.contains(p),
            Shape::Capsule(a, b, hw) => seg_dist(p, a, b).0 <= hw,
            Shape::Disc(c, r) => norm(sub(p, c)) <= r,
        }
    }
    fn bbox(&self) -> (P, P) {
        match *self {
            Shape::Rect(r) => r.bbox(),
            Shape::Capsule(a, b, hw) => (
                (a.0.min(b.0) - hw, a.1.min(b.1) - hw),
                (a.0.max(b.0) + hw, a.1.max(b.1) + hw),
            ),
            Shape::Disc(c, r) => ((c.0 - r, c.1 - r), (c.0 + r, c.1 + r)),
        }
    }
}

#[derive(Clone, Copy, Debug)]
enum Kind {
    /// A field: crop colour in 2019 and 2026, direction and period of its rows.
    Field {
        crop: [Rgb; 2],
        rows: P,
        period: f64,
    },
    /// Asphalt; `marked`: centre and edge lines.
    Road {
        marked: bool,
    },
    Paving,
    Coping,
    Water,
    Roof {
        gable: bool,
        colour: Rgb,
    },
    Car {
        colour: Rgb,
    },
    Crown {
        deciduous: bool,
        tint: f64,
        salt: u64,
    },
}

#[derive(Clone, Copy, Debug)]
struct Item {
    shape: Shape,
    kind: Kind,
    /// Y2019, Y2026 or BOTH.
    years: u8,
    /// Height of the top (m), 0 for the ground.
    height: f64,
}

impl Item {
    /// 0 ground, 1 car, 2 roof, 3 crown.
    fn z(&self) -> u8 {
        match self.kind {
            Kind::Car { .. } => 1,
            Kind::Roof { .. } => 2,
            Kind::Crown { .. } => 3,
            _ => 0,
        }
    }
    /// Is ground point `p` in this item's shadow, `d` being the shadow offset of 1 m height?
    fn shadows(&self, p: P, d: P) -> bool {
        let s = mul(d, self.height);
        match self.shape {
            Shape::Rect(r) => r.hit_by_segment(p, sub(p, s), 0.0),
            Shape::Disc(c, r) => {
                // Crown from 40% of the height up; a trunk below it.
                let base = add(c, mul(s, 0.4));
                seg_dist(p, base, add(c, s)).0 <= r || seg_dist(p, c, base).0 <= 0.15
            }
            Shape::Capsule(..) => false,
        }
    }
    fn shadow_bbox(&self, d: P) -> (P, P) {
        let (lo, hi) = self.shape.bbox();
        let s = mul(d, self.height);
        (
            (lo.0.min(lo.0 + s.0), lo.1.min(lo.1 + s.1)),
            (hi.0.max(hi.0 + s.0), hi.1.max(hi.1 + s.1)),
        )
    }
}

/// A house or garage as laid out (kept for placement checks and the truth file).
#[derive(Clone, Copy, Debug)]
struct Building {
    rect: Rect,
    /// Unit vector from the building towards its street.
    front: P,
    garage: bool,
}

/// Everything in the scene, plus what the truth file reports.
struct Scene {
    items: Vec<Item>,
    pools: Vec<Rect>,
    new_house: Rect,
    felled: Vec<(P, f64)>,
    demolished: Rect,
    cars: [usize; 3],
    houses: usize,
    trees: usize,
}

/// Palettes (linear reflectance).
const GRASS: [Rgb; 2] = [[0.20, 0.34, 0.11], [0.40, 0.37, 0.19]];
const DECIDUOUS: [Rgb; 2] = [[0.11, 0.24, 0.07], [0.50, 0.28, 0.08]];
const CONIFER: Rgb = [0.07, 0.15, 0.07];
const ASPHALT: Rgb = [0.17, 0.17, 0.18];
const PAINT: Rgb = [0.78, 0.78, 0.74];
const PAVING: Rgb = [0.42, 0.39, 0.35];
const COPING: Rgb = [0.72, 0.71, 0.67];
const WATER: Rgb = [0.12, 0.50, 0.70];
const ROOFS: [Rgb; 5] = [
    [0.45, 0.17, 0.10],
    [0.55, 0.25, 0.14],
    [0.22, 0.22, 0.24],
    [0.36, 0.26, 0.20],
    [0.30, 0.32, 0.33],
];
const FLAT_ROOF: Rgb = [0.40, 0.40, 0.39];
/// Car colours: never blue or cyan (the pools are found by their colour).
const CARS: [Rgb; 7] = [
    [0.80, 0.80, 0.80],
    [0.55, 0.56, 0.57],
    [0.05, 0.05, 0.05],
    [0.55, 0.06, 0.05],
    [0.10, 0.25, 0.12],
    [0.60, 0.52, 0.38],
    [0.30, 0.30, 0.32],
];
/// Crops: (2019 summer, 2026 autumn).
const CROPS: [[Rgb; 2]; 4] = [
    [[0.24, 0.36, 0.10], [0.55, 0.48, 0.28]],
    [[0.16, 0.30, 0.09], [0.36, 0.27, 0.16]],
    [[0.30, 0.38, 0.16], [0.26, 0.19, 0.12]],
    [[0.48, 0.42, 0.20], [0.30, 0.34, 0.14]],
];

struct Road {
    pts: Vec<P>,
    hw: f64,
    marked: bool,
}

impl Road {
    fn segments(&self) -> impl Iterator<Item = (P, P)> + '_ {
        self.pts.windows(2).map(|w| (w[0], w[1]))
    }
}

fn polyline(from: P, dir: f64, len0: f64, len1: f64, step: f64, wave: (f64, f64, f64)) -> Vec<P> {
    let n = ((len1 - len0) / step).ceil() as usize;
    (0..=n)
        .map(|k| {
            let s = len0 + (len1 - len0) * k as f64 / n as f64;
            let off = wave.0 * (s / wave.1 + wave.2).sin();
            add(from, rot((s, off), dir))
        })
        .collect()
}

fn lay_out(size: Size, rng: &mut ChaCha8Rng) -> Scene {
    let dm = size.dims();
    let half = dm.half;
    let alpha = 14f64.to_radians();
    // ---- roads ----
    let mut roads = vec![Road {
        pts: polyline(
            (0.0, 0.0),
            alpha,
            -half - 60.0,
            half + 60.0,
            15.0,
            (14.0, 170.0, rng.gen_range(0.0..TAU)),
        ),
        hw: 3.5,
        marked: true,
    }];
    let mut s = -half + rng.gen_range(30.0..70.0);
    while s < half - 40.0 {
        // Base point on the main road: the nearest polyline vertex.
        let base = roads[0]
            .pts
            .iter()
            .copied()
            .min_by(|a, b| {
                let ta = rot(*a, -alpha).0;
                let tb = rot(*b, -alpha).0;
                (ta - s).abs().total_cmp(&(tb - s).abs())
            })
            .unwrap();
        let dir = alpha + PI / 2.0 + rng.gen_range(-10f64..10.0).to_radians();
        let south = if rng.gen_bool(0.8) {
            rng.gen_range(100.0..half * 0.95)
        } else {
            0.0
        };
        let north = if south == 0.0 || rng.gen_bool(0.8) {
            rng.gen_range(100.0..half * 0.95)
        } else {
            0.0
        };
        roads.push(Road {
            pts: polyline(
                base,
                dir,
                -south,
                north,
                10.0,
                (4.0, 60.0, rng.gen_range(0.0..TAU)),
            ),
            hw: 2.75,
            marked: false,
        });
        s += rng.gen_range(110.0..170.0);
    }
    // Back lanes, parallel to the main road on either side, gently curved.
    for side in [1.0, -1.0] {
        let off = side * rng.gen_range(95.0..125.0);
        let from = rot((0.0, off), alpha);
        roads.push(Road {
            pts: polyline(
                from,
                alpha + side * 0.05,
                -half * rng.gen_range(0.5..0.8),
                half * rng.gen_range(0.5..0.8),
                10.0,
                (8.0, 90.0, rng.gen_range(0.0..TAU)),
            ),
            hw: 2.25,
            marked: false,
        });
    }
    let segs: Vec<(P, P, f64)> = roads
        .iter()
        .flat_map(|r| r.segments().map(move |(a, b)| (a, b, r.hw)))
        .collect();
    let clear_of_roads = |r: &Rect, m: f64| {
        segs.iter()
            .all(|&(a, b, hw)| !r.hit_by_segment(a, b, hw + m))
    };
    let inside = |p: P, m: f64| p.0.abs() < half - m && p.1.abs() < half - m;

    // ---- houses, garages, driveways ----
    let mut buildings: Vec<Building> = Vec::new();
    let mut drives: Vec<Rect> = Vec::new();
    let mut roof_colour: Vec<Rgb> = Vec::new();
    for road in &roads {
        // Houses in a row along each side, by arc length along the road's axis.
        let mut cum = vec![0.0];
        for (a, b) in road.segments() {
            cum.push(cum[cum.len() - 1] + norm(sub(b, a)));
        }
        let total = cum[cum.len() - 1];
        let at = |s: f64| -> (P, P) {
            let k = cum
                .partition_point(|&c| c <= s)
                .clamp(1, road.pts.len() - 1)
                - 1;
            let (a, b) = (road.pts[k], road.pts[k + 1]);
            let t = mul(sub(b, a), 1.0 / norm(sub(b, a)));
            (add(a, mul(t, s - cum[k])), t)
        };
        for side in [1.0, -1.0] {
            let mut pos = rng.gen_range(0.0..6.0);
            loop {
                let w = rng.gen_range(9.0..14.0);
                let d = rng.gen_range(8.0..11.0);
                if pos + w > total {
                    break;
                }
                let (axis, t) = at(pos + w / 2.0);
                let n = mul(perp(t), side);
                let angle = t.1.atan2(t.0);
                let setback = rng.gen_range(5.0..9.0);
                let c = add(axis, mul(n, road.hw + setback + d / 2.0));
                let house = Rect::new(c, angle, w, d);
                pos += w + rng.gen_range(3.0..9.0);
                if !rng.gen_bool(0.85) || !inside(c, 15.0) {
                    continue;
                }
                if !clear_of_roads(&house, 2.0)
                    || buildings.iter().any(|o| o.rect.overlaps(&house, 3.0))
                {
                    continue;
                }
                buildings.push(Building {
                    rect: house,
                    front: mul(n, -1.0),
                    garage: false,
                });
                roof_colour.push(ROOFS[rng.gen_range(0..ROOFS.len())]);
                // A garage beside it, with a driveway from the street to its door.
                if rng.gen_bool(0.6) {
                    let gs = if rng.gen_bool(0.5) { 1.0 } else { -1.0 };
                    let beside = mul(t, gs * (w / 2.0 + 3.3));
                    let gc = add(add(c, beside), mul(n, d / 2.0 - 3.2));
                    let garage = Rect::new(gc, angle + PI / 2.0, 6.0, 3.6);
                    if clear_of_roads(&garage, 2.0)
                        && buildings.iter().all(|o| !o.rect.overlaps(&garage, 0.8))
                    {
                        let door = add(gc, mul(n, -3.0));
                        let edge = add(add(axis, beside), mul(n, road.hw));
                        let dlen = norm(sub(door, edge));
                        if dlen > 0.5 {
                            let mid = mul(add(door, edge), 0.5);
                            drives.push(Rect::new(mid, angle + PI / 2.0, dlen, 3.0));
                        }
                        buildings.push(Building {
                            rect: garage,
                            front: mul(n, -1.0),
                            garage: true,
                        });
                        roof_colour.push(FLAT_ROOF);
                    }
                }
            }
        }
    }
    let core = |p: P| {
        let q = sub(p, dm.drone_centre);
        q.0.abs() < dm.core.0 && q.1.abs() < dm.core.1
    };

    // ---- fields where nothing stands ----
    let mut fields: Vec<(Rect, Kind)> = Vec::new();
    let (fl, fw) = (110.0, 65.0);
    let reach = (half * 1.5 / fw).ceil() as i64;
    for i in -reach..=reach {
        for j in -reach..=reach {
            let c = rot((i as f64 * (fl + 4.0), j as f64 * (fw + 4.0)), alpha);
            let f = Rect::new(c, alpha, fl, fw);
            let (lo, hi) = f.bbox();
            if lo.0 < -half || lo.1 < -half || hi.0 > half || hi.1 > half {
                continue;
            }
            if !clear_of_roads(&f, 5.0) || buildings.iter().any(|b| b.rect.overlaps(&f, 6.0)) {
                continue;
            }
            let crop = CROPS[rng.gen_range(0..CROPS.len())];
            let rows = if rng.gen_bool(0.5) { f.u } else { f.v() };
            fields.push((
                f,
                Kind::Field {
                    crop,
                    rows,
                    period: rng.gen_range(0.7..2.5),
                },
            ));
        }
    }

    // Shadow offsets per metre of height for both suns.
    let suns = [SUN_2019, SUN_2026].map(|s| shadow_offset(s.0, s.1));
    let shaded_by = |r: &Rect, h: f64, probe: &Rect| {
        // Probe points over `probe`: is any in r's shadow (either sun)?
        let it = Item {
            shape: Shape::Rect(*r),
            kind: Kind::Paving,
            years: BOTH,
            height: h,
        };
        probe_points(probe)
            .iter()
            .any(|&p| suns.iter().any(|&d| it.shadows(p, d)))
    };

    // ---- pools in back gardens of houses inside the mosaic's core ----
    let mut pools: Vec<Rect> = Vec::new();
    let want_pools = match size {
        Size::Small => 4,
        Size::Large => 40,
    };
    let mut order: Vec<usize> = (0..buildings.len()).collect();
    for k in (1..order.len()).rev() {
        order.swap(k, rng.gen_range(0..=k));
    }
    for &k in &order {
        if pools.len() >= want_pools {
            break;
        }
        let b = buildings[k];
        if b.garage {
            continue;
        }
        let back = mul(b.front, -1.0);
        let c = add(b.rect.c, mul(back, b.rect.hv + 9.0));
        let pool = Rect::new(c, b.rect.u.1.atan2(b.rect.u.0), 8.0, 4.0);
        if !core(c)
            || !clear_of_roads(&pool, 4.0)
            || buildings.iter().any(|o| o.rect.overlaps(&pool, 3.0))
            || drives.iter().any(|o| o.overlaps(&pool, 4.0))
            || pools.iter().any(|o| o.overlaps(&pool, 30.0))
            || fields.iter().any(|f| f.0.overlaps(&pool, 2.0))
            || buildings
                .iter()
                .any(|o| shaded_by(&o.rect, HOUSE_HEIGHT, &pool.inflate(1.0)))
        {
            continue;
        }
        pools.push(pool);
    }

    // ---- the new house (2026) ----
    let mut new_house = None;
    for _ in 0..5000 {
        let c = add(
            dm.drone_centre,
            (
                rng.gen_range(-dm.core.0..dm.core.0) * 0.8,
                rng.gen_range(-dm.core.1..dm.core.1) * 0.8,
            ),
        );
        let ang = alpha + if rng.gen_bool(0.5) { 0.0 } else { PI / 2.0 };
        let h = Rect::new(c, ang, 13.0, 9.0);
        if clear_of_roads(&h, 5.0)
            && buildings.iter().all(|o| !o.rect.overlaps(&h, 5.0))
            && drives.iter().all(|o| !o.overlaps(&h, 3.0))
            && fields.iter().all(|f| !f.0.overlaps(&h, 3.0))
            && pools
                .iter()
                .all(|p| !shaded_by(&h, HOUSE_HEIGHT, &p.inflate(1.0)))
            && pools.iter().all(|p| !p.overlaps(&h, 6.0))
        {
            new_house = Some(h);
            break;
        }
    }
    let new_house = new_house.expect("room for the new house in the mosaic's core");

    // ---- trees ----
    let mut trees: Vec<(P, f64, f64, bool)> = Vec::new();
    let tree_ok = |c: P, r: f64, h: f64, trees: &[(P, f64, f64, bool)]| {
        let crown = Rect::new(c, 0.0, 2.0 * r, 2.0 * r);
        inside(c, 5.0)
            && segs
                .iter()
                .all(|&(a, b, hw)| seg_dist(c, a, b).0 > hw + 0.5 * r)
            && buildings
                .iter()
                .all(|o| !o.rect.inflate(r + 0.5).contains(c))
            && !new_house.inflate(r + 1.0).contains(c)
            && fields.iter().all(|f| !f.0.inflate(r * 0.5).contains(c))
            && trees.iter().all(|t| norm(sub(t.0, c)) > 0.8 * (t.1 + r))
            && pools.iter().all(|p| {
                !p.overlaps(&crown, 2.0) && {
                    let it = Item {
                        shape: Shape::Disc(c, r),
                        kind: Kind::Paving,
                        years: BOTH,
                        height: h,
                    };
                    probe_points(&p.inflate(1.0))
                        .iter()
                        .all(|&q| suns.iter().all(|&d| !it.shadows(q, d)))
                }
            })
    };
    // Street trees along the main road.
    for (a, b) in roads[0].segments() {
        let t = mul(sub(b, a), 1.0 / norm(sub(b, a)));
        for side in [1.0, -1.0] {
            let c = add(add(a, mul(t, 7.5)), mul(perp(t), side * (3.5 + 3.5)));
            let (r, h) = (rng.gen_range(2.6..3.4), rng.gen_range(8.0..10.0));
            if rng.gen_bool(0.7) && tree_ok(c, r, h, &trees) {
                trees.push((c, r, h, true));
            }
        }
    }
    // Garden trees behind and beside the houses, then a few scattered ones.
    let mut cands: Vec<P> = Vec::new();
    for b in buildings.iter().filter(|b| !b.garage) {
        for _ in 0..3 {
            let back = mul(b.front, -rng.gen_range(b.rect.hv + 4.0..b.rect.hv + 16.0));
            cands.push(add(
                add(b.rect.c, back),
                mul(b.rect.u, rng.gen_range(-12.0..12.0)),
            ));
        }
    }
    let n_cand = (4.0 * half * half / 1500.0) as usize;
    for _ in 0..n_cand {
        cands.push((rng.gen_range(-half..half), rng.gen_range(-half..half)));
    }
    for c in cands {
        let deciduous = rng.gen_bool(0.75);
        let (r, h) = if deciduous {
            (rng.gen_range(2.5..5.5), rng.gen_range(7.0..14.0))
        } else {
            (rng.gen_range(1.5..2.8), rng.gen_range(8.0..16.0))
        };
        if tree_ok(c, r, h, &trees) {
            trees.push((c, r, h, deciduous));
        }
    }

    // ---- what changed ----
    let mut felled = Vec::new();
    let mut tree_years = vec![BOTH; trees.len()];
    for (k, t) in trees.iter().enumerate() {
        if felled.len() < 2 && t.3 && t.1 > 3.5 && core(t.0) {
            tree_years[k] = Y2019;
            felled.push((t.0, t.1));
        }
    }
    assert_eq!(felled.len(), 2, "two big deciduous trees in the core");
    let mut years_of_building = vec![BOTH; buildings.len()];
    let demolished_k = (0..buildings.len())
        .find(|&k| buildings[k].garage && core(buildings[k].rect.c))
        .expect("a garage in the mosaic's core");
    years_of_building[demolished_k] = Y2019;

    // ---- cars ----
    let mut cars: Vec<(Rect, u8, Rgb)> = Vec::new();
    let car_years = |rng: &mut ChaCha8Rng, p_both: f64, p_one: f64| -> u8 {
        let x = rng.gen::<f64>();
        if x < p_both {
            BOTH
        } else if x < p_both + p_one {
            Y2019
        } else if x < p_both + 2.0 * p_one {
            Y2026
        } else {
            0
        }
    };
    for (ri, road) in roads.iter().enumerate() {
        for (a, b) in road.segments() {
            let len = norm(sub(b, a));
            let t = mul(sub(b, a), 1.0 / len);
            let angle = t.1.atan2(t.0);
            for side in [1.0, -1.0] {
                let mut pos = 3.0;
                while pos + 3.0 < len {
                    let (off, yrs) = if ri == 0 {
                        // Moving traffic in its lane: never at the same place twice.
                        (1.75, car_years(rng, 0.0, 0.03))
                    } else {
                        (road.hw - 1.1, car_years(rng, 0.04, 0.09))
                    };
                    let c = add(add(a, mul(t, pos)), mul(perp(t), side * off));
                    pos += 6.5;
                    if yrs == 0 {
                        continue;
                    }
                    let heading = if side > 0.0 { angle } else { angle + PI };
                    let car = Rect::new(c, heading, 4.4, 1.8);
                    if buildings.iter().any(|o| o.rect.overlaps(&car, 0.3)) {
                        continue;
                    }
                    cars.push((car, yrs, CARS[rng.gen_range(0..CARS.len())]));
                }
            }
        }
    }
    for d in &drives {
        let yrs = car_years(rng, 0.3, 0.2);
        if yrs != 0 && d.hu > 2.6 {
            let heading = d.u.1.atan2(d.u.0) + if rng.gen_bool(0.5) { 0.0 } else { PI };
            let car = Rect::new(d.c, heading, 4.4, 1.8);
            cars.push((car, yrs, CARS[rng.gen_range(0..CARS.len())]));
        }
    }

    // ---- items in drawing order ----
    let mut items = Vec::new();
    for (f, kind) in &fields {
        items.push(Item {
            shape: Shape::Rect(*f),
            kind: *kind,
            years: BOTH,
            height: 0.0,
        });
    }
    for road in &roads {
        for (a, b) in road.segments() {
            items.push(Item {
                shape: Shape::Capsule(a, b, road.hw),
                kind: Kind::Road {
                    marked: road.marked,
                },
                years: BOTH,
                height: 0.0,
            });
        }
    }
    for d in &drives {
        items.push(Item {
            shape: Shape::Rect(*d),
            kind: Kind::Paving,
            years: BOTH,
            height: 0.0,
        });
    }
    for p in &pools {
        for (r, kind) in [(p.inflate(0.5), Kind::Coping), (*p, Kind::Water)] {
            items.push(Item {
                shape: Shape::Rect(r),
                kind,
                years: BOTH,
                height: 0.0,
            });
        }
    }
    for (k, b) in buildings.iter().enumerate() {
        items.push(Item {
            shape: Shape::Rect(b.rect),
            kind: Kind::Roof {
                gable: !b.garage,
                colour: roof_colour[k],
            },
            years: years_of_building[k],
            height: if b.garage { 2.8 } else { HOUSE_HEIGHT },
        });
    }
    items.push(Item {
        shape: Shape::Rect(new_house),
        kind: Kind::Roof {
            gable: true,
            colour: ROOFS[0],
        },
        years: Y2026,
        height: HOUSE_HEIGHT,
    });
    for &(r, years, colour) in &cars {
        items.push(Item {
            shape: Shape::Rect(r),
            kind: Kind::Car { colour },
            years,
            height: 1.5,
        });
    }
    for (k, &(c, r, h, deciduous)) in trees.iter().enumerate() {
        items.push(Item {
            shape: Shape::Disc(c, r),
            kind: Kind::Crown {
                deciduous,
                tint: rng.gen_range(0.8..1.2),
                salt: rng.gen(),
            },
            years: tree_years[k],
            height: h,
        });
    }
    let count = |y: u8| cars.iter().filter(|c| c.1 == y).count();
    Scene {
        items,
        pools,
        new_house,
        felled,
        demolished: buildings[demolished_k].rect,
        cars: [count(BOTH), count(Y2019), count(Y2026)],
        houses: buildings.iter().filter(|b| !b.garage).count(),
        trees: trees.len(),
    }
}

/// Height used for the shadow of a house (between eaves and ridge), m.
const HOUSE_HEIGHT: f64 = 7.0;
/// Sun (azimuth clockwise from north, elevation), degrees.
const SUN_2019: (f64, f64) = (165.0, 58.0);
const SUN_2026: (f64, f64) = (232.0, 34.0);

/// The shadow of a point 1 m up, as a ground offset (away from the sun).
fn shadow_offset(az: f64, el: f64) -> P {
    let (a, e) = (az.to_radians(), el.to_radians());
    let k = 1.0 / e.tan();
    (-a.sin() * k, -a.cos() * k)
}

/// 5 x 5 points over a rectangle (corners and edges included).
fn probe_points(r: &Rect) -> Vec<P> {
    let mut out = Vec::with_capacity(25);
    for i in 0..5 {
        for j in 0..5 {
            let a = r.hu * (i as f64 / 2.0 - 1.0);
            let b = r.hv * (j as f64 / 2.0 - 1.0);
            out.push(add(r.c, add(mul(r.u, a), mul(r.v(), b))));
        }
    }
    out
}

// ---------------------------------------------------------------------------------------------
// One survey's view: lighting, camera, spatial index
// ---------------------------------------------------------------------------------------------

struct Camera {
    gain: f64,
    white: Rgb,
    gamma: f64,
    noise_dn: f64,
}

const CAMERA_2019: Camera = Camera {
    gain: 1.05,
    white: [1.0, 1.0, 1.0],
    gamma: 2.2,
    noise_dn: 1.5,
};
const CAMERA_2026: Camera = Camera {
    gain: 1.3,
    white: [1.06, 1.0, 0.9],
    gamma: 1.9,
    noise_dn: 2.5,
};
const AMBIENT: f64 = 0.3;
const DIRECT: f64 = 0.75;

struct Survey<'a> {
    items: &'a [Item],
    /// 0: 2019, 1: 2026.
    season: usize,
    sun: [f64; 3],
    shadow: P,
    camera: &'a Camera,
    salt: u64,
    // Spatial index.
    lo: P,
    cell: f64,
    nx: usize,
    ny: usize,
    ground: Vec<Vec<u32>>,
    raised: Vec<Vec<u32>>,
    casters: Vec<Vec<u32>>,
}

impl<'a> Survey<'a> {
    fn new(scene: &'a Scene, half: f64, year: u8, seed: u64) -> Survey<'a> {
        let (season, (az, el), camera) = if year == Y2019 {
            (0, SUN_2019, &CAMERA_2019)
        } else {
            (1, SUN_2026, &CAMERA_2026)
        };
        let (a, e) = (f64::to_radians(az), f64::to_radians(el));
        let cell = 8.0;
        let lo = (-half - 80.0, -half - 80.0);
        let n = ((2.0 * half + 160.0) / cell).ceil() as usize;
        let mut s = Survey {
            items: &scene.items,
            season,
            sun: [a.sin() * e.cos(), a.cos() * e.cos(), e.sin()],
            shadow: shadow_offset(az, el),
            camera,
            salt: mix(seed ^ u64::from(year)),
            lo,
            cell,
            nx: n,
            ny: n,
            ground: vec![Vec::new(); n * n],
            raised: vec![Vec::new(); n * n],
            casters: vec![Vec::new(); n * n],
        };
        for (id, it) in scene.items.iter().enumerate() {
            if it.years & year == 0 {
                continue;
            }
            let id = id as u32;
            let (blo, bhi) = it.shape.bbox();
            let list = if it.z() == 0 { 0 } else { 1 };
            s.insert(list, id, blo, bhi);
            if it.height > 0.0 {
                let (slo, shi) = it.shadow_bbox(s.shadow);
                s.insert(2, id, slo, shi);
            }
        }
        s
    }

    fn cells(&self, lo: P, hi: P) -> impl Iterator<Item = usize> + '_ {
        let f =
            |v: f64, o: f64, n: usize| (((v - o) / self.cell).floor().max(0.0) as usize).min(n - 1);
        let (x0, x1) = (f(lo.0, self.lo.0, self.nx), f(hi.0, self.lo.0, self.nx));
        let (y0, y1) = (f(lo.1, self.lo.1, self.ny), f(hi.1, self.lo.1, self.ny));
        (y0..=y1).flat_map(move |y| (x0..=x1).map(move |x| y * self.nx + x))
    }

    fn insert(&mut self, list: usize, id: u32, lo: P, hi: P) {
        let cells: Vec<usize> = self.cells(lo, hi).collect();
        for c in cells {
            match list {
                0 => self.ground[c].push(id),
                1 => self.raised[c].push(id),
                _ => self.casters[c].push(id),
            }
        }
    }

    /// Linear radiance of the scene at layout position p.
    fn radiance(&self, p: P) -> Rgb {
        let cx = ((p.0 - self.lo.0) / self.cell).floor();
        let cy = ((p.1 - self.lo.1) / self.cell).floor();
        if cx < 0.0 || cy < 0.0 || cx >= self.nx as f64 || cy >= self.ny as f64 {
            return scale(self.grass(p), AMBIENT + DIRECT * self.sun[2]);
        }
        let cell = cy as usize * self.nx + cx as usize;
        let mut top: Option<&Item> = None;
        for &id in &self.raised[cell] {
            let it = &self.items[id as usize];
            if it.shape.contains(p) && top.is_none_or(|t| it.z() > t.z()) {
                top = Some(it);
            }
        }
        if let Some(it) = top {
            return self.raised_radiance(it, p);
        }
        let mut albedo = self.grass(p);
        for &id in &self.ground[cell] {
            let it = &self.items[id as usize];
            if it.shape.contains(p) {
                albedo = self.ground_albedo(it, p);
            }
        }
        let lit = !self.casters[cell]
            .iter()
            .any(|&id| self.items[id as usize].shadows(p, self.shadow));
        let shade = if lit {
            AMBIENT + DIRECT * self.sun[2]
        } else {
            AMBIENT
        };
        scale(albedo, shade)
    }

    fn grass(&self, p: P) -> Rgb {
        let g = GRASS[self.season];
        let m = 1.0
            + 0.3 * (vnoise(p, 30.0, 11) - 0.5)
            + 0.16 * (vnoise(p, 4.0, 12) - 0.5)
            + 0.2 * (vnoise(p, 0.5, 13) - 0.5);
        let y = 0.12 * (vnoise(p, 45.0, 14) - 0.5);
        [g[0] * (m + y), g[1] * m, g[2] * (m - y)]
    }

    fn ground_albedo(&self, it: &Item, p: P) -> Rgb {
        match it.kind {
            Kind::Field { crop, rows, period } => {
                let c = crop[self.season];
                let stripe = (dot(p, rows) * TAU / period).sin();
                let m = 1.0
                    + 0.14 * stripe
                    + 0.2 * (vnoise(p, 12.0, 21) - 0.5)
                    + 0.12 * (vnoise(p, 0.6, 22) - 0.5);
                scale(c, m)
            }
            Kind::Road { marked } => {
                let m = 1.0 + 0.12 * (vnoise(p, 0.35, 31) - 0.5) + 0.1 * (vnoise(p, 6.0, 32) - 0.5);
                if marked {
                    if let Shape::Capsule(a, b, hw) = it.shape {
                        let ab = sub(b, a);
                        let t = mul(ab, 1.0 / norm(ab));
                        let along = dot(sub(p, a), t) + norm(a);
                        let across = dot(sub(p, a), perp(t));
                        let centre = across.abs() < 0.07 && along.rem_euclid(9.0) < 3.0;
                        let edge = (hw - 0.4..hw - 0.25).contains(&across.abs());
                        if centre || edge {
                            return scale(PAINT, 0.95 + 0.1 * vnoise(p, 0.3, 33));
                        }
                    }
                }
                scale(ASPHALT, m)
            }
            Kind::Paving => {
                let m = 1.0 + 0.15 * (vnoise(p, 0.25, 41) - 0.5);
                scale(PAVING, m)
            }
            Kind::Coping => COPING,
            Kind::Water => scale(WATER, 1.0 + 0.06 * (vnoise(p, 0.8, 51) - 0.5)),
            _ => self.grass(p),
        }
    }

    fn raised_radiance(&self, it: &Item, p: P) -> Rgb {
        let s = self.sun;
        let flat = AMBIENT + DIRECT * s[2];
        match (it.kind, it.shape) {
            (Kind::Roof { gable, colour }, Shape::Rect(r)) => {
                let (a, b) = r.local(p);
                if gable {
                    let pitch = 35f64.to_radians();
                    let side = if b >= 0.0 { 1.0 } else { -1.0 };
                    let v = r.v();
                    let n = [
                        v.0 * side * pitch.sin(),
                        v.1 * side * pitch.sin(),
                        pitch.cos(),
                    ];
                    let lambert = (n[0] * s[0] + n[1] * s[1] + n[2] * s[2]).max(0.0);
                    let mut m = 1.0 + 0.08 * (vnoise(p, 1.5, 61) - 0.5);
                    if (r.hv - b.abs()).rem_euclid(0.35) < 0.07 {
                        m *= 0.9; // rows of tiles
                    }
                    if b.abs() < 0.15 {
                        m *= 0.8; // ridge
                    }
                    scale(colour, (AMBIENT + DIRECT * lambert) * m)
                } else {
                    let mut m = 1.0 + 0.16 * (vnoise(p, 0.6, 62) - 0.5);
                    if r.hu - a.abs() < 0.3 || r.hv - b.abs() < 0.3 {
                        m *= 1.25; // parapet
                    }
                    scale(colour, flat * m)
                }
            }
            (Kind::Car { colour }, Shape::Rect(r)) => {
                let (a, b) = r.local(p);
                let glass = (a > 0.18 * r.hu && a < 0.55 * r.hu
                    || a < -0.55 * r.hu && a > -0.8 * r.hu)
                    && b.abs() < 0.85 * r.hv;
                if glass {
                    scale([0.04, 0.05, 0.06], flat)
                } else {
                    scale(colour, flat)
                }
            }
            (
                Kind::Crown {
                    deciduous,
                    tint,
                    salt,
                },
                Shape::Disc(c, r),
            ) => {
                let d = sub(p, c);
                let q = (norm(d) / r).min(1.0);
                let nz = (1.0 - q * q).sqrt();
                let lambert = ((d.0 / r) * s[0] + (d.1 / r) * s[1] + nz * s[2]).max(0.0);
                let leaves = 1.0
                    + 0.5 * (vnoise(p, 0.45, salt) - 0.5)
                    + 0.2 * (vnoise(p, 1.6, salt ^ 1) - 0.5);
                let base = if deciduous {
                    let b = DECIDUOUS[self.season];
                    [b[0] * tint, b[1], b[2] / tint]
                } else {
                    CONIFER
                };
                scale(base, (AMBIENT + DIRECT * lambert) * leaves)
            }
            _ => scale(self.grass(p), flat),
        }
    }

    /// Camera response: linear radiance (mean of the sub-samples) to 8-bit, with sensor noise.
    fn encode(&self, rad: Rgb, col: usize, row: usize, image: u64) -> [u8; 3] {
        let cam = self.camera;
        let mut out = [0u8; 3];
        for k in 0..3 {
            let v = (rad[k] * cam.gain * cam.white[k]).clamp(0.0, 1.0);
            let salt = self.salt ^ image ^ (k as u64) << 60;
            let n = unit_hash(col as u64, row as u64, salt)
                + unit_hash(row as u64, col as u64, salt ^ 7)
                - 1.0;
            let dn = 255.0 * v.powf(1.0 / cam.gamma) + cam.noise_dn * 2.45 * n;
            out[k] = dn.round().clamp(0.0, 255.0) as u8;
        }
        out
    }
}

fn scale(c: Rgb, k: f64) -> Rgb {
    [c[0] * k, c[1] * k, c[2] * k]
}

// ---------------------------------------------------------------------------------------------
// Similarities (the terms of transform.json)
// ---------------------------------------------------------------------------------------------

/// Origin form: q = s R(t) p + (tx, ty), t counter-clockwise.
#[derive(Clone, Copy, Debug)]
struct Sim {
    scale: f64,
    rotation_deg: f64,
    tx: f64,
    ty: f64,
}

impl Sim {
    fn apply(&self, p: P) -> P {
        let r = rot(p, self.rotation_deg.to_radians());
        (self.scale * r.0 + self.tx, self.scale * r.1 + self.ty)
    }
    fn inverse(&self) -> Sim {
        let s = 1.0 / self.scale;
        let t = -self.rotation_deg;
        let r = rot((self.tx, self.ty), t.to_radians());
        Sim {
            scale: s,
            rotation_deg: t,
            tx: -s * r.0,
            ty: -s * r.1,
        }
    }
}

/// The applied error (reference -> target): q = pivot + s R(t) (p - pivot) + shift.
struct PivotSim {
    pivot: P,
    scale: f64,
    rotation_deg: f64,
    shift: P,
}

impl PivotSim {
    fn origin_form(&self) -> Sim {
        let r = rot(self.pivot, self.rotation_deg.to_radians());
        Sim {
            scale: self.scale,
            rotation_deg: self.rotation_deg,
            tx: self.pivot.0 + self.shift.0 - self.scale * r.0,
            ty: self.pivot.1 + self.shift.1 - self.scale * r.1,
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Images
// ---------------------------------------------------------------------------------------------

/// One image to write.
struct Raster<'a> {
    path: &'a Path,
    width: usize,
    height: usize,
    /// GDAL-order geotransform written to the file.
    gt: [f64; 6],
    /// Pixel/line -> layout coordinates of the scene shown (GDAL order).
    to_scene: [f64; 6],
    /// Sub-samples per pixel side.
    ss: usize,
    /// Valid footprint in pixel/line coordinates, or None (all valid).
    footprint: Option<Vec<P>>,
    survey: &'a Survey<'a>,
    image_salt: u64,
}

/// Pixel centres of row `row` inside the polygon (pixel/line coordinates): even-odd spans.
fn row_spans(poly: &[P], row: usize, width: usize) -> Vec<(usize, usize)> {
    let y = row as f64 + 0.5;
    let mut xs = Vec::new();
    for k in 0..poly.len() {
        let (a, b) = (poly[k], poly[(k + 1) % poly.len()]);
        if (a.1 <= y) != (b.1 <= y) {
            xs.push(a.0 + (y - a.1) / (b.1 - a.1) * (b.0 - a.0));
        }
    }
    xs.sort_by(f64::total_cmp);
    xs.chunks(2)
        .filter(|c| c.len() == 2)
        .map(|c| {
            // Columns whose centre c + 0.5 lies in [x0, x1).
            let from = (c[0] - 0.5).ceil().max(0.0) as usize;
            let to = ((c[1] - 0.5).ceil().max(0.0) as usize).min(width);
            (from.min(width), to)
        })
        .collect()
}

fn render_rows(r: &Raster, row0: usize, rows: usize, rgb: &mut [u8], mask: &mut [u8]) {
    let w = r.width;
    let g = &r.to_scene;
    let k = r.ss as f64;
    for j in 0..rows {
        let row = row0 + j;
        let spans = match &r.footprint {
            Some(poly) => row_spans(poly, row, w),
            None => vec![(0, w)],
        };
        for (from, to) in spans {
            for col in from..to {
                let mut acc = [0.0; 3];
                for sy in 0..r.ss {
                    let l = row as f64 + (sy as f64 + 0.5) / k;
                    for sx in 0..r.ss {
                        let px = col as f64 + (sx as f64 + 0.5) / k;
                        let p = (g[0] + g[1] * px + g[2] * l, g[3] + g[4] * px + g[5] * l);
                        let v = r.survey.radiance(p);
                        acc = [acc[0] + v[0], acc[1] + v[1], acc[2] + v[2]];
                    }
                }
                let n = (r.ss * r.ss) as f64;
                let px = r.survey.encode(scale(acc, 1.0 / n), col, row, r.image_salt);
                let i = j * w + col;
                rgb[3 * i..3 * i + 3].copy_from_slice(&px);
                mask[i] = 255;
            }
        }
    }
}

fn write_raster(r: &Raster) -> Res<()> {
    if r.path.exists() {
        std::fs::remove_file(r.path)?;
    }
    let drv = DriverManager::get_driver_by_name("GTiff")?;
    let opts = RasterCreationOptions::from_iter([
        "TILED=YES",
        "BLOCKXSIZE=256",
        "BLOCKYSIZE=256",
        "COMPRESS=JPEG",
        "PHOTOMETRIC=YCBCR",
        "JPEG_QUALITY=90",
        "BIGTIFF=IF_SAFER",
    ]);
    gdal::config::set_config_option("GDAL_TIFF_INTERNAL_MASK", "YES")?;
    gdal::config::set_config_option("JPEG_QUALITY_OVERVIEW", "90")?;
    let mut ds =
        drv.create_with_band_type_with_options::<u8, _>(r.path, r.width, r.height, 3, &opts)?;
    ds.set_geo_transform(&r.gt)?;
    let mut srs = SpatialRef::from_epsg(EPSG)?;
    srs.set_axis_mapping_strategy(gdal::spatial_ref::AxisMappingStrategy::TraditionalGisOrder);
    ds.set_spatial_ref(&srs)?;
    if r.footprint.is_some() {
        ds.rasterband(1)?.create_mask_band(true)?;
    }
    let w = r.width;
    for row0 in (0..r.height).step_by(STRIP) {
        let rows = STRIP.min(r.height - row0);
        let mut rgb = vec![0u8; w * rows * 3];
        let mut mask = vec![0u8; w * rows];
        // Two threads, each a half of the strip's rows (pixels are pure functions of their
        // position, so the split does not change them).
        let half = rows.div_ceil(2);
        std::thread::scope(|s| {
            let (rgb_a, rgb_b) = rgb.split_at_mut(half * w * 3);
            let (mask_a, mask_b) = mask.split_at_mut(half * w);
            s.spawn(|| render_rows(r, row0, half, rgb_a, mask_a));
            render_rows(r, row0 + half, rows - half, rgb_b, mask_b);
        });
        for band in 0..3 {
            let data: Vec<u8> = rgb.iter().skip(band).step_by(3).copied().collect();
            ds.rasterband(band + 1)?.write(
                (0, row0 as isize),
                (w, rows),
                &mut Buffer::new((w, rows), data),
            )?;
        }
        if r.footprint.is_some() {
            ds.rasterband(1)?.open_mask_band()?.write(
                (0, row0 as isize),
                (w, rows),
                &mut Buffer::new((w, rows), mask),
            )?;
        }
        // Every tile of the strip now has all its bands: write each tile once (a JPEG tile
        // written with one band and completed later would be decoded and compressed twice).
        ds.flush_cache()?;
    }
    let mut levels = Vec::new();
    let mut f = 2;
    while r.width.max(r.height) / f >= 128 {
        levels.push(f as i32);
        f *= 2;
    }
    ds.build_overviews("AVERAGE", &levels, &[])?;
    ds.close()?;
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// Entry point
// ---------------------------------------------------------------------------------------------

/// The applied error of the mosaic for a size (reference -> target working coordinates).
fn applied_error(size: Size) -> PivotSim {
    let dm = size.dims();
    PivotSim {
        pivot: add(CENTRE, dm.drone_centre),
        scale: 1.00035,
        rotation_deg: 1.1,
        shift: (3.4, -2.1),
    }
}

/// The irregular footprint of the flight, in the mosaic's pixel/line coordinates: a rounded
/// rectangle inset from the frame, its edge wavering with a few random sinusoids.
fn footprint(w: usize, h: usize, rng: &mut ChaCha8Rng) -> Vec<P> {
    let (cx, cy) = (w as f64 / 2.0, h as f64 / 2.0);
    let (a, b) = (cx * 0.93, cy * 0.93);
    let waves: Vec<(f64, f64, f64)> = (0..5)
        .map(|k| {
            (
                rng.gen_range(0.01..0.035) / (1.0 + k as f64 * 0.3),
                (2 + k * 2 + rng.gen_range(0..2)) as f64,
                rng.gen_range(0.0..TAU),
            )
        })
        .collect();
    let n = 360;
    (0..n)
        .map(|k| {
            let th = TAU * k as f64 / n as f64;
            let (c, s) = (th.cos(), th.sin());
            // Superellipse of exponent 6: |x/a|^6 + |y/b|^6 = 1.
            let r = ((c / a).abs().powi(6) + (s / b).abs().powi(6)).powf(-1.0 / 6.0);
            let wobble = 1.0
                - waves
                    .iter()
                    .map(|(amp, f, ph)| amp * (1.0 + (f * th + ph).sin()))
                    .sum::<f64>();
            (cx + r * wobble * c, cy - r * wobble * s)
        })
        .collect()
}

/// Writes the orthophoto, the mosaic and the truth file into `out`.
pub fn write_scene(out: &Path, seed: u64, size: Size) -> Res<()> {
    std::fs::create_dir_all(out)?;
    // GDAL's block cache (default 5% of RAM) would otherwise fill with the large mosaic while
    // its overviews are built; a strip of all bands (15 MB for 20,000 px) fits many times.
    gdal::config::set_config_option("GDAL_CACHEMAX", "256")?;
    let dm = size.dims();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(100);
    let scene = lay_out(size, &mut rng);
    let survey_2019 = Survey::new(&scene, dm.half, Y2019, seed);
    let survey_2026 = Survey::new(&scene, dm.half, Y2026, seed);

    // Orthophoto: north up, 25 cm, centred on the scene.
    let og = 0.25;
    let oh = dm.ortho_px as f64 * og / 2.0;
    let ortho_gt = [CENTRE.0 - oh, og, 0.0, CENTRE.1 + oh, 0.0, -og];
    let ortho = Raster {
        path: &out.join(ORTHO_FILE),
        width: dm.ortho_px,
        height: dm.ortho_px,
        gt: ortho_gt,
        to_scene: [-oh, og, 0.0, oh, 0.0, -og],
        ss: 3,
        footprint: None,
        survey: &survey_2019,
        image_salt: 0x0123,
    };
    eprintln!(
        "scene: {} houses, {} trees, cars (both years, 2019 only, 2026 only) {:?}, {} pools",
        scene.houses,
        scene.trees,
        scene.cars,
        scene.pools.len()
    );
    write_raster(&ortho)?;

    // Mosaic: north-up geotransform in its own (erroneous) working frame; its pixels show the
    // ground at T(geotransform(pixel)).
    let err = applied_error(size);
    let applied = err.origin_form();
    let expected = applied.inverse();
    let dg = dm.drone_gsd;
    let frame_centre = add(CENTRE, dm.drone_centre);
    let (hw, hh) = (dm.drone_w as f64 * dg / 2.0, dm.drone_h as f64 * dg / 2.0);
    let drone_gt = [frame_centre.0 - hw, dg, 0.0, frame_centre.1 + hh, 0.0, -dg];
    // Compose: pixel/line -> working (drone_gt) -> reference (expected) -> layout (- CENTRE).
    let at = |p: f64, l: f64| {
        let w = (
            drone_gt[0] + drone_gt[1] * p + drone_gt[2] * l,
            drone_gt[3] + drone_gt[4] * p + drone_gt[5] * l,
        );
        sub(expected.apply(w), CENTRE)
    };
    let o = at(0.0, 0.0);
    let (px, lx) = (sub(at(1.0, 0.0), o), sub(at(0.0, 1.0), o));
    let mut frng = ChaCha8Rng::seed_from_u64(seed);
    frng.set_stream(101);
    let poly = footprint(dm.drone_w, dm.drone_h, &mut frng);
    let drone = Raster {
        path: &out.join(DRONE_FILE),
        width: dm.drone_w,
        height: dm.drone_h,
        gt: drone_gt,
        to_scene: [o.0, px.0, lx.0, o.1, px.1, lx.1],
        ss: 2,
        footprint: Some(poly.clone()),
        survey: &survey_2026,
        image_salt: 0x4567,
    };
    write_raster(&drone)?;

    // ---- truth ----
    let to_target = |p: P| applied.apply(add(CENTRE, p));
    let to_ref = |p: P| add(CENTRE, p);
    let pools: Vec<Value> = scene
        .pools
        .iter()
        .enumerate()
        .map(|(k, r)| {
            let (rx, ry) = to_ref(r.c);
            let (tx, ty) = to_target(r.c);
            json!({
                "id": format!("pool-{}", k + 1),
                "reference_x": rx, "reference_y": ry,
                "target_x": tx, "target_y": ty,
                "length_m": 2.0 * r.hu, "width_m": 2.0 * r.hv,
                "heading_deg": r.u.1.atan2(r.u.0).to_degrees(),
            })
        })
        .collect();
    let mut inside = 0usize;
    for row in 0..dm.drone_h {
        inside += row_spans(&poly, row, dm.drone_w)
            .iter()
            .map(|s| s.1 - s.0)
            .sum::<usize>();
    }
    let centre_shift = sub(applied.apply(frame_centre), frame_centre);
    let rect_json = |r: &Rect| {
        let (x, y) = to_ref(r.c);
        json!({"reference_x": x, "reference_y": y, "length_m": 2.0 * r.hu, "width_m": 2.0 * r.hv, "heading_deg": r.u.1.atan2(r.u.0).to_degrees()})
    };
    let truth = json!({
        "description": "Truth for the fictional raster sample scene (a made-up hamlet east of the fictional town of Tessaloom). All data are invented.",
        "generator": "sample-data/scene.rs (run by sample-data/generate.rs)",
        "seed": seed,
        "size": size.name(),
        "reference_file": ORTHO_FILE,
        "target_file": DRONE_FILE,
        "crs": format!("EPSG:{EPSG}"),
        "working_crs": format!("EPSG:{EPSG}"),
        "expected_transform": {
            "scale": expected.scale,
            "rotation_deg": expected.rotation_deg,
            "translation_x": expected.tx,
            "translation_y": expected.ty,
            "convention": "maps TARGET working coordinates (x, y) to REFERENCE coordinates, the terms of transform.json: x' = s(cos t * x - sin t * y) + tx, y' = s(sin t * x + cos t * y) + ty, t counter-clockwise",
        },
        "applied_error": {
            "maps": "reference EPSG:32633 -> target working EPSG:32633 (the mosaic's georeferencing error): the mosaic's pixel at working position w shows the ground at expected_transform(w)",
            "form": "q = pivot + s R(t) (p - pivot) + shift, t counter-clockwise",
            "pivot_x": err.pivot.0, "pivot_y": err.pivot.1,
            "scale": err.scale, "rotation_deg": err.rotation_deg,
            "shift_x": err.shift.0, "shift_y": err.shift.1,
            "scale_error_ppm": (err.scale - 1.0) * 1e6,
            "shift_at_mosaic_centre_m": [centre_shift.0, centre_shift.1],
            "origin_form": {"scale": applied.scale, "rotation_deg": applied.rotation_deg, "translation_x": applied.tx, "translation_y": applied.ty},
        },
        "reference": {
            "date": "2019, summer",
            "pixel_size_m": og, "width": dm.ortho_px, "height": dm.ortho_px,
            "geotransform": ortho_gt,
            "bands": "RGB, byte", "validity": "every pixel valid (no mask, no nodata)",
            "compression": "JPEG (YCbCr, quality 90), 256 x 256 tiles, internal overviews (AVERAGE)",
            "subsamples_per_pixel": 9,
            "sun_azimuth_deg": SUN_2019.0, "sun_elevation_deg": SUN_2019.1,
            "camera": {"gain": CAMERA_2019.gain, "white_balance": CAMERA_2019.white, "gamma": CAMERA_2019.gamma, "noise_dn": CAMERA_2019.noise_dn},
        },
        "target": {
            "date": "2026, autumn",
            "pixel_size_m": dg, "width": dm.drone_w, "height": dm.drone_h,
            "geotransform": drone_gt,
            "bands": "RGB, byte",
            "validity": "internal per-dataset mask (GDAL mask band, GMF_PER_DATASET): 255 inside the flight's footprint, 0 in the collar, where RGB is written as 0 (JPEG ringing leaves small values within a few pixels of the footprint's edge): use the mask, not the colour",
            "valid_fraction": inside as f64 / (dm.drone_w * dm.drone_h) as f64,
            "footprint_pixel_line": "closed polygon of 360 vertices (pixel/line, GDAL convention), not listed; a pixel is valid when its centre is inside it",
            "compression": "JPEG (YCbCr, quality 90), 256 x 256 tiles, internal overviews (AVERAGE) and mask overviews",
            "subsamples_per_pixel": 4,
            "sun_azimuth_deg": SUN_2026.0, "sun_elevation_deg": SUN_2026.1,
            "camera": {"gain": CAMERA_2026.gain, "white_balance": CAMERA_2026.white, "gamma": CAMERA_2026.gamma, "noise_dn": CAMERA_2026.noise_dn},
        },
        "landmarks": {
            "what": "swimming pools (water colour, unchanged, unshadowed in both images), centre of the water surface; target_x/y = applied_error(reference)",
            "pools": pools,
        },
        "changes": {
            "new_house_2026": rect_json(&scene.new_house),
            "demolished_garage_2019_only": rect_json(&scene.demolished),
            "felled_trees_2019_only": scene.felled.iter().map(|&(c, r)| { let (x, y) = to_ref(c); json!({"reference_x": x, "reference_y": y, "crown_radius_m": r}) }).collect::<Vec<_>>(),
            "cars": {"same_place_both_years": scene.cars[0], "only_2019": scene.cars[1], "only_2026": scene.cars[2]},
            "season_and_sun": "deciduous crowns green -> brown-orange, grass yellower, fields harvested or ploughed; shadows longer and turned (see the sun angles)",
        },
        "counts": {"houses": scene.houses, "trees": scene.trees},
    });
    let mut text = serde_json::to_string_pretty(&truth)?;
    text.push('\n');
    std::fs::write(out.join(TRUTH_FILE), text)?;
    eprintln!("wrote {}, {} and {}", ORTHO_FILE, DRONE_FILE, TRUTH_FILE);
    Ok(())
}
