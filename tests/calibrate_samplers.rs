//! The ensemble sampler, sampling until converged, and a prior from an earlier
//! calibration, against closed forms.
//!
//! The reference posterior is the conjugate normal mean with known variance (Gelman et
//! al. 2013, Bayesian Data Analysis 3rd ed., §2.5; Bishop 2006, eqs. 2.141–2.142; section
//! and equation numbers from memory):
//!   1/τn² = 1/τ0² + n/σ²,  μn = τn² (μ0/τ0² + n ȳ/σ²).
//! Sequential updating — the posterior after the first data is the prior for the second
//! — gives the same posterior as all data at once (BDA3 §2.5, "posterior as prior";
//! section and wording from memory).

use assay::calibrate::{
    converged, sample, summarize, Chain, Emulator, ExperimentLikelihood, LogPosterior, MvnPrior,
    SamplerParams, Transform,
};
use assay::progress::Silent;
use assay::study::spec::SamplerChoice;
use assay::study::{Parameter, Prior};
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use std::sync::atomic::AtomicBool;

/// The posterior mean must be within this many Monte Carlo standard errors of the exact
/// value: a 4-sigma band fails by chance about once in 16,000.
const MEAN_N_MCSE: f64 = 4.0;
/// Relative error allowed on the posterior sd (our acceptance rule: 5 %).
const SD_RTOL: f64 = 0.05;

struct Identity;

impl Emulator for Identity {
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        (vec![theta[0]], vec![0.0])
    }
}

/// Exact posterior (μn, τn) of a normal mean.
fn conjugate(mu0: f64, tau0: f64, sigma: f64, ys: &[f64]) -> (f64, f64) {
    let n = ys.len() as f64;
    let ybar = ys.iter().sum::<f64>() / n;
    let tau_n2 = 1.0 / (1.0 / (tau0 * tau0) + n / (sigma * sigma));
    (
        tau_n2 * (mu0 / (tau0 * tau0) + n * ybar / (sigma * sigma)),
        tau_n2.sqrt(),
    )
}

fn parameter(mu0: f64, tau0: f64, prior: Prior) -> Parameter {
    // A range of ±30 prior sds: the truncation removes no measurable mass.
    Parameter {
        name: "theta".into(),
        unit: None,
        lo: mu0 - 30.0 * tau0,
        hi: mu0 + 30.0 * tau0,
        prior,
    }
}

fn assert_matches(chains: &[Chain], mu: f64, tau: f64, what: &str) {
    let s = summarize(&["theta".into()], &[], chains);
    let ps = s.parameters[0];
    let mcse = ps.sd / s.diagnostics[0].ess_bulk.sqrt();
    assert!(
        (ps.mean - mu).abs() < MEAN_N_MCSE * mcse,
        "{what}: mean {} vs exact {mu} (MCSE {mcse})",
        ps.mean
    );
    assert!(
        (ps.sd - tau).abs() / tau < SD_RTOL,
        "{what}: sd {} vs exact {tau}",
        ps.sd
    );
}

fn ensemble(warmup: usize, draws: usize, seed: u64) -> SamplerParams {
    SamplerParams {
        kind: SamplerChoice::Ensemble,
        walkers: Some(16),
        ..SamplerParams::metropolis(4, warmup, draws, seed)
    }
}

#[test]
fn ensemble_sampler_recovers_the_conjugate_normal_posterior() {
    let (mu0, tau0, sigma) = (0.0, 10.0, 0.5);
    let ys: Vec<f64> = (0..50)
        .map(|i| 3.0 + 0.1 * ((i * 37 % 11) as f64 - 5.0))
        .collect();
    let (mu_n, tau_n) = conjugate(mu0, tau0, sigma, &ys);
    let lik =
        ExperimentLikelihood::from_values("e", std::slice::from_ref(&ys), &[vec![sigma; ys.len()]]);
    let em = Identity;
    let p = parameter(
        mu0,
        tau0,
        Prior::Normal {
            mean: mu0,
            sd: tau0,
        },
    );
    let post = LogPosterior::new(vec![p], vec![(&em as &dyn Emulator, lik)]);
    let chains = sample(
        &post,
        &ensemble(1000, 4000, 5),
        &AtomicBool::new(false),
        &Silent,
    );
    assert_eq!(chains.len(), 16, "one chain per walker");
    assert!(chains.iter().all(|c| c.theta.len() == 4000));
    // Goodman & Weare's stretch move with a = 2 accepts roughly 0.3–0.7 on a
    // one-dimensional normal (common practice; from memory).
    let acc = chains.iter().map(|c| c.acceptance_rate).sum::<f64>() / 16.0;
    assert!((0.2..0.9).contains(&acc), "acceptance {acc}");
    assert_matches(&chains, mu_n, tau_n, "ensemble");
}

