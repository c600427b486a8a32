//! kcat and kcat/Km in the time unit a lab reports (`--kcat-unit 1/s|1/min`), and rates in the
//! unit a lab reports (`--rate-unit uM/min`). Every fit computes in seconds and in the signal's
//! concentration unit; the pipeline expresses the constants once, at the end, so value, SE, every
//! interval and the unit written beside them change together and nothing downstream converts
//! again. Rates that are not constants (each well's, each condition's, residual SDs) stay in the
//! internal unit in the results and are multiplied by [`RateExpression`] where they are written.

use std::collections::BTreeMap;

use super::ParameterReport;
use crate::config::KcatUnit;
use crate::core::units::{ConcentrationUnit, RateUnit};
use crate::fit::inference::{dimension_of, Dimension};

/// Why rates cannot be given in the unit asked for.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RateUnitError {
    /// A concentration per time was asked for, but the signal is not converted to a concentration.
    #[error(
        "--rate-unit {asked} needs rates in a concentration, but this plate's rates are in {internal}: \
         give a standard curve (layout role standard) or, for absorbance, --extinction and --pathlength, \
         or leave --rate-unit out"
    )]
    NotConverted {
        /// The unit asked for.
        asked: RateUnit,
        /// The unit the rates are in (`AU/s`, `RFU/s`).
        internal: String,
    },
}

/// How rates are written: the unit's text and the factor from the internal unit (the signal's
/// concentration per second, or its raw unit per second), made once per run.
#[derive(Debug, Clone, PartialEq)]
pub struct RateExpression {
    /// `value_written = value_internal * factor`.
    pub factor: f64,
    /// The unit written beside every rate (`uM/min`, `uM/s`, `AU/s`).
    pub unit: String,
    /// Whether the unit was asked for (`--rate-unit`): the report then keeps it rather than
    /// choosing a display unit of its own.
    pub chosen: bool,
}

impl RateExpression {
    /// Rates written as computed, in `unit`.
    pub fn unchanged(unit: String) -> RateExpression {
        RateExpression {
            factor: 1.0,
            unit,
            chosen: false,
        }
    }

    /// The expression for rates computed in `internal_concentration` per second (`None`: the raw
    /// signal per second, written `internal_text`), when `asked` is the unit wanted.
    pub fn new(
        internal_concentration: Option<ConcentrationUnit>,
        internal_text: String,
        asked: Option<RateUnit>,
    ) -> Result<RateExpression, RateUnitError> {
        match (asked, internal_concentration) {
            (None, _) => Ok(RateExpression::unchanged(internal_text)),
            (Some(asked), Some(from)) => Ok(RateExpression {
                factor: asked.factor_from_per_second(from),
                unit: asked.to_string(),
                chosen: true,
            }),
            (Some(asked), None) => Err(RateUnitError::NotConverted {
                asked,
                internal: internal_text,
            }),
        }
    }

    /// A rate in the written unit.
    pub fn rate(&self, internal: f64) -> f64 {
        internal * self.factor
    }

    /// An optional rate in the written unit.
    pub fn optional(&self, internal: Option<f64>) -> Option<f64> {
        internal.map(|value| value * self.factor)
    }
}

/// Brings kcat and kcat/Km fitted from rates per `rate_time_s` seconds (a table in `uM/min`) to
/// per second; a no-op for rates per second.
pub fn turnover_per_second(parameters: &mut BTreeMap<String, ParameterReport>, rate_time_s: f64) {
    if rate_time_s == 1.0 {
        return;
    }
    for name in ["kcat", "kcat_over_Km"] {
        if let Some(parameter) = parameters.get_mut(name) {
            scale(parameter, 1.0 / rate_time_s);
        }
    }
}

/// Expresses a group fit's reported rates in `expression`'s unit: its rate constants, its residual
/// SD when that is a rate (an unweighted fit's; a weighted fit's residuals are divided by each
/// point's SD or rate, so they have no unit) and the linearised diagnostics. The models-tried
/// table keeps the fit's own sums of squares for the same reason.
pub fn express_group_rates(fit: &mut super::GroupFit, expression: &RateExpression) {
    express_rates_in(&mut fit.parameters, expression);
    if fit.weighting == crate::config::Weighting::None {
        fit.residual_sd = expression.optional(fit.residual_sd);
    }
    fit.linearised = fit
        .linearised
        .map(|linearised| linearised.with_rates_scaled(expression.factor));
}

/// Expresses every rate-valued constant (`Vmax`, `v0`, the plateaus of a rate against inhibitor)
/// in `expression`'s unit: value, SE and intervals together.
pub fn express_rates_in(parameters: &mut BTreeMap<String, ParameterReport>, expression: &RateExpression) {
    for (name, parameter) in parameters.iter_mut() {
        if dimension_of(name) == Dimension::Rate {
            scale(parameter, expression.factor);
            parameter.unit = expression.unit.clone();
        }
    }
}

