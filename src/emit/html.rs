//! `report.html`: one self-contained page to look at (inline SVG and CSS; no script, no
//! network, no file beside it needed).
//!
//! **In:** a [`Page`] — what to say, made of plain data so that every front end can fill one:
//! [`match_page`] fills it from an accepted [`MatchOutcome`] (through the same document as
//! `transform.json`), a drift check adds its flagged areas ([`AreaOutline`]) and its
//! verdict, and an epochs library (`emit::epochs`) fills one of its own: tables of one row per
//! epoch ([`Grid`]) and its tracks as point classes on the map. **Out:** the HTML text
//! ([`render`]), or the file ([`write_report`]).
//!
//! The page has, in order: the inputs; the verdict ([`Verdict`]); the key numbers; the
//! transform; the tables ([`Grid`], when given); the accuracy statement (a section with
//! nothing in it is left out); the map ([`super::plot::map`]: reference landmarks,
//! target landmarks transformed, control points and their vectors lengthened by a stated
//! factor, a scale bar of round length, a north arrow that is the working CRS's grid north,
//! and the flagged areas when there are any); the residual histogram; the flagged areas'
//! table (only when given); the cautions; the tool's version and seed.
//!
//! **Every number** on the page is an HTML `<data>` element ([`Number`]) whose `value` holds
//! the exact JSON value (the same text serde_json writes), `data-key` its path in the JSON
//! document it comes from (`rmse_m`, `standard_errors.scale`, `chosen.shift_m.0`) and
//! `data-source` that document (`transform.json`, `control-points.csv` for figures computed
//! from the control points' residuals, `page` for what the page itself chose: points drawn,
//! exaggeration, bin width); its text is that value rounded for reading, in the same unit. So
//! a test (or a script) can check the page against the files beside it.

use super::plot::{self, AreaShape, MapLayers};
use super::{io_err, EmitError};
use crate::fit::Solution;
use crate::outcome::MatchOutcome;
use serde_json::{json, Value};
use std::fmt::Write;
use std::path::Path;

/// The file name.
pub const FILE: &str = "report.html";

/// One number on the page, with where it comes from.
#[derive(Debug, Clone, PartialEq)]
pub struct Number {
    /// Its path in the source document (dot-separated; array items by index).
    pub key: String,
    /// The document it comes from (`transform.json`, `drift.json`, `control-points.csv`,
    /// `page`).
    pub source: String,
    /// The exact value.
    pub value: Value,
    /// What the page shows: the value rounded, same unit.
    pub shown: String,
}

impl Number {
    /// A number of `source` at `key`, shown with `decimals` decimals (integers as they are).
    pub fn new(key: &str, source: &str, value: Value, decimals: usize) -> Number {
        let shown = match &value {
            Value::Number(n) if n.is_f64() => format!("{:.*}", decimals, n.as_f64().unwrap_or(0.0)),
            Value::Number(n) => n.to_string(),
            Value::String(s) => s.clone(),
            Value::Bool(b) => if *b { "yes" } else { "no" }.to_string(),
            other => other.to_string(),
        };
        Number {
            key: key.to_string(),
            source: source.to_string(),
            value,
            shown,
        }
    }

    /// The number at `key` in `doc` (a document named `source`), or `None` when the key is
    /// missing or null (a value JSON cannot hold, such as an infinite one).
    pub fn of(doc: &Value, source: &str, key: &str, decimals: usize) -> Option<Number> {
        let v = lookup(doc, key)?;
        (!v.is_null()).then(|| Number::new(key, source, v.clone(), decimals))
    }

    /// A number the page chose itself (source `page`).
    pub fn page(key: &str, value: impl Into<Value>, decimals: usize) -> Number {
        Number::new(key, "page", value.into(), decimals)
    }
}

/// The value at a dot-separated `key` in `doc` (array items by index).
pub fn lookup<'a>(doc: &'a Value, key: &str) -> Option<&'a Value> {
    key.split('.').try_fold(doc, |v, part| match v {
        Value::Array(items) => items.get(part.parse::<usize>().ok()?),
        _ => v.get(part),
    })
}

/// A piece of a line of text.
#[derive(Debug, Clone, PartialEq)]
pub enum Bit {
    /// Plain text.
    Text(String),
    /// A number.
    Num(Number),
    /// A number as an exponent of ten (`10` with the number raised).
    PowerOfTen(Number),
}

/// A line of text with numbers in it.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Line(pub Vec<Bit>);

impl Line {
    /// An empty line.
    pub fn new() -> Line {
        Line(Vec::new())
    }
    /// Adds text.
    pub fn text(mut self, s: impl Into<String>) -> Line {
        self.0.push(Bit::Text(s.into()));
        self
    }
    /// Adds a number (nothing when `None`).
    pub fn num(mut self, n: Option<Number>) -> Line {
        if let Some(n) = n {
            self.0.push(Bit::Num(n));
        }
        self
    }
    /// Adds 10 raised to a number.
    pub fn power_of_ten(mut self, n: Option<Number>) -> Line {
        if let Some(n) = n {
            self.0.push(Bit::PowerOfTen(n));
        }
        self
    }
}

/// One row of a table: what, the number (with its standard error when it has one), a note.
#[derive(Debug, Clone, PartialEq)]
pub struct Row {
    /// What the number is.
    pub label: String,
    /// The number.
    pub number: Number,
    /// Its unit, shown after it (empty for none).
    pub unit: String,
    /// Its standard error, same unit.
    pub se: Option<Number>,
    /// A note.
    pub note: Line,
}

