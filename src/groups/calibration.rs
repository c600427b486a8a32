//! The standard curve's slope in the group fits' uncertainty. Every rate of a group is converted
//! by one slope b (`rate = signal rate / b`), so an error in b scales Vmax, kcat and kcat/Km as a
//! whole (Km, a concentration of substrate, does not move). That error is shared by all the
//! group's wells, so it cannot enter the single rates (the fit would count it once per well); it
//! is combined with the fit's own uncertainty afterwards.
//!
//! Formula (delta method, independent errors: the standards' scatter is not the kinetic wells'):
//! for a parameter p proportional to 1/b, `(SE_p / p)^2 = (SE_fit / p)^2 + (SE_b / b)^2`; each
//! side of an interval is widened in quadrature, `h' = sqrt(h^2 + (t_b p SE_b / b)^2)`, with t_b
//! the 97.5% quantile of Student's t on the curve's n - 2 degrees of freedom.
//!
//! References: the law of propagation of uncertainty (JCGM 100:2008, Guide to the expression of
//! uncertainty in measurement, section 5.1); Draper and Smith 1998 for SE(b).

use std::collections::BTreeMap;

use super::{GroupKey, ParameterReport};
use crate::core::stats::t_quantile_975;
use crate::signal::calibration::{Calibration, StandardCurve};

/// The parameters that scale with 1/slope.
pub const SCALED_BY_SLOPE: [&str; 4] = ["Vmax", "kcat", "kcat_over_Km", "specific_activity"];

/// The curve that converted a group's rates: the one whose factor values the group's key holds
/// (the only one for a plate with one curve).
pub fn curve_for_group<'a>(calibration: &'a Calibration, group: &GroupKey) -> Option<&'a StandardCurve> {
    if let [only] = calibration.curves.as_slice() {
        return Some(only);
    }
    calibration.curves.iter().find(|curve| {
        curve
            .group
            .iter()
            .all(|(name, value)| group.text(name).unwrap_or("") == value.as_str())
    })
}

/// Widens the slope-scaled parameters of one fit by the curve's slope uncertainty; returns the
/// sentence that says so, or `None` when none of them is reported.
pub fn add_slope_uncertainty(
    parameters: &mut BTreeMap<String, ParameterReport>,
    curve: &StandardCurve,
) -> Option<String> {
    let relative = curve.slope_relative_se();
    let quantile = t_quantile_975(curve.line.degrees_of_freedom).ok()?;
    let mut widened = Vec::new();
    for name in SCALED_BY_SLOPE {
        let Some(parameter) = parameters.get_mut(name) else {
            continue;
        };
        let extra_se = parameter.value.abs() * relative;
        let extra_half_width = quantile * extra_se;
        let widen = |end: f64, centre: f64| {
            let half = end - centre;
            centre + half.signum() * (half * half + extra_half_width * extra_half_width).sqrt()
        };
        let value = parameter.value;
        parameter.se = parameter.se.map(|se| (se * se + extra_se * extra_se).sqrt());
        parameter.ci95 = parameter
            .ci95
            .map(|[lo, hi]| [widen(lo, value), widen(hi, value)]);
        parameter.ci95_bootstrap = parameter
            .ci95_bootstrap
            .map(|[lo, hi]| [widen(lo, value), widen(hi, value)]);
        parameter.ci95_profile = parameter
            .ci95_profile
            .map(|[lo, hi]| [lo.map(|lo| widen(lo, value)), hi.map(|hi| widen(hi, value))]);
        widened.push(name.replace("_over_", "/"));
    }
    (!widened.is_empty()).then(|| {
        format!(
            "the standard errors and intervals of {} include the standard curve's slope uncertainty (SE(b)/b = {:.2}%, {} degrees of freedom), combined in quadrature",
            widened.join(", "),
            100.0 * relative,
            curve.line.degrees_of_freedom
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::signal::calibration::{CurvatureTest, LineEstimate};
    use approx::assert_relative_eq;

    #[test]
    fn a_kcat_interval_widens_by_the_slope_term_in_quadrature() {
        let curve = StandardCurve {
            group: Vec::new(),
            wells: Vec::new(),
            line: LineEstimate {
                slope: 100.0,
                intercept: 0.0,
                slope_se: 2.0,
                intercept_se: 1.0,
                r_squared: 0.99,
                residual_sd: 1.0,
                degrees_of_freedom: 10,
            },
            quadratic: None,
            working_concentration: 0.0,
            estimator: "",
            lod: 0.0,
            loq: 0.0,
            range: (0.0, 10.0),
            signal_range: (0.0, 1000.0),
            curvature: CurvatureTest {
                t_all: None,
                bends: false,
                highest_linear: None,
            },
            warnings: Vec::new(),
        };
        let mut parameters = BTreeMap::new();
        parameters.insert(
            "kcat".to_string(),
            ParameterReport {
                value: 10.0,
                se: Some(0.3),
                ci95: Some([9.4, 10.6]),
                unit: "1/s".into(),
                determined: true,
                ci95_profile: None,
                ci95_bootstrap: None,
                asymptotic: None,
            },
        );
        parameters.insert(
            "Km".to_string(),
            ParameterReport {
                value: 50.0,
                se: Some(5.0),
                ci95: Some([40.0, 60.0]),
                unit: "uM".into(),
                determined: true,
                ci95_profile: None,
                ci95_bootstrap: None,
                asymptotic: None,
            },
        );
        let sentence = add_slope_uncertainty(&mut parameters, &curve).unwrap();
        assert!(
            sentence.contains("kcat") && sentence.contains("2.00%"),
            "{sentence}"
        );
        // SE: sqrt(0.3^2 + (10 x 0.02)^2) = sqrt(0.09 + 0.04).
        assert_relative_eq!(
            parameters["kcat"].se.unwrap(),
            0.13_f64.sqrt(),
            max_relative = 1e-12
        );
        // Upper half-width: sqrt(0.6^2 + (t(0.975, 10) x 0.2)^2), t = 2.228138851986522 (the
        // standard table value, e.g. NIST/SEMATECH e-Handbook of Statistical Methods, 1.3.6.7.2).
        let t = 2.228_138_851_986_522;
        let half = (0.36 + (t * 0.2_f64).powi(2)).sqrt();
        assert_relative_eq!(
            parameters["kcat"].ci95.unwrap()[1],
            10.0 + half,
            max_relative = 1e-9
        );
        assert_relative_eq!(
            parameters["kcat"].ci95.unwrap()[0],
            10.0 - half,
            max_relative = 1e-9
        );
        // Km does not scale with the slope.
        assert_eq!(parameters["Km"].se, Some(5.0));
    }
}
