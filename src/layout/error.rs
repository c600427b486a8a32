//! The layout's one error type: every input error names the file, sheet, row and column and, where
//! one is concerned, the well.

use super::*;
use crate::core::plate::WellId;
use crate::files::sheet::SheetReadError;

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
    #[error("{position}: unknown concentration unit '{unit}' in '{header}' (known units: {accepted})")]
    UnknownUnit {
        /// The unit as written.
        unit: String,
        /// The whole header.
        header: String,
        /// The units this column accepts.
        accepted: String,
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
        first_unit: AmountUnit,
        /// Where it was first used.
        first: Box<Position>,
        /// The other unit.
        second_unit: AmountUnit,
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

    /// A standard well without its known concentration.
    #[error(
        "{position}: well {well} is a standard but has no concentration{also}: give it one in a \
         standard column or block (e.g. 'standard [uM]')"
    )]
    MissingStandardConcentration {
        /// The first such well.
        well: WellId,
        /// Where it was set.
        position: Box<Position>,
        /// The other wells with the same problem, as " (likewise: ...)", or "".
        also: String,
    },

    /// The standards of one curve hold fewer than two concentrations (or fewer than three wells).
    #[error(
        "{position}: the standards of {group} ({wells}) hold {levels} concentration(s) in {n_wells} well(s); \
         a standard curve needs at least two concentrations and three wells"
    )]
    TooFewStandards {
        /// The curve's group in words (`the plate`, `variant = 'A'`).
        group: String,
        /// The standard wells.
        wells: String,
        /// Distinct concentrations.
        levels: usize,
        /// Standard wells.
        n_wells: usize,
        /// Where the first of them was set.
        position: Box<Position>,
    },

    /// A well whose factor values match no standard curve.
    #[error(
        "{position}: well {well} ({group}) has no standard curve: the standards give curves for {available}; \
         add standards for it or give the standards' factors the same values"
    )]
    NoStandardCurve {
        /// The well.
        well: WellId,
        /// Its values of the factors that key the curves.
        group: String,
        /// The curves there are.
        available: String,
        /// Where the well was set.
        position: Box<Position>,
    },

    /// Two factors that would be written under one header (`flags` becomes `factor:flags`,
    /// which another factor already is).
    #[error(
        "{first} and {second}: two factors would both be written as '{header}' in wells.csv and \
         conditions.csv; rename one of them"
    )]
    FactorHeaderClash {
        /// The shared header.
        header: String,
        /// The first factor's header cell.
        first: Box<Position>,
        /// The second factor's header cell.
        second: Box<Position>,
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
