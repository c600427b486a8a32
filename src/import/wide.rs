//! The wide shape: one header row with a time column and one column per well (`A1` or `A01`),
//! one row per read; metadata lines may sit above the header and summary lines below the reads.
//! Which rows are reads follows the one rule of [`super::rows`].

use crate::core::cells::{column_letters, Cell, CellGrid};

use super::rows::{blank_or_repeated_header, settle_rows, time_cell_looks_like_read, RowKind};
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

/// The columns of a wide header.
struct WideColumns {
    /// The time column and the unit its header states.
    time: (usize, HeaderTimeUnit),
    /// The temperature column, if any.
    temperature: Option<usize>,
    /// One trace per well column, and the column.
    wells: Vec<(WellColumn, usize)>,
    /// The header's width: cells beyond it must be empty.
    width: usize,
}

/// Reads the header row: time, temperature and well columns; other columns named in a warning.
/// Wells off a plate format the user gave are not read (named in a warning).
fn header_columns(
    grid: &CellGrid,
    header_row: usize,
    options: &ImportOptions,
    warnings: &mut Vec<String>,
) -> Result<WideColumns, ImportError> {
    let mut time_column: Option<(usize, HeaderTimeUnit)> = None;
    let mut temperature_column: Option<usize> = None;
    let mut wells: Vec<(WellColumn, usize)> = Vec::new();
    let mut columns_of_wells: WellMap<usize> = WellMap::new();
    let mut ignored: Vec<String> = Vec::new();
    let mut off_plate: Vec<String> = Vec::new();
    let reads_expected = grid.n_rows().saturating_sub(header_row + 1);
    for (column, cell) in grid.row(header_row).enumerate() {
        match classify_header(&cell) {
            HeaderKind::Time(unit) if time_column.is_none() => time_column = Some((column, unit)),
            HeaderKind::Temperature if temperature_column.is_none() => temperature_column = Some(column),
            HeaderKind::Well(well) if options.plate.is_some_and(|plate| !plate.contains(well)) => {
                off_plate.push(format!("'{}' ({})", cell.as_text(), column_letters(column + 1)));
            }
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
                wells.push((
                    WellColumn::new(well, (header_row, column), reads_expected),
                    column,
                ));
            }
            _ if cell.is_empty() => {}
            _ => ignored.push(format!("'{}' ({})", cell.as_text(), column_letters(column + 1))),
        }
    }
    let Some(time) = time_column else {
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
    if !ignored.is_empty() {
        warnings.push(format!(
            "{}: columns that are neither time, temperature nor a well are not read: {}",
            grid.position(header_row, None),
            list_some(&ignored, 10)
        ));
    }
    if let Some(plate) = options.plate.filter(|_| !off_plate.is_empty()) {
        warnings.push(format!(
            "{}: columns headed by wells that are not on the {plate}-well plate given are not read: {}",
            grid.position(header_row, None),
            list_some(&off_plate, 10)
        ));
    }
    Ok(WideColumns {
        time,
        temperature: temperature_column,
        wells,
        width: grid.row_width(header_row),
    })
}

/// Sorts one row below the header (see [`super::rows`]).
fn row_kind(
    grid: &CellGrid,
    row: usize,
    header_row: usize,
    time_column: usize,
    well_columns: &[usize],
) -> RowKind {
    if let Some(kind) = blank_or_repeated_header(grid, row, header_row) {
        return kind;
    }
    let time_cell = grid.cell(row, time_column);
    match raw_time_of_cell(&time_cell, grid.decimal_mark) {
        Ok(_) => RowKind::Data,
        Err(error) => {
            let holds_reading = well_columns
                .iter()
                .any(|column| matches!(grid.cell(row, *column), Cell::Number(_)));
            let looks_like_read = time_cell_looks_like_read(time_cell, holds_reading);
            RowKind::NotData {
                position: grid.position(row, Some(time_column)),
                reason: error.reason(),
                looks_like_read,
            }
        }
    }
}

/// Reads the wide table whose header is zero-based row `header_row`.
pub(super) fn parse(
    grid: &CellGrid,
    header_row: usize,
    options: &ImportOptions,
) -> Result<ShapeTable, ImportError> {
    let mut warnings = Vec::new();
    let WideColumns {
        time: (time_column, header_unit),
        temperature,
        mut wells,
        width,
    } = header_columns(grid, header_row, options, &mut warnings)?;
    let units = TimeUnitRule::settle(&header_unit, options.time_unit, || {
        grid.position(header_row, Some(time_column))
    })?;
    let well_columns: Vec<usize> = wells.iter().map(|(_, column)| *column).collect();
    let kinds: Vec<(usize, RowKind)> = (header_row + 1..grid.n_rows())
        .map(|row| (row, row_kind(grid, row, header_row, time_column, &well_columns)))
        .collect();
    let settled = settle_rows(grid, kinds)?;
    warnings.extend(settled.warnings);
    let rows_passed_over = settled.passed_over;
    let needed_width = well_columns.iter().max().map_or(0, |last| last + 1);
    let mut reads: Vec<ReadRecord> = Vec::with_capacity(settled.data_rows.len());
    let mut temperatures: Vec<Option<f64>> = Vec::new();
    for &row in &settled.data_rows {
        let time_position = || grid.position(row, Some(time_column));
        let raw = raw_time_of_cell(&grid.cell(row, time_column), grid.decimal_mark)
            .map_err(|error| time_text_error(error, time_position()))?;
        let time_s = units.seconds(raw, time_position)?;
        if let Some((column, cell)) = grid
            .row(row)
            .enumerate()
            .skip(width)
            .find(|(_, cell)| !cell.is_empty())
        {
            return Err(ImportError::BeyondHeader {
                position: Box::new(grid.position(row, Some(column))),
                text: cell.as_text(),
                last: column_letters(width),
            });
        }
        let length = grid.row_len(row);
        if length < needed_width {
            let missing = well_columns.iter().filter(|&&column| column >= length).count();
            short_row(
                grid,
                options,
                row,
                format!("{length} cells where the header has {needed_width}"),
                &format!("its last {missing} well cells are unreadable"),
                &mut warnings,
            )?;
        } else if well_columns
            .iter()
            .all(|&column| grid.cell(row, column).is_empty())
        {
            short_row(
                grid,
                options,
                row,
                "a time but every well cell empty".to_string(),
                "every well cell of this read is unreadable",
                &mut warnings,
            )?;
        }
        for (trace, column) in &mut wells {
            let cell = (*column < length).then(|| grid.cell(row, *column));
            trace.push_cell(cell, row, *column);
        }
        if let Some(column) = temperature {
            temperatures.push(grid.cell(row, column).as_number());
        }
        reads.push(ReadRecord {
            time_s,
            row,
            column: time_column,
        });
    }
    if reads.is_empty() {
        return Err(ImportError::NoReads {
            position: grid.position(header_row, None),
        });
    }
    Ok(ShapeTable {
        shape: DataShape::Wide,
        reads,
        temperatures_c: temperature.map(|_| temperatures),
        wells: wells.into_iter().map(|(trace, _)| trace).collect(),
        warnings,
        rows_read: settled.data_rows,
        rows_passed_over,
    })
}
