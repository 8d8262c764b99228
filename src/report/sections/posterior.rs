//! The posterior section: the parameters' (and estimated noise sds') summaries and
//! diagnostics, correlations, the model discrepancy, the chains, and the trace,
//! density and pairwise plots.

use crate::calibrate::PosteriorBody;
use crate::report::html::{esc, figure, sig, table, warnings};
use crate::report::{
    compute, plot, ReportInput, MATRIX_MAX_PARAMETERS, PAIRS_MAX_DRAWS, TRACE_MAX_PER_CHAIN,
};
use crate::study::Study;
use std::fmt::Write as _;

fn unit_of<'s>(study: &'s Study, name: &str) -> Option<&'s str> {
    study
        .parameters
        .iter()
        .find(|p| p.name == name)
        .and_then(|p| p.unit.as_deref())
}

/// A sampled quantity for the trace and density plots: column name, axis label, column
/// index in the samples, prior density curve (parameters only), central 95 % interval.
type Sampled = (String, String, usize, Option<Vec<(f64, f64)>>, (f64, f64));

/// The model discrepancy's hyperparameters: the posterior of sampled ones, the value of
/// fixed ones and how they were fixed (given, or at the joint posterior mode).
fn discrepancy_table(h: &mut String, b: &PosteriorBody) {
    if b.discrepancy.is_empty() {
        return;
    }
    h.push_str("<h3>Model discrepancy</h3>\n");
    let mut rows = Vec::new();
    for (e, per_quantity) in &b.discrepancy {
        for (q, d) in per_quantity {
            let hypers = std::iter::once(("sd", &d.sd))
                .chain(d.length_scale.as_ref().map(|l| ("length-scale", l)));
            for (what, hs) in hypers {
                let (value, how) = match (&hs.posterior, hs.value) {
                    (Some(m), _) => (
                        format!(
                            "{} (sd {}; 95 % {} – {})",
                            sig(m.mean, 4),
                            sig(m.sd, 2),
                            sig(m.q025, 3),
                            sig(m.q975, 3)
                        ),
                        "sampled".to_string(),
                    ),
                    (None, Some(v)) if hs.fixed_at.is_some() => {
                        (sig(v, 5), "fixed at the joint posterior mode".into())
                    }
                    (None, Some(v)) => (sig(v, 5), "fixed in the study".into()),
                    (None, None) => ("–".into(), "–".into()),
                };
                rows.push(vec![
                    esc(e),
                    esc(q),
                    what.to_string(),
                    esc(&d.kernel),
                    esc(&hs.prior),
                    value,
                    how,
                ]);
            }
        }
    }
    h.push_str(&table(
        &[
            "experiment",
            "quantity",
            "hyperparameter",
            "kernel",
            "prior",
            "value",
            "how",
        ],
        &rows,
    ));
    if let Some(m) = &b.discrepancy_map {
        let _ = writeln!(
            h,
            "<p>The fixed hyperparameters are the joint posterior mode of the parameters, estimated noise variances and these hyperparameters (log posterior {} there; {} starts, {} evaluations). Their uncertainty is not carried into the posterior of the parameters.</p>",
            sig(m.ln_posterior, 8),
            m.starts.len(),
            m.n_evaluations
        );
    }
}

