//! Shared harness of the CLI integration tests: a temporary folder, a prepared `assay`
//! command, the deterministic test simulator `tests/fixtures/testsim.sh` and a minimal
//! valid study that points at it.
//!
//! Each test binary uses a different subset of these helpers.
#![allow(dead_code)]

pub mod curve;
pub mod exact;

use std::path::{Path, PathBuf};
use std::time::Duration;

/// Upper bound on one `assay` invocation in the tests. Nothing here should take more
/// than a few seconds; the bound only stops a hung test from blocking the suite (the
/// hanging simulator sleeps 30 s, so a broken timeout shows up as a failure, not a hang).
pub const PROCESS_TIMEOUT: Duration = Duration::from_secs(120);

/// Name of the minimal study (and so of its campaign folder).
pub const STUDY_NAME: &str = "tsim";
/// Name of the minimal study's experiment.
pub const EXPERIMENT: &str = "bench";
/// Design points of the minimal study.
pub const N_POINTS: usize = 4;
/// The field x values of the minimal study: 0 and 2 are simulated exactly, 0.5 lies
/// between the simulated 0 and 1 and so exercises linear interpolation.
pub const FIELD_X: [f64; 3] = [0.0, 0.5, 2.0];

/// A temporary folder that holds one test's study, data and campaign records.
pub struct Env {
    pub dir: tempfile::TempDir,
}

impl Env {
    pub fn new() -> Self {
        Self {
            dir: tempfile::Builder::new()
                .prefix("assay-test-")
                .tempdir()
                .expect("temp folder"),
        }
    }

    /// Absolute path of `rel` inside the temporary folder.
    pub fn path(&self, rel: &str) -> PathBuf {
        self.dir.path().join(rel)
    }

    /// Write `text` to `rel` (creating folders) and return its absolute path.
    pub fn write(&self, rel: &str, text: &str) -> PathBuf {
        let p = self.path(rel);
        if let Some(parent) = p.parent() {
            std::fs::create_dir_all(parent).expect("create folder");
        }
        std::fs::write(&p, text).expect("write file");
        p
    }

    /// Read `rel` as text.
    pub fn read(&self, rel: &str) -> String {
        let p = self.path(rel);
        std::fs::read_to_string(&p).unwrap_or_else(|e| panic!("cannot read {}: {e}", p.display()))
    }

    /// The campaign folder root given to `--runs`.
    pub fn runs_root(&self) -> PathBuf {
        self.path("runs")
    }

    /// `assay --runs <tmp>/runs --quiet ARGS...`, run in the temporary folder.
    pub fn assay<I, S>(&self, args: I) -> assert_cmd::Command
    where
        I: IntoIterator<Item = S>,
        S: AsRef<std::ffi::OsStr>,
    {
        let mut cmd = assert_cmd::Command::cargo_bin("assay").expect("the assay binary");
        cmd.current_dir(self.dir.path())
            .arg("--runs")
            .arg(self.runs_root())
            .arg("--quiet")
            .args(args)
            .timeout(PROCESS_TIMEOUT);
        cmd
    }

    /// The campaign folder of the minimal study.
    pub fn campaign(&self) -> PathBuf {
        self.runs_root().join(STUDY_NAME)
    }

    /// `run.yaml` of point `point` (e.g. `p0001`) of the minimal study's experiment.
    pub fn run_record(&self, point: &str) -> PathBuf {
        self.campaign()
            .join("runs")
            .join(point)
            .join(EXPERIMENT)
            .join("run.yaml")
    }

    /// The folder of one run of the minimal study.
    pub fn run_folder(&self, point: &str) -> PathBuf {
        self.campaign().join("runs").join(point).join(EXPERIMENT)
    }

