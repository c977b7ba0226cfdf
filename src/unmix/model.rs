//! The endmember model a cube is unmixed against: the resampled library with inseparable
//! members grouped, an optional shade column, the identifiability guard, and the table of
//! precomputed solution maps for every passive set.
//!
//! For a passive set P (the members allowed to be non-zero) the constrained least-squares
//! solution is an affine function of b = Eᵀy. With the sum-to-one constraint it solves the
//! bordered (KKT) system
//!
//! ```text
//! [ G_PP  1 ] [ a_P ]   [ b_P ]
//! [ 1ᵀ    0 ] [ λ   ] = [ 1   ]        G = EᵀE
//! ```
//!
//! and the multipliers of the members held at zero are μ = G a − b + λ1 (μ ≥ 0 at the
//! optimum). Without it, a_P = G_PP⁻¹ b_P and μ = G a − b. Bro & De Jong (1997) precompute
//! EᵀE and Eᵀy the same way; here the pixel enters whitened instead: with E = Q R (thin QR,
//! Q orthonormal), z = Qᵀy and b = Rᵀz, so each entry stores the (2M × D) map W and a 2M
//! offset giving [a; μ] = W z + off, and an active-set step is one small matrix–vector
//! product and a sign test. Maps over z amplify rounding by κ(E) where maps over b amplify
//! it by κ(G) = κ(E)²; that is what makes an f32 table accurate enough for the fast path.
//! The entry also keeps the standard error factors: the square roots of the diagonal of
//! Z⁻¹'s top-left block = G⁻¹ − G⁻¹11ᵀG⁻¹/(1ᵀG⁻¹1) with the constraint, G_PP⁻¹ without. A
//! shade member is a zero column: G is then singular but the bordered system is not, which
//! is why the bordered form is inverted rather than G.

use ndarray::Array2;

use super::params::{Solver, Subsets, UnmixParams, AUTO_SUBSET_SIZE, MAX_CONDITION};
use crate::library::diagnostics::{condition_number, diagnose, with_sum_row, Group, Pair};
use crate::library::resample::Resampled;

/// The most columns (members, groups and shade) the passive-set table holds: 2¹² entries.
pub const MAX_COLUMNS: usize = 12;

/// Why a model cannot be built.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ModelError {
    #[error(
        "the band set cannot separate the library: {unknowns} unknowns ({members}) from {bands} \
         bands{closest}. Drop members with --library, narrow the library to what the scene \
         holds, use subset mode (--subset 3), or pass --force to unmix anyway"
    )]
    TooFewBands {
        unknowns: usize,
        members: String,
        bands: usize,
        closest: String,
    },
    #[error(
        "the band set separates the library poorly: condition number {condition:.3e} exceeds \
         {max:.0e}{closest}. Drop one member of the closest pairs, use subset mode \
         (--subset 3), or pass --force to unmix anyway"
    )]
    IllConditioned {
        condition: f64,
        max: f64,
        closest: String,
    },
    #[error(
        "{columns} columns (members, groups and shade) exceed the exact active-set table's \
         {max}; group members, use a smaller library, or subset mode"
    )]
    TooManyColumns { columns: usize, max: usize },
}

/// The precomputed solution maps of every passive set, flat, in one precision.
///
/// Entry `mask` holds, contiguously: the map W (D columns of 2M values: column k gives z_k's
/// coefficients, rows 0..M for a and M..2M for μ), the offset (2M values) and the standard
/// error factors √(covariance factor) (M values, 0 outside the passive set).
#[derive(Debug, Clone)]
pub struct Table<T> {
    /// M: columns (members, groups, shade).
    pub columns: usize,
    /// D: the whitened dimensions z = Qᵀy.
    pub dims: usize,
    stride: usize,
    data: Vec<T>,
    ok: Vec<bool>,
}

/// One entry of a [`Table`].
#[derive(Debug, Clone, Copy)]
pub struct EntryRef<'a, T> {
    /// D × 2M, column-major.
    pub map: &'a [T],
    /// 2M.
    pub off: &'a [T],
    /// M.
    pub sd: &'a [T],
}

impl<T: Copy> Table<T> {
    fn with_capacity(columns: usize, dims: usize, zero: T) -> Table<T> {
        let stride = 2 * columns * (dims + 1) + columns;
        Table {
            columns,
            dims,
            stride,
            data: vec![zero; stride << columns],
            ok: vec![false; 1 << columns],
        }
    }

