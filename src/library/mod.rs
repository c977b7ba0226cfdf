//! The endmember library: reflectance spectra of sulfur allotropes, SO2 frost and
//! silicates, each with its conditions and provenance, in a format of our own.
//!
//! A library is a folder with an index `library.toml` (name, version, member ids in
//! library order) and one `members/<id>.spectrum` file per member. A member file is a
//! TOML head, then a marker line, then one `wavelength_um reflectance` pair per line:
//!
//! ```text
//! id = "s8-alpha-room"
//! name = "α-S8 (orthorhombic cyclo-octasulfur), room temperature"
//! class = "sulfur-allotrope"          # sulfur-allotrope, so2-frost, silicate, other
//! temperature_k = 295.0               # optional
//! grain_um = 100.0                    # optional
//!
//! [origin]
//! method = "parametric model from published band positions; not a laboratory measurement"
//! [[origin.source]]
//! tag = "read"                        # read, from-memory, computed
//! citation = "Meyer et al. 1972, Adv. Chem. Ser. 110"
//!
//! --- samples: wavelength_um reflectance ---
//! 0.2500 0.03011
//! 0.2520 0.03012
//! ```
//!
//! Wavelengths are µm and strictly increasing; reflectance factors lie in 0–1.5. Every
//! error names the file and the line. The default library (`spectra-lib/` in the
//! repository) is compiled into the binary; see [`Library::embedded`].

pub mod diagnostics;
pub mod export;
pub mod import;
pub mod resample;
pub mod solar;
pub mod starter;

use std::collections::BTreeSet;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

/// The line that separates a member file's head from its samples.
pub const SAMPLES_MARKER: &str = "--- samples: wavelength_um reflectance ---";
/// The highest reflectance factor a member may hold (bright frosts exceed 1 at some
/// geometries; beyond 1.5 a value is almost surely a unit error).
pub const MAX_REFLECTANCE: f64 = 1.5;

/// What kind of material a member is. Only members of one class are ever grouped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Class {
    SulfurAllotrope,
    So2Frost,
    Silicate,
    Other,
}

impl Class {
    pub const ALL: [Class; 4] = [
        Class::SulfurAllotrope,
        Class::So2Frost,
        Class::Silicate,
        Class::Other,
    ];

    pub fn as_str(self) -> &'static str {
        match self {
            Class::SulfurAllotrope => "sulfur-allotrope",
            Class::So2Frost => "so2-frost",
            Class::Silicate => "silicate",
            Class::Other => "other",
        }
    }

    pub fn parse(s: &str) -> Option<Class> {
        Class::ALL.into_iter().find(|c| c.as_str() == s)
    }
}

/// How a source's information was obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SourceTag {
    /// Read in a published text.
    Read,
    /// Recalled, to be confirmed against the literature or lab spectra.
    FromMemory,
    /// Computed by a script or program.
    Computed,
}

impl SourceTag {
    pub fn parse(s: &str) -> Option<SourceTag> {
        match s {
            "read" => Some(SourceTag::Read),
            "from-memory" => Some(SourceTag::FromMemory),
            "computed" => Some(SourceTag::Computed),
            _ => None,
        }
    }
}

/// One source behind a spectrum.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Source {
    pub tag: SourceTag,
    pub citation: String,
}

/// How a spectrum was made.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Origin {
    pub method: String,
    #[serde(rename = "source")]
    pub sources: Vec<Source>,
}

/// The head of a member file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
struct Head {
    id: String,
    name: String,
    class: Class,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    temperature_k: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    grain_um: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    notes: Option<String>,
    origin: Origin,
}

/// One library member: a reflectance spectrum with its description.
#[derive(Debug, Clone, PartialEq)]
pub struct Endmember {
    /// Machine id: lower-case letters, digits and hyphens (e.g. `s8-alpha-room`).
    pub id: String,
    /// Display name.
    pub name: String,
    pub class: Class,
    pub temperature_k: Option<f64>,
    pub grain_um: Option<f64>,
    pub notes: Option<String>,
    pub origin: Origin,
    /// Wavelengths, µm, strictly increasing.
    pub wavelength_um: Vec<f64>,
    /// Reflectance factor at each wavelength.
    pub reflectance: Vec<f64>,
}

impl Endmember {
    /// The wavelength range covered, µm.
    pub fn coverage_um(&self) -> (f64, f64) {
        (
            self.wavelength_um[0],
            self.wavelength_um[self.wavelength_um.len() - 1],
        )
    }

    /// Reflectance at `wl_um` by linear interpolation; `None` outside the coverage.
    pub fn at(&self, wl_um: f64) -> Option<f64> {
        interpolate(&self.wavelength_um, &self.reflectance, wl_um)
    }

