//! Sequential refinement (`assay refine`, `checks.refine`, `refinement.yaml`) through the
//! command line, on a simulator with a steep response whose posterior lies in a small
//! corner of a wide prior box.
//!
//! The simulator (`testsim.sh steep A B`) is y(x) = 10 exp(−A (x + 1)) + B (x + 1) at
//! x = 0, 1, 2, with A and B in [0, 10]. The field data are its values at the true
//! (A, B) = (0.4, 0.3) plus fixed offsets of at most one noise sd (0.05) — invented
//! numbers, written below. Near A = 0.4 the output changes fast with A; over most of
//! the box it hardly changes, so 12 space-filling runs leave the surrogate poor exactly
//! where the posterior lives. What is checked is our acceptance test: one round
//! of runs among the posterior draws cuts the surrogate's error there (the confirmation
//! RMSE at posterior draws) at least 3-fold, and the final 95 % intervals contain the
//! true values.

mod common;

use common::{sim, yaml_string, Env};
use serde::Deserialize;

/// The true parameters the invented data were made with.
const TRUE_A: f64 = 0.4;
const TRUE_B: f64 = 0.3;

#[derive(Debug, Clone, PartialEq, Deserialize)]
struct ErrorWire {
    experiment: String,
    n_runs: usize,
    rmse: f64,
    noise_sd: f64,
    rmse_over_noise: f64,
}

#[derive(Debug, Deserialize)]
struct RoundWire {
    round: usize,
    added_near_posterior: Vec<String>,
    added_global: Vec<String>,
    before: Vec<ErrorWire>,
    after: Vec<ErrorWire>,
    posterior_mean: Vec<f64>,
}

#[derive(Debug, Deserialize)]
struct Refinement {
    kind: String,
    rounds_asked: usize,
    add: usize,
    confirmation_runs: usize,
    start: Vec<ErrorWire>,
    rounds: Vec<RoundWire>,
    stopped: String,
    design_sha256: Option<String>,
}

#[derive(Debug, Deserialize)]
struct PointWire {
    id: String,
    #[serde(rename = "A")]
    a: f64,
}

#[derive(Debug, Deserialize)]
struct DesignWire {
    points: Vec<PointWire>,
}

#[derive(Debug, Deserialize)]
struct Summary {
    q025: f64,
    q975: f64,
}

#[derive(Debug, Deserialize)]
struct Posterior {
    parameters: std::collections::BTreeMap<String, Summary>,
}

