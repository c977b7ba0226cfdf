//! The page of a `targets` folder: the caution first, the picture, the ranked and the
//! excluded candidates, the profile that scored them.

use super::page::{cautions_box, esc, frame, img, section, sig, sortable_heads};
use crate::results::targets::TargetsRun;
use crate::targets::{Status, Target, CAUTION};

/// The whole page, as HTML text.
pub fn page(targets: &[Target], run: &TargetsRun, png: &[u8]) -> String {
    let mut body = format!(
        "<p class=\"caution-lead\"><strong>Caution.</strong> {}</p>\n",
        esc(CAUTION)
    );
    body += &cautions_box();
    let mut inner = String::new();
    inner += "<figure>";
    inner += &img(
        "image/png",
        png,
        "Numbered targets over the true colour; keep-out areas striped",
        "map",
    );
    inner += "<figcaption>Numbers: ranks. Striped: the keep-out area.</figcaption></figure>\n";
    let heads: Vec<String> = [
        "Rank",
        "Kind",
        "Lat °",
        "Lon °",
        "Pixels",
        "Score",
        "Activity",
        "Freshness",
        "Novelty",
        "Rarity",
        "Uncertainty",
        "Reason",
    ]
    .map(String::from)
    .to_vec();
    let table = |rows: &[&Target], excluded: bool| -> String {
        let mut s = String::from("<div class=\"scroll\"><table class=\"sortable\"><thead><tr>");
        let mut h = heads.clone();
        if excluded {
            h[0] = "Id".into();
            h.push("Why excluded".into());
        }
        s += &sortable_heads(&h);
        for t in rows {
            let (lat, lon) = t.lat_lon.map_or(("—".into(), "—".into()), |(a, b)| {
                (sig(a, 3), sig(b, 4))
            });
            let first = match &t.status {
                Status::Ranked(r) => r.to_string(),
                Status::Excluded(_) => t.id.to_string(),
            };
            let c = &t.components;
            s += &format!(
                "<tr><td>{first}</td><td>{}</td><td>{lat}</td><td>{lon}</td><td>{}</td><td>{:.3}</td>\
                 <td>{:.2}</td><td>{:.2}</td><td>{:.2}</td><td>{:.2}</td><td>{:.2}</td><td>{}</td>",
                esc(t.lead.name()),
                t.pixels,
                t.score,
                c.activity,
                c.freshness,
                c.novelty,
                c.rarity,
                c.uncertainty,
                esc(&t.reason)
            );
            if let Status::Excluded(why) = &t.status {
                s += &format!("<td>{}</td>", esc(why));
            }
            s += "</tr>";
        }
        s + "</tbody></table></div>\n"
    };
    let ranked: Vec<&Target> = targets
        .iter()
        .filter(|t| matches!(t.status, Status::Ranked(_)))
        .collect();
    let excluded: Vec<&Target> = targets
        .iter()
        .filter(|t| matches!(t.status, Status::Excluded(_)))
        .collect();
    inner += &table(&ranked, false);
    if !excluded.is_empty() {
        inner += "<h3>Excluded candidates</h3>";
        inner += &table(&excluded, true);
    }
    let w = &run.profile.weights;
    inner += &format!(
        "<p>Profile {}: weights activity {}, freshness {}, novelty {}, rarity {}, uncertainty {}; \
         the score is their weighted mean of components on 0–1 (formulas in the profile file \
         and the README).</p>",
        esc(&run.profile.origin),
        w.activity,
        w.freshness,
        w.novelty,
        w.rarity,
        w.uncertainty
    );
    body += &section(
        "targets",
        "Ranked targets",
        "Each target is one connected region of candidate pixels (hot spots, change, fresh \
         red sulfur, unexplained material, rare units, large errors), scored by the stated \
         profile; candidates that fail a constraint are listed below with the reason.",
        &inner,
    );
    let title = match &run.target {
        Some(t) => format!("Targets — {t}"),
        None => "Observation targets".to_string(),
    };
    frame(&title, &super::change::made_by(&run.inputs), &body, None)
}
