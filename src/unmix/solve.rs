//! The per-pixel active-set solver on precomputed passive-set maps, generic over f32 (the
//! fast path) and f64 (the reference path).
//!
//! Method: block principal pivoting (Júdice & Pires 1994; Portugal, Júdice & Vicente
//! 1994) applied to the KKT conditions of NNLS (Lawson & Hanson 1974) and FCLS (Heinz &
//! Chang 2001) in the Gram form of Bro & De Jong (1997), with the pixel whitened (z = Qᵀy,
//! see [`super::model`]). Start from the given passive set; each step maps z to [a; μ] with
//! one matrix–vector product and tests signs: a_i ≥ 0 on the passive set and μ_j ≥ 0 on the
//! rest is the optimality certificate itself. Otherwise every violator switches sides at
//! once; when that stops reducing the number of violators for three steps, only the
//! violator of largest index switches (Murty's rule, finite). A pixel that still fails, or
//! lands on a singular passive set, is solved by enumerating every passive set (exact,
//! rare).
//!
//! There is one pivoting implementation, `pivot`. [`solve_pixel`] runs it for any size;
//! the driver inlines it into kernels whose sizes are compile-time constants, so the small
//! vectors stay in registers.

use num_traits::Float;

use super::model::{Model, Table, MAX_COLUMNS};

/// The two precisions the solver runs in.
pub trait Real: Float + Send + Sync + std::fmt::Debug + 'static {
    fn from_f32(v: f32) -> Self;
    /// 1 when the sign bit is set (negative values and −0), else 0: a branch-free test
    /// that vectorises.
    fn sign_bit(self) -> u32;
    fn widen(self) -> f64;
    /// The model's table in this precision.
    fn table(model: &Model) -> &Table<Self>;
}

impl Real for f32 {
    #[inline(always)]
    fn from_f32(v: f32) -> f32 {
        v
    }
    #[inline(always)]
    fn sign_bit(self) -> u32 {
        self.to_bits() >> 31
    }
    #[inline(always)]
    fn widen(self) -> f64 {
        self as f64
    }
    fn table(model: &Model) -> &Table<f32> {
        &model.table32
    }
}

impl Real for f64 {
    #[inline(always)]
    fn from_f32(v: f32) -> f64 {
        v as f64
    }
    #[inline(always)]
    fn sign_bit(self) -> u32 {
        (self.to_bits() >> 63) as u32
    }
    #[inline(always)]
    fn widen(self) -> f64 {
        self
    }
    fn table(model: &Model) -> &Table<f64> {
        &model.table64
    }
}

/// c + a·b: fused where the caller runs with FMA enabled (`FUSED`), plain otherwise (a
/// fused multiply-add without hardware support is a slow library call).
#[inline(always)]
pub fn madd<T: Float, const FUSED: bool>(a: T, b: T, c: T) -> T {
    if FUSED {
        a.mul_add(b, c)
    } else {
        a * b + c
    }
}

/// Sign tolerance, relative to the data's scale: a value above −tol counts as ≥ 0.
#[inline(always)]
fn tolerance<T: Float>(scale: T) -> T {
    T::epsilon() * T::from(16.0).expect("small constant") * (T::one() + scale)
}

/// The result of one pixel.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Outcome {
    /// The final passive set.
    pub passive: u32,
    /// Active-set steps taken (0 when the first set was optimal).
    pub steps: u32,
    /// Whether the enumeration fallback was needed.
    pub enumerated: bool,
}

/// Rows `rows` of entry `mask` evaluated at z: out = W[rows]·z + off[rows] (any size; for
/// the exhaustive fallback).
fn evaluate<T: Float>(
    table: &Table<T>,
    mask: u32,
    z: &[T],
    rows: std::ops::Range<usize>,
    out: &mut [T],
) {
    let m2 = 2 * table.columns;
    let (map, rest) = table.raw(mask).split_at(m2 * z.len());
    let out = &mut out[..rows.len()];
    out.copy_from_slice(&rest[rows.clone()]);
    for (col, &zk) in map.chunks_exact(m2).zip(z) {
        for (o, c) in out.iter_mut().zip(&col[rows.clone()]) {
            *o = *o + *c * zk;
        }
    }
}

