//! Simulator runs: the one stage that meets the outside world.
//!
//! Input: the study, the design and the campaign folder.
//! Output: one folder per point and experiment, each with `run.yaml` ([`RunBody`]),
//! the rendered files, the simulator's stdout/stderr and its output file.
//! Output parsing ([`parse`]) is a pure function over strings.
//! Main types: [`RunBody`], [`RunState`], [`RunSet`].

mod local;
mod lock;
pub mod parse;
mod store;

pub use local::{
    fingerprint, run_all, run_key, value_names, RunOptions, RunSummary, RunsError, SUPERSEDED_DIR,
};
pub use lock::{acquire as lock_campaign, CampaignLock, LockError};
pub use store::{
    load_runs, run_dir, run_record_path, same_point, status_counts, Attempt, ExperimentRuns,
    Fingerprint, RunBody, RunSet, RunState, StateCounts,
};
