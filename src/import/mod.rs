//! Import of a raw plate-reader kinetic export into per-well traces: detects the table's shape
//! (wide, grid or long), reads the times into seconds without ever guessing a unit, keeps
//! unreadable cells (over-range markers, blanks) as gaps with their positions instead of zeros,
//! and infers the plate format from the well IDs.
//!
//! Every error names the file, sheet, row and column (or well) it is about; every warning names
//! the file, sheet and row.
//!
//! One definition of a data row serves every shape ([`rows`]): a row that holds a valid time
//! (and, in the long shape, a well) is a read wherever it stands. A blank row or a repeat of the
//! header between reads is passed over and said; any other row between reads is refused with its
//! position, never taken for the end of the table; below the last read, rows that start with a
//! label (`Mean`) are summary lines, said and not read, while rows that look like reads are
//! refused. So nothing after a defect is lost without a word.

mod grid;
mod long;
pub mod pathlength;
mod rows;
#[cfg(test)]
mod tests;
mod time;
mod wavelength;
mod wide;

use std::io::Cursor;

use calamine::Reader;

pub use crate::config::{DataShape, ImportOptions, ShortRowPolicy};
use crate::core::cells::{Cell, CellGrid, Position, Source};
use crate::core::format::format_seconds;
use crate::core::plate::{PlateFormat, WellId};
use crate::core::units::TimeUnit;
use crate::files::input::InputFile;
use crate::files::sheet::{
    looks_like_spreadsheet, read_input_cells, read_spreadsheet_cells, MergedCells, SheetReadError,
};

use time::{classify_header, HeaderKind, HeaderTimeUnit, RawTime, TimeTextError};

pub use crate::config::{MAX_READS, MAX_SECONDS};

/// A kinetic export read into per-well traces.
#[derive(Debug, Clone, PartialEq)]
pub struct KineticData {
    /// The file and sheet read.
    pub source: Source,
    /// The shape detected (or forced).
    pub shape: DataShape,
    /// The plate format inferred (or given).
    pub plate: PlateFormat,
    /// The time of each read in seconds, strictly increasing.
    pub times_s: Vec<f64>,
    /// The temperature of each read in degrees Celsius, if the export records one.
    pub temperatures_c: Option<Vec<Option<f64>>>,
    /// One trace per well, sorted by well (A1, A2, ..., B1, ...).
    pub wells: Vec<WellTrace>,
    /// Things the user should know, each naming the file, sheet and row.
    pub warnings: Vec<String>,
    /// Zero-based rows whose cells went into the reads: each read's row (wide, long), or each
    /// block's time line, temperature line, column numbers and plate rows (grid).
    pub rows_read: Vec<usize>,
    /// Zero-based rows passed over and named in a warning: blank rows and repeated headers among
    /// the reads, summary lines below them, lines of a grid export outside its blocks, rows of
    /// wells off the plate given. With [`KineticData::rows_read`] it accounts for every row a
    /// read could stand in.
    pub rows_passed_over: Vec<usize>,
}

impl KineticData {
    /// Lets every well's readings go (each trace's `values` left empty), keeping the read times,
    /// the wells and the rest. For a command that has analysed the plate and made what it draws
    /// from the reads: they are the largest thing a run holds (1536 wells x 2000 reads: 24.6 MB).
    pub fn release_reads(&mut self) {
        for trace in &mut self.wells {
            trace.values = Readings::default();
        }
    }
}

/// One well's readings, one per read, each a number or missing (`None`: the cell was unreadable
/// or absent). Stored as `f64` with NaN for missing, 8 bytes a read where `Option<f64>` takes 16:
/// a 1536-well, 2000-read export holds 24.6 MB of them, not 49 MB. No reading is NaN (a cell that
/// holds NaN is unreadable, [`reading_of_cell`]), so the two never meet.
#[derive(Debug, Clone, Default)]
pub struct Readings(Vec<f64>);

impl Readings {
    /// No reads yet, room for `capacity`.
    pub fn with_capacity(capacity: usize) -> Readings {
        Readings(Vec::with_capacity(capacity))
    }

    /// `reads` reads, all missing.
    pub fn missing(reads: usize) -> Readings {
        Readings(vec![f64::NAN; reads])
    }

    /// The reads from values that may be missing.
    pub fn from_values(values: &[Option<f64>]) -> Readings {
        values.iter().copied().collect()
    }

    fn stored(value: Option<f64>) -> f64 {
        value.unwrap_or(f64::NAN)
    }

    /// Appends the next read.
    pub fn push(&mut self, value: Option<f64>) {
        self.0.push(Readings::stored(value));
    }

    /// The reading of read `index`; `None` where it is missing or past the end.
    pub fn get(&self, index: usize) -> Option<f64> {
        self.0.get(index).copied().filter(|value| !value.is_nan())
    }

    /// Sets read `index` (nothing happens past the end).
    pub fn set(&mut self, index: usize, value: Option<f64>) {
        if let Some(slot) = self.0.get_mut(index) {
            *slot = Readings::stored(value);
        }
    }

    /// How many reads.
    pub fn len(&self) -> usize {
        self.0.len()
    }

    /// Whether there are no reads.
    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    /// Each read in order, `None` where missing.
    pub fn iter(&self) -> <&Readings as IntoIterator>::IntoIter {
        self.into_iter()
    }