/// M rows of an entry from row `row0` (0: abundances, M: multipliers), evaluated at z with
/// sizes fixed at compile time; two accumulators (even and odd columns) halve the
/// multiply-add dependency chain.
#[inline(always)]
fn evaluate_fixed<T: Float, const M: usize, const D: usize, const FUSED: bool>(
    raw: &[T],
    z: &[T; D],
    row0: usize,
) -> [T; M] {
    let m2 = 2 * M;
    let off: &[T; M] = raw[m2 * D + row0..][..M].try_into().expect("M offsets");
    let mut even = *off;
    let mut odd = [T::zero(); M];
    for k in 0..D {
        let col: &[T; M] = raw[k * m2 + row0..][..M].try_into().expect("M rows");
        let acc = if k % 2 == 0 { &mut even } else { &mut odd };
        for i in 0..M {
            acc[i] = madd::<T, FUSED>(col[i], z[k], acc[i]);
        }
    }
    for i in 0..M {
        even[i] = even[i] + odd[i];
    }
    even
}

/// The sign bits of `v` as a mask (bit i for v[i]; negative values and −0 set theirs). On
/// the AVX2 path (`FUSED`, which within the crate is only instantiated behind run-time
/// detection) an f32 array's bits come eight at a time from one `vmovmskps`:
/// LLVM does not find that instruction by itself and spent tens of instructions on each
/// mask. Elsewhere, and for the values past the last whole eight, bit by bit.
#[inline(always)]
pub(crate) fn sign_mask<T: Real, const M: usize, const FUSED: bool>(v: &[T; M]) -> u32 {
    let mut mask = 0;
    #[allow(unused_mut)]
    let mut from = 0;
    #[cfg(target_arch = "x86_64")]
    if FUSED && std::mem::size_of::<T>() == 4 {
        use std::arch::x86_64::{_mm256_loadu_ps, _mm256_movemask_ps};
        let p = v.as_ptr().cast::<f32>();
        while from + 8 <= M {
            // SAFETY: FUSED code runs only after AVX2 was detected (`avx2_available`); T
            // is f32 (Real has two types, and only f32 is 4 bytes); the eight values from
            // `from` lie inside `v`.
            let bits = unsafe { _mm256_movemask_ps(_mm256_loadu_ps(p.add(from))) };
            mask |= (bits as u32) << from;
            from += 8;
        }
    }
    for (i, x) in v.iter().enumerate().skip(from) {
        mask |= x.sign_bit() << i;
    }
    mask
}

/// The mask of values below −tol, from the sign bits of v + tol (branch-free).
#[inline(always)]
fn negatives<T: Real, const M: usize, const FUSED: bool>(v: &[T; M], tol: T) -> u32 {
    sign_mask::<T, M, FUSED>(&v.map(|x| x + tol))
}

/// The mask of values above zero (the sign bits of 0 − v; 0 − (+0) is +0).
#[inline(always)]
pub(crate) fn positives<T: Real, const M: usize, const FUSED: bool>(v: &[T; M]) -> u32 {
    sign_mask::<T, M, FUSED>(&v.map(|x| T::zero() - x))
}

/// Σ v as a pairwise tree (the additions of one level are independent, so they
/// vectorise and the dependency chain is log₂ N long).
#[inline(always)]
pub fn tree_sum<T: Float, const N: usize>(mut v: [T; N]) -> T {
    let mut width = N;
    while width > 1 {
        let half = width.div_ceil(2);
        for i in 0..width / 2 {
            v[i] = v[i] + v[i + half];
        }
        width = half;
    }
    if N == 0 {
        T::zero()
    } else {
        v[0]
    }
}

/// The sign tolerance for a pixel with whitened values `z` (scaled by Σ|z_k|).
#[inline(always)]
fn pixel_tolerance<T: Float, const D: usize>(z: &[T; D]) -> T {
    tolerance(tree_sum(z.map(|v| v.abs())))
}

