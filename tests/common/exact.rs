//! The acceptance bands of the calibration tests against exact posteriors (our
//! acceptance rule, docs/methods.md "How the numbers are checked": posterior mean within
//! 4 MCSE, sd within 5 %) and their check over a summary.

use assay::calibrate::PosteriorSummary;
use ndarray::{Array1, Array2};

/// The posterior mean must be within this many Monte Carlo standard errors of the exact
/// value: a 4-sigma band fails by chance about once in 16,000 per parameter.
pub const MEAN_N_MCSE: f64 = 4.0;
/// Relative error allowed on each posterior sd (our acceptance rule: 5 %).
pub const SD_RTOL: f64 = 0.05;
/// Convergence threshold recommended by Vehtari et al. (2021).
pub const RHAT_MAX: f64 = 1.01;

/// Each of `names`' posterior mean within [`MEAN_N_MCSE`] MCSE of the exact mean `m`,
/// its sd within [`SD_RTOL`] of √cov_jj, R̂ below [`RHAT_MAX`], and (a conjugate
/// posterior narrows its prior) the sd below `prior_sd`.
pub fn assert_matches_exact(
    s: &PosteriorSummary,
    names: &[String],
    m: &Array1<f64>,
    cov: &Array2<f64>,
    prior_sd: &[f64],
) {
    for j in 0..names.len() {
        let p = s.parameters[j];
        let exact_sd = cov[[j, j]].sqrt();
        let mcse = s.mcse[j].mean;
        assert!(
            (p.mean - m[j]).abs() < MEAN_N_MCSE * mcse,
            "{}: mean {} vs exact {} (MCSE {mcse})",
            names[j],
            p.mean,
            m[j]
        );
        assert!(
            (p.sd - exact_sd).abs() / exact_sd < SD_RTOL,
            "{}: sd {} vs exact {exact_sd}",
            names[j],
            p.sd
        );
        assert!(s.diagnostics[j].rhat < RHAT_MAX, "{:?}", s.diagnostics[j]);
        // Posterior variance ≤ prior variance in the conjugate case.
        assert!(p.sd < prior_sd[j]);
    }
}
