//! Judging a task that ended: from the result file it left in its run folder, or, when
//! it left none, from what `scontrol` still knows of it. Writes no file.

use super::commands::job_end;
use super::script::{TASK_RESULT, TASK_STARTED};
use super::submit::Flight;
use crate::runs::outcome::{exit_failure, read_output, Ended, Outcome};
use crate::study::Study;
use chrono::{SecondsFormat, Utc};
use serde::Deserialize;
use std::path::Path;
use std::time::{Duration, Instant};

/// A task that left the queue normally gets this long for its result file to become
/// visible (shared file systems cache directory listings), then counts as lost.
const RESULT_GRACE: Duration = Duration::from_secs(60);
/// Exit code of coreutils `timeout` when the command timed out.
const TIMEOUT_EXIT: i32 = 124;

/// What an array task leaves in its run folder.
#[derive(Debug, Clone, PartialEq, Deserialize)]
pub struct TaskResult {
    pub job: String,
    pub task: u32,
    pub host: String,
    pub started_epoch_s: f64,
    pub ended_epoch_s: f64,
    pub exit_code: i32,
    /// sha256 of the output file as the node saw it; empty when there was none.
    #[serde(default)]
    pub output_sha256: String,
}

/// States of a task that ended without finishing its run, whatever the result file.
const ABNORMAL: [&str; 8] = [
    "CANCELLED",
    "TIMEOUT",
    "NODE_FAIL",
    "PREEMPTED",
    "BOOT_FAIL",
    "DEADLINE",
    "OUT_OF_MEMORY",
    "REVOKED",
];

fn utc_of_epoch(s: f64) -> String {
    chrono::DateTime::<Utc>::from_timestamp_millis((s * 1000.0) as i64)
        .map(|t| t.to_rfc3339_opts(SecondsFormat::Millis, true))
        .unwrap_or_default()
}

/// Judge an ended task from its result file.
pub(super) fn judge(study: &Study, f: &Flight<'_>, r: &TaskResult) -> (Outcome, Ended) {
    let elapsed = (r.ended_epoch_s - r.started_epoch_s).max(0.0);
    let ended = Ended {
        started_utc: utc_of_epoch(r.started_epoch_s),
        elapsed_s: elapsed,
        exit_code: Some(r.exit_code),
    };
    let timeout = study.simulator.timeout_s;
    let outcome = if r.exit_code == TIMEOUT_EXIT && elapsed >= timeout * 0.99 {
        Outcome::Failed(format!(
            "timed out after {timeout} s (simulator.timeout_s) in Slurm task {} on {}; killed",
            r.job, r.host
        ))
    } else if r.exit_code != 0 {
        Outcome::Failed(exit_failure(
            format!(
                "exit code {} (Slurm task {} on {})",
                r.exit_code, r.job, r.host
            ),
            &f.dir,
        ))
    } else {
        match read_output(study, f.experiment, &f.dir) {
            Outcome::Done(_, sha) if !r.output_sha256.is_empty() && sha != r.output_sha256 => {
                Outcome::Failed(format!(
                    "the output file changed after the task ended (sha256 on the node {}, here {sha})",
                    r.output_sha256
                ))
            }
            other => other,
        }
    };
    (outcome, ended)
}

/// The result the task left in its run folder `dir`, if any (complete: it is written
/// by rename).
pub(super) fn read_result(dir: &Path) -> Option<TaskResult> {
    let text = std::fs::read_to_string(dir.join(TASK_RESULT)).ok()?;
    serde_yaml::from_str(&text).ok()
}

/// A task is no longer in the queue and left no result: ask Slurm how it ended. A
/// cancelled, timed-out, preempted or failed-node task fails at once; one that ended
/// normally gets [`RESULT_GRACE`] for its result file to appear.
pub(super) fn vanished(f: &mut Flight<'_>) -> Option<(Outcome, Ended)> {
    let job = f.job().to_string();
    let end = job_end(&job);
    let started = read_started(&f.dir);
    // Fail at once when Slurm says the task ended abnormally, or when it never started
    // and Slurm has no record of it (a waiting array task removed by `scancel` leaves
    // none). A task that started and ended normally may have a result on its way.
    let at_once = match &end {
        Some(e) => ABNORMAL.iter().any(|a| e.state.starts_with(a)),
        None => started.is_none(),
    };
    let since = *f.missing_since.get_or_insert_with(Instant::now);
    if !at_once && since.elapsed() < RESULT_GRACE {
        return None;
    }
    let submitted = f
        .body
        .slurm
        .as_ref()
        .map(|s| s.submitted_utc.clone())
        .unwrap_or_default();
    let reason = match (end, &started) {
        (Some(e), _) => format!(
            "Slurm task {job} ended as {} (reason {}, exit code {}) without finishing the run",
            e.state, e.reason, e.exit_code
        ),
        (None, None) => format!(
            "Slurm task {job} left the queue before it started and Slurm keeps no record of it: it was cancelled (scancel) or removed"
        ),
        (None, Some(_)) => format!(
            "Slurm task {job} started but left no result within {} s of leaving the queue, and Slurm no longer knows it (node failure, or the task was killed)",
            RESULT_GRACE.as_secs()
        ),
    };
    Some((
        Outcome::Failed(reason),
        Ended {
            started_utc: started.unwrap_or(submitted),
            elapsed_s: 0.0,
            exit_code: None,
        },
    ))
}

fn read_started(dir: &Path) -> Option<String> {
    #[derive(Deserialize)]
    struct Started {
        started_epoch_s: f64,
    }
    let text = std::fs::read_to_string(dir.join(TASK_STARTED)).ok()?;
    let s: Started = serde_yaml::from_str(&text).ok()?;
    Some(utc_of_epoch(s.started_epoch_s))
}
