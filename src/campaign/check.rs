//! The check step: posterior predictive checks of every experiment and, when asked,
//! confirmation runs of the simulator at posterior draws; writes `checks.yaml`.

use super::design::save_design;
use super::Session;
use crate::calibrate::{
    discrepancy_sd_draws, field_emulator, model_of, PosteriorBody, Samples, CAUTION,
};
use crate::check::{
    check_experiment, confirm_experiment, ChecksBody, Confirmation, ConfirmationPoint,
    DrawnVariances,
};
use crate::design;
use crate::layout::{
    load_design, posterior_draws, read_stage_record, Campaign, CampaignError, CHECKS_FILE,
    POSTERIOR_FILE, SAMPLES_FILE, SURROGATE_FILE,
};
use crate::record::{write_record, Record};
use crate::runs::{self, RunOptions};
use crate::study::Noise;
use crate::surrogate::{FittedSurrogate, SurrogateBody};
use anyhow::{Context, Result};

/// Confirmation runs for [`check_stage`]: how many posterior draws (plus the mean), and
/// how to run them.
pub struct Confirm {
    pub n: usize,
    pub options: RunOptions,
}

/// Posterior predictive checks of every experiment, and the confirmation runs `confirm`
/// asks for: `checks.yaml`.
///
/// # Errors
/// No surrogate or posterior yet, unreadable samples, or samples without a column for a
/// parameter of the study; with confirmation runs, what the run step refuses.
pub fn check_stage(c: &Campaign, confirm: Option<Confirm>, s: &Session<'_>) -> Result<ChecksBody> {
    let surrogate: Record<SurrogateBody> = read_stage_record(c, SURROGATE_FILE, "fit")?;
    let posterior: Record<PosteriorBody> = read_stage_record(c, POSTERIOR_FILE, "calibrate")?;
    let fitted = surrogate.body.to_fitted()?;
    let draws = posterior_draws(c)?;
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.input_named(SURROGATE_FILE, &c.path(SURROGATE_FILE))?;
    clock.input_named(POSTERIOR_FILE, &c.path(POSTERIOR_FILE))?;
    clock.input_named(SAMPLES_FILE, &c.path(SAMPLES_FILE))?;
    let seed = c.study.calibration.seed;
    clock.seed("checks", seed);
    let mut experiments = Vec::new();
    for (k, e) in c.study.experiments.iter().enumerate() {
        let model = field_emulator(&c.study, e, model_of(&fitted, &e.name)?);
        let noise: Option<Vec<f64>> = draws
            .samples
            .column(&format!("noise_sd.{}", e.name))
            .map(|j| draws.rows.iter().map(|r| r[j]).collect());
        let disc = discrepancy_sd_draws(&c.study, e, &posterior.body, &draws.samples, &draws.rows)?;
        // Streams past those of the chains: the checks never share random numbers with
        // the sampler.
        let mut rng = crate::rng::stream(seed, CHECK_STREAM_BASE + k as u64);
        let predictive = DrawnVariances {
            noise_sd: noise.as_deref(),
            discrepancy_sd: disc.as_deref(),
        };
        let check = check_experiment(&c.study, e, &model, &draws.theta, predictive, &mut rng)
            .ok_or_else(|| CampaignError::OutputsChanged(e.name.clone()))?;
        experiments.push(check);
    }
    let confirmation = match confirm {
        Some(cf) if cf.n > 0 && !c.study.controls.is_empty() => {
            return Err(CampaignError::ConfirmationWithControls.into())
        }
        Some(cf) if cf.n > 0 => {
            let conf = confirm_runs(c, &fitted, &draws.samples, &draws.theta, cf, s)?;
            for p in &conf.points {
                for e in &c.study.experiments {
                    let rp = runs::run_record_path(&c.dir, &p.id, &e.name);
                    clock.input_named(&format!("runs/{}/{}/run.yaml", p.id, e.name), &rp)?;
                }
            }
            Some(conf)
        }
        _ => None,
    };
    let passes = experiments.iter().all(|e| e.passes)
        && confirmation
            .as_ref()
            .is_none_or(|f| f.experiments.iter().all(|e| e.passes));
    let body = ChecksBody {
        n_draws: draws.theta.len(),
        passes,
        confirmation,
        experiments,
        caution: CAUTION.to_string(),
    };
    write_record(
        &c.path(CHECKS_FILE),
        &Record::new("checks", clock.finish(), body.clone()),
    )?;
    Ok(body)
}

