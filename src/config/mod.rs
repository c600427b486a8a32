//! The settings of a run, resolved once: command-line flags laid over an assay file (`--assay
//! assay.toml`, same keys as the flags; flags win) laid over the defaults, each value checked and
//! each choice parsed into its typed value ([`choices`]). The layers below take these typed
//! settings and never see a setting's word again. The settings actually used ([`SettingLayer`] with
//! every default filled in) are written into the outputs so a run can be repeated.

pub mod choices;

use std::path::{Path, PathBuf};

pub use choices::*;

use crate::core::format::significant;
use crate::core::plate::{PlateFormat, WellId};
use crate::core::units::{RateUnit, TimeUnit};

/// Every setting, each optional, as a flag set or an assay file gives them. Keys are the flags'
/// names (`max-conversion`, `min-points`, ...).
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct SettingLayer {
    /// Plate layout file.
    pub layout: Option<PathBuf>,
    /// Sheet of the data workbook.
    pub sheet: Option<String>,
    /// Sheet of the layout workbook.
    pub layout_sheet: Option<String>,
    /// Forced data shape.
    pub shape: Option<String>,
    /// Forced plate format.
    pub plate: Option<String>,
    /// Time unit for plain-number times.
    pub time_unit: Option<String>,
    /// What to do with a data row cut short: `refuse` or `unreadable`.
    pub short_rows: Option<String>,
    /// `product` or `substrate`.
    pub readout: Option<String>,
    /// Extinction coefficient of the species read, M^-1 cm^-1.
    pub extinction: Option<f64>,
    /// Pathlength, cm.
    pub pathlength: Option<f64>,
    /// Dead time to ignore at the start, s.
    pub skip: Option<f64>,
    /// Largest fraction of substrate converted in a window.
    pub max_conversion: Option<f64>,
    /// Fewest reads in a window.
    pub min_points: Option<usize>,
    /// A fixed window `start:end` in seconds.
    pub window: Option<String>,
    /// Raw absorbance limit.
    pub max_absorbance: Option<f64>,
    /// Level of the straightness tests.
    pub alpha: Option<f64>,
    /// Keep flagged wells in means and fits.
    pub keep_flagged: Option<bool>,
    /// Layout wells absent from the data only warn.
    pub allow_missing: Option<bool>,
    /// The layout factor naming each sample's compound on a screening plate (default `compound`).
    pub compound_column: Option<String>,
    /// A table of wells to leave out (`well`, `reason`); read by the run, which records its rows in
    /// `excluded-wells` so that `settings.toml` repeats the run without the file.
    pub exclude: Option<PathBuf>,
    /// Wells left out by hand, each with its reason.
    pub excluded_wells: Option<Vec<ExcludedWellEntry>>,
    /// Report written: `none`, `html` (default) or `full` (adds PNGs).
    pub report: Option<String>,
    /// Rate law: `auto` or a model name.
    pub model: Option<String>,
    /// Point weights: `none`, `relative` or `replicate-sd`.
    pub weighting: Option<String>,
    /// Robust loss: `none` or `huber`.
    pub robust: Option<String>,
    /// Residual-bootstrap replicates.
    pub bootstrap: Option<usize>,
    /// Seed of the bootstrap.
    pub seed: Option<u64>,
    /// Profile-likelihood intervals.
    pub profile: Option<bool>,
    /// Km for the Cheng-Prusoff Ki of an IC50.
    pub cheng_prusoff_km: Option<f64>,
    /// Progress-curve analysis: `auto`, `always` or `never`.
    pub progress: Option<String>,
    /// Time from the start of the reaction to the first read's time zero, s.
    pub dead_time: Option<f64>,
    /// Estimate a shared dead time in the progress-curve fits.
    pub fit_dead_time: Option<bool>,
    /// Initial-rate estimator: `integrated`, `tangent` or `chord`.
    pub initial_rate: Option<String>,
    /// Standard curves' calibration function: `auto`, `line` or `quadratic`.
    pub standard_curve: Option<String>,
    /// Take S0 from each well's first signal (substrate readout) in the progress-curve fits.
    pub s0_from_signal: Option<bool>,
    /// What the reader measures: `absorbance` (default), `fluorescence` or `luminescence`.
    pub signal: Option<String>,
    /// Raw fluorescence or luminescence above which reads are not used.
    pub max_signal: Option<f64>,
    /// Liquid volume in each well, uL (the pathlength is then the liquid height).
    pub volume: Option<f64>,
    /// Diameter of a round flat-bottomed well, mm.
    pub well_diameter: Option<f64>,
    /// A named well shape (`96-round`, `96-half-area`, `384-square`, `384-round`, `1536-square`).
    pub well_geometry: Option<String>,
    /// A per-well pathlength table: `pathlength [cm]`, or `A977` and `A900` water-peak reads.
    pub pathlength_from: Option<PathBuf>,
    /// The 1-cm (A977 - A900) of water for the water-peak method, AU.
    pub water_reference: Option<f64>,
    /// The unit of kcat: `1/s` (default) or `1/min`.
    pub kcat_unit: Option<String>,
    /// The unit of rates (`uM/min`, `nM/s`); default: the layout's concentration unit per second.
    pub rate_unit: Option<String>,
    /// The enzyme's molecular weight, kDa: kcat from an enzyme given as mg/mL or ug/mL.
    pub enzyme_mw: Option<f64>,
    /// The wavelength to analyse in an export holding several, nm.
    pub wavelength: Option<f64>,
    /// A reference wavelength subtracted per read and well, nm.
    pub reference_wavelength: Option<f64>,
}

