//! Bayesian calibration: the posterior of the parameters given the field data.
//!
//! Input: the study's parameters (priors, ranges), each experiment's field data and
//! noise, and an [`Emulator`] per experiment (the fitted surrogate, or an exact model in
//! tests). Output: MCMC [`Chain`]s of the parameters, of any unknown noise variance and
//! of any sampled discrepancy hyperparameters,
//! their [`Diagnostics`] and a [`PosteriorSummary`]; with `hyperparameters: map`, first
//! the joint posterior mode that fixes the discrepancy hyperparameters ([`find_map`]).
//! Must not: open files, print, or create its own RNG (streams come from one seed).
//!
//! The files import one another in one direction only: each imports only files earlier
//! in this order: `prior`, `diagnostics`, `discrepancy`, `emulator`, `woodbury`, `hmc`
//! (none of which imports another file here); `likelihood`; `posterior`; `chain`
//! (settings, chain types, the runner of independent chains); the samplers
//! `metropolis`, `ensemble` and `nuts`; `sampler` (the entry point); `map`; `summary`;
//! `samples` (the samples file); `assemble` (the model assembled from a study and its
//! records).
//! Within the folder, names are imported from the file that defines them, not through
//! the re-exports below.

pub mod assemble;
mod chain;
mod diagnostics;
pub mod discrepancy;
mod emulator;
pub mod ensemble;
mod hmc;
mod likelihood;
pub mod map;
mod metropolis;
pub mod nuts;
pub mod params;
mod posterior;
mod prior;
mod sampler;
pub mod samples;
mod summary;
mod woodbury;

pub use assemble::{
    assemble, discrepancy_as_calibrated, discrepancy_sd_draws, field_emulator, field_emulators,
    model_of, prior_from_samples, Assembled, SetupError,
};
pub use chain::{converged, Chain, Restart, SamplerParams, Termination, STRANDED_GAP};
pub use diagnostics::{
    ess_bulk, ess_quantile, ess_tail, mcse_quantile, quantile_sorted, rhat, Diagnostics, ESS_WARN,
    RHAT_WARN,
};
pub use discrepancy::{discrepancy_of, Discrepancy, Hyper, HyperKind};
pub use emulator::Emulator;
pub use likelihood::ExperimentLikelihood;
pub use map::{find_map, with_fixed_discrepancy, MapError, MapEstimate, MapParams};
pub use params::{CalibrationParams, DiscrepancyParams};
pub use posterior::LogPosterior;
pub use prior::{ln_prior, InverseGamma, MvnPrior, Transform};
pub use sampler::sample;
pub use samples::Samples;
pub use summary::{
    summarize, Correlation, DiscrepancyMap, DiscrepancySummary, FixedAt, HyperSummary, Marginal,
    Mcse, NoiseMcse, NoiseSummary, ParameterSummary, PosteriorBody, PosteriorSummary, CAUTION,
};
pub use woodbury::{ln_normal_factored_low_rank, ln_normal_low_rank, LikelihoodGradient};
