//! `surrogate.yaml` body, and the way back to a [`FittedSurrogate`].

use super::basis::quantity_groups;
use super::fit::LengthScalePrior;
use super::gp::Trend;
use super::holdout::Holdout;
use super::kernel::Kernel;
use super::model::{ExperimentModel, FittedSurrogate};
use super::validation::Validation;
use super::SurrogateError;
use ndarray::Array2;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Hyperparameters of one component's GP; length-scales in the parameters' units.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HyperWire {
    /// σ², weight units squared.
    pub signal_var: f64,
    /// ℓ per parameter, in the parameter's unit.
    pub length_scales: BTreeMap<String, f64>,
    /// Nugget variance σ²η, weight units squared.
    pub nugget: f64,
    /// (ln σ², ln ℓ…, ln η) on the weights and unit-box inputs (η = nugget/σ²): what
    /// the surrogate is rebuilt from.
    pub ln_internal: Vec<f64>,
    /// Jitter added to the covariance's diagonal to factor it, weight units squared
    /// (0 when none was needed).
    pub jitter: f64,
}

/// One principal-component weight's GP.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ComponentWire {
    /// `pc1`, `pc2`, …
    pub name: String,
    /// Share of the standardised output variance this component carries.
    pub explained: f64,
    /// Hyperparameters; `signal_var`, `nugget` and `jitter` in weight units (the
    /// weights have variance 1 over the runs).
    pub hyperparameters: HyperWire,
    pub ln_marginal_likelihood: f64,
    pub n_starts_ok: usize,
    pub n_evaluations: u64,
    /// Leave-one-out validation of the weight.
    pub validation: Validation,
}

/// The principal-component basis of an experiment's output vector.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BasisWire {
    /// The `surrogate.variance_kept` setting.
    pub variance_kept: f64,
    pub n_components: usize,
    /// Share of the standardised variance the kept components carry.
    pub explained_variance: f64,
    /// Share left out (1 − `explained_variance`); it enters predictions through
    /// `discarded_by_value`.
    pub discarded_variance: f64,
    /// Scale s_q of each output quantity (output units; 0 when constant).
    pub scales: BTreeMap<String, f64>,
    /// The kept basis vectors φ_k, one list of `outputs`-many numbers per component,
    /// standardised units.
    pub vectors: Vec<Vec<f64>>,
    /// Variance the kept components miss at each output value (output units²), the
    /// diagonal added to every prediction.
    pub discarded_by_value: Vec<f64>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct OutputWire {
    pub name: String,
    pub y_mean: f64,
    pub y_sd: f64,
    /// Leave-one-out validation of this output value, through the basis.
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
    pub basis: BasisWire,
    pub components: Vec<ComponentWire>,
    pub outputs: Vec<OutputWire>,
    /// Holdout validation; absent when `surrogate.holdout` is 0.
    #[serde(default)]
    pub holdout: Option<Holdout>,
    pub training: TrainingWire,
}

/// The length-scale prior of a maximum a posteriori fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HyperpriorWire {
    /// `lognormal`.
    pub kind: String,
    /// Prior median of each length-scale, unit-box inputs (parameter range = 1).
    pub median_length_scale: f64,
    /// Standard deviation of ln ℓ.
    pub sd_ln_length_scale: f64,
}

/// `surrogate.yaml` body.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SurrogateBody {
    pub kernel: String,
    pub mean: String,
    pub seed: u64,
    /// The `surrogate.variance_kept` setting.
    pub variance_kept: f64,
    /// The `surrogate.holdout` setting.
    pub holdout: f64,
    /// Null for maximum likelihood.
    pub hyperprior: Option<HyperpriorWire>,
    pub experiments: Vec<ExperimentWire>,
}

