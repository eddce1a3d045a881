//! Opening a dataset read-only with GDAL and telling what it holds.
//!
//! **In:** a path. **Out:** an [`Opened`]: the dataset as GDAL opened it (read-only, no open
//! options), its [`SourceKind`] and the short name of the driver that opened it; or an [`IngestError`] naming the file — one that does not exist or cannot be
//! read (permission denied) is said to be so before GDAL is asked.
//!
//! The kind comes from what GDAL opens, not from the file's name: a GeoTIFF named `.gpkg` is a
//! raster, a GeoJSON named `.dat` is a vector dataset. Vector layers win: a file GDAL opens
//! with vector layers is a vector dataset even when a raster driver would take it too. That
//! order matters for CSV tables of numbers only (say `x,y,z`): with raster and vector drivers
//! both allowed, GDAL 3.6's XYZ raster driver claims such a file first — it opens a table whose
//! points lie on a regular grid as a raster, and it fails the whole open, with "Ungridded
//! dataset", on any other (seen with GDAL 3.6.2).
//!
//! Also here: the GDAL error state around a read ([`clear_gdal_error`], [`take_gdal_failure`]),
//! for errors GDAL reports without failing the call.

use super::{IngestError, SourceKind};
use gdal::errors::GdalError;
use gdal::{Dataset, DatasetOptions, GdalOpenFlags, Metadata};
use std::marker::PhantomData;
use std::path::{Path, PathBuf};

/// Refuses a path that does not exist or cannot be read, before GDAL is asked (GDAL says only
/// that no driver recognises a file it may not read). A file must open for reading; a folder
/// (GDAL reads a folder of Shapefiles as one dataset) must be listable.
fn check_readable(path: &Path) -> Result<(), IngestError> {
    let cannot = |e: std::io::Error| {
        if e.kind() == std::io::ErrorKind::NotFound {
            IngestError::NotFound {
                path: path.to_path_buf(),
            }
        } else {
            IngestError::CannotRead {
                path: path.to_path_buf(),
                reason: io_words(&e),
            }
        }
    };
    let meta = std::fs::metadata(path).map_err(cannot)?;
    if meta.is_dir() {
        std::fs::read_dir(path).map(drop).map_err(cannot)
    } else {
        std::fs::File::open(path).map(drop).map_err(cannot)
    }
}

/// An I/O error in a few words: `permission denied`, else the system's message.
fn io_words(e: &std::io::Error) -> String {
    match e.kind() {
        std::io::ErrorKind::PermissionDenied => "permission denied".into(),
        _ => e.to_string(),
    }
}

/// A dataset as GDAL opened it.
pub(super) struct Opened {
    /// What it holds.
    pub kind: SourceKind,
    /// Short name of the driver that opened it (`GPKG`, `CSV`, `GTiff`, …).
    pub driver: String,
    /// The dataset, read-only, opened without open options.
    pub dataset: Dataset,
}

/// Opens `path` read-only and tells what it holds.
///
/// First GDAL's vector drivers alone are asked (quietly: a failure here is not yet an error);
/// a dataset with vector layers is [`SourceKind::Vector`]. Otherwise the file is opened with
/// raster and vector drivers both allowed (`GDAL_OF_VECTOR | GDAL_OF_RASTER |
/// GDAL_OF_READONLY`): raster bands and no layers make it [`SourceKind::Raster`], as does a
/// driver that reads rasters only (a dataset of subdatasets has no bands of its own).
///
/// GDAL's CSV driver recognises a table only by a `.csv`, `.tsv` or `.psv` name; a file
/// structured as CSV with another name needs the `CSV:` prefix (GDAL's CSV driver
/// documentation, "Comma Separated Value (.csv)"). So a `.txt` file that the vector drivers do
/// not open is offered to the CSV driver that way (quietly too) before rasters are tried —
/// vector layers win here as well, and the XYZ raster driver does not get to reject a table of
/// numbers as ungridded. Any other file that does not open (a `.gpkg` that is not one) is an
/// error.
pub(super) fn open_source(path: &Path) -> Result<Opened, IngestError> {
    check_readable(path)?;
    let vector_only = || GdalOpenFlags::GDAL_OF_VECTOR | GdalOpenFlags::GDAL_OF_READONLY;
    let probe = {
        let _quiet = QuietGdal::new();
        open_with(path, vector_only(), None, None)
    };
    let probe = match probe {
        Ok(ds) if ds.layer_count() > 0 => return Ok(opened(SourceKind::Vector, ds)),
        other => other.ok(),
    };
    if probe.is_none() && has_extension(path, "txt") {
        let name = csv_prefixed(path);
        let csv = {
            let _quiet = QuietGdal::new();
            open_with(&name, vector_only(), Some(&["CSV"]), None)
        };
        if let Ok(ds) = csv {
            if ds.layer_count() > 0 {
                return Ok(opened(SourceKind::Vector, ds));
            }
        }
    }
    let any = GdalOpenFlags::GDAL_OF_VECTOR
        | GdalOpenFlags::GDAL_OF_RASTER
        | GdalOpenFlags::GDAL_OF_READONLY;
    match open_with(path, any, None, None) {
        Ok(ds) => match kind_of(&ds) {
            SourceKind::Raster => Ok(opened(SourceKind::Raster, ds)),
            // No layers, no bands: a vector dataset without layers (reported as such later),
            // preferably as the vector drivers opened it.
            SourceKind::Vector => Ok(opened(SourceKind::Vector, probe.unwrap_or(ds))),
        },
        Err(source) => Err(IngestError::Unreadable {
            path: path.to_path_buf(),
            source,
        }),
    }
}

