//! The per-pixel change test and false-discovery control.
//!
//! - **χ²**: Δf = f₂ − f₁ over the M materials (shade excluded); C = C₁ + C₂; χ² =
//!   Δfᵀ C⁺ Δf with C⁺ the Moore–Penrose pseudo-inverse, from the symmetric
//!   eigendecomposition (nalgebra), eigenvalues below 10⁻⁹ of the largest dropped. The
//!   renormalised abundances sum to one, so C has the null vector 1 and rank M − 1: the
//!   degrees of freedom are the rank found (M − 1 when it is).
//! - **Rebuilt covariance**: without per-pixel covariances, C = P D P with D =
//!   diag(σ₁² + σ₂²) and P = I − 11ᵀ/M, the projection onto changes that sum to zero (the
//!   only changes renormalised abundances can make). This keeps the constraint's rank but
//!   not the correlations the fit had; run `map --covariance` on both epochs for those.
//! - **p-value**: the χ² survival function (statrs), checked against SciPy in
//!   `tests/external/check_change.py`.
//! - **Benjamini & Hochberg (1995, J. R. Stat. Soc. B 57:289)**: sort the m p-values,
//!   find the largest i with p₍ᵢ₎ ≤ i q / m, reject every p ≤ p₍ᵢ₎.
//!
//! No I/O and no printing here.

use nalgebra::{DMatrix, DVector};
use statrs::distribution::{ChiSquared, ContinuousCDF};

/// The χ² statistic of one pixel's change and its degrees of freedom (the rank of C).
/// `cov` is C₁ + C₂ as an M × M matrix.
pub fn chi_square(delta: &[f64], cov: &DMatrix<f64>) -> (f64, usize) {
    let m = delta.len();
    let eig = nalgebra::SymmetricEigen::new(cov.clone());
    let top = eig.eigenvalues.iter().fold(0.0f64, |a, &v| a.max(v));
    if top <= 0.0 || !top.is_finite() {
        return (f64::NAN, 0);
    }
    let d = DVector::from_column_slice(delta);
    let mut chi2 = 0.0;
    let mut rank = 0;
    for k in 0..m {
        let lambda = eig.eigenvalues[k];
        if lambda > 1e-9 * top {
            let u = eig.eigenvectors.column(k);
            let proj = u.dot(&d);
            chi2 += proj * proj / lambda;
            rank += 1;
        }
    }
    (chi2, rank)
}

/// C = P diag(var) P with P = I − 11ᵀ/M: a covariance of sum-to-zero changes rebuilt from
/// the standard errors alone.
pub fn rebuilt_covariance(var: &[f64]) -> DMatrix<f64> {
    let m = var.len();
    let p = DMatrix::<f64>::from_fn(m, m, |i, j| {
        (if i == j { 1.0 } else { 0.0 }) - 1.0 / m as f64
    });
    let d = DMatrix::<f64>::from_diagonal(&DVector::from_column_slice(var));
    &p * d * &p
}

/// The covariance factor K of passive set `mask` (bit j: column j): the solver's own
/// ([`crate::unmix::model::set_covariance`], the top-left block of the inverse of
/// [[G_PP, 1], [1ᵀ, 0]], without the border when the sum is not constrained), zero outside
/// P; `None` when the system is singular. M × M, row-major.
pub fn set_covariance(gram: &super::Gram, mask: u32) -> Option<Vec<f64>> {
    crate::unmix::model::set_covariance(&gram.g, mask, gram.sum_to_one)
}

/// The upper-tail probability of χ² with `dof` degrees of freedom.
pub fn p_value(chi2: f64, dof: usize) -> f64 {
    if !chi2.is_finite() || dof == 0 {
        return f64::NAN;
    }
    match ChiSquared::new(dof as f64) {
        Ok(d) => d.sf(chi2),
        Err(_) => f64::NAN,
    }
}

/// Benjamini–Hochberg at level `q`: which of `p` are rejected (NaN never is), and the
/// largest rejected p-value (the threshold; 0 when none is).
pub fn benjamini_hochberg(p: &[f64], q: f64) -> (Vec<bool>, f64) {
    let mut order: Vec<usize> = (0..p.len()).filter(|&i| p[i].is_finite()).collect();
    let m = order.len();
    order.sort_by(|&a, &b| p[a].total_cmp(&p[b]).then(a.cmp(&b)));
    let mut cut = 0.0;
    for (rank, &i) in order.iter().enumerate() {
        if p[i] <= (rank + 1) as f64 * q / m as f64 {
            cut = p[i];
        }
    }
    let any = order
        .iter()
        .enumerate()
        .any(|(rank, &i)| p[i] <= (rank + 1) as f64 * q / m as f64);
    let rejected = p
        .iter()
        .map(|&v| any && v.is_finite() && v <= cut)
        .collect();
    (rejected, if any { cut } else { 0.0 })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pseudo_inverse_chi_square_matches_the_diagonal_case_and_drops_the_null_vector() {
        // A diagonal covariance: χ² is the sum of squared z.
        let c = DMatrix::from_diagonal(&DVector::from_vec(vec![0.01, 0.04, 0.09]));
        let (chi2, dof) = chi_square(&[0.1, 0.2, -0.3], &c);
        assert!((chi2 - 3.0).abs() < 1e-12 && dof == 3);
        // The rebuilt covariance has rank M − 1; a change along 1 is invisible to it.
        let r = rebuilt_covariance(&[0.01, 0.01, 0.01, 0.01]);
        let (_, dof) = chi_square(&[0.1, -0.1, 0.0, 0.0], &r);
        assert_eq!(dof, 3);
        // Equal variances σ²: PDP = σ²P, whose pseudo-inverse is P/σ², so a sum-to-zero Δ
        // gives |Δ|²/σ².
        let (chi2, _) = chi_square(&[0.1, -0.1, 0.0, 0.0], &r);
        assert!((chi2 - 2.0).abs() < 1e-9, "{chi2}");
    }

    #[test]
    fn benjamini_hochberg_follows_the_step_up_rule() {
        // m = 5, q = 0.05: thresholds 0.01, 0.02, 0.03, 0.04, 0.05. p₍₄₎ = 0.045 > 0.04 and p₍₃₎ = 0.025 ≤ 0.03 is
        // the largest passing, so the three smallest are rejected, although p₍₂₎ = 0.021 >
        // 0.02 fails its own threshold (the step-up property).
        let p = [0.045, 0.005, 0.021, 0.9, 0.025];
        let (r, cut) = benjamini_hochberg(&p, 0.05);
        assert_eq!(r, vec![false, true, true, false, true]);
        assert_eq!(cut, 0.025);
        let (r, cut) = benjamini_hochberg(&[0.5, 0.6, f64::NAN], 0.05);
        assert_eq!(r, vec![false, false, false]);
        assert_eq!(cut, 0.0);
    }

    #[test]
    fn p_value_of_the_chi_square_median() {
        // The median of χ² with 2 degrees of freedom is 2 ln 2 (closed form: the χ²₂
        // distribution is exponential with mean 2).
        assert!((p_value(2.0 * 2f64.ln(), 2) - 0.5).abs() < 1e-12);
        assert!(p_value(f64::NAN, 3).is_nan());
    }
}
