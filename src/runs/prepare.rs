//! Make a run's folder ready: render the command, the templates and the environment,
//! and bring its record up to date. Shared by both executors.

use super::identity::{run_key, value_names};
use super::store::{run_dir, Fingerprint, RunBody, RunState};
use crate::design::DesignPoint;
use crate::study::{placeholder, Experiment, Study};
use anyhow::{Context, Result};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// A run ready to start.
#[derive(Debug, Clone)]
pub(crate) struct Prepared {
    /// The run folder (absolute).
    pub dir: PathBuf,
    pub record_path: PathBuf,
    /// The program to start (argv[0] resolved against the study folder).
    pub program: PathBuf,
    /// The rendered argv (argv[0] as written).
    pub argv: Vec<String>,
    /// Extra environment variables, rendered.
    pub env: Vec<(String, String)>,
    /// The run's record, with identity and command filled in.
    pub body: RunBody,
    /// The design point.
    pub point: DesignPoint,
}

/// Resolve the program: a path with `/` is relative to the study folder.
pub(crate) fn program(study: &Study, arg0: &str) -> PathBuf {
    let p = Path::new(arg0);
    if arg0.contains('/') && p.is_relative() {
        let joined = study.dir.join(p);
        std::fs::canonicalize(&joined).unwrap_or(joined)
    } else {
        p.to_path_buf()
    }
}

/// Create the run folder, write the rendered templates into it and build its record.
///
/// # Errors
/// The folder or a template cannot be written; a placeholder cannot be rendered (the
/// study was checked, so this means a bug or a changed file).
pub(crate) fn prepare(
    study: &Study,
    point: &DesignPoint,
    e: &Experiment,
    fp: &Fingerprint,
    previous: Option<RunBody>,
    campaign: &Path,
) -> Result<Prepared> {
    let dir = run_dir(campaign, &point.id, &e.name);
    std::fs::create_dir_all(&dir).with_context(|| format!("cannot create {}", dir.display()))?;
    let dir = std::fs::canonicalize(&dir)?;
    let record_path = dir.join("run.yaml");

    let mut values: BTreeMap<String, String> = e.settings.clone();
    let mut parameters = BTreeMap::new();
    // Controls first, then parameters: the design's variables.
    for (n, v) in study.design_variables().iter().zip(&point.values) {
        values.insert(n.name.clone(), placeholder::format_number(*v));
        parameters.insert(n.name.clone(), *v);
    }
    values.insert("run_dir".into(), dir.display().to_string());
    values.insert("run_id".into(), format!("{}-{}", point.id, e.name));
    let study_dir = std::fs::canonicalize(&study.dir).unwrap_or_else(|_| study.dir.clone());
    values.insert("study_dir".into(), study_dir.display().to_string());
    let render = |t: &str| placeholder::render(t, &values).map_err(|e| anyhow::anyhow!(e.message));

    let argv = study
        .simulator
        .command
        .iter()
        .map(|a| render(a))
        .collect::<Result<Vec<_>>>()?;
    for f in &study.simulator.files {
        crate::record::write_atomic(&dir.join(&f.to), render(&f.text)?.as_bytes())?;
    }
    let env = study
        .simulator
        .env
        .iter()
        .map(|(k, v)| Ok((k.clone(), render(v)?)))
        .collect::<Result<Vec<_>>>()?;

    let mut body = previous.unwrap_or_else(|| RunBody {
        point: point.id.clone(),
        experiment: e.name.clone(),
        state: RunState::Pending,
        attempts: 0,
        exit_code: None,
        reason: None,
        elapsed_s: None,
        outputs_sha256: None,
        parameters: parameters.clone(),
        command: argv.clone(),
        owner_pid: None,
        owner_host: None,
        owner_started_utc: None,
        child_pid: None,
        key: None,
        fingerprint: None,
        slurm: None,
        values: None,
        value_names: value_names(study, e),
        history: vec![],
    });
    body.parameters = parameters;
    body.command = argv.clone();
    body.value_names = value_names(study, e);
    body.fingerprint = Some(fp.clone());
    body.key = Some(run_key(fp, &point.values));
    Ok(Prepared {
        program: program(study, &argv[0]),
        dir,
        record_path,
        argv,
        env,
        body,
        point: point.clone(),
    })
}
