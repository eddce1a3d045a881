//! Progress reporting from the library: a small trait the stages call, so that the library
//! never draws anything itself.
//!
//! **In:** calls from the stages: a stage begins (with its length when known), advances,
//! changes its message, ends. **Out:** whatever the implementation does with them: the
//! binary draws progress bars on stderr, the stage benchmark records when each stage begins
//! and ends, [`Silent`] ignores them.
//!
//! Stages report in chunks (every few thousand items at most), so an implementation may take a
//! lock or draw on each call.

/// Receives the progress of one run. Stages run one after another: every [`Progress::begin`]
/// is followed by its [`Progress::end`] before the next begins.
pub trait Progress {
    /// A stage begins; `total` is its number of steps when known (a bar), `None` for a stage of
    /// unknown length (a spinner).
    fn begin(&self, stage: &str, total: Option<u64>);
    /// The current stage has done `done` of its steps.
    fn advance(&self, done: u64);
    /// The current stage is now doing `message` (a step within it).
    fn message(&self, message: &str);
    /// The current stage ended.
    fn end(&self);
}

/// Ignores all progress.
#[derive(Debug, Clone, Copy, Default)]
pub struct Silent;

impl Progress for Silent {
    fn begin(&self, _stage: &str, _total: Option<u64>) {}
    fn advance(&self, _done: u64) {}
    fn message(&self, _message: &str) {}
    fn end(&self) {}
}

/// Runs `work` as one stage of `progress`: begins it, hands `work` a callback that advances
/// it, and ends it however `work` returns.
pub fn stage<T>(
    progress: &dyn Progress,
    name: &str,
    total: Option<u64>,
    work: impl FnOnce(&mut dyn FnMut(usize)) -> T,
) -> T {
    progress.begin(name, total);
    let out = work(&mut |n| progress.advance(n as u64));
    progress.end();
    out
}
