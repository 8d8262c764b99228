//! End to end: `assay all` on the bundled cantilever study, whose invented field data
//! were made from E = 205 GPa and k_theta = 1.8 MN·m/rad (models/cantilever/DATA.md).
//! The calibrated 95 % intervals must contain those values.

mod common;

use common::{assay_in_repo as assay, ensure_model_binary};
use serde::Deserialize;
use std::collections::BTreeMap;

/// Values used to invent the data (models/cantilever/DATA.md).
const TRUE_E: f64 = 205.0;
const TRUE_K_THETA: f64 = 1.8;
/// Convergence threshold recommended by Vehtari et al. (2021).
const RHAT_MAX: f64 = 1.01;

#[derive(Deserialize)]
struct Summary {
    mean: f64,
    q025: f64,
    q975: f64,
}

#[derive(Deserialize)]
struct Diag {
    rhat: f64,
    ess_bulk: f64,
}

#[derive(Deserialize)]
struct Posterior {
    parameters: BTreeMap<String, Summary>,
    diagnostics: BTreeMap<String, Diag>,
    caution: String,
}

#[test]
fn calibration_recovers_the_invented_constants() {
    ensure_model_binary("cantilever");
    let tmp = tempfile::tempdir().unwrap();
    let out = assay(tmp.path(), &["all", "models/cantilever/study.yaml"]);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "assay all failed:\n{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        stdout.contains("posterior ("),
        "the posterior table is printed:\n{stdout}"
    );

    let dir = tmp.path().join("cantilever");
    let text = std::fs::read_to_string(dir.join("posterior.yaml")).unwrap();
    let p: Posterior = serde_yaml::from_str(&text).unwrap();
    for (name, truth) in [("E", TRUE_E), ("k_theta", TRUE_K_THETA)] {
        let s = &p.parameters[name];
        assert!(
            s.q025 < truth && truth < s.q975,
            "{name}: {truth} outside [{}, {}] (mean {})",
            s.q025,
            s.q975,
            s.mean
        );
        let d = &p.diagnostics[name];
        assert!(d.rhat < RHAT_MAX, "{name}: rhat {}", d.rhat);
        assert!(d.ess_bulk > 400.0, "{name}: ess_bulk {}", d.ess_bulk);
    }
    assert!(p.caution.contains("not a certified material allowable"));

    let samples = std::fs::read_to_string(dir.join("posterior-samples.csv")).unwrap();
    assert_eq!(
        samples.lines().next().unwrap(),
        "chain,draw,E,k_theta,log_posterior"
    );
    assert_eq!(samples.lines().count(), 1 + 4 * 4000);

    // A second `all` reuses every stage.
    let again = assay(tmp.path(), &["all", "models/cantilever/study.yaml"]);
    let s2 = String::from_utf8_lossy(&again.stdout);
    assert!(again.status.success());
    assert!(
        s2.contains("0 done now") && s2.contains("60 already done"),
        "{s2}"
    );
    assert!(
        s2.contains("surrogate: up to date") && s2.contains("posterior: up to date"),
        "{s2}"
    );
}
