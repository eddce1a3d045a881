//! What a table read by GDAL's CSV driver needs beyond the generic vector reading.
//!
//! **In:** the table as GDAL opened it without open options (see `open.rs`). **Out:** the
//! open options that make its rows points ([`point_open_options`]), and the re-check of the
//! rows GDAL gave no geometry ([`check_rows_without_geometry`]).
//!
//! Whether a file is a CSV table is GDAL's word: the driver that opened it is `CSV`
//! ([`is_csv`]), whatever the file is called.

use super::open::Opened;
use super::vector::{each_feature, field_text};
use super::IngestError;
use gdal::vector::LayerAccess;
use gdal::Dataset;
use std::collections::HashSet;
use std::path::Path;

/// Names of the CSV columns that hold x and y, in order of preference (matched
/// case-insensitively, as GDAL does). One column per axis is chosen here and handed to GDAL:
/// GDAL 3.6 crashes when two columns match its X_POSSIBLE_NAMES (or Y_POSSIBLE_NAMES) and the
/// second comes before the other axis's column, and it takes the first match in column order
/// (an attribute `n` before `y` would become the northing).
const X_NAMES: &[&str] = &["x", "lon", "long", "longitude", "easting", "east", "e"];
const Y_NAMES: &[&str] = &["y", "lat", "latitude", "northing", "north", "n"];

/// The other open options that make a CSV read as points (see GDAL's CSV driver documentation).
const POINT_OPEN_OPTIONS: &[&str] = &["AUTODETECT_TYPE=YES", "KEEP_GEOM_COLUMNS=NO"];

/// The x and y columns chosen for a table.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(super) struct Columns {
    /// The x column's name as written in the file.
    pub x: String,
    /// The y column's name.
    pub y: String,
}

/// Whether GDAL opened the dataset with its CSV driver.
pub(super) fn is_csv(opened: &Opened) -> bool {
    opened.driver.eq_ignore_ascii_case("CSV")
}

/// The x and y columns of a CSV table (`ds`, opened without open options): for each axis the
/// column whose name comes first in [`X_NAMES`] / [`Y_NAMES`]; `None` when an axis has none
/// (GDAL may still find a WKT geometry column). Two columns for one axis are an error.
pub(super) fn coordinate_columns(
    path: &Path,
    ds: &Dataset,
) -> Result<Option<Columns>, IngestError> {
    let Ok(layer) = ds.layer(0) else {
        return Ok(None);
    };
    let columns: Vec<String> = layer.defn().fields().map(|f| f.name()).collect();
    let pick = |names: &[&str], axis: &str| -> Result<Option<String>, IngestError> {
        for name in names {
            let found: Vec<&String> = columns
                .iter()
                .filter(|c| c.eq_ignore_ascii_case(name))
                .collect();
            match found.as_slice() {
                [] => continue,
                [one] => return Ok(Some((*one).clone())),
                [a, b, ..] => {
                    return Err(IngestError::AmbiguousColumns {
                        path: path.to_path_buf(),
                        axis: axis.to_string(),
                        first: (*a).clone(),
                        second: (*b).clone(),
                    })
                }
            }
        }
        Ok(None)
    };
    let (x, y) = (pick(X_NAMES, "x")?, pick(Y_NAMES, "y")?);
    Ok(x.zip(y).map(|(x, y)| Columns { x, y }))
}

/// The open options that make GDAL's CSV driver read each row as a point: the chosen columns
/// (when there are any) and [`POINT_OPEN_OPTIONS`].
pub(super) fn point_open_options(columns: Option<&Columns>) -> Vec<String> {
    columns
        .iter()
        .flat_map(|c| {
            [
                format!("X_POSSIBLE_NAMES={}", c.x),
                format!("Y_POSSIBLE_NAMES={}", c.y),
            ]
        })
        .chain(POINT_OPEN_OPTIONS.iter().map(|o| o.to_string()))
        .collect()
}

/// GDAL's CSV driver gives a row whose x or y is not a number (`nan`, `inf`, `-inf`, text) no
/// geometry at all, which would make it a silently skipped feature. Re-reads the rows that had
/// no geometry (by feature id) as text from `ds` (the table opened without open options) and
/// rejects the first one with anything in its coordinate columns; a row blank in both stays a
/// feature without geometry.
pub(super) fn check_rows_without_geometry(
    path: &Path,
    ds: &Dataset,
    layer_name: &str,
    columns: &Columns,
    id_field: Option<&str>,
    without_geometry: &HashSet<u64>,
) -> Result<(), IngestError> {
    let mut layer = ds.layer(0).map_err(|source| IngestError::Gdal {
        path: path.to_path_buf(),
        source,
    })?;
    let names: Vec<String> = layer.defn().fields().map(|f| f.name()).collect();
    let index = |name: &str| names.iter().position(|n| n == name);
    let (Some(xi), Some(yi)) = (index(&columns.x), index(&columns.y)) else {
        return Ok(());
    };
    let id_index = id_field.and_then(index);
    each_feature(path, layer_name, &mut layer, |feature| {
        let Some(fid) = feature.fid() else {
            return Ok(());
        };
        if !without_geometry.contains(&fid) {
            return Ok(());
        }
        let text = |i: usize| {
            feature
                .field_as_string(i)
                .ok()
                .flatten()
                .unwrap_or_default()
        };
        let (x, y) = (text(xi), text(yi));
        if x.trim().is_empty() && y.trim().is_empty() {
            return Ok(());
        }
        Err(IngestError::UnreadableCoordinate {
            path: path.to_path_buf(),
            layer: layer_name.to_string(),
            id: id_index
                .and_then(|i| field_text(feature, i))
                .unwrap_or_else(|| fid.to_string()),
            cells: format!("{} '{x}', {} '{y}'", columns.x, columns.y),
        })
    })
}
