//! The wire shape of `study.yaml`. Every struct denies unknown keys; defaults are
//! documented on each field and in `docs/study.md`.
//!
//! The same types give the study file's JSON Schema (`schema.rs`, `assay schema`):
//! derived for the plain structs, written by hand for the tagged choices
//! ([`PriorSpec`], [`NoiseSpec`], [`DiscrepancySdSpec`], [`LengthScaleSpec`]), whose
//! readers (`tagged.rs`) take a YAML value apart themselves.

use schemars::JsonSchema;
use serde::Deserialize;
use std::collections::BTreeMap;

/// An assay study file: the constants to calibrate, the simulator, the experiments with
/// their field data, and the settings of each stage (see docs/study.md).
#[derive(Debug, Clone, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct StudySpec {
    /// Campaign folder name, `[A-Za-z0-9._-]+`.
    pub name: String,
    /// The constants to calibrate.
    pub parameters: Vec<ParameterSpec>,
    /// Test conditions the experimenter sets (temperature, rate, …): passed to the
    /// simulator through `{{placeholders}}` like parameters, and a column of every
    /// experiment's field data. The surrogate spans controls and parameters together.
    #[serde(default)]
    pub controls: Vec<ControlSpec>,
    /// How to run the simulator.
    pub simulator: SimulatorSpec,
    /// Test set-ups, each with field data; one run per design point per experiment.
    pub experiments: Vec<ExperimentSpec>,
    /// Where the simulator runs: the design of the parameter box.
    #[serde(default)]
    pub design: DesignSpec,
    /// How runs are executed.
    #[serde(default)]
    pub execution: ExecutionSpec,
    /// The Gaussian-process surrogate.
    #[serde(default)]
    pub surrogate: SurrogateSpec,
    /// The MCMC sampler.
    #[serde(default)]
    pub calibration: CalibrationSpec,
    /// Checks of the calibration (`assay check`).
    #[serde(default)]
    pub checks: ChecksSpec,
}

/// `checks`: what `assay check` does besides the posterior predictive checks.
#[derive(Debug, Clone, Default, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ChecksSpec {
    /// Runs of the real simulator at this many posterior draws, plus one at the
    /// posterior mean, compared with the surrogate there. Default 0 (none).
    #[serde(default)]
    pub confirmation_runs: usize,
    /// Sequential refinement (`assay refine`, and `assay all` when present): add runs
    /// where the posterior lives until the surrogate agrees with the simulator there.
    #[serde(default)]
    pub refine: Option<RefineSpec>,
}

/// `checks.refine`: rounds of new runs among the posterior draws.
#[derive(Debug, Clone, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct RefineSpec {
    /// At most this many rounds (each: add, run, fit, calibrate, confirm). Default 2.
    #[serde(default = "default_refine_rounds")]
    pub rounds: usize,
    /// Points added per round. Default 10.
    #[serde(default = "default_refine_add")]
    pub add: usize,
    /// Share of each round's points placed over the whole box (gap filling) rather
    /// than among the posterior draws, so the surrogate stays sane elsewhere. Default 0.2.
    #[serde(default = "default_refine_global")]
    pub global_share: f64,
    /// Stop when every experiment's confirmation RMSE is at most this many noise sds.
    /// Default 0.5.
    #[serde(default = "default_refine_tolerance")]
    pub tolerance: f64,
}

fn default_refine_rounds() -> usize {
    2
}
fn default_refine_add() -> usize {
    10
}
fn default_refine_global() -> f64 {
    0.2
}
fn default_refine_tolerance() -> f64 {
    0.5
}

#[derive(Debug, Clone, Deserialize, JsonSchema)]
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

/// A control variable: a test condition with a known value per field measurement.
#[derive(Debug, Clone, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ControlSpec {
    pub name: String,
    #[serde(default)]
    pub unit: Option<String>,
    /// `[low, high]`: the range the simulator is run over; every field condition must
    /// lie in it.
    pub range: [f64; 2],
}

/// How the design places the controls (`design.controls`).
#[derive(Debug, Clone, Copy, Default, Deserialize, serde::Serialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum ControlDesign {
    /// One space-filling design over controls and parameters together.
    #[default]
    Joint,
    /// A design over the parameters, each point run at every distinct field condition.
    FromData,
}

