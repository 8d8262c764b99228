//! The first part of `assay all` (and of each refinement round): design, runs,
//! surrogate and posterior brought up to date, reusing what `assay verify` calls fresh.

use super::{calibrate_stage, fit_stage, run_stage, write_design, DesignOutcome, Event, Session};
use crate::audit::{self, Depth, Freshness, Stage};
use crate::layout::{read_posterior, Campaign, POSTERIOR_FILE};
use crate::runs::RunOptions;
use anyhow::{bail, Result};

/// The message when Ctrl-C stopped a step that can be resumed.
pub const INTERRUPTED: &str = "interrupted; run the same command again to continue";

/// Bring design, runs, surrogate and posterior up to date. Returns whether some runs
/// failed.
///
/// # Errors
/// What each step refuses; an interruption ([`INTERRUPTED`]).
pub fn up_to_date(c: &Campaign, options: RunOptions, s: &Session<'_>) -> Result<bool> {
    // One rule for what to redo: the checks of `assay verify` (without re-hashing
    // the simulator outputs, which decide no stage's staleness).
    let v = audit::verify_to(c, Depth::Records)?;
    let design_check = v.stage(Stage::Design);
    let (d, verb) = match &design_check.freshness {
        Freshness::Stale(why) if design_check.findings.is_empty() => {
            s.say(Event::DesignStale(why));
            let (d, _) = write_design(c, true)?;
            (d, "written anew")
        }
        _ => {
            let (d, how) = write_design(c, false)?;
            let verb = if how == DesignOutcome::Kept {
                "kept"
            } else {
                "written"
            };
            (d, verb)
        }
    };
    s.say(Event::Design {
        n_points: d.points.len(),
        verb,
    });
    let runs = run_stage(c, options, s)?;
    s.say(Event::Runs {
        summary: &runs,
        study: &c.study,
    });
    if s.stopped() || runs.in_flight > 0 {
        bail!(INTERRUPTED);
    }
    if audit::verify_to(c, Depth::Records)?
        .stage(Stage::Surrogate)
        .needs_redo()
    {
        fit_stage(c, s)?;
    } else {
        s.say(Event::UpToDate("surrogate"));
    }
    let path = c.path(POSTERIOR_FILE);
    if audit::verify_to(c, Depth::Records)?
        .stage(Stage::Posterior)
        .needs_redo()
    {
        let body = calibrate_stage(c, s)?;
        if s.stopped() {
            bail!(INTERRUPTED);
        }
        s.say(Event::Posterior {
            body: &body,
            study: &c.study,
            path: &path,
        });
    } else {
        s.say(Event::UpToDate("posterior"));
        let rec = read_posterior(c)?;
        s.say(Event::Posterior {
            body: &rec.body,
            study: &c.study,
            path: &path,
        });
    }
    Ok(runs.failed > 0)
}
