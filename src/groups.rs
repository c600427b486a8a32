//! Michaelis-Menten fits per group: sample wells grouped by the layout's free factors, enzyme and
//! inhibitor concentration, fitted on every used replicate well (not the means), with kcat and
//! kcat/Km in SI-style units when the enzyme concentration and an extinction coefficient are known.

use std::collections::BTreeMap;

use serde_json::{json, Map, Value};

use crate::analysis::{PlateAnalysis, WellResult};
use crate::fit::{fit_michaelis_menten, turnover_estimates, MichaelisMentenOptions, ParameterEstimate};
use crate::layout::{Layout, Role};

/// One parameter as `fit.json` writes it.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ParameterReport {
    /// Best estimate.
    pub value: f64,
    /// Asymptotic standard error.
    pub se: Option<f64>,
    /// Asymptotic 95% interval.
    pub ci95: Option<[f64; 2]>,
    /// Unit, e.g. `uM/s`, `1/s`, `1/(M*s)`.
    pub unit: String,
    /// False when the data cannot pin this parameter down (see the warnings).
    pub determined: bool,
}

impl ParameterReport {
    fn from_estimate(estimate: &ParameterEstimate, unit: &str, scale: f64) -> ParameterReport {
        ParameterReport {
            value: estimate.value * scale,
            se: estimate.standard_error.map(|se| se * scale),
            ci95: estimate.ci95.map(|[lo, hi]| [lo * scale, hi * scale]),
            unit: unit.to_string(),
            determined: estimate.determined,
        }
    }
}

/// One group's fit.
#[derive(Debug, Clone, serde::Serialize)]
pub struct GroupFit {
    /// What the group's wells share: factor values, enzyme and inhibitor concentration.
    pub group: Map<String, Value>,
    /// The model fitted.
    pub model: String,
    /// `Vmax`, `Km`, and where possible `kcat`, `kcat_over_Km`.
    pub parameters: BTreeMap<String, ParameterReport>,
    /// Points fitted.
    pub n: usize,
    /// Residual standard deviation, rate units.
    pub residual_sd: Option<f64>,
    /// Correlation of the Vmax and Km estimates.
    pub correlation_vmax_km: Option<f64>,
    /// Lineweaver-Burk, Eadie-Hofstee and Hanes-Woolf estimates (diagnostics, never the answer).
    pub linearised: Value,
    /// Whether the solver converged.
    pub converged: bool,
    /// Wells fitted.
    pub wells_used: Vec<String>,
    /// Sample wells of the group left out, with the reason.
    pub wells_left_out: Vec<Value>,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
    /// Why no fit could be made, if none was.
    pub error: Option<String>,
}

/// The key that splits sample wells into groups.
fn group_key(well: &WellResult, layout: &Layout) -> Map<String, Value> {
    let mut key = Map::new();
    for name in &layout.factor_names {
        key.insert(
            name.clone(),
            Value::String(well.setup.factors.get(name).cloned().unwrap_or_default()),
        );
    }
    if let (Some(unit), Some(enzyme)) = (layout.enzyme_unit, well.setup.enzyme) {
        key.insert(format!("enzyme [{unit}]"), json!(enzyme));
    }
    if let (Some(unit), Some(inhibitor)) = (layout.inhibitor_unit, well.setup.inhibitor) {
        key.insert(format!("inhibitor [{unit}]"), json!(inhibitor));
    }
    key
}

