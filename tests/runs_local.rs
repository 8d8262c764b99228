//! The local run manager with real processes, through the command line: `assay design`,
//! `assay run --jobs 2`, `assay status`, against the test simulator
//! `tests/fixtures/testsim.sh` and its failure modes.
//!
//! Records are decoded with this file's own structs (not the crate's), so a renamed key
//! in `run.yaml` or `design.yaml` fails a test (the keys are documented one by one in
//! docs/records.md).

mod common;

use common::{edit, yaml_string, Env, EXPERIMENT, FIELD_X, N_POINTS};
use serde::Deserialize;
use sha2::{Digest, Sha256};
use std::collections::BTreeMap;
use std::path::Path;
use std::time::Duration;

/// Exit code when every run finished but some failed (README.md lists the exit codes:
/// 0 success, 2 bad input, 3 finished but some runs failed, 1 anything else).
const EXIT_RUNS_FAILED: i32 = 3;

/// Tolerance on a run's output values against A + B·x. The simulator prints 17
/// significant digits, which round-trip exactly; what remains is the interpolation at
/// x = 0.5, y(0) + 0.5·(y(1) − y(0)) against A + 0.5·B, a few ulps apart for |y| ≤ 5.
const VALUE_ATOL: f64 = 1e-12;

/// Pause before a rerun, so that a rewritten file would get a different mtime even on
/// file systems with one-second timestamps.
const MTIME_TICK: Duration = Duration::from_millis(1100);

/// The hanging simulator sleeps this long (tests/fixtures/testsim.sh, MODE=hang); a
/// timed-out run that took this long was not killed.
const HANG_S: f64 = 30.0;

/// A pid far above any that is in use on a test machine: no process has it.
const DEAD_PID: u32 = 999_999;

// ---- Our own view of the records ------------------------------------------------

#[derive(Debug, Deserialize)]
struct DesignRecord {
    kind: String,
    method: String,
    seed: u64,
    points: Vec<BTreeMap<String, serde_yaml::Value>>,
}

/// One design point: id and the values of A and B.
#[derive(Debug, Clone)]
struct Point {
    id: String,
    a: f64,
    b: f64,
}

#[derive(Debug, Deserialize)]
struct AttemptRecord {
    started_utc: String,
    elapsed_s: f64,
    exit_code: Option<i32>,
    reason: Option<String>,
}

#[derive(Debug, Deserialize)]
struct RunRecord {
    kind: String,
    point: String,
    experiment: String,
    state: String,
    attempts: u32,
    exit_code: Option<i32>,
    reason: Option<String>,
    elapsed_s: Option<f64>,
    outputs_sha256: Option<String>,
    parameters: BTreeMap<String, f64>,
    command: Vec<String>,
    values: Option<Vec<f64>>,
    value_names: Vec<String>,
    history: Vec<AttemptRecord>,
}

fn read_design(env: &Env) -> Vec<Point> {
    let text = std::fs::read_to_string(env.campaign().join("design.yaml")).expect("design.yaml");
    let d: DesignRecord = serde_yaml::from_str(&text).expect("design.yaml decodes");
    assert_eq!(d.kind, "design");
    // From the minimal study: `design: {method: lhs, points: 4, seed: 7}`.
    assert_eq!(
        (d.method.as_str(), d.seed, d.points.len()),
        ("lhs", 7, N_POINTS)
    );
    d.points
        .iter()
        .map(|m| Point {
            id: m["id"].as_str().expect("id").to_string(),
            a: m["A"].as_f64().expect("A"),
            b: m["B"].as_f64().expect("B"),
        })
        .collect()
}

fn read_run(path: &Path) -> RunRecord {
    let text = std::fs::read_to_string(path)
        .unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
    serde_yaml::from_str(&text)
        .unwrap_or_else(|e| panic!("{} does not decode: {e}\n{text}", path.display()))
}

fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

fn is_hex64(s: &str) -> bool {
    s.len() == 64
        && s.chars()
            .all(|c| c.is_ascii_hexdigit() && !c.is_ascii_uppercase())
}

// ---- Driving the CLI --------------------------------------------------------------

/// `assay design` then `assay run --jobs 2`; returns the run's exit code and stdout.
fn design_and_run(env: &Env, study: &Path) -> (Option<i32>, String) {
    env.assay(["design"]).arg(study).assert().success();
    run(env, study)
}

