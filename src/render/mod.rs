//! Pictures: the colour of spectra ([`colour`]), map pictures ([`maps`]) and spectrum
//! plots ([`plot`]).

pub mod colour;
pub mod maps;
pub mod plot;
pub mod units;
