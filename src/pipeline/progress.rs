//! Progress bars on stderr (indicatif). Hidden when `quiet`, and by indicatif itself when
//! stderr is not a terminal. Bars are advanced in chunks: an increment costs tens of
//! nanoseconds even when hidden.

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// Makes the bars of one run.
pub struct Progress {
    quiet: bool,
}

impl Progress {
    /// A progress reporter; `quiet` hides everything.
    pub fn new(quiet: bool) -> Self {
        Progress { quiet }
    }

    /// A bar of `len` steps for one stage.
    pub fn bar(&self, len: u64, stage: &str) -> ProgressBar {
        let target = if self.quiet {
            ProgressDrawTarget::hidden()
        } else {
            ProgressDrawTarget::stderr()
        };
        let bar = ProgressBar::with_draw_target(Some(len), target);
        bar.set_style(
            ProgressStyle::with_template("{msg:32} [{bar:30}] {pos}/{len} ({elapsed})")
                .expect("static template")
                .progress_chars("=> "),
        );
        bar.set_message(stage.to_string());
        bar
    }

    /// A spinner for a stage of unknown length.
    pub fn spinner(&self, stage: &str) -> ProgressBar {
        let target = if self.quiet {
            ProgressDrawTarget::hidden()
        } else {
            ProgressDrawTarget::stderr()
        };
        let bar = ProgressBar::with_draw_target(None, target);
        bar.set_style(
            ProgressStyle::with_template("{spinner} {msg} ({elapsed})").expect("static template"),
        );
        bar.set_message(stage.to_string());
        bar.enable_steady_tick(std::time::Duration::from_millis(120));
        bar
    }
}
