//! Structural checks of the GP core (Rasmussen & Williams 2006, Gaussian Processes for
//! Machine Learning): gradients against finite differences, closed-form leave-one-out
//! against refitting without the point, interpolation as the nugget goes to zero.

use assay::surrogate::{Gp, Hyper, Kernel, Trend};
use ndarray::{Array1, Array2};

/// Central differences with step 1e-5 on O(1) log-hyperparameters: truncation error
/// ~1e-10, round-off ~1e-11·|ln p|; 1e-5 relative is a safe margin.
const FD_RTOL: f64 = 1e-5;
/// Closed-form LOO is algebraically identical to refitting; only round-off differs.
const LOO_RTOL: f64 = 1e-6;
/// With η = 1e-10 the interpolation error at the data is of order η·|y|.
const INTERP_ATOL: f64 = 1e-6;

fn data(n: usize, d: usize) -> (Array2<f64>, Array1<f64>) {
    // A fixed, irregular point set (golden-ratio lattice) and a smooth test function.
    let x = Array2::from_shape_fn((n, d), |(i, j)| {
        ((i as f64 + 0.5) * (0.618_033_988_75 + 0.414_213_562 * j as f64)).fract()
    });
    let y = Array1::from_shape_fn(n, |i| {
        let r = x.row(i);
        (3.0 * r[0]).sin()
            + if d > 1 { r[1] * r[1] } else { 0.0 }
            + if d > 2 { 0.5 * r[2] } else { 0.0 }
    });
    (x, y)
}

fn hyper(d: usize, ln_nugget: f64) -> Hyper {
    Hyper {
        ln_signal_var: 0.3,
        ln_length_scales: (0..d).map(|j| (0.4 + 0.2 * j as f64).ln()).collect(),
        ln_nugget,
    }
}

#[test]
fn gradient_matches_finite_differences_for_every_trend_and_kernel() {
    let (x, y) = data(15, 3);
    for kernel in [
        Kernel::Matern52,
        Kernel::Matern32,
        Kernel::SquaredExponential,
    ] {
        for trend in [Trend::Zero, Trend::Constant, Trend::Linear] {
            let h0 = hyper(3, (1e-3f64).ln());
            let gp = Gp::fit(x.view(), y.view(), kernel, trend, h0.clone()).unwrap();
            let g = gp.gradient();
            let v0 = h0.to_vec();
            for k in 0..v0.len() {
                let step = 1e-5;
                let mut vp = v0.clone();
                let mut vm = v0.clone();
                vp[k] += step;
                vm[k] -= step;
                let fp = Gp::fit(x.view(), y.view(), kernel, trend, Hyper::from_slice(&vp))
                    .unwrap()
                    .ln_marginal_likelihood;
                let fm = Gp::fit(x.view(), y.view(), kernel, trend, Hyper::from_slice(&vm))
                    .unwrap()
                    .ln_marginal_likelihood;
                let fd = (fp - fm) / (2.0 * step);
                assert!(
                    (fd - g[k]).abs() <= FD_RTOL * fd.abs().max(1.0),
                    "{kernel:?} {trend:?} θ[{k}]: analytic {} vs fd {fd}",
                    g[k]
                );
            }
        }
    }
}

#[test]
fn closed_form_leave_one_out_equals_refitting() {
    let (x, y) = data(12, 2);
    for trend in [Trend::Zero, Trend::Constant, Trend::Linear] {
        let h = hyper(2, (1e-4f64).ln());
        let gp = Gp::fit(x.view(), y.view(), Kernel::Matern52, trend, h.clone()).unwrap();
        let (m, v) = gp.leave_one_out(y.view());
        for i in 0..y.len() {
            let keep: Vec<usize> = (0..y.len()).filter(|&k| k != i).collect();
            let xi = x.select(ndarray::Axis(0), &keep);
            let yi = y.select(ndarray::Axis(0), &keep);
            let g = Gp::fit(xi.view(), yi.view(), Kernel::Matern52, trend, h.clone()).unwrap();
            let (pm, pv) = g.predict(x.select(ndarray::Axis(0), &[i]).view());
            // The LOO variance is of the observation: latent variance plus the nugget σ²η.
            let obs_var = pv[0] + h.ln_signal_var.exp() * h.ln_nugget.exp();
            assert!(
                (pm[0] - m[i]).abs() <= LOO_RTOL * m[i].abs().max(1.0),
                "{trend:?} mean {i}: {} vs {}",
                pm[0],
                m[i]
            );
            assert!(
                (obs_var - v[i]).abs() <= LOO_RTOL * v[i].abs().max(1e-3),
                "{trend:?} var {i}: {obs_var} vs {}",
                v[i]
            );
        }
    }
}

#[test]
fn interpolates_the_data_as_the_nugget_goes_to_zero() {
    let (x, y) = data(10, 2);
    for trend in [Trend::Constant, Trend::Linear] {
        let gp = Gp::fit(
            x.view(),
            y.view(),
            Kernel::Matern52,
            trend,
            hyper(2, (1e-10f64).ln()),
        )
        .unwrap();
        let (m, v) = gp.predict(x.view());
        for i in 0..y.len() {
            assert!(
                (m[i] - y[i]).abs() < INTERP_ATOL,
                "{trend:?} point {i}: {} vs {}",
                m[i],
                y[i]
            );
            assert!(
                v[i] < INTERP_ATOL,
                "{trend:?} variance at a data point: {}",
                v[i]
            );
        }
    }
}

#[test]
fn trend_uncertainty_widens_the_variance_far_from_data() {
    // R&W eq. 2.42 (equation number from memory): the basis-function term Rᵀ A⁻¹ R
    // is ≥ 0, so integrating the trend out never narrows the predictive variance.
    let (x, y) = data(10, 2);
    let h = hyper(2, (1e-6f64).ln());
    let far = Array2::from_shape_vec((1, 2), vec![3.0, -2.0]).unwrap();
    let (_, v0) = Gp::fit(x.view(), y.view(), Kernel::Matern52, Trend::Zero, h.clone())
        .unwrap()
        .predict(far.view());
    let (_, v1) = Gp::fit(x.view(), y.view(), Kernel::Matern52, Trend::Linear, h)
        .unwrap()
        .predict(far.view());
    assert!(v1[0] > v0[0], "{} vs {}", v1[0], v0[0]);
}
