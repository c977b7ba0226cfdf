//! `thiomap targets RESULT [--since EARLIER] --out DIR`: ranked observation targets with
//! reasons, for mission planners.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::{bail, Context};
use ndarray::{Array2, Axis};
use thiomap::change::{self, Params};
use thiomap::results::{self, read::read_result, targets::TargetsRun};
use thiomap::targets::{self, keepout, Constraints, Profile, Status};

/// Rank places for the next observation: hot spots, change, fresh sulfur, unexplained
/// material, rare units, large errors — each with its score and reason.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  \
    thiomap targets results/2033 --out targets/2033\n  \
    thiomap targets results/2033 --since results/2031 --out t --keep-out zones.toml --report\n  \
    thiomap targets r --out t --profile my-profile.toml --max-targets 5 --max-emission 60\n\n\
    Writes targets.csv and targets.json (rank, id, kind, centroid pixel and lat/lon, area, \
    score and its components, the key number with its error, a reason in one sentence, the \
    constraint status), targets.png (numbered ranks over the true colour, keep-out areas \
    striped) and run.json (last). The shipped scoring profile is \
    spectra-lib/targets-profile.toml, documented line by line (`thiomap targets \
    --default-profile > mine.toml` prints it); --profile overrides its keys.\n\n\
    --keep-out takes a TOML list of circles ([[circle]] lat_deg, lon_deg, radius_deg, name), \
    a PNG mask drawn like the result's pictures (light = keep out; the cube's size or a whole \
    multiple of it), or a 2-D FITS mask in the cube's row order (non-zero = keep out).\n\n\
    CAUTION: targets are suggestions from a model of the data, with stated uncertainties. \
    Pointing a spacecraft defers to mission flight rules, the radiation environment and the \
    instrument team's own constraints, which thiomap does not know; fieldwork near active \
    vents defers to local codes and licensed practice (SO2 and H2S gas, heat, unstable ground).")]
