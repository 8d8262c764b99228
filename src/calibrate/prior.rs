//! Priors truncated to the parameter range, the map to an unconstrained space, and the
//! inverse-gamma prior of an unknown noise variance.

use crate::study::{Parameter, Prior};
use ndarray::{Array1, Array2, Axis};
use ndarray_linalg::{Cholesky, Diag, SolveTriangular, UPLO};

/// ln of the prior density at `x`, up to the truncation constant (constant in x);
/// −∞ outside the range.
///
/// # Formula
/// uniform: 0; normal: −½((x − m)/s)²; lognormal: −ln x − ½((ln x − μ)/σ)²
pub fn ln_prior(p: &Parameter, x: f64) -> f64 {
    if !(x >= p.lo && x <= p.hi) {
        return f64::NEG_INFINITY;
    }
    match p.prior {
        Prior::Uniform => 0.0,
        Prior::Normal { mean, sd } => -0.5 * ((x - mean) / sd).powi(2),
        Prior::LogNormal { mu, sigma } => {
            if x <= 0.0 {
                f64::NEG_INFINITY
            } else {
                -x.ln() - 0.5 * ((x.ln() - mu) / sigma).powi(2)
            }
        }
    }
}

/// The logit map between a bounded parameter and the real line.
///
/// # Formula
/// x = a + (b − a)·s(z), s(z) = 1/(1 + e^{−z}); ln |dx/dz| = ln(b − a) + ln s(z) + ln(1 − s(z)).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Transform {
    pub lo: f64,
    pub hi: f64,
}

impl Transform {
    pub fn to_constrained(&self, z: f64) -> f64 {
        let s = 1.0 / (1.0 + (-z).exp());
        self.lo + (self.hi - self.lo) * s
    }

    pub fn to_unconstrained(&self, x: f64) -> f64 {
        let u = ((x - self.lo) / (self.hi - self.lo)).clamp(1e-12, 1.0 - 1e-12);
        (u / (1.0 - u)).ln()
    }

    /// ln |dx/dz| (computed stably for large |z|).
    pub fn ln_jacobian(&self, z: f64) -> f64 {
        // ln s(z) + ln(1 − s(z)) = −|z| − 2 ln(1 + e^{−|z|})
        (self.hi - self.lo).ln() - z.abs() - 2.0 * (-z.abs()).exp().ln_1p()
    }
}

/// Inverse-gamma prior of an unknown noise variance σ², sampled as z = ln σ².
///
/// # Formula
/// p(σ²) = βᵅ/Γ(α) (σ²)^(−α−1) exp(−β/σ²), σ² > 0, with α = `shape`, β = `scale`;
/// mean β/(α − 1) for α > 1. On z = ln σ² (Jacobian dσ²/dz = σ²):
/// ln p(z) = −α z − β e^(−z) + const.
///
/// # References
/// Gelman, A., Carlin, J. B., Stern, H. S., Dunson, D. B., Vehtari, A. & Rubin, D. B.
/// (2013), Bayesian Data Analysis, 3rd ed., §2.6 and Appendix A (the scaled inverse-χ²
/// and inverse-gamma families).
///
/// ```
/// use assay::calibrate::InverseGamma;
/// let p = InverseGamma { shape: 3.0, scale: 2.0 };
/// // The density on z = ln σ² is the density on σ² times σ².
/// let s2: f64 = 0.7;
/// assert!((p.ln_density_ln_var(s2.ln()) - (p.ln_density(s2) + s2.ln())).abs() < 1e-12);
/// ```
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct InverseGamma {
    pub shape: f64,
    pub scale: f64,
}

impl InverseGamma {
    /// ln p(σ²) up to the normalising constant; −∞ for σ² ≤ 0.
    pub fn ln_density(&self, var: f64) -> f64 {
        if var.is_nan() || var <= 0.0 || !var.is_finite() {
            return f64::NEG_INFINITY;
        }
        -(self.shape + 1.0) * var.ln() - self.scale / var
    }

