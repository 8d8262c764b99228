//! Posterior predictive checks (`assay check`, `checks.yaml`) through the command line.
//!
//! References: the binomial distribution of the number of measurements inside their
//! 95 % intervals when the model is right (each inside with probability 0.95,
//! independently — the check's null hypothesis); the posterior predictive p-value of
//! Gelman, Meng & Stern (1996), which is not extreme for data the model generated and
//! near 0 for data it cannot produce.

mod common;

use common::{assay_in_repo, ensure_model_binary, Env};
use serde::Deserialize;

#[derive(Debug, Deserialize)]
struct Measurement {
    observed: f64,
    lo95: f64,
    hi95: f64,
}

#[derive(Debug, Deserialize)]
struct ExperimentCheck {
    name: String,
    n_measurements: usize,
    coverage95: f64,
    coverage_band99: [f64; 2],
    ppp_chi2: f64,
    passes: bool,
    findings: Vec<String>,
    measurements: Vec<Measurement>,
}

#[derive(Debug, Deserialize)]
struct Checks {
    kind: String,
    n_draws: usize,
    experiments: Vec<ExperimentCheck>,
    passes: bool,
    caution: String,
}

fn read_checks(path: &std::path::Path) -> Checks {
    let text = std::fs::read_to_string(path).unwrap_or_else(|e| panic!("{e}"));
    serde_yaml::from_str(&text).unwrap_or_else(|e| panic!("{e}\n{text}"))
}

/// The binomial 99 % band [q(0.005), q(0.995)] / n of Binomial(n, 0.95), from the pmf
/// summed here (independent of the crate's statrs call).
fn binomial_band(n: usize) -> [f64; 2] {
    let p: f64 = 0.95;
    let ln_choose =
        |k: usize| -> f64 { (1..=k).map(|i| ((n - k + i) as f64 / i as f64).ln()).sum() };
    let pmf: Vec<f64> = (0..=n)
        .map(|k| (ln_choose(k) + k as f64 * p.ln() + (n - k) as f64 * (1.0 - p).ln()).exp())
        .collect();
    let mut cdf = 0.0;
    let (mut lo, mut hi) = (None, None);
    for (k, v) in pmf.iter().enumerate() {
        cdf += v;
        if lo.is_none() && cdf >= 0.005 {
            lo = Some(k);
        }
        if hi.is_none() && cdf >= 0.995 {
            hi = Some(k);
        }
    }
    [
        lo.unwrap() as f64 / n as f64,
        hi.unwrap_or(n) as f64 / n as f64,
    ]
}

