//! R̂, ESS and the MCSE of quantiles against arviz (fixture `tests/reference/diagnostics.json`, made by
//! `tests/reference/diagnostics_reference.py`; versions recorded in the fixture).
//! Method: Vehtari, Gelman, Simpson, Carpenter & Bürkner (2021), Bayesian Analysis 16(2).

use assay::calibrate::{ess_bulk, ess_tail, mcse_quantile, rhat};
use serde::Deserialize;
use std::collections::BTreeMap;

/// Same algorithm, same double-precision inputs: only summation order differs.
/// The normal quantile (statrs vs scipy) agrees to ~1e-15 relative.
const RHAT_RTOL: f64 = 1e-9;
const ESS_RTOL: f64 = 1e-8;
/// The quantile MCSE is half a difference of two order statistics picked through a beta
/// quantile (statrs vs scipy): equal indices give equal values; our acceptance rule's
/// 1e-6 leaves room for nothing else, so a different index fails.
const MCSE_QUANTILE_ATOL: f64 = 1e-6;

#[derive(Deserialize)]
struct Case {
    name: String,
    chains: Vec<Vec<f64>>,
    rhat: f64,
    ess_bulk: f64,
    ess_tail: f64,
    /// By probability, as text ("0.025", "0.5", "0.975").
    mcse_quantile: BTreeMap<String, f64>,
}

#[derive(Deserialize)]
struct Fixture {
    cases: Vec<Case>,
}

fn fixture() -> Fixture {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/diagnostics.json"
    ))
    .unwrap();
    serde_json::from_str(&text).unwrap()
}

#[test]
fn rhat_and_ess_match_arviz() {
    let f = fixture();
    assert_eq!(f.cases.len(), 5);
    for c in &f.cases {
        let r = rhat(&c.chains);
        let b = ess_bulk(&c.chains);
        let t = ess_tail(&c.chains);
        assert!(
            (r - c.rhat).abs() / c.rhat < RHAT_RTOL,
            "{}: rhat {r} vs {}",
            c.name,
            c.rhat
        );
        assert!(
            (b - c.ess_bulk).abs() / c.ess_bulk < ESS_RTOL,
            "{}: ess_bulk {b} vs {}",
            c.name,
            c.ess_bulk
        );
        assert!(
            (t - c.ess_tail).abs() / c.ess_tail < ESS_RTOL,
            "{}: ess_tail {t} vs {}",
            c.name,
            c.ess_tail
        );
    }
}

#[test]
fn quantile_mcse_matches_arviz() {
    let f = fixture();
    for c in &f.cases {
        assert_eq!(c.mcse_quantile.len(), 3, "{}", c.name);
        for (p, want) in &c.mcse_quantile {
            let got = mcse_quantile(&c.chains, p.parse().unwrap());
            assert!(
                (got - want).abs() < MCSE_QUANTILE_ATOL,
                "{}: mcse of the {p} quantile {got} vs arviz {want}",
                c.name
            );
        }
    }
}
