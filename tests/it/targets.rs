//! `thiomap targets`: on demo scenes with planted features — an active vent with hot spots,
//! a new red deposit since the earlier epoch, a patch of material outside the library, and
//! a keep-out zone over a fourth feature (a new dark flow) — the default profile ranks the
//! vent first and the other two next, lists the flow as excluded with its reason, and gives
//! the same ranking on every run and thread count. The scenes are our own synthetic truth.

use std::path::{Path, PathBuf};

use super::map_cli::{demo_cube, map};
use super::support::{stderr, thiomap};

const ZONES: &str = "[[circle]]\nname = \"the new flow field\"\nlat_deg = -32.0\nlon_deg = -11.0\nradius_deg = 14.0\n";

/// The earlier epoch's result, the later one's, and the keep-out file.
fn scene(dir: &Path, earlier: Option<&str>) -> (PathBuf, PathBuf, PathBuf) {
    let e = match earlier {
        None => demo_cube("brimveil-globe-mapper96.fits"),
        Some(seed) => super::change::earlier_globe(dir, "200", seed),
    };
    let l = dir.join("later.fits");
    let run = thiomap(&[
        "demo",
        "--epoch-of",
        e.to_str().unwrap(),
        "--changes",
        "ring,stranger,flow",
        "--out",
        l.to_str().unwrap(),
    ]);
    assert!(run.status.success(), "{}", stderr(&run));
    let (re, rl) = (dir.join("re"), dir.join("rl"));
    for (cube, out) in [(&e, &re), (&l, &rl)] {
        let run = map(cube, out, &[]);
        assert!(run.status.success(), "{}", stderr(&run));
    }
    let zones = dir.join("zones.toml");
    std::fs::write(&zones, ZONES).unwrap();
    (re, rl, zones)
}

fn targets(
    result: &Path,
    since: &Path,
    zones: &Path,
    out: &Path,
    extra: &[&str],
) -> std::process::Output {
    let mut args = vec![
        "targets",
        result.to_str().unwrap(),
        "--since",
        since.to_str().unwrap(),
        "--keep-out",
        zones.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    thiomap(&args)
}

/// (rank, kind, lat, lon, status) per row of targets.csv.
fn rows(out: &Path) -> Vec<(String, String, f64, f64, String)> {
    let text = std::fs::read_to_string(out.join("targets.csv")).unwrap();
    let body: String = text
        .lines()
        .filter(|l| !l.starts_with('#'))
        .collect::<Vec<_>>()
        .join("\n");
    let mut r = csv::Reader::from_reader(body.as_bytes());
    let h = r.headers().unwrap().clone();
    let col = |n: &str| h.iter().position(|x| x == n).unwrap();
    r.records()
        .map(|rec| {
            let rec = rec.unwrap();
            (
                rec[col("rank")].to_string(),
                rec[col("kind")].to_string(),
                rec[col("lat_deg")].parse().unwrap_or(f64::NAN),
                rec[col("lon_deg")].parse().unwrap_or(f64::NAN),
                rec[col("status")].to_string(),
            )
        })
        .collect()
}

fn near(lat: f64, lon: f64, at: (f64, f64), within: f64) -> bool {
    (lat - at.0).abs() < within && (lon - at.1).abs() < within
}

fn check_ranking(out: &Path) {
    let t = rows(out);
    let vent = (8.0, -18.0);
    let ring = (-22.0, 30.0);
    let stranger = (30.0, -45.0);
    assert_eq!(t[0].0, "1");
    assert_eq!(t[0].1, "hot-spot", "the active vent first: {:?}", t[0]);
    assert!(
        near(t[0].2, t[0].3, vent, 4.0),
        "rank 1 at the vent: {:?}",
        t[0]
    );
    let second: Vec<&(String, String, f64, f64, String)> = t[1..3].iter().collect();
    assert!(
        second.iter().all(|r| r.0 == "2" || r.0 == "3"),
        "{second:?}"
    );
    assert!(
        second.iter().any(|r| near(r.2, r.3, ring, 4.0)),
        "the new red ring in ranks 2–3: {second:?}"
    );
    assert!(
        second.iter().any(|r| near(r.2, r.3, stranger, 4.0)),
        "the unknown material in ranks 2–3: {second:?}"
    );
    let flow = t
        .iter()
        .find(|r| r.4.contains("keep-out") && near(r.2, r.3, (-32.0, -11.0), 8.0))
        .unwrap_or_else(|| panic!("the flow under the keep-out zone is listed as excluded: {t:?}"));
    assert!(flow.0.is_empty() && flow.4.starts_with("excluded: overlaps the keep-out area"));
}

#[test]
fn planted_features_rank_as_stated_on_the_shipped_seed() {
    let dir = tempfile::tempdir().unwrap();
    let (re, rl, zones) = scene(dir.path(), None);
    let out = dir.path().join("t");
    let run = targets(&rl, &re, &zones, &out, &["--report"]);
    assert!(run.status.success(), "{}", stderr(&run));
    check_ranking(&out);
    // The caution heads every file and the page.
    let caution = thiomap::targets::CAUTION;
    let csv = std::fs::read_to_string(out.join("targets.csv")).unwrap();
    assert!(csv.starts_with(&format!("# CAUTION: {caution}")));
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("targets.json")).unwrap()).unwrap();
    assert_eq!(json["caution"], caution);
    let page = std::fs::read_to_string(out.join("report.html")).unwrap();
    let lead = page
        .find("caution-lead")
        .expect("the page opens with the caution");
    assert!(lead < page.find("Ranked targets").unwrap());
    assert!(stderr(&run).contains(caution));
    // Reruns give the same files.
    let again = dir.path().join("t2");
    let run = targets(&rl, &re, &zones, &again, &[]);
    assert!(run.status.success());
    for f in ["targets.csv", "targets.json", "targets.png"] {
        assert_eq!(
            std::fs::read(out.join(f)).unwrap(),
            std::fs::read(again.join(f)).unwrap(),
            "{f}"
        );
    }
}

