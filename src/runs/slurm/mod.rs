//! The Slurm executor: pending runs go out as `sbatch --array` jobs; each array task
//! runs one run folder with a POSIX shell and leaves its own small result there
//! (`slurm-task.yaml`: exit code, times, host, output hash); assay polls `squeue`, reads
//! those results and judges every run with the same rules as the local executor.
//!
//! No accounting database is needed: a task that leaves the queue without a result is
//! looked up with `scontrol show job` (cancelled, timed out, node failure, preempted)
//! and becomes `failed` with that reason, then is retried per `simulator.retries`.
//! assay itself is not needed on the compute nodes, only the simulator, `sh` and the
//! coreutils `timeout`, `date` and `sha256sum`, on a file system shared with the
//! submitting host.

mod collect;
mod commands;
mod live;
mod script;
mod submit;

pub use collect::TaskResult;
pub use commands::{
    max_array_size, parse_max_array_size, parse_scontrol_job, parse_squeue, JobEnd,
};
pub use live::{live, Live};
pub use script::{
    job_script, sh_quote, task_time, ScriptTask, SLURM_DIR, TASK_RESULT, TASK_STARTED,
};

use super::outcome::settle;
use super::plan::{Plan, RunSummary, Todo};
use super::prepare::{prepare, Prepared};
use super::store::{run_dir, RunState};
use crate::progress::Observer;
use crate::record::{write_record, Record};
use crate::study::Study;
use anyhow::Result;
use collect::{judge, read_result, vanished};
use commands::queue_states;
use std::collections::VecDeque;
use std::path::Path;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};
use submit::{snapshot, submit, Flight};

/// Default seconds between two looks at the queue.
pub const DEFAULT_POLL_S: f64 = 5.0;

/// Hand the plan's runs to Slurm and, unless `detach`, wait for them all.
///
/// Runs submitted by an earlier invocation (records `queued` or `running` with a
/// `slurm` entry) are collected, not submitted again.
pub(crate) fn run_slurm(
    study: &Study,
    plan: Plan<'_>,
    campaign: &Path,
    detach: bool,
    command_line: &[String],
    stop: &AtomicBool,
    observer: &dyn Observer,
) -> Result<RunSummary> {
    let Plan {
        fingerprints,
        todo,
        in_flight,
        skipped,
        inputs,
    } = plan;
    let mut summary = RunSummary {
        skipped,
        ..RunSummary::default()
    };
    let poll = Duration::from_secs_f64(study.slurm.poll_s.unwrap_or(DEFAULT_POLL_S));
    let max_attempts = 1 + study.simulator.retries;
    let mut flights: Vec<Flight<'_>> = in_flight
        .into_iter()
        .filter_map(|t: Todo<'_>| {
            let body = t.previous?;
            let dir = std::fs::canonicalize(run_dir(campaign, &t.point.id, &t.experiment.name))
                .unwrap_or_else(|_| run_dir(campaign, &t.point.id, &t.experiment.name));
            Some(Flight {
                experiment: t.experiment,
                point: t.point.clone(),
                body,
                dir,
                missing_since: None,
            })
        })
        .collect();
    let mut pending: VecDeque<Prepared> = VecDeque::new();
    for t in todo {
        pending.push_back(prepare(
            study,
            t.point,
            t.experiment,
            &fingerprints[t.experiment.name.as_str()],
            t.previous,
            campaign,
        )?);
    }
    let total = (flights.len() + pending.len()) as u64;
    observer.start("runs", total);
    let max_array = max_array_size().max(1);
    let mut running = 0usize;
    loop {
        // 1. Collect what ended.
        if !flights.is_empty() {
            let jobs: Vec<String> = flights.iter().map(|f| f.job().to_string()).collect();
            let queue = queue_states(&jobs)?;
            let mut still = Vec::new();
            running = 0;
            for mut f in std::mem::take(&mut flights) {
                let ended = if let Some(r) = read_result(&f.dir) {
                    Some(judge(study, &f, &r))
                } else if let Some((state, _)) = queue.get(f.job()) {
                    f.missing_since = None;
                    if state == "RUNNING" || state == "COMPLETING" {
                        running += 1;
                        if f.body.state == RunState::Queued {
                            f.body.state = RunState::Running;
                            write_record(
                                &f.record_path(),
                                &Record::new("run", snapshot(command_line), f.body.clone()),
                            )?;
                        }
                    }
                    None
                } else {
                    vanished(&mut f)
                };
                match ended {
                    None => still.push(f),
                    Some((outcome, ended)) => {
                        let label = f.label();
                        let record_path = f.record_path();
                        let state = settle(
                            study,
                            &mut f.body,
                            outcome,
                            ended,
                            &record_path,
                            command_line,
                            &inputs,
                        )?;
                        match state {
                            RunState::Done => {
                                summary.done += 1;
                                observer.advance(1, &format!("{label} done"));
                            }
                            _ if f.body.attempts < max_attempts => {
                                observer.note(&format!(
                                    "{label} failed ({}); submitting it again",
                                    f.body.reason.as_deref().unwrap_or("unknown")
                                ));
                                pending.push_back(prepare(
                                    study,
                                    &f.point,
                                    f.experiment,
                                    &fingerprints[f.experiment.name.as_str()],
                                    Some(f.body),
                                    campaign,
                                )?);
                            }
                            _ => {
                                summary.failed += 1;
                                observer.note(&format!(
                                    "{label} failed (see {})",
                                    f.record_path().display()
                                ));
                                observer.advance(1, &format!("{label} failed"));
                            }
                        }
                    }
                }
            }
            flights = still;
        }
        if stop.load(Ordering::SeqCst) {
            break;
        }
        // 2. Submit what is pending, in arrays no larger than the cluster allows.
        while !pending.is_empty() {
            let n = pending.len().min(max_array);
            let chunk: Vec<Prepared> = pending.drain(..n).collect();
            let submitted = submit(study, campaign, chunk, command_line)?;
            observer.note(&format!(
                "submitted {} runs as Slurm array job {}",
                submitted.len(),
                submitted
                    .first()
                    .and_then(|f| f.body.slurm.as_ref())
                    .map(|s| s.array_job_id.as_str())
                    .unwrap_or("?")
            ));
            flights.extend(submitted);
        }
        if detach || flights.is_empty() {
            break;
        }
        observer.advance(
            0,
            &format!(
                "{} done · {} failed · {} running · {} queued",
                summary.done,
                summary.failed,
                running,
                flights.len().saturating_sub(running)
            ),
        );
        let until = Instant::now() + poll;
        while Instant::now() < until && !stop.load(Ordering::SeqCst) {
            std::thread::sleep(Duration::from_millis(100).min(poll));
        }
    }
    observer.finish();
    summary.in_flight = flights.len();
    let mut jobs: Vec<String> = flights
        .iter()
        .filter_map(|f| f.body.slurm.as_ref().map(|s| s.array_job_id.clone()))
        .collect();
    jobs.sort();
    jobs.dedup();
    summary.jobs = jobs;
    summary.interrupted = pending.len();
    Ok(summary)
}
