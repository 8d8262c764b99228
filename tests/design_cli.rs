//! `assay design` through the command line: quality and rounds in `design.yaml`,
//! `--add N` (old points and their runs untouched, new ids continue, the round is
//! recorded) and the bad-input cases (exit 2, messages pinned). Records are decoded
//! with this file's own structs, so a renamed key fails a test (the keys are documented
//! one by one in docs/records.md).

mod common;

use common::{edit, Env, EXPERIMENT, N_POINTS};
use serde::Deserialize;
use std::collections::BTreeMap;
use std::path::Path;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Quality {
    min_distance: f64,
    phi_p: f64,
    cl2_discrepancy: f64,
    max_abs_correlation: f64,
}

#[derive(Debug, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
struct Search {
    p: i32,
    proposals: usize,
    accepted: usize,
    polish_proposals: usize,
    polish_accepted: usize,
    phi_p_start: f64,
    phi_p_end: f64,
}

#[derive(Debug, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
struct RoundRec {
    round: usize,
    method: Option<String>,
    n: Option<usize>,
    added: Option<usize>,
    fill: Option<String>,
    seed: u64,
    stream: Option<u64>,
    search: Option<Search>,
}

#[derive(Debug, Deserialize)]
struct DesignRecord {
    kind: String,
    method: String,
    seed: u64,
    space: String,
    parameters: Vec<String>,
    rounds: Vec<RoundRec>,
    quality: Quality,
    #[serde(default)]
    warnings: Vec<String>,
    points: Vec<BTreeMap<String, serde_yaml::Value>>,
}

fn read_design(env: &Env) -> DesignRecord {
    let text = env.read("runs/tsim/design.yaml");
    let d: DesignRecord = serde_yaml::from_str(&text)
        .unwrap_or_else(|e| panic!("design.yaml does not decode: {e}\n{text}"));
    assert_eq!(d.kind, "design");
    d
}

/// Exit code, stdout and stderr of `assay ARGS... STUDY`.
fn assay(env: &Env, args: &[&str], study: &Path) -> (Option<i32>, String, String) {
    let out = env.assay(args).arg(study).output().expect("assay runs");
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn id(p: &BTreeMap<String, serde_yaml::Value>) -> &str {
    p["id"].as_str().expect("id")
}

#[test]
fn design_records_rounds_and_quality_and_prints_them() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    let (code, out, _) = assay(&env, &["design"], &study);
    assert_eq!(code, Some(0));
    assert!(out.contains("design: 4 points written"), "{out}");
    assert!(out.contains("quality (unit box): min distance "), "{out}");
    let d = read_design(&env);
    // From the minimal study: `design: {method: lhs, points: 4, seed: 7}`.
    assert_eq!(
        (d.method.as_str(), d.seed, d.space.as_str()),
        ("lhs", 7, "range")
    );
    assert_eq!(d.parameters, ["A", "B"]);
    assert_eq!(d.rounds.len(), 1);
    let r = &d.rounds[0];
    assert_eq!(
        (r.round, r.method.as_deref(), r.n, r.seed),
        (0, Some("lhs"), Some(4), 7)
    );
    let s = r.search.as_ref().expect("lhs records its search");
    assert_eq!(s.p, 50);
    assert!(s.phi_p_end <= s.phi_p_start);
    assert!(d.quality.min_distance > 0.0 && d.quality.min_distance <= 2f64.sqrt());
    assert!(d.quality.phi_p >= 1.0 / d.quality.min_distance);
    assert!(d.quality.cl2_discrepancy > 0.0);
    assert!((0.0..=1.0).contains(&d.quality.max_abs_correlation));
    assert!(d.warnings.is_empty(), "{:?}", d.warnings);
}

#[test]
fn add_keeps_old_points_and_runs_and_appends_a_round() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    assert_eq!(assay(&env, &["design"], &study).0, Some(0));
    let (code, _, err) = assay(&env, &["run", "--jobs", "2"], &study);
    assert_eq!(code, Some(0), "{err}");
    let before = read_design(&env);
    let run_records: Vec<Vec<u8>> = before
        .points
        .iter()
        .map(|p| std::fs::read(env.run_record(id(p))).expect("run.yaml"))
        .collect();

    let (code, out, err) = assay(&env, &["design", "--add", "3"], &study);
    assert_eq!(code, Some(0), "{err}");
    assert!(out.contains("design: 7 points (3 added)"), "{out}");
    let after = read_design(&env);
    // The old points bit for bit (YAML numbers round-trip exactly), in the same order.
    assert_eq!(&after.points[..N_POINTS], &before.points[..]);
    let new_ids: Vec<&str> = after.points[N_POINTS..].iter().map(id).collect();
    assert_eq!(new_ids, ["p0005", "p0006", "p0007"]);
    for p in &after.points[N_POINTS..] {
        let a = p["A"].as_f64().unwrap();
        let b = p["B"].as_f64().unwrap();
        assert!(
            (0.0..=1.0).contains(&a) && (1.0..=2.0).contains(&b),
            "{p:?}"
        );
    }
    assert_eq!(after.rounds[0], before.rounds[0]);
    assert_eq!(
        after.rounds[1],
        RoundRec {
            round: 1,
            method: None,
            n: None,
            added: Some(3),
            fill: Some("maximin".into()),
            seed: 7,
            stream: Some(1),
            search: None,
        }
    );
    // Runs untouched; the new points are pending.
    for (p, bytes) in before.points.iter().zip(&run_records) {
        assert_eq!(&std::fs::read(env.run_record(id(p))).unwrap(), bytes);
    }
    for p in &after.points[N_POINTS..] {
        assert!(!env.run_record(id(p)).exists());
    }
    let (code, out, _) = assay(&env, &["status"], &study);
    assert_eq!(code, Some(0));
    let line = out
        .lines()
        .find(|l| l.split_whitespace().next() == Some(EXPERIMENT))
        .expect("a status line");
    let counts: Vec<&str> = line.split_whitespace().skip(1).collect();
    // pending, queued, running, done, failed
    assert_eq!(counts, ["3", "0", "0", "4", "0"], "{out}");

    // The augmented design still matches the study: a plain `assay design` keeps it.
    let (code, out, err) = assay(&env, &["design"], &study);
    assert_eq!(code, Some(0), "{err}");
    assert!(out.contains("design: 7 points kept"), "{out}");
    // A second round continues the ids and the stream numbers.
    assert_eq!(assay(&env, &["design", "--add", "1"], &study).0, Some(0));
    let again = read_design(&env);
    assert_eq!(id(again.points.last().unwrap()), "p0008");
    assert_eq!(again.rounds[2].stream, Some(2));
}