#[test]
fn ensemble_draws_are_identical_with_one_and_two_threads() {
    let ys = vec![1.2, 0.7, 1.9];
    let run = |threads: usize| {
        let lik =
            ExperimentLikelihood::from_values("e", std::slice::from_ref(&ys), &[vec![0.4; 3]]);
        let em = Identity;
        let p = parameter(1.0, 1.0, Prior::Uniform);
        let post = LogPosterior::new(vec![p], vec![(&em as &dyn Emulator, lik)]);
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(|| {
                sample(
                    &post,
                    &ensemble(100, 300, 9),
                    &AtomicBool::new(false),
                    &Silent,
                )
            })
    };
    let a = run(1);
    let b = run(2);
    for (x, y) in a.iter().zip(&b) {
        assert_eq!(x.theta, y.theta, "walker {}", x.index);
        assert_eq!(x.ln_posterior, y.ln_posterior);
    }
}

#[test]
fn until_converged_extends_sampling_until_the_targets_hold() {
    let ys = vec![1.2, 0.7, 1.9, 1.1];
    let lik = || ExperimentLikelihood::from_values("e", std::slice::from_ref(&ys), &[vec![0.4; 4]]);
    let em = Identity;
    let p = parameter(1.0, 1.0, Prior::Normal { mean: 1.0, sd: 1.0 });
    // 30 draws per chain cannot give a bulk ESS of 400 (4 chains × 30 = 120 draws).
    let fixed = SamplerParams::metropolis(4, 500, 30, 21);
    let post = LogPosterior::new(vec![p.clone()], vec![(&em as &dyn Emulator, lik())]);
    let short = sample(&post, &fixed, &AtomicBool::new(false), &Silent);
    assert!(short.iter().all(|c| c.theta.len() == 30));
    assert!(!converged(&short));

    let extended = SamplerParams {
        until_converged: Some(20_000),
        ..fixed
    };
    let post = LogPosterior::new(vec![p], vec![(&em as &dyn Emulator, lik())]);
    let long = sample(&post, &extended, &AtomicBool::new(false), &Silent);
    let n = long[0].theta.len();
    assert!(long.iter().all(|c| c.theta.len() == n));
    assert!(n > 30 && n < 20_000, "{n} draws per chain");
    assert_eq!(n % 30, 0, "extended by `draws` at a time");
    assert!(converged(&long));
    // The first 30 draws are those of the fixed run: extension continues the chains.
    assert_eq!(long[0].theta[..30], short[0].theta[..]);
    let (mu, tau) = conjugate(1.0, 1.0, 0.4, &ys);
    assert_matches(&long, mu, tau, "until converged");
}

#[test]
fn a_prior_from_earlier_draws_gives_the_all_data_posterior() {
    let (mu0, tau0, sigma) = (5.0, 3.0, 1.0);
    let first = [6.1, 7.3, 5.8, 6.6];
    let second = [6.9, 6.2, 7.0];
    let all: Vec<f64> = first.iter().chain(&second).copied().collect();
    let (mu1, tau1) = conjugate(mu0, tau0, sigma, &first);
    let (mu_all, tau_all) = conjugate(mu0, tau0, sigma, &all);

    // The earlier calibration's draws: exact draws of its normal posterior.
    let p = parameter(mu0, tau0, Prior::Uniform);
    let t = Transform { lo: p.lo, hi: p.hi };
    let mut rng = rand_chacha::ChaCha20Rng::seed_from_u64(3);
    let normal = Normal::new(mu1, tau1).unwrap();
    let z: Vec<Vec<f64>> = (0..50_000)
        .map(|_| vec![t.to_unconstrained(normal.sample(&mut rng))])
        .collect();
    let mvn = MvnPrior::fit(&z).expect("a normal fits");

    let lik = ExperimentLikelihood::from_values("e", &[second.to_vec()], &[vec![sigma; 3]]);
    let em = Identity;
    let post = LogPosterior::new(vec![p], vec![(&em as &dyn Emulator, lik)]).with_mvn_prior(mvn);
    let chains = sample(
        &post,
        &SamplerParams::metropolis(4, 2000, 10_000, 8),
        &AtomicBool::new(false),
        &Silent,
    );
    assert_matches(&chains, mu_all, tau_all, "sequential");
}

