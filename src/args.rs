//! Command-line arguments (clap). What they mean is decided in `plan`.

use clap::{Args, Parser, Subcommand, ValueEnum};
use std::path::PathBuf;

const EXAMPLES: &str = "\
Examples:
  assay validate models/cantilever/study.yaml     check a study and print a summary
  assay all models/cantilever/study.yaml          design, run, fit and calibrate, reusing up-to-date stages
  assay run --jobs 8 study.yaml                   run pending and failed runs, 8 at a time
  assay run --backend slurm --detach study.yaml   submit the runs to Slurm as job arrays and return
  assay refine --rounds 2 --add 8 study.yaml      add runs where the posterior lives, refit, recalibrate
  assay verify models/cantilever/study.yaml       re-hash the records and their files, list stale stages
  assay report models/cantilever/study.yaml       write runs/cantilever/report.html
  assay schema > study.schema.json                JSON Schema of the study file, for editors
  assay --runs /scratch/me/campaigns status study.yaml

Exit codes: 0 success; 2 bad input (study, data, arguments); 3 finished but some runs failed; 1 other failures.
Campaign records go to <runs>/<study name>/ (default ./runs).";

/// Calibrate the parameters of an expensive simulator: spread runs over the parameter
/// box, run them, fit a Gaussian-process surrogate and sample the posterior by MCMC,
/// leaving YAML records a reviewer can verify.
#[derive(Debug, Parser)]
#[command(name = "assay", version, about, long_about = None, after_help = EXAMPLES)]
pub struct Cli {
    /// Folder that holds campaign folders (one per study name).
    #[arg(long, global = true, value_name = "DIR", default_value = "runs")]
    pub runs: PathBuf,

    /// No progress bar: plain progress lines on stderr instead (as when stderr is not a terminal).
    #[arg(long, short, global = true)]
    pub quiet: bool,

    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Parse and check the study and print a summary (exit 2 on any error).
    #[command(after_help = "Example:\n  assay validate models/cantilever/study.yaml")]
    Validate(StudyArg),
    /// Write the design (design.yaml): where the simulator will run.
    #[command(
        after_help = "Examples:\n  assay design models/cantilever/study.yaml\n  assay design --add 10 models/cantilever/study.yaml\n\nAn existing design made with the same settings is kept. --add appends points to it\n(a new round in design.yaml); `assay run` then runs only the new points."
    )]
    Design(DesignArgs),
    /// Run every pending or failed run of the design.
    #[command(
        after_help = "Examples:\n  assay run study.yaml\n  assay run --jobs 4 study.yaml\n  assay run --backend slurm study.yaml            submit as job arrays, wait, collect\n  assay run --backend slurm --detach study.yaml   submit and return; `assay status` follows them;\n                                                  a later `assay run` collects them\n\nFinished runs are never repeated. Local: Ctrl-C stops cleanly and leaves interrupted runs\npending. Slurm: Ctrl-C stops waiting and leaves the submitted jobs running (it says how to\ncancel them); the job scripts are in <campaign>/slurm/."
    )]
    Run(RunArgs),
    /// Counts of runs by state, per experiment (and what Slurm says of submitted runs).
    #[command(after_help = "Example:\n  assay status models/cantilever/study.yaml")]
    Status(StudyArg),
    /// Fit and validate the surrogate (surrogate.yaml).
    #[command(after_help = "Example:\n  assay fit models/cantilever/study.yaml")]
    Fit(StudyArg),
    /// Sample the posterior against the field data (posterior.yaml, posterior-samples.csv).
    #[command(
        after_help = "Example:\n  assay calibrate models/cantilever/study.yaml\n\nThe likelihood counts the measurement noise, the surrogate's predictive covariance and,\nwith calibration.discrepancy, a Gaussian-process model discrepancy over the curve's x\nwhose sd and length-scale are sampled, fixed at given values, or (hyperparameters: map)\nfixed at the joint posterior mode found before sampling; all are reported (see\ndocs/methods.md).\nCtrl-C stops sampling and keeps the draws made so far (recorded as interrupted)."
    )]
    Calibrate(StudyArg),
    /// Posterior predictive checks against the field data (checks.yaml): does the calibrated model reproduce them?
    #[command(
        after_help = "Example:\n  assay check models/cantilever/study.yaml\n\nFor every field measurement: the predictive mean and 95 % interval from the posterior draws\n(surrogate mean and variance plus measurement noise and any model discrepancy), the standardised residual, the share\nof measurements inside their intervals against its binomial 99 % band, and the posterior\npredictive p-value of a chi-square discrepancy. Says plainly whether the calibration passes."
    )]
    Check(StudyArg),
    /// Surrogate mean and sd at given points (CSV to stdout or --out).
    #[command(
        after_help = "Example:\n  assay predict models/cantilever/study.yaml --at points.csv --out predictions.csv\n\nPOINTS.csv has a header naming every control (if any) and parameter; the output has them, then\nEXP.Y.mean and EXP.Y.sd per experiment and output (curves: EXP.Y@X.mean, EXP.Y@X.sd)."
    )]
    Predict(PredictArgs),
    /// Self-contained HTML report with plots (report.html in the campaign folder).
    #[command(
        after_help = "Examples:\n  assay report models/cantilever/study.yaml\n  assay report models/cantilever/study.yaml --out /tmp/cantilever.html\n\nOne HTML file with inline SVG plots: no network, no JavaScript; prints on paper and reads\non a phone. Needs design.yaml; shows whatever later records exist (runs, surrogate, posterior)."
    )]
    Report(ReportArgs),
    /// Re-hash the records and the files they name; list stale stages (exit 0 only if all is consistent).
    #[command(
        after_help = "Examples:\n  assay verify models/cantilever/study.yaml\n  assay --runs /scratch/me/campaigns verify study.yaml\n\nChecks every run's output against its run.yaml, the samples against posterior.yaml,\nand that each record still names the current study parts and earlier records (design →\nruns → surrogate → posterior → checks). Prints one line per stage and one per problem.\nExit codes: 0 consistent; 1 a file is missing, altered or unreadable, or a stage is stale;\n2 bad study file."
    )]
    Verify(StudyArg),
    /// Every stage in order, reusing stages whose inputs are unchanged.
    #[command(
        after_help = "Example:\n  assay all models/cantilever/study.yaml\n\nA stage is redone when `assay verify` would call it stale or its record is missing or\nbroken: a change to the parameters or design settings makes a new design (finished runs\nof replaced points are kept under superseded/), new points are run, and the surrogate,\nposterior and report follow. A changed simulator definition is refused as in `assay run`."
    )]
    All(RunArgs),
    /// Add runs where the posterior lives until the surrogate agrees with the simulator there.
    #[command(
        after_help = "Examples:\n  assay refine models/cantilever/study.yaml\n  assay refine --rounds 3 --add 8 study.yaml\n\nFirst brings every stage up to date (as `assay all`), then confirms the surrogate with\nthe simulator at posterior draws (checks.confirmation_runs, default 5). Each round adds\nN points: most among the posterior draws, spread out from the design's points, the\nrest (checks.refine.global_share) over the whole box; runs them, fits, calibrates and\nconfirms again. Stops early when every experiment's confirmation RMSE is at most\nchecks.refine.tolerance noise sds. The last confirmation runs are folded in by a final\nfit and calibration. Every round is recorded in refinement.yaml. Ctrl-C stops cleanly:\nthe finished rounds' points stay in design.yaml; running the command again starts a\nnew refinement from there (and a new refinement.yaml)."
    )]
    Refine(RefineArgs),
    /// Print the JSON Schema (draft 2020-12) of the study file, for editors and linters.
    #[command(
        after_help = "Examples:\n  assay schema > study.schema.json\n\nThe schema is generated from the types the study reader uses, so it accepts exactly the\nkeys and forms `assay validate` accepts (value checks such as low < high are left to\n`assay validate`). With the YAML language server, put this first line in a study file:\n  # yaml-language-server: $schema=study.schema.json"
    )]
    Schema,
}

