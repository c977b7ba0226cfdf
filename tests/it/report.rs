//! The report page (`thiomap report`, `map --report`, `merge --report`). The page is also
//! loaded in a real browser by `tests/browser/check_report.mjs` in `.ci/run`; these tests
//! check what needs no browser: the file contract, determinism, self-containment, escaping
//! and the messages for incomplete folders.

use std::path::Path;

use super::map_cli::{demo_cube, map};
use super::support::{stderr, thiomap};

fn page(dir: &Path) -> String {
    std::fs::read_to_string(dir.join("report.html")).unwrap()
}

fn sha256_hex(bytes: &[u8]) -> String {
    use sha2::Digest as _;
    sha2::Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

#[test]
fn map_report_is_one_deterministic_self_contained_file() {
    let dir = tempfile::tempdir().unwrap();
    let cube = demo_cube("brimveil-globe-imager7.fits");
    let (a, b) = (dir.path().join("a/r"), dir.path().join("b/r"));
    for out in [&a, &b] {
        let run = map(&cube, out, &["--report"]);
        assert!(run.status.success(), "{}", stderr(&run));
    }
    let html = page(&a);
    // Byte-identical across reruns (same folder name, another parent).
    assert_eq!(html, page(&b), "the page changed between reruns");
    // The made-by line names the run.json written after the page, by its hash.
    let run_json = std::fs::read(a.join("run.json")).unwrap();
    let line = format!(
        "made by thiomap {} from r (run.json sha256 {})",
        env!("CARGO_PKG_VERSION"),
        &sha256_hex(&run_json)[..16]
    );
    assert!(html.contains(&line), "no made-by line {line:?}");
    // Nothing is fetched: no links to style sheets or scripts, no remote URL in a src,
    // href or CSS url(); images are data: URIs. (The SVG namespace URI is a name, not a
    // request.)
    let lower = html.to_lowercase();
    for bad in [
        "<link",
        "@import",
        "src=\"http",
        "href=\"http",
        "url(http",
        "src=\"//",
    ] {
        assert!(!lower.contains(bad), "the page holds {bad:?}");
    }
    let imgs = lower.matches("<img ").count();
    assert!(imgs >= 10, "{imgs} images");
    assert_eq!(lower.matches("<img class=\"").count(), imgs);
    assert_eq!(lower.matches(" src=\"data:image/").count(), imgs);
    assert_eq!(
        lower.matches(" alt=\"").count(),
        imgs,
        "an image without alt text"
    );
    // Every section the issue names, and the inspector's data with the cube's spectra.
    for id in [
        "overview",
        "units",
        "abundance",
        "spectra",
        "quality",
        "hotspots",
        "provenance",
    ] {
        assert!(
            html.contains(&format!("<section id=\"{id}\"")),
            "no section {id}"
        );
    }
    assert!(html.contains("id=\"thiomap-data\""));
    assert!(
        html.contains("\"spectra\":{"),
        "the inspector has no spectra"
    );
    // run.json is still the last file written: written after report.html.
    let t = |f: &str| std::fs::metadata(a.join(f)).unwrap().modified().unwrap();
    assert!(t("run.json") >= t("report.html"));
}

#[test]
fn the_page_shows_the_readme_cautions_word_for_word() {
    let readme =
        std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("README.md")).unwrap();
    let section = &readme[readme.find("## Cautions").unwrap()..];
    let section = &section[..3 + section[3..].find("\n## ").unwrap()];
    let flat = |s: &str| s.split_whitespace().collect::<Vec<_>>().join(" ");
    let readme_flat = flat(section);
    for c in thiomap::report::CAUTIONS {
        assert!(readme_flat.contains(&flat(c)), "README lacks: {c}");
    }
    let boxed = thiomap::report::CAUTIONS.len();
    assert!(boxed >= 3);
}

