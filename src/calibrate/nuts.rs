//! The No-U-Turn sampler: Hamiltonian Monte Carlo on the unconstrained z of
//! [`LogPosterior`], with the gradient of the surrogate-based log posterior.
//!
//! Each iteration draws a momentum p ~ N(0, M), M = Σ⁻¹, and integrates Hamilton's
//! equations for H(z, p) = −ln π(z) + ½ pᵀΣp with the leapfrog scheme, doubling the
//! trajectory forwards or backwards at random until it turns back on itself (the
//! generalised no-U-turn criterion, checked across the whole trajectory and between
//! its two halves at every level) or reaches 2^[`MAX_DEPTH`] steps; the next state is
//! drawn from the trajectory with weights e^(−H) (multinomial sampling, biased towards
//! the newer half). A step whose energy error exceeds [`DIVERGENCE`] ends the trajectory
//! and is counted as divergent.
//!
//! Warm-up tunes the step size ε by dual averaging towards a mean acceptance statistic
//! of [`TARGET_ACCEPT`], and the metric Σ (dense) from the covariance of the warm-up
//! draws in windows: a first buffer of 15 % (at most 75 iterations) with the unit
//! metric, doubling windows from 25 iterations, a last buffer of 10 % (at most 50) for
//! the step size alone. Each window's covariance is shrunk towards 10⁻³ I with weight
//! 5/(n + 5). Halfway through warm-up, chains stranded far below the best one take
//! over its state, as for the Metropolis chains
//! ([`STRANDED_GAP`](crate::calibrate::STRANDED_GAP)).
//!
//! The gradient comes from [`LogPosterior::ln_density_and_gradient`]: the Gaussian
//! processes' mean and variance derivatives, the likelihood's through the Woodbury
//! form. Each leapfrog step costs one evaluation with its gradient.
//!
//! # References
//! Hoffman, M. D. & Gelman, A. (2014), The No-U-Turn Sampler, JMLR 15, 1593–1623
//! (Algorithms 3 and 6; dual averaging with γ = 0.05, t₀ = 10, κ = 0.75, μ = ln 10ε₀).
//! Betancourt, M. (2017), A conceptual introduction to Hamiltonian Monte Carlo,
//! arXiv:1701.02434 (multinomial sampling, the generalised criterion; §A.4).
//! Neal, R. M. (2011), MCMC using Hamiltonian dynamics, Handbook of Markov Chain Monte
//! Carlo, ch. 5 (leapfrog, mass matrix). The window schedule and the shrinkage of the
//! metric follow the defaults of common open-source HMC implementations (common
//! practice, values from memory).

use super::chain::{
    covariance, initial_point, run_chains, Chain, ChainState, Restart, SamplerParams, Termination,
};
use super::hmc::{buffers, DualAveraging, Metric};
use super::posterior::LogPosterior;
use crate::progress::Observer;
use ndarray::Array2;
use ndarray_linalg::{Cholesky, UPLO};
use rand::Rng;
use std::sync::atomic::{AtomicBool, Ordering};

/// Mean acceptance statistic the step size is tuned towards.
pub const TARGET_ACCEPT: f64 = 0.8;
/// Largest tree depth: at most 2^10 = 1024 leapfrog steps per iteration.
pub const MAX_DEPTH: usize = 10;
/// Energy error beyond which a step is divergent.
pub const DIVERGENCE: f64 = 1000.0;

/// A point of phase space with the density's value and gradient at q.
#[derive(Clone)]
struct Point {
    q: Vec<f64>,
    p: Vec<f64>,
    lp: f64,
    grad: Vec<f64>,
}

