//! The pipeline: one function from a run's inputs (read once into memory) and its resolved
//! settings to the typed results of every stage, each computed once and handed on: the data and
//! layout as read, the plate analysis (signal, windows, flags, background), the condition table,
//! the group fits and the progress-curve analysis. No text, JSON or file is made here.

use std::collections::BTreeSet;

use crate::config::{
    check_against_input, AnalysisSettings, ExcludedWell, FitSettings, ImportOptions, InputFacts,
    SettingsError,
};
use crate::core::plate::WellId;
use crate::files::input::InputFile;
use crate::groups::calibration::{add_slope_uncertainty, curve_for_group};
use crate::groups::units::{
    express_group_rates, express_kcat_in, express_rates_in, RateExpression, RateUnitError,
};
use crate::groups::{fit_groups_with, GroupFit, InitialRateOptions};
use crate::import::pathlength::{read_well_pathlengths, PathlengthFileError};
use crate::import::{import_data, ImportError, KineticData};
use crate::layout::exclusions::{check_exclusions, take_exclude_column, ExclusionError};
use crate::layout::{check_against_data, read_layout, wells_outside_layout, Layout, LayoutError};
use crate::progress::analysis::{analyse_progress, ProgressAnalysis};
use crate::rates::conditions::{condition_table, Condition, TableError};
use crate::rates::{analyse_plate, PlateAnalysis};
use crate::screen::{analyse_screen, is_screen, ScreenAnalysis, ScreenError};