/// A short label for a group: `variant=FenA-wt, enzyme [nM]=4`.
pub fn group_label(group: &Map<String, Value>) -> String {
    if group.is_empty() {
        return "all samples".to_string();
    }
    group
        .iter()
        .map(|(name, value)| match value {
            Value::String(text) => format!("{name}={text}"),
            other => format!("{name}={other}"),
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// The sample wells split into groups (free factors, enzyme, inhibitor), in first-seen order;
/// the progress-curve analysis uses the same groups.
pub fn sample_groups<'a>(
    analysis: &'a PlateAnalysis,
    layout: &Layout,
) -> Vec<(Map<String, Value>, Vec<&'a WellResult>)> {
    let mut groups: Vec<(Map<String, Value>, Vec<&WellResult>)> = Vec::new();
    for well in analysis.wells.iter().filter(|w| w.setup.role == Role::Sample) {
        let key = group_key(well, layout);
        match groups.iter_mut().find(|(existing, _)| *existing == key) {
            Some((_, wells)) => wells.push(well),
            None => groups.push((key, vec![well])),
        }
    }
    groups
}

/// Fits every group of sample wells.
pub fn fit_groups(analysis: &PlateAnalysis, layout: &Layout) -> Vec<GroupFit> {
    sample_groups(analysis, layout)
        .into_iter()
        .map(|(key, wells)| fit_one_group(key, &wells, analysis, layout))
        .collect()
}

fn fit_one_group(
    group: Map<String, Value>,
    wells: &[&WellResult],
    analysis: &PlateAnalysis,
    layout: &Layout,
) -> GroupFit {
    let rate_unit = analysis.rate_unit.clone();
    let substrate_unit = layout.substrate_unit;
    let mut used = Vec::new();
    let mut left_out = Vec::new();
    for well in wells {
        match (well.used, well.setup.substrate, well.rate_value) {
            (true, Some(substrate), Some(rate)) => used.push((well.well.to_string(), substrate, rate)),
            _ => left_out.push(json!({
                "well": well.well.to_string(),
                "reason": if well.rate_value.is_none() { "no rate".to_string() } else { well.flag_text() },
            })),
        }
    }
    let substrate: Vec<f64> = used.iter().map(|u| u.1).collect();
    let rates: Vec<f64> = used.iter().map(|u| u.2).collect();
    let mut report = GroupFit {
        group,
        model: "michaelis-menten".to_string(),
        parameters: BTreeMap::new(),
        n: used.len(),
        residual_sd: None,
        correlation_vmax_km: None,
        linearised: Value::Null,
        converged: false,
        wells_used: used.iter().map(|u| u.0.clone()).collect(),
        wells_left_out: left_out,
        warnings: Vec::new(),
        error: None,
    };
    if !report.wells_left_out.is_empty() {
        report.warnings.push(format!(
            "{} of {} sample wells left out (flagged or without a rate); see wells_left_out",
            report.wells_left_out.len(),
            wells.len()
        ));
    }
    let fit = match fit_michaelis_menten(&substrate, &rates, &MichaelisMentenOptions::default()) {
        Ok(fit) => fit,
        Err(error) => {
            report.error = Some(format!("no Michaelis-Menten fit: {error}"));
            return report;
        }
    };
    let km_unit = substrate_unit.map_or_else(|| "substrate units".to_string(), |u| u.to_string());
    report.parameters.insert(
        "Vmax".into(),
        ParameterReport::from_estimate(&fit.vmax, &rate_unit, 1.0),
    );
    report.parameters.insert(
        "Km".into(),
        ParameterReport::from_estimate(&fit.km, &km_unit, 1.0),
    );
    report.residual_sd = fit.residual_sd;
    report.correlation_vmax_km = fit.correlation_vmax_km;
    report.converged = fit.converged;
    report.linearised = serde_json::to_value(fit.linearised).unwrap_or(Value::Null);
    report.warnings.extend(fit.warnings.iter().cloned());

    // kcat needs rates in concentration units and the enzyme concentration.
    let enzyme = wells.first().and_then(|w| w.setup.enzyme);
    match (
        analysis.concentration_unit,
        substrate_unit,
        layout.enzyme_unit,
        enzyme,
    ) {
        (Some(rate_unit_conc), Some(s_unit), Some(e_unit), Some(e))
            if e > 0.0 && rate_unit_conc == s_unit =>
        {
            let enzyme_in_substrate_unit = e * e_unit.factor_to(s_unit);
            match turnover_estimates(&fit, enzyme_in_substrate_unit, 0.0) {
                Ok(turnover) => {
                    report.parameters.insert(
                        "kcat".into(),
                        ParameterReport::from_estimate(&turnover.kcat, "1/s", 1.0),
                    );
                    if let Some(specificity) = &turnover.kcat_over_km {
                        // (1/(unit*s)) -> (1/(M*s)).
                        let scale = 1.0 / s_unit.in_molar();
                        report.parameters.insert(
                            "kcat_over_Km".into(),
                            ParameterReport::from_estimate(specificity, "1/(M*s)", scale),
                        );
                    }
                }
                Err(error) => report.warnings.push(format!("no kcat: {error}")),
            }
        }
        (None, ..) => report
            .warnings
            .push("no kcat: rates are in absorbance units (give --extinction and --pathlength)".to_string()),
        (_, _, _, None) | (_, _, None, _) => report
            .warnings
            .push("no kcat: the layout gives no enzyme concentration".to_string()),
        _ => report
            .warnings
            .push("no kcat: the enzyme concentration is zero".to_string()),
    }
    report
}
