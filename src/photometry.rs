//! Photometric normalisation: divides each pixel's spectrum by the brightness a disk-resolved
//! surface takes from its viewing geometry, using the cube's incidence (and emission)
//! backplanes, so that the shade member is left only the shading the law does not model
//! (topography, roughness). Without it, the shade member must also absorb the whole
//! limb-to-terminator darkening, and on a few visible bands dark, flat members trade off
//! against it.
//!
//! Laws (the usual disk-resolved forms, normalised to 1 at i = e = 0; Hapke 1993,
//! *Theory of Reflectance and Emittance Spectroscopy*, ch. 8): Lambert P = cos i;
//! Lommel–Seeliger P = 2 cos i / (cos i + cos e).
//!
//! Pixels whose factor is below [`MIN_FACTOR`] (grazing sun, night side) are marked as
//! no-data and counted: dividing by a near-zero factor would only amplify their noise.
//!
//! This module does no I/O and never prints.

use std::collections::BTreeMap;

use ndarray::{s, Array2, ArrayViewMut2, ArrayViewMut3};

use crate::backplane::Backplane;

/// Factors below this (incidence beyond about 84° under Lambert) are masked.
pub const MIN_FACTOR: f64 = 0.1;

/// The photometric law.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Law {
    Lambert,
    LommelSeeliger,
}

impl Law {
    pub fn name(self) -> &'static str {
        match self {
            Law::Lambert => "lambert",
            Law::LommelSeeliger => "lommel-seeliger",
        }
    }

    pub fn parse(s: &str) -> Option<Law> {
        [Law::Lambert, Law::LommelSeeliger]
            .into_iter()
            .find(|l| l.name() == s)
    }

    /// The photometric factor from μ₀ = cos i and μ = cos e, 1 at i = e = 0; 0 on the night
    /// side.
    pub fn factor(self, mu0: f64, mu: f64) -> f64 {
        if mu0 <= 0.0 {
            return 0.0;
        }
        match self {
            Law::Lambert => mu0,
            Law::LommelSeeliger => 2.0 * mu0 / (mu0 + mu.max(0.0)),
        }
    }

    /// The backplanes the law needs.
    pub fn needs(self) -> &'static [Backplane] {
        match self {
            Law::Lambert => &[Backplane::Incidence],
            Law::LommelSeeliger => &[Backplane::Incidence, Backplane::Emission],
        }
    }
}

/// Why a cube cannot be normalised.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PhotometryError {
    #[error(
        "photometry {law}: the cube has no {plane} backplane; drop --photometry or add the \
         backplane (an image extension {extname} in degrees)"
    )]
    MissingBackplane {
        law: &'static str,
        plane: &'static str,
        extname: &'static str,
    },
}

