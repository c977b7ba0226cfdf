//! The per-pixel active-set solver on precomputed passive-set maps, generic over f32 (the
//! fast path) and f64 (the reference path).
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
    let m = b.len();
    for (i, o) in out.iter_mut().enumerate() {
        let row = &e.map[i * m..(i + 1) * m];
        let mut acc = e.off[i];
        for (r, v) in row.iter().zip(b) {
            acc = acc + *r * *v;
        }
        *o = acc;
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
/// sum-to-one solvers) the `allowed` set is solved once, signs unrestricted.
pub fn solve_pixel<T: Float>(
    table: &[Option<Entry<T>>],
    b: &[T],
    allowed: u32,
    start: u32,
    non_negative: bool,
    a: &mut [T],
    work: &mut [T],
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
                        T::zero()
                    };
                }
            }
            None => a.iter_mut().for_each(|v| *v = T::nan()),
        }
        return Outcome {
            passive: allowed,
            steps: 0,
            enumerated: false,
        };
    }
    let scale = b.iter().fold(T::zero(), |s, v| s.max(v.abs()));
    let tol = tolerance(scale);
    let mut p = start & allowed;
    let mut best = u32::MAX;
    let mut stalled = 0;
    for step in 0..(4 * m as u32 + 8) {
        let Some(entry) = table.get(p as usize).and_then(|e| e.as_ref()) else {
            break;
        };
        evaluate(entry, b, work);
        let (count, flip) = violations(work, m, p, allowed, tol);
        if count == 0 {
            for i in 0..m {
                a[i] = if p & (1 << i) != 0 {
                    work[i].max(T::zero())
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
    enumerate(table, b, allowed, a, work)
}

/// Exact fallback: the passive set within `allowed` whose solution satisfies the KKT
/// signs (the optimum of a strictly convex problem is the unique such point); when
/// rounding leaves none exact, the one with the fewest violations.
fn enumerate<T: Float>(
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
