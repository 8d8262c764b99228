//! The basis surrogate's structure: gradient of the mean against central finite
//! differences (all three kernels and trends, and through the basis), the MAP
//! objective's gradient, the holdout choice, the low-rank prediction and the record
//! round trip.

mod common;

use assay::runs::RunSet;
use assay::study::{HyperpriorChoice, Parameter, Prior, SurrogateParams};
use assay::surrogate::{
    fit_surrogate, objective, pick_holdout, FitParams, HyperBounds, Kernel, LengthScalePrior,
    SurrogateBody, Trend,
};
use common::curve::{curve_runs, gradient_test_gps, inputs, STATIONS};
use ndarray::{Array1, Array2};

/// Central differences with step h have truncation error O(h²·f‴) ≈ 1e-10 and
/// round-off O(ε·f/h) ≈ 1e-11 for h = 1e-5 on these O(1) functions.
const FD_STEP: f64 = 1e-5;
const FD_RTOL: f64 = 1e-6;
/// Through a fitted surrogate the weights' GPs interpolate with a nugget of ~1e-8, so
/// their coefficients α are large: the mean is a sum of large terms that cancel (its
/// round-off grows) and its higher derivatives are large (central differences of step
/// 1e-5 miss by ~1e-6, of step 1e-6 by more, from round-off). The five-point stencil,
/// error O(h⁴), with h = 1e-4 of the range balances the two.
const FD_STEP_FITTED: f64 = 1e-4;

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= FD_RTOL * a.abs().max(b.abs()).max(1.0)
}

#[test]
fn mean_gradient_matches_finite_differences_for_every_kernel_and_trend() {
    // Structural check: the analytic ∂m/∂x (R&W 2006 eq. 2.41, equation number from
    // memory, differentiated: derived here) against central differences of Gp::predict.
    for (kernel, trend, gp) in gradient_test_gps() {
        for at in [[0.31, 0.52, 0.17], [0.9, 0.05, 0.66]] {
            let g = gp.mean_gradient(Array1::from(at.to_vec()).view());
            for d in 0..3 {
                let mut a = at;
                let mut b = at;
                a[d] += FD_STEP;
                b[d] -= FD_STEP;
                let fa = gp
                    .predict(Array2::from_shape_vec((1, 3), a.to_vec()).unwrap().view())
                    .0[0];
                let fb = gp
                    .predict(Array2::from_shape_vec((1, 3), b.to_vec()).unwrap().view())
                    .0[0];
                let fd = (fa - fb) / (2.0 * FD_STEP);
                assert!(
                    close(g[d], fd),
                    "{kernel:?} {trend:?} d={d}: {} vs {fd}",
                    g[d]
                );
            }
        }
    }
}

fn runs(n: usize, seed: u64) -> (RunSet, Vec<Parameter>) {
    let params = vec![
        Parameter {
            name: "a".into(),
            unit: None,
            lo: 1.0,
            hi: 3.0,
            prior: Prior::Uniform,
        },
        Parameter {
            name: "w".into(),
            unit: None,
            lo: 0.5,
            hi: 1.5,
            prior: Prior::Uniform,
        },
    ];
    (curve_runs(n, seed, &params, "bench"), params)
}

#[test]
fn gradient_through_the_basis_matches_finite_differences() {
    let (set, params) = runs(24, 3);
    let settings = SurrogateParams {
        variance_kept: 0.9999,
        ..SurrogateParams::default()
    };
    let s = fit_surrogate(&set, &params, settings, 1).unwrap();
    let e = &s.experiments[0];
    assert!(
        e.basis.n_components() >= 2,
        "a curve needs more than one component here"
    );
    for at in [[1.7, 0.8], [2.6, 1.3]] {
        let g = e.mean_gradient(&at);
        for l in 0..2 {
            let h = FD_STEP_FITTED * (params[l].hi - params[l].lo);
            let f = |k: f64| {
                let mut a = at;
                a[l] += k * h;
                e.predict(&a).0
            };
            let (p2, p1, m1, m2) = (f(2.0), f(1.0), f(-1.0), f(-2.0));
            for j in 0..STATIONS.len() {
                let fd = (-p2[j] + 8.0 * p1[j] - 8.0 * m1[j] + m2[j]) / (12.0 * h);
                assert!(
                    close(g[[j, l]], fd),
                    "value {j}, parameter {l}: {} vs {fd}",
                    g[[j, l]]
                );
            }
        }
    }
}

