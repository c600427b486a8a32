//! The wide shape: one header row with a time column and one column per well (`A1` or `A01`),
//! one row per read; metadata lines may sit above the header and summary lines below the block.

use crate::core::cells::{column_letters, Cell, CellGrid};

use super::time::{classify_header, raw_time_of_cell, HeaderKind, HeaderTimeUnit};
use super::{
    list_some, short_row, time_text_error, DataShape, ImportError, ImportOptions, ReadRecord, ShapeTable,
    TimeUnitRule, WellColumn, WellMap,
};

/// Whether a row is a wide header: a time header and at least one well-ID header.
pub(super) fn is_header(cells: &[Cell]) -> bool {
    let (mut has_time, mut has_well) = (false, false);
    for cell in cells {
        match classify_header(cell) {
            HeaderKind::Time(_) => has_time = true,
            HeaderKind::Well(_) => has_well = true,
            _ => {}
        }
        if has_time && has_well {
            return true;
        }
    }
    false
}

/// Reads the wide table whose header is zero-based row `header_row`.
///
/// The data block runs from the row below the header to the first blank row or the first row
/// whose time cell holds no time; non-blank rows after it are summary lines, ignored with a
/// warning.
pub(super) fn parse(
    grid: &CellGrid,
    header_row: usize,
    options: &ImportOptions,
) -> Result<ShapeTable, ImportError> {
    let header = grid.rows.get(header_row).map(Vec::as_slice).unwrap_or_default();
    let mut time_column: Option<(usize, HeaderTimeUnit)> = None;
    let mut temperature_column: Option<usize> = None;
    let mut wells: Vec<WellColumn> = Vec::new();
    let mut well_columns: Vec<usize> = Vec::new();
    let mut columns_of_wells: WellMap<usize> = WellMap::new();
    let mut ignored: Vec<String> = Vec::new();
    let reads_expected = grid.rows.len().saturating_sub(header_row + 1);
    for (column, cell) in header.iter().enumerate() {
        match classify_header(cell) {
            HeaderKind::Time(unit) if time_column.is_none() => time_column = Some((column, unit)),
            HeaderKind::Temperature if temperature_column.is_none() => temperature_column = Some(column),
            HeaderKind::Well(well) => {
                if let Err(first) = columns_of_wells.insert_new(well, column) {
                    return Err(ImportError::DuplicateWell {
                        well,
                        positions: Box::new([
                            grid.position(header_row, Some(first)),
                            grid.position(header_row, Some(column)),
                        ]),
                    });
                }
                wells.push(WellColumn::new(well, (header_row, column), reads_expected));
                well_columns.push(column);
            }
            _ if cell.is_empty() => {}
            _ => ignored.push(format!("'{}' ({})", cell.as_text(), column_letters(column + 1))),
        }
    }
    let Some((time_column, header_unit)) = time_column else {
        return Err(ImportError::NoWells {
            position: grid.position(header_row, None),
            detail: "the header row has no time column".to_string(),
        });
    };
    if wells.is_empty() {
        return Err(ImportError::NoWells {
            position: grid.position(header_row, None),
            detail: "no column is headed by a well ID such as A1 or A01".to_string(),
        });
    }
    let mut warnings = Vec::new();
    if !ignored.is_empty() {
        warnings.push(format!(
            "{}: columns that are neither time, temperature nor a well are not read: {}",
            grid.position(header_row, None),
            list_some(&ignored, 10)
        ));
    }
    let units = TimeUnitRule::settle(&header_unit, options.time_unit, || {
        grid.position(header_row, Some(time_column))
    })?;
    let needed_width = well_columns.iter().max().map_or(0, |last| last + 1);
    let mut reads: Vec<ReadRecord> = Vec::with_capacity(reads_expected);
    let mut temperatures: Vec<Option<f64>> = Vec::new();
    let mut row = header_row + 1;
    while row < grid.rows.len() {
        let cells = grid.rows[row].as_slice();
        if cells.iter().all(Cell::is_empty) {
            break;
        }
        let raw = match raw_time_of_cell(grid.cell(row, time_column)) {
            None => break,
            Some(Err(error)) => return Err(time_text_error(error, grid.position(row, Some(time_column)))),
            Some(Ok(raw)) => raw,
        };
        let time_s = units.seconds(raw, || grid.position(row, Some(time_column)))?;
        if cells.len() < needed_width {
            let missing = well_columns
                .iter()
                .filter(|&&column| column >= cells.len())
                .count();
            short_row(
                grid,
                options,
                row,
                format!("{} cells where the header has {}", cells.len(), needed_width),
                &format!("its last {missing} well cells are unreadable"),
                &mut warnings,
            )?;
        } else if well_columns.iter().all(|&column| cells[column].is_empty()) {
            short_row(
                grid,
                options,
                row,
                "a time but every well cell empty".to_string(),
                "every well cell of this read is unreadable",
                &mut warnings,
            )?;
        }
        for (trace, &column) in wells.iter_mut().zip(&well_columns) {
            trace.push_cell(cells.get(column), row, column);
        }
        if let Some(column) = temperature_column {
            temperatures.push(grid.cell(row, column).as_number());
        }
        reads.push(ReadRecord {
            time_s,
            row,
            column: time_column,
        });
        row += 1;
    }
    if reads.is_empty() {
        return Err(ImportError::NoReads {
            position: grid.position(header_row, None),
        });
    }
    let trailing: Vec<usize> = (row..grid.rows.len())
        .filter(|&later| !grid.row_is_blank(later))
        .collect();
    if let (Some(first), Some(last)) = (trailing.first(), trailing.last()) {
        warnings.push(format!(
            "{}: the data block ends at row {}; {} non-blank row(s) below it (rows {}-{}) are summary lines and not read",
            grid.source,
            row + 1,
            trailing.len(),
            first + 1,
            last + 1
        ));
    }
    Ok(ShapeTable {
        shape: DataShape::Wide,
        reads,
        temperatures_c: temperature_column.map(|_| temperatures),
        wells,
        warnings,
    })
}