/// The first step of [`pivot`] from the full set `full`, split out so that the driver can
/// run it for a block of pixels, branch-free, before the data-dependent rest: returns the
/// abundances at the full set and its violators (0 when they are optimal; always 0 without
/// `non_negative`). Continue with `pivot(…, start = full ^ violators, …)`, one step on.
#[inline(always)]
pub(crate) fn full_step<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    table: &Table<T>,
    z: &[T; D],
    full: u32,
    non_negative: bool,
) -> ([T; M], u32) {
    if !table.has(full) {
        // A singular full set (collinear members unmixed with --force): pivoting starts
        // from the empty set and falls back to enumeration; without the sign constraints
        // there is no solution.
        return if non_negative {
            ([T::zero(); M], full)
        } else {
            ([T::nan(); M], 0)
        };
    }
    let x = evaluate_fixed::<T, M, D, FUSED>(table.raw(full), z, 0);
    if !non_negative {
        return (x, 0);
    }
    (x, negatives::<T, M, FUSED>(&x, pixel_tolerance(z)) & full)
}

/// Block principal pivoting over passive sets within `allowed`, from `start`, with the
/// column count M and the whitened dimensions D fixed at compile time. `a` receives the
/// abundances (0 outside the passive set). Without `non_negative` (unconstrained and
/// sum-to-one solvers) `allowed` is solved once, signs unrestricted.
#[inline(always)]
pub(crate) fn pivot<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    table: &Table<T>,
    z: &[T; D],
    allowed: u32,
    start: u32,
    non_negative: bool,
    a: &mut [T; M],
) -> Outcome {
    if !non_negative {
        if table.has(allowed) {
            let x = evaluate_fixed::<T, M, D, FUSED>(table.raw(allowed), z, 0);
            for i in 0..M {
                a[i] = if allowed & (1 << i) != 0 {
                    x[i]
                } else {
                    T::zero()
                };
            }
        } else {
            *a = [T::nan(); M];
        }
        return Outcome {
            passive: allowed,
            steps: 0,
            enumerated: false,
        };
    }
    let tol = pixel_tolerance(z);
    let mut p = start & allowed;
    let mut best = u32::MAX;
    let mut stalled = 0;
    for step in 0..(4 * M as u32 + 8) {
        if !table.has(p) {
            break;
        }
        let raw = table.raw(p);
        let x = evaluate_fixed::<T, M, D, FUSED>(raw, z, 0);
        let mut flip = negatives::<T, M, FUSED>(&x, tol) & p;
        if p != allowed {
            let mu = evaluate_fixed::<T, M, D, FUSED>(raw, z, M);
            flip |= negatives::<T, M, FUSED>(&mu, tol) & allowed & !p;
        }
        let count = flip.count_ones();
        if count == 0 {
            for i in 0..M {
                a[i] = if p & (1 << i) != 0 {
                    x[i].max(T::zero())
                } else {
                    T::zero()
                };
            }
            return Outcome {
                passive: p,
                steps: step,
                enumerated: false,
            };
        }
        if count < best {
            best = count;
            stalled = 0;
            p ^= flip;
        } else {
            stalled += 1;
            if stalled >= 3 {
                p ^= 1u32 << (31 - flip.leading_zeros());
            } else {
                p ^= flip;
            }
        }
    }
    enumerate(table, z, allowed, a)
}

/// Calls `$pick!` with every (M, D) a model can have — M ≤ 12 columns, D = M or M − 1
/// whitened dimensions (the shade column adds none) — so that each dispatch table over the
/// specialised instances lists the same sizes.
macro_rules! model_sizes {
    ($pick:ident) => {
        $pick!(
            (1, 1)(2, 1)(2, 2)(3, 2)(3, 3)(4, 3)(4, 4)(5, 4)(5, 5)(6, 5)(6, 6)(7, 6)(7, 7)(8, 7)(
                8, 8
            )(9, 8)(9, 9)(10, 9)(10, 10)(11, 10)(11, 11)(12, 11)(12, 12)
        )
    };
}
pub(crate) use model_sizes;

/// The signature of `pivot`'s instances behind [`solver`].
pub type SolveFn<T> = fn(&Table<T>, &[T], u32, u32, bool, &mut [T]) -> Outcome;

