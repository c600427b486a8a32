//! The campaign's tables: each plate's `wells`, `conditions` and `fits` rows (the first two the
//! same tables its own `wells.csv` and `conditions.csv` hold), with `plate` and the manifest's
//! factors in front, stacked into one table per kind and written as Parquet and CSV; and
//! `plates.csv`, one row per plate with how it ended.

use polars::prelude::*;

use super::super::tables::{conditions_table, csv_bytes, wells_table, TableError};
use super::super::words::group_label;
use crate::campaign::{PlateOutcome, PlateStatus};
use crate::groups::ParameterReport;
use crate::pipeline::RunResults;

/// One plate's rows of the three campaign tables, without the plate's columns.
#[derive(Debug, Clone)]
pub struct PlateTables {
    /// The rows of its `wells.csv`.
    pub wells: DataFrame,
    /// The rows of its `conditions.csv`.
    pub conditions: DataFrame,
    /// One row per group, analysis and parameter.
    pub fits: DataFrame,
}

/// The names of the three tables, in the order [`PlateTables::frames`] gives them.
pub const TABLE_NAMES: [&str; 3] = ["wells", "conditions", "fits"];

impl PlateTables {
    /// The three tables, in [`TABLE_NAMES`] order.
    pub fn frames(&self) -> [&DataFrame; 3] {
        [&self.wells, &self.conditions, &self.fits]
    }

    /// The tables from frames in [`TABLE_NAMES`] order.
    pub fn from_frames([wells, conditions, fits]: [DataFrame; 3]) -> PlateTables {
        PlateTables {
            wells,
            conditions,
            fits,
        }
    }
}

/// A plate's rows of the campaign tables, from its results.
pub fn plate_tables(results: &RunResults) -> Result<PlateTables, TableError> {
    Ok(PlateTables {
        wells: wells_table(&results.analysis, &results.layout)?,
        conditions: conditions_table(&results.conditions, &results.layout, &results.analysis)?,
        fits: fits_table(results)?,
    })
}

/// One row of the fits table.
struct FitRow<'a> {
    group: String,
    analysis: &'static str,
    model: &'static str,
    parameter: &'a str,
    report: &'a ParameterReport,
}

/// The fits table: one row per group, analysis (`initial-rate` or `progress-curve`) and
/// parameter, with value, SE, 95% interval, unit and whether the data determine it.
pub fn fits_table(results: &RunResults) -> Result<DataFrame, TableError> {
    let mut rows: Vec<FitRow<'_>> = Vec::new();
    for fit in &results.fits {
        for (name, report) in &fit.parameters {
            rows.push(FitRow {
                group: group_label(&fit.group),
                analysis: "initial-rate",
                model: fit.model.name(),
                parameter: name,
                report,
            });
        }
    }
    for group in &results.progress.groups {
        let Some(model) = group.model else { continue };
        for (name, report) in &group.parameters {
            rows.push(FitRow {
                group: group_label(&group.group),
                analysis: "progress-curve",
                model: model.name(),
                parameter: name,
                report,
            });
        }
    }
    let columns = vec![
        Column::new(
            "group".into(),
            rows.iter().map(|r| r.group.as_str()).collect::<Vec<_>>(),
        ),
        Column::new(
            "analysis".into(),
            rows.iter().map(|r| r.analysis).collect::<Vec<_>>(),
        ),
        Column::new("model".into(), rows.iter().map(|r| r.model).collect::<Vec<_>>()),
        Column::new(
            "parameter".into(),
            rows.iter().map(|r| r.parameter).collect::<Vec<_>>(),
        ),
        Column::new(
            "value".into(),
            rows.iter().map(|r| r.report.value).collect::<Vec<_>>(),
        ),
        Column::new("se".into(), rows.iter().map(|r| r.report.se).collect::<Vec<_>>()),
        Column::new(
            "ci95_low".into(),
            rows.iter()
                .map(|r| r.report.ci95.map(|c| c[0]))
                .collect::<Vec<_>>(),
        ),
        Column::new(
            "ci95_high".into(),
            rows.iter()
                .map(|r| r.report.ci95.map(|c| c[1]))
                .collect::<Vec<_>>(),
        ),
        Column::new(
            "unit".into(),
            rows.iter().map(|r| r.report.unit.as_str()).collect::<Vec<_>>(),
        ),
        Column::new(
            "determined".into(),
            rows.iter().map(|r| r.report.determined).collect::<Vec<_>>(),
        ),
    ];
    Ok(DataFrame::new(rows.len(), columns)?)
}

