//! Where the outputs may go, decided before any work.
//!
//! **In:** the output path as given (`--out`, `output.dir`), whether `--force` was given, the
//! names of the files the run writes there and the paths of the run's inputs.
//! **Out:** a [`Destination`]: the output resolved as the system will follow it, checked
//! against what is there, against every input and for being writable; or an [`EmitError`]
//! saying what is wrong and what to do, within milliseconds of the start.
//!
//! Resolving: the path is made absolute; a `..` after a folder that exists goes to that
//! folder's real parent (as the system goes), a `..` after a name that does not exist yet
//! drops that name (as written: `A/new/..` is `A`); symbolic links on the way are followed.
//! The checks then look at the real folder, so `A/new/..` with files in `A` is refused like
//! `A` itself.
//!
//! Never onto an input: the output (or a file `--force` would replace in it) may not be an
//! input of the run (same canonical path, or the same file under another name: same device
//! and inode), and may not lie inside an input folder.

use super::atomic::{self, Mode};
use super::EmitError;
use std::io;
use std::path::{Component, Path, PathBuf};

/// An output folder or file, resolved and checked before any work.
#[derive(Debug, Clone)]
pub struct Destination {
    /// As given, for messages.
    pub given: PathBuf,
    /// Resolved: absolute, with `..` and symbolic links resolved (see the module doc).
    pub path: PathBuf,
    /// Whether tiemark's files (or the file) there may be replaced (`--force`).
    pub force: bool,
}

impl Destination {
    /// What the moves into place may replace.
    pub(crate) fn mode(&self) -> Mode {
        if self.force {
            Mode::Replace
        } else {
            Mode::Fresh
        }
    }

    /// The path to show for a file `name` in the output folder: under the path as given,
    /// unless that has a `..` (then the resolved one, which says where it really is).
    pub fn shown(&self, name: &str) -> PathBuf {
        self.shown_path().join(name)
    }

    /// The output as given, unless that has a `..` (then the resolved path).
    pub fn shown_path(&self) -> &Path {
        if self
            .given
            .components()
            .any(|c| matches!(c, Component::ParentDir))
        {
            &self.path
        } else {
            &self.given
        }
    }

    /// The output as given, and where it resolves to when that differs, for messages.
    fn label(&self) -> String {
        label(&self.given, &self.path)
    }
}

fn label(given: &Path, resolved: &Path) -> String {
    let absolute = std::env::current_dir()
        .map(|d| d.join(given))
        .unwrap_or_else(|_| given.to_path_buf());
    if absolute == resolved {
        given.display().to_string()
    } else {
        format!("{} (that is {})", given.display(), resolved.display())
    }
}

/// Resolves `given` as the module doc says. Errors: the current folder or a folder on the way
/// cannot be read, or a symbolic link on the way points nowhere.
pub fn resolve(given: &Path) -> io::Result<PathBuf> {
    let absolute = if given.is_absolute() {
        given.to_path_buf()
    } else {
        std::env::current_dir()?.join(given)
    };
    let mut real = PathBuf::new();
    // Names at the end of `real` that do not exist (taken as written).
    let mut missing = 0usize;
    for c in absolute.components() {
        match c {
            Component::Prefix(_) | Component::RootDir => real.push(c.as_os_str()),
            Component::CurDir => {}
            Component::ParentDir => {
                missing = missing.saturating_sub(1);
                real.pop();
            }
            Component::Normal(name) => {
                real.push(name);
                if missing > 0 {
                    missing += 1;
                    continue;
                }
                match std::fs::canonicalize(&real) {
                    Ok(r) => real = r,
                    Err(e) if e.kind() == io::ErrorKind::NotFound => {
                        if let Ok(m) = std::fs::symlink_metadata(&real) {
                            if m.file_type().is_symlink() {
                                let to = std::fs::read_link(&real).unwrap_or_default();
                                return Err(io::Error::new(
                                    io::ErrorKind::NotFound,
                                    format!(
                                        "{} is a symbolic link to {}, which does not exist; \
                                         create that or choose another output",
                                        real.display(),
                                        to.display()
                                    ),
                                ));
                            }
                        }
                        missing = 1;
                    }
                    Err(e) => return Err(e),
                }
            }
        }
    }
    Ok(real)
}

