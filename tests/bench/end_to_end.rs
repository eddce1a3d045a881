//! End to end from files: seeded surveys written to GeoPackage files, then the release binary
//! (`tiemark match`, every default output), timed as a user would see it, beside GDAL merely
//! dumping both inputs to CSV (the yardstick, measured in the same run).
//!
//! Run: `cargo bench --bench end_to_end` (1,000,000 landmarks per survey), or
//! `cargo bench --bench end_to_end -- 200000` for another size; `-- --scaling` times
//! 10^4, 10^5 and 10^6 landmarks per survey and fits the exponent of time against n;
//! `-- --scaling 10000000` goes on to 10^7; `-- --outputs [N]` matches in this process with
//! each stage timed (and the memory after it), then times each output's writer alone and all
//! outputs together as the binary writes them. The default run alternates the yardstick and
//! tiemark `TIEMARK_BENCH_RUNS` times (default 3) and compares their medians.
//!
//! Surveys (the case of issue 11): a jittered grid of 20 m spacing (one landmark a cell, as
//! buildings keep apart) in EPSG:32633 around 500,000 E, 5,300,000 N; each survey misses 25 %
//! of it and gains 10 % new landmarks; the target has 0.2 m of noise per coordinate and is moved
//! by a 0.3° rotation, an 800 ppm scale error (both about the centre) and a 15 m shift. The base
//! has n / 0.85 landmarks, so that each survey holds about n. Files go to
//! `$CARGO_TARGET_DIR/bench-end-to-end` (default `target/`), are kept for the next run of the
//! same size and seed, and the binary writes its outputs there too.
//!
//! Printed per run: wall, user and system time, peak resident memory (the child's, from
//! `wait4`'s resource usage) and per input landmark, the control points found, the yardstick's
//! time (`ogr2ogr -f CSV … -lco GEOMETRY=AS_XY` of both inputs one after the other, or the
//! same copy through GDAL's CSV driver when `ogr2ogr` is not on the PATH) and the ratio.

mod child;

use child::{load, run, Usage};
use rand::SeedableRng;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;
use tiemark::fit::Similarity;
use tiemark::ingest::LandmarkSet;
use tiemark::spatial::Extent;
use tiemark::synth::{jittered_grid, split_base, Split};

const SEED: u64 = 20_261_102;
/// Grid spacing, metres.
const SPACING: f64 = 20.0;
/// Centre of the area, EPSG:32633.
const CENTRE: [f64; 2] = [500_000.0, 5_300_000.0];

/// The benchmark's folder under the target folder.
fn bench_dir() -> PathBuf {
    let target = std::env::var_os("CARGO_TARGET_DIR")
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target"));
    target.join("bench-end-to-end")
}

/// The target → reference truth: rotation and scale about `CENTRE`, then the shift.
fn truth() -> Similarity {
    let (scale, rotation) = (1.0 + 800e-6, 0.3f64.to_radians());
    let shift = [12.0, 9.0]; // 15 m
    let r = Similarity::from_params(scale, rotation, 0.0, 0.0).apply(CENTRE);
    Similarity::from_params(
        scale,
        rotation,
        CENTRE[0] - r[0] + shift[0],
        CENTRE[1] - r[1] + shift[1],
    )
}

