//! The log posterior on the unconstrained space: priors, Jacobians and the likelihoods
//! of every experiment.

use super::likelihood::{Emulator, ExperimentLikelihood};
use super::prior::{ln_prior, Transform};
use crate::study::Parameter;
use std::sync::atomic::{AtomicU64, Ordering};

/// ln p(θ | data) + const, evaluated at unconstrained z.
pub struct LogPosterior<'a> {
    pub parameters: Vec<Parameter>,
    pub transforms: Vec<Transform>,
    pub experiments: Vec<(&'a dyn Emulator, ExperimentLikelihood)>,
    /// Evaluations of this density (all chains).
    pub n_evaluations: AtomicU64,
}

impl<'a> LogPosterior<'a> {
    pub fn new(
        parameters: Vec<Parameter>,
        experiments: Vec<(&'a dyn Emulator, ExperimentLikelihood)>,
    ) -> Self {
        let transforms = parameters
            .iter()
            .map(|p| Transform { lo: p.lo, hi: p.hi })
            .collect();
        Self {
            parameters,
            transforms,
            experiments,
            n_evaluations: AtomicU64::new(0),
        }
    }

    pub fn dim(&self) -> usize {
        self.parameters.len()
    }

    pub fn to_constrained(&self, z: &[f64]) -> Vec<f64> {
        z.iter()
            .zip(&self.transforms)
            .map(|(z, t)| t.to_constrained(*z))
            .collect()
    }

    pub fn to_unconstrained(&self, x: &[f64]) -> Vec<f64> {
        x.iter()
            .zip(&self.transforms)
            .map(|(x, t)| t.to_unconstrained(*x))
            .collect()
    }

    /// ln p(θ | y) in θ-space (no Jacobian): what records report.
    pub fn ln_posterior_theta(&self, theta: &[f64]) -> f64 {
        let mut lp: f64 = self
            .parameters
            .iter()
            .zip(theta)
            .map(|(p, x)| ln_prior(p, *x))
            .sum();
        if !lp.is_finite() {
            return lp;
        }
        for (em, lik) in &self.experiments {
            let (m, v) = em.predict(theta);
            lp += lik.ln_likelihood(&m, &v);
        }
        lp
    }

    /// The density the sampler targets: ln p(θ(z) | y) + ln |dθ/dz|.
    pub fn ln_density(&self, z: &[f64]) -> f64 {
        self.n_evaluations.fetch_add(1, Ordering::Relaxed);
        let theta = self.to_constrained(z);
        let jac: f64 = z
            .iter()
            .zip(&self.transforms)
            .map(|(z, t)| t.ln_jacobian(*z))
            .sum();
        self.ln_posterior_theta(&theta) + jac
    }
}
