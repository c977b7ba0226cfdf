//! Band selection shared by every command that takes a cube or a band set:
//! `--range MIN-MAX` (µm, inclusive) keeps bands whose centres lie in the range, and
//! `--exclude-bands LIST` drops bands by number (1-based, as `inspect` prints them;
//! `3,5-7`). Used to drop thermal bands or bands a library does not cover.

use super::{BandTable, Cube};

/// A band selection as given on the command line.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct BandSelection {
    /// Keep centres within [min, max] µm.
    pub range_um: Option<(f64, f64)>,
    /// Band numbers (1-based) to drop.
    pub exclude: Vec<usize>,
}

impl BandSelection {
    pub fn is_all(&self) -> bool {
        self.range_um.is_none() && self.exclude.is_empty()
    }

    /// Parses `MIN-MAX` in µm, e.g. `0.4-2.5`.
    pub fn parse_range(s: &str) -> Result<(f64, f64), String> {
        let (a, b) = s
            .split_once('-')
            .ok_or_else(|| format!("`{s}` is not MIN-MAX in µm (e.g. 0.4-2.5)"))?;
        let parse = |t: &str| {
            t.trim()
                .parse::<f64>()
                .ok()
                .filter(|v| v.is_finite() && *v >= 0.0)
                .ok_or_else(|| format!("`{t}` in `{s}` is not a wavelength in µm"))
        };
        let (lo, hi) = (parse(a)?, parse(b)?);
        if lo >= hi {
            return Err(format!("`{s}`: MIN must be below MAX"));
        }
        Ok((lo, hi))
    }

    /// Parses a band list such as `3,5-7` (1-based, inclusive ranges).
    pub fn parse_list(s: &str) -> Result<Vec<usize>, String> {
        let mut out = Vec::new();
        for part in s.split(',').map(str::trim).filter(|p| !p.is_empty()) {
            let num = |t: &str| {
                t.trim()
                    .parse::<usize>()
                    .ok()
                    .filter(|v| *v >= 1)
                    .ok_or_else(|| format!("`{t}` is not a band number (bands count from 1)"))
            };
            match part.split_once('-') {
                Some((a, b)) => {
                    let (a, b) = (num(a)?, num(b)?);
                    if a > b {
                        return Err(format!("`{part}`: the first band must not exceed the last"));
                    }
                    out.extend(a..=b);
                }
                None => out.push(num(part)?),
            }
        }
        out.sort_unstable();
        out.dedup();
        Ok(out)
    }

    /// The 0-based indices of the bands kept, in order. At least two must remain.
    pub fn apply(&self, bands: &BandTable) -> Result<Vec<usize>, String> {
        if let Some(&bad) = self.exclude.iter().find(|&&b| b > bands.len()) {
            return Err(format!(
                "--exclude-bands {bad}: there are only {} bands",
                bands.len()
            ));
        }
        let kept: Vec<usize> = bands
            .bands()
            .iter()
            .enumerate()
            .filter(|(i, b)| {
                !self.exclude.contains(&(i + 1))
                    && self
                        .range_um
                        .is_none_or(|(lo, hi)| b.centre_um >= lo && b.centre_um <= hi)
            })
            .map(|(i, _)| i)
            .collect();
        if kept.len() < 2 {
            return Err(format!(
                "the band selection leaves {} of {} bands; at least two are needed",
                kept.len(),
                bands.len()
            ));
        }
        Ok(kept)
    }
}

impl BandTable {
    /// The bands at `indices` (which must be valid and increasing).
    pub fn subset(&self, indices: &[usize]) -> BandTable {
        let table = BandTable::new(indices.iter().map(|&i| self.bands()[i].clone()).collect())
            .expect("a subset of a valid table in order is valid");
        match self.noise_sigma() {
            Some(s) => table
                .with_noise_sigma(indices.iter().map(|&i| s[i]).collect())
                .expect("a subset of valid noise values is valid"),
            None => table,
        }
    }
}

impl Cube {
    /// Keeps only the bands at `indices`; the mask is recomputed from the kept samples.
    pub fn select_bands(&mut self, indices: &[usize]) {
        if indices.len() == self.info.bands.len() {
            return;
        }
        // `select` may return a non-standard layout; pixels must stay contiguous.
        let data = self
            .data
            .select(ndarray::Axis(2), indices)
            .as_standard_layout()
            .into_owned();
        self.info.bands = self.info.bands.subset(indices);
        let block = super::Block::from_samples(0, data);
        self.data = block.data;
        self.valid = block.valid;
        self.nonfinite_samples = block.nonfinite_samples;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn table(n: usize) -> BandTable {
        BandTable::evenly_spaced(n, 0.5, 0.5).unwrap()
    }

    #[test]
    fn ranges_and_lists_parse() {
        assert_eq!(BandSelection::parse_range("0.4-2.5").unwrap(), (0.4, 2.5));
        assert!(BandSelection::parse_range("2.5-0.4").is_err());
        assert!(BandSelection::parse_range("a-b").is_err());
        assert_eq!(
            BandSelection::parse_list("3, 5-7,3").unwrap(),
            vec![3, 5, 6, 7]
        );
        assert!(BandSelection::parse_list("0").is_err());
        assert!(BandSelection::parse_list("4-2").is_err());
    }

    #[test]
    fn selection_keeps_bands_in_range_and_not_excluded() {
        let t = table(8); // 0.5, 1.0, … 4.0 µm
        let s = BandSelection {
            range_um: Some((0.9, 3.0)),
            exclude: vec![3],
        };
        assert_eq!(s.apply(&t).unwrap(), vec![1, 3, 4, 5]);
        let s = BandSelection {
            range_um: None,
            exclude: vec![9],
        };
        assert!(s.apply(&t).unwrap_err().contains("only 8 bands"));
        let s = BandSelection {
            range_um: Some((0.4, 0.6)),
            exclude: vec![],
        };
        assert!(s.apply(&t).unwrap_err().contains("at least two"));
    }
}
