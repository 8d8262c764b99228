//! The run step (run every pending or failed run of the design) and the status of the
//! runs.

use super::Session;
use crate::layout::{load_design, Campaign, CampaignError};
use crate::runs::{self, RunOptions, RunState, RunSummary, StateCounts};
use anyhow::Result;
use std::collections::BTreeMap;
use std::path::Path;
use std::time::SystemTime;

/// Run every pending or failed run of the design. The caller holds
/// [`lock`](crate::layout::lock).
///
/// # Errors
/// A missing design, a simulator definition that changed under done runs (bad input,
/// exit 2), or I/O on the campaign folder.
pub fn run_stage(c: &Campaign, options: RunOptions, s: &Session<'_>) -> Result<RunSummary> {
    let design = load_design(c)?;
    s.interruptible(|| {
        runs::run_all(
            &c.study,
            &design,
            &c.dir,
            options,
            &c.command_line,
            s.stop,
            s.observer,
        )
    })
    .map_err(|e| match e.downcast::<runs::RunsError>() {
        Ok(r) => CampaignError::Runs(r).into(),
        Err(e) => e,
    })
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
///
/// # Errors
/// A missing design, unreadable run records.
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

fn mtime(p: &Path) -> Option<SystemTime> {
    std::fs::metadata(p).and_then(|m| m.modified()).ok()
}
