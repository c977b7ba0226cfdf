//! Pictures: map pictures ([`maps`]), spectrum plots ([`plot`]), and the unit legend and
//! unit spectra ([`units`]). The colour science they draw with is [`crate::colour`].

pub mod maps;
pub mod overlay;
pub mod plot;
pub mod units;
