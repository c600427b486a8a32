//! Fuzz target: a rate table for `platekin fit` (text). An error names the file and a position; a
//! table read holds only finite numbers, concentrations >= 0, and rows in groups.
#![no_main]

use libfuzzer_sys::fuzz_target;
use platekin::config::FitSettings;
use platekin::files::input::{InputFile, InputRole};
use platekin::groups::rate_table::read_rate_table;

fuzz_target!(|bytes: &[u8]| {
    const FILE: &str = "fuzz-table.csv";
    let input = InputFile::new(InputRole::Table, FILE.to_string(), None, bytes.to_vec());
    match read_rate_table(&input, None, &FitSettings::default()) {
        Err(error) => platekin_fuzz::assert_error_names_a_place(&error.to_string(), FILE),
        Ok(table) => {
            assert!(!table.groups.is_empty());
            for group in &table.groups {
                for point in &group.points {
                    assert!(point.substrate.is_finite() && point.substrate >= 0.0);
                    assert!(point.inhibitor.is_finite() && point.inhibitor >= 0.0);
                    assert!(point.rate.is_finite());
                }
            }
        }
    }
});
