//! The rules every executor shares: which runs to start, which are done, which are
//! still in Slurm, and whether the simulator changed under done runs; and the summary
//! every executor returns.

use super::identity::fingerprint;
use super::store::{run_dir, run_record_path, same_point, Fingerprint, RunBody, RunState};
use crate::design::{Design, DesignPoint};
use crate::record::{read_record, sha256_file, Record};
use crate::study::{Experiment, Study};
use anyhow::{Context, Result};
use std::collections::BTreeMap;
use std::path::Path;

/// What one `run` invocation did.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct RunSummary {
    /// Runs already done before this invocation (not repeated).
    pub skipped: usize,
    /// Runs that finished now.
    pub done: usize,
    /// Runs that failed now (after their retries).
    pub failed: usize,
    /// Runs stopped by an interruption (left pending, to run again later).
    pub interrupted: usize,
    /// Runs left in Slurm (after `--detach` or an interruption), to collect later.
    pub in_flight: usize,
    /// The Slurm array jobs of those runs.
    pub jobs: Vec<String>,
}

/// One run to start (or to collect), with its record from earlier invocations.
#[derive(Debug, Clone)]
pub(crate) struct Todo<'a> {
    pub point: &'a DesignPoint,
    pub experiment: &'a Experiment,
    pub previous: Option<RunBody>,
}

/// What one `run` invocation will do.
#[derive(Debug)]
pub(crate) struct Plan<'a> {
    pub fingerprints: BTreeMap<&'a str, Fingerprint>,
    /// Runs to start: pending, failed, left `running` by a dead local assay, or all with
    /// `rerun`.
    pub todo: Vec<Todo<'a>>,
    /// Runs submitted to Slurm and not yet collected (`queued`, or `running` in a task).
    pub in_flight: Vec<Todo<'a>>,
    /// Runs already done (not repeated).
    pub skipped: usize,
    /// sha256 of what every run reads: the study's files and the design.
    pub inputs: BTreeMap<String, String>,
}

/// Failures of the run stage that are not a simulator's failure.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum RunsError {
    #[error("the study's {} changed since {n_runs} runs were done (first: {example}); refusing to mix old and new runs. Undo the change, or run `assay run --rerun` to run everything again", .changed.join(", "))]
    SimulatorChanged {
        changed: Vec<String>,
        n_runs: usize,
        example: String,
    },
    #[error("{n_runs} runs are still in Slurm (jobs {}); collect them with `assay run --backend slurm`, or cancel them with `scancel {}` and run again", .jobs.join(", "), .jobs.join(" "))]
    InSlurm { n_runs: usize, jobs: Vec<String> },
}

/// Sort the design's runs into done, in flight and to start.
///
/// # Errors
/// [`RunsError::SimulatorChanged`] when done runs were made with another simulator
/// definition (unless `rerun`); an unreadable record or input file.
pub(crate) fn plan<'a>(
    study: &'a Study,
    design: &'a Design,
    campaign: &Path,
    rerun: bool,
) -> Result<Plan<'a>> {
    let fingerprints: BTreeMap<&str, Fingerprint> = study
        .experiments
        .iter()
        .map(|e| (e.name.as_str(), fingerprint(study, e)))
        .collect();
    let mut todo = Vec::new();
    let mut in_flight = Vec::new();
    let mut skipped = 0;
    let mut changed: Vec<String> = Vec::new();
    let mut n_changed = 0;
    let mut example = String::new();
    let names = study.design_variable_names();
    let mut superseded = Vec::new();
    for p in &design.points {
        for e in &study.experiments {
            let path = run_record_path(campaign, &p.id, &e.name);
            let previous = if path.exists() {
                let rec: Record<RunBody> = read_record(&path)?;
                let b = rec.body;
                let submitted =
                    b.slurm.is_some() && matches!(b.state, RunState::Queued | RunState::Running);
                if submitted {
                    in_flight.push(Todo {
                        point: p,
                        experiment: e,
                        previous: Some(b),
                    });
                    continue;
                }
                if !same_point(&names, &b.parameters, &p.values) {
                    // Made for an earlier design's point with this id: a new run.
                    superseded.push((p.id.as_str(), e.name.as_str()));
                    todo.push(Todo {
                        point: p,
                        experiment: e,
                        previous: None,
                    });
                    continue;
                }
                if b.state == RunState::Done {
                    let diff = match &b.fingerprint {
                        Some(old) => old.changed(&fingerprints[e.name.as_str()]),
                        None => vec![],
                    };
                    if !diff.is_empty() && !rerun {
                        for d in diff {
                            if !changed.iter().any(|c| c == d) {
                                changed.push(d.to_string());
                            }
                        }
                        n_changed += 1;
                        if example.is_empty() {
                            example = format!("{}/{}", p.id, e.name);
                        }
                        continue;
                    }
                    if !rerun {
                        skipped += 1;
                        continue;
                    }
                }
                Some(b)
            } else {
                None
            };
            todo.push(Todo {
                point: p,
                experiment: e,
                previous,
            });
        }
    }
    if !changed.is_empty() {
        return Err(RunsError::SimulatorChanged {
            changed,
            n_runs: n_changed,
            example,
        }
        .into());
    }
    for (point, experiment) in superseded {
        supersede(campaign, point, experiment)?;
    }
    let mut inputs = BTreeMap::new();
    for f in study.input_files() {
        let h = sha256_file(&f).with_context(|| format!("cannot hash {}", f.display()))?;
        inputs.insert(f.display().to_string(), h);
    }
    let design_path = campaign.join("design.yaml");
    if design_path.exists() {
        inputs.insert("design.yaml".to_string(), sha256_file(&design_path)?);
    }
    Ok(Plan {
        fingerprints,
        todo,
        in_flight,
        skipped,
        inputs,
    })
}

/// Folder under the campaign where runs of replaced design points are kept.
pub const SUPERSEDED_DIR: &str = "superseded";

/// Move the folder of a run made for an earlier design (same point id, other values) to
/// `superseded/<point>/<experiment>.<UTC time>`: finished simulator runs are never
/// deleted.
fn supersede(campaign: &Path, point: &str, experiment: &str) -> Result<()> {
    let from = run_dir(campaign, point, experiment);
    let stamp = chrono::Utc::now().format("%Y%m%dT%H%M%S%.3fZ");
    let to = campaign
        .join(SUPERSEDED_DIR)
        .join(point)
        .join(format!("{experiment}.{stamp}"));
    std::fs::create_dir_all(to.parent().expect("has a parent"))
        .with_context(|| format!("cannot create {}", to.display()))?;
    std::fs::rename(&from, &to)
        .with_context(|| format!("cannot move {} to {}", from.display(), to.display()))
}

/// Array job ids of runs in flight, sorted and unique.
pub(crate) fn job_ids(in_flight: &[Todo<'_>]) -> Vec<String> {
    let mut jobs: Vec<String> = in_flight
        .iter()
        .filter_map(|t| t.previous.as_ref()?.slurm.as_ref())
        .map(|s| s.array_job_id.clone())
        .collect();
    jobs.sort();
    jobs.dedup();
    jobs
}