/// Writes the survey pair of about `n` landmarks each (unless already there); their paths and
/// sizes.
fn surveys(n: usize) -> ([PathBuf; 2], [usize; 2]) {
    let dir = bench_dir();
    std::fs::create_dir_all(&dir).expect("the benchmark folder can be made");
    let paths = ["reference", "target"].map(|s| dir.join(format!("{s}-{n}-{SEED}.gpkg")));
    let counts = dir.join(format!("counts-{n}-{SEED}.txt"));
    if let (true, Ok(text)) = (
        paths.iter().all(|p| p.exists()),
        std::fs::read_to_string(&counts),
    ) {
        let c: Vec<usize> = text
            .split_whitespace()
            .filter_map(|v| v.parse().ok())
            .collect();
        if c.len() == 2 {
            return (paths, [c[0], c[1]]);
        }
    }
    let t = Instant::now();
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(SEED);
    let base_n = (n as f64 / 0.85).round() as usize;
    let side = (base_n as f64).sqrt().ceil() * SPACING;
    let origin = [CENTRE[0] - side / 2.0, CENTRE[1] - side / 2.0];
    let base: Vec<[f64; 2]> = jittered_grid(base_n, SPACING, &mut rng)
        .into_iter()
        .map(|p| [p[0] + origin[0], p[1] + origin[1]])
        .collect();
    let split = Split {
        missing: [0.25; 2],
        sigma: 0.2,
        truth: truth(),
        extra: (0.10 * base_n as f64) as usize,
        area: Extent {
            min: origin,
            max: [origin[0] + side, origin[1] + side],
        },
    };
    let pair = split_base(&base, &split, &mut rng);
    let wkt = gdal::spatial_ref::SpatialRef::from_epsg(32633)
        .and_then(|s| s.to_wkt())
        .expect("EPSG:32633 is known");
    for (path, (points, prefix)) in paths
        .iter()
        .zip([(&pair.reference, "R"), (&pair.target, "T")])
    {
        let set = LandmarkSet {
            source: path.clone(),
            layer: "landmarks".to_string(),
            ids: (1..=points.len())
                .map(|i| format!("{prefix}-{i}"))
                .collect(),
            points: points.clone(),
            crs_wkt: Some(wkt.clone()),
            skipped: Default::default(),
            raster: None,
        };
        let partial = path.with_extension("partial.gpkg");
        let _ = std::fs::remove_file(&partial);
        tiemark::emit::gpkg::write_landmarks(&set, &partial, "gpkg").expect("survey written");
        std::fs::rename(&partial, path).expect("survey put in place");
    }
    let sizes = [pair.reference.len(), pair.target.len()];
    std::fs::write(&counts, format!("{} {}\n", sizes[0], sizes[1])).expect("counts written");
    eprintln!(
        "  wrote {} + {} landmarks ({} true pairs) in {:.1} s",
        sizes[0],
        sizes[1],
        pair.pairs.len(),
        t.elapsed().as_secs_f64()
    );
    (paths, sizes)
}

/// Times GDAL dumping both inputs to CSV, one after the other (seconds of wall time).
/// Also the CPU seconds (user + system) of the `ogr2ogr` children (`None` through the crate,
/// in this process).
fn yardstick(inputs: &[PathBuf; 2]) -> (f64, Option<f64>, &'static str) {
    let dir = bench_dir().join("yardstick");
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("yardstick folder");
    let has_ogr2ogr = Command::new("ogr2ogr")
        .arg("--version")
        .output()
        .is_ok_and(|o| o.status.success());
    let start = Instant::now();
    let mut cpu = 0.0;
    for (i, input) in inputs.iter().enumerate() {
        let out = dir.join(format!("{i}.csv"));
        if has_ogr2ogr {
            let u = run(Command::new("ogr2ogr")
                .args(["-f", "CSV"])
                .arg(&out)
                .arg(input)
                .args(["-lco", "GEOMETRY=AS_XY"]));
            assert!(u.success, "ogr2ogr failed on {}", input.display());
            cpu += u.user + u.sys;
        } else {
            copy_to_csv(input, &out);
        }
    }
    let how = if has_ogr2ogr {
        "ogr2ogr -f CSV -lco GEOMETRY=AS_XY"
    } else {
        "GDAL's CSV driver (GEOMETRY=AS_XY) through the gdal crate"
    };
    let cpu = has_ogr2ogr.then_some(cpu);
    (start.elapsed().as_secs_f64(), cpu, how)
}

