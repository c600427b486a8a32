//! Per-group progress-curve reports: which groups get the global fit (`--progress auto|always|
//! never`), the wells' curves in signal units, the models tried and the one chosen, identifiability
//! warnings, the side-by-side comparison with the initial-rate analysis, and a plain statement of
//! which analysis to trust and why. `progress.json` is these reports.
//!
//! Signal: per read, raw absorbance minus the plate's blank at that read, minus the matching
//! no-enzyme background drift (the background rate of the initial-rate analysis, in AU/s, times
//! t); reads before `--skip`, unreadable reads and reads above `--max-absorbance` are left out, and
//! so are wells flagged `lag` (the rate laws assume full activity from the start) or `noisy` (the
//! fit weights every read equally).
//! Signal per unit substrate: `g = -epsilon l c_unit` for a product read (P = S0 - S),
//! `+epsilon l c_unit` for a substrate read, `c_unit` the layout's substrate unit in M.
//!
//! S0 from the signal (substrate readout): the straight line through a well's first reads,
//! extrapolated back to the reaction's start (t = -dead time), divided by `g`; wells where it differs
//! from the layout by more than [`S0_DISAGREEMENT`] are named, and `--s0-from-signal` fits with it.
//!
//! Model choice (rules of this program, common practice in spirit): plain Michaelis-Menten is the
//! default; an extended model (product inhibition, inactivation) is chosen only when its extra
//! term is positive with a 95% interval excluding 0, the extra-sum-of-squares F test against plain
//! Michaelis-Menten gives p < 0.01, its AICc is lower by more than 2, and the term changes the
//! rate by at least [`MATERIAL_EFFECT`] during the read.
//!
//! Trust statement: the progress-curve fit is preferred when the group's initial rates are suspect
//! (depleted or nonlinear wells, or conversion above the limit) and the fit shows no systematic
//! misfit in more than a third of the wells; when initial rates are clean and the two analyses'
//! Km agree (their 95% intervals overlap) either will do; when they disagree and the window slopes
//! of the lower-S0 wells fall short of the fitted initial rates (median below 97%, depletion within
//! the windows) the progress-curve fit is preferred; otherwise the report says what disagrees.

use std::collections::BTreeMap;

use serde_json::{json, Map, Value};

use super::global_fit::{
    extra_sum_of_squares_test, fit_group, GlobalFit, GlobalFitOptions, ProgressError, ProgressModel,
    WellCurve,
};
use crate::analysis::{blank_per_read, PlateAnalysis, WellResult};
use crate::groups::{sample_groups, GroupFit};
use crate::import::KineticData;
use crate::layout::Layout;
use crate::rates::Flag;
use crate::settings::{AnalysisSettings, ProgressMode, Readout};

/// An extra term is needed only if it changes the rate by at least this fraction during the read
/// (inactivation: `1 - exp(-k_inact t_end)`; product inhibition: `P_max / Kp`, the largest rise of
/// the apparent Km). Smaller terms can be statistically detectable in precise data yet immaterial,
/// and small unmodelled effects (spontaneous hydrolysis, drift) produce them (a rule of this
/// program).
pub const MATERIAL_EFFECT: f64 = 0.05;

/// Relative difference between the layout's S0 and the S0 read from the first signal above which
/// the report names the well (a rule of this program: beyond pipetting precision).
pub const S0_DISAGREEMENT: f64 = 0.10;

/// Correlation above which a pair of parameters is reported as not separable.
pub const CORRELATION_WARNING: f64 = 0.99;

/// One parameter in `progress.json`.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ProgressParameter {
    /// Estimate.
    pub value: f64,
    /// Asymptotic standard error.
    pub se: Option<f64>,
    /// Asymptotic 95% interval.
    pub ci95: Option<[f64; 2]>,
    /// Profile-likelihood 95% interval (Km only; `null` on a side the data leave open).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub ci95_profile: Option<[Option<f64>; 2]>,
    /// Unit.
    pub unit: String,
    /// False when the data cannot pin it down (see the warnings).
    pub determined: bool,
}

/// One model tried on a group.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ModelTried {
    /// The model.
    pub model: String,
    /// AICc (lower is better).
    pub aicc: Option<f64>,
    /// AICc minus the best AICc of the models tried.
    pub delta_aicc: Option<f64>,
    /// Residual SD, AU.
    pub residual_sd: Option<f64>,
    /// The extra term (`inverse_Kp` or `k_inact`) with its interval.
    pub extra_parameter: Option<Value>,
    /// Extra-sum-of-squares F test against plain Michaelis-Menten: p value.
    pub f_test_p: Option<f64>,
    /// In words: chosen, not needed, or why it failed.
    pub verdict: String,
}

