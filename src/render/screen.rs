//! The outputs of a screening plate: the `activity [%]` column of `wells.csv`, `compounds.csv`
//! (one row per compound, ranked), `plate_qc.json` (Z', signal window, signal-to-background, the
//! controls' CV and n, the edge check) and the words of its warnings.

use polars::prelude::*;
use serde_json::{json, Value};

use super::json::json_file;
use super::tables::{csv_bytes, spreadsheet_safe, TableError};
use super::RenderError;
use crate::files::output::OutputFile;
use crate::fit::dose_response::{CurveFlag, PLATEAU_FRACTION, SHALLOW_HILL, STEEP_HILL};
use crate::groups::units::RateExpression;
use crate::pipeline::RunResults;
use crate::rates::PlateAnalysis;
use crate::screen::quality::{ControlSummary, Z_PRIME_BAR};
use crate::screen::{CompoundResult, ScreenAnalysis};

/// The header of the % activity column.
pub const ACTIVITY_HEADER: &str = "activity [%]";

/// The rule for fixed plateaus, as the report and summary state it.
pub fn plateau_rule_words() -> String {
    format!(
        "Top and bottom are fitted free when a tested dose lies on each plateau (the fitted curve within {:.0}% of the span of it at the lowest, resp. highest dose); a plateau no dose reaches is fixed at 100% (top) or 0% (bottom) and flagged no-plateau. An IC50 outside the tested doses is reported as a bound (> the highest dose, < the lowest), never extrapolated; when the mean activity at every dose stays above 50% (or below it) the bound stands on the data alone, with or without a converged curve. Flags: shallow (Hill below {SHALLOW_HILL}), steep (above {STEEP_HILL}), single-dose (leaving out one dose moves the IC50 more than two-fold), no-fit (no curve converged while the doses' means lie on both sides of 50%).",
        100.0 * PLATEAU_FRACTION
    )
}

/// The Cheng-Prusoff caution.
pub const CHENG_PRUSOFF_WORDS: &str = "Ki = IC50 / (1 + [S]/Km) (Cheng and Prusoff 1973) assumes a competitive inhibitor under rapid equilibrium with [I] >> [E]; it is an assumption, not a finding of this plate";

/// The words of the plate's quality warnings (Z' below the bar, flagged edges).
pub fn quality_warnings(screen: &ScreenAnalysis) -> Vec<String> {
    let quality = &screen.quality;
    let mut warnings = Vec::new();
    match &quality.z_prime {
        Some(z) if z.value < Z_PRIME_BAR => warnings.push(format!(
            "Z' = {:.2} is below {Z_PRIME_BAR} (common practice for a screen-ready assay): the controls overlap too much for single-dose calls; treat IC50s with care",
            z.value
        )),
        None => warnings.push("Z' could not be computed (the controls' means coincide or an SD is missing)".to_string()),
        Some(_) => {}
    }
    for check in quality.edge.iter().filter(|check| check.flagged) {
        warnings.push(format!(
            "edge check: `{}` controls on the outer rows and columns differ from the inner ones by {:+.1}% of the control window (evaporation or temperature at the plate's edge?)",
            check.role, check.difference_percent
        ));
    }
    warnings
}

/// Adds `activity [%]` to `wells.csv` after the rate's standard error.
pub fn add_activity_column(
    frame: &mut DataFrame,
    analysis: &PlateAnalysis,
    screen: &ScreenAnalysis,
) -> Result<(), TableError> {
    let values: Vec<Option<f64>> = analysis
        .wells
        .iter()
        .map(|well| screen.activity.get(&well.well).copied())
        .collect();
    let index = frame
        .get_column_names()
        .iter()
        .position(|name| name.starts_with("rate_se"))
        .map_or(frame.width(), |at| at + 1);
    frame.insert_column(index, Column::new(ACTIVITY_HEADER.into(), values))?;
    Ok(())
}

/// The flags of a compound as written.
pub fn flag_words(flags: &[CurveFlag]) -> String {
    flags.iter().map(|flag| flag.word()).collect::<Vec<_>>().join(";")
}

