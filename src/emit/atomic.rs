//! Atomic output: the one place where tiemark puts its files in place.
//!
//! **In:** new files, written into a hidden staging folder ([`Staging`]) or, for a single
//! file, by a writer given a temporary path ([`write_file`]).
//! **Out:** the files at their final paths, either all of them or none: on any error the
//! output folder (or file) is left as it was, and nothing tiemark made is left behind (but for
//! parent folders of the output it had to create).
//!
//! Beside an output folder or file `NAME` (in the same parent folder) these hidden names are
//! used, `PID` being the process id:
//!
//! - `.NAME.tiemark-partial-PID`: the staging folder where the new files are written
//!   ([`Staging`]); for a single file, the temporary file (with `NAME`'s extension appended,
//!   for drivers that go by the extension).
//! - `.NAME.tiemark-backup-PID`: while the new files go into an existing folder, the previous
//!   tiemark files moved aside ([`put_in_place`]).
//! - `.NAME.tiemark-discard-PID`: the same folder once every new file is in place, being
//!   deleted.
//!
//! Only the files a caller names are moved; every other file in an existing output folder is
//! left untouched.
//!
//! # After a crash
//!
//! A rename is atomic, a sequence of them is not: if the process is killed (`kill -9`, power
//! loss) while [`put_in_place`] moves files into an existing folder, what is left depends on the
//! moment:
//!
//! - no backup or discard folder: the output is as it was (or, if it did not exist, complete);
//!   delete any `.NAME.tiemark-partial-PID` folder or file.
//! - a `.NAME.tiemark-backup-PID` folder: the move was interrupted and the output folder may
//!   hold a mix of previous and new tiemark files. The backup folder holds the previous version
//!   of every tiemark file moved aside so far; moving all of its files back into the output
//!   folder (replacing files of the same name) restores the previous outputs (a new file that
//!   had no previous version stays: delete it if it is unwanted). Or run tiemark again for a
//!   complete new set. Then delete the backup and `.NAME.tiemark-partial-PID` folders.
//! - a `.NAME.tiemark-discard-PID` folder and no backup folder: the new files were all in
//!   place; delete it and any `.NAME.tiemark-partial-PID` folder.
//!
//! A new folder (the output folder did not exist) is put in place by one rename, so a crash
//! leaves either no output folder or the complete one.

use super::EmitError;
use std::io;
use std::path::{Path, PathBuf};

/// A file-system step failed: where, and why; the message says what to do.
#[derive(Debug)]
pub(crate) struct Failure {
    /// The file or folder concerned.
    pub(crate) path: PathBuf,
    /// The cause, with advice.
    pub(crate) source: io::Error,
}

impl Failure {
    fn new(path: &Path, source: io::Error) -> Failure {
        Failure {
            path: path.to_path_buf(),
            source,
        }
    }

    /// "`step` failed: `source`; `advice`", of `source`'s kind.
    fn failed(path: &Path, step: &str, source: io::Error, advice: &str) -> Failure {
        Failure {
            path: path.to_path_buf(),
            source: io::Error::new(source.kind(), format!("{step} failed: {source}; {advice}")),
        }
    }
}

impl From<Failure> for EmitError {
    fn from(f: Failure) -> EmitError {
        EmitError::Io {
            path: f.path,
            source: f.source,
        }
    }
}

/// One rename step: from, to.
type Rename<'a> = &'a mut dyn FnMut(&Path, &Path) -> io::Result<()>;

