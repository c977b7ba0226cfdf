//! The joint fit of reflected light and thermal emission in one pixel:
//!
//!   y = E a + Σₖ fₖ t(Tₖ),   a ≥ 0, 1ᵀa = 1 (shade included),   fₖ ≥ 0,
//!
//! with t(T) the thermal column ([`Columns`]: the I/F a whole pixel at T adds per band, in
//! the weighted units of the model). The emission stands outside the sum-to-one constraint:
//! it is light the surface gives off, not a share of the light it reflects.
//!
//! For fixed temperatures the problem is a small convex quadratic programme, solved
//! exactly by a primal active-set method (Lawson & Hanson 1974, ch. 23, with the equality
//! constraint carried in the bordered system; Nocedal & Wright 2006, §16.5 — both from
//! memory) from the reflected-only solution, which is feasible. No kept crate solves
//! non-negative least squares with an equality constraint on a few unknowns, so it is
//! written here, on nalgebra's LU for the bordered systems.
//!
//! Temperatures are searched: one temperature on a grid of [`GRID_STEP_K`] over the range,
//! refined by golden-section search (Kiefer 1953, from memory) on the residual to
//! [`T_TOLERANCE_K`]; two temperatures (`two`, the two-component sub-pixel model of Dozier 1981, Remote Sens.
//! Environ. 11:221, from memory) on a coarser grid of pairs T₁ < T₂, refined by golden
//! sections on each temperature in turn.
//!
//! Standard errors: the constrained Cramér–Rao form of the linearised model, whose
//! Jacobian holds the passive columns of E, each t(Tₖ) and fₖ ∂t/∂Tₖ, bordered by the
//! sum-to-one row (the same form as the reflected-only errors). Pure arithmetic: no I/O.

use nalgebra::{DMatrix, DVector};

/// The grid step of the one-temperature search, K.
pub const GRID_STEP_K: f64 = 50.0;
/// The grid step of the two-temperature search, K.
pub const GRID_STEP_TWO_K: f64 = 60.0;
/// Golden-section searches stop when the bracket is this narrow, K.
pub const T_TOLERANCE_K: f64 = 0.05;
/// The spacing of the table the thermal columns are interpolated from, K.
pub const TABLE_STEP_K: f64 = 5.0;

/// The thermal columns t_b(T), tabulated in ln t every [`TABLE_STEP_K`] over a range and
/// interpolated by cubic Hermite splines (Catmull–Rom tangents; ln t is smooth in T).
#[derive(Debug, Clone)]
pub struct Columns {
    t0: f64,
    step: f64,
    /// ln t per node, node-major: nodes × bands.
    ln: Vec<f64>,
    nodes: usize,
    bands: usize,
}

impl Columns {
    /// Tabulates `unit(b, T)` (the I/F of a whole pixel at T in band b, weighted) over
    /// `range_k`. `unit` must be positive.
    pub fn tabulate(
        range_k: (f64, f64),
        bands: usize,
        unit: impl Fn(usize, f64) -> f64 + Sync,
    ) -> Columns {
        use rayon::prelude::*;
        let (lo, hi) = (range_k.0 - TABLE_STEP_K, range_k.1 + TABLE_STEP_K);
        let nodes = ((hi - lo) / TABLE_STEP_K).ceil() as usize + 1;
        let ln: Vec<f64> = (0..nodes)
            .into_par_iter()
            .flat_map_iter(|i| {
                let t = lo + TABLE_STEP_K * i as f64;
                (0..bands)
                    .map(|b| unit(b, t).max(1e-300).ln())
                    .collect::<Vec<_>>()
            })
            .collect();
        Columns {
            t0: lo,
            step: TABLE_STEP_K,
            ln,
            nodes,
            bands,
        }
    }

    pub fn bands(&self) -> usize {
        self.bands
    }

