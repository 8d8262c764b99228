//! The Slurm backend against a real Slurm (tests/slurm/local-slurm starts a single-node
//! one; `.ci/run` does so before `make test`).
//!
//! These tests run whenever `sinfo` answers. When it does not, they print that they were
//! skipped, unless `CI` is set: then Slurm is required and they fail.
//!
//! Records are decoded with this file's own structs, so a renamed key in `run.yaml`
//! fails a test.

mod common;

use common::{edit, ensure_model_binary, repo_root, yaml_string, Env, N_POINTS};
use serde::Deserialize;
use std::collections::BTreeMap;
use std::path::Path;
use std::process::Command;
use std::sync::Mutex;
use std::time::{Duration, Instant};

/// One Slurm test at a time: the single node has few CPUs, and the cancellation test
/// needs to know which tasks are still waiting.
static SLURM: Mutex<()> = Mutex::new(());

/// Exit code when every run finished but some failed (README.md lists the exit codes:
/// 0 success, 2 bad input, 3 finished but some runs failed, 1 anything else).
const EXIT_RUNS_FAILED: i32 = 3;

/// True when Slurm answers. Without Slurm: skipped with a message, or a failure in CI.
fn slurm_ready(test: &str) -> bool {
    let ok = Command::new("sinfo")
        .args(["-h", "-o", "%t"])
        .output()
        .map(|o| {
            o.status.success()
                && String::from_utf8_lossy(&o.stdout)
                    .lines()
                    .any(|l| matches!(l.trim(), "idle" | "mix" | "alloc"))
        })
        .unwrap_or(false);
    if !ok {
        assert!(
            std::env::var_os("CI").is_none(),
            "CI is set but Slurm does not answer (no idle node in `sinfo`): start it with tests/slurm/local-slurm start"
        );
        eprintln!(
            "SKIPPED {test}: Slurm does not answer (`sinfo` shows no usable node); start one with tests/slurm/local-slurm start"
        );
    }
    ok
}

/// This test's turn on the Slurm node, or `None` when Slurm does not answer (see
/// [`slurm_ready`]).
fn slurm_turn(test: &str) -> Option<std::sync::MutexGuard<'static, ()>> {
    let guard = SLURM.lock().unwrap_or_else(|e| e.into_inner());
    slurm_ready(test).then_some(guard)
}

#[derive(Debug, Deserialize)]
struct SlurmTaskRecord {
    job: String,
    array_job_id: String,
    task: u32,
    script: String,
}

#[derive(Debug, Deserialize)]
struct AttemptRecord {
    reason: Option<String>,
}

#[derive(Debug, Deserialize)]
struct RunRecord {
    kind: String,
    state: String,
    attempts: u32,
    exit_code: Option<i32>,
    reason: Option<String>,
    key: String,
    values: Option<Vec<f64>>,
    slurm: Option<SlurmTaskRecord>,
    history: Vec<AttemptRecord>,
}

fn read_run(path: &Path) -> RunRecord {
    let text = std::fs::read_to_string(path)
        .unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
    serde_yaml::from_str(&text).unwrap_or_else(|e| panic!("{}: {e}\n{text}", path.display()))
}

/// Every `run.yaml` under a campaign folder, by `<point>/<experiment>`.
fn runs_of(campaign: &Path) -> BTreeMap<String, RunRecord> {
    let mut out = BTreeMap::new();
    for p in std::fs::read_dir(campaign.join("runs")).expect("runs folder") {
        let p = p.expect("entry").path();
        for e in std::fs::read_dir(&p).expect("point folder") {
            let e = e.expect("entry").path();
            let rec = e.join("run.yaml");
            if rec.exists() {
                let label = format!(
                    "{}/{}",
                    p.file_name().unwrap().to_string_lossy(),
                    e.file_name().unwrap().to_string_lossy()
                );
                out.insert(label, read_run(&rec));
            }
        }
    }
    out
}

/// The minimal study with the Slurm backend and a short poll.
fn slurm_study(env: &Env, mode: &str, extra_slurm: &str, retries: u32) -> std::path::PathBuf {
    let text = env.minimal_study(mode);
    let text = edit(&text, "  retries: 0\n", &format!("  retries: {retries}\n"));
    let text =
        format!("{text}execution:\n  backend: slurm\n  slurm:\n    poll_s: 0.3\n{extra_slurm}");
    env.write_study_text(&text)
}

