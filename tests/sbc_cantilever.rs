//! Simulation-based calibration (Talts, Betancourt, Simpson, Vehtari & Gelman 2018,
//! "Validating Bayesian inference algorithms with simulation-based calibration",
//! arXiv:1804.06788, Algorithm 1; algorithm number from memory) of the sampler and
//! likelihood on the bundled cantilever.
//!
//! Each replication draws θ̃ = (E, k_θ) from the study's priors (truncated to the
//! ranges), simulates field data from the **simulator's closed form** (the formula of
//! `models/cantilever/src/main.rs`, not the surrogate) at the bundled experiments' loads
//! and stations with the study's noise sd, calibrates with the default sampler against
//! the same closed form (an exact emulator: zero predictive variance), thins the pooled
//! draws to L = 99 and records the rank of θ̃ among them. If the sampler and likelihood
//! are right, every rank 0 … 99 is equally likely; the histogram of 200 ranks in 10
//! bins must pass a χ² uniformity test at the 1 % level for each parameter.
//!
//! It runs in a few seconds in release builds, so it is an ordinary test.

use assay::calibrate::{sample, Emulator, ExperimentLikelihood, LogPosterior, SamplerParams};
use assay::progress::Silent;
use assay::study::{Parameter, Prior};
use rand::{Rng, SeedableRng};
use rand_distr::StandardNormal;
use statrs::distribution::{ChiSquared, ContinuousCDF};
use std::sync::atomic::AtomicBool;

/// Replications (our acceptance rule: 200).
const N_REPLICATIONS: usize = 200;
/// Thinned posterior draws per replication: ranks take L + 1 = 100 values.
const L: usize = 99;
/// Histogram bins; 100 rank values / 10 = 10 ranks per bin, expected count 20.
const N_BINS: usize = 10;
/// Significance level of the uniformity test (our acceptance rule: 1 %).
const ALPHA: f64 = 0.01;

/// The bundled study's settings (models/cantilever/study.yaml and its simulator's
/// defaults): loads in kN, stations in m, two replicates per station, noise sd in mm.
const LOADS_KN: [f64; 2] = [5.0, 9.0];
const STATIONS_M: [f64; 4] = [0.5, 1.0, 1.5, 2.0];
const REPLICATES: usize = 2;
const NOISE_SD_MM: f64 = 0.05;
const LENGTH_M: f64 = 2.0;
const INERTIA_CM4: f64 = 800.0;

/// w(x) = P x² (3L − x)/(6 E I) + P L x / k_θ, in mm (E in GPa, k_θ in MN·m/rad).
fn deflection_mm(e_gpa: f64, k_theta: f64, load_kn: f64, x: f64) -> f64 {
    let p = load_kn * 1e3;
    let ei = e_gpa * 1e9 * INERTIA_CM4 * 1e-8;
    let w = p * x * x * (3.0 * LENGTH_M - x) / (6.0 * ei) + p * LENGTH_M * x / (k_theta * 1e6);
    w * 1e3
}

struct ClosedForm {
    load_kn: f64,
}

impl Emulator for ClosedForm {
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let m = STATIONS_M
            .iter()
            .map(|x| deflection_mm(theta[0], theta[1], self.load_kn, *x))
            .collect();
        (m, vec![0.0; STATIONS_M.len()])
    }
}

fn parameters() -> Vec<Parameter> {
    vec![
        Parameter {
            name: "E".into(),
            unit: Some("GPa".into()),
            lo: 170.0,
            hi: 240.0,
            prior: Prior::Normal {
                mean: 205.0,
                sd: 15.0,
            },
        },
        Parameter {
            name: "k_theta".into(),
            unit: Some("MN·m/rad".into()),
            lo: 1.0,
            hi: 4.0,
            prior: Prior::LogNormal {
                mu: 0.5,
                sigma: 1.0,
            },
        },
    ]
}

/// A draw from the truncated prior, by rejection.
fn prior_draw<R: Rng>(p: &Parameter, rng: &mut R) -> f64 {
    loop {
        let z: f64 = rng.sample(StandardNormal);
        let x = match p.prior {
            Prior::Normal { mean, sd } => mean + sd * z,
            Prior::LogNormal { mu, sigma } => (mu + sigma * z).exp(),
            Prior::Uniform => p.lo + (p.hi - p.lo) * rng.gen::<f64>(),
        };
        if x > p.lo && x < p.hi {
            return x;
        }
    }
}

#[test]
fn cantilever_ranks_are_uniform() {
    let params = parameters();
    let emulators: Vec<ClosedForm> = LOADS_KN
        .iter()
        .map(|&l| ClosedForm { load_kn: l })
        .collect();
    // The test's own stream for the prior draws and the noise (not the sampler's).
    let mut rng = rand_chacha::ChaCha20Rng::seed_from_u64(20180416);
    let mut hist = vec![vec![0usize; N_BINS]; params.len()];
    for rep in 0..N_REPLICATIONS {
        let truth: Vec<f64> = params.iter().map(|p| prior_draw(p, &mut rng)).collect();
        let mut experiments = Vec::new();
        for em in &emulators {
            let (mean, _) = em.predict(&truth);
            let values: Vec<Vec<f64>> = mean
                .iter()
                .map(|m| {
                    (0..REPLICATES)
                        .map(|_| m + NOISE_SD_MM * rng.sample::<f64, _>(StandardNormal))
                        .collect()
                })
                .collect();
            let sds = vec![vec![NOISE_SD_MM; REPLICATES]; values.len()];
            experiments.push((
                em as &dyn Emulator,
                ExperimentLikelihood::from_values("bench", &values, &sds),
            ));
        }
        let post = LogPosterior::new(params.clone(), experiments);
        let chains = sample(
            &post,
            &SamplerParams::metropolis(4, 1000, 1000, rep as u64),
            &AtomicBool::new(false),
            &Silent,
        );
        let pooled: Vec<&Vec<f64>> = chains.iter().flat_map(|c| &c.theta).collect();
        // Thin evenly to L draws, far apart in each chain (autocorrelation, Talts et al.
        // §4.1; section number and its content from memory).
        let thinned: Vec<&Vec<f64>> = (0..L).map(|k| pooled[k * pooled.len() / L]).collect();
        for (j, t) in truth.iter().enumerate() {
            let rank = thinned.iter().filter(|d| d[j] < *t).count();
            hist[j][rank * N_BINS / (L + 1)] += 1;
        }
    }
    let expected = N_REPLICATIONS as f64 / N_BINS as f64;
    let critical = ChiSquared::new((N_BINS - 1) as f64)
        .unwrap()
        .inverse_cdf(1.0 - ALPHA);
    for (p, h) in params.iter().zip(&hist) {
        let chi2: f64 = h
            .iter()
            .map(|&o| (o as f64 - expected).powi(2) / expected)
            .sum();
        assert!(
            chi2 < critical,
            "{}: rank histogram {h:?}, χ² = {chi2:.2} ≥ {critical:.2} (χ²₉ at {ALPHA})",
            p.name
        );
    }
}
