//! Calibration of a three-parameter model with a curve output against the closed-form
//! posterior of a linear-Gaussian system: with independent noise, and with a fixed
//! model-discrepancy term added to the noise covariance.
//!
//! Model: y(x) = θ₁ + θ₂ x + θ₃ x² observed at ten x values (two of them with a second
//! replicate), known noise σ, independent normal priors θ ~ N(μ₀, Λ⁻¹) with Λ diagonal.
//! Writing the measurements as y = Aθ + ε, ε ~ N(0, L⁻¹), L = I/σ², the posterior is
//! θ | y ~ N(m, Σ),  Σ = (Λ + Aᵀ L A)⁻¹,  m = Σ (Aᵀ L y + Λ μ₀)
//! (Bishop 2006, Pattern Recognition and Machine Learning, eqs. 2.113–2.117 with b = 0;
//! Murphy 2012, Machine Learning: A Probabilistic Perspective, §4.4.1; equation and
//! section numbers from memory).
//!
//! The emulator is exact (the polynomial, zero predictive variance) and the prior
//! ranges span ±30 prior sds, so the truncation removes no measurable mass. The
//! replicates enter the likelihood through their sufficient statistics, while the
//! closed form uses every measurement as its own row of A: the test checks that the two
//! agree.

mod common;

use assay::calibrate::discrepancy::DiscrepancyBlock;
use assay::calibrate::{
    sample, summarize, Discrepancy, Emulator, ExperimentLikelihood, Hyper, LogPosterior,
    PosteriorSummary, SamplerParams,
};
use assay::progress::Silent;
use assay::study::spec::SamplerChoice;
use assay::study::{Parameter, Prior};
use assay::surrogate::{Kernel, LowRankGradient, LowRankPrediction};
use common::exact::assert_matches_exact;
use ndarray::{Array1, Array2};
use ndarray_linalg::Inverse;
use std::sync::atomic::AtomicBool;

/// Absolute error allowed on the posterior correlation of θ₁ and θ₂ (our acceptance
/// rule: 0.05).
/// The Monte Carlo sd of a sample correlation ρ̂ is about (1 − ρ²)/√ESS, under 0.01 here.
const CORR_ATOL: f64 = 0.05;

/// The field x values.
const XS: [f64; 10] = [0.0, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9];
/// Measurement sd (known).
const SIGMA: f64 = 0.1;
/// Prior means and sds of θ₁, θ₂, θ₃.
const PRIOR_MEAN: [f64; 3] = [0.0, 0.0, 1.0];
const PRIOR_SD: [f64; 3] = [2.0, 3.0, 4.0];

/// The curve at `XS`.
struct Quadratic;

impl Emulator for Quadratic {
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let m = XS
            .iter()
            .map(|x| theta[0] + theta[1] * x + theta[2] * x * x)
            .collect();
        (m, vec![0.0; XS.len()])
    }

    /// ∂μ_j/∂θ = (1, x_j, x_j²); no predictive variance.
    fn predict_low_rank_with_gradient(
        &self,
        theta: &[f64],
    ) -> Option<(LowRankPrediction, LowRankGradient)> {
        let (m, v) = self.predict(theta);
        let grad = LowRankGradient {
            mean: Array2::from_shape_fn((XS.len(), 3), |(j, c)| XS[j].powi(c as i32)),
            weight_var: Array2::zeros((0, 3)),
            diag: None,
        };
        Some((LowRankPrediction::diagonal(m, v), grad))
    }

    fn has_gradient(&self) -> bool {
        true
    }
}

/// Invented field data: θ = (1, −2, 3) plus fixed deviations of about one σ; the x
/// values at index 3 and 8 have a second replicate.
fn field_data() -> Vec<Vec<f64>> {
    let dev = [
        0.08, -0.12, 0.03, 0.15, -0.05, -0.09, 0.11, 0.02, -0.14, 0.06,
    ];
    let mut values: Vec<Vec<f64>> = XS
        .iter()
        .zip(dev)
        .map(|(x, e)| vec![1.0 - 2.0 * x + 3.0 * x * x + e])
        .collect();
    values[3].push(1.0 - 2.0 * 0.3 + 3.0 * 0.09 - 0.07);
    values[8].push(1.0 - 2.0 * 0.8 + 3.0 * 0.64 + 0.10);
    values
}

