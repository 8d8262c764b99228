//! Bayesian calibration: the posterior of the parameters given the field data.
//!
//! Input: the study's parameters (priors, ranges), each experiment's field data and
//! noise, and an [`Emulator`] per experiment (the fitted surrogate, or an exact model in
//! tests). Output: MCMC [`Chain`]s of the parameters, of any unknown noise variance and
//! of any sampled discrepancy hyperparameters,
//! their [`Diagnostics`] and a [`PosteriorSummary`]; with `hyperparameters: map`, first
//! the joint posterior mode that fixes the discrepancy hyperparameters ([`find_map`]).
//! Must not: open files, print, or create its own RNG (streams come from one seed).

pub mod assemble;
mod diagnostics;
pub mod discrepancy;
pub mod ensemble;
mod likelihood;
pub mod map;
pub mod nuts;
mod posterior;
mod prior;
mod sampler;
pub mod samples;
mod summary;

pub use assemble::{
    assemble, discrepancy_as_calibrated, discrepancy_sd_draws, field_emulator, field_emulators,
    model_of, prior_from_samples, Assembled, SetupError,
};
pub use diagnostics::{
    ess_bulk, ess_quantile, ess_tail, mcse_quantile, quantile_sorted, rhat, Diagnostics,
};
pub use discrepancy::{discrepancy_of, Discrepancy, Hyper, HyperKind};
pub use likelihood::{
    ln_normal_factored_low_rank, ln_normal_low_rank, Emulator, ExperimentLikelihood,
    LikelihoodGradient,
};
pub use map::{find_map, with_fixed_discrepancy, MapError, MapEstimate, MapParams};
pub use posterior::LogPosterior;
pub use prior::{ln_prior, InverseGamma, MvnPrior, Transform};
pub use sampler::{converged, sample, Chain, Restart, SamplerParams, Termination, STRANDED_GAP};
pub use samples::Samples;
pub use summary::{
    summarize, Correlation, DiscrepancyMap, DiscrepancySummary, FixedAt, HyperSummary, Marginal,
    Mcse, NoiseMcse, NoiseSummary, ParameterSummary, PosteriorBody, PosteriorSummary, CAUTION,
    ESS_WARN, RHAT_WARN,
};
