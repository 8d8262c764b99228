//! Progress reporting without a terminal: the library calls an [`Observer`]; the CLI
//! implements it with indicatif, tests with a recorder.

/// Receives progress of long work. All methods have empty defaults.
pub trait Observer: Sync {
    /// A task of `total` steps begins.
    fn start(&self, _task: &str, _total: u64) {}
    /// `n` more steps are done; `message` says what just finished.
    fn advance(&self, _n: u64, _message: &str) {}
    /// A line worth showing above the bar (a failure, a warning).
    fn note(&self, _message: &str) {}
    /// The task ended.
    fn finish(&self) {}
}

/// An observer that ignores everything.
#[derive(Debug, Default, Clone, Copy)]
pub struct Silent;

impl Observer for Silent {}