/// One group's progress-curve report.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ProgressGroupReport {
    /// What the group's wells share (as in `fit.json`).
    pub group: Map<String, Value>,
    /// Why the analysis ran (or did not).
    pub reason: String,
    /// Whether a fit was made.
    pub analysed: bool,
    /// The model chosen.
    pub model: Option<String>,
    /// kcat, Km, kcat_over_Km, and the chosen extra term.
    pub parameters: BTreeMap<String, ProgressParameter>,
    /// Correlation of the shared parameters: names and matrix.
    pub correlation: Option<Value>,
    /// Residual SD, AU.
    pub residual_sd: Option<f64>,
    /// AICc of the chosen model.
    pub aicc: Option<f64>,
    /// Reads and wells fitted.
    pub n: usize,
    /// Wells fitted.
    pub n_wells: usize,
    /// Dead time used (fixed or fitted), s.
    pub dead_time_s: Option<f64>,
    /// Every model tried.
    pub models_tried: Vec<ModelTried>,
    /// Per-well diagnostics and the initial-rate comparison.
    pub wells: Vec<Value>,
    /// Sample wells left out, with the reason.
    pub wells_left_out: Vec<Value>,
    /// The initial-rate analysis of the same group (kcat, Km), side by side.
    pub initial_rate_fit: Value,
    /// `progress-curve`, `initial-rate`, `either` or `neither`.
    pub trust: String,
    /// Why, in plain words.
    pub trust_reason: String,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
    /// Why no fit could be made, if none was.
    pub error: Option<String>,
    /// Each fitted well's reads and fitted curve, for the report's plots (not in `progress.json`).
    #[serde(skip)]
    pub curves: Vec<ProgressCurve>,
}

/// One well's observed and fitted progress curve, in the signal units the fit used (AU, blank- and
/// background-corrected).
#[derive(Debug, Clone, PartialEq)]
pub struct ProgressCurve {
    /// The well.
    pub well: String,
    /// S0 from the layout.
    pub s0: Option<f64>,
    /// Read times, s.
    pub times_s: Vec<f64>,
    /// Observed signal, AU.
    pub observed: Vec<f64>,
    /// Fitted signal, AU.
    pub fitted: Vec<f64>,
    /// Runs test on the residual signs: runs and z.
    pub runs: (usize, Option<f64>),
    /// Whether the runs test finds systematic misfit.
    pub systematic_misfit: bool,
}

/// The progress-curve analysis of a plate.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ProgressAnalysis {
    /// `auto`, `always` or `never`.
    pub mode: String,
    /// One report per group of sample wells.
    pub groups: Vec<ProgressGroupReport>,
}

/// Why a group's initial rates are suspect, if they are.
fn suspicion(wells: &[&WellResult], max_conversion: f64) -> Option<String> {
    let count = |flag: Flag| wells.iter().filter(|w| w.rate.flags.contains(&flag)).count();
    let depleted = count(Flag::Depleted);
    let nonlinear = count(Flag::Nonlinear);
    let converted = wells
        .iter()
        .filter(|w| w.rate.conversion.is_some_and(|c| c > max_conversion))
        .count();
    let mut parts = Vec::new();
    if depleted > 0 {
        parts.push(format!("{depleted} well(s) depleted"));
    }
    if nonlinear > 0 {
        parts.push(format!("{nonlinear} well(s) nonlinear"));
    }
    if converted > 0 {
        parts.push(format!(
            "{converted} well(s) converted more than {:.0}% in their window",
            100.0 * max_conversion
        ));
    }
    (!parts.is_empty()).then(|| parts.join(", "))
}

/// Analyses every group of sample wells as `settings.progress.mode` says.
pub fn analyse_progress(
    data: &KineticData,
    layout: &Layout,
    analysis: &PlateAnalysis,
    initial_fits: &[GroupFit],
    settings: &AnalysisSettings,
) -> ProgressAnalysis {
    let mode = settings.progress.mode;
    let (blank, _) = blank_per_read(data, layout);
    let groups = sample_groups(analysis, layout)
        .into_iter()
        .map(|(group, wells)| {
            let initial = initial_fits.iter().find(|fit| fit.group == group);
            let suspect = suspicion(&wells, settings.rates.max_conversion);
            let reason = match (mode, &suspect) {
                (ProgressMode::Never, _) => None,
                (ProgressMode::Always, Some(why)) => Some(format!("--progress always ({why})")),
                (ProgressMode::Always, None) => Some("--progress always".to_string()),
                (ProgressMode::Auto, Some(why)) => Some(format!("initial rates suspect: {why}")),
                (ProgressMode::Auto, None) => None,
            };
            match reason {
                Some(reason) => analyse_group(
                    GroupInput {
                        group,
                        wells: &wells,
                        data,
                        layout,
                        blank: &blank,
                        settings,
                        initial,
                    },
                    reason,
                    suspect.is_some(),
                ),
                None => not_analysed(group, mode, initial),
            }
        })
        .collect();
    ProgressAnalysis {
        mode: mode.word().to_string(),
        groups,
    }
}

