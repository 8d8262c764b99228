//! The `assay` command: parse arguments, call the stages, show progress, set the exit code.
#![forbid(unsafe_code)]

mod args;
mod plan;

use anyhow::{Context, Result};
use args::{Cli, Command, RefineArgs, RunArgs};
use assay::audit::{self, Depth, Freshness, Stage, Verification};
use assay::calibrate::{Diagnostics, ParameterSummary, PosteriorBody};
use assay::campaign::{self, Campaign, DesignOutcome, InputError};
use assay::check::refine::{
    self as refinement, ConfirmationError, RefineRound, RefinementBody, Stopped,
};
use assay::progress::Observer;
use assay::record::{read_record, Record};
use assay::study::{self, Study, StudyErrors};
use clap::Parser;
use indicatif::{ProgressBar, ProgressStyle};
use std::io::{IsTerminal, Write};
use std::path::Path;
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::{Arc, OnceLock};

/// Set by Ctrl-C: stages stop at the next safe point and keep what they finished.
static STOP: OnceLock<Arc<AtomicBool>> = OnceLock::new();

/// True while a stage that honours [`STOP`] runs (runs, sampling). Elsewhere Ctrl-C ends
/// the process at once: records are written atomically, so nothing half-written remains.
static INTERRUPTIBLE: AtomicBool = AtomicBool::new(false);

/// Run `f` with Ctrl-C handled by stopping cleanly instead of exiting.
fn interruptible<T>(f: impl FnOnce() -> T) -> T {
    INTERRUPTIBLE.store(true, Ordering::SeqCst);
    let r = f();
    INTERRUPTIBLE.store(false, Ordering::SeqCst);
    r
}

fn stop_flag() -> &'static AtomicBool {
    STOP.get_or_init(|| Arc::new(AtomicBool::new(false)))
}

/// Write a line to stdout; a closed pipe ends the program quietly.
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

/// Progress on stderr: an indicatif bar on a terminal, plain lines otherwise (logs,
/// batch jobs).
struct Bar {
    bar: ProgressBar,
    plain: bool,
    task: std::sync::Mutex<String>,
    total: AtomicU64,
    pos: AtomicU64,
}

impl Bar {
    fn new(plain: bool) -> Self {
        Self {
            bar: ProgressBar::hidden(),
            plain: plain || !std::io::stderr().is_terminal(),
            task: std::sync::Mutex::new(String::new()),
            total: AtomicU64::new(0),
            pos: AtomicU64::new(0),
        }
    }
}

/// Plain progress lines: about this many per task.
const PLAIN_LINES: u64 = 10;

impl Observer for Bar {
    fn start(&self, task: &str, total: u64) {
        *self.task.lock().expect("task lock") = task.to_string();
        self.total.store(total, Ordering::SeqCst);
        self.pos.store(0, Ordering::SeqCst);
        if self.plain {
            eprintln!("{task}: {total} to do");
            return;
        }
        self.bar
            .set_draw_target(indicatif::ProgressDrawTarget::stderr());
        self.bar.set_length(total);
        self.bar.set_position(0);
        self.bar.set_style(
            ProgressStyle::with_template(
                "{prefix:>10} [{bar:30}] {pos}/{len} {msg} ({elapsed}, eta {eta})",
            )
            .expect("valid template")
            .progress_chars("=> "),
        );
        self.bar.set_prefix(task.to_string());
        self.bar.reset_elapsed();
    }
    fn advance(&self, n: u64, message: &str) {
        if self.plain {
            let total = self.total.load(Ordering::SeqCst).max(1);
            let before = self.pos.fetch_add(n, Ordering::SeqCst);
            let after = before + n;
            let step = (total / PLAIN_LINES).max(1);
            if after / step != before / step || after == total {
                let task = self.task.lock().expect("task lock").clone();
                eprintln!("{task}: {after}/{total} {message}");
            }
            return;
        }
        self.bar.inc(n);
        if !message.is_empty() {
            self.bar.set_message(message.to_string());
        }
    }
    fn note(&self, message: &str) {
        if self.plain {
            eprintln!("  {message}");
        } else {
            self.bar.suspend(|| eprintln!("  {message}"));
        }
    }
    fn finish(&self) {
        if !self.plain {
            self.bar.finish_and_clear();
        }
    }
}