#[test]
fn report_command_reads_the_cube_checks_its_hash_and_says_what_is_missing() {
    let dir = tempfile::tempdir().unwrap();
    let cube_src = demo_cube("brimveil-tile-spectrometer24.fits");
    let cube = dir.path().join("tile.fits");
    std::fs::copy(&cube_src, &cube).unwrap();
    let out = dir.path().join("r");
    let run = map(&cube, &out, &[]);
    assert!(run.status.success(), "{}", stderr(&run));
    // The cube lies beside the results folder: found, hash checked, spectra shown.
    let run = thiomap(&["report", out.to_str().unwrap()]);
    assert!(run.status.success(), "{}", stderr(&run));
    let full = page(&out);
    assert!(full.contains("\"spectra\":{"));
    // A changed cube is refused for the spectra, and the page says so.
    let mut bytes = std::fs::read(&cube).unwrap();
    let last = bytes.len() - 1;
    bytes[last] ^= 1;
    std::fs::write(&cube, &bytes).unwrap();
    let elsewhere = dir.path().join("elsewhere.html");
    let run = thiomap(&[
        "report",
        out.to_str().unwrap(),
        "--out",
        elsewhere.to_str().unwrap(),
    ]);
    assert!(run.status.success(), "{}", stderr(&run));
    let changed = std::fs::read_to_string(&elsewhere).unwrap();
    assert!(changed.contains("\"spectra\":null"));
    assert!(
        changed.contains("SHA-256 differs"),
        "no note of the changed cube"
    );
    // A folder missing products still renders what exists, and names what is missing on
    // stderr and in the page.
    std::fs::remove_file(out.join("stderr.fits")).unwrap();
    std::fs::remove_file(out.join("units.csv")).unwrap();
    let run = thiomap(&["report", out.to_str().unwrap()]);
    assert!(run.status.success(), "{}", stderr(&run));
    let err = stderr(&run);
    assert!(err.contains("stderr.fits is missing"), "{err}");
    assert!(err.contains("units.csv is missing"), "{err}");
    let partial = page(&out);
    assert!(partial.contains("units.csv is missing: no unit table."));
    assert!(partial.contains("<section id=\"abundance\""));
    // A folder from another tool version: rendered, with the difference said.
    let run_json = std::fs::read_to_string(out.join("run.json")).unwrap();
    let other = run_json.replacen(
        &format!("\"version\": \"{}\"", env!("CARGO_PKG_VERSION")),
        "\"version\": \"9.9.0\"",
        1,
    );
    assert_ne!(other, run_json);
    std::fs::write(out.join("run.json"), other).unwrap();
    let run = thiomap(&["report", out.to_str().unwrap()]);
    assert!(run.status.success(), "{}", stderr(&run));
    assert!(
        stderr(&run).contains("run.json was written by thiomap 9.9.0"),
        "{}",
        stderr(&run)
    );
}

#[test]
fn report_refuses_only_a_folder_with_nothing_usable() {
    let dir = tempfile::tempdir().unwrap();
    let empty = dir.path().join("empty");
    std::fs::create_dir(&empty).unwrap();
    std::fs::write(empty.join("notes.txt"), "hello").unwrap();
    let run = thiomap(&["report", empty.to_str().unwrap()]);
    assert_eq!(run.status.code(), Some(2), "{}", stderr(&run));
    assert!(
        stderr(&run).contains("nothing to report"),
        "{}",
        stderr(&run)
    );
    assert!(!empty.join("report.html").exists());
    let run = thiomap(&["report", dir.path().join("absent").to_str().unwrap()]);
    assert_eq!(run.status.code(), Some(2));
    assert!(stderr(&run).contains("not a folder"), "{}", stderr(&run));
}

