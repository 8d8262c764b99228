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

use super::outcome::{exit_failure, read_output, settle, Ended, Outcome};
use super::plan::{Plan, Todo};
use super::prepare::{prepare, Prepared};
use super::store::{run_dir, RunBody, RunState, SlurmTask};
use super::RunSummary;
use crate::progress::Observer;
use crate::record::{write_atomic, write_record, ProvenanceClock, Record};
use crate::study::{Experiment, SlurmSpec, Study};
use anyhow::{bail, Context, Result};
use chrono::{SecondsFormat, Utc};
use serde::Deserialize;
use std::collections::{BTreeMap, VecDeque};
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

/// The result file an array task writes into its run folder (atomically, by rename).
pub const TASK_RESULT: &str = "slurm-task.yaml";
/// Written by an array task when it starts the simulator.
pub const TASK_STARTED: &str = "slurm-task.started";
/// Folder of the job scripts and their logs, inside the campaign folder.
pub const SLURM_DIR: &str = "slurm";
/// Default seconds between two looks at the queue.
pub const DEFAULT_POLL_S: f64 = 5.0;
/// A task that left the queue normally gets this long for its result file to become
/// visible (shared file systems cache directory listings), then counts as lost.
const RESULT_GRACE: Duration = Duration::from_secs(60);
/// Seconds a simulator gets after SIGTERM at its timeout before SIGKILL (`timeout -k`).
const KILL_AFTER_S: u32 = 5;
/// Exit code of coreutils `timeout` when the command timed out.
const TIMEOUT_EXIT: i32 = 124;
/// Slurm's default MaxArraySize, used when `scontrol show config` does not say.
const DEFAULT_MAX_ARRAY_SIZE: usize = 1001;

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

/// A run that is in Slurm: its record and where it lives.
#[derive(Debug)]
struct Flight<'a> {
    experiment: &'a Experiment,
    point: crate::design::DesignPoint,
    body: RunBody,
    dir: PathBuf,
    /// When the task was first seen gone from the queue without a result.
    missing_since: Option<Instant>,
}

impl Flight<'_> {
    fn label(&self) -> String {
        format!("{}/{}", self.body.point, self.body.experiment)
    }
    fn record_path(&self) -> PathBuf {
        self.dir.join("run.yaml")
    }
    fn job(&self) -> &str {
        self.body
            .slurm
            .as_ref()
            .map(|s| s.job.as_str())
            .unwrap_or("")
    }
}

/// Quote `s` for a POSIX shell: single quotes, with `'` written as `'\''`.
pub fn sh_quote(s: &str) -> String {
    format!("'{}'", s.replace('\'', r"'\''"))
}

/// `--time` for a task: the study's `execution.slurm.time`, else the simulator's
/// timeout plus two minutes (for the prelude and the file system), in whole minutes.
pub fn task_time(study: &Study) -> String {
    match &study.slurm.time {
        Some(t) => t.clone(),
        None => {
            let minutes = ((study.simulator.timeout_s + 120.0) / 60.0).ceil().max(1.0) as u64;
            minutes.to_string()
        }
    }
}

/// One array task of a job script: the run folder, the program and its arguments, and
/// the rendered environment.
#[derive(Debug, Clone)]
pub struct ScriptTask {
    pub dir: PathBuf,
    pub program: PathBuf,
    pub args: Vec<String>,
    pub env: Vec<(String, String)>,
}

