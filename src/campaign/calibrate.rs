//! The calibrate step: assemble the posterior from the study and `surrogate.yaml`,
//! sample it, write `posterior.yaml` and `posterior-samples.csv`.

use super::Session;
use crate::audit;
use crate::calibrate::{
    assemble, field_emulators, prior_from_samples, sample, samples, summarize, MvnPrior,
    PosteriorBody, SamplerParams, Samples, SetupError,
};
use crate::layout::{read_surrogate, Campaign, POSTERIOR_FILE, SAMPLES_FILE, SURROGATE_FILE};
use crate::record::{sha256_file, write_atomic, write_record, ProvenanceClock, Record};
use anyhow::{Context, Result};
use std::path::Path;

/// Sample the posterior and write `posterior.yaml` and `posterior-samples.csv`; returns
/// the body written.
///
/// # Errors
/// No surrogate yet, field data that no longer match it, an unusable
/// `calibration.prior_from`, a failed mode search, or I/O.
pub fn calibrate_stage(c: &Campaign, s: &Session<'_>) -> Result<PosteriorBody> {
    let rec = read_surrogate(c)?;
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.input_named(SURROGATE_FILE, &c.path(SURROGATE_FILE))?;
    clock.study_parts(audit::posterior_parts(&c.study));
    let fitted = rec.body.to_fitted()?;
    let emulators = field_emulators(&c.study, &fitted)?;
    let cal = &c.study.calibration;
    let params = SamplerParams {
        chains: cal.chains,
        warmup: cal.warmup,
        draws: cal.draws,
        seed: cal.seed,
        kind: cal.sampler,
        walkers: cal.walkers,
        until_converged: cal.until_converged,
    };
    clock.seed("calibration", cal.seed);
    let mvn = match &cal.prior_from {
        Some(path) => Some(earlier_prior(c, path, &mut clock, s)?),
        None => None,
    };
    let assembled = assemble(&c.study, &fitted, &emulators, mvn, s.observer)?;
    let post = &assembled.posterior;
    let (chains, sampling_s) = s.interruptible(|| {
        let sampling = std::time::Instant::now();
        let chains = sample(post, &params, s.stop, s.observer);
        (chains, sampling.elapsed().as_secs_f64())
    });
    let names = c.study.parameter_names();
    let noise_names = post.noise_names();
    let mut summary = summarize(&names, &noise_names, &chains).with_discrepancy(post, &chains);
    if let Some((full, est)) = &assembled.searched {
        summary = summary.with_map(full, est);
    }
    let n_eval = post
        .n_evaluations
        .load(std::sync::atomic::Ordering::Relaxed);
    let bytes = samples::write_csv(&names, &noise_names, &post.discrepancy_labels(), &chains)
        .context("cannot write the samples")?;
    let samples_path = c.path(SAMPLES_FILE);
    write_atomic(&samples_path, &bytes)?;
    let body = PosteriorBody::new(&summary, &chains, &params, n_eval);
    let mut record = Record::new("posterior", clock.finish(), body);
    record.body.samples_sha256 = Some(sha256_file(&samples_path)?);
    record.body.sampling_s = Some(sampling_s);
    record.body.settings.prior_from = cal.prior_from.as_ref().map(|p| p.display().to_string());
    write_record(&c.path(POSTERIOR_FILE), &record)?;
    Ok(record.body)
}

/// `calibration.prior_from`: the normal prior fitted to the earlier calibration's draws
/// (the samples file beside the named `posterior.yaml`), both files hashed into `clock`.
fn earlier_prior(
    c: &Campaign,
    path: &Path,
    clock: &mut ProvenanceClock,
    s: &Session<'_>,
) -> Result<MvnPrior> {
    let file = path.with_file_name(SAMPLES_FILE);
    clock.input_named(&path.display().to_string(), path)?;
    clock.input_named(&file.display().to_string(), &file)?;
    let name = file.display().to_string();
    let bad = |message: String| SetupError::PriorFrom {
        file: name.clone(),
        message,
    };
    let text = std::fs::read_to_string(&file).map_err(|e| bad(e.to_string()))?;
    let samples = Samples::parse_csv(&text).map_err(bad)?;
    let (prior, used, outside) = prior_from_samples(&c.study, &samples, &name)?;
    if outside > 0 {
        s.observer.note(&format!(
            "prior_from: {outside} of {} earlier draws lie outside this study's ranges and were left out",
            used + outside
        ));
    }
    Ok(prior)
}
