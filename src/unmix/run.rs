//! The parallel driver: unmixes a cube block of rows by block of rows, so no per-band
//! intermediate (whitened values, residuals) is ever held for the whole cube.
//!
//! Per pixel: z = Qᵀy (the whitened spectrum, see [`super::model`]), the active-set solve
//! (or, in subset mode, one solve per allowed subset, keeping the lowest
//! BIC = B ln(RSS/B) + k ln B, with k the number of non-zero abundances — the stated penalty
//! against over-fitting; Roberts et al. 1998 for the per-pixel subsets), the residual sum of
//! squares, RMSE = √(RSS/B), and standard errors σ √(cov factor) with
//! σ² = RSS / (B − k + c) (c = 1 with the sum-to-one constraint) or the noise level given.
//!
//! The direct path whitens in the run's precision and takes the RSS from the residual
//! y − E a itself, eight bands at a time: a sum of squares of small values, with nothing to
//! cancel, so float32 holds it (the f32 path stays within 1e-6 of the f64 path on the SciPy
//! reference problems). Subset mode, which scores many subsets of one pixel, whitens once
//! in f64 with yᵀy and scores each subset by RSS = ‖y − Qz‖² + ‖z − R a‖² (orthogonal
//! parts: yᵀy − zᵀz from f64 sums, so no float32 cancellation, plus D in-span terms)
//! without reading the bands again.
//!
//! Reported abundances have shade removed and are renormalised to sum to one over the
//! materials; their standard errors are divided by the same sum. The shade fraction is
//! reported too: the shade abundance with the sum-to-one constraint, 1 − Σa without.
//!
//! Pixels that are masked with a count, never NaN without a mark: input no-data, zero
//! signal in every band, and pixels whose material sum is below [`DARK_LIMIT`] (almost all
//! shade: night side, deep shadow), whose composition is undefined.
//!
//! Results do not depend on the thread count or on neighbouring pixels: every pixel's
//! pivoting starts from the full set.

use std::mem::MaybeUninit;
use std::sync::atomic::{AtomicUsize, Ordering};

use ndarray::{Array2, Array3, ArrayView2, ArrayView3};
use rayon::prelude::*;

use super::model::{Model, Table};
use super::solve::{avx2_available, full_step, madd, model_sizes, pivot, positives, tree_sum};

/// Pixels whose materials sum below this are too dark to unmix.
pub const DARK_LIMIT: f64 = 0.02;

pub use super::solve::Real;

/// Pixel counts of a run.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Counts {
    pub unmixed: usize,
    pub nodata: usize,
    pub zero_signal: usize,
    pub dark: usize,
    /// Pixels solved by the enumeration fallback.
    pub enumerated: usize,
    /// Active-set steps beyond the first, summed over pixels.
    pub steps: usize,
}

/// Everything unmixing produces.
#[derive(Debug, Clone)]
pub struct UnmixOutput {
    /// Plane ids: materials (members or groups), then `shade` when reported.
    pub ids: Vec<String>,
    /// (row, col, plane); NaN where `unmixed` is false.
    pub abundance: Array3<f32>,
    /// The standard errors, factored (expanded by [`UnmixOutput::stderr`]).
    pub errors: StdErrors,
    pub rmse: Array2<f32>,
    /// Non-zero abundances per pixel (0 where not unmixed).
    pub active: Array2<u8>,
    /// Subset mode: index + 1 into the model's subsets of the winning subset (0 = none).
    pub subset: Option<Array2<u16>>,
    pub residual: Option<Array3<f32>>,
    pub unmixed: Array2<bool>,
    pub counts: Counts,
}

/// The standard errors in factored form. Pixel (r, c)'s standard error on plane j is
/// `scale[(r, c)] · factor_j(passive[(r, c)])`: the scale is σ / Σa (the noise level over
/// the material sum that renormalises the abundances) and the factor √c_j the constrained
/// Cramér–Rao factor of the pixel's passive set, which the model's table holds for every
/// set. Six bytes per pixel instead of four per plane; the planes are formed when asked
/// for. The shade plane's error is σ·√c (not renormalised), with σ = scale · (1 − shade)
/// (the sum-to-one constraint that a shade column comes with); NaN without a shade column.
#[derive(Debug, Clone)]
pub struct StdErrors {
    /// σ / Σa per pixel; NaN where not unmixed.
    pub scale: Array2<f32>,
    /// The passive set per pixel (bit j: column j); 0 where not unmixed.
    pub passive: Array2<u16>,
    /// √c_j of every passive set, `columns` values per set (NaN for singular sets).
    factors: Vec<f32>,
    columns: usize,
    materials: usize,
    /// Whether the model has a shade column (the last).
    shade_column: bool,
}

impl StdErrors {
    /// The factors √c_j of passive set `set` (one per column: materials, then shade).
    pub fn factors(&self, set: u16) -> &[f32] {
        &self.factors[set as usize * self.columns..][..self.columns]
    }
}

impl UnmixOutput {
    /// The standard error of pixel (r, c) on plane j (NaN where not unmixed).
    pub fn stderr_at(&self, r: usize, c: usize, j: usize) -> f32 {
        let e = &self.errors;
        let scale = e.scale[(r, c)];
        let f = e.factors(e.passive[(r, c)]);
        if j < e.materials {
            scale * f[j]
        } else if e.shade_column {
            scale * (1.0 - self.abundance[(r, c, j)]) * f[e.materials]
        } else {
            f32::NAN
        }
    }

    /// The standard errors as planes, (row, col, plane) like the abundances.
    pub fn stderr(&self) -> Array3<f32> {
        Array3::from_shape_fn(self.abundance.dim(), |(r, c, j)| self.stderr_at(r, c, j))
    }
}

/// Options of a run that are not model parameters.
#[derive(Debug, Clone, Copy)]
pub struct RunOptions {
    /// Report the shade fraction as a plane.
    pub report_shade: bool,
    /// Noise σ for standard errors; `None` estimates per pixel.
    pub noise: Option<f64>,
    pub residuals: bool,
}

/// Rows per parallel task.
const ROWS_PER_TASK: usize = 8;

/// What every pixel of a run shares, in the run's precision `T`.
struct Plan<'a, T> {
    model: &'a Model,
    table: &'a Table<T>,
    /// Qᵀ band-major (bands × D): z = Σ_k y_k · qt[k]; in f64 for subset mode, and in `T`
    /// for the direct path.
    qt: Vec<f64>,
    qt_t: Vec<T>,
    /// Qᵀ band-major with each band's row padded to eight values (D ≤ 8; empty otherwise):
    /// one register per band for the AVX2 f32 whitening.
    qt8: Vec<f32>,
    /// The full set's map from z to x for the AVX2 f32 full-set step: D columns of 16
    /// values (rows 0..M, zero-padded), then the 16 offsets; empty unless D ≤ 8 and the
    /// full set is regular.
    wfull: Vec<f32>,
    /// R's material columns one after another (D values each), for the in-span residual.
    rcol: Vec<f64>,
    /// E's material columns one after another, for the residual.
    ecol: Vec<T>,
    /// E eight bands by eight bands (per chunk of eight bands, each material's eight
    /// values), for the residual sum of squares.
    echunks: Vec<T>,
    bands: usize,
    /// Material columns (members and groups; shade excluded).
    mat: usize,
    planes: usize,
    full: u32,
    non_negative: bool,
    sum_to_one: f64,
    opts: RunOptions,
}

