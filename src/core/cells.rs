//! A file read into a grid of typed cells with positions, whatever it was (CSV/TSV/TXT or a
//! spreadsheet sheet), so that the data and layout parsers see one shape and every error they
//! raise can name the file, sheet, row and column.
//!
//! The grid is stored compactly (16 bytes a cell, the texts in one buffer), since a 1536-well
//! export of 2000 reads holds three million cells; parsers see each cell as a borrowed [`Cell`].

use std::fmt;

/// One cell as read, borrowed from its grid.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Cell<'a> {
    /// Nothing in the cell (or only spaces).
    Empty,
    /// A number (text cells that hold a number in the file's decimal mark become numbers).
    Number(f64),
    /// An elapsed time in seconds: a spreadsheet cell formatted as a time or duration.
    Duration(f64),
    /// Any other text, trimmed.
    Text(&'a str),
}

impl Cell<'_> {
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
            Cell::Text(text) => (*text).to_string(),
        }
    }

    /// Whether the cell is empty.
    pub fn is_empty(&self) -> bool {
        matches!(self, Cell::Empty)
    }
}

/// The decimal mark of a file's numbers, decided once per file from the numbers it holds (see
/// `files::sheet`). Text that holds a number written with the other mark, or a number whose mark
/// cannot be told (`1,000` in a file with no other decimals), stays text: it is named where a
/// number is needed, never guessed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum DecimalMark {
    /// `0.5`.
    #[default]
    Point,
    /// `0,5`.
    Comma,
    /// The file holds no number with a fraction that tells the mark: only whole numbers are read.
    Unknown,
}

impl DecimalMark {
    /// The mark's character, if known.
    pub fn character(self) -> Option<char> {
        match self {
            DecimalMark::Point => Some('.'),
            DecimalMark::Comma => Some(','),
            DecimalMark::Unknown => None,
        }
    }

    /// Words for messages: "'.'", "','" or "not known (no number in the file has a fraction)".
    pub fn describe(self) -> String {
        match self.character() {
            Some(mark) => format!("'{mark}'"),
            None => "not known (no number in the file shows one)".to_string(),
        }
    }
}

/// Where a grid came from: the file, and the sheet for spreadsheets.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
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

/// A cell as the grid stores it: 16 bytes, its text (if any) a span of the grid's text buffer.
#[derive(Debug, Clone, Copy, PartialEq)]
enum StoredCell {
    Empty,
    Number(f64),
    Duration(f64),
    Text { start: u32, length: u32 },
}

/// A whole file or sheet as rows of cells. Zero-based row `i` is one-based row `i + 1` of the
/// source. Rows keep their own length (a row cut short stays short, so parsers can name it).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct CellGrid {
    /// Where the cells came from.
    pub source: Source,
    /// The decimal mark the file's text numbers were read with.
    pub decimal_mark: DecimalMark,
    /// Every row's cells, one row after another.
    cells: Vec<StoredCell>,
    /// The end of each row in `cells` (its start is the previous row's end).
    row_ends: Vec<usize>,
    /// The texts of every text cell.
    texts: String,
}

impl CellGrid {
    /// An empty grid for cells from `source`.
    pub fn new(source: Source, decimal_mark: DecimalMark) -> CellGrid {
        CellGrid {
            source,
            decimal_mark,
            ..CellGrid::default()
        }
    }

    /// A grid from rows given whole (tests, and readers that hold their rows).
    pub fn from_rows(source: Source, decimal_mark: DecimalMark, rows: &[Vec<Cell<'_>>]) -> CellGrid {
        let mut grid = CellGrid::new(source, decimal_mark);
        for row in rows {
            grid.push_row(row.iter().copied());
        }
        grid
    }

    /// Makes room for `cells` more cells in `rows` more rows at once: a grid grown by doubling
    /// holds up to twice its cells, and both the old and the new buffer while it grows (on a
    /// 1536-well export of 2000 reads, 67 MB where 49 MB is needed, and 100 MB for a moment).
    pub fn reserve(&mut self, cells: usize, rows: usize) {
        self.cells.reserve_exact(cells);
        self.row_ends.reserve_exact(rows);
    }

    /// Appends a row.
    pub fn push_row<'a>(&mut self, cells: impl IntoIterator<Item = Cell<'a>>) {
        for cell in cells {
            let stored = match cell {
                Cell::Empty => StoredCell::Empty,
                Cell::Number(value) => StoredCell::Number(value),
                Cell::Duration(value) => StoredCell::Duration(value),
                Cell::Text(text) => {
                    // Inputs are at most 256 MiB (`files::input`), so the offsets fit; a text past
                    // 4 GiB would read back empty rather than wrong.
                    let start = u32::try_from(self.texts.len()).unwrap_or(u32::MAX);
                    let length = u32::try_from(text.len()).unwrap_or(0);
                    self.texts.push_str(text);
                    StoredCell::Text { start, length }
                }
            };
            self.cells.push(stored);
        }
        self.row_ends.push(self.cells.len());
    }

