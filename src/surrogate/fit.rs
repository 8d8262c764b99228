//! Hyperparameters by maximising the log marginal likelihood: L-BFGS (argmin) from
//! several space-filling starts in log-hyperparameter space, run in parallel.

use super::gp::{Gp, Hyper, Trend};
use super::kernel::Kernel;
use super::SurrogateError;
use argmin::core::{CostFunction, Executor, Gradient};
use argmin::solver::linesearch::MoreThuenteLineSearch;
use argmin::solver::quasinewton::LBFGS;
use ndarray::{Array1, Array2, ArrayView1, ArrayView2};
use rand::Rng;
use rayon::prelude::*;
use std::sync::{Arc, Mutex};

/// Box for the log hyperparameters on standardised outputs and unit-box inputs.
/// Outside it a quadratic penalty pulls the search back; inside it the likelihood
/// alone decides.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HyperBounds {
    pub ln_signal_var: (f64, f64),
    pub ln_length_scale: (f64, f64),
    pub ln_nugget: (f64, f64),
}

impl Default for HyperBounds {
    fn default() -> Self {
        Self {
            // Standardised outputs have variance 1; a trend can leave far less.
            ln_signal_var: (1e-4f64.ln(), 1e4f64.ln()),
            // In the unit box: from a hundredth of the range to far beyond it.
            ln_length_scale: (1e-2f64.ln(), 1e2f64.ln()),
            // Relative to σ²: the floor bounds cond(K) by about n·1e8 for smooth,
            // noise-free simulators; the ceiling lets noisy simulators be smoothed.
            ln_nugget: (1e-8f64.ln(), 1.0f64.ln()),
        }
    }
}

/// Weak log-normal prior on each length-scale ℓ_j (unit-box inputs):
/// ln ℓ_j ~ N(`ln_median`, `sd`²). Adding its log density to the log marginal
/// likelihood turns the search into a maximum a posteriori estimate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LengthScalePrior {
    /// Mean of ln ℓ: the prior median of ℓ is exp(ln_median).
    pub ln_median: f64,
    /// Standard deviation of ln ℓ.
    pub sd: f64,
}

impl Default for LengthScalePrior {
    /// Median ℓ = 0.5 (half the range, the central start of the search) and sd 1.5 of
    /// ln ℓ, so that 95 % of the prior lies between 0.026 and 9.5 range widths: weak
    /// enough to leave any length-scale the data support, firm enough to stop a
    /// length-scale running to the bounds of the box on a flat likelihood. Our choice,
    /// in the spirit of the weakly informative priors common in practice; not taken
    /// from a publication.
    fn default() -> Self {
        Self {
            ln_median: 0.5f64.ln(),
            sd: 1.5,
        }
    }
}

impl LengthScalePrior {
    /// ln p(ln ℓ) summed over the length-scales, up to a constant, and its gradient
    /// with respect to each ln ℓ_j.
    ///
    /// # Formula
    /// Σ_j −½ ((ln ℓ_j − μ)/s)²; ∂/∂ ln ℓ_j = −(ln ℓ_j − μ)/s².
    pub fn ln_density(&self, ln_length_scales: &[f64]) -> (f64, Vec<f64>) {
        let s2 = self.sd * self.sd;
        let v = ln_length_scales
            .iter()
            .map(|b| -0.5 * (b - self.ln_median).powi(2) / s2)
            .sum();
        let g = ln_length_scales
            .iter()
            .map(|b| -(b - self.ln_median) / s2)
            .collect();
        (v, g)
    }
}

/// Settings of the search.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitParams {
    pub kernel: Kernel,
    pub trend: Trend,
    pub bounds: HyperBounds,
    /// `None`: maximum likelihood; `Some`: maximum a posteriori with this prior.
    pub hyperprior: Option<LengthScalePrior>,
    /// Starts of L-BFGS (the first is a fixed central guess).
    pub n_starts: usize,
    pub max_iters: u64,
}

const PENALTY: f64 = 1e3;

/// Best parameters, best cost and evaluation count of one start, or why it failed.
type StartResult = Result<(Vec<f64>, f64, u64), String>;

fn bounds_of(b: &HyperBounds, i: usize, n: usize) -> (f64, f64) {
    if i == 0 {
        b.ln_signal_var
    } else if i == n - 1 {
        b.ln_nugget
    } else {
        b.ln_length_scale
    }
}

// argmin's executor needs an owned problem; the copies are n × d numbers.
struct Objective {
    x: Array2<f64>,
    y: Array1<f64>,
    params: FitParams,
    /// The last evaluation: L-BFGS asks for the cost and the gradient at the same point,
    /// and both come from one factorisation.
    last: std::sync::Mutex<Option<Evaluation>>,
    /// Best point seen and the number of factorisations, shared with the caller so a
    /// start stopped by the budget still yields its best point.
    track: Arc<Mutex<Track>>,
}