    /// Whether any read is readable.
    pub fn any_readable(&self) -> bool {
        self.0.iter().any(|value| !value.is_nan())
    }
}

impl FromIterator<Option<f64>> for Readings {
    fn from_iter<I: IntoIterator<Item = Option<f64>>>(iter: I) -> Readings {
        Readings(iter.into_iter().map(Readings::stored).collect())
    }
}

impl<'a> IntoIterator for &'a Readings {
    type Item = Option<f64>;
    type IntoIter = std::iter::Map<std::slice::Iter<'a, f64>, fn(&f64) -> Option<f64>>;

    fn into_iter(self) -> Self::IntoIter {
        fn read(value: &f64) -> Option<f64> {
            (!value.is_nan()).then_some(*value)
        }
        self.0.iter().map(read as fn(&f64) -> Option<f64>)
    }
}

impl PartialEq for Readings {
    /// Read by read, missing equal to missing (NaN would not be).
    fn eq(&self, other: &Readings) -> bool {
        self.len() == other.len() && self.iter().eq(other.iter())
    }
}

impl<const N: usize> PartialEq<[Option<f64>; N]> for Readings {
    fn eq(&self, other: &[Option<f64>; N]) -> bool {
        self.len() == N && self.iter().eq(other.iter().copied())
    }
}

/// The readings of one well, one per read.
#[derive(Debug, Clone, PartialEq)]
pub struct WellTrace {
    /// The well.
    pub well: WellId,
    /// One value per read; missing where the cell was unreadable or absent.
    pub values: Readings,
    /// The cells that held no number, in read order.
    pub unreadable: Vec<UnreadableRead>,
}

/// A cell that held text (or nothing) where a reading belongs.
#[derive(Debug, Clone, PartialEq)]
pub struct UnreadableRead {
    /// Zero-based read index.
    pub read_index: usize,
    /// The read's time in seconds.
    pub time_s: f64,
    /// Where the cell is (or would be, for a row cut short).
    pub position: Position,
    /// The cell's text; empty for a blank or missing cell.
    pub text: String,
}