/// `uniform` | `{normal: {mean, sd}}` | `{lognormal: {mu, sigma}}`.
#[derive(Debug, Clone, Default, PartialEq)]
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

#[derive(Debug, Clone, Deserialize, JsonSchema)]
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
    /// Environment variables for the simulator (values may hold placeholders).
    #[serde(default)]
    pub env: BTreeMap<String, String>,
}

fn default_timeout() -> f64 {
    3600.0
}

#[derive(Debug, Clone, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct FileSpec {
    /// Template path, relative to the study file.
    pub template: String,
    /// Destination, relative to the run folder.
    pub to: String,
}

#[derive(Debug, Clone, Deserialize, JsonSchema)]
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

#[derive(Debug, Clone, Copy, Default, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum OutputFormatWire {
    #[default]
    Csv,
    Yaml,
    Json,
}

#[derive(Debug, Clone, Deserialize, JsonSchema)]
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

#[derive(Debug, Clone, Deserialize, PartialEq, JsonSchema)]
#[serde(untagged)]
pub enum SettingValue {
    Number(f64),
    Text(String),
}

/// `{sd: v}` | `{sd_column: name}` | `{unknown: {shape, scale}}`.
#[derive(Debug, Clone, PartialEq)]
pub enum NoiseSpec {
    /// Known measurement sd, in the output's unit.
    Sd(f64),
    /// Per-row sd taken from this data column.
    SdColumn(String),
    /// Unknown variance with an inverse-gamma prior.
    Unknown { shape: f64, scale: f64 },
}

#[derive(Debug, Clone, Deserialize, JsonSchema)]
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
    /// Default `range`.
    #[serde(default)]
    pub space: DesignSpace,
    /// With `controls`: `joint` (default) or `from_data`.
    #[serde(default)]
    pub controls: ControlDesign,
}

impl Default for DesignSpec {
    fn default() -> Self {
        Self {
            method: DesignMethod::default(),
            points: None,
            seed: default_seed(),
            space: DesignSpace::default(),
            controls: ControlDesign::default(),
        }
    }
}

fn default_seed() -> u64 {
    1
}

#[derive(Debug, Clone, Copy, Default, Deserialize, serde::Serialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum DesignMethod {
    /// Maximin Latin hypercube.
    #[default]
    Lhs,
    /// Scrambled Sobol' points.
    Sobol,
    /// Independent uniform points.
    Random,
}

/// Where the design spreads its points evenly.
#[derive(Debug, Clone, Copy, Default, Deserialize, serde::Serialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum DesignSpace {
    /// Evenly over the parameter box.
    #[default]
    Range,
    /// Evenly in probability under each parameter's prior (truncated to its range):
    /// denser where the prior puts mass.
    Prior,
}

#[derive(Debug, Clone, Default, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ExecutionSpec {
    /// Default `local`.
    #[serde(default)]
    pub backend: Backend,
    /// Concurrent runs; default: the number of CPUs.
    #[serde(default)]
    pub jobs: Option<usize>,
    /// Settings of the Slurm backend (used when the backend is `slurm`).
    #[serde(default)]
    pub slurm: SlurmSpec,
}

#[derive(Debug, Clone, Copy, Default, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum Backend {
    /// Child processes on this machine.
    #[default]
    Local,
    /// Slurm job arrays (`sbatch --array`), collected by polling.
    Slurm,
}

