//! platekin: from a plate reader's raw kinetic export and a plate layout to per-well initial rates
//! with linearity checks, per-condition rate tables and Michaelis-Menten fits.
//!
//! The modules follow the data: [`sheet_reader`] and [`cells`] read files into positioned cells;
//! [`plate`] and [`units`] parse well IDs and units; [`regression`] and [`rates`] choose initial-rate
//! windows; [`output`] writes files atomically. The library never prints and never exits.

pub mod analysis;
pub mod cells;
pub mod conditions;
pub mod demo;
pub mod fit;
pub mod groups;
pub mod import;
pub mod layout;
pub mod output;
pub mod plate;
pub mod plots;
pub mod progress;
pub mod rate_table;
pub mod rates;
pub mod regression;
pub mod report;
pub mod run;
pub mod settings;
pub mod sheet_reader;
pub mod simulate;
pub mod tables;
pub mod units;
