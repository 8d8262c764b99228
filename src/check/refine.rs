//! Sequential refinement: the record of its rounds (`refinement.yaml`) and the rule
//! that ends it. The rounds themselves (add points, run, fit, calibrate, confirm) are
//! driven by the CLI through the campaign's stages.
//!
//! Pure: no files, no clock.
//!
//! # Method
//! A posterior is only as good as the surrogate where the posterior lives. Each round
//! adds runs there: points picked among the posterior draws, spread out from the
//! design's points by greedy maximin, plus a share over the whole box (gap filling) so
//! the surrogate stays sane elsewhere; then fit, calibrate and confirm again. The
//! surrogate's error near the posterior is measured by confirmation runs (the simulator
//! at posterior draws and the posterior mean, compared with the surrogate mean), relative
//! to the measurement noise sd. Refinement stops when that ratio is at most the
//! tolerance for every experiment, or after the rounds asked for. This is the usual
//! sequential-design loop of surrogate-based calibration (common practice); the
//! tolerance's default 0.5 keeps the surrogate's error variance at most a quarter of the
//! noise variance, so the likelihood's spread grows by at most about 12 %.

use super::Confirmation;
use serde::{Deserialize, Serialize};

/// The surrogate's error near the posterior for one experiment, from confirmation runs.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ConfirmationError {
    pub experiment: String,
    /// Confirmation runs compared.
    pub n_runs: usize,
    /// Root mean square of simulator − surrogate mean.
    pub rmse: f64,
    pub noise_sd: f64,
    pub rmse_over_noise: f64,
}

/// One refinement round.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RefineRound {
    /// 1, 2, ...
    pub round: usize,
    /// Ids of the points picked among the posterior draws.
    pub added_near_posterior: Vec<String>,
    /// Ids of the points added over the whole box.
    pub added_global: Vec<String>,
    /// Confirmation errors of the posterior this round started from.
    pub before: Vec<ConfirmationError>,
    /// Confirmation errors after the refit and recalibration (at new posterior draws).
    pub after: Vec<ConfirmationError>,
    /// Posterior means of the parameters after the round, in the study's order.
    pub posterior_mean: Vec<f64>,
}

/// Why refinement stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Stopped {
    /// Every experiment's confirmation error is at most the tolerance.
    #[serde(rename = "below tolerance")]
    BelowTolerance,
    /// The rounds asked for are done; the error may still exceed the tolerance.
    #[serde(rename = "rounds done")]
    RoundsDone,
    /// Not finished yet (interrupted, or a round is in progress).
    #[serde(rename = "in progress")]
    InProgress,
}

/// Body of `refinement.yaml`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RefinementBody {
    /// Rounds asked for, points per round, share over the whole box, tolerance.
    pub rounds_asked: usize,
    pub add: usize,
    pub global_share: f64,
    pub tolerance: f64,
    /// Confirmation runs per check (posterior draws; the posterior mean is one more).
    pub confirmation_runs: usize,
    /// Confirmation errors before the first round.
    pub start: Vec<ConfirmationError>,
    pub rounds: Vec<RefineRound>,
    pub stopped: Stopped,
    /// sha256 of `design.yaml` when refinement finished (with the last confirmation
    /// points): `assay all` repeats no finished refinement of the same design.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub design_sha256: Option<String>,
}

/// The errors of a confirmation, one per experiment.
pub fn errors(conf: &Confirmation) -> Vec<ConfirmationError> {
    conf.experiments
        .iter()
        .map(|e| ConfirmationError {
            experiment: e.name.clone(),
            n_runs: e.n_runs,
            rmse: e.rmse,
            noise_sd: e.noise_sd,
            rmse_over_noise: e.rmse_over_noise,
        })
        .collect()
}

/// Whether every experiment's error is at most `tolerance` noise sds. An experiment
/// without finished confirmation runs (NaN) is never below it.
pub fn below_tolerance(errors: &[ConfirmationError], tolerance: f64) -> bool {
    !errors.is_empty() && errors.iter().all(|e| e.rmse_over_noise <= tolerance)
}

/// The largest error over the experiments (NaN when one has none).
pub fn worst(errors: &[ConfirmationError]) -> f64 {
    errors.iter().fold(f64::NEG_INFINITY, |m, e| {
        if m.is_nan() || e.rmse_over_noise.is_nan() {
            f64::NAN
        } else {
            m.max(e.rmse_over_noise)
        }
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn err(r: f64) -> ConfirmationError {
        ConfirmationError {
            experiment: "e".into(),
            n_runs: 3,
            rmse: r,
            noise_sd: 1.0,
            rmse_over_noise: r,
        }
    }

    #[test]
    fn tolerance_needs_every_experiment_and_a_number() {
        assert!(below_tolerance(&[err(0.2), err(0.5)], 0.5));
        assert!(!below_tolerance(&[err(0.2), err(0.6)], 0.5));
        assert!(!below_tolerance(&[err(f64::NAN)], 0.5));
        assert!(!below_tolerance(&[], 0.5));
        assert_eq!(worst(&[err(0.2), err(0.6)]), 0.6);
        assert!(worst(&[err(0.2), err(f64::NAN)]).is_nan());
    }
}
