//! The parallel driver: unmixes the pixels task of rows by task of rows, so no per-band
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
//! signal in every band, and pixels whose material sum is below [`super::DARK_LIMIT`] (almost all
//! shade: night side, deep shadow), whose composition is undefined.
//!
//! Results do not depend on the thread count or on neighbouring pixels: every pixel's
//! pivoting starts from the full set.

use std::mem::MaybeUninit;
use std::sync::atomic::{AtomicUsize, Ordering};

use ndarray::{Array2, Array3, ArrayView2, ArrayView3};
use rayon::prelude::*;

use super::errors::boundary;
use super::misfit::{self, Misfit};
use super::model::Model;
use super::output::{Counts, RunOptions, StdErrors, UnmixOutput};
use super::passes::{rows_direct, variants};
use super::plan::{Plan, Slots};
pub use super::solve::Real;
use super::solve::{avx2_available, model_sizes};
use super::subsets::rows_subsets;

/// Rows per parallel task.
const ROWS_PER_TASK: usize = 8;

/// A task's kernel: its spectra and validity in, its slots and counts out.
type RowsFn<T> = fn(&Plan<T>, &[f32], &[bool], &mut Slots, &mut Counts);

/// The direct path, or subset mode when the model has subsets.
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

variants! {
    /// A task's rows with the kernel for M columns and D dimensions.
    rows_fixed, rows_fixed_avx2 [T: Real, const M: usize, const D: usize] (
        plan: &Plan<T>, y: &[f32], valid: &[bool], slots: &mut Slots, counts: &mut Counts
    ) = rows_body::<T, M, D>;
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
    let tri = planes * (planes + 1) / 2;
    let mut mixture = model
        .subset_size
        .map(|_| Array3::<f32>::from_elem((rows, cols, tri), f32::NAN));
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
            mixture: None,
        })
        .collect();
    if let Some(m) = mixture.as_mut() {
        let m = m.as_slice_mut().expect("standard");
        for (t, chunk) in tasks.iter_mut().zip(m.chunks_mut(task * tri)) {
            t.mixture = Some(chunk);
        }
    }
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
    let scale = Array2::from_shape_vec((rows, cols), sc).expect("sized above");
    let full = model.full_mask();
    let boundary_columns = match &subset {
        None => boundary(
            data,
            model,
            &plan.qt,
            passive.view(),
            scale.view(),
            &|_, _| full,
        ),
        Some(pick) => boundary(
            data,
            model,
            &plan.qt,
            passive.view(),
            scale.view(),
            &|r, c| match pick[(r, c)] {
                0 => 0,
                s => model.subsets[s as usize - 1],
            },
        ),
    };
    let mut out = UnmixOutput {
        ids,
        abundance: Array3::from_shape_vec(shape3, ab).expect("sized above"),
        errors: StdErrors {
            scale,
            passive,
            spreads: model.spreads.clone(),
            shade_column: model.shade,
            mixture,
            overrides: Default::default(),
        },
        rmse: Array2::from_shape_vec((rows, cols), rm).expect("sized above"),
        active,
        subset,
        residual,
        unmixed,
        boundary: boundary_columns.mapv(|m| m != 0),
        boundary_columns,
        misfit: Misfit::default(),
        counts,
    };
    out.misfit = misfit::test(
        &out,
        data,
        model.solver.sum_to_one(),
        opts.noise,
        opts.false_alarm,
    );
    out
}
