//! Reads the bytes of a CSV/TSV/TXT file or of a spreadsheet sheet (XLSX, XLS, ODS) into a
//! [`CellGrid`]: the one reader of cells every input goes through.
//!
//! Text files: a UTF-8 byte-order mark and CRLF line ends are accepted; the delimiter is sniffed
//! among comma, semicolon and tab (the one that splits the most lines into the same, largest number
//! of fields wins, except that a semicolon or tab splitting every line of the comma's winning
//! block evenly beats the comma, whose extra fields are then decimal commas). A quoted cell that
//! runs over a line end is refused (an unclosed quote would otherwise swallow the rest of the file
//! into one cell).
//!
//! Decimal marks are decided once per file ([`decide_decimal_mark`]) from the numbers it holds:
//! `0.5` or `12.25` can only be decimals with a point, `0,5` only with a comma, while `1,000` or
//! `4.940` could also be thousands written with a separator and tell nothing. Text written with the
//! other mark, or whose mark the file does not settle, stays text, so that it is named where a
//! number is needed instead of being read as a guess.
//!
//! Spreadsheets: cells formatted as a time or duration become [`Cell::Duration`] in seconds
//! (calamine's day fraction times 86 400), never a wall-clock date; text cells holding numbers
//! follow the same decimal-mark rule; merged cells are filled with their top-left value where the
//! caller asks for it (layouts and rate tables, where a merged cell means the same value for
//! each of its cells).
//!
//! Ceilings, each refused with a message before memory is spent on it: a line of
//! [`MAX_LINE_BYTES`], [`MAX_ROWS`] rows, [`MAX_CELLS_PER_ROW`] cells in a row, [`MAX_CELLS`]
//! cells in all.

use std::io::Cursor;

use calamine::{Data, Reader, Sheets};

use super::input::InputFile;
use crate::core::cells::{column_letters, Cell, CellGrid, DecimalMark, Source};

/// The longest line of a text file read (4 MiB): a 1536-well row of 16-character readings is
/// about 25 kB.
pub const MAX_LINE_BYTES: usize = 4 * 1024 * 1024;

/// The most rows read: a spreadsheet's tallest sheet.
pub const MAX_ROWS: usize = 1_048_576;

/// The most cells in one row: a spreadsheet's widest sheet (column XFD).
pub const MAX_CELLS_PER_ROW: usize = 16_384;

/// The most cells read from one file or sheet: 1536 wells x 16 000 reads, or 400 MB in memory.
pub const MAX_CELLS: usize = 25_000_000;

/// Why a file could not be read into cells at all.
#[derive(Debug, thiserror::Error)]
pub enum SheetReadError {
    /// The spreadsheet could not be parsed.
    #[error("{file}: not a readable spreadsheet: {message}")]
    BadSpreadsheet {
        /// The file as the user named it.
        file: String,
        /// calamine's reason.
        message: String,
    },
    /// The sheet asked for does not exist.
    #[error("{file}: no sheet named '{sheet}' (the sheets are: {available})")]
    NoSuchSheet {
        /// The file as the user named it.
        file: String,
        /// The sheet asked for.
        sheet: String,
        /// The sheets present, comma-separated.
        available: String,
    },
    /// No sheet holds any data.
    #[error("{file}: every sheet is empty")]
    NoData {
        /// The file as the user named it.
        file: String,
    },
    /// A text file is not UTF-8.
    #[error("{file}, row {row}: the text is not UTF-8 (save the export as UTF-8 CSV)")]
    NotUtf8 {
        /// The file as the user named it.
        file: String,
        /// The one-based line holding the first bad byte.
        row: usize,
    },
    /// The CSV reader failed on a line.
    #[error("{file}, row {row}: {message}")]
    BadText {
        /// The file as the user named it.
        file: String,
        /// One-based line.
        row: usize,
        /// The CSV reader's reason.
        message: String,
    },
    /// A quoted cell holds a line end: most likely a quote opened and never closed.
    #[error(
        "{file}, row {row}, column {column} ({letters}): a quoted cell runs over {lines} lines (a quote opened \
         and not closed on its line?); platekin reads one row per line: close the quote or remove it"
    )]
    QuotedLineBreak {
        /// The file as the user named it.
        file: String,
        /// One-based line where the cell starts.
        row: usize,
        /// One-based column.
        column: usize,
        /// The column's letters.
        letters: String,
        /// How many lines the cell spans.
        lines: usize,
    },
    /// The delimiter changes part-way through the file.
    #[error(
        "{file}, row {row}: from this row the lines are separated by '{new}', above it by '{old}'; \
         platekin reads one delimiter a file (save the export again in one piece)"
    )]
    MixedDelimiters {
        /// The file as the user named it.
        file: String,
        /// One-based row where the other delimiter starts.
        row: usize,
        /// The delimiter above it.
        old: char,
        /// The delimiter from it on.
        new: char,
    },
    /// A line longer than [`MAX_LINE_BYTES`].
    #[error("{file}, row {row}: the line is longer than {limit} MiB, the most platekin reads")]
    LineTooLong {
        /// The file as the user named it.
        file: String,
        /// One-based line.
        row: usize,
        /// The ceiling in MiB.
        limit: usize,
    },
    /// More rows than [`MAX_ROWS`].
    #[error("{origin}: more than {limit} rows, the most platekin reads")]
    TooManyRows {
        /// The file (and sheet).
        origin: Source,
        /// The ceiling.
        limit: usize,
    },
    /// A row with more cells than [`MAX_CELLS_PER_ROW`].
    #[error("{origin}, row {row}: more than {limit} cells in one row, the most platekin reads")]
    RowTooWide {
        /// The file (and sheet).
        origin: Source,
        /// One-based row.
        row: usize,
        /// The ceiling.
        limit: usize,
    },
    /// More cells than [`MAX_CELLS`].
    #[error("{origin}: more than {limit} cells, the most platekin reads from one file")]
    TooManyCells {
        /// The file (and sheet).
        origin: Source,
        /// The ceiling.
        limit: usize,
    },
}

