//! kcat and kcat/Km in the time unit a lab reports (`--kcat-unit 1/s|1/min`). Every fit computes
//! in seconds; the pipeline expresses the two constants once, at the end, so value, SE, every
//! interval and the unit written beside them change together and nothing downstream converts
//! again.

use std::collections::BTreeMap;

use super::ParameterReport;
use crate::config::KcatUnit;

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
fn scale(parameter: &mut ParameterReport, factor: f64) {
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
}
