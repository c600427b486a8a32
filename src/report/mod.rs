//! The run report: `report.html` (one self-contained page with inline SVG plots and CSS, no
//! scripts and no network) and `run.json` (tool version, the inputs' sizes and SHA-256, every
//! setting, the outputs written), so a run can be mailed, read, repeated and checked.
//! `--report full` adds one PNG per plot under `plots/`.
//!
//! The page is a list of sections built from what the run holds; analyses that other modules add
//! later (progress-curve fits, model selection) add their own sections and their own candidates
//! in [`trust_verdicts`] without changing the others.

mod html;

use std::path::PathBuf;

use serde_json::{json, Value};
use sha2::{Digest, Sha256};

use crate::output::OutputFile;
use crate::plots::{PlotError, WellState};
use crate::run::{RunResults, CAUTION};
use crate::settings::SettingLayer;

pub use html::{report_html, ReportParts};

/// How much report a run writes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ReportMode {
    /// No report (the tables, `fit.json` and `run.json` only).
    None,
    /// `report.html`.
    #[default]
    Html,
    /// `report.html` and one PNG per plot in `plots/`.
    Full,
}

impl ReportMode {
    /// The word used on the command line and in settings.
    pub fn word(self) -> &'static str {
        match self {
            ReportMode::None => "none",
            ReportMode::Html => "html",
            ReportMode::Full => "full",
        }
    }

    /// The mode a settings layer asks for (html when not set).
    pub fn from_layer(layer: &SettingLayer) -> Result<ReportMode, String> {
        layer.report.as_deref().map_or(Ok(ReportMode::Html), str::parse)
    }
}

impl std::str::FromStr for ReportMode {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim().to_ascii_lowercase().as_str() {
            "none" => Ok(ReportMode::None),
            "html" => Ok(ReportMode::Html),
            "full" => Ok(ReportMode::Full),
            other => Err(format!("unknown report '{other}' (expected none, html or full)")),
        }
    }
}

/// Why the report could not be rendered.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// A plot failed to draw.
    #[error(transparent)]
    Plot(#[from] PlotError),
    /// An input file could not be read for its checksum.
    #[error("{path}: cannot read the input for its checksum: {message}")]
    Input {
        /// The input.
        path: String,
        /// The system's reason.
        message: String,
    },
    /// The report setting is not understood.
    #[error("report: {0}")]
    Mode(String),
    /// `run.json` could not be rendered.
    #[error("rendering run.json failed: {0}")]
    Json(String),
}

/// One input of a run as the report and `run.json` record it.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct InputRecord {
    /// What the file is (`data`, `layout`).
    pub role: String,
    /// The file name as given.
    pub file: String,
    /// Size in bytes.
    pub bytes: u64,
    /// SHA-256 of the bytes, lowercase hex.
    pub sha256: String,
}

/// Lowercase hex SHA-256 of `bytes`.
pub fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|byte| format!("{byte:02x}"))
        .collect()
}

/// Records the inputs: the files given, or the embedded demo's texts when the run had no files.
pub fn input_records(inputs: &[PathBuf], results: &RunResults) -> Result<Vec<InputRecord>, ReportError> {
    let roles = ["data", "layout"];
    if inputs.is_empty() {
        if results.data.source.file.contains("embedded demo") {
            let embedded = [
                (
                    "data",
                    "amber-fen-wide.csv (embedded demo)",
                    crate::demo::DEMO_DATA,
                ),
                (
                    "layout",
                    "amber-fen-layout.csv (embedded demo)",
                    crate::demo::DEMO_LAYOUT,
                ),
                (
                    "assay",
                    "amber-fen-assay.toml (embedded demo)",
                    crate::demo::DEMO_ASSAY,
                ),
            ];
            return Ok(embedded
                .iter()
                .map(|(role, file, text)| InputRecord {
                    role: role.to_string(),
                    file: file.to_string(),
                    bytes: text.len() as u64,
                    sha256: sha256_hex(text.as_bytes()),
                })
                .collect());
        }
        return Ok(Vec::new());
    }
    inputs
        .iter()
        .enumerate()
        .map(|(index, path)| {
            let bytes = std::fs::read(path).map_err(|error| ReportError::Input {
                path: path.display().to_string(),
                message: error.to_string(),
            })?;
            Ok(InputRecord {
                role: roles.get(index).unwrap_or(&"input").to_string(),
                file: path.display().to_string(),
                bytes: bytes.len() as u64,
                sha256: sha256_hex(&bytes),
            })
        })
        .collect()
}

/// One group's verdict on which analysis to trust, and why.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TrustVerdict {
    /// The group's label.
    pub group: String,
    /// The analysis to use (`initial rates`).
    pub analysis: String,
    /// Reasons, in plain words.
    pub reasons: Vec<String>,
}

/// The analysis a progress-curve report's `trust` word names, in the report's words.
pub fn trust_analysis_words(trust: &str) -> &str {
    match trust {
        "progress-curve" => "progress curves",
        "initial-rate" => "initial rates",
        "either" => "either (they agree)",
        "neither" => "neither",
        other => other,
    }
}

