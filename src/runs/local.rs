//! The local executor: start each pending run as a child process (never through a
//! shell), `jobs` at a time, with a timeout and retries, and record every attempt.

use super::outcome::{exit_failure, read_output, settle, Ended, Outcome};
use super::plan::{job_ids, Plan, RunSummary, RunsError, Todo};
use super::prepare::{prepare, Prepared};
use super::store::{run_record_path, Attempt, RunBody, RunState};
use crate::progress::Observer;
use crate::record::{write_record, write_record_unsynced, ProvenanceClock, Record};
use crate::study::{Experiment, Study};
use anyhow::Result;
use chrono::{SecondsFormat, Utc};
use std::collections::BTreeMap;
use std::os::unix::process::CommandExt;
use std::path::Path;
use std::process::{Command, Stdio};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::{Duration, Instant};

/// Run the plan's runs as child processes, `jobs` at a time.
///
/// The caller holds the campaign lock ([`super::lock_campaign`]), so a record found in
/// state `running` was left by a process that died: it is recovered or run again.
///
/// # Errors
/// [`RunsError::InSlurm`] while runs submitted to Slurm are not collected; problems with
/// the campaign folder itself. A failing simulator is recorded in its `run.yaml` and
/// counted in [`RunSummary::failed`].
pub(crate) fn run_local(
    study: &Study,
    plan: Plan<'_>,
    campaign: &Path,
    jobs: usize,
    command_line: &[String],
    stop: &AtomicBool,
    observer: &dyn Observer,
) -> Result<RunSummary> {
    if !plan.in_flight.is_empty() {
        return Err(RunsError::InSlurm {
            n_runs: plan.in_flight.len(),
            jobs: job_ids(&plan.in_flight),
        }
        .into());
    }
    let Plan {
        fingerprints,
        todo,
        skipped,
        inputs,
        ..
    } = plan;
    let mut summary = RunSummary {
        skipped,
        ..RunSummary::default()
    };
    observer.start("runs", todo.len() as u64);
    let next = AtomicUsize::new(0);
    let n_done = AtomicUsize::new(0);
    let n_failed = AtomicUsize::new(0);
    let n_running = AtomicUsize::new(0);
    let results = Mutex::new(Vec::new());
    let workers = jobs.max(1).min(todo.len().max(1));
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
                let Some(Todo {
                    point: p,
                    experiment: e,
                    previous: prev,
                }) = todo.get(i)
                else {
                    break;
                };
                n_running.fetch_add(1, Ordering::SeqCst);
                let r = prepare(
                    study,
                    p,
                    e,
                    &fingerprints[e.name.as_str()],
                    prev.clone(),
                    campaign,
                )
                .and_then(|prep| run_one(study, e, prep, command_line, &inputs, stop));
                n_running.fetch_sub(1, Ordering::SeqCst);
                let label = format!("{}/{}", p.id, e.name);
                match &r {
                    Ok(RunState::Done) => {
                        n_done.fetch_add(1, Ordering::SeqCst);
                        observer.advance(1, &counts(&n_done, &n_failed, &n_running));
                    }
                    Ok(RunState::Failed) => {
                        n_failed.fetch_add(1, Ordering::SeqCst);
                        observer.note(&format!(
                            "{label} failed (see {})",
                            run_record_path(campaign, &p.id, &e.name).display()
                        ));
                        observer.advance(1, &counts(&n_done, &n_failed, &n_running));
                    }
                    Ok(_) => observer.note(&format!("{label} interrupted; back to pending")),
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
            RunState::Failed => summary.failed += 1,
            _ => summary.interrupted += 1,
        }
    }
    // Runs never started because of an interruption.
    summary.interrupted += todo
        .len()
        .saturating_sub(next.load(Ordering::SeqCst).min(todo.len()));
    Ok(summary)
}

fn now() -> String {
    Utc::now().to_rfc3339_opts(SecondsFormat::Millis, true)
}

fn run_one(
    study: &Study,
    e: &Experiment,
    prep: Prepared,
    command_line: &[String],
    inputs: &BTreeMap<String, String>,
    stop: &AtomicBool,
) -> Result<RunState> {
    let Prepared {
        dir,
        record_path,
        program,
        argv,
        env,
        mut body,
        ..
    } = prep;
    body.slurm = None;
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

        let started_utc = now();
        let t0 = Instant::now();
        let on_spawn = |pid: u32| -> Result<()> {
            let mut b = body.clone();
            b.child_pid = Some(pid);
            write_record_unsynced(
                &record_path,
                &Record::new("run", clock_snapshot(command_line), b),
            )
        };
        let (exit_code, outcome) = attempt(study, e, &program, &argv, &env, &dir, stop, &on_spawn);
        let ended = Ended {
            started_utc,
            elapsed_s: t0.elapsed().as_secs_f64(),
            exit_code,
        };
        let state = settle(
            study,
            &mut body,
            outcome,
            ended,
            &record_path,
            command_line,
            inputs,
        )?;
        if state != RunState::Failed {
            return Ok(state);
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
        if let Outcome::Done(values, sha) = read_output(study, e, dir) {
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

/// A new empty file at `path`. Whatever was there is removed first, so a symbolic link
/// left by an earlier attempt is replaced, never written through.
fn fresh_file(path: &Path) -> std::io::Result<std::fs::File> {
    match std::fs::remove_file(path) {
        Ok(()) => {}
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
        Err(e) => return Err(e),
    }
    std::fs::OpenOptions::new()
        .write(true)
        .create_new(true)
        .open(path)
}

/// One attempt: start, wait with timeout (or interruption), parse.
#[allow(clippy::too_many_arguments)] // one attempt's whole context; called from one place
fn attempt(
    study: &Study,
    e: &Experiment,
    prog: &Path,
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
    let stdout = match fresh_file(&dir.join("stdout.txt")) {
        Ok(f) => f,
        Err(err) => {
            return (
                None,
                Outcome::Failed(format!("cannot create stdout.txt: {err}")),
            )
        }
    };
    let stderr = match fresh_file(&dir.join("stderr.txt")) {
        Ok(f) => f,
        Err(err) => {
            return (
                None,
                Outcome::Failed(format!("cannot create stderr.txt: {err}")),
            )
        }
    };
    let mut child = match Command::new(prog)
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
        let why = match code {
            Some(c) => format!("exit code {c}"),
            None => match std::os::unix::process::ExitStatusExt::signal(&status) {
                Some(sig) => format!("killed by signal {sig}"),
                None => "ended without an exit code".to_string(),
            },
        };
        return (code, Outcome::Failed(exit_failure(why, dir)));
    }
    (code, read_output(study, e, dir))
}
