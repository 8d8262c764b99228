//! The local executor: start each pending run as a child process (never through a
//! shell), `jobs` at a time, with a timeout and retries, and record every attempt.

use super::parse::{match_stations, parse_output};
use super::store::{run_dir, run_record_path, same_point, Attempt, Fingerprint, RunBody, RunState};
use crate::design::{Design, DesignPoint};
use crate::progress::Observer;
use crate::record::{
    read_record, sha256_file, write_record, write_record_unsynced, ProvenanceClock, Record,
};
use crate::study::{placeholder, Experiment, Study};
use anyhow::{Context, Result};
use chrono::{SecondsFormat, Utc};
use std::collections::BTreeMap;
use std::os::unix::process::CommandExt;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::{Duration, Instant};

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
}

/// Names of an experiment's output values: `y@x` for curves, `y` for scalars.
pub fn value_names(study: &Study, e: &Experiment) -> Vec<String> {
    let stations = e.data.stations();
    let mut out = Vec::new();
    for q in &study.simulator.output.y {
        for s in &stations {
            match s {
                Some(x) => out.push(format!("{q}@{}", placeholder::format_number(*x))),
                None => out.push(q.clone()),
            }
        }
    }
    out
}

/// Options of one `run` invocation.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct RunOptions {
    /// Concurrent runs.
    pub jobs: usize,
    /// Run everything again, done runs included (after the simulator changed on purpose).
    pub rerun: bool,
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
}

fn sha_json(v: &serde_json::Value) -> String {
    crate::record::sha256_hex(v.to_string().as_bytes())
}

/// The fingerprint of experiment `e`'s runs under the study's simulator section.
pub fn fingerprint(study: &Study, e: &Experiment) -> Fingerprint {
    let sim = &study.simulator;
    let files: Vec<serde_json::Value> = sim
        .files
        .iter()
        .map(|f| serde_json::json!({"to": f.to, "text": f.text}))
        .collect();
    Fingerprint {
        command: sha_json(&serde_json::json!(sim.command)),
        files: sha_json(&serde_json::json!(files)),
        output: sha_json(&serde_json::json!({
            "file": sim.output.file,
            "format": format!("{:?}", sim.output.format),
            "x": sim.output.x,
            "y": sim.output.y,
            "stations": e.data.stations().iter().map(|s| s.map(|v| v.to_bits())).collect::<Vec<_>>(),
        })),
        env: sha_json(&serde_json::json!(sim.env)),
        settings: sha_json(&serde_json::json!(e.settings)),
    }
}

/// A run's key: sha256 of its fingerprint and its parameter values (bit-exact).
pub fn run_key(fp: &Fingerprint, values: &[f64]) -> String {
    let bits: Vec<u64> = values.iter().map(|v| v.to_bits()).collect();
    sha_json(&serde_json::json!({"fingerprint": fp, "parameters": bits}))
}

