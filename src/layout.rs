//! The plate layout (`--layout LAYOUT`): what each well holds (its role, the substrate, enzyme and
//! inhibitor concentrations, and free factors such as enzyme variant or buffer), read from a CSV
//! file or a spreadsheet sheet in either of two forms.
//!
//! Tidy form: a header row holding a `well` column (the first such row; title and `#` comment
//! lines may stand above it), then one line per well, rectangle (`B1:D12`) or space-separated list
//! of wells (`B1 B3 B5`). A `role` column says `sample`, `blank` (buffer only), `no-enzyme`
//! (substrate without enzyme: the background rate) or `empty` (ignored); without it, or where its
//! cell is empty, a well is a sample. `substrate [uM]`, `enzyme [nM]` and `inhibitor [uM]` hold
//! concentrations in the unit written in brackets. Every other column is a free factor kept as text.
//!
//! Grid form: blocks shaped like the plate. Each block is a line naming the variable in its first
//! cell (`role`, `substrate [uM]`, a factor name), a row of column numbers 1, 2, 3, ... (first
//! cell empty), and one row per plate row whose first cell is the row letter. An empty cell gives
//! that well no value for that variable; a well is in the layout once any block gives it a value.
//!
//! Concentrations are kept in the unit of their header (the caller converts): a guessed unit would
//! scale every fitted constant, so a concentration header without a unit is refused.

use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::fmt;
use std::path::Path;
use std::str::FromStr;

use crate::cells::{Cell, CellGrid, Position, Source};
use crate::plate::{parse_row_letters, parse_well_selection, row_label, PlateFormat, WellId};
use crate::sheet_reader::{read_cells, SheetReadError};
use crate::units::{split_header_unit, ConcentrationUnit};

/// The known roles, as listed in error messages.
pub const KNOWN_ROLES: &str = "sample, blank, no-enzyme, empty";

/// The known concentration units, as listed in error messages.
pub const KNOWN_CONCENTRATION_UNITS: &str = "M, mM, uM (or \u{b5}M), nM, pM";

/// At most this many wells are spelled out in one message; the rest are counted.
const WELLS_SPELLED_OUT: usize = 48;

/// What a well is for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Role {
    /// Substrate and enzyme: a rate to measure.
    Sample,
    /// Buffer only: the optical background.
    Blank,
    /// Substrate without enzyme: the non-enzymatic background rate.
    NoEnzyme,
    /// Not used; ignored by the analysis.
    Empty,
}

impl Role {
    /// Every role, in the order they are listed to users.
    pub const ALL: [Role; 4] = [Role::Sample, Role::Blank, Role::NoEnzyme, Role::Empty];

    /// The spelling used in output and messages.
    pub fn name(self) -> &'static str {
        match self {
            Role::Sample => "sample",
            Role::Blank => "blank",
            Role::NoEnzyme => "no-enzyme",
            Role::Empty => "empty",
        }
    }
}

impl fmt::Display for Role {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for Role {
    type Err = String;

    /// Case-insensitive; `no-enzyme` may also be written `no enzyme`, `no_enzyme` or `noenzyme`.
    fn from_str(text: &str) -> Result<Self, Self::Err> {
        // Spaces, underscores and hyphens all separate words the same way in hand-typed sheets.
        let normalized: String = text
            .trim()
            .to_lowercase()
            .split(|c: char| c.is_whitespace() || c == '_' || c == '-')
            .filter(|word| !word.is_empty())
            .collect::<Vec<_>>()
            .join("-");
        match normalized.as_str() {
            "sample" => Ok(Role::Sample),
            "blank" => Ok(Role::Blank),
            "no-enzyme" | "noenzyme" => Ok(Role::NoEnzyme),
            "empty" => Ok(Role::Empty),
            _ => Err(format!(
                "unknown role '{}' (known roles: {KNOWN_ROLES})",
                text.trim()
            )),
        }
    }
}

/// The three concentrations a layout may give a well.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Quantity {
    /// Substrate concentration.
    Substrate,
    /// Enzyme concentration.
    Enzyme,
    /// Inhibitor concentration.
    Inhibitor,
}

impl Quantity {
    /// Every quantity, in the order they are stored.
    pub const ALL: [Quantity; 3] = [Quantity::Substrate, Quantity::Enzyme, Quantity::Inhibitor];

    /// The header name (lower case).
    pub fn name(self) -> &'static str {
        match self {
            Quantity::Substrate => "substrate",
            Quantity::Enzyme => "enzyme",
            Quantity::Inhibitor => "inhibitor",
        }
    }

    /// A header with a typical unit, shown when a unit is missing.
    pub fn example_header(self) -> &'static str {
        match self {
            Quantity::Substrate => "substrate [uM]",
            Quantity::Enzyme => "enzyme [nM]",
            Quantity::Inhibitor => "inhibitor [uM]",
        }
    }

    /// The quantity a lower-case header name stands for.
    fn from_name(lower_case_name: &str) -> Option<Quantity> {
        Quantity::ALL
            .into_iter()
            .find(|quantity| quantity.name() == lower_case_name)
    }

    /// Index into per-quantity arrays.
    fn index(self) -> usize {
        match self {
            Quantity::Substrate => 0,
            Quantity::Enzyme => 1,
            Quantity::Inhibitor => 2,
        }
    }
}

impl fmt::Display for Quantity {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Which of the two layout forms a file was written in.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum LayoutForm {
    /// One line per well, rectangle or list of wells, under a header with a `well` column.
    Tidy,
    /// Plate-shaped blocks, one per variable.
    Grid,
}

impl fmt::Display for LayoutForm {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            LayoutForm::Tidy => "tidy",
            LayoutForm::Grid => "grid",
        })
    }
}

/// What the layout says about one well.
#[derive(Debug, Clone, PartialEq)]
pub struct WellSetup {
    /// What the well is for.
    pub role: Role,
    /// Substrate concentration in [`Layout::substrate_unit`].
    pub substrate: Option<f64>,
    /// Enzyme concentration in [`Layout::enzyme_unit`].
    pub enzyme: Option<f64>,
    /// Inhibitor concentration in [`Layout::inhibitor_unit`].
    pub inhibitor: Option<f64>,
    /// Every factor of the layout (see [`Layout::factor_names`]) with this well's value, "" when
    /// the well was given none.
    pub factors: BTreeMap<String, String>,
    /// Where the well was set: the first cell naming it.
    pub position: Position,
}

impl WellSetup {
    /// The well's concentration of `quantity`, in the layout's unit for it.
    pub fn quantity(&self, quantity: Quantity) -> Option<f64> {
        match quantity {
            Quantity::Substrate => self.substrate,
            Quantity::Enzyme => self.enzyme,
            Quantity::Inhibitor => self.inhibitor,
        }
    }

    fn quantity_mut(&mut self, quantity: Quantity) -> &mut Option<f64> {
        match quantity {
            Quantity::Substrate => &mut self.substrate,
            Quantity::Enzyme => &mut self.enzyme,
            Quantity::Inhibitor => &mut self.inhibitor,
        }
    }
}

/// A parsed plate layout.
#[derive(Debug, Clone, PartialEq)]
pub struct Layout {
    /// The file and sheet it was read from.
    pub source: Source,
    /// The form it was written in.
    pub form: LayoutForm,
    /// Every well the layout names, including `empty` ones.
    pub wells: BTreeMap<WellId, WellSetup>,
    /// The unit of every substrate value, if the layout gives any substrate column or block.
    pub substrate_unit: Option<ConcentrationUnit>,
    /// The unit of every enzyme value, if the layout gives any enzyme column or block.
    pub enzyme_unit: Option<ConcentrationUnit>,
    /// The unit of every inhibitor value, if the layout gives any inhibitor column or block.
    pub inhibitor_unit: Option<ConcentrationUnit>,
    /// The free factors, in the order they first appear.
    pub factor_names: Vec<String>,
}

impl Layout {
    /// The wells holding `role`, in well order.
    pub fn wells_with_role(&self, role: Role) -> impl Iterator<Item = (&WellId, &WellSetup)> {
        self.wells.iter().filter(move |(_, setup)| setup.role == role)
    }

    /// The unit the layout uses for `quantity`, if it gives that quantity at all.
    pub fn unit(&self, quantity: Quantity) -> Option<ConcentrationUnit> {
        match quantity {
            Quantity::Substrate => self.substrate_unit,
            Quantity::Enzyme => self.enzyme_unit,
            Quantity::Inhibitor => self.inhibitor_unit,
        }
    }
}

