//! From the text of a study file to a checked [`Study`]: deserialise (unknown keys and
//! wrong types are caught here, with serde's path and line), then one check per
//! invariant, each reported with file, key path and line.

use super::data::FieldData;
use super::error::{StudyError, StudyErrors};
use super::locate::LineIndex;
use super::placeholder;
use super::spec::*;
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Component, Path, PathBuf};

pub use super::spec::{
    ControlDesign, DesignMethod, DesignSpace, HyperparameterMode, HyperpriorChoice, KernelChoice,
    MeanChoice,
};

/// Placeholders assay provides itself; parameters and settings may not take these names.
pub const RESERVED: [&str; 3] = ["run_dir", "run_id", "study_dir"];

/// A prior, truncated to the parameter's range.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Prior {
    Uniform,
    Normal { mean: f64, sd: f64 },
    LogNormal { mu: f64, sigma: f64 },
}

/// One calibration parameter.
#[derive(Debug, Clone, PartialEq)]
pub struct Parameter {
    pub name: String,
    pub unit: Option<String>,
    pub lo: f64,
    pub hi: f64,
    pub prior: Prior,
}

/// A template file to render into each run folder.
#[derive(Debug, Clone, PartialEq)]
pub struct FileTemplate {
    /// Path of the template (resolved against the study folder).
    pub path: PathBuf,
    /// Template text.
    pub text: String,
    /// Destination, relative to the run folder.
    pub to: String,
}

pub use super::spec::OutputFormatWire as OutputFormat;

/// What the simulator writes and where.
#[derive(Debug, Clone, PartialEq)]
pub struct OutputSpec {
    pub file: String,
    pub format: OutputFormat,
    pub x: Option<String>,
    pub y: Vec<String>,
}

/// How to run the simulator.
#[derive(Debug, Clone, PartialEq)]
pub struct Simulator {
    /// argv with placeholders; `command[0]` containing `/` is relative to the study folder.
    pub command: Vec<String>,
    pub files: Vec<FileTemplate>,
    pub output: OutputSpec,
    pub timeout_s: f64,
    pub retries: u32,
    /// Extra environment variables (values may hold placeholders).
    pub env: BTreeMap<String, String>,
}

/// Measurement noise of one experiment.
#[derive(Debug, Clone, PartialEq)]
pub enum Noise {
    /// Known sd, the same for every row.
    Sd(f64),
    /// Known sd per row, from this data column.
    Column(String),
    /// Unknown variance σ², the same for every row, with an inverse-gamma prior
    /// p(σ²) ∝ (σ²)^(−shape−1) exp(−scale/σ²); sampled with the parameters.
    Unknown { shape: f64, scale: f64 },
}

/// One experiment with its data.
#[derive(Debug, Clone, PartialEq)]
pub struct Experiment {
    pub name: String,
    /// Settings rendered as placeholder text.
    pub settings: BTreeMap<String, String>,
    pub data_path: PathBuf,
    pub data: FieldData,
    pub noise: Noise,
}

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

/// A checked study.
#[derive(Debug, Clone)]
pub struct Study {
    pub name: String,
    /// The study file as given.
    pub file: PathBuf,
    /// The folder relative paths are resolved against.
    pub dir: PathBuf,
    pub parameters: Vec<Parameter>,
    /// `controls`: test conditions, as variables with a uniform "prior" over their range
    /// (empty when the study has none).
    pub controls: Vec<Parameter>,
    pub simulator: Simulator,
    pub experiments: Vec<Experiment>,
    pub design: DesignParams,
    pub jobs: Option<usize>,
    /// Where runs execute unless the command line says otherwise.
    pub backend: Backend,
    /// `execution.slurm` as written (checked).
    pub slurm: SlurmSpec,
    pub surrogate: SurrogateParams,
    pub calibration: CalibrationParams,
    /// `checks.confirmation_runs`: posterior draws to confirm with the simulator.
    pub confirmation_runs: usize,
    /// `checks.refine` (checked), when present.
    pub refine: Option<RefineParams>,
}

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

    /// Points per round over the whole box: the share of `add`, rounded; the rest go
    /// among the posterior draws.
    pub fn n_global(&self) -> usize {
        ((self.add as f64 * self.global_share).round() as usize).min(self.add)
    }
}

