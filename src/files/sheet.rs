//! Reads the bytes of a CSV/TSV/TXT file or of a spreadsheet sheet (XLSX, XLS, ODS) into a
//! [`CellGrid`].
//!
//! Text files: a UTF-8 byte-order mark and CRLF line ends are accepted; the delimiter is sniffed
//! among comma, semicolon and tab (the one that splits the most lines into the same, largest number
//! of fields wins, except that a semicolon or tab splitting every line of the comma's winning
//! block evenly beats the comma, whose extra fields are then decimal commas); a decimal comma is
//! accepted when the delimiter is a semicolon or a tab, since that is how exports from locales
//! with a decimal comma look. Spreadsheets: cells formatted as a time or duration become
//! [`Cell::Duration`] in seconds (calamine's day fraction times 86 400), never a wall-clock date.

use std::io::Cursor;

use calamine::{Data, Reader};

use super::input::InputFile;
use crate::core::cells::{Cell, CellGrid, Source};

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
    /// The CSV reader failed on a line (for example an unclosed quote).
    #[error("{file}, row {row}: {message}")]
    BadText {
        /// The file as the user named it.
        file: String,
        /// One-based line.
        row: usize,
        /// The CSV reader's reason.
        message: String,
    },
}

/// Reads an input's bytes into cells: a spreadsheet's sheet `sheet` (without it, the first sheet
/// holding any data), or a text file (`sheet` is then ignored).
pub fn read_input_cells(input: &InputFile, sheet: Option<&str>) -> Result<CellGrid, SheetReadError> {
    if input.is_spreadsheet() {
        read_spreadsheet_cells(&input.bytes, &input.name, sheet)
    } else {
        read_text_cells(&input.bytes, &input.name)
    }
}

