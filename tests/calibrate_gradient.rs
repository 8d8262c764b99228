//! The gradient the No-U-Turn sampler follows, against finite differences: the Gaussian
//! process's predictive mean and variance (all three kernels and trends), and the whole
//! log posterior on the unconstrained scale through a fitted basis surrogate — with
//! normal and lognormal priors, an unknown noise variance, a normal prior on z
//! (`prior_from`) and a fixed model discrepancy.
//!
//! These are structural checks (calculus, no published value): the analytic derivative
//! of a function must equal the limit of its difference quotients.

use assay::calibrate::discrepancy::DiscrepancyBlock;
use assay::calibrate::{
    Discrepancy, Emulator, ExperimentLikelihood, Hyper as DHyper, InverseGamma, LogPosterior,
    MvnPrior,
};
mod common;

use assay::study::{Parameter, Prior, SurrogateParams};
use assay::surrogate::{fit_surrogate, ExperimentModel, Kernel};
use common::curve::{curve, curve_runs, gradient_test_gps, STATIONS};
use ndarray::Array1;

/// Central differences of step 1e-5 on these O(1) functions: truncation O(h²f‴) ≈ 1e-10,
/// round-off O(εf/h) ≈ 1e-11.
const FD_STEP: f64 = 1e-5;
const FD_RTOL: f64 = 1e-6;

fn close(a: f64, b: f64, rtol: f64) -> bool {
    (a - b).abs() <= rtol * a.abs().max(b.abs()).max(1.0)
}

#[test]
fn gp_mean_and_variance_gradients_match_finite_differences() {
    // R&W 2006 eqs. 2.41–2.42 (equation numbers from memory) differentiated (derived
    // here), against central differences of Gp::predict_point; and predict_point against
    // the batch predict.
    for (kernel, trend, gp) in gradient_test_gps() {
        for at in [[0.31, 0.52, 0.17], [0.9, 0.05, 0.66], [1.2, -0.1, 0.5]] {
            let a = Array1::from(at.to_vec());
            let (m, v, gm, gv) = gp.predict_with_gradient(a.view());
            let (m1, v1) = gp.predict_point(a.view());
            let (mb, vb) = gp.predict(a.view().insert_axis(ndarray::Axis(0)));
            assert!(close(m, mb[0], 1e-12) && close(m1, mb[0], 1e-12));
            assert!(close(v, vb[0], 1e-10) && close(v1, vb[0], 1e-12));
            for d in 0..3 {
                let f = |h: f64| {
                    let mut b = at;
                    b[d] += h;
                    gp.predict_point(Array1::from(b.to_vec()).view())
                };
                let (p, q) = (f(FD_STEP), f(-FD_STEP));
                let fd_m = (p.0 - q.0) / (2.0 * FD_STEP);
                let fd_v = (p.1 - q.1) / (2.0 * FD_STEP);
                assert!(
                    close(gm[d], fd_m, FD_RTOL),
                    "{kernel:?} {trend:?} ∂m/∂x{d}: {} vs {fd_m}",
                    gm[d]
                );
                assert!(
                    close(gv[d], fd_v, FD_RTOL),
                    "{kernel:?} {trend:?} ∂v/∂x{d}: {} vs {fd_v}",
                    gv[d]
                );
            }
        }
    }
}

/// A surrogate of the curve fitted to `n` runs, and the parameters (a with a normal
/// prior, w lognormal).
fn surrogate(n: usize, seed: u64) -> (ExperimentModel, Vec<Parameter>) {
    let params = vec![
        Parameter {
            name: "a".into(),
            unit: None,
            lo: 1.0,
            hi: 3.0,
            prior: Prior::Normal { mean: 2.1, sd: 0.6 },
        },
        Parameter {
            name: "w".into(),
            unit: None,
            lo: 0.5,
            hi: 1.5,
            prior: Prior::LogNormal {
                mu: 0.0,
                sigma: 0.4,
            },
        },
    ];
    let set = curve_runs(n, seed, &params, "bar");
    let settings = SurrogateParams {
        variance_kept: 0.9999,
        ..SurrogateParams::default()
    };
    let mut s = fit_surrogate(&set, &params, settings, 1).unwrap();
    (s.experiments.remove(0), params)
}

/// Invented field data: the curve at (2.0, 1.1) plus fixed deviations, two replicates
/// at the third station.
fn field() -> Vec<Vec<f64>> {
    let dev = [0.03, -0.02, 0.01, 0.04, -0.03, 0.02];
    let mut v: Vec<Vec<f64>> = STATIONS
        .iter()
        .zip(dev)
        .map(|(s, e)| vec![curve(&[2.0, 1.1], *s) + e])
        .collect();
    v[2].push(curve(&[2.0, 1.1], STATIONS[2]) - 0.02);
    v
}

