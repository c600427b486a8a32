//! One whole run: read the export and the layout, analyse every well, build the condition table
//! and the group fits, render every output in memory, and only then write the files. An error at
//! any step before writing leaves nothing on disk.

use std::path::{Path, PathBuf};

use serde_json::{json, Value};

use crate::analysis::{analyse_plate, flag_counts, wells_in_data, PlateAnalysis};
use crate::conditions::{condition_table, Condition, TableError};
use crate::groups::{fit_groups_with, group_label, GroupFit, GroupFitSettings};
use crate::import::{import_data, inspect_report, ImportError, ImportOptions, KineticData};
use crate::layout::{check_against_data, read_layout, Layout, LayoutError, Role};
use crate::output::{write_outputs, OutputError, OutputFile};
use crate::progress::report::{analyse_progress, ProgressAnalysis};
use crate::settings::{AnalysisSettings, RunSettings, SettingLayer};
use crate::tables::{conditions_table, csv_bytes, wells_table};

/// The caution every summary and output carries.
pub const CAUTION: &str = "Results support, and do not replace, your lab's validated procedures: check flagged wells and fits before reporting them.";

/// Why a run did not complete.
#[derive(Debug, thiserror::Error)]
pub enum RunError {
    /// The raw export could not be read.
    #[error(transparent)]
    Import(#[from] ImportError),
    /// The layout could not be read or does not fit the data.
    #[error(transparent)]
    Layout(#[from] LayoutError),
    /// The condition table could not be built.
    #[error(transparent)]
    Table(#[from] TableError),
    /// The outputs could not be written.
    #[error(transparent)]
    Output(#[from] OutputError),
    /// The report or `run.json` could not be rendered.
    #[error(transparent)]
    Report(#[from] crate::report::ReportError),
    /// A result could not be rendered as JSON.
    #[error("rendering {file} failed: {message}")]
    Render {
        /// The file being rendered.
        file: String,
        /// The reason.
        message: String,
    },
}

/// Everything a run found, before rendering.
#[derive(Debug, Clone)]
pub struct RunResults {
    /// The data as read.
    pub data: KineticData,
    /// The layout as read.
    pub layout: Layout,
    /// Per-well rates.
    pub analysis: PlateAnalysis,
    /// Per-condition rows.
    pub conditions: Vec<Condition>,
    /// Per-group fits.
    pub fits: Vec<GroupFit>,
    /// Per-group progress-curve analysis (`progress.json`).
    pub progress: ProgressAnalysis,
    /// Warnings from reading the inputs and checking them against each other.
    pub input_warnings: Vec<String>,
    /// How the groups were fitted (model, weighting, loss, intervals).
    pub fit_settings: GroupFitSettings,
}

/// What a completed run hands back.
#[derive(Debug, Clone)]
pub struct RunOutcome {
    /// The results.
    pub results: RunResults,
    /// The files written.
    pub written: Vec<PathBuf>,
    /// The one-screen summary for stdout.
    pub summary: String,
}

/// Analyses inputs already read (the demo and the tests use this directly), with the default fits.
pub fn analyse_inputs(
    data: KineticData,
    layout: Layout,
    settings: &AnalysisSettings,
) -> Result<RunResults, RunError> {
    analyse_inputs_with(
        data,
        layout,
        settings,
        &GroupFitSettings::default(),
        &mut |_, _| {},
    )
}

/// As [`analyse_inputs`] with the fit settings given; `progress(done, total)` reports bootstrap
/// replicates.
pub fn analyse_inputs_with(
    data: KineticData,
    mut layout: Layout,
    settings: &AnalysisSettings,
    fit_settings: &GroupFitSettings,
    progress: &mut dyn FnMut(usize, usize),
) -> Result<RunResults, RunError> {
    let mut input_warnings = data.warnings.clone();
    input_warnings.extend(check_against_data(
        &mut layout,
        &wells_in_data(&data),
        settings.allow_missing,
    )?);
    let analysis = analyse_plate(&data, &layout, settings);
    let conditions = condition_table(&analysis, &layout)?;
    let fits = fit_groups_with(&analysis, &layout, fit_settings, progress);
    let progress_curves = analyse_progress(&data, &layout, &analysis, &fits, settings);
    Ok(RunResults {
        data,
        layout,
        analysis,
        conditions,
        fits,
        progress: progress_curves,
        input_warnings,
        fit_settings: fit_settings.clone(),
    })
}

/// Reads the inputs of a run and analyses them.
pub fn load_and_analyse(settings: &RunSettings) -> Result<RunResults, RunError> {
    let data = import_data(&settings.data, &settings.import)?;
    let layout = read_layout(&settings.layout, settings.layout_sheet.as_deref(), data.plate)?;
    analyse_inputs(data, layout, &settings.analysis)
}

/// Runs a plate from files and writes the outputs into `out`.
pub fn run_plate(settings: &RunSettings, out: &Path, force: bool) -> Result<RunOutcome, RunError> {
    run_plate_with(settings, &GroupFitSettings::default(), out, force, &mut |_, _| {})
}

/// As [`run_plate`] with the fit settings given.
pub fn run_plate_with(
    settings: &RunSettings,
    fit_settings: &GroupFitSettings,
    out: &Path,
    force: bool,
    progress: &mut dyn FnMut(usize, usize),
) -> Result<RunOutcome, RunError> {
    crate::output::check_output_folder(out, force)?;
    let data = import_data(&settings.data, &settings.import)?;
    let layout = read_layout(&settings.layout, settings.layout_sheet.as_deref(), data.plate)?;
    let results = analyse_inputs_with(data, layout, &settings.analysis, fit_settings, progress)?;
    let inputs = vec![settings.data.clone(), settings.layout.clone()];
    finish_run(results, &settings.used, &inputs, out, force)
}

/// Renders and writes a run's outputs, and builds its summary.
pub fn finish_run(
    results: RunResults,
    used: &SettingLayer,
    inputs: &[PathBuf],
    out: &Path,
    force: bool,
) -> Result<RunOutcome, RunError> {
    let files = render_outputs(&results, used, inputs)?;
    let written = write_outputs(out, force, inputs, &files)?;
    let summary = summary_text_with(&results, used, out);
    Ok(RunOutcome {
        results,
        written,
        summary,
    })
}

/// Prints what was understood of an export.
pub fn inspect(path: &Path, options: &ImportOptions) -> Result<String, ImportError> {
    Ok(inspect_report(&import_data(path, options)?))
}

fn json_bytes(file: &str, value: &Value) -> Result<Vec<u8>, RunError> {
    let mut bytes = serde_json::to_vec_pretty(value).map_err(|error| RunError::Render {
        file: file.to_string(),
        message: error.to_string(),
    })?;
    bytes.push(b'\n');
    Ok(bytes)
}

/// The settings as `fit.json` and `settings.toml` record them.
fn settings_value(used: &SettingLayer) -> Value {
    serde_json::to_value(used).unwrap_or(Value::Null)
}

/// Every output file, rendered in memory.
pub fn render_outputs(
    results: &RunResults,
    used: &SettingLayer,
    inputs: &[PathBuf],
) -> Result<Vec<OutputFile>, RunError> {
    let mut wells = wells_table(&results.analysis, &results.layout)?;
    let mut conditions = conditions_table(&results.conditions, &results.layout, &results.analysis.rate_unit)?;
    let fit = json!({
        "tool": format!("platekin {}", env!("CARGO_PKG_VERSION")),
        "inputs": inputs.iter().map(|p| p.display().to_string()).collect::<Vec<_>>(),
        "groups": results.fits,
        "plate_warnings": results.analysis.warnings,
        "input_warnings": results.input_warnings,
        "settings": settings_value(used),
        "fit_settings": results.fit_settings,
        "caution": CAUTION,
    });
    let data_line = match inputs.first() {
        Some(data) => format!(
            "# data: {}\n",
            data.canonicalize().unwrap_or_else(|_| data.clone()).display()
        ),
        None => "# data: the embedded demo plate (the same files are in demo-plates/)\n".to_string(),
    };
    let progress = json!({
        "tool": format!("platekin {}", env!("CARGO_PKG_VERSION")),
        "inputs": inputs.iter().map(|p| p.display().to_string()).collect::<Vec<_>>(),
        "mode": results.progress.mode,
        "groups": results.progress.groups,
        "settings": settings_value(used),
        "caution": CAUTION,
    });
    let settings_toml = format!(
        "# Settings used by platekin {} for this run; repeat it with\n# platekin run DATA --assay settings.toml --out NEW_FOLDER\n{}{}",
        env!("CARGO_PKG_VERSION"),
        data_line,
        toml::to_string(used).unwrap_or_default()
    );
    let mut files = vec![
        OutputFile {
            name: "wells.csv".into(),
            bytes: csv_bytes(&mut wells)?,
        },
        OutputFile {
            name: "conditions.csv".into(),
            bytes: csv_bytes(&mut conditions)?,
        },
        OutputFile {
            name: "fit.json".into(),
            bytes: json_bytes("fit.json", &fit)?,
        },
        OutputFile {
            name: "progress.json".into(),
            bytes: json_bytes("progress.json", &progress)?,
        },
        OutputFile {
            name: "settings.toml".into(),
            bytes: settings_toml.into_bytes(),
        },
    ];
    // The report (per --report) and run.json, which lists every file before it.
    let report = crate::report::render_report_outputs(results, used, inputs, &files)?;
    files.extend(report);
    Ok(files)
}

/// Formats a value with its 95% interval: `12.1 [11.6, 12.6]`.
fn with_interval(parameter: Option<&crate::groups::ParameterReport>) -> String {
    match parameter {
        None => "-".to_string(),
        Some(p) => {
            let value = significant(p.value);
            let interval = p.ci95.map_or(String::new(), |[lo, hi]| {
                format!(" [{}, {}]", significant(lo), significant(hi))
            });
            let end = |x: Option<f64>, open: &str| x.map_or(open.to_string(), significant);
            let profile = p.ci95_profile.map_or(String::new(), |[lo, hi]| {
                format!(" profile [{}, {}]", end(lo, "open"), end(hi, "open"))
            });
            let doubt = if p.determined { "" } else { " (not determined)" };
            format!("{value}{interval}{profile}{doubt}")
        }
    }
}

/// Four significant digits, plain or scientific as the size needs.
pub fn significant(value: f64) -> String {
    if value == 0.0 || !value.is_finite() {
        return format!("{value}");
    }
    let magnitude = value.abs().log10().floor() as i32;
    if (-3..6).contains(&magnitude) {
        let decimals = (3 - magnitude).max(0) as usize;
        format!("{value:.decimals$}")
    } else {
        format!("{value:.3e}")
    }
}

/// A progress-curve parameter with its interval, and Km's profile interval when there is one.
fn progress_value(parameter: Option<&crate::progress::report::ProgressParameter>) -> String {
    match parameter {
        None => "-".to_string(),
        Some(p) => {
            let interval = p.ci95.map_or(String::new(), |[lo, hi]| {
                format!(" [{}, {}]", significant(lo), significant(hi))
            });
            let profile = p.ci95_profile.map_or(String::new(), |[lo, hi]| {
                let side = |v: Option<f64>| v.map_or("open".to_string(), significant);
                format!(" (profile [{}, {}])", side(lo), side(hi))
            });
            let doubt = if p.determined { "" } else { " (not determined)" };
            format!("{}{interval}{profile} {}{doubt}", significant(p.value), p.unit)
        }
    }
}

/// The progress-curve lines of the summary: one block per group, ending with what to trust.
fn progress_summary(progress: &ProgressAnalysis) -> Vec<String> {
    let mut lines = vec![
        String::new(),
        format!("Progress-curve analysis (--progress {}):", progress.mode),
    ];
    for group in &progress.groups {
        let label = group_label(&group.group);
        if !group.analysed {
            lines.push(format!("  {label}: not fitted; trust: {}", group.trust_reason));
            continue;
        }
        lines.push(format!(
            "  {label}: {} global fit of {} wells ({}), residual SD {} AU",
            group.model.as_deref().unwrap_or("-"),
            group.n_wells,
            group.reason,
            group.residual_sd.map_or("-".to_string(), significant)
        ));
        lines.push(format!(
            "    kcat    {}",
            progress_value(group.parameters.get("kcat"))
        ));
        lines.push(format!(
            "    Km      {}",
            progress_value(group.parameters.get("Km"))
        ));
        for extra in ["Kp", "k_inact", "dead_time"] {
            if let Some(p) = group.parameters.get(extra) {
                lines.push(format!("    {extra:<7} {}", progress_value(Some(p))));
            }
        }
        for warning in &group.warnings {
            lines.push(format!("    warning: {warning}"));
        }
        lines.push(format!("    trust: {}", group.trust_reason));
    }
    lines
}

/// The one-screen summary.
pub fn summary_text(results: &RunResults, out: &Path) -> String {
    summary_text_with(results, &SettingLayer::default(), out)
}

/// The one-screen summary, naming the report files the settings ask for.
pub fn summary_text_with(results: &RunResults, used: &SettingLayer, out: &Path) -> String {
    let data = &results.data;
    let analysis = &results.analysis;
    let mut lines = Vec::new();
    let span = match (data.times_s.first(), data.times_s.last()) {
        (Some(first), Some(last)) => format!("{first}-{last} s"),
        _ => "no reads".to_string(),
    };
    lines.push(format!(
        "platekin {}: {} ({} export, {}-well plate, {} reads, {})",
        env!("CARGO_PKG_VERSION"),
        data.source,
        data.shape,
        data.plate,
        data.times_s.len(),
        span
    ));
    let count = |role: Role| analysis.wells.iter().filter(|w| w.setup.role == role).count();
    lines.push(format!(
        "wells analysed: {} ({} samples, {} no-enzyme, {} blanks); rates in {}",
        analysis.wells.len(),
        count(Role::Sample),
        count(Role::NoEnzyme),
        count(Role::Blank),
        analysis.rate_unit
    ));
    let flagged = analysis.wells.iter().filter(|w| !w.rate.flags.is_empty()).count();
    let counts = flag_counts(&analysis.wells);
    let reasons = counts
        .iter()
        .map(|(flag, n)| format!("{flag} {n}"))
        .collect::<Vec<_>>()
        .join(", ");
    if flagged == 0 {
        lines.push("flagged wells: none".to_string());
    } else {
        lines.push(format!("flagged wells: {flagged} ({reasons})"));
        let excluded: Vec<String> = analysis
            .excluded()
            .map(|(w, reason)| format!("{} {}", w.well, reason))
            .collect();
        if !excluded.is_empty() {
            lines.push(format!("left out of means and fits: {}", excluded.join(", ")));
        }
    }
    lines.push(String::new());
    lines.push("Fits (value [95% interval]):".to_string());
    lines.extend(group_fit_lines(&results.fits));
    lines.extend(progress_summary(&results.progress));
    let mut warnings: Vec<&String> = results.input_warnings.iter().collect();
    warnings.extend(&analysis.warnings);
    if !warnings.is_empty() {
        lines.push(String::new());
        for warning in warnings {
            lines.push(format!("warning: {warning}"));
        }
    }
    lines.push(String::new());
    lines.push(format!(
        "outputs: {}/ (wells.csv, conditions.csv, fit.json, progress.json, settings.toml{}, run.json)",
        out.display(),
        match crate::report::ReportMode::from_layer(used) {
            Ok(crate::report::ReportMode::Html) => ", report.html",
            Ok(crate::report::ReportMode::Full) => ", report.html, plots/*.png",
            _ => "",
        }
    ));
    lines.push(CAUTION.to_string());
    lines.push(String::new());
    lines.join("\n")
}

/// The summary lines of the group fits: model, kcat, Km, kcat/Km (or Vmax) and every other constant.
pub fn group_fit_lines(fits: &[GroupFit]) -> Vec<String> {
    let mut lines = Vec::new();
    for fit in fits {
        lines.push(format!(
            "  {} (n = {}, model {})",
            group_label(&fit.group),
            fit.n,
            fit.model
        ));
        if let Some(error) = &fit.error {
            lines.push(format!("    {error}"));
            continue;
        }
        if let Some(choice) = fit.model_choice.as_ref().filter(|_| fit.models_tried.len() > 1) {
            lines.push(format!("    chosen: {choice}"));
        }
        let unit = |name: &str| {
            fit.parameters
                .get(name)
                .map_or(String::new(), |p| format!(" {}", p.unit))
        };
        // The run's classic block for Michaelis-Menten; other models list what they fitted.
        if fit.model == "michaelis-menten" {
            lines.push(format!(
                "    kcat    {}{}",
                with_interval(fit.parameters.get("kcat")),
                unit("kcat")
            ));
            lines.push(format!(
                "    Km      {}{}",
                with_interval(fit.parameters.get("Km")),
                unit("Km")
            ));
            lines.push(format!(
                "    kcat/Km {}{}",
                with_interval(fit.parameters.get("kcat_over_Km")),
                unit("kcat_over_Km")
            ));
            if !fit.parameters.contains_key("kcat") {
                lines.push(format!(
                    "    Vmax    {}{}",
                    with_interval(fit.parameters.get("Vmax")),
                    unit("Vmax")
                ));
            }
        }
        let classic = fit.model == "michaelis-menten";
        for (name, parameter) in &fit.parameters {
            if classic && ["kcat", "Km", "kcat_over_Km", "Vmax"].contains(&name.as_str()) {
                continue;
            }
            if name == "Vmax" && fit.parameters.contains_key("kcat") {
                continue;
            }
            lines.push(format!(
                "    {name:<7} {} {}",
                with_interval(Some(parameter)),
                parameter.unit
            ));
        }
        for warning in &fit.warnings {
            lines.push(format!("    warning: {warning}"));
        }
    }
    lines
}
