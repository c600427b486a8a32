//! Words made from typed results: group labels, reasons for leaving points out, the progress-curve
//! analysis's run reasons, model verdicts and trust decisions. Every sentence the outputs carry about
//! a decision is made here, from the decision's value; nothing reads these sentences back.

use crate::core::format::significant;
use crate::groups::units::RateExpression;
use crate::groups::{GroupKey, GroupValue, LeftOutPlace, LeftOutReason};
use crate::progress::analysis::ProgressLeftOutReason;
use crate::progress::choice::{ModelTried, ModelVerdict};
use crate::progress::trust::{KmPair, RunReason, Suspicion, Trust, TrustReason, LOW_SUBSTRATE_CONVERSION};
use crate::rates::background::{Background, NoBackground};
use crate::rates::{flag_words, Correction, Flag};
use crate::signal::{BlankModel, PlateSignal};

/// A group key's value as JSON writes it (numbers as serde_json prints an f64).
pub fn group_value_json(value: &GroupValue) -> serde_json::Value {
    match value {
        GroupValue::Text(text) => serde_json::Value::String(text.clone()),
        GroupValue::Number(number) => serde_json::json!(number),
    }
}

/// A group key as the JSON object `fit.json` and `progress.json` write.
pub fn group_json(key: &GroupKey) -> serde_json::Map<String, serde_json::Value> {
    key.values
        .iter()
        .map(|(name, value)| (name.clone(), group_value_json(value)))
        .collect()
}