    /// Text of a minimal valid study: parameters `A` in [0, 1] and `B` in [1, 2], one
    /// experiment `bench` with data `field.csv` at [`FIELD_X`], and the command
    /// `testsim.sh MODE {{A}} {{B}} {{run_dir}}/out.csv` with the simulator by absolute
    /// path. Tests derive broken studies from it with [`edit`].
    pub fn minimal_study(&self, mode: &str) -> String {
        format!(
            "\
name: {STUDY_NAME}
parameters:
  - name: A
    range: [0.0, 1.0]
  - name: B
    unit: mm
    range: [1.0, 2.0]
simulator:
  command: [{sim}, \"{mode}\", \"{{{{A}}}}\", \"{{{{B}}}}\", \"{{{{run_dir}}}}/out.csv\"]
  output:
    file: out.csv
    format: csv
    x: x
    y: [y]
  timeout_s: 20
  retries: 0
experiments:
  - name: {EXPERIMENT}
    data: field.csv
    noise: {{sd: 0.1}}
design: {{method: lhs, points: {N_POINTS}, seed: 7}}
calibration: {{chains: 2, warmup: 100, draws: 100, seed: 3}}
",
            sim = yaml_string(&sim().display().to_string()),
        )
    }

    /// Write the field data of the minimal study (invented numbers; only their shape
    /// matters to these tests).
    pub fn write_field_data(&self) -> PathBuf {
        self.write("field.csv", "x,y\n0,0.6\n0.5,1.3\n2,3.5\n")
    }

    /// Write `text` as `study.yaml` with the minimal field data and return its path.
    pub fn write_study_text(&self, text: &str) -> PathBuf {
        self.write_field_data();
        self.write("study.yaml", text)
    }

    /// Write the minimal study with simulator mode `mode` and return its path.
    pub fn write_minimal_study(&self, mode: &str) -> PathBuf {
        let text = self.minimal_study(mode);
        self.write_study_text(&text)
    }
}

/// What one `assay` call left behind.
pub struct Outcome {
    pub code: Option<i32>,
    pub stdout: String,
    pub stderr: String,
}

impl Env {
    /// `assay --runs <tmp>/runs --quiet COMMAND STUDY`, run to its end.
    pub fn call(&self, command: &str, study: &Path) -> Outcome {
        let out = self
            .assay([command.as_ref(), study.as_os_str()])
            .output()
            .expect("assay runs");
        let text = |b: &[u8]| String::from_utf8_lossy(b).into_owned();
        Outcome {
            code: out.status.code(),
            stdout: text(&out.stdout),
            stderr: text(&out.stderr),
        }
    }
}

/// `assay --runs DIR/runs --quiet`, run in `DIR` with stdin closed: for tests that
/// spawn and kill assay themselves, outside the [`Env`] harness.
pub fn assay_at(dir: &Path) -> std::process::Command {
    let mut c = std::process::Command::new(env!("CARGO_BIN_EXE_assay"));
    c.arg("--runs")
        .arg(dir.join("runs"))
        .arg("--quiet")
        .current_dir(dir)
        .stdin(std::process::Stdio::null());
    c
}

/// The test simulator (absolute path).
pub fn sim() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests")
        .join("fixtures")
        .join("testsim.sh")
}

/// `s` as a YAML double-quoted scalar (JSON strings are valid YAML).
pub fn yaml_string(s: &str) -> String {
    serde_json::to_string(s).expect("a string serialises")
}

/// Replace the one occurrence of `from` in `text` by `to`; panics if `from` is absent
/// or repeated, so a test never silently checks an unchanged study.
pub fn edit(text: &str, from: &str, to: &str) -> String {
    let n = text.matches(from).count();
    assert_eq!(
        n, 1,
        "`{from}` occurs {n} times in the study, expected once:\n{text}"
    );
    text.replacen(from, to, 1)
}

/// 1-based line of the one line of `text` that contains `needle`.
pub fn line_of(text: &str, needle: &str) -> usize {
    let hits: Vec<usize> = text
        .lines()
        .enumerate()
        .filter(|(_, l)| l.contains(needle))
        .map(|(i, _)| i + 1)
        .collect();
    assert_eq!(
        hits.len(),
        1,
        "`{needle}` is on lines {hits:?}, expected exactly one:\n{text}"
    );
    hits[0]
}

/// The repository root (bundled studies are relative to it).
pub fn repo_root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// Make sure the release binary of a bundled example simulator exists (`make test`
/// builds it first; a bare `cargo test` builds it here). Bundled studies run
/// `../../target/release/<name>`.
pub fn ensure_model_binary(name: &str) -> PathBuf {
    let bin = repo_root().join("target/release").join(name);
    if !bin.exists() {
        let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".into());
        let ok = std::process::Command::new(cargo)
            .args(["build", "--release", "-p", name])
            .current_dir(repo_root())
            .status()
            .expect("cargo runs")
            .success();
        assert!(ok, "building the {name} simulator failed");
    }
    bin
}

/// Run `assay --runs RUNS --quiet ARGS…` from the repository root (for the bundled
/// studies, whose paths are relative to it).
pub fn assay_in_repo(runs: &Path, args: &[&str]) -> std::process::Output {
    std::process::Command::new(env!("CARGO_BIN_EXE_assay"))
        .arg("--runs")
        .arg(runs)
        .arg("--quiet")
        .args(args)
        .current_dir(repo_root())
        .output()
        .expect("assay starts")
}
