//! Posterior summaries and the `posterior.yaml` body.

use super::diagnostics::{quantile_sorted, Diagnostics};
use super::sampler::{Chain, SamplerParams, Termination};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Marginal summary of one parameter.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ParameterSummary {
    pub mean: f64,
    pub sd: f64,
    pub median: f64,
    pub q025: f64,
    pub q975: f64,
    /// The parameter's value at the draw with the highest posterior density.
    pub map: f64,
}

/// Summaries and diagnostics of every parameter, in the study's order.
#[derive(Debug, Clone, PartialEq)]
pub struct PosteriorSummary {
    pub names: Vec<String>,
    pub parameters: Vec<ParameterSummary>,
    pub diagnostics: Vec<Diagnostics>,
    pub n_draws: usize,
    /// Warnings a reader must see (convergence, effective sample size).
    pub warnings: Vec<String>,
}

/// R̂ above this suggests the chains have not mixed (Vehtari et al. 2021 recommend 1.01).
pub const RHAT_WARN: f64 = 1.01;
/// Fewer effective draws than this per chain make tail quantiles unreliable
/// (Vehtari et al. 2021: 100 per chain).
pub const ESS_PER_CHAIN_WARN: f64 = 100.0;

/// Summarise the kept draws of `chains`.
pub fn summarize(names: &[String], chains: &[Chain]) -> PosteriorSummary {
    let d = names.len();
    let mut best = (f64::NEG_INFINITY, Vec::new());
    for c in chains {
        for (th, lp) in c.theta.iter().zip(&c.ln_posterior) {
            if *lp > best.0 {
                best = (*lp, th.clone());
            }
        }
    }
    let mut parameters = Vec::with_capacity(d);
    let mut diagnostics = Vec::with_capacity(d);
    let mut warnings = Vec::new();
    let mut n_draws = 0;
    for j in 0..d {
        let per_chain: Vec<Vec<f64>> = chains
            .iter()
            .map(|c| c.theta.iter().map(|t| t[j]).collect())
            .collect();
        let mut all: Vec<f64> = per_chain.iter().flatten().copied().collect();
        n_draws = all.len();
        let n = all.len() as f64;
        let mean = all.iter().sum::<f64>() / n;
        let sd = (all.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
        all.sort_by(f64::total_cmp);
        parameters.push(ParameterSummary {
            mean,
            sd,
            median: quantile_sorted(&all, 0.5),
            q025: quantile_sorted(&all, 0.025),
            q975: quantile_sorted(&all, 0.975),
            map: best.1.get(j).copied().unwrap_or(f64::NAN),
        });
        let diag = Diagnostics::of(&per_chain);
        if diag.rhat > RHAT_WARN {
            warnings.push(format!("{}: R-hat {:.3} > {RHAT_WARN}: the chains disagree; run longer or check for several modes", names[j], diag.rhat));
        }
        let min_ess = ESS_PER_CHAIN_WARN * chains.len() as f64;
        if diag.ess_bulk < min_ess || diag.ess_tail < min_ess {
            warnings.push(format!(
                "{}: effective sample size (bulk {:.0}, tail {:.0}) below {min_ess:.0}: quantiles are imprecise; run longer",
                names[j], diag.ess_bulk, diag.ess_tail
            ));
        }
        diagnostics.push(diag);
    }
    if chains
        .iter()
        .any(|c| c.termination == Termination::Interrupted)
    {
        warnings.push("sampling was interrupted: the summaries use the draws made so far".into());
    }
    PosteriorSummary {
        names: names.to_vec(),
        parameters,
        diagnostics,
        n_draws,
        warnings,
    }
}

/// One chain's bookkeeping in the record.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChainWire {
    pub index: usize,
    pub draws: usize,
    pub acceptance_rate: f64,
    pub step_scale: f64,
    pub termination: Termination,
}

/// Sampler settings in the record.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SettingsWire {
    pub sampler: String,
    pub chains: usize,
    pub warmup: usize,
    pub draws: usize,
    pub seed: u64,
    pub likelihood: String,
}

/// `posterior.yaml` body.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PosteriorBody {
    pub parameters: BTreeMap<String, ParameterSummary>,
    pub diagnostics: BTreeMap<String, Diagnostics>,
    pub settings: SettingsWire,
    pub chains: Vec<ChainWire>,
    pub n_draws: usize,
    /// Evaluations of the log posterior, all chains, warm-up included.
    pub n_evaluations: u64,
    pub warnings: Vec<String>,
    /// sha256 of `posterior-samples.csv` written with this record.
    pub samples_sha256: Option<String>,
    pub caution: String,
}

/// The caution every posterior record and report carries.
pub const CAUTION: &str = "This posterior is conditional on the simulator, the surrogate, the priors and the test data. \
It is not a certified material allowable or design value. Use it only together with the applicable codes and standards \
and the judgement of a licensed engineer.";

impl PosteriorBody {
    pub fn new(
        s: &PosteriorSummary,
        chains: &[Chain],
        params: &SamplerParams,
        n_evaluations: u64,
    ) -> Self {
        Self {
            parameters: s
                .names
                .iter()
                .cloned()
                .zip(s.parameters.iter().copied())
                .collect(),
            diagnostics: s
                .names
                .iter()
                .cloned()
                .zip(s.diagnostics.iter().copied())
                .collect(),
            settings: SettingsWire {
                sampler: "random-walk Metropolis, proposal tuned in warm-up".into(),
                chains: params.chains,
                warmup: params.warmup,
                draws: params.draws,
                seed: params.seed,
                likelihood: "Gaussian: known measurement noise plus surrogate predictive variance"
                    .into(),
            },
            chains: chains
                .iter()
                .map(|c| ChainWire {
                    index: c.index,
                    draws: c.theta.len(),
                    acceptance_rate: c.acceptance_rate,
                    step_scale: c.step_scale,
                    termination: c.termination,
                })
                .collect(),
            n_draws: s.n_draws,
            n_evaluations,
            warnings: s.warnings.clone(),
            samples_sha256: None,
            caution: CAUTION.into(),
        }
    }
}
