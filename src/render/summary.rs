//! The terminal summary of a run (and of `platekin fit`): what was read, the flagged wells, each
//! group's constants with their intervals, the progress-curve analysis, the warnings, and where
//! the outputs are.

use std::path::Path;

use super::display::number as significant;
use super::display::DisplayUnit;
use super::results::{numbers_from_words, result_columns, run_results, trust_word};
use super::words::{group_label, run_reason_words};
use crate::config::{RateModelKind, ReportMode};
use crate::core::format::CAUTION;
use crate::groups::{GroupFit, ParameterReport};
use crate::layout::Role;
use crate::pipeline::RunResults;
use crate::progress::analysis::{CalibrationInput, CalibrationSensitivity, ProgressAnalysis};
use crate::rates::flag_counts;

/// A constant with its 95% interval (and its profile interval) in the unit that reads plainly:
/// `12.01 [11.95, 12.07] profile [11.97, 12.04] 1/s`.
fn with_interval(parameter: Option<&ParameterReport>) -> String {
    match parameter {
        None => "-".to_string(),
        Some(p) => {
            let unit = DisplayUnit::for_values(&p.unit, [p.value]);
            let end = |x: Option<f64>| x.map_or("open".to_string(), |x| unit.value_like(x, p.value));
            let profile = p.ci95_profile.map_or(String::new(), |[lo, hi]| {
                format!(" profile [{}, {}]", end(lo), end(hi))
            });
            let doubt = if p.determined { "" } else { " (not determined)" };
            format!(
                "{}{profile} {}{doubt}",
                unit.with_interval(p.value, p.ci95),
                unit.plain()
            )
        }
    }
}

/// The progress-curve lines of the summary: one block per group (what to trust is in the results
/// block at the top).
fn progress_summary(progress: &ProgressAnalysis, signal_unit: &str, calibrated: bool) -> Vec<String> {
    let mut lines = vec![
        String::new(),
        format!("Progress-curve analysis (--progress {}):", progress.mode.word()),
    ];
    for group in &progress.groups {
        let label = group_label(&group.group);
        if !group.analysed {
            lines.push(format!(
                "  {label}: not fitted ({})",
                run_reason_words(&group.run)
            ));
            continue;
        }
        lines.push(format!(
            "  {label}: {} global fit of {} wells ({}), residual SD {} {signal_unit}",
            group.model.map_or("-", |m| m.name()),
            group.n_wells,
            run_reason_words(&group.run),
            group.residual_sd.map_or("-".to_string(), significant)
        ));
        lines.push(format!(
            "    kcat    {}",
            with_interval(group.parameters.get("kcat"))
        ));
        lines.push(format!(
            "    Km      {}",
            with_interval(group.parameters.get("Km"))
        ));
        for extra in ["Kp", "k_inact", "dead_time"] {
            if let Some(p) = group.parameters.get(extra) {
                lines.push(format!("    {extra:<7} {}", with_interval(Some(p))));
            }
        }
        lines.extend(sensitivity_lines(&group.sensitivity, calibrated));
        for warning in &group.warnings {
            lines.push(format!("    warning: {warning}"));
        }
    }
    lines
}

/// One line per calibration input: how far kcat and Km move when it is 5% low and 5% high
/// (the progress-curve constants depend on the calibration; initial-rate Km does not).
fn sensitivity_lines(sensitivity: &[CalibrationSensitivity], calibrated: bool) -> Vec<String> {
    let mut lines = Vec::new();
    // The same input either way: the signal per unit concentration.
    let conversion = if calibrated {
        "standard curve slope"
    } else {
        "extinction x pathlength"
    };
    for (input, words) in [
        (CalibrationInput::ExtinctionPathlength, conversion),
        (CalibrationInput::SubstrateStart, "S0"),
    ] {
        let cases: Vec<&CalibrationSensitivity> = sensitivity.iter().filter(|c| c.input == input).collect();
        if cases.is_empty() {
            continue;
        }
        let moves = |name: &str| {
            cases
                .iter()
                .filter_map(|c| c.relative_change.get(name).map(|r| format!("{:+.1}%", 100.0 * r)))
                .collect::<Vec<_>>()
                .join("/")
        };
        let factors = cases
            .iter()
            .map(|c| format!("{:+.0}%", 100.0 * (c.factor - 1.0)))
            .collect::<Vec<_>>()
            .join("/");
        lines.push(format!(
            "    {words} {factors}: kcat {}, Km {}",
            moves("kcat"),
            moves("Km")
        ));
    }
    lines
}

/// The answer first: per group the constants of the analysis to trust with their 95% intervals
/// (in units that read plainly), then one line naming the model, the analysis, the wells and the
/// verdict, then the warnings that change how the numbers may be used.
fn results_lines(results: &RunResults) -> Vec<String> {
    let rows = run_results(results);
    let columns = result_columns(&rows);
    let mut lines = vec!["Results (value [95% interval]):".to_string()];
    if rows.is_empty() {
        lines.push("  no group was fitted".to_string());
    }
    for row in &rows {
        let mut constants: Vec<String> = Vec::new();
        for (name, parameter) in &row.parameters {
            let unit = columns.iter().find(|(column, _)| column == name).map_or_else(
                || DisplayUnit::for_values(&parameter.unit, [parameter.value]),
                |(_, u)| u.clone(),
            );
            constants.push(format!(
                "{name} {} {}",
                unit.with_interval(parameter.value, parameter.ci95),
                unit.plain()
            ));
        }
        match &row.error {
            Some(error) => lines.push(format!("  {}: no constants: {error}", row.label)),
            None => lines.push(format!("  {}: {}", row.label, constants.join("; "))),
        }
        let trust = row
            .trust
            .map_or(String::new(), |t| format!("; trust: {}", trust_word(t)));
        lines.push(format!(
            "    {} from {}, {} wells ({} left out){trust}: {}{}",
            row.model,
            numbers_from_words(row.numbers_from),
            row.wells_used,
            row.wells_left_out,
            row.reason,
            if row.usable {
                ""
            } else {
                " - do not use these numbers without checking"
            }
        ));
        for warning in &row.warnings {
            lines.push(format!("    warning: {warning}"));
        }
    }
    lines
}

