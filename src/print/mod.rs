//! What the CLI prints: tables and lines on stdout, warnings on stderr. The steps say
//! what they did through [`Events`]; [`Printer`] turns each event into its block.
//! `campaign.rs` prints the study and the state of the campaign; `results.rs` the
//! stages' results (surrogate, posterior, checks).

/// Write a line to stdout; a closed pipe ends the program quietly.
#[macro_export]
macro_rules! out {
    ($($arg:tt)*) => {{
        let mut o = std::io::stdout().lock();
        if let Err(e) = writeln!(o, $($arg)*) {
            if e.kind() == std::io::ErrorKind::BrokenPipe {
                std::process::exit(0);
            }
        }
    }};
}

mod campaign;
mod format;
mod results;

pub use format::sig;

pub use campaign::{
    print_design_quality, print_status, print_summary, print_verification, report_runs,
};
pub use results::print_posterior;

use assay::campaign::{Event, Events};
use assay::check::refine::{self as refinement, Stopped};
use results::{print_checks, print_confirmation_errors, print_fit};
use std::io::Write;

/// Prints each event of the steps as its block of output.
pub struct Printer;

impl Events for Printer {
    fn event(&self, e: Event<'_>) {
        match e {
            Event::DesignStale(why) => out!("design: stale ({})", why.join("; ")),
            Event::Design { n_points, verb } => out!("design: {n_points} points {verb}"),
            Event::Runs { summary, study } => report_runs(summary, study),
            Event::Fitted {
                surrogate,
                excluded,
                basis_warnings,
            } => print_fit(surrogate, excluded, basis_warnings),
            Event::UpToDate(stage) => out!("{stage}: up to date"),
            Event::Posterior { body, study, path } => print_posterior(body, study, path),
            Event::Checks { body, path } => print_checks(body, path),
            Event::RefinePlan {
                rounds,
                add,
                n_near,
                n_global,
                tolerance,
            } => out!(
                "refinement: up to {} round{} of {} points ({n_near} near the posterior, {n_global} over the box); stops at RMSE ≤ {} noise sd",
                rounds,
                if rounds == 1 { "" } else { "s" },
                add,
                tolerance
            ),
            Event::Confirmation { label, errors } => print_confirmation_errors(label, errors),
            Event::RoundAdded {
                round,
                n_near,
                n_global,
            } => out!(
                "round {round}: {n_near} points added near the posterior, {n_global} over the box"
            ),
            Event::FoldingIn => {
                out!("refinement: the last confirmation runs join the training data")
            }
            Event::RefinementDone => out!("refinement: done for this design (refinement.yaml)"),
            Event::RefineEnded { body, last } => match body.stopped {
                Stopped::BelowTolerance => out!(
                    "refinement: the surrogate agrees with the simulator near the posterior (RMSE ≤ {} noise sd) after {} round{}",
                    body.tolerance,
                    body.rounds.len(),
                    if body.rounds.len() == 1 { "" } else { "s" }
                ),
                _ => out!(
                    "refinement: {} rounds done; the surrogate's error near the posterior is still {} noise sd (tolerance {}): add rounds or runs",
                    body.rounds.len(),
                    sig(refinement::worst(last), 3),
                    body.tolerance
                ),
            },
            _ => {}
        }
    }
}
