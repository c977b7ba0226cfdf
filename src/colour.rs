//! The colour a reflectance spectrum has to the eye: CIE 1931 2° colour-matching
//! functions under illuminant D65 (CIE 15; both from the colorimetry crate, 1 nm steps over
//! 380–780 nm), then XYZ → linear sRGB → the sRGB transfer function (IEC 61966-2-1).
//!
//! A spectrum known at a set of wavelengths (a cube's band centres, or a library grid) is
//! taken as piecewise linear between them and flat beyond the first and last, so XYZ is a
//! fixed linear function of the samples: [`ColourMatrix`] precomputes that 3 × n matrix once
//! per band set, and rendering a pixel is three dot products.
//!
//! Few visible bands: with three or more band centres inside 380–780 nm the spectrum is
//! interpolated across them as above. With fewer, a true colour cannot be formed and the
//! rule is **false colour**: the shortest band is drawn as blue, the middle band (by index)
//! as green and the longest as red, each reflectance (0–1) passed through the sRGB transfer
//! function. Every picture made that way says so.

use colorimetry::illuminant::Illuminant;
use colorimetry::observer::Observer;

/// XYZ (D65 white, Y = 1) → linear sRGB, IEC 61966-2-1.
const XYZ_TO_SRGB: [[f64; 3]; 3] = [
    [3.2406255, -1.5372080, -0.4986286],
    [-0.9689307, 1.8757561, 0.0415175],
    [0.0557101, -0.2040211, 1.0569959],
];

/// How pixels of a band set become colours.
#[derive(Debug, Clone, PartialEq)]
pub enum ColourMatrix {
    /// True colour: XYZ = W · R, with W 3 × n.
    True { weights: [Vec<f64>; 3] },
    /// False colour from three bands (indices of blue, green, red).
    False {
        blue: usize,
        green: usize,
        red: usize,
    },
}

/// The CIE 1931 2° colour-matching functions times D65, per nm from 380 to 780,
/// normalised so a perfect white has Y = 1.
fn weighted_cmfs() -> Vec<(f64, [f64; 3])> {
    let d65 = Illuminant::d65();
    let spd = d65.as_ref().as_array();
    let obs = Observer::Cie1931;
    let mut rows: Vec<(f64, [f64; 3])> = (380..=780usize)
        .map(|nm| {
            let xyz = obs
                .xyz_at_wavelength(nm)
                .expect("380–780 nm is the observer's range")
                .to_array();
            let s = spd[nm - 380];
            (nm as f64 / 1000.0, [s * xyz[0], s * xyz[1], s * xyz[2]])
        })
        .collect();
    let norm: f64 = rows.iter().map(|(_, w)| w[1]).sum();
    for (_, w) in &mut rows {
        for v in w.iter_mut() {
            *v /= norm;
        }
    }
    rows
}

impl ColourMatrix {
    /// The colour matrix for spectra known at `centres_um` (increasing).
    pub fn for_wavelengths(centres_um: &[f64]) -> ColourMatrix {
        let n = centres_um.len();
        let visible = centres_um
            .iter()
            .filter(|&&c| (0.38..=0.78).contains(&c))
            .count();
        if visible < 3 || n < 3 {
            return ColourMatrix::False {
                blue: 0,
                green: n / 2,
                red: n - 1,
            };
        }
        let mut weights = [vec![0.0; n], vec![0.0; n], vec![0.0; n]];
        for (wl, w) in weighted_cmfs() {
            // Linear interpolation weights of the samples at wl (flat beyond the ends).
            let i = centres_um.partition_point(|&c| c <= wl);
            let spread: [(usize, f64); 2] = if i == 0 {
                [(0, 1.0), (0, 0.0)]
            } else if i >= n {
                [(n - 1, 1.0), (n - 1, 0.0)]
            } else {
                let t = (wl - centres_um[i - 1]) / (centres_um[i] - centres_um[i - 1]);
                [(i - 1, 1.0 - t), (i, t)]
            };
            for (k, f) in spread {
                for c in 0..3 {
                    weights[c][k] += f * w[c];
                }
            }
        }
        ColourMatrix::True { weights }
    }

    pub fn is_false_colour(&self) -> bool {
        matches!(self, ColourMatrix::False { .. })
    }

    /// XYZ (white Y = 1) of a spectrum; `None` in false colour.
    pub fn xyz(&self, spectrum: &[f64]) -> Option<[f64; 3]> {
        match self {
            ColourMatrix::True { weights } => Some([0, 1, 2].map(|c| {
                weights[c]
                    .iter()
                    .zip(spectrum)
                    .map(|(w, r)| w * r)
                    .sum::<f64>()
            })),
            ColourMatrix::False { .. } => None,
        }
    }

    /// The 8-bit sRGB colour of a spectrum (out-of-gamut values clipped).
    pub fn srgb8(&self, spectrum: &[f64]) -> [u8; 3] {
        match self {
            ColourMatrix::True { .. } => {
                xyz_to_srgb8(self.xyz(spectrum).expect("true colour has XYZ"))
            }
            ColourMatrix::False { blue, green, red } => {
                [*red, *green, *blue].map(|i| encode8(spectrum[i]))
            }
        }
    }

