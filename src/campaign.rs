//! The campaign folder and the stages' I/O: read the previous records, call the pure
//! cores, write one record. The CLI calls these; tests can too.
//!
//! Layout of `<runs>/<study name>/`: `design.yaml`, `runs/<point>/<experiment>/run.yaml`,
//! `surrogate.yaml`, `posterior.yaml`, `posterior-samples.csv`.

use crate::audit::{self, Freshness};
use crate::calibrate::{
    find_map, sample, summarize, with_fixed_discrepancy, Discrepancy, Emulator,
    ExperimentLikelihood, FixedAt, Hyper, HyperKind, HyperSummary, LogPosterior, MapParams,
    PosteriorBody, PosteriorSummary, SamplerParams,
};
use crate::design::{self, Design, DesignBody};
use crate::progress::Observer;
use crate::record::{
    read_record, sha256_file, write_atomic, write_record, ProvenanceClock, Record,
};
use crate::runs::{self, RunOptions, RunState, RunSummary, StateCounts};
use crate::study::{HyperparameterMode, Study};
use crate::surrogate::{fit_surrogate, FittedSurrogate, SurrogateBody, Validation};
use anyhow::{bail, Context, Result};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::atomic::AtomicBool;
use std::time::SystemTime;

/// A problem with the user's input found outside the study parser (exit code 2).
#[derive(Debug, thiserror::Error)]
#[error("{0}")]
pub struct InputError(pub String);

/// A study and its campaign folder.
pub struct Campaign {
    pub study: Study,
    pub dir: PathBuf,
    /// The command line, for provenance.
    pub command_line: Vec<String>,
}

pub const DESIGN_FILE: &str = "design.yaml";
pub const SURROGATE_FILE: &str = "surrogate.yaml";
pub const POSTERIOR_FILE: &str = "posterior.yaml";
pub const SAMPLES_FILE: &str = "posterior-samples.csv";
pub const REPORT_FILE: &str = "report.html";
pub const CHECKS_FILE: &str = "checks.yaml";
pub const REFINEMENT_FILE: &str = "refinement.yaml";

/// Posterior draws the predictive checks use at most (thinned evenly).
pub const CHECK_DRAWS: usize = 2000;

impl Campaign {
    pub fn new(study: Study, runs_root: &Path, command_line: Vec<String>) -> Self {
        let dir = runs_root.join(&study.name);
        Self {
            study,
            dir,
            command_line,
        }
    }

    pub fn path(&self, file: &str) -> PathBuf {
        self.dir.join(file)
    }

    fn clock(&self) -> ProvenanceClock {
        ProvenanceClock::start(self.command_line.clone())
    }

    fn hash_study_inputs(&self, clock: &mut ProvenanceClock) -> Result<()> {
        for f in self.study.input_files() {
            clock
                .input(&f)
                .with_context(|| format!("cannot hash {}", f.display()))?;
        }
        Ok(())
    }
}

/// What [`write_design`] did.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DesignOutcome {
    Created,
    /// An existing design with the same settings was kept.
    Kept,
}

/// Why an existing design does not fit the study, if it does not.
pub(crate) fn design_mismatch(study: &Study, existing: &Design) -> Option<String> {
    let s = &study.design;
    let names = study.design_variable_names();
    if existing.names != names {
        let what = if study.controls.is_empty() {
            "parameters"
        } else {
            "controls and parameters"
        };
        return Some(format!(
            "its {what} {:?} differ from the study's {:?}",
            existing.names, names
        ));
    }
    // Points added later (`assay design --add`) do not count: the first round is what
    // `design.points` asked for (times the field conditions with `controls: from_data`).
    let n0 = existing.initial_size();
    let asked = s.points * s.conditions.as_ref().map_or(1, Vec::len);
    if existing.method != s.method
        || existing.seed != s.seed
        || n0 != asked
        || existing.space != s.space
    {
        return Some(format!(
            "it was made with method {:?}, seed {}, {} points, space {:?}; the study asks for {:?}, seed {}, {} points, space {:?}",
            existing.method, existing.seed, n0, existing.space, s.method, s.seed, asked, s.space
        ));
    }
    let vars = study.design_variables();
    for p in &existing.points {
        for (v, par) in p.values.iter().zip(&vars) {
            if *v < par.lo || *v > par.hi {
                return Some(format!(
                    "point {} has {} = {v} outside the range [{}, {}]",
                    p.id, par.name, par.lo, par.hi
                ));
            }
        }
    }
    None
}

/// Write `design.yaml`, or keep an existing one made with the same settings.
///
/// # Errors
/// An existing design that does not match the study (unless `force`), or I/O.
pub fn write_design(c: &Campaign, force: bool) -> Result<(Design, DesignOutcome)> {
    let path = c.path(DESIGN_FILE);
    if path.exists() && !force {
        let existing = load_design(c)?;
        let (check, _) = audit::check_design(c)?;
        match check.freshness {
            Freshness::Stale(why) => {
                return Err(InputError(format!(
                    "{} exists but does not match the study: {}. Use `assay design --force` to replace it (finished runs of replaced points are moved to {}/)",
                    path.display(),
                    why.join("; "),
                    runs::SUPERSEDED_DIR
                ))
                .into())
            }
            _ => return Ok((existing, DesignOutcome::Kept)),
        }
    }
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.study_parts(audit::design_parts(&c.study));
    clock.seed("design", c.study.design.seed);
    let d = design::generate(&c.study.design_variables(), &c.study.design)
        .map_err(|e| InputError(format!("cannot make the design: {e}")))?;
    write_record(
        &path,
        &Record::new("design", clock.finish(), DesignBody::from(&d)),
    )?;
    Ok((d, DesignOutcome::Created))
}

