//! Regenerates `spectra-lib/` (index and member files) from the parametric models in
//! `src/library/starter.rs`. The test suite checks that the shipped files equal this output.
//!
//! Usage: cargo run --example make_starter_library

fn main() -> anyhow::Result<()> {
    let lib = thiomap::library::starter::starter_library();
    lib.write_folder("spectra-lib".as_ref())?;
    println!("wrote spectra-lib/ ({} members)", lib.members.len());
    Ok(())
}
