//! The audit trail: does every record still describe the files beside it?
//!
//! Input: a [`Campaign`] (the study and its campaign folder).
//! Output: a [`Verification`]: per stage, whether its record is there, whether the files
//! it names still have the recorded sha256, and whether it is stale (a part of the
//! study or an earlier stage's record changed after it was made).
//! `assay verify` prints it; `assay all` asks it which stages to redo, so both decide
//! staleness the same way.
//!
//! The chain: `design.yaml` names the study parts it was made from; each `run.yaml` its
//! `key` (simulator definition and the point's values) and the sha256 of its output file;
//! `surrogate.yaml` the sha256 of `design.yaml`, of every `run.yaml` and output file it
//! used, and its study parts; `posterior.yaml` the sha256 of `surrogate.yaml` and of
//! `posterior-samples.csv`, and its study parts.
//! Main types: [`Verification`], [`StageCheck`], [`Finding`].

mod parts;

pub use parts::{changed_parts, design_parts, posterior_parts, surrogate_parts};

use crate::calibrate::PosteriorBody;
use crate::design::{Design, DesignBody};
use crate::layout::{
    Campaign, CHECKS_FILE, DESIGN_FILE, POSTERIOR_FILE, SAMPLES_FILE, SURROGATE_FILE,
};
use crate::record::{read_record, sha256_file, Provenance, Record};
use crate::runs::{self, same_point, RunBody, RunState};
use serde::Deserialize;
use std::collections::{BTreeMap, BTreeSet};
use std::fmt;
use std::path::Path;

/// The stages whose records are checked, in pipeline order.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Stage {
    Design,
    Runs,
    Surrogate,
    Posterior,
    Checks,
}

impl Stage {
    pub fn name(self) -> &'static str {
        match self {
            Stage::Design => "design",
            Stage::Runs => "runs",
            Stage::Surrogate => "surrogate",
            Stage::Posterior => "posterior",
            Stage::Checks => "checks",
        }
    }
}

/// What is wrong with one file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Problem {
    /// Named in a record, absent on disk.
    Missing,
    /// Its sha256 differs from the one recorded beside it (edited or corrupted).
    Altered,
    /// There but not a valid record.
    Unreadable,
}

impl fmt::Display for Problem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Problem::Missing => "missing",
            Problem::Altered => "altered",
            Problem::Unreadable => "unreadable",
        })
    }
}

/// One file that does not match its record.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Finding {
    /// Path relative to the campaign folder.
    pub file: String,
    pub problem: Problem,
    pub detail: String,
}

/// State of one stage's record.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Freshness {
    /// No record yet (the stage has not run).
    NotRun,
    /// The record matches the study and the earlier stages.
    Fresh,
    /// Something it was made from changed since; the reasons.
    Stale(Vec<String>),
}

/// The check of one stage.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StageCheck {
    pub stage: Stage,
    pub freshness: Freshness,
    /// Files of this stage that are missing, altered or unreadable.
    pub findings: Vec<Finding>,
    /// Facts worth showing that are not problems (counts of runs by state).
    pub notes: Vec<String>,
}

impl StageCheck {
    fn new(stage: Stage) -> Self {
        Self {
            stage,
            freshness: Freshness::Fresh,
            findings: Vec::new(),
            notes: Vec::new(),
        }
    }

    fn stale(&mut self, why: String) {
        match &mut self.freshness {
            Freshness::Stale(v) => v.push(why),
            _ => self.freshness = Freshness::Stale(vec![why]),
        }
    }

    fn find(&mut self, file: String, problem: Problem, detail: String) {
        self.findings.push(Finding {
            file,
            problem,
            detail,
        });
    }

    pub fn is_stale(&self) -> bool {
        matches!(self.freshness, Freshness::Stale(_))
    }

    /// The stage must be (re)done: no record, stale, or its own files are broken.
    pub fn needs_redo(&self) -> bool {
        self.freshness != Freshness::Fresh || !self.findings.is_empty()
    }
}

