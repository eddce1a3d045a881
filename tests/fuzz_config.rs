//! Property tests ("fuzzing") of the pipeline-file reader, [`PipelineFile::read`], on arbitrary
//! text: random bytes, byte mutations of valid files, truncations of valid files, and TOML-ish
//! text built from the real tables and keys with random values.
//!
//! Whatever the input, the reader must not panic; an error must name the file (the message
//! starts with its path); a file it accepts must round-trip: written back as TOML and read
//! again, it gives the same values. Files rendered from known values must read back as exactly
//! those values (relative paths resolved against the file's folder).
//!
//! The `#[test]`s run a moderate number of cases from fixed seeds on every `cargo test`. The
//! large run is `#[ignore]`d and sized by `TIEMARK_FUZZ_CASES` (cases per property, default
//! 100 000):
//!
//! ```text
//! TIEMARK_FUZZ_CASES=100000 cargo test --release --test fuzz_config -- --ignored
//! ```

// The models fill every option today, and keep `..Default::default()` so that options added
// later take their defaults instead of breaking the build.
#![allow(clippy::needless_update)]

use proptest::prelude::*;
use proptest::test_runner::{Config, RngSeed, TestCaseError, TestRunner};
use std::path::{Path, PathBuf};
use tiemark::config::{FitParams, MatchingParams, PipelineFile, SignatureChoice, SurveyInput};
use tiemark::matching::Rank;
use tiemark::signatures::{KeySpace, VertexOrder};

/// Cases per property in the ordinary test run.
const CI_CASES: u32 = 256;

