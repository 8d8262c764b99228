//! The fitted surrogate of every experiment: the principal-component basis of its
//! output vector and one GP per component weight, on inputs scaled to the unit box,
//! with leave-one-out (and optionally holdout) validation reported in original units.

use super::basis::{quantity_groups, Basis};
use super::fit::{fit_hyperparameters, FitParams, HyperBounds, LengthScalePrior};
use super::gp::{Gp, Hyper, Trend};
use super::holdout::{mahalanobis_check, Holdout};
use super::kernel::Kernel;
use super::params::SurrogateParams;
use super::validation::{summarize, Validation};
use super::SurrogateError;
use crate::runs::{ExperimentRuns, RunSet};
use crate::study::{HyperpriorChoice, MeanChoice, Parameter};
use ndarray::{Array1, Array2, ArrayView2};
use rayon::prelude::*;

/// Fewest runs per experiment for any GP (common practice).
pub const MIN_RUNS: usize = 3;

/// Runs needed for `d` parameters: at least one per hyperparameter (d length-scales,
/// the signal variance and the nugget), and never fewer than [`MIN_RUNS`].
pub fn min_runs(d: usize) -> usize {
    MIN_RUNS.max(d + 2)
}

/// Starts of the hyperparameter search per component.
pub const N_STARTS: usize = 6;

/// Random stream (low 32 bits of the index) that picks the holdout points of an
/// experiment; components use the streams 0, 1, 2, … below it.
pub const HOLDOUT_STREAM: u64 = 0xFFFF_FFFF;

/// The GP of one principal-component weight.
#[derive(Debug, Clone)]
pub struct ComponentModel {
    /// `pc1`, `pc2`, …
    pub name: String,
    /// Share of the standardised output variance this component carries.
    pub explained: f64,
    pub gp: Gp,
    pub n_starts_ok: usize,
    pub n_evaluations: u64,
    /// Leave-one-out validation of the weight (weight units: variance 1 over the runs).
    pub validation: Validation,
}

/// Summary of one output value (a quantity at a station).
#[derive(Debug, Clone)]
pub struct OutputModel {
    pub name: String,
    /// Mean of the training outputs.
    pub y_mean: f64,
    /// Standard deviation of the training outputs (divisor n); 0 when constant.
    pub y_sd: f64,
    /// Leave-one-out validation through the basis.
    pub validation: Validation,
}

/// Predictive distribution of an experiment's output vector at one θ, in
/// low-rank-plus-diagonal form: N(mean, B diag(weight_var) Bᵀ + diag(diag)).
#[derive(Debug, Clone, PartialEq)]
pub struct LowRankPrediction {
    pub mean: Vec<f64>,
    /// B (p × K), output units.
    pub basis: Array2<f64>,
    /// Predictive variance of each weight (K).
    pub weight_var: Vec<f64>,
    /// Diagonal variance (p), output units²: the discarded variance of the basis.
    pub diag: Vec<f64>,
}

impl LowRankPrediction {
    /// A prediction with independent values: mean and variance per value, no basis.
    pub fn diagonal(mean: Vec<f64>, var: Vec<f64>) -> Self {
        let p = mean.len();
        Self {
            mean,
            basis: Array2::zeros((p, 0)),
            weight_var: vec![],
            diag: var,
        }
    }

    /// Marginal variance of each value: Σ_k B_jk² v_k + diag_j.
    pub fn marginal_var(&self) -> Vec<f64> {
        (0..self.mean.len())
            .map(|j| {
                self.diag[j]
                    + self
                        .basis
                        .row(j)
                        .iter()
                        .zip(&self.weight_var)
                        .map(|(b, v)| b * b * v)
                        .sum::<f64>()
            })
            .collect()
    }

    /// The dense covariance B diag(v) Bᵀ + diag(D) (p × p), for checks and small problems.
    pub fn dense_covariance(&self) -> Array2<f64> {
        let p = self.mean.len();
        let mut c = Array2::zeros((p, p));
        for (k, v) in self.weight_var.iter().enumerate() {
            let col = self.basis.column(k);
            for a in 0..p {
                for b in 0..p {
                    c[[a, b]] += col[a] * col[b] * v;
                }
            }
        }
        for j in 0..p {
            c[[j, j]] += self.diag[j];
        }
        c
    }
}