/// Same device and inode, or the same canonical path.
fn same_file(a: &Path, b: &Path) -> bool {
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        if let (Ok(x), Ok(y)) = (std::fs::metadata(a), std::fs::metadata(b)) {
            return x.dev() == y.dev() && x.ino() == y.ino();
        }
    }
    match (std::fs::canonicalize(a), std::fs::canonicalize(b)) {
        (Ok(x), Ok(y)) => x == y,
        _ => false,
    }
}

fn resolved(given: &Path) -> Result<PathBuf, EmitError> {
    let path = resolve(given).map_err(|source| EmitError::Io {
        path: given.to_path_buf(),
        source,
    })?;
    if path.file_name().is_none() {
        return Err(EmitError::NoName(given.to_path_buf()));
    }
    Ok(path)
}

/// Refuses an output that is, or would replace, or lies inside, one of `inputs`. `files`: the
/// files the run writes in an output folder (empty for an output file).
fn not_onto_inputs(
    given: &Path,
    out: &Path,
    files: &[&str],
    inputs: &[&Path],
) -> Result<(), EmitError> {
    for input in inputs {
        let Ok(real) = std::fs::canonicalize(input) else {
            // Missing: the reader says so; nothing can be written onto it.
            continue;
        };
        let clash = if same_file(out, &real) {
            Some(out.to_path_buf())
        } else {
            files
                .iter()
                .map(|f| out.join(f))
                .find(|p| same_file(p, &real))
        };
        if let Some(at) = clash {
            return Err(EmitError::OntoInput {
                output: label(given, &at),
                input: input.to_path_buf(),
            });
        }
        if real.is_dir() && out.starts_with(&real) {
            return Err(EmitError::OntoInput {
                output: label(given, out),
                input: input.to_path_buf(),
            });
        }
    }
    Ok(())
}

/// Checks an output folder before any work: resolved (module doc), not onto an input, a
/// folder if it exists, empty unless `force`, and writable. `files` are the names the run
/// writes there. Call [`Destination`]'s writers with the result.
pub fn check_output_dir(
    dir: &Path,
    force: bool,
    files: &[&str],
    inputs: &[&Path],
) -> Result<Destination, EmitError> {
    let path = resolved(dir)?;
    let d = Destination {
        given: dir.to_path_buf(),
        path,
        force,
    };
    not_onto_inputs(dir, &d.path, files, inputs)?;
    check_dir_state(&d)?;
    atomic::probe(&d.path, true).map_err(|f| EmitError::NotWritable {
        output: d.label(),
        place: f.path,
        source: f.source,
    })?;
    atomic::claim(&d.path, d.mode());
    Ok(d)
}

/// What is at the output folder now: refuses a file, or files without `force`.
pub(crate) fn check_dir_state(d: &Destination) -> Result<(), EmitError> {
    match std::fs::metadata(&d.path) {
        Err(e) if e.kind() == io::ErrorKind::NotFound => Ok(()),
        Err(source) => Err(EmitError::Io {
            path: d.given.clone(),
            source,
        }),
        Ok(m) if !m.is_dir() => Err(EmitError::NotADirectory(d.label().into())),
        Ok(_) => {
            let non_empty = std::fs::read_dir(&d.path)
                .map_err(|source| EmitError::Io {
                    path: d.given.clone(),
                    source,
                })?
                .next()
                .is_some();
            if non_empty && !d.force {
                Err(EmitError::NotEmpty(d.label().into()))
            } else {
                Ok(())
            }
        }
    }
}