fn observer(quiet: bool) -> Box<dyn Observer> {
    // --quiet: no bar, a few plain lines (as off a terminal).
    Box::new(Bar::new(quiet))
}

/// Significant-figure formatting for tables.
fn sig(v: f64, digits: usize) -> String {
    if !v.is_finite() {
        return format!("{v}");
    }
    if v == 0.0 {
        return "0".into();
    }
    let mag = v.abs().log10().floor() as i32;
    if !(-4..=6).contains(&mag) {
        return format!("{:.*e}", digits.saturating_sub(1), v);
    }
    let decimals = (digits as i32 - 1 - mag).max(0) as usize;
    format!("{v:.decimals$}")
}

fn load_study(path: &Path) -> Result<Study> {
    Ok(study::load(path)?)
}

fn print_summary(s: &Study, c: &Campaign) {
    out!("study {} ({})", s.name, s.file.display());
    out!("  campaign folder: {}", c.dir.display());
    out!("  parameters:");
    let unit_of = |p: &assay::study::Parameter| {
        p.unit
            .as_deref()
            .map(|u| format!(" {u}"))
            .unwrap_or_default()
    };
    for p in &s.parameters {
        let unit = unit_of(p);
        out!(
            "    {:<12} [{}, {}]{unit}  prior {:?}",
            p.name,
            p.lo,
            p.hi,
            p.prior
        );
    }
    if !s.controls.is_empty() {
        out!("  controls:");
        for p in &s.controls {
            out!("    {:<12} [{}, {}]{}", p.name, p.lo, p.hi, unit_of(p));
        }
    }
    out!("  simulator: {}", s.simulator.command.join(" "));
    out!("  experiments:");
    for e in &s.experiments {
        let st = e.data.stations();
        let conditions = if s.controls.is_empty() {
            String::new()
        } else {
            format!(" and {} conditions", e.data.conditions().len())
        };
        out!(
            "    {:<12} {} data rows at {} output locations{conditions}, data {}",
            e.name,
            e.data.rows.len(),
            st.len(),
            e.data_path.display()
        );
    }
    out!(
        "  design: {:?}, {} points, seed {}",
        s.design.method,
        s.design.points,
        s.design.seed
    );
    out!(
        "  calibration: {} chains × ({} warm-up + {} draws), seed {}",
        s.calibration.chains,
        s.calibration.warmup,
        s.calibration.draws,
        s.calibration.seed
    );
}

/// Quality of a design and its warnings (warnings also with --quiet: they are about the
/// result, not progress).
fn print_design_quality(d: &assay::design::Design) {
    if let Some(q) = &d.quality {
        out!(
            "  quality (unit box): min distance {}, phi_p {}, CD² {}, max |correlation| {}",
            sig(q.min_distance, 4),
            sig(q.phi_p, 4),
            sig(q.cl2_discrepancy, 4),
            sig(q.max_abs_correlation, 3)
        );
    }
    for w in &d.warnings {
        eprintln!("warning: {w}");
    }
}

fn print_status(c: &Campaign) -> Result<()> {
    let s = campaign::status(c)?;
    out!(
        "{} design points; runs by state ({}):",
        s.n_points,
        c.dir.display()
    );
    out!(
        "  {:<16} {:>8} {:>8} {:>8} {:>8} {:>8}",
        "experiment",
        "pending",
        "queued",
        "running",
        "done",
        "failed"
    );
    for (e, k) in &s.counts {
        out!(
            "  {:<16} {:>8} {:>8} {:>8} {:>8} {:>8}",
            e,
            k.pending,
            k.queued,
            k.running,
            k.done,
            k.failed
        );
    }
    if let Some(l) = &s.slurm {
        out!(
            "in Slurm (jobs {}): {} waiting, {} running, {} ended and not yet collected, {} gone without a result",
            l.jobs.join(", "),
            l.pending,
            l.running,
            l.ended,
            l.gone
        );
        if !l.reasons.is_empty() {
            let r: Vec<String> = l.reasons.iter().map(|(k, n)| format!("{k} ×{n}")).collect();
            out!("  waiting because: {}", r.join(", "));
        }
        if let Some(e) = &l.error {
            out!("  squeue could not be asked: {e}");
        }
        out!(
            "  `assay run {}` collects them; `scancel {}` cancels them",
            c.study.file.display(),
            l.jobs.join(" ")
        );
    }
    if !s.reasons.is_empty() {
        out!("most common failure reasons:");
        for (r, n) in s.reasons.iter().take(5) {
            out!("  {n:>6} × {r}");
        }
    }
    match &s.last_activity {
        Some(t) => out!("last activity: {t}"),
        None => out!("last activity: none (no run has started)"),
    }
    Ok(())
}

