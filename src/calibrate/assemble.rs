//! The calibration model assembled from a study and its fitted surrogate: the emulators
//! at the field conditions, the likelihoods with their discrepancies, the start
//! candidates, the prior from an earlier posterior, and the posterior sampling runs
//! against (with `hyperparameters: map`, after fixing the discrepancy hyperparameters at
//! the joint posterior mode). Also the discrepancy as it was calibrated, for the stages
//! that use a posterior after it was written (checks, report).
//!
//! Input: a checked [`Study`], a [`FittedSurrogate`], and for the later stages the
//! [`PosteriorBody`] and [`Samples`] they read. Output: a [`LogPosterior`] and its parts.
//! Must not: open files or print (the workflow layer reads the records and says what
//! happened).

use super::discrepancy::{discrepancy_of, Discrepancy, Hyper, HyperKind};
use super::emulator::Emulator;
use super::likelihood::ExperimentLikelihood;
use super::map::{find_map, with_fixed_discrepancy, MapError, MapEstimate, MapParams};
use super::posterior::LogPosterior;
use super::prior::{MvnPrior, Transform};
use super::samples::Samples;
use super::summary::{FixedAt, HyperSummary, PosteriorBody};
use crate::progress::Observer;
use crate::study::{Experiment, HyperparameterMode, Study};
use crate::surrogate::{ExperimentModel, FieldEmulator, FittedSurrogate};

/// The study and its records do not fit together, or the model cannot be assembled.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum SetupError {
    /// The surrogate has no model of this experiment.
    #[error("the surrogate has no experiment `{0}`: run `assay fit` again")]
    NoExperiment(String),
    /// The field data's output values differ from those the surrogate was fitted to.
    #[error("the field data of `{experiment}` ({}) no longer match the runs' outputs ({}); run `assay run` and `assay fit` again", field.join(", "), runs.join(", "))]
    OutputsChanged {
        experiment: String,
        field: Vec<String>,
        runs: Vec<String>,
    },
    /// `calibration.prior_from`: the earlier samples cannot give a prior.
    #[error("calibration.prior_from: {file}: {message}")]
    PriorFrom { file: String, message: String },
    /// `sampler: nuts` with a part of the log posterior that has no gradient.
    #[error("`calibration.sampler: nuts` needs the gradient of every part of the log posterior, and this study has a part without one: use `adaptive_metropolis`")]
    NoGradient,
    /// `hyperparameters: map` but `posterior.yaml` has no posterior-mode value.
    #[error("posterior.yaml has no posterior-mode value of the discrepancy {what} of {experiment}.{quantity} (`hyperparameters: map`): run `assay calibrate` again")]
    NoModeValue {
        what: &'static str,
        experiment: String,
        quantity: String,
    },
    /// A sampled hyperparameter without its column in the samples.
    #[error("the samples have no column `{0}`: run `assay calibrate` again")]
    NoColumn(String),
    /// The joint posterior mode could not be found.
    #[error(transparent)]
    Map(#[from] MapError),
}

impl SetupError {
    /// Whether the cause is the user's input (study, data or records out of step with
    /// them) rather than a failure of the computation.
    pub fn is_bad_input(&self) -> bool {
        matches!(
            self,
            Self::OutputsChanged { .. }
                | Self::PriorFrom { .. }
                | Self::NoModeValue { .. }
                | Self::NoColumn(_)
        )
    }
}

/// The surrogate of experiment `name`.
///
/// # Errors
/// [`SetupError::NoExperiment`].
pub fn model_of<'a>(
    fitted: &'a FittedSurrogate,
    name: &str,
) -> Result<&'a ExperimentModel, SetupError> {
    fitted
        .experiments
        .iter()
        .find(|m| m.experiment == name)
        .ok_or_else(|| SetupError::NoExperiment(name.to_string()))
}

/// What the likelihood and the checks evaluate for experiment `e`: its surrogate, at
/// the field conditions when the study has controls.
pub fn field_emulator<'a>(
    study: &Study,
    e: &Experiment,
    model: &'a ExperimentModel,
) -> FieldEmulator<'a> {
    let targets = e.data.targets(study.simulator.output.y.len());
    FieldEmulator::new(
        model,
        study.controls.len(),
        e.data.conditions(),
        targets.iter().map(|t| (t.condition, t.value)).collect(),
    )
}

