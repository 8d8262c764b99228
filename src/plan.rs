//! From parsed arguments and the study to what will be done: the one place where
//! defaults from the command line, the study and the machine are combined.

use crate::args::{BackendArg, RefineArgs, RunArgs};
use assay::runs::RunOptions;
use assay::study::RefineParams;
use assay::study::{Backend, Study};

/// Options of the run stage.
pub fn run_options(args: &RunArgs, study: &Study) -> RunOptions {
    RunOptions {
        jobs: jobs(args, study),
        rerun: args.rerun,
        backend: backend(args, study),
        detach: args.detach,
    }
}

/// Where runs execute: `--backend`, else `execution.backend`.
pub fn backend(args: &RunArgs, study: &Study) -> Backend {
    match args.backend {
        Some(BackendArg::Local) => Backend::Local,
        Some(BackendArg::Slurm) => Backend::Slurm,
        None => study.backend,
    }
}

/// Concurrent runs: `--jobs`, else `execution.jobs`, else the number of CPUs.
pub fn jobs(args: &RunArgs, study: &Study) -> usize {
    args.jobs
        .map(|j| j as usize)
        .or(study.jobs)
        .unwrap_or_else(|| {
            std::thread::available_parallelism()
                .map(|n| n.get())
                .unwrap_or(1)
        })
}

/// Options of runs started by a stage other than `run` (confirmation runs of `check`):
/// the study's backend and jobs, never `--rerun` or `--detach`.
pub fn study_run_options(study: &Study) -> RunOptions {
    RunOptions {
        jobs: study.jobs.unwrap_or_else(|| {
            std::thread::available_parallelism()
                .map(|n| n.get())
                .unwrap_or(1)
        }),
        rerun: false,
        backend: study.backend,
        detach: false,
    }
}

/// Confirmation runs of a refinement: `checks.confirmation_runs`, else 5 (refinement
/// needs a measure of the surrogate's error near the posterior).
pub const REFINE_CONFIRMATION_RUNS: usize = 5;

/// Refinement settings: `--rounds`/`--add`, else `checks.refine`, else its defaults;
/// and the confirmation runs per check.
pub fn refine_params(args: Option<&RefineArgs>, study: &Study) -> (RefineParams, usize) {
    let mut p = study.refine.unwrap_or(RefineParams::DEFAULT);
    if let Some(a) = args {
        if let Some(r) = a.rounds {
            p.rounds = r as usize;
        }
        if let Some(n) = a.add {
            p.add = n as usize;
        }
    }
    let confirmations = if study.confirmation_runs > 0 {
        study.confirmation_runs
    } else {
        REFINE_CONFIRMATION_RUNS
    };
    (p, confirmations)
}
