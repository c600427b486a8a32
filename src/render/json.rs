//! The JSON outputs, made here from the typed results and nowhere else: `fit.json` (a run's and
//! `platekin fit`'s), `progress.json` and `run.json`. Objects are written with their keys in
//! alphabetical order (serde_json's map), so a reader can diff two runs' files line by line.

use serde_json::{json, Map, Value};

use super::words::{
    group_json, left_out_words, progress_left_out_words, run_reason_words, trust_reason_words, verdict_words,
};
use super::RenderError;
use crate::config::{FitSettings, SettingLayer};
use crate::core::format::CAUTION;
use crate::files::output::OutputFile;
use crate::groups::{GroupFit, LeftOutPlace, ParameterReport};
use crate::progress::analysis::{CalibrationInput, ProgressAnalysis, ProgressGroupReport, ProgressWell};
use crate::progress::choice::ModelTried;
use crate::rates::flag_words;

/// The tool and version line every JSON output opens with.
pub fn tool_line() -> String {
    format!("platekin {}", env!("CARGO_PKG_VERSION"))
}

/// Any serialisable value as JSON, naming the file when it cannot be.
pub fn to_json<T: serde::Serialize>(file: &str, value: &T) -> Result<Value, RenderError> {
    serde_json::to_value(value).map_err(|source| RenderError::Json {
        file: file.to_string(),
        source,
    })
}

/// Pretty JSON bytes with a final newline.
pub fn json_file(name: &str, value: &Value) -> Result<OutputFile, RenderError> {
    let mut bytes = serde_json::to_vec_pretty(value).map_err(|source| RenderError::Json {
        file: name.to_string(),
        source,
    })?;
    bytes.push(b'\n');
    Ok(OutputFile {
        name: name.to_string(),
        bytes,
    })
}

/// One parameter: value, SE, interval, unit, whether determined, and the profile and bootstrap
/// intervals where there are.
pub fn parameter_json(parameter: &ParameterReport) -> Value {
    let mut object = Map::new();
    object.insert("value".into(), json!(parameter.value));
    object.insert("se".into(), json!(parameter.se));
    object.insert("ci95".into(), json!(parameter.ci95));
    object.insert("unit".into(), json!(parameter.unit));
    object.insert("determined".into(), json!(parameter.determined));
    if let Some(profile) = parameter.ci95_profile {
        object.insert("ci95_profile".into(), json!(profile));
    }
    if let Some(bootstrap) = parameter.ci95_bootstrap {
        object.insert("ci95_bootstrap".into(), json!(bootstrap));
    }
    if let Some((se, ci95)) = parameter.asymptotic {
        object.insert("se_asymptotic".into(), json!(se));
        object.insert("ci95_asymptotic".into(), json!(ci95));
    }
    Value::Object(object)
}

fn parameters_json<'a>(parameters: impl IntoIterator<Item = (&'a String, &'a ParameterReport)>) -> Value {
    Value::Object(
        parameters
            .into_iter()
            .map(|(name, parameter)| (name.clone(), parameter_json(parameter)))
            .collect(),
    )
}

