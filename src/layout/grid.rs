//! The grid layout form: blocks shaped like the plate, one per variable.

use std::collections::HashMap;

use super::common::*;
use super::*;
use crate::core::cells::Cell;
use crate::core::plate::{parse_row_letters, WellId};
use crate::core::units::split_header_unit;

/// The variable a grid block sets.
#[derive(Debug, Clone)]
pub(super) enum BlockVariable {
    Role,
    Quantity(Quantity),
    Factor(String),
}

/// A well's values as the grid blocks give them, each with the cell that gave it.
#[derive(Debug, Clone)]
pub(super) struct WellDraft {
    role: Option<(Role, Position)>,
    quantities: [Option<(f64, Position)>; 4],
    factors: BTreeMap<String, (String, Position)>,
    first: Position,
}

/// Gathers the blocks of a grid layout.
#[derive(Debug, Default)]
pub(super) struct GridBuilder {
    drafts: BTreeMap<WellId, WellDraft>,
    factor_names: Vec<String>,
    factor_positions: Vec<Position>,
    factor_name_by_key: HashMap<String, String>,
    units: [Option<(AmountUnit, Position)>; 4],
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
                    self.factor_positions.push(position.clone());
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
        cell: Cell,
        position: Position,
    ) -> Result<(), LayoutError> {
        let well_name = well.to_string();
        let draft = self.drafts.entry(well).or_insert_with(|| WellDraft {
            role: None,
            quantities: [None, None, None, None],
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
    fn into_layout(self, source: Source) -> Result<Layout, LayoutError> {
        let factors: Vec<(String, Position)> = self
            .factor_names
            .iter()
            .cloned()
            .zip(self.factor_positions.iter().cloned())
            .collect();
        let (_, notes) = factor_headers(&factors)?;
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
                    standard: amount(Quantity::Standard),
                    factors,
                    position: draft.first,
                };
                (well, setup)
            })
            .collect();
        let unit = |quantity: Quantity| self.units[quantity.index()].as_ref().map(|(unit, _)| *unit);
        Ok(Layout {
            source,
            form: LayoutForm::Grid,
            wells,
            substrate_unit: unit(Quantity::Substrate).and_then(AmountUnit::molar),
            enzyme_unit: unit(Quantity::Enzyme).and_then(AmountUnit::molar),
            enzyme_mass_unit: unit(Quantity::Enzyme).and_then(AmountUnit::mass),
            inhibitor_unit: unit(Quantity::Inhibitor).and_then(AmountUnit::molar),
            standard_unit: unit(Quantity::Standard).and_then(AmountUnit::molar),
            standard_groups: None,
            factor_names,
            notes,
        })
    }
}

/// The row letters of a line that looks like a plate row (`B` then values), if it does.
pub(super) fn plate_row_line(grid: &CellGrid, row: usize) -> Option<(u16, String)> {
    match grid.cell(row, 0) {
        Cell::Text(text) => parse_row_letters(text).map(|plate_row| (plate_row, text.to_string())),
        _ => None,
    }
}

/// Parses a grid layout.
pub(super) fn parse_grid(grid: &CellGrid, plate: PlateFormat) -> Result<Layout, LayoutError> {
    let mut builder = GridBuilder::default();
    let mut seen_block = false;
    let mut row = 0;
    while row < grid.n_rows() {
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
    finish_layout(builder.into_layout(grid.source.clone())?)
}

/// Reads the plate rows of one block starting at zero-based `first_row`; returns the first row
/// after the block (a blank line, a line that is no plate row, or the next block's name line).
pub(super) fn parse_block(
    grid: &CellGrid,
    plate: PlateFormat,
    builder: &mut GridBuilder,
    variable: &BlockVariable,
    header: &str,
    first_row: usize,
    column_count: usize,
) -> Result<usize, LayoutError> {
    let mut row = first_row;
    while row < grid.n_rows() && !grid.row_is_blank(row) {
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
