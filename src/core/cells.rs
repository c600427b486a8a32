//! A file read into a grid of typed cells with positions, whatever it was (CSV/TSV/TXT or a
//! spreadsheet sheet), so that the data and layout parsers see one shape and every error they
//! raise can name the file, sheet, row and column.

use std::fmt;

/// One cell as read.
#[derive(Debug, Clone, PartialEq)]
pub enum Cell {
    /// Nothing in the cell (or only spaces).
    Empty,
    /// A number (text cells that parse as numbers become numbers; a decimal comma is accepted
    /// where the reader allowed it).
    Number(f64),
    /// An elapsed time in seconds: a spreadsheet cell formatted as a time or duration.
    Duration(f64),
    /// Any other text, trimmed.
    Text(String),
}

impl Cell {
    /// The number in the cell, if it holds one.
    pub fn as_number(&self) -> Option<f64> {
        match self {
            Cell::Number(value) => Some(*value),
            _ => None,
        }
    }

    /// The cell's text: text as is, numbers formatted, empty as "".
    pub fn as_text(&self) -> String {
        match self {
            Cell::Empty => String::new(),
            Cell::Number(value) | Cell::Duration(value) => format!("{value}"),
            Cell::Text(text) => text.clone(),
        }
    }

    /// Whether the cell is empty.
    pub fn is_empty(&self) -> bool {
        matches!(self, Cell::Empty)
    }
}

/// Where a grid came from: the file, and the sheet for spreadsheets.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Source {
    /// The file name as the user gave it.
    pub file: String,
    /// The sheet, for spreadsheets.
    pub sheet: Option<String>,
}

impl fmt::Display for Source {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match &self.sheet {
            Some(sheet) => write!(f, "{}, sheet '{}'", self.file, sheet),
            None => write!(f, "{}", self.file),
        }
    }
}

/// A position in a source, one-based as a spreadsheet shows it. `column` is optional for errors
/// about a whole line.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Position {
    /// The file and sheet.
    pub source: Source,
    /// One-based line (text) or row (spreadsheet).
    pub row: usize,
    /// One-based column, if the problem is in one cell.
    pub column: Option<usize>,
}

impl fmt::Display for Position {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}, row {}", self.source, self.row)?;
        if let Some(column) = self.column {
            write!(f, ", column {} ({})", column, column_letters(column))?;
        }
        Ok(())
    }
}

/// Spreadsheet letters for a one-based column: 1 -> A, 27 -> AA.
pub fn column_letters(column: usize) -> String {
    let mut letters = Vec::new();
    let mut remaining = column;
    while remaining > 0 {
        let digit = (remaining - 1) % 26;
        letters.push(b'A' + digit as u8);
        remaining = (remaining - 1) / 26;
    }
    letters.reverse();
    String::from_utf8(letters).unwrap_or_default()
}

/// A whole file or sheet as rows of cells. Row `i` of `rows` is one-based row `i + 1` of the
/// source. Rows keep their own length (a row cut short stays short, so parsers can name it).
#[derive(Debug, Clone, PartialEq)]
pub struct CellGrid {
    /// Where the cells came from.
    pub source: Source,
    /// The rows as read.
    pub rows: Vec<Vec<Cell>>,
}

impl CellGrid {
    /// The cell at zero-based `row`, `column`; `Empty` beyond a row's end.
    pub fn cell(&self, row: usize, column: usize) -> &Cell {
        static EMPTY: Cell = Cell::Empty;
        self.rows
            .get(row)
            .and_then(|cells| cells.get(column))
            .unwrap_or(&EMPTY)
    }

    /// The one-based position of zero-based `row`, `column`.
    pub fn position(&self, row: usize, column: Option<usize>) -> Position {
        Position {
            source: self.source.clone(),
            row: row + 1,
            column: column.map(|c| c + 1),
        }
    }

    /// Whether zero-based `row` holds nothing but empty cells.
    pub fn row_is_blank(&self, row: usize) -> bool {
        self.rows
            .get(row)
            .is_none_or(|cells| cells.iter().all(Cell::is_empty))
    }

    /// The number of cells in zero-based `row` up to its last non-empty one.
    pub fn row_width(&self, row: usize) -> usize {
        self.rows
            .get(row)
            .map(|cells| {
                cells
                    .iter()
                    .rposition(|cell| !cell.is_empty())
                    .map_or(0, |last| last + 1)
            })
            .unwrap_or(0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn column_letters_follow_spreadsheets() {
        assert_eq!(column_letters(1), "A");
        assert_eq!(column_letters(26), "Z");
        assert_eq!(column_letters(27), "AA");
        assert_eq!(column_letters(52), "AZ");
        assert_eq!(column_letters(703), "AAA");
    }

    #[test]
    fn position_names_file_sheet_row_and_column() {
        let position = Position {
            source: Source {
                file: "plate.xlsx".into(),
                sheet: Some("Kinetics".into()),
            },
            row: 12,
            column: Some(3),
        };
        assert_eq!(
            position.to_string(),
            "plate.xlsx, sheet 'Kinetics', row 12, column 3 (C)"
        );
    }
}