/// [`field_emulator`] of every experiment of the study, in study order.
///
/// # Errors
/// [`SetupError::NoExperiment`].
pub fn field_emulators<'a>(
    study: &Study,
    fitted: &'a FittedSurrogate,
) -> Result<Vec<FieldEmulator<'a>>, SetupError> {
    study
        .experiments
        .iter()
        .map(|e| Ok(field_emulator(study, e, model_of(fitted, &e.name)?)))
        .collect()
}

/// The normal prior on z = logit θ fitted to an earlier calibration's draws (the
/// samples beside `calibration.prior_from`, named `file` in messages), with the number
/// of draws used and of draws left out for lying outside this study's ranges.
///
/// # Errors
/// [`SetupError::PriorFrom`]: samples without a column for one of this study's
/// parameters, or too few draws inside the ranges.
pub fn prior_from_samples(
    study: &Study,
    samples: &Samples,
    file: &str,
) -> Result<(MvnPrior, usize, usize), SetupError> {
    let bad = |message: String| SetupError::PriorFrom {
        file: file.to_string(),
        message,
    };
    let cols: Vec<usize> = study
        .parameters
        .iter()
        .map(|p| {
            samples.column(&p.name).ok_or_else(|| {
                bad(format!(
                    "no column `{}` (the earlier calibration must have this study's parameters)",
                    p.name
                ))
            })
        })
        .collect::<Result<_, _>>()?;
    let mut z = Vec::new();
    let mut outside = 0;
    for rec in samples.chains.iter().flatten() {
        let mut row = Vec::with_capacity(cols.len());
        let mut inside = true;
        for (p, &i) in study.parameters.iter().zip(&cols) {
            let v = rec[i];
            inside &= v > p.lo && v < p.hi;
            row.push(Transform { lo: p.lo, hi: p.hi }.to_unconstrained(v));
        }
        if inside {
            z.push(row);
        } else {
            outside += 1;
        }
    }
    let mvn = MvnPrior::fit(&z).map_err(bad)?;
    Ok((mvn, z.len(), outside))
}

/// The training points as starting candidates for the chains (in design order, each
/// once): a posterior in a small corner of a wide box is found even when no prior draw
/// lands there. With controls, the parameters are the inputs after the controls.
pub fn start_candidates(study: &Study, fitted: &FittedSurrogate) -> Vec<Vec<f64>> {
    let n_c = study.controls.len();
    let mut starts: Vec<Vec<f64>> = Vec::new();
    for m in &fitted.experiments {
        for x in &m.inputs {
            let theta = x[n_c..].to_vec();
            if !starts.contains(&theta) {
                starts.push(theta);
            }
        }
    }
    starts
}

/// The log posterior the sampler runs against, and with `hyperparameters: map` the full
/// one (hyperparameters under their priors) with the mode found in it.
pub struct Assembled<'a> {
    pub posterior: LogPosterior<'a>,
    pub searched: Option<(LogPosterior<'a>, MapEstimate)>,
}

/// Assemble the posterior of the study's parameters over `emulators` (from
/// [`field_emulators`] of the same `fitted`), with the prior `mvn` from an earlier
/// posterior when given. With `hyperparameters: map`, first find the joint posterior
/// mode with the hyperparameters under their priors, then fix them there.
///
/// # Errors
/// Field data whose output values no longer match the surrogate's
/// ([`SetupError::OutputsChanged`]), a failed mode search, or `sampler: nuts` with a
/// part that has no gradient.
pub fn assemble<'a>(
    study: &Study,
    fitted: &FittedSurrogate,
    emulators: &'a [FieldEmulator<'a>],
    mvn: Option<MvnPrior>,
    observer: &dyn Observer,
) -> Result<Assembled<'a>, SetupError> {
    let mut experiments: Vec<(&dyn Emulator, ExperimentLikelihood)> = Vec::new();
    for (e, em) in study.experiments.iter().zip(emulators) {
        let model = model_of(fitted, &e.name)?;
        let names = crate::runs::value_names(study, e);
        let have: Vec<String> = model.outputs.iter().map(|o| o.name.clone()).collect();
        if names != have {
            return Err(SetupError::OutputsChanged {
                experiment: e.name.clone(),
                field: names,
                runs: have,
            });
        }
        let targets = e.data.targets(study.simulator.output.y.len());
        let mut lik = ExperimentLikelihood::new(e, &targets);
        if let Some(d) = discrepancy_of(study, e) {
            lik = lik.with_discrepancy(d);
        }
        experiments.push((em as &dyn Emulator, lik));
    }
    let cal = &study.calibration;
    let starts = start_candidates(study, fitted);
    let build = |experiments| {
        let post =
            LogPosterior::new(study.parameters.clone(), experiments).with_start_candidates(&starts);
        match &mvn {
            Some(prior) => post.with_mvn_prior(prior.clone()),
            None => post,
        }
    };
    let full = build(experiments);
    let at_map = cal
        .discrepancy
        .as_ref()
        .is_some_and(|d| d.hyperparameters == HyperparameterMode::Map)
        && full.n_discrepancy() > 0;
    let assembled = if at_map {
        observer.note(&format!(
            "discrepancy hyperparameters: finding the joint posterior mode ({} starts)",
            MapParams::new(cal.seed).n_starts
        ));
        let est = find_map(&full, &MapParams::new(cal.seed))?;
        let fixed = build(with_fixed_discrepancy(&full, &est.x));
        Assembled {
            posterior: fixed,
            searched: Some((full, est)),
        }
    } else {
        Assembled {
            posterior: full,
            searched: None,
        }
    };
    if cal.sampler == crate::study::spec::SamplerChoice::Nuts && !assembled.posterior.has_gradient()
    {
        return Err(SetupError::NoGradient);
    }
    Ok(assembled)
}

