//! Clustering abundance vectors into surface units with k-means (Lloyd's iteration from
//! k-means++ seeds, [`super::kmeans`]), fitted on a seeded sample and applied to every
//! pixel, so the cost grows linearly with the cube.
//!
//! The number of units, when not given, is the K in 2…`max_k` with the highest mean
//! silhouette (Rousseeuw 1987, J. Comput. Appl. Math. 20:53) on at most
//! [`SILHOUETTE_POINTS`] sampled pixels: the silhouette costs grow with the square of the
//! points, so it is never computed on the whole cube.
//!
//! Two other methods, through linfa-clustering: a **Gaussian mixture** (full
//! covariances, regularised by [`GMM_REG_COVARIANCE`] so a pure-pixel unit with almost no
//! variance does not collapse; K chosen by the lowest BIC = −2 ln L + p ln n, Schwarz 1978;
//! pixels assigned to the component of highest posterior), and **DBSCAN** (Ester et al.
//! 1996; on the sample, which sets the number of units itself; every pixel then joins the
//! nearest cluster mean).

use linfa::prelude::*;
use ndarray::{Array1, Array2, ArrayView2, Axis};
use rand::seq::index::sample;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

/// Pixels the silhouette is computed on, at most.
pub const SILHOUETTE_POINTS: usize = 3000;
/// k-means runs (different seeded initialisations) per K; the lowest inertia wins.
pub const RUNS: usize = 3;
/// Lloyd iterations per k-means run, at most.
pub const MAX_ITERATIONS: usize = 300;
/// k-means stops when no centroid moves farther than this (abundance units).
pub const TOLERANCE: f64 = 1e-7;

use super::kmeans::{self, KMeansFit};
pub use super::kmeans::{assign, nearest};

/// Why clustering failed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ClusterError {
    #[error("--units {k}: more units than the {points} pixels that can be clustered")]
    TooManyUnits { k: usize, points: usize },
    #[error("no pixel could be clustered (every pixel is no-data or unexplained)")]
    NoPoints,
    #[error("k-means failed: {0}")]
    KMeans(String),
    #[error(
        "the Gaussian mixture failed ({0}); units with almost no variance collapse it: use \
         fewer units (--units), or k-means (--method kmeans)"
    )]
    Mixture(String),
    #[error("DBSCAN failed: {0}")]
    Dbscan(String),
}

/// A fitted clustering: centroids (K × features) and the chosen K's scores.
#[derive(Debug, Clone)]
pub struct Clustering {
    pub centroids: Array2<f64>,
    /// Score per K tried (K, score), when K was chosen automatically: mean silhouette for
    /// k-means (higher is better), BIC for the mixture (lower is better).
    pub scores: Vec<(usize, f64)>,
    /// The mixture's components, for assignment by posterior.
    pub mixture: Option<Mixture>,
}

impl Clustering {
    /// The unit of one feature vector: nearest centroid, or highest posterior.
    pub fn unit_of(&self, x: &[f64]) -> usize {
        match &self.mixture {
            Some(m) => m.most_likely(x),
            None => nearest(&self.centroids, x),
        }
    }
}

/// The clustering method.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Method {
    KMeans,
    GaussianMixture,
    /// DBSCAN with neighbourhood radius `eps` (abundance units) and `min_points`.
    Dbscan {
        eps: f64,
        min_points: usize,
    },
}

/// Covariance regularisation of the mixture (added to the diagonal).
pub const GMM_REG_COVARIANCE: f64 = 1e-4;

/// Gaussian components: log weights, means, and the Cholesky factors of the covariances.
#[derive(Debug, Clone)]
pub struct Mixture {
    log_weights: Vec<f64>,
    means: Array2<f64>,
    /// Lower-triangular L with LLᵀ = Σ, per component.
    chol: Vec<nalgebra::DMatrix<f64>>,
    /// ln det Σ per component.
    log_det: Vec<f64>,
}

impl Mixture {
    fn new(
        weights: &Array1<f64>,
        means: &Array2<f64>,
        cov: &ndarray::Array3<f64>,
    ) -> Option<Mixture> {
        let d = means.ncols();
        let mut chol = Vec::new();
        let mut log_det = Vec::new();
        for k in 0..means.nrows() {
            let m = nalgebra::DMatrix::from_fn(d, d, |i, j| cov[(k, i, j)]);
            let c = nalgebra::Cholesky::new(m)?;
            log_det.push(2.0 * c.l().diagonal().iter().map(|v| v.ln()).sum::<f64>());
            chol.push(c.l());
        }
        Some(Mixture {
            log_weights: weights.iter().map(|w| w.ln()).collect(),
            means: means.clone(),
            chol,
            log_det,
        })
    }

