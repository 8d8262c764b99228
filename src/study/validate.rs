//! From the text of a study file to a checked [`Study`]: read it, deserialise it
//! (unknown keys and wrong types are caught here, with serde's path and line), then
//! check it section by section (`sections.rs`, `experiments.rs`, and the stages'
//! `params.rs`), each problem reported with file, key path and line.

use super::checked::Study;
use super::checker::Checker;
use super::error::{StudyError, StudyErrors};
use super::experiments;
use super::sections;
use super::spec::StudySpec;
use crate::calibrate::params::{CalibrationParams, DiscrepancyParams};
use crate::surrogate::params::SurrogateParams;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

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
    let spec = deserialise(text, file)?;
    let mut c = Checker::new(file, text);
    sections::name(&mut c, &spec.name);
    let mut names = BTreeSet::new();
    let parameters = sections::parameters(&mut c, &spec, &mut names);
    let controls = sections::controls(&mut c, &spec, &mut names);
    let simulator = sections::simulator(&mut c, &spec.simulator, dir, read);
    let experiments =
        experiments::experiments(&mut c, &spec, &parameters, &controls, &simulator, dir, read);
    let design = sections::design(
        &mut c,
        &spec,
        parameters.len(),
        controls.len(),
        &experiments,
    );
    sections::execution(&mut c, &spec.execution);
    let surrogate = c.checked(|issues| SurrogateParams::check(&spec.surrogate, issues));
    let mut calibration = c.checked(|issues| CalibrationParams::check(&spec, issues));
    let (confirmation_runs, refine) = sections::checks(&mut c, &spec.checks, !controls.is_empty());
    // What calibration names outside its section: a file, and experiments.
    calibration.prior_from = sections::prior_from(&mut c, &spec.calibration, dir);
    calibration.discrepancy = spec
        .calibration
        .discrepancy
        .as_ref()
        .map(|d| c.checked(|issues| DiscrepancyParams::check(d, &spec, issues)));
    c.finish()?;
    Ok(Study {
        name: spec.name,
        file: file.to_path_buf(),
        dir: dir.to_path_buf(),
        parameters,
        controls,
        simulator,
        experiments,
        design,
        jobs: spec.execution.jobs,
        backend: spec.execution.backend,
        slurm: spec.execution.slurm,
        surrogate,
        calibration,
        confirmation_runs,
        refine,
    })
}

/// The wire form of the study `text` of `file`, or the one error serde found, with
/// its key path and line in the words of the study file.
fn deserialise(text: &str, file: &Path) -> Result<StudySpec, StudyErrors> {
    serde_yaml::from_str(text).map_err(|e| {
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
        StudyErrors(vec![StudyError {
            file: file.to_path_buf(),
            key,
            line,
            message,
        }])
    })
}
