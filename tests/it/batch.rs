//! `thiomap batch` and `thiomap merge`: failure isolation, resumption after a crash at any
//! point (deterministic crash points and a real kill -9), shards, and bad inputs.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use super::support::{stderr, thiomap};

/// An archive of small synthetic tiles and one npy globe, plus one truncated cube.
fn archive(dir: &Path, tiles: usize) -> PathBuf {
    let a = dir.join("archive");
    std::fs::create_dir_all(a.join("sub")).unwrap();
    for i in 0..tiles {
        let out = a.join(format!("tile{i}.fits"));
        let run = thiomap(&[
            "demo",
            "--out",
            out.to_str().unwrap(),
            "--kind",
            "tile",
            "--size",
            "24",
            "--bands",
            "spectrometer-24",
            "--snr",
            "100",
            "--seed",
            &i.to_string(),
        ]);
        assert!(run.status.success(), "{}", stderr(&run));
    }
    let g = a.join("sub").join("globe.npy");
    assert!(thiomap(&[
        "demo",
        "--out",
        g.to_str().unwrap(),
        "--size",
        "24",
        "--bands",
        "spectrometer-24",
        "--seed",
        "7"
    ])
    .status
    .success());
    // Truth and previews are not cubes; a truncated copy is a broken one.
    remove_truth_and_previews(&a);
    let bytes = std::fs::read(a.join("tile0.fits")).unwrap();
    std::fs::write(a.join("broken.fits"), &bytes[..3000]).unwrap();
    a
}

/// Removes what `thiomap demo` writes beside a cube (truth, previews): not cubes.
fn remove_truth_and_previews(dir: &Path) {
    for e in walk(dir) {
        let n = e.to_string_lossy().to_string();
        if n.contains(".truth.") || n.ends_with(".png") {
            std::fs::remove_file(&e).unwrap();
        }
    }
}

fn walk(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    for e in std::fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            out.extend(walk(&p));
        } else {
            out.push(p);
        }
    }
    out.sort();
    out
}

/// Every data product under a batch output (timings.json aside), by relative path.
fn products(out: &Path) -> BTreeMap<String, Vec<u8>> {
    walk(out)
        .into_iter()
        .filter(|p| p.file_name().unwrap() != "timings.json")
        .map(|p| {
            (
                p.strip_prefix(out).unwrap().display().to_string(),
                std::fs::read(&p).unwrap(),
            )
        })
        .collect()
}

fn batch(archive: &Path, out: &Path, extra: &[&str], env: &[(&str, &str)]) -> Output {
    let mut c = Command::new(env!("CARGO_BIN_EXE_thiomap"));
    c.args([
        "batch",
        archive.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ])
    .args(extra);
    for (k, v) in env {
        c.env(k, v);
    }
    c.output().unwrap()
}

/// `thiomap merge RESULTS --out OUT`.
fn merge(results: &Path, out: &Path) -> Output {
    thiomap(&[
        "merge",
        results.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ])
}

#[test]
fn a_broken_cube_is_a_failure_row_and_the_rest_completes() {
    let dir = tempfile::tempdir().unwrap();
    let a = archive(dir.path(), 2);
    let out = dir.path().join("out");
    let run = batch(&a, &out, &["--workers", "2"], &[]);
    assert_eq!(run.status.code(), Some(1), "{}", stderr(&run));
    let failures = std::fs::read_to_string(out.join("failures.csv")).unwrap();
    assert!(failures.contains("broken.fits,read,"), "{failures}");
    for cube in ["tile0.fits", "tile1.fits", "sub/globe.npy"] {
        assert!(
            out.join(cube).join("run.json").is_file(),
            "{cube} incomplete"
        );
    }
    // A rerun skips every complete cube.
    let run = batch(&a, &out, &["--workers", "2"], &[]);
    assert!(
        stderr(&run).contains("0 mapped, 3 already complete, 1 failed"),
        "{}",
        stderr(&run)
    );
}

#[test]
fn a_batch_killed_at_any_write_resumes_to_identical_products() {
    let dir = tempfile::tempdir().unwrap();
    let a = archive(dir.path(), 2);
    let reference = dir.path().join("reference");
    batch(&a, &reference, &["--workers", "1"], &[]);
    let want = products(&reference);
    let writes = want.len();
    for n in [1, 2, 5, 9, 14, 20, 27, writes - 2] {
        let out = dir.path().join(format!("crash-{n}"));
        let crashed = batch(
            &a,
            &out,
            &["--workers", "1"],
            &[("THIOMAP_CRASH_AFTER_WRITES", &n.to_string())],
        );
        assert!(
            !crashed.status.success(),
            "the crash point {n} was not reached"
        );
        let resumed = batch(&a, &out, &["--workers", "1"], &[]);
        assert_eq!(resumed.status.code(), Some(1), "{}", stderr(&resumed));
        let got = products(&out);
        assert_eq!(
            got.keys().collect::<Vec<_>>(),
            want.keys().collect::<Vec<_>>(),
            "after a crash at write {n}"
        );
        for (k, v) in &want {
            assert!(got[k] == *v, "{k} differs after a crash at write {n}");
        }
    }
}

#[test]
fn a_real_kill_9_mid_batch_resumes_to_identical_products() {
    let dir = tempfile::tempdir().unwrap();
    let a = archive(dir.path(), 4);
    let reference = dir.path().join("reference");
    batch(&a, &reference, &["--workers", "2"], &[]);
    let out = dir.path().join("killed");
    let mut child = Command::new(env!("CARGO_BIN_EXE_thiomap"))
        .args([
            "batch",
            a.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--workers",
            "2",
        ])
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    std::thread::sleep(std::time::Duration::from_millis(150));
    // SIGKILL, as `kill -9` sends: no chance to clean up.
    let _ = Command::new("kill")
        .args(["-9", &child.id().to_string()])
        .status();
    let _ = child.wait();
    batch(&a, &out, &["--workers", "2"], &[]);
    assert_eq!(products(&out), products(&reference));
}

