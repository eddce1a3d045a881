//! The figures of `report.html`: a map of the landmarks and control points, and a histogram
//! of the residuals, each an SVG document as text (inline in the page).
//!
//! **In:** [`MapLayers`] (points in one working frame, its metres per unit and its CRS's
//! label, optional further point layers of their own ([`PointClass`]: an epochs library's
//! tracks by stability grade), optional area outlines) and residuals in metres. **Out:** [`MapFigure`] and
//! [`Histogram`]: the SVG text and what was drawn (how many points of each layer, the
//! exaggeration of the vectors, the scale bar's length, the histogram's bin width), for the
//! page to state.
//!
//! The axes, ticks, labels, scale bar, north arrow and the histogram's bars are drawn with the
//! plotters crate (SVG backend). The dense layers of the map (thousands of landmarks, control
//! points and their vectors) are not: plotters writes one SVG element a marker (70-100 bytes
//! each), so they are drawn here as one `<path>` a layer (a zero-length subpath a dot, 10-15
//! bytes a point) in the chart's own pixel coordinates, added to plotters' SVG at the end. The
//! layers take their look from the page's CSS classes (`ref`, `tgt`, `cp`, `vec`, `area`),
//! whose colours are [`INKS`]; a [`PointClass`] carries its own ink, written on its path. A
//! layer with no points has no legend entry.
//!
//! **The colour scheme** reads in greyscale and for colour-blind readers in two ways at once:
//! every layer has its own marker shape (square, plus, round dot, line, dashed outline), and
//! the layers step down in relative luminance from the background (white, 1.0) through the
//! reference (about 0.40), the target (0.22), to the control points and their vectors (0.04
//! and 0), so that they stay apart when printed in grey or seen without hue. The hues are
//! three of the Okabe–Ito colours (sky blue, vermilion, orange: Okabe & Ito, "Color Universal
//! Design — how to make figures and presentations that are friendly to colorblind people",
//! 2008; from memory) plus a dark blue of our own; the luminance is the relative luminance of
//! WCAG 2.1 (sRGB linearised, 0.2126 R + 0.7152 G + 0.0722 B). The unit tests check the
//! steps.
//!
//! **Large surveys**: at most [`MAX_MARKERS`] markers are drawn; when the layers hold more,
//! each is thinned in proportion to its size to a spatially even sample (every k-th point
//! along a Morton curve), and [`MapFigure::drawn`] says how many of each were drawn.
//!
//! **Map conventions**: one scale on both axes (working-frame units); up is grid north of the
//! working CRS (the page says so: true north differs from it by the meridian convergence);
//! the scale bar has a round length (1, 2 or 5 × 10ⁿ metres) near a quarter of the map's
//! width; vectors are lengthened by a round factor (1, 2 or 5 × 10ⁿ) chosen so that the
//! 95th-percentile vector is drawn about 2.5% of the map's larger side long.

use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use std::fmt::Write;

/// Width of the map figure, pixels (the page scales it down on narrow screens).
pub const MAP_WIDTH: u32 = 1000;
/// Height of the map figure, pixels.
pub const MAP_HEIGHT: u32 = 760;
/// Width of the map's side panel (legend, scale bar, north arrow), pixels.
const PANEL_WIDTH: u32 = 260;
/// Width of the histogram figure, pixels.
pub const HISTOGRAM_WIDTH: u32 = 1000;
/// Height of the histogram figure, pixels.
pub const HISTOGRAM_HEIGHT: u32 = 320;
/// The most markers (landmarks and control points, all layers together) a map draws.
pub const MAX_MARKERS: usize = 20_000;
/// The font of the figures' text.
const FONT: &str = "sans-serif";

/// The colour of one layer, with the marker shape that goes with it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Ink {
    /// The page's CSS class for the layer.
    pub class: &'static str,
    /// What the layer is, for the legend.
    pub label: &'static str,
    /// The marker shape.
    pub shape: &'static str,
    /// sRGB colour.
    pub rgb: (u8, u8, u8),
}

impl Ink {
    /// `#rrggbb`.
    pub fn hex(&self) -> String {
        format!("#{:02x}{:02x}{:02x}", self.rgb.0, self.rgb.1, self.rgb.2)
    }

    /// Relative luminance (WCAG 2.1): sRGB linearised, then 0.2126 R + 0.7152 G + 0.0722 B.
    pub fn luminance(&self) -> f64 {
        let lin = |c: u8| {
            let c = c as f64 / 255.0;
            if c <= 0.04045 {
                c / 12.92
            } else {
                ((c + 0.055) / 1.055).powf(2.4)
            }
        };
        0.2126 * lin(self.rgb.0) + 0.7152 * lin(self.rgb.1) + 0.0722 * lin(self.rgb.2)
    }

    fn colour(&self) -> RGBColor {
        RGBColor(self.rgb.0, self.rgb.1, self.rgb.2)
    }
}