/// Why a layout could not be read or does not fit the data. Every input error names the file,
/// sheet, row and column and, where one is concerned, the well.
#[derive(Debug, thiserror::Error)]
pub enum LayoutError {
    /// The file could not be read into cells.
    #[error(transparent)]
    Read(#[from] SheetReadError),

    /// Neither a tidy header nor a grid block was found.
    #[error(
        "{input}: no plate layout found: expected either a header row with a 'well' column (tidy form) \
         or a line naming a variable followed by a row of column numbers 1, 2, 3, ... whose first cell \
         is empty (grid form)"
    )]
    NoLayoutFound {
        /// The file and sheet.
        input: Source,
    },

    /// No well other than `empty` ones.
    #[error("{input}: the layout ({form} form) names no wells other than empty ones")]
    EmptyLayout {
        /// The file and sheet.
        input: Source,
        /// The form that was recognised.
        form: LayoutForm,
    },

    /// A well beyond the plate's rows or columns.
    #[error("{position}: well {well} is off the {plate}-well plate (rows A to {last_row}, columns 1 to {last_column})")]
    WellOffPlate {
        /// The well as named (row letters and column number).
        well: String,
        /// The plate format in use.
        plate: PlateFormat,
        /// The plate's last row letters.
        last_row: String,
        /// The plate's last column number.
        last_column: u16,
        /// The cell naming it.
        position: Box<Position>,
    },

    /// A well cell that is not a well, rectangle or list.
    #[error(
        "{position}: '{text}' is not a well (B3), a rectangle (B1:D12) or a space-separated list of wells \
         (B1 B3 B5): {reason}"
    )]
    BadWell {
        /// The cell's text.
        text: String,
        /// What is wrong with it.
        reason: String,
        /// The cell.
        position: Box<Position>,
    },

    /// A tidy line with values but an empty well cell.
    #[error("{position}: this line has values but its 'well' cell is empty")]
    MissingWell {
        /// The empty well cell.
        position: Box<Position>,
    },

    /// The same well set twice with different values.
    #[error("well {well} is given twice with different values ({difference}): first at {first}, again at {second}")]
    ConflictingWell {
        /// The well.
        well: WellId,
        /// The values that differ, first vs second.
        difference: String,
        /// Where it was first set.
        first: Box<Position>,
        /// Where it was set again.
        second: Box<Position>,
    },

    /// A role cell holding something else than a known role.
    #[error("{position}: unknown role '{text}' for well {wells} (known roles: {KNOWN_ROLES})")]
    UnknownRole {
        /// The cell's text.
        text: String,
        /// The well or wells the cell is for.
        wells: String,
        /// The cell.
        position: Box<Position>,
    },

    /// A concentration header whose unit is not a concentration unit.
    #[error("{position}: unknown concentration unit '{unit}' in '{header}' (known units: {KNOWN_CONCENTRATION_UNITS})")]
    UnknownUnit {
        /// The unit as written.
        unit: String,
        /// The whole header.
        header: String,
        /// The header cell.
        position: Box<Position>,
    },

    /// A concentration header without a unit.
    #[error(
        "{position}: '{header}' has no unit; write it in brackets, e.g. '{example}' \
         (known units: {KNOWN_CONCENTRATION_UNITS}); a guessed unit would scale every constant"
    )]
    MissingUnit {
        /// The header as written.
        header: String,
        /// A header with a unit, to copy.
        example: &'static str,
        /// The header cell.
        position: Box<Position>,
    },

    /// One quantity given in two units.
    #[error(
        "{quantity} is given in {first_unit} at {first} but in {second_unit} at {second}; \
         use one unit for each quantity throughout the layout"
    )]
    UnitMismatch {
        /// The quantity.
        quantity: Quantity,
        /// The unit first used.
        first_unit: ConcentrationUnit,
        /// Where it was first used.
        first: Box<Position>,
        /// The other unit.
        second_unit: ConcentrationUnit,
        /// Where the other unit was used.
        second: Box<Position>,
    },

    /// Text (or a time) where a concentration belongs.
    #[error("{position}: '{text}' under '{header}' (well {wells}) is not a number; a concentration is a number >= 0 in the header's unit")]
    NotAConcentration {
        /// The cell as read.
        text: String,
        /// The variable's header.
        header: String,
        /// The well or wells the cell is for.
        wells: String,
        /// The cell.
        position: Box<Position>,
    },

    /// A negative concentration.
    #[error("{position}: {value} under '{header}' (well {wells}) is negative; a concentration is >= 0")]
    NegativeConcentration {
        /// The value.
        value: f64,
        /// The variable's header.
        header: String,
        /// The well or wells the cell is for.
        wells: String,
        /// The cell.
        position: Box<Position>,
    },

    /// A sample or no-enzyme control without a substrate concentration.
    #[error(
        "{position}: well {well} is a {role} well but has no substrate concentration{also}; \
         give it one in a substrate column or block (e.g. 'substrate [uM]')"
    )]
    MissingSubstrate {
        /// The first such well.
        well: WellId,
        /// Its role (sample or no-enzyme).
        role: Role,
        /// Where it was set.
        position: Box<Position>,
        /// The other wells with the same problem, as " (likewise: ...)", or "".
        also: String,
    },

    /// Two tidy columns with the same name.
    #[error("{first} and {second}: two columns are both named '{header}'")]
    DuplicateColumn {
        /// The header.
        header: String,
        /// The first column's header cell.
        first: Box<Position>,
        /// The second column's header cell.
        second: Box<Position>,
    },

    /// A value in a column without a header (tidy) or without a column number (grid).
    #[error("{position}: this cell holds '{text}' but its column has no {missing}; name the column or clear the cell")]
    ValueWithoutHeader {
        /// The cell as read.
        text: String,
        /// "header" or "column number".
        missing: &'static str,
        /// The cell.
        position: Box<Position>,
    },

    /// A row of column numbers without a name line above it.
    #[error(
        "{position}: a row of column numbers must follow a line naming the variable in its first cell \
         (e.g. 'role' or 'substrate [uM]')"
    )]
    MissingBlockName {
        /// The cell where the name was expected.
        position: Box<Position>,
    },

    /// A plate-row line that belongs to no block.
    #[error(
        "{position}: the plate row '{letters}' lies outside a grid block; a block is a name line, \
         a row of column numbers 1, 2, 3, ... (first cell empty) and one line per plate row"
    )]
    RowOutsideBlock {
        /// The row letters.
        letters: String,
        /// The line's first cell.
        position: Box<Position>,
    },

    /// A line after the first grid block that is neither in a block nor a comment.
    #[error(
        "{position}: '{text}' is neither a plate row (A, B, ...) of a grid block nor a new block; \
         start notes with '#' and separate blocks with blank lines"
    )]
    StrayLine {
        /// The line's first filled cell.
        text: String,
        /// That cell.
        position: Box<Position>,
    },

    /// Layout wells that the data do not hold.
    #[error(
        "{input}: {count} well(s) of the layout are not in the data: {wells} (the first set at {first}); \
         remove them from the layout or allow missing wells"
    )]
    MissingFromData {
        /// The layout's file and sheet.
        input: Source,
        /// How many.
        count: usize,
        /// The wells.
        wells: String,
        /// Where the earliest of them was set.
        first: Box<Position>,
    },
}

/// Reads a layout from a CSV/TSV/TXT file or a spreadsheet sheet (the first sheet holding data
/// when `sheet` is `None`).
pub fn read_layout(path: &Path, sheet: Option<&str>, plate: PlateFormat) -> Result<Layout, LayoutError> {
    let grid = read_cells(path, sheet)?;
    parse_layout(&grid, plate)
}

/// Parses a layout from cells, recognising its form: tidy if the first telling line is a header
/// holding `well`, grid if it is a row of column numbers 1, 2, 3, ...
pub fn parse_layout(grid: &CellGrid, plate: PlateFormat) -> Result<Layout, LayoutError> {
    match detect_form(grid) {
        Some((LayoutForm::Tidy, header_row)) => parse_tidy(grid, header_row, plate),
        Some((LayoutForm::Grid, _)) => parse_grid(grid, plate),
        None => Err(LayoutError::NoLayoutFound {
            input: grid.source.clone(),
        }),
    }
}

/// Checks the layout against the wells present in the data. Layout wells other than `empty` ones
/// that the data lack are an error naming them; with `allow_missing` they are dropped from the
/// layout instead and a warning saying so is returned (the library never prints).
pub fn check_against_data(
    layout: &mut Layout,
    wells_in_data: &BTreeSet<WellId>,
    allow_missing: bool,
) -> Result<Vec<String>, LayoutError> {
    let missing: Vec<(WellId, &Position)> = layout
        .wells
        .iter()
        .filter(|(well, setup)| setup.role != Role::Empty && !wells_in_data.contains(well))
        .map(|(well, setup)| (*well, &setup.position))
        .collect();
    let Some(first) = missing
        .iter()
        .map(|(_, position)| *position)
        .min_by_key(|p| (p.row, p.column))
    else {
        return Ok(Vec::new());
    };
    let first = first.clone();
    let missing_wells: Vec<WellId> = missing.iter().map(|(well, _)| *well).collect();
    let wells = spell_out_wells(&missing_wells);
    if !allow_missing {
        return Err(LayoutError::MissingFromData {
            input: layout.source.clone(),
            count: missing_wells.len(),
            wells,
            first: Box::new(first),
        });
    }
    for well in &missing_wells {
        layout.wells.remove(well);
    }
    if layout.wells.values().all(|setup| setup.role == Role::Empty) {
        return Err(LayoutError::EmptyLayout {
            input: layout.source.clone(),
            form: layout.form,
        });
    }
    Ok(vec![format!(
        "{}: {} well(s) of the layout are not in the data and were left out: {} (the first set at {})",
        layout.source,
        missing_wells.len(),
        wells,
        first
    )])
}

// ---------------------------------------------------------------------------------------------
// Shared line tests
// ---------------------------------------------------------------------------------------------

/// A line whose first filled cell is text starting with `#`.
fn is_comment_line(grid: &CellGrid, row: usize) -> bool {
    grid.rows
        .get(row)
        .and_then(|cells| cells.iter().find(|cell| !cell.is_empty()))
        .is_some_and(|cell| matches!(cell, Cell::Text(text) if text.starts_with('#')))
}

