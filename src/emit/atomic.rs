//! Atomic output: the one place where tiemark puts its files in place.
//!
//! **In:** new files, written into a hidden staging folder ([`Staging`]) or, for a single
//! file, by a writer given a temporary path ([`write_file`]), and what the output may replace
//! ([`Mode`]).
//! **Out:** the files at their final paths, either all of them or none: on any error the
//! output folder (or file) is left as it was, and nothing tiemark made is left behind (but for
//! parent folders of the output it had to create).
//!
//! For an output folder or file `NAME` these hidden names are used, `HOST` being this
//! machine's name (every character but letters and digits replaced by `_`), `PID` the process
//! id and `N` a count within the process:
//!
//! - `.NAME.tiemark-partial-HOST-PID-N`: the staging folder where the new files are written
//!   ([`Staging`]); for a single file, the temporary file (with `NAME`'s extension appended,
//!   for drivers that go by the extension). Also, for a moment, the probe that checks before
//!   any work that the output can be written ([`probe`]).
//! - `.NAME.tiemark-backup-PID`: while the new files go into an existing folder, the previous
//!   tiemark files moved aside ([`put_in_place`]).
//! - `.NAME.tiemark-discard-PID`: the same folder once every new file is in place, being
//!   deleted.
//!
//! They are made in the output's parent folder, so that every move is a rename within one
//! file system; when the output folder exists and is on another device than its parent (a
//! mount point), inside the output folder instead. A rename never crosses devices.
//!
//! A new output folder is claimed exclusively: it is made by renaming the staging folder to
//! it, which fails when another run (or program) made it meanwhile, and then nothing is
//! written. Into an existing empty folder ([`Mode::Fresh`]) every file goes in without
//! replacing anything ([`move_no_replace`]). Only the files a caller names are moved; every
//! other file in an existing output folder is left untouched.
//!
//! # Interrupts and stale leftovers
//!
//! Every staging folder and temporary file is registered while it exists; on SIGINT, SIGTERM
//! or SIGHUP the binary's signal watcher calls [`remove_leftovers`], which waits for moves in
//! progress (milliseconds) to finish and removes them. A staging folder or temporary file of
//! this machine whose process is no longer alive (killed with `kill -9`, power loss) is removed
//! the next time a run stages in the same folder; one of another machine (a shared network
//! folder) is left alone.
//!
//! # After a crash
//!
//! A rename is atomic, a sequence of them is not: if the process is killed (`kill -9`, power
//! loss) while [`put_in_place`] moves files into an existing folder, what is left depends on the
//! moment:
//!
//! - no backup or discard folder: the output is as it was (or, if it did not exist, complete);
//!   any `.NAME.tiemark-partial-…` folder or file is removed by the next run (or delete it).
//! - a `.NAME.tiemark-backup-PID` folder: the move was interrupted and the output folder may
//!   hold a mix of previous and new tiemark files. The backup folder holds the previous version
//!   of every tiemark file moved aside so far; moving all of its files back into the output
//!   folder (replacing files of the same name) restores the previous outputs (a new file that
//!   had no previous version stays: delete it if it is unwanted). Or run tiemark again for a
//!   complete new set. Then delete the backup folder.
//! - a `.NAME.tiemark-discard-PID` folder and no backup folder: the new files were all in
//!   place; delete it.
//!
//! A new folder (the output folder did not exist) is put in place by one rename, so a crash
//! leaves either no output folder or the complete one. Into an existing empty folder a crash
//! may leave some of the new files: delete them or run again with `--force`.

use super::EmitError;
use std::io;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::{Mutex, MutexGuard, OnceLock};

/// A file-system step failed: where, and why; the message says what to do.
#[derive(Debug)]
pub(crate) struct Failure {
    /// The file or folder concerned.
    pub(crate) path: PathBuf,
    /// The cause, with advice.
    pub(crate) source: io::Error,
}

impl Failure {
    pub(crate) fn new(path: &Path, source: io::Error) -> Failure {
        Failure {
            path: path.to_path_buf(),
            source,
        }
    }

    /// "`step` failed: `source`; `advice`", of `source`'s kind.
    fn failed(path: &Path, step: &str, source: io::Error, advice: &str) -> Failure {
        let kind = source.kind();
        let full = disk_full(&source);
        let mut message = format!("{step} failed: {source}; {advice}");
        if full {
            message = format!("disk full: {message}");
        }
        Failure {
            path: path.to_path_buf(),
            source: io::Error::new(kind, message),
        }
    }
}

impl From<Failure> for EmitError {
    fn from(f: Failure) -> EmitError {
        EmitError::from_io(&f.path, f.source)
    }
}

/// The disk (or the user's quota on it) is full: ENOSPC or EDQUOT, or a message of one
/// carried through another error.
pub(crate) fn disk_full(e: &io::Error) -> bool {
    // 28 and 122 are ENOSPC and EDQUOT on Linux (asm-generic/errno-base.h, errno.h).
    matches!(
        e.kind(),
        io::ErrorKind::StorageFull | io::ErrorKind::QuotaExceeded
    ) || matches!(e.raw_os_error(), Some(28) | Some(122))
        || disk_full_text(&e.to_string())
}

