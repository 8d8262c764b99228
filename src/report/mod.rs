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
mod input;
pub mod plot;
mod sections;

pub use input::{
    DesignView, PosteriorView, ReportInput, SurrogateView, MATRIX_MAX_PARAMETERS, PAIRS_MAX_DRAWS,
    PREDICTIVE_DRAWS, TRACE_MAX_PER_CHAIN,
};

use crate::calibrate::CAUTION;
use html::esc;
use sections::{
    design_section, posterior_section, predictive_section, provenance_section, runs_section,
    study_section, surrogate_section,
};
use std::fmt::Write as _;

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
