//! `surrogate.yaml` body, and the way back to a [`FittedSurrogate`].

use super::gp::Trend;
use super::kernel::Kernel;
use super::model::{ExperimentModel, FittedSurrogate};
use super::validation::Validation;
use super::SurrogateError;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Hyperparameters of one output in the parameters' and output's own units.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HyperWire {
    /// σ², output units squared.
    pub signal_var: f64,
    /// ℓ per parameter, in the parameter's unit.
    pub length_scales: BTreeMap<String, f64>,
    /// Nugget variance, output units squared.
    pub nugget: f64,
    /// (ln σ², ln ℓ…, ln η) on standardised outputs and unit-box inputs (η = nugget/σ²): what the
    /// surrogate is rebuilt from.
    pub ln_internal: Vec<f64>,
    /// Jitter added to the covariance's diagonal to factor it, output units squared
    /// (0 when none was needed).
    pub jitter: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct OutputWire {
    pub name: String,
    pub y_mean: f64,
    pub y_sd: f64,
    /// Absent when the output is the same in every run (predicted exactly).
    pub hyperparameters: Option<HyperWire>,
    pub ln_marginal_likelihood: Option<f64>,
    pub n_starts_ok: usize,
    pub n_evaluations: u64,
    pub validation: Validation,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TrainingWire {
    pub point_ids: Vec<String>,
    /// One row per run: parameter values.
    pub inputs: Vec<Vec<f64>>,
    /// One row per run: output values (order of `outputs`).
    pub outputs: Vec<Vec<f64>>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ExperimentWire {
    pub name: String,
    pub n_runs: usize,
    /// Design points without a finished run (failed or not yet run), left out of the fit.
    #[serde(default)]
    pub n_excluded: usize,
    pub parameters: Vec<String>,
    pub lower: Vec<f64>,
    pub upper: Vec<f64>,
    /// Pooled over the experiment's outputs.
    pub validation: Validation,
    pub outputs: Vec<OutputWire>,
    pub training: TrainingWire,
}

/// `surrogate.yaml` body.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SurrogateBody {
    pub kernel: String,
    pub mean: String,
    pub seed: u64,
    pub experiments: Vec<ExperimentWire>,
}

impl SurrogateBody {
    pub fn from_fitted(s: &FittedSurrogate, names: &[String]) -> Self {
        let experiments = s
            .experiments
            .iter()
            .map(|e| ExperimentWire {
                name: e.experiment.clone(),
                n_runs: e.point_ids.len(),
                n_excluded: 0,
                parameters: names.to_vec(),
                lower: e.lo.clone(),
                upper: e.hi.clone(),
                validation: e.validation.clone(),
                outputs: e
                    .outputs
                    .iter()
                    .map(|o| OutputWire {
                        name: o.name.clone(),
                        y_mean: o.y_mean,
                        y_sd: o.y_sd,
                        hyperparameters: o.gp.as_ref().map(|gp| {
                            let s2 = o.y_sd * o.y_sd;
                            HyperWire {
                                signal_var: gp.hyper.ln_signal_var.exp() * s2,
                                length_scales: names
                                    .iter()
                                    .enumerate()
                                    .map(|(j, n)| {
                                        (
                                            n.clone(),
                                            gp.hyper.ln_length_scales[j].exp()
                                                * (e.hi[j] - e.lo[j]),
                                        )
                                    })
                                    .collect(),
                                nugget: gp.hyper.ln_nugget.exp()
                                    * gp.hyper.ln_signal_var.exp()
                                    * s2,
                                ln_internal: gp.hyper.to_vec(),
                                jitter: gp.jitter * s2,
                            }
                        }),
                        ln_marginal_likelihood: o.gp.as_ref().map(|g| g.ln_marginal_likelihood),
                        n_starts_ok: o.n_starts_ok,
                        n_evaluations: o.n_evaluations,
                        validation: o.validation.clone(),
                    })
                    .collect(),
                training: TrainingWire {
                    point_ids: e.point_ids.clone(),
                    inputs: e.inputs.clone(),
                    outputs: e.outputs_raw.clone(),
                },
            })
            .collect();
        Self {
            kernel: s.kernel.name().into(),
            mean: s.trend.name().into(),
            seed: s.seed,
            experiments,
        }
    }

    /// Rebuild the surrogate (factorisations are recomputed at the recorded hyperparameters).
    ///
    /// # Errors
    /// An unknown kernel or mean name, or a factorisation that fails.
    pub fn to_fitted(&self) -> Result<FittedSurrogate, SurrogateError> {
        crate::init_blas();
        let kernel = match self.kernel.as_str() {
            "matern52" => Kernel::Matern52,
            "matern32" => Kernel::Matern32,
            "squared-exponential" => Kernel::SquaredExponential,
            other => {
                return Err(SurrogateError::UnknownName {
                    what: "kernel",
                    name: other.into(),
                })
            }
        };
        let trend = match self.mean.as_str() {
            "constant" => Trend::Constant,
            "linear" => Trend::Linear,
            "zero" => Trend::Zero,
            other => {
                return Err(SurrogateError::UnknownName {
                    what: "mean",
                    name: other.into(),
                })
            }
        };
        let mut experiments = Vec::new();
        for e in &self.experiments {
            let names: Vec<String> = e.outputs.iter().map(|o| o.name.clone()).collect();
            let hypers: Vec<Option<Vec<f64>>> = e
                .outputs
                .iter()
                .map(|o| o.hyperparameters.as_ref().map(|h| h.ln_internal.clone()))
                .collect();
            let mut m = ExperimentModel::rebuild(
                &e.name,
                e.lower.clone(),
                e.upper.clone(),
                (
                    &e.training.point_ids,
                    &e.training.inputs,
                    &e.training.outputs,
                ),
                &names,
                &hypers,
                kernel,
                trend,
            )?;
            for (o, w) in m.outputs.iter_mut().zip(&e.outputs) {
                o.n_starts_ok = w.n_starts_ok;
                o.n_evaluations = w.n_evaluations;
            }
            experiments.push(m);
        }
        Ok(FittedSurrogate {
            kernel,
            trend,
            seed: self.seed,
            experiments,
        })
    }
}
