//! Every command that takes `--out` reads and checks its inputs before it creates
//! anything: a missing or bad input is one line naming it, exit 2, and no output left
//! behind (no empty folder, no file). A bad recipe value names the file and the key.

use std::path::Path;

use super::support::{stderr, thiomap};

/// Runs `args`, expects the one-line refusal naming `culprit`, and checks `out` was not
/// created.
fn refused_without_output(args: &[&str], culprit: &str, out: &Path) {
    let run = thiomap(args);
    let err = stderr(&run);
    assert_eq!(run.status.code(), Some(2), "{args:?}: {err}");
    assert!(err.starts_with("thiomap: "), "{err}");
    assert!(err.contains(culprit), "{culprit} not named in: {err}");
    assert_eq!(err.trim_end().lines().count(), 1, "one message, got: {err}");
    assert!(!out.exists(), "{args:?} left {} behind", out.display());
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

#[test]
fn unmix_and_map_leave_no_folder_for_a_missing_cube() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("results");
    let cube = dir.path().join("missing.fits");
    for command in ["unmix", "map"] {
        refused_without_output(&[command, s(&cube), "--out", s(&out)], "missing.fits", &out);
    }
}

#[test]
fn batch_and_merge_leave_no_folder_for_a_missing_archive() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("results");
    let archive = dir.path().join("no-archive");
    refused_without_output(
        &["batch", s(&archive), "--out", s(&out)],
        "no-archive",
        &out,
    );
    refused_without_output(
        &["merge", s(&archive), "--out", s(&out)],
        "no-archive",
        &out,
    );
}

#[test]
fn convert_demo_and_library_commands_leave_no_file_for_a_bad_input() {
    let dir = tempfile::tempdir().unwrap();
    let missing = dir.path().join("missing.fits");
    let out = dir.path().join("converted.fits");
    refused_without_output(
        &["convert", s(&missing), "--out", s(&out)],
        "missing.fits",
        &out,
    );
    let out = dir.path().join("scene.fits");
    refused_without_output(
        &["demo", "--out", s(&out), "--bands", "no-such-set"],
        "no-such-set",
        &out,
    );
    let out = dir.path().join("e.csv");
    refused_without_output(
        &[
            "library",
            "export",
            "--bands",
            s(&missing),
            "--format",
            "csv",
            "--out",
            s(&out),
        ],
        "missing.fits",
        &out,
    );
    let out = dir.path().join("library.svg");
    refused_without_output(
        &["library", "plot", "--bands", s(&missing), "--out", s(&out)],
        "missing.fits",
        &out,
    );
    let out = dir.path().join("my-library");
    let csv = dir.path().join("missing.csv");
    refused_without_output(
        &[
            "library",
            "import",
            s(&csv),
            "--class",
            "silicate",
            "--method",
            "lab",
            "--source",
            "read=Nobody 2030",
            "--out",
            s(&out),
        ],
        "missing.csv",
        &out,
    );
}

#[test]
fn a_bad_recipe_value_names_the_file_and_the_key_and_a_flag_names_the_flag() {
    let dir = tempfile::tempdir().unwrap();
    let recipe = dir.path().join("recipe.toml");
    std::fs::write(&recipe, "units = 0\n").unwrap();
    let out = dir.path().join("results");
    let cube = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-cubes/brimveil-globe-imager7.fits");
    let run = thiomap(&["map", s(&cube), "--out", s(&out), "--recipe", s(&recipe)]);
    let err = stderr(&run);
    assert_eq!(run.status.code(), Some(2), "{err}");
    assert_eq!(
        err.trim_end(),
        format!(
            "thiomap: {}: units = 0: at least one unit is needed",
            recipe.display()
        )
    );
    assert!(!out.exists());
    let run = thiomap(&["map", s(&cube), "--out", s(&out), "--min-area", "0"]);
    assert_eq!(
        stderr(&run).trim_end(),
        "thiomap: --min-area 0: the minimum mapping unit is at least one pixel"
    );
    assert!(!out.exists());
    // A word the recipe does not know names the file, the line and the key.
    std::fs::write(&recipe, "solver = \"fcls\"\nprecision = \"f16\"\n").unwrap();
    let run = thiomap(&["unmix", s(&cube), "--out", s(&out), "--recipe", s(&recipe)]);
    let err = stderr(&run);
    assert!(
        err.contains("recipe.toml: line 2") && err.contains("precision \"f16\""),
        "{err}"
    );
    assert!(!out.exists());
}
