//! The low-rank-plus-diagonal likelihood against a dense multivariate normal density.
//!
//! The Woodbury identity and the matrix determinant lemma (Rasmussen & Williams 2006,
//! Gaussian Processes for Machine Learning, §A.3, eqs. A.9–A.10; section and equation
//! numbers from memory) make the evaluation O(p K²); here it is compared with a dense
//! Cholesky factorisation of the p × p covariance on random small problems
//! (property-based), and the replicate-aware likelihood with its sufficient statistics
//! (BDA3 §2.5, §3.2; section numbers from memory) is compared with the dense density of
//! every single measurement, also with a model-discrepancy term (Kennedy & O'Hagan 2001)
//! whose dense base is factored and reused.

use assay::calibrate::discrepancy::DiscrepancyBlock;
use assay::calibrate::{
    ln_normal_low_rank, Discrepancy, ExperimentLikelihood, Hyper, InverseGamma,
};
use assay::surrogate::{Kernel, LowRankPrediction};
use ndarray::{Array1, Array2};
use ndarray_linalg::{Cholesky, SolveTriangular, UPLO};
use proptest::prelude::*;

/// Both sides are O(1)-conditioned here (λ ≥ 0.05), so the difference is round-off of a
/// sum of p + K terms of size up to ~10².
const LN_DENSITY_ATOL: f64 = 1e-9;

/// With a discrepancy the covariances are still well conditioned (noise variances
/// ≥ 0.01, discrepancy on top) but the sums are longer (up to ~30 measurements, dense).
const LN_DENSITY_WITH_DISCREPANCY_ATOL: f64 = 1e-8;

const LN_2PI: f64 = 1.837_877_066_409_345_3;

/// ln N(r; 0, cov) by a dense Cholesky factorisation.
fn dense_ln_normal(r: &Array1<f64>, cov: &Array2<f64>) -> f64 {
    let l = cov.cholesky(UPLO::Lower).unwrap();
    let z = l
        .solve_triangular(
            UPLO::Lower,
            ndarray_linalg::Diag::NonUnit,
            &r.clone().insert_axis(ndarray::Axis(1)),
        )
        .unwrap();
    let ln_det: f64 = 2.0 * (0..r.len()).map(|i| l[[i, i]].ln()).sum::<f64>();
    -0.5 * (r.len() as f64 * LN_2PI + ln_det + z.iter().map(|v| v * v).sum::<f64>())
}

/// Every single measurement as (output value, y, sd), value by value.
fn flat_measurements(values: &[Vec<f64>], sds: &[Vec<f64>]) -> Vec<(usize, f64, f64)> {
    values
        .iter()
        .zip(sds)
        .enumerate()
        .flat_map(|(j, (vs, ss))| vs.iter().zip(ss).map(move |(y, s)| (j, *y, *s)))
        .collect()
}

fn problem() -> impl Strategy<Value = (Vec<f64>, Vec<f64>, Vec<Vec<f64>>, Vec<f64>)> {
    (1usize..8, 0usize..5).prop_flat_map(|(p, k)| {
        (
            proptest::collection::vec(-3.0f64..3.0, p),
            proptest::collection::vec(0.05f64..2.0, p),
            proptest::collection::vec(proptest::collection::vec(-2.0f64..2.0, k), p),
            proptest::collection::vec(0.0f64..2.0, k),
        )
    })
}

