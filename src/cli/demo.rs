//! `thiomap demo --out FILE`: writes a synthetic scene of Brimveil, a fictional
//! sulfur-volcanic moon — the cube, its truth planes and truth.json, and a true-colour
//! preview — with a chosen band set, size, SNR and seed.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::bail;
use thiomap::atomic::WriteError;
use thiomap::bands::BandTable;
use thiomap::cube::bandsets;
use thiomap::demo::files::{scene_files, write_scene, CubeFormat, EpochOf, TruthFiles};
use thiomap::demo::world::Change;
use thiomap::demo::{generate, Law, SceneKind, SceneParams};
use thiomap::render::maps;

use super::common::{BandArgs, LibraryArgs};

/// Write a synthetic scene (cube + ground truth) of a fictional sulfur-volcanic moon.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  \
    thiomap demo --out scene.fits\n  \
    thiomap demo --out globe.fits --bands mapper-96 --snr 200 --hot-spots 3 --seed 1\n  \
    thiomap demo --out tile.npy --kind tile --bands spectrometer-24 --snr 100 --mismatch 0.03\n  \
    thiomap demo --epoch-of globe.fits --changes ring,frost,flow --out globe-later.fits --seed 2\n\n\
    Besides the cube, writes STEM.truth.fits.gz (true abundances, unit labels, core and \
    hot-spot masks), STEM.truth.json (unit names, member ids, every generation parameter \
    and the command that regenerates the scene) and STEM.true-colour.png.\n\n\
    A later epoch (--epoch-of) is the same world seen again with the earlier scene's \
    parameters and bands: only the noise (--seed), and when given the view (--sun, \
    --observer) and --snr, are new. Its truth adds a CHANGED plane (the bits of the changes \
    that touched each pixel: ring 1, frost 2, flow 4, stranger 8, vents 16) and a STRANGER \
    plane (the cover of material outside the library). Changes:\n  \
    ring      a new red ring deposit around Sesk Kiln (22° S, 30° E)\n  \
    frost     the polar frost edge retreats from ±52° to ±58°\n  \
    flow      a new dark flow from 40° S 20° W to 25° S 2° W\n  \
    stranger  a patch of material outside the library at 30° N, 45° W\n  \
    vents     Tolvar Kiln's hot spots go out; Sesk Kiln's light up")]
