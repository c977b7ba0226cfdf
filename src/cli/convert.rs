//! `thiomap convert CUBE --out FILE`: rewrites a cube in another format (FITS, or `.npy`
//! with its sidecar), keeping bands, quantity, description, spatial WCS and, for FITS,
//! the geometry backplanes.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::bail;
use thiomap::atomic::WriteError;
use thiomap::cube;

/// Rewrite a cube as FITS or as .npy with a TOML sidecar.
#[derive(Debug, clap::Args)]
#[command(
    after_help = "Examples:\n  thiomap convert scene.npy --out scene.fits\n  \
                        thiomap convert scene.fits.gz --out scene.npy   (also writes scene.toml)"
)]
pub struct Args {
    /// The cube to read (any format `inspect` reads).
    #[arg(value_name = "CUBE")]
    cube: PathBuf,

    /// The file to write: `.fits` (f32, spectral WCS, backplanes as extensions) or `.npy`
    /// (f32 little-endian, C order, plus a `.toml` sidecar of the same stem).
    #[arg(long, value_name = "FILE")]
    out: PathBuf,

    /// FITS only: the HDU that holds the cube, by EXTNAME or index (0 = primary).
    #[arg(long, value_name = "NAME|INDEX")]
    hdu: Option<String>,

    #[command(flatten)]
    select: super::common::BandArgs,

    /// Replace FILE (and its sidecar) if it already exists.
    #[arg(long)]
    overwrite: bool,
}

enum Target {
    Fits,
    Npy,
}

pub fn run(args: Args) -> anyhow::Result<ExitCode> {
    let name = args.out.to_string_lossy().to_ascii_lowercase();
    let target = if name.ends_with(".fits") {
        Target::Fits
    } else if name.ends_with(".npy") {
        Target::Npy
    } else {
        bail!(
            "--out {}: the output format comes from the name, which must end in .fits or .npy",
            args.out.display()
        );
    };
    let mut outputs = vec![args.out.clone()];
    if matches!(target, Target::Npy) {
        outputs.push(cube::npy::sidecar_path(&args.out));
    }
    if !args.overwrite {
        if let Some(existing) = outputs.iter().find(|p| p.exists()) {
            return Err(WriteError::Exists {
                path: existing.clone(),
            }
            .into());
        }
    }
    let (cube, _) = args.select.load_cube(&args.cube, args.hdu)?;
    match target {
        Target::Fits => cube::fits::write_cube(&args.out, &cube)?,
        Target::Npy => {
            if !cube.backplanes.is_empty() {
                eprintln!(
                    "thiomap: warning: .npy output does not carry the {} geometry backplanes; \
                     write .fits to keep them",
                    cube.backplanes.len()
                );
            }
            cube::npy::write_cube(&args.out, &cube)?
        }
    }
    eprintln!(
        "wrote {} ({} × {} × {} bands)",
        args.out.display(),
        cube.info.rows,
        cube.info.cols,
        cube.info.bands.len()
    );
    Ok(ExitCode::SUCCESS)
}