    /// The file text of this member in the library format.
    pub fn to_file_text(&self) -> String {
        let head = Head {
            id: self.id.clone(),
            name: self.name.clone(),
            class: self.class,
            temperature_k: self.temperature_k,
            grain_um: self.grain_um,
            notes: self.notes.clone(),
            origin: self.origin.clone(),
        };
        let mut text = toml::to_string(&head).expect("member heads always serialise");
        text.push('\n');
        text.push_str(SAMPLES_MARKER);
        text.push('\n');
        for (w, r) in self.wavelength_um.iter().zip(&self.reflectance) {
            let _ = writeln!(text, "{w:.4} {r:.5}");
        }
        text
    }

    /// Parses a member file; `path` only names the file in errors.
    pub fn parse(path: &Path, text: &str) -> Result<Endmember, LibraryError> {
        let err = |line: usize, reason: String| LibraryError::Invalid {
            path: path.to_path_buf(),
            line,
            reason,
        };
        let marker_line = text
            .lines()
            .position(|l| l.trim() == SAMPLES_MARKER)
            .ok_or_else(|| {
                err(
                    text.lines().count().max(1),
                    format!("the line `{SAMPLES_MARKER}` that starts the samples is missing"),
                )
            })?;
        let head_text: String = text
            .lines()
            .take(marker_line)
            .collect::<Vec<_>>()
            .join("\n");
        let head: Head = toml::from_str(&head_text).map_err(|e| {
            let line = e
                .span()
                .map(|s| {
                    head_text[..s.start.min(head_text.len())]
                        .matches('\n')
                        .count()
                        + 1
                })
                .unwrap_or(1);
            err(line, e.message().trim_end().replace('\n', "; "))
        })?;
        check_id(&head.id).map_err(|r| err(1, r))?;
        if head.origin.sources.is_empty() {
            return Err(err(
                1,
                "[origin] needs at least one [[origin.source]]".into(),
            ));
        }
        let mut wavelength_um = Vec::new();
        let mut reflectance = Vec::new();
        for (i, line) in text.lines().enumerate().skip(marker_line + 1) {
            let n = i + 1;
            let t = line.trim();
            if t.is_empty() || t.starts_with('#') {
                continue;
            }
            let mut parts = t.split_whitespace();
            let (Some(a), Some(b), None) = (parts.next(), parts.next(), parts.next()) else {
                return Err(err(
                    n,
                    format!("expected `wavelength_um reflectance`, found `{t}`"),
                ));
            };
            let w: f64 = a
                .parse()
                .map_err(|_| err(n, format!("wavelength `{a}` is not a number")))?;
            let r: f64 = b
                .parse()
                .map_err(|_| err(n, format!("reflectance `{b}` is not a number")))?;
            if !(w.is_finite() && w > 0.0) {
                return Err(err(n, format!("wavelength {w} µm is not positive")));
            }
            if let Some(&prev) = wavelength_um.last() {
                if w <= prev {
                    return Err(err(
                        n,
                        format!("wavelength {w} µm does not exceed the previous {prev} µm (wavelengths must increase)"),
                    ));
                }
            }
            if !(r.is_finite() && (0.0..=MAX_REFLECTANCE).contains(&r)) {
                return Err(err(
                    n,
                    format!("reflectance {r} is outside 0–{MAX_REFLECTANCE}"),
                ));
            }
            wavelength_um.push(w);
            reflectance.push(r);
        }
        if wavelength_um.len() < 2 {
            return Err(err(
                marker_line + 1,
                "a spectrum needs at least two samples".into(),
            ));
        }
        Ok(Endmember {
            id: head.id,
            name: head.name,
            class: head.class,
            temperature_k: head.temperature_k,
            grain_um: head.grain_um,
            notes: head.notes,
            origin: head.origin,
            wavelength_um,
            reflectance,
        })
    }
}

/// Member ids: 1–40 characters of lower-case ASCII letters, digits and hyphens, starting
/// with a letter or digit. `+` is reserved for group ids, `shade` for the shade member.
pub fn check_id(id: &str) -> Result<(), String> {
    let ok = !id.is_empty()
        && id.len() <= 40
        && id
            .chars()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '-')
        && !id.starts_with('-');
    if !ok {
        return Err(format!(
            "id `{id}` must be 1–40 lower-case letters, digits and hyphens"
        ));
    }
    if id == "shade" {
        return Err("id `shade` is reserved for the photometric shade member".into());
    }
    Ok(())
}

/// Linear interpolation in an increasing table; `None` outside it.
pub fn interpolate(x: &[f64], y: &[f64], at: f64) -> Option<f64> {
    if x.is_empty() || at < x[0] || at > x[x.len() - 1] {
        return None;
    }
    let i = x.partition_point(|&v| v <= at);
    if i == 0 {
        return Some(y[0]);
    }
    if i >= x.len() {
        return Some(y[x.len() - 1]);
    }
    let t = (at - x[i - 1]) / (x[i] - x[i - 1]);
    Some(y[i - 1] + t * (y[i] - y[i - 1]))
}

