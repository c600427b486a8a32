//! `platekin fit`: reads a rate table from anywhere (a run's `conditions.csv` or `wells.csv`, or a
//! user's CSV/XLSX with `substrate` and `rate` columns), fits each group with the same code a run
//! uses, and renders `fit.json` and a summary.
//!
//! Columns are recognised by their name before any bracketed unit, case-insensitively:
//! `substrate`, `rate` (or a run's `rate_mean`), optional `inhibitor`, `enzyme`, `sd` (or
//! `rate_sd`; for a run's condition means `rate_sem`, the spread of a mean), `role` (only `sample` rows are fitted), `used` (a run's `false` rows are left out).
//! Every other text column is a factor that splits groups; a run's bookkeeping columns (`well`,
//! `rate_se`, `flags`, ...) are not factors. Units in brackets are optional: unitless data is fitted
//! and reported unitless; a unit that is not a concentration where one is needed is an error.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::str::FromStr;

use serde_json::{json, Map, Value};

use crate::cells::{Cell, CellGrid, Position};
use crate::groups::{fit_points, request_uses_inhibitor, FitPoint, GroupFit, GroupFitSettings, GroupUnits};
use crate::output::{write_outputs, OutputError, OutputFile};
use crate::sheet_reader::{read_cells, SheetReadError};
use crate::units::{split_header_unit, ConcentrationUnit};

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
    #[error("{position}: the {column} cell holds '{text}', not a number")]
    NotANumber {
        position: Box<Position>,
        column: String,
        text: String,
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
    #[error(transparent)]
    Output(#[from] OutputError),
    #[error("rendering {file} failed: {message}")]
    Render { file: String, message: String },
}

/// A run's bookkeeping columns: never factors.
const NOT_FACTORS: [&str; 18] = [
    "well",
    "rate_se",
    "background",
    "intercept",
    "r2",
    "window_start",
    "window_end",
    "n_points",
    "conversion",
    "flags",
    "correction",
    "notes",
    "n",
    "n_used",
    "rate_sem",
    "cv",
    "role",
    "used",
];

/// One group of rows of a rate table.
#[derive(Debug, Clone, PartialEq)]
pub struct TableGroup {
    pub group: Map<String, Value>,
    pub points: Vec<FitPoint>,
    pub left_out: Vec<Value>,
    pub enzyme: Option<f64>,
}

/// A rate table as read.
#[derive(Debug, Clone, PartialEq)]
pub struct RateTable {
    pub source: String,
    /// What the columns were recognised as (`run conditions`, `run wells`, `rate table`).
    pub kind: &'static str,
    pub rows: Vec<(Map<String, Value>, TableGroup)>,
    pub units: GroupUnits,
    pub enzyme_unit: Option<ConcentrationUnit>,
}

struct Columns {
    substrate: usize,
    rate: usize,
    inhibitor: Option<usize>,
    enzyme: Option<usize>,
    sd: Option<usize>,
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
        Cell::Number(value) | Cell::Duration(value) => Ok(Some(*value)),
        Cell::Text(text) if text.eq_ignore_ascii_case("nan") || text.eq_ignore_ascii_case("null") => Ok(None),
        Cell::Text(text) => Err(RateTableError::NotANumber {
            position: Box::new(grid.position(row, Some(column))),
            column: header.to_string(),
            text: text.clone(),
        }),
    }
}