    /// The values of entry `mask` (valid or not): map, offset, sd, in that order.
    #[inline(always)]
    pub fn raw(&self, mask: u32) -> &[T] {
        let at = mask as usize * self.stride;
        &self.data[at..at + self.stride]
    }

    /// Whether passive set `mask` has a (regular) entry.
    #[inline(always)]
    pub fn has(&self, mask: u32) -> bool {
        self.ok.get(mask as usize).copied().unwrap_or(false)
    }

    /// Entry `mask`, or `None` where its system is singular or it was not needed.
    #[inline]
    pub fn entry(&self, mask: u32) -> Option<EntryRef<'_, T>> {
        if !self.has(mask) {
            return None;
        }
        let raw = self.raw(mask);
        let (m, d) = (self.columns, self.dims);
        let (map, rest) = raw.split_at(2 * m * d);
        let (off, sd) = rest.split_at(2 * m);
        Some(EntryRef { map, off, sd })
    }
}

/// The model: columns, matrix, and the passive-set table.
#[derive(Debug, Clone)]
pub struct Model {
    /// Column ids: members or group ids, then `shade` when used.
    pub ids: Vec<String>,
    /// Groups applied (members unmixed as one).
    pub groups: Vec<Group>,
    /// E: bands × columns (the shade column is zero).
    pub e: Array2<f64>,
    /// Whether the last column is shade.
    pub shade: bool,
    pub solver: Solver,
    /// The subset size in use (`None`: the full problem).
    pub subset_size: Option<usize>,
    /// Allowed masks in subset mode (each includes shade when used).
    pub subsets: Vec<u32>,
    /// The whitening basis Q (bands × D, orthonormal columns) of E = Q R: a pixel enters
    /// the solver as z = Qᵀy.
    pub q: Array2<f64>,
    /// R (D × M; the shade column is zero), so that Eᵀy = Rᵀz.
    pub r: Array2<f64>,
    /// The passive-set maps from z, in f64 (the reference path) and f32 (the fast path).
    pub table64: Table<f64>,
    pub table32: Table<f32>,
    /// κ of E (with shade) and a row of ones.
    pub condition: f64,
    pub closest_pairs: Vec<Pair>,
    /// Every passive set's covariance factor and multiplier spreads, for the standard
    /// errors, the covariance product and the boundary flag.
    pub spreads: std::sync::Arc<Spreads>,
}

/// Per passive set P: the covariance factor K (M × M, row-major; σ²K is the covariance of
/// the raw abundances a, zero outside P: the top-left block of the bordered system's
/// inverse) and the multipliers' spread factors ‖W_μ,j‖ (σ times it is the standard
/// deviation of μ_j, since z = Qᵀy carries the noise of y unchanged, σ²I).
#[derive(Debug, Clone)]
pub struct Spreads {
    pub columns: usize,
    stride: usize,
    data: Vec<f64>,
    ok: Vec<bool>,
}

impl Spreads {
    fn new(columns: usize) -> Spreads {
        let stride = columns * columns + columns;
        Spreads {
            columns,
            stride,
            data: vec![0.0; stride << columns],
            ok: vec![false; 1 << columns],
        }
    }

    /// K of passive set `mask` (M × M, row-major), or `None` where the set is singular or
    /// was not needed.
    #[inline]
    pub fn covariance(&self, mask: u32) -> Option<&[f64]> {
        let m = self.columns;
        self.ok
            .get(mask as usize)
            .copied()
            .unwrap_or(false)
            .then(|| &self.data[mask as usize * self.stride..][..m * m])
    }

    /// The multipliers' spread factors of passive set `mask` (M values; 0 inside P).
    #[inline]
    pub fn multipliers(&self, mask: u32) -> Option<&[f64]> {
        let m = self.columns;
        self.ok
            .get(mask as usize)
            .copied()
            .unwrap_or(false)
            .then(|| &self.data[mask as usize * self.stride + m * m..][..m])
    }
}

impl Model {
    pub fn columns(&self) -> usize {
        self.ids.len()
    }

    pub fn bands(&self) -> usize {
        self.e.nrows()
    }

    /// Columns that are members or groups (not shade).
    pub fn material_columns(&self) -> usize {
        self.ids.len() - self.shade as usize
    }

    /// The mask of every column.
    pub fn full_mask(&self) -> u32 {
        ((1u64 << self.columns()) - 1) as u32
    }