fn parent_of(target: &Path) -> PathBuf {
    match target.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// `.NAME.tiemark-TAG-PID` beside `target`.
fn hidden_beside(target: &Path, tag: &str) -> PathBuf {
    let name = target
        .file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_default();
    parent_of(target).join(format!(".{name}.tiemark-{tag}-{}", std::process::id()))
}

fn exists(path: &Path) -> bool {
    std::fs::symlink_metadata(path).is_ok()
}

/// A hidden staging folder beside `target`, removed on drop unless committed.
pub(crate) struct Staging {
    pub(crate) path: PathBuf,
    done: bool,
}

impl Staging {
    /// Makes `.NAME.tiemark-partial-PID` beside `target` (and `target`'s parent folders),
    /// replacing a stale one of the same name.
    pub(crate) fn beside(target: &Path) -> Result<Staging, Failure> {
        let parent = parent_of(target);
        std::fs::create_dir_all(&parent).map_err(|e| Failure::new(&parent, e))?;
        let path = hidden_beside(target, "partial");
        if exists(&path) {
            std::fs::remove_dir_all(&path).map_err(|e| Failure::new(&path, e))?;
        }
        std::fs::create_dir(&path).map_err(|e| Failure::new(&path, e))?;
        Ok(Staging { path, done: false })
    }
}

impl Drop for Staging {
    fn drop(&mut self) {
        if !self.done {
            let _ = std::fs::remove_dir_all(&self.path);
        }
    }
}

/// Puts the files `names` of `staging` into the folder `target`, all of them or none.
///
/// When `target` does not exist the staging folder is renamed to it (one atomic step). When
/// it is a folder, the tiemark files among `names` already in it are moved into a hidden
/// backup folder beside it, the new ones (those of `names` the staging folder holds) are moved
/// in, and the backup is renamed to a discard folder and deleted. On any failure every step
/// done so far is undone (new files back out, previous ones back in) and the error names the
/// file and what to do; if undoing fails too, the error names the backup folder holding the
/// previous files. What a crash leaves: see the module doc. Other files in `target` are never
/// touched. Refused before anything moves: `target` being a file, a folder in `target` under
/// one of `names`, and a backup folder of this process id left by an interrupted run (one of
/// another id is not looked for).
pub(crate) fn put_in_place(staging: Staging, target: &Path, names: &[&str]) -> Result<(), Failure> {
    put_in_place_with(staging, target, names, &mut |from, to| {
        std::fs::rename(from, to)
    })
}

/// [`put_in_place`] with every rename done by `rename` (tests inject failures here).
fn put_in_place_with(
    mut staging: Staging,
    target: &Path,
    names: &[&str],
    rename: Rename,
) -> Result<(), Failure> {
    match std::fs::metadata(target) {
        Err(e) if e.kind() == io::ErrorKind::NotFound => {
            rename(&staging.path, target).map_err(|e| {
                Failure::failed(
                    target,
                    &format!(
                        "moving the new output folder into place from {}",
                        staging.path.display()
                    ),
                    e,
                    "nothing was written: fix the cause and run again",
                )
            })?;
            staging.done = true;
            return Ok(());
        }
        Err(e) => return Err(Failure::new(target, e)),
        Ok(m) if !m.is_dir() => {
            return Err(Failure::new(
                target,
                io::Error::new(
                    io::ErrorKind::NotADirectory,
                    "exists and is not a folder; choose another output folder",
                ),
            ))
        }
        Ok(_) => {}
    }
    let mut previous = Vec::new();
    for name in names {
        let p = target.join(name);
        match std::fs::symlink_metadata(&p) {
            Ok(m) if m.is_dir() => {
                return Err(Failure::new(
                    &p,
                    io::Error::new(
                        io::ErrorKind::IsADirectory,
                        "is a folder where tiemark writes a file; move it away or choose another \
                         output folder",
                    ),
                ))
            }
            Ok(_) => previous.push(*name),
            Err(e) if e.kind() == io::ErrorKind::NotFound => {}
            Err(e) => return Err(Failure::new(&p, e)),
        }
    }
    let new: Vec<&str> = names
        .iter()
        .copied()
        .filter(|n| exists(&staging.path.join(n)))
        .collect();
    let backup = hidden_beside(target, "backup");
    let discard = hidden_beside(target, "discard");
    if exists(&discard) {
        std::fs::remove_dir_all(&discard).map_err(|e| Failure::new(&discard, e))?;
    }
    std::fs::create_dir(&backup).map_err(|e| {
        if e.kind() == io::ErrorKind::AlreadyExists {
            Failure::failed(
                &backup,
                "making the backup folder",
                e,
                &format!(
                    "it was left by an interrupted run and holds earlier tiemark files of {}: \
                     move them back there (replacing files of the same name) or delete this \
                     folder, then run again",
                    target.display()
                ),
            )
        } else {
            Failure::new(&backup, e)
        }
    })?;

    let mut moved_out = Vec::new();
    let mut moved_in = Vec::new();
    let swapped = swap(
        target,
        &staging.path,
        &backup,
        &discard,
        (&previous, &new),
        (&mut moved_out, &mut moved_in),
        rename,
    );
    let (path, step, cause) = match swapped {
        Ok(()) => {
            // Done: the previous files are only in the discard folder. Deleting it is best
            // effort; a leftover is harmless and named for what it is.
            let _ = std::fs::remove_dir_all(&discard);
            return Ok(());
        }
        Err(failed) => failed,
    };

    // Undo, newest step first. Moving a previous file back in also replaces a new file of the
    // same name that could not be moved back out, so only a new file without a previous
    // version counts as stuck.
    let mut undo_failures = Vec::new();
    for name in moved_in.iter().rev() {
        if let Err(e) = rename(&target.join(name), &staging.path.join(name)) {
            if !moved_out.contains(name) {
                undo_failures.push(format!("{}: {e}", target.join(name).display()));
            }
        }
    }
    for name in moved_out.iter().rev() {
        if let Err(e) = rename(&backup.join(name), &target.join(name)) {
            undo_failures.push(format!("{}: {e}", backup.join(name).display()));
        }
    }
    // Succeeds only when empty, so a previous file that could not go back stays safe here.
    let _ = std::fs::remove_dir(&backup);
    let advice = if undo_failures.is_empty() {
        format!(
            "{} was left as it was: fix the cause and run again",
            target.display()
        )
    } else if !exists(&backup) {
        format!(
            "undoing the move failed too ({}): delete those new files; every previous file is \
             back in {}",
            undo_failures.join("; "),
            target.display()
        )
    } else {
        format!(
            "undoing the move failed too ({}): {} may hold a mix of previous and new tiemark \
             files; move every file in {} back into it (replacing files of the same name), then \
             delete that folder and run again",
            undo_failures.join("; "),
            target.display(),
            backup.display()
        )
    };
    Err(Failure::failed(&path, &step, cause, &advice))
}

/// The moves of [`put_in_place_with`]: previous files out to `backup`, new files in from
/// `staging`, then `backup` renamed to `discard`. Records each completed move; on failure
/// returns the path, the step and the cause.
fn swap<'n>(
    target: &Path,
    staging: &Path,
    backup: &Path,
    discard: &Path,
    (previous, new): (&[&'n str], &[&'n str]),
    (moved_out, moved_in): (&mut Vec<&'n str>, &mut Vec<&'n str>),
    rename: Rename,
) -> Result<(), (PathBuf, String, io::Error)> {
    for name in previous {
        let from = target.join(name);
        rename(&from, &backup.join(name)).map_err(|e| {
            (
                from,
                format!("moving the previous file aside into {}", backup.display()),
                e,
            )
        })?;
        moved_out.push(*name);
    }
    for name in new {
        let to = target.join(name);
        rename(&staging.join(name), &to).map_err(|e| {
            (
                to,
                format!("moving the new file in from {}", staging.display()),
                e,
            )
        })?;
        moved_in.push(*name);
    }
    rename(backup, discard).map_err(|e| {
        (
            backup.to_path_buf(),
            format!(
                "renaming the backup of the previous files to {}",
                discard.display()
            ),
            e,
        )
    })
}

