//! The library as a CSV table: `wavelength_um`, then one column per member id, either on
//! the union of the members' own wavelengths (empty where a member has no data; five
//! decimals) or resampled to a band set (one row per band centre; six decimals). Bytes
//! only: the caller writes them.

use super::resample::Resampled;
use super::Library;

/// The table on the members' own wavelengths, within `range_um` when given.
pub fn own_wavelengths_csv(
    lib: &Library,
    range_um: Option<(f64, f64)>,
) -> Result<Vec<u8>, csv::Error> {
    let mut w = writer(lib)?;
    let mut grid: Vec<f64> = lib
        .members
        .iter()
        .flat_map(|m| m.wavelength_um.iter().cloned())
        .filter(|w| range_um.is_none_or(|(lo, hi)| *w >= lo && *w <= hi))
        .collect();
    grid.sort_by(f64::total_cmp);
    grid.dedup();
    for wl in grid {
        let mut row = vec![format!("{wl}")];
        row.extend(
            lib.members
                .iter()
                .map(|m| m.at(wl).map(|v| format!("{v:.5}")).unwrap_or_default()),
        );
        w.write_record(&row)?;
    }
    finish(w)
}

/// The table of the library resampled to a band set.
pub fn resampled_csv(lib: &Library, r: &Resampled) -> Result<Vec<u8>, csv::Error> {
    resampled_csv_with(lib, r, &[])
}

/// [`resampled_csv`] with extra columns after the members (name, one value per band),
/// written with seven significant digits.
pub fn resampled_csv_with(
    lib: &Library,
    r: &Resampled,
    extra: &[(String, Vec<f64>)],
) -> Result<Vec<u8>, csv::Error> {
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut header = vec!["wavelength_um".to_string()];
    header.extend(lib.members.iter().map(|m| m.id.clone()));
    header.extend(extra.iter().map(|(n, _)| n.clone()));
    w.write_record(&header)?;
    for (i, c) in r.centres_um.iter().enumerate() {
        let mut row = vec![format!("{c}")];
        row.extend(r.matrix.row(i).iter().map(|v| format!("{v:.6}")));
        row.extend(extra.iter().map(|(_, v)| format!("{:.6e}", v[i])));
        w.write_record(&row)?;
    }
    finish(w)
}

/// A CSV writer with the header written.
fn writer(lib: &Library) -> Result<csv::Writer<Vec<u8>>, csv::Error> {
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut header = vec!["wavelength_um".to_string()];
    header.extend(lib.members.iter().map(|m| m.id.clone()));
    w.write_record(&header)?;
    Ok(w)
}

fn finish(w: csv::Writer<Vec<u8>>) -> Result<Vec<u8>, csv::Error> {
    w.into_inner().map_err(|e| e.into_error().into())
}
