//! The plate layout (`--layout LAYOUT`): what each well holds (its role, the substrate, enzyme and
//! inhibitor concentrations, and free factors such as enzyme variant or buffer), read from a CSV
//! file or a spreadsheet sheet in either of two forms.
//!
//! Tidy form: a header row holding a `well` column (the first such row; title and `#` comment
//! lines may stand above it), then one line per well, rectangle (`B1:D12`) or space-separated list
//! of wells (`B1 B3 B5`). A `role` column says `sample`, `blank` (buffer only), `no-enzyme`
//! (substrate without enzyme: the background rate), `empty` (ignored), or, on a screening plate,
//! `uninhibited` (100% activity control) or `inhibited` (0% activity control); without it, or where its
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
//!
//! Files: [`error`] (the one error type, every variant positioned), [`tidy`] and [`grid`] (the two
//! forms), [`check`] (the layout against the data's wells), `common` (what both forms share).

mod check;
mod common;
mod error;
pub mod exclusions;
mod grid;
mod standards;
#[cfg(test)]
mod tests;
mod tidy;

use std::collections::BTreeMap;
use std::fmt;
use std::str::FromStr;

use crate::core::cells::{CellGrid, Position, Source};
use crate::core::plate::{PlateFormat, WellId};
use crate::core::units::{AmountUnit, ConcentrationUnit, MassConcentrationUnit};
use crate::files::input::InputFile;
use crate::files::sheet::{read_input_cells, MergedCells};

pub use check::{check_against_data, wells_outside_layout};
pub use error::LayoutError;
pub use standards::StandardGroups;

use common::detect_form;
use grid::parse_grid;
use tidy::parse_tidy;

/// The known roles, as listed in error messages.
pub const KNOWN_ROLES: &str = "sample, blank, no-enzyme, standard, empty, uninhibited, inhibited";

/// The known concentration units, as listed in error messages.
pub const KNOWN_CONCENTRATION_UNITS: &str = "M, mM, uM (or \u{b5}M), nM, pM";

/// Column names the outputs (`wells.csv`, `conditions.csv`) or `platekin fit` give a meaning,
/// compared without their unit and case: a factor named so is written as `factor:NAME`, so that
/// `platekin fit` never takes it for the rate or a bookkeeping column.
pub const RESERVED_COLUMN_NAMES: [&str; 28] = [
    "well",
    "role",
    "substrate",
    "enzyme",
    "inhibitor",
    "rate",
    "rate_se",
    "rate_mean",
    "rate_sd",
    "rate_sem",
    "sd",
    "se",
    "window_slope",
    "substrate_sensitivity",
    "background",
    "intercept",
    "r2",
    "window_start",
    "window_end",
    "n_points",
    "conversion",
    "flags",
    "used",
    "correction",
    "notes",
    "n",
    "n_used",
    "cv",
];

/// The prefix of a factor written under another header.
pub const FACTOR_PREFIX: &str = "factor:";

/// Whether a column name (unit and case aside) is one of [`RESERVED_COLUMN_NAMES`].
pub fn is_reserved_column_name(name: &str) -> bool {
    let (bare, _) = crate::core::units::split_header_unit(name.trim());
    let bare = bare.trim().to_lowercase();
    RESERVED_COLUMN_NAMES.contains(&bare.as_str())
}

/// See [`Layout::factor_header`].
pub fn factor_header(name: &str) -> String {
    if is_reserved_column_name(name) {
        format!("{FACTOR_PREFIX}{name}")
    } else {
        name.to_string()
    }
}

/// At most this many wells are spelled out in one message; the rest are counted.
pub(super) const WELLS_SPELLED_OUT: usize = 48;

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
    /// A known concentration of the species read (`standard [uM]`), for the standard curve.
    Standard,
    /// Not used; ignored by the analysis.
    Empty,
    /// Screening control: enzyme, substrate and vehicle without inhibitor (100% activity).
    Uninhibited,
    /// Screening control: the full-inhibition reference (0% activity).
    Inhibited,
}

