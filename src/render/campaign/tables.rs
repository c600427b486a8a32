//! The campaign's tables: each plate's `wells`, `conditions`, `fits` and (on screening plates)
//! `compounds` rows (the same tables its own `wells.csv`, `conditions.csv` and `compounds.csv`
//! hold), with `plate` and the manifest's factors in front, stacked into one table per kind and
//! written as Parquet and CSV; and `plates.csv`, one row per plate with how it ended.

use polars::prelude::*;

use super::super::screen::compounds_table;
use super::super::tables::{conditions_table, wells_table, TableError};
use super::super::words::group_key_text;
use crate::campaign::{PlateOutcome, PlateStatus};
use crate::files::output::OutputFile;
use crate::groups::ParameterReport;
use crate::pipeline::RunResults;

/// One plate's rows of the campaign tables, without the plate's columns.
#[derive(Debug, Clone)]
pub struct PlateTables {
    /// The rows of its `wells.csv`.
    pub wells: DataFrame,
    /// The rows of its `conditions.csv`.
    pub conditions: DataFrame,
    /// One row per group, analysis and parameter.
    pub fits: DataFrame,
    /// The rows of its `compounds.csv` on a screening plate; no columns and no rows otherwise.
    pub compounds: DataFrame,
}

/// How many tables a plate gives the campaign.
pub const TABLE_COUNT: usize = 4;

/// The names of the tables, in the order [`PlateTables::frames`] gives them.
pub const TABLE_NAMES: [&str; TABLE_COUNT] = ["wells", "conditions", "fits", "compounds"];

/// The table kinds (places in [`TABLE_NAMES`]) a campaign writes only when some plate has
/// columns for them: `compounds`, which only screening plates have.
pub const SCREEN_ONLY_TABLES: [usize; 1] = [3];

impl PlateTables {
    /// The tables, in [`TABLE_NAMES`] order.
    pub fn frames(&self) -> [&DataFrame; TABLE_COUNT] {
        [&self.wells, &self.conditions, &self.fits, &self.compounds]
    }

    /// The tables from frames in [`TABLE_NAMES`] order.
    pub fn from_frames([wells, conditions, fits, compounds]: [DataFrame; TABLE_COUNT]) -> PlateTables {
        PlateTables {
            wells,
            conditions,
            fits,
            compounds,
        }
    }
}