impl<'a, T: Real> Plan<'a, T> {
    fn new(model: &'a Model, opts: &RunOptions) -> Plan<'a, T> {
        let (nb, mat) = (model.bands(), model.material_columns());
        let dims = model.q.ncols();
        let cast = |v: f64| T::from(v).expect("finite model values");
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
            rcol: (0..mat)
                .flat_map(|j| (0..dims).map(move |k| model.r[(k, j)]))
                .collect(),
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
struct Slots<'a> {
    ab: &'a mut [MaybeUninit<f32>],
    /// The standard errors' scale σ / Σa and passive set ([`StdErrors`]).
    sc: &'a mut [MaybeUninit<f32>],
    ps: &'a mut [u16],
    rm: &'a mut [MaybeUninit<f32>],
    ac: &'a mut [u8],
    um: &'a mut [bool],
    subset: Option<&'a mut [u16]>,
    residual: Option<&'a mut [f32]>,
}

impl Slots<'_> {
    /// Marks pixel `px` as not unmixed (its planes NaN).
    #[inline]
    fn blank(&mut self, px: usize, planes: usize) {
        for v in &mut self.ab[px * planes..(px + 1) * planes] {
            v.write(f32::NAN);
        }
        self.sc[px].write(f32::NAN);
        self.ps[px] = 0;
        self.rm[px].write(f32::NAN);
    }

    fn residual_of(&mut self, px: usize, nb: usize) -> Option<&mut [f32]> {
        self.residual
            .as_deref_mut()
            .map(|r| &mut r[px * nb..(px + 1) * nb])
    }
}

/// z = Qᵀy (D values) in precision `T`, with four interleaved accumulator sets to hide
/// the multiply-add latency.
#[inline(always)]
fn whiten<T: Real, const D: usize, const FUSED: bool>(y: &[f32], qt: &[T]) -> [T; D] {
    let mut acc = [[T::zero(); D]; 4];
    let mut bands = y.chunks_exact(4);
    let mut rows = qt.chunks_exact(4 * D);
    for (yy, rr) in (&mut bands).zip(&mut rows) {
        for k in 0..4 {
            let yk = T::from_f32(yy[k]);
            let row: &[T; D] = rr[k * D..(k + 1) * D].try_into().expect("D values");
            for j in 0..D {
                acc[k][j] = madd::<T, FUSED>(row[j], yk, acc[k][j]);
            }
        }
    }
    for (yv, row) in bands
        .remainder()
        .iter()
        .zip(rows.remainder().chunks_exact(D))
    {
        let yk = T::from_f32(*yv);
        for j in 0..D {
            acc[0][j] = madd::<T, FUSED>(row[j], yk, acc[0][j]);
        }
    }
    std::array::from_fn(|j| (acc[0][j] + acc[1][j]) + (acc[2][j] + acc[3][j]))
}

/// ‖y − E a‖² from the residual itself, eight bands at a time: no cancellation, so the
/// run's precision holds it to a few units of rounding of the residual. `chunks` holds E
/// eight bands by eight bands, `ecol` its material columns (for the last bands).
#[inline(always)]
fn direct_rss<T: Real, const D: usize, const FUSED: bool>(
    y: &[f32],
    a: &[T; D],
    chunks: &[T],
    ecol: &[T],
) -> f64 {
    let nb = y.len();
    let neg = a.map(|v| -v);
    let mut lanes = [T::zero(); 8];
    let mut ys = y.chunks_exact(8);
    for (yc, ec) in (&mut ys).zip(chunks.chunks_exact(8 * D)) {
        let mut r: [T; 8] = std::array::from_fn(|t| T::from_f32(yc[t]));
        for (col, aj) in ec.chunks_exact(8).zip(&neg) {
            for t in 0..8 {
                r[t] = madd::<T, FUSED>(col[t], *aj, r[t]);
            }
        }
        for t in 0..8 {
            lanes[t] = madd::<T, FUSED>(r[t], r[t], lanes[t]);
        }
    }
    let mut rss = tree_sum(lanes).widen();
    let first = nb - ys.remainder().len();
    for (b, yv) in ys.remainder().iter().enumerate() {
        let mut r = T::from_f32(*yv);
        for (j, aj) in neg.iter().enumerate() {
            r = madd::<T, FUSED>(ecol[j * nb + first + b], *aj, r);
        }
        rss += r.widen() * r.widen();
    }
    rss
}

/// [`direct_rss`] for f32 with AVX2 + FMA written out: eight bands per register and every
/// material's multiply-add on them (LLVM's vectoriser packed the portable loop two lanes
/// wide). `chunks` holds E eight bands by eight bands, `ecol` its material columns.
/// Inlined into both of its callers, AVX2 + FMA functions themselves (a target-feature
/// function of its own was not inlined into the finishing pass: 26 more instructions per
/// pixel).
///
/// # Safety
/// AVX2 and FMA must be available. (The lengths the reads rely on are asserted.)
#[cfg(target_arch = "x86_64")]
#[inline(always)]
unsafe fn direct_rss_f32<const D: usize>(
    y: &[f32],
    a: &[f32; D],
    chunks: &[f32],
    ecol: &[f32],
) -> f64 {
    use std::arch::x86_64::*;
    let nb = y.len();
    let full = nb / 8;
    assert!(chunks.len() >= full * 8 * D && ecol.len() >= nb * D);
    let am: [__m256; D] = std::array::from_fn(|j| _mm256_set1_ps(a[j]));
    let mut acc = _mm256_setzero_ps();
    for c in 0..full {
        // SAFETY (of the reads): band c·8 + 7 < nb, and chunk c has D × 8 values.
        let mut r = _mm256_loadu_ps(y.as_ptr().add(c * 8));
        let base = chunks.as_ptr().add(c * 8 * D);
        for (j, aj) in am.iter().enumerate() {
            r = _mm256_fnmadd_ps(_mm256_loadu_ps(base.add(j * 8)), *aj, r);
        }
        acc = _mm256_fmadd_ps(r, r, acc);
    }
    let mut lanes = [0.0f32; 8];
    _mm256_storeu_ps(lanes.as_mut_ptr(), acc);
    let mut rss = tree_sum(lanes) as f64;
    for (b, yv) in y.iter().enumerate().skip(full * 8) {
        let mut r = *yv;
        for (j, aj) in a.iter().enumerate() {
            r = ecol[j * nb + b].mul_add(-aj, r);
        }
        rss += (r as f64) * (r as f64);
    }
    rss
}

/// RSS = ‖y − Qz‖² + ‖z − R a‖² (the two parts are orthogonal), in f64: the out-of-span
/// energy yᵀy − zᵀz from f64 sums of the f32 samples (no float32 cancellation), then the
/// in-span residual in D dimensions. Equals ‖y − E a‖² without touching the bands again.
#[inline(always)]
fn whitened_rss<T: Real, const D: usize, const FUSED: bool>(
    z: &[f64; D],
    yy: f64,
    a: &[T; D],
    rcol: &[f64],
) -> f64 {
    let zz = tree_sum(z.map(|v| v * v));
    let mut fit = [0.0f64; D];
    for (j, col) in rcol.chunks_exact(D).enumerate() {
        let aj = a[j].widen();
        for k in 0..D {
            fit[k] = madd::<f64, FUSED>(col[k], aj, fit[k]);
        }
    }
    let mut d2 = [0.0f64; D];
    for k in 0..D {
        let d = z[k] - fit[k];
        d2[k] = d * d;
    }
    (yy - zz).max(0.0) + tree_sum(d2)
}

/// RSS of the direct residual r = y − E a (no cancellation): r is built in `scratch` one
/// material at a time (a multiply-add over the bands, which vectorises along them), then
/// squared into eight lanes. Copies r to `res` when given. `ecol` holds E's material
/// columns one after another.
#[inline(always)]
fn residual<T: Real, const D: usize, const FUSED: bool>(
    y: &[f32],
    a: &[T; D],
    ecol: &[T],
    scratch: &mut [T],
    res: Option<&mut [f32]>,
) -> f64 {
    let nb = y.len();
    let r = &mut scratch[..nb];
    for (ri, yv) in r.iter_mut().zip(y) {
        *ri = T::from_f32(*yv);
    }
    for (col, aj) in ecol.chunks_exact(nb).zip(a) {
        let neg = -*aj;
        for (ri, e) in r.iter_mut().zip(col) {
            *ri = madd::<T, FUSED>(*e, neg, *ri);
        }
    }
    let mut lanes = [T::zero(); 8];
    let mut chunks = r.chunks_exact(8);
    for c in &mut chunks {
        for t in 0..8 {
            lanes[t] = madd::<T, FUSED>(c[t], c[t], lanes[t]);
        }
    }
    let mut rss = tree_sum(lanes).widen();
    for v in chunks.remainder() {
        rss += v.widen() * v.widen();
    }
    if let Some(out) = res {
        for (o, v) in out.iter_mut().zip(r.iter()) {
            *o = v.widen() as f32;
        }
    }
    rss
}

/// Writes one solved pixel: renormalised abundances, standard errors, RMSE, active count;
/// or marks it dark. The D materials are a compile-time length, so their rows are written
/// a vector at a time.
#[inline(always)]
fn finish<T: Real, const M: usize, const D: usize>(
    plan: &Plan<T>,
    a: &[T; M],
    Fit {
        sigma,
        rmse,
        nonzero,
    }: Fit,
    passive: u32,
    slots: &mut Slots,
    px: usize,
    counts: &mut Counts,
) {
    let materials: &[T; D] = a[..D].try_into().expect("D materials");
    let sum = tree_sum(*materials).widen();
    if sum.is_nan() || sum < DARK_LIMIT {
        counts.dark += 1;
        slots.blank(px, plan.planes);
        return;
    }
    let inv = 1.0 / sum;
    let inv_t = T::from(inv).unwrap_or(T::nan());
    let planes = plan.planes;
    let out_ab: &mut [MaybeUninit<f32>; D] = (&mut slots.ab[px * planes..][..D])
        .try_into()
        .expect("D planes");
    for j in 0..D {
        out_ab[j].write((materials[j] * inv_t).widen() as f32);
    }
    if plan.opts.report_shade {
        let shade = if plan.model.shade {
            a[D].widen()
        } else {
            1.0 - sum
        };
        slots.ab[px * planes + D].write(shade as f32);
    }
    slots.sc[px].write((sigma * inv) as f32);
    slots.ps[px] = passive as u16;
    slots.rm[px].write(rmse as f32);
    slots.ac[px] = nonzero as u8;
    slots.um[px] = true;
    counts.unmixed += 1;
}

/// One solved pixel's fit: the noise level σ for its standard errors (the one given, or
/// √(RSS / (B − k + c))), its RMSE √(RSS / B), and k, its number of non-zero abundances.
#[derive(Debug, Clone, Copy, Default)]
struct Fit {
    sigma: f64,
    rmse: f64,
    nonzero: u32,
}

/// The square roots are taken in f32, eight to a vector instruction when a block's fits
/// are computed together (σ and the RMSE are written as f32 whatever the precision).
#[inline(always)]
fn fit_of<T>(plan: &Plan<T>, rss: f64, nonzero: u32) -> Fit {
    let nb = plan.bands as f64;
    let sigma = match plan.opts.noise {
        Some(n) => n,
        None => ((rss / (nb - nonzero as f64 + plan.sum_to_one).max(1.0)) as f32).sqrt() as f64,
    };
    Fit {
        sigma,
        rmse: ((rss / nb) as f32).sqrt() as f64,
        nonzero,
    }
}

/// Whether pixel `y` is skipped before solving (no data, or zero in every band); counts
/// it and blanks its slots.
#[inline(always)]
fn skipped(
    y: &[f32],
    valid: bool,
    slots: &mut Slots,
    px: usize,
    planes: usize,
    counts: &mut Counts,
) -> bool {
    skipped_as(
        valid,
        || y.iter().all(|v| *v == 0.0),
        slots,
        px,
        planes,
        counts,
    )
}

/// [`skipped`] with the zero-signal test given.
#[inline(always)]
fn skipped_as(
    valid: bool,
    zero: impl FnOnce() -> bool,
    slots: &mut Slots,
    px: usize,
    planes: usize,
    counts: &mut Counts,
) -> bool {
    if !valid {
        counts.nodata += 1;
    } else if zero() {
        counts.zero_signal += 1;
    } else {
        return false;
    }
    slots.blank(px, planes);
    true
}

/// Pixels per block of the direct path.
const BLOCK: usize = 32;

/// Marks a skipped pixel in [`Block::flips`].
const SKIP: u32 = u32::MAX;

/// One block of pixels in flight on the direct path.
struct Block<'a, T, const M: usize, const D: usize> {
    /// The block's spectra (pixel-major) and validity.
    y: &'a [f32],
    /// The spectra after the block's (prefetched while it is whitened).
    next: &'a [f32],
    ok: &'a [bool],
    /// The first pixel's index in the task.
    px0: usize,
    z: [[T; D]; BLOCK],
    a: [[T; M]; BLOCK],
    /// The full set's violators, or [`SKIP`].
    flips: [u32; BLOCK],
    passive: [u32; BLOCK],
    /// One spectrum's worth of working space.
    scratch: Vec<T>,
}

