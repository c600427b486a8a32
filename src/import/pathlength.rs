//! A per-well pathlength table (`--pathlength-from FILE`): a header row with a `well` column and
//! either `pathlength [cm]` or the two water-peak reads `A977` and `A900`, then one well per line.
//!
//! Water-peak method (common practice): water absorbs in the near infrared at 977 nm and hardly at
//! 900 nm, so `l = (A977 - A900)_well / (A977 - A900)_1cm`, with the 1-cm reference difference a
//! setting (`water-reference`, default [`DEFAULT_WATER_REFERENCE`]). The band is temperature
//! sensitive and solutes and co-solvents (salt, glycerol, DMSO) change it, so the reference should
//! be read in a 1 cm cuvette of the assay buffer at the assay temperature.
//!
//! Every error names the file, row and column.

use std::collections::BTreeMap;

use crate::config::MAX_PATHLENGTH_CM;
use crate::core::cells::{Cell, CellGrid, Position};
use crate::core::plate::{PlateFormat, WellId};
use crate::core::units::split_header_unit;
use crate::files::input::InputFile;
use crate::files::sheet::{read_input_cells, MergedCells, SheetReadError};

pub use crate::config::DEFAULT_WATER_REFERENCE;

/// Why a pathlength table cannot be used.
#[derive(Debug, thiserror::Error)]
pub enum PathlengthFileError {
    /// The file could not be read into cells.
    #[error(transparent)]
    Read(#[from] SheetReadError),
    /// No header with the columns needed.
    #[error("{file}: no pathlength table found: expected a header row with 'well' and either 'pathlength [cm]' or 'A977' and 'A900'")]
    NoHeader {
        /// The file (and sheet).
        file: String,
    },
    /// A cell that is not what its column needs.
    #[error("{position}: {message}")]
    BadCell {
        /// The cell.
        position: Box<Position>,
        /// What is wrong.
        message: String,
    },
}

/// What the table's columns give.
enum Columns {
    Pathlength(usize),
    WaterPeak { a977: usize, a900: usize },
}

/// Reads the table into a pathlength (cm) per well.
pub fn read_well_pathlengths(
    input: &InputFile,
    plate: PlateFormat,
    water_reference: f64,
) -> Result<BTreeMap<WellId, f64>, PathlengthFileError> {
    let grid = read_input_cells(input, None, MergedCells::Fill)?;
    parse_well_pathlengths(&grid, plate, water_reference)
}

/// Parses the cells of a pathlength table (see the module docs).
pub fn parse_well_pathlengths(
    grid: &CellGrid,
    plate: PlateFormat,
    water_reference: f64,
) -> Result<BTreeMap<WellId, f64>, PathlengthFileError> {
    let name_of = |row: usize, column: usize| -> String {
        let text = grid.cell(row, column).as_text();
        split_header_unit(text.trim()).0.trim().to_ascii_lowercase()
    };
    let header = (0..grid.n_rows())
        .find_map(|row| {
            let width = grid.row_width(row);
            let find = |name: &str| (0..width).find(|&column| name_of(row, column) == name);
            let well = find("well")?;
            let columns = match (find("pathlength"), find("a977"), find("a900")) {
                (Some(column), ..) => Columns::Pathlength(column),
                (None, Some(a977), Some(a900)) => Columns::WaterPeak { a977, a900 },
                _ => return None,
            };
            Some((row, well, columns))
        })
        .ok_or_else(|| PathlengthFileError::NoHeader {
            file: grid.source.to_string(),
        })?;
    let (header_row, well_column, columns) = header;
    let bad = |row: usize, column: usize, message: String| PathlengthFileError::BadCell {
        position: Box::new(grid.position(row, Some(column))),
        message,
    };
    let number = |row: usize, column: usize, what: &str| -> Result<f64, PathlengthFileError> {
        match grid.cell(row, column) {
            Cell::Number(value) if value.is_finite() => Ok(value),
            other => Err(bad(
                row,
                column,
                format!("{what} '{}' is not a number", other.as_text()),
            )),
        }
    };
    let mut pathlengths = BTreeMap::new();
    for row in header_row + 1..grid.n_rows() {
        if grid.row_is_blank(row) {
            continue;
        }
        let text = grid.cell(row, well_column).as_text();
        let well = WellId::parse(&text)
            .filter(|well| well.row < plate.n_rows() && well.column < plate.n_columns())
            .ok_or_else(|| {
                bad(
                    row,
                    well_column,
                    format!("'{text}' is not a well of the {plate}-well plate"),
                )
            })?;
        let pathlength = match columns {
            Columns::Pathlength(column) => number(row, column, "pathlength")?,
            Columns::WaterPeak { a977, a900 } => {
                (number(row, a977, "A977")? - number(row, a900, "A900")?) / water_reference
            }
        };
        if !(pathlength > 0.0 && pathlength <= MAX_PATHLENGTH_CM) {
            return Err(bad(
                row,
                well_column,
                format!(
                    "well {well}: pathlength {pathlength} cm is not positive or beyond {MAX_PATHLENGTH_CM} cm (with A977 and A900, check that A977 is the larger and the water reference)"
                ),
            ));
        }
        if pathlengths.insert(well, pathlength).is_some() {
            return Err(bad(row, well_column, format!("well {well} is listed twice")));
        }
    }
    Ok(pathlengths)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::files::sheet::read_text_cells;
    use approx::assert_relative_eq;

    fn parse(text: &str) -> Result<BTreeMap<WellId, f64>, PathlengthFileError> {
        let grid = read_text_cells(text.as_bytes(), "paths.csv").unwrap();
        parse_well_pathlengths(&grid, PlateFormat::Wells96, DEFAULT_WATER_REFERENCE)
    }

    #[test]
    fn water_peak_reads_become_pathlengths_by_the_reference() {
        // (0.140 - 0.041) / 0.18 = 0.55 cm, (0.122 - 0.032) / 0.18 = 0.5 cm, by hand.
        let table = parse("# water peak\nWell,A977,A900\nA1,0.140,0.041\nB2,0.122,0.032\n").unwrap();
        assert_relative_eq!(table[&WellId::new(0, 0)], 0.55, max_relative = 1e-12);
        assert_relative_eq!(table[&WellId::new(1, 1)], 0.5, max_relative = 1e-12);
        let direct = parse("well,pathlength [cm]\nC3,0.61\n").unwrap();
        assert_eq!(direct[&WellId::new(2, 2)], 0.61);
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(128))]
        /// Any table text: no panic, and a refusal names the file.
        #[test]
        fn any_table_is_read_or_refused_naming_the_file(body in "[A-H0-9a-z,. \n-]{0,120}") {
            let text = format!("well,A977,A900\n{body}");
            if let Err(error) = parse(&text) {
                proptest::prop_assert!(error.to_string().contains("paths.csv"), "{}", error);
            }
        }
    }

    #[test]
    fn bad_cells_name_the_file_row_and_column() {
        let message = parse("well,A977,A900\nA1,0.14,high\n").unwrap_err().to_string();
        assert!(
            message.contains("paths.csv") && message.contains("row 2") && message.contains("A900"),
            "{message}"
        );
        let message = parse("well,A977,A900\nA1,0.04,0.14\n").unwrap_err().to_string();
        assert!(
            message.contains("well A1") && message.contains("not positive"),
            "{message}"
        );
        let message = parse("well,pathlength\nZ99,0.5\n").unwrap_err().to_string();
        assert!(message.contains("Z99"), "{message}");
        assert!(parse("well,volume\nA1,200\n")
            .unwrap_err()
            .to_string()
            .contains("no pathlength table"));
    }
}
