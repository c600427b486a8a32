//! platekin: from a plate reader's raw kinetic export and a plate layout to per-well initial rates
//! with linearity checks, per-condition rate tables and rate-law fits.
//!
//! The crate is layered; each layer uses only the layers above it in this list (see
//! DEVELOPERS.md and the test `tests/layers.rs`):
//! [`core`] -> [`config`] -> [`files`] -> [`import`], [`layout`] -> [`signal`] -> [`rates`] ->
//! [`fit`] -> [`groups`] -> [`progress`] -> [`pipeline`], [`campaign`] -> [`render`] -> [`commands`];
//! [`simulate`] sits apart at the top and serves the demo data, tests and benchmarks.
//! The library never prints and never exits.

pub mod campaign;
pub mod commands;
pub mod config;
pub mod core;
pub mod files;
pub mod fit;
pub mod groups;
pub mod import;
pub mod layout;
pub mod pipeline;
pub mod progress;
pub mod rates;
pub mod render;
pub mod screen;
pub mod signal;
pub mod simulate;
