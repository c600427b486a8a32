//! The long shape: one row per well per read, with a `well` column, a time column and a value
//! column (named `value`, `absorbance`, `signal`, `OD`, or else the one remaining numeric
//! column). Reads are matched across wells by time: the reads are the sorted distinct times; or,
//! where every well carries its own time stamps (a reader that times each well's read), by their
//! order within each well, each read timed by the mean of its wells' times and the spread said.
//! Which rows are reads follows the one rule of [`super::rows`].

use crate::core::cells::{column_letters, Cell, CellGrid};
use crate::core::format::format_seconds;
use crate::core::plate::WellId;
use crate::core::units::split_header_unit;
use crate::files::sheet::MAX_CELLS;

use super::rows::{blank_or_repeated_header, settle_rows, time_cell_looks_like_read, RowKind};
use super::time::{classify_header, raw_time_of_cell, HeaderKind, HeaderTimeUnit};
use super::{
    list_some, reading_of_cell, short_row, time_text_error, DataShape, ImportError, ImportOptions,
    ReadRecord, Readings, ShapeTable, TimeUnitRule, UnreadableCell, WellColumn, WellMap, MAX_READS,
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

/// The columns of a long header.
struct LongColumns {
    well: usize,
    time: usize,
    value: usize,
    temperature: Option<usize>,
    /// The wavelength column and the wavelength read from it, when the export has several.
    wavelength: Option<(usize, f64)>,
}

/// Whether a cell's text looks like a well ID, even a broken one (`A 2`, `Z99`, `A0`): one or
/// two letters, then digits (spaces allowed between). A summary label (`Mean`) does not.
fn looks_like_well(text: &str) -> bool {
    let text = text.trim();
    let letters = text.chars().take_while(char::is_ascii_alphabetic).count();
    let rest = &text[letters..];
    (1..=2).contains(&letters)
        && rest.chars().any(|c| c.is_ascii_digit())
        && rest.chars().all(|c| c.is_ascii_digit() || c == ' ')
}

/// Sorts one row below the header (see [`super::rows`]).
fn row_kind(grid: &CellGrid, row: usize, header_row: usize, columns: &LongColumns) -> RowKind {
    if let Some(kind) = blank_or_repeated_header(grid, row, header_row) {
        return kind;
    }
    if let Some((column, chosen)) = columns.wavelength {
        let at = super::wavelength::long_row_wavelength(grid, row, column);
        if at.is_some_and(|nm| (nm - chosen).abs() >= 0.5) {
            return RowKind::OtherWavelength;
        }
    }
    let well_cell = grid.cell(row, columns.well);
    let time_cell = grid.cell(row, columns.time);
    let time = raw_time_of_cell(&time_cell, grid.decimal_mark);
    let well = well_of(well_cell);
    let well_like = match well_cell {
        Cell::Text(text) => looks_like_well(text),
        _ => false,
    };
    let looks_like_read = well_like || time.is_ok() || time_cell_looks_like_read(time_cell, false);
    match (well, time) {
        (Some(_), Ok(_)) => RowKind::Data,
        (None, _) => RowKind::NotData {
            position: grid.position(row, Some(columns.well)),
            reason: match well_cell {
                Cell::Empty => "the well cell is empty".to_string(),
                other => format!("'{}' is not a well (such as A1 or A01)", other.as_text()),
            },
            looks_like_read,
        },
        (Some(_), Err(error)) => RowKind::NotData {
            position: grid.position(row, Some(columns.time)),
            reason: error.reason(),
            looks_like_read,
        },
    }
}

/// Reads the long table whose header is zero-based row `header_row`.
pub(super) fn parse(
    grid: &CellGrid,
    header_row: usize,
    options: &ImportOptions,
    wavelength: Option<(usize, f64)>,
) -> Result<ShapeTable, ImportError> {
    let header_position = || grid.position(header_row, None);
    let mut well_column = None;
    let mut time_column: Option<(usize, HeaderTimeUnit)> = None;
    let mut temperature_column = None;
    let mut named_values: Vec<usize> = Vec::new();
    let mut others: Vec<usize> = Vec::new();
    for (column, cell) in grid.row(header_row).enumerate() {
        match classify_header(&cell) {
            HeaderKind::WellName if well_column.is_none() => well_column = Some(column),
            HeaderKind::Time(unit) if time_column.is_none() => time_column = Some((column, unit)),
            HeaderKind::Temperature if temperature_column.is_none() => temperature_column = Some(column),
            _ if super::wavelength::is_wavelength_header(&cell) => {}
            _ if is_value_name(&cell) => named_values.push(column),
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
    let sampled: Vec<usize> = (header_row + 1..grid.n_rows())
        .filter(|&row| well_of(grid.cell(row, well_column)).is_some())
        .take(ROWS_SAMPLED_FOR_VALUE_COLUMN)
        .collect();
    let value_column = match named_values.as_slice() {
        [only] => *only,
        [] => {
            let numeric: Vec<usize> = others
                .iter()
                .copied()
                .filter(|&column| {
                    sampled
                        .iter()
                        .any(|&row| matches!(grid.cell(row, column), Cell::Number(_)))
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
    let columns = LongColumns {
        well: well_column,
        time: time_column,
        value: value_column,
        temperature: temperature_column,
        wavelength,
    };
    let kinds: Vec<(usize, RowKind)> = (header_row + 1..grid.n_rows())
        .map(|row| (row, row_kind(grid, row, header_row, &columns)))
        .collect();
    let settled = settle_rows(grid, kinds)?;
    warnings.extend(settled.warnings);
    let mut rows = RowAccount {
        read: Vec::with_capacity(settled.data_rows.len()),
        passed_over: settled.passed_over,
    };
    let mut long_rows: Vec<LongRow> = Vec::with_capacity(settled.data_rows.len());
    let mut off_plate: Vec<String> = Vec::new();
    for &row in &settled.data_rows {
        let Some(well) = well_of(grid.cell(row, well_column)) else {
            continue;
        };
        if options.plate.is_some_and(|plate| !plate.contains(well)) {
            off_plate.push(format!("{well} (row {})", row + 1));
            rows.passed_over.push(row);
            continue;
        }
        rows.read.push(row);
        let time_position = || grid.position(row, Some(time_column));
        let raw = raw_time_of_cell(&grid.cell(row, time_column), grid.decimal_mark)
            .map_err(|error| time_text_error(error, time_position()))?;
        let time_s = units.seconds(raw, time_position)?;
        let length = grid.row_len(row);
        if length <= value_column {
            short_row(
                grid,
                options,
                row,
                format!("{length} cells, ending before the value column"),
                "its value is unreadable",
                &mut warnings,
            )?;
        }
        long_rows.push(LongRow {
            well,
            time_s,
            row,
            reading: reading_of_cell((value_column < length).then(|| grid.cell(row, value_column))),
            temperature_c: temperature_column.and_then(|column| grid.cell(row, column).as_number()),
        });
    }
    if let Some(plate) = options.plate.filter(|_| !off_plate.is_empty()) {
        warnings.push(format!(
            "{}: rows of wells that are not on the {plate}-well plate given are not read: {}",
            grid.source,
            list_some(&off_plate, 10)
        ));
    }
    if long_rows.is_empty() {
        return Err(ImportError::NoReads {
            position: header_position(),
        });
    }
    rows.passed_over.sort_unstable();
    assemble(grid, long_rows, &columns, warnings, rows)
}

/// Which rows a long table read and which it passed over (see `KineticData`).
struct RowAccount {
    read: Vec<usize>,
    passed_over: Vec<usize>,
}

/// The well a cell names.
fn well_of(cell: Cell) -> Option<WellId> {
    match cell {
        Cell::Text(text) => WellId::parse(text),
        _ => None,
    }
}

/// Whether each well carries its own time stamps (a reader that times every well's read): most
/// distinct times belong to one well only, and there are more of them than any well has rows.
fn wells_have_own_times(long_rows: &[LongRow], wells: usize, most_rows_of_a_well: usize) -> bool {
    if wells < 2 {
        return false;
    }
    let mut times: Vec<f64> = long_rows.iter().map(|row| row.time_s).collect();
    times.sort_unstable_by(f64::total_cmp);
    let mut wells_per_time: Vec<usize> = Vec::new();
    for (index, time) in times.iter().enumerate() {
        if index > 0 && times[index - 1] == *time {
            if let Some(last) = wells_per_time.last_mut() {
                *last += 1;
            }
        } else {
            wells_per_time.push(1);
        }
    }
    let distinct = wells_per_time.len();
    wells_per_time.sort_unstable();
    distinct > most_rows_of_a_well && wells_per_time[distinct / 2] == 1
}

/// Groups the rows into reads and wells: reads are the sorted distinct times, or, when each
/// well carries its own time stamps, the rows of each well in time order.
fn assemble(
    grid: &CellGrid,
    long_rows: Vec<LongRow>,
    columns: &LongColumns,
    mut warnings: Vec<String>,
    rows: RowAccount,
) -> Result<ShapeTable, ImportError> {
    let mut index_of_well: WellMap<usize> = WellMap::new();
    let mut wells: Vec<WellColumn> = Vec::new();
    let mut rows_of_well: Vec<Vec<usize>> = Vec::new();
    for (index, row) in long_rows.iter().enumerate() {
        let trace_index = match index_of_well.get(row.well) {
            Some(trace_index) => trace_index,
            None => {
                let _ = index_of_well.insert_new(row.well, wells.len());
                wells.push(WellColumn::new(row.well, (row.row, columns.well), 0));
                rows_of_well.push(Vec::new());
                wells.len() - 1
            }
        };
        rows_of_well[trace_index].push(index);
    }
    let most_rows = rows_of_well.iter().map(Vec::len).max().unwrap_or(0);
    if wells_have_own_times(&long_rows, wells.len(), most_rows) {
        return assemble_own_times(grid, long_rows, rows_of_well, wells, columns, warnings, rows);
    }
    let mut times: Vec<f64> = long_rows.iter().map(|row| row.time_s).collect();
    times.sort_unstable_by(f64::total_cmp);
    times.dedup();
    if times.len() > MAX_READS || times.len().saturating_mul(wells.len()) > MAX_CELLS {
        return Err(ImportError::TooManyReads {
            origin: grid.source.clone(),
            limit: MAX_READS,
        });
    }
    // The first row of each read names it (for positions in later messages).
    let mut first_row_of_read: Vec<Option<usize>> = vec![None; times.len()];
    for trace in &mut wells {
        trace.values = Readings::missing(times.len());
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
                    grid.position(first, Some(columns.well)),
                    grid.position(row.row, Some(columns.well)),
                ]),
            });
        }
        filled_by[slot] = Some(row.row);
        first_row_of_read[read_index].get_or_insert(row.row);
        if temperatures[read_index].is_none() {
            temperatures[read_index] = row.temperature_c;
        }
        place_reading(&mut wells[trace_index], read_index, row, columns.value);
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
    Ok(long_table(
        &times,
        &first_row_of_read,
        temperatures,
        wells,
        columns,
        warnings,
        rows,
    ))
}

/// The shape table of a long export: each read's time and the row that first names it.
fn long_table(
    times: &[f64],
    first_row_of_read: &[Option<usize>],
    temperatures: Vec<Option<f64>>,
    wells: Vec<WellColumn>,
    columns: &LongColumns,
    warnings: Vec<String>,
    rows: RowAccount,
) -> ShapeTable {
    let reads = times
        .iter()
        .zip(first_row_of_read)
        .map(|(&time_s, row)| ReadRecord {
            time_s,
            row: row.unwrap_or(0),
            column: columns.time,
        })
        .collect();
    ShapeTable {
        shape: DataShape::Long,
        reads,
        temperatures_c: columns.temperature.map(|_| temperatures),
        wells,
        warnings,
        rows_read: rows.read,
        rows_passed_over: rows.passed_over,
    }
}

/// Puts a row's reading into its well's trace at `read_index`.
fn place_reading(trace: &mut WellColumn, read_index: usize, row: LongRow, value_column: usize) {
    match row.reading {
        Ok(value) => trace.values.set(read_index, Some(value)),
        Err(text) => trace.unreadable.push(UnreadableCell {
            read_index,
            row: row.row,
            column: value_column,
            text,
        }),
    }
}

/// Reads of wells with their own time stamps: read k of every well is its k-th row in time, and
/// the read's time is the mean of its wells' times. Read k of one well must come before read
/// k + 1 of every well, or the reads cannot be matched and the table is refused.
fn assemble_own_times(
    grid: &CellGrid,
    long_rows: Vec<LongRow>,
    mut rows_of_well: Vec<Vec<usize>>,
    mut wells: Vec<WellColumn>,
    columns: &LongColumns,
    mut warnings: Vec<String>,
    rows: RowAccount,
) -> Result<ShapeTable, ImportError> {
    for (trace, rows) in wells.iter().zip(rows_of_well.iter_mut()) {
        rows.sort_by(|a, b| long_rows[*a].time_s.total_cmp(&long_rows[*b].time_s));
        if let Some(pair) = rows
            .windows(2)
            .find(|pair| long_rows[pair[0]].time_s == long_rows[pair[1]].time_s)
        {
            return Err(ImportError::DuplicateWell {
                well: trace.well,
                positions: Box::new([
                    grid.position(long_rows[pair[0]].row, Some(columns.well)),
                    grid.position(long_rows[pair[1]].row, Some(columns.well)),
                ]),
            });
        }
    }
    let n_reads = rows_of_well.iter().map(Vec::len).max().unwrap_or(0);
    if n_reads > MAX_READS {
        return Err(ImportError::TooManyReads {
            origin: grid.source.clone(),
            limit: MAX_READS,
        });
    }
    // Each read's earliest and latest time across wells, and its mean time.
    let mut earliest = vec![f64::INFINITY; n_reads];
    let mut latest = vec![f64::NEG_INFINITY; n_reads];
    let mut sums = vec![0.0; n_reads];
    let mut counts = vec![0usize; n_reads];
    let mut latest_row = vec![(0usize, WellId::new(0, 0)); n_reads];
    for (trace, rows) in wells.iter().zip(&rows_of_well) {
        for (read, &index) in rows.iter().enumerate() {
            let time = long_rows[index].time_s;
            earliest[read] = earliest[read].min(time);
            if time > latest[read] {
                latest[read] = time;
                latest_row[read] = (long_rows[index].row, trace.well);
            }
            sums[read] += time;
            counts[read] += 1;
        }
    }
    for read in 0..n_reads.saturating_sub(1) {
        if latest[read] >= earliest[read + 1] {
            let (row, well) = latest_row[read];
            return Err(ImportError::UnmatchedOwnTimes {
                origin: grid.source.clone(),
                read: read + 1,
                well,
                row: row + 1,
                overlap: format!(
                    "at {} s comes after read {} of another well (at {} s)",
                    format_seconds(latest[read]),
                    read + 2,
                    format_seconds(earliest[read + 1])
                ),
            });
        }
    }
    let times: Vec<f64> = sums
        .iter()
        .zip(&counts)
        .map(|(sum, count)| sum / *count as f64)
        .collect();
    let spread = (0..n_reads)
        .map(|read| (latest[read] - times[read]).max(times[read] - earliest[read]))
        .fold(0.0, f64::max);
    let mut temperatures: Vec<Option<f64>> = vec![None; n_reads];
    let mut first_row_of_read: Vec<Option<usize>> = vec![None; n_reads];
    let mut short_wells: Vec<String> = Vec::new();
    let mut rows_by_index: Vec<Option<LongRow>> = long_rows.into_iter().map(Some).collect();
    for (trace, rows) in wells.iter_mut().zip(&rows_of_well) {
        trace.values = Readings::missing(n_reads);
        if rows.len() < n_reads {
            short_wells.push(format!("{} ({} of {n_reads})", trace.well, rows.len()));
        }
        for (read, &index) in rows.iter().enumerate() {
            let Some(row) = rows_by_index[index].take() else {
                continue;
            };
            first_row_of_read[read] =
                Some(first_row_of_read[read].map_or(row.row, |first| first.min(row.row)));
            if temperatures[read].is_none() {
                temperatures[read] = row.temperature_c;
            }
            place_reading(trace, read, row, columns.value);
        }
    }
    warnings.push(format!(
        "{}: each well carries its own time stamps: reads are matched by their order within each \
         well, and each read's time is the mean of its wells' times, from which a well's own time \
         differs by up to {} s (a well read at a steady offset in every read keeps its slope)",
        grid.source,
        format_seconds(spread)
    ));
    if !short_wells.is_empty() {
        warnings.push(format!(
            "{}: wells with fewer reads than the others have no reading for their last reads: {}",
            grid.source,
            list_some(&short_wells, 10)
        ));
    }
    Ok(long_table(
        &times,
        &first_row_of_read,
        temperatures,
        wells,
        columns,
        warnings,
        rows,
    ))
}
