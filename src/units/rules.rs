//! Naming units from their composition by rules in a TOML file (the default is
//! `spectra-lib/unit-rules.toml`, compiled in; users pass their own with `--rules`).
//! Every rule carries a stable class id so archive tables can add units up across cubes.
//! A unit no rule matches gets the class `mixed` and a label from its two largest members.

use serde::Deserialize;

use crate::library::{Class, Library};

/// The default rules, compiled in.
pub const DEFAULT_RULES: &str = include_str!("../../spectra-lib/unit-rules.toml");

/// The class of units no rule names.
pub const MIXED: &str = "mixed";
/// The class of pixels the library cannot explain.
pub const UNEXPLAINED: &str = "unexplained";

#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
struct RuleFile {
    #[serde(rename = "rule")]
    rules: Vec<RuleEntry>,
}

#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
struct RuleEntry {
    class: String,
    label: String,
    #[serde(default)]
    member: Option<String>,
    #[serde(default)]
    library_class: Option<String>,
    at_least: f64,
}

/// What a rule measures.
#[derive(Debug, Clone, PartialEq)]
pub enum Quantity {
    Member(String),
    LibraryClass(Class),
}

/// One checked rule.
#[derive(Debug, Clone, PartialEq)]
pub struct Rule {
    pub class: String,
    pub label: String,
    pub quantity: Quantity,
    pub at_least: f64,
}

/// The rules, in order.
#[derive(Debug, Clone, PartialEq)]
pub struct Rules {
    pub rules: Vec<Rule>,
}

impl Rules {
    /// Parses and checks rule text; `origin` names the file in errors.
    pub fn parse(origin: &str, text: &str) -> Result<Rules, String> {
        let file: RuleFile = toml::from_str(text)
            .map_err(|e| format!("{origin}: {}", crate::bands::toml_error_line(text, &e)))?;
        let mut rules = Vec::new();
        for (i, r) in file.rules.into_iter().enumerate() {
            let n = i + 1;
            let bad = |why: String| format!("{origin}: rule {n} ({}): {why}", r.class);
            if r.class.is_empty() || r.class == MIXED || r.class == UNEXPLAINED {
                return Err(bad(format!("class ids `{MIXED}` and `{UNEXPLAINED}` are reserved, and the class may not be empty")));
            }
            if !(0.0..=1.0).contains(&r.at_least) {
                return Err(bad(format!("at_least = {} must lie in 0–1", r.at_least)));
            }
            let quantity = match (&r.member, &r.library_class) {
                (Some(m), None) => Quantity::Member(m.clone()),
                (None, Some(c)) => Quantity::LibraryClass(Class::parse(c).ok_or_else(|| {
                    bad(format!("library_class `{c}`: expected sulfur-allotrope, so2-frost, silicate or other"))
                })?),
                _ => return Err(bad("give exactly one of `member` and `library_class`".into())),
            };
            rules.push(Rule {
                class: r.class,
                label: r.label,
                quantity,
                at_least: r.at_least,
            });
        }
        Ok(Rules { rules })
    }

    pub fn default_rules() -> Rules {
        Rules::parse("embedded unit rules", DEFAULT_RULES).expect("the shipped rules are tested")
    }

    /// Names a unit of mean abundances `mean` over `ids` (members or `+`-joined groups).
    /// Returns (class, label).
    pub fn name(&self, ids: &[String], mean: &[f64], library: &Library) -> (String, String) {
        let class_of = |member: &str| {
            library
                .members
                .iter()
                .find(|m| m.id == member)
                .map(|m| m.class)
        };
        for r in &self.rules {
            let value: f64 = match &r.quantity {
                Quantity::Member(m) => ids
                    .iter()
                    .zip(mean)
                    .filter(|(id, _)| id.split('+').any(|part| part == m))
                    .map(|(_, v)| v)
                    .sum(),
                Quantity::LibraryClass(c) => ids
                    .iter()
                    .zip(mean)
                    .filter(|(id, _)| id.split('+').all(|part| class_of(part) == Some(*c)))
                    .map(|(_, v)| v)
                    .sum(),
            };
            if value >= r.at_least {
                return (r.class.clone(), r.label.clone());
            }
        }
        let mut order: Vec<usize> = (0..ids.len()).collect();
        order.sort_by(|&a, &b| mean[b].total_cmp(&mean[a]));
        let label = order
            .iter()
            .take(2)
            .map(|&i| format!("{} {:.0} %", ids[i], 100.0 * mean[i]))
            .collect::<Vec<_>>()
            .join(" / ");
        (MIXED.to_string(), label)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_shipped_rules_parse_and_name_by_composition() {
        let r = Rules::default_rules();
        let lib = Library::embedded();
        let ids: Vec<String> = [
            "so2-frost-fine+so2-frost-coarse",
            "s8-alpha-cold",
            "basalt-dark",
        ]
        .iter()
        .map(|s| s.to_string())
        .collect();
        assert_eq!(r.name(&ids, &[0.7, 0.2, 0.1], &lib).0, "so2-rich");
        assert_eq!(r.name(&ids, &[0.2, 0.7, 0.1], &lib).0, "yellow-sulfur");
        assert_eq!(r.name(&ids, &[0.1, 0.3, 0.6], &lib).0, "dark-silicate");
        let (class, label) = r.name(&ids, &[0.4, 0.35, 0.25], &lib);
        assert_eq!(class, "mixed");
        assert!(
            label.starts_with("so2-frost-fine+so2-frost-coarse 40 %"),
            "{label}"
        );
    }

    #[test]
    fn contradictory_or_malformed_rules_are_refused() {
        let both = "[[rule]]\nclass = \"x\"\nlabel = \"x\"\nmember = \"a\"\nlibrary_class = \"silicate\"\nat_least = 0.5\n";
        assert!(Rules::parse("r.toml", both)
            .unwrap_err()
            .contains("exactly one"));
        let reserved =
            "[[rule]]\nclass = \"mixed\"\nlabel = \"x\"\nmember = \"a\"\nat_least = 0.5\n";
        assert!(Rules::parse("r.toml", reserved)
            .unwrap_err()
            .contains("reserved"));
        let range = "[[rule]]\nclass = \"x\"\nlabel = \"x\"\nmember = \"a\"\nat_least = 1.5\n";
        assert!(Rules::parse("r.toml", range).unwrap_err().contains("0–1"));
        assert!(Rules::parse("r.toml", "[[rule]]\nclas = 1\n")
            .unwrap_err()
            .contains("r.toml: line"));
    }
}
