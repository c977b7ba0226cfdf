//! Archive runs: finding cubes under a folder or in a manifest, partitioning them into
//! shards and deciding which results are already complete (here); running the workers
//! ([`run`]); the bookkeeping files ([`books`]); merging results ([`merge`]). The per-cube
//! work is [`crate::pipeline::run_cube`]; the command line only parses flags and draws.
//!
//! - **Entries** are cube paths relative to the archive, sorted, so every machine sees the
//!   same list. A cube's results folder is `OUT/<relative path including the file name>`,
//!   so `a.fits` and `a.npy` never collide.
//! - **Shards** (`K/N`) are balanced by file size: entries sorted by size (largest first,
//!   then by path) go one by one to the shard with the least bytes so far (longest
//!   processing time first, Graham 1969); the rule depends only on the entry list.
//! - **The result key** of a cube is what `run.json` records: tool version, every input
//!   file's SHA-256, the library's hash and the recipe. A folder whose `run.json` carries
//!   the same key is complete and skipped; any other is redone.

pub mod books;
pub mod merge;
pub mod page;
pub mod run;

use std::path::{Component, Path, PathBuf};

use crate::recipe::CheckedRecipe;

/// One cube of the archive.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Entry {
    /// Path relative to the archive (as written in manifests).
    pub relative: PathBuf,
    /// Bytes of the cube's files, for shard balancing.
    pub bytes: u64,
}

/// Why an archive cannot be listed.
#[derive(Debug, thiserror::Error)]
pub enum BatchError {
    #[error("{path}: cannot read: {error}")]
    Io {
        path: PathBuf,
        error: std::io::Error,
    },
    #[error("--out {out} lies inside the archive {archive}: results would be read back as cubes")]
    OutInsideArchive { out: PathBuf, archive: PathBuf },
    #[error("--shard {0}: expected K/N with 1 ≤ K ≤ N")]
    Shard(String),
}

fn is_cube_name(name: &str) -> bool {
    crate::cube::is_fits_name(name) || name.to_ascii_lowercase().ends_with(".npy")
}

/// Whether a `.toml` is a band-stack sidecar (its `kind` says so).
fn is_stack_sidecar(path: &Path) -> bool {
    std::fs::read_to_string(path)
        .ok()
        .and_then(|t| toml::from_str::<toml::Table>(&t).ok())
        .and_then(|t| {
            t.get("kind")
                .and_then(|k| k.as_str().map(|s| s == "band-stack"))
        })
        .unwrap_or(false)
}

/// Bytes of a cube and the files beside it that belong to it.
fn cube_bytes(path: &Path) -> u64 {
    let own = std::fs::metadata(path).map(|m| m.len()).unwrap_or(0);
    if path.extension().is_some_and(|e| e == "npy") {
        own + std::fs::metadata(path.with_extension("toml"))
            .map(|m| m.len())
            .unwrap_or(0)
    } else {
        own
    }
}

/// Every cube under `archive`, sorted by relative path. `.npy` sidecars are not cubes;
/// band-stack sidecars are.
pub fn discover(archive: &Path) -> Result<Vec<Entry>, BatchError> {
    let mut out = Vec::new();
    let mut stack = vec![archive.to_path_buf()];
    while let Some(dir) = stack.pop() {
        let rd = std::fs::read_dir(&dir).map_err(|source| BatchError::Io {
            path: dir.clone(),
            error: source,
        })?;
        for e in rd {
            let e = e.map_err(|source| BatchError::Io {
                path: dir.clone(),
                error: source,
            })?;
            let p = e.path();
            if p.is_dir() {
                stack.push(p);
                continue;
            }
            let name = e.file_name().to_string_lossy().into_owned();
            let cube = is_cube_name(&name) || (name.ends_with(".toml") && is_stack_sidecar(&p));
            if cube {
                let relative = p.strip_prefix(archive).unwrap_or(&p).to_path_buf();
                out.push(Entry {
                    bytes: cube_bytes(&p),
                    relative,
                });
            }
        }
    }
    out.sort_by(|a, b| a.relative.cmp(&b.relative));
    Ok(out)
}

/// A manifest line that cannot be used, with the reason.
#[derive(Debug, Clone, PartialEq)]
pub struct Rejected {
    pub entry: String,
    pub reason: String,
}

