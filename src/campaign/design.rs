//! The design step: write `design.yaml`, add points to it (by hand, for refinement),
//! save an extended design.

use crate::audit::{self, Freshness};
use crate::design::{self, Design, DesignBody};
use crate::layout::{load_design, posterior_draws, Campaign, CampaignError, DESIGN_FILE};
use crate::record::{write_record, Record};
use anyhow::Result;

/// What [`write_design`] did.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DesignOutcome {
    Created,
    /// An existing design with the same settings was kept.
    Kept,
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
                return Err(CampaignError::DesignStale {
                    path,
                    why: why.join("; "),
                }
                .into())
            }
            _ => return Ok((existing, DesignOutcome::Kept)),
        }
    }
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.study_parts(audit::design_parts(&c.study));
    clock.seed("design", c.study.design.seed);
    let d = design::generate(&c.study.design_variables(), &c.study.design).map_err(|err| {
        CampaignError::Design {
            context: "cannot make the design",
            err,
        }
    })?;
    write_record(
        &path,
        &Record::new("design", clock.finish(), DesignBody::from(&d)),
    )?;
    Ok((d, DesignOutcome::Created))
}

/// The design on disk, refused with `action` in the message when it no longer matches
/// the study.
fn matching_design(c: &Campaign, action: &'static str, remedy: &'static str) -> Result<Design> {
    let existing = load_design(c)?;
    match design::mismatch(&c.study, &existing) {
        Some(why) => Err(CampaignError::DesignMismatch {
            action,
            path: c.path(DESIGN_FILE),
            why,
            remedy,
        }
        .into()),
        None => Ok(existing),
    }
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
        return Err(CampaignError::NoDesign {
            path,
            study: c.study.file.clone(),
        }
        .into());
    }
    let existing = matching_design(
        c,
        "add points",
        ". Restore the study's settings, or start a new design with `assay design --force`",
    )?;
    let d = match &c.study.design.conditions {
        Some(conditions) => {
            design::augment_at_conditions(&existing, &c.study.design_variables(), conditions, n)
        }
        None => design::augment(&existing, &c.study.design_variables(), n),
    }
    .map_err(|err| CampaignError::Design {
        context: "cannot add points",
        err,
    })?;
    save_design(c, &d)?;
    Ok(d)
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
    let existing = matching_design(c, "refine", "; run `assay all` first")?;
    let draws = posterior_draws(c)?.theta;
    let n0 = existing.points.len();
    let mut d = existing;
    let refused = |err| CampaignError::Design {
        context: "cannot add refinement points",
        err,
    };
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
        .map_err(refused)?;
    }
    let n1 = d.points.len();
    if n_global > 0 {
        d = design::augment(&d, &c.study.parameters, n_global).map_err(refused)?;
    }
    save_design(c, &d)?;
    let ids = |r: std::ops::Range<usize>| d.points[r].iter().map(|p| p.id.clone()).collect();
    let (near, global) = (ids(n0..n1), ids(n1..d.points.len()));
    Ok((d, near, global))
}

/// Write an extended design `d` over `design.yaml`.
///
/// The previous design.yaml is not listed among the inputs: it is overwritten here, so
/// its hash could never be checked again; its points and rounds are kept instead.
///
/// # Errors
/// I/O.
pub fn save_design(c: &Campaign, d: &Design) -> Result<()> {
    let mut clock = c.clock();
    c.hash_study_inputs(&mut clock)?;
    clock.study_parts(audit::design_parts(&c.study));
    clock.seed("design", d.seed);
    write_record(
        &c.path(DESIGN_FILE),
        &Record::new("design", clock.finish(), DesignBody::from(d)),
    )
}