impl Study {
    /// Files this study reads besides itself (data and templates), for provenance.
    pub fn input_files(&self) -> Vec<PathBuf> {
        let mut v = vec![self.file.clone()];
        v.extend(self.simulator.files.iter().map(|f| f.path.clone()));
        v.extend(self.experiments.iter().map(|e| e.data_path.clone()));
        v
    }

    /// Names of the parameters, in order.
    pub fn parameter_names(&self) -> Vec<String> {
        self.parameters.iter().map(|p| p.name.clone()).collect()
    }

    /// What the design spans and the runs and the surrogate take as inputs: the
    /// controls, then the parameters.
    pub fn design_variables(&self) -> Vec<Parameter> {
        self.controls
            .iter()
            .chain(&self.parameters)
            .cloned()
            .collect()
    }

    /// Names of [`Self::design_variables`].
    pub fn design_variable_names(&self) -> Vec<String> {
        self.design_variables()
            .into_iter()
            .map(|p| p.name)
            .collect()
    }
}

/// Largest study file read, bytes. A study is a page of settings (the bundled ones are
/// about 2 KiB); a file of megabytes is a mistake (a data file or a binary named by
/// accident) or hostile, and is refused before the YAML parser spends time on it.
pub const MAX_STUDY_BYTES: u64 = 1 << 20;

/// The text of the study file at `path`, refused when larger than [`MAX_STUDY_BYTES`]
/// (checked while reading, so a file that grows meanwhile is refused too).
fn read_study_text(path: &Path) -> Result<String, String> {
    use std::io::Read;
    let file = std::fs::File::open(path).map_err(|e| format!("cannot read the study file: {e}"))?;
    if file.metadata().map(|m| m.is_dir()).unwrap_or(false) {
        return Err("cannot read the study file: it is a folder".into());
    }
    let mut bytes = Vec::new();
    file.take(MAX_STUDY_BYTES + 1)
        .read_to_end(&mut bytes)
        .map_err(|e| format!("cannot read the study file: {e}"))?;
    if bytes.len() as u64 > MAX_STUDY_BYTES {
        return Err(format!(
            "the study file is larger than {} KiB; a study is a page of settings (is this the right file?)",
            MAX_STUDY_BYTES / 1024
        ));
    }
    String::from_utf8(bytes).map_err(|e| {
        format!(
            "the study file is not UTF-8 text (invalid byte at offset {})",
            e.utf8_error().valid_up_to()
        )
    })
}

/// Read and check the study at `path`.
///
/// # Errors
/// Every problem found, each naming the file, the key path and the line.
pub fn load(path: &Path) -> Result<Study, StudyErrors> {
    let text = read_study_text(path).map_err(|message| {
        StudyErrors(vec![StudyError {
            file: path.to_path_buf(),
            key: String::new(),
            line: None,
            message,
        }])
    })?;
    let dir = path
        .parent()
        .map(|p| {
            if p.as_os_str().is_empty() {
                PathBuf::from(".")
            } else {
                p.to_path_buf()
            }
        })
        .unwrap_or_else(|| PathBuf::from("."));
    parse(&text, path, &dir, &|p: &Path| std::fs::read_to_string(p))
}

struct Checker<'a> {
    file: &'a Path,
    index: LineIndex,
    errors: Vec<StudyError>,
}

impl Checker<'_> {
    fn err(&mut self, key: impl Into<String>, message: impl Into<String>) {
        let key = key.into();
        let line = self.index.line(&key);
        self.errors.push(StudyError {
            file: self.file.to_path_buf(),
            key,
            line,
            message: message.into(),
        });
    }
}

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