fn open_with(
    name: &Path,
    open_flags: GdalOpenFlags,
    allowed_drivers: Option<&[&str]>,
    open_options: Option<&[&str]>,
) -> Result<Dataset, GdalError> {
    Dataset::open_ex(
        name,
        DatasetOptions {
            open_flags,
            allowed_drivers,
            open_options,
            ..Default::default()
        },
    )
}

fn opened(kind: SourceKind, dataset: Dataset) -> Opened {
    Opened {
        kind,
        driver: dataset.driver().short_name(),
        dataset,
    }
}

/// Vector layers make a vector dataset; else raster bands, or a driver that reads only
/// rasters, make a raster.
fn kind_of(ds: &Dataset) -> SourceKind {
    if ds.layer_count() > 0 {
        return SourceKind::Vector;
    }
    let driver = ds.driver();
    let capable = |key: &str| {
        driver
            .metadata_item(key, "")
            .is_some_and(|v| v.eq_ignore_ascii_case("YES"))
    };
    if ds.raster_count() > 0 || (capable("DCAP_RASTER") && !capable("DCAP_VECTOR")) {
        SourceKind::Raster
    } else {
        SourceKind::Vector
    }
}

fn has_extension(path: &Path, ext: &str) -> bool {
    path.extension()
        .is_some_and(|e| e.eq_ignore_ascii_case(ext))
}

/// `CSV:` and the path: GDAL's way to make its CSV driver read a file of any name.
fn csv_prefixed(path: &Path) -> PathBuf {
    let mut name = std::ffi::OsString::from("CSV:");
    name.push(path.as_os_str());
    PathBuf::from(name)
}

/// While alive, GDAL errors on this thread are recorded (GDAL's last-error state, which the
/// gdal crate reads into its [`GdalError`]s) but not printed: for opens whose failure is not
/// yet an error. GDAL keeps its error handlers per thread, so the guard must not leave it.
pub(super) struct QuietGdal(PhantomData<*const ()>);

impl QuietGdal {
    #[allow(unsafe_code)]
    pub(super) fn new() -> QuietGdal {
        // SAFETY: pushes GDAL's own quiet handler on this thread's handler stack; `Drop` pops
        // it on the same thread (the guard is not `Send`).
        unsafe { gdal_sys::CPLPushErrorHandler(Some(gdal_sys::CPLQuietErrorHandler)) };
        QuietGdal(PhantomData)
    }
}

impl Drop for QuietGdal {
    #[allow(unsafe_code)]
    fn drop(&mut self) {
        // SAFETY: pops the handler `new` pushed, on the thread that pushed it.
        unsafe { gdal_sys::CPLPopErrorHandler() };
    }
}

/// Forgets this thread's last GDAL error, so that [`take_gdal_failure`] sees only errors
/// raised after it.
#[allow(unsafe_code)]
pub(crate) fn clear_gdal_error() {
    // SAFETY: resets GDAL's per-thread error state; no pointers involved.
    unsafe { gdal_sys::CPLErrorReset() };
}

