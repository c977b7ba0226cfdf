//! FITS header cards: parsing 80-character cards into typed values, and formatting
//! them back in the standard's fixed format (FITS Standard 4.0, section 4).
//!
//! Only what thiomap needs is understood: logical, integer, real and string values,
//! with commentary cards (`COMMENT`, `HISTORY`, blank) kept as text. Long-string
//! `CONTINUE` cards and `HIERARCH` keywords are kept as commentary, never interpreted.

use std::fmt::Write as _;

/// Bytes in one header card.
pub const CARD_LEN: usize = 80;
/// Bytes in one FITS block; headers and data are padded to a multiple of it.
pub const BLOCK_LEN: usize = 2880;

/// The value of a header card.
#[derive(Debug, Clone, PartialEq)]
pub enum Value {
    Logical(bool),
    Integer(i64),
    Real(f64),
    Text(String),
    /// A commentary card or a value this reader does not interpret (complex numbers).
    Other(String),
}

impl Value {
    /// The value as a real number; integers count (BSCALE = 1 is a real).
    pub fn as_f64(&self) -> Option<f64> {
        match self {
            Value::Integer(i) => Some(*i as f64),
            Value::Real(r) => Some(*r),
            _ => None,
        }
    }

    /// The value as an integer; a real with no fractional part counts.
    pub fn as_i64(&self) -> Option<i64> {
        match self {
            Value::Integer(i) => Some(*i),
            Value::Real(r) if r.fract() == 0.0 && r.abs() < 9.0e15 => Some(*r as i64),
            _ => None,
        }
    }

    /// The value as text, trailing blanks removed (they are not significant).
    pub fn as_str(&self) -> Option<&str> {
        match self {
            Value::Text(s) => Some(s.trim_end()),
            _ => None,
        }
    }
}

/// One header card: keyword, value and comment.
#[derive(Debug, Clone, PartialEq)]
pub struct Card {
    pub key: String,
    pub value: Value,
    pub comment: String,
}

impl Card {
    pub fn new(key: &str, value: Value, comment: &str) -> Card {
        Card {
            key: key.to_string(),
            value,
            comment: comment.to_string(),
        }
    }
}

/// A parsed header: its cards in order.
#[derive(Debug, Clone, Default)]
pub struct Header {
    pub cards: Vec<Card>,
}

impl Header {
    /// The value of the first card with this keyword.
    pub fn get(&self, key: &str) -> Option<&Value> {
        self.cards.iter().find(|c| c.key == key).map(|c| &c.value)
    }

    pub fn f64(&self, key: &str) -> Option<f64> {
        self.get(key).and_then(Value::as_f64)
    }

    pub fn i64(&self, key: &str) -> Option<i64> {
        self.get(key).and_then(Value::as_i64)
    }

    pub fn str(&self, key: &str) -> Option<&str> {
        self.get(key).and_then(Value::as_str)
    }
}

/// Parses one 80-byte card. Returns `Err` with a short reason for a card that breaks
/// the standard in a way that matters (non-ASCII bytes, an unterminated string).
pub fn parse_card(raw: &[u8]) -> Result<Card, String> {
    debug_assert_eq!(raw.len(), CARD_LEN);
    if raw.iter().any(|&b| !(0x20..=0x7e).contains(&b)) {
        return Err("header card holds bytes that are not printable ASCII".into());
    }
    // Checked above: every byte is ASCII.
    let text = std::str::from_utf8(raw).map_err(|_| "header card is not ASCII".to_string())?;
    let key = text[..8].trim_end().to_string();
    let has_value = &text[8..10] == "= " && key != "COMMENT" && key != "HISTORY" && !key.is_empty();
    if !has_value {
        return Ok(Card {
            key,
            value: Value::Other(text[8..].trim_end().to_string()),
            comment: String::new(),
        });
    }
    let field = &text[10..];
    let (value, comment) = parse_value_field(field)?;
    Ok(Card {
        key,
        value,
        comment,
    })
}

fn parse_value_field(field: &str) -> Result<(Value, String), String> {
    let trimmed = field.trim_start();
    if let Some(rest) = trimmed.strip_prefix('\'') {
        // A string: '' inside quotes is one quote.
        let mut out = String::new();
        let mut chars = rest.char_indices().peekable();
        while let Some((i, ch)) = chars.next() {
            if ch == '\'' {
                if matches!(chars.peek(), Some((_, '\''))) {
                    out.push('\'');
                    chars.next();
                    continue;
                }
                let after = &rest[i + 1..];
                let comment = after
                    .split_once('/')
                    .map(|(_, c)| c.trim().to_string())
                    .unwrap_or_default();
                // Trailing blanks in a string are not significant (FITS Standard 4.0, 4.2.1).
                return Ok((Value::Text(out.trim_end().to_string()), comment));
            }
            out.push(ch);
        }
        return Err("a string value has no closing quote".into());
    }
    let (val, comment) = match trimmed.split_once('/') {
        Some((v, c)) => (v.trim(), c.trim().to_string()),
        None => (trimmed.trim(), String::new()),
    };
    let value = match val {
        "T" => Value::Logical(true),
        "F" => Value::Logical(false),
        "" => Value::Other(String::new()),
        v => {
            if let Ok(i) = v.parse::<i64>() {
                Value::Integer(i)
            } else if let Ok(r) = v.replace(['D', 'd'], "E").parse::<f64>() {
                Value::Real(r)
            } else {
                Value::Other(v.to_string())
            }
        }
    };
    Ok((value, comment))
}