/// What to do with a spreadsheet's merged cells.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MergedCells {
    /// Every cell of a merged region takes the region's value (layouts, rate tables).
    Fill,
    /// Only the region's top-left cell holds the value (exports).
    Keep,
}

/// Whether the bytes are a spreadsheet, by their name or, for a file without a telling name (a
/// pipe such as `<(cat plate.xlsx)`), by their first bytes: a ZIP archive (XLSX, XLSM, XLSB,
/// ODS) or an OLE compound file (XLS).
pub fn looks_like_spreadsheet(input: &InputFile) -> bool {
    const ZIP: &[u8] = b"PK\x03\x04";
    const OLE: &[u8] = &[0xD0, 0xCF, 0x11, 0xE0, 0xA1, 0xB1, 0x1A, 0xE1];
    input.is_spreadsheet() || input.bytes.starts_with(ZIP) || input.bytes.starts_with(OLE)
}

/// Reads an input's bytes into cells: a spreadsheet's sheet `sheet` (without it, the first sheet
/// holding any data), or a text file (`sheet` is then ignored).
pub fn read_input_cells(
    input: &InputFile,
    sheet: Option<&str>,
    merged: MergedCells,
) -> Result<CellGrid, SheetReadError> {
    if looks_like_spreadsheet(input) {
        read_spreadsheet_cells(&input.bytes, &input.name, sheet, merged)
    } else {
        read_text_cells(&input.bytes, &input.name)
    }
}

/// The text of a file's bytes, without a byte-order mark, or the line of the first bad byte.
fn utf8_text<'a>(bytes: &'a [u8], file: &str) -> Result<&'a str, SheetReadError> {
    match std::str::from_utf8(bytes) {
        Ok(text) => Ok(text.strip_prefix('\u{feff}').unwrap_or(text)),
        Err(error) => {
            let row = bytes[..error.valid_up_to()]
                .iter()
                .filter(|&&b| b == b'\n')
                .count()
                + 1;
            Err(SheetReadError::NotUtf8 {
                file: file.to_string(),
                row,
            })
        }
    }
}

/// Refuses a text with a line longer than [`MAX_LINE_BYTES`] or more lines than [`MAX_ROWS`],
/// before the CSV reader holds any of it.
fn check_line_ceilings(text: &str, source: &Source) -> Result<(), SheetReadError> {
    for (index, line) in text.split('\n').enumerate() {
        if index >= MAX_ROWS {
            return Err(SheetReadError::TooManyRows {
                origin: source.clone(),
                limit: MAX_ROWS,
            });
        }
        if line.len() > MAX_LINE_BYTES {
            return Err(SheetReadError::LineTooLong {
                file: source.file.clone(),
                row: index + 1,
                limit: MAX_LINE_BYTES / (1024 * 1024),
            });
        }
    }
    Ok(())
}

/// A CSV reader over `text` with the file's delimiter, one record per line.
fn csv_reader(text: &str, delimiter: u8) -> csv::Reader<&[u8]> {
    csv::ReaderBuilder::new()
        .delimiter(delimiter)
        .has_headers(false)
        .flexible(true)
        .from_reader(text.as_bytes())
}

/// Reads a delimited text file's bytes into cells (see the module documentation for the rules).
pub fn read_text_cells(bytes: &[u8], file: &str) -> Result<CellGrid, SheetReadError> {
    let text = utf8_text(bytes, file)?;
    let source = Source {
        file: file.to_string(),
        sheet: None,
    };
    check_line_ceilings(text, &source)?;
    let delimiter = sniff_delimiter(text);
    check_one_delimiter(text, delimiter, file)?;
    // First pass: the numbers' evidence of the decimal mark. Second pass: the cells.
    // The first pass also counts the cells, so that the grid is allocated once.
    let mut evidence = MarkEvidence::default();
    let mut record = csv::StringRecord::new();
    let mut reader = csv_reader(text, delimiter);
    let (mut n_cells, mut n_records) = (0usize, 0usize);
    while reader.read_record(&mut record).unwrap_or(false) {
        n_cells = n_cells.saturating_add(record.len());
        n_records += 1;
        for field in record.iter() {
            evidence.add(field.trim());
        }
    }
    let decimal_mark = decide_decimal_mark(&evidence, Some(delimiter));
    let mut grid = CellGrid::new(source, decimal_mark);
    // Never more than the ceiling: a file past it is refused below, cell by cell.
    grid.reserve(n_cells.min(MAX_CELLS), n_records);
    let mut reader = csv_reader(text, delimiter);
    loop {
        match reader.read_record(&mut record) {
            Ok(false) => break,
            Ok(true) => {}
            Err(error) => {
                return Err(SheetReadError::BadText {
                    file: file.to_string(),
                    row: error
                        .position()
                        .map_or(grid.n_rows() + 1, |p| first_line_of_record(text, p)),
                    message: error.to_string(),
                })
            }
        }
        // The csv crate skips empty lines; keep the line numbering true to the file by padding
        // with blank rows up to the record's own line.
        let line = record
            .position()
            .map_or(grid.n_rows() + 1, |p| first_line_of_record(text, p));
        grid.push_blank_rows(line.saturating_sub(grid.n_rows() + 1));
        if record.len() > MAX_CELLS_PER_ROW {
            return Err(SheetReadError::RowTooWide {
                origin: grid.source.clone(),
                row: line,
                limit: MAX_CELLS_PER_ROW,
            });
        }
        if grid.n_cells() + record.len() > MAX_CELLS {
            return Err(SheetReadError::TooManyCells {
                origin: grid.source.clone(),
                limit: MAX_CELLS,
            });
        }
        if let Some((column, field)) = record
            .iter()
            .enumerate()
            .find(|(_, field)| field.contains(['\n', '\r']))
        {
            return Err(SheetReadError::QuotedLineBreak {
                file: file.to_string(),
                row: line,
                column: column + 1,
                letters: column_letters(column + 1),
                lines: field.matches('\n').count() + 1,
            });
        }
        // A line that is one empty field (what the csv crate returns for a line holding only
        // spaces) is blank; so is a line of delimiters only.
        if record.iter().all(|field| field.trim().is_empty()) {
            grid.push_row(std::iter::empty());
        } else {
            grid.push_row(record.iter().map(|field| text_cell(field, decimal_mark)));
        }
    }
    Ok(grid)
}

