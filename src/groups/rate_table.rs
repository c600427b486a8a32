//! Rate tables for `platekin fit`: reads a rate table from anywhere (a run's `conditions.csv` or
//! `wells.csv`, or a user's CSV/XLSX with `substrate` and `rate` columns) into groups of points and
//! fits each group with the same code a run uses.
//!
//! Columns are recognised by their name before any bracketed unit, case-insensitively:
//! `substrate`, `rate` (or a run's `rate_mean`), optional `inhibitor`, `enzyme`, `sd` (or
//! `rate_sd`; for a run's condition means `rate_sem`, the spread of a mean), `substrate_sensitivity`
//! (a run's `d rate / d ln S0`, which shapes the pipetting part of `rate-se` weights), `role` (only
//! `sample` rows are fitted), `used` (a run's `false` rows are left out).
//! Every other text column is a factor that splits groups; a run's bookkeeping columns (`well`,
//! `rate_se`, `flags`, ...) are not factors. Units in brackets are optional: unitless data is fitted
//! and reported unitless; a unit that is not a concentration where one is needed is an error.

use std::collections::BTreeSet;
use std::str::FromStr;

use super::{
    fit_points, pooled_extra_variance, replicate_sds, request_uses_inhibitor, FitPoint, GroupFit, GroupKey,
    GroupUnits, GroupValue, LeftOut, LeftOutPlace, LeftOutReason,
};
use crate::config::FitSettings;
use crate::core::cells::{Cell, CellGrid, Position};
use crate::core::units::{split_header_unit, ConcentrationUnit, RateUnit};
use crate::files::input::InputFile;
use crate::files::sheet::{number_shape, read_input_cells, MergedCells, NumberShape, SheetReadError};
use crate::layout::{is_reserved_column_name, FACTOR_PREFIX};

/// Why a rate table could not be read or fitted.
#[derive(Debug, thiserror::Error)]
pub enum RateTableError {
    #[error(transparent)]
    Read(#[from] SheetReadError),
    #[error("{source_name}: the table is empty (no header row)")]
    Empty { source_name: String },
    #[error("{position}: no '{column}' column (the columns are: {found})")]
    MissingColumn {
        position: Box<Position>,
        column: &'static str,
        found: String,
    },
    #[error("{position}: the {column} cell holds '{text}', not a number{mark_note}")]
    NotANumber {
        position: Box<Position>,
        column: String,
        text: String,
        /// Why a number-like text is none: the file's decimal mark, or "".
        mark_note: String,
    },
    #[error("{position}: the {column} cell holds {value}; a concentration is a number >= 0")]
    NegativeConcentration {
        position: Box<Position>,
        column: String,
        value: f64,
    },
    #[error("{first} and {second}: two columns could be the {what} column; keep one")]
    DuplicateColumn {
        first: Box<Position>,
        second: Box<Position>,
        what: &'static str,
    },
    #[error("{position}: unit '{unit}' of column '{column}' is not a concentration unit ({reason})")]
    UnknownUnit {
        position: Box<Position>,
        column: String,
        unit: String,
        reason: String,
    },
    #[error("{source_name}: no row holds both a substrate and a rate")]
    NoRows { source_name: String },
}

/// What a rate table was recognised as.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TableKind {
    /// A run's `conditions.csv` (means; their spread is the SEM).
    RunConditions,
    /// A run's `wells.csv`.
    RunWells,
    /// Any other table with `substrate` and `rate` columns.
    RateTable,
}

impl TableKind {
    /// The words `fit.json` and the summary use.
    pub fn words(self) -> &'static str {
        match self {
            TableKind::RunConditions => "run conditions",
            TableKind::RunWells => "run wells",
            TableKind::RateTable => "rate table",
        }
    }
}

/// One group of rows of a rate table.
#[derive(Debug, Clone, PartialEq)]
pub struct TableGroup {
    pub group: GroupKey,
    pub points: Vec<FitPoint>,
    pub left_out: Vec<LeftOut>,
    pub enzyme: Option<f64>,
}

/// A rate table as read.
#[derive(Debug, Clone, PartialEq)]
pub struct RateTable {
    pub source: String,
    /// What the columns were recognised as.
    pub kind: TableKind,
    pub groups: Vec<TableGroup>,
    pub units: GroupUnits,
    pub enzyme_unit: Option<ConcentrationUnit>,
    /// Seconds in the time of the rate unit (60 for `rate [uM/min]`, a run's `--rate-unit`): kcat
    /// and kcat/Km are brought to per second by it.
    pub rate_time_s: f64,
}

