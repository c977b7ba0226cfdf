//! `thiomap unmix` as a user meets it: the results-folder contract, reproducibility,
//! recipes, the identifiability guard, and bad inputs.

use std::path::{Path, PathBuf};

use super::support::{f32_fits, stderr, thiomap};

fn demo_cube(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("demo-cubes")
        .join(name)
}

fn unmix(cube: &Path, out: &Path, extra: &[&str]) -> std::process::Output {
    let mut args = vec![
        "unmix",
        cube.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    thiomap(&args)
}

fn json(path: &Path) -> serde_json::Value {
    serde_json::from_slice(&std::fs::read(path).unwrap()).unwrap()
}

#[test]
fn the_results_folder_holds_the_contract_files() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("r");
    let run = unmix(&demo_cube("brimveil-tile-spectrometer24.fits"), &out, &[]);
    assert!(run.status.success(), "{}", stderr(&run));
    let summary = json(&out.join("summary.json"));
    let ids: Vec<String> = summary["endmembers"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap().to_string())
        .collect();
    assert_eq!(ids.last().unwrap(), "shade");
    assert!(ids.contains(&"so2-frost-fine+so2-frost-coarse".to_string()));
    assert_eq!(
        summary["groups"][0]["id"],
        "so2-frost-fine+so2-frost-coarse"
    );
    for f in [
        "abundance.fits",
        "stderr.fits",
        "fit-rmse.fits",
        "fit-rmse.png",
        "run.json",
        "timings.json",
    ] {
        assert!(out.join(f).is_file(), "{f} missing");
    }
    for id in &ids {
        assert!(
            out.join("abundance").join(format!("{id}.png")).is_file(),
            "{id}.png missing"
        );
    }
    // abundance.fits: axes x, y, plane; NAXIS3 = len(endmembers); PLANEn names in order.
    let src = thiomap::fits::Source::open(&out.join("abundance.fits")).unwrap();
    let hdus = thiomap::fits::scan(&src).unwrap();
    assert_eq!(hdus[0].axes(), vec![96, 96, ids.len() as u64]);
    for (i, id) in ids.iter().enumerate() {
        assert_eq!(
            hdus[0].header.str(&format!("PLANE{}", i + 1)),
            Some(id.as_str())
        );
    }
    let record = json(&out.join("run.json"));
    assert_eq!(record["recipe"]["solver"], "fcls");
    assert_eq!(
        record["inputs"][0]["name"],
        "brimveil-tile-spectrometer24.fits"
    );
    assert_eq!(record["inputs"][0]["sha256"].as_str().unwrap().len(), 64);
    assert_eq!(record["library"]["version"], "0.2.0");
    assert!(record["recipe"].get("threads").is_none());
}

#[test]
fn reruns_and_thread_counts_give_byte_identical_products() {
    let dir = tempfile::tempdir().unwrap();
    let cube = demo_cube("brimveil-globe-mapper96.fits");
    let (a, b) = (dir.path().join("a"), dir.path().join("b"));
    assert!(unmix(&cube, &a, &["--threads", "1"]).status.success());
    assert!(unmix(&cube, &b, &["--threads", "2"]).status.success());
    for f in [
        "abundance.fits",
        "stderr.fits",
        "fit-rmse.fits",
        "summary.json",
        "run.json",
        "abundance/shade.png",
    ] {
        assert_eq!(
            std::fs::read(a.join(f)).unwrap(),
            std::fs::read(b.join(f)).unwrap(),
            "{f}"
        );
    }
}

#[test]
fn an_existing_folder_is_refused_without_overwrite() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("keep.txt"), b"x").unwrap();
    let run = unmix(
        &demo_cube("brimveil-tile-spectrometer24.fits"),
        dir.path(),
        &[],
    );
    assert_eq!(run.status.code(), Some(2));
    assert!(stderr(&run).contains("--overwrite"));
}

