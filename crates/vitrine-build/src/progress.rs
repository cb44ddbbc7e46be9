//! How a build shows its progress: the library reports through this seam, the command line draws
//! bars and lines, tests stay silent.

/// Receives a build's progress.
pub trait Progress: Sync {
    /// A long step begins, `length` units long as far as is known; it ends when the bar is dropped.
    fn bar(&self, what: &str, length: u64) -> Box<dyn Bar + '_>;
    /// A line for the person watching (what was read, what was chosen, what was measured).
    fn note(&self, line: &str);
}

/// One long step under way.
pub trait Bar: Sync {
    /// `position` of `length` done (the length may grow as the step learns more).
    fn set(&self, position: u64, length: u64);
    /// The step's part under way changed its name (NN-descent's trees, then its rounds).
    fn rename(&self, what: &str);
}

/// Shows nothing.
pub struct Silent;

struct NoBar;

impl Bar for NoBar {
    fn set(&self, _: u64, _: u64) {}
    fn rename(&self, _: &str) {}
}

impl Progress for Silent {
    fn bar(&self, _: &str, _: u64) -> Box<dyn Bar + '_> {
        Box::new(NoBar)
    }
    fn note(&self, _: &str) {}
}
