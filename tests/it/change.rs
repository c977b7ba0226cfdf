//! `thiomap demo --epoch-of` and `thiomap compare`: later epochs of the demo world with
//! known changes, and their detection against the truth planes. The truth is our own
//! synthetic world; the statistics' outside references (SciPy's χ² survival function and
//! Benjamini–Hochberg) are checked in `tests/external/check_change.py`.

use std::path::{Path, PathBuf};

use thiomap::demo::files::TruthFiles;
use thiomap::fits::image::read_all;

use super::map_cli::map;
use super::support::{stderr, thiomap};

/// An earlier demo globe (mapper-96, 96 × 96, three hot spots) at `dir/e{seed}.fits`.
pub(super) fn earlier_globe(dir: &Path, snr: &str, seed: &str) -> PathBuf {
    let e = dir.join(format!("e{seed}.fits"));
    let run = thiomap(&[
        "demo",
        "--out",
        e.to_str().unwrap(),
        "--size",
        "96",
        "--bands",
        "mapper-96",
        "--snr",
        snr,
        "--hot-spots",
        "3",
        "--seed",
        seed,
    ]);
    assert!(run.status.success(), "{}", stderr(&run));
    e
}

/// An earlier globe and its later epoch with `changes`, both mapped; returns (earlier
/// cube, later cube, earlier result, later result).
fn pair(dir: &Path, snr: &str, seed: &str, changes: &str, extra: &[&str]) -> [PathBuf; 4] {
    let e = earlier_globe(dir, snr, seed);
    let l = dir.join(format!("l{seed}.fits"));
    let mut args = vec![
        "demo",
        "--epoch-of",
        e.to_str().unwrap(),
        "--changes",
        changes,
        "--out",
        l.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    let run = thiomap(&args);
    assert!(run.status.success(), "{}", stderr(&run));
    let (re, rl) = (dir.join(format!("re{seed}")), dir.join(format!("rl{seed}")));
    for (cube, out) in [(&e, &re), (&l, &rl)] {
        let run = map(cube, out, &[]);
        assert!(run.status.success(), "{}", stderr(&run));
    }
    [e, l, re, rl]
}

fn compare(a: &Path, b: &Path, out: &Path, extra: &[&str]) -> std::process::Output {
    let mut args = vec![
        "compare",
        a.to_str().unwrap(),
        b.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    thiomap(&args)
}

/// (significant, tested) planes of change.fits, (row, col).
fn significant(dir: &Path) -> (ndarray::Array2<f32>, Vec<String>) {
    let (img, _) = read_all(&dir.join("change.fits")).unwrap();
    let names: Vec<String> = (1..=img.data.dim().2)
        .map(|k| img.header.str(&format!("PLANE{k}")).unwrap().to_string())
        .collect();
    let k = names.iter().position(|n| n == "significant").unwrap();
    (img.data.index_axis(ndarray::Axis(2), k).to_owned(), names)
}

/// Detected fraction of the truly changed pixels (some plane changed by ≥ 0.1, planes as
/// the results report them: groups summed) and false fraction of the unchanged ones,
/// over tested pixels.
fn scores(e: &Path, l: &Path, compared: &Path) -> (f64, f64, usize) {
    let (sig, names) = significant(compared);
    let ids: Vec<String> = names
        .iter()
        .filter_map(|n| n.strip_prefix("delta:").map(String::from))
        .collect();
    let (t1, t2) = (
        TruthFiles::read(e).unwrap().over(&ids),
        TruthFiles::read(l).unwrap().over(&ids),
    );
    let (mut changed, mut hit, mut unchanged, mut false_hit) = (0, 0, 0, 0);
    for ((r, c), s) in sig.indexed_iter() {
        if !s.is_finite() {
            continue;
        }
        let most = (0..ids.len())
            .map(|j| (t2[(r, c, j)] - t1[(r, c, j)]).abs())
            .fold(0f32, f32::max);
        if most >= 0.1 {
            changed += 1;
            hit += (*s == 1.0) as usize;
        } else if most < 1e-6 {
            unchanged += 1;
            false_hit += (*s == 1.0) as usize;
        }
    }
    (
        hit as f64 / changed.max(1) as f64,
        false_hit as f64 / unchanged.max(1) as f64,
        changed,
    )
}

#[test]
fn a_later_epoch_keeps_the_world_and_renews_the_noise() {
    let dir = tempfile::tempdir().unwrap();
    let [e, l, _, _] = pair(dir.path(), "200", "5", "none", &[]);
    let (t1, t2) = (TruthFiles::read(&e).unwrap(), TruthFiles::read(&l).unwrap());
    let same = t1
        .abundance
        .iter()
        .zip(t2.abundance.iter())
        .all(|(a, b)| a == b || (a.is_nan() && b.is_nan()));
    assert!(same, "no change: the same true abundances");
    assert!(t2.changed.iter().all(|b| *b == 0));
    let load = |p: &Path| thiomap::cube::load(p, &Default::default()).unwrap();
    let (c1, c2) = (load(&e), load(&l));
    assert_eq!(c1.info.bands, c2.info.bands, "the earlier cube's own bands");
    let differ = c1
        .data
        .iter()
        .zip(c2.data.iter())
        .filter(|(a, b)| a.is_finite() && a != b)
        .count();
    assert!(
        differ > c1.data.len() / 2,
        "new noise: {differ} samples differ"
    );
    let json = &t2.json["epoch"];
    assert_eq!(json["earlier_cube"], "e5.fits");
    assert_eq!(json["noise_seed"], 6, "the earlier seed + 1 by default");
}

#[test]
fn planted_changes_are_detected_and_their_truth_is_marked() {
    let dir = tempfile::tempdir().unwrap();
    let [e, l, re, rl] = pair(
        dir.path(),
        "200",
        "21",
        "ring,frost,flow,stranger,vents",
        &[],
    );
    let t = TruthFiles::read(&l).unwrap();
    for (bit, name) in [
        (1, "ring"),
        (2, "frost"),
        (4, "flow"),
        (8, "stranger"),
        (16, "vents"),
    ] {
        let n = t.changed.iter().filter(|b| **b & bit != 0).count();
        assert!(n > 0, "the CHANGED plane marks the {name} change");
    }
    let out = dir.path().join("c");
    let run = compare(&re, &rl, &out, &["--report"]);
    assert!(run.status.success(), "{}", stderr(&run));
    let (detected, false_rate, changed) = scores(&e, &l, &out);
    // The targets at SNR 200: ≥ 90 % of the truly changed pixels, ≤ 1 % false.
    assert!(changed > 500, "{changed} changed pixels");
    assert!(
        detected >= 0.90,
        "detected {detected:.3} of {changed} changed pixels"
    );
    assert!(
        false_rate <= 0.01,
        "false detections on {false_rate:.4} of unchanged pixels"
    );
    let csv = std::fs::read_to_string(out.join("change-regions.csv")).unwrap();
    let head = csv.lines().next().unwrap();
    assert!(head
        .starts_with("region,kind,pixels,area_fraction,centroid_row,centroid_col,lat_deg,lon_deg"));
    for phrase in [
        "frost loss",
        "short-chain sulfur S3/S4 +",
        "a new dark deposit or flow",
        "hot-spot-on",
        "hot-spot-off",
        "cannot explain appeared",
    ] {
        assert!(
            csv.contains(phrase),
            "change-regions.csv names `{phrase}`:\n{csv}"
        );
    }
    // The new red ring lies around Sesk Kiln (22° S, 30° E): the region that says so.
    let ring = csv
        .lines()
        .find(|l| l.contains("short-chain sulfur S3/S4 +"))
        .unwrap();
    let cols: Vec<&str> = ring.split(',').collect();
    let (lat, lon): (f64, f64) = (cols[6].parse().unwrap(), cols[7].parse().unwrap());
    assert!(
        (lat + 22.0).abs() < 4.0 && (lon - 30.0).abs() < 4.0,
        "ring at {lat}, {lon}"
    );
    for f in [
        "change.fits",
        "change-units.fits",
        "change.png",
        "report.html",
        "run.json",
    ] {
        assert!(out.join(f).is_file(), "{f}");
    }
    let page = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(page.contains("What changed") && page.contains("flight rules"));
}

#[test]
fn an_unchanged_world_stays_within_the_false_discovery_rate() {
    let dir = tempfile::tempdir().unwrap();
    let [_, _, re, rl] = pair(dir.path(), "200", "31", "none", &[]);
    let out = dir.path().join("c");
    let run = compare(&re, &rl, &out, &[]);
    assert!(run.status.success(), "{}", stderr(&run));
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("run.json")).unwrap()).unwrap();
    let area = json["significant_area_fraction"].as_f64().unwrap();
    assert!(
        area <= 0.01,
        "significant area {area} with no change, FDR 0.01"
    );
    assert_eq!(json["grid"]["kind"], "pixels");
    assert!(json["test"]["covariance"]
        .as_str()
        .unwrap()
        .contains("union"));
}

