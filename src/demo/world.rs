//! Brimveil, the fictional sulfur-volcanic moon of the demo scenes: its surface units, their
//! compositions, and where they lie. Nothing here describes a real body.
//!
//! Geography, as (latitude, longitude) in degrees, east positive:
//! - **Saffron Plains** cover everything not claimed below: cold yellow sulfur with frost
//!   and a little dark silicate.
//! - **Hoarfrost Expanse** caps both poles poleward of ±52°, blending in over 8°.
//! - **Tolvar Kiln** (8° N, 18° W) is an active vent: a dark **Kiln Floor** of radius 9°
//!   ringed by the fresh red **Ember Ring** (out to 17°, fading over 6°).
//! - **Sesk Kiln** (22° S, 30° E), a quiet caldera with a Kiln Floor of radius 7°, feeds
//!   the **Cinder Flows**, a lava flow 9° wide running north-east.
//! - Two **Rust Patches** of polymeric sulfur.
//!
//! Later features overlay earlier ones; each blends over its stated width, so transition
//! zones hold true mixtures.

/// A surface unit: its name and its composition over library member ids.
#[derive(Debug, Clone, PartialEq)]
pub struct Unit {
    pub name: &'static str,
    pub composition: &'static [(&'static str, f64)],
}

/// The units, in label order (label = index + 1; 0 is sky).
pub const UNITS: [Unit; 6] = [
    Unit {
        name: "Saffron Plains",
        composition: &[("s8-alpha-cold", 0.75), ("so2-frost-fine", 0.25)],
    },
    Unit {
        name: "Hoarfrost Expanse",
        composition: &[
            ("so2-frost-fine", 0.45),
            ("so2-frost-coarse", 0.35),
            ("s8-alpha-cold", 0.20),
        ],
    },
    Unit {
        name: "Cinder Flows",
        composition: &[
            ("basalt-dark", 0.60),
            ("pyroxene-mafic", 0.30),
            ("s8-alpha-cold", 0.10),
        ],
    },
    Unit {
        name: "Kiln Floors",
        composition: &[
            ("basalt-dark", 0.60),
            ("olivine-mafic", 0.30),
            ("sulfur-polymeric", 0.10),
        ],
    },
    Unit {
        name: "Ember Ring",
        composition: &[
            ("sulfur-red-short-chain", 0.75),
            ("s8-alpha-cold", 0.15),
            ("so2-frost-fine", 0.10),
        ],
    },
    Unit {
        name: "Rust Patches",
        composition: &[
            ("sulfur-polymeric", 0.65),
            ("s8-alpha-room", 0.25),
            ("basalt-dark", 0.10),
        ],
    },
];

const PLAINS: usize = 0;
const FROST: usize = 1;
const FLOWS: usize = 2;
const FLOORS: usize = 3;
const RING: usize = 4;
const RUST: usize = 5;

/// The shape of a feature on the sphere.
#[derive(Debug, Clone, Copy)]
enum Shape {
    /// Poleward of |latitude| ≥ `lat_deg` (both hemispheres).
    Caps { lat_deg: f64 },
    /// Within `radius_deg` of a point.
    Disc { lat: f64, lon: f64, radius_deg: f64 },
    /// Within `width_deg / 2` of the great-circle segment from a to b.
    Strip {
        a: (f64, f64),
        b: (f64, f64),
        width_deg: f64,
    },
}

/// A named feature: a shape filled with a unit, blending in over `blend_deg` outside.
#[derive(Debug, Clone, Copy)]
pub struct Feature {
    pub name: &'static str,
    unit: usize,
    shape: Shape,
    blend_deg: f64,
}