/// The header a plate factor gets in a table: its name, or `plate:NAME` when the table already
/// has a column of that name (so neither is lost).
fn factor_header(name: &str, frame: &DataFrame) -> String {
    if name == "plate" || frame.column(name).is_ok() {
        format!("plate:{name}")
    } else {
        name.to_string()
    }
}

/// A plate's table with `plate` and the plate's factors as its first columns.
pub fn with_plate_columns(
    frame: &DataFrame,
    plate: &str,
    factors: &[(&str, &str)],
) -> Result<DataFrame, TableError> {
    let height = frame.height();
    let mut columns = vec![Column::new("plate".into(), vec![plate; height])];
    for (name, value) in factors {
        columns.push(Column::new(
            factor_header(name, frame).into(),
            vec![*value; height],
        ));
    }
    columns.extend(frame.columns().iter().cloned());
    Ok(DataFrame::new(height, columns)?)
}

/// Stacks tables whose columns differ (plates with other layouts, units or factors): the columns
/// in first-seen order, missing cells empty; a column whose type differs between tables is
/// written as text in all of them.
pub fn stack_tables(frames: &[DataFrame]) -> Result<DataFrame, TableError> {
    let mut names: Vec<PlSmallStr> = Vec::new();
    let mut types: Vec<DataType> = Vec::new();
    for frame in frames {
        for column in frame.columns() {
            match names.iter().position(|name| name == column.name()) {
                Some(index) => {
                    if types[index] != *column.dtype() && types[index] == DataType::Null {
                        types[index] = column.dtype().clone();
                    } else if types[index] != *column.dtype() && *column.dtype() != DataType::Null {
                        types[index] = DataType::String;
                    }
                }
                None => {
                    names.push(column.name().clone());
                    types.push(column.dtype().clone());
                }
            }
        }
    }
    let mut stacked: Option<DataFrame> = None;
    for frame in frames {
        let height = frame.height();
        let columns = names
            .iter()
            .zip(&types)
            .map(|(name, dtype)| match frame.column(name.as_str()) {
                Ok(column) if column.dtype() == dtype => Ok(column.clone()),
                Ok(column) => column.cast(dtype),
                Err(_) => Ok(Column::full_null(name.clone(), height, dtype)),
            })
            .collect::<PolarsResult<Vec<Column>>>()?;
        let frame = DataFrame::new(height, columns)?;
        match stacked.as_mut() {
            Some(all) => {
                all.vstack_mut(&frame)?;
            }
            None => stacked = Some(frame),
        }
    }
    let mut all = match stacked {
        Some(all) => all,
        None => DataFrame::new(0, vec![Column::new_empty("plate".into(), &DataType::String)])?,
    };
    all.rechunk_mut();
    Ok(all)
}

/// Parquet bytes of a table (snappy pages, statistics on), read back by DuckDB, Spark, polars and
/// pyarrow alike.
pub fn parquet_bytes(frame: &mut DataFrame) -> Result<Vec<u8>, TableError> {
    let mut bytes = Vec::new();
    ParquetWriter::new(&mut bytes)
        .with_compression(ParquetCompression::Snappy)
        .finish(frame)?;
    Ok(bytes)
}

/// A table from Parquet bytes.
pub fn read_parquet_bytes(bytes: Vec<u8>) -> Result<DataFrame, TableError> {
    Ok(ParquetReader::new(std::io::Cursor::new(bytes)).finish()?)
}

/// Both files of a combined table: `NAME.parquet` and its twin `NAME.csv`.
pub fn table_files(
    name: &str,
    frame: &mut DataFrame,
) -> Result<[crate::files::output::OutputFile; 2], TableError> {
    Ok([
        crate::files::output::OutputFile {
            name: format!("{name}.parquet"),
            bytes: parquet_bytes(frame)?,
        },
        crate::files::output::OutputFile {
            name: format!("{name}.csv"),
            bytes: csv_bytes(frame)?,
        },
    ])
}