#[test]
fn shards_together_equal_one_machine_and_merge_reports_everything() {
    let dir = tempfile::tempdir().unwrap();
    let a = archive(dir.path(), 3);
    let single = dir.path().join("single");
    batch(&a, &single, &[], &[]);
    let sharded = dir.path().join("sharded");
    for k in 1..=2 {
        let run = batch(&a, &sharded, &["--shard", &format!("{k}/2")], &[]);
        assert!(
            run.status.code() == Some(0) || run.status.code() == Some(1),
            "{}",
            stderr(&run)
        );
    }
    // A Slurm array task picks its shard from the environment.
    let slurm = dir.path().join("slurm");
    let run = batch(
        &a,
        &slurm,
        &[],
        &[
            ("SLURM_ARRAY_TASK_ID", "3"),
            ("SLURM_ARRAY_TASK_MIN", "1"),
            ("SLURM_ARRAY_TASK_COUNT", "3"),
        ],
    );
    assert!(run.status.code().is_some(), "{}", stderr(&run));
    assert!(slurm.join("manifest-shard-3-of-3.txt").is_file());
    assert!(
        sharded.join("failures-shard-1-of-2.csv").is_file()
            && sharded.join("failures-shard-2-of-2.csv").is_file()
    );
    let m1 = dir.path().join("m1");
    let m2 = dir.path().join("m2");
    assert!(merge(&single, &m1).status.success());
    assert!(merge(&sharded, &m2).status.success());
    let t1 = std::fs::read_to_string(m1.join("archive.csv")).unwrap();
    assert_eq!(t1, std::fs::read_to_string(m2.join("archive.csv")).unwrap());
    assert!(t1.lines().next().unwrap().starts_with("cube,status,area_"));
    assert!(t1.contains("broken.fits,failed"), "{t1}");
    assert_eq!(t1.lines().filter(|l| l.contains(",ok,")).count(), 4);
    assert!(m1.join("archive-classes.svg").is_file() && m1.join("archive.json").is_file());
}

#[test]
fn bad_archive_inputs_get_clear_messages_and_spare_the_rest() {
    let dir = tempfile::tempdir().unwrap();
    let a = archive(dir.path(), 2);
    // An output folder inside the archive is refused.
    let run = batch(&a, &a.join("results"), &[], &[]);
    assert_eq!(run.status.code(), Some(2));
    assert!(
        stderr(&run).contains("inside the archive"),
        "{}",
        stderr(&run)
    );
    // A manifest with a missing, a duplicated and an escaping entry.
    let manifest = dir.path().join("list.txt");
    std::fs::write(
        &manifest,
        "tile0.fits\nmissing.fits\ntile0.fits\n../outside.fits\ntile1.fits\n",
    )
    .unwrap();
    let out = dir.path().join("out");
    // A write failure for one cube: a file sits where its results folder must go.
    std::fs::create_dir_all(&out).unwrap();
    std::fs::write(out.join("tile1.fits"), b"in the way").unwrap();
    let run = batch(&a, &out, &["--manifest", manifest.to_str().unwrap()], &[]);
    assert_eq!(run.status.code(), Some(1), "{}", stderr(&run));
    let f = std::fs::read_to_string(out.join("failures.csv")).unwrap();
    assert!(f.contains("missing.fits,read,"), "{f}");
    assert!(f.contains("tile0.fits,manifest,listed twice"), "{f}");
    assert!(
        f.contains("../outside.fits,manifest,") && f.contains("outside the output folder"),
        "{f}"
    );
    assert!(f.contains("tile1.fits,write,"), "{f}");
    assert!(
        out.join("tile0.fits").join("run.json").is_file(),
        "the rest of the batch is unharmed"
    );
    assert_eq!(
        std::fs::read(out.join("tile1.fits")).unwrap(),
        b"in the way"
    );
}

#[test]
fn the_archive_chart_follows_observation_time_when_cubes_carry_one() {
    let dir = tempfile::tempdir().unwrap();
    let a = dir.path().join("archive");
    std::fs::create_dir_all(&a).unwrap();
    // Two epochs; the later one sorts first by name, so only time can order them.
    for (name, time, seed) in [
        ("a-late.npy", "2031-06-02T10:00:00Z", "1"),
        ("b-early.npy", "2031-05-01T08:00:00Z", "2"),
    ] {
        let out = a.join(name);
        let run = thiomap(&[
            "demo",
            "--out",
            out.to_str().unwrap(),
            "--kind",
            "tile",
            "--size",
            "24",
            "--bands",
            "spectrometer-24",
            "--seed",
            seed,
        ]);
        assert!(run.status.success(), "{}", stderr(&run));
        let side = out.with_extension("toml");
        let text = std::fs::read_to_string(&side).unwrap();
        std::fs::write(
            &side,
            text.replace("[about]\n", &format!("[about]\ntime = \"{time}\"\n")),
        )
        .unwrap();
    }
    remove_truth_and_previews(&a);
    let out = dir.path().join("out");
    assert_eq!(batch(&a, &out, &[], &[]).status.code(), Some(0));
    let merged = dir.path().join("merged");
    assert!(merge(&out, &merged).status.success());
    let svg = std::fs::read_to_string(merged.join("archive-classes.svg")).unwrap();
    assert!(svg.contains("by observation time"), "the chart is by time");
    let (early, late) = (
        svg.find("2031-05-01").unwrap(),
        svg.find("2031-06-02").unwrap(),
    );
    assert!(early < late, "the earlier epoch is drawn first");
}
