//! The long shape: one row per well per read, with a `well` column, a time column and a value
//! column (named `value`, `absorbance`, `signal`, `OD`, or else the one remaining numeric
//! column). Reads are matched across wells by time: the reads are the sorted distinct times.

use crate::core::cells::{column_letters, Cell, CellGrid};
use crate::core::plate::WellId;
use crate::core::units::split_header_unit;

use super::time::{classify_header, raw_time_of_cell, HeaderKind, HeaderTimeUnit};
use super::{
    list_some, reading_of_cell, short_row, time_text_error, DataShape, ImportError, ImportOptions,
    ReadRecord, ShapeTable, TimeUnitRule, UnreadableCell, WellColumn, WellMap,
};

/// Whether a row is a long header: it has a `well` column, and (unless the shape is forced) a
/// time column too, so that a metadata line such as `Well,200 uL` above another table is not
/// taken for one.
pub(super) fn is_header(cells: &[Cell], forced: bool) -> bool {
    let (mut has_well, mut has_time) = (false, false);
    for cell in cells {
        match classify_header(cell) {
            HeaderKind::WellName => has_well = true,
            HeaderKind::Time(_) => has_time = true,
            _ => {}
        }
    }
    has_well && (has_time || forced)
}

/// Whether a header names the value column outright.
fn is_value_name(cell: &Cell) -> bool {
    let Cell::Text(text) = cell else {
        return false;
    };
    let (name, _) = split_header_unit(text);
    matches!(
        name.to_ascii_lowercase().as_str(),
        "value" | "values" | "absorbance" | "abs" | "signal" | "od" | "reading"
    )
}

/// How many data rows are looked at to find the one numeric column.
const ROWS_SAMPLED_FOR_VALUE_COLUMN: usize = 20;

/// One data row as read.
struct LongRow {
    /// The well.
    well: WellId,
    /// Seconds.
    time_s: f64,
    /// Zero-based row.
    row: usize,
    /// The reading, or the text of an unreadable cell.
    reading: Result<f64, String>,
    /// The row's temperature.
    temperature_c: Option<f64>,
}

