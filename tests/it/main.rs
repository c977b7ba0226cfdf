//! thiomap's integration tests: one binary, a module per topic. Fixtures live in
//! `tests/fixtures/` with their provenance; malformed inputs are built inside each test.

mod bad_input;
mod batch;
mod change;
mod cli;
mod coverage;
mod demo;
mod external;
mod library;
mod library_cli;
mod map_cli;
mod misfit;
mod out_folders;
mod report;
mod roundtrip;
mod solar;
mod subsets;
mod support;
mod targets;
mod thermal;
mod units;
mod unmix;
mod unmix_cli;
mod weights;
