//! `thiomap batch ARCHIVE --out DIR`: the main job over every cube of an archive, with
//! parallel workers, failure isolation, resumption and shards. This file holds the flags,
//! the progress bar and the summary line; the run itself is [`thiomap::batch::run`].

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Context as _;
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use thiomap::batch::{self, run::Plan, Shard};
use thiomap::pipeline::Progress;
use thiomap::recipe::{Draft, Scope};

/// Run the main job on every cube of an archive (resumable, shardable).
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  \
    thiomap batch archive/ --out results/ --recipe recipe.toml --workers 2\n  \
    thiomap batch archive/ --out results/ --manifest list.txt --shard 2/4\n\n\
    One results folder per cube, named after its path in the archive including the file \
    name (a.fits and a.npy never collide). A cube whose folder already holds a run.json with \
    the same inputs, recipe, library and tool version is skipped, so an interrupted batch is \
    resumed by running the same command again. Unreadable cubes become rows of failures.csv \
    and the batch goes on; the exit code is 1 when anything failed. Under a Slurm job array \
    with no --shard, the shard follows SLURM_ARRAY_TASK_ID/MIN/STEP/COUNT and the threads \
    SLURM_CPUS_PER_TASK.")]
pub struct Args {
    /// The archive folder; cubes are found under it (FITS, .fits.gz, .npy + sidecar,
    /// band-stack sidecars) unless --manifest lists them.
    #[arg(value_name = "ARCHIVE")]
    archive: PathBuf,
    /// The folder for the results (not inside the archive).
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// A TOML recipe: every option of `map` (see the README). Default: map's defaults.
    #[arg(long, value_name = "FILE")]
    recipe: Option<PathBuf>,
    /// A file listing cube paths relative to the archive, one per line.
    #[arg(long, value_name = "FILE")]
    manifest: Option<PathBuf>,
    /// Cubes processed at once. Default: one per thread.
    #[arg(long, value_name = "W")]
    workers: Option<usize>,
    /// Threads in all, shared by the workers. Default: SLURM_CPUS_PER_TASK, else every core.
    #[arg(long, value_name = "N")]
    threads: Option<usize>,
    /// Process shard K of N (1 ≤ K ≤ N), balanced by file size.
    #[arg(long, value_name = "K/N")]
    shard: Option<String>,
    /// Also write each cube's report.html (a folder already complete gains one too).
    #[arg(long)]
    report: bool,
}

/// The batch's progress bar: cubes done, failures so far, warnings printed above it.
struct CubesBar(ProgressBar);

impl Progress for CubesBar {
    fn stage(&self, _: &str, total: Option<usize>) {
        self.0.set_length(total.unwrap_or(0) as u64);
    }
    fn rows(&self, done: usize) {
        self.0.set_position(done as u64);
    }
    fn warn(&self, message: &str) {
        self.0.suspend(|| eprintln!("thiomap: warning: {message}"));
    }
    fn failures(&self, count: usize) {
        self.0.set_message(format!("{count} failed"));
    }
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let recipe = Draft::new(a.recipe.as_deref())?.check(Scope::Map)?;
    if !a.archive.is_dir() {
        anyhow::bail!("{}: the archive is not a folder", a.archive.display());
    }
    batch::check_out(&a.archive, &a.out)?;
    let shard = match &a.shard {
        Some(s) => Some(Shard::parse(s)?),
        None => Shard::from_slurm(|k| std::env::var(k).ok()),
    };
    let (all, rejected) = match &a.manifest {
        Some(m) => {
            let text = std::fs::read_to_string(m)
                .with_context(|| format!("{}: cannot read", m.display()))?;
            batch::read_manifest(&a.archive, &text)
        }
        None => (batch::discover(&a.archive)?, Vec::new()),
    };
    let entries = match shard {
        Some(s) => batch::shard_entries(&all, s),
        None => all,
    };
    let threads = super::common::thread_count(a.threads)?;
    if a.workers == Some(0) {
        anyhow::bail!("--workers 0: at least one worker is needed");
    }
    let workers = a
        .workers
        .unwrap_or(threads)
        .max(1)
        .min(entries.len().max(1));
    let _ = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build_global();
    let plan = Plan {
        archive: a.archive.clone(),
        out: a.out.clone(),
        entries,
        rejected,
        shard,
        workers,
        threads,
        report: a.report,
    };

    let bar = ProgressBar::with_draw_target(
        Some(plan.entries.len() as u64),
        ProgressDrawTarget::stderr(),
    );
    bar.set_style(
        ProgressStyle::with_template("{bar:30} {pos}/{len} cubes, {msg} [{elapsed}, ETA {eta}]")
            .expect("a valid template")
            .progress_chars("=> "),
    );
    bar.set_message("0 failed");
    let bar = CubesBar(bar);
    let report = batch::run::execute(&plan, &recipe, &bar);
    bar.0.finish_and_clear();
    let report = report?;
    let failed = report.failures.len();
    eprintln!(
        "batch: {} cubes{}: {} mapped, {} already complete, {failed} failed{}",
        report.cubes,
        shard
            .map(|s| format!(" (shard {} of {})", s.k, s.n))
            .unwrap_or_default(),
        report.mapped(),
        report.skipped,
        if failed == 0 {
            String::new()
        } else {
            format!(" (see {})", report.failures_file.display())
        }
    );
    Ok(if failed == 0 {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}
