//! Calibration with an unknown measurement variance against closed forms.
//!
//! Model: y_r ~ N(μ, σ²), r = 1..n, a flat prior on μ (a uniform range much wider than
//! the posterior) and an inverse-gamma prior σ² ~ IG(a, b), p(σ²) ∝ (σ²)^(−a−1) e^(−b/σ²).
//! With ȳ the mean and S = Σ (y_r − ȳ)², integrating μ out of
//! p(μ, σ²|y) ∝ (σ²)^(−a−1) e^(−b/σ²) (σ²)^(−n/2) exp(−(S + n(ȳ − μ)²)/(2σ²)) gives
//!   σ² | y ~ IG(α_n, β_n),  α_n = a + (n − 1)/2,  β_n = b + S/2,
//!   μ | σ², y ~ N(ȳ, σ²/n),
//! so μ | y is Student-t with ν = 2α_n degrees of freedom, location ȳ and
//! scale² = β_n / (α_n n); its sd is scale·√(ν/(ν − 2)), and E[σ² | y] = β_n/(α_n − 1).
//! (Gelman et al. 2013, Bayesian Data Analysis 3rd ed., §3.2–3.3 (section numbers from
//! memory), the normal model with unknown mean and variance; derived here for the
//! flat-mean + inverse-gamma case, the t-marginal and inverse-gamma moments quoted from
//! memory.)
//!
//! The simulator is exact: y = θ with zero emulator variance, so the test checks the
//! likelihood, the noise prior, the ln σ² transform and the sampler, not a surrogate.

use assay::calibrate::{
    sample, summarize, Emulator, ExperimentLikelihood, InverseGamma, LogPosterior, SamplerParams,
};
use assay::progress::Silent;
use assay::study::spec::SamplerChoice;
use assay::study::{Parameter, Prior};
use assay::surrogate::{LowRankGradient, LowRankPrediction};
use std::sync::atomic::AtomicBool;

/// The posterior mean must be within this many Monte Carlo standard errors of the exact
/// value: a 4-sigma band fails by chance about once in 16,000.
const MEAN_N_MCSE: f64 = 4.0;
/// Relative error allowed on the posterior sd of μ (our acceptance rule: 5 %).
const SD_RTOL: f64 = 0.05;
/// Relative error allowed on E[σ² | y] (our acceptance rule: 5 %). With α_n ≥ 6 the
/// relative posterior sd of σ² is 1/√(α_n − 2) ≤ 0.5, so with a bulk ESS of several
/// thousand the Monte Carlo error is under 1 %.
const VAR_MEAN_RTOL: f64 = 0.05;
/// Convergence threshold recommended by Vehtari et al. (2021).
const RHAT_MAX: f64 = 1.01;
/// The type-7 median of an even number of draws averages the two middle ones, and
/// √ does not commute with that average; adjacent draws of 80,000 differ by ~1e-4 of
/// the spread, so the mismatch is of order 1e-8.
const MEDIAN_RTOL: f64 = 1e-6;

struct Identity;

impl Emulator for Identity {
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        (vec![theta[0]], vec![0.0])
    }

    fn predict_low_rank_with_gradient(
        &self,
        theta: &[f64],
    ) -> Option<(LowRankPrediction, LowRankGradient)> {
        let grad = LowRankGradient {
            mean: ndarray::array![[1.0]],
            weight_var: ndarray::Array2::zeros((0, 1)),
            diag: None,
        };
        Some((LowRankPrediction::diagonal(vec![theta[0]], vec![0.0]), grad))
    }

    fn has_gradient(&self) -> bool {
        true
    }
}

struct Exact {
    t_location: f64,
    t_sd: f64,
    var_mean: f64,
    t_scale: f64,
}

fn exact(ys: &[f64], a: f64, b: f64) -> Exact {
    let n = ys.len() as f64;
    let ybar = ys.iter().sum::<f64>() / n;
    let s: f64 = ys.iter().map(|y| (y - ybar).powi(2)).sum();
    let alpha_n = a + (n - 1.0) / 2.0;
    let beta_n = b + s / 2.0;
    let nu = 2.0 * alpha_n;
    let scale = (beta_n / (alpha_n * n)).sqrt();
    Exact {
        t_location: ybar,
        t_sd: scale * (nu / (nu - 2.0)).sqrt(),
        var_mean: beta_n / (alpha_n - 1.0),
        t_scale: scale,
    }
}

