//! What every pixel of a run shares (the [`Plan`]: the model's tables and matrices laid
//! out for the kernels, in the run's precision), where a task writes its pixels
//! ([`Slots`]), and the block of pixels the direct path's passes work on ([`PixelBlock`]).

use std::mem::MaybeUninit;

use super::model::{Model, Table};
use super::output::RunOptions;
use super::solve::Real;

/// What every pixel of a run shares, in the run's precision `T`.
pub(super) struct Plan<'a, T> {
    pub(super) model: &'a Model,
    pub(super) table: &'a Table<T>,
    /// Qᵀ band-major (bands × D): z = Σ_k y_k · qt[k]; in f64 for subset mode, and in `T`
    /// for the direct path.
    pub(super) qt: Vec<f64>,
    pub(super) qt_t: Vec<T>,
    /// Qᵀ band-major with each band's row padded to eight values (D ≤ 8; empty otherwise):
    /// one register per band for the AVX2 f32 whitening.
    pub(super) qt8: Vec<f32>,
    /// The full set's map from z to x for the AVX2 f32 full-set step: D columns of 16
    /// values (rows 0..M, zero-padded), then the 16 offsets; empty unless D ≤ 8 and the
    /// full set is regular.
    pub(super) wfull: Vec<f32>,
    /// R's material columns one after another (D values each), for the in-span residual.
    pub(super) rcol: Vec<f64>,
    /// E's material columns one after another, for the residual.
    pub(super) ecol: Vec<T>,
    /// E eight bands by eight bands (per chunk of eight bands, each material's eight
    /// values), for the residual sum of squares.
    pub(super) echunks: Vec<T>,
    pub(super) bands: usize,
    /// Material columns (members and groups; shade excluded).
    pub(super) mat: usize,
    pub(super) planes: usize,
    pub(super) full: u32,
    pub(super) non_negative: bool,
    pub(super) sum_to_one: f64,
    pub(super) opts: RunOptions,
    /// Subset mode: per subset, the last vector (D values; zero when its last member
    /// adds nothing to the span) of the Gram–Schmidt basis of its materials' whitened
    /// columns taken in member order, and the subset of its other members (`None` for a
    /// single member): the span of a subset is its prefix's plus that vector, for the
    /// residual bound of [`super::subsets`]. Empty otherwise.
    pub(super) bases: Vec<f64>,
    pub(super) prefixes: Vec<Option<usize>>,
}

/// [`Plan::bases`] and [`Plan::prefixes`] of `subsets` (modified Gram–Schmidt on R's
/// material columns `rcol`, D values each, in member order; a column within 1e-10 of the
/// span of the ones before adds a zero vector).
fn subset_bases(
    subsets: &[u32],
    rcol: &[f64],
    dims: usize,
    mat: usize,
) -> (Vec<f64>, Vec<Option<usize>>) {
    let materials = |mask: u32| mask & ((1u32 << mat) - 1);
    let index: std::collections::HashMap<u32, usize> = subsets
        .iter()
        .enumerate()
        .map(|(s, &m)| (materials(m), s))
        .collect();
    let mut out = vec![0.0f64; subsets.len() * dims];
    let mut prefixes = Vec::with_capacity(subsets.len());
    for &mask in subsets {
        let members: Vec<usize> = (0..mat).filter(|j| mask & (1 << j) != 0).collect();
        let mut basis: Vec<Vec<f64>> = Vec::new();
        let mut last = vec![0.0; dims];
        for &j in &members {
            let col = &rcol[j * dims..(j + 1) * dims];
            let scale = col.iter().map(|v| v * v).sum::<f64>().sqrt();
            let mut v = col.to_vec();
            for q in &basis {
                let d: f64 = q.iter().zip(&v).map(|(a, b)| a * b).sum();
                v.iter_mut().zip(q).for_each(|(x, q)| *x -= d * q);
            }
            let norm = v.iter().map(|x| x * x).sum::<f64>().sqrt();
            last = if norm > 1e-10 * scale {
                v.iter().map(|x| x / norm).collect()
            } else {
                vec![0.0; dims]
            };
            basis.push(last.clone());
        }
        let s = prefixes.len();
        out[s * dims..(s + 1) * dims].copy_from_slice(&last);
        let top = members.last().map_or(0, |&j| 1u32 << j);
        let prefix = materials(mask) & !top;
        // Every prefix of a subset of up to K members is a subset too.
        prefixes.push((prefix != 0).then(|| index[&prefix]));
    }
    (out, prefixes)
}

