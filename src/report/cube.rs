//! The page of one results folder: its frame of sections in order, and the text sections
//! (overview, units, fit quality, hot spots, provenance). The figure sections are in
//! `figures.rs`.

use super::figures::{abundance, percentile, spectra_section};
use super::inspect::{Inspector, Spectra};
use super::page::{cautions_box, esc, fmt, frame, img, missing, section, sig, sortable_heads};
use super::{charts, Folder};

/// The page of one results folder.
pub fn cube_page(f: &Folder, insp: &Inspector, spectra: Option<&Spectra>) -> String {
    let summary = f.summary.clone().unwrap_or(serde_json::Value::Null);
    let run = f.run.clone().unwrap_or(serde_json::Value::Null);
    let cube_name = summary["cube"]
        .as_str()
        .or_else(|| run["inputs"][0]["name"].as_str())
        .unwrap_or("(cube not named)")
        .to_string();
    let title = format!("thiomap report: {cube_name}");
    let made_by = format!(
        "made by thiomap {} from {} (run.json sha256 {})",
        crate::VERSION,
        f.name,
        f.run_sha256
            .as_deref()
            .map(|h| &h[..16])
            .unwrap_or("unavailable: no run.json")
    );
    let mut b = String::new();
    b += "<nav aria-label=\"Sections\"><ul>";
    for (id, t) in [
        ("overview", "Overview"),
        ("units", "Units"),
        ("abundance", "Abundance maps"),
        ("spectra", "Spectra"),
        ("quality", "Fit quality"),
        ("hotspots", "Hot spots"),
        ("provenance", "Provenance"),
    ] {
        b += &format!("<li><a href=\"#{id}\">{t}</a></li>");
    }
    b += "</ul></nav>\n";
    if !f.problems.is_empty() {
        b += "<div class=\"problems\" role=\"note\"><h2>What this page could not show</h2><ul>";
        for p in &f.problems {
            b += &format!("<li>{}</li>", esc(p));
        }
        b += "</ul></div>\n";
    }
    b += &cautions_box();
    b += &overview(f, insp, &summary, &run, &cube_name);
    b += &units(f, &summary);
    b += &abundance(f);
    b += &spectra_section(f, spectra);
    b += &quality(f, &summary);
    b += &hot_spots(f);
    b += &provenance(f, &run);
    frame(&title, &made_by, &b, Some(&insp.json))
}

fn overview(
    f: &Folder,
    insp: &Inspector,
    summary: &serde_json::Value,
    run: &serde_json::Value,
    cube_name: &str,
) -> String {
    let mut s = String::from("<div class=\"pair\">");
    match f.pictures.get("true-colour.png") {
        Some(p) => {
            s += "<figure>";
            s += &img(
                "image/png",
                p,
                &format!("{cube_name} in true colour (CIE 1931 colour matching under D65, sRGB)"),
                "map",
            );
            s += "<figcaption>True colour (CIE 1931, D65 → sRGB).</figcaption></figure>";
        }
        None => s += &missing("true-colour.png is missing."),
    }
    s += &format!(
        "<figure class=\"inspector-map\"><canvas id=\"unitmap\" tabindex=\"0\" role=\"img\" \
         aria-label=\"Unit map, interactive: hover, tap or use the arrow keys to inspect a \
         pixel\" width=\"{}\" height=\"{}\"></canvas><figcaption>Surface units. Hover, tap, \
         or focus the map and use the arrow keys (Shift for steps of ten). {}</figcaption>\
         </figure>",
        insp.rows.div_ceil(insp.step).max(1),
        insp.cols.div_ceil(insp.step).max(1),
        esc(&if insp.step > 1 {
            format!(
                "The inspector samples every {}th pixel in each direction of the {} × {} \
                 cube (factor {}).",
                insp.step, insp.rows, insp.cols, insp.step
            )
        } else {
            format!("Every pixel of the {} × {} cube.", insp.rows, insp.cols)
        })
    );
    s += "</div>\n";
    s += "<div id=\"inspector\" class=\"inspector\" aria-live=\"polite\">\
          <p class=\"how\">Pick a pixel on the unit map to see its spectrum against its fit, \
          its abundances with standard errors, and its unit.</p></div>\n";
    for n in &insp.notes {
        s += &missing(n);
    }
    if let Some(svg) = f.svgs.get("units-legend.svg") {
        s += &img(
            "image/svg+xml",
            svg.as_bytes(),
            "Legend of the unit map: each unit's colour, label, class and area",
            "legend-img",
        );
    }
    let lib = &run["library"];
    let recipe = &run["recipe"];
    let facts: Vec<(&str, String)> = vec![
        ("Cube", cube_name.to_string()),
        (
            "Target",
            summary["target"]
                .as_str()
                .unwrap_or("not declared by the cube")
                .into(),
        ),
        (
            "Time",
            summary["observation_time"]
                .as_str()
                .unwrap_or("not declared by the cube")
                .into(),
        ),
        (
            "Instrument",
            summary["instrument"]
                .as_str()
                .unwrap_or("not declared by the cube")
                .into(),
        ),
        (
            "Bands",
            format!(
                "{} used; weights from {}",
                fmt(&summary["bands_used"]),
                fmt(&summary["band_weights"]["source"])
            ),
        ),
        (
            "Library",
            format!(
                "{} {} (sha256 {})",
                fmt(&lib["name"]),
                fmt(&lib["version"]),
                lib["sha256"]
                    .as_str()
                    .map(|h| &h[..h.len().min(16)])
                    .unwrap_or("—")
            ),
        ),
        (
            "Recipe",
            format!(
                "solver {}, shade {}, subset {}, photometry {}, thermal {}, units {}, seed {}",
                fmt(&recipe["solver"]),
                fmt(&recipe["shade"]),
                fmt(&recipe["subset"]),
                fmt(&recipe["photometry"]),
                fmt(&recipe["thermal"]),
                fmt(&recipe["units"]),
                fmt(&recipe["seed"])
            ),
        ),
    ];
    s += "<dl class=\"facts\">";
    for (k, v) in facts {
        s += &format!("<dt>{k}</dt><dd>{}</dd>", esc(&v));
    }
    s += "</dl>\n";
    section(
        "overview",
        "Overview",
        "The cube in true colour beside its surface units. The unit map is the pixel \
         inspector: the panel below it shows the pixel under the cursor.",
        &s,
    )
}