fn print_posterior(c: &Campaign) -> Result<()> {
    let rec: Record<PosteriorBody> = read_record(&c.path(campaign::POSTERIOR_FILE))?;
    let b = &rec.body;
    out!(
        "posterior ({} draws, {} chains) — {}",
        b.n_draws,
        b.chains.len(),
        c.path(campaign::POSTERIOR_FILE).display()
    );
    out!(
        "  {:<10} {:<9} {:>11} {:>10} {:>11} {:>11} {:>11} {:>11} {:>7} {:>8} {:>8}",
        "parameter",
        "unit",
        "mean",
        "sd",
        "median",
        "q2.5%",
        "q97.5%",
        "MAP",
        "R-hat",
        "ESS bulk",
        "ESS tail"
    );
    for p in &c.study.parameters {
        let (Some(s), Some(d)): (Option<&ParameterSummary>, Option<&Diagnostics>) =
            (b.parameters.get(&p.name), b.diagnostics.get(&p.name))
        else {
            continue;
        };
        out!(
            "  {:<10} {:<9} {:>11} {:>10} {:>11} {:>11} {:>11} {:>11} {:>7.3} {:>8.0} {:>8.0}",
            p.name,
            p.unit.as_deref().unwrap_or("-"),
            sig(s.mean, 5),
            sig(s.sd, 3),
            sig(s.median, 5),
            sig(s.q025, 5),
            sig(s.q975, 5),
            sig(s.map, 5),
            d.rhat,
            d.ess_bulk,
            d.ess_tail
        );
    }
    for (e, n) in &b.noise {
        out!(
            "  {:<10} {:<9} {:>11} {:>10} {:>11} {:>11} {:>11} {:>11} {:>7.3} {:>8.0} {:>8.0}",
            "noise sd",
            e,
            sig(n.sd.mean, 5),
            sig(n.sd.sd, 3),
            sig(n.sd.median, 5),
            sig(n.sd.q025, 5),
            sig(n.sd.q975, 5),
            "-",
            n.diagnostics.rhat,
            n.diagnostics.ess_bulk,
            n.diagnostics.ess_tail
        );
    }
    for (e, per_quantity) in &b.discrepancy {
        for (q, d) in per_quantity {
            let rows = std::iter::once(("δ sd", &d.sd))
                .chain(d.length_scale.as_ref().map(|l| ("δ length", l)));
            for (what, h) in rows {
                let label = format!("{e}.{q}");
                match (&h.posterior, &h.diagnostics, h.value) {
                    (Some(m), Some(dg), _) => out!(
                        "  {:<10} {:<9} {:>11} {:>10} {:>11} {:>11} {:>11} {:>11} {:>7.3} {:>8.0} {:>8.0}",
                        what,
                        label,
                        sig(m.mean, 5),
                        sig(m.sd, 3),
                        sig(m.median, 5),
                        sig(m.q025, 5),
                        sig(m.q975, 5),
                        "-",
                        dg.rhat,
                        dg.ess_bulk,
                        dg.ess_tail
                    ),
                    (_, _, Some(v)) => out!(
                        "  {:<10} {:<9} {:>11} ({})",
                        what,
                        label,
                        sig(v, 5),
                        if h.fixed_at.is_some() {
                            "fixed at the joint posterior mode"
                        } else {
                            "fixed"
                        }
                    ),
                    _ => {}
                }
            }
        }
    }
    if let Some(m) = &b.discrepancy_map {
        out!(
            "  discrepancy hyperparameters fixed at the joint posterior mode: log posterior {} there ({} starts, {} evaluations)",
            sig(m.ln_posterior, 8),
            m.starts.len(),
            m.n_evaluations
        );
    }
    for w in &b.warnings {
        out!("  warning: {w}");
    }
    out!("  caution: {}", b.caution);
    Ok(())
}