/// Why an export could not be imported. Every variant names where in the input the problem is.
#[derive(Debug, thiserror::Error)]
pub enum ImportError {
    /// The file could not be read into cells.
    #[error(transparent)]
    Read(#[from] SheetReadError),
    /// No table of a known shape was found.
    #[error("{origin}: no kinetic data found in {searched}: looked for {looked_for}")]
    NoShape {
        /// The file (and sheet) searched.
        origin: Source,
        /// The rows or sheets searched, in words.
        searched: String,
        /// What was looked for, in words.
        looked_for: String,
    },
    /// A header was found, but no column is a well.
    #[error("{position}: no wells: {detail}")]
    NoWells {
        /// The header row (and column).
        position: Position,
        /// What was found instead.
        detail: String,
    },
    /// A header was found with no data row below it.
    #[error("{position}: the header has no data rows below it")]
    NoReads {
        /// The header row.
        position: Position,
    },
    /// A long table lacks a column it needs.
    #[error("{position}: the long table has no {what} column")]
    MissingColumn {
        /// The header row.
        position: Position,
        /// Which column, with examples of its header.
        what: String,
    },
    /// A long table has several columns that could hold the values.
    #[error("{position}: cannot tell which column holds the values: {candidates}; name one of them `value`")]
    AmbiguousValueColumn {
        /// The header row.
        position: Position,
        /// The candidate columns, with their positions.
        candidates: String,
    },
    /// Plain-number times with no unit anywhere.
    #[error(
        "{position}: the times are plain numbers with no unit; write the unit in the header \
         (`Time [s]`, `Time (min)`, `Time [h]`) or give --time-unit s|min|h"
    )]
    NoTimeUnit {
        /// The first plain-number time cell.
        position: Position,
    },
    /// The header's time unit and `--time-unit` disagree.
    #[error(
        "{position}: the file gives the time unit as {stated} but --time-unit says {given}; make them agree"
    )]
    TimeUnitConflict {
        /// The header (or block line) cell stating the unit.
        position: Position,
        /// The unit the file states.
        stated: TimeUnit,
        /// The unit given with `--time-unit`.
        given: TimeUnit,
    },
    /// A header or line states a time unit that is not one.
    #[error("{position}: '{unit}' is not a time unit (expected s, min or h)")]
    UnknownTimeUnit {
        /// The cell stating it.
        position: Position,
        /// The unit as written.
        unit: String,
    },
    /// Text that should be a time but is not.
    #[error("{position}: bad time: {reason}")]
    BadTime {
        /// The time cell.
        position: Position,
        /// What is wrong, quoting the text.
        reason: String,
    },
    /// A read's time is not after the previous read's.
    #[error(
        "{position}: time {time_s} s is not after the previous read's {previous_s} s (row {previous_row}); \
         read times must be strictly increasing"
    )]
    TimesNotIncreasing {
        /// The offending time cell.
        position: Position,
        /// Its time in seconds.
        time_s: f64,
        /// The previous read's time in seconds.
        previous_s: f64,
        /// The previous read's one-based row.
        previous_row: usize,
    },
    /// The same well twice.
    #[error("well {well} appears twice: at {} and at {}", .positions[0], .positions[1])]
    DuplicateWell {
        /// The well.
        well: WellId,
        /// Where it appears first, and where again (boxed: positions are large).
        positions: Box<[Position; 2]>,
    },
    /// A row cut short, refused by [`ShortRowPolicy::Refuse`].
    #[error("{position}: the row is cut short ({detail}), as an aborted read leaves it")]
    ShortRow {
        /// The row.
        position: Position,
        /// What is missing.
        detail: String,
    },
    /// A well not on the plate format given.
    #[error("{position}: well {well} is not on a {plate}-well plate")]
    WellOffPlate {
        /// The well.
        well: WellId,
        /// Where it is named.
        position: Position,
        /// The plate format.
        plate: PlateFormat,
    },
    /// A grid block with no time line above it.
    #[error(
        "{position}: this plate block has no time line above it (such as `Time 0:01:30` or `t = 90 s`); \
         two blocks under one time line are not two reads"
    )]
    MissingBlockTime {
        /// The block's row of column numbers.
        position: Position,
    },
    /// A row that is no read, where only reads may stand (between reads), or below the last read
    /// looking like one.
    #[error("{position}: {reason}; {context}")]
    NotARead {
        /// The row (and the cell that makes it no read), boxed: positions are large.
        position: Box<Position>,
        /// Why it is no read.
        reason: String,
        /// Where it stands, and what to do.
        context: RowContext,
    },
    /// A value in a cell beyond the table's header.
    #[error(
        "{position}: this cell holds '{text}' but lies beyond the header's last column ({last}); \
         a read's values must stand under the header"
    )]
    BeyondHeader {
        /// The cell, boxed: positions are large.
        position: Box<Position>,
        /// Its text.
        text: String,
        /// The header's last column, as letters.
        last: String,
    },
    /// More reads than [`MAX_READS`].
    #[error("{origin}: more than {limit} reads, the most platekin reads from one export")]
    TooManyReads {
        /// The file (and sheet).
        origin: Source,
        /// The ceiling.
        limit: usize,
    },
    /// A few wells alone make the plate larger than the rest need: a well, or another column?
    #[error(
        "{wells}: {count_words} beyond a {smaller}-well plate while {others} other wells fit on one; \
         {it_they} would make the plate a {larger}-well plate. Give --plate {larger} if it is, or \
         --plate {smaller} to leave {them} out (a column headed like a well, such as a temperature \
         probe T1, is no well)"
    )]
    AmbiguousPlate {
        /// The wells beyond the smaller plate, each with where it is named.
        wells: String,
        /// "the only well" or "the only N wells".
        count_words: String,
        /// "it" or "they".
        it_they: &'static str,
        /// "it" or "them".
        them: &'static str,
        /// How many wells fit the smaller plate.
        others: usize,
        /// The plate most wells fit.
        smaller: PlateFormat,
        /// The plate all wells need.
        larger: PlateFormat,
    },
    /// Plate rows of a grid block out of order.
    #[error("{position}: plate row {letters} comes after row {previous}; the rows of a plate block run A, B, C, ... in order")]
    BlockRowOrder {
        /// The row out of order.
        position: Position,
        /// Its letters.
        letters: String,
        /// The row above it.
        previous: String,
    },
    /// A value in a grid block beyond its column numbers.
    #[error("{position}: this cell holds '{text}' but its column has no column number in the block's row of column numbers (row {numbers_row})")]
    BeyondColumnNumbers {
        /// The cell.
        position: Position,
        /// Its text.
        text: String,
        /// The one-based row of the block's column numbers.
        numbers_row: usize,
    },
    /// A row of a grid export that holds readings under a plate-row letter but belongs to no block.
    #[error("{position}: plate row '{letters}' holds readings but belongs to no plate block{hint}")]
    PlateRowOutsideBlock {
        /// The row, boxed: positions are large.
        position: Box<Position>,
        /// Its letters.
        letters: String,
        /// What is likely wrong above it (a broken row of column numbers), or "".
        hint: String,
    },
    /// A grid time line with no plate block below it, while later blocks follow.
    #[error("{position}: this time line has no plate block below it, but more blocks follow; a read cannot be skipped quietly")]
    TimeLineWithoutBlock {
        /// The time line.
        position: Position,
    },
    /// The export's wavelengths and the one asked for do not fit together (several and none
    /// chosen, one asked for that it does not hold, a reference read that does not match).
    #[error("{message}")]
    Wavelength {
        /// What is wrong, naming the file and the wavelengths present.
        message: String,
    },
    /// Wells of a long table with their own time stamps whose reads cannot be matched by order.
    #[error(
        "{origin}: the wells carry their own time stamps, and read {read} of well {well} (row {row}) \
         {overlap}; the reads cannot be matched across wells"
    )]
    UnmatchedOwnTimes {
        /// The file (and sheet).
        origin: Source,
        /// One-based read number.
        read: usize,
        /// The well.
        well: WellId,
        /// Its one-based row.
        row: usize,
        /// Its time and the next read's earliest, in words.
        overlap: String,
    },
}

/// Where a row that is no read stands, for [`ImportError::NotARead`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum RowContext {
    /// Between reads: reads follow below it, up to the row given.
    BetweenReads {
        /// The one-based row of the last read.
        last_read_row: usize,
    },
    /// Below the last read, but it holds readings.
    BelowReads {
        /// The one-based row of the last read.
        last_read_row: usize,
    },
    /// Below the header, where no row is a read.
    NoReads,
}

