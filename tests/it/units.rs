//! Surface units against outside references (the Iris data) and the demo truth.

use thiomap::cube::{Backplane, OpenOptions};
use thiomap::library::Library;
use thiomap::units::cluster::{adjusted_rand_index, assign, fit, Method};
use thiomap::units::{classify, MaterialSpectra, Rules, UnitParams};
use thiomap::unmix::{Model, RunOptions, UnmixParams};

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
    let cube = thiomap::cube::load(&path, &OpenOptions::default()).unwrap();
    let truth = thiomap::demo::files::TruthFiles::read(&path).unwrap();
    let lib = Library::embedded();
    let r = thiomap::library::resample::resample(&lib, &cube.info.bands).unwrap();
    let model = Model::build(&r, unmix).unwrap();
    let opts = RunOptions {
        report_shade: true,
        noise: None,
        residuals: false,
    };
    let out =
        thiomap::unmix::unmix::<f32>(cube.data.view(), cube.valid.view(), &model, &opts, &|_| {});
    let spectra = MaterialSpectra::new(&lib, &out.ids);
    let map = classify(
        &out,
        cube.backplanes.get(&Backplane::Emission),
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
