//! The multivariate normal density with a low-rank-plus-diagonal (or
//! low-rank-plus-factored) covariance, and its gradient: the linear algebra of the
//! likelihood (`likelihood.rs`).
//!
//! Input: a residual r, the base covariance (a diagonal λ, or the lower Cholesky factor
//! of a dense matrix), a basis B and the weights' variances v. Output: ln N(r; 0,
//! base + B diag(v) Bᵀ), and with [`ln_normal_gradient`] its derivatives. Must not:
//! know about experiments, noise models or discrepancies (the likelihood builds the
//! base), or factor a p × p matrix it is not given.
//!
//! # Formula
//! The normal density is evaluated with G = B diag(√v) and M = I_K + Gᵀ Λ⁻¹ G (K × K):
//! rᵀ(Λ + GGᵀ)⁻¹r = rᵀΛ⁻¹r − cᵀ M⁻¹ c with c = Gᵀ Λ⁻¹ r (Woodbury identity), and
//! ln |Λ + GGᵀ| = Σ_j ln Λ_j + ln |M| (matrix determinant lemma), so an evaluation
//! costs O(p K²) plus one K × K Cholesky factorisation, never a p × p one. Writing the
//! update as GGᵀ (not B diag(v) Bᵀ with diag(v)⁻¹ in M) keeps M's eigenvalues ≥ 1 and
//! allows v = 0.
//!
//! # References
//! Woodbury identity and matrix determinant lemma: Harville, D. A. (1997), Matrix
//! Algebra From a Statistician's Perspective, Springer, §18.2 *(section from memory)*;
//! Rasmussen & Williams (2006), Gaussian Processes for Machine Learning, MIT Press,
//! §A.3, eqs. A.9–A.10. Petersen, K. B. & Pedersen, M. S. (2012), The Matrix Cookbook,
//! eqs. 57 and 61 (the derivatives).

use ndarray::{Array1, Array2, ArrayView2, ShapeBuilder};
use ndarray_linalg::{CholeskyInplace, Diag, FactorizeC, SolveC, SolveTriangular, UPLO};

/// ln 2π.
pub(super) const LN_2PI: f64 = 1.837_877_066_409_345_3;

/// ln N(r; 0, diag(λ) + B diag(v) Bᵀ) by the Woodbury identity and the matrix
/// determinant lemma.
///
/// # Formula
/// With G = B diag(√v), M = I + Gᵀ diag(λ)⁻¹ G and c = Gᵀ diag(λ)⁻¹ r:
/// −½ (p ln 2π + Σ ln λ_j + ln |M| + Σ r_j²/λ_j − cᵀ M⁻¹ c).
/// Returns −∞ when some λ_j ≤ 0 or is not finite.
///
/// # Panics
/// If the shapes disagree (r, λ of length p; B p × K; v of length K).
///
/// # Example
/// ```
/// use assay::calibrate::ln_normal_low_rank;
/// use ndarray::array;
/// // p = 1, K = 1: N(1; 0, 1 + 2²·0.75 = 4).
/// let l = ln_normal_low_rank(&[1.0], &[1.0], array![[2.0]].view(), &[0.75]);
/// let direct = -0.5 * ((2.0 * std::f64::consts::PI).ln() + 4f64.ln() + 0.25);
/// assert!((l - direct).abs() < 1e-14);
/// ```
pub fn ln_normal_low_rank(r: &[f64], lambda: &[f64], basis: ArrayView2<f64>, v: &[f64]) -> f64 {
    let p = r.len();
    let k = v.len();
    assert_eq!(lambda.len(), p);
    assert_eq!(basis.dim(), (p, k));
    let mut ln_det = 0.0;
    let mut quad = 0.0;
    for (rj, lj) in r.iter().zip(lambda) {
        if !(*lj > 0.0 && lj.is_finite()) {
            return f64::NEG_INFINITY;
        }
        ln_det += lj.ln();
        quad += rj * rj / lj;
    }
    if k > 0 {
        // G = B diag(√v) (negative variances, rounding noise, read as 0), element by
        // element as [`scaled_basis`] makes it, without the temporary.
        let sv: Vec<f64> = v.iter().map(|x| x.max(0.0).sqrt()).collect();
        let mut m = Array2::<f64>::eye(k);
        let mut c = vec![0.0; k];
        for j in 0..p {
            let il = 1.0 / lambda[j];
            for a in 0..k {
                let ga = basis[[j, a]] * sv[a] * il;
                c[a] += ga * r[j];
                for b in 0..=a {
                    m[[a, b]] += ga * (basis[[j, b]] * sv[b]);
                }
            }
        }
        for a in 0..k {
            for b in 0..a {
                m[[b, a]] = m[[a, b]];
            }
        }
        let Some((ln_det_m, correction)) = woodbury_terms(&m, &c) else {
            return f64::NEG_INFINITY;
        };
        quad -= correction;
        ln_det += ln_det_m;
    }
    -0.5 * (p as f64 * LN_2PI + ln_det + quad)
}

