//! Posterior summaries and the `posterior.yaml` body.

use super::chain::{Chain, Restart, SamplerParams, Termination};
use super::diagnostics::{quantile_sorted, Diagnostics, Pooled, ESS_WARN, RHAT_WARN};
use super::discrepancy::{Hyper, HyperKind};
use super::map::{MapEstimate, MapStart, MapTermination};
use super::posterior::LogPosterior;
use crate::study::spec::SamplerChoice;
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

/// Marginal summary of a derived quantity (a noise sd or variance).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Marginal {
    pub mean: f64,
    pub sd: f64,
    pub median: f64,
    pub q025: f64,
    pub q975: f64,
}

/// Monte Carlo standard errors of one quantity's posterior summaries.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Mcse {
    /// MCSE of the posterior mean, sd / √(bulk ESS).
    pub mean: f64,
    /// MCSE of the median and of the 2.5 % and 97.5 % quantiles ([`mcse_quantile`];
    /// absent, NaN, in records made before they were added).
    #[serde(default = "nan")]
    pub median: f64,
    #[serde(default = "nan")]
    pub q025: f64,
    #[serde(default = "nan")]
    pub q975: f64,
}

fn nan() -> f64 {
    f64::NAN
}

/// The posterior of one experiment's unknown noise.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct NoiseSummary {
    /// Of the noise standard deviation σ.
    pub sd: Marginal,
    /// Of the noise variance σ².
    pub variance: Marginal,
    /// R̂ and ESS of the σ draws.
    pub diagnostics: Diagnostics,
    /// MCSE of the posterior means of σ (`sd`) and σ² (`variance`).
    pub mcse: NoiseMcse,
}

/// MCSE of the posterior means of a noise sd and variance.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct NoiseMcse {
    pub sd: f64,
    pub variance: f64,
}

/// The posterior, or the fixed value, of one model-discrepancy hyperparameter.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HyperSummary {
    /// `fixed` (a value the study gives), or the prior it was sampled with, or estimated
    /// under (e.g. `half_normal(scale 0.1)`).
    pub prior: String,
    /// The value when fixed (given, or estimated: [`Self::fixed_at`]).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub value: Option<f64>,
    /// How a fixed value other than the study's own was found: `map`, the joint
    /// posterior mode (`hyperparameters: map`; [`DiscrepancyMap`]). Absent for a value the
    /// study gives, for a sampled hyperparameter, and in records made before the key
    /// existed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fixed_at: Option<FixedAt>,
    /// Marginal posterior when sampled.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub posterior: Option<Marginal>,
    /// R̂ and ESS when sampled.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub diagnostics: Option<Diagnostics>,
    /// MCSE of the posterior mean when sampled.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub mcse_mean: Option<f64>,
}

/// How a discrepancy hyperparameter was fixed when the study did not give its value.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FixedAt {
    /// At the joint posterior mode of the parameters, noise variances and
    /// hyperparameters, found before sampling.
    Map,
}

/// The joint posterior mode that fixed the discrepancy hyperparameters
/// (`hyperparameters: map`): where it is, how high, and how the search went. The
/// hyperparameters' values are under `discrepancy` (`fixed_at: map`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DiscrepancyMap {
    /// What was maximised and how.
    pub method: String,
    /// ln p(θ̂, σ̂², ŝ, ℓ̂ | y) + const at the mode, hyperparameter priors included
    /// (normalising constants of the priors left out, as `log_posterior`).
    pub ln_posterior: f64,
    /// θ̂, the parameters at the joint mode (a by-product: the sampled posterior of θ
    /// is summarised under `parameters`).
    pub parameters: BTreeMap<String, f64>,
    /// σ̂ at the joint mode, for experiments whose noise is estimated.
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub noise_sd: BTreeMap<String, f64>,
    /// Every start of the search, in order.
    pub starts: Vec<MapStart>,
    /// The start whose end point is the mode.
    pub best_start: usize,
    /// Evaluations of the log posterior by the search (starting candidates included);
    /// not counted in the record's `n_evaluations`, which are the sampler's.
    pub n_evaluations: u64,
}

/// A MAP of a discrepancy sd below this share of its prior's scale τ is reported as
/// zero: δ is then below 10⁻⁴ of the measured values (τ is 0.1 × their largest mean by
/// default), far below any noise. Our threshold, for the warning only.
pub const SD_NEGLIGIBLE: f64 = 1e-3;
/// A start of the MAP search that ends more than this many nats below the best is
/// reported: it stopped at another local mode (starts that reach the same mode agree to
/// about 10⁻⁸). Our threshold: a tenth of a nat is a density ratio of 0.9, small, but
/// a second mode is worth knowing of when the hyperparameters are fixed at one.
pub const MAP_SPREAD_WARN: f64 = 0.1;