fn units(f: &Folder, summary: &serde_json::Value) -> String {
    let Some((h, rows)) = &f.units_csv else {
        return section(
            "units",
            "Units",
            "The surface units and their mean composition.",
            &missing("units.csv is missing: no unit table."),
        );
    };
    let col = |n: &str| h.iter().position(|x| x == n);
    let members: Vec<String> = h
        .iter()
        .filter_map(|x| x.strip_prefix("mean_"))
        .filter(|x| *x != "rmse")
        .map(String::from)
        .collect();
    let area_col = col("area_km2").or(col("area_fraction"));
    let area_name = if col("area_km2").is_some() {
        "area, km²"
    } else {
        "area, fraction"
    };
    let mut s = format!(
        "<p class=\"note\">Areas: {}.</p><div class=\"scroll\"><table class=\"sortable\" \
         id=\"units-table\"><thead><tr>",
        esc(summary["area_weighting"]
            .as_str()
            .unwrap_or("weighting not stated (summary.json missing)"))
    );
    let mut heads = vec![
        "unit".to_string(),
        "label".into(),
        "class".into(),
        "pixels".into(),
        area_name.into(),
    ];
    heads.extend(members.iter().map(|m| format!("{m} (mean ± sd)")));
    heads.push("mean fit RMSE".into());
    s += &sortable_heads(&heads);
    for r in rows {
        let get = |i: Option<usize>| i.and_then(|i| r.get(i)).cloned().unwrap_or_default();
        let colour = get(col("colour"));
        let swatch = if colour.len() == 7 && colour.starts_with('#') {
            format!(
                "<span class=\"swatch\" style=\"background:{}\"></span>",
                esc(&colour)
            )
        } else {
            String::new()
        };
        s += "<tr>";
        s += &format!(
            "<td data-v=\"{0}\">{swatch}{0}</td>",
            esc(&get(col("unit")))
        );
        for c in ["label", "class", "pixels"] {
            s += &format!("<td>{}</td>", esc(&get(col(c))));
        }
        let area = get(area_col);
        s += &format!("<td data-v=\"{0}\">{0}</td>", esc(&area));
        for m in &members {
            let mean = get(col(&format!("mean_{m}")));
            let sd = get(col(&format!("std_{m}")));
            let show = match (mean.parse::<f64>(), sd.parse::<f64>()) {
                (Ok(a), Ok(b)) => format!("{a:.3} ± {b:.3}"),
                _ => mean.clone(),
            };
            s += &format!("<td data-v=\"{}\">{}</td>", esc(&mean), esc(&show));
        }
        let rmse = get(col("mean_rmse"));
        s += &format!(
            "<td data-v=\"{}\">{}</td>",
            esc(&rmse),
            esc(&rmse
                .parse::<f64>()
                .map(|v| sig(v, 3))
                .unwrap_or(rmse.clone()))
        );
        s += "</tr>";
    }
    s += "</tbody></table></div>\n";
    if let Some(p) = f.pictures.get("units.png") {
        s += "<figure>";
        s += &img(
            "image/png",
            p,
            "The unit map as units.png draws it: each unit in its colour, unexplained pixels \
             marked, hot spots ringed",
            "map",
        );
        s += "<figcaption>units.png: units in their materials' colours; unexplained pixels \
              marked; hot spots ringed and labelled.</figcaption></figure>";
    }
    section(
        "units",
        "Units",
        "One row per surface unit: its name from the naming rules, class, size, mean \
         composition with its spread over the unit's pixels, and how well the pixels fit. \
         Click a column heading to sort.",
        &s,
    )
}

