//! Simulator runs: the one stage that meets the outside world.
//!
//! Input: the study, the design and the campaign folder.
//! Output: one folder per point and experiment, each with `run.yaml` ([`RunBody`]),
//! the rendered files, the simulator's stdout/stderr and its output file.
//! Output parsing ([`parse`]) is a pure function over strings.
//! Main types: [`RunBody`], [`RunState`], [`RunSet`].

mod identity;
mod local;
mod lock;
mod outcome;
pub mod parse;
mod plan;
mod prepare;
pub mod slurm;
mod store;

pub use identity::{fingerprint, run_key, value_names};
pub use lock::{acquire as lock_campaign, CampaignLock, LockError};
pub use plan::{RunSummary, RunsError, SUPERSEDED_DIR};
pub use store::{
    load_runs, run_dir, run_record_path, same_point, status_counts, Attempt, ExperimentRuns,
    Fingerprint, RunBody, RunSet, RunState, SlurmTask, StateCounts,
};

use crate::design::Design;
use crate::progress::Observer;
use crate::study::{Backend, Study};
use anyhow::Result;
use std::path::Path;
use std::sync::atomic::AtomicBool;

/// Options of one `run` invocation.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct RunOptions {
    /// Concurrent runs (local backend).
    pub jobs: usize,
    /// Run everything again, done runs included (after the simulator changed on purpose).
    pub rerun: bool,
    /// Where the runs execute.
    pub backend: Backend,
    /// Slurm: submit and return at once instead of waiting for the runs.
    pub detach: bool,
}

/// Run every pending or failed run of the design on the chosen backend.
///
/// The caller holds the campaign lock ([`lock_campaign`]).
///
/// # Errors
/// [`RunsError`] when done runs were made with another simulator definition (unless
/// `rerun`) or runs in Slurm block a local run; a Slurm command that fails; problems
/// with the campaign folder. A failing simulator is recorded in its `run.yaml` and
/// counted in [`RunSummary::failed`].
pub fn run_all(
    study: &Study,
    design: &Design,
    campaign: &Path,
    options: RunOptions,
    command_line: &[String],
    stop: &AtomicBool,
    observer: &dyn Observer,
) -> Result<RunSummary> {
    let plan = plan::plan(study, design, campaign, options.rerun)?;
    match options.backend {
        Backend::Local => local::run_local(
            study,
            plan,
            campaign,
            options.jobs,
            command_line,
            stop,
            observer,
        ),
        Backend::Slurm => slurm::run_slurm(
            study,
            plan,
            campaign,
            options.detach,
            command_line,
            stop,
            observer,
        ),
    }
}
