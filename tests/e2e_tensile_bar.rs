//! End to end on the finite-element example: `assay all` on models/tensile-bar, whose
//! invented field data were made from E = 70 GPa, σ0 = 270 MPa, Q = 50 MPa, b = 25
//! (models/tensile-bar/DATA.md). The 95 % intervals must contain those values.

mod common;

use common::{assay_in_repo, ensure_model_binary};
use serde::Deserialize;
use std::collections::BTreeMap;

/// Values used to invent the data (models/tensile-bar/DATA.md).
const TRUTH: [(&str, f64); 4] = [("E", 70.0), ("sigma0", 270.0), ("Q", 50.0), ("b", 25.0)];
/// A looser convergence bound than the 1.01 warning threshold: this test checks that the
/// calibration is right, the warnings check that it is precise.
const RHAT_MAX: f64 = 1.05;

#[derive(Deserialize)]
struct Summary {
    q025: f64,
    q975: f64,
}

#[derive(Deserialize)]
struct Diag {
    rhat: f64,
}

#[derive(Deserialize)]
struct Posterior {
    parameters: BTreeMap<String, Summary>,
    diagnostics: BTreeMap<String, Diag>,
}

#[test]
fn calibration_recovers_the_invented_material_constants() {
    ensure_model_binary("tensile-bar");
    let tmp = tempfile::tempdir().unwrap();
    let out = assay_in_repo(tmp.path(), &["all", "models/tensile-bar/study.yaml"]);
    assert!(
        out.status.success(),
        "{}\n{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    let text = std::fs::read_to_string(tmp.path().join("tensile-bar/posterior.yaml")).unwrap();
    let p: Posterior = serde_yaml::from_str(&text).unwrap();
    for (name, truth) in TRUTH {
        let s = &p.parameters[name];
        assert!(
            s.q025 < truth && truth < s.q975,
            "{name}: {truth} outside [{}, {}]",
            s.q025,
            s.q975
        );
        assert!(
            p.diagnostics[name].rhat < RHAT_MAX,
            "{name}: rhat {}",
            p.diagnostics[name].rhat
        );
    }
}
