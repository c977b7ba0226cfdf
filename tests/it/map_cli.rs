//! `thiomap map`, the main job, as a user meets it.

use std::path::{Path, PathBuf};

use super::support::{f32_fits, stderr, thiomap};

pub(super) fn demo_cube(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("demo-cubes")
        .join(name)
}

pub(super) fn map(cube: &Path, out: &Path, extra: &[&str]) -> std::process::Output {
    let mut args = vec![
        "map",
        cube.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    thiomap(&args)
}

#[test]
fn map_writes_the_whole_results_folder() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("r");
    let run = map(&demo_cube("brimveil-globe-mapper96.fits"), &out, &[]);
    assert!(run.status.success(), "{}", stderr(&run));
    for f in [
        "abundance.fits",
        "stderr.fits",
        "fit-rmse.fits",
        "fit-rmse.png",
        "units.fits",
        "units.png",
        "units-legend.svg",
        "true-colour.png",
        "units.csv",
        "units-spectra.svg",
        "summary.json",
        "run.json",
        "timings.json",
    ] {
        assert!(out.join(f).is_file(), "{f} missing");
    }
    let summary: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("summary.json")).unwrap()).unwrap();
    let units = summary["units"].as_array().unwrap();
    assert!(units.len() >= 5, "{units:?}");
    let classes = summary["classes"].as_object().unwrap();
    for c in [
        "yellow-sulfur",
        "so2-rich",
        "red-deposit",
        "dark-silicate",
        "unexplained",
    ] {
        assert!(classes.contains_key(c), "class {c} missing: {classes:?}");
    }
    let total: f64 = classes.values().map(|v| v.as_f64().unwrap()).sum();
    assert!((total - 1.0).abs() < 1e-9, "area fractions sum to {total}");
    // The demo globe has latitude and longitude backplanes: areas are spherical cells.
    assert_eq!(
        summary["area_weighting"],
        "surface area: the spherical cell of each pixel, from the latitude and longitude backplanes"
    );
    // units.csv columns as the results-folder contract lists them.
    let csv = std::fs::read_to_string(out.join("units.csv")).unwrap();
    let header: Vec<&str> = csv.lines().next().unwrap().split(',').collect();
    assert_eq!(
        &header[..5],
        &["unit", "label", "class", "pixels", "area_fraction"]
    );
    // The two frost members differ mostly beyond 3 µm, where this cube's detector noise
    // is largest, so the weighted bands report them as one group.
    assert!(
        header.contains(&"mean_so2-frost-fine+so2-frost-coarse")
            && header.contains(&"std_basalt-dark"),
        "{header:?}"
    );
    assert_eq!(&header[header.len() - 2..], &["mean_rmse", "colour"]);
    // units.fits: int16, 0 = no data.
    let src = thiomap::fits::Source::open(&out.join("units.fits")).unwrap();
    let hdus = thiomap::fits::scan(&src).unwrap();
    assert_eq!(hdus[0].header.i64("BITPIX"), Some(16));
    let record: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("run.json")).unwrap()).unwrap();
    assert_eq!(record["command"], "map");
    assert_eq!(record["recipe"]["units"], "auto");
}

#[test]
fn the_same_seed_gives_the_same_map_whatever_the_threads() {
    let dir = tempfile::tempdir().unwrap();
    let cube = demo_cube("brimveil-tile-spectrometer24.fits");
    let (a, b) = (dir.path().join("a"), dir.path().join("b"));
    assert!(map(&cube, &a, &["--threads", "1", "--seed", "3"])
        .status
        .success());
    assert!(map(&cube, &b, &["--threads", "2", "--seed", "3"])
        .status
        .success());
    for f in [
        "units.fits",
        "units.csv",
        "units.png",
        "summary.json",
        "run.json",
    ] {
        assert_eq!(
            std::fs::read(a.join(f)).unwrap(),
            std::fs::read(b.join(f)).unwrap(),
            "{f}"
        );
    }
}

#[test]
fn more_units_than_pixels_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("tiny.fits");
    let s: Vec<f32> = (0..3 * 2 * 12).map(|i| 0.2 + 0.001 * i as f32).collect();
    std::fs::write(&p, f32_fits([3, 2, 12], &s, &[])).unwrap();
    let run = map(
        &p,
        &dir.path().join("r"),
        &["--units", "50", "--subset", "2"],
    );
    let err = stderr(&run);
    assert_eq!(run.status.code(), Some(2), "{err}");
    assert!(err.contains("more units than"), "{err}");
}

