//! Wells a person leaves out, with the reason (a bubble, a pipetting error): read from a table
//! given with `--exclude FILE` (a header row with `well` and `reason` columns, then one well per
//! row) or from the layout's `exclude` column (its cell holds the reason; an empty cell keeps the
//! well). Both become [`ExcludedWell`]s naming where they were asked for, and are checked against
//! the plate and the layout before the analysis uses them ([`check_exclusions`]).

use std::collections::BTreeMap;

use crate::config::{resolve_excluded_well, ExcludedWell};
use crate::core::cells::{CellGrid, Source};
use crate::core::plate::{PlateFormat, WellId};
use crate::files::input::InputFile;
use crate::files::sheet::{read_input_cells, MergedCells, SheetReadError};

use super::{Layout, Role};

/// The layout column holding the reason a well is left out.
pub const EXCLUDE_COLUMN: &str = "exclude";

/// The most wells an exclusion table may name (a 3456-well plate's worth).
pub const MAX_EXCLUSIONS: usize = 3456;

/// Why exclusions could not be read or do not fit the plate. Each names the file and row (or the
/// settings entry) and the well.
#[derive(Debug, thiserror::Error)]
pub enum ExclusionError {
    /// The file could not be read into cells.
    #[error(transparent)]
    Read(#[from] SheetReadError),
    /// No header row with `well` and `reason`.
    #[error("{input}: no header row with a 'well' and a 'reason' column (an exclusion table is `well,reason` then one well per row)")]
    NoHeader {
        /// The file and sheet.
        input: Source,
    },
    /// A row whose well or reason cannot be used.
    #[error("{0}")]
    BadEntry(String),
    /// More rows than any plate has wells.
    #[error("{input}: more than {MAX_EXCLUSIONS} wells excluded")]
    TooMany {
        /// The file and sheet.
        input: Source,
    },
    /// A well beyond the plate.
    #[error("{origin}: well {well} is off the {plate}-well plate")]
    OffPlate {
        /// Where it was asked for.
        origin: String,
        /// The well.
        well: WellId,
        /// The plate's size.
        plate: usize,
    },
    /// A well the layout does not use.
    #[error("{origin}: well {well} is not in the layout (or is empty), so there is nothing to exclude")]
    NotInLayout {
        /// Where it was asked for.
        origin: String,
        /// The well.
        well: WellId,
    },
    /// The same well excluded twice with different reasons.
    #[error("{origin}: well {well} is already excluded ({first}) with another reason")]
    Twice {
        /// Where the second was asked for.
        origin: String,
        /// The well.
        well: WellId,
        /// Where the first was asked for.
        first: String,
    },
}

/// Reads an exclusion table (`well`, `reason`; other columns are ignored).
pub fn read_exclusion_table(input: &InputFile) -> Result<Vec<ExcludedWell>, ExclusionError> {
    let grid = read_input_cells(input, None, MergedCells::Fill)?;
    parse_exclusion_table(&grid)
}

/// Parses an exclusion table's cells (see [`read_exclusion_table`]).
pub fn parse_exclusion_table(grid: &CellGrid) -> Result<Vec<ExcludedWell>, ExclusionError> {
    let header = (0..grid.n_rows()).find_map(|row| {
        let names: Vec<String> = grid
            .row(row)
            .map(|cell| cell.as_text().trim().to_lowercase())
            .collect();
        let well = names.iter().position(|name| name == "well")?;
        let reason = names.iter().position(|name| name == "reason")?;
        Some((row, well, reason))
    });
    let Some((header_row, well_column, reason_column)) = header else {
        return Err(ExclusionError::NoHeader {
            input: grid.source.clone(),
        });
    };
    let mut exclusions = Vec::new();
    for row in header_row + 1..grid.n_rows() {
        let well = grid.cell(row, well_column).as_text();
        if grid.row_is_blank(row) || well.trim().starts_with('#') {
            continue;
        }
        if exclusions.len() == MAX_EXCLUSIONS {
            return Err(ExclusionError::TooMany {
                input: grid.source.clone(),
            });
        }
        let origin = grid.position(row, Some(well_column)).to_string();
        let reason = grid.cell(row, reason_column).as_text();
        exclusions.push(resolve_excluded_well(&well, &reason, &origin).map_err(ExclusionError::BadEntry)?);
    }
    Ok(exclusions)
}

/// Takes the layout's `exclude` column (any case) out of its factors: each non-empty cell leaves
/// its well out with the cell's text as the reason.
pub fn take_exclude_column(layout: &mut Layout) -> Vec<ExcludedWell> {
    let Some(name) = layout
        .factor_names
        .iter()
        .find(|name| name.trim().eq_ignore_ascii_case(EXCLUDE_COLUMN))
        .cloned()
    else {
        return Vec::new();
    };
    layout.factor_names.retain(|factor| *factor != name);
    let mut exclusions = Vec::new();
    for (well, setup) in &mut layout.wells {
        let reason = setup.factors.remove(&name).unwrap_or_default();
        if !reason.trim().is_empty() {
            exclusions.push(ExcludedWell {
                well: *well,
                reason: reason.trim().to_string(),
                origin: format!("{} (layout column '{name}')", setup.position),
            });
        }
    }
    exclusions
}

/// Checks exclusions against the plate and the layout: each well on the plate, in the layout and
/// not `empty`, and named once (or again with the same reason). Returns them by well.
pub fn check_exclusions(
    exclusions: &[ExcludedWell],
    plate: PlateFormat,
    layout: &Layout,
) -> Result<BTreeMap<WellId, ExcludedWell>, ExclusionError> {
    let mut by_well: BTreeMap<WellId, ExcludedWell> = BTreeMap::new();
    for exclusion in exclusions {
        if !plate.contains(exclusion.well) {
            return Err(ExclusionError::OffPlate {
                origin: exclusion.origin.clone(),
                well: exclusion.well,
                plate: plate.n_wells(),
            });
        }
        let in_layout = layout
            .wells
            .get(&exclusion.well)
            .is_some_and(|setup| setup.role != Role::Empty);
        if !in_layout {
            return Err(ExclusionError::NotInLayout {
                origin: exclusion.origin.clone(),
                well: exclusion.well,
            });
        }
        match by_well.get(&exclusion.well) {
            Some(first) if first.reason != exclusion.reason => {
                return Err(ExclusionError::Twice {
                    origin: exclusion.origin.clone(),
                    well: exclusion.well,
                    first: first.origin.clone(),
                })
            }
            Some(_) => {}
            None => {
                by_well.insert(exclusion.well, exclusion.clone());
            }
        }
    }
    Ok(by_well)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::files::sheet::read_text_cells;
    use crate::layout::parse_layout;

    fn table(text: &str) -> Result<Vec<ExcludedWell>, ExclusionError> {
        parse_exclusion_table(&read_text_cells(text.as_bytes(), "exclude.csv").unwrap())
    }

    #[test]
    fn a_table_gives_wells_reasons_and_rows() {
        let exclusions =
            table("# bad wells seen at the bench\nwell,reason\nC7,bubble\n\nd12, pipetting error \n")
                .unwrap();
        assert_eq!(exclusions.len(), 2);
        assert_eq!(exclusions[0].well, WellId::parse("C7").unwrap());
        assert_eq!(exclusions[1].reason, "pipetting error");
        assert!(
            exclusions[1].origin.contains("exclude.csv, row 5"),
            "{}",
            exclusions[1].origin
        );
    }

    #[test]
    fn bad_tables_are_refused_naming_the_row() {
        let message = table("well,reason\nC7,bubble\nZZ99x,bubble\n")
            .unwrap_err()
            .to_string();
        assert!(
            message.contains("row 3") && message.contains("ZZ99x"),
            "{message}"
        );
        let message = table("well,reason\nC7,\n").unwrap_err().to_string();
        assert!(
            message.contains("row 2") && message.contains("without a reason"),
            "{message}"
        );
        let message = table("well,why\nC7,bubble\n").unwrap_err().to_string();
        assert!(
            message.contains("exclude.csv") && message.contains("'reason'"),
            "{message}"
        );
    }

    #[test]
    fn the_layout_column_is_taken_out_of_the_factors_and_checked() {
        let grid = read_text_cells(
            b"well,role,substrate [uM],exclude\nA1:A2,sample,10,\nA3,sample,10,tip touched the well\n",
            "layout.csv",
        )
        .unwrap();
        let mut layout = parse_layout(&grid, PlateFormat::Wells96).unwrap();
        let exclusions = take_exclude_column(&mut layout);
        assert!(layout.factor_names.is_empty());
        assert_eq!(exclusions.len(), 1);
        assert_eq!(exclusions[0].reason, "tip touched the well");
        assert!(
            exclusions[0].origin.contains("layout.csv, row 3"),
            "{}",
            exclusions[0].origin
        );
        let checked = check_exclusions(&exclusions, PlateFormat::Wells96, &layout).unwrap();
        assert_eq!(checked.len(), 1);
        let off = table("well,reason\nM1,bubble\n").unwrap();
        let message = check_exclusions(&off, PlateFormat::Wells96, &layout)
            .unwrap_err()
            .to_string();
        assert!(
            message.contains("M1") && message.contains("off the 96-well plate"),
            "{message}"
        );
        let absent = table("well,reason\nH12,bubble\n").unwrap();
        let message = check_exclusions(&absent, PlateFormat::Wells96, &layout)
            .unwrap_err()
            .to_string();
        assert!(
            message.contains("H12") && message.contains("not in the layout"),
            "{message}"
        );
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(128))]

