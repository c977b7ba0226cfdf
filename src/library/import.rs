//! Turning laboratory spectra in CSV into library members. The first column holds
//! wavelengths (µm or nm, from `--wavelength-unit` or the header: a name containing `nm`
//! or `um`/`µm`), every further column one spectrum named by its header; one file may hold
//! several spectra, or each file one. Empty cells are skipped (spectra may cover different
//! ranges). Class and provenance are required inputs, never prompted for, so imports
//! work in scripts. Every error names the file and the line.

use std::path::Path;

use super::{check_id, Class, Endmember, LibraryError, Origin, Source, MAX_REFLECTANCE};

/// Units of the wavelength column.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum WavelengthUnit {
    Micrometre,
    Nanometre,
}

/// What the user states about the imported spectra.
#[derive(Debug, Clone)]
pub struct ImportOptions {
    pub class: Class,
    pub method: String,
    pub sources: Vec<Source>,
    pub temperature_k: Option<f64>,
    pub grain_um: Option<f64>,
    /// `None`: read the unit from the wavelength column's header.
    pub unit: Option<WavelengthUnit>,
    /// Multiplies every reflectance (0.01 for percent).
    pub scale: f64,
}

/// A lower-case id from a column header: letters and digits kept, everything else `-`.
pub fn id_from_header(header: &str) -> String {
    let mut id = String::new();
    for c in header.trim().chars() {
        if c.is_ascii_alphanumeric() {
            id.push(c.to_ascii_lowercase());
        } else if !id.ends_with('-') && !id.is_empty() {
            id.push('-');
        }
    }
    id.trim_end_matches('-').chars().take(40).collect()
}

fn unit_from_header(h: &str) -> Option<WavelengthUnit> {
    let h = h.to_ascii_lowercase();
    if h.contains("nm") {
        Some(WavelengthUnit::Nanometre)
    } else if h.contains("um") || h.contains("µm") || h.contains("micron") {
        Some(WavelengthUnit::Micrometre)
    } else {
        None
    }
}