/// The one-based line on which a record's text begins. The csv crate reports where it started
/// scanning for the record, which lies before any empty lines it skipped on the way, so the line
/// ends ('\n', with any '\r') between that point and the record's first byte are counted here.
fn first_line_of_record(text: &str, position: &csv::Position) -> usize {
    let scan_start = usize::try_from(position.byte())
        .unwrap_or(usize::MAX)
        .min(text.len());
    let skipped_line_ends = text.as_bytes()[scan_start..]
        .iter()
        .take_while(|&&byte| byte == b'\r' || byte == b'\n')
        .filter(|&&byte| byte == b'\n')
        .count();
    usize::try_from(position.line())
        .unwrap_or(usize::MAX)
        .saturating_add(skipped_line_ends)
}

/// Chooses the delimiter that gives the most lines with the same, largest field count.
/// Comma is the fallback for single-column files.
///
/// A decimal comma adds comma "fields" to every number, so in a semicolon or tab export whose
/// numbers all carry a decimal comma the comma can out-score the real delimiter (with more data
/// lines than fields per line). When the comma wins, a semicolon or tab that also splits every
/// line of the comma's winning block into one same number of fields is taken as the delimiter
/// instead: there the commas are decimal commas.
fn sniff_delimiter(text: &str) -> u8 {
    let sample: Vec<&str> = text
        .lines()
        .filter(|line| !line.trim().is_empty())
        .take(200)
        .collect();
    let field_count = |line: &str, delimiter: u8| fields_outside_quotes(line, delimiter);
    let mut best = (b',', 0usize, 0usize);
    for delimiter in DELIMITERS {
        let mut counts: std::collections::HashMap<usize, usize> = std::collections::HashMap::new();
        for line in &sample {
            let fields = field_count(line, delimiter);
            if fields > 1 {
                *counts.entry(fields).or_default() += 1;
            }
        }
        // Score: lines in the most common multi-field width, weighted by that width, so that a
        // header-and-data block beats stray commas in free text. Ties on score go to the wider
        // block so that the result does not depend on the map's iteration order.
        let (width, score) = counts
            .iter()
            .map(|(width, lines)| (*width, width * lines))
            .max_by_key(|&(width, score)| (score, width))
            .unwrap_or((0, 0));
        if score > best.1 {
            best = (delimiter, score, width);
        }
    }
    if best.0 == b',' && best.1 > 0 {
        let comma_block: Vec<&str> = sample
            .iter()
            .copied()
            .filter(|line| field_count(line, b',') == best.2)
            .collect();
        for candidate in [b'\t', b';'] {
            let first_width = comma_block.first().map_or(1, |line| field_count(line, candidate));
            if first_width > 1
                && comma_block
                    .iter()
                    .all(|line| field_count(line, candidate) == first_width)
            {
                return candidate;
            }
        }
    }
    best.0
}

/// Fields of one line split by `delimiter`, not counting a delimiter inside double quotes (a
/// quoted cell may hold commas: the program's own `correction` texts do).
fn fields_outside_quotes(line: &str, delimiter: u8) -> usize {
    let mut quoted = false;
    let mut fields = 1;
    for byte in line.bytes() {
        if byte == b'"' {
            quoted = !quoted;
        } else if byte == delimiter && !quoted {
            fields += 1;
        }
    }
    fields
}

/// The delimiters a text file may use.
const DELIMITERS: [u8; 3] = [b'\t', b';', b','];

