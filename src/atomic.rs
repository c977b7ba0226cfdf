//! Atomic file creation, the ground floor every writer stands on (FITS, `.npy`, pictures,
//! tables, the results folder, the command line's own files).
//!
//! Every file thiomap writes appears whole or not at all: it is written under a
//! temporary name in the destination folder, then renamed over the final name (a rename
//! within one file system is atomic on POSIX). A process killed mid-write leaves at most
//! a `.<name>.tmp-<pid>-<n>` file, never a truncated result under the real name.
//!
//! Files are not fsync'd: this protects against a killed process, not against power loss.
//!
//! Testing hook: with `THIOMAP_CRASH_AFTER_WRITES=N` in the environment, the process
//! aborts right after its N-th completed file, so tests can kill a run at every point.

use std::fs::{self, File};
use std::io;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

/// What can go wrong writing an output.
#[derive(Debug, thiserror::Error)]
pub enum WriteError {
    #[error("{path}: cannot write: {error}")]
    Io {
        path: PathBuf,
        error: std::io::Error,
    },
    #[error("{path}: already exists; pass --overwrite to replace it")]
    Exists { path: PathBuf },
}

static COUNTER: AtomicU64 = AtomicU64::new(0);
static WRITTEN: AtomicU64 = AtomicU64::new(0);

/// Aborts the process after the N-th completed write when the testing hook asks for it.
fn crash_point() {
    let done = WRITTEN.fetch_add(1, Ordering::SeqCst) + 1;
    if let Some(n) = std::env::var("THIOMAP_CRASH_AFTER_WRITES")
        .ok()
        .and_then(|v| v.parse::<u64>().ok())
    {
        if done >= n {
            std::process::abort();
        }
    }
}

/// The temporary name used while `path` is being written.
fn temporary_name(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    path.with_file_name(format!(".{name}.tmp-{}-{n}", std::process::id()))
}

/// Whether a file name is one of our temporaries (`.<name>.tmp-<pid>-<n>`).
pub fn is_temporary(name: &str) -> bool {
    name.starts_with('.') && name.contains(".tmp-")
}

/// Removes temporaries a killed process left in `dir` and its subfolders.
pub fn remove_stale_temporaries(dir: &Path) -> std::io::Result<()> {
    if !dir.is_dir() {
        return Ok(());
    }
    for e in fs::read_dir(dir)? {
        let p = e?.path();
        if p.is_dir() {
            remove_stale_temporaries(&p)?;
        } else if p
            .file_name()
            .is_some_and(|n| is_temporary(&n.to_string_lossy()))
        {
            fs::remove_file(&p)?;
        }
    }
    Ok(())
}

/// Creates `path` atomically from what `write` puts into the file.
pub fn write_with<F>(path: &Path, write: F) -> Result<(), WriteError>
where
    F: FnOnce(&mut File) -> io::Result<()>,
{
    let tmp = temporary_name(path);
    let err = |source| WriteError::Io {
        path: path.to_path_buf(),
        error: source,
    };
    let result = File::create(&tmp).and_then(|mut f| write(&mut f));
    if let Err(e) = result {
        let _ = fs::remove_file(&tmp);
        return Err(err(e));
    }
    fs::rename(&tmp, path).map_err(|e| {
        let _ = fs::remove_file(&tmp);
        err(e)
    })?;
    crash_point();
    Ok(())
}

/// Creates `path` atomically with the given bytes.
pub fn write_bytes(path: &Path, bytes: &[u8]) -> Result<(), WriteError> {
    write_with(path, |f| io::Write::write_all(f, bytes))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_failed_write_leaves_nothing_behind() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("out.bin");
        let result = write_with(&target, |f| {
            io::Write::write_all(f, b"partial")?;
            Err(io::Error::other("simulated failure"))
        });
        assert!(result.is_err());
        assert_eq!(fs::read_dir(dir.path()).unwrap().count(), 0);
    }

    #[test]
    fn a_successful_write_replaces_the_file_whole() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("out.bin");
        write_bytes(&target, b"first").unwrap();
        write_bytes(&target, b"second").unwrap();
        assert_eq!(fs::read(&target).unwrap(), b"second");
        assert_eq!(fs::read_dir(dir.path()).unwrap().count(), 1);
    }
}
