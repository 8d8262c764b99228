//! Random-walk Metropolis with a Gaussian proposal tuned during warm-up, one chain per
//! random stream, chains in parallel.
//!
//! Warm-up tunes the proposal: its covariance is the sample covariance of the warm-up
//! draws at the end of doubling windows (50, 100, 200 … iterations; correlations shrunk
//! by 1 % except in the last window), its scale follows a Robbins–Monro rule towards an
//! acceptance rate of 0.234. The proposal is frozen after warm-up, so the kept draws
//! come from a fixed Metropolis kernel.
//!
//! The state is the unconstrained z of [`LogPosterior`]: logit-mapped parameters, then
//! ln σ² of each estimated noise variance. A chain starts at parameters drawn from the
//! prior and noise variances drawn from their conditional posterior at those parameters.
//!
//! Input: a [`LogPosterior`] and the settings; output: one [`Chain`] per chain, run by
//! [`run_chains`]. Must not: open files, print, or create its own RNG.
//!
//! # References
//! Metropolis, N. et al. (1953), J. Chem. Phys. 21, 1087–1092. Haario, H., Saksman, E.
//! & Tamminen, J. (2001), An adaptive Metropolis algorithm, Bernoulli 7(2), 223–242
//! (covariance from past draws, scale 2.38²/d). Roberts, G. O., Gelman, A. & Gilks, W. R.
//! (1997), Ann. Appl. Probab. 7(1), 110–120 (acceptance rate 0.234).

use super::chain::{
    covariance, initial_point, run_chains, Chain, ChainState, Restart, SamplerParams, Termination,
};
use super::posterior::LogPosterior;
use crate::progress::Observer;
use ndarray::Array2;
use ndarray_linalg::{Cholesky, UPLO};
use rand::Rng;
use rand_distr::StandardNormal;
use std::sync::atomic::{AtomicBool, Ordering};

/// Target acceptance rate of the scale adaptation.
const TARGET_ACCEPT: f64 = 0.234;
/// First adaptation window; later windows double.
const FIRST_WINDOW: usize = 50;
/// Added to the tuned covariance so it stays positive definite.
const COV_REGULARISER: f64 = 1e-10;
/// Fraction by which the off-diagonal covariances of the warm-up windows before the last
/// are shrunk. A correlation of −0.9998 (seen from a transient) becomes −0.99, so the
/// proposal spreads at least ~0.1 sd across the line; on a posterior with correlation
/// 0.97 the last window is unaffected and the kept draws lose no efficiency.
const CORRELATION_SHRINK: f64 = 0.01;

/// One adaptive-Metropolis chain that can be extended: its random stream, position,
/// tuned proposal and kept draws.
#[derive(Clone)]
struct AmChain {
    rng: rand_chacha::ChaCha20Rng,
    z: Vec<f64>,
    lp: f64,
    chol: Array2<f64>,
    ln_scale: f64,
    window: Vec<Vec<f64>>,
    window_len: usize,
    window_start: usize,
    window_accepted: usize,
    next_window_end: usize,
    /// Iterations done (warm-up included).
    t: usize,
    accepted: usize,
    chain: Chain,
}

impl AmChain {
    /// Warm-up: Robbins–Monro on the scale, covariance at the end of each window.
    fn tune(&mut self, t: usize, warmup: usize, accept: bool, accept_prob: f64, d: usize) {
        // The step size restarts with each window so a badly scaled start is corrected
        // quickly.
        let gamma = 1.0 / ((t + 1 - self.window_start) as f64).powf(0.6);
        self.ln_scale += gamma * (accept_prob - TARGET_ACCEPT);
        if accept {
            self.window_accepted += 1;
        }
        self.window.push(self.z.clone());
        if t + 1 == self.next_window_end && t + 1 < warmup {
            // Covariance of the latter half of the window (the early part may still be
            // travelling from the starting point), if the chain moved enough to
            // estimate it.
            let half = &self.window[self.window.len() / 2..];
            if self.window_accepted > 4 * d + 4 {
                let mut c = covariance(half, d);
                // Before the last window, shrink the correlations a little: a window spent
                // travelling from the start (e.g. a mean and a noise variance falling
                // together) gives a nearly singular estimate, and proposals along that one
                // line would never find the other directions. The last estimate, made
                // while the chain mixes, is used as it is.
                let last = t + 1 + 2 * self.window_len >= warmup;
                let keep = if last { 1.0 } else { 1.0 - CORRELATION_SHRINK };
                for a in 0..d {
                    for b in 0..d {
                        if a != b {
                            c[[a, b]] *= keep;
                        }
                    }
                    c[[a, a]] += COV_REGULARISER;
                }
                if let Ok(l) = c.cholesky(UPLO::Lower) {
                    self.chol = l;
                    self.ln_scale = (2.38 / (d as f64).sqrt()).ln();
                }
            }
            self.window.clear();
            self.window_accepted = 0;
            self.window_start = t + 1;
            self.window_len *= 2;
            self.next_window_end = t + 1 + self.window_len;
        }
    }
}

