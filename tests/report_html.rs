#![allow(missing_docs)]
//! `report.html` in a real browser: a match on the sample town writes the page (and an epochs
//! run on the sample epochs its own, with the tracks by grade on the map); headless
//! Chromium (Debian's `chromium` package; `bash .ci/setup` installs it) loads it from the file
//! with no network, logs no console message, draws a screenshot that is not blank and shows
//! the map's layers, and its rendered DOM carries the numbers of `transform.json` exactly.
//!
//! The browser's switches are those of Chrome's headless command-line reference
//! (developer.chrome.com/docs/automation-and-testing/headless-cli: `--headless`,
//! `--dump-dom`, `--screenshot`, `--window-size`); `--enable-logging=stderr --v=0` makes it
//! log every console message on stderr as a line with `CONSOLE` in it (checked here on a
//! probe page that must produce such lines: a script's `console.error` and a malformed SVG
//! attribute). The page has no script, so any console line is the browser complaining about
//! the page.

use gdal::Dataset;
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};
#[path = "common/sample_epochs.rs"]
mod sample_epochs;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// The browser: `chromium` on the PATH (Debian's package), else a clear failure.
fn chromium() -> PathBuf {
    let found = std::env::var_os("PATH").and_then(|paths| {
        std::env::split_paths(&paths)
            .flat_map(|d| ["chromium", "chromium-browser"].map(|n| d.join(n)))
            .find(|p| p.is_file())
    });
    found.unwrap_or_else(|| {
        panic!("chromium is not installed: this test loads report.html in headless Chromium; run `bash .ci/setup` (it installs Debian's chromium package), then run the test again")
    })
}

/// What one run of the browser gave.
struct Browser {
    stdout: String,
    console: Vec<String>,
}