/// Reads a rate table (see the module docs) into groups; the inhibitor joins the group key unless
/// `settings` asks for an inhibitor model (or auto) and the group varies it.
pub fn read_rate_table(
    path: &Path,
    sheet: Option<&str>,
    settings: &GroupFitSettings,
) -> Result<RateTable, RateTableError> {
    let grid = read_cells(path, sheet)?;
    let source = grid.source.to_string();
    let Some(header_row) = (0..grid.rows.len()).find(|&row| !grid.row_is_blank(row)) else {
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
    let missing = |column: &'static str| RateTableError::MissingColumn {
        position: Box::new(grid.position(header_row, None)),
        column,
        found: headers.join(", "),
    };
    let substrate = find(&["substrate"]).ok_or_else(|| missing("substrate"))?;
    let rate = find(&["rate", "rate_mean"]).ok_or_else(|| missing("rate"))?;
    let kind = match names[rate].as_str() {
        "rate_mean" => "run conditions",
        _ if find(&["well"]).is_some() && find(&["used"]).is_some() => "run wells",
        _ => "rate table",
    };
    let mut columns = Columns {
        substrate,
        rate,
        inhibitor: find(&["inhibitor"]),
        enzyme: find(&["enzyme"]),
        // A run's condition rows are means, whose spread is their standard error.
        sd: if kind == "run conditions" {
            find(&["rate_sem"]).or_else(|| find(&["sd", "rate_sd"]))
        } else {
            find(&["sd", "rate_sd"])
        },
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
        // Never a factor, even when the mean's standard error is the weight.
        find(&["rate_sd", "sd"]),
    ]
    .into_iter()
    .flatten()
    .collect();
    for (index, name) in names.iter().enumerate() {
        if !taken.contains(&index) && !NOT_FACTORS.contains(&name.as_str()) && !name.is_empty() {
            columns.factors.push((index, headers[index].trim().to_string()));
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
    let rate_concentration_unit = rate_unit
        .strip_suffix("/s")
        .and_then(|concentration| ConcentrationUnit::from_str(concentration).ok());

    // Rows into provisional groups by factors and enzyme.
    let mut groups: Vec<TableGroup> = Vec::new();
    let mut any_row = false;
    for row in header_row + 1..grid.rows.len() {
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
        let mut key = Map::new();
        for (column, name) in &columns.factors {
            key.insert(name.clone(), Value::String(grid.cell(row, *column).as_text()));
        }
        let enzyme = match columns.enzyme {
            Some(column) => number(&grid, row, column, &headers[column])?,
            None => None,
        };
        if let (Some(column), Some(value)) = (columns.enzyme, enzyme) {
            key.insert(headers[column].trim().to_string(), json!(value));
        }
        let substrate_value = number(&grid, row, columns.substrate, &headers[columns.substrate])?;
        let rate_value = number(&grid, row, columns.rate, &headers[columns.rate])?;
        let inhibitor_value = match columns.inhibitor {
            Some(column) => number(&grid, row, column, &headers[column])?,
            None => None,
        };
        let sd_value = match columns.sd {
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
                    substrate,
                    inhibitor: inhibitor_value.unwrap_or(0.0),
                    rate,
                    sd: sd_value,
                });
            }
            (false, ..) => group
                .left_out
                .push(json!({"row": row + 1, "reason": "not used in the run"})),
            _ => group
                .left_out
                .push(json!({"row": row + 1, "reason": "no substrate or no rate"})),
        }
    }
    if !any_row {
        return Err(RateTableError::NoRows { source_name: source });
    }
    // Split by inhibitor where the request does not use it.
    let mut rows = Vec::new();
    for group in groups {
        let levels = crate::fit::models::RateData::distinct(
            &group.points.iter().map(|p| p.inhibitor).collect::<Vec<_>>(),
        );
        if levels.len() <= 1 || request_uses_inhibitor(settings.model) {
            rows.push((group.group.clone(), group));
            continue;
        }
        for level in levels {
            let mut key = group.group.clone();
            let name = columns
                .inhibitor
                .map_or("inhibitor".to_string(), |c| headers[c].trim().to_string());
            key.insert(name, json!(level));
            let points: Vec<FitPoint> = group
                .points
                .iter()
                .filter(|p| p.inhibitor == level)
                .cloned()
                .collect();
            rows.push((
                key.clone(),
                TableGroup {
                    group: key,
                    points,
                    left_out: Vec::new(),
                    enzyme: group.enzyme,
                },
            ));
        }
    }
    Ok(RateTable {
        source,
        kind,
        rows,
        units: GroupUnits {
            rate_unit,
            rate_concentration_unit,
            substrate_unit,
            inhibitor_unit,
            missing_unit_text: String::new(),
            enzyme: None,
        },
        enzyme_unit,
    })
}

/// What `platekin fit` hands back.
#[derive(Debug, Clone)]
pub struct TableFitOutcome {
    pub fits: Vec<GroupFit>,
    pub written: Vec<PathBuf>,
    pub summary: String,
}

/// Fits every group of a rate table.
pub fn fit_table(
    table: &RateTable,
    settings: &GroupFitSettings,
    progress: &mut dyn FnMut(usize, usize),
) -> Vec<GroupFit> {
    table
        .rows
        .iter()
        .map(|(key, group)| {
            let units = GroupUnits {
                enzyme: match (group.enzyme, table.enzyme_unit) {
                    (Some(value), Some(unit)) => Some((value, unit)),
                    _ => None,
                },
                ..table.units.clone()
            };
            // Replicate SDs from repeated rows where the table gives none.
            let mut points = group.points.clone();
            crate::groups::replicate_sds(&mut points);
            fit_points(
                key.clone(),
                &points,
                group.left_out.clone(),
                &units,
                settings,
                progress,
            )
        })
        .collect()
}

