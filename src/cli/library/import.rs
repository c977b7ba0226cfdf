//! `thiomap library import`: laboratory spectra in CSV into library member files.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::bail;
use thiomap::library::import::{import_csv, ImportOptions, WavelengthUnit};
use thiomap::library::{Class, Library, Source, SourceTag};

/// Turn laboratory spectra in CSV into library member files.
#[derive(Debug, clap::Args)]
#[command(
    after_help = "Example:\n  thiomap library import lab.csv --class sulfur-allotrope \\\n    \
                        --method \"bidirectional reflectance, i=30 e=0, 20 C\" \\\n    \
                        --source \"read=Author 2030, Journal 1:2\" --out my-library\n\n\
                        The first CSV column holds wavelengths (header wavelength_um or \
                        wavelength_nm, or pass --wavelength-unit); each further column is one \
                        spectrum named by its header. Nothing is written if any input is bad."
)]
pub struct Args {
    /// CSV files: a wavelength column, then one reflectance column per spectrum.
    #[arg(value_name = "FILE.csv", required = true)]
    files: Vec<PathBuf>,
    /// Class of every imported spectrum: sulfur-allotrope, so2-frost, silicate or other.
    #[arg(long, value_name = "CLASS", value_parser = parse_class)]
    class: Class,
    /// How the spectra were made (instrument, geometry, sample preparation).
    #[arg(long, value_name = "TEXT")]
    method: String,
    /// A source, as TAG=CITATION with TAG read, from-memory or computed; repeat for more.
    #[arg(long = "source", value_name = "TAG=CITATION", value_parser = parse_source, required = true)]
    sources: Vec<Source>,
    /// Sample temperature, K.
    #[arg(long, value_name = "K")]
    temperature_k: Option<f64>,
    /// Grain size, µm.
    #[arg(long, value_name = "UM")]
    grain_um: Option<f64>,
    /// Unit of the wavelength column, when its header does not say: um or nm.
    #[arg(long, value_name = "UNIT", value_parser = parse_unit)]
    wavelength_unit: Option<WavelengthUnit>,
    /// Multiply every reflectance by this (0.01 for percent). Default 1.
    #[arg(long, value_name = "FACTOR", default_value_t = 1.0)]
    reflectance_scale: f64,
    /// The library folder to add the members to (created with a new index when absent).
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
}

fn parse_class(s: &str) -> Result<Class, String> {
    Class::parse(s)
        .ok_or_else(|| "expected sulfur-allotrope, so2-frost, silicate or other".to_string())
}

fn parse_source(s: &str) -> Result<Source, String> {
    let (tag, citation) = s
        .split_once('=')
        .ok_or("expected TAG=CITATION, e.g. \"read=Author 2030, Journal 1:2\"")?;
    let tag = SourceTag::parse(tag.trim()).ok_or("TAG must be read, from-memory or computed")?;
    if citation.trim().is_empty() {
        return Err("the citation is empty".into());
    }
    Ok(Source {
        tag,
        citation: citation.trim().to_string(),
    })
}

fn parse_unit(s: &str) -> Result<WavelengthUnit, String> {
    match s {
        "um" | "µm" => Ok(WavelengthUnit::Micrometre),
        "nm" => Ok(WavelengthUnit::Nanometre),
        _ => Err("expected um or nm".into()),
    }
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    if !(a.reflectance_scale.is_finite() && a.reflectance_scale > 0.0) {
        bail!(
            "--reflectance-scale {}: must be a positive number",
            a.reflectance_scale
        );
    }
    let opts = ImportOptions {
        class: a.class,
        method: a.method.clone(),
        sources: a.sources.clone(),
        temperature_k: a.temperature_k,
        grain_um: a.grain_um,
        unit: a.wavelength_unit,
        scale: a.reflectance_scale,
    };
    // Read and check everything before writing anything.
    let mut lib = if a.out.join("library.toml").exists() {
        Library::load(&a.out)?
    } else {
        Library {
            name: "imported laboratory spectra".into(),
            version: "0.1.0".into(),
            origin: a.out.display().to_string(),
            members: Vec::new(),
        }
    };
    let mut added = Vec::new();
    for file in &a.files {
        for m in import_csv(file, &opts)? {
            if lib.members.iter().any(|x| x.id == m.id) {
                bail!(
                    "{}: member id `{}` is already in {} (rename the column)",
                    file.display(),
                    m.id,
                    a.out.display()
                );
            }
            added.push(m.id.clone());
            lib.members.push(m);
        }
    }
    lib.write_folder(&a.out)?;
    eprintln!(
        "added {} member(s) to {}: {}",
        added.len(),
        a.out.display(),
        added.join(", ")
    );
    Ok(ExitCode::SUCCESS)
}