/// One group's initial-rate fit as `fit.json` writes it.
pub fn group_fit_json(fit: &GroupFit) -> Result<Value, RenderError> {
    let left_out: Vec<Value> = fit
        .wells_left_out
        .iter()
        .map(|left| {
            let reason = left_out_words(&left.reason);
            match left.place {
                LeftOutPlace::Well(well) => json!({"well": well.to_string(), "reason": reason}),
                LeftOutPlace::Row(row) => json!({"row": row, "reason": reason}),
            }
        })
        .collect();
    Ok(json!({
        "group": group_json(&fit.group),
        "model": fit.model.name(),
        "parameters": parameters_json(&fit.parameters),
        "n": fit.n,
        "residual_sd": fit.residual_sd,
        "correlation_vmax_km": fit.correlation_vmax_km,
        "linearised": to_json("fit.json", &fit.linearised)?,
        "converged": fit.converged,
        "wells_used": fit.wells_used,
        "wells_left_out": left_out,
        "warnings": fit.warnings,
        "error": fit.error,
        "model_requested": fit.model_requested.map_or("default", |m| m.name()),
        "equation": fit.equation,
        "models_tried": to_json("fit.json", &fit.models_tried)?,
        "f_tests": to_json("fit.json", &fit.f_tests)?,
        "model_choice": fit.model_choice,
        "initial_rate_estimator": fit.estimator.word(),
        "weighting": fit.weighting.name(),
        // The replicates' scatter beyond their own standard errors, as rate-se weights took it:
        // SDs in rate units (as residual_sd) and the relative error of S0 they imply.
        "extra_variance": fit.extra_variance.map(|extra| json!({
            "constant_sd": extra.constant.sqrt(),
            "substrate_cv": extra.substrate_cv_squared.sqrt(),
            "degrees_of_freedom": extra.degrees_of_freedom,
            "groups_pooled": fit.extra_variance_groups,
        })),
        "robust_loss": fit.robust_loss.name(),
        "bootstrap": fit.bootstrap.map(|b| json!({
            "replicates": b.replicates,
            "converged": b.converged,
            "seed": b.seed,
            "method": "residual resampling, percentile intervals",
        })),
    }))
}

fn group_fits_json(fits: &[GroupFit]) -> Result<Vec<Value>, RenderError> {
    fits.iter().map(group_fit_json).collect()
}

/// A run's `fit.json`.
pub fn run_fit_document(
    files_given: &[String],
    fits: &[GroupFit],
    plate_warnings: &[String],
    input_warnings: &[String],
    used: &SettingLayer,
    fit_settings: &FitSettings,
) -> Result<Value, RenderError> {
    Ok(json!({
        "tool": tool_line(),
        "inputs": files_given,
        "groups": group_fits_json(fits)?,
        "plate_warnings": plate_warnings,
        "input_warnings": input_warnings,
        "settings": to_json("fit.json", used)?,
        "fit_settings": to_json("fit.json", fit_settings)?,
        "caution": CAUTION,
    }))
}

/// `platekin fit`'s `fit.json`.
pub fn table_fit_document(
    table_file: &str,
    table_kind: &str,
    fits: &[GroupFit],
    fit_settings: &FitSettings,
) -> Result<Value, RenderError> {
    Ok(json!({
        "tool": tool_line(),
        "inputs": [table_file],
        "table": table_kind,
        "groups": group_fits_json(fits)?,
        "fit_settings": to_json("fit.json", fit_settings)?,
        "caution": CAUTION,
    }))
}

fn model_tried_json(tried: &ModelTried) -> Value {
    json!({
        "model": tried.model.name(),
        "aicc": tried.aicc,
        "delta_aicc": tried.delta_aicc,
        "residual_sd": tried.residual_sd,
        "extra_parameter": tried.extra_parameter.as_ref().map(|term| json!({
            "name": term.name,
            "value": term.value,
            "ci95": term.ci95,
        })),
        "f_test_p": tried.f_test_p,
        "verdict": verdict_words(tried),
    })
}

fn progress_well_json(well: &ProgressWell) -> Value {
    json!({
        "well": well.well,
        "S0": well.s0,
        "S0_from_signal": well.s0_from_signal,
        "S0_used": well.s0_used,
        "n": well.n,
        "signal_offset": well.signal_offset,
        "residual_sd": well.residual_sd,
        "runs": well.runs,
        "runs_z": well.runs_z,
        "systematic_misfit": well.systematic_misfit,
        "implied_initial_rate": well.implied_initial_rate,
        "window_rate": well.window_rate,
        "window_over_implied": well.window_over_implied,
        "fitted_conversion": well.fitted_conversion,
        "flags": well.flags.as_ref().map(|flags| flag_words(flags)),
    })
}

