//! The per-pixel active-set solver on precomputed passive-set maps. The M-dimensional
//! steps run in f64 on both the f32 (fast) and f64 (reference) paths, which differ in how
//! Eᵀy is formed (see `run`); the enumeration fallback is generic over the float type.
//!
//! Method: block principal pivoting (Júdice & Pires 1994; Portugal, Júdice & Vicente
//! 1994) applied to the KKT conditions of NNLS (Lawson & Hanson 1974) and FCLS (Heinz &
//! Chang 2001) in the Gram form of Bro & De Jong (1997). Start from the full passive set
//! (right for dense mixtures); each step maps b = Eᵀy to [a; μ] with one matrix–vector
//! product and tests signs: a_i ≥ 0 on the passive set and μ_j ≥ 0 on the rest is the
//! optimality certificate itself. Otherwise every violator switches sides at once; when
//! that stops reducing the number of violators for three steps, only the violator of
//! largest index switches (Murty's rule, finite). A pixel that still fails, or lands on a
//! singular passive set, is solved by enumerating every passive set (exact, rare).

use num_traits::Float;

use super::model::Entry;

/// Sign tolerance, relative to the data's scale: a value above −tol counts as ≥ 0.
fn tolerance<T: Float>(scale: T) -> T {
    T::epsilon() * T::from(256.0).expect("small constant") * (T::one() + scale)
}

/// Evaluates an entry: out = map·b + off (2M values).
#[inline]
fn evaluate<T: Float>(e: &Entry<T>, b: &[T], out: &mut [T]) {
    let n = out.len();
    out.copy_from_slice(&e.off);
    for (col, &bj) in e.map.chunks_exact(n).zip(b) {
        for (o, c) in out.iter_mut().zip(col) {
            *o = *o + *c * bj;
        }
    }
}

