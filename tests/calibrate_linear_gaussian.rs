//! Calibration of a three-parameter model with a curve output against the closed-form
//! posterior of a linear-Gaussian system.
//!
//! Model: y(x) = θ₁ + θ₂ x + θ₃ x² observed at ten x values (two of them with a second
//! replicate), known noise σ, independent normal priors θ ~ N(μ₀, Λ⁻¹) with Λ diagonal.
//! Writing the measurements as y = Aθ + ε, ε ~ N(0, L⁻¹), L = I/σ², the posterior is
//! θ | y ~ N(m, Σ),  Σ = (Λ + Aᵀ L A)⁻¹,  m = Σ (Aᵀ L y + Λ μ₀)
//! (Bishop 2006, Pattern Recognition and Machine Learning, eqs. 2.113–2.117 with b = 0;
//! Murphy 2012, Machine Learning: A Probabilistic Perspective, §4.4.1; equation numbers
//! quoted from memory).
//!
//! The emulator is exact (the polynomial, zero predictive variance) and the prior
//! ranges span ±30 prior sds, so the truncation removes no measurable mass. The
//! replicates enter the likelihood through their sufficient statistics, while the
//! closed form uses every measurement as its own row of A: the test checks that the two
//! agree.

use assay::calibrate::{
    sample, summarize, Emulator, ExperimentLikelihood, LogPosterior, SamplerParams,
};
use assay::progress::Silent;
use assay::study::{Parameter, Prior};
use ndarray::{Array1, Array2};
use ndarray_linalg::Inverse;
use std::sync::atomic::AtomicBool;

/// The posterior mean must be within this many Monte Carlo standard errors of the exact
/// value: a 4-sigma band fails by chance about once in 16,000 per parameter.
const MEAN_N_MCSE: f64 = 4.0;
/// Relative error allowed on each posterior sd (issue 7 acceptance criterion: 5 %).
const SD_RTOL: f64 = 0.05;
/// Absolute error allowed on the posterior correlation of θ₁ and θ₂ (the brief's 0.05).
/// The Monte Carlo sd of a sample correlation ρ̂ is about (1 − ρ²)/√ESS, under 0.01 here.
const CORR_ATOL: f64 = 0.05;
/// Convergence threshold recommended by Vehtari et al. (2021).
const RHAT_MAX: f64 = 1.01;

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

/// Exact posterior mean and covariance from Bishop's eqs. 2.116–2.117.
fn exact(values: &[Vec<f64>]) -> (Array1<f64>, Array2<f64>) {
    let rows: Vec<(f64, f64)> = XS
        .iter()
        .zip(values)
        .flat_map(|(x, ys)| ys.iter().map(move |y| (*x, *y)))
        .collect();
    let mut a = Array2::<f64>::zeros((rows.len(), 3));
    let mut y = Array1::<f64>::zeros(rows.len());
    for (i, (x, v)) in rows.iter().enumerate() {
        a[[i, 0]] = 1.0;
        a[[i, 1]] = *x;
        a[[i, 2]] = x * x;
        y[i] = *v;
    }
    let lambda = Array2::from_diag(&Array1::from_iter(PRIOR_SD.iter().map(|s| 1.0 / (s * s))));
    let l = 1.0 / (SIGMA * SIGMA);
    let precision = &lambda + &(a.t().dot(&a) * l);
    let cov = precision.inv().expect("positive definite");
    let rhs = a.t().dot(&y) * l + lambda.dot(&Array1::from(PRIOR_MEAN.to_vec()));
    (cov.dot(&rhs), cov)
}

#[test]
fn quadratic_curve_with_normal_priors_matches_the_linear_gaussian_posterior() {
    let values = field_data();
    let (m, cov) = exact(&values);
    let names: Vec<String> = ["t1", "t2", "t3"].iter().map(|s| s.to_string()).collect();
    let parameters: Vec<Parameter> = (0..3)
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
        .collect();
    let sds: Vec<Vec<f64>> = values.iter().map(|v| vec![SIGMA; v.len()]).collect();
    let lik = ExperimentLikelihood::from_values("curve", &values, &sds);
    let em = Quadratic;
    let post = LogPosterior::new(parameters, vec![(&em as &dyn Emulator, lik)]);
    let params = SamplerParams::metropolis(4, 4000, 20000, 101);
    let chains = sample(&post, &params, &AtomicBool::new(false), &Silent);
    let s = summarize(&names, &[], &chains);
    for j in 0..3 {
        let p = s.parameters[j];
        let exact_sd = cov[[j, j]].sqrt();
        let mcse = s.mcse[j].mean;
        assert!(
            (p.mean - m[j]).abs() < MEAN_N_MCSE * mcse,
            "{}: mean {} vs exact {} (MCSE {mcse})",
            names[j],
            p.mean,
            m[j]
        );
        assert!(
            (p.sd - exact_sd).abs() / exact_sd < SD_RTOL,
            "{}: sd {} vs exact {exact_sd}",
            names[j],
            p.sd
        );
        assert!(s.diagnostics[j].rhat < RHAT_MAX, "{:?}", s.diagnostics[j]);
        // Posterior variance ≤ prior variance in the conjugate case.
        assert!(p.sd < PRIOR_SD[j]);
    }
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
