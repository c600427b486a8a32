//! Standard curves: wells of known concentration of the species read (layout role `standard`,
//! column `standard [<unit>]`) turned into the line that converts a signal into a concentration.
//!
//! Each standard well's signal is its mean over the readable reads after the blank at each read is
//! subtracted (standards do not react); a standard whose signal drifts over the reads is flagged.
//! The curve `signal = a + b c` is fitted by weighted least squares ([`WeightedStraightLine`],
//! behind the small [`CalibrationEstimator`] trait), with a curvature test (a quadratic term) that,
//! when the top of the range bends, fits the line only up to the highest concentration still
//! linear. A read then becomes `c = (signal - a) / b`, and a rate in signal per second becomes
//! `rate / b`. The slope's relative standard error is shared by every rate converted through the
//! curve, so it scales kcat and kcat/Km as a whole: the group fits add it to their uncertainty
//! (`groups::calibration`), never to the single rates (it would be counted once per well).
//!
//! Which curve serves a well comes from the layout (`layout::StandardGroups`): the free factors
//! the standards give values to key the curves; a plate whose standards give none has one curve.

use std::collections::BTreeMap;

use crate::config::StandardCurveModel;
use crate::core::plate::WellId;
use crate::core::stats::t_critical;
use crate::core::units::ConcentrationUnit;

/// The level of the curvature test (two-sided t test of the quadratic term).
pub const CURVATURE_ALPHA: f64 = 0.05;

/// The level of the drift test of a standard's reads (two-sided t test of the slope in time).
pub const DRIFT_ALPHA: f64 = 0.01;

/// A significant drift is flagged when the signal's change over the reads exceeds this fraction of
/// the curve's signal span (common practice: a standard that moves by a few percent of the range
/// during the run is not a steady reference).
pub const DRIFT_FRACTION_OF_SPAN: f64 = 0.02;

/// The limit of detection as a multiple of residual SD / slope (ICH Q2(R1), Validation of
/// analytical procedures: text and methodology, 2005, section on detection limit).
pub const LOD_FACTOR: f64 = 3.3;

/// The limit of quantitation as a multiple of residual SD / slope (ICH Q2(R1), as above).
pub const LOQ_FACTOR: f64 = 10.0;

/// One point of a standard curve as the estimator sees it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CalibrationPoint {
    /// Known concentration.
    pub concentration: f64,
    /// Mean blank-corrected signal.
    pub signal: f64,
    /// Weight in the least squares (relative; only ratios matter).
    pub weight: f64,
}

/// A fitted straight line with its statistics.
#[derive(Debug, Clone, PartialEq)]
pub struct LineEstimate {
    /// Signal per unit concentration, b.
    pub slope: f64,
    /// Signal at zero concentration, a.
    pub intercept: f64,
    /// Standard error of b.
    pub slope_se: f64,
    /// Standard error of a.
    pub intercept_se: f64,
    /// Weighted coefficient of determination.
    pub r_squared: f64,
    /// Residual SD, s = sqrt(sum w r^2 / (n - 2)), with the weights scaled to mean 1.
    pub residual_sd: f64,
    /// n - 2.
    pub degrees_of_freedom: usize,
}

impl LineEstimate {
    /// The concentration a blank-corrected signal stands for: (signal - a) / b.
    pub fn concentration(&self, signal: f64) -> f64 {
        (signal - self.intercept) / self.slope
    }
}

/// How a standard curve is fitted: a small trait, so that another estimator (a weighted scheme,
/// a robust line) can stand in without touching the conversion.
pub trait CalibrationEstimator {
    /// The estimator and its weights in words, for the outputs.
    fn describe(&self) -> &'static str;
    /// The line through the points; `None` without two distinct concentrations and three points,
    /// or when the result is not finite.
    fn fit(&self, points: &[CalibrationPoint]) -> Option<LineEstimate>;
}

/// Weighted least squares of signal on concentration.
///
/// Formula: with weights w_i scaled to mean 1, W = sum w, xbar = sum w x / W, ybar = sum w y / W,
/// Sxx = sum w (x - xbar)^2, Sxy = sum w (x - xbar)(y - ybar): b = Sxy / Sxx, a = ybar - b xbar,
/// s^2 = sum w (y - a - b x)^2 / (n - 2), SE(b) = s / sqrt(Sxx), SE(a) = s sqrt(1/W + xbar^2/Sxx),
/// R^2 = 1 - sum w r^2 / sum w (y - ybar)^2.
///
/// Assumptions: the concentrations are known without error (their pipetting error is small beside
/// the signal's); the errors are independent with variance sigma^2 / w_i; the response is linear
/// over the points fitted (checked by [`quadratic_term_t`]). The weights platekin gives are equal
/// (ordinary least squares): each standard's signal is a mean over many reads, so what scatters
/// between replicate standards is mostly pipetting, and with duplicates a per-level variance is
/// too poorly known to weight by.
///
/// References: Draper and Smith, Applied Regression Analysis, 3rd ed. 1998, chapters 1 and 9
/// (weighted least squares); ICH Q2(R1) for the limits of detection and quantitation.
#[derive(Debug, Clone, Copy, Default)]
pub struct WeightedStraightLine;