/// Refuses a file whose delimiter changes part-way (a table pasted together from two exports):
/// every line that one delimiter alone splits into the table's width (the commonest number of
/// fields under the file's delimiter) must be split by the same one.
fn check_one_delimiter(text: &str, delimiter: u8, file: &str) -> Result<(), SheetReadError> {
    let field_count = fields_outside_quotes;
    let mut widths: std::collections::HashMap<usize, usize> = std::collections::HashMap::new();
    for line in text.lines().filter(|line| !line.trim().is_empty()).take(200) {
        let fields = field_count(line, delimiter);
        if fields > 1 {
            *widths.entry(fields).or_default() += 1;
        }
    }
    let Some(width) = widths
        .into_iter()
        .max_by_key(|&(width, lines)| (lines, width))
        .map(|(width, _)| width)
    else {
        return Ok(());
    };
    let own_delimiter = |line: &str| -> Option<u8> {
        let mut splitting = DELIMITERS
            .into_iter()
            .filter(|&candidate| field_count(line, candidate) == width);
        match (splitting.next(), splitting.next()) {
            (Some(only), None) => Some(only),
            _ => None,
        }
    };
    let mut previous: Option<u8> = None;
    for (index, line) in text.lines().enumerate() {
        let Some(own) = own_delimiter(line) else {
            continue;
        };
        match previous {
            Some(old) if old != own => {
                return Err(SheetReadError::MixedDelimiters {
                    file: file.to_string(),
                    row: index + 1,
                    old: char::from(old),
                    new: char::from(own),
                })
            }
            _ => previous = Some(own),
        }
    }
    Ok(())
}

/// What one text says about the decimal mark.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NumberShape {
    /// Not a plain number.
    NotANumber,
    /// A whole number (with or without an exponent): readable with any mark.
    Whole,
    /// A number with one separator `mark`; `ambiguous` when it could also be thousands written
    /// with a separator (`1,000`, `4.940`: one to three digits not starting with 0, the
    /// separator, exactly three digits, no exponent).
    Separated {
        /// The separator, `.` or `,`.
        mark: char,
        /// Whether the text could also be a whole number with a thousands separator.
        ambiguous: bool,
    },
}

/// The shape of a plain number: an optional sign, digits with at most one `.` or `,` between or
/// before them, an optional exponent. Words such as `inf` or `NaN` are not numbers here: an
/// instrument that writes them means "no reading".
pub fn number_shape(text: &str) -> NumberShape {
    let bytes = text.as_bytes();
    let mut index = 0;
    if matches!(bytes.first(), Some(b'+' | b'-')) {
        index += 1;
    }
    let integer_start = index;
    while bytes.get(index).is_some_and(u8::is_ascii_digit) {
        index += 1;
    }
    let integer_digits = index - integer_start;
    let mut separator = None;
    let mut fraction_digits = 0;
    if let Some(&mark @ (b'.' | b',')) = bytes.get(index) {
        separator = Some(mark as char);
        index += 1;
        let fraction_start = index;
        while bytes.get(index).is_some_and(u8::is_ascii_digit) {
            index += 1;
        }
        fraction_digits = index - fraction_start;
        // `5.` and a lone `.` are not numbers.
        if fraction_digits == 0 {
            return NumberShape::NotANumber;
        }
    } else if integer_digits == 0 {
        return NumberShape::NotANumber;
    }
    let mut has_exponent = false;
    if matches!(bytes.get(index), Some(b'e' | b'E')) {
        let mut look = index + 1;
        if matches!(bytes.get(look), Some(b'+' | b'-')) {
            look += 1;
        }
        let exponent_start = look;
        while bytes.get(look).is_some_and(u8::is_ascii_digit) {
            look += 1;
        }
        if look == exponent_start {
            return NumberShape::NotANumber;
        }
        has_exponent = true;
        index = look;
    }
    if index != bytes.len() {
        return NumberShape::NotANumber;
    }
    match separator {
        None => NumberShape::Whole,
        Some(mark) => {
            let leading_zero = bytes.get(integer_start) == Some(&b'0');
            let ambiguous =
                !has_exponent && (1..=3).contains(&integer_digits) && !leading_zero && fraction_digits == 3;
            NumberShape::Separated { mark, ambiguous }
        }
    }
}

/// Counts of the numbers in a file that tell the decimal mark.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct MarkEvidence {
    /// Numbers that can only be decimals with a point.
    pub point: usize,
    /// Numbers that can only be decimals with a comma.
    pub comma: usize,
}

impl MarkEvidence {
    /// Counts one trimmed text.
    pub fn add(&mut self, text: &str) {
        match number_shape(text) {
            NumberShape::Separated {
                mark: '.',
                ambiguous: false,
            } => self.point += 1,
            NumberShape::Separated {
                mark: ',',
                ambiguous: false,
            } => self.comma += 1,
            _ => {}
        }
    }
}

/// Decides a file's decimal mark from its numbers: the mark its unambiguous numbers use (the
/// more frequent one if both appear; the other mark's numbers then stay text and are named where
/// used). With no such number, a comma-delimited file has a point (a decimal comma would have to
/// be quoted); any other file's mark is [`DecimalMark::Unknown`] and only whole numbers are read.
pub fn decide_decimal_mark(evidence: &MarkEvidence, delimiter: Option<u8>) -> DecimalMark {
    let comma_delimited = delimiter == Some(b',');
    match (evidence.point, evidence.comma) {
        (0, 0) if comma_delimited => DecimalMark::Point,
        (0, 0) => DecimalMark::Unknown,
        (_, 0) => DecimalMark::Point,
        (0, _) => DecimalMark::Comma,
        (point, comma) if point > comma => DecimalMark::Point,
        (point, comma) if comma > point => DecimalMark::Comma,
        _ if comma_delimited || delimiter.is_none() => DecimalMark::Point,
        _ => DecimalMark::Comma,
    }
}