impl SettingLayer {
    /// Lays `self` over `below`: every field set here wins.
    pub fn over(self, below: SettingLayer) -> SettingLayer {
        SettingLayer {
            layout: self.layout.or(below.layout),
            sheet: self.sheet.or(below.sheet),
            layout_sheet: self.layout_sheet.or(below.layout_sheet),
            shape: self.shape.or(below.shape),
            plate: self.plate.or(below.plate),
            time_unit: self.time_unit.or(below.time_unit),
            short_rows: self.short_rows.or(below.short_rows),
            readout: self.readout.or(below.readout),
            extinction: self.extinction.or(below.extinction),
            pathlength: self.pathlength.or(below.pathlength),
            skip: self.skip.or(below.skip),
            max_conversion: self.max_conversion.or(below.max_conversion),
            min_points: self.min_points.or(below.min_points),
            window: self.window.or(below.window),
            max_absorbance: self.max_absorbance.or(below.max_absorbance),
            alpha: self.alpha.or(below.alpha),
            keep_flagged: self.keep_flagged.or(below.keep_flagged),
            allow_missing: self.allow_missing.or(below.allow_missing),
            compound_column: self.compound_column.or(below.compound_column),
            exclude: self.exclude.or(below.exclude),
            excluded_wells: self.excluded_wells.or(below.excluded_wells),
            report: self.report.or(below.report),
            model: self.model.or(below.model),
            weighting: self.weighting.or(below.weighting),
            robust: self.robust.or(below.robust),
            bootstrap: self.bootstrap.or(below.bootstrap),
            seed: self.seed.or(below.seed),
            profile: self.profile.or(below.profile),
            cheng_prusoff_km: self.cheng_prusoff_km.or(below.cheng_prusoff_km),
            progress: self.progress.or(below.progress),
            dead_time: self.dead_time.or(below.dead_time),
            fit_dead_time: self.fit_dead_time.or(below.fit_dead_time),
            initial_rate: self.initial_rate.or(below.initial_rate),
            standard_curve: self.standard_curve.or(below.standard_curve),
            s0_from_signal: self.s0_from_signal.or(below.s0_from_signal),
            signal: self.signal.or(below.signal),
            max_signal: self.max_signal.or(below.max_signal),
            volume: self.volume.or(below.volume),
            well_diameter: self.well_diameter.or(below.well_diameter),
            well_geometry: self.well_geometry.or(below.well_geometry),
            pathlength_from: self.pathlength_from.or(below.pathlength_from),
            water_reference: self.water_reference.or(below.water_reference),
            kcat_unit: self.kcat_unit.or(below.kcat_unit),
            rate_unit: self.rate_unit.or(below.rate_unit),
            enzyme_mw: self.enzyme_mw.or(below.enzyme_mw),
            wavelength: self.wavelength.or(below.wavelength),
            reference_wavelength: self.reference_wavelength.or(below.reference_wavelength),
        }
    }

    /// Reads an assay file. Relative paths in it (`layout`) are taken from the file's folder.
    pub fn from_assay_file(path: &Path) -> Result<SettingLayer, SettingsError> {
        let unreadable = |source| SettingsError::AssayUnreadable {
            file: path.display().to_string(),
            source,
        };
        // Read once, with a ceiling like every input: an assay file is a few hundred bytes.
        let mut bytes = Vec::new();
        std::io::Read::read_to_end(
            &mut std::io::Read::take(
                std::fs::File::open(path).map_err(unreadable)?,
                MAX_ASSAY_BYTES + 1,
            ),
            &mut bytes,
        )
        .map_err(unreadable)?;
        if bytes.len() as u64 > MAX_ASSAY_BYTES {
            return Err(SettingsError::AssayInvalid {
                file: path.display().to_string(),
                message: format!(
                    "the file is larger than {} kB, far beyond any assay file",
                    MAX_ASSAY_BYTES / 1024
                ),
            });
        }
        let text = String::from_utf8(bytes).map_err(|_| SettingsError::AssayInvalid {
            file: path.display().to_string(),
            message: "the file is not UTF-8 text".to_string(),
        })?;
        SettingLayer::from_assay_text(&text, path)
    }

    /// Reads the text of the assay file at `path` (named in errors; relative paths in it are
    /// taken from its folder).
    pub fn from_assay_text(text: &str, path: &Path) -> Result<SettingLayer, SettingsError> {
        let mut layer: SettingLayer = toml::from_str(text).map_err(|error| SettingsError::AssayInvalid {
            file: path.display().to_string(),
            message: error.to_string().trim_end().to_string(),
        })?;
        if let (Some(layout), Some(folder)) = (&layer.layout, path.parent()) {
            if layout.is_relative() {
                layer.layout = Some(folder.join(layout));
            }
        }
        if let (Some(exclude), Some(folder)) = (&layer.exclude, path.parent()) {
            if exclude.is_relative() {
                layer.exclude = Some(folder.join(exclude));
            }
        }
        if let (Some(table), Some(folder)) = (&layer.pathlength_from, path.parent()) {
            if table.is_relative() {
                layer.pathlength_from = Some(folder.join(table));
            }
        }
        Ok(layer)
    }
}

/// The most reads an export may hold (a read every second for five and a half hours); beyond it
/// the export is refused rather than held in memory (`import`), and `min-points` cannot ask for
/// more.
pub const MAX_READS: usize = 20_000;

/// The longest time platekin reads, s (about 31 years): read times, `skip`, `dead-time` and a
/// window's ends beyond it are refused, so no arithmetic on them can overflow.
pub const MAX_SECONDS: f64 = 1e9;

/// The largest assay file read (1 MiB).
pub const MAX_ASSAY_BYTES: u64 = 1024 * 1024;

/// The most bootstrap replicates (`--bootstrap`): each is a whole refit, and percentile intervals
/// are settled long before this many.
pub const MAX_BOOTSTRAP: usize = 100_000;

/// The largest extinction coefficient accepted, M^-1 cm^-1: far above any chromophore's
/// (strongly absorbing dyes reach a few 10^5; common practice), so only a slip is refused.
pub const MAX_EXTINCTION: f64 = 1e7;

/// The longest pathlength accepted, cm: ten times the longest common cuvette (common practice).
pub const MAX_PATHLENGTH_CM: f64 = 100.0;

/// A setting that cannot be used, with the reason; or an assay file that cannot be read.
#[derive(Debug, thiserror::Error)]
pub enum SettingsError {
    /// A value that cannot work, with the setting's name in the message.
    #[error("{message}")]
    Invalid {
        /// The setting's key (`min-points`), when one setting is at fault.
        key: Option<&'static str>,
        /// What is wrong, naming the setting.
        message: String,
    },
    /// A value from the assay file that cannot work.
    #[error("{file}: {message}")]
    InvalidInAssay {
        /// The assay file as the user named it.
        file: String,
        /// What is wrong, naming the setting.
        message: String,
    },
    /// A setting that cannot work on this input.
    #[error("{message}")]
    NotForThisInput {
        /// What is wrong, naming the setting and the input.
        message: String,
    },
    /// The assay file could not be read.
    #[error("{file}: cannot read the assay file")]
    AssayUnreadable {
        /// The file as the user named it.
        file: String,
        /// The system's reason.
        #[source]
        source: std::io::Error,
    },
    /// The assay file is not valid TOML for these settings.
    #[error("{file}: {message}")]
    AssayInvalid {
        /// The file as the user named it.
        file: String,
        /// The TOML reader's reason, with line and column.
        message: String,
    },
}