/// Our acceptance check: on the bundled cantilever, the predictive coverage of
/// the invented field data lies inside the binomial 99 % band around 0.95.
#[test]
fn cantilever_field_data_are_covered_as_the_binomial_band_expects() {
    ensure_model_binary("cantilever");
    let tmp = tempfile::tempdir().unwrap();
    let out = assay_in_repo(tmp.path(), &["all", "models/cantilever/study.yaml"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let out = assay_in_repo(tmp.path(), &["check", "models/cantilever/study.yaml"]);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(stdout.contains("checks: pass"), "{stdout}");
    let c = read_checks(&tmp.path().join("cantilever/checks.yaml"));
    assert_eq!(c.kind, "checks");
    assert!(c.n_draws >= 1000);
    assert!(c.caution.contains("licensed engineer"));
    let (mut inside, mut n) = (0, 0);
    for e in &c.experiments {
        assert_eq!(
            e.coverage_band99,
            binomial_band(e.n_measurements),
            "{}",
            e.name
        );
        for m in &e.measurements {
            n += 1;
            inside += usize::from(m.observed >= m.lo95 && m.observed <= m.hi95);
        }
    }
    let coverage = inside as f64 / n as f64;
    let band = binomial_band(n);
    assert!(
        band[0] <= coverage && coverage <= band[1],
        "pooled coverage {coverage} outside {band:?}"
    );
    assert!(c.passes);
}

/// Data the model can produce pass; a field curve with a kink that no straight line
/// follows (12 noise sds off) fails, with a p-value near 0 and the finding spelled out.
#[test]
fn data_the_model_cannot_produce_fail_the_checks() {
    for (data, should_pass) in [
        ("x,y\n0,0.6\n0.5,1.3\n2,3.5\n", true),
        ("x,y\n0,0.6\n0.5,2.5\n2,3.5\n", false),
    ] {
        let env = Env::new();
        let study = env.write_minimal_study("ok");
        env.write("field.csv", data);
        env.assay(["all"]).arg(&study).assert().success();
        let out = env.assay(["check"]).arg(&study).output().unwrap();
        assert!(out.status.success());
        let stdout = String::from_utf8_lossy(&out.stdout);
        let c = read_checks(&env.campaign().join("checks.yaml"));
        let e = &c.experiments[0];
        assert_eq!(c.passes, should_pass, "{data}: {stdout}");
        assert_eq!(e.passes, e.findings.is_empty());
        if should_pass {
            assert!(e.ppp_chi2 > 0.01 && e.ppp_chi2 < 0.99, "{}", e.ppp_chi2);
            assert!(stdout.contains("checks: pass"), "{stdout}");
        } else {
            assert!(e.ppp_chi2 < 0.01, "{}", e.ppp_chi2);
            assert!(e.coverage95 < 1.0);
            assert!(stdout.contains("DO NOT PASS"), "{stdout}");
            assert!(
                e.findings.iter().any(|f| f.contains("p-value")),
                "{:?}",
                e.findings
            );
        }
    }
}

/// `assay verify` follows the chain to `checks.yaml`: clean after `all`; stale once the
/// posterior it was made from is made again (`calibrate` rewrites `posterior.yaml`, whose
/// provenance carries new times, so its sha256 changes).
#[test]
fn verify_covers_the_checks_record() {
    let env = Env::new();
    let study = env.write_minimal_study("ok");
    env.assay(["all"]).arg(&study).assert().success();
    let out = env.assay(["verify"]).arg(&study).output().unwrap();
    let text = String::from_utf8_lossy(&out.stdout).into_owned();
    assert!(out.status.success(), "{text}");
    assert!(
        text.lines()
            .any(|l| l.trim_start().starts_with("checks") && l.contains("ok")),
        "{text}"
    );
    env.assay(["calibrate"]).arg(&study).assert().success();
    let out = env.assay(["verify"]).arg(&study).output().unwrap();
    let text = String::from_utf8_lossy(&out.stdout).into_owned();
    assert!(!out.status.success(), "{text}");
    assert!(
        text.contains("posterior.yaml changed since checks.yaml was made"),
        "{text}"
    );
}

#[derive(Debug, Deserialize)]
struct ConfPoint {
    id: String,
    reused: bool,
}

#[derive(Debug, Deserialize)]
struct ConfExperiment {
    n_runs: usize,
    rmse_over_noise: f64,
    passes: bool,
}

#[derive(Debug, Deserialize)]
struct Confirmation {
    points: Vec<ConfPoint>,
    experiments: Vec<ConfExperiment>,
}

#[derive(Debug, Deserialize)]
struct ChecksWithConfirmation {
    confirmation: Confirmation,
}

/// Confirmation runs: the simulator runs at 3 posterior draws and the posterior mean
/// through the run manager, as a new design round; a second `check` reuses the same
/// run folders; the runs make the surrogate stale, and `all` fits it again with them.
/// On a straight-line simulator with a linear-trend surrogate the surrogate's error
/// there is far below the noise sd (0.1).
#[test]
fn confirmation_runs_are_stored_reused_and_become_training_data() {
    let env = Env::new();
    let text = format!(
        "{}checks: {{confirmation_runs: 3}}\nsurrogate: {{mean: linear}}\n",
        env.minimal_study("ok")
    );
    let study = env.write_study_text(&text);
    env.assay(["all"]).arg(&study).assert().success();
    let read = || -> Confirmation {
        let text = env.read("runs/tsim/checks.yaml");
        serde_yaml::from_str::<ChecksWithConfirmation>(&text)
            .unwrap_or_else(|e| panic!("{e}\n{text}"))
            .confirmation
    };
    // `all` runs no confirmation (that would make the surrogate stale at every `all`).
    assert!(!env.read("runs/tsim/checks.yaml").contains("confirmation:"));
    env.assay(["check"]).arg(&study).assert().success();
    let first = read();
    assert_eq!(first.points.len(), 4, "3 draws and the posterior mean");
    assert!(first.points.iter().all(|p| !p.reused));
    for p in &first.points {
        assert!(env.run_record(&p.id).exists(), "{} has a run record", p.id);
        assert!(env
            .read(&format!("runs/tsim/runs/{}/bench/run.yaml", p.id))
            .contains("state: done"));
    }
    let e = &first.experiments[0];
    assert_eq!(e.n_runs, 4);
    assert!(e.rmse_over_noise < 0.5 && e.passes, "{e:?}");
    let design = env.read("runs/tsim/design.yaml");
    assert!(design.contains("fill: posterior-draws"), "{design}");

    env.assay(["check"]).arg(&study).assert().success();
    let second = read();
    assert!(second.points.iter().all(|p| p.reused));
    let ids = |c: &Confirmation| c.points.iter().map(|p| p.id.clone()).collect::<Vec<_>>();
    assert_eq!(ids(&first), ids(&second));
    assert_eq!(
        env.read("runs/tsim/design.yaml"),
        design,
        "no new points the second time"
    );

    let out = env.assay(["verify"]).arg(&study).output().unwrap();
    let text = String::from_utf8_lossy(&out.stdout).into_owned();
    assert!(
        !out.status.success() && text.contains("not in the surrogate"),
        "{text}"
    );
    env.assay(["all"]).arg(&study).assert().success();
    env.assay(["verify"]).arg(&study).assert().success();
}