fn initial_summary(initial: Option<&GroupFit>) -> Value {
    match initial {
        None => Value::Null,
        Some(fit) => json!({
            "kcat": fit.parameters.get("kcat"),
            "Km": fit.parameters.get("Km"),
            "error": fit.error,
        }),
    }
}

fn empty_report(
    group: Map<String, Value>,
    reason: String,
    initial: Option<&GroupFit>,
) -> ProgressGroupReport {
    ProgressGroupReport {
        group,
        reason,
        analysed: false,
        model: None,
        parameters: BTreeMap::new(),
        correlation: None,
        residual_sd: None,
        aicc: None,
        n: 0,
        n_wells: 0,
        dead_time_s: None,
        models_tried: Vec::new(),
        wells: Vec::new(),
        wells_left_out: Vec::new(),
        initial_rate_fit: initial_summary(initial),
        trust: "initial-rate".to_string(),
        trust_reason: String::new(),
        warnings: Vec::new(),
        error: None,
        curves: Vec::new(),
    }
}

fn not_analysed(
    group: Map<String, Value>,
    mode: ProgressMode,
    initial: Option<&GroupFit>,
) -> ProgressGroupReport {
    let reason = match mode {
        ProgressMode::Never => "--progress never".to_string(),
        _ => "initial rates look sound: no depleted or nonlinear wells, conversion within the limit"
            .to_string(),
    };
    let mut report = empty_report(group, reason.clone(), initial);
    report.trust_reason = format!("initial rates: progress-curve fit not run ({reason})");
    report
}

struct GroupInput<'a> {
    group: Map<String, Value>,
    wells: &'a [&'a WellResult],
    data: &'a KineticData,
    layout: &'a Layout,
    blank: &'a [f64],
    settings: &'a AnalysisSettings,
    initial: Option<&'a GroupFit>,
}

/// The wells' curves, or why none can be built for the group.
fn well_curves(
    input: &GroupInput,
    left_out: &mut Vec<Value>,
    warnings: &mut Vec<String>,
    s0_pairs: &mut Vec<(String, f64, Option<f64>)>,
) -> Result<Vec<WellCurve>, String> {
    let settings = input.settings;
    let (epsilon, path) = match (settings.extinction_per_molar_cm, settings.pathlength_cm) {
        (Some(e), Some(l)) => (e, l),
        _ => {
            return Err(
                "no extinction coefficient and pathlength: a progress-curve fit needs the signal in concentration units (give --extinction and --pathlength)"
                    .to_string(),
            )
        }
    };
    let s_unit = input
        .layout
        .substrate_unit
        .ok_or("the layout gives no substrate unit, so S0 is unknown")?;
    let e_unit = input
        .layout
        .enzyme_unit
        .ok_or("the layout gives no enzyme concentration, so kcat cannot be separated from Vmax")?;
    // AU per substrate unit; the signal falls with S for a product read.
    let per_unit = epsilon * path * s_unit.in_molar();
    let signal_per_substrate = match settings.readout {
        Readout::Product => -per_unit,
        Readout::Substrate => per_unit,
    };
    // The analysis' background is in product-formed units per second (sign already applied).
    let background_sign = match settings.readout {
        Readout::Product => 1.0,
        Readout::Substrate => -1.0,
    };
    let mut curves = Vec::new();
    let mut disagreements = Vec::new();
    for well in input.wells {
        let mut leave = |reason: &str| {
            left_out.push(json!({"well": well.well.to_string(), "reason": reason}));
        };
        let Some(s0) = well.setup.substrate.filter(|s| *s > 0.0) else {
            leave("no substrate concentration in the layout");
            continue;
        };
        let Some(e0) = well.setup.enzyme.filter(|e| *e > 0.0) else {
            leave("no enzyme concentration in the layout");
            continue;
        };
        if well.rate.flags.contains(&Flag::Noisy) {
            leave("noisy: its scatter, far above the plate's blank noise, would dominate an unweighted fit");
            continue;
        }
        if well.rate.flags.contains(&Flag::Lag) {
            leave("lag: activity rises at the start, which the rate laws fitted here do not describe");
            continue;
        }
        if well.rate.flags.contains(&Flag::Saturated) {
            leave("saturated: its absorbance leaves the photometric range, so even the reads below the limit sit where readings are least reliable");
            continue;
        }
        let Some(trace) = input.data.wells.iter().find(|t| t.well == well.well) else {
            leave("no trace in the data");
            continue;
        };
        let drift = well.background.unwrap_or(0.0) * background_sign * per_unit;
        let mut times_s = Vec::new();
        let mut signal = Vec::new();
        for ((time, value), blank) in input.data.times_s.iter().zip(&trace.values).zip(input.blank) {
            if let Some(raw) = value {
                if *time >= settings.rates.skip_s && *raw <= settings.rates.max_absorbance {
                    times_s.push(*time);
                    signal.push(raw - blank - drift * time);
                }
            }
        }
        if signal.len() < 3 {
            leave("fewer than 3 usable reads");
            continue;
        }
        // A substrate read carries S0 itself: the early straight line extrapolated back to the
        // start of the reaction (t = -dead time), over the signal per unit substrate.
        let s0_signal = (settings.readout == Readout::Substrate)
            .then(|| early_intercept(&times_s, &signal, -settings.progress.dead_time_s))
            .flatten()
            .map(|intercept| intercept / signal_per_substrate)
            .filter(|s| s.is_finite() && *s > 0.0);
        if let Some(from_signal) = s0_signal {
            if (from_signal / s0 - 1.0).abs() > S0_DISAGREEMENT {
                disagreements.push(format!(
                    "{} (layout {}, signal {})",
                    well.well,
                    crate::run::significant(s0),
                    crate::run::significant(from_signal)
                ));
            }
        }
        s0_pairs.push((well.well.to_string(), s0, s0_signal));
        let s0_used = match (settings.progress.s0_from_signal, s0_signal) {
            (true, Some(from_signal)) => from_signal,
            _ => s0,
        };
        curves.push(WellCurve {
            label: well.well.to_string(),
            times_s,
            signal,
            s0: s0_used,
            e0: e0 * e_unit.factor_to(s_unit),
            signal_per_substrate,
        });
    }
    if !disagreements.is_empty() {
        warnings.push(format!(
            "S0 from the first signal differs from the layout by more than {:.0}% in {} well(s) (a pipetting or stock error?): {}",
            100.0 * S0_DISAGREEMENT,
            disagreements.len(),
            disagreements.join(", ")
        ));
    }
    if settings.progress.s0_from_signal && settings.readout != Readout::Substrate {
        warnings.push("--s0-from-signal needs --readout substrate; the layout's S0 was used".to_string());
    }
    Ok(curves)
}

