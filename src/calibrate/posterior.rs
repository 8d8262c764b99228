//! The log posterior on the unconstrained space: priors, Jacobians and the likelihoods
//! of every experiment.
//!
//! The state is x = (θ₁ … θ_d, σ₁² … σ_k², h₁ … h_m): the study's parameters, then the
//! noise variance of each experiment whose noise is unknown, then the sampled
//! model-discrepancy hyperparameters (sd, length-scale) of each experiment, both in the
//! study's experiment order. The sampler works on z = (logit θ, ln σ², ln h).

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
    /// For each experiment, the range of its sampled discrepancy hyperparameters in the
    /// state (after the parameters and noise variances).
    discrepancy_slot: Vec<std::ops::Range<usize>>,
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
        let mut start = 0;
        let discrepancy_slot = experiments
            .iter()
            .map(|(_, lik)| {
                let r = start..start + lik.n_discrepancy();
                start = r.end;
                r
            })
            .collect();
        Self {
            parameters,
            transforms,
            experiments,
            noise_slot,
            discrepancy_slot,
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

    /// Length of the sampled state: parameters, estimated noise variances and sampled
    /// discrepancy hyperparameters.
    pub fn dim(&self) -> usize {
        self.n_parameters() + self.n_noise() + self.n_discrepancy()
    }

    /// Number of sampled discrepancy hyperparameters.
    pub fn n_discrepancy(&self) -> usize {
        self.discrepancy_slot.last().map_or(0, |r| r.end)
    }

    /// The sampled discrepancy hyperparameters of experiment `k` within
    /// `discrepancy` (the state's last [`Self::n_discrepancy`] values).
    pub fn discrepancy_of<'v>(&self, k: usize, discrepancy: &'v [f64]) -> &'v [f64] {
        &discrepancy[self.discrepancy_slot[k].clone()]
    }

    /// Split a constrained state x into (θ, noise variances, discrepancy
    /// hyperparameters).
    pub fn split_state(&self, mut x: Vec<f64>) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
        let disc = x.split_off(self.n_parameters() + self.n_noise());
        let noise = x.split_off(self.n_parameters());
        (x, noise, disc)
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

    /// z → x: logit⁻¹ for the parameters, exp for the noise variances and discrepancy
    /// hyperparameters.
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
    /// Σ_i ln |dθ_i/dz_i| (logit map, see [`Transform`]) + Σ_k z_k (σ_k² = e^{z_k}, and
    /// each discrepancy hyperparameter h = e^z).
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
        let (theta, rest) = x.split_at(d);
        let (noise_var, disc) = rest.split_at(self.n_noise());
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
        for (k, ((_, lik), slot)) in self.experiments.iter().zip(&self.noise_slot).enumerate() {
            if let (Some(j), Some(prior)) = (slot, lik.noise_prior()) {
                lp += prior.ln_density(noise_var[*j]);
            }
            if let Some(dk) = lik.discrepancy() {
                lp += dk.ln_prior(self.discrepancy_of(k, disc));
            }
        }
        if !lp.is_finite() {
            return lp;
        }
        for (k, ((em, lik), slot)) in self.experiments.iter().zip(&self.noise_slot).enumerate() {
            let pred = em.predict_low_rank(theta);
            let s2 = slot.map_or(1.0, |j| noise_var[j]);
            lp += lik.ln_likelihood_full(&pred, s2, self.discrepancy_of(k, disc));
        }
        lp
    }

    /// ln p(θ | y) in θ-space for a posterior without estimated noise or sampled
    /// discrepancy hyperparameters.
    ///
    /// # Panics
    /// If the state holds more than θ (use [`Self::ln_posterior`]).
    pub fn ln_posterior_theta(&self, theta: &[f64]) -> f64 {
        assert_eq!(
            self.dim(),
            self.n_parameters(),
            "the state holds more than θ"
        );
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

    /// A starting value of every sampled discrepancy hyperparameter: a draw from its
    /// prior, in state order (nothing is drawn without them).
    pub fn initial_discrepancy<R: rand::Rng + ?Sized>(&self, rng: &mut R) -> Vec<f64> {
        self.experiments
            .iter()
            .filter_map(|(_, lik)| lik.discrepancy())
            .flat_map(|d| d.draw(rng))
            .collect()
    }

    /// For each sampled discrepancy hyperparameter, in state order: (experiment, quantity,
    /// kind, prior).
    pub fn discrepancy_labels(&self) -> Vec<(String, String, super::HyperKind, super::Hyper)> {
        let mut out = Vec::new();
        for (_, lik) in &self.experiments {
            if let Some(d) = lik.discrepancy() {
                for (b, kind, h) in d.hypers() {
                    if h.is_sampled() {
                        out.push((lik.name.clone(), d.blocks[b].quantity.clone(), kind, h));
                    }
                }
            }
        }
        out
    }
}
