//! Exports with reads at two or more wavelengths (or a second channel): finds where each
//! wavelength's reads stand, picks the one to analyse (`--wavelength NM`) and, with
//! `--reference-wavelength NM`, subtracts the reference read from it per read and well (the
//! dual-wavelength correction for turbidity and well-to-well optics).
//!
//! Three ways of labelling are recognised, in every shape (CSV, TSV or a spreadsheet sheet):
//! - sections: a label line (`Wavelength: 405 nm`, `Wavelength [nm]` followed by `405`, or `405 nm`
//!   alone in its line) above each wavelength's table or plate blocks; a section runs to the next
//!   label line. Wide, grid and stacked long tables are written this way.
//! - columns: the well columns of a wide header carry their wavelength (`A1 405 nm`, `A1 (405)`,
//!   `A1 [405 nm]`, `A1@405`).
//! - a `wavelength` column in a long table (`wavelength`, `wavelength [nm]`, `λ`).
//!
//! The chosen wavelength's cells are handed to the shape readers in place: sections and columns of
//! other wavelengths are blanked in a copy of the grid (every cell keeps its row and column, so
//! errors name the file's own positions), and the long reader sets aside the rows of other
//! wavelengths itself. Nothing is guessed: an export with several wavelengths and no
//! `--wavelength` is refused listing them, and so is a wavelength it does not hold.

use crate::config::MAX_WAVELENGTH_NM;
use crate::core::cells::{Cell, CellGrid, Source};
use crate::core::plate::WellId;
use crate::core::units::split_header_unit;

/// Wavelengths closer than this (nm) are the same: exports write 405 and 405.0.
pub(super) const SAME_WAVELENGTH_NM: f64 = 0.5;

/// Where each wavelength's reads stand in an export.
#[derive(Debug, Clone, PartialEq)]
pub(super) enum Channels {
    /// Label lines, each starting a section: (zero-based row of the label, wavelength).
    Sections(Vec<(usize, f64)>),
    /// Well columns of a wide header carrying their wavelength: the header row and, for each such
    /// column, (column, its well's text, wavelength).
    Columns {
        header_row: usize,
        columns: Vec<(usize, String, f64)>,
    },
    /// A long table's wavelength column: the header row and the column.
    LongColumn { header_row: usize, column: usize },
}

/// The wavelength of a label text: `405 nm`, `405nm`, `405`, `Wavelength: 405 nm`,
/// `λ = 405 nm`; `with_nm` asks that the unit be written (a bare number is no label line).
fn wavelength_of_text(text: &str, needs_unit: bool) -> Option<f64> {
    let lower = text.trim().to_lowercase();
    let rest = ["wavelength", "lambda", "\u{3bb}"]
        .iter()
        .find_map(|prefix| lower.strip_prefix(prefix))
        .map(|rest| rest.trim_start_matches([':', '=', ' ']).trim());
    let (number, had_prefix) = match rest {
        Some(rest) => (rest, true),
        None => (lower.as_str(), false),
    };
    let (number, has_unit) = match number.strip_suffix("nm") {
        Some(number) => (number.trim(), true),
        None => (number, false),
    };
    if needs_unit && !has_unit && !had_prefix {
        return None;
    }
    let value: f64 = number.parse().ok()?;
    (value.is_finite() && value > 0.0 && value <= MAX_WAVELENGTH_NM).then_some(value)
}

/// The wavelength a label line gives, if zero-based `row` is one: at most two filled cells, the
/// first a label (`Wavelength: 405 nm`, `405 nm`) or `Wavelength [nm]` with the number beside it.
fn label_line(grid: &CellGrid, row: usize) -> Option<f64> {
    let filled: Vec<Cell> = grid.row(row).filter(|cell| !cell.is_empty()).collect();
    match filled.as_slice() {
        [Cell::Text(text)] => wavelength_of_text(text, true),
        [Cell::Text(text), second] => {
            let (name, unit) = split_header_unit(text);
            let names_wavelength = ["wavelength", "lambda", "\u{3bb}"]
                .contains(&name.trim().trim_end_matches(':').to_lowercase().as_str());
            if !names_wavelength || unit.is_some_and(|unit| unit != "nm") {
                return None;
            }
            match second {
                Cell::Number(value) => wavelength_of_text(&value.to_string(), false),
                Cell::Text(text) => wavelength_of_text(text, false),
                _ => None,
            }
        }
        _ => None,
    }
}

/// A wide header cell naming a well and a wavelength: `A1 405 nm`, `A1 (405)`, `A1@405`.
fn well_with_wavelength(text: &str) -> Option<(String, f64)> {
    let text = text.trim();
    let split = text.find([' ', '(', '[', '@', '_'])?;
    let (well, rest) = text.split_at(split);
    WellId::parse(well)?;
    let rest = rest
        .trim_start_matches(['@', '_', ' '])
        .trim()
        .trim_start_matches(['(', '['])
        .trim_end_matches([')', ']'])
        .trim();
    Some((well.to_string(), wavelength_of_text(rest, false)?))
}

