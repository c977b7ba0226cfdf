//! Small inline SVG charts for the page: spectra as lines, a histogram. Written as SVG
//! text rather than through the plotting crate's SVG backend so that the page's styles
//! (dark mode, print) reach the axes and labels through CSS classes.

use super::markup::esc;

/// A colour-vision-deficiency-safe qualitative palette: Okabe & Ito (2008), "Color
/// Universal Design" (from memory), without its yellow, which is unreadable on white.
pub const PALETTE: &[&str] = &[
    "#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000",
];
/// Dash patterns that cycle after the palette, so that more lines stay distinct.
const DASHES: &[&str] = &["", "6 3", "2 2", "8 3 2 3"];

/// One line of a chart.
pub struct Line<'a> {
    pub name: String,
    pub xs: &'a [f64],
    pub ys: Vec<f64>,
    /// A ±band around the line (same length), drawn shaded.
    pub spread: Option<Vec<f64>>,
    /// Index into the palette and dash cycle; `None` for the colour `--fg` (black/white).
    pub style: Option<usize>,
}

impl Line<'_> {
    /// The line's colour and dash pattern.
    fn stroke(&self) -> (String, &'static str) {
        match self.style {
            Some(i) => (
                PALETTE[i % PALETTE.len()].to_string(),
                DASHES[(i / PALETTE.len()) % DASHES.len()],
            ),
            None => ("var(--fg)".to_string(), ""),
        }
    }
}

fn nice_ticks(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    let span = (hi - lo).abs().max(1e-12);
    let raw = span / n as f64;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 2.5, 5.0, 10.0]
        .iter()
        .map(|m| m * mag)
        .find(|s| *s >= raw)
        .unwrap_or(10.0 * mag);
    // Multiples of the step, each rounded to the step's decimals (no 0.6000000000000001).
    let decimals = (-step.log10().floor()).max(0.0) as i32 + 1;
    let round = |v: f64| {
        let m = 10f64.powi(decimals);
        (v * m).round() / m
    };
    let first = (lo / step - 1e-9).ceil() as i64;
    let last = (hi / step + 1e-9).floor() as i64;
    (first..=last).map(|k| round(k as f64 * step)).collect()
}

fn label(v: f64) -> String {
    if v == 0.0 {
        "0".into()
    } else if v.abs() >= 1e4 || v.abs() < 1e-3 {
        format!("{v:.1e}")
    } else {
        let s = format!("{v:.4}");
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    }
}

