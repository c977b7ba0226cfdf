//! `thiomap library …` as a user meets it, and its refusals of bad library files.

use std::path::{Path, PathBuf};

use super::support::{stderr, thiomap};

fn json(args: &[&str]) -> serde_json::Value {
    let run = thiomap(args);
    assert!(run.status.success(), "{}", stderr(&run));
    serde_json::from_slice(&run.stdout).unwrap()
}

#[test]
fn list_shows_every_member_with_its_class() {
    let j = json(&["library", "list", "--json"]);
    let members = j["members"].as_array().unwrap();
    assert_eq!(members.len(), 9);
    assert!(members
        .iter()
        .any(|m| m["id"] == "so2-frost-coarse" && m["class"] == "so2-frost"));
    assert_eq!(j["version"], "0.2.0");
}

#[test]
fn check_reports_groups_condition_and_pairs() {
    let j = json(&["library", "check", "--bands", "imager-7", "--json"]);
    assert_eq!(j["bands"], 7);
    assert!(
        j["condition_number"].is_null(),
        "9 members cannot be solved from 7 bands"
    );
    assert_eq!(j["groups"][0]["id"], "so2-frost-fine+so2-frost-coarse");
    let j = json(&["library", "check", "--bands", "mapper-96", "--json"]);
    assert!(j["condition_number"].as_f64().unwrap() < 1e4);
    assert_eq!(j["groups"].as_array().unwrap().len(), 0);
    let pairs = j["closest_pairs"].as_array().unwrap();
    assert_eq!(pairs.len(), 5);
    assert!(pairs[0]["angle_deg"].as_f64() <= pairs[1]["angle_deg"].as_f64());
}

#[test]
fn check_with_a_range_narrows_the_bands() {
    // 40 visible bands (0.400–0.985 µm) and the first near-infrared one at 1.00 µm
    let j = json(&[
        "library",
        "check",
        "--bands",
        "mapper-96",
        "--range",
        "0.4-1.0",
        "--json",
    ]);
    assert_eq!(j["bands"], 41);
    let j = json(&[
        "library",
        "check",
        "--bands",
        "mapper-96",
        "--exclude-bands",
        "1-10,96",
        "--json",
    ]);
    assert_eq!(j["bands"], 85);
}

#[test]
fn export_resamples_to_band_centres() {
    let run = thiomap(&[
        "library", "export", "--bands", "imager-7", "--format", "csv",
    ]);
    assert!(run.status.success());
    let text = String::from_utf8(run.stdout).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 8);
    assert!(lines[0].starts_with("wavelength_um,s8-alpha-room,"));
    assert!(lines[1].starts_with("0.405,"));
}

#[test]
fn plot_writes_svg_and_png() {
    let dir = tempfile::tempdir().unwrap();
    let svg = dir.path().join("lib.svg");
    let png = dir.path().join("lib.png");
    for out in [&svg, &png] {
        let run = thiomap(&[
            "library",
            "plot",
            "--out",
            out.to_str().unwrap(),
            "--bands",
            "imager-7",
        ]);
        assert!(run.status.success(), "{}", stderr(&run));
    }
    let text = std::fs::read_to_string(&svg).unwrap();
    assert!(text.contains("sulfur-red-short-chain") && text.contains("7 bands"));
    let img = image::open(&png).unwrap();
    assert_eq!((img.width(), img.height()), (1280, 760));
    let run = thiomap(&["library", "plot", "--out", svg.to_str().unwrap()]);
    assert_eq!(
        run.status.code(),
        Some(2),
        "an existing picture needs --overwrite"
    );
}

#[test]
fn a_band_outside_the_library_is_named_with_a_hint() {
    let dir = tempfile::tempdir().unwrap();
    let set = dir.path().join("far.toml");
    std::fs::write(
        &set,
        "kind = \"band-set\"\n[[band]]\ncentre_um = 0.5\nfwhm_um = 0.02\n[[band]]\ncentre_um = 6.0\nfwhm_um = 0.1\n",
    )
    .unwrap();
    let run = thiomap(&["library", "check", "--bands", set.to_str().unwrap()]);
    assert_eq!(run.status.code(), Some(2));
    let err = stderr(&run);
    assert!(
        err.contains("band 2") && err.contains("s8-alpha-room") && err.contains("--range"),
        "{err}"
    );
}

/// A copy of the shipped library in a temporary folder, with one member file replaced.
fn broken_library(edit: impl Fn(&str) -> String) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("spectra-lib");
    std::fs::create_dir(dir.path().join("members")).unwrap();
    std::fs::copy(src.join("library.toml"), dir.path().join("library.toml")).unwrap();
    for entry in std::fs::read_dir(src.join("members")).unwrap() {
        let p = entry.unwrap().path();
        let text = std::fs::read_to_string(&p).unwrap();
        let text = if p.ends_with("basalt-dark.spectrum") {
            edit(&text)
        } else {
            text
        };
        std::fs::write(
            dir.path().join("members").join(p.file_name().unwrap()),
            text,
        )
        .unwrap();
    }
    let member = dir.path().join("members/basalt-dark.spectrum");
    (dir, member)
}