/// Add `n` points to the existing `design.yaml` (`assay design --add N`): the existing
/// points keep their ids and values, the new ones fill the gaps, the round is recorded.
/// Runs are not touched; the new points' runs are pending.
///
/// # Errors
/// No design yet, a design that does not match the study (changed parameters or
/// design settings), or I/O. All but I/O are bad input (exit 2).
pub fn augment_design(c: &Campaign, n: usize) -> Result<Design> {
    let path = c.path(DESIGN_FILE);
    if !path.exists() {
        return Err(InputError(format!(
            "cannot add points: there is no design at {} yet; run `assay design {}` first",
            path.display(),
            c.study.file.display()
        ))
        .into());
    }
    let existing = load_design(c)?;
    if let Some(why) = design_mismatch(&c.study, &existing) {
        return Err(InputError(format!(
            "cannot add points: {} does not match the study: {why}. Restore the study's settings, or start a new design with `assay design --force`",
            path.display()
        ))
        .into());
    }
    let d = match &c.study.design.conditions {
        Some(conditions) => {
            design::augment_at_conditions(&existing, &c.study.design_variables(), conditions, n)
        }
        None => design::augment(&existing, &c.study.design_variables(), n),
    }
    .map_err(|e| InputError(format!("cannot add points: {e}")))?;
    save_design(c, &d)?;
    Ok(d)
}

/// Write an extended design `d` over `design.yaml`.
///
/// The previous design.yaml is not listed among the inputs: it is overwritten here, so
/// its hash could never be checked again; its points and rounds are kept instead.
fn save_design(c: &Campaign, d: &Design) -> Result<()> {
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.study_parts(audit::design_parts(&c.study));
    clock.seed("design", d.seed);
    write_record(
        &c.path(DESIGN_FILE),
        &Record::new("design", clock.finish(), DesignBody::from(d)),
    )
}

/// Read the record `file` of the campaign, or say which command makes it.
///
/// # Errors
/// A missing record (naming `assay <stage>`) or a malformed one.
fn read_stage_record<T: serde::de::DeserializeOwned>(
    c: &Campaign,
    file: &str,
    stage: &str,
) -> Result<Record<T>> {
    let path = c.path(file);
    if !path.exists() {
        bail!(
            "no {file} in {}: run `assay {stage} {}` first",
            c.dir.display(),
            c.study.file.display()
        );
    }
    read_record(&path)
}

/// Read `surrogate.yaml`. A record from before the principal-component basis lacks its
/// keys; the error then says to refit.
fn read_surrogate(c: &Campaign) -> Result<Record<SurrogateBody>> {
    read_stage_record(c, SURROGATE_FILE, "fit").with_context(|| {
        format!(
            "cannot use {}; if it was written by an older assay, run `assay fit {}` again",
            c.path(SURROGATE_FILE).display(),
            c.study.file.display()
        )
    })
}

/// Read `design.yaml`.
///
/// # Errors
/// A missing or malformed design.
pub fn load_design(c: &Campaign) -> Result<Design> {
    let path = c.path(DESIGN_FILE);
    let rec: Record<DesignBody> = read_stage_record(c, DESIGN_FILE, "design")?;
    rec.body
        .to_design()
        .with_context(|| format!("{} is malformed", path.display()))
}

/// Take the campaign's lock (one assay process per campaign at a time).
///
/// # Errors
/// Another process holds it; the message names that process.
pub fn lock(c: &Campaign) -> Result<runs::CampaignLock> {
    Ok(runs::lock_campaign(&c.dir, &c.command_line)?)
}

/// Run every pending or failed run of the design. The caller holds [`lock`].
///
/// # Errors
/// A missing design, a simulator definition that changed under done runs (bad input,
/// exit 2), or I/O on the campaign folder.
pub fn run_stage(
    c: &Campaign,
    options: RunOptions,
    stop: &AtomicBool,
    observer: &dyn Observer,
) -> Result<RunSummary> {
    let design = load_design(c)?;
    match runs::run_all(
        &c.study,
        &design,
        &c.dir,
        options,
        &c.command_line,
        stop,
        observer,
    ) {
        Err(e) if e.is::<runs::RunsError>() => Err(InputError(e.to_string()).into()),
        other => other,
    }
}

/// What `assay status` shows.
#[derive(Debug, Clone)]
pub struct StatusReport {
    pub n_points: usize,
    pub counts: BTreeMap<String, StateCounts>,
    /// Failure reasons of failed runs, most common first.
    pub reasons: Vec<(String, usize)>,
    /// Latest change of any run record (UTC, RFC 3339).
    pub last_activity: Option<String>,
    /// What Slurm says of submitted runs, when there are any.
    pub slurm: Option<runs::slurm::Live>,
}

/// Reasons longer than this are cut for the status table.
const REASON_WIDTH: usize = 100;

/// Counts of runs by state per experiment, failure reasons and last activity.
pub fn status(c: &Campaign) -> Result<StatusReport> {
    let design = load_design(c)?;
    let (_, bodies) = runs::load_runs(&c.study, &design, &c.dir)?;
    let counts = runs::status_counts(&c.study, &design, &bodies);
    let mut by_reason: BTreeMap<String, usize> = BTreeMap::new();
    for b in bodies.iter().filter(|b| b.state == RunState::Failed) {
        let r = b.reason.clone().unwrap_or_else(|| "unknown".into());
        let short: String = r.chars().take(REASON_WIDTH).collect();
        *by_reason.entry(short).or_default() += 1;
    }
    let mut reasons: Vec<(String, usize)> = by_reason.into_iter().collect();
    reasons.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(&b.0)));
    let mut last: Option<SystemTime> = None;
    for p in &design.points {
        for e in &c.study.experiments {
            if let Some(t) = mtime(&runs::run_record_path(&c.dir, &p.id, &e.name)) {
                last = Some(last.map_or(t, |l| l.max(t)));
            }
        }
    }
    let last_activity = last.map(|t| {
        chrono::DateTime::<chrono::Utc>::from(t).to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
    });
    let slurm = runs::slurm::live(&c.dir, &bodies);
    Ok(StatusReport {
        n_points: design.points.len(),
        counts,
        reasons,
        last_activity,
        slurm,
    })
}