/// Reference landmarks: light squares (Okabe–Ito sky blue).
pub const REFERENCE_INK: Ink = Ink {
    class: "ref",
    label: "reference landmarks",
    shape: "square",
    rgb: (0x56, 0xb4, 0xe9),
};
/// Target landmarks, transformed onto the reference: plus signs (Okabe–Ito vermilion).
pub const TARGET_INK: Ink = Ink {
    class: "tgt",
    label: "target landmarks, transformed",
    shape: "plus",
    rgb: (0xd5, 0x5e, 0x00),
};
/// Control points: dark round dots (a dark blue of our own).
pub const CONTROL_INK: Ink = Ink {
    class: "cp",
    label: "control points",
    shape: "dot",
    rgb: (0x00, 0x3a, 0x66),
};
/// The vectors at the control points: black lines.
pub const VECTOR_INK: Ink = Ink {
    class: "vec",
    label: "vectors",
    shape: "line",
    rgb: (0x00, 0x00, 0x00),
};
/// Flagged areas: a black dashed outline over a light orange fill (Okabe–Ito orange).
pub const AREA_INK: Ink = Ink {
    class: "area",
    label: "flagged areas",
    shape: "dashed outline",
    rgb: (0xe6, 0x9f, 0x00),
};
/// Every layer's ink, in drawing order (the page's CSS is made from these).
pub const INKS: [Ink; 5] = [REFERENCE_INK, TARGET_INK, CONTROL_INK, VECTOR_INK, AREA_INK];

/// The CSS rules that give the map's layers their look (the page includes them).
pub fn layer_css() -> String {
    let (r, t, c, v, a) = (
        REFERENCE_INK.hex(),
        TARGET_INK.hex(),
        CONTROL_INK.hex(),
        VECTOR_INK.hex(),
        AREA_INK.hex(),
    );
    format!(
        "svg .ref{{fill:none;stroke:{r};stroke-width:4;stroke-linecap:square}}\n\
         svg .tgt{{fill:none;stroke:{t};stroke-width:1.2}}\n\
         svg .cp{{fill:none;stroke:{c};stroke-width:3.6;stroke-linecap:round}}\n\
         svg .vec{{fill:none;stroke:{v};stroke-width:0.8}}\n\
         svg .area{{fill:{a};fill-opacity:0.3;stroke:#000;stroke-width:2;stroke-dasharray:7 4}}\n"
    )
}

/// What the map shows, in one working frame.
#[derive(Debug, Clone, Default)]
pub struct MapLayers {
    /// The working CRS, as the page names it (e.g. `EPSG:32633 (WGS 84 / UTM zone 33N)`).
    pub crs_label: String,
    /// Metres per working unit.
    pub metres_per_unit: f64,
    /// Reference landmarks.
    pub reference: Vec<[f64; 2]>,
    /// Target landmarks, already transformed onto the reference.
    pub target: Vec<[f64; 2]>,
    /// Control points (at the reference's position).
    pub controls: Vec<[f64; 2]>,
    /// One vector a control point (same order), working units: where the line from the
    /// control point goes before exaggeration.
    pub vectors: Vec<[f64; 2]>,
    /// What the vectors are, for the legend (e.g. "residual").
    pub vector_label: String,
    /// Further point layers drawn over the others, each in its own ink and shape (an epochs
    /// library's tracks by stability grade); empty for a match.
    pub classes: Vec<PointClass>,
}

/// A point layer of its own: its points (working frame), its ink (marker shape: `dot`,
/// `square`, `plus`, `ring` or `cross`) and what it is, for the legend and the page.
#[derive(Debug, Clone)]
pub struct PointClass {
    /// A short key for the page's numbers (`map.drawn.classes.<key>`), e.g. `grade_a`.
    pub key: String,
    /// What the layer is, for the legend (e.g. "grade A tracks").
    pub label: String,
    /// Its colour and marker shape; drawn with inline attributes, so its `class` is only a
    /// name for the path.
    pub ink: Ink,
    /// The points.
    pub points: Vec<[f64; 2]>,
}

/// A flagged area on the map: its outline (working frame, not closed) and a short label.
#[derive(Debug, Clone)]
pub struct AreaShape<'a> {
    /// The label drawn at its centre (e.g. "1").
    pub label: &'a str,
    /// The outline's vertices.
    pub outline: &'a [[f64; 2]],
}

/// How many points of each layer a map drew.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct Drawn {
    /// Reference landmarks drawn.
    pub reference: usize,
    /// Target landmarks drawn.
    pub target: usize,
    /// Control points (and vectors) drawn.
    pub controls: usize,
    /// Points of each of [`MapLayers::classes`] drawn, in their order.
    pub classes: Vec<usize>,
}

/// A drawn map.
#[derive(Debug, Clone)]
pub struct MapFigure {
    /// The SVG document.
    pub svg: String,
    /// How many points of each layer it drew.
    pub drawn: Drawn,
    /// The factor the vectors are lengthened by.
    pub exaggeration: f64,
    /// The scale bar's length, metres.
    pub scale_bar_m: f64,
}

/// A drawn histogram.
#[derive(Debug, Clone)]
pub struct Histogram {
    /// The SVG document.
    pub svg: String,
    /// Width of a bin, metres.
    pub bin_m: f64,
    /// Number of bins.
    pub bins: usize,
}

/// The largest of 1, 2, 5 × 10ⁿ that is at most `v` (`v` > 0 and finite; else 1).
pub fn round_down(v: f64) -> f64 {
    if !(v.is_finite() && v > 0.0) {
        return 1.0;
    }
    let p = 10f64.powf(v.log10().floor());
    [5.0, 2.0, 1.0]
        .into_iter()
        .map(|m| m * p)
        .find(|c| *c <= v * (1.0 + 1e-12))
        .unwrap_or(p)
}

