//! What every sampler shares: the settings ([`SamplerParams`]), a chain's kept draws
//! ([`Chain`], [`Restart`], [`Termination`]), the starting point of a chain
//! ([`initial_point`]), the convergence check that decides whether to extend sampling
//! ([`converged`], [`next_target`]), and the runner of independent chains
//! ([`run_chains`] over the [`ChainState`] trait, with the rescue of stranded chains
//! halfway through warm-up).
//!
//! Input: a [`LogPosterior`], the settings, a stop flag and a progress observer.
//! Output: the chains' draws. The samplers (adaptive Metropolis, ensemble, No-U-Turn)
//! build on this file, so it must not import any of them.
//! Must not: open files, print, or create its own RNG (each chain's stream comes from
//! the seed).

use super::diagnostics::{Diagnostics, ESS_WARN, RHAT_WARN};
use super::posterior::LogPosterior;
use super::prior::ln_prior;
use crate::progress::Observer;
use crate::study::spec::SamplerChoice;
use crate::study::Prior;
use ndarray::{Array1, Array2};
use rand::Rng;
use rand_distr::StandardNormal;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::sync::atomic::AtomicBool;

/// Settings of the sampler.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SamplerParams {
    /// Chains of the adaptive Metropolis sampler.
    pub chains: usize,
    pub warmup: usize,
    /// Kept draws per chain (per walker for the ensemble).
    pub draws: usize,
    pub seed: u64,
    pub kind: SamplerChoice,
    /// Walkers of the ensemble sampler (`None`: the default for the dimension).
    pub walkers: Option<usize>,
    /// `Some(max kept draws per chain)`: extend sampling until converged.
    pub until_converged: Option<usize>,
}

impl SamplerParams {
    /// The classic settings: adaptive Metropolis, a fixed number of draws.
    pub fn metropolis(chains: usize, warmup: usize, draws: usize, seed: u64) -> Self {
        Self {
            chains,
            warmup,
            draws,
            seed,
            kind: SamplerChoice::AdaptiveMetropolis,
            walkers: None,
            until_converged: None,
        }
    }
}

/// Why a chain stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Termination {
    /// All requested draws were made.
    MaxDraws,
    /// Stopped early on request (Ctrl-C); the draws so far are kept.
    Interrupted,
}

/// The kept draws of one chain.
#[derive(Debug, Clone)]
pub struct Chain {
    pub index: usize,
    /// Draws in parameter space, one row per draw.
    pub theta: Vec<Vec<f64>>,
    /// Estimated noise variances σ² of each draw, in [`LogPosterior::noise_names`]
    /// order (empty rows when no noise is estimated).
    pub noise_var: Vec<Vec<f64>>,
    /// Sampled discrepancy hyperparameters of each draw, in
    /// [`LogPosterior::discrepancy_labels`] order (empty rows without them).
    pub discrepancy: Vec<Vec<f64>>,
    /// ln p(θ, σ² | y) + const of each draw (constrained scale, no Jacobian).
    pub ln_posterior: Vec<f64>,
    /// Fraction of accepted proposals after warm-up.
    pub acceptance_rate: f64,
    /// Final proposal scale λ (multiplies the Cholesky factor of the tuned covariance).
    pub step_scale: f64,
    pub termination: Termination,
    /// The chain whose warm-up state this one took over halfway through warm-up,
    /// because it was stranded far below it ([`STRANDED_GAP`]).
    pub restarted_from: Option<Restart>,
    /// Divergent trajectories after warm-up (the No-U-Turn sampler; 0 for the others).
    pub divergences: usize,
}

/// A stranded chain moved to another chain's position halfway through warm-up.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Restart {
    /// The chain it took the state of.
    pub from: usize,
    /// How far its log density lay below that chain's.
    pub gap: f64,
}

impl Chain {
    /// An empty chain.
    pub(crate) fn new(index: usize) -> Self {
        Self {
            index,
            theta: Vec::new(),
            noise_var: Vec::new(),
            discrepancy: Vec::new(),
            ln_posterior: Vec::new(),
            acceptance_rate: 0.0,
            step_scale: 0.0,
            termination: Termination::MaxDraws,
            restarted_from: None,
            divergences: 0,
        }
    }

    /// Keep the draw at unconstrained `z` whose target density is `lp`.
    pub(crate) fn keep(&mut self, post: &LogPosterior<'_>, z: &[f64], lp: f64) {
        let (theta, noise, disc) = post.split_state(post.to_constrained(z));
        self.ln_posterior.push(lp - post.ln_jacobian(z));
        self.theta.push(theta);
        self.noise_var.push(noise);
        self.discrepancy.push(disc);
    }
}