    /// A model straight from a matrix E (bands × members): no library, groups, shade or
    /// subsets, the guard bypassed — for benchmarks and reference checks.
    pub fn from_matrix(e: Array2<f64>, solver: Solver) -> Result<Model, ModelError> {
        let (b, m) = e.dim();
        let r = Resampled {
            ids: (0..m).map(|j| format!("m{j}")).collect(),
            classes: (0..m)
                .map(|j| {
                    // Alternate classes so that no two columns are ever grouped.
                    if j % 2 == 0 {
                        crate::library::Class::Other
                    } else {
                        crate::library::Class::Silicate
                    }
                })
                .collect(),
            centres_um: (0..b).map(|i| 0.4 + 0.01 * i as f64).collect(),
            matrix: e,
        };
        let p = UnmixParams {
            solver,
            shade: false,
            subsets: Subsets::Off,
            groups: false,
            force: true,
            ..Default::default()
        };
        Model::build(&r, &p)
    }

    /// Builds the model for `resampled` (the library at the cube's bands).
    pub fn build(r: &Resampled, p: &UnmixParams) -> Result<Model, ModelError> {
        let diag = diagnose(r, p.group_angle_deg);
        let groups = if p.groups {
            diag.groups.clone()
        } else {
            Vec::new()
        };
        // Columns: each member not in a group, each group (its mean spectrum), in library
        // order of first appearance.
        let mut ids = Vec::new();
        let mut cols: Vec<Vec<f64>> = Vec::new();
        for (j, id) in r.ids.iter().enumerate() {
            match groups.iter().find(|g| g.indices.contains(&j)) {
                Some(g) if g.indices[0] != j => continue,
                Some(g) => {
                    ids.push(g.id.clone());
                    let n = g.indices.len() as f64;
                    cols.push(
                        (0..r.matrix.nrows())
                            .map(|b| g.indices.iter().map(|&k| r.matrix[(b, k)]).sum::<f64>() / n)
                            .collect(),
                    );
                }
                None => {
                    ids.push(id.clone());
                    cols.push(r.matrix.column(j).to_vec());
                }
            }
        }
        // Shade is meaningful only with the sum-to-one constraint; without it the shade
        // fraction is reported as 1 − Σa instead (see `run`).
        let shade = p.shade && p.solver.sum_to_one();
        if shade {
            ids.push("shade".into());
            cols.push(vec![0.0; r.matrix.nrows()]);
        }
        let (nb, m) = (r.matrix.nrows(), cols.len());
        let e = Array2::from_shape_fn((nb, m), |(b, j)| cols[j][b]);
        if m > MAX_COLUMNS {
            return Err(ModelError::TooManyColumns {
                columns: m,
                max: MAX_COLUMNS,
            });
        }
        let condition = condition_number(&with_sum_row(&e));
        let closest: Vec<Pair> = diag
            .pairs
            .iter()
            .filter(|pair| {
                !groups
                    .iter()
                    .any(|g| g.members.contains(&pair.a) && g.members.contains(&pair.b))
            })
            .take(3)
            .cloned()
            .collect();
        let closest_text = if closest.is_empty() {
            String::new()
        } else {
            format!(
                "; closest pairs: {}",
                closest
                    .iter()
                    .map(|x| format!("{} — {} ({:.2}°)", x.a, x.b, x.angle_deg))
                    .collect::<Vec<_>>()
                    .join(", ")
            )
        };
        let unknowns = m;
        let identifiable = unknowns <= nb && condition <= MAX_CONDITION;
        let subset_size = match p.subsets {
            Subsets::Off => None,
            Subsets::UpTo(k) => Some(k),
            Subsets::Auto if identifiable || p.force => None,
            Subsets::Auto if p.solver == Solver::Fcls => Some(AUTO_SUBSET_SIZE),
            Subsets::Auto => None,
        };
        if subset_size.is_none() && !identifiable && !p.force {
            return Err(if unknowns > nb {
                ModelError::TooFewBands {
                    unknowns,
                    members: ids.join(", "),
                    bands: nb,
                    closest: closest_text,
                }
            } else {
                ModelError::IllConditioned {
                    condition,
                    max: MAX_CONDITION,
                    closest: closest_text,
                }
            });
        }
        let material = m - shade as usize;
        let shade_bit = if shade { 1u32 << material } else { 0 };
        let subsets: Vec<u32> = match subset_size {
            None => Vec::new(),
            Some(k) => (1u32..(1u32 << material))
                .filter(|mask| mask.count_ones() as usize <= k)
                .map(|mask| mask | shade_bit)
                .collect(),
        };
        let g = e.t().dot(&e);
        let needed = |mask: u32| -> bool {
            match p.solver {
                Solver::Unconstrained | Solver::SumToOne => mask as u64 == (1u64 << m) - 1,
                _ => true,
            }
        };
        let (q, r) = whiten(&e, material);
        let dims = q.ncols();
        let mut table64 = Table::with_capacity(m, dims, 0.0f64);
        let mut table32 = Table::with_capacity(m, dims, 0.0f32);
        let mut spreads = Spreads::new(m);
        for mask in 0..(1u32 << m) {
            if !needed(mask) {
                continue;
            }
            let Some(sol) = solution_map(&g, mask, p.solver.sum_to_one()) else {
                continue;
            };
            let values = sol.over_z(&r);
            let at = mask as usize * table64.stride;
            table64.data[at..at + values.len()].copy_from_slice(&values);
            for (d, v) in table32.data[at..at + values.len()].iter_mut().zip(&values) {
                *d = *v as f32;
            }
            table64.ok[mask as usize] = true;
            table32.ok[mask as usize] = true;
            let at = mask as usize * spreads.stride;
            spreads.data[at..at + m * m].copy_from_slice(&sol.cov);
            spreads.data[at + m * m..at + spreads.stride]
                .copy_from_slice(&sol.multiplier_spreads(&r));
            spreads.ok[mask as usize] = true;
        }
        Ok(Model {
            ids,
            groups,
            e,
            shade,
            solver: p.solver,
            subset_size,
            subsets,
            q,
            r,
            table64,
            table32,
            condition,
            closest_pairs: closest,
            spreads: std::sync::Arc::new(spreads),
        })
    }