impl std::fmt::Display for RowContext {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            RowContext::BetweenReads { last_read_row } => write!(
                f,
                "reads follow below it (to row {last_read_row}), so it would end the table early; \
                 correct the row or delete it"
            ),
            RowContext::BelowReads { last_read_row } => write!(
                f,
                "it stands below the last read (row {last_read_row}) but looks like a read, not a \
                 summary line; correct the row or delete it"
            ),
            RowContext::NoReads => write!(f, "no row below the header is a read"),
        }
    }
}

/// Reads an export from an input file's bytes. Spreadsheets: `options.sheet`, else the first
/// sheet holding kinetic data (sheets holding none are skipped with a warning).
pub fn import_data(input: InputFile, options: &ImportOptions) -> Result<KineticData, ImportError> {
    if options.sheet.is_none() && looks_like_spreadsheet(&input) {
        return import_first_sheet_with_data(&input, options);
    }
    let grid = read_input_cells(&input, options.sheet.as_deref(), MergedCells::Keep)?;
    // The bytes were hashed when read and are now cells: the traces are made without them (the
    // export's bytes, its cells and its traces were the import's peak together).
    drop(input);
    import_cells(&grid, options)
}

/// Tries the sheets in order and imports the first that holds a table of a known shape.
fn import_first_sheet_with_data(
    input: &InputFile,
    options: &ImportOptions,
) -> Result<KineticData, ImportError> {
    let file = input.name.clone();
    let bytes = &input.bytes;
    let names = calamine::open_workbook_auto_from_rs(Cursor::new(bytes.as_slice()))
        .map_err(|error| SheetReadError::BadSpreadsheet {
            file: file.clone(),
            message: error.to_string(),
        })?
        .sheet_names();
    let mut skipped: Vec<String> = Vec::new();
    let mut first_error: Option<ImportError> = None;
    for name in &names {
        let grid = read_spreadsheet_cells(bytes, &file, Some(name), MergedCells::Keep)?;
        if (0..grid.n_rows()).all(|row| grid.row_is_blank(row)) {
            continue;
        }
        match import_cells(&grid, options) {
            Ok(mut data) => {
                let notes = skipped.iter().map(|sheet| {
                    format!("{file}, sheet '{sheet}': holds no kinetic data; read sheet '{name}' instead")
                });
                let mut warnings: Vec<String> = notes.collect();
                warnings.append(&mut data.warnings);
                data.warnings = warnings;
                return Ok(data);
            }
            Err(error @ (ImportError::NoShape { .. } | ImportError::NoWells { .. })) => {
                skipped.push(name.clone());
                first_error.get_or_insert(error);
            }
            Err(error) => return Err(error),
        }
    }
    match (first_error, skipped.len()) {
        (None, _) => Err(SheetReadError::NoData { file }.into()),
        (Some(error), 1) => Err(error),
        (Some(_), _) => Err(ImportError::NoShape {
            origin: Source { file, sheet: None },
            searched: format!("any sheet ({})", skipped.join(", ")),
            looked_for: looked_for(options.shape),
        }),
    }
}

/// What detection looks for in each shape, for the "no shape recognised" error.
pub(crate) fn shape_looked_for(shape: DataShape) -> &'static str {
    match shape {
        DataShape::Wide => {
            "a wide header row (a time column such as `Time [s]` beside well columns `A1` or `A01`)"
        }
        DataShape::Grid => {
            "a grid block (a row of column numbers 1, 2, 3, ... followed by rows starting A, B, ...)"
        }
        DataShape::Long => {
            "a long table (a header row with a `well` column, a time column and a value column)"
        }
    }
}

/// What detection looks for, in words, for the shapes allowed.
fn looked_for(forced: Option<DataShape>) -> String {
    let shapes: Vec<&str> = DataShape::ALL
        .into_iter()
        .filter(|shape| forced.is_none_or(|forced| forced == *shape))
        .map(shape_looked_for)
        .collect();
    shapes.join("; or ")
}