impl Row {
    /// A row for the number at `key` of `doc` (`None` when the key is missing or null).
    pub fn of(
        label: &str,
        doc: &Value,
        source: &str,
        key: &str,
        decimals: usize,
        unit: &str,
    ) -> Option<Row> {
        Some(Row {
            label: label.to_string(),
            number: Number::of(doc, source, key, decimals)?,
            unit: unit.to_string(),
            se: None,
            note: Line::new(),
        })
    }
    /// With the standard error at `key` of `doc`.
    pub fn se(mut self, doc: &Value, source: &str, key: &str, decimals: usize) -> Row {
        self.se = Number::of(doc, source, key, decimals);
        self
    }
    /// With a note.
    pub fn note(mut self, note: Line) -> Row {
        self.note = note;
        self
    }
}

/// What the run concluded.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum VerdictKind {
    /// A match: a consistent transform was accepted.
    Accepted,
    /// A drift check: within tolerance.
    Within,
    /// A drift check: tolerance exceeded.
    Exceeded,
}

impl VerdictKind {
    /// The word the page shows (the verdict never rests on colour alone).
    pub fn word(self) -> &'static str {
        match self {
            VerdictKind::Accepted => "ACCEPTED",
            VerdictKind::Within => "WITHIN TOLERANCE",
            VerdictKind::Exceeded => "TOLERANCE EXCEEDED",
        }
    }
    fn class(self) -> &'static str {
        match self {
            VerdictKind::Accepted => "accepted",
            VerdictKind::Within => "within",
            VerdictKind::Exceeded => "exceeded",
        }
    }
}

/// The verdict: its kind, a headline and the lines that back it.
#[derive(Debug, Clone, PartialEq)]
pub struct Verdict {
    /// Which.
    pub kind: VerdictKind,
    /// One sentence.
    pub headline: String,
    /// The numbers behind it.
    pub lines: Vec<Line>,
}

/// A flagged area (a drift check's local drift area): its outline in the map's working frame,
/// a short label drawn on the map, and its numbers for the table.
#[derive(Debug, Clone, PartialEq)]
pub struct AreaOutline {
    /// Short label (drawn at the area's centre on the map and heading its row), e.g. "1".
    pub label: String,
    /// The outline's vertices, working frame (not closed).
    pub outline: Vec<[f64; 2]>,
    /// Its numbers (centre, shift, landmarks, significance...).
    pub rows: Vec<Row>,
}

/// A table with a row per item (an epoch, a closure check) and a column per figure, under a
/// heading of its own; each cell is a [`Line`] (text and tagged numbers).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Grid {
    /// The section's `id` (e.g. `epoch-transforms`).
    pub id: String,
    /// Its heading.
    pub title: String,
    /// The column heads.
    pub head: Vec<String>,
    /// The rows, a cell a column.
    pub rows: Vec<Vec<Line>>,
    /// Notes under the table.
    pub notes: Vec<Line>,
}

/// Everything the page shows.
#[derive(Debug, Clone)]
pub struct Page {
    /// Title (also the heading), e.g. "tiemark — control points found".
    pub title: String,
    /// The inputs, one line each.
    pub inputs: Vec<Line>,
    /// The verdict.
    pub verdict: Verdict,
    /// The key numbers.
    pub key_numbers: Vec<Row>,
    /// The transform.
    pub transform: Vec<Row>,
    /// Notes under the transform (conventions).
    pub transform_notes: Vec<Line>,
    /// Tables shown after the transform, each its own section (an epochs library's
    /// transforms, closure checks and residuals per epoch); empty for a match.
    pub grids: Vec<Grid>,
    /// The accuracy statement.
    pub accuracy: Vec<Row>,
    /// Notes under it (where the figures come from, warnings).
    pub accuracy_notes: Vec<Line>,
    /// The map's layers.
    pub map: MapLayers,
    /// Notes under the map (besides the ones the page makes about what it drew).
    pub map_notes: Vec<Line>,
    /// Residuals for the histogram, metres (no histogram when empty).
    pub residuals_m: Vec<f64>,
    /// The largest residual allowed, metres (a line on the histogram).
    pub residual_limit_m: Option<f64>,
    /// The RMSE, metres (a dashed line on the histogram).
    pub rmse_m: Option<f64>,
    /// Flagged areas (a drift check's local drift areas); their section shows only when
    /// there are some.
    pub areas: Vec<AreaOutline>,
    /// The cautions.
    pub cautions: Vec<String>,
    /// The last lines (tool, version, seed).
    pub footer: Vec<Line>,
}

/// Escapes text for HTML (element content and quoted attributes).
pub fn escape(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&#39;"),
            c => o.push(c),
        }
    }
    o
}

fn data(n: &Number) -> String {
    format!(
        "<data value=\"{}\" data-key=\"{}\" data-source=\"{}\">{}</data>",
        escape(&n.value.to_string()),
        escape(&n.key),
        escape(&n.source),
        escape(&n.shown)
    )
}

fn line(l: &Line) -> String {
    l.0.iter()
        .map(|b| match b {
            Bit::Text(t) => escape(t),
            Bit::Num(n) => data(n),
            Bit::PowerOfTen(n) => format!("10<sup>{}</sup>", data(n)),
        })
        .collect()
}

fn table(rows: &[Row]) -> String {
    let mut o = String::from("<table class=\"numbers\">\n");
    for r in rows {
        let se = match &r.se {
            Some(se) => format!(" ± {}", data(se)),
            None => String::new(),
        };
        let unit = if r.unit.is_empty() {
            String::new()
        } else {
            format!(" {}", escape(&r.unit))
        };
        let _ = writeln!(
            o,
            "<tr><th scope=\"row\">{}</th><td class=\"num\">{}{se}{unit}</td><td class=\"note\">{}</td></tr>",
            escape(&r.label),
            data(&r.number),
            line(&r.note)
        );
    }
    o.push_str("</table>\n");
    o
}