impl SettingsError {
    fn new(message: String) -> SettingsError {
        SettingsError::Invalid { key: None, message }
    }

    /// An error about the one setting `key`.
    fn about(key: &'static str, message: String) -> SettingsError {
        SettingsError::Invalid {
            key: Some(key),
            message,
        }
    }
}

/// Whether `layer` sets `key` (spelled as the flags and assay files spell it).
fn layer_sets(layer: &SettingLayer, key: &str) -> bool {
    toml::Value::try_from(layer)
        .ok()
        .and_then(|value| value.as_table().map(|table| table.contains_key(key)))
        .unwrap_or(false)
}

/// Lays the flags over an assay file (if any) and resolves the run; a value the assay file gave
/// (and no flag replaced) that cannot work is named with the file.
pub fn resolve_run_from(
    data: PathBuf,
    flags: SettingLayer,
    assay: Option<(&Path, SettingLayer)>,
) -> Result<RunSettings, SettingsError> {
    let Some((file, assay_layer)) = assay else {
        return resolve_run(data, flags);
    };
    let file_sets = |key: &str| layer_sets(&assay_layer, key) && !layer_sets(&flags, key);
    let attributed = |error: SettingsError| match error {
        SettingsError::Invalid {
            key: Some(key),
            message,
        } if file_sets(key) => SettingsError::InvalidInAssay {
            file: file.display().to_string(),
            message,
        },
        other => other,
    };
    resolve_run(data, flags.clone().over(assay_layer.clone())).map_err(attributed)
}

/// The resolved settings of an analysis (everything but where the files are).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct AnalysisSettings {
    /// What is read.
    pub readout: Readout,
    /// M^-1 cm^-1, when known.
    pub extinction_per_molar_cm: Option<f64>,
    /// cm, when known.
    pub pathlength_cm: Option<f64>,
    /// The 1-cm (A977 - A900) of water for a water-peak pathlength table, AU.
    pub water_reference: f64,
    /// The unit kcat and kcat/Km are reported in.
    pub kcat_unit: KcatUnit,
    /// The unit rates are reported in; `None`: the concentration unit of the signal's conversion
    /// per second (`uM/s` for a layout in uM), as before the setting existed.
    pub rate_unit: Option<RateUnit>,
    /// The enzyme's molecular weight, kDa, for kcat from a mass concentration.
    pub enzyme_mw_kda: Option<f64>,
    /// Pathlength of each well listed in a `--pathlength-from` table, cm (filled once the table is
    /// read; wells not listed use `pathlength_cm`).
    #[serde(skip)]
    pub pathlength_by_well: std::collections::BTreeMap<crate::core::plate::WellId, f64>,
    /// Window rules (with the dead time).
    pub rates: RateSettings,
    /// How each well's initial rate is estimated.
    pub initial_rate: InitialRateEstimator,
    /// The calibration function of standard curves.
    pub standard_curve: StandardCurveModel,
    /// Keep flagged wells in means and fits.
    pub keep_flagged: bool,
    /// Layout wells absent from the data only warn.
    pub allow_missing: bool,
    /// The progress-curve analysis.
    pub progress: ProgressSettings,
    /// Screening plates: the compound factor and the wells left out by hand.
    pub screen: ScreenSettings,
}

/// One well left out by hand, as an assay file or `settings.toml` writes it.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ExcludedWellEntry {
    /// The well, e.g. `C7`.
    pub well: String,
    /// Why it is left out (a bubble, a pipetting error).
    pub reason: String,
}

/// A well left out by hand, resolved.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct ExcludedWell {
    /// The well.
    pub well: WellId,
    /// Why.
    pub reason: String,
    /// Where it was asked for (a file and row, a layout cell, or the settings), for messages.
    pub origin: String,
}

/// The settings of a screening plate.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct ScreenSettings {
    /// The layout factor naming each sample's compound.
    pub compound_column: String,
    /// Wells left out by hand (settings and `--exclude`; the layout's `exclude` column is read
    /// with the layout).
    pub exclusions: Vec<ExcludedWell>,
}

/// The compound factor's name when none is given.
pub const DEFAULT_COMPOUND_COLUMN: &str = "compound";

impl Default for ScreenSettings {
    fn default() -> Self {
        ScreenSettings {
            compound_column: DEFAULT_COMPOUND_COLUMN.to_string(),
            exclusions: Vec::new(),
        }
    }
}

/// The longest reason kept for a well left out by hand, in characters.
pub const MAX_EXCLUSION_REASON_CHARS: usize = 500;

/// Checks one exclusion's well and reason; the error names `origin`.
pub fn resolve_excluded_well(well: &str, reason: &str, origin: &str) -> Result<ExcludedWell, String> {
    let parsed = WellId::parse(well.trim())
        .ok_or_else(|| format!("{origin}: '{}' is not a well (write it like C7)", well.trim()))?;
    let reason = reason.trim();
    if reason.is_empty() {
        return Err(format!(
            "{origin}: well {parsed} is excluded without a reason (say why, e.g. 'bubble')"
        ));
    }
    if reason.chars().count() > MAX_EXCLUSION_REASON_CHARS {
        return Err(format!(
            "{origin}: the reason for well {parsed} is longer than {MAX_EXCLUSION_REASON_CHARS} characters"
        ));
    }
    Ok(ExcludedWell {
        well: parsed,
        reason: reason.to_string(),
        origin: origin.to_string(),
    })
}

impl AnalysisSettings {
    /// These settings with another initial-rate estimator, and the conversion limit and
    /// straightness tests that go with it (as `run` resolves them when no limit is given).
    pub fn with_initial_rate(mut self, estimator: InitialRateEstimator) -> AnalysisSettings {
        self.initial_rate = estimator;
        self.rates.max_conversion = estimator.default_max_conversion();
        self.rates.allow_depletion_curvature = estimator.corrects_depletion();
        self
    }
}