/// Checks an output file before any work: resolved (module doc), named like a file, not an
/// input (nor inside an input folder), a regular file if it exists and then only with
/// `force`, of a known format, and its folder writable.
pub fn check_output_file(
    file: &Path,
    force: bool,
    inputs: &[&Path],
) -> Result<Destination, EmitError> {
    let looks_like_folder = file
        .as_os_str()
        .to_string_lossy()
        .ends_with(std::path::MAIN_SEPARATOR)
        || matches!(
            file.components().next_back(),
            Some(Component::ParentDir | Component::CurDir)
        );
    let path = resolved(file)?;
    let d = Destination {
        given: file.to_path_buf(),
        path,
        force,
    };
    if looks_like_folder || d.path.is_dir() {
        return Err(EmitError::NotAFile(d.label().into()));
    }
    not_onto_inputs(file, &d.path, &[], inputs)?;
    match std::fs::symlink_metadata(&d.path) {
        Ok(m) if !m.is_file() => return Err(EmitError::NotAFile(d.label().into())),
        Ok(_) if !force => return Err(EmitError::FileExists(d.label().into())),
        _ => {}
    }
    if super::landmark_format(&d.path).is_none() {
        return Err(EmitError::UnknownFormat(d.given.clone()));
    }
    atomic::probe(&d.path, false).map_err(|f| EmitError::NotWritable {
        output: d.label(),
        place: f.path,
        source: f.source,
    })?;
    Ok(d)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dot_dot_after_a_missing_name_drops_it_and_after_a_folder_goes_up_for_real() {
        let root = tempfile::tempdir().unwrap();
        let root_real = std::fs::canonicalize(root.path()).unwrap();
        let a = root_real.join("A");
        std::fs::create_dir_all(a.join("sub")).unwrap();
        // A/new/..: `new` does not exist, so `..` drops it: A.
        assert_eq!(resolve(&a.join("new").join("..")).unwrap(), a);
        assert_eq!(
            resolve(&a.join("new").join("deeper").join("..").join("..")).unwrap(),
            a
        );
        // A/sub/.. is A; A/./new is A/new (missing names kept as written).
        assert_eq!(resolve(&a.join("sub").join("..")).unwrap(), a);
        assert_eq!(resolve(&a.join(".").join("new")).unwrap(), a.join("new"));
        // A symbolic link on the way is followed, and `..` after it goes to the real parent.
        let elsewhere = root_real.join("elsewhere").join("deep");
        std::fs::create_dir_all(&elsewhere).unwrap();
        std::os::unix::fs::symlink(&elsewhere, a.join("link")).unwrap();
        assert_eq!(resolve(&a.join("link")).unwrap(), elsewhere);
        assert_eq!(
            resolve(&a.join("link").join("..")).unwrap(),
            root_real.join("elsewhere")
        );
        // A link that points nowhere is an error naming it.
        std::os::unix::fs::symlink(root_real.join("nowhere"), a.join("dangling")).unwrap();
        let e = resolve(&a.join("dangling").join("out")).unwrap_err();
        assert!(e.to_string().contains("does not exist"), "{e}");
    }

    #[test]
    fn the_same_file_under_another_name_is_an_input() {
        let root = tempfile::tempdir().unwrap();
        let input = root.path().join("survey.csv");
        std::fs::write(&input, "id,x,y\n").unwrap();
        let out = root.path().join("out");
        std::fs::create_dir(&out).unwrap();
        std::fs::hard_link(&input, out.join("report.txt")).unwrap();
        let e = not_onto_inputs(&out, &out, &["report.txt"], &[&input]).unwrap_err();
        assert!(matches!(e, EmitError::OntoInput { .. }), "{e}");
        // Not one of the files written: allowed (it is not touched).
        assert!(not_onto_inputs(&out, &out, &["control-points.csv"], &[&input]).is_ok());
        // The output folder inside an input folder: refused.
        let e = not_onto_inputs(&out, &out.join("x"), &[], &[&out]).unwrap_err();
        assert!(e.to_string().contains("input"), "{e}");
    }
}