/// The features, in overlay order (later ones win).
pub const FEATURES: [Feature; 7] = [
    Feature {
        name: "Hoarfrost Expanse (polar caps)",
        unit: FROST,
        shape: Shape::Caps { lat_deg: 52.0 },
        blend_deg: 8.0,
    },
    Feature {
        name: "Cinder Flows of Sesk Kiln",
        unit: FLOWS,
        shape: Shape::Strip {
            a: (-22.0, 30.0),
            b: (4.0, 58.0),
            width_deg: 9.0,
        },
        blend_deg: 3.0,
    },
    Feature {
        name: "Ember Ring of Tolvar Kiln",
        unit: RING,
        shape: Shape::Disc {
            lat: 8.0,
            lon: -18.0,
            radius_deg: 17.0,
        },
        blend_deg: 6.0,
    },
    Feature {
        name: "Tolvar Kiln floor (active vent)",
        unit: FLOORS,
        shape: Shape::Disc {
            lat: 8.0,
            lon: -18.0,
            radius_deg: 9.0,
        },
        blend_deg: 0.0,
    },
    Feature {
        name: "Sesk Kiln floor",
        unit: FLOORS,
        shape: Shape::Disc {
            lat: -22.0,
            lon: 30.0,
            radius_deg: 7.0,
        },
        blend_deg: 0.0,
    },
    Feature {
        name: "Rust Patch of Corrow",
        unit: RUST,
        shape: Shape::Disc {
            lat: 32.0,
            lon: 22.0,
            radius_deg: 8.0,
        },
        blend_deg: 3.0,
    },
    Feature {
        name: "Rust Patch of Ilda",
        unit: RUST,
        shape: Shape::Disc {
            lat: -30.0,
            lon: -40.0,
            radius_deg: 9.0,
        },
        blend_deg: 3.0,
    },
];

/// The active vent (Tolvar Kiln's centre), where hot spots are placed.
pub const ACTIVE_VENT: (f64, f64) = (8.0, -18.0);
/// The quiet caldera (Sesk Kiln's centre), where a later epoch's changes may wake it.
pub const QUIET_VENT: (f64, f64) = (-22.0, 30.0);

/// A change a later epoch of the same world may carry (`thiomap demo --epoch-of`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Change {
    /// A new red ring deposit (Ember Ring material) around Sesk Kiln, out to 14°, fading
    /// over 4°, its floor left as it was.
    Ring,
    /// The polar frost edge retreats poleward from ±52° to ±58°.
    Frost,
    /// A new dark flow (Cinder Flows material) 6° wide, from 40° S 20° W to 25° S 2° W.
    Flow,
    /// A patch of material outside the library (see [`stranger_reflectance`]) within 6° of
    /// 30° N 45° W, fading over 2°, covering 70 % of each pixel at its core.
    Stranger,
    /// Hot spots switch: those of Tolvar Kiln go out and as many light up on Sesk Kiln's
    /// floor (three when the earlier epoch had none).
    Vents,
}

impl Change {
    pub const ALL: [Change; 5] = [
        Change::Ring,
        Change::Frost,
        Change::Flow,
        Change::Stranger,
        Change::Vents,
    ];

    /// The name used in `--changes` and in truth.json.
    pub fn name(self) -> &'static str {
        match self {
            Change::Ring => "ring",
            Change::Frost => "frost",
            Change::Flow => "flow",
            Change::Stranger => "stranger",
            Change::Vents => "vents",
        }
    }

    /// Its bit in the truth's CHANGED plane.
    pub fn bit(self) -> i16 {
        1 << (self as i16)
    }

    /// One line for help texts and truth.json.
    pub fn describe(self) -> &'static str {
        match self {
            Change::Ring => "a new red ring deposit around Sesk Kiln (22° S, 30° E)",
            Change::Frost => "the polar frost edge retreats from ±52° to ±58°",
            Change::Flow => "a new dark flow from 40° S 20° W to 25° S 2° W",
            Change::Stranger => "a patch of material outside the library at 30° N, 45° W",
            Change::Vents => "Tolvar Kiln's hot spots go out; Sesk Kiln's light up",
        }
    }

    pub fn parse(name: &str) -> Option<Change> {
        Change::ALL.into_iter().find(|c| c.name() == name)
    }
}