/// Counts violations of the KKT signs for passive set `p` within `allowed`; returns the
/// count and the violators' mask.
#[inline]
fn violations<T: Float>(v: &[T], m: usize, p: u32, allowed: u32, tol: T) -> (u32, u32) {
    let mut flip = 0u32;
    for i in 0..m {
        let bit = 1u32 << i;
        if allowed & bit == 0 {
            continue;
        }
        let bad = if p & bit != 0 {
            v[i] < -tol
        } else {
            v[m + i] < -tol
        };
        if bad {
            flip |= bit;
        }
    }
    (flip.count_ones(), flip)
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

/// Solves one pixel: minimises over passive sets within `allowed` (a mask), starting from
/// `start`. `b` is Eᵀy (M values); `a` receives the M abundances (0 outside the passive
/// set); `work` must hold 2M values. Without `non_negative` (unconstrained and
/// sum-to-one solvers) the `allowed` set is solved once, signs unrestricted. With it, the
/// portable specialised solver runs (the driver picks the AVX2 variant when available).
pub fn solve_pixel(
    table: &[Option<Entry<f64>>],
    b: &[f64],
    allowed: u32,
    start: u32,
    non_negative: bool,
    a: &mut [f64],
    work: &mut [f64],
) -> Outcome {
    let m = b.len();
    if !non_negative {
        match table.get(allowed as usize).and_then(|e| e.as_ref()) {
            Some(entry) => {
                evaluate(entry, b, work);
                for i in 0..m {
                    a[i] = if allowed & (1 << i) != 0 {
                        work[i]
                    } else {
                        0.0
                    };
                }
            }
            None => a.iter_mut().for_each(|v| *v = f64::NAN),
        }
        return Outcome {
            passive: allowed,
            steps: 0,
            enumerated: false,
        };
    }
    match fixed_solver(m, false) {
        Some(solve) => solve(table, b, allowed, start, a, work),
        None => enumerate(table, b, allowed, a, work),
    }
}

/// Exact fallback: the passive set within `allowed` whose solution satisfies the KKT
/// signs (the optimum of a strictly convex problem is the unique such point); when
/// rounding leaves none exact, the one with the fewest violations.
pub(crate) fn enumerate<T: Float>(
    table: &[Option<Entry<T>>],
    b: &[T],
    allowed: u32,
    a: &mut [T],
    work: &mut [T],
) -> Outcome {
    let m = b.len();
    let scale = b.iter().fold(T::zero(), |s, v| s.max(v.abs()));
    let tol = tolerance(scale) * T::from(16.0).expect("small constant");
    let mut best: Option<(u32, u32)> = None; // (mask, violations)
    for mask in 1..=allowed {
        if mask & !allowed != 0 {
            continue;
        }
        let Some(entry) = table.get(mask as usize).and_then(|e| e.as_ref()) else {
            continue;
        };
        evaluate(entry, b, work);
        let (count, _) = violations(work, m, mask, allowed, tol);
        if best.is_none_or(|(_, c)| count < c) {
            best = Some((mask, count));
            if count == 0 {
                break;
            }
        }
    }
    let (mask, _) = best.unwrap_or((0, 0));
    match table.get(mask as usize).and_then(|e| e.as_ref()) {
        Some(entry) => {
            evaluate(entry, b, work);
            for i in 0..m {
                a[i] = if mask & (1 << i) != 0 {
                    work[i].max(T::zero())
                } else {
                    T::zero()
                };
            }
        }
        None => a.iter_mut().for_each(|v| *v = T::nan()),
    }
    Outcome {
        passive: mask,
        steps: 0,
        enumerated: true,
    }
}

/// The signature of a solver specialised for one column count.
pub type FixedSolver =
    fn(&[Option<Entry<f64>>], &[f64], u32, u32, &mut [f64], &mut [f64]) -> Outcome;

/// The same block principal pivoting as [`solve_pixel`] (non-negative solvers), with the
/// column count fixed at compile time so the small vectors stay in registers and the
/// loops unroll. `tests/it/unmix.rs` checks it against [`solve_pixel`].
#[inline(always)]
fn solve_fixed_body<const M: usize>(
    table: &[Option<Entry<f64>>],
    b: &[f64],
    allowed: u32,
    start: u32,
    a: &mut [f64],
    work: &mut [f64],
) -> Outcome {
    let b: &[f64; M] = b[..M].try_into().expect("M columns");
    let scale = b.iter().fold(0.0f64, |s, v| s.max(v.abs()));
    let tol = tolerance(scale);
    let mut p = start & allowed;
    let mut best = u32::MAX;
    let mut stalled = 0;
    for step in 0..(4 * M as u32 + 8) {
        let Some(entry) = table.get(p as usize).and_then(|e| e.as_ref()) else {
            break;
        };
        let map = &entry.map[..2 * M * M];
        let mut x: [f64; M] = entry.off[..M].try_into().expect("M offsets");
        for j in 0..M {
            let col: &[f64; M] = map[j * 2 * M..j * 2 * M + M].try_into().expect("M rows");
            for i in 0..M {
                x[i] = col[i].mul_add(b[j], x[i]);
            }
        }
        let mut flip = 0u32;
        for (i, xi) in x.iter().enumerate() {
            if p & (1 << i) != 0 && *xi < -tol {
                flip |= 1 << i;
            }
        }
        if p != allowed || flip != 0 {
            let mut mu: [f64; M] = entry.off[M..2 * M].try_into().expect("M offsets");
            for j in 0..M {
                let col: &[f64; M] = map[j * 2 * M + M..j * 2 * M + 2 * M]
                    .try_into()
                    .expect("M rows");
                for i in 0..M {
                    mu[i] = col[i].mul_add(b[j], mu[i]);
                }
            }
            for (i, mi) in mu.iter().enumerate() {
                let bit = 1u32 << i;
                if allowed & bit != 0 && p & bit == 0 && *mi < -tol {
                    flip |= bit;
                }
            }
        }
        let count = flip.count_ones();
        if count == 0 {
            for i in 0..M {
                a[i] = if p & (1 << i) != 0 {
                    x[i].max(0.0)
                } else {
                    0.0
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
    enumerate(table, b, allowed, a, work)
}

fn solve_fixed<const M: usize>(
    table: &[Option<Entry<f64>>],
    b: &[f64],
    allowed: u32,
    start: u32,
    a: &mut [f64],
    work: &mut [f64],
) -> Outcome {
    solve_fixed_body::<M>(table, b, allowed, start, a, work)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn solve_fixed_avx2<const M: usize>(
    table: &[Option<Entry<f64>>],
    b: &[f64],
    allowed: u32,
    start: u32,
    a: &mut [f64],
    work: &mut [f64],
) -> Outcome {
    solve_fixed_body::<M>(table, b, allowed, start, a, work)
}

#[cfg(target_arch = "x86_64")]
fn solve_fixed_x86<const M: usize>(
    table: &[Option<Entry<f64>>],
    b: &[f64],
    allowed: u32,
    start: u32,
    a: &mut [f64],
    work: &mut [f64],
) -> Outcome {
    // SAFETY: chosen by `fixed_solver` only after run-time detection of AVX2 and FMA.
    unsafe { solve_fixed_avx2::<M>(table, b, allowed, start, a, work) }
}

/// Whether the AVX2 + FMA paths may be used on this processor (run-time detection).
pub fn avx2_available() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// The specialised non-negative solver for `m` columns (1–12), using AVX2 + FMA when
/// `vector` is true (callers pass [`avx2_available`]); `None` beyond 12 columns.
pub fn fixed_solver(m: usize, vector: bool) -> Option<FixedSolver> {
    macro_rules! pick {
        ($($n:literal)*) => {
            match (m, vector) {
                $(
                    #[cfg(target_arch = "x86_64")]
                    ($n, true) => Some(solve_fixed_x86::<$n> as FixedSolver),
                    ($n, _) => Some(solve_fixed::<$n> as FixedSolver),
                )*
                _ => None,
            }
        };
    }
    pick!(1 2 3 4 5 6 7 8 9 10 11 12)
}