/// `plates.csv`: one row per plate in run order: `plate`, `status` (`ok` or `failed`), `error`,
/// `wells`, `flagged`, `groups_fitted`, `input_sha256` (the data file's), `layout_sha256`,
/// `z_prime`, `reused` (results of the previous run kept: inputs and settings unchanged), then
/// the manifest's factors.
pub fn plates_table(plates: &[PlateOutcome], factor_names: &[String]) -> Result<DataFrame, TableError> {
    let digest_value = |f: &dyn Fn(&crate::campaign::PlateDigest) -> u32| -> Vec<Option<u32>> {
        plates.iter().map(|p| p.digest().map(f)).collect()
    };
    let mut columns = vec![
        Column::new(
            "plate".into(),
            plates.iter().map(|p| p.plate.as_str()).collect::<Vec<_>>(),
        ),
        Column::new(
            "status".into(),
            plates
                .iter()
                .map(|p| match p.status {
                    PlateStatus::Ok { .. } => "ok",
                    PlateStatus::Failed { .. } => "failed",
                })
                .collect::<Vec<_>>(),
        ),
        Column::new(
            "error".into(),
            plates
                .iter()
                .map(|p| match &p.status {
                    PlateStatus::Failed { error } => Some(error.as_str()),
                    PlateStatus::Ok { .. } => None,
                })
                .collect::<Vec<_>>(),
        ),
        Column::new("wells".into(), digest_value(&|d| d.wells as u32)),
        Column::new("flagged".into(), digest_value(&|d| d.flagged.len() as u32)),
        Column::new("groups_fitted".into(), digest_value(&|d| d.groups_fitted as u32)),
        Column::new(
            "input_sha256".into(),
            plates
                .iter()
                .map(|p| p.data_sha256.as_deref())
                .collect::<Vec<_>>(),
        ),
        Column::new(
            "layout_sha256".into(),
            plates
                .iter()
                .map(|p| p.layout_sha256.as_deref())
                .collect::<Vec<_>>(),
        ),
        Column::new(
            "z_prime".into(),
            plates
                .iter()
                .map(|p| p.digest().and_then(|d| d.z_prime.as_ref().map(|z| z.value)))
                .collect::<Vec<_>>(),
        ),
        Column::new(
            "reused".into(),
            plates
                .iter()
                .map(|p| match p.status {
                    PlateStatus::Ok { reused, .. } => Some(reused),
                    PlateStatus::Failed { .. } => None,
                })
                .collect::<Vec<_>>(),
        ),
    ];
    for name in factor_names {
        let header = if columns.iter().any(|c| c.name() == name) {
            format!("plate:{name}")
        } else {
            name.clone()
        };
        columns.push(Column::new(
            header.into(),
            plates
                .iter()
                .map(|p| p.factors.get(name).map(String::as_str).unwrap_or(""))
                .collect::<Vec<_>>(),
        ));
    }
    Ok(DataFrame::new(plates.len(), columns)?)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stacking_unions_columns_and_keeps_types() {
        let first = df!("plate" => ["a", "a"], "rate" => [1.0, 2.0], "variant" => ["x", "y"]).unwrap();
        let second = df!("plate" => ["b"], "rate" => [3.0], "lot" => ["L1"]).unwrap();
        let stacked = stack_tables(&[first, second]).unwrap();
        assert_eq!(stacked.height(), 3);
        let names: Vec<&str> = stacked.get_column_names().iter().map(|n| n.as_str()).collect();
        assert_eq!(names, vec!["plate", "rate", "variant", "lot"]);
        assert_eq!(stacked.column("rate").unwrap().dtype(), &DataType::Float64);
        assert_eq!(stacked.column("lot").unwrap().null_count(), 2);
        // A column that is a number on one plate and text on another is text everywhere.
        let numbers = df!("day" => [1.0]).unwrap();
        let words = df!("day" => ["Monday"]).unwrap();
        let mixed = stack_tables(&[numbers, words]).unwrap();
        assert_eq!(mixed.column("day").unwrap().dtype(), &DataType::String);
    }

    #[test]
    fn plate_factors_named_like_a_column_are_prefixed() {
        let frame = df!("well" => ["A1"], "variant" => ["wt"]).unwrap();
        let with = with_plate_columns(&frame, "P1", &[("day", "1"), ("variant", "lot-3")]).unwrap();
        let names: Vec<&str> = with.get_column_names().iter().map(|n| n.as_str()).collect();
        assert_eq!(names, vec!["plate", "day", "plate:variant", "well", "variant"]);
    }

    #[test]
    fn parquet_round_trips_a_table() {
        let mut frame = df!("plate" => ["a", "b"], "rate" => [Some(1.5), None], "n" => [3u32, 4]).unwrap();
        let back = read_parquet_bytes(parquet_bytes(&mut frame).unwrap()).unwrap();
        assert!(back.equals_missing(&frame));
    }
}