/// Runs one pass in the variant `FUSED` names.
macro_rules! run_pass {
    ($fused:ident, $plain:ident, $avx2:ident, $($arg:expr),*) => {{
        #[cfg(target_arch = "x86_64")]
        if $fused {
            // SAFETY: FUSED kernels are chosen only after run-time detection of AVX2 and
            // FMA (`rows_kernel`).
            unsafe { $avx2($($arg),*) }
        } else {
            $plain($($arg),*)
        }
        #[cfg(not(target_arch = "x86_64"))]
        $plain($($arg),*)
    }};
}

/// Pass 1: skip tests, whitening and the full-set step, branch-free per pixel.
#[inline(always)]
fn pass_start<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    plan: &Plan<T>,
    blk: &mut Block<T, M, D>,
    slots: &mut Slots,
    counts: &mut Counts,
) {
    let nb = plan.bands;
    #[cfg(target_arch = "x86_64")]
    if FUSED && std::mem::size_of::<T>() == 4 && !plan.wfull.is_empty() {
        // SAFETY: FUSED code runs only after run-time detection of AVX2 and FMA; T is f32
        // (Real has two types, and only f32 is 4 bytes), so the casts keep the layouts.
        unsafe {
            let plan = &*(plan as *const Plan<T>).cast::<Plan<f32>>();
            let blk = &mut *(blk as *mut Block<T, M, D>).cast::<Block<f32, M, D>>();
            let zero = whiten_block_f32(blk.y, blk.next, nb, &plan.qt8, &mut blk.z);
            for (i, &ok) in blk.ok.iter().enumerate() {
                let skip = skipped_as(
                    ok,
                    || zero >> i & 1 == 1,
                    slots,
                    blk.px0 + i,
                    plan.planes,
                    counts,
                );
                blk.flips[i] = if skip { SKIP } else { 0 };
            }
            full_steps_f32(plan, blk);
        }
        return;
    }
    for (i, (y, &ok)) in blk.y.chunks_exact(nb).zip(blk.ok).enumerate() {
        let skip = skipped(y, ok, slots, blk.px0 + i, plan.planes, counts);
        blk.flips[i] = if skip { SKIP } else { 0 };
    }
    run_pass!(
        FUSED,
        whiten_plain,
        whiten_avx2,
        plan,
        blk.y,
        blk.next,
        &blk.flips,
        &mut blk.z
    );
    for i in 0..blk.ok.len() {
        if blk.flips[i] != SKIP {
            (blk.a[i], blk.flips[i]) =
                full_step::<T, M, D, FUSED>(plan.table, &blk.z[i], plan.full, plan.non_negative);
        }
    }
}

