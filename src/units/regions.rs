//! Connected regions of a unit map (8-connected) and the minimum mapping unit: regions
//! smaller than it are merged into the most similar neighbouring unit (nearest centroid
//! in feature space), smallest first, until none is left or none can merge.

use ndarray::Array2;

/// 8-connected regions of non-zero labels: a region id per pixel (0 = none) and each
/// region's (label, size); region ids count from 1, in the raster order of each region's
/// first pixel. A flood fill over flat slices with an explicit stack (the order a region
/// is filled in does not change its pixels, its id or its size).
pub fn regions(labels: &Array2<i16>) -> (Array2<u32>, Vec<(i16, usize)>) {
    let (rows, cols) = labels.dim();
    let flat = labels.as_standard_layout();
    let l = flat.as_slice().expect("standard layout");
    let mut id = vec![0u32; rows * cols];
    let mut info = Vec::new();
    let mut stack: Vec<usize> = Vec::new();
    for start in 0..rows * cols {
        let label = l[start];
        if label == 0 || id[start] != 0 {
            continue;
        }
        let rid = info.len() as u32 + 1;
        let mut size = 0;
        id[start] = rid;
        stack.push(start);
        while let Some(k) = stack.pop() {
            size += 1;
            let (y, x) = (k / cols, k % cols);
            let (y0, y1) = (y.saturating_sub(1), (y + 1).min(rows - 1));
            let (x0, x1) = (x.saturating_sub(1), (x + 1).min(cols - 1));
            for ny in y0..=y1 {
                let row = ny * cols;
                for nk in row + x0..=row + x1 {
                    if l[nk] == label && id[nk] == 0 {
                        id[nk] = rid;
                        stack.push(nk);
                    }
                }
            }
        }
        info.push((label, size));
    }
    (
        Array2::from_shape_vec((rows, cols), id).expect("rows × cols"),
        info,
    )
}

/// Merges regions smaller than `min_area` pixels into their most similar neighbouring
/// unit. `distance(a, b)` compares units; `keep` labels are never merged nor merged into
/// (unexplained pixels). Returns the region counts before and after.
pub fn merge_small(
    labels: &mut Array2<i16>,
    min_area: usize,
    keep: i16,
    distance: impl Fn(i16, i16) -> f64,
) -> (usize, usize) {
    let (mut ids, mut info) = regions(labels);
    let before_count = info.len();
    if min_area <= 1 {
        return (before_count, before_count);
    }
    let (rows, cols) = labels.dim();
    // `ids` and `info` always describe `labels` as they stand: computed once before the
    // first round and once after each round that merged something.
    for _round in 0..16 {
        let mut order: Vec<usize> = (0..info.len())
            .filter(|&i| info[i].1 < min_area && info[i].0 != keep)
            .collect();
        if order.is_empty() {
            break;
        }
        order.sort_by_key(|&i| (info[i].1, i));
        let mut changed = false;
        // Each region's pixels, gathered once per round.
        let mut members: Vec<Vec<(usize, usize)>> = vec![Vec::new(); info.len()];
        for ((r, c), rid) in ids.indexed_iter() {
            if *rid != 0 && info[*rid as usize - 1].1 < min_area {
                members[*rid as usize - 1].push((r, c));
            }
        }
        for i in order {
            let own = info[i].0;
            // Neighbouring units of this region (as they stand after earlier merges).
            let mut neighbours: Vec<i16> = Vec::new();
            for &(r, c) in &members[i] {
                for dy in -1i64..=1 {
                    for dx in -1i64..=1 {
                        let (ny, nx) = (r as i64 + dy, c as i64 + dx);
                        if ny < 0 || nx < 0 || ny >= rows as i64 || nx >= cols as i64 {
                            continue;
                        }
                        let l = labels[(ny as usize, nx as usize)];
                        if l != 0 && l != own && l != keep && !neighbours.contains(&l) {
                            neighbours.push(l);
                        }
                    }
                }
            }
            let Some(&target) = neighbours.iter().min_by(|a, b| {
                distance(own, **a)
                    .total_cmp(&distance(own, **b))
                    .then(a.cmp(b))
            }) else {
                continue;
            };
            for &(r, c) in &members[i] {
                labels[(r, c)] = target;
            }
            changed = true;
        }
        if !changed {
            break;
        }
        (ids, info) = regions(labels);
    }
    (before_count, info.len())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn diagonal_neighbours_connect() {
        let l = Array2::from_shape_vec((3, 3), vec![1, 0, 0, 0, 1, 0, 0, 0, 2]).unwrap();
        let (_, info) = regions(&l);
        assert_eq!(info, vec![(1, 2), (2, 1)]);
    }

    #[test]
    fn specks_merge_into_the_most_similar_neighbour() {
        // A 1-pixel speck of unit 3 inside unit 1, touching unit 2: 3 is closer to 2.
        let mut l =
            Array2::from_shape_vec((3, 4), vec![1, 1, 2, 2, 1, 3, 2, 2, 1, 1, 2, 2]).unwrap();
        let dist = |a: i16, b: i16| ((a - b) as f64).abs();
        let (before, after) = merge_small(&mut l, 2, 9, dist);
        assert_eq!((before, after), (3, 2));
        assert_eq!(l[(1, 1)], 2);
    }

    #[test]
    fn kept_labels_are_never_merged() {
        let mut l = Array2::from_shape_vec((2, 3), vec![1, 9, 1, 1, 1, 1]).unwrap();
        merge_small(&mut l, 3, 9, |a, b| ((a - b) as f64).abs());
        assert_eq!(l[(0, 1)], 9);
    }
}
