//! `thiomap batch ARCHIVE --out DIR`: the main job over every cube of an archive, with
//! parallel workers, failure isolation, resumption and shards; and `thiomap merge`.

use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;

use anyhow::Context as _;
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use thiomap::batch::{self, Shard};
use thiomap::output::results;
use thiomap::pipeline::{self, Progress};
use thiomap::recipe::Recipe;

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
}

/// Progress of one cube's stages: silent (the batch bar speaks); warnings are kept.
struct Quiet<'a> {
    bar: &'a ProgressBar,
    cube: String,
}

impl Progress for Quiet<'_> {
    fn stage(&self, _: &str, _: Option<usize>) {}
    fn rows(&self, _: usize) {}
    fn warn(&self, message: &str) {
        self.bar
            .suspend(|| eprintln!("thiomap: warning: {}: {message}", self.cube));
    }
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let recipe = match &a.recipe {
        Some(p) => Recipe::load(p).map_err(anyhow::Error::msg)?,
        None => Recipe::default(),
    };
    recipe.unmix_params().map_err(anyhow::Error::msg)?;
    recipe.unit_params().map_err(anyhow::Error::msg)?;
    recipe.load_rules().map_err(anyhow::Error::msg)?;
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
    let workers = a
        .workers
        .unwrap_or(threads)
        .max(1)
        .min(entries.len().max(1));
    if a.workers == Some(0) {
        anyhow::bail!("--workers 0: at least one worker is needed");
    }
    let _ = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build_global();
    std::fs::create_dir_all(&a.out)
        .with_context(|| format!("{}: cannot create", a.out.display()))?;
    // Bookkeeping temporaries a killed batch left at the top (cube folders clean their own).
    for e in std::fs::read_dir(&a.out)?.flatten() {
        let p = e.path();
        if p.is_file() && thiomap::output::atomic::is_temporary(&e.file_name().to_string_lossy()) {
            let _ = std::fs::remove_file(p);
        }
    }
    let tag = shard.map(|s| format!("-{}", s.tag())).unwrap_or_default();
    let manifest_text: String = entries
        .iter()
        .map(|e| format!("{}\n", e.relative.display()))
        .collect();
    results::write_json(
        &a.out.join(format!("batch{tag}.json")),
        &serde_json::json!({
            "archive": a.archive.display().to_string(),
            "shard": shard.map(|s| [s.k, s.n]),
            "cubes": entries.len(),
            "recipe": recipe,
        }),
    )?;
    thiomap::output::atomic::write_bytes(
        &a.out.join(format!("manifest{tag}.txt")),
        manifest_text.as_bytes(),
    )?;

    let bar =
        ProgressBar::with_draw_target(Some(entries.len() as u64), ProgressDrawTarget::stderr());
    bar.set_style(
        ProgressStyle::with_template("{bar:30} {pos}/{len} cubes, {msg} [{elapsed}, ETA {eta}]")
            .expect("a valid template")
            .progress_chars("=> "),
    );
    bar.set_message("0 failed");
    let failures: Mutex<Vec<(String, String, String)>> = Mutex::new(
        rejected
            .iter()
            .map(|r| (r.entry.clone(), "manifest".to_string(), r.reason.clone()))
            .collect(),
    );
    let next = AtomicUsize::new(0);
    let skipped = AtomicUsize::new(0);
    std::thread::scope(|scope| {
        for _ in 0..workers {
            scope.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::SeqCst);
                let Some(entry) = entries.get(i) else { break };
                let cube = a.archive.join(&entry.relative);
                let dir = batch::result_dir(&a.out, entry);
                let name = entry.relative.display().to_string();
                let outcome = (|| -> Result<bool, (String, String)> {
                    let key = batch::expected_key(&cube, &recipe)
                        .map_err(|e| ("read".to_string(), format!("{e:#}")))?;
                    if batch::is_complete(&dir, &key) {
                        return Ok(false);
                    }
                    results::prepare(&dir, true)
                        .map_err(|e| ("write".to_string(), e.to_string()))?;
                    let quiet = Quiet {
                        bar: &bar,
                        cube: name.clone(),
                    };
                    pipeline::map_cube(&cube, None, &dir, &recipe, threads, &quiet)
                        .map_err(|e| (e.stage.to_string(), format!("{:#}", e.error)))?;
                    Ok(true)
                })();
                match outcome {
                    Ok(false) => {
                        skipped.fetch_add(1, Ordering::SeqCst);
                    }
                    Ok(true) => {}
                    Err((stage, reason)) => {
                        let mut f = failures.lock().expect("not poisoned");
                        f.push((name, stage, reason));
                        bar.set_message(format!("{} failed", f.len()));
                    }
                }
                bar.inc(1);
            });
        }
    });
    bar.finish_and_clear();
    let mut failures = failures.into_inner().expect("not poisoned");
    failures.sort();
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(["path", "stage", "reason"])?;
    for (p, s, r) in &failures {
        w.write_record([p, s, r])?;
    }
    thiomap::output::atomic::write_bytes(
        &a.out.join(format!("failures{tag}.csv")),
        &w.into_inner()?,
    )?;
    let n = entries.len();
    let s = skipped.load(Ordering::SeqCst);
    eprintln!(
        "batch: {n} cubes{}: {} mapped, {s} already complete, {} failed{}",
        shard
            .map(|s| format!(" (shard {} of {})", s.k, s.n))
            .unwrap_or_default(),
        n - s - failures.iter().filter(|f| f.1 != "manifest").count(),
        failures.len(),
        if failures.is_empty() {
            String::new()
        } else {
            format!(
                " (see {})",
                a.out.join(format!("failures{tag}.csv")).display()
            )
        }
    );
    Ok(if failures.is_empty() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}

/// Merge batch results into one archive table, its JSON and a chart.
#[derive(Debug, clap::Args)]
#[command(after_help = "Example:\n  thiomap merge results/ --out archive/\n\n\
    Writes archive.csv (cube, status, area_<class>…, mean_<id>…, mean_rmse), archive.json \
    and archive-classes.svg; joins the shards' failure lists and lists every manifest entry \
    that has no result.")]
pub struct MergeArgs {
    /// Batch output folders (shards may write to one or several).
    #[arg(value_name = "DIR", required = true)]
    dirs: Vec<PathBuf>,
    /// The folder for archive.csv, archive.json and the chart.
    #[arg(long, value_name = "FOLDER")]
    out: PathBuf,
}

pub fn merge(a: MergeArgs) -> anyhow::Result<ExitCode> {
    let archive = batch::merge::merge(&a.dirs)?;
    std::fs::create_dir_all(&a.out)
        .with_context(|| format!("{}: cannot create", a.out.display()))?;
    thiomap::output::atomic::write_bytes(&a.out.join("archive.csv"), &archive.to_csv()?)?;
    results::write_json(&a.out.join("archive.json"), &archive)?;
    let svg = archive.chart_svg().map_err(anyhow::Error::msg)?;
    thiomap::output::atomic::write_bytes(&a.out.join("archive-classes.svg"), svg.as_bytes())?;
    let count = |s: &str| archive.rows.iter().filter(|r| r.status == s).count();
    eprintln!(
        "merged {} cubes into {}: {} ok, {} failed, {} missing",
        archive.rows.len(),
        a.out.display(),
        count("ok"),
        count("failed"),
        count("missing")
    );
    Ok(ExitCode::SUCCESS)
}