/// Halfway through warm-up, a chain whose log density lies more than this plus the
/// dimension below the best chain's is stranded: it takes over the best chain's position
/// and tuned proposal (keeping its own random stream) and warms up again from there.
///
/// Why: a surrogate's predictive variance and the mean's reversion to its trend far from
/// the runs can make small local maxima of the likelihood far from the main mode (after
/// refinement has put many runs near the posterior, especially), and a random-walk chain
/// started in one never leaves it. A gap of 50 + d nats is no posterior mass to speak of
/// (e^−50 ≈ 2·10⁻²² relative density), while the log density of draws from a unimodal
/// d-dimensional posterior spreads as χ²_d/2, whose 1 − 10⁻⁹ quantile stays below 25 + d
/// for every d (so a chain that is only exploring its tail is never moved). Chains that
/// share a real mode, or modes within the gap, are left alone, so R̂ still shows them.
/// Moving stranded walkers to good ones is common practice with ensemble samplers; this
/// applies it once, during warm-up, to the adaptive Metropolis chains.
pub const STRANDED_GAP: f64 = 50.0;

/// Candidate starting points drawn per chain; the chain starts at the best of them.
/// A surrogate's predictive variance grows towards the corners of the parameter box,
/// and there the likelihood can have small local modes (the variance grows faster than
/// the mean's misfit) far below the main one but separated from it by a deep valley; a
/// chain started in one can stay there for the whole run. Starting at the best of a few
/// prior draws avoids them (common practice: several over-dispersed candidates, the
/// best kept).
pub const N_START_CANDIDATES: usize = 16;

/// Draw a starting point for chain `index` of `n_chains`: [`N_START_CANDIDATES`]
/// candidates with parameters from their prior (truncated to the range), then the
/// [`LogPosterior::start_candidates`] with index ≡ `index` (mod `n_chains`) — the
/// surrogate's training points, so that a posterior concentrated in a small corner of a
/// wide box (where prior draws rarely land) is found, while different chains still
/// start from different points. Each candidate's estimated noise variances are drawn
/// from their conditional posterior at its parameters. Keep the candidate with the
/// highest target density (the first on ties). Every candidate's density counts as an
/// evaluation.
pub(crate) fn initial_point<R: Rng + ?Sized>(
    post: &LogPosterior<'_>,
    rng: &mut R,
    index: usize,
    n_chains: usize,
) -> Vec<f64> {
    let mut best: Option<(Vec<f64>, f64)> = None;
    let own = post
        .start_candidates
        .iter()
        .skip(index)
        .step_by(n_chains.max(1))
        .cloned();
    let prior_draws: Vec<Vec<f64>> = (0..N_START_CANDIDATES)
        .map(|_| initial_theta(post, rng))
        .collect();
    for theta in prior_draws.into_iter().chain(own) {
        let mut x = theta;
        if post.n_noise() > 0 {
            let noise = post.initial_noise(&x, rng);
            x.extend(noise);
        }
        if post.n_discrepancy() > 0 {
            let disc = post.initial_discrepancy(rng);
            x.extend(disc);
        }
        let lp = post.ln_density(&post.to_unconstrained(&x));
        if best.as_ref().is_none_or(|(_, b)| lp > *b) {
            best = Some((x, lp));
        }
    }
    best.expect("at least one candidate").0
}

fn initial_theta<R: Rng + ?Sized>(post: &LogPosterior<'_>, rng: &mut R) -> Vec<f64> {
    post.parameters
        .iter()
        .map(|p| {
            for _ in 0..1000 {
                let x = match p.prior {
                    Prior::Uniform => p.lo + (p.hi - p.lo) * rng.gen::<f64>(),
                    Prior::Normal { mean, sd } => mean + sd * rng.sample::<f64, _>(StandardNormal),
                    Prior::LogNormal { mu, sigma } => {
                        (mu + sigma * rng.sample::<f64, _>(StandardNormal)).exp()
                    }
                };
                // Stay off the boundary, where the logit map is singular.
                let margin = 1e-6 * (p.hi - p.lo);
                if x > p.lo + margin && x < p.hi - margin && ln_prior(p, x).is_finite() {
                    return x;
                }
            }
            0.5 * (p.lo + p.hi)
        })
        .collect()
}

pub(crate) fn covariance(rows: &[Vec<f64>], d: usize) -> Array2<f64> {
    let n = rows.len() as f64;
    let mut mean = Array1::<f64>::zeros(d);
    for r in rows {
        for j in 0..d {
            mean[j] += r[j] / n;
        }
    }
    let mut c = Array2::<f64>::zeros((d, d));
    for r in rows {
        for a in 0..d {
            for b in 0..d {
                c[[a, b]] += (r[a] - mean[a]) * (r[b] - mean[b]) / (n - 1.0);
            }
        }
    }
    c
}

