//! The checked study: the working form every later stage reads.
//!
//! Input: built by [`super::parse`] only, from a study file that passed every check.
//! Output: [`Study`] with its [`Parameter`]s, [`Simulator`] and [`Experiment`]s; each
//! stage's own settings ([`DesignParams`], [`SurrogateParams`], [`CalibrationParams`],
//! [`RefineParams`]) are defined beside that stage, in its `params.rs`.
//! Must not: read files or check anything (the checks are in `validate.rs` and
//! `sections.rs`).

use super::data::FieldData;
use super::spec::{Backend, SlurmSpec};
use crate::calibrate::params::CalibrationParams;
use crate::check::params::RefineParams;
use crate::design::params::DesignParams;
use crate::surrogate::params::SurrogateParams;
use std::collections::BTreeMap;
use std::path::PathBuf;

pub use super::spec::OutputFormatWire as OutputFormat;

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
