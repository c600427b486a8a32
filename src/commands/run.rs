//! `platekin run`: one plate from its files to every output.

use std::path::{Path, PathBuf};

use super::CommandError;
use crate::config::{ExcludedWellEntry, RunSettings};
use crate::files::input::{InputFile, InputRole};
use crate::files::output::{check_output_folder, write_outputs};
use crate::layout::exclusions::read_exclusion_table;
use crate::pipeline::{run_pipeline, PipelineError, PlateInputs, RunResults};
use crate::render::summary::run_summary;
use crate::render::{render_outputs_from_view, report_view, InputRecord, RunRecord};

/// What a completed run hands back.
#[derive(Debug, Clone)]
pub struct RunOutcome {
    /// The results; their `data` keeps the read times and wells but no readings, released once
    /// the report's view was made (`KineticData::release_reads`).
    pub results: RunResults,
    /// The files written.
    pub written: Vec<PathBuf>,
    /// The one-screen summary for stdout.
    pub summary: String,
}

/// Runs a plate from files and writes the outputs into `out`. `progress(done, total)` reports
/// bootstrap replicates.
pub fn run_plate(
    settings: &RunSettings,
    out: &Path,
    force: bool,
    progress: &mut dyn FnMut(usize, usize),
) -> Result<RunOutcome, CommandError> {
    check_output_folder(out, force)?;
    let inputs = PlateInputs {
        data: InputFile::read(InputRole::Data, &settings.data)?,
        layout: InputFile::read(InputRole::Layout, &settings.layout)?,
        pathlengths: settings
            .pathlength_from
            .as_ref()
            .map(|path| InputFile::read(InputRole::Pathlength, path))
            .transpose()?,
    };
    let settings = with_exclusion_table(settings)?;
    run_plate_inputs(&settings, inputs, out, force, progress)
}

/// Reads the `--exclude` table (if any) into the settings: its wells join the exclusions the
/// settings give, and `settings.toml` records them instead of the file, so that the run repeats
/// exactly without it (and a campaign's result key sees the rows, not the file's name).
pub fn with_exclusion_table(settings: &RunSettings) -> Result<RunSettings, CommandError> {
    let mut settings = settings.clone();
    let Some(path) = settings.used.exclude.take() else {
        return Ok(settings);
    };
    let table = InputFile::read(InputRole::Exclusions, &path)?;
    let exclusions = read_exclusion_table(&table).map_err(PipelineError::from)?;
    let recorded = settings.used.excluded_wells.get_or_insert_with(Vec::new);
    for exclusion in &exclusions {
        recorded.push(ExcludedWellEntry {
            well: exclusion.well.to_string(),
            reason: exclusion.reason.clone(),
        });
    }
    settings.analysis.screen.exclusions.extend(exclusions);
    Ok(settings)
}

/// Runs a plate whose inputs were already read (from `settings.data` and `settings.layout`) and
/// writes the outputs into `out`, exactly as [`run_plate`] does (`platekin batch` reads the inputs
/// first to compare their checksums with the previous run's).
pub fn run_plate_inputs(
    settings: &RunSettings,
    inputs: PlateInputs,
    out: &Path,
    force: bool,
    progress: &mut dyn FnMut(usize, usize),
) -> Result<RunOutcome, CommandError> {
    check_output_folder(out, force)?;
    let mut input_records = vec![InputRecord::of(&inputs.data), InputRecord::of(&inputs.layout)];
    let mut files_given = vec![inputs.data.name.clone(), inputs.layout.name.clone()];
    if let Some(table) = &inputs.pathlengths {
        input_records.push(InputRecord::of(table));
        files_given.push(table.name.clone());
    }
    // The pipeline takes the inputs and lets each file's bytes go once they are parsed.
    let results = run_pipeline(
        inputs,
        &settings.import,
        settings.layout_sheet.as_deref(),
        &settings.analysis,
        &settings.fit,
        progress,
    )?;
    let record = RunRecord {
        inputs: input_records,
        files_given,
        data_path: Some(
            settings
                .data
                .canonicalize()
                .unwrap_or_else(|_| settings.data.clone()),
        ),
        used: settings.used.clone(),
        report: settings.report,
    };
    let input_paths: Vec<PathBuf> = [
        Some(&settings.data),
        Some(&settings.layout),
        settings.pathlength_from.as_ref(),
    ]
    .into_iter()
    .flatten()
    .cloned()
    .collect();
    finish_run(results, &record, out, force, &input_paths)
}

/// Renders a run's outputs, writes them as one unit, and builds its summary.
pub fn finish_run(
    results: RunResults,
    record: &RunRecord,
    out: &Path,
    force: bool,
    input_paths: &[PathBuf],
) -> Result<RunOutcome, CommandError> {
    let mut results = results;
    // The report's view keeps thinned copies of the reads it draws; nothing rendered after it
    // reads the raw ones, so they go before the tables, plots and page are made.
    let view = report_view(&results, record);
    results.data.release_reads();
    let files = render_outputs_from_view(&results, view, record)?;
    let written = write_outputs(out, force, input_paths, &files)?;
    let summary = run_summary(&results, record.report, out);
    Ok(RunOutcome {
        results,
        written,
        summary,
    })
}