/// The indices of a spatially even sample of `k` of `points` (all of them when `k` ≥ their
/// number): every (n/k)-th point along a Morton curve, in that order.
pub fn even_sample(points: &[[f64; 2]], k: usize) -> Vec<usize> {
    let n = points.len();
    if k >= n {
        return (0..n).collect();
    }
    let order = crate::spatial::morton_order(points);
    (0..k).map(|j| order[j * n / k] as usize).collect()
}

/// How many markers of layers of `sizes` fit under [`MAX_MARKERS`]: all when the total fits,
/// else each in proportion to its size.
fn shares(sizes: &[usize]) -> Vec<usize> {
    let total: usize = sizes.iter().sum();
    if total <= MAX_MARKERS {
        return sizes.to_vec();
    }
    sizes.iter().map(|n| n * MAX_MARKERS / total).collect()
}

/// The SVG path of one marker of `shape` centred at (`x`, `y`), pixels.
fn marker(shape: &str, x: i64, y: i64) -> String {
    match shape {
        "plus" => format!("M{} {y}h6M{x} {}v6", x - 3, y - 3),
        "cross" => format!("M{} {}l8 8M{} {}l8 -8", x - 4, y - 4, x - 4, y + 4),
        "ring" => format!("M{} {y}a3 3 0 1 0 6 0a3 3 0 1 0 -6 0", x - 3),
        // "square" and "dot": a zero-length stroke whose cap gives the shape.
        _ => format!("M{x} {y}h0"),
    }
}

/// The inline look of a [`PointClass`]'s path: its ink's colour, the stroke its shape needs.
fn class_style(ink: &Ink) -> String {
    let (width, cap) = match ink.shape {
        "dot" => (4.2, "round"),
        "square" => (4.6, "square"),
        "ring" => (1.5, "butt"),
        _ => (1.8, "butt"),
    };
    format!(
        "fill=\"none\" stroke=\"{}\" stroke-width=\"{width}\" stroke-linecap=\"{cap}\"",
        ink.hex()
    )
}

/// The value below which `p` (0-1) of `values` lie (nearest rank), 0 when empty.
fn percentile(values: &[f64], p: f64) -> f64 {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return 0.0;
    }
    v.sort_by(f64::total_cmp);
    v[((v.len() as f64 * p) as usize).min(v.len() - 1)]
}

type Failed = Box<dyn std::error::Error>;

/// Draws the map (see the module doc for its conventions).
pub fn map(layers: &MapLayers, areas: &[AreaShape]) -> Result<MapFigure, String> {
    let mut svg = String::new();
    let figure = draw_map(&mut svg, layers, areas).map_err(|e| e.to_string())?;
    Ok(MapFigure { svg, ..figure })
}

/// A linear map from the working frame onto the chart's pixels (same scale on both axes).
#[derive(Clone, Copy)]
struct Pixels {
    x0: f64,
    y1: f64,
    px0: f64,
    py0: f64,
    per_unit: f64,
}

impl Pixels {
    fn at(&self, p: [f64; 2]) -> (i64, i64) {
        (
            (self.px0 + (p[0] - self.x0) * self.per_unit).round() as i64,
            (self.py0 + (self.y1 - p[1]) * self.per_unit).round() as i64,
        )
    }
}