/// Reads a manifest (one cube path per line, relative to the archive; `#` comments).
/// Duplicates and paths that leave the archive are rejected with a reason; missing files
/// are kept (they fail as cubes, with a row in the failure list).
pub fn read_manifest(archive: &Path, text: &str) -> (Vec<Entry>, Vec<Rejected>) {
    let mut entries: Vec<Entry> = Vec::new();
    let mut rejected = Vec::new();
    for line in text.lines() {
        let t = line.trim();
        if t.is_empty() || t.starts_with('#') {
            continue;
        }
        let rel = PathBuf::from(t);
        let escapes = rel.is_absolute()
            || rel.components().any(|c| {
                matches!(
                    c,
                    Component::ParentDir | Component::RootDir | Component::Prefix(_)
                )
            });
        if escapes {
            rejected.push(Rejected {
                entry: t.into(),
                reason: "the path leaves the archive, so its results would be written outside the output folder".into(),
            });
            continue;
        }
        if entries.iter().any(|e| e.relative == rel) {
            rejected.push(Rejected {
                entry: t.into(),
                reason: "listed twice; the first entry is kept".into(),
            });
            continue;
        }
        entries.push(Entry {
            bytes: cube_bytes(&archive.join(&rel)),
            relative: rel,
        });
    }
    (entries, rejected)
}

/// A shard: K of N, counting from 1.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Shard {
    pub k: usize,
    pub n: usize,
}

impl Shard {
    pub fn parse(s: &str) -> Result<Shard, BatchError> {
        let (k, n) = s
            .split_once('/')
            .ok_or_else(|| BatchError::Shard(s.into()))?;
        let (k, n): (usize, usize) = (
            k.trim().parse().map_err(|_| BatchError::Shard(s.into()))?,
            n.trim().parse().map_err(|_| BatchError::Shard(s.into()))?,
        );
        if k == 0 || n == 0 || k > n {
            return Err(BatchError::Shard(s.into()));
        }
        Ok(Shard { k, n })
    }

    /// The shard of a Slurm job-array task, from the environment: K = (TASK_ID − TASK_MIN)
    /// / TASK_STEP + 1 (step 1 when unset), N = TASK_COUNT. `None` outside an array.
    pub fn from_slurm(env: impl Fn(&str) -> Option<String>) -> Option<Shard> {
        let num = |k: &str| env(k).and_then(|v| v.trim().parse::<usize>().ok());
        let id = num("SLURM_ARRAY_TASK_ID")?;
        let min = num("SLURM_ARRAY_TASK_MIN").unwrap_or(0);
        let step = num("SLURM_ARRAY_TASK_STEP").unwrap_or(1).max(1);
        let count = num("SLURM_ARRAY_TASK_COUNT")?;
        let k = id.checked_sub(min)? / step + 1;
        (k >= 1 && k <= count).then_some(Shard { k, n: count })
    }

    /// The suffix shard bookkeeping files carry, e.g. `shard-2-of-4`.
    pub fn tag(&self) -> String {
        format!("shard-{}-of-{}", self.k, self.n)
    }
}

/// This shard's entries (in list order), balanced by bytes across the shards.
pub fn shard_entries(entries: &[Entry], shard: Shard) -> Vec<Entry> {
    let mut order: Vec<usize> = (0..entries.len()).collect();
    order.sort_by(|&a, &b| {
        entries[b]
            .bytes
            .cmp(&entries[a].bytes)
            .then(entries[a].relative.cmp(&entries[b].relative))
    });
    let mut load = vec![0u64; shard.n];
    let mut owner = vec![0usize; entries.len()];
    for i in order {
        let s = (0..shard.n)
            .min_by_key(|&s| (load[s], s))
            .expect("at least one shard");
        load[s] += entries[i].bytes.max(1);
        owner[i] = s;
    }
    entries
        .iter()
        .zip(owner)
        .filter(|(_, o)| *o + 1 == shard.k)
        .map(|(e, _)| e.clone())
        .collect()
}

/// The results folder of an entry.
pub fn result_dir(out: &Path, entry: &Entry) -> PathBuf {
    out.join(&entry.relative)
}

/// Refuses an output folder inside the archive.
pub fn check_out(archive: &Path, out: &Path) -> Result<(), BatchError> {
    let canon = |p: &Path| -> PathBuf {
        std::fs::canonicalize(p).unwrap_or_else(|_| {
            // Not created yet: its parent decides.
            p.parent()
                .and_then(|q| std::fs::canonicalize(q).ok())
                .map(|q| q.join(p.file_name().unwrap_or_default()))
                .unwrap_or_else(|| p.to_path_buf())
        })
    };
    let (a, o) = (canon(archive), canon(out));
    if o.starts_with(&a) {
        return Err(BatchError::OutInsideArchive {
            out: out.to_path_buf(),
            archive: archive.to_path_buf(),
        });
    }
    Ok(())
}

