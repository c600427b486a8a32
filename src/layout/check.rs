//! The layout checked against the wells the data hold, both ways: layout wells the data lack are
//! refused (or left out, when allowed), and data wells with readings the layout does not name are
//! said, since they are not analysed.

use std::collections::BTreeSet;

use super::common::spell_out_wells;
use super::*;
use crate::core::plate::WellId;

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

/// Notes for the run: the layout's own ([`Layout::notes`]), and the wells that hold readings in
/// the data but are not in the layout, which are not analysed.
pub fn wells_outside_layout(layout: &Layout, wells_with_readings: &BTreeSet<WellId>) -> Vec<String> {
    let mut notes = layout.notes.clone();
    let outside: Vec<WellId> = wells_with_readings
        .iter()
        .filter(|well| !layout.wells.contains_key(well))
        .copied()
        .collect();
    if !outside.is_empty() {
        notes.push(format!(
            "{}: {} well(s) of the data hold readings but are not in the layout and are not analysed: {}",
            layout.source,
            outside.len(),
            spell_out_wells(&outside)
        ));
    }
    notes
}