impl Default for AnalysisSettings {
    fn default() -> Self {
        AnalysisSettings {
            readout: Readout::Product,
            extinction_per_molar_cm: None,
            pathlength_cm: None,
            water_reference: DEFAULT_WATER_REFERENCE,
            kcat_unit: KcatUnit::PerSecond,
            rate_unit: None,
            enzyme_mw_kda: None,
            pathlength_by_well: std::collections::BTreeMap::new(),
            rates: RateSettings::default(),
            initial_rate: InitialRateEstimator::default(),
            standard_curve: StandardCurveModel::default(),
            keep_flagged: false,
            allow_missing: false,
            progress: ProgressSettings::default(),
            screen: ScreenSettings::default(),
        }
    }
}

/// Everything a `run` needs.
#[derive(Debug, Clone)]
pub struct RunSettings {
    /// The raw export.
    pub data: PathBuf,
    /// The plate layout.
    pub layout: PathBuf,
    /// How the export is read.
    pub import: ImportOptions,
    /// The sheet of a layout workbook.
    pub layout_sheet: Option<String>,
    /// A per-well pathlength table, if given.
    pub pathlength_from: Option<PathBuf>,
    /// The analysis.
    pub analysis: AnalysisSettings,
    /// How groups are fitted.
    pub fit: FitSettings,
    /// How much report is written.
    pub report: ReportMode,
    /// Every setting as used, for the outputs (the layers merged, defaults filled in).
    pub used: SettingLayer,
}

fn parse_field<T: std::str::FromStr<Err = String>>(
    name: &'static str,
    text: &Option<String>,
) -> Result<Option<T>, SettingsError> {
    text.as_deref()
        .map(|value| {
            value
                .parse::<T>()
                .map_err(|error| SettingsError::about(name, format!("{name}: {error}")))
        })
        .transpose()
}

/// What the settings are checked against once the inputs are read.
#[derive(Debug, Clone, Copy)]
pub struct InputFacts<'a> {
    /// The export as the user named it (and its sheet).
    pub export: &'a str,
    /// Its read times, s.
    pub times_s: &'a [f64],
    /// Its largest reading in absolute value, AU.
    pub largest_reading: f64,
    /// One unit of the layout's substrate concentrations, in mol/L, if the layout gives one.
    pub substrate_unit_in_molar: Option<f64>,
}

/// Refuses settings that cannot work on this input, naming both: a window rule that leaves fewer
/// reads than `min-points` (too many points asked for, `skip` past the data, a fixed window past
/// the last read), and an extinction coefficient and pathlength whose conversion of the readings
/// is not a finite number.
pub fn check_against_input(settings: &AnalysisSettings, input: &InputFacts) -> Result<(), SettingsError> {
    let rates = &settings.rates;
    let usable = input
        .times_s
        .iter()
        .filter(|&&t| {
            t >= rates.skip_s
                && rates
                    .fixed_window_s
                    .is_none_or(|(start, end)| t >= start && t <= end)
        })
        .count();
    let span = match (input.times_s.first(), input.times_s.last()) {
        (Some(first), Some(last)) => format!(
            "{} reads from {} s to {} s",
            input.times_s.len(),
            crate::core::format::format_seconds(*first),
            crate::core::format::format_seconds(*last)
        ),
        _ => "no reads".to_string(),
    };
    if usable < rates.min_points {
        let rule = match (rates.fixed_window_s, rates.skip_s > 0.0) {
            (Some((start, end)), _) => format!("window {start}:{end} holds {usable} of them"),
            (None, true) => format!("skip = {} s leaves {usable} of them", rates.skip_s),
            (None, false) => format!("{usable} of them are at or after 0 s"),
        };
        return Err(SettingsError::NotForThisInput {
            message: format!(
                "{}: {span}; {rule}, fewer than min-points = {}, so no well could have a window; \
                 give a smaller min-points or a wider window",
                input.export, rates.min_points
            ),
        });
    }
    if let (Some(epsilon), Some(path), Some(unit)) = (
        settings.extinction_per_molar_cm,
        settings.pathlength_cm,
        input.substrate_unit_in_molar,
    ) {
        let per_absorbance = 1.0 / (epsilon * path) / unit;
        let largest = input.largest_reading * per_absorbance;
        if !(per_absorbance.is_finite() && largest.is_finite() && per_absorbance > 0.0) {
            return Err(SettingsError::NotForThisInput {
                message: format!(
                    "{}: extinction = {} x pathlength = {} is {} M^-1, which turns its readings \
                     (up to {} AU) into no finite concentration; check both values",
                    input.export,
                    significant(epsilon),
                    significant(path),
                    significant(epsilon * path),
                    significant(input.largest_reading)
                ),
            });
        }
    }
    Ok(())
}

/// Parses a window `start:end` in seconds.
pub fn parse_window(text: &str) -> Result<(f64, f64), String> {
    let (start, end) = text
        .split_once(':')
        .ok_or_else(|| format!("window '{text}' is not start:end in seconds (for example 0:300)"))?;
    let start: f64 = start
        .trim()
        .parse()
        .map_err(|_| format!("window start '{start}' is not a number"))?;
    let end: f64 = end
        .trim()
        .parse()
        .map_err(|_| format!("window end '{end}' is not a number"))?;
    if !(start.is_finite() && end.is_finite() && end > start && start >= 0.0) {
        return Err(format!("window '{text}' must have 0 <= start < end"));
    }
    if end > MAX_SECONDS {
        return Err(format!(
            "window '{text}' ends beyond {MAX_SECONDS:e} s, the longest time platekin reads"
        ));
    }
    Ok((start, end))
}

fn positive(name: &'static str, value: Option<f64>) -> Result<Option<f64>, SettingsError> {
    match value {
        Some(v) if !(v.is_finite() && v > 0.0) => Err(SettingsError::about(
            name,
            format!("{name} must be a positive number, got {v}"),
        )),
        other => Ok(other),
    }
}

/// A positive number no larger than `ceiling`.
fn positive_at_most(
    name: &'static str,
    value: Option<f64>,
    ceiling: f64,
) -> Result<Option<f64>, SettingsError> {
    match positive(name, value)? {
        Some(v) if v > ceiling => Err(SettingsError::about(
            name,
            format!("{name} {v} is beyond {ceiling:e}, the largest platekin accepts"),
        )),
        other => Ok(other),
    }
}