/// Why the pipeline stopped.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    /// The raw export could not be read.
    #[error(transparent)]
    Import(#[from] ImportError),
    /// The layout could not be read or does not fit the data.
    #[error(transparent)]
    Layout(#[from] LayoutError),
    /// The condition table could not be built.
    #[error(transparent)]
    Table(#[from] TableError),
    /// A setting cannot work on these inputs.
    #[error(transparent)]
    Settings(#[from] SettingsError),
    /// A well excluded by hand is not on the plate or not in the layout.
    #[error(transparent)]
    Exclusion(#[from] ExclusionError),
    /// A screening plate's layout cannot give % activity or dose-response curves.
    #[error(transparent)]
    Screen(#[from] Box<ScreenError>),
    /// The per-well pathlength table cannot be used.
    #[error(transparent)]
    Pathlength(#[from] PathlengthFileError),
    /// Rates cannot be given in the unit asked for.
    #[error(transparent)]
    RateUnit(#[from] RateUnitError),
}

/// Everything a run found.
#[derive(Debug, Clone)]
pub struct RunResults {
    /// The data as read.
    pub data: KineticData,
    /// The layout as read.
    pub layout: Layout,
    /// The analysis settings used.
    pub settings: AnalysisSettings,
    /// How the groups were fitted (model, weighting, loss, intervals).
    pub fit_settings: FitSettings,
    /// Per-well rates, with the plate's signal conversion.
    pub analysis: PlateAnalysis,
    /// Per-condition rows.
    pub conditions: Vec<Condition>,
    /// Per-group fits.
    pub fits: Vec<GroupFit>,
    /// Per-group progress-curve analysis.
    pub progress: ProgressAnalysis,
    /// Warnings from reading the inputs and checking them against each other.
    pub input_warnings: Vec<String>,
    /// Wells left out by hand (settings, `--exclude`, the layout's `exclude` column), in well order.
    pub exclusions: Vec<ExcludedWell>,
    /// The screen's % activity, plate quality and compounds, on a screening plate.
    pub screen: Option<ScreenAnalysis>,
    /// The unit rates are written in and the factor from the internal unit (`--rate-unit`): the
    /// constants are already expressed; every other rate is multiplied where it is written.
    pub rates_in: RateExpression,
}

/// The inputs of a plate, read once.
#[derive(Debug, Clone)]
pub struct PlateInputs {
    /// The raw export.
    pub data: InputFile,
    /// The layout.
    pub layout: InputFile,
    /// The per-well pathlength table (`--pathlength-from`), if given.
    pub pathlengths: Option<InputFile>,
}

/// Parses the inputs' bytes and analyses them. `progress(done, total)` reports bootstrap
/// replicates.
pub fn run_pipeline(
    inputs: PlateInputs,
    import: &ImportOptions,
    layout_sheet: Option<&str>,
    settings: &AnalysisSettings,
    fit_settings: &FitSettings,
    progress: &mut dyn FnMut(usize, usize),
) -> Result<RunResults, PipelineError> {
    let PlateInputs {
        data,
        layout,
        pathlengths,
    } = inputs;
    // The export's bytes were hashed when read; the import lets them go once they are cells.
    let imported = import_data(data, import)?;
    // The export's bytes and cells are gone: their pages go back before the analysis allocates.
    crate::core::memory::release_freed_memory();
    let layout = read_layout(&layout, layout_sheet, imported.plate)?;
    check_against_input(settings, &input_facts(&imported, &layout))?;
    let Some(table) = pathlengths else {
        return analyse_inputs(imported, layout, settings, fit_settings, progress);
    };
    let settings = AnalysisSettings {
        pathlength_by_well: read_well_pathlengths(&table, imported.plate, settings.water_reference)?,
        ..settings.clone()
    };
    analyse_inputs(imported, layout, &settings, fit_settings, progress)
}

/// Analyses inputs already parsed (tests and benchmarks start here).
pub fn analyse_inputs(
    data: KineticData,
    mut layout: Layout,
    settings: &AnalysisSettings,
    fit_settings: &FitSettings,
    progress: &mut dyn FnMut(usize, usize),
) -> Result<RunResults, PipelineError> {
    let mut input_warnings = data.warnings.clone();
    input_warnings.extend(check_against_data(
        &mut layout,
        &wells_in_data(&data),
        settings.allow_missing,
    )?);
    input_warnings.extend(wells_outside_layout(&layout, &wells_with_readings(&data)));
    let mut asked = settings.screen.exclusions.clone();
    asked.extend(take_exclude_column(&mut layout));
    let exclusions: Vec<ExcludedWell> = check_exclusions(&asked, data.plate, &layout)?
        .into_values()
        .collect();
    let mut analysis = analyse_plate(&data, &layout, settings);
    // Checked before any fit runs: a unit that cannot apply stops the run with nothing written.
    let rates_in = RateExpression::new(
        analysis.signal.concentration_unit,
        analysis.signal.rate_unit(),
        settings.rate_unit,
    )?;
    analysis.apply_exclusions(exclusions.iter().map(|e| (e.well, e.reason.as_str())));
    let screening = is_screen(&layout);
    let initial = InitialRateOptions {
        estimator: settings.initial_rate,
        dead_time_s: settings.rates.dead_time_s,
        enzyme_mw_kda: settings.enzyme_mw_kda,
    };
    // A screening plate's samples are described by their compound's dose-response curve on %
    // activity (`screen`), not by rate-law fits of raw rates: the group fits and the
    // progress-curve analysis are not run, and each well keeps its window's rate.
    let mut fits = if screening {
        Vec::new()
    } else {
        fit_groups_with(&analysis, &layout, fit_settings, &initial, progress)
    };
    // The group fits' depletion-corrected initial rates become the wells' rates, once.
    let corrected: std::collections::BTreeMap<WellId, (f64, f64)> = fits
        .iter()
        .flat_map(|fit| {
            fit.initial_rates
                .iter()
                .map(|(well, rate, se)| (*well, (*rate, *se)))
        })
        .collect();
    analysis.apply_initial_rates(&corrected);
    let sensitivities: std::collections::BTreeMap<WellId, f64> = fits
        .iter()
        .flat_map(|fit| fit.substrate_sensitivities.iter().copied())
        .collect();
    analysis.apply_substrate_sensitivities(&sensitivities);
    let conditions = condition_table(&analysis, &layout)?;
    let (mut progress_curves, screen) = if screening {
        let screen = analyse_screen(
            &analysis,
            &layout,
            &settings.screen,
            fit_settings.cheng_prusoff_km,
            data.plate,
        )
        .map_err(Box::new)?;
        let none = ProgressAnalysis {
            mode: settings.progress.mode,
            groups: Vec::new(),
        };
        (none, Some(screen))
    } else {
        (analyse_progress(&data, &layout, &analysis, &fits, settings), None)
    };
    // The fits ran in the worker threads, whose arenas keep the pages they freed.
    crate::core::memory::release_freed_memory();
    // The standard curve's slope scales every converted rate of a group: its uncertainty joins
    // the constants it scales, once the fits (and the progress fits that start from them) are made.
    if let Some(calibration) = &analysis.signal.calibration {
        for fit in &mut fits {
            if let Some(curve) = curve_for_group(calibration, &fit.group) {
                fit.warnings
                    .extend(add_slope_uncertainty(&mut fit.parameters, curve));
            }
        }
        for report in &mut progress_curves.groups {
            if let Some(curve) = curve_for_group(calibration, &report.group) {
                report
                    .warnings
                    .extend(add_slope_uncertainty(&mut report.parameters, curve));
            }
        }
    }
    // kcat and kcat/Km, and Vmax, in the units asked for, once, after every step that computes
    // with them.
    for fit in &mut fits {
        express_kcat_in(&mut fit.parameters, settings.kcat_unit);
        express_group_rates(fit, &rates_in);
    }
    for report in &mut progress_curves.groups {
        express_kcat_in(&mut report.parameters, settings.kcat_unit);
        express_rates_in(&mut report.parameters, &rates_in);
        for well in &mut report.wells {
            well.implied_initial_rate = rates_in.rate(well.implied_initial_rate);
            well.window_rate = rates_in.optional(well.window_rate);
        }
        // The initial-rate kcat shown beside it is the group fit's, as finally reported.
        if let Some(summary) = &mut report.initial_rate_fit {
            if let Some(fit) = fits.iter().find(|fit| fit.group == report.group) {
                summary.kcat = fit.parameters.get("kcat").cloned();
            }
        }
    }
    Ok(RunResults {
        data,
        layout,
        settings: settings.clone(),
        fit_settings: fit_settings.clone(),
        analysis,
        conditions,
        fits,
        progress: progress_curves,
        input_warnings,
        exclusions,
        screen,
        rates_in,
    })
}

/// The set of wells the data holds.
pub fn wells_in_data(data: &KineticData) -> BTreeSet<WellId> {
    data.wells.iter().map(|trace| trace.well).collect()
}

/// What the settings are checked against: the export's reads and readings, the layout's unit.
fn input_facts<'a>(data: &'a KineticData, layout: &Layout) -> InputFacts<'a> {
    let largest_reading = data
        .wells
        .iter()
        .flat_map(|trace| trace.values.iter().flatten())
        .fold(0.0_f64, |largest, value| largest.max(value.abs()));
    InputFacts {
        export: &data.source.file,
        times_s: &data.times_s,
        largest_reading,
        substrate_unit_in_molar: layout.substrate_unit.map(|unit| unit.in_molar()),
    }
}

/// The wells of the data with at least one reading.
fn wells_with_readings(data: &KineticData) -> BTreeSet<WellId> {
    data.wells
        .iter()
        .filter(|trace| trace.values.any_readable())
        .map(|trace| trace.well)
        .collect()
}