    /// t(T) into `out`, and when `deriv` is given ∂t/∂T.
    pub fn at(&self, t_k: f64, out: &mut [f64], mut deriv: Option<&mut [f64]>) {
        let x = ((t_k - self.t0) / self.step).clamp(1.0, (self.nodes - 3) as f64);
        let i = (x.floor() as usize).min(self.nodes - 3);
        let u = x - i as f64;
        let (h00, h10, h01, h11) = (
            2.0 * u.powi(3) - 3.0 * u * u + 1.0,
            u.powi(3) - 2.0 * u * u + u,
            -2.0 * u.powi(3) + 3.0 * u * u,
            u.powi(3) - u * u,
        );
        let (d00, d10, d01, d11) = (
            6.0 * u * u - 6.0 * u,
            3.0 * u * u - 4.0 * u + 1.0,
            -6.0 * u * u + 6.0 * u,
            3.0 * u * u - 2.0 * u,
        );
        let nb = self.bands;
        for b in 0..nb {
            let p = |k: usize| self.ln[k * nb + b];
            let (p0, p1) = (p(i), p(i + 1));
            let m0 = 0.5 * (p1 - p(i - 1));
            let m1 = 0.5 * (p(i + 2) - p0);
            let v = h00 * p0 + h10 * m0 + h01 * p1 + h11 * m1;
            let e = v.exp();
            out[b] = e;
            if let Some(d) = deriv.as_deref_mut() {
                let dv = (d00 * p0 + d10 * m0 + d01 * p1 + d11 * m1) / self.step;
                d[b] = e * dv;
            }
        }
    }
}

/// One pixel's problem: the weighted spectrum and the model columns allowed for it, with
/// the products of the reflectance columns computed once (they do not change with T).
pub struct Pixel<'a> {
    /// y, weighted (bands).
    pub y: &'a [f64],
    /// E restricted to the allowed columns, bands × m, column-major.
    pub e: &'a [f64],
    /// Allowed columns.
    pub m: usize,
    /// A feasible start: the reflected-only abundances of the allowed columns (sum 1).
    pub start: &'a [f64],
    /// Per band, the factor the unit thermal columns are multiplied by for this pixel
    /// (band weight over the photometric divisor).
    pub thermal_scale: &'a [f64],
    /// EᵀE (m × m, row-major) and Eᵀy.
    gram: Vec<f64>,
    ety: Vec<f64>,
}

impl<'a> Pixel<'a> {
    pub fn new(
        y: &'a [f64],
        e: &'a [f64],
        m: usize,
        start: &'a [f64],
        thermal_scale: &'a [f64],
    ) -> Pixel<'a> {
        let nb = y.len();
        let col = |j: usize| &e[j * nb..(j + 1) * nb];
        let dot = |a: &[f64], b: &[f64]| a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>();
        let mut gram = vec![0.0; m * m];
        for i in 0..m {
            for j in i..m {
                let v = dot(col(i), col(j));
                gram[i * m + j] = v;
                gram[j * m + i] = v;
            }
        }
        let ety = (0..m).map(|j| dot(col(j), y)).collect();
        Pixel {
            y,
            e,
            m,
            start,
            thermal_scale,
            gram,
            ety,
        }
    }
}

/// A solved fixed-temperature problem.
#[derive(Debug, Clone, PartialEq)]
pub struct Solution {
    /// The allowed columns' abundances, then each fₖ.
    pub x: Vec<f64>,
    pub rss: f64,
}