/// The whole campaign's check, stages in pipeline order.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Verification {
    pub stages: Vec<StageCheck>,
}

impl Verification {
    /// True when no file is missing, altered or unreadable and no stage is stale. Stages
    /// not run yet are fine as long as no later record needs them.
    pub fn is_consistent(&self) -> bool {
        self.stages
            .iter()
            .all(|s| s.findings.is_empty() && !s.is_stale())
    }

    pub fn stage(&self, stage: Stage) -> &StageCheck {
        self.stages
            .iter()
            .find(|s| s.stage == stage)
            .expect("every stage is checked")
    }
}

/// Only the envelope of a record: enough to read its provenance.
#[derive(Deserialize)]
struct Envelope {
    provenance: Provenance,
}

fn read_envelope(path: &Path) -> anyhow::Result<Envelope> {
    use anyhow::Context;
    let text =
        std::fs::read_to_string(path).with_context(|| format!("cannot read {}", path.display()))?;
    serde_yaml::from_str(&text).with_context(|| format!("{} is not a valid record", path.display()))
}

fn short(h: &str) -> &str {
    &h[..h.len().min(12)]
}

/// Hash `path`; `None` when it does not exist.
fn hash_if_exists(path: &Path) -> std::io::Result<Option<String>> {
    match sha256_file(path) {
        Ok(h) => Ok(Some(h)),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(None),
        Err(e) => Err(e),
    }
}

/// Check `design.yaml`; also returns the design when it could be read.
///
/// # Errors
/// I/O other than a missing file.
pub fn check_design(c: &Campaign) -> anyhow::Result<(StageCheck, Option<Design>)> {
    let mut s = StageCheck::new(Stage::Design);
    let path = c.path(DESIGN_FILE);
    if !path.exists() {
        s.freshness = Freshness::NotRun;
        return Ok((s, None));
    }
    let rec: Record<DesignBody> = match read_record(&path) {
        Ok(r) => r,
        Err(e) => {
            s.find(DESIGN_FILE.into(), Problem::Unreadable, format!("{e:#}"));
            return Ok((s, None));
        }
    };
    let design = match rec.body.to_design() {
        Ok(d) => d,
        Err(e) => {
            s.find(DESIGN_FILE.into(), Problem::Unreadable, format!("{e:#}"));
            return Ok((s, None));
        }
    };
    let recorded = &rec.provenance.study_parts;
    // The settings check explains a mismatch best; records of earlier versions have
    // no study parts and only it.
    if let Some(why) = crate::design::mismatch(&c.study, &design) {
        s.stale(why);
    } else if !recorded.is_empty() {
        for part in changed_parts(recorded, &design_parts(&c.study)) {
            s.stale(format!(
                "the study's `{part}` changed since design.yaml was made"
            ));
        }
    }
    Ok((s, Some(design)))
}

