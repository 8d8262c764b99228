//! The workflow's one error type: what went wrong between the stages and whether the
//! cause is the user's input (exit code 2) or a failure of the work (exit code 1).

use crate::calibrate::SetupError;
use crate::design::DesignError;
use crate::runs::{RunsError, SUPERSEDED_DIR};
use crate::study::StudyErrors;
use std::path::PathBuf;

/// An error of a workflow step. The stages' typed errors are wrapped, with the context
/// the step knows (which file, which command to run next).
///
/// The wrapped error is part of the message rather than its `source`, so the terminal
/// shows it once.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum CampaignError {
    /// The study file (every problem, each with file, key and line).
    #[error(transparent)]
    Study(#[from] StudyErrors),
    /// `design.yaml` exists but was made with other settings.
    #[error("{} exists but does not match the study: {why}. Use `assay design --force` to replace it (finished runs of replaced points are moved to {SUPERSEDED_DIR}/)", path.display())]
    DesignStale { path: PathBuf, why: String },
    /// Points are to be added and there is no design yet.
    #[error("cannot add points: there is no design at {} yet; run `assay design {}` first", path.display(), study.display())]
    NoDesign { path: PathBuf, study: PathBuf },
    /// Points are to be added to a design that does not match the study.
    #[error("cannot {action}: {} does not match the study: {why}{remedy}", path.display())]
    DesignMismatch {
        action: &'static str,
        path: PathBuf,
        why: String,
        remedy: &'static str,
    },
    /// The design stage refused (`context` says what was being done).
    #[error("{context}: {err}")]
    Design {
        context: &'static str,
        err: DesignError,
    },
    /// The run stage refused (a simulator definition changed under done runs, runs
    /// still in Slurm).
    #[error("{0}")]
    Runs(RunsError),
    /// The calibration model could not be assembled from the study and the records.
    #[error("{0}")]
    Setup(SetupError),
    /// A line of a user's file (prediction points).
    #[error("{}:{line}: {message}", file.display())]
    FileLine {
        file: PathBuf,
        line: usize,
        message: String,
    },
    /// A user's file that cannot be read.
    #[error("cannot read {}: {err}", file.display())]
    Unreadable { file: PathBuf, err: std::io::Error },
    /// `posterior-samples.csv` is malformed (`message` starts with the line).
    #[error("{}:{message}", file.display())]
    Samples { file: PathBuf, message: String },
    /// `posterior-samples.csv` lacks a parameter of the study.
    #[error("{} has no column `{column}`: run `assay calibrate` again", file.display())]
    SamplesColumn { file: PathBuf, column: String },
    /// The surrogate's outputs of an experiment no longer match its field data.
    #[error("the surrogate's outputs of `{0}` do not match its field data: run `assay all` to bring the records up to date")]
    OutputsChanged(String),
    /// Confirmation runs asked of a study with controls.
    #[error("confirmation runs and refinement are not available yet for studies with `controls`: set checks.confirmation_runs to 0 and use `assay design --add`")]
    ConfirmationWithControls,
    /// Command-line options that do not go together.
    #[error("{0}")]
    Arguments(&'static str),
}

impl CampaignError {
    /// Whether the cause is bad input (study, data, records out of step with them,
    /// arguments): exit code 2.
    pub fn is_bad_input(&self) -> bool {
        match self {
            Self::Setup(e) => e.is_bad_input(),
            _ => true,
        }
    }
}

impl From<SetupError> for CampaignError {
    fn from(e: SetupError) -> Self {
        Self::Setup(e)
    }
}

/// Whether an error chain's cause is bad input (exit code 2).
pub fn is_bad_input(err: &anyhow::Error) -> bool {
    err.chain().any(|e| {
        e.is::<StudyErrors>()
            || e.downcast_ref::<CampaignError>()
                .is_some_and(CampaignError::is_bad_input)
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_failed_mode_search_is_not_bad_input_but_a_changed_output_is() {
        let e = CampaignError::Setup(SetupError::NoGradient);
        assert!(!e.is_bad_input());
        let e = CampaignError::Setup(SetupError::NoColumn("x".into()));
        assert!(e.is_bad_input());
        let e: anyhow::Error = CampaignError::Arguments("--detach needs Slurm").into();
        assert!(is_bad_input(&e.context("assay failed")));
        assert!(!is_bad_input(&anyhow::anyhow!("disk full")));
    }
}
