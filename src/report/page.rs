//! The page's frame and the pieces every page shares (sections, missing-product notes,
//! sortable headings, the cautions box). Every text that comes from a file passes through
//! [`esc`]. The cube page's sections are in `cube.rs` and `figures.rs`.

pub use super::markup::{data_uri, esc, img, script_json, sig};

const CSS: &str = include_str!("report.css");
const JS: &str = include_str!("report.js");

/// The page's frame: head with inline styles, a header with the made-by line, the body,
/// the script.
pub fn frame(title: &str, made_by: &str, body: &str, data_json: Option<&str>) -> String {
    let mut h = String::with_capacity(body.len() + CSS.len() + JS.len() + 4096);
    h += "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
          <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
          <meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; \
          img-src data:; style-src 'unsafe-inline'; script-src 'unsafe-inline'\">\n\
          <meta name=\"color-scheme\" content=\"light dark\">\n";
    h += &format!(
        "<title>{}</title>\n<style>\n{CSS}</style>\n</head>\n<body>\n",
        esc(title)
    );
    h += &format!(
        "<header><h1>{}</h1><p class=\"madeby\">{}</p></header>\n<main>\n",
        esc(title),
        esc(made_by)
    );
    h += body;
    h += &format!(
        "</main>\n<footer><p class=\"madeby\">{}</p></footer>\n",
        esc(made_by)
    );
    if let Some(d) = data_json {
        h += &format!(
            "<script type=\"application/json\" id=\"thiomap-data\">{}</script>\n",
            script_json(d)
        );
    }
    h += &format!("<script>\n{JS}</script>\n</body>\n</html>\n");
    h
}

pub(super) fn section(id: &str, title: &str, how: &str, inner: &str) -> String {
    format!(
        "<section id=\"{id}\" aria-labelledby=\"{id}-h\"><h2 id=\"{id}-h\">{}</h2>\
         <p class=\"how\">{}</p>\n{inner}</section>\n",
        esc(title),
        esc(how)
    )
}

/// A sortable table's heading cells (each a button the script sorts by), closing the head.
pub fn sortable_heads(heads: &[String]) -> String {
    let mut s = String::new();
    for (i, t) in heads.iter().enumerate() {
        s += &format!(
            "<th scope=\"col\"><button type=\"button\" data-col=\"{i}\">{}</button></th>",
            esc(t)
        );
    }
    s + "</tr></thead><tbody>"
}

pub(super) fn missing(text: &str) -> String {
    format!("<p class=\"missing\">{}</p>", esc(text))
}

pub fn cautions_box() -> String {
    let mut s = String::from(
        "<aside class=\"cautions\" aria-labelledby=\"cautions-h\"><h2 id=\"cautions-h\">Cautions</h2>",
    );
    for c in super::CAUTIONS {
        s += &format!("<p>{}</p>", esc(c));
    }
    s += "</aside>\n";
    s
}

pub(super) fn fmt(v: &serde_json::Value) -> String {
    match v {
        serde_json::Value::Null => "—".into(),
        serde_json::Value::String(s) => s.clone(),
        serde_json::Value::Number(n) => match n.as_f64() {
            Some(f) if n.is_f64() => sig(f, 4),
            _ => n.to_string(),
        },
        other => other.to_string(),
    }
}
