//! Fuzz target: a plate layout in text (tidy or grid form) for each plate format. An error names
//! the file and a position; a layout holds only wells on the plate, at least one not `empty`, and a
//! substrate for every sample and no-enzyme control.
#![no_main]

use libfuzzer_sys::fuzz_target;
use platekin::core::plate::PlateFormat;
use platekin::layout::{parse_layout, Role};

fuzz_target!(|bytes: &[u8]| {
    const FILE: &str = "fuzz-layout.csv";
    let grid = match platekin::files::sheet::read_text_cells(bytes, FILE) {
        Ok(grid) => grid,
        Err(error) => return platekin_fuzz::assert_error_names_a_place(&error.to_string(), FILE),
    };
    for plate in PlateFormat::ALL {
        match parse_layout(&grid, plate) {
            Err(error) => {
                let message = error.to_string();
                // A layout of only `empty` wells is about the whole file.
                if !message.contains("names no wells other than empty ones") {
                    platekin_fuzz::assert_error_names_a_place(&message, FILE);
                }
            }
            Ok(layout) => {
                assert!(layout.wells.keys().all(|well| plate.contains(*well)));
                assert!(layout.wells.values().any(|setup| setup.role != Role::Empty));
                for setup in layout.wells.values() {
                    if matches!(setup.role, Role::Sample | Role::NoEnzyme) {
                        assert!(setup.substrate.is_some_and(|s| s.is_finite() && s >= 0.0));
                    }
                    for amount in [setup.substrate, setup.enzyme, setup.inhibitor]
                        .into_iter()
                        .flatten()
                    {
                        assert!(amount.is_finite() && amount >= 0.0);
                    }
                }
            }
        }
    }
});