/// A group key as `name=value` pairs in the layout's order, for the campaign tables whose
/// `group` column scripts match on: `enzyme [nM]=4.0, variant=FenA-wt`.
pub fn group_key_text(key: &GroupKey) -> String {
    if key.values.is_empty() {
        return "all samples".to_string();
    }
    key.values
        .iter()
        .map(|(name, value)| match value {
            GroupValue::Text(text) => format!("{name}={text}"),
            GroupValue::Number(_) => format!("{name}={}", group_value_json(value)),
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// A group's label as a reader scans it: the named factors first (`variant FenA-wt`), then the
/// numeric ones with their unit after the number (`enzyme 4 nM`), so that what tells the groups
/// apart comes first. A factor the group's wells leave empty (a `control` column filled only on
/// the control wells) says nothing and is left out.
pub fn group_label(key: &GroupKey) -> String {
    let named = key.values.iter().filter_map(|(name, value)| match value {
        GroupValue::Text(text) if !text.trim().is_empty() => Some(format!("{name} {text}")),
        GroupValue::Text(_) | GroupValue::Number(_) => None,
    });
    let numeric = key.values.iter().filter_map(|(name, value)| match value {
        GroupValue::Number(number) => Some(match name.split_once(" [") {
            Some((bare, unit)) if unit.ends_with(']') => {
                format!("{bare} {} {}", number, &unit[..unit.len() - 1])
            }
            _ => format!("{name} {number}"),
        }),
        GroupValue::Text(_) => None,
    });
    let parts: Vec<String> = named.chain(numeric).collect();
    if parts.is_empty() {
        return "all samples".to_string();
    }
    parts.join(", ")
}

/// Why a point was left out of a group fit, in words.
pub fn left_out_words(reason: &LeftOutReason) -> String {
    match reason {
        LeftOutReason::NoRate => "no rate".to_string(),
        LeftOutReason::Flagged(flags) => flag_words(flags),
        LeftOutReason::NotUsedInRun => "not used in the run".to_string(),
        LeftOutReason::NoSubstrateOrRate => "no substrate or no rate".to_string(),
    }
}

/// Where a left-out point stood, as its label (`B3`, `row 7`).
pub fn left_out_place(place: &LeftOutPlace) -> String {
    match place {
        LeftOutPlace::Well(well) => well.to_string(),
        LeftOutPlace::Row(row) => format!("row {row}"),
    }
}

/// Why a well is left out of a progress-curve fit, in words.
pub fn progress_left_out_words(reason: ProgressLeftOutReason) -> &'static str {
    match reason {
        ProgressLeftOutReason::NoSubstrate => "no substrate concentration in the layout",
        ProgressLeftOutReason::NoEnzyme => "no enzyme concentration in the layout",
        ProgressLeftOutReason::Noisy => {
            "noisy: its scatter, far above the plate's blank noise, would dominate an unweighted fit"
        }
        ProgressLeftOutReason::Lag => {
            "lag: activity rises at the start, which the rate laws fitted here do not describe"
        }
        ProgressLeftOutReason::Saturated => {
            "saturated: its absorbance leaves the photometric range, so even the reads below the limit sit where readings are least reliable"
        }
        ProgressLeftOutReason::NoTrace => "no trace in the data",
        ProgressLeftOutReason::TooFewReads => "fewer than 3 usable reads",
    }
}

/// The signs of suspicion, in words: `12 well(s) depleted, 3 well(s) nonlinear`.
pub fn suspicion_words(suspicion: &Suspicion) -> String {
    let mut parts = Vec::new();
    if suspicion.depleted > 0 {
        parts.push(format!("{} well(s) depleted", suspicion.depleted));
    }
    if suspicion.nonlinear > 0 {
        parts.push(format!("{} well(s) nonlinear", suspicion.nonlinear));
    }
    if suspicion.over_limit > 0 {
        parts.push(format!(
            "{} well(s) converted more than {:.0}% in their window",
            suspicion.over_limit,
            100.0 * suspicion.max_conversion
        ));
    }
    if let Some(conversion) = suspicion
        .low_substrate_conversion
        .filter(|c| *c > LOW_SUBSTRATE_CONVERSION)
    {
        parts.push(format!(
            "the lower-S0 wells converted a median {:.1}% of their substrate in their windows (over {:.0}%)",
            100.0 * conversion,
            100.0 * LOW_SUBSTRATE_CONVERSION
        ));
    }
    parts.join(", ")
}

/// Why the progress-curve analysis ran for a group, or did not (`progress.json`'s `reason`).
pub fn run_reason_words(run: &RunReason) -> String {
    match run {
        RunReason::Never => "--progress never".to_string(),
        RunReason::Sound => {
            "initial rates look sound: no depleted or nonlinear wells, conversion within the limit"
                .to_string()
        }
        RunReason::Always(None) => "--progress always".to_string(),
        RunReason::Always(Some(suspicion)) => format!("--progress always ({})", suspicion_words(suspicion)),
        RunReason::Suspect(suspicion) => format!("initial rates suspect: {}", suspicion_words(suspicion)),
    }
}

/// A model's verdict in words, `chosen (...)` around the reported model's.
pub fn verdict_words(tried: &ModelTried) -> String {
    let words = match &tried.verdict {
        ModelVerdict::Baseline => "baseline model".to_string(),
        ModelVerdict::Failed(message) => format!("failed: {message}"),
        ModelVerdict::NoFTest => "not needed: no F test possible".to_string(),
        ModelVerdict::Needed { name, p, aicc_drop } => format!(
            "needed: {name} > 0 (its 95% interval, clustered by well where it can be, excludes 0), F test p = {p:.2e}, AICc lower by {aicc_drop:.1}"
        ),
        ModelVerdict::Immaterial { name, value, p, effect } => format!(
            "not needed: {name} = {value:.3e} is detectable (F test p = {p:.1e}) but changes the rate by only {:.1}% over the read",
            100.0 * effect
        ),
        ModelVerdict::Indistinguishable { name, p } => {
            format!("not needed: {name} is not distinguishable from 0 (F test p = {p:.2})")
        }
        ModelVerdict::NotEnough {
            name,
            value,
            p,
            delta_aicc,
        } => format!(
            "not needed: {name} = {value:.3e} does not improve the fit enough (F test p = {p:.2}, AICc {delta_aicc:+.1})"
        ),
    };
    if tried.chosen {
        format!("chosen ({words})")
    } else {
        words
    }
}

/// The trust decision's analysis in the report's words.
pub fn trust_analysis_words(trust: Trust) -> &'static str {
    match trust {
        Trust::Either => "either (they agree)",
        other => trust_word(other),
    }
}

/// The verdict in a word or two (`either`, `progress curves`).
pub fn trust_word(trust: Trust) -> &'static str {
    match trust {
        Trust::InitialRate => "initial rates",
        Trust::ProgressCurve => "progress curves",
        Trust::Either => "either",
        Trust::Neither => "neither",
    }
}