proptest! {
    #[test]
    fn woodbury_equals_the_dense_density((r, lambda, b, v) in problem()) {
        let p = r.len();
        let k = v.len();
        let basis = Array2::from_shape_fn((p, k), |(j, c)| b[j][c]);
        let pred = LowRankPrediction { mean: vec![0.0; p], basis: basis.clone(), weight_var: v.clone(), diag: lambda.clone() };
        let cov = pred.dense_covariance();
        let dense = dense_ln_normal(&Array1::from(r.clone()), &cov);
        let fast = ln_normal_low_rank(&r, &lambda, basis.view(), &v);
        prop_assert!((fast - dense).abs() < LN_DENSITY_ATOL, "{} vs {}", fast, dense);
    }

    #[test]
    fn replicate_likelihood_equals_the_density_of_every_measurement(
        (mu, d, b, v) in problem(),
        reps in proptest::collection::vec(1usize..4, 7),
        sd in 0.1f64..1.0,
        seed in 0u64..1000,
    ) {
        let p = mu.len();
        let k = v.len();
        let basis = Array2::from_shape_fn((p, k), |(j, c)| b[j][c]);
        let pred = LowRankPrediction { mean: mu.clone(), basis, weight_var: v, diag: d };
        // Measurements: value j has reps[j] replicates, each with its own sd.
        let mut values = Vec::new();
        let mut sds = Vec::new();
        let mut h = seed;
        for j in 0..p {
            let mut vj = Vec::new();
            let mut sj = Vec::new();
            for r in 0..reps[j] {
                h = h.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
                let u = (h >> 11) as f64 / (1u64 << 53) as f64;
                vj.push(mu[j] + 2.0 * (u - 0.5));
                sj.push(sd * (1.0 + 0.5 * r as f64));
            }
            values.push(vj);
            sds.push(sj);
        }
        // Dense: y_jr = η_j + ε_jr, Cov(y_jr, y_j'r') = C_jj' + δ σ_jr².
        let c = pred.dense_covariance();
        let flat = flat_measurements(&values, &sds);
        let m = flat.len();
        let cov_known = Array2::from_shape_fn((m, m), |(a, bb)| {
            c[[flat[a].0, flat[bb].0]] + if a == bb { flat[a].2 * flat[a].2 } else { 0.0 }
        });
        let r = Array1::from_iter(flat.iter().map(|(j, y, _)| y - mu[*j]));
        let lik = ExperimentLikelihood::from_values("t", &values, &sds);
        let fast = lik.ln_likelihood_low_rank(&pred, 1.0);
        let dense = dense_ln_normal(&r, &cov_known);
        prop_assert!((fast - dense).abs() < LN_DENSITY_ATOL, "known: {} vs {}", fast, dense);

        // Unknown noise: every measurement has variance σ².
        let s2 = sd * sd;
        let prior = InverseGamma { shape: 2.0, scale: 1.0 };
        let lik_u = ExperimentLikelihood::with_unknown_noise("t", &values, prior);
        let cov_unknown = Array2::from_shape_fn((m, m), |(a, bb)| {
            c[[flat[a].0, flat[bb].0]] + if a == bb { s2 } else { 0.0 }
        });
        let fast_u = lik_u.ln_likelihood_low_rank(&pred, s2);
        let dense_u = dense_ln_normal(&r, &cov_unknown);
        prop_assert!((fast_u - dense_u).abs() < LN_DENSITY_ATOL, "unknown: {} vs {}", fast_u, dense_u);
    }
}

/// The correlation functions written out here, independently of assay's kernels
/// (Rasmussen & Williams 2006, eqs. 4.9 and 4.17; equation numbers from memory).
fn corr(kernel: Kernel, d: f64, l: f64) -> f64 {
    let r = d / l;
    match kernel {
        Kernel::SquaredExponential => (-0.5 * r * r).exp(),
        Kernel::Matern52 => {
            let s = 5f64.sqrt() * r;
            (1.0 + s + s * s / 3.0) * (-s).exp()
        }
        Kernel::Matern32 => {
            let s = 3f64.sqrt() * r;
            (1.0 + s) * (-s).exp()
        }
    }
}

/// A curve experiment with two quantities at the same `n` stations x_i = i/(n−1).
fn two_quantity_discrepancy(
    n: usize,
    kernel: Kernel,
    sd: [Hyper; 2],
    ell: [Hyper; 2],
) -> Discrepancy {
    let xs: Vec<f64> = (0..n).map(|i| i as f64 / (n - 1) as f64).collect();
    Discrepancy {
        kernel,
        blocks: (0..2)
            .map(|q| DiscrepancyBlock {
                quantity: format!("y{q}"),
                index: (q * n..(q + 1) * n).collect(),
                x: Some(xs.clone()),
                sd: sd[q],
                length_scale: Some(ell[q]),
                at: None,
            })
            .collect(),
    }
}

fn lcg(h: &mut u64) -> f64 {
    *h = h
        .wrapping_mul(6364136223846793005)
        .wrapping_add(1442695040888963407);
    (*h >> 11) as f64 / (1u64 << 53) as f64
}

