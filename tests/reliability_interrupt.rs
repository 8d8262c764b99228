//! Interruptions: `kill -9` of `assay run` at 10 random (seeded) moments of a campaign,
//! each followed by a resumed run. With real processes: the simulator is a shell script
//! that appends to an invocation log, the ground truth of what really ran.
//!
//! What must hold (README.md and docs/records.md, `run.yaml` life cycle: finished runs
//! are never repeated, and an attempt left by a killed assay is adopted): no finished run
//! is started again, no run is lost, every simulator invocation is used exactly once (an
//! attempt orphaned by the kill is adopted, not repeated), and `assay verify` finds the
//! records consistent with the output files at the end.

mod common;

use rand::{Rng, SeedableRng};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::Duration;

/// Kills (our acceptance rule: 10).
const N_KILLS: usize = 10;
/// Design points: more than the kills let finish (about three runs per cycle), so
/// every kill lands in a campaign that is still running.
const N_POINTS: usize = 48;
/// Seconds each simulator invocation sleeps: long enough that a kill often finds runs
/// in flight, short enough that the test takes seconds.
const SIM_SLEEP_S: &str = "0.2";
/// The kill comes this long after `assay run` starts, drawn uniformly (milliseconds).
const KILL_AFTER_MS: std::ops::Range<u64> = 30..800;
/// Seed of the kill moments.
const SEED: u64 = 11;

/// Logs `begin RUN_ID PID` and `finish RUN_ID PID` around its work; the output file is
/// written under a temporary name and renamed, as a careful simulator does.
const SIM: &str = r#"#!/bin/sh
# usage: sim.sh LOG RUN_ID P Q OUT SLEEP
set -eu
log=$1; id=$2; p=$3; q=$4; out=$5
echo "begin $id $$" >> "$log"
sleep "$6"
awk -v p="$p" -v q="$q" 'BEGIN { print "x,y"; for (x = 0; x <= 2; x++) printf "%d,%.17g\n", x, p * x + q }' > "$out.part"
mv "$out.part" "$out"
echo "finish $id $$" >> "$log"
"#;

fn write_campaign(dir: &Path) -> PathBuf {
    let sim = dir.join("sim.sh");
    std::fs::write(&sim, SIM).expect("write sim");
    std::fs::set_permissions(&sim, std::os::unix::fs::PermissionsExt::from_mode(0o755))
        .expect("chmod");
    // Invented field data: only its x values matter here.
    std::fs::write(dir.join("field.csv"), "x,y\n0,0.5\n1,1.0\n2,1.5\n").expect("write data");
    let study = format!(
        r#"name: interrupted
parameters:
  - {{name: p, range: [0.0, 1.0]}}
  - {{name: q, range: [-1.0, 1.0]}}
simulator:
  command: [{sim}, {log}, "{{{{run_id}}}}", "{{{{p}}}}", "{{{{q}}}}", "{{{{run_dir}}}}/out.csv", "{SIM_SLEEP_S}"]
  output: {{file: out.csv, x: x, y: [y]}}
  timeout_s: 30
experiments:
  - {{name: e, data: field.csv, noise: {{sd: 0.1}}}}
design: {{method: lhs, points: {N_POINTS}, seed: 5}}
"#,
        sim = serde_json::to_string(&sim.display().to_string()).expect("json"),
        log = serde_json::to_string(&dir.join("invocations.log").display().to_string())
            .expect("json"),
    );
    let path = dir.join("study.yaml");
    std::fs::write(&path, study).expect("write study");
    path
}

/// `assay --runs DIR/runs --quiet`, its output discarded.
fn assay(dir: &Path) -> Command {
    let mut c = common::assay_at(dir);
    c.stdout(Stdio::null()).stderr(Stdio::null());
    c
}

/// The state of every run record written so far.
fn states(dir: &Path) -> Vec<String> {
    let root = dir.join("runs/interrupted/runs");
    let Ok(points) = std::fs::read_dir(&root) else {
        return vec![];
    };
    points
        .filter_map(|p| std::fs::read_to_string(p.ok()?.path().join("e/run.yaml")).ok())
        .map(|text| {
            let v: serde_yaml::Value = serde_yaml::from_str(&text).expect("a whole record");
            v["state"].as_str().expect("state").to_string()
        })
        .collect()
}

#[test]
fn kill_9_at_ten_moments_then_resume_repeats_and_loses_nothing() {
    let tmp = tempfile::tempdir().expect("temp folder");
    let dir = tmp.path();
    let study = write_campaign(dir);
    assert!(assay(dir)
        .arg("design")
        .arg(&study)
        .status()
        .expect("assay")
        .success());

    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(SEED);
    let mut n_left_running = 0;
    for _ in 0..N_KILLS {
        let mut child = assay(dir)
            .args(["run", "--jobs", "2"])
            .arg(&study)
            .spawn()
            .expect("assay run starts");
        std::thread::sleep(Duration::from_millis(rng.gen_range(KILL_AFTER_MS)));
        child.kill().expect("SIGKILL"); // std's kill is SIGKILL: no clean-up at all
        child.wait().expect("reaped");
        // Every record readable as a whole after the kill (atomic writes).
        n_left_running += states(dir).iter().filter(|s| *s == "running").count();
    }
    let done_before_resume = states(dir).iter().filter(|s| *s == "done").count();
    assert!(
        done_before_resume < N_POINTS,
        "the campaign finished before the last kill: the kills tested less than they should"
    );
    assert!(
        n_left_running > 0,
        "no kill left a run `running`: recovery of orphaned attempts was not exercised"
    );

    let status = assay(dir)
        .args(["run", "--jobs", "2"])
        .arg(&study)
        .status()
        .expect("assay run");
    assert!(status.success(), "the resumed run failed: {status}");
    let st = states(dir);
    assert_eq!(st.len(), N_POINTS);
    assert!(st.iter().all(|s| s == "done"), "{st:?}");

    // The simulator's own log: per run, its begins and finishes in order.
    let log = std::fs::read_to_string(dir.join("invocations.log")).expect("log");
    let mut runs: BTreeMap<&str, Vec<&str>> = BTreeMap::new();
    for line in log.lines() {
        let mut f = line.split(' ');
        let (what, id) = (f.next().expect("what"), f.next().expect("id"));
        runs.entry(id).or_default().push(what);
    }
    assert_eq!(runs.len(), N_POINTS, "runs that never started: lost");
    for (id, events) in &runs {
        // Not lost: it finished. Not repeated: it began once (an orphaned attempt is
        // adopted by the next `assay run`, not started again).
        assert_eq!(events, &["begin", "finish"], "run {id}");
    }

    // The records agree with the output files and the design.
    let out = assay(dir)
        .stdout(Stdio::piped())
        .arg("verify")
        .arg(&study)
        .output()
        .expect("assay verify");
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{text}");
    assert!(text.contains("runs       ok"), "{text}");
}