/// Resolves the merged layers of a run into settings, checking each value.
pub fn resolve_run(data: PathBuf, layer: SettingLayer) -> Result<RunSettings, SettingsError> {
    let layout = layer.layout.clone().ok_or_else(|| {
        SettingsError::new("no plate layout: give --layout LAYOUT (or `layout` in the assay file)".into())
    })?;
    let import = resolve_import(&layer)?;
    let layer_pathlength_from = layer.pathlength_from.clone();
    let analysis = resolve_analysis(&layer)?;
    let fit = resolve_fit(&layer)?;
    let report = resolve_report(&layer)?;
    // The recorded layout path is absolute, so that `--assay settings.toml` from the output folder
    // finds the same file.
    let recorded_layout = layout.canonicalize().unwrap_or_else(|_| layout.clone());
    let mut used = used_layer(
        SettingLayer {
            layout: Some(recorded_layout),
            ..layer
        },
        &analysis,
    );
    used.report = Some(report.word().to_string());
    Ok(RunSettings {
        data,
        layout,
        import,
        layout_sheet: used.layout_sheet.clone(),
        pathlength_from: layer_pathlength_from,
        analysis,
        fit,
        report,
        used,
    })
}

/// The report a layer asks for (html when not set).
pub fn resolve_report(layer: &SettingLayer) -> Result<ReportMode, SettingsError> {
    Ok(parse_field::<ReportMode>("report", &layer.report)?.unwrap_or_default())
}

/// Resolves how the raw export is read.
pub fn resolve_import(layer: &SettingLayer) -> Result<ImportOptions, SettingsError> {
    Ok(ImportOptions {
        shape: parse_field::<DataShape>("shape", &layer.shape)?,
        time_unit: parse_field::<TimeUnit>("time-unit", &layer.time_unit)?,
        plate: parse_field::<PlateFormat>("plate", &layer.plate)?,
        sheet: layer.sheet.clone(),
        short_rows: parse_field::<ShortRowPolicy>("short-rows", &layer.short_rows)?.unwrap_or_default(),
        wavelength_nm: wavelength_setting("wavelength", layer.wavelength)?,
        reference_wavelength_nm: wavelength_setting("reference-wavelength", layer.reference_wavelength)?,
    })
}

/// The longest wavelength taken, nm: beyond any plate reader's range.
pub const MAX_WAVELENGTH_NM: f64 = 2000.0;

/// A wavelength setting: a positive number of nm up to [`MAX_WAVELENGTH_NM`].
fn wavelength_setting(name: &'static str, value: Option<f64>) -> Result<Option<f64>, SettingsError> {
    match value {
        Some(nm) if !(nm.is_finite() && nm > 0.0 && nm <= MAX_WAVELENGTH_NM) => Err(SettingsError::about(
            name,
            format!("{name} is a wavelength in nm, from above 0 to {MAX_WAVELENGTH_NM}, got {nm}"),
        )),
        other => Ok(other),
    }
}

/// Refuses the settings that belong to another kind of signal than the one read, saying why:
/// Beer-Lambert (`extinction`, `pathlength`) and `max-absorbance` describe absorbance only, and
/// `max-signal` describes the others.
fn check_signal_settings(layer: &SettingLayer, signal: SignalKind) -> Result<(), SettingsError> {
    let word = signal.word();
    if signal == SignalKind::Absorbance {
        if layer.max_signal.is_some() {
            return Err(SettingsError::about(
                "max-signal",
                "max-signal bounds fluorescence or luminescence; for absorbance give --max-absorbance".into(),
            ));
        }
        return Ok(());
    }
    if layer.extinction.is_some() {
        return Err(SettingsError::about(
            "extinction",
            format!(
                "extinction cannot convert {word}: Beer-Lambert relates absorbance to concentration, while {word} \
                 depends on the instrument's gain, optics and the sample, so no coefficient carries from one \
                 plate to another; put standards of known concentration on the plate (layout role `standard`)"
            ),
        ));
    }
    if layer.volume.is_some() {
        return Err(SettingsError::about(
            "volume",
            format!("volume gives a pathlength, which only serves Beer-Lambert for absorbance; a {word} read is converted by standards on the plate"),
        ));
    }
    if layer.pathlength.is_some() {
        return Err(SettingsError::about(
            "pathlength",
            format!("pathlength only serves Beer-Lambert for absorbance; a {word} read is converted by standards on the plate"),
        ));
    }
    if layer.max_absorbance.is_some() {
        return Err(SettingsError::about(
            "max-absorbance",
            format!("max-absorbance bounds absorbance; for {word} give --max-signal (or rely on the reader's over-range marker)"),
        ));
    }
    Ok(())
}

/// The 1-cm (A977 - A900) of water at room temperature, AU, for the water-peak pathlength (from
/// memory, common practice: about 0.18; not verified against a primary source; the band moves with
/// temperature and solutes, so read the assay buffer in a 1 cm cuvette at the assay temperature
/// and give it as `water-reference`).
pub const DEFAULT_WATER_REFERENCE: f64 = 0.18;

/// The largest liquid volume accepted, uL: more than a deep-well plate's well holds (common
/// practice), so only a slip is refused before the well's own capacity is checked.
pub const MAX_VOLUME_UL: f64 = 5000.0;