/// A plate's rows of the campaign tables, from its results.
pub fn plate_tables(results: &RunResults) -> Result<PlateTables, TableError> {
    Ok(PlateTables {
        wells: wells_table(&results.analysis, &results.layout, &results.rates_in)?,
        conditions: conditions_table(&results.conditions, &results.layout, &results.rates_in)?,
        fits: fits_table(results)?,
        compounds: match &results.screen {
            Some(screen) => compounds_table(screen)?,
            None => DataFrame::empty(),
        },
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
                group: group_key_text(&fit.group),
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
                group: group_key_text(&group.group),
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

/// The columns of a stacked table, over plates whose tables differ (other layouts, units or
/// factors): names in first-seen order; a column whose type differs between plates is text.
#[derive(Debug, Clone, Default)]
pub struct StackedColumns {
    columns: Vec<(PlSmallStr, DataType)>,
}

impl StackedColumns {
    /// Adds one plate's columns.
    pub fn add(&mut self, schema: &Schema) {
        for (name, dtype) in schema.iter() {
            match self.columns.iter_mut().find(|(existing, _)| existing == name) {
                Some((_, known)) if *known == DataType::Null => *known = dtype.clone(),
                Some((_, known)) if known != dtype && *dtype != DataType::Null => *known = DataType::String,
                Some(_) => {}
                None => self.columns.push((name.clone(), dtype.clone())),
            }
        }
    }

    /// The stacked table's schema.
    pub fn schema(&self) -> Schema {
        self.columns.iter().cloned().collect()
    }

    /// A plate's table with every stacked column, in order: missing ones empty, others cast.
    pub fn align(&self, frame: &DataFrame) -> Result<DataFrame, TableError> {
        let height = frame.height();
        let columns = self
            .columns
            .iter()
            .map(|(name, dtype)| match frame.column(name.as_str()) {
                Ok(column) if column.dtype() == dtype => Ok(column.clone()),
                Ok(column) => column.cast(dtype),
                Err(_) => Ok(Column::full_null(name.clone(), height, dtype)),
            })
            .collect::<PolarsResult<Vec<Column>>>()?;
        Ok(DataFrame::new(height, columns)?)
    }
}

/// The schema a plate's table has once `plate` and the plate's factors are put in front.
pub fn schema_with_plate_columns(schema: &Schema, factors: &[(&str, &str)]) -> Result<Schema, TableError> {
    let empty = DataFrame::empty_with_schema(schema);
    Ok(with_plate_columns(&empty, "", factors)?.schema().as_ref().clone())
}

/// Rows per Parquet row group (and per CSV write): a few hundred plates of 96 wells.
const ROWS_PER_GROUP: usize = 32_768;

/// A stacked table's Parquet file and CSV twin, written plate by plate from `frames` (each with
/// the plate's columns), so that only a row group of the campaign is in memory at once besides
/// the files' bytes.
pub fn stacked_table_files(
    name: &str,
    columns: &StackedColumns,
    frames: impl Iterator<Item = Result<DataFrame, TableError>>,
) -> Result<[OutputFile; 2], TableError> {
    let schema = columns.schema();
    let mut parquet_bytes = Vec::new();
    let mut csv_bytes = Vec::new();
    {
        let mut parquet = ParquetWriter::new(&mut parquet_bytes)
            .with_compression(ParquetCompression::Snappy)
            .batched(&schema)?;
        let mut csv = CsvWriter::new(&mut csv_bytes)
            .include_header(true)
            .batched(&schema)?;
        let mut pending: Option<DataFrame> = None;
        let mut flush = |pending: &mut Option<DataFrame>| -> Result<(), TableError> {
            if let Some(mut group) = pending.take() {
                group.rechunk_mut();
                parquet.write_batch(&group)?;
                csv.write_batch(&group)?;
            }
            Ok(())
        };
        for frame in frames {
            let frame = columns.align(&frame?)?;
            match pending.as_mut() {
                Some(group) => {
                    group.vstack_mut(&frame)?;
                }
                None => pending = Some(frame),
            }
            if pending
                .as_ref()
                .is_some_and(|group| group.height() >= ROWS_PER_GROUP)
            {
                flush(&mut pending)?;
            }
        }
        flush(&mut pending)?;
        parquet.finish()?;
        csv.finish()?;
    }
    Ok([
        OutputFile {
            name: format!("{name}.parquet"),
            bytes: parquet_bytes,
        },
        OutputFile {
            name: format!("{name}.csv"),
            bytes: csv_bytes,
        },
    ])
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
        let mut columns = StackedColumns::default();
        columns.add(first.schema());
        columns.add(second.schema());
        let [parquet, csv] =
            stacked_table_files("wells", &columns, [first, second].into_iter().map(Ok)).unwrap();
        let stacked = read_parquet_bytes(parquet.bytes).unwrap();
        assert_eq!(stacked.height(), 3);
        let names: Vec<&str> = stacked.get_column_names().iter().map(|n| n.as_str()).collect();
        assert_eq!(names, vec!["plate", "rate", "variant", "lot"]);
        assert_eq!(stacked.column("rate").unwrap().dtype(), &DataType::Float64);
        assert_eq!(stacked.column("lot").unwrap().null_count(), 2);
        assert_eq!(
            String::from_utf8(csv.bytes).unwrap(),
            "plate,rate,variant,lot\na,1.0,x,\na,2.0,y,\nb,3.0,,L1\n"
        );
        // A column that is a number on one plate and text on another is text everywhere.
        let mut mixed = StackedColumns::default();
        mixed.add(df!("day" => [1.0]).unwrap().schema());
        mixed.add(df!("day" => ["Monday"]).unwrap().schema());
        assert_eq!(mixed.schema().get("day"), Some(&DataType::String));
        // No plate at all: a table with its header only.
        let [_, csv] = stacked_table_files("wells", &columns, std::iter::empty()).unwrap();
        assert_eq!(String::from_utf8(csv.bytes).unwrap(), "plate,rate,variant,lot\n");
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