/// Imports an export already read into cells: the one wavelength it holds, or the one asked
/// for, less the reference wavelength's read when one is asked for ([`wavelength`]).
pub fn import_cells(grid: &CellGrid, options: &ImportOptions) -> Result<KineticData, ImportError> {
    let refused = |message: String| ImportError::Wavelength { message };
    let Some(channels) = wavelength::find_channels(grid) else {
        if let Some(nm) = options.wavelength_nm.or(options.reference_wavelength_nm) {
            return Err(refused(format!(
                "{}: --wavelength or --reference-wavelength {nm} was given, but the export labels no \
                 wavelength (a line such as `Wavelength: 405 nm` above each table, well columns such \
                 as `A1 405 nm`, or a `wavelength` column)",
                grid.source
            )));
        }
        return import_channel(grid, options, None);
    };
    let present = channels.wavelengths(grid);
    if present.is_empty() {
        // Only a long table's wavelength column can hold none (fuzzing found the refusal said
        // "reads at none" and named no place).
        let place = match channels {
            wavelength::Channels::LongColumn { header_row, column } => format!(
                " (headed at row {}, column {})",
                header_row + 1,
                crate::core::cells::column_letters(column + 1)
            ),
            _ => String::new(),
        };
        return Err(refused(format!(
            "{}: the wavelength column{place} holds no wavelength in any row below it; give each read's \
             wavelength in nm, or leave the column out of a one-wavelength export",
            grid.source
        )));
    }
    let chosen =
        wavelength::choose(&present, options.wavelength_nm, &grid.source, "--wavelength").map_err(refused)?;
    // One wavelength named in the metadata (`Wavelength [nm],405`): the export as it stands, with
    // no copy of its cells.
    if present.len() == 1 && options.reference_wavelength_nm.is_none() {
        return import_channel(grid, options, None);
    }
    let long_column = |nm: f64| match channels {
        wavelength::Channels::LongColumn { column, .. } => Some((column, nm)),
        _ => None,
    };
    let mut data = import_channel(&channels.select(grid, chosen), options, long_column(chosen))?;
    let Some(asked) = options.reference_wavelength_nm else {
        return Ok(data);
    };
    let reference_nm =
        wavelength::choose(&present, Some(asked), &grid.source, "--reference-wavelength").map_err(refused)?;
    if (reference_nm - chosen).abs() < wavelength::SAME_WAVELENGTH_NM {
        return Err(refused(format!(
            "{}: --reference-wavelength {asked} is the wavelength analysed; the reference is another wavelength",
            grid.source
        )));
    }
    let reference = import_channel(
        &channels.select(grid, reference_nm),
        options,
        long_column(reference_nm),
    )?;
    subtract_reference(&mut data, &reference, chosen, reference_nm).map_err(refused)?;
    Ok(data)
}

/// Imports one wavelength's cells (a long table's rows of other wavelengths set aside by its
/// reader, through `long_wavelength`).
fn import_channel(
    grid: &CellGrid,
    options: &ImportOptions,
    long_wavelength: Option<(usize, f64)>,
) -> Result<KineticData, ImportError> {
    let (shape, start_row) = detect_shape(grid, options.shape)?;
    let table = match shape {
        DataShape::Wide => wide::parse(grid, start_row, options)?,
        DataShape::Grid => grid::parse(grid, options)?,
        DataShape::Long => long::parse(grid, start_row, options, long_wavelength)?,
    };
    finish(grid, table, options)
}

/// Subtracts the reference wavelength's read from each read of each well (the dual-wavelength
/// correction); a read unreadable at either wavelength is unreadable. The two must hold the same
/// reads (times) and wells.
fn subtract_reference(
    data: &mut KineticData,
    reference: &KineticData,
    chosen: f64,
    reference_nm: f64,
) -> Result<(), String> {
    let same_times = data.times_s.len() == reference.times_s.len()
        && data
            .times_s
            .iter()
            .zip(&reference.times_s)
            .all(|(a, b)| (a - b).abs() <= 1e-6 * a.abs().max(1.0));
    if !same_times {
        return Err(format!(
            "{}: the reads at {reference_nm} nm ({} reads) are not at the times of the reads at {chosen} nm ({} reads), so the reference cannot be subtracted read by read",
            data.source,
            reference.times_s.len(),
            data.times_s.len()
        ));
    }
    for trace in &mut data.wells {
        let Some(other) = reference.wells.iter().find(|other| other.well == trace.well) else {
            return Err(format!(
                "{}: well {} has reads at {chosen} nm but none at the reference {reference_nm} nm",
                data.source, trace.well
            ));
        };
        trace.values = trace
            .values
            .iter()
            .zip(other.values.iter())
            .map(|pair| match pair {
                (Some(read), Some(reference)) => Some(read - reference),
                _ => None,
            })
            .collect();
        // A reference read that is unreadable makes the read unreadable: say where.
        for gap in &other.unreadable {
            if !trace
                .unreadable
                .iter()
                .any(|known| known.read_index == gap.read_index)
            {
                trace.unreadable.push(gap.clone());
            }
        }
        trace.unreadable.sort_by_key(|gap| gap.read_index);
    }
    data.warnings.push(format!(
        "{}: the read at {reference_nm} nm is subtracted from the read at {chosen} nm, per read and well",
        data.source
    ));
    Ok(())
}

/// Finds the first row that starts a table of an allowed shape. On one row, wide is tried first,
/// then grid, then long.
fn detect_shape(grid: &CellGrid, forced: Option<DataShape>) -> Result<(DataShape, usize), ImportError> {
    for row in 0..grid.n_rows() {
        let cells = grid.row_cells(row);
        for shape in DataShape::ALL {
            if forced.is_some_and(|forced| forced != shape) {
                continue;
            }
            let starts_here = match shape {
                DataShape::Wide => wide::is_header(&cells),
                DataShape::Grid => grid::is_column_number_row(grid, row),
                DataShape::Long => long::is_header(&cells, forced.is_some()),
            };
            if starts_here {
                return Ok((shape, row));
            }
        }
    }
    // A header with a time column but no well column is most likely a wide table whose well
    // headers are not well IDs: say that rather than "nothing found".
    if forced.is_none_or(|forced| forced == DataShape::Wide) {
        for row in 0..grid.n_rows() {
            let cells = grid.row_cells(row);
            let time_column = cells
                .iter()
                .position(|cell| matches!(classify_header(cell), HeaderKind::Time(_)));
            if let Some(column) = time_column {
                if cells.iter().filter(|cell| !cell.is_empty()).count() >= 2 {
                    return Err(ImportError::NoWells {
                        position: grid.position(row, Some(column)),
                        detail: format!(
                            "the row has a time column ('{}') but no column headed by a well ID such as A1 or A01",
                            cells[column].as_text()
                        ),
                    });
                }
            }
        }
    }
    Err(ImportError::NoShape {
        origin: grid.source.clone(),
        searched: format!("rows 1-{}", grid.n_rows()),
        looked_for: looked_for(forced),
    })
}