fn km_text(km: &Option<KmPair>) -> String {
    match km {
        Some(pair) => format!(
            " (Km {} vs {} from initial rates)",
            significant(pair.progress),
            significant(pair.initial)
        ),
        None => String::new(),
    }
}

/// The trust decision's reason, as one sentence (`progress.json`'s `trust_reason`).
pub fn trust_reason_words(reason: &TrustReason) -> String {
    match reason {
        TrustReason::NotRun(run) => {
            format!("initial rates: progress-curve fit not run ({})", run_reason_words(run))
        }
        TrustReason::FitFailed(message) => {
            format!("initial rates (with their flags): the progress-curve fit could not be made: {message}")
        }
        TrustReason::ManyMisfits {
            model,
            misfits,
            wells,
            suspect,
        } => {
            if *suspect {
                format!(
                    "neither without checking: the {} model misfits {misfits} of {wells} wells systematically over the whole read, and the initial rates are suspect",
                    model.name()
                )
            } else {
                format!(
                    "the initial rates: the {} model misfits {misfits} of {wells} wells systematically over the whole read, while the initial rates, which assume the rate law only near mixing, look sound",
                    model.name()
                )
            }
        }
        TrustReason::NoInitialRateKm => {
            "the progress-curve fit: the initial rates give no Km with an interval to compare with".to_string()
        }
        TrustReason::SuspectInitialRates { run, window_ratio, km } => {
            let ratio_text = window_ratio.map_or(String::new(), |r| {
                format!(
                    "; window slopes are a median {:.0}% of the fitted initial rates",
                    100.0 * r
                )
            });
            let why = match run {
                RunReason::Suspect(suspicion) => suspicion_words(suspicion),
                other => run_reason_words(other),
            };
            format!(
                "the progress-curve fit: the initial rates are suspect ({why}), the two analyses disagree{} and the whole curves fit without systematic misfit{ratio_text}",
                km_text(km)
            )
        }
        TrustReason::DepletionWithinWindows { km, shortfall } => format!(
            "the progress-curve fit: the analyses disagree{}, and the window slopes of the lower-S0 wells fall short of the fitted initial rates (median {:.0}%), the signature of depletion within the windows",
            km_text(km),
            100.0 * shortfall
        ),
        TrustReason::Agree { km, suspicion } => match suspicion {
            None => format!(
                "either: the initial rates are clean and both analyses agree{}; the progress-curve fit uses every read and usually gives the narrower interval",
                km_text(km)
            ),
            Some(suspicion) => format!(
                "either: the initial rates showed signs of depletion ({}) but both analyses agree{}; the progress-curve fit uses every read and usually gives the narrower interval",
                suspicion_words(suspicion),
                km_text(km)
            ),
        },
        TrustReason::Disagree { km } => format!(
            "neither without checking: the initial rates look clean but the two analyses disagree{}; check the rate law, the dead time, the calibration (extinction x pathlength) and the substrate concentrations",
            km_text(km)
        ),
    }
}

/// Flags among a condition's wells, by word: `depleted x2; lag x1`.
pub fn flag_count_words(counts: &std::collections::BTreeMap<Flag, usize>) -> String {
    let mut words: Vec<(&str, usize)> = counts.iter().map(|(flag, n)| (flag.word(), *n)).collect();
    words.sort();
    words
        .iter()
        .map(|(word, count)| format!("{word} x{count}"))
        .collect::<Vec<_>>()
        .join("; ")
}

