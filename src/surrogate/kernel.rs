//! Stationary kernels with one length-scale per input (ARD).
//!
//! # Formula
//! r² = Σ_d (x_d − x'_d)² / ℓ_d², k(x, x') = σ² ρ(r) with
//! - Matérn 5/2: ρ(r) = (1 + √5 r + 5r²/3) exp(−√5 r)
//! - Matérn 3/2: ρ(r) = (1 + √3 r) exp(−√3 r)
//! - squared exponential: ρ(r) = exp(−r²/2)
//!
//! # References
//! Rasmussen, C. E. & Williams, C. K. I. (2006). Gaussian Processes for Machine
//! Learning. MIT Press. §4.2, eqs. 4.9 and 4.17.

use crate::study::KernelChoice;

/// A correlation function of the scaled distance r.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kernel {
    Matern52,
    Matern32,
    SquaredExponential,
}

impl From<KernelChoice> for Kernel {
    fn from(k: KernelChoice) -> Self {
        match k {
            KernelChoice::Matern52 => Kernel::Matern52,
            KernelChoice::Matern32 => Kernel::Matern32,
            KernelChoice::SquaredExponential => Kernel::SquaredExponential,
        }
    }
}

impl Kernel {
    /// Name used in records.
    pub fn name(self) -> &'static str {
        match self {
            Kernel::Matern52 => "matern52",
            Kernel::Matern32 => "matern32",
            Kernel::SquaredExponential => "squared-exponential",
        }
    }

    /// ρ(r).
    pub fn corr(self, r: f64) -> f64 {
        match self {
            Kernel::Matern52 => {
                let s = 5f64.sqrt() * r;
                (1.0 + s + s * s / 3.0) * (-s).exp()
            }
            Kernel::Matern32 => {
                let s = 3f64.sqrt() * r;
                (1.0 + s) * (-s).exp()
            }
            Kernel::SquaredExponential => (-0.5 * r * r).exp(),
        }
    }

    /// (ρ(r), g(r)) with one exponential.
    pub fn corr_and_neg_d(self, r: f64) -> (f64, f64) {
        match self {
            Kernel::Matern52 => {
                let s = 5f64.sqrt() * r;
                let e = (-s).exp();
                ((1.0 + s + s * s / 3.0) * e, 5.0 / 3.0 * (1.0 + s) * e)
            }
            Kernel::Matern32 => {
                let s = 3f64.sqrt() * r;
                let e = (-s).exp();
                ((1.0 + s) * e, 3.0 * e)
            }
            Kernel::SquaredExponential => {
                let e = (-0.5 * r * r).exp();
                (e, e)
            }
        }
    }

    /// g(r) = −ρ'(r)/r, finite at r = 0; ∂ρ/∂ln ℓ_d = g(r)·(Δ_d/ℓ_d)².
    pub fn neg_dcorr_over_r(self, r: f64) -> f64 {
        match self {
            Kernel::Matern52 => {
                let s = 5f64.sqrt() * r;
                5.0 / 3.0 * (1.0 + s) * (-s).exp()
            }
            Kernel::Matern32 => 3.0 * (-(3f64.sqrt()) * r).exp(),
            Kernel::SquaredExponential => (-0.5 * r * r).exp(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn derivative_matches_finite_difference() {
        // Structural check: g(r) = −ρ'(r)/r by central differences.
        for k in [
            Kernel::Matern52,
            Kernel::Matern32,
            Kernel::SquaredExponential,
        ] {
            for r in [0.1, 0.7, 1.9] {
                let h = 1e-6;
                let fd = -(k.corr(r + h) - k.corr(r - h)) / (2.0 * h) / r;
                assert!((fd - k.neg_dcorr_over_r(r)).abs() < 1e-7, "{k:?} at {r}");
            }
            assert_eq!(k.corr(0.0), 1.0);
            for r in [0.0, 0.3, 2.5] {
                assert_eq!(k.corr_and_neg_d(r), (k.corr(r), k.neg_dcorr_over_r(r)));
            }
        }
    }
}
