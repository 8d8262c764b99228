//! The provenance section: who made each record, when, with which assay and seeds,
//! and the audit of the records.

use crate::audit::Freshness;
use crate::record::Provenance;
use crate::report::html::{esc, sig, table};
use crate::report::ReportInput;
use std::fmt::Write as _;

fn provenance_rows(kind: &str, file: &str, p: &Provenance) -> Vec<String> {
    let seeds: Vec<String> = p.seeds.iter().map(|(k, v)| format!("{k} {v}")).collect();
    vec![
        format!("{} <span class=\"muted\">({})</span>", esc(kind), esc(file)),
        format!("<span class=\"text\">{}</span>", esc(&p.tool_version)),
        format!(
            "<span class=\"mono\">{}</span>",
            esc(p.git_commit.as_deref().unwrap_or("–"))
        ),
        format!(
            "<span class=\"mono\">{}</span>",
            esc(&p.command_line.join(" "))
        ),
        format!("{}@{}", esc(&p.user), esc(&p.host)),
        esc(&p.started_utc),
        sig(p.elapsed_s, 3),
        esc(&seeds.join(", ")),
        p.inputs.len().to_string(),
    ]
}

pub(crate) fn provenance_section(h: &mut String, r: &ReportInput) {
    h.push_str("<section id=\"provenance\">\n<h2>Provenance and audit</h2>\n");
    let mut rows = Vec::new();
    if let Some(d) = &r.design {
        rows.push(provenance_rows("design", "design.yaml", &d.provenance));
    }
    if let Some(sv) = &r.surrogate {
        rows.push(provenance_rows(
            "surrogate",
            "surrogate.yaml",
            &sv.provenance,
        ));
    }
    if let Some(pv) = &r.posterior {
        rows.push(provenance_rows(
            "posterior",
            "posterior.yaml",
            &pv.provenance,
        ));
    }
    h.push_str(&table(
        &[
            "record",
            "assay",
            "git commit",
            "command",
            "by",
            "started (UTC)",
            "seconds",
            "seeds",
            "inputs hashed",
        ],
        &rows,
    ));
    if let Some(pv) = &r.posterior {
        if let Some(sha) = &pv.body.samples_sha256 {
            let _ = writeln!(
                h,
                "<p>posterior-samples.csv sha256 <code>{}</code>.</p>",
                esc(sha)
            );
        }
    }
    match &r.verification {
        None => {}
        Some(v) => {
            h.push_str("<h3>Audit of the records</h3>\n");
            if v.is_consistent() {
                h.push_str("<p class=\"ok\">Every record matches its files, the study and the records before it (as <code>assay verify</code> checks).</p>\n");
            } else {
                h.push_str("<p class=\"warn\">The records do not all match (run <code>assay verify</code> for the list):</p>\n");
            }
            let rows: Vec<Vec<String>> = v
                .stages
                .iter()
                .map(|st| {
                    let state = match &st.freshness {
                        Freshness::NotRun => "not run yet".to_string(),
                        Freshness::Fresh if st.findings.is_empty() => "ok".into(),
                        Freshness::Fresh => "files do not match".into(),
                        Freshness::Stale(why) => format!("stale: {}", why.join("; ")),
                    };
                    let problems: Vec<String> = st
                        .findings
                        .iter()
                        .map(|f| format!("{} {}: {}", f.problem, f.file, f.detail))
                        .collect();
                    vec![
                        esc(st.stage.name()),
                        format!("<span class=\"text\">{}</span>", esc(&state)),
                        format!("<span class=\"mono\">{}</span>", esc(&problems.join("; "))),
                        esc(&st.notes.join("; ")),
                    ]
                })
                .collect();
            h.push_str(&table(&["stage", "state", "files", "notes"], &rows));
        }
    }
    h.push_str("</section>\n");
}