/// What `ogr2ogr -f CSV -lco GEOMETRY=AS_XY` does, through the gdal crate.
fn copy_to_csv(input: &Path, out: &Path) {
    use gdal::vector::{Feature, FieldDefn, LayerAccess, LayerOptions};
    let src = gdal::Dataset::open(input).expect("input opens");
    let mut layer = src.layer(0).expect("a layer");
    let driver = gdal::DriverManager::get_driver_by_name("CSV").expect("CSV driver");
    let mut dst = driver.create_vector_only(out).expect("CSV created");
    let copy = dst
        .create_layer(LayerOptions {
            name: "landmarks",
            srs: None,
            ty: gdal::vector::OGRwkbGeometryType::wkbPoint,
            options: Some(&["GEOMETRY=AS_XY"]),
        })
        .expect("CSV layer");
    let fields: Vec<(String, u32)> = layer
        .defn()
        .fields()
        .map(|f| (f.name(), f.field_type()))
        .collect();
    for (name, ty) in &fields {
        FieldDefn::new(name, *ty)
            .and_then(|d| d.add_to_layer(&copy))
            .expect("field");
    }
    for f in layer.features() {
        let mut g = Feature::new(copy.defn()).expect("feature");
        for i in 0..fields.len() {
            if let Ok(Some(v)) = f.field_as_string(i) {
                g.set_field_string(i, &v).expect("field value");
            }
        }
        if let Some(geom) = f.geometry() {
            g.set_geometry(geom.clone()).expect("geometry");
        }
        g.create(&copy).expect("feature written");
    }
}

/// One run of the binary on the pair of size `n`.
struct Run {
    sizes: [usize; 2],
    usage: Usage,
    control_points: u64,
}

fn match_once(n: usize) -> Run {
    let (inputs, sizes) = surveys(n);
    let out = bench_dir().join(format!("out-{n}"));
    let _ = std::fs::remove_dir_all(&out);
    let usage = run(Command::new(env!("CARGO_BIN_EXE_tiemark"))
        .arg("--quiet")
        .arg("match")
        .args(&inputs)
        .arg("--out")
        .arg(&out)
        .args(["--reference-id", "id", "--target-id", "id"])
        .stdout(std::process::Stdio::null()));
    assert!(usage.success, "tiemark match failed at n = {n}");
    let doc: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(out.join("transform.json")).expect("transform.json"),
    )
    .expect("transform.json parses");
    // The recovered transform is the truth, within a centimetre at the centre.
    let t = Similarity::from_params(
        doc["scale"].as_f64().unwrap(),
        doc["rotation_deg"].as_f64().unwrap().to_radians(),
        doc["translation_x"].as_f64().unwrap(),
        doc["translation_y"].as_f64().unwrap(),
    );
    let (a, b) = (t.apply(CENTRE), truth().apply(CENTRE));
    let off = ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2)).sqrt();
    assert!(
        off < 0.05,
        "n = {n}: the transform is {off} m off the truth at the centre"
    );
    Run {
        sizes,
        usage,
        control_points: doc["control_points"].as_u64().unwrap_or(0),
    }
}

fn print_run(r: &Run) {
    let landmarks = (r.sizes[0] + r.sizes[1]) as f64;
    let u = &r.usage;
    println!(
        "tiemark match: {} + {} landmarks, {} control points: wall {:.2} s, user {:.2} s, sys {:.2} s, peak RSS {:.0} MB ({:.0} bytes per input landmark)",
        r.sizes[0],
        r.sizes[1],
        r.control_points,
        u.wall,
        u.user,
        u.sys,
        u.peak_rss_bytes / 1e6,
        u.peak_rss_bytes / landmarks
    );
}

/// Prints each stage's wall time and the CPU time of the process meanwhile (user + system, all
/// threads; steadier than wall time on a loaded machine) as it ends, and the resident memory
/// then (`/proc/self/status`).
struct Timed {
    current: std::cell::RefCell<Option<(String, Instant, f64)>>,
}

/// CPU time of this process so far, user + system of all its threads, in seconds: fields 14
/// and 15 of `/proc/self/stat`, in clock ticks of 1/100 s (Linux's USER_HZ; proc(5)).
fn cpu_seconds() -> f64 {
    let stat = std::fs::read_to_string("/proc/self/stat").unwrap_or_default();
    // The fields after the command name (in parentheses, which may hold spaces).
    let after = stat.rsplit_once(')').map_or("", |(_, rest)| rest);
    let ticks: Vec<f64> = after
        .split_whitespace()
        .skip(11)
        .take(2)
        .filter_map(|v| v.parse().ok())
        .collect();
    ticks.iter().sum::<f64>() / 100.0
}