/// Print `assay verify`'s findings; returns the number of problems (stale stages and
/// missing, altered or unreadable files).
fn print_verification(c: &Campaign, v: &Verification) -> usize {
    out!(
        "verify {} (study {})",
        c.dir.display(),
        c.study.file.display()
    );
    let mut n = 0;
    for s in &v.stages {
        let notes = if s.notes.is_empty() {
            String::new()
        } else {
            format!(" ({})", s.notes.join("; "))
        };
        match &s.freshness {
            Freshness::NotRun => out!("  {:<10} not run yet", s.stage.name()),
            Freshness::Fresh if s.findings.is_empty() => {
                out!("  {:<10} ok{notes}", s.stage.name())
            }
            Freshness::Fresh => out!("  {:<10} files do not match{notes}", s.stage.name()),
            Freshness::Stale(why) => {
                n += 1;
                out!("  {:<10} stale{notes}", s.stage.name());
                for w in why {
                    out!("  {:<10}   - {w}", "");
                }
            }
        }
        for f in &s.findings {
            n += 1;
            out!("  {:<10} {}: {}", f.problem.to_string(), f.file, f.detail);
        }
    }
    if n == 0 {
        out!("ok: every record matches its files, the study and the records before it");
    }
    n
}

fn print_fit(
    c: &Campaign,
    s: &assay::surrogate::FittedSurrogate,
    excluded: &std::collections::BTreeMap<String, usize>,
) {
    out!(
        "surrogate ({} kernel, {} mean{}), leave-one-out validation:",
        s.kernel.name(),
        s.trend.name(),
        if s.hyperprior.is_some() {
            ", log-normal length-scale prior (MAP)"
        } else {
            ""
        }
    );
    out!(
        "  {:<16} {:>6} {:>12} {:>8} {:>11} {:>11} {:>10}",
        "experiment",
        "runs",
        "rmse",
        "q2",
        "coverage95",
        "components",
        "explained"
    );
    for e in &s.experiments {
        let v = &e.validation;
        out!(
            "  {:<16} {:>6} {:>12} {:>8.4} {:>11.3} {:>11} {:>9.4}%",
            e.experiment,
            e.point_ids.len(),
            sig(v.rmse, 3),
            v.q2,
            v.coverage95,
            e.basis.n_components(),
            100.0 * e.basis.explained_total()
        );
    }
    for (e, n) in excluded.iter().filter(|(_, n)| **n > 0) {
        out!("  {e}: {n} design points without a finished run were left out (see `assay status`)");
    }
    let mut warnings = campaign::basis_warnings(c, s);
    for e in &s.experiments {
        if let Some(w) = e.validation.verdict() {
            warnings.push(format!("{}: {w}", e.experiment));
        }
    }
    if s.experiments.iter().any(|e| e.holdout.is_some()) {
        out!("holdout validation (surrogate refitted without the held-out runs):");
        out!(
            "  {:<16} {:>9} {:>12} {:>8} {:>11}",
            "experiment",
            "held out",
            "rmse",
            "q2",
            "coverage95"
        );
        for e in &s.experiments {
            let Some(h) = &e.holdout else { continue };
            out!(
                "  {:<16} {:>9} {:>12} {:>8.4} {:>11.3}",
                e.experiment,
                format!("{}/{}", h.point_ids.len(), h.point_ids.len() + h.n_fit),
                sig(h.validation.rmse, 3),
                h.validation.q2,
                h.validation.coverage95
            );
        }
        out!(
            "  Mahalanobis distance per component (Bastos & O'Hagan 2009; reference: mean, sd, 95 % range):"
        );
        for e in &s.experiments {
            let Some(h) = &e.holdout else { continue };
            for c in &h.mahalanobis {
                let r = &c.reference;
                out!(
                    "  {:<16} {:<5} {:>10} vs {:>4}, sd {:>8}, [{}, {}]{}",
                    e.experiment,
                    c.component,
                    sig(c.value, 4),
                    r.mean,
                    r.variance.map_or("inf".into(), |v| sig(v.sqrt(), 3)),
                    sig(r.q025, 3),
                    sig(r.q975, 3),
                    if c.outside() { "  <- outside" } else { "" }
                );
            }
            for w in h.verdicts() {
                warnings.push(format!("{}: {w}", e.experiment));
            }
        }
    }
    for w in &warnings {
        out!("  warning: {w}");
    }
    if warnings.is_empty() {
        out!("  the surrogate looks adequate by these checks");
    }
}