/// Solves min ‖y − [E t₁ … ] x‖² with x ≥ 0 and the first m entries summing to 1, for the
/// thermal columns `thermal` (each bands long). `None` if a bordered system is singular.
pub fn solve_fixed(px: &Pixel, thermal: &[&[f64]]) -> Option<Solution> {
    let nb = px.y.len();
    let m = px.m;
    let n = m + thermal.len();
    let col = |j: usize| -> &[f64] {
        if j < m {
            &px.e[j * nb..(j + 1) * nb]
        } else {
            thermal[j - m]
        }
    };
    // Column scales: unit norm (a zero column, the shade, keeps 1).
    let d: Vec<f64> = (0..n)
        .map(|j| {
            let s = if j < m {
                px.gram[j * m + j].sqrt()
            } else {
                col(j).iter().map(|v| v * v).sum::<f64>().sqrt()
            };
            if s > 0.0 && s.is_finite() {
                s
            } else {
                1.0
            }
        })
        .collect();
    let mut g = DMatrix::<f64>::zeros(n, n);
    let mut bv = DVector::<f64>::zeros(n);
    let dot = |a: &[f64], b: &[f64]| a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>();
    for i in 0..n {
        bv[i] = if i < m { px.ety[i] } else { dot(col(i), px.y) } / d[i];
        for j in i..n {
            let v = if j < m {
                px.gram[i * m + j]
            } else {
                dot(col(i), col(j))
            } / (d[i] * d[j]);
            g[(i, j)] = v;
            g[(j, i)] = v;
        }
    }
    // In scaled unknowns x' = D x the constraint is Σ x'_j / d_j = 1 over the a-columns.
    let c: Vec<f64> = (0..n)
        .map(|j| if j < m { 1.0 / d[j] } else { 0.0 })
        .collect();
    let mut x: Vec<f64> = (0..n)
        .map(|j| {
            if j < m {
                px.start[j].max(0.0) * d[j]
            } else {
                0.0
            }
        })
        .collect();
    // Renormalise the start onto the constraint.
    let s: f64 = (0..m).map(|j| x[j] * c[j]).sum();
    if s.is_nan() || s <= 0.0 {
        return None;
    }
    for v in x.iter_mut().take(m) {
        *v /= s;
    }
    let mut passive: Vec<bool> = x.iter().map(|v| *v > 0.0).collect();
    let tol = 1e-12;
    for _ in 0..(6 * n + 20) {
        let p: Vec<usize> = (0..n).filter(|&j| passive[j]).collect();
        let k = p.len();
        let mut a = DMatrix::<f64>::zeros(k + 1, k + 1);
        let mut rhs = DVector::<f64>::zeros(k + 1);
        for (ii, &i) in p.iter().enumerate() {
            for (jj, &j) in p.iter().enumerate() {
                a[(ii, jj)] = g[(i, j)];
            }
            a[(ii, k)] = c[i];
            a[(k, ii)] = c[i];
            rhs[ii] = bv[i];
        }
        rhs[k] = 1.0;
        let sol = a.lu().solve(&rhs)?;
        let z: Vec<f64> = sol.iter().take(k).copied().collect();
        let mu = sol[k];
        if z.iter().all(|v| *v > tol) {
            for (ii, &i) in p.iter().enumerate() {
                x[i] = z[ii];
            }
            // Multipliers of the zero set: w = b − Gx − μc must be ≤ 0.
            let mut best = (tol, None);
            for j in (0..n).filter(|&j| !passive[j]) {
                let gx: f64 = (0..n).map(|l| g[(j, l)] * x[l]).sum();
                let w = bv[j] - gx - mu * c[j];
                if w > best.0 {
                    best = (w, Some(j));
                }
            }
            match best.1 {
                Some(j) => passive[j] = true,
                None => break,
            }
        } else {
            // Step towards z until the first passive entry reaches zero.
            let mut alpha = 1.0f64;
            for (ii, &i) in p.iter().enumerate() {
                if z[ii] <= tol {
                    let den = x[i] - z[ii];
                    if den > 0.0 {
                        alpha = alpha.min(x[i] / den);
                    }
                }
            }
            for (ii, &i) in p.iter().enumerate() {
                x[i] += alpha * (z[ii] - x[i]);
                if x[i] <= 1e-10 {
                    x[i] = 0.0;
                    passive[i] = false;
                }
            }
            if !(0..m).any(|j| passive[j]) {
                return None;
            }
        }
    }
    let xs: Vec<f64> = (0..n).map(|j| x[j] / d[j]).collect();
    let mut rss = 0.0;
    for b in 0..nb {
        let mut r = px.y[b];
        for (j, v) in xs.iter().enumerate() {
            if *v != 0.0 {
                r -= v * col(j)[b];
            }
        }
        rss += r * r;
    }
    Some(Solution { x: xs, rss })
}

/// Golden-section search for the minimum of `f` on [lo, hi] to `tol`; returns (x, f(x)).
pub fn golden(mut lo: f64, mut hi: f64, tol: f64, mut f: impl FnMut(f64) -> f64) -> (f64, f64) {
    const R: f64 = 0.618_033_988_749_894_8;
    let mut c = hi - R * (hi - lo);
    let mut d = lo + R * (hi - lo);
    let (mut fc, mut fd) = (f(c), f(d));
    while hi - lo > tol {
        if fc < fd {
            hi = d;
            d = c;
            fd = fc;
            c = hi - R * (hi - lo);
            fc = f(c);
        } else {
            lo = c;
            c = d;
            fc = fd;
            d = lo + R * (hi - lo);
            fd = f(d);
        }
    }
    if fc < fd {
        (c, fc)
    } else {
        (d, fd)
    }
}

