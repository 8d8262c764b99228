//! The run store: `<campaign>/runs/<point id>/<experiment>/run.yaml`.

use crate::design::Design;
use crate::record::{read_record, Record};
use crate::study::Study;
use anyhow::Result;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Life of a run: pending → (queued →) running → done | failed. `queued` exists only
/// with the Slurm backend: submitted, not yet seen running.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, PartialOrd, Ord)]
#[serde(rename_all = "lowercase")]
pub enum RunState {
    Pending,
    Queued,
    Running,
    Done,
    Failed,
}

/// One attempt of a run, kept in the record's history.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Attempt {
    pub started_utc: String,
    pub elapsed_s: f64,
    pub exit_code: Option<i32>,
    /// Why it failed; absent for the successful attempt.
    pub reason: Option<String>,
}

/// sha256 of each part of a run's definition, to tell what changed between invocations.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Fingerprint {
    /// `simulator.command` (before substitution).
    pub command: String,
    /// `simulator.files`: destinations and template texts.
    pub files: String,
    /// `simulator.output`.
    pub output: String,
    /// `simulator.env`.
    pub env: String,
    /// The experiment's settings.
    pub settings: String,
}

impl Fingerprint {
    /// Names of the parts that differ from `other`.
    pub fn changed(&self, other: &Fingerprint) -> Vec<&'static str> {
        let mut v = Vec::new();
        if self.command != other.command {
            v.push("simulator.command");
        }
        if self.files != other.files {
            v.push("simulator.files (templates)");
        }
        if self.output != other.output {
            v.push("simulator.output");
        }
        if self.env != other.env {
            v.push("simulator.env");
        }
        if self.settings != other.settings {
            v.push("experiments[].settings");
        }
        v
    }
}

/// Body of `run.yaml`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunBody {
    pub point: String,
    pub experiment: String,
    pub state: RunState,
    /// Attempts made so far (over all invocations).
    pub attempts: u32,
    pub exit_code: Option<i32>,
    /// Why the last attempt failed.
    pub reason: Option<String>,
    /// Wall time of the last attempt, seconds.
    pub elapsed_s: Option<f64>,
    /// sha256 of the output file of the successful attempt.
    pub outputs_sha256: Option<String>,
    /// Parameter values of the point.
    pub parameters: BTreeMap<String, f64>,
    /// The argv that was started (placeholders substituted).
    pub command: Vec<String>,
    /// Process id of the assay process that owns a `running` run.
    pub owner_pid: Option<u32>,
    /// Host of that process.
    pub owner_host: Option<String>,
    /// When that process started the run.
    #[serde(default)]
    pub owner_started_utc: Option<String>,
    /// Process (and process group) id of the simulator of a `running` run.
    #[serde(default)]
    pub child_pid: Option<u32>,
    /// The run's identity: sha256 of its fingerprint and parameter values.
    #[serde(default)]
    pub key: Option<String>,
    #[serde(default)]
    pub fingerprint: Option<Fingerprint>,
    /// The Slurm array task of the current or last attempt (Slurm backend only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub slurm: Option<SlurmTask>,
    /// Output values matched to the field stations (names in `value_names`).
    pub values: Option<Vec<f64>>,
    pub value_names: Vec<String>,
    pub history: Vec<Attempt>,
}

/// Where a run went in Slurm.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SlurmTask {
    /// `<array job id>_<task index>`, as `squeue`, `scontrol` and `scancel` take it.
    pub job: String,
    /// The array job id.
    pub array_job_id: String,
    /// The task index within the array.
    pub task: u32,
    /// The job script, relative to the campaign folder.
    pub script: String,
    pub submitted_utc: String,
}

/// Folder of one run.
pub fn run_dir(campaign: &Path, point: &str, experiment: &str) -> PathBuf {
    campaign.join("runs").join(point).join(experiment)
}

/// `run.yaml` of one run.
pub fn run_record_path(campaign: &Path, point: &str, experiment: &str) -> PathBuf {
    run_dir(campaign, point, experiment).join("run.yaml")
}