pub struct Args {
    /// The results folder of `map` to find targets in.
    #[arg(value_name = "RESULT", required_unless_present = "default_profile")]
    result: Option<PathBuf>,
    /// An earlier results folder of the same area: significant change since it becomes a
    /// candidate (compared as `thiomap compare` does, at its defaults).
    #[arg(long, value_name = "EARLIER_RESULT")]
    since: Option<PathBuf>,
    /// The folder to write.
    #[arg(long, value_name = "DIR", required_unless_present = "default_profile")]
    out: Option<PathBuf>,
    /// Print the shipped scoring profile (commented line by line) and exit: a start for
    /// your own `--profile`.
    #[arg(long)]
    default_profile: bool,
    /// A scoring profile (TOML) over the shipped one.
    #[arg(long, value_name = "FILE")]
    profile: Option<PathBuf>,
    /// Areas no target may overlap: circles (.toml), or a mask (.png or .fits).
    #[arg(long, value_name = "FILE")]
    keep_out: Option<PathBuf>,
    /// Candidates seen at a larger mean emission angle (degrees) are excluded.
    #[arg(long, value_name = "DEG", default_value_t = 70.0)]
    max_emission: f64,
    /// Candidates lit at a larger mean incidence angle (degrees) are excluded.
    #[arg(long, value_name = "DEG", default_value_t = 80.0)]
    max_incidence: f64,
    /// Candidates smaller than this many pixels are excluded (not those holding a hot spot).
    #[arg(long, value_name = "PIXELS", default_value_t = 3)]
    min_pixels: usize,
    /// At most this many targets are ranked; the rest are listed as beyond it.
    #[arg(long, value_name = "N", default_value_t = 10)]
    max_targets: usize,
    /// Also write report.html: the targets as one self-contained page.
    #[arg(long)]
    report: bool,
    /// Replace an existing folder.
    #[arg(long)]
    overwrite: bool,
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    if a.default_profile {
        super::print_stdout(targets::profile::DEFAULT_TEXT)?;
        return Ok(ExitCode::SUCCESS);
    }
    let (Some(result), Some(out)) = (a.result.clone(), a.out.clone()) else {
        bail!("give RESULT and --out DIR");
    };
    results::check_folder(&out, a.overwrite)?;
    let profile = match &a.profile {
        Some(p) => {
            let text = std::fs::read_to_string(p)
                .with_context(|| format!("--profile {}: cannot be read", p.display()))?;
            Profile::parse(&p.display().to_string(), &text).map_err(anyhow::Error::msg)?
        }
        None => Profile::embedded(),
    };
    if a.max_targets == 0 {
        bail!("--max-targets 0: at least one target must be allowed");
    }
    let angles_ok = a.max_emission > 0.0
        && a.max_emission <= 90.0
        && a.max_incidence > 0.0
        && a.max_incidence <= 180.0;
    if !angles_ok {
        bail!("--max-emission must lie in (0, 90] and --max-incidence in (0, 180] degrees");
    }
    let r = read_result(&result)?;
    let e = &r.epoch;
    let keep_out = match &a.keep_out {
        Some(p) => Some(read_keep_out(p, e, r.row0_at_bottom)?),
        None => None,
    };
    let library = thiomap::library::Library::embedded();
    let members = super::compare::members_of(&library, &e.ids);
    let mut inputs = vec![(
        "result",
        e.name.clone(),
        results::provenance::sha256_file(&result.join("run.json"))?,
    )];
    let changed = match &a.since {
        Some(dir) => {
            let earlier = read_result(dir)?;
            let c = change::compare(&earlier.epoch, e, &members, &Params::default())
                .map_err(|err| anyhow::anyhow!("--since {}: {err}", dir.display()))?;
            eprintln!(
                "compared with {}: {} of {} tested cells changed significantly",
                dir.display(),
                c.counts.significant,
                c.counts.tested
            );
            inputs.push((
                "since",
                earlier.epoch.name.clone(),
                results::provenance::sha256_file(&dir.join("run.json"))?,
            ));
            Some(change::significant_on(&c, e))
        }
        None => None,
    };
    let temperature = read_temperature(&result, e.units.dim())?;
    let units: Vec<(i16, String, f64)> = r
        .units
        .iter()
        .map(|(u, label, _, area)| (*u, label.clone(), *area))
        .collect();
    let constraints = Constraints {
        keep_out,
        max_emission_deg: a.max_emission,
        max_incidence_deg: a.max_incidence,
        min_pixels: a.min_pixels,
        max_targets: a.max_targets,
    };
    let list = targets::rank(
        &targets::Inputs {
            epoch: e,
            members: &members,
            units: &units,
            temperature: temperature.as_ref().map(|(t, s)| (t, s)),
            changed: changed.as_ref(),
        },
        &profile,
        &constraints,
    );
    let run = TargetsRun {
        inputs,
        profile: &profile,
        constraints: &constraints,
        keep_out: a.keep_out.as_ref().map(|p| p.display().to_string()),
        row0_at_bottom: r.row0_at_bottom,
        target: r.summary["target"].as_str().map(String::from),
    };
    let png =
        results::targets::targets_png(e, &list, constraints.keep_out.as_ref(), r.row0_at_bottom);
    results::prepare(&out, a.overwrite)?;
    if a.report {
        let page = thiomap::report::targets::page(&list, &run, &png);
        thiomap::atomic::write_bytes(&out.join("report.html"), page.as_bytes())?;
    }
    results::targets::write_targets(&out, &list, &run, &png)?;
    eprintln!("CAUTION: {}", targets::CAUTION);
    let mut excluded = 0;
    for t in &list {
        let place = t
            .lat_lon
            .map_or(String::new(), |(la, lo)| format!(" at {la:.1}°, {lo:.1}°"));
        match &t.status {
            Status::Ranked(r) => {
                eprintln!(
                    "  {r:>2}  {:.3}  {}{place}: {}",
                    t.score,
                    t.lead.name(),
                    t.reason
                )
            }
            Status::Excluded(why) => {
                excluded += 1;
                if excluded <= 5 {
                    eprintln!(
                        "   –  {:.3}  {}{place}: excluded, {why}",
                        t.score,
                        t.lead.name()
                    );
                }
            }
        }
    }
    if excluded > 5 {
        eprintln!(
            "   … {} more excluded candidates in targets.csv",
            excluded - 5
        );
    }
    eprintln!("wrote {}", out.display());
    Ok(ExitCode::SUCCESS)
}