fn draw_map(
    svg: &mut String,
    layers: &MapLayers,
    areas: &[AreaShape],
) -> Result<MapFigure, Failed> {
    let mpu = if layers.metres_per_unit > 0.0 {
        layers.metres_per_unit
    } else {
        1.0
    };
    let everything = layers
        .reference
        .iter()
        .chain(&layers.target)
        .chain(&layers.controls)
        .chain(layers.classes.iter().flat_map(|c| c.points.iter()))
        .chain(areas.iter().flat_map(|a| a.outline.iter()))
        .filter(|p| p[0].is_finite() && p[1].is_finite());
    let ext = crate::spatial::Extent::of(everything);
    let (ext_min, ext_max) = if ext.min[0] <= ext.max[0] {
        (ext.min, ext.max)
    } else {
        ([0.0, 0.0], [1.0, 1.0])
    };
    let span = [
        (ext_max[0] - ext_min[0]).max(1e-9),
        (ext_max[1] - ext_min[1]).max(1e-9),
    ];
    let pad = 0.03 * span[0].max(span[1]);

    // Vectors: lengthened so that the 95th percentile is about 2.5% of the larger side.
    let lengths: Vec<f64> = layers.vectors.iter().map(|v| v[0].hypot(v[1])).collect();
    let p95 = percentile(&lengths, 0.95);
    let exaggeration = if p95 > 0.0 {
        round_down(0.025 * span[0].max(span[1]) / p95).max(1.0)
    } else {
        1.0
    };

    let mut drawn_svg = String::new();
    let (drawn, scale_bar_m) = {
        let root = SVGBackend::with_string(svg, (MAP_WIDTH, MAP_HEIGHT)).into_drawing_area();
        root.fill(&WHITE)?;
        let (left, right) = root.split_horizontally(MAP_WIDTH - PANEL_WIDTH);
        let builder = |x: std::ops::Range<f64>, y: std::ops::Range<f64>| {
            ChartBuilder::on(&left)
                .margin(12)
                .x_label_area_size(46)
                .y_label_area_size(92)
                .build_cartesian_2d(x, y)
        };
        // First the plotting area's size, then the ranges that give one scale on both axes.
        let (pw, ph) = builder(0.0..1.0, 0.0..1.0)?.plotting_area().dim_in_pixel();
        let (pw, ph) = (pw.max(1) as f64, ph.max(1) as f64);
        let units_per_px = ((span[0] + 2.0 * pad) / pw).max((span[1] + 2.0 * pad) / ph);
        let centre = [
            (ext_min[0] + ext_max[0]) / 2.0,
            (ext_min[1] + ext_max[1]) / 2.0,
        ];
        let (hw, hh) = (pw * units_per_px / 2.0, ph * units_per_px / 2.0);
        let (x0, x1) = (centre[0] - hw, centre[0] + hw);
        let (y0, y1) = (centre[1] - hh, centre[1] + hh);
        let mut chart = builder(x0..x1, y0..y1)?;
        let unit_name = if (mpu - 1.0).abs() < 1e-12 {
            "m".to_string()
        } else {
            format!("working units of {mpu} m")
        };
        chart
            .configure_mesh()
            .x_desc(format!("easting ({unit_name})"))
            .y_desc(format!("northing ({unit_name})"))
            .x_labels(6)
            .y_labels(6)
            .x_label_formatter(&|v| format!("{v:.0}"))
            .y_label_formatter(&|v| format!("{v:.0}"))
            .label_style((FONT, 17))
            .axis_desc_style((FONT, 18))
            .light_line_style(TRANSPARENT)
            .bold_line_style(RGBColor(225, 225, 225))
            .draw()?;
        let (xr, yr) = chart.plotting_area().get_pixel_range();
        let px = Pixels {
            x0,
            y1,
            px0: xr.start as f64,
            py0: yr.start as f64,
            per_unit: 1.0 / units_per_px,
        };

        // The dense layers, as compact paths clipped to the plotting area.
        let sizes: Vec<usize> = [
            layers.reference.len(),
            layers.target.len(),
            layers.controls.len(),
        ]
        .into_iter()
        .chain(layers.classes.iter().map(|c| c.points.len()))
        .collect();
        let k = shares(&sizes);
        let pick_r = even_sample(&layers.reference, k[0]);
        let pick_t = even_sample(&layers.target, k[1]);
        let pick_c = even_sample(&layers.controls, k[2]);
        let pick_classes: Vec<Vec<usize>> = layers
            .classes
            .iter()
            .zip(&k[3..])
            .map(|(c, k)| even_sample(&c.points, *k))
            .collect();
        let _ = write!(
            drawn_svg,
            "<defs><clipPath id=\"map-clip\"><rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\"/></clipPath></defs>\n<g clip-path=\"url(#map-clip)\">\n",
            xr.start,
            yr.start,
            xr.end - xr.start,
            yr.end - yr.start
        );
        // `look`: inline attributes (a point class's ink), or nothing (the page's CSS).
        let mut path = |class: &str, look: &str, body: &str| {
            if !body.is_empty() {
                let _ = writeln!(drawn_svg, "<path class=\"{class}\"{look} d=\"{body}\"/>");
            }
        };
        let mut d = String::new();
        for &i in &pick_r {
            let (x, y) = px.at(layers.reference[i]);
            let _ = write!(d, "M{x} {y}h0");
        }
        path(REFERENCE_INK.class, "", &d);
        d.clear();
        for &i in &pick_t {
            let (x, y) = px.at(layers.target[i]);
            d.push_str(&marker(TARGET_INK.shape, x, y));
        }
        path(TARGET_INK.class, "", &d);
        d.clear();
        for &i in &pick_c {
            let c = layers.controls[i];
            let Some(v) = layers.vectors.get(i) else {
                continue;
            };
            let (x, y) = px.at(c);
            let (ex, ey) = px.at([c[0] + exaggeration * v[0], c[1] + exaggeration * v[1]]);
            if (ex, ey) != (x, y) {
                let _ = write!(d, "M{x} {y}L{ex} {ey}");
            }
        }
        path(VECTOR_INK.class, "", &d);
        d.clear();
        for &i in &pick_c {
            let (x, y) = px.at(layers.controls[i]);
            let _ = write!(d, "M{x} {y}h0");
        }
        path(CONTROL_INK.class, "", &d);
        for (class, pick) in layers.classes.iter().zip(&pick_classes) {
            let mut d = String::new();
            for &i in pick {
                let (x, y) = px.at(class.points[i]);
                d.push_str(&marker(class.ink.shape, x, y));
            }
            path(
                class.ink.class,
                &format!(" {}", class_style(&class.ink)),
                &d,
            );
        }
        for area in areas {
            let mut d = String::new();
            for (j, p) in area.outline.iter().enumerate() {
                let (x, y) = px.at(*p);
                let _ = write!(d, "{}{x} {y}", if j == 0 { "M" } else { "L" });
            }
            if !d.is_empty() {
                d.push('Z');
                path(AREA_INK.class, "", &d);
            }
        }
        drawn_svg.push_str("</g>\n");
        // Area labels, on top, with a white halo.
        for area in areas {
            if area.outline.is_empty() {
                continue;
            }
            let n = area.outline.len() as f64;
            let c = area
                .outline
                .iter()
                .fold([0.0, 0.0], |a, p| [a[0] + p[0] / n, a[1] + p[1] / n]);
            let (x, y) = px.at(c);
            let _ = writeln!(
                drawn_svg,
                "<text x=\"{x}\" y=\"{y}\" dy=\"0.35em\" text-anchor=\"middle\" font-family=\"{FONT}\" font-size=\"15\" font-weight=\"bold\" stroke=\"#fff\" stroke-width=\"3\" paint-order=\"stroke\">{}</text>",
                super::html::escape(area.label)
            );
        }

        // The side panel: legend, scale bar, north arrow.
        let (bx, by) = right.get_base_pixel();
        // plotters' SVG backend writes font sizes divided by 1.24: 18 → 14.5 px.
        let text = TextStyle::from((FONT, 18).into_font()).color(&BLACK);
        let small = TextStyle::from((FONT, 16).into_font()).color(&RGBColor(60, 60, 60));
        right.draw_text(
            "Legend",
            &text.clone().pos(Pos::new(HPos::Left, VPos::Top)),
            (10, 24),
        )?;
        let vector_label = format!(
            "{} vectors (× {})",
            if layers.vector_label.is_empty() {
                "residual"
            } else {
                layers.vector_label.as_str()
            },
            exaggeration
        );
        // A layer with no points has no legend entry (an epochs map has only its classes).
        let mut entries: Vec<(Ink, String, bool)> = [
            (REFERENCE_INK, !layers.reference.is_empty()),
            (TARGET_INK, !layers.target.is_empty()),
            (CONTROL_INK, !layers.controls.is_empty()),
        ]
        .into_iter()
        .filter(|(_, shown)| *shown)
        .map(|(ink, _)| (ink, ink.label.to_string(), false))
        .collect();
        if !layers.controls.is_empty() {
            entries.push((VECTOR_INK, vector_label, false));
        }
        entries.extend(
            layers
                .classes
                .iter()
                .map(|c| (c.ink, c.label.clone(), true)),
        );
        if !areas.is_empty() {
            entries.push((AREA_INK, AREA_INK.label.to_string(), false));
        }
        let mut y = 60;
        for (ink, label, inline) in &entries {
            let (x, yy) = (bx as i64 + 22, by as i64 + y as i64);
            let sample = match ink.shape {
                "line" => format!("M{} {}L{} {}", x - 10, yy + 5, x + 10, yy - 5),
                "dashed outline" => format!("M{} {}h20v12h-20Z", x - 10, yy - 6),
                shape => marker(shape, x, yy),
            };
            let look = if *inline {
                format!(" {}", class_style(ink))
            } else {
                String::new()
            };
            let _ = writeln!(
                drawn_svg,
                "<path class=\"{}\"{look} d=\"{sample}\"/>",
                ink.class
            );
            right.draw_text(
                label,
                &text.clone().pos(Pos::new(HPos::Left, VPos::Center)),
                (44, y),
            )?;
            y += 28;
        }

        // Scale bar: a round length near a quarter of the plotting width.
        let width_m = (x1 - x0) * mpu;
        let scale_bar_m = round_down(width_m / 4.0);
        let bar_px = (scale_bar_m / mpu * px.per_unit).round() as i32;
        let bar_y = y + 40;
        right.draw_text(
            "Scale",
            &text.clone().pos(Pos::new(HPos::Left, VPos::Top)),
            (10, bar_y - 30),
        )?;
        let bar_px = bar_px.clamp(1, PANEL_WIDTH as i32 - 30);
        right.draw(&Rectangle::new(
            [(12, bar_y), (12 + bar_px / 2, bar_y + 8)],
            BLACK.filled(),
        ))?;
        right.draw(&Rectangle::new(
            [(12 + bar_px / 2, bar_y), (12 + bar_px, bar_y + 8)],
            WHITE.filled(),
        ))?;
        right.draw(&Rectangle::new(
            [(12, bar_y), (12 + bar_px, bar_y + 8)],
            BLACK.stroke_width(1),
        ))?;
        right.draw_text(
            &metres_words(scale_bar_m),
            &text.clone().pos(Pos::new(HPos::Left, VPos::Top)),
            (12, bar_y + 14),
        )?;

        // North arrow: grid north of the working CRS (up on the map).
        let ny = bar_y + 80;
        let nx = 40;
        right.draw(&Polygon::new(
            vec![(nx, ny), (nx - 12, ny + 40), (nx, ny + 30)],
            BLACK.filled(),
        ))?;
        right.draw(&Polygon::new(
            vec![(nx, ny), (nx + 12, ny + 40), (nx, ny + 30)],
            WHITE.filled(),
        ))?;
        right.draw(&PathElement::new(
            vec![
                (nx, ny),
                (nx + 12, ny + 40),
                (nx, ny + 30),
                (nx - 12, ny + 40),
                (nx, ny),
            ],
            BLACK.stroke_width(1),
        ))?;
        right.draw_text(
            "N",
            &TextStyle::from((FONT, 24).into_font())
                .color(&BLACK)
                .pos(Pos::new(HPos::Center, VPos::Bottom)),
            (nx, ny - 4),
        )?;
        right.draw_text(
            "grid north of the",
            &small.clone().pos(Pos::new(HPos::Left, VPos::Top)),
            (nx + 24, ny + 6),
        )?;
        right.draw_text(
            "working CRS",
            &small.clone().pos(Pos::new(HPos::Left, VPos::Top)),
            (nx + 24, ny + 24),
        )?;
        for (i, part) in wrap(&layers.crs_label, 30).iter().take(3).enumerate() {
            right.draw_text(
                part,
                &small.clone().pos(Pos::new(HPos::Left, VPos::Top)),
                (10, ny + 56 + 18 * i as i32),
            )?;
        }
        root.present()?;
        (
            Drawn {
                reference: pick_r.len(),
                target: pick_t.len(),
                controls: pick_c.len(),
                classes: pick_classes.iter().map(Vec::len).collect(),
            },
            scale_bar_m,
        )
    };
    insert_before_end(svg, &drawn_svg);
    Ok(MapFigure {
        svg: String::new(),
        drawn,
        exaggeration,
        scale_bar_m,
    })
}

