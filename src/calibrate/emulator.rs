//! What the likelihood needs from a surrogate: the [`Emulator`] trait (the mean and
//! covariance of an experiment's output vector at θ, optionally with derivatives) and
//! its implementations for the fitted surrogates.
//!
//! Input: parameter values θ. Output: the surrogate's prediction at θ. Must not: read
//! the field data (that is the likelihood's), open files or print.

use crate::surrogate::{LowRankGradient, LowRankPrediction};

/// Anything that predicts an experiment's output vector at parameter values θ.
pub trait Emulator: Sync {
    /// Mean and marginal variance of each output value (the experiment's output order).
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>);

    /// Mean and low-rank-plus-diagonal covariance of the output vector. The default
    /// treats the values as independent (no basis).
    fn predict_low_rank(&self, theta: &[f64]) -> LowRankPrediction {
        let (m, v) = self.predict(theta);
        LowRankPrediction::diagonal(m, v)
    }

    /// [`Self::predict_low_rank`] with its derivatives with respect to θ, for the
    /// gradient-based sampler; `None` (the default) when the emulator has none.
    fn predict_low_rank_with_gradient(
        &self,
        _theta: &[f64],
    ) -> Option<(LowRankPrediction, LowRankGradient)> {
        None
    }

    /// Whether [`Self::predict_low_rank_with_gradient`] gives derivatives.
    fn has_gradient(&self) -> bool {
        false
    }
}

impl Emulator for crate::surrogate::ExperimentModel {
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        crate::surrogate::ExperimentModel::predict(self, theta)
    }

    fn predict_low_rank(&self, theta: &[f64]) -> LowRankPrediction {
        crate::surrogate::ExperimentModel::predict_low_rank(self, theta)
    }

    fn predict_low_rank_with_gradient(
        &self,
        theta: &[f64],
    ) -> Option<(LowRankPrediction, LowRankGradient)> {
        Some(crate::surrogate::ExperimentModel::predict_low_rank_with_gradient(self, theta))
    }

    fn has_gradient(&self) -> bool {
        true
    }
}

impl Emulator for crate::surrogate::FieldEmulator<'_> {
    fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        crate::surrogate::FieldEmulator::predict(self, theta)
    }

    fn predict_low_rank(&self, theta: &[f64]) -> LowRankPrediction {
        crate::surrogate::FieldEmulator::predict_low_rank(self, theta)
    }

    /// The plain surrogate's; none at field conditions (controls).
    fn predict_low_rank_with_gradient(
        &self,
        theta: &[f64],
    ) -> Option<(LowRankPrediction, LowRankGradient)> {
        match self {
            Self::Plain(m) => Some(m.predict_low_rank_with_gradient(theta)),
            Self::Conditioned(_) => None,
        }
    }

    fn has_gradient(&self) -> bool {
        matches!(self, Self::Plain(_))
    }
}
