//! Unknown measurement noise through the command line: validation of the inverse-gamma
//! prior (one test per invariant, exact message), and the records of a calibration that
//! estimates the noise (`posterior.yaml` key `noise`, the samples CSV column
//! `noise_sd.<experiment>` before `log_posterior`, docs/records.md).

mod common;

use common::{edit, line_of, Env, EXPERIMENT};
use serde::Deserialize;
use std::collections::BTreeMap;

/// Exit code for bad input (README.md lists the exit codes: 0 success, 2 bad input,
/// 3 finished but some runs failed, 1 anything else).
const EXIT_BAD_INPUT: i32 = 2;

const UNKNOWN_NOISE: &str = "noise: {unknown: {shape: 3.0, scale: 0.05}}";

/// Validate `text`; assert exit code 2 and exactly one `error:` line, and return it.
fn one_error(env: &Env, text: &str) -> String {
    let study = env.write_study_text(text);
    let out = env
        .assay(["validate"])
        .arg(&study)
        .output()
        .expect("assay runs");
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert_eq!(out.status.code(), Some(EXIT_BAD_INPUT), "{stderr}");
    let errors: Vec<&str> = stderr
        .lines()
        .filter(|l| l.starts_with("error: "))
        .collect();
    assert_eq!(errors.len(), 1, "{stderr}");
    errors[0].to_string()
}

#[test]
fn unknown_noise_validates() {
    let env = Env::new();
    let text = edit(&env.minimal_study("ok"), "noise: {sd: 0.1}", UNKNOWN_NOISE);
    let study = env.write_study_text(&text);
    let out = env
        .assay(["validate"])
        .arg(&study)
        .output()
        .expect("assay runs");
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

#[test]
fn inverse_gamma_shape_must_be_positive() {
    for v in ["0.0", "-1.0"] {
        let env = Env::new();
        let text = edit(
            &env.minimal_study("ok"),
            "noise: {sd: 0.1}",
            &format!("noise: {{unknown: {{shape: {v}, scale: 0.05}}}}"),
        );
        let line = line_of(&text, "noise:");
        let study = env.path("study.yaml");
        let e = one_error(&env, &text);
        let v: f64 = v.parse().unwrap();
        assert_eq!(
            e,
            format!(
                "error: {}:{line}: experiments[0].noise.unknown.shape: inverse-gamma shape {v} must be > 0",
                study.display()
            )
        );
    }
}

#[test]
fn inverse_gamma_scale_must_be_positive() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "noise: {sd: 0.1}",
        "noise: {unknown: {shape: 3.0, scale: 0}}",
    );
    let line = line_of(&text, "noise:");
    let study = env.path("study.yaml");
    let e = one_error(&env, &text);
    assert_eq!(
        e,
        format!(
            "error: {}:{line}: experiments[0].noise.unknown.scale: inverse-gamma scale 0 must be > 0",
            study.display()
        )
    );
}

#[derive(Deserialize)]
struct Marginal {
    mean: f64,
    sd: f64,
    median: f64,
    q025: f64,
    q975: f64,
}

#[derive(Deserialize)]
struct Diag {
    rhat: f64,
    ess_bulk: f64,
    ess_tail: f64,
}

#[derive(Deserialize)]
struct NoiseMcse {
    sd: f64,
    variance: f64,
}

#[derive(Deserialize)]
struct Noise {
    sd: Marginal,
    variance: Marginal,
    diagnostics: Diag,
    mcse: NoiseMcse,
}

#[derive(Deserialize)]
struct Mcse {
    mean: f64,
}

#[derive(Deserialize)]
struct Correlation {
    names: Vec<String>,
    matrix: Vec<Vec<f64>>,
}

#[derive(Deserialize)]
struct Body {
    mcse: BTreeMap<String, Mcse>,
    correlation: Correlation,
    noise: BTreeMap<String, Noise>,
    warnings: Vec<String>,
}

#[test]
fn calibration_with_unknown_noise_reports_its_posterior_and_samples() {
    let env = Env::new();
    let text = edit(&env.minimal_study("ok"), "noise: {sd: 0.1}", UNKNOWN_NOISE);
    let study = env.write_study_text(&text);
    let out = env.assay(["all"]).arg(&study).output().expect("assay runs");
    assert_eq!(
        out.status.code(),
        Some(0),
        "stdout:\n{}\nstderr:\n{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    // The record envelope's keys sit beside the body's (see docs/records.md).
    let b: Body =
        serde_yaml::from_str(&env.read("runs/tsim/posterior.yaml")).expect("posterior.yaml");
    let n = &b.noise[EXPERIMENT];
    for m in [&n.sd, &n.variance] {
        assert!(m.sd > 0.0 && m.q025 > 0.0, "positive draws");
        assert!(m.q025 <= m.median && m.median <= m.q975);
        assert!(m.mean.is_finite());
    }
    assert!(n.diagnostics.rhat.is_finite() && n.diagnostics.ess_bulk > 0.0);
    assert!(n.diagnostics.ess_tail > 0.0);
    assert!(n.mcse.sd > 0.0 && n.mcse.variance > 0.0);
    assert_eq!(b.correlation.names, ["A", "B"]);
    assert_eq!(b.correlation.matrix.len(), 2);
    assert!(b.mcse["A"].mean > 0.0 && b.mcse["B"].mean > 0.0);
    // 2 chains × 100 draws: far below the ESS target, so the record must say so.
    assert!(
        b.warnings
            .iter()
            .any(|w| w.contains("effective sample size") && w.contains("below 400")),
        "{:?}",
        b.warnings
    );

    let csv = env.read("runs/tsim/posterior-samples.csv");
    let mut lines = csv.lines();
    assert_eq!(
        lines.next(),
        Some(format!("chain,draw,A,B,noise_sd.{EXPERIMENT},log_posterior").as_str())
    );
    let rows: Vec<Vec<f64>> = lines
        .map(|l| l.split(',').map(|v| v.parse().unwrap()).collect())
        .collect();
    assert_eq!(rows.len(), 200);
    let mean_sd = rows.iter().map(|r| r[4]).sum::<f64>() / rows.len() as f64;
    assert!(rows.iter().all(|r| r[4] > 0.0));
    assert!(
        (mean_sd - n.sd.mean).abs() < 1e-9 * n.sd.mean,
        "CSV mean of noise_sd {mean_sd} vs record {}",
        n.sd.mean
    );
}
