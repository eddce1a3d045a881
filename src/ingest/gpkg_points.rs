//! A GeoPackage point layer read straight through SQLite: the quick way of `vector.rs`.
//!
//! **In:** the file, the layer as GDAL opened it (its table, feature id column and geometry
//! column) and the id field with its GDAL type, if one is named. **Out:** the landmarks as
//! GDAL's feature loop would give them (ids, positions, features without geometry counted),
//! or `None` when the layer holds anything but what this reader is sure to read exactly as
//! GDAL does; the caller then reads the layer through GDAL, which also reports every problem
//! (a missing id, a position out of range, an unreadable file).
//!
//! GDAL fetches a feature at about a microsecond: a feature object, its geometry object, the
//! field values copied in and out. For the plain case this reader takes about a third of that
//! (perf, on the 1M-point layers of the end-to-end benchmark): one
//! `SELECT` of the three columns in feature id order (the order of GDAL's table scan: the id is
//! the table's rowid), each geometry's bytes decoded where SQLite holds them. What it reads:
//! - geometries: null (counted as without geometry), or a standard GeoPackage binary (OGC
//!   GeoPackage Encoding Standard 1.3, clause 2.1.3, "GeoPackageBinary", clause number from
//!   memory: "GP", version 0, not extended, not flagged empty, an envelope of 0, 4,
//!   6 or 8 numbers) holding a WKB point (2-D, Z, M or ZM; either byte order) with finite x
//!   and y within the coordinate range. The position is its x and y as stored, which is what
//!   GDAL's point gives.
//! - ids: none named (the feature id's decimal text is the id, as in the GDAL loop); a
//!   `TEXT` column whose values are all text, valid UTF-8, without NUL and not blank (GDAL
//!   gives the bytes as they are); an `INTEGER`/`INT` (GDAL: 64-bit) or `MEDIUMINT` (GDAL:
//!   32-bit) column whose values are all integers (in the 32-bit range for `MEDIUMINT`, not
//!   at the 64-bit limits that mark a clamped value): GDAL prints them in decimal.
//!
//! Anything else, in any row, and any SQLite error, gives `None`.

use super::validate::in_range;
use rusqlite::types::ValueRef;
use std::path::Path;

/// The layer's landmarks as read.
pub(super) struct PointRows {
    /// Landmark ids, in feature id order.
    pub ids: Vec<String>,
    /// Positions, layer CRS.
    pub points: Vec<[f64; 2]>,
    /// Features whose geometry is null.
    pub no_geometry: usize,
}

/// What the id column holds, as GDAL types it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum IdColumn {
    /// Text (GDAL `OFTString` on a `TEXT` column).
    Text,
    /// 32-bit integers (GDAL `OFTInteger` on a `MEDIUMINT` column).
    Int32,
    /// 64-bit integers (GDAL `OFTInteger64` on an `INTEGER` or `INT` column).
    Int64,
}

/// The id column of `table` named `name` and typed `gdal_type` by GDAL, if this reader takes
/// it: its declared SQLite type must be the one GDAL maps to that type without a subtype.
fn id_column(
    conn: &rusqlite::Connection,
    table: &str,
    name: &str,
    gdal_type: gdal_sys::OGRFieldType::Type,
) -> Option<IdColumn> {
    use gdal_sys::OGRFieldType::{OFTInteger, OFTInteger64, OFTString};
    let mut stmt = conn
        .prepare(&format!("PRAGMA table_info({})", quoted(table)))
        .ok()?;
    let mut rows = stmt.query([]).ok()?;
    while let Some(row) = rows.next().ok()? {
        let column: String = row.get(1).ok()?;
        if column != name {
            continue;
        }
        let declared: String = row.get(2).ok()?;
        return match (declared.to_ascii_uppercase().as_str(), gdal_type) {
            ("TEXT", t) if t == OFTString => Some(IdColumn::Text),
            ("MEDIUMINT", t) if t == OFTInteger => Some(IdColumn::Int32),
            ("INTEGER" | "INT", t) if t == OFTInteger64 => Some(IdColumn::Int64),
            _ => None,
        };
    }
    None
}

/// An SQL identifier in double quotes.
fn quoted(name: &str) -> String {
    format!("\"{}\"", name.replace('"', "\"\""))
}