/// The one-screen summary of a run, naming the report files written.
pub fn run_summary(results: &RunResults, report: ReportMode, out: &Path) -> String {
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
        "wells analysed: {} ({} samples, {} no-enzyme, {} blanks{}); rates in {}",
        analysis.wells.len(),
        count(Role::Sample),
        count(Role::NoEnzyme),
        count(Role::Blank),
        match count(Role::Standard) {
            0 => String::new(),
            n => format!(", {n} standards"),
        },
        results.rates_in.unit
    ));
    if let Some(calibration) = &analysis.signal.calibration {
        for curve in &calibration.curves {
            lines.push(format!(
                "standard curve ({}{}): slope {} {}/{} (SE {:.2}%), fitted {} to {} {}, LOD {} {}",
                curve.group_label(),
                if curve.quadratic.is_some() {
                    ", second order"
                } else {
                    ""
                },
                significant(curve.local_slope(curve.working_concentration)),
                analysis.signal.raw_unit,
                calibration.unit,
                100.0 * curve.slope_relative_se(),
                significant(curve.range.0),
                significant(curve.range.1),
                calibration.unit,
                significant(curve.lod),
                calibration.unit
            ));
        }
    }
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
        // Wells excluded by hand have their own line below, with the reason given.
        let excluded: Vec<String> = analysis
            .excluded()
            .filter(|(w, _)| w.excluded_by_hand.is_none())
            .map(|(w, reason)| format!("{} {}", w.well, reason))
            .collect();
        if !excluded.is_empty() {
            lines.push(format!("left out of means and fits: {}", excluded.join(", ")));
        }
    }
    lines.extend(super::screen::exclusion_lines(results));
    lines.push(String::new());
    if let Some(screen) = &results.screen {
        // A screen's answer is its compounds and its plate quality; it fits no rate law and no
        // progress curve, so those blocks are left out rather than shown empty.
        lines.extend(super::screen::results_lines(screen));
        lines.push(String::new());
        lines.extend(super::screen::quality_lines(screen));
    } else {
        lines.extend(results_lines(results));
    }
    if !results.fits.is_empty() {
        lines.push(String::new());
        lines.push("Initial-rate fits (value [95% interval]):".to_string());
        lines.extend(group_fit_lines(&results.fits));
    }
    if !results.progress.groups.is_empty() {
        lines.extend(progress_summary(
            &results.progress,
            results.analysis.signal.raw_unit,
            results.analysis.signal.calibration.is_some(),
        ));
    }
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
        "outputs: {}/ (wells.csv{}, conditions.csv, fit.json, progress.json, {}{}settings.toml{}, run.json)",
        out.display(),
        if results.screen.is_some() {
            " with `activity [%]`"
        } else {
            ""
        },
        if results.screen.is_some() {
            "compounds.csv, plate_qc.json, "
        } else {
            ""
        },
        if results.analysis.signal.calibration.is_some() {
            "calibration.json, "
        } else {
            ""
        },
        match report {
            ReportMode::Html => ", report.html",
            ReportMode::Full => ", report.html, plots/*.png",
            ReportMode::None => "",
        }
    ));
    lines.push(CAUTION.to_string());
    lines.push(String::new());
    lines.join("\n")
}

/// The summary of `platekin fit` on a rate table.
pub fn table_fit_summary(source: &str, kind: &str, fits: &[GroupFit], out: &Path) -> String {
    let mut lines = vec![
        format!(
            "platekin {}: fit of {} ({}, {} group(s))",
            env!("CARGO_PKG_VERSION"),
            source,
            kind,
            fits.len()
        ),
        String::new(),
        "Fits (value [95% interval]):".to_string(),
    ];
    lines.extend(group_fit_lines(fits));
    lines.push(String::new());
    lines.push(format!("outputs: {}/ (fit.json, summary.txt)", out.display()));
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
        // The classic block for Michaelis-Menten; other models list what they fitted.
        let classic = fit.model == RateModelKind::MichaelisMenten;
        if classic {
            lines.push(format!(
                "    kcat    {}",
                with_interval(fit.parameters.get("kcat"))
            ));
            lines.push(format!("    Km      {}", with_interval(fit.parameters.get("Km"))));
            lines.push(format!(
                "    kcat/Km {}",
                with_interval(fit.parameters.get("kcat_over_Km"))
            ));
            if !fit.parameters.contains_key("kcat") {
                lines.push(format!(
                    "    Vmax    {}",
                    with_interval(fit.parameters.get("Vmax"))
                ));
            }
        }
        for (name, parameter) in &fit.parameters {
            if classic && ["kcat", "Km", "kcat_over_Km", "Vmax"].contains(&name.as_str()) {
                continue;
            }
            if name == "Vmax" && fit.parameters.contains_key("kcat") {
                continue;
            }
            lines.push(format!("    {name:<7} {}", with_interval(Some(parameter))));
        }
        for warning in &fit.warnings {
            lines.push(format!("    warning: {warning}"));
        }
    }
    lines
}