/// A line chart; `zero_line` draws y = 0 (residuals).
pub fn lines(
    title: &str,
    x_label: &str,
    y_label: &str,
    series: &[Line],
    zero_line: bool,
) -> String {
    let (w, h) = (640.0, 300.0);
    let (l, r, t, b) = (64.0, 16.0, 28.0, 46.0);
    let finite = |v: &f64| v.is_finite();
    let xs: Vec<f64> = series
        .iter()
        .flat_map(|s| s.xs.iter().copied())
        .filter(finite)
        .collect();
    let mut ys: Vec<f64> = Vec::new();
    for s in series {
        for (i, y) in s.ys.iter().enumerate() {
            let d = s.spread.as_ref().map_or(0.0, |d| d[i]);
            ys.extend([y - d, y + d]);
        }
    }
    ys.retain(finite);
    if zero_line {
        ys.push(0.0);
    }
    let (x0, x1) = min_max(&xs).unwrap_or((0.0, 1.0));
    let (mut y0, mut y1) = min_max(&ys).unwrap_or((0.0, 1.0));
    if y1 - y0 < 1e-12 {
        y0 -= 0.5;
        y1 += 0.5;
    }
    let pad = 0.04 * (y1 - y0);
    let (y0, y1) = (y0 - pad, y1 + pad);
    let px = |x: f64| l + (x - x0) / (x1 - x0).max(1e-12) * (w - l - r);
    let py = |y: f64| t + (1.0 - (y - y0) / (y1 - y0)) * (h - t - b);
    let mut s = format!(
        "<svg class=\"chart\" viewBox=\"0 0 {w} {h}\" role=\"img\" aria-label=\"{}\" \
         xmlns=\"http://www.w3.org/2000/svg\"><title>{}</title>",
        esc(title),
        esc(title)
    );
    s += &format!(
        "<text class=\"ct\" x=\"{l}\" y=\"16\">{}</text>",
        esc(title)
    );
    for tx in nice_ticks(x0, x1, 6) {
        let x = px(tx);
        s += &format!(
            "<line class=\"grid\" x1=\"{x:.1}\" x2=\"{x:.1}\" y1=\"{t}\" y2=\"{:.1}\"/>\
             <text class=\"tick\" x=\"{x:.1}\" y=\"{:.1}\" text-anchor=\"middle\">{}</text>",
            h - b,
            h - b + 16.0,
            label(tx)
        );
    }
    for ty in nice_ticks(y0, y1, 5) {
        let y = py(ty);
        s += &format!(
            "<line class=\"grid\" x1=\"{l}\" x2=\"{:.1}\" y1=\"{y:.1}\" y2=\"{y:.1}\"/>\
             <text class=\"tick\" x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"end\">{}</text>",
            w - r,
            l - 6.0,
            y + 4.0,
            label(ty)
        );
    }
    if zero_line {
        s += &format!(
            "<line class=\"axis\" x1=\"{l}\" x2=\"{:.1}\" y1=\"{:.1}\" y2=\"{:.1}\"/>",
            w - r,
            py(0.0),
            py(0.0)
        );
    }
    s += &format!(
        "<rect class=\"frame\" x=\"{l}\" y=\"{t}\" width=\"{:.1}\" height=\"{:.1}\"/>",
        w - l - r,
        h - t - b
    );
    s += &format!(
        "<text class=\"al\" x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"middle\">{}</text>\
         <text class=\"al\" transform=\"translate(14 {:.1}) rotate(-90)\" \
         text-anchor=\"middle\">{}</text>",
        (l + w - r) / 2.0,
        h - 8.0,
        esc(x_label),
        (t + h - b) / 2.0,
        esc(y_label)
    );
    for line in series {
        let (colour, dash) = line.stroke();
        if let Some(d) = &line.spread {
            let mut pts: Vec<String> = Vec::new();
            for (i, x) in line.xs.iter().enumerate() {
                if line.ys[i].is_finite() && d[i].is_finite() {
                    pts.push(format!("{:.1},{:.1}", px(*x), py(line.ys[i] + d[i])));
                }
            }
            for (i, x) in line.xs.iter().enumerate().rev() {
                if line.ys[i].is_finite() && d[i].is_finite() {
                    pts.push(format!("{:.1},{:.1}", px(*x), py(line.ys[i] - d[i])));
                }
            }
            s += &format!(
                "<polygon points=\"{}\" fill=\"{colour}\" fill-opacity=\"0.18\" stroke=\"none\"/>",
                pts.join(" ")
            );
        }
        let pts: Vec<String> = line
            .xs
            .iter()
            .zip(&line.ys)
            .filter(|(_, y)| y.is_finite())
            .map(|(x, y)| format!("{:.1},{:.1}", px(*x), py(*y)))
            .collect();
        s += &format!(
            "<polyline points=\"{}\" fill=\"none\" stroke=\"{colour}\" stroke-width=\"1.6\" \
             stroke-dasharray=\"{dash}\"><title>{}</title></polyline>",
            pts.join(" "),
            esc(&line.name)
        );
    }
    s += "</svg>";
    s
}

/// The legend of a [`lines`] chart, as HTML.
pub fn legend(series: &[Line]) -> String {
    let mut s = String::from("<ul class=\"legend\">");
    for line in series {
        let (colour, dash) = line.stroke();
        s += &format!(
            "<li><svg width=\"28\" height=\"10\" aria-hidden=\"true\"><line x1=\"0\" x2=\"28\" \
             y1=\"5\" y2=\"5\" stroke=\"{colour}\" stroke-width=\"2\" \
             stroke-dasharray=\"{dash}\"/></svg> {}</li>",
            esc(&line.name)
        );
    }
    s += "</ul>";
    s
}