/// Check every run record of `design`: the point and simulator definition it was run
/// for (its `key`), and its output file against `outputs_sha256`. Returns the check
/// and the campaign-relative paths of the current done runs.
///
/// # Errors
/// I/O other than missing files.
pub fn check_runs(
    c: &Campaign,
    design: Option<&Design>,
    design_stale: bool,
    depth: Depth,
) -> anyhow::Result<(StageCheck, BTreeSet<String>)> {
    let mut s = StageCheck::new(Stage::Runs);
    let mut current_done = BTreeSet::new();
    let Some(design) = design else {
        s.freshness = Freshness::NotRun;
        return Ok((s, current_done));
    };
    if design_stale {
        s.stale("the design is stale: its points will change".into());
    }
    let names = c.study.design_variable_names();
    let mut counts: BTreeMap<&str, usize> = BTreeMap::new();
    let mut n_moved = 0;
    let mut moved_example = String::new();
    let mut changed_defs: BTreeSet<&str> = BTreeSet::new();
    let mut n_changed_def = 0;
    for e in &c.study.experiments {
        let fp = runs::fingerprint(&c.study, e);
        for p in &design.points {
            let rel = format!("runs/{}/{}", p.id, e.name);
            let record = format!("{rel}/run.yaml");
            let path = c.dir.join(&record);
            if !path.exists() {
                *counts.entry("pending").or_default() += 1;
                continue;
            }
            let rec: Record<RunBody> = match read_record(&path) {
                Ok(r) => r,
                Err(err) => {
                    s.find(record, Problem::Unreadable, format!("{err:#}"));
                    continue;
                }
            };
            let b = &rec.body;
            *counts
                .entry(match b.state {
                    RunState::Pending => "pending",
                    RunState::Queued => "queued",
                    RunState::Running => "running",
                    RunState::Done => "done",
                    RunState::Failed => "failed",
                })
                .or_default() += 1;
            if b.state != RunState::Done {
                continue;
            }
            let mut current = true;
            if !same_point(&names, &b.parameters, &p.values) {
                n_moved += 1;
                if moved_example.is_empty() {
                    moved_example = format!("{}/{}", p.id, e.name);
                }
                current = false;
            } else if let Some(old) = &b.fingerprint {
                let diff = old.changed(&fp);
                if !diff.is_empty() {
                    changed_defs.extend(diff);
                    n_changed_def += 1;
                    current = false;
                }
            }
            let out_rel = format!("{rel}/{}", c.study.simulator.output.file);
            let now = match depth {
                Depth::Full => hash_if_exists(&c.dir.join(&out_rel))?,
                Depth::Records => b.outputs_sha256.clone(),
            };
            match (&b.outputs_sha256, now) {
                (Some(_), None) => s.find(
                    out_rel,
                    Problem::Missing,
                    format!("named by {record} (outputs_sha256)"),
                ),
                (Some(want), Some(got)) if *want != got => s.find(
                    out_rel,
                    Problem::Altered,
                    format!("sha256 {}… now, {}… in {record}", short(&got), short(want)),
                ),
                (None, _) => s.find(
                    record.clone(),
                    Problem::Unreadable,
                    "state done without outputs_sha256".into(),
                ),
                _ => {}
            }
            if current {
                current_done.insert(rel);
            }
        }
    }
    if n_moved > 0 {
        s.stale(format!(
            "{n_moved} done runs were made at other parameter values than the design's points (first: {moved_example}); they will run again"
        ));
    }
    if n_changed_def > 0 {
        s.stale(format!(
            "the study's {} changed since {n_changed_def} runs were done; `assay run --rerun` runs them again",
            changed_defs.into_iter().collect::<Vec<_>>().join(", ")
        ));
    }
    s.notes.push(
        ["done", "failed", "queued", "running", "pending"]
            .iter()
            .map(|k| format!("{} {k}", counts.get(k).copied().unwrap_or(0)))
            .collect::<Vec<_>>()
            .join(", "),
    );
    Ok((s, current_done))
}