impl Role {
    /// Every role, in the order they are listed to users.
    pub const ALL: [Role; 7] = [
        Role::Sample,
        Role::Blank,
        Role::NoEnzyme,
        Role::Standard,
        Role::Empty,
        Role::Uninhibited,
        Role::Inhibited,
    ];

    /// The spelling used in output and messages.
    pub fn name(self) -> &'static str {
        match self {
            Role::Sample => "sample",
            Role::Blank => "blank",
            Role::NoEnzyme => "no-enzyme",
            Role::Standard => "standard",
            Role::Empty => "empty",
            Role::Uninhibited => "uninhibited",
            Role::Inhibited => "inhibited",
        }
    }

    /// Whether the well is a screening control (`uninhibited` or `inhibited`): measured like a
    /// sample, normalised against rather than normalised.
    pub fn is_screening_control(self) -> bool {
        matches!(self, Role::Uninhibited | Role::Inhibited)
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
            "standard" => Ok(Role::Standard),
            "empty" => Ok(Role::Empty),
            "uninhibited" => Ok(Role::Uninhibited),
            "inhibited" => Ok(Role::Inhibited),
            _ => Err(format!(
                "unknown role '{}' (known roles: {KNOWN_ROLES})",
                text.trim()
            )),
        }
    }
}

/// The layout factor that marks control wells (`positive` or `negative`): wells run for the
/// plate's quality (Z'), at one condition each, so they are never a Michaelis-Menten fit group nor
/// points of one.
pub const CONTROL_FACTOR: &str = "control";

/// Which control a well is, from its `control` factor (case and spaces ignored).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ControlKind {
    /// Full activity.
    Positive,
    /// No activity.
    Negative,
}

impl ControlKind {
    /// The kind a factor value names, if any.
    pub fn from_factor(value: &str) -> Option<ControlKind> {
        match value.trim().to_ascii_lowercase().as_str() {
            "positive" | "pos" | "+" => Some(ControlKind::Positive),
            "negative" | "neg" | "-" => Some(ControlKind::Negative),
            _ => None,
        }
    }
}

/// The concentrations a layout may give a well.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Quantity {
    /// Substrate concentration.
    Substrate,
    /// Enzyme concentration.
    Enzyme,
    /// Inhibitor concentration.
    Inhibitor,
    /// The known concentration of a standard well (of the species read).
    Standard,
}

impl Quantity {
    /// Every quantity, in the order they are stored.
    pub const ALL: [Quantity; 4] = [
        Quantity::Substrate,
        Quantity::Enzyme,
        Quantity::Inhibitor,
        Quantity::Standard,
    ];

    /// The header name (lower case).
    pub fn name(self) -> &'static str {
        match self {
            Quantity::Substrate => "substrate",
            Quantity::Enzyme => "enzyme",
            Quantity::Inhibitor => "inhibitor",
            Quantity::Standard => "standard",
        }
    }

    /// A header with a typical unit, shown when a unit is missing.
    pub fn example_header(self) -> &'static str {
        match self {
            Quantity::Substrate => "substrate [uM]",
            Quantity::Enzyme => "enzyme [nM]",
            Quantity::Inhibitor => "inhibitor [uM]",
            Quantity::Standard => "standard [uM]",
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
            Quantity::Standard => 3,
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
    /// A standard's known concentration in [`Layout::standard_unit`].
    pub standard: Option<f64>,
    /// Every factor of the layout (see [`Layout::factor_names`]) with this well's value, "" when
    /// the well was given none.
    pub factors: BTreeMap<String, String>,
    /// Where the well was set: the first cell naming it.
    pub position: Position,
}

impl WellSetup {
    /// The control the well's `control` factor marks, if any.
    pub fn control(&self) -> Option<ControlKind> {
        self.factors
            .get(CONTROL_FACTOR)
            .and_then(|value| ControlKind::from_factor(value))
    }

    /// Whether the well is a sample of a Michaelis-Menten group: a `sample` that is not a
    /// positive or negative control.
    pub fn is_fit_sample(&self) -> bool {
        self.role == Role::Sample && self.control().is_none()
    }