/// Formats a real so that it reads back as the same f64 and is a valid FITS real
/// (mantissa with a decimal point, upper-case exponent).
pub fn format_real(x: f64) -> String {
    let s = format!("{x:E}");
    let (mantissa, exponent) = s.split_once('E').unwrap_or((&s, "0"));
    let mantissa = if mantissa.contains('.') {
        mantissa.to_string()
    } else {
        format!("{mantissa}.0")
    };
    if exponent == "0" {
        mantissa
    } else {
        format!("{mantissa}E{exponent}")
    }
}

/// Formats a card into exactly 80 bytes. Values that do not fit (long strings) are
/// truncated to the card; thiomap writes only short values.
pub fn format_card(card: &Card) -> String {
    let mut out = String::with_capacity(CARD_LEN);
    match &card.value {
        Value::Other(text) => {
            let _ = write!(out, "{:<8}{}", card.key, text);
        }
        value => {
            let v = match value {
                Value::Logical(b) => format!("{:>20}", if *b { "T" } else { "F" }),
                Value::Integer(i) => format!("{i:>20}"),
                Value::Real(r) => format!("{:>20}", format_real(*r)),
                Value::Text(s) => {
                    // A string must close on this card: 80 − 10 (keyword, "= ") − 2 quotes.
                    let mut text: String = s
                        .chars()
                        .filter(|c| c.is_ascii() && !c.is_ascii_control())
                        .collect();
                    while text.replace('\'', "''").len() > 68 {
                        text.pop();
                    }
                    let escaped = text.replace('\'', "''");
                    format!("'{escaped:<8}'")
                }
                Value::Other(_) => unreachable!("handled above"),
            };
            let _ = write!(out, "{:<8}= {}", card.key, v);
            if !card.comment.is_empty() {
                let _ = write!(out, " / {}", card.comment);
            }
        }
    }
    let mut bytes: String = out
        .chars()
        .filter(|c| c.is_ascii() && !c.is_ascii_control())
        .collect();
    bytes.truncate(CARD_LEN);
    format!("{bytes:<80}")
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pad(s: &str) -> Vec<u8> {
        format!("{s:<80}").into_bytes()
    }

    #[test]
    fn parses_each_value_kind() {
        let c = parse_card(&pad("BITPIX  =                  -32 / bits")).unwrap();
        assert_eq!(c.value, Value::Integer(-32));
        assert_eq!(c.comment, "bits");
        let c = parse_card(&pad("BSCALE  =               1.5D-2")).unwrap();
        assert_eq!(c.value, Value::Real(0.015));
        let c = parse_card(&pad("SIMPLE  =                    T")).unwrap();
        assert_eq!(c.value, Value::Logical(true));
        let c = parse_card(&pad("OBJECT  = 'O''Hara  ' / a name with a quote")).unwrap();
        assert_eq!(c.value.as_str(), Some("O'Hara"));
        assert_eq!(c.comment, "a name with a quote");
        let c = parse_card(&pad("COMMENT = not a value")).unwrap();
        assert!(matches!(c.value, Value::Other(_)));
    }

    #[test]
    fn an_unterminated_string_is_an_error() {
        assert!(parse_card(&pad("OBJECT  = 'open")).is_err());
    }

    #[test]
    fn integer_valued_reals_are_integers_and_integers_are_reals() {
        // FITS Standard 4.0, 4.2.4: BSCALE/BZERO may be written as integers.
        assert_eq!(Value::Integer(32768).as_f64(), Some(32768.0));
        assert_eq!(Value::Real(3.0).as_i64(), Some(3));
        assert_eq!(Value::Real(3.5).as_i64(), None);
    }

    #[test]
    fn formatted_cards_round_trip() {
        for card in [
            Card::new("CRVAL3", Value::Real(4.0e-7), "first band"),
            Card::new("CDELT3", Value::Real(1.0 / 3.0), ""),
            Card::new("NAXIS1", Value::Integer(1024), ""),
            Card::new("EXTEND", Value::Logical(true), ""),
            Card::new("EXTNAME", Value::Text("it's".into()), ""),
        ] {
            let text = format_card(&card);
            assert_eq!(text.len(), 80);
            let back = parse_card(text.as_bytes()).unwrap();
            assert_eq!(back.key, card.key);
            assert_eq!(back.value, card.value, "{text}");
        }
        assert_eq!(format_real(2.0), "2.0");
        // Over-long strings are cut inside the quotes, never left open.
        let long = Card::new("CONTENT", Value::Text("x'".repeat(60)), "a comment");
        let back = parse_card(format_card(&long).as_bytes()).unwrap();
        assert!(matches!(back.value, Value::Text(t) if t.starts_with("x'x'")));
        assert_eq!(format_real(1e-6), "1.0E-6");
    }
}