/// G = B diag(√v) (negative variances, rounding noise, read as 0).
fn scaled_basis(basis: ArrayView2<f64>, v: &[f64]) -> Array2<f64> {
    let sv: Vec<f64> = v.iter().map(|x| x.max(0.0).sqrt()).collect();
    Array2::from_shape_fn(basis.dim(), |(j, c)| basis[[j, c]] * sv[c])
}

/// (ln |M|, cᵀ M⁻¹ c) by a Cholesky factorisation M = L Lᵀ of the K × K matrix M
/// (LAPACK, in place) and cᵀ M⁻¹ c = ‖L⁻¹c‖² (one BLAS triangular solve); `None` when
/// M is not positive definite. One component (K = 1) needs no factorisation: ln M and
/// c²/M directly.
fn woodbury_terms(m: &Array2<f64>, c: &[f64]) -> Option<(f64, f64)> {
    let k = c.len();
    if k == 1 {
        let m0 = m[[0, 0]];
        return (m0 > 0.0 && m0.is_finite()).then(|| (m0.ln(), c[0] * c[0] / m0));
    }
    let mut l = Array2::<f64>::zeros((k, k).f());
    l.assign(m);
    l.cholesky_inplace(UPLO::Lower).ok()?;
    let mut y = c.to_vec();
    crate::blas::trsv_lower_f(false, l.view(), &mut y);
    Some((
        2.0 * (0..k).map(|i| l[[i, i]].ln()).sum::<f64>(),
        y.iter().map(|t| t * t).sum(),
    ))
}

/// ln N(r; 0, D + B diag(v) Bᵀ) with a dense base matrix D, given its lower Cholesky
/// factor L (D = L Lᵀ): the Woodbury identity and the matrix determinant lemma with D in
/// place of a diagonal.
///
/// # Formula
/// With G = B diag(√v), A = L⁻¹ G, b = L⁻¹ r, M = I + AᵀA and c = Aᵀ b:
/// −½ (p ln 2π + 2 Σ ln L_ii + ln |M| + bᵀb − cᵀ M⁻¹ c).
/// The two triangular solves cost O(p² K); the K × K factorisation of M is the only
/// other one, so a caller who keeps L for fixed D pays no p × p factorisation.
///
/// # Panics
/// If the shapes disagree (r of length p; L p × p; B p × K; v of length K).
///
/// # Example
/// ```
/// use assay::calibrate::ln_normal_factored_low_rank;
/// use ndarray::array;
/// // D = [[4, 2], [2, 2]] = L Lᵀ with L = [[2, 0], [1, 1]]; no low-rank part:
/// // |D| = 4, D⁻¹ = [[0.5, −0.5], [−0.5, 1]], rᵀD⁻¹r = 0.5 for r = (1, 0).
/// let l = array![[2.0, 0.0], [1.0, 1.0]];
/// let got = ln_normal_factored_low_rank(&[1.0, 0.0], &l, ndarray::Array2::zeros((2, 0)).view(), &[]);
/// let want = -0.5 * (2.0 * (2.0 * std::f64::consts::PI).ln() + 4f64.ln() + 0.5);
/// assert!((got - want).abs() < 1e-14);
/// ```
///
/// # References
/// Rasmussen & Williams (2006), §A.3, eqs. A.9–A.10; Harville (1997), §18.2 *(section
/// from memory)*.
pub fn ln_normal_factored_low_rank(
    r: &[f64],
    chol: &Array2<f64>,
    basis: ArrayView2<f64>,
    v: &[f64],
) -> f64 {
    let p = r.len();
    let k = v.len();
    assert_eq!(chol.dim(), (p, p));
    assert_eq!(basis.dim(), (p, k));
    let Ok(b) = chol.solve_triangular(UPLO::Lower, Diag::NonUnit, &Array1::from(r.to_vec())) else {
        return f64::NEG_INFINITY;
    };
    let mut ln_det = 2.0 * (0..p).map(|i| chol[[i, i]].ln()).sum::<f64>();
    let mut quad = b.dot(&b);
    if k > 0 {
        let Ok(a) = chol.solve_triangular(UPLO::Lower, Diag::NonUnit, &scaled_basis(basis, v))
        else {
            return f64::NEG_INFINITY;
        };
        let m = Array2::<f64>::eye(k) + a.t().dot(&a);
        let c = a.t().dot(&b);
        let Some((ln_det_m, correction)) = woodbury_terms(&m, c.as_slice().expect("contiguous"))
        else {
            return f64::NEG_INFINITY;
        };
        quad -= correction;
        ln_det += ln_det_m;
    }
    -0.5 * (p as f64 * LN_2PI + ln_det + quad)
}

