//! Progress bars on stderr (indicatif): the binary's implementation of the library's
//! [`Progress`]. Hidden when `quiet`, and by indicatif itself when stderr is not a terminal.

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::cell::RefCell;
use tiemark::progress::Progress;

/// Draws one bar (or spinner) per stage.
pub struct Bars {
    quiet: bool,
    current: RefCell<Option<ProgressBar>>,
}

impl Bars {
    /// Bars on stderr; `quiet` hides everything.
    pub fn new(quiet: bool) -> Bars {
        Bars {
            quiet,
            current: RefCell::new(None),
        }
    }

    fn target(&self) -> ProgressDrawTarget {
        if self.quiet {
            ProgressDrawTarget::hidden()
        } else {
            ProgressDrawTarget::stderr()
        }
    }
}

impl Progress for Bars {
    fn begin(&self, stage: &str, total: Option<u64>) {
        let bar = ProgressBar::with_draw_target(total, self.target());
        match total {
            Some(_) => bar.set_style(
                ProgressStyle::with_template("{msg:32} [{bar:30}] {pos}/{len} ({elapsed})")
                    .expect("static template")
                    .progress_chars("=> "),
            ),
            None => {
                bar.set_style(
                    ProgressStyle::with_template("{spinner} {msg} ({elapsed})")
                        .expect("static template"),
                );
                bar.enable_steady_tick(std::time::Duration::from_millis(120));
            }
        }
        bar.set_message(stage.to_string());
        if let Some(old) = self.current.replace(Some(bar)) {
            old.finish_and_clear();
        }
    }

    fn advance(&self, done: u64) {
        if let Some(bar) = self.current.borrow().as_ref() {
            bar.set_position(done);
        }
    }

    fn message(&self, message: &str) {
        if let Some(bar) = self.current.borrow().as_ref() {
            bar.set_message(message.to_string());
        }
    }

    fn end(&self) {
        if let Some(bar) = self.current.take() {
            bar.finish_and_clear();
        }
    }
}
