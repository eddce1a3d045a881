//! The checkpoints file: surveyed marks with their coordinates in both surveys.
//!
//! **In:** the text of a CSV file and its path (for messages). **Out:** [`CheckpointRows`]:
//! ids and coordinates as written, or a [`CheckpointError`] that names the file, the line and
//! what to do. Pure: the caller reads the file and converts the coordinates.
//!
//! ## Format
//!
//! A comma-separated UTF-8 text file with a header line naming at least the columns
//!
//! ```text
//! id,reference_x,reference_y,target_x,target_y
//! CP-01,455180.012,5209670.004,14.410252,47.038975
//! ```
//!
//! in any order (names matched without regard to case or surrounding spaces; other columns are
//! ignored). `reference_x`, `reference_y` are the mark's coordinates in the reference survey's
//! own CRS, `target_x`, `target_y` in the target survey's own CRS (or local grid); in a
//! geographic CRS x is the longitude and y the latitude, in decimal degrees. Fields may be
//! enclosed in double quotes (a doubled quote inside stands for one). Blank lines are skipped.
//! Ids must be unique and not empty; every coordinate must be a finite number.

use std::path::{Path, PathBuf};

/// The columns a checkpoints file must have.
pub const COLUMNS: [&str; 5] = ["id", "reference_x", "reference_y", "target_x", "target_y"];

/// The checkpoints of a file, as written.
#[derive(Debug, Clone, PartialEq)]
pub struct CheckpointRows {
    /// The file.
    pub file: PathBuf,
    /// Ids, in file order.
    pub ids: Vec<String>,
    /// Reference coordinates (the reference's own CRS).
    pub reference: Vec<[f64; 2]>,
    /// Target coordinates (the target's own CRS or local grid).
    pub target: Vec<[f64; 2]>,
    /// The line of each checkpoint in the file (from 1).
    pub lines: Vec<usize>,
}

/// A checkpoints file that cannot be used.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum CheckpointError {
    /// Not readable.
    #[error("{file}: cannot read the checkpoints file (accuracy.checkpoints): {detail}; give the CSV of surveyed checkpoints with the columns {columns}")]
    Read {
        /// The file.
        file: PathBuf,
        /// The cause.
        detail: String,
        /// [`COLUMNS`], joined.
        columns: String,
    },
    /// Not UTF-8 text.
    #[error("{file}: the checkpoints file is not UTF-8 text (line {line}); save it as a UTF-8 CSV with the columns {columns}")]
    NotText {
        /// The file.
        file: PathBuf,
        /// The first line that is not UTF-8.
        line: usize,
        /// [`COLUMNS`], joined.
        columns: String,
    },
    /// No header line.
    #[error("{file}: the checkpoints file is empty; its first line must name the columns {columns}, and each further line give one checkpoint")]
    Empty {
        /// The file.
        file: PathBuf,
        /// [`COLUMNS`], joined.
        columns: String,
    },
    /// Columns missing from the header.
    #[error("{file}: the checkpoints file has no column {missing} (its header is \"{header}\"); the first line must name the columns {columns}")]
    MissingColumns {
        /// The file.
        file: PathBuf,
        /// The missing names, joined.
        missing: String,
        /// The header as read.
        header: String,
        /// [`COLUMNS`], joined.
        columns: String,
    },
    /// A column named twice.
    #[error(
        "{file}: the checkpoints file names the column {column} twice in its header; keep one"
    )]
    DuplicateColumn {
        /// The file.
        file: PathBuf,
        /// The column.
        column: String,
    },
    /// A line with too few fields.
    #[error("{file}, line {line}: {found} fields where the header has {expected}; give every checkpoint all the columns of the header")]
    FieldCount {
        /// The file.
        file: PathBuf,
        /// The line.
        line: usize,
        /// Fields found.
        found: usize,
        /// Fields in the header.
        expected: usize,
    },
    /// A quoted field not closed.
    #[error("{file}, line {line}: a quoted field is not closed; close it with a double quote")]
    OpenQuote {
        /// The file.
        file: PathBuf,
        /// The line.
        line: usize,
    },
    /// A coordinate that is not a finite number.
    #[error("{file}, line {line}: {column} is \"{value}\", not a finite number; give the coordinate as a decimal number (a point as the decimal separator)")]
    NotANumber {
        /// The file.
        file: PathBuf,
        /// The line.
        line: usize,
        /// The column.
        column: &'static str,
        /// The value as written.
        value: String,
    },
    /// An empty id.
    #[error("{file}, line {line}: the checkpoint has no id; give every checkpoint a unique id")]
    EmptyId {
        /// The file.
        file: PathBuf,
        /// The line.
        line: usize,
    },
    /// An id used twice.
    #[error("{file}, line {line}: checkpoint id {id} is used again (first on line {first}); give every checkpoint a unique id")]
    DuplicateId {
        /// The file.
        file: PathBuf,
        /// The line of the second use.
        line: usize,
        /// The id.
        id: String,
        /// The line of the first use.
        first: usize,
    },
    /// No checkpoints after the header.
    #[error("{file}: the checkpoints file has a header but no checkpoints; add one line per surveyed mark, or leave accuracy.checkpoints out to get leave-one-out residuals")]
    NoRows {
        /// The file.
        file: PathBuf,
    },
    /// A coordinate that is not a longitude/latitude in a geographic CRS.
    #[error("{file}, line {line}: checkpoint {id} has {side} coordinates ({x}, {y}), which are not a longitude and a latitude in {crs}; give x as the longitude and y as the latitude in decimal degrees (are the columns swapped?)")]
    NotLonLat {
        /// The file.
        file: PathBuf,
        /// The line.
        line: usize,
        /// The id.
        id: String,
        /// "reference" or "target".
        side: &'static str,
        /// x as read.
        x: f64,
        /// y as read.
        y: f64,
        /// The CRS.
        crs: String,
    },
    /// A checkpoint PROJ could not convert into the working CRS.
    #[error("{file}, line {line}: checkpoint {id}'s {side} coordinates ({x}, {y}) cannot be converted from {from} to {to}; check that they are in the {side} survey's own CRS")]
    Conversion {
        /// The file.
        file: PathBuf,
        /// The line.
        line: usize,
        /// The id.
        id: String,
        /// "reference" or "target".
        side: &'static str,
        /// x as read.
        x: f64,
        /// y as read.
        y: f64,
        /// Source CRS.
        from: String,
        /// Working CRS.
        to: String,
    },
}

