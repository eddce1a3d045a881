//! Ingest: ids kept exactly or refused, skipped features counted in every report, and the
//! messages for unreadable files, unrecognised or ambiguous CSV columns, too few landmarks and
//! coordinates out of range.

use super::*;

/// The valid target as CSV text with its ids replaced by `ids` (raw bytes, one a row, as
/// many as the target has points) and the header `header` (`id,x,y` in the valid pair).
fn target_csv_with_ids(header: &str, ids: &[Vec<u8>]) -> Vec<u8> {
    let (t, _) = target_points();
    assert_eq!(ids.len(), t.len());
    let mut bytes = format!("{header}\n").into_bytes();
    for (p, id) in t.iter().zip(ids) {
        bytes.extend_from_slice(id);
        bytes.extend_from_slice(format!(",{},{}\n", p[0], p[1]).as_bytes());
    }
    bytes
}

/// The target ids of the valid pair as bytes.
fn target_ids() -> Vec<Vec<u8>> {
    target_points()
        .1
        .into_iter()
        .map(String::into_bytes)
        .collect()
}

/// The reference GeoJSON of the valid pair with the features `extra` (GeoJSON text) in front.
fn reference_with(extra: &[String]) -> String {
    let r = reference_points();
    geojson(&r, &reference_ids(r.len()), Some(UTM33)).replacen(
        "\"features\":[\n",
        &format!(
            "\"features\":[\n{}",
            extra.iter().map(|f| format!("{f},\n")).collect::<String>()
        ),
        1,
    )
}

/// One GeoJSON point feature with the given properties (JSON text) at `p`.
fn point_feature(properties: &str, p: [f64; 2]) -> String {
    format!(
        r#"{{"type":"Feature","properties":{{{properties}}},"geometry":{{"type":"Point","coordinates":[{:e},{:e}]}}}}"#,
        p[0], p[1]
    )
}

// --- ids -------------------------------------------------------------------------------------

#[test]
fn an_id_field_whose_values_repeat_is_refused() {
    // Every reference feature has `kind` = "marker" (a class, not an id): every control point
    // used to be labelled "marker".
    let site = Site::new();
    let (reference, target) = site.valid_pair();
    let n = reference_points().len();
    site.expect_failure(
        &local_match(reference, target, &["--reference-id", "kind"]),
        2,
        &[
            "reference.geojson",
            "id field 'kind'",
            "1 of its values repeat",
            &format!("'marker' {n} times"),
            "one value per feature",
            "feature ids",
        ],
    );
}

#[test]
fn repeated_ids_are_counted_with_examples() {
    // Three values repeat: the two most frequent first.
    let site = Site::new();
    let (reference, _) = site.valid_pair();
    let mut ids = target_ids();
    for i in 0..6 {
        ids[i] = b"house".to_vec();
    }
    for i in 6..9 {
        ids[i] = b"shed".to_vec();
    }
    ids[9] = b"t1000".to_vec();
    ids[10] = b"t1000".to_vec();
    let target = site.write("classes.csv", target_csv_with_ids("id,x,y", &ids));
    site.expect_failure(
        &local_match(reference, target, &["--target-id", "id"]),
        2,
        &[
            "classes.csv",
            "3 of its values repeat",
            "'house' 6 times, 'shed' 3 times, 't1000' 2 times",
        ],
    );
}

#[test]
fn an_id_that_is_not_utf8_is_refused_naming_the_feature() {
    // Latin-1 bytes in a CSV: they used to become U+FFFD, which merges distinct ids.
    let site = Site::new();
    let (reference, _) = site.valid_pair();
    let mut ids = target_ids();
    ids[4] = b"M\xFCller 7".to_vec();
    let target = site.write("latin1.csv", target_csv_with_ids("id,x,y", &ids));
    site.expect_failure(
        &local_match(reference, target, &["--target-id", "id"]),
        2,
        &[
            "latin1.csv",
            // GDAL's CSV feature ids count the rows from 1.
            "feature 5:",
            "id field 'id' is not valid UTF-8",
            "M\\xFCller 7",
            "save the table as UTF-8",
        ],
    );
}

