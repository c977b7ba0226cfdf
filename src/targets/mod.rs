//! Ranked observation targets: the numeric core of `thiomap targets`.
//!
//! 1. **Candidates**: pixels that are hot spots, changed significantly since an earlier
//!    epoch (`--since`), belong to a rare unit, are unexplained by the library, hold fresh
//!    (short-chain red) sulfur, or carry large standard errors — each test stated in the
//!    profile ([`profile`]). The union of those pixels falls into 8-connected regions; each
//!    region is one candidate, whatever kinds it holds, so one place is listed once.
//!    A hot spot brings the unit region it lies on (a vent's floor), and hot pixels closer
//!    than the profile's `join_pixels` count as connected, so a vent is one place; pixels whose only reason is a large error form
//!    regions of their own, so that scattered large errors never join two places into one.
//! 2. **A stated score**: five components on 0–1 (activity, freshness, novelty, rarity,
//!    uncertainty; formulas in the profile file and the README) and their weighted mean.
//! 3. **Constraints**: a keep-out mask, the region's mean emission and incidence against
//!    their limits, a minimum size (waived for regions holding a hot spot: vents are point
//!    sources), and a maximum count. A candidate that fails is kept, with its reason.
//!
//! Ranks follow the score (ties: larger area first, then the region's first pixel in
//! raster order), so they are the same on every run and thread count.
//!
//! No I/O and no printing here.

pub mod keepout;
pub mod profile;

use ndarray::Array2;

use crate::backplane::Backplane;
use crate::change::{Epoch, Member};
use crate::units::stats::{AreaWeights, Geometry};
pub use profile::Profile;

/// The caution every targets file and page is headed by.
pub const CAUTION: &str = "Targets are suggestions from a model of the data, with stated \
    uncertainties. Pointing a spacecraft defers to mission flight rules, the radiation \
    environment and the instrument team's own constraints, which thiomap does not know; \
    fieldwork near active vents defers to local codes and licensed practice (SO2 and H2S gas, \
    heat, unstable ground).";

/// What makes a pixel a candidate.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Kind {
    HotSpot,
    Change,
    Fresh,
    Unexplained,
    Rare,
    Uncertain,
}

impl Kind {
    pub const ALL: [Kind; 6] = [
        Kind::HotSpot,
        Kind::Change,
        Kind::Fresh,
        Kind::Unexplained,
        Kind::Rare,
        Kind::Uncertain,
    ];

    pub fn name(self) -> &'static str {
        match self {
            Kind::HotSpot => "hot-spot",
            Kind::Change => "change",
            Kind::Fresh => "fresh-sulfur",
            Kind::Unexplained => "unexplained",
            Kind::Rare => "rare-unit",
            Kind::Uncertain => "uncertain",
        }
    }
}

/// The five score components, each on 0–1.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Components {
    pub activity: f64,
    pub freshness: f64,
    pub novelty: f64,
    pub rarity: f64,
    pub uncertainty: f64,
}

/// Whether a candidate passed the constraints.
#[derive(Debug, Clone, PartialEq)]
pub enum Status {
    Ranked(usize),
    Excluded(String),
}

/// One candidate region.
#[derive(Debug, Clone, PartialEq)]
pub struct Target {
    /// 1, 2, … in raster order of the regions' first pixels.
    pub id: usize,
    pub kinds: Vec<Kind>,
    /// The kind that gave the most to the score.
    pub lead: Kind,
    pub pixels: usize,
    pub area_fraction: f64,
    pub centroid: (f64, f64),
    pub lat_lon: Option<(f64, f64)>,
    pub components: Components,
    pub score: f64,
    /// The key number behind the lead component, its standard error and its unit.
    pub key: (f64, f64, &'static str),
    pub reason: String,
    pub status: Status,
}

/// The constraints (`--keep-out`, `--max-emission`, `--max-incidence`, `--min-pixels`,
/// `--max-targets`).
#[derive(Debug, Clone, PartialEq)]
pub struct Constraints {
    pub keep_out: Option<Array2<bool>>,
    pub max_emission_deg: f64,
    pub max_incidence_deg: f64,
    pub min_pixels: usize,
    pub max_targets: usize,
}

impl Default for Constraints {
    fn default() -> Self {
        Constraints {
            keep_out: None,
            max_emission_deg: 70.0,
            max_incidence_deg: 80.0,
            min_pixels: 3,
            max_targets: 10,
        }
    }
}

/// What the targets are found in.
pub struct Inputs<'a> {
    /// The result (its materials, errors, units, flags, hot pixels, geometry).
    pub epoch: &'a Epoch,
    pub members: &'a [Member],
    /// Per unit id: its label and area fraction (units.csv).
    pub units: &'a [(i16, String, f64)],
    /// The thermal fit's temperature and its error per pixel (K), when one ran.
    pub temperature: Option<(&'a Array2<f32>, &'a Array2<f32>)>,
    /// Cells of significant change since the earlier epoch, on the result's pixels.
    pub changed: Option<&'a Array2<bool>>,
}

