//! Regions of significant change (8-connected, as [`crate::units::regions`]) and of hot
//! spots that appeared or went out, with what changed and a sentence saying it.
//!
//! - **Area**: the later epoch's surface weighting on the common grid
//!   ([`crate::units::stats::AreaWeights`]), as a fraction of the tested area.
//! - **What changed**: per member, the region's mean Δf and its standard error
//!   √(Σ Var Δf) / n, Var Δf the diagonal of the covariance the test used (neighbouring cells' errors taken as independent; on a
//!   resampled grid they are not quite, so the error is a little small there).
//! - **The sentence** names the members whose mean change is at least 3 standard errors
//!   and 0.02, largest first (at most three), then reads the change by the class whose
//!   members changed most in total (the largest single change's class unless another's
//!   total is larger by 0.05 or more): frost
//!   loss or gain, a new sulfur deposit or sulfur buried or faded, a new dark deposit or
//!   flow or dark material buried, and adds when material the library cannot explain
//!   appeared or went (the unexplained flag in most of the region in one epoch only).
//!
//! No I/O and no printing here.

use ndarray::{Array2, Array3};

use super::{Epoch, Member};
use crate::library::Class;
use crate::units::stats::AreaWeights;

/// What a region is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// Significant change of composition.
    Composition,
    /// A hot spot in the later epoch only.
    HotSpotOn,
    /// A hot spot in the earlier epoch only.
    HotSpotOff,
}

impl Kind {
    pub fn name(self) -> &'static str {
        match self {
            Kind::Composition => "composition",
            Kind::HotSpotOn => "hot-spot-on",
            Kind::HotSpotOff => "hot-spot-off",
        }
    }
}

/// One member's change over a region.
#[derive(Debug, Clone, PartialEq)]
pub struct MemberChange {
    pub id: String,
    pub name: String,
    pub delta: f64,
    pub error: f64,
}

/// A region of change.
#[derive(Debug, Clone, PartialEq)]
pub struct Region {
    /// 1, 2, … by decreasing area (composition regions first, then hot spots).
    pub id: u32,
    pub kind: Kind,
    pub pixels: usize,
    /// Of the tested area.
    pub area_fraction: f64,
    /// The area-weighted centroid on the common grid (row, col).
    pub centroid: (f64, f64),
    /// Its latitude and longitude, when the grid has them.
    pub lat_lon: Option<(f64, f64)>,
    /// Every member, largest |Δ| first.
    pub changes: Vec<MemberChange>,
    /// The fraction of the region flagged unexplained, earlier and later.
    pub unexplained: (f64, f64),
    pub sentence: String,
}

/// What [`find`] reads.
pub struct Inputs<'a> {
    pub earlier: &'a Epoch,
    pub later: &'a Epoch,
    pub members: &'a [Member],
    pub delta: &'a Array3<f32>,
    /// The variance of each Δf (the used covariance's diagonal).
    pub variance: &'a Array3<f32>,
    pub significant: &'a Array2<bool>,
    pub hot_change: &'a Array2<i8>,
    pub area: &'a AreaWeights<'a>,
    pub total_area: f64,
}

/// The regions found, and the composition regions' map.
pub struct Found {
    pub regions: Vec<Region>,
    pub map: Array2<u32>,
}

/// Finds the regions (module doc).
pub fn find(x: &Inputs) -> Found {
    let mask = x.significant.mapv(|s| s as i16);
    let (ids, info) = crate::units::regions::regions(&mask);
    let mut composition: Vec<(Region, u32)> = info
        .iter()
        .enumerate()
        .map(|(k, _)| {
            (
                describe(x, &ids, k as u32 + 1, Kind::Composition),
                k as u32 + 1,
            )
        })
        .collect();
    composition.sort_by(|a, b| {
        b.0.area_fraction
            .total_cmp(&a.0.area_fraction)
            .then(a.1.cmp(&b.1))
    });
    let mut renumber = vec![0u32; info.len() + 1];
    let mut out = Vec::new();
    for (new, (mut region, old)) in composition.into_iter().enumerate() {
        region.id = new as u32 + 1;
        renumber[old as usize] = region.id;
        out.push(region);
    }
    let map = ids.mapv(|i| renumber[i as usize]);
    for (sign, kind) in [(1i8, Kind::HotSpotOn), (-1, Kind::HotSpotOff)] {
        let hot = x.hot_change.mapv(|h| (h == sign) as i16);
        let (hid, hinfo) = crate::units::regions::regions(&hot);
        for k in 0..hinfo.len() {
            let mut region = describe(x, &hid, k as u32 + 1, kind);
            region.id = out.len() as u32 + 1;
            out.push(region);
        }
    }
    Found { regions: out, map }
}

