//! Submission: one job script per array of prepared runs, written into the
//! campaign's `slurm/` folder and handed to `sbatch`; its runs become `queued` records
//! with their task ids.

use super::commands::slurm_cmd;
use super::script::{job_script, ScriptTask, SLURM_DIR, TASK_RESULT, TASK_STARTED};
use crate::record::{write_atomic, write_record, ProvenanceClock, Record};
use crate::runs::prepare::Prepared;
use crate::runs::store::{RunBody, RunState, SlurmTask};
use crate::study::{Experiment, Study};
use anyhow::{bail, Context, Result};
use chrono::{SecondsFormat, Utc};
use std::path::{Path, PathBuf};
use std::time::Instant;

/// A run that is in Slurm: its record and where it lives.
#[derive(Debug)]
pub(super) struct Flight<'a> {
    pub(super) experiment: &'a Experiment,
    pub(super) point: crate::design::DesignPoint,
    pub(super) body: RunBody,
    pub(super) dir: PathBuf,
    /// When the task was first seen gone from the queue without a result.
    pub(super) missing_since: Option<Instant>,
}

impl Flight<'_> {
    pub(super) fn label(&self) -> String {
        format!("{}/{}", self.body.point, self.body.experiment)
    }
    pub(super) fn record_path(&self) -> PathBuf {
        self.dir.join("run.yaml")
    }
    pub(super) fn job(&self) -> &str {
        self.body
            .slurm
            .as_ref()
            .map(|s| s.job.as_str())
            .unwrap_or("")
    }
}

fn now() -> String {
    Utc::now().to_rfc3339_opts(SecondsFormat::Millis, true)
}

/// The provenance block of a run record written now.
pub(super) fn snapshot(command_line: &[String]) -> crate::record::Provenance {
    ProvenanceClock::start(command_line.to_vec()).finish()
}

/// The next free submission number: scripts are `slurm/submit-NNNN.sh`.
fn next_submission(dir: &Path) -> u32 {
    let mut n = 0;
    if let Ok(rd) = std::fs::read_dir(dir) {
        for e in rd.flatten() {
            let name = e.file_name().to_string_lossy().into_owned();
            if let Some(k) = name
                .strip_prefix("submit-")
                .and_then(|r| r.strip_suffix(".sh"))
                .and_then(|k| k.parse::<u32>().ok())
            {
                n = n.max(k);
            }
        }
    }
    n + 1
}

/// Write one job script, submit it, and mark its runs `queued` with their task ids.
pub(super) fn submit<'a>(
    study: &'a Study,
    campaign: &Path,
    chunk: Vec<Prepared>,
    command_line: &[String],
) -> Result<Vec<Flight<'a>>> {
    let dir = campaign.join(SLURM_DIR);
    std::fs::create_dir_all(dir.join("logs"))
        .with_context(|| format!("cannot create {}", dir.display()))?;
    let dir = std::fs::canonicalize(&dir)?;
    let campaign_abs = dir.parent().unwrap_or(campaign).to_path_buf();
    let k = next_submission(&dir);
    let script_rel = format!("{SLURM_DIR}/submit-{k:04}.sh");
    let script_path = campaign_abs.join(&script_rel);
    let job_name = format!("assay-{}-{k:04}", study.name);
    let tasks: Vec<ScriptTask> = chunk
        .iter()
        .map(|p| ScriptTask {
            dir: p.dir.clone(),
            program: p.program.clone(),
            args: p.argv[1..].to_vec(),
            env: p.env.clone(),
        })
        .collect();
    let written = now();
    let text = job_script(study, &campaign_abs, &job_name, &tasks, &written);
    write_atomic(&script_path, text.as_bytes())?;
    // Stale results of an earlier attempt must not be taken for this one's.
    for p in &chunk {
        let _ = std::fs::remove_file(p.dir.join(TASK_RESULT));
        let _ = std::fs::remove_file(p.dir.join(TASK_STARTED));
    }
    let out = slurm_cmd(
        "sbatch",
        &["--parsable", &script_path.display().to_string()],
    )?;
    let job_id = out
        .trim()
        .split(';')
        .next()
        .unwrap_or("")
        .trim()
        .to_string();
    if job_id.is_empty() || !job_id.chars().all(|c| c.is_ascii_digit()) {
        bail!(
            "sbatch did not print a job id (it printed `{}`)",
            out.trim()
        );
    }
    let mut flights = Vec::with_capacity(chunk.len());
    for (i, p) in chunk.into_iter().enumerate() {
        let Prepared {
            dir,
            mut body,
            point,
            ..
        } = p;
        body.state = RunState::Queued;
        body.attempts += 1;
        body.values = None;
        body.outputs_sha256 = None;
        body.reason = None;
        body.owner_pid = None;
        body.owner_host = None;
        body.owner_started_utc = None;
        body.child_pid = None;
        body.slurm = Some(SlurmTask {
            job: format!("{job_id}_{i}"),
            array_job_id: job_id.clone(),
            task: i as u32,
            script: script_rel.clone(),
            submitted_utc: written.clone(),
        });
        write_record(
            &dir.join("run.yaml"),
            &Record::new("run", snapshot(command_line), body.clone()),
        )?;
        let experiment = study
            .experiments
            .iter()
            .find(|e| e.name == body.experiment)
            .context("a run of an unknown experiment")?;
        flights.push(Flight {
            experiment,
            point,
            body,
            dir,
            missing_since: None,
        });
    }
    Ok(flights)
}