/// Whether a header names a long table's wavelength column.
pub(super) fn is_wavelength_header(cell: &Cell) -> bool {
    let Cell::Text(text) = cell else {
        return false;
    };
    let (name, unit) = split_header_unit(text);
    ["wavelength", "lambda", "\u{3bb}"].contains(&name.to_lowercase().as_str())
        && unit.is_none_or(|unit| unit == "nm")
}

/// A long table's header row with a wavelength column, if the export has one: (row, column).
fn long_wavelength_column(grid: &CellGrid) -> Option<(usize, usize)> {
    (0..grid.n_rows()).find_map(|row| {
        let cells = grid.row_cells(row);
        if !super::long::is_header(&cells, true) {
            return None;
        }
        cells
            .iter()
            .position(is_wavelength_header)
            .map(|column| (row, column))
    })
}

/// Finds how the export labels its wavelengths; `None` when it does not.
pub(super) fn find_channels(grid: &CellGrid) -> Option<Channels> {
    if let Some((header_row, column)) = long_wavelength_column(grid) {
        return Some(Channels::LongColumn { header_row, column });
    }
    for row in 0..grid.n_rows() {
        let columns: Vec<(usize, String, f64)> = grid
            .row(row)
            .enumerate()
            .filter_map(|(column, cell)| match cell {
                Cell::Text(text) => well_with_wavelength(text).map(|(well, nm)| (column, well, nm)),
                _ => None,
            })
            .collect();
        if columns.len() >= 2 {
            return Some(Channels::Columns {
                header_row: row,
                columns,
            });
        }
    }
    let sections: Vec<(usize, f64)> = (0..grid.n_rows())
        .filter_map(|row| label_line(grid, row).map(|nm| (row, nm)))
        .collect();
    (!sections.is_empty()).then_some(Channels::Sections(sections))
}

/// Adds `nm`, first seen at `row`, to `list` unless it is there already.
fn push_distinct(list: &mut Vec<(f64, usize)>, nm: f64, row: usize) {
    if !list
        .iter()
        .any(|(known, _)| (known - nm).abs() < SAME_WAVELENGTH_NM)
    {
        list.push((nm, row));
    }
}

impl Channels {
    /// The wavelengths present, in the order they first appear, each with the zero-based row
    /// where it is first labelled (so that a refusal can point at the rows).
    pub(super) fn wavelengths(&self, grid: &CellGrid) -> Vec<(f64, usize)> {
        let mut list = Vec::new();
        match self {
            Channels::Sections(sections) => sections
                .iter()
                .for_each(|(row, nm)| push_distinct(&mut list, *nm, *row)),
            Channels::Columns { header_row, columns } => columns
                .iter()
                .for_each(|(_, _, nm)| push_distinct(&mut list, *nm, *header_row)),
            Channels::LongColumn { header_row, column } => {
                for row in header_row + 1..grid.n_rows() {
                    if let Some(nm) = long_row_wavelength(grid, row, *column) {
                        push_distinct(&mut list, nm, row);
                    }
                }
            }
        }
        list
    }

    /// The export with only `nm`'s reads left for the shape readers (a long table is filtered by
    /// its reader, see [`long_row_wavelength`]).
    pub(super) fn select(&self, grid: &CellGrid, nm: f64) -> CellGrid {
        let same = |other: f64| (other - nm).abs() < SAME_WAVELENGTH_NM;
        match self {
            Channels::LongColumn { .. } => grid.clone(),
            Channels::Sections(sections) => {
                let first_label = sections.first().map_or(0, |(row, _)| *row);
                let kept = |row: usize| {
                    // Lines above the first label (a title, the instrument) are kept; a label line
                    // itself is none of the reads.
                    if row < first_label {
                        return true;
                    }
                    let section = sections.iter().rev().find(|(label, _)| *label <= row);
                    section.is_some_and(|(label, section_nm)| *label != row && same(*section_nm))
                };
                rebuilt(grid, |row, column| {
                    let _ = column;
                    kept(row)
                })
            }
            Channels::Columns { header_row, columns } => {
                let other: std::collections::BTreeSet<usize> = columns
                    .iter()
                    .filter(|(_, _, column_nm)| !same(*column_nm))
                    .map(|(column, _, _)| *column)
                    .collect();
                let mut copy = CellGrid::new(grid.source.clone(), grid.decimal_mark);
                for row in 0..grid.n_rows() {
                    let cells: Vec<Cell> = grid
                        .row(row)
                        .enumerate()
                        .map(|(column, cell)| {
                            if row < *header_row {
                                return cell;
                            }
                            if other.contains(&column) {
                                return Cell::Empty;
                            }
                            // The chosen columns are headed by their well alone.
                            match (row == *header_row, columns.iter().find(|(c, _, _)| *c == column)) {
                                (true, Some((_, well, _))) => Cell::Text(well.as_str()),
                                _ => cell,
                            }
                        })
                        .collect();
                    copy.push_row(cells);
                }
                copy
            }
        }
    }
}