fn steep_study(env: &Env, extra: &str) -> std::path::PathBuf {
    // Invented field data: y(x; 0.4, 0.3) = 7.0032, 5.0933, 3.9119 plus offsets of
    // +0.03/−0.02, −0.04/+0.01, +0.02/−0.05 (two replicates per x).
    env.write(
        "field.csv",
        "x,y\n0,7.0332\n0,6.9832\n1,5.0533\n1,5.1033\n2,3.9319\n2,3.8619\n",
    );
    let text = format!(
        "\
name: steep
parameters:
  - name: A
    range: [0.0, 10.0]
  - name: B
    range: [0.0, 10.0]
simulator:
  command: [{sim}, steep, \"{{{{A}}}}\", \"{{{{B}}}}\", \"{{{{run_dir}}}}/out.csv\"]
  output: {{file: out.csv, format: csv, x: x, y: [y]}}
experiments:
  - name: decay
    data: field.csv
    noise: {{sd: 0.05}}
design: {{method: lhs, points: 12, seed: 7}}
surrogate: {{variance_kept: 0.99999, mean: linear}}
calibration: {{chains: 4, warmup: 1000, draws: 1000, seed: 3}}
{extra}",
        sim = yaml_string(&sim().display().to_string()),
    );
    env.write("study.yaml", &text)
}

fn read_refinement(env: &Env) -> Refinement {
    let text = env.read("runs/steep/refinement.yaml");
    serde_yaml::from_str(&text).unwrap_or_else(|e| panic!("{e}\n{text}"))
}

#[test]
fn one_round_near_the_posterior_cuts_the_surrogate_error_and_covers_the_truth() {
    let env = Env::new();
    let study = steep_study(&env, "checks: {confirmation_runs: 8}\n");
    env.assay(["all"]).arg(&study).assert().success();
    let out = env
        .assay(["refine", "--rounds", "1", "--add", "10"])
        .arg(&study)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let r = read_refinement(&env);
    assert_eq!(r.kind, "refinement");
    assert_eq!((r.rounds_asked, r.add, r.confirmation_runs), (1, 10, 8));
    assert_eq!(r.rounds.len(), 1);
    let round = &r.rounds[0];
    assert_eq!(round.round, 1);
    // global_share 0.2 of 10: 8 among the posterior draws, 2 over the box.
    assert_eq!(round.added_near_posterior.len(), 8);
    assert_eq!(round.added_global.len(), 2);
    assert_eq!(
        round.before, r.start,
        "the round starts from the first confirmation"
    );
    let (before, after) = (&round.before[0], &round.after[0]);
    assert_eq!(before.experiment, "decay");
    assert_eq!(before.noise_sd, 0.05);
    // 8 draws and the posterior mean, each run by the simulator.
    assert_eq!((before.n_runs, after.n_runs), (9, 9));
    assert!(
        (before.rmse / before.noise_sd - before.rmse_over_noise).abs() < 1e-12,
        "{before:?}"
    );
    // The surrogate was poor near the posterior before the round (else the test shows
    // nothing), and the round cut its error at least 3-fold.
    assert!(before.rmse_over_noise > 1.0, "{before:?}");
    assert!(
        after.rmse * 3.0 <= before.rmse,
        "before {before:?}, after {after:?}"
    );
    assert!(
        stdout.contains("before") && stdout.contains("after"),
        "{stdout}"
    );
    // Every added point was run; those picked among the posterior draws lie in the
    // posterior's corner (A below a tenth of the box), the others anywhere.
    let design: DesignWire = serde_yaml::from_str(&env.read("runs/steep/design.yaml")).unwrap();
    for id in round.added_near_posterior.iter().chain(&round.added_global) {
        let run = env.read(&format!("runs/steep/runs/{id}/decay/run.yaml"));
        assert!(run.contains("state: done"), "{id}: {run}");
    }
    for id in &round.added_near_posterior {
        let p = design.points.iter().find(|p| &p.id == id).unwrap();
        assert!(p.a < 1.0, "{id} at A = {} is not near the posterior", p.a);
    }
    assert!(env
        .read("runs/steep/design.yaml")
        .contains("fill: posterior-spread"));
    assert!((round.posterior_mean[0] - TRUE_A).abs() < 0.05);

    // The final posterior's 95 % intervals contain the true values.
    let text = env.read("runs/steep/posterior.yaml");
    let p: Posterior = serde_yaml::from_str(&text).unwrap();
    for (name, truth) in [("A", TRUE_A), ("B", TRUE_B)] {
        let s = &p.parameters[name];
        assert!(
            s.q025 <= truth && truth <= s.q975,
            "{name}: [{}, {}] misses {truth}",
            s.q025,
            s.q975
        );
    }
    // The last confirmation runs were folded in: every record is consistent.
    assert!(r.design_sha256.is_some());
    env.assay(["verify"]).arg(&study).assert().success();
}

/// `checks.refine` makes `assay all` refine; a second `all` on the same design reuses
/// the finished refinement instead of refining again.
#[test]
fn all_refines_once_per_design() {
    let env = Env::new();
    let study = steep_study(
        &env,
        "checks:\n  confirmation_runs: 4\n  refine: {rounds: 1, add: 5, global_share: 0.4, tolerance: 0.5}\n",
    );
    let out = env.assay(["all"]).arg(&study).output().unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success(), "{stdout}");
    let r = read_refinement(&env);
    assert_ne!(r.stopped, "in progress");
    assert!(r.rounds.len() <= 1);
    if let Some(round) = r.rounds.first() {
        assert_eq!(
            (round.added_near_posterior.len(), round.added_global.len()),
            (3, 2)
        );
    }
    let design = env.read("runs/steep/design.yaml");
    let out = env.assay(["all"]).arg(&study).output().unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success(), "{stdout}");
    assert!(
        stdout.contains("refinement: done for this design"),
        "{stdout}"
    );
    assert_eq!(env.read("runs/steep/design.yaml"), design, "no new points");
}

/// Bad `checks.refine` values are refused with the key and its line (exit 2).
#[test]
fn bad_refine_settings_name_key_and_line() {
    let env = Env::new();
    let study = steep_study(
        &env,
        "checks:\n  refine:\n    rounds: 0\n    global_share: 1.5\n",
    );
    let text = std::fs::read_to_string(&study).unwrap();
    let out = env.assay(["validate"]).arg(&study).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    for (key, needle) in [
        ("checks.refine.rounds", "rounds: 0"),
        ("checks.refine.global_share", "global_share: 1.5"),
    ] {
        let line = common::line_of(&text, needle);
        assert!(
            err.contains(&format!(":{line}")) && err.contains(key),
            "{key} at line {line}: {err}"
        );
    }
    assert!(err.contains("rounds must be at least 1"), "{err}");
    assert!(err.contains("must lie in [0, 1]"), "{err}");
}