pub struct Args {
    /// The cube to write: .fits, .npy (with a .toml sidecar) or .toml (a band stack of
    /// 16-bit PNGs beside it).
    #[arg(long, value_name = "FILE")]
    out: PathBuf,
    /// Make a later epoch of this earlier demo cube (its truth.json beside it): the same
    /// world and bands, new noise, with the --changes applied.
    #[arg(long, value_name = "EARLIER", conflicts_with_all = ["kind", "size", "bands", "range", "exclude_bands", "mismatch", "hot_spots", "hot_temperature", "hot_fraction", "sun_distance", "law"])]
    epoch_of: Option<PathBuf>,
    /// With --epoch-of: the changes, comma-separated (ring, frost, flow, stranger, vents;
    /// `none` for a second look at an unchanged world).
    #[arg(long, value_name = "LIST", requires = "epoch_of", value_parser = parse_changes)]
    changes: Option<ChangeList>,
    /// `globe` (a disc on dark sky, sky = no data) or `tile` (map-projected, no limb).
    #[arg(long, value_name = "KIND", default_value = "globe", value_parser = ["globe", "tile"])]
    kind: String,
    /// Size in pixels: N (square) or ROWSxCOLS.
    #[arg(long, value_name = "N|ROWSxCOLS", default_value = "96", value_parser = parse_size)]
    size: (usize, usize),
    /// The band set: imager-7, spectrometer-24, mapper-96, or a band-set file.
    #[arg(long, value_name = "BANDSET", default_value = "mapper-96")]
    bands: String,
    #[command(flatten)]
    select: BandArgs,
    /// Signal-to-noise ratio at 0.55 µm, at the mean surface I/F of the band nearest it
    /// (greater than 0); other bands follow a detector model, noisier where the Sun is faint.
    /// [default: 200; for --epoch-of, the earlier scene's]
    #[arg(long, value_name = "SNR", allow_hyphen_values = true)]
    snr: Option<f64>,
    /// Library mismatch amplitude, 0–0.5 (0.03 = smooth ±3 % differences from the library).
    #[arg(
        long,
        value_name = "FRACTION",
        default_value_t = 0.0,
        allow_hyphen_values = true
    )]
    mismatch: f64,
    /// Number of hot-spot pixels (thermal emission at 3–5 µm) on the active vent.
    #[arg(long, value_name = "N", default_value_t = 0)]
    hot_spots: usize,
    /// Hot-spot temperatures, drawn uniformly in MIN-MAX, K.
    #[arg(long, value_name = "MIN-MAX", default_value = "550-850", value_parser = parse_pair)]
    hot_temperature: (f64, f64),
    /// Hot area fractions of a hot-spot pixel, drawn log-uniformly in MIN-MAX.
    #[arg(long, value_name = "MIN-MAX", default_value = "0.0001-0.001", value_parser = parse_pair)]
    hot_fraction: (f64, f64),
    /// The Sun's distance in AU (written as SUNDIST). Default: Brimveil's, 4.8.
    #[arg(long, value_name = "AU", default_value_t = thiomap::demo::SUN_DISTANCE_AU, allow_hyphen_values = true)]
    sun_distance: f64,
    /// Seed of all randomness; the same seed gives byte-identical files. With --epoch-of,
    /// the seed of the new noise [default: 1; for --epoch-of, the earlier seed + 1].
    #[arg(long, value_name = "N")]
    seed: Option<u64>,
    /// Photometric law: lambert (P = cos i) or lommel-seeliger (2 cos i / (cos i + cos e)).
    #[arg(long, value_name = "LAW", default_value = "lambert", value_parser = ["lambert", "lommel-seeliger"])]
    law: String,
    /// Sub-solar point LAT,LON in degrees [default: 0,30; for --epoch-of, the earlier's].
    #[arg(long, value_name = "LAT,LON", value_parser = parse_point, allow_hyphen_values = true)]
    sun: Option<(f64, f64)>,
    /// Sub-observer point LAT,LON in degrees [default: 0,0; for --epoch-of, the earlier's].
    #[arg(long, value_name = "LAT,LON", value_parser = parse_point, allow_hyphen_values = true)]
    observer: Option<(f64, f64)>,
    #[command(flatten)]
    library: LibraryArgs,
    /// Replace existing files.
    #[arg(long)]
    overwrite: bool,
}

fn parse_size(s: &str) -> Result<(usize, usize), String> {
    let parse = |t: &str| {
        t.trim()
            .parse::<usize>()
            .map_err(|_| format!("`{s}` is not N or ROWSxCOLS"))
    };
    match s.split_once(['x', 'X']) {
        Some((r, c)) => Ok((parse(r)?, parse(c)?)),
        None => {
            let n = parse(s)?;
            Ok((n, n))
        }
    }
}