/// The last GDAL error of class failure or fatal raised on this thread since
/// [`clear_gdal_error`], if any (warnings are not failures), and clears it. GDAL raises such an
/// error, and prints it, when it cannot fetch a feature of a truncated file — and then ends
/// the layer as if it were complete.
#[allow(unsafe_code)]
pub(crate) fn take_gdal_failure() -> Option<GdalError> {
    // SAFETY: GDAL's per-thread error state is read; the message pointer, owned by GDAL, is
    // checked for NULL and copied before the state is reset.
    unsafe {
        let class = gdal_sys::CPLGetLastErrorType();
        if class < gdal_sys::CPLErr::CE_Failure {
            return None;
        }
        let number = gdal_sys::CPLGetLastErrorNo();
        let text = gdal_sys::CPLGetLastErrorMsg();
        let msg = if text.is_null() {
            String::new()
        } else {
            std::ffi::CStr::from_ptr(text)
                .to_string_lossy()
                .trim()
                .to_string()
        };
        gdal_sys::CPLErrorReset();
        Some(GdalError::CplError { class, number, msg })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use gdal::DriverManager;

    fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
        let p = dir.join(name);
        std::fs::write(&p, text).unwrap();
        p
    }

    fn kind_and_driver(p: &Path) -> (SourceKind, String) {
        let o = open_source(p).unwrap_or_else(|e| panic!("{e}"));
        (o.kind, o.driver)
    }

    #[test]
    fn a_geotiff_named_gpkg_is_a_raster() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("survey.gpkg");
        let driver = DriverManager::get_driver_by_name("GTiff").unwrap();
        drop(driver.create_with_band_type::<u8, _>(&p, 4, 3, 1).unwrap());
        assert_eq!(
            kind_and_driver(&p),
            (SourceKind::Raster, "GTiff".to_string())
        );
    }

    #[test]
    fn a_geojson_named_dat_is_vector() {
        let dir = tempfile::tempdir().unwrap();
        let p = write(
            dir.path(),
            "survey.dat",
            r#"{"type":"FeatureCollection","features":[{"type":"Feature","properties":{},"geometry":{"type":"Point","coordinates":[1,2]}}]}"#,
        );
        assert_eq!(
            kind_and_driver(&p),
            (SourceKind::Vector, "GeoJSON".to_string())
        );
    }

    #[test]
    fn a_csv_named_txt_is_read_by_the_csv_driver() {
        let dir = tempfile::tempdir().unwrap();
        let p = write(dir.path(), "survey.txt", "id,x,y\na,1.5,2\nb,3,4.25\n");
        let o = open_source(&p).unwrap();
        assert_eq!((o.kind, o.driver.as_str()), (SourceKind::Vector, "CSV"));
    }

    #[test]
    fn a_table_of_numbers_is_vector_whether_gridded_or_not() {
        // The XYZ raster driver would take both (see the module docs).
        let dir = tempfile::tempdir().unwrap();
        let gridded: String = (0..12)
            .map(|i| format!("{},{},{i}\n", 10 * (i % 4), 10 * (i / 4)))
            .collect();
        let scattered: String = (0..12)
            .map(|i| format!("{},{},{i}\n", (i * 7) % 5, (i * i) % 11))
            .collect();
        for (name, rows) in [
            ("gridded.csv", &gridded),
            ("scattered.csv", &scattered),
            ("gridded.txt", &gridded),
            ("scattered.txt", &scattered),
        ] {
            let p = write(dir.path(), name, &format!("x,y,z\n{rows}"));
            assert_eq!(
                kind_and_driver(&p),
                (SourceKind::Vector, "CSV".to_string()),
                "{name}"
            );
        }
    }

    #[test]
    fn text_that_no_driver_recognises_is_unreadable() {
        let dir = tempfile::tempdir().unwrap();
        let p = write(dir.path(), "survey.gpkg", "id,x,y\nnot a GeoPackage\n");
        let e = open_source(&p).err().expect("an error");
        assert!(matches!(e, IngestError::Unreadable { .. }), "{e:?}");
        assert!(
            e.to_string().contains("no GDAL driver recognises it"),
            "{e}"
        );
        assert!(std::error::Error::source(&e).is_some());
    }
}