/// Run the adaptive Metropolis sampler, chains in parallel; chain i uses random stream
/// i of `params.seed`, so the draws do not depend on the number of threads.
pub(crate) fn sample(
    post: &LogPosterior<'_>,
    params: &SamplerParams,
    stop: &AtomicBool,
    observer: &dyn Observer,
) -> Vec<Chain> {
    run_chains::<AmChain>(post, params, stop, observer)
}

impl ChainState for AmChain {
    fn start(post: &LogPosterior<'_>, seed: u64, index: usize, n_chains: usize) -> Self {
        let d = post.dim();
        let mut rng = crate::rng::stream(seed, index as u64);
        let z = post.to_unconstrained(&initial_point(post, &mut rng, index, n_chains));
        let lp = post.ln_density(&z);
        Self {
            rng,
            z,
            lp,
            chol: Array2::<f64>::eye(d) * 0.1,
            ln_scale: (2.38 / (d as f64).sqrt()).ln(),
            window: Vec::new(),
            window_len: FIRST_WINDOW,
            window_start: 0,
            window_accepted: 0,
            next_window_end: FIRST_WINDOW,
            t: 0,
            accepted: 0,
            chain: Chain::new(index),
        }
    }

    /// Run until `until` iterations (warm-up included) are done, or a stop request.
    fn advance(
        &mut self,
        post: &LogPosterior<'_>,
        warmup: usize,
        until: usize,
        stop: &AtomicBool,
        observer: &dyn Observer,
    ) {
        let d = post.dim();
        let mut eps = vec![0.0; d];
        while self.t < until {
            let t = self.t;
            if stop.load(Ordering::Relaxed) {
                self.chain.termination = Termination::Interrupted;
                break;
            }
            for e in eps.iter_mut() {
                *e = self.rng.sample(StandardNormal);
            }
            let scale = self.ln_scale.exp();
            let chol = &self.chol;
            let z = &self.z;
            let proposal: Vec<f64> = (0..d)
                .map(|a| z[a] + scale * (0..=a).map(|b| chol[[a, b]] * eps[b]).sum::<f64>())
                .collect();
            let lp_new = post.ln_density(&proposal);
            let ln_ratio = lp_new - self.lp;
            let accept_prob = if ln_ratio.is_nan() {
                0.0
            } else {
                ln_ratio.min(0.0).exp()
            };
            let u: f64 = self.rng.gen();
            let accept = u < accept_prob;
            if accept {
                self.z = proposal;
                self.lp = lp_new;
            }
            if t < warmup {
                self.tune(t, warmup, accept, accept_prob, d);
            } else {
                if accept {
                    self.accepted += 1;
                }
                self.chain.keep(post, &self.z, self.lp);
            }
            self.t += 1;
            if self.t % 100 == 0 {
                observer.advance(100, "");
            }
        }
        let kept = self.chain.theta.len().max(1);
        self.chain.acceptance_rate = self.accepted as f64 / kept as f64;
        self.chain.step_scale = self.ln_scale.exp();
    }

    fn lp(&self) -> f64 {
        self.lp
    }

    /// Take over `donor`'s position, density and tuning (not its random stream or draws).
    fn adopt(&mut self, donor: &AmChain, gap: f64) {
        self.z.clone_from(&donor.z);
        self.lp = donor.lp;
        self.chol.clone_from(&donor.chol);
        self.ln_scale = donor.ln_scale;
        self.window.clone_from(&donor.window);
        self.window_len = donor.window_len;
        self.window_start = donor.window_start;
        self.window_accepted = donor.window_accepted;
        self.next_window_end = donor.next_window_end;
        self.chain.restarted_from = Some(Restart {
            from: donor.chain.index,
            gap,
        });
    }

    fn chain(&self) -> &Chain {
        &self.chain
    }
}