fn report_runs(s: &assay::runs::RunSummary, study: &Study) {
    out!(
        "runs: {} done now, {} failed, {} already done{}{}",
        s.done,
        s.failed,
        s.skipped,
        if s.interrupted > 0 {
            format!(", {} interrupted (pending)", s.interrupted)
        } else {
            String::new()
        },
        if s.in_flight > 0 {
            format!(", {} in Slurm (jobs {})", s.in_flight, s.jobs.join(", "))
        } else {
            String::new()
        }
    );
    if s.in_flight > 0 {
        out!(
            "  the jobs keep running: `assay status {f}` follows them, `assay run {f}` collects them, `scancel {}` cancels them",
            s.jobs.join(" "),
            f = study.file.display()
        );
    }
}

fn print_checks(c: &Campaign, b: &assay::check::ChecksBody) {
    out!(
        "posterior predictive checks ({} draws) — {}",
        b.n_draws,
        c.path(campaign::CHECKS_FILE).display()
    );
    out!(
        "  {:<16} {:>6} {:>11} {:>15} {:>9} {:>8}",
        "experiment",
        "n",
        "coverage95",
        "99% band",
        "p (chi2)",
        "max |z|"
    );
    for e in &b.experiments {
        out!(
            "  {:<16} {:>6} {:>11.3} {:>15} {:>9.3} {:>8.2}",
            e.name,
            e.n_measurements,
            e.coverage95,
            format!("[{:.3}, {:.3}]", e.coverage_band99[0], e.coverage_band99[1]),
            e.ppp_chi2,
            e.max_abs_z
        );
        for f in &e.findings {
            out!("  warning: {}: {f}", e.name);
        }
    }
    if let Some(conf) = &b.confirmation {
        let reused = conf.points.iter().filter(|p| p.reused).count();
        out!(
            "confirmation runs at {} points ({} reused): simulator against surrogate",
            conf.points.len(),
            reused
        );
        out!(
            "  {:<16} {:>6} {:>12} {:>12} {:>9} {:>8}",
            "experiment",
            "runs",
            "rmse",
            "rmse/noise",
            "inside95",
            "max |z|"
        );
        for e in &conf.experiments {
            out!(
                "  {:<16} {:>6} {:>12} {:>12.3} {:>9.3} {:>8.2}",
                e.name,
                e.n_runs,
                sig(e.rmse, 4),
                e.rmse_over_noise,
                e.inside95,
                e.max_abs_z
            );
            for f in &e.findings {
                out!("  warning: {}: {f}", e.name);
            }
        }
        out!("  the confirmation runs are training data now: `assay all` fits the surrogate again with them");
    }
    if b.passes {
        out!("checks: pass — the calibrated model reproduces the field data within its stated uncertainty");
    } else {
        out!("checks: DO NOT PASS — the calibrated model does not reproduce the field data (see the warnings); look at the surrogate's validation, the noise and the data before using this posterior");
    }
    out!("  caution: {}", b.caution);
}