/// Rescales `kcat` (1/s) and `kcat_over_Km` (1/(M*s)) into `unit`; a no-op for 1/s.
pub fn express_kcat_in(parameters: &mut BTreeMap<String, ParameterReport>, unit: KcatUnit) {
    if unit == KcatUnit::PerSecond {
        return;
    }
    let factor = unit.per_second_factor();
    for (name, unit_text) in [
        ("kcat", unit.word().to_string()),
        ("kcat_over_Km", format!("1/(M*{})", unit.time_symbol())),
    ] {
        if let Some(parameter) = parameters.get_mut(name) {
            scale(parameter, factor);
            parameter.unit = unit_text;
        }
    }
}

/// Multiplies a parameter's value, SE and every interval by `factor` (> 0).
pub fn scale(parameter: &mut ParameterReport, factor: f64) {
    parameter.value *= factor;
    parameter.se = parameter.se.map(|se| se * factor);
    parameter.ci95 = parameter.ci95.map(|[lo, hi]| [lo * factor, hi * factor]);
    parameter.ci95_bootstrap = parameter
        .ci95_bootstrap
        .map(|[lo, hi]| [lo * factor, hi * factor]);
    parameter.ci95_profile = parameter
        .ci95_profile
        .map(|[lo, hi]| [lo.map(|x| x * factor), hi.map(|x| x * factor)]);
    parameter.asymptotic = parameter.asymptotic.map(|(se, ci)| {
        (
            se.map(|se| se * factor),
            ci.map(|[lo, hi]| [lo * factor, hi * factor]),
        )
    });
}

#[cfg(test)]
mod tests {
    use super::*;

    fn report(value: f64, unit: &str) -> ParameterReport {
        ParameterReport {
            value,
            se: Some(0.1 * value),
            ci95: Some([0.8 * value, 1.2 * value]),
            unit: unit.into(),
            determined: true,
            ci95_profile: Some([Some(0.85 * value), None]),
            ci95_bootstrap: None,
            asymptotic: None,
        }
    }

    /// 1/s -> 1/min multiplies by 60 (1 min = 60 s, SI); dividing back gives the values again.
    #[test]
    fn per_minute_multiplies_by_sixty_and_round_trips() {
        let mut parameters = BTreeMap::new();
        parameters.insert("kcat".to_string(), report(12.5, "1/s"));
        parameters.insert("kcat_over_Km".to_string(), report(1.5e5, "1/(M*s)"));
        parameters.insert("Km".to_string(), report(80.0, "uM"));
        let original = parameters.clone();
        express_kcat_in(&mut parameters, KcatUnit::PerMinute);
        assert_eq!(parameters["kcat"].value, 750.0);
        assert_eq!(parameters["kcat"].unit, "1/min");
        assert_eq!(parameters["kcat_over_Km"].unit, "1/(M*min)");
        assert_eq!(
            parameters["kcat"].ci95_profile,
            Some([Some(0.85 * 12.5 * 60.0), None])
        );
        assert_eq!(parameters["Km"], original["Km"]);
        for name in ["kcat", "kcat_over_Km"] {
            let mut back = parameters[name].clone();
            scale(&mut back, 1.0 / 60.0);
            let before = &original[name];
            assert!((back.value / before.value - 1.0).abs() < 1e-15);
            assert!((back.se.unwrap() / before.se.unwrap() - 1.0).abs() < 1e-15);
        }
        let mut untouched = original.clone();
        express_kcat_in(&mut untouched, KcatUnit::PerSecond);
        assert_eq!(untouched, original);
    }

    /// uM/s -> nM/min multiplies by 1000 x 60 (SI prefixes; 1 min = 60 s): Vmax changes with its
    /// SE, intervals and unit; Km and kcat do not.
    #[test]
    fn rates_are_expressed_with_their_uncertainty_and_nothing_else() {
        let mut parameters = BTreeMap::new();
        parameters.insert("Vmax".to_string(), report(0.05, "uM/s"));
        parameters.insert("Km".to_string(), report(80.0, "uM"));
        parameters.insert("kcat".to_string(), report(12.5, "1/s"));
        let original = parameters.clone();
        let expression = RateExpression::new(
            Some(ConcentrationUnit::Micromolar),
            "uM/s".into(),
            Some("nM/min".parse().unwrap()),
        )
        .unwrap();
        assert!((expression.factor - 60_000.0).abs() < 1e-9);
        express_rates_in(&mut parameters, &expression);
        let vmax = &parameters["Vmax"];
        assert_eq!(vmax.unit, "nM/min");
        assert!((vmax.value - 3000.0).abs() < 1e-9);
        assert!((vmax.se.unwrap() - 300.0).abs() < 1e-9);
        assert!((vmax.ci95.unwrap()[1] - 3600.0).abs() < 1e-9);
        assert_eq!(parameters["Km"], original["Km"]);
        assert_eq!(parameters["kcat"], original["kcat"]);
    }

    /// Without a conversion to concentration a concentration per time is refused, naming both units.
    #[test]
    fn a_rate_unit_needs_converted_rates() {
        let error = RateExpression::new(None, "RFU/s".into(), Some("uM/min".parse().unwrap())).unwrap_err();
        let message = error.to_string();
        assert!(
            message.contains("uM/min") && message.contains("RFU/s"),
            "{message}"
        );
        let unchanged = RateExpression::new(None, "RFU/s".into(), None).unwrap();
        assert_eq!(unchanged, RateExpression::unchanged("RFU/s".into()));
    }
}
