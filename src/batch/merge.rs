//! Merging results folders into one archive table: `archive.csv` (one row per cube:
//! `cube`, `status`, `area_<class>` for every class id, `mean_<id>` for every member or
//! group, `mean_rmse`, `hot_spots`, `hottest_k`), `archive-hotspots.csv` (every hot spot
//! of every cube), `archive.json`, the joined failure lists, every manifest entry
//! without a result, and a chart of class area fractions by cube.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

use serde::Serialize;

/// One cube of the archive table.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Row {
    pub cube: String,
    /// `ok`, `failed` or `missing`.
    pub status: String,
    pub areas: BTreeMap<String, f64>,
    pub means: BTreeMap<String, f64>,
    pub mean_rmse: Option<f64>,
    /// The observation time the cube declared, if any.
    pub time: Option<String>,
    /// Hot spots, when a thermal fit ran, and the hottest peak temperature, K.
    pub hot_spots: Option<usize>,
    pub hottest_k: Option<f64>,
    /// Why, when failed or missing.
    pub reason: Option<String>,
    /// The results folder, when the cube has one (for the archive report's links).
    #[serde(skip)]
    pub folder: Option<PathBuf>,
}

/// One hot spot of one cube, for following a vent through time.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct SpotRow {
    pub cube: String,
    pub time: Option<String>,
    pub id: u64,
    pub lat_deg: Option<f64>,
    pub lon_deg: Option<f64>,
    pub peak_temperature_k: f64,
    pub peak_temperature_k_stderr: f64,
    pub power_w: Option<f64>,
}

/// The merged archive.
#[derive(Debug, Clone, Serialize)]
pub struct Archive {
    pub rows: Vec<Row>,
    pub classes: Vec<String>,
    pub ids: Vec<String>,
    /// Every hot spot of every cube, by cube then id.
    pub spots: Vec<SpotRow>,
}

fn walk_results(root: &Path, dir: &Path, out: &mut Vec<(String, PathBuf)>) {
    if dir.join("run.json").is_file() && dir.join("summary.json").is_file() {
        let rel = dir
            .strip_prefix(root)
            .unwrap_or(dir)
            .to_string_lossy()
            .into_owned();
        out.push((rel, dir.to_path_buf()));
        return;
    }
    if let Ok(rd) = std::fs::read_dir(dir) {
        let mut subs: Vec<PathBuf> = rd
            .flatten()
            .map(|e| e.path())
            .filter(|p| p.is_dir())
            .collect();
        subs.sort();
        for s in subs {
            walk_results(root, &s, out);
        }
    }
}

