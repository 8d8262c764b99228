//! The fitted surrogate of every experiment: one GP per output value, on inputs scaled
//! to the unit box and standardised outputs, reported in original units.

use super::fit::{fit_hyperparameters, FitParams, HyperBounds};
use super::gp::{Gp, Hyper, Trend};
use super::kernel::Kernel;
use super::validation::{summarize, Validation};
use super::SurrogateError;
use crate::runs::{ExperimentRuns, RunSet};
use crate::study::{MeanChoice, Parameter, SurrogateParams};
use ndarray::{Array1, Array2};
use rayon::prelude::*;

/// Fewest runs per experiment for any GP (common practice).
pub const MIN_RUNS: usize = 3;

/// Runs needed for `d` parameters: at least one per hyperparameter (d length-scales,
/// the signal variance and the nugget), and never fewer than [`MIN_RUNS`].
pub fn min_runs(d: usize) -> usize {
    MIN_RUNS.max(d + 2)
}

/// Starts of the hyperparameter search per output.
pub const N_STARTS: usize = 6;

/// The GP of one output value.
#[derive(Debug, Clone)]
pub struct OutputModel {
    pub name: String,
    /// Standardisation: y_std = (y − y_mean) / y_sd.
    pub y_mean: f64,
    pub y_sd: f64,
    /// `None` when the output is the same in every run (it is then predicted exactly).
    pub gp: Option<Gp>,
    pub n_starts_ok: usize,
    pub n_evaluations: u64,
    pub validation: Validation,
}

/// The surrogate of one experiment.
#[derive(Debug, Clone)]
pub struct ExperimentModel {
    pub experiment: String,
    pub lo: Vec<f64>,
    pub hi: Vec<f64>,
    pub point_ids: Vec<String>,
    pub inputs: Vec<Vec<f64>>,
    pub outputs_raw: Vec<Vec<f64>>,
    pub outputs: Vec<OutputModel>,
    pub validation: Validation,
}

/// Surrogates of all experiments.
#[derive(Debug, Clone)]
pub struct FittedSurrogate {
    pub kernel: Kernel,
    pub trend: Trend,
    pub seed: u64,
    pub experiments: Vec<ExperimentModel>,
}

fn trend_of(m: MeanChoice) -> Trend {
    match m {
        MeanChoice::Constant => Trend::Constant,
        MeanChoice::Linear => Trend::Linear,
    }
}

fn unit_inputs(inputs: &[Vec<f64>], lo: &[f64], hi: &[f64]) -> Array2<f64> {
    Array2::from_shape_fn((inputs.len(), lo.len()), |(i, j)| {
        (inputs[i][j] - lo[j]) / (hi[j] - lo[j])
    })
}

fn standardize(col: &[f64]) -> (f64, f64) {
    let n = col.len() as f64;
    let mean = col.iter().sum::<f64>() / n;
    let var = col.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n;
    (mean, var.sqrt())
}

/// Relative spread under which an output is treated as constant over the runs.
const CONSTANT_RTOL: f64 = 1e-12;

fn is_constant(mean: f64, sd: f64) -> bool {
    sd <= CONSTANT_RTOL * mean.abs().max(f64::MIN_POSITIVE) || sd == 0.0
}

impl ExperimentModel {
    /// Surrogate mean and variance of every output value at parameter values `theta`.
    pub fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let u = Array2::from_shape_fn((1, theta.len()), |(_, j)| {
            (theta[j] - self.lo[j]) / (self.hi[j] - self.lo[j])
        });
        let mut mean = Vec::with_capacity(self.outputs.len());
        let mut var = Vec::with_capacity(self.outputs.len());
        for o in &self.outputs {
            match &o.gp {
                Some(gp) => {
                    let (m, v) = gp.predict(u.view());
                    mean.push(o.y_mean + o.y_sd * m[0]);
                    var.push(o.y_sd * o.y_sd * v[0]);
                }
                None => {
                    mean.push(o.y_mean);
                    var.push(0.0);
                }
            }
        }
        (mean, var)
    }

    /// Rebuild at known hyperparameters (ln scale, standardised units) — the factorisation
    /// is recomputed from the training data, so records stay small and exact.
    #[allow(clippy::too_many_arguments)] // mirrors the record's fields one to one
    pub fn rebuild(
        experiment: &str,
        lo: Vec<f64>,
        hi: Vec<f64>,
        runs: (&[String], &[Vec<f64>], &[Vec<f64>]),
        names: &[String],
        hypers: &[Option<Vec<f64>>],
        kernel: Kernel,
        trend: Trend,
    ) -> Result<Self, SurrogateError> {
        let (ids, inputs, outputs) = runs;
        let x = unit_inputs(inputs, &lo, &hi);
        let mut models = Vec::new();
        for (k, name) in names.iter().enumerate() {
            let col: Vec<f64> = outputs.iter().map(|r| r[k]).collect();
            let (mean, sd) = standardize(&col);
            let gp = match &hypers[k] {
                Some(h) if !is_constant(mean, sd) => {
                    let y = Array1::from_iter(col.iter().map(|v| (v - mean) / sd));
                    Some(Gp::fit(
                        x.view(),
                        y.view(),
                        kernel,
                        trend,
                        Hyper::from_slice(h),
                    )?)
                }
                _ => None,
            };
            let validation = validate_output(gp.as_ref(), &col, mean, sd);
            models.push(OutputModel {
                name: name.clone(),
                y_mean: mean,
                y_sd: if gp.is_some() { sd } else { 0.0 },
                gp,
                n_starts_ok: 0,
                n_evaluations: 0,
                validation,
            });
        }
        let validation = summarize(&models.iter().map(|m| &m.validation).collect::<Vec<_>>());
        Ok(Self {
            experiment: experiment.into(),
            lo,
            hi,
            point_ids: ids.to_vec(),
            inputs: inputs.to_vec(),
            outputs_raw: outputs.to_vec(),
            outputs: models,
            validation,
        })
    }
}

