//! Calibration options through the command line: the ensemble sampler with
//! `until_converged`, and `prior_from` chaining two campaigns (DESIGN.md "Records").

mod common;

use common::{edit, yaml_string, Env};
use serde::Deserialize;
use std::collections::BTreeMap;

#[derive(Debug, Deserialize)]
struct Provenance {
    inputs: BTreeMap<String, String>,
}

#[derive(Debug, Deserialize)]
struct ChainRecord {
    draws: usize,
}

#[derive(Debug, Deserialize)]
struct PosteriorRecord {
    provenance: Provenance,
    n_draws: usize,
    chains: Vec<ChainRecord>,
}

fn posterior(env: &Env, name: &str) -> PosteriorRecord {
    let text = env.read(&format!("runs/{name}/posterior.yaml"));
    serde_yaml::from_str(&text).unwrap_or_else(|e| panic!("{e}\n{text}"))
}

#[test]
fn ensemble_until_converged_reports_every_walker_as_a_chain() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "calibration: {chains: 2, warmup: 100, draws: 100, seed: 3}",
        "calibration: {sampler: ensemble, walkers: 8, warmup: 300, draws: 100, seed: 3, until_converged: true, max_draws: 3000}",
    );
    let study = env.write_study_text(&text);
    env.assay(["all"]).arg(&study).assert().success();
    let p = posterior(&env, "tsim");
    assert_eq!(p.chains.len(), 8, "one chain per walker");
    let per = p.chains[0].draws;
    assert!(p.chains.iter().all(|c| c.draws == per));
    assert!(
        per > 100 && per <= 3000 && per % 100 == 0,
        "{per} draws per walker"
    );
    assert_eq!(p.n_draws, 8 * per);
}

#[test]
fn prior_from_an_earlier_campaign_is_used_and_hashed() {
    let env = Env::new();
    let first = env.write_study_text(&env.minimal_study("ok"));
    env.assay(["all"]).arg(&first).assert().success();
    let earlier = env.path("runs/tsim/posterior.yaml");
    let text = edit(&env.minimal_study("ok"), "name: tsim", "name: tsim-second");
    let text = edit(
        &text,
        "seed: 3}",
        &format!(
            "seed: 3, prior_from: {}}}",
            yaml_string(&earlier.display().to_string())
        ),
    );
    let second = env.write("second.yaml", &text);
    env.assay(["all"]).arg(&second).assert().success();
    let p = posterior(&env, "tsim-second");
    let names: Vec<&String> = p.provenance.inputs.keys().collect();
    assert!(
        names.iter().any(|k| k.ends_with("tsim/posterior.yaml"))
            && names
                .iter()
                .any(|k| k.ends_with("tsim/posterior-samples.csv")),
        "{names:?}"
    );
    // A changed earlier posterior makes `all` calibrate again.
    std::thread::sleep(std::time::Duration::from_millis(1100));
    let samples = env.path("runs/tsim/posterior-samples.csv");
    let mut csv = std::fs::read_to_string(&samples).unwrap();
    csv.push('\n');
    std::fs::write(&samples, csv).unwrap();
    let out = env.assay(["all"]).arg(&second).output().unwrap();
    assert!(out.status.success());
    assert!(
        !String::from_utf8_lossy(&out.stdout).contains("posterior: up to date"),
        "{}",
        String::from_utf8_lossy(&out.stdout)
    );
}