/// Types one text field: empty, a number in the file's decimal mark, or text.
pub fn text_cell(field: &str, mark: DecimalMark) -> Cell<'_> {
    let trimmed = field.trim();
    if trimmed.is_empty() {
        return Cell::Empty;
    }
    match parse_number(trimmed, mark) {
        Some(value) => Cell::Number(value),
        None => Cell::Text(trimmed),
    }
}

/// Parses a plain number written with the file's decimal mark (see [`number_shape`]): a number
/// with the other mark, or with a mark the file does not settle, is not read.
pub fn parse_number(text: &str, mark: DecimalMark) -> Option<f64> {
    let value = match number_shape(text) {
        NumberShape::NotANumber => return None,
        NumberShape::Whole => text.parse::<f64>().ok(),
        NumberShape::Separated { mark: separator, .. } => match mark.character() {
            Some('.') if separator == '.' => text.parse::<f64>().ok(),
            Some(',') if separator == ',' => text.replacen(',', ".", 1).parse::<f64>().ok(),
            _ => None,
        },
    };
    value.filter(|value| value.is_finite())
}

/// Reads one sheet of a spreadsheet's bytes into cells.
pub fn read_spreadsheet_cells(
    bytes: &[u8],
    file: &str,
    sheet: Option<&str>,
    merged: MergedCells,
) -> Result<CellGrid, SheetReadError> {
    let bad = |message: String| SheetReadError::BadSpreadsheet {
        file: file.to_string(),
        message,
    };
    let mut workbook =
        calamine::open_workbook_auto_from_rs(Cursor::new(bytes)).map_err(|error| bad(error.to_string()))?;
    let names = workbook.sheet_names();
    let chosen: Vec<String> = match sheet {
        Some(wanted) => {
            if !names.iter().any(|name| name == wanted) {
                return Err(SheetReadError::NoSuchSheet {
                    file: file.to_string(),
                    sheet: wanted.to_string(),
                    available: names.join(", "),
                });
            }
            vec![wanted.to_string()]
        }
        None => names.clone(),
    };
    for name in chosen {
        let source = Source {
            file: file.to_string(),
            sheet: Some(name.clone()),
        };
        let mut cells = sheet_cells(&mut workbook, &name, &source).map_err(|error| match error {
            SheetCellsError::Calamine(message) => bad(message),
            SheetCellsError::Ceiling(error) => error,
        })?;
        if cells.is_empty() && sheet.is_none() {
            continue;
        }
        if matches!(merged, MergedCells::Fill) {
            let regions = match &mut workbook {
                Sheets::Xlsx(xlsx) => xlsx
                    .merge_cells_by_sheet_name(&name)
                    .map_err(|error| bad(error.to_string()))?,
                Sheets::Xls(xls) => xls
                    .merge_cells_by_sheet_name(&name)
                    .map_err(|error| bad(error.to_string()))?,
                // calamine gives no merged regions for the other formats.
                _ => Vec::new(),
            };
            fill_merged_regions(&regions, &mut cells, &source)?;
        }
        return grid_of_sparse_cells(cells, source);
    }
    Err(SheetReadError::NoData {
        file: file.to_string(),
    })
}

/// A sheet's non-empty cells, each with its zero-based (row, column).
type SparseCells = Vec<((u32, u32), Data)>;

/// Why a sheet's cells could not be listed.
enum SheetCellsError {
    /// calamine failed.
    Calamine(String),
    /// A ceiling was passed.
    Ceiling(SheetReadError),
}

/// A sheet's non-empty cells with their zero-based positions. XLSX sheets are streamed cell by
/// cell, so a stray cell far from the data cannot make the reader allocate the rectangle between;
/// other formats come from calamine's own dense range.
fn sheet_cells(
    workbook: &mut Sheets<Cursor<&[u8]>>,
    name: &str,
    source: &Source,
) -> Result<SparseCells, SheetCellsError> {
    let mut cells: SparseCells = Vec::new();
    let mut keep = |position: (u32, u32), data: Data| -> Result<(), SheetCellsError> {
        if matches!(data, Data::Empty) {
            return Ok(());
        }
        check_position(position, source).map_err(SheetCellsError::Ceiling)?;
        if cells.len() >= MAX_CELLS {
            return Err(SheetCellsError::Ceiling(SheetReadError::TooManyCells {
                origin: source.clone(),
                limit: MAX_CELLS,
            }));
        }
        // An error cell is kept as the text a spreadsheet shows (`#DIV/0!`), so messages quote it.
        let data = match data {
            Data::Error(error) => Data::String(error.to_string()),
            other => other,
        };
        cells.push((position, data));
        Ok(())
    };
    if let Sheets::Xlsx(xlsx) = workbook {
        let mut reader = xlsx
            .worksheet_cells_reader(name)
            .map_err(|error| SheetCellsError::Calamine(error.to_string()))?;
        while let Some(cell) = reader
            .next_cell()
            .map_err(|error| SheetCellsError::Calamine(error.to_string()))?
        {
            keep(cell.get_position(), Data::from(cell.get_value().clone()))?;
        }
    } else {
        let range = workbook
            .worksheet_range(name)
            .map_err(|error| SheetCellsError::Calamine(error.to_string()))?;
        for (row, column, data) in range.used_cells() {
            let (start_row, start_column) = range.start().unwrap_or((0, 0));
            let position = (
                start_row.saturating_add(u32::try_from(row).unwrap_or(u32::MAX)),
                start_column.saturating_add(u32::try_from(column).unwrap_or(u32::MAX)),
            );
            keep(position, data.clone())?;
        }
    }
    Ok(cells)
}