    /// The diagonal of the covariance factor of passive set `mask` (σ² times it is each
    /// raw abundance's variance: the constrained Cramér–Rao form with the sum-to-one
    /// constraint), or `None` where the set's system is singular. Recomputed from E (the
    /// reference for tests); the run reads [`Spreads`].
    pub fn covariance_factor(&self, mask: u32) -> Option<Vec<f64>> {
        let g = self.e.t().dot(&self.e);
        let m = g.nrows();
        solution_map(&g, mask, self.solver.sum_to_one())
            .map(|s| (0..m).map(|i| s.cov[i * m + i]).collect())
    }

    /// The whole covariance factor K of passive set `mask` (M × M, row-major), recomputed
    /// from E like [`Model::covariance_factor`].
    pub fn covariance_matrix(&self, mask: u32) -> Option<Vec<f64>> {
        let g = self.e.t().dot(&self.e);
        solution_map(&g, mask, self.solver.sum_to_one()).map(|s| s.cov)
    }
}

/// E = Q R over the material columns (the shade column of R stays zero; Q has the material
/// count of columns, zero beyond the rank): Q's columns span E's, so z = Qᵀy carries everything the fit sees and b = Eᵀy = Rᵀz.
/// Working from z instead of b keeps the maps' rounding amplification at κ(E) rather than
/// κ(G) = κ(E)², which is what lets the f32 path use f32 maps.
fn whiten(e: &Array2<f64>, material: usize) -> (Array2<f64>, Array2<f64>) {
    let (nb, m) = e.dim();
    let mat = nalgebra::DMatrix::from_fn(nb, material, |i, j| e[(i, j)]);
    let qr = mat.qr();
    let (q, r) = (qr.q(), qr.r());
    // With fewer bands than materials Q has only `nb` columns; padding with zeros keeps D
    // equal to the material count, so every table has D = M or M − 1.
    let rank = q.ncols();
    let q = Array2::from_shape_fn(
        (nb, material),
        |(i, k)| if k < rank { q[(i, k)] } else { 0.0 },
    );
    let r = Array2::from_shape_fn((material, m), |(k, j)| {
        if k < rank && j < material {
            r[(k, j)]
        } else {
            0.0
        }
    });
    (q, r)
}

/// A passive set's solution as an affine map of b = Eᵀy: [a; μ] = map·b + off.
struct SolutionMap {
    m: usize,
    /// 2M × M, row-major.
    map: Vec<f64>,
    /// 2M.
    off: Vec<f64>,
    /// The covariance factor on P (M × M, row-major, 0 outside P).
    cov: Vec<f64>,
}

