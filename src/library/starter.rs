//! The generator of the starter library: parametric reflectance models built from the
//! published band positions collected in the project's reference notes, kept in code so
//! that the shipped `spectra-lib/` can be audited and regenerated
//! (`cargo run --example make_starter_library`).
//!
//! Model: R(λ) = C(λ) · exp(−Σₖ sₖ gₖ(λ)), a continuum C times Gaussian absorptions in
//! log-reflectance, where gₖ is a unit-height Gaussian of the band's FWHM
//! (σ = FWHM / 2.354820, i.e. FWHM = 2√(2 ln 2) σ) and sₖ = −ln(1 − depthₖ), so that a
//! band of strength ln 2 halves the continuum at its centre. The continuum is either a
//! logistic absorption edge (the blue edge of sulfur and the UV edge of SO2 frost) or a
//! straight line.
//!
//! These are models, not laboratory measurements: every member file says so, and users
//! should bring laboratory spectra for science (`thiomap library import`).

use super::{Class, Endmember, Library, Origin, Source, SourceTag};

/// FWHM / σ of a Gaussian: 2 √(2 ln 2).
pub const FWHM_PER_SIGMA: f64 = 2.354_820_045_030_949;

/// The library's sampling: 2 nm over 0.25–1.0 µm (fine enough for 10 nm bands in the
/// visible), 5 nm over 1.0–2.5 µm, 10 nm over 2.5–5.2 µm.
pub fn wavelength_grid() -> Vec<f64> {
    let mut nm: Vec<u32> = (250..1000).step_by(2).collect();
    nm.extend((1000..2500).step_by(5));
    nm.extend((2500..=5200).step_by(10));
    nm.into_iter().map(|n| n as f64 / 1000.0).collect()
}

/// The smooth part of a spectrum.
#[derive(Debug, Clone, Copy)]
pub enum Continuum {
    /// A logistic edge from `low` to `high` whose 50 % point is `half_um` and whose
    /// 10 → 90 % rise spans `rise_um`; beyond the edge the level changes by
    /// `slope_per_um` per µm from `half_um`. Below `ramp_end_um` the whole continuum is
    /// also scaled by 1 − `ramp_per_um` · (`ramp_end_um` − λ): the gentle rise that
    /// continues past an edge (0 for none).
    Edge {
        low: f64,
        high: f64,
        half_um: f64,
        rise_um: f64,
        slope_per_um: f64,
        ramp_end_um: f64,
        ramp_per_um: f64,
    },
    /// `level` at 0.5 µm, changing by `slope_per_um` per µm.
    Line { level: f64, slope_per_um: f64 },
}

impl Continuum {
    pub fn at(&self, wl: f64) -> f64 {
        match *self {
            Continuum::Edge {
                low,
                high,
                half_um,
                rise_um,
                slope_per_um,
                ramp_end_um,
                ramp_per_um,
            } => {
                // 10 → 90 % of a logistic spans 2 ln 9 of its scale.
                let scale = rise_um / (2.0 * 9f64.ln());
                let step = 1.0 / (1.0 + (-(wl - half_um) / scale).exp());
                let top = high + slope_per_um * (wl - half_um).max(0.0);
                let ramp = 1.0 - ramp_per_um * (ramp_end_um - wl).max(0.0);
                (low + (top - low) * step) * ramp
            }
            Continuum::Line {
                level,
                slope_per_um,
            } => level + slope_per_um * (wl - 0.5),
        }
    }
}

/// A Gaussian absorption in log-reflectance.
#[derive(Debug, Clone, Copy)]
pub struct Absorption {
    pub centre_um: f64,
    pub fwhm_um: f64,
    /// Fractional depth at the centre, 0–1.
    pub depth: f64,
}

impl Absorption {
    /// The optical-depth-like strength s with exp(−s) = 1 − depth.
    pub fn strength(&self) -> f64 {
        -(1.0 - self.depth).ln()
    }

    /// The factor this band applies at `wl`.
    pub fn factor(&self, wl: f64) -> f64 {
        let sigma = self.fwhm_um / FWHM_PER_SIGMA;
        let g = (-0.5 * ((wl - self.centre_um) / sigma).powi(2)).exp();
        (-self.strength() * g).exp()
    }
}