fn columns() -> String {
    COLUMNS.join(",")
}

/// Splits one CSV line into fields (double quotes enclose a field; `""` inside is one quote).
/// `None` when a quote is not closed.
fn split_line(line: &str) -> Option<Vec<String>> {
    let mut fields = Vec::new();
    let mut field = String::new();
    let mut chars = line.chars().peekable();
    let mut quoted = false;
    while let Some(c) = chars.next() {
        match (quoted, c) {
            (true, '"') if chars.peek() == Some(&'"') => {
                field.push('"');
                chars.next();
            }
            (true, '"') => quoted = false,
            (true, c) => field.push(c),
            (false, '"') if field.trim().is_empty() => {
                field.clear();
                quoted = true;
            }
            (false, ',') => fields.push(std::mem::take(&mut field)),
            (false, c) => field.push(c),
        }
    }
    if quoted {
        return None;
    }
    fields.push(field);
    Some(fields)
}

/// Parses the bytes of a checkpoints file named `file` (see the module doc for the format).
pub fn parse(bytes: &[u8], file: &Path) -> Result<CheckpointRows, CheckpointError> {
    let file_buf = file.to_path_buf();
    let text = std::str::from_utf8(bytes).map_err(|e| CheckpointError::NotText {
        file: file_buf.clone(),
        line: bytes[..e.valid_up_to()]
            .iter()
            .filter(|b| **b == b'\n')
            .count()
            + 1,
        columns: columns(),
    })?;
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut lines = text
        .lines()
        .enumerate()
        .map(|(i, l)| (i + 1, l.trim_end_matches('\r')))
        .filter(|(_, l)| !l.trim().is_empty());
    let Some((hline, header)) = lines.next() else {
        return Err(CheckpointError::Empty {
            file: file_buf,
            columns: columns(),
        });
    };
    let names = split_line(header).ok_or(CheckpointError::OpenQuote {
        file: file_buf.clone(),
        line: hline,
    })?;
    let names: Vec<String> = names.iter().map(|n| n.trim().to_lowercase()).collect();
    let mut at = [0usize; 5];
    let mut missing = Vec::new();
    for (k, col) in COLUMNS.iter().enumerate() {
        let found: Vec<usize> = (0..names.len()).filter(|&i| names[i] == *col).collect();
        match found.len() {
            0 => missing.push(*col),
            1 => at[k] = found[0],
            _ => {
                return Err(CheckpointError::DuplicateColumn {
                    file: file_buf,
                    column: col.to_string(),
                })
            }
        }
    }
    if !missing.is_empty() {
        return Err(CheckpointError::MissingColumns {
            file: file_buf,
            missing: missing.join(", "),
            header: header.to_string(),
            columns: columns(),
        });
    }
    let mut rows = CheckpointRows {
        file: file_buf.clone(),
        ids: Vec::new(),
        reference: Vec::new(),
        target: Vec::new(),
        lines: Vec::new(),
    };
    let mut seen = std::collections::HashMap::new();
    for (line, text) in lines {
        let fields = split_line(text).ok_or(CheckpointError::OpenQuote {
            file: file_buf.clone(),
            line,
        })?;
        if fields.len() < names.len() {
            return Err(CheckpointError::FieldCount {
                file: file_buf,
                line,
                found: fields.len(),
                expected: names.len(),
            });
        }
        let id = fields[at[0]].trim().to_string();
        if id.is_empty() {
            return Err(CheckpointError::EmptyId {
                file: file_buf,
                line,
            });
        }
        if let Some(&first) = seen.get(&id) {
            return Err(CheckpointError::DuplicateId {
                file: file_buf,
                line,
                id,
                first,
            });
        }
        let mut v = [0.0; 4];
        for k in 0..4 {
            let raw = fields[at[k + 1]].trim();
            v[k] = raw
                .parse::<f64>()
                .ok()
                .filter(|x| x.is_finite())
                .ok_or_else(|| CheckpointError::NotANumber {
                    file: file_buf.clone(),
                    line,
                    column: COLUMNS[k + 1],
                    value: raw.to_string(),
                })?;
        }
        seen.insert(id.clone(), line);
        rows.ids.push(id);
        rows.reference.push([v[0], v[1]]);
        rows.target.push([v[2], v[3]]);
        rows.lines.push(line);
    }
    if rows.ids.is_empty() {
        return Err(CheckpointError::NoRows { file: file_buf });
    }
    Ok(rows)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn p(text: &str) -> Result<CheckpointRows, CheckpointError> {
        parse(text.as_bytes(), Path::new("marks.csv"))
    }

    #[test]
    fn reads_columns_in_any_order_with_quotes_and_extra_columns() {
        let r = p("\u{feff}Target_X, target_y ,note,ID,reference_x,reference_y\r\n\n1.5,2.5,\"a, b\",\"CP \"\"1\"\"\",100,200\r\n3,4,,CP2,300,400\n")
            .unwrap();
        assert_eq!(r.ids, ["CP \"1\"", "CP2"]);
        assert_eq!(r.reference, [[100.0, 200.0], [300.0, 400.0]]);
        assert_eq!(r.target, [[1.5, 2.5], [3.0, 4.0]]);
        assert_eq!(r.lines, [3, 4]);
    }

    #[test]
    fn refuses_what_it_cannot_use_with_the_line() {
        let head = "id,reference_x,reference_y,target_x,target_y\n";
        let cases: Vec<(String, &str)> = vec![
            (String::new(), "is empty"),
            (
                "id,x,y\n1,2,3\n".into(),
                "no column reference_x, reference_y, target_x, target_y",
            ),
            (
                format!("{head}a,1,2,3\n"),
                "line 2: 4 fields where the header has 5",
            ),
            (
                format!("{head}a,1,2,3,nan\n"),
                "line 2: target_y is \"nan\"",
            ),
            (format!("{head}a,1,2,3,4,5\nb,1,2,3,4,5,6\n"), "line 2"),
            (format!("{head}a,1,2,3,\"4\n"), "not closed"),
            (
                format!("{head}a,1,2,3,4\n,1,2,3,4\n"),
                "line 3: the checkpoint has no id",
            ),
            (
                format!("{head}a,1,2,3,4\na,1,2,3,4\n"),
                "line 3: checkpoint id a is used again (first on line 2)",
            ),
            (head.to_string(), "no checkpoints"),
            (
                "id,id,reference_x,reference_y,target_x,target_y\n".into(),
                "column id twice",
            ),
        ];
        for (text, words) in cases {
            match p(&text) {
                Ok(r) if words == "line 2" => assert_eq!(r.ids, ["a", "b"]),
                Ok(r) => panic!("{text:?} was read: {r:?}"),
                Err(e) => {
                    let m = e.to_string();
                    assert!(m.starts_with("marks.csv"), "{m}");
                    assert!(m.contains(words), "{words:?} not in {m}");
                }
            }
        }
        let e = parse(b"id,reference_x\n\xff\n", Path::new("marks.csv")).unwrap_err();
        assert!(e.to_string().contains("not UTF-8 text (line 2)"), "{e}");
    }
}
