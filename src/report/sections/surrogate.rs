//! The surrogate section: leave-one-out validation per experiment, per component and
//! per output value, with the leave-one-out plots.

use crate::report::html::{esc, figure, sig, table, warnings};
use crate::report::{plot, ReportInput};
use std::fmt::Write as _;

pub(crate) fn surrogate_section(h: &mut String, r: &ReportInput) {
    h.push_str("<section id=\"surrogate\">\n<h2>Surrogate validation</h2>\n");
    let Some(sv) = &r.surrogate else {
        h.push_str("<p>No surrogate yet (<code>assay fit</code>).</p>\n</section>\n");
        return;
    };
    let b = &sv.body;
    let _ = writeln!(
        h,
        "<p>Gaussian-process surrogate, {} kernel, {} mean: per experiment, a principal-component basis of the output vector with one GP per component weight (a scalar output is one component). Leave-one-out validation: each run is predicted from all the others; about 95 % of the runs should fall within ± 1.96 sd (coverage95), and Q² near 1 means the surrogate explains the runs' variation.</p>",
        esc(&b.kernel),
        esc(&b.mean)
    );
    let rows: Vec<Vec<String>> = b
        .experiments
        .iter()
        .map(|e| {
            let v = &e.validation;
            vec![
                esc(&e.name),
                e.n_runs.to_string(),
                e.n_excluded.to_string(),
                sig(v.rmse, 3),
                format!("{:.4}", v.q2),
                format!("{:.3}", v.coverage95),
                sig(v.standardized_error.mean, 3),
                sig(v.standardized_error.sd, 3),
                sig(v.standardized_error.max_abs, 3),
            ]
        })
        .collect();
    h.push_str(&table(
        &[
            "experiment",
            "runs",
            "left out",
            "rmse",
            "Q²",
            "coverage95",
            "z mean",
            "z sd",
            "max |z|",
        ],
        &rows,
    ));
    let verdicts: Vec<String> = b
        .experiments
        .iter()
        .filter_map(|e| e.validation.verdict().map(|w| format!("{}: {w}", e.name)))
        .collect();
    warnings(h, &verdicts);
    h.push_str("<div class=\"plots\">\n");
    for (name, loo) in &sv.loo {
        h.push_str(&figure(
            "loo",
            name,
            plot::loo_plot(name, loo),
            &format!("{name}: each run's output against its leave-one-out prediction (bars: ± 2 sd); the grey line is y = x."),
        ));
    }
    h.push_str("</div>\n");
    for e in &b.experiments {
        let _ = writeln!(
            h,
            "<h3>{}: components ({} kept, {:.5} of the variance)</h3>",
            esc(&e.name),
            e.basis.n_components,
            e.basis.explained_variance
        );
        let rows: Vec<Vec<String>> = e
            .components
            .iter()
            .map(|c| {
                let v = &c.validation;
                let hp = &c.hyperparameters;
                vec![
                    esc(&c.name),
                    format!("{:.5}", c.explained),
                    format!("{:.4}", v.q2),
                    format!("{:.3}", v.coverage95),
                    sig(hp.nugget / hp.signal_var.max(f64::MIN_POSITIVE), 2),
                ]
            })
            .collect();
        h.push_str(&table(
            &[
                "component",
                "variance share",
                "Q²",
                "coverage95",
                "nugget / σ²",
            ],
            &rows,
        ));
        let _ = writeln!(h, "<h3>{}: per output value</h3>", esc(&e.name));
        let rows: Vec<Vec<String>> = e
            .outputs
            .iter()
            .map(|o| {
                let v = &o.validation;
                vec![
                    esc(&o.name),
                    sig(v.rmse, 3),
                    format!("{:.4}", v.q2),
                    format!("{:.3}", v.coverage95),
                    sig(v.standardized_error.sd, 3),
                ]
            })
            .collect();
        h.push_str(&table(
            &["output", "rmse", "Q²", "coverage95", "z sd"],
            &rows,
        ));
    }
    h.push_str("</section>\n");
}
