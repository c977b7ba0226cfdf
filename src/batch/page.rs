//! The archive's page (`merge --report`), built from the report's pieces: the class-area chart over the cubes, the table
//! of cubes with their status and links to their own pages, the failures, and the hot-spot
//! timeline. Links are relative to the archive folder, so the two can move together.

use std::path::{Component, Path, PathBuf};

use super::merge::Archive;
use crate::report::charts::{self, Line};
use crate::report::page::{cautions_box, esc, frame, img, sig, sortable_heads};

/// `to` relative to the folder `from` (both made absolute first), `/`-separated.
fn relative(from: &Path, to: &Path) -> Option<String> {
    let (from, to) = (from.canonicalize().ok()?, to.canonicalize().ok()?);
    let (f, t): (Vec<Component>, Vec<Component>) =
        (from.components().collect(), to.components().collect());
    let common = f.iter().zip(&t).take_while(|(a, b)| a == b).count();
    let mut out = PathBuf::new();
    for _ in common..f.len() {
        out.push("..");
    }
    for c in &t[common..] {
        out.push(c.as_os_str());
    }
    Some(
        out.components()
            .map(|c| c.as_os_str().to_string_lossy().into_owned())
            .collect::<Vec<_>>()
            .join("/"),
    )
}

/// Percent-encodes what a relative link may not hold as is.
fn href(path: &str) -> String {
    path.bytes()
        .map(|b| match b {
            b'A'..=b'Z' | b'a'..=b'z' | b'0'..=b'9' | b'-' | b'_' | b'.' | b'/' | b'~' => {
                (b as char).to_string()
            }
            _ => format!("%{b:02X}"),
        })
        .collect()
}