impl CalibrationEstimator for WeightedStraightLine {
    fn describe(&self) -> &'static str {
        "weighted least squares of signal on concentration, equal weights (ordinary least squares)"
    }

    fn fit(&self, points: &[CalibrationPoint]) -> Option<LineEstimate> {
        let n = points.len();
        if n < 3 {
            return None;
        }
        let mean_weight = points.iter().map(|p| p.weight).sum::<f64>() / n as f64;
        if !(mean_weight.is_finite() && mean_weight > 0.0) {
            return None;
        }
        let w = |p: &CalibrationPoint| p.weight / mean_weight;
        let total: f64 = points.iter().map(w).sum();
        let x_bar = points.iter().map(|p| w(p) * p.concentration).sum::<f64>() / total;
        let y_bar = points.iter().map(|p| w(p) * p.signal).sum::<f64>() / total;
        let sxx: f64 = points
            .iter()
            .map(|p| w(p) * (p.concentration - x_bar).powi(2))
            .sum();
        let sxy: f64 = points
            .iter()
            .map(|p| w(p) * (p.concentration - x_bar) * (p.signal - y_bar))
            .sum();
        let syy: f64 = points.iter().map(|p| w(p) * (p.signal - y_bar).powi(2)).sum();
        let largest = points.iter().fold(0.0_f64, |m, p| m.max(p.concentration.abs()));
        if sxx.is_nan() || sxx <= (f64::EPSILON * largest).powi(2) * n as f64 {
            return None;
        }
        let slope = sxy / sxx;
        let intercept = y_bar - slope * x_bar;
        let rss: f64 = points
            .iter()
            .map(|p| w(p) * (p.signal - intercept - slope * p.concentration).powi(2))
            .sum();
        let dof = n - 2;
        let variance = rss / dof as f64;
        let residual_sd = variance.sqrt();
        let estimate = LineEstimate {
            slope,
            intercept,
            slope_se: (variance / sxx).sqrt(),
            intercept_se: (variance * (1.0 / total + x_bar * x_bar / sxx)).sqrt(),
            r_squared: if syy > 0.0 { 1.0 - rss / syy } else { 1.0 },
            residual_sd,
            degrees_of_freedom: dof,
        };
        [
            slope,
            intercept,
            estimate.slope_se,
            estimate.intercept_se,
            residual_sd,
        ]
        .iter()
        .all(|v| v.is_finite())
        .then_some(estimate)
    }
}

/// A second-order fit `signal = a + b x + c x^2` (weighted as the line): the coefficients in the
/// points' own units, their covariance, the residual variance and its degrees of freedom.
#[derive(Debug, Clone, PartialEq)]
pub struct QuadraticFit {
    /// a, b, c.
    pub coefficients: [f64; 3],
    /// Covariance of (a, b, c): s^2 (X' W X)^-1.
    pub covariance: [[f64; 3]; 3],
    /// s^2 = sum w r^2 / (n - 3), with the weights scaled to mean 1.
    pub residual_variance: f64,
    /// n - 3.
    pub degrees_of_freedom: usize,
    /// sum w r^2 and sum w (y - ybar)^2, for R^2.
    sums_of_squares: (f64, f64),
}

/// Weighted least squares of `signal = a + b x + c x^2`; `None` with fewer than three distinct
/// concentrations or four points, or a singular system. Solved by the normal equations on x scaled
/// to the largest concentration (so the 3 x 3 system is well conditioned), then scaled back:
/// b = b' / s, c = c' / s^2, and the covariance alike.
///
/// References: Draper and Smith, Applied Regression Analysis, 3rd ed. 1998, chapter 12
/// (polynomial models); ISO 8466-2:2001 (second-order calibration functions).
pub fn quadratic_fit(points: &[CalibrationPoint]) -> Option<QuadraticFit> {
    let n = points.len();
    if n < 4 || distinct_levels(points) < 3 {
        return None;
    }
    let scale = points.iter().fold(0.0_f64, |m, p| m.max(p.concentration.abs()));
    let mean_weight = points.iter().map(|p| p.weight).sum::<f64>() / n as f64;
    if scale <= 0.0 || !(mean_weight.is_finite() && mean_weight > 0.0) {
        return None;
    }
    let weight = |p: &CalibrationPoint| p.weight / mean_weight;
    let design = nalgebra::DMatrix::from_fn(n, 3, |row, column| {
        (points[row].concentration / scale).powi(column as i32) * weight(&points[row]).sqrt()
    });
    let response = nalgebra::DVector::from_iterator(n, points.iter().map(|p| p.signal * weight(p).sqrt()));
    let inverse = (design.transpose() * &design).try_inverse()?;
    let beta = &inverse * design.transpose() * &response;
    let residuals = &response - &design * &beta;
    let dof = n - 3;
    let rss = residuals.dot(&residuals);
    let variance = rss / dof as f64;
    let total: f64 = points.iter().map(weight).sum();
    let y_bar = points.iter().map(|p| weight(p) * p.signal).sum::<f64>() / total;
    let syy: f64 = points
        .iter()
        .map(|p| weight(p) * (p.signal - y_bar).powi(2))
        .sum();
    let unscale = [1.0, 1.0 / scale, 1.0 / (scale * scale)];
    let coefficients = [0, 1, 2].map(|i| beta[i] * unscale[i]);
    let covariance =
        [0, 1, 2].map(|i| [0, 1, 2].map(|j| variance * inverse[(i, j)] * unscale[i] * unscale[j]));
    let finite = coefficients
        .iter()
        .chain(covariance.iter().flatten())
        .all(|v| v.is_finite());
    finite.then_some(QuadraticFit {
        coefficients,
        covariance,
        residual_variance: variance,
        degrees_of_freedom: dof,
        sums_of_squares: (rss, syy),
    })
}

/// The t statistic of the quadratic term c in `signal = a + b x + c x^2` (weighted as the line)
/// and its degrees of freedom n - 3; `None` where [`quadratic_fit`] gives no fit.
pub fn quadratic_term_t(points: &[CalibrationPoint]) -> Option<(f64, usize)> {
    let fit = quadratic_fit(points)?;
    let se = fit.covariance[2][2].sqrt();
    let t = if se > 0.0 { fit.coefficients[2] / se } else { 0.0 };
    t.is_finite().then_some((t, fit.degrees_of_freedom))
}

/// The number of distinct concentrations among the points.
fn distinct_levels(points: &[CalibrationPoint]) -> usize {
    let mut levels: Vec<f64> = points.iter().map(|p| p.concentration).collect();
    levels.sort_by(f64::total_cmp);
    levels.dedup();
    levels.len()
}