#[test]
fn a_recipe_sets_the_options_and_is_recorded() {
    let dir = tempfile::tempdir().unwrap();
    let recipe = dir.path().join("recipe.toml");
    std::fs::write(
        &recipe,
        "solver = \"nnls\"\nshade = true\nrange_um = [0.4, 2.0]\n",
    )
    .unwrap();
    let out = dir.path().join("r");
    let run = unmix(
        &demo_cube("brimveil-tile-spectrometer24.fits"),
        &out,
        &["--recipe", recipe.to_str().unwrap()],
    );
    assert!(run.status.success(), "{}", stderr(&run));
    let record = json(&out.join("run.json"));
    assert_eq!(record["recipe"]["solver"], "nnls");
    assert_eq!(record["recipe"]["range_um"], serde_json::json!([0.4, 2.0]));
    let summary = json(&out.join("summary.json"));
    assert_eq!(summary["bands_used"], 19);
    // Each boundary pixel has at least one boundary column, and no column more pixels than
    // are flagged.
    let flagged = summary["boundary_pixels"].as_u64().unwrap();
    let by: Vec<u64> = summary["boundary_by_column"]
        .as_object()
        .unwrap()
        .values()
        .map(|v| v.as_u64().unwrap())
        .collect();
    assert!(flagged > 0);
    assert!(*by.iter().max().unwrap() <= flagged, "{by:?} vs {flagged}");
    assert!(by.iter().sum::<u64>() >= flagged, "{by:?} vs {flagged}");
    // A recipe written from run.json reproduces the result.
    let again = dir.path().join("again.toml");
    let rec: thiomap::recipe::Recipe = serde_json::from_value(record["recipe"].clone()).unwrap();
    std::fs::write(&again, rec.to_toml()).unwrap();
    let out2 = dir.path().join("r2");
    assert!(unmix(
        &demo_cube("brimveil-tile-spectrometer24.fits"),
        &out2,
        &["--recipe", again.to_str().unwrap()]
    )
    .status
    .success());
    assert_eq!(
        std::fs::read(out.join("abundance.fits")).unwrap(),
        std::fs::read(out2.join("abundance.fits")).unwrap()
    );
    // An unknown key is refused with file and line.
    std::fs::write(&recipe, "solver = \"fcls\"\nsolvr = \"nnls\"\n").unwrap();
    let run = unmix(
        &demo_cube("brimveil-tile-spectrometer24.fits"),
        &dir.path().join("r3"),
        &["--recipe", recipe.to_str().unwrap()],
    );
    assert_eq!(run.status.code(), Some(2));
    assert!(
        stderr(&run).contains("recipe.toml: line 2"),
        "{}",
        stderr(&run)
    );
}

#[test]
fn the_guard_stops_an_unseparable_problem_and_names_what_to_do() {
    let dir = tempfile::tempdir().unwrap();
    let cube = demo_cube("brimveil-globe-imager7.fits");
    let run = unmix(&cube, &dir.path().join("a"), &["--subset", "off"]);
    let err = stderr(&run);
    assert_eq!(run.status.code(), Some(2), "{err}");
    assert!(
        err.contains("unknowns") && err.contains("--subset 3") && err.contains("--force"),
        "{err}"
    );
    assert!(err.contains("closest pairs"), "{err}");
    let run = unmix(
        &cube,
        &dir.path().join("b"),
        &["--subset", "off", "--force"],
    );
    assert!(run.status.success(), "{}", stderr(&run));
    // The default (subset auto) does not stop on the imager globe.
    let run = unmix(&cube, &dir.path().join("c"), &[]);
    assert!(run.status.success(), "{}", stderr(&run));
    assert!(stderr(&run).contains("subset mode"), "{}", stderr(&run));
}

#[test]
fn a_library_that_does_not_cover_the_bands_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    // Bands at 5.0 … 5.9 µm: beyond the library's 5.2 µm.
    let p = dir.path().join("far.fits");
    std::fs::write(
        &p,
        f32_fits([4, 4, 10], &vec![0.3; 160], &[("CRVAL3", "5.0")]),
    )
    .unwrap();
    let run = unmix(&p, &dir.path().join("r"), &[]);
    let err = stderr(&run);
    assert_eq!(run.status.code(), Some(2), "{err}");
    assert!(
        err.contains("outside member") && err.contains("--range"),
        "{err}"
    );
}