    /// ln p(z) for z = ln σ², Jacobian included, up to the normalising constant.
    pub fn ln_density_ln_var(&self, z: f64) -> f64 {
        -self.shape * z - self.scale * (-z).exp()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn jacobian_matches_finite_difference() {
        let t = Transform {
            lo: 150.0,
            hi: 250.0,
        };
        for z in [-8.0, -1.0, 0.0, 0.5, 6.0] {
            let h = 1e-6;
            let fd = (t.to_constrained(z + h) - t.to_constrained(z - h)) / (2.0 * h);
            assert!((fd.ln() - t.ln_jacobian(z)).abs() < 1e-6, "z = {z}");
            assert!((t.to_unconstrained(t.to_constrained(z)) - z).abs() < 1e-8);
        }
    }
}

/// A multivariate normal prior on the unconstrained parameters z = logit θ, fitted to
/// the draws of an earlier calibration (`calibration.prior_from`): sequential updating
/// when new test data arrive.
///
/// The approximation: the earlier posterior is replaced by the normal with the same mean
/// and covariance in z. It keeps the correlations between the parameters and is exact
/// when the earlier posterior is normal in z; skewness and heavier tails beyond that are
/// lost, and a posterior piled against a range limit is poorly described (its z runs
/// off towards ±∞). Check the earlier posterior's marginals before relying on it.
///
/// # Formula
/// ln N(z; μ, Σ) = −½ (z − μ)ᵀ Σ⁻¹ (z − μ) − ½ ln |Σ| − (d/2) ln 2π, with Σ = L Lᵀ
/// (Cholesky): (z − μ)ᵀ Σ⁻¹ (z − μ) = |L⁻¹ (z − μ)|², ln |Σ| = 2 Σ ln L_ii.
#[derive(Debug, Clone, PartialEq)]
pub struct MvnPrior {
    pub mean: Array1<f64>,
    /// Lower Cholesky factor of the covariance (LAPACK `potrf`).
    pub chol: Array2<f64>,
    ln_norm: f64,
}

impl MvnPrior {
    /// Sample mean and covariance (divisor n − 1) of `draws` (one row per draw).
    ///
    /// # Errors
    /// Fewer draws than dimensions plus two, or a covariance that is not positive
    /// definite (a parameter that did not vary).
    pub fn fit(draws: &[Vec<f64>]) -> Result<Self, String> {
        let d = draws.first().map_or(0, Vec::len);
        let n = draws.len();
        if d == 0 || n < d + 2 {
            return Err(format!(
                "{n} draws are too few for a {d}-dimensional normal"
            ));
        }
        let x = Array2::from_shape_fn((n, d), |(i, j)| draws[i][j]);
        let mean = x.mean_axis(Axis(0)).expect("n > 0");
        let c = &x - &mean;
        let cov = c.t().dot(&c) / (n as f64 - 1.0);
        let chol = cov.cholesky(UPLO::Lower).map_err(|_| {
            "the earlier draws do not vary in every direction (covariance not positive definite)"
                .to_string()
        })?;
        let ln_det: f64 = 2.0 * chol.diag().iter().map(|v| v.ln()).sum::<f64>();
        let ln_norm = -0.5 * ln_det - 0.5 * d as f64 * (2.0 * std::f64::consts::PI).ln();
        Ok(Self {
            mean,
            chol,
            ln_norm,
        })
    }

    /// The covariance L Lᵀ.
    pub fn covariance(&self) -> Array2<f64> {
        self.chol.dot(&self.chol.t())
    }

    /// ln N(z; μ, Σ).
    pub fn ln_density(&self, z: &[f64]) -> f64 {
        let r = Array1::from_iter(z.iter().zip(&self.mean).map(|(z, m)| z - m));
        match self.chol.solve_triangular(UPLO::Lower, Diag::NonUnit, &r) {
            Ok(w) => self.ln_norm - 0.5 * w.dot(&w),
            Err(_) => f64::NEG_INFINITY,
        }
    }

    /// ∂ ln N(z; μ, Σ)/∂z = −Σ⁻¹(z − μ), by two triangular solves with L.
    pub fn gradient(&self, z: &[f64]) -> Vec<f64> {
        let r = Array1::from_iter(z.iter().zip(&self.mean).map(|(z, m)| z - m));
        let w = self
            .chol
            .solve_triangular(UPLO::Lower, Diag::NonUnit, &r)
            .and_then(|w| {
                self.chol
                    .t()
                    .solve_triangular(UPLO::Upper, Diag::NonUnit, &w)
            });
        match w {
            Ok(v) => v.iter().map(|x| -x).collect(),
            Err(_) => vec![0.0; z.len()],
        }
    }
}