/// A point, its cost and its gradient.
type Evaluation = (Vec<f64>, f64, Vec<f64>);

/// Progress of one start, kept outside the solver.
#[derive(Debug, Default)]
struct Track {
    best: Option<(Vec<f64>, f64)>,
    n_factorisations: u64,
    /// Calls of the objective, cached ones included.
    n_calls: u64,
}

/// Factorisations allowed per start. argmin's More–Thuente line search has no iteration
/// cap of its own; on a flat likelihood (an output exactly linear in the parameters,
/// fitted by the linear trend) it can search forever. Measured: a start converges in
/// 50–500 factorisations on the example studies.
pub const MAX_FACTORISATIONS: u64 = 3000;

/// Calls of the objective per start, cached answers included (argmin asks for the cost
/// and the gradient of a point separately, so a healthy search makes about two calls per
/// factorisation).
const MAX_CALLS: u64 = 4 * MAX_FACTORISATIONS;

impl Objective {
    fn eval(&self, p: &[f64]) -> Result<(f64, Vec<f64>), SurrogateError> {
        {
            // Calls answered from the cache count too: a line search that keeps asking
            // for the same point would otherwise never reach the factorisation budget.
            let mut t = self.track.lock().expect("track lock");
            t.n_calls += 1;
            if t.n_calls > MAX_CALLS {
                return Err(SurrogateError::BudgetExhausted {
                    max: MAX_FACTORISATIONS,
                });
            }
        }
        if let Some((q, f, g)) = self.last.lock().expect("cache lock").as_ref() {
            if q.as_slice() == p {
                return Ok((*f, g.clone()));
            }
        }
        {
            let mut t = self.track.lock().expect("track lock");
            if t.n_factorisations >= MAX_FACTORISATIONS {
                return Err(SurrogateError::BudgetExhausted {
                    max: MAX_FACTORISATIONS,
                });
            }
            t.n_factorisations += 1;
        }
        let (f, g) = self.eval_uncached(p)?;
        *self.last.lock().expect("cache lock") = Some((p.to_vec(), f, g.clone()));
        let mut t = self.track.lock().expect("track lock");
        if f.is_finite() && t.best.as_ref().map(|(_, b)| f < *b).unwrap_or(true) {
            t.best = Some((p.to_vec(), f));
        }
        Ok((f, g))
    }

    /// The objective per training point: −ln p(y | X, θ) grows with n and so does its
    /// gradient (|g| ≈ 500 at the central start for n = 1,000 Borehole runs), and the
    /// first L-BFGS step, a unit step along −g, then leaves the region where K can be
    /// factored, so the line search gave up after one trial at n ≥ 1,000. Dividing by n
    /// changes no optimum and keeps the first step of the order of the box.
    fn eval_uncached(&self, p: &[f64]) -> Result<(f64, Vec<f64>), SurrogateError> {
        let n = self.x.nrows().max(1) as f64;
        let (f, g) = objective(self.x.view(), self.y.view(), &self.params, p)?;
        Ok((f / n, g.into_iter().map(|v| v / n).collect()))
    }
}

/// The function the search minimises at log hyperparameters `p`, and its gradient:
/// −ln p(y | X, θ), minus the log length-scale prior when one is set, plus the
/// penalty outside [`HyperBounds`].
///
/// # Errors
/// A covariance that cannot be factored.
pub fn objective(
    x: ArrayView2<f64>,
    y: ArrayView1<f64>,
    params: &FitParams,
    p: &[f64],
) -> Result<(f64, Vec<f64>), SurrogateError> {
    let gp = Gp::fit(x, y, params.kernel, params.trend, Hyper::from_slice(p))?;
    let mut f = -gp.ln_marginal_likelihood;
    let mut g: Vec<f64> = gp.gradient().iter().map(|v| -v).collect();
    if let Some(prior) = params.hyperprior {
        let (lp, lg) = prior.ln_density(&p[1..p.len() - 1]);
        f -= lp;
        for (gi, v) in g[1..p.len() - 1].iter_mut().zip(lg) {
            *gi -= v;
        }
    }
    for (i, v) in p.iter().enumerate() {
        let (lo, hi) = bounds_of(&params.bounds, i, p.len());
        if *v < lo {
            f += PENALTY * (lo - v).powi(2);
            g[i] -= 2.0 * PENALTY * (lo - v);
        } else if *v > hi {
            f += PENALTY * (v - hi).powi(2);
            g[i] += 2.0 * PENALTY * (v - hi);
        }
    }
    Ok((f, g))
}

impl CostFunction for Objective {
    type Param = Vec<f64>;
    type Output = f64;
    fn cost(&self, p: &Vec<f64>) -> Result<f64, argmin::core::Error> {
        Ok(self.eval(p)?.0)
    }
}