/// The job script of one array submission. It is written into the campaign folder so a
/// reviewer can read exactly what ran; `#SBATCH` lines carry every submission option.
pub fn job_script(
    study: &Study,
    campaign: &Path,
    job_name: &str,
    tasks: &[ScriptTask],
    written_utc: &str,
) -> String {
    let s: &SlurmSpec = &study.slurm;
    let mut o = String::new();
    o.push_str("#!/bin/sh\n");
    o.push_str(&format!(
        "# Written by assay for campaign `{}` at {written_utc}: one array task per run folder.\n",
        study.name
    ));
    o.push_str(&format!(
        "# Each task runs the simulator in its folder and writes {TASK_RESULT} there.\n"
    ));
    o.push_str(&format!("#SBATCH --job-name={job_name}\n"));
    let throttle = s.array_limit.map(|l| format!("%{l}")).unwrap_or_default();
    o.push_str(&format!(
        "#SBATCH --array=0-{}{throttle}\n",
        tasks.len().saturating_sub(1)
    ));
    let logs = campaign.join(SLURM_DIR).join("logs");
    o.push_str(&format!("#SBATCH --output={}/%A_%a.out\n", logs.display()));
    o.push_str(&format!("#SBATCH --time={}\n", task_time(study)));
    o.push_str("#SBATCH --ntasks=1\n");
    if let Some(p) = &s.partition {
        o.push_str(&format!("#SBATCH --partition={p}\n"));
    }
    if let Some(c) = s.cpus_per_task {
        o.push_str(&format!("#SBATCH --cpus-per-task={c}\n"));
    }
    if let Some(m) = &s.mem {
        o.push_str(&format!("#SBATCH --mem={m}\n"));
    }
    if let Some(a) = &s.account {
        o.push_str(&format!("#SBATCH --account={a}\n"));
    }
    if let Some(q) = &s.qos {
        o.push_str(&format!("#SBATCH --qos={q}\n"));
    }
    for a in &s.extra_args {
        o.push_str(&format!("#SBATCH {a}\n"));
    }
    o.push('\n');
    if !s.prelude.is_empty() {
        o.push_str("# execution.slurm.prelude\n");
        for l in &s.prelude {
            o.push_str(l);
            o.push('\n');
        }
        o.push('\n');
    }
    let out_file = sh_quote(&study.simulator.output.file);
    o.push_str(&format!(
        r#"# run_task DIR PROGRAM ARGS...: run one simulator in DIR, never through a shell
# string, with the study's timeout; record how it ended.
run_task() {{
  dir=$1; shift
  cd "$dir" || {{ echo "assay task: cannot enter $dir" >&2; exit 1; }}
  rm -f {TASK_RESULT} .{TASK_RESULT}.tmp {TASK_STARTED} {out_file} stdout.txt stderr.txt
  started=$(date +%s.%N)
  printf 'host: "%s"\nstarted_epoch_s: %s\n' "$(hostname)" "$started" > {TASK_STARTED}
  timeout -k {KILL_AFTER_S} {timeout} "$@" </dev/null >stdout.txt 2>stderr.txt
  code=$?
  ended=$(date +%s.%N)
  sha=""
  if [ -f {out_file} ]; then sha=$(sha256sum {out_file} | cut -d ' ' -f 1); fi
  {{
    printf 'job: "%s_%s"\n' "$SLURM_ARRAY_JOB_ID" "$SLURM_ARRAY_TASK_ID"
    printf 'task: %s\n' "$SLURM_ARRAY_TASK_ID"
    printf 'host: "%s"\n' "$(hostname)"
    printf 'started_epoch_s: %s\n' "$started"
    printf 'ended_epoch_s: %s\n' "$ended"
    printf 'exit_code: %s\n' "$code"
    printf 'output_sha256: "%s"\n' "$sha"
  }} > .{TASK_RESULT}.tmp && mv -f .{TASK_RESULT}.tmp {TASK_RESULT}
}}

case "$SLURM_ARRAY_TASK_ID" in
"#,
        timeout = study.simulator.timeout_s,
    ));
    for (i, t) in tasks.iter().enumerate() {
        o.push_str(&format!("{i})"));
        for (k, v) in &t.env {
            o.push_str(&format!(" export {k}={};", sh_quote(v)));
        }
        o.push_str(&format!(
            " run_task {} {}",
            sh_quote(&t.dir.display().to_string()),
            sh_quote(&t.program.display().to_string())
        ));
        for a in &t.args {
            o.push(' ');
            o.push_str(&sh_quote(a));
        }
        o.push_str(" ;;\n");
    }
    o.push_str("*) echo \"assay task: no run for array index $SLURM_ARRAY_TASK_ID\" >&2; exit 2 ;;\nesac\n");
    o
}

/// Run a Slurm command and return its standard output.
fn slurm_cmd(program: &str, args: &[&str]) -> Result<String> {
    let out = Command::new(program).args(args).output().with_context(|| {
        format!("cannot start `{program}` (the Slurm backend needs Slurm's commands on PATH)")
    })?;
    if !out.status.success() {
        bail!(
            "`{program} {}` failed ({}): {}",
            args.join(" "),
            out.status,
            String::from_utf8_lossy(&out.stderr).trim()
        );
    }
    Ok(String::from_utf8_lossy(&out.stdout).into_owned())
}

/// The cluster's MaxArraySize (array indices run from 0 to MaxArraySize − 1).
pub fn max_array_size() -> usize {
    slurm_cmd("scontrol", &["show", "config"])
        .ok()
        .and_then(|t| parse_max_array_size(&t))
        .unwrap_or(DEFAULT_MAX_ARRAY_SIZE)
}

/// MaxArraySize from the text of `scontrol show config`.
pub fn parse_max_array_size(text: &str) -> Option<usize> {
    text.lines().find_map(|l| {
        let (k, v) = l.split_once('=')?;
        (k.trim() == "MaxArraySize")
            .then(|| v.trim().parse().ok())
            .flatten()
    })
}