/// The analytic gradient of `post` at z against the five-point stencil (error O(h⁴))
/// of its log density, h = 3·10⁻³. The surrogate's predictive variance is a difference
/// of nearly equal terms (σ² − k*ᵀK⁻¹k* with a nugget of ~10⁻⁸), so the log density
/// carries round-off of ~10⁻⁹ that a small step amplifies: with a tight noise the
/// stencil agrees with the analytic value to 10⁻⁷ at h = 10⁻²…3·10⁻³ and drifts by 10⁻⁵
/// at h = 10⁻⁴ and 10⁻⁴ at h = 10⁻⁵ (measured).
fn assert_gradient(post: &LogPosterior<'_>, z: &[f64]) {
    let (v, g) = post.ln_density_and_gradient(z).expect("a gradient");
    assert!(
        close(v, post.ln_density(z), 1e-12),
        "value {v} vs {}",
        post.ln_density(z)
    );
    for l in 0..z.len() {
        let h = 3e-3;
        let f = |k: f64| {
            let mut a = z.to_vec();
            a[l] += k * h;
            post.ln_density(&a)
        };
        let fd = (-f(2.0) + 8.0 * f(1.0) - 8.0 * f(-1.0) + f(-2.0)) / (12.0 * h);
        assert!(close(g[l], fd, 1e-5), "∂/∂z{l}: {} vs {fd}", g[l]);
    }
}

/// Points on the unconstrained scale: near the data's parameters, and off to a side.
const ZS: [[f64; 2]; 3] = [[0.0, 0.2], [0.9, -1.1], [-1.4, 0.6]];

#[test]
fn posterior_gradient_with_known_noise_matches_finite_differences() {
    let (em, params) = surrogate(24, 3);
    let values = field();
    let sds: Vec<Vec<f64>> = values.iter().map(|v| vec![0.05; v.len()]).collect();
    let lik = ExperimentLikelihood::from_values("bar", &values, &sds);
    let post = LogPosterior::new(params, vec![(&em as &dyn Emulator, lik)]);
    assert!(post.has_gradient());
    for z in ZS {
        assert_gradient(&post, &z);
    }
}

#[test]
fn posterior_gradient_with_unknown_noise_matches_finite_differences() {
    let (em, params) = surrogate(24, 3);
    let lik = ExperimentLikelihood::with_unknown_noise(
        "bar",
        &field(),
        InverseGamma {
            shape: 3.0,
            scale: 0.01,
        },
    );
    let post = LogPosterior::new(params, vec![(&em as &dyn Emulator, lik)]);
    assert_eq!(post.dim(), 3);
    for (z, s) in ZS.iter().zip([-6.0, -3.0, -8.0]) {
        assert_gradient(&post, &[z[0], z[1], s]);
    }
}

#[test]
fn posterior_gradient_with_a_normal_prior_on_z_matches_finite_differences() {
    let (em, params) = surrogate(24, 3);
    let values = field();
    let sds: Vec<Vec<f64>> = values.iter().map(|v| vec![0.05; v.len()]).collect();
    let lik = ExperimentLikelihood::from_values("bar", &values, &sds);
    // Correlated draws on z (invented).
    let draws: Vec<Vec<f64>> = (0..50)
        .map(|i| {
            let t = i as f64 / 7.0;
            vec![
                0.2 + 0.5 * t.sin(),
                -0.1 + 0.3 * t.sin() + 0.2 * (2.0 * t).cos(),
            ]
        })
        .collect();
    let mvn = MvnPrior::fit(&draws).unwrap();
    let post = LogPosterior::new(params, vec![(&em as &dyn Emulator, lik)]).with_mvn_prior(mvn);
    for z in ZS {
        assert_gradient(&post, &z);
    }
}

#[test]
fn posterior_gradient_with_a_fixed_discrepancy_matches_finite_differences() {
    let (em, params) = surrogate(24, 3);
    let values = field();
    let sds: Vec<Vec<f64>> = values.iter().map(|v| vec![0.05; v.len()]).collect();
    let disc = Discrepancy {
        kernel: Kernel::Matern52,
        blocks: vec![DiscrepancyBlock {
            quantity: "y".into(),
            index: (0..STATIONS.len()).collect(),
            x: Some(STATIONS.to_vec()),
            sd: DHyper::Fixed(0.1),
            length_scale: Some(DHyper::Fixed(0.8)),
            at: None,
        }],
    };
    let lik = ExperimentLikelihood::from_values("bar", &values, &sds).with_discrepancy(disc);
    let post = LogPosterior::new(params, vec![(&em as &dyn Emulator, lik)]);
    assert!(post.has_gradient());
    for z in ZS {
        assert_gradient(&post, &z);
    }
}

#[test]
fn sampled_discrepancy_hyperparameters_have_no_gradient() {
    let (em, params) = surrogate(24, 3);
    let values = field();
    let sds: Vec<Vec<f64>> = values.iter().map(|v| vec![0.05; v.len()]).collect();
    let disc = Discrepancy {
        kernel: Kernel::SquaredExponential,
        blocks: vec![DiscrepancyBlock {
            quantity: "y".into(),
            index: (0..STATIONS.len()).collect(),
            x: Some(STATIONS.to_vec()),
            sd: DHyper::HalfNormal { scale: 0.1 },
            length_scale: Some(DHyper::Fixed(0.8)),
            at: None,
        }],
    };
    let lik = ExperimentLikelihood::from_values("bar", &values, &sds).with_discrepancy(disc);
    let post = LogPosterior::new(params, vec![(&em as &dyn Emulator, lik)]);
    assert!(!post.has_gradient());
    assert!(post.ln_density_and_gradient(&[0.0, 0.0, -2.0]).is_none());
}