/// Normalises the spectra `data` (row, column, band) in place by `law`, with the angles
/// of `backplanes`; returns the number of valid pixels (`valid`) masked because their
/// factor fell below [`MIN_FACTOR`].
pub fn normalise(
    mut data: ArrayViewMut3<f32>,
    mut valid: ArrayViewMut2<bool>,
    backplanes: &BTreeMap<Backplane, Array2<f32>>,
    law: Law,
) -> Result<usize, PhotometryError> {
    for plane in law.needs() {
        if !backplanes.contains_key(plane) {
            return Err(PhotometryError::MissingBackplane {
                law: law.name(),
                plane: plane.name(),
                extname: plane.extname(),
            });
        }
    }
    let incidence = &backplanes[&Backplane::Incidence];
    let emission = backplanes.get(&Backplane::Emission);
    let mut masked = 0;
    for ((r, c), ok) in valid.indexed_iter_mut() {
        if !*ok {
            continue;
        }
        let mu0 = (incidence[(r, c)] as f64).to_radians().cos();
        let mu = emission.map_or(1.0, |e| (e[(r, c)] as f64).to_radians().cos());
        let p = law.factor(mu0, mu);
        if p.is_nan() || p < MIN_FACTOR {
            *ok = false;
            masked += 1;
            continue;
        }
        let inv = (1.0 / p) as f32;
        for v in data.slice_mut(s![r, c, ..]) {
            *v *= inv;
        }
    }
    Ok(masked)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array3;

    /// Spectra, validity and backplanes of one row of pixels.
    struct Cube {
        data: Array3<f32>,
        valid: Array2<bool>,
        backplanes: BTreeMap<Backplane, Array2<f32>>,
    }

    fn normalise(cube: &mut Cube, law: Law) -> Result<usize, PhotometryError> {
        super::normalise(
            cube.data.view_mut(),
            cube.valid.view_mut(),
            &cube.backplanes,
            law,
        )
    }

    fn cube_with(incidence: &[f32], emission: Option<&[f32]>, law: Law) -> Cube {
        let n = incidence.len();
        let spectrum = [0.2f32, 0.4, 0.6];
        let data = Array3::from_shape_fn((1, n, 3), |(_, c, b)| {
            let mu0 = (incidence[c] as f64).to_radians().cos();
            let mu = emission.map_or(1.0, |e| (e[c] as f64).to_radians().cos());
            spectrum[b] * law.factor(mu0, mu) as f32
        });
        let mut cube = Cube {
            data,
            valid: Array2::from_elem((1, n), true),
            backplanes: BTreeMap::new(),
        };
        let plane = |v: &[f32]| Array2::from_shape_fn((1, n), |(_, c)| v[c]);
        cube.backplanes
            .insert(Backplane::Incidence, plane(incidence));
        if let Some(e) = emission {
            cube.backplanes.insert(Backplane::Emission, plane(e));
        }
        cube
    }

    #[test]
    fn normalising_by_the_generating_law_recovers_the_spectrum() {
        // Lambert P = cos i and Lommel–Seeliger P = 2 cos i / (cos i + cos e), both 1 at
        // i = e = 0 (Hapke 1993, ch. 8). Pixels past the factor floor are masked.
        for law in [Law::Lambert, Law::LommelSeeliger] {
            let inc = [0.0f32, 30.0, 60.0, 80.0, 89.0];
            let emi = [0.0f32, 10.0, 45.0, 20.0, 5.0];
            let mut cube = cube_with(&inc, Some(&emi), law);
            let masked = normalise(&mut cube, law).unwrap();
            let kept: Vec<usize> = (0..inc.len())
                .filter(|&c| {
                    let mu0 = (inc[c] as f64).to_radians().cos();
                    let mu = (emi[c] as f64).to_radians().cos();
                    law.factor(mu0, mu) >= MIN_FACTOR
                })
                .collect();
            assert_eq!(masked, inc.len() - kept.len(), "{law:?}");
            assert!(masked >= 1, "89° incidence is past the floor under {law:?}");
            for c in 0..inc.len() {
                assert_eq!(cube.valid[(0, c)], kept.contains(&c));
            }
            for &c in &kept {
                for (b, want) in [0.2f32, 0.4, 0.6].iter().enumerate() {
                    let got = cube.data[(0, c, b)];
                    assert!(
                        (got - want).abs() < 1e-5,
                        "{law:?} pixel {c}: {got} vs {want}"
                    );
                }
            }
        }
    }

    #[test]
    fn lommel_seeliger_is_one_where_incidence_equals_emission() {
        // 2μ/(μ + μ) = 1 at i = e: the law's well-known symmetry (common practice).
        for deg in [0.0f64, 20.0, 50.0, 75.0] {
            let mu = deg.to_radians().cos();
            assert!((Law::LommelSeeliger.factor(mu, mu) - 1.0).abs() < 1e-12);
        }
        assert_eq!(Law::Lambert.factor(-0.1, 1.0), 0.0);
    }

    #[test]
    fn a_missing_backplane_is_named() {
        let mut cube = cube_with(&[10.0], None, Law::Lambert);
        let err = normalise(&mut cube, Law::LommelSeeliger).unwrap_err();
        assert!(err.to_string().contains("no emission backplane"), "{err}");
        cube.backplanes.clear();
        let err = normalise(&mut cube, Law::Lambert).unwrap_err();
        assert!(err.to_string().contains("EXTNAME") || err.to_string().contains("INCIDENCE"));
    }
}