/// The discrepancy of one output quantity of one experiment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DiscrepancySummary {
    /// Correlation along x (`squared-exponential`, `matern52`, `matern32`).
    pub kernel: String,
    /// Its standard deviation s, output units.
    pub sd: HyperSummary,
    /// Its length-scale ℓ, x units (absent without x).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub length_scale: Option<HyperSummary>,
}

/// Posterior correlation matrix of the parameters.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Correlation {
    /// Row and column order.
    pub names: Vec<String>,
    pub matrix: Vec<Vec<f64>>,
}

/// Summaries and diagnostics of every parameter, in the study's order.
#[derive(Debug, Clone, PartialEq)]
pub struct PosteriorSummary {
    pub names: Vec<String>,
    pub parameters: Vec<ParameterSummary>,
    pub diagnostics: Vec<Diagnostics>,
    /// Monte Carlo standard error of each parameter's posterior mean.
    pub mcse: Vec<Mcse>,
    /// Pearson correlation of the parameters over all kept draws.
    pub correlation: Correlation,
    /// Experiments whose noise was estimated, with their noise posterior.
    pub noise: Vec<(String, NoiseSummary)>,
    /// Model discrepancy per (experiment, quantity), when the study has one
    /// ([`PosteriorSummary::with_discrepancy`]).
    pub discrepancy: Vec<(String, String, DiscrepancySummary)>,
    /// The joint mode that fixed the discrepancy hyperparameters
    /// ([`PosteriorSummary::with_map`]).
    pub discrepancy_map: Option<DiscrepancyMap>,
    pub n_draws: usize,
    /// Warnings a reader must see (convergence, effective sample size).
    pub warnings: Vec<String>,
}