/// Leave-one-out means and sds of one output column, in the output's units (an
/// output without a GP is predicted exactly: its own values, sd 0).
fn loo_original(gp: Option<&Gp>, col: &[f64], mean: f64, sd: f64) -> (Vec<f64>, Vec<f64>) {
    match gp {
        Some(gp) => {
            let y = Array1::from_iter(col.iter().map(|v| (v - mean) / sd));
            let (m, v) = gp.leave_one_out(y.view());
            (
                m.iter().map(|m| mean + sd * m).collect(),
                v.iter().map(|v| sd * v.sqrt()).collect(),
            )
        }
        None => (col.to_vec(), vec![0.0; col.len()]),
    }
}

fn validate_output(gp: Option<&Gp>, col: &[f64], mean: f64, sd: f64) -> Validation {
    let (pred, psd) = loo_original(gp, col, mean, sd);
    Validation::from_loo(col, &pred, &psd)
}

impl ExperimentModel {
    /// Leave-one-out predictions of every output value at every training run, in the
    /// outputs' units: per output, (observed, LOO mean, LOO sd), runs in `point_ids`
    /// order. The same numbers the validation summaries are made from.
    pub fn leave_one_out(&self) -> Vec<(Vec<f64>, Vec<f64>, Vec<f64>)> {
        self.outputs
            .iter()
            .enumerate()
            .map(|(k, o)| {
                let col: Vec<f64> = self.outputs_raw.iter().map(|r| r[k]).collect();
                let (m, s) = loo_original(o.gp.as_ref(), &col, o.y_mean, o.y_sd);
                (col, m, s)
            })
            .collect()
    }
}

/// Fit the surrogate of every experiment that has runs.
///
/// # Errors
/// Too few runs for an experiment, or a hyperparameter search that fails for an output.
pub fn fit_surrogate(
    runs: &RunSet,
    params: &[Parameter],
    settings: SurrogateParams,
    seed: u64,
) -> Result<FittedSurrogate, SurrogateError> {
    crate::init_blas();
    let kernel = Kernel::from(settings.kernel);
    let trend = trend_of(settings.mean);
    let lo: Vec<f64> = params.iter().map(|p| p.lo).collect();
    let hi: Vec<f64> = params.iter().map(|p| p.hi).collect();
    let mut experiments = Vec::new();
    for (ei, er) in runs.experiments.iter().enumerate() {
        experiments.push(fit_experiment(
            er, &lo, &hi, kernel, trend, seed, ei as u64,
        )?);
    }
    Ok(FittedSurrogate {
        kernel,
        trend,
        seed,
        experiments,
    })
}

fn fit_experiment(
    er: &ExperimentRuns,
    lo: &[f64],
    hi: &[f64],
    kernel: Kernel,
    trend: Trend,
    seed: u64,
    stream_base: u64,
) -> Result<ExperimentModel, SurrogateError> {
    let n = er.inputs.len();
    let min = min_runs(lo.len());
    if n < min {
        return Err(SurrogateError::TooFewRuns {
            experiment: er.experiment.clone(),
            n,
            min,
        });
    }
    let x = unit_inputs(&er.inputs, lo, hi);
    let params = FitParams {
        kernel,
        trend,
        bounds: HyperBounds::default(),
        n_starts: N_STARTS,
        max_iters: 200,
    };
    let models: Result<Vec<OutputModel>, SurrogateError> = er
        .value_names
        .par_iter()
        .enumerate()
        .map(|(k, name)| {
            let col: Vec<f64> = er.outputs.iter().map(|r| r[k]).collect();
            let (mean, sd) = standardize(&col);
            if is_constant(mean, sd) {
                return Ok(OutputModel {
                    name: name.clone(),
                    y_mean: mean,
                    y_sd: 0.0,
                    gp: None,
                    n_starts_ok: 0,
                    n_evaluations: 0,
                    validation: validate_output(None, &col, mean, 0.0),
                });
            }
            let y = Array1::from_iter(col.iter().map(|v| (v - mean) / sd));
            // One stream per (experiment, output): independent of thread scheduling.
            let mut rng = crate::rng::stream(seed, (stream_base << 32) | k as u64);
            let out = fit_hyperparameters(x.view(), y.view(), params, name, &mut rng)?;
            let validation = validate_output(Some(&out.gp), &col, mean, sd);
            Ok(OutputModel {
                name: name.clone(),
                y_mean: mean,
                y_sd: sd,
                gp: Some(out.gp),
                n_starts_ok: out.n_starts_ok,
                n_evaluations: out.n_evaluations,
                validation,
            })
        })
        .collect();
    let outputs = models?;
    let validation = summarize(&outputs.iter().map(|m| &m.validation).collect::<Vec<_>>());
    Ok(ExperimentModel {
        experiment: er.experiment.clone(),
        lo: lo.to_vec(),
        hi: hi.to_vec(),
        point_ids: er.point_ids.clone(),
        inputs: er.inputs.clone(),
        outputs_raw: er.outputs.clone(),
        outputs,
        validation,
    })
}