/// Derivatives of a [`LowRankPrediction`] with respect to the parameters θ (d of them).
#[derive(Debug, Clone, PartialEq)]
pub struct LowRankGradient {
    /// ∂mean_j/∂θ_l (p × d).
    pub mean: Array2<f64>,
    /// ∂weight_var_k/∂θ_l (K × d).
    pub weight_var: Array2<f64>,
    /// ∂diag_j/∂θ_l (p × d); `None` when the diagonal does not depend on θ.
    pub diag: Option<Array2<f64>>,
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
    pub basis: Basis,
    /// The basis in output units (cached for prediction).
    basis_out: Array2<f64>,
    pub components: Vec<ComponentModel>,
    pub outputs: Vec<OutputModel>,
    /// Leave-one-out validation pooled over the output values.
    pub validation: Validation,
    /// Holdout validation, when asked for (`surrogate.holdout`).
    pub holdout: Option<Holdout>,
}

/// Surrogates of all experiments.
#[derive(Debug, Clone)]
pub struct FittedSurrogate {
    pub kernel: Kernel,
    pub trend: Trend,
    pub seed: u64,
    pub variance_kept: f64,
    pub holdout: f64,
    pub hyperprior: Option<LengthScalePrior>,
    pub experiments: Vec<ExperimentModel>,
}

pub(crate) fn trend_of(m: MeanChoice) -> Trend {
    match m {
        MeanChoice::Constant => Trend::Constant,
        MeanChoice::Linear => Trend::Linear,
    }
}

pub(crate) fn unit_inputs(inputs: &[Vec<f64>], lo: &[f64], hi: &[f64]) -> Array2<f64> {
    Array2::from_shape_fn((inputs.len(), lo.len()), |(i, j)| {
        (inputs[i][j] - lo[j]) / (hi[j] - lo[j])
    })
}

fn mean_sd(col: &[f64]) -> (f64, f64) {
    let n = col.len() as f64;
    let mean = col.iter().sum::<f64>() / n;
    let var = col.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n;
    (mean, var.sqrt())
}

impl ExperimentModel {
    /// The basis in output units (p × K).
    pub(crate) fn basis_out(&self) -> &Array2<f64> {
        &self.basis_out
    }

    fn unit(&self, theta: &[f64]) -> Array2<f64> {
        Array2::from_shape_fn((1, theta.len()), |(_, j)| {
            (theta[j] - self.lo[j]) / (self.hi[j] - self.lo[j])
        })
    }

    /// Predictive mean and low-rank-plus-diagonal covariance of the output vector at
    /// parameter values `theta`.
    pub fn predict_low_rank(&self, theta: &[f64]) -> LowRankPrediction {
        let u = self.unit(theta);
        let k = self.components.len();
        let mut w = Array1::zeros(k);
        let mut v = Vec::with_capacity(k);
        for (c, comp) in self.components.iter().enumerate() {
            let (m, var) = comp.gp.predict_point(u.row(0));
            w[c] = m;
            v.push(var);
        }
        LowRankPrediction {
            mean: self.basis.reconstruct(&w),
            basis: self.basis_out.clone(),
            weight_var: v,
            diag: self.basis.discarded.clone(),
        }
    }

    /// [`Self::predict_low_rank`] with its derivatives with respect to θ.
    ///
    /// # Formula
    /// μ = ȳ + B w(u), u_l = (θ_l − lo_l)/(hi_l − lo_l): ∂μ/∂θ_l = Σ_k B_jk ∂m_k/∂u_l /
    /// (hi_l − lo_l) and ∂v_k/∂θ_l = ∂v_k/∂u_l / (hi_l − lo_l), with the component GPs'
    /// gradients from [`Gp::predict_with_gradient`]; the discarded variance is constant.
    pub fn predict_low_rank_with_gradient(
        &self,
        theta: &[f64],
    ) -> (LowRankPrediction, LowRankGradient) {
        let u = self.unit(theta);
        let k = self.components.len();
        let d = theta.len();
        let mut w = Array1::zeros(k);
        let mut v = Vec::with_capacity(k);
        let mut dw = Array2::zeros((k, d));
        let mut dv = Array2::zeros((k, d));
        for (c, comp) in self.components.iter().enumerate() {
            let (m, var, gm, gv) = comp.gp.predict_with_gradient(u.row(0));
            w[c] = m;
            v.push(var);
            for l in 0..d {
                let span = self.hi[l] - self.lo[l];
                dw[[c, l]] = gm[l] / span;
                dv[[c, l]] = gv[l] / span;
            }
        }
        (
            LowRankPrediction {
                mean: self.basis.reconstruct(&w),
                basis: self.basis_out.clone(),
                weight_var: v,
                diag: self.basis.discarded.clone(),
            },
            LowRankGradient {
                mean: self.basis_out.dot(&dw),
                weight_var: dv,
                diag: None,
            },
        )
    }