/// Finds, scores, constrains and ranks the candidates.
pub fn rank(x: &Inputs, p: &Profile, k: &Constraints) -> Vec<Target> {
    let e = x.epoch;
    let (rows, cols) = e.units.dim();
    let m = e.ids.len();
    let s = &p.scales;
    let fresh_planes: Vec<usize> = (0..m)
        .filter(|&j| {
            e.ids[j]
                .split('+')
                .any(|part| s.fresh_members.iter().any(|f| f == part))
        })
        .collect();
    let unit_area = |u: i16| {
        x.units
            .iter()
            .find(|(id, _, _)| *id == u)
            .map_or(1.0, |(_, _, a)| *a)
    };
    let fresh = |r: usize, c: usize| -> f64 {
        fresh_planes
            .iter()
            .map(|&j| e.abundance[(r, c, j)] as f64)
            .sum()
    };
    let worst_error = |r: usize, c: usize| -> f64 {
        (0..m)
            .map(|j| (e.variance[(r, c, j)] as f64).sqrt())
            .fold(0.0, f64::max)
    };
    let kinds_at = |r: usize, c: usize| -> Vec<Kind> {
        if e.units[(r, c)] == 0 || !e.abundance[(r, c, 0)].is_finite() {
            return Vec::new();
        }
        let mut v = Vec::new();
        if e.hot[(r, c)] {
            v.push(Kind::HotSpot);
        }
        if x.changed.is_some_and(|ch| ch[(r, c)]) {
            v.push(Kind::Change);
        }
        if !fresh_planes.is_empty() && fresh(r, c) >= s.fresh_min {
            v.push(Kind::Fresh);
        }
        if e.unexplained[(r, c)] {
            v.push(Kind::Unexplained);
        }
        if unit_area(e.units[(r, c)]) < s.rare_below {
            v.push(Kind::Rare);
        }
        if worst_error(r, c) >= s.uncertainty_min {
            v.push(Kind::Uncertain);
        }
        v
    };
    let mut mask = Array2::<i16>::zeros((rows, cols));
    let mut kinds = Array2::<u8>::zeros((rows, cols));
    for r in 0..rows {
        for c in 0..cols {
            let v = kinds_at(r, c);
            if !v.is_empty() {
                // Pixels that are only uncertain form regions of their own: scattered large
                // errors must not bridge two places into one candidate.
                mask[(r, c)] = if v == [Kind::Uncertain] { 2 } else { 1 };
                kinds[(r, c)] = v.iter().fold(0u8, |b, k| b | 1 << (*k as u8));
            }
        }
    }
    // A hot spot's place is the unit region it lies on (a vent's floor): that region's
    // pixels join the candidates, so a vent's hot pixels and what rings them are one place.
    let (unit_regions, _) = crate::units::regions::regions(&e.units);
    let hot_bit = 1u8 << (Kind::HotSpot as u8);
    let hosts: std::collections::BTreeSet<u32> = kinds
        .indexed_iter()
        .filter(|(_, b)| **b & hot_bit != 0)
        .map(|((r, c), _)| unit_regions[(r, c)])
        .filter(|id| *id != 0)
        .collect();
    for ((r, c), id) in unit_regions.indexed_iter() {
        if hosts.contains(id) {
            mask[(r, c)] = 1;
        }
    }
    // Hot pixels within `join_pixels` of each other (Chebyshev distance) belong to one
    // place: a vent's hot pixels a few pixels apart (the gap between them joins too).
    let d = p.scales.join_pixels;
    let mut joined = mask.clone();
    if d > 0 {
        for r in 0..rows {
            for c in 0..cols {
                if kinds[(r, c)] & hot_bit != 0 {
                    continue;
                }
                let near = (r.saturating_sub(d)..=(r + d).min(rows - 1)).any(|y| {
                    (c.saturating_sub(d)..=(c + d).min(cols - 1))
                        .any(|x| kinds[(y, x)] & hot_bit != 0)
                });
                if near {
                    joined[(r, c)] = 1;
                }
            }
        }
    }
    let (ids, info) = crate::units::regions::regions(&joined);
    let area = AreaWeights::new(Geometry {
        latitude: e.geometry.get(&Backplane::Latitude),
        longitude: e.geometry.get(&Backplane::Longitude),
        emission: e.geometry.get(&Backplane::Emission),
    });
    let total: f64 = (0..rows)
        .flat_map(|r| (0..cols).map(move |c| (r, c)))
        .filter(|&(r, c)| e.units[(r, c)] != 0)
        .map(|(r, c)| area.of(r, c))
        .sum();
    let mut members_of: Vec<Vec<(usize, usize)>> = vec![Vec::new(); info.len()];
    for ((r, c), id) in ids.indexed_iter() {
        if *id > 0 && mask[(r, c)] != 0 {
            members_of[*id as usize - 1].push((r, c));
        }
    }
    let mut out: Vec<Target> = Vec::new();
    for (n, pixels) in members_of.iter().enumerate().filter(|(_, p)| !p.is_empty()) {
        let t = describe(
            x,
            p,
            k,
            &Region {
                pixels,
                kinds: &kinds,
                area: &area,
                total,
            },
            &fresh_planes,
            n + 1,
        );
        out.push(t);
    }
    // Rank the passing candidates by score.
    let mut order: Vec<usize> = (0..out.len()).collect();
    order.sort_by(|&a, &b| {
        out[b]
            .score
            .total_cmp(&out[a].score)
            .then(out[b].area_fraction.total_cmp(&out[a].area_fraction))
            .then(out[a].id.cmp(&out[b].id))
    });
    let mut rank = 0;
    for i in order {
        if out[i].status == Status::Ranked(0) {
            if rank < k.max_targets {
                rank += 1;
                out[i].status = Status::Ranked(rank);
            } else {
                out[i].status = Status::Excluded(format!(
                    "beyond the first {} targets (--max-targets)",
                    k.max_targets
                ));
            }
        }
    }
    out.sort_by(|a, b| match (&a.status, &b.status) {
        (Status::Ranked(x), Status::Ranked(y)) => x.cmp(y),
        (Status::Ranked(_), _) => std::cmp::Ordering::Less,
        (_, Status::Ranked(_)) => std::cmp::Ordering::Greater,
        _ => b.score.total_cmp(&a.score).then(a.id.cmp(&b.id)),
    });
    out
}

