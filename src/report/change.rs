//! The page of a `compare` folder: the change picture, the regions table, how the test
//! was made, and what cancels and what does not.

use super::page::{cautions_box, esc, frame, img, section, sig, sortable_heads};
use crate::change::{regions::Kind, Comparison, Grid};
use crate::results::change::CompareRun;

/// What a difference of two epochs can and cannot show (the module doc of
/// [`crate::change`], for readers of the page).
pub const WHAT_CANCELS: &str = "A library member that misfits the surface in the same way in \
    both epochs biases both abundances alike, and the difference cancels. What does not \
    cancel: a different view (phase, incidence and emission change how a misfit spectrum is \
    unmixed, and photometric normalisation is only as good as its law), a calibration drift \
    between the epochs, and material outside the library that appears or goes (it shows as \
    change and as unexplained pixels).";

/// The whole page, as HTML text.
pub fn page(c: &Comparison, run: &CompareRun, png: &[u8]) -> String {
    let mut body = cautions_box();
    body += &change_section(c, run, png);
    let title = match &run.target {
        Some(t) => format!("Change — {t}"),
        None => "Change between two epochs".to_string(),
    };
    frame(&title, &made_by(&run.inputs), &body, None)
}

/// "made by thiomap VERSION from A, B (run.json sha256 …, sha256 …)", as every page says it.
pub(super) fn made_by(inputs: &[(&str, String, String)]) -> String {
    let names: Vec<&str> = inputs.iter().map(|(_, n, _)| n.as_str()).collect();
    let shas: Vec<String> = inputs
        .iter()
        .map(|(_, _, s)| format!("sha256 {}", &s[..16.min(s.len())]))
        .collect();
    format!(
        "made by thiomap {} from {} (run.json {})",
        crate::VERSION,
        names.join(", "),
        shas.join(", ")
    )
}
/// The change section: shared by the compare page and the targets page (`--since`).
pub fn change_section(c: &Comparison, run: &CompareRun, png: &[u8]) -> String {
    let mut inner = String::new();
    inner += "<div class=\"pair\"><figure>";
    inner += &img(
        "image/png",
        png,
        "Change over the later true colour: vermillion cells changed significantly, \
         yellow hot spots appeared, blue ones went out; numbers mark the largest regions",
        "map",
    );
    inner += "<figcaption>Vermillion: significant change of composition. Yellow: a hot spot \
              appeared. Blue: a hot spot went out. Numbers: regions, as in the table.\
              </figcaption></figure></div>\n";
    let grid = match c.grid {
        Grid::Pixels { rows, cols } => format!("pixel for pixel, {cols} × {rows}"),
        Grid::LatLon {
            cell_deg,
            rows,
            cols,
            ..
        } => format!(
            "a {}° latitude/longitude grid of {cols} × {rows} cells over the overlap \
             (bilinear abundances with propagated variances; nearest units)",
            sig(cell_deg, 3)
        ),
    };
    inner += "<dl class=\"facts\">";
    for (k, v) in [
        ("Grid", grid),
        (
            "Tested",
            format!(
                "{} cells with data in both ({} left out for emission above {}°, {} at unit \
                 boundaries of a resampled grid)",
                c.counts.tested,
                c.counts.emission_left_out,
                sig(run.params.max_emission_deg, 3),
                c.counts.edge_left_out
            ),
        ),
        (
            "Significant",
            format!(
                "{} cells, {} % of the tested area ({})",
                c.counts.significant,
                sig(100.0 * c.significant_area_fraction, 3),
                c.area_basis.describe()
            ),
        ),
        (
            "Test",
            format!(
                "χ² = Δfᵀ(C₁ + C₂)⁺Δf on {} degrees of freedom; Benjamini & Hochberg (1995) at \
                 a false-discovery rate of {}; largest p called significant {}",
                c.dof,
                sig(run.params.fdr, 3),
                sig(c.p_threshold, 3)
            ),
        ),
        ("Covariances", c.covariance.describe()),
        ("What cancels", WHAT_CANCELS.to_string()),
    ] {
        inner += &format!("<dt>{}</dt><dd>{}</dd>", esc(k), esc(&v));
    }
    inner += "</dl>\n";
    if c.regions.is_empty() {
        inner += "<p>No region changed significantly.</p>";
    } else {
        let heads: Vec<String> = [
            "Region",
            "Kind",
            "Cells",
            "Area %",
            "Lat °",
            "Lon °",
            "What changed",
        ]
        .map(String::from)
        .to_vec();
        inner += "<div class=\"scroll\"><table class=\"sortable\"><thead><tr>";
        inner += &sortable_heads(&heads);
        for r in &c.regions {
            let (lat, lon) = r.lat_lon.map_or(("—".into(), "—".into()), |(a, b)| {
                (sig(a, 3), sig(b, 4))
            });
            inner += &format!(
                "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                r.id,
                esc(match r.kind {
                    Kind::Composition => "composition",
                    Kind::HotSpotOn => "hot spot on",
                    Kind::HotSpotOff => "hot spot off",
                }),
                r.pixels,
                sig(100.0 * r.area_fraction, 3),
                lat,
                lon,
                esc(&r.sentence)
            );
        }
        inner += "</tbody></table></div>\n";
    }
    section(
        "change",
        "What changed",
        "Each cell was tested for a change of composition larger than its errors allow; \
         cells that pass the false-discovery control are coloured and grouped into regions. \
         A region's numbers are its mean change (later minus earlier) with its standard error.",
        &inner,
    )
}