/// Refuses a cell beyond the row or column ceiling.
fn check_position((row, column): (u32, u32), source: &Source) -> Result<(), SheetReadError> {
    if row as usize >= MAX_ROWS {
        return Err(SheetReadError::TooManyRows {
            origin: source.clone(),
            limit: MAX_ROWS,
        });
    }
    if column as usize >= MAX_CELLS_PER_ROW {
        return Err(SheetReadError::RowTooWide {
            origin: source.clone(),
            row: row as usize + 1,
            limit: MAX_CELLS_PER_ROW,
        });
    }
    Ok(())
}

/// Gives every cell of each merged region the value of its top-left cell.
fn fill_merged_regions(
    regions: &[calamine::Dimensions],
    cells: &mut SparseCells,
    source: &Source,
) -> Result<(), SheetReadError> {
    if regions.is_empty() {
        return Ok(());
    }
    let mut added = 0usize;
    let mut filled: Vec<((u32, u32), Data)> = Vec::new();
    for region in regions {
        let Some(value) = cells
            .iter()
            .find(|(position, _)| *position == region.start)
            .map(|(_, data)| data.clone())
        else {
            continue;
        };
        check_position(region.end, source)?;
        let area = (u64::from(region.end.0.saturating_sub(region.start.0)) + 1)
            * (u64::from(region.end.1.saturating_sub(region.start.1)) + 1);
        added = added.saturating_add(usize::try_from(area).unwrap_or(usize::MAX));
        if cells.len().saturating_add(added) > MAX_CELLS {
            return Err(SheetReadError::TooManyCells {
                origin: source.clone(),
                limit: MAX_CELLS,
            });
        }
        for row in region.start.0..=region.end.0 {
            for column in region.start.1..=region.end.1 {
                if (row, column) != region.start {
                    filled.push(((row, column), value.clone()));
                }
            }
        }
    }
    // A filled cell replaces whatever a merged-over cell held (a spreadsheet hides it).
    let covered: std::collections::HashSet<(u32, u32)> =
        filled.iter().map(|(position, _)| *position).collect();
    cells.retain(|(position, _)| !covered.contains(position));
    cells.extend(filled);
    Ok(())
}

/// Builds the grid of a sheet from its non-empty cells: rows and columns keep the numbers the
/// spreadsheet shows; text cells holding numbers are read with the sheet's decimal mark.
fn grid_of_sparse_cells(mut cells: SparseCells, source: Source) -> Result<CellGrid, SheetReadError> {
    cells.sort_by_key(|(position, _)| *position);
    // A cell listed twice (a malformed file) counts once.
    cells.dedup_by_key(|(position, _)| *position);
    let mut evidence = MarkEvidence::default();
    for (_, data) in &cells {
        if let Data::String(text) = data {
            evidence.add(text.trim());
        }
    }
    let mark = decide_decimal_mark(&evidence, None);
    let mut grid = CellGrid::new(source, mark);
    let mut index = 0;
    while index < cells.len() {
        let row = cells[index].0 .0 as usize;
        grid.push_blank_rows(row.saturating_sub(grid.n_rows()));
        let in_row = cells[index..]
            .iter()
            .take_while(|((cell_row, _), _)| *cell_row as usize == row)
            .count();
        // The row is stored up to its last cell: that width counts against the ceiling.
        let width = cells[index + in_row - 1].0 .1 as usize + 1;
        if grid.n_cells().saturating_add(width) > MAX_CELLS {
            return Err(SheetReadError::TooManyCells {
                origin: grid.source.clone(),
                limit: MAX_CELLS,
            });
        }
        let mut row_cells: Vec<Cell> = Vec::new();
        for ((_, column), data) in &cells[index..index + in_row] {
            row_cells.resize(*column as usize, Cell::Empty);
            row_cells.push(spreadsheet_cell(data, mark));
        }
        grid.push_row(row_cells);
        index += in_row;
    }
    Ok(grid)
}