/// One read as a shape parser found it: its time and where the time is written.
#[derive(Debug, Clone, Copy)]
struct ReadRecord {
    /// Seconds.
    time_s: f64,
    /// Zero-based row of the time cell (or the block's time line).
    row: usize,
    /// Zero-based column of the time cell.
    column: usize,
}

/// A cell with no number where a reading belongs, before the read's time is attached.
#[derive(Debug, Clone)]
struct UnreadableCell {
    /// Zero-based read index.
    read_index: usize,
    /// Zero-based row.
    row: usize,
    /// Zero-based column.
    column: usize,
    /// The cell's text ("" for blank or missing).
    text: String,
}

/// One well's readings as a shape parser collected them.
#[derive(Debug, Clone)]
struct WellColumn {
    /// The well.
    well: WellId,
    /// Zero-based row and column where the well is first named.
    named_at: (usize, usize),
    /// One value per read.
    values: Readings,
    /// Cells with no number.
    unreadable: Vec<UnreadableCell>,
}

impl WellColumn {
    /// A well with no readings yet.
    fn new(well: WellId, named_at: (usize, usize), reads_expected: usize) -> Self {
        Self {
            well,
            named_at,
            values: Readings::with_capacity(reads_expected),
            unreadable: Vec::new(),
        }
    }

    /// Appends the reading of the next read from `cell` (`None`: the row ends before it).
    fn push_cell(&mut self, cell: Option<Cell>, row: usize, column: usize) {
        let read_index = self.values.len();
        match reading_of_cell(cell) {
            Ok(value) => self.values.push(Some(value)),
            Err(text) => {
                self.values.push(None);
                self.unreadable.push(UnreadableCell {
                    read_index,
                    row,
                    column,
                    text,
                });
            }
        }
    }
}

/// The number in a value cell, or the text to record when there is none. A blank or missing
/// cell is text "", never zero.
fn reading_of_cell(cell: Option<Cell>) -> Result<f64, String> {
    match cell {
        // NaN is no reading (and `Readings` keeps it for a missing one).
        Some(Cell::Number(value)) if value.is_nan() => Err("NaN".to_string()),
        Some(Cell::Number(value)) => Ok(value),
        None | Some(Cell::Empty) => Err(String::new()),
        Some(Cell::Text(text)) => Err(text.to_string()),
        // A time-formatted cell shows a time, not the reading the instrument wrote.
        Some(Cell::Duration(_)) => Err("time-formatted cell".to_string()),
    }
}

/// What a shape parser hands to [`finish`].
#[derive(Debug)]
struct ShapeTable {
    /// The shape.
    shape: DataShape,
    /// The reads in file order.
    reads: Vec<ReadRecord>,
    /// Per-read temperatures, if recorded.
    temperatures_c: Option<Vec<Option<f64>>>,
    /// The wells, each with one value per read.
    wells: Vec<WellColumn>,
    /// Warnings so far.
    warnings: Vec<String>,
    /// See [`KineticData::rows_read`].
    rows_read: Vec<usize>,
    /// See [`KineticData::rows_passed_over`].
    rows_passed_over: Vec<usize>,
}

/// A map from well to a number (a column, a row, a trace index), dense over the largest plate.
struct WellMap<T: Copy> {
    /// Indexed by `row * 48 + column`.
    slots: Vec<Option<T>>,
}

impl<T: Copy> WellMap<T> {
    /// Columns of the largest plate: the stride of the slots.
    const STRIDE: usize = 48;

    /// An empty map.
    fn new() -> Self {
        Self {
            slots: vec![None; 32 * Self::STRIDE],
        }
    }

    /// The slot of a well; `None` for a well beyond the largest plate (never parsed from text).
    fn slot(well: WellId) -> Option<usize> {
        let (row, column) = (usize::from(well.row), usize::from(well.column));
        (row < 32 && column < Self::STRIDE).then_some(row * Self::STRIDE + column)
    }

    /// The value stored for `well`.
    fn get(&self, well: WellId) -> Option<T> {
        Self::slot(well).and_then(|slot| self.slots[slot])
    }

    /// Stores `value` for `well` unless it already holds one, which is returned instead.
    fn insert_new(&mut self, well: WellId, value: T) -> Result<(), T> {
        match Self::slot(well) {
            Some(slot) => match self.slots[slot] {
                Some(existing) => Err(existing),
                None => {
                    self.slots[slot] = Some(value);
                    Ok(())
                }
            },
            None => Ok(()),
        }
    }
}

/// The time unit that applies to plain-number times, settled from what the file states and
/// what the user gave.
#[derive(Debug, Clone)]
struct TimeUnitRule {
    /// The unit to apply, if any.
    unit: Option<TimeUnit>,
    /// A unit text in the header that is not a unit, with its cell: an error once a plain
    /// number needs it.
    unknown: Option<(String, Position)>,
}

