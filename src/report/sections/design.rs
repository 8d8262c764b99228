//! The design section: the design's size, quality and warnings, and its points over
//! the parameter box with the failed runs marked.

use crate::report::html::{figure, lower, sig, warnings};
use crate::report::{plot, ReportInput, MATRIX_MAX_PARAMETERS};
use crate::runs::RunState;
use std::collections::BTreeMap;
use std::fmt::Write as _;

pub(crate) fn design_section(h: &mut String, r: &ReportInput) {
    h.push_str("<section id=\"design\">\n<h2>Design</h2>\n");
    let Some(dv) = &r.design else {
        h.push_str("<p>No design yet (<code>assay design</code>).</p>\n</section>\n");
        return;
    };
    let d = &dv.design;
    let _ = writeln!(
        h,
        "<p>{} points in {} round{}; method {}, seed {}, space {}.</p>",
        d.points.len(),
        d.rounds.len(),
        if d.rounds.len() == 1 { "" } else { "s" },
        lower(d.method),
        d.seed,
        lower(d.space)
    );
    if let Some(q) = &d.quality {
        let _ = writeln!(
            h,
            "<p class=\"muted\">Quality in the unit box: smallest distance {}, φp {}, centered L2 discrepancy (squared) {}, largest |correlation| {}.</p>",
            sig(q.min_distance, 4),
            sig(q.phi_p, 4),
            sig(q.cl2_discrepancy, 4),
            sig(q.max_abs_correlation, 3)
        );
    }
    warnings(h, &d.warnings);
    let failed: BTreeMap<&str, bool> = r
        .runs
        .iter()
        .filter(|b| b.state == RunState::Failed)
        .map(|b| (b.point.as_str(), true))
        .collect();
    let k = r.study.parameters.len().min(MATRIX_MAX_PARAMETERS);
    let labels: Vec<String> = r.study.parameters[..k]
        .iter()
        .map(|p| plot::label(&p.name, p.unit.as_deref()))
        .collect();
    let bounds: Vec<(f64, f64)> = r.study.parameters[..k]
        .iter()
        .map(|p| (p.lo, p.hi))
        .collect();
    let pts: Vec<Vec<f64>> = d.points.iter().map(|p| p.values[..k].to_vec()).collect();
    let f: Vec<bool> = d
        .points
        .iter()
        .map(|p| failed.contains_key(p.id.as_str()))
        .collect();
    let note = if k < r.study.parameters.len() {
        format!(" The first {k} of {} parameters.", r.study.parameters.len())
    } else {
        String::new()
    };
    let svg = if k >= 2 {
        plot::design_matrix(&labels, &bounds, &pts, &f)
    } else {
        plot::design_strip(&labels[0], bounds[0], &pts, &f)
    };
    h.push_str(&figure(
        "design",
        "design",
        svg,
        &format!("Design points over the parameter box, pairwise; points with a failed run are drawn as red crosses.{note}"),
    ));
    h.push_str("</section>\n");
}