#[test]
fn text_from_files_is_escaped() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("r");
    let run = map(&demo_cube("brimveil-globe-imager7.fits"), &out, &[]);
    assert!(run.status.success(), "{}", stderr(&run));
    // The first unit's label becomes markup.
    let mut rd = csv::Reader::from_path(out.join("units.csv")).unwrap();
    let header = rd.headers().unwrap().clone();
    let label = header.iter().position(|h| h == "label").unwrap();
    let mut wr = csv::Writer::from_path(out.join("units.csv.new")).unwrap();
    wr.write_record(&header).unwrap();
    for (i, rec) in rd.records().enumerate() {
        let mut rec: Vec<String> = rec.unwrap().iter().map(String::from).collect();
        if i == 0 {
            rec[label] = "<script>alert(1)</script>".into();
        }
        wr.write_record(&rec).unwrap();
    }
    wr.flush().unwrap();
    drop(wr);
    std::fs::rename(out.join("units.csv.new"), out.join("units.csv")).unwrap();
    let run = thiomap(&["report", out.to_str().unwrap()]);
    assert!(run.status.success(), "{}", stderr(&run));
    let html = page(&out);
    assert!(html.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
    assert!(!html.contains("<script>alert(1)"));
    // Inside the inspector's JSON, too, no text can close the script element.
    let data = &html[html.find("id=\"thiomap-data\">").unwrap()..];
    let data = &data[..data.find("</script>").unwrap()];
    assert!(
        data.contains("\\u003cscript>alert(1)"),
        "label not in the data as text"
    );
}

#[test]
fn merge_report_links_each_cube_page() {
    let dir = tempfile::tempdir().unwrap();
    let archive = dir.path().join("archive");
    std::fs::create_dir(&archive).unwrap();
    std::fs::copy(
        demo_cube("brimveil-globe-imager7.fits"),
        archive.join("one.fits"),
    )
    .unwrap();
    let batch = dir.path().join("batch");
    let run = thiomap(&[
        "batch",
        archive.to_str().unwrap(),
        "--out",
        batch.to_str().unwrap(),
        "--report",
    ]);
    assert!(run.status.success(), "{}", stderr(&run));
    let merged = dir.path().join("merged");
    let run = thiomap(&[
        "merge",
        batch.to_str().unwrap(),
        "--out",
        merged.to_str().unwrap(),
        "--report",
    ]);
    assert!(run.status.success(), "{}", stderr(&run));
    let html = std::fs::read_to_string(merged.join("archive.html")).unwrap();
    let link = html
        .split("<a href=\"")
        .filter_map(|s| s.split_once('"').map(|x| x.0))
        .find(|h| h.ends_with("report.html"))
        .expect("a link to the cube's report");
    assert!(!link.starts_with('/') && !link.contains("://"), "{link}");
    assert!(merged.join(link).is_file(), "{link} does not resolve");
    assert!(html.contains("1 cubes: 1 ok, 0 failed, 0 missing"));
}

#[test]
fn the_overview_names_the_target_instrument_and_time_the_cube_declares() {
    let dir = tempfile::tempdir().unwrap();
    let cube = dir.path().join("declared.fits");
    let samples: Vec<f32> = (0..6 * 5 * 12)
        .map(|i| 0.2 + 0.3 * ((i * 37 % 101) as f32 / 101.0))
        .collect();
    std::fs::write(
        &cube,
        super::support::f32_fits(
            [6, 5, 12],
            &samples,
            &[
                ("OBJECT", "'Brimveil'"),
                ("INSTRUME", "'<b>imager</b>'"),
                ("DATE-OBS", "'2031-05-04T10:00'"),
            ],
        ),
    )
    .unwrap();
    let out = dir.path().join("r");
    let run = thiomap(&[
        "unmix",
        cube.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(run.status.success(), "{}", stderr(&run));
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap()).unwrap();
    assert_eq!(summary["target"], "Brimveil");
    assert_eq!(summary["instrument"], "<b>imager</b>");
    let run = thiomap(&["report", out.to_str().unwrap()]);
    assert!(run.status.success(), "{}", stderr(&run));
    let html = page(&out);
    assert!(html.contains("<dt>Target</dt><dd>Brimveil</dd>"));
    assert!(html.contains("<dt>Instrument</dt><dd>&lt;b&gt;imager&lt;/b&gt;</dd>"));
    assert!(html.contains("<dt>Time</dt><dd>2031-05-04T10:00</dd>"));
}