/// The fitted temperature and its error per pixel, from thermal.fits when it exists.
fn read_temperature(
    dir: &Path,
    dim: (usize, usize),
) -> anyhow::Result<Option<(Array2<f32>, Array2<f32>)>> {
    let path = dir.join("thermal.fits");
    if !path.is_file() {
        return Ok(None);
    }
    let img = thiomap::fits::image::read_primary(&path)
        .map_err(|e| anyhow::anyhow!("{}: {e}", path.display()))?;
    let names: Vec<String> = (1..=img.data.dim().2)
        .map(|k| {
            img.header
                .str(&format!("PLANE{k}"))
                .unwrap_or("")
                .to_string()
        })
        .collect();
    let find = |n: &str| names.iter().position(|x| x == n);
    let (Some(t), Some(s)) = (
        find("temperature_k").or(find("temperature1_k")),
        find("temperature_k_stderr").or(find("temperature1_k_stderr")),
    ) else {
        return Ok(None);
    };
    if (img.data.dim().0, img.data.dim().1) != dim {
        bail!("{}: its size differs from abundance.fits'", path.display());
    }
    Ok(Some((
        img.data.index_axis(Axis(2), t).to_owned(),
        img.data.index_axis(Axis(2), s).to_owned(),
    )))
}

/// The keep-out mask on the result's pixels.
fn read_keep_out(
    path: &Path,
    e: &change::Epoch,
    row0_at_bottom: bool,
) -> anyhow::Result<Array2<bool>> {
    let (rows, cols) = e.units.dim();
    let name = path.display();
    let lower = path.to_string_lossy().to_ascii_lowercase();
    if lower.ends_with(".toml") {
        let text = std::fs::read_to_string(path)
            .with_context(|| format!("--keep-out {name}: cannot be read"))?;
        let circles =
            keepout::parse(&format!("--keep-out {name}"), &text).map_err(anyhow::Error::msg)?;
        let (Some(lat), Some(lon)) = (
            e.geometry.get(&thiomap::backplane::Backplane::Latitude),
            e.geometry.get(&thiomap::backplane::Backplane::Longitude),
        ) else {
            bail!("--keep-out {name}: circles need latitude and longitude backplanes, which the result lacks; give a PNG or FITS mask");
        };
        return Ok(keepout::mask(&circles, lat, lon));
    }
    if lower.ends_with(".png") {
        let img = image::open(path)
            .with_context(|| format!("--keep-out {name}: not a readable PNG"))?
            .to_luma8();
        let (h, w) = (img.height() as usize, img.width() as usize);
        if h % rows != 0 || w % cols != 0 || h / rows != w / cols || h == 0 {
            bail!("--keep-out {name}: {w} × {h} pixels does not match the result's {cols} × {rows} grid (or a whole multiple of it)");
        }
        let f = h / rows;
        return Ok(Array2::from_shape_fn((rows, cols), |(r, c)| {
            let y = if row0_at_bottom { rows - 1 - r } else { r };
            img.get_pixel((c * f + f / 2) as u32, (y * f + f / 2) as u32)[0] > 127
        }));
    }
    if lower.ends_with(".fits") || lower.ends_with(".fit") {
        let img = thiomap::fits::image::read_primary(path)
            .map_err(|err| anyhow::anyhow!("--keep-out {name}: {err}"))?;
        if (img.data.dim().0, img.data.dim().1) != (rows, cols) || img.data.dim().2 != 1 {
            bail!(
                "--keep-out {name}: a {} × {} × {} image does not match the result's {cols} × {rows} grid",
                img.data.dim().1,
                img.data.dim().0,
                img.data.dim().2
            );
        }
        return Ok(img
            .data
            .index_axis(Axis(2), 0)
            .mapv(|v| v != 0.0 && v.is_finite()));
    }
    bail!("--keep-out {name}: give circles as .toml, or a mask as .png or .fits")
}
