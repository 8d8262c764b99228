//! The local executor: start each pending run as a child process (never through a
//! shell), `jobs` at a time, with a timeout and retries, and record every attempt.

use super::parse::{match_stations, parse_output};
use super::store::{run_dir, run_record_path, Attempt, RunBody, RunState};
use crate::design::{Design, DesignPoint};
use crate::progress::Observer;
use crate::record::{read_record, sha256_file, write_record, ProvenanceClock, Record};
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

/// Is a `running` record stale (its owner process is gone)?
fn owner_is_gone(body: &RunBody) -> bool {
    let host = gethostname::gethostname().to_string_lossy().into_owned();
    match (body.owner_pid, &body.owner_host) {
        (Some(pid), Some(h)) if *h == host => {
            pid == std::process::id()
                || nix::sys::signal::kill(nix::unistd::Pid::from_raw(pid as i32), None).is_err()
        }
        // Another host: we cannot probe it; a later issue adds leases. Treat as stale.
        _ => true,
    }
}

/// Run every pending or failed run of the design, `jobs` at a time.
///
/// # Errors
/// Only for problems with the campaign folder itself; a failing simulator is recorded
/// in its `run.yaml` and counted in [`RunSummary::failed`].
pub fn run_all(
    study: &Study,
    design: &Design,
    campaign: &Path,
    jobs: usize,
    command_line: &[String],
    stop: &AtomicBool,
    observer: &dyn Observer,
) -> Result<RunSummary> {
    let mut todo = Vec::new();
    let mut summary = RunSummary::default();
    for p in &design.points {
        for e in &study.experiments {
            let path = run_record_path(campaign, &p.id, &e.name);
            let previous = if path.exists() {
                let rec: Record<RunBody> = read_record(&path)?;
                match rec.body.state {
                    RunState::Done => {
                        summary.skipped += 1;
                        continue;
                    }
                    RunState::Running if !owner_is_gone(&rec.body) => {
                        observer.note(&format!(
                            "{}/{} is running in another assay process; left alone",
                            p.id, e.name
                        ));
                        continue;
                    }
                    _ => Some(rec.body),
                }
            } else {
                None
            };
            todo.push((p, e, previous));
        }
    }
    observer.start("runs", todo.len() as u64);
    let next = AtomicUsize::new(0);
    let results = Mutex::new(Vec::new());
    let workers = jobs.max(1).min(todo.len().max(1));
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
                let r = run_one(study, p, e, prev.clone(), campaign, command_line, stop);
                let label = format!("{}/{}", p.id, e.name);
                match &r {
                    Ok(RunState::Done) => observer.advance(1, &format!("{label} done")),
                    Ok(RunState::Pending) => {
                        observer.note(&format!("{label} interrupted; back to pending"))
                    }
                    Ok(_) => {
                        observer.note(&format!(
                            "{label} failed (see {})",
                            run_record_path(campaign, &p.id, &e.name).display()
                        ));
                        observer.advance(1, &format!("{label} failed"));
                    }
                    Err(err) => {
                        observer.note(&format!("{label}: {err:#}"));
                        observer.advance(1, &format!("{label} error"));
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
    Ok(summary)
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

fn run_one(
    study: &Study,
    point: &DesignPoint,
    e: &Experiment,
    previous: Option<RunBody>,
    campaign: &Path,
    command_line: &[String],
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

    let mut argv = Vec::new();
    for a in &study.simulator.command {
        argv.push(placeholder::render(a, &values).map_err(|e| anyhow::anyhow!(e.message))?);
    }
    for f in &study.simulator.files {
        let text = placeholder::render(&f.text, &values).map_err(|e| anyhow::anyhow!(e.message))?;
        crate::record::write_atomic(&dir.join(&f.to), text.as_bytes())?;
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
        values: None,
        value_names: value_names(study, e),
        history: vec![],
    });
    body.parameters = parameters;
    body.command = argv.clone();
    body.value_names = value_names(study, e);

    let max_attempts = 1 + study.simulator.retries;
    for _ in 0..max_attempts {
        let mut clock = ProvenanceClock::start(command_line.to_vec());
        body.state = RunState::Running;
        body.attempts += 1;
        body.owner_pid = Some(std::process::id());
        body.owner_host = Some(gethostname::gethostname().to_string_lossy().into_owned());
        body.values = None;
        body.outputs_sha256 = None;
        write_record(
            &record_path,
            &Record::new("run", clock_snapshot(command_line), body.clone()),
        )?;

        let started = now();
        let t0 = Instant::now();
        let (exit_code, outcome) = attempt(study, e, &argv, &dir, stop);
        let elapsed = t0.elapsed().as_secs_f64();
        body.exit_code = exit_code;
        body.elapsed_s = Some(elapsed);
        body.owner_pid = None;
        body.owner_host = None;
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
                clock.input_hash(&study.simulator.output.file, &sha);
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
fn attempt(
    study: &Study,
    e: &Experiment,
    argv: &[String],
    dir: &Path,
    stop: &AtomicBool,
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
    let deadline = Instant::now() + Duration::from_secs_f64(sim.timeout_s);
    let mut pause = Duration::from_millis(2);
    let status = loop {
        match child.try_wait() {
            Ok(Some(st)) => break st,
            Ok(None) => {}
            Err(err) => {
                return (
                    None,
                    Outcome::Failed(format!("cannot wait for the simulator: {err}")),
                )
            }
        }
        if stop.load(Ordering::SeqCst) {
            let pgid = nix::unistd::Pid::from_raw(child.id() as i32);
            let _ = nix::sys::signal::killpg(pgid, nix::sys::signal::Signal::SIGKILL);
            let _ = child.wait();
            return (None, Outcome::Interrupted);
        }
        if Instant::now() >= deadline {
            // Kill the whole process group: simulators often start helpers.
            let pgid = nix::unistd::Pid::from_raw(child.id() as i32);
            let _ = nix::sys::signal::killpg(pgid, nix::sys::signal::Signal::SIGKILL);
            let _ = child.wait();
            return (
                None,
                Outcome::Failed(format!(
                    "timed out after {} s (simulator.timeout_s); process group killed",
                    sim.timeout_s
                )),
            );
        }
        std::thread::sleep(pause);
        pause = (pause * 2).min(Duration::from_millis(100));
    };
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
            None => "killed by a signal".to_string(),
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