fn grid(g: &Grid) -> String {
    let mut o = format!(
        "<section id=\"{}\">\n<h2>{}</h2>\n<table class=\"grid\">\n<thead><tr>",
        escape(&g.id),
        escape(&g.title)
    );
    for h in &g.head {
        let _ = write!(o, "<th scope=\"col\">{}</th>", escape(h));
    }
    o.push_str("</tr></thead>\n<tbody>\n");
    for r in &g.rows {
        o.push_str("<tr>");
        for (i, c) in r.iter().enumerate() {
            let tag = if i == 0 { "th scope=\"row\"" } else { "td" };
            let _ = write!(o, "<{tag}>{}</{}>", line(c), &tag[..2]);
        }
        o.push_str("</tr>\n");
    }
    o.push_str("</tbody>\n</table>\n");
    o.push_str(&paragraphs(&g.notes));
    o.push_str("</section>\n");
    o
}

fn paragraphs(lines: &[Line]) -> String {
    lines
        .iter()
        .map(|l| format!("<p>{}</p>\n", line(l)))
        .collect()
}

const STYLE: &str = "\
:root{color-scheme:light}\n\
body{font-family:system-ui,-apple-system,'Segoe UI',Roboto,'DejaVu Sans',sans-serif;margin:0 auto;max-width:1060px;padding:16px 22px 40px;color:#111;background:#fff;line-height:1.45}\n\
h1{font-size:1.55em;margin:.3em 0 .2em}\n\
h2{font-size:1.2em;margin:1.4em 0 .4em;border-bottom:1px solid #bbb;padding-bottom:.15em}\n\
p{margin:.35em 0}\n\
.inputs p{margin:.1em 0;color:#333}\n\
.verdict{border:2px solid #111;border-left-width:12px;padding:.5em 1em;margin:1em 0}\n\
.verdict .word{font-weight:bold;letter-spacing:.06em}\n\
.verdict.accepted,.verdict.within{border-color:#111}\n\
.verdict.exceeded{border-color:#d55e00;border-style:double;border-left-style:solid}\n\
table.numbers{border-collapse:collapse;margin:.3em 0 .6em}\n\
table.numbers th{text-align:left;font-weight:normal;padding:.18em 1.2em .18em 0;vertical-align:top}\n\
table.numbers td{padding:.18em 1.2em .18em 0;vertical-align:top}\n\
td.num{font-variant-numeric:tabular-nums;white-space:nowrap}\n\
td.note{color:#444;font-size:.92em}\n\
table.grid{border-collapse:collapse;margin:.3em 0 .6em;font-size:.94em}\n\
table.grid th,table.grid td{border:1px solid #bbb;padding:.2em .6em;text-align:left;vertical-align:top}\n\
table.grid thead th{background:#eee;font-weight:bold}\n\
table.grid tbody th{font-weight:normal}\n\
table.grid td{font-variant-numeric:tabular-nums}\n\
figure{margin:.6em 0}\n\
figure svg{width:100%;height:auto;border:1px solid #ccc}\n\
figcaption{font-size:.92em;color:#333;margin-top:.3em}\n\
.cautions{border:1px solid #111;padding:.3em 1em;background:#f4f4f4}\n\
.cautions li{margin:.25em 0}\n\
footer{margin-top:2em;color:#555;font-size:.88em}\n\
@media print{body{max-width:none}figure{break-inside:avoid}}\n";