/// Reads the points of `table` (feature id column `fid`, geometry column `geom`) with the ids
/// of column `id` (its name and GDAL type), or of the feature ids; `None` when the layer
/// needs GDAL (module doc).
pub(super) fn read(
    path: &Path,
    table: &str,
    fid: &str,
    geom: &str,
    id: Option<(&str, gdal_sys::OGRFieldType::Type)>,
) -> Option<PointRows> {
    if fid.is_empty() || geom.is_empty() {
        return None;
    }
    let conn = rusqlite::Connection::open_with_flags(
        path,
        rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY | rusqlite::OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )
    .ok()?;
    // A table (a view's rows may come in another order than its ids).
    let kind: String = conn
        .query_row(
            "SELECT type FROM sqlite_master WHERE name = ?1",
            [table],
            |r| r.get(0),
        )
        .ok()?;
    if kind != "table" {
        return None;
    }
    let id = match id {
        Some((name, gdal_type)) => Some((name, id_column(&conn, table, name, gdal_type)?)),
        None => None,
    };
    let id_expr = id.map_or_else(|| quoted(fid), |(name, _)| quoted(name));
    let sql = format!(
        "SELECT {}, {id_expr} FROM {} ORDER BY {}",
        quoted(geom),
        quoted(table),
        quoted(fid)
    );
    let mut stmt = conn.prepare(&sql).ok()?;
    let mut rows = stmt.query([]).ok()?;
    let mut out = PointRows {
        ids: Vec::new(),
        points: Vec::new(),
        no_geometry: 0,
    };
    while let Some(row) = rows.next().ok()? {
        let g = row.get_ref(0).ok()?;
        let p = match g {
            ValueRef::Null => {
                out.no_geometry += 1;
                continue;
            }
            ValueRef::Blob(b) => point_of(b)?,
            _ => return None,
        };
        let v = row.get_ref(1).ok()?;
        let text = match (id.map(|i| i.1), v) {
            // The feature id (the rowid: always an integer).
            (None, ValueRef::Integer(n)) => n.to_string(),
            (Some(IdColumn::Int64), ValueRef::Integer(n)) if n != i64::MAX && n != i64::MIN => {
                n.to_string()
            }
            (Some(IdColumn::Int32), ValueRef::Integer(n)) if i32::try_from(n).is_ok() => {
                n.to_string()
            }
            (Some(IdColumn::Text), ValueRef::Text(t)) => {
                if t.contains(&0) {
                    return None;
                }
                let s = std::str::from_utf8(t).ok()?;
                if s.trim().is_empty() {
                    return None;
                }
                s.to_string()
            }
            _ => return None,
        };
        out.ids.push(text);
        out.points.push(p);
    }
    Some(out)
}

