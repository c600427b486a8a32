//! The settings of a run, resolved once: command-line flags laid over an assay file (`--assay
//! assay.toml`, same keys as the flags; flags win) laid over the defaults, each value checked and
//! each choice parsed into its typed value ([`choices`]). The layers below take these typed
//! settings and never see a setting's word again. The settings actually used ([`SettingLayer`] with
//! every default filled in) are written into the outputs so a run can be repeated.

pub mod choices;

use std::path::{Path, PathBuf};

pub use choices::*;

use crate::core::plate::PlateFormat;
use crate::core::units::TimeUnit;

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
    /// Take S0 from each well's first signal (substrate readout) in the progress-curve fits.
    pub s0_from_signal: Option<bool>,
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
            s0_from_signal: self.s0_from_signal.or(below.s0_from_signal),
        }
    }

    /// Reads an assay file. Relative paths in it (`layout`) are taken from the file's folder.
    pub fn from_assay_file(path: &Path) -> Result<SettingLayer, SettingsError> {
        let text = std::fs::read_to_string(path).map_err(|source| SettingsError::AssayUnreadable {
            file: path.display().to_string(),
            source,
        })?;
        let mut layer: SettingLayer = toml::from_str(&text).map_err(|error| SettingsError::AssayInvalid {
            file: path.display().to_string(),
            message: error.to_string().trim_end().to_string(),
        })?;
        if let (Some(layout), Some(folder)) = (&layer.layout, path.parent()) {
            if layout.is_relative() {
                layer.layout = Some(folder.join(layout));
            }
        }
        Ok(layer)
    }
}

/// A setting that cannot be used, with the reason; or an assay file that cannot be read.
#[derive(Debug, thiserror::Error)]
pub enum SettingsError {
    /// A value that cannot work, with the setting's name in the message.
    #[error("{message}")]
    Invalid {
        /// What is wrong, naming the setting.
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
        SettingsError::Invalid { message }
    }
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
    /// Window rules (with the dead time).
    pub rates: RateSettings,
    /// How each well's initial rate is estimated.
    pub initial_rate: InitialRateEstimator,
    /// Keep flagged wells in means and fits.
    pub keep_flagged: bool,
    /// Layout wells absent from the data only warn.
    pub allow_missing: bool,
    /// The progress-curve analysis.
    pub progress: ProgressSettings,
}

impl Default for AnalysisSettings {
    fn default() -> Self {
        AnalysisSettings {
            readout: Readout::Product,
            extinction_per_molar_cm: None,
            pathlength_cm: None,
            rates: RateSettings::default(),
            initial_rate: InitialRateEstimator::default(),
            keep_flagged: false,
            allow_missing: false,
            progress: ProgressSettings::default(),
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
    name: &str,
    text: &Option<String>,
) -> Result<Option<T>, SettingsError> {
    text.as_deref()
        .map(|value| {
            value
                .parse::<T>()
                .map_err(|error| SettingsError::new(format!("{name}: {error}")))
        })
        .transpose()
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
    Ok((start, end))
}

fn positive(name: &str, value: Option<f64>) -> Result<Option<f64>, SettingsError> {
    match value {
        Some(v) if !(v.is_finite() && v > 0.0) => Err(SettingsError::new(format!(
            "{name} must be a positive number, got {v}"
        ))),
        other => Ok(other),
    }
}

/// Resolves the merged layers of a run into settings, checking each value.
pub fn resolve_run(data: PathBuf, layer: SettingLayer) -> Result<RunSettings, SettingsError> {
    let layout = layer.layout.clone().ok_or_else(|| {
        SettingsError::new("no plate layout: give --layout LAYOUT (or `layout` in the assay file)".into())
    })?;
    let import = resolve_import(&layer)?;
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
    })
}

