//! Flags shared by several commands, defined once: band selection and the library.

use std::path::PathBuf;

use anyhow::Context as _;
use thiomap::cube::select::BandSelection;
use thiomap::library::Library;

/// `--range` and `--exclude-bands`, for every command that takes a cube or a band set.
#[derive(Debug, Clone, clap::Args)]
pub struct BandArgs {
    /// Keep only bands whose centres lie in MIN-MAX, in µm (inclusive), e.g. `0.4-2.5`
    /// to drop thermal bands. Default: all bands.
    #[arg(long, value_name = "MIN-MAX", value_parser = BandSelection::parse_range)]
    range: Option<(f64, f64)>,

    /// Drop bands by number (1-based, as `inspect` lists them), e.g. `1,40-45`.
    #[arg(long, value_name = "LIST", value_parser = parse_band_list)]
    exclude_bands: Option<BandList>,
}

/// A parsed band list (a newtype so clap takes it as one value).
#[derive(Debug, Clone)]
pub struct BandList(Vec<usize>);

fn parse_band_list(s: &str) -> Result<BandList, String> {
    BandSelection::parse_list(s).map(BandList)
}

impl BandArgs {
    /// Loads a cube and keeps the selected bands; returns the kept band indices too.
    pub fn load_cube(
        &self,
        path: &std::path::Path,
        hdu: Option<String>,
    ) -> anyhow::Result<(thiomap::cube::Cube, Vec<usize>)> {
        let mut cube = thiomap::cube::load(path, &thiomap::cube::OpenOptions { hdu })?;
        let kept = self
            .selection()
            .apply(&cube.info.bands)
            .map_err(|e| anyhow::anyhow!("{}: {e}", path.display()))?;
        cube.select_bands(&kept);
        Ok((cube, kept))
    }

    /// The range as given, if any.
    pub fn range(&self) -> Option<(f64, f64)> {
        self.range
    }

    /// The excluded bands as given, if any.
    pub fn excluded(&self) -> Option<Vec<usize>> {
        self.exclude_bands.as_ref().map(|l| l.0.clone())
    }

    pub fn selection(&self) -> BandSelection {
        BandSelection {
            range_um: self.range,
            exclude: self
                .exclude_bands
                .as_ref()
                .map(|l| l.0.clone())
                .unwrap_or_default(),
        }
    }
}

/// `--library`, for every command that uses the endmember library.
#[derive(Debug, Clone, clap::Args)]
pub struct LibraryArgs {
    /// A library folder (or its library.toml) to use instead of the embedded default
    /// starter library.
    #[arg(long, value_name = "PATH")]
    library: Option<PathBuf>,
}

impl LibraryArgs {
    pub fn load(&self) -> anyhow::Result<Library> {
        Library::load_or_default(self.library.as_deref()).with_context(|| "loading the library")
    }
}

/// `--threads`: the worker threads for this process.
#[derive(Debug, Clone, clap::Args)]
pub struct ThreadArgs {
    /// Worker threads. Default: SLURM_CPUS_PER_TASK when set, else every core.
    #[arg(long, value_name = "N")]
    threads: Option<usize>,
}

/// The thread count for `--threads`: as given, else SLURM_CPUS_PER_TASK, else every core.
pub fn thread_count(given: Option<usize>) -> anyhow::Result<usize> {
    Ok(match given {
        Some(0) => anyhow::bail!("--threads 0: at least one thread is needed"),
        Some(n) => n,
        None => std::env::var("SLURM_CPUS_PER_TASK")
            .ok()
            .and_then(|v| v.trim().parse::<usize>().ok())
            .filter(|n| *n > 0)
            .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get())),
    })
}

impl ThreadArgs {
    /// Sets up the global thread pool; returns the thread count.
    pub fn init(&self) -> anyhow::Result<usize> {
        let n = thread_count(self.threads)?;
        // A second call in one process (tests) keeps the first pool.
        let _ = rayon::ThreadPoolBuilder::new()
            .num_threads(n)
            .build_global();
        Ok(n)
    }
}

/// A word flag's typed value (clap has already checked the word).
pub fn word<T>(given: &Option<String>, parse: fn(&str) -> Option<T>) -> Option<T> {
    given.as_deref().and_then(parse)
}

/// A count flag's typed value: a number or its word (`auto`, `all`).
pub fn count<T>(
    flag: &str,
    word: &str,
    given: &Option<String>,
    parse: fn(&str) -> Option<T>,
) -> anyhow::Result<Option<T>> {
    given
        .as_deref()
        .map(|v| {
            parse(v).ok_or_else(|| anyhow::anyhow!("{flag} {v}: expected a number or \"{word}\""))
        })
        .transpose()
}

/// `MIN-MAX` of two numbers for a flag's value parser; `example` ends the message ("e.g.
/// 300-1800"). The order is checked where the values are used, so that a reversed range is
/// reported like one from a recipe file.
pub fn min_max(s: &str, example: &str) -> Result<(f64, f64), String> {
    let bad = || format!("\"{s}\": expected MIN-MAX, {example}");
    let (a, b) = s.split_once('-').ok_or_else(bad)?;
    Ok((
        a.trim().parse().map_err(|_| bad())?,
        b.trim().parse().map_err(|_| bad())?,
    ))
}
