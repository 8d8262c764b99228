//! Priors truncated to the parameter range, the map to an unconstrained space, and the
//! inverse-gamma prior of an unknown noise variance.

use crate::study::{Parameter, Prior};

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