/// A line that carries nothing for the layout: blank or a comment.
fn is_skippable(grid: &CellGrid, row: usize) -> bool {
    grid.row_is_blank(row) || is_comment_line(grid, row)
}

/// Whether a header cell's name (without unit) is `well`, ignoring case and spaces.
fn is_well_header(cell: &Cell) -> bool {
    matches!(cell, Cell::Text(text) if split_header_unit(text).0.eq_ignore_ascii_case("well"))
}

/// The number of columns a grid's column-number row numbers: first cell empty, then exactly
/// 1, 2, 3, ... up to the line's last filled cell.
fn numbered_columns(grid: &CellGrid, row: usize) -> Option<usize> {
    if row >= grid.rows.len() || !grid.cell(row, 0).is_empty() {
        return None;
    }
    let width = grid.row_width(row);
    if width < 2 {
        return None;
    }
    (1..width)
        .all(|index| grid.cell(row, index).as_number() == Some(index as f64))
        .then_some(width - 1)
}

/// The first line that tells the form: a header holding `well` (tidy) or a row of column numbers
/// (grid). Comment lines never count, even if a cell of theirs reads `well`.
fn detect_form(grid: &CellGrid) -> Option<(LayoutForm, usize)> {
    (0..grid.rows.len())
        .filter(|&row| !is_skippable(grid, row))
        .find_map(|row| {
            let cells = &grid.rows[row];
            if cells.iter().any(is_well_header) {
                Some((LayoutForm::Tidy, row))
            } else if numbered_columns(grid, row).is_some() {
                Some((LayoutForm::Grid, row))
            } else {
                None
            }
        })
}

// ---------------------------------------------------------------------------------------------
// Cell values
// ---------------------------------------------------------------------------------------------

/// A cell's content for messages; time-formatted cells say so, since their number is seconds.
fn describe_cell(cell: &Cell) -> String {
    match cell {
        Cell::Duration(seconds) => format!("{seconds} s (a time-formatted cell)"),
        other => other.as_text(),
    }
}

/// Reads a concentration cell: empty is no value; a number must be >= 0.
fn read_concentration(
    cell: &Cell,
    header: &str,
    wells: &str,
    position: impl Fn() -> Position,
) -> Result<Option<f64>, LayoutError> {
    match cell {
        Cell::Empty => Ok(None),
        // `+ 0.0` turns a written "-0" into 0, so that equal setups compare equal.
        Cell::Number(value) if value.is_finite() && *value >= 0.0 => Ok(Some(*value + 0.0)),
        Cell::Number(value) if *value < 0.0 => Err(LayoutError::NegativeConcentration {
            value: *value,
            header: header.to_string(),
            wells: wells.to_string(),
            position: Box::new(position()),
        }),
        other => Err(LayoutError::NotAConcentration {
            text: describe_cell(other),
            header: header.to_string(),
            wells: wells.to_string(),
            position: Box::new(position()),
        }),
    }
}

/// Reads a filled role cell.
fn read_role(cell: &Cell, wells: &str, position: impl Fn() -> Position) -> Result<Role, LayoutError> {
    let text = describe_cell(cell);
    Role::from_str(&text).map_err(|_| LayoutError::UnknownRole {
        text,
        wells: wells.to_string(),
        position: Box::new(position()),
    })
}

/// Reads the unit of a concentration header.
fn header_unit(
    quantity: Quantity,
    header: &str,
    unit: Option<&str>,
    position: &Position,
) -> Result<ConcentrationUnit, LayoutError> {
    match unit {
        None | Some("") => Err(LayoutError::MissingUnit {
            header: header.to_string(),
            example: quantity.example_header(),
            position: Box::new(position.clone()),
        }),
        Some(unit) => ConcentrationUnit::from_str(unit).map_err(|_| LayoutError::UnknownUnit {
            unit: unit.to_string(),
            header: header.to_string(),
            position: Box::new(position.clone()),
        }),
    }
}

/// Records the unit of a quantity, refusing a second, different one.
fn note_unit(
    units: &mut [Option<(ConcentrationUnit, Position)>; 3],
    quantity: Quantity,
    unit: ConcentrationUnit,
    position: &Position,
) -> Result<(), LayoutError> {
    match &units[quantity.index()] {
        Some((first_unit, first)) if *first_unit != unit => Err(LayoutError::UnitMismatch {
            quantity,
            first_unit: *first_unit,
            first: Box::new(first.clone()),
            second_unit: unit,
            second: Box::new(position.clone()),
        }),
        Some(_) => Ok(()),
        None => {
            units[quantity.index()] = Some((unit, position.clone()));
            Ok(())
        }
    }
}

/// A concentration for messages.
fn show_amount(value: Option<f64>) -> String {
    value.map_or_else(|| "none".to_string(), |value| value.to_string())
}

/// How two setups of one well differ, as "role sample vs blank; substrate 10 vs 20"; "" if alike.
fn differences(first: &WellSetup, second: &WellSetup) -> String {
    let mut parts = Vec::new();
    if first.role != second.role {
        parts.push(format!("role {} vs {}", first.role, second.role));
    }
    for quantity in Quantity::ALL {
        let (a, b) = (first.quantity(quantity), second.quantity(quantity));
        if a != b {
            parts.push(format!("{quantity} {} vs {}", show_amount(a), show_amount(b)));
        }
    }
    let names: BTreeSet<&String> = first.factors.keys().chain(second.factors.keys()).collect();
    for name in names {
        let a = first.factors.get(name).map_or("", String::as_str);
        let b = second.factors.get(name).map_or("", String::as_str);
        if a != b {
            parts.push(format!("{name} '{a}' vs '{b}'"));
        }
    }
    parts.join("; ")
}

/// Wells for a message: all of them up to a limit, then a count of the rest.
fn spell_out_wells(wells: &[WellId]) -> String {
    let mut text = wells
        .iter()
        .take(WELLS_SPELLED_OUT)
        .map(WellId::to_string)
        .collect::<Vec<_>>()
        .join(", ");
    if wells.len() > WELLS_SPELLED_OUT {
        text.push_str(&format!(" and {} more", wells.len() - WELLS_SPELLED_OUT));
    }
    text
}

/// The error for a well beyond the plate.
fn off_plate(well: String, plate: PlateFormat, position: Position) -> LayoutError {
    LayoutError::WellOffPlate {
        well,
        plate,
        last_row: row_label(plate.n_rows() - 1),
        last_column: plate.n_columns(),
        position: Box::new(position),
    }
}

/// The checks both forms share once every well is known: at least one well that is not `empty`,
/// and a substrate concentration for every sample and no-enzyme control (without it their rate
/// cannot be placed on a Michaelis-Menten curve nor matched to its background).
fn finish_layout(layout: Layout) -> Result<Layout, LayoutError> {
    if layout.wells.values().all(|setup| setup.role == Role::Empty) {
        return Err(LayoutError::EmptyLayout {
            input: layout.source.clone(),
            form: layout.form,
        });
    }
    let mut lacking: Vec<(&WellId, &WellSetup)> = layout
        .wells
        .iter()
        .filter(|(_, setup)| matches!(setup.role, Role::Sample | Role::NoEnzyme) && setup.substrate.is_none())
        .collect();
    lacking.sort_by_key(|(well, setup)| (setup.position.row, setup.position.column, **well));
    if let Some((well, setup)) = lacking.first() {
        let others: Vec<WellId> = lacking[1..].iter().map(|(well, _)| **well).collect();
        let also = if others.is_empty() {
            String::new()
        } else {
            format!(" (likewise: {})", spell_out_wells(&others))
        };
        return Err(LayoutError::MissingSubstrate {
            well: **well,
            role: setup.role,
            position: Box::new(setup.position.clone()),
            also,
        });
    }
    Ok(layout)
}

// ---------------------------------------------------------------------------------------------
// Tidy form
// ---------------------------------------------------------------------------------------------

/// What a tidy column holds.
#[derive(Debug, Clone)]
enum TidyColumnKind {
    Well,
    Role,
    Quantity(Quantity, ConcentrationUnit),
    Factor(String),
}

/// One named column of a tidy layout.
#[derive(Debug, Clone)]
struct TidyColumn {
    index: usize,
    header: String,
    kind: TidyColumnKind,
}

/// Reads the header row of a tidy layout into its columns, refusing duplicates and bad units.
fn tidy_columns(grid: &CellGrid, header_row: usize) -> Result<Vec<TidyColumn>, LayoutError> {
    let mut columns: Vec<TidyColumn> = Vec::new();
    // Header names are matched ignoring case, so `Variant` and `variant` are one column twice.
    let mut column_by_key: HashMap<String, usize> = HashMap::new();
    let mut units: [Option<(ConcentrationUnit, Position)>; 3] = [None, None, None];
    for index in 0..grid.row_width(header_row) {
        let cell = grid.cell(header_row, index);
        if cell.is_empty() {
            continue;
        }
        let header = cell.as_text().trim().to_string();
        let position = grid.position(header_row, Some(index));
        let (name, unit) = split_header_unit(&header);
        let lower_name = name.to_lowercase();
        let (key, kind) = if lower_name == "well" {
            ("well".to_string(), TidyColumnKind::Well)
        } else if lower_name == "role" {
            ("role".to_string(), TidyColumnKind::Role)
        } else if let Some(quantity) = Quantity::from_name(&lower_name) {
            let unit = header_unit(quantity, &header, unit, &position)?;
            // Two columns of one quantity in two units: the unit clash is the telling message.
            note_unit(&mut units, quantity, unit, &position)?;
            (
                quantity.name().to_string(),
                TidyColumnKind::Quantity(quantity, unit),
            )
        } else {
            (header.to_lowercase(), TidyColumnKind::Factor(header.clone()))
        };
        if let Some(&first_index) = column_by_key.get(&key) {
            return Err(LayoutError::DuplicateColumn {
                header,
                first: Box::new(grid.position(header_row, Some(first_index))),
                second: Box::new(position),
            });
        }
        column_by_key.insert(key, index);
        columns.push(TidyColumn { index, header, kind });
    }
    Ok(columns)
}