/// Reads the long table whose header is zero-based row `header_row`.
pub(super) fn parse(
    grid: &CellGrid,
    header_row: usize,
    options: &ImportOptions,
) -> Result<ShapeTable, ImportError> {
    let header = grid.rows.get(header_row).map(Vec::as_slice).unwrap_or_default();
    let header_position = || grid.position(header_row, None);
    let mut well_column = None;
    let mut time_column: Option<(usize, HeaderTimeUnit)> = None;
    let mut temperature_column = None;
    let mut named_values: Vec<usize> = Vec::new();
    let mut others: Vec<usize> = Vec::new();
    for (column, cell) in header.iter().enumerate() {
        match classify_header(cell) {
            HeaderKind::WellName if well_column.is_none() => well_column = Some(column),
            HeaderKind::Time(unit) if time_column.is_none() => time_column = Some((column, unit)),
            HeaderKind::Temperature if temperature_column.is_none() => temperature_column = Some(column),
            _ if is_value_name(cell) => named_values.push(column),
            _ if cell.is_empty() => {}
            _ => others.push(column),
        }
    }
    let Some(well_column) = well_column else {
        return Err(ImportError::MissingColumn {
            position: header_position(),
            what: "`well`".to_string(),
        });
    };
    let Some((time_column, header_unit)) = time_column else {
        return Err(ImportError::MissingColumn {
            position: header_position(),
            what: "time (such as `time [s]` or `Time (min)`)".to_string(),
        });
    };
    let data_end = data_end(grid, header_row, well_column);
    let describe = |columns: &[usize]| -> String {
        let names: Vec<String> = columns
            .iter()
            .map(|&column| {
                format!(
                    "'{}' ({})",
                    grid.cell(header_row, column).as_text(),
                    column_letters(column + 1)
                )
            })
            .collect();
        list_some(&names, 10)
    };
    let value_column = match named_values.as_slice() {
        [only] => *only,
        [] => {
            let sample_end = data_end.min(header_row + 1 + ROWS_SAMPLED_FOR_VALUE_COLUMN);
            let numeric: Vec<usize> = others
                .iter()
                .copied()
                .filter(|&column| {
                    (header_row + 1..sample_end).any(|row| matches!(grid.cell(row, column), Cell::Number(_)))
                })
                .collect();
            match numeric.as_slice() {
                [only] => *only,
                [] => {
                    return Err(ImportError::MissingColumn {
                        position: header_position(),
                        what: "value (a numeric column, or one headed `value`, `absorbance` or `signal`)"
                            .to_string(),
                    })
                }
                several => {
                    return Err(ImportError::AmbiguousValueColumn {
                        position: header_position(),
                        candidates: describe(several),
                    })
                }
            }
        }
        several => {
            return Err(ImportError::AmbiguousValueColumn {
                position: header_position(),
                candidates: describe(several),
            })
        }
    };
    let mut warnings = Vec::new();
    let ignored: Vec<usize> = others
        .iter()
        .copied()
        .filter(|&column| column != value_column)
        .collect();
    if !ignored.is_empty() {
        warnings.push(format!(
            "{}: columns that are neither well, time, temperature nor the values ('{}') are not read: {}",
            header_position(),
            grid.cell(header_row, value_column).as_text(),
            describe(&ignored)
        ));
    }
    let units = TimeUnitRule::settle(&header_unit, options.time_unit, || {
        grid.position(header_row, Some(time_column))
    })?;
    let mut long_rows: Vec<LongRow> = Vec::with_capacity(data_end.saturating_sub(header_row + 1));
    for row in header_row + 1..data_end {
        let cells = grid.rows[row].as_slice();
        let Some(well) = well_of(grid.cell(row, well_column)) else {
            continue;
        };
        if cells.len() <= time_column {
            short_row(
                grid,
                options,
                row,
                format!("{} cells, ending before the time column", cells.len()),
                "the row cannot be placed in time and is not read",
                &mut warnings,
            )?;
            continue;
        }
        let time_position = || grid.position(row, Some(time_column));
        let raw = match raw_time_of_cell(&cells[time_column]) {
            Some(Ok(raw)) => raw,
            Some(Err(error)) => return Err(time_text_error(error, time_position())),
            None => {
                let text = cells[time_column].as_text();
                let reason = if text.is_empty() {
                    "the time cell is empty".to_string()
                } else {
                    format!("'{text}' is not a time")
                };
                return Err(ImportError::BadTime {
                    position: time_position(),
                    reason,
                });
            }
        };
        let time_s = units.seconds(raw, time_position)?;
        if cells.len() <= value_column {
            short_row(
                grid,
                options,
                row,
                format!("{} cells, ending before the value column", cells.len()),
                "its value is unreadable",
                &mut warnings,
            )?;
        }
        long_rows.push(LongRow {
            well,
            time_s,
            row,
            reading: reading_of_cell(cells.get(value_column)),
            temperature_c: temperature_column.and_then(|column| grid.cell(row, column).as_number()),
        });
    }
    if long_rows.is_empty() {
        return Err(ImportError::NoReads {
            position: header_position(),
        });
    }
    assemble(
        grid,
        long_rows,
        (well_column, value_column),
        temperature_column.is_some(),
        warnings,
    )
}

/// The well a cell names.
fn well_of(cell: &Cell) -> Option<WellId> {
    match cell {
        Cell::Text(text) => WellId::parse(text),
        _ => None,
    }
}

/// The zero-based row after the data: the first blank row, or the first whose well cell names
/// no well (a summary line).
fn data_end(grid: &CellGrid, header_row: usize, well_column: usize) -> usize {
    (header_row + 1..grid.rows.len())
        .find(|&row| grid.row_is_blank(row) || well_of(grid.cell(row, well_column)).is_none())
        .unwrap_or(grid.rows.len())
}

