//! Posterior predictive checks: does the calibrated model reproduce the field data?
//!
//! Input: the study's experiments, their surrogates, posterior draws (parameters and,
//! for unknown noise, the drawn noise sd) and a random stream.
//! Output: [`ChecksBody`], the body of `checks.yaml`: per experiment and field
//! measurement the predictive mean, the central 95 % predictive interval and the
//! standardised residual; the coverage of the data with its binomial 99 % band; and the
//! posterior predictive p-value of a χ² discrepancy (Gelman, Meng & Stern 1996).
//!
//! Pure: no files, no clock.
//!
//! # Method
//! For each draw s (θ_s, σ_s²) and each measurement o of an output value i, the
//! replicated measurement is y_rep,o ~ N(μ_i(θ_s), v_i(θ_s) + s_q,s² + σ_o²), with μ, v
//! the surrogate's mean and marginal variance and s_q,s the model-discrepancy sd of the
//! value's output quantity at that draw (0 without `calibration.discrepancy`): the
//! discrepancy enters with its prior marginal variance given the hyperparameters, like
//! the surrogate's error, not conditioned on the data. The 95 % interval of a measurement is the
//! 2.5 % and 97.5 % quantiles of its replicated values over the draws; its standardised
//! residual is (y − E y_rep)/sd(y_rep). The discrepancy is
//! T(y, θ) = Σ_o (y_o − μ_i(θ))² / (v_i(θ) + s_q² + σ_o²), and the p-value is the share of
//! draws with T(y_rep, θ_s) ≥ T(y, θ_s) (Gelman, Meng & Stern 1996, eq. 2.4 and §2.3;
//! BDA3 §6.3). Surrogate and discrepancy errors are taken independent across output
//! values here (the marginal variances), a simplification of the calibration's likelihood when a
//! principal-component basis or the discrepancy's correlation along x correlates them.
//!
//! # References
//! Gelman, A., Meng, X.-L. & Stern, H. (1996). Posterior predictive assessment of model
//! fitness via realized discrepancies. Statistica Sinica 6, 733–807 *(equation number
//! from memory)*.

pub mod params;
pub mod refine;

pub use params::RefineParams;

use crate::calibrate::Emulator;
use crate::study::{Experiment, Noise, Study};
use rand::Rng;
use rand_distr::StandardNormal;
use serde::{Deserialize, Serialize};
use statrs::distribution::{Binomial, DiscreteCDF};

/// The target coverage of the 95 % predictive intervals.
pub const NOMINAL: f64 = 0.95;
/// p-values below this or above 1 − this flag a misfit (common practice: the tails of
/// the reference distribution at the 1 % level, two-sided).
pub const PPP_ALPHA: f64 = 0.01;

/// One field measurement against its posterior predictive distribution.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MeasurementCheck {
    pub quantity: String,
    /// The control values of the measurement's condition, in the study's `controls`
    /// order (absent without controls).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub controls: Vec<f64>,
    /// The curve's x (absent for scalar outputs).
    pub x: Option<f64>,
    pub observed: f64,
    pub mean: f64,
    pub lo95: f64,
    pub hi95: f64,
    /// (observed − mean) / sd of the replicated measurement.
    pub z: f64,
}

/// Checks of one experiment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ExperimentCheck {
    pub name: String,
    pub n_measurements: usize,
    /// Share of measurements inside their 95 % predictive interval.
    pub coverage95: f64,
    /// Binomial 99 % band of that share when the model is right (n measurements, p 0.95).
    pub coverage_band99: [f64; 2],
    /// Posterior predictive p-value of the χ² discrepancy.
    pub ppp_chi2: f64,
    /// Mean over the draws of T(y, θ) and of T(y_rep, θ).
    pub discrepancy_observed: f64,
    pub discrepancy_replicated: f64,
    /// Largest |z| of any measurement.
    pub max_abs_z: f64,
    pub passes: bool,
    /// Why it does not pass (empty when it passes).
    pub findings: Vec<String>,
    pub measurements: Vec<MeasurementCheck>,
}

/// A confirmation point: a posterior draw or the posterior mean, run with the simulator.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ConfirmationPoint {
    /// Design point id (an existing one when the same values were run before).
    pub id: String,
    /// `posterior mean` or `draw <row>` (row of the thinned samples).
    pub source: String,
    /// Parameter values, in the study's order.
    pub parameters: Vec<f64>,
    /// Whether the point was already in the design (its runs were reused).
    pub reused: bool,
}

/// The surrogate against the simulator at the confirmation points, for one experiment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ConfirmationExperiment {
    pub name: String,
    /// Confirmation runs of this experiment that finished (failed ones are left out).
    pub n_runs: usize,
    /// Root mean square of simulator − surrogate mean over every output value.
    pub rmse: f64,
    /// The measurement noise sd it is compared with (known sd, mean of the sd column,
    /// or the posterior mean of an estimated one).
    pub noise_sd: f64,
    pub rmse_over_noise: f64,
    /// Share of output values inside the surrogate's 95 % interval (mean ± 1.96 sd).
    pub inside95: f64,
    /// Largest |standardised error| (simulator − mean)/sd.
    pub max_abs_z: f64,
    pub passes: bool,
    pub findings: Vec<String>,
}