/// Parses a tidy layout whose header is at zero-based `header_row`.
fn parse_tidy(grid: &CellGrid, header_row: usize, plate: PlateFormat) -> Result<Layout, LayoutError> {
    let columns = tidy_columns(grid, header_row)?;
    let Some(well_column) = columns
        .iter()
        .find(|column| matches!(column.kind, TidyColumnKind::Well))
    else {
        return Err(LayoutError::NoLayoutFound {
            input: grid.source.clone(),
        });
    };
    let well_index = well_column.index;
    let named: BTreeSet<usize> = columns.iter().map(|column| column.index).collect();
    let factor_names: Vec<String> = columns
        .iter()
        .filter_map(|column| match &column.kind {
            TidyColumnKind::Factor(name) => Some(name.clone()),
            _ => None,
        })
        .collect();
    let unit_of = |quantity: Quantity| {
        columns.iter().find_map(|column| match column.kind {
            TidyColumnKind::Quantity(q, unit) if q == quantity => Some(unit),
            _ => None,
        })
    };

    let mut wells: BTreeMap<WellId, WellSetup> = BTreeMap::new();
    for row in header_row + 1..grid.rows.len() {
        if is_skippable(grid, row) {
            continue;
        }
        // A value in an unnamed column would otherwise be dropped without a word.
        if let Some(index) = (0..grid.row_width(row))
            .find(|index| !named.contains(index) && !grid.cell(row, *index).is_empty())
        {
            return Err(LayoutError::ValueWithoutHeader {
                text: describe_cell(grid.cell(row, index)),
                missing: "header",
                position: Box::new(grid.position(row, Some(index))),
            });
        }
        let well_position = grid.position(row, Some(well_index));
        let well_text = match grid.cell(row, well_index) {
            Cell::Empty => {
                return Err(LayoutError::MissingWell {
                    position: Box::new(well_position),
                })
            }
            Cell::Text(text) => text.clone(),
            other => {
                return Err(LayoutError::BadWell {
                    text: describe_cell(other),
                    reason: "a number is not a well ID".to_string(),
                    position: Box::new(well_position),
                })
            }
        };
        let selected = parse_well_selection(&well_text).map_err(|reason| LayoutError::BadWell {
            text: well_text.clone(),
            reason,
            position: Box::new(well_position.clone()),
        })?;
        if let Some(well) = selected.iter().find(|well| !plate.contains(**well)) {
            return Err(off_plate(well.to_string(), plate, well_position));
        }

        let mut setup = WellSetup {
            role: Role::Sample,
            substrate: None,
            enzyme: None,
            inhibitor: None,
            factors: BTreeMap::new(),
            position: well_position,
        };
        for column in &columns {
            let cell = grid.cell(row, column.index);
            let position = || grid.position(row, Some(column.index));
            match &column.kind {
                TidyColumnKind::Well => {}
                TidyColumnKind::Role => {
                    if !cell.is_empty() {
                        setup.role = read_role(cell, &well_text, position)?;
                    }
                }
                TidyColumnKind::Quantity(quantity, _) => {
                    *setup.quantity_mut(*quantity) =
                        read_concentration(cell, &column.header, &well_text, position)?;
                }
                TidyColumnKind::Factor(name) => {
                    setup.factors.insert(name.clone(), cell.as_text());
                }
            }
        }

        // A tidy line states the whole setup of its wells, so a second line for a well must
        // state the same setup.
        for well in selected {
            match wells.get(&well) {
                Some(existing) => {
                    let difference = differences(existing, &setup);
                    if !difference.is_empty() {
                        return Err(LayoutError::ConflictingWell {
                            well,
                            difference,
                            first: Box::new(existing.position.clone()),
                            second: Box::new(setup.position.clone()),
                        });
                    }
                }
                None => {
                    wells.insert(well, setup.clone());
                }
            }
        }
    }

    finish_layout(Layout {
        source: grid.source.clone(),
        form: LayoutForm::Tidy,
        wells,
        substrate_unit: unit_of(Quantity::Substrate),
        enzyme_unit: unit_of(Quantity::Enzyme),
        inhibitor_unit: unit_of(Quantity::Inhibitor),
        factor_names,
    })
}

// ---------------------------------------------------------------------------------------------
// Grid form
// ---------------------------------------------------------------------------------------------

/// The variable a grid block sets.
#[derive(Debug, Clone)]
enum BlockVariable {
    Role,
    Quantity(Quantity),
    Factor(String),
}

/// A well's values as the grid blocks give them, each with the cell that gave it.
#[derive(Debug, Clone)]
struct WellDraft {
    role: Option<(Role, Position)>,
    quantities: [Option<(f64, Position)>; 3],
    factors: BTreeMap<String, (String, Position)>,
    first: Position,
}

/// Gathers the blocks of a grid layout.
#[derive(Debug, Default)]
struct GridBuilder {
    drafts: BTreeMap<WellId, WellDraft>,
    factor_names: Vec<String>,
    factor_name_by_key: HashMap<String, String>,
    units: [Option<(ConcentrationUnit, Position)>; 3],
}

impl GridBuilder {
    /// Reads a block's name line into its variable and header text.
    fn block_variable(
        &mut self,
        grid: &CellGrid,
        row: usize,
    ) -> Result<(BlockVariable, String), LayoutError> {
        let position = grid.position(row, Some(0));
        let header = grid.cell(row, 0).as_text().trim().to_string();
        if header.is_empty() {
            return Err(LayoutError::MissingBlockName {
                position: Box::new(position),
            });
        }
        let (name, unit) = split_header_unit(&header);
        let lower_name = name.to_lowercase();
        let variable = if lower_name == "role" {
            BlockVariable::Role
        } else if let Some(quantity) = Quantity::from_name(&lower_name) {
            let unit = header_unit(quantity, &header, unit, &position)?;
            note_unit(&mut self.units, quantity, unit, &position)?;
            BlockVariable::Quantity(quantity)
        } else {
            // Factor names match ignoring case; the first spelling is kept.
            let name = self
                .factor_name_by_key
                .entry(header.to_lowercase())
                .or_insert_with(|| {
                    self.factor_names.push(header.clone());
                    header.clone()
                })
                .clone();
            BlockVariable::Factor(name)
        };
        Ok((variable, header))
    }

    /// Gives `well` the value of `cell` for `variable`, refusing a different earlier value.
    fn set(
        &mut self,
        well: WellId,
        variable: &BlockVariable,
        header: &str,
        cell: &Cell,
        position: Position,
    ) -> Result<(), LayoutError> {
        let well_name = well.to_string();
        let draft = self.drafts.entry(well).or_insert_with(|| WellDraft {
            role: None,
            quantities: [None, None, None],
            factors: BTreeMap::new(),
            first: position.clone(),
        });
        let conflict =
            |difference: String, first: &Position, second: Position| LayoutError::ConflictingWell {
                well,
                difference,
                first: Box::new(first.clone()),
                second: Box::new(second),
            };
        match variable {
            BlockVariable::Role => {
                let role = read_role(cell, &well_name, || position.clone())?;
                match &draft.role {
                    Some((earlier, first)) if *earlier != role => {
                        return Err(conflict(format!("role {earlier} vs {role}"), first, position));
                    }
                    Some(_) => {}
                    None => draft.role = Some((role, position)),
                }
            }
            BlockVariable::Quantity(quantity) => {
                let Some(value) = read_concentration(cell, header, &well_name, || position.clone())? else {
                    return Ok(());
                };
                match &draft.quantities[quantity.index()] {
                    Some((earlier, first)) if *earlier != value => {
                        return Err(conflict(
                            format!("{quantity} {earlier} vs {value}"),
                            first,
                            position,
                        ));
                    }
                    Some(_) => {}
                    None => draft.quantities[quantity.index()] = Some((value, position)),
                }
            }
            BlockVariable::Factor(name) => {
                let value = cell.as_text();
                match draft.factors.get(name) {
                    Some((earlier, first)) if *earlier != value => {
                        return Err(conflict(
                            format!("{name} '{earlier}' vs '{value}'"),
                            first,
                            position,
                        ));
                    }
                    Some(_) => {}
                    None => {
                        draft.factors.insert(name.clone(), (value, position));
                    }
                }
            }
        }
        Ok(())
    }