impl<'a, T: Real> Plan<'a, T> {
    pub(super) fn new(model: &'a Model, opts: &RunOptions) -> Plan<'a, T> {
        let (nb, mat) = (model.bands(), model.material_columns());
        let dims = model.q.ncols();
        let cast = |v: f64| T::from(v).expect("finite model values");
        let rcol: Vec<f64> = (0..mat)
            .flat_map(|j| (0..dims).map(move |k| model.r[(k, j)]))
            .collect();
        let (bases, prefixes) = subset_bases(&model.subsets, &rcol, dims, mat);
        let qt: Vec<f64> = (0..nb)
            .flat_map(|b| (0..dims).map(move |k| model.q[(b, k)]))
            .collect();
        Plan {
            model,
            table: T::table(model),
            qt_t: qt.iter().copied().map(cast).collect(),
            qt8: if dims <= 8 {
                qt.chunks_exact(dims.max(1))
                    .flat_map(|row| (0..8).map(|k| row.get(k).map_or(0.0, |v| *v as f32)))
                    .collect()
            } else {
                Vec::new()
            },
            qt,
            rcol,
            bases,
            prefixes,
            ecol: (0..mat)
                .flat_map(|j| (0..nb).map(move |b| model.e[(b, j)]))
                .map(cast)
                .collect(),
            echunks: (0..nb / 8)
                .flat_map(|c| (0..mat).flat_map(move |j| (0..8).map(move |t| (c * 8 + t, j))))
                .map(|(b, j)| cast(model.e[(b, j)]))
                .collect(),
            wfull: match T::table(model).entry(model.full_mask()) {
                // Each column's abundance rows (the first M of its 2M), then the offsets'.
                Some(e) if dims <= 8 => {
                    let m = model.columns();
                    e.map
                        .chunks_exact(2 * m)
                        .chain([e.off])
                        .flat_map(|col| {
                            (0..16).map(move |i| if i < m { col[i].widen() as f32 } else { 0.0 })
                        })
                        .collect()
                }
                _ => Vec::new(),
            },
            bands: nb,
            mat,
            planes: mat + opts.report_shade as usize,
            full: model.full_mask(),
            non_negative: model.solver.non_negative(),
            sum_to_one: model.solver.sum_to_one() as u8 as f64,
            opts: *opts,
        }
    }
}

/// The output slots of one task's rows (pixel-major, as the arrays store them).
pub(super) struct Slots<'a> {
    pub(super) ab: &'a mut [MaybeUninit<f32>],
    /// The standard errors' scale σ / Σa and passive set ([`StdErrors`]).
    pub(super) sc: &'a mut [MaybeUninit<f32>],
    pub(super) ps: &'a mut [u16],
    pub(super) rm: &'a mut [MaybeUninit<f32>],
    pub(super) ac: &'a mut [u8],
    pub(super) um: &'a mut [bool],
    pub(super) subset: Option<&'a mut [u16]>,
    pub(super) residual: Option<&'a mut [f32]>,
    /// Subset mode: each pixel's covariance of the reported planes, upper triangle.
    pub(super) mixture: Option<&'a mut [f32]>,
}

impl Slots<'_> {
    /// Marks pixel `px` as not unmixed (its planes NaN).
    #[inline]
    pub(super) fn blank(&mut self, px: usize, planes: usize) {
        for v in &mut self.ab[px * planes..(px + 1) * planes] {
            v.write(f32::NAN);
        }
        self.sc[px].write(f32::NAN);
        self.ps[px] = 0;
        self.rm[px].write(f32::NAN);
    }

    pub(super) fn residual_of(&mut self, px: usize, nb: usize) -> Option<&mut [f32]> {
        self.residual
            .as_deref_mut()
            .map(|r| &mut r[px * nb..(px + 1) * nb])
    }
}

/// Pixels per block of the direct path.
pub(super) const BLOCK: usize = 32;

/// Marks a skipped pixel in [`PixelBlock::flips`].
pub(super) const SKIP: u32 = u32::MAX;

/// One block of pixels in flight on the direct path.
pub(super) struct PixelBlock<'a, T, const M: usize, const D: usize> {
    /// The block's spectra (pixel-major) and validity.
    pub(super) y: &'a [f32],
    /// The spectra after the block's (prefetched while it is whitened).
    pub(super) next: &'a [f32],
    pub(super) ok: &'a [bool],
    /// The first pixel's index in the task.
    pub(super) px0: usize,
    pub(super) z: [[T; D]; BLOCK],
    pub(super) a: [[T; M]; BLOCK],
    /// The full set's violators, or [`SKIP`].
    pub(super) flips: [u32; BLOCK],
    pub(super) passive: [u32; BLOCK],
    /// One spectrum's worth of working space.
    pub(super) scratch: Vec<T>,
}