/// Run the command; `Ok(true)` when some runs failed (exit code 3).
fn execute(cli: &Cli) -> Result<bool> {
    let command_line: Vec<String> = std::env::args().collect();
    let obs = observer(cli.quiet);
    let stop = stop_flag();
    let study_path = match &cli.command {
        Command::Schema => {
            out!("{}", study::schema_json());
            return Ok(false);
        }
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
    };
    let study = load_study(study_path)?;
    let c = Campaign::new(study, &cli.runs, command_line);
    let mut some_failed = false;
    match &cli.command {
        Command::Validate(_) => {
            print_summary(&c.study, &c);
            out!("ok: the study is valid");
        }
        Command::Design(a) => {
            let _lock = campaign::lock(&c)?;
            let (d, verb) = match a.add {
                Some(n) => (
                    campaign::augment_design(&c, n as usize)?,
                    format!("({n} added)"),
                ),
                None => {
                    let (d, how) = campaign::write_design(&c, a.force)?;
                    let verb = if how == DesignOutcome::Kept {
                        "kept (same settings)"
                    } else {
                        "written"
                    };
                    (d, verb.to_string())
                }
            };
            out!(
                "design: {} points {verb} — {}",
                d.points.len(),
                c.path(campaign::DESIGN_FILE).display()
            );
            print_design_quality(&d);
        }
        Command::Run(a) => {
            let options = plan::run_options(a, &c.study);
            if a.detach && options.backend != assay::study::Backend::Slurm {
                return Err(InputError(
                    "--detach needs the Slurm backend (`--backend slurm` or execution.backend: slurm)".into(),
                )
                .into());
            }
            let _lock = campaign::lock(&c)?;
            let s = interruptible(|| campaign::run_stage(&c, options, stop, obs.as_ref()))?;
            report_runs(&s, &c.study);
            some_failed = s.failed > 0;
        }
        Command::Status(_) => print_status(&c)?,
        Command::Predict(a) => {
            let text = std::fs::read_to_string(&a.at)
                .map_err(|e| InputError(format!("cannot read {}: {e}", a.at.display())))?;
            let points = campaign::parse_points(&text, &a.at, &c.study.design_variable_names())?;
            let (bytes, outside) = campaign::predict_csv(&c, &points)?;
            if outside > 0 && !cli.quiet {
                eprintln!("warning: {outside} of {} points lie outside the parameter box: the surrogate extrapolates there", points.len());
            }
            match &a.out {
                Some(path) => {
                    assay::record::write_atomic(path, &bytes)?;
                    if !cli.quiet {
                        eprintln!(
                            "predictions for {} points written to {}",
                            points.len(),
                            path.display()
                        );
                    }
                }
                None => {
                    let mut o = std::io::stdout().lock();
                    if let Err(e) = o.write_all(&bytes) {
                        if e.kind() != std::io::ErrorKind::BrokenPipe {
                            return Err(e.into());
                        }
                    }
                }
            }
        }
        Command::Fit(_) => {
            let (s, excluded) = campaign::fit_stage(&c)?;
            print_fit(&c, &s, &excluded);
        }
        Command::Calibrate(_) => {
            interruptible(|| campaign::calibrate_stage(&c, stop, obs.as_ref()))?;
            print_posterior(&c)?;
        }
        Command::Schema => unreachable!("handled before the study is read"),
        Command::Check(_) => {
            let b = if c.study.confirmation_runs > 0 {
                let _lock = campaign::lock(&c)?;
                interruptible(|| {
                    campaign::check_stage(
                        &c,
                        Some(campaign::Confirm {
                            n: c.study.confirmation_runs,
                            options: plan::study_run_options(&c.study),
                            stop,
                            observer: obs.as_ref(),
                        }),
                    )
                })?
            } else {
                campaign::check_stage(&c, None)?
            };
            print_checks(&c, &b);
        }
        Command::Verify(_) => {
            let v = audit::verify(&c)?;
            let n = print_verification(&c, &v);
            if n > 0 {
                anyhow::bail!(
                    "{} does not verify: {n} problem{} (listed above)",
                    c.dir.display(),
                    if n == 1 { "" } else { "s" }
                );
            }
        }
        Command::Report(a) => {
            let path = a
                .out
                .clone()
                .unwrap_or_else(|| c.path(campaign::REPORT_FILE));
            campaign::report_stage(&c, &path)?;
            out!("report: {}", path.display());
        }
        Command::All(a) => {
            if a.detach {
                return Err(InputError(
                    "--detach belongs to `assay run`: `assay all` needs the runs finished to go on"
                        .into(),
                )
                .into());
            }
            let _lock = campaign::lock(&c)?;
            some_failed = up_to_date(&c, a, stop, obs.as_ref())?;
            // Confirmation runs only by `assay check` and refinement: here they would make
            // the surrogate stale again at every `all`.
            let checks = campaign::check_stage(&c, None)?;
            print_checks(&c, &checks);
            if c.study.refine.is_some() {
                if campaign::refinement_done(&c) {
                    out!("refinement: done for this design (refinement.yaml)");
                } else {
                    some_failed |= refine(&c, None, a, stop, obs.as_ref())?;
                }
            }
            let report = c.path(campaign::REPORT_FILE);
            campaign::report_stage(&c, &report)?;
            out!("report: {}", report.display());
            out!("records: {}", c.dir.display());
        }
        Command::Refine(a) => {
            if a.run.detach {
                return Err(InputError(
                    "--detach belongs to `assay run`: refinement needs each round's runs finished to go on"
                        .into(),
                )
                .into());
            }
            let _lock = campaign::lock(&c)?;
            some_failed = up_to_date(&c, &a.run, stop, obs.as_ref())?;
            some_failed |= refine(&c, Some(a), &a.run, stop, obs.as_ref())?;
            let report = c.path(campaign::REPORT_FILE);
            campaign::report_stage(&c, &report)?;
            out!("report: {}", report.display());
        }
    }
    Ok(some_failed)
}

