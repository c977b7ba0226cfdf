//! Clustering abundance vectors into surface units with linfa-clustering's k-means
//! (Lloyd's algorithm, k-means++ initialisation), fitted on a seeded sample and applied to
//! every pixel, so the cost grows linearly with the cube.
//!
//! The number of units, when not given, is the K in 2…`max_k` with the highest mean
//! silhouette (Rousseeuw 1987, J. Comput. Appl. Math. 20:53) on at most
//! [`SILHOUETTE_POINTS`] sampled pixels: the silhouette costs grow with the square of the
//! points, so it is never computed on the whole cube.

use linfa::prelude::*;
use linfa_clustering::KMeans;
use ndarray::{Array1, Array2, ArrayView2, Axis};
use rand::seq::index::sample;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

/// Pixels the silhouette is computed on, at most.
pub const SILHOUETTE_POINTS: usize = 3000;
/// k-means runs (different seeded initialisations) per K; the lowest inertia wins.
pub const RUNS: usize = 3;

/// Why clustering failed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ClusterError {
    #[error("--units {k}: more units than the {points} pixels that can be clustered")]
    TooManyUnits { k: usize, points: usize },
    #[error("no pixel could be clustered (every pixel is no-data or unexplained)")]
    NoPoints,
    #[error("k-means failed: {0}")]
    KMeans(String),
}

/// A fitted clustering: centroids (K × features) and the chosen K's silhouette.
#[derive(Debug, Clone)]
pub struct Clustering {
    pub centroids: Array2<f64>,
    /// Mean silhouette per K tried (K, score), when K was chosen automatically.
    pub scores: Vec<(usize, f64)>,
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
    let data = DatasetBase::from(points.clone());
    let model = KMeans::params_with_rng(k, ChaCha8Rng::seed_from_u64(seed))
        .n_runs(RUNS)
        .max_n_iterations(300)
        .tolerance(1e-7)
        .fit(&data)
        .map_err(|e| ClusterError::KMeans(e.to_string()))?;
    Ok((model.centroids().clone(), model.inertia()))
}

/// Index of the nearest centroid (squared Euclidean distance).
pub fn nearest(centroids: &Array2<f64>, x: &[f64]) -> usize {
    let mut best = (f64::INFINITY, 0);
    for (k, c) in centroids.outer_iter().enumerate() {
        let d: f64 = c.iter().zip(x).map(|(a, b)| (a - b) * (a - b)).sum();
        if d < best.0 {
            best = (d, k);
        }
    }
    best.1
}

/// Assigns every row of `points` to its nearest centroid (in parallel).
pub fn assign(centroids: &Array2<f64>, points: ArrayView2<f64>) -> Array1<usize> {
    let v: Vec<usize> = points
        .axis_iter(Axis(0))
        .into_par_iter()
        .map(|row| nearest(centroids, row.as_slice().expect("rows are contiguous")))
        .collect();
    Array1::from(v)
}

/// Mean silhouette of a labelling: for each point, (b − a) / max(a, b) with a the mean
/// distance to its own cluster and b the smallest mean distance to another cluster.
pub fn silhouette(points: ArrayView2<f64>, labels: &[usize], k: usize) -> f64 {
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
            let own = labels[i];
            if count[own] == 0 {
                return 0.0;
            }
            let a = sum[own] / count[own] as f64;
            let b = (0..k)
                .filter(|&c| c != own && count[c] > 0)
                .map(|c| sum[c] / count[c] as f64)
                .fold(f64::INFINITY, f64::min);
            if !b.is_finite() || a.max(b) == 0.0 {
                0.0
            } else {
                (b - a) / a.max(b)
            }
        })
        .collect();
    scores.iter().sum::<f64>() / n.max(1) as f64
}

/// Fits k-means on `sample` with `k` units, or chooses K in 2…`max_k` by silhouette.
pub fn fit(
    sample: &Array2<f64>,
    k: Option<usize>,
    max_k: usize,
    seed: u64,
) -> Result<Clustering, ClusterError> {
    let n = sample.nrows();
    if n == 0 {
        return Err(ClusterError::NoPoints);
    }
    if let Some(k) = k {
        if k > n {
            return Err(ClusterError::TooManyUnits { k, points: n });
        }
        let (centroids, _) = fit_k(sample, k, seed)?;
        return Ok(Clustering {
            centroids,
            scores: Vec::new(),
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
        });
    }
    let sil_idx = sample_indices(n, SILHOUETTE_POINTS, seed ^ 0x5117);
    let sil_points = sample.select(Axis(0), &sil_idx);
    let mut best: Option<(f64, Array2<f64>)> = None;
    let mut scores = Vec::new();
    for k in 2..=max_k.min(distinct) {
        let (centroids, _) = fit_k(sample, k, seed)?;
        let labels = assign(&centroids, sil_points.view());
        let s = silhouette(sil_points.view(), labels.as_slice().expect("contiguous"), k);
        scores.push((k, s));
        if best.as_ref().is_none_or(|(b, _)| s > *b) {
            best = Some((s, centroids));
        }
    }
    let (_, centroids) = best.expect("at least K = 2 was tried");
    Ok(Clustering { centroids, scores })
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
        let c = fit(&a, None, 6, 1).unwrap();
        assert_eq!(c.centroids.nrows(), 3, "{:?}", c.scores);
    }

    #[test]
    fn more_units_than_points_is_refused() {
        let a = Array2::from_shape_fn((3, 2), |(i, j)| (i + j) as f64);
        assert!(matches!(
            fit(&a, Some(5), 8, 1),
            Err(ClusterError::TooManyUnits { .. })
        ));
    }

    #[test]
    fn identical_points_make_one_unit() {
        let a = Array2::from_elem((10, 3), 0.25);
        assert_eq!(fit(&a, None, 8, 1).unwrap().centroids.nrows(), 1);
    }
}