    /// ln(w_k N(x | μ_k, Σ_k)) per component.
    fn log_joint(&self, x: &[f64], k: usize) -> f64 {
        let d = x.len();
        let diff = nalgebra::DVector::from_fn(d, |i, _| x[i] - self.means[(k, i)]);
        let z = self.chol[k]
            .solve_lower_triangular(&diff)
            .expect("Cholesky factors are regular");
        self.log_weights[k]
            - 0.5
                * (z.norm_squared()
                    + self.log_det[k]
                    + d as f64 * (2.0 * std::f64::consts::PI).ln())
    }

    fn most_likely(&self, x: &[f64]) -> usize {
        (0..self.means.nrows())
            .map(|k| (k, self.log_joint(x, k)))
            .max_by(|a, b| a.1.total_cmp(&b.1))
            .map(|(k, _)| k)
            .unwrap_or(0)
    }

    /// ln L of the points.
    fn log_likelihood(&self, points: &Array2<f64>) -> f64 {
        points
            .outer_iter()
            .map(|row| {
                let x = row.to_vec();
                let l: Vec<f64> = (0..self.means.nrows())
                    .map(|k| self.log_joint(&x, k))
                    .collect();
                let max = l.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
                max + l.iter().map(|v| (v - max).exp()).sum::<f64>().ln()
            })
            .sum()
    }
}

fn fit_mixture(points: &Array2<f64>, k: usize, seed: u64) -> Result<(Mixture, f64), ClusterError> {
    use linfa_clustering::GaussianMixtureModel;
    let data = DatasetBase::from(points.clone());
    let gmm = GaussianMixtureModel::params_with_rng(k, ChaCha8Rng::seed_from_u64(seed))
        .n_runs(2)
        .reg_covariance(GMM_REG_COVARIANCE)
        .tolerance(1e-4)
        .max_n_iterations(200)
        .fit(&data)
        .map_err(|e| ClusterError::Mixture(e.to_string()))?;
    let mix = Mixture::new(gmm.weights(), gmm.means(), gmm.covariances()).ok_or_else(|| {
        ClusterError::Mixture("a fitted covariance is not positive definite".into())
    })?;
    let (n, d) = points.dim();
    let p = (k - 1) + k * d + k * d * (d + 1) / 2;
    let bic = -2.0 * mix.log_likelihood(points) + p as f64 * (n as f64).ln();
    Ok((mix, bic))
}

fn fit_dbscan(
    points: &Array2<f64>,
    eps: f64,
    min_points: usize,
) -> Result<Array2<f64>, ClusterError> {
    use linfa_clustering::Dbscan;
    let labels = Dbscan::params(min_points)
        .tolerance(eps)
        .transform(points)
        .map_err(|e| ClusterError::Dbscan(e.to_string()))?;
    let k = labels.iter().flatten().max().map_or(0, |m| m + 1);
    if k == 0 {
        return Err(ClusterError::Dbscan(format!(
            "every sampled pixel is noise at eps {eps} with min points {min_points}: raise --eps"
        )));
    }
    let d = points.ncols();
    let mut sums = Array2::<f64>::zeros((k, d));
    let mut counts = vec![0usize; k];
    for (row, l) in points.outer_iter().zip(labels.iter()) {
        if let Some(l) = l {
            counts[*l] += 1;
            let mut s = sums.row_mut(*l);
            s += &row;
        }
    }
    for (mut s, n) in sums.outer_iter_mut().zip(&counts) {
        s /= *n as f64;
    }
    Ok(sums)
}

/// Row indices of a seeded sample of `n` points (all of them when `n ≥ total`), in order.
pub fn sample_indices(total: usize, n: usize, seed: u64) -> Vec<usize> {
    if n >= total {
        return (0..total).collect();
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut v = sample(&mut rng, total, n).into_vec();
    v.sort_unstable();
    v
}

fn fit_k(points: &Array2<f64>, k: usize, seed: u64) -> Result<(Array2<f64>, f64), ClusterError> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut best: Option<KMeansFit> = None;
    for _ in 0..RUNS {
        let init = kmeans::plus_plus(points.view(), k, &mut rng);
        let fit = kmeans::lloyd(points.view(), &init, MAX_ITERATIONS, TOLERANCE);
        if best.as_ref().is_none_or(|b| fit.inertia < b.inertia) {
            best = Some(fit);
        }
    }
    let best = best.expect("RUNS ≥ 1");
    Ok((best.centroids, best.inertia))
}