/// `assay run --jobs 2`; returns its exit code and stdout.
fn run(env: &Env, study: &Path) -> (Option<i32>, String) {
    let out = env
        .assay(["run", "--jobs", "2"])
        .arg(study)
        .output()
        .expect("assay runs");
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stdout).into_owned() + &String::from_utf8_lossy(&out.stderr),
    )
}

/// The counts of `assay status` for the experiment, read by column header:
/// [pending, running, done, failed] (the local backend never queues).
fn status_counts(env: &Env, study: &Path) -> [usize; 4] {
    let out = env
        .assay(["status"])
        .arg(study)
        .output()
        .expect("assay runs");
    assert_eq!(out.status.code(), Some(0));
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        stdout.contains(&format!("{N_POINTS} design points")),
        "{stdout}"
    );
    let header: Vec<&str> = stdout
        .lines()
        .find(|l| l.split_whitespace().next() == Some("experiment"))
        .unwrap_or_else(|| panic!("no header line:\n{stdout}"))
        .split_whitespace()
        .collect();
    let line = stdout
        .lines()
        .find(|l| l.split_whitespace().next() == Some(EXPERIMENT))
        .unwrap_or_else(|| panic!("no line for `{EXPERIMENT}`:\n{stdout}"));
    let counts: BTreeMap<&str, usize> = header
        .iter()
        .skip(1)
        .copied()
        .zip(
            line.split_whitespace()
                .skip(1)
                .map(|w| w.parse().expect("a count")),
        )
        .collect();
    assert_eq!(counts.get("queued"), Some(&0), "{stdout}");
    ["pending", "running", "done", "failed"].map(|k| {
        *counts
            .get(k)
            .unwrap_or_else(|| panic!("no `{k}` column:\n{stdout}"))
    })
}

/// Every run of a campaign that failed with one reason: check the common fields and
/// return the records.
fn all_failed(env: &Env, points: &[Point]) -> Vec<RunRecord> {
    points
        .iter()
        .map(|p| {
            let r = read_run(&env.run_record(&p.id));
            assert_eq!(r.state, "failed", "{}: {r:?}", p.id);
            assert_eq!(r.attempts, 1, "{}", p.id);
            assert_eq!(r.history.len(), 1, "{}", p.id);
            assert!(
                r.values.is_none() && r.outputs_sha256.is_none(),
                "{}: a failed run has no outputs: {r:?}",
                p.id
            );
            assert!(r.reason.is_some(), "{}: a failed run says why", p.id);
            assert_eq!(r.history[0].reason, r.reason, "{}", p.id);
            r
        })
        .collect()
}

/// Check one finished run against the simulator's formula y = A + B·x.
fn check_done(env: &Env, p: &Point, r: &RunRecord) {
    assert_eq!(r.kind, "run");
    assert_eq!(
        (r.point.as_str(), r.experiment.as_str()),
        (p.id.as_str(), EXPERIMENT)
    );
    assert_eq!(r.state, "done", "{}: {r:?}", p.id);
    assert_eq!(r.attempts, 1, "{}", p.id);
    assert_eq!(r.exit_code, Some(0), "{}", p.id);
    assert_eq!(r.reason, None, "{}", p.id);
    assert!(
        r.elapsed_s.is_some_and(|t| t >= 0.0),
        "{}: {:?}",
        p.id,
        r.elapsed_s
    );
    assert_eq!(r.history.len(), 1, "{}", p.id);
    assert!(!r.history[0].started_utc.is_empty());
    assert_eq!(r.parameters.get("A"), Some(&p.a), "{}", p.id);
    assert_eq!(r.parameters.get("B"), Some(&p.b), "{}", p.id);

    let out = std::fs::read(env.run_folder(&p.id).join("out.csv")).expect("out.csv");
    let sha = r.outputs_sha256.as_deref().expect("outputs_sha256");
    assert!(is_hex64(sha), "not 64 lowercase hex digits: {sha}");
    assert_eq!(
        sha,
        sha256_hex(&out),
        "{}: outputs_sha256 is not the hash of out.csv",
        p.id
    );

    // One value per field x, named `y@<x>` (the field x values of the minimal study).
    assert_eq!(r.value_names, ["y@0", "y@0.5", "y@2"]);
    let values = r.values.as_ref().expect("values");
    assert_eq!(values.len(), FIELD_X.len());
    for (v, x) in values.iter().zip(FIELD_X) {
        let expected = p.a + p.b * x;
        assert!(
            (v - expected).abs() <= VALUE_ATOL,
            "{}: y({x}) = {v}, expected A + B·x = {expected}",
            p.id
        );
    }
}