/// The second-order estimator in words, for the outputs.
pub const SECOND_ORDER_ESTIMATOR: &str =
    "weighted least squares of signal on concentration and its square (second order, ISO 8466-2), equal weights";

/// A standard well as read.
#[derive(Debug, Clone, PartialEq)]
pub struct StandardWell {
    /// The well.
    pub well: WellId,
    /// Its known concentration, in the curve's unit.
    pub concentration: f64,
    /// Mean blank-corrected signal over the readable reads.
    pub signal: f64,
    /// Readable reads averaged.
    pub n_reads: usize,
    /// The signal's change over the reads (straight line in time), raw signal units.
    pub drift: f64,
    /// The drift is significant and larger than [`DRIFT_FRACTION_OF_SPAN`] of the curve's span.
    pub drifting: bool,
    /// Fitted: within the linear range (false: above the highest concentration still linear).
    pub used: bool,
    /// Signal minus the line at its concentration.
    pub residual: f64,
}

/// The curvature test's verdict.
#[derive(Debug, Clone, PartialEq)]
pub struct CurvatureTest {
    /// t of the quadratic term over all the standards, with its degrees of freedom (`None`: too
    /// few levels for the test).
    pub t_all: Option<(f64, usize)>,
    /// The top of the range bends (the quadratic term is significant at [`CURVATURE_ALPHA`]).
    pub bends: bool,
    /// The highest concentration up to which no curvature is found (when the top bends).
    pub highest_linear: Option<f64>,
}

/// The second-order term of a standard curve and what its uncertainty shares with the slope.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct QuadraticTerm {
    /// q in `signal = a + b c + q c^2`.
    pub coefficient: f64,
    /// SE of q.
    pub se: f64,
    /// Cov(b, q).
    pub slope_covariance: f64,
}

/// One fitted standard curve.
#[derive(Debug, Clone, PartialEq)]
pub struct StandardCurve {
    /// The factor values that key the curve (empty: one curve for the plate).
    pub group: Vec<(String, String)>,
    /// The standard wells, in concentration then well order.
    pub wells: Vec<StandardWell>,
    /// The line: intercept a and slope b (for a second-order curve, its value and slope at zero
    /// concentration, with their SEs from that fit).
    pub line: LineEstimate,
    /// The second-order term when the curve is `a + b c + q c^2` (`None`: a straight line).
    pub quadratic: Option<QuadraticTerm>,
    /// The concentration at which the samples' reads sit (the median of their converted reads),
    /// where the slope that scales their rates is taken; 0 until the plate's wells are converted.
    pub working_concentration: f64,
    /// The estimator in words.
    pub estimator: &'static str,
    /// Limit of detection, concentration unit (3.3 s / b).
    pub lod: f64,
    /// Limit of quantitation, concentration unit (10 s / b).
    pub loq: f64,
    /// Lowest and highest concentration fitted.
    pub range: (f64, f64),
    /// Signal at the ends of the fitted range (by the line).
    pub signal_range: (f64, f64),
    /// The curvature test.
    pub curvature: CurvatureTest,
    /// Remarks for people (drifting standards, a bend, a poor fit).
    pub warnings: Vec<String>,
}

impl StandardCurve {
    /// The group in words: `variant = A, buffer = B`, or `plate`.
    pub fn group_label(&self) -> String {
        if self.group.is_empty() {
            "plate".to_string()
        } else {
            self.group
                .iter()
                .map(|(name, value)| format!("{name} = {value}"))
                .collect::<Vec<_>>()
                .join(", ")
        }
    }

    /// The calibration function in words.
    pub fn model_words(&self) -> &'static str {
        if self.quadratic.is_some() {
            "second order, a + b c + q c^2"
        } else {
            "straight line, a + b c"
        }
    }

    /// The curve's signal at concentration `c`: a + b c (+ q c^2).
    pub fn signal_at(&self, c: f64) -> f64 {
        let q = self.quadratic.map_or(0.0, |term| term.coefficient);
        self.line.intercept + self.line.slope * c + q * c * c
    }

    /// The curve's slope at concentration `c`: b (+ 2 q c).
    pub fn local_slope(&self, c: f64) -> f64 {
        let q = self.quadratic.map_or(0.0, |term| term.coefficient);
        self.line.slope + 2.0 * q * c
    }

    /// The relative standard error of the slope where the samples read (at
    /// [`Self::working_concentration`]): SE(b) / b for a line; for a second-order curve
    /// sqrt(Var b + 4 c^2 Var q + 4 c Cov(b, q)) / (b + 2 q c) (delta method).
    pub fn slope_relative_se(&self) -> f64 {
        let c = self.working_concentration;
        let variance = match self.quadratic {
            None => self.line.slope_se.powi(2),
            Some(term) => {
                self.line.slope_se.powi(2) + 4.0 * c * c * term.se.powi(2) + 4.0 * c * term.slope_covariance
            }
        };
        (variance.max(0.0).sqrt() / self.local_slope(c)).abs()
    }

    /// The concentration a blank-corrected signal stands for. A line: (signal - a) / b. A
    /// second-order curve: the root of a + b c + q c^2 = signal nearest the line's, in the stable
    /// form c = 2 d / (b + sign(b) sqrt(b^2 + 4 q d)) with d = signal - a, within the fitted range;
    /// beyond it, the tangent at the nearer end carries on (the curve is not trusted outside the
    /// standards, and a tangent stays monotone and finite; such wells are warned about).
    pub fn concentration_of(&self, signal: f64) -> f64 {
        let Some(term) = self.quadratic else {
            return self.line.concentration(signal);
        };
        let (low, high) = self.range;
        let (signal_low, signal_high) = (self.signal_at(low), self.signal_at(high));
        let rising = signal_high >= signal_low;
        let beyond = |end: f64, end_signal: f64| end + (signal - end_signal) / self.local_slope(end);
        if (signal < signal_low) == rising && signal != signal_low {
            return beyond(low, signal_low);
        }
        if (signal > signal_high) == rising && signal != signal_high {
            return beyond(high, signal_high);
        }
        let b = self.line.slope;
        let d = signal - self.line.intercept;
        let root = (b * b + 4.0 * term.coefficient * d).max(0.0).sqrt();
        2.0 * d / (b + b.signum() * root)
    }
}

