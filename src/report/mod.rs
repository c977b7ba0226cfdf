//! The report: one self-contained HTML page per results folder (and one per merged
//! archive, [`archive`]). Everything the page shows is read from the folder's products
//! ([`Folder::read`]); the pixel inspector's spectra come from the input cube as the solver
//! saw it ([`Spectra`]), when the caller has it (the `map --report` path holds it in
//! memory; `thiomap report` reads the cube named in `run.json` and checks its hash).
//!
//! The archive's page lives with the archive (`crate::batch::page`) and uses these pieces.
//!
//! The page is one file (images as `data:` URIs, SVG, styles and script inline; no
//! request of any kind) and deterministic: it carries no wall-clock time and nothing that
//! changes between reruns, so two runs of one recipe give the same page.
//!
//! No templating crate: the page is a few hundred lines of markup whose every text value
//! passes through [`page::esc`], which is easier to audit than a template language's
//! escaping rules. Pictures reuse the results folder's renderers ([`crate::render`]).

pub mod change;
pub mod charts;
mod cube;
mod figures;
mod folder;
mod inspect;
pub mod markup;
pub mod page;
pub mod targets;

pub use folder::{Folder, ReportError};
pub use inspect::Spectra;

/// The cautions every page shows, verbatim from the README's "Cautions" section.
pub const CAUTIONS: &[&str] = &[
    "thiomap's maps, and any targets suggested from them, are analysis aids built on \
     models: the starter library is parametric, abundances carry the stated uncertainties, \
     and a unit's name comes from rules, not from a field check.",
    "Temperatures of hot spots from a single-pixel fit are model estimates with their \
     stated errors, sensitive to the emissivity and to unresolved temperature mixtures.",
    "The maps can feed decisions about spacecraft pointing and about fieldwork at active \
     vents, where SO2 and H2S gas, heat and unstable ground are hazards. Such decisions \
     defer to mission flight rules, local codes and licensed practice; use thiomap's \
     output as one input among the ones those require.",
    crate::targets::CAUTION,
];

/// The page for one results folder, as HTML text. `run_json` is the text of `run.json`
/// when the caller writes it after the page (`--report`), else it is read from the folder.
/// Returns the page and the problems found (also stated in the page).
pub fn render(
    dir: &std::path::Path,
    run_json: Option<&str>,
    spectra: Option<&Spectra>,
    spectra_note: Option<&str>,
) -> Result<(String, Vec<String>), ReportError> {
    let folder = Folder::read(dir, run_json)?;
    let insp = inspect::build(&folder, spectra, spectra_note);
    let html = cube::cube_page(&folder, &insp, spectra);
    Ok((html, folder.problems.clone()))
}
