//! Fuzz target: a spreadsheet export (XLSX and the other formats calamine reads), its first sheet
//! with data, the shape detected (see `platekin_fuzz::check_import`).
#![no_main]

use libfuzzer_sys::fuzz_target;
use platekin::files::sheet::{read_spreadsheet_cells, MergedCells};

fuzz_target!(|bytes: &[u8]| {
    const FILE: &str = "fuzz-export.xlsx";
    match read_spreadsheet_cells(bytes, FILE, None, MergedCells::Keep) {
        Err(error) => platekin_fuzz::assert_error_names_a_place(&error.to_string(), FILE),
        Ok(grid) => platekin_fuzz::check_import(&grid, FILE, None),
    }
});
