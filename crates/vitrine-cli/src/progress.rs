//! The build's progress on the terminal: a bar per long step (rate and time left), a line per note.

use indicatif::{ProgressBar, ProgressStyle};
use vitrine_build::progress::{Bar, Progress};

/// Bars and notes on standard error; nothing at all when `quiet`.
pub struct Terminal {
    pub quiet: bool,
}

struct TerminalBar(ProgressBar);

impl Bar for TerminalBar {
    fn set(&self, position: u64, length: u64) {
        self.0.set_length(length);
        self.0.set_position(position);
    }
    fn rename(&self, what: &str) {
        self.0.set_prefix(what.to_string());
    }
}

impl Drop for TerminalBar {
    fn drop(&mut self) {
        self.0.finish_and_clear();
    }
}

impl Progress for Terminal {
    fn bar(&self, what: &str, length: u64) -> Box<dyn Bar + '_> {
        let pb = if self.quiet {
            ProgressBar::hidden()
        } else {
            ProgressBar::new(length)
        };
        pb.set_style(
            ProgressStyle::with_template("{prefix:>12} [{bar:30}] {pos}/{len} {per_sec} eta {eta}")
                .expect("the template is valid")
                .progress_chars("=> "),
        );
        pb.set_prefix(what.to_string());
        Box::new(TerminalBar(pb))
    }
    fn note(&self, line: &str) {
        if !self.quiet {
            eprintln!("{line}");
        }
    }
}