struct Columns {
    substrate: usize,
    rate: usize,
    inhibitor: Option<usize>,
    enzyme: Option<usize>,
    sd: Option<usize>,
    se: Option<usize>,
    /// A run's `d rate / d ln S0` (the pipetting part of its weights).
    substrate_sensitivity: Option<usize>,
    role: Option<usize>,
    used: Option<usize>,
    factors: Vec<(usize, String)>,
}

fn concentration_unit(
    grid: &CellGrid,
    header_row: usize,
    column: usize,
    header: &str,
) -> Result<Option<ConcentrationUnit>, RateTableError> {
    match split_header_unit(header).1 {
        None | Some("") => Ok(None),
        Some(unit) => {
            ConcentrationUnit::from_str(unit)
                .map(Some)
                .map_err(|reason| RateTableError::UnknownUnit {
                    position: Box::new(grid.position(header_row, Some(column))),
                    column: header.to_string(),
                    unit: unit.to_string(),
                    reason,
                })
        }
    }
}

fn number(grid: &CellGrid, row: usize, column: usize, header: &str) -> Result<Option<f64>, RateTableError> {
    match grid.cell(row, column) {
        Cell::Empty => Ok(None),
        Cell::Number(value) | Cell::Duration(value) => Ok(Some(value)),
        Cell::Text(text) if text.eq_ignore_ascii_case("nan") || text.eq_ignore_ascii_case("null") => Ok(None),
        Cell::Text(text) => Err(RateTableError::NotANumber {
            position: Box::new(grid.position(row, Some(column))),
            column: header.to_string(),
            text: text.to_string(),
            mark_note: if number_shape(text) == NumberShape::NotANumber {
                String::new()
            } else {
                format!(
                    " in this file, whose decimal mark is {}",
                    grid.decimal_mark.describe()
                )
            },
        }),
    }
}

/// A concentration cell: a number >= 0, or none.
fn concentration(
    grid: &CellGrid,
    row: usize,
    column: usize,
    header: &str,
) -> Result<Option<f64>, RateTableError> {
    match number(grid, row, column, header)? {
        Some(value) if value < 0.0 => Err(RateTableError::NegativeConcentration {
            position: Box::new(grid.position(row, Some(column))),
            column: header.to_string(),
            value,
        }),
        other => Ok(other),
    }
}

/// A factor's value as a table cell holds it, without the `'` a spreadsheet-safe writer put
/// before text that starts like a formula (`render::tables::spreadsheet_safe`).
fn factor_value(cell: Cell) -> String {
    let text = cell.as_text();
    match text.strip_prefix('\'') {
        Some(rest) if rest.starts_with(['=', '+', '-', '@', '\t', '\r']) => rest.to_string(),
        _ => text,
    }
}

