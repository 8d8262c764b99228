//! The refine step: confirm, then refine the design in rounds until the surrogate agrees
//! with the simulator near the posterior or the rounds are done; records every round in
//! `refinement.yaml`.

use super::uptodate::INTERRUPTED;
use super::{check_stage, refine_design, up_to_date, Confirm, Event, Session};
use crate::check::refine::{
    self as refinement, ConfirmationError, RefineRound, RefinementBody, Stopped,
};
use crate::check::RefineParams;
use crate::layout::{design_sha256, read_posterior, Campaign, DESIGN_FILE, REFINEMENT_FILE};
use crate::record::{read_record, sha256_file, write_record, Record};
use crate::runs::RunOptions;
use anyhow::{bail, Context, Result};

/// Refine with settings `p` and `n_confirm` confirmation runs per check, running with
/// `options`; finally fold the last confirmation runs in (fit, calibrate, check).
/// Returns whether some runs failed.
///
/// # Errors
/// What the design, run, fit, calibrate and check steps refuse; an interruption.
pub fn refine(
    c: &Campaign,
    p: RefineParams,
    n_confirm: usize,
    options: RunOptions,
    s: &Session<'_>,
) -> Result<bool> {
    let n_global = p.n_global();
    let n_near = p.add - n_global;
    let confirm = || -> Result<Vec<ConfirmationError>> {
        let b = check_stage(
            c,
            Some(Confirm {
                n: n_confirm,
                options,
            }),
            s,
        )?;
        if s.stopped() {
            bail!(INTERRUPTED);
        }
        Ok(b.confirmation
            .as_ref()
            .map(refinement::errors)
            .unwrap_or_default())
    };
    s.say(Event::RefinePlan {
        rounds: p.rounds,
        add: p.add,
        n_near,
        n_global,
        tolerance: p.tolerance,
    });
    let start = confirm()?;
    s.say(Event::Confirmation {
        label: "start",
        errors: &start,
    });
    let mut body = RefinementBody {
        rounds_asked: p.rounds,
        add: p.add,
        global_share: p.global_share,
        tolerance: p.tolerance,
        confirmation_runs: n_confirm,
        start: start.clone(),
        rounds: Vec::new(),
        stopped: Stopped::InProgress,
        design_sha256: None,
    };
    write_refinement(c, &body)?;
    let mut before = start;
    let mut some_failed = false;
    for round in 1..=p.rounds {
        if refinement::below_tolerance(&before, p.tolerance) {
            body.stopped = Stopped::BelowTolerance;
            break;
        }
        let (_, near, global) = refine_design(c, n_near, n_global)?;
        s.say(Event::RoundAdded {
            round,
            n_near: near.len(),
            n_global: global.len(),
        });
        some_failed |= up_to_date(c, options, s)?;
        let after = confirm()?;
        s.say(Event::Confirmation {
            label: "before",
            errors: &before,
        });
        s.say(Event::Confirmation {
            label: "after",
            errors: &after,
        });
        body.rounds.push(RefineRound {
            round,
            added_near_posterior: near,
            added_global: global,
            before,
            after: after.clone(),
            posterior_mean: posterior_means(c)?,
        });
        write_refinement(c, &body)?;
        before = after;
    }
    if body.stopped == Stopped::InProgress {
        body.stopped = if refinement::below_tolerance(&before, p.tolerance) {
            Stopped::BelowTolerance
        } else {
            Stopped::RoundsDone
        };
    }
    s.say(Event::FoldingIn);
    some_failed |= up_to_date(c, options, s)?;
    let checks = check_stage(c, None, s)?;
    s.say(Event::Checks {
        body: &checks,
        path: &c.path(crate::layout::CHECKS_FILE),
    });
    body.design_sha256 = Some(design_sha256(c)?);
    write_refinement(c, &body)?;
    s.say(Event::RefineEnded {
        body: &body,
        last: &before,
    });
    Ok(some_failed)
}

/// Write `refinement.yaml`.
///
/// # Errors
/// I/O.
pub fn write_refinement(c: &Campaign, body: &RefinementBody) -> Result<()> {
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
    let Ok(rec) = read_record::<RefinementBody>(&c.path(REFINEMENT_FILE)) else {
        return false;
    };
    let Ok(sha) = sha256_file(&c.path(DESIGN_FILE)) else {
        return false;
    };
    rec.body.stopped != Stopped::InProgress && rec.body.design_sha256.as_deref() == Some(&sha)
}

/// Posterior means of the parameters (study order) from `posterior.yaml`.
///
/// # Errors
/// No posterior yet, or one without a parameter of the study.
pub fn posterior_means(c: &Campaign) -> Result<Vec<f64>> {
    let p = read_posterior(c)?;
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