/// Confirmation runs and how the surrogate did there.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Confirmation {
    pub points: Vec<ConfirmationPoint>,
    pub experiments: Vec<ConfirmationExperiment>,
}

/// Compare the surrogate `model` of experiment `name` with simulator outputs `runs`
/// (parameter values and output vector per run).
///
/// Passes when the share inside the 95 % interval is not below the binomial 99 % band
/// of its count and the RMSE does not exceed the noise sd (beyond it the surrogate's own
/// error, not the measurement, limits the calibration: common practice to call for more
/// runs near the posterior then).
pub fn confirm_experiment(
    name: &str,
    model: &dyn Emulator,
    runs: &[(Vec<f64>, Vec<f64>)],
    noise_sd: f64,
) -> ConfirmationExperiment {
    let (mut se, mut n, mut inside, mut max_z) = (0.0, 0usize, 0usize, 0.0f64);
    for (theta, y) in runs {
        let (m, v) = model.predict(theta);
        for ((y, m), v) in y.iter().zip(&m).zip(&v) {
            let e = y - m;
            se += e * e;
            n += 1;
            let z = if *v > 0.0 {
                e / v.sqrt()
            } else if e == 0.0 {
                0.0
            } else {
                f64::INFINITY
            };
            max_z = max_z.max(z.abs());
            if z.abs() <= 1.959_963_984_540_054 {
                inside += 1;
            }
        }
    }
    let rmse = if n > 0 {
        (se / n as f64).sqrt()
    } else {
        f64::NAN
    };
    let inside95 = if n > 0 {
        inside as f64 / n as f64
    } else {
        f64::NAN
    };
    let mut findings = Vec::new();
    if n == 0 {
        findings.push("no confirmation run finished".into());
    } else {
        let band = coverage_band(n);
        if inside95 < band[0] {
            findings.push(format!(
                "{inside95:.3} of the simulator's values lie inside the surrogate's 95 % intervals (binomial 99 % band from {:.3}): the surrogate understates its error near the posterior",
                band[0]
            ));
        }
        if rmse > noise_sd {
            findings.push(format!(
                "the surrogate's error near the posterior (RMSE {rmse:.4e}) exceeds the measurement noise sd ({noise_sd:.4e}): add runs there (refinement) and fit again"
            ));
        }
    }
    ConfirmationExperiment {
        name: name.to_string(),
        n_runs: runs.len(),
        rmse,
        noise_sd,
        rmse_over_noise: rmse / noise_sd,
        inside95,
        max_abs_z: max_z,
        passes: findings.is_empty(),
        findings,
    }
}

/// Body of `checks.yaml`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChecksBody {
    /// Posterior draws used (thinned evenly from the samples).
    pub n_draws: usize,
    pub experiments: Vec<ExperimentCheck>,
    /// Confirmation runs (`checks.confirmation_runs` > 0).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub confirmation: Option<Confirmation>,
    /// True when every experiment passes.
    pub passes: bool,
    pub caution: String,
}

/// The binomial 99 % band of the coverage of n measurements with probability 0.95:
/// [q(0.005), q(0.995)] / n.
pub fn coverage_band(n: usize) -> [f64; 2] {
    if n == 0 {
        return [0.0, 1.0];
    }
    let b = Binomial::new(NOMINAL, n as u64).expect("valid binomial");
    [
        b.inverse_cdf(0.005) as f64 / n as f64,
        b.inverse_cdf(0.995) as f64 / n as f64,
    ]
}

fn quantile(sorted: &[f64], p: f64) -> f64 {
    crate::calibrate::quantile_sorted(sorted, p)
}

/// Per-draw spreads that enter the predictive distribution besides the surrogate's.
#[derive(Debug, Clone, Copy, Default)]
pub struct DrawnVariances<'a> {
    /// The drawn noise sd of each draw, when the noise is estimated.
    pub noise_sd: Option<&'a [f64]>,
    /// The model-discrepancy sd of each output quantity at each draw (`[draw][quantity]`),
    /// when the calibration has a discrepancy.
    pub discrepancy_sd: Option<&'a [Vec<f64>]>,
}

