//! The embedded demo: an invented esterase plate (the Amber Fen scenario in `demo-plates/`),
//! compiled into the binary so that `platekin demo` needs no files.

use std::path::Path;

use crate::import::{import_cells, ImportOptions};
use crate::layout::parse_layout;
use crate::run::{analyse_inputs, finish_run, RunError, RunOutcome};
use crate::settings::{resolve_analysis, used_layer, SettingLayer};
use crate::sheet_reader::read_text_cells;

/// The demo's raw export (wide CSV).
pub const DEMO_DATA: &str = include_str!("../demo-plates/amber-fen-wide.csv");
/// The demo's layout (tidy CSV).
pub const DEMO_LAYOUT: &str = include_str!("../demo-plates/amber-fen-layout.csv");
/// The demo's assay settings.
pub const DEMO_ASSAY: &str = include_str!("../demo-plates/amber-fen-assay.toml");

/// Runs the embedded demo plate and writes its results into `out`.
pub fn run_demo(out: &Path) -> Result<RunOutcome, RunError> {
    run_demo_with_report(out, None)
}

/// Runs the embedded demo plate with a report choice (`none`, `html`, `full`; html when None).
pub fn run_demo_with_report(out: &Path, report: Option<&str>) -> Result<RunOutcome, RunError> {
    let mode = match report {
        Some(text) => text
            .parse::<crate::report::ReportMode>()
            .map_err(|message| RunError::Report(crate::report::ReportError::Mode(message)))?,
        None => crate::report::ReportMode::Html,
    };
    crate::output::check_output_folder(out, false)?;
    let grid = read_text_cells(DEMO_DATA.as_bytes(), "amber-fen-wide.csv (embedded demo)")
        .map_err(crate::import::ImportError::from)?;
    let data = import_cells(&grid, &ImportOptions::default())?;
    let layout_grid = read_text_cells(DEMO_LAYOUT.as_bytes(), "amber-fen-layout.csv (embedded demo)")
        .map_err(crate::layout::LayoutError::from)?;
    let layout = parse_layout(&layout_grid, data.plate)?;
    let layer: SettingLayer = toml::from_str(DEMO_ASSAY).map_err(|error| RunError::Render {
        file: "amber-fen-assay.toml".into(),
        message: error.to_string(),
    })?;
    let analysis = resolve_analysis(&layer).map_err(|error| RunError::Render {
        file: "amber-fen-assay.toml".into(),
        message: error.to_string(),
    })?;
    // Record the defaults too, so the report and settings.toml show every value used.
    let mut layer = used_layer(layer, &analysis);
    layer.report = Some(mode.word().to_string());
    let results = analyse_inputs(data, layout, &analysis)?;
    finish_run(results, &layer, &[], out, false)
}
