//! What a table read by GDAL's CSV driver needs beyond the generic vector reading.
//!
//! **In:** the table as GDAL opened it, without open options: every column as text (GDAL's
//! type detection is left off, so that ids such as `0012` or a 25-digit number come through
//! as written). **Out:** the x and y columns ([`coordinate_columns`]), the position of a row
//! parsed from them ([`row_position`]), and the check that the file holds no NUL byte
//! ([`check_no_nul`]); or an [`IngestError`] naming the file.
//!
//! The position is parsed here rather than by GDAL (its X_POSSIBLE_NAMES open option): GDAL
//! 3.6 takes the first matching column in column order (an attribute `n` before `y` became the
//! northing), crashes when two columns match one axis, reads a number followed by text (`10 m`)
//! as the number, and gives a row of `nan` or `inf` no geometry at all. Here a cell is a number
//! as Rust's `f64` parser reads it after trimming spaces, or the row is refused.
//!
//! Whether a file is a CSV table is GDAL's word: the driver that opened it is `CSV`
//! ([`is_csv`]), whatever the file is called.

use super::open::Opened;
use super::validate::in_range;
use super::IngestError;
use std::io::Read;
use std::path::Path;

/// Conventional names of coordinate columns, as pairs (x names, y names), matched
/// case-insensitively. A table must hold one complete pair; two pairs are ambiguous.
const PAIRS: &[(&[&str], &[&str])] = &[
    (&["x"], &["y"]),
    (&["lon", "long", "longitude"], &["lat", "latitude"]),
    (&["easting", "east", "e"], &["northing", "north", "n"]),
];

/// Every name looked for as x, in the order of [`PAIRS`] (for messages).
pub(super) const X_NAMES: &[&str] = &["x", "lon", "long", "longitude", "easting", "east", "e"];
/// Every name looked for as y.
pub(super) const Y_NAMES: &[&str] = &["y", "lat", "latitude", "northing", "north", "n"];

/// The x and y columns chosen for a table.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(super) struct Columns {
    /// The x column's index among the fields.
    pub xi: usize,
    /// The y column's index.
    pub yi: usize,
    /// The x column's name as written in the file.
    pub x: String,
    /// The y column's name.
    pub y: String,
}

/// Whether GDAL opened the dataset with its CSV driver.
pub(super) fn is_csv(opened: &Opened) -> bool {
    opened.driver.eq_ignore_ascii_case("CSV")
}