/// Design, runs, surrogate and posterior brought up to date, reusing what `assay
/// verify` calls fresh (the first part of `assay all`). Returns whether some runs failed.
fn up_to_date(c: &Campaign, a: &RunArgs, stop: &AtomicBool, obs: &dyn Observer) -> Result<bool> {
    // One rule for what to redo: the checks of `assay verify` (without re-hashing
    // the simulator outputs, which decide no stage's staleness).
    let v = audit::verify_to(c, Depth::Records)?;
    let design_check = v.stage(Stage::Design);
    let (d, verb) = match &design_check.freshness {
        Freshness::Stale(why) if design_check.findings.is_empty() => {
            out!("design: stale ({})", why.join("; "));
            let (d, _) = campaign::write_design(c, true)?;
            (d, "written anew")
        }
        _ => {
            let (d, how) = campaign::write_design(c, false)?;
            let verb = if how == DesignOutcome::Kept {
                "kept"
            } else {
                "written"
            };
            (d, verb)
        }
    };
    out!("design: {} points {verb}", d.points.len());
    let s = interruptible(|| campaign::run_stage(c, plan::run_options(a, &c.study), stop, obs))?;
    report_runs(&s, &c.study);
    if stop.load(Ordering::SeqCst) || s.in_flight > 0 {
        anyhow::bail!("interrupted; run the same command again to continue");
    }
    if audit::verify_to(c, Depth::Records)?
        .stage(Stage::Surrogate)
        .needs_redo()
    {
        let (s, excluded) = campaign::fit_stage(c)?;
        print_fit(c, &s, &excluded);
    } else {
        out!("surrogate: up to date");
    }
    if audit::verify_to(c, Depth::Records)?
        .stage(Stage::Posterior)
        .needs_redo()
    {
        interruptible(|| campaign::calibrate_stage(c, stop, obs))?;
        if stop.load(Ordering::SeqCst) {
            anyhow::bail!("interrupted; run the same command again to continue");
        }
    } else {
        out!("posterior: up to date");
    }
    print_posterior(c)?;
    Ok(s.failed > 0)
}

/// One line per experiment: the surrogate's confirmation error near the posterior.
fn print_confirmation_errors(label: &str, errors: &[ConfirmationError]) {
    for e in errors {
        out!(
            "  {label:<7} {:<16} RMSE {} = {} noise sd ({} runs)",
            e.experiment,
            sig(e.rmse, 3),
            sig(e.rmse_over_noise, 3),
            e.n_runs
        );
    }
}

