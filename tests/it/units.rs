//! Surface units against outside references (the Iris data) and the demo truth.

use std::path::Path;

use ndarray::Array2;
use thiomap::cube::{Backplane, OpenOptions};
use thiomap::library::Library;
use thiomap::units::cluster::{adjusted_rand_index, assign, fit, Method};
use thiomap::units::{classify, MaterialSpectra, Rules, UnitParams};
use thiomap::unmix::{RunOptions, UnmixParams};

#[test]
fn k_means_on_iris_finds_the_classic_three_clusters() {
    // REFERENCES #19: Fisher's Iris data (UCI copy, shipped offline by linfa-datasets);
    // the k = 3 result is a textbook worked example (from memory): the cluster holding
    // sample 1 has centroid ≈ (5.006, 3.418, 1.464, 0.244), the setosa species exactly.
    let iris = linfa_datasets::iris();
    let x = iris.records().to_owned();
    let c = fit(&x, Method::KMeans, Some(3), 3, 7).unwrap();
    let labels = assign(&c.centroids, x.view());
    let first = c.centroids.row(labels[0]);
    for (got, want) in first.iter().zip([5.006, 3.418, 1.464, 0.244]) {
        assert!((got - want).abs() < 1e-3, "{first:?}");
    }
    let setosa = labels.iter().take(50).all(|l| *l == labels[0]);
    let others = labels.iter().skip(50).all(|l| *l != labels[0]);
    assert!(setosa && others, "setosa is one cluster on its own");
}

#[test]
fn k_means_agrees_with_linfa_clustering() {
    // linfa-clustering 0.8.1 (a general-purpose library from the registry) from the same
    // given centroids, on the Iris data (REFERENCES #19) and on 3,000 seeded Dirichlet(1)
    // abundance vectors. Its centroid update counts the old centroid as one more member
    // ("m_k-means"), so the two may settle in slightly different places; the labellings
    // must agree almost everywhere.
    use linfa::prelude::*;
    use linfa_clustering::{KMeans, KMeansInit};
    use rand::{Rng, SeedableRng};
    use thiomap::units::kmeans::lloyd;
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(4);
    let dirichlet =
        ndarray::Array2::from_shape_fn((3000, 6), |_| -rng.gen_range(1e-12f64..1.0).ln());
    let dirichlet = &dirichlet
        / &dirichlet
            .sum_axis(ndarray::Axis(1))
            .insert_axis(ndarray::Axis(1));
    for (x, k) in [
        (linfa_datasets::iris().records().to_owned(), 3),
        (dirichlet, 5),
    ] {
        let init = x.slice(ndarray::s![..k * 7;7, ..]).to_owned();
        let ours = lloyd(x.view(), &init, 300, 0.0);
        let theirs = KMeans::params(k)
            .init_method(KMeansInit::Precomputed(init.clone()))
            .n_runs(1)
            .max_n_iterations(300)
            .tolerance(1e-10)
            .fit(&DatasetBase::from(x.clone()))
            .unwrap();
        let a = assign(&ours.centroids, x.view());
        let b = theirs.predict(&x);
        let same = a.iter().zip(b.iter()).filter(|(p, q)| p == q).count();
        assert!(
            same as f64 >= 0.99 * x.nrows() as f64,
            "{same} of {}",
            x.nrows()
        );
        let diff = ours
            .centroids
            .iter()
            .zip(theirs.centroids().iter())
            .fold(0.0f64, |m, (p, q)| m.max((p - q).abs()));
        // At a fixed point linfa's centroid is its members' mean too: where every label
        // agrees the centroids agree to rounding, elsewhere to about one member's weight.
        let bound = if same == x.nrows() { 1e-9 } else { 0.01 };
        assert!(
            diff < bound,
            "centroids differ by {diff:e} ({same} labels agree)"
        );
        let rel = (ours.inertia - theirs.inertia()).abs() / theirs.inertia();
        assert!(
            rel < 0.01,
            "inertia {} vs {}",
            ours.inertia,
            theirs.inertia()
        );
    }
}