/// The x and y columns of a table with the columns `names`: those named by `x_column` /
/// `y_column` (exactly, else in any case), the other axis found by name when only one is
/// given; else the one complete pair of [`PAIRS`]. `Ok(None)`: no complete pair (GDAL may still
/// find a WKT geometry column). Refused: a named column that is not there, one column for both
/// axes, two columns for one axis of a pair, two complete pairs.
pub(super) fn coordinate_columns(
    path: &Path,
    names: &[String],
    x_column: Option<&str>,
    y_column: Option<&str>,
) -> Result<Option<Columns>, IngestError> {
    let bad = |problem: String| IngestError::BadCoordinateColumn {
        path: path.to_path_buf(),
        problem,
        columns: listed(names),
    };
    let matching = |wanted: &[&str]| -> Vec<usize> {
        (0..names.len())
            .filter(|&i| wanted.iter().any(|w| names[i].eq_ignore_ascii_case(w)))
            .collect()
    };
    let named = |name: &str, key: &str| -> Result<usize, IngestError> {
        let exact: Vec<usize> = (0..names.len()).filter(|&i| names[i] == name).collect();
        let found = if exact.is_empty() {
            matching(&[name])
        } else {
            exact
        };
        match found.as_slice() {
            [i] => Ok(*i),
            [] => Err(bad(format!("no column named '{name}' ({key})"))),
            [a, b, ..] => Err(IngestError::AmbiguousColumns {
                path: path.to_path_buf(),
                axis: if key == "x_column" { "x" } else { "y" }.into(),
                first: names[*a].clone(),
                second: names[*b].clone(),
            }),
        }
    };
    // The other axis when one is named: the only column with a conventional name for it.
    let other = |given: usize, key: &str, wanted: &[&str], other_key: &str| {
        let found: Vec<usize> = matching(wanted)
            .into_iter()
            .filter(|&i| i != given)
            .collect();
        match found.as_slice() {
            [i] => Ok(*i),
            [] => Err(bad(format!(
                "{key} is '{}' but no column has a name for the other coordinate ({}); give {other_key} too",
                names[given],
                wanted.join(", ")
            ))),
            several => Err(bad(format!(
                "{key} is '{}' and several columns could hold the other coordinate ({}); give {other_key} too",
                names[given],
                several.iter().map(|&i| format!("'{}'", names[i])).collect::<Vec<_>>().join(", ")
            ))),
        }
    };
    let (xi, yi) = match (x_column, y_column) {
        (Some(x), Some(y)) => (named(x, "x_column")?, named(y, "y_column")?),
        (Some(x), None) => {
            let xi = named(x, "x_column")?;
            (xi, other(xi, "x_column", Y_NAMES, "y_column")?)
        }
        (None, Some(y)) => {
            let yi = named(y, "y_column")?;
            (other(yi, "y_column", X_NAMES, "x_column")?, yi)
        }
        (None, None) => {
            let mut complete = Vec::new();
            for (xs, ys) in PAIRS {
                let (xm, ym) = (matching(xs), matching(ys));
                if xm.is_empty() || ym.is_empty() {
                    continue;
                }
                for (axis, m) in [("x", &xm), ("y", &ym)] {
                    if let [a, b, ..] = m.as_slice() {
                        return Err(IngestError::AmbiguousColumns {
                            path: path.to_path_buf(),
                            axis: axis.into(),
                            first: names[*a].clone(),
                            second: names[*b].clone(),
                        });
                    }
                }
                complete.push((xm[0], ym[0]));
            }
            match complete.as_slice() {
                [] => return Ok(None),
                [one] => *one,
                [a, b, ..] => {
                    return Err(IngestError::AmbiguousPairs {
                        path: path.to_path_buf(),
                        first_x: names[a.0].clone(),
                        first_y: names[a.1].clone(),
                        second_x: names[b.0].clone(),
                        second_y: names[b.1].clone(),
                    })
                }
            }
        }
    };
    if xi == yi {
        return Err(bad(format!(
            "x_column and y_column both name the column '{}'",
            names[xi]
        )));
    }
    Ok(Some(Columns {
        xi,
        yi,
        x: names[xi].clone(),
        y: names[yi].clone(),
    }))
}