/// The page's HTML.
pub fn render(page: &Page) -> String {
    let mut o = String::new();
    let _ = write!(
        o,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>{}</title>\n<style>\n{STYLE}{}</style>\n</head>\n<body>\n",
        escape(&page.title),
        plot::layer_css()
    );
    let _ = writeln!(o, "<header>\n<h1>{}</h1>", escape(&page.title));
    let _ = writeln!(
        o,
        "<div class=\"inputs\">\n{}</div>\n</header>",
        paragraphs(&page.inputs)
    );

    let v = &page.verdict;
    let _ = writeln!(
        o,
        "<section class=\"verdict {}\" id=\"verdict\">\n<p><span class=\"word\">{}</span> — {}</p>\n{}</section>",
        v.kind.class(),
        v.kind.word(),
        escape(&v.headline),
        paragraphs(&v.lines)
    );

    let _ = writeln!(
        o,
        "<section id=\"key-numbers\">\n<h2>Key numbers</h2>\n{}</section>",
        table(&page.key_numbers)
    );
    // A section with nothing in it is left out (an epochs page has no single transform).
    if !(page.transform.is_empty() && page.transform_notes.is_empty()) {
        let _ = writeln!(
            o,
            "<section id=\"transform\">\n<h2>Transform</h2>\n{}{}</section>",
            table(&page.transform),
            paragraphs(&page.transform_notes)
        );
    }
    for g in &page.grids {
        o.push_str(&grid(g));
    }
    if !(page.accuracy.is_empty() && page.accuracy_notes.is_empty()) {
        let _ = writeln!(
            o,
            "<section id=\"accuracy\">\n<h2>Accuracy</h2>\n{}{}</section>",
            table(&page.accuracy),
            paragraphs(&page.accuracy_notes)
        );
    }

    // The map.
    let shapes: Vec<AreaShape> = page
        .areas
        .iter()
        .map(|a| AreaShape {
            label: &a.label,
            outline: &a.outline,
        })
        .collect();
    let _ = writeln!(o, "<section id=\"map\">\n<h2>Map</h2>");
    match plot::map(&page.map, &shapes) {
        Ok(fig) => {
            let m = &page.map;
            let drawn = |key: &str, k: usize, n: usize, what: &str| {
                Line::new()
                    .num(Some(Number::page(&format!("map.drawn.{key}"), k, 0)))
                    .text(" of ")
                    .num(Some(Number::page(&format!("map.total.{key}"), n, 0)))
                    .text(format!(" {what}"))
            };
            // What was drawn, layer by layer (a layer with no points is not mentioned).
            let mut parts: Vec<Line> = [
                (
                    "reference",
                    fig.drawn.reference,
                    m.reference.len(),
                    "reference landmarks (squares)",
                ),
                (
                    "target",
                    fig.drawn.target,
                    m.target.len(),
                    "target landmarks transformed onto the reference (plus signs)",
                ),
                (
                    "controls",
                    fig.drawn.controls,
                    m.controls.len(),
                    "control points (dots)",
                ),
            ]
            .into_iter()
            .filter(|(_, _, n, _)| *n > 0)
            .map(|(key, k, n, what)| drawn(key, k, n, what))
            .collect();
            parts.extend(m.classes.iter().zip(&fig.drawn.classes).map(|(c, k)| {
                drawn(
                    &format!("classes.{}", c.key),
                    *k,
                    c.points.len(),
                    &format!("{} ({}s)", c.label, c.ink.shape),
                )
            }));
            let thinned = fig.drawn.reference < m.reference.len()
                || fig.drawn.target < m.target.len()
                || fig.drawn.controls < m.controls.len()
                || m.classes
                    .iter()
                    .zip(&fig.drawn.classes)
                    .any(|(c, k)| *k < c.points.len());
            let mut caption = Line::new().text("Drawn: ");
            let last = parts.len().saturating_sub(1);
            for (i, p) in parts.into_iter().enumerate() {
                caption.0.extend(p.0);
                caption = caption.text(if i == last { "." } else { ", " });
            }
            let mut notes = vec![caption];
            if thinned {
                notes.push(
                    Line::new()
                        .text("The map draws at most ")
                        .num(Some(Number::page("map.max_markers", plot::MAX_MARKERS, 0)))
                        .text(" markers: each layer was thinned in proportion to its size to a spatially even sample (every k-th point along a Morton curve). The files beside this page hold every point."),
                );
            }
            let scale_bar = Line::new()
                .text("Scale bar: ")
                .num(Some(Number::page("map.scale_bar_m", fig.scale_bar_m, 0)))
                .text(" m.");
            if m.controls.is_empty() {
                notes.push(scale_bar);
            } else {
                let mut l = Line::new()
                    .text(format!(
                        "Each line runs from a control point along its {} vector, lengthened ",
                        if m.vector_label.is_empty() {
                            "residual"
                        } else {
                            &m.vector_label
                        }
                    ))
                    .num(Some(Number::page("map.exaggeration", fig.exaggeration, 0)))
                    .text(" times. ");
                l.0.extend(scale_bar.0);
                notes.push(l);
            }
            notes.push(Line::new().text(format!(
                "Up is grid north of the working CRS, {}; true north differs from it by the meridian convergence. Both axes have one scale.",
                m.crs_label
            )));
            notes.extend(page.map_notes.iter().cloned());
            let _ = writeln!(
                o,
                "<figure>\n{}<figcaption>\n{}</figcaption>\n</figure>",
                fig.svg,
                paragraphs(&notes)
            );
        }
        Err(e) => {
            let _ = writeln!(o, "<p>The map could not be drawn: {}.</p>", escape(&e));
        }
    }
    let _ = writeln!(o, "</section>");

    // The histogram.
    let _ = writeln!(o, "<section id=\"residuals\">\n<h2>Residuals</h2>");
    let histogram = if page.residuals_m.is_empty() {
        Err("there are no residuals".to_string())
    } else {
        plot::histogram(&page.residuals_m, page.residual_limit_m, page.rmse_m)
    };
    match histogram {
        Ok(h) => {
            let mut l = Line::new()
                .num(Some(Number::page(
                    "histogram.count",
                    page.residuals_m.len(),
                    0,
                )))
                .text(" control points in bins of ")
                .num(Some(Number::page("histogram.bin_m", h.bin_m, 3)))
                .text(" m.");
            if let Some(limit) = page.residual_limit_m {
                l = l
                    .text(" Solid line: the largest residual a control point may have (")
                    .num(Some(Number::page("histogram.limit_m", limit, 3)))
                    .text(" m).");
            }
            if let Some(r) = page.rmse_m {
                l = l
                    .text(" Dashed line: the RMSE (")
                    .num(Some(Number::page("histogram.rmse_m", r, 3)))
                    .text(" m).");
            }
            let _ = writeln!(
                o,
                "<figure>\n{}<figcaption>\n{}</figcaption>\n</figure>",
                h.svg,
                paragraphs(&[l])
            );
        }
        Err(e) => {
            let _ = writeln!(
                o,
                "<p>The histogram could not be drawn: {}.</p>",
                escape(&e)
            );
        }
    }
    let _ = writeln!(o, "</section>");

    if !page.areas.is_empty() {
        let _ = writeln!(o, "<section id=\"areas\">\n<h2>Flagged areas</h2>");
        for a in &page.areas {
            let _ = writeln!(o, "<h3>Area {}</h3>\n{}", escape(&a.label), table(&a.rows));
        }
        let _ = writeln!(o, "</section>");
    }

    let _ = writeln!(
        o,
        "<section class=\"cautions\" id=\"cautions\">\n<h2>Cautions</h2>\n<ul>"
    );
    for c in &page.cautions {
        let _ = writeln!(o, "<li>{}</li>", escape(c));
    }
    let _ = writeln!(o, "</ul>\n</section>");
    let _ = writeln!(
        o,
        "<footer>\n{}</footer>\n</body>\n</html>",
        paragraphs(&page.footer)
    );
    o
}

/// The cautions every page carries: [`crate::report::CAUTION`] (verify against independent
/// checkpoints; defer to local regulations and licensed surveyors), and that accuracy measured
/// on the fitting points overstates it.
pub fn cautions() -> Vec<String> {
    vec![
        crate::report::CAUTION.into(),
        "Accuracy measured on the points a transform was fitted on overstates it: state the accuracy from independent checkpoints (surveyed marks kept out of the fit).".into(),
    ]
}

