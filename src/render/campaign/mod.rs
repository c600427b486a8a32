//! The campaign's outputs (`platekin batch`), made in memory from the typed outcomes of its
//! plates: `plates.csv`, the combined `wells`, `conditions` and `fits` tables (and `compounds`
//! when a plate is a screen) as Parquet with CSV twins ([`tables`]), `pooled.json`, `report.html` ([`report`]) and `batch.json`; and what each
//! plate keeps for the next run ([`store`]).

pub mod report;
pub mod store;
pub mod tables;

use serde_json::{json, Value};

use super::json::{json_file, to_json, tool_line};
use super::tables::TableError;
use super::RenderError;
use crate::campaign::{PlateOutcome, PlateStatus, PooledFit};
use crate::config::{ReportMode, SettingLayer};
use crate::core::format::CAUTION;
use crate::files::output::OutputFile;
use polars::prelude::{DataFrame, Schema};
use tables::{
    plates_table, schema_with_plate_columns, stacked_table_files, with_plate_columns, StackedColumns,
    SCREEN_ONLY_TABLES, TABLE_COUNT, TABLE_NAMES,
};

/// Everything the campaign's outputs are made from.
#[derive(Debug, Clone, Copy)]
pub struct CampaignRecord<'a> {
    /// The manifest or folder, as the user named it.
    pub source: &'a str,
    /// The manifest's plate factors, in column order.
    pub factor_names: &'a [String],
    /// Every plate, in run order.
    pub plates: &'a [PlateOutcome],
    /// The pool factors asked for.
    pub pool_by: &'a [String],
    /// The pooled fits.
    pub pooled: &'a [PooledFit],
    /// Pool factors no plate has.
    pub unknown_pool_factors: &'a [String],
    /// The settings the command was given (before each plate's own assay file).
    pub settings: &'a SettingLayer,
    /// Whether plate reports were written (and so are linked).
    pub report: ReportMode,
}

/// `pooled.json`: the pool factors, each pooled fit with its per-plate scales, the pooled Km with
/// its interval and the between-plate CV.
pub fn pooled_document(record: &CampaignRecord<'_>) -> Result<Value, RenderError> {
    Ok(json!({
        "tool": tool_line(),
        "pool_by": record.pool_by,
        "unknown_factors": record.unknown_pool_factors,
        "model": "v = k_plate S / (Km + S): one Km shared by the plates, one kcat (or Vmax) per plate",
        "pools": to_json("pooled.json", &record.pooled)?,
        "caution": CAUTION,
    }))
}

/// `batch.json`: the campaign's record: the manifest, the settings given, every plate with its
/// status, inputs' SHA-256 and whether it was reused.
fn batch_document(record: &CampaignRecord<'_>) -> Result<Value, RenderError> {
    let plates: Vec<Value> = record
        .plates
        .iter()
        .map(|plate| {
            let (status, error, reused) = match &plate.status {
                PlateStatus::Ok { reused, .. } => ("ok", None, Some(*reused)),
                PlateStatus::Failed { error } => ("failed", Some(error.as_str()), None),
            };
            json!({
                "plate": plate.plate,
                "status": status,
                "error": error,
                "reused": reused,
                "data_sha256": plate.data_sha256,
                "layout_sha256": plate.layout_sha256,
                "factors": plate.factors,
            })
        })
        .collect();
    Ok(json!({
        "tool": tool_line(),
        "manifest": record.source,
        "factors": record.factor_names,
        "settings": to_json("batch.json", record.settings)?,
        "pool_by": record.pool_by,
        "plates": plates,
        "caution": CAUTION,
    }))
}

/// Every campaign-level output, rendered in memory. `schemas` holds the three tables' schemas of
/// each plate that ended well, in run order, with the plate's index in `record.plates`; `load`
/// gives a plate's table (by that index and the table's place in [`TABLE_NAMES`]) when it is
/// written, so that the campaign's tables pass through memory one row group at a time.
pub fn campaign_outputs(
    record: &CampaignRecord<'_>,
    schemas: &[(usize, [Schema; TABLE_COUNT])],
    load: &dyn Fn(usize, usize) -> Result<DataFrame, TableError>,
) -> Result<Vec<OutputFile>, RenderError> {
    let mut files = Vec::new();
    let mut plates = plates_table(record.plates, record.factor_names)?;
    files.push(OutputFile {
        name: "plates.csv".into(),
        bytes: super::tables::csv_bytes(&mut plates)?,
    });
    let factors_of = |index: usize| -> Vec<(&str, &str)> {
        let outcome = &record.plates[index];
        record
            .factor_names
            .iter()
            .map(|f| {
                (
                    f.as_str(),
                    outcome.factors.get(f).map(String::as_str).unwrap_or(""),
                )
            })
            .collect()
    };
    for (kind, name) in TABLE_NAMES.iter().enumerate() {
        // `compounds` only when some plate is a screen (its table has columns); a campaign of
        // rate-law plates keeps the three tables it always had.
        if SCREEN_ONLY_TABLES.contains(&kind) && schemas.iter().all(|(_, plate)| plate[kind].is_empty()) {
            continue;
        }
        let mut columns = StackedColumns::default();
        for (index, plate_schemas) in schemas {
            columns.add(&schema_with_plate_columns(
                &plate_schemas[kind],
                &factors_of(*index),
            )?);
        }
        let frames = schemas.iter().map(|(index, _)| {
            let frame = load(*index, kind)?;
            with_plate_columns(&frame, &record.plates[*index].plate, &factors_of(*index))
        });
        files.extend(stacked_table_files(name, &columns, frames)?);
    }
    if !record.pool_by.is_empty() {
        files.push(json_file("pooled.json", &pooled_document(record)?)?);
    }
    if record.report != ReportMode::None {
        files.push(OutputFile {
            name: "report.html".into(),
            bytes: report::campaign_report_html(record)?.into_bytes(),
        });
    }
    files.push(json_file("batch.json", &batch_document(record)?)?);
    Ok(files)
}
