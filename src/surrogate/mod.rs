//! The Gaussian-process surrogate (emulator) of the simulator's outputs.
//!
//! Input: finished runs ([`crate::runs::RunSet`]) and the surrogate settings.
//! Output: a [`FittedSurrogate`] — per experiment, a principal-component [`Basis`] of
//! its output vector and one GP per component weight, with leave-one-out and optional
//! holdout validation — and its record body [`SurrogateBody`]. Predictions come in
//! low-rank-plus-diagonal form ([`LowRankPrediction`]).
//! Must not: open files, print, or create its own RNG (streams come from the seed).

pub mod basis;
mod conditioned;
mod error;
mod fit;
pub mod gp;
pub mod holdout;
pub mod kernel;
mod model;
pub mod params;
mod validation;
mod wire;

pub use basis::Basis;
pub use conditioned::{ConditionedModel, FieldEmulator};
pub use error::SurrogateError;
pub use fit::{
    fit_hyperparameters, objective, FitOutcome, FitParams, HyperBounds, LengthScalePrior,
};
pub use gp::{Gp, Hyper, Trend};
pub use holdout::{mahalanobis, mahalanobis_reference, Holdout, MahalanobisCheck};
pub use kernel::Kernel;
pub use model::{
    fit_surrogate, hyperprior_of, min_runs, pick_holdout, ComponentModel, ExperimentModel,
    FittedSurrogate, LowRankGradient, LowRankPrediction, OutputModel, MIN_RUNS,
};
pub use params::SurrogateParams;
pub use validation::{Validation, ZSummary};
pub use wire::SurrogateBody;