/// The plate's standard curves and which curve serves each well.
#[derive(Debug, Clone, PartialEq)]
pub struct Calibration {
    /// The curves, in the order of their keys.
    pub curves: Vec<StandardCurve>,
    /// The curve of every well the layout assigns one (index into `curves`).
    pub curve_of_well: BTreeMap<WellId, usize>,
    /// The unit of the standards' concentrations.
    pub unit: ConcentrationUnit,
}

/// The readable raw reads of a standard well, blank-corrected, with their times.
pub struct StandardReads<'a> {
    /// The well.
    pub well: WellId,
    /// Known concentration.
    pub concentration: f64,
    /// Read times, s.
    pub times_s: &'a [f64],
    /// Raw signal per read.
    pub raw: &'a crate::import::Readings,
    /// Blank per read.
    pub blank: &'a [f64],
}

/// Fits one curve from its standards; `Err` says why no line could be made.
pub fn fit_standard_curve(
    group: Vec<(String, String)>,
    standards: &[StandardReads],
    unit: ConcentrationUnit,
    estimator: &dyn CalibrationEstimator,
    model: StandardCurveModel,
) -> Result<StandardCurve, String> {
    let mut wells = Vec::new();
    let mut drifts = Vec::new();
    let mut unreadable = Vec::new();
    for standard in standards {
        let (times, signals): (Vec<f64>, Vec<f64>) = standard
            .times_s
            .iter()
            .zip(standard.raw)
            .zip(standard.blank)
            .filter_map(|((t, raw), blank)| raw.filter(|r| r.is_finite()).map(|r| (*t, r - blank)))
            .unzip();
        let Some(mean) = crate::core::stats::mean(&signals) else {
            unreadable.push(standard.well.to_string());
            continue;
        };
        drifts.push(drift_of(&times, &signals));
        wells.push(StandardWell {
            well: standard.well,
            concentration: standard.concentration,
            signal: mean,
            n_reads: signals.len(),
            drift: 0.0,
            drifting: false,
            used: true,
            residual: 0.0,
        });
    }
    let mut warnings = Vec::new();
    if !unreadable.is_empty() {
        warnings.push(format!(
            "standard well(s) {} hold no readable read and are left out of the curve",
            unreadable.join(", ")
        ));
    }
    let span = wells.iter().map(|w| w.signal).fold(f64::NEG_INFINITY, f64::max)
        - wells.iter().map(|w| w.signal).fold(f64::INFINITY, f64::min);
    for (well, drift) in wells.iter_mut().zip(&drifts) {
        if let Some((change, significant)) = drift {
            well.drift = *change;
            well.drifting = *significant && change.abs() > DRIFT_FRACTION_OF_SPAN * span.abs();
        }
    }
    let drifting: Vec<String> = wells
        .iter()
        .filter(|w| w.drifting)
        .map(|w| w.well.to_string())
        .collect();
    if !drifting.is_empty() {
        warnings.push(format!(
            "standard well(s) {} drift over the reads (by more than {:.0}% of the curve's signal span): a standard should be steady; check for evaporation, photobleaching or a reaction in the standard",
            drifting.join(", "),
            100.0 * DRIFT_FRACTION_OF_SPAN
        ));
    }
    wells.sort_by(|a, b| {
        a.concentration
            .total_cmp(&b.concentration)
            .then(a.well.cmp(&b.well))
    });
    let points = |wells: &[StandardWell], top: f64| -> Vec<CalibrationPoint> {
        wells
            .iter()
            .filter(|w| w.concentration <= top)
            .map(|w| CalibrationPoint {
                concentration: w.concentration,
                signal: w.signal,
                weight: 1.0,
            })
            .collect()
    };
    let all = points(&wells, f64::INFINITY);
    if distinct_levels(&all) < 2 || all.len() < 3 {
        return Err(format!(
            "a standard curve needs at least two concentrations and three readable standard wells; {} has {} well(s) at {} concentration(s)",
            if group.is_empty() { "the plate".to_string() } else { group_words(&group) },
            all.len(),
            distinct_levels(&all)
        ));
    }
    // The curvature test: while the quadratic term is significant, the top level leaves the fit.
    let t_all = quadratic_term_t(&all);
    let significant =
        |test: Option<(f64, usize)>| test.is_some_and(|(t, dof)| t.abs() > t_critical(CURVATURE_ALPHA, dof));
    let bends = significant(t_all);
    let mut levels: Vec<f64> = all.iter().map(|p| p.concentration).collect();
    levels.dedup();
    let mut top = *levels.last().unwrap_or(&0.0);
    if bends {
        while levels.len() > 3 {
            levels.pop();
            top = *levels.last().unwrap_or(&0.0);
            if !significant(quadratic_term_t(&points(&wells, top))) {
                break;
            }
        }
    }
    let highest_linear = top;
    // The second-order curve over every level: asked for, or (auto) where the top bends. It must
    // rise (or fall) over the whole range, or the line is kept.
    let wants_quadratic = match model {
        StandardCurveModel::Line => false,
        StandardCurveModel::Quadratic => true,
        StandardCurveModel::Auto => bends,
    };
    let all_top = all
        .iter()
        .map(|p| p.concentration)
        .fold(f64::NEG_INFINITY, f64::max);
    let all_low = all.iter().map(|p| p.concentration).fold(f64::INFINITY, f64::min);
    let monotone = |fit: &QuadraticFit| {
        let [_, b, q] = fit.coefficients;
        b != 0.0
            && [all_low, all_top]
                .iter()
                .all(|c| (b + 2.0 * q * c) * b.signum() > 0.0)
    };
    let second_order = if wants_quadratic {
        match quadratic_fit(&all) {
            Some(fit) if monotone(&fit) => Some(fit),
            Some(_) => {
                warnings.push(
                    "the second-order curve turns back within the standards' range, so a straight line is fitted up to the highest concentration still linear"
                        .to_string(),
                );
                None
            }
            None => {
                warnings.push(
                    "a second-order curve needs three concentrations and four readable standard wells: a straight line is fitted"
                        .to_string(),
                );
                None
            }
        }
    } else {
        None
    };
    let (line, quadratic, top) = match &second_order {
        Some(fit) => {
            let [a, b, q] = fit.coefficients;
            let (rss, syy) = fit.sums_of_squares;
            let line = LineEstimate {
                slope: b,
                intercept: a,
                slope_se: fit.covariance[1][1].max(0.0).sqrt(),
                intercept_se: fit.covariance[0][0].max(0.0).sqrt(),
                r_squared: if syy > 0.0 { 1.0 - rss / syy } else { 1.0 },
                residual_sd: fit.residual_variance.sqrt(),
                degrees_of_freedom: fit.degrees_of_freedom,
            };
            let term = QuadraticTerm {
                coefficient: q,
                se: fit.covariance[2][2].max(0.0).sqrt(),
                slope_covariance: fit.covariance[1][2],
            };
            (line, Some(term), all_top)
        }
        None => {
            let line = estimator
                .fit(&points(&wells, top))
                .ok_or_else(|| "the standards give no finite straight line".to_string())?;
            (line, None, top)
        }
    };
    if line.slope == 0.0 || line.slope.is_nan() {
        return Err("the standards' signal does not change with concentration".to_string());
    }
    let fitted = points(&wells, top);
    let mut curve = StandardCurve {
        group,
        lod: LOD_FACTOR * line.residual_sd / line.slope.abs(),
        loq: LOQ_FACTOR * line.residual_sd / line.slope.abs(),
        range: (
            fitted
                .iter()
                .map(|p| p.concentration)
                .fold(f64::INFINITY, f64::min),
            top,
        ),
        signal_range: (0.0, 0.0),
        curvature: CurvatureTest {
            t_all,
            bends,
            highest_linear: bends.then_some(highest_linear),
        },
        estimator: if quadratic.is_some() {
            SECOND_ORDER_ESTIMATOR
        } else {
            estimator.describe()
        },
        line,
        quadratic,
        working_concentration: 0.0,
        wells: Vec::new(),
        warnings: Vec::new(),
    };
    curve.signal_range = (curve.signal_at(curve.range.0), curve.signal_at(curve.range.1));
    for well in &mut wells {
        well.used = well.concentration <= top;
        well.residual = well.signal - curve.signal_at(well.concentration);
    }
    if bends {
        let linear_to = crate::core::format::significant(highest_linear);
        let what_was_done = if curve.quadratic.is_some() {
            format!("a second-order curve is fitted over every level (ISO 8466-2); a straight line would hold up to {linear_to} {unit}")
        } else {
            format!("the line is fitted up to {linear_to} {unit}, the highest concentration still linear")
        };
        warnings.push(format!(
            "the top of the standard curve bends (quadratic term significant at the {:.0}% level: inner filter, quenching or the detector's range): {what_was_done}",
            100.0 * CURVATURE_ALPHA
        ));
    }
    if curve.line.slope < 0.0 {
        warnings.push("the standards' signal falls as concentration rises".to_string());
    }
    curve.wells = wells;
    curve.warnings = warnings;
    Ok(curve)
}