/// ln L and its derivatives: what
/// [`ExperimentLikelihood::ln_likelihood_with_gradient`](crate::calibrate::ExperimentLikelihood::ln_likelihood_with_gradient)
/// returns.
#[derive(Debug, Clone, PartialEq)]
pub struct LikelihoodGradient {
    pub value: f64,
    /// ∂ ln L/∂μ_j (p).
    pub mean: Vec<f64>,
    /// ∂ ln L/∂v_k, the weights' predictive variances (K).
    pub weight_var: Vec<f64>,
    /// ∂ ln L/∂diag_j, the emulator's diagonal variance (p; empty unless asked for).
    pub diag: Vec<f64>,
    /// ∂ ln L/∂σ² with unknown noise (0 with known noise).
    pub noise_var: f64,
}

/// How the base matrix of the normal (Λ, or Λ + K_δ) is inverted.
pub(super) enum Base {
    /// diag(λ).
    Diagonal(Vec<f64>),
    /// Its lower Cholesky factor.
    Dense(Array2<f64>),
}

impl Base {
    /// Base⁻¹ X (p × m).
    fn solve(&self, x: &Array2<f64>) -> Option<Array2<f64>> {
        match self {
            Base::Diagonal(l) => Some(Array2::from_shape_fn(x.dim(), |(j, c)| x[[j, c]] / l[j])),
            Base::Dense(l) => {
                let y = l.solve_triangular(UPLO::Lower, Diag::NonUnit, x).ok()?;
                l.t().solve_triangular(UPLO::Upper, Diag::NonUnit, &y).ok()
            }
        }
    }

    fn ln_det(&self) -> f64 {
        match self {
            Base::Diagonal(l) => l.iter().map(|v| v.ln()).sum(),
            Base::Dense(l) => 2.0 * l.diag().iter().map(|v| v.ln()).sum::<f64>(),
        }
    }

    /// diag(Base⁻¹).
    fn inverse_diag(&self) -> Option<Vec<f64>> {
        match self {
            Base::Diagonal(l) => Some(l.iter().map(|v| 1.0 / v).collect()),
            Base::Dense(l) => {
                let p = l.nrows();
                let li = l
                    .solve_triangular(UPLO::Lower, Diag::NonUnit, &Array2::eye(p))
                    .ok()?;
                Some(
                    (0..p)
                        .map(|j| li.column(j).iter().map(|v| v * v).sum())
                        .collect(),
                )
            }
        }
    }
}