fn finite(value: f64) -> Option<f64> {
    value.is_finite().then_some(value)
}

/// `compounds.csv`: one row per compound, in rank order.
pub fn compounds_table(screen: &ScreenAnalysis) -> Result<DataFrame, TableError> {
    let unit = screen
        .inhibitor_unit
        .map_or_else(|| "dose unit".to_string(), |unit| unit.to_string());
    let compounds = &screen.compounds;
    let parameter = |index: usize| -> Vec<Option<f64>> {
        compounds
            .iter()
            .map(|c| c.fit.parameters.map(|p| p[index]))
            .collect()
    };
    let ci = |side: usize| -> Vec<Option<f64>> { compounds.iter().map(|c| c.ic50_ci95()[side]).collect() };
    let mut columns = vec![
        Column::new(
            "compound".into(),
            compounds
                .iter()
                .map(|c| spreadsheet_safe(&c.name))
                .collect::<Vec<_>>(),
        ),
        Column::new(
            format!("IC50 [{unit}]").into(),
            compounds.iter().map(|c| finite(c.ic50())).collect::<Vec<_>>(),
        ),
        Column::new(
            "IC50_qualifier".into(),
            compounds
                .iter()
                .map(|c| c.fit.qualifier.sign().to_string())
                .collect::<Vec<_>>(),
        ),
        Column::new(format!("IC50_ci95_low [{unit}]").into(), ci(0)),
        Column::new(format!("IC50_ci95_high [{unit}]").into(), ci(1)),
        Column::new("hill".into(), parameter(3)),
        Column::new("top [%]".into(), parameter(0)),
        Column::new("bottom [%]".into(), parameter(1)),
        Column::new(
            "n_points".into(),
            compounds
                .iter()
                .map(|c| c.fit.n_points as u32)
                .collect::<Vec<_>>(),
        ),
        Column::new(
            "flags".into(),
            compounds
                .iter()
                .map(|c| Some(flag_words(&c.fit.flags)).filter(|text| !text.is_empty()))
                .collect::<Vec<_>>(),
        ),
    ];
    if screen.cheng_prusoff.is_some() {
        columns.push(Column::new(
            format!("Ki [{unit}]").into(),
            compounds
                .iter()
                .map(|c| c.ki.and_then(finite))
                .collect::<Vec<_>>(),
        ));
    }
    Ok(DataFrame::new(compounds.len(), columns)?)
}

fn control_json(summary: &ControlSummary, rates: &RateExpression) -> Value {
    json!({
        "n": summary.n,
        "mean": rates.optional(summary.mean),
        "sd": rates.optional(summary.sd),
        "cv_percent": summary.cv_percent,
    })
}

/// `plate_qc.json`.
pub fn plate_qc_document(screen: &ScreenAnalysis, rates: &RateExpression) -> Value {
    let quality = &screen.quality;
    let edge: Vec<Value> = quality
        .edge
        .iter()
        .map(|check| {
            json!({
                "control": check.role.name(),
                "edge_n": check.edge.0,
                "edge_mean": rates.rate(check.edge.1),
                "inner_n": check.inner.0,
                "inner_mean": rates.rate(check.inner.1),
                "difference_percent_of_window": check.difference_percent,
                "flagged": check.flagged,
            })
        })
        .collect();
    json!({
        "rate_unit": rates.unit,
        "z_prime": quality.z_prime.as_ref().map(|z| z.value),
        "z_prime_bar": Z_PRIME_BAR,
        "screen_ready": !quality.below_bar(),
        "signal_window": quality.signal_window,
        "signal_to_background": quality.signal_to_background,
        "uninhibited": control_json(&quality.uninhibited, rates),
        "inhibited": control_json(&quality.inhibited, rates),
        "edge_check": edge,
        "control_groups_by": screen.control_factors,
        "warnings": quality_warnings(screen),
        "formulas": {
            "z_prime": "1 - 3 (SD_u + SD_i) / |mean_u - mean_i| (Zhang, Chung and Oldenburg 1999, J Biomol Screen 4:67)",
            "signal_window": "(|mean_u - mean_i| - 3 (SD_u + SD_i)) / SD_u (Iversen et al. 2006)",
            "signal_to_background": "mean_u / mean_i (only when mean_i is positive and more than 3 SE from zero)",
            "cv_percent": "100 SD / |mean| (only when the mean is more than 3 SE from zero)",
            "activity": "100 (v - mean_i) / (mean_u - mean_i), controls of the same plate and group",
        },
    })
}