fn describe(x: &Inputs, ids: &Array2<u32>, id: u32, kind: Kind) -> Region {
    let m = x.members.len();
    let (mut n, mut w_sum, mut rc) = (0usize, 0.0, (0.0, 0.0));
    let (mut sum, mut var) = (vec![0.0; m], vec![0.0; m]);
    let (mut vec3, mut unexplained) = ([0.0f64; 3], (0usize, 0usize));
    let lat = x.later.geometry.get(&crate::backplane::Backplane::Latitude);
    let lon = x
        .later
        .geometry
        .get(&crate::backplane::Backplane::Longitude);
    let mut has_lat_lon = lat.is_some() && lon.is_some();
    for ((r, c), v) in ids.indexed_iter() {
        if *v != id {
            continue;
        }
        n += 1;
        let w = x.area.of(r, c).max(1e-300);
        w_sum += w;
        rc.0 += w * r as f64;
        rc.1 += w * c as f64;
        for j in 0..m {
            let d = x.delta[(r, c, j)] as f64;
            if d.is_finite() {
                sum[j] += d;
                var[j] += x.variance[(r, c, j)] as f64;
            }
        }
        unexplained.0 += x.earlier.unexplained[(r, c)] as usize;
        unexplained.1 += x.later.unexplained[(r, c)] as usize;
        if let (Some(la), Some(lo)) = (lat, lon) {
            let (p, q) = (la[(r, c)] as f64, lo[(r, c)] as f64);
            if p.is_finite() && q.is_finite() {
                let (p, q) = (p.to_radians(), q.to_radians());
                vec3[0] += w * p.cos() * q.cos();
                vec3[1] += w * p.cos() * q.sin();
                vec3[2] += w * p.sin();
            } else {
                has_lat_lon = false;
            }
        }
    }
    let nf = n.max(1) as f64;
    let mut changes: Vec<MemberChange> = (0..m)
        .map(|j| MemberChange {
            id: x.members[j].id.clone(),
            name: x.members[j].name.clone(),
            delta: sum[j] / nf,
            error: var[j].sqrt() / nf,
        })
        .collect();
    changes.sort_by(|a, b| {
        b.delta
            .abs()
            .total_cmp(&a.delta.abs())
            .then(a.id.cmp(&b.id))
    });
    let lat_lon = has_lat_lon.then(|| {
        let h = (vec3[0] * vec3[0] + vec3[1] * vec3[1]).sqrt();
        (
            vec3[2].atan2(h).to_degrees(),
            vec3[1].atan2(vec3[0]).to_degrees(),
        )
    });
    let unexplained = (unexplained.0 as f64 / nf, unexplained.1 as f64 / nf);
    let sentence = match kind {
        Kind::Composition => sentence(&changes, x.members, unexplained),
        Kind::HotSpotOn => {
            "a hot spot appeared (thermal emission fitted in the later epoch only)".into()
        }
        Kind::HotSpotOff => {
            "a hot spot went out (thermal emission fitted in the earlier epoch only)".into()
        }
    };
    Region {
        id,
        kind,
        pixels: n,
        area_fraction: if x.total_area > 0.0 {
            w_sum / x.total_area
        } else {
            0.0
        },
        centroid: (rc.0 / w_sum, rc.1 / w_sum),
        lat_lon,
        changes,
        unexplained,
        sentence,
    }
}

/// A signed number with a true minus sign, as sentences print it.
pub fn signed(v: f64) -> String {
    if v < 0.0 {
        format!("\u{2212}{:.2}", -v)
    } else {
        format!("+{v:.2}")
    }
}

/// An error to two decimals, or to one significant digit when smaller than 0.005.
fn error_text(e: f64) -> String {
    if e >= 0.005 || e <= 0.0 || !e.is_finite() {
        format!("{e:.2}")
    } else {
        let d = (-e.log10().floor()) as usize;
        format!("{e:.d$}")
    }
}

fn sentence(changes: &[MemberChange], members: &[Member], unexplained: (f64, f64)) -> String {
    let named: Vec<&MemberChange> = changes
        .iter()
        .filter(|c| c.delta.abs() >= 0.02 && c.delta.abs() >= 3.0 * c.error)
        .take(3)
        .collect();
    let mut text = if named.is_empty() {
        "a change spread over several members, none by 0.02 and 3 standard errors on average"
            .to_string()
    } else {
        let parts: Vec<String> = named
            .iter()
            .map(|c| {
                format!(
                    "{} {} \u{b1} {}",
                    c.name,
                    signed(c.delta),
                    error_text(c.error)
                )
            })
            .collect();
        let top = named[0];
        let class_of = |id: &str| {
            members
                .iter()
                .find(|m| m.id == id)
                .map_or(Class::Other, |m| m.class)
        };
        // The reading follows the class whose members changed most in total, unless it
        // beats the largest single change's class by less than 0.05.
        let total = |k: Class| -> f64 {
            changes
                .iter()
                .filter(|c| class_of(&c.id) == k)
                .map(|c| c.delta)
                .sum()
        };
        let top_class = class_of(&top.id);
        let best = Class::ALL
            .into_iter()
            .max_by(|a, b| total(*a).abs().total_cmp(&total(*b).abs()))
            .unwrap_or(top_class);
        let (class, gain) = if total(best).abs() - total(top_class).abs() >= 0.05 {
            (best, total(best) > 0.0)
        } else {
            (top_class, top.delta > 0.0)
        };
        let reading = match (class, gain) {
            (Class::So2Frost, false) => "frost loss".to_string(),
            (Class::So2Frost, true) => "frost gain".to_string(),
            (Class::SulfurAllotrope, true) => "a new sulfur deposit".to_string(),
            (Class::SulfurAllotrope, false) => "sulfur buried or faded".to_string(),
            (Class::Silicate, true) => "a new dark deposit or flow".to_string(),
            (Class::Silicate, false) => "dark material buried or brightened".to_string(),
            (Class::Other, _) => format!("a change in {}", top.name),
        };
        format!("{}: {reading}", parts.join("; "))
    };
    if unexplained.1 >= 0.5 && unexplained.0 < 0.5 {
        text.push_str("; material the library cannot explain appeared");
    } else if unexplained.0 >= 0.5 && unexplained.1 < 0.5 {
        text.push_str("; material the library could not explain is gone");
    }
    text
}
