//! The one definition of a data row, shared by the wide and long shapes (the grid shape applies
//! the same rule to its blocks): each row below a header is sorted into a [`RowKind`] by its
//! shape, and [`settle_rows`] decides, the same way for every shape, which rows are read, which
//! are passed over with a word, and which stop the import with their position.

use super::time::is_label_text;
use super::{ImportError, RowContext};
use crate::core::cells::{Cell, CellGrid, Position};

/// What one row below a header is.
#[derive(Debug)]
pub(super) enum RowKind {
    /// Nothing in it (or only delimiters).
    Blank,
    /// A read: a valid time (and well, in the long shape).
    Data,
    /// The header again (a repeated header, as exports that page their tables write).
    RepeatedHeader,
    /// A read at another wavelength than the one analysed (a long table's `wavelength` column).
    OtherWavelength,
    /// No read.
    NotData {
        /// Where the row fails (its time or well cell).
        position: Position,
        /// Why it is no read.
        reason: String,
        /// Whether it holds something a read would (a number, a time, a well-like cell, a
        /// marker such as `NaN` where the time belongs): below the last read such a row is
        /// refused, not taken for a summary line.
        looks_like_read: bool,
    },
}

/// A blank row, or the header repeated, if zero-based `row` is one.
pub(super) fn blank_or_repeated_header(grid: &CellGrid, row: usize, header_row: usize) -> Option<RowKind> {
    if grid.row_is_blank(row) {
        return Some(RowKind::Blank);
    }
    (grid.row_len(row) == grid.row_len(header_row) && grid.row(row).eq(grid.row(header_row)))
        .then_some(RowKind::RepeatedHeader)
}

/// Whether the time cell of a row that is no read still looks like a read's: anything but a label
/// (`Mean`), or an empty cell in a row that holds a reading (`holds_reading`).
pub(super) fn time_cell_looks_like_read(time_cell: Cell, holds_reading: bool) -> bool {
    match time_cell {
        Cell::Text(text) => !is_label_text(text),
        Cell::Empty => holds_reading,
        Cell::Number(_) | Cell::Duration(_) => true,
    }
}

/// The rows to read, and what was said about the others.
#[derive(Debug, Default)]
pub(super) struct SettledRows {
    /// Zero-based rows that are reads, in file order.
    pub data_rows: Vec<usize>,
    /// Warnings naming the rows passed over.
    pub warnings: Vec<String>,
    /// Zero-based rows passed over (and named in the warnings).
    pub passed_over: Vec<usize>,
}

/// Applies the rule of the module documentation to the rows after a header, in file order:
/// reads are kept wherever they stand; blank rows and repeated headers between reads are passed
/// over and named; any other row between reads is refused; below the last read, rows that look
/// like reads are refused and the rest are summary lines, named and not read.
pub(super) fn settle_rows(grid: &CellGrid, rows: Vec<(usize, RowKind)>) -> Result<SettledRows, ImportError> {
    let last_data = rows.iter().rposition(|(_, kind)| matches!(kind, RowKind::Data));
    let last_read_row = last_data.map_or(0, |index| rows[index].0 + 1);
    let mut settled = SettledRows::default();
    let mut blank_between: Vec<usize> = Vec::new();
    let mut repeated_headers: Vec<usize> = Vec::new();
    let mut summary: Vec<usize> = Vec::new();
    let mut other_wavelengths: Vec<usize> = Vec::new();
    for (index, (row, kind)) in rows.into_iter().enumerate() {
        let between = last_data.is_some_and(|last| index < last);
        match kind {
            RowKind::Data => settled.data_rows.push(row),
            RowKind::OtherWavelength => other_wavelengths.push(row),
            RowKind::Blank => {
                if between {
                    blank_between.push(row);
                }
            }
            RowKind::RepeatedHeader => {
                if between || last_data.is_none() {
                    repeated_headers.push(row);
                } else {
                    summary.push(row);
                }
            }
            RowKind::NotData {
                position,
                reason,
                looks_like_read,
            } => {
                if between {
                    return Err(ImportError::NotARead {
                        position: Box::new(position),
                        reason,
                        context: RowContext::BetweenReads { last_read_row },
                    });
                }
                if looks_like_read {
                    let context = match last_data {
                        Some(_) => RowContext::BelowReads { last_read_row },
                        None => RowContext::NoReads,
                    };
                    return Err(ImportError::NotARead {
                        position: Box::new(position),
                        reason,
                        context,
                    });
                }
                summary.push(row);
            }
        }
    }
    settled.passed_over = blank_between
        .iter()
        .chain(&repeated_headers)
        .chain(&summary)
        .chain(&other_wavelengths)
        .copied()
        .collect();
    settled.passed_over.sort_unstable();
    if !blank_between.is_empty() {
        settled.warnings.push(format!(
            "{}: blank row(s) {} among the reads passed over; the reads below them are read",
            grid.source,
            row_list(&blank_between)
        ));
    }
    if !other_wavelengths.is_empty() {
        settled.warnings.push(format!(
            "{}: {} row(s) at other wavelengths set aside (the wavelength column chooses the reads)",
            grid.source,
            other_wavelengths.len()
        ));
    }
    if !repeated_headers.is_empty() {
        settled.warnings.push(format!(
            "{}: row(s) {} repeat the header and are passed over",
            grid.source,
            row_list(&repeated_headers)
        ));
    }
    if let (Some(first), Some(last)) = (summary.first(), summary.last()) {
        settled.warnings.push(format!(
            "{}: the reads end at row {}; {} non-blank row(s) below them (rows {}-{}) are summary lines and not read",
            grid.source,
            last_read_row,
            summary.len(),
            first + 1,
            last + 1
        ));
    }
    Ok(settled)
}

/// One-based rows for a message: `7, 12, 30` (at most ten, then a count).
fn row_list(rows: &[usize]) -> String {
    let shown: Vec<String> = rows.iter().take(10).map(|row| (row + 1).to_string()).collect();
    if rows.len() > 10 {
        format!("{} and {} more", shown.join(", "), rows.len() - 10)
    } else {
        shown.join(", ")
    }
}