proptest! {
    /// Σ over every single measurement: C_surrogate[j, j'] + K_δ[j, j'] + δ_oo' σ_o², with
    /// replicates of one value sharing η_j and δ_j; the likelihood through sufficient
    /// statistics, Woodbury and the factored dense base must equal its density.
    #[test]
    fn discrepancy_likelihood_equals_the_dense_density_of_every_measurement(
        n in 2usize..6,
        k in 0usize..4,
        kernel_pick in 0usize..3,
        hyp in proptest::collection::vec(0.05f64..1.5, 4),
        fixed_second in any::<bool>(),
        unknown in any::<bool>(),
        seed in 0u64..10_000,
    ) {
        let kernel = [Kernel::SquaredExponential, Kernel::Matern52, Kernel::Matern32][kernel_pick];
        let p = 2 * n;
        let mut h = seed;
        let mu: Vec<f64> = (0..p).map(|_| 4.0 * lcg(&mut h) - 2.0).collect();
        let basis = Array2::from_shape_fn((p, k), |_| 2.0 * lcg(&mut h) - 1.0);
        let v: Vec<f64> = (0..k).map(|_| 1.5 * lcg(&mut h)).collect();
        let diag: Vec<f64> = (0..p).map(|_| 0.02 * lcg(&mut h)).collect();
        let pred = LowRankPrediction { mean: mu.clone(), basis, weight_var: v, diag };
        // Quantity 0 sampled; quantity 1 sampled or fixed.
        let (sd1, ell1) = if fixed_second {
            (Hyper::Fixed(hyp[2]), Hyper::Fixed(hyp[3]))
        } else {
            (Hyper::HalfNormal { scale: 1.0 }, Hyper::LogNormal { mu: 0.0, sigma: 1.0 })
        };
        let disc = two_quantity_discrepancy(
            n,
            kernel,
            [Hyper::HalfNormal { scale: 1.0 }, sd1],
            [Hyper::LogNormal { mu: 0.0, sigma: 1.0 }, ell1],
        );
        let sampled: Vec<f64> = if fixed_second { hyp[..2].to_vec() } else { hyp.clone() };
        // Measurements: 1 to 3 replicates per value.
        let mut values = Vec::new();
        let mut sds = Vec::new();
        for mu_j in &mu {
            let reps = 1 + (lcg(&mut h) * 3.0) as usize;
            values.push((0..reps).map(|_| mu_j + 2.0 * lcg(&mut h) - 1.0).collect::<Vec<f64>>());
            sds.push((0..reps).map(|_| 0.1 + 0.5 * lcg(&mut h)).collect::<Vec<f64>>());
        }
        let flat = flat_measurements(&values, &sds);
        let m = flat.len();
        let c = pred.dense_covariance();
        let xs: Vec<f64> = (0..n).map(|i| i as f64 / (n - 1) as f64).collect();
        let (s, l) = ([hyp[0], hyp[2]], [hyp[1], hyp[3]]);
        let k_delta = |a: usize, b: usize| -> f64 {
            let (qa, qb) = (a / n, b / n);
            if qa != qb {
                return 0.0;
            }
            s[qa] * s[qa] * corr(kernel, (xs[a % n] - xs[b % n]).abs(), l[qa])
        };
        let r = Array1::from_iter(flat.iter().map(|(j, y, _)| y - mu[*j]));
        let cov_with = |noise: &dyn Fn(usize) -> f64| {
            Array2::from_shape_fn((m, m), |(a, b)| {
                let (ja, jb) = (flat[a].0, flat[b].0);
                c[[ja, jb]] + k_delta(ja, jb) + if a == b { noise(a) } else { 0.0 }
            })
        };
        if unknown {
            let s2 = 0.3;
            let lik = ExperimentLikelihood::with_unknown_noise("t", &values, InverseGamma { shape: 2.0, scale: 1.0 })
                .with_discrepancy(disc);
            let fast = lik.ln_likelihood_full(&pred, s2, &sampled);
            let dense = dense_ln_normal(&r, &cov_with(&|_| s2));
            prop_assert!((fast - dense).abs() < LN_DENSITY_WITH_DISCREPANCY_ATOL, "unknown noise: {} vs {}", fast, dense);
        } else {
            let lik = ExperimentLikelihood::from_values("t", &values, &sds).with_discrepancy(disc);
            let dense = dense_ln_normal(&r, &cov_with(&|a| flat[a].2 * flat[a].2));
            // Twice: with fixed hyperparameters the second call reuses the factor.
            for _ in 0..2 {
                let fast = lik.ln_likelihood_full(&pred, 1.0, &sampled);
                prop_assert!((fast - dense).abs() < LN_DENSITY_WITH_DISCREPANCY_ATOL, "known noise: {} vs {}", fast, dense);
            }
        }
    }
}

/// The fixed-hyperparameter factor is keyed on the diagonal it was made with: an
/// emulator whose variance changes with θ must not get a stale factor.
#[test]
fn a_changed_diagonal_is_factored_again() {
    let disc = two_quantity_discrepancy(
        3,
        Kernel::SquaredExponential,
        [Hyper::Fixed(0.3), Hyper::Fixed(0.2)],
        [Hyper::Fixed(0.5), Hyper::Fixed(0.4)],
    );
    let values: Vec<Vec<f64>> = (0..6).map(|j| vec![j as f64 * 0.1]).collect();
    let sds = vec![vec![0.1]; 6];
    let lik = ExperimentLikelihood::from_values("t", &values, &sds).with_discrepancy(disc.clone());
    let a = LowRankPrediction::diagonal(vec![0.0; 6], vec![0.01; 6]);
    let b = LowRankPrediction::diagonal(vec![0.0; 6], vec![0.5; 6]);
    let _ = lik.ln_likelihood_full(&a, 1.0, &[]);
    let fresh = ExperimentLikelihood::from_values("t", &values, &sds).with_discrepancy(disc);
    assert_eq!(
        lik.ln_likelihood_full(&b, 1.0, &[]),
        fresh.ln_likelihood_full(&b, 1.0, &[])
    );
}
