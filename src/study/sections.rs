//! One check per section of the study file (experiments: `experiments.rs`; Slurm:
//! `slurm.rs`). Each reads its section of the wire form, reports every broken invariant
//! through the [`Checker`] (which adds file and line) and returns the checked value.
//! The stages' own settings are checked by their `params.rs`, called from
//! [`super::parse`].

use super::checked::{Experiment, FileTemplate, OutputSpec, Parameter, Prior, Simulator};
use super::checker::Checker;
use super::placeholder;
use super::spec::{
    CalibrationSpec, ChecksSpec, ControlDesign, ExecutionSpec, PriorSpec, SimulatorSpec, StudySpec,
};
use crate::check::params::RefineParams;
use crate::design::params::DesignParams;
use std::collections::BTreeSet;
use std::path::{Component, Path, PathBuf};

/// Placeholders assay provides itself; parameters and settings may not take these names.
pub const RESERVED: [&str; 3] = ["run_dir", "run_id", "study_dir"];

/// Is `s` usable as one folder name under the campaign (study, experiment and point
/// names): `[A-Za-z0-9._-]+`, neither `.` nor `..`, so it can never climb out.
pub fn is_folder_name(s: &str) -> bool {
    !s.is_empty()
        && s != "."
        && s != ".."
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '.' || c == '_' || c == '-')
}

/// Is `p` a relative path that stays inside its base folder?
pub(crate) fn is_contained_relative(p: &str) -> bool {
    let path = Path::new(p);
    !p.is_empty()
        && path
            .components()
            .all(|c| matches!(c, Component::Normal(_) | Component::CurDir))
}

/// `name`: usable as the campaign's folder name.
pub(super) fn name(c: &mut Checker<'_>, name: &str) {
    if !is_folder_name(name) {
        c.err(
            "name",
            format!(
                "`{}` is not a valid study name (expected [A-Za-z0-9._-]+)",
                name.escape_debug()
            ),
        );
    }
}

/// `parameters`: at least one; each a new identifier with a range and a prior that
/// fits it. The names go into `seen`.
pub(super) fn parameters(
    c: &mut Checker<'_>,
    spec: &StudySpec,
    seen: &mut BTreeSet<String>,
) -> Vec<Parameter> {
    if spec.parameters.is_empty() {
        c.err("parameters", "at least one parameter is needed");
    }
    let mut parameters = Vec::new();
    for (i, p) in spec.parameters.iter().enumerate() {
        let key = format!("parameters[{i}]");
        check_variable_name(c, &key, "parameter", &p.name, seen, || {
            format!("duplicate parameter name `{}`", p.name)
        });
        let [lo, hi] = p.range;
        check_range(c, &key, lo, hi);
        let prior = prior(c, &key, &p.prior, lo, hi);
        parameters.push(Parameter {
            name: p.name.clone(),
            unit: p.unit.clone(),
            lo,
            hi,
            prior,
        });
    }
    parameters
}

/// `{key}.prior` of a parameter with range `[lo, hi]`.
fn prior(c: &mut Checker<'_>, key: &str, spec: &PriorSpec, lo: f64, hi: f64) -> Prior {
    match *spec {
        PriorSpec::Uniform => Prior::Uniform,
        PriorSpec::Normal { mean, sd } => {
            if !(sd > 0.0 && sd.is_finite()) {
                c.err(
                    format!("{key}.prior.normal.sd"),
                    format!("sd {sd} must be > 0"),
                );
            } else if !(lo..=hi).contains(&mean) {
                c.err(
                    format!("{key}.prior.normal.mean"),
                    format!("prior mean {mean} is outside the range [{lo}, {hi}]"),
                );
            }
            Prior::Normal { mean, sd }
        }
        PriorSpec::Lognormal { mu, sigma } => {
            if !(sigma > 0.0 && sigma.is_finite()) {
                c.err(
                    format!("{key}.prior.lognormal.sigma"),
                    format!("sigma {sigma} must be > 0"),
                );
            } else if hi <= 0.0 {
                c.err(
                    format!("{key}.prior"),
                    format!(
                        "a lognormal prior needs a range with positive values, got [{lo}, {hi}]"
                    ),
                );
            } else if !(lo..=hi).contains(&mu.exp()) {
                c.err(
                    format!("{key}.prior.lognormal.mu"),
                    format!(
                        "prior median exp({mu}) = {} is outside the range [{lo}, {hi}]",
                        mu.exp()
                    ),
                );
            }
            Prior::LogNormal { mu, sigma }
        }
    }
}