/// Writes the files `(name, contents)` into the folder `dir`, all of them or none (a staging
/// folder beside `dir`, then [`put_in_place`]); other files in `dir` are kept. Returns the
/// final paths, in order.
#[cfg_attr(not(feature = "experiments"), allow(dead_code))]
pub(crate) fn write_set(dir: &Path, files: &[(&str, &[u8])]) -> Result<Vec<PathBuf>, Failure> {
    let staging = Staging::beside(dir)?;
    for (name, contents) in files {
        let p = staging.path.join(name);
        std::fs::write(&p, contents).map_err(|e| Failure::new(&p, e))?;
    }
    let names: Vec<&str> = files.iter().map(|(n, _)| *n).collect();
    put_in_place(staging, dir, &names)?;
    Ok(names.iter().map(|n| dir.join(n)).collect())
}

/// Writes one file atomically: `write` makes it at a temporary path in the same folder
/// (`.NAME.tiemark-partial-PID.EXT`), which is then renamed to `path`, replacing a file there.
/// On any error the temporary file and anything `write` made named after it (a GeoPackage's
/// `-journal`) are removed, and `path` is as it was. Creates `path`'s parent folders.
pub(crate) fn write_file<E: From<Failure>>(
    path: &Path,
    write: impl FnOnce(&Path) -> Result<(), E>,
) -> Result<(), E> {
    write_file_with(path, write, &mut |from, to| std::fs::rename(from, to))
}

