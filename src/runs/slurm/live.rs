//! What Slurm says now about a campaign's submitted runs, for `assay status`:
//! read-only, nothing is collected or written.

use super::commands::queue_states;
use super::script::TASK_RESULT;
use crate::runs::store::{run_dir, RunBody, RunState};
use std::collections::BTreeMap;
use std::path::Path;

/// What Slurm says now about the submitted runs of a campaign (read-only: nothing is
/// collected or written).
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Live {
    /// Array job ids with runs in flight.
    pub jobs: Vec<String>,
    /// Tasks waiting in the queue.
    pub pending: usize,
    /// Tasks running (or completing).
    pub running: usize,
    /// Tasks that ended and left a result that `assay run` has not collected yet.
    pub ended: usize,
    /// Tasks gone from the queue without a result (lost, or cancelled).
    pub gone: usize,
    /// Why queued tasks wait, as `squeue` says (`Priority`, `Resources`...), with counts.
    pub reasons: BTreeMap<String, usize>,
    /// Set when `squeue` could not be asked.
    pub error: Option<String>,
}

/// Ask Slurm about the runs that records show as submitted and not collected.
pub fn live(campaign: &Path, runs: &[RunBody]) -> Option<Live> {
    let flying: Vec<&RunBody> = runs
        .iter()
        .filter(|b| b.slurm.is_some() && matches!(b.state, RunState::Queued | RunState::Running))
        .collect();
    if flying.is_empty() {
        return None;
    }
    let mut l = Live::default();
    let tasks: Vec<String> = flying
        .iter()
        .filter_map(|b| b.slurm.as_ref().map(|s| s.job.clone()))
        .collect();
    l.jobs = flying
        .iter()
        .filter_map(|b| b.slurm.as_ref().map(|s| s.array_job_id.clone()))
        .collect::<std::collections::BTreeSet<_>>()
        .into_iter()
        .collect();
    let queue = match queue_states(&tasks) {
        Ok(q) => q,
        Err(e) => {
            l.error = Some(format!("{e:#}"));
            BTreeMap::new()
        }
    };
    for b in flying {
        let dir = run_dir(campaign, &b.point, &b.experiment);
        let job = b.slurm.as_ref().map(|s| s.job.as_str()).unwrap_or("");
        if dir.join(TASK_RESULT).exists() {
            l.ended += 1;
        } else if let Some((state, reason)) = queue.get(job) {
            if state == "PENDING" {
                l.pending += 1;
                *l.reasons.entry(reason.clone()).or_default() += 1;
            } else {
                l.running += 1;
            }
        } else if l.error.is_none() {
            l.gone += 1;
        }
    }
    Some(l)
}
