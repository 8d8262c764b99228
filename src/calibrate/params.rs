//! The calibration settings of a study (`calibration:`), checked.
//!
//! Input: the wire form [`StudySpec`] (calibration reads across sections: whether the
//! study has controls or curve outputs, which experiments it has and their noise).
//! Output: [`CalibrationParams`] and [`DiscrepancyParams`], with defaults filled in, and
//! an [`Issues`] entry per broken invariant (the study adds file and line).
//! Must not: import the samplers or anything above `crate::study::spec` and
//! `crate::study::issues`; the study module reads this file. Files named by the
//! settings (`prior_from`) are resolved by the study, against its folder.

use crate::study::issues::Issues;
use crate::study::spec::{
    DiscrepancySdSpec, DiscrepancySpec, HyperparameterMode, KernelChoice, LengthScaleSpec,
    NoiseSpec, SamplerChoice, StudySpec,
};
use std::path::PathBuf;

/// Calibration settings after defaults.
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationParams {
    pub chains: usize,
    pub warmup: usize,
    pub draws: usize,
    pub seed: u64,
    pub sampler: SamplerChoice,
    /// Ensemble walkers as written (the default depends on the dimension).
    pub walkers: Option<usize>,
    /// `Some(max kept draws per chain)` when sampling goes on until converged.
    pub until_converged: Option<usize>,
    /// The earlier `posterior.yaml` whose draws are the prior, resolved.
    pub prior_from: Option<PathBuf>,
    /// `calibration.discrepancy`, checked.
    pub discrepancy: Option<DiscrepancyParams>,
}

/// The model-discrepancy settings after checks.
#[derive(Debug, Clone, PartialEq)]
pub struct DiscrepancyParams {
    pub kernel: KernelChoice,
    /// `None`: sampled with the default half-normal prior (scale from the data).
    pub sd: Option<DiscrepancySdSpec>,
    /// `None`: sampled with the default lognormal prior (from the x span); unused for
    /// scalar outputs.
    pub length_scale: Option<LengthScaleSpec>,
    /// The experiments with a discrepancy (every experiment unless named).
    pub experiments: Vec<String>,
    /// Sampled with the parameters, or fixed at their joint posterior mode first.
    pub hyperparameters: HyperparameterMode,
}

impl CalibrationParams {
    /// The sampler settings of `spec.calibration`, one issue per broken invariant.
    ///
    /// `prior_from` and `discrepancy` come back `None`: the study resolves the file
    /// against its folder, and checks the discrepancy with [`DiscrepancyParams::check`]
    /// once every section has been read (it names experiments).
    pub fn check(spec: &StudySpec, issues: &mut Issues) -> Self {
        let cal = &spec.calibration;
        if cal.chains == 0 {
            issues.push("calibration.chains", "chains must be at least 1");
        }
        if cal.draws < 10 {
            issues.push(
                "calibration.draws",
                format!("{} draws per chain are too few (at least 10)", cal.draws),
            );
        }
        if cal.sampler == SamplerChoice::Nuts {
            check_gradient_available(spec, issues);
        }
        if let Some(w) = cal.walkers {
            let dim = spec.parameters.len();
            if w < 4 || w % 2 != 0 || w <= dim {
                issues.push(
                    "calibration.walkers",
                    format!("{w} walkers: the ensemble needs an even number, at least 4 and more than the {dim} parameters"),
                );
            }
            if cal.sampler != SamplerChoice::Ensemble {
                issues.push(
                    "calibration.walkers",
                    "walkers belong to `sampler: ensemble`",
                );
            }
        }
        if let Some(m) = cal.max_draws {
            if !cal.until_converged {
                issues.push(
                    "calibration.max_draws",
                    "max_draws belongs to `until_converged: true`",
                );
            } else if m < cal.draws {
                issues.push(
                    "calibration.max_draws",
                    format!("max_draws {m} is less than draws {}", cal.draws),
                );
            }
        }
        Self {
            chains: cal.chains,
            warmup: cal.warmup,
            draws: cal.draws,
            seed: cal.seed,
            sampler: cal.sampler,
            walkers: cal.walkers,
            until_converged: cal
                .until_converged
                .then(|| cal.max_draws.unwrap_or(4 * cal.draws)),
            prior_from: None,
            discrepancy: None,
        }
    }
}