/// State of each listed array task still in the queue: `job → (state, reason)`.
/// `squeue` fails for ids it no longer knows; that means none is queued.
fn queue_states(jobs: &[String]) -> Result<BTreeMap<String, (String, String)>> {
    let out = BTreeMap::new();
    if jobs.is_empty() {
        return Ok(out);
    }
    let list = jobs.join(",");
    let text = match slurm_cmd("squeue", &["-h", "-r", "-o", "%i|%T|%r", "-j", &list]) {
        Ok(t) => t,
        Err(e) if format!("{e:#}").contains("Invalid job id") => return Ok(out),
        Err(e) => return Err(e),
    };
    Ok(parse_squeue(&text))
}

/// Lines `job|state|reason` of `squeue -h -r -o '%i|%T|%r'`.
pub fn parse_squeue(text: &str) -> BTreeMap<String, (String, String)> {
    text.lines()
        .filter_map(|l| {
            let mut it = l.trim().splitn(3, '|');
            let job = it.next()?.trim().to_string();
            let state = it.next()?.trim().to_string();
            let reason = it.next().unwrap_or("").trim().to_string();
            (!job.is_empty()).then_some((job, (state, reason)))
        })
        .collect()
}

/// What `scontrol show job -o` says about an ended task: state, reason, exit code.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct JobEnd {
    pub state: String,
    pub reason: String,
    pub exit_code: String,
}

/// Parse one line of `scontrol show job -o` (space-separated `Key=Value` pairs).
pub fn parse_scontrol_job(text: &str) -> Option<JobEnd> {
    let mut end = JobEnd::default();
    for field in text.split_whitespace() {
        if let Some((k, v)) = field.split_once('=') {
            match k {
                "JobState" => end.state = v.to_string(),
                "Reason" => end.reason = v.to_string(),
                "ExitCode" => end.exit_code = v.to_string(),
                _ => {}
            }
        }
    }
    (!end.state.is_empty()).then_some(end)
}

fn job_end(job: &str) -> Option<JobEnd> {
    slurm_cmd("scontrol", &["show", "job", "-o", job])
        .ok()
        .and_then(|t| parse_scontrol_job(t.lines().next().unwrap_or("")))
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

fn now() -> String {
    Utc::now().to_rfc3339_opts(SecondsFormat::Millis, true)
}

fn utc_of_epoch(s: f64) -> String {
    chrono::DateTime::<Utc>::from_timestamp_millis((s * 1000.0) as i64)
        .map(|t| t.to_rfc3339_opts(SecondsFormat::Millis, true))
        .unwrap_or_default()
}

/// Judge an ended task from its result file.
fn judge(study: &Study, f: &Flight<'_>, r: &TaskResult) -> (Outcome, Ended) {
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

fn read_result(dir: &Path) -> Option<TaskResult> {
    let text = std::fs::read_to_string(dir.join(TASK_RESULT)).ok()?;
    serde_yaml::from_str(&text).ok()
}

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

fn snapshot(command_line: &[String]) -> crate::record::Provenance {
    ProvenanceClock::start(command_line.to_vec()).finish()
}

/// A task is no longer in the queue and left no result: ask Slurm how it ended. A
/// cancelled, timed-out, preempted or failed-node task fails at once; one that ended
/// normally gets [`RESULT_GRACE`] for its result file to appear.
fn vanished(f: &mut Flight<'_>) -> Option<(Outcome, Ended)> {
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
fn submit<'a>(
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quoting_survives_quotes_and_spaces() {
        assert_eq!(sh_quote("a b"), "'a b'");
        assert_eq!(sh_quote("it's"), r"'it'\''s'");
        assert_eq!(sh_quote(""), "''");
    }

    #[test]
    fn max_array_size_is_read_from_scontrol_config() {
        let text = "MailProg                = /bin/mail\nMaxArraySize            = 1001\nMaxJobCount = 10000\n";
        assert_eq!(parse_max_array_size(text), Some(1001));
        assert_eq!(parse_max_array_size("Foo = 1\n"), None);
    }

    #[test]
    fn squeue_lines_are_split_into_state_and_reason() {
        let m = parse_squeue("12_0|RUNNING|None\n12_1|PENDING|JobArrayTaskLimit\n");
        assert_eq!(m["12_0"], ("RUNNING".into(), "None".into()));
        assert_eq!(m["12_1"].1, "JobArrayTaskLimit");
    }

    #[test]
    fn scontrol_job_line_gives_state_reason_and_exit_code() {
        let line = "JobId=13 ArrayJobId=12 ArrayTaskId=1 JobName=x JobState=CANCELLED Reason=None Dependency=(null) ExitCode=0:15";
        let e = parse_scontrol_job(line).expect("parsed");
        assert_eq!(e.state, "CANCELLED");
        assert_eq!(e.exit_code, "0:15");
        assert!(parse_scontrol_job("slurm_load_jobs error: Invalid job id specified").is_none());
    }
}