const TRANSFORM: &str = "transform.json";
const POINTS: &str = "control-points.csv";

/// The page of an accepted match.
pub fn match_page(outcome: &MatchOutcome, solution: &Solution) -> Page {
    let doc = super::json::transform_document(outcome, solution);
    let d = &doc;
    let mpu = outcome.metres_per_unit();
    let t = solution.fit.transform;
    let num = |key: &str, decimals: usize| Number::of(d, TRANSFORM, key, decimals);

    let mut residuals: Vec<f64> = solution.pairs.iter().map(|p| p.residual * mpu).collect();
    let mut sorted = residuals.clone();
    sorted.sort_by(f64::total_cmp);
    let pick =
        |q: f64| sorted[((sorted.len() as f64 * q) as usize).min(sorted.len().saturating_sub(1))];

    let input = |role: &str, set: &crate::ingest::LandmarkSet, crs: String| {
        Line::new()
            .text(format!(
                "{role}: {} ({}): ",
                set.source.display(),
                set.what()
            ))
            .num(num(&format!("inputs.{}.landmarks", role), 0))
            .text(format!(" landmarks, {crs}"))
    };
    let target_crs = match &outcome.frame.target_crs {
        Some(c) => c.label(),
        None => match outcome.frame.target_unit {
            Some(u) => format!("local grid, unit {} (no CRS)", u.name()),
            None => "local grid (no CRS; unit not declared)".into(),
        },
    };
    let inputs = vec![
        input(
            "reference",
            &outcome.reference,
            outcome.frame.reference_crs.label(),
        ),
        input("target", &outcome.target, target_crs),
        Line::new().text(format!(
            "working CRS: {} — {}",
            outcome.frame.crs.label(),
            outcome.frame.chosen_because
        )),
    ];

    let mut verdict_lines = Vec::new();
    if lookup(d, "accuracy.nssda_95_m").is_some() {
        let source = lookup(d, "accuracy.source_text")
            .and_then(Value::as_str)
            .unwrap_or("");
        verdict_lines.push(
            Line::new()
                .text("Horizontal accuracy at 95% (NSSDA): ")
                .num(num("accuracy.nssda_95_m", 3))
                .text(format!(" m, from {source}.")),
        );
    }
    let verdict = Verdict {
        kind: VerdictKind::Accepted,
        headline: "a consistent transform was found; its control points are written beside this page.".into(),
        lines: vec![
            Line::new()
                .num(num("control_points", 0))
                .text(" control points, RMSE ")
                .num(num("rmse_m", 3))
                .text(" m."),
            Line::new()
                .text("Of ")
                .num(num("significance.trials", 0))
                .text(" target landmarks over the reference, ")
                .num(num("significance.paired_within_search_radius", 0))
                .text(" were paired within the search radius; chance alone would explain that with an expected number of false detections of at most ")
                .power_of_ten(num("significance.log10_false_alarms", 1))
                .text("."),
        ]
        .into_iter()
        .chain(verdict_lines)
        .collect(),
    };

    let mut key_numbers: Vec<Row> = [
        Row::of("control points", d, TRANSFORM, "control_points", 0, ""),
        Row::of("RMSE", d, TRANSFORM, "rmse_m", 3, "m").map(|r| {
            r.note(Line::new().text("radial, over the control points the transform was fitted on"))
        }),
        Row::of("sigma per coordinate", d, TRANSFORM, "sigma_m", 3, "m"),
        Row::of(
            "largest residual allowed",
            d,
            TRANSFORM,
            "thresholds.max_residual_m",
            3,
            "m",
        ),
        Row::of(
            "search radius",
            d,
            TRANSFORM,
            "thresholds.search_radius_m",
            3,
            "m",
        ),
        Row::of(
            "reference median spacing",
            d,
            TRANSFORM,
            "thresholds.reference_spacing_m",
            3,
            "m",
        ),
    ]
    .into_iter()
    .flatten()
    .collect();
    if !sorted.is_empty() {
        let stats = [
            ("median residual", "residual_m.median", pick(0.5)),
            ("95th-percentile residual", "residual_m.p95", pick(0.95)),
            (
                "largest residual",
                "residual_m.max",
                sorted[sorted.len() - 1],
            ),
        ];
        for (label, key, v) in stats {
            key_numbers.push(Row {
                label: label.into(),
                number: Number::new(key, POINTS, json!(v), 3),
                unit: "m".into(),
                se: None,
                note: Line::new().text("of the residual_m column"),
            });
        }
    }

    let mut transform: Vec<Row> = [
        Row::of("scale", d, TRANSFORM, "scale", 9, "")
            .map(|r| r.se(d, TRANSFORM, "standard_errors.scale", 9)),
        Row::of("rotation", d, TRANSFORM, "rotation_deg", 6, "°").map(|r| {
            r.se(d, TRANSFORM, "standard_errors.rotation_deg", 6)
                .note(Line::new().text("counter-clockwise"))
        }),
        Row::of("translation x", d, TRANSFORM, "translation_x", 3, "").map(|r| {
            r.se(d, TRANSFORM, "standard_errors.translation_x", 3)
                .note(Line::new().text("working units; standard error at the working origin"))
        }),
        Row::of("translation y", d, TRANSFORM, "translation_y", 3, "")
            .map(|r| r.se(d, TRANSFORM, "standard_errors.translation_y", 3)),
        Row::of(
            "shift east at the target's centre",
            d,
            TRANSFORM,
            "chosen.shift_m.0",
            3,
            "m",
        ),
        Row::of(
            "shift north at the target's centre",
            d,
            TRANSFORM,
            "chosen.shift_m.1",
            3,
            "m",
        ),
        Row::of("scale error", d, TRANSFORM, "chosen.scale_ppm", 1, "ppm")
            .map(|r| r.note(Line::new().text("against the unit's own scale"))),
    ]
    .into_iter()
    .flatten()
    .collect();
    if let Some(r) = Row::of(
        "grid scale",
        d,
        TRANSFORM,
        "local_grid.grid_scale_ppm",
        3,
        "ppm",
    ) {
        transform.push(
            r.se(d, TRANSFORM, "local_grid.grid_scale_ppm_se", 3)
                .note(Line::new().text("the local grid's scale with its declared unit taken out")),
        );
    }
    let transform_notes = vec![Line::new().text(
        "The similarity maps target working coordinates to reference working coordinates: x' = scale·(cos t·x − sin t·y) + translation x, y' = scale·(sin t·x + cos t·y) + translation y, t the rotation. transform.json holds every figure with its full precision.",
    )];

    let (accuracy, accuracy_notes) = accuracy_rows(d);
    // The trade's statement at the centroid, when there is one, comes first and replaces the
    // shift at the target's centre.
    let statement = statement_rows(d);
    if !statement.is_empty() {
        transform.retain(|r| !r.number.key.starts_with("chosen."));
        transform.splice(0..0, statement);
    }

    let reference: &[[f64; 2]] = &outcome.frame.reference;
    let controls: Vec<[f64; 2]> = solution
        .pairs
        .iter()
        .map(|p| reference[p.reference as usize])
        .collect();
    let vectors: Vec<[f64; 2]> = solution
        .pairs
        .iter()
        .map(|p| {
            let r = reference[p.reference as usize];
            let m = t.apply(outcome.frame.target[p.target as usize]);
            [m[0] - r[0], m[1] - r[1]]
        })
        .collect();
    let map = MapLayers {
        crs_label: outcome.frame.crs.label(),
        metres_per_unit: mpu,
        reference: reference.to_vec(),
        target: outcome.frame.target.iter().map(|p| t.apply(*p)).collect(),
        controls,
        vectors,
        vector_label: "residual".into(),
        classes: Vec::new(),
    };
    let map_notes = vec![Line::new().text(
        "A residual vector points from the reference's landmark to where the transform puts the target's.",
    )];

    let footer = vec![Line::new()
        .text(format!("tiemark {}, seed ", env!("CARGO_PKG_VERSION")))
        .num(num("seed", 0))
        .text(". Made from the files beside this page; it needs no network and no script.")];

    residuals.retain(|v| v.is_finite());
    Page {
        title: "tiemark — control points found".into(),
        inputs,
        verdict,
        key_numbers,
        transform,
        transform_notes,
        grids: Vec::new(),
        accuracy,
        accuracy_notes,
        map,
        map_notes,
        residuals_m: residuals,
        residual_limit_m: Some(solution.max_residual * mpu),
        rmse_m: Some(solution.fit.rmse * mpu),
        areas: Vec::new(),
        cautions: cautions(),
        footer,
    }
}