/// ARI of `thiomap`'s units against the truth on a demo globe: on core pixels with
/// incidence and emission below 70°, and on all unmixed pixels.
fn demo_ari(name: &str, unmix: &UnmixParams) -> (f64, f64, thiomap::units::UnitMap) {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("demo-cubes")
        .join(name);
    let mut cube = thiomap::cube::load(&path, &OpenOptions::default()).unwrap();
    let truth = thiomap::demo::files::TruthFiles::read(&path).unwrap();
    let lib = Library::embedded();
    let r = thiomap::library::resample::resample(&lib, &cube.info.bands).unwrap();
    // As `map` runs it, band weights included.
    let (model, opts) = super::support::as_map_runs(
        &mut cube,
        &r,
        unmix,
        RunOptions {
            report_shade: true,
            ..Default::default()
        },
    );
    let out =
        thiomap::unmix::unmix::<f32>(cube.data.view(), cube.valid.view(), &model, &opts, &|_| {});
    let spectra = MaterialSpectra::new(&lib, &out.ids);
    let map = classify(
        &out,
        thiomap::units::Geometry {
            emission: cube.backplanes.get(&Backplane::Emission),
            ..Default::default()
        },
        &spectra,
        &Rules::default_rules(),
        &lib,
        &UnitParams::default(),
    )
    .unwrap();
    let (inc, emi) = (
        &cube.backplanes[&Backplane::Incidence],
        &cube.backplanes[&Backplane::Emission],
    );
    let (mut t_core, mut m_core, mut t_all, mut m_all) = (vec![], vec![], vec![], vec![]);
    for ((r, c), l) in map.labels.indexed_iter() {
        if *l == 0 {
            continue;
        }
        t_all.push(truth.labels[(r, c)] as usize);
        m_all.push(*l as usize);
        if truth.core[(r, c)] && inc[(r, c)] < 70.0 && emi[(r, c)] < 70.0 {
            t_core.push(truth.labels[(r, c)] as usize);
            m_core.push(*l as usize);
        }
    }
    (
        adjusted_rand_index(&t_core, &m_core),
        adjusted_rand_index(&t_all, &m_all),
        map,
    )
}

#[test]
fn hyperspectral_globe_units_match_the_truth() {
    // Synthetic truth of our own scene (demo-cubes/brimveil-globe-mapper96).
    let (core, all, map) = demo_ari("brimveil-globe-mapper96.fits", &UnmixParams::default());
    eprintln!(
        "mapper-96 globe: ARI {core:.3} on core pixels, {all:.3} on all; units {:?}",
        map.units
            .iter()
            .map(|u| (&u.label, u.pixels))
            .collect::<Vec<_>>()
    );
    assert!(core >= 0.90, "ARI {core}");
    // No two units share a name in the legend.
    let mut labels: Vec<&String> = map.units.iter().map(|u| &u.label).collect();
    labels.sort();
    labels.dedup();
    assert_eq!(
        labels.len(),
        map.units.len(),
        "{:?}",
        map.units.iter().map(|u| &u.label).collect::<Vec<_>>()
    );
    // The three hot spots are unexplained, not forced into a unit.
    assert!(map.unexplained_pixels >= 3, "{}", map.unexplained_pixels);
}

#[test]
fn imager_globe_units_match_the_truth() {
    // Synthetic truth of our own scene (demo-cubes/brimveil-globe-imager7), subset mode.
    let (core, all, map) = demo_ari("brimveil-globe-imager7.fits", &UnmixParams::default());
    eprintln!(
        "imager-7 globe: ARI {core:.3} on core pixels, {all:.3} on all; units {:?}",
        map.units
            .iter()
            .map(|u| (&u.label, u.pixels))
            .collect::<Vec<_>>()
    );
    assert!(core >= 0.80, "ARI {core}");
}

/// An equirectangular grid of cell centres: `rows` × `cols` cells of `step` degrees from
/// (lat0, lon0) at the first cell's south-west corner; row 0 is the northernmost.
fn equirectangular(
    rows: usize,
    cols: usize,
    lat0: f64,
    lon0: f64,
    step: f64,
) -> (Array2<f32>, Array2<f32>) {
    let lat = Array2::from_shape_fn((rows, cols), |(r, _)| {
        (lat0 + (rows - 1 - r) as f64 * step + step / 2.0) as f32
    });
    let lon = Array2::from_shape_fn((rows, cols), |(_, c)| {
        (lon0 + c as f64 * step + step / 2.0) as f32
    });
    (lat, lon)
}

#[test]
fn cell_areas_of_a_global_map_add_up_to_the_sphere_and_to_each_latitude_band() {
    // A latitude–longitude cell has area R²Δλ(sin φ₂ − sin φ₁) (λ in radians) and the
    // sphere 4πR² (analytic): on the unit sphere, to 0.1 %.
    let (lat, lon) = equirectangular(180, 360, -90.0, -180.0, 1.0);
    let area = thiomap::units::area::cell_areas_sr(lat.view(), lon.view()).unwrap();
    let total: f64 = area.iter().sum();
    let sphere = 4.0 * std::f64::consts::PI;
    assert!(
        (total / sphere - 1.0).abs() < 1e-3,
        "{total} against {sphere}"
    );
    for (north, south) in [
        (90.0f64, 60.0f64),
        (60.0, 30.0),
        (10.0, -10.0),
        (-40.0, -70.0),
    ] {
        let rows = (90.0 - north) as usize..(90.0 - south) as usize;
        let band: f64 = area.slice(ndarray::s![rows, ..]).iter().sum();
        let want =
            2.0 * std::f64::consts::PI * (north.to_radians().sin() - south.to_radians().sin());
        assert!(
            (band / want - 1.0).abs() < 1e-3,
            "{north}..{south}: {band} against {want}"
        );
    }
}

