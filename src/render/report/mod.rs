//! The run report: `report.html` (one self-contained page with inline SVG plots and CSS, no
//! scripts and no network) and `run.json` (tool version, the inputs' sizes and SHA-256, every
//! setting, the outputs written), so a run can be mailed, read, repeated and checked.
//! `--report full` adds one PNG per plot under `plots/`.
//!
//! The page is a list of sections built from what the run holds; analyses that other modules add
//! later add their own sections and their own candidates in [`trust_verdicts`] without changing
//! the others. `run.json` itself is made in [`super::json`].

mod calibration;
pub(crate) mod html;
mod screen;

use super::plots::{plate_view, PlateView, WellState};
use super::words::{group_label, trust_analysis_words, trust_reason_words};
use super::{RenderError, RunRecord};
use crate::config::ReportMode;
use crate::files::output::OutputFile;
use crate::pipeline::RunResults;

pub use html::{report_html, ReportParts};

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

/// Which analysis to trust for each group: the progress-curve analysis's own decision where it
/// analysed the group, else initial rates, with the initial-rate fit's state as further reasons.
pub fn trust_verdicts(results: &RunResults) -> Vec<TrustVerdict> {
    let progress_of = |group: &crate::groups::GroupKey| {
        results
            .progress
            .groups
            .iter()
            .find(|p| p.group == *group && p.analysed)
    };
    let mut verdicts = initial_rate_verdicts(results);
    for (verdict, fit) in verdicts.iter_mut().zip(&results.fits) {
        if let Some(progress) = progress_of(&fit.group) {
            verdict.analysis = trust_analysis_words(progress.decision.trust).to_string();
            // The initial-rate-only sentence no longer holds once a progress fit exists.
            verdict.reasons.remove(0);
            let mut reasons = vec![format!(
                "progress-curve verdict: {}",
                trust_reason_words(&progress.decision.reason)
            )];
            reasons.append(&mut verdict.reasons);
            verdict.reasons = reasons;
        }
    }
    // A progress-curve group with no initial-rate group of its own (a split by inhibitor level).
    for progress in results.progress.groups.iter().filter(|p| p.analysed) {
        if !results.fits.iter().any(|f| f.group == progress.group) {
            verdicts.push(TrustVerdict {
                group: group_label(&progress.group),
                analysis: trust_analysis_words(progress.decision.trust).to_string(),
                reasons: vec![format!(
                    "progress-curve verdict: {}",
                    trust_reason_words(&progress.decision.reason)
                )],
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
                group: group_label(&fit.group),
                analysis: "initial rates".to_string(),
                reasons,
            }
        })
        .collect()
}

/// Renders the report files the record's mode asks for (`report.html`, `plots/*.png`); none for
/// [`ReportMode::None`].
pub fn report_files(results: &RunResults, record: &RunRecord) -> Result<Vec<OutputFile>, RenderError> {
    if record.report == ReportMode::None {
        return Ok(Vec::new());
    }
    report_files_from_view(results, plate_view(results), record)
}

/// [`report_files`] from a plate view made beforehand.
pub fn report_files_from_view(
    results: &RunResults,
    plate: PlateView,
    record: &RunRecord,
) -> Result<Vec<OutputFile>, RenderError> {
    if record.report == ReportMode::None {
        return Ok(Vec::new());
    }
    let parts = ReportParts::build_from_view(results, plate, record)?;
    let mut files = vec![OutputFile {
        name: "report.html".into(),
        bytes: report_html(&parts).into_bytes(),
    }];
    if record.report == ReportMode::Full {
        files.extend(parts.png_files()?);
    }
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
