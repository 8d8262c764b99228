//! What the steps of one command share: the stop flag, the progress observer, and where
//! they say what they did (the CLI prints it; tests can record it).

use crate::calibrate::PosteriorBody;
use crate::check::refine::{ConfirmationError, RefinementBody};
use crate::check::ChecksBody;
use crate::progress::Observer;
use crate::runs::RunSummary;
use crate::study::Study;
use crate::surrogate::FittedSurrogate;
use std::collections::BTreeMap;
use std::path::Path;
use std::sync::atomic::{AtomicBool, Ordering};

/// What a step did, for the user: each variant is one block of the CLI's output.
#[derive(Debug)]
#[non_exhaustive]
pub enum Event<'a> {
    /// The design on disk was made with other settings (why) and is made anew.
    DesignStale(&'a [String]),
    /// The design after the design step: its size and what happened to it.
    Design { n_points: usize, verb: &'a str },
    /// The runs finished by the run step.
    Runs {
        summary: &'a RunSummary,
        study: &'a Study,
    },
    /// A surrogate was fitted: its validation, the design points left out per
    /// experiment, and warnings about its principal-component basis.
    Fitted {
        surrogate: &'a FittedSurrogate,
        excluded: &'a BTreeMap<String, usize>,
        basis_warnings: &'a [String],
    },
    /// A stage whose record is up to date was reused (`surrogate`, `posterior`).
    UpToDate(&'a str),
    /// The posterior as recorded in `path`.
    Posterior {
        body: &'a PosteriorBody,
        study: &'a Study,
        path: &'a Path,
    },
    /// Predictive checks (and confirmation runs) as recorded in `path`.
    Checks {
        body: &'a ChecksBody,
        path: &'a Path,
    },
    /// A refinement begins: its plan.
    RefinePlan {
        rounds: usize,
        add: usize,
        n_near: usize,
        n_global: usize,
        tolerance: f64,
    },
    /// The surrogate's confirmation error per experiment, labelled (`start`, `before`,
    /// `after`).
    Confirmation {
        label: &'a str,
        errors: &'a [ConfirmationError],
    },
    /// A refinement round added points.
    RoundAdded {
        round: usize,
        n_near: usize,
        n_global: usize,
    },
    /// The last confirmation runs join the training data.
    FoldingIn,
    /// The refinement refined an up-to-date design already.
    RefinementDone,
    /// The refinement ended: its record, tolerance and the last confirmation errors.
    RefineEnded {
        body: &'a RefinementBody,
        last: &'a [ConfirmationError],
    },
}

/// Where the steps say what they did.
pub trait Events {
    fn event(&self, e: Event<'_>);
}

/// Events nobody listens to.
pub struct Quiet;

impl Events for Quiet {
    fn event(&self, _: Event<'_>) {}
}

/// What the steps of one command share.
pub struct Session<'a> {
    /// Set by Ctrl-C: steps that honour it stop at the next safe point.
    pub stop: &'a AtomicBool,
    /// True while such a step runs; elsewhere Ctrl-C may end the process at once
    /// (records are written atomically, so nothing half-written remains).
    pub interruptible: &'a AtomicBool,
    pub observer: &'a dyn Observer,
    pub events: &'a dyn Events,
}

impl Session<'_> {
    /// Run `f` with Ctrl-C handled by stopping cleanly instead of exiting.
    pub fn interruptible<T>(&self, f: impl FnOnce() -> T) -> T {
        self.interruptible.store(true, Ordering::SeqCst);
        let r = f();
        self.interruptible.store(false, Ordering::SeqCst);
        r
    }

    /// Whether Ctrl-C asked to stop.
    pub fn stopped(&self) -> bool {
        self.stop.load(Ordering::SeqCst)
    }

    /// Say what a step did.
    pub fn say(&self, e: Event<'_>) {
        self.events.event(e);
    }
}
