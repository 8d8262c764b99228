//! Simulator runs: the one stage that meets the outside world.
//!
//! Input: the study, the design and the campaign folder.
//! Output: one folder per point and experiment, each with `run.yaml` ([`RunBody`]),
//! the rendered files, the simulator's stdout/stderr and its output file.
//! Output parsing ([`parse`]) is a pure function over strings.
//! Main types: [`RunBody`], [`RunState`], [`RunSet`].

mod local;
pub mod parse;
mod store;

pub use local::{run_all, value_names, RunSummary};
pub use store::{
    load_runs, run_dir, run_record_path, status_counts, ExperimentRuns, RunBody, RunSet, RunState,
    StateCounts,
};
