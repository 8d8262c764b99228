//! What the report is made from: typed records and the numbers computed from them, and
//! the limits on how much of them it draws.

use super::compute::{LooOutput, PredictiveQuantity};
use crate::audit::Verification;
use crate::calibrate::PosteriorBody;
use crate::calibrate::Samples;
use crate::design::Design;
use crate::record::Provenance;
use crate::runs::RunBody;
use crate::study::Study;
use crate::surrogate::SurrogateBody;

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
