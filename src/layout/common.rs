//! What the tidy and grid forms share: line tests, form detection, reading concentration and role
//! cells, units, and the wording of messages.

use super::*;
use crate::core::cells::Cell;
use std::collections::BTreeSet;

use crate::core::plate::{row_label, WellId};
use crate::core::units::split_header_unit;

/// A line whose first filled cell is text starting with `#`.
pub(super) fn is_comment_line(grid: &CellGrid, row: usize) -> bool {
    grid.row(row)
        .find(|cell| !cell.is_empty())
        .is_some_and(|cell| matches!(cell, Cell::Text(text) if text.starts_with('#')))
}

/// A line that carries nothing for the layout: blank or a comment.
pub(super) fn is_skippable(grid: &CellGrid, row: usize) -> bool {
    grid.row_is_blank(row) || is_comment_line(grid, row)
}

/// Whether a header cell's name (without unit) is `well`, ignoring case and spaces.
pub(super) fn is_well_header(cell: &Cell) -> bool {
    matches!(cell, Cell::Text(text) if split_header_unit(text).0.eq_ignore_ascii_case("well"))
}

/// The number of columns a grid's column-number row numbers: first cell empty, then exactly
/// 1, 2, 3, ... up to the line's last filled cell.
pub(super) fn numbered_columns(grid: &CellGrid, row: usize) -> Option<usize> {
    if row >= grid.n_rows() || !grid.cell(row, 0).is_empty() {
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
pub(super) fn detect_form(grid: &CellGrid) -> Option<(LayoutForm, usize)> {
    (0..grid.n_rows())
        .filter(|&row| !is_skippable(grid, row))
        .find_map(|row| {
            if grid.row(row).any(|cell| is_well_header(&cell)) {
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
pub(super) fn describe_cell(cell: Cell) -> String {
    match cell {
        Cell::Duration(seconds) => format!("{seconds} s (a time-formatted cell)"),
        other => other.as_text(),
    }
}

/// Reads a concentration cell: empty is no value; a number must be >= 0.
pub(super) fn read_concentration(
    cell: Cell,
    header: &str,
    wells: &str,
    position: impl Fn() -> Position,
) -> Result<Option<f64>, LayoutError> {
    match cell {
        Cell::Empty => Ok(None),
        // `+ 0.0` turns a written "-0" into 0, so that equal setups compare equal.
        Cell::Number(value) if value.is_finite() && value >= 0.0 => Ok(Some(value + 0.0)),
        Cell::Number(value) if value < 0.0 => Err(LayoutError::NegativeConcentration {
            value,
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
pub(super) fn read_role(
    cell: Cell,
    wells: &str,
    position: impl Fn() -> Position,
) -> Result<Role, LayoutError> {
    let text = describe_cell(cell);
    Role::from_str(&text).map_err(|_| LayoutError::UnknownRole {
        text,
        wells: wells.to_string(),
        position: Box::new(position()),
    })
}

/// Reads the unit of a concentration header: molar, or for the enzyme also a mass concentration
/// (`enzyme [mg/mL]`, for specific activity).
pub(super) fn header_unit(
    quantity: Quantity,
    header: &str,
    unit: Option<&str>,
    position: &Position,
) -> Result<AmountUnit, LayoutError> {
    match unit {
        None | Some("") => Err(LayoutError::MissingUnit {
            header: header.to_string(),
            example: quantity.example_header(),
            position: Box::new(position.clone()),
        }),
        Some(text) => {
            let molar = ConcentrationUnit::from_str(text).map(AmountUnit::Molar);
            let mass = || match quantity {
                Quantity::Enzyme => MassConcentrationUnit::from_str(text).map(AmountUnit::Mass).ok(),
                _ => None,
            };
            molar.ok().or_else(mass).ok_or_else(|| LayoutError::UnknownUnit {
                unit: text.to_string(),
                header: header.to_string(),
                accepted: match quantity {
                    Quantity::Enzyme => {
                        format!("{KNOWN_CONCENTRATION_UNITS}, or for the enzyme mg/mL, ug/mL")
                    }
                    _ => KNOWN_CONCENTRATION_UNITS.to_string(),
                },
                position: Box::new(position.clone()),
            })
        }
    }
}

/// Records the unit of a quantity, refusing a second, different one.
pub(super) fn note_unit(
    units: &mut [Option<(AmountUnit, Position)>; 4],
    quantity: Quantity,
    unit: AmountUnit,
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
pub(super) fn show_amount(value: Option<f64>) -> String {
    value.map_or_else(|| "none".to_string(), |value| value.to_string())
}

/// How two setups of one well differ, as "role sample vs blank; substrate 10 vs 20"; "" if alike.
pub(super) fn differences(first: &WellSetup, second: &WellSetup) -> String {
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
pub(super) fn spell_out_wells(wells: &[WellId]) -> String {
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
pub(super) fn off_plate(well: String, plate: PlateFormat, position: Position) -> LayoutError {
    LayoutError::WellOffPlate {
        well,
        plate,
        last_row: row_label(plate.n_rows() - 1),
        last_column: plate.n_columns(),
        position: Box::new(position),
    }
}

/// The headers of the factors (see [`Layout::factor_header`]): a note for each factor written
/// under another header, naming its cell; an error when two factors would share a header.
pub(super) fn factor_headers(
    factors: &[(String, Position)],
) -> Result<(Vec<String>, Vec<String>), LayoutError> {
    let mut notes = Vec::new();
    let mut seen: Vec<(String, &Position)> = Vec::new();
    for (name, position) in factors {
        let header = factor_header(name);
        if header != *name {
            notes.push(format!(
                "{position}: the factor '{name}' is written as '{header}' in wells.csv and conditions.csv, \
                 since '{name}' names a column of those tables"
            ));
        }
        let key = header.to_lowercase();
        if let Some((_, first)) = seen.iter().find(|(other, _)| *other == key) {
            return Err(LayoutError::FactorHeaderClash {
                header,
                first: Box::new((*first).clone()),
                second: Box::new(position.clone()),
            });
        }
        seen.push((key, position));
    }
    Ok((factors.iter().map(|(name, _)| name.clone()).collect(), notes))
}

/// The checks both forms share once every well is known: at least one well that is not `empty`,
/// and a substrate concentration for every sample and no-enzyme control (without it their rate
/// cannot be placed on a Michaelis-Menten curve nor matched to its background).
pub(super) fn finish_layout(layout: Layout) -> Result<Layout, LayoutError> {
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
    let mut layout = layout;
    layout.standard_groups = super::standards::standard_groups(&layout)?;
    Ok(layout)
}
