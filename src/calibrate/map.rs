//! The joint posterior mode (MAP) that fixes the model-discrepancy hyperparameters
//! before θ is sampled (`calibration.discrepancy.hyperparameters: map`).
//!
//! Input: a [`LogPosterior`] whose discrepancy hyperparameters (sd s, length-scale ℓ)
//! are sampled under their priors. Output: a [`MapEstimate`], the point
//! x̂ = (θ̂, σ̂², ŝ, ℓ̂) that maximises the joint posterior density ln p(x | y) on the
//! constrained scale (θ in its own units, σ², s, ℓ; no Jacobian), and, through
//! [`with_fixed_discrepancy`], the experiments' likelihoods with s and ℓ fixed at
//! x̂, ready for the sampler.
//! Must not: open files, print, or make random streams other than those of the
//! recorded seed ([`MAP_STREAM_BASE`]).
//!
//! # Formula
//! x̂ = argmax_x [ln p(θ) + Σ_k ln p(σ_k²) + Σ_h ln p(h) + Σ_k ln L_k(θ, σ_k², h)],
//! the sum [`LogPosterior::ln_posterior`] evaluates (δ itself is integrated out of
//! L_k, so the density is bounded and its mode well defined). The search runs on the
//! unconstrained coordinates z = (logit θ, ln σ², ln s, ln ℓ) of the sampler, *without*
//! the Jacobian: a change of coordinates moves no maximum of a function, while adding
//! the Jacobian would move it to the mode of the density of z.
//!
//! The optimiser is Nelder–Mead (argmin's `NelderMead`), restarted from its own
//! result with a fresh simplex until a restart gains less than [`RESTART_GAIN`]
//! (restarting "at a point where it claims to have found a minimum" is the advice of
//! Press et al. 2007 §10.5, quoted from memory), from [`MAP_STARTS`] starting points:
//! θ chosen as the sampler chooses its chains' (the best of prior draws and the
//! surrogate's training points), the hyperparameters spread over their priors; the
//! best end point wins. Every evaluation is counted.
//!
//! # References
//! Kennedy, M. C. & O'Hagan, A. (2001), Bayesian calibration of computer models, JRSS B
//! 63(3), 425–464, §4 (the hyperparameters are estimated first and then fixed, *from
//! memory*). Liu, F., Bayarri, M. J. & Berger, J. O. (2009), Modularization in Bayesian
//! analysis, with emphasis on analysis of computer models, Bayesian Analysis 4(1),
//! 119–150. Nelder, J. A. & Mead, R. (1965), A simplex method for function
//! minimization, The Computer Journal 7(4), 308–313. Press, W. H., Teukolsky, S. A.,
//! Vetterling, W. T. & Flannery, B. P. (2007), Numerical Recipes, 3rd ed., Cambridge
//! University Press, §10.5 *(section from memory)*.

use super::chain::initial_point;
use super::emulator::Emulator;
use super::likelihood::ExperimentLikelihood;
use super::posterior::LogPosterior;
use argmin::core::{CostFunction, Executor, State};
use argmin::solver::neldermead::NelderMead;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::sync::atomic::Ordering;

/// Starting points of the search. Each start takes θ (and noise variances) from the
/// best of the sampler's candidates (16 prior draws and a share of the training
/// points), and its discrepancy hyperparameters from a Latin hypercube over their
/// priors' quantiles: with 8 starts each hyperparameter starts once in each eighth of
/// its prior, so a mode at a short length-scale, whose basin prior draws rarely reach
/// (the lognormal default puts 2.5 % below a seventh of its median), is still searched.
/// Common practice: several over-dispersed starts, the best end kept; a disagreement
/// between them is reported.
pub const MAP_STARTS: usize = 8;

/// Start k draws from random stream `MAP_STREAM_BASE + k` of the calibration seed, and
/// the Latin hypercube of the hyperparameters' starts from stream
/// `MAP_STREAM_BASE + 2³²`: past the chains' streams (0, 1, …) and the checks'
/// (2⁴⁰ + k), so the search shares no random numbers with either.
pub const MAP_STREAM_BASE: u64 = 1 << 41;

/// A Nelder–Mead run stops when the standard deviation of the objective over the
/// simplex falls below this (nats): far below anything that moves the posterior of θ,
/// and above most of the rounding noise of a log posterior evaluated through a
/// surrogate (on the cantilever example, 10⁻¹⁰ sent many runs to their iteration limit).
pub const SD_TOLERANCE: f64 = 1e-9;

/// The search from a start has converged when a restart improves the log posterior by
/// less than this (nats): the point is stable under a fresh simplex.
pub const RESTART_GAIN: f64 = 1e-7;

