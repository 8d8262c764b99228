//! The `experiments` section: names, settings, noise, field data, and the placeholders
//! of the simulator as each experiment fills them.

use super::checked::{Experiment, Noise, Parameter, Simulator};
use super::checker::Checker;
use super::data::FieldData;
use super::placeholder;
use super::sections::{is_folder_name, RESERVED};
use super::spec::{ExperimentSpec, NoiseSpec, SettingValue, StudySpec};
use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

/// `experiments`: at least one, each with a new folder name, settings that clash with
/// no other placeholder, a valid noise, readable field data (relative to `dir`, read
/// through `read`) with controls in range, and every placeholder of the `simulator`
/// known. Experiments whose data could not be read are left out.
pub(super) fn experiments(
    c: &mut Checker<'_>,
    spec: &StudySpec,
    parameters: &[Parameter],
    controls: &[Parameter],
    simulator: &Simulator,
    dir: &Path,
    read: &dyn Fn(&Path) -> std::io::Result<String>,
) -> Vec<Experiment> {
    if spec.experiments.is_empty() {
        c.err(
            "experiments",
            "at least one experiment with field data is needed",
        );
    }
    let mut experiments = Vec::new();
    let mut seen = BTreeSet::new();
    for (i, e) in spec.experiments.iter().enumerate() {
        let key = format!("experiments[{i}]");
        if !is_folder_name(&e.name) {
            c.err(
                format!("{key}.name"),
                format!(
                    "`{}` is not a valid experiment name (expected [A-Za-z0-9._-]+)",
                    e.name.escape_debug()
                ),
            );
        } else if !seen.insert(e.name.clone()) {
            c.err(
                format!("{key}.name"),
                format!("duplicate experiment name `{}`", e.name),
            );
        }
        let settings = settings(c, &key, e, parameters, controls);
        let noise = noise(c, &key, &e.noise);
        let data_path = dir.join(&e.data);
        let data = match read(&data_path) {
            Err(err) => {
                c.err(
                    format!("{key}.data"),
                    format!("cannot read data file `{}`: {err}", data_path.display()),
                );
                None
            }
            Ok(text) => field_data(c, &key, &data_path, &text, controls, simulator, &noise),
        };
        // Placeholders: every name must be known for this experiment.
        let mut known: BTreeSet<String> = parameters
            .iter()
            .chain(controls)
            .map(|p| p.name.clone())
            .collect();
        known.extend(settings.keys().cloned());
        known.insert("run_dir".into());
        known.insert("run_id".into());
        known.insert("study_dir".into());
        simulator_placeholders(c, simulator, &known, &e.name);
        if let Some(data) = data {
            experiments.push(Experiment {
                name: e.name.clone(),
                settings,
                data_path,
                data,
                noise,
            });
        }
    }
    experiments
}

/// `{key}.settings`: identifiers that are no parameter, control or run placeholder;
/// the values as placeholder text.
fn settings(
    c: &mut Checker<'_>,
    key: &str,
    e: &ExperimentSpec,
    parameters: &[Parameter],
    controls: &[Parameter],
) -> BTreeMap<String, String> {
    let mut settings = BTreeMap::new();
    for (k, v) in &e.settings {
        if !placeholder::is_identifier(k) {
            c.err(
                format!("{key}.settings.{k}"),
                format!("`{k}` is not a valid setting name (expected [A-Za-z_][A-Za-z0-9_]*)"),
            );
        } else if parameters.iter().chain(controls).any(|p| &p.name == k)
            || RESERVED.contains(&k.as_str())
        {
            c.err(
                format!("{key}.settings.{k}"),
                format!("setting `{k}` clashes with a parameter, control or run placeholder"),
            );
        }
        let text = match v {
            SettingValue::Number(x) => placeholder::format_number(*x),
            SettingValue::Text(s) => s.clone(),
        };
        settings.insert(k.clone(), text);
    }
    settings
}

