//! Pictures: the colour of spectra ([`colour`]) and spectrum plots ([`plot`]). Map
//! pictures join as the pipeline grows.

pub mod colour;
pub mod plot;