/// `controls`: names like parameters', distinct from them (and from each other: `seen`
/// holds the parameters' names); `design.controls: from_data` needs some.
pub(super) fn controls(
    c: &mut Checker<'_>,
    spec: &StudySpec,
    seen: &mut BTreeSet<String>,
) -> Vec<Parameter> {
    let mut controls = Vec::new();
    for (i, p) in spec.controls.iter().enumerate() {
        let key = format!("controls[{i}]");
        check_variable_name(c, &key, "control", &p.name, seen, || {
            format!(
                "control name `{}` is already a parameter or another control",
                p.name
            )
        });
        let [lo, hi] = p.range;
        check_range(c, &key, lo, hi);
        controls.push(Parameter {
            name: p.name.clone(),
            unit: p.unit.clone(),
            lo,
            hi,
            prior: Prior::Uniform,
        });
    }
    if spec.controls.is_empty() && spec.design.controls == ControlDesign::FromData {
        c.err(
            "design.controls",
            "`from_data` places the controls, but the study has no `controls`",
        );
    }
    controls
}

/// `{key}.name` of a parameter or control (`kind`): an identifier, not a run
/// placeholder, not seen before (`duplicate` says so otherwise). Invalid names are shown
/// escaped, so control characters stay visible.
fn check_variable_name(
    c: &mut Checker<'_>,
    key: &str,
    kind: &str,
    name: &str,
    seen: &mut BTreeSet<String>,
    duplicate: impl FnOnce() -> String,
) {
    if !placeholder::is_identifier(name) {
        c.err(
            format!("{key}.name"),
            format!(
                "`{}` is not a valid {kind} name (expected [A-Za-z_][A-Za-z0-9_]*)",
                name.escape_debug()
            ),
        );
    } else if RESERVED.contains(&name) {
        c.err(
            format!("{key}.name"),
            format!("`{name}` is reserved for the run folder placeholders"),
        );
    } else if !seen.insert(name.to_string()) {
        c.err(format!("{key}.name"), duplicate());
    }
}

/// `{key}.range`: two finite numbers, low < high.
fn check_range(c: &mut Checker<'_>, key: &str, lo: f64, hi: f64) {
    if !(lo.is_finite() && hi.is_finite()) {
        c.err(
            format!("{key}.range"),
            format!("range [{lo}, {hi}] must be finite"),
        );
    } else if lo >= hi {
        c.err(
            format!("{key}.range"),
            format!(
                "range [{lo}, {hi}] is reversed or empty (expected [low, high] with low < high)"
            ),
        );
    }
}

/// `simulator`: a program, a timeout, outputs and files that stay inside the run
/// folder, environment variable names a shell can export; the templates are read
/// (relative to `dir`) through `read`.
pub(super) fn simulator(
    c: &mut Checker<'_>,
    sim: &SimulatorSpec,
    dir: &Path,
    read: &dyn Fn(&Path) -> std::io::Result<String>,
) -> Simulator {
    if sim.command.is_empty() || sim.command[0].is_empty() {
        c.err(
            "simulator.command",
            "the command needs at least the program",
        );
    }
    if !(sim.timeout_s > 0.0 && sim.timeout_s.is_finite()) {
        c.err(
            "simulator.timeout_s",
            format!("timeout {} must be > 0 seconds", sim.timeout_s),
        );
    }
    if !is_contained_relative(&sim.output.file) {
        c.err(
            "simulator.output.file",
            format!(
                "`{}` must be a relative path inside the run folder (no `..`, not absolute)",
                sim.output.file
            ),
        );
    }
    if sim.output.y.is_empty() {
        c.err("simulator.output.y", "name at least one output quantity");
    }
    for name in sim.env.keys() {
        // The portable names of POSIX (XBD 8.1). Anything else could not be exported by
        // the Slurm job script without quoting the name, which a shell does not allow.
        if !placeholder::is_identifier(name) {
            c.err(
                format!("simulator.env.{name}"),
                format!(
                    "`{}` is not a valid environment variable name (expected [A-Za-z_][A-Za-z0-9_]*)",
                    name.escape_debug()
                ),
            );
        }
    }
    let mut files = Vec::new();
    for (i, f) in sim.files.iter().enumerate() {
        let key = format!("simulator.files[{i}]");
        if !is_contained_relative(&f.to) {
            c.err(
                format!("{key}.to"),
                format!(
                    "`{}` must be a relative path inside the run folder (no `..`, not absolute)",
                    f.to
                ),
            );
        }
        let path = dir.join(&f.template);
        match read(&path) {
            Ok(text) => files.push(FileTemplate {
                path,
                text,
                to: f.to.clone(),
            }),
            Err(e) => c.err(
                format!("{key}.template"),
                format!("cannot read template `{}`: {e}", path.display()),
            ),
        }
    }
    Simulator {
        command: sim.command.clone(),
        files,
        output: OutputSpec {
            file: sim.output.file.clone(),
            format: sim.output.format,
            x: sim.output.x.clone(),
            y: sim.output.y.clone(),
        },
        timeout_s: sim.timeout_s,
        retries: sim.retries,
        env: sim.env.clone(),
    }
}