fn check(ys: &[f64], a: f64, b: f64, params: SamplerParams) {
    let ex = exact(ys, a, b);
    // ±200 t-scales: with ν ≥ 12 the t tail beyond carries < 1e-25 of the mass, so the
    // uniform prior is flat for every practical purpose.
    let half = 200.0 * ex.t_scale;
    let p = Parameter {
        name: "mu".into(),
        unit: None,
        lo: ex.t_location - half,
        hi: ex.t_location + half,
        prior: Prior::Uniform,
    };
    let lik = ExperimentLikelihood::with_unknown_noise(
        "e",
        &[ys.to_vec()],
        InverseGamma { shape: a, scale: b },
    );
    let em = Identity;
    let post = LogPosterior::new(vec![p], vec![(&em as &dyn Emulator, lik)]);
    assert_eq!(post.noise_names(), vec!["e".to_string()]);
    let chains = sample(&post, &params, &AtomicBool::new(false), &Silent);
    let s = summarize(&["mu".into()], &post.noise_names(), &chains);
    let mu = s.parameters[0];
    let mcse = s.mcse[0].mean;
    assert!(
        (mu.mean - ex.t_location).abs() < MEAN_N_MCSE * mcse,
        "mean {} vs exact {} (MCSE {mcse})",
        mu.mean,
        ex.t_location
    );
    assert!(
        (mu.sd - ex.t_sd).abs() / ex.t_sd < SD_RTOL,
        "sd {} vs exact t sd {}",
        mu.sd,
        ex.t_sd
    );
    assert!(s.diagnostics[0].rhat < RHAT_MAX, "{:?}", s.diagnostics[0]);

    let (name, noise) = &s.noise[0];
    assert_eq!(name, "e");
    assert!(
        (noise.variance.mean - ex.var_mean).abs() / ex.var_mean < VAR_MEAN_RTOL,
        "E[σ²] {} vs exact {}",
        noise.variance.mean,
        ex.var_mean
    );
    assert!(noise.diagnostics.rhat < RHAT_MAX, "{:?}", noise.diagnostics);
    // The sd draws are the square roots of the variance draws, so their medians agree
    // up to the interpolation between the two middle draws.
    let rel = (noise.sd.median.powi(2) - noise.variance.median).abs() / noise.variance.median;
    assert!(rel < MEDIAN_RTOL, "median sd² vs median variance: {rel}");
}

#[test]
fn flat_mean_inverse_gamma_variance_gives_student_t() {
    // ν = 2·2 + 10 − 1 = 13.
    let ys = [4.1, 3.7, 5.2, 4.8, 3.9, 4.4, 5.0, 4.6, 3.5, 4.3];
    check(&ys, 2.0, 1.0, SamplerParams::metropolis(4, 3000, 20000, 5));
}

#[test]
fn few_replicates_with_an_informative_variance_prior() {
    // ν = 2·4 + 5 − 1 = 12; the prior (mean σ² = 0.1) and the data (S/(n−1) ≈ 0.87)
    // disagree, so the posterior is a real compromise, not the data alone.
    let ys = [-1.2, 0.3, -0.4, 1.1, -0.9];
    check(&ys, 4.0, 0.3, SamplerParams::metropolis(4, 3000, 20000, 23));
}

#[test]
fn nuts_gives_the_student_t_and_the_inverse_gamma_moments() {
    // The same two cases with the No-U-Turn sampler (4 chains, 1,000 warm-up, 4,000
    // draws each): the noise variance is moved by the gradient too.
    let nuts = |seed| SamplerParams {
        kind: SamplerChoice::Nuts,
        ..SamplerParams::metropolis(4, 1000, 4000, seed)
    };
    check(
        &[4.1, 3.7, 5.2, 4.8, 3.9, 4.4, 5.0, 4.6, 3.5, 4.3],
        2.0,
        1.0,
        nuts(6),
    );
    check(&[-1.2, 0.3, -0.4, 1.1, -0.9], 4.0, 0.3, nuts(24));
}