impl SurrogateBody {
    pub fn from_fitted(s: &FittedSurrogate, names: &[String]) -> Self {
        let experiments = s
            .experiments
            .iter()
            .map(|e| {
                let value_names: Vec<String> = e.outputs.iter().map(|o| o.name.clone()).collect();
                let groups = quantity_groups(&value_names);
                let mut scales = BTreeMap::new();
                for (j, n) in value_names.iter().enumerate() {
                    let q = n.split('@').next().unwrap_or(n).to_string();
                    scales.entry(q).or_insert(e.basis.scale[j]);
                }
                debug_assert_eq!(groups.len(), e.basis.n_values());
                let explained = e.basis.explained_total();
                ExperimentWire {
                    name: e.experiment.clone(),
                    n_runs: e.point_ids.len(),
                    n_excluded: 0,
                    parameters: names.to_vec(),
                    lower: e.lo.clone(),
                    upper: e.hi.clone(),
                    validation: e.validation.clone(),
                    basis: BasisWire {
                        variance_kept: e.basis.variance_kept,
                        n_components: e.basis.n_components(),
                        explained_variance: explained,
                        discarded_variance: if e.basis.n_components() == 0 {
                            0.0
                        } else {
                            (1.0 - explained).max(0.0)
                        },
                        scales,
                        vectors: e
                            .basis
                            .vectors
                            .columns()
                            .into_iter()
                            .map(|c| c.to_vec())
                            .collect(),
                        discarded_by_value: e.basis.discarded.clone(),
                    },
                    components: e
                        .components
                        .iter()
                        .map(|c| {
                            let gp = &c.gp;
                            ComponentWire {
                                name: c.name.clone(),
                                explained: c.explained,
                                hyperparameters: HyperWire {
                                    signal_var: gp.hyper.ln_signal_var.exp(),
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
                                    nugget: gp.nugget_var(),
                                    ln_internal: gp.hyper.to_vec(),
                                    jitter: gp.jitter,
                                },
                                ln_marginal_likelihood: gp.ln_marginal_likelihood,
                                n_starts_ok: c.n_starts_ok,
                                n_evaluations: c.n_evaluations,
                                validation: c.validation.clone(),
                            }
                        })
                        .collect(),
                    outputs: e
                        .outputs
                        .iter()
                        .map(|o| OutputWire {
                            name: o.name.clone(),
                            y_mean: o.y_mean,
                            y_sd: o.y_sd,
                            validation: o.validation.clone(),
                        })
                        .collect(),
                    holdout: e.holdout.clone(),
                    training: TrainingWire {
                        point_ids: e.point_ids.clone(),
                        inputs: e.inputs.clone(),
                        outputs: e.outputs_raw.clone(),
                    },
                }
            })
            .collect();
        Self {
            kernel: s.kernel.name().into(),
            mean: s.trend.name().into(),
            seed: s.seed,
            variance_kept: s.variance_kept,
            holdout: s.holdout,
            hyperprior: s.hyperprior.map(|p| HyperpriorWire {
                kind: "lognormal".into(),
                median_length_scale: p.ln_median.exp(),
                sd_ln_length_scale: p.sd,
            }),
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
            let p = names.len();
            let k = e.basis.vectors.len();
            if e.components.len() != k || e.basis.vectors.iter().any(|v| v.len() != p) {
                return Err(SurrogateError::MalformedRecord {
                    experiment: e.name.clone(),
                    what: format!(
                        "{k} basis vectors of lengths {:?} for {} components and {p} outputs",
                        e.basis.vectors.iter().map(|v| v.len()).collect::<Vec<_>>(),
                        e.components.len()
                    ),
                });
            }
            let vectors = Array2::from_shape_fn((p, k), |(j, c)| e.basis.vectors[c][j]);
            let explained: Vec<f64> = e.components.iter().map(|c| c.explained).collect();
            let hypers: Vec<Vec<f64>> = e
                .components
                .iter()
                .map(|c| c.hyperparameters.ln_internal.clone())
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
                (vectors, explained, e.basis.variance_kept),
                &hypers,
                kernel,
                trend,
            )?;
            for (c, w) in m.components.iter_mut().zip(&e.components) {
                c.n_starts_ok = w.n_starts_ok;
                c.n_evaluations = w.n_evaluations;
            }
            m.holdout = e.holdout.clone();
            experiments.push(m);
        }
        Ok(FittedSurrogate {
            kernel,
            trend,
            seed: self.seed,
            variance_kept: self.variance_kept,
            holdout: self.holdout,
            hyperprior: self.hyperprior.as_ref().map(|h| LengthScalePrior {
                ln_median: h.median_length_scale.ln(),
                sd: h.sd_ln_length_scale,
            }),
            experiments,
        })
    }
}
