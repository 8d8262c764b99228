//! The GP core against scikit-learn (fixture `tests/reference/gp_lml.json`, made by
//! `tests/reference/gp_reference.py`; library versions are recorded in the fixture).

use assay::surrogate::{Gp, Hyper, Kernel, Trend};
use ndarray::{Array1, Array2};
use serde::Deserialize;

/// Agreement with scikit-learn to 1e-8 relative (our acceptance level). Both use
/// LAPACK Cholesky in double precision, so differences are round-off of O(cond(K)·ε);
/// measured: at most 2e-14 (likelihood, gradient, means) and 3e-13 (sds) relative on
/// these cases, so the bound has five orders of magnitude of room.
const LML_RTOL: f64 = 1e-8;
/// Predictive means and sds, relative to scikit-learn's value.
const PRED_RTOL: f64 = 1e-8;
/// Analytic gradient vs scikit-learn's analytic gradient, relative (components of
/// magnitude below 1 are compared absolutely).
const GRAD_RTOL: f64 = 1e-8;

#[derive(Deserialize)]
struct Case {
    name: String,
    x: Vec<Vec<f64>>,
    y: Vec<f64>,
    signal_var: f64,
    length_scales: Vec<f64>,
    noise_var: f64,
    ln_marginal_likelihood: f64,
    grad_ln_params: Vec<f64>,
    x_test: Vec<Vec<f64>>,
    mean: Vec<f64>,
    sd: Vec<f64>,
}

#[derive(Deserialize)]
struct Fixture {
    cases: Vec<Case>,
}

fn matrix(rows: &[Vec<f64>]) -> Array2<f64> {
    Array2::from_shape_fn((rows.len(), rows[0].len()), |(i, j)| rows[i][j])
}

fn fixture() -> Fixture {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/gp_lml.json"
    ))
    .unwrap();
    serde_json::from_str(&text).unwrap()
}

fn gp_of(c: &Case) -> Gp {
    let hyper = Hyper {
        ln_signal_var: c.signal_var.ln(),
        ln_length_scales: c.length_scales.iter().map(|l| l.ln()).collect(),
        // assay's nugget is relative to σ²: η = g/σ².
        ln_nugget: c.noise_var.ln() - c.signal_var.ln(),
    };
    Gp::fit(
        matrix(&c.x).view(),
        Array1::from(c.y.clone()).view(),
        Kernel::Matern52,
        Trend::Zero,
        hyper,
    )
    .unwrap()
}

#[test]
fn log_marginal_likelihood_matches_scikit_learn() {
    for c in fixture().cases {
        let gp = gp_of(&c);
        let rel = (gp.ln_marginal_likelihood - c.ln_marginal_likelihood).abs()
            / c.ln_marginal_likelihood.abs().max(1.0);
        assert!(
            rel < LML_RTOL,
            "{}: {} vs {}",
            c.name,
            gp.ln_marginal_likelihood,
            c.ln_marginal_likelihood
        );
    }
}

#[test]
fn gradient_matches_scikit_learn() {
    for c in fixture().cases {
        let mut g = gp_of(&c).gradient();
        // scikit-learn's theta is (ln σ², ln ℓ…) with the absolute noise g fixed (alpha);
        // assay's is (ln σ², ln ℓ…, ln η) with g = σ²η, so ∂/∂ln σ²|_g = ∂/∂ln σ²|_η − ∂/∂ln η.
        let last = g.len() - 1;
        g[0] -= g[last];
        for (k, want) in c.grad_ln_params.iter().enumerate() {
            assert!(
                (g[k] - want).abs() < GRAD_RTOL * want.abs().max(1.0),
                "{} [{k}]: {} vs {}",
                c.name,
                g[k],
                want
            );
        }
    }
}

#[test]
fn prediction_matches_scikit_learn() {
    for c in fixture().cases {
        let gp = gp_of(&c);
        let (m, v) = gp.predict(matrix(&c.x_test).view());
        for i in 0..c.mean.len() {
            assert!(
                (m[i] - c.mean[i]).abs() <= PRED_RTOL * c.mean[i].abs(),
                "{} mean[{i}]: {} vs {}",
                c.name,
                m[i],
                c.mean[i]
            );
            // Our variance is of the latent f plus nothing: scikit-learn's sd with alpha
            // outside the kernel is the same quantity.
            assert!(
                (v[i].sqrt() - c.sd[i]).abs() <= PRED_RTOL * c.sd[i].abs(),
                "{} sd[{i}]: {} vs {}",
                c.name,
                v[i].sqrt(),
                c.sd[i]
            );
        }
    }
}
