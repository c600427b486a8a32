//! Rendering: text, tables, JSON, the HTML report and the plots are made here from the typed
//! results of the pipeline, and only here. Nothing in this layer computes a result or re-reads
//! settings; it formats what it is given.
//!
//! [`render_run_outputs`] makes every file of a run in memory: `wells.csv`, `conditions.csv`
//! ([`tables`]), `fit.json`, `progress.json` ([`json`]), `settings.toml`, the report
//! ([`report`], [`plots`]) and last `run.json`, which lists the others with their checksums.

pub mod calibration;
pub mod campaign;
pub mod display;
pub mod inspect;
pub mod json;
pub mod plots;
pub mod report;
pub mod results;
pub mod screen;
pub mod summary;
pub mod tables;
pub mod words;

use std::path::PathBuf;

use crate::config::{ReportMode, SettingLayer};
use crate::files::output::OutputFile;
use crate::pipeline::RunResults;
use plots::PlateView;

pub use json::InputRecord;

/// Why an output could not be rendered (none of these is reachable from a user's input: each is a
/// failure of a library the program renders with).
#[derive(Debug, thiserror::Error)]
pub enum RenderError {
    /// A CSV table could not be built or written.
    #[error(transparent)]
    Table(#[from] tables::TableError),
    /// A plot failed to draw.
    #[error(transparent)]
    Plot(#[from] plots::PlotError),
    /// A JSON output could not be made.
    #[error("rendering {file} failed")]
    Json {
        /// The file being rendered.
        file: String,
        /// serde_json's reason.
        #[source]
        source: serde_json::Error,
    },
    /// `settings.toml` could not be made (it would not repeat the run, so nothing is written).
    #[error("rendering settings.toml failed")]
    Toml(#[from] toml::ser::Error),
}

/// What a run's outputs record about where it came from.
#[derive(Debug, Clone)]
pub struct RunRecord {
    /// The inputs, with their sizes and checksums (the bytes that were parsed).
    pub inputs: Vec<InputRecord>,
    /// The input files as the user named them (`fit.json`'s and `progress.json`'s `inputs`); empty
    /// for the embedded demo.
    pub files_given: Vec<String>,
    /// The data file's absolute path, for the comment atop `settings.toml`; `None` for the demo.
    pub data_path: Option<PathBuf>,
    /// Every setting as used, defaults filled in.
    pub used: SettingLayer,
    /// How much report to write.
    pub report: ReportMode,
}

impl RunRecord {
    /// The record of a run made from inputs already in memory (tests, benchmarks): no files.
    pub fn without_inputs(used: SettingLayer, report: ReportMode) -> RunRecord {
        RunRecord {
            inputs: Vec::new(),
            files_given: Vec::new(),
            data_path: None,
            used,
            report,
        }
    }
}

/// `settings.toml`: every setting used, with a comment naming the data, so that `--assay
/// settings.toml` repeats the run.
pub fn settings_toml(record: &RunRecord) -> Result<OutputFile, RenderError> {
    let data_line = match &record.data_path {
        Some(data) => format!("# data: {}\n", data.display()),
        None => "# data: the embedded demo plate (the same files are in demo-plates/)\n".to_string(),
    };
    let text = format!(
        "# Settings used by platekin {} for this run; repeat it with\n# platekin run DATA --assay settings.toml --out NEW_FOLDER\n{}{}",
        env!("CARGO_PKG_VERSION"),
        data_line,
        toml::to_string(&record.used)?
    );
    Ok(OutputFile {
        name: "settings.toml".into(),
        bytes: text.into_bytes(),
    })
}

/// Every output file of a run, rendered in memory; `run.json` comes last and lists the others.
pub fn render_run_outputs(results: &RunResults, record: &RunRecord) -> Result<Vec<OutputFile>, RenderError> {
    render_outputs_from_view(results, report_view(results, record), record)
}

/// The plate view the report draws its wells from (thinned copies of the reads), or `None` when
/// no report is asked for. Made first, it lets a command release the raw reads before the rest
/// is rendered: they are the largest thing a run holds (1536 wells x 2000 reads: 24.6 MB).
pub fn report_view(results: &RunResults, record: &RunRecord) -> Option<PlateView> {
    (record.report != ReportMode::None).then(|| plots::plate_view(results))
}

/// [`render_run_outputs`] with the report's plate view made beforehand ([`report_view`]); the
/// raw reads are not read here otherwise.
pub fn render_outputs_from_view(
    results: &RunResults,
    view: Option<PlateView>,
    record: &RunRecord,
) -> Result<Vec<OutputFile>, RenderError> {
    let mut wells = tables::wells_table(&results.analysis, &results.layout, &results.rates_in)?;
    if let Some(screen_results) = &results.screen {
        screen::add_activity_column(&mut wells, &results.analysis, screen_results)?;
    }
    let mut conditions = tables::conditions_table(&results.conditions, &results.layout, &results.rates_in)?;
    let fit = json::run_fit_document(
        &record.files_given,
        &results.fits,
        &results.analysis.warnings,
        &results.input_warnings,
        &record.used,
        &results.fit_settings,
    )?;
    let progress = json::progress_document(&record.files_given, &results.progress, &record.used)?;
    let mut files = vec![
        OutputFile {
            name: "wells.csv".into(),
            bytes: tables::csv_bytes(&mut wells)?,
        },
        OutputFile {
            name: "conditions.csv".into(),
            bytes: tables::csv_bytes(&mut conditions)?,
        },
        json::json_file("fit.json", &fit)?,
        json::json_file("progress.json", &progress)?,
        settings_toml(record)?,
    ];
    if let Some(screen_results) = &results.screen {
        files.extend(screen::screen_files(screen_results, &results.rates_in)?);
    }
    if let Some(calibration) = &results.analysis.signal.calibration {
        files.push(json::json_file(
            "calibration.json",
            &calibration::calibration_document(calibration, results.analysis.signal.raw_unit),
        )?);
    }
    if let Some(view) = view {
        files.extend(report::report_files_from_view(results, view, record)?);
    }
    files.push(json::run_json(
        &record.inputs,
        &record.used,
        record.report.word(),
        &files,
    )?);
    Ok(files)
}
