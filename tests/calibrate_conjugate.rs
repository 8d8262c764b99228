//! Calibration against closed forms: a one-parameter simulator y = θ with a normal
//! prior and known noise has a normal posterior (Gelman et al. 2013, Bayesian Data
//! Analysis 3rd ed., §2.5; Bishop 2006, Pattern Recognition and Machine Learning,
//! eqs. 2.141–2.142; section and equation numbers from memory):
//!   1/τn² = 1/τ0² + n/σ²,  μn = τn² (μ0/τ0² + n ȳ/σ²).

use assay::calibrate::{
    sample, summarize, Emulator, ExperimentLikelihood, LogPosterior, SamplerParams,
};
use assay::progress::Silent;
use assay::study::{Parameter, Prior};
use std::sync::atomic::AtomicBool;

/// The posterior mean must be within this many Monte Carlo standard errors
/// (sd / √ESS) of the exact value: a 4-sigma band fails by chance about once in 16,000.
const MEAN_N_MCSE: f64 = 4.0;
/// Relative error allowed on the posterior sd (our acceptance rule: 5 %).
const SD_RTOL: f64 = 0.05;

struct Identity;

impl Emulator for Identity {
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        (vec![theta[0]], vec![0.0])
    }
}

fn check(mu0: f64, tau0: f64, sigma: f64, ys: &[f64], seed: u64) {
    let n = ys.len() as f64;
    let ybar = ys.iter().sum::<f64>() / n;
    let tau_n2 = 1.0 / (1.0 / (tau0 * tau0) + n / (sigma * sigma));
    let mu_n = tau_n2 * (mu0 / (tau0 * tau0) + n * ybar / (sigma * sigma));
    let tau_n = tau_n2.sqrt();

    // A range of ±30 prior sds: the truncation removes no measurable mass.
    let p = Parameter {
        name: "theta".into(),
        unit: None,
        lo: mu0 - 30.0 * tau0,
        hi: mu0 + 30.0 * tau0,
        prior: Prior::Normal {
            mean: mu0,
            sd: tau0,
        },
    };
    let lik = ExperimentLikelihood::from_values("e", &[ys.to_vec()], &[vec![sigma; ys.len()]]);
    let em = Identity;
    let post = LogPosterior::new(vec![p], vec![(&em as &dyn Emulator, lik)]);
    let params = SamplerParams::metropolis(4, 2000, 5000, seed);
    let chains = sample(&post, &params, &AtomicBool::new(false), &Silent);
    let s = summarize(&["theta".into()], &[], &chains);
    let ps = s.parameters[0];
    let mcse = ps.sd / s.diagnostics[0].ess_bulk.sqrt();
    assert!(
        (ps.mean - mu_n).abs() < MEAN_N_MCSE * mcse,
        "mean {} vs exact {mu_n} (MCSE {mcse})",
        ps.mean
    );
    assert!(
        (ps.sd - tau_n).abs() / tau_n < SD_RTOL,
        "sd {} vs exact {tau_n}",
        ps.sd
    );
    assert!(
        s.diagnostics[0].rhat < 1.01,
        "rhat {}",
        s.diagnostics[0].rhat
    );
    // Posterior variance ≤ prior variance in the conjugate case.
    assert!(ps.sd < tau0);
}

#[test]
fn normal_mean_with_known_variance_weak_data() {
    check(10.0, 2.0, 1.5, &[11.2, 12.9, 10.4], 3);
}

#[test]
fn normal_mean_with_known_variance_strong_data() {
    // Posterior much narrower than the prior: tests the proposal tuning too.
    let ys: Vec<f64> = (0..50)
        .map(|i| 3.0 + 0.1 * ((i * 37 % 11) as f64 - 5.0))
        .collect();
    check(0.0, 10.0, 0.5, &ys, 17);
}
