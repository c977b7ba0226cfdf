//! Per-band statistics over the pixels that hold data: minimum, median and maximum.
//! Pure computation; `inspect` formats the numbers.

use ndarray::{ArrayView2, ArrayView3, Axis};
use rayon::prelude::*;

/// Statistics of one band over valid pixels.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BandStats {
    pub min: f32,
    pub median: f32,
    pub max: f32,
}

/// Statistics of every band over the pixels where `valid` is true; `None` for every band
/// when no pixel is valid. The median of an even count is the mean of the middle two.
pub fn band_stats(data: ArrayView3<f32>, valid: ArrayView2<bool>) -> Vec<Option<BandStats>> {
    let bands = data.len_of(Axis(2));
    (0..bands)
        .into_par_iter()
        .map(|b| {
            let plane = data.index_axis(Axis(2), b);
            let mut values: Vec<f32> = plane
                .iter()
                .zip(valid.iter())
                .filter(|(_, ok)| **ok)
                .map(|(v, _)| *v)
                .collect();
            median_min_max(&mut values)
        })
        .collect()
}

fn median_min_max(values: &mut [f32]) -> Option<BandStats> {
    let n = values.len();
    if n == 0 {
        return None;
    }
    let min = values.iter().cloned().fold(f32::INFINITY, f32::min);
    let max = values.iter().cloned().fold(f32::NEG_INFINITY, f32::max);
    let mid = n / 2;
    let (lower, upper, _) = values.select_nth_unstable_by(mid, f32::total_cmp);
    let upper_mid = *upper;
    let median = if n % 2 == 1 {
        upper_mid
    } else {
        let lower_mid = lower.iter().cloned().fold(f32::NEG_INFINITY, f32::max);
        ((lower_mid as f64 + upper_mid as f64) / 2.0) as f32
    };
    Some(BandStats { min, median, max })
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{Array2, Array3};

    #[test]
    fn median_of_odd_and_even_counts() {
        let s = median_min_max(&mut [5.0, 1.0, 3.0]).unwrap();
        assert_eq!((s.min, s.median, s.max), (1.0, 3.0, 5.0));
        let s = median_min_max(&mut [4.0, 1.0, 3.0, 2.0]).unwrap();
        assert_eq!(s.median, 2.5);
        assert!(median_min_max(&mut []).is_none());
    }

    #[test]
    fn invalid_pixels_are_left_out() {
        let data =
            Array3::from_shape_vec((1, 3, 2), vec![1.0, 10.0, f32::NAN, 20.0, 3.0, 30.0]).unwrap();
        let valid = Array2::from_shape_vec((1, 3), vec![true, false, true]).unwrap();
        let s = band_stats(data.view(), valid.view());
        assert_eq!(s[0].unwrap().median, 2.0);
        assert_eq!(s[1].unwrap().max, 30.0);
    }
}
