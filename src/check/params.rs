//! The refinement settings of a study (`checks.refine:`), checked.
//!
//! Input: the wire form [`RefineSpec`].
//! Output: [`RefineParams`], and an [`Issues`] entry per broken invariant (the study
//! adds file and line).
//! Must not: import the checks' algorithms or anything above `crate::study::spec` and
//! `crate::study::issues`; the study module reads this file.

use crate::study::issues::Issues;
use crate::study::spec::RefineSpec;

/// `checks.refine`, checked.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RefineParams {
    /// At most this many rounds (≥ 1).
    pub rounds: usize,
    /// Points per round (≥ 1).
    pub add: usize,
    /// Share of the points over the whole box, in [0, 1].
    pub global_share: f64,
    /// Stop when every confirmation RMSE / noise sd is at most this (> 0).
    pub tolerance: f64,
}

impl RefineParams {
    /// Defaults of `checks.refine` (used by `assay refine` without the key).
    pub const DEFAULT: Self = Self {
        rounds: 2,
        add: 10,
        global_share: 0.2,
        tolerance: 0.5,
    };

    /// `checks.refine`, one issue per broken invariant.
    pub fn check(spec: &RefineSpec, issues: &mut Issues) -> Self {
        if spec.rounds == 0 {
            issues.push("checks.refine.rounds", "rounds must be at least 1");
        }
        if spec.add == 0 {
            issues.push("checks.refine.add", "add must be at least 1");
        }
        if !(0.0..=1.0).contains(&spec.global_share) {
            issues.push(
                "checks.refine.global_share",
                format!("global_share {} must lie in [0, 1]", spec.global_share),
            );
        }
        if !(spec.tolerance > 0.0 && spec.tolerance.is_finite()) {
            issues.push(
                "checks.refine.tolerance",
                format!("tolerance {} must be a positive number", spec.tolerance),
            );
        }
        Self {
            rounds: spec.rounds,
            add: spec.add,
            global_share: spec.global_share,
            tolerance: spec.tolerance,
        }
    }

    /// Points per round over the whole box: the share of `add`, rounded; the rest go
    /// among the posterior draws.
    pub fn n_global(&self) -> usize {
        ((self.add as f64 * self.global_share).round() as usize).min(self.add)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_wire_defaults_are_the_default_settings() {
        let spec: RefineSpec = serde_yaml::from_str("{}").expect("an empty mapping");
        let mut issues = Issues::default();
        assert_eq!(
            RefineParams::check(&spec, &mut issues),
            RefineParams::DEFAULT
        );
        assert!(issues.is_empty());
    }

    #[test]
    fn every_broken_setting_is_reported_in_order() {
        let spec = RefineSpec {
            rounds: 0,
            add: 0,
            global_share: 1.5,
            tolerance: f64::INFINITY,
        };
        let mut issues = Issues::default();
        RefineParams::check(&spec, &mut issues);
        let keys: Vec<String> = issues.into_iter().map(|i| i.key).collect();
        assert_eq!(
            keys,
            [
                "checks.refine.rounds",
                "checks.refine.add",
                "checks.refine.global_share",
                "checks.refine.tolerance"
            ]
        );
    }
}