/// `s` in lines of at most about `n` characters, broken at spaces.
fn wrap(s: &str, n: usize) -> Vec<String> {
    let mut lines: Vec<String> = Vec::new();
    for word in s.split_whitespace() {
        match lines.last_mut() {
            Some(l) if l.chars().count() + 1 + word.chars().count() <= n => {
                l.push(' ');
                l.push_str(word);
            }
            _ => lines.push(word.to_string()),
        }
    }
    lines
}

/// A length in words: `500 m`, `2 km`, `0.05 m`.
pub fn metres_words(m: f64) -> String {
    if m >= 1000.0 {
        format!("{} km", m / 1000.0)
    } else {
        format!("{m} m")
    }
}

/// Puts `extra` just before the closing `</svg>` of `svg`.
fn insert_before_end(svg: &mut String, extra: &str) {
    match svg.rfind("</svg>") {
        Some(at) => svg.insert_str(at, extra),
        None => svg.push_str(extra),
    }
}

/// Draws a histogram of `residuals_m` (metres), with the largest residual allowed
/// (`limit_m`, a solid line) and the RMSE (`rmse_m`, dashed) marked when given.
pub fn histogram(
    residuals_m: &[f64],
    limit_m: Option<f64>,
    rmse_m: Option<f64>,
) -> Result<Histogram, String> {
    let mut svg = String::new();
    let (bin_m, bins) =
        draw_histogram(&mut svg, residuals_m, limit_m, rmse_m).map_err(|e| e.to_string())?;
    Ok(Histogram { svg, bin_m, bins })
}