/// Most Nelder–Mead runs per start (the first and its restarts).
pub const MAX_RUNS: usize = 8;

/// Side of the first simplex on the unconstrained scale: half a unit of logit θ or of
/// ln s, ln ℓ, ln σ² (a factor e^0.5 ≈ 1.65 for the positive quantities).
const FIRST_STEP: f64 = 0.5;
/// Side of the simplex of every restart.
const RESTART_STEP: f64 = 0.1;

/// Box of the search on logit θ: |z| ≤ 25 is within 1.4·10⁻¹¹ of the range's ends
/// relative to its width (the sampler's map clamps at 10⁻¹²).
const THETA_Z_MAX: f64 = 25.0;
/// Box of the search on ln s, ln ℓ: the prior's scale (half-normal τ, lognormal
/// median) times e^{±14} ≈ 1.2·10^{±6}: below, δ is nothing; above, a constant.
const LN_HYPER_SPAN: f64 = 14.0;
/// Box on ln σ² around the inverse-gamma prior's mode β/(α + 1): σ within ×e^{±14}.
const LN_NOISE_VAR_SPAN: f64 = 28.0;
/// Outside the box the objective is evaluated at the nearest point of the box plus
/// this times the squared distance, so the simplex is pulled back.
const PENALTY: f64 = 1e3;

/// Nelder–Mead iterations allowed per run for `n` unknowns. Measured on the cantilever
/// example with `hyperparameters: map` (n = 6): runs met [`SD_TOLERANCE`] after 120 to
/// 1,050 iterations, and the few that did not (the surrogate's rounding keeps the
/// simplex's spread above it near the mode) stop here, at a point as good as the
/// others' to 10⁻⁸ nats.
fn max_iters(n: usize) -> u64 {
    1000 + 500 * n as u64
}

/// Settings of the search.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct MapParams {
    pub n_starts: usize,
    /// The calibration seed; start k uses stream [`MAP_STREAM_BASE`] + k.
    pub seed: u64,
}

impl MapParams {
    /// [`MAP_STARTS`] starts from `seed`.
    pub fn new(seed: u64) -> Self {
        Self {
            n_starts: MAP_STARTS,
            seed,
        }
    }
}

/// Why the search from one start ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum MapTermination {
    /// A restart gained less than [`RESTART_GAIN`].
    Converged,
    /// [`MAX_RUNS`] runs kept improving.
    MaxIterations,
    /// No starting candidate had a finite log posterior.
    NoFiniteStart,
}

/// The end of the search from one start.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct MapStart {
    /// ln p(x | y) + const at its end point (−∞ without a finite start).
    pub ln_posterior: f64,
    pub termination: MapTermination,
    /// Nelder–Mead runs (the first and its restarts).
    pub n_runs: usize,
}

/// The joint posterior mode.
#[derive(Debug, Clone, PartialEq)]
pub struct MapEstimate {
    /// The mode on the constrained scale, in the state order of the posterior it was
    /// found for: θ, estimated noise variances, sampled discrepancy hyperparameters.
    pub x: Vec<f64>,
    /// ln p(x̂ | y) + const, as the samples' `log_posterior` (normalising constants of
    /// the priors left out).
    pub ln_posterior: f64,
    /// Every start, in order.
    pub starts: Vec<MapStart>,
    /// The start whose end point is the mode (the first on ties).
    pub best_start: usize,
    /// Evaluations of the log posterior, starting candidates included.
    pub n_evaluations: u64,
}

/// Why no mode was found.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum MapError {
    /// Every start's candidates had a log posterior of −∞ or NaN.
    NoFiniteStart { n_starts: usize },
}

impl std::fmt::Display for MapError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            MapError::NoFiniteStart { n_starts } => write!(
                f,
                "the search for the posterior mode of the discrepancy hyperparameters found no starting point with a finite log posterior in {n_starts} starts: check the field data against the surrogate's outputs, or use `hyperparameters: sampled`"
            ),
        }
    }
}

impl std::error::Error for MapError {}

/// −ln p(x(z) | y) on the box, with the penalty outside it.
struct Objective<'p, 'a> {
    post: &'p LogPosterior<'a>,
    lo: Vec<f64>,
    hi: Vec<f64>,
}

impl Objective<'_, '_> {
    fn clamp(&self, z: &[f64]) -> Vec<f64> {
        z.iter()
            .zip(self.lo.iter().zip(&self.hi))
            .map(|(v, (lo, hi))| v.clamp(*lo, *hi))
            .collect()
    }

