//! Which standard curve serves which well: the free factors that the standard wells give values
//! to key the curves (standards for each `variant`, say); a plate whose standards give no factor a
//! value has one curve. Every sample and no-enzyme well must find the curve of its own values;
//! blanks use theirs when there is one. A curve needs two concentrations and three wells, and a
//! standard its concentration: each refused with the cell that set the well.

use super::common::spell_out_wells;
use super::*;

/// One curve: its factor values and its standard wells.
pub type StandardCurveWells = (Vec<(String, String)>, Vec<WellId>);

/// The curves a layout asks for.
#[derive(Debug, Clone, PartialEq)]
pub struct StandardGroups {
    /// The factors whose values key the curves (empty: one curve per plate).
    pub key_factors: Vec<String>,
    /// Each curve: its factor values and its standard wells (in well order).
    pub curves: Vec<StandardCurveWells>,
    /// The curve (index into `curves`) of each sample, no-enzyme and blank well that has one.
    pub curve_of_well: BTreeMap<WellId, usize>,
}

/// A group in words for messages: `the plate` or `variant = 'A', buffer = 'B'`.
fn group_words(group: &[(String, String)]) -> String {
    if group.is_empty() {
        "the plate".to_string()
    } else {
        group
            .iter()
            .map(|(name, value)| format!("{name} = '{value}'"))
            .collect::<Vec<_>>()
            .join(", ")
    }
}

/// The layout's standard curves (`None` without standard wells), or the first well at fault.
pub(super) fn standard_groups(layout: &Layout) -> Result<Option<StandardGroups>, LayoutError> {
    let standards: Vec<(&WellId, &WellSetup)> = layout.wells_with_role(Role::Standard).collect();
    if standards.is_empty() {
        return Ok(None);
    }
    let mut lacking: Vec<(&WellId, &WellSetup)> = standards
        .iter()
        .copied()
        .filter(|(_, setup)| setup.standard.is_none())
        .collect();
    lacking.sort_by_key(|(well, setup)| (setup.position.row, setup.position.column, **well));
    if let Some((well, setup)) = lacking.first() {
        let others: Vec<WellId> = lacking[1..].iter().map(|(well, _)| **well).collect();
        return Err(LayoutError::MissingStandardConcentration {
            well: **well,
            position: Box::new(setup.position.clone()),
            also: if others.is_empty() {
                String::new()
            } else {
                format!(" (likewise: {})", spell_out_wells(&others))
            },
        });
    }
    let key_factors: Vec<String> = layout
        .factor_names
        .iter()
        .filter(|name| {
            standards
                .iter()
                .any(|(_, setup)| setup.factors.get(*name).is_some_and(|value| !value.is_empty()))
        })
        .cloned()
        .collect();
    let key_of = |setup: &WellSetup| -> Vec<(String, String)> {
        key_factors
            .iter()
            .map(|name| (name.clone(), setup.factors.get(name).cloned().unwrap_or_default()))
            .collect()
    };
    let mut by_key: BTreeMap<Vec<(String, String)>, Vec<WellId>> = BTreeMap::new();
    for (well, setup) in &standards {
        by_key.entry(key_of(setup)).or_default().push(**well);
    }
    for (key, wells) in &by_key {
        let mut levels: Vec<f64> = wells
            .iter()
            .filter_map(|well| layout.wells.get(well).and_then(|setup| setup.standard))
            .collect();
        levels.sort_by(f64::total_cmp);
        levels.dedup();
        if levels.len() < 2 || wells.len() < 3 {
            let first = wells
                .iter()
                .filter_map(|well| layout.wells.get(well))
                .map(|setup| setup.position.clone())
                .min_by_key(|position| (position.row, position.column));
            return Err(LayoutError::TooFewStandards {
                group: group_words(key),
                wells: spell_out_wells(wells),
                levels: levels.len(),
                n_wells: wells.len(),
                position: Box::new(first.unwrap_or_else(|| standards[0].1.position.clone())),
            });
        }
    }
    let curves: Vec<StandardCurveWells> = by_key.into_iter().collect();
    let mut curve_of_well = BTreeMap::new();
    let mut unmatched: Vec<(&WellId, &WellSetup)> = Vec::new();
    for (well, setup) in &layout.wells {
        if !matches!(setup.role, Role::Sample | Role::NoEnzyme | Role::Blank) {
            continue;
        }
        let key = key_of(setup);
        match curves.iter().position(|(curve, _)| *curve == key) {
            Some(index) => {
                curve_of_well.insert(*well, index);
            }
            None if setup.role == Role::Blank => {}
            None => unmatched.push((well, setup)),
        }
    }
    unmatched.sort_by_key(|(well, setup)| (setup.position.row, setup.position.column, **well));
    if let Some((well, setup)) = unmatched.first() {
        return Err(LayoutError::NoStandardCurve {
            well: **well,
            group: group_words(&key_of(setup)),
            available: curves
                .iter()
                .map(|(key, _)| group_words(key))
                .collect::<Vec<_>>()
                .join("; "),
            position: Box::new(setup.position.clone()),
        });
    }
    Ok(Some(StandardGroups {
        key_factors,
        curves,
        curve_of_well,
    }))
}