/// A message that says the disk or quota is full (the OS's words, or SQLite's for a
/// GeoPackage).
pub(crate) fn disk_full_text(message: &str) -> bool {
    let m = message.to_ascii_lowercase();
    [
        "no space left on device",
        "disk quota exceeded",
        "database or disk is full",
        "disk full",
    ]
    .iter()
    .any(|w| m.contains(w))
}

/// One rename step: from, to.
type Rename<'a> = &'a mut dyn FnMut(&Path, &Path) -> io::Result<()>;

/// The device a folder is on (`None`: not an existing folder); tests inject other devices.
type Device<'a> = &'a dyn Fn(&Path) -> Option<u64>;

fn parent_of(target: &Path) -> PathBuf {
    match target.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

fn name_of(target: &Path) -> String {
    target
        .file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_default()
}

/// `.NAME.tiemark-TAG-PID` in `home`.
fn hidden_in(home: &Path, target: &Path, tag: &str) -> PathBuf {
    home.join(format!(
        ".{}.tiemark-{tag}-{}",
        name_of(target),
        std::process::id()
    ))
}

/// This machine's name with every character but ASCII letters and digits replaced by `_`.
fn host() -> &'static str {
    static HOST: OnceLock<String> = OnceLock::new();
    HOST.get_or_init(|| {
        let raw = std::fs::read_to_string("/proc/sys/kernel/hostname")
            .or_else(|_| std::fs::read_to_string("/etc/hostname"))
            .unwrap_or_default();
        let name: String = raw
            .trim()
            .chars()
            .map(|c| if c.is_ascii_alphanumeric() { c } else { '_' })
            .collect();
        if name.is_empty() {
            "host".to_string()
        } else {
            name
        }
    })
}

const PARTIAL: &str = ".tiemark-partial-";

/// `.NAME.tiemark-partial-HOST-PID-N` in `home`, with a new `N`.
fn partial_in(home: &Path, target: &Path) -> PathBuf {
    static COUNT: AtomicUsize = AtomicUsize::new(0);
    let n = COUNT.fetch_add(1, Ordering::Relaxed);
    home.join(format!(
        ".{}{PARTIAL}{}-{}-{n}",
        name_of(target),
        host(),
        std::process::id()
    ))
}

/// The process id in a staging name of this machine (`None`: not one, or another machine's).
fn partial_pid(file_name: &str) -> Option<u32> {
    let rest = &file_name[file_name.rfind(PARTIAL)? + PARTIAL.len()..];
    let mut parts = rest.splitn(3, '-');
    if parts.next()? != host() {
        return None;
    }
    parts.next()?.parse().ok()
}

/// Whether process `pid` of this machine is alive; true when that cannot be told (no
/// `/proc`), so that nothing is removed on a guess.
fn alive(pid: u32) -> bool {
    !Path::new("/proc/self").exists() || Path::new("/proc").join(pid.to_string()).exists()
}

/// Removes the staging folders and temporary files in `home` left by dead runs of this
/// machine (best effort: what cannot be removed stays).
fn clear_stale(home: &Path) {
    let own = std::process::id();
    for entry in std::fs::read_dir(home).into_iter().flatten().flatten() {
        let name = entry.file_name().to_string_lossy().to_string();
        if let Some(pid) = partial_pid(&name) {
            if pid != own && !alive(pid) {
                remove_hidden(&entry.path());
            }
        }
    }
}

/// Removes a staging folder, or a temporary file and every file beside it whose name starts
/// with its name (a GeoPackage's `-journal`). A folder is retried a few times, as a writer
/// may still be making files in it.
fn remove_hidden(path: &Path) {
    match std::fs::symlink_metadata(path) {
        Ok(m) if m.is_dir() => {
            for _ in 0..20 {
                if std::fs::remove_dir_all(path).is_ok() || !exists(path) {
                    return;
                }
                std::thread::sleep(std::time::Duration::from_millis(5));
            }
        }
        _ => {
            let _ = std::fs::remove_file(path);
            let stem = name_of(path);
            let parent = parent_of(path);
            for entry in std::fs::read_dir(&parent).into_iter().flatten().flatten() {
                if !stem.is_empty() && entry.file_name().to_string_lossy().starts_with(&stem) {
                    let _ = std::fs::remove_file(entry.path());
                }
            }
        }
    }
}

/// Staging folders and temporary files of this process that exist now.
static LEFTOVERS: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());
/// Held while files move into place, so that an interrupt lets the moves finish.
static MOVING: Mutex<()> = Mutex::new(());

fn lock<T>(m: &Mutex<T>) -> MutexGuard<'_, T> {
    m.lock().unwrap_or_else(|poisoned| poisoned.into_inner())
}

fn register(path: &Path) {
    lock(&LEFTOVERS).push(path.to_path_buf());
}

fn unregister(path: &Path) {
    lock(&LEFTOVERS).retain(|p| p != path);
}

/// Set once an output of this process is completely in place.
static COMPLETED: AtomicBool = AtomicBool::new(false);