#[test]
fn cell_areas_across_the_antimeridian_match_the_closed_form() {
    // A 10° × 20° patch straddling 180° of longitude, centres given in −180…180: each
    // cell's area R²Δλ(sin φ₂ − sin φ₁) (analytic), to 0.1 %.
    let (lat, mut lon) = equirectangular(10, 20, 30.0, 170.0, 1.0);
    lon.mapv_inplace(|v| if v > 180.0 { v - 360.0 } else { v });
    let area = thiomap::units::area::cell_areas_sr(lat.view(), lon.view()).unwrap();
    for ((r, c), a) in area.indexed_iter() {
        let south = 30.0 + (9 - r) as f64;
        let want =
            1f64.to_radians() * ((south + 1.0).to_radians().sin() - south.to_radians().sin());
        assert!(
            (a / want - 1.0).abs() < 1e-3,
            "cell ({r}, {c}): {a} against {want}"
        );
    }
}

#[test]
fn an_orthographic_globe_shows_a_cap_of_the_closed_form_area() {
    // An orthographic view of a sphere: the cells within emission angle e add up to the
    // cap 2πR²(1 − cos e) (analytic), here to 1 %; pixels off the disk have no latitude.
    let n = 400;
    let (mut lat, mut lon) = (
        Array2::<f32>::from_elem((n, n), f32::NAN),
        Array2::<f32>::from_elem((n, n), f32::NAN),
    );
    let mut emission = Array2::<f64>::from_elem((n, n), f64::NAN);
    for r in 0..n {
        for c in 0..n {
            let x = (c as f64 + 0.5) / n as f64 * 2.0 - 1.0;
            let y = 1.0 - (r as f64 + 0.5) / n as f64 * 2.0;
            let z2 = 1.0 - x * x - y * y;
            if z2 <= 0.0 {
                continue;
            }
            let z = z2.sqrt();
            lat[(r, c)] = y.asin().to_degrees() as f32;
            lon[(r, c)] = x.atan2(z).to_degrees() as f32;
            emission[(r, c)] = z.acos().to_degrees();
        }
    }
    let area = thiomap::units::area::cell_areas_sr(lat.view(), lon.view()).unwrap();
    for e in [30.0f64, 70.0] {
        let cap: f64 = area
            .iter()
            .zip(emission.iter())
            .filter(|(_, em)| **em <= e)
            .map(|(a, _)| a)
            .sum();
        let want = 2.0 * std::f64::consts::PI * (1.0 - e.to_radians().cos());
        assert!(
            (cap / want - 1.0).abs() < 1e-2,
            "e ≤ {e}°: {cap} against {want}"
        );
    }
    // Limb cells are clipped, never larger than the hemisphere allows, and off-disk
    // pixels have no area.
    let total: f64 = area.iter().filter(|a| a.is_finite()).sum();
    assert!(total <= 2.0 * std::f64::consts::PI * 1.001, "{total}");
    assert!(area[(0, 0)].is_nan());
}

#[test]
fn the_shipped_tile_weighs_its_cells_by_their_true_area() {
    // The demo tile is an equirectangular map with latitude and longitude backplanes:
    // each cell's area relative to the mean must follow R²Δλ(sin φ₂ − sin φ₁), which goes
    // as cos(latitude) (analytic), not 1/cos(emission); checked to 0.1 % on every cell.
    let cube = thiomap::cube::load(
        &Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-cubes/brimveil-tile-spectrometer24.fits"),
        &Default::default(),
    )
    .unwrap();
    let lat = &cube.backplanes[&Backplane::Latitude];
    let lon = &cube.backplanes[&Backplane::Longitude];
    let area = thiomap::units::area::cell_areas_sr(lat.view(), lon.view()).unwrap();
    let (rows, cols) = lat.dim();
    let dlat = (lat[(0, 0)] as f64 - lat[(1, 0)] as f64).abs();
    let dlon = (lon[(0, 1)] as f64 - lon[(0, 0)] as f64).abs();
    for r in 0..rows {
        for c in 0..cols {
            let phi = lat[(r, c)] as f64;
            let want = dlon.to_radians()
                * ((phi + dlat / 2.0).to_radians().sin() - (phi - dlat / 2.0).to_radians().sin());
            let got = area[(r, c)];
            assert!(
                (got / want - 1.0).abs() < 1e-3,
                "cell ({r}, {c}) at {phi}°: {got} against {want}"
            );
        }
    }
}