/// The pathlength (cm) from `volume` and the well's shape (`well-diameter` or `well-geometry`),
/// the liquid height with the meniscus ignored (`core::geometry`); `None` without `volume`. A
/// `pathlength` given too must be that height (so the settings a run records, which hold both,
/// run again unchanged).
fn pathlength_from_volume(layer: &SettingLayer) -> Result<Option<f64>, SettingsError> {
    use crate::core::geometry::{WellGeometry, WellShape};
    let Some(volume) = positive_at_most("volume", layer.volume, MAX_VOLUME_UL)? else {
        for key in ["well-diameter", "well-geometry"] {
            if layer_sets(layer, key) {
                return Err(SettingsError::about(
                    if key == "well-diameter" { "well-diameter" } else { "well-geometry" },
                    format!("{key} only serves --volume (the pathlength from the liquid's volume); give --volume too"),
                ));
            }
        }
        return Ok(None);
    };
    let diameter = positive_at_most("well-diameter", layer.well_diameter, 100.0)?;
    let geometry = parse_field::<WellGeometry>("well-geometry", &layer.well_geometry)?;
    let shape = match (diameter, geometry) {
        (Some(diameter_mm), None) => WellShape::Cylinder {
            diameter_mm,
            // A flat-bottomed round well of unknown depth: the capacity check uses the deepest
            // standard-footprint well (14.35 mm plate height, ANSI/SLAS 2-2004).
            depth_mm: 14.35,
        },
        (None, Some(geometry)) => geometry.shape(),
        (Some(_), Some(_)) => {
            return Err(SettingsError::about(
                "well-diameter",
                "give --well-diameter or --well-geometry, not both".into(),
            ))
        }
        (None, None) => {
            return Err(SettingsError::about(
                "volume",
                format!(
                    "--volume needs the well's shape: --well-diameter MM (round, flat bottom) or --well-geometry NAME ({})",
                    WellGeometry::ALL.map(WellGeometry::name).join(", ")
                ),
            ))
        }
    };
    let height = shape
        .pathlength_cm(volume)
        .map_err(|message| SettingsError::about("volume", format!("volume: {message}")))?;
    if let Some(given) = layer.pathlength {
        if (given - height).abs() > 1e-9 * height.max(1.0) {
            return Err(SettingsError::about(
                "pathlength",
                format!(
                    "pathlength {given} cm differs from the liquid height of volume {volume} uL in this well ({} cm); give one of them",
                    significant(height)
                ),
            ));
        }
    }
    Ok(Some(height))
}

/// Resolves the analysis part of a layer.
pub fn resolve_analysis(layer: &SettingLayer) -> Result<AnalysisSettings, SettingsError> {
    let defaults = RateSettings::default();
    let signal = parse_field::<SignalKind>("signal", &layer.signal)?.unwrap_or_default();
    check_signal_settings(layer, signal)?;
    let extinction = positive_at_most("extinction", layer.extinction, MAX_EXTINCTION)?;
    let pathlength = match pathlength_from_volume(layer)? {
        Some(height) => Some(height),
        None => positive_at_most("pathlength", layer.pathlength, MAX_PATHLENGTH_CM)?,
    };
    let water_reference =
        positive_at_most("water-reference", layer.water_reference, 10.0)?.unwrap_or(DEFAULT_WATER_REFERENCE);
    let per_well_path = layer.pathlength_from.is_some();
    if per_well_path && extinction.is_none() {
        return Err(SettingsError::about(
            "pathlength-from",
            "pathlength-from serves Beer-Lambert: give --extinction too".into(),
        ));
    }
    if extinction.is_some() != (pathlength.is_some() || per_well_path) {
        // The setting given alone is at fault (so an assay file that gives it is named).
        return Err(SettingsError::about(
            if extinction.is_some() { "extinction" } else { "pathlength" },
            "give both --extinction and --pathlength (rates in concentration units need both), or neither (rates in absorbance units)"
                .into(),
        ));
    }
    let initial_rate =
        parse_field::<InitialRateEstimator>("initial-rate", &layer.initial_rate)?.unwrap_or_default();
    let max_conversion = layer
        .max_conversion
        .unwrap_or_else(|| initial_rate.default_max_conversion());
    if !(max_conversion > 0.0 && max_conversion <= 1.0) {
        return Err(SettingsError::about(
            "max-conversion",
            format!("max-conversion must lie in (0, 1], got {max_conversion}"),
        ));
    }
    let min_points = layer.min_points.unwrap_or(defaults.min_points);
    if !(3..=MAX_READS).contains(&min_points) {
        return Err(SettingsError::about(
            "min-points",
            format!(
                "min-points must lie from 3 to {} (the most reads an export may hold), got {min_points}",
                MAX_READS
            ),
        ));
    }
    let skip_s = layer.skip.unwrap_or(defaults.skip_s);
    if !(skip_s.is_finite() && (0.0..=MAX_SECONDS).contains(&skip_s)) {
        return Err(SettingsError::about(
            "skip",
            format!("skip must be from 0 to {MAX_SECONDS:e} seconds, got {skip_s}"),
        ));
    }
    let alpha = layer.alpha.unwrap_or(defaults.alpha);
    if !(alpha > 0.0 && alpha < 0.5) {
        return Err(SettingsError::about(
            "alpha",
            format!("alpha must lie in (0, 0.5), got {alpha}"),
        ));
    }
    let max_absorbance = match signal {
        SignalKind::Absorbance => {
            positive("max-absorbance", layer.max_absorbance)?.unwrap_or(defaults.max_absorbance)
        }
        // Without a limit only the reader's over-range marker ends the usable reads.
        SignalKind::Fluorescence | SignalKind::Luminescence => {
            positive("max-signal", layer.max_signal)?.unwrap_or(f64::INFINITY)
        }
    };
    let dead_time_s = layer.dead_time.unwrap_or(0.0);
    if !(dead_time_s.is_finite() && (0.0..=MAX_SECONDS).contains(&dead_time_s)) {
        return Err(SettingsError::about(
            "dead-time",
            format!("dead-time must be from 0 to {MAX_SECONDS:e} seconds, got {dead_time_s}"),
        ));
    }
    let progress = ProgressSettings {
        mode: parse_field::<ProgressMode>("progress", &layer.progress)?.unwrap_or(ProgressMode::Auto),
        fit_dead_time: layer.fit_dead_time.unwrap_or(false),
        s0_from_signal: layer.s0_from_signal.unwrap_or(false),
    };
    let fixed_window_s = layer
        .window
        .as_deref()
        .map(parse_window)
        .transpose()
        .map_err(|message| SettingsError::about("window", message))?;
    Ok(AnalysisSettings {
        readout: parse_field::<Readout>("readout", &layer.readout)?.unwrap_or(Readout::Product),
        extinction_per_molar_cm: extinction,
        pathlength_cm: pathlength,
        water_reference,
        kcat_unit: parse_field::<KcatUnit>("kcat-unit", &layer.kcat_unit)?.unwrap_or_default(),
        rate_unit: parse_field::<RateUnit>("rate-unit", &layer.rate_unit)?,
        enzyme_mw_kda: enzyme_molecular_weight(layer.enzyme_mw)?,
        pathlength_by_well: std::collections::BTreeMap::new(),
        rates: RateSettings {
            min_points,
            max_conversion,
            allow_depletion_curvature: initial_rate.corrects_depletion(),
            skip_s,
            fixed_window_s,
            alpha,
            max_absorbance,
            signal,
            dead_time_s,
        },
        initial_rate,
        standard_curve: parse_field::<StandardCurveModel>("standard-curve", &layer.standard_curve)?
            .unwrap_or_default(),
        keep_flagged: layer.keep_flagged.unwrap_or(false),
        allow_missing: layer.allow_missing.unwrap_or(false),
        progress,
        screen: resolve_screen(layer)?,
    })
}