/// What [`remove_leftovers`] found.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Leftovers {
    /// Staging folders and temporary files removed.
    pub removed: usize,
    /// Whether an output of this process was already completely in place.
    pub completed: bool,
}

/// Removes every staging folder and temporary file of this process, after any move into
/// place in progress has finished; for a signal watcher that ends the process right after.
/// Holds the registry until the process ends, so no new staging folder is made meanwhile.
pub fn remove_leftovers() -> Leftovers {
    let moving = lock(&MOVING);
    let leftovers = lock(&LEFTOVERS);
    for p in leftovers.iter() {
        remove_hidden(p);
    }
    let found = Leftovers {
        removed: leftovers.len(),
        completed: COMPLETED.load(Ordering::SeqCst),
    };
    std::mem::forget(leftovers);
    std::mem::forget(moving);
    found
}

fn exists(path: &Path) -> bool {
    std::fs::symlink_metadata(path).is_ok()
}

/// The device of an existing folder.
fn device(path: &Path) -> Option<u64> {
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        std::fs::metadata(path)
            .ok()
            .filter(|m| m.is_dir())
            .map(|m| m.dev())
    }
    #[cfg(not(unix))]
    {
        let _ = path;
        None
    }
}

/// Where the hidden folders of `target` go so that every rename stays on one device: its
/// parent, or `target` itself when it is an existing folder on another device than its parent
/// (a mount point).
fn home_of(target: &Path, device: Device) -> PathBuf {
    let parent = parent_of(target);
    match (device(target), device(&parent)) {
        (Some(t), Some(p)) if t != p => target.to_path_buf(),
        _ => parent,
    }
}

/// What the output folder or file may hold when the new files go in.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Mode {
    /// New or empty (no `--force`): nothing is replaced; if another run, or another program,
    /// made the folder or put a file in it meanwhile, nothing is moved.
    Fresh,
    /// Replace tiemark's files there (`--force`), all of them or none.
    Replace,
}

/// A hidden staging folder for an output folder, removed on drop unless committed.
pub(crate) struct Staging {
    pub(crate) path: PathBuf,
    /// The folder it is in (see [`home_of`]); backup and discard folders go there too.
    home: PathBuf,
    done: bool,
}

impl Staging {
    /// Makes a staging folder for the output folder `target` (and `target`'s parent folders)
    /// where every rename into `target` stays on one device, after removing stale ones of
    /// dead runs there.
    pub(crate) fn for_target(target: &Path) -> Result<Staging, Failure> {
        Staging::for_target_with(target, &device)
    }

    fn for_target_with(target: &Path, device: Device) -> Result<Staging, Failure> {
        let parent = parent_of(target);
        std::fs::create_dir_all(&parent).map_err(|e| Failure::new(&parent, e))?;
        let home = home_of(target, device);
        clear_stale(&home);
        let path = partial_in(&home, target);
        register(&path);
        if let Err(e) = std::fs::create_dir(&path) {
            unregister(&path);
            return Err(Failure::new(&path, e));
        }
        Ok(Staging {
            path,
            home,
            done: false,
        })
    }
}

impl Drop for Staging {
    fn drop(&mut self) {
        if !self.done {
            let _ = std::fs::remove_dir_all(&self.path);
        }
        unregister(&self.path);
    }
}

/// Checks that the output `target` (a folder or file, existing or not) can be written: makes
/// and removes a hidden folder with a small file where its staging folder will go (the
/// nearest existing folder on the way there) and, for an existing folder, inside it. Writes
/// nothing that stays.
pub(crate) fn probe(target: &Path, folder: bool) -> Result<(), Failure> {
    let mut places = vec![home_of(target, &device)];
    if folder && device(target).is_some() {
        places.push(target.to_path_buf());
    }
    for place in places {
        let mut at = place.as_path();
        while !exists(at) {
            match at.parent() {
                Some(p) if !p.as_os_str().is_empty() => at = p,
                _ => {
                    at = Path::new(".");
                    break;
                }
            }
        }
        let dir = partial_in(at, target);
        register(&dir);
        let made = std::fs::create_dir(&dir)
            .and_then(|()| std::fs::write(dir.join("probe"), b"tiemark"))
            .map_err(|e| {
                Failure::failed(
                    at,
                    "making a trial folder",
                    e,
                    "nothing was done: choose another output, or fix the permissions",
                )
            });
        let _ = std::fs::remove_dir_all(&dir);
        unregister(&dir);
        made?;
    }
    Ok(())
}

/// Moves `from` to `to` unless `to` exists (then `AlreadyExists`, `from` untouched): a hard
/// link then removing `from`, which cannot replace anything; on a file system without hard
/// links, a check for `to` then `rename`.
fn move_no_replace(from: &Path, to: &Path, rename: Rename) -> io::Result<()> {
    match std::fs::hard_link(from, to) {
        Ok(()) => {
            // A left-over link in the staging folder goes with it.
            let _ = std::fs::remove_file(from);
            Ok(())
        }
        Err(e) if e.kind() == io::ErrorKind::AlreadyExists => Err(e),
        Err(_) if exists(to) => Err(io::Error::from(io::ErrorKind::AlreadyExists)),
        Err(_) => rename(from, to),
    }
}