#[derive(Debug, Args)]
pub struct RefineArgs {
    #[command(flatten)]
    pub run: RunArgs,
    /// At most this many rounds (default: checks.refine.rounds, else 2).
    #[arg(long, value_name = "R", value_parser = clap::value_parser!(u32).range(1..))]
    pub rounds: Option<u32>,
    /// Points added per round (default: checks.refine.add, else 10).
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u32).range(1..))]
    pub add: Option<u32>,
}

#[derive(Debug, Args)]
pub struct ReportArgs {
    #[command(flatten)]
    pub study: StudyArg,
    /// Write the report here instead of <campaign>/report.html.
    #[arg(long, value_name = "FILE.html")]
    pub out: Option<PathBuf>,
}

#[derive(Debug, Args)]
pub struct StudyArg {
    /// The study file.
    #[arg(value_name = "STUDY.yaml")]
    pub study: PathBuf,
}

#[derive(Debug, Args)]
pub struct PredictArgs {
    #[command(flatten)]
    pub study: StudyArg,
    /// CSV of points: a header naming every control and parameter, one point per row.
    #[arg(long, value_name = "POINTS.csv")]
    pub at: PathBuf,
    /// Write the predictions here instead of stdout.
    #[arg(long, value_name = "FILE.csv")]
    pub out: Option<PathBuf>,
}

#[derive(Debug, Args)]
pub struct DesignArgs {
    #[command(flatten)]
    pub study: StudyArg,
    /// Replace an existing design even if it was made with other settings.
    #[arg(long, conflicts_with = "add")]
    pub force: bool,
    /// Add N points that fill the gaps of the existing design (ids, values and runs of
    /// the existing points stay as they are).
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u32).range(1..))]
    pub add: Option<u32>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum BackendArg {
    /// Child processes on this machine.
    Local,
    /// Slurm job arrays (`sbatch --array`), see docs/cluster.md.
    Slurm,
}

#[derive(Debug, Args)]
pub struct RunArgs {
    #[command(flatten)]
    pub study: StudyArg,
    /// Concurrent runs (default: execution.jobs of the study, else the number of CPUs).
    #[arg(long, short, value_name = "N", value_parser = clap::value_parser!(u32).range(1..))]
    pub jobs: Option<u32>,
    /// Where runs execute (default: execution.backend of the study).
    #[arg(long, value_enum)]
    pub backend: Option<BackendArg>,
    /// Run everything again, finished runs included (after changing the simulator on purpose).
    #[arg(long)]
    pub rerun: bool,
    /// Slurm: submit the pending runs and return at once; a later `assay run` collects them.
    #[arg(long)]
    pub detach: bool,
}