/// [`full_step`] for a block in f32 with D ≤ 8, AVX2 + FMA written out: x = W z + off in
/// one register (two for more than eight columns), the same even/odd chains as the
/// portable evaluation, the tolerance from |z| summed in `tree_sum`'s order, and the
/// violators from one sign mask.
///
/// # Safety
/// AVX2 and FMA must be available.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma,popcnt")]
unsafe fn full_steps_f32<const M: usize, const D: usize>(
    plan: &Plan<f32>,
    blk: &mut Block<f32, M, D>,
) {
    use std::arch::x86_64::*;
    assert!(D <= 8 && M <= 16 && plan.wfull.len() == 16 * (D + 1));
    let w = plan.wfull.as_ptr();
    let lanes = |k: usize| {
        _mm256_cmpgt_epi32(
            _mm256_set1_epi32(k as i32),
            _mm256_setr_epi32(0, 1, 2, 3, 4, 5, 6, 7),
        )
    };
    let (zlanes, alanes, hilanes) = (lanes(D), lanes(M), lanes(M.saturating_sub(8)));
    let abs = _mm256_castsi256_ps(_mm256_set1_epi32(0x7fff_ffff));
    let scale16 = f32::EPSILON * 16.0;
    let allowed = if plan.non_negative { plan.full } else { 0 };
    for i in 0..blk.ok.len() {
        if blk.flips[i] == SKIP {
            continue;
        }
        let z = &blk.z[i];
        // SAFETY (of the reads): wfull holds D + 1 rows of 16 values (asserted); z has D
        // values, read in full only when D = 8.
        let (mut lo, mut lo_odd) = (_mm256_loadu_ps(w.add(16 * D)), _mm256_setzero_ps());
        let (mut hi, mut hi_odd) = (_mm256_loadu_ps(w.add(16 * D + 8)), _mm256_setzero_ps());
        for (k, zk) in z.iter().enumerate() {
            let zk = _mm256_set1_ps(*zk);
            let col = w.add(16 * k);
            if k % 2 == 0 {
                lo = _mm256_fmadd_ps(_mm256_loadu_ps(col), zk, lo);
                if M > 8 {
                    hi = _mm256_fmadd_ps(_mm256_loadu_ps(col.add(8)), zk, hi);
                }
            } else {
                lo_odd = _mm256_fmadd_ps(_mm256_loadu_ps(col), zk, lo_odd);
                if M > 8 {
                    hi_odd = _mm256_fmadd_ps(_mm256_loadu_ps(col.add(8)), zk, hi_odd);
                }
            }
        }
        let (lo, hi) = (_mm256_add_ps(lo, lo_odd), _mm256_add_ps(hi, hi_odd));
        let zv = if D == 8 {
            _mm256_loadu_ps(z.as_ptr())
        } else {
            _mm256_maskload_ps(z.as_ptr(), zlanes)
        };
        let za = _mm256_and_ps(zv, abs);
        let h = _mm_add_ps(_mm256_castps256_ps128(za), _mm256_extractf128_ps::<1>(za));
        let h = _mm_add_ps(h, _mm_movehl_ps(h, h));
        let sum = _mm_cvtss_f32(_mm_add_ss(h, _mm_movehdup_ps(h)));
        let tol = _mm256_set1_ps(scale16 * (1.0 + sum));
        let a = blk.a[i].as_mut_ptr();
        if M >= 8 {
            _mm256_storeu_ps(a, lo);
        } else {
            _mm256_maskstore_ps(a, alanes, lo);
        }
        let mut mask = _mm256_movemask_ps(_mm256_add_ps(lo, tol)) as u32;
        if M > 8 {
            _mm256_maskstore_ps(a.add(8), hilanes, hi);
            mask |= (_mm256_movemask_ps(_mm256_add_ps(hi, tol)) as u32) << 8;
        }
        blk.flips[i] = mask & allowed;
    }
}

/// Pass 2: pivoting, for the pixels whose full set is not optimal.
#[inline(always)]
fn pass_pivot<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    plan: &Plan<T>,
    blk: &mut Block<T, M, D>,
    _slots: &mut Slots,
    counts: &mut Counts,
) {
    let full = plan.full;
    for i in 0..blk.ok.len() {
        match blk.flips[i] {
            SKIP => {}
            0 => {
                blk.passive[i] = full;
                if plan.non_negative {
                    for v in &mut blk.a[i] {
                        *v = v.max(T::zero());
                    }
                }
            }
            f => {
                let o = pivot::<T, M, D, FUSED>(
                    plan.table,
                    &blk.z[i],
                    full,
                    full ^ f,
                    true,
                    &mut blk.a[i],
                );
                blk.passive[i] = o.passive;
                counts.steps += o.steps as usize + 1;
                counts.enumerated += o.enumerated as usize;
            }
        }
    }
}

/// Pass 3: residuals and outputs. The residual sums of squares of the whole block come
/// first, then their noise levels and RMSEs in one loop (the divisions and square roots
/// vectorise there, instead of stalling each pixel's writes), then the writes.
#[inline(always)]
fn pass_finish<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    plan: &Plan<T>,
    blk: &mut Block<T, M, D>,
    slots: &mut Slots,
    counts: &mut Counts,
) {
    let nb = plan.bands;
    let mut rss = [0.0f64; BLOCK];
    let mut nonzero = [0u32; BLOCK];
    for (i, y) in blk.y.chunks_exact(nb).enumerate() {
        if blk.flips[i] == SKIP {
            continue;
        }
        let am: &[T; D] = blk.a[i][..D].try_into().expect("D materials");
        rss[i] = match slots.residual_of(blk.px0 + i, nb) {
            None => run_pass!(FUSED, rss_plain, rss_avx2, y, am, &plan.echunks, &plan.ecol),
            res => run_pass!(
                FUSED,
                residual_plain,
                residual_avx2,
                y,
                am,
                &plan.ecol,
                &mut blk.scratch,
                res
            ),
        };
        nonzero[i] = positives::<T, M, FUSED>(&blk.a[i]).count_ones();
    }
    let fits: [Fit; BLOCK] = std::array::from_fn(|i| fit_of(plan, rss[i], nonzero[i]));
    for (i, fit) in fits.iter().enumerate().take(blk.ok.len()) {
        if blk.flips[i] != SKIP {
            let px = blk.px0 + i;
            finish::<T, M, D>(plan, &blk.a[i], *fit, blk.passive[i], slots, px, counts);
        }
    }
}