/// A member's model: continuum, bands and description.
pub struct Model {
    pub id: &'static str,
    pub name: &'static str,
    pub class: Class,
    pub temperature_k: Option<f64>,
    pub grain_um: Option<f64>,
    pub continuum: Continuum,
    pub bands: Vec<Absorption>,
    pub sources: Vec<(SourceTag, &'static str)>,
}

impl Model {
    pub fn reflectance(&self, wl: f64) -> f64 {
        self.bands
            .iter()
            .fold(self.continuum.at(wl), |r, b| r * b.factor(wl))
    }

    fn member(&self, grid: &[f64]) -> Endmember {
        let reflectance = grid
            .iter()
            .map(|&w| (self.reflectance(w) * 1e5).round() / 1e5)
            .collect();
        let mut sources: Vec<Source> = self
            .sources
            .iter()
            .map(|(tag, c)| Source {
                tag: *tag,
                citation: c.to_string(),
            })
            .collect();
        sources.push(Source {
            tag: SourceTag::Computed,
            citation: "thiomap src/library/starter.rs: continuum × Gaussian bands in \
                       log-reflectance, from the band positions above"
                .into(),
        });
        Endmember {
            id: self.id.into(),
            name: self.name.into(),
            class: self.class,
            temperature_k: self.temperature_k,
            grain_um: self.grain_um,
            notes: Some(
                "A parametric model from published band positions, NOT a laboratory \
                 measurement. Bring laboratory spectra for science (thiomap library import)."
                    .into(),
            ),
            origin: Origin {
                method: "parametric model: continuum times Gaussian absorptions in \
                         log-reflectance, at published band positions"
                    .into(),
                sources,
            },
            wavelength_um: grid.to_vec(),
            reflectance,
        }
    }
}

fn band(centre_um: f64, fwhm_um: f64, depth: f64) -> Absorption {
    Absorption {
        centre_um,
        fwhm_um,
        depth,
    }
}

const MEYER: &str = "Meyer et al. 1972, Adv. Chem. Ser. 110 (sulfur allotrope absorptions)";
const MEYER_S3_S4: &str = "Meyer et al. 1972, Adv. Chem. Ser. 110 (S3 absorbs at 400 nm, S4 at 520 nm; used: 0.40 and 0.52 µm)";
const SILL_GRADIE: &str =
    "Sill & Clark 1982; Gradie & Veverka 1984, Icarus 58 (α-S8 blue edge position, width, levels)";
const NASH: &str =
    "Nash, Fanale & Nelson 1980, GRL 7:665 (SO2 frost UV floor, edge at 0.32 µm, visible level)";
const SO2_IR: &str = "Salama et al. ≈1995, ASP Conf. Ser. 73; Dahmani & Khanna 1996, ApSS 236 (SO2 2ν1+ν3 at 2.790 µm)";
const SO2_IR_MEM: &str =
    "SO2 ν1+ν3 4.07, 2ν3 3.78, 2ν1 4.36, 3.57, 3.35, 1.98, 2.12 µm band positions and depths";
const PYROXENE: &str =
    "Adams 1974, JGR 79:4829; Cloutis & Gaffey 1991, JGR 96:22809 (pyroxene Band I / II)";
const OLIVINE: &str = "Sunshine & Pieters 1998, JGR (olivine composite band)";
const BASALT_BANDS: &str = "Adams 1974, JGR 79:4829 (Fe²⁺ in pyroxene and basaltic glass: a band near 1 µm and a pyroxene band near 2 µm, both shallow in a dark basalt)";
const BASALT_ALBEDO: &str = "Adams & Filice 1967, JGR 72:5705, Spectral reflectance 0.4 to 2.0 microns of silicate rock powders (dark basalt reflectance ≈ 0.05–0.10, rising gently to the infrared)";
const S8_COLD: &str = "Sill & Clark 1982 (sulfur pales on cooling: at 100–130 K the edge lies 0.02–0.04 µm shortward and the blue floor rises, a pale yellow)";

/// The starter members' models, in library order.
pub fn models() -> Vec<Model> {
    let s8 =
        |id, name, half_um, low: f64, temperature_k, sources: Vec<(SourceTag, &'static str)>| {
            Model {
                id,
                name,
                class: Class::SulfurAllotrope,
                temperature_k: Some(temperature_k),
                grain_um: Some(100.0),
                continuum: Continuum::Edge {
                    low,
                    high: 0.95,
                    half_um,
                    rise_um: 0.07,
                    slope_per_um: -0.01,
                    ramp_end_um: 0.60,
                    ramp_per_um: 1.2,
                },
                // No molecular UV bands: below the edge a powder of S8 absorbs so strongly that
                // its reflectance is the flat floor of the edge (from memory), so the 0.26–0.29 µm
                // bands of S8 in solution or thin films cannot show.
                bands: vec![],
                sources,
            }
        };
    let s8_sources = vec![
        (SourceTag::FromMemory, SILL_GRADIE),
        (
            SourceTag::FromMemory,
            "reflectance keeps rising gently through the green to ≈0.6 µm",
        ),
    ];
    let so2 = |id, name, grain_um, high: f64, deep: bool| Model {
        id,
        name,
        class: Class::So2Frost,
        temperature_k: Some(110.0),
        grain_um: Some(grain_um),
        continuum: Continuum::Edge {
            low: 0.02,
            high,
            half_um: 0.322,
            rise_um: 0.02,
            slope_per_um: 0.0,
            ramp_end_um: 0.0,
            ramp_per_um: 0.0,
        },
        bands: if deep {
            vec![
                band(1.98, 0.03, 0.07),
                band(2.12, 0.03, 0.07),
                band(2.79, 0.03, 0.55),
                band(3.35, 0.04, 0.25),
                band(3.57, 0.04, 0.35),
                band(3.78, 0.05, 0.6),
                band(4.07, 0.07, 0.98),
                band(4.36, 0.05, 0.5),
            ]
        } else {
            vec![
                band(2.79, 0.03, 0.3),
                band(3.35, 0.04, 0.1),
                band(3.57, 0.04, 0.15),
                band(3.78, 0.05, 0.35),
                band(4.07, 0.07, 0.9),
                band(4.36, 0.05, 0.3),
            ]
        },
        sources: vec![
            (SourceTag::FromMemory, NASH),
            (SourceTag::FromMemory, SO2_IR),
            (SourceTag::FromMemory, SO2_IR_MEM),
        ],
    };
    vec![
        s8(
            "s8-alpha-room",
            "α-S8, orthorhombic cyclo-octasulfur, room temperature (yellow)",
            0.46,
            0.03,
            295.0,
            s8_sources.clone(),
        ),
        s8(
            "s8-alpha-cold",
            "α-S8, orthorhombic cyclo-octasulfur, cold (pale yellow: edge 0.03 µm shortward, higher blue floor)",
            0.43,
            0.12,
            120.0,
            [
                s8_sources.clone(),
                vec![(SourceTag::FromMemory, S8_COLD)],
            ]
            .concat(),
        ),
        Model {
            id: "sulfur-red-short-chain",
            name: "short-chain sulfur S3/S4, quenched (red)",
            class: Class::SulfurAllotrope,
            temperature_k: Some(130.0),
            grain_um: None,
            // The S3 and S4 bands alone on a bright continuum render pink; red needs the
            // strong blue-green absorption below about 0.6 µm as well (from memory).
            continuum: Continuum::Edge {
                low: 0.04,
                high: 0.62,
                half_um: 0.60,
                rise_um: 0.09,
                slope_per_um: 0.0,
                ramp_end_um: 0.0,
                ramp_per_um: 0.0,
            },
            bands: vec![band(0.40, 0.065, 0.5), band(0.52, 0.10, 0.45)],
            sources: vec![
                (SourceTag::FromMemory, MEYER_S3_S4),
                (
                    SourceTag::FromMemory,
                    "Spencer et al. 2000, Science 288:1208 (condensed S3/S4 colour red plume deposits)",
                ),
                (SourceTag::FromMemory, "band widths; blue-green absorption below 0.6 µm"),
            ],
        },
        Model {
            id: "sulfur-polymeric",
            name: "polymeric (catena) sulfur, quenched (orange-brown)",
            class: Class::SulfurAllotrope,
            temperature_k: Some(295.0),
            grain_um: None,
            continuum: Continuum::Edge {
                low: 0.04,
                high: 0.55,
                half_um: 0.56,
                rise_um: 0.16,
                slope_per_um: 0.0,
                ramp_end_um: 0.0,
                ramp_per_um: 0.0,
            },
            bands: vec![band(0.36, 0.05, 0.4)],
            sources: vec![
                (SourceTag::FromMemory, MEYER),
                (
                    SourceTag::FromMemory,
                    "Moses & Nash 1991, Icarus (quenched orange-brown sulfur edge 0.50–0.60 µm)",
                ),
            ],
        },
        so2(
            "so2-frost-fine",
            "SO2 frost, fine-grained (≈50 µm)",
            50.0,
            0.80,
            false,
        ),
        so2(
            "so2-frost-coarse",
            "SO2 frost, coarse-grained (≈400 µm)",
            400.0,
            0.77,
            true,
        ),
        Model {
            id: "pyroxene-mafic",
            name: "pyroxene-bearing mafic silicate",
            class: Class::Silicate,
            temperature_k: None,
            grain_um: None,
            continuum: Continuum::Line {
                level: 0.16,
                slope_per_um: 0.03,
            },
            bands: vec![
                band(0.30, 0.25, 0.5),
                band(0.93, 0.22, 0.35),
                band(1.95, 0.55, 0.30),
            ],
            sources: vec![(SourceTag::FromMemory, PYROXENE)],
        },
        Model {
            id: "olivine-mafic",
            name: "olivine-bearing mafic silicate",
            class: Class::Silicate,
            temperature_k: None,
            grain_um: None,
            continuum: Continuum::Line {
                level: 0.22,
                slope_per_um: 0.02,
            },
            bands: vec![
                band(0.30, 0.25, 0.45),
                band(0.87, 0.20, 0.15),
                band(1.06, 0.20, 0.35),
                band(1.28, 0.40, 0.30),
            ],
            sources: vec![(SourceTag::FromMemory, OLIVINE)],
        },
        Model {
            id: "basalt-dark",
            name: "dark basaltic lava",
            class: Class::Silicate,
            temperature_k: None,
            grain_um: None,
            continuum: Continuum::Line {
                level: 0.065,
                slope_per_um: 0.008,
            },
            bands: vec![
                band(0.30, 0.25, 0.3),
                band(1.0, 0.30, 0.12),
                band(2.0, 0.50, 0.08),
            ],
            sources: vec![
                (SourceTag::FromMemory, BASALT_BANDS),
                (SourceTag::FromMemory, BASALT_ALBEDO),
            ],
        },
    ]
}

/// The starter library as generated now.
pub fn starter_library() -> Library {
    let grid = wavelength_grid();
    Library {
        name: "thiomap starter library (parametric models)".into(),
        version: "0.2.0".into(),
        origin: "generated".into(),
        members: models().iter().map(|m| m.member(&grid)).collect(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gaussian_fwhm_over_sigma_is_2_354820() {
        // REFERENCES #14, analytic: FWHM = 2 √(2 ln 2) σ.
        assert!((FWHM_PER_SIGMA - 2.354820).abs() < 1e-6);
        let b = band(1.0, 0.1, 0.5);
        let sigma = 0.1 / FWHM_PER_SIGMA;
        // At half the FWHM from the centre, g = 1/2.
        let g_half = (-0.5f64 * (0.05 / sigma).powi(2)).exp();
        assert!((g_half - 0.5).abs() < 1e-9);
        assert!((b.factor(1.0) - 0.5).abs() < 1e-12);
    }

    #[test]
    fn strength_ln2_gives_depth_one_half() {
        // REFERENCES #14, analytic: exp(−ln 2) = 1/2.
        let b = band(2.0, 0.2, 0.5);
        assert!((b.strength() - std::f64::consts::LN_2).abs() < 1e-12);
    }

    #[test]
    fn the_logistic_edge_rises_from_10_to_90_percent_over_its_stated_width() {
        let c = Continuum::Edge {
            low: 0.0,
            high: 1.0,
            half_um: 0.45,
            rise_um: 0.07,
            slope_per_um: 0.0,
            ramp_end_um: 0.0,
            ramp_per_um: 0.0,
        };
        assert!((c.at(0.45) - 0.5).abs() < 1e-12);
        assert!((c.at(0.45 - 0.035) - 0.1).abs() < 1e-9);
        assert!((c.at(0.45 + 0.035) - 0.9).abs() < 1e-9);
    }

    #[test]
    fn the_grid_spans_the_stated_range_and_steps() {
        let g = wavelength_grid();
        assert_eq!(g[0], 0.25);
        assert_eq!(*g.last().unwrap(), 5.2);
        assert!(g.windows(2).all(|w| w[1] > w[0]));
        assert!((g[1] - g[0] - 0.002).abs() < 1e-12);
    }
}