/// The model discrepancy of `e` as it was calibrated: [`discrepancy_of`], and with
/// `hyperparameters: map` each hyperparameter that has a prior fixed at the value
/// `posterior` records for it (`fixed_at: map`).
///
/// # Errors
/// With `hyperparameters: map`, a record without that value (made before the study
/// asked for it).
pub fn discrepancy_as_calibrated(
    study: &Study,
    e: &Experiment,
    posterior: &PosteriorBody,
) -> Result<Option<Discrepancy>, SetupError> {
    let Some(mut d) = discrepancy_of(study, e) else {
        return Ok(None);
    };
    let at_map = study
        .calibration
        .discrepancy
        .as_ref()
        .is_some_and(|p| p.hyperparameters == HyperparameterMode::Map);
    if !at_map {
        return Ok(Some(d));
    }
    let recorded = posterior.discrepancy.get(&e.name);
    for b in &mut d.blocks {
        let rec = recorded.and_then(|m| m.get(&b.quantity));
        let value = |h: Option<&HyperSummary>, what: &'static str| match h {
            Some(HyperSummary {
                value: Some(v),
                fixed_at: Some(FixedAt::Map),
                ..
            }) => Ok(Hyper::Fixed(*v)),
            _ => Err(SetupError::NoModeValue {
                what,
                experiment: e.name.clone(),
                quantity: b.quantity.clone(),
            }),
        };
        if b.sd.is_sampled() {
            b.sd = value(rec.map(|r| &r.sd), "sd")?;
        }
        if b.length_scale.is_some_and(|l| l.is_sampled()) {
            b.length_scale = Some(value(
                rec.and_then(|r| r.length_scale.as_ref()),
                "length-scale",
            )?);
        }
    }
    Ok(Some(d))
}

/// The discrepancy sd of each output quantity of `e` at each of `rows` (thinned sample
/// rows): the `discrepancy_sd.<experiment>.<quantity>` columns when sampled, the fixed
/// value (given, or the posterior mode `posterior` records) otherwise; `None` without a
/// discrepancy.
///
/// # Errors
/// A sampled sd without its column in the samples; a posterior-mode value missing from
/// `posterior`.
pub fn discrepancy_sd_draws<R: AsRef<[f64]>>(
    study: &Study,
    e: &Experiment,
    posterior: &PosteriorBody,
    samples: &Samples,
    rows: &[R],
) -> Result<Option<Vec<Vec<f64>>>, SetupError> {
    let Some(d) = discrepancy_as_calibrated(study, e, posterior)? else {
        return Ok(None);
    };
    let n_q = study.simulator.output.y.len();
    let mut out = vec![vec![0.0; n_q]; rows.len()];
    for b in &d.blocks {
        let q = study
            .simulator
            .output
            .y
            .iter()
            .position(|n| *n == b.quantity)
            .expect("blocks are named after the study's quantities");
        match b.sd {
            Hyper::Fixed(v) => out.iter_mut().for_each(|r| r[q] = v),
            _ => {
                let name = format!(
                    "{}.{}.{}",
                    HyperKind::Sd.column_prefix(),
                    e.name,
                    b.quantity
                );
                let j = samples
                    .column(&name)
                    .ok_or_else(|| SetupError::NoColumn(name.clone()))?;
                for (o, r) in out.iter_mut().zip(rows) {
                    o[q] = r.as_ref()[j];
                }
            }
        }
    }
    Ok(Some(out))
}