/// One point's silhouette from its summed distances and counts per cluster.
fn score(sum: &[f64], count: &[usize], own: usize) -> f64 {
    if count[own] == 0 {
        return 0.0;
    }
    let a = sum[own] / count[own] as f64;
    let b = (0..sum.len())
        .filter(|&c| c != own && count[c] > 0)
        .map(|c| sum[c] / count[c] as f64)
        .fold(f64::INFINITY, f64::min);
    if !b.is_finite() || a.max(b) == 0.0 {
        0.0
    } else {
        (b - a) / a.max(b)
    }
}

/// The mean silhouette of each labelling in `labellings` (labels of the same points, the
/// t-th with `ks[t]` clusters) — for each point (b − a) / max(a, b), a the mean distance to
/// its own cluster and b the smallest mean distance to another — bit for bit as the
/// one-labelling-at-a-time form (in the tests) gives them: every
/// distance is computed once, not once per labelling, and added to each labelling's sums
/// in the same order (j ascending), so the choice of K costs one pass over the pairs.
pub fn silhouettes(points: ArrayView2<f64>, labellings: &[Vec<usize>], ks: &[usize]) -> Vec<f64> {
    let (n, d) = points.dim();
    let t_count = labellings.len();
    assert_eq!(ks.len(), t_count, "one K per labelling");
    let x = points.as_standard_layout();
    let xs = x.as_slice().expect("standard layout");
    // Labels point-major, each labelling's sums at its own offset.
    let offsets: Vec<usize> = ks
        .iter()
        .scan(0, |o, &k| {
            let here = *o;
            *o += k;
            Some(here)
        })
        .collect();
    let slots = ks.iter().sum::<usize>();
    let mut at = vec![0u32; n * t_count];
    let mut sizes = vec![0usize; slots];
    for (t, labels) in labellings.iter().enumerate() {
        assert_eq!(labels.len(), n, "a label per point");
        for (j, &l) in labels.iter().enumerate() {
            assert!(l < ks[t], "label {l} of K = {}", ks[t]);
            at[j * t_count + t] = (offsets[t] + l) as u32;
            sizes[offsets[t] + l] += 1;
        }
    }
    let per_point: Vec<Vec<f64>> = (0..n)
        .into_par_iter()
        .map_init(
            || vec![0.0f64; slots],
            |sum, i| {
                sum.iter_mut().for_each(|s| *s = 0.0);
                let xi = &xs[i * d..(i + 1) * d];
                for j in (0..n).filter(|&j| j != i) {
                    let xj = &xs[j * d..(j + 1) * d];
                    let mut s2 = 0.0f64;
                    for (a, b) in xi.iter().zip(xj) {
                        s2 += (a - b) * (a - b);
                    }
                    let dist = s2.sqrt();
                    for &slot in &at[j * t_count..(j + 1) * t_count] {
                        sum[slot as usize] += dist;
                    }
                }
                (0..t_count)
                    .map(|t| {
                        let range = offsets[t]..offsets[t] + ks[t];
                        let own = at[i * t_count + t] as usize - offsets[t];
                        let mut count = sizes[range.clone()].to_vec();
                        count[own] -= 1;
                        score(&sum[range], &count, own)
                    })
                    .collect()
            },
        )
        .collect();
    (0..t_count)
        .map(|t| per_point.iter().map(|p| p[t]).sum::<f64>() / n.max(1) as f64)
        .collect()
}