fn ln_sum_exp(a: f64, b: f64) -> f64 {
    if a == f64::NEG_INFINITY {
        return b;
    }
    if b == f64::NEG_INFINITY {
        return a;
    }
    let m = a.max(b);
    m + ((a - m).exp() + (b - m).exp()).ln()
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

fn add(a: &[f64], b: &[f64]) -> Vec<f64> {
    a.iter().zip(b).map(|(x, y)| x + y).collect()
}

/// Whether the trajectory between ends with velocities `v_minus` and `v_plus` and
/// summed momentum `rho` still moves apart (Betancourt 2017, §A.4.2).
fn no_u_turn(v_minus: &[f64], v_plus: &[f64], rho: &[f64]) -> bool {
    dot(v_plus, rho) > 0.0 && dot(v_minus, rho) > 0.0
}

/// The ends of a subtree: momentum and velocity at the end nearer to the trajectory's
/// start (`beg`) and at the far end.
struct Ends {
    p_beg: Vec<f64>,
    v_beg: Vec<f64>,
    p_end: Vec<f64>,
    v_end: Vec<f64>,
}

/// One NUTS chain that can be extended.
#[derive(Clone)]
struct NutsChain {
    rng: rand_chacha::ChaCha20Rng,
    q: Vec<f64>,
    lp: f64,
    grad: Vec<f64>,
    eps: f64,
    metric: Metric,
    dual: DualAveraging,
    window: Vec<Vec<f64>>,
    window_len: usize,
    next_window_end: usize,
    t: usize,
    accept_sum: f64,
    chain: Chain,
}

/// State shared by the leaves of one trajectory.
struct Trajectory {
    h0: f64,
    n_leapfrog: usize,
    sum_accept: f64,
    divergent: bool,
}

impl NutsChain {
    fn eval(post: &LogPosterior<'_>, q: &[f64]) -> (f64, Vec<f64>) {
        let (lp, g) = post
            .ln_density_and_gradient(q)
            .expect("the sampler is only used with a gradient");
        if lp.is_nan() {
            (f64::NEG_INFINITY, g)
        } else {
            (lp, g)
        }
    }

    /// One leapfrog step of size `eps` (negative: backwards in time).
    fn leapfrog(&self, post: &LogPosterior<'_>, z: &mut Point, eps: f64) {
        for (p, g) in z.p.iter_mut().zip(&z.grad) {
            *p += 0.5 * eps * g;
        }
        let v = self.metric.velocity(&z.p);
        for (q, v) in z.q.iter_mut().zip(&v) {
            *q += eps * v;
        }
        let (lp, grad) = Self::eval(post, &z.q);
        z.lp = lp;
        z.grad = grad;
        if lp.is_finite() {
            for (p, g) in z.p.iter_mut().zip(&z.grad) {
                *p += 0.5 * eps * g;
            }
        }
    }

    fn hamiltonian(&self, z: &Point) -> f64 {
        let h = -z.lp + self.metric.kinetic(&z.p);
        if h.is_nan() {
            f64::INFINITY
        } else {
            h
        }
    }

    /// A first step size for the current metric: doubled or halved until the
    /// acceptance probability of one leapfrog step crosses 0.8 (Hoffman & Gelman 2014,
    /// Algorithm 4).
    fn find_step_size(&mut self, post: &LogPosterior<'_>) {
        let p = self.metric.draw_momentum(&mut self.rng);
        let start = Point {
            q: self.q.clone(),
            p,
            lp: self.lp,
            grad: self.grad.clone(),
        };
        let h0 = self.hamiltonian(&start);
        let delta = |c: &Self, eps: f64| {
            let mut z = start.clone();
            c.leapfrog(post, &mut z, eps);
            h0 - c.hamiltonian(&z)
        };
        let mut dh = delta(self, self.eps);
        let up = dh > TARGET_ACCEPT.ln();
        for _ in 0..100 {
            self.eps = if up { 2.0 * self.eps } else { 0.5 * self.eps };
            dh = delta(self, self.eps);
            if up != (dh > TARGET_ACCEPT.ln()) || !(1e-12..=1e6).contains(&self.eps) {
                break;
            }
        }
        self.eps = self.eps.clamp(1e-12, 1e6);
        self.dual = DualAveraging::new(self.eps, TARGET_ACCEPT);
    }

    /// Build a subtree of 2^depth leapfrog steps from `z` in direction `sign`; returns
    /// whether it is valid, with its proposal, ends, summed momentum and ln Σ e^(H₀ − H).
    #[allow(clippy::type_complexity)]
    fn build_tree(
        &mut self,
        post: &LogPosterior<'_>,
        z: &mut Point,
        depth: usize,
        sign: f64,
        traj: &mut Trajectory,
    ) -> (bool, Point, Ends, Vec<f64>, f64) {
        if depth == 0 {
            self.leapfrog(post, z, sign * self.eps);
            traj.n_leapfrog += 1;
            let h = self.hamiltonian(z);
            if h - traj.h0 > DIVERGENCE {
                traj.divergent = true;
            }
            let w = traj.h0 - h;
            traj.sum_accept += if w > 0.0 { 1.0 } else { w.exp() };
            let v = self.metric.velocity(&z.p);
            let ends = Ends {
                p_beg: z.p.clone(),
                v_beg: v.clone(),
                p_end: z.p.clone(),
                v_end: v,
            };
            return (!traj.divergent, z.clone(), ends, z.p.clone(), w);
        }
        let (ok1, prop1, ends1, rho1, lw1) = self.build_tree(post, z, depth - 1, sign, traj);
        if !ok1 {
            return (false, prop1, ends1, rho1, lw1);
        }
        let (ok2, prop2, ends2, rho2, lw2) = self.build_tree(post, z, depth - 1, sign, traj);
        let ends = Ends {
            p_beg: ends1.p_beg.clone(),
            v_beg: ends1.v_beg.clone(),
            p_end: ends2.p_end.clone(),
            v_end: ends2.v_end.clone(),
        };
        if !ok2 {
            return (false, prop2, ends, rho2, lw2);
        }
        let lw = ln_sum_exp(lw1, lw2);
        let take_second = lw2 > lw || self.rng.gen::<f64>() < (lw2 - lw).exp();
        let prop = if take_second { prop2 } else { prop1 };
        let rho = add(&rho1, &rho2);
        let ok = no_u_turn(&ends.v_beg, &ends.v_end, &rho)
            && no_u_turn(&ends1.v_beg, &ends2.v_beg, &add(&rho1, &ends2.p_beg))
            && no_u_turn(&ends1.v_end, &ends2.v_end, &add(&rho2, &ends1.p_end));
        (ok, prop, ends, rho, lw)
    }

    /// One NUTS transition from the current state; returns the acceptance statistic
    /// and whether the trajectory diverged.
    fn transition(&mut self, post: &LogPosterior<'_>) -> (f64, bool) {
        let p0 = self.metric.draw_momentum(&mut self.rng);
        let start = Point {
            q: self.q.clone(),
            p: p0.clone(),
            lp: self.lp,
            grad: self.grad.clone(),
        };
        let mut traj = Trajectory {
            h0: self.hamiltonian(&start),
            n_leapfrog: 0,
            sum_accept: 0.0,
            divergent: false,
        };
        let v0 = self.metric.velocity(&p0);
        let mut fwd = start.clone();
        let mut bck = start.clone();
        // Momentum and velocity at the forward and backward ends of the trajectory.
        let (mut p_ff, mut v_ff) = (p0.clone(), v0.clone());
        let (mut p_bb, mut v_bb) = (p0.clone(), v0);
        let mut rho = p0;
        let mut ln_weight = 0.0;
        let mut sample = start;
        for depth in 0..MAX_DEPTH {
            let forward = self.rng.gen::<f64>() > 0.5;
            let (ok, prop, ends, rho_sub, lw_sub) = if forward {
                self.build_tree(post, &mut fwd, depth, 1.0, &mut traj)
            } else {
                self.build_tree(post, &mut bck, depth, -1.0, &mut traj)
            };
            if !ok {
                break;
            }
            if lw_sub > ln_weight || self.rng.gen::<f64>() < (lw_sub - ln_weight).exp() {
                sample = prop;
            }
            ln_weight = ln_sum_exp(ln_weight, lw_sub);
            // The trajectory is now two parts: the old one and the new subtree. For each,
            // its summed momentum and the momentum and velocity at its inner end.
            let (rho_bck, rho_fwd, p_fwd_inner, v_fwd_inner, p_bck_inner, v_bck_inner);
            if forward {
                (rho_bck, rho_fwd) = (rho, rho_sub);
                (p_bck_inner, v_bck_inner) = (p_ff, v_ff);
                (p_fwd_inner, v_fwd_inner) = (ends.p_beg, ends.v_beg);
                (p_ff, v_ff) = (ends.p_end, ends.v_end);
            } else {
                (rho_bck, rho_fwd) = (rho_sub, rho);
                (p_fwd_inner, v_fwd_inner) = (p_bb, v_bb);
                (p_bck_inner, v_bck_inner) = (ends.p_beg, ends.v_beg);
                (p_bb, v_bb) = (ends.p_end, ends.v_end);
            }
            rho = add(&rho_bck, &rho_fwd);
            let persist = no_u_turn(&v_bb, &v_ff, &rho)
                && no_u_turn(&v_bb, &v_fwd_inner, &add(&rho_bck, &p_fwd_inner))
                && no_u_turn(&v_bck_inner, &v_ff, &add(&rho_fwd, &p_bck_inner));
            if !persist {
                break;
            }
        }
        self.q = sample.q;
        self.lp = sample.lp;
        self.grad = sample.grad;
        (
            traj.sum_accept / traj.n_leapfrog.max(1) as f64,
            traj.divergent,
        )
    }

    /// Set the metric to the shrunk covariance of the window's draws and start the step
    /// size's adaptation again from a fresh first guess.
    fn update_metric(&mut self, post: &LogPosterior<'_>) {
        let d = self.q.len();
        let n = self.window.len() as f64;
        if self.window.len() < 3 {
            return;
        }
        let c = covariance(&self.window, d);
        let shrunk = Array2::from_shape_fn((d, d), |(a, b)| {
            n / (n + 5.0) * c[[a, b]] + if a == b { 1e-3 * 5.0 / (n + 5.0) } else { 0.0 }
        });
        if let Ok(l) = shrunk.cholesky(UPLO::Lower) {
            self.metric = Metric {
                inv_mass: shrunk,
                chol: l,
            };
            self.find_step_size(post);
        }
    }
}

/// Run the No-U-Turn sampler, chains in parallel; chain i uses random stream i of
/// `params.seed`, so the draws do not depend on the number of threads.
///
/// # Panics
/// If the posterior has no gradient ([`LogPosterior::has_gradient`]); callers check.
pub fn sample(
    post: &LogPosterior<'_>,
    params: &SamplerParams,
    stop: &AtomicBool,
    observer: &dyn Observer,
) -> Vec<Chain> {
    assert!(
        post.has_gradient(),
        "the No-U-Turn sampler needs a gradient"
    );
    run_chains::<NutsChain>(post, params, stop, observer)
}

impl ChainState for NutsChain {
    fn start(post: &LogPosterior<'_>, seed: u64, index: usize, n_chains: usize) -> Self {
        let d = post.dim();
        let mut rng = crate::rng::stream(seed, index as u64);
        let q = post.to_unconstrained(&initial_point(post, &mut rng, index, n_chains));
        let (lp, grad) = post
            .ln_density_and_gradient(&q)
            .expect("the sampler is only used with a gradient");
        let mut c = Self {
            rng,
            q,
            lp,
            grad,
            eps: 1.0,
            metric: Metric::unit(d),
            dual: DualAveraging::new(1.0, TARGET_ACCEPT),
            window: Vec::new(),
            window_len: 25,
            next_window_end: 0,
            t: 0,
            accept_sum: 0.0,
            chain: Chain::new(index),
        };
        c.find_step_size(post);
        c
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
        let (first, last) = buffers(warmup);
        if self.t == 0 {
            self.next_window_end = first + self.window_len;
        }
        while self.t < until {
            if stop.load(Ordering::Relaxed) {
                self.chain.termination = Termination::Interrupted;
                break;
            }
            let t = self.t;
            let (accept, divergent) = self.transition(post);
            if t < warmup {
                self.eps = self.dual.update(accept);
                if t >= first && t < last {
                    self.window.push(self.q.clone());
                    let end = self.next_window_end.min(last);
                    if t + 1 == end {
                        self.update_metric(post);
                        self.window.clear();
                        self.window_len *= 2;
                        self.next_window_end = t + 1 + self.window_len;
                        // A window that would end within the next one's length is
                        // merged into it (it stretches to the last buffer).
                        if self.next_window_end + 2 * self.window_len > last {
                            self.next_window_end = last;
                        }
                    }
                }
                if t + 1 == warmup {
                    self.eps = self.dual.final_step();
                }
            } else {
                self.accept_sum += accept;
                if divergent {
                    self.chain.divergences += 1;
                }
                self.chain.keep(post, &self.q, self.lp);
            }
            self.t += 1;
            if self.t % 100 == 0 {
                observer.advance(100, "");
            }
        }
        let kept = self.chain.theta.len().max(1);
        self.chain.acceptance_rate = self.accept_sum / kept as f64;
        self.chain.step_scale = self.eps;
    }

    fn lp(&self) -> f64 {
        self.lp
    }

    /// Take over `donor`'s position and tuning (not its random stream or draws).
    fn adopt(&mut self, donor: &NutsChain, gap: f64) {
        self.q.clone_from(&donor.q);
        self.lp = donor.lp;
        self.grad.clone_from(&donor.grad);
        self.eps = donor.eps;
        self.metric = donor.metric.clone();
        self.dual = donor.dual.clone();
        self.window.clone_from(&donor.window);
        self.window_len = donor.window_len;
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
