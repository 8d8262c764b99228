//! The sampler's entry point: runs the sampler chosen in the settings (adaptive
//! Metropolis, the affine-invariant ensemble or the No-U-Turn sampler).
//!
//! Input: a [`LogPosterior`], the [`SamplerParams`], a stop flag and a progress
//! observer. Output: the [`Chain`]s of kept draws. Must not: open files, print, or
//! create its own RNG (each chain's stream comes from `params.seed`).

use super::chain::{Chain, SamplerParams};
use super::posterior::LogPosterior;
use super::{ensemble, metropolis, nuts};
use crate::progress::Observer;
use crate::study::spec::SamplerChoice;
use std::sync::atomic::AtomicBool;

/// Run the sampler chosen in `params`, chains (or walkers) in parallel. Chain i uses
/// random stream i of `params.seed`, so the draws are the same whatever the number of
/// threads. With `until_converged`, every chain is extended by `draws` at a time (from
/// where it stopped, with its frozen proposal) until [`converged`](super::chain::converged) or the
/// maximum.
pub fn sample(
    post: &LogPosterior<'_>,
    params: &SamplerParams,
    stop: &AtomicBool,
    observer: &dyn Observer,
) -> Vec<Chain> {
    crate::init_blas();
    match params.kind {
        SamplerChoice::AdaptiveMetropolis => metropolis::sample(post, params, stop, observer),
        SamplerChoice::Ensemble => ensemble::sample(post, params, stop, observer),
        SamplerChoice::Nuts => nuts::sample(post, params, stop, observer),
    }
}