/// What can be wrong with a library.
#[derive(Debug, thiserror::Error)]
pub enum LibraryError {
    #[error("{path}: cannot read: {error}")]
    Io {
        path: PathBuf,
        error: std::io::Error,
    },
    #[error("{path}:{line}: {reason}")]
    Invalid {
        path: PathBuf,
        line: usize,
        reason: String,
    },
    #[error("{path}: member id `{id}` appears twice")]
    Duplicate { path: PathBuf, id: String },
}

/// The index file of a library folder.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Index {
    pub name: String,
    pub version: String,
    /// Member ids in library order; each has `members/<id>.spectrum`.
    pub members: Vec<String>,
}

/// A loaded library: members in library order.
#[derive(Debug, Clone, PartialEq)]
pub struct Library {
    pub name: String,
    pub version: String,
    /// Where it came from: a folder, or `embedded`.
    pub origin: String,
    pub members: Vec<Endmember>,
}

macro_rules! embed {
    ($id:literal) => {
        (
            concat!("members/", $id, ".spectrum"),
            include_str!(concat!("../../spectra-lib/members/", $id, ".spectrum")),
        )
    };
}

/// The default library's files, compiled in (paths relative to `spectra-lib/`).
const EMBEDDED: &[(&str, &str)] = &[
    (
        "library.toml",
        include_str!("../../spectra-lib/library.toml"),
    ),
    embed!("s8-alpha-room"),
    embed!("s8-alpha-cold"),
    embed!("sulfur-red-short-chain"),
    embed!("sulfur-polymeric"),
    embed!("so2-frost-fine"),
    embed!("so2-frost-coarse"),
    embed!("pyroxene-mafic"),
    embed!("olivine-mafic"),
    embed!("basalt-dark"),
];

impl Library {
    /// The default library compiled into the binary.
    pub fn embedded() -> Library {
        Library::from_files("embedded", |rel| {
            EMBEDDED
                .iter()
                .find(|(p, _)| *p == rel)
                .map(|(_, t)| t.to_string())
                .ok_or_else(|| std::io::Error::from(std::io::ErrorKind::NotFound))
        })
        .expect("the embedded library is checked by the test suite")
    }

    /// Loads a library folder (or its `library.toml`).
    pub fn load(path: &Path) -> Result<Library, LibraryError> {
        if !path.exists() {
            return Err(LibraryError::Io {
                path: path.to_path_buf(),
                error: std::io::Error::new(
                    std::io::ErrorKind::NotFound,
                    "no such library folder (a folder with library.toml and members/)",
                ),
            });
        }
        let folder = if path.is_dir() {
            path.to_path_buf()
        } else {
            path.parent().unwrap_or(Path::new(".")).to_path_buf()
        };
        Library::from_files(&folder.display().to_string(), |rel| {
            std::fs::read_to_string(folder.join(rel))
        })
    }

    fn from_files(
        origin: &str,
        read: impl Fn(&str) -> std::io::Result<String>,
    ) -> Result<Library, LibraryError> {
        let at = |rel: &str| PathBuf::from(origin).join(rel);
        let index_text = read("library.toml").map_err(|source| LibraryError::Io {
            path: at("library.toml"),
            error: source,
        })?;
        let index: Index = toml::from_str(&index_text).map_err(|e| LibraryError::Invalid {
            path: at("library.toml"),
            line: e
                .span()
                .map(|s| {
                    index_text[..s.start.min(index_text.len())]
                        .matches('\n')
                        .count()
                        + 1
                })
                .unwrap_or(1),
            reason: e.message().trim_end().replace('\n', "; "),
        })?;
        let mut seen = BTreeSet::new();
        let mut members = Vec::with_capacity(index.members.len());
        for id in &index.members {
            if !seen.insert(id.clone()) {
                return Err(LibraryError::Duplicate {
                    path: at("library.toml"),
                    id: id.clone(),
                });
            }
            let rel = format!("members/{id}.spectrum");
            let text = read(&rel).map_err(|source| LibraryError::Io {
                path: at(&rel),
                error: source,
            })?;
            let member = Endmember::parse(&at(&rel), &text)?;
            if &member.id != id {
                return Err(LibraryError::Invalid {
                    path: at(&rel),
                    line: 1,
                    reason: format!(
                        "the file says id `{}` but the index lists `{id}`",
                        member.id
                    ),
                });
            }
            members.push(member);
        }
        if members.is_empty() {
            return Err(LibraryError::Invalid {
                path: at("library.toml"),
                line: 1,
                reason: "the library lists no members".into(),
            });
        }
        Ok(Library {
            name: index.name,
            version: index.version,
            origin: origin.to_string(),
            members,
        })
    }