/// Merges the results under `dirs` (batch output folders).
pub fn merge(dirs: &[PathBuf]) -> anyhow::Result<Archive> {
    use anyhow::Context as _;
    let mut rows: BTreeMap<String, Row> = BTreeMap::new();
    let mut classes = BTreeSet::new();
    let mut ids: Vec<String> = Vec::new();
    let mut listed: BTreeSet<String> = BTreeSet::new();
    let mut spots: Vec<SpotRow> = Vec::new();
    for dir in dirs {
        if !dir.is_dir() {
            anyhow::bail!("{}: not a folder", dir.display());
        }
        let mut found = Vec::new();
        walk_results(dir, dir, &mut found);
        for (cube, path) in found {
            let text = std::fs::read_to_string(path.join("summary.json"))
                .with_context(|| format!("{}", path.join("summary.json").display()))?;
            let s: serde_json::Value = serde_json::from_str(&text)
                .with_context(|| format!("{}: not JSON", path.join("summary.json").display()))?;
            let mut areas = BTreeMap::new();
            if let Some(c) = s["classes"].as_object() {
                for (k, v) in c {
                    classes.insert(k.clone());
                    areas.insert(k.clone(), v.as_f64().unwrap_or(0.0));
                }
            }
            let mut means = BTreeMap::new();
            if let Some(pm) = s["per_member"].as_array() {
                for m in pm {
                    let id = m["id"].as_str().unwrap_or("").to_string();
                    if id == "shade" || id.is_empty() {
                        continue;
                    }
                    if !ids.contains(&id) {
                        ids.push(id.clone());
                    }
                    means.insert(id, m["mean"].as_f64().unwrap_or(f64::NAN));
                }
            }
            let time = s["observation_time"].as_str().map(String::from);
            let thermal = &s["thermal"];
            let hot = path.join("hotspots.json");
            if hot.is_file() {
                let text =
                    std::fs::read_to_string(&hot).with_context(|| format!("{}", hot.display()))?;
                let h: serde_json::Value = serde_json::from_str(&text)
                    .with_context(|| format!("{}: not JSON", hot.display()))?;
                for sp in h["spots"].as_array().into_iter().flatten() {
                    spots.push(SpotRow {
                        cube: cube.clone(),
                        time: time.clone(),
                        id: sp["id"].as_u64().unwrap_or(0),
                        lat_deg: sp["lat_deg"].as_f64(),
                        lon_deg: sp["lon_deg"].as_f64(),
                        peak_temperature_k: sp["peak_temperature_k"].as_f64().unwrap_or(f64::NAN),
                        peak_temperature_k_stderr: sp["peak_temperature_k_stderr"]
                            .as_f64()
                            .unwrap_or(f64::NAN),
                        power_w: sp["power_w"].as_f64(),
                    });
                }
            }
            rows.insert(
                cube.clone(),
                Row {
                    cube,
                    status: "ok".into(),
                    areas,
                    means,
                    mean_rmse: s["mean_rmse"].as_f64(),
                    time,
                    hot_spots: thermal["hot_spots"].as_u64().map(|n| n as usize),
                    hottest_k: thermal["hottest"]["peak_temperature_k"].as_f64(),
                    reason: None,
                    folder: Some(path.clone()),
                },
            );
        }
        for f in super::books::read_failures(dir)? {
            rows.entry(f.path.clone()).or_insert(Row {
                cube: f.path,
                status: "failed".into(),
                areas: BTreeMap::new(),
                means: BTreeMap::new(),
                mean_rmse: None,
                time: None,
                hot_spots: None,
                hottest_k: None,
                reason: Some(format!("{}: {}", f.stage, f.reason)),
                folder: None,
            });
        }
        listed.extend(super::books::read_listed(dir)?);
    }
    for cube in listed {
        rows.entry(cube.clone()).or_insert(Row {
            cube,
            status: "missing".into(),
            areas: BTreeMap::new(),
            means: BTreeMap::new(),
            mean_rmse: None,
            time: None,
            hot_spots: None,
            hottest_k: None,
            reason: Some(
                "listed in a manifest, but no complete result and no failure was found".into(),
            ),
            folder: None,
        });
    }
    Ok(Archive {
        rows: rows.into_values().collect(),
        classes: classes.into_iter().collect(),
        ids,
        spots,
    })
}

impl Archive {
    /// `archive.csv` text.
    pub fn to_csv(&self) -> anyhow::Result<Vec<u8>> {
        let mut w = csv::Writer::from_writer(Vec::new());
        let mut header = vec!["cube".to_string(), "status".to_string()];
        header.extend(self.classes.iter().map(|c| format!("area_{c}")));
        header.extend(self.ids.iter().map(|i| format!("mean_{i}")));
        header.push("mean_rmse".into());
        header.push("hot_spots".into());
        header.push("hottest_k".into());
        w.write_record(&header)?;
        for r in &self.rows {
            let mut rec = vec![r.cube.clone(), r.status.clone()];
            let num = |v: Option<&f64>| v.map(|x| format!("{x:.6}")).unwrap_or_default();
            let ok = r.status == "ok";
            rec.extend(self.classes.iter().map(|c| {
                if ok {
                    num(Some(r.areas.get(c).unwrap_or(&0.0)))
                } else {
                    String::new()
                }
            }));
            rec.extend(self.ids.iter().map(|i| num(r.means.get(i))));
            rec.push(r.mean_rmse.map(|x| format!("{x:.6e}")).unwrap_or_default());
            rec.push(r.hot_spots.map(|n| n.to_string()).unwrap_or_default());
            rec.push(r.hottest_k.map(|t| format!("{t:.1}")).unwrap_or_default());
            w.write_record(&rec)?;
        }
        Ok(w.into_inner()?)
    }

    /// `archive-hotspots.csv` text: the hot-spot caution, then one row per spot of every
    /// cube (cube, time, id, lat/lon, peak temperature and its error, power).
    pub fn spots_csv(&self) -> anyhow::Result<Vec<u8>> {
        let mut w = csv::Writer::from_writer(Vec::new());
        w.write_record([
            "cube",
            "time",
            "spot",
            "lat_deg",
            "lon_deg",
            "peak_temperature_k",
            "peak_temperature_k_stderr",
            "power_w",
        ])?;
        let opt = |v: Option<f64>, p: usize| v.map_or(String::new(), |v| format!("{v:.p$}"));
        for s in &self.spots {
            w.write_record([
                s.cube.clone(),
                s.time.clone().unwrap_or_default(),
                s.id.to_string(),
                opt(s.lat_deg, 4),
                opt(s.lon_deg, 4),
                format!("{:.1}", s.peak_temperature_k),
                format!("{:.1}", s.peak_temperature_k_stderr),
                s.power_w.map_or(String::new(), |p| format!("{p:.4e}")),
            ])?;
        }
        let mut out = crate::thermal::spots::caution_line().into_bytes();
        out.extend(w.into_inner()?);
        Ok(out)
    }