/// `sampler: nuts` follows the gradient of the log posterior; what has none is refused
/// here rather than after the runs.
fn check_gradient_available(spec: &StudySpec, issues: &mut Issues) {
    if !spec.controls.is_empty() {
        issues.push(
            "calibration.sampler",
            "`nuts` is not available yet for studies with `controls` (the field emulator has no gradient): use `adaptive_metropolis`",
        );
    }
    let Some(d) = &spec.calibration.discrepancy else {
        return;
    };
    let curves = spec.simulator.output.x.is_some() || !spec.controls.is_empty();
    let sd_fixed = matches!(d.sd, Some(DiscrepancySdSpec::Fixed(_)));
    let ls_fixed = !curves || matches!(d.length_scale, Some(LengthScaleSpec::Fixed(_)));
    // With `hyperparameters: map` they are fixed (at the posterior mode) while θ is
    // sampled.
    let fixed = (sd_fixed && ls_fixed) || d.hyperparameters == HyperparameterMode::Map;
    if !fixed {
        issues.push(
            "calibration.sampler",
            "`nuts` needs the discrepancy's hyperparameters fixed (`sd: {fixed: v}`, and `length_scale: {fixed: v}` for curves, or all of them at their posterior mode with `hyperparameters: map`); sampled ones have no gradient yet: use `adaptive_metropolis`",
        );
    }
    let with_discrepancy = |name: &str| {
        d.experiments
            .as_ref()
            .is_none_or(|names| names.iter().any(|n| n == name))
    };
    if spec
        .experiments
        .iter()
        .any(|e| with_discrepancy(&e.name) && matches!(e.noise, NoiseSpec::Unknown { .. }))
    {
        issues.push(
            "calibration.sampler",
            "`nuts` does not yet handle an unknown noise variance together with a discrepancy: give the noise sd, or use `adaptive_metropolis`",
        );
    }
}

impl DiscrepancyParams {
    /// `calibration.discrepancy` (`d`) of the study `spec`, one issue per broken
    /// invariant.
    pub fn check(d: &DiscrepancySpec, spec: &StudySpec, issues: &mut Issues) -> Self {
        check_priors(d, spec, issues);
        let all: Vec<String> = spec.experiments.iter().map(|e| e.name.clone()).collect();
        let experiments = match &d.experiments {
            None => all,
            Some(names) => {
                if names.is_empty() {
                    issues.push(
                        "calibration.discrepancy.experiments",
                        "name at least one experiment (or leave the key out for every experiment)",
                    );
                }
                for (i, n) in names.iter().enumerate() {
                    if !all.contains(n) {
                        issues.push(
                            format!("calibration.discrepancy.experiments[{i}]"),
                            format!("no experiment `{n}` (experiments: {})", all.join(", ")),
                        );
                    }
                }
                names.clone()
            }
        };
        Self {
            kernel: d.kernel,
            sd: d.sd,
            length_scale: d.length_scale,
            experiments,
            hyperparameters: d.hyperparameters,
        }
    }
}

