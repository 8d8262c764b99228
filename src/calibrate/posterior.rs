//! The log posterior on the unconstrained space: priors, Jacobians and the likelihoods
//! of every experiment.
//!
//! The state is x = (θ₁ … θ_d, σ₁² … σ_k², h₁ … h_m): the study's parameters, then the
//! noise variance of each experiment whose noise is unknown, then the sampled
//! model-discrepancy hyperparameters (sd, length-scale) of each experiment, both in the
//! study's experiment order. The sampler works on z = (logit θ, ln σ², ln h).

use super::discrepancy::{Hyper, HyperKind};
use super::emulator::Emulator;
use super::likelihood::ExperimentLikelihood;
use super::prior::{ln_prior, InverseGamma, MvnPrior, Transform};
use crate::study::{Parameter, Prior};
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

    /// Whether [`Self::ln_density_and_gradient`] gives the gradient: every emulator
    /// and every likelihood provides derivatives (not with control variables, sampled
    /// discrepancy hyperparameters, or a discrepancy with an unknown noise variance).
    pub fn has_gradient(&self) -> bool {
        self.experiments
            .iter()
            .all(|(em, lik)| em.has_gradient() && lik.has_gradient())
    }

    /// [`Self::ln_density`] and its gradient with respect to z; `None` where
    /// [`Self::has_gradient`] is false. Counts as one evaluation. Where the density is
    /// −∞ the gradient is zero.
    ///
    /// # Formula
    /// By the chain rule through x(z): ∂/∂z_l = (∂ ln p/∂θ_l) dθ_l/dz_l + ∂ ln|dx/dz|/∂z_l,
    /// with dθ/dz = (b − a) s(1 − s) and ∂ ln|dθ/dz|/∂z = 1 − 2s (s the logistic function
    /// of z, [`Transform`]); for σ² = e^z, ∂/∂z = σ² ∂ ln p/∂σ² + 1. Priors: normal
    /// −(θ − m)/s², lognormal −(1 + (ln θ − μ)/σ²)/θ, inverse-gamma
    /// −(α + 1)/σ² + β/σ⁴; a normal prior on z (`prior_from`) −Σ⁻¹(z − μ) directly.
    /// The likelihood's part comes from [`ExperimentLikelihood::ln_likelihood_with_gradient`]
    /// and the emulator's derivatives.
    pub fn ln_density_and_gradient(&self, z: &[f64]) -> Option<(f64, Vec<f64>)> {
        if !self.has_gradient() {
            return None;
        }
        self.n_evaluations.fetch_add(1, Ordering::Relaxed);
        let d = self.n_parameters();
        let dim = self.dim();
        let zero = |v: f64| Some((v, vec![0.0; dim]));
        let x = self.to_constrained(z);
        let (theta, noise_var) = x.split_at(d);
        let noise_var = &noise_var[..self.n_noise()];
        // ∂/∂θ (constrained) and ∂/∂σ², then to z at the end.
        let mut g_theta = vec![0.0; d];
        let mut g_noise = vec![0.0; self.n_noise()];
        let mut lp = 0.0;
        if self
            .parameters
            .iter()
            .zip(theta)
            .any(|(p, x)| !(*x > p.lo && *x < p.hi))
        {
            return zero(f64::NEG_INFINITY);
        }
        // With a normal prior on z its gradient is added in z at the end.
        if self.mvn_prior.is_none() {
            for (j, (p, x)) in self.parameters.iter().zip(theta).enumerate() {
                lp += ln_prior(p, *x);
                g_theta[j] += match p.prior {
                    Prior::Uniform => 0.0,
                    Prior::Normal { mean, sd } => -(x - mean) / (sd * sd),
                    Prior::LogNormal { mu, sigma } => -(1.0 + (x.ln() - mu) / (sigma * sigma)) / x,
                };
            }
        }
        for ((_, lik), slot) in self.experiments.iter().zip(&self.noise_slot) {
            if let (Some(j), Some(prior)) = (slot, lik.noise_prior()) {
                let v = noise_var[*j];
                lp += prior.ln_density(v);
                g_noise[*j] += -(prior.shape + 1.0) / v + prior.scale / (v * v);
            }
        }
        if !lp.is_finite() {
            return zero(lp);
        }
        for ((em, lik), slot) in self.experiments.iter().zip(&self.noise_slot) {
            let (pred, grad) = em.predict_low_rank_with_gradient(theta)?;
            let s2 = slot.map_or(1.0, |j| noise_var[j]);
            let lg = lik.ln_likelihood_with_gradient(&pred, s2, grad.diag.is_some())?;
            lp += lg.value;
            if !lp.is_finite() {
                return zero(f64::NEG_INFINITY);
            }
            for (l, g) in g_theta.iter_mut().enumerate() {
                *g += lg
                    .mean
                    .iter()
                    .enumerate()
                    .map(|(j, a)| a * grad.mean[[j, l]])
                    .sum::<f64>()
                    + lg.weight_var
                        .iter()
                        .enumerate()
                        .map(|(k, a)| a * grad.weight_var[[k, l]])
                        .sum::<f64>();
                if let Some(gd) = &grad.diag {
                    *g += lg
                        .diag
                        .iter()
                        .enumerate()
                        .map(|(j, a)| a * gd[[j, l]])
                        .sum::<f64>();
                }
            }
            if let Some(j) = slot {
                g_noise[*j] += lg.noise_var;
            }
        }
        let mut gz = Vec::with_capacity(dim);
        for ((g, t), zl) in g_theta.iter().zip(&self.transforms).zip(z) {
            let s = 1.0 / (1.0 + (-zl).exp());
            let dtheta = (t.hi - t.lo) * s * (1.0 - s);
            gz.push(g * dtheta + (1.0 - 2.0 * s));
        }
        for (g, v) in g_noise.iter().zip(noise_var) {
            gz.push(g * v + 1.0);
        }
        let mut value = lp + self.ln_jacobian(z);
        if let Some(mvn) = &self.mvn_prior {
            // ln_posterior's −ln|dθ/dz| cancels the Jacobian's θ part: the θ-part of the
            // density is N(z; μ, Σ) itself.
            let zt = &z[..d];
            value += mvn.ln_density(zt)
                - zt.iter()
                    .zip(&self.transforms)
                    .map(|(z, t)| t.ln_jacobian(*z))
                    .sum::<f64>();
            let gm = mvn.gradient(zt);
            for l in 0..d {
                // Replace the Jacobian's derivative (it cancels) by the normal's.
                let s = 1.0 / (1.0 + (-z[l]).exp());
                gz[l] += gm[l] - (1.0 - 2.0 * s);
            }
        }
        Some((value, gz))
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
    pub fn discrepancy_labels(&self) -> Vec<(String, String, HyperKind, Hyper)> {
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