    /// Turns the drafts into a layout: a well without a role is a sample.
    fn into_layout(self, source: Source) -> Layout {
        let factor_names = self.factor_names;
        let wells = self
            .drafts
            .into_iter()
            .map(|(well, draft)| {
                let amount =
                    |quantity: Quantity| draft.quantities[quantity.index()].as_ref().map(|(v, _)| *v);
                let factors = factor_names
                    .iter()
                    .map(|name| {
                        let value = draft
                            .factors
                            .get(name)
                            .map(|(value, _)| value.clone())
                            .unwrap_or_default();
                        (name.clone(), value)
                    })
                    .collect();
                let setup = WellSetup {
                    role: draft.role.as_ref().map_or(Role::Sample, |(role, _)| *role),
                    substrate: amount(Quantity::Substrate),
                    enzyme: amount(Quantity::Enzyme),
                    inhibitor: amount(Quantity::Inhibitor),
                    factors,
                    position: draft.first,
                };
                (well, setup)
            })
            .collect();
        let unit = |quantity: Quantity| self.units[quantity.index()].as_ref().map(|(unit, _)| *unit);
        Layout {
            source,
            form: LayoutForm::Grid,
            wells,
            substrate_unit: unit(Quantity::Substrate),
            enzyme_unit: unit(Quantity::Enzyme),
            inhibitor_unit: unit(Quantity::Inhibitor),
            factor_names,
        }
    }
}

/// The row letters of a line that looks like a plate row (`B` then values), if it does.
fn plate_row_line(grid: &CellGrid, row: usize) -> Option<(u16, String)> {
    match grid.cell(row, 0) {
        Cell::Text(text) => parse_row_letters(text).map(|plate_row| (plate_row, text.clone())),
        _ => None,
    }
}

/// Parses a grid layout.
fn parse_grid(grid: &CellGrid, plate: PlateFormat) -> Result<Layout, LayoutError> {
    let mut builder = GridBuilder::default();
    let mut seen_block = false;
    let mut row = 0;
    while row < grid.rows.len() {
        if is_skippable(grid, row) {
            row += 1;
            continue;
        }
        // A name line is consumed together with its column-number row below, so a column-number
        // row met here has no name above it.
        if numbered_columns(grid, row).is_some() {
            return Err(LayoutError::MissingBlockName {
                position: Box::new(grid.position(row.saturating_sub(1), Some(0))),
            });
        }
        if let Some(column_count) = numbered_columns(grid, row + 1) {
            let (variable, header) = builder.block_variable(grid, row)?;
            row = parse_block(
                grid,
                plate,
                &mut builder,
                &variable,
                &header,
                row + 2,
                column_count,
            )?;
            seen_block = true;
            continue;
        }
        if let Some((_, letters)) = plate_row_line(grid, row).filter(|_| grid.row_width(row) > 1) {
            return Err(LayoutError::RowOutsideBlock {
                letters,
                position: Box::new(grid.position(row, Some(0))),
            });
        }
        // Title lines may stand above the first block; after it, a line that fits nowhere is most
        // likely a block with a broken column-number row, which must not be skipped quietly.
        if seen_block {
            let index = (0..grid.row_width(row))
                .find(|index| !grid.cell(row, *index).is_empty())
                .unwrap_or(0);
            return Err(LayoutError::StrayLine {
                text: describe_cell(grid.cell(row, index)),
                position: Box::new(grid.position(row, Some(index))),
            });
        }
        row += 1;
    }
    finish_layout(builder.into_layout(grid.source.clone()))
}

