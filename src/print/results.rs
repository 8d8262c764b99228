//! The stages' results: the surrogate's validation, the posterior table, the checks and
//! the confirmation errors.

use super::format::sig;
use assay::calibrate::{Diagnostics, ParameterSummary, PosteriorBody};
use assay::check::refine::ConfirmationError;
use assay::check::ChecksBody;
use assay::study::Study;
use assay::surrogate::FittedSurrogate;
use std::collections::BTreeMap;
use std::io::Write;
use std::path::Path;

pub fn print_posterior(b: &PosteriorBody, study: &Study, path: &Path) {
    out!(
        "posterior ({} draws, {} chains) — {}",
        b.n_draws,
        b.chains.len(),
        path.display()
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
    for p in &study.parameters {
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
}

pub fn print_fit(
    s: &FittedSurrogate,
    excluded: &BTreeMap<String, usize>,
    basis_warnings: &[String],
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
    let mut warnings = basis_warnings.to_vec();
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

pub fn print_checks(b: &ChecksBody, path: &Path) {
    out!(
        "posterior predictive checks ({} draws) — {}",
        b.n_draws,
        path.display()
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

/// One line per experiment: the surrogate's confirmation error near the posterior.
pub fn print_confirmation_errors(label: &str, errors: &[ConfirmationError]) {
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