pub(crate) fn posterior_section(h: &mut String, r: &ReportInput) {
    h.push_str("<section id=\"posterior\">\n<h2>Posterior</h2>\n");
    let Some(pv) = &r.posterior else {
        h.push_str("<p>No posterior yet (<code>assay calibrate</code>).</p>\n</section>\n");
        return;
    };
    let b = &pv.body;
    let _ = writeln!(
        h,
        "<p>{} draws from {} chains ({}); {}.</p>",
        b.n_draws,
        b.chains.len(),
        esc(&b.settings.sampler),
        esc(&b.settings.likelihood)
    );
    let s = r.study;
    let mut rows = Vec::new();
    for p in &s.parameters {
        let (Some(x), Some(d)) = (b.parameters.get(&p.name), b.diagnostics.get(&p.name)) else {
            continue;
        };
        let mcse = b
            .mcse
            .get(&p.name)
            .map(|m| sig(m.mean, 2))
            .unwrap_or_else(|| "–".into());
        rows.push(vec![
            esc(&p.name),
            esc(p.unit.as_deref().unwrap_or("–")),
            sig(x.mean, 5),
            sig(x.sd, 3),
            sig(x.median, 5),
            sig(x.q025, 5),
            sig(x.q975, 5),
            sig(x.map, 5),
            mcse,
            format!("{:.3}", d.rhat),
            format!("{:.0}", d.ess_bulk),
            format!("{:.0}", d.ess_tail),
        ]);
    }
    for (e, n) in &b.noise {
        rows.push(vec![
            format!("noise sd ({})", esc(e)),
            "output unit".into(),
            sig(n.sd.mean, 5),
            sig(n.sd.sd, 3),
            sig(n.sd.median, 5),
            sig(n.sd.q025, 5),
            sig(n.sd.q975, 5),
            "–".into(),
            sig(n.mcse.sd, 2),
            format!("{:.3}", n.diagnostics.rhat),
            format!("{:.0}", n.diagnostics.ess_bulk),
            format!("{:.0}", n.diagnostics.ess_tail),
        ]);
    }
    h.push_str(&table(
        &[
            "parameter",
            "unit",
            "mean",
            "sd",
            "median",
            "2.5 %",
            "97.5 %",
            "best draw",
            "MCSE of mean",
            "R̂",
            "ESS bulk",
            "ESS tail",
        ],
        &rows,
    ));
    if b.warnings.is_empty() {
        h.push_str("<p class=\"ok\">No convergence or precision warnings (R̂ ≤ 1.01, bulk and tail ESS ≥ 400).</p>\n");
    } else {
        warnings(h, &b.warnings);
    }
    if b.correlation.names.len() >= 2 {
        h.push_str("<h3>Posterior correlation</h3>\n");
        let mut header = vec![""];
        header.extend(b.correlation.names.iter().map(String::as_str));
        let rows: Vec<Vec<String>> = b
            .correlation
            .names
            .iter()
            .zip(&b.correlation.matrix)
            .map(|(n, row)| {
                let mut v = vec![esc(n)];
                v.extend(row.iter().map(|x| format!("{x:.3}")));
                v
            })
            .collect();
        h.push_str(&table(&header, &rows));
    }
    discrepancy_table(h, b);
    h.push_str("<h3>Chains</h3>\n");
    let rows: Vec<Vec<String>> = b
        .chains
        .iter()
        .map(|c| {
            vec![
                c.index.to_string(),
                c.draws.to_string(),
                format!("{:.3}", c.acceptance_rate),
                sig(c.step_scale, 3),
                esc(&serde_json::to_value(c.termination)
                    .ok()
                    .and_then(|v| v.as_str().map(str::to_string))
                    .unwrap_or_else(|| format!("{:?}", c.termination))),
            ]
        })
        .collect();
    h.push_str(&table(
        &["chain", "draws", "acceptance", "step scale", "ended"],
        &rows,
    ));
    if let Some(problem) = &pv.samples_problem {
        let _ = writeln!(
            h,
            "<p class=\"warn\">No traces, densities or pairwise plot: {}.</p>\n</section>",
            esc(problem)
        );
        return;
    }

    // Traces and marginals: parameters, then estimated noise sds.
    let samples = &pv.samples;
    let mut quantities: Vec<Sampled> = Vec::new();
    for p in &s.parameters {
        if let (Some(j), Some(x)) = (samples.column(&p.name), b.parameters.get(&p.name)) {
            quantities.push((
                p.name.clone(),
                plot::label(&p.name, p.unit.as_deref()),
                j,
                Some(compute::prior_curve(p, 400)),
                (x.q025, x.q975),
            ));
        }
    }
    for (e, n) in &b.noise {
        let col = format!("noise_sd.{e}");
        if let Some(j) = samples.column(&col) {
            quantities.push((col.clone(), col, j, None, (n.sd.q025, n.sd.q975)));
        }
    }
    h.push_str("<h3>Traces</h3>\n<p class=\"muted\">Chains that overlap and wander over the same band have mixed; a chain stuck apart from the others has not.</p>\n");
    for (name, label, j, _, _) in &quantities {
        h.push_str(&figure(
            "trace",
            name,
            plot::trace_plot(label, &samples.per_chain(*j), TRACE_MAX_PER_CHAIN),
            &format!("{label}: kept draws of each chain (at most {TRACE_MAX_PER_CHAIN} per chain drawn)."),
        ));
    }
    h.push_str("<h3>Marginal densities</h3>\n<div class=\"plots\">\n");
    for (name, label, j, prior, interval) in &quantities {
        h.push_str(&figure(
            "density",
            name,
            plot::density_plot(label, &samples.pooled(*j), prior.as_deref(), *interval),
            &format!("{label}: histogram of all draws, the prior density (black) and the central 95 % interval (red lines)."),
        ));
    }
    h.push_str("</div>\n");
    let cols: Vec<usize> = s
        .parameters
        .iter()
        .filter_map(|p| samples.column(&p.name))
        .take(MATRIX_MAX_PARAMETERS)
        .collect();
    if cols.len() >= 2 {
        let labels: Vec<String> = s
            .parameters
            .iter()
            .filter(|p| samples.column(&p.name).is_some())
            .take(MATRIX_MAX_PARAMETERS)
            .map(|p| plot::label(&p.name, unit_of(s, &p.name)))
            .collect();
        let rows = samples.thinned(PAIRS_MAX_DRAWS);
        h.push_str("<h3>Pairwise</h3>\n");
        h.push_str(&figure(
            "pairs",
            "parameters",
            plot::pairs_plot(&labels, &rows, &cols),
            &format!("{} posterior draws (spread evenly over all chains), pairwise; marginal histograms on the diagonal.", rows.len()),
        ));
    }
    h.push_str("</section>\n");
}