// ---- Tests ------------------------------------------------------------------------

#[test]
fn an_all_ok_campaign_records_every_run() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(0), "{out}");
    assert!(
        out.contains(&format!(
            "runs: {N_POINTS} done now, 0 failed, 0 already done"
        )),
        "{out}"
    );
    let points = read_design(&env);
    for p in &points {
        check_done(&env, p, &read_run(&env.run_record(&p.id)));
    }
    assert_eq!(status_counts(&env, &study), [0, 0, N_POINTS, 0]);
}

#[test]
fn status_before_any_run_counts_every_run_as_pending() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    env.assay(["design"]).arg(&study).assert().success();
    assert_eq!(status_counts(&env, &study), [N_POINTS, 0, 0, 0]);
}

#[test]
fn a_second_run_repeats_nothing() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(0), "{out}");
    let points = read_design(&env);
    let before: Vec<(Vec<u8>, std::time::SystemTime)> = points
        .iter()
        .map(|p| {
            let rec = std::fs::read(env.run_record(&p.id)).expect("run.yaml");
            let mtime = std::fs::metadata(env.run_folder(&p.id).join("out.csv"))
                .and_then(|m| m.modified())
                .expect("mtime");
            (rec, mtime)
        })
        .collect();
    std::thread::sleep(MTIME_TICK);

    let (code, out) = run(&env, &study);
    assert_eq!(code, Some(0), "{out}");
    assert!(
        out.contains(&format!(
            "runs: 0 done now, 0 failed, {N_POINTS} already done"
        )),
        "{out}"
    );
    for (p, (rec, mtime)) in points.iter().zip(before) {
        let r = read_run(&env.run_record(&p.id));
        assert_eq!(r.attempts, 1, "{} was run again", p.id);
        // The record is untouched (its provenance times would change on a rewrite) ...
        assert_eq!(
            std::fs::read(env.run_record(&p.id)).expect("run.yaml"),
            rec,
            "{}: run.yaml rewritten",
            p.id
        );
        // ... and so is the simulator's output.
        let now = std::fs::metadata(env.run_folder(&p.id).join("out.csv"))
            .and_then(|m| m.modified())
            .expect("mtime");
        assert_eq!(now, mtime, "{}: out.csv rewritten", p.id);
    }
}

#[test]
fn a_failing_simulator_is_recorded_with_its_exit_code_and_stderr() {
    let env = Env::new();
    let study = env.write_minimal_study("fail");
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(EXIT_RUNS_FAILED), "{out}");
    assert!(
        out.contains(&format!("runs: 0 done now, {N_POINTS} failed")),
        "{out}"
    );
    let points = read_design(&env);
    for r in all_failed(&env, &points) {
        // testsim.sh MODE=fail exits 3 and says so on stderr.
        assert_eq!(r.exit_code, Some(3));
        let reason = r.reason.as_deref().unwrap_or_default();
        assert!(reason.contains("exit code 3"), "{reason}");
        assert!(reason.contains("testsim: failing on purpose"), "{reason}");
    }
    assert_eq!(status_counts(&env, &study), [0, 0, 0, N_POINTS]);
}

#[test]
fn failed_runs_are_tried_again_by_the_next_run() {
    let env = Env::new();
    let study = env.write_minimal_study("fail");
    let (code, _) = design_and_run(&env, &study);
    assert_eq!(code, Some(EXIT_RUNS_FAILED));
    let (code, out) = run(&env, &study);
    assert_eq!(code, Some(EXIT_RUNS_FAILED), "{out}");
    for p in read_design(&env) {
        let r = read_run(&env.run_record(&p.id));
        assert_eq!(
            (r.state.as_str(), r.attempts, r.history.len()),
            ("failed", 2, 2),
            "{}",
            p.id
        );
    }
}

