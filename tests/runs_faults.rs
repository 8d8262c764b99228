//! The run manager under abuse, with real processes: kill -9 of `assay run` at random
//! moments, two concurrent `assay run` on one campaign, and exact template rendering.

mod common;

use common::assay_at as assay;
use rand::{Rng, SeedableRng};
use std::path::{Path, PathBuf};
use std::process::Stdio;
use std::time::{Duration, Instant};

/// A simulator that logs its start and end to a shared log, sleeps a little and writes
/// y = a + b·x at x = 0, 1, 2. The log is the ground truth of what really ran.
const SIM: &str = r#"#!/bin/sh
# usage: sim.sh LOG RUN_ID A B OUT SLEEP
echo "start $2" >> "$1"
sleep "$6"
printf 'x,y\n0,%s\n1,%s\n2,%s\n' "$3" "$(awk "BEGIN{print $3+$4}")" "$(awk "BEGIN{print $3+2*$4}")" > "$5"
echo "end $2" >> "$1"
"#;

fn setup(dir: &Path, points: usize, sleep_s: f64) -> PathBuf {
    let sim = dir.join("sim.sh");
    std::fs::write(&sim, SIM).unwrap();
    std::fs::set_permissions(&sim, std::os::unix::fs::PermissionsExt::from_mode(0o755)).unwrap();
    std::fs::write(dir.join("field.csv"), "x,y\n0,1.0\n1,2.0\n2,3.0\n").unwrap();
    std::fs::write(
        dir.join("deck.tmpl"),
        "# deck for {{run_id}}\na = {{a}}\nb = {{ b }}\nload = {{load}}\n",
    )
    .unwrap();
    let study = format!(
        r#"name: faults
parameters:
  - {{name: a, range: [0.0, 1.0]}}
  - {{name: b, range: [1.0, 2.0]}}
simulator:
  command: ["{sim}", "{log}", "{{{{run_id}}}}", "{{{{a}}}}", "{{{{b}}}}", "{{{{run_dir}}}}/out.csv", "{sleep_s}"]
  files:
    - {{template: deck.tmpl, to: deck.inp}}
  output: {{file: out.csv, x: x, y: [y]}}
  timeout_s: 30
experiments:
  - {{name: e1, settings: {{load: 2.5}}, data: field.csv, noise: {{sd: 0.1}}}}
design: {{method: lhs, points: {points}, seed: 3}}
"#,
        sim = sim.display(),
        log = dir.join("log.txt").display(),
    );
    let path = dir.join("study.yaml");
    std::fs::write(&path, study).unwrap();
    path
}

fn design(dir: &Path, study: &Path) {
    assert!(assay(dir)
        .arg("design")
        .arg(study)
        .status()
        .unwrap()
        .success());
}

fn states(dir: &Path) -> Vec<String> {
    let mut out = Vec::new();
    for p in std::fs::read_dir(dir.join("runs/faults/runs")).unwrap() {
        let rec = p.unwrap().path().join("e1/run.yaml");
        if let Ok(text) = std::fs::read_to_string(rec) {
            let v: serde_yaml::Value = serde_yaml::from_str(&text).unwrap();
            out.push(v["state"].as_str().unwrap().to_string());
        }
    }
    out
}

#[test]
fn kill_9_at_random_moments_never_repeats_a_finished_run() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let study = setup(dir, 60, 0.05);
    design(dir, &study);
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(42);
    for _ in 0..4 {
        let mut child = assay(dir)
            .args(["run", "--jobs", "2"])
            .arg(&study)
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_millis(rng.gen_range(150..700)));
        // SIGKILL: no chance to clean up, records may be left `running`.
        let _ = child.kill();
        let _ = child.wait();
    }
    let out = assay(dir)
        .args(["run", "--jobs", "2"])
        .arg(&study)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "final run: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let st = states(dir);
    assert_eq!(st.len(), 60);
    assert!(st.iter().all(|s| s == "done"), "{st:?}");

    // From the simulator's own log: once a run has ended, it never starts again.
    let log = std::fs::read_to_string(dir.join("log.txt")).unwrap();
    let mut ended = std::collections::BTreeSet::new();
    for line in log.lines() {
        let (what, id) = line.split_once(' ').unwrap();
        match what {
            "start" => assert!(
                !ended.contains(id),
                "run {id} started again after it had finished"
            ),
            "end" => {
                ended.insert(id.to_string());
            }
            _ => unreachable!(),
        }
    }
    assert_eq!(ended.len(), 60);
}

#[test]
fn two_concurrent_runs_on_one_campaign_exactly_one_proceeds() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let study = setup(dir, 6, 0.4);
    design(dir, &study);
    let first = assay(dir)
        .args(["run", "--jobs", "1"])
        .arg(&study)
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // Wait until the first holds the lock (its holder line is written after locking).
    let holder = dir.join("runs/faults/.lock-holder");
    let pid = format!("pid {} ", first.id());
    let t0 = Instant::now();
    while std::fs::read_to_string(&holder)
        .map(|s| !s.contains(&pid))
        .unwrap_or(true)
    {
        assert!(
            t0.elapsed() < Duration::from_secs(20),
            "the first run never took the lock"
        );
        std::thread::sleep(Duration::from_millis(20));
    }
    let second = assay(dir).args(["run"]).arg(&study).output().unwrap();
    let first = first.wait_with_output().unwrap();
    assert!(
        first.status.success(),
        "{}",
        String::from_utf8_lossy(&first.stderr)
    );
    assert_eq!(second.status.code(), Some(1));
    let msg = String::from_utf8_lossy(&second.stderr);
    assert!(
        msg.contains("is in use by another assay process") && msg.contains(&pid),
        "{msg}"
    );
    assert!(states(dir).iter().all(|s| s == "done"));
}

#[test]
fn templates_render_exactly() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let study = setup(dir, 2, 0.0);
    design(dir, &study);
    assert!(assay(dir)
        .args(["run"])
        .arg(&study)
        .status()
        .unwrap()
        .success());
    let design: serde_yaml::Value = serde_yaml::from_str(
        &std::fs::read_to_string(dir.join("runs/faults/design.yaml")).unwrap(),
    )
    .unwrap();
    let p = &design["points"][0];
    let (a, b) = (p["a"].as_f64().unwrap(), p["b"].as_f64().unwrap());
    let rendered = std::fs::read_to_string(dir.join("runs/faults/runs/p0001/e1/deck.inp")).unwrap();
    // Numbers render in shortest round-trip form (Rust's `{}` of f64), settings as given.
    assert_eq!(
        rendered,
        format!("# deck for p0001-e1\na = {a}\nb = {b}\nload = 2.5\n")
    );
}