/// Intercept at `t_at` of the straight line through the first few reads.
fn early_intercept(times: &[f64], values: &[f64], t_at: f64) -> Option<f64> {
    let n = times.len().min(6);
    if n < 2 {
        return None;
    }
    let mean_t = times[..n].iter().sum::<f64>() / n as f64;
    let mean_y = values[..n].iter().sum::<f64>() / n as f64;
    let sxx: f64 = times[..n].iter().map(|t| (t - mean_t).powi(2)).sum();
    let sxy: f64 = times[..n]
        .iter()
        .zip(&values[..n])
        .map(|(t, y)| (t - mean_t) * (y - mean_y))
        .sum();
    (sxx > 0.0).then(|| mean_y + sxy / sxx * (t_at - mean_t))
}

fn parameter(fit: &GlobalFit, name: &str, unit: &str) -> Option<ProgressParameter> {
    let p = fit.parameter(name)?;
    let determined = p.se.is_some_and(|se| se.is_finite() && se <= 0.5 * p.value.abs());
    Some(ProgressParameter {
        value: p.value,
        se: p.se,
        ci95: p.ci95,
        ci95_profile: None,
        unit: unit.to_string(),
        determined,
    })
}

fn extra_term_value(fit: &GlobalFit) -> Option<(String, f64, Option<[f64; 2]>)> {
    fit.parameters
        .iter()
        .find(|p| p.name == "inverse_Kp" || p.name == "k_inact")
        .map(|p| (p.name.clone(), p.value, p.ci95))
}

fn analyse_group(input: GroupInput, reason: String, suspect: bool) -> ProgressGroupReport {
    let mut report = empty_report(input.group.clone(), reason, input.initial);
    let mut s0_pairs = Vec::new();
    let curves = match well_curves(
        &input,
        &mut report.wells_left_out,
        &mut report.warnings,
        &mut s0_pairs,
    ) {
        Ok(curves) => curves,
        Err(message) => return failed(report, message),
    };
    let base = GlobalFitOptions {
        dead_time_s: input.settings.progress.dead_time_s,
        fit_dead_time: input.settings.progress.fit_dead_time,
        ..GlobalFitOptions::default()
    };
    let (chosen, models_tried) = match compare_models(&curves, &base) {
        Ok(result) => result,
        Err(error) => return failed(report, format!("no progress-curve fit: {error}")),
    };
    report.models_tried = models_tried;
    fill_from_fit(&mut report, &chosen, &curves, &input);
    for ((entry, (_, layout_s0, signal_s0)), curve) in report.wells.iter_mut().zip(&s0_pairs).zip(&curves) {
        if let Some(object) = entry.as_object_mut() {
            object.insert("S0".into(), json!(layout_s0));
            object.insert("S0_from_signal".into(), json!(signal_s0));
            object.insert("S0_used".into(), json!(curve.s0));
        }
    }
    decide_trust(&mut report, &chosen, suspect, input.initial);
    report
}