/// ln N(r; 0, Base + B diag(v) Bᵀ) and its derivatives with respect to r's mean (−r),
/// v and the diagonal of Base (`with_diag` asks for the last; `noise_var` is left 0).
///
/// # Formula
/// Σ = Base + GGᵀ, G = B diag(√v). With G̃ = Base⁻¹G, M = I + GᵀG̃ and the Woodbury
/// identity Σ⁻¹ = Base⁻¹ − G̃ M⁻¹ G̃ᵀ: a = Σ⁻¹r,
/// ∂ ln N/∂μ = a (r = ȳ − μ), ∂ ln N/∂v_k = −½ (b_kᵀΣ⁻¹b_k − (b_kᵀa)²),
/// ∂ ln N/∂Base_jj = −½ ((Σ⁻¹)_jj − a_j²) (∂ ln |Σ| = tr Σ⁻¹∂Σ and
/// ∂ rᵀΣ⁻¹r = −aᵀ ∂Σ a: Petersen & Pedersen, The Matrix Cookbook (2012), eqs. 57 and
/// 61). With P = BᵀBase⁻¹B, BᵀΣ⁻¹B = P − P diag(√v) M⁻¹ diag(√v) P.
pub(super) fn ln_normal_gradient(
    r: &[f64],
    base: &Base,
    basis: ArrayView2<f64>,
    v: &[f64],
    with_diag: bool,
) -> Option<LikelihoodGradient> {
    let p = r.len();
    let k = v.len();
    let r_col = Array2::from_shape_fn((p, 1), |(j, _)| r[j]);
    let r_t = base.solve(&r_col)?.column(0).to_owned();
    let sv: Vec<f64> = v.iter().map(|x| x.max(0.0).sqrt()).collect();
    let mut ln_det = base.ln_det();
    let r_arr = Array1::from(r.to_vec());
    if k == 0 {
        let quad = r_arr.dot(&r_t);
        let diag = if with_diag {
            let inv = base.inverse_diag()?;
            (0..p).map(|j| -0.5 * (inv[j] - r_t[j] * r_t[j])).collect()
        } else {
            Vec::new()
        };
        return Some(LikelihoodGradient {
            value: -0.5 * (p as f64 * LN_2PI + ln_det + quad),
            mean: r_t.to_vec(),
            weight_var: vec![],
            diag,
            noise_var: 0.0,
        });
    }
    let b_t = base.solve(&basis.to_owned())?; // Base⁻¹B
    let pm = basis.t().dot(&b_t); // P = BᵀBase⁻¹B
    let mut m = Array2::<f64>::eye(k);
    for a in 0..k {
        for b in 0..k {
            m[[a, b]] += sv[a] * pm[[a, b]] * sv[b];
        }
    }
    let f = m.factorizec(UPLO::Lower).ok()?;
    ln_det += 2.0 * f.factor.diag().iter().map(|v| v.ln()).sum::<f64>();
    // c = Gᵀ Base⁻¹ r; t = M⁻¹c; a = Base⁻¹r − G̃ t.
    let c = Array1::from_shape_fn(k, |a| sv[a] * basis.column(a).dot(&r_t));
    let t = f.solvec(&c).ok()?;
    let mut a = r_t.clone();
    for q in 0..k {
        let coef = sv[q] * t[q];
        a.scaled_add(-coef, &b_t.column(q));
    }
    let quad = r_arr.dot(&a);
    let value = -0.5 * (p as f64 * LN_2PI + ln_det + quad);
    // diag(√v) P, then X = M⁻¹ diag(√v) P.
    let sp = Array2::from_shape_fn((k, k), |(a, b)| sv[a] * pm[[a, b]]);
    let mut x = Array2::zeros((k, k));
    for col in 0..k {
        let sol = f.solvec(&sp.column(col).to_owned()).ok()?;
        x.column_mut(col).assign(&sol);
    }
    let bta = basis.t().dot(&a);
    let gv: Vec<f64> = (0..k)
        .map(|q| {
            let quad_q = pm[[q, q]] - sp.column(q).dot(&x.column(q));
            -0.5 * (quad_q - bta[q] * bta[q])
        })
        .collect();
    let diag = if with_diag {
        // (Σ⁻¹)_jj = (Base⁻¹)_jj − Σ_ab G̃_ja (M⁻¹)_ab G̃_jb.
        let inv = base.inverse_diag()?;
        let g_t = Array2::from_shape_fn((p, k), |(j, q)| b_t[[j, q]] * sv[q]);
        let mut out = Vec::with_capacity(p);
        for j in 0..p {
            let row = g_t.row(j).to_owned();
            let s = f.solvec(&row).ok()?;
            let sig_jj = inv[j] - row.dot(&s);
            out.push(-0.5 * (sig_jj - a[j] * a[j]));
        }
        out
    } else {
        Vec::new()
    };
    Some(LikelihoodGradient {
        value,
        mean: a.to_vec(),
        weight_var: gv,
        diag,
        noise_var: 0.0,
    })
}
