//! Unmixing: for every pixel, how much of each library member explains its spectrum, how
//! well (RMSE) and how sure (standard errors).
//!
//! - [`params`]: the checked parameters (solver, shade, subsets, groups, noise).
//! - [`model`]: the endmember matrix with groups and shade, the identifiability guard, and
//!   the passive-set table (EᵀE and its factorisations computed once per cube).
//! - [`solve`]: the per-pixel exact active-set solver, generic over f32 and f64.
//! - [`run`]: the parallel driver over tasks of rows, and the choice of kernel; beside it
//!   the output types (`output`), what every pixel shares (`plan`), the per-pixel routines
//!   (`pixel`), the direct path's three block passes (`passes`), their AVX2 + FMA kernels
//!   written with intrinsics (`avx2`), and subset mode (`subsets`).
//!
//! Methods: NNLS (Lawson & Hanson 1974, *Solving Least Squares Problems*); fast NNLS on
//! precomputed EᵀE and Eᵀy (Bro & De Jong 1997, J. Chemometrics 11:393); FCLS (Heinz &
//! Chang 2001, IEEE TGRS 39:529); shade endmember (Adams, Smith & Johnson 1986, JGR
//! 91:8098); per-pixel endmember subsets (Roberts et al. 1998, Remote Sens. Environ.
//! 65:267); block principal pivoting (Júdice & Pires 1994, Comput. Oper. Res. 21:587).
//! Standard errors use the constrained Cramér–Rao form σ²[G⁻¹ − G⁻¹11ᵀG⁻¹/(1ᵀG⁻¹1)] on the
//! passive set, carried through the renormalisation by the delta method and, in subset
//! mode, through the BIC-weighted mixture ([`errors`]).
//!
//! This module does no I/O and never prints.

#[cfg(target_arch = "x86_64")]
mod avx2;
pub mod errors;
pub mod misfit;
pub mod model;
mod output;
pub mod params;
mod passes;
mod pixel;
mod plan;
pub mod run;
pub mod solve;
mod subsets;
pub mod weights;

pub use model::{Model, ModelError};
pub use output::{Counts, Refit, RunOptions, StdErrors, UnmixOutput, DARK_LIMIT};
pub use params::{ParamError, Precision, Solver, Subsets, UnmixParams};
pub use run::{unmix, unmix_with};
pub use subsets::DEFAULT_SUBSET_TRUNCATION;

use serde::Serialize;

/// Statistics of one plane over unmixed pixels.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct PlaneStats {
    pub id: String,
    pub mean: f64,
    pub std: f64,
    pub min: f64,
    pub max: f64,
    pub mean_stderr: f64,
}

/// Per-plane statistics over the unmixed pixels; `stderr` is [`UnmixOutput::stderr`].
pub fn plane_stats(out: &UnmixOutput, stderr: &ndarray::Array3<f32>) -> Vec<PlaneStats> {
    let p = out.ids.len();
    let mut n = 0usize;
    let (mut s, mut s2) = (vec![0.0f64; p], vec![0.0f64; p]);
    let (mut se, mut se_n) = (vec![0.0f64; p], vec![0usize; p]);
    let (mut lo, mut hi) = (vec![f64::INFINITY; p], vec![f64::NEG_INFINITY; p]);
    for ((r, c), ok) in out.unmixed.indexed_iter() {
        if !ok {
            continue;
        }
        n += 1;
        for j in 0..p {
            let v = out.abundance[(r, c, j)] as f64;
            s[j] += v;
            s2[j] += v * v;
            lo[j] = lo[j].min(v);
            hi[j] = hi[j].max(v);
            // NaN where the pixel has no covariance, as in the planes.
            let e = stderr[(r, c, j)];
            if e.is_finite() {
                se[j] += e as f64;
                se_n[j] += 1;
            }
        }
    }
    out.ids
        .iter()
        .enumerate()
        .map(|(j, id)| {
            let mean = if n > 0 { s[j] / n as f64 } else { f64::NAN };
            let var = if n > 1 {
                (s2[j] / n as f64 - mean * mean).max(0.0)
            } else {
                0.0
            };
            PlaneStats {
                id: id.clone(),
                mean,
                std: var.sqrt(),
                min: lo[j],
                max: hi[j],
                mean_stderr: if se_n[j] > 0 {
                    se[j] / se_n[j] as f64
                } else {
                    f64::NAN
                },
            }
        })
        .collect()
}
