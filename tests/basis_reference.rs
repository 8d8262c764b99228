//! The principal-component basis and the holdout Mahalanobis distance against an
//! independent computation: fixture `tests/reference/basis.json`, made by
//! `tests/reference/basis_reference.py` with scikit-learn's PCA and
//! GaussianProcessRegressor, numpy and scipy (versions recorded in the fixture).
//!
//! Sources: the basis is that of Higdon, Gattiker, Williams & Rightley (2008), JASA
//! 103(482), 570–583; the Mahalanobis distance and its scaled-F reference are those of
//! Bastos & O'Hagan (2009), Technometrics 51(4), 425–438 (the reference's form quoted
//! from memory, see docs/methods.md).

use assay::surrogate::basis::quantity_groups;
use assay::surrogate::{mahalanobis, mahalanobis_reference, Basis, Gp, Hyper, Kernel, Trend};
use ndarray::{Array1, Array2};
use serde::Deserialize;

/// Centring, scales, shares and singular values: sums and one SVD of well-conditioned
/// matrices, so agreement is round-off, a few ulps times the size of the numbers.
const BASIS_RTOL: f64 = 1e-10;
/// Basis directions: an SVD determines a singular vector to about ε/gap, and the
/// gaps between the kept singular values here are at least 1 % of the largest.
const DIRECTION_ATOL: f64 = 1e-9;
/// Mahalanobis distance: both sides solve with the predictive covariance, whose
/// condition number reaches about 1e6 in the near-noise-free case.
const MD_RTOL: f64 = 1e-6;
/// Reference mean and variance: closed forms on both sides.
const REF_RTOL: f64 = 1e-10;
/// Reference quantiles: statrs inverts the F cdf numerically, scipy by its own method.
const QUANTILE_RTOL: f64 = 1e-6;

#[derive(Deserialize)]
struct BasisCase {
    name: String,
    outputs: Vec<Vec<f64>>,
    groups: Vec<usize>,
    variance_kept: f64,
    mean: Vec<f64>,
    scale: Vec<f64>,
    n_components: usize,
    directions: Vec<Vec<f64>>,
    singular_values: Vec<f64>,
    explained: Vec<f64>,
    discarded: Vec<f64>,
    n_runs: usize,
}

#[derive(Deserialize)]
struct Reference {
    mean: f64,
    variance: Option<f64>,
    q025: f64,
    q975: f64,
}

#[derive(Deserialize)]
struct MdCase {
    name: String,
    trend: String,
    x: Vec<Vec<f64>>,
    y: Vec<f64>,
    x_test: Vec<Vec<f64>>,
    y_test: Vec<f64>,
    signal_var: f64,
    length_scales: Vec<f64>,
    nugget: f64,
    mahalanobis: f64,
    reference: Reference,
}

#[derive(Deserialize)]
struct Fixture {
    basis: Vec<BasisCase>,
    mahalanobis: Vec<MdCase>,
}

fn fixture() -> Fixture {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/basis.json"
    ))
    .unwrap();
    serde_json::from_str(&text).unwrap()
}

fn close(a: f64, b: f64, rtol: f64) -> bool {
    (a - b).abs() <= rtol * a.abs().max(b.abs()).max(1e-300)
}

fn matrix(rows: &[Vec<f64>]) -> Array2<f64> {
    Array2::from_shape_fn((rows.len(), rows[0].len()), |(i, j)| rows[i][j])
}

#[test]
fn basis_matches_scikit_learn_pca() {
    for c in fixture().basis {
        let b = Basis::fit(&c.outputs, &c.groups, c.variance_kept);
        let name = &c.name;
        assert_eq!(b.n_components(), c.n_components, "{name}: components kept");
        for j in 0..c.mean.len() {
            assert!(close(b.mean[j], c.mean[j], BASIS_RTOL), "{name}: mean {j}");
            assert!(
                close(b.scale[j], c.scale[j], BASIS_RTOL),
                "{name}: scale {j}"
            );
            let size = c.scale[j] * c.scale[j];
            assert!(
                (b.discarded[j] - c.discarded[j]).abs() <= BASIS_RTOL * size,
                "{name}: discarded {j}: {} vs {}",
                b.discarded[j],
                c.discarded[j]
            );
        }
        for k in 0..c.n_components {
            let phi = b.vectors.column(k);
            let norm = phi.dot(&phi).sqrt();
            // φ_k = S_k v_k / √n.
            let expect = c.singular_values[k] / (c.n_runs as f64).sqrt();
            assert!(close(norm, expect, BASIS_RTOL), "{name}: |φ_{k}|");
            for (a, e) in phi.iter().zip(&c.directions[k]) {
                assert!(
                    (a / norm - e).abs() < DIRECTION_ATOL,
                    "{name}: direction {k}"
                );
            }
            assert!(
                close(b.explained[k], c.explained[k], BASIS_RTOL),
                "{name}: share {k}"
            );
        }
    }
}