/// The screen's output files: `compounds.csv` and `plate_qc.json`.
pub fn screen_files(screen: &ScreenAnalysis, rates: &RateExpression) -> Result<Vec<OutputFile>, RenderError> {
    let mut compounds = compounds_table(screen)?;
    Ok(vec![
        OutputFile {
            name: "compounds.csv".into(),
            bytes: csv_bytes(&mut compounds)?,
        },
        json_file("plate_qc.json", &plate_qc_document(screen, rates))?,
    ])
}

/// One line per compound for the summary: name, IC50 with its qualifier and 95% interval (the
/// summary's `value [95% interval]`), flags.
pub fn compound_line(compound: &CompoundResult, unit: &str) -> String {
    let ic50 = crate::core::format::significant(compound.ic50());
    let flags = flag_words(&compound.fit.flags);
    let interval = match compound.ic50_ci95() {
        [Some(low), Some(high)] => format!(
            " [{}, {}]",
            crate::core::format::significant(low),
            crate::core::format::significant(high)
        ),
        [low, high] if compound.fit.qualifier == crate::fit::dose_response::Ic50Qualifier::Equal => {
            let end = |x: Option<f64>| x.map_or("open".to_string(), crate::core::format::significant);
            format!(" [{}, {}]", end(low), end(high))
        }
        _ => String::new(),
    };
    let mut line = format!(
        "{} IC50 {} {ic50}{interval} {unit}",
        compound.name,
        compound.fit.qualifier.sign()
    );
    if !flags.is_empty() {
        line.push_str(&format!("; flags: {flags}"));
    }
    line
}

/// A screen's answer, as the summary's and the report's results blocks both give it first: how
/// many compounds, how many inhibit within the tested doses (`=`), already below half activity
/// at the lowest dose (`<`) or not down to half activity at the highest (`>`), and Z'.
#[derive(Debug, Clone)]
pub struct ScreenAnswer<'a> {
    /// Every compound, most potent first.
    pub compounds: &'a [CompoundResult],
    /// Compounds with an IC50 within the tested doses or below them (`=` and `<`), in rank order.
    pub actives: Vec<&'a CompoundResult>,
    /// Compounds reported `=`.
    pub within: usize,
    /// Compounds reported `<` the lowest dose.
    pub below: usize,
    /// Compounds reported `>` the highest dose.
    pub above: Vec<&'a CompoundResult>,
    /// Compounds with any flag.
    pub flagged: usize,
    /// Z', when the controls give one.
    pub z_prime: Option<f64>,
    /// The dose unit.
    pub unit: String,
}