fn quality(f: &Folder, summary: &serde_json::Value) -> String {
    let mut s = String::new();
    if let Some(p) = f.pictures.get("fit-rmse.png") {
        s += "<figure>";
        s += &img(
            "image/png",
            p,
            "Map of the fit RMSE per pixel, grey ramp clipped at the 99th percentile",
            "map",
        );
        s += "<figcaption>fit-rmse.png: the RMSE of each pixel's fit.</figcaption></figure>";
    }
    match &f.rmse {
        Some(r) => {
            let v: Vec<f32> = r.iter().copied().filter(|v| v.is_finite()).collect();
            let hi = percentile(&v, 0.99).max(1e-9) as f64;
            s += &charts::histogram(
                "Fit RMSE over the unmixed pixels (99th percentile and above in the last bin)",
                "fit RMSE",
                &v,
                (0.0, hi),
                40,
            );
        }
        None => s += &missing("fit-rmse.fits is missing: no RMSE histogram."),
    }
    let mut rows: Vec<(String, String)> = Vec::new();
    for (k, name) in [
        ("unmixed_pixels", "pixels unmixed"),
        ("unexplained_pixels", "unexplained (fail the χ² test)"),
        (
            "boundary_pixels",
            "at a constraint boundary (some abundance at 0)",
        ),
        ("nodata_pixels", "no data"),
        ("condition_number", "condition number of the model"),
        ("mean_rmse", "mean fit RMSE"),
    ] {
        if !summary[k].is_null() {
            rows.push((name.into(), fmt(&summary[k])));
        }
    }
    if let Some(t) = summary["unexplained_test"].as_object() {
        rows.push((
            "unexplained test".into(),
            format!(
                "false-alarm probability {}, noise σ {} ({}), model error {}",
                fmt(&t["false_alarm"].clone()),
                fmt(&t["noise_sigma"].clone()),
                fmt(&t["noise_source"].clone()),
                fmt(&t["model_error"].clone())
            ),
        ));
    }
    if let Some(p) = summary["closest_pairs"].as_array() {
        let list: Vec<String> = p
            .iter()
            .map(|x| {
                format!(
                    "{} – {}: {}°",
                    fmt(&x["a"]),
                    fmt(&x["b"]),
                    fmt(&x["angle_deg"])
                )
            })
            .collect();
        if !list.is_empty() {
            rows.push(("closest pairs (spectral angle)".into(), list.join("; ")));
        }
    }
    if let Some(g) = summary["groups"].as_array() {
        let list: Vec<String> = g
            .iter()
            .map(|x| {
                let m: Vec<String> = x["members"]
                    .as_array()
                    .into_iter()
                    .flatten()
                    .map(fmt)
                    .collect();
                format!("{} = {}", fmt(&x["id"]), m.join(" + "))
            })
            .collect();
        rows.push((
            "groups (members the bands cannot separate, unmixed as one)".into(),
            if list.is_empty() {
                "none".into()
            } else {
                list.join("; ")
            },
        ));
    }
    if let Some(w) = summary["warnings"].as_array() {
        for x in w {
            rows.push(("warning".into(), fmt(x)));
        }
    }
    if rows.is_empty() {
        s += &missing("summary.json is missing: no counts or diagnostics.");
    } else {
        s += "<div class=\"scroll\"><table><tbody>";
        for (k, v) in rows {
            s += &format!(
                "<tr><th scope=\"row\">{}</th><td>{}</td></tr>",
                esc(&k),
                esc(&v)
            );
        }
        s += "</tbody></table></div>";
    }
    section(
        "quality",
        "Fit quality",
        "How well the model explains each pixel, and how well the bands separate the members. \
         A large condition number or a small angle between two members means their \
         abundances trade against each other; their standard errors say by how much.",
        &s,
    )
}