/// Confirm, then refine in rounds until the confirmation error is below the tolerance
/// or the rounds are done; finally fold the last confirmation runs in (fit, calibrate,
/// check). Records every round in refinement.yaml. Returns whether some runs failed.
fn refine(
    c: &Campaign,
    args: Option<&RefineArgs>,
    run: &RunArgs,
    stop: &AtomicBool,
    obs: &dyn Observer,
) -> Result<bool> {
    let (p, n_confirm) = plan::refine_params(args, &c.study);
    let n_global = p.n_global();
    let n_near = p.add - n_global;
    let run_options = plan::run_options(run, &c.study);
    let confirm = |stop: &AtomicBool| -> Result<Vec<ConfirmationError>> {
        let b = interruptible(|| {
            campaign::check_stage(
                c,
                Some(campaign::Confirm {
                    n: n_confirm,
                    options: run_options,
                    stop,
                    observer: obs,
                }),
            )
        })?;
        if stop.load(Ordering::SeqCst) {
            anyhow::bail!("interrupted; run the same command again to continue");
        }
        Ok(b.confirmation
            .as_ref()
            .map(refinement::errors)
            .unwrap_or_default())
    };
    out!(
        "refinement: up to {} round{} of {} points ({n_near} near the posterior, {n_global} over the box); stops at RMSE ≤ {} noise sd",
        p.rounds,
        if p.rounds == 1 { "" } else { "s" },
        p.add,
        p.tolerance
    );
    let start = confirm(stop)?;
    print_confirmation_errors("start", &start);
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
    campaign::write_refinement(c, &body)?;
    let mut before = start;
    let mut some_failed = false;
    for round in 1..=p.rounds {
        if refinement::below_tolerance(&before, p.tolerance) {
            body.stopped = Stopped::BelowTolerance;
            break;
        }
        let (_, near, global) = campaign::refine_design(c, n_near, n_global)?;
        out!(
            "round {round}: {} points added near the posterior, {} over the box",
            near.len(),
            global.len()
        );
        some_failed |= up_to_date(c, run, stop, obs)?;
        let after = confirm(stop)?;
        print_confirmation_errors("before", &before);
        print_confirmation_errors("after", &after);
        body.rounds.push(RefineRound {
            round,
            added_near_posterior: near,
            added_global: global,
            before,
            after: after.clone(),
            posterior_mean: campaign::posterior_means(c)?,
        });
        campaign::write_refinement(c, &body)?;
        before = after;
    }
    if body.stopped == Stopped::InProgress {
        body.stopped = if refinement::below_tolerance(&before, p.tolerance) {
            Stopped::BelowTolerance
        } else {
            Stopped::RoundsDone
        };
    }
    out!("refinement: the last confirmation runs join the training data");
    some_failed |= up_to_date(c, run, stop, obs)?;
    let checks = campaign::check_stage(c, None)?;
    print_checks(c, &checks);
    body.design_sha256 = Some(campaign::design_sha256(c)?);
    campaign::write_refinement(c, &body)?;
    match body.stopped {
        Stopped::BelowTolerance => out!(
            "refinement: the surrogate agrees with the simulator near the posterior (RMSE ≤ {} noise sd) after {} round{}",
            p.tolerance,
            body.rounds.len(),
            if body.rounds.len() == 1 { "" } else { "s" }
        ),
        _ => out!(
            "refinement: {} rounds done; the surrogate's error near the posterior is still {} noise sd (tolerance {}): add rounds or runs",
            body.rounds.len(),
            sig(refinement::worst(&before), 3),
            p.tolerance
        ),
    }
    Ok(some_failed)
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let flag = STOP
        .get_or_init(|| Arc::new(AtomicBool::new(false)))
        .clone();
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
            let bad_input = err
                .chain()
                .any(|e| e.is::<StudyErrors>() || e.is::<InputError>());
            if let Some(se) = err.chain().find_map(|e| e.downcast_ref::<StudyErrors>()) {
                for e in &se.0 {
                    eprintln!("error: {e}");
                }
            } else {
                let chain: Vec<String> = err.chain().skip(1).map(|e| e.to_string()).collect();
                eprintln!("error: {}", chain.join(": "));
            }
            ExitCode::from(if bad_input { 2 } else { 1 })
        }
    }
}
