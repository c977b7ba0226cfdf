//! The page's smallest pieces: escaping, images as `data:` URIs, numbers to a few digits.

use base64::Engine as _;

/// Escapes text for HTML element content and attribute values.
pub fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for ch in s.chars() {
        match ch {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// JSON placed inside a `<script type="application/json">` element: `<` is written as
/// `\u003c`, so no text can close the element.
pub fn script_json(json: &str) -> String {
    json.replace('<', "\\u003c")
}

/// `bytes` as a `data:` URI.
pub fn data_uri(mime: &str, bytes: &[u8]) -> String {
    format!(
        "data:{mime};base64,{}",
        base64::engine::general_purpose::STANDARD.encode(bytes)
    )
}

/// An `<img>` with its picture inline and its alt text.
pub fn img(mime: &str, bytes: &[u8], alt: &str, class: &str) -> String {
    format!(
        "<img class=\"{class}\" src=\"{}\" alt=\"{}\">",
        data_uri(mime, bytes),
        esc(alt)
    )
}

/// `v` to `digits` significant digits, plain or in exponent form.
pub fn sig(v: f64, digits: usize) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let e = v.abs().log10().floor() as i32;
    if !(-3..6).contains(&e) {
        format!("{:.*e}", digits.saturating_sub(1), v)
    } else {
        let d = (digits as i32 - 1 - e).max(0) as usize;
        format!("{v:.d$}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn text_is_escaped_for_content_and_attributes() {
        assert_eq!(
            esc("<script>alert('x')</script> & \"q\""),
            "&lt;script&gt;alert(&#39;x&#39;)&lt;/script&gt; &amp; &quot;q&quot;"
        );
        assert_eq!(
            script_json("{\"a\":\"</script>\"}"),
            "{\"a\":\"\\u003c/script>\"}"
        );
    }

    #[test]
    fn significant_digits() {
        assert_eq!(sig(0.0025309, 3), "0.00253");
        assert_eq!(sig(1163.25, 4), "1163");
        assert_eq!(sig(1.5e-7, 3), "1.50e-7");
    }
}