    /// The well's concentration of `quantity`, in the layout's unit for it.
    pub fn quantity(&self, quantity: Quantity) -> Option<f64> {
        match quantity {
            Quantity::Substrate => self.substrate,
            Quantity::Enzyme => self.enzyme,
            Quantity::Inhibitor => self.inhibitor,
            Quantity::Standard => self.standard,
        }
    }

    pub(super) fn quantity_mut(&mut self, quantity: Quantity) -> &mut Option<f64> {
        match quantity {
            Quantity::Substrate => &mut self.substrate,
            Quantity::Enzyme => &mut self.enzyme,
            Quantity::Inhibitor => &mut self.inhibitor,
            Quantity::Standard => &mut self.standard,
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
    /// The unit of every enzyme value, if the layout gives any enzyme column or block in a molar
    /// unit.
    pub enzyme_unit: Option<ConcentrationUnit>,
    /// The unit of every enzyme value when the layout gives the enzyme as a mass concentration
    /// (`enzyme [mg/mL]`): rates then give a specific activity, and kcat only with the enzyme's
    /// molecular weight (`--enzyme-mw`).
    pub enzyme_mass_unit: Option<MassConcentrationUnit>,
    /// The unit of every inhibitor value, if the layout gives any inhibitor column or block.
    pub inhibitor_unit: Option<ConcentrationUnit>,
    /// The unit of every standard's concentration, if the layout gives a standard column or block.
    pub standard_unit: Option<ConcentrationUnit>,
    /// The standard curves the layout asks for and the curve of each well (`None`: no standards).
    pub standard_groups: Option<StandardGroups>,
    /// The free factors, in the order they first appear.
    pub factor_names: Vec<String>,
    /// What the reader did that the user should know (factors written under another header),
    /// each naming the file and cell.
    pub notes: Vec<String>,
}

impl Layout {
    /// The wells holding `role`, in well order.
    pub fn wells_with_role(&self, role: Role) -> impl Iterator<Item = (&WellId, &WellSetup)> {
        self.wells.iter().filter(move |(_, setup)| setup.role == role)
    }

    /// The header a factor is written under in `wells.csv` and `conditions.csv`: its own name, or
    /// `factor:NAME` when the name is one the outputs or `platekin fit` give a meaning
    /// ([`RESERVED_COLUMN_NAMES`]), the same in both tables.
    pub fn factor_header(&self, name: &str) -> String {
        factor_header(name)
    }

    /// The enzyme column's unit as written in headers (`nM`, `mg/mL`), if the layout gives one.
    pub fn enzyme_unit_text(&self) -> Option<String> {
        self.enzyme_unit
            .map(|unit| unit.to_string())
            .or_else(|| self.enzyme_mass_unit.map(|unit| unit.to_string()))
    }

    /// The factor that turns the layout's enzyme values into `target`: by the molar unit, or for a
    /// mass concentration through the molecular weight `mw_kda` (`None` without one).
    pub fn enzyme_factor_to(&self, target: ConcentrationUnit, mw_kda: Option<f64>) -> Option<f64> {
        match (self.enzyme_unit, self.enzyme_mass_unit, mw_kda) {
            (Some(unit), ..) => Some(unit.factor_to(target)),
            (None, Some(mass), Some(kda)) => Some(mass.molar_per_unit(kda) / target.in_molar()),
            _ => None,
        }
    }

    /// The unit the layout uses for `quantity`, if it gives that quantity at all.
    pub fn unit(&self, quantity: Quantity) -> Option<ConcentrationUnit> {
        match quantity {
            Quantity::Substrate => self.substrate_unit,
            Quantity::Enzyme => self.enzyme_unit,
            Quantity::Inhibitor => self.inhibitor_unit,
            Quantity::Standard => self.standard_unit,
        }
    }
}

/// Reads a layout from an input file's bytes: a CSV/TSV/TXT file or a spreadsheet sheet (the
/// first sheet holding data when `sheet` is `None`).
pub fn read_layout(
    input: &InputFile,
    sheet: Option<&str>,
    plate: PlateFormat,
) -> Result<Layout, LayoutError> {
    let grid = read_input_cells(input, sheet, MergedCells::Fill)?;
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