/// The stranger patch: its centre, radius and blend (degrees) and its peak cover.
const STRANGER: (f64, f64, f64, f64) = (30.0, -45.0, 6.0, 2.0);
const STRANGER_COVER: f64 = 0.7;

/// The reflectance of the stranger material at `um`: a fictional pale mineral with two
/// deep absorptions (0.72 and 1.35 µm) no library member has. Invented for the demo.
pub fn stranger_reflectance(um: f64) -> f64 {
    let band = |c: f64, w: f64, d: f64| d * (-((um - c) / w).powi(2)).exp();
    (0.62 - band(0.72, 0.09, 0.38) - band(1.35, 0.16, 0.42) + 0.04 * (um - 1.0)).clamp(0.02, 1.0)
}

/// The features of an epoch with `changes`, in overlay order.
fn features_with(changes: &[Change]) -> Vec<Feature> {
    let mut out: Vec<Feature> = FEATURES.to_vec();
    if changes.contains(&Change::Frost) {
        out[0].shape = Shape::Caps { lat_deg: 58.0 };
    }
    if changes.contains(&Change::Flow) {
        out.push(Feature {
            name: "new dark flow (later epoch)",
            unit: FLOWS,
            shape: Shape::Strip {
                a: (-40.0, -20.0),
                b: (-25.0, -2.0),
                width_deg: 6.0,
            },
            blend_deg: 2.0,
        });
    }
    if changes.contains(&Change::Ring) {
        out.push(Feature {
            name: "new Ember Ring of Sesk Kiln (later epoch)",
            unit: RING,
            shape: Shape::Disc {
                lat: QUIET_VENT.0,
                lon: QUIET_VENT.1,
                radius_deg: 14.0,
            },
            blend_deg: 4.0,
        });
        out.push(FEATURES[4]);
    }
    out
}

/// A unit vector for (latitude, longitude) in degrees.
pub fn unit_vector(lat: f64, lon: f64) -> [f64; 3] {
    let (la, lo) = (lat.to_radians(), lon.to_radians());
    [la.cos() * lo.cos(), la.cos() * lo.sin(), la.sin()]
}

fn dot(a: [f64; 3], b: [f64; 3]) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}

/// Angular distance in degrees between two unit vectors.
pub fn angle_deg(a: [f64; 3], b: [f64; 3]) -> f64 {
    dot(a, b).clamp(-1.0, 1.0).acos().to_degrees()
}

fn cross(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}

/// How far (degrees) a point lies outside a shape; ≤ 0 inside.
fn outside_deg(shape: Shape, p: [f64; 3], lat: f64) -> f64 {
    match shape {
        Shape::Caps { lat_deg } => lat_deg - lat.abs(),
        Shape::Disc {
            lat: clat,
            lon,
            radius_deg,
        } => angle_deg(p, unit_vector(clat, lon)) - radius_deg,
        Shape::Strip { a, b, width_deg } => {
            let (va, vb) = (unit_vector(a.0, a.1), unit_vector(b.0, b.1));
            let n = cross(va, vb);
            let nn = dot(n, n).sqrt();
            let n = [n[0] / nn, n[1] / nn, n[2] / nn];
            // Distance to the great circle, and whether the foot lies between a and b.
            let off = dot(p, n).clamp(-1.0, 1.0).asin().to_degrees().abs();
            let within = dot(cross(va, p), n) >= 0.0 && dot(cross(p, vb), n) >= 0.0;
            let d = if within {
                off
            } else {
                angle_deg(p, va).min(angle_deg(p, vb))
            };
            d - width_deg / 2.0
        }
    }
}

/// The composition at a point: per unit, its weight (summing to one), and whether the
/// point lies in a transition zone.
pub fn unit_weights(lat: f64, lon: f64) -> ([f64; 6], bool) {
    weights_over(&FEATURES, lat, lon)
}