/// The columns of a table for a message: `'id', 'x', 'y'`, or `(none)`.
pub(super) fn listed(names: &[String]) -> String {
    if names.is_empty() {
        return "(none)".into();
    }
    names
        .iter()
        .map(|n| format!("'{n}'"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// What a row's coordinate cells hold.
pub(super) enum RowPosition {
    /// Both cells blank: a row without geometry.
    Blank,
    /// A position within the coordinate range.
    At([f64; 2]),
    /// Anything else: the cells as the message shows them, e.g. `x 'nan' (NaN), y '5.2'`.
    Bad(String),
}

/// The position of a row from the text of its x and y cells (`None`: unset).
pub(super) fn row_position(columns: &Columns, x: Option<&[u8]>, y: Option<&[u8]>) -> RowPosition {
    let text = |b: Option<&[u8]>| String::from_utf8_lossy(b.unwrap_or_default()).into_owned();
    let (xt, yt) = (text(x), text(y));
    if xt.trim().is_empty() && yt.trim().is_empty() {
        return RowPosition::Blank;
    }
    let parse = |t: &str| t.trim().parse::<f64>().ok();
    if let (Some(px), Some(py)) = (parse(&xt), parse(&yt)) {
        if in_range([px, py]) {
            return RowPosition::At([px, py]);
        }
    }
    let cell = |name: &str, t: &str| match parse(t) {
        Some(v) if !in_range([v, 0.0]) => format!("{name} '{t}' (reads as {v:e})"),
        _ => format!("{name} '{t}'"),
    };
    RowPosition::Bad(format!(
        "{}, {}",
        cell(&columns.x, &xt),
        cell(&columns.y, &yt)
    ))
}

/// Refuses a file holding a NUL byte (GDAL's CSV reader ends a cell at it and misreads the
/// rows that follow). A path that is not a plain readable file (a GDAL virtual path) is left to
/// GDAL.
pub(super) fn check_no_nul(path: &Path) -> Result<(), IngestError> {
    let Ok(mut file) = std::fs::File::open(path) else {
        return Ok(());
    };
    let mut buf = vec![0u8; 1 << 16];
    let mut offset = 0u64;
    loop {
        let n = match file.read(&mut buf) {
            Ok(0) => return Ok(()),
            Ok(n) => n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
            Err(e) => {
                return Err(IngestError::CannotRead {
                    path: path.to_path_buf(),
                    reason: e.to_string(),
                })
            }
        };
        if let Some(i) = buf[..n].iter().position(|b| *b == 0) {
            return Err(IngestError::NulInCsv {
                path: path.to_path_buf(),
                offset: offset + i as u64,
            });
        }
        offset += n as u64;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn names(list: &[&str]) -> Vec<String> {
        list.iter().map(|s| s.to_string()).collect()
    }

    fn chosen(
        list: &[&str],
        x: Option<&str>,
        y: Option<&str>,
    ) -> Result<Option<(String, String)>, String> {
        coordinate_columns(Path::new("t.csv"), &names(list), x, y)
            .map(|c| c.map(|c| (c.x, c.y)))
            .map_err(|e| e.to_string())
    }

    fn pair(x: &str, y: &str) -> Result<Option<(String, String)>, String> {
        Ok(Some((x.to_string(), y.to_string())))
    }

    #[test]
    fn the_names_are_the_pairs_in_order() {
        let xs: Vec<&str> = PAIRS.iter().flat_map(|p| p.0.iter().copied()).collect();
        let ys: Vec<&str> = PAIRS.iter().flat_map(|p| p.1.iter().copied()).collect();
        assert_eq!((xs.as_slice(), ys.as_slice()), (X_NAMES, Y_NAMES));
    }

    #[test]
    fn one_complete_pair_is_chosen_whatever_the_order_and_case() {
        assert_eq!(chosen(&["id", "n", "X", "y"], None, None), pair("X", "y"));
        assert_eq!(
            chosen(&["Lat", "name", "LONG"], None, None),
            pair("LONG", "Lat")
        );
        // `e` alone (no northing) is no pair.
        assert_eq!(chosen(&["e", "lat", "lon"], None, None), pair("lon", "lat"));
        assert_eq!(chosen(&["lon", "northing"], None, None), Ok(None));
    }

    #[test]
    fn two_pairs_or_two_columns_for_an_axis_are_refused() {
        let e = chosen(&["lon", "lat", "easting", "northing"], None, None).unwrap_err();
        assert!(e.contains("'lon'/'lat' and 'easting'/'northing'"), "{e}");
        assert!(e.contains("x_column"), "{e}");
        let e = chosen(&["x", "X", "y"], None, None).unwrap_err();
        assert!(e.contains("'x' and 'X'"), "{e}");
    }

    #[test]
    fn named_columns_win_and_must_exist() {
        let cols = ["lon", "lat", "easting", "northing", "a", "b"];
        assert_eq!(
            chosen(&cols, Some("easting"), Some("northing")),
            pair("easting", "northing")
        );
        assert_eq!(chosen(&cols, Some("A"), Some("b")), pair("a", "b"));
        let e = chosen(&cols, Some("east"), Some("b")).unwrap_err();
        assert!(e.contains("no column named 'east' (x_column)"), "{e}");
        let e = chosen(&cols, Some("a"), Some("a")).unwrap_err();
        assert!(e.contains("both name the column 'a'"), "{e}");
        // Only one named: the other is the only column with a name for that axis.
        assert_eq!(
            chosen(&["px", "north", "id"], Some("px"), None),
            pair("px", "north")
        );
        let e = chosen(&cols, Some("a"), None).unwrap_err();
        assert!(
            e.contains("'lat', 'northing'") && e.contains("give y_column too"),
            "{e}"
        );
    }

    #[test]
    fn cells_are_numbers_in_range_or_refused() {
        let c = Columns {
            xi: 0,
            yi: 1,
            x: "x".into(),
            y: "y".into(),
        };
        let at = |x: &str, y: &str| match row_position(&c, Some(x.as_bytes()), Some(y.as_bytes())) {
            RowPosition::At(p) => Ok(p),
            RowPosition::Blank => Err("blank".to_string()),
            RowPosition::Bad(s) => Err(s),
        };
        assert_eq!(at(" 1.5 ", "-2e3"), Ok([1.5, -2000.0]));
        assert_eq!(at("", " "), Err("blank".into()));
        assert_eq!(at("10 m", "2"), Err("x '10 m', y '2'".into()));
        assert_eq!(
            at("1e999", "2"),
            Err("x '1e999' (reads as inf), y '2'".into())
        );
        assert_eq!(at("nan", "2"), Err("x 'nan' (reads as NaN), y '2'".into()));
        assert_eq!(at("1", ""), Err("x '1', y ''".into()));
    }
}