/// The normal prior on z = logit θ fitted to an earlier calibration's draws (the
/// `posterior-samples.csv` beside `calibration.prior_from`), with the number of draws
/// used and of draws left out for lying outside this study's ranges.
///
/// # Errors
/// The file cannot be read, lacks a column for one of this study's parameters, holds a
/// value that is not a number, or too few draws lie inside the ranges.
pub fn prior_from_draws(
    study: &Study,
    samples: &Path,
) -> Result<(crate::calibrate::MvnPrior, usize, usize)> {
    let bad = |m: String| {
        InputError(format!(
            "calibration.prior_from: {}: {m}",
            samples.display()
        ))
    };
    let mut r = csv::Reader::from_path(samples).map_err(|e| bad(e.to_string()))?;
    let headers = r.headers().map_err(|e| bad(e.to_string()))?.clone();
    let cols: Vec<usize> = study
        .parameters
        .iter()
        .map(|p| {
            headers.iter().position(|h| h == p.name).ok_or_else(|| {
                bad(format!(
                    "no column `{}` (the earlier calibration must have this study's parameters)",
                    p.name
                ))
            })
        })
        .collect::<Result<_, _>>()?;
    let mut z = Vec::new();
    let mut outside = 0;
    for (k, rec) in r.records().enumerate() {
        let rec = rec.map_err(|e| bad(e.to_string()))?;
        let mut row = Vec::with_capacity(cols.len());
        let mut inside = true;
        for (p, &i) in study.parameters.iter().zip(&cols) {
            let v: f64 = rec.get(i).unwrap_or("").parse().map_err(|_| {
                bad(format!(
                    "line {}: `{}` is not a number",
                    k + 2,
                    rec.get(i).unwrap_or("")
                ))
            })?;
            inside &= v > p.lo && v < p.hi;
            row.push(crate::calibrate::Transform { lo: p.lo, hi: p.hi }.to_unconstrained(v));
        }
        if inside {
            z.push(row);
        } else {
            outside += 1;
        }
    }
    let mvn = crate::calibrate::MvnPrior::fit(&z).map_err(bad)?;
    Ok((mvn, z.len(), outside))
}

/// Fit the surrogate to the finished runs and write `surrogate.yaml`.
pub fn fit_stage(c: &Campaign) -> Result<(FittedSurrogate, BTreeMap<String, usize>)> {
    let design = load_design(c)?;
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.input_named(DESIGN_FILE, &c.path(DESIGN_FILE))?;
    let (set, _) = runs::load_runs(&c.study, &design, &c.dir)?;
    let mut excluded = BTreeMap::new();
    for er in &set.experiments {
        excluded.insert(
            er.experiment.clone(),
            design.points.len() - er.point_ids.len(),
        );
        for ((id, h), out) in er
            .point_ids
            .iter()
            .zip(&er.record_sha256)
            .zip(&er.output_sha256)
        {
            let dir = format!("runs/{id}/{}", er.experiment);
            clock.input_hash(&format!("{dir}/run.yaml"), h);
            if let Some(out) = out {
                let file = &c.study.simulator.output.file;
                clock.input_hash(&format!("{dir}/{file}"), out);
            }
        }
    }
    clock.study_parts(audit::surrogate_parts(&c.study));
    let seed = c.study.surrogate.seed;
    clock.seed("surrogate", seed);
    let fitted = fit_surrogate(&set, &c.study.design_variables(), c.study.surrogate, seed)?;
    let mut body = SurrogateBody::from_fitted(&fitted, &c.study.design_variable_names());
    for e in &mut body.experiments {
        e.n_excluded = excluded.get(&e.name).copied().unwrap_or(0);
    }
    write_record(
        &c.path(SURROGATE_FILE),
        &Record::new("surrogate", clock.finish(), body),
    )?;
    Ok((fitted, excluded))
}

/// √D_j above this share of the measurement noise sd draws a warning: the basis then
/// adds at least 25 % to the variance the likelihood sees at that value (our choice).
pub const DISCARDED_SD_WARN: f64 = 0.5;

/// Warnings when a basis leaves out variance comparable to the measurement noise: the
/// largest ratio √D_j / σ_j over the output values of each experiment with known noise
/// (`noise.sd` or an sd column; the smallest sd of the value's replicates).
pub fn basis_warnings(c: &Campaign, s: &FittedSurrogate) -> Vec<String> {
    use crate::study::Noise;
    let mut out = Vec::new();
    for e in &c.study.experiments {
        let Some(m) = s.experiments.iter().find(|m| m.experiment == e.name) else {
            continue;
        };
        let targets = e.data.targets(c.study.simulator.output.y.len());
        if targets.len() != m.basis.n_values() {
            continue;
        }
        let mut worst: Option<(f64, usize, f64)> = None;
        for (j, t) in targets.iter().enumerate() {
            let sd = match &e.noise {
                Noise::Sd(v) => Some(*v),
                Noise::Column(_) => t.sds.iter().flatten().copied().reduce(f64::min),
                Noise::Unknown { .. } => None,
            };
            let Some(sd) = sd.filter(|v| *v > 0.0) else {
                continue;
            };
            let ratio = m.basis.discarded[j].sqrt() / sd;
            if worst.is_none_or(|(r, _, _)| ratio > r) {
                worst = Some((ratio, j, sd));
            }
        }
        if let Some((ratio, j, sd)) = worst.filter(|(r, _, _)| *r > DISCARDED_SD_WARN) {
            out.push(format!(
                "{}: the principal components leave out variance comparable to the measurement noise (at {}: sd {:.3e} left out vs noise sd {sd}, ratio {ratio:.2} > {DISCARDED_SD_WARN}); this blurs the parameters those components depend on: raise `surrogate.variance_kept` (now {})",
                e.name,
                m.outputs[j].name,
                m.basis.discarded[j].sqrt(),
                m.basis.variance_kept
            ));
        }
    }
    out
}