    /// Surrogate mean and marginal variance of every output value at `theta`.
    pub fn predict(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let p = self.predict_low_rank(theta);
        let var = p.marginal_var();
        (p.mean, var)
    }

    /// Gradient of the predictive mean of every output value with respect to the
    /// parameters (p × d, output units per parameter unit).
    ///
    /// # Formula
    /// ∂μ_j/∂θ_l = Σ_k B_jk ∂m_k/∂u_l / (hi_l − lo_l), with ∂m_k/∂u from
    /// the component GPs and u the unit-box input: the mean part of
    /// [`Self::predict_low_rank_with_gradient`].
    pub fn mean_gradient(&self, theta: &[f64]) -> Array2<f64> {
        self.predict_low_rank_with_gradient(theta).1.mean
    }

    /// Rebuild at known hyperparameters (ln scale, weight units) and a recorded basis:
    /// the weights and factorisations are recomputed from the training data, so
    /// records stay small and exact.
    ///
    /// # Errors
    /// A factorisation that fails.
    #[allow(clippy::too_many_arguments)] // mirrors the record's fields one to one
    pub fn rebuild(
        experiment: &str,
        lo: Vec<f64>,
        hi: Vec<f64>,
        runs: (&[String], &[Vec<f64>], &[Vec<f64>]),
        names: &[String],
        basis: (Array2<f64>, Vec<f64>, f64),
        hypers: &[Vec<f64>],
        kernel: Kernel,
        trend: Trend,
    ) -> Result<Self, SurrogateError> {
        let (ids, inputs, outputs) = runs;
        let (vectors, explained, variance_kept) = basis;
        let x = unit_inputs(inputs, &lo, &hi);
        let basis = Basis::from_parts(
            outputs,
            &quantity_groups(names),
            vectors,
            explained,
            variance_kept,
        );
        let w = basis.weights(outputs);
        let mut components = Vec::new();
        for (k, h) in hypers.iter().enumerate() {
            let y = w.column(k).to_owned();
            let gp = Gp::fit(x.view(), y.view(), kernel, trend, Hyper::from_slice(h))?;
            let validation = weight_validation(&gp, y.as_slice().expect("contiguous"));
            components.push(ComponentModel {
                name: format!("pc{}", k + 1),
                explained: basis.explained[k],
                gp,
                n_starts_ok: 0,
                n_evaluations: 0,
                validation,
            });
        }
        Ok(Self::assemble(
            experiment, lo, hi, ids, inputs, outputs, names, basis, components,
        ))
    }

    #[allow(clippy::too_many_arguments)]
    fn assemble(
        experiment: &str,
        lo: Vec<f64>,
        hi: Vec<f64>,
        ids: &[String],
        inputs: &[Vec<f64>],
        outputs: &[Vec<f64>],
        names: &[String],
        basis: Basis,
        components: Vec<ComponentModel>,
    ) -> Self {
        let basis_out = basis.vectors_in_output_units();
        let loo = loo_through_basis(&basis, &basis_out, &components, outputs);
        let out_models: Vec<OutputModel> = names
            .iter()
            .zip(loo)
            .enumerate()
            .map(|(j, (name, (col, pred, psd)))| {
                let (mean, sd) = mean_sd(&col);
                OutputModel {
                    name: name.clone(),
                    y_mean: mean,
                    y_sd: if basis.scale[j] > 0.0 { sd } else { 0.0 },
                    validation: Validation::from_loo(&col, &pred, &psd),
                }
            })
            .collect();
        let validation = summarize(&out_models.iter().map(|m| &m.validation).collect::<Vec<_>>());
        Self {
            experiment: experiment.into(),
            lo,
            hi,
            point_ids: ids.to_vec(),
            inputs: inputs.to_vec(),
            outputs_raw: outputs.to_vec(),
            basis,
            basis_out,
            components,
            outputs: out_models,
            validation,
            holdout: None,
        }
    }
}