/// Check experiment `e` against its surrogate `model` at posterior `draws`.
///
/// `drawn` holds the noise and discrepancy sds of each draw where they were estimated
/// (or fixed, for the discrepancy).
/// Returns `None` when the surrogate's outputs do not match the field data, or there are
/// no draws.
pub fn check_experiment<R: Rng + ?Sized>(
    study: &Study,
    e: &Experiment,
    model: &dyn Emulator,
    draws: &[Vec<f64>],
    drawn: DrawnVariances<'_>,
    rng: &mut R,
) -> Option<ExperimentCheck> {
    let noise_sd = drawn.noise_sd;
    let targets = e.data.targets(study.simulator.output.y.len());
    let conditions = e.data.conditions();
    if draws.is_empty() {
        return None;
    }
    // One entry per measurement: (target index, observed value, known noise sd).
    let mut obs: Vec<(usize, f64, Option<f64>)> = Vec::new();
    for (i, t) in targets.iter().enumerate() {
        for (k, y) in t.values.iter().enumerate() {
            let sd = match &e.noise {
                Noise::Sd(s) => Some(*s),
                Noise::Column(_) => t.sds.get(k).copied().flatten(),
                Noise::Unknown { .. } => None,
            };
            obs.push((i, *y, sd));
        }
    }
    let mut reps: Vec<Vec<f64>> = vec![Vec::with_capacity(draws.len()); obs.len()];
    let mut t_obs_sum = 0.0;
    let mut t_rep_sum = 0.0;
    let mut exceed = 0usize;
    for (s, theta) in draws.iter().enumerate() {
        let (m, v) = model.predict(theta);
        if m.len() != targets.len() {
            return None;
        }
        let mut t_obs = 0.0;
        let mut t_rep = 0.0;
        for (o, (i, y, sd)) in obs.iter().enumerate() {
            let noise_var = match (sd, noise_sd) {
                (Some(sd), _) => sd * sd,
                (None, Some(ns)) => ns[s] * ns[s],
                (None, None) => 0.0,
            };
            let disc_var = drawn
                .discrepancy_sd
                .map_or(0.0, |d| d[s][targets[*i].quantity].powi(2));
            let var = (v[*i] + noise_var + disc_var).max(f64::MIN_POSITIVE);
            let eps: f64 = rng.sample(StandardNormal);
            let y_rep = m[*i] + var.sqrt() * eps;
            reps[o].push(y_rep);
            t_obs += (y - m[*i]).powi(2) / var;
            t_rep += (y_rep - m[*i]).powi(2) / var;
        }
        t_obs_sum += t_obs;
        t_rep_sum += t_rep;
        if t_rep >= t_obs {
            exceed += 1;
        }
    }
    let n_draws = draws.len() as f64;
    let mut measurements = Vec::with_capacity(obs.len());
    let mut inside = 0usize;
    for ((i, y, _), mut r) in obs.iter().zip(reps) {
        let mean = r.iter().sum::<f64>() / n_draws;
        let sd = (r.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n_draws).sqrt();
        r.sort_by(f64::total_cmp);
        let lo = quantile(&r, 0.025);
        let hi = quantile(&r, 0.975);
        if *y >= lo && *y <= hi {
            inside += 1;
        }
        let t = &targets[*i];
        measurements.push(MeasurementCheck {
            quantity: study.simulator.output.y[t.quantity].clone(),
            controls: conditions[t.condition].clone(),
            x: t.x,
            observed: *y,
            mean,
            lo95: lo,
            hi95: hi,
            z: if sd > 0.0 { (y - mean) / sd } else { 0.0 },
        });
    }
    let n = measurements.len();
    let coverage95 = inside as f64 / n.max(1) as f64;
    let band = coverage_band(n);
    let ppp = exceed as f64 / n_draws;
    let mut findings = Vec::new();
    if coverage95 < band[0] || coverage95 > band[1] {
        findings.push(format!(
            "{:.3} of the measurements lie inside their 95 % predictive intervals, outside the binomial 99 % band [{:.3}, {:.3}]",
            coverage95, band[0], band[1]
        ));
    }
    if !(PPP_ALPHA..=1.0 - PPP_ALPHA).contains(&ppp) {
        findings.push(format!(
            "the posterior predictive p-value of the χ² discrepancy is {ppp:.3}: the data are {} than the calibrated model expects",
            if ppp < PPP_ALPHA { "farther from the model" } else { "closer to the model" }
        ));
    }
    Some(ExperimentCheck {
        name: e.name.clone(),
        n_measurements: n,
        coverage95,
        coverage_band99: band,
        ppp_chi2: ppp,
        discrepancy_observed: t_obs_sum / n_draws,
        discrepancy_replicated: t_rep_sum / n_draws,
        max_abs_z: measurements.iter().map(|m| m.z.abs()).fold(0.0, f64::max),
        passes: findings.is_empty(),
        findings,
        measurements,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Exact binomial quantiles for n = 20, p = 0.95 (P(X ≤ 17) = 0.0755, P(X ≤ 16) =
    /// 0.0159, P(X ≤ 15) = 0.0026 — from the binomial pmf, computed by hand): the
    /// 0.005 quantile is 16 and the 0.995 quantile is 20.
    #[test]
    fn coverage_band_is_the_binomial_99_percent_band() {
        assert_eq!(coverage_band(20), [16.0 / 20.0, 1.0]);
        let b = coverage_band(400);
        assert!(
            b[0] > 0.91 && b[0] < 0.93 && b[1] > 0.97 && b[1] < 0.98,
            "{b:?}"
        );
    }
}