#[test]
fn no_data_zero_signal_and_nan_pixels_are_masked_and_counted() {
    let dir = tempfile::tempdir().unwrap();
    // 6 × 5 pixels, 12 bands 0.5–1.6 µm of a flat grey; then holes.
    let (cols, rows, bands) = (6usize, 5usize, 12usize);
    let mut s = vec![0.3f32; cols * rows * bands];
    let at = |x: usize, y: usize, b: usize| (b * rows + y) * cols + x;
    for b in 0..bands {
        s[at(0, 0, b)] = 0.0; // zero signal in every band
    }
    s[at(1, 1, 4)] = f32::NAN; // one NaN sample
    let p = dir.path().join("holes.fits");
    std::fs::write(&p, f32_fits([cols, rows, bands], &s, &[])).unwrap();
    let out = dir.path().join("r");
    let run = unmix(&p, &out, &["--subset", "2"]);
    assert!(run.status.success(), "{}", stderr(&run));
    let summary = json(&out.join("summary.json"));
    assert_eq!(summary["masked_pixels"]["input_nodata"], 1);
    assert_eq!(summary["masked_pixels"]["zero_signal"], 1);
    assert_eq!(summary["unmixed_pixels"], 28);
    // An all-no-data cube is refused by nothing, masks everything, and says so.
    let p = dir.path().join("empty.fits");
    std::fs::write(
        &p,
        f32_fits(
            [cols, rows, bands],
            &vec![f32::NAN; cols * rows * bands],
            &[],
        ),
    )
    .unwrap();
    let out = dir.path().join("r2");
    let run = unmix(&p, &out, &["--subset", "2"]);
    assert!(run.status.success(), "{}", stderr(&run));
    assert_eq!(json(&out.join("summary.json"))["unmixed_pixels"], 0);
}

#[test]
fn identical_members_of_different_classes_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let lib = dir.path().join("lib");
    let csv = dir.path().join("twins.csv");
    let mut text = String::from("wavelength_um,Twin A\n");
    for i in 0..=40 {
        let w = 0.3 + 0.1 * i as f64;
        text.push_str(&format!(
            "{w:.2},{:.3}\n",
            0.2 + 0.1 * (w * 3.0).sin().abs()
        ));
    }
    std::fs::write(&csv, &text).unwrap();
    let base = [
        "--method",
        "test",
        "--source",
        "computed=this test",
        "--out",
        lib.to_str().unwrap(),
    ];
    let mut a = vec![
        "library",
        "import",
        csv.to_str().unwrap(),
        "--class",
        "other",
    ];
    a.extend_from_slice(&base);
    assert!(thiomap(&a).status.success());
    std::fs::write(&csv, text.replace("Twin A", "Twin B")).unwrap();
    let mut b = vec![
        "library",
        "import",
        csv.to_str().unwrap(),
        "--class",
        "silicate",
    ];
    b.extend_from_slice(&base);
    assert!(thiomap(&b).status.success());
    let run = unmix(
        &demo_cube("brimveil-tile-spectrometer24.fits"),
        &dir.path().join("r"),
        &["--library", lib.to_str().unwrap(), "--subset", "off"],
    );
    let err = stderr(&run);
    assert_eq!(run.status.code(), Some(2), "{err}");
    assert!(err.contains("twin-a — twin-b"), "{err}");
    // With --force the singular problem is still solved exactly (the active-set search
    // falls back to enumeration): every pixel gets a composition, none is lost as dark.
    let out = dir.path().join("forced");
    let run = unmix(
        &demo_cube("brimveil-tile-spectrometer24.fits"),
        &out,
        &[
            "--library",
            lib.to_str().unwrap(),
            "--subset",
            "off",
            "--force",
        ],
    );
    assert!(run.status.success(), "{}", stderr(&run));
    let summary = json(&out.join("summary.json"));
    assert_eq!(summary["masked_pixels"]["too_dark"], 0, "{summary}");
    assert_eq!(summary["unmixed_pixels"], 9216, "{summary}");
    assert_eq!(summary["enumerated_pixels"], 9216, "{summary}");
}