/// The heaviest enzyme `--enzyme-mw` takes, kDa: beyond the largest single proteins known
/// (titin, about 3,800 kDa), so a larger number is a typing slip (Da for kDa).
pub const MAX_ENZYME_MW_KDA: f64 = 5000.0;

/// `--enzyme-mw`: a molecular weight in kDa, positive and at most [`MAX_ENZYME_MW_KDA`].
fn enzyme_molecular_weight(value: Option<f64>) -> Result<Option<f64>, SettingsError> {
    match value {
        Some(kda) if !(kda.is_finite() && kda > 0.0 && kda <= MAX_ENZYME_MW_KDA) => Err(SettingsError::about(
            "enzyme-mw",
            format!(
                "enzyme-mw is the enzyme's molecular weight in kDa, from above 0 to {MAX_ENZYME_MW_KDA}, got {kda} (write 52.3 for 52,300 Da)"
            ),
        )),
        other => Ok(other),
    }
}

/// The screening settings of a layer: the compound factor and the wells excluded in the settings.
fn resolve_screen(layer: &SettingLayer) -> Result<ScreenSettings, SettingsError> {
    let compound_column = match &layer.compound_column {
        Some(name) if name.trim().is_empty() => {
            return Err(SettingsError::about(
                "compound-column",
                "compound-column names no column".into(),
            ))
        }
        Some(name) => name.trim().to_string(),
        None => DEFAULT_COMPOUND_COLUMN.to_string(),
    };
    let mut exclusions = Vec::new();
    for (index, entry) in layer.excluded_wells.iter().flatten().enumerate() {
        let origin = format!("settings: excluded-wells entry {}", index + 1);
        exclusions.push(
            resolve_excluded_well(&entry.well, &entry.reason, &origin)
                .map_err(|message| SettingsError::about("excluded-wells", message))?,
        );
    }
    Ok(ScreenSettings {
        compound_column,
        exclusions,
    })
}

/// The fit settings of a layer (`model`, `weighting`, `robust`, `bootstrap`, `seed`, `profile`,
/// `cheng-prusoff-km`); an unknown name is an error that lists the choices.
pub fn resolve_fit(layer: &SettingLayer) -> Result<FitSettings, SettingsError> {
    let model = match &layer.model {
        None => None,
        Some(name) => Some(ModelRequest::from_name(name).ok_or_else(|| {
            SettingsError::about(
                "model",
                format!(
                    "unknown --model '{name}' (choose auto, michaelis-menten, competitive, uncompetitive, \
                 noncompetitive, mixed, substrate-inhibition, hill, morrison or ic50)"
                ),
            )
        })?),
    };
    let weighting = match &layer.weighting {
        None => Weighting::Auto,
        Some(name) => Weighting::from_name(name).ok_or_else(|| {
            SettingsError::about(
                "weighting",
                format!(
                    "unknown --weighting '{name}' (choose auto, none, relative, replicate-sd or rate-se)"
                ),
            )
        })?,
    };
    let loss = match &layer.robust {
        None => RobustLoss::None,
        Some(name) => RobustLoss::from_name(name).ok_or_else(|| {
            SettingsError::about(
                "robust",
                format!("unknown --robust '{name}' (choose none or huber)"),
            )
        })?,
    };
    if let Some(replicates) = layer.bootstrap {
        if !(1..=MAX_BOOTSTRAP).contains(&replicates) {
            return Err(SettingsError::about(
                "bootstrap",
                format!("--bootstrap takes from 1 to {MAX_BOOTSTRAP} replicates, got {replicates}"),
            ));
        }
    }
    if let Some(km) = layer.cheng_prusoff_km {
        if !(km.is_finite() && km > 0.0) {
            return Err(SettingsError::about(
                "cheng-prusoff-km",
                format!("--cheng-prusoff-km must be a positive number, not {km}"),
            ));
        }
    }
    Ok(FitSettings {
        model,
        weighting,
        loss,
        profile: layer.profile.unwrap_or(true),
        bootstrap: layer.bootstrap.map(|replicates| BootstrapSettings {
            replicates,
            seed: layer.seed.unwrap_or(1),
        }),
        cheng_prusoff_km: layer.cheng_prusoff_km,
    })
}