/// Remove every " at line N column M" serde_yaml puts in its messages (the line is
/// reported separately).
fn strip_locations(msg: &str) -> String {
    let mut out = msg.to_string();
    while let Some(i) = out.find(" at line ") {
        let rest = &out[i + " at line ".len()..];
        let digits = rest.chars().take_while(|c| c.is_ascii_digit()).count();
        let mut end = i + " at line ".len() + digits;
        if out[end..].starts_with(" column ") {
            end += " column ".len();
            end += out[end..]
                .chars()
                .take_while(|c| c.is_ascii_digit())
                .count();
        }
        out.replace_range(i..end, "");
    }
    out
}

/// Does `text` hold no YAML value at all (nothing, blanks, comments)?
fn is_empty_document(text: &str) -> bool {
    text.lines()
        .map(str::trim)
        .all(|l| l.is_empty() || l.starts_with('#') || l == "---" || l == "...")
}

/// serde's wording in the words of the study file: keys rather than fields, a mapping
/// rather than a Rust struct, and what the YAML parser's limits are there for.
fn plain_serde_message(message: &str) -> String {
    let mut m = message.replace("unknown field", "unknown key");
    m = m.replace("duplicate field", "duplicate key");
    m = m.replace("missing field", "missing key");
    if let Some(i) = m.find("expected struct ") {
        // "expected struct StudySpec" names a Rust type the user never sees.
        let end = m[i + "expected struct ".len()..]
            .find(|c: char| !c.is_ascii_alphanumeric())
            .map_or(m.len(), |j| i + "expected struct ".len() + j);
        m.replace_range(i..end, "expected a mapping of keys");
    }
    if m.contains("repetition limit exceeded") {
        // serde_yaml's guard against alias expansion ("billion laughs").
        m = "the YAML expands too far through its aliases (`*name`); a study needs none this large (repetition limit exceeded)".into();
    } else if m.contains("recursion limit exceeded") {
        m = "the YAML is nested too deeply (recursion limit exceeded)".into();
    }
    m
}

/// The key named by an "unknown field `x`" message, appended to its parent's path.
fn unknown_key_path(parent: &str, message: &str) -> Option<String> {
    let rest = message.strip_prefix("unknown field `")?;
    let name = &rest[..rest.find('`')?];
    Some(if parent.is_empty() {
        name.to_string()
    } else {
        format!("{parent}.{name}")
    })
}