// The whitening and the residuals as functions of their own, portable and AVX2 + FMA:
// inlined into a pass, the vectoriser packed their accumulators two lanes wide (and
// spilled them); on their own they run a full register wide.

/// z of every pixel of a block that is not skipped (one call per block, so the processor
/// overlaps neighbouring pixels' sums), asking for the matching pixel of the next block
/// (`next`) to be brought into the cache meanwhile: spread over the block, the requests
/// do not queue up as a burst of them at the block's start did.
#[inline(always)]
fn whiten_block<T: Real, const D: usize, const FUSED: bool>(
    ys: &[f32],
    next: &[f32],
    nb: usize,
    qt: &[T],
    flips: &[u32; BLOCK],
    z: &mut [[T; D]; BLOCK],
) {
    for (i, ((y, f), z)) in ys.chunks_exact(nb).zip(flips).zip(z.iter_mut()).enumerate() {
        prefetch(next.get(i * nb..).unwrap_or(&[]), nb);
        if *f != SKIP {
            *z = whiten::<T, D, FUSED>(y, qt);
        }
    }
}

#[inline(never)]
fn whiten_plain<T: Real, const D: usize>(
    plan: &Plan<T>,
    ys: &[f32],
    next: &[f32],
    flips: &[u32; BLOCK],
    z: &mut [[T; D]; BLOCK],
) {
    whiten_block::<T, D, false>(ys, next, plan.bands, &plan.qt_t, flips, z)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma,popcnt")]
#[inline(never)]
unsafe fn whiten_avx2<T: Real, const D: usize>(
    plan: &Plan<T>,
    ys: &[f32],
    next: &[f32],
    flips: &[u32; BLOCK],
    z: &mut [[T; D]; BLOCK],
) {
    whiten_block::<T, D, true>(ys, next, plan.bands, &plan.qt_t, flips, z)
}

/// [`whiten_block`] for f32 and D ≤ 8 with AVX2 + FMA written out, for every pixel of the
/// block: one register holds z, each band adds its padded row of Qᵀ (`qt8`) times the
/// band's value, eight bands per loop turn over four accumulators (the same order of sums
/// as the portable code). Returns the block's zero-signal pixels (bit i: every band ±0),
/// tested on the same reads.
///
/// # Safety
/// AVX2 and FMA must be available. (The lengths the reads rely on are asserted.)
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn whiten_block_f32<const D: usize>(
    ys: &[f32],
    next: &[f32],
    nb: usize,
    qt8: &[f32],
    z: &mut [[f32; D]; BLOCK],
) -> u32 {
    use std::arch::x86_64::*;
    let n = BLOCK.min(ys.len() / nb.max(1));
    let magnitude = _mm256_castsi256_ps(_mm256_set1_epi32(0x7fff_ffff));
    let mut zero = 0u32;
    assert!(D <= 8 && nb > 0 && qt8.len() == nb * 8 && ys.len() >= n * nb);
    let q = qt8.as_ptr();
    for (i, zi) in z.iter_mut().enumerate().take(n) {
        // The matching pixel of the next block, line by line (a prefetch never faults, and
        // the wrapping address is never dereferenced).
        if (i + 1) * nb <= next.len() {
            let p = next.as_ptr().wrapping_add(i * nb);
            let mut off = 0;
            while off < nb {
                _mm_prefetch::<_MM_HINT_T0>(p.wrapping_add(off).cast());
                off += 16;
            }
            _mm_prefetch::<_MM_HINT_T0>(p.wrapping_add(nb - 1).cast());
        }
        // SAFETY (of the reads): pixel i's nb values lie inside `ys` (asserted), and qt8
        // has eight values per band.
        let yp = ys.as_ptr().add(i * nb);
        let mut acc = [_mm256_setzero_ps(); 4];
        // Zero signal: no bits but signs set in any band (eight bands at a time, the rest
        // one by one).
        let (mut bits, mut tail) = (_mm256_setzero_ps(), false);
        let mut b = 0;
        while b + 8 <= nb {
            bits = _mm256_or_ps(bits, _mm256_loadu_ps(yp.add(b)));
            for k in 0..8 {
                let row = _mm256_loadu_ps(q.add((b + k) * 8));
                acc[k % 4] = _mm256_fmadd_ps(row, _mm256_broadcast_ss(&*yp.add(b + k)), acc[k % 4]);
            }
            b += 8;
        }
        while b + 4 <= nb {
            for (k, acc) in acc.iter_mut().enumerate() {
                let row = _mm256_loadu_ps(q.add((b + k) * 8));
                *acc = _mm256_fmadd_ps(row, _mm256_broadcast_ss(&*yp.add(b + k)), *acc);
                tail |= *yp.add(b + k) != 0.0;
            }
            b += 4;
        }
        while b < nb {
            let row = _mm256_loadu_ps(q.add(b * 8));
            acc[0] = _mm256_fmadd_ps(row, _mm256_broadcast_ss(&*yp.add(b)), acc[0]);
            tail |= *yp.add(b) != 0.0;
            b += 1;
        }
        let bits = _mm256_castps_si256(bits);
        let all_zero = _mm256_testz_si256(bits, _mm256_castps_si256(magnitude)) == 1 && !tail;
        zero |= (all_zero as u32) << i;
        let sum = _mm256_add_ps(_mm256_add_ps(acc[0], acc[1]), _mm256_add_ps(acc[2], acc[3]));
        if D == 8 {
            _mm256_storeu_ps(zi.as_mut_ptr(), sum);
        } else {
            let mut out = [0.0f32; 8];
            _mm256_storeu_ps(out.as_mut_ptr(), sum);
            zi.copy_from_slice(&out[..D]);
        }
    }
    zero
}

#[inline(never)]
fn rss_plain<T: Real, const D: usize>(y: &[f32], a: &[T; D], chunks: &[T], ecol: &[T]) -> f64 {
    direct_rss::<T, D, false>(y, a, chunks, ecol)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma,popcnt")]
#[inline(never)]
unsafe fn rss_avx2<T: Real, const D: usize>(
    y: &[f32],
    a: &[T; D],
    chunks: &[T],
    ecol: &[T],
) -> f64 {
    if std::mem::size_of::<T>() == 4 {
        // SAFETY: T is f32 (Real has two types, and only f32 is 4 bytes); the caller has
        // AVX2 and FMA; `chunks` is the plan's, built for these bands and materials.
        let cast = |v: &[T]| std::slice::from_raw_parts(v.as_ptr().cast::<f32>(), v.len());
        let a = &*(a as *const [T; D]).cast::<[f32; D]>();
        direct_rss_f32(y, a, cast(chunks), cast(ecol))
    } else {
        direct_rss::<T, D, true>(y, a, chunks, ecol)
    }
}

#[inline(never)]
fn residual_plain<T: Real, const D: usize>(
    y: &[f32],
    a: &[T; D],
    ecol: &[T],
    scratch: &mut [T],
    res: Option<&mut [f32]>,
) -> f64 {
    residual::<T, D, false>(y, a, ecol, scratch, res)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma,popcnt")]
#[inline(never)]
unsafe fn residual_avx2<T: Real, const D: usize>(
    y: &[f32],
    a: &[T; D],
    ecol: &[T],
    scratch: &mut [T],
    res: Option<&mut [f32]>,
) -> f64 {
    residual::<T, D, true>(y, a, ecol, scratch, res)
}

/// Each pass as its own function, portable and AVX2 + FMA: kept apart, the compiler
/// vectorises each pass at full width (inlined into one large function it chose
/// two-lane vectors for the whitening and spilled its accumulators).
macro_rules! pass_variants {
    ($($body:ident => $plain:ident, $avx2:ident;)*) => {$(
        #[inline(never)]
        fn $plain<T: Real, const M: usize, const D: usize>(
            plan: &Plan<T>,
            blk: &mut Block<T, M, D>,
            slots: &mut Slots,
            counts: &mut Counts,
        ) {
            $body::<T, M, D, false>(plan, blk, slots, counts)
        }

        #[cfg(target_arch = "x86_64")]
        #[target_feature(enable = "avx2,fma,popcnt")]
        #[inline(never)]
        unsafe fn $avx2<T: Real, const M: usize, const D: usize>(
            plan: &Plan<T>,
            blk: &mut Block<T, M, D>,
            slots: &mut Slots,
            counts: &mut Counts,
        ) {
            $body::<T, M, D, true>(plan, blk, slots, counts)
        }
    )*};
}

pass_variants! {
    pass_start => start_plain, start_avx2;
    pass_pivot => pivot_plain, pivot_avx2;
}

#[inline(never)]
fn finish_plain<T: Real, const M: usize, const D: usize>(
    plan: &Plan<T>,
    blk: &mut Block<T, M, D>,
    slots: &mut Slots,
    counts: &mut Counts,
) {
    pass_finish::<T, M, D, false>(plan, blk, slots, counts)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma,popcnt")]
#[inline(never)]
unsafe fn finish_avx2<T: Real, const M: usize, const D: usize>(
    plan: &Plan<T>,
    blk: &mut Block<T, M, D>,
    slots: &mut Slots,
    counts: &mut Counts,
) {
    if std::mem::size_of::<T>() == 4 && D <= 8 && slots.residual.is_none() {
        // SAFETY: T is f32 (Real has two types, and only f32 is 4 bytes), so the plan and
        // the block have the same layout as their f32 instances; the caller has AVX2 + FMA.
        let plan = &*(plan as *const Plan<T>).cast::<Plan<f32>>();
        let blk = &mut *(blk as *mut Block<T, M, D>).cast::<Block<f32, M, D>>();
        finish_block_f32(plan, blk, slots, counts)
    } else {
        pass_finish::<T, M, D, true>(plan, blk, slots, counts)
    }
}

/// [`pass_finish`] for f32 and D ≤ 8 materials with AVX2 + FMA written out (the direct
/// path without `--residuals`): each pixel's residual eight bands per register, then one
/// register each for its abundance and standard-error rows (the compiler wrote those
/// element by element).
///
/// # Safety
/// AVX2 and FMA must be available.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma,popcnt")]
unsafe fn finish_block_f32<const M: usize, const D: usize>(
    plan: &Plan<f32>,
    blk: &mut Block<f32, M, D>,
    slots: &mut Slots,
    counts: &mut Counts,
) {
    use std::arch::x86_64::*;
    let nb = plan.bands;
    assert!(D <= 8 && M >= D);
    // Lane j < D of a register holds material j; the rest are masked off.
    let lanes = _mm256_cmpgt_epi32(
        _mm256_set1_epi32(D as i32),
        _mm256_setr_epi32(0, 1, 2, 3, 4, 5, 6, 7),
    );
    // The first D values at `p` (which holds at least M ≥ D; eight when M ≥ 8).
    let load = |p: *const f32| {
        if M >= 8 {
            _mm256_loadu_ps(p)
        } else {
            _mm256_maskload_ps(p, lanes)
        }
    };
    let mut rss = [0.0f64; BLOCK];
    let mut nonzero = [0u32; BLOCK];
    for (i, y) in blk.y.chunks_exact(nb).enumerate() {
        if blk.flips[i] == SKIP {
            continue;
        }
        let a = &blk.a[i];
        rss[i] = direct_rss_f32::<D>(
            y,
            a[..D].try_into().expect("D materials"),
            &plan.echunks,
            &plan.ecol,
        );
        nonzero[i] = positives::<f32, M, true>(a).count_ones();
    }
    // Noise levels and RMSEs of the whole block in one loop (it vectorises), as `fit_of`.
    let nbf = nb as f64;
    let mut rmse = [0.0f32; BLOCK];
    let mut sigma = [0.0f64; BLOCK];
    for i in 0..BLOCK {
        rmse[i] = ((rss[i] / nbf) as f32).sqrt();
        let dof = (nbf - nonzero[i] as f64 + plan.sum_to_one).max(1.0);
        sigma[i] = match plan.opts.noise {
            Some(n) => n,
            None => ((rss[i] / dof) as f32).sqrt() as f64,
        };
    }
    let (planes, n) = (plan.planes, blk.ok.len());
    let (ab, sc, ps) = (
        &mut slots.ab[blk.px0 * planes..(blk.px0 + n) * planes],
        &mut slots.sc[blk.px0..blk.px0 + n],
        &mut slots.ps[blk.px0..blk.px0 + n],
    );
    let (rm, ac, um) = (
        &mut slots.rm[blk.px0..blk.px0 + n],
        &mut slots.ac[blk.px0..blk.px0 + n],
        &mut slots.um[blk.px0..blk.px0 + n],
    );
    let (mut unmixed, mut dark) = (0, 0);
    for i in 0..n {
        if blk.flips[i] == SKIP {
            continue;
        }
        let a = &blk.a[i];
        let sum = tree_sum::<f32, D>(a[..D].try_into().expect("D materials"));
        if sum.is_nan() || (sum as f64) < DARK_LIMIT {
            dark += 1;
            ab[i * planes..(i + 1) * planes].fill(MaybeUninit::new(f32::NAN));
            sc[i].write(f32::NAN);
            ps[i] = 0;
            rm[i].write(f32::NAN);
            continue;
        }
        let inv = 1.0 / sum as f64;
        let row = &mut ab[i * planes..][..D];
        let ab_v = _mm256_mul_ps(load(a.as_ptr()), _mm256_set1_ps(inv as f32));
        // SAFETY: the row has D slots; eight-wide stores only when D = 8.
        if D == 8 {
            _mm256_storeu_ps(row.as_mut_ptr().cast(), ab_v);
        } else {
            _mm256_maskstore_ps(row.as_mut_ptr().cast(), lanes, ab_v);
        }
        if plan.opts.report_shade {
            let shade = if plan.model.shade {
                a[D] as f64
            } else {
                1.0 - sum as f64
            };
            ab[i * planes + D].write(shade as f32);
        }
        sc[i].write((sigma[i] * inv) as f32);
        ps[i] = blk.passive[i] as u16;
        rm[i].write(rmse[i]);
        ac[i] = nonzero[i] as u8;
        um[i] = true;
        unmixed += 1;
    }
    counts.unmixed += unmixed;
    counts.dark += dark;
}

/// A task's pixels on the direct path, a block of [`BLOCK`] pixels at a time in three
/// passes: (1) whiten and take the full-set step for the whole block; (2) pivot the pixels
/// that need it; (3) residuals and outputs. Separating the data-dependent pivoting from
/// the arithmetic lets the processor overlap the arithmetic of neighbouring pixels.
fn rows_direct<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    plan: &Plan<T>,
    y: &[f32],
    valid: &[bool],
    slots: &mut Slots,
    counts: &mut Counts,
) {
    let nb = plan.bands;
    let mut blk = Block {
        y: &[],
        next: &[],
        ok: &[],
        px0: 0,
        z: [[T::zero(); D]; BLOCK],
        a: [[T::zero(); M]; BLOCK],
        flips: [0; BLOCK],
        passive: [0; BLOCK],
        scratch: vec![T::zero(); nb],
    };
    for (k, (ys, ok)) in y.chunks(nb * BLOCK).zip(valid.chunks(BLOCK)).enumerate() {
        (blk.y, blk.ok, blk.px0) = (ys, ok, k * BLOCK);
        blk.next = y.get((k + 1) * nb * BLOCK..).unwrap_or(&[]);
        run_pass!(
            FUSED,
            start_plain,
            start_avx2,
            plan,
            &mut blk,
            slots,
            counts
        );
        run_pass!(
            FUSED,
            pivot_plain,
            pivot_avx2,
            plan,
            &mut blk,
            slots,
            counts
        );
        run_pass!(
            FUSED,
            finish_plain,
            finish_avx2,
            plan,
            &mut blk,
            slots,
            counts
        );
    }
}

/// Asks for the first `len` values of `y` to be brought into the cache (a hint; no effect
/// off x86-64).
#[inline(always)]
fn prefetch(y: &[f32], len: usize) {
    #[cfg(target_arch = "x86_64")]
    for line in y[..len.min(y.len())].chunks(16) {
        use std::arch::x86_64::{_mm_prefetch, _MM_HINT_T0};
        // SAFETY: SSE is part of the x86-64 baseline; a prefetch never faults.
        unsafe { _mm_prefetch::<_MM_HINT_T0>(line.as_ptr().cast()) };
    }
}

/// Subset mode (the slow path, in f64 whatever the run's precision): every allowed subset
/// is solved and scored by BIC; the estimate averages the subsets' solutions with weights
/// exp(−ΔBIC/2) (Bayesian model averaging), so members the bands cannot tell apart share
/// the abundance instead of one being picked by the noise. Subset RSS = (yᵀy − zᵀz) +
/// ‖z − R a‖² in f64.
#[inline(always)]
fn rows_subsets<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    plan: &Plan<T>,
    y: &[f32],
    valid: &[bool],
    slots: &mut Slots,
    counts: &mut Counts,
) {
    let model = plan.model;
    let nb = plan.bands;
    let n = nb as f64;
    let mut scores: Vec<f64> = Vec::new();
    let mut sols: Vec<[f64; M]> = Vec::new();
    let mut scratch = vec![T::zero(); nb];
    for (px, (y, &ok)) in y.chunks_exact(nb).zip(valid).enumerate() {
        if skipped(y, ok, slots, px, plan.planes, counts) {
            continue;
        }
        let z = whiten::<f64, D, FUSED>(y, &plan.qt);
        let yy: f64 = y.iter().map(|v| *v as f64 * *v as f64).sum();
        scores.clear();
        sols.clear();
        let mut best_score = f64::INFINITY;
        let mut best_out = (0u32, false, 0u16);
        for (s, &allowed) in model.subsets.iter().enumerate() {
            let mut a = [0.0f64; M];
            let o = pivot::<f64, M, D, FUSED>(&model.table64, &z, allowed, allowed, true, &mut a);
            let am: &[f64; D] = a[..D].try_into().expect("D materials");
            let rss = whitened_rss::<f64, D, FUSED>(&z, yy, am, &plan.rcol).max(1e-30);
            let k = a.iter().filter(|v| **v > 0.0).count() as f64;
            let score = n * (rss / n).ln() + k * n.ln();
            scores.push(score);
            sols.push(a);
            if score < best_score {
                best_score = score;
                best_out = (o.passive, o.enumerated, s as u16 + 1);
            }
        }
        let mut wsum = 0.0;
        let mut mean = [0.0f64; M];
        for (score, sol) in scores.iter().zip(&sols) {
            let w = (-(score - best_score) / 2.0).exp();
            wsum += w;
            for j in 0..M {
                mean[j] += w * sol[j];
            }
        }
        let a: [T; M] = std::array::from_fn(|j| T::from(mean[j] / wsum).unwrap_or(T::nan()));
        let (passive, enumerated, pick) = best_out;
        counts.enumerated += enumerated as usize;
        let am: &[T; D] = a[..D].try_into().expect("D materials");
        let rss = match slots.residual_of(px, nb) {
            None => whitened_rss::<T, D, FUSED>(&z, yy, am, &plan.rcol),
            res => residual::<T, D, FUSED>(y, am, &plan.ecol, &mut scratch, res),
        };
        let fit = fit_of(plan, rss, positives::<T, M, FUSED>(&a).count_ones());
        finish::<T, M, D>(plan, &a, fit, passive, slots, px, counts);
        if let Some(s) = slots.subset.as_deref_mut() {
            s[px] = if slots.um[px] { pick } else { 0 };
        }
    }
}

type RowsFn<T> = fn(&Plan<T>, &[f32], &[bool], &mut Slots, &mut Counts);

#[inline(always)]
fn rows_body<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    plan: &Plan<T>,
    y: &[f32],
    valid: &[bool],
    slots: &mut Slots,
    counts: &mut Counts,
) {
    if plan.model.subset_size.is_some() {
        rows_subsets::<T, M, D, FUSED>(plan, y, valid, slots, counts)
    } else {
        rows_direct::<T, M, D, FUSED>(plan, y, valid, slots, counts)
    }
}

fn rows_fixed<T: Real, const M: usize, const D: usize>(
    plan: &Plan<T>,
    y: &[f32],
    valid: &[bool],
    slots: &mut Slots,
    counts: &mut Counts,
) {
    rows_body::<T, M, D, false>(plan, y, valid, slots, counts)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma,popcnt")]
unsafe fn rows_fixed_avx2<T: Real, const M: usize, const D: usize>(
    plan: &Plan<T>,
    y: &[f32],
    valid: &[bool],
    slots: &mut Slots,
    counts: &mut Counts,
) {
    rows_body::<T, M, D, true>(plan, y, valid, slots, counts)
}

#[cfg(target_arch = "x86_64")]
fn rows_fixed_x86<T: Real, const M: usize, const D: usize>(
    plan: &Plan<T>,
    y: &[f32],
    valid: &[bool],
    slots: &mut Slots,
    counts: &mut Counts,
) {
    // SAFETY: chosen by `rows_kernel` only after run-time detection of AVX2 and FMA.
    unsafe { rows_fixed_avx2::<T, M, D>(plan, y, valid, slots, counts) }
}

/// The kernel for M columns and D whitened dimensions (every model has M ≤ 12 and D = M
/// or M − 1: the shade column adds no dimension), with AVX2 + FMA when `vector`.
fn rows_kernel<T: Real>(m: usize, d: usize, vector: bool) -> RowsFn<T> {
    macro_rules! pick {
        ($(($m:literal, $d:literal))*) => {
            match (m, d, vector) {
                $(
                    #[cfg(target_arch = "x86_64")]
                    ($m, $d, true) => rows_fixed_x86::<T, $m, $d>,
                    ($m, $d, _) => rows_fixed::<T, $m, $d>,
                )*
                (m, d, _) => unreachable!("models have M ≤ 12 and D = M or M − 1, not {m}, {d}"),
            }
        };
    }
    model_sizes!(pick)
}

/// A vector of `n` values that the parallel pass fills completely.
fn uninit(n: usize) -> Vec<f32> {
    let mut v = Vec::with_capacity(n);
    advise_huge_pages(v.spare_capacity_mut());
    v
}

/// Asks Linux to back a large fresh buffer with transparent huge pages (as numpy does for
/// its large arrays): its first writes then fault in 2 MiB at a time instead of 4 KiB,
/// which was a tenth of the unmixing time on a 512 × 512 cube. Advisory only; a no-op
/// elsewhere and for buffers under 4 MiB.
fn advise_huge_pages<T>(buf: &mut [MaybeUninit<T>]) {
    #[cfg(target_os = "linux")]
    {
        const HUGE: usize = 2 << 20;
        let bytes = std::mem::size_of_val(buf);
        if bytes < 2 * HUGE {
            return;
        }
        let start = buf.as_mut_ptr() as usize;
        let first = start.next_multiple_of(HUGE);
        let end = (start + bytes) / HUGE * HUGE;
        if end > first {
            // SAFETY: the range lies inside memory this buffer owns; MADV_HUGEPAGE changes
            // only how the kernel backs it, never its contents or validity.
            unsafe {
                libc::madvise(first as *mut libc::c_void, end - first, libc::MADV_HUGEPAGE);
            }
        }
    }
    #[cfg(not(target_os = "linux"))]
    let _ = buf;
}

/// Unmixes every pixel: `data` holds the spectra (row, column, band), `valid` says which
/// pixels hold data. `progress` is called with the number of rows finished.
pub fn unmix<T: Real>(
    data: ArrayView3<f32>,
    valid: ArrayView2<bool>,
    model: &Model,
    opts: &RunOptions,
    progress: &(dyn Fn(usize) + Sync),
) -> UnmixOutput {
    unmix_with::<T>(data, valid, model, opts, progress, avx2_available())
}

/// [`unmix`] with the kernel chosen by the caller: the AVX2 + FMA instances when `vector`
/// (callers must have checked [`avx2_available`]; it is checked again here), the portable
/// ones otherwise. Tests hold the two to each other.
pub fn unmix_with<T: Real>(
    data: ArrayView3<f32>,
    valid: ArrayView2<bool>,
    model: &Model,
    opts: &RunOptions,
    progress: &(dyn Fn(usize) + Sync),
    vector: bool,
) -> UnmixOutput {
    let (rows, cols, nb) = data.dim();
    assert_eq!(valid.dim(), (rows, cols), "one validity flag per pixel");
    let plan = Plan::<T>::new(model, opts);
    let planes = plan.planes;
    let mut ids: Vec<String> = model.ids[..plan.mat].to_vec();
    if opts.report_shade {
        ids.push("shade".into());
    }
    let npx = rows * cols;
    let (mut ab, mut sc, mut rm) = (uninit(npx * planes), uninit(npx), uninit(npx));
    let mut passive = Array2::<u16>::zeros((rows, cols));
    let mut active = Array2::<u8>::zeros((rows, cols));
    let mut unmixed = Array2::<bool>::from_elem((rows, cols), false);
    let mut subset = model
        .subset_size
        .map(|_| Array2::<u16>::zeros((rows, cols)));
    let mut residual = opts
        .residuals
        .then(|| Array3::<f32>::from_elem((rows, cols, nb), f32::NAN));
    let y = data.as_slice().expect("spectra are in standard layout");
    let valid = valid.as_slice().expect("standard layout");
    let kernel = rows_kernel::<T>(model.columns(), model.q.ncols(), vector && avx2_available());
    let done = AtomicUsize::new(0);

    let task = ROWS_PER_TASK * cols;
    let chunks = |n: usize| n.max(1) * task;
    let mut tasks: Vec<Slots> = ab.spare_capacity_mut()[..npx * planes]
        .chunks_mut(chunks(planes))
        .zip(sc.spare_capacity_mut()[..npx].chunks_mut(task))
        .zip(passive.as_slice_mut().expect("standard").chunks_mut(task))
        .zip(rm.spare_capacity_mut()[..npx].chunks_mut(task))
        .zip(active.as_slice_mut().expect("standard").chunks_mut(task))
        .zip(unmixed.as_slice_mut().expect("standard").chunks_mut(task))
        .map(|(((((ab, sc), ps), rm), ac), um)| Slots {
            ab,
            sc,
            ps,
            rm,
            ac,
            um,
            subset: None,
            residual: None,
        })
        .collect();
    if let Some(s) = subset.as_mut() {
        let s = s.as_slice_mut().expect("standard");
        for (t, chunk) in tasks.iter_mut().zip(s.chunks_mut(task)) {
            t.subset = Some(chunk);
        }
    }
    if let Some(r) = residual.as_mut() {
        let r = r.as_slice_mut().expect("standard");
        for (t, chunk) in tasks.iter_mut().zip(r.chunks_mut(task * nb)) {
            t.residual = Some(chunk);
        }
    }
    let counts = tasks
        .into_par_iter()
        .enumerate()
        .map(|(k, mut slots)| {
            let mut counts = Counts::default();
            let px0 = k * task;
            let n = slots.rm.len();
            let (y, valid) = (&y[px0 * nb..(px0 + n) * nb], &valid[px0..px0 + n]);
            kernel(&plan, y, valid, &mut slots, &mut counts);
            let task_rows = n / cols.max(1);
            progress(done.fetch_add(task_rows, Ordering::Relaxed) + task_rows);
            counts
        })
        .reduce(Counts::default, |t, c| Counts {
            unmixed: t.unmixed + c.unmixed,
            nodata: t.nodata + c.nodata,
            zero_signal: t.zero_signal + c.zero_signal,
            dark: t.dark + c.dark,
            enumerated: t.enumerated + c.enumerated,
            steps: t.steps + c.steps,
        });
    // SAFETY: the tasks cover every pixel exactly once, and every pixel writes all its
    // slots (`finish` or `blank`), so the first `len` values are initialised.
    unsafe {
        ab.set_len(npx * planes);
        sc.set_len(npx);
        rm.set_len(npx);
    }
    let shape3 = (rows, cols, planes);
    UnmixOutput {
        ids,
        abundance: Array3::from_shape_vec(shape3, ab).expect("sized above"),
        errors: StdErrors {
            scale: Array2::from_shape_vec((rows, cols), sc).expect("sized above"),
            passive,
            factors: (0..1u32 << plan.table.columns)
                .flat_map(|set| match plan.table.entry(set) {
                    Some(e) => e.sd.iter().map(|v| v.widen() as f32).collect(),
                    None => vec![f32::NAN; plan.table.columns],
                })
                .collect(),
            columns: plan.table.columns,
            materials: plan.mat,
            shade_column: model.shade,
        },
        rmse: Array2::from_shape_vec((rows, cols), rm).expect("sized above"),
        active,
        subset,
        residual,
        unmixed,
        counts,
    }
}