/// Validation of each experiment's surrogate, for printing.
pub fn validation_table(s: &FittedSurrogate) -> Vec<(String, usize, Validation)> {
    s.experiments
        .iter()
        .map(|e| {
            (
                e.experiment.clone(),
                e.point_ids.len(),
                e.validation.clone(),
            )
        })
        .collect()
}

/// Sample the posterior and write `posterior.yaml` and `posterior-samples.csv`.
pub fn calibrate_stage(
    c: &Campaign,
    stop: &AtomicBool,
    observer: &dyn Observer,
) -> Result<PosteriorSummary> {
    let rec = read_surrogate(c)?;
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.input_named(SURROGATE_FILE, &c.path(SURROGATE_FILE))?;
    clock.study_parts(audit::posterior_parts(&c.study));
    let fitted = rec.body.to_fitted()?;
    let emulators = c
        .study
        .experiments
        .iter()
        .map(|e| Ok(field_emulator(c, e, model_of(&fitted, &e.name)?)))
        .collect::<Result<Vec<_>>>()?;
    let mut experiments: Vec<(&dyn Emulator, ExperimentLikelihood)> = Vec::new();
    for (e, em) in c.study.experiments.iter().zip(&emulators) {
        let model = model_of(&fitted, &e.name)?;
        let names = runs::value_names(&c.study, e);
        let have: Vec<String> = model.outputs.iter().map(|o| o.name.clone()).collect();
        if names != have {
            return Err(InputError(format!(
                "the field data of `{}` ({}) no longer match the runs' outputs ({}); run `assay run` and `assay fit` again",
                e.name,
                names.join(", "),
                have.join(", ")
            ))
            .into());
        }
        let targets = e.data.targets(c.study.simulator.output.y.len());
        let mut lik = ExperimentLikelihood::new(e, &targets);
        if let Some(d) = discrepancy_of(&c.study, e) {
            lik = lik.with_discrepancy(d);
        }
        experiments.push((em as &dyn Emulator, lik));
    }
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
    // The training points are starting candidates for the chains (in design order,
    // each once): a posterior in a small corner of a wide box is found even when no
    // prior draw lands there.
    // With controls, the parameters are the inputs after the controls.
    let n_c = c.study.controls.len();
    let mut starts: Vec<Vec<f64>> = Vec::new();
    for m in &fitted.experiments {
        for x in &m.inputs {
            let theta = x[n_c..].to_vec();
            if !starts.contains(&theta) {
                starts.push(theta);
            }
        }
    }
    let mut mvn = None;
    if let Some(path) = &cal.prior_from {
        let samples = path.with_file_name("posterior-samples.csv");
        clock.input_named(&path.display().to_string(), path)?;
        clock.input_named(&samples.display().to_string(), &samples)?;
        let (prior, used, outside) = prior_from_draws(&c.study, &samples)?;
        if outside > 0 {
            observer.note(&format!(
                "prior_from: {outside} of {} earlier draws lie outside this study's ranges and were left out",
                used + outside
            ));
        }
        mvn = Some(prior);
    }
    let build = |experiments| {
        let post = LogPosterior::new(c.study.parameters.clone(), experiments)
            .with_start_candidates(&starts);
        match &mvn {
            Some(prior) => post.with_mvn_prior(prior.clone()),
            None => post,
        }
    };
    // `hyperparameters: map`: find the joint posterior mode with the hyperparameters
    // under their priors, then sample with them fixed there.
    let full = build(experiments);
    let at_map = cal
        .discrepancy
        .as_ref()
        .is_some_and(|d| d.hyperparameters == HyperparameterMode::Map)
        && full.n_discrepancy() > 0;
    let (post, searched) = if at_map {
        observer.note(&format!(
            "discrepancy hyperparameters: finding the joint posterior mode ({} starts)",
            MapParams::new(cal.seed).n_starts
        ));
        let est = find_map(&full, &MapParams::new(cal.seed))?;
        let fixed = build(with_fixed_discrepancy(&full, &est.x));
        (fixed, Some((full, est)))
    } else {
        (full, None)
    };
    if params.kind == crate::study::spec::SamplerChoice::Nuts && !post.has_gradient() {
        bail!("`calibration.sampler: nuts` needs the gradient of every part of the log posterior, and this study has a part without one: use `adaptive_metropolis`");
    }
    let sampling = std::time::Instant::now();
    let chains = sample(&post, &params, stop, observer);
    let sampling_s = sampling.elapsed().as_secs_f64();
    let names = c.study.parameter_names();
    let noise_names = post.noise_names();
    let mut summary = summarize(&names, &noise_names, &chains).with_discrepancy(&post, &chains);
    if let Some((full, est)) = &searched {
        summary = summary.with_map(full, est);
    }
    let discrepancy_labels = post.discrepancy_labels();
    let n_eval = post
        .n_evaluations
        .load(std::sync::atomic::Ordering::Relaxed);

    // Contract: chain,draw,<parameters...>,<noise...>,log_posterior, one noise sd column
    // `noise_sd.<experiment>` per estimated noise; then (an extension) one column per
    // sampled discrepancy hyperparameter, `discrepancy_sd.<experiment>.<quantity>` and
    // `discrepancy_length_scale.<experiment>.<quantity>`.
    let mut csv = csv::Writer::from_writer(Vec::new());
    let mut header = vec!["chain".to_string(), "draw".to_string()];
    header.extend(names.iter().cloned());
    header.extend(noise_names.iter().map(|e| format!("noise_sd.{e}")));
    header.extend(
        discrepancy_labels
            .iter()
            .map(|(e, q, kind, _)| format!("{}.{e}.{q}", kind.column_prefix())),
    );
    header.push("log_posterior".into());
    csv.write_record(&header)?;
    for ch in &chains {
        for (i, (((th, nv), dv), lp)) in ch
            .theta
            .iter()
            .zip(&ch.noise_var)
            .zip(&ch.discrepancy)
            .zip(&ch.ln_posterior)
            .enumerate()
        {
            let mut row = vec![ch.index.to_string(), i.to_string()];
            row.extend(th.iter().map(|v| format!("{v}")));
            row.extend(nv.iter().map(|v| format!("{}", v.sqrt())));
            row.extend(dv.iter().map(|v| format!("{v}")));
            row.push(format!("{lp}"));
            csv.write_record(&row)?;
        }
    }
    let bytes = csv.into_inner().context("cannot write the samples")?;
    let samples_path = c.path(SAMPLES_FILE);
    write_atomic(&samples_path, &bytes)?;
    let body = PosteriorBody::new(&summary, &chains, &params, n_eval);
    let mut record = Record::new("posterior", clock.finish(), body);
    record.body.samples_sha256 = Some(sha256_file(&samples_path)?);
    record.body.sampling_s = Some(sampling_s);
    record.body.settings.prior_from = cal.prior_from.as_ref().map(|p| p.display().to_string());
    write_record(&c.path(POSTERIOR_FILE), &record)?;
    Ok(summary)
}