/// The x and y of a standard GeoPackage binary holding a non-empty WKB point with finite
/// coordinates in range; `None` for anything else.
fn point_of(b: &[u8]) -> Option<[f64; 2]> {
    // Header: "GP", version, flags, srs id (4 bytes), envelope.
    if b.len() < 8 || &b[..2] != b"GP" || b[2] != 0 {
        return None;
    }
    let flags = b[3];
    // Extended (bit 5) or flagged empty (bit 4): left to GDAL.
    if flags & 0x30 != 0 {
        return None;
    }
    let envelope = match (flags >> 1) & 0x07 {
        0 => 0,
        1 => 32,
        2 | 3 => 48,
        4 => 64,
        _ => return None,
    };
    let wkb = b.get(8 + envelope..)?;
    let little = match *wkb.first()? {
        0 => false,
        1 => true,
        _ => return None,
    };
    // The unsigned number of the `n` bytes at `at`, in the WKB's byte order.
    let word = |at: usize, n: usize| -> Option<u64> {
        let bytes = wkb.get(at..at + n)?;
        let push = |a: u64, &b: &u8| (a << 8) | u64::from(b);
        Some(if little {
            bytes.iter().rev().fold(0, push)
        } else {
            bytes.iter().fold(0, push)
        })
    };
    // The geometry type: a point, with z, m or both in the ISO codes (OGC 06-103r4, Simple
    // Feature Access Part 1, 1.2.1, clause 8.2.3, clause number from memory: 1, 1001, 2001,
    // 3001), or with z by the older 2.5-D flag, the high bit (common practice, as GDAL reads
    // it); the number of ordinates after x and y.
    let extra = match word(1, 4)? {
        1 => 0,
        1001 | 2001 | 0x8000_0001 => 1,
        3001 => 2,
        _ => return None,
    };
    let (x, y) = (f64::from_bits(word(5, 8)?), f64::from_bits(word(13, 8)?));
    // The whole point is there (GDAL refuses a short one).
    if wkb.len() < 21 + 8 * extra {
        return None;
    }
    let p = [x, y];
    in_range(p).then_some(p)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A GeoPackage binary of a WKB point as GDAL writes one (little-endian header, a 2-D
    /// envelope), or with the given flags and WKB bytes.
    fn blob(flags: u8, wkb: &[u8]) -> Vec<u8> {
        let mut b = vec![b'G', b'P', 0, flags];
        b.extend_from_slice(&4326i32.to_le_bytes());
        let envelope = match (flags >> 1) & 7 {
            1 => 4,
            2 | 3 => 6,
            4 => 8,
            _ => 0,
        };
        for _ in 0..envelope {
            b.extend_from_slice(&1.5f64.to_le_bytes());
        }
        b.extend_from_slice(wkb);
        b
    }

    fn wkb_point(little: bool, ty: u32, ords: &[f64]) -> Vec<u8> {
        let mut w = vec![u8::from(little)];
        if little {
            w.extend_from_slice(&ty.to_le_bytes());
            ords.iter()
                .for_each(|v| w.extend_from_slice(&v.to_le_bytes()));
        } else {
            w.extend_from_slice(&ty.to_be_bytes());
            ords.iter()
                .for_each(|v| w.extend_from_slice(&v.to_be_bytes()));
        }
        w
    }

    #[test]
    fn points_of_every_kind_read_and_others_are_left_to_gdal() {
        let p = [512_345.25, 5_345_678.5];
        for little in [true, false] {
            for (ty, ords) in [
                (1, vec![p[0], p[1]]),
                (1001, vec![p[0], p[1], 40.0]),
                (2001, vec![p[0], p[1], 7.0]),
                (3001, vec![p[0], p[1], 40.0, 7.0]),
                (0x8000_0001, vec![p[0], p[1], 40.0]),
            ] {
                for flags in [0x01, 0x03, 0x05, 0x07, 0x09, 0x00, 0x02] {
                    let b = blob(flags, &wkb_point(little, ty, &ords));
                    assert_eq!(point_of(&b), Some(p), "type {ty} flags {flags:#x}");
                    // Cut short: not read.
                    assert_eq!(point_of(&b[..b.len() - 1]), None, "type {ty}");
                }
            }
        }
        let good = wkb_point(true, 1, &p);
        // Extended, empty, a bad envelope code, a bad magic or version, another geometry,
        // coordinates that are not finite or out of range, a bad byte order.
        assert_eq!(point_of(&blob(0x21, &good)), None);
        assert_eq!(point_of(&blob(0x11, &good)), None);
        assert_eq!(point_of(&blob(0x0b, &good)), None);
        let mut bad = blob(0x03, &good);
        bad[1] = b'Q';
        assert_eq!(point_of(&bad), None);
        let mut bad = blob(0x03, &good);
        bad[2] = 1;
        assert_eq!(point_of(&bad), None);
        assert_eq!(point_of(&blob(0x03, &wkb_point(true, 3, &p))), None);
        assert_eq!(point_of(&blob(0x03, &wkb_point(true, 4, &p))), None);
        for v in [
            f64::NAN,
            f64::INFINITY,
            2.0 * super::super::COORDINATE_LIMIT,
        ] {
            assert_eq!(point_of(&blob(0x03, &wkb_point(true, 1, &[v, 1.0]))), None);
            assert_eq!(point_of(&blob(0x03, &wkb_point(true, 1, &[1.0, v]))), None);
        }
        let mut bad = good.clone();
        bad[0] = 2;
        assert_eq!(point_of(&blob(0x03, &bad)), None);
        assert_eq!(point_of(b"GP"), None);
    }
}