/// The hyperparameters of `calibration.discrepancy`: fixed values and priors in
/// range, a length-scale only where there is an x, something to estimate for `map`.
fn check_priors(d: &DiscrepancySpec, spec: &StudySpec, issues: &mut Issues) {
    match d.sd {
        Some(DiscrepancySdSpec::Fixed(v)) if !(v > 0.0 && v.is_finite()) => issues.push(
            "calibration.discrepancy.sd.fixed",
            format!("discrepancy sd {v} must be a finite number > 0"),
        ),
        Some(DiscrepancySdSpec::HalfNormal { scale }) if !(scale > 0.0 && scale.is_finite()) => {
            issues.push(
                "calibration.discrepancy.sd.half_normal.scale",
                format!("half-normal scale {scale} must be a finite number > 0"),
            )
        }
        _ => {}
    }
    match d.length_scale {
        Some(_) if spec.simulator.output.x.is_none() && spec.controls.is_empty() => issues.push(
            "calibration.discrepancy.length_scale",
            "length_scale needs curve outputs (`simulator.output.x`) or `controls`; with scalar outputs and no controls the discrepancy is an independent offset per output quantity",
        ),
        Some(LengthScaleSpec::Fixed(v)) if !(v > 0.0 && v.is_finite()) => issues.push(
            "calibration.discrepancy.length_scale.fixed",
            format!("discrepancy length_scale {v} must be a finite number > 0"),
        ),
        Some(LengthScaleSpec::Lognormal { mu, sigma }) if !(sigma > 0.0 && sigma.is_finite() && mu.is_finite()) => {
            issues.push(
                "calibration.discrepancy.length_scale.lognormal",
                format!("lognormal mu {mu} must be finite and sigma {sigma} a finite number > 0"),
            )
        }
        _ => {}
    }
    // `map` estimates the hyperparameters that have a prior; with none there is nothing
    // to estimate, and the key would silently mean `sampled`.
    let sd_fixed = matches!(d.sd, Some(DiscrepancySdSpec::Fixed(_)));
    let no_length_scale = spec.simulator.output.x.is_none() && spec.controls.is_empty();
    let length_fixed = matches!(d.length_scale, Some(LengthScaleSpec::Fixed(_)));
    if d.hyperparameters == HyperparameterMode::Map && sd_fixed && (length_fixed || no_length_scale)
    {
        issues.push(
            "calibration.discrepancy.hyperparameters",
            if no_length_scale {
                "`map` needs a hyperparameter to estimate, but `sd` is fixed and scalar outputs have no length-scale: give `sd` a prior (`{half_normal: {scale: s}}`) or leave `hyperparameters` out"
            } else {
                "`map` needs a hyperparameter to estimate, but `sd` and `length_scale` are both fixed: give one of them a prior or leave `hyperparameters` out"
            },
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const STUDY: &str = "name: s
parameters: [{name: a, range: [0, 1]}]
simulator: {command: [x], output: {file: o.csv, format: csv, y: [q]}}
experiments:
  - {name: e1, data: d.csv, noise: {sd: 1}}
  - {name: e2, data: d.csv, noise: {unknown: {shape: 2, scale: 1}}}
";

    fn spec(calibration: &str) -> StudySpec {
        serde_yaml::from_str(&format!("{STUDY}calibration: {calibration}\n")).expect("a study")
    }

    fn keys(issues: Issues) -> Vec<String> {
        issues.into_iter().map(|i| i.key).collect()
    }

    #[test]
    fn defaults_check_clean_and_leave_the_references_to_the_study() {
        let mut issues = Issues::default();
        let c = CalibrationParams::check(&spec("{until_converged: true}"), &mut issues);
        assert!(issues.is_empty());
        assert_eq!(
            (c.chains, c.draws, c.until_converged),
            (4, 4000, Some(16000))
        );
        assert_eq!((c.prior_from, c.discrepancy), (None, None));
    }

    #[test]
    fn sampler_settings_that_do_not_fit_are_reported() {
        let mut issues = Issues::default();
        let s = spec("{chains: 0, draws: 5, walkers: 3, max_draws: 50}");
        CalibrationParams::check(&s, &mut issues);
        assert_eq!(
            keys(issues),
            [
                "calibration.chains",
                "calibration.draws",
                "calibration.walkers",
                "calibration.walkers",
                "calibration.max_draws"
            ]
        );
    }

    #[test]
    fn nuts_refuses_a_sampled_discrepancy_with_unknown_noise() {
        let mut issues = Issues::default();
        let s = spec("{sampler: nuts, discrepancy: {}}");
        CalibrationParams::check(&s, &mut issues);
        assert_eq!(keys(issues), ["calibration.sampler", "calibration.sampler"]);
    }

    #[test]
    fn the_discrepancy_names_existing_experiments_of_a_scalar_study() {
        let s = spec("{discrepancy: {experiments: [e2, e3], length_scale: {fixed: 1}}}");
        let d = s.calibration.discrepancy.as_ref().expect("a discrepancy");
        let mut issues = Issues::default();
        let checked = DiscrepancyParams::check(d, &s, &mut issues);
        assert_eq!(checked.experiments, ["e2", "e3"]);
        assert_eq!(
            keys(issues),
            [
                "calibration.discrepancy.length_scale",
                "calibration.discrepancy.experiments[1]"
            ]
        );
        let s = spec("{discrepancy: {}}");
        let d = s.calibration.discrepancy.as_ref().expect("a discrepancy");
        let mut issues = Issues::default();
        assert_eq!(
            DiscrepancyParams::check(d, &s, &mut issues).experiments,
            ["e1", "e2"]
        );
        assert!(issues.is_empty());
    }
}
