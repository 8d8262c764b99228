//! The study section: the simulator, the parameters with their priors, the
//! experiments with their data and noise, and the stage settings.

use crate::report::html::{esc, lower, table};
use crate::study::{Noise, Prior, Study};
use std::fmt::Write as _;

fn prior_text(p: &Prior) -> String {
    match p {
        Prior::Uniform => "uniform".into(),
        Prior::Normal { mean, sd } => format!("normal(mean {mean}, sd {sd})"),
        Prior::LogNormal { mu, sigma } => format!("lognormal(mu {mu}, sigma {sigma})"),
    }
}

fn noise_text(n: &Noise) -> String {
    match n {
        Noise::Sd(v) => format!("known sd {v}"),
        Noise::Column(c) => format!("known sd per row (column `{c}`)"),
        Noise::Unknown { shape, scale } => {
            format!("unknown; inverse-gamma prior on the variance (shape {shape}, scale {scale})")
        }
    }
}

pub(crate) fn study_section(h: &mut String, s: &Study) {
    h.push_str("<section id=\"study\">\n<h2>Study</h2>\n");
    let _ = writeln!(
        h,
        "<p>Simulator: <code>{}</code>; output <code>{}</code> ({}), quantities {}.</p>",
        esc(&s.simulator.command.join(" ")),
        esc(&s.simulator.output.file),
        esc(&format!("{:?}", s.simulator.output.format).to_lowercase()),
        esc(&s.simulator.output.y.join(", "))
    );
    h.push_str("<h3>Parameters</h3>\n");
    let rows: Vec<Vec<String>> = s
        .parameters
        .iter()
        .map(|p| {
            vec![
                esc(&p.name),
                format!(
                    "<span class=\"text\">{}</span>",
                    esc(p.unit.as_deref().unwrap_or("–"))
                ),
                p.lo.to_string(),
                p.hi.to_string(),
                format!("<span class=\"text\">{}</span>", esc(&prior_text(&p.prior))),
            ]
        })
        .collect();
    h.push_str(&table(
        &[
            "parameter",
            "unit",
            "low",
            "high",
            "prior (truncated to the range)",
        ],
        &rows,
    ));
    h.push_str("<h3>Experiments</h3>\n");
    let rows: Vec<Vec<String>> = s
        .experiments
        .iter()
        .map(|e| {
            let settings: Vec<String> = e
                .settings
                .iter()
                .map(|(k, v)| format!("{k} = {v}"))
                .collect();
            vec![
                esc(&e.name),
                format!("<span class=\"text\">{}</span>", esc(&settings.join(", "))),
                format!("<code>{}</code>", esc(&e.data_path.display().to_string())),
                e.data.rows.len().to_string(),
                e.data.stations().len().to_string(),
                format!("<span class=\"text\">{}</span>", esc(&noise_text(&e.noise))),
            ]
        })
        .collect();
    h.push_str(&table(
        &[
            "experiment",
            "settings",
            "field data",
            "rows",
            "stations",
            "measurement noise",
        ],
        &rows,
    ));
    let c = &s.calibration;
    let _ = writeln!(
        h,
        "<p class=\"muted\">Design: {}, {} points, seed {}, space {}. Surrogate: {} kernel, {} mean, seed {}. Calibration: {} chains × ({} warm-up + {} draws), seed {}.</p>\n</section>",
        lower(s.design.method), s.design.points, s.design.seed, lower(s.design.space),
        crate::surrogate::Kernel::from(s.surrogate.kernel).name(), lower(s.surrogate.mean), s.surrogate.seed,
        c.chains, c.warmup, c.draws, c.seed
    );
}
