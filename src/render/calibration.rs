//! `calibration.json`: each standard curve of a run (its group, points with residuals, slope,
//! intercept, their SEs, R^2, residual SD, limits of detection and quantitation, range, the
//! curvature test, warnings), written only when the layout has standards.

use serde_json::{json, Value};

use super::json::tool_line;
use crate::core::format::CAUTION;
use crate::signal::calibration::{Calibration, StandardCurve, CURVATURE_ALPHA, LOD_FACTOR, LOQ_FACTOR};

/// One curve as JSON.
fn curve_json(curve: &StandardCurve, unit: &str, signal_unit: &str) -> Value {
    let points: Vec<Value> = curve
        .wells
        .iter()
        .map(|well| {
            json!({
                "well": well.well.to_string(),
                "concentration": well.concentration,
                "signal": well.signal,
                "n_reads": well.n_reads,
                "residual": well.residual,
                "used": well.used,
                "drift": well.drift,
                "drifting": well.drifting,
            })
        })
        .collect();
    let group: serde_json::Map<String, Value> = curve
        .group
        .iter()
        .map(|(name, value)| (name.clone(), json!(value)))
        .collect();
    json!({
        "group": group,
        "points": points,
        "model": if curve.quadratic.is_some() { "second-order" } else { "line" },
        "quadratic": curve.quadratic.map(|term| json!({
            "coefficient": term.coefficient,
            "se": term.se,
            "slope_covariance": term.slope_covariance,
        })),
        "working_concentration": curve.working_concentration,
        "slope_at_working_concentration": curve.local_slope(curve.working_concentration),
        "slope": curve.line.slope,
        "slope_se": curve.line.slope_se,
        "slope_relative_se": curve.slope_relative_se(),
        "intercept": curve.line.intercept,
        "intercept_se": curve.line.intercept_se,
        "r2": curve.line.r_squared,
        "residual_sd": curve.line.residual_sd,
        "degrees_of_freedom": curve.line.degrees_of_freedom,
        "lod": curve.lod,
        "loq": curve.loq,
        "range": [curve.range.0, curve.range.1],
        "curvature": {
            "quadratic_t": curve.curvature.t_all.map(|(t, _)| t),
            "degrees_of_freedom": curve.curvature.t_all.map(|(_, dof)| dof),
            "level": CURVATURE_ALPHA,
            "bends": curve.curvature.bends,
            "highest_linear": curve.curvature.highest_linear,
        },
        "estimator": curve.estimator,
        "units": {
            "concentration": unit,
            "signal": signal_unit,
            "slope": format!("{signal_unit}/{unit}"),
        },
        "warnings": curve.warnings,
    })
}

/// The document: every curve, how the limits are defined, and the caution.
pub fn calibration_document(calibration: &Calibration, signal_unit: &str) -> Value {
    let unit = calibration.unit.to_string();
    json!({
        "tool": tool_line(),
        "curves": calibration
            .curves
            .iter()
            .map(|curve| curve_json(curve, &unit, signal_unit))
            .collect::<Vec<_>>(),
        "definitions": {
            "signal": "each standard well's mean blank-corrected signal over its readable reads",
            "lod": format!("{LOD_FACTOR} x residual SD / slope (ICH Q2(R1))"),
            "loq": format!("{LOQ_FACTOR} x residual SD / slope (ICH Q2(R1))"),
            "conversion": "a line: concentration = (signal - intercept) / slope; a second-order curve (model second-order, signal = intercept + slope c + quadratic c^2): each read's concentration is the curve's root nearest the line's within the range fitted, and the tangent at the nearer end beyond it; slope is then the slope at zero concentration",
            "working_concentration": "the median concentration of the sample wells' reads through the curve, where the slope that scales their rates is taken (0 for a line, whose slope is the same everywhere)",
            "uncertainty": "the relative SE of the slope at the working concentration (slope_relative_se; the delta method over slope and quadratic for a second-order curve) is combined in quadrature into the SEs and intervals of Vmax, kcat and kcat/Km of every group it converts (fit.json, progress.json)",
        },
        "caution": CAUTION,
    })
}
