//! The tidy layout form: a header row holding `well`, then one line per well, rectangle or list.

use std::collections::{BTreeSet, HashMap};

use super::common::*;
use super::*;
use crate::core::cells::Cell;
use crate::core::plate::{parse_well_selection, WellId};
use crate::core::units::split_header_unit;

/// What a tidy column holds.
#[derive(Debug, Clone)]
pub(super) enum TidyColumnKind {
    Well,
    Role,
    Quantity(Quantity, AmountUnit),
    Factor(String),
}

/// One named column of a tidy layout.
#[derive(Debug, Clone)]
pub(super) struct TidyColumn {
    index: usize,
    header: String,
    kind: TidyColumnKind,
}

/// Reads the header row of a tidy layout into its columns, refusing duplicates and bad units.
pub(super) fn tidy_columns(grid: &CellGrid, header_row: usize) -> Result<Vec<TidyColumn>, LayoutError> {
    let mut columns: Vec<TidyColumn> = Vec::new();
    // Header names are matched ignoring case, so `Variant` and `variant` are one column twice.
    let mut column_by_key: HashMap<String, usize> = HashMap::new();
    let mut units: [Option<(AmountUnit, Position)>; 4] = [None, None, None, None];
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

/// Whether a line below a tidy header is a comment: its first filled cell starts with `#` and it
/// names no well, or the `#` stands in its well cell (a line commented out). A line whose well
/// cell names wells is a layout line even when another cell starts with `#` (a compound `#7` in
/// a first column).
fn is_tidy_comment(grid: &CellGrid, row: usize, well_index: usize) -> bool {
    let Some(first) = grid.row(row).position(|cell| !cell.is_empty()) else {
        return false;
    };
    let starts_with_hash = matches!(grid.cell(row, first), Cell::Text(text) if text.starts_with('#'));
    starts_with_hash && (first == well_index || grid.cell(row, well_index).is_empty())
}

/// Parses a tidy layout whose header is at zero-based `header_row`.
pub(super) fn parse_tidy(
    grid: &CellGrid,
    header_row: usize,
    plate: PlateFormat,
) -> Result<Layout, LayoutError> {
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
    let factors: Vec<(String, Position)> = columns
        .iter()
        .filter_map(|column| match &column.kind {
            TidyColumnKind::Factor(name) => {
                Some((name.clone(), grid.position(header_row, Some(column.index))))
            }
            _ => None,
        })
        .collect();
    let (factor_names, notes) = factor_headers(&factors)?;
    let unit_of = |quantity: Quantity| {
        columns.iter().find_map(|column| match column.kind {
            TidyColumnKind::Quantity(q, unit) if q == quantity => Some(unit),
            _ => None,
        })
    };

    let mut wells: BTreeMap<WellId, WellSetup> = BTreeMap::new();
    for row in header_row + 1..grid.n_rows() {
        if grid.row_is_blank(row) || is_tidy_comment(grid, row, well_index) {
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
            Cell::Text(text) => text,
            other => {
                return Err(LayoutError::BadWell {
                    text: describe_cell(other),
                    reason: "a number is not a well ID".to_string(),
                    position: Box::new(well_position),
                })
            }
        };
        let selected = parse_well_selection(well_text).map_err(|reason| LayoutError::BadWell {
            text: well_text.to_string(),
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
            standard: None,
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
                        setup.role = read_role(cell, well_text, position)?;
                    }
                }
                TidyColumnKind::Quantity(quantity, _) => {
                    *setup.quantity_mut(*quantity) =
                        read_concentration(cell, &column.header, well_text, position)?;
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
        substrate_unit: unit_of(Quantity::Substrate).and_then(AmountUnit::molar),
        enzyme_unit: unit_of(Quantity::Enzyme).and_then(AmountUnit::molar),
        enzyme_mass_unit: unit_of(Quantity::Enzyme).and_then(AmountUnit::mass),
        inhibitor_unit: unit_of(Quantity::Inhibitor).and_then(AmountUnit::molar),
        standard_unit: unit_of(Quantity::Standard).and_then(AmountUnit::molar),
        standard_groups: None,
        factor_names,
        notes,
    })
}
