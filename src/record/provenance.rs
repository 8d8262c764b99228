use chrono::{DateTime, SecondsFormat, Utc};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::Path;
use std::time::Instant;

/// Who made a record, how, when, from what.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Provenance {
    pub tool: String,
    pub tool_version: String,
    /// Git commit of assay's source, when it was built from a git checkout.
    pub git_commit: Option<String>,
    pub command_line: Vec<String>,
    /// Folder the command ran in: relative input paths are relative to it.
    #[serde(default)]
    pub working_dir: Option<String>,
    pub host: String,
    pub user: String,
    pub started_utc: String,
    pub ended_utc: String,
    pub elapsed_s: f64,
    /// sha256 of every input file read, by path.
    pub inputs: BTreeMap<String, String>,
    /// sha256 of each part of the study the stage depends on (by part name, e.g.
    /// `parameters`, `design`): what decides whether the stage is stale. Absent in run
    /// records (a run's `key` plays that role) and in records of earlier versions.
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub study_parts: BTreeMap<String, String>,
    /// Seeds used, by purpose.
    pub seeds: BTreeMap<String, u64>,
    /// Random generator, when any was used.
    pub rng: Option<String>,
}

/// Starts timing when a stage starts; [`ProvenanceClock::finish`] fills the block.
#[derive(Debug)]
pub struct ProvenanceClock {
    started: DateTime<Utc>,
    instant: Instant,
    command_line: Vec<String>,
    inputs: BTreeMap<String, String>,
    study_parts: BTreeMap<String, String>,
    seeds: BTreeMap<String, u64>,
    rng: Option<String>,
}

impl ProvenanceClock {
    pub fn start(command_line: Vec<String>) -> Self {
        Self {
            started: Utc::now(),
            instant: Instant::now(),
            command_line,
            inputs: BTreeMap::new(),
            study_parts: BTreeMap::new(),
            seeds: BTreeMap::new(),
            rng: None,
        }
    }

    /// Hash `path` and note it as an input.
    pub fn input(&mut self, path: &Path) -> std::io::Result<String> {
        let h = super::hash::sha256_file(path)?;
        self.inputs.insert(path.display().to_string(), h.clone());
        Ok(h)
    }

    /// Hash `path` and note it under `name` (campaign files are named relative to the
    /// campaign folder, e.g. `design.yaml`).
    pub fn input_named(&mut self, name: &str, path: &Path) -> std::io::Result<String> {
        let h = super::hash::sha256_file(path)?;
        self.inputs.insert(name.to_string(), h.clone());
        Ok(h)
    }

    /// Note an input whose hash is already known.
    pub fn input_hash(&mut self, name: &str, sha256: &str) {
        self.inputs.insert(name.to_string(), sha256.to_string());
    }

    /// Note the hashes of the study parts the stage depends on.
    pub fn study_parts(&mut self, parts: BTreeMap<String, String>) {
        self.study_parts = parts;
    }

    pub fn seed(&mut self, purpose: &str, seed: u64) {
        self.seeds.insert(purpose.to_string(), seed);
        self.rng = Some(crate::rng::RNG_NAME.to_string());
    }

    pub fn finish(self) -> Provenance {
        let ended = Utc::now();
        let commit = env!("ASSAY_GIT_COMMIT");
        Provenance {
            tool: "assay".into(),
            tool_version: env!("CARGO_PKG_VERSION").into(),
            git_commit: (!commit.is_empty()).then(|| commit.to_string()),
            command_line: self.command_line,
            working_dir: std::env::current_dir()
                .ok()
                .map(|p| p.display().to_string()),
            host: gethostname::gethostname().to_string_lossy().into_owned(),
            user: std::env::var("USER")
                .or_else(|_| std::env::var("LOGNAME"))
                .unwrap_or_else(|_| "unknown".into()),
            started_utc: self.started.to_rfc3339_opts(SecondsFormat::Millis, true),
            ended_utc: ended.to_rfc3339_opts(SecondsFormat::Millis, true),
            elapsed_s: self.instant.elapsed().as_secs_f64(),
            inputs: self.inputs,
            study_parts: self.study_parts,
            seeds: self.seeds,
            rng: self.rng,
        }
    }
}