#[test]
fn add_without_a_design_is_bad_input() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    let (code, _, err) = assay(&env, &["design", "--add", "2"], &study);
    assert_eq!(code, Some(2), "{err}");
    assert!(
        err.contains("cannot add points: there is no design at ")
            && err.contains("run `assay design "),
        "{err}"
    );
}

#[test]
fn add_after_the_parameters_changed_is_bad_input() {
    let env = Env::new();
    let text = env.minimal_study("ok");
    let study = env.write_study_text(&text);
    assert_eq!(assay(&env, &["design"], &study).0, Some(0));
    let before = env.read("runs/tsim/design.yaml");
    // Rename B to C (in the parameter list and in the command's placeholder).
    let renamed = edit(&text, "  - name: B\n", "  - name: C\n").replace("{{B}}", "{{C}}");
    let study = env.write_study_text(&renamed);
    let (code, _, err) = assay(&env, &["design", "--add", "2"], &study);
    assert_eq!(code, Some(2), "{err}");
    assert!(
        err.contains("cannot add points: ")
            && err.contains("does not match the study: its parameters [\"A\", \"B\"] differ from the study's [\"A\", \"C\"]"),
        "{err}"
    );
    // Nothing was written.
    assert_eq!(env.read("runs/tsim/design.yaml"), before);
}

#[test]
fn add_after_a_range_moved_off_the_points_is_bad_input() {
    let env = Env::new();
    let text = env.minimal_study("ok");
    let study = env.write_study_text(&text);
    assert_eq!(assay(&env, &["design"], &study).0, Some(0));
    let study = env.write_study_text(&edit(&text, "range: [0.0, 1.0]", "range: [5.0, 6.0]"));
    let (code, _, err) = assay(&env, &["design", "--add", "2"], &study);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("outside the range [5, 6]"), "{err}");
}

#[test]
fn add_rejects_zero_and_force() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    let (code, _, err) = assay(&env, &["design", "--add", "0"], &study);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("--add"), "{err}");
    let (code, _, err) = assay(&env, &["design", "--add", "2", "--force"], &study);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("cannot be used with"), "{err}");
}

#[test]
fn sobol_with_more_parameters_than_the_table_is_bad_input() {
    let env = Env::new();
    let text = env.minimal_study("ok");
    let extra: String = (0..64)
        .map(|j| format!("  - name: z{j}\n    range: [0.0, 1.0]\n"))
        .collect();
    let text = edit(&text, "simulator:\n", &format!("{extra}simulator:\n"));
    let text = edit(
        &text,
        "design: {method: lhs, points: 4, seed: 7}",
        "design: {method: sobol, points: 128, seed: 7}",
    );
    let study = env.write_study_text(&text);
    let (code, _, err) = assay(&env, &["design"], &study);
    assert_eq!(code, Some(2), "{err}");
    assert!(
        err.contains("design.method: sobol holds direction numbers for at most 64 parameters, the study has 66; use `lhs`"),
        "{err}"
    );
}

#[test]
fn sobol_off_a_power_of_two_and_too_few_points_warn() {
    let env = Env::new();
    let text = env.minimal_study("ok");
    let study = env.write_study_text(&edit(
        &text,
        "design: {method: lhs, points: 4, seed: 7}",
        "design: {method: sobol, points: 2, seed: 7, space: prior}",
    ));
    let (code, _, err) = assay(&env, &["design"], &study);
    assert_eq!(code, Some(0), "{err}");
    assert!(
        err.contains("warning: 2 points for 2 parameters: fewer than parameters + 1"),
        "{err}"
    );
    let d = read_design(&env);
    assert_eq!((d.method.as_str(), d.space.as_str()), ("sobol", "prior"));
    assert!(d.rounds[0].search.is_none());

    let study = env.write_study_text(&edit(
        &text,
        "design: {method: lhs, points: 4, seed: 7}",
        "design: {method: sobol, points: 6, seed: 7}",
    ));
    let (code, _, err) = assay(&env, &["design", "--force"], &study);
    assert_eq!(code, Some(0), "{err}");
    assert!(
        err.contains("warning: 6 Sobol' points: not a power of two") && err.contains("use 4 or 8"),
        "{err}"
    );
    assert_eq!(read_design(&env).warnings.len(), 1);
    // Adding 2 makes 8: the continued sequence is balanced again, no warning.
    let (code, _, err) = assay(&env, &["design", "--add", "2"], &study);
    assert_eq!(code, Some(0), "{err}");
    assert!(!err.contains("warning"), "{err}");
    let d = read_design(&env);
    assert_eq!(d.rounds[1].fill.as_deref(), Some("sobol-sequence"));
    assert!(d.warnings.is_empty());
}