/// `{key}.noise`: positive known sds, positive inverse-gamma shape and scale.
fn noise(c: &mut Checker<'_>, key: &str, noise: &NoiseSpec) -> Noise {
    match noise {
        NoiseSpec::Sd(sd) => {
            if !(*sd > 0.0 && sd.is_finite()) {
                c.err(format!("{key}.noise.sd"), format!("sd {sd} must be > 0"));
            }
            Noise::Sd(*sd)
        }
        NoiseSpec::SdColumn(col) => Noise::Column(col.clone()),
        NoiseSpec::Unknown { shape, scale } => {
            for (name, v) in [("shape", shape), ("scale", scale)] {
                if !(*v > 0.0 && v.is_finite()) {
                    c.err(
                        format!("{key}.noise.unknown.{name}"),
                        format!("inverse-gamma {name} {v} must be > 0"),
                    );
                }
            }
            Noise::Unknown {
                shape: *shape,
                scale: *scale,
            }
        }
    }
}

/// `{key}.data`: the field data `text` of `data_path`, with the columns the
/// `simulator` and the `noise` name, every condition inside its control's range.
fn field_data(
    c: &mut Checker<'_>,
    key: &str,
    data_path: &Path,
    text: &str,
    controls: &[Parameter],
    simulator: &Simulator,
    noise: &Noise,
) -> Option<FieldData> {
    let control_names: Vec<String> = controls.iter().map(|p| p.name.clone()).collect();
    let sd_col = match noise {
        Noise::Column(c) => Some(c.as_str()),
        Noise::Sd(_) | Noise::Unknown { .. } => None,
    };
    let output = &simulator.output;
    match FieldData::parse(text, &control_names, output.x.as_deref(), &output.y, sd_col) {
        Ok(d) => {
            // A condition outside a control's range would make the surrogate
            // extrapolate.
            for r in &d.rows {
                for (v, p) in r.controls.iter().zip(controls) {
                    if !(p.lo..=p.hi).contains(v) {
                        c.err(
                            format!("{key}.data"),
                            format!(
                                "{}:{}: {} = {v} lies outside the control's range [{}, {}]",
                                data_path.display(),
                                r.line,
                                p.name,
                                p.lo,
                                p.hi
                            ),
                        );
                    }
                }
            }
            Some(d)
        }
        Err((line, msg)) => {
            c.err(
                format!("{key}.data"),
                format!("{}:{line}: {msg}", data_path.display()),
            );
            None
        }
    }
}

/// The placeholders of the simulator's command, environment and templates, for
/// `experiment`, whose `known` names they may use.
fn simulator_placeholders(
    c: &mut Checker<'_>,
    simulator: &Simulator,
    known: &BTreeSet<String>,
    experiment: &str,
) {
    for (j, arg) in simulator.command.iter().enumerate() {
        check_placeholders(
            c,
            &format!("simulator.command[{j}]"),
            arg,
            known,
            experiment,
            None,
        );
    }
    for (name, value) in &simulator.env {
        check_placeholders(
            c,
            &format!("simulator.env.{name}"),
            value,
            known,
            experiment,
            None,
        );
    }
    for (j, f) in simulator.files.iter().enumerate() {
        check_placeholders(
            c,
            &format!("simulator.files[{j}].template"),
            &f.text,
            known,
            experiment,
            Some(&f.path),
        );
    }
}

/// `text` at `key` (of the template file `template`, if any) parses, and names only
/// `known` placeholders.
fn check_placeholders(
    c: &mut Checker<'_>,
    key: &str,
    text: &str,
    known: &BTreeSet<String>,
    experiment: &str,
    template: Option<&Path>,
) {
    let line_in = |offset: usize| text[..offset.min(text.len())].matches('\n').count() + 1;
    let where_ = |offset: usize| match template {
        Some(p) => format!(" (template {}:{})", p.display(), line_in(offset)),
        None => String::new(),
    };
    match placeholder::parse(text) {
        Err(e) => {
            let w = where_(e.offset);
            c.err(key, format!("{}{w}", e.message));
        }
        Ok(pieces) => {
            let mut offset = 0;
            for p in pieces {
                match p {
                    placeholder::Piece::Text(t) => offset += t.len(),
                    placeholder::Piece::Name(n) => {
                        if !known.contains(n) {
                            let w = where_(offset);
                            c.err(
                                key,
                                format!(
                                    "unknown placeholder `{{{{{n}}}}}` for experiment `{experiment}`{w} (known: {})",
                                    known.iter().cloned().collect::<Vec<_>>().join(", ")
                                ),
                            );
                        }
                        offset += n.len() + 4;
                    }
                }
            }
        }
    }
}