        /// Any text: no panic; an error names the file; every entry read has its well, a reason
        /// and the row it came from.
        #[test]
        fn any_text_is_read_or_refused_naming_the_file(text in "(well,reason\n)?([A-Z]{0,2}[0-9]{0,3}(,[ a-z]{0,8})?\n){0,6}") {
            match table(&text) {
                Ok(exclusions) => {
                    for exclusion in exclusions {
                        proptest::prop_assert!(!exclusion.reason.is_empty());
                        proptest::prop_assert!(exclusion.origin.contains("exclude.csv, row"));
                    }
                }
                Err(error) => proptest::prop_assert!(error.to_string().contains("exclude.csv"), "{}", error),
            }
        }

        /// Written tables read back to the same wells and reasons.
        #[test]
        fn written_tables_read_back(rows in proptest::collection::vec((0u16..16, 0u16..24, "[a-z][a-z ]{0,10}[a-z]"), 0..10)) {
            let mut text = String::from("well,reason\n");
            for (row, column, reason) in &rows {
                text.push_str(&format!("{},{reason}\n", WellId::new(*row, *column)));
            }
            let exclusions = table(&text).unwrap();
            proptest::prop_assert_eq!(exclusions.len(), rows.len());
            for (exclusion, (row, column, reason)) in exclusions.iter().zip(&rows) {
                proptest::prop_assert_eq!(exclusion.well, WellId::new(*row, *column));
                proptest::prop_assert_eq!(&exclusion.reason, reason);
            }
        }
    }
}
