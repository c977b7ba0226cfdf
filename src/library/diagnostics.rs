//! Can a band set tell the library's members apart? The condition number of the
//! resampled matrix with a sum-to-one row, the closest member pairs by spectral angle,
//! and the groups of members the bands cannot separate.
//!
//! - Spectral angle θ = arccos(t·r / (‖t‖‖r‖)) (Kruse et al. 1993, Remote Sens. Environ.
//!   44:145), computed on the resampled spectra.
//! - Condition number: the 2-norm κ = σ_max / σ_min of E with an unweighted row of ones
//!   appended (the sum-to-one constraint), from nalgebra's SVD; infinite when there are
//!   more members than rows or the matrix is rank-deficient.
//! - Groups (a fixed rule, so results are comparable): two members are grouped when their
//!   resampled spectra lie within the group angle (1° by default), applied transitively,
//!   and only members of the same class are ever grouped. A group's id is its member ids
//!   joined with `+` in library order.

use ndarray::Array2;

use super::resample::Resampled;
use super::Class;

/// The default angle under which two members of one class are grouped, degrees.
pub const DEFAULT_GROUP_ANGLE_DEG: f64 = 1.0;

/// θ = arccos(a·b / (‖a‖‖b‖)), radians; π/2 when either vector is zero.
pub fn spectral_angle(a: &[f64], b: &[f64]) -> f64 {
    let dot: f64 = a.iter().zip(b).map(|(x, y)| x * y).sum();
    let na = a.iter().map(|x| x * x).sum::<f64>().sqrt();
    let nb = b.iter().map(|x| x * x).sum::<f64>().sqrt();
    if na == 0.0 || nb == 0.0 {
        return std::f64::consts::FRAC_PI_2;
    }
    (dot / (na * nb)).clamp(-1.0, 1.0).acos()
}

/// The 2-norm condition number σ_max / σ_min; infinite for fewer rows than columns or a
/// singular matrix.
pub fn condition_number(m: &Array2<f64>) -> f64 {
    let (rows, cols) = m.dim();
    if rows < cols || cols == 0 {
        return f64::INFINITY;
    }
    let na = nalgebra::DMatrix::from_fn(rows, cols, |i, j| m[(i, j)]);
    let sv = na.singular_values();
    let max = sv.iter().cloned().fold(0.0, f64::max);
    let min = sv.iter().cloned().fold(f64::INFINITY, f64::min);
    if min <= max * f64::EPSILON * rows.max(cols) as f64 {
        f64::INFINITY
    } else {
        max / min
    }
}

/// E with a row of ones appended.
pub fn with_sum_row(e: &Array2<f64>) -> Array2<f64> {
    let (b, m) = e.dim();
    let mut out = Array2::<f64>::ones((b + 1, m));
    out.slice_mut(ndarray::s![..b, ..]).assign(e);
    out
}

/// E with a shade column (zero reflectance) appended.
pub fn with_shade(e: &Array2<f64>) -> Array2<f64> {
    let (b, m) = e.dim();
    let mut out = Array2::<f64>::zeros((b, m + 1));
    out.slice_mut(ndarray::s![.., ..m]).assign(e);
    out
}

/// Two members and the angle between their resampled spectra.
#[derive(Debug, Clone, PartialEq)]
pub struct Pair {
    pub a: String,
    pub b: String,
    pub angle_deg: f64,
    pub same_class: bool,
}

/// Members the band set cannot separate, reported as one.
#[derive(Debug, Clone, PartialEq)]
pub struct Group {
    /// Member ids joined with `+`, in library order.
    pub id: String,
    pub members: Vec<String>,
    /// Indices of the members in the library.
    pub indices: Vec<usize>,
    pub class: Class,
}

/// The diagnosis of a library against a band set.
#[derive(Debug, Clone, PartialEq)]
pub struct Diagnosis {
    pub bands: usize,
    pub members: usize,
    /// κ of E with the sum-to-one row.
    pub condition: f64,
    /// κ of [E, shade] with the sum-to-one row.
    pub condition_with_shade: f64,
    /// Every pair, closest first.
    pub pairs: Vec<Pair>,
    pub group_angle_deg: f64,
    pub groups: Vec<Group>,
}

