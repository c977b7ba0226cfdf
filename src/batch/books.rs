//! The bookkeeping files of a batch output folder, written while a batch runs
//! ([`super::run`]) and read back by [`super::merge`], so each format lives in one place:
//!
//! - `batch[-shard-K-of-N].json`: the archive, the shard, the number of cubes, the recipe;
//! - `manifest[-shard-K-of-N].txt`: the cubes this run was given, one relative path a line;
//! - `failures[-shard-K-of-N].csv`: `path`, `stage`, `reason` of every cube that failed
//!   (sorted), manifest entries that were refused among them with the stage `manifest`.
//!
//! Each is written atomically; a shard writes only its own, so shards sharing one output
//! folder never write the same file.

use std::path::{Path, PathBuf};

use anyhow::Context as _;

use super::{Entry, Shard};
use crate::atomic::{self, WriteError};
use crate::recipe::Recipe;

/// A cube that failed, at which stage, and why.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord)]
pub struct Failure {
    /// The cube's path relative to the archive (or the manifest line).
    pub path: String,
    /// `manifest`, `read`, `unmix`, `units` or `write`.
    pub stage: String,
    pub reason: String,
}

/// The suffix of a shard's bookkeeping files (`-shard-2-of-4`), empty without shards.
pub fn suffix(shard: Option<Shard>) -> String {
    shard.map(|s| format!("-{}", s.tag())).unwrap_or_default()
}

/// The bookkeeping files a run writes at the top of its output folder, as (stem,
/// extension): `<stem><suffix>.<extension>`.
const BOOKS: [(&str, &str); 3] = [("batch", "json"), ("manifest", "txt"), ("failures", "csv")];

/// The name of bookkeeping file `stem` of `shard` (one of [`BOOKS`]).
fn book_name(stem: &str, ext: &str, shard: Option<Shard>) -> String {
    format!("{stem}{}.{ext}", suffix(shard))
}

/// `failures<suffix>.csv` in `out`.
pub fn failures_path(out: &Path, shard: Option<Shard>) -> PathBuf {
    out.join(book_name("failures", "csv", shard))
}

/// Writes `batch<suffix>.json`: what this run was asked to do.
pub fn write_record(
    out: &Path,
    archive: &Path,
    shard: Option<Shard>,
    cubes: usize,
    recipe: &Recipe,
) -> Result<(), WriteError> {
    crate::results::write_json(
        &out.join(book_name("batch", "json", shard)),
        &serde_json::json!({
            "archive": archive.display().to_string(),
            "shard": shard.map(|s| [s.k, s.n]),
            "cubes": cubes,
            "recipe": recipe,
        }),
    )
}

/// Writes `manifest<suffix>.txt`: the cubes of this run.
pub fn write_manifest(
    out: &Path,
    shard: Option<Shard>,
    entries: &[Entry],
) -> Result<(), WriteError> {
    let text: String = entries
        .iter()
        .map(|e| format!("{}\n", e.relative.display()))
        .collect();
    atomic::write_bytes(
        &out.join(book_name("manifest", "txt", shard)),
        text.as_bytes(),
    )
}

/// Writes `failures<suffix>.csv` (header only when nothing failed).
pub fn write_failures(
    out: &Path,
    shard: Option<Shard>,
    failures: &[Failure],
) -> anyhow::Result<()> {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(["path", "stage", "reason"])?;
    for f in failures {
        w.write_record([&f.path, &f.stage, &f.reason])?;
    }
    atomic::write_bytes(&failures_path(out, shard), &w.into_inner()?)?;
    Ok(())
}

/// Removes the bookkeeping temporaries a killed run of the same shard left at the top of
/// `out` (the cube folders clean their own). Only this shard's own: the shards of one
/// archive share `out` and run at the same time, and another shard's temporary may be a
/// file it is writing now.
pub fn remove_stale(out: &Path, shard: Option<Shard>) {
    let own = BOOKS.map(|(stem, ext)| book_name(stem, ext, shard));
    for e in std::fs::read_dir(out).into_iter().flatten().flatten() {
        let p = e.path();
        let name = e.file_name().to_string_lossy().into_owned();
        // `.<name>.tmp-<pid>-<n>`: the name the temporary would have become.
        let target = name
            .strip_prefix('.')
            .and_then(|n| n.split(".tmp-").next())
            .unwrap_or("");
        if p.is_file() && atomic::is_temporary(&name) && own.iter().any(|o| o == target) {
            let _ = std::fs::remove_file(p);
        }
    }
}

/// The bookkeeping files of one kind in `dir`, sorted: every shard's `prefix*ext`.
fn files(dir: &Path, prefix: &str, ext: &str) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(dir)
        .map(|rd| {
            rd.flatten()
                .map(|e| e.path())
                .filter(|p| {
                    p.file_name()
                        .map(|n| {
                            let n = n.to_string_lossy();
                            n.starts_with(prefix) && n.ends_with(ext)
                        })
                        .unwrap_or(false)
                })
                .collect()
        })
        .unwrap_or_default();
    v.sort();
    v
}

/// Every failure listed in `dir`, over all its shards' failure files.
pub fn read_failures(dir: &Path) -> anyhow::Result<Vec<Failure>> {
    let mut out = Vec::new();
    for f in files(dir, "failures", ".csv") {
        let mut r = csv::Reader::from_path(&f).with_context(|| format!("{}", f.display()))?;
        for rec in r.records() {
            let rec = rec.with_context(|| format!("{}", f.display()))?;
            out.push(Failure {
                path: rec.get(0).unwrap_or("").to_string(),
                stage: rec.get(1).unwrap_or("").to_string(),
                reason: rec.get(2).unwrap_or("").to_string(),
            });
        }
    }
    Ok(out)
}

/// Every cube listed in `dir`'s manifests, over all its shards.
pub fn read_listed(dir: &Path) -> anyhow::Result<Vec<String>> {
    let mut out = Vec::new();
    for f in files(dir, "manifest", ".txt") {
        let text = std::fs::read_to_string(&f).with_context(|| format!("{}", f.display()))?;
        out.extend(
            text.lines()
                .map(str::trim)
                .filter(|l| !l.is_empty())
                .map(String::from),
        );
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_shard_removes_only_its_own_stale_temporaries() {
        // Shards share the output folder and start together: shard 1 must not remove the
        // manifest shard 2 is writing at that moment.
        let dir = tempfile::tempdir().unwrap();
        let names = [
            ".manifest-shard-1-of-3.txt.tmp-11-0",
            ".manifest-shard-2-of-3.txt.tmp-12-0",
            ".batch-shard-1-of-3.json.tmp-11-1",
            ".failures.csv.tmp-13-0",
        ];
        for n in names {
            std::fs::write(dir.path().join(n), b"x").unwrap();
        }
        remove_stale(dir.path(), Some(Shard { k: 1, n: 3 }));
        let left: Vec<bool> = names.iter().map(|n| dir.path().join(n).exists()).collect();
        assert_eq!(left, [false, true, false, true]);
        // An unsharded run removes the unsharded books' temporaries only.
        remove_stale(dir.path(), None);
        assert!(!dir.path().join(names[3]).exists());
        assert!(dir.path().join(names[1]).exists());
    }
}