/// Which analysis to trust for each group: the progress-curve analysis's own verdict (`trust`,
/// `trust_reason`) where it analysed the group, else initial rates, with the initial-rate fit's
/// state as further reasons.
pub fn trust_verdicts(results: &RunResults) -> Vec<TrustVerdict> {
    let progress_of = |group: &serde_json::Map<String, Value>| {
        results
            .progress
            .groups
            .iter()
            .find(|p| p.group == *group && p.analysed)
    };
    let mut verdicts = initial_rate_verdicts(results);
    for (verdict, fit) in verdicts.iter_mut().zip(&results.fits) {
        if let Some(progress) = progress_of(&fit.group) {
            verdict.analysis = trust_analysis_words(&progress.trust).to_string();
            // The initial-rate-only sentence no longer holds once a progress fit exists.
            verdict.reasons.remove(0);
            let mut reasons = vec![format!("progress-curve verdict: {}", progress.trust_reason)];
            reasons.append(&mut verdict.reasons);
            verdict.reasons = reasons;
        }
    }
    // A progress-curve group with no initial-rate group of its own (a split by inhibitor level).
    for progress in results.progress.groups.iter().filter(|p| p.analysed) {
        if !results.fits.iter().any(|f| f.group == progress.group) {
            verdicts.push(TrustVerdict {
                group: crate::groups::group_label(&progress.group),
                analysis: trust_analysis_words(&progress.trust).to_string(),
                reasons: vec![format!("progress-curve verdict: {}", progress.trust_reason)],
            });
        }
    }
    verdicts
}

fn initial_rate_verdicts(results: &RunResults) -> Vec<TrustVerdict> {
    results
        .fits
        .iter()
        .map(|fit| {
            let mut reasons =
                vec!["initial rates are the only analysis this run made (no progress-curve fit)".to_string()];
            if let Some(error) = &fit.error {
                reasons.push(format!("but no fit could be made: {error}"));
            } else {
                let undetermined: Vec<&str> = fit
                    .parameters
                    .iter()
                    .filter(|(_, p)| !p.determined)
                    .map(|(name, _)| name.as_str())
                    .collect();
                if undetermined.is_empty() {
                    reasons.push(format!(
                        "{} wells fitted; every parameter is determined by the substrate range",
                        fit.n
                    ));
                } else {
                    reasons.push(format!(
                        "{} wells fitted, but the data do not pin down {}: treat those with caution",
                        fit.n,
                        undetermined.join(", ")
                    ));
                }
                if !fit.wells_left_out.is_empty() {
                    reasons.push(format!(
                        "{} flagged wells were left out (see the flagged-well table)",
                        fit.wells_left_out.len()
                    ));
                }
            }
            TrustVerdict {
                group: crate::groups::group_label(&fit.group),
                analysis: "initial rates".to_string(),
                reasons,
            }
        })
        .collect()
}

/// Renders the report files the mode asks for (`report.html`, `plots/*.png`); none for
/// [`ReportMode::None`].
pub fn report_files(
    results: &RunResults,
    used: &SettingLayer,
    records: &[InputRecord],
    mode: ReportMode,
) -> Result<Vec<OutputFile>, ReportError> {
    if mode == ReportMode::None {
        return Ok(Vec::new());
    }
    let parts = ReportParts::build(results, used, records)?;
    let mut files = vec![OutputFile {
        name: "report.html".into(),
        bytes: report_html(&parts).into_bytes(),
    }];
    if mode == ReportMode::Full {
        files.extend(parts.png_files()?);
    }
    Ok(files)
}

/// `run.json`: the tool, the inputs' checksums, every setting, the report mode and every other
/// output written (name, size, SHA-256), so a run can be repeated and checked.
pub fn run_json(
    records: &[InputRecord],
    used: &SettingLayer,
    mode: ReportMode,
    outputs: &[OutputFile],
) -> Result<OutputFile, ReportError> {
    let value = json!({
        "tool": "platekin",
        "version": env!("CARGO_PKG_VERSION"),
        "inputs": records,
        "settings": serde_json::to_value(used).unwrap_or(Value::Null),
        "report": mode.word(),
        "outputs": outputs.iter().map(|file| json!({
            "name": file.name,
            "bytes": file.bytes.len(),
            "sha256": sha256_hex(&file.bytes),
        })).collect::<Vec<_>>(),
        "caution": CAUTION,
    });
    let mut bytes =
        serde_json::to_vec_pretty(&value).map_err(|error| ReportError::Json(error.to_string()))?;
    bytes.push(b'\n');
    Ok(OutputFile {
        name: "run.json".into(),
        bytes,
    })
}

/// The report files and `run.json` of a run, for `run::render_outputs`: `outputs` are the files
/// already rendered (they are listed in `run.json`, which comes last).
pub fn render_report_outputs(
    results: &RunResults,
    used: &SettingLayer,
    inputs: &[PathBuf],
    outputs: &[OutputFile],
) -> Result<Vec<OutputFile>, ReportError> {
    let mode = ReportMode::from_layer(used).map_err(ReportError::Mode)?;
    let records = input_records(inputs, results)?;
    let mut files = report_files(results, used, &records, mode)?;
    let mut listed: Vec<OutputFile> = outputs.to_vec();
    listed.extend(files.iter().cloned());
    files.push(run_json(&records, used, mode, &listed)?);
    Ok(files)
}

/// How many analysed wells an overview shows, for checks.
pub fn analysed_well_count(parts: &ReportParts) -> usize {
    parts
        .plate
        .wells
        .iter()
        .filter(|w| w.state == WellState::Analysed)
        .count()
}

#[cfg(test)]
pub(crate) mod tests;