/// The fitted normal has the draws' mean and covariance (two parameters, correlated):
/// checked against the textbook sample moments computed here by hand.
#[test]
fn mvn_prior_has_the_sample_moments_and_normal_density() {
    let draws = vec![
        vec![0.0, 1.0],
        vec![1.0, 2.5],
        vec![2.0, 2.9],
        vec![3.0, 4.4],
        vec![-1.0, -0.2],
    ];
    let m = MvnPrior::fit(&draws).unwrap();
    let n = draws.len() as f64;
    let mean: Vec<f64> = (0..2)
        .map(|j| draws.iter().map(|r| r[j]).sum::<f64>() / n)
        .collect();
    let cov = |a: usize, b: usize| {
        draws
            .iter()
            .map(|r| (r[a] - mean[a]) * (r[b] - mean[b]))
            .sum::<f64>()
            / (n - 1.0)
    };
    let c = m.covariance();
    for a in 0..2 {
        assert!((m.mean[a] - mean[a]).abs() < 1e-12);
        for b in 0..2 {
            assert!((c[[a, b]] - cov(a, b)).abs() < 1e-12);
        }
    }
    // Bivariate normal density in closed form (e.g. Bishop 2006, eq. 2.43 with d = 2;
    // equation number from memory).
    let (s11, s22, s12) = (cov(0, 0), cov(1, 1), cov(0, 1));
    let det = s11 * s22 - s12 * s12;
    let x = [0.7, 1.1];
    let (d0, d1) = (x[0] - mean[0], x[1] - mean[1]);
    let q = (s22 * d0 * d0 - 2.0 * s12 * d0 * d1 + s11 * d1 * d1) / det;
    let exact = -0.5 * q - 0.5 * det.ln() - (2.0 * std::f64::consts::PI).ln();
    assert!((m.ln_density(&x) - exact).abs() < 1e-10);
    assert!(MvnPrior::fit(&[
        vec![1.0, 2.0],
        vec![1.0, 2.0],
        vec![1.0, 2.0],
        vec![1.0, 2.0]
    ])
    .is_err());
}

/// A likelihood with a narrow main mode at θ = 0.3 and a broad local maximum at
/// θ = 0.8 about 1,250 nats lower: η(θ) = 1 − exp(−((θ − 0.3)/0.0005)²)
/// − 0.5 exp(−((θ − 0.8)/0.1)²), one measurement 0 with sd 0.01.
struct TwoBasins;

impl Emulator for TwoBasins {
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let t = theta[0];
        let m =
            1.0 - (-((t - 0.3) / 0.0005).powi(2)).exp() - 0.5 * (-((t - 0.8) / 0.1).powi(2)).exp();
        (vec![m], vec![0.0])
    }
}

/// Start candidates and stranded chains: chain 0 of 4 is offered the main mode as a
/// start candidate (as the training points offer it in a campaign); the others start at
/// the best of their prior draws, in the broad basin of the local maximum, from which a
/// random walk never escapes. Halfway through warm-up they lie far more than 50 + d nats
/// below chain 0 and take over its state, so every chain samples the main mode. The
/// reference is where the posterior mass is: within 0.002 of 0.3, since the local mode's
/// relative density is e^−1250.
#[test]
fn stranded_chains_are_moved_to_the_main_mode() {
    let lik = ExperimentLikelihood::from_values("e", &[vec![0.0]], &[vec![0.01]]);
    let em = TwoBasins;
    let p = Parameter {
        name: "theta".into(),
        unit: None,
        lo: 0.0,
        hi: 1.0,
        prior: Prior::Uniform,
    };
    let post = LogPosterior::new(vec![p], vec![(&em as &dyn Emulator, lik)])
        .with_start_candidates(&[vec![0.3]]);
    let chains = sample(
        &post,
        &SamplerParams::metropolis(4, 1000, 1000, 11),
        &AtomicBool::new(false),
        &Silent,
    );
    assert!(chains[0].restarted_from.is_none());
    let moved: Vec<usize> = chains
        .iter()
        .filter(|c| c.restarted_from.is_some())
        .map(|c| c.index)
        .collect();
    assert!(!moved.is_empty(), "no chain was stranded");
    for c in &chains {
        if let Some(r) = c.restarted_from {
            assert_eq!(r.from, 0, "chain {} moved to chain {}", c.index, r.from);
            assert!(r.gap > 1000.0, "gap {}", r.gap);
        }
        for th in &c.theta {
            assert!(
                (th[0] - 0.3).abs() < 0.002,
                "chain {} at {}",
                c.index,
                th[0]
            );
        }
    }
    let s = summarize(&["theta".into()], &[], &chains);
    assert!(
        s.warnings.iter().any(|w| w.contains("stranded")),
        "{:?}",
        s.warnings
    );
}
