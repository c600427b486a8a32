//! `platekin demo`: the embedded demo plate ([`crate::files::demo`]) run with its own assay
//! settings; its inputs are passed on as data (embedded files with their names), like any run's.

use std::path::Path;

use super::run::{finish_run, RunOutcome};
use super::CommandError;
use crate::config::{resolve_analysis, resolve_fit, used_layer, ReportMode, SettingLayer, SettingsError};
use crate::files::demo::{demo_files, DEMO_ASSAY};
use crate::files::output::check_output_folder;
use crate::pipeline::{run_pipeline, PlateInputs};
use crate::render::{InputRecord, RunRecord};

/// The demo's settings layer, as its assay file gives it.
pub fn demo_layer() -> Result<SettingLayer, SettingsError> {
    toml::from_str(DEMO_ASSAY).map_err(|error| SettingsError::AssayInvalid {
        file: "amber-fen-assay.toml (embedded demo)".into(),
        message: error.to_string(),
    })
}

/// Runs the embedded demo plate with a report mode and writes its results into `out`.
pub fn run_demo(out: &Path, report: ReportMode) -> Result<RunOutcome, CommandError> {
    check_output_folder(out, false)?;
    let layer = demo_layer()?;
    let analysis = resolve_analysis(&layer)?;
    let fit = resolve_fit(&layer)?;
    let [data, layout, assay] = demo_files();
    let inputs = PlateInputs {
        data,
        layout,
        pathlengths: None,
    };
    let input_records = [&inputs.data, &inputs.layout, &assay]
        .into_iter()
        .map(InputRecord::of)
        .collect();
    let results = run_pipeline(inputs, &Default::default(), None, &analysis, &fit, &mut |_, _| {})?;
    // Record the defaults too, so the report and settings.toml show every value used.
    let mut used = used_layer(layer, &analysis);
    used.report = Some(report.word().to_string());
    let record = RunRecord {
        inputs: input_records,
        files_given: Vec::new(),
        data_path: None,
        used,
        report,
    };
    finish_run(results, &record, out, false, &[])
}
