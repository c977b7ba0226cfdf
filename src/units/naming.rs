//! How units look and read: the spectra their colours are rendered from, labels made
//! distinct where two units share one, and colours nudged apart (thiomap's own scheme:
//! each unit in the sRGB colour of its mean modelled spectrum, CIE 1931 observer, D65).

use super::{rules, Unit, MIN_DELTA_E};
use crate::colour::{delta_e, srgb8_to_lab};
use crate::library::Library;

/// The reflectance spectrum of each material id (a member, or a group's mean) on a common
/// wavelength grid, for unit colours and plots.
pub struct MaterialSpectra {
    pub wavelength_um: Vec<f64>,
    pub spectra: Vec<Vec<f64>>,
}

impl MaterialSpectra {
    /// The spectra of `ids` (members or `+`-joined groups) from `library`, on the first
    /// member's wavelengths within the range every member covers.
    pub fn new(library: &Library, ids: &[String]) -> MaterialSpectra {
        let lo = library
            .members
            .iter()
            .map(|m| m.coverage_um().0)
            .fold(0.0, f64::max);
        let hi = library
            .members
            .iter()
            .map(|m| m.coverage_um().1)
            .fold(f64::INFINITY, f64::min);
        let grid: Vec<f64> = library.members[0]
            .wavelength_um
            .iter()
            .cloned()
            .filter(|w| *w >= lo && *w <= hi)
            .collect();
        let spectra = ids
            .iter()
            .map(|id| {
                let parts: Vec<_> = id
                    .split('+')
                    .filter_map(|p| library.members.iter().find(|m| m.id == p))
                    .collect();
                grid.iter()
                    .map(|&w| {
                        parts.iter().filter_map(|m| m.at(w)).sum::<f64>()
                            / parts.len().max(1) as f64
                    })
                    .collect()
            })
            .collect();
        MaterialSpectra {
            wavelength_um: grid,
            spectra,
        }
    }

    /// The linear mixture of the spectra with weights `a`.
    pub fn mix(&self, a: &[f64]) -> Vec<f64> {
        (0..self.wavelength_um.len())
            .map(|i| self.spectra.iter().zip(a).map(|(s, w)| s[i] * w).sum())
            .collect()
    }
}

/// Units that share a label get their two largest members added to it
/// ("…: basalt-dark 58 % / pyroxene-mafic 28 %"), so a legend never shows two identical names.
pub(super) fn disambiguate_labels(units: &mut [Unit], ids: &[String]) {
    let labels: Vec<String> = units.iter().map(|u| u.label.clone()).collect();
    for u in units.iter_mut() {
        if u.class == rules::UNEXPLAINED || labels.iter().filter(|l| **l == u.label).count() < 2 {
            continue;
        }
        let mut order: Vec<usize> = (0..u.mean.len()).collect();
        order.sort_by(|&a, &b| u.mean[b].total_cmp(&u.mean[a]));
        let top: Vec<String> = order
            .iter()
            .take(2)
            .map(|&i| format!("{} {:.0} %", ids[i], 100.0 * u.mean[i]))
            .collect();
        u.label = format!("{}: {}", u.label, top.join(" / "));
    }
}

/// Makes each unit's colour differ by at least [`MIN_DELTA_E`] from the ones before it,
/// by scaling it darker or lighter in 12 % steps (alternating), at most eight times.
pub(super) fn nudge_colours(units: &mut [Unit]) {
    for i in 1..units.len() {
        let original = units[i].colour;
        for step in 0..=8 {
            let factor = if step == 0 {
                1.0
            } else {
                let s = (step + 1) / 2;
                if step % 2 == 1 {
                    1.0 - 0.12 * s as f64
                } else {
                    1.0 + 0.12 * s as f64
                }
            };
            let candidate = original.map(|v| (v as f64 * factor).round().clamp(0.0, 255.0) as u8);
            let lab = srgb8_to_lab(candidate);
            if units[..i]
                .iter()
                .all(|u| delta_e(srgb8_to_lab(u.colour), lab) >= MIN_DELTA_E)
            {
                units[i].colour = candidate;
                break;
            }
        }
    }
}
