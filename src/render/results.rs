//! The answer of a run, as a reader wants it first: per group the constants of the analysis to
//! trust with their 95% intervals, that analysis and a one-line reason, the wells used and left
//! out, and the warnings that change how a number may be used. The report's results block and the
//! terminal summary are both made from [`run_results`], so they always say the same thing.

use super::display::DisplayUnit;
use super::words::group_label;
pub use super::words::trust_word;
use crate::groups::{GroupFit, ParameterReport};
use crate::pipeline::RunResults;
use crate::progress::analysis::ProgressGroupReport;
use crate::progress::trust::{Trust, TrustReason};

/// Which fit a group's reported numbers come from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NumbersFrom {
    /// The fit of the rate law to the wells' initial rates.
    InitialRates,
    /// The global fit of the integrated rate law to the whole curves.
    ProgressCurves,
}

/// One group's answer.
#[derive(Debug, Clone)]
pub struct GroupResult<'a> {
    /// The group's label (`variant=wt, enzyme [nM]=4.0`).
    pub label: String,
    /// The model whose constants are shown.
    pub model: &'static str,
    /// The analysis whose constants are shown.
    pub numbers_from: NumbersFrom,
    /// The verdict on which analysis to trust (`None`: no progress-curve analysis was made).
    pub trust: Option<Trust>,
    /// Whether the numbers may be used as they stand (not for `neither` or a failed fit).
    pub usable: bool,
    /// The verdict in a few words.
    pub reason: String,
    /// The constants, in reading order, with their display names.
    pub parameters: Vec<(String, &'a ParameterReport)>,
    /// Wells the numbers rest on, and wells of the group left out.
    pub wells_used: usize,
    /// Wells of the group left out (flagged, excluded or without a rate).
    pub wells_left_out: usize,
    /// Why no constants could be given, if none could.
    pub error: Option<String>,
    /// Warnings of the fit shown, which change how its numbers may be used.
    pub warnings: Vec<String>,
}

/// The constants shown first, in this order; any other constant of the model follows.
const FIRST: [&str; 3] = ["kcat", "Km", "kcat_over_Km"];
/// Constants that are not the answer (Vmax when kcat is there; the fitted dead time).
const NOT_THE_ANSWER: [&str; 2] = ["Vmax", "dead_time"];

/// The display name of a constant (`kcat_over_Km` as `kcat/Km`).
pub fn parameter_name(name: &str) -> String {
    name.replace("_over_", "/")
}

fn ordered_parameters(
    parameters: &std::collections::BTreeMap<String, ParameterReport>,
) -> Vec<(String, &ParameterReport)> {
    let has_kcat = parameters.contains_key("kcat");
    let mut names: Vec<&str> = FIRST
        .iter()
        .copied()
        .filter(|n| parameters.contains_key(*n))
        .collect();
    if !has_kcat && parameters.contains_key("Vmax") {
        names.insert(0, "Vmax");
    }
    names.extend(
        parameters
            .keys()
            .map(String::as_str)
            .filter(|n| !FIRST.contains(n) && !NOT_THE_ANSWER.contains(n)),
    );
    names
        .into_iter()
        .filter_map(|name| parameters.get(name).map(|p| (parameter_name(name), p)))
        .collect()
}

/// The trust verdict in a few words, for a line a person can scan.
pub fn trust_reason_short(reason: &TrustReason) -> String {
    let km = |pair: &Option<crate::progress::trust::KmPair>| {
        pair.as_ref().map_or(String::new(), |pair| {
            format!(
                " (Km {} vs {})",
                crate::core::format::significant(pair.progress),
                crate::core::format::significant(pair.initial)
            )
        })
    };
    match reason {
        TrustReason::NotRun(_) => "initial rates look sound; no progress-curve fit needed".to_string(),
        TrustReason::FitFailed(_) => {
            "the progress-curve fit could not be made; initial rates with their flags".to_string()
        }
        TrustReason::ManyMisfits { suspect: true, .. } => {
            "whole curves misfit and the initial rates are suspect: check before use".to_string()
        }
        TrustReason::ManyMisfits { suspect: false, .. } => {
            "whole curves misfit the rate law; the initial rates look sound".to_string()
        }
        TrustReason::NoInitialRateKm => "no initial-rate Km to compare; progress curves".to_string(),
        TrustReason::SuspectInitialRates { km: pair, .. } => {
            format!(
                "initial rates suspect (depletion) and the analyses disagree{}",
                km(pair)
            )
        }
        TrustReason::DepletionWithinWindows { km: pair, .. } => {
            format!("depletion within the windows; the analyses disagree{}", km(pair))
        }
        TrustReason::Agree { km: pair, .. } => format!("both analyses agree{}", km(pair)),
        TrustReason::Disagree { km: pair } => format!(
            "the analyses disagree{}: check rate law, dead time, calibration and [S]",
            km(pair)
        ),
    }
}

