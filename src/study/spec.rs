//! The wire shape of `study.yaml`. Every struct denies unknown keys; defaults are
//! documented on each field and in `docs/study.md`.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// The whole study file.
#[derive(Debug, Clone, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct StudySpec {
    /// Campaign folder name, `[A-Za-z0-9._-]+`.
    pub name: String,
    /// The constants to calibrate.
    pub parameters: Vec<ParameterSpec>,
    /// How to run the simulator.
    pub simulator: SimulatorSpec,
    /// Test set-ups, each with field data; one run per design point per experiment.
    pub experiments: Vec<ExperimentSpec>,
    #[serde(default)]
    pub design: DesignSpec,
    #[serde(default)]
    pub execution: ExecutionSpec,
    #[serde(default)]
    pub surrogate: SurrogateSpec,
    #[serde(default)]
    pub calibration: CalibrationSpec,
}

#[derive(Debug, Clone, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct ParameterSpec {
    pub name: String,
    #[serde(default)]
    pub unit: Option<String>,
    /// `[low, high]`: the design box and the prior's support.
    pub range: [f64; 2],
    /// Default `uniform`.
    #[serde(default)]
    pub prior: PriorSpec,
}

#[derive(Debug, Clone, Default, Deserialize, Serialize, PartialEq)]
#[serde(rename_all = "lowercase", deny_unknown_fields)]
pub enum PriorSpec {
    #[default]
    Uniform,
    Normal {
        mean: f64,
        sd: f64,
    },
    Lognormal {
        mu: f64,
        sigma: f64,
    },
}

#[derive(Debug, Clone, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct SimulatorSpec {
    /// argv; the first element is the program. Never run through a shell.
    pub command: Vec<String>,
    #[serde(default)]
    pub files: Vec<FileSpec>,
    pub output: OutputSpecWire,
    /// Wall-clock limit per run, seconds. Default 3600.
    #[serde(default = "default_timeout")]
    pub timeout_s: f64,
    /// Extra attempts after a failure. Default 0.
    #[serde(default)]
    pub retries: u32,
}

fn default_timeout() -> f64 {
    3600.0
}

#[derive(Debug, Clone, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct FileSpec {
    /// Template path, relative to the study file.
    pub template: String,
    /// Destination, relative to the run folder.
    pub to: String,
}

#[derive(Debug, Clone, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct OutputSpecWire {
    /// Output file, relative to the run folder.
    pub file: String,
    /// Default `csv`.
    #[serde(default)]
    pub format: OutputFormatWire,
    /// Column (csv) or key (yaml/json) indexing a curve; absent for scalar outputs.
    #[serde(default)]
    pub x: Option<String>,
    /// Output quantities.
    pub y: Vec<String>,
}

#[derive(Debug, Clone, Copy, Default, Deserialize, Serialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum OutputFormatWire {
    #[default]
    Csv,
    Yaml,
    Json,
}

#[derive(Debug, Clone, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct ExperimentSpec {
    /// `[A-Za-z0-9._-]+`, unique; also a folder name.
    pub name: String,
    /// Extra `{{placeholders}}` for this experiment.
    #[serde(default)]
    pub settings: BTreeMap<String, SettingValue>,
    /// Field data CSV, relative to the study file.
    pub data: String,
    pub noise: NoiseSpec,
}

#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(untagged)]
pub enum SettingValue {
    Number(f64),
    Text(String),
}

#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(rename_all = "snake_case", deny_unknown_fields)]
pub enum NoiseSpec {
    /// Known measurement sd, in the output's unit.
    Sd(f64),
    /// Per-row sd taken from this data column.
    SdColumn(String),
    /// Unknown variance with an inverse-gamma prior.
    Unknown { shape: f64, scale: f64 },
}

#[derive(Debug, Clone, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct DesignSpec {
    /// Default `lhs`.
    #[serde(default)]
    pub method: DesignMethod,
    /// Default 10 × number of parameters (common practice).
    #[serde(default)]
    pub points: Option<usize>,
    /// Default 1.
    #[serde(default = "default_seed")]
    pub seed: u64,
}

impl Default for DesignSpec {
    fn default() -> Self {
        Self {
            method: DesignMethod::default(),
            points: None,
            seed: default_seed(),
        }
    }
}

fn default_seed() -> u64 {
    1
}

#[derive(Debug, Clone, Copy, Default, Deserialize, Serialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum DesignMethod {
    /// Latin hypercube.
    #[default]
    Lhs,
    /// Independent uniform points.
    Random,
}

#[derive(Debug, Clone, Default, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct ExecutionSpec {
    /// Default `local`.
    #[serde(default)]
    pub backend: Backend,
    /// Concurrent runs; default: the number of CPUs.
    #[serde(default)]
    pub jobs: Option<usize>,
}

#[derive(Debug, Clone, Copy, Default, Deserialize, Serialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum Backend {
    #[default]
    Local,
}

#[derive(Debug, Clone, Default, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct SurrogateSpec {
    /// Default `matern52`.
    #[serde(default)]
    pub kernel: KernelChoice,
    /// Default `constant`.
    #[serde(default)]
    pub mean: MeanChoice,
}

#[derive(Debug, Clone, Copy, Default, Deserialize, Serialize, PartialEq, Eq)]
pub enum KernelChoice {
    #[default]
    #[serde(rename = "matern52")]
    Matern52,
    #[serde(rename = "matern32")]
    Matern32,
    #[serde(rename = "squared-exponential")]
    SquaredExponential,
}

#[derive(Debug, Clone, Copy, Default, Deserialize, Serialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum MeanChoice {
    #[default]
    Constant,
    Linear,
}

#[derive(Debug, Clone, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct CalibrationSpec {
    /// Default 4.
    #[serde(default = "default_chains")]
    pub chains: usize,
    /// Default 2000.
    #[serde(default = "default_warmup")]
    pub warmup: usize,
    /// Default 4000 per chain.
    #[serde(default = "default_draws")]
    pub draws: usize,
    /// Default 1.
    #[serde(default = "default_seed")]
    pub seed: u64,
}

impl Default for CalibrationSpec {
    fn default() -> Self {
        Self {
            chains: default_chains(),
            warmup: default_warmup(),
            draws: default_draws(),
            seed: default_seed(),
        }
    }
}

fn default_chains() -> usize {
    4
}
fn default_warmup() -> usize {
    2000
}
fn default_draws() -> usize {
    4000
}