/// `design`, checked by [`DesignParams::check`]; with `controls: from_data` each point
/// is run at every distinct field condition of the `experiments`.
pub(super) fn design(
    c: &mut Checker<'_>,
    spec: &StudySpec,
    parameters: usize,
    controls: usize,
    experiments: &[Experiment],
) -> DesignParams {
    let field_conditions = || {
        let mut all: Vec<Vec<f64>> = Vec::new();
        for e in experiments {
            for cond in e.data.conditions() {
                if !all.contains(&cond) {
                    all.push(cond);
                }
            }
        }
        all
    };
    c.checked(|issues| {
        DesignParams::check(&spec.design, parameters, controls, field_conditions, issues)
    })
}

/// `execution`: at least one job at a time; the Slurm settings.
pub(super) fn execution(c: &mut Checker<'_>, execution: &ExecutionSpec) {
    if execution.jobs == Some(0) {
        c.err("execution.jobs", "jobs must be at least 1");
    }
    super::slurm::check(c, &execution.slurm);
}

/// `checks`: confirmation runs and refinement need no controls (yet); `refine`'s own
/// settings are checked by [`RefineParams::check`]. Returns the confirmation runs and
/// the refinement.
pub(super) fn checks(
    c: &mut Checker<'_>,
    checks: &ChecksSpec,
    has_controls: bool,
) -> (usize, Option<RefineParams>) {
    // Confirmation runs would need a condition for each posterior draw; not built yet.
    if has_controls {
        if checks.confirmation_runs > 0 {
            c.err(
                "checks.confirmation_runs",
                "confirmation runs are not available yet for studies with `controls`: set it to 0 (add runs with `assay design --add`)",
            );
        }
        if checks.refine.is_some() {
            c.err(
                "checks.refine",
                "refinement is not available yet for studies with `controls` (add runs with `assay design --add`)",
            );
        }
    }
    let refine = checks
        .refine
        .as_ref()
        .map(|r| c.checked(|issues| RefineParams::check(r, issues)));
    (checks.confirmation_runs, refine)
}

/// `calibration.prior_from`: an earlier `posterior.yaml` (relative to `dir`) with its
/// `posterior-samples.csv` beside it. Returns the resolved path.
pub(super) fn prior_from(
    c: &mut Checker<'_>,
    cal: &CalibrationSpec,
    dir: &Path,
) -> Option<PathBuf> {
    let path = dir.join(cal.prior_from.as_ref()?);
    if !path.is_file() {
        c.err(
            "calibration.prior_from",
            format!("no such file: {}", path.display()),
        );
        return None;
    }
    let samples = path.with_file_name("posterior-samples.csv");
    if !samples.is_file() {
        c.err(
            "calibration.prior_from",
            format!(
                "{} has no posterior-samples.csv beside it ({} is missing)",
                path.display(),
                samples.display()
            ),
        );
        return None;
    }
    Some(path)
}