/// Fits `method` on `sample` with `k` units, or chooses K in 2…`max_k` (k-means by
/// silhouette, the mixture by BIC; DBSCAN finds its own number).
pub fn fit(
    sample: &Array2<f64>,
    method: Method,
    k: Option<usize>,
    max_k: usize,
    seed: u64,
) -> Result<Clustering, ClusterError> {
    let n = sample.nrows();
    if n == 0 {
        return Err(ClusterError::NoPoints);
    }
    if let Method::Dbscan { eps, min_points } = method {
        return Ok(Clustering {
            centroids: fit_dbscan(sample, eps, min_points)?,
            scores: Vec::new(),
            mixture: None,
        });
    }
    if let Some(k) = k {
        if k > n {
            return Err(ClusterError::TooManyUnits { k, points: n });
        }
        return Ok(match method {
            Method::GaussianMixture => {
                let (mix, _) = fit_mixture(sample, k, seed)?;
                Clustering {
                    centroids: mix.means.clone(),
                    scores: Vec::new(),
                    mixture: Some(mix),
                }
            }
            _ => Clustering {
                centroids: fit_k(sample, k, seed)?.0,
                scores: Vec::new(),
                mixture: None,
            },
        });
    }
    // Distinct points bound the useful K: identical pixels make one unit.
    let distinct = {
        let mut rows: Vec<Vec<u64>> = sample
            .outer_iter()
            .map(|r| r.iter().map(|v| v.to_bits()).collect())
            .collect();
        rows.sort();
        rows.dedup();
        rows.len()
    };
    if distinct < 2 {
        return Ok(Clustering {
            centroids: sample.slice(ndarray::s![0..1, ..]).to_owned(),
            scores: Vec::new(),
            mixture: None,
        });
    }
    let mut scores = Vec::new();
    if method == Method::GaussianMixture {
        let mut best: Option<(f64, Mixture)> = None;
        for k in 2..=max_k.min(distinct) {
            let (mix, bic) = fit_mixture(sample, k, seed)?;
            scores.push((k, bic));
            if best.as_ref().is_none_or(|(b, _)| bic < *b) {
                best = Some((bic, mix));
            }
        }
        let (_, mix) = best.expect("at least K = 2 was tried");
        return Ok(Clustering {
            centroids: mix.means.clone(),
            scores,
            mixture: Some(mix),
        });
    }
    let sil_idx = sample_indices(n, SILHOUETTE_POINTS, seed ^ 0x5117);
    let sil_points = sample.select(Axis(0), &sil_idx);
    let ks: Vec<usize> = (2..=max_k.min(distinct)).collect();
    let fits = ks
        .iter()
        .map(|&k| fit_k(sample, k, seed).map(|f| f.0))
        .collect::<Result<Vec<_>, _>>()?;
    let labellings: Vec<Vec<usize>> = fits.iter().map(|c| assign(c, sil_points.view())).collect();
    let sil = silhouettes(sil_points.view(), &labellings, &ks);
    let mut best: Option<(f64, Array2<f64>)> = None;
    for ((&k, s), centroids) in ks.iter().zip(sil).zip(fits) {
        scores.push((k, s));
        if best.as_ref().is_none_or(|(b, _)| s > *b) {
            best = Some((s, centroids));
        }
    }
    let (_, centroids) = best.expect("at least K = 2 was tried");
    Ok(Clustering {
        centroids,
        scores,
        mixture: None,
    })
}