/// Types one spreadsheet cell (error cells were turned into their text when listed).
fn spreadsheet_cell(data: &Data, mark: DecimalMark) -> Cell<'_> {
    const SECONDS_PER_DAY: f64 = 86_400.0;
    match data {
        Data::Empty => Cell::Empty,
        Data::Int(value) => Cell::Number(*value as f64),
        Data::Float(value) if value.is_finite() => Cell::Number(*value),
        Data::Float(_) => Cell::Text("non-finite number"),
        Data::String(text) => text_cell(text, mark),
        Data::Bool(true) => Cell::Text("true"),
        Data::Bool(false) => Cell::Text("false"),
        // Only the fraction of a day is elapsed time for a time-of-day cell; a duration keeps
        // its whole value ([h]:mm:ss can exceed a day).
        Data::DateTime(datetime) => {
            let days = datetime.as_f64();
            let days = if datetime.is_duration() {
                days
            } else {
                days.fract() + days.trunc().min(0.0)
            };
            let seconds = days * SECONDS_PER_DAY;
            if seconds.is_finite() {
                Cell::Duration(seconds)
            } else {
                Cell::Text("non-finite time")
            }
        }
        Data::DateTimeIso(text) | Data::DurationIso(text) => Cell::Text(text.trim()),
        Data::Error(_) => Cell::Text("#error"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid(text: &str) -> CellGrid {
        read_text_cells(text.as_bytes(), "test.csv").unwrap()
    }

    #[test]
    fn sniffs_comma_semicolon_and_tab() {
        let comma = grid("Time [s],A1,A2\n0,0.1,0.2\n30,0.15,0.25\n");
        assert_eq!(
            comma.row_cells(1),
            vec![Cell::Number(0.0), Cell::Number(0.1), Cell::Number(0.2)]
        );
        let semicolon = grid("Time [s];A1;A2\n0;0,1;0,2\n");
        assert_eq!(
            semicolon.row_cells(1),
            vec![Cell::Number(0.0), Cell::Number(0.1), Cell::Number(0.2)]
        );
        let tab = grid("Time [s]\tA1\n0\t0,125\n");
        assert_eq!(tab.row_cells(1), vec![Cell::Number(0.0), Cell::Number(0.125)]);
    }

    #[test]
    fn decimal_commas_in_every_field_do_not_make_comma_the_delimiter() {
        // 150 reads, each field with a decimal comma: the comma splits every data line into more
        // fields than the semicolon (tab) does, which used to win the sniff.
        for delimiter in [";", "\t"] {
            let mut text = format!("Time [s]{delimiter}A1{delimiter}A2\n");
            for read in 0..150 {
                text.push_str(&format!("{read},5{delimiter}0,{}{delimiter}0,25\n", read + 1));
            }
            let cells = grid(&text);
            assert_eq!(cells.row_len(0), 3, "delimiter {delimiter:?}");
            assert_eq!(
                cells.row_cells(1),
                vec![Cell::Number(0.5), Cell::Number(0.1), Cell::Number(0.25)]
            );
        }
        // A comma file with a stray semicolon in a metadata line stays comma-delimited.
        let cells = grid("Note; shaken\nTime [s],A1,A2\n0,0.1,0.2\n30,0.15,0.25\n");
        assert_eq!(
            cells.row_cells(3),
            vec![Cell::Number(30.0), Cell::Number(0.15), Cell::Number(0.25)]
        );
    }

    /// A table whose cells hold quoted text with commas and semicolons (as the program's own
    /// `correction` column does) stays comma-delimited: the sniff used to count the quoted
    /// separators, and every data line then split by semicolon into one same width.
    #[test]
    fn quoted_commas_and_semicolons_do_not_move_the_delimiter() {
        let mut text = String::from("well,substrate [uM],rate [uM/s],correction\n");
        for row in 0..12 {
            text.push_str(&format!(
                "A{},{}.5,0.01,\"blank: line; background 1e-4 from 8 wells (taken at 34.5, mid-window)\"\n",
                row + 1,
                row + 10
            ));
        }
        let cells = grid(&text);
        assert_eq!(cells.row_len(0), 4);
        assert_eq!(cells.row_cells(1)[1], Cell::Number(10.5));
        assert_eq!(
            cells.row_cells(1)[3],
            Cell::Text("blank: line; background 1e-4 from 8 wells (taken at 34.5, mid-window)")
        );
    }

    #[test]
    fn byte_order_mark_and_crlf_are_fine() {
        let cells = grid("\u{feff}Time [s],A1\r\n0,0.1\r\n");
        assert_eq!(cells.cell(0, 0), Cell::Text("Time [s]"));
        assert_eq!(cells.cell(1, 1), Cell::Number(0.1));
    }

    #[test]
    fn blank_lines_keep_line_numbers() {
        let cells = grid("Run,x\n\nTime [s],A1\n0,0.1\n");
        assert_eq!(cells.n_rows(), 4);
        assert!(cells.row_is_blank(1));
        assert_eq!(cells.cell(2, 0), Cell::Text("Time [s]"));
    }

    #[test]
    fn blank_lines_keep_line_numbers_with_crlf_and_several_blanks() {
        let cells = grid("a,b\r\n\r\n\r\nc,d\r\n\ne,f\n");
        assert_eq!(cells.n_rows(), 6);
        assert_eq!(cells.cell(3, 0), Cell::Text("c"));
        assert!(cells.row_is_blank(4));
        assert_eq!(cells.cell(5, 0), Cell::Text("e"));
    }

    #[test]
    fn a_line_of_delimiters_only_is_blank() {
        let cells = grid("Time [s],A1,A2\n0,0.1,0.2\n,,\n30,0.2,0.3\n");
        assert!(cells.row_is_blank(2));
        assert_eq!(cells.row_len(2), 0);
    }

    #[test]
    fn markers_stay_text_never_zero() {
        let cells = grid("A1,A2,A3\nOVER,,-0.5\n");
        assert_eq!(
            cells.row_cells(1),
            vec![Cell::Text("OVER"), Cell::Empty, Cell::Number(-0.5)]
        );
        assert_eq!(parse_number("NaN", DecimalMark::Point), None);
        assert_eq!(parse_number("inf", DecimalMark::Point), None);
        assert_eq!(parse_number("infinity", DecimalMark::Point), None);
        assert_eq!(parse_number("1e400", DecimalMark::Point), None);
        assert_eq!(parse_number("1,5", DecimalMark::Point), None);
        assert_eq!(parse_number("1,5", DecimalMark::Comma), Some(1.5));
        assert_eq!(parse_number("1.5e-3", DecimalMark::Point), Some(1.5e-3));
        assert_eq!(parse_number(".5", DecimalMark::Point), Some(0.5));
        assert_eq!(parse_number("5.", DecimalMark::Point), None);
        assert_eq!(parse_number("1 20", DecimalMark::Point), None);
        assert_eq!(parse_number("120?", DecimalMark::Point), None);
        assert_eq!(parse_number("-", DecimalMark::Point), None);
        assert_eq!(parse_number("+7", DecimalMark::Unknown), Some(7.0));
        assert_eq!(parse_number("0.5", DecimalMark::Unknown), None);
    }

    #[test]
    fn the_decimal_mark_is_decided_per_file_and_ambiguous_text_is_not_guessed() {
        // `1,000` could be one or a thousand; `0,5` can only be a half.
        assert_eq!(
            number_shape("1,000"),
            NumberShape::Separated {
                mark: ',',
                ambiguous: true
            }
        );
        assert_eq!(
            number_shape("0,125"),
            NumberShape::Separated {
                mark: ',',
                ambiguous: false
            }
        );
        assert_eq!(
            number_shape("4.94"),
            NumberShape::Separated {
                mark: '.',
                ambiguous: false
            }
        );
        // A semicolon file whose only fractions are ambiguous reads none of them.
        let cells = grid("Time [s];A1\n0;1,000\n30;2\n");
        assert_eq!(cells.decimal_mark, DecimalMark::Unknown);
        assert_eq!(cells.cell(1, 1), Cell::Text("1,000"));
        assert_eq!(cells.cell(2, 1), Cell::Number(2.0));
        // One unambiguous decimal comma settles the file: `1,000` is then one.
        let cells = grid("Time [s];A1\n0;1,000\n30;0,5\n");
        assert_eq!(cells.decimal_mark, DecimalMark::Comma);
        assert_eq!(cells.cell(1, 1), Cell::Number(1.0));
        // A quoted `"120,5"` in a comma file with decimal points is text, not 120.5 nor 1205.
        let cells = grid("Time [s],A1\n0,0.25\n\"120,5\",0.5\n");
        assert_eq!(cells.decimal_mark, DecimalMark::Point);
        assert_eq!(cells.cell(2, 0), Cell::Text("120,5"));
        // Both marks: the more frequent wins and the other stays text.
        let cells = grid("Time [s];A1;A2\n0;0,5;0,25\n30;0.75;0,5\n");
        assert_eq!(cells.decimal_mark, DecimalMark::Comma);
        assert_eq!(cells.cell(2, 1), Cell::Text("0.75"));
    }

    #[test]
    fn an_unclosed_quote_is_refused_naming_its_line() {
        let error = read_text_cells(b"Time [s],A1\n0,0.1\n\"30,0.2\n60,0.3\n90,0.4\n", "q.csv").unwrap_err();
        let message = error.to_string();
        assert!(
            matches!(
                error,
                SheetReadError::QuotedLineBreak {
                    row: 3,
                    column: 1,
                    ..
                }
            ),
            "{message}"
        );
        assert!(message.contains("q.csv, row 3, column 1 (A)"), "{message}");
    }

    #[test]
    fn invalid_utf8_names_the_line() {
        let error = read_text_cells(b"a,b\n1,\xff\n", "x.csv").unwrap_err();
        assert!(error.to_string().contains("x.csv, row 2"), "{error}");
    }

    #[test]
    fn ceilings_are_refused_with_their_row() {
        let long_line = format!("a,b\n{}\n", "x".repeat(MAX_LINE_BYTES + 1));
        let error = read_text_cells(long_line.as_bytes(), "long.csv").unwrap_err();
        assert!(
            matches!(error, SheetReadError::LineTooLong { row: 2, .. }),
            "{error}"
        );
        let wide = format!("a\n{}\n", ",".repeat(MAX_CELLS_PER_ROW + 1));
        let error = read_text_cells(wide.as_bytes(), "wide.csv").unwrap_err();
        assert!(error.to_string().contains("wide.csv, row 2"), "{error}");
    }

    /// A sheet is read cell by cell, and the width its rows would take counts against the cell
    /// ceiling: far cells in many rows are refused instead of allocated.
    #[test]
    fn a_sheet_of_far_cells_is_refused_not_allocated() {
        let mut workbook = rust_xlsxwriter::Workbook::new();
        let sheet = workbook.add_worksheet();
        for row in 0..1600u32 {
            sheet.write_number(row, 16_000, 1.0).unwrap();
        }
        let bytes = workbook.save_to_buffer().unwrap();
        let error = read_spreadsheet_cells(&bytes, "far.xlsx", None, MergedCells::Keep).unwrap_err();
        assert!(matches!(error, SheetReadError::TooManyCells { .. }), "{error}");
        assert!(error.to_string().contains("far.xlsx"), "{error}");
    }

    #[test]
    fn spreadsheets_are_known_by_their_first_bytes_too() {
        let zip = InputFile::new(
            crate::files::input::InputRole::Data,
            "/dev/fd/63".into(),
            None,
            b"PK\x03\x04rest".to_vec(),
        );
        assert!(looks_like_spreadsheet(&zip));
        let text = InputFile::new(
            crate::files::input::InputRole::Data,
            "/dev/fd/63".into(),
            None,
            b"Time [s],A1\n".to_vec(),
        );
        assert!(!looks_like_spreadsheet(&text));
    }
}