    /// A stacked bar chart of class area fractions by cube, as SVG — in order of
    /// observation time, labelled by it, when every mapped cube declares one (ISO 8601 text
    /// sorts in time order); by cube otherwise.
    pub fn chart_svg(&self) -> Result<String, String> {
        use plotters::prelude::*;
        crate::render::plot::register_font();
        let mut ok: Vec<&Row> = self.rows.iter().filter(|r| r.status == "ok").collect();
        let by_time = !ok.is_empty() && ok.iter().all(|r| r.time.is_some());
        if by_time {
            ok.sort_by(|a, b| a.time.cmp(&b.time).then(a.cube.cmp(&b.cube)));
        }
        let n = ok.len().max(1);
        let w = (160 + 40 * n as u32).max(640);
        let mut svg = String::new();
        {
            let root = SVGBackend::with_string(&mut svg, (w, 480)).into_drawing_area();
            root.fill(&WHITE).map_err(|e| e.to_string())?;
            let mut chart = ChartBuilder::on(&root)
                .caption(
                    if by_time {
                        "Unit classes across the archive by observation time (area fraction)"
                    } else {
                        "Unit classes across the archive by cube (area fraction)"
                    },
                    (crate::render::plot::FAMILY, 18),
                )
                .margin(12)
                .x_label_area_size(40)
                .y_label_area_size(50)
                .build_cartesian_2d(0f64..n as f64, 0f64..1.4f64) // headroom for the legend
                .map_err(|e| e.to_string())?;
            chart
                .configure_mesh()
                .disable_x_mesh()
                .x_labels(0)
                .y_desc("area fraction")
                .label_style((crate::render::plot::FAMILY, 11))
                .draw()
                .map_err(|e| e.to_string())?;
            for (ci, class) in self.classes.iter().enumerate() {
                // The shipped classes in the colours of their materials; others from a palette.
                let colour = match class.as_str() {
                    "yellow-sulfur" => RGBColor(228, 206, 60),
                    "red-deposit" => RGBColor(178, 52, 38),
                    "orange-sulfur" => RGBColor(200, 128, 50),
                    "so2-rich" => RGBColor(205, 208, 212),
                    "dark-silicate" => RGBColor(70, 68, 64),
                    "unexplained" => RGBColor(255, 0, 255),
                    _ => {
                        let (r, g, b) = Palette99::pick(ci).rgb();
                        RGBColor(r, g, b)
                    }
                }
                .mix(0.9);
                let bars = ok.iter().enumerate().map(|(i, r)| {
                    let below: f64 = self.classes[..ci]
                        .iter()
                        .map(|c| r.areas.get(c).copied().unwrap_or(0.0))
                        .sum();
                    let h = r.areas.get(class).copied().unwrap_or(0.0);
                    Rectangle::new(
                        [(i as f64 + 0.1, below), (i as f64 + 0.9, below + h)],
                        colour.filled(),
                    )
                });
                chart
                    .draw_series(bars)
                    .map_err(|e| e.to_string())?
                    .label(class.clone())
                    .legend(move |(x, y)| {
                        Rectangle::new([(x, y - 5), (x + 12, y + 5)], colour.filled())
                    });
            }
            chart
                .configure_series_labels()
                .position(SeriesLabelPosition::UpperRight)
                .label_font((crate::render::plot::FAMILY, 12))
                .background_style(WHITE.mix(0.85))
                .border_style(BLACK)
                .draw()
                .map_err(|e| e.to_string())?;
            // One label under each bar: the observation time, or the cube.
            let font = (crate::render::plot::FAMILY, 10).into_font().color(&BLACK);
            for (i, r) in ok.iter().enumerate() {
                let label = if by_time {
                    r.time.clone().unwrap_or_default()
                } else {
                    r.cube.clone()
                };
                let (x, y) = chart.backend_coord(&(i as f64 + 0.5, 0.0));
                root.draw_text(
                    &label,
                    &font.clone().pos(plotters::style::text_anchor::Pos::new(
                        plotters::style::text_anchor::HPos::Center,
                        plotters::style::text_anchor::VPos::Top,
                    )),
                    (x, y + 6),
                )
                .map_err(|e| e.to_string())?;
            }
            root.present().map_err(|e| e.to_string())?;
        }
        Ok(svg)
    }
}