#[test]
fn identical_pixels_make_a_single_unit_with_a_warning() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("flat.fits");
    std::fs::write(&p, f32_fits([6, 5, 12], &vec![0.3; 6 * 5 * 12], &[])).unwrap();
    let out = dir.path().join("r");
    let run = map(&p, &out, &["--subset", "2"]);
    assert!(run.status.success(), "{}", stderr(&run));
    assert!(stderr(&run).contains("single unit"), "{}", stderr(&run));
    let summary: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("summary.json")).unwrap()).unwrap();
    assert_eq!(summary["units"].as_array().unwrap().len(), 1);
}

#[test]
fn a_bad_rules_file_is_refused_before_any_work() {
    let dir = tempfile::tempdir().unwrap();
    let rules = dir.path().join("rules.toml");
    std::fs::write(&rules, "[[rule]]\nclass = \"x\"\nlabel = \"x\"\nmember = \"a\"\nlibrary_class = \"silicate\"\nat_least = 0.5\n").unwrap();
    let out = dir.path().join("r");
    let run = map(
        &demo_cube("brimveil-tile-spectrometer24.fits"),
        &out,
        &["--rules", rules.to_str().unwrap()],
    );
    let err = stderr(&run);
    assert_eq!(run.status.code(), Some(2), "{err}");
    assert!(
        err.contains("rules.toml: rule 1") && err.contains("exactly one"),
        "{err}"
    );
    assert!(!out.exists(), "nothing may be written");
}

#[test]
fn optional_features_and_methods_are_recorded_in_the_recipe() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("r");
    let run = map(
        &demo_cube("brimveil-tile-spectrometer24.fits"),
        &out,
        &["--with-albedo", "--method", "gmm", "--units", "4"],
    );
    assert!(run.status.success(), "{}", stderr(&run));
    let record: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("run.json")).unwrap()).unwrap();
    assert_eq!(record["recipe"]["albedo_feature"], true);
    assert_eq!(record["recipe"]["method"], "gmm");
    assert_eq!(record["recipe"]["units"], 4);
    let run = map(
        &demo_cube("brimveil-tile-spectrometer24.fits"),
        &dir.path().join("x"),
        &["--method", "dbscan", "--eps", "0"],
    );
    assert_eq!(run.status.code(), Some(2));
    assert!(stderr(&run).contains("eps > 0"), "{}", stderr(&run));
}

#[test]
fn a_body_radius_gives_unit_areas_in_square_kilometres() {
    // The visible disk of a globe is at most a hemisphere, 2πR² (analytic); the units'
    // km² add up to the total and follow their fractions.
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("r");
    let cube = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-cubes/brimveil-globe-imager7.fits");
    let radius = 1000.0f64;
    let run = thiomap(&[
        "map",
        cube.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--body-radius",
        "1000",
    ]);
    assert_eq!(run.status.code(), Some(0), "{}", stderr(&run));
    let summary: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("summary.json")).unwrap()).unwrap();
    let total = summary["total_area_km2"].as_f64().unwrap();
    let hemisphere = 2.0 * std::f64::consts::PI * radius * radius;
    assert!(
        total > 0.2 * hemisphere && total <= hemisphere * 1.001,
        "{total} km²"
    );
    let mut sum = 0.0;
    for u in summary["units"].as_array().unwrap() {
        let (km2, fraction) = (
            u["area_km2"].as_f64().unwrap(),
            u["area_fraction"].as_f64().unwrap(),
        );
        assert!((km2 - fraction * total).abs() <= 1e-9 * total, "{u}");
        sum += km2;
    }
    assert!((sum - total).abs() < 1e-6 * total);
    let csv = std::fs::read_to_string(out.join("units.csv")).unwrap();
    let header: Vec<&str> = csv.lines().next().unwrap().split(',').collect();
    assert_eq!(
        &header[..6],
        &[
            "unit",
            "label",
            "class",
            "pixels",
            "area_fraction",
            "area_km2"
        ]
    );
    let record: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("run.json")).unwrap()).unwrap();
    assert_eq!(record["recipe"]["body_radius_km"], 1000.0);
}