/// A histogram of the finite `values` over `range` in `bins` bins.
pub fn histogram(
    title: &str,
    x_label: &str,
    values: &[f32],
    range: (f64, f64),
    bins: usize,
) -> String {
    let (w, h) = (640.0, 240.0);
    let (l, r, t, b) = (64.0, 16.0, 28.0, 46.0);
    let mut counts = vec![0usize; bins];
    let span = (range.1 - range.0).max(1e-12);
    for v in values.iter().filter(|v| v.is_finite()) {
        let i = (((*v as f64 - range.0) / span) * bins as f64).floor();
        let i = (i.max(0.0) as usize).min(bins - 1);
        counts[i] += 1;
    }
    let top = counts.iter().copied().max().unwrap_or(1).max(1) as f64;
    let bw = (w - l - r) / bins as f64;
    let mut s = format!(
        "<svg class=\"chart\" viewBox=\"0 0 {w} {h}\" role=\"img\" aria-label=\"{}\" \
         xmlns=\"http://www.w3.org/2000/svg\"><title>{}</title>\
         <text class=\"ct\" x=\"{l}\" y=\"16\">{}</text>",
        esc(title),
        esc(title),
        esc(title)
    );
    for (i, c) in counts.iter().enumerate() {
        let bh = *c as f64 / top * (h - t - b);
        s += &format!(
            "<rect class=\"bar\" x=\"{:.1}\" y=\"{:.1}\" width=\"{:.1}\" height=\"{bh:.1}\">\
             <title>{} – {}: {c} pixels</title></rect>",
            l + i as f64 * bw,
            h - b - bh,
            (bw - 1.0).max(0.5),
            label(range.0 + span * i as f64 / bins as f64),
            label(range.0 + span * (i + 1) as f64 / bins as f64),
        );
    }
    for tx in nice_ticks(range.0, range.1, 6) {
        let x = l + (tx - range.0) / span * (w - l - r);
        s += &format!(
            "<text class=\"tick\" x=\"{x:.1}\" y=\"{:.1}\" text-anchor=\"middle\">{}</text>",
            h - b + 16.0,
            label(tx)
        );
    }
    for ty in nice_ticks(0.0, top, 4)
        .into_iter()
        .filter(|t| t.fract() == 0.0)
    {
        let y = h - b - ty / top * (h - t - b);
        s += &format!(
            "<text class=\"tick\" x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"end\">{}</text>",
            l - 6.0,
            y + 4.0,
            label(ty)
        );
    }
    s += &format!(
        "<rect class=\"frame\" x=\"{l}\" y=\"{t}\" width=\"{:.1}\" height=\"{:.1}\"/>\
         <text class=\"al\" x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"middle\">{}</text>\
         <text class=\"al\" transform=\"translate(14 {:.1}) rotate(-90)\" \
         text-anchor=\"middle\">pixels</text></svg>",
        w - l - r,
        h - t - b,
        (l + w - r) / 2.0,
        h - 8.0,
        esc(x_label),
        (t + h - b) / 2.0
    );
    s
}

fn min_max(v: &[f64]) -> Option<(f64, f64)> {
    let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    (lo.is_finite() && hi.is_finite()).then_some((lo, hi))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_are_round_and_cover_the_range() {
        assert_eq!(nice_ticks(0.0, 1.0, 5), vec![0.0, 0.2, 0.4, 0.6, 0.8, 1.0]);
        let t = nice_ticks(0.37, 2.41, 6);
        assert!(t.first().unwrap() >= &0.37 && t.last().unwrap() <= &2.41);
        assert_eq!(t, vec![0.5, 1.0, 1.5, 2.0]);
    }

    #[test]
    fn a_histogram_counts_every_finite_value_once() {
        let v = [0.15f32, 0.15, 0.55, 0.95, f32::NAN, 2.0, -1.0];
        let svg = histogram("h", "x", &v, (0.0, 1.0), 10);
        // 2.0 lands in the last bin and −1 in the first (clipped); NaN is left out.
        assert!(svg.contains("0 – 0.1: 1 pixels"), "{svg}");
        assert!(svg.contains("0.1 – 0.2: 2 pixels"), "{svg}");
        assert!(svg.contains("0.9 – 1: 2 pixels"), "{svg}");
        assert!(svg.contains("0.5 – 0.6: 1 pixels"), "{svg}");
        assert_eq!(svg.matches(" pixels</title>").count(), 10);
    }
}
