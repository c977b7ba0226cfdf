//! The command line as a user meets it: help, JSON output, refusals of bad flags.

use super::support::{fixture, stderr, thiomap};

#[test]
fn inspect_json_has_shape_bands_and_nodata_fraction() {
    let f = fixture("external/astropy-wavetab.fits");
    let run = thiomap(&["inspect", f.to_str().unwrap(), "--json"]);
    assert!(run.status.success(), "{}", stderr(&run));
    let json: serde_json::Value = serde_json::from_slice(&run.stdout).unwrap();
    assert_eq!(json["shape"], serde_json::json!([3, 5, 4]));
    assert_eq!(json["bands"][2]["centre_um"], 0.9);
    assert_eq!(json["bands"][2]["fwhm_um"], 0.05);
    assert_eq!(json["bands"][0]["min"], 0.0);
    assert_eq!(json["bands"][0]["max"], 6.0);
    assert_eq!(json["nodata_fraction"], 0.0);
}

#[test]
fn inspect_text_lists_bands_and_backplanes() {
    let f = fixture("external/astropy-f32.fits");
    let run = thiomap(&["inspect", f.to_str().unwrap()]);
    assert!(run.status.success());
    let text = String::from_utf8(run.stdout).unwrap();
    assert!(text.contains("3 rows × 5 columns × 4 bands"), "{text}");
    assert!(text.contains("backplanes  incidence, emission"), "{text}");
    assert!(text.contains("1 of 15 pixels"), "{text}");
}

#[test]
fn hdu_can_be_chosen_by_name_and_a_wrong_one_is_explained() {
    let f = fixture("external/astropy-f32.fits");
    let run = thiomap(&["inspect", f.to_str().unwrap(), "--hdu", "PRIMARY"]);
    assert!(run.status.success(), "{}", stderr(&run));
    let run = thiomap(&["inspect", f.to_str().unwrap(), "--hdu", "INCIDENCE"]);
    assert_eq!(run.status.code(), Some(2));
    assert!(
        stderr(&run).contains("not a 3-axis image"),
        "{}",
        stderr(&run)
    );
    let run = thiomap(&["inspect", f.to_str().unwrap(), "--hdu", "7"]);
    assert!(stderr(&run).contains("no such HDU"), "{}", stderr(&run));
}

#[test]
fn convert_refuses_an_existing_output_without_overwrite() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("x.fits");
    std::fs::write(&out, b"keep me").unwrap();
    let f = fixture("external/astropy-f32.fits");
    let run = thiomap(&[
        "convert",
        f.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(run.status.code(), Some(2));
    assert!(stderr(&run).contains("--overwrite"), "{}", stderr(&run));
    assert_eq!(std::fs::read(&out).unwrap(), b"keep me");
    let run = thiomap(&[
        "convert",
        f.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--overwrite",
    ]);
    assert!(run.status.success(), "{}", stderr(&run));
}

#[test]
fn an_unknown_format_is_named() {
    let run = thiomap(&["inspect", "scene.hdr"]);
    assert_eq!(run.status.code(), Some(2));
    assert!(
        stderr(&run).contains("unknown cube format"),
        "{}",
        stderr(&run)
    );
}

#[test]
fn every_command_has_help_with_examples() {
    for cmd in ["inspect", "convert"] {
        let run = thiomap(&[cmd, "--help"]);
        assert!(run.status.success());
        let text = String::from_utf8(run.stdout).unwrap();
        assert!(text.contains("Examples:"), "{cmd} help lacks examples");
    }
}

#[test]
fn a_missing_file_is_reported_once_in_one_line() {
    let run = thiomap(&["inspect", "no-such-cube.fits"]);
    assert_eq!(run.status.code(), Some(2));
    let err = stderr(&run);
    assert_eq!(err.matches("os error 2").count(), 1, "{err}");
    assert_eq!(err.trim_end().lines().count(), 1, "{err}");
    assert!(
        err.starts_with("thiomap: no-such-cube.fits: cannot read"),
        "{err}"
    );
}

#[test]
fn help_examples_name_shipped_demo_cubes_that_exist() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    for cmd in [
        vec!["--help"],
        vec!["inspect", "--help"],
        vec!["map", "--help"],
        vec!["unmix", "--help"],
    ] {
        let run = thiomap(&cmd);
        let text = String::from_utf8(run.stdout).unwrap();
        for word in text
            .split_whitespace()
            .filter(|w| w.starts_with("demo-cubes/"))
        {
            assert!(
                root.join(word).is_file(),
                "{cmd:?} help names {word}, which does not exist"
            );
        }
    }
}