fn parse_point(s: &str) -> Result<(f64, f64), String> {
    let (a, b) = s
        .split_once(',')
        .ok_or_else(|| format!("`{s}` is not LAT,LON"))?;
    let num = |t: &str| {
        t.trim()
            .parse::<f64>()
            .map_err(|_| format!("`{t}` is not a number of degrees"))
    };
    Ok((num(a)?, num(b)?))
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let lower = a.out.to_string_lossy().to_ascii_lowercase();
    let format = if lower.ends_with(".fits") {
        CubeFormat::Fits
    } else if lower.ends_with(".npy") {
        CubeFormat::Npy
    } else if lower.ends_with(".toml") {
        CubeFormat::Stack
    } else {
        bail!(
            "--out {}: the name must end in .fits, .npy or .toml (band stack)",
            a.out.display()
        );
    };
    let mut files = scene_files(&a.out, format);
    let preview = a.out.with_extension("true-colour.png");
    files.push(preview.clone());
    if !a.overwrite {
        if let Some(existing) = files.iter().find(|p| p.exists()) {
            return Err(WriteError::Exists {
                path: existing.clone(),
            }
            .into());
        }
    }
    let library = a.library.load()?;
    let (params, bands, band_set, command, epoch_of) = match &a.epoch_of {
        Some(earlier) => later_epoch(&a, earlier, format, &library)?,
        None => first_epoch(&a, format)?,
    };
    params.check()?;
    let scene = generate(&params, &library, &bands, &band_set)?;
    write_scene(
        &scene,
        &params,
        &a.out,
        format,
        &band_set,
        &library.version,
        &command,
        epoch_of.as_ref(),
    )?;
    let (img, false_colour) = maps::true_colour(&scene.cube);
    thiomap::atomic::write_bytes(&preview, &maps::png_bytes(&img))?;
    let surface = scene.cube.valid.iter().filter(|v| **v).count();
    eprintln!(
        "wrote {} ({} × {} × {} bands, {surface} surface pixels) with its truth and a {} preview",
        a.out.display(),
        params.rows,
        params.cols,
        scene.cube.info.bands.len(),
        if false_colour {
            "false-colour"
        } else {
            "true-colour"
        }
    );
    Ok(ExitCode::SUCCESS)
}

type Setup = (SceneParams, BandTable, String, String, Option<EpochOf>);

fn first_epoch(a: &Args, format: CubeFormat) -> anyhow::Result<Setup> {
    let snr = a.snr.unwrap_or(200.0);
    let seed = a.seed.unwrap_or(1);
    let sun = a.sun.unwrap_or((0.0, 30.0));
    let observer = a.observer.unwrap_or((0.0, 0.0));
    let params = SceneParams {
        kind: if a.kind == "tile" {
            SceneKind::Tile
        } else {
            SceneKind::Globe
        },
        rows: a.size.0,
        cols: a.size.1,
        snr,
        mismatch: a.mismatch,
        hot_spots: a.hot_spots,
        hot_temperature_k: a.hot_temperature,
        hot_fraction: a.hot_fraction,
        sun_distance_au: a.sun_distance,
        seed,
        law: if a.law == "lambert" {
            Law::Lambert
        } else {
            Law::LommelSeeliger
        },
        sun,
        observer,
        row0_at_bottom: format == CubeFormat::Fits,
        changes: Vec::new(),
        noise_seed: None,
    };
    params.check()?;
    let named = bandsets::resolve(&a.bands)?;
    let kept = a
        .select
        .selection()
        .apply(&named.bands)
        .map_err(|e| anyhow::anyhow!("--bands {}: {e}", a.bands))?;
    let bands = named.bands.subset(&kept);
    let command = format!(
        "thiomap demo --out {} --kind {} --size {}x{} --bands {} --snr {} --mismatch {} \
         --hot-spots {} --hot-temperature {}-{} --hot-fraction {}-{} --sun-distance {} \
         --seed {} --law {} --sun {},{} --observer {},{}",
        a.out.display(),
        a.kind,
        a.size.0,
        a.size.1,
        a.bands,
        snr,
        a.mismatch,
        a.hot_spots,
        a.hot_temperature.0,
        a.hot_temperature.1,
        a.hot_fraction.0,
        a.hot_fraction.1,
        a.sun_distance,
        seed,
        a.law,
        sun.0,
        sun.1,
        observer.0,
        observer.1
    );
    Ok((params, bands, a.bands.clone(), command, None))
}