/// Adjusted Rand index of two labellings (Hubert & Arabie 1985, J. Classification 2:193).
pub fn adjusted_rand_index(a: &[usize], b: &[usize]) -> f64 {
    use std::collections::HashMap;
    let n = a.len() as f64;
    let mut table: HashMap<(usize, usize), f64> = HashMap::new();
    let mut ra: HashMap<usize, f64> = HashMap::new();
    let mut rb: HashMap<usize, f64> = HashMap::new();
    for (&x, &y) in a.iter().zip(b) {
        *table.entry((x, y)).or_default() += 1.0;
        *ra.entry(x).or_default() += 1.0;
        *rb.entry(y).or_default() += 1.0;
    }
    let c2 = |v: f64| v * (v - 1.0) / 2.0;
    let index: f64 = table.values().map(|&v| c2(v)).sum();
    let sa: f64 = ra.values().map(|&v| c2(v)).sum();
    let sb: f64 = rb.values().map(|&v| c2(v)).sum();
    let expected = sa * sb / c2(n);
    let max = (sa + sb) / 2.0;
    if max == expected {
        return 1.0;
    }
    (index - expected) / (max - expected)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Mean silhouette of a labelling: for each point, (b − a) / max(a, b) with a the mean
    /// distance to its own cluster and b the smallest mean distance to another cluster.
    /// The reference form, one labelling at a time, that [`silhouettes`] (many labellings
    /// in one pass) is held to.
    fn silhouette(points: ArrayView2<f64>, labels: &[usize], k: usize) -> f64 {
        let n = points.nrows();
        let scores: Vec<f64> = (0..n)
            .into_par_iter()
            .map(|i| {
                let mut sum = vec![0.0; k];
                let mut count = vec![0usize; k];
                for j in 0..n {
                    if i == j {
                        continue;
                    }
                    let d: f64 = points
                        .row(i)
                        .iter()
                        .zip(points.row(j))
                        .map(|(a, b)| (a - b) * (a - b))
                        .sum::<f64>()
                        .sqrt();
                    sum[labels[j]] += d;
                    count[labels[j]] += 1;
                }
                score(&sum, &count, labels[i])
            })
            .collect();
        scores.iter().sum::<f64>() / n.max(1) as f64
    }

    #[test]
    fn adjusted_rand_index_of_the_textbook_example() {
        // scikit-learn's documented example (from memory): ARI([0,0,1,1], [0,0,1,2]) = 0.571…
        let v = adjusted_rand_index(&[0, 0, 1, 1], &[0, 0, 1, 2]);
        assert!((v - 0.5714285714).abs() < 1e-9, "{v}");
        // Identical partitions up to renaming score 1.
        assert!((adjusted_rand_index(&[0, 0, 1, 2], &[5, 5, 7, 9]) - 1.0).abs() < 1e-12);
    }

    #[test]
    fn silhouette_prefers_the_true_number_of_well_separated_groups() {
        let mut pts = Vec::new();
        for (cx, cy) in [(0.0, 0.0), (5.0, 0.0), (0.0, 5.0)] {
            for i in 0..20 {
                pts.push([cx + 0.01 * i as f64, cy - 0.01 * (i % 7) as f64]);
            }
        }
        let a = Array2::from_shape_fn((60, 2), |(i, j)| pts[i][j]);
        let c = fit(&a, Method::KMeans, None, 6, 1).unwrap();
        assert_eq!(c.centroids.nrows(), 3, "{:?}", c.scores);
    }

    #[test]
    fn silhouettes_in_one_pass_equal_the_reference_bit_for_bit() {
        use rand::Rng;
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let a = Array2::from_shape_fn((257, 5), |_| rng.gen::<f64>());
        let ks = [2usize, 3, 5, 9];
        let labellings: Vec<Vec<usize>> = ks
            .iter()
            .map(|&k| (0..257).map(|_| rng.gen_range(0..k)).collect())
            .collect();
        let fast = silhouettes(a.view(), &labellings, &ks);
        for ((&k, labels), f) in ks.iter().zip(&labellings).zip(&fast) {
            let reference = silhouette(a.view(), labels, k);
            assert_eq!(
                reference.to_bits(),
                f.to_bits(),
                "K = {k}: {reference} vs {f}"
            );
        }
    }

    #[test]
    fn more_units_than_points_is_refused() {
        let a = Array2::from_shape_fn((3, 2), |(i, j)| (i + j) as f64);
        assert!(matches!(
            fit(&a, Method::KMeans, Some(5), 8, 1),
            Err(ClusterError::TooManyUnits { .. })
        ));
    }

    #[test]
    fn the_mixture_and_dbscan_find_well_separated_groups() {
        let mut pts = Vec::new();
        for (g, (cx, cy)) in [(0.0, 0.0), (1.0, 0.0), (0.0, 1.0)].iter().enumerate() {
            for i in 0..40 {
                let t = i as f64 * 0.37 + g as f64;
                pts.push([cx + 0.02 * t.sin(), cy + 0.02 * (1.3 * t).cos()]);
            }
        }
        let a = Array2::from_shape_fn((120, 2), |(i, j)| pts[i][j]);
        let g = fit(&a, Method::GaussianMixture, None, 5, 1).unwrap();
        assert_eq!(g.centroids.nrows(), 3, "BIC per K: {:?}", g.scores);
        let d = fit(
            &a,
            Method::Dbscan {
                eps: 0.1,
                min_points: 4,
            },
            None,
            5,
            1,
        )
        .unwrap();
        assert_eq!(d.centroids.nrows(), 3);
        // Every point joins its own group's unit under both.
        for c in [&g, &d] {
            let units: Vec<usize> = (0..120)
                .map(|i| c.unit_of(&[a[(i, 0)], a[(i, 1)]]))
                .collect();
            for grp in 0..3 {
                assert!(units[grp * 40..(grp + 1) * 40]
                    .iter()
                    .all(|u| *u == units[grp * 40]));
            }
        }
    }

    #[test]
    fn identical_points_make_one_unit() {
        let a = Array2::from_elem((10, 3), 0.25);
        assert_eq!(
            fit(&a, Method::KMeans, None, 8, 1)
                .unwrap()
                .centroids
                .nrows(),
            1
        );
    }
}