/// Reads a rate table (see the module docs) into groups; the inhibitor joins the group key unless
/// `settings` asks for an inhibitor model (or auto) and the group varies it.
pub fn read_rate_table(
    input: &InputFile,
    sheet: Option<&str>,
    settings: &FitSettings,
) -> Result<RateTable, RateTableError> {
    let grid = read_input_cells(input, sheet, MergedCells::Fill)?;
    let source = grid.source.to_string();
    let Some(header_row) = (0..grid.n_rows()).find(|&row| !grid.row_is_blank(row)) else {
        return Err(RateTableError::Empty { source_name: source });
    };
    let headers: Vec<String> = (0..grid.row_width(header_row))
        .map(|column| grid.cell(header_row, column).as_text())
        .collect();
    let names: Vec<String> = headers
        .iter()
        .map(|h| split_header_unit(h).0.to_ascii_lowercase())
        .collect();
    let find = |wanted: &[&str]| names.iter().position(|name| wanted.contains(&name.as_str()));
    // Two columns of one meaning: which one holds the values cannot be told.
    for (what, wanted) in [
        ("substrate", &["substrate"][..]),
        ("rate", &["rate", "rate_mean"]),
        ("inhibitor", &["inhibitor"]),
        ("enzyme", &["enzyme"]),
        ("sd", &["sd", "rate_sd"]),
    ] {
        let mut matching = names
            .iter()
            .enumerate()
            .filter(|(_, name)| wanted.contains(&name.as_str()))
            .map(|(index, _)| index);
        if let (Some(first), Some(second)) = (matching.next(), matching.next()) {
            return Err(RateTableError::DuplicateColumn {
                first: Box::new(grid.position(header_row, Some(first))),
                second: Box::new(grid.position(header_row, Some(second))),
                what,
            });
        }
    }
    let missing = |column: &'static str| RateTableError::MissingColumn {
        position: Box::new(grid.position(header_row, None)),
        column,
        found: headers.join(", "),
    };
    let substrate = find(&["substrate"]).ok_or_else(|| missing("substrate"))?;
    let rate = find(&["rate", "rate_mean"]).ok_or_else(|| missing("rate"))?;
    let kind = match names[rate].as_str() {
        "rate_mean" => TableKind::RunConditions,
        _ if find(&["well"]).is_some() && find(&["used"]).is_some() => TableKind::RunWells,
        _ => TableKind::RateTable,
    };
    let mut columns = Columns {
        substrate,
        rate,
        inhibitor: find(&["inhibitor"]),
        enzyme: find(&["enzyme"]),
        // A run's condition rows are means, whose spread is their standard error.
        sd: if kind == TableKind::RunConditions {
            find(&["rate_sem"]).or_else(|| find(&["sd", "rate_sd"]))
        } else {
            find(&["sd", "rate_sd"])
        },
        se: find(&["rate_se", "se"]),
        substrate_sensitivity: find(&["substrate_sensitivity"]),
        role: find(&["role"]),
        used: find(&["used"]),
        factors: Vec::new(),
    };
    let taken: Vec<usize> = [
        Some(substrate),
        Some(rate),
        columns.inhibitor,
        columns.enzyme,
        columns.sd,
        columns.se,
        columns.substrate_sensitivity,
        // Never a factor, even when the mean's standard error is the weight.
        find(&["rate_sd", "sd"]),
    ]
    .into_iter()
    .flatten()
    .collect();
    for (index, name) in names.iter().enumerate() {
        // A run's bookkeeping columns (`well`, `flags`, ...) are never factors.
        if !taken.contains(&index) && !is_reserved_column_name(name) && !name.is_empty() {
            // A run writes a factor named like one of its columns as `factor:NAME`.
            let header = headers[index].trim();
            let factor = header.strip_prefix(FACTOR_PREFIX).unwrap_or(header);
            columns.factors.push((index, factor.to_string()));
        }
    }
    let substrate_unit = concentration_unit(&grid, header_row, substrate, &headers[substrate])?;
    let inhibitor_unit = match columns.inhibitor {
        Some(column) => concentration_unit(&grid, header_row, column, &headers[column])?,
        None => None,
    };
    let enzyme_unit = match columns.enzyme {
        Some(column) => concentration_unit(&grid, header_row, column, &headers[column])?,
        None => None,
    };
    let rate_unit = split_header_unit(&headers[rate]).1.unwrap_or("").to_string();
    // A concentration per time (`uM/s`, or `nM/min` from a run's `--rate-unit`).
    let rate_unit_parsed = RateUnit::from_str(&rate_unit).ok();
    let rate_concentration_unit = rate_unit_parsed.map(|unit| unit.concentration).or_else(|| {
        // Spellings with a slash of their own (`mol/L/s`), per second.
        rate_unit
            .strip_suffix("/s")
            .and_then(|concentration| ConcentrationUnit::from_str(concentration).ok())
    });
    let rate_time_s = rate_unit_parsed.map_or(1.0, |unit| unit.time.in_seconds());

    // Rows into provisional groups by factors and enzyme.
    let mut groups: Vec<TableGroup> = Vec::new();
    let mut any_row = false;
    for row in header_row + 1..grid.n_rows() {
        if grid.row_is_blank(row) {
            continue;
        }
        if let Some(column) = columns.role {
            let role = grid.cell(row, column).as_text();
            if !role.is_empty() && !role.eq_ignore_ascii_case("sample") {
                continue;
            }
        }
        let label = format!("row {}", row + 1);
        let mut key = GroupKey::default();
        for (column, name) in &columns.factors {
            key.insert(
                name.clone(),
                GroupValue::Text(factor_value(grid.cell(row, *column))),
            );
        }
        let enzyme = match columns.enzyme {
            Some(column) => concentration(&grid, row, column, &headers[column])?,
            None => None,
        };
        if let (Some(column), Some(value)) = (columns.enzyme, enzyme) {
            key.insert(headers[column].trim().to_string(), GroupValue::Number(value));
        }
        let substrate_value = concentration(&grid, row, columns.substrate, &headers[columns.substrate])?;
        let rate_value = number(&grid, row, columns.rate, &headers[columns.rate])?;
        let inhibitor_value = match columns.inhibitor {
            Some(column) => concentration(&grid, row, column, &headers[column])?,
            None => None,
        };
        let sd_value = match columns.sd {
            Some(column) => number(&grid, row, column, &headers[column])?,
            None => None,
        };
        let se_value = match columns.se {
            Some(column) => number(&grid, row, column, &headers[column])?,
            None => None,
        };
        let sensitivity_value = match columns.substrate_sensitivity {
            Some(column) => number(&grid, row, column, &headers[column])?,
            None => None,
        };
        let used = columns
            .used
            .is_none_or(|column| !grid.cell(row, column).as_text().eq_ignore_ascii_case("false"));
        let position = groups.iter().position(|g| g.group == key);
        let group = match position {
            Some(index) => &mut groups[index],
            None => {
                groups.push(TableGroup {
                    group: key,
                    points: Vec::new(),
                    left_out: Vec::new(),
                    enzyme,
                });
                let last = groups.len() - 1;
                &mut groups[last]
            }
        };
        match (used, substrate_value, rate_value) {
            (true, Some(substrate), Some(rate)) => {
                any_row = true;
                group.points.push(FitPoint {
                    label,
                    well: None,
                    window: None,
                    substrate,
                    inhibitor: inhibitor_value.unwrap_or(0.0),
                    rate,
                    sd: sd_value,
                    se: se_value,
                    background: None,
                    rate_per_chord: 1.0,
                    substrate_sensitivity: sensitivity_value,
                    law_feedback: None,
                });
            }
            (false, ..) => group.left_out.push(LeftOut {
                place: LeftOutPlace::Row(row + 1),
                reason: LeftOutReason::NotUsedInRun,
            }),
            _ => group.left_out.push(LeftOut {
                place: LeftOutPlace::Row(row + 1),
                reason: LeftOutReason::NoSubstrateOrRate,
            }),
        }
    }
    if !any_row {
        return Err(RateTableError::NoRows { source_name: source });
    }
    // Split by inhibitor where the request does not use it.
    let mut split = Vec::new();
    for group in groups {
        let levels = crate::fit::models::RateData::distinct(
            &group.points.iter().map(|p| p.inhibitor).collect::<Vec<_>>(),
        );
        if levels.len() <= 1 || request_uses_inhibitor(settings.model) {
            split.push(group);
            continue;
        }
        for level in levels {
            let mut key = group.group.clone();
            let name = columns
                .inhibitor
                .map_or("inhibitor".to_string(), |c| headers[c].trim().to_string());
            key.insert(name, GroupValue::Number(level));
            let points: Vec<FitPoint> = group
                .points
                .iter()
                .filter(|p| p.inhibitor == level)
                .cloned()
                .collect();
            split.push(TableGroup {
                group: key,
                points,
                left_out: Vec::new(),
                enzyme: group.enzyme,
            });
        }
    }
    Ok(RateTable {
        source,
        kind,
        groups: split,
        units: GroupUnits {
            rate_unit,
            rate_concentration_unit,
            substrate_unit,
            inhibitor_unit,
            missing_unit_text: String::new(),
            enzyme: None,
            enzyme_mass: None,
        },
        enzyme_unit,
        rate_time_s,
    })
}