/// Runs headless Chromium on `page` with `args`, its profile in a fresh folder, at most two
/// minutes; returns its stdout and the console lines it logged.
fn browse(page: &Path, args: &[String]) -> Browser {
    let profile = tempfile::tempdir().unwrap();
    let mut child = Command::new(chromium())
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--hide-scrollbars",
            "--no-first-run",
            "--enable-logging=stderr",
            "--v=0",
        ])
        .arg(format!("--user-data-dir={}", profile.path().display()))
        .args(args)
        .arg(format!("file://{}", page.display()))
        .current_dir(profile.path())
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("chromium starts");
    let (mut out, mut err) = (child.stdout.take().unwrap(), child.stderr.take().unwrap());
    let reader = std::thread::spawn(move || {
        let mut s = String::new();
        std::io::Read::read_to_string(&mut out, &mut s).map(|_| s)
    });
    let err_reader = std::thread::spawn(move || {
        let mut s = String::new();
        std::io::Read::read_to_string(&mut err, &mut s).map(|_| s)
    });
    let start = Instant::now();
    loop {
        if let Some(status) = child.try_wait().unwrap() {
            assert!(
                status.success(),
                "chromium failed on {}: {status:?}",
                page.display()
            );
            break;
        }
        if start.elapsed() > Duration::from_secs(120) {
            let _ = child.kill();
            let _ = child.wait();
            panic!(
                "chromium did not finish within two minutes on {}",
                page.display()
            );
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    let stdout = reader.join().unwrap().unwrap_or_default();
    let stderr = err_reader.join().unwrap().unwrap_or_default();
    Browser {
        stdout,
        console: stderr
            .lines()
            .filter(|l| l.contains(":CONSOLE"))
            .map(str::to_string)
            .collect(),
    }
}

/// A screenshot of `page` in a window `w` × `h`, as RGB rows (GDAL's PNG driver decodes it).
fn screenshot(page: &Path, w: usize, h: usize, png: &Path) -> (Browser, Vec<[u8; 3]>) {
    let b = browse(
        page,
        &[
            format!("--screenshot={}", png.display()),
            format!("--window-size={w},{h}"),
        ],
    );
    let ds = Dataset::open(png).expect("the screenshot is a PNG GDAL reads");
    assert_eq!(ds.raster_size(), (w, h), "screenshot size");
    assert!(ds.raster_count() >= 3, "an RGB screenshot");
    let band = |i: usize| {
        ds.rasterband(i)
            .unwrap()
            .read_as::<u8>((0, 0), (w, h), (w, h), None)
            .unwrap()
            .data()
            .to_vec()
    };
    let (r, g, bl) = (band(1), band(2), band(3));
    let px = (0..w * h).map(|i| [r[i], g[i], bl[i]]).collect();
    (b, px)
}

/// (variance of the grey level, share of pixels that are not near-white).
fn ink_stats(px: &[[u8; 3]]) -> (f64, f64) {
    let grey: Vec<f64> = px
        .iter()
        .map(|p| (p[0] as f64 + p[1] as f64 + p[2] as f64) / 3.0)
        .collect();
    let n = grey.len() as f64;
    let mean = grey.iter().sum::<f64>() / n;
    let var = grey.iter().map(|g| (g - mean).powi(2)).sum::<f64>() / n;
    let inked = grey.iter().filter(|g| **g < 245.0).count() as f64 / n;
    (var, inked)
}

/// Pixels within `tol` of `rgb` on every channel.
fn count_colour(px: &[[u8; 3]], rgb: [u8; 3], tol: i32) -> usize {
    px.iter()
        .filter(|p| (0..3).all(|c| (p[c] as i32 - rgb[c] as i32).abs() <= tol))
        .count()
}

/// The `<data>` elements of a serialised DOM: (value, key, source, text).
fn data_elements(dom: &str) -> Vec<(String, String, String, String)> {
    let unescape = |s: &str| {
        s.replace("&quot;", "\"")
            .replace("&lt;", "<")
            .replace("&gt;", ">")
            .replace("&#39;", "'")
            .replace("&nbsp;", "\u{a0}")
            .replace("&amp;", "&")
    };
    let attr = |tag: &str, name: &str| -> String {
        let at = tag
            .find(&format!(" {name}=\""))
            .unwrap_or_else(|| panic!("<data> without {name}: {tag}"));
        let rest = &tag[at + name.len() + 3..];
        unescape(&rest[..rest.find('"').unwrap()])
    };
    let mut out = Vec::new();
    let mut rest = dom;
    while let Some(at) = rest.find("<data ") {
        rest = &rest[at..];
        let close = rest.find('>').unwrap();
        let tag = &rest[..close];
        let end = rest.find("</data>").unwrap();
        let text = unescape(&rest[close + 1..end]);
        out.push((
            attr(tag, "value"),
            attr(tag, "data-key"),
            attr(tag, "data-source"),
            text,
        ));
        rest = &rest[end..];
    }
    out
}

/// The value at a dot-separated key (array items by index).
fn lookup<'a>(doc: &'a Value, key: &str) -> Option<&'a Value> {
    key.split('.').try_fold(doc, |v, part| match v {
        Value::Array(items) => items.get(part.parse::<usize>().ok()?),
        _ => v.get(part),
    })
}

/// The shown text of a number is its value rounded to the decimals shown.
fn shown_matches(shown: &str, value: f64) -> bool {
    let Ok(s) = shown.trim().parse::<f64>() else {
        return false;
    };
    let decimals = shown.split_once('.').map_or(0, |(_, d)| d.len()) as i32;
    (s - value).abs() <= 0.5 * 10f64.powi(-decimals) * (1.0 + 1e-9) + 1e-12 * value.abs()
}