#[test]
fn planted_features_rank_as_stated_on_a_seed_chosen_after_the_profile_and_across_threads() {
    // Seed 8 was picked after the default profile was fixed (a seed not used before).
    let dir = tempfile::tempdir().unwrap();
    let (re, rl, zones) = scene(dir.path(), Some("8"));
    let out = dir.path().join("t");
    let run = targets(&rl, &re, &zones, &out, &[]);
    assert!(run.status.success(), "{}", stderr(&run));
    check_ranking(&out);
    // The later epoch mapped on one thread ranks identically.
    let one = dir.path().join("rl1");
    let run = map(&dir.path().join("later.fits"), &one, &["--threads", "1"]);
    assert!(run.status.success(), "{}", stderr(&run));
    let out1 = dir.path().join("t1");
    let run = targets(&one, &re, &zones, &out1, &[]);
    assert!(run.status.success(), "{}", stderr(&run));
    assert_eq!(
        std::fs::read(out.join("targets.csv")).unwrap(),
        std::fs::read(out1.join("targets.csv")).unwrap()
    );
}

#[test]
fn bad_profiles_and_keep_outs_are_refused_with_nothing_written() {
    let dir = tempfile::tempdir().unwrap();
    let result = dir.path().join("r");
    let run = map(&demo_cube("brimveil-globe-mapper96.fits"), &result, &[]);
    assert!(run.status.success(), "{}", stderr(&run));
    let write = |name: &str, text: &[u8]| {
        let p = dir.path().join(name);
        std::fs::write(&p, text).unwrap();
        p
    };
    let unknown = write("unknown.toml", b"[weights]\nglamour = 2\n");
    let negative = write("negative.toml", b"[weights]\nrarity = -1\n");
    let small = write("small.png", &{
        let img = image::GrayImage::new(10, 10);
        let mut v = Vec::new();
        img.write_to(&mut std::io::Cursor::new(&mut v), image::ImageFormat::Png)
            .unwrap();
        v
    });
    for (flag, file, says) in [
        ("--profile", &unknown, "glamour"),
        ("--profile", &negative, "weights.rarity"),
        ("--keep-out", &small, "does not match"),
    ] {
        let out = dir.path().join("out");
        let run = thiomap(&[
            "targets",
            result.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            flag,
            file.to_str().unwrap(),
        ]);
        assert_eq!(run.status.code(), Some(2), "{}", stderr(&run));
        let msg = stderr(&run);
        assert!(
            msg.contains(says) && msg.contains(file.file_name().unwrap().to_str().unwrap()),
            "{msg}"
        );
        assert!(!out.exists(), "nothing written");
    }
}

#[test]
fn the_default_profile_prints_and_reads_back_as_the_shipped_one() {
    let run = thiomap(&["targets", "--default-profile"]);
    assert!(run.status.success(), "{}", stderr(&run));
    let text = String::from_utf8(run.stdout).unwrap();
    assert!(
        text.contains("activity = 4.0") && text.contains("# "),
        "commented: {text}"
    );
    let p = thiomap::targets::Profile::parse("printed", &text).unwrap();
    let shipped = thiomap::targets::Profile::embedded();
    assert_eq!((p.weights, p.scales), (shipped.weights, shipped.scales));
    let run = thiomap(&["targets"]);
    assert_eq!(
        run.status.code(),
        Some(2),
        "RESULT and --out are needed otherwise"
    );
}