/// The transform stated at the control points' centroid, from the document's `at_centroid`
/// member (the accuracy statement, [`crate::accuracy`]); nothing when the document has none.
pub fn statement_rows(d: &Value) -> Vec<Row> {
    if lookup(d, "at_centroid").is_none() {
        return Vec::new();
    }
    let stated = |label: &str, key: &str, decimals: usize, unit: &str| {
        let significant = Number::of(d, TRANSFORM, &format!("at_centroid.{key}.significant"), 0);
        Row::of(
            label,
            d,
            TRANSFORM,
            &format!("at_centroid.{key}.value"),
            decimals,
            unit,
        )
        .map(|r| {
            r.se(d, TRANSFORM, &format!("at_centroid.{key}.se"), decimals)
                .note(
                    Line::new()
                        .text("differs from zero at 95%: ")
                        .num(significant),
                )
        })
    };
    [
        Row::of(
            "stated at reference x",
            d,
            TRANSFORM,
            "at_centroid.reference_x",
            3,
            "",
        )
        .map(|r| r.note(Line::new().text("the control points' centroid, reference CRS"))),
        Row::of(
            "stated at reference y",
            d,
            TRANSFORM,
            "at_centroid.reference_y",
            3,
            "",
        ),
        stated("shift east at the centroid", "shift_east_m", 3, "m"),
        stated("shift north at the centroid", "shift_north_m", 3, "m"),
        stated(
            "rotation at the centroid",
            "rotation_arcsec",
            2,
            "″ (counter-clockwise)",
        ),
        stated("scale error at the centroid", "scale_ppm", 2, "ppm"),
    ]
    .into_iter()
    .flatten()
    .collect()
}