impl tiemark::progress::Progress for Timed {
    fn begin(&self, stage: &str, _total: Option<u64>) {
        *self.current.borrow_mut() = Some((stage.to_string(), Instant::now(), cpu_seconds()));
    }
    fn advance(&self, _done: u64) {}
    fn message(&self, _message: &str) {}
    fn end(&self) {
        if let Some((stage, t, cpu)) = self.current.borrow_mut().take() {
            println!(
                "  {stage}: {:.2} s, CPU {:.2} s (resident now {} MB, peak so far {} MB)",
                t.elapsed().as_secs_f64(),
                cpu_seconds() - cpu,
                status_mb("VmRSS"),
                status_mb("VmHWM")
            );
        }
    }
}

/// A memory figure of this process from `/proc/self/status`, in MB.
fn status_mb(key: &str) -> u64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with(key))
                .and_then(|l| l.split_whitespace().nth(1))
                .and_then(|kb| kb.parse::<u64>().ok())
        })
        .map_or(0, |kb| kb / 1000)
}

/// Matches the pair of size `n` in this process with each stage timed, then times each
/// writer alone and all outputs together as the binary writes them.
fn outputs(n: usize) {
    use tiemark::emit::{csv, gpkg, json};
    let (inputs, _) = surveys(n);
    let mut config = tiemark::config::MatchConfig::new(inputs[0].clone(), inputs[1].clone());
    config.reference.id = Some("id".to_string());
    config.target.id = Some("id".to_string());
    let timed = Timed {
        current: Default::default(),
    };
    println!("stages of the match:");
    let t = Instant::now();
    let outcome = tiemark::engine::match_surveys(&config, &timed).expect("the surveys match");
    println!("  the match in all: {:.2} s", t.elapsed().as_secs_f64());
    let s = outcome.solution().expect("a transform is accepted");
    let dir = bench_dir().join(format!("outputs-{n}"));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("outputs folder");
    let time = |name: &str, f: &dyn Fn(&Path)| {
        let t = Instant::now();
        f(&dir.join(name));
        println!("  {name}: {:.2} s", t.elapsed().as_secs_f64());
    };
    println!("{} control points; each output alone:", s.pairs.len());
    time("control-points.csv", &|p| {
        csv::write_control_points(&outcome, s, p).expect("CSV written")
    });
    time("control-points.gpkg", &|p| {
        gpkg::write_control_points(&outcome, s, p, &mut |_| {}).expect("GeoPackage written")
    });
    time("transform.json", &|p| {
        json::write_transform(&outcome, s, p).expect("JSON written")
    });
    time("report.html", &|p| {
        tiemark::emit::html::write_report(&outcome, s, p).expect("report.html written")
    });
    println!("every output, as the binary writes them:");
    let all = dir.join("all");
    let out = tiemark::emit::check_output_dir(&all, false, &tiemark::emit::FILES, &[])
        .expect("the output folder can be written");
    let summary = tiemark::report::summary(&outcome);
    tiemark::emit::write_all(&outcome, &out, &summary, None, &timed).expect("outputs written");
}

