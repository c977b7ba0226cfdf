//! The direct path: a task's pixels a block of [`BLOCK`] at a time in three passes —
//! (1) skip tests, whitening and the full-set step; (2) pivoting for the pixels whose full
//! set is not optimal; (3) residuals and outputs — each pass compiled twice, portable and
//! with AVX2 + FMA, by [`variants`].

#[cfg(target_arch = "x86_64")]
use super::avx2::{direct_rss_f32, finish_block_f32, full_steps_f32, whiten_block_f32};
use super::output::Counts;
use super::pixel::{
    direct_rss, finish, fit_of, prefetch, residual, skipped, skipped_as, whiten, Fit,
};
use super::plan::{PixelBlock, Plan, Slots, BLOCK, SKIP};
use super::solve::{full_step, pivot, positives, Real};

/// Defines each kernel twice over one shared body: `$plain`, portable, and `$avx2`, the
/// same body compiled with AVX2 + FMA (`FUSED` = true: fused multiply-adds). Kept apart as
/// functions of their own, the compiler vectorises each at full width (inlined into one
/// large function it chose two-lane vectors for the whitening and spilled its
/// accumulators). An optional `avx2 { … }` block runs first in the AVX2 variant: where it
/// returns, a kernel written out with intrinsics replaced the shared body.
macro_rules! variants {
    ($(
        $(#[$doc:meta])*
        $plain:ident, $avx2:ident [$($gen:tt)*] ($($arg:ident: $ty:ty),*) $(-> $ret:ty)?
            = $body:ident::<$($g:tt),*> $({ $($special:tt)* })?;
    )*) => {$(
        $(#[$doc])*
        #[inline(never)]
        pub(super) fn $plain<$($gen)*>($($arg: $ty),*) $(-> $ret)? {
            $body::<$($g),*, false>($($arg),*)
        }

        $(#[$doc])*
        ///
        /// # Safety
        /// AVX2 and FMA must be available.
        #[cfg(target_arch = "x86_64")]
        #[target_feature(enable = "avx2,fma,popcnt")]
        #[inline(never)]
        pub(super) unsafe fn $avx2<$($gen)*>($($arg: $ty),*) $(-> $ret)? {
            $($($special)*)?
            $body::<$($g),*, true>($($arg),*)
        }
    )*};
}
pub(super) use variants;

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
pub(super) fn pass_start<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    plan: &Plan<T>,
    blk: &mut PixelBlock<T, M, D>,
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
            let blk = &mut *(blk as *mut PixelBlock<T, M, D>).cast::<PixelBlock<f32, M, D>>();
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

/// Pass 2: pivoting, for the pixels whose full set is not optimal.
#[inline(always)]
pub(super) fn pass_pivot<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    plan: &Plan<T>,
    blk: &mut PixelBlock<T, M, D>,
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
pub(super) fn pass_finish<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    plan: &Plan<T>,
    blk: &mut PixelBlock<T, M, D>,
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
pub(super) fn whiten_block<T: Real, const D: usize, const FUSED: bool>(
    plan: &Plan<T>,
    ys: &[f32],
    next: &[f32],
    flips: &[u32; BLOCK],
    z: &mut [[T; D]; BLOCK],
) {
    let nb = plan.bands;
    for (i, ((y, f), z)) in ys.chunks_exact(nb).zip(flips).zip(z.iter_mut()).enumerate() {
        prefetch(next.get(i * nb..).unwrap_or(&[]), nb);
        if *f != SKIP {
            *z = whiten::<T, D, FUSED>(y, &plan.qt_t);
        }
    }
}

variants! {
    /// A block's whitening.
    whiten_plain, whiten_avx2 [T: Real, const D: usize] (
        plan: &Plan<T>, ys: &[f32], next: &[f32], flips: &[u32; BLOCK], z: &mut [[T; D]; BLOCK]
    ) = whiten_block::<T, D>;

    /// A pixel's residual sum of squares from the residual itself.
    rss_plain, rss_avx2 [T: Real, const D: usize] (
        y: &[f32], a: &[T; D], chunks: &[T], ecol: &[T]
    ) -> f64 = direct_rss::<T, D> {
        if std::mem::size_of::<T>() == 4 {
            // SAFETY: T is f32 (Real has two types, and only f32 is 4 bytes); the caller
            // has AVX2 and FMA; `chunks` is the plan's, built for these bands and materials.
            let cast = |v: &[T]| std::slice::from_raw_parts(v.as_ptr().cast::<f32>(), v.len());
            let a = &*(a as *const [T; D]).cast::<[f32; D]>();
            return direct_rss_f32(y, a, cast(chunks), cast(ecol));
        }
    };

    /// A pixel's residual, kept (`--residuals`), and its sum of squares.
    residual_plain, residual_avx2 [T: Real, const D: usize] (
        y: &[f32], a: &[T; D], ecol: &[T], scratch: &mut [T], res: Option<&mut [f32]>
    ) -> f64 = residual::<T, D>;

    /// Pass 1 of a block.
    start_plain, start_avx2 [T: Real, const M: usize, const D: usize] (
        plan: &Plan<T>, blk: &mut PixelBlock<T, M, D>, slots: &mut Slots, counts: &mut Counts
    ) = pass_start::<T, M, D>;

    /// Pass 2 of a block.
    pivot_plain, pivot_avx2 [T: Real, const M: usize, const D: usize] (
        plan: &Plan<T>, blk: &mut PixelBlock<T, M, D>, slots: &mut Slots, counts: &mut Counts
    ) = pass_pivot::<T, M, D>;

    /// Pass 3 of a block.
    finish_plain, finish_avx2 [T: Real, const M: usize, const D: usize] (
        plan: &Plan<T>, blk: &mut PixelBlock<T, M, D>, slots: &mut Slots, counts: &mut Counts
    ) = pass_finish::<T, M, D> {
        if std::mem::size_of::<T>() == 4 && D <= 8 && slots.residual.is_none() {
            // SAFETY: T is f32 (Real has two types, and only f32 is 4 bytes), so the plan
            // and the block have the same layout as their f32 instances; the caller has
            // AVX2 + FMA.
            let plan = &*(plan as *const Plan<T>).cast::<Plan<f32>>();
            let blk = &mut *(blk as *mut PixelBlock<T, M, D>).cast::<PixelBlock<f32, M, D>>();
            return finish_block_f32(plan, blk, slots, counts);
        }
    };
}

/// A task's pixels on the direct path, a block of [`BLOCK`] pixels at a time in three
/// passes: (1) whiten and take the full-set step for the whole block; (2) pivot the pixels
/// that need it; (3) residuals and outputs. Separating the data-dependent pivoting from
/// the arithmetic lets the processor overlap the arithmetic of neighbouring pixels.
pub(super) fn rows_direct<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    plan: &Plan<T>,
    y: &[f32],
    valid: &[bool],
    slots: &mut Slots,
    counts: &mut Counts,
) {
    let nb = plan.bands;
    let mut blk = PixelBlock {
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