/// Check `surrogate.yaml` against the design, the run records and output files it names,
/// and the done runs there are now.
///
/// # Errors
/// I/O other than missing files.
pub fn check_surrogate(
    c: &Campaign,
    runs_stale: bool,
    current_done: &BTreeSet<String>,
) -> anyhow::Result<StageCheck> {
    let mut s = StageCheck::new(Stage::Surrogate);
    let path = c.path(SURROGATE_FILE);
    if !path.exists() {
        s.freshness = Freshness::NotRun;
        return Ok(s);
    }
    let rec: Envelope = match read_envelope(&path) {
        Ok(r) => r,
        Err(e) => {
            s.find(SURROGATE_FILE.into(), Problem::Unreadable, format!("{e:#}"));
            return Ok(s);
        }
    };
    if runs_stale {
        s.stale("the runs are stale".into());
    }
    let prov = &rec.provenance;
    if prov.study_parts.is_empty() {
        s.stale("surrogate.yaml was made by an earlier assay that did not record the study parts it used".into());
    } else {
        for part in changed_parts(&prov.study_parts, &surrogate_parts(&c.study)) {
            s.stale(format!(
                "the study's `{part}` changed since surrogate.yaml was made"
            ));
        }
    }
    let mut used = BTreeSet::new();
    for (name, want) in &prov.inputs {
        let is_design = name == DESIGN_FILE;
        let in_runs = name.starts_with("runs/");
        if !is_design && !in_runs {
            continue; // study files: their parts are compared above
        }
        match name.strip_suffix("/run.yaml") {
            Some(run) => {
                used.insert(run.to_string());
            }
            // An output file: [`check_runs`] compares it with its run record, whose
            // own hash is checked here; an edited output is reported once, there.
            None if in_runs => continue,
            None => {}
        }
        match hash_if_exists(&c.dir.join(name))? {
            None => s.find(
                name.clone(),
                Problem::Missing,
                "named in surrogate.yaml's inputs".into(),
            ),
            Some(got) if got != *want => s.stale(format!(
                "{name} changed since surrogate.yaml was made (sha256 {}… recorded, {}… now)",
                short(want),
                short(&got)
            )),
            _ => {}
        }
    }
    let new: Vec<&String> = current_done.difference(&used).collect();
    if !new.is_empty() {
        s.stale(format!(
            "{} finished runs are not in the surrogate (first: {})",
            new.len(),
            new[0]
        ));
    }
    Ok(s)
}

/// Check `posterior.yaml` against `surrogate.yaml` and `posterior-samples.csv`.
///
/// # Errors
/// I/O other than missing files.
pub fn check_posterior(c: &Campaign, surrogate_stale: bool) -> anyhow::Result<StageCheck> {
    let mut s = StageCheck::new(Stage::Posterior);
    let path = c.path(POSTERIOR_FILE);
    if !path.exists() {
        s.freshness = Freshness::NotRun;
        return Ok(s);
    }
    let rec: Record<PosteriorBody> = match read_record(&path) {
        Ok(r) => r,
        Err(e) => {
            s.find(POSTERIOR_FILE.into(), Problem::Unreadable, format!("{e:#}"));
            return Ok(s);
        }
    };
    if surrogate_stale {
        s.stale("the surrogate is stale".into());
    }
    let prov = &rec.provenance;
    if prov.study_parts.is_empty() {
        s.stale("posterior.yaml was made by an earlier assay that did not record the study parts it used".into());
    } else {
        for part in changed_parts(&prov.study_parts, &posterior_parts(&c.study)) {
            s.stale(format!(
                "the study's `{part}` changed since posterior.yaml was made"
            ));
        }
    }
    match prov.inputs.get(SURROGATE_FILE) {
        None => s.find(
            POSTERIOR_FILE.into(),
            Problem::Unreadable,
            "its inputs do not name surrogate.yaml".into(),
        ),
        Some(want) => match hash_if_exists(&c.path(SURROGATE_FILE))? {
            None => s.find(
                SURROGATE_FILE.into(),
                Problem::Missing,
                "named in posterior.yaml's inputs".into(),
            ),
            Some(got) if got != *want => s.stale(format!(
                "surrogate.yaml changed since posterior.yaml was made (sha256 {}… recorded, {}… now)",
                short(want),
                short(&got)
            )),
            _ => {}
        },
    }
    // An earlier calibration used as the prior (`calibration.prior_from`): its record
    // and draws, hashed into the provenance under their paths.
    if let Some(p) = &c.study.calibration.prior_from {
        for f in [p.clone(), p.with_file_name("posterior-samples.csv")] {
            let key = f.display().to_string();
            match (prov.inputs.get(&key), hash_if_exists(&f)?) {
                (_, None) => s.find(key, Problem::Missing, "calibration.prior_from".into()),
                (Some(want), Some(got)) if got == *want => {}
                _ => s.stale(format!(
                    "{key} (calibration.prior_from) changed since posterior.yaml was made"
                )),
            }
        }
    }
    match (
        &rec.body.samples_sha256,
        hash_if_exists(&c.path(SAMPLES_FILE))?,
    ) {
        (None, _) => s.find(
            POSTERIOR_FILE.into(),
            Problem::Unreadable,
            "no samples_sha256".into(),
        ),
        (Some(_), None) => s.find(
            SAMPLES_FILE.into(),
            Problem::Missing,
            "named by posterior.yaml (samples_sha256)".into(),
        ),
        (Some(want), Some(got)) if *want != got => s.find(
            SAMPLES_FILE.into(),
            Problem::Altered,
            format!(
                "sha256 {}… now, {}… in posterior.yaml",
                short(&got),
                short(want)
            ),
        ),
        _ => {}
    }
    Ok(s)
}