/// Exact posterior mean and covariance from Bishop's eqs. 2.116–2.117 (from memory) with
/// the noise precision L = Σ⁻¹ of a known covariance Σ of every measurement:
/// `cov(x_a, x_b, same)` for two measurements at stations x_a, x_b (`same`: one
/// measurement).
fn exact(values: &[Vec<f64>], cov: impl Fn(f64, f64, bool) -> f64) -> (Array1<f64>, Array2<f64>) {
    let rows: Vec<(f64, f64)> = XS
        .iter()
        .zip(values)
        .flat_map(|(x, ys)| ys.iter().map(move |y| (*x, *y)))
        .collect();
    let n = rows.len();
    let a = Array2::from_shape_fn((n, 3), |(i, c)| rows[i].0.powi(c as i32));
    let y = Array1::from_iter(rows.iter().map(|r| r.1));
    let l = Array2::from_shape_fn((n, n), |(i, k)| cov(rows[i].0, rows[k].0, i == k))
        .inv()
        .expect("positive definite");
    let lambda = Array2::from_diag(&Array1::from_iter(PRIOR_SD.iter().map(|s| 1.0 / (s * s))));
    let precision = &lambda + &a.t().dot(&l).dot(&a);
    let cov = precision.inv().expect("positive definite");
    let rhs = a.t().dot(&l).dot(&y) + lambda.dot(&Array1::from(PRIOR_MEAN.to_vec()));
    (cov.dot(&rhs), cov)
}

/// The normal priors, on ranges of ±30 prior sds.
fn parameters(names: &[String]) -> Vec<Parameter> {
    (0..3)
        .map(|i| Parameter {
            name: names[i].clone(),
            unit: None,
            lo: PRIOR_MEAN[i] - 30.0 * PRIOR_SD[i],
            hi: PRIOR_MEAN[i] + 30.0 * PRIOR_SD[i],
            prior: Prior::Normal {
                mean: PRIOR_MEAN[i],
                sd: PRIOR_SD[i],
            },
        })
        .collect()
}

/// Sample `lik` and compare each parameter's mean and sd with the exact (m, cov).
fn assert_matches(
    lik: ExperimentLikelihood,
    names: &[String],
    m: &Array1<f64>,
    cov: &Array2<f64>,
    params: SamplerParams,
) -> PosteriorSummary {
    let em = Quadratic;
    let post = LogPosterior::new(parameters(names), vec![(&em as &dyn Emulator, lik)]);
    assert_eq!(post.dim(), 3, "only θ is sampled");
    let chains = sample(&post, &params, &AtomicBool::new(false), &Silent);
    let s = summarize(names, &[], &chains).with_discrepancy(&post, &chains);
    assert_matches_exact(&s, names, m, cov, &PRIOR_SD);
    s
}

#[test]
fn quadratic_curve_with_normal_priors_matches_the_linear_gaussian_posterior() {
    let values = field_data();
    let (m, cov) = exact(&values, |_, _, same| if same { SIGMA * SIGMA } else { 0.0 });
    let names: Vec<String> = ["t1", "t2", "t3"].iter().map(|s| s.to_string()).collect();
    let sds: Vec<Vec<f64>> = values.iter().map(|v| vec![SIGMA; v.len()]).collect();
    let lik = ExperimentLikelihood::from_values("curve", &values, &sds);
    let s = assert_matches(
        lik,
        &names,
        &m,
        &cov,
        SamplerParams::metropolis(4, 4000, 20000, 101),
    );
    let exact_corr = cov[[0, 1]] / (cov[[0, 0]] * cov[[1, 1]]).sqrt();
    let got = s.correlation.matrix[0][1];
    assert!(
        (got - exact_corr).abs() < CORR_ATOL,
        "corr(t1, t2) {got} vs exact {exact_corr}"
    );
    assert_eq!(s.correlation.names, names);
    for j in 0..3 {
        assert_eq!(s.correlation.matrix[j][j], 1.0);
        for k in 0..3 {
            assert_eq!(s.correlation.matrix[j][k], s.correlation.matrix[k][j]);
        }
    }
}

/// Discrepancy hyperparameters of the next test (fixed; invented for the test).
const DELTA_SD: f64 = 0.2;
const DELTA_ELL: f64 = 0.3;