    /// The same for f32 samples (pixels).
    pub fn srgb8_f32(&self, spectrum: &[f32]) -> [u8; 3] {
        let v: Vec<f64> = spectrum.iter().map(|&x| x as f64).collect();
        self.srgb8(&v)
    }
}

/// The sRGB transfer function (IEC 61966-2-1) of a linear value in 0–1.
pub fn encode(linear: f64) -> f64 {
    let v = linear.clamp(0.0, 1.0);
    if v <= 0.0031308 {
        12.92 * v
    } else {
        1.055 * v.powf(1.0 / 2.4) - 0.055
    }
}

fn encode8(linear: f64) -> u8 {
    (encode(linear) * 255.0).round() as u8
}

/// XYZ (white Y = 1) → 8-bit sRGB.
pub fn xyz_to_srgb8(xyz: [f64; 3]) -> [u8; 3] {
    XYZ_TO_SRGB.map(|row| encode8(row[0] * xyz[0] + row[1] * xyz[1] + row[2] * xyz[2]))
}

/// The D65 white point of these colour-matching functions (a flat reflectance of 1).
pub fn white_xyz() -> [f64; 3] {
    let mut w = [0.0; 3];
    for (_, v) in weighted_cmfs() {
        for c in 0..3 {
            w[c] += v[c];
        }
    }
    w
}

/// CIE 1976 L*a*b* of XYZ against the D65 white.
pub fn xyz_to_lab(xyz: [f64; 3]) -> [f64; 3] {
    let white = white_xyz();
    let f = |t: f64| {
        let d: f64 = 6.0 / 29.0;
        if t > d.powi(3) {
            t.cbrt()
        } else {
            t / (3.0 * d * d) + 4.0 / 29.0
        }
    };
    let [fx, fy, fz] = [0, 1, 2].map(|c| f(xyz[c] / white[c]));
    [116.0 * fy - 16.0, 500.0 * (fx - fy), 200.0 * (fy - fz)]
}

/// L*, C*, h (degrees, 0–360) of L*a*b*.
pub fn lab_to_lch(lab: [f64; 3]) -> [f64; 3] {
    let c = lab[1].hypot(lab[2]);
    let h = lab[2].atan2(lab[1]).to_degrees().rem_euclid(360.0);
    [lab[0], c, h]
}

/// CIE 1976 colour difference ΔE*ab.
pub fn delta_e(a: [f64; 3], b: [f64; 3]) -> f64 {
    ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2) + (a[2] - b[2]).powi(2)).sqrt()
}

/// An 8-bit sRGB colour as `#rrggbb`.
pub fn hex(rgb: [u8; 3]) -> String {
    format!("#{:02x}{:02x}{:02x}", rgb[0], rgb[1], rgb[2])
}

/// The inverse of the sRGB transfer function (IEC 61966-2-1).
pub fn decode(encoded: f64) -> f64 {
    if encoded <= 0.04045 {
        encoded / 12.92
    } else {
        ((encoded + 0.055) / 1.055).powf(2.4)
    }
}

/// CIE L*a*b* (D65) of an 8-bit sRGB colour.
pub fn srgb8_to_lab(rgb: [u8; 3]) -> [f64; 3] {
    // Linear sRGB → XYZ (IEC 61966-2-1), white Y = 1.
    const M: [[f64; 3]; 3] = [
        [0.4124564, 0.3575761, 0.1804375],
        [0.2126729, 0.7151522, 0.0721750],
        [0.0193339, 0.1191920, 0.9503041],
    ];
    let lin = rgb.map(|v| decode(v as f64 / 255.0));
    xyz_to_lab(M.map(|row| row[0] * lin[0] + row[1] * lin[1] + row[2] * lin[2]))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_flat_unit_spectrum_is_white() {
        // REFERENCES #17: CIE 15 / IEC 61966-2-1: XYZ ≈ (95.04, 100.00, 108.86), sRGB 255.
        let m = ColourMatrix::for_wavelengths(&[0.4, 0.5, 0.6, 0.7]);
        let xyz = m.xyz(&[1.0; 4]).unwrap();
        assert!((xyz[0] * 100.0 - 95.04).abs() < 0.05, "{xyz:?}");
        assert!((xyz[1] * 100.0 - 100.0).abs() < 1e-9);
        assert!((xyz[2] * 100.0 - 108.86).abs() < 0.05, "{xyz:?}");
        let rgb = m.srgb8(&[1.0; 4]);
        assert!(rgb.iter().all(|&v| v >= 254), "{rgb:?}");
    }

    #[test]
    fn few_visible_bands_fall_back_to_false_colour() {
        let m = ColourMatrix::for_wavelengths(&[0.45, 1.2, 2.0, 3.0]);
        assert!(m.is_false_colour());
        assert_eq!(m.srgb8(&[0.0, 0.5, 0.2, 1.0]), [255, encode8(0.2), 0]);
    }

    #[test]
    fn lab_of_white_and_black() {
        // Common practice (CIE 1976): the white point has L* = 100, a* = b* = 0.
        let lab = xyz_to_lab(white_xyz());
        assert!((lab[0] - 100.0).abs() < 1e-9 && lab[1].abs() < 1e-9 && lab[2].abs() < 1e-9);
        assert!(xyz_to_lab([0.0; 3])[0].abs() < 1e-9);
    }
}