/// Groups the rows into reads (sorted distinct times) and wells.
fn assemble(
    grid: &CellGrid,
    long_rows: Vec<LongRow>,
    (well_column, value_column): (usize, usize),
    has_temperature: bool,
    mut warnings: Vec<String>,
) -> Result<ShapeTable, ImportError> {
    let mut times: Vec<f64> = long_rows.iter().map(|row| row.time_s).collect();
    times.sort_unstable_by(f64::total_cmp);
    times.dedup();
    // The first row of each read names it (for positions in later messages).
    let mut first_row_of_read: Vec<Option<usize>> = vec![None; times.len()];
    let mut index_of_well: WellMap<usize> = WellMap::new();
    let mut wells: Vec<WellColumn> = Vec::new();
    for row in &long_rows {
        if index_of_well.get(row.well).is_none() {
            let _ = index_of_well.insert_new(row.well, wells.len());
            wells.push(WellColumn::new(row.well, (row.row, well_column), 0));
        }
    }
    for trace in &mut wells {
        trace.values = vec![None; times.len()];
    }
    // Which row filled each (well, read), to name both rows of a duplicate.
    let mut filled_by: Vec<Option<usize>> = vec![None; wells.len() * times.len()];
    let mut temperatures: Vec<Option<f64>> = vec![None; times.len()];
    for row in long_rows {
        let read_index = times.partition_point(|&time| time < row.time_s);
        let Some(trace_index) = index_of_well.get(row.well) else {
            continue;
        };
        let slot = trace_index * times.len() + read_index;
        if let Some(first) = filled_by[slot] {
            return Err(ImportError::DuplicateWell {
                well: row.well,
                positions: Box::new([
                    grid.position(first, Some(well_column)),
                    grid.position(row.row, Some(well_column)),
                ]),
            });
        }
        filled_by[slot] = Some(row.row);
        first_row_of_read[read_index].get_or_insert(row.row);
        if temperatures[read_index].is_none() {
            temperatures[read_index] = row.temperature_c;
        }
        let trace = &mut wells[trace_index];
        match row.reading {
            Ok(value) => trace.values[read_index] = Some(value),
            Err(text) => trace.unreadable.push(UnreadableCell {
                read_index,
                row: row.row,
                column: value_column,
                text,
            }),
        }
    }
    // Wells missing reads: one warning per well, the first ten wells named in full.
    const WELLS_NAMED: usize = 10;
    let mut wells_missing_reads = 0;
    for (trace_index, trace) in wells.iter().enumerate() {
        let missing: Vec<usize> = (0..times.len())
            .filter(|&read_index| filled_by[trace_index * times.len() + read_index].is_none())
            .collect();
        if missing.is_empty() {
            continue;
        }
        wells_missing_reads += 1;
        if wells_missing_reads <= WELLS_NAMED {
            let shown: Vec<String> = missing
                .iter()
                .map(|&read_index| format!("t = {} s", times[read_index]))
                .collect();
            warnings.push(format!(
                "{}: well {} (first at row {}) has no row for {} of {} reads ({}); those readings are missing",
                grid.source,
                trace.well,
                trace.named_at.0 + 1,
                missing.len(),
                times.len(),
                list_some(&shown, 5)
            ));
        }
    }
    if wells_missing_reads > WELLS_NAMED {
        warnings.push(format!(
            "{}: {} more wells have no row for some reads",
            grid.source,
            wells_missing_reads - WELLS_NAMED
        ));
    }
    let reads = times
        .iter()
        .zip(&first_row_of_read)
        .map(|(&time_s, row)| ReadRecord {
            time_s,
            row: row.unwrap_or(0),
            column: 0,
        })
        .collect();
    Ok(ShapeTable {
        shape: DataShape::Long,
        reads,
        temperatures_c: has_temperature.then_some(temperatures),
        wells,
        warnings,
    })
}