/// Fits every group of a rate table.
pub fn fit_table(
    table: &RateTable,
    settings: &FitSettings,
    progress: &mut dyn FnMut(usize, usize),
) -> Vec<GroupFit> {
    // The table's groups share the pooled extra variance as a run's plate does, so that a run's
    // wells.csv refits as the run fitted it.
    let points: Vec<Vec<FitPoint>> = table
        .groups
        .iter()
        .map(|group| {
            let mut points = group.points.clone();
            replicate_sds(&mut points);
            points
        })
        .collect();
    let slices: Vec<&[FitPoint]> = points.iter().map(Vec::as_slice).collect();
    let pooled = pooled_extra_variance(&slices);
    table
        .groups
        .iter()
        .zip(&points)
        .map(|(group, points)| {
            let units = GroupUnits {
                enzyme: match (group.enzyme, table.enzyme_unit) {
                    (Some(value), Some(unit)) => Some((value, unit)),
                    _ => None,
                },
                ..table.units.clone()
            };
            let mut fit = fit_points(
                group.group.clone(),
                points,
                group.left_out.clone(),
                &units,
                settings,
                None,
                pooled.as_ref(),
                progress,
            );
            // kcat = Vmax/[E] is per the rate's time; per second, as a run reports it.
            super::units::turnover_per_second(&mut fit.parameters, table.rate_time_s);
            fit
        })
        .collect()
}