/// Diagnoses a resampled library; `group_angle_deg` is the grouping threshold.
pub fn diagnose(r: &Resampled, group_angle_deg: f64) -> Diagnosis {
    let e = &r.matrix;
    let m = e.ncols();
    let cols: Vec<Vec<f64>> = (0..m).map(|j| e.column(j).to_vec()).collect();
    let mut pairs = Vec::new();
    let mut parent: Vec<usize> = (0..m).collect();
    fn root(p: &mut [usize], mut i: usize) -> usize {
        while p[i] != i {
            p[i] = p[p[i]];
            i = p[i];
        }
        i
    }
    for i in 0..m {
        for j in i + 1..m {
            let angle_deg = spectral_angle(&cols[i], &cols[j]).to_degrees();
            let same_class = r.classes[i] == r.classes[j];
            if same_class && angle_deg < group_angle_deg {
                let (ri, rj) = (root(&mut parent, i), root(&mut parent, j));
                parent[ri.max(rj)] = ri.min(rj);
            }
            pairs.push(Pair {
                a: r.ids[i].clone(),
                b: r.ids[j].clone(),
                angle_deg,
                same_class,
            });
        }
    }
    pairs.sort_by(|x, y| x.angle_deg.total_cmp(&y.angle_deg));
    let mut groups = Vec::new();
    for i in 0..m {
        if root(&mut parent, i) != i {
            continue;
        }
        let indices: Vec<usize> = (0..m).filter(|&j| root(&mut parent, j) == i).collect();
        if indices.len() > 1 {
            let members: Vec<String> = indices.iter().map(|&j| r.ids[j].clone()).collect();
            groups.push(Group {
                id: members.join("+"),
                members,
                indices,
                class: r.classes[i],
            });
        }
    }
    Diagnosis {
        bands: e.nrows(),
        members: m,
        condition: condition_number(&with_sum_row(e)),
        condition_with_shade: condition_number(&with_sum_row(&with_shade(e))),
        pairs,
        group_angle_deg,
        groups,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn spectral_angles_match_the_reference_values() {
        // REFERENCES #10 (computed; Kruse et al. 1993 definition)
        assert!(
            (spectral_angle(&[1.0, 0.0], &[1.0, 1.0]) - std::f64::consts::FRAC_PI_4).abs() < 1e-6
        );
        assert!(spectral_angle(&[0.2, 0.5, 0.7], &[0.4, 1.0, 1.4]).abs() < 1e-6);
        let t = spectral_angle(&[0.1, 0.3, 0.5, 0.4], &[0.2, 0.2, 0.4, 0.6]);
        assert!((t - 0.348072).abs() < 1e-6, "{t}");
    }

    #[test]
    fn condition_number_of_a_diagonal_matrix_is_its_ratio() {
        // Common practice: κ₂ of diag(d) is max|d| / min|d|.
        let m = array![[4.0, 0.0], [0.0, 0.5], [0.0, 0.0]];
        assert!((condition_number(&m) - 8.0).abs() < 1e-9);
        assert!(condition_number(&array![[1.0, 2.0, 3.0]]).is_infinite());
        assert!(condition_number(&array![[1.0, 2.0], [2.0, 4.0]]).is_infinite());
    }

    fn resampled(cols: Vec<Vec<f64>>, classes: Vec<Class>) -> Resampled {
        let b = cols[0].len();
        let m = cols.len();
        Resampled {
            ids: (0..m).map(|i| format!("m{i}")).collect(),
            classes,
            centres_um: (0..b).map(|i| 0.5 + 0.1 * i as f64).collect(),
            matrix: Array2::from_shape_fn((b, m), |(i, j)| cols[j][i]),
        }
    }

    #[test]
    fn grouping_is_transitive_and_never_crosses_classes() {
        // m0–m1 and m1–m2 are each 0.6° apart (m0–m2 1.2°): one group of three.
        let v = |deg: f64| {
            let t = deg.to_radians();
            vec![t.cos(), t.sin(), 0.3]
        };
        let r = resampled(
            vec![v(0.0), v(0.75), v(1.5), v(0.1), v(40.0)],
            vec![
                Class::SulfurAllotrope,
                Class::SulfurAllotrope,
                Class::SulfurAllotrope,
                Class::Silicate,
                Class::SulfurAllotrope,
            ],
        );
        let d = diagnose(&r, DEFAULT_GROUP_ANGLE_DEG);
        assert_eq!(d.groups.len(), 1);
        assert_eq!(d.groups[0].id, "m0+m1+m2");
        // m3 is within 1° of m0 but of another class: never grouped.
        assert!(d
            .pairs
            .iter()
            .any(|p| p.a == "m0" && p.b == "m3" && p.angle_deg < 1.0));
        assert!(d.pairs.windows(2).all(|w| w[0].angle_deg <= w[1].angle_deg));
    }
}