/// Fits plain Michaelis-Menten and the extended models, and chooses (module notes). Returns the
/// chosen fit (with the Km profile) and every model tried with its verdict.
pub fn compare_models(
    curves: &[WellCurve],
    base: &GlobalFitOptions,
) -> Result<(GlobalFit, Vec<ModelTried>), ProgressError> {
    let plain = fit_group(curves, base)?;
    let mut tried: Vec<(ProgressModel, Result<GlobalFit, String>)> =
        vec![(ProgressModel::MichaelisMenten, Ok(plain.clone()))];
    for model in [ProgressModel::ProductInhibition, ProgressModel::Inactivation] {
        let options = GlobalFitOptions {
            model,
            profile_km: false,
            ..base.clone()
        };
        tried.push((model, fit_group(curves, &options).map_err(|e| e.to_string())));
    }
    let best_aicc = tried
        .iter()
        .filter_map(|(_, fit)| fit.as_ref().ok().map(|f| f.aicc))
        .filter(|a| a.is_finite())
        .fold(f64::INFINITY, f64::min);
    let mut chosen = plain.clone();
    let mut models_tried = Vec::new();
    for (model, fit) in &tried {
        let entry = match fit {
            Err(message) => ModelTried {
                model: model.name().to_string(),
                aicc: None,
                delta_aicc: None,
                residual_sd: None,
                extra_parameter: None,
                f_test_p: None,
                verdict: format!("failed: {message}"),
            },
            Ok(fit) => {
                let extra = extra_term_value(fit);
                let p = (*model != ProgressModel::MichaelisMenten)
                    .then(|| extra_sum_of_squares_test(plain.rss, fit.rss, fit.degrees_of_freedom))
                    .flatten()
                    .map(|(_, p)| p);
                let effect = extra_effect(fit, curves);
                let verdict = match (&extra, p) {
                    (None, _) => "baseline model".to_string(),
                    (Some((name, value, ci)), Some(p)) => {
                        let excludes_zero = ci.is_some_and(|[lo, _]| lo > 0.0);
                        let detected =
                            *value > 0.0 && excludes_zero && p < 0.01 && fit.aicc < plain.aicc - 2.0;
                        if detected && effect < MATERIAL_EFFECT {
                            format!("not needed: {name} = {value:.3e} is detectable (F test p = {p:.1e}) but changes the rate by only {:.1}% over the read", 100.0 * effect)
                        } else if detected {
                            format!("needed: {name} > 0 (95% interval excludes 0), F test p = {p:.2e}, AICc lower by {:.1}", plain.aicc - fit.aicc)
                        } else if ci.is_some_and(|[lo, hi]| lo <= 0.0 && hi >= 0.0) {
                            format!("not needed: {name} is not distinguishable from 0 (F test p = {p:.2})")
                        } else {
                            format!("not needed: {name} = {value:.3e} does not improve the fit enough (F test p = {p:.2}, AICc {:+.1})", fit.aicc - plain.aicc)
                        }
                    }
                    (Some(_), None) => "not needed: no F test possible".to_string(),
                };
                ModelTried {
                    model: model.name().to_string(),
                    aicc: Some(fit.aicc),
                    delta_aicc: Some(fit.aicc - best_aicc),
                    residual_sd: Some(fit.residual_sd),
                    extra_parameter: extra
                        .map(|(name, value, ci)| json!({"name": name, "value": value, "ci95": ci})),
                    f_test_p: p,
                    verdict,
                }
            }
        };
        models_tried.push(entry);
    }
    // Among needed extended models, the lowest AICc.
    let needed: Vec<(ProgressModel, &GlobalFit)> = tried
        .iter()
        .zip(&models_tried)
        .filter(|(_, entry)| entry.verdict.starts_with("needed"))
        .filter_map(|((model, fit), _)| fit.as_ref().ok().map(|f| (*model, f)))
        .collect();
    if let Some((model, _)) = needed.iter().min_by(|a, b| a.1.aicc.total_cmp(&b.1.aicc)) {
        let options = GlobalFitOptions {
            model: *model,
            ..base.clone()
        };
        // Refit with the Km profile; keep the plain fit if this unexpectedly fails.
        if let Ok(fit) = fit_group(curves, &options) {
            chosen = fit;
        }
    }
    for entry in &mut models_tried {
        if entry.model == chosen.model.name() {
            entry.verdict = format!("chosen ({})", entry.verdict);
        }
    }
    Ok((chosen, models_tried))
}

/// How much an extended model's extra term changes the rate during the read (see
/// [`MATERIAL_EFFECT`]); 0 for plain Michaelis-Menten.
fn extra_effect(fit: &GlobalFit, curves: &[WellCurve]) -> f64 {
    let dead = fit.parameter("dead_time").map_or(0.0, |p| p.value);
    let t_end = curves
        .iter()
        .flat_map(|c| c.times_s.iter().copied())
        .fold(0.0, f64::max)
        + dead;
    let product_max = fit
        .wells
        .iter()
        .zip(curves)
        .map(|(w, c)| w.fitted_conversion * c.s0)
        .fold(0.0, f64::max);
    if let Some(k) = fit.parameter("k_inact") {
        -(-k.value * t_end).exp_m1()
    } else if let Some(q) = fit.parameter("inverse_Kp") {
        q.value * product_max
    } else {
        0.0
    }
}