#[test]
fn photometric_normalisation_is_recorded_and_needs_its_backplanes() {
    let dir = tempfile::tempdir().unwrap();
    // The imager globe has incidence and emission backplanes: Lambert normalisation runs,
    // lands in the recipe, and masks the grazing-sun pixels it cannot normalise.
    let out = dir.path().join("r");
    let run = unmix(
        &demo_cube("brimveil-globe-imager7.fits"),
        &out,
        &["--photometry", "lambert"],
    );
    assert!(run.status.success(), "{}", stderr(&run));
    assert!(
        stderr(&run).contains("photometric factor below"),
        "{}",
        stderr(&run)
    );
    let recipe = &json(&out.join("run.json"))["recipe"];
    assert_eq!(recipe["photometry"], "lambert");
    // A cube without backplanes is refused with the missing plane named, exit code 2.
    let p = dir.path().join("flat.fits");
    std::fs::write(&p, f32_fits([4, 3, 12], &[0.3f32; 4 * 3 * 12], &[])).unwrap();
    let run = unmix(
        &p,
        &dir.path().join("r2"),
        &["--photometry", "lommel-seeliger"],
    );
    assert_eq!(run.status.code(), Some(2), "{}", stderr(&run));
    assert!(
        stderr(&run).contains("no incidence backplane"),
        "{}",
        stderr(&run)
    );
    assert!(!dir.path().join("r2").join("run.json").exists());
}

/// Every plane of a FITS file's primary HDU: (axes, values in file order).
fn fits_values(path: &Path) -> (Vec<u64>, thiomap::fits::Hdu, Vec<f32>) {
    let src = thiomap::fits::Source::open(path).unwrap();
    let hdu = thiomap::fits::scan(&src).unwrap().remove(0);
    let axes = hdu.axes();
    let n: u64 = axes.iter().product();
    let scaling = thiomap::fits::Scaling::from_header(&hdu.header).unwrap();
    let mut out = vec![0.0f32; n as usize];
    thiomap::fits::read_elements(&src, &hdu, &scaling, 0, &mut out, &mut Vec::new()).unwrap();
    (axes, hdu, out)
}

#[test]
fn covariance_fits_holds_each_pixels_covariance_of_the_reported_planes() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("r");
    let run = unmix(
        &demo_cube("brimveil-tile-spectrometer24.fits"),
        &out,
        &["--covariance"],
    );
    assert!(run.status.success(), "{}", stderr(&run));
    let (se_axes, _, se) = fits_values(&out.join("stderr.fits"));
    let (axes, hdu, cov) = fits_values(&out.join("covariance.fits"));
    let p = se_axes[2] as usize;
    let px = (axes[0] * axes[1]) as usize;
    assert_eq!(axes[2] as usize, p * (p + 1) / 2, "upper triangle");
    assert_eq!(hdu.header.i64("COVORDER"), Some(p as i64));
    let at = |i: usize, j: usize| {
        let (i, j) = (i.min(j), i.max(j));
        i * p - i * i.saturating_sub(1) / 2 + (j - i)
    };
    let name = hdu.header.str(&format!("PLANE{}", at(0, 1) + 1)).unwrap();
    assert!(name.contains(','), "{name}");
    let (mut checked, mut mat) = (0, p - 1);
    if hdu.header.str(&format!("PLANE{}", at(p - 1, p - 1) + 1)) != Some("shade,shade") {
        mat = p;
    }
    for k in 0..px {
        let var = cov[at(0, 0) * px + k];
        if var.is_nan() {
            continue;
        }
        for i in 0..p {
            // The diagonal is the square of stderr.fits.
            let s = se[i * px + k];
            let v = cov[at(i, i) * px + k];
            assert!(
                (v.sqrt() - s).abs() <= 1e-5 * s + 1e-9,
                "pixel {k} plane {i}"
            );
            // The renormalised materials sum to one, so each row of their covariance sums
            // to zero (common practice: a constant sum has no variance).
            if i < mat {
                let row: f64 = (0..mat).map(|j| cov[at(i, j) * px + k] as f64).sum();
                assert!(
                    row.abs() <= 1e-4 * v as f64 + 1e-12,
                    "pixel {k} row {i}: {row}"
                );
            }
        }
        checked += 1;
    }
    assert!(checked > 1000, "{checked}");
}