/// Resolves the analysis part of a layer.
pub fn resolve_analysis(layer: &SettingLayer) -> Result<AnalysisSettings, SettingsError> {
    let defaults = RateSettings::default();
    let extinction = positive("extinction", layer.extinction)?;
    let pathlength = positive("pathlength", layer.pathlength)?;
    if extinction.is_some() != pathlength.is_some() {
        return Err(SettingsError::new(
            "give both --extinction and --pathlength (rates in concentration units need both), or neither (rates in absorbance units)"
                .into(),
        ));
    }
    let max_conversion = layer.max_conversion.unwrap_or(defaults.max_conversion);
    if !(max_conversion > 0.0 && max_conversion <= 1.0) {
        return Err(SettingsError::new(format!(
            "max-conversion must lie in (0, 1], got {max_conversion}"
        )));
    }
    let min_points = layer.min_points.unwrap_or(defaults.min_points);
    if min_points < 3 {
        return Err(SettingsError::new(format!(
            "min-points must be at least 3, got {min_points}"
        )));
    }
    let skip_s = layer.skip.unwrap_or(defaults.skip_s);
    if !(skip_s.is_finite() && skip_s >= 0.0) {
        return Err(SettingsError::new(format!(
            "skip must be zero or more seconds, got {skip_s}"
        )));
    }
    let alpha = layer.alpha.unwrap_or(defaults.alpha);
    if !(alpha > 0.0 && alpha < 0.5) {
        return Err(SettingsError::new(format!(
            "alpha must lie in (0, 0.5), got {alpha}"
        )));
    }
    let max_absorbance = positive("max-absorbance", layer.max_absorbance)?.unwrap_or(defaults.max_absorbance);
    let dead_time_s = layer.dead_time.unwrap_or(0.0);
    if !(dead_time_s.is_finite() && dead_time_s >= 0.0) {
        return Err(SettingsError::new(format!(
            "dead-time must be zero or more seconds, got {dead_time_s}"
        )));
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
        .map_err(SettingsError::new)?;
    Ok(AnalysisSettings {
        readout: parse_field::<Readout>("readout", &layer.readout)?.unwrap_or(Readout::Product),
        extinction_per_molar_cm: extinction,
        pathlength_cm: pathlength,
        rates: RateSettings {
            min_points,
            max_conversion,
            skip_s,
            fixed_window_s,
            alpha,
            max_absorbance,
            dead_time_s,
        },
        initial_rate: parse_field::<InitialRateEstimator>("initial-rate", &layer.initial_rate)?
            .unwrap_or_default(),
        keep_flagged: layer.keep_flagged.unwrap_or(false),
        allow_missing: layer.allow_missing.unwrap_or(false),
        progress,
    })
}

/// The fit settings of a layer (`model`, `weighting`, `robust`, `bootstrap`, `seed`, `profile`,
/// `cheng-prusoff-km`); an unknown name is an error that lists the choices.
pub fn resolve_fit(layer: &SettingLayer) -> Result<FitSettings, SettingsError> {
    let model = match &layer.model {
        None => None,
        Some(name) => Some(ModelRequest::from_name(name).ok_or_else(|| {
            SettingsError::new(format!(
                "unknown --model '{name}' (choose auto, michaelis-menten, competitive, uncompetitive, \
                 noncompetitive, mixed, substrate-inhibition, hill, morrison or ic50)"
            ))
        })?),
    };
    let weighting = match &layer.weighting {
        None => Weighting::Auto,
        Some(name) => Weighting::from_name(name).ok_or_else(|| {
            SettingsError::new(format!(
                "unknown --weighting '{name}' (choose auto, none, relative, replicate-sd or rate-se)"
            ))
        })?,
    };
    let loss = match &layer.robust {
        None => RobustLoss::None,
        Some(name) => RobustLoss::from_name(name)
            .ok_or_else(|| SettingsError::new(format!("unknown --robust '{name}' (choose none or huber)")))?,
    };
    if layer.bootstrap == Some(0) {
        return Err(SettingsError::new(
            "--bootstrap needs at least 1 replicate".to_string(),
        ));
    }
    if let Some(km) = layer.cheng_prusoff_km {
        if !(km.is_finite() && km > 0.0) {
            return Err(SettingsError::new(format!(
                "--cheng-prusoff-km must be a positive number, not {km}"
            )));
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
        max_absorbance: Some(analysis.rates.max_absorbance),
        alpha: Some(analysis.rates.alpha),
        keep_flagged: Some(analysis.keep_flagged),
        allow_missing: Some(analysis.allow_missing),
        progress: Some(analysis.progress.mode.word().into()),
        dead_time: Some(analysis.rates.dead_time_s),
        initial_rate: Some(analysis.initial_rate.word().into()),
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
        assert_eq!(run.used.max_conversion, Some(0.10));
        assert_eq!(run.used.min_points, Some(5));
        let text = toml::to_string(&run.used).unwrap();
        assert!(text.contains("max-conversion = 0.1"), "{text}");
        assert!(text.contains("progress = \"auto\""), "{text}");
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