/// Whether a run record's parameter values are exactly (bit for bit) a design point's:
/// a run made for an earlier design at the same point id is not a run of this point.
pub fn same_point(names: &[String], recorded: &BTreeMap<String, f64>, values: &[f64]) -> bool {
    recorded.len() == values.len()
        && names
            .iter()
            .zip(values)
            .all(|(n, v)| recorded.get(n).map(|r| r.to_bits()) == Some(v.to_bits()))
}

/// Done runs of one experiment, ready for the surrogate.
#[derive(Debug, Clone)]
pub struct ExperimentRuns {
    pub experiment: String,
    pub point_ids: Vec<String>,
    /// Parameter values, one row per run.
    pub inputs: Vec<Vec<f64>>,
    /// Output vectors, one per run (the experiment's output order).
    pub outputs: Vec<Vec<f64>>,
    pub value_names: Vec<String>,
    /// sha256 of each run's `run.yaml`, for provenance.
    pub record_sha256: Vec<String>,
    /// sha256 of each run's output file (its `outputs_sha256`), for provenance.
    pub output_sha256: Vec<Option<String>>,
}

/// Done runs of every experiment.
#[derive(Debug, Clone)]
pub struct RunSet {
    pub experiments: Vec<ExperimentRuns>,
}

/// Read every run record of the design; missing records, and records made at other
/// parameter values (an earlier design's point with the same id), count as pending.
///
/// # Errors
/// An unreadable or malformed `run.yaml`.
pub fn load_runs(
    study: &Study,
    design: &Design,
    campaign: &Path,
) -> Result<(RunSet, Vec<RunBody>)> {
    let mut all = Vec::new();
    let mut experiments = Vec::new();
    for e in &study.experiments {
        let mut er = ExperimentRuns {
            experiment: e.name.clone(),
            point_ids: vec![],
            inputs: vec![],
            outputs: vec![],
            value_names: vec![],
            record_sha256: vec![],
            output_sha256: vec![],
        };
        let names = study.design_variable_names();
        for p in &design.points {
            let path = run_record_path(campaign, &p.id, &e.name);
            if !path.exists() {
                continue;
            }
            let rec: Record<RunBody> = read_record(&path)?;
            if !same_point(&names, &rec.body.parameters, &p.values) {
                // Left by an earlier design with other points: not a run of this one.
                continue;
            }
            if rec.body.state == RunState::Done {
                if let Some(v) = &rec.body.values {
                    er.point_ids.push(p.id.clone());
                    er.inputs.push(p.values.clone());
                    er.outputs.push(v.clone());
                    er.value_names = rec.body.value_names.clone();
                    er.record_sha256.push(crate::record::sha256_file(&path)?);
                    er.output_sha256.push(rec.body.outputs_sha256.clone());
                }
            }
            all.push(rec.body);
        }
        experiments.push(er);
    }
    Ok((RunSet { experiments }, all))
}

/// Counts of runs by state.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct StateCounts {
    pub pending: usize,
    pub queued: usize,
    pub running: usize,
    pub done: usize,
    pub failed: usize,
}

/// Counts per experiment (records not yet written count as pending).
pub fn status_counts(
    study: &Study,
    design: &Design,
    runs: &[RunBody],
) -> BTreeMap<String, StateCounts> {
    let mut out = BTreeMap::new();
    for e in &study.experiments {
        let mut c = StateCounts::default();
        let mine: Vec<&RunBody> = runs.iter().filter(|r| r.experiment == e.name).collect();
        for r in &mine {
            match r.state {
                RunState::Pending => c.pending += 1,
                RunState::Queued => c.queued += 1,
                RunState::Running => c.running += 1,
                RunState::Done => c.done += 1,
                RunState::Failed => c.failed += 1,
            }
        }
        c.pending += design.points.len().saturating_sub(mine.len());
        out.insert(e.name.clone(), c);
    }
    out
}