fn assert_library_refused(lib: &Path, phrase: &str) {
    let run = thiomap(&["library", "list", "--library", lib.to_str().unwrap()]);
    let err = stderr(&run);
    assert_eq!(run.status.code(), Some(2), "{err}");
    assert!(!err.contains("panicked"));
    assert!(err.contains(phrase), "expected '{phrase}' in {err}");
}

#[test]
fn a_member_file_missing_a_field_is_refused_with_file_and_line() {
    let (dir, _) = broken_library(|t| t.replace("class = \"silicate\"\n", ""));
    assert_library_refused(dir.path(), "basalt-dark.spectrum:1: missing field `class`");
}

#[test]
fn wavelengths_not_increasing_are_refused_with_file_and_line() {
    let (dir, member) = broken_library(|t| t.replacen("0.2520 ", "0.2500 ", 1));
    let text = std::fs::read_to_string(&member).unwrap();
    let line = text.lines().filter(|l| l.starts_with("0.2500 ")).count();
    assert_eq!(line, 2);
    let second = text
        .lines()
        .enumerate()
        .filter(|(_, l)| l.starts_with("0.2500 "))
        .nth(1)
        .unwrap()
        .0
        + 1;
    assert_library_refused(
        dir.path(),
        &format!("basalt-dark.spectrum:{second}: wavelength 0.25"),
    );
}

#[test]
fn reflectance_outside_0_to_1_5_is_refused_with_file_and_line() {
    let (dir, member) = broken_library(|t| t.replacen("0.2520 0.0", "0.2520 1.7", 1));
    assert_library_refused(dir.path(), "reflectance 1.7");
    let text = std::fs::read_to_string(&member).unwrap();
    let line = text.lines().position(|l| l.starts_with("0.2520")).unwrap() + 1;
    assert_library_refused(dir.path(), &format!("basalt-dark.spectrum:{line}:"));
    let (dir, _) = broken_library(|t| t.replacen("0.2540 0.0", "0.2540 -0.0", 1));
    assert_library_refused(dir.path(), "reflectance -0.0");
}

#[test]
fn duplicate_member_ids_are_refused() {
    let (dir, _) = broken_library(|t| t.to_string());
    let index = dir.path().join("library.toml");
    let text = std::fs::read_to_string(&index)
        .unwrap()
        .replace("\"basalt-dark\"]", "\"basalt-dark\", \"basalt-dark\"]");
    std::fs::write(&index, text).unwrap();
    assert_library_refused(dir.path(), "member id `basalt-dark` appears twice");
}

#[test]
fn an_import_csv_with_text_in_a_numeric_column_writes_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let csv = dir.path().join("lab.csv");
    std::fs::write(&csv, "wavelength_nm,A\n400,0.1\n500,0.2\n600,high\n").unwrap();
    let out = dir.path().join("lib");
    let run = thiomap(&[
        "library",
        "import",
        csv.to_str().unwrap(),
        "--class",
        "silicate",
        "--method",
        "lab",
        "--source",
        "read=Test 2030",
        "--out",
        out.to_str().unwrap(),
    ]);
    let err = stderr(&run);
    assert_eq!(run.status.code(), Some(2), "{err}");
    assert!(
        err.contains("lab.csv:4:") && err.contains("`high`"),
        "{err}"
    );
    assert!(!out.exists(), "nothing may be written");
}

#[test]
fn import_refuses_to_run_without_class_or_provenance() {
    let run = thiomap(&["library", "import", "x.csv", "--method", "m", "--out", "o"]);
    assert_eq!(run.status.code(), Some(2));
    assert!(stderr(&run).contains("--class"));
}

#[test]
fn an_imported_spectrum_round_trips_through_the_library_format() {
    let dir = tempfile::tempdir().unwrap();
    let csv = dir.path().join("lab.csv");
    std::fs::write(&csv, "wavelength_um,Grey card\n0.4,0.5\n0.5,0.5\n0.6,0.5\n").unwrap();
    let out = dir.path().join("lib");
    let run = thiomap(&[
        "library",
        "import",
        csv.to_str().unwrap(),
        "--class",
        "other",
        "--method",
        "lab",
        "--source",
        "read=Test 2030",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(run.status.success(), "{}", stderr(&run));
    let lib = thiomap::library::Library::load(&out).unwrap();
    assert_eq!(lib.members[0].id, "grey-card");
    assert_eq!(lib.members[0].reflectance, vec![0.5, 0.5, 0.5]);
}