/// The group in words.
fn group_words(group: &[(String, String)]) -> String {
    group
        .iter()
        .map(|(name, value)| format!("{name} = '{value}'"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// A standard's change over its reads (line in time) and whether its slope is significant at
/// [`DRIFT_ALPHA`]; `None` with fewer than four reads.
fn drift_of(times: &[f64], signals: &[f64]) -> Option<(f64, bool)> {
    let n = times.len();
    if n < 4 {
        return None;
    }
    let line = crate::core::stats::straight_line(times, signals)?;
    let mean_t = times.iter().sum::<f64>() / n as f64;
    let sxx: f64 = times.iter().map(|t| (t - mean_t).powi(2)).sum();
    let rss: f64 = times
        .iter()
        .zip(signals)
        .map(|(t, y)| (y - line.at(*t)).powi(2))
        .sum();
    let se = (rss / (n - 2) as f64 / sxx).sqrt();
    let span = times[n - 1] - times[0];
    let significant = se > 0.0 && (line.slope / se).abs() > t_critical(DRIFT_ALPHA, n - 2);
    Some((line.slope * span, significant || (se == 0.0 && line.slope != 0.0)))
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    /// Standards in duplicate: the reads `raws[2 i]` and `raws[2 i + 1]` at `levels[i]`, in wells
    /// A1, A2, B1, B2 and so on.
    fn in_duplicate<'a>(
        levels: &[f64],
        raws: &'a [crate::import::Readings],
        times: &'a [f64],
        blank: &'a [f64],
    ) -> Vec<StandardReads<'a>> {
        raws.iter()
            .enumerate()
            .map(|(i, raw)| StandardReads {
                well: WellId::new(i as u16 / 2, (i % 2) as u16),
                concentration: levels[i / 2],
                times_s: times,
                raw,
                blank,
            })
            .collect()
    }

    fn point(concentration: f64, signal: f64) -> CalibrationPoint {
        CalibrationPoint {
            concentration,
            signal,
            weight: 1.0,
        }
    }

    /// Checked against closed-form least squares worked by hand (Draper and Smith 1998, chapter 1
    /// formulas): x = 0, 1, 2, 3, 4; y = 1.0, 2.9, 5.1, 7.0, 8.9 (invented numbers).
    /// xbar = 2, ybar = 24.9 / 5 = 4.98, Sxx = 10, Sxy = (-2)(-3.98) + (-1)(-2.08) + 0 + (1)(2.02)
    /// plus (2)(3.92) = 7.96 + 2.08 + 2.02 + 7.84 = 19.9, b = 1.99, a = 4.98 - 3.98 = 1.00.
    /// Residuals: 0, -0.09, 0.12, 0.03, -0.06; RSS = 0.0081 + 0.0144 + 0.0009 + 0.0036 = 0.027,
    /// s^2 = 0.009, s = 0.0948683, SE(b) = sqrt(0.0009) = 0.03, SE(a) = sqrt(0.009 (1/5 + 4/10))
    /// = sqrt(0.0054) = 0.0734847; Syy = Sxy^2 / Sxx + RSS = 39.601 + 0.027 = 39.628,
    /// R^2 = 1 - 0.027 / 39.628 = 0.99931866.
    #[test]
    fn the_line_matches_closed_form_least_squares_worked_by_hand() {
        let points: Vec<CalibrationPoint> = [(0.0, 1.0), (1.0, 2.9), (2.0, 5.1), (3.0, 7.0), (4.0, 8.9)]
            .iter()
            .map(|&(x, y)| point(x, y))
            .collect();
        let line = WeightedStraightLine.fit(&points).unwrap();
        assert_relative_eq!(line.slope, 1.99, max_relative = 1e-12);
        assert_relative_eq!(line.intercept, 1.00, max_relative = 1e-12);
        assert_relative_eq!(line.residual_sd, 0.094_868_329_805_051_38, max_relative = 1e-10);
        assert_relative_eq!(line.slope_se, 0.03, max_relative = 1e-10);
        assert_relative_eq!(line.intercept_se, 0.073_484_692_283_495_34, max_relative = 1e-10);
        assert_relative_eq!(line.r_squared, 1.0 - 0.027 / 39.628, max_relative = 1e-12);
        assert_eq!(line.degrees_of_freedom, 3);
    }

    /// NIST StRD linear regression dataset Norris (Norris, J., NIST, "Calibration of Ozone
    /// Monitors"; 36 observations, lower difficulty), a calibration problem with certified values:
    /// B0 = -0.262323073774029 (SD 0.232818234301152), B1 = 1.00211681802045
    /// (SD 0.429796848199937E-03), residual SD 0.884796396144373, R^2 0.999993745883712. Data and
    /// certified values as published by NIST's Statistical Reference Datasets (Linear Regression,
    /// dataset Norris).
    #[test]
    fn the_line_reproduces_the_nist_norris_certified_values() {
        let y = [
            0.1, 338.8, 118.1, 888.0, 9.2, 228.1, 668.5, 998.5, 449.1, 778.9, 559.2, 0.3, 0.1, 778.1, 668.8,
            339.3, 448.9, 10.8, 557.7, 228.3, 998.0, 888.8, 119.6, 0.3, 0.6, 557.6, 339.3, 888.0, 998.5,
            778.9, 10.2, 117.6, 228.9, 668.4, 449.2, 0.2,
        ];
        let x = [
            0.2, 337.4, 118.2, 884.6, 10.1, 226.5, 666.3, 996.3, 448.6, 777.0, 558.2, 0.4, 0.6, 775.5, 666.9,
            338.0, 447.5, 11.6, 556.0, 228.1, 995.8, 887.6, 120.2, 0.3, 0.3, 556.8, 339.1, 887.2, 999.0,
            779.0, 11.1, 118.3, 229.2, 669.1, 448.9, 0.5,
        ];
        let points: Vec<CalibrationPoint> = x.iter().zip(&y).map(|(&x, &y)| point(x, y)).collect();
        let line = WeightedStraightLine.fit(&points).unwrap();
        assert_relative_eq!(line.intercept, -0.262_323_073_774_029, max_relative = 1e-9);
        assert_relative_eq!(line.slope, 1.002_116_818_020_45, max_relative = 1e-12);
        assert_relative_eq!(line.intercept_se, 0.232_818_234_301_152, max_relative = 1e-9);
        assert_relative_eq!(line.slope_se, 0.429_796_848_199_937e-3, max_relative = 1e-9);
        assert_relative_eq!(line.residual_sd, 0.884_796_396_144_373, max_relative = 1e-10);
        assert_relative_eq!(line.r_squared, 0.999_993_745_883_712, max_relative = 1e-12);
        assert_eq!(line.degrees_of_freedom, 34);
    }

    /// Weights w_i = 1, 1, 4 on x = 0, 1, 2 and y = 0, 1, 3 (invented): by hand, W = 6,
    /// xbar = (0 + 1 + 8) / 6 = 1.5, ybar = (0 + 1 + 12) / 6 = 13/6, Sxx = 2.25 + 0.25 + 4(0.25) = 3.5,
    /// Sxy = (-1.5)(-13/6) + (-0.5)(1 - 13/6) + 4(0.5)(3 - 13/6) = 3.25 + 7/12 + 5/3 = 5.5,
    /// b = 5.5 / 3.5 = 11/7, a = 13/6 - 1.5 (11/7) = 13/6 - 33/14 = -4/21. Weights are scaled to
    /// mean 1 (2/3, 2/3, 8/3), which leaves b and a unchanged.
    #[test]
    fn weights_enter_the_line_as_the_closed_form_says() {
        let points = [
            CalibrationPoint {
                concentration: 0.0,
                signal: 0.0,
                weight: 1.0,
            },
            CalibrationPoint {
                concentration: 1.0,
                signal: 1.0,
                weight: 1.0,
            },
            CalibrationPoint {
                concentration: 2.0,
                signal: 3.0,
                weight: 4.0,
            },
        ];
        let line = WeightedStraightLine.fit(&points).unwrap();
        assert_relative_eq!(line.slope, 11.0 / 7.0, max_relative = 1e-12);
        assert_relative_eq!(line.intercept, -4.0 / 21.0, max_relative = 1e-10);
    }

    #[test]
    fn an_exact_parabola_is_caught_by_the_quadratic_term_and_a_line_is_not() {
        let bent: Vec<CalibrationPoint> = (0..8)
            .flat_map(|i| {
                let x = i as f64;
                // Duplicates with a tiny alternating error, so the residual variance is not zero.
                [
                    point(x, 10.0 * x - 0.2 * x * x + 0.01),
                    point(x, 10.0 * x - 0.2 * x * x - 0.01),
                ]
            })
            .collect();
        let (t, dof) = quadratic_term_t(&bent).unwrap();
        assert_eq!(dof, 13);
        assert!(t < -100.0, "{t}");
        let straight: Vec<CalibrationPoint> = (0..8)
            .flat_map(|i| {
                let x = i as f64;
                [
                    point(x, 10.0 * x + 0.01 * (i % 3) as f64),
                    point(x, 10.0 * x - 0.01),
                ]
            })
            .collect();
        let (t, _) = quadratic_term_t(&straight).unwrap();
        assert!(t.abs() < t_critical(CURVATURE_ALPHA, 13), "{t}");
    }

    #[test]
    fn a_bent_top_is_left_out_and_the_highest_linear_level_named() {
        let times = [0.0, 60.0, 120.0, 180.0, 240.0];
        let blank = [0.0; 5];
        // Linear to 8, then the signal falls short: 16 reads as 14 would.
        let levels = [0.0, 1.0, 2.0, 4.0, 8.0, 16.0];
        let raws: Vec<crate::import::Readings> = levels
            .iter()
            .flat_map(|&c: &f64| {
                let signal = if c > 8.0 { 100.0 * 14.0 } else { 100.0 * c } + 50.0;
                [-1.0, 1.0].map(|e| std::iter::repeat_n(Some(signal + e), 5).collect())
            })
            .collect();
        let standards = in_duplicate(&levels, &raws, &times, &blank);
        let curve = fit_standard_curve(
            Vec::new(),
            &standards,
            ConcentrationUnit::Micromolar,
            &WeightedStraightLine,
            StandardCurveModel::Line,
        )
        .unwrap();
        assert!(curve.curvature.bends);
        assert_eq!(curve.curvature.highest_linear, Some(8.0));
        assert_eq!(curve.range, (0.0, 8.0));
        assert_relative_eq!(curve.line.slope, 100.0, max_relative = 1e-9);
        assert!(curve.wells.iter().filter(|w| !w.used).count() == 2);
        assert!(curve.warnings.iter().any(|w| w.contains("bends")));
        // LOD and LOQ are 3.3 and 10 residual SDs over the slope.
        assert_relative_eq!(
            curve.lod,
            3.3 * curve.line.residual_sd / 100.0,
            max_relative = 1e-12
        );
        assert_relative_eq!(curve.loq / curve.lod, 10.0 / 3.3, max_relative = 1e-12);
    }

    /// The second-order fit against the normal equations solved in exact rational arithmetic
    /// (Python's `fractions`, a general-purpose reference library; Draper and Smith 1998, chapter
    /// 12): x = 0..4, y = 0.1, 4.0, 7.2, 9.9, 12.1 (invented). X'X = [[5, 10, 30], [10, 30, 100],
    /// [30, 100, 354]], X'y = [33.3, 96.5, 315.5]; (a, b, q) = (43/350, 2873/700, -39/140),
    /// RSS = 4/875 on 2 degrees of freedom, Var b = 87/30625, Var q = 1/6125, Cov(b, q) = -4/6125.
    #[test]
    fn the_second_order_fit_matches_the_normal_equations_in_exact_arithmetic() {
        let points: Vec<CalibrationPoint> = [(0.0, 0.1), (1.0, 4.0), (2.0, 7.2), (3.0, 9.9), (4.0, 12.1)]
            .iter()
            .map(|&(x, y)| point(x, y))
            .collect();
        let fit = quadratic_fit(&points).unwrap();
        assert_relative_eq!(fit.coefficients[0], 43.0 / 350.0, max_relative = 1e-10);
        assert_relative_eq!(fit.coefficients[1], 2873.0 / 700.0, max_relative = 1e-12);
        assert_relative_eq!(fit.coefficients[2], -39.0 / 140.0, max_relative = 1e-12);
        assert_eq!(fit.degrees_of_freedom, 2);
        assert_relative_eq!(fit.residual_variance, 4.0 / 875.0 / 2.0, max_relative = 1e-9);
        assert_relative_eq!(fit.covariance[1][1], 87.0 / 30625.0, max_relative = 1e-9);
        assert_relative_eq!(fit.covariance[2][2], 1.0 / 6125.0, max_relative = 1e-9);
        assert_relative_eq!(fit.covariance[1][2], -4.0 / 6125.0, max_relative = 1e-9);
        assert_relative_eq!(fit.covariance[0][0], 62.0 / 30625.0, max_relative = 1e-9);
        let (t, dof) = quadratic_term_t(&points).unwrap();
        assert_eq!(dof, 2);
        assert_relative_eq!(
            t,
            (-39.0 / 140.0) / (1.0_f64 / 6125.0).sqrt(),
            max_relative = 1e-9
        );
    }

    /// Standards on a bent response (signal 100 c - 2 c^2 + 20, duplicates +-1): auto fits the
    /// second order over every level, recovers the bend, converts back exactly within the range
    /// and by the end's tangent beyond it; the slope's SE where the samples read follows the
    /// delta method; `line` keeps the straight line up to the highest linear level.
    #[test]
    fn a_bent_curve_is_fitted_to_second_order_and_inverted() {
        let times = [0.0, 60.0, 120.0, 180.0, 240.0];
        let blank = [0.0; 5];
        let levels = [0.0, 1.0, 2.0, 4.0, 8.0, 12.0, 16.0];
        let truth = |c: f64| 20.0 + 100.0 * c - 2.0 * c * c;
        let raws: Vec<crate::import::Readings> = levels
            .iter()
            .flat_map(|&c| [-1.0, 1.0].map(|e| std::iter::repeat_n(Some(truth(c) + e), 5).collect()))
            .collect();
        let standards = in_duplicate(&levels, &raws, &times, &blank);
        let fit = |model| {
            fit_standard_curve(
                Vec::new(),
                &standards,
                ConcentrationUnit::Micromolar,
                &WeightedStraightLine,
                model,
            )
            .unwrap()
        };
        let mut curve = fit(StandardCurveModel::Auto);
        assert!(curve.curvature.bends);
        let term = curve.quadratic.unwrap();
        assert_relative_eq!(term.coefficient, -2.0, max_relative = 1e-9);
        assert_relative_eq!(curve.line.slope, 100.0, max_relative = 1e-9);
        assert_eq!(curve.range, (0.0, 16.0));
        assert!(curve
            .wells
            .iter()
            .all(|w| w.used && w.residual.abs() < 1.0 + 1e-9));
        assert!(curve.warnings.iter().any(|w| w.contains("second-order")));
        for c in [0.0, 0.3, 5.0, 15.9] {
            assert_relative_eq!(curve.concentration_of(truth(c)), c, epsilon = 1e-9);
        }
        // Beyond the top (16: slope 100 - 64 = 36), the tangent carries on.
        assert_relative_eq!(curve.concentration_of(truth(16.0) + 36.0), 17.0, epsilon = 1e-9);
        // Below the bottom, the tangent at 0 (slope 100).
        assert_relative_eq!(curve.concentration_of(truth(0.0) - 50.0), -0.5, epsilon = 1e-9);
        // The slope's relative SE where the samples read: the delta method by hand.
        curve.working_concentration = 3.0;
        let variance = curve.line.slope_se.powi(2) + 36.0 * term.se.powi(2) + 12.0 * term.slope_covariance;
        assert_relative_eq!(
            curve.slope_relative_se(),
            variance.sqrt() / (100.0 - 12.0),
            max_relative = 1e-12
        );
        let line = fit(StandardCurveModel::Line);
        assert!(line.quadratic.is_none());
        assert!(line.range.1 < 16.0);
        assert_eq!(line.range.1, line.curvature.highest_linear.unwrap());
    }

    /// `quadratic` asked for where it cannot serve falls back to the line and says why: two
    /// levels give no second-order curve; a curve that turns back within the standards (a detector
    /// saturating hard: signal 100 c - 8 c^2 peaks at 6.25, inside 0-8) cannot be inverted.
    #[test]
    fn a_second_order_curve_that_cannot_serve_falls_back_to_the_line_and_says_why() {
        let times = [0.0, 60.0, 120.0, 180.0, 240.0];
        let blank = [0.0; 5];
        let fit = |levels: &[f64], signal: &dyn Fn(f64) -> f64| {
            let raws: Vec<crate::import::Readings> = levels
                .iter()
                .flat_map(|&c| [-1.0, 1.0].map(|e| std::iter::repeat_n(Some(signal(c) + e), 5).collect()))
                .collect();
            fit_standard_curve(
                Vec::new(),
                &in_duplicate(levels, &raws, &times, &blank),
                ConcentrationUnit::Micromolar,
                &WeightedStraightLine,
                StandardCurveModel::Quadratic,
            )
            .unwrap()
        };
        let two_levels = fit(&[0.0, 10.0], &|c| 100.0 * c);
        assert!(two_levels.quadratic.is_none());
        assert!(two_levels
            .warnings
            .iter()
            .any(|w| w.contains("needs three concentrations")));
        let turning = fit(&[0.0, 1.0, 2.0, 4.0, 6.0, 8.0], &|c| 100.0 * c - 8.0 * c * c);
        assert!(turning.quadratic.is_none());
        assert!(turning.warnings.iter().any(|w| w.contains("turns back")));
    }

    #[test]
    fn one_level_gives_no_curve_and_a_drifting_standard_is_flagged() {
        let times: Vec<f64> = (0..10).map(|i| 30.0 * i as f64).collect();
        let blank = vec![0.0; 10];
        let flat: crate::import::Readings = vec![Some(500.0); 10].into_iter().collect();
        let one_level: Vec<StandardReads> = (0..3)
            .map(|i| StandardReads {
                well: WellId::new(0, i),
                concentration: 5.0,
                times_s: &times,
                raw: &flat,
                blank: &blank,
            })
            .collect();
        let message = fit_standard_curve(
            Vec::new(),
            &one_level,
            ConcentrationUnit::Micromolar,
            &WeightedStraightLine,
            StandardCurveModel::Line,
        )
        .unwrap_err();
        assert!(message.contains("at 1 concentration"), "{message}");
        let rising: crate::import::Readings = times.iter().map(|t| Some(1000.0 + 2.0 * t)).collect();
        let zero: crate::import::Readings = vec![Some(0.0); 10].into_iter().collect();
        let level_one: crate::import::Readings = vec![Some(1000.0); 10].into_iter().collect();
        let standards = vec![
            StandardReads {
                well: WellId::new(0, 0),
                concentration: 0.0,
                times_s: &times,
                raw: &zero,
                blank: &blank,
            },
            StandardReads {
                well: WellId::new(0, 1),
                concentration: 10.0,
                times_s: &times,
                raw: &level_one,
                blank: &blank,
            },
            StandardReads {
                well: WellId::new(0, 2),
                concentration: 10.0,
                times_s: &times,
                raw: &rising,
                blank: &blank,
            },
        ];
        let curve = fit_standard_curve(
            Vec::new(),
            &standards,
            ConcentrationUnit::Micromolar,
            &WeightedStraightLine,
            StandardCurveModel::Line,
        )
        .unwrap();
        let drifting: Vec<String> = curve
            .wells
            .iter()
            .filter(|w| w.drifting)
            .map(|w| w.well.to_string())
            .collect();
        assert_eq!(drifting, ["A3"]);
        assert!(curve
            .warnings
            .iter()
            .any(|w| w.contains("A3") && w.contains("drift")));
    }
}