/// `execution.slurm`: how runs are handed to Slurm. Every key is optional.
#[derive(Debug, Clone, Default, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct SlurmSpec {
    /// `--partition`; default: the cluster's default partition.
    #[serde(default)]
    pub partition: Option<String>,
    /// `--time` per array task in Slurm's format (`MM`, `HH:MM:SS`, `D-HH`...);
    /// default: `simulator.timeout_s` plus two minutes, rounded up to minutes.
    #[serde(default)]
    pub time: Option<String>,
    /// `--cpus-per-task`; default: Slurm's (1).
    #[serde(default)]
    pub cpus_per_task: Option<u32>,
    /// `--mem` per task (`4G`, `500M`); default: Slurm's.
    #[serde(default)]
    pub mem: Option<String>,
    /// `--account`.
    #[serde(default)]
    pub account: Option<String>,
    /// `--qos`.
    #[serde(default)]
    pub qos: Option<String>,
    /// Most array tasks of one submission running at once (the `%` throttle).
    #[serde(default)]
    pub array_limit: Option<u32>,
    /// More `sbatch` options, one per item (e.g. `--constraint=avx2`).
    #[serde(default)]
    pub extra_args: Vec<String>,
    /// Shell lines run on the node before the simulator (module loads, environment):
    /// a list of lines or one block of text.
    #[serde(default, deserialize_with = "super::tagged::lines")]
    #[schemars(schema_with = "super::schema::lines_schema")]
    pub prelude: Vec<String>,
    /// Seconds between two looks at the queue. Default 5.
    #[serde(default)]
    pub poll_s: Option<f64>,
}

#[derive(Debug, Clone, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct SurrogateSpec {
    /// Default `matern52`.
    #[serde(default)]
    pub kernel: KernelChoice,
    /// Default `constant`.
    #[serde(default)]
    pub mean: MeanChoice,
    /// Seed of the hyperparameter search starts and of the holdout choice. Default 1.
    #[serde(default = "default_seed")]
    pub seed: u64,
    /// Share of the standardised variance of a curve output kept by its principal
    /// components, in (0, 1]. Default 0.999.
    #[serde(default = "default_variance_kept")]
    pub variance_kept: f64,
    /// Share of the design points held out to validate the surrogate, in [0, 0.5).
    /// Default 0 (no holdout).
    #[serde(default)]
    pub holdout: f64,
    /// Prior on the length-scales: `none` (maximum likelihood, the default) or
    /// `lognormal` (maximum a posteriori with weak log-normal priors).
    #[serde(default)]
    pub hyperprior: HyperpriorChoice,
}

fn default_variance_kept() -> f64 {
    0.999
}

impl Default for SurrogateSpec {
    fn default() -> Self {
        Self {
            kernel: KernelChoice::default(),
            mean: MeanChoice::default(),
            seed: default_seed(),
            variance_kept: default_variance_kept(),
            holdout: 0.0,
            hyperprior: HyperpriorChoice::default(),
        }
    }
}

/// `surrogate.hyperprior`.
#[derive(Debug, Clone, Copy, Default, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum HyperpriorChoice {
    /// Maximum likelihood.
    #[default]
    None,
    /// Weak log-normal priors on the length-scales (maximum a posteriori).
    Lognormal,
}

#[derive(Debug, Clone, Copy, Default, Deserialize, PartialEq, Eq, JsonSchema)]
pub enum KernelChoice {
    #[default]
    #[serde(rename = "matern52")]
    Matern52,
    #[serde(rename = "matern32")]
    Matern32,
    #[serde(rename = "squared-exponential")]
    SquaredExponential,
}

#[derive(Debug, Clone, Copy, Default, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum MeanChoice {
    #[default]
    Constant,
    Linear,
}

#[derive(Debug, Clone, Deserialize, JsonSchema)]
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
    /// Default `adaptive_metropolis`.
    #[serde(default)]
    pub sampler: SamplerChoice,
    /// Walkers of the ensemble sampler; default max(2·dim + 2, 8), made even.
    #[serde(default)]
    pub walkers: Option<usize>,
    /// Keep sampling, `draws` more per chain at a time, until R-hat ≤ 1.01 and bulk and
    /// tail ESS ≥ 400 for every parameter, or `max_draws` per chain. Default false.
    #[serde(default)]
    pub until_converged: bool,
    /// Most kept draws per chain with `until_converged`. Default 4 × `draws`.
    #[serde(default)]
    pub max_draws: Option<usize>,
    /// `posterior.yaml` of an earlier calibration whose draws become this one's prior
    /// (a multivariate normal in the unconstrained space). Relative to the study file.
    #[serde(default)]
    pub prior_from: Option<String>,
    /// A model-discrepancy term δ(x) added to the simulator (Kennedy & O'Hagan 2001):
    /// a Gaussian process over the curve's x (an independent offset per output quantity
    /// for scalar outputs). Default: none.
    #[serde(default)]
    pub discrepancy: Option<DiscrepancySpec>,
}

