//! The report step: read the records that exist, recompute the leave-one-out
//! predictions and the predictive bands, check the audit trail, render `report.html`.

use crate::audit;
use crate::calibrate::{PosteriorBody, Samples};
use crate::design::DesignBody;
use crate::layout::{
    read_if_exists, read_stage_record, Campaign, DESIGN_FILE, POSTERIOR_FILE, SAMPLES_FILE,
    SURROGATE_FILE,
};
use crate::record::{write_atomic, Record};
use crate::report::{self, compute, DesignView, PosteriorView, ReportInput, SurrogateView};
use crate::runs;
use crate::surrogate::SurrogateBody;
use anyhow::{Context, Result};
use std::path::Path;

/// Write the HTML report to `out`.
///
/// # Errors
/// No design yet, a malformed record, or I/O.
pub fn report_stage(c: &Campaign, out: &Path) -> Result<()> {
    let design_rec: Record<DesignBody> = read_stage_record(c, DESIGN_FILE, "design")?;
    let design = design_rec
        .body
        .to_design()
        .with_context(|| format!("{} is malformed", c.path(DESIGN_FILE).display()))?;
    let (_, runs) = runs::load_runs(&c.study, &design, &c.dir)?;
    let surrogate = match read_if_exists::<SurrogateBody>(c, SURROGATE_FILE)? {
        None => None,
        Some(rec) => {
            let fitted = rec.body.to_fitted()?;
            Some((rec, fitted))
        }
    };
    let posterior = read_if_exists::<PosteriorBody>(c, POSTERIOR_FILE)?.map(|rec| {
        // Without readable samples the report still shows the posterior table and
        // says why the plots are missing (the audit section names the file too).
        let samples = std::fs::read_to_string(c.path(SAMPLES_FILE))
            .map_err(|e| format!("cannot read {SAMPLES_FILE}: {e}"))
            .and_then(|text| Samples::parse_csv(&text).map_err(|e| format!("{SAMPLES_FILE}:{e}")));
        let (samples, samples_problem) = match samples {
            Ok(s) => (s, None),
            Err(e) => (
                Samples {
                    columns: Vec::new(),
                    chains: Vec::new(),
                },
                Some(e),
            ),
        };
        let bands = compute::predictive_bands(
            &c.study,
            surrogate.as_ref().map(|(_, f)| f),
            &rec.body,
            &samples,
            samples_problem.is_none(),
            report::PREDICTIVE_DRAWS,
        );
        PosteriorView {
            body: rec.body,
            provenance: rec.provenance,
            n_predictive_draws: bands.n_draws,
            samples,
            samples_problem,
            predictive: bands.quantities,
            predictive_notes: bands.notes,
        }
    });
    let surrogate_view = surrogate.map(|(rec, fitted)| SurrogateView {
        loo: fitted
            .experiments
            .iter()
            .map(|m| (m.experiment.clone(), compute::loo_of(m)))
            .collect(),
        body: rec.body,
        provenance: rec.provenance,
    });
    let input = ReportInput {
        study: &c.study,
        generated_utc: chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        design: Some(DesignView {
            design,
            provenance: design_rec.provenance,
        }),
        runs,
        surrogate: surrogate_view,
        posterior,
        verification: audit::verify(c).ok(),
    };
    write_atomic(out, report::render(&input).as_bytes())
}
