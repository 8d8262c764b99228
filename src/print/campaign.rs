//! The study and the state of its campaign: `validate`, `design`, `status`, `run`,
//! `verify`.

use super::format::sig;
use assay::audit::{Freshness, Verification};
use assay::campaign::StatusReport;
use assay::design::Design;
use assay::layout::Campaign;
use assay::runs::RunSummary;
use assay::study::Study;
use std::io::Write;

pub fn print_summary(s: &Study, c: &Campaign) {
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
pub fn print_design_quality(d: &Design) {
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

pub fn print_status(c: &Campaign, s: &StatusReport) {
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
}

/// Print `assay verify`'s findings; returns the number of problems (stale stages and
/// missing, altered or unreadable files).
pub fn print_verification(c: &Campaign, v: &Verification) -> usize {
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

pub fn report_runs(s: &RunSummary, study: &Study) {
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
