//! The campaign folder and the stages' I/O: read the previous records, call the pure
//! cores, write one record. The CLI calls these; tests can too.
//!
//! Layout of `<runs>/<study name>/`: `design.yaml`, `runs/<point>/<experiment>/run.yaml`,
//! `surrogate.yaml`, `posterior.yaml`, `posterior-samples.csv`.

use crate::calibrate::{
    sample, summarize, Emulator, ExperimentLikelihood, LogPosterior, PosteriorBody,
    PosteriorSummary, SamplerParams,
};
use crate::design::{self, Design, DesignBody};
use crate::progress::Observer;
use crate::record::{
    read_record, sha256_file, write_atomic, write_record, ProvenanceClock, Record,
};
use crate::runs::{self, RunOptions, RunState, RunSummary, StateCounts};
use crate::study::Study;
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
fn design_mismatch(study: &Study, existing: &Design) -> Option<String> {
    let s = &study.design;
    if existing.names != study.parameter_names() {
        return Some(format!(
            "its parameters {:?} differ from the study's {:?}",
            existing.names,
            study.parameter_names()
        ));
    }
    if existing.method != s.method || existing.seed != s.seed || existing.points.len() != s.points {
        return Some(format!(
            "it was made with method {:?}, seed {}, {} points; the study asks for {:?}, seed {}, {} points",
            existing.method,
            existing.seed,
            existing.points.len(),
            s.method,
            s.seed,
            s.points
        ));
    }
    for p in &existing.points {
        for (v, par) in p.values.iter().zip(&study.parameters) {
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
        match design_mismatch(&c.study, &existing) {
            None => return Ok((existing, DesignOutcome::Kept)),
            Some(why) => {
                return Err(InputError(format!(
                    "{} exists but does not match the study: {why}. Use `assay design --force` to replace it (runs of removed points stay on disk but are no longer used)",
                    path.display()
                ))
                .into())
            }
        }
    }
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.seed("design", c.study.design.seed);
    let mut rng = crate::rng::stream(c.study.design.seed, 0);
    let d = design::generate(
        &c.study.parameters,
        c.study.design.method,
        c.study.design.points,
        c.study.design.seed,
        &mut rng,
    );
    write_record(
        &path,
        &Record::new("design", clock.finish(), DesignBody::from(&d)),
    )?;
    Ok((d, DesignOutcome::Created))
}

/// Read `design.yaml`.
///
/// # Errors
/// A missing or malformed design.
pub fn load_design(c: &Campaign) -> Result<Design> {
    let path = c.path(DESIGN_FILE);
    if !path.exists() {
        bail!(
            "no design at {}: run `assay design {}` first",
            path.display(),
            c.study.file.display()
        );
    }
    let rec: Record<DesignBody> = read_record(&path)?;
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
    Ok(StatusReport {
        n_points: design.points.len(),
        counts,
        reasons,
        last_activity,
    })
}

/// Fit the surrogate to the finished runs and write `surrogate.yaml`.
pub fn fit_stage(c: &Campaign) -> Result<FittedSurrogate> {
    let design = load_design(c)?;
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.input(&c.path(DESIGN_FILE))?;
    let (set, _) = runs::load_runs(&c.study, &design, &c.dir)?;
    for er in &set.experiments {
        for (id, h) in er.point_ids.iter().zip(&er.record_sha256) {
            clock.input_hash(&format!("runs/{id}/{}/run.yaml", er.experiment), h);
        }
    }
    let seed = c.study.surrogate.seed;
    clock.seed("surrogate", seed);
    let fitted = fit_surrogate(&set, &c.study.parameters, c.study.surrogate, seed)?;
    let body = SurrogateBody::from_fitted(&fitted, &c.study.parameter_names());
    write_record(
        &c.path(SURROGATE_FILE),
        &Record::new("surrogate", clock.finish(), body),
    )?;
    Ok(fitted)
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
    let spath = c.path(SURROGATE_FILE);
    if !spath.exists() {
        bail!(
            "no surrogate at {}: run `assay fit {}` first",
            spath.display(),
            c.study.file.display()
        );
    }
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.input(&spath)?;
    let rec: Record<SurrogateBody> = read_record(&spath)?;
    let fitted = rec.body.to_fitted()?;
    let mut experiments: Vec<(&dyn Emulator, ExperimentLikelihood)> = Vec::new();
    for e in &c.study.experiments {
        let model = fitted
            .experiments
            .iter()
            .find(|m| m.experiment == e.name)
            .with_context(|| {
                format!(
                    "the surrogate has no experiment `{}`: run `assay fit` again",
                    e.name
                )
            })?;
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
        experiments.push((
            model as &dyn Emulator,
            ExperimentLikelihood::new(e, &targets),
        ));
    }
    let cal = &c.study.calibration;
    let params = SamplerParams {
        chains: cal.chains,
        warmup: cal.warmup,
        draws: cal.draws,
        seed: cal.seed,
    };
    clock.seed("calibration", cal.seed);
    let post = LogPosterior::new(c.study.parameters.clone(), experiments);
    let chains = sample(&post, &params, stop, observer);
    let names = c.study.parameter_names();
    let summary = summarize(&names, &chains);
    let n_eval = post
        .n_evaluations
        .load(std::sync::atomic::Ordering::Relaxed);

    let mut csv = csv::Writer::from_writer(Vec::new());
    let mut header = vec!["chain".to_string(), "draw".to_string()];
    header.extend(names.iter().cloned());
    header.push("log_posterior".into());
    csv.write_record(&header)?;
    for ch in &chains {
        for (i, (th, lp)) in ch.theta.iter().zip(&ch.ln_posterior).enumerate() {
            let mut row = vec![ch.index.to_string(), i.to_string()];
            row.extend(th.iter().map(|v| format!("{v}")));
            row.push(format!("{lp}"));
            csv.write_record(&row)?;
        }
    }
    let bytes = csv.into_inner().context("cannot write the samples")?;
    let samples_path = c.path(SAMPLES_FILE);
    write_atomic(&samples_path, &bytes)?;
    let body = PosteriorBody::new(&summary, &chains, &params, n_eval);
    let mut prov = clock.finish();
    prov.inputs.remove(SAMPLES_FILE);
    let mut record = Record::new("posterior", prov, body);
    record.body.samples_sha256 = Some(sha256_file(&samples_path)?);
    write_record(&c.path(POSTERIOR_FILE), &record)?;
    Ok(summary)
}

fn mtime(p: &Path) -> Option<SystemTime> {
    std::fs::metadata(p).and_then(|m| m.modified()).ok()
}

/// Is the record at `output` missing or older than any of `inputs`?
pub fn is_stale(output: &Path, inputs: &[PathBuf]) -> bool {
    let Some(out) = mtime(output) else {
        return true;
    };
    inputs
        .iter()
        .any(|i| mtime(i).map(|t| t > out).unwrap_or(true))
}

/// Inputs of the fit stage: the study's files, the design and every run record.
pub fn fit_inputs(c: &Campaign) -> Result<Vec<PathBuf>> {
    let design = load_design(c)?;
    let mut v = c.study.input_files();
    v.push(c.path(DESIGN_FILE));
    for p in &design.points {
        for e in &c.study.experiments {
            let r = runs::run_record_path(&c.dir, &p.id, &e.name);
            if r.exists() {
                v.push(r);
            }
        }
    }
    Ok(v)
}

/// Inputs of the calibration stage.
pub fn calibrate_inputs(c: &Campaign) -> Vec<PathBuf> {
    let mut v = c.study.input_files();
    v.push(c.path(SURROGATE_FILE));
    v
}