/// One group's progress-curve report as `progress.json` writes it.
pub fn progress_group_json(report: &ProgressGroupReport) -> Value {
    json!({
        "group": group_json(&report.group),
        "reason": run_reason_words(&report.run),
        "analysed": report.analysed,
        "model": report.model.map(|m| m.name()),
        "parameters": parameters_json(&report.parameters),
        "correlation": report.correlation.as_ref().map(|c| json!({
            "parameters": c.parameters,
            "matrix": c.matrix,
        })),
        "residual_sd": report.residual_sd,
        "aicc": report.aicc,
        "n": report.n,
        "n_wells": report.n_wells,
        "dead_time_s": report.dead_time_s,
        "models_tried": report.models_tried.iter().map(model_tried_json).collect::<Vec<_>>(),
        "wells": report.wells.iter().map(progress_well_json).collect::<Vec<_>>(),
        "wells_left_out": report.wells_left_out.iter().map(|left| json!({
            "well": left.well.to_string(),
            "reason": progress_left_out_words(left.reason),
        })).collect::<Vec<_>>(),
        "initial_rate_fit": report.initial_rate_fit.as_ref().map(|initial| json!({
            "kcat": initial.kcat.as_ref().map(parameter_json),
            "Km": initial.km.as_ref().map(parameter_json),
            "error": initial.error,
        })),
        "sensitivity": report.sensitivity.iter().map(|case| json!({
            "input": match case.input {
                CalibrationInput::ExtinctionPathlength => "extinction_x_pathlength",
                CalibrationInput::SubstrateStart => "S0",
            },
            "factor": case.factor,
            "relative_change": case.relative_change,
        })).collect::<Vec<_>>(),
        "trust": report.decision.trust.word(),
        "trust_reason": trust_reason_words(&report.decision.reason),
        "warnings": report.warnings,
        "error": report.error,
    })
}

/// A run's `progress.json`.
pub fn progress_document(
    files_given: &[String],
    progress: &ProgressAnalysis,
    used: &SettingLayer,
) -> Result<Value, RenderError> {
    Ok(json!({
        "tool": tool_line(),
        "inputs": files_given,
        "mode": progress.mode.word(),
        "groups": progress.groups.iter().map(progress_group_json).collect::<Vec<_>>(),
        "settings": to_json("progress.json", used)?,
        "caution": CAUTION,
    }))
}

/// One input of a run as `run.json` and the report record it.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct InputRecord {
    /// What the file is (`data`, `layout`, `assay`).
    pub role: String,
    /// The file name as given.
    pub file: String,
    /// Size in bytes.
    pub bytes: u64,
    /// SHA-256 of the bytes, lowercase hex.
    pub sha256: String,
}

impl InputRecord {
    /// The record of an input read once.
    pub fn of(input: &crate::files::input::InputFile) -> InputRecord {
        InputRecord {
            role: input.role.word().to_string(),
            file: input.name.clone(),
            bytes: input.bytes.len() as u64,
            sha256: input.sha256(),
        }
    }
}

/// `run.json`: the tool, the inputs' checksums, every setting, the report mode and every other
/// output written (name, size, SHA-256), so a run can be repeated and checked.
pub fn run_json(
    records: &[InputRecord],
    used: &SettingLayer,
    report_word: &str,
    outputs: &[OutputFile],
) -> Result<OutputFile, RenderError> {
    let value = json!({
        "tool": "platekin",
        "version": env!("CARGO_PKG_VERSION"),
        "inputs": to_json("run.json", &records)?,
        "settings": to_json("run.json", used)?,
        "report": report_word,
        "outputs": outputs.iter().map(|file| json!({
            "name": file.name,
            "bytes": file.bytes.len(),
            "sha256": crate::files::input::sha256_hex(&file.bytes),
        })).collect::<Vec<_>>(),
        "caution": CAUTION,
    });
    json_file("run.json", &value)
}