/// A pixel's joint fit.
#[derive(Debug, Clone, PartialEq)]
pub struct Joint {
    /// Temperatures, K (one or two, ascending).
    pub t_k: Vec<f64>,
    pub solution: Solution,
}

/// The residual at temperatures `t` (NaN-safe: infinite where unsolvable).
fn rss_at(px: &Pixel, cols: &Columns, t: &[f64], buf: &mut [Vec<f64>]) -> Option<Solution> {
    for (k, tk) in t.iter().enumerate() {
        cols.at(*tk, &mut buf[k], None);
        for (v, s) in buf[k].iter_mut().zip(px.thermal_scale) {
            *v *= s;
        }
    }
    let refs: Vec<&[f64]> = buf.iter().take(t.len()).map(|v| v.as_slice()).collect();
    solve_fixed(px, &refs)
}

/// Fits one temperature over `range_k`: [`grid_one`], then [`refine_one`].
pub fn fit_one(px: &Pixel, cols: &Columns, range_k: (f64, f64)) -> Option<Joint> {
    let (t, _) = grid_one(px, cols, range_k)?;
    refine_one(px, cols, range_k, t)
}

/// The best temperature of the grid of [`GRID_STEP_K`] over `range_k`, and its residual.
pub fn grid_one(px: &Pixel, cols: &Columns, range_k: (f64, f64)) -> Option<(f64, f64)> {
    let mut buf = vec![vec![0.0; cols.bands()]];
    let steps = ((range_k.1 - range_k.0) / GRID_STEP_K).ceil().max(1.0) as usize;
    let mut best = (range_k.0, f64::INFINITY);
    for i in 0..=steps {
        let t = (range_k.0 + GRID_STEP_K * i as f64).min(range_k.1);
        if let Some(s) = rss_at(px, cols, &[t], &mut buf) {
            if s.rss < best.1 {
                best = (t, s.rss);
            }
        }
    }
    best.1.is_finite().then_some(best)
}

/// Golden-section refinement within one grid step of `t_grid`.
pub fn refine_one(px: &Pixel, cols: &Columns, range_k: (f64, f64), t_grid: f64) -> Option<Joint> {
    let mut buf = vec![vec![0.0; cols.bands()]];
    let (lo, hi) = (
        (t_grid - GRID_STEP_K).max(range_k.0),
        (t_grid + GRID_STEP_K).min(range_k.1),
    );
    let (t, _) = golden(lo, hi, T_TOLERANCE_K, |t| {
        rss_at(px, cols, &[t], &mut buf).map_or(f64::INFINITY, |s| s.rss)
    });
    let solution = rss_at(px, cols, &[t], &mut buf)?;
    Some(Joint {
        t_k: vec![t],
        solution,
    })
}

/// Fits two temperatures T₁ < T₂ over `range_k`.
pub fn fit_two(px: &Pixel, cols: &Columns, range_k: (f64, f64)) -> Option<Joint> {
    let mut buf = vec![vec![0.0; cols.bands()], vec![0.0; cols.bands()]];
    let steps = ((range_k.1 - range_k.0) / GRID_STEP_TWO_K).ceil().max(1.0) as usize;
    let grid: Vec<f64> = (0..=steps)
        .map(|i| (range_k.0 + GRID_STEP_TWO_K * i as f64).min(range_k.1))
        .collect();
    let mut best = (f64::INFINITY, [range_k.0, range_k.1]);
    for (i, &t1) in grid.iter().enumerate() {
        for &t2 in &grid[i + 1..] {
            if let Some(s) = rss_at(px, cols, &[t1, t2], &mut buf) {
                if s.rss < best.0 {
                    best = (s.rss, [t1, t2]);
                }
            }
        }
    }
    if !best.0.is_finite() {
        return None;
    }
    let [mut t1, mut t2] = best.1;
    let gap = T_TOLERANCE_K;
    // Coordinate descent by golden sections, until neither temperature moves.
    for round in 0..40 {
        let width = if round < 2 { GRID_STEP_TWO_K } else { 10.0 };
        let before = (t1, t2);
        let (lo, hi) = ((t1 - width).max(range_k.0), (t1 + width).min(t2 - gap));
        if hi > lo {
            t1 = golden(lo, hi, T_TOLERANCE_K, |t| {
                rss_at(px, cols, &[t, t2], &mut buf).map_or(f64::INFINITY, |s| s.rss)
            })
            .0;
        }
        let (lo, hi) = ((t2 - width).max(t1 + gap), (t2 + width).min(range_k.1));
        if hi > lo {
            t2 = golden(lo, hi, T_TOLERANCE_K, |t| {
                rss_at(px, cols, &[t1, t], &mut buf).map_or(f64::INFINITY, |s| s.rss)
            })
            .0;
        }
        if (t1 - before.0).abs() < 0.01 && (t2 - before.1).abs() < 0.01 {
            break;
        }
    }
    let solution = rss_at(px, cols, &[t1, t2], &mut buf)?;
    Some(Joint {
        t_k: vec![t1, t2],
        solution,
    })
}