impl SolutionMap {
    /// The table entry over z (b = Rᵀz): W = map·Rᵀ stored column by column, then the
    /// offset and the standard error factors.
    fn over_z(&self, r: &Array2<f64>) -> Vec<f64> {
        let m = self.m;
        let dims = r.nrows();
        let mut out = Vec::with_capacity(2 * m * (dims + 1) + m);
        for k in 0..dims {
            for i in 0..2 * m {
                out.push((0..m).map(|j| self.map[i * m + j] * r[(k, j)]).sum());
            }
        }
        out.extend_from_slice(&self.off);
        out.extend((0..m).map(|i| self.cov[i * m + i].max(0.0).sqrt()));
        out
    }

    /// ‖W_μ,j‖ over z for every column (W = map·Rᵀ, multiplier rows M..2M).
    fn multiplier_spreads(&self, r: &Array2<f64>) -> Vec<f64> {
        let m = self.m;
        (0..m)
            .map(|i| {
                (0..r.nrows())
                    .map(|k| {
                        let w: f64 = (0..m).map(|j| self.map[(m + i) * m + j] * r[(k, j)]).sum();
                        w * w
                    })
                    .sum::<f64>()
                    .sqrt()
            })
            .collect()
    }
}

/// The covariance factor K of passive set `mask` from a Gram matrix `g` (M × M, row-major,
/// zero outside the set), or `None` when the set's system is singular: what
/// [`Model::covariance_matrix`] gives, for callers that hold only G (`compare`, from a
/// results folder).
pub(crate) fn set_covariance(g: &Array2<f64>, mask: u32, sum_to_one: bool) -> Option<Vec<f64>> {
    solution_map(g, mask, sum_to_one).map(|s| s.cov)
}

/// The solution map of passive set `mask`; `None` when its system is singular.
fn solution_map(g: &Array2<f64>, mask: u32, sum_to_one: bool) -> Option<SolutionMap> {
    let m = g.nrows();
    let p: Vec<usize> = (0..m).filter(|i| mask & (1 << i) != 0).collect();
    let k = p.len();
    if k == 0 {
        return None;
    }
    // a = A b + c over all M (zero outside P), with λ = l·b + l0 when constrained.
    let mut a_map = vec![0.0; m * m];
    let mut a_off = vec![0.0; m];
    let mut lam = vec![0.0; m];
    let mut lam0 = 0.0;
    let mut cov = vec![0.0; m * m];
    let size = k + sum_to_one as usize;
    let z = nalgebra::DMatrix::from_fn(size, size, |i, j| match (i < k, j < k) {
        (true, true) => g[(p[i], p[j])],
        (true, false) | (false, true) => 1.0,
        (false, false) => 0.0,
    });
    // Refuse numerically singular systems (e.g. two identical members in P).
    let sv = z.clone().singular_values();
    let (max, min) = (
        sv.max(),
        sv.iter()
            .cloned()
            .fold(f64::INFINITY, |a, b| a.min(b.abs())),
    );
    if min.is_nan() || min <= max * 1e-12 {
        return None;
    }
    let zi = z.try_inverse()?;
    for (r, &pi) in p.iter().enumerate() {
        for (c, &pj) in p.iter().enumerate() {
            a_map[pi * m + pj] = zi[(r, c)];
            cov[pi * m + pj] = zi[(r, c)];
        }
        if sum_to_one {
            a_off[pi] = zi[(r, k)];
        }
    }
    if sum_to_one {
        for (c, &pj) in p.iter().enumerate() {
            lam[pj] = zi[(k, c)];
        }
        lam0 = zi[(k, k)];
    }
    // μ = G a − b + λ1 = (G A − I + 1 lᵀ) b + (G c + l0 1).
    let mut map = vec![0.0; 2 * m * m];
    let mut off = vec![0.0; 2 * m];
    map[..m * m].copy_from_slice(&a_map);
    off[..m].copy_from_slice(&a_off);
    for i in 0..m {
        for j in 0..m {
            let ga: f64 = (0..m).map(|t| g[(i, t)] * a_map[t * m + j]).sum();
            map[(m + i) * m + j] = ga - if i == j { 1.0 } else { 0.0 } + lam[j];
        }
        off[m + i] = (0..m).map(|t| g[(i, t)] * a_off[t]).sum::<f64>() + lam0;
    }
    Some(SolutionMap { m, map, off, cov })
}
