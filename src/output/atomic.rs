//! Every file thiomap writes appears whole or not at all: it is written under a
//! temporary name in the destination folder, then renamed over the final name (a rename
//! within one file system is atomic on POSIX). A process killed mid-write leaves at most
//! a `.<name>.tmp-<pid>-<n>` file, never a truncated result under the real name.
//!
//! Files are not fsync'd: this protects against a killed process, not against power loss.

use std::fs::{self, File};
use std::io;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use super::OutputError;

static COUNTER: AtomicU64 = AtomicU64::new(0);

/// The temporary name used while `path` is being written.
fn temporary_name(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    path.with_file_name(format!(".{name}.tmp-{}-{n}", std::process::id()))
}

/// Creates `path` atomically from what `write` puts into the file.
pub fn write_with<F>(path: &Path, write: F) -> Result<(), OutputError>
where
    F: FnOnce(&mut File) -> io::Result<()>,
{
    let tmp = temporary_name(path);
    let err = |source| OutputError::Io {
        path: path.to_path_buf(),
        source,
    };
    let result = File::create(&tmp).and_then(|mut f| write(&mut f));
    if let Err(e) = result {
        let _ = fs::remove_file(&tmp);
        return Err(err(e));
    }
    fs::rename(&tmp, path).map_err(|e| {
        let _ = fs::remove_file(&tmp);
        err(e)
    })
}

/// Creates `path` atomically with the given bytes.
pub fn write_bytes(path: &Path, bytes: &[u8]) -> Result<(), OutputError> {
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