fn main() {
    // `cargo bench` passes --bench; `cargo test --all-targets` (CI) does not: there the
    // benchmark is only built, not run.
    let args: Vec<String> = std::env::args().skip(1).collect();
    if !args.iter().any(|a| a == "--bench") {
        println!("end-to-end benchmark: built; run it with `cargo bench --bench end_to_end`");
        return;
    }
    let numbers: Vec<usize> = args.iter().filter_map(|a| a.parse().ok()).collect();
    println!("load average before: {}", load());
    if args.iter().any(|a| a == "--outputs") {
        outputs(numbers.first().copied().unwrap_or(1_000_000));
    } else if args.iter().any(|a| a == "--scaling") {
        let top = numbers.first().copied().unwrap_or(1_000_000);
        let mut sizes = vec![10_000usize];
        while sizes.last().unwrap() * 10 <= top {
            sizes.push(sizes.last().unwrap() * 10);
        }
        let mut points = Vec::new();
        println!("| landmarks per survey | wall s | user s | sys s | peak RSS MB | bytes per landmark | control points |");
        println!("|---:|---:|---:|---:|---:|---:|---:|");
        for n in sizes {
            let r = match_once(n);
            let landmarks = (r.sizes[0] + r.sizes[1]) as f64;
            println!(
                "| {n} | {:.2} | {:.2} | {:.2} | {:.0} | {:.0} | {} |",
                r.usage.wall,
                r.usage.user,
                r.usage.sys,
                r.usage.peak_rss_bytes / 1e6,
                r.usage.peak_rss_bytes / landmarks,
                r.control_points
            );
            points.push((
                (landmarks / 2.0).ln(),
                r.usage.wall.ln(),
                (r.usage.user + r.usage.sys).ln(),
            ));
        }
        // Least-squares slope of ln(time) against ln(n), of the wall time and of the CPU time
        // (user + system: the steadier one on a shared machine).
        let slope = |pick: &dyn Fn(&(f64, f64, f64)) -> f64| {
            let k = points.len() as f64;
            let (mx, my) = points
                .iter()
                .fold((0.0, 0.0), |a, p| (a.0 + p.0 / k, a.1 + pick(p) / k));
            let (sxy, sxx) = points.iter().fold((0.0, 0.0), |a, p| {
                (a.0 + (p.0 - mx) * (pick(p) - my), a.1 + (p.0 - mx).powi(2))
            });
            sxy / sxx
        };
        println!(
            "fitted exponent against n: wall time {:.3}, CPU time {:.3}",
            slope(&|p| p.1),
            slope(&|p| p.2)
        );
        // The last interval alone, where fixed start-up costs matter least.
        if let [.., a, b] = points.as_slice() {
            println!(
                "exponent between the two largest sizes: wall time {:.3}, CPU time {:.3}",
                (b.1 - a.1) / (b.0 - a.0),
                (b.2 - a.2) / (b.0 - a.0)
            );
        }
    } else {
        let n = numbers.first().copied().unwrap_or(1_000_000);
        let (inputs, _) = surveys(n);
        // The yardstick's own time swings by more than half from run to run on a shared
        // virtual machine (9.7-16.5 s at 1M + 1M within an hour, CPU equal to wall), so both
        // run `TIEMARK_BENCH_RUNS` times (default 3), alternately, and the medians are compared.
        let runs: usize = std::env::var("TIEMARK_BENCH_RUNS")
            .ok()
            .and_then(|v| v.parse().ok())
            .filter(|&r| r > 0)
            .unwrap_or(3);
        let (mut ours, mut theirs) = (Vec::new(), Vec::new());
        let mut how = "";
        for _ in 0..runs {
            let (gdal_wall, gdal_cpu, named) = yardstick(&inputs);
            how = named;
            match gdal_cpu {
                Some(g) => {
                    println!("yardstick ({how}, both inputs): wall {gdal_wall:.2} s, CPU {g:.2} s")
                }
                None => println!("yardstick ({how}, both inputs): wall {gdal_wall:.2} s"),
            }
            theirs.push((gdal_wall, gdal_cpu));
            let r = match_once(n);
            print_run(&r);
            ours.push(r);
        }
        let median = |mut v: Vec<f64>| {
            v.sort_by(f64::total_cmp);
            v[v.len() / 2]
        };
        let wall = median(ours.iter().map(|r| r.usage.wall).collect());
        let cpu = median(ours.iter().map(|r| r.usage.user + r.usage.sys).collect());
        let gdal_wall = median(theirs.iter().map(|t| t.0).collect());
        println!("medians of {runs} runs: tiemark wall {wall:.2} s, CPU {cpu:.2} s; yardstick wall {gdal_wall:.2} s");
        match theirs.iter().map(|t| t.1).collect::<Option<Vec<f64>>>() {
            Some(g) => {
                let g = median(g);
                println!(
                    "ratio of the medians, tiemark / yardstick: wall {:.2} (goal of issue 11: at most 0.8), CPU {:.2} ({how})",
                    wall / gdal_wall,
                    cpu / g
                );
            }
            None => println!(
                "ratio of the medians, tiemark / yardstick: wall {:.2} (goal of issue 11: at most 0.8; {how})",
                wall / gdal_wall
            ),
        }
    }
    println!("load average after: {}", load());
}