fn solve_fixed<T: Real, const M: usize, const D: usize>(
    table: &Table<T>,
    z: &[T],
    allowed: u32,
    start: u32,
    non_negative: bool,
    a: &mut [T],
) -> Outcome {
    let z: &[T; D] = z[..D].try_into().expect("D values");
    let a: &mut [T; M] = (&mut a[..M]).try_into().expect("M values");
    pivot::<T, M, D, false>(table, z, allowed, start, non_negative, a)
}

/// The portable instance of `pivot` for a table's sizes (every table has M ≤ 12 and
/// D = M or M − 1).
pub fn solver<T: Real>(table: &Table<T>) -> SolveFn<T> {
    macro_rules! pick {
        ($(($m:literal, $d:literal))*) => {
            match (table.columns, table.dims) {
                $(($m, $d) => solve_fixed::<T, $m, $d>,)*
                (m, d) => unreachable!("tables have M ≤ 12 and D = M or M − 1, not {m}, {d}"),
            }
        };
    }
    model_sizes!(pick)
}

/// Solves one pixel from its whitened values `z` (D values) into `a` (M values) with the
/// portable instance of `pivot`.
pub fn solve_pixel<T: Real>(
    table: &Table<T>,
    z: &[T],
    allowed: u32,
    start: u32,
    non_negative: bool,
    a: &mut [T],
) -> Outcome {
    solver(table)(table, z, allowed, start, non_negative, a)
}

/// Exact fallback: the passive set within `allowed` whose solution satisfies the KKT
/// signs (the optimum of a strictly convex problem is the unique such point); when
/// rounding leaves none exact, the one with the fewest violations.
#[cold]
fn enumerate<T: Float>(table: &Table<T>, z: &[T], allowed: u32, a: &mut [T]) -> Outcome {
    let m = a.len();
    let mut v = [T::zero(); 2 * MAX_COLUMNS];
    let v = &mut v[..2 * m];
    let scale = z.iter().fold(T::zero(), |s, v| s.max(v.abs()));
    let tol = tolerance(scale) * T::from(16.0).expect("small constant");
    let mut best: Option<(u32, u32)> = None; // (mask, violations)
    for mask in 1..=allowed {
        if mask & !allowed != 0 || !table.has(mask) {
            continue;
        }
        evaluate(table, mask, z, 0..2 * m, v);
        let count = (0..m)
            .filter(|&i| {
                let bit = 1u32 << i;
                allowed & bit != 0
                    && if mask & bit != 0 {
                        v[i] < -tol
                    } else {
                        v[m + i] < -tol
                    }
            })
            .count() as u32;
        if best.is_none_or(|(_, c)| count < c) {
            best = Some((mask, count));
            if count == 0 {
                break;
            }
        }
    }
    let (mask, _) = best.unwrap_or((0, 0));
    if table.has(mask) {
        evaluate(table, mask, z, 0..m, &mut v[..m]);
        for (i, ai) in a.iter_mut().enumerate() {
            *ai = if mask & (1 << i) != 0 {
                v[i].max(T::zero())
            } else {
                T::zero()
            };
        }
    } else {
        a.iter_mut().for_each(|v| *v = T::nan());
    }
    Outcome {
        passive: mask,
        steps: 0,
        enumerated: true,
    }
}

/// Whether the AVX2 + FMA kernels may be used on this processor (run-time detection).
pub fn avx2_available() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::is_x86_feature_detected!("avx2")
            && std::is_x86_feature_detected!("fma")
            && std::is_x86_feature_detected!("popcnt")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// z = Qᵀy for one pixel from its spectrum (the whitened values the tables take), in f64:
/// for tests and reference use.
pub fn whiten_pixel(model: &Model, y: &[f64]) -> Vec<f64> {
    (0..model.q.ncols())
        .map(|k| y.iter().zip(model.q.column(k)).map(|(a, b)| a * b).sum())
        .collect()
}

/// Solves one pixel of spectrum `y` over every column on the f64 path: for tests and
/// reference use.
pub fn solve_spectrum(model: &Model, y: &[f64]) -> (Vec<f64>, Outcome) {
    let z = whiten_pixel(model, y);
    let mut a = vec![0.0; model.columns()];
    let full = model.full_mask();
    let o = solve_pixel(
        &model.table64,
        &z,
        full,
        full,
        model.solver.non_negative(),
        &mut a,
    );
    (a, o)
}