impl Gradient for Objective {
    type Param = Vec<f64>;
    type Gradient = Vec<f64>;
    fn gradient(&self, p: &Vec<f64>) -> Result<Vec<f64>, argmin::core::Error> {
        Ok(self.eval(p)?.1)
    }
}

/// The outcome of a hyperparameter search.
#[derive(Debug, Clone)]
pub struct FitOutcome {
    pub gp: Gp,
    /// Starts that ran to the end (a start fails when K cannot be factored).
    pub n_starts_ok: usize,
    /// Factorisations of K summed over starts.
    pub n_evaluations: u64,
}

/// Maximise the log marginal likelihood of `y` at inputs `x` (unit box).
///
/// # Errors
/// [`SurrogateError::OptimisationFailed`] when every start fails.
pub fn fit_hyperparameters<R: Rng + ?Sized>(
    x: ArrayView2<f64>,
    y: ArrayView1<f64>,
    params: FitParams,
    name: &str,
    rng: &mut R,
) -> Result<FitOutcome, SurrogateError> {
    crate::init_blas();
    let d = x.ncols();
    let b = params.bounds;
    let mid = |(lo, hi): (f64, f64)| 0.5 * (lo + hi);
    // Starts: a central guess (unit signal, length-scale ½, small nugget), then a Latin
    // hypercube over a central part of the box.
    let mut starts = vec![{
        let mut v = vec![0.0];
        v.extend(std::iter::repeat_n(0.5f64.ln(), d));
        v.push(1e-6f64.ln());
        v
    }];
    let extra = params.n_starts.saturating_sub(1);
    if extra > 0 {
        let u = crate::design::latin_hypercube(extra, d + 2, rng);
        for i in 0..extra {
            let mut v = Vec::with_capacity(d + 2);
            let shrink = |(lo, hi): (f64, f64), t: f64| {
                let c = mid((lo, hi));
                let half = 0.35 * (hi - lo);
                c - half + 2.0 * half * t
            };
            v.push(shrink((-2.0, 1.0), u[[i, 0]]));
            for j in 0..d {
                v.push(shrink(b.ln_length_scale, u[[i, 1 + j]]));
            }
            v.push(shrink(b.ln_nugget, u[[i, d + 1]]));
            starts.push(v);
        }
    }
    let results: Vec<StartResult> = starts
        .into_par_iter()
        .map(|init| {
            let track = Arc::new(Mutex::new(Track::default()));
            let obj = Objective {
                x: x.to_owned(),
                y: y.to_owned(),
                params,
                last: std::sync::Mutex::new(None),
                track: Arc::clone(&track),
            };
            let solver = LBFGS::new(MoreThuenteLineSearch::new(), 7)
                // A change of 1e-7 per training point in ln p (the objective is per
                // point) is far below what moves a prediction.
                .with_tolerance_cost(1e-7)
                .map_err(|e| e.to_string())?;
            let outcome = Executor::new(obj, solver)
                .configure(|s| s.param(init).max_iters(params.max_iters))
                .run();
            // Whatever stopped the solver (convergence, iterations, the factorisation
            // budget, a failed factorisation), the best point it evaluated stands.
            let t = track.lock().expect("track lock");
            match (&t.best, outcome) {
                (Some((p, f)), _) => Ok((p.clone(), *f, t.n_factorisations)),
                (None, Err(e)) => Err(e.to_string()),
                (None, Ok(_)) => Err("no finite evaluation".to_string()),
            }
        })
        .collect();
    let mut best: Option<(Vec<f64>, f64)> = None;
    let mut n_ok = 0;
    let mut n_eval = 0;
    let mut last_err = String::new();
    for r in results {
        match r {
            Ok((p, c, e)) => {
                n_ok += 1;
                n_eval += e;
                if c.is_finite() && best.as_ref().map(|(_, bc)| c < *bc).unwrap_or(true) {
                    best = Some((p, c));
                }
            }
            Err(e) => last_err = e,
        }
    }
    let (p, _) = best.ok_or_else(|| SurrogateError::OptimisationFailed {
        output: name.into(),
        reason: last_err.clone(),
    })?;
    // Clamp into the box so the recorded hyperparameters are inside it.
    let clamped: Vec<f64> = p
        .iter()
        .enumerate()
        .map(|(i, v)| {
            let (lo, hi) = bounds_of(&params.bounds, i, p.len());
            v.clamp(lo, hi)
        })
        .collect();
    let gp = Gp::fit(
        x,
        y,
        params.kernel,
        params.trend,
        Hyper::from_slice(&clamped),
    )?;
    Ok(FitOutcome {
        gp,
        n_starts_ok: n_ok,
        n_evaluations: n_eval,
    })
}