/// Check the study `text` of file `file`; relative paths resolve against `dir`, files
/// are read through `read`.
///
/// # Errors
/// Every problem found, in file order.
pub fn parse(
    text: &str,
    file: &Path,
    dir: &Path,
    read: &dyn Fn(&Path) -> std::io::Result<String>,
) -> Result<Study, StudyErrors> {
    let spec: StudySpec = match serde_yaml::from_str(text) {
        Ok(s) => s,
        Err(e) => {
            let line = e.location().map(|l| l.line());
            let full = e.to_string();
            let msg = strip_locations(&full);
            // serde_yaml writes "path: message" when it knows the path.
            let (key, message) = match msg.split_once(": ") {
                Some((k, m))
                    if !k.contains(' ')
                        && (k.contains('.')
                            || k.contains('[')
                            || k.chars().all(|c| c.is_ascii_alphanumeric() || c == '_')) =>
                {
                    (k.to_string(), m.to_string())
                }
                _ => (String::new(), msg),
            };
            let key = unknown_key_path(&key, &message).unwrap_or(key);
            let empty = is_empty_document(text);
            let (line, message) = if empty {
                (None, "the study file is empty (expected a mapping with at least `name`, `parameters`, `simulator` and `experiments`)".to_string())
            } else {
                (line, plain_serde_message(&message))
            };
            return Err(StudyErrors(vec![StudyError {
                file: file.to_path_buf(),
                key,
                line,
                message,
            }]));
        }
    };
    let mut c = Checker {
        file,
        index: LineIndex::new(text),
        errors: Vec::new(),
    };

    if !is_folder_name(&spec.name) {
        c.err(
            "name",
            format!(
                "`{}` is not a valid study name (expected [A-Za-z0-9._-]+)",
                spec.name.escape_debug()
            ),
        );
    }

    // Parameters.
    if spec.parameters.is_empty() {
        c.err("parameters", "at least one parameter is needed");
    }
    let mut parameters = Vec::new();
    let mut seen = BTreeSet::new();
    for (i, p) in spec.parameters.iter().enumerate() {
        let key = format!("parameters[{i}]");
        check_variable_name(&mut c, &key, "parameter", &p.name, &mut seen, || {
            format!("duplicate parameter name `{}`", p.name)
        });
        let [lo, hi] = p.range;
        check_range(&mut c, &key, lo, hi);
        let prior = match p.prior {
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
                        format!("a lognormal prior needs a range with positive values, got [{lo}, {hi}]"),
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
        };
        parameters.push(Parameter {
            name: p.name.clone(),
            unit: p.unit.clone(),
            lo,
            hi,
            prior,
        });
    }

    // Controls: names like parameters', distinct from them.
    let mut controls = Vec::new();
    for (i, p) in spec.controls.iter().enumerate() {
        let key = format!("controls[{i}]");
        check_variable_name(&mut c, &key, "control", &p.name, &mut seen, || {
            format!(
                "control name `{}` is already a parameter or another control",
                p.name
            )
        });
        let [lo, hi] = p.range;
        check_range(&mut c, &key, lo, hi);
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
    let control_names: Vec<String> = controls.iter().map(|p| p.name.clone()).collect();

    // Simulator.
    let sim = &spec.simulator;
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

    // Experiments.
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
        let mut settings = BTreeMap::new();
        for (k, v) in &e.settings {
            if !placeholder::is_identifier(k) {
                c.err(
                    format!("{key}.settings.{k}"),
                    format!("`{k}` is not a valid setting name (expected [A-Za-z_][A-Za-z0-9_]*)"),
                );
            } else if parameters.iter().chain(&controls).any(|p| &p.name == k)
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
        let noise = match &e.noise {
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
        };
        let data_path = dir.join(&e.data);
        let sd_col = match &noise {
            Noise::Column(c) => Some(c.as_str()),
            Noise::Sd(_) | Noise::Unknown { .. } => None,
        };
        let data = match read(&data_path) {
            Err(err) => {
                c.err(
                    format!("{key}.data"),
                    format!("cannot read data file `{}`: {err}", data_path.display()),
                );
                None
            }
            Ok(text) => {
                match FieldData::parse(
                    &text,
                    &control_names,
                    sim.output.x.as_deref(),
                    &sim.output.y,
                    sd_col,
                ) {
                    Ok(d) => {
                        // A condition outside a control's range would make the
                        // surrogate extrapolate.
                        for r in &d.rows {
                            for (v, p) in r.controls.iter().zip(&controls) {
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
        };

        // Placeholders: every name must be known for this experiment.
        let mut known: BTreeSet<String> = parameters
            .iter()
            .chain(&controls)
            .map(|p| p.name.clone())
            .collect();
        known.extend(settings.keys().cloned());
        known.insert("run_dir".into());
        known.insert("run_id".into());
        known.insert("study_dir".into());
        for (j, arg) in sim.command.iter().enumerate() {
            check_placeholders(
                &mut c,
                &format!("simulator.command[{j}]"),
                arg,
                &known,
                &e.name,
                None,
            );
        }
        for (name, value) in &sim.env {
            check_placeholders(
                &mut c,
                &format!("simulator.env.{name}"),
                value,
                &known,
                &e.name,
                None,
            );
        }
        for (j, f) in files.iter().enumerate() {
            check_placeholders(
                &mut c,
                &format!("simulator.files[{j}].template"),
                &f.text,
                &known,
                &e.name,
                Some(&f.path),
            );
        }
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

    let d = &spec.design;
    let from_data = !controls.is_empty() && d.controls == ControlDesign::FromData;
    // Joint: 10 per design variable; from_data: 10 per parameter, each run at every
    // field condition.
    let points = d.points.unwrap_or(
        10 * if from_data {
            parameters.len().max(1)
        } else {
            (parameters.len() + controls.len()).max(1)
        },
    );
    let conditions = from_data.then(|| {
        let mut all: Vec<Vec<f64>> = Vec::new();
        for e in &experiments {
            for cond in e.data.conditions() {
                if !all.contains(&cond) {
                    all.push(cond);
                }
            }
        }
        all
    });
    if points < 2 {
        c.err(
            "design.points",
            format!("{points} points are too few (at least 2)"),
        );
    }
    if d.method == DesignMethod::Sobol && spec.parameters.len() > crate::design::SOBOL_MAX_DIM {
        c.err(
            "design.method",
            format!(
                "sobol holds direction numbers for at most {} parameters, the study has {}; use `lhs`",
                crate::design::SOBOL_MAX_DIM,
                spec.parameters.len()
            ),
        );
    }
    if spec.execution.jobs == Some(0) {
        c.err("execution.jobs", "jobs must be at least 1");
    }
    check_slurm(&mut c, &spec.execution.slurm);
    let sur = &spec.surrogate;
    if !(sur.variance_kept > 0.0 && sur.variance_kept <= 1.0) {
        c.err(
            "surrogate.variance_kept",
            format!(
                "variance_kept {} must be in (0, 1] (the share of a curve's variance kept by its principal components)",
                sur.variance_kept
            ),
        );
    }
    if !(sur.holdout >= 0.0 && sur.holdout < 0.5) {
        c.err(
            "surrogate.holdout",
            format!(
                "holdout {} must be in [0, 0.5) (the share of design points held out for validation)",
                sur.holdout
            ),
        );
    }
    let cal = &spec.calibration;
    if cal.chains == 0 {
        c.err("calibration.chains", "chains must be at least 1");
    }
    if cal.draws < 10 {
        c.err(
            "calibration.draws",
            format!("{} draws per chain are too few (at least 10)", cal.draws),
        );
    }
    if cal.sampler == SamplerChoice::Nuts {
        check_gradient_available(&mut c, &spec);
    }
    if let Some(w) = cal.walkers {
        let dim = spec.parameters.len();
        if w < 4 || w % 2 != 0 || w <= dim {
            c.err(
                "calibration.walkers",
                format!("{w} walkers: the ensemble needs an even number, at least 4 and more than the {dim} parameters"),
            );
        }
        if cal.sampler != SamplerChoice::Ensemble {
            c.err(
                "calibration.walkers",
                "walkers belong to `sampler: ensemble`",
            );
        }
    }
    if let Some(m) = cal.max_draws {
        if !cal.until_converged {
            c.err(
                "calibration.max_draws",
                "max_draws belongs to `until_converged: true`",
            );
        } else if m < cal.draws {
            c.err(
                "calibration.max_draws",
                format!("max_draws {m} is less than draws {}", cal.draws),
            );
        }
    }
    // Confirmation runs would need a condition for each posterior draw; not built yet.
    if !controls.is_empty() {
        if spec.checks.confirmation_runs > 0 {
            c.err(
                "checks.confirmation_runs",
                "confirmation runs are not available yet for studies with `controls`: set it to 0 (add runs with `assay design --add`)",
            );
        }
        if spec.checks.refine.is_some() {
            c.err(
                "checks.refine",
                "refinement is not available yet for studies with `controls` (add runs with `assay design --add`)",
            );
        }
    }
    let refine = spec.checks.refine.as_ref().map(|r| {
        if r.rounds == 0 {
            c.err("checks.refine.rounds", "rounds must be at least 1");
        }
        if r.add == 0 {
            c.err("checks.refine.add", "add must be at least 1");
        }
        if !(0.0..=1.0).contains(&r.global_share) {
            c.err(
                "checks.refine.global_share",
                format!("global_share {} must lie in [0, 1]", r.global_share),
            );
        }
        if !(r.tolerance > 0.0 && r.tolerance.is_finite()) {
            c.err(
                "checks.refine.tolerance",
                format!("tolerance {} must be a positive number", r.tolerance),
            );
        }
        RefineParams {
            rounds: r.rounds,
            add: r.add,
            global_share: r.global_share,
            tolerance: r.tolerance,
        }
    });
    let prior_from = cal.prior_from.as_ref().and_then(|p| {
        let path = dir.join(p);
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
    });

    let discrepancy = cal
        .discrepancy
        .as_ref()
        .map(|d| check_discrepancy(&mut c, d, &spec));

    if !c.errors.is_empty() {
        // Dedupe identical messages (a placeholder error repeats per experiment).
        let mut seen = BTreeSet::new();
        c.errors.retain(|e| seen.insert(e.to_string()));
        c.errors.sort_by_key(|e| e.line.unwrap_or(usize::MAX));
        return Err(StudyErrors(c.errors));
    }
    Ok(Study {
        name: spec.name.clone(),
        file: file.to_path_buf(),
        dir: dir.to_path_buf(),
        parameters,
        controls,
        simulator: Simulator {
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
        },
        experiments,
        design: DesignParams {
            method: d.method,
            points,
            seed: d.seed,
            space: d.space,
            conditions,
        },
        jobs: spec.execution.jobs,
        backend: spec.execution.backend,
        slurm: spec.execution.slurm.clone(),
        surrogate: SurrogateParams {
            kernel: spec.surrogate.kernel,
            mean: spec.surrogate.mean,
            seed: spec.surrogate.seed,
            variance_kept: spec.surrogate.variance_kept,
            holdout: spec.surrogate.holdout,
            hyperprior: spec.surrogate.hyperprior,
        },
        confirmation_runs: spec.checks.confirmation_runs,
        refine,
        calibration: CalibrationParams {
            chains: cal.chains,
            warmup: cal.warmup,
            draws: cal.draws,
            seed: cal.seed,
            sampler: cal.sampler,
            walkers: cal.walkers,
            until_converged: cal
                .until_converged
                .then(|| cal.max_draws.unwrap_or(4 * cal.draws)),
            prior_from,
            discrepancy,
        },
    })
}

/// `sampler: nuts` follows the gradient of the log posterior; what has none is refused
/// here rather than after the runs.
fn check_gradient_available(c: &mut Checker<'_>, spec: &StudySpec) {
    if !spec.controls.is_empty() {
        c.err(
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
        c.err(
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
        c.err(
            "calibration.sampler",
            "`nuts` does not yet handle an unknown noise variance together with a discrepancy: give the noise sd, or use `adaptive_metropolis`",
        );
    }
}

/// One check per invariant of `calibration.discrepancy`.
fn check_discrepancy(
    c: &mut Checker<'_>,
    d: &DiscrepancySpec,
    spec: &StudySpec,
) -> DiscrepancyParams {
    match d.sd {
        Some(DiscrepancySdSpec::Fixed(v)) if !(v > 0.0 && v.is_finite()) => c.err(
            "calibration.discrepancy.sd.fixed",
            format!("discrepancy sd {v} must be a finite number > 0"),
        ),
        Some(DiscrepancySdSpec::HalfNormal { scale }) if !(scale > 0.0 && scale.is_finite()) => c
            .err(
                "calibration.discrepancy.sd.half_normal.scale",
                format!("half-normal scale {scale} must be a finite number > 0"),
            ),
        _ => {}
    }
    match d.length_scale {
        Some(_) if spec.simulator.output.x.is_none() && spec.controls.is_empty() => c.err(
            "calibration.discrepancy.length_scale",
            "length_scale needs curve outputs (`simulator.output.x`) or `controls`; with scalar outputs and no controls the discrepancy is an independent offset per output quantity",
        ),
        Some(LengthScaleSpec::Fixed(v)) if !(v > 0.0 && v.is_finite()) => c.err(
            "calibration.discrepancy.length_scale.fixed",
            format!("discrepancy length_scale {v} must be a finite number > 0"),
        ),
        Some(LengthScaleSpec::Lognormal { mu, sigma }) if !(sigma > 0.0 && sigma.is_finite() && mu.is_finite()) => {
            c.err(
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
        c.err(
            "calibration.discrepancy.hyperparameters",
            if no_length_scale {
                "`map` needs a hyperparameter to estimate, but `sd` is fixed and scalar outputs have no length-scale: give `sd` a prior (`{half_normal: {scale: s}}`) or leave `hyperparameters` out"
            } else {
                "`map` needs a hyperparameter to estimate, but `sd` and `length_scale` are both fixed: give one of them a prior or leave `hyperparameters` out"
            },
        );
    }
    let all: Vec<String> = spec.experiments.iter().map(|e| e.name.clone()).collect();
    let experiments = match &d.experiments {
        None => all,
        Some(names) => {
            if names.is_empty() {
                c.err(
                    "calibration.discrepancy.experiments",
                    "name at least one experiment (or leave the key out for every experiment)",
                );
            }
            for (i, n) in names.iter().enumerate() {
                if !all.contains(n) {
                    c.err(
                        format!("calibration.discrepancy.experiments[{i}]"),
                        format!("no experiment `{n}` (experiments: {})", all.join(", ")),
                    );
                }
            }
            names.clone()
        }
    };
    DiscrepancyParams {
        kernel: d.kernel,
        sd: d.sd,
        length_scale: d.length_scale,
        experiments,
        hyperparameters: d.hyperparameters,
    }
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

/// `execution.slurm`: every value ends up in an `#SBATCH` line or the job script, so
/// none may hold a line break, and the formatted ones must look like what Slurm takes.
fn check_slurm(c: &mut Checker<'_>, s: &SlurmSpec) {
    let one_line = |c: &mut Checker<'_>, key: &str, v: &str| {
        if v.contains('\n') || v.contains('\r') {
            c.err(key, "must be one line");
            false
        } else if v.trim().is_empty() {
            c.err(key, "must not be empty");
            false
        } else {
            true
        }
    };
    let word = |c: &mut Checker<'_>, key: &str, v: &Option<String>| {
        if let Some(v) = v {
            if one_line(c, key, v)
                && !v
                    .chars()
                    .all(|ch| ch.is_ascii_alphanumeric() || "._-,+".contains(ch))
            {
                c.err(
                    key,
                    format!("`{v}` is not a Slurm name (letters, digits, `._-,+`)"),
                );
            }
        }
    };
    word(c, "execution.slurm.partition", &s.partition);
    word(c, "execution.slurm.account", &s.account);
    word(c, "execution.slurm.qos", &s.qos);
    if let Some(t) = &s.time {
        if one_line(c, "execution.slurm.time", t)
            && !t
                .chars()
                .all(|ch| ch.is_ascii_digit() || ch == ':' || ch == '-')
        {
            c.err(
                "execution.slurm.time",
                format!("`{t}` is not a Slurm time (`MM`, `HH:MM:SS`, `D-HH:MM`)"),
            );
        }
    }
    if let Some(m) = &s.mem {
        let digits = m.trim_end_matches(['K', 'M', 'G', 'T']);
        if one_line(c, "execution.slurm.mem", m)
            && (digits.is_empty()
                || !digits.chars().all(|ch| ch.is_ascii_digit())
                || m.len() - digits.len() > 1)
        {
            c.err(
                "execution.slurm.mem",
                format!("`{m}` is not a Slurm memory size (a number with K, M, G or T)"),
            );
        }
    }
    if s.cpus_per_task == Some(0) {
        c.err("execution.slurm.cpus_per_task", "must be at least 1");
    }
    if s.array_limit == Some(0) {
        c.err("execution.slurm.array_limit", "must be at least 1");
    }
    if let Some(p) = s.poll_s {
        if !(p.is_finite() && p > 0.0) {
            c.err(
                "execution.slurm.poll_s",
                format!("{p} is not a positive number of seconds"),
            );
        }
    }
    for a in &s.extra_args {
        if one_line(c, "execution.slurm.extra_args", a) && !a.starts_with('-') {
            c.err(
                "execution.slurm.extra_args",
                format!("`{a}` is not an sbatch option (options start with `-`)"),
            );
        }
    }
    for l in &s.prelude {
        if l.contains('\n') || l.contains('\r') {
            c.err(
                "execution.slurm.prelude",
                "one shell line per item (a line break inside an item)",
            );
        }
    }
}