/// The message of a folder that another run (or program) made or wrote into meanwhile.
fn taken(target: &Path, what: &str) -> String {
    format!(
        "{what} while this run worked; nothing was written: choose another output folder and \
         run again, or set --force to replace tiemark's files in {}",
        target.display()
    )
}

/// Puts the files `names` of `staging` into the folder `target`, all of them or none.
///
/// When `target` does not exist the staging folder is renamed to it (one atomic step, which
/// fails if another run made it meanwhile). When it is a folder: with [`Mode::Fresh`] it must
/// be empty (but for the staging folder) and the new files go in without replacing anything;
/// with [`Mode::Replace`] the tiemark files among `names` already in it are moved into a
/// hidden backup folder, the new ones (those of `names` the staging folder holds) are moved
/// in, and the backup is renamed to a discard folder and deleted. On any failure every step
/// done so far is undone (new files back out, previous ones back in) and the error names the
/// file and what to do; if undoing fails too, the error names the backup folder holding the
/// previous files. What a crash leaves: see the module doc. Other files in `target` are never
/// touched. Refused before anything moves: `target` being a file, a folder in `target` under
/// one of `names`, and a backup folder of this process id left by an interrupted run (one of
/// another id is not looked for).
pub(crate) fn put_in_place(
    staging: Staging,
    target: &Path,
    names: &[&str],
    mode: Mode,
) -> Result<(), Failure> {
    put_in_place_with(staging, target, names, mode, &mut |from, to| {
        std::fs::rename(from, to)
    })
    .inspect(|()| COMPLETED.store(true, Ordering::SeqCst))
}

