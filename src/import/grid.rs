//! The grid shape: one plate-shaped block per read. Each block is a time line (`Time 0:01:30`,
//! `t = 90 s`, `Cycle 3, Time 0:01:30`), optionally a temperature line, a row of column numbers
//! (first cell empty or a label) and one row per plate-row letter (`A`, `B`, ...), in order.
//!
//! The rule of [`super::rows`] holds for blocks too: a plate row that holds readings is read or
//! refused, never passed over (a block's rows out of order, a cell beyond the column numbers, a
//! plate row outside any block because its row of column numbers is broken); a time line with
//! no block below it is refused when more blocks follow, and otherwise (an aborted last read)
//! follows the short-row policy.

use crate::core::cells::{column_letters, Cell, CellGrid};
use crate::core::plate::{parse_row_letters, row_label, WellId};

use super::time::{parse_block_line, BlockTime, HeaderTimeUnit};
use super::{
    list_some, short_row, time_text_error, DataShape, ImportError, ImportOptions, ReadRecord, ShapeTable,
    TimeUnitRule, WellColumn, WellMap,
};

/// The most plate rows and columns a block can have (a 1536-well plate).
const MAX_PLATE_ROWS: usize = 32;
/// See [`MAX_PLATE_ROWS`].
const MAX_PLATE_COLUMNS: usize = 48;

/// The plate row a cell names (`A`..`Z`, `AA`..`AF`), if it names one.
fn row_letter(cell: Cell) -> Option<u16> {
    match cell {
        Cell::Text(text) => parse_row_letters(text.trim()),
        _ => None,
    }
}

/// The plate column numbers of a row of column numbers (cells after the first: strictly
/// increasing whole numbers 1..=48), each with its zero-based cell index.
fn column_numbers(cells: &[Cell]) -> Option<Vec<(u16, usize)>> {
    let width = cells.iter().rposition(|cell| !cell.is_empty())? + 1;
    if width < 2 || matches!(cells.first(), Some(Cell::Number(_) | Cell::Duration(_))) {
        return None;
    }
    let mut numbers = Vec::with_capacity(width - 1);
    let mut previous = 0.0;
    for (index, cell) in cells[..width].iter().enumerate().skip(1) {
        match cell {
            Cell::Number(value)
                if value.fract() == 0.0 && *value > previous && *value <= MAX_PLATE_COLUMNS as f64 =>
            {
                previous = *value;
                // Whole, positive and at most 48: the conversion is exact.
                numbers.push((*value as u16 - 1, index));
            }
            _ => return None,
        }
    }
    Some(numbers)
}

/// Whether zero-based `row` is a block's row of column numbers: its cells after the first are
/// 1, 2, 3, ... and the next row starts with a plate-row letter.
pub(super) fn is_column_number_row(grid: &CellGrid, row: usize) -> bool {
    row < grid.n_rows()
        && plate_row_of(grid, row + 1).is_some()
        && column_numbers(&grid.row_cells(row)).is_some()
}

/// What is wrong with a row that looks like a row of column numbers but is none (every cell
/// after the first a number, at least two of them), if it is one.
fn broken_column_numbers(cells: &[Cell]) -> Option<String> {
    let width = cells.iter().rposition(|cell| !cell.is_empty())? + 1;
    if width < 3
        || matches!(cells.first(), Some(Cell::Number(_) | Cell::Duration(_)))
        || column_numbers(cells).is_some()
        || !cells[1..width].iter().all(|cell| matches!(cell, Cell::Number(_)))
    {
        return None;
    }
    let mut previous = 0.0;
    for (index, cell) in cells[..width].iter().enumerate().skip(1) {
        let value = cell.as_number().unwrap_or(f64::NAN);
        if !(value.fract() == 0.0 && value > previous && value <= MAX_PLATE_COLUMNS as f64) {
            return Some(format!(
                "{} (column {}) is not a column number after {}",
                cell.as_text(),
                column_letters(index + 1),
                previous
            ));
        }
        previous = value;
    }
    None
}

/// Whether zero-based `row` holds numbers in at least two cells after the first.
fn holds_readings(grid: &CellGrid, row: usize) -> bool {
    grid.row(row)
        .skip(1)
        .filter(|cell| matches!(cell, Cell::Number(_)))
        .nth(1)
        .is_some()
}

/// One block as found.
struct Block {
    /// The read's time line (as written) and its zero-based row.
    time: (BlockTime, usize),
    /// The read's temperature, if the block has a temperature line.
    temperature_c: Option<f64>,
    /// Zero-based row of the column numbers.
    column_row: usize,
    /// Plate column (zero-based) to cell index.
    cell_of_column: [Option<usize>; MAX_PLATE_COLUMNS],
    /// Plate row (zero-based) to zero-based grid row.
    row_of_plate_row: [Option<usize>; MAX_PLATE_ROWS],
}

