//! The report: one self-contained HTML file a reviewer can open offline, print, or read
//! on a phone.
//!
//! Input: a [`ReportInput`] of typed records (the study, the design, the run records,
//! the surrogate with its leave-one-out predictions, the posterior with its samples and
//! predictive bands, the provenance blocks and the audit of the campaign).
//! Output: the HTML text ([`render`]); plots are inline SVG drawn with plotters
//! ([`plot`]), styled by inline CSS. No scripts, no fonts, images or styles fetched.
//! Must not: read files, the clock or the environment (the caller passes the time).
//! Main types: [`ReportInput`], [`Samples`], [`compute::PredictiveQuantity`].

pub mod compute;
pub mod html;
pub mod plot;

use crate::audit::{Freshness, Verification};
use crate::calibrate::Samples;
use crate::calibrate::{PosteriorBody, CAUTION};
use crate::design::Design;
use crate::record::Provenance;
use crate::runs::{RunBody, RunState};
use crate::study::{Noise, Prior, Study};
use crate::surrogate::SurrogateBody;
use compute::{LooOutput, PredictiveQuantity};
use html::{esc, sig, table};
use std::collections::BTreeMap;
use std::fmt::Write as _;

/// Most draws per chain drawn in a trace plot (every k-th draw beyond): keeps the file
/// small; the eye cannot tell more lines apart.
pub const TRACE_MAX_PER_CHAIN: usize = 1000;
/// Most draws in the pairwise plot.
pub const PAIRS_MAX_DRAWS: usize = 1500;
/// Most parameters in a scatter matrix (design or posterior); beyond, the first ones.
pub const MATRIX_MAX_PARAMETERS: usize = 6;
/// Posterior draws at which the surrogate is evaluated for the predictive bands
/// (spread evenly over all chains): enough for stable means and variances.
pub const PREDICTIVE_DRAWS: usize = 400;
/// Most failed runs listed one by one.
const FAILED_LISTED: usize = 50;

/// The design record.
#[derive(Debug, Clone)]
pub struct DesignView {
    pub design: Design,
    pub provenance: Provenance,
}

/// The surrogate record and the leave-one-out predictions behind its validation.
#[derive(Debug, Clone)]
pub struct SurrogateView {
    pub body: SurrogateBody,
    pub provenance: Provenance,
    /// Per experiment (in the record's order): every output value's LOO predictions.
    pub loo: Vec<(String, Vec<LooOutput>)>,
}

/// The posterior record, its samples and the predictive bands made from them.
#[derive(Debug, Clone)]
pub struct PosteriorView {
    pub body: PosteriorBody,
    pub provenance: Provenance,
    pub samples: Samples,
    /// Why the samples could not be read, if they could not (no plots then).
    pub samples_problem: Option<String>,
    /// Per experiment and quantity; empty with a note when they cannot be made.
    pub predictive: Vec<PredictiveQuantity>,
    /// Why predictive bands are missing for some experiment, if they are.
    pub predictive_notes: Vec<String>,
    /// Posterior draws the bands were computed from.
    pub n_predictive_draws: usize,
}

/// Everything the report shows. Later stages are optional: the report shows what exists.
#[derive(Debug, Clone)]
pub struct ReportInput<'a> {
    pub study: &'a Study,
    /// When the report was made (RFC 3339, UTC).
    pub generated_utc: String,
    pub tool_version: String,
    pub design: Option<DesignView>,
    /// Run records of the design's points (missing ones are pending).
    pub runs: Vec<RunBody>,
    pub surrogate: Option<SurrogateView>,
    pub posterior: Option<PosteriorView>,
    /// The audit of the campaign when the report was made.
    pub verification: Option<Verification>,
}

/// A study setting's name as written in the study file (`lhs`, `range`, `linear`).
fn lower(v: impl std::fmt::Debug) -> String {
    format!("{v:?}").to_lowercase()
}

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

fn figure(kind: &str, name: &str, svg: Result<String, String>, caption: &str) -> String {
    let body = match svg {
        Ok(s) => s,
        Err(e) => format!("<p class=\"warn\">plot unavailable: {}</p>", esc(&e)),
    };
    format!(
        "<figure data-plot=\"{}\" data-name=\"{}\">\n{body}\n<figcaption>{}</figcaption>\n</figure>\n",
        esc(kind),
        esc(name),
        esc(caption)
    )
}

fn unit_of<'s>(study: &'s Study, name: &str) -> Option<&'s str> {
    study
        .parameters
        .iter()
        .find(|p| p.name == name)
        .and_then(|p| p.unit.as_deref())
}

/// The whole report as one HTML document.
pub fn render(r: &ReportInput) -> String {
    let s = r.study;
    let mut h = String::new();
    let title = format!("assay report — {}", s.name);
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<title>{}</title>\n<style>{}</style>\n</head>\n<body>\n",
        esc(&title),
        html::CSS
    );
    let _ = write!(
        h,
        "<header>\n<h1>{}</h1>\n<p class=\"meta\">Study file <code>{}</code> · made {} by assay {}</p>\n</header>\n",
        esc(&title),
        esc(&s.file.display().to_string()),
        esc(&r.generated_utc),
        esc(&r.tool_version)
    );
    let _ = writeln!(
        h,
        "<aside class=\"caution\" id=\"caution\"><strong>Caution.</strong> {}</aside>",
        esc(CAUTION)
    );
    h.push_str(
        "<nav><h2>Contents</h2><ol><li><a href=\"#study\">Study</a></li><li><a href=\"#design\">Design</a></li><li><a href=\"#runs\">Runs</a></li><li><a href=\"#surrogate\">Surrogate validation</a></li><li><a href=\"#posterior\">Posterior</a></li><li><a href=\"#predictive\">Predictive checks against the data</a></li><li><a href=\"#provenance\">Provenance and audit</a></li></ol></nav>\n",
    );
    study_section(&mut h, s);
    design_section(&mut h, r);
    runs_section(&mut h, r);
    surrogate_section(&mut h, r);
    posterior_section(&mut h, r);
    predictive_section(&mut h, r);
    provenance_section(&mut h, r);
    let _ = write!(
        h,
        "<aside class=\"caution\"><strong>Caution.</strong> {}</aside>\n</body>\n</html>\n",
        esc(CAUTION)
    );
    h
}

fn study_section(h: &mut String, s: &Study) {
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

fn design_section(h: &mut String, r: &ReportInput) {
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

fn warnings(h: &mut String, w: &[String]) {
    if w.is_empty() {
        return;
    }
    h.push_str("<ul class=\"warnings\">\n");
    for x in w {
        let _ = writeln!(h, "<li>warning: {}</li>", esc(x));
    }
    h.push_str("</ul>\n");
}

fn runs_section(h: &mut String, r: &ReportInput) {
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

fn surrogate_section(h: &mut String, r: &ReportInput) {
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

fn posterior_section(h: &mut String, r: &ReportInput) {
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

fn predictive_section(h: &mut String, r: &ReportInput) {
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

fn provenance_section(h: &mut String, r: &ReportInput) {
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
