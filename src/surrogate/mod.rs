//! The Gaussian-process surrogate (emulator) of the simulator's outputs.
//!
//! Input: finished runs ([`crate::runs::RunSet`]) and the surrogate settings.
//! Output: a [`FittedSurrogate`] — one GP per output value of each experiment, with
//! leave-one-out validation — and its record body [`SurrogateBody`].
//! Must not: open files, print, or create its own RNG (streams come from the seed).

mod error;
mod fit;
pub mod gp;
pub mod kernel;
mod model;
mod validation;
mod wire;

pub use error::SurrogateError;
pub use fit::{fit_hyperparameters, FitOutcome, FitParams, HyperBounds};
pub use gp::{Gp, Hyper, Trend};
pub use kernel::Kernel;
pub use model::{fit_surrogate, min_runs, ExperimentModel, FittedSurrogate, OutputModel, MIN_RUNS};
pub use validation::{Validation, ZSummary};
pub use wire::SurrogateBody;