/// The probe: a page that makes the browser log console lines (a script's console.error and
/// a malformed SVG path) must show them, so that "no console line" on the report means
/// something; and a blank page's screenshot must count as blank.
#[test]
fn the_console_capture_and_the_blank_check_work_on_probe_pages() {
    let tmp = tempfile::tempdir().unwrap();
    let probe = tmp.path().join("probe.html");
    std::fs::write(
        &probe,
        "<!DOCTYPE html><html><head><meta charset=\"utf-8\"><title>probe</title></head><body>\
         <svg width=\"20\" height=\"20\"><path d=\"M 1 1 L x\"/></svg>\
         <script>console.error(\"tiemark-probe\")</script></body></html>",
    )
    .unwrap();
    let b = browse(&probe, &["--dump-dom".to_string()]);
    assert!(
        b.stdout.contains("tiemark-probe"),
        "no DOM dumped: {}",
        b.stdout
    );
    assert!(
        b.console.iter().any(|l| l.contains("tiemark-probe")),
        "console.error not captured: {:?}",
        b.console
    );
    assert!(
        b.console.iter().any(|l| l.contains("attribute d")),
        "the malformed SVG path's error not captured: {:?}",
        b.console
    );
    let blank = tmp.path().join("blank.html");
    std::fs::write(
        &blank,
        "<!DOCTYPE html><html><head><meta charset=\"utf-8\"><title>blank</title></head><body></body></html>",
    )
    .unwrap();
    let (_, px) = screenshot(&blank, 400, 300, &tmp.path().join("blank.png"));
    let (var, inked) = ink_stats(&px);
    assert!(
        var < 1.0 && inked < 0.001,
        "a blank page counted as drawn: {var} {inked}"
    );
}