    /// Appends `count` rows with no cells.
    pub fn push_blank_rows(&mut self, count: usize) {
        let end = self.cells.len();
        self.row_ends.extend(std::iter::repeat_n(end, count));
    }

    /// The number of rows.
    pub fn n_rows(&self) -> usize {
        self.row_ends.len()
    }

    /// The number of cells of every row together.
    pub fn n_cells(&self) -> usize {
        self.cells.len()
    }

    /// The stored cells of zero-based `row` (none beyond the last row).
    fn stored_row(&self, row: usize) -> &[StoredCell] {
        let Some(&end) = self.row_ends.get(row) else {
            return &[];
        };
        let start = if row == 0 { 0 } else { self.row_ends[row - 1] };
        &self.cells[start..end]
    }

    /// A stored cell as a [`Cell`].
    fn view(&self, stored: StoredCell) -> Cell<'_> {
        match stored {
            StoredCell::Empty => Cell::Empty,
            StoredCell::Number(value) => Cell::Number(value),
            StoredCell::Duration(value) => Cell::Duration(value),
            StoredCell::Text { start, length } => {
                let start = start as usize;
                Cell::Text(self.texts.get(start..start + length as usize).unwrap_or(""))
            }
        }
    }

    /// The number of cells zero-based `row` holds as read (empty cells included).
    pub fn row_len(&self, row: usize) -> usize {
        self.stored_row(row).len()
    }

    /// The cells of zero-based `row`, in order.
    pub fn row(&self, row: usize) -> impl ExactSizeIterator<Item = Cell<'_>> + '_ {
        self.stored_row(row).iter().map(|stored| self.view(*stored))
    }

    /// The cells of zero-based `row`, collected.
    pub fn row_cells(&self, row: usize) -> Vec<Cell<'_>> {
        self.row(row).collect()
    }

    /// The cell at zero-based `row`, `column`; `Empty` beyond a row's end.
    pub fn cell(&self, row: usize, column: usize) -> Cell<'_> {
        self.stored_row(row)
            .get(column)
            .map_or(Cell::Empty, |stored| self.view(*stored))
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
        self.stored_row(row)
            .iter()
            .all(|stored| matches!(stored, StoredCell::Empty))
    }

    /// The number of cells in zero-based `row` up to its last non-empty one.
    pub fn row_width(&self, row: usize) -> usize {
        self.stored_row(row)
            .iter()
            .rposition(|stored| !matches!(stored, StoredCell::Empty))
            .map_or(0, |last| last + 1)
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

    #[test]
    fn a_grid_gives_back_its_rows_and_cells() {
        let rows = vec![
            vec![Cell::Text("Time [s]"), Cell::Text("A1")],
            vec![],
            vec![Cell::Number(0.0), Cell::Empty, Cell::Duration(90.0)],
        ];
        let grid = CellGrid::from_rows(Source::default(), DecimalMark::Point, &rows);
        assert_eq!(grid.n_rows(), 3);
        assert_eq!(grid.row_cells(0), rows[0]);
        assert!(grid.row_is_blank(1));
        assert_eq!(grid.row_len(2), 3);
        assert_eq!(grid.row_width(2), 3);
        assert_eq!(grid.cell(2, 2), Cell::Duration(90.0));
        assert_eq!(grid.cell(2, 9), Cell::Empty);
        assert_eq!(grid.cell(7, 0), Cell::Empty);
        assert_eq!(grid.cell(0, 1), Cell::Text("A1"));
    }

    #[test]
    fn a_stored_cell_takes_sixteen_bytes() {
        // The memory ceiling of a large export rests on this (module docs).
        assert_eq!(std::mem::size_of::<StoredCell>(), 16);
    }
}
