//! Priors truncated to the parameter range, and the map to an unconstrained space.

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