#[test]
fn the_report_of_the_sample_town_renders_and_carries_the_json_numbers() {
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("out");
    let data = root().join("sample-data");
    let run = Command::new(env!("CARGO_BIN_EXE_tiemark"))
        .args(["match"])
        .arg(data.join("town-footprints-2019.gpkg"))
        .arg(data.join("town-survey-2026.geojson"))
        .args([
            "--reference-layer",
            "buildings",
            "--reference-id",
            "bldg_id",
        ])
        .args(["--target-id", "uid", "--out"])
        .arg(&out)
        .stdin(Stdio::null())
        .output()
        .unwrap();
    assert_eq!(run.status.code(), Some(0), "{run:#?}");
    let page = out.join("report.html");
    assert!(
        String::from_utf8_lossy(&run.stdout).contains("report.html"),
        "report.html not among the files written"
    );

    // Self-contained and small.
    let html = std::fs::read_to_string(&page).unwrap();
    assert!(
        html.len() < 2_000_000,
        "report.html is {} bytes",
        html.len()
    );
    for banned in [
        "<script", "<link", "<img", "<iframe", "src=", "href=", "@import", "https://",
    ] {
        assert!(!html.contains(banned), "report.html has {banned}");
    }
    assert_eq!(
        html.matches("http://").count(),
        html.matches("http://www.w3.org/2000/svg").count(),
        "report.html refers to something on the network"
    );

    // The screenshot: the whole page in one tall window.
    let (shot, px) = screenshot(&page, 1200, 3600, &tmp.path().join("report.png"));
    assert!(shot.console.is_empty(), "console lines: {:?}", shot.console);
    let (var, inked) = ink_stats(&px);
    eprintln!(
        "screenshot: grey variance {var:.0}, {:.1}% drawn",
        100.0 * inked
    );
    assert!(
        var > 200.0,
        "the screenshot is nearly uniform (grey variance {var})"
    );
    assert!(
        (0.03..0.6).contains(&inked),
        "drawn pixels cover {:.1}% of the screenshot",
        100.0 * inked
    );
    // The map's layers are on screen in their inks (centre pixels of the markers are
    // exact; the plus signs are thin, so their colour is looser).
    for (what, rgb, tol, least) in [
        ("reference landmarks", [0x56, 0xb4, 0xe9], 12, 2000),
        ("control points", [0x00, 0x3a, 0x66], 20, 2000),
        ("target landmarks", [0xd5, 0x5e, 0x00], 40, 300),
    ] {
        let n = count_colour(&px, rgb, tol);
        eprintln!("{what}: {n} pixels of their colour");
        assert!(
            n >= least,
            "{what}: only {n} pixels of their colour on screen"
        );
    }

    // The rendered DOM: every number of transform.json on the page equals it.
    let dom = browse(&page, &["--dump-dom".to_string()]);
    assert!(dom.console.is_empty(), "console lines: {:?}", dom.console);
    let doc: Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("transform.json")).unwrap())
            .unwrap();
    let tags = data_elements(&dom.stdout);
    assert!(
        tags.len() > 30,
        "only {} tagged numbers in the page",
        tags.len()
    );
    let mut keys = std::collections::HashSet::new();
    for (value, key, source, text) in &tags {
        let v: Value = serde_json::from_str(value)
            .unwrap_or_else(|e| panic!("{key}: value {value:?} is not JSON: {e}"));
        if let Some(x) = v.as_f64() {
            assert!(shown_matches(text, x), "{key}: shows {text:?} for {x}");
        }
        if source == "transform.json" {
            let expected =
                lookup(&doc, key).unwrap_or_else(|| panic!("{key} is not in transform.json"));
            match (v.as_f64(), expected.as_f64()) {
                (Some(a), Some(b)) => assert_eq!(a, b, "{key}"),
                _ => assert_eq!(&v, expected, "{key}"),
            }
            keys.insert(key.clone());
        }
    }
    for key in [
        "control_points",
        "rmse_m",
        "sigma_m",
        "scale",
        "rotation_deg",
        "translation_x",
        "translation_y",
        "standard_errors.scale",
        "standard_errors.rotation_deg",
        "thresholds.max_residual_m",
        "inputs.reference.landmarks",
        "inputs.target.landmarks",
        "seed",
        // The accuracy statement (crate::accuracy, written by emit::json).
        "at_centroid.shift_east_m.value",
        "at_centroid.shift_north_m.se",
        "at_centroid.rotation_arcsec.value",
        "at_centroid.scale_ppm.value",
        "accuracy.n",
        "accuracy.rmse_x_m",
        "accuracy.rmse_y_m",
        "accuracy.rmse_r_m",
        "accuracy.nssda_95_m",
        "accuracy.asprs_rmse_h_m",
    ] {
        assert!(keys.contains(key), "{key} is not on the page");
    }

    // The residual figures against control-points.csv (4 decimals there).
    let csv = std::fs::read_to_string(out.join("control-points.csv")).unwrap();
    let mut residuals: Vec<f64> = csv
        .lines()
        .skip(1)
        .map(|l| l.split(',').nth(6).unwrap().parse().unwrap())
        .collect();
    residuals.sort_by(f64::total_cmp);
    let n = residuals.len();
    let page_value = |key: &str| -> f64 {
        let t = tags
            .iter()
            .find(|t| t.1 == key)
            .unwrap_or_else(|| panic!("{key} is not on the page"));
        t.0.parse().unwrap()
    };
    for (key, expected) in [
        ("residual_m.median", residuals[n / 2]),
        ("residual_m.p95", residuals[(n * 95 / 100).min(n - 1)]),
        ("residual_m.max", residuals[n - 1]),
    ] {
        assert!(
            (page_value(key) - expected).abs() <= 5.1e-5,
            "{key}: {} against {expected}",
            page_value(key)
        );
    }
    // What the page says it drew: every point of the sample town (under the cap), all the
    // control points in the histogram.
    let count = |k: &str| lookup(&doc, k).unwrap().as_f64().unwrap();
    assert_eq!(
        page_value("map.total.reference"),
        count("inputs.reference.landmarks")
    );
    assert_eq!(
        page_value("map.total.target"),
        count("inputs.target.landmarks")
    );
    assert_eq!(page_value("map.total.controls"), count("control_points"));
    assert_eq!(page_value("map.drawn.controls"), count("control_points"));
    assert_eq!(page_value("histogram.count"), n as f64);
    assert_eq!(n as f64, count("control_points"));

    // The parts a surveyor looks for.
    for words in [
        "ACCEPTED",
        "<svg",
        "grid north of the working CRS",
        "lengthened",
        "Scale bar",
        "independent checkpoints",
        "licensed surveyors",
    ] {
        assert!(dom.stdout.contains(words), "the page lacks {words:?}");
    }
}