/// Reads the plate rows of one block starting at zero-based `first_row`; returns the first row
/// after the block (a blank line, a line that is no plate row, or the next block's name line).
fn parse_block(
    grid: &CellGrid,
    plate: PlateFormat,
    builder: &mut GridBuilder,
    variable: &BlockVariable,
    header: &str,
    first_row: usize,
    column_count: usize,
) -> Result<usize, LayoutError> {
    let mut row = first_row;
    while row < grid.rows.len() && !grid.row_is_blank(row) {
        if is_comment_line(grid, row) {
            row += 1;
            continue;
        }
        if numbered_columns(grid, row + 1).is_some() {
            break;
        }
        let Some((plate_row, letters)) = plate_row_line(grid, row) else {
            break;
        };
        for index in 1..grid.row_width(row) {
            let cell = grid.cell(row, index);
            if cell.is_empty() {
                continue;
            }
            let position = grid.position(row, Some(index));
            if index > column_count {
                return Err(LayoutError::ValueWithoutHeader {
                    text: describe_cell(cell),
                    missing: "column number",
                    position: Box::new(position),
                });
            }
            // The column number equals the cell index, since the numbers run 1, 2, 3, ...
            let column = match u16::try_from(index) {
                Ok(column) if plate_row < plate.n_rows() && column <= plate.n_columns() => column,
                _ => {
                    return Err(off_plate(
                        format!("{}{index}", letters.to_uppercase()),
                        plate,
                        position,
                    ))
                }
            };
            builder.set(
                WellId::new(plate_row, column - 1),
                variable,
                header,
                cell,
                position,
            )?;
        }
        row += 1;
    }
    Ok(row)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sheet_reader::read_text_cells;
    use proptest::prelude::*;

    // Every layout below is invented for these tests (an invented esterase, "EstX", and its
    // variants); the expected values are read off the text written in each test.

    fn parse_csv(text: &str, plate: PlateFormat) -> Result<Layout, LayoutError> {
        let grid = read_text_cells(text.as_bytes(), "layout.csv").unwrap();
        parse_layout(&grid, plate)
    }

    fn well(text: &str) -> WellId {
        WellId::parse(text).unwrap()
    }

    fn error_text(text: &str, plate: PlateFormat) -> String {
        parse_csv(text, plate).unwrap_err().to_string()
    }

    fn assert_mentions(message: &str, parts: &[&str]) {
        for part in parts {
            assert!(message.contains(part), "expected '{part}' in: {message}");
        }
    }

    #[test]
    fn roles_parse_in_every_accepted_spelling() {
        for text in ["no-enzyme", "No Enzyme", "no_enzyme", "NOENZYME", " no  enzyme "] {
            assert_eq!(Role::from_str(text), Ok(Role::NoEnzyme), "{text}");
        }
        assert_eq!(Role::from_str("Sample"), Ok(Role::Sample));
        assert_eq!(Role::from_str("BLANK"), Ok(Role::Blank));
        assert_eq!(Role::from_str("empty"), Ok(Role::Empty));
        let error = Role::from_str("control").unwrap_err();
        assert_mentions(&error, &["'control'", "sample, blank, no-enzyme, empty"]);
        for role in Role::ALL {
            assert_eq!(Role::from_str(&role.to_string()), Ok(role));
        }
    }

    #[test]
    fn tidy_csv_with_single_wells_rectangles_lists_units_factors_and_comments() {
        let text = "\
EstX plate 7 layout (invented lab),,,,,
# substrate: invented p-nitrophenyl ester stock; comment lines are skipped,,,,,
Well,Role,Substrate [\u{b5}M],Enzyme [nM],Variant,pH
A1:A3,blank,,,,7.5
B1 B3 B5,sample,10,5,WT,7.5

C2,No Enzyme,20,,WT,7.5
D1:E2,,50,5,K12A,8
# a comment between lines
H12,empty,,,,
";
        let layout = parse_csv(text, PlateFormat::Wells96).unwrap();
        assert_eq!(layout.form, LayoutForm::Tidy);
        assert_eq!(layout.substrate_unit, Some(ConcentrationUnit::Micromolar));
        assert_eq!(layout.enzyme_unit, Some(ConcentrationUnit::Nanomolar));
        assert_eq!(layout.inhibitor_unit, None);
        assert_eq!(layout.factor_names, vec!["Variant".to_string(), "pH".to_string()]);
        // 3 blanks + 3 listed samples + 1 control + 4 in the rectangle + 1 empty
        assert_eq!(layout.wells.len(), 12);

        let blank = &layout.wells[&well("A2")];
        assert_eq!(
            (blank.role, blank.substrate, blank.enzyme),
            (Role::Blank, None, None)
        );
        assert_eq!(blank.factors["Variant"], "");
        assert_eq!(blank.factors["pH"], "7.5");

        let sample = &layout.wells[&well("B5")];
        assert_eq!(
            (sample.role, sample.substrate, sample.enzyme),
            (Role::Sample, Some(10.0), Some(5.0))
        );
        assert_eq!(sample.factors["Variant"], "WT");
        assert_eq!(sample.position.to_string(), "layout.csv, row 5, column 1 (A)");
        assert!(!layout.wells.contains_key(&well("B2")));

        let control = &layout.wells[&well("C2")];
        assert_eq!(
            (control.role, control.substrate, control.enzyme),
            (Role::NoEnzyme, Some(20.0), None)
        );
        assert_eq!(
            control.position.row, 7,
            "the blank line 6 must keep the line numbers true"
        );

        // An empty role cell means sample; a number in a factor column is kept as its text.
        let rectangle = &layout.wells[&well("E2")];
        assert_eq!((rectangle.role, rectangle.substrate), (Role::Sample, Some(50.0)));
        assert_eq!(rectangle.factors["pH"], "8");
        assert_eq!(rectangle.factors["Variant"], "K12A");

        assert_eq!(layout.wells[&well("H12")].role, Role::Empty);
        assert_eq!(layout.wells_with_role(Role::Sample).count(), 7);
        assert_eq!(
            layout
                .wells_with_role(Role::Blank)
                .map(|(w, _)| w.to_string())
                .collect::<Vec<_>>(),
            ["A1", "A2", "A3"]
        );
    }

    #[test]
    fn tidy_without_role_column_makes_every_well_a_sample_and_headers_ignore_case() {
        let text = "  WELL  ; SUBSTRATE (mM) ;inhibitor [pM]; buffer\nA1:B2;0,5;0;HEPES\nC1;1;100;Tris\n";
        let layout = parse_csv(text, PlateFormat::Wells96).unwrap();
        assert_eq!(layout.wells.len(), 5);
        assert!(layout.wells.values().all(|setup| setup.role == Role::Sample));
        assert_eq!(layout.substrate_unit, Some(ConcentrationUnit::Millimolar));
        assert_eq!(layout.inhibitor_unit, Some(ConcentrationUnit::Picomolar));
        assert_eq!(layout.wells[&well("B2")].substrate, Some(0.5));
        assert_eq!(layout.wells[&well("C1")].inhibitor, Some(100.0));
        assert_eq!(layout.factor_names, vec!["buffer".to_string()]);
        assert_eq!(layout.wells[&well("C1")].factors["buffer"], "Tris");
    }

    #[test]
    fn tidy_xlsx_is_read_with_sheet_and_numbers() {
        let directory = tempfile::tempdir().unwrap();
        let path = directory.path().join("layout.xlsx");
        let mut workbook = rust_xlsxwriter::Workbook::new();
        let sheet = workbook.add_worksheet();
        sheet.set_name("Layout").unwrap();
        sheet.write_string(0, 0, "EstX kinetics, invented plate").unwrap();
        for (column, header) in ["well", "role", "substrate [uM]", "enzyme [nM]", "temperature"]
            .iter()
            .enumerate()
        {
            sheet.write_string(2, column as u16, *header).unwrap();
        }
        sheet.write_string(3, 0, "A1:A4").unwrap();
        sheet.write_string(3, 1, "sample").unwrap();
        sheet.write_number(3, 2, 12.5).unwrap();
        sheet.write_number(3, 3, 2.0).unwrap();
        sheet.write_number(3, 4, 25.0).unwrap();
        sheet.write_string(4, 0, "H1 H2").unwrap();
        sheet.write_string(4, 1, "blank").unwrap();
        sheet.write_number(4, 4, 37.5).unwrap();
        workbook.save(&path).unwrap();

        let layout = read_layout(&path, Some("Layout"), PlateFormat::Wells96).unwrap();
        assert_eq!(layout.form, LayoutForm::Tidy);
        assert_eq!(layout.source.sheet.as_deref(), Some("Layout"));
        assert_eq!(layout.wells.len(), 6);
        let sample = &layout.wells[&well("A4")];
        assert_eq!((sample.substrate, sample.enzyme), (Some(12.5), Some(2.0)));
        assert_eq!(sample.factors["temperature"], "25");
        assert_eq!(layout.wells[&well("H2")].factors["temperature"], "37.5");
        assert_eq!(layout.wells[&well("H2")].role, Role::Blank);
        assert_eq!(
            sample.position.to_string(),
            format!("{}, sheet 'Layout', row 4, column 1 (A)", path.display())
        );
    }

    #[test]
    fn xlsx_errors_name_the_sheet_and_cell() {
        let directory = tempfile::tempdir().unwrap();
        let path = directory.path().join("bad.xlsx");
        let mut workbook = rust_xlsxwriter::Workbook::new();
        let sheet = workbook.add_worksheet();
        sheet.set_name("Plate 2").unwrap();
        sheet.write_string(0, 0, "well").unwrap();
        sheet.write_string(0, 1, "role").unwrap();
        sheet.write_string(0, 2, "substrate [uM]").unwrap();
        sheet.write_string(1, 0, "C7").unwrap();
        sheet.write_string(1, 1, "standard").unwrap();
        sheet.write_number(1, 2, 5.0).unwrap();
        workbook.save(&path).unwrap();
        let message = read_layout(&path, None, PlateFormat::Wells96)
            .unwrap_err()
            .to_string();
        assert_mentions(
            &message,
            &[
                "sheet 'Plate 2', row 2, column 2 (B)",
                "'standard'",
                "C7",
                KNOWN_ROLES,
            ],
        );
    }

    /// Writes one grid block (96 or 384 wells) from a function giving each well's cell text.
    fn grid_block(name: &str, plate: PlateFormat, value: impl Fn(WellId) -> String) -> String {
        let mut text = format!("{name}\n");
        for column in 1..=plate.n_columns() {
            text.push_str(&format!(",{column}"));
        }
        text.push('\n');
        for plate_row in 0..plate.n_rows() {
            text.push_str(&row_label(plate_row));
            for column in 0..plate.n_columns() {
                text.push(',');
                text.push_str(&value(WellId::new(plate_row, column)));
            }
            text.push('\n');
        }
        text
    }

    #[test]
    fn grid_csv_with_role_substrate_and_variant_blocks_for_96_wells() {
        // Row A: blanks; rows B-G: substrate series down columns 1-10 (invented 2-fold series);
        // row H: no-enzyme controls in columns 1-10; column 12 empty except in the variant block.
        let substrate = |well: WellId| -> String {
            if well.row == 0 || well.column >= 10 {
                String::new()
            } else {
                format!("{}", 200.0 / 2f64.powi(i32::from(well.column)))
            }
        };
        let role = |well: WellId| -> String {
            match (well.row, well.column) {
                (0, _) => "blank".into(),
                (7, c) if c < 10 => "no enzyme".into(),
                (_, 10) => "empty".into(),
                // Samples are left empty on purpose: an empty role cell with a substrate is a sample.
                _ => String::new(),
            }
        };
        // Variants only where there is a sample or an empty well (a variant alone would make a
        // well a sample without substrate).
        let variant = |well: WellId| -> String {
            match (well.row, well.column) {
                (1..=3, 0..=10) => "WT".into(),
                (4..=6, 0..=10) => "K12A".into(),
                _ => String::new(),
            }
        };
        let text = format!(
            "EstX Km run (invented)\n# grid form\n\n{}\n{}\n{}",
            grid_block("role", PlateFormat::Wells96, role),
            grid_block("Substrate [uM]", PlateFormat::Wells96, substrate),
            grid_block("variant", PlateFormat::Wells96, variant)
        );
        let layout = parse_csv(&text, PlateFormat::Wells96).unwrap();
        assert_eq!(layout.form, LayoutForm::Grid);
        assert_eq!(layout.substrate_unit, Some(ConcentrationUnit::Micromolar));
        assert_eq!(layout.factor_names, vec!["variant".to_string()]);
        // 12 blanks + 60 samples + 6 empty (B11-G11) + 10 controls + H11; B12-H12 get nothing.
        assert_eq!(layout.wells.len(), 89);
        assert!(!layout.wells.contains_key(&well("B12")));
        assert_eq!(layout.wells[&well("A5")].role, Role::Blank);
        let sample = &layout.wells[&well("C3")];
        assert_eq!((sample.role, sample.substrate), (Role::Sample, Some(50.0)));
        assert_eq!(sample.factors["variant"], "WT");
        // C3's role cell is empty, so the first cell naming it is in the substrate block:
        // lines 1-3 title, comment, blank; 4-13 role block; 14 blank; 15 name; 16 numbers; 19 row C.
        assert_eq!(sample.position.to_string(), "layout.csv, row 19, column 4 (D)");
        let control = &layout.wells[&well("H1")];
        assert_eq!((control.role, control.substrate), (Role::NoEnzyme, Some(200.0)));
        assert_eq!(control.factors["variant"], "");
        assert_eq!(layout.wells[&well("D11")].role, Role::Empty);
        assert_eq!(layout.wells[&well("D11")].factors["variant"], "WT");
        assert_eq!(layout.wells_with_role(Role::Sample).count(), 60);
    }

    #[test]
    fn grid_without_role_block_makes_samples_and_384_wells_work() {
        let substrate = |well: WellId| -> String { format!("{}", f64::from(well.column + 1) * 2.5) };
        let text = grid_block("substrate [mM]", PlateFormat::Wells384, substrate);
        let layout = parse_csv(&text, PlateFormat::Wells384).unwrap();
        assert_eq!(layout.form, LayoutForm::Grid);
        assert_eq!(layout.wells.len(), 384);
        assert!(layout.wells.values().all(|setup| setup.role == Role::Sample));
        assert_eq!(layout.wells[&well("P24")].substrate, Some(60.0));
        assert_eq!(
            layout.wells[&well("P24")].position.to_string(),
            "layout.csv, row 18, column 25 (Y)"
        );
        assert_eq!(layout.substrate_unit, Some(ConcentrationUnit::Millimolar));
        // The same grid read as a 96-well plate: the first off-plate cell is named.
        let message = error_text(&text, PlateFormat::Wells96);
        assert_mentions(&message, &["well A13", "96-well plate", "row 3, column 14 (N)"]);
    }

    #[test]
    fn well_off_the_plate_is_named_with_its_cell() {
        let message = error_text("well,substrate [uM]\nA1,5\nI1,5\n", PlateFormat::Wells96);
        assert_mentions(
            &message,
            &[
                "layout.csv, row 3, column 1 (A)",
                "well I1",
                "96-well plate",
                "rows A to H",
            ],
        );
        let message = error_text("well,substrate [uM]\nA1:A13,5\n", PlateFormat::Wells96);
        assert_mentions(&message, &["row 2, column 1 (A)", "well A13", "columns 1 to 12"]);
    }

    #[test]
    fn well_cell_that_is_no_well_is_named() {
        let message = error_text("well,substrate [uM]\nA1,5\nB1 X9x,5\n", PlateFormat::Wells96);
        assert_mentions(
            &message,
            &[
                "layout.csv, row 3, column 1 (A)",
                "'B1 X9x'",
                "'X9x' is not a well ID",
            ],
        );
        let message = error_text("role,well,substrate [uM]\nsample,12,5\n", PlateFormat::Wells96);
        assert_mentions(&message, &["row 2, column 2 (B)", "'12'"]);
        let message = error_text("well,role,substrate [uM]\n,sample,5\n", PlateFormat::Wells96);
        assert_mentions(&message, &["row 2, column 1 (A)", "'well' cell is empty"]);
    }

    #[test]
    fn conflicting_duplicate_names_both_positions_and_identical_duplicate_is_fine() {
        let message = error_text(
            "well,role,substrate [uM]\nB1:B4,sample,10\nC1,blank,\nB3,sample,20\n",
            PlateFormat::Wells96,
        );
        assert_mentions(
            &message,
            &[
                "well B3",
                "substrate 10 vs 20",
                "row 2, column 1 (A)",
                "row 4, column 1 (A)",
            ],
        );
        let message = error_text(
            "well,role,substrate [uM]\nB1:B4,sample,10\nB2,blank,10\n",
            PlateFormat::Wells96,
        );
        assert_mentions(&message, &["well B2", "role sample vs blank", "row 2", "row 3"]);

        let layout = parse_csv(
            "well,role,substrate [uM]\nB1:B4,sample,10\nB3 B4,sample,10\n",
            PlateFormat::Wells96,
        )
        .unwrap();
        assert_eq!(layout.wells.len(), 4);
        assert_eq!(
            layout.wells[&well("B4")].position.row,
            2,
            "the first cell naming it is kept"
        );
    }

    #[test]
    fn grid_duplicate_blocks_merge_when_they_agree_and_conflict_otherwise() {
        let first = grid_block("substrate [uM]", PlateFormat::Wells96, |w| {
            if w.row == 0 {
                "5".into()
            } else {
                String::new()
            }
        });
        let agreeing = grid_block("substrate [uM]", PlateFormat::Wells96, |w| {
            if w.row == 0 || w.row == 1 {
                "5".into()
            } else {
                String::new()
            }
        });
        let layout = parse_csv(&format!("{first}\n{agreeing}"), PlateFormat::Wells96).unwrap();
        assert_eq!(layout.wells.len(), 24);
        assert_eq!(layout.wells[&well("A1")].position.row, 3);
        assert_eq!(layout.wells[&well("B1")].position.row, 15);

        let clashing = grid_block("substrate [uM]", PlateFormat::Wells96, |w| {
            if w == WellId::new(0, 4) {
                "7".into()
            } else {
                String::new()
            }
        });
        let message = error_text(&format!("{first}\n{clashing}"), PlateFormat::Wells96);
        assert_mentions(
            &message,
            &[
                "well A5",
                "substrate 5 vs 7",
                "row 3, column 6 (F)",
                "row 14, column 6 (F)",
            ],
        );

        let other_unit = grid_block("substrate [mM]", PlateFormat::Wells96, |_| String::new());
        let message = error_text(&format!("{first}\n{other_unit}"), PlateFormat::Wells96);
        assert_mentions(
            &message,
            &[
                "substrate is given in uM",
                "in mM",
                "row 1, column 1 (A)",
                "row 12, column 1 (A)",
            ],
        );
    }

    #[test]
    fn unknown_role_lists_the_known_ones() {
        let message = error_text(
            "well,role,substrate [uM]\nA1,sample,1\nD4 D5,control,1\n",
            PlateFormat::Wells96,
        );
        assert_mentions(
            &message,
            &["row 3, column 2 (B)", "'control'", "well D4 D5", KNOWN_ROLES],
        );
        let text = format!(
            "{}\n{}",
            grid_block("role", PlateFormat::Wells96, |w| if w == WellId::new(2, 3) {
                "stnadard".into()
            } else {
                String::new()
            }),
            grid_block("substrate [uM]", PlateFormat::Wells96, |_| "1".into())
        );
        assert_mentions(
            &error_text(&text, PlateFormat::Wells96),
            &["row 5, column 5 (E)", "well C4", "'stnadard'", KNOWN_ROLES],
        );
    }

    #[test]
    fn unknown_and_missing_units_are_named() {
        let message = error_text("well,substrate [mg/mL]\nA1,1\n", PlateFormat::Wells96);
        assert_mentions(
            &message,
            &["row 1, column 2 (B)", "'mg/mL'", "M, mM, uM", "nM, pM"],
        );
        let message = error_text("well,Substrate\nA1,1\n", PlateFormat::Wells96);
        assert_mentions(
            &message,
            &["row 1, column 2 (B)", "'Substrate' has no unit", "substrate [uM]"],
        );
        let message = error_text("well,substrate [uM],enzyme []\nA1,1,1\n", PlateFormat::Wells96);
        assert_mentions(&message, &["row 1, column 3 (C)", "enzyme [nM]"]);
        let message = error_text(
            "well,substrate [uM],Substrate [mM]\nA1,1,1\n",
            PlateFormat::Wells96,
        );
        assert_mentions(
            &message,
            &[
                "substrate is given in uM at layout.csv, row 1, column 2 (B)",
                "mM at layout.csv, row 1, column 3 (C)",
            ],
        );
        let message = grid_block("enzyme", PlateFormat::Wells96, |_| "1".into());
        assert_mentions(
            &error_text(&message, PlateFormat::Wells96),
            &["row 1, column 1 (A)", "enzyme [nM]"],
        );
    }

    #[test]
    fn concentration_cells_must_be_numbers_of_at_least_zero() {
        let message = error_text("well,substrate [uM]\nA1,1\nA2:A3,ten\n", PlateFormat::Wells96);
        assert_mentions(
            &message,
            &["row 3, column 2 (B)", "'ten'", "well A2:A3", "not a number"],
        );
        let message = error_text("well,substrate [uM]\nA1,-1\n", PlateFormat::Wells96);
        assert_mentions(&message, &["row 2, column 2 (B)", "-1", "well A1", "negative"]);
        let text = grid_block("substrate [uM]", PlateFormat::Wells96, |w| {
            if w == WellId::new(7, 11) {
                "n/a".into()
            } else {
                "1".into()
            }
        });
        assert_mentions(
            &error_text(&text, PlateFormat::Wells96),
            &["row 10, column 13 (M)", "well H12", "'n/a'"],
        );
    }

    #[test]
    fn samples_and_no_enzyme_controls_need_a_substrate() {
        let message = error_text(
            "well,role,substrate [uM]\nA1,blank,\nB2:B3,sample,\nC1,sample,\n",
            PlateFormat::Wells96,
        );
        assert_mentions(
            &message,
            &[
                "row 3, column 1 (A)",
                "well B2 is a sample well",
                "likewise: B3, C1",
            ],
        );
        let message = error_text(
            "well,role,substrate [uM]\nA1,sample,5\nH1,no-enzyme,\n",
            PlateFormat::Wells96,
        );
        assert_mentions(
            &message,
            &[
                "row 3, column 1 (A)",
                "well H1 is a no-enzyme well",
                "no substrate",
            ],
        );
        // Grid: a well with only a factor value defaults to a sample and so needs a substrate.
        let text = format!(
            "{}\n{}",
            grid_block("substrate [uM]", PlateFormat::Wells96, |w| if w.row == 0 {
                "1".into()
            } else {
                String::new()
            }),
            grid_block("variant", PlateFormat::Wells96, |w| if w == WellId::new(1, 1) {
                "WT".into()
            } else {
                String::new()
            })
        );
        assert_mentions(
            &error_text(&text, PlateFormat::Wells96),
            &["well B2 is a sample well", "row 15, column 3 (C)"],
        );
        // Blanks may go without substrate.
        assert!(parse_csv(
            "well,role,substrate [uM]\nA1,blank,\nA2,sample,3\n",
            PlateFormat::Wells96
        )
        .is_ok());
    }

    #[test]
    fn empty_layouts_and_files_without_a_layout_are_refused() {
        let message = error_text("# nothing yet\nwell,role,substrate [uM]\n", PlateFormat::Wells96);
        assert_mentions(&message, &["layout.csv", "tidy form", "no wells"]);
        let message = error_text("well,role\nA1:H12,empty\n", PlateFormat::Wells96);
        assert_mentions(&message, &["layout.csv", "no wells other than empty"]);
        let message = error_text("Time [s],A1,A2\n0,0.1,0.2\n", PlateFormat::Wells96);
        assert_mentions(&message, &["layout.csv", "no plate layout found"]);
    }

    #[test]
    fn tidy_column_problems_are_named() {
        let message = error_text(
            "well,Variant,variant,substrate [uM]\nA1,a,b,1\n",
            PlateFormat::Wells96,
        );
        assert_mentions(
            &message,
            &["row 1, column 2 (B)", "row 1, column 3 (C)", "'variant'"],
        );
        let message = error_text("well,,substrate [uM]\nA1,note,1\n", PlateFormat::Wells96);
        assert_mentions(&message, &["row 2, column 2 (B)", "'note'", "no header"]);
    }

    #[test]
    fn grid_structure_problems_are_named() {
        // A column-number row with no name line above it.
        let message = error_text("title\n\n,1,2,3\nA,1,2,3\n", PlateFormat::Wells96);
        assert_mentions(&message, &["row 2, column 1 (A)", "must follow a line naming"]);
        // A plate row outside any block (block broken by a blank line).
        let message = error_text("substrate [uM]\n,1,2\nA,1,2\n\nB,1,2\n", PlateFormat::Wells96);
        assert_mentions(&message, &["row 5, column 1 (A)", "plate row 'B'"]);
        // A note after the first block that is not a comment.
        let message = error_text(
            "substrate [uM]\n,1,2\nA,1,2\n\ndilution 1:2\n",
            PlateFormat::Wells96,
        );
        assert_mentions(&message, &["row 5, column 1 (A)", "'dilution 1:2'", "'#'"]);
        // A value right of the numbered columns.
        let message = error_text("substrate [uM]\n,1,2\nA,1,2,3\n", PlateFormat::Wells96);
        assert_mentions(&message, &["row 3, column 4 (D)", "no column number"]);
        // A row letter beyond the plate's rows with a value.
        let message = error_text("substrate [uM]\n,1,2\nA,1,2\nJ,1,\n", PlateFormat::Wells96);
        assert_mentions(&message, &["row 4, column 2 (B)", "well J1", "rows A to H"]);
    }

    #[test]
    fn check_against_data_errors_or_drops_with_a_warning() {
        let text = "well,role,substrate [uM]\nA1:A3,sample,5\nH12,empty,\nB1,blank,\n";
        let data: BTreeSet<WellId> = ["A1", "A2", "B1"].iter().map(|w| well(w)).collect();

        let mut layout = parse_csv(text, PlateFormat::Wells96).unwrap();
        let message = check_against_data(&mut layout, &data, false)
            .unwrap_err()
            .to_string();
        assert_mentions(
            &message,
            &["layout.csv", "1 well(s)", "A3", "row 2, column 1 (A)"],
        );
        assert!(!message.contains("H12"), "empty wells need no data: {message}");
        assert_eq!(layout.wells.len(), 5, "nothing is dropped on error");

        let warnings = check_against_data(&mut layout, &data, true).unwrap();
        assert_eq!(warnings.len(), 1);
        assert_mentions(&warnings[0], &["A3", "left out"]);
        assert!(!layout.wells.contains_key(&well("A3")));
        assert_eq!(layout.wells.len(), 4);
        // Nothing missing any more: no warning.
        assert!(check_against_data(&mut layout, &data, false).unwrap().is_empty());

        // Dropping every well leaves an empty layout, which is an error.
        let mut layout = parse_csv(text, PlateFormat::Wells96).unwrap();
        let error = check_against_data(&mut layout, &BTreeSet::new(), true).unwrap_err();
        assert!(matches!(error, LayoutError::EmptyLayout { .. }), "{error}");
    }

    // ---------------------------------------------------------------------------------------
    // Property tests: a random layout written in either form parses back to the same setups.
    // ---------------------------------------------------------------------------------------

    /// role, substrate, enzyme, inhibitor, variant
    type Assignment = (Role, Option<f64>, Option<f64>, Option<f64>, String);

    fn amount() -> impl Strategy<Value = Option<f64>> {
        prop_oneof![
            Just(None),
            Just(Some(0.0)),
            (0.0f64..1e6).prop_map(Some),
            (1e-9f64..1e-3).prop_map(Some)
        ]
    }

    fn assignment() -> impl Strategy<Value = Assignment> {
        let roles = prop_oneof![
            Just(Role::Sample),
            Just(Role::Blank),
            Just(Role::NoEnzyme),
            Just(Role::Empty)
        ];
        let variants = prop_oneof![Just(""), Just("WT"), Just("K12A"), Just("7.5"), Just("buffer B")];
        (roles, amount(), amount(), amount(), variants).prop_map(
            |(role, substrate, enzyme, inhibitor, variant)| {
                // Samples and no-enzyme controls need a substrate, or the layout is (rightly) refused.
                let substrate = match role {
                    Role::Sample | Role::NoEnzyme => Some(substrate.unwrap_or(1.0)),
                    _ => substrate,
                };
                (role, substrate, enzyme, inhibitor, variant.to_string())
            },
        )
    }

    fn random_layout() -> impl Strategy<Value = (PlateFormat, String, BTreeMap<WellId, Assignment>)> {
        let units = prop_oneof![
            Just("M"),
            Just("mM"),
            Just("uM"),
            Just("\u{b5}M"),
            Just("nM"),
            Just("pM")
        ];
        (
            prop_oneof![Just(PlateFormat::Wells96), Just(PlateFormat::Wells384)],
            units,
        )
            .prop_flat_map(|(plate, unit)| {
                let wells = (0..plate.n_rows(), 0..plate.n_columns()).prop_map(|(r, c)| WellId::new(r, c));
                // At least one sample so that the layout is never all-empty.
                let sample = (0..plate.n_rows(), 0..plate.n_columns()).prop_map(|(r, c)| WellId::new(r, c));
                (
                    Just(plate),
                    Just(unit.to_string()),
                    prop::collection::btree_map(wells, assignment(), 0..40),
                    sample,
                )
                    .prop_map(|(plate, unit, mut map, sample)| {
                        map.insert(sample, (Role::Sample, Some(3.0), None, None, "WT".into()));
                        (plate, unit, map)
                    })
            })
    }

    fn cell_text(value: Option<f64>) -> String {
        value.map(|v| v.to_string()).unwrap_or_default()
    }

    fn write_grid(plate: PlateFormat, unit: &str, map: &BTreeMap<WellId, Assignment>) -> String {
        let block = |name: &str, pick: &dyn Fn(&Assignment) -> String| {
            grid_block(name, plate, |w| map.get(&w).map(pick).unwrap_or_default())
        };
        format!(
            "Random layout\n\n{}\n{}\n{}\n{}\n{}",
            block("role", &|a| a.0.to_string()),
            block(&format!("substrate [{unit}]"), &|a| cell_text(a.1)),
            block("enzyme [nM]", &|a| cell_text(a.2)),
            block("inhibitor [uM]", &|a| cell_text(a.3)),
            block("variant", &|a| a.4.clone()),
        )
    }

    fn write_tidy(unit: &str, map: &BTreeMap<WellId, Assignment>) -> String {
        let mut text =
            format!("# random layout\nwell,role,substrate [{unit}],enzyme [nM],inhibitor [uM],variant\n");
        for (well, (role, substrate, enzyme, inhibitor, variant)) in map {
            text.push_str(&format!(
                "{well},{role},{},{},{},{variant}\n",
                cell_text(*substrate),
                cell_text(*enzyme),
                cell_text(*inhibitor)
            ));
        }
        text
    }

    fn parsed_assignments(layout: &Layout) -> BTreeMap<WellId, Assignment> {
        layout
            .wells
            .iter()
            .map(|(well, s)| {
                (
                    *well,
                    (
                        s.role,
                        s.substrate,
                        s.enzyme,
                        s.inhibitor,
                        s.factors["variant"].clone(),
                    ),
                )
            })
            .collect()
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        #[test]
        fn grid_text_parses_back_to_the_same_setups((plate, unit, map) in random_layout()) {
            let layout = parse_csv(&write_grid(plate, &unit, &map), plate).unwrap();
            prop_assert_eq!(layout.form, LayoutForm::Grid);
            prop_assert_eq!(layout.substrate_unit, Some(ConcentrationUnit::from_str(&unit).unwrap()));
            prop_assert_eq!(parsed_assignments(&layout), map);
        }

        #[test]
        fn tidy_text_parses_back_to_the_same_setups((plate, unit, map) in random_layout()) {
            let layout = parse_csv(&write_tidy(&unit, &map), plate).unwrap();
            prop_assert_eq!(layout.form, LayoutForm::Tidy);
            prop_assert_eq!(layout.substrate_unit, Some(ConcentrationUnit::from_str(&unit).unwrap()));
            prop_assert_eq!(parsed_assignments(&layout), map);
        }

        #[test]
        fn arbitrary_cells_never_panic_and_accepted_layouts_stay_on_the_plate(
            rows in prop::collection::vec(
                prop::collection::vec(
                    prop_oneof![
                        Just(Cell::Empty), Just(Cell::Text("well".into())), Just(Cell::Text("role".into())),
                        Just(Cell::Text("substrate [uM]".into())), Just(Cell::Text("A".into())),
                        Just(Cell::Text("B1:C3".into())), Just(Cell::Text("sample".into())),
                        Just(Cell::Text("#".into())), (0u8..4).prop_map(|n| Cell::Number(f64::from(n))),
                        Just(Cell::Duration(30.0)), Just(Cell::Number(-1.0)),
                    ],
                    0..6,
                ),
                0..10,
            )
        ) {
            let grid = CellGrid { source: Source { file: "random.csv".into(), sheet: None }, rows };
            if let Ok(layout) = parse_layout(&grid, PlateFormat::Wells96) {
                prop_assert!(layout.wells.keys().all(|w| PlateFormat::Wells96.contains(*w)));
                prop_assert!(layout.wells.values().any(|s| s.role != Role::Empty));
            }
        }
    }
}