/// Leave-one-out of every component weight (R&W §5.4.2), carried to the outputs through
/// the basis, plus the left-out variance: per output value, (observed, LOO mean, LOO sd)
/// with runs in training order.
fn loo_through_basis(
    basis: &Basis,
    basis_out: &Array2<f64>,
    components: &[ComponentModel],
    outputs: &[Vec<f64>],
) -> Vec<(Vec<f64>, Vec<f64>, Vec<f64>)> {
    let n = outputs.len();
    let k = components.len();
    let w = basis.weights(outputs);
    let mut loo_mean = Array2::zeros((n, k));
    let mut loo_var = Array2::zeros((n, k));
    for (c, comp) in components.iter().enumerate() {
        let (m, v) = comp.gp.leave_one_out(w.column(c));
        loo_mean.column_mut(c).assign(&m);
        loo_var.column_mut(c).assign(&v);
    }
    (0..basis.mean.len())
        .map(|j| {
            let col: Vec<f64> = outputs.iter().map(|r| r[j]).collect();
            let (pred, psd): (Vec<f64>, Vec<f64>) = (0..n)
                .map(|i| {
                    let mut m = basis.mean[j];
                    let mut v = basis.discarded[j];
                    for c in 0..k {
                        m += basis_out[[j, c]] * loo_mean[[i, c]];
                        v += basis_out[[j, c]].powi(2) * loo_var[[i, c]];
                    }
                    (m, v.sqrt())
                })
                .unzip();
            (col, pred, psd)
        })
        .collect()
}

impl ExperimentModel {
    /// Leave-one-out predictions of every output value at every training run, in the
    /// outputs' units: per output, (observed, LOO mean, LOO sd), runs in `point_ids`
    /// order. The same numbers the validation summaries are made from.
    pub fn leave_one_out(&self) -> Vec<(Vec<f64>, Vec<f64>, Vec<f64>)> {
        loo_through_basis(
            &self.basis,
            &self.basis_out,
            &self.components,
            &self.outputs_raw,
        )
    }
}

fn weight_validation(gp: &Gp, w: &[f64]) -> Validation {
    let (m, v) = gp.leave_one_out(ndarray::ArrayView1::from(w));
    let sd: Vec<f64> = v.iter().map(|v| v.sqrt()).collect();
    Validation::from_loo(w, m.as_slice().expect("contiguous"), &sd)
}

/// Settings of one experiment's fit.
#[derive(Debug, Clone, Copy)]
pub(crate) struct ExperimentFit<'a> {
    pub lo: &'a [f64],
    pub hi: &'a [f64],
    pub params: FitParams,
    pub variance_kept: f64,
    pub seed: u64,
    pub stream_base: u64,
}

/// Fit the basis and the component GPs to runs (`ids`, `inputs`, `outputs`).
pub(crate) fn fit_runs(
    experiment: &str,
    ids: &[String],
    inputs: &[Vec<f64>],
    outputs: &[Vec<f64>],
    names: &[String],
    s: ExperimentFit<'_>,
) -> Result<ExperimentModel, SurrogateError> {
    let x = unit_inputs(inputs, s.lo, s.hi);
    let basis = Basis::fit(outputs, &quantity_groups(names), s.variance_kept);
    let w = basis.weights(outputs);
    let components: Result<Vec<ComponentModel>, SurrogateError> = (0..basis.n_components())
        .into_par_iter()
        .map(|k| {
            let name = format!("pc{}", k + 1);
            let y = w.column(k).to_owned();
            // One stream per (experiment, component): independent of thread scheduling.
            let mut rng = crate::rng::stream(s.seed, (s.stream_base << 32) | k as u64);
            let label = format!("{experiment} {name}");
            let out = fit_hyperparameters(x.view(), y.view(), s.params, &label, &mut rng)?;
            let validation = weight_validation(&out.gp, y.as_slice().expect("contiguous"));
            Ok(ComponentModel {
                name,
                explained: basis.explained[k],
                gp: out.gp,
                n_starts_ok: out.n_starts_ok,
                n_evaluations: out.n_evaluations,
                validation,
            })
        })
        .collect();
    Ok(ExperimentModel::assemble(
        experiment,
        s.lo.to_vec(),
        s.hi.to_vec(),
        ids,
        inputs,
        outputs,
        names,
        basis,
        components?,
    ))
}

/// The prior of `surrogate.hyperprior`, if any.
pub fn hyperprior_of(h: HyperpriorChoice) -> Option<LengthScalePrior> {
    match h {
        HyperpriorChoice::None => None,
        HyperpriorChoice::Lognormal => Some(LengthScalePrior::default()),
    }
}