#[test]
fn map_objective_gradient_matches_finite_differences() {
    // The log-normal length-scale prior adds Σ ½((ln ℓ − μ)/s)² to the objective.
    let x = inputs(12, 2, 9);
    let y = Array1::from_iter(x.rows().into_iter().map(|r| (2.0 * r[0]).cos() + r[1]));
    let prior = LengthScalePrior::default();
    let params = FitParams {
        kernel: Kernel::Matern52,
        trend: Trend::Constant,
        bounds: HyperBounds::default(),
        hyperprior: Some(prior),
        n_starts: 1,
        max_iters: 1,
    };
    let p = [0.2, -0.9, 0.4, -9.0];
    let (f, g) = objective(x.view(), y.view(), &params, &p).unwrap();
    let ml = FitParams {
        hyperprior: None,
        ..params
    };
    let (f_ml, _) = objective(x.view(), y.view(), &ml, &p).unwrap();
    let expect: f64 = [-0.9f64, 0.4]
        .iter()
        .map(|b| 0.5 * ((b - prior.ln_median) / prior.sd).powi(2))
        .sum();
    assert!(
        (f - f_ml - expect).abs() < 1e-12,
        "prior term {} vs {expect}",
        f - f_ml
    );
    for i in 0..p.len() {
        let mut a = p;
        let mut b = p;
        a[i] += FD_STEP;
        b[i] -= FD_STEP;
        let fd = (objective(x.view(), y.view(), &params, &a).unwrap().0
            - objective(x.view(), y.view(), &params, &b).unwrap().0)
            / (2.0 * FD_STEP);
        assert!(close(g[i], fd), "component {i}: {} vs {fd}", g[i]);
    }
}

#[test]
fn holdout_points_are_reproducible_distinct_and_spread() {
    let x = inputs(40, 3, 11);
    let a = pick_holdout(x.view(), 8, 1, 0);
    assert_eq!(a, pick_holdout(x.view(), 8, 1, 0), "same seed, same points");
    assert_ne!(
        a,
        pick_holdout(x.view(), 8, 2, 0),
        "another seed, other points"
    );
    let mut sorted = a.clone();
    sorted.dedup();
    assert_eq!(sorted.len(), 8);
    assert_ne!(a, (0..8).collect::<Vec<_>>(), "not the first points");
    // Spread: the closest pair of held-out points is farther apart than the median
    // nearest-neighbour distance of the whole design.
    let dist = |i: usize, j: usize| -> f64 {
        (0..3)
            .map(|d| (x[[i, d]] - x[[j, d]]).powi(2))
            .sum::<f64>()
            .sqrt()
    };
    let min_held = a
        .iter()
        .flat_map(|&i| a.iter().filter(move |&&j| j != i).map(move |&j| (i, j)))
        .map(|(i, j)| dist(i, j))
        .fold(f64::INFINITY, f64::min);
    let mut nn: Vec<f64> = (0..40)
        .map(|i| {
            (0..40)
                .filter(|&j| j != i)
                .map(|j| dist(i, j))
                .fold(f64::INFINITY, f64::min)
        })
        .collect();
    nn.sort_by(f64::total_cmp);
    assert!(min_held > nn[20], "{min_held} vs median {}", nn[20]);
}

#[test]
fn low_rank_prediction_marginals_and_record_round_trip() {
    let (set, params) = runs(24, 4);
    let settings = SurrogateParams {
        holdout: 0.25,
        hyperprior: HyperpriorChoice::Lognormal,
        ..SurrogateParams::default()
    };
    let s = fit_surrogate(&set, &params, settings, 1).unwrap();
    let e = &s.experiments[0];
    let h = e.holdout.as_ref().expect("holdout asked for");
    assert_eq!(h.point_ids.len(), 6);
    assert_eq!(h.n_fit, 18);
    // One distance per component of the holdout surrogate (its own basis).
    assert!(!h.mahalanobis.is_empty());
    for c in &h.mahalanobis {
        assert!(c.value.is_finite() && c.value > 0.0);
        assert_eq!(c.reference.n_points, 6);
    }
    let theta = [2.2, 0.9];
    let lr = e.predict_low_rank(&theta);
    let dense = lr.dense_covariance();
    let (m, v) = e.predict(&theta);
    assert_eq!(m, lr.mean);
    for j in 0..m.len() {
        assert!((v[j] - dense[[j, j]]).abs() <= 1e-14 * dense[[j, j]].max(1e-300));
        assert!(v[j] >= e.basis.discarded[j]);
    }
    // The record rebuilds the same surrogate: same predictions, bit for bit.
    let names: Vec<String> = params.iter().map(|p| p.name.clone()).collect();
    let body = SurrogateBody::from_fitted(&s, &names);
    let text = serde_yaml::to_string(&body).unwrap();
    let back: SurrogateBody = serde_yaml::from_str(&text).unwrap();
    let s2 = back.to_fitted().unwrap();
    let lr2 = s2.experiments[0].predict_low_rank(&theta);
    assert_eq!(lr, lr2);
    assert_eq!(s2.hyperprior, s.hyperprior);
    // The holdout report is carried over as recorded.
    assert_eq!(
        serde_yaml::to_string(&s2.experiments[0].holdout).unwrap(),
        serde_yaml::to_string(&e.holdout).unwrap()
    );
}