/// Reads one CSV file into members.
pub fn import_csv(path: &Path, opts: &ImportOptions) -> Result<Vec<Endmember>, LibraryError> {
    let err = |line: usize, reason: String| LibraryError::Invalid {
        path: path.to_path_buf(),
        line,
        reason,
    };
    let mut reader = csv::ReaderBuilder::new()
        .flexible(false)
        .trim(csv::Trim::All)
        .from_path(path)
        .map_err(|e| match e.into_kind() {
            csv::ErrorKind::Io(source) => LibraryError::Io {
                path: path.to_path_buf(),
                error: source,
            },
            other => err(1, format!("{other:?}")),
        })?;
    let headers = reader.headers().map_err(|e| err(1, e.to_string()))?.clone();
    if headers.len() < 2 {
        return Err(err(
            1,
            "expected a wavelength column and at least one reflectance column".into(),
        ));
    }
    let unit = opts
        .unit
        .or_else(|| unit_from_header(&headers[0]))
        .ok_or_else(|| {
            err(
                1,
                format!(
                    "the wavelength column `{}` does not say its unit: name it wavelength_um or \
                     wavelength_nm, or pass --wavelength-unit um|nm",
                    &headers[0]
                ),
            )
        })?;
    let to_um = match unit {
        WavelengthUnit::Micrometre => 1.0,
        WavelengthUnit::Nanometre => 1e-3,
    };
    let n = headers.len() - 1;
    let mut columns: Vec<(Vec<f64>, Vec<f64>)> = vec![(Vec::new(), Vec::new()); n];
    let mut lines: Vec<Vec<usize>> = vec![Vec::new(); n];
    for record in reader.records() {
        let record = record.map_err(|e| {
            let line = e.position().map(|p| p.line() as usize).unwrap_or(0);
            err(line, e.to_string())
        })?;
        let line = record.position().map(|p| p.line() as usize).unwrap_or(0);
        let number = |k: usize| -> Result<Option<f64>, LibraryError> {
            let cell = &record[k];
            if cell.is_empty() {
                return Ok(None);
            }
            cell.parse::<f64>().map(Some).map_err(|_| {
                err(
                    line,
                    format!(
                        "column `{}` holds `{cell}`, which is not a number",
                        &headers[k]
                    ),
                )
            })
        };
        let Some(wl) = number(0)? else {
            return Err(err(line, "the wavelength cell is empty".into()));
        };
        for k in 1..=n {
            if let Some(r) = number(k)? {
                columns[k - 1].0.push(wl * to_um);
                columns[k - 1].1.push(r * opts.scale);
                lines[k - 1].push(line);
            }
        }
    }
    let mut members = Vec::with_capacity(n);
    for (k, ((mut wl, mut refl), mut at)) in columns.into_iter().zip(lines).enumerate() {
        let header = &headers[k + 1];
        // Instruments often list wavelengths downwards: accept a strictly decreasing column.
        if wl.len() > 1 && wl.windows(2).all(|w| w[1] < w[0]) {
            wl.reverse();
            refl.reverse();
            at.reverse();
        }
        for i in 0..wl.len() {
            if !(wl[i].is_finite() && wl[i] > 0.0) {
                return Err(err(at[i], format!("wavelength {} is not positive", wl[i])));
            }
            if i > 0 && wl[i] <= wl[i - 1] {
                return Err(err(
                    at[i],
                    format!(
                        "wavelengths must increase: {} µm follows {} µm",
                        wl[i],
                        wl[i - 1]
                    ),
                ));
            }
            if !(refl[i].is_finite() && (0.0..=MAX_REFLECTANCE).contains(&refl[i])) {
                return Err(err(
                    at[i],
                    format!(
                        "`{header}`: reflectance {} is outside 0–{MAX_REFLECTANCE} (percent? \
                         pass --reflectance-scale 0.01)",
                        refl[i]
                    ),
                ));
            }
        }
        if wl.len() < 2 {
            return Err(err(1, format!("`{header}` has fewer than two values")));
        }
        let id = id_from_header(header);
        check_id(&id).map_err(|r| err(1, format!("column `{header}`: {r}")))?;
        members.push(Endmember {
            id,
            name: header.to_string(),
            class: opts.class,
            temperature_k: opts.temperature_k,
            grain_um: opts.grain_um,
            notes: Some(format!("imported from {}", path.display())),
            origin: Origin {
                method: opts.method.clone(),
                sources: opts.sources.clone(),
            },
            wavelength_um: wl,
            reflectance: refl,
        });
    }
    Ok(members)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::library::SourceTag;

    fn opts() -> ImportOptions {
        ImportOptions {
            class: Class::Other,
            method: "test".into(),
            sources: vec![Source {
                tag: SourceTag::Computed,
                citation: "this test".into(),
            }],
            temperature_k: None,
            grain_um: None,
            unit: None,
            scale: 1.0,
        }
    }

    #[test]
    fn ids_come_from_headers() {
        assert_eq!(
            id_from_header("Sulfur, red (S3/S4) #2"),
            "sulfur-red-s3-s4-2"
        );
    }

    #[test]
    fn nanometres_from_the_header_and_two_spectra_per_file() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("lab.csv");
        std::fs::write(
            &p,
            "wavelength_nm,Sample A,Sample B\n400,0.1,0.5\n500,0.2,\n600,0.3,0.6\n",
        )
        .unwrap();
        let m = import_csv(&p, &opts()).unwrap();
        assert_eq!(m.len(), 2);
        assert_eq!(m[0].id, "sample-a");
        assert_eq!(m[0].wavelength_um, vec![0.4, 0.5, 0.6]);
        assert_eq!(m[1].wavelength_um, vec![0.4, 0.6]);
    }

    #[test]
    fn text_in_a_numeric_column_names_the_line() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("lab.csv");
        std::fs::write(&p, "wavelength_um,A\n0.4,0.1\n0.5,n/a\n").unwrap();
        let e = import_csv(&p, &opts()).unwrap_err().to_string();
        assert!(e.contains("lab.csv:3:") && e.contains("`n/a`"), "{e}");
    }

    #[test]
    fn an_unknown_wavelength_unit_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("lab.csv");
        std::fs::write(&p, "lambda,A\n0.4,0.1\n0.5,0.2\n").unwrap();
        let e = import_csv(&p, &opts()).unwrap_err().to_string();
        assert!(e.contains("--wavelength-unit"), "{e}");
    }
}