/// The parameters of a later epoch: the earlier scene's (from its truth.json), its bands
/// (from the cube itself), with new noise and the changes.
fn later_epoch(
    a: &Args,
    earlier: &Path,
    format: CubeFormat,
    library: &thiomap::library::Library,
) -> anyhow::Result<Setup> {
    let truth = TruthFiles::read(earlier).map_err(|e| {
        anyhow::anyhow!(
            "--epoch-of {}: {e} (is it a demo cube with its truth beside it?)",
            earlier.display()
        )
    })?;
    let p = &truth.json["parameters"];
    let num = |k: &str| -> anyhow::Result<f64> {
        p[k].as_f64().ok_or_else(|| {
            anyhow::anyhow!(
                "--epoch-of {}: truth.json has no parameter `{k}`",
                earlier.display()
            )
        })
    };
    let pair = |k: &str| -> anyhow::Result<(f64, f64)> {
        match (p[k][0].as_f64(), p[k][1].as_f64()) {
            (Some(x), Some(y)) => Ok((x, y)),
            _ => anyhow::bail!(
                "--epoch-of {}: truth.json has no parameter `{k}`",
                earlier.display()
            ),
        }
    };
    if p["library_version"].as_str() != Some(library.version.as_str()) {
        anyhow::bail!(
            "--epoch-of {}: it was made with library {}, this library is {}: a later epoch must see the same world",
            earlier.display(),
            p["library_version"].as_str().unwrap_or("?"),
            library.version
        );
    }
    let cube = thiomap::cube::load(earlier, &Default::default())?;
    let earlier_seed = num("seed")? as u64;
    let snr = a.snr.unwrap_or(num("snr")?);
    let seed = a.seed.unwrap_or(earlier_seed + 1);
    let sun = a.sun.map_or_else(|| pair("sub_solar_point_deg"), Ok)?;
    let observer = a
        .observer
        .map_or_else(|| pair("sub_observer_point_deg"), Ok)?;
    let changes = a.changes.clone().map(|c| c.0).unwrap_or_default();
    let params = SceneParams {
        kind: if p["kind"] == "tile" {
            SceneKind::Tile
        } else {
            SceneKind::Globe
        },
        rows: num("rows")? as usize,
        cols: num("cols")? as usize,
        snr,
        mismatch: num("mismatch")?,
        hot_spots: num("hot_spots")? as usize,
        hot_temperature_k: pair("hot_spot_temperature_range_k")?,
        hot_fraction: pair("hot_spot_fraction_range")?,
        sun_distance_au: num("sun_distance_au")?,
        seed: earlier_seed,
        law: if p["photometric_law"] == "lommel-seeliger" {
            Law::LommelSeeliger
        } else {
            Law::Lambert
        },
        sun,
        observer,
        row0_at_bottom: format == CubeFormat::Fits,
        changes: changes.clone(),
        noise_seed: Some(seed),
    };
    let band_set = p["band_set"].as_str().unwrap_or("demo").to_string();
    let names: Vec<&str> = changes.iter().map(|c| c.name()).collect();
    let command = format!(
        "thiomap demo --epoch-of {} --changes {} --out {} --seed {seed} --snr {snr} --sun {},{} --observer {},{}",
        earlier.display(),
        if names.is_empty() { "none".to_string() } else { names.join(",") },
        a.out.display(),
        sun.0,
        sun.1,
        observer.0,
        observer.1
    );
    let epoch = EpochOf {
        file: earlier
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default(),
        sha256: thiomap::results::provenance::sha256_file(earlier)?,
    };
    Ok((
        params,
        cube.info.bands.clone(),
        band_set,
        command,
        Some(epoch),
    ))
}

/// A parsed `--changes` list (a newtype so clap takes it as one value).
#[derive(Debug, Clone)]
struct ChangeList(Vec<Change>);

fn parse_changes(s: &str) -> Result<ChangeList, String> {
    if s.trim() == "none" {
        return Ok(ChangeList(Vec::new()));
    }
    let mut out = Vec::new();
    for part in s.split(',') {
        let part = part.trim();
        let c = Change::parse(part).ok_or_else(|| {
            format!("`{part}` is not a change: use ring, frost, flow, stranger, vents or none")
        })?;
        if !out.contains(&c) {
            out.push(c);
        }
    }
    out.sort();
    Ok(ChangeList(out))
}

/// `MIN-MAX` of two numbers.
fn parse_pair(s: &str) -> Result<(f64, f64), String> {
    super::common::min_max(s, "e.g. 550-850")
}