#[test]
fn quantities_are_read_from_the_value_names() {
    let names: Vec<String> = ["force@0.1", "force@0.2", "strain@0.1", "force@0.3"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    assert_eq!(quantity_groups(&names), vec![0, 0, 1, 0]);
}

#[test]
fn mahalanobis_distance_matches_an_independent_computation() {
    for c in fixture().mahalanobis {
        let trend = match c.trend.as_str() {
            "zero" => Trend::Zero,
            "constant" => Trend::Constant,
            t => panic!("unknown trend {t}"),
        };
        let hyper = Hyper {
            ln_signal_var: c.signal_var.ln(),
            ln_length_scales: c.length_scales.iter().map(|l| l.ln()).collect(),
            ln_nugget: (c.nugget / c.signal_var).ln(),
        };
        let gp = Gp::fit(
            matrix(&c.x).view(),
            Array1::from(c.y.clone()).view(),
            Kernel::Matern52,
            trend,
            hyper,
        )
        .unwrap();
        let md = mahalanobis(
            &gp,
            matrix(&c.x_test).view(),
            Array1::from(c.y_test.clone()).view(),
        );
        assert!(
            close(md, c.mahalanobis, MD_RTOL),
            "{}: {md} vs {}",
            c.name,
            c.mahalanobis
        );
        let r = mahalanobis_reference(c.x_test.len(), c.x.len(), gp.n_trend());
        assert!(close(r.mean, c.reference.mean, REF_RTOL), "{}", c.name);
        match (r.variance, c.reference.variance) {
            (Some(a), Some(b)) => assert!(close(a, b, REF_RTOL), "{}: {a} vs {b}", c.name),
            (a, b) => assert_eq!(a.is_some(), b.is_some(), "{}", c.name),
        }
        assert!(
            close(r.q025, c.reference.q025, QUANTILE_RTOL),
            "{}: q025 {} vs {}",
            c.name,
            r.q025,
            c.reference.q025
        );
        assert!(
            close(r.q975, c.reference.q975, QUANTILE_RTOL),
            "{}: q975 {} vs {}",
            c.name,
            r.q975,
            c.reference.q975
        );
    }
}

#[test]
fn mahalanobis_of_a_correct_gp_averages_the_number_of_points() {
    // Structural check (Bastos & O'Hagan 2009: E[D_MD] = m when the emulator is right):
    // values drawn from the GP itself, with the hyperparameters known, give
    // D_MD ~ χ²_m exactly. Over 400 independent draws the mean of D_MD is within
    // 4 standard errors (√(2m/400)) of m.
    use rand::SeedableRng;
    use rand_distr::{Distribution, StandardNormal};
    let (n, m, draws) = (15usize, 5usize, 400usize);
    let mut rng = rand_chacha::ChaCha20Rng::seed_from_u64(2009);
    let x_all = Array2::from_shape_fn((n + m, 2), |(i, j)| {
        ((i * 7 + j * 3) % (n + m)) as f64 / (n + m) as f64 + 0.01 * j as f64
    });
    let hyper = Hyper {
        ln_signal_var: 0.0,
        ln_length_scales: vec![0.4f64.ln(), 0.6f64.ln()],
        ln_nugget: 1e-6f64.ln(),
    };
    // Prior covariance of all n + m points, nugget included, from the kernel.
    let k = |a: ndarray::ArrayView1<f64>, b: ndarray::ArrayView1<f64>| {
        let r2: f64 = (0..2)
            .map(|d| ((a[d] - b[d]) / hyper.ln_length_scales[d].exp()).powi(2))
            .sum();
        Kernel::Matern52.corr(r2.sqrt())
    };
    let mut cov = Array2::from_shape_fn((n + m, n + m), |(i, j)| k(x_all.row(i), x_all.row(j)));
    for i in 0..n + m {
        cov[[i, i]] += 1e-6;
    }
    use ndarray_linalg::Cholesky;
    let l = cov.cholesky(ndarray_linalg::UPLO::Lower).unwrap();
    let mut total = 0.0;
    for _ in 0..draws {
        let z = Array1::from_shape_fn(n + m, |_| StandardNormal.sample(&mut rng));
        let y = l.dot(&z);
        let gp = Gp::fit(
            x_all.slice(ndarray::s![..n, ..]),
            y.slice(ndarray::s![..n]),
            Kernel::Matern52,
            Trend::Zero,
            hyper.clone(),
        )
        .unwrap();
        total += mahalanobis(
            &gp,
            x_all.slice(ndarray::s![n.., ..]),
            y.slice(ndarray::s![n..]),
        );
    }
    let mean = total / draws as f64;
    let se = (2.0 * m as f64 / draws as f64).sqrt();
    assert!(
        (mean - m as f64).abs() < 4.0 * se,
        "mean D_MD {mean} vs {m}"
    );
}