/// [`write_file`] with the rename done by `rename` (tests inject failures here).
fn write_file_with<E: From<Failure>>(
    path: &Path,
    write: impl FnOnce(&Path) -> Result<(), E>,
    rename: Rename,
) -> Result<(), E> {
    let parent = parent_of(path);
    std::fs::create_dir_all(&parent).map_err(|e| Failure::new(&parent, e))?;
    let mut temp = hidden_beside(path, "partial").into_os_string();
    if let Some(ext) = path.extension() {
        temp.push(".");
        temp.push(ext);
    }
    let temp = PathBuf::from(temp);
    let clean = || {
        let Some(stem) = temp.file_name() else { return };
        let stem = stem.to_string_lossy();
        for entry in std::fs::read_dir(&parent).into_iter().flatten().flatten() {
            if entry.file_name().to_string_lossy().starts_with(&*stem) {
                let _ = std::fs::remove_file(entry.path());
            }
        }
    };
    clean();
    if let Err(e) = write(&temp) {
        clean();
        return Err(e);
    }
    if let Err(e) = rename(&temp, path) {
        clean();
        return Err(Failure::failed(
            path,
            &format!("moving the new file into place from {}", temp.display()),
            e,
            "the file was left as it was: fix the cause and run again",
        )
        .into());
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::BTreeMap;

    /// The four files of a match, as in `emit::FILES`.
    const NAMES: [&str; 4] = [
        "control-points.csv",
        "control-points.gpkg",
        "transform.json",
        "report.txt",
    ];

    /// A file of the user's in the output folder, which must never be touched.
    const USER_FILE: (&str, &str) = ("notes.txt", "the user's own notes\n");

    /// Every file under `root` (relative path → contents); folders appear through their
    /// files, empty folders as `name/` → empty.
    fn snapshot(root: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
        fn walk(root: &Path, dir: &Path, into: &mut BTreeMap<PathBuf, Vec<u8>>) {
            let mut empty = true;
            for e in std::fs::read_dir(dir).unwrap() {
                empty = false;
                let p = e.unwrap().path();
                if p.is_dir() {
                    walk(root, &p, into);
                } else {
                    into.insert(
                        p.strip_prefix(root).unwrap().to_path_buf(),
                        std::fs::read(&p).unwrap(),
                    );
                }
            }
            if empty && dir != root {
                into.insert(dir.strip_prefix(root).unwrap().join(""), Vec::new());
            }
        }
        let mut m = BTreeMap::new();
        walk(root, root, &mut m);
        m
    }

    /// What `root` should hold: the folder `out` with `files` (name, contents) and the user's
    /// file, nothing else; or nothing at all when `files` is `None`.
    fn expected(files: Option<&[(&str, String)]>) -> BTreeMap<PathBuf, Vec<u8>> {
        let mut m = BTreeMap::new();
        if let Some(files) = files {
            for (n, c) in files {
                m.insert(Path::new("out").join(n), c.clone().into_bytes());
            }
            m.insert(
                Path::new("out").join(USER_FILE.0),
                USER_FILE.1.as_bytes().to_vec(),
            );
        }
        m
    }

    /// A rename that fails on the calls (0-based) for which `fail` is true and counts calls.
    fn injecting<'a>(
        fail: &'a dyn Fn(usize) -> bool,
        calls: &'a mut usize,
    ) -> impl FnMut(&Path, &Path) -> io::Result<()> + 'a {
        move |from, to| {
            let k = *calls;
            *calls += 1;
            if fail(k) {
                Err(io::Error::other(format!("injected failure at rename {k}")))
            } else {
                std::fs::rename(from, to)
            }
        }
    }

    type Put = fn(Staging, &Path, &[&str], Rename) -> Result<(), Failure>;

    /// Runs `put` with a failure injected at rename 0, 1, 2, … until a run needs no more
    /// renames than that, for an output folder that holds `old` (a subset of the four files,
    /// with distinct contents) plus the user's file, or does not exist (`old` is `None`). After
    /// every failed run the whole parent folder must be exactly as before (previous files with
    /// the same contents, the user's file, no staging/backup/discard leftovers) and the error
    /// must name a path; after the run with no failure it must hold exactly the four new files
    /// plus the user's file. Returns the number of renames of the successful run, or the first
    /// violation.
    fn check_all_or_nothing(put: Put, old: Option<&[&str]>) -> Result<usize, String> {
        let old_files: Option<Vec<(&str, String)>> =
            old.map(|o| o.iter().map(|n| (*n, format!("previous {n}\n"))).collect());
        let new_files: Vec<(&str, String)> =
            NAMES.iter().map(|n| (*n, format!("new {n}\n"))).collect();
        for k in 0.. {
            let root = tempfile::tempdir().unwrap();
            let out = root.path().join("out");
            if let Some(files) = &old_files {
                std::fs::create_dir(&out).unwrap();
                for (n, c) in files {
                    std::fs::write(out.join(n), c).unwrap();
                }
                std::fs::write(out.join(USER_FILE.0), USER_FILE.1).unwrap();
            }
            let before = snapshot(root.path());
            assert_eq!(before, expected(old_files.as_deref()), "fixture");
            let staging = Staging::beside(&out).unwrap();
            for (n, c) in &new_files {
                std::fs::write(staging.path.join(n), c).unwrap();
            }
            let mut calls = 0;
            let fail = move |i: usize| i == k;
            let result = put(staging, &out, &NAMES, &mut injecting(&fail, &mut calls));
            let after = snapshot(root.path());
            if calls <= k {
                // The failure was never reached: this is the run without failure.
                if let Err(e) = result {
                    return Err(format!("no failure injected, yet: {e:?}"));
                }
                let mut want = expected(Some(&new_files));
                if old.is_none() {
                    want.remove(&Path::new("out").join(USER_FILE.0));
                }
                if after != want {
                    return Err(format!("after success: {after:#?}\nexpected {want:#?}"));
                }
                return Ok(calls);
            }
            match result {
                Ok(()) => return Err(format!("rename {k} failed, yet Ok")),
                Err(e) if e.path.as_os_str().is_empty() => {
                    return Err(format!("rename {k}: the error names no path"))
                }
                Err(_) => {}
            }
            if after != before {
                return Err(format!(
                    "rename {k} failed and the folder changed: {after:#?}\nbefore {before:#?}"
                ));
            }
        }
        unreachable!()
    }

    /// The logic this module replaced: into an existing folder, each new file renamed over the
    /// old one, one by one, stopping at the first failure.
    fn one_by_one(
        mut staging: Staging,
        target: &Path,
        names: &[&str],
        rename: Rename,
    ) -> Result<(), Failure> {
        if !target.exists() {
            rename(&staging.path, target).map_err(|e| Failure::new(target, e))?;
            staging.done = true;
        } else {
            for n in names {
                let to = target.join(n);
                rename(&staging.path.join(n), &to).map_err(|e| Failure::new(&to, e))?;
            }
        }
        Ok(())
    }

    #[test]
    fn a_failure_at_any_rename_leaves_the_previous_files() {
        // Four previous files out, four new in, the backup to discard: nine renames.
        assert_eq!(check_all_or_nothing(put_in_place_with, Some(&NAMES)), Ok(9));
        // Two previous files (the others new): two out, four in, one.
        let two = ["control-points.csv", "report.txt"];
        assert_eq!(check_all_or_nothing(put_in_place_with, Some(&two)), Ok(7));
        // An empty folder (only the user's file).
        assert_eq!(check_all_or_nothing(put_in_place_with, Some(&[])), Ok(5));
        // No output folder: the staging folder is renamed to it.
        assert_eq!(check_all_or_nothing(put_in_place_with, None), Ok(1));
    }

    #[test]
    fn the_check_catches_one_by_one_renames() {
        // The check above must fail against the old logic: a failure at the second rename
        // leaves control-points.csv new while the other three are still the previous ones (a
        // mixed set the check sees as a changed folder), and the staging folder keeps the
        // files not moved yet until it is dropped. A folder that did not exist was already
        // handled by one rename, so that case passes with either.
        let verdict = check_all_or_nothing(one_by_one, Some(&NAMES));
        let message = verdict.expect_err("the one-by-one logic passed the check");
        assert!(
            message.contains("rename 1 failed and the folder changed"),
            "{message}"
        );
        assert_eq!(check_all_or_nothing(one_by_one, None), Ok(1));
    }

    #[test]
    fn a_failed_undo_keeps_the_previous_file_in_the_backup_and_says_so() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("out");
        std::fs::create_dir(&out).unwrap();
        for n in NAMES {
            std::fs::write(out.join(n), format!("previous {n}")).unwrap();
        }
        let staging = Staging::beside(&out).unwrap();
        for n in NAMES {
            std::fs::write(staging.path.join(n), format!("new {n}")).unwrap();
        }
        // Renames 0-3 move the previous files aside, 4 moves the csv in, 5 (the gpkg) fails;
        // undo: 6 moves the csv back out, 7-10 move report, json, gpkg, csv back in; 7 fails.
        let fail = |i: usize| i == 5 || i == 7;
        let mut calls = 0;
        let e = put_in_place_with(staging, &out, &NAMES, &mut injecting(&fail, &mut calls))
            .unwrap_err();
        assert_eq!(calls, 11);
        assert_eq!(e.path, out.join("control-points.gpkg"));
        let backup = hidden_beside(&out, "backup");
        let message = e.source.to_string();
        assert!(
            message.contains("injected failure at rename 5"),
            "{message}"
        );
        assert!(message.contains("undoing the move failed too"), "{message}");
        assert!(message.contains(&backup.display().to_string()), "{message}");
        // Nothing lost: report.txt's previous version is in the backup, the rest is back.
        assert_eq!(
            std::fs::read_to_string(backup.join("report.txt")).unwrap(),
            "previous report.txt"
        );
        assert!(!out.join("report.txt").exists());
        for n in &NAMES[..3] {
            assert_eq!(
                std::fs::read_to_string(out.join(n)).unwrap(),
                format!("previous {n}")
            );
        }
    }

    #[test]
    fn two_failures_never_lose_a_previous_file() {
        // Every pair of failing renames, the second often hitting the undo: either the folder
        // is exactly as before, or the error says so and names the backup folder, which holds
        // every previous file not back in place; the user's file is never touched.
        let two = ["control-points.csv", "report.txt"];
        let mut clean = 0;
        let mut reported = 0;
        for old in [&NAMES[..], &two[..]] {
            for k1 in 0..=old.len() + NAMES.len() {
                for k2 in k1 + 1..k1 + 12 {
                    let root = tempfile::tempdir().unwrap();
                    let out = root.path().join("out");
                    std::fs::create_dir(&out).unwrap();
                    for n in old {
                        std::fs::write(out.join(n), format!("previous {n}")).unwrap();
                    }
                    std::fs::write(out.join(USER_FILE.0), USER_FILE.1).unwrap();
                    let before = snapshot(root.path());
                    let staging = Staging::beside(&out).unwrap();
                    for n in NAMES {
                        std::fs::write(staging.path.join(n), format!("new {n}")).unwrap();
                    }
                    let fail = |i: usize| i == k1 || i == k2;
                    let mut calls = 0;
                    let e =
                        put_in_place_with(staging, &out, &NAMES, &mut injecting(&fail, &mut calls))
                            .unwrap_err();
                    let message = e.source.to_string();
                    let backup = hidden_beside(&out, "backup");
                    assert_eq!(
                        std::fs::read_to_string(out.join(USER_FILE.0)).unwrap(),
                        USER_FILE.1
                    );
                    if message.contains("undoing the move failed too") {
                        reported += 1;
                        if exists(&backup) {
                            assert!(message.contains(&backup.display().to_string()), "{message}");
                        }
                        for n in old {
                            let want = format!("previous {n}");
                            let here = std::fs::read_to_string(out.join(n)).ok();
                            let kept = std::fs::read_to_string(backup.join(n)).ok();
                            assert!(
                                here.as_deref() == Some(&want) || kept.as_deref() == Some(&want),
                                "renames {k1}, {k2}: previous {n} lost"
                            );
                        }
                    } else {
                        clean += 1;
                        assert!(message.contains("was left as it was"), "{message}");
                        assert_eq!(snapshot(root.path()), before, "renames {k1}, {k2}");
                    }
                }
            }
        }
        // Both outcomes occur, so both branches above were checked.
        assert!(
            clean > 0 && reported > 0,
            "clean {clean}, reported {reported}"
        );
    }

    #[test]
    fn an_interrupted_runs_backup_is_refused_before_anything_moves() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("out");
        std::fs::create_dir(&out).unwrap();
        std::fs::write(out.join("report.txt"), "previous").unwrap();
        let backup = hidden_beside(&out, "backup");
        std::fs::create_dir(&backup).unwrap();
        std::fs::write(backup.join("transform.json"), "older").unwrap();
        let staging = Staging::beside(&out).unwrap();
        std::fs::write(staging.path.join("report.txt"), "new").unwrap();
        let e = put_in_place(staging, &out, &NAMES).unwrap_err();
        assert_eq!(e.path, backup);
        assert!(
            e.source.to_string().contains("interrupted run"),
            "{}",
            e.source
        );
        assert_eq!(
            std::fs::read_to_string(out.join("report.txt")).unwrap(),
            "previous"
        );
        assert_eq!(
            std::fs::read_to_string(backup.join("transform.json")).unwrap(),
            "older"
        );
    }

    #[test]
    fn a_folder_under_a_tiemark_name_is_refused() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("out");
        std::fs::create_dir_all(out.join("report.txt")).unwrap();
        std::fs::write(out.join("report.txt").join("keep"), "mine").unwrap();
        let staging = Staging::beside(&out).unwrap();
        std::fs::write(staging.path.join("report.txt"), "new").unwrap();
        let e = put_in_place(staging, &out, &NAMES).unwrap_err();
        assert_eq!(e.path, out.join("report.txt"));
        assert_eq!(
            std::fs::read_to_string(out.join("report.txt").join("keep")).unwrap(),
            "mine"
        );
        assert_eq!(
            snapshot(root.path()).len(),
            1,
            "leftovers beside the folder"
        );
    }

    #[test]
    fn write_set_keeps_other_files() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("out");
        std::fs::create_dir(&out).unwrap();
        std::fs::write(out.join("a.csv"), "previous").unwrap();
        std::fs::write(out.join(USER_FILE.0), USER_FILE.1).unwrap();
        let paths = write_set(&out, &[("a.csv", b"new a"), ("b.md", b"new b")]).unwrap();
        assert_eq!(paths, [out.join("a.csv"), out.join("b.md")]);
        let got = snapshot(root.path());
        let want: BTreeMap<PathBuf, Vec<u8>> = [
            ("out/a.csv", "new a"),
            ("out/b.md", "new b"),
            ("out/notes.txt", USER_FILE.1),
        ]
        .iter()
        .map(|(p, c)| (PathBuf::from(p), c.as_bytes().to_vec()))
        .collect();
        assert_eq!(got, want);
    }

    /// `root` holds `f.gpkg` with "previous", and nothing else.
    fn one_previous_file() -> (tempfile::TempDir, PathBuf) {
        let root = tempfile::tempdir().unwrap();
        let f = root.path().join("f.gpkg");
        std::fs::write(&f, "previous").unwrap();
        (root, f)
    }

    #[test]
    fn write_file_replaces_or_leaves_the_file_as_it_was() {
        // Success: the new contents, no temporary file, written under the same extension.
        let (root, f) = one_previous_file();
        let mut seen = None;
        write_file(&f, |tmp| -> Result<(), EmitError> {
            seen = tmp.extension().map(|e| e.to_owned());
            std::fs::write(tmp, "new").map_err(|e| Failure::new(tmp, e).into())
        })
        .unwrap();
        assert_eq!(seen.as_deref(), Some(std::ffi::OsStr::new("gpkg")));
        assert_eq!(snapshot(root.path()).len(), 1);
        assert_eq!(std::fs::read_to_string(&f).unwrap(), "new");

        // The writer fails after making the file and a sidecar: both removed, file unchanged.
        let (root, f) = one_previous_file();
        let e = write_file(&f, |tmp| -> Result<(), EmitError> {
            std::fs::write(tmp, "half").unwrap();
            let mut journal = tmp.as_os_str().to_owned();
            journal.push("-journal");
            std::fs::write(journal, "j").unwrap();
            Err(EmitError::NothingAccepted)
        })
        .unwrap_err();
        assert!(matches!(e, EmitError::NothingAccepted), "{e:?}");
        assert_eq!(snapshot(root.path()).len(), 1, "temporary files left");
        assert_eq!(std::fs::read_to_string(&f).unwrap(), "previous");

        // The rename fails: the error names the file, which is unchanged; no temporary file.
        let (root, f) = one_previous_file();
        let mut calls = 0;
        let fail = |_: usize| true;
        let e = write_file_with(
            &f,
            |tmp| -> Result<(), EmitError> {
                std::fs::write(tmp, "new").map_err(|e| Failure::new(tmp, e).into())
            },
            &mut injecting(&fail, &mut calls),
        )
        .unwrap_err();
        match e {
            EmitError::Io { path, .. } => assert_eq!(path, f),
            other => panic!("expected an I/O error, got {other:?}"),
        }
        assert_eq!(calls, 1);
        assert_eq!(snapshot(root.path()).len(), 1, "temporary file left");
        assert_eq!(std::fs::read_to_string(&f).unwrap(), "previous");
    }
}
