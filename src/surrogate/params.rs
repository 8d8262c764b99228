//! The surrogate settings of a study (`surrogate:`), checked.
//!
//! Input: the wire form [`SurrogateSpec`].
//! Output: [`SurrogateParams`], and an [`Issues`] entry per broken invariant (the study
//! adds file and line).
//! Must not: import the surrogate's algorithms or anything above `crate::study::spec`
//! and `crate::study::issues`; the study module reads this file.

use crate::study::issues::Issues;
use crate::study::spec::{HyperpriorChoice, KernelChoice, MeanChoice, SurrogateSpec};

/// Surrogate settings after defaults.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SurrogateParams {
    pub kernel: KernelChoice,
    pub mean: MeanChoice,
    pub seed: u64,
    /// Share of a curve's standardised variance kept by its principal components.
    pub variance_kept: f64,
    /// Share of the design points held out for validation (0: none).
    pub holdout: f64,
    pub hyperprior: HyperpriorChoice,
}

impl Default for SurrogateParams {
    fn default() -> Self {
        Self {
            kernel: KernelChoice::default(),
            mean: MeanChoice::default(),
            seed: 1,
            variance_kept: 0.999,
            holdout: 0.0,
            hyperprior: HyperpriorChoice::None,
        }
    }
}

impl SurrogateParams {
    /// `surrogate`, one issue per broken invariant.
    pub fn check(spec: &SurrogateSpec, issues: &mut Issues) -> Self {
        if !(spec.variance_kept > 0.0 && spec.variance_kept <= 1.0) {
            issues.push(
                "surrogate.variance_kept",
                format!(
                    "variance_kept {} must be in (0, 1] (the share of a curve's variance kept by its principal components)",
                    spec.variance_kept
                ),
            );
        }
        if !(spec.holdout >= 0.0 && spec.holdout < 0.5) {
            issues.push(
                "surrogate.holdout",
                format!(
                    "holdout {} must be in [0, 0.5) (the share of design points held out for validation)",
                    spec.holdout
                ),
            );
        }
        Self {
            kernel: spec.kernel,
            mean: spec.mean,
            seed: spec.seed,
            variance_kept: spec.variance_kept,
            holdout: spec.holdout,
            hyperprior: spec.hyperprior,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_wire_defaults_are_the_default_settings() {
        let mut issues = Issues::default();
        let checked = SurrogateParams::check(&SurrogateSpec::default(), &mut issues);
        assert_eq!(checked, SurrogateParams::default());
        assert!(issues.is_empty());
    }

    #[test]
    fn shares_out_of_range_are_reported() {
        let spec = SurrogateSpec {
            variance_kept: 0.0,
            holdout: 0.5,
            ..SurrogateSpec::default()
        };
        let mut issues = Issues::default();
        SurrogateParams::check(&spec, &mut issues);
        let keys: Vec<String> = issues.into_iter().map(|i| i.key).collect();
        assert_eq!(keys, ["surrogate.variance_kept", "surrogate.holdout"]);
    }
}