/// Run every pending or failed run of the design, `jobs` at a time.
///
/// The caller holds the campaign lock ([`super::lock_campaign`]), so a record found in
/// state `running` was left by a process that died: it is run again.
///
/// # Errors
/// [`RunsError::SimulatorChanged`] when done runs were made with another simulator
/// definition (unless `rerun`), and problems with the campaign folder itself; a failing
/// simulator is recorded in its `run.yaml` and counted in [`RunSummary::failed`].
pub fn run_all(
    study: &Study,
    design: &Design,
    campaign: &Path,
    options: RunOptions,
    command_line: &[String],
    stop: &AtomicBool,
    observer: &dyn Observer,
) -> Result<RunSummary> {
    let fingerprints: BTreeMap<&str, Fingerprint> = study
        .experiments
        .iter()
        .map(|e| (e.name.as_str(), fingerprint(study, e)))
        .collect();
    let mut todo = Vec::new();
    let mut summary = RunSummary::default();
    let mut changed: Vec<String> = Vec::new();
    let mut n_changed = 0;
    let mut example = String::new();
    let names = study.parameter_names();
    let mut superseded = Vec::new();
    for p in &design.points {
        for e in &study.experiments {
            let path = run_record_path(campaign, &p.id, &e.name);
            let previous = if path.exists() {
                let rec: Record<RunBody> = read_record(&path)?;
                if !same_point(&names, &rec.body.parameters, &p.values) {
                    // Made for an earlier design's point with this id: a new run.
                    superseded.push((p.id.as_str(), e.name.as_str()));
                    todo.push((p, e, None));
                    continue;
                }
                if rec.body.state == RunState::Done {
                    let diff = match &rec.body.fingerprint {
                        Some(old) => old.changed(&fingerprints[e.name.as_str()]),
                        None => vec![],
                    };
                    if !diff.is_empty() && !options.rerun {
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
                    if !options.rerun {
                        summary.skipped += 1;
                        continue;
                    }
                }
                Some(rec.body)
            } else {
                None
            };
            todo.push((p, e, previous));
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
    // What every run reads: the study's files and the design, hashed once.
    let mut inputs = BTreeMap::new();
    for f in study.input_files() {
        let h = sha256_file(&f).with_context(|| format!("cannot hash {}", f.display()))?;
        inputs.insert(f.display().to_string(), h);
    }
    let design_path = campaign.join("design.yaml");
    if design_path.exists() {
        inputs.insert("design.yaml".to_string(), sha256_file(&design_path)?);
    }
    observer.start("runs", todo.len() as u64);
    let next = AtomicUsize::new(0);
    let n_done = AtomicUsize::new(0);
    let n_failed = AtomicUsize::new(0);
    let n_running = AtomicUsize::new(0);
    let results = Mutex::new(Vec::new());
    let workers = options.jobs.max(1).min(todo.len().max(1));
    let counts = |n_done: &AtomicUsize, n_failed: &AtomicUsize, n_running: &AtomicUsize| {
        format!(
            "{} done · {} failed · {} running",
            n_done.load(Ordering::SeqCst),
            n_failed.load(Ordering::SeqCst),
            n_running.load(Ordering::SeqCst)
        )
    };
    std::thread::scope(|s| {
        for _ in 0..workers {
            s.spawn(|| loop {
                if stop.load(Ordering::SeqCst) {
                    break;
                }
                let i = next.fetch_add(1, Ordering::SeqCst);
                let Some((p, e, prev)) = todo.get(i) else {
                    break;
                };
                n_running.fetch_add(1, Ordering::SeqCst);
                let fp = &fingerprints[e.name.as_str()];
                let r = run_one(
                    study,
                    p,
                    e,
                    fp,
                    prev.clone(),
                    campaign,
                    command_line,
                    &inputs,
                    stop,
                );
                n_running.fetch_sub(1, Ordering::SeqCst);
                let label = format!("{}/{}", p.id, e.name);
                match &r {
                    Ok(RunState::Done) => {
                        n_done.fetch_add(1, Ordering::SeqCst);
                        observer.advance(1, &counts(&n_done, &n_failed, &n_running));
                    }
                    Ok(RunState::Pending) | Ok(RunState::Running) => {
                        observer.note(&format!("{label} interrupted; back to pending"))
                    }
                    Ok(RunState::Failed) => {
                        n_failed.fetch_add(1, Ordering::SeqCst);
                        observer.note(&format!(
                            "{label} failed (see {})",
                            run_record_path(campaign, &p.id, &e.name).display()
                        ));
                        observer.advance(1, &counts(&n_done, &n_failed, &n_running));
                    }
                    Err(err) => {
                        observer.note(&format!("{label}: {err:#}"));
                        observer.advance(1, &counts(&n_done, &n_failed, &n_running));
                    }
                }
                results.lock().expect("results lock").push(r);
            });
        }
    });
    observer.finish();
    for r in results.into_inner().expect("results lock") {
        match r? {
            RunState::Done => summary.done += 1,
            RunState::Pending | RunState::Running => summary.interrupted += 1,
            RunState::Failed => summary.failed += 1,
        }
    }
    // Runs never started because of an interruption.
    summary.interrupted += todo
        .len()
        .saturating_sub(next.load(Ordering::SeqCst).min(todo.len()));
    Ok(summary)
}

/// Folder under the campaign where runs of replaced design points are kept.
pub const SUPERSEDED_DIR: &str = "superseded";

/// Move the folder of a run made for an earlier design (same point id, other values) to
/// `superseded/<point>/<experiment>.<UTC time>`: finished simulator runs are never
/// deleted.
fn supersede(campaign: &Path, point: &str, experiment: &str) -> Result<()> {
    let from = run_dir(campaign, point, experiment);
    let stamp = Utc::now().format("%Y%m%dT%H%M%S%.3fZ");
    let to = campaign
        .join(SUPERSEDED_DIR)
        .join(point)
        .join(format!("{experiment}.{stamp}"));
    std::fs::create_dir_all(to.parent().expect("has a parent"))
        .with_context(|| format!("cannot create {}", to.display()))?;
    std::fs::rename(&from, &to)
        .with_context(|| format!("cannot move {} to {}", from.display(), to.display()))
}

fn now() -> String {
    Utc::now().to_rfc3339_opts(SecondsFormat::Millis, true)
}

/// Resolve the program: a path with `/` is relative to the study folder.
fn program(study: &Study, arg0: &str) -> PathBuf {
    let p = Path::new(arg0);
    if arg0.contains('/') && p.is_relative() {
        let joined = study.dir.join(p);
        std::fs::canonicalize(&joined).unwrap_or(joined)
    } else {
        p.to_path_buf()
    }
}

#[allow(clippy::too_many_arguments)] // one run's whole context; called from one place
fn run_one(
    study: &Study,
    point: &DesignPoint,
    e: &Experiment,
    fp: &Fingerprint,
    previous: Option<RunBody>,
    campaign: &Path,
    command_line: &[String],
    inputs: &BTreeMap<String, String>,
    stop: &AtomicBool,
) -> Result<RunState> {
    let dir = run_dir(campaign, &point.id, &e.name);
    std::fs::create_dir_all(&dir).with_context(|| format!("cannot create {}", dir.display()))?;
    let dir = std::fs::canonicalize(&dir)?;
    let record_path = dir.join("run.yaml");

    let mut values: BTreeMap<String, String> = e.settings.clone();
    let mut parameters = BTreeMap::new();
    for (n, v) in study.parameters.iter().zip(&point.values) {
        values.insert(n.name.clone(), placeholder::format_number(*v));
        parameters.insert(n.name.clone(), *v);
    }
    values.insert("run_dir".into(), dir.display().to_string());
    values.insert("run_id".into(), format!("{}-{}", point.id, e.name));
    let study_dir = std::fs::canonicalize(&study.dir).unwrap_or_else(|_| study.dir.clone());
    values.insert("study_dir".into(), study_dir.display().to_string());

    let mut argv = Vec::new();
    for a in &study.simulator.command {
        argv.push(placeholder::render(a, &values).map_err(|e| anyhow::anyhow!(e.message))?);
    }
    for f in &study.simulator.files {
        let text = placeholder::render(&f.text, &values).map_err(|e| anyhow::anyhow!(e.message))?;
        crate::record::write_atomic(&dir.join(&f.to), text.as_bytes())?;
    }

    let mut env = Vec::new();
    for (k, v) in &study.simulator.env {
        env.push((
            k.clone(),
            placeholder::render(v, &values).map_err(|e| anyhow::anyhow!(e.message))?,
        ));
    }

    let mut body = previous.unwrap_or_else(|| RunBody {
        point: point.id.clone(),
        experiment: e.name.clone(),
        state: RunState::Pending,
        attempts: 0,
        exit_code: None,
        reason: None,
        elapsed_s: None,
        outputs_sha256: None,
        parameters: parameters.clone(),
        command: argv.clone(),
        owner_pid: None,
        owner_host: None,
        owner_started_utc: None,
        child_pid: None,
        key: None,
        fingerprint: None,
        values: None,
        value_names: value_names(study, e),
        history: vec![],
    });
    body.parameters = parameters;
    body.command = argv.clone();
    body.value_names = value_names(study, e);
    body.fingerprint = Some(fp.clone());
    body.key = Some(run_key(fp, &point.values));

    if body.state == RunState::Running {
        // Left `running` by an assay process that died (we hold the campaign lock, so no
        // live process owns it). Its simulator may still be running or may have finished.
        if let Some(state) = recover(study, e, &mut body, &dir, stop) {
            let mut clock = ProvenanceClock::start(command_line.to_vec());
            for (k, v) in inputs {
                clock.input_hash(k, v);
            }
            if let Some(sha) = &body.outputs_sha256 {
                clock.input_hash(&format!("output:{}", study.simulator.output.file), sha);
            }
            write_record(
                &record_path,
                &Record::new("run", clock.finish(), body.clone()),
            )?;
            return Ok(state);
        }
    }

    let max_attempts = 1 + study.simulator.retries;
    for _ in 0..max_attempts {
        let mut clock = ProvenanceClock::start(command_line.to_vec());
        for (k, v) in inputs {
            clock.input_hash(k, v);
        }
        body.state = RunState::Running;
        body.attempts += 1;
        body.owner_pid = Some(std::process::id());
        body.owner_host = Some(gethostname::gethostname().to_string_lossy().into_owned());
        body.owner_started_utc = Some(now());
        body.values = None;
        body.outputs_sha256 = None;
        write_record_unsynced(
            &record_path,
            &Record::new("run", clock_snapshot(command_line), body.clone()),
        )?;

        let started = now();
        let t0 = Instant::now();
        let on_spawn = |pid: u32| -> Result<()> {
            let mut b = body.clone();
            b.child_pid = Some(pid);
            write_record_unsynced(
                &record_path,
                &Record::new("run", clock_snapshot(command_line), b),
            )
        };
        let (exit_code, outcome) = attempt(study, e, &argv, &env, &dir, stop, &on_spawn);
        body.child_pid = None;
        let elapsed = t0.elapsed().as_secs_f64();
        body.exit_code = exit_code;
        body.elapsed_s = Some(elapsed);
        body.owner_pid = None;
        body.owner_host = None;
        body.owner_started_utc = None;
        match outcome {
            Outcome::Interrupted => {
                body.state = RunState::Pending;
                body.attempts -= 1;
                body.reason = Some("interrupted by the user; will run again".into());
                body.history.push(Attempt {
                    started_utc: started,
                    elapsed_s: elapsed,
                    exit_code,
                    reason: body.reason.clone(),
                });
                write_record(
                    &record_path,
                    &Record::new("run", clock.finish(), body.clone()),
                )?;
                return Ok(RunState::Pending);
            }
            Outcome::Done(vals, sha) => {
                body.state = RunState::Done;
                body.reason = None;
                body.values = Some(vals);
                body.outputs_sha256 = Some(sha.clone());
                body.history.push(Attempt {
                    started_utc: started,
                    elapsed_s: elapsed,
                    exit_code,
                    reason: None,
                });
                clock.input_hash(&format!("output:{}", study.simulator.output.file), &sha);
                write_record(
                    &record_path,
                    &Record::new("run", clock.finish(), body.clone()),
                )?;
                return Ok(RunState::Done);
            }
            Outcome::Failed(reason) => {
                body.state = RunState::Failed;
                body.reason = Some(reason.clone());
                body.history.push(Attempt {
                    started_utc: started,
                    elapsed_s: elapsed,
                    exit_code,
                    reason: Some(reason),
                });
                write_record(
                    &record_path,
                    &Record::new("run", clock.finish(), body.clone()),
                )?;
            }
        }
    }
    Ok(RunState::Failed)
}

fn clock_snapshot(command_line: &[String]) -> crate::record::Provenance {
    ProvenanceClock::start(command_line.to_vec()).finish()
}

/// How often a recovering run checks whether an orphaned simulator has exited.
const ORPHAN_POLL: Duration = Duration::from_millis(50);

/// Finish the bookkeeping of an attempt whose assay process died.
///
/// An orphaned simulator that is still running is waited for (up to the rest of its
/// `timeout_s`, then killed), never started a second time. When it is gone, an output
/// file written during that attempt that parses and matches the stations is adopted:
/// the run becomes `done` with an unknown exit code. Otherwise the attempt is recorded
/// as lost and `None` says the run must be started again.
fn recover(
    study: &Study,
    e: &Experiment,
    body: &mut RunBody,
    dir: &Path,
    stop: &AtomicBool,
) -> Option<RunState> {
    let started = body
        .owner_started_utc
        .as_deref()
        .and_then(|t| chrono::DateTime::parse_from_rfc3339(t).ok())
        .map(|t| t.with_timezone(&Utc));
    if let Some(pid) = body.child_pid {
        let pgid = nix::unistd::Pid::from_raw(pid as i32);
        let deadline = started.map(|t| {
            t + chrono::Duration::milliseconds((study.simulator.timeout_s * 1000.0) as i64)
        });
        while nix::sys::signal::killpg(pgid, None).is_ok() {
            if stop.load(Ordering::SeqCst) {
                return Some(RunState::Running);
            }
            if deadline.map(|d| Utc::now() > d).unwrap_or(true) {
                let _ = nix::sys::signal::killpg(pgid, nix::sys::signal::Signal::SIGKILL);
                break;
            }
            std::thread::sleep(ORPHAN_POLL);
        }
    }
    let out_path = dir.join(&study.simulator.output.file);
    let written_after_start = match (
        std::fs::metadata(&out_path).and_then(|m| m.modified()),
        started,
    ) {
        (Ok(m), Some(s)) => chrono::DateTime::<Utc>::from(m) >= s,
        _ => false,
    };
    let started_utc = body.owner_started_utc.clone().unwrap_or_default();
    body.owner_pid = None;
    body.owner_host = None;
    body.owner_started_utc = None;
    body.child_pid = None;
    if written_after_start {
        let sim = &study.simulator;
        let parsed = std::fs::read_to_string(&out_path)
            .map_err(|e| e.to_string())
            .and_then(|t| {
                parse_output(
                    &t,
                    sim.output.format,
                    sim.output.x.as_deref(),
                    &sim.output.y,
                )
            })
            .and_then(|p| match_stations(&p, &e.data.stations()));
        if let (Ok(values), Ok(sha)) = (parsed, sha256_file(&out_path)) {
            body.state = RunState::Done;
            body.reason = None;
            body.exit_code = None;
            body.values = Some(values);
            body.outputs_sha256 = Some(sha);
            body.history.push(Attempt {
                started_utc,
                elapsed_s: 0.0,
                exit_code: None,
                reason: Some("recovered: the simulator finished after assay died; its output was adopted (exit code unknown)".into()),
            });
            return Some(RunState::Done);
        }
    }
    body.history.push(Attempt {
        started_utc,
        elapsed_s: 0.0,
        exit_code: None,
        reason: Some("lost: assay died during this attempt and no complete output was left".into()),
    });
    body.state = RunState::Pending;
    None
}

/// Time a simulator gets to exit after SIGTERM on interruption before SIGKILL.
const TERM_GRACE: Duration = Duration::from_secs(5);

/// Why the watchdog killed a simulator.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Kill {
    TimedOut,
    Interrupted,
}

/// Longest sleep of the watchdog between checks of the stop flag.
const WATCH_TICK: Duration = Duration::from_millis(50);

/// Watch one simulator's process group until `exited` fires: kill it at `deadline`
/// (SIGKILL), or on interruption (SIGTERM, then SIGKILL after [`TERM_GRACE`]).
fn watch(
    pgid: nix::unistd::Pid,
    deadline: Instant,
    stop: &AtomicBool,
    exited: &std::sync::mpsc::Receiver<()>,
) -> Option<Kill> {
    use nix::sys::signal::{killpg, Signal};
    use std::sync::mpsc::RecvTimeoutError;
    loop {
        let now = Instant::now();
        if stop.load(Ordering::SeqCst) {
            let _ = killpg(pgid, Signal::SIGTERM);
            if let Err(RecvTimeoutError::Timeout) = exited.recv_timeout(TERM_GRACE) {
                let _ = killpg(pgid, Signal::SIGKILL);
            }
            return Some(Kill::Interrupted);
        }
        if now >= deadline {
            // Kill the whole process group: simulators often start helpers.
            let _ = killpg(pgid, Signal::SIGKILL);
            return Some(Kill::TimedOut);
        }
        match exited.recv_timeout((deadline - now).min(WATCH_TICK)) {
            Err(RecvTimeoutError::Timeout) => {}
            _ => return None,
        }
    }
}

/// How one attempt ended.
enum Outcome {
    /// Output values matched to the stations, and the output file's sha256.
    Done(Vec<f64>, String),
    /// Why it failed.
    Failed(String),
    /// Stopped on request; the process group was killed.
    Interrupted,
}

/// One attempt: start, wait with timeout (or interruption), parse.
#[allow(clippy::too_many_arguments)] // one attempt's whole context; called from one place
fn attempt(
    study: &Study,
    e: &Experiment,
    argv: &[String],
    env: &[(String, String)],
    dir: &Path,
    stop: &AtomicBool,
    on_spawn: &dyn Fn(u32) -> Result<()>,
) -> (Option<i32>, Outcome) {
    let sim = &study.simulator;
    let out_path = dir.join(&sim.output.file);
    // A stale output from an earlier attempt must not be mistaken for this one's.
    let _ = std::fs::remove_file(&out_path);
    let stdout = match std::fs::File::create(dir.join("stdout.txt")) {
        Ok(f) => f,
        Err(err) => {
            return (
                None,
                Outcome::Failed(format!("cannot create stdout.txt: {err}")),
            )
        }
    };
    let stderr = match std::fs::File::create(dir.join("stderr.txt")) {
        Ok(f) => f,
        Err(err) => {
            return (
                None,
                Outcome::Failed(format!("cannot create stderr.txt: {err}")),
            )
        }
    };
    let prog = program(study, &argv[0]);
    let mut child = match Command::new(&prog)
        .args(&argv[1..])
        .current_dir(dir)
        .envs(env.iter().map(|(k, v)| (k, v)))
        .stdin(Stdio::null())
        .stdout(stdout)
        .stderr(stderr)
        .process_group(0)
        .spawn()
    {
        Ok(c) => c,
        Err(err) => {
            return (
                None,
                Outcome::Failed(format!("cannot start `{}`: {err}", prog.display())),
            )
        }
    };
    if let Err(err) = on_spawn(child.id()) {
        // Without the child's pid on record a crash of assay could not be recovered:
        // stop this attempt rather than run unrecorded.
        let pgid = nix::unistd::Pid::from_raw(child.id() as i32);
        let _ = nix::sys::signal::killpg(pgid, nix::sys::signal::Signal::SIGKILL);
        let _ = child.wait();
        return (
            None,
            Outcome::Failed(format!("cannot record the simulator's pid: {err:#}")),
        );
    }
    // The worker blocks in wait() so a finished simulator is noticed at once; a watchdog
    // thread enforces the timeout and the interruption by signalling the process group.
    let deadline = Instant::now() + Duration::from_secs_f64(sim.timeout_s);
    let pgid = nix::unistd::Pid::from_raw(child.id() as i32);
    let (exited_tx, exited_rx) = std::sync::mpsc::channel::<()>();
    let (status, kill) = std::thread::scope(|s| {
        let watchdog = s.spawn(move || watch(pgid, deadline, stop, &exited_rx));
        let status = child.wait();
        let _ = exited_tx.send(());
        (status, watchdog.join().unwrap_or(None))
    });
    let status = match status {
        Ok(st) => st,
        Err(err) => {
            return (
                None,
                Outcome::Failed(format!("cannot wait for the simulator: {err}")),
            )
        }
    };
    match kill {
        Some(Kill::Interrupted) => return (None, Outcome::Interrupted),
        Some(Kill::TimedOut) => {
            return (
                None,
                Outcome::Failed(format!(
                    "timed out after {} s (simulator.timeout_s); process group killed",
                    sim.timeout_s
                )),
            )
        }
        None => {}
    }
    let code = status.code();
    if !status.success() {
        let tail = std::fs::read_to_string(dir.join("stderr.txt")).unwrap_or_default();
        let tail: String = tail
            .lines()
            .rev()
            .take(3)
            .collect::<Vec<_>>()
            .into_iter()
            .rev()
            .collect::<Vec<_>>()
            .join(" | ");
        let why = match code {
            Some(c) => format!("exit code {c}"),
            None => match std::os::unix::process::ExitStatusExt::signal(&status) {
                Some(sig) => format!("killed by signal {sig}"),
                None => "ended without an exit code".to_string(),
            },
        };
        return (
            code,
            Outcome::Failed(if tail.is_empty() {
                why
            } else {
                format!("{why}; stderr: {tail}")
            }),
        );
    }
    let text = match std::fs::read_to_string(&out_path) {
        Ok(t) => t,
        Err(err) => {
            return (
                code,
                Outcome::Failed(format!(
                    "output file `{}` not readable: {err}",
                    sim.output.file
                )),
            )
        }
    };
    let parsed = match parse_output(
        &text,
        sim.output.format,
        sim.output.x.as_deref(),
        &sim.output.y,
    ) {
        Ok(p) => p,
        Err(m) => {
            return (
                code,
                Outcome::Failed(format!("output file `{}`: {m}", sim.output.file)),
            )
        }
    };
    let values = match match_stations(&parsed, &e.data.stations()) {
        Ok(v) => v,
        Err(m) => {
            return (
                code,
                Outcome::Failed(format!("output file `{}`: {m}", sim.output.file)),
            )
        }
    };
    match sha256_file(&out_path) {
        Ok(h) => (code, Outcome::Done(values, h)),
        Err(err) => (
            code,
            Outcome::Failed(format!("cannot hash the output: {err}")),
        ),
    }
}
