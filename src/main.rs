//! The `assay` command: parse arguments, call the steps, set the exit code.
#![forbid(unsafe_code)]

mod args;
mod bar;
mod plan;
#[macro_use]
mod print;

use anyhow::{Context, Result};
use args::{Cli, Command, RunArgs};
use assay::audit;
use assay::campaign::{self, Confirm, DesignOutcome, Event, Session};
use assay::layout::{self, Campaign, CampaignError};
use assay::study;
use clap::Parser;
use print::Printer;
use std::io::Write;
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, OnceLock};

/// Set by Ctrl-C: steps stop at the next safe point and keep what they finished.
static STOP: OnceLock<Arc<AtomicBool>> = OnceLock::new();

/// True while a step that honours [`STOP`] runs (runs, sampling). Elsewhere Ctrl-C ends
/// the process at once: records are written atomically, so nothing half-written remains.
static INTERRUPTIBLE: AtomicBool = AtomicBool::new(false);

fn stop_flag() -> &'static AtomicBool {
    STOP.get_or_init(|| Arc::new(AtomicBool::new(false)))
}

/// The study file named by the command (every command but `schema` has one).
fn study_path(command: &Command) -> Option<&std::path::Path> {
    Some(match command {
        Command::Schema => return None,
        Command::Validate(a)
        | Command::Status(a)
        | Command::Fit(a)
        | Command::Calibrate(a)
        | Command::Check(a)
        | Command::Verify(a) => &a.study,
        Command::Design(a) => &a.study.study,
        Command::Predict(a) => &a.study.study,
        Command::Report(a) => &a.study.study,
        Command::Run(a) | Command::All(a) => &a.study.study,
        Command::Refine(a) => &a.run.study.study,
    })
}

/// Refuse `--detach` where the runs must finish for the command to go on.
fn no_detach(a: &RunArgs, why: &'static str) -> Result<()> {
    if a.detach {
        return Err(CampaignError::Arguments(why).into());
    }
    Ok(())
}

/// Run the command; `Ok(true)` when some runs failed (exit code 3).
fn execute(cli: &Cli) -> Result<bool> {
    let Some(path) = study_path(&cli.command) else {
        out!("{}", study::schema_json());
        return Ok(false);
    };
    let c = Campaign::new(study::load(path)?, &cli.runs, std::env::args().collect());
    let obs = bar::observer(cli.quiet);
    let s = Session {
        stop: stop_flag(),
        interruptible: &INTERRUPTIBLE,
        observer: obs.as_ref(),
        events: &Printer,
    };
    let mut some_failed = false;
    match &cli.command {
        Command::Schema => unreachable!("handled before the study is read"),
        Command::Validate(_) => {
            print::print_summary(&c.study, &c);
            out!("ok: the study is valid");
        }
        Command::Design(a) => {
            let _lock = layout::lock(&c)?;
            let (d, verb) = match a.add {
                Some(n) => (
                    campaign::augment_design(&c, n as usize)?,
                    format!("({n} added)"),
                ),
                None => match campaign::write_design(&c, a.force)? {
                    (d, DesignOutcome::Kept) => (d, "kept (same settings)".to_string()),
                    (d, DesignOutcome::Created) => (d, "written".to_string()),
                },
            };
            out!(
                "design: {} points {verb} — {}",
                d.points.len(),
                c.path(layout::DESIGN_FILE).display()
            );
            print::print_design_quality(&d);
        }
        Command::Run(a) => {
            let options = plan::run_options(a, &c.study);
            if a.detach && options.backend != study::Backend::Slurm {
                return Err(CampaignError::Arguments(
                    "--detach needs the Slurm backend (`--backend slurm` or execution.backend: slurm)",
                )
                .into());
            }
            let _lock = layout::lock(&c)?;
            let r = campaign::run_stage(&c, options, &s)?;
            print::report_runs(&r, &c.study);
            some_failed = r.failed > 0;
        }
        Command::Status(_) => print::print_status(&c, &campaign::status(&c)?),
        Command::Predict(a) => predict(&c, a, cli.quiet)?,
        Command::Fit(_) => {
            campaign::fit_stage(&c, &s)?;
        }
        Command::Calibrate(_) => {
            let body = campaign::calibrate_stage(&c, &s)?;
            let path = c.path(layout::POSTERIOR_FILE);
            print::print_posterior(&body, &c.study, &path);
        }
        Command::Check(_) => {
            let confirm = (c.study.confirmation_runs > 0).then(|| Confirm {
                n: c.study.confirmation_runs,
                options: plan::study_run_options(&c.study),
            });
            let _lock = confirm.is_some().then(|| layout::lock(&c)).transpose()?;
            let body = campaign::check_stage(&c, confirm, &s)?;
            s.say(Event::Checks {
                body: &body,
                path: &c.path(layout::CHECKS_FILE),
            });
        }
        Command::Verify(_) => {
            let n = print::print_verification(&c, &audit::verify(&c)?);
            if n > 0 {
                anyhow::bail!(
                    "{} does not verify: {n} problem{} (listed above)",
                    c.dir.display(),
                    if n == 1 { "" } else { "s" }
                );
            }
        }
        Command::Report(a) => {
            let path = a.out.clone().unwrap_or_else(|| c.path(layout::REPORT_FILE));
            campaign::report_stage(&c, &path)?;
            out!("report: {}", path.display());
        }
        Command::All(a) => {
            no_detach(
                a,
                "--detach belongs to `assay run`: `assay all` needs the runs finished to go on",
            )?;
            let _lock = layout::lock(&c)?;
            let options = plan::run_options(a, &c.study);
            some_failed = campaign::up_to_date(&c, options, &s)?;
            // Confirmation runs only by `assay check` and refinement: here they would make
            // the surrogate stale again at every `all`.
            let checks = campaign::check_stage(&c, None, &s)?;
            s.say(Event::Checks {
                body: &checks,
                path: &c.path(layout::CHECKS_FILE),
            });
            if c.study.refine.is_some() {
                if campaign::refinement_done(&c) {
                    s.say(Event::RefinementDone);
                } else {
                    let (p, n_confirm) = plan::refine_params(None, &c.study);
                    some_failed |= campaign::refine(&c, p, n_confirm, options, &s)?;
                }
            }
            let report = c.path(layout::REPORT_FILE);
            campaign::report_stage(&c, &report)?;
            out!("report: {}", report.display());
            out!("records: {}", c.dir.display());
        }
        Command::Refine(a) => {
            no_detach(&a.run, "--detach belongs to `assay run`: refinement needs each round's runs finished to go on")?;
            let _lock = layout::lock(&c)?;
            let options = plan::run_options(&a.run, &c.study);
            some_failed = campaign::up_to_date(&c, options, &s)?;
            let (p, n_confirm) = plan::refine_params(Some(a), &c.study);
            some_failed |= campaign::refine(&c, p, n_confirm, options, &s)?;
            let report = c.path(layout::REPORT_FILE);
            campaign::report_stage(&c, &report)?;
            out!("report: {}", report.display());
        }
    }
    Ok(some_failed)
}