/// `calibration.discrepancy`: the model-discrepancy term and its hyperparameters.
#[derive(Debug, Clone, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct DiscrepancySpec {
    /// Correlation of δ along the curve's x. Default `squared-exponential`.
    #[serde(default = "default_discrepancy_kernel")]
    pub kernel: KernelChoice,
    /// Standard deviation of δ, in the output's unit: `{fixed: v}` or
    /// `{half_normal: {scale: s}}` (sampled). Default: half-normal with scale 0.1 × the
    /// largest mean measured value of the quantity.
    #[serde(default)]
    pub sd: Option<DiscrepancySdSpec>,
    /// Length-scale of δ along x, in x's unit (curves only): `{fixed: v}` or
    /// `{lognormal: {mu, sigma}}` (sampled; mu and sigma of ln ℓ). Default: lognormal with
    /// median half the span of the field x values and sigma 1.
    #[serde(default)]
    pub length_scale: Option<LengthScaleSpec>,
    /// Experiments that get a discrepancy. Default: every experiment.
    #[serde(default)]
    pub experiments: Option<Vec<String>>,
    /// What happens to the hyperparameters that have a prior (`sd`, `length_scale`):
    /// `sampled` with the parameters (default), or `map`: estimated first at the mode of
    /// the joint posterior density, then held fixed while the parameters are sampled.
    #[serde(default)]
    pub hyperparameters: HyperparameterMode,
}

/// `calibration.discrepancy.hyperparameters`: how the discrepancy hyperparameters that
/// have a prior enter the calibration.
#[derive(Debug, Clone, Copy, Default, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum HyperparameterMode {
    /// Sampled with the parameters under their priors: their uncertainty is carried
    /// into the posterior of the parameters.
    #[default]
    Sampled,
    /// Estimated first at the maximum of the joint posterior density (MAP) of the
    /// parameters, noise variances and hyperparameters, then fixed there while the
    /// parameters are sampled (a modular, plug-in estimate: their uncertainty is not
    /// carried into the posterior).
    Map,
}

impl HyperparameterMode {
    /// The study-file spelling.
    pub fn name(self) -> &'static str {
        match self {
            HyperparameterMode::Sampled => "sampled",
            HyperparameterMode::Map => "map",
        }
    }
}

fn default_discrepancy_kernel() -> KernelChoice {
    KernelChoice::SquaredExponential
}

/// `calibration.discrepancy.sd`: `{fixed: v}` | `{half_normal: {scale}}`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum DiscrepancySdSpec {
    /// Fixed at this value (output units, > 0).
    Fixed(f64),
    /// Sampled, with a half-normal prior of this scale (output units, > 0).
    HalfNormal { scale: f64 },
}

/// `calibration.discrepancy.length_scale`: `{fixed: v}` | `{lognormal: {mu, sigma}}`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum LengthScaleSpec {
    /// Fixed at this value (x units, > 0).
    Fixed(f64),
    /// Sampled, ln ℓ ~ normal(mu, sigma).
    Lognormal { mu: f64, sigma: f64 },
}

impl Default for CalibrationSpec {
    fn default() -> Self {
        Self {
            chains: default_chains(),
            warmup: default_warmup(),
            draws: default_draws(),
            seed: default_seed(),
            sampler: SamplerChoice::default(),
            walkers: None,
            until_converged: false,
            max_draws: None,
            prior_from: None,
            discrepancy: None,
        }
    }
}

/// The MCMC algorithm.
#[derive(Debug, Clone, Copy, Default, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum SamplerChoice {
    /// Random-walk Metropolis with a proposal covariance learnt during warm-up
    /// (Haario, Saksman & Tamminen 2001), one chain per `chains`.
    #[default]
    AdaptiveMetropolis,
    /// The affine-invariant ensemble sampler with the stretch move (Goodman & Weare
    /// 2010); every walker is reported as a chain.
    Ensemble,
    /// The No-U-Turn sampler (Hoffman & Gelman 2014): Hamiltonian Monte Carlo with the
    /// gradient of the surrogate-based log posterior, one chain per `chains`.
    Nuts,
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