struct Region<'a> {
    pixels: &'a [(usize, usize)],
    kinds: &'a Array2<u8>,
    area: &'a AreaWeights<'a>,
    total: f64,
}

fn clamp(v: f64) -> f64 {
    if v.is_finite() {
        v.clamp(0.0, 1.0)
    } else {
        0.0
    }
}

fn describe(
    x: &Inputs,
    p: &Profile,
    k: &Constraints,
    g: &Region,
    fresh_planes: &[usize],
    id: usize,
) -> Target {
    let e = x.epoch;
    let s = &p.scales;
    let m = e.ids.len();
    let n = g.pixels.len();
    let nf = n.max(1) as f64;
    let mut kinds: Vec<Kind> = Kind::ALL
        .into_iter()
        .filter(|kd| {
            g.pixels
                .iter()
                .any(|&(r, c)| g.kinds[(r, c)] & (1 << (*kd as u8)) != 0)
        })
        .collect();
    kinds.sort();
    let count = |kd: Kind| {
        g.pixels
            .iter()
            .filter(|&&(r, c)| g.kinds[(r, c)] & (1 << (kd as u8)) != 0)
            .count() as f64
    };
    // Area, centroid, latitude and longitude (a vector mean).
    let (mut w_sum, mut rc, mut v3, mut has_ll) = (0.0, (0.0, 0.0), [0.0f64; 3], true);
    let lat = e.geometry.get(&Backplane::Latitude);
    let lon = e.geometry.get(&Backplane::Longitude);
    for &(r, c) in g.pixels {
        let w = g.area.of(r, c).max(1e-300);
        w_sum += w;
        rc = (rc.0 + w * r as f64, rc.1 + w * c as f64);
        match (lat, lon) {
            (Some(la), Some(lo)) if la[(r, c)].is_finite() && lo[(r, c)].is_finite() => {
                let (a, b) = (
                    (la[(r, c)] as f64).to_radians(),
                    (lo[(r, c)] as f64).to_radians(),
                );
                v3 = [
                    v3[0] + w * a.cos() * b.cos(),
                    v3[1] + w * a.cos() * b.sin(),
                    v3[2] + w * a.sin(),
                ];
            }
            _ => has_ll = false,
        }
    }
    let lat_lon = has_ll.then(|| {
        let h = (v3[0] * v3[0] + v3[1] * v3[1]).sqrt();
        (v3[2].atan2(h).to_degrees(), v3[1].atan2(v3[0]).to_degrees())
    });
    let centroid = (rc.0 / w_sum, rc.1 / w_sum);

    // Activity: the hottest fitted temperature among the region's hot pixels.
    let hottest = x.temperature.and_then(|(t, te)| {
        g.pixels
            .iter()
            .filter(|&&(r, c)| e.hot[(r, c)] && t[(r, c)].is_finite())
            .map(|&(r, c)| (t[(r, c)] as f64, te[(r, c)] as f64))
            .max_by(|a, b| a.0.total_cmp(&b.0))
    });
    let activity = hottest.map_or(0.0, |(t, _)| {
        clamp((t - s.activity_from_k) / (s.activity_full_k - s.activity_from_k))
    });
    // Freshness: the mean fresh abundance and its standard error.
    let (mut f_sum, mut f_var) = (0.0, 0.0);
    for &(r, c) in g.pixels {
        for &j in fresh_planes {
            f_sum += e.abundance[(r, c, j)] as f64;
            f_var += e.variance[(r, c, j)] as f64;
        }
    }
    let fresh_mean = f_sum / nf;
    let fresh_err = f_var.sqrt() / nf;
    let freshness = clamp(fresh_mean / s.fresh_full);
    let changed = count(Kind::Change) / nf;
    let unexplained = count(Kind::Unexplained) / nf;
    let novelty = clamp(changed.max(unexplained));
    // Rarity: the region's most common unit.
    let mut tally: std::collections::BTreeMap<i16, usize> = Default::default();
    for &(r, c) in g.pixels {
        *tally.entry(e.units[(r, c)]).or_default() += 1;
    }
    let unit = tally
        .iter()
        .max_by_key(|(u, n)| (**n, -**u))
        .map_or(0, |(u, _)| *u);
    let (unit_label, unit_area) = x
        .units
        .iter()
        .find(|(u, _, _)| *u == unit)
        .map_or(("?".to_string(), 1.0), |(_, l, a)| (l.clone(), *a));
    let rarity = if unit_area < s.rare_below {
        clamp(1.0 - unit_area / s.rare_below)
    } else {
        0.0
    };
    // Uncertainty: the mean largest standard error.
    let worst: f64 = g
        .pixels
        .iter()
        .map(|&(r, c)| {
            (0..m)
                .map(|j| (e.variance[(r, c, j)] as f64).sqrt())
                .fold(0.0, f64::max)
        })
        .sum::<f64>()
        / nf;
    let uncertainty = clamp(worst / s.uncertainty_full);
    let comp = Components {
        activity,
        freshness,
        novelty,
        rarity,
        uncertainty,
    };
    let w = &p.weights;
    let parts = [
        (Kind::HotSpot, w.activity * activity),
        (Kind::Fresh, w.freshness * freshness),
        (
            if changed >= unexplained {
                Kind::Change
            } else {
                Kind::Unexplained
            },
            w.novelty * novelty,
        ),
        (Kind::Rare, w.rarity * rarity),
        (Kind::Uncertain, w.uncertainty * uncertainty),
    ];
    let score = parts.iter().map(|(_, v)| v).sum::<f64>() / p.weight_sum();
    let lead = parts
        .iter()
        .filter(|(kd, _)| kinds.contains(kd))
        .max_by(|a, b| a.1.total_cmp(&b.1))
        .map_or(
            kinds.first().copied().unwrap_or(Kind::Uncertain),
            |(kd, _)| *kd,
        );
    let key = match lead {
        Kind::HotSpot => hottest.map_or((f64::NAN, f64::NAN, "K"), |(t, te)| (t, te, "K")),
        Kind::Fresh => (fresh_mean, fresh_err, "abundance"),
        Kind::Change => (changed, f64::NAN, "fraction of the region changed"),
        Kind::Unexplained => (unexplained, f64::NAN, "fraction of the region unexplained"),
        Kind::Rare => (unit_area, f64::NAN, "area fraction of its unit"),
        Kind::Uncertain => (worst, f64::NAN, "largest standard error"),
    };
    // The reason, in one sentence.
    let mut said: Vec<String> = Vec::new();
    if let Some((t, te)) = hottest {
        said.push(format!("a hot spot at {t:.0} ± {te:.0} K"));
    }
    if freshness > 0.0 && kinds.contains(&Kind::Fresh) {
        let name = fresh_planes
            .first()
            .and_then(|&j| x.members.iter().find(|mm| mm.id == e.ids[j]))
            .map_or("fresh sulfur".to_string(), |mm| mm.name.clone());
        said.push(format!("{name} {fresh_mean:.2} ± {fresh_err:.2}"));
    }
    if changed >= 0.005 {
        said.push(format!(
            "{:.0} % of it changed since the earlier epoch",
            100.0 * changed
        ));
    }
    if unexplained >= 0.005 {
        said.push(format!(
            "{:.0} % of it unexplained by the library",
            100.0 * unexplained
        ));
    }
    if rarity > 0.0 {
        let short = unit_label.split(" (").next().unwrap_or(&unit_label);
        said.push(format!(
            "a rare unit ({short}, {:.1} % of the scene)",
            100.0 * unit_area
        ));
    }
    if kinds.contains(&Kind::Uncertain) {
        said.push(format!("largest standard error {worst:.2}"));
    }
    let mut reason = said.join("; ");
    if let Some(first) = reason.get(..1) {
        reason = first.to_uppercase() + &reason[1..];
    }
    if unit != 0 && rarity == 0.0 {
        reason += &format!(", on {unit_label}");
    }

    // Constraints.
    let mean_of = |b: Backplane| -> Option<f64> {
        let plane = e.geometry.get(&b)?;
        let v: Vec<f64> = g
            .pixels
            .iter()
            .map(|&(r, c)| plane[(r, c)] as f64)
            .filter(|v| v.is_finite())
            .collect();
        (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64)
    };
    let inside = k.keep_out.as_ref().map_or(0, |mask| {
        g.pixels.iter().filter(|&&(r, c)| mask[(r, c)]).count()
    });
    let status = if inside > 0 {
        Status::Excluded(format!(
            "overlaps the keep-out area ({inside} of its {n} pixels)"
        ))
    } else if let Some(em) = mean_of(Backplane::Emission).filter(|v| *v > k.max_emission_deg) {
        Status::Excluded(format!(
            "seen at a mean emission of {em:.0}° (limit {:.0}°)",
            k.max_emission_deg
        ))
    } else if let Some(inc) = mean_of(Backplane::Incidence).filter(|v| *v > k.max_incidence_deg) {
        Status::Excluded(format!(
            "lit at a mean incidence of {inc:.0}° (limit {:.0}°)",
            k.max_incidence_deg
        ))
    } else if n < k.min_pixels && hottest.is_none() {
        Status::Excluded(format!("{n} pixels, below the minimum of {}", k.min_pixels))
    } else {
        Status::Ranked(0)
    };
    Target {
        id,
        kinds,
        lead,
        pixels: n,
        area_fraction: if g.total > 0.0 { w_sum / g.total } else { 0.0 },
        centroid,
        lat_lon,
        components: comp,
        score,
        key,
        reason,
        status,
    }
}
