//! One assay process per campaign: an advisory `flock` on `<campaign>/.lock`. The kernel
//! releases it when the holder dies (even by kill -9), so a stale lock never blocks.

use nix::fcntl::{Flock, FlockArg};
use std::fs::{File, OpenOptions};
use std::io::Read;
use std::path::{Path, PathBuf};

/// The campaign is locked by another process.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum LockError {
    #[error("the campaign {path} is in use by another assay process ({holder}); wait for it to finish or stop it")]
    Held { path: PathBuf, holder: String },
    // The source (the system's reason) follows in the error chain, not here, or the
    // terminal would show it twice.
    #[error(
        "cannot open the lock file {path} (assay writes in the campaign folder, even to resume)"
    )]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
}

/// Where the lock holder describes itself.
pub fn holder_path(campaign: &Path) -> PathBuf {
    campaign.join(".lock-holder")
}

/// Held while a process works on a campaign; released on drop or death.
#[derive(Debug)]
pub struct CampaignLock {
    _lock: Flock<File>,
}

/// Take the campaign's lock, or say who holds it.
///
/// # Errors
/// [`LockError::Held`] naming the holder's host, pid, start time and command.
pub fn acquire(campaign: &Path, command_line: &[String]) -> Result<CampaignLock, LockError> {
    std::fs::create_dir_all(campaign).map_err(|source| LockError::Io {
        path: campaign.to_path_buf(),
        source,
    })?;
    let path = campaign.join(".lock");
    let file = OpenOptions::new()
        .read(true)
        .write(true)
        .create(true)
        .truncate(false)
        .open(&path)
        .map_err(|source| LockError::Io {
            path: path.clone(),
            source,
        })?;
    match Flock::lock(file, FlockArg::LockExclusiveNonblock) {
        Ok(lock) => {
            let info = format!(
                "host {} pid {} since {} command {}",
                gethostname::gethostname().to_string_lossy(),
                std::process::id(),
                chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
                command_line.join(" ")
            );
            // The holder line goes to its own file, replaced atomically, so a reader never
            // sees it half written.
            let _ = crate::record::write_atomic(&holder_path(campaign), info.as_bytes());
            Ok(CampaignLock { _lock: lock })
        }
        Err(_) => {
            let mut holder = String::new();
            if let Ok(mut f) = File::open(holder_path(campaign)) {
                let _ = f.read_to_string(&mut holder);
            }
            if holder.trim().is_empty() {
                holder = "unknown holder".into();
            }
            Err(LockError::Held {
                path: campaign.to_path_buf(),
                holder: holder.trim().to_string(),
            })
        }
    }
}
