//! Bayesian calibration: the posterior of the parameters given the field data.
//!
//! Input: the study's parameters (priors, ranges), each experiment's field data and
//! noise, and an [`Emulator`] per experiment (the fitted surrogate, or an exact model in
//! tests). Output: MCMC [`Chain`]s of the parameters, of any unknown noise variance and
//! of any sampled discrepancy hyperparameters,
//! their [`Diagnostics`] and a [`PosteriorSummary`]; with `hyperparameters: map`, first
//! the joint posterior mode that fixes the discrepancy hyperparameters ([`find_map`]).
//! Must not: open files, print, or create its own RNG (streams come from one seed).

mod diagnostics;
pub mod discrepancy;
pub mod ensemble;
mod likelihood;
pub mod map;
pub mod nuts;
pub mod params;
mod posterior;
mod prior;
mod sampler;
mod summary;

pub use diagnostics::{
    ess_bulk, ess_quantile, ess_tail, mcse_quantile, quantile_sorted, rhat, Diagnostics,
};
pub use discrepancy::{Discrepancy, Hyper, HyperKind};
pub use likelihood::{
    ln_normal_factored_low_rank, ln_normal_low_rank, Emulator, ExperimentLikelihood,
    LikelihoodGradient,
};
pub use map::{find_map, with_fixed_discrepancy, MapError, MapEstimate, MapParams};
pub use params::{CalibrationParams, DiscrepancyParams};
pub use posterior::LogPosterior;
pub use prior::{ln_prior, InverseGamma, MvnPrior, Transform};
pub use sampler::{converged, sample, Chain, Restart, SamplerParams, Termination, STRANDED_GAP};
pub use summary::{
    summarize, Correlation, DiscrepancyMap, DiscrepancySummary, FixedAt, HyperSummary, Marginal,
    Mcse, NoiseMcse, NoiseSummary, ParameterSummary, PosteriorBody, PosteriorSummary, CAUTION,
    ESS_WARN, RHAT_WARN,
};