/// Whether `dir` holds a complete result with the same key as `expected` (the run.json a
/// fresh run would write: tool version, inputs, library, recipe).
pub fn is_complete(dir: &Path, expected: &serde_json::Value) -> bool {
    let Ok(text) = std::fs::read_to_string(dir.join("run.json")) else {
        return false;
    };
    let Ok(found) = serde_json::from_str::<serde_json::Value>(&text) else {
        return false;
    };
    ["version", "inputs", "library", "recipe"]
        .iter()
        .all(|k| found.get(k) == expected.get(k))
}

/// The key fields of a cube's result, computed without running it.
pub fn expected_key(cube: &Path, recipe: &CheckedRecipe) -> anyhow::Result<serde_json::Value> {
    use crate::results::provenance;
    let reader = crate::cube::open(cube, &Default::default())?;
    Ok(serde_json::json!({
        "version": crate::VERSION,
        "inputs": provenance::input_records(&reader.info().inputs)?,
        "library": provenance::library_record(recipe.library()),
        "recipe": recipe.recipe(),
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn entries(sizes: &[u64]) -> Vec<Entry> {
        sizes
            .iter()
            .enumerate()
            .map(|(i, b)| Entry {
                relative: PathBuf::from(format!("c{i:02}.fits")),
                bytes: *b,
            })
            .collect()
    }

    #[test]
    fn shards_partition_the_entries_and_balance_bytes() {
        let e = entries(&[100, 90, 80, 10, 10, 10, 5, 5]);
        let mut seen = Vec::new();
        let mut loads = Vec::new();
        for k in 1..=3 {
            let s = shard_entries(&e, Shard { k, n: 3 });
            loads.push(s.iter().map(|x| x.bytes).sum::<u64>());
            seen.extend(s.into_iter().map(|x| x.relative));
        }
        seen.sort();
        assert_eq!(
            seen,
            e.iter().map(|x| x.relative.clone()).collect::<Vec<_>>()
        );
        assert!(
            loads.iter().max().unwrap() - loads.iter().min().unwrap() <= 25,
            "{loads:?}"
        );
    }

    #[test]
    fn slurm_arrays_map_to_shards() {
        let env = |pairs: &'static [(&'static str, &'static str)]| {
            move |k: &str| {
                pairs
                    .iter()
                    .find(|(n, _)| *n == k)
                    .map(|(_, v)| v.to_string())
            }
        };
        // --array=0-3: task 2 is shard 3 of 4.
        let s = Shard::from_slurm(env(&[
            ("SLURM_ARRAY_TASK_ID", "2"),
            ("SLURM_ARRAY_TASK_MIN", "0"),
            ("SLURM_ARRAY_TASK_COUNT", "4"),
        ]));
        assert_eq!(s, Some(Shard { k: 3, n: 4 }));
        // --array=1-4: task 1 is shard 1 of 4.
        let s = Shard::from_slurm(env(&[
            ("SLURM_ARRAY_TASK_ID", "1"),
            ("SLURM_ARRAY_TASK_MIN", "1"),
            ("SLURM_ARRAY_TASK_COUNT", "4"),
        ]));
        assert_eq!(s, Some(Shard { k: 1, n: 4 }));
        // --array=0-6:2: tasks 0, 2, 4, 6; task 4 is shard 3 of 4.
        let s = Shard::from_slurm(env(&[
            ("SLURM_ARRAY_TASK_ID", "4"),
            ("SLURM_ARRAY_TASK_MIN", "0"),
            ("SLURM_ARRAY_TASK_STEP", "2"),
            ("SLURM_ARRAY_TASK_COUNT", "4"),
        ]));
        assert_eq!(s, Some(Shard { k: 3, n: 4 }));
        assert_eq!(Shard::from_slurm(env(&[])), None);
    }

    #[test]
    fn manifests_reject_duplicates_and_escapes() {
        let (e, r) = read_manifest(
            Path::new("/nonexistent"),
            "a.fits\n# note\nb/c.npy\na.fits\n../x.fits\n/abs.fits\n",
        );
        assert_eq!(e.len(), 2);
        assert_eq!(r.len(), 3);
        assert!(r[0].reason.contains("twice"));
        assert!(r[1].reason.contains("outside the output folder"));
    }

    #[test]
    fn shard_syntax_is_checked() {
        assert_eq!(Shard::parse("2/4").unwrap(), Shard { k: 2, n: 4 });
        assert!(Shard::parse("0/4").is_err());
        assert!(Shard::parse("5/4").is_err());
        assert!(Shard::parse("x").is_err());
    }
}