fn stdout_of(o: &std::process::Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// A 40-run campaign of the bundled cantilever through Slurm gives the same run keys
/// and bit-identical output values as the local backend, and names its array tasks.
#[test]
fn forty_runs_through_slurm_match_the_local_backend() {
    let Some(_g) = slurm_turn("forty_runs_through_slurm_match_the_local_backend") else {
        return;
    };
    let bin = ensure_model_binary("cantilever");
    let env = Env::new();
    let env_slurm = Env::new();
    let src = std::fs::read_to_string(repo_root().join("models/cantilever/study.yaml"))
        .expect("bundled study");
    let dir = repo_root().join("models/cantilever");
    let text = edit(&src, "points: 30", "points: 20");
    let text = edit(
        &text,
        "\"../../target/release/cantilever\"",
        &yaml_string(&bin.display().to_string()),
    );
    let text = edit(
        &text,
        "data: field-A.csv",
        &format!(
            "data: {}",
            yaml_string(&dir.join("field-A.csv").display().to_string())
        ),
    );
    let text = edit(
        &text,
        "data: field-B.csv",
        &format!(
            "data: {}",
            yaml_string(&dir.join("field-B.csv").display().to_string())
        ),
    );
    let local = env.write("study.yaml", &text);
    let slurm_text = edit(
        &text,
        "execution: {backend: local}",
        "execution: {backend: slurm, slurm: {poll_s: 0.3, array_limit: 40}}",
    );
    let slurm = env_slurm.write("study.yaml", &slurm_text);
    for (e, study) in [(&env, &local), (&env_slurm, &slurm)] {
        e.assay(["design"]).arg(study).assert().success();
        e.assay(["run"]).arg(study).assert().success();
    }
    let a = runs_of(&env.runs_root().join("cantilever"));
    let b = runs_of(&env_slurm.runs_root().join("cantilever"));
    assert_eq!(a.len(), 40);
    assert_eq!(a.keys().collect::<Vec<_>>(), b.keys().collect::<Vec<_>>());
    let mut tasks = Vec::new();
    for (label, l) in &a {
        let s = &b[label];
        assert_eq!(l.kind, "run");
        assert_eq!(
            (l.state.as_str(), s.state.as_str()),
            ("done", "done"),
            "{label}"
        );
        assert_eq!(l.key, s.key, "{label}: same run identity on both backends");
        assert_eq!(l.values, s.values, "{label}: bit-identical output values");
        assert!(l.slurm.is_none(), "{label}: a local run has no slurm entry");
        let t = s.slurm.as_ref().expect("a Slurm run names its task");
        assert_eq!(t.job, format!("{}_{}", t.array_job_id, t.task));
        assert!(env_slurm
            .runs_root()
            .join("cantilever")
            .join(&t.script)
            .exists());
        tasks.push(t.task);
    }
    tasks.sort_unstable();
    assert_eq!(
        tasks,
        (0..40).collect::<Vec<u32>>(),
        "one array task per run"
    );
}

/// `run --detach` returns with the runs queued; `status` lists them with their job;
/// a later `run` collects them all.
#[test]
fn detach_then_status_then_collect() {
    let Some(_g) = slurm_turn("detach_then_status_then_collect") else {
        return;
    };
    let env = Env::new();
    let study = slurm_study(&env, "slow", "", 0);
    env.assay(["design"]).arg(&study).assert().success();
    let t0 = Instant::now();
    let out = env
        .assay(["run", "--detach"])
        .arg(&study)
        .output()
        .expect("assay runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        t0.elapsed() < Duration::from_secs(2 * N_POINTS as u64),
        "--detach waited for the runs"
    );
    assert!(
        stdout_of(&out).contains("in Slurm (jobs "),
        "{}",
        stdout_of(&out)
    );
    let runs = runs_of(&env.campaign());
    assert_eq!(runs.len(), N_POINTS);
    let job = runs
        .values()
        .next()
        .unwrap()
        .slurm
        .as_ref()
        .unwrap()
        .array_job_id
        .clone();
    for (label, r) in &runs {
        assert!(
            r.state == "queued" || r.state == "running",
            "{label} is {} right after submission",
            r.state
        );
        assert_eq!(r.slurm.as_ref().unwrap().array_job_id, job);
    }
    let status = env.assay(["status"]).arg(&study).output().expect("status");
    let text = stdout_of(&status);
    assert!(text.contains(&format!("in Slurm (jobs {job})")), "{text}");
    assert!(text.contains("queued"), "{text}");
    env.assay(["run"]).arg(&study).assert().success();
    for (label, r) in runs_of(&env.campaign()) {
        assert_eq!(r.state, "done", "{label}");
        assert_eq!(r.attempts, 1, "{label}: collected, not submitted again");
        assert_eq!(r.slurm.unwrap().array_job_id, job);
    }
    let status = env.assay(["status"]).arg(&study).output().expect("status");
    assert!(
        !stdout_of(&status).contains("in Slurm"),
        "{}",
        stdout_of(&status)
    );
}

/// Tasks cancelled with `scancel` while waiting become failed runs with Slurm's reason
/// and are submitted again (retries: 1), so the campaign still ends complete.
#[test]
fn scancelled_tasks_fail_with_the_reason_and_are_retried() {
    let Some(_g) = slurm_turn("scancelled_tasks_fail_with_the_reason_and_are_retried") else {
        return;
    };
    let env = Env::new();
    // One task at a time, 2 s each: the last two wait long enough to be cancelled.
    let study = slurm_study(&env, "slow", "    array_limit: 1\n", 1);
    env.assay(["design"]).arg(&study).assert().success();
    env.assay(["run", "--detach"])
        .arg(&study)
        .assert()
        .success();
    let runs = runs_of(&env.campaign());
    let mut by_task: Vec<(u32, String, String)> = runs
        .iter()
        .map(|(l, r)| {
            let t = r.slurm.as_ref().unwrap();
            (t.task, t.job.clone(), l.clone())
        })
        .collect();
    by_task.sort();
    let cancelled: Vec<&(u32, String, String)> = by_task.iter().rev().take(2).collect();
    let st = Command::new("scancel")
        .args(cancelled.iter().map(|c| c.1.as_str()))
        .status()
        .expect("scancel runs");
    assert!(st.success());
    env.assay(["run"]).arg(&study).assert().success();
    let after = runs_of(&env.campaign());
    for (_, job, label) in &cancelled {
        let r = &after[label];
        assert_eq!(r.state, "done", "{label} was retried to completion");
        assert_eq!(r.attempts, 2, "{label}");
        let first = r.history[0].reason.as_deref().unwrap_or("");
        assert!(
            first.to_lowercase().contains("cancel") && first.contains(job.as_str()),
            "{label}: first attempt's reason names the cancellation and the task: {first}"
        );
        assert_ne!(&r.slurm.as_ref().unwrap().job, job, "{label}: a new task");
    }
    for (_, _, label) in by_task.iter().take(N_POINTS - 2) {
        assert_eq!(after[label].attempts, 1, "{label} was not cancelled");
    }
}

/// A simulator that fails inside its task: the run fails with the exit code, the task
/// and the simulator's stderr; `run` exits with code 3.
#[test]
fn a_failing_simulator_inside_a_task_is_recorded() {
    let Some(_g) = slurm_turn("a_failing_simulator_inside_a_task_is_recorded") else {
        return;
    };
    let env = Env::new();
    let study = slurm_study(&env, "fail", "", 1);
    env.assay(["design"]).arg(&study).assert().success();
    env.assay(["run"])
        .arg(&study)
        .assert()
        .code(EXIT_RUNS_FAILED);
    for (label, r) in runs_of(&env.campaign()) {
        assert_eq!(r.state, "failed", "{label}");
        assert_eq!(r.attempts, 2, "{label}: one retry");
        assert_eq!(r.exit_code, Some(3), "{label}");
        let reason = r.reason.unwrap_or_default();
        assert!(
            reason.contains("exit code 3")
                && reason.contains("Slurm task")
                && reason.contains("failing on purpose"),
            "{label}: {reason}"
        );
    }
}

/// The job script is readable, names the study's Slurm options, and quotes arguments
/// so that a value with spaces and quotes reaches the simulator unchanged.
#[test]
fn job_script_carries_the_options_and_quotes_arguments() {
    let Some(_g) = slurm_turn("job_script_carries_the_options_and_quotes_arguments") else {
        return;
    };
    let env = Env::new();
    let study = slurm_study(
        &env,
        "echoarg",
        "    array_limit: 2\n    cpus_per_task: 1\n    prelude: |\n      export ASSAY_PRELUDE_RAN=yes\n",
        0,
    );
    let text = std::fs::read_to_string(&study).expect("study");
    let text = edit(&text, "\"{{A}}\"", "\"it's {{A}} \\\"quoted\\\" $HOME\"");
    std::fs::write(&study, text).expect("write");
    env.assay(["design"]).arg(&study).assert().success();
    env.assay(["run"]).arg(&study).assert().success();
    let script =
        std::fs::read_to_string(env.campaign().join("slurm/submit-0001.sh")).expect("job script");
    assert!(script.contains("#SBATCH --array=0-3%2"), "{script}");
    assert!(script.contains("#SBATCH --cpus-per-task=1"), "{script}");
    assert!(script.contains("export ASSAY_PRELUDE_RAN=yes"), "{script}");
    for (label, r) in runs_of(&env.campaign()) {
        assert_eq!(r.state, "done", "{label}");
        let point = label.split('/').next().unwrap();
        let arg = std::fs::read_to_string(env.run_folder(point).join("arg.txt")).expect("arg");
        assert!(
            arg.starts_with("it's ") && arg.contains(" \"quoted\" $HOME"),
            "{label}: the argument arrived changed: {arg}"
        );
    }
}

/// A simulator past `timeout_s` is stopped inside its task and the run fails with the
/// timeout named, as on the local backend.
#[test]
fn a_run_past_its_timeout_is_stopped_inside_its_task() {
    let Some(_g) = slurm_turn("a_run_past_its_timeout_is_stopped_inside_its_task") else {
        return;
    };
    let env = Env::new();
    let study = slurm_study(&env, "hang", "", 0);
    let text = std::fs::read_to_string(&study).expect("study");
    std::fs::write(&study, edit(&text, "timeout_s: 20", "timeout_s: 2")).expect("write");
    env.assay(["design"]).arg(&study).assert().success();
    env.assay(["run"])
        .arg(&study)
        .assert()
        .code(EXIT_RUNS_FAILED);
    for (label, r) in runs_of(&env.campaign()) {
        assert_eq!(r.state, "failed", "{label}");
        let reason = r.reason.unwrap_or_default();
        assert!(reason.contains("timed out after 2 s"), "{label}: {reason}");
    }
}

/// Ctrl-C while `assay run` waits: it stops waiting at once, leaves the jobs in Slurm,
/// says how to collect and cancel them; the next `run` collects without resubmitting.
#[test]
fn ctrl_c_leaves_the_jobs_running_and_the_next_run_collects_them() {
    use nix::sys::signal::{kill, Signal};
    use nix::unistd::Pid;
    let Some(_g) = slurm_turn("ctrl_c_leaves_the_jobs_running_and_the_next_run_collects_them")
    else {
        return;
    };
    let env = Env::new();
    let study = slurm_study(&env, "slow", "    array_limit: 1\n", 0);
    env.assay(["design"]).arg(&study).assert().success();
    let child = Command::new(env!("CARGO_BIN_EXE_assay"))
        .arg("--runs")
        .arg(env.runs_root())
        .args(["--quiet", "run"])
        .arg(&study)
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .expect("assay starts");
    let deadline = Instant::now() + Duration::from_secs(30);
    loop {
        let runs = if env.campaign().join("runs").exists() {
            runs_of(&env.campaign())
        } else {
            BTreeMap::new()
        };
        if runs.len() == N_POINTS && runs.values().all(|r| r.slurm.is_some()) {
            break;
        }
        assert!(Instant::now() < deadline, "the runs were not submitted");
        std::thread::sleep(Duration::from_millis(100));
    }
    kill(Pid::from_raw(child.id() as i32), Signal::SIGINT).expect("SIGINT");
    let t0 = Instant::now();
    let out = child.wait_with_output().expect("assay ends");
    assert!(
        t0.elapsed() < Duration::from_secs(5),
        "assay kept waiting after Ctrl-C"
    );
    let text = stdout_of(&out);
    let runs = runs_of(&env.campaign());
    let job = runs
        .values()
        .next()
        .unwrap()
        .slurm
        .as_ref()
        .unwrap()
        .array_job_id
        .clone();
    assert!(text.contains(&format!("scancel {job}")), "{text}");
    let q = Command::new("squeue")
        .args(["-h", "-r", "-o", "%i", "-j", &job])
        .output()
        .expect("squeue");
    assert!(
        !String::from_utf8_lossy(&q.stdout).trim().is_empty(),
        "the jobs were cancelled by Ctrl-C"
    );
    env.assay(["run"]).arg(&study).assert().success();
    for (label, r) in runs_of(&env.campaign()) {
        assert_eq!(r.state, "done", "{label}");
        assert_eq!(r.attempts, 1, "{label}: collected, not submitted again");
        assert_eq!(r.slurm.unwrap().array_job_id, job, "{label}");
    }
}