    fn eval(&self, z: &[f64]) -> f64 {
        let inside = self.clamp(z);
        let penalty: f64 = z
            .iter()
            .zip(&inside)
            .map(|(a, b)| PENALTY * (a - b) * (a - b))
            .sum();
        self.post.n_evaluations.fetch_add(1, Ordering::Relaxed);
        let lp = self.post.ln_posterior(&self.post.to_constrained(&inside));
        if lp.is_nan() {
            f64::INFINITY
        } else {
            -lp + penalty
        }
    }
}

impl CostFunction for Objective<'_, '_> {
    type Param = Vec<f64>;
    type Output = f64;
    fn cost(&self, z: &Vec<f64>) -> Result<f64, argmin::core::Error> {
        Ok(self.eval(z))
    }
}

/// The box of the search on z, per coordinate of the state.
fn search_box(post: &LogPosterior<'_>) -> (Vec<f64>, Vec<f64>) {
    let mut centre = vec![0.0; post.n_parameters()];
    let mut span = vec![THETA_Z_MAX; post.n_parameters()];
    for p in post.noise_priors() {
        centre.push((p.scale / (p.shape + 1.0)).ln());
        span.push(LN_NOISE_VAR_SPAN);
    }
    for (_, _, _, h) in post.discrepancy_labels() {
        centre.push(h.reference().ln());
        span.push(LN_HYPER_SPAN);
    }
    let lo = centre.iter().zip(&span).map(|(c, s)| c - s).collect();
    let hi = centre.iter().zip(&span).map(|(c, s)| c + s).collect();
    (lo, hi)
}

/// One Nelder–Mead run from `z0` with a simplex of side `step` (stepping inwards where
/// `z0` is near the box's upper end), until [`SD_TOLERANCE`] or [`max_iters`]: its best
/// point and cost (`z0`'s when nothing better was found).
fn nelder_mead(obj: &Objective<'_, '_>, z0: &[f64], step: f64) -> (Vec<f64>, f64) {
    let n = z0.len();
    let mut simplex = vec![z0.to_vec()];
    for i in 0..n {
        let mut v = z0.to_vec();
        v[i] += if v[i] + step > obj.hi[i] { -step } else { step };
        simplex.push(v);
    }
    let start_cost = obj.eval(z0);
    let problem = Objective {
        post: obj.post,
        lo: obj.lo.clone(),
        hi: obj.hi.clone(),
    };
    let solver = NelderMead::new(simplex)
        .with_sd_tolerance(SD_TOLERANCE)
        .expect("the tolerance is positive");
    let run = Executor::new(problem, solver)
        .configure(|s| s.max_iters(max_iters(n)))
        .timer(false)
        .run();
    match run {
        Ok(res) => {
            let state = res.state();
            match state.get_best_param() {
                Some(z) if state.get_best_cost() <= start_cost => {
                    (z.clone(), state.get_best_cost())
                }
                _ => (z0.to_vec(), start_cost),
            }
        }
        // The objective never fails; an error of the solver leaves the start as it was.
        Err(_) => (z0.to_vec(), start_cost),
    }
}