/// What a later epoch with `changes` holds at a point: the unit weights, whether it lies
/// in a transition zone, and the stranger material's cover (the units share the rest).
pub fn epoch_weights(lat: f64, lon: f64, changes: &[Change]) -> ([f64; 6], bool, f64) {
    let (w, transition) = weights_over(&features_with(changes), lat, lon);
    let mut stranger = 0.0;
    let mut edge = false;
    if changes.contains(&Change::Stranger) {
        let (clat, clon, radius, blend) = STRANGER;
        let d = angle_deg(unit_vector(lat, lon), unit_vector(clat, clon)) - radius;
        stranger = STRANGER_COVER
            * if d <= 0.0 {
                1.0
            } else if d < blend {
                edge = true;
                let t = 1.0 - d / blend;
                t * t * (3.0 - 2.0 * t)
            } else {
                0.0
            };
    }
    (w, transition || edge, stranger)
}

fn weights_over(features: &[Feature], lat: f64, lon: f64) -> ([f64; 6], bool) {
    let p = unit_vector(lat, lon);
    let mut w = [0.0; 6];
    w[PLAINS] = 1.0;
    let mut transition = false;
    for f in features.iter().copied() {
        let d = outside_deg(f.shape, p, lat);
        let cover = if d <= 0.0 {
            1.0
        } else if f.blend_deg > 0.0 && d < f.blend_deg {
            transition = true;
            // smoothstep from 1 at the edge to 0 at the blend's end
            let t = 1.0 - d / f.blend_deg;
            t * t * (3.0 - 2.0 * t)
        } else {
            0.0
        };
        if cover > 0.0 {
            for v in w.iter_mut() {
                *v *= 1.0 - cover;
            }
            w[f.unit] += cover;
        }
    }
    (w, transition)
}

/// The abundance vector over `ids` for unit weights `w`.
pub fn abundances(ids: &[String], w: &[f64; 6]) -> Vec<f64> {
    let mut a = vec![0.0; ids.len()];
    for (u, unit) in UNITS.iter().enumerate() {
        if w[u] == 0.0 {
            continue;
        }
        for (id, frac) in unit.composition {
            if let Some(j) = ids.iter().position(|x| x == id) {
                a[j] += w[u] * frac;
            }
        }
    }
    a
}

/// The label (1-based) of the unit whose composition is nearest to `a` (Euclidean).
pub fn nearest_unit(ids: &[String], a: &[f64]) -> usize {
    let mut best = (f64::INFINITY, 0);
    for u in 0..UNITS.len() {
        let mut one = [0.0; 6];
        one[u] = 1.0;
        let c = abundances(ids, &one);
        let d: f64 = c.iter().zip(a).map(|(x, y)| (x - y).powi(2)).sum();
        if d < best.0 {
            best = (d, u);
        }
    }
    best.1 + 1
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_unit_composition_sums_to_one() {
        for u in UNITS {
            let s: f64 = u.composition.iter().map(|(_, f)| f).sum();
            assert!((s - 1.0).abs() < 1e-12, "{}", u.name);
        }
    }

    #[test]
    fn weights_sum_to_one_everywhere_and_features_land_where_stated() {
        for lat in (-90..=90).step_by(3) {
            for lon in (-180..180).step_by(3) {
                let (w, _) = unit_weights(lat as f64, lon as f64);
                assert!((w.iter().sum::<f64>() - 1.0).abs() < 1e-12);
            }
        }
        assert_eq!(unit_weights(8.0, -18.0).0[FLOORS], 1.0);
        assert_eq!(
            unit_weights(8.0, -18.0 + 13.0 / 8f64.to_radians().cos()).0[RING],
            1.0
        );
        assert_eq!(unit_weights(80.0, 0.0).0[FROST], 1.0);
        assert_eq!(unit_weights(0.0, 100.0).0[PLAINS], 1.0);
        let (w, t) = unit_weights(47.0, 100.0);
        assert!(t && w[FROST] > 0.0 && w[FROST] < 1.0);
    }
}