/// [`put_in_place`] with every rename done by `rename` (tests inject failures here).
fn put_in_place_with(
    mut staging: Staging,
    target: &Path,
    names: &[&str],
    mode: Mode,
    rename: Rename,
) -> Result<(), Failure> {
    let _moving = lock(&MOVING);
    match std::fs::metadata(target) {
        Err(e) if e.kind() == io::ErrorKind::NotFound => {
            return match rename(&staging.path, target) {
                Ok(()) => {
                    staging.done = true;
                    Ok(())
                }
                Err(e)
                    if matches!(
                        e.kind(),
                        io::ErrorKind::AlreadyExists | io::ErrorKind::DirectoryNotEmpty
                    ) =>
                {
                    Err(Failure::new(
                        target,
                        io::Error::new(
                            io::ErrorKind::AlreadyExists,
                            taken(
                                target,
                                "another run of tiemark (or another program) made this folder",
                            ),
                        ),
                    ))
                }
                Err(e) => Err(Failure::failed(
                    target,
                    &format!(
                        "moving the new output folder into place from {}",
                        staging.path.display()
                    ),
                    e,
                    "nothing was written: fix the cause and run again",
                )),
            };
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
    if mode == Mode::Fresh {
        return fill_empty(&staging, target, names, rename);
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
    let backup = hidden_in(&staging.home, target, "backup");
    let discard = hidden_in(&staging.home, target, "discard");
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

/// The [`Mode::Fresh`] moves into an existing folder: refused if it holds anything but the
/// staging folder; else each new file goes in without replacing anything, and if one cannot
/// (a file of that name appeared) those moved so far go back.
fn fill_empty(
    staging: &Staging,
    target: &Path,
    names: &[&str],
    rename: Rename,
) -> Result<(), Failure> {
    let entries = std::fs::read_dir(target).map_err(|e| Failure::new(target, e))?;
    for entry in entries {
        let entry = entry.map_err(|e| Failure::new(target, e))?;
        if entry.path() != staging.path {
            return Err(Failure::new(
                target,
                io::Error::new(
                    io::ErrorKind::AlreadyExists,
                    taken(
                        target,
                        &format!(
                            "another run of tiemark (or another program) put {} in this folder",
                            entry.file_name().to_string_lossy()
                        ),
                    ),
                ),
            ));
        }
    }
    let mut moved: Vec<&str> = Vec::new();
    for name in names.iter().filter(|n| exists(&staging.path.join(n))) {
        let to = target.join(name);
        if let Err(e) = move_no_replace(&staging.path.join(name), &to, rename) {
            let mut stuck = Vec::new();
            for done in moved.iter().rev() {
                if let Err(u) = rename(&target.join(done), &staging.path.join(done)) {
                    stuck.push(format!("{}: {u}", target.join(done).display()));
                }
            }
            let advice = if stuck.is_empty() {
                format!("{} was left as it was", target.display())
            } else {
                format!(
                    "undoing the move failed too ({}): delete those new files",
                    stuck.join("; ")
                )
            };
            if e.kind() == io::ErrorKind::AlreadyExists {
                return Err(Failure::new(
                    &to,
                    io::Error::new(
                        io::ErrorKind::AlreadyExists,
                        format!(
                            "{}; {advice}",
                            taken(
                                target,
                                "another run of tiemark (or another program) made a file of this name",
                            )
                        ),
                    ),
                ));
            }
            return Err(Failure::failed(
                &to,
                &format!("moving the new file in from {}", staging.path.display()),
                e,
                &format!("{advice}: fix the cause and run again"),
            ));
        }
        moved.push(name);
    }
    Ok(())
}

/// The destinations a front end checked, and what each may replace; [`write_set`] looks its
/// folder up here.
static CLAIMED: Mutex<Vec<(PathBuf, Mode)>> = Mutex::new(Vec::new());

/// Records that the output folder `resolved` was checked and may be written with `mode`.
pub(crate) fn claim(resolved: &Path, mode: Mode) {
    let mut claimed = lock(&CLAIMED);
    claimed.retain(|(p, _)| p != resolved);
    claimed.push((resolved.to_path_buf(), mode));
}

/// The mode a front end checked `dir` for; [`Mode::Fresh`] if none did.
fn claimed_mode(dir: &Path) -> Mode {
    let resolved = super::destination::resolve(dir).unwrap_or_else(|_| dir.to_path_buf());
    lock(&CLAIMED)
        .iter()
        .find(|(p, _)| *p == resolved)
        .map_or(Mode::Fresh, |(_, m)| *m)
}

/// Writes the files `(name, contents)` into the folder `dir`, all of them or none (a staging
/// folder for `dir`, then [`put_in_place`]); other files in `dir` are kept. What may be
/// replaced: what the front end checked `dir` for (`emit::check_output_dir`), else nothing
/// (`dir` must be new or empty). Returns the final paths, in order.
#[cfg_attr(not(feature = "experiments"), allow(dead_code))]
pub(crate) fn write_set(dir: &Path, files: &[(&str, &[u8])]) -> Result<Vec<PathBuf>, Failure> {
    write_set_with(dir, files, claimed_mode(dir), &mut |p, c| {
        std::fs::write(p, c)
    })
}

/// [`write_set`] with every file written by `write` (tests inject failures here).
fn write_set_with(
    dir: &Path,
    files: &[(&str, &[u8])],
    mode: Mode,
    write: &mut dyn FnMut(&Path, &[u8]) -> io::Result<()>,
) -> Result<Vec<PathBuf>, Failure> {
    let staging = Staging::for_target(dir)?;
    for (name, contents) in files {
        let p = staging.path.join(name);
        write(&p, contents).map_err(|e| {
            Failure::failed(
                &p,
                "writing the new file",
                e,
                &format!("nothing was written to {}", dir.display()),
            )
        })?;
    }
    let names: Vec<&str> = files.iter().map(|(n, _)| *n).collect();
    put_in_place(staging, dir, &names, mode)?;
    Ok(names.iter().map(|n| dir.join(n)).collect())
}

/// Writes one file atomically: `write` makes it at a temporary path in the same folder
/// (`.NAME.tiemark-partial-HOST-PID-N.EXT`), which is then moved to `path` ([`Mode::Fresh`]:
/// only if no file is there by then; [`Mode::Replace`]: replacing the file there). On any
/// error the temporary file and anything `write` made named after it (a GeoPackage's
/// `-journal`) are removed, and `path` is as it was. Creates `path`'s parent folders.
pub(crate) fn write_file<E: From<Failure>>(
    path: &Path,
    mode: Mode,
    write: impl FnOnce(&Path) -> Result<(), E>,
) -> Result<(), E> {
    write_file_with(path, mode, write, &mut |from, to| std::fs::rename(from, to))
        .inspect(|()| COMPLETED.store(true, Ordering::SeqCst))
}

/// [`write_file`] with the rename done by `rename` (tests inject failures here).
fn write_file_with<E: From<Failure>>(
    path: &Path,
    mode: Mode,
    write: impl FnOnce(&Path) -> Result<(), E>,
    rename: Rename,
) -> Result<(), E> {
    let parent = parent_of(path);
    std::fs::create_dir_all(&parent).map_err(|e| Failure::new(&parent, e))?;
    clear_stale(&parent);
    let mut temp = partial_in(&parent, path).into_os_string();
    if let Some(ext) = path.extension() {
        temp.push(".");
        temp.push(ext);
    }
    let temp = PathBuf::from(temp);
    register(&temp);
    let result = (|| {
        write(&temp)?;
        let _moving = lock(&MOVING);
        let moved = match mode {
            Mode::Fresh => move_no_replace(&temp, path, rename),
            Mode::Replace => match std::fs::symlink_metadata(path) {
                Ok(m) if !m.is_file() => Err(io::Error::new(
                    io::ErrorKind::AlreadyExists,
                    "it is not a regular file",
                )),
                _ => rename(&temp, path),
            },
        };
        moved.map_err(|e| {
            let advice = "the file was left as it was: fix the cause and run again";
            if mode == Mode::Fresh && e.kind() == io::ErrorKind::AlreadyExists {
                Failure::new(
                    path,
                    io::Error::new(
                        io::ErrorKind::AlreadyExists,
                        "this file was made by another run (or program) while this run worked; \
                         nothing was written: choose another output file, or set --force to \
                         replace it",
                    ),
                )
                .into()
            } else {
                Failure::failed(
                    path,
                    &format!("moving the new file into place from {}", temp.display()),
                    e,
                    advice,
                )
                .into()
            }
        })
    })();
    remove_hidden(&temp);
    unregister(&temp);
    result
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::BTreeMap;

    /// `.NAME.tiemark-TAG-PID` in `target`'s parent.
    fn hidden_beside(target: &Path, tag: &str) -> PathBuf {
        hidden_in(&parent_of(target), target, tag)
    }

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

    type Put = fn(Staging, &Path, &[&str], Mode, Rename) -> Result<(), Failure>;

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
            let staging = Staging::for_target(&out).unwrap();
            for (n, c) in &new_files {
                std::fs::write(staging.path.join(n), c).unwrap();
            }
            let mut calls = 0;
            let fail = move |i: usize| i == k;
            let result = put(
                staging,
                &out,
                &NAMES,
                Mode::Replace,
                &mut injecting(&fail, &mut calls),
            );
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
        _mode: Mode,
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
        let staging = Staging::for_target(&out).unwrap();
        for n in NAMES {
            std::fs::write(staging.path.join(n), format!("new {n}")).unwrap();
        }
        // Renames 0-3 move the previous files aside, 4 moves the csv in, 5 (the gpkg) fails;
        // undo: 6 moves the csv back out, 7-10 move report, json, gpkg, csv back in; 7 fails.
        let fail = |i: usize| i == 5 || i == 7;
        let mut calls = 0;
        let e = put_in_place_with(
            staging,
            &out,
            &NAMES,
            Mode::Replace,
            &mut injecting(&fail, &mut calls),
        )
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
                    let staging = Staging::for_target(&out).unwrap();
                    for n in NAMES {
                        std::fs::write(staging.path.join(n), format!("new {n}")).unwrap();
                    }
                    let fail = |i: usize| i == k1 || i == k2;
                    let mut calls = 0;
                    let e = put_in_place_with(
                        staging,
                        &out,
                        &NAMES,
                        Mode::Replace,
                        &mut injecting(&fail, &mut calls),
                    )
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
        let staging = Staging::for_target(&out).unwrap();
        std::fs::write(staging.path.join("report.txt"), "new").unwrap();
        let e = put_in_place(staging, &out, &NAMES, Mode::Replace).unwrap_err();
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
        let staging = Staging::for_target(&out).unwrap();
        std::fs::write(staging.path.join("report.txt"), "new").unwrap();
        let e = put_in_place(staging, &out, &NAMES, Mode::Replace).unwrap_err();
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
        let files: [(&str, &[u8]); 2] = [("a.csv", b"new a"), ("b.md", b"new b")];
        // Unless a front end checked the folder with --force, a folder with files is refused.
        let e = write_set(&out, &files).unwrap_err();
        assert!(
            e.source.to_string().contains("put a.csv in this folder"),
            "{e:?}"
        );
        claim(&out, Mode::Replace);
        let paths = write_set(&out, &files).unwrap();
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
        write_file(&f, Mode::Replace, |tmp| -> Result<(), EmitError> {
            seen = tmp.extension().map(|e| e.to_owned());
            std::fs::write(tmp, "new").map_err(|e| Failure::new(tmp, e).into())
        })
        .unwrap();
        assert_eq!(seen.as_deref(), Some(std::ffi::OsStr::new("gpkg")));
        assert_eq!(snapshot(root.path()).len(), 1);
        assert_eq!(std::fs::read_to_string(&f).unwrap(), "new");

        // The writer fails after making the file and a sidecar: both removed, file unchanged.
        let (root, f) = one_previous_file();
        let e = write_file(&f, Mode::Replace, |tmp| -> Result<(), EmitError> {
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
            Mode::Replace,
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

    /// A staging folder for `out` holding the four files with `tag` in their contents.
    fn staged(out: &Path, tag: &str) -> Staging {
        let staging = Staging::for_target(out).unwrap();
        for n in NAMES {
            std::fs::write(staging.path.join(n), format!("{tag} {n}")).unwrap();
        }
        staging
    }

    #[test]
    fn a_new_folder_is_claimed_by_one_run_only() {
        // Two runs that both found `out` new: the first to finish makes it; the second is
        // refused with a message saying another run made it, and the first's files stay.
        for second in [Mode::Fresh, Mode::Replace] {
            let root = tempfile::tempdir().unwrap();
            let out = root.path().join("out");
            let (a, b) = (staged(&out, "a"), staged(&out, "b"));
            assert_ne!(a.path, b.path, "two stagings under one name");
            put_in_place(a, &out, &NAMES, Mode::Fresh).unwrap();
            let e = put_in_place_with(b, &out, &NAMES, second, &mut |from, to| {
                // What the old logic did: find the folder there and fill it.
                std::fs::rename(from, to)
            });
            if second == Mode::Fresh {
                let e = e.unwrap_err();
                let message = e.source.to_string();
                assert!(message.contains("another run"), "{message}");
                assert_eq!(e.path, out);
            } else {
                // --force given: replacing tiemark's files is what was asked for.
                e.unwrap();
            }
            let want = if second == Mode::Fresh { "a" } else { "b" };
            for n in NAMES {
                assert_eq!(
                    std::fs::read_to_string(out.join(n)).unwrap(),
                    format!("{want} {n}")
                );
            }
            assert_eq!(snapshot(root.path()).len(), NAMES.len(), "leftovers");
        }
    }

    #[test]
    fn the_rename_of_a_new_folder_is_the_exclusive_step() {
        // The folder appears between the check and the rename (another run's rename): the
        // rename itself fails and says so.
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("out");
        let b = staged(&out, "b");
        let mut first = true;
        let e = put_in_place_with(b, &out, &NAMES, Mode::Fresh, &mut |from, to| {
            if std::mem::take(&mut first) {
                std::fs::create_dir(to).unwrap();
                std::fs::write(to.join("report.txt"), "a's report").unwrap();
            }
            std::fs::rename(from, to)
        })
        .unwrap_err();
        assert!(e.source.to_string().contains("another run"), "{e:?}");
        assert_eq!(
            std::fs::read_to_string(out.join("report.txt")).unwrap(),
            "a's report"
        );
        assert_eq!(snapshot(root.path()).len(), 1, "leftovers");
    }

    #[test]
    fn an_empty_folder_is_filled_without_replacing_anything() {
        #[cfg(unix)]
        use std::os::unix::fs::MetadataExt;
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("out");
        std::fs::create_dir(&out).unwrap();
        let ino = std::fs::metadata(&out).unwrap().ino();
        put_in_place(staged(&out, "a"), &out, &NAMES, Mode::Fresh).unwrap();
        // The user's folder itself stays (same inode), now with the four files.
        assert_eq!(std::fs::metadata(&out).unwrap().ino(), ino);
        assert_eq!(snapshot(root.path()).len(), NAMES.len());
        // A second run that found it empty too is refused; nothing of it stays.
        let e = put_in_place(staged(&out, "b"), &out, &NAMES, Mode::Fresh).unwrap_err();
        assert!(e.source.to_string().contains("another run"), "{e:?}");
        for n in NAMES {
            assert_eq!(
                std::fs::read_to_string(out.join(n)).unwrap(),
                format!("a {n}")
            );
        }
        assert_eq!(snapshot(root.path()).len(), NAMES.len(), "leftovers");
    }

    #[test]
    fn a_file_that_appears_while_moving_in_is_not_replaced() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("out");
        std::fs::create_dir(&out).unwrap();
        let staging = staged(&out, "b");
        // Between the emptiness check and the moves, another run puts its transform in.
        std::fs::write(staging.path.join("x"), "").unwrap();
        let from = staging.path.join("transform.json");
        let e = move_no_replace(&from, &out.join("report.txt"), &mut |f, t| {
            std::fs::rename(f, t)
        });
        assert!(e.is_ok());
        std::fs::write(out.join("transform.json"), "a's").unwrap();
        let e = move_no_replace(
            &staging.path.join("control-points.csv"),
            &out.join("transform.json"),
            &mut |f, t| std::fs::rename(f, t),
        )
        .unwrap_err();
        assert_eq!(e.kind(), io::ErrorKind::AlreadyExists);
        assert_eq!(
            std::fs::read_to_string(out.join("transform.json")).unwrap(),
            "a's"
        );
        assert!(
            staging.path.join("control-points.csv").exists(),
            "source lost"
        );
        // And put_in_place undoes its moves when one is refused that way.
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("out");
        std::fs::create_dir(&out).unwrap();
        let staging = staged(&out, "b");
        let mut k = 0;
        let e = fill_empty(&staging, &out, &NAMES, &mut |f, t| {
            k += 1;
            std::fs::rename(f, t)
        });
        assert!(e.is_ok() && k == 0, "hard links move without renames");
        drop(staging);
        let before = snapshot(root.path());
        let staging = staged(&out, "c");
        std::fs::remove_file(out.join("report.txt")).unwrap();
        let e = fill_empty(&staging, &out, &NAMES, &mut |f, t| std::fs::rename(f, t)).unwrap_err();
        assert!(e.source.to_string().contains("another run"), "{e:?}");
        drop(staging);
        let mut after = snapshot(root.path());
        after.insert(
            Path::new("out").join("report.txt"),
            b"b report.txt".to_vec(),
        );
        assert_eq!(after, before);
    }

    #[test]
    fn a_mount_point_is_staged_inside_so_no_rename_crosses_devices() {
        // `out` exists on device 2, its parent on device 1 (injected): the staging, backup
        // and discard folders go inside `out`. The rename seam fails as the system does
        // (EXDEV) when a rename would cross the injected devices.
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("out");
        std::fs::create_dir(&out).unwrap();
        for n in NAMES {
            std::fs::write(out.join(n), format!("previous {n}")).unwrap();
        }
        let on = |p: &Path| if p.starts_with(&out) { 2 } else { 1 };
        let device = |p: &Path| p.is_dir().then(|| on(p));
        let mut crossing = |from: &Path, to: &Path| {
            if on(from) != on(to) {
                Err(io::Error::from_raw_os_error(18))
            } else {
                std::fs::rename(from, to)
            }
        };
        for (injected, inside) in [(&device as Device, true), (&|_: &Path| Some(1), false)] {
            let staging = Staging::for_target_with(&out, injected).unwrap();
            assert_eq!(staging.path.starts_with(&out), inside);
            for n in NAMES {
                std::fs::write(staging.path.join(n), format!("new {n}")).unwrap();
            }
            let result = put_in_place_with(staging, &out, &NAMES, Mode::Replace, &mut crossing);
            let want = if inside {
                result.unwrap();
                "new"
            } else {
                // Staged beside: the first move crosses devices and everything is undone.
                let e = result.unwrap_err();
                assert!(e.source.to_string().contains("os error 18"), "{e:?}");
                "previous"
            };
            let got = snapshot(root.path());
            let expect: BTreeMap<PathBuf, Vec<u8>> = NAMES
                .iter()
                .map(|n| (Path::new("out").join(n), format!("{want} {n}").into_bytes()))
                .collect();
            assert_eq!(got, expect);
            for n in NAMES {
                std::fs::write(out.join(n), format!("previous {n}")).unwrap();
            }
        }
        // A new folder, or one on its parent's device, is staged beside.
        assert_eq!(home_of(&root.path().join("new"), &device), root.path());
        assert_eq!(home_of(&out, &|_: &Path| Some(7)), root.path());
    }

    /// The id of a process that has ended.
    fn dead_pid() -> u32 {
        let mut child = std::process::Command::new("true").spawn().unwrap();
        let pid = child.id();
        child.wait().unwrap();
        pid
    }

    #[test]
    fn stale_staging_of_dead_runs_is_cleared_and_nothing_else() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("out");
        let dead = dead_pid();
        let h = host();
        let stale_dir = root
            .path()
            .join(format!(".out.tiemark-partial-{h}-{dead}-0"));
        let stale_file = root
            .path()
            .join(format!(".f.gpkg.tiemark-partial-{h}-{dead}-3.gpkg"));
        let journal = root
            .path()
            .join(format!(".f.gpkg.tiemark-partial-{h}-{dead}-3.gpkg-journal"));
        std::fs::create_dir(&stale_dir).unwrap();
        std::fs::write(stale_dir.join("control-points.gpkg"), "half").unwrap();
        std::fs::write(&stale_file, "half").unwrap();
        std::fs::write(&journal, "j").unwrap();
        // Kept: a live process's (pid 1), another machine's, a backup, the user's files.
        let kept = [
            format!(".out.tiemark-partial-{h}-1-0"),
            format!(".out.tiemark-partial-otherhost-{dead}-0"),
            format!(".out.tiemark-backup-{dead}"),
            "notes.txt".to_string(),
        ];
        for k in &kept {
            std::fs::write(root.path().join(k), "keep").unwrap();
        }
        let staging = Staging::for_target(&out).unwrap();
        drop(staging);
        let left: Vec<String> = snapshot(root.path())
            .keys()
            .map(|k| k.to_string_lossy().into_owned())
            .collect();
        let mut want: Vec<String> = kept.to_vec();
        want.sort();
        assert_eq!(left, want);
    }

    #[test]
    fn a_full_disk_says_so_and_leaves_nothing() {
        // ENOSPC and EDQUOT (28 and 122 on Linux) while writing a file, and while renaming.
        for errno in [28, 122] {
            let root = tempfile::tempdir().unwrap();
            let out = root.path().join("out");
            let mut k = 0;
            let e = write_set_with(
                &out,
                &[("a.csv", b"a"), ("b.md", b"b")],
                Mode::Fresh,
                &mut |p, c| {
                    k += 1;
                    if k == 2 {
                        Err(io::Error::from_raw_os_error(errno))
                    } else {
                        std::fs::write(p, c)
                    }
                },
            )
            .unwrap_err();
            let e = EmitError::from(e);
            assert!(matches!(e, EmitError::DiskFull { .. }), "{e:?}");
            let message = e.to_string();
            assert!(message.contains("disk full"), "{message}");
            assert!(message.contains("free space"), "{message}");
            assert!(snapshot(root.path()).is_empty(), "leftovers");

            let staging = staged(&out, "new");
            let e = put_in_place_with(staging, &out, &NAMES, Mode::Fresh, &mut |_, _| {
                Err(io::Error::from_raw_os_error(errno))
            })
            .unwrap_err();
            let e = EmitError::from(e);
            assert!(matches!(e, EmitError::DiskFull { .. }), "{e:?}");
            assert!(snapshot(root.path()).is_empty(), "leftovers");
        }
        // SQLite's words, as GDAL passes them on for a GeoPackage.
        assert!(disk_full_text(
            "sqlite3_step() failed: database or disk is full"
        ));
        assert!(!disk_full_text("sqlite3_step() failed: constraint failed"));
    }
}
