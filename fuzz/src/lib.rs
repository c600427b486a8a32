//! The promise each fuzz target asserts, shared: a reader never panics; an error names the file
//! and a position (or is about the whole file); a success accounts for every row a read could
//! stand in, with times strictly increasing and every well on the plate.

use platekin::core::cells::CellGrid;
use platekin::import::{import_cells, rows_unaccounted, DataShape, ImportOptions};

/// Phrases of the errors that concern a whole file or sheet rather than one position.
const WHOLE_FILE: [&str; 9] = [
    "no kinetic data found",
    "every sheet is empty",
    "not a readable spreadsheet",
    "no sheet named",
    "more than",
    "is larger than",
    "the table is empty",
    "no row holds both a substrate and a rate",
    "no plate layout found",
];

/// Checks that an error message names `file` and a row, or is about the whole file.
pub fn assert_error_names_a_place(message: &str, file: &str) {
    assert!(
        message.contains(file),
        "the error does not name the file: {message}"
    );
    assert!(
        message.contains("row") || WHOLE_FILE.iter().any(|phrase| message.contains(phrase)),
        "the error names no position: {message}"
    );
}

/// Imports an export already read into cells (forcing `shape` when given) and checks the
/// importer's promise.
pub fn check_import(grid: &CellGrid, file: &str, shape: Option<DataShape>) {
    let options = ImportOptions {
        shape,
        ..ImportOptions::default()
    };
    match import_cells(grid, &options) {
        Err(error) => assert_error_names_a_place(&error.to_string(), file),
        Ok(data) => {
            let unaccounted = rows_unaccounted(&data, grid);
            assert!(
                unaccounted.is_empty(),
                "rows {unaccounted:?} neither read nor named"
            );
            assert!(!data.times_s.is_empty());
            assert!(data.times_s.iter().all(|time| time.is_finite()));
            assert!(
                data.times_s.windows(2).all(|pair| pair[0] < pair[1]),
                "times not increasing"
            );
            for trace in &data.wells {
                assert!(data.plate.contains(trace.well), "{} off the plate", trace.well);
                assert_eq!(trace.values.len(), data.times_s.len(), "{}", trace.well);
                assert!(trace.values.iter().flatten().all(|value| value.is_finite()));
                for cell in &trace.unreadable {
                    assert!(
                        cell.read_index < trace.values.len(),
                        "an unreadable cell past the reads"
                    );
                    assert_eq!(
                        trace.values.get(cell.read_index),
                        None,
                        "an unreadable cell with a value"
                    );
                }
            }
        }
    }
}

/// Reads text bytes into cells and checks the import with `shape` forced.
pub fn check_text_export(bytes: &[u8], shape: DataShape) {
    const FILE: &str = "fuzz-export.csv";
    match platekin::files::sheet::read_text_cells(bytes, FILE) {
        Err(error) => assert_error_names_a_place(&error.to_string(), FILE),
        Ok(grid) => check_import(&grid, FILE, Some(shape)),
    }
}
