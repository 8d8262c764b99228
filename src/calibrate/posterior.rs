//! The log posterior on the unconstrained space: priors, Jacobians and the likelihoods
//! of every experiment.
//!
//! The state is x = (θ₁ … θ_d, σ₁² … σ_k²): the study's parameters, then the noise
//! variance of each experiment whose noise is unknown, in the study's experiment order.
//! The sampler works on z = (logit θ, ln σ²).

use super::likelihood::{Emulator, ExperimentLikelihood};
use super::prior::{ln_prior, InverseGamma, MvnPrior, Transform};
use crate::study::Parameter;
use std::sync::atomic::{AtomicU64, Ordering};

/// ln p(θ, σ² | data) + const, evaluated at unconstrained z.
pub struct LogPosterior<'a> {
    pub parameters: Vec<Parameter>,
    pub transforms: Vec<Transform>,
    pub experiments: Vec<(&'a dyn Emulator, ExperimentLikelihood)>,
    /// For each experiment, the index of its noise variance in the state (after the
    /// parameters), when its noise is unknown.
    noise_slot: Vec<Option<usize>>,
    /// Evaluations of this density (all chains).
    pub n_evaluations: AtomicU64,
    /// A joint prior on z = logit θ that replaces the per-parameter priors
    /// (`calibration.prior_from`).
    mvn_prior: Option<MvnPrior>,
    /// Parameter values the chains may start from besides prior draws (the surrogate's
    /// training points): chain k of n considers those with index ≡ k (mod n).
    pub start_candidates: Vec<Vec<f64>>,
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
        let mut k = 0;
        let noise_slot = experiments
            .iter()
            .map(|(_, lik)| {
                lik.noise_prior().map(|_| {
                    k += 1;
                    k - 1
                })
            })
            .collect();
        Self {
            parameters,
            transforms,
            experiments,
            noise_slot,
            n_evaluations: AtomicU64::new(0),
            mvn_prior: None,
            start_candidates: Vec::new(),
        }
    }

    /// Replace the per-parameter priors by a normal on z = logit θ (the state's first
    /// [`Self::n_parameters`] coordinates). On the constrained scale its density is
    /// N(z(θ); μ, Σ) / Π |dθ_i/dz_i|.
    pub fn with_mvn_prior(mut self, prior: MvnPrior) -> Self {
        assert_eq!(prior.mean.len(), self.n_parameters());
        self.mvn_prior = Some(prior);
        self
    }

    /// Let the chains also consider these parameter vectors (in the study's order) as
    /// starting points; those not strictly inside every range are left out.
    pub fn with_start_candidates(mut self, points: &[Vec<f64>]) -> Self {
        self.start_candidates = points
            .iter()
            .filter(|x| {
                x.len() == self.parameters.len()
                    && x.iter().zip(&self.parameters).all(|(v, p)| {
                        let margin = 1e-6 * (p.hi - p.lo);
                        *v > p.lo + margin && *v < p.hi - margin && ln_prior(p, *v).is_finite()
                    })
            })
            .cloned()
            .collect();
        self
    }

    /// Length of the sampled state: parameters plus estimated noise variances.
    pub fn dim(&self) -> usize {
        self.n_parameters() + self.n_noise()
    }

    pub fn n_parameters(&self) -> usize {
        self.parameters.len()
    }

    /// Number of estimated noise variances.
    pub fn n_noise(&self) -> usize {
        self.noise_slot.iter().flatten().count()
    }

    /// Names of the experiments whose noise variance is estimated, in state order.
    pub fn noise_names(&self) -> Vec<String> {
        self.experiments
            .iter()
            .zip(&self.noise_slot)
            .filter(|(_, s)| s.is_some())
            .map(|((_, lik), _)| lik.name.clone())
            .collect()
    }

    /// The inverse-gamma priors of the estimated noise variances, in state order.
    pub fn noise_priors(&self) -> Vec<InverseGamma> {
        self.experiments
            .iter()
            .filter_map(|(_, lik)| lik.noise_prior())
            .collect()
    }

    /// z → x: logit⁻¹ for the parameters, exp for the noise variances.
    pub fn to_constrained(&self, z: &[f64]) -> Vec<f64> {
        let d = self.n_parameters();
        z[..d]
            .iter()
            .zip(&self.transforms)
            .map(|(z, t)| t.to_constrained(*z))
            .chain(z[d..].iter().map(|z| z.exp()))
            .collect()
    }

    /// x → z, the inverse of [`Self::to_constrained`].
    pub fn to_unconstrained(&self, x: &[f64]) -> Vec<f64> {
        let d = self.n_parameters();
        x[..d]
            .iter()
            .zip(&self.transforms)
            .map(|(x, t)| t.to_unconstrained(*x))
            .chain(x[d..].iter().map(|v| v.ln()))
            .collect()
    }

    /// ln |dx/dz|.
    ///
    /// # Formula
    /// Σ_i ln |dθ_i/dz_i| (logit map, see [`Transform`]) + Σ_k z_k (σ_k² = e^{z_k}).
    pub fn ln_jacobian(&self, z: &[f64]) -> f64 {
        let d = self.n_parameters();
        z[..d]
            .iter()
            .zip(&self.transforms)
            .map(|(z, t)| t.ln_jacobian(*z))
            .sum::<f64>()
            + z[d..].iter().sum::<f64>()
    }

    /// ln p(x | y) at x = (θ, σ²) on the constrained scale (no Jacobian): what records
    /// report.
    pub fn ln_posterior(&self, x: &[f64]) -> f64 {
        let d = self.n_parameters();
        debug_assert_eq!(x.len(), self.dim());
        let (theta, noise_var) = x.split_at(d);
        let mut lp: f64 = match &self.mvn_prior {
            None => self
                .parameters
                .iter()
                .zip(theta)
                .map(|(p, x)| ln_prior(p, *x))
                .sum(),
            Some(mvn) => {
                if self
                    .parameters
                    .iter()
                    .zip(theta)
                    .any(|(p, x)| !(*x > p.lo && *x < p.hi))
                {
                    return f64::NEG_INFINITY;
                }
                let z: Vec<f64> = theta
                    .iter()
                    .zip(&self.transforms)
                    .map(|(x, t)| t.to_unconstrained(*x))
                    .collect();
                let ln_jac: f64 = z
                    .iter()
                    .zip(&self.transforms)
                    .map(|(z, t)| t.ln_jacobian(*z))
                    .sum();
                mvn.ln_density(&z) - ln_jac
            }
        };
        for ((_, lik), slot) in self.experiments.iter().zip(&self.noise_slot) {
            if let (Some(k), Some(prior)) = (slot, lik.noise_prior()) {
                lp += prior.ln_density(noise_var[*k]);
            }
        }
        if !lp.is_finite() {
            return lp;
        }
        for ((em, lik), slot) in self.experiments.iter().zip(&self.noise_slot) {
            let pred = em.predict_low_rank(theta);
            let s2 = slot.map_or(1.0, |k| noise_var[k]);
            lp += lik.ln_likelihood_low_rank(&pred, s2);
        }
        lp
    }

    /// ln p(θ | y) in θ-space for a posterior without estimated noise.
    ///
    /// # Panics
    /// If some noise variance is estimated (use [`Self::ln_posterior`]).
    pub fn ln_posterior_theta(&self, theta: &[f64]) -> f64 {
        assert_eq!(self.n_noise(), 0, "the state includes noise variances");
        self.ln_posterior(theta)
    }

    /// The density the sampler targets: ln p(x(z) | y) + ln |dx/dz|.
    pub fn ln_density(&self, z: &[f64]) -> f64 {
        self.n_evaluations.fetch_add(1, Ordering::Relaxed);
        let x = self.to_constrained(z);
        self.ln_posterior(&x) + self.ln_jacobian(z)
    }

    /// A starting value of each estimated noise variance at parameters `theta`: a draw
    /// from its conditional posterior given θ when the surrogate variance is neglected
    /// (see [`ExperimentLikelihood::noise_conditional`]). Every variance is drawn from
    /// `rng` in state order; nothing is drawn when no noise is estimated.
    pub fn initial_noise<R: rand::Rng + ?Sized>(&self, theta: &[f64], rng: &mut R) -> Vec<f64> {
        use rand_distr::{Distribution, Gamma};
        let mut out = Vec::with_capacity(self.n_noise());
        for (em, lik) in &self.experiments {
            if lik.noise_prior().is_none() {
                continue;
            }
            let (m, _) = em.predict(theta);
            let c = lik
                .noise_conditional(&m)
                .expect("unknown noise has a conditional");
            // σ² = β / G with G ~ Gamma(α, 1).
            let g = Gamma::new(c.shape, 1.0)
                .expect("shape > 0 by validation")
                .sample(rng);
            let v = c.scale / g;
            out.push(if v.is_finite() && v > 0.0 {
                v
            } else {
                c.scale / c.shape
            });
        }
        out
    }
}