#[test]
fn a_hanging_simulator_is_killed_at_the_timeout() {
    let env = Env::new();
    let text = edit(&env.minimal_study("hang"), "timeout_s: 20", "timeout_s: 1");
    let study = env.write_study_text(&text);
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(EXIT_RUNS_FAILED), "{out}");
    for r in all_failed(&env, &read_design(&env)) {
        let reason = r.reason.as_deref().unwrap_or_default();
        assert!(reason.contains("timed out"), "{reason}");
        assert_eq!(r.exit_code, None, "a killed run has no exit code");
        let t = r.elapsed_s.expect("elapsed_s");
        assert!(
            t < HANG_S,
            "the run took {t} s: the simulator was not killed"
        );
    }
}

#[test]
fn a_nan_in_the_output_fails_the_run() {
    let env = Env::new();
    let study = env.write_minimal_study("nan");
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(EXIT_RUNS_FAILED), "{out}");
    for r in all_failed(&env, &read_design(&env)) {
        let reason = r.reason.as_deref().unwrap_or_default();
        assert_eq!(r.exit_code, Some(0), "the simulator itself succeeded");
        assert!(reason.contains("not a finite number"), "{reason}");
        assert!(reason.contains("out.csv"), "{reason}");
    }
}

#[test]
fn garbage_output_fails_the_run_and_names_the_file() {
    let env = Env::new();
    let study = env.write_minimal_study("garbage");
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(EXIT_RUNS_FAILED), "{out}");
    for r in all_failed(&env, &read_design(&env)) {
        let reason = r.reason.as_deref().unwrap_or_default();
        assert!(reason.contains("output file `out.csv`"), "{reason}");
        // The garbage has no column `x`, which is what the study asks for first.
        assert!(reason.contains("no column `x`"), "{reason}");
    }
}

#[test]
fn a_simulator_killed_by_a_signal_fails_the_run_and_names_the_signal() {
    let env = Env::new();
    let study = env.write_minimal_study("signal");
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(EXIT_RUNS_FAILED), "{out}");
    for r in all_failed(&env, &read_design(&env)) {
        let reason = r.reason.as_deref().unwrap_or_default();
        assert_eq!(r.exit_code, None, "no exit code after a signal");
        // SIGKILL is signal 9 on Linux (signal(7)).
        assert!(reason.contains("killed by signal 9"), "{reason}");
    }
}

#[test]
fn too_few_output_rows_fail_the_run() {
    let env = Env::new();
    let study = env.write_minimal_study("fewrows");
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(EXIT_RUNS_FAILED), "{out}");
    for r in all_failed(&env, &read_design(&env)) {
        let reason = r.reason.as_deref().unwrap_or_default();
        assert!(
            reason.contains("field x = 2 is outside the simulated range [0, 1]"),
            "{reason}"
        );
    }
}

#[test]
fn a_missing_output_fails_the_run_and_names_the_file() {
    let env = Env::new();
    let study = env.write_minimal_study("noout");
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(EXIT_RUNS_FAILED), "{out}");
    for r in all_failed(&env, &read_design(&env)) {
        let reason = r.reason.as_deref().unwrap_or_default();
        assert!(
            reason.contains("output file `out.csv` not readable"),
            "{reason}"
        );
    }
}

#[test]
fn a_flaky_simulator_succeeds_on_its_retry() {
    let env = Env::new();
    let text = edit(&env.minimal_study("flaky"), "retries: 0", "retries: 1");
    let study = env.write_study_text(&text);
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(0), "{out}");
    for p in read_design(&env) {
        let r = read_run(&env.run_record(&p.id));
        assert_eq!(r.state, "done", "{}: {r:?}", p.id);
        assert_eq!(r.attempts, 2, "{}", p.id);
        assert_eq!(r.exit_code, Some(0), "{}", p.id);
        assert_eq!(r.reason, None, "{}", p.id);
        assert_eq!(r.history.len(), 2, "{}", p.id);
        // testsim.sh MODE=flaky exits 4 on its first call in a run folder.
        let first = r.history[0].reason.as_deref().unwrap_or_default();
        assert!(first.contains("exit code 4"), "{first}");
        assert_eq!(r.history[0].exit_code, Some(4));
        assert_eq!(
            (r.history[1].exit_code, r.history[1].reason.as_deref()),
            (Some(0), None)
        );
        assert!(r.history.iter().all(|a| a.elapsed_s >= 0.0));
        assert!(r.values.is_some() && r.outputs_sha256.is_some());
    }
}