fn failed(mut report: ProgressGroupReport, message: String) -> ProgressGroupReport {
    report.trust = "initial-rate".to_string();
    report.trust_reason =
        format!("initial rates (with their flags): the progress-curve fit could not be made: {message}");
    report.error = Some(message);
    report
}

fn fill_from_fit(
    report: &mut ProgressGroupReport,
    fit: &GlobalFit,
    curves: &[WellCurve],
    input: &GroupInput,
) {
    let s_unit = input
        .layout
        .substrate_unit
        .map_or_else(|| "substrate units".into(), |u| u.to_string());
    report.analysed = true;
    report.model = Some(fit.model.name().to_string());
    report.residual_sd = Some(fit.residual_sd);
    report.aicc = Some(fit.aicc);
    report.n = fit.n_observations;
    report.n_wells = fit.n_wells;
    report.dead_time_s = Some(
        fit.parameter("dead_time")
            .map_or(input.settings.progress.dead_time_s, |p| p.value),
    );
    if let Some(kcat) = parameter(fit, "kcat", "1/s") {
        report.parameters.insert("kcat".into(), kcat);
    }
    if let Some(mut km) = parameter(fit, "Km", &s_unit) {
        km.ci95_profile = fit.km_profile_ci95;
        if let Some([lo, hi]) = fit.km_profile_ci95 {
            match (lo, hi) {
                (Some(_), Some(_)) => {}
                (None, _) => report.warnings.push(
                    "Km's profile-likelihood interval is open below: the data give only an upper bound"
                        .into(),
                ),
                (_, None) => report.warnings.push(
                    "Km's profile-likelihood interval is open above: the data give only a lower bound".into(),
                ),
            }
            if lo.is_none() || hi.is_none() {
                km.determined = false;
            }
        }
        report.parameters.insert("Km".into(), km);
    }
    // kcat/Km by the delta method on the fitted covariance, in 1/(M*s).
    if let (Some(kcat), Some(km), Some(unit)) = (
        fit.parameter("kcat"),
        fit.parameter("Km"),
        input.layout.substrate_unit,
    ) {
        let ratio = kcat.value / km.value;
        let correlation = fit.correlation.as_ref().map_or(0.0, |c| c[0][1]);
        let se = kcat.se.zip(km.se).map(|(sk, sm)| {
            let (rk, rm) = (sk / kcat.value, sm / km.value);
            ratio * (rk * rk + rm * rm - 2.0 * correlation * rk * rm).max(0.0).sqrt()
        });
        let scale = 1.0 / unit.in_molar();
        let quantile = crate::fit::t_quantile_975(fit.degrees_of_freedom.max(1)).ok();
        report.parameters.insert(
            "kcat_over_Km".into(),
            ProgressParameter {
                value: ratio * scale,
                se: se.map(|s| s * scale),
                ci95: se
                    .zip(quantile)
                    .map(|(s, q)| [(ratio - q * s) * scale, (ratio + q * s) * scale]),
                ci95_profile: None,
                unit: "1/(M*s)".into(),
                determined: se.is_some_and(|s| s <= 0.5 * ratio),
            },
        );
    }
    let inverse_unit = format!("1/{s_unit}");
    for (name, unit) in [
        ("inverse_Kp", inverse_unit.as_str()),
        ("k_inact", "1/s"),
        ("dead_time", "s"),
    ] {
        if let Some(p) = parameter(fit, name, unit) {
            if name == "inverse_Kp" && p.value > 0.0 {
                let kp_ci = p
                    .ci95
                    .and_then(|[lo, hi]| (lo > 0.0).then(|| [1.0 / hi, 1.0 / lo]));
                report.parameters.insert(
                    "Kp".into(),
                    ProgressParameter {
                        value: 1.0 / p.value,
                        se: p.se.map(|s| s / (p.value * p.value)),
                        ci95: kp_ci,
                        ci95_profile: None,
                        unit: s_unit.clone(),
                        determined: p.determined,
                    },
                );
            }
            report.parameters.insert(name.into(), p);
        }
    }
    let names: Vec<&str> = fit.parameters.iter().map(|p| p.name.as_str()).collect();
    if let Some(matrix) = &fit.correlation {
        for i in 0..names.len() {
            for j in (i + 1)..names.len() {
                if matrix[i][j].abs() > CORRELATION_WARNING {
                    report.warnings.push(format!(
                        "{} and {} are correlated {:.4}: the data do not separate them well",
                        names[i], names[j], matrix[i][j]
                    ));
                }
            }
        }
        report.correlation = Some(json!({"parameters": names, "matrix": matrix}));
    }
    // Identifiability against the S0 range.
    if let Some(km) = fit.parameter("Km") {
        let s_max = curves.iter().map(|c| c.s0).fold(0.0, f64::max);
        let s_min = curves.iter().map(|c| c.s0).fold(f64::INFINITY, f64::min);
        if s_max < km.value {
            report.warnings.push(format!(
                "every S0 lies below the fitted Km (largest S0 {} vs Km {} {s_unit}): the curves fix kcat/Km far better than kcat and Km apart",
                crate::run::significant(s_max),
                crate::run::significant(km.value)
            ));
        } else if s_min > km.value {
            report.warnings.push(format!(
                "every S0 lies above the fitted Km (smallest S0 {} vs Km {} {s_unit}): Km rests on the late, low-substrate part of the curves",
                crate::run::significant(s_min),
                crate::run::significant(km.value)
            ));
        }
    }
    for name in ["kcat", "Km"] {
        if report.parameters.get(name).is_some_and(|p| !p.determined) {
            report
                .warnings
                .push(format!("{name} is not determined by these data (wide interval)"));
        }
    }
    // Per well, with the initial-rate window slope beside the implied initial rate.
    let mut misfits = Vec::new();
    for diagnostics in &fit.wells {
        let well = input
            .wells
            .iter()
            .find(|w| w.well.to_string() == diagnostics.well);
        let window_rate = well.and_then(|w| w.rate_value);
        let ratio = window_rate.map(|r| r / diagnostics.implied_initial_rate);
        if diagnostics.systematic_misfit {
            misfits.push(diagnostics.well.clone());
        }
        report.curves.push(ProgressCurve {
            well: diagnostics.well.clone(),
            s0: well.and_then(|w| w.setup.substrate),
            times_s: diagnostics.times_s.clone(),
            observed: diagnostics.observed.clone(),
            fitted: diagnostics.fitted.clone(),
            runs: (diagnostics.runs, diagnostics.runs_z),
            systematic_misfit: diagnostics.systematic_misfit,
        });
        report.wells.push(json!({
            "well": diagnostics.well,
            "S0": well.and_then(|w| w.setup.substrate),
            "n": diagnostics.n,
            "signal_offset": diagnostics.signal_offset,
            "residual_sd": diagnostics.residual_sd,
            "runs": diagnostics.runs,
            "runs_z": diagnostics.runs_z,
            "systematic_misfit": diagnostics.systematic_misfit,
            "implied_initial_rate": diagnostics.implied_initial_rate,
            "window_rate": window_rate,
            "window_over_implied": ratio,
            "fitted_conversion": diagnostics.fitted_conversion,
            "flags": well.map(|w| w.flag_text()),
        }));
    }
    if !misfits.is_empty() {
        report.warnings.push(format!(
            "systematic misfit (runs test, 1% level) in {} of {} wells: {}",
            misfits.len(),
            fit.wells.len(),
            misfits.join(", ")
        ));
    }
    if !report.wells_left_out.is_empty() {
        report.warnings.push(format!(
            "{} sample well(s) left out of the progress-curve fit; see wells_left_out",
            report.wells_left_out.len()
        ));
    }
}

