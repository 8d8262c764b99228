//! The design settings of a study (`design:`), checked.
//!
//! Input: the wire form [`DesignSpec`], the numbers of parameters and controls, and the
//! field conditions of the experiments (for `controls: from_data`).
//! Output: [`DesignParams`], with defaults filled in, and an [`Issues`] entry per broken
//! invariant (the study adds file and line).
//! Must not: import the design algorithms or anything above `crate::study::spec` and
//! `crate::study::issues`; the study module reads this file.

use crate::study::issues::Issues;
use crate::study::spec::{ControlDesign, DesignMethod, DesignSpace, DesignSpec};

/// The most parameters a Sobol' design takes: the dimensions of the direction-number
/// table (`sobol_table.rs`, whose own count `sobol.rs` checks against this one when
/// compiled).
pub const SOBOL_MAX_DIM: usize = 64;

/// Design settings after defaults.
#[derive(Debug, Clone, PartialEq)]
pub struct DesignParams {
    pub method: DesignMethod,
    pub points: usize,
    pub seed: u64,
    pub space: DesignSpace,
    /// With `from_data`: the distinct field conditions of every experiment (first
    /// appearance, experiments in order); each parameter point is run at each of them.
    /// `None` for a joint design (or no controls).
    pub conditions: Option<Vec<Vec<f64>>>,
}

impl DesignParams {
    /// `design` of a study with `parameters` parameters and `controls` controls;
    /// `field_conditions` gives the distinct field conditions of every experiment, read
    /// only for `controls: from_data`. One issue per broken invariant.
    pub fn check(
        spec: &DesignSpec,
        parameters: usize,
        controls: usize,
        field_conditions: impl FnOnce() -> Vec<Vec<f64>>,
        issues: &mut Issues,
    ) -> Self {
        let from_data = controls > 0 && spec.controls == ControlDesign::FromData;
        // Joint: 10 per design variable; from_data: 10 per parameter, each run at every
        // field condition.
        let points = spec.points.unwrap_or(
            10 * if from_data {
                parameters.max(1)
            } else {
                (parameters + controls).max(1)
            },
        );
        let conditions = from_data.then(field_conditions);
        if points < 2 {
            issues.push(
                "design.points",
                format!("{points} points are too few (at least 2)"),
            );
        }
        if spec.method == DesignMethod::Sobol && parameters > SOBOL_MAX_DIM {
            issues.push(
                "design.method",
                format!(
                    "sobol holds direction numbers for at most {SOBOL_MAX_DIM} parameters, the study has {parameters}; use `lhs`"
                ),
            );
        }
        Self {
            method: spec.method,
            points,
            seed: spec.seed,
            space: spec.space,
            conditions,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn keys(issues: Issues) -> Vec<String> {
        issues.into_iter().map(|i| i.key).collect()
    }

    #[test]
    fn default_points_follow_the_design_variables() {
        let mut issues = Issues::default();
        let joint = DesignParams::check(&DesignSpec::default(), 3, 2, Vec::new, &mut issues);
        assert_eq!((joint.points, joint.conditions), (50, None));
        let spec = DesignSpec {
            controls: ControlDesign::FromData,
            ..DesignSpec::default()
        };
        let conditions = || vec![vec![1.0], vec![2.0]];
        let from_data = DesignParams::check(&spec, 3, 1, conditions, &mut issues);
        assert_eq!(from_data.points, 30);
        assert_eq!(from_data.conditions, Some(vec![vec![1.0], vec![2.0]]));
        assert!(issues.is_empty());
    }

    #[test]
    fn too_few_points_and_too_many_sobol_dimensions_are_reported() {
        let spec = DesignSpec {
            method: DesignMethod::Sobol,
            points: Some(1),
            ..DesignSpec::default()
        };
        let mut issues = Issues::default();
        DesignParams::check(&spec, SOBOL_MAX_DIM + 1, 0, Vec::new, &mut issues);
        assert_eq!(keys(issues), ["design.points", "design.method"]);
    }
}