/// Set `state: running` and the owner of a finished run's record by hand, as if an
/// assay process had died (or were still busy) in the middle of the run.
fn mark_running(record: &Path, pid: u32, host: &str) {
    let text = std::fs::read_to_string(record).expect("run.yaml");
    let mut v: serde_yaml::Value = serde_yaml::from_str(&text).expect("yaml");
    let m = v.as_mapping_mut().expect("a mapping");
    for (k, val) in [
        ("state", serde_yaml::Value::from("running")),
        ("owner_pid", serde_yaml::Value::from(pid)),
        ("owner_host", serde_yaml::Value::from(host)),
    ] {
        assert!(m.contains_key(k), "run.yaml has no key `{k}`");
        m.insert(k.into(), val);
    }
    std::fs::write(record, serde_yaml::to_string(&v).expect("yaml")).expect("write run.yaml");
}

fn this_host() -> String {
    gethostname::gethostname().to_string_lossy().into_owned()
}

#[test]
fn a_run_left_running_by_a_dead_process_is_run_again() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    let (code, _) = design_and_run(&env, &study);
    assert_eq!(code, Some(0));
    let points = read_design(&env);
    let stale = &points[1];
    mark_running(&env.run_record(&stale.id), DEAD_PID, &this_host());
    assert_eq!(status_counts(&env, &study), [0, 1, N_POINTS - 1, 0]);

    let (code, out) = run(&env, &study);
    assert_eq!(code, Some(0), "{out}");
    assert!(
        out.contains(&format!(
            "runs: 1 done now, 0 failed, {} already done",
            N_POINTS - 1
        )),
        "{out}"
    );
    for p in &points {
        let r = read_run(&env.run_record(&p.id));
        assert_eq!(r.state, "done", "{}", p.id);
        let expected = if p.id == stale.id { 2 } else { 1 };
        assert_eq!(r.attempts, expected, "{}", p.id);
    }
}

/// What `assay` writes to stderr and its exit code.
fn run_with_stderr(env: &Env, study: &Path, extra: &[&str]) -> (Option<i32>, String) {
    let out = env
        .assay(["run", "--jobs", "2"])
        .args(extra)
        .arg(study)
        .output()
        .expect("assay runs");
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn a_campaign_locked_by_another_process_is_refused_and_then_resumed() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    let (code, _) = design_and_run(&env, &study);
    assert_eq!(code, Some(0));
    let points = read_design(&env);
    let busy = &points[0];
    // This test process is alive and on this host: it stands in for a busy assay that
    // holds the campaign lock (`<campaign>/.lock`, an advisory flock) while it runs.
    mark_running(&env.run_record(&busy.id), std::process::id(), &this_host());
    let lock_file = std::fs::OpenOptions::new()
        .read(true)
        .write(true)
        .open(env.campaign().join(".lock"))
        .expect("assay leaves a lock file in the campaign folder");
    let lock = nix::fcntl::Flock::lock(lock_file, nix::fcntl::FlockArg::LockExclusiveNonblock)
        .map_err(|(_, e)| e)
        .expect("the lock is free between invocations");
    let before = std::fs::read(env.run_record(&busy.id)).expect("run.yaml");

    let (code, stderr) = run_with_stderr(&env, &study, &[]);
    // A held lock is neither bad input nor a failed run: exit code 1 (docs/records.md,
    // "The campaign folder").
    assert_eq!(code, Some(1), "{stderr}");
    assert!(
        stderr.contains("is in use by another assay process"),
        "{stderr}"
    );
    assert_eq!(
        std::fs::read(env.run_record(&busy.id)).expect("run.yaml"),
        before,
        "a locked campaign was touched"
    );

    // Once the holder is gone, a record still in state `running` was left by a dead
    // process, whatever its pid: it is run again.
    drop(lock);
    let (code, out) = run(&env, &study);
    assert_eq!(code, Some(0), "{out}");
    let r = read_run(&env.run_record(&busy.id));
    assert_eq!((r.state.as_str(), r.attempts), ("done", 2));
}