fn decide_trust(
    report: &mut ProgressGroupReport,
    fit: &GlobalFit,
    suspect: bool,
    initial: Option<&GroupFit>,
) {
    let misfit = fit.wells.iter().filter(|w| w.systematic_misfit).count();
    let many_misfits = 3 * misfit > fit.wells.len();
    let progress_km = report.parameters.get("Km").cloned();
    let initial_km = initial.and_then(|f| f.parameters.get("Km")).cloned();
    // Agreement: the two 95% intervals of Km overlap.
    let agree = match (&progress_km, &initial_km) {
        (Some(p), Some(i)) => match (p.ci95, i.ci95) {
            (Some([plo, phi]), Some([ilo, ihi])) => plo <= ihi && ilo <= phi,
            _ => false,
        },
        _ => false,
    };
    let ratios: Vec<f64> = report
        .wells
        .iter()
        .filter_map(|w| w.get("window_over_implied").and_then(Value::as_f64))
        .collect();
    let median_ratio = crate::rates::median(ratios);
    let ratio_text = median_ratio.map_or(String::new(), |r| {
        format!(
            "; window slopes are a median {:.0}% of the fitted initial rates",
            100.0 * r
        )
    });
    let km_text = match (&progress_km, &initial_km) {
        (Some(p), Some(i)) => format!(
            " (Km {} vs {} from initial rates)",
            crate::run::significant(p.value),
            crate::run::significant(i.value)
        ),
        _ => String::new(),
    };
    // Window slope over implied initial rate in the wells at or below the median S0.
    let s0_of = |w: &Value| w.get("S0").and_then(Value::as_f64);
    let median_s0 = crate::rates::median(report.wells.iter().filter_map(s0_of));
    let low_substrate_shortfall = median_s0.and_then(|m| {
        crate::rates::median(
            report
                .wells
                .iter()
                .filter(|w| s0_of(w).is_some_and(|s| s <= m))
                .filter_map(|w| w.get("window_over_implied").and_then(Value::as_f64)),
        )
    });
    let (trust, reason) = if many_misfits {
        (
            "neither",
            format!(
                "neither without checking: the {} model misfits {misfit} of {} wells systematically, and {}",
                fit.model.name(),
                fit.wells.len(),
                if suspect {
                    "the initial rates are suspect"
                } else {
                    "the initial rates may be the safer summary"
                }
            ),
        )
    } else if suspect {
        (
            "progress-curve",
            format!(
                "the progress-curve fit: the initial rates are suspect ({}) and the whole curves fit without systematic misfit{ratio_text}{km_text}",
                report.reason.trim_start_matches("initial rates suspect: ")
            ),
        )
    // A window's chord slope runs low by about half the fraction it converts when S0 << Km (the
    // rate falls nearly in proportion to S), so windows near the 10% limit give about 95% of the
    // initial rate; a median below 99% in the lower-S0 wells is that signature, not noise.
    } else if !agree && low_substrate_shortfall.is_some_and(|r| r < 0.99) {
        (
            "progress-curve",
            format!(
                "the progress-curve fit: the analyses disagree{km_text}, and the window slopes of the lower-S0 wells fall short of the fitted initial rates (median {:.0}%), the signature of depletion within the windows",
                100.0 * low_substrate_shortfall.unwrap_or(f64::NAN)
            ),
        )
    } else if agree {
        (
            "either",
            format!("either: the initial rates are clean and both analyses agree{km_text}; the progress-curve fit uses every read and gives the narrower interval"),
        )
    } else {
        (
            "neither",
            format!(
                "neither without checking: the initial rates look clean but the two analyses disagree{km_text}; check the rate law, the dead time and the substrate concentrations"
            ),
        )
    };
    report.trust = trust.to_string();
    report.trust_reason = reason;
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::progress::global_fit::synthetic::{simulate_group, SyntheticGroup};
    use crate::progress::ode::CurveConstants;

    fn group(inverse_kp: f64, k_inact: f64, seed: u64) -> Vec<WellCurve> {
        simulate_group(&SyntheticGroup {
            constants: CurveConstants {
                kcat: 10.0,
                km: 50.0,
                inverse_kp,
                k_inact,
            },
            s0_um: vec![5.0, 10.0, 20.0, 40.0, 80.0, 160.0, 320.0],
            e0_um: 0.01,
            times_s: (0..60).map(|i| 30.0 * f64::from(i)).collect(),
            dead_time_s: 0.0,
            signal_per_substrate: -0.0055,
            noise_sd: 0.002,
            seed,
        })
        .unwrap()
    }

    fn quick() -> GlobalFitOptions {
        GlobalFitOptions {
            profile_km: false,
            ..GlobalFitOptions::default()
        }
    }

    #[test]
    fn product_inhibition_is_chosen_when_present() {
        // Truth Kp = 20 uM (ODE-simulated), plain Michaelis-Menten otherwise.
        let (chosen, tried) = compare_models(&group(1.0 / 20.0, 0.0, 21), &quick()).unwrap();
        assert_eq!(chosen.model, ProgressModel::ProductInhibition, "{tried:#?}");
        let q = chosen.parameter("inverse_Kp").unwrap().value;
        assert!((1.0 / q / 20.0 - 1.0).abs() < 0.15, "Kp {}", 1.0 / q);
        assert!(tried[1].verdict.starts_with("chosen (needed"), "{tried:#?}");
        assert!((chosen.parameter("Km").unwrap().value / 50.0 - 1.0).abs() < 0.1);
    }

    #[test]
    fn extended_terms_are_reported_not_needed_when_absent() {
        let (chosen, tried) = compare_models(&group(0.0, 0.0, 22), &quick()).unwrap();
        assert_eq!(chosen.model, ProgressModel::MichaelisMenten, "{tried:#?}");
        assert_eq!(tried.len(), 3);
        assert!(tried[0].verdict.starts_with("chosen"));
        for entry in &tried[1..] {
            assert!(entry.verdict.starts_with("not needed"), "{entry:?}");
            assert!(entry.delta_aicc.is_some());
        }
    }

    #[test]
    fn inactivation_is_chosen_when_present() {
        // Truth k_inact = 1e-3 /s: 83% of the activity lost by the last read at 1770 s.
        let (chosen, tried) = compare_models(&group(0.0, 1e-3, 23), &quick()).unwrap();
        assert_eq!(chosen.model, ProgressModel::Inactivation, "{tried:#?}");
        let k = chosen.parameter("k_inact").unwrap().value;
        assert!((k / 1e-3 - 1.0).abs() < 0.15, "k_inact {k}");
    }
}