/// Reads every block of a grid export.
///
/// Temperature lines: one inside a block (between its time line and its column numbers) belongs
/// to that block; one after a block's plate rows belongs to that block if it has none yet, else
/// to the next block.
pub(super) fn parse(grid: &CellGrid, options: &ImportOptions) -> Result<ShapeTable, ImportError> {
    let mut blocks: Vec<Block> = Vec::new();
    let mut pending_time: Option<(BlockTime, usize)> = None;
    let mut pending_temperature: Option<f64> = None;
    let mut warnings: Vec<String> = Vec::new();
    let mut rows_read: Vec<usize> = Vec::new();
    let mut rows_passed_over: Vec<usize> = Vec::new();
    let mut row = 0;
    while row < grid.n_rows() {
        if grid.row_is_blank(row) {
            row += 1;
            continue;
        }
        if is_column_number_row(grid, row) {
            let block = read_block(grid, row, &mut pending_time, &mut pending_temperature)?;
            rows_read.push(block.time.1);
            rows_read.push(block.column_row);
            rows_read.extend(block.row_of_plate_row.iter().flatten());
            row = block
                .row_of_plate_row
                .iter()
                .flatten()
                .max()
                .map_or(row, |last| *last)
                + 1;
            blocks.push(block);
            continue;
        }
        if let Some(plate_row) = plate_row_of(grid, row).filter(|_| holds_readings(grid, row)) {
            let hint = (0..row)
                .rev()
                .find(|&above| !grid.row_is_blank(above) && plate_row_of(grid, above).is_none())
                .and_then(|above| {
                    broken_column_numbers(&grid.row_cells(above))
                        .map(|detail| format!("; the row of column numbers above it (row {}) is broken: {detail}", above + 1))
                })
                .unwrap_or_else(|| {
                    "; a block is a time line, a row of column numbers 1, 2, 3, ... and its plate rows, with no other line between them".to_string()
                });
            return Err(ImportError::PlateRowOutsideBlock {
                position: Box::new(grid.position(row, Some(0))),
                letters: row_label(plate_row),
                hint,
            });
        }
        let line = parse_block_line(&grid.row_cells(row), grid.decimal_mark)
            .map_err(|error| time_text_error(error.error, grid.position(row, Some(error.column))))?;
        let Some(line) = line else {
            // Title lines above the first block, notes between blocks: no part of a read.
            rows_passed_over.push(row);
            row += 1;
            continue;
        };
        if let Some(time) = line.time {
            if let Some((_, earlier)) = pending_time.replace((time, row)) {
                return Err(ImportError::TimeLineWithoutBlock {
                    position: grid.position(earlier, None),
                });
            }
        }
        if let Some(temperature) = line.temperature_c {
            rows_read.push(row);
            match blocks.last_mut() {
                Some(last) if pending_time.is_none() && last.temperature_c.is_none() => {
                    last.temperature_c = Some(temperature);
                }
                _ => pending_temperature = Some(temperature),
            }
        }
        row += 1;
    }
    if let Some((_, earlier)) = pending_time {
        // The last read's block is missing: an aborted read, as a row cut short is.
        short_row(
            grid,
            options,
            earlier,
            "a time line with no plate block below it".to_string(),
            "that read is not read",
            &mut warnings,
        )?;
        rows_passed_over.push(earlier);
    }
    // Lines outside the blocks once the first block began are said (those above it are titles).
    let first_block_row = rows_read.iter().min().copied().unwrap_or(usize::MAX);
    let between: Vec<String> = rows_passed_over
        .iter()
        .filter(|&&passed| passed > first_block_row && !rows_read.contains(&passed))
        .map(|passed| (passed + 1).to_string())
        .collect();
    if !between.is_empty() {
        warnings.push(format!(
            "{}: row(s) {} lie outside the plate blocks and are not read",
            grid.source,
            list_some(&between, 10)
        ));
    }
    rows_read.sort_unstable();
    rows_read.dedup();
    rows_passed_over.retain(|passed| !rows_read.contains(passed));
    rows_passed_over.sort_unstable();
    let mut table = assemble(grid, blocks, options, warnings)?;
    table.rows_read = rows_read;
    table.rows_passed_over = rows_passed_over;
    Ok(table)
}

