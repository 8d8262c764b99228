//! The tuning pieces of Hamiltonian Monte Carlo that the No-U-Turn sampler
//! (`nuts.rs`) adapts during warm-up: the Euclidean [`Metric`] (momentum draws,
//! velocity, kinetic energy), the dual averaging of the step size ([`DualAveraging`])
//! and the warm-up schedule's buffers ([`buffers`]).
//!
//! Input: a covariance (the metric), acceptance statistics (the step size), the
//! warm-up length (the schedule). Output: momenta, energies, step sizes, window bounds.
//! Must not: evaluate the posterior, or create its own RNG (the chain passes its
//! stream in).
//!
//! # References
//! Hoffman, M. D. & Gelman, A. (2014), The No-U-Turn Sampler, JMLR 15, 1593–1623
//! (Algorithm 5; dual averaging with γ = 0.05, t₀ = 10, κ = 0.75, μ = ln 10ε₀).
//! Neal, R. M. (2011), MCMC using Hamiltonian dynamics, Handbook of Markov Chain Monte
//! Carlo, ch. 5 (mass matrix). The window schedule follows the defaults of common
//! open-source HMC implementations (common practice, values from memory).

use ndarray::Array2;
use rand::Rng;
use rand_distr::StandardNormal;

/// The Euclidean metric: Σ (the inverse mass matrix) and its lower Cholesky factor.
#[derive(Clone)]
pub(super) struct Metric {
    pub(super) inv_mass: Array2<f64>,
    pub(super) chol: Array2<f64>,
}

impl Metric {
    pub(super) fn unit(d: usize) -> Self {
        Self {
            inv_mass: Array2::eye(d),
            chol: Array2::eye(d),
        }
    }

    /// Σp: the velocity.
    pub(super) fn velocity(&self, p: &[f64]) -> Vec<f64> {
        let d = p.len();
        (0..d)
            .map(|a| (0..d).map(|b| self.inv_mass[[a, b]] * p[b]).sum())
            .collect()
    }

    /// ½ pᵀΣp.
    pub(super) fn kinetic(&self, p: &[f64]) -> f64 {
        0.5 * self
            .velocity(p)
            .iter()
            .zip(p)
            .map(|(v, p)| v * p)
            .sum::<f64>()
    }

    /// p ~ N(0, Σ⁻¹): p = L⁻ᵀε with Σ = LLᵀ (back substitution).
    pub(super) fn draw_momentum<R: Rng + ?Sized>(&self, rng: &mut R) -> Vec<f64> {
        let d = self.chol.nrows();
        let e: Vec<f64> = (0..d).map(|_| rng.sample(StandardNormal)).collect();
        let mut p = vec![0.0; d];
        for a in (0..d).rev() {
            let s: f64 = (a + 1..d).map(|b| self.chol[[b, a]] * p[b]).sum();
            p[a] = (e[a] - s) / self.chol[[a, a]];
        }
        p
    }
}

/// Dual averaging of ln ε (Hoffman & Gelman 2014, Algorithm 5).
#[derive(Clone)]
pub(super) struct DualAveraging {
    /// The mean acceptance statistic δ the step size is tuned towards.
    target: f64,
    mu: f64,
    s_bar: f64,
    x_bar: f64,
    count: f64,
}

impl DualAveraging {
    /// Start from step size `eps`, tuning towards mean acceptance statistic `target`.
    pub(super) fn new(eps: f64, target: f64) -> Self {
        Self {
            target,
            mu: (10.0 * eps).ln(),
            s_bar: 0.0,
            x_bar: 0.0,
            count: 0.0,
        }
    }

    /// The next step size after an iteration with acceptance statistic `accept`.
    pub(super) fn update(&mut self, accept: f64) -> f64 {
        const GAMMA: f64 = 0.05;
        const T0: f64 = 10.0;
        const KAPPA: f64 = 0.75;
        self.count += 1.0;
        let a = if accept.is_nan() {
            0.0
        } else {
            accept.min(1.0)
        };
        let eta = 1.0 / (self.count + T0);
        self.s_bar = (1.0 - eta) * self.s_bar + eta * (self.target - a);
        let x = self.mu - self.s_bar * self.count.sqrt() / GAMMA;
        let w = self.count.powf(-KAPPA);
        self.x_bar = (1.0 - w) * self.x_bar + w * x;
        x.exp()
    }

    /// The averaged step size, used after warm-up.
    pub(super) fn final_step(&self) -> f64 {
        self.x_bar.exp()
    }
}

/// The warm-up schedule: (end of the first buffer, start of the last buffer).
pub(super) fn buffers(warmup: usize) -> (usize, usize) {
    if warmup < 150 {
        let init = (0.15 * warmup as f64) as usize;
        let term = (0.1 * warmup as f64) as usize;
        (init, warmup - term)
    } else {
        (75, warmup - 50)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array1;
    use ndarray_linalg::{Cholesky, UPLO};

    #[test]
    fn momentum_has_the_inverse_metric_as_covariance() {
        // Σ = [[4, 1.2], [1.2, 1]]: p ~ N(0, Σ⁻¹), so E[p pᵀ] Σ = I.
        let s = ndarray::array![[4.0, 1.2], [1.2, 1.0]];
        let m = Metric {
            chol: s.cholesky(UPLO::Lower).unwrap(),
            inv_mass: s.clone(),
        };
        let mut rng = crate::rng::stream(3, 0);
        let n = 200_000;
        let mut c = Array2::<f64>::zeros((2, 2));
        for _ in 0..n {
            let p = Array1::from(m.draw_momentum(&mut rng));
            for a in 0..2 {
                for b in 0..2 {
                    c[[a, b]] += p[a] * p[b] / n as f64;
                }
            }
        }
        let prod = c.dot(&s);
        for a in 0..2 {
            for b in 0..2 {
                let want = if a == b { 1.0 } else { 0.0 };
                assert!((prod[[a, b]] - want).abs() < 0.02, "{prod}");
            }
        }
    }

    #[test]
    fn buffers_follow_the_schedule() {
        assert_eq!(buffers(1000), (75, 950));
        assert_eq!(buffers(100), (15, 90));
    }
}
