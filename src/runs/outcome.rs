//! How an attempt ended, judged the same way whichever executor ran it: the exit
//! status, the output file parsed and matched to the field stations, and its record.

use super::parse::{match_stations, parse_output};
use super::store::{Attempt, RunBody, RunState};
use crate::record::{sha256_file, write_record, ProvenanceClock, Record};
use crate::study::{Experiment, Study};
use anyhow::Result;
use std::collections::BTreeMap;
use std::path::Path;

/// How one attempt ended.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Outcome {
    /// Output values matched to the stations, and the output file's sha256.
    Done(Vec<f64>, String),
    /// Why it failed.
    Failed(String),
    /// Stopped on request; the run goes back to pending.
    Interrupted,
}

/// The reason for a non-zero exit: the code or signal, and the last lines of stderr.
pub(crate) fn exit_failure(why: String, dir: &Path) -> String {
    let tail = std::fs::read_to_string(dir.join("stderr.txt")).unwrap_or_default();
    let tail: Vec<&str> = tail.lines().rev().take(3).collect();
    let tail: Vec<&str> = tail.into_iter().rev().collect();
    if tail.is_empty() {
        why
    } else {
        format!("{why}; stderr: {}", tail.join(" | "))
    }
}

/// Read, parse and match the output file of a run that exited cleanly.
pub(crate) fn read_output(study: &Study, e: &Experiment, dir: &Path) -> Outcome {
    let sim = &study.simulator;
    let out_path = dir.join(&sim.output.file);
    if let Err(why) = inside(dir, &out_path) {
        return Outcome::Failed(format!("output file `{}` {why}; not read", sim.output.file));
    }
    let text = match std::fs::read_to_string(&out_path) {
        Ok(t) => t,
        Err(err) => {
            return Outcome::Failed(format!(
                "output file `{}` not readable: {err}",
                sim.output.file
            ))
        }
    };
    let values = parse_output(
        &text,
        sim.output.format,
        sim.output.x.as_deref(),
        &sim.output.y,
    )
    .and_then(|p| match_stations(&p, &e.data.stations()));
    match values {
        Err(m) => Outcome::Failed(format!("output file `{}`: {m}", sim.output.file)),
        Ok(v) => match sha256_file(&out_path) {
            Ok(h) => Outcome::Done(v, h),
            Err(err) => Outcome::Failed(format!("cannot hash the output: {err}")),
        },
    }
}

/// Whether `path` (below the run folder `dir`) leads, through whatever links, to a file
/// inside `dir`. A missing file passes: reading it gives the usual error.
fn inside(dir: &Path, path: &Path) -> Result<(), String> {
    let real = match std::fs::canonicalize(path) {
        Ok(p) => p,
        Err(err) if err.kind() == std::io::ErrorKind::NotFound => {
            if std::fs::symlink_metadata(path).is_ok() {
                return Err("is a symbolic link to nothing".into());
            }
            return Ok(());
        }
        Err(err) => return Err(format!("cannot be resolved: {err}")),
    };
    let dir = std::fs::canonicalize(dir).map_err(|e| format!("run folder: {e}"))?;
    if real.starts_with(&dir) {
        Ok(())
    } else {
        Err(format!(
            "is a symbolic link leading outside the run folder (to {})",
            real.display()
        ))
    }
}

/// What is known of an ended attempt besides its outcome.
#[derive(Debug, Clone)]
pub(crate) struct Ended {
    pub started_utc: String,
    pub elapsed_s: f64,
    pub exit_code: Option<i32>,
}

/// Put an ended attempt into the run's record and write it; returns the new state
/// (`pending` after an interruption, so the run starts again later).
pub(crate) fn settle(
    study: &Study,
    body: &mut RunBody,
    outcome: Outcome,
    ended: Ended,
    record_path: &Path,
    command_line: &[String],
    inputs: &BTreeMap<String, String>,
) -> Result<RunState> {
    let mut clock = ProvenanceClock::start(command_line.to_vec());
    for (k, v) in inputs {
        clock.input_hash(k, v);
    }
    body.exit_code = ended.exit_code;
    body.elapsed_s = Some(ended.elapsed_s);
    body.owner_pid = None;
    body.owner_host = None;
    body.owner_started_utc = None;
    body.child_pid = None;
    let reason = match outcome {
        Outcome::Interrupted => {
            body.state = RunState::Pending;
            body.attempts = body.attempts.saturating_sub(1);
            body.values = None;
            body.outputs_sha256 = None;
            Some("interrupted by the user; will run again".to_string())
        }
        Outcome::Done(values, sha) => {
            body.state = RunState::Done;
            body.values = Some(values);
            clock.input_hash(&format!("output:{}", study.simulator.output.file), &sha);
            body.outputs_sha256 = Some(sha);
            None
        }
        Outcome::Failed(reason) => {
            body.state = RunState::Failed;
            body.values = None;
            body.outputs_sha256 = None;
            Some(reason)
        }
    };
    body.reason = reason.clone();
    body.history.push(Attempt {
        started_utc: ended.started_utc,
        elapsed_s: ended.elapsed_s,
        exit_code: ended.exit_code,
        reason,
    });
    write_record(
        record_path,
        &Record::new("run", clock.finish(), body.clone()),
    )?;
    Ok(body.state)
}