fn draw_histogram(
    svg: &mut String,
    residuals_m: &[f64],
    limit_m: Option<f64>,
    rmse_m: Option<f64>,
) -> Result<(f64, usize), Failed> {
    let values: Vec<f64> = residuals_m
        .iter()
        .copied()
        .filter(|v| v.is_finite())
        .collect();
    let top = values
        .iter()
        .copied()
        .chain(limit_m)
        .fold(0.0f64, f64::max)
        .max(1e-6);
    let bin_m = round_down(top / 30.0);
    let bins = (top / bin_m).floor() as usize + 1;
    let mut counts = vec![0usize; bins];
    for v in &values {
        counts[((v / bin_m).floor().max(0.0) as usize).min(bins - 1)] += 1;
    }
    let highest = counts.iter().copied().max().unwrap_or(0).max(1) as f64;
    let root =
        SVGBackend::with_string(svg, (HISTOGRAM_WIDTH, HISTOGRAM_HEIGHT)).into_drawing_area();
    root.fill(&WHITE)?;
    let x_top = bins as f64 * bin_m;
    let mut chart = ChartBuilder::on(&root)
        .margin(14)
        .x_label_area_size(46)
        .y_label_area_size(70)
        .build_cartesian_2d(0.0..x_top, 0.0..highest * 1.08)?;
    chart
        .configure_mesh()
        .x_desc("residual (m)")
        .y_desc("control points")
        .x_labels(10)
        .y_labels(6)
        .y_label_formatter(&|v| format!("{v:.0}"))
        .label_style((FONT, 17))
        .axis_desc_style((FONT, 18))
        .light_line_style(TRANSPARENT)
        .bold_line_style(RGBColor(210, 210, 210))
        .draw()?;
    // Grey bars (not a layer's ink, so that no colour means two things on the page).
    let fill = RGBColor(0xc8, 0xc8, 0xc8);
    let edge = CONTROL_INK.colour();
    chart.draw_series(
        counts
            .iter()
            .enumerate()
            .filter(|(_, c)| **c > 0)
            .map(|(i, c)| {
                Rectangle::new(
                    [(i as f64 * bin_m, 0.0), ((i + 1) as f64 * bin_m, *c as f64)],
                    fill.filled(),
                )
            }),
    )?;
    chart.draw_series(
        counts
            .iter()
            .enumerate()
            .filter(|(_, c)| **c > 0)
            .map(|(i, c)| {
                Rectangle::new(
                    [(i as f64 * bin_m, 0.0), ((i + 1) as f64 * bin_m, *c as f64)],
                    edge.stroke_width(1),
                )
            }),
    )?;
    let label = TextStyle::from((FONT, 17).into_font()).color(&BLACK);
    if let Some(l) = limit_m.filter(|l| l.is_finite() && *l > 0.0) {
        chart.draw_series(std::iter::once(PathElement::new(
            vec![(l, 0.0), (l, highest * 1.08)],
            TARGET_INK.colour().stroke_width(2),
        )))?;
        let (x, y) = chart.backend_coord(&(l, highest * 1.04));
        root.draw_text(
            "largest residual allowed",
            &label.clone().pos(Pos::new(HPos::Right, VPos::Center)),
            (x - 6, y),
        )?;
    }
    if let Some(r) = rmse_m.filter(|r| r.is_finite() && *r > 0.0) {
        chart.draw_series(std::iter::once(DashedPathElement::new(
            vec![(r, 0.0), (r, highest * 1.08)],
            6,
            4,
            BLACK.stroke_width(2),
        )))?;
        let (x, y) = chart.backend_coord(&(r, highest * 0.92));
        root.draw_text(
            "RMSE",
            &label.pos(Pos::new(HPos::Left, VPos::Center)),
            (x + 6, y),
        )?;
    }
    root.present()?;
    Ok((bin_m, bins))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Luminance steps: background (white) > reference > target > control points ≥ vectors,
    /// each step at least 0.15 apart (so that the layers stay apart in greyscale), and every
    /// layer has its own marker shape (so that hue is never the only difference).
    #[test]
    fn the_layers_step_down_in_luminance_and_differ_in_shape() {
        let l: Vec<f64> = [REFERENCE_INK, TARGET_INK, CONTROL_INK, VECTOR_INK]
            .iter()
            .map(Ink::luminance)
            .collect();
        assert!(1.0 - l[0] >= 0.15, "{l:?}");
        assert!(l[0] - l[1] >= 0.15, "{l:?}");
        assert!(l[1] - l[2] >= 0.15, "{l:?}");
        assert!(l[2] >= l[3], "{l:?}");
        let shapes: std::collections::HashSet<&str> = INKS.iter().map(|i| i.shape).collect();
        assert_eq!(shapes.len(), INKS.len());
        let classes: std::collections::HashSet<&str> = INKS.iter().map(|i| i.class).collect();
        assert_eq!(classes.len(), INKS.len());
    }

    /// WCAG 2.1's relative luminance at its fixed points: black 0, white 1, and the sRGB
    /// mid-grey #777777 ≈ 0.1845 (the value follows from the WCAG formula; checked by hand).
    #[test]
    fn relative_luminance_at_known_points() {
        let ink = |rgb| Ink { rgb, ..VECTOR_INK };
        assert_eq!(ink((0, 0, 0)).luminance(), 0.0);
        assert!((ink((255, 255, 255)).luminance() - 1.0).abs() < 1e-12);
        assert!((ink((0x77, 0x77, 0x77)).luminance() - 0.1845).abs() < 5e-4);
    }

    #[test]
    fn round_lengths() {
        assert_eq!(round_down(740.0), 500.0);
        assert_eq!(round_down(1999.0), 1000.0);
        assert_eq!(round_down(2000.0), 2000.0);
        assert_eq!(round_down(0.037), 0.02);
        assert_eq!(round_down(7.0), 5.0);
        assert_eq!(round_down(0.0), 1.0);
        assert_eq!(metres_words(2000.0), "2 km");
        assert_eq!(metres_words(500.0), "500 m");
    }

    /// The even sample covers the extent: each quarter of a uniform grid keeps about a quarter.
    #[test]
    fn even_sample_is_spread_over_the_extent() {
        let pts: Vec<[f64; 2]> = (0..10_000)
            .map(|i| [(i % 100) as f64, (i / 100) as f64])
            .collect();
        let pick = even_sample(&pts, 400);
        assert_eq!(pick.len(), 400);
        let mut quads = [0usize; 4];
        for i in &pick {
            let p = pts[*i];
            quads[(p[0] >= 50.0) as usize + 2 * (p[1] >= 50.0) as usize] += 1;
        }
        for q in quads {
            assert!((80..=120).contains(&q), "{quads:?}");
        }
        let distinct: std::collections::HashSet<usize> = pick.iter().copied().collect();
        assert_eq!(distinct.len(), 400);
        assert_eq!(even_sample(&pts[..10], 50).len(), 10);
    }

    #[test]
    fn shares_keep_the_total_under_the_cap() {
        assert_eq!(shares(&[10, 20, 30]), [10, 20, 30]);
        let s = shares(&[100_000, 50_000, 50_000]);
        assert!(s.iter().sum::<usize>() <= MAX_MARKERS);
        assert_eq!(s, [10_000, 5_000, 5_000]);
    }

    fn layers() -> MapLayers {
        let reference: Vec<[f64; 2]> = (0..400)
            .map(|i| {
                [
                    1000.0 + (i % 20) as f64 * 10.0,
                    5000.0 + (i / 20) as f64 * 10.0,
                ]
            })
            .collect();
        let controls: Vec<[f64; 2]> = reference.iter().step_by(2).copied().collect();
        let vectors = controls
            .iter()
            .map(|p| [0.01 * (p[0] - 1100.0) / 100.0, 0.0])
            .collect();
        MapLayers {
            crs_label: "EPSG:32633 (WGS 84 / UTM zone 33N)".into(),
            metres_per_unit: 1.0,
            target: reference.iter().map(|p| [p[0] + 0.3, p[1] - 0.2]).collect(),
            reference,
            controls,
            vectors,
            vector_label: "residual".into(),
            classes: Vec::new(),
        }
    }

    /// One scale on both axes: a square in the working frame is a square in pixels; the scale
    /// bar's length in pixels is its length in metres times the pixels per metre.
    #[test]
    fn the_map_keeps_one_scale_and_draws_every_layer() {
        let mut l = layers();
        // A wide, flat extent: the x range decides the scale.
        l.reference.push([3000.0, 5100.0]);
        let square = [
            [1000.0, 5000.0],
            [1100.0, 5000.0],
            [1100.0, 5100.0],
            [1000.0, 5100.0],
        ];
        let fig = map(
            &l,
            &[AreaShape {
                label: "1",
                outline: &square,
            }],
        )
        .unwrap();
        assert!(fig.svg.starts_with("<svg"));
        assert!(fig.svg.trim_end().ends_with("</svg>"));
        let area = fig
            .svg
            .lines()
            .find(|s| s.starts_with("<path class=\"area\" d=\"M"))
            .unwrap();
        let nums: Vec<i64> = area
            .trim_start_matches("<path class=\"area\" d=\"M")
            .trim_end_matches("Z\"/>")
            .split(['L', ' '])
            .map(|s| s.parse().unwrap())
            .collect();
        let (w, h) = ((nums[2] - nums[0]).abs(), (nums[5] - nums[3]).abs());
        assert!(w > 10 && (w - h).abs() <= 1, "{nums:?}");
        assert_eq!(fig.drawn.reference, 401);
        assert_eq!(fig.drawn.target, 400);
        assert_eq!(fig.drawn.controls, 200);
        // 2.5% of the larger side (2000 m) over the 95th-percentile vector (0.009 m), rounded
        // down to 1-2-5: 5555 → 5000.
        assert_eq!(fig.exaggeration, 5000.0);
        for class in ["ref", "tgt", "cp", "vec", "area"] {
            assert!(fig.svg.contains(&format!("class=\"{class}\"")), "{class}");
        }
        assert!(fig.svg.contains("\nN\n</text>"));
        assert!(
            fig.svg.contains("500 m"),
            "2000 m wide plus margins → 500 m bar"
        );
    }

    /// A map of point classes only: each class is one path in its own ink and shape, in the
    /// legend; the match's layers, being empty, are not.
    #[test]
    fn point_classes_are_drawn_in_their_own_inks_and_only_they_are_in_the_legend() {
        let ink = |class, shape, rgb| Ink {
            class,
            label: "x",
            shape,
            rgb,
        };
        let grid = |dx: f64| -> Vec<[f64; 2]> {
            (0..50)
                .map(|i| [dx + (i % 10) as f64 * 10.0, (i / 10) as f64 * 10.0])
                .collect()
        };
        let l = MapLayers {
            metres_per_unit: 1.0,
            classes: vec![
                PointClass {
                    key: "one".into(),
                    label: "first class".into(),
                    ink: ink("c-one", "ring", (0x11, 0x22, 0x33)),
                    points: grid(0.0),
                },
                PointClass {
                    key: "two".into(),
                    label: "second class".into(),
                    ink: ink("c-two", "cross", (0x44, 0x55, 0x66)),
                    points: grid(500.0),
                },
            ],
            ..MapLayers::default()
        };
        let fig = map(&l, &[]).unwrap();
        assert_eq!(fig.drawn.classes, vec![50, 50]);
        let paths: Vec<&str> = fig
            .svg
            .lines()
            .filter(|s| s.starts_with("<path class=\"c-one\""))
            .collect();
        // The layer and its legend sample.
        assert_eq!(paths.len(), 2, "{paths:?}");
        assert!(paths.iter().all(|p| p.contains("stroke=\"#112233\"")));
        assert_eq!(paths[0].matches("a3 3").count(), 2 * 50);
        assert!(fig.svg.contains("stroke=\"#445566\""));
        assert!(fig.svg.contains("first class") && fig.svg.contains("second class"));
        for absent in ["reference landmarks", "control points", "vectors (×"] {
            assert!(!fig.svg.contains(absent), "{absent}");
        }
    }

    #[test]
    fn a_large_survey_is_thinned_to_the_cap() {
        let reference: Vec<[f64; 2]> = (0..40_000)
            .map(|i| [(i % 200) as f64, (i / 200) as f64])
            .collect();
        let l = MapLayers {
            metres_per_unit: 1.0,
            target: reference.clone(),
            controls: reference[..20_000].to_vec(),
            vectors: vec![[0.1, 0.0]; 20_000],
            reference,
            ..MapLayers::default()
        };
        let fig = map(&l, &[]).unwrap();
        let d = fig.drawn;
        assert!(d.reference + d.target + d.controls <= MAX_MARKERS);
        assert_eq!(d.reference, 8_000);
        assert_eq!(d.controls, 4_000);
        assert!(fig.svg.len() < 1_500_000, "{} bytes", fig.svg.len());
    }

    #[test]
    fn histogram_bins_hold_every_residual() {
        let r: Vec<f64> = (0..1000).map(|i| (i as f64 / 1000.0) * 0.5).collect();
        let h = histogram(&r, Some(0.6), Some(0.29)).unwrap();
        assert_eq!(h.bin_m, 0.02);
        assert_eq!(h.bins, 31);
        assert!(h.svg.contains("largest residual allowed") && h.svg.contains("RMSE"));
        // Every bin of the residuals (0-0.5 m → 25 bins) is a filled bar.
        assert_eq!(h.svg.matches("<rect").count() - 1, 2 * 25);
    }
}