/// The factor names of a table, for tests and callers that list them.
pub fn factor_names(table: &RateTable) -> Vec<String> {
    let names: BTreeSet<&String> = table.groups.iter().flat_map(|g| g.group.values.keys()).collect();
    names.into_iter().cloned().collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::{ModelRequest, RateModelKind};
    use crate::files::input::InputRole;
    use std::path::{Path, PathBuf};

    fn read_table(path: &Path, settings: &FitSettings) -> Result<RateTable, RateTableError> {
        read_rate_table(&InputFile::read(InputRole::Table, path).unwrap(), None, settings)
    }

    fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
        let path = dir.join(name);
        std::fs::write(&path, text).unwrap();
        path
    }

    #[test]
    fn a_user_table_with_an_inhibitor_matrix_gets_one_global_fit() {
        let dir = tempfile::tempdir().unwrap();
        let mut text = String::from("substrate [uM],inhibitor [uM],rate [uM/s],enzyme [nM],variant\n");
        for s in [10.0, 25.0, 50.0, 100.0, 200.0, 400.0] {
            for i in [0.0, 5.0, 10.0, 20.0] {
                let v = 10.0 * s / (50.0 * (1.0 + i / 10.0) + s);
                text.push_str(&format!(
                    "{s},{i},{},2,wt\n",
                    v * (1.0 + 0.003 * ((s + i) % 3.0 - 1.0))
                ));
            }
        }
        let path = write(dir.path(), "rates.csv", &text);
        let settings = FitSettings::default();
        let table = read_table(&path, &settings).unwrap();
        assert_eq!(table.kind, TableKind::RateTable);
        assert_eq!(table.groups.len(), 1);
        assert_eq!(
            factor_names(&table),
            vec!["enzyme [nM]".to_string(), "variant".to_string()]
        );
        let fits = fit_table(&table, &settings, &mut |_, _| {});
        let fit = &fits[0];
        assert_eq!(fit.model, RateModelKind::Competitive, "{:?}", fit.model_choice);
        assert_eq!(fit.models_tried.len(), 5);
        let ki = &fit.parameters["Ki"];
        assert!((ki.value / 10.0 - 1.0).abs() < 0.05, "{ki:?}");
        assert_eq!(ki.unit, "uM");
        // kcat = Vmax / [E] = 10 uM/s / 2 nM = 5000 /s.
        assert!((fit.parameters["kcat"].value / 5000.0 - 1.0).abs() < 0.05);
        assert!(fit.parameters["kcat_over_Km"].unit == "1/(M*s)");
    }

    #[test]
    fn unitless_tables_fit_unitless_and_errors_name_the_cell() {
        let dir = tempfile::tempdir().unwrap();
        let path = write(
            dir.path(),
            "plain.csv",
            "substrate,rate\n1,0.9\n2,1.6\n4,2.4\n8,3.3\n16,3.9\n32,4.4\n",
        );
        let settings = FitSettings {
            model: Some(ModelRequest::Fixed(
                crate::fit::models::RateModelKind::MichaelisMenten,
            )),
            ..FitSettings::default()
        };
        let table = read_table(&path, &settings).unwrap();
        let fits = fit_table(&table, &settings, &mut |_, _| {});
        assert_eq!(fits[0].parameters["Km"].unit, "");
        assert_eq!(fits[0].parameters["Vmax"].unit, "");
        let bad = write(dir.path(), "bad.csv", "substrate,rate\n1,0.9\n2,fast\n");
        let error = read_table(&bad, &settings).unwrap_err().to_string();
        assert!(error.contains("row 3") && error.contains("fast"), "{error}");
        let no_rate = write(dir.path(), "norate.csv", "substrate,speed\n1,0.9\n");
        let error = read_table(&no_rate, &settings).unwrap_err().to_string();
        assert!(error.contains("'rate'"), "{error}");
        let bad_unit = write(dir.path(), "unit.csv", "substrate [mg],rate\n1,0.9\n");
        let error = read_table(&bad_unit, &settings).unwrap_err().to_string();
        assert!(error.contains("mg"), "{error}");
        // Replicate-SD weighting on single points names the rows without an SD.
        let weighted = FitSettings {
            weighting: crate::fit::models::Weighting::ReplicateSd,
            ..settings.clone()
        };
        let fits = fit_table(&table, &weighted, &mut |_, _| {});
        let error = fits[0].error.as_deref().unwrap_or("");
        assert!(
            error.contains("row 2") && error.contains("replicate-SD"),
            "{error}"
        );
    }
}
