//! Calibration options through the command line: the ensemble sampler with
//! `until_converged`, `prior_from` chaining two campaigns (the earlier posterior's files
//! hashed into the provenance, docs/records.md), and the model discrepancy with its
//! hyperparameters sampled or fixed at their posterior mode.

mod common;

use common::{edit, yaml_string, Env};
use serde::Deserialize;
use std::collections::BTreeMap;

#[derive(Debug, Deserialize)]
struct Provenance {
    inputs: BTreeMap<String, String>,
    elapsed_s: f64,
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
    sampling_s: Option<f64>,
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
    // The sampling's own time is recorded, a part of the whole stage's.
    let sampling = p.sampling_s.expect("sampling_s recorded");
    assert!(
        sampling > 0.0 && sampling <= p.provenance.elapsed_s,
        "sampling {sampling} s of {} s",
        p.provenance.elapsed_s
    );
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

#[derive(Debug, Deserialize)]
struct MarginalRecord {
    mean: f64,
    q025: f64,
    q975: f64,
}

#[derive(Debug, Deserialize)]
struct DiagnosticsRecord {
    rhat: f64,
}

#[derive(Debug, Deserialize)]
struct HyperRecord {
    prior: String,
    #[serde(default)]
    value: Option<f64>,
    #[serde(default)]
    posterior: Option<MarginalRecord>,
    #[serde(default)]
    diagnostics: Option<DiagnosticsRecord>,
    #[serde(default)]
    fixed_at: Option<String>,
}

#[derive(Debug, Deserialize)]
struct DiscrepancyRecord {
    kernel: String,
    sd: HyperRecord,
    #[serde(default)]
    length_scale: Option<HyperRecord>,
}

#[derive(Debug, Deserialize)]
struct McseRecord {
    mean: f64,
    median: f64,
    q025: f64,
    q975: f64,
}

#[derive(Debug, Deserialize)]
struct PosteriorWithDiscrepancy {
    #[serde(default)]
    discrepancy: BTreeMap<String, BTreeMap<String, DiscrepancyRecord>>,
    mcse: BTreeMap<String, McseRecord>,
}

#[derive(Debug, Deserialize)]
struct IntervalRecord {
    lo95: f64,
    hi95: f64,
}

#[derive(Debug, Deserialize)]
struct ExperimentChecks {
    measurements: Vec<IntervalRecord>,
}

#[derive(Debug, Deserialize)]
struct ChecksRecord {
    experiments: Vec<ExperimentChecks>,
}

/// `calibration.discrepancy` end to end: the posterior record reports the sampled sd and
/// length-scale (decoded with this test's own structs), the samples carry their columns,
/// the terminal shows them, `assay check` widens every predictive interval by the
/// discrepancy's variance compared with the same study without it, and `assay verify`
/// accepts the chain.
#[test]
fn discrepancy_is_sampled_reported_and_widens_the_predictive_checks() {
    let widths = |discrepancy: bool| -> (Vec<f64>, Env) {
        let env = Env::new();
        let mut text = env.minimal_study("ok");
        if discrepancy {
            text = edit(
                &text,
                "warmup: 100, draws: 100, seed: 3}",
                "warmup: 1000, draws: 1000, seed: 3, discrepancy: {sd: {half_normal: {scale: 0.3}}}}",
            );
        } else {
            text = edit(
                &text,
                "warmup: 100, draws: 100, seed: 3}",
                "warmup: 1000, draws: 1000, seed: 3}",
            );
        }
        let study = env.write_study_text(&text);
        let out = env.assay(["all"]).arg(&study).output().unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let stdout = String::from_utf8_lossy(&out.stdout).to_string();
        assert_eq!(stdout.contains("δ sd"), discrepancy, "{stdout}");
        let c: ChecksRecord = serde_yaml::from_str(&env.read("runs/tsim/checks.yaml")).unwrap();
        let w = c.experiments[0]
            .measurements
            .iter()
            .map(|m| m.hi95 - m.lo95)
            .collect();
        (w, env)
    };
    let (plain, _) = widths(false);
    let (wide, env) = widths(true);
    assert_eq!(plain.len(), wide.len());
    for (a, b) in plain.iter().zip(&wide) {
        assert!(b > a, "interval width with discrepancy {b} vs without {a}");
    }
    let text = env.read("runs/tsim/posterior.yaml");
    let p: PosteriorWithDiscrepancy =
        serde_yaml::from_str(&text).unwrap_or_else(|e| panic!("{e}\n{text}"));
    let d = &p.discrepancy["bench"]["y"];
    assert_eq!(d.kernel, "squared-exponential");
    assert_eq!(d.sd.prior, "half_normal(scale 0.3)");
    assert!(d.sd.value.is_none());
    let sd = d.sd.posterior.as_ref().expect("sampled");
    assert!(sd.q025 > 0.0 && sd.q025 <= sd.mean && sd.mean <= sd.q975);
    assert!(d.sd.diagnostics.as_ref().unwrap().rhat.is_finite());
    let ell = d.length_scale.as_ref().expect("a curve has a length-scale");
    assert!(ell.prior.starts_with("lognormal(mu "), "{}", ell.prior);
    assert!(ell.posterior.as_ref().unwrap().mean > 0.0);
    for m in p.mcse.values() {
        assert!(
            m.mean > 0.0 && m.median > 0.0 && m.q025 > 0.0 && m.q975 > 0.0,
            "{m:?}"
        );
    }
    let samples = env.read("runs/tsim/posterior-samples.csv");
    assert_eq!(
        samples.lines().next().unwrap(),
        "chain,draw,A,B,discrepancy_sd.bench.y,discrepancy_length_scale.bench.y,log_posterior"
    );
    let html = env.read("runs/tsim/report.html");
    assert!(html.contains("<h3>Model discrepancy</h3>") && html.contains("<td>sampled</td>"));
    let study = env.path("study.yaml");
    env.assay(["verify"]).arg(&study).assert().success();
}

#[derive(Debug, Deserialize)]
struct MapStartRecord {
    ln_posterior: f64,
    termination: String,
    n_runs: usize,
}

#[derive(Debug, Deserialize)]
struct DiscrepancyMapRecord {
    method: String,
    ln_posterior: f64,
    parameters: BTreeMap<String, f64>,
    starts: Vec<MapStartRecord>,
    best_start: usize,
    n_evaluations: u64,
}

#[derive(Debug, Deserialize)]
struct SettingsRecord {
    likelihood: String,
}

#[derive(Debug, Deserialize)]
struct PosteriorWithMap {
    discrepancy: BTreeMap<String, BTreeMap<String, DiscrepancyRecord>>,
    discrepancy_map: DiscrepancyMapRecord,
    settings: SettingsRecord,
}

/// `hyperparameters: map` end to end: `assay all` finds the joint posterior mode, samples
/// the parameters with the discrepancy's sd and length-scale fixed there, records the
/// values with `fixed_at: map` and the mode's log posterior (decoded with this test's
/// own structs), writes no hyperparameter columns, shows the values in the terminal, and
/// `assay verify` accepts the chain; going back to `sampled` makes the posterior stale.
#[test]
fn discrepancy_hyperparameters_fixed_at_their_mode_are_recorded_and_verified() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "warmup: 100, draws: 100, seed: 3}",
        "warmup: 1000, draws: 1000, seed: 3, discrepancy: {sd: {half_normal: {scale: 0.3}}, hyperparameters: map}}",
    );
    let study = env.write_study_text(&text);
    let out = env.assay(["all"]).arg(&study).output().unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout).to_string();
    assert!(
        out.status.success(),
        "{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        stdout.contains("(fixed at the joint posterior mode)")
            && stdout.contains(
                "discrepancy hyperparameters fixed at the joint posterior mode: log posterior"
            ),
        "{stdout}"
    );
    let text = env.read("runs/tsim/posterior.yaml");
    let p: PosteriorWithMap = serde_yaml::from_str(&text).unwrap_or_else(|e| panic!("{e}\n{text}"));
    let d = &p.discrepancy["bench"]["y"];
    assert_eq!(d.sd.prior, "half_normal(scale 0.3)");
    assert_eq!(d.sd.fixed_at.as_deref(), Some("map"));
    assert!(d.sd.value.is_some_and(|v| v > 0.0), "{text}");
    assert!(d.sd.posterior.is_none() && d.sd.diagnostics.is_none());
    let ell = d.length_scale.as_ref().expect("a curve has a length-scale");
    assert!(ell.prior.starts_with("lognormal(mu "), "{}", ell.prior);
    assert_eq!(ell.fixed_at.as_deref(), Some("map"));
    assert!(ell.value.is_some_and(|v| v > 0.0));
    let m = &p.discrepancy_map;
    assert!(
        m.method
            .starts_with("maximum of the joint posterior density"),
        "{}",
        m.method
    );
    assert!(m.ln_posterior.is_finite());
    assert!((0.0..=1.0).contains(&m.parameters["A"]) && (1.0..=2.0).contains(&m.parameters["B"]));
    assert_eq!(m.starts.len(), 8);
    assert!(m.best_start < m.starts.len());
    // The mode is the best end point of the starts.
    let best = m
        .starts
        .iter()
        .map(|s| s.ln_posterior)
        .fold(f64::NEG_INFINITY, f64::max);
    assert_eq!(m.starts[m.best_start].ln_posterior, best);
    assert_eq!(m.ln_posterior, best);
    for s in &m.starts {
        assert!(
            ["converged", "max_iterations"].contains(&s.termination.as_str()),
            "{}",
            s.termination
        );
        assert!(s.n_runs >= 1);
    }
    assert!(m.n_evaluations > 0);
    assert!(
        p.settings
            .likelihood
            .ends_with("its hyperparameters fixed at the joint posterior mode"),
        "{}",
        p.settings.likelihood
    );
    let samples = env.read("runs/tsim/posterior-samples.csv");
    assert_eq!(
        samples.lines().next().unwrap(),
        "chain,draw,A,B,log_posterior"
    );
    // The report's discrepancy table says how they were fixed.
    let html = env.read("runs/tsim/report.html");
    assert!(
        html.contains("<h3>Model discrepancy</h3>")
            && html.contains("<td>fixed at the joint posterior mode</td>")
            && html.contains("Their uncertainty is not carried into the posterior"),
        "the report's discrepancy section"
    );
    env.assay(["verify"]).arg(&study).assert().success();
    // Back to sampled hyperparameters: the posterior is made again.
    let text = env.read("study.yaml").replace(", hyperparameters: map", "");
    env.write("study.yaml", &text);
    let out = env.assay(["all"]).arg(&study).output().unwrap();
    assert!(out.status.success());
    assert!(!String::from_utf8_lossy(&out.stdout).contains("posterior: up to date"));
    let samples = env.read("runs/tsim/posterior-samples.csv");
    assert!(samples.starts_with("chain,draw,A,B,discrepancy_sd.bench.y,"));
}

/// `sampler: nuts` with `hyperparameters: map`: the study is accepted (sampled
/// hyperparameters would be refused, having no gradient yet) and the No-U-Turn sampler
/// runs with the hyperparameters fixed at the mode.
#[test]
fn nuts_samples_with_the_hyperparameters_fixed_at_their_mode() {
    let env = Env::new();
    let text = edit(
        &env.minimal_study("ok"),
        "warmup: 100, draws: 100, seed: 3}",
        "warmup: 300, draws: 300, seed: 3, sampler: nuts, discrepancy: {hyperparameters: map}}",
    );
    let study = env.write_study_text(&text);
    let out = env.assay(["all"]).arg(&study).output().unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = env.read("runs/tsim/posterior.yaml");
    let p: PosteriorWithMap = serde_yaml::from_str(&text).unwrap_or_else(|e| panic!("{e}\n{text}"));
    assert_eq!(
        p.discrepancy["bench"]["y"].sd.fixed_at.as_deref(),
        Some("map")
    );
    assert!(text.contains("No-U-Turn"), "{text}");
}
