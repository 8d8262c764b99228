use super::Record;
use anyhow::{Context, Result};
use serde::{de::DeserializeOwned, Serialize};
use std::io::Write;
use std::path::Path;

/// Write `bytes` to `path` atomically: a temporary file in the same folder, flushed to
/// disk, then renamed over `path`, so a reader never sees half a file.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    write_atomic_with(path, bytes, true)
}

/// As [`write_atomic`] but without forcing the data to disk first: still never half a
/// file, but a power failure may lose the update. For transient states (a run marked
/// `running`), whose loss only means the run is started again.
pub fn write_atomic_unsynced(path: &Path, bytes: &[u8]) -> Result<()> {
    write_atomic_with(path, bytes, false)
}

fn write_atomic_with(path: &Path, bytes: &[u8], sync: bool) -> Result<()> {
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    std::fs::create_dir_all(dir)
        .with_context(|| format!("cannot create folder {}", dir.display()))?;
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    // pid and thread make the temporary name unique among concurrent writers.
    let tmp = dir.join(format!(
        ".{name}.tmp-{}-{:?}",
        std::process::id(),
        std::thread::current().id()
    ));
    // Errors name the file being written; the temporary is a detail.
    let written = (|| {
        let mut f = std::fs::File::create(&tmp)
            .with_context(|| format!("cannot write {}", path.display()))?;
        f.write_all(bytes)
            .with_context(|| format!("cannot write {}", path.display()))?;
        if sync {
            f.sync_all()
                .with_context(|| format!("cannot flush {} to disk", path.display()))?;
        }
        std::fs::rename(&tmp, path)
            .with_context(|| format!("cannot put the new {} in place", path.display()))
    })();
    if written.is_err() {
        // On a full disk the half-written temporary would hold on to the space that is
        // missing; `path` itself is untouched.
        let _ = std::fs::remove_file(&tmp);
    }
    written
}

/// A record of a transient state, written atomically without fsync.
pub fn write_record_unsynced<T: Serialize>(path: &Path, record: &Record<T>) -> Result<()> {
    let text = serde_yaml::to_string(record).context("cannot serialise record")?;
    write_atomic_unsynced(path, text.as_bytes())
}

/// Serialise a record to YAML and write it atomically.
pub fn write_record<T: Serialize>(path: &Path, record: &Record<T>) -> Result<()> {
    let text = serde_yaml::to_string(record).context("cannot serialise record")?;
    write_atomic(path, text.as_bytes())
}

/// Read a record written by [`write_record`].
pub fn read_record<T: DeserializeOwned>(path: &Path) -> Result<Record<T>> {
    let text =
        std::fs::read_to_string(path).with_context(|| format!("cannot read {}", path.display()))?;
    serde_yaml::from_str(&text).with_context(|| format!("{} is not a valid record", path.display()))
}