/// The model discrepancy of experiment `e` when the study gives it one.
pub fn discrepancy_of(study: &Study, e: &crate::study::Experiment) -> Option<Discrepancy> {
    let d = study.calibration.discrepancy.as_ref()?;
    if !d.experiments.contains(&e.name) {
        return None;
    }
    let y = &study.simulator.output.y;
    let targets = e.data.targets(y.len());
    let disc = Discrepancy::new(d, y, &targets);
    Some(if study.controls.is_empty() {
        disc
    } else {
        disc.over_controls(d, &targets, &e.data.conditions(), &study.controls)
    })
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
    e: &crate::study::Experiment,
    posterior: &PosteriorBody,
) -> Result<Option<Discrepancy>> {
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
        let value = |h: Option<&HyperSummary>, what: &str| -> Result<Hyper> {
            match h {
                Some(HyperSummary {
                    value: Some(v),
                    fixed_at: Some(FixedAt::Map),
                    ..
                }) => Ok(Hyper::Fixed(*v)),
                _ => Err(InputError(format!(
                    "{POSTERIOR_FILE} has no posterior-mode value of the discrepancy {what} of {}.{} (`hyperparameters: map`): run `assay calibrate` again",
                    e.name, b.quantity
                ))
                .into()),
            }
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
fn discrepancy_sd_draws<R: AsRef<[f64]>>(
    study: &Study,
    e: &crate::study::Experiment,
    posterior: &PosteriorBody,
    samples: &crate::report::compute::Samples,
    rows: &[R],
) -> Result<Option<Vec<Vec<f64>>>> {
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
                let j = samples.column(&name).ok_or_else(|| {
                    InputError(format!(
                        "the samples have no column `{name}`: run `assay calibrate` again"
                    ))
                })?;
                for (o, r) in out.iter_mut().zip(rows) {
                    o[q] = r.as_ref()[j];
                }
            }
        }
    }
    Ok(Some(out))
}

fn mtime(p: &Path) -> Option<SystemTime> {
    std::fs::metadata(p).and_then(|m| m.modified()).ok()
}

/// Read a campaign record when it exists.
fn read_if_exists<T: serde::de::DeserializeOwned>(
    c: &Campaign,
    file: &str,
) -> Result<Option<Record<T>>> {
    let path = c.path(file);
    if path.exists() {
        Ok(Some(read_record(&path)?))
    } else {
        Ok(None)
    }
}

/// What the likelihood and the checks evaluate for experiment `e`: its surrogate, at
/// the field conditions when the study has controls.
fn field_emulator<'a>(
    c: &Campaign,
    e: &crate::study::Experiment,
    model: &'a crate::surrogate::ExperimentModel,
) -> crate::surrogate::FieldEmulator<'a> {
    let targets = e.data.targets(c.study.simulator.output.y.len());
    crate::surrogate::FieldEmulator::new(
        model,
        c.study.controls.len(),
        e.data.conditions(),
        targets.iter().map(|t| (t.condition, t.value)).collect(),
    )
}

/// The surrogate of experiment `name`, or say how to make it.
fn model_of<'a>(
    fitted: &'a FittedSurrogate,
    name: &str,
) -> Result<&'a crate::surrogate::ExperimentModel> {
    fitted
        .experiments
        .iter()
        .find(|m| m.experiment == name)
        .with_context(|| format!("the surrogate has no experiment `{name}`: run `assay fit` again"))
}