#[test]
fn a_changed_command_is_refused_until_rerun_is_asked_for() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    let (code, _) = design_and_run(&env, &study);
    assert_eq!(code, Some(0));
    // The same output file, but another command text: done runs no longer match it.
    let text = edit(
        &env.minimal_study("ok"),
        "\"{{run_dir}}/out.csv\"",
        "\"{{run_dir}}/./out.csv\"",
    );
    env.write("study.yaml", &text);

    let (code, stderr) = run_with_stderr(&env, &study, &[]);
    assert_eq!(code, Some(2), "{stderr}");
    assert!(stderr.contains("simulator.command"), "{stderr}");
    assert!(stderr.contains("--rerun"), "{stderr}");
    let points = read_design(&env);
    for p in &points {
        assert_eq!(
            read_run(&env.run_record(&p.id)).attempts,
            1,
            "{} was run again",
            p.id
        );
    }

    let (code, stderr) = run_with_stderr(&env, &study, &["--rerun"]);
    assert_eq!(code, Some(0), "{stderr}");
    for p in &points {
        let r = read_run(&env.run_record(&p.id));
        assert_eq!((r.state.as_str(), r.attempts), ("done", 2), "{}", p.id);
        assert_eq!(
            r.command.last().map(String::as_str),
            Some(
                format!(
                    "{}/./out.csv",
                    env.run_folder(&p.id)
                        .canonicalize()
                        .expect("run folder")
                        .display()
                )
                .as_str()
            )
        );
    }
}

#[test]
fn simulator_env_values_are_rendered_and_passed() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("env"),
        "  timeout_s: 20\n",
        "  timeout_s: 20\n  env: {TESTSIM_A: \"{{A}}\", TESTSIM_B: \"{{ B }}\"}\n",
    );
    let study = env.write_study_text(&text);
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(0), "{out}");
    for p in read_design(&env) {
        // testsim.sh MODE=env reads A and B from TESTSIM_A and TESTSIM_B.
        check_done(&env, &p, &read_run(&env.run_record(&p.id)));
    }
}

#[test]
fn arguments_are_never_passed_through_a_shell() {
    let env = Env::new();
    let arg = "x; touch pwned $(touch pwned2) `touch pwned3` && echo $HOME > pwned4";
    let text = edit(
        &env.minimal_study("ok"),
        "\"ok\", \"{{A}}\"",
        &format!("\"echoarg\", {}", yaml_string(arg)),
    );
    let study = env.write_study_text(&text);
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(0), "{out}");
    for p in read_design(&env) {
        let folder = env.run_folder(&p.id);
        // testsim.sh MODE=echoarg writes its second argument verbatim to ./arg.txt.
        assert_eq!(
            std::fs::read_to_string(folder.join("arg.txt")).expect("arg.txt"),
            arg
        );
        let r = read_run(&env.run_record(&p.id));
        assert_eq!(
            r.command.get(2).map(String::as_str),
            Some(arg),
            "{:?}",
            r.command
        );
        for pwned in ["pwned", "pwned2", "pwned3", "pwned4"] {
            for dir in [folder.as_path(), env.dir.path(), env.campaign().as_path()] {
                assert!(
                    !dir.join(pwned).exists(),
                    "{} exists: the argument went through a shell",
                    dir.join(pwned).display()
                );
            }
        }
    }
}

#[test]
fn template_files_are_rendered_into_the_run_folder() {
    let env = Env::new();
    env.write(
        "deck.tmpl",
        "# deck for {{run_id}}\na = {{A}}\nb = {{ B }}\n",
    );
    let text = edit(
        &env.minimal_study("ok"),
        "\"ok\", \"{{A}}\", \"{{B}}\"",
        "\"deck\", \"{{run_dir}}/deck.inp\", \"_\"",
    );
    let text = edit(
        &text,
        "  output:\n",
        "  files:\n    - {template: deck.tmpl, to: deck.inp}\n  output:\n",
    );
    let study = env.write_study_text(&text);
    let (code, out) = design_and_run(&env, &study);
    assert_eq!(code, Some(0), "{out}");
    for p in read_design(&env) {
        // Numbers render in shortest round-trip form (docs/study.md, "Placeholders"),
        // which is Rust's `{}`; run_id is `<point>-<experiment>`.
        let deck =
            std::fs::read_to_string(env.run_folder(&p.id).join("deck.inp")).expect("deck.inp");
        assert_eq!(
            deck,
            format!(
                "# deck for {}-{EXPERIMENT}\na = {}\nb = {}\n",
                p.id, p.a, p.b
            )
        );
        // testsim.sh MODE=deck read A and B from the deck: the outputs follow A + B·x.
        check_done(&env, &p, &read_run(&env.run_record(&p.id)));
    }
}