#[test]
fn another_view_is_compared_on_a_latitude_longitude_grid() {
    let dir = tempfile::tempdir().unwrap();
    let [_, _, re, rl] = pair(dir.path(), "200", "41", "ring", &["--observer", "0,20"]);
    let out = dir.path().join("c");
    let run = compare(&re, &rl, &out, &[]);
    assert!(run.status.success(), "{}", stderr(&run));
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("run.json")).unwrap()).unwrap();
    assert_eq!(json["grid"]["kind"], "latitude-longitude");
    assert!(
        json["counts"]["left_out_at_unit_boundaries"]
            .as_u64()
            .unwrap()
            > 0
    );
    let csv = std::fs::read_to_string(out.join("change-regions.csv")).unwrap();
    let ring = csv.lines().nth(1).unwrap();
    assert!(ring.contains("short-chain sulfur S3/S4 +"), "{ring}");
    let cols: Vec<&str> = ring.split(',').collect();
    let (lat, lon): (f64, f64) = (cols[6].parse().unwrap(), cols[7].parse().unwrap());
    assert!(
        (lat + 22.0).abs() < 4.0 && (lon - 30.0).abs() < 4.0,
        "ring at {lat}, {lon}"
    );
}

#[test]
fn bad_pairs_are_refused_with_one_line_and_nothing_written() {
    let dir = tempfile::tempdir().unwrap();
    let [_, _, re, _] = pair(dir.path(), "200", "51", "none", &[]);
    // The same cube without groups: SO2 frost's two members unmixed apart.
    let imager = dir.path().join("ungrouped");
    let run = map(
        &dir.path().join("e51.fits"),
        &imager,
        &["--no-groups", "--force"],
    );
    assert!(run.status.success(), "{}", stderr(&run));
    let empty = dir.path().join("empty");
    std::fs::create_dir(&empty).unwrap();
    for (other, says) in [
        (&imager, "unmix different members"),
        (&empty, "not a results folder"),
    ] {
        let out = dir.path().join("out");
        let run = compare(&re, other, &out, &[]);
        assert_eq!(run.status.code(), Some(2), "{}", stderr(&run));
        assert!(stderr(&run).contains(says), "{}", stderr(&run));
        assert!(!out.exists(), "nothing written");
    }
    let run = compare(&re, &re, &dir.path().join("out"), &["--fdr", "1.5"]);
    assert_eq!(run.status.code(), Some(2));
    assert!(stderr(&run).contains("--fdr 1.5"), "{}", stderr(&run));
}

#[test]
fn two_cubes_are_mapped_with_one_recipe_first() {
    let dir = tempfile::tempdir().unwrap();
    let e = earlier_globe(dir.path(), "200", "61");
    let l = dir.path().join("l61.fits");
    let run = thiomap(&[
        "demo",
        "--epoch-of",
        e.to_str().unwrap(),
        "--changes",
        "ring",
        "--out",
        l.to_str().unwrap(),
    ]);
    assert!(run.status.success(), "{}", stderr(&run));
    let out = dir.path().join("c");
    let run = compare(&e, &l, &out, &[]);
    assert!(run.status.success(), "{}", stderr(&run));
    for f in [
        "earlier/run.json",
        "later/run.json",
        "change.fits",
        "run.json",
    ] {
        assert!(out.join(f).is_file(), "{f}");
    }
    // A compare folder is not a result to compare.
    let run = compare(&out.join("earlier"), &out, &dir.path().join("again"), &[]);
    assert_eq!(run.status.code(), Some(2));
    assert!(
        stderr(&run).contains("a `compare` folder"),
        "{}",
        stderr(&run)
    );
}