/// The accuracy statement's rows and notes: from the document's `accuracy` member (RMSE_x,
/// RMSE_y, RMSE_r, the NSSDA's horizontal accuracy at 95% with its rule, ASPRS RMSE_H, where
/// the figures come from and the warnings) when it has one; else the fit's own RMSE and σ̂,
/// said to come from the fitting points.
pub fn accuracy_rows(d: &Value) -> (Vec<Row>, Vec<Line>) {
    let num = |key: &str, decimals: usize| Number::of(d, TRANSFORM, key, decimals);
    let text = |key: &str| {
        lookup(d, key)
            .and_then(Value::as_str)
            .unwrap_or("")
            .to_string()
    };
    if lookup(d, "accuracy").is_some() {
        let rows: Vec<Row> = [
            Row::of(
                "checkpoints or points behind the figures",
                d,
                TRANSFORM,
                "accuracy.n",
                0,
                "",
            ),
            Row::of("RMSE x", d, TRANSFORM, "accuracy.rmse_x_m", 3, "m"),
            Row::of("RMSE y", d, TRANSFORM, "accuracy.rmse_y_m", 3, "m"),
            Row::of("RMSE r (radial)", d, TRANSFORM, "accuracy.rmse_r_m", 3, "m"),
            Row::of(
                "horizontal accuracy at 95% (NSSDA)",
                d,
                TRANSFORM,
                "accuracy.nssda_95_m",
                3,
                "m",
            )
            .map(|r| {
                r.note(Line::new().text(format!(
                    "{}; {}",
                    text("accuracy.nssda_rule_text"),
                    text("accuracy.nssda_standard")
                )))
            }),
            Row::of(
                "RMSE_H (ASPRS)",
                d,
                TRANSFORM,
                "accuracy.asprs_rmse_h_m",
                3,
                "m",
            )
            .map(|r| r.note(Line::new().text(text("accuracy.asprs_standard")))),
            Row::of(
                "RMSE r of the fitting points",
                d,
                TRANSFORM,
                "accuracy.fit_residuals.rmse_r_m",
                3,
                "m",
            )
            .map(|r| {
                r.note(Line::new().text(
                    "for comparison: the residuals of the points the transform was fitted on",
                ))
            }),
        ]
        .into_iter()
        .flatten()
        .collect();
        let independent = lookup(d, "accuracy.independent").and_then(Value::as_bool) == Some(true);
        let mut notes = vec![Line::new().text(format!(
            "Source of the figures: {}.",
            text("accuracy.source_text")
        ))];
        if !independent {
            notes.push(Line::new().text("These points are not independent of the fit, which overstates the accuracy: use --checkpoints or --holdout for a figure that can be stated."));
        }
        if let Some(Value::Array(warnings)) = lookup(d, "accuracy.warnings") {
            for w in warnings.iter().filter_map(Value::as_str) {
                notes.push(Line::new().text(format!("Warning: {w}")));
            }
        }
        return (rows, notes);
    }
    let rows = [
        Row::of("RMSE (radial)", d, TRANSFORM, "rmse_m", 3, "m"),
        Row::of("sigma per coordinate", d, TRANSFORM, "sigma_m", 3, "m"),
        Row::of(
            "position at the control points' centroid",
            d,
            TRANSFORM,
            "centroid.position_se_m",
            4,
            "m",
        )
        .map(|r| {
            r.note(
                Line::new().text("standard error per coordinate of the transformed position there"),
            )
        }),
    ]
    .into_iter()
    .flatten()
    .collect();
    let notes = vec![Line::new()
        .text("These figures come from the residuals of the ")
        .num(num("control_points", 0))
        .text(" control points the transform was fitted on, which overstates the accuracy; an accuracy that can be stated needs independent checkpoints.")];
    (rows, notes)
}