fn hot_spots(f: &Folder) -> String {
    let mut s = String::new();
    match &f.hotspots {
        Some((comments, (h, rows))) => {
            for c in comments {
                s += &format!("<p class=\"note\">{}</p>", esc(c));
            }
            if let Some(p) = f.pictures.get("hotspots.png") {
                s += "<figure>";
                s += &img(
                    "image/png",
                    p,
                    "Hot spots ringed on the true-colour picture, labelled by id and temperature",
                    "map",
                );
                s += "<figcaption>hotspots.png</figcaption></figure>";
            }
            if rows.is_empty() {
                s += "<p>No hot spot was found.</p>";
            } else {
                s += "<div class=\"scroll\"><table class=\"sortable\"><thead><tr>";
                s += &sortable_heads(h);
                for r in rows {
                    s += "<tr>";
                    for v in r {
                        let show = if v.parse::<i64>().is_ok() {
                            v.clone()
                        } else {
                            v.parse::<f64>().map(|x| sig(x, 4)).unwrap_or(v.clone())
                        };
                        s += &format!("<td data-v=\"{}\">{}</td>", esc(v), esc(&show));
                    }
                    s += "</tr>";
                }
                s += "</tbody></table></div>";
            }
        }
        None => s += "<p>No thermal fit ran for this cube (no hotspots.csv).</p>",
    }
    if !f.others.is_empty() {
        s += "<h3>Other products in the folder</h3><p>Not shown on this page: ";
        s += &f
            .others
            .iter()
            .map(|o| format!("<code>{}</code>", esc(o)))
            .collect::<Vec<_>>()
            .join(", ");
        s += ".</p>";
    }
    section(
        "hotspots",
        "Hot spots",
        "Regions where thermal emission was fitted with the reflected light: temperature, hot \
         area and radiated power, with their errors.",
        &s,
    )
}

fn provenance(f: &Folder, run: &serde_json::Value) -> String {
    let mut s = String::new();
    if run.is_null() {
        s += &missing("run.json is missing: no provenance.");
    } else {
        s += "<div class=\"scroll\"><table><tbody>";
        s += &format!(
            "<tr><th scope=\"row\">tool</th><td>{} {} ({})</td></tr>",
            esc(&fmt(&run["tool"])),
            esc(&fmt(&run["version"])),
            esc(&fmt(&run["command"]))
        );
        for i in run["inputs"].as_array().into_iter().flatten() {
            s += &format!(
                "<tr><th scope=\"row\">input</th><td>{} <code>sha256 {}</code></td></tr>",
                esc(&fmt(&i["name"])),
                esc(&fmt(&i["sha256"]))
            );
        }
        let lib = &run["library"];
        s += &format!(
            "<tr><th scope=\"row\">library</th><td>{} {} <code>sha256 {}</code>; band \
             weighting: {}</td></tr>",
            esc(&fmt(&lib["name"])),
            esc(&fmt(&lib["version"])),
            esc(&fmt(&lib["sha256"])),
            esc(&fmt(&lib["band_weighting"]))
        );
        if !lib["solar_spectrum"].is_null() {
            s += &format!(
                "<tr><th scope=\"row\">solar spectrum</th><td>{}</td></tr>",
                esc(&fmt(&lib["solar_spectrum"]["source"]))
            );
        }
        if let Some(c) = run["conventions"].as_object() {
            for (k, v) in c {
                s += &format!(
                    "<tr><th scope=\"row\">{}</th><td>{}</td></tr>",
                    esc(&k.replace('_', " ")),
                    esc(&fmt(v))
                );
            }
        }
        s += &format!(
            "<tr><th scope=\"row\">stages</th><td>{} (their seconds are in timings.json; they \
             change between reruns, so this page leaves them out)</td></tr>",
            esc(&if f.stages.is_empty() {
                "timings.json missing".to_string()
            } else {
                f.stages.join(" → ")
            })
        );
        s += "</tbody></table></div>";
        let recipe_text = serde_json::from_value::<crate::recipe::Recipe>(run["recipe"].clone())
            .map(|r| r.to_toml())
            .unwrap_or_else(|_| serde_json::to_string_pretty(&run["recipe"]).unwrap_or_default());
        s += "<h3>The full recipe</h3><p class=\"how\">As TOML: save it as a file and pass it \
              to <code>--recipe</code> to run the same analysis again.</p>";
        s += &format!("<pre>{}</pre>", esc(&recipe_text));
    }
    section(
        "provenance",
        "Provenance",
        "What produced these results: the inputs with their hashes, the tool, the library \
         and the whole recipe.",
        &s,
    )
}