/// Posterior predictive checks of every experiment: `checks.yaml`.
///
/// # Errors
/// No surrogate or posterior yet, unreadable samples, or samples without a column for a
/// parameter of the study.
pub fn check_stage(c: &Campaign, confirm: Option<Confirm<'_>>) -> Result<crate::check::ChecksBody> {
    use crate::check::{check_experiment, ChecksBody};
    let surrogate: Record<SurrogateBody> = read_stage_record(c, SURROGATE_FILE, "fit")?;
    let posterior: Record<PosteriorBody> = read_stage_record(c, POSTERIOR_FILE, "calibrate")?;
    let fitted = surrogate.body.to_fitted()?;
    let (samples, rows, draws) = posterior_draws(c)?;
    let path = c.path(SAMPLES_FILE);
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.input_named(SURROGATE_FILE, &c.path(SURROGATE_FILE))?;
    clock.input_named(POSTERIOR_FILE, &c.path(POSTERIOR_FILE))?;
    clock.input_named(SAMPLES_FILE, &path)?;
    let seed = c.study.calibration.seed;
    clock.seed("checks", seed);
    let mut experiments = Vec::new();
    for (k, e) in c.study.experiments.iter().enumerate() {
        let model = field_emulator(c, e, model_of(&fitted, &e.name)?);
        let noise: Option<Vec<f64>> = samples
            .column(&format!("noise_sd.{}", e.name))
            .map(|j| rows.iter().map(|r| r[j]).collect());
        // Streams past those of the chains: the checks never share random numbers with
        // the sampler.
        let disc = discrepancy_sd_draws(&c.study, e, &posterior.body, &samples, &rows)?;
        let mut rng = crate::rng::stream(seed, CHECK_STREAM_BASE + k as u64);
        let predictive = crate::check::DrawnVariances {
            noise_sd: noise.as_deref(),
            discrepancy_sd: disc.as_deref(),
        };
        let check = check_experiment(&c.study, e, &model, &draws, predictive, &mut rng)
            .ok_or_else(|| {
                InputError(format!(
                    "the surrogate's outputs of `{}` do not match its field data: run `assay all` to bring the records up to date",
                    e.name
                ))
            })?;
        experiments.push(check);
    }
    let confirmation = match confirm {
        Some(cf) if cf.n > 0 && !c.study.controls.is_empty() => {
            return Err(InputError(
                "confirmation runs and refinement are not available yet for studies with `controls`: set checks.confirmation_runs to 0 and use `assay design --add`".into(),
            )
            .into())
        }
        Some(cf) if cf.n > 0 => {
            let conf = confirm_runs(c, &fitted, &samples, &draws, cf)?;
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
        n_draws: draws.len(),
        passes,
        confirmation,
        experiments,
        caution: crate::calibrate::CAUTION.to_string(),
    };
    write_record(
        &c.path(CHECKS_FILE),
        &Record::new("checks", clock.finish(), body.clone()),
    )?;
    Ok(body)
}

/// Confirmation runs for [`check_stage`]: how many posterior draws (plus the mean), and
/// how to run them.
pub struct Confirm<'a> {
    pub n: usize,
    pub options: RunOptions,
    pub stop: &'a AtomicBool,
    pub observer: &'a dyn Observer,
}

/// The posterior samples, their rows thinned evenly to at most [`CHECK_DRAWS`], and
/// those rows' parameter values in the study's order.
///
/// # Errors
/// No samples file, a malformed one, or one without a column for a parameter.
#[allow(clippy::type_complexity)]
fn posterior_draws(
    c: &Campaign,
) -> Result<(
    crate::report::compute::Samples,
    Vec<Vec<f64>>,
    Vec<Vec<f64>>,
)> {
    use crate::report::compute::Samples;
    let path = c.path(SAMPLES_FILE);
    let text = std::fs::read_to_string(&path)
        .with_context(|| format!("cannot read {}", path.display()))?;
    let samples =
        Samples::parse_csv(&text).map_err(|e| InputError(format!("{}:{e}", path.display())))?;
    let rows: Vec<Vec<f64>> = samples
        .thinned(CHECK_DRAWS)
        .into_iter()
        .map(<[f64]>::to_vec)
        .collect();
    let cols = c
        .study
        .parameters
        .iter()
        .map(|p| {
            samples.column(&p.name).ok_or_else(|| {
                InputError(format!(
                    "{} has no column `{}`: run `assay calibrate` again",
                    path.display(),
                    p.name
                ))
            })
        })
        .collect::<Result<Vec<usize>, InputError>>()?;
    let draws: Vec<Vec<f64>> = rows
        .iter()
        .map(|r| cols.iter().map(|&j| r[j]).collect())
        .collect();
    Ok((samples, rows, draws))
}

/// Add a refinement round to the design: `n_near` points among the posterior draws
/// (spread out by greedy maximin), then `n_global` over the whole box (the design's own
/// way of adding points, as `assay design --add`). Writes `design.yaml`; returns the
/// design and the ids of the two groups.
///
/// # Errors
/// No design or posterior samples, or a design that does not match the study.
pub fn refine_design(
    c: &Campaign,
    n_near: usize,
    n_global: usize,
) -> Result<(Design, Vec<String>, Vec<String>)> {
    let existing = load_design(c)?;
    if let Some(why) = design_mismatch(&c.study, &existing) {
        return Err(InputError(format!(
            "cannot refine: {} does not match the study: {why}; run `assay all` first",
            c.path(DESIGN_FILE).display()
        ))
        .into());
    }
    let (_, _, draws) = posterior_draws(c)?;
    let n0 = existing.points.len();
    let mut d = existing;
    if n_near > 0 {
        let stream = d.rounds.len().max(1) as u64;
        d = design::spread_among(
            &d,
            &c.study.parameters,
            &draws,
            n_near.min(draws.len()),
            d.seed,
            stream,
        )
        .map_err(|e| InputError(format!("cannot add refinement points: {e}")))?;
    }
    let n1 = d.points.len();
    if n_global > 0 {
        d = design::augment(&d, &c.study.parameters, n_global)
            .map_err(|e| InputError(format!("cannot add refinement points: {e}")))?;
    }
    save_design(c, &d)?;
    let ids = |r: std::ops::Range<usize>| d.points[r].iter().map(|p| p.id.clone()).collect();
    let (near, global) = (ids(n0..n1), ids(n1..d.points.len()));
    Ok((d, near, global))
}