    /// Loads `path` when given, else the embedded default.
    pub fn load_or_default(path: Option<&Path>) -> Result<Library, LibraryError> {
        match path {
            Some(p) => Library::load(p),
            None => Ok(Library::embedded()),
        }
    }

    /// SHA-256 of the library's content (index fields and every member file's text), so
    /// results record exactly which spectra they used.
    pub fn sha256(&self) -> String {
        use sha2::{Digest, Sha256};
        let mut h = Sha256::new();
        h.update(self.name.as_bytes());
        h.update(b"\n");
        h.update(self.version.as_bytes());
        for m in &self.members {
            h.update(b"\n");
            h.update(m.to_file_text().as_bytes());
        }
        format!("{:x}", h.finalize())
    }

    pub fn ids(&self) -> Vec<&str> {
        self.members.iter().map(|m| m.id.as_str()).collect()
    }

    /// Writes this library as a folder (index and member files), each file atomically.
    pub fn write_folder(&self, folder: &Path) -> Result<(), crate::atomic::WriteError> {
        let members = folder.join("members");
        std::fs::create_dir_all(&members).map_err(|source| crate::atomic::WriteError::Io {
            path: members.clone(),
            error: source,
        })?;
        for m in &self.members {
            crate::atomic::write_bytes(
                &members.join(format!("{}.spectrum", m.id)),
                m.to_file_text().as_bytes(),
            )?;
        }
        let index = Index {
            name: self.name.clone(),
            version: self.version.clone(),
            members: self.members.iter().map(|m| m.id.clone()).collect(),
        };
        let text = toml::to_string(&index).expect("indexes always serialise");
        crate::atomic::write_bytes(&folder.join("library.toml"), text.as_bytes())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample_member_text(samples: &str) -> String {
        format!(
            "id = \"test-member\"\nname = \"Test\"\nclass = \"other\"\n\n[origin]\nmethod = \"made up\"\n\
             [[origin.source]]\ntag = \"computed\"\ncitation = \"this test\"\n\n{SAMPLES_MARKER}\n{samples}"
        )
    }

    #[test]
    fn a_member_round_trips_through_its_file_text() {
        let text = sample_member_text("0.5 0.1\n0.6 0.2\n");
        let m = Endmember::parse(Path::new("t.spectrum"), &text).unwrap();
        let again = Endmember::parse(Path::new("t.spectrum"), &m.to_file_text()).unwrap();
        assert_eq!(m, again);
        assert!((m.at(0.55).unwrap() - 0.15).abs() < 1e-12);
    }

    #[test]
    fn errors_name_the_line() {
        let text = sample_member_text("0.5 0.1\n0.6 0.2\n0.55 0.3\n");
        let e = Endmember::parse(Path::new("t.spectrum"), &text).unwrap_err();
        assert!(
            e.to_string().starts_with("t.spectrum:14: wavelength 0.55"),
            "{e}"
        );
        let text = sample_member_text("0.5 0.1\n0.6 1.7\n");
        let e = Endmember::parse(Path::new("t.spectrum"), &text).unwrap_err();
        assert!(
            e.to_string().contains(":13: reflectance 1.7 is outside"),
            "{e}"
        );
        let text = sample_member_text("0.5 0.1\n0.6 -0.01\n");
        assert!(Endmember::parse(Path::new("t"), &text).is_err());
    }

    #[test]
    fn a_missing_field_is_named_with_its_line() {
        let text = format!("id = \"x\"\nclass = \"other\"\n[origin]\nmethod = \"m\"\n[[origin.source]]\ntag = \"read\"\ncitation = \"c\"\n{SAMPLES_MARKER}\n0.5 0.1\n0.6 0.2\n");
        let e = Endmember::parse(Path::new("t.spectrum"), &text).unwrap_err();
        assert!(e.to_string().contains("missing field `name`"), "{e}");
    }

    #[test]
    fn ids_are_checked() {
        assert!(check_id("s8-alpha").is_ok());
        assert!(check_id("S8").is_err());
        assert!(check_id("a+b").is_err());
        assert!(check_id("shade").is_err());
    }

    #[test]
    fn interpolation_is_linear_and_bounded() {
        let x = [1.0, 2.0, 4.0];
        let y = [0.0, 1.0, 0.0];
        assert_eq!(interpolate(&x, &y, 3.0), Some(0.5));
        assert_eq!(interpolate(&x, &y, 4.0), Some(0.0));
        assert_eq!(interpolate(&x, &y, 4.5), None);
    }
}