/// The same curve with a fixed squared-exponential model discrepancy (Kennedy & O'Hagan
/// 2001): the measurements' covariance is Σ = σ²I + K_δ, K_δ = s² exp(−(x − x′)²/(2ℓ²))
/// (replicates at one x share δ), and the posterior is the linear-Gaussian one with that
/// Σ (Bishop 2006, eqs. 2.116–2.117 with L = Σ⁻¹; equation numbers from memory).
/// The likelihood with the fixed discrepancy, and the exact posterior (m, cov).
fn fixed_discrepancy_case() -> (ExperimentLikelihood, Array1<f64>, Array2<f64>) {
    let values = field_data();
    let (m, cov) = exact(&values, |xa, xb, same| {
        DELTA_SD * DELTA_SD * (-0.5 * ((xa - xb) / DELTA_ELL).powi(2)).exp()
            + if same { SIGMA * SIGMA } else { 0.0 }
    });
    let disc = Discrepancy {
        kernel: Kernel::SquaredExponential,
        blocks: vec![DiscrepancyBlock {
            quantity: "y".into(),
            index: (0..XS.len()).collect(),
            x: Some(XS.to_vec()),
            sd: Hyper::Fixed(DELTA_SD),
            length_scale: Some(Hyper::Fixed(DELTA_ELL)),
            at: None,
        }],
    };
    let sds: Vec<Vec<f64>> = values.iter().map(|v| vec![SIGMA; v.len()]).collect();
    let lik = ExperimentLikelihood::from_values("curve", &values, &sds).with_discrepancy(disc);
    (lik, m, cov)
}

#[test]
fn fixed_discrepancy_matches_the_linear_gaussian_posterior_with_its_covariance() {
    let (lik, m, cov) = fixed_discrepancy_case();
    let names: Vec<String> = ["t1", "t2", "t3"].iter().map(|s| s.to_string()).collect();
    let s = assert_matches(
        lik,
        &names,
        &m,
        &cov,
        SamplerParams::metropolis(4, 4000, 20000, 7),
    );
    // The record states the fixed values.
    let (e, q, d) = &s.discrepancy[0];
    assert_eq!((e.as_str(), q.as_str()), ("curve", "y"));
    assert_eq!(d.sd.value, Some(DELTA_SD));
    assert_eq!(d.length_scale.as_ref().unwrap().value, Some(DELTA_ELL));
    assert!(d.sd.posterior.is_none());
}

/// The No-U-Turn sampler's settings for the tests: 4 chains, 1,000 warm-up iterations
/// and 2,000 draws each (its draws are far less correlated than a random walk's).
fn nuts(seed: u64) -> SamplerParams {
    SamplerParams {
        kind: SamplerChoice::Nuts,
        ..SamplerParams::metropolis(4, 1000, 2000, seed)
    }
}

#[test]
fn nuts_matches_the_linear_gaussian_posterior() {
    let values = field_data();
    let (m, cov) = exact(&values, |_, _, same| if same { SIGMA * SIGMA } else { 0.0 });
    let names: Vec<String> = ["t1", "t2", "t3"].iter().map(|s| s.to_string()).collect();
    let sds: Vec<Vec<f64>> = values.iter().map(|v| vec![SIGMA; v.len()]).collect();
    let lik = ExperimentLikelihood::from_values("curve", &values, &sds);
    let s = assert_matches(lik, &names, &m, &cov, nuts(23));
    let exact_corr = cov[[0, 1]] / (cov[[0, 0]] * cov[[1, 1]]).sqrt();
    let got = s.correlation.matrix[0][1];
    assert!(
        (got - exact_corr).abs() < CORR_ATOL,
        "corr(t1, t2) {got} vs exact {exact_corr}"
    );
    assert!(s.warnings.is_empty(), "{:?}", s.warnings);
}

#[test]
fn nuts_matches_the_linear_gaussian_posterior_with_a_fixed_discrepancy() {
    let (lik, m, cov) = fixed_discrepancy_case();
    let names: Vec<String> = ["t1", "t2", "t3"].iter().map(|s| s.to_string()).collect();
    assert_matches(lik, &names, &m, &cov, nuts(29));
}