/// Reads the block whose column numbers are on zero-based `column_row`.
fn read_block(
    grid: &CellGrid,
    column_row: usize,
    pending_time: &mut Option<(BlockTime, usize)>,
    pending_temperature: &mut Option<f64>,
) -> Result<Block, ImportError> {
    // The time may also be the label of the column-number row itself (`Time 0:01:30 | 1 | 2 ...`).
    if pending_time.is_none() {
        let label = [grid.cell(column_row, 0)];
        if let Ok(Some(line)) = parse_block_line(&label, grid.decimal_mark) {
            if let Some(time) = line.time {
                *pending_time = Some((time, column_row));
            }
            if let Some(temperature) = line.temperature_c {
                *pending_temperature = Some(temperature);
            }
        }
    }
    let Some(time) = pending_time.take() else {
        return Err(ImportError::MissingBlockTime {
            position: grid.position(column_row, None),
        });
    };
    let mut cell_of_column = [None; MAX_PLATE_COLUMNS];
    let numbers = column_numbers(&grid.row_cells(column_row)).unwrap_or_default();
    let last_numbered = numbers.last().map_or(0, |(_, index)| *index);
    for (column, index) in numbers {
        cell_of_column[usize::from(column)] = Some(index);
    }
    let mut row_of_plate_row: [Option<usize>; MAX_PLATE_ROWS] = [None; MAX_PLATE_ROWS];
    let mut previous_plate_row: Option<u16> = None;
    let mut row = column_row + 1;
    while let Some(plate_row) = plate_row_of(grid, row) {
        if let Some(first) = row_of_plate_row[usize::from(plate_row)] {
            // The first plate column of the block names the well and both cells.
            let (plate_column, cell_index) = cell_of_column
                .iter()
                .enumerate()
                .find_map(|(column, cell)| cell.map(|cell| (column as u16, cell)))
                .unwrap_or((0, 1));
            return Err(ImportError::DuplicateWell {
                well: WellId::new(plate_row, plate_column),
                positions: Box::new([
                    grid.position(first, Some(cell_index)),
                    grid.position(row, Some(cell_index)),
                ]),
            });
        }
        // Plate rows run downwards (A, B, ...): a row out of order is a defect, never the end of
        // the block (which would drop the rows below it).
        if let Some(previous) = previous_plate_row.filter(|previous| plate_row < *previous) {
            return Err(ImportError::BlockRowOrder {
                position: grid.position(row, Some(0)),
                letters: row_label(plate_row),
                previous: row_label(previous),
            });
        }
        if let Some((index, cell)) = grid
            .row(row)
            .enumerate()
            .skip(last_numbered + 1)
            .find(|(_, cell)| !cell.is_empty())
        {
            return Err(ImportError::BeyondColumnNumbers {
                position: grid.position(row, Some(index)),
                text: cell.as_text(),
                numbers_row: column_row + 1,
            });
        }
        row_of_plate_row[usize::from(plate_row)] = Some(row);
        previous_plate_row = Some(plate_row);
        row += 1;
    }
    Ok(Block {
        time,
        temperature_c: pending_temperature.take(),
        column_row,
        cell_of_column,
        row_of_plate_row,
    })
}

/// The plate row that zero-based `row` holds, if it is a plate row: a row letter first, and not
/// a split line such as `T | = | 30.1 | °C`.
fn plate_row_of(grid: &CellGrid, row: usize) -> Option<u16> {
    let plate_row = row_letter(grid.cell(row, 0))?;
    match grid.cell(row, 1) {
        Cell::Text("=" | ":") => None,
        _ => Some(plate_row),
    }
}