/// The covariance of a joint fit: (the allowed columns' abundances, then per thermal
/// component f and T) as a square matrix of side m + 2K, row-major, for noise σ; `None`
/// when the linearised system is singular. Entries of members at zero, and of a component
/// with f = 0 (whose T the data do not constrain: NaN), are left out.
pub fn covariance(px: &Pixel, cols: &Columns, joint: &Joint, sigma: f64) -> Option<Vec<f64>> {
    let nb = px.y.len();
    let m = px.m;
    let kt = joint.t_k.len();
    let side = m + 2 * kt;
    // Parameters: passive a-columns, then per component with f > 0: f and T.
    let mut jac: Vec<Vec<f64>> = Vec::new();
    let mut index: Vec<usize> = Vec::new();
    let mut cons: Vec<f64> = Vec::new();
    for j in 0..m {
        if joint.solution.x[j] > 0.0 {
            jac.push(px.e[j * nb..(j + 1) * nb].to_vec());
            index.push(j);
            cons.push(1.0);
        }
    }
    let mut undetermined = Vec::new();
    for k in 0..kt {
        let f = joint.solution.x[m + k];
        if f <= 0.0 {
            undetermined.push(k);
            continue;
        }
        let mut t = vec![0.0; nb];
        let mut dt = vec![0.0; nb];
        cols.at(joint.t_k[k], &mut t, Some(&mut dt));
        for b in 0..nb {
            t[b] *= px.thermal_scale[b];
            dt[b] *= px.thermal_scale[b];
        }
        jac.push(t);
        index.push(m + 2 * k);
        cons.push(0.0);
        jac.push(dt.iter().map(|v| v * f).collect());
        index.push(m + 2 * k + 1);
        cons.push(0.0);
    }
    let q = jac.len();
    // Scale parameters to unit columns for the inverse.
    let d: Vec<f64> = jac
        .iter()
        .map(|c| {
            let s = c.iter().map(|v| v * v).sum::<f64>().sqrt();
            if s > 0.0 {
                s
            } else {
                1.0
            }
        })
        .collect();
    let mut a = DMatrix::<f64>::zeros(q + 1, q + 1);
    for i in 0..q {
        for j in 0..q {
            a[(i, j)] = jac[i].iter().zip(&jac[j]).map(|(x, y)| x * y).sum::<f64>() / (d[i] * d[j]);
        }
        a[(i, q)] = cons[i] / d[i];
        a[(q, i)] = cons[i] / d[i];
    }
    // The top-left block of the bordered inverse is the constrained covariance factor.
    let inv = a.try_inverse()?;
    let mut out = vec![0.0; side * side];
    for i in 0..q {
        for j in 0..q {
            out[index[i] * side + index[j]] = sigma * sigma * inv[(i, j)] / (d[i] * d[j]);
        }
    }
    for k in undetermined {
        let ti = m + 2 * k + 1;
        out[ti * side + ti] = f64::NAN;
    }
    Some(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn planckish(b: usize, t: f64) -> f64 {
        // A thermal column shaped like Planck's law on bands 1–5 µm.
        let wl = 1.0 + 4.0 * b as f64 / 19.0;
        crate::thermal::planck_radiance(wl, t) * 1e-3
    }

    fn problem(truth_t: f64, f: f64) -> (Vec<f64>, Vec<f64>, Columns) {
        // Two reflectance columns (flat bright, sloped dark) and shade; 20 bands.
        let nb = 20;
        let mut e = vec![0.0; nb * 3];
        for b in 0..nb {
            e[b] = 0.6;
            e[nb + b] = 0.1 + 0.01 * b as f64;
        }
        let cols = Columns::tabulate((300.0, 1800.0), nb, planckish);
        let mut y = vec![0.0; nb];
        for (b, v) in y.iter_mut().enumerate() {
            *v = 0.5 * e[b] + 0.3 * e[nb + b] + f * planckish(b, truth_t);
        }
        (e, y, cols)
    }

    #[test]
    fn interpolated_columns_match_the_function_and_its_derivative() {
        let cols = Columns::tabulate((300.0, 1800.0), 20, planckish);
        let mut t = vec![0.0; 20];
        let mut dt = vec![0.0; 20];
        cols.at(733.3, &mut t, Some(&mut dt));
        for b in 0..20 {
            let exact = planckish(b, 733.3);
            assert!(
                (t[b] / exact - 1.0).abs() < 1e-6,
                "band {b}: {} vs {exact}",
                t[b]
            );
            let num = (planckish(b, 733.4) - planckish(b, 733.2)) / 0.2;
            assert!((dt[b] / num - 1.0).abs() < 1e-3, "band {b}");
        }
    }

    #[test]
    fn a_noise_free_pixel_gives_back_its_temperature_fraction_and_abundances() {
        let (e, y, cols) = problem(812.0, 0.02);
        let start = [0.4, 0.4, 0.2];
        let px = Pixel::new(&y, &e, 3, &start, &[1.0; 20]);
        let j = fit_one(&px, &cols, (300.0, 1800.0)).unwrap();
        assert!((j.t_k[0] - 812.0).abs() < 0.2, "{:?}", j.t_k);
        let x = &j.solution.x;
        assert!((x[3] / 0.02 - 1.0).abs() < 1e-3, "{x:?}");
        assert!(
            (x[0] - 0.5).abs() < 1e-4 && (x[1] - 0.3).abs() < 1e-4,
            "{x:?}"
        );
        assert!((x[0] + x[1] + x[2] - 1.0).abs() < 1e-9);
        assert!(j.solution.rss < 1e-12);
    }

    #[test]
    fn the_fixed_temperature_solution_meets_the_kkt_conditions() {
        // Against a brute-force check: no feasible direction lowers the residual.
        let (e, y, cols) = problem(650.0, 0.01);
        let start = [1.0, 0.0, 0.0];
        let px = Pixel::new(&y, &e, 3, &start, &[1.0; 20]);
        let mut t = vec![0.0; 20];
        cols.at(900.0, &mut t, None); // the wrong temperature: a residual remains
        let s = solve_fixed(&px, &[&t]).unwrap();
        let rss = |x: &[f64]| -> f64 {
            (0..20)
                .map(|b| {
                    let m = x[0] * e[b] + x[1] * e[20 + b] + x[2] * e[40 + b] + x[3] * t[b];
                    (y[b] - m).powi(2)
                })
                .sum()
        };
        assert!((rss(&s.x) - s.rss).abs() < 1e-12);
        // Random feasible points never do better.
        let mut seed = 1u64;
        let mut next = || {
            seed = seed
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (seed >> 11) as f64 / (1u64 << 53) as f64
        };
        for _ in 0..20_000 {
            let (u, v) = (next(), next());
            let (a0, a1) = (u.min(v), (u.max(v) - u.min(v)));
            let x = [a0, a1, 1.0 - a0 - a1, s.x[3] * (0.5 + next())];
            assert!(rss(&x) >= s.rss - 1e-12);
        }
    }

    #[test]
    fn two_components_are_found_when_present() {
        let (e, mut y, cols) = problem(500.0, 0.05);
        for (b, v) in y.iter_mut().enumerate() {
            *v += 0.001 * planckish(b, 1400.0);
        }
        let start = [0.4, 0.4, 0.2];
        let px = Pixel::new(&y, &e, 3, &start, &[1.0; 20]);
        let j = fit_two(&px, &cols, (300.0, 1800.0)).unwrap();
        assert!((j.t_k[0] - 500.0).abs() < 2.0, "{:?}", j.t_k);
        assert!((j.t_k[1] - 1400.0).abs() < 10.0, "{:?}", j.t_k);
    }

    #[test]
    fn golden_section_finds_a_parabola_minimum() {
        let (x, fx) = golden(0.0, 10.0, 1e-6, |x| (x - 3.7).powi(2) + 1.0);
        assert!((x - 3.7).abs() < 1e-5 && (fx - 1.0).abs() < 1e-9);
    }
}
