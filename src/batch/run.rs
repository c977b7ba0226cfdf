//! Running a batch: the worker pool that maps every cube of a plan into its results
//! folder, skipping complete ones, isolating failures, and keeping the bookkeeping files.
//!
//! Workers take the next cube from a shared counter, so a slow cube never holds up the
//! others; the threads of the global pool are shared by the workers' unmixing. Progress
//! goes through [`Progress`]: the stage `cubes` with one "row" per finished cube, the
//! failure count, and each cube's warnings prefixed by its path. Nothing here prints.

use std::path::PathBuf;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;

use super::books::{self, Failure};
use super::{expected_key, is_complete, result_dir, Entry, Rejected, Shard};
use crate::pipeline::{self, Destination, Job, Progress};
use crate::recipe::CheckedRecipe;

/// What a batch run is asked to do; built by the caller from the archive, a manifest and
/// a shard.
#[derive(Debug, Clone)]
pub struct Plan {
    pub archive: PathBuf,
    pub out: PathBuf,
    /// This run's cubes, in list order.
    pub entries: Vec<Entry>,
    /// Manifest lines refused before the run (they become failures).
    pub rejected: Vec<Rejected>,
    pub shard: Option<Shard>,
    /// Cubes processed at once (at least one).
    pub workers: usize,
    /// Threads of the global pool, recorded in each cube's `timings.json`.
    pub threads: usize,
    /// Write each cube's `report.html`.
    pub report: bool,
}

/// How a batch run went.
#[derive(Debug, Clone)]
pub struct Report {
    pub cubes: usize,
    /// Cubes whose folder already held a complete result of the same key.
    pub skipped: usize,
    /// Sorted; refused manifest lines among them.
    pub failures: Vec<Failure>,
    /// Where the failures were written.
    pub failures_file: PathBuf,
}

impl Report {
    /// Cubes mapped in this run.
    pub fn mapped(&self) -> usize {
        let failed = self
            .failures
            .iter()
            .filter(|f| f.stage != "manifest")
            .count();
        self.cubes - self.skipped - failed
    }
}

/// One cube's progress: its stages are silent (the batch counts cubes), its warnings name
/// the cube.
struct CubeProgress<'a> {
    batch: &'a dyn Progress,
    cube: &'a str,
}

impl Progress for CubeProgress<'_> {
    fn stage(&self, _: &str, _: Option<usize>) {}
    fn rows(&self, _: usize) {}
    fn warn(&self, message: &str) {
        self.batch.warn(&format!("{}: {message}", self.cube));
    }
}

/// Maps one entry unless its result is complete: `Ok(false)` when skipped.
fn one(
    plan: &Plan,
    entry: &Entry,
    recipe: &CheckedRecipe,
    progress: &dyn Progress,
) -> Result<bool, (String, String)> {
    let cube = plan.archive.join(&entry.relative);
    let dir = result_dir(&plan.out, entry);
    let name = entry.relative.display().to_string();
    let key = expected_key(&cube, recipe).map_err(|e| ("read".to_string(), format!("{e:#}")))?;
    if is_complete(&dir, &key) {
        // A complete folder from a run without --report gains its page.
        if plan.report && !dir.join("report.html").is_file() {
            let (html, _) = pipeline::report_from_disk(&dir, Some(&cube))
                .map_err(|e| ("report".to_string(), e.to_string()))?;
            crate::atomic::write_bytes(&dir.join("report.html"), html.as_bytes())
                .map_err(|e| ("report".to_string(), e.to_string()))?;
        }
        return Ok(false);
    }
    let quiet = CubeProgress {
        batch: progress,
        cube: &name,
    };
    let to = Destination {
        dir: &dir,
        overwrite: true,
        report: plan.report,
    };
    pipeline::run_cube(Job::Map, &cube, None, to, recipe, plan.threads, &quiet)
        .map_err(|e| (e.stage.to_string(), format!("{:#}", e.error)))?;
    Ok(true)
}

/// Runs the plan: creates the output folder, writes the batch record and the manifest,
/// maps every cube with `plan.workers` workers, and writes the failure list last.
pub fn execute(
    plan: &Plan,
    recipe: &CheckedRecipe,
    progress: &dyn Progress,
) -> anyhow::Result<Report> {
    use anyhow::Context as _;
    std::fs::create_dir_all(&plan.out)
        .with_context(|| format!("{}: cannot create", plan.out.display()))?;
    books::remove_stale(&plan.out, plan.shard);
    books::write_record(
        &plan.out,
        &plan.archive,
        plan.shard,
        plan.entries.len(),
        recipe.recipe(),
    )?;
    books::write_manifest(&plan.out, plan.shard, &plan.entries)?;

    progress.stage("cubes", Some(plan.entries.len()));
    let failures: Mutex<Vec<Failure>> = Mutex::new(
        plan.rejected
            .iter()
            .map(|r| Failure {
                path: r.entry.clone(),
                stage: "manifest".into(),
                reason: r.reason.clone(),
            })
            .collect(),
    );
    let (next, done, skipped) = (
        AtomicUsize::new(0),
        AtomicUsize::new(0),
        AtomicUsize::new(0),
    );
    std::thread::scope(|scope| {
        for _ in 0..plan.workers.max(1) {
            scope.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::SeqCst);
                let Some(entry) = plan.entries.get(i) else {
                    break;
                };
                match one(plan, entry, recipe, progress) {
                    Ok(false) => {
                        skipped.fetch_add(1, Ordering::SeqCst);
                    }
                    Ok(true) => {}
                    Err((stage, reason)) => {
                        let mut f = failures.lock().expect("not poisoned");
                        f.push(Failure {
                            path: entry.relative.display().to_string(),
                            stage,
                            reason,
                        });
                        progress.failures(f.len());
                    }
                }
                progress.rows(done.fetch_add(1, Ordering::SeqCst) + 1);
            });
        }
    });
    let mut failures = failures.into_inner().expect("not poisoned");
    failures.sort();
    books::write_failures(&plan.out, plan.shard, &failures)?;
    Ok(Report {
        cubes: plan.entries.len(),
        skipped: skipped.load(Ordering::SeqCst),
        failures,
        failures_file: books::failures_path(&plan.out, plan.shard),
    })
}