/// A copy of `grid` keeping the cells `keep(row, column)` says, the others emptied.
fn rebuilt(grid: &CellGrid, keep: impl Fn(usize, usize) -> bool) -> CellGrid {
    let mut copy = CellGrid::new(grid.source.clone(), grid.decimal_mark);
    for row in 0..grid.n_rows() {
        let cells: Vec<Cell> = grid
            .row(row)
            .enumerate()
            .map(|(column, cell)| if keep(row, column) { cell } else { Cell::Empty })
            .collect();
        copy.push_row(cells);
    }
    copy
}

/// The wavelength a long table's row gives in `column`, if it holds one.
pub(super) fn long_row_wavelength(grid: &CellGrid, row: usize, column: usize) -> Option<f64> {
    match grid.cell(row, column) {
        Cell::Number(value) => wavelength_of_text(&value.to_string(), false),
        Cell::Text(text) => wavelength_of_text(text, false),
        _ => None,
    }
}

/// Wavelengths for messages, with the one-based row where each is first labelled:
/// `405 nm (row 3) and 600 nm (row 56)`.
pub(super) fn wavelength_list(wavelengths: &[(f64, usize)]) -> String {
    let names: Vec<String> = wavelengths
        .iter()
        .map(|(nm, row)| format!("{nm} nm (row {})", row + 1))
        .collect();
    match names.as_slice() {
        [] => "none".to_string(),
        [only] => only.clone(),
        [rest @ .., last] => format!("{} and {last}", rest.join(", ")),
    }
}

/// Which wavelength to read, from what the export holds and what was asked; the error's words.
pub(super) fn choose(
    present: &[(f64, usize)],
    asked: Option<f64>,
    origin: &Source,
    flag: &str,
) -> Result<f64, String> {
    let listed = wavelength_list(present);
    match (asked, present) {
        (None, [(only, _)]) => Ok(*only),
        (None, _) => Err(format!(
            "{origin}: the export holds reads at {listed}; choose the one to analyse with --wavelength NM"
        )),
        (Some(nm), _) => present
            .iter()
            .map(|(known, _)| *known)
            .find(|known| (known - nm).abs() < SAME_WAVELENGTH_NM)
            .ok_or_else(|| {
                format!("{origin}: {flag} {nm} is not in the export, which holds reads at {listed}")
            }),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_and_headers_give_their_wavelength() {
        assert_eq!(wavelength_of_text("Wavelength: 405 nm", true), Some(405.0));
        assert_eq!(wavelength_of_text("405nm", true), Some(405.0));
        assert_eq!(wavelength_of_text("\u{3bb} = 600 nm", true), Some(600.0));
        assert_eq!(wavelength_of_text("405", true), None);
        assert_eq!(wavelength_of_text("Mean", true), None);
        assert_eq!(wavelength_of_text("5000 nm", true), None);
        assert_eq!(well_with_wavelength("A1 405 nm"), Some(("A1".into(), 405.0)));
        assert_eq!(well_with_wavelength("B12 (600)"), Some(("B12".into(), 600.0)));
        assert_eq!(well_with_wavelength("H3@405"), Some(("H3".into(), 405.0)));
        assert_eq!(well_with_wavelength("A1"), None);
        assert_eq!(well_with_wavelength("Time (s)"), None);
        assert!(is_wavelength_header(&Cell::Text("Wavelength [nm]")));
        assert!(!is_wavelength_header(&Cell::Text("value")));
    }

    #[test]
    fn a_wavelength_is_chosen_or_the_choice_is_refused_listing_those_present() {
        let origin = Source {
            file: "two.csv".into(),
            sheet: None,
        };
        let two = [(405.0, 2), (600.0, 55)];
        assert_eq!(choose(&[(405.0, 2)], None, &origin, "--wavelength"), Ok(405.0));
        assert_eq!(choose(&two, Some(600.2), &origin, "--wavelength"), Ok(600.0));
        // A refusal names the file and the rows where each wavelength is labelled (fuzzing found
        // it named no position).
        let ambiguous = choose(&two, None, &origin, "--wavelength").unwrap_err();
        assert!(
            ambiguous.contains("405 nm (row 3) and 600 nm (row 56)") && ambiguous.contains("two.csv"),
            "{ambiguous}"
        );
        let absent = choose(&two, Some(450.0), &origin, "--wavelength").unwrap_err();
        assert!(
            absent.contains("450") && absent.contains("405 nm (row 3) and 600 nm (row 56)"),
            "{absent}"
        );
    }
}