/// The epochs library's page: the five sample epochs (sample-data/epochs.rs) through
/// `tiemark run` on a pipeline like pipelines/control-point-library.toml; the page renders
/// without a console line, shows the tracks of each grade in their inks, and every number it
/// tags from epochs.json equals the file's.
#[test]
fn the_report_of_the_sample_epochs_renders_and_carries_the_json_numbers() {
    let tmp = tempfile::tempdir().unwrap();
    // Down to two epochs, so that every grade has tracks to draw.
    let pipeline = sample_epochs::library_pipeline(tmp.path(), 2);
    let run = Command::new(env!("CARGO_BIN_EXE_tiemark"))
        .args(["run", pipeline.to_str().unwrap(), "--quiet"])
        .stdin(Stdio::null())
        .output()
        .unwrap();
    assert_eq!(run.status.code(), Some(0), "{run:#?}");
    let out = tmp.path().join("library");
    let page = out.join("report.html");
    let html = std::fs::read_to_string(&page).unwrap();
    for banned in ["<script", "<link", "<img", "src=", "href=", "https://"] {
        assert!(!html.contains(banned), "report.html has {banned}");
    }
    let doc: Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("epochs.json")).unwrap()).unwrap();
    let grades = &doc["counts"]["grades"];
    for g in 0..3 {
        assert!(
            grades[g].as_u64().unwrap() > 0,
            "no grade {g} tracks: {grades}"
        );
    }

    let (shot, px) = screenshot(&page, 1200, 4200, &tmp.path().join("epochs.png"));
    assert!(shot.console.is_empty(), "console lines: {:?}", shot.console);
    let (var, inked) = ink_stats(&px);
    assert!(var > 200.0, "nearly uniform (grey variance {var})");
    assert!((0.03..0.6).contains(&inked), "{:.1}% drawn", 100.0 * inked);
    // The grades' inks (tiemark::emit::epochs::GRADE_INKS) on screen: the dots and squares
    // have solid centres; the rings are thin, so their colour is looser and fewer.
    for (what, rgb, tol, least) in [
        ("grade A dots", [0x00, 0x3a, 0x66], 20, 1000),
        ("grade B squares", [0x00, 0x9e, 0x73], 20, 40),
        ("grade C rings", [0x56, 0xb4, 0xe9], 40, 20),
    ] {
        let n = count_colour(&px, rgb, tol);
        eprintln!("{what}: {n} pixels of their colour");
        assert!(n >= least, "{what}: only {n} pixels of their colour");
    }

    let dom = browse(&page, &["--dump-dom".to_string()]);
    assert!(dom.console.is_empty(), "console lines: {:?}", dom.console);
    let tags = data_elements(&dom.stdout);
    let mut keys = std::collections::HashSet::new();
    for (value, key, source, text) in &tags {
        let v: Value = serde_json::from_str(value)
            .unwrap_or_else(|e| panic!("{key}: value {value:?} is not JSON: {e}"));
        if let Some(x) = v.as_f64() {
            assert!(shown_matches(text, x), "{key}: shows {text:?} for {x}");
        }
        if source == "epochs.json" {
            let expected =
                lookup(&doc, key).unwrap_or_else(|| panic!("{key} is not in epochs.json"));
            assert_eq!(&v, expected, "{key}");
            keys.insert(key.clone());
        }
    }
    for key in [
        "counts.kept",
        "counts.moved",
        "counts.grades.0",
        "epochs.1.to_base.scale",
        "epochs.1.to_base.standard_errors.scale",
        "epochs.3.to_base.rotation_deg",
        "epochs.3.to_base.standard_errors.rotation_arcsec",
        "epochs.4.to_base.standard_errors.position_at_centroid_m.x",
        "epochs.2.to_base.rms_residual_m",
        "epochs.2.to_base.kept_largest_offset_m",
        "closure.checks.0.chi2",
        "adjustment.variance_factor",
        "seed",
    ] {
        assert!(keys.contains(key), "{key} is not on the page");
    }
    let kept = doc["counts"]["kept"].as_f64().unwrap();
    let drawn: f64 = ["grade_a", "grade_b", "grade_c"]
        .iter()
        .map(|g| {
            let key = format!("map.total.classes.{g}");
            tags.iter()
                .find(|t| t.1 == key)
                .unwrap()
                .0
                .parse::<f64>()
                .unwrap()
        })
        .sum();
    assert_eq!(drawn, kept, "the map's tracks are the kept ones");
    for words in [
        "ACCEPTED",
        "Transforms to the base",
        "Closure of chained transforms",
        "Residuals per epoch",
        "grid north of the working CRS",
        "independent checkpoints",
        "licensed surveyors",
    ] {
        assert!(dom.stdout.contains(words), "the page lacks {words:?}");
    }
}