/// The corrections a well got, as `wells.csv`'s `correction` column writes them.
pub fn correction_words(correction: &Correction, signal: &PlateSignal, rates: &RateExpression) -> String {
    let rate_unit = &rates.unit;
    let mut text = match (correction.blank_wells, signal.blank_model) {
        (None, _) => "none (blank)".to_string(),
        (Some(0), _) | (_, BlankModel::None) => "no blank correction".to_string(),
        (Some(n), BlankModel::PerRead) => format!("blank: mean of {n} blank wells at each read"),
        (Some(n), BlankModel::Smooth { degree }) => format!(
            "blank: {} in time through the mean of {n} blank wells",
            if degree == 1 { "straight line" } else { "quadratic" }
        ),
    };
    // Reads with no readable blank were never corrected with 0: say what they got instead.
    if correction.blank_wells.is_some_and(|n| n > 0) && !signal.reads_without_blank.is_empty() {
        let reads: Vec<String> = signal
            .reads_without_blank
            .iter()
            .take(8)
            .map(|read| (read + 1).to_string())
            .collect();
        let more = signal.reads_without_blank.len().saturating_sub(8);
        text.push_str(&format!(
            " (no blank readable at read(s) {}{}: {})",
            reads.join(", "),
            if more > 0 {
                format!(" and {more} more")
            } else {
                String::new()
            },
            match signal.blank_model {
                BlankModel::PerRead => "interpolated between the neighbouring reads",
                _ => "taken from the curve",
            }
        ));
    }
    match &correction.background {
        None => {}
        Some(Background::Matched { rate, controls, .. }) => text.push_str(&format!(
            "; background {} {rate_unit} from {controls} no-enzyme well{}",
            significant(rates.rate(*rate)),
            if *controls == 1 { "" } else { "s" }
        )),
        Some(Background::Modelled {
            rate,
            controls,
            levels,
            with_intercept,
            substrate,
            ..
        }) => text.push_str(&format!(
            "; background {} {rate_unit} from a first-order fit in [S]{} to {controls} no-enzyme wells at {levels} [S] levels \
             (taken at the [S] left mid-window: {})",
            significant(rates.rate(*rate)),
            if *with_intercept { " with an intercept" } else { "" },
            significant(*substrate)
        )),
        Some(Background::None(NoBackground::NoControls)) => {
            text.push_str("; no background (no matching no-enzyme wells)")
        }
        Some(Background::None(NoBackground::NoControlAtLevel)) => {
            text.push_str("; no background (no matching no-enzyme well at this [S], and the others give no first-order model)")
        }
        Some(Background::None(NoBackground::ControlsFlagged(wells))) => {
            let named: Vec<String> = wells
                .iter()
                .map(|(well, flags)| format!("{well} ({})", flag_words(flags).replace(';', ", ")))
                .collect();
            text.push_str(&format!(
                "; no background (the matching no-enzyme wells are flagged: {})",
                named.join(", ")
            ));
        }
    }
    text
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::BTreeMap;

    #[test]
    fn group_key_text_prints_numbers_as_json_does_and_labels_put_named_factors_first() {
        let mut values = BTreeMap::new();
        values.insert("variant".to_string(), GroupValue::Text("wt".into()));
        values.insert("enzyme [nM]".to_string(), GroupValue::Number(4.0));
        values.insert("inhibitor [uM]".to_string(), GroupValue::Number(2.5));
        values.insert("batch".to_string(), GroupValue::Number(3.0));
        values.insert("control".to_string(), GroupValue::Text(String::new()));
        let key = GroupKey { values };
        assert_eq!(
            group_key_text(&key),
            "batch=3.0, control=, enzyme [nM]=4.0, inhibitor [uM]=2.5, variant=wt"
        );
        assert_eq!(
            group_label(&key),
            "variant wt, batch 3, enzyme 4 nM, inhibitor 2.5 uM"
        );
        assert_eq!(group_label(&GroupKey::default()), "all samples");
        assert_eq!(group_key_text(&GroupKey::default()), "all samples");
    }

    #[test]
    fn run_reasons_name_the_suspicion() {
        let suspicion = Suspicion {
            depleted: 2,
            nonlinear: 0,
            over_limit: 1,
            max_conversion: 0.1,
            low_substrate_conversion: None,
        };
        assert_eq!(
            run_reason_words(&RunReason::Suspect(suspicion)),
            "initial rates suspect: 2 well(s) depleted, 1 well(s) converted more than 10% in their window"
        );
        assert_eq!(
            run_reason_words(&RunReason::Always(Some(suspicion))),
            "--progress always (2 well(s) depleted, 1 well(s) converted more than 10% in their window)"
        );
    }
}