/// The archive page. `out` is the archive folder (where the page is written);
/// `archive_sha256` the hash of `archive.json`.
pub fn page(archive: &Archive, out: &Path, chart_svg: &str, archive_sha256: &str) -> String {
    let name = out
        .canonicalize()
        .ok()
        .and_then(|p| p.file_name().map(|n| n.to_string_lossy().into_owned()))
        .unwrap_or_else(|| out.display().to_string());
    let made_by = format!(
        "made by thiomap {} from archive {} (archive.json sha256 {})",
        crate::VERSION,
        name,
        &archive_sha256[..16.min(archive_sha256.len())]
    );
    let count = |s: &str| archive.rows.iter().filter(|r| r.status == s).count();
    let mut b = String::new();
    b += "<nav aria-label=\"Sections\"><ul><li><a href=\"#areas\">Class areas</a></li>\
          <li><a href=\"#cubes\">Cubes</a></li><li><a href=\"#failures\">Failures</a></li>\
          <li><a href=\"#timeline\">Hot-spot timeline</a></li></ul></nav>\n";
    b += &cautions_box();
    b += &format!(
        "<p>{} cubes: {} ok, {} failed, {} missing.</p>",
        archive.rows.len(),
        count("ok"),
        count("failed"),
        count("missing")
    );
    b += &format!(
        "<section id=\"areas\" aria-labelledby=\"areas-h\"><h2 id=\"areas-h\">Class areas by \
         cube</h2><p class=\"how\">Each cube's area fraction per surface class, over time \
         when every cube declares its observation time, else by cube name.</p>{}</section>\n",
        img(
            "image/svg+xml",
            chart_svg.as_bytes(),
            "Chart of each cube's area fraction per surface class",
            "wide"
        )
    );
    let mut rows: Vec<&super::merge::Row> = archive.rows.iter().collect();
    // Like the chart: by observation time when every cube declares one, else by name.
    if rows.iter().all(|r| r.time.is_some()) {
        rows.sort_by(|a, b| a.time.cmp(&b.time).then(a.cube.cmp(&b.cube)));
    }
    b += "<section id=\"cubes\" aria-labelledby=\"cubes-h\"><h2 id=\"cubes-h\">Cubes</h2>\
          <p class=\"how\">One row per cube: its status, time, mean fit RMSE, hot spots and a \
          link to its own report where one was written. Click a heading to sort.</p>\
          <div class=\"scroll\"><table class=\"sortable\"><thead><tr>";
    let heads: Vec<String> = [
        "cube",
        "status",
        "time",
        "mean fit RMSE",
        "hot spots",
        "hottest, K",
        "report",
    ]
    .iter()
    .map(|h| h.to_string())
    .collect();
    b += &sortable_heads(&heads);
    for r in &rows {
        let link = r
            .folder
            .as_ref()
            .map(|f| f.join("report.html"))
            .filter(|p| p.is_file())
            .and_then(|p| relative(out, &p))
            .map(|rel| format!("<a href=\"{}\">report</a>", esc(&href(&rel))))
            .unwrap_or_else(|| "—".into());
        b += &format!(
            "<tr><td>{}</td><td>{}</td><td>{}</td><td data-v=\"{}\">{}</td><td>{}</td>\
             <td>{}</td><td>{link}</td></tr>",
            esc(&r.cube),
            esc(&r.status),
            esc(r.time.as_deref().unwrap_or("—")),
            r.mean_rmse.map(|v| v.to_string()).unwrap_or_default(),
            r.mean_rmse.map(|v| sig(v, 3)).unwrap_or("—".into()),
            r.hot_spots.map(|v| v.to_string()).unwrap_or("—".into()),
            r.hottest_k.map(|v| format!("{v:.0}")).unwrap_or("—".into()),
        );
    }
    b += "</tbody></table></div></section>\n";
    b += "<section id=\"failures\" aria-labelledby=\"failures-h\"><h2 id=\"failures-h\">\
          Failures</h2><p class=\"how\">Cubes that failed, and cubes a manifest lists that \
          have no result.</p>";
    let failed: Vec<_> = rows.iter().filter(|r| r.status != "ok").collect();
    if failed.is_empty() {
        b += "<p>None.</p>";
    } else {
        b += "<ul>";
        for r in failed {
            b += &format!(
                "<li><code>{}</code> ({}): {}</li>",
                esc(&r.cube),
                esc(&r.status),
                esc(r.reason.as_deref().unwrap_or(""))
            );
        }
        b += "</ul>";
    }
    b += "</section>\n";
    b += "<section id=\"timeline\" aria-labelledby=\"timeline-h\"><h2 id=\"timeline-h\">\
          Hot-spot timeline</h2><p class=\"how\">The hottest spot of each cube with a thermal \
          fit, in cube order, and every spot with its cube and time.</p>";
    let hot: Vec<(f64, f64)> = rows
        .iter()
        .enumerate()
        .filter_map(|(i, r)| r.hottest_k.map(|t| ((i + 1) as f64, t)))
        .collect();
    if hot.is_empty() {
        b += "<p>No cube has hot spots (or none ran a thermal fit).</p>";
    } else {
        let xs: Vec<f64> = hot.iter().map(|h| h.0).collect();
        let series = [Line {
            name: "hottest spot's peak temperature".into(),
            xs: &xs,
            ys: hot.iter().map(|h| h.1).collect(),
            spread: None,
            style: Some(1),
        }];
        b += &charts::lines(
            "Hottest spot per cube",
            "cube (row of the table above)",
            "peak temperature, K",
            &series,
            false,
        );
        b += "<div class=\"scroll\"><table><thead><tr><th scope=\"col\">cube</th><th \
              scope=\"col\">time</th><th scope=\"col\">spot</th><th scope=\"col\">lat, lon \
              (°)</th><th scope=\"col\">peak T, K</th><th scope=\"col\">power, W</th></tr>\
              </thead><tbody>";
        for s in &archive.spots {
            b += &format!(
                "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{:.0} ± {:.1}</td><td>{}</td></tr>",
                esc(&s.cube),
                esc(s.time.as_deref().unwrap_or("—")),
                s.id,
                match (s.lat_deg, s.lon_deg) {
                    (Some(a), Some(o)) => format!("{a:.2}, {o:.2}"),
                    _ => "—".into(),
                },
                s.peak_temperature_k,
                s.peak_temperature_k_stderr,
                s.power_w.map(|p| sig(p, 3)).unwrap_or("—".into())
            );
        }
        b += "</tbody></table></div>";
    }
    b += "</section>\n";
    frame(&format!("thiomap archive: {name}"), &made_by, &b, None)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn links_are_relative_and_encoded() {
        let d = tempfile::tempdir().unwrap();
        std::fs::create_dir_all(d.path().join("archive")).unwrap();
        std::fs::create_dir_all(d.path().join("batch/a b")).unwrap();
        std::fs::write(d.path().join("batch/a b/report.html"), "x").unwrap();
        let rel = relative(
            &d.path().join("archive"),
            &d.path().join("batch/a b/report.html"),
        )
        .unwrap();
        assert_eq!(rel, "../batch/a b/report.html");
        assert_eq!(href(&rel), "../batch/a%20b/report.html");
    }
}