/// Checks (`checks.yaml`): stale when the posterior is, or when the surrogate, the
/// posterior record or its samples changed since the checks were made (the hashes in
/// its provenance).
///
/// # Errors
/// I/O other than missing files.
pub fn check_checks(c: &Campaign, posterior_stale: bool) -> anyhow::Result<StageCheck> {
    let mut s = StageCheck::new(Stage::Checks);
    let path = c.path(CHECKS_FILE);
    if !path.exists() {
        s.freshness = Freshness::NotRun;
        return Ok(s);
    }
    let rec: Record<crate::check::ChecksBody> = match read_record(&path) {
        Ok(r) => r,
        Err(e) => {
            s.find(CHECKS_FILE.into(), Problem::Unreadable, format!("{e:#}"));
            return Ok(s);
        }
    };
    if posterior_stale {
        s.stale("the posterior is stale".into());
    }
    for file in [SURROGATE_FILE, POSTERIOR_FILE, SAMPLES_FILE] {
        match rec.provenance.inputs.get(file) {
            None => s.find(
                CHECKS_FILE.into(),
                Problem::Unreadable,
                format!("its inputs do not name {file}"),
            ),
            Some(want) => match hash_if_exists(&c.path(file))? {
                None => s.find(
                    file.into(),
                    Problem::Missing,
                    "named in checks.yaml's inputs".into(),
                ),
                Some(got) if got != *want => s.stale(format!(
                    "{file} changed since checks.yaml was made (sha256 {}… recorded, {}… now)",
                    short(want),
                    short(&got)
                )),
                _ => {}
            },
        }
    }
    Ok(s)
}

/// How much [`verify`] reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Depth {
    /// Everything, simulator output files included (`assay verify`, the report).
    Full,
    /// The records and the samples, not the simulator output files: enough to decide
    /// which stages are stale, since an edited output makes no stage stale (it is a
    /// finding of its own). What `assay all` uses; outputs can be large.
    Records,
}

/// Check the whole campaign, stage by stage. A stage is stale when it is itself, or when
/// an earlier stage is (it will be redone, and this one after it).
///
/// # Errors
/// I/O other than missing files.
pub fn verify(c: &Campaign) -> anyhow::Result<Verification> {
    verify_to(c, Depth::Full)
}

/// [`verify`] to the given depth.
///
/// # Errors
/// I/O other than missing files.
pub fn verify_to(c: &Campaign, depth: Depth) -> anyhow::Result<Verification> {
    let (design, d) = check_design(c)?;
    let (runs, done) = check_runs(c, d.as_ref(), design.is_stale(), depth)?;
    let surrogate = check_surrogate(c, runs.is_stale(), &done)?;
    let posterior = check_posterior(c, surrogate.is_stale())?;
    let checks = check_checks(c, posterior.is_stale())?;
    Ok(Verification {
        stages: vec![design, runs, surrogate, posterior, checks],
    })
}