impl TimeUnitRule {
    /// Settles the unit from a header (or block line) and `--time-unit`. A stated unit and a
    /// given one must agree: silently preferring either would scale every rate.
    fn settle(
        stated: &HeaderTimeUnit,
        given: Option<TimeUnit>,
        stated_at: impl Fn() -> Position,
    ) -> Result<Self, ImportError> {
        match stated {
            HeaderTimeUnit::Unit(stated) => match given {
                Some(given) if given != *stated => Err(ImportError::TimeUnitConflict {
                    position: stated_at(),
                    stated: *stated,
                    given,
                }),
                _ => Ok(Self {
                    unit: Some(*stated),
                    unknown: None,
                }),
            },
            HeaderTimeUnit::Unknown(text) => Ok(Self {
                unit: given,
                unknown: Some((text.clone(), stated_at())),
            }),
            HeaderTimeUnit::Absent | HeaderTimeUnit::ClockPattern => Ok(Self {
                unit: given,
                unknown: None,
            }),
        }
    }

    /// Seconds of a raw time read at `position`.
    fn seconds(&self, raw: RawTime, position: impl Fn() -> Position) -> Result<f64, ImportError> {
        match raw {
            RawTime::Seconds(seconds) => Ok(seconds),
            RawTime::Plain(value) => match (&self.unknown, self.unit) {
                (Some((unit, stated_at)), _) => Err(ImportError::UnknownTimeUnit {
                    position: stated_at.clone(),
                    unit: unit.clone(),
                }),
                (None, Some(unit)) => Ok(value * unit.in_seconds()),
                (None, None) => Err(ImportError::NoTimeUnit { position: position() }),
            },
        }
    }
}

/// Turns a time-text error at `position` into an import error.
fn time_text_error(error: TimeTextError, position: Position) -> ImportError {
    match error {
        TimeTextError::UnknownUnit(unit) => ImportError::UnknownTimeUnit { position, unit },
        other => ImportError::BadTime {
            position,
            reason: other.reason(),
        },
    }
}

/// Applies the short-row policy to a row: an error, or a warning naming the line.
fn short_row(
    grid: &CellGrid,
    options: &ImportOptions,
    row: usize,
    detail: String,
    consequence: &str,
    warnings: &mut Vec<String>,
) -> Result<(), ImportError> {
    match options.short_rows {
        ShortRowPolicy::Refuse => Err(ImportError::ShortRow {
            position: grid.position(row, None),
            detail,
        }),
        ShortRowPolicy::TreatAsUnreadable => {
            warnings.push(format!(
                "{}: the row is cut short ({detail}), as an aborted read leaves it; {consequence}",
                grid.position(row, None)
            ));
            Ok(())
        }
    }
}

/// Checks the reads, settles the plate, says how the time axis was read and builds the traces.
fn finish(grid: &CellGrid, table: ShapeTable, options: &ImportOptions) -> Result<KineticData, ImportError> {
    let ShapeTable {
        shape,
        reads,
        temperatures_c,
        mut wells,
        mut warnings,
        rows_read,
        rows_passed_over,
    } = table;
    if reads.len() > MAX_READS {
        return Err(ImportError::TooManyReads {
            origin: grid.source.clone(),
            limit: MAX_READS,
        });
    }
    if let Some(far) = reads
        .iter()
        .find(|read| read.time_s.is_nan() || read.time_s.abs() > MAX_SECONDS)
    {
        return Err(ImportError::BadTime {
            position: grid.position(far.row, Some(far.column)),
            reason: format!(
                "{} s is beyond {MAX_SECONDS:e} s, the longest time platekin reads",
                far.time_s
            ),
        });
    }
    for pair in reads.windows(2) {
        if let [previous, current] = pair {
            // Anything but "greater" fails, a NaN time included.
            if current.time_s.partial_cmp(&previous.time_s) != Some(std::cmp::Ordering::Greater) {
                return Err(ImportError::TimesNotIncreasing {
                    position: grid.position(current.row, Some(current.column)),
                    time_s: current.time_s,
                    previous_s: previous.time_s,
                    previous_row: previous.row + 1,
                });
            }
        }
    }
    let plate = match options.plate {
        Some(plate) => plate,
        None => infer_plate(grid, &wells)?,
    };
    if let Some(off) = wells.iter().find(|column| !plate.contains(column.well)) {
        return Err(ImportError::WellOffPlate {
            well: off.well,
            position: grid.position(off.named_at.0, Some(off.named_at.1)),
            plate,
        });
    }
    warnings.extend(time_axis_warnings(grid, &reads));
    wells.sort_by_key(|column| column.well);
    let times_s: Vec<f64> = reads.iter().map(|read| read.time_s).collect();
    let traces = wells
        .into_iter()
        .map(|mut column| {
            column.unreadable.sort_by_key(|cell| cell.read_index);
            let unreadable = column
                .unreadable
                .into_iter()
                .map(|cell| UnreadableRead {
                    read_index: cell.read_index,
                    time_s: times_s.get(cell.read_index).copied().unwrap_or(f64::NAN),
                    position: grid.position(cell.row, Some(cell.column)),
                    text: cell.text,
                })
                .collect();
            WellTrace {
                well: column.well,
                values: column.values,
                unreadable,
            }
        })
        .collect();
    Ok(KineticData {
        source: grid.source.clone(),
        shape,
        plate,
        times_s,
        temperatures_c,
        wells: traces,
        warnings,
        rows_read,
        rows_passed_over,
    })
}