/// First random stream of the predictive checks (one per experiment).
const CHECK_STREAM_BASE: u64 = 1 << 40;
/// Random stream that picks the confirmation draws.
const CONFIRM_STREAM: u64 = (1 << 40) - 1;

/// Run the simulator at `checks.confirmation_runs` posterior draws and the posterior
/// mean (points already in the design are reused, new ones appended as a design round),
/// then compare the surrogate `fitted` with the simulator there.
fn confirm_runs(
    c: &Campaign,
    fitted: &FittedSurrogate,
    samples: &Samples,
    draws: &[Vec<f64>],
    cf: Confirm,
    s: &Session<'_>,
) -> Result<Confirmation> {
    let d = c.study.parameters.len();
    let seed = c.study.calibration.seed;
    let mut rng = crate::rng::stream(seed, CONFIRM_STREAM);
    let n = cf.n.min(draws.len());
    let mut picks = rand::seq::index::sample(&mut rng, draws.len(), n).into_vec();
    picks.sort_unstable();
    let mut candidates: Vec<(String, Vec<f64>)> = Vec::with_capacity(n + 1);
    let mean: Vec<f64> = (0..d)
        .map(|j| draws.iter().map(|r| r[j]).sum::<f64>() / draws.len() as f64)
        .collect();
    candidates.push(("posterior mean".into(), mean));
    for i in picks {
        candidates.push((format!("draw {i}"), draws[i].clone()));
    }
    let design = load_design(c)?;
    let mut points = Vec::new();
    let mut new_values = Vec::new();
    for (source, values) in candidates {
        match design.points.iter().find(|p| p.values == values) {
            Some(p) => points.push(ConfirmationPoint {
                id: p.id.clone(),
                source,
                parameters: values,
                reused: true,
            }),
            None => {
                new_values.push(values.clone());
                points.push(ConfirmationPoint {
                    id: String::new(),
                    source,
                    parameters: values,
                    reused: false,
                });
            }
        }
    }
    let design = if new_values.is_empty() {
        design
    } else {
        let stream = design.rounds.len().max(1) as u64;
        let d2 = design::append(
            &design,
            &c.study.parameters,
            &new_values,
            design::Fill::PosteriorDraws,
            seed,
            stream,
        )
        .map_err(|err| CampaignError::Design {
            context: "cannot add confirmation points",
            err,
        })?;
        save_design(c, &d2)?;
        d2
    };
    for p in points.iter_mut().filter(|p| !p.reused) {
        p.id = design
            .points
            .iter()
            .rev()
            .find(|q| q.values == p.parameters)
            .map(|q| q.id.clone())
            .expect("appended");
    }
    let _ = s.interruptible(|| {
        runs::run_all(
            &c.study,
            &design,
            &c.dir,
            cf.options,
            &c.command_line,
            s.stop,
            s.observer,
        )
    })?;
    let (set, _) = runs::load_runs(&c.study, &design, &c.dir)?;
    let mut experiments = Vec::new();
    for e in &c.study.experiments {
        let model = model_of(fitted, &e.name)?;
        let er = set
            .experiments
            .iter()
            .find(|r| r.experiment == e.name)
            .context("runs of every experiment")?;
        let done: Vec<(Vec<f64>, Vec<f64>)> = points
            .iter()
            .filter_map(|p| {
                let k = er.point_ids.iter().position(|id| *id == p.id)?;
                Some((er.inputs[k].clone(), er.outputs[k].clone()))
            })
            .collect();
        let noise_sd = match &e.noise {
            Noise::Sd(s) => *s,
            Noise::Column(_) => {
                let sds: Vec<f64> = e.data.rows.iter().filter_map(|r| r.sd).collect();
                sds.iter().sum::<f64>() / sds.len().max(1) as f64
            }
            Noise::Unknown { .. } => samples
                .column(&format!("noise_sd.{}", e.name))
                .map(|j| {
                    let v = samples.pooled(j);
                    v.iter().sum::<f64>() / v.len().max(1) as f64
                })
                .unwrap_or(f64::NAN),
        };
        experiments.push(confirm_experiment(&e.name, model, &done, noise_sd));
    }
    Ok(Confirmation {
        points,
        experiments,
    })
}