/// Reads a delimited text file's bytes into cells (see the module documentation for the rules).
pub fn read_text_cells(bytes: &[u8], file: &str) -> Result<CellGrid, SheetReadError> {
    let text = match std::str::from_utf8(bytes) {
        Ok(text) => text,
        Err(error) => {
            let row = bytes[..error.valid_up_to()]
                .iter()
                .filter(|&&b| b == b'\n')
                .count()
                + 1;
            return Err(SheetReadError::NotUtf8 {
                file: file.to_string(),
                row,
            });
        }
    };
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let delimiter = sniff_delimiter(text);
    let decimal_comma = delimiter != b',';
    let mut reader = csv::ReaderBuilder::new()
        .delimiter(delimiter)
        .has_headers(false)
        .flexible(true)
        .from_reader(text.as_bytes());
    let mut rows: Vec<Vec<Cell>> = Vec::new();
    for record in reader.records() {
        let record = record.map_err(|error| SheetReadError::BadText {
            file: file.to_string(),
            row: error
                .position()
                .map_or(rows.len() + 1, |p| first_line_of_record(text, p)),
            message: error.to_string(),
        })?;
        // The csv crate skips empty lines; keep the line numbering true to the file by padding
        // with blank rows up to the record's own line.
        let line = record
            .position()
            .map_or(rows.len() + 1, |p| first_line_of_record(text, p));
        while rows.len() + 1 < line {
            rows.push(Vec::new());
        }
        let mut cells: Vec<Cell> = record
            .iter()
            .map(|field| text_cell(field, decimal_comma))
            .collect();
        // A line that is one empty field (what the csv crate returns for a line holding only
        // spaces) is blank.
        if cells.iter().all(Cell::is_empty) {
            cells.clear();
        }
        rows.push(cells);
    }
    Ok(CellGrid {
        source: Source {
            file: file.to_string(),
            sheet: None,
        },
        rows,
    })
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
    let field_count = |line: &str, delimiter: u8| line.bytes().filter(|&b| b == delimiter).count() + 1;
    let mut best = (b',', 0usize, 0usize);
    for delimiter in [b'\t', b';', b','] {
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

/// Types one text field: empty, a number (with a decimal comma where allowed), or text.
pub fn text_cell(field: &str, decimal_comma: bool) -> Cell {
    let trimmed = field.trim();
    if trimmed.is_empty() {
        return Cell::Empty;
    }
    match parse_number(trimmed, decimal_comma) {
        Some(value) => Cell::Number(value),
        None => Cell::Text(trimmed.to_string()),
    }
}

/// Parses a plain decimal number. Words such as `inf` or `NaN` are not numbers here: an
/// instrument that writes them means "no reading".
pub fn parse_number(text: &str, decimal_comma: bool) -> Option<f64> {
    let looks_numeric = text
        .bytes()
        .all(|b| b.is_ascii_digit() || matches!(b, b'.' | b',' | b'-' | b'+' | b'e' | b'E'))
        && text.bytes().any(|b| b.is_ascii_digit());
    if !looks_numeric {
        return None;
    }
    if decimal_comma && text.contains(',') {
        if text.contains('.') || text.matches(',').count() > 1 {
            return None;
        }
        return text
            .replace(',', ".")
            .parse()
            .ok()
            .filter(|v: &f64| v.is_finite());
    }
    text.parse().ok().filter(|v: &f64| v.is_finite())
}

/// Reads one sheet of a spreadsheet's bytes into cells.
pub fn read_spreadsheet_cells(
    bytes: &[u8],
    file: &str,
    sheet: Option<&str>,
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
        let range = workbook
            .worksheet_range(&name)
            .map_err(|error| bad(error.to_string()))?;
        if range.is_empty() && sheet.is_none() {
            continue;
        }
        // calamine's range starts at the first used cell; pad so that rows and columns keep
        // the numbers the spreadsheet shows.
        let (first_row, first_column) = range.start().unwrap_or((0, 0));
        let mut rows: Vec<Vec<Cell>> = (0..first_row).map(|_| Vec::new()).collect();
        for data_row in range.rows() {
            let mut cells: Vec<Cell> = (0..first_column).map(|_| Cell::Empty).collect();
            cells.extend(data_row.iter().map(spreadsheet_cell));
            while cells.last().is_some_and(Cell::is_empty) {
                cells.pop();
            }
            rows.push(cells);
        }
        if rows.iter().all(|row| row.is_empty()) && sheet.is_none() {
            continue;
        }
        return Ok(CellGrid {
            source: Source {
                file: file.to_string(),
                sheet: Some(name),
            },
            rows,
        });
    }
    Err(SheetReadError::NoData {
        file: file.to_string(),
    })
}

/// Types one spreadsheet cell.
fn spreadsheet_cell(data: &Data) -> Cell {
    const SECONDS_PER_DAY: f64 = 86_400.0;
    match data {
        Data::Empty => Cell::Empty,
        Data::Int(value) => Cell::Number(*value as f64),
        Data::Float(value) if value.is_finite() => Cell::Number(*value),
        Data::Float(_) => Cell::Text("non-finite number".to_string()),
        Data::String(text) => text_cell(text, true),
        Data::Bool(value) => Cell::Text(value.to_string()),
        // Only the fraction of a day is elapsed time for a time-of-day cell; a duration keeps
        // its whole value ([h]:mm:ss can exceed a day).
        Data::DateTime(datetime) => {
            let days = datetime.as_f64();
            let days = if datetime.is_duration() {
                days
            } else {
                days.fract() + days.trunc().min(0.0)
            };
            Cell::Duration(days * SECONDS_PER_DAY)
        }
        Data::DateTimeIso(text) | Data::DurationIso(text) => Cell::Text(text.clone()),
        Data::Error(error) => Cell::Text(format!("#{error:?}")),
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
            comma.rows[1],
            vec![Cell::Number(0.0), Cell::Number(0.1), Cell::Number(0.2)]
        );
        let semicolon = grid("Time [s];A1;A2\n0;0,1;0,2\n");
        assert_eq!(
            semicolon.rows[1],
            vec![Cell::Number(0.0), Cell::Number(0.1), Cell::Number(0.2)]
        );
        let tab = grid("Time [s]\tA1\n0\t0,125\n");
        assert_eq!(tab.rows[1], vec![Cell::Number(0.0), Cell::Number(0.125)]);
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
            assert_eq!(cells.rows[0].len(), 3, "delimiter {delimiter:?}");
            assert_eq!(
                cells.rows[1],
                vec![Cell::Number(0.5), Cell::Number(0.1), Cell::Number(0.25)]
            );
        }
        // A comma file with a stray semicolon in a metadata line stays comma-delimited.
        let cells = grid("Note; shaken\nTime [s],A1,A2\n0,0.1,0.2\n30,0.15,0.25\n");
        assert_eq!(
            cells.rows[3],
            vec![Cell::Number(30.0), Cell::Number(0.15), Cell::Number(0.25)]
        );
    }

    #[test]
    fn byte_order_mark_and_crlf_are_fine() {
        let cells = grid("\u{feff}Time [s],A1\r\n0,0.1\r\n");
        assert_eq!(cells.rows[0][0], Cell::Text("Time [s]".into()));
        assert_eq!(cells.rows[1][1], Cell::Number(0.1));
    }

    #[test]
    fn blank_lines_keep_line_numbers() {
        let cells = grid("Run,x\n\nTime [s],A1\n0,0.1\n");
        assert_eq!(cells.rows.len(), 4);
        assert!(cells.row_is_blank(1));
        assert_eq!(cells.rows[2][0], Cell::Text("Time [s]".into()));
    }

    #[test]
    fn blank_lines_keep_line_numbers_with_crlf_and_several_blanks() {
        let cells = grid("a,b\r\n\r\n\r\nc,d\r\n\ne,f\n");
        assert_eq!(cells.rows.len(), 6);
        assert_eq!(cells.rows[3][0], Cell::Text("c".into()));
        assert!(cells.row_is_blank(4));
        assert_eq!(cells.rows[5][0], Cell::Text("e".into()));
    }

    #[test]
    fn markers_stay_text_never_zero() {
        let cells = grid("A1,A2,A3\nOVER,,-0.5\n");
        assert_eq!(
            cells.rows[1],
            vec![Cell::Text("OVER".into()), Cell::Empty, Cell::Number(-0.5)]
        );
        assert_eq!(parse_number("NaN", false), None);
        assert_eq!(parse_number("inf", false), None);
        assert_eq!(parse_number("1,5", false), None);
        assert_eq!(parse_number("1,5", true), Some(1.5));
        assert_eq!(parse_number("1.5e-3", false), Some(1.5e-3));
    }

    #[test]
    fn invalid_utf8_names_the_line() {
        let error = read_text_cells(b"a,b\n1,\xff\n", "x.csv").unwrap_err();
        assert!(error.to_string().contains("x.csv, row 2"), "{error}");
    }
}