/// Write `refinement.yaml`.
///
/// # Errors
/// I/O.
pub fn write_refinement(c: &Campaign, body: &crate::check::refine::RefinementBody) -> Result<()> {
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.input_named(DESIGN_FILE, &c.path(DESIGN_FILE))?;
    write_record(
        &c.path(REFINEMENT_FILE),
        &Record::new("refinement", clock.finish(), body.clone()),
    )
}

/// Whether `refinement.yaml` records a finished refinement of the current design (so
/// `assay all` with `checks.refine` does not refine again).
pub fn refinement_done(c: &Campaign) -> bool {
    use crate::check::refine::{RefinementBody, Stopped};
    let Ok(rec) = read_record::<RefinementBody>(&c.path(REFINEMENT_FILE)) else {
        return false;
    };
    let Ok(sha) = sha256_file(&c.path(DESIGN_FILE)) else {
        return false;
    };
    rec.body.stopped != Stopped::InProgress && rec.body.design_sha256.as_deref() == Some(&sha)
}

/// The sha256 of `design.yaml`.
///
/// # Errors
/// I/O.
pub fn design_sha256(c: &Campaign) -> Result<String> {
    Ok(sha256_file(&c.path(DESIGN_FILE))?)
}

/// Posterior means of the parameters (study order) from `posterior.yaml`.
///
/// # Errors
/// No posterior yet, or one without a parameter of the study.
pub fn posterior_means(c: &Campaign) -> Result<Vec<f64>> {
    let p: Record<PosteriorBody> = read_stage_record(c, POSTERIOR_FILE, "calibrate")?;
    c.study
        .parameters
        .iter()
        .map(|q| {
            p.body
                .parameters
                .get(&q.name)
                .map(|s| s.mean)
                .with_context(|| format!("posterior.yaml has no parameter `{}`", q.name))
        })
        .collect()
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
    samples: &crate::report::compute::Samples,
    draws: &[Vec<f64>],
    cf: Confirm<'_>,
) -> Result<crate::check::Confirmation> {
    use crate::check::{confirm_experiment, Confirmation, ConfirmationPoint};
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
        .map_err(|e| InputError(format!("cannot add confirmation points: {e}")))?;
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
    let _ = runs::run_all(
        &c.study,
        &design,
        &c.dir,
        cf.options,
        &c.command_line,
        cf.stop,
        cf.observer,
    )?;
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
            crate::study::Noise::Sd(s) => *s,
            crate::study::Noise::Column(_) => {
                let sds: Vec<f64> = e.data.rows.iter().filter_map(|r| r.sd).collect();
                sds.iter().sum::<f64>() / sds.len().max(1) as f64
            }
            crate::study::Noise::Unknown { .. } => samples
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

/// Write the HTML report to `out`: read the records that exist, recompute the
/// leave-one-out predictions and the predictive bands, check the audit trail, render.
///
/// # Errors
/// No design yet, a malformed record or samples file, or I/O.
pub fn report_stage(c: &Campaign, out: &Path) -> Result<()> {
    use crate::report::{self, compute, DesignView, PosteriorView, ReportInput, SurrogateView};
    let design_rec: Record<DesignBody> = read_stage_record(c, DESIGN_FILE, "design")?;
    let design = design_rec
        .body
        .to_design()
        .with_context(|| format!("{} is malformed", c.path(DESIGN_FILE).display()))?;
    let (_, runs) = runs::load_runs(&c.study, &design, &c.dir)?;
    let surrogate = match read_if_exists::<SurrogateBody>(c, SURROGATE_FILE)? {
        None => None,
        Some(rec) => {
            let fitted = rec.body.to_fitted()?;
            Some((rec, fitted))
        }
    };
    let posterior = match read_if_exists::<PosteriorBody>(c, POSTERIOR_FILE)? {
        None => None,
        Some(rec) => {
            // Without readable samples the report still shows the posterior table and
            // says why the plots are missing (the audit section names the file too).
            let path = c.path(SAMPLES_FILE);
            let samples = std::fs::read_to_string(&path)
                .map_err(|e| format!("cannot read {SAMPLES_FILE}: {e}"))
                .and_then(|text| {
                    compute::Samples::parse_csv(&text).map_err(|e| format!("{SAMPLES_FILE}:{e}"))
                });
            Some((rec, samples))
        }
    };
    let posterior_view = posterior.map(|(rec, samples)| {
        let mut predictive = Vec::new();
        let mut notes = Vec::new();
        let (samples, samples_problem) = match samples {
            Ok(s) => (s, None),
            Err(e) => (
                compute::Samples {
                    columns: Vec::new(),
                    chains: Vec::new(),
                },
                Some(e),
            ),
        };
        let rows = samples.thinned(report::PREDICTIVE_DRAWS);
        let cols: Vec<Option<usize>> = c
            .study
            .parameters
            .iter()
            .map(|p| samples.column(&p.name))
            .collect();
        let draws: Vec<Vec<f64>> = if samples_problem.is_some() {
            Vec::new()
        } else if cols.iter().all(Option::is_some) {
            rows.iter()
                .map(|r| cols.iter().map(|j| r[j.expect("checked")]).collect())
                .collect()
        } else {
            notes.push("the samples do not have a column for every parameter of the study: run `assay calibrate` again".into());
            Vec::new()
        };
        for e in &c.study.experiments {
            let Some((_, fitted)) = &surrogate else {
                notes.push("no surrogate.yaml: predictive bands need the surrogate".into());
                break;
            };
            let Some(model) = fitted.experiments.iter().find(|m| m.experiment == e.name) else {
                notes.push(format!("the surrogate has no experiment `{}`", e.name));
                continue;
            };
            let noise: Option<Vec<f64>> = samples
                .column(&format!("noise_sd.{}", e.name))
                .map(|j| rows.iter().map(|r| r[j]).collect());
            let disc = match discrepancy_sd_draws(&c.study, e, &rec.body, &samples, &rows) {
                Ok(d) => d,
                Err(err) => {
                    notes.push(format!("{}: {err}", e.name));
                    continue;
                }
            };
            let drawn = crate::check::DrawnVariances {
                noise_sd: noise.as_deref(),
                discrepancy_sd: disc.as_deref(),
            };
            // With controls the emulator gives the field vector (one entry per target)
            // when the surrogate's outputs are the runs' values.
            let n_outputs = if c.study.controls.is_empty() {
                model.outputs.len()
            } else if model.outputs.len() == runs::value_names(&c.study, e).len() {
                e.data.targets(c.study.simulator.output.y.len()).len()
            } else {
                0
            };
            match compute::predictive(
                &c.study,
                e,
                &field_emulator(c, e, model),
                n_outputs,
                &draws,
                drawn,
            ) {
                Some(q) => predictive.extend(q),
                None if !draws.is_empty() => notes.push(format!(
                    "{}: the surrogate's outputs do not match the field data (run `assay all` to bring the records up to date)",
                    e.name
                )),
                None => {}
            }
        }
        PosteriorView {
            body: rec.body,
            provenance: rec.provenance,
            n_predictive_draws: draws.len(),
            samples,
            samples_problem,
            predictive,
            predictive_notes: notes,
        }
    });
    let surrogate_view = surrogate.map(|(rec, fitted)| SurrogateView {
        loo: fitted
            .experiments
            .iter()
            .map(|m| (m.experiment.clone(), compute::loo_of(m)))
            .collect(),
        body: rec.body,
        provenance: rec.provenance,
    });
    let input = ReportInput {
        study: &c.study,
        generated_utc: chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        design: Some(DesignView {
            design,
            provenance: design_rec.provenance,
        }),
        runs,
        surrogate: surrogate_view,
        posterior: posterior_view,
        verification: audit::verify(c).ok(),
    };
    write_atomic(out, report::render(&input).as_bytes())
}

/// Parse prediction points: a CSV whose header names every parameter (any order).
///
/// # Errors
/// [`InputError`] naming the file and line of a missing column or a bad number.
pub fn parse_points(text: &str, file: &Path, names: &[String]) -> Result<Vec<Vec<f64>>> {
    let bad = |line: usize, msg: String| InputError(format!("{}:{line}: {msg}", file.display()));
    let mut r = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .from_reader(text.as_bytes());
    let headers = r
        .headers()
        .map_err(|e| bad(1, format!("cannot read the header: {e}")))?
        .clone();
    let mut idx = Vec::new();
    for n in names {
        let i = headers.iter().position(|h| h == n).ok_or_else(|| {
            bad(
                1,
                format!(
                    "no column `{n}` (the header must name every parameter: {})",
                    names.join(", ")
                ),
            )
        })?;
        idx.push(i);
    }
    let mut out = Vec::new();
    for (k, rec) in r.records().enumerate() {
        let line = k + 2;
        let rec = rec.map_err(|e| bad(line, format!("malformed row: {e}")))?;
        let mut row = Vec::with_capacity(idx.len());
        for (&i, n) in idx.iter().zip(names) {
            let s = rec.get(i).unwrap_or("");
            let v: f64 = s
                .parse()
                .map_err(|_| bad(line, format!("`{s}` in column `{n}` is not a number")))?;
            if !v.is_finite() {
                return Err(bad(line, format!("`{s}` in column `{n}` is not finite")).into());
            }
            row.push(v);
        }
        out.push(row);
    }
    if out.is_empty() {
        return Err(bad(1, "no points (the file has a header but no rows)".into()).into());
    }
    Ok(out)
}

/// Surrogate mean and sd at `points`, as CSV: the controls and parameters, then for every experiment
/// and output value `EXP.Y.mean`, `EXP.Y.sd` (curves: `EXP.Y@X.mean`, `EXP.Y@X.sd`).
/// Also returns how many points lie outside the parameter box (extrapolation).
pub fn predict_csv(c: &Campaign, points: &[Vec<f64>]) -> Result<(Vec<u8>, usize)> {
    use rayon::prelude::*;
    let fitted = read_surrogate(c)?.body.to_fitted()?;
    let names = c.study.design_variable_names();
    let mut header = names.clone();
    for e in &fitted.experiments {
        for o in &e.outputs {
            header.push(format!("{}.{}.mean", e.experiment, o.name));
            header.push(format!("{}.{}.sd", e.experiment, o.name));
        }
    }
    let rows: Vec<Vec<String>> = points
        .par_iter()
        .map(|p| {
            let mut row: Vec<String> = p.iter().map(|v| format!("{v}")).collect();
            for e in &fitted.experiments {
                let (m, v) = e.predict(p);
                for (mi, vi) in m.iter().zip(&v) {
                    row.push(format!("{mi}"));
                    row.push(format!("{}", vi.sqrt()));
                }
            }
            row
        })
        .collect();
    let outside = points
        .iter()
        .filter(|p| {
            p.iter()
                .zip(&c.study.design_variables())
                .any(|(v, par)| *v < par.lo || *v > par.hi)
        })
        .count();
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(&header)?;
    for r in rows {
        w.write_record(&r)?;
    }
    Ok((
        w.into_inner().context("cannot write the predictions")?,
        outside,
    ))
}