/// Reads, fits and writes `fit.json` and `summary.txt` into `out`.
pub fn fit_table_file(
    path: &Path,
    sheet: Option<&str>,
    settings: &GroupFitSettings,
    out: &Path,
    force: bool,
    progress: &mut dyn FnMut(usize, usize),
) -> Result<TableFitOutcome, RateTableError> {
    crate::output::check_output_folder(out, force)?;
    let table = read_rate_table(path, sheet, settings)?;
    let fits = fit_table(&table, settings, progress);
    let mut lines = vec![
        format!(
            "platekin {}: fit of {} ({}, {} group(s))",
            env!("CARGO_PKG_VERSION"),
            table.source,
            table.kind,
            fits.len()
        ),
        String::new(),
        "Fits (value [95% interval]):".to_string(),
    ];
    lines.extend(crate::run::group_fit_lines(&fits));
    lines.push(String::new());
    lines.push(format!("outputs: {}/ (fit.json, summary.txt)", out.display()));
    lines.push(crate::run::CAUTION.to_string());
    lines.push(String::new());
    let summary = lines.join("\n");
    let document = json!({
        "tool": format!("platekin {}", env!("CARGO_PKG_VERSION")),
        "inputs": [path.display().to_string()],
        "table": table.kind,
        "groups": fits,
        "fit_settings": settings,
        "caution": crate::run::CAUTION,
    });
    let mut bytes = serde_json::to_vec_pretty(&document).map_err(|error| RateTableError::Render {
        file: "fit.json".to_string(),
        message: error.to_string(),
    })?;
    bytes.push(b'\n');
    let files = vec![
        OutputFile {
            name: "fit.json".into(),
            bytes,
        },
        OutputFile {
            name: "summary.txt".into(),
            bytes: summary.clone().into_bytes(),
        },
    ];
    let written = write_outputs(out, force, &[path.to_path_buf()], &files)?;
    Ok(TableFitOutcome {
        fits,
        written,
        summary,
    })
}

/// The factor names of a table, for tests and callers that list them.
pub fn factor_names(table: &RateTable) -> Vec<String> {
    let mut names: BTreeMap<String, ()> = BTreeMap::new();
    for (key, _) in &table.rows {
        for name in key.keys() {
            names.insert(name.clone(), ());
        }
    }
    names.into_keys().collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::selection::ModelRequest;

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
        let settings = GroupFitSettings::default();
        let table = read_rate_table(&path, None, &settings).unwrap();
        assert_eq!(table.kind, "rate table");
        assert_eq!(table.rows.len(), 1);
        assert_eq!(
            factor_names(&table),
            vec!["enzyme [nM]".to_string(), "variant".to_string()]
        );
        let fits = fit_table(&table, &settings, &mut |_, _| {});
        let fit = &fits[0];
        assert_eq!(fit.model, "competitive", "{:?}", fit.model_choice);
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
        let settings = GroupFitSettings {
            model: Some(ModelRequest::Fixed(
                crate::fit::models::RateModelKind::MichaelisMenten,
            )),
            ..GroupFitSettings::default()
        };
        let table = read_rate_table(&path, None, &settings).unwrap();
        let fits = fit_table(&table, &settings, &mut |_, _| {});
        assert_eq!(fits[0].parameters["Km"].unit, "");
        assert_eq!(fits[0].parameters["Vmax"].unit, "");
        let bad = write(dir.path(), "bad.csv", "substrate,rate\n1,0.9\n2,fast\n");
        let error = read_rate_table(&bad, None, &settings).unwrap_err().to_string();
        assert!(error.contains("row 3") && error.contains("fast"), "{error}");
        let no_rate = write(dir.path(), "norate.csv", "substrate,speed\n1,0.9\n");
        let error = read_rate_table(&no_rate, None, &settings)
            .unwrap_err()
            .to_string();
        assert!(error.contains("'rate'"), "{error}");
        let bad_unit = write(dir.path(), "unit.csv", "substrate [mg],rate\n1,0.9\n");
        let error = read_rate_table(&bad_unit, None, &settings)
            .unwrap_err()
            .to_string();
        assert!(error.contains("mg"), "{error}");
        // Replicate-SD weighting on single points names the rows without an SD.
        let weighted = GroupFitSettings {
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
