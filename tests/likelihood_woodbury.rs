//! The low-rank-plus-diagonal likelihood against a dense multivariate normal density.
//!
//! The Woodbury identity and the matrix determinant lemma (Rasmussen & Williams 2006,
//! Gaussian Processes for Machine Learning, §A.3, eqs. A.9–A.10) make the evaluation
//! O(p K²); here it is compared with a dense Cholesky factorisation of the p × p
//! covariance on random small problems (property-based), and the replicate-aware
//! likelihood with its sufficient statistics (BDA3 §2.5, §3.2) is compared with the
//! dense density of every single measurement.

use assay::calibrate::{ln_normal_low_rank, ExperimentLikelihood, InverseGamma};
use assay::surrogate::LowRankPrediction;
use ndarray::{Array1, Array2};
use ndarray_linalg::{Cholesky, SolveTriangular, UPLO};
use proptest::prelude::*;

/// Both sides are O(1)-conditioned here (λ ≥ 0.05), so the difference is round-off of a
/// sum of p + K terms of size up to ~10².
const LN_DENSITY_ATOL: f64 = 1e-9;

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
        let flat: Vec<(usize, f64, f64)> = values
            .iter()
            .zip(&sds)
            .enumerate()
            .flat_map(|(j, (vs, ss))| vs.iter().zip(ss).map(move |(y, s)| (j, *y, *s)))
            .collect();
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