/// Whether every parameter meets the convergence targets: R-hat ≤ [`RHAT_WARN`] and
/// bulk and tail ESS ≥ [`ESS_WARN`] (the thresholds of the warnings).
pub fn converged(chains: &[Chain]) -> bool {
    let Some(first) = chains.first() else {
        return false;
    };
    let d = first.theta.first().map_or(0, Vec::len);
    (0..d).all(|j| {
        let per: Vec<Vec<f64>> = chains
            .iter()
            .map(|c| c.theta.iter().map(|r| r[j]).collect())
            .collect();
        let dg = Diagnostics::of(&per);
        dg.rhat <= RHAT_WARN && dg.ess_bulk >= ESS_WARN && dg.ess_tail >= ESS_WARN
    })
}

/// How many kept draws per chain the next round of sampling should reach, or `None`
/// when sampling is over.
pub(crate) fn next_target(params: &SamplerParams, have: usize, chains: &[Chain]) -> Option<usize> {
    let max = params.until_converged?;
    if have >= max
        || chains
            .iter()
            .any(|c| c.termination == Termination::Interrupted)
    {
        return None;
    }
    if converged(chains) {
        return None;
    }
    Some((have + params.draws).min(max))
}

/// Move every chain stranded more than [`STRANDED_GAP`] + `d` below the best chain to
/// the best chain's state (the lowest index on ties): `lp` reads a chain's log density,
/// `adopt` moves a chain to the donor's state given the gap. Deterministic: depends only
/// on the chains' states, not on the thread count.
pub(crate) fn rescue_stranded<T: Clone>(
    states: &mut [T],
    d: usize,
    lp: impl Fn(&T) -> f64,
    adopt: impl Fn(&mut T, &T, f64),
) {
    let Some(best) = (0..states.len())
        .filter(|&i| lp(&states[i]).is_finite())
        .max_by(|&a, &b| lp(&states[a]).total_cmp(&lp(&states[b])).then(b.cmp(&a)))
    else {
        return;
    };
    let donor = states[best].clone();
    for s in states.iter_mut() {
        let gap = lp(&donor) - lp(s);
        // NaN or −∞ (a chain that never found a finite density) is stranded too.
        let within = gap <= STRANDED_GAP + d as f64;
        if !within {
            adopt(s, &donor, gap);
        }
    }
}

/// A chain of a sampler that runs chains independently (adaptive Metropolis, NUTS).
pub(crate) trait ChainState: Clone + Send {
    fn start(post: &LogPosterior<'_>, seed: u64, index: usize, n_chains: usize) -> Self;
    /// Run until `until` iterations (warm-up included) are done, or a stop request.
    fn advance(
        &mut self,
        post: &LogPosterior<'_>,
        warmup: usize,
        until: usize,
        stop: &AtomicBool,
        observer: &dyn Observer,
    );
    /// The current log density.
    fn lp(&self) -> f64;
    /// Take over `donor`'s position and tuning (not its random stream or draws).
    fn adopt(&mut self, donor: &Self, gap: f64);
    fn chain(&self) -> &Chain;
}

/// Run `params.chains` chains of type `T` in parallel: half the warm-up, the rescue of
/// stranded chains, the rest, then extensions while `until_converged` asks for them.
/// Chain i uses random stream i of `params.seed`, so the draws do not depend on the
/// number of threads.
pub(crate) fn run_chains<T: ChainState>(
    post: &LogPosterior<'_>,
    params: &SamplerParams,
    stop: &AtomicBool,
    observer: &dyn Observer,
) -> Vec<Chain> {
    let mut total = params.warmup + params.draws;
    observer.start("MCMC", (params.chains * total) as u64);
    let half = params.warmup / 2;
    let mut states: Vec<T> = (0..params.chains)
        .into_par_iter()
        .map(|i| {
            let mut c = T::start(post, params.seed, i, params.chains);
            c.advance(post, params.warmup, half, stop, observer);
            c
        })
        .collect();
    if half > 0 {
        rescue_stranded(&mut states, post.dim(), T::lp, T::adopt);
    }
    states
        .par_iter_mut()
        .for_each(|c| c.advance(post, params.warmup, total, stop, observer));
    loop {
        let chains: Vec<Chain> = states.iter().map(|s| s.chain().clone()).collect();
        let Some(target) = next_target(params, total - params.warmup, &chains) else {
            break;
        };
        let extra = target + params.warmup - total;
        observer.note(&format!(
            "not converged after {} draws per chain: {extra} more per chain",
            total - params.warmup
        ));
        observer.start("MCMC more", (params.chains * extra) as u64);
        total += extra;
        states
            .par_iter_mut()
            .for_each(|c| c.advance(post, params.warmup, total, stop, observer));
    }
    observer.finish();
    states.into_iter().map(|s| s.chain().clone()).collect()
}