/// The layer as used: defaults written out, so the outputs show every value that counted.
pub fn used_layer(layer: SettingLayer, analysis: &AnalysisSettings) -> SettingLayer {
    SettingLayer {
        readout: Some(analysis.readout.word().into()),
        skip: Some(analysis.rates.skip_s),
        max_conversion: Some(analysis.rates.max_conversion),
        min_points: Some(analysis.rates.min_points),
        // Each kind of signal records its own limit, so that the settings run again unchanged.
        max_absorbance: (analysis.rates.signal == SignalKind::Absorbance)
            .then_some(analysis.rates.max_absorbance),
        max_signal: (analysis.rates.signal != SignalKind::Absorbance
            && analysis.rates.max_absorbance.is_finite())
        .then_some(analysis.rates.max_absorbance),
        signal: Some(analysis.rates.signal.word().into()),
        water_reference: layer.pathlength_from.as_ref().map(|_| analysis.water_reference),
        kcat_unit: Some(analysis.kcat_unit.word().into()),
        // Written only when asked for: without it rates follow the layout's unit.
        rate_unit: analysis.rate_unit.map(|unit| unit.to_string()),
        enzyme_mw: analysis.enzyme_mw_kda,
        // The pathlength used, also when it came from the volume (recorded beside it).
        pathlength: analysis.pathlength_cm,
        alpha: Some(analysis.rates.alpha),
        keep_flagged: Some(analysis.keep_flagged),
        allow_missing: Some(analysis.allow_missing),
        compound_column: Some(analysis.screen.compound_column.clone()),
        progress: Some(analysis.progress.mode.word().into()),
        dead_time: Some(analysis.rates.dead_time_s),
        initial_rate: Some(analysis.initial_rate.word().into()),
        standard_curve: Some(analysis.standard_curve.word().into()),
        fit_dead_time: Some(analysis.progress.fit_dead_time),
        s0_from_signal: Some(analysis.progress.s0_from_signal),
        short_rows: Some(
            layer
                .short_rows
                .clone()
                .unwrap_or_else(|| ShortRowPolicy::default().to_string()),
        ),
        ..layer
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn flags_win_over_the_assay_file() {
        let file: SettingLayer =
            toml::from_str("extinction = 16800\npathlength = 0.55\nmax-conversion = 0.05\n").unwrap();
        let flags = SettingLayer {
            max_conversion: Some(0.2),
            ..SettingLayer::default()
        };
        let merged = flags.over(file);
        assert_eq!(merged.max_conversion, Some(0.2));
        assert_eq!(merged.extinction, Some(16800.0));
    }

    #[test]
    fn unknown_keys_in_the_assay_file_are_refused() {
        let error = toml::from_str::<SettingLayer>("max_conversoin = 0.1\n").unwrap_err();
        assert!(error.to_string().contains("max_conversoin"), "{error}");
    }

    #[test]
    fn windows_parse_and_bad_values_are_named() {
        assert_eq!(parse_window("0:300"), Ok((0.0, 300.0)));
        assert!(parse_window("300:0").is_err());
        assert!(parse_window("abc").is_err());
        let layer = SettingLayer {
            extinction: Some(100.0),
            ..SettingLayer::default()
        };
        assert!(resolve_analysis(&layer)
            .unwrap_err()
            .to_string()
            .contains("pathlength"));
        let layer = SettingLayer {
            max_conversion: Some(2.0),
            ..SettingLayer::default()
        };
        assert!(resolve_analysis(&layer)
            .unwrap_err()
            .to_string()
            .contains("max-conversion"));
    }

    #[test]
    fn used_settings_show_the_defaults() {
        let run = resolve_run(
            "d.csv".into(),
            SettingLayer {
                layout: Some("l.csv".into()),
                ..SettingLayer::default()
            },
        )
        .unwrap();
        // The integrated estimator (the default) corrects depletion, so its windows may convert
        // 30%; the chord keeps the 10% rule.
        assert_eq!(run.used.max_conversion, Some(0.30));
        assert!(run.analysis.rates.allow_depletion_curvature);
        assert_eq!(run.used.min_points, Some(5));
        let text = toml::to_string(&run.used).unwrap();
        assert!(text.contains("max-conversion = 0.3"), "{text}");
        let chord = resolve_run(
            "d.csv".into(),
            SettingLayer {
                layout: Some("l.csv".into()),
                initial_rate: Some("chord".into()),
                ..SettingLayer::default()
            },
        )
        .unwrap();
        assert_eq!(chord.used.max_conversion, Some(0.10));
        assert!(!chord.analysis.rates.allow_depletion_curvature);
        let given = resolve_run(
            "d.csv".into(),
            SettingLayer {
                layout: Some("l.csv".into()),
                max_conversion: Some(0.05),
                ..SettingLayer::default()
            },
        )
        .unwrap();
        assert_eq!(given.analysis.rates.max_conversion, 0.05);
        assert!(text.contains("progress = \"auto\""), "{text}");
    }

    #[test]
    fn beer_lambert_settings_are_refused_for_fluorescence_with_the_reason() {
        let layer = SettingLayer {
            signal: Some("fluorescence".into()),
            extinction: Some(5000.0),
            pathlength: Some(0.5),
            ..SettingLayer::default()
        };
        let message = resolve_analysis(&layer).unwrap_err().to_string();
        assert!(
            message.contains("extinction cannot convert fluorescence"),
            "{message}"
        );
        assert!(message.contains("standard"), "{message}");
        let layer = SettingLayer {
            signal: Some("luminescence".into()),
            max_absorbance: Some(2.0),
            ..SettingLayer::default()
        };
        let message = resolve_analysis(&layer).unwrap_err().to_string();
        assert!(message.contains("--max-signal"), "{message}");
        let layer = SettingLayer {
            max_signal: Some(60_000.0),
            ..SettingLayer::default()
        };
        let message = resolve_analysis(&layer).unwrap_err().to_string();
        assert!(message.contains("--max-absorbance"), "{message}");
    }

    #[test]
    fn a_fluorescence_limit_comes_from_max_signal_or_none_and_is_recorded_as_such() {
        let layer = SettingLayer {
            signal: Some("Fluorescence".into()),
            ..SettingLayer::default()
        };
        let analysis = resolve_analysis(&layer).unwrap();
        assert_eq!(analysis.rates.signal, SignalKind::Fluorescence);
        assert!(analysis.rates.max_absorbance.is_infinite());
        let used = used_layer(layer, &analysis);
        assert_eq!(used.max_absorbance, None);
        assert_eq!(used.max_signal, None);
        assert_eq!(used.signal.as_deref(), Some("fluorescence"));
        let layer = SettingLayer {
            signal: Some("fluorescence".into()),
            max_signal: Some(60_000.0),
            ..SettingLayer::default()
        };
        let analysis = resolve_analysis(&layer).unwrap();
        assert_eq!(analysis.rates.max_absorbance, 60_000.0);
        assert_eq!(used_layer(layer, &analysis).max_signal, Some(60_000.0));
        let bad = SettingLayer {
            signal: Some("phosphorescence".into()),
            ..SettingLayer::default()
        };
        assert!(resolve_analysis(&bad).unwrap_err().to_string().contains("signal"));
    }

    #[test]
    fn progress_settings_parse_and_bad_values_are_named() {
        let layer: SettingLayer =
            toml::from_str("progress = \"always\"\ndead-time = 12.5\nfit-dead-time = true\n").unwrap();
        let analysis = resolve_analysis(&layer).unwrap();
        assert_eq!(analysis.progress.mode, ProgressMode::Always);
        assert_eq!(analysis.rates.dead_time_s, 12.5);
        assert!(analysis.progress.fit_dead_time);
        let bad = SettingLayer {
            progress: Some("sometimes".into()),
            ..SettingLayer::default()
        };
        assert!(resolve_analysis(&bad)
            .unwrap_err()
            .to_string()
            .contains("progress"));
        let negative = SettingLayer {
            dead_time: Some(-3.0),
            ..SettingLayer::default()
        };
        assert!(resolve_analysis(&negative)
            .unwrap_err()
            .to_string()
            .contains("dead-time"));
    }
}