fn from_initial_rates<'a>(fit: &'a GroupFit, progress: Option<&'a ProgressGroupReport>) -> GroupResult<'a> {
    let trust = progress.map(|p| p.decision.trust);
    let reason = match progress {
        Some(p) => trust_reason_short(&p.decision.reason),
        None => "initial rates (the only analysis made)".to_string(),
    };
    GroupResult {
        label: group_label(&fit.group),
        model: fit.model.name(),
        numbers_from: NumbersFrom::InitialRates,
        trust,
        usable: fit.error.is_none() && trust != Some(Trust::Neither),
        reason,
        parameters: ordered_parameters(&fit.parameters),
        wells_used: fit.wells_used.len(),
        wells_left_out: fit.wells_left_out.len(),
        error: fit.error.clone(),
        warnings: fit.warnings.clone(),
    }
}

fn from_progress_curves(progress: &ProgressGroupReport) -> GroupResult<'_> {
    GroupResult {
        label: group_label(&progress.group),
        model: progress.model.map_or("-", |m| m.name()),
        numbers_from: NumbersFrom::ProgressCurves,
        trust: Some(progress.decision.trust),
        usable: progress.error.is_none(),
        reason: trust_reason_short(&progress.decision.reason),
        parameters: ordered_parameters(&progress.parameters),
        wells_used: progress.n_wells,
        wells_left_out: progress.wells_left_out.len(),
        error: progress.error.clone(),
        warnings: progress.warnings.clone(),
    }
}

/// Every group's answer: the progress-curve constants where the verdict is `progress-curve`,
/// else the initial-rate constants (for `either` they agree, and the initial-rate intervals are
/// the ones whose coverage is best established; see DEVELOPERS.md).
pub fn run_results(results: &RunResults) -> Vec<GroupResult<'_>> {
    let analysed = |fit: &GroupFit| {
        results
            .progress
            .groups
            .iter()
            .find(|p| p.group == fit.group && p.analysed)
    };
    let mut rows: Vec<GroupResult> = results
        .fits
        .iter()
        .map(|fit| match analysed(fit) {
            Some(progress) if progress.decision.trust == Trust::ProgressCurve => {
                from_progress_curves(progress)
            }
            other => from_initial_rates(fit, other),
        })
        .collect();
    // A progress-curve group with no initial-rate group of its own (a split by inhibitor level).
    rows.extend(
        results
            .progress
            .groups
            .iter()
            .filter(|p| p.analysed && !results.fits.iter().any(|f| f.group == p.group))
            .map(from_progress_curves),
    );
    rows
}

/// The columns of the results table: the first constants any group has, each with the display
/// unit chosen over every group's value.
pub fn result_columns(rows: &[GroupResult]) -> Vec<(String, DisplayUnit)> {
    let mut columns: Vec<(String, DisplayUnit)> = Vec::new();
    for name in ["Vmax", "kcat", "Km", "kcat/Km"] {
        let values: Vec<&ParameterReport> = rows
            .iter()
            .filter_map(|row| row.parameters.iter().find(|(n, _)| n == name).map(|(_, p)| *p))
            .collect();
        let Some(first) = values.first() else { continue };
        let unit = DisplayUnit::for_values(&first.unit, values.iter().map(|p| p.value));
        columns.push((name.to_string(), unit));
    }
    columns
}

/// Constants of a row beyond the table's columns, each in its own display unit: `Ki 12.3 [10.1,
/// 14.5] uM`.
pub fn other_constants<'r>(
    row: &'r GroupResult,
    columns: &[(String, DisplayUnit)],
) -> Vec<(&'r str, &'r ParameterReport, DisplayUnit)> {
    row.parameters
        .iter()
        .filter(|(name, _)| !columns.iter().any(|(c, _)| c == name))
        .map(|(name, p)| (name.as_str(), *p, DisplayUnit::for_values(&p.unit, [p.value])))
        .collect()
}

/// The words of an analysis for the results (`initial rates`, `progress curves`).
pub fn numbers_from_words(from: NumbersFrom) -> &'static str {
    match from {
        NumbersFrom::InitialRates => "initial rates",
        NumbersFrom::ProgressCurves => "progress curves",
    }
}
