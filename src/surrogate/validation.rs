//! Leave-one-out validation summaries.
//!
//! # References
//! Bastos, L. S. & O'Hagan, A. (2009). Diagnostics for Gaussian process emulators.
//! Technometrics 51(4), 425–438 (standardised prediction errors; their coverage).

use serde::{Deserialize, Serialize};

/// Summary of standardised errors z = (y − μ₋ᵢ)/σ₋ᵢ; near N(0, 1) when the variance is honest.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct ZSummary {
    pub mean: f64,
    pub sd: f64,
    pub max_abs: f64,
}

/// Leave-one-out validation of one output (or pooled over an experiment's outputs).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Validation {
    /// Root mean square LOO error, original units.
    pub rmse: f64,
    /// 1 − Σ e² / Σ (y − ȳ)²; 1 is perfect, ≤ 0 no better than the mean.
    pub q2: f64,
    /// Fraction of |z| ≤ 1.96 (≈ 0.95 for an honest variance).
    pub coverage95: f64,
    pub standardized_error: ZSummary,
    #[serde(skip)]
    pub(crate) sse: f64,
    #[serde(skip)]
    pub(crate) sst: f64,
    #[serde(skip)]
    pub(crate) z: Vec<f64>,
    #[serde(skip)]
    pub(crate) n: usize,
}

/// The 97.5 % quantile of N(0, 1): |z| ≤ this is inside the central 95 % band.
const Z_975: f64 = 1.959_963_984_540_054;

impl Validation {
    /// From observed values, LOO means and LOO sds (an sd of 0 marks an exact prediction).
    pub fn from_loo(y: &[f64], pred: &[f64], sd: &[f64]) -> Self {
        let n = y.len() as f64;
        let ybar = y.iter().sum::<f64>() / n;
        let sse: f64 = y.iter().zip(pred).map(|(a, b)| (a - b).powi(2)).sum();
        let sst: f64 = y.iter().map(|a| (a - ybar).powi(2)).sum();
        let z: Vec<f64> = y
            .iter()
            .zip(pred)
            .zip(sd)
            .filter(|(_, s)| **s > 0.0)
            .map(|((a, b), s)| (a - b) / s)
            .collect();
        let mut v = Self {
            sse,
            sst,
            z,
            n: y.len(),
            ..Default::default()
        };
        v.finish();
        v
    }

    fn finish(&mut self) {
        self.rmse = (self.sse / self.n.max(1) as f64).sqrt();
        self.q2 = if self.sst > 0.0 {
            1.0 - self.sse / self.sst
        } else {
            1.0
        };
        let nz = self.z.len();
        if nz == 0 {
            self.coverage95 = 1.0;
            self.standardized_error = ZSummary::default();
            return;
        }
        self.coverage95 = self.z.iter().filter(|z| z.abs() <= Z_975).count() as f64 / nz as f64;
        let mean = self.z.iter().sum::<f64>() / nz as f64;
        let sd = (self.z.iter().map(|z| (z - mean).powi(2)).sum::<f64>() / (nz.max(2) - 1) as f64)
            .sqrt();
        let max_abs = self.z.iter().fold(0.0f64, |m, z| m.max(z.abs()));
        self.standardized_error = ZSummary { mean, sd, max_abs };
    }
}

/// Q² below this: the surrogate explains too little of the runs' variation (common practice).
pub const Q2_POOR: f64 = 0.9;
/// LOO coverage of the 95 % band below this: the predictive variance is too small
/// (Bastos & O'Hagan 2009 read the standardised errors the same way).
pub const COVERAGE_POOR: f64 = 0.8;

impl Validation {
    /// A plain warning when the leave-one-out validation says the surrogate is poor.
    pub fn verdict(&self) -> Option<String> {
        let mut why = Vec::new();
        if self.q2 < Q2_POOR {
            why.push(format!("Q² {:.3} < {Q2_POOR}", self.q2));
        }
        if self.coverage95 < COVERAGE_POOR {
            why.push(format!(
                "95 % coverage {:.2} < {COVERAGE_POOR}",
                self.coverage95
            ));
        }
        (!why.is_empty()).then(|| {
            format!(
                "the surrogate is poor ({}): calibration against it is not trustworthy; add runs (`assay design --add`) or narrow the parameter ranges",
                why.join(", ")
            )
        })
    }
}

/// Pool the validations of several outputs (all errors together).
pub fn summarize(parts: &[&Validation]) -> Validation {
    let mut v = Validation::default();
    for p in parts {
        v.sse += p.sse;
        v.sst += p.sst;
        v.z.extend(&p.z);
        v.n += p.n;
    }
    v.finish();
    v
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn summary_statistics_by_hand() {
        // y = (1, 2, 3), LOO means (1.5, 2, 2), sds (0.5, 1, 0.25): errors (−0.5, 0, 1),
        // z = (−1, 0, 4); SSE = 1.25, SST = 2, Q² = 1 − 1.25/2 = 0.375; 2 of 3 |z| ≤ 1.96.
        let v = Validation::from_loo(&[1.0, 2.0, 3.0], &[1.5, 2.0, 2.0], &[0.5, 1.0, 0.25]);
        assert!((v.rmse - (1.25f64 / 3.0).sqrt()).abs() < 1e-15);
        assert!((v.q2 - 0.375).abs() < 1e-15);
        assert!((v.coverage95 - 2.0 / 3.0).abs() < 1e-15);
        assert_eq!(v.standardized_error.max_abs, 4.0);
        let w = v.verdict().expect("a poor surrogate is called poor");
        assert!(
            w.contains("Q² 0.375 < 0.9") && w.contains("coverage 0.67 < 0.8"),
            "{w}"
        );
        let good = Validation::from_loo(&[1.0, 2.0, 3.0], &[1.0, 2.0, 3.01], &[0.1, 0.1, 0.1]);
        assert_eq!(good.verdict(), None);
    }
}
