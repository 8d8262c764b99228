use super::Record;
use anyhow::{Context, Result};
use serde::{de::DeserializeOwned, Serialize};
use sha2::{Digest, Sha256};
use std::io::{Read, Write};
use std::path::Path;

/// Lowercase hex sha256 of `bytes`.
pub fn sha256_hex(bytes: &[u8]) -> String {
    let d = Sha256::digest(bytes);
    d.iter().map(|b| format!("{b:02x}")).collect()
}

/// Lowercase hex sha256 of a file, streamed.
pub fn sha256_file(path: &Path) -> std::io::Result<String> {
    let mut f = std::fs::File::open(path)?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 16];
    loop {
        let n = f.read(&mut buf)?;
        if n == 0 {
            break;
        }
        h.update(&buf[..n]);
    }
    Ok(h.finalize().iter().map(|b| format!("{b:02x}")).collect())
}

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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sha256_of_abc_matches_fips_180_2() {
        // FIPS 180-2, appendix B.1: SHA-256("abc").
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }
}