/// The most wells that may lie beyond a smaller plate before the larger one is taken without a
/// question: a stray column such as a temperature probe `T1` is one or two, while a real larger
/// plate in use has many wells beyond the smaller one.
const FEW_WELLS_BEYOND: usize = 4;

/// The plate the wells are on: the smallest format holding them all, unless a few of them alone
/// (at most [`FEW_WELLS_BEYOND`], and fewer than the rest) make it larger, which is asked about
/// rather than assumed.
fn infer_plate(grid: &CellGrid, wells: &[WellColumn]) -> Result<PlateFormat, ImportError> {
    let all = PlateFormat::smallest_holding(wells.iter().map(|column| &column.well))
        .unwrap_or(PlateFormat::Wells1536);
    // The smallest format that holds all but a few of the wells, if any smaller than `all` does.
    let smaller_with_few_beyond = PlateFormat::ALL
        .into_iter()
        .take_while(|format| *format != all)
        .find_map(|format| {
            let beyond: Vec<&WellColumn> = wells
                .iter()
                .filter(|column| !format.contains(column.well))
                .collect();
            let others = wells.len() - beyond.len();
            (beyond.len() <= FEW_WELLS_BEYOND && beyond.len() < others).then_some((format, beyond, others))
        });
    let Some((smaller, beyond, others)) = smaller_with_few_beyond else {
        return Ok(all);
    };
    let named: Vec<String> = beyond
        .iter()
        .map(|column| {
            format!(
                "{} ({})",
                column.well,
                grid.position(column.named_at.0, Some(column.named_at.1))
            )
        })
        .collect();
    let one = beyond.len() == 1;
    Err(ImportError::AmbiguousPlate {
        wells: named.join("; "),
        count_words: if one {
            "the only well".to_string()
        } else {
            format!("the only {} wells", beyond.len())
        },
        it_they: if one { "it" } else { "they" },
        them: if one { "it" } else { "them" },
        others,
        smaller,
        larger: all,
    })
}

/// Read intervals after 0 s beyond which a first read is said to start late.
const LATE_START_INTERVALS: f64 = 3.0;

/// What the time axis means, said where a reader could be misled: reads before 0 s (which no
/// initial-rate window uses), and a first read long after 0 s (all of that time counts as
/// reaction time before the first read).
fn time_axis_warnings(grid: &CellGrid, reads: &[ReadRecord]) -> Vec<String> {
    let mut warnings = Vec::new();
    let negative: Vec<&ReadRecord> = reads.iter().filter(|read| read.time_s < 0.0).collect();
    if let (Some(first), Some(last)) = (negative.first(), negative.last()) {
        warnings.push(format!(
            "{}: {} read(s) before 0 s (rows {}-{}, from {} s): times are read as time since the \
             reaction started, and initial-rate windows start at 0 s (or --skip), so these reads \
             are kept in the traces but give no rate",
            grid.source,
            negative.len(),
            first.row + 1,
            last.row + 1,
            format_seconds(first.time_s)
        ));
    }
    let mut steps: Vec<f64> = reads
        .windows(2)
        .map(|pair| pair[1].time_s - pair[0].time_s)
        .collect();
    steps.sort_by(f64::total_cmp);
    if let (Some(first), Some(&median_step)) = (reads.first(), steps.get(steps.len() / 2)) {
        if first.time_s > 0.0 && first.time_s > LATE_START_INTERVALS * median_step {
            warnings.push(format!(
                "{}: the first read is at {} s, {:.0} read intervals after 0 s: times are read as \
                 time since the reaction started, so {} s of reaction count before the first read \
                 (in the conversion limit and the initial rates); if the reaction started at the \
                 first read, subtract {} s from the export's times",
                grid.position(first.row, Some(first.column)),
                format_seconds(first.time_s),
                first.time_s / median_step,
                format_seconds(first.time_s),
                format_seconds(first.time_s)
            ));
        }
    }
    warnings
}

/// The rows of `grid` from the first read on that hold a number and that `data` neither read
/// nor passed over with a word: empty when nothing was lost. The promise of the importer, as a
/// check for tests and the fuzz targets.
pub fn rows_unaccounted(data: &KineticData, grid: &CellGrid) -> Vec<usize> {
    let Some(&first) = data.rows_read.iter().min() else {
        return Vec::new();
    };
    (first..grid.n_rows())
        .filter(|row| {
            grid.row(*row)
                .any(|cell| matches!(cell, Cell::Number(_) | Cell::Duration(_)))
        })
        .filter(|row| {
            data.rows_read.binary_search(row).is_err() && data.rows_passed_over.binary_search(row).is_err()
        })
        .collect()
}

/// Formats a list of names for a message, at most `limit` of them.
fn list_some(items: &[String], limit: usize) -> String {
    if items.len() <= limit {
        items.join(", ")
    } else {
        format!("{}, and {} more", items[..limit].join(", "), items.len() - limit)
    }
}
