//! The campaign folder: where every record of a study lives, the lock, and typed
//! reading and writing of the stage records.
//!
//! Layout of `<runs>/<study name>/`: `design.yaml`, `runs/<point>/<experiment>/run.yaml`,
//! `surrogate.yaml`, `posterior.yaml`, `posterior-samples.csv`, `checks.yaml`,
//! `refinement.yaml`, `report.html` (docs/records.md describes each).
//! Input: a checked study and the `--runs` folder. Output: typed records.
//! Must not: call a stage's computation (the steps of [`crate::campaign`] do), print.
//! Main types: [`Campaign`], [`CampaignError`].

mod error;
mod records;

pub use error::{is_bad_input, CampaignError};
pub use records::{
    design_sha256, load_design, posterior_draws, read_if_exists, read_posterior, read_samples,
    read_stage_record, read_surrogate, Draws,
};

use crate::record::ProvenanceClock;
use crate::runs;
use crate::study::Study;
use anyhow::{Context, Result};
use std::path::{Path, PathBuf};

/// A study and its campaign folder.
pub struct Campaign {
    pub study: Study,
    pub dir: PathBuf,
    /// The command line, for provenance.
    pub command_line: Vec<String>,
}

pub const DESIGN_FILE: &str = "design.yaml";
pub const SURROGATE_FILE: &str = "surrogate.yaml";
pub const POSTERIOR_FILE: &str = "posterior.yaml";
pub const SAMPLES_FILE: &str = "posterior-samples.csv";
pub const REPORT_FILE: &str = "report.html";
pub const CHECKS_FILE: &str = "checks.yaml";
pub const REFINEMENT_FILE: &str = "refinement.yaml";

/// Posterior draws the predictive checks use at most (thinned evenly).
pub const CHECK_DRAWS: usize = 2000;

impl Campaign {
    /// The campaign of `study` under `runs_root` (`runs_root/<study name>/`).
    pub fn new(study: Study, runs_root: &Path, command_line: Vec<String>) -> Self {
        let dir = runs_root.join(&study.name);
        Self {
            study,
            dir,
            command_line,
        }
    }

    /// The path of `file` in the campaign folder.
    pub fn path(&self, file: &str) -> PathBuf {
        self.dir.join(file)
    }

    /// A provenance clock started now, with this command line.
    pub fn clock(&self) -> ProvenanceClock {
        ProvenanceClock::start(self.command_line.clone())
    }

    /// Hash every file the study reads (the study, its data, templates) into `clock`.
    ///
    /// # Errors
    /// A file that cannot be read.
    pub fn hash_study_inputs(&self, clock: &mut ProvenanceClock) -> Result<()> {
        for f in self.study.input_files() {
            clock
                .input(&f)
                .with_context(|| format!("cannot hash {}", f.display()))?;
        }
        Ok(())
    }
}

/// Take the campaign's lock (one assay process per campaign at a time).
///
/// # Errors
/// Another process holds it; the message names that process.
pub fn lock(c: &Campaign) -> Result<runs::CampaignLock> {
    Ok(runs::lock_campaign(&c.dir, &c.command_line)?)
}
