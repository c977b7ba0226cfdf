//! The area on the body each pixel stands for, from the latitude and longitude of the
//! pixel centres: whatever the image's projection (a globe seen from afar, an
//! equirectangular map, anything else with those backplanes), a pixel's cell is the
//! spherical quadrilateral its four corners span, and its area is that of a unit sphere
//! (steradians; × R² for a body of radius R).
//!
//! - **Centres** become 3-D unit vectors, so the antimeridian and the poles need no
//!   special case.
//! - **Corners** are the normalised mean of the (up to four) centres around them. Along
//!   the image's edges the grid of centres is first extended by one row and one column on
//!   every side by linear extrapolation of the vectors (x₋₁ = 2x₀ − x₁), so edge cells keep
//!   their full size.
//! - **Limb** cells, where a centre next to a corner lies off the body (no latitude or
//!   longitude there), are **clipped**: that corner is the mean of the centres on the body
//!   only, so the cell shrinks towards the limb instead of reaching into space. A pixel
//!   with no latitude or longitude of its own has no area (NaN).
//! - **Cell area**: the quadrilateral as two spherical triangles, each from Van Oosterom &
//!   Strackee (1983, IEEE Trans. Biomed. Eng. 30:125): tan(E/2) = |a·(b×c)| /
//!   (1 + a·b + b·c + c·a).
//!
//! Checked against closed forms (`tests/it/units.rs`): a latitude–longitude cell has area
//! R²Δλ(sin φ₂ − sin φ₁) and the sphere 4πR²; an orthographic view of a globe shows
//! 2πR²(1 − cos e) within emission angle e.
//!
//! No I/O and no printing here.

use ndarray::{Array2, ArrayView2, Axis};
use rayon::prelude::*;

type V3 = [f64; 3];

fn unit_vector(lat_deg: f32, lon_deg: f32) -> Option<V3> {
    if !(lat_deg.is_finite() && lon_deg.is_finite()) {
        return None;
    }
    let (phi, lambda) = ((lat_deg as f64).to_radians(), (lon_deg as f64).to_radians());
    Some([
        phi.cos() * lambda.cos(),
        phi.cos() * lambda.sin(),
        phi.sin(),
    ])
}

fn add(a: V3, b: V3) -> V3 {
    [a[0] + b[0], a[1] + b[1], a[2] + b[2]]
}

fn dot(a: V3, b: V3) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}

fn cross(a: V3, b: V3) -> V3 {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}

fn normalised(v: V3) -> Option<V3> {
    let n = dot(v, v).sqrt();
    (n > 0.0 && n.is_finite()).then(|| [v[0] / n, v[1] / n, v[2] / n])
}

/// x₋₁ = 2x₀ − x₁, when both are known.
fn extrapolate(x0: Option<V3>, x1: Option<V3>) -> Option<V3> {
    let (a, b) = (x0?, x1?);
    Some([2.0 * a[0] - b[0], 2.0 * a[1] - b[1], 2.0 * a[2] - b[2]])
}

/// The solid angle of the spherical triangle a, b, c (unit vectors), steradians.
fn triangle(a: V3, b: V3, c: V3) -> f64 {
    let triple = dot(a, cross(b, c)).abs();
    let denominator = 1.0 + dot(a, b) + dot(b, c) + dot(c, a);
    2.0 * triple.atan2(denominator)
}

/// The solid angle of every pixel's cell (steradians: the area on a sphere of radius 1),
/// NaN where a pixel has no latitude or longitude. `None` when the image is a single row
/// or column, which spans no cell.
pub fn cell_areas_sr(lat_deg: ArrayView2<f32>, lon_deg: ArrayView2<f32>) -> Option<Array2<f64>> {
    let (rows, cols) = lat_deg.dim();
    if rows < 2 || cols < 2 || lon_deg.dim() != (rows, cols) {
        return None;
    }
    // Centres on a grid extended by one on every side: rows first, then columns (which
    // also fills the extended grid's corners).
    // Every step is per pixel or per corner, so rows run in parallel (the same numbers
    // as one by one).
    let mut grid = vec![None; (rows + 2) * (cols + 2)];
    let at = |r: usize, c: usize| r * (cols + 2) + c;
    grid.par_chunks_mut(cols + 2)
        .enumerate()
        .skip(1)
        .take(rows)
        .for_each(|(er, line)| {
            for c in 0..cols {
                line[c + 1] = unit_vector(lat_deg[(er - 1, c)], lon_deg[(er - 1, c)]);
            }
        });
    for c in 1..=cols {
        grid[at(0, c)] = extrapolate(grid[at(1, c)], grid[at(2, c)]);
        grid[at(rows + 1, c)] = extrapolate(grid[at(rows, c)], grid[at(rows - 1, c)]);
    }
    for r in 0..rows + 2 {
        grid[at(r, 0)] = extrapolate(grid[at(r, 1)], grid[at(r, 2)]);
        grid[at(r, cols + 1)] = extrapolate(grid[at(r, cols)], grid[at(r, cols - 1)]);
    }
    // Corner (i, j) lies between extended centres (i, j), (i + 1, j), (i, j + 1), (i + 1,
    // j + 1); pixel (r, c)'s corners are (r, c), (r, c + 1), (r + 1, c + 1), (r + 1, c).
    let corner = |i: usize, j: usize| -> Option<V3> {
        let around = [at(i, j), at(i + 1, j), at(i, j + 1), at(i + 1, j + 1)];
        let sum = around.iter().filter_map(|&k| grid[k]).reduce(add)?;
        normalised(sum)
    };
    let corners: Vec<Option<V3>> = (0..(rows + 1) * (cols + 1))
        .into_par_iter()
        .map(|n| corner(n / (cols + 1), n % (cols + 1)))
        .collect();
    let k = |i: usize, j: usize| corners[i * (cols + 1) + j];
    let mut areas = Array2::<f64>::zeros((rows, cols));
    areas
        .axis_iter_mut(Axis(0))
        .into_par_iter()
        .enumerate()
        .for_each(|(r, mut line)| {
            for (c, v) in line.iter_mut().enumerate() {
                *v = if grid[at(r + 1, c + 1)].is_none() {
                    f64::NAN
                } else {
                    match (k(r, c), k(r, c + 1), k(r + 1, c + 1), k(r + 1, c)) {
                        (Some(a), Some(b), Some(cc), Some(d)) => {
                            triangle(a, b, cc) + triangle(a, cc, d)
                        }
                        _ => f64::NAN,
                    }
                };
            }
        });
    Some(areas)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_octant_triangle_is_an_eighth_of_the_sphere() {
        // Three orthogonal unit vectors span one octant: 4π / 8 (analytic).
        let e = triangle([1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]);
        assert!((e - std::f64::consts::PI / 2.0).abs() < 1e-12, "{e}");
    }

    #[test]
    fn a_single_row_spans_no_cell() {
        let lat = Array2::<f32>::zeros((1, 5));
        assert!(cell_areas_sr(lat.view(), lat.view()).is_none());
    }
}