/// Cases per property in the large, ignored run: `TIEMARK_FUZZ_CASES`, else 100 000.
fn large_cases() -> u32 {
    std::env::var("TIEMARK_FUZZ_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(100_000)
}

fn runner(cases: u32, seed: u64) -> TestRunner {
    TestRunner::new(Config {
        cases,
        rng_seed: RngSeed::Fixed(seed),
        failure_persistence: None,
        // Shrinking a failure to its smallest input is what makes it a regression test.
        max_shrink_iters: 4096,
        ..Config::default()
    })
}

/// A folder with the pipeline file under test and a second one for the round trip.
struct Probe {
    dir: tempfile::TempDir,
}

impl Probe {
    fn new() -> Probe {
        Probe {
            dir: tempfile::tempdir().unwrap(),
        }
    }

    fn file(&self) -> PathBuf {
        self.dir.path().join("pipeline.toml")
    }

    /// Writes `bytes` as the pipeline file and reads it, checking the reader's promises:
    /// an error names the file; an accepted file round-trips. Returns what was read.
    fn read(&self, bytes: &[u8]) -> Result<Option<PipelineFile>, TestCaseError> {
        let path = self.file();
        std::fs::write(&path, bytes).unwrap();
        match PipelineFile::read(&path) {
            Err(e) => {
                let text = e.to_string();
                let named = format!("{}: ", path.display());
                prop_assert!(text.starts_with(&named), "error without the file: {text}");
                prop_assert!(text.len() > named.len() + 10, "error says nothing: {text}");
                Ok(None)
            }
            Ok(file) => {
                round_trips(&file, self.dir.path())?;
                Ok(Some(file))
            }
        }
    }
}

/// `file` written back as TOML and read again gives the same values. Compared as TOML text, so
/// that a NaN read from `nan` counts as equal to itself.
fn round_trips(file: &PipelineFile, dir: &Path) -> Result<(), TestCaseError> {
    let text = toml::to_string(file)
        .map_err(|e| TestCaseError::fail(format!("an accepted file cannot be written: {e}")))?;
    let again_path = dir.join("again.toml");
    std::fs::write(&again_path, &text).unwrap();
    let again = PipelineFile::read(&again_path)
        .map_err(|e| TestCaseError::fail(format!("written back, not read again: {e}\n{text}")))?;
    let again_text = toml::to_string(&again).unwrap();
    prop_assert_eq!(again_text, text);
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// Known values rendered as a valid file.

/// Path components that need no cleaning: no `.`, no `..`, no `/`.
fn component() -> impl Strategy<Value = String> {
    "[^/\u{0}]{1,12}".prop_filter("no dot components", |c| c != "." && c != "..")
}

/// A relative or an absolute path.
fn path() -> impl Strategy<Value = String> {
    (any::<bool>(), prop::collection::vec(component(), 1..4)).prop_map(|(absolute, parts)| {
        let joined = parts.join("/");
        if absolute {
            format!("/{joined}")
        } else {
            joined
        }
    })
}

/// Any string, control characters and all.
fn text() -> impl Strategy<Value = Option<String>> {
    prop::option::of(any::<String>())
}

/// Finite floats of every size (NaN does not equal itself; the text properties cover it).
fn finite() -> impl Strategy<Value = f64> {
    prop_oneof![
        prop::num::f64::NORMAL | prop::num::f64::SUBNORMAL | prop::num::f64::ZERO,
        Just(f64::INFINITY),
        Just(f64::NEG_INFINITY),
    ]
}

/// Integers a TOML file can hold (TOML integers are 64-bit signed).
fn count() -> impl Strategy<Value = usize> {
    prop_oneof![0usize..64, 0..=i64::MAX as usize]
}

fn survey() -> impl Strategy<Value = SurveyInput> {
    (path(), text(), text(), text()).prop_map(|(p, layer, id, crs)| {
        let mut s = SurveyInput::new(p.into());
        s.layer = layer;
        s.id = id;
        s.crs = crs;
        s
    })
}

fn signatures() -> impl Strategy<Value = SignatureChoice> {
    (
        prop::option::of(count()),
        prop::option::of(count()),
        prop_oneof![Just(VertexOrder::Walk), Just(VertexOrder::Angular)],
        prop::collection::vec(count(), 0..4),
        prop_oneof![Just(KeySpace::Disc), Just(KeySpace::Sphere)],
        any::<bool>(),
        finite(),
    )
        .prop_map(
            |(neighbours, leave_out, order, harmonics, key_space, permuted, ambiguity)| {
                SignatureChoice {
                    neighbours,
                    leave_out,
                    order,
                    harmonics,
                    key_space,
                    permuted,
                    ambiguity,
                    ..SignatureChoice::default()
                }
            },
        )
}

fn fit() -> impl Strategy<Value = FitParams> {
    (
        (prop::option::of(finite()), prop::option::of(finite())),
        finite(),
        count(),
        0..=i64::MAX as u64,
        finite(),
        count(),
    )
        .prop_map(
            |((search_radius_m, max_residual_m), confidence, max_rounds, seed, level, min)| {
                FitParams {
                    search_radius_m,
                    max_residual_m,
                    confidence,
                    max_rounds,
                    seed,
                    false_alarm_level: level,
                    min_control_points: min,
                    ..FitParams::default()
                }
            },
        )
}

/// The parts of a pipeline file that the model varies.
#[derive(Debug, Clone)]
struct Model {
    reference: SurveyInput,
    target: SurveyInput,
    dir: String,
    force: bool,
    working_crs: Option<String>,
    signatures: SignatureChoice,
    matching: MatchingParams,
    fit: FitParams,
}

fn model() -> impl Strategy<Value = Model> {
    (
        (survey(), survey(), path(), any::<bool>(), text()),
        (
            signatures(),
            count(),
            prop_oneof![Just(Rank::Distance), Just(Rank::Sensitivity)],
            fit(),
        ),
    )
        .prop_map(
            |(
                (reference, target, dir, force, working_crs),
                (signatures, candidates, rank, fit),
            )| {
                let matching = MatchingParams {
                    candidates,
                    rank,
                    ..MatchingParams::default()
                };
                Model {
                    reference,
                    target,
                    dir,
                    force,
                    working_crs,
                    signatures,
                    matching,
                    fit,
                }
            },
        )
}

/// The smallest valid file; every model starts from what it reads as, so that options added
/// later keep their defaults here.
const MINIMAL: &str =
    "[reference]\npath = \"r.gpkg\"\n[target]\npath = \"t.gpkg\"\n[output]\ndir = \"out\"\n";

impl Model {
    /// The pipeline file holding these values, paths as given (relative or absolute).
    fn file(&self, base: &PipelineFile) -> PipelineFile {
        let mut f = base.clone();
        f.reference = self.reference.clone();
        f.target = self.target.clone();
        f.output.dir = PathBuf::from(&self.dir);
        f.output.force = self.force;
        f.frame.working_crs = self.working_crs.clone();
        f.signatures = self.signatures.clone();
        f.matching = self.matching;
        f.fit = self.fit;
        f
    }

    /// What reading that file from folder `dir` must give: relative paths joined to `dir`.
    fn expected(&self, base: &PipelineFile, dir: &Path) -> PipelineFile {
        let mut f = self.file(base);
        for p in [&mut f.reference.path, &mut f.target.path, &mut f.output.dir] {
            if p.is_relative() {
                *p = dir.join(&*p);
            }
        }
        f
    }
}

/// The file [`MINIMAL`] reads as.
fn minimal(probe: &Probe) -> PipelineFile {
    probe.read(MINIMAL.as_bytes()).unwrap().unwrap()
}

fn values_read_back(cases: u32, seed: u64) {
    let probe = Probe::new();
    let base = minimal(&probe);
    runner(cases, seed)
        .run(&model(), |m| {
            let text = toml::to_string(&m.file(&base)).unwrap();
            let read = probe.read(text.as_bytes())?;
            prop_assert_eq!(read, Some(m.expected(&base, probe.dir.path())), "{}", text);
            Ok(())
        })
        .unwrap();
}

fn truncations_are_read_or_refused(cases: u32, seed: u64) {
    let probe = Probe::new();
    let base = minimal(&probe);
    runner(cases, seed)
        .run(&(model(), any::<prop::sample::Index>()), |(m, cut)| {
            let text = toml::to_string(&m.file(&base)).unwrap();
            let cut = cut.index(text.len() + 1);
            probe.read(&text.as_bytes()[..cut])?;
            Ok(())
        })
        .unwrap();
}

/// A byte edit: (position, replace / insert / delete, byte).
fn edits() -> impl Strategy<Value = Vec<(prop::sample::Index, u8, u8)>> {
    prop::collection::vec((any::<prop::sample::Index>(), 0u8..3, any::<u8>()), 1..8)
}

fn mutations_are_read_or_refused(cases: u32, seed: u64) {
    let probe = Probe::new();
    let base = minimal(&probe);
    runner(cases, seed)
        .run(&(model(), edits()), |(m, edits)| {
            let mut bytes = toml::to_string(&m.file(&base)).unwrap().into_bytes();
            for (at, op, b) in edits {
                let i = at.index(bytes.len() + 1);
                match op {
                    0 if i < bytes.len() => bytes[i] = b,
                    1 => bytes.insert(i, b),
                    _ if i < bytes.len() => {
                        bytes.remove(i);
                    }
                    _ => bytes.push(b),
                }
            }
            probe.read(&bytes)?;
            Ok(())
        })
        .unwrap();
}

fn random_bytes_are_refused(cases: u32, seed: u64) {
    let probe = Probe::new();
    runner(cases, seed)
        .run(&prop::collection::vec(any::<u8>(), 0..600), |bytes| {
            probe.read(&bytes)?;
            Ok(())
        })
        .unwrap();
}

// ---------------------------------------------------------------------------------------------
// TOML-ish text from the real tables and keys.

/// Every table and its keys, as the README lists them ("Pipeline files").
const TABLES: [(&str, &[&str]); 7] = [
    ("reference", &["path", "layer", "id", "crs"]),
    ("target", &["path", "layer", "id", "crs"]),
    ("output", &["dir", "force"]),
    ("frame", &["working_crs"]),
    (
        "signatures",
        &[
            "neighbours",
            "leave_out",
            "order",
            "harmonics",
            "key_space",
            "permuted",
            "ambiguity",
        ],
    ),
    ("matching", &["candidates", "rank"]),
    (
        "fit",
        &[
            "search_radius_m",
            "max_residual_m",
            "model",
            "confidence",
            "max_rounds",
            "seed",
            "false_alarm_level",
            "min_control_points",
        ],
    ),
];

/// A TOML string literal holding `s`, escaped.
fn quoted(s: &str) -> String {
    let mut out = String::from("\"");
    for c in s.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            c if c.is_control() => out.push_str(&format!("\\u{:04X}", c as u32)),
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// A value: well-formed of every TOML type, out of range, or malformed.
fn value() -> BoxedStrategy<String> {
    let scalar = prop_oneof![
        any::<i64>().prop_map(|v| v.to_string()),
        (0u64..100).prop_map(|v| v.to_string()),
        "[0-9]{19,30}".boxed(),
        "-[0-9]{1,5}".boxed(),
        "0x[0-9a-fA-F_]{1,18}".boxed(),
        any::<f64>().prop_map(|v| format!("{v:?}")),
        prop_oneof![
            Just("nan"),
            Just("+inf"),
            Just("-inf"),
            Just("1e999"),
            Just("-1e-999"),
            Just("1."),
            Just(".5"),
            Just("1__0"),
            Just("0.0"),
        ]
        .prop_map(String::from),
        any::<bool>().prop_map(|b| b.to_string()),
        prop_oneof![
            Just("walk"),
            Just("angular"),
            Just("disc"),
            Just("sphere"),
            Just("distance"),
            Just("sensitivity"),
            Just(""),
            Just("local"),
            Just("EPSG:4326"),
            Just("r.gpkg"),
            Just("."),
            Just(".."),
        ]
        .prop_map(quoted),
        any::<String>().prop_map(|s| quoted(&s)),
        "'[^'\n]{0,12}'".boxed(),
        "\"[^\"\n]{0,12}".boxed(),
        "\"\"\"[^\"]{0,20}\"\"\"".boxed(),
        Just("1979-05-27T07:32:00Z".to_string()),
        "[ -~]{0,12}".boxed(),
    ];
    scalar
        .prop_recursive(2, 12, 4, |inner| {
            prop_oneof![
                prop::collection::vec(inner.clone(), 0..4)
                    .prop_map(|v| format!("[{}]", v.join(", "))),
                prop::collection::vec(("[a-z_]{1,12}", inner), 0..3).prop_map(|v| {
                    let parts: Vec<String> =
                        v.into_iter().map(|(k, x)| format!("{k} = {x}")).collect();
                    format!("{{ {} }}", parts.join(", "))
                }),
            ]
        })
        .boxed()
}

/// A key of one of the tables (usually `table`'s own), or a near miss.
fn key(table: usize) -> impl Strategy<Value = String> {
    let own = TABLES[table].1;
    prop_oneof![
        6 => prop::sample::select(own).prop_map(String::from),
        1 => (0..TABLES.len()).prop_flat_map(|t| prop::sample::select(TABLES[t].1)).prop_map(String::from),
        1 => prop::sample::select(own).prop_map(|k| format!("{k}s")),
        1 => prop::sample::select(own).prop_map(|k| format!("{k}.x")),
        1 => prop::sample::select(own).prop_map(|k| format!("\"{k}\"")),
    ]
}

/// One table: its header (or a malformed one), then keys with random values and, now and then,
/// a line of junk or a comment.
fn table() -> impl Strategy<Value = String> {
    (0..TABLES.len()).prop_flat_map(|t| {
        let name = TABLES[t].0;
        let header = prop_oneof![
            8 => Just(format!("[{name}]")),
            1 => Just(format!("[[{name}]]")),
            1 => Just(format!("[{name}.extra]")),
            1 => Just(format!("[{name}")),
            1 => Just(format!("[ {name} ] # comment")),
        ];
        let line = prop_oneof![
            8 => (key(t), value()).prop_map(|(k, v)| format!("{k} = {v}")),
            1 => "[ -~]{0,20}".boxed(),
            1 => Just("# a comment".to_string()),
            1 => Just(String::new()),
        ];
        (header, prop::collection::vec(line, 0..6))
            .prop_map(|(h, lines)| format!("{h}\n{}\n", lines.join("\n")))
    })
}

/// Usually the three required tables with valid paths first (so that many files parse), then
/// random tables.
fn tomlish() -> impl Strategy<Value = String> {
    (
        prop::sample::select(vec![true, true, true, false]),
        prop::collection::vec(table(), 0..7),
        prop::sample::select(vec!["\n", "\r\n"]),
    )
        .prop_map(|(head, tables, eol)| {
            let mut s = if head {
                MINIMAL.to_string()
            } else {
                String::new()
            };
            for t in tables {
                s.push_str(&t);
            }
            s.replace('\n', eol)
        })
}

fn tomlish_is_read_or_refused(cases: u32, seed: u64) -> usize {
    let probe = Probe::new();
    let accepted = std::cell::Cell::new(0usize);
    runner(cases, seed)
        .run(&tomlish(), |text| {
            if probe.read(text.as_bytes())?.is_some() {
                accepted.set(accepted.get() + 1);
            }
            Ok(())
        })
        .unwrap();
    accepted.get()
}

// ---------------------------------------------------------------------------------------------

#[test]
fn values_of_every_key_read_back_exactly() {
    values_read_back(CI_CASES, 0x5eed_c0f1);
}

#[test]
fn truncated_files_are_read_or_refused_naming_the_file() {
    truncations_are_read_or_refused(CI_CASES, 0x5eed_c0f2);
}

#[test]
fn mutated_files_are_read_or_refused_naming_the_file() {
    mutations_are_read_or_refused(CI_CASES, 0x5eed_c0f3);
}

#[test]
fn random_bytes_are_refused_naming_the_file() {
    random_bytes_are_refused(CI_CASES, 0x5eed_c0f4);
}

#[test]
fn tomlish_text_is_read_or_refused_naming_the_file() {
    let accepted = tomlish_is_read_or_refused(CI_CASES, 0x5eed_c0f5);
    // The generator must reach both outcomes, else it tests only one of them.
    assert!(accepted > 5, "only {accepted} of {CI_CASES} accepted");
    assert!(
        accepted < CI_CASES as usize - 5,
        "{accepted} of {CI_CASES} accepted"
    );
}

/// The large run: `TIEMARK_FUZZ_CASES` cases per property (default 100 000), other seeds.
#[test]
#[ignore = "large fuzzing run: TIEMARK_FUZZ_CASES=100000 cargo test --release --test fuzz_config -- --ignored"]
fn large_fuzzing_run() {
    let n = large_cases();
    values_read_back(n, 0x1a7e_0001);
    truncations_are_read_or_refused(n, 0x1a7e_0002);
    mutations_are_read_or_refused(n, 0x1a7e_0003);
    random_bytes_are_refused(n, 0x1a7e_0004);
    let accepted = tomlish_is_read_or_refused(n, 0x1a7e_0005);
    eprintln!("{n} cases per property; {accepted} TOML-ish files accepted");
}