/// Turns the blocks into reads and wells.
fn assemble(
    grid: &CellGrid,
    blocks: Vec<Block>,
    options: &ImportOptions,
    mut warnings: Vec<String>,
) -> Result<ShapeTable, ImportError> {
    // A well exists if some block shows a non-empty cell for it: a plate position blank in every
    // read is an unused well, not a well with no readings.
    let mut present: WellMap<(usize, usize)> = WellMap::new();
    for block in &blocks {
        for (plate_row, grid_row) in block.row_of_plate_row.iter().enumerate() {
            let Some(grid_row) = *grid_row else { continue };
            for (plate_column, cell_index) in block.cell_of_column.iter().enumerate() {
                let Some(cell_index) = *cell_index else { continue };
                if !grid.cell(grid_row, cell_index).is_empty() {
                    let well = WellId::new(plate_row as u16, plate_column as u16);
                    let _ = present.insert_new(well, (grid_row, cell_index));
                }
            }
        }
    }
    let mut wells: Vec<WellColumn> = (0..MAX_PLATE_ROWS as u16)
        .flat_map(|row| (0..MAX_PLATE_COLUMNS as u16).map(move |column| WellId::new(row, column)))
        .filter_map(|well| {
            present
                .get(well)
                .map(|named_at| WellColumn::new(well, named_at, blocks.len()))
        })
        .collect();
    let Some(first_block) = blocks.first() else {
        return Err(ImportError::NoShape {
            origin: grid.source.clone(),
            searched: format!("rows 1-{}", grid.n_rows()),
            looked_for: super::shape_looked_for(DataShape::Grid).to_string(),
        });
    };
    if wells.is_empty() {
        return Err(ImportError::NoWells {
            position: grid.position(first_block.column_row, None),
            detail: "every cell of every plate block is empty".to_string(),
        });
    }
    let mut reads: Vec<ReadRecord> = Vec::with_capacity(blocks.len());
    let mut temperatures: Vec<Option<f64>> = Vec::with_capacity(blocks.len());
    for block in &blocks {
        let (time, time_row) = &block.time;
        let stated = match time.unit {
            Some(unit) => HeaderTimeUnit::Unit(unit),
            None => HeaderTimeUnit::Absent,
        };
        let position = || grid.position(*time_row, Some(time.column));
        let units = TimeUnitRule::settle(&stated, options.time_unit, position)?;
        let time_s = units.seconds(time.raw, position)?;
        check_block_complete(grid, block, &wells, options, &mut warnings)?;
        for trace in &mut wells {
            let plate_row = block.row_of_plate_row[usize::from(trace.well.row)];
            let cell_index = block.cell_of_column[usize::from(trace.well.column)];
            match (plate_row, cell_index) {
                (Some(grid_row), Some(cell_index)) => {
                    let cell = (cell_index < grid.row_len(grid_row)).then(|| grid.cell(grid_row, cell_index));
                    trace.push_cell(cell, grid_row, cell_index);
                }
                // No cell exists for this well in this block: a gap, named in the warning above.
                _ => trace.values.push(None),
            }
        }
        temperatures.push(block.temperature_c);
        reads.push(ReadRecord {
            time_s,
            row: *time_row,
            column: time.column,
        });
    }
    let has_temperature = temperatures.iter().any(Option::is_some);
    Ok(ShapeTable {
        shape: DataShape::Grid,
        reads,
        temperatures_c: has_temperature.then_some(temperatures),
        wells,
        warnings,
        rows_read: Vec::new(),
        rows_passed_over: Vec::new(),
    })
}

/// Applies the short-row policy to a block's rows cut short and to plate rows or columns the
/// block lacks while other blocks have them.
fn check_block_complete(
    grid: &CellGrid,
    block: &Block,
    wells: &[WellColumn],
    options: &ImportOptions,
    warnings: &mut Vec<String>,
) -> Result<(), ImportError> {
    let mut needed_rows = [false; MAX_PLATE_ROWS];
    let mut needed_width_of_row = [0usize; MAX_PLATE_ROWS];
    let mut needed_columns = [false; MAX_PLATE_COLUMNS];
    for trace in wells {
        let (row, column) = (usize::from(trace.well.row), usize::from(trace.well.column));
        needed_rows[row] = true;
        needed_columns[column] = true;
        if let Some(cell_index) = block.cell_of_column[column] {
            needed_width_of_row[row] = needed_width_of_row[row].max(cell_index + 1);
        }
    }
    let missing_rows: Vec<String> = (0..MAX_PLATE_ROWS)
        .filter(|&row| needed_rows[row] && block.row_of_plate_row[row].is_none())
        .map(|row| row_label(row as u16))
        .collect();
    let missing_columns: Vec<String> = (0..MAX_PLATE_COLUMNS)
        .filter(|&column| needed_columns[column] && block.cell_of_column[column].is_none())
        .map(|column| (column + 1).to_string())
        .collect();
    if !missing_rows.is_empty() || !missing_columns.is_empty() {
        let mut parts = Vec::new();
        if !missing_rows.is_empty() {
            parts.push(format!("no plate row {}", missing_rows.join(", ")));
        }
        if !missing_columns.is_empty() {
            parts.push(format!("no plate column {}", missing_columns.join(", ")));
        }
        short_row(
            grid,
            options,
            block.column_row,
            format!(
                "the plate block has {} that other blocks have",
                parts.join(" and ")
            ),
            "those wells have no reading in this read",
            warnings,
        )?;
    }
    for (plate_row, grid_row) in block.row_of_plate_row.iter().enumerate() {
        let Some(grid_row) = *grid_row else { continue };
        let length = grid.row_len(grid_row);
        let needed = needed_width_of_row[plate_row];
        if length < needed {
            short_row(
                grid,
                options,
                grid_row,
                format!("{length} cells where the block's column numbers need {needed}"),
                "its missing well cells are unreadable",
                warnings,
            )?;
        }
    }
    Ok(())
}