/// Writes the page of an accepted match to `path`.
pub fn write_report(
    outcome: &MatchOutcome,
    solution: &Solution,
    path: &Path,
) -> Result<(), EmitError> {
    let text = render(&match_page(outcome, solution));
    std::fs::write(path, text).map_err(io_err(path))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn page() -> Page {
        let doc = json!({"rmse_m": 0.123456789, "control_points": 42, "chosen": {"shift_m": [1.5, -2.25]}, "name": "a<b"});
        let reference: Vec<[f64; 2]> = (0..50)
            .map(|i| [(i % 10) as f64 * 5.0, (i / 10) as f64 * 5.0])
            .collect();
        Page {
            title: "tiemark — test & check".into(),
            inputs: vec![Line::new().text("reference: r.gpkg")],
            verdict: Verdict {
                kind: VerdictKind::Exceeded,
                headline: "moved".into(),
                lines: vec![Line::new().num(Number::of(&doc, "drift.json", "chosen.shift_m.1", 2))],
            },
            key_numbers: vec![Row::of("RMSE", &doc, TRANSFORM, "rmse_m", 3, "m").unwrap()],
            transform: vec![Row::of("name", &doc, TRANSFORM, "name", 0, "").unwrap()],
            transform_notes: vec![],
            grids: vec![],
            accuracy: vec![],
            accuracy_notes: vec![],
            map: MapLayers {
                crs_label: "EPSG:32633".into(),
                metres_per_unit: 1.0,
                target: reference.clone(),
                controls: reference.clone(),
                vectors: vec![[0.01, 0.0]; 50],
                reference,
                vector_label: "drift".into(),
                classes: vec![],
            },
            map_notes: vec![],
            residuals_m: vec![0.01, 0.02, 0.05],
            residual_limit_m: Some(0.1),
            rmse_m: Some(0.03),
            areas: vec![AreaOutline {
                label: "1".into(),
                outline: vec![[0.0, 0.0], [10.0, 0.0], [10.0, 10.0]],
                rows: vec![Row {
                    label: "shift east".into(),
                    number: Number::page("local_areas.0.shift_east_m", 0.5, 2),
                    unit: "m".into(),
                    se: Some(Number::page("local_areas.0.shift_east_se_m", 0.05, 2)),
                    note: Line::new(),
                }],
            }],
            cautions: cautions(),
            footer: vec![],
        }
    }

    #[test]
    fn lookup_follows_objects_and_arrays() {
        let doc = json!({"a": {"b": [10, {"c": 3.5}]}});
        assert_eq!(lookup(&doc, "a.b.0"), Some(&json!(10)));
        assert_eq!(lookup(&doc, "a.b.1.c"), Some(&json!(3.5)));
        assert_eq!(lookup(&doc, "a.x"), None);
        assert_eq!(lookup(&doc, "a.b.7"), None);
        assert!(Number::of(&json!({"n": null}), "x", "n", 2).is_none());
    }

    /// Every number is a `<data>` element whose value is the exact JSON text and whose text
    /// is that value rounded; text is escaped; the flagged areas and cautions show.
    #[test]
    fn numbers_are_tagged_with_their_exact_values() {
        let html = render(&page());
        assert!(html.contains(
            "<data value=\"0.123456789\" data-key=\"rmse_m\" data-source=\"transform.json\">0.123</data> m"
        ));
        assert!(
            html.contains("data-key=\"chosen.shift_m.1\" data-source=\"drift.json\">-2.25</data>")
        );
        assert!(html.contains("<data value=\"&quot;a&lt;b&quot;\" data-key=\"name\""));
        assert!(html.contains("<title>tiemark — test &amp; check</title>"));
        assert!(html.contains("TOLERANCE EXCEEDED"));
        assert!(html.contains("<h2>Flagged areas</h2>") && html.contains("<h3>Area 1</h3>"));
        assert!(html.contains("class=\"area\""));
        assert!(html.contains("drift vector, lengthened"));
        assert!(html.contains("independent checkpoints") && html.contains("licensed surveyors"));
        assert!(html.contains("grid north of the working CRS, EPSG:32633"));
    }

    /// Self-contained: no script, no external reference of any kind.
    #[test]
    fn the_page_needs_nothing_beside_it() {
        let html = render(&page());
        for banned in [
            "<script", "<link", "<img", "<iframe", "src=", "href=", "url(http", "@import",
            "http://", "https://",
        ] {
            let allowed = banned == "http://"
                && html.matches(banned).count()
                    == html.matches("http://www.w3.org/2000/svg").count();
            assert!(allowed || !html.contains(banned), "{banned}");
        }
        assert!(html.starts_with("<!DOCTYPE html>"));
        assert!(html.trim_end().ends_with("</html>"));
    }

    /// The accuracy statement's members (as `emit::json` writes them) become rows whose
    /// numbers point at their keys; without them the fit's own figures stand, said to be
    /// from the fitting points.
    #[test]
    fn the_accuracy_statement_is_shown_when_the_document_has_it() {
        let est = |v: f64, se: f64, s: bool| json!({"value": v, "se": se, "significant": s});
        let doc = json!({
            "rmse_m": 0.2, "sigma_m": 0.14, "control_points": 40,
            "at_centroid": {"reference_x": 455000.25, "reference_y": 5210000.5,
                "shift_east_m": est(-15.62, 0.004, true), "shift_north_m": est(3.7, 0.004, true),
                "rotation_arcsec": est(-1462.9, 0.6, true), "scale_ppm": est(-893.4, 2.1, true)},
            "accuracy": {"n": 12, "rmse_x_m": 0.15, "rmse_y_m": 0.16, "rmse_r_m": 0.219,
                "nssda_95_m": 0.379, "nssda_rule_text": "RMSE_x and RMSE_y about equal", "nssda_standard": "FGDC-STD-007.3-1998",
                "asprs_rmse_h_m": 0.219, "asprs_standard": "ASPRS Edition 2", "source_text": "12 held-out control points",
                "independent": true, "warnings": ["fewer than 30 checkpoints"],
                "fit_residuals": {"rmse_r_m": 0.2}},
        });
        let (rows, notes) = accuracy_rows(&doc);
        let keys: Vec<&str> = rows.iter().map(|r| r.number.key.as_str()).collect();
        assert!(
            keys.contains(&"accuracy.nssda_95_m") && keys.contains(&"accuracy.asprs_rmse_h_m"),
            "{keys:?}"
        );
        let html: String = notes.iter().map(line).collect();
        assert!(
            html.contains("12 held-out control points") && html.contains("Warning: fewer than 30")
        );
        assert!(!html.contains("not independent"));
        let st = statement_rows(&doc);
        assert_eq!(st.len(), 6);
        let rot = st
            .iter()
            .find(|r| r.number.key == "at_centroid.rotation_arcsec.value")
            .unwrap();
        assert_eq!(rot.number.shown, "-1462.90");
        assert_eq!(
            rot.se.as_ref().unwrap().key,
            "at_centroid.rotation_arcsec.se"
        );
        assert!(line(&rot.note).contains("data-key=\"at_centroid.rotation_arcsec.significant\""));

        let plain = json!({"rmse_m": 0.2, "sigma_m": 0.14, "control_points": 40});
        let (rows, notes) = accuracy_rows(&plain);
        assert_eq!(rows[0].number.key, "rmse_m");
        assert!(line(&notes[0]).contains("overstates"));
        assert!(statement_rows(&plain).is_empty());
    }

    /// A grid is a table with its column heads and a row a line of cells, numbers tagged;
    /// the empty transform and accuracy sections and an empty histogram are left out.
    #[test]
    fn grids_are_tables_and_empty_sections_are_left_out() {
        let doc = json!({"epochs": [{"scale": 1.000002}, {"scale": 0.37}]});
        let mut p = page();
        p.transform.clear();
        p.residuals_m.clear();
        p.grids.push(Grid {
            id: "epoch-transforms".into(),
            title: "Transforms & co".into(),
            head: vec!["epoch".into(), "scale".into()],
            rows: (0..2)
                .map(|k| {
                    vec![
                        Line::new().text(format!("e{k}")),
                        Line::new().num(Number::of(
                            &doc,
                            "epochs.json",
                            &format!("epochs.{k}.scale"),
                            6,
                        )),
                    ]
                })
                .collect(),
            notes: vec![Line::new().text("a note")],
        });
        let html = render(&p);
        assert!(
            !html.contains("<h2>Transform</h2>") && html.contains("<h2>Transforms &amp; co</h2>")
        );
        assert!(!html.contains("<h2>Accuracy</h2>"));
        assert!(html.contains(
            "<thead><tr><th scope=\"col\">epoch</th><th scope=\"col\">scale</th></tr></thead>"
        ));
        assert!(html.contains("<tr><th scope=\"row\">e1</th><td><data value=\"0.37\" data-key=\"epochs.1.scale\" data-source=\"epochs.json\">0.370000</data></td></tr>"));
        assert!(html.contains("No residuals") || html.contains("no residuals"));
    }

    #[test]
    fn without_areas_there_is_no_area_section() {
        let mut p = page();
        p.areas.clear();
        let html = render(&p);
        assert!(!html.contains("Flagged areas") && !html.contains("class=\"area\""));
    }
}