/// Fit the surrogate of every experiment that has runs.
///
/// # Errors
/// Too few runs for an experiment (or too few left by the holdout), or a
/// hyperparameter search that fails for a component.
pub fn fit_surrogate(
    runs: &RunSet,
    params: &[Parameter],
    settings: SurrogateParams,
    seed: u64,
) -> Result<FittedSurrogate, SurrogateError> {
    crate::init_blas();
    let kernel = Kernel::from(settings.kernel);
    let trend = trend_of(settings.mean);
    let hyperprior = hyperprior_of(settings.hyperprior);
    let lo: Vec<f64> = params.iter().map(|p| p.lo).collect();
    let hi: Vec<f64> = params.iter().map(|p| p.hi).collect();
    let fit_params = FitParams {
        kernel,
        trend,
        bounds: HyperBounds::default(),
        hyperprior,
        n_starts: N_STARTS,
        max_iters: 200,
    };
    let mut experiments = Vec::new();
    for (ei, er) in runs.experiments.iter().enumerate() {
        let s = ExperimentFit {
            lo: &lo,
            hi: &hi,
            params: fit_params,
            variance_kept: settings.variance_kept,
            seed,
            stream_base: ei as u64,
        };
        experiments.push(fit_experiment(er, s, settings.holdout)?);
    }
    Ok(FittedSurrogate {
        kernel,
        trend,
        seed,
        variance_kept: settings.variance_kept,
        holdout: settings.holdout,
        hyperprior,
        experiments,
    })
}

fn fit_experiment(
    er: &ExperimentRuns,
    s: ExperimentFit<'_>,
    holdout: f64,
) -> Result<ExperimentModel, SurrogateError> {
    let n = er.inputs.len();
    let min = min_runs(s.lo.len());
    if n < min {
        return Err(SurrogateError::TooFewRuns {
            experiment: er.experiment.clone(),
            n,
            min,
        });
    }
    let report = if holdout > 0.0 {
        let n_out = ((holdout * n as f64).round() as usize).max(1);
        if n - n_out < min {
            return Err(SurrogateError::HoldoutTooLarge {
                experiment: er.experiment.clone(),
                n,
                n_out,
                min,
            });
        }
        let x = unit_inputs(&er.inputs, s.lo, s.hi);
        let out = pick_holdout(x.view(), n_out, s.seed, s.stream_base);
        let keep: Vec<usize> = (0..n).filter(|i| !out.contains(i)).collect();
        let take = |v: &[Vec<f64>], idx: &[usize]| -> Vec<Vec<f64>> {
            idx.iter().map(|i| v[*i].clone()).collect()
        };
        let ids: Vec<String> = keep.iter().map(|i| er.point_ids[*i].clone()).collect();
        let model = fit_runs(
            &er.experiment,
            &ids,
            &take(&er.inputs, &keep),
            &take(&er.outputs, &keep),
            &er.value_names,
            s,
        )?;
        let out_ids: Vec<String> = out.iter().map(|i| er.point_ids[*i].clone()).collect();
        Some(holdout_of(
            &model,
            holdout,
            &out_ids,
            &take(&er.inputs, &out),
            &take(&er.outputs, &out),
        ))
    } else {
        None
    };
    let mut model = fit_runs(
        &er.experiment,
        &er.point_ids,
        &er.inputs,
        &er.outputs,
        &er.value_names,
        s,
    )?;
    model.holdout = report;
    Ok(model)
}

/// Validate `model` (fitted without the held-out runs) on them.
fn holdout_of(
    model: &ExperimentModel,
    fraction: f64,
    point_ids: &[String],
    inputs: &[Vec<f64>],
    outputs: &[Vec<f64>],
) -> Holdout {
    let x = unit_inputs(inputs, &model.lo, &model.hi);
    let w = model.basis.weights(outputs);
    let mahalanobis = model
        .components
        .iter()
        .enumerate()
        .map(|(k, c)| mahalanobis_check(&c.name, &c.gp, x.view(), w.column(k)))
        .collect();
    let predicted: Vec<(Vec<f64>, Vec<f64>)> = inputs.iter().map(|t| model.predict(t)).collect();
    Holdout::new(
        fraction,
        point_ids,
        model.point_ids.len(),
        mahalanobis,
        outputs,
        &predicted,
    )
}

/// Indices of `n_out` spread-out runs to hold out: greedy maximin over the runs' unit
/// inputs from a first run drawn from the experiment's holdout stream
/// ([`crate::design::pick_spread`]), so the choice depends only on the seed and the
/// runs. Returned in increasing order.
pub fn pick_holdout(x: ArrayView2<f64>, n_out: usize, seed: u64, stream_base: u64) -> Vec<usize> {
    let mut rng = crate::rng::stream(seed, (stream_base << 32) | HOLDOUT_STREAM);
    let none = Array2::zeros((0, x.ncols()));
    let mut idx = crate::design::pick_spread(x, none.view(), n_out, &mut rng);
    idx.sort_unstable();
    idx
}