/// Find the joint posterior mode of `post` (see the module documentation).
///
/// # Errors
/// [`MapError::NoFiniteStart`] when no start has a finite log posterior.
pub fn find_map(post: &LogPosterior<'_>, params: &MapParams) -> Result<MapEstimate, MapError> {
    crate::init_blas();
    let before = post.n_evaluations.load(Ordering::Relaxed);
    let (lo, hi) = search_box(post);
    let obj = Objective { post, lo, hi };
    let n_starts = params.n_starts.max(1);
    let hypers: Vec<_> = post.discrepancy_labels().into_iter().map(|l| l.3).collect();
    let strata = crate::design::latin_hypercube(
        n_starts,
        hypers.len(),
        &mut crate::rng::stream(params.seed, MAP_STREAM_BASE + (1 << 32)),
    );
    let first_hyper = post.dim() - hypers.len();
    let ends: Vec<(Vec<f64>, f64, MapStart)> = (0..n_starts)
        .into_par_iter()
        .map(|k| {
            let mut rng = crate::rng::stream(params.seed, MAP_STREAM_BASE + k as u64);
            let mut x0 = initial_point(post, &mut rng, k, n_starts);
            for (j, h) in hypers.iter().enumerate() {
                x0[first_hyper + j] = h.quantile(strata[[k, j]]);
            }
            let mut z = obj.clamp(&post.to_unconstrained(&x0));
            let mut f = obj.eval(&z);
            if !f.is_finite() {
                let start = MapStart {
                    ln_posterior: f64::NEG_INFINITY,
                    termination: MapTermination::NoFiniteStart,
                    n_runs: 0,
                };
                return (z, f, start);
            }
            let mut termination = MapTermination::MaxIterations;
            let mut n_runs = 0;
            while n_runs < MAX_RUNS {
                let step = if n_runs == 0 {
                    FIRST_STEP
                } else {
                    RESTART_STEP
                };
                let (z1, f1) = nelder_mead(&obj, &z, step);
                n_runs += 1;
                let gain = f - f1;
                if f1 < f {
                    z = z1;
                    f = f1;
                }
                if n_runs > 1 && gain < RESTART_GAIN {
                    termination = MapTermination::Converged;
                    break;
                }
            }
            let z = obj.clamp(&z);
            let lp = post.ln_posterior(&post.to_constrained(&z));
            let start = MapStart {
                ln_posterior: lp,
                termination,
                n_runs,
            };
            (z, -lp, start)
        })
        .collect();
    let best = (0..ends.len())
        .filter(|&k| ends[k].2.termination != MapTermination::NoFiniteStart)
        .min_by(|&a, &b| ends[a].1.total_cmp(&ends[b].1).then(a.cmp(&b)))
        .ok_or(MapError::NoFiniteStart { n_starts })?;
    let x = post.to_constrained(&ends[best].0);
    let ln_posterior = ends[best].2.ln_posterior;
    Ok(MapEstimate {
        x,
        ln_posterior,
        starts: ends.iter().map(|e| e.2).collect(),
        best_start: best,
        n_evaluations: post.n_evaluations.load(Ordering::Relaxed) - before,
    })
}

/// The experiments of `post` with their sampled discrepancy hyperparameters fixed at
/// their values in the state `x` (constrained scale, `post`'s state order): what the
/// sampler uses once the mode is found. Experiments without sampled hyperparameters are
/// returned as they are.
pub fn with_fixed_discrepancy<'a>(
    post: &LogPosterior<'a>,
    x: &[f64],
) -> Vec<(&'a dyn Emulator, ExperimentLikelihood)> {
    let (_, _, disc) = post.split_state(x.to_vec());
    post.experiments
        .iter()
        .enumerate()
        .map(|(k, (em, lik))| {
            let lik = match lik.discrepancy() {
                Some(d) if d.n_sampled() > 0 => lik
                    .clone()
                    .with_discrepancy(d.fixed_at(post.discrepancy_of(k, &disc))),
                _ => lik.clone(),
            };
            (*em, lik)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::calibrate::discrepancy::{Discrepancy, DiscrepancyBlock, Hyper};
    use crate::study::{Parameter, Prior};
    use crate::surrogate::Kernel;

    /// A scalar quantity measured twice (one offset δ shared by both, noise sd 1):
    /// with θ the mean, ȳ the data mean and r = ȳ − θ, the log posterior in s is
    /// −s²/(2τ²) − ½ ln(s² + ½) − r²/(2(s² + ½)) (two replicates: the mean has variance
    /// ½ + s²; Gelman et al. 2013 §2.5, normal mean with known variance). With a flat
    /// prior on θ the joint mode puts θ = ȳ (r = 0) and then s = 0: the search must go
    /// to the lower end of its box in s, not stop in the middle.
    #[test]
    fn the_mode_of_an_unneeded_discrepancy_is_at_zero() {
        let d = Discrepancy {
            kernel: Kernel::SquaredExponential,
            blocks: vec![DiscrepancyBlock {
                quantity: "y".into(),
                index: vec![0],
                x: None,
                sd: Hyper::HalfNormal { scale: 1.0 },
                length_scale: None,
                at: None,
            }],
        };
        let lik = ExperimentLikelihood::from_values("e", &[vec![0.3, 0.5]], &[vec![1.0, 1.0]])
            .with_discrepancy(d);
        struct One;
        impl Emulator for One {
            fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
                (vec![theta[0]], vec![0.0])
            }
        }
        let em = One;
        let post = LogPosterior::new(
            vec![Parameter {
                name: "t".into(),
                unit: None,
                lo: -5.0,
                hi: 5.0,
                prior: Prior::Uniform,
            }],
            vec![(&em as &dyn Emulator, lik)],
        );
        let est = find_map(&post, &MapParams::new(3)).expect("a mode");
        assert!((est.x[0] - 0.4).abs() < 1e-4, "θ̂ = {}", est.x[0]);
        assert!(est.x[1] < 1e-3, "ŝ = {}", est.x[1]);
        let fixed = with_fixed_discrepancy(&post, &est.x);
        assert_eq!(fixed[0].1.n_discrepancy(), 0);
    }
}
