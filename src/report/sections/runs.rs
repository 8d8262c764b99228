//! The runs section: run states and simulator time per experiment, and the failed
//! runs grouped by reason.

use crate::report::html::{esc, sig, table};
use crate::report::ReportInput;
use crate::runs::{RunBody, RunState};
use std::collections::BTreeMap;

/// Most failed runs listed one by one.
const FAILED_LISTED: usize = 50;

pub(crate) fn runs_section(h: &mut String, r: &ReportInput) {
    h.push_str("<section id=\"runs\">\n<h2>Runs</h2>\n");
    let Some(dv) = &r.design else {
        h.push_str("<p>No runs yet.</p>\n</section>\n");
        return;
    };
    let n_points = dv.design.points.len();
    let mut rows = Vec::new();
    for e in &r.study.experiments {
        let mine: Vec<&RunBody> = r.runs.iter().filter(|b| b.experiment == e.name).collect();
        let count = |s: RunState| mine.iter().filter(|b| b.state == s).count();
        let pending = count(RunState::Pending) + n_points.saturating_sub(mine.len());
        let elapsed: f64 = mine
            .iter()
            .filter(|b| b.state == RunState::Done)
            .filter_map(|b| b.elapsed_s)
            .sum();
        rows.push(vec![
            esc(&e.name),
            count(RunState::Done).to_string(),
            count(RunState::Failed).to_string(),
            count(RunState::Queued).to_string(),
            count(RunState::Running).to_string(),
            pending.to_string(),
            sig(elapsed, 4),
        ]);
    }
    h.push_str(&table(
        &[
            "experiment",
            "done",
            "failed",
            "queued",
            "running",
            "pending",
            "simulator time of done runs, s",
        ],
        &rows,
    ));
    let failed: Vec<&RunBody> = r
        .runs
        .iter()
        .filter(|b| b.state == RunState::Failed)
        .collect();
    if failed.is_empty() {
        h.push_str("<p>No failed runs.</p>\n");
    } else {
        let mut by_reason: BTreeMap<String, Vec<String>> = BTreeMap::new();
        for b in &failed {
            by_reason
                .entry(b.reason.clone().unwrap_or_else(|| "unknown".into()))
                .or_default()
                .push(format!("{}/{}", b.point, b.experiment));
        }
        let mut reasons: Vec<(String, Vec<String>)> = by_reason.into_iter().collect();
        reasons.sort_by(|a, b| b.1.len().cmp(&a.1.len()).then(a.0.cmp(&b.0)));
        h.push_str("<h3>Failure reasons</h3>\n");
        let rows: Vec<Vec<String>> = reasons
            .iter()
            .map(|(reason, runs)| {
                let listed: Vec<&str> = runs
                    .iter()
                    .take(FAILED_LISTED)
                    .map(String::as_str)
                    .collect();
                let more = if runs.len() > FAILED_LISTED {
                    format!(" and {} more", runs.len() - FAILED_LISTED)
                } else {
                    String::new()
                };
                vec![
                    format!("<span class=\"mono\">{}</span>", esc(reason)),
                    runs.len().to_string(),
                    format!(
                        "<span class=\"mono\">{}</span>{more}",
                        esc(&listed.join(" "))
                    ),
                ]
            })
            .collect();
        h.push_str(&table(&["reason (last attempt)", "runs", "which"], &rows));
    }
    h.push_str("</section>\n");
}