/// Writes the reference as a Shapefile whose `name` values are Latin-1 bytes with no encoding
/// declared (no .cpg, no code page in the .dbf header), as older software writes them.
fn latin1_shapefile(site: &Site) -> &'static str {
    let r = reference_points();
    let ids: Vec<String> = (0..r.len()).map(|i| format!("Stra\u{df}e {i}")).collect();
    std::fs::create_dir(site.path("shp")).unwrap();
    let shp = site.path("shp/landmarks.shp");
    write_with_gdal("ESRI Shapefile", &shp, &r, &ids);
    // GDAL writes ISO-8859-1 by default and says so in a .cpg file and in the .dbf header's
    // language driver byte (offset 29; dBASE III+ header layout, from memory).
    let _ = std::fs::remove_file(site.path("shp/landmarks.cpg"));
    let dbf = site.path("shp/landmarks.dbf");
    let mut bytes = std::fs::read(&dbf).unwrap();
    bytes[29] = 0;
    assert!(
        bytes.windows(2).any(|w| w == b"a\xDF"),
        "the .dbf does not hold the Latin-1 byte"
    );
    std::fs::write(&dbf, bytes).unwrap();
    "shp/landmarks.shp"
}

#[test]
fn a_shapefile_without_declared_encoding_is_refused_with_the_fix() {
    let site = Site::new();
    let (_, target) = site.valid_pair();
    let shp = latin1_shapefile(&site);
    site.expect_failure(
        &local_match(shp, target, &["--reference-id", "name"]),
        2,
        &[
            "landmarks.shp",
            "not valid UTF-8",
            "Stra\\xDFe 0",
            ".cpg file",
            "SHAPE_ENCODING",
        ],
    );
    // The fix the message gives works: with the encoding declared the ids read as written.
    let out = Command::new(env!("CARGO_BIN_EXE_tiemark"))
        .args(["landmarks", shp, "--id", "name", "--out", "seen.csv"])
        .env("SHAPE_ENCODING", "ISO-8859-1")
        .current_dir(site.path(""))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{out:#?}");
    let seen = std::fs::read_to_string(site.path("seen.csv")).unwrap();
    assert!(seen.contains("Stra\u{df}e 17,"), "{seen}");
}

#[test]
fn ids_keep_white_space_leading_zeros_and_every_digit() {
    // GDAL's CSV type detection made " 12", "12" and "0012" one integer 12 and a 27-digit id
    // a rounded real; white space used to be trimmed.
    let site = Site::new();
    let special: [&[u8]; 6] = [
        b" 12",
        b"12",
        b"0012",
        b"12 ",
        b"123456789012345678901234567",
        b"1e3",
    ];
    let mut ids = target_ids();
    for (i, id) in special.iter().enumerate() {
        ids[i] = id.to_vec();
    }
    site.write("ids.csv", target_csv_with_ids("id,x,y", &ids));
    let out = site.run(&["landmarks", "ids.csv", "--id", "id", "--out", "seen.csv"]);
    assert_eq!(out.code, Some(0), "{out:#?}");
    let seen = std::fs::read_to_string(site.path("seen.csv")).unwrap();
    let written: Vec<&str> = seen
        .lines()
        .skip(1)
        .map(|l| l.rsplitn(3, ',').nth(2).unwrap())
        .collect();
    let expected: Vec<String> = ids
        .iter()
        .map(|b| String::from_utf8(b.clone()).unwrap())
        .collect();
    assert_eq!(written, expected);
}

#[test]
fn geopackage_text_ids_of_25_digits_come_through() {
    // A guard (this passed before the id work too): a GeoPackage string field is read exactly.
    let site = Site::new();
    let r = jittered_grid(5, 9);
    let ids: Vec<String> = (0..r.len())
        .map(|i| format!("98765432109876543210{i:05}"))
        .collect();
    write_with_gdal("GPKG", &site.path("text-ids.gpkg"), &r, &ids);
    let out = site.run(&[
        "landmarks",
        "text-ids.gpkg",
        "--id",
        "name",
        "--out",
        "seen.csv",
    ]);
    assert_eq!(out.code, Some(0), "{out:#?}");
    let seen = std::fs::read_to_string(site.path("seen.csv")).unwrap();
    for id in &ids {
        assert!(seen.contains(&format!("{id},")), "{id} missing:\n{seen}");
    }
}

#[test]
fn geojson_numbers_that_gdal_clamps_or_rounds_are_refused_as_ids() {
    // GDAL 3.6 clamps a JSON integer beyond 64 bits to 9223372036854775807 (with a warning)
    // and reads a long decimal as a double printed with 15 digits.
    for (value, words) in [
        (
            "123456789012345678901234567",
            ["64-bit integers", "9223372036854775807", "as text"],
        ),
        (
            "0.1234567890123456789",
            ["floating-point numbers", "0.123456789012346", "as text"],
        ),
    ] {
        let site = Site::new();
        let (_, target) = site.valid_pair();
        let r = reference_points();
        let features: Vec<String> = r
            .iter()
            .enumerate()
            .map(|(i, p)| {
                let v = if i == 7 {
                    value.to_string()
                } else {
                    i.to_string()
                };
                point_feature(&format!(r#""num":{v}"#), *p)
            })
            .collect();
        let text = format!(
            "{{\"type\":\"FeatureCollection\",\"crs\":{{\"type\":\"name\",\"properties\":{{\"name\":\"{UTM33}\"}}}},\"features\":[\n{}\n]}}\n",
            features.join(",\n")
        );
        let reference = site.write("numbers.geojson", text);
        let mut all = vec!["numbers.geojson", "feature 7", "id field 'num'"];
        all.extend(words);
        site.expect_failure(
            &local_match(reference, target, &["--reference-id", "num"]),
            2,
            &all,
        );
    }
}

// --- skipped features -----------------------------------------------------------------------

#[test]
fn the_match_report_counts_skipped_features_by_cause() {
    // Two features without geometry and a polygon whose area overflows (no finite centroid):
    // the run goes on, and the summary and report.txt say what was left out.
    let site = Site::new();
    let (_, target) = site.valid_pair();
    let extra = [
        r#"{"type":"Feature","properties":{"name":"nothing1"},"geometry":null}"#.to_string(),
        r#"{"type":"Feature","properties":{"name":"nothing2"},"geometry":null}"#.to_string(),
        r#"{"type":"Feature","properties":{"name":"huge"},"geometry":{"type":"Polygon","coordinates":[[[0,0],[1e300,0],[1e300,1e300],[0,0]]]}}"#.to_string(),
    ];
    let reference = site.write("mixed.geojson", reference_with(&extra));
    let out = site.run(&local_match(reference, target, &["--reference-id", "name"]));
    assert_eq!(out.code, Some(0), "{out:#?}");
    let line = "skipped    reference: 3 (2 without a geometry, 1 with an invalid geometry (no finite centroid)); target: none";
    assert!(out.stdout.contains(line), "{out:#?}");
    let report = std::fs::read_to_string(site.path("out/report.txt")).unwrap();
    assert!(report.contains(line), "{report}");
    // The landmarks command counts the same.
    let out = site.run(&["landmarks", reference, "--out", "seen.csv"]);
    assert!(
        out.stdout
            .contains("3 features skipped (2 without a geometry, 1 with an invalid geometry"),
        "{out:#?}"
    );
}

#[test]
fn a_coordinate_that_overflows_is_out_of_range_not_collinear() {
    let site = Site::new();
    let (_, target) = site.valid_pair();
    let feature = point_feature(r#""name":"far""#, [1e300, 5.2e6]);
    let reference = site.write("far.geojson", reference_with(&[feature]));
    site.expect_failure(
        &local_match(reference, target, &["--reference-id", "name"]),
        2,
        &[
            "far.geojson",
            "landmark 'far' (feature 0)",
            "outside the range",
            "1e300",
            "units",
        ],
    );
}

#[test]
fn one_or_two_landmarks_are_too_few_not_collinear() {
    for (n, words) in [(1, "only 1 landmark read"), (2, "only 2 landmarks read")] {
        let site = Site::new();
        let (_, target) = site.valid_pair();
        let r = &reference_points()[..n];
        let reference = site.write("few.geojson", geojson(r, &reference_ids(n), Some(UTM33)));
        site.expect_failure(
            &local_match(reference, target, &[]),
            2,
            &["few.geojson", words, "at least 3 landmarks"],
        );
    }
}

// --- files and CSV columns -------------------------------------------------------------------

/// Whether this process may read a file its mode forbids (root: CAP_DAC_OVERRIDE).
fn reads_past_permissions(file: &Path) -> bool {
    std::fs::File::open(file).is_ok()
}

#[test]
fn a_file_that_cannot_be_read_says_so() {
    use std::os::unix::fs::PermissionsExt;
    use std::os::unix::process::CommandExt;
    let site = Site::new();
    let r = reference_points();
    let text = geojson(&r, &reference_ids(r.len()), Some(UTM33));
    site.write("secret.geojson", &text);
    let file = site.path("secret.geojson");
    std::fs::set_permissions(&file, std::fs::Permissions::from_mode(0o000)).unwrap();
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_tiemark"));
    cmd.args(["landmarks", "secret.geojson", "--out", "seen.csv"])
        .current_dir(site.path(""));
    let as_root = reads_past_permissions(&file);
    if as_root {
        // Run as root, where mode 000 does not stop reading: run tiemark as the unprivileged
        // user `nobody` (uid 65534), who may enter the folder but not read the file.
        std::fs::set_permissions(site.path(""), std::fs::Permissions::from_mode(0o777)).unwrap();
        cmd.uid(65534).gid(65534);
    }
    let out = cmd.output();
    std::fs::set_permissions(&file, std::fs::Permissions::from_mode(0o644)).unwrap();
    let out = match out {
        Ok(out) => out,
        Err(e) if as_root && e.kind() == std::io::ErrorKind::PermissionDenied => {
            eprintln!(
                "SKIPPED a_file_that_cannot_be_read_says_so: run as root, which reads past mode 000, and this process may not switch to uid 65534 ({e})"
            );
            return;
        }
        Err(e) => panic!("tiemark does not run: {e}"),
    };
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{out:#?}");
    for w in [
        "secret.geojson",
        "cannot be read (permission denied)",
        "read access",
    ] {
        assert!(stderr.contains(w), "no {w:?} in: {stderr}");
    }
    assert!(!stderr.contains("driver"), "{stderr}");
    assert!(!site.path("seen.csv").exists(), "output written");
    assert_eq!(
        std::fs::read_to_string(&file).unwrap(),
        text,
        "input changed"
    );
}

/// The valid target as CSV with the coordinate columns under other names (`header`: id, then
/// the x and y names, then `extra` columns filled with `fill(i)`).
fn target_with_columns(header: &str, extra: impl Fn(usize, [f64; 2]) -> String) -> String {
    let (t, ids) = target_points();
    let mut text = format!("{header}\n");
    for (i, (p, id)) in t.iter().zip(&ids).enumerate() {
        text.push_str(&format!("{id},{},{}{}\n", p[0], p[1], extra(i, *p)));
    }
    text
}

#[test]
fn unrecognised_csv_columns_are_listed_with_the_options() {
    let site = Site::new();
    let target = site.write(
        "px.csv",
        target_with_columns("id,px,py", |_, _| String::new()),
    );
    site.refuses_match(
        None,
        Some(target),
        &[],
        &[
            "px.csv",
            "no coordinate columns found",
            "x, lon, long, longitude, easting, east, e",
            "y, lat, latitude, northing, north, n",
            "'id', 'px', 'py'",
            "--target-x-column",
            "--target-y-column",
        ],
    );
    // Control: with the columns named, the match works.
    let (reference, _) = site.valid_pair();
    let out = site.run(&local_match(
        reference,
        target,
        &["--target-x-column", "px", "--target-y-column", "PY"],
    ));
    assert_eq!(out.code, Some(0), "{out:#?}");
}

#[test]
fn a_named_column_that_is_not_there_is_refused() {
    let site = Site::new();
    site.refuses_match(
        None,
        None,
        &["--target-x-column", "east"],
        &["target.csv", "no column named 'east'", "'id', 'x', 'y'"],
    );
}

#[test]
fn two_pairs_of_coordinate_columns_are_ambiguous() {
    // lon/lat and easting/northing: the lon/lat pair used to be taken silently.
    let site = Site::new();
    let target = site.write(
        "both.csv",
        target_with_columns("id,easting,northing,lon,lat", |i, _| {
            format!(",{},{}", 15.0 + i as f64 * 1e-4, 46.9 + i as f64 * 1e-4)
        }),
    );
    site.refuses_match(
        None,
        Some(target),
        &[],
        &[
            "both.csv",
            "two pairs of coordinate columns",
            "'lon'/'lat'",
            "'easting'/'northing'",
            "--target-x-column",
        ],
    );
    // Control: with the pair named, the match works.
    let (reference, _) = site.valid_pair();
    let out = site.run(&local_match(
        reference,
        target,
        &[
            "--target-x-column",
            "easting",
            "--target-y-column",
            "northing",
        ],
    ));
    assert_eq!(out.code, Some(0), "{out:#?}");
}

#[test]
fn column_options_on_a_file_that_is_not_csv_are_refused() {
    Site::new().refuses_match(
        None,
        None,
        &["--reference-x-column", "x"],
        &[
            "reference.geojson",
            "CSV table",
            "GeoJSON",
            "leave them out",
        ],
    );
}

#[test]
fn a_csv_with_a_nul_byte_is_refused() {
    // GDAL's CSV reader ends a cell at a NUL and misreads every row after it.
    let site = Site::new();
    let mut ids = target_ids();
    ids[3] = b"t\x00x".to_vec();
    let target = site.write("nul.csv", target_csv_with_ids("id,x,y", &ids));
    site.refuses_match(None, Some(target), &[], &["nul.csv", "NUL byte"]);
}

#[test]
fn the_landmarks_command_takes_the_column_options() {
    let site = Site::new();
    site.write(
        "px.csv",
        target_with_columns("id,px,py", |_, _| String::new()),
    );
    let args = ["landmarks", "px.csv", "--out", "seen.csv"];
    site.expect_failure(&args, 2, &["px.csv", "--x-column"]);
    let out = site.run(&[&args[..], &["--x-column", "px", "--y-column", "py"]].concat());
    assert_eq!(out.code, Some(0), "{out:#?}");
    assert!(
        out.stdout.starts_with(&format!(
            "{} landmarks from px.csv",
            target_points().0.len()
        )),
        "{out:#?}"
    );
}

#[test]
fn pipeline_files_take_the_column_keys() {
    let site = Site::new();
    site.valid_pair();
    site.write(
        "px.csv",
        target_with_columns("id,px,py", |_, _| String::new()),
    );
    let text = "[reference]\npath = \"../reference.geojson\"\n\n[target]\npath = \"../px.csv\"\ncrs = \"local\"\n\n[output]\ndir = \"out\"\n";
    site.write("pipelines/p.toml", text);
    // Without the keys the message names them as keys of this survey.
    site.expect_failure(
        &["run", "pipelines/p.toml"],
        2,
        &[
            "px.csv",
            "no coordinate columns found",
            "x_column and y_column",
        ],
    );
    site.write(
        "pipelines/p.toml",
        text.replace(
            "crs = \"local\"\n",
            "crs = \"local\"\nx_column = \"px\"\ny_column = \"py\"\n",
        ),
    );
    let out = site.run(&["run", "pipelines/p.toml"]);
    assert_eq!(out.code, Some(0), "{out:#?}");
    assert!(site.path("pipelines/out/transform.json").is_file());
}