impl<'a> ScreenAnswer<'a> {
    /// The answer of a screen.
    pub fn of(screen: &'a ScreenAnalysis) -> ScreenAnswer<'a> {
        use crate::fit::dose_response::Ic50Qualifier;
        let count = |q: Ic50Qualifier| screen.compounds.iter().filter(|c| c.fit.qualifier == q).count();
        ScreenAnswer {
            compounds: &screen.compounds,
            actives: screen
                .compounds
                .iter()
                .filter(|c| c.fit.qualifier != Ic50Qualifier::Above)
                .collect(),
            within: count(Ic50Qualifier::Equal),
            below: count(Ic50Qualifier::Below),
            above: screen
                .compounds
                .iter()
                .filter(|c| c.fit.qualifier == Ic50Qualifier::Above)
                .collect(),
            flagged: screen
                .compounds
                .iter()
                .filter(|c| !c.fit.flags.is_empty())
                .count(),
            z_prime: screen.quality.z_prime.as_ref().map(|z| z.value),
            unit: screen
                .inhibitor_unit
                .map_or_else(|| "dose unit".to_string(), |unit| unit.to_string()),
        }
    }

    /// The answer in one sentence: compounds, actives by qualifier, inactive, flagged, Z'.
    pub fn headline(&self) -> String {
        let z = self.z_prime.map_or_else(
            || "Z' not computed".to_string(),
            |z| {
                format!(
                    "Z' {z:.2} ({})",
                    if z < Z_PRIME_BAR {
                        "below 0.5: not screen-ready"
                    } else {
                        "screen-ready: 0.5 or more"
                    }
                )
            },
        );
        format!(
            "{} compounds: {} active ({} with an IC50 within the tested doses, {} below the lowest dose), {} inactive up to the highest dose (>), {} flagged; {z}",
            self.compounds.len(),
            self.actives.len(),
            self.within,
            self.below,
            self.above.len(),
            self.flagged
        )
    }
}

/// The summary's results block of a screen: the answer first, then the actives (most potent first,
/// at most [`SUMMARY_COMPOUNDS`]) with their IC50 and interval, then the inactive compounds by name.
pub fn results_lines(screen: &ScreenAnalysis) -> Vec<String> {
    let answer = ScreenAnswer::of(screen);
    let mut lines = vec![format!(
        "Results (screen; IC50 [95% interval]): {}",
        answer.headline()
    )];
    for compound in answer.actives.iter().take(SUMMARY_COMPOUNDS) {
        lines.push(format!("  {}", compound_line(compound, &answer.unit)));
    }
    if answer.actives.len() > SUMMARY_COMPOUNDS {
        lines.push(format!(
            "  ... and {} more active (all in compounds.csv)",
            answer.actives.len() - SUMMARY_COMPOUNDS
        ));
    }
    if !answer.above.is_empty() {
        let names: Vec<&str> = answer
            .above
            .iter()
            .take(SUMMARY_COMPOUNDS)
            .map(|c| c.name.as_str())
            .collect();
        lines.push(format!(
            "  inactive (IC50 > the highest dose): {}{}",
            names.join(", "),
            if answer.above.len() > SUMMARY_COMPOUNDS {
                format!(" and {} more", answer.above.len() - SUMMARY_COMPOUNDS)
            } else {
                String::new()
            }
        ));
    }
    if screen.cheng_prusoff.is_some() {
        lines.push(format!("  note: {CHENG_PRUSOFF_WORDS}"));
    }
    lines
}

/// The summary's line for wells excluded by hand (on any plate; empty when there are none).
pub fn exclusion_lines(results: &RunResults) -> Vec<String> {
    if results.exclusions.is_empty() {
        return Vec::new();
    }
    let listed: Vec<String> = results
        .exclusions
        .iter()
        .map(|exclusion| format!("{} ({})", exclusion.well, exclusion.reason))
        .collect();
    vec![format!("excluded by hand: {}", listed.join(", "))]
}

/// The summary's lines of a screening plate's quality: its figures and warnings (the compounds
/// are in the results block, [`results_lines`]).
pub fn quality_lines(screen: &ScreenAnalysis) -> Vec<String> {
    let quality = &screen.quality;
    let figure = |value: Option<f64>| value.map_or("-".to_string(), |v| format!("{v:.2}"));
    // A CV over a mean near zero is not given (see `screen::quality`); say so instead of "-%".
    let cv = |value: Option<f64>| value.map_or("none: mean near zero".to_string(), |v| format!("{v:.2}%"));
    let mut lines = vec![format!(
        "Plate quality: Z' {}, signal window {}, signal-to-background {}; uninhibited n {} (CV {}), inhibited n {} (CV {})",
        figure(quality.z_prime.as_ref().map(|z| z.value)),
        figure(quality.signal_window),
        figure(quality.signal_to_background),
        quality.uninhibited.n,
        cv(quality.uninhibited.cv_percent),
        quality.inhibited.n,
        cv(quality.inhibited.cv_percent),
    )];
    for warning in quality_warnings(screen) {
        lines.push(format!("warning: {warning}"));
    }
    lines
}

/// Compounds listed in the summary.
pub const SUMMARY_COMPOUNDS: usize = 10;