/// Moments and quantiles of pooled draws, given in ascending order ([`Pooled::sorted`]).
fn marginal(sorted: &[f64]) -> Marginal {
    let n = sorted.len() as f64;
    let mean = sorted.iter().sum::<f64>() / n;
    let sd = (sorted.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    Marginal {
        mean,
        sd,
        median: quantile_sorted(sorted, 0.5),
        q025: quantile_sorted(sorted, 0.025),
        q975: quantile_sorted(sorted, 0.975),
    }
}

/// Warnings for one quantity's diagnostics.
fn diagnostic_warnings(name: &str, d: &Diagnostics, warnings: &mut Vec<String>) {
    if d.rhat.is_nan() || d.rhat > RHAT_WARN {
        warnings.push(format!(
            "{name}: R-hat {:.3} > {RHAT_WARN}: the chains disagree; run longer or check for several modes",
            d.rhat
        ));
    }
    if d.ess_bulk.is_nan() || d.ess_tail.is_nan() || d.ess_bulk < ESS_WARN || d.ess_tail < ESS_WARN
    {
        warnings.push(format!(
            "{name}: effective sample size (bulk {:.0}, tail {:.0}) below {ESS_WARN:.0}: means and quantiles are imprecise; run longer",
            d.ess_bulk, d.ess_tail
        ));
    }
}

/// Pearson correlation of the columns of `rows`.
fn correlation(rows: &[&Vec<f64>], d: usize) -> Vec<Vec<f64>> {
    let n = rows.len() as f64;
    let mut mean = vec![0.0; d];
    for r in rows {
        for j in 0..d {
            mean[j] += r[j] / n;
        }
    }
    let mut c = vec![vec![0.0; d]; d];
    for r in rows {
        for a in 0..d {
            for b in 0..=a {
                c[a][b] += (r[a] - mean[a]) * (r[b] - mean[b]);
            }
        }
    }
    let sd: Vec<f64> = (0..d).map(|a| c[a][a].sqrt()).collect();
    let mut out = vec![vec![0.0; d]; d];
    for a in 0..d {
        for b in 0..=a {
            let r = if a == b {
                1.0
            } else {
                (c[a][b] / (sd[a] * sd[b])).clamp(-1.0, 1.0)
            };
            out[a][b] = r;
            out[b][a] = r;
        }
    }
    out
}

/// Summarise the kept draws of `chains`: parameters `names` (the columns of
/// [`Chain::theta`]) and estimated noise of experiments `noise_names` (the columns of
/// [`Chain::noise_var`]).
///
/// # Formula
/// MCSE of a mean: sd / √ESS_bulk; of a quantile: [`mcse_quantile`]. Vehtari et al. (2021) use the ESS of the raw draws
/// for the mean; the bulk ESS (of the rank-normalised draws) equals it for a normal
/// posterior and is close for smooth unimodal ones.
pub fn summarize(names: &[String], noise_names: &[String], chains: &[Chain]) -> PosteriorSummary {
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
    let mut mcse = Vec::with_capacity(d);
    let mut warnings = Vec::new();
    let n_draws = chains.iter().map(|c| c.theta.len()).sum();
    for j in 0..d {
        let per_chain: Vec<Vec<f64>> = chains
            .iter()
            .map(|c| c.theta.iter().map(|t| t[j]).collect())
            .collect();
        let pooled = Pooled::new(&per_chain);
        let m = marginal(&pooled.sorted);
        parameters.push(ParameterSummary {
            mean: m.mean,
            sd: m.sd,
            median: m.median,
            q025: m.q025,
            q975: m.q975,
            map: best.1.get(j).copied().unwrap_or(f64::NAN),
        });
        let diag = Diagnostics::of_pooled(&pooled);
        diagnostic_warnings(&names[j], &diag, &mut warnings);
        mcse.push(Mcse {
            mean: m.sd / diag.ess_bulk.sqrt(),
            median: pooled.mcse_quantile(0.5),
            q025: pooled.mcse_quantile(0.025),
            q975: pooled.mcse_quantile(0.975),
        });
        diagnostics.push(diag);
    }
    let rows: Vec<&Vec<f64>> = chains.iter().flat_map(|c| &c.theta).collect();
    let correlation = Correlation {
        names: names.to_vec(),
        matrix: correlation(&rows, d),
    };
    let mut noise = Vec::with_capacity(noise_names.len());
    for (k, name) in noise_names.iter().enumerate() {
        let var_chains: Vec<Vec<f64>> = chains
            .iter()
            .map(|c| c.noise_var.iter().map(|v| v[k]).collect())
            .collect();
        let sd_chains: Vec<Vec<f64>> = var_chains
            .iter()
            .map(|c| c.iter().map(|v| v.sqrt()).collect())
            .collect();
        let sd_pooled = Pooled::new(&sd_chains);
        let (sd, variance) = (
            marginal(&sd_pooled.sorted),
            marginal(&Pooled::new(&var_chains).sorted),
        );
        let diag = Diagnostics::of_pooled(&sd_pooled);
        diagnostic_warnings(&format!("noise sd of {name}"), &diag, &mut warnings);
        noise.push((
            name.clone(),
            NoiseSummary {
                sd,
                variance,
                diagnostics: diag,
                mcse: NoiseMcse {
                    sd: sd.sd / diag.ess_bulk.sqrt(),
                    variance: variance.sd / diag.ess_bulk.sqrt(),
                },
            },
        ));
    }
    for c in chains {
        if let Some(r) = c.restarted_from {
            warnings.push(format!(
                "chain {} was stranded halfway through warm-up ({:.4e} below chain {} in log density) and restarted from chain {}'s position: the posterior may have local modes the surrogate made far from the main one",
                c.index, r.gap, r.from, r.from
            ));
        }
    }
    let divergent: usize = chains.iter().map(|c| c.divergences).sum();
    if divergent > 0 {
        warnings.push(format!(
            "{divergent} divergent trajectories after warm-up: the sampler could not follow the posterior's curvature somewhere, and the draws may miss that region; look at where they occur, or reparametrise"
        ));
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
        mcse,
        correlation,
        noise,
        discrepancy: Vec::new(),
        discrepancy_map: None,
        n_draws,
        warnings,
    }
}

impl PosteriorSummary {
    /// Add the summaries of the model-discrepancy hyperparameters of `post` (sampled
    /// ones from the draws of `chains`, fixed ones as they are), with their warnings.
    pub fn with_discrepancy(mut self, post: &LogPosterior<'_>, chains: &[Chain]) -> Self {
        let mut column = 0;
        for (_, lik) in &post.experiments {
            let Some(d) = lik.discrepancy() else {
                continue;
            };
            let mut per_block: Vec<(Option<HyperSummary>, Option<HyperSummary>)> =
                vec![(None, None); d.blocks.len()];
            for (b, kind, h) in d.hypers() {
                let summary = if h.is_sampled() {
                    let per_chain: Vec<Vec<f64>> = chains
                        .iter()
                        .map(|c| c.discrepancy.iter().map(|v| v[column]).collect())
                        .collect();
                    column += 1;
                    let pooled = Pooled::new(&per_chain);
                    let m = marginal(&pooled.sorted);
                    let diag = Diagnostics::of_pooled(&pooled);
                    let what = match kind {
                        HyperKind::Sd => "discrepancy sd",
                        HyperKind::LengthScale => "discrepancy length-scale",
                    };
                    diagnostic_warnings(
                        &format!("{what} of {}.{}", lik.name, d.blocks[b].quantity),
                        &diag,
                        &mut self.warnings,
                    );
                    HyperSummary {
                        prior: h.describe(),
                        value: None,
                        posterior: Some(m),
                        diagnostics: Some(diag),
                        mcse_mean: Some(m.sd / diag.ess_bulk.sqrt()),
                        fixed_at: None,
                    }
                } else {
                    let Hyper::Fixed(v) = h else {
                        unreachable!("not sampled means fixed")
                    };
                    HyperSummary {
                        prior: h.describe(),
                        value: Some(v),
                        posterior: None,
                        diagnostics: None,
                        mcse_mean: None,
                        fixed_at: None,
                    }
                };
                match kind {
                    HyperKind::Sd => per_block[b].0 = Some(summary),
                    HyperKind::LengthScale => per_block[b].1 = Some(summary),
                }
            }
            for (blk, (sd, length_scale)) in d.blocks.iter().zip(per_block) {
                self.discrepancy.push((
                    lik.name.clone(),
                    blk.quantity.clone(),
                    DiscrepancySummary {
                        kernel: d.kernel.name().into(),
                        sd: sd.expect("every block has an sd"),
                        length_scale,
                    },
                ));
            }
        }
        self
    }
}

impl PosteriorSummary {
    /// Record that the discrepancy hyperparameters sampled in `searched` (the posterior
    /// the mode was found for) were fixed at its mode `est` before sampling: each such
    /// hyperparameter's summary gets its prior, the value and `fixed_at: map`, the
    /// summary gets [`DiscrepancyMap`], and warnings when an sd's mode is about zero,
    /// a start ended in a lower mode, or a start did not converge.
    ///
    /// Call after [`Self::with_discrepancy`] on the posterior that was sampled.
    pub fn with_map(mut self, searched: &LogPosterior<'_>, est: &MapEstimate) -> Self {
        let (theta, noise_var, disc) = searched.split_state(est.x.clone());
        for ((e, q, kind, prior), v) in searched.discrepancy_labels().into_iter().zip(disc) {
            let Some((_, _, d)) = self
                .discrepancy
                .iter_mut()
                .find(|(de, dq, _)| *de == e && *dq == q)
            else {
                continue;
            };
            let h = match kind {
                HyperKind::Sd => &mut d.sd,
                HyperKind::LengthScale => match d.length_scale.as_mut() {
                    Some(l) => l,
                    None => continue,
                },
            };
            *h = HyperSummary {
                prior: prior.describe(),
                value: Some(v),
                posterior: None,
                diagnostics: None,
                mcse_mean: None,
                fixed_at: Some(FixedAt::Map),
            };
            if kind == HyperKind::Sd && v < SD_NEGLIGIBLE * prior.reference() {
                self.warnings.push(format!(
                    "discrepancy sd of {e}.{q}: its posterior mode is about zero ({v:.3e}): at the mode the data show no discrepancy, so fixing it there calibrates as without one; consider `hyperparameters: sampled`"
                ));
            }
        }
        let best = est.ln_posterior;
        let lower = est
            .starts
            .iter()
            .filter(|s| s.termination != MapTermination::NoFiniteStart)
            .filter(|s| best - s.ln_posterior > MAP_SPREAD_WARN)
            .count();
        if lower > 0 {
            self.warnings.push(format!(
                "posterior mode: {lower} of {} starts ended more than {MAP_SPREAD_WARN} below the best ({best:.6}): the joint posterior has other local modes; the best was used",
                est.starts.len()
            ));
        }
        let unconverged = est
            .starts
            .iter()
            .filter(|s| s.termination != MapTermination::Converged)
            .count();
        if unconverged > 0 {
            self.warnings.push(format!(
                "posterior mode: {unconverged} of {} starts did not converge (iteration limit, or no finite starting point)",
                est.starts.len()
            ));
        }
        let noise_names = searched.noise_names();
        self.discrepancy_map = Some(DiscrepancyMap {
            method: "maximum of the joint posterior density of the parameters, estimated noise variances and discrepancy hyperparameters (constrained scale, no Jacobian); Nelder-Mead on (logit θ, ln σ², ln s, ln ℓ), restarted until no gain, from several starts".into(),
            ln_posterior: est.ln_posterior,
            parameters: self.names.iter().cloned().zip(theta).collect(),
            noise_sd: noise_names
                .into_iter()
                .zip(noise_var.iter().map(|v| v.sqrt()))
                .collect(),
            starts: est.starts.clone(),
            best_start: est.best_start,
            n_evaluations: est.n_evaluations,
        });
        self
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
    /// Set when the chain was stranded and restarted from another halfway through warm-up.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub restarted_from: Option<Restart>,
    /// Divergent trajectories after warm-up (`sampler: nuts`; left out when 0).
    #[serde(default, skip_serializing_if = "is_zero")]
    pub divergences: usize,
}

fn is_zero(n: &usize) -> bool {
    *n == 0
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
    /// With `until_converged`: the most kept draws per chain allowed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_draws: Option<usize>,
    /// The earlier `posterior.yaml` whose draws gave the prior (`prior_from`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub prior_from: Option<String>,
}

/// `posterior.yaml` body.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PosteriorBody {
    pub parameters: BTreeMap<String, ParameterSummary>,
    pub diagnostics: BTreeMap<String, Diagnostics>,
    /// Monte Carlo standard errors per parameter (absent in records of assay 0.1.0
    /// before this key was added, hence the default).
    #[serde(default)]
    pub mcse: BTreeMap<String, Mcse>,
    /// Posterior correlation matrix of the parameters.
    #[serde(default)]
    pub correlation: Correlation,
    /// Posterior of each estimated measurement noise, by experiment; absent when every
    /// noise is known.
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub noise: BTreeMap<String, NoiseSummary>,
    /// Model discrepancy by experiment and output quantity; absent without
    /// `calibration.discrepancy`.
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub discrepancy: BTreeMap<String, BTreeMap<String, DiscrepancySummary>>,
    /// With `hyperparameters: map`: the joint posterior mode that fixed the discrepancy
    /// hyperparameters; absent otherwise (and in records made before the key existed).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub discrepancy_map: Option<DiscrepancyMap>,
    pub settings: SettingsWire,
    pub chains: Vec<ChainWire>,
    pub n_draws: usize,
    /// Evaluations of the log posterior, all chains, warm-up included.
    pub n_evaluations: u64,
    /// Wall-clock seconds the sampling took (starting points, warm-up and kept draws of
    /// every chain), a part of the provenance's `elapsed_s`; absent in records made
    /// before the key existed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sampling_s: Option<f64>,
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
            mcse: s
                .names
                .iter()
                .cloned()
                .zip(s.mcse.iter().copied())
                .collect(),
            correlation: s.correlation.clone(),
            noise: s.noise.iter().cloned().collect(),
            discrepancy: {
                let mut m: BTreeMap<String, BTreeMap<String, DiscrepancySummary>> = BTreeMap::new();
                for (e, q, d) in &s.discrepancy {
                    m.entry(e.clone()).or_default().insert(q.clone(), d.clone());
                }
                m
            },
            discrepancy_map: s.discrepancy_map.clone(),
            settings: SettingsWire {
                sampler: match params.kind {
                    SamplerChoice::AdaptiveMetropolis => {
                        "random-walk Metropolis, proposal tuned in warm-up"
                    }
                    SamplerChoice::Ensemble => {
                        "affine-invariant ensemble (stretch move, a = 2); one chain per walker"
                    }
                    SamplerChoice::Nuts => {
                        "No-U-Turn Hamiltonian Monte Carlo, step size and dense metric tuned in warm-up"
                    }
                }
                .into(),
                chains: chains.len(),
                warmup: params.warmup,
                draws: params.draws,
                seed: params.seed,
                likelihood: format!(
                    "{}{}",
                    if s.noise.is_empty() {
                        "Gaussian: known measurement noise plus surrogate predictive variance"
                    } else {
                        "Gaussian: measurement noise (known, or unknown variance with an inverse-gamma prior, sampled) plus surrogate predictive variance"
                    },
                    match (s.discrepancy.is_empty(), s.discrepancy_map.is_some()) {
                        (true, _) => "",
                        (false, false) => " plus a Gaussian-process model discrepancy over x",
                        (false, true) => " plus a Gaussian-process model discrepancy over x, its hyperparameters fixed at the joint posterior mode",
                    }
                ),
                max_draws: params.until_converged,
                prior_from: None,
            },
            chains: chains
                .iter()
                .map(|c| ChainWire {
                    index: c.index,
                    draws: c.theta.len(),
                    acceptance_rate: c.acceptance_rate,
                    step_scale: c.step_scale,
                    termination: c.termination,
                    restarted_from: c.restarted_from,
                    divergences: c.divergences,
                })
                .collect(),
            n_draws: s.n_draws,
            n_evaluations,
            sampling_s: None,
            warnings: s.warnings.clone(),
            samples_sha256: None,
            caution: CAUTION.into(),
        }
    }
}