/// `assay predict`: the points from `--at`, the predictions to `--out` or stdout.
fn predict(c: &Campaign, a: &args::PredictArgs, quiet: bool) -> Result<()> {
    let text = std::fs::read_to_string(&a.at).map_err(|err| CampaignError::Unreadable {
        file: a.at.clone(),
        err,
    })?;
    let points = campaign::parse_points(&text, &a.at, &c.study.design_variable_names())?;
    let (bytes, outside) = campaign::predict_csv(c, &points)?;
    if outside > 0 && !quiet {
        eprintln!("warning: {outside} of {} points lie outside the parameter box: the surrogate extrapolates there", points.len());
    }
    match &a.out {
        Some(path) => {
            assay::record::write_atomic(path, &bytes)?;
            if !quiet {
                eprintln!(
                    "predictions for {} points written to {}",
                    points.len(),
                    path.display()
                );
            }
        }
        None => {
            if let Err(e) = std::io::stdout().lock().write_all(&bytes) {
                if e.kind() != std::io::ErrorKind::BrokenPipe {
                    return Err(e.into());
                }
            }
        }
    }
    Ok(())
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let flag = stop_flag();
    let _ = ctrlc::set_handler(move || {
        if !INTERRUPTIBLE.load(Ordering::SeqCst) || flag.swap(true, Ordering::SeqCst) {
            // Nothing to finish cleanly, or a second Ctrl-C: leave at once.
            std::process::exit(130);
        }
        eprintln!("\ninterrupted: finishing cleanly (press Ctrl-C again to quit at once)");
    });
    match execute(&cli).context("assay failed") {
        Ok(false) => ExitCode::SUCCESS,
        Ok(true) => {
            eprintln!("some runs failed: `assay status` counts them; each run.yaml says why");
            ExitCode::from(3)
        }
        Err(err) => {
            if let Some(se) = err
                .chain()
                .find_map(|e| e.downcast_ref::<study::StudyErrors>())
            {
                for e in &se.0 {
                    eprintln!("error: {e}");
                }
            } else {
                let chain: Vec<String> = err.chain().skip(1).map(|e| e.to_string()).collect();
                eprintln!("error: {}", chain.join(": "));
            }
            ExitCode::from(if layout::is_bad_input(&err) { 2 } else { 1 })
        }
    }
}
