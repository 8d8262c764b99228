//! The predictive-check section: posterior predictive bands against the field data,
//! per experiment and quantity, with the share of measurements inside them.

use crate::report::compute::{self, PredictiveQuantity};
use crate::report::html::{esc, figure};
use crate::report::{plot, ReportInput};
use std::fmt::Write as _;

pub(crate) fn predictive_section(h: &mut String, r: &ReportInput) {
    h.push_str("<section id=\"predictive\">\n<h2>Predictive checks against the data</h2>\n");
    let Some(pv) = &r.posterior else {
        h.push_str("<p>No posterior yet.</p>\n</section>\n");
        return;
    };
    let _ = writeln!(
        h,
        "<p>The surrogate evaluated at {} posterior draws: the mean prediction, ± 2 sd for the surrogate and parameter uncertainty (dark band), and ± 2 sd with the measurement noise added (light band), against the field measurements. Most measurements should lie in the light band; many outside it point to a model, data or noise problem.</p>",
        pv.n_predictive_draws
    );
    if let Some(problem) = &pv.samples_problem {
        let _ = writeln!(
            h,
            "<p class=\"warn\">No predictive bands: {}.</p>",
            esc(problem)
        );
    }
    for n in &pv.predictive_notes {
        let _ = writeln!(h, "<p class=\"warn\">{}</p>", esc(n));
    }
    let x_label = r
        .study
        .simulator
        .output
        .x
        .clone()
        .unwrap_or_else(|| "output".into());
    for e in &r.study.experiments {
        let qs: Vec<PredictiveQuantity> = pv
            .predictive
            .iter()
            .filter(|q| q.experiment == e.name)
            .cloned()
            .collect();
        if qs.is_empty() {
            continue;
        }
        let cov = compute::band_coverage(&qs)
            .map(|c| {
                format!(
                    "{:.0} % of the measurements lie within ± 2 sd (with noise).",
                    100.0 * c
                )
            })
            .unwrap_or_default();
        let _ = writeln!(h, "<h3>{}</h3>\n<p>{}</p>", esc(&e.name), esc(&cov));
        for q in &qs {
            // With controls the bands are drawn against a control (`y against T`).
            let (quantity, x_label) = match q.quantity.rsplit_once(" against ") {
                Some((y, control)) => (y.to_string(), control.to_string()),
                None => (q.quantity.clone(), x_label.clone()),
            };
            h.push_str(&figure(
                "predictive",
                &format!("{}/{}", q.experiment, q.quantity),
                plot::predictive_plot(q, &x_label, &quantity),
                &format!("{}: {quantity} against {x_label}, posterior predictive bands and field data (red points); below, the same minus the predictive mean.", q.experiment),
            ));
        }
    }
    h.push_str("</section>\n");
}
