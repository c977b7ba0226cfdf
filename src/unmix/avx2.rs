//! The AVX2 + FMA kernels written out with intrinsics, for f32 and up to eight materials
//! (every shipped library and band set): a block's whitening, its full-set steps, and its
//! finishing pass, plus the eight-band residual sum of squares. The portable kernels in
//! [`super::passes`] and [`super::pixel`] compute the same values; the tests hold the two
//! to each other. Every function here is `unsafe`: callable only after run-time detection
//! of AVX2 and FMA.
#![cfg(target_arch = "x86_64")]

use std::mem::MaybeUninit;

use super::output::{Counts, DARK_LIMIT};
use super::plan::{PixelBlock, Plan, Slots, BLOCK, SKIP};
use super::solve::{positives, tree_sum};

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
pub(super) unsafe fn direct_rss_f32<const D: usize>(
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

/// [`full_step`] for a block in f32 with D ≤ 8, AVX2 + FMA written out: x = W z + off in
/// one register (two for more than eight columns), the same even/odd chains as the
/// portable evaluation, the tolerance from |z| summed in `tree_sum`'s order, and the
/// violators from one sign mask.
///
/// # Safety
/// AVX2 and FMA must be available.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma,popcnt")]
pub(super) unsafe fn full_steps_f32<const M: usize, const D: usize>(
    plan: &Plan<f32>,
    blk: &mut PixelBlock<f32, M, D>,
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
pub(super) unsafe fn whiten_block_f32<const D: usize>(
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

/// [`pass_finish`] for f32 and D ≤ 8 materials with AVX2 + FMA written out (the direct
/// path without `--residuals`): each pixel's residual eight bands per register, then one
/// register each for its abundance and standard-error rows (the compiler wrote those
/// element by element).
///
/// # Safety
/// AVX2 and FMA must be available.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma,popcnt")]
pub(super) unsafe fn finish_block_f32<const M: usize, const D: usize>(
    plan: &Plan<f32>,
    blk: &mut PixelBlock<f32, M, D>,
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
