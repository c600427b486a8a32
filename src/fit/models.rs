//! Rate laws beyond plain Michaelis-Menten as least-squares models with analytic Jacobians:
//! substrate inhibition, Hill, the four reversible inhibition mechanisms fitted globally over an
//! [S] x [I] matrix, Morrison tight binding and the four-parameter logistic (IC50); data-derived
//! starts and one weighted fit per model.
//!
//! # Formulas (fitted parameters in brackets, in this order)
//! * Michaelis-Menten `v = Vmax S / (Km + S)` [Vmax, Km].
//! * Substrate inhibition `v = Vmax S / (Km + S + c S^2)`, `c = 1/Ksi` [Vmax, Km, c].
//! * Hill `v = Vmax q / (1 + q)`, `q = (S/K)^h` [Vmax, K, h].
//! * Reversible inhibition `v = Vmax S / (Km (1 + a I) + S (1 + b I))` with `a = 1/Ki`,
//!   `b = 1/Ki'`: competitive `b = 0` [Vmax, Km, a]; uncompetitive `a = 0` [Vmax, Km, b];
//!   noncompetitive `a = b` [Vmax, Km, a]; mixed [Vmax, Km, a, b].
//! * Morrison tight binding `v = v0 (1 - (E + I + K - sqrt((E + I + K)^2 - 4 E I)) / (2 E))`,
//!   `K = Ki_app`, E the total enzyme concentration in the inhibitor's unit (known) [v0, Ki_app].
//! * Four-parameter logistic `v = bottom + (top - bottom) / (1 + (I/IC50)^h)` [top, bottom, IC50, h].
//!
//! Why inverse constants: an inhibition (or substrate-inhibition) constant that the data cannot
//! see runs to infinity, and a solver chasing it stalls; its inverse goes to 0 instead, a finite
//! point where the fit converges and the collapse is visible (see `selection`). The inverse
//! constants are fitted without bounds; Vmax, Km, K, h, v0, Ki_app and IC50 are kept positive by
//! fitting their logarithms (see `least_squares`).
//!
//! Weighting: each residual and Jacobian row is multiplied by `sqrt(w_i)`, so the fit minimises
//! `sum w_i (model_i - v_i)^2`. Weights are none (1), relative (`1 / v_i^2`, constant relative
//! error) or replicate (`1 / sd_i^2`, each SD first raised to at least a quarter of the median SD,
//! see [`replicate_sd_floor`]).
//!
//! Starts: for each model, a grid over its shape constants (log-spaced over the data's range, plus
//! 0 for inverse constants) with the scale (Vmax, v0) profiled out linearly,
//! `Vmax = sum(w f v) / sum(w f^2)`; the best few grid points each start a Levenberg-Marquardt run
//! and the lowest weighted RSS among converged runs wins.
//!
//! Assumptions: independent errors, variance known up to one factor through the weights; S and I
//! known exactly; for Morrison, E is the active enzyme concentration.
//!
//! References: Segel 1975, "Enzyme Kinetics", Wiley (rate laws of inhibition and substrate
//! inhibition); Hill 1910, J Physiol 40:iv; Morrison 1969, Biochim Biophys Acta 185:269; Cheng and
//! Prusoff 1973, Biochem Pharmacol 22:3099; Copeland 2005, "Evaluation of Enzyme Inhibitors in Drug
//! Discovery", Wiley (tight binding, IC50). Volume and page numbers are from memory.

use nalgebra::DMatrix;
use serde::Serialize;

use super::least_squares::{
    fit_least_squares, FitError, LeastSquaresFit, LeastSquaresOptions, ResidualModel,
};
pub use crate::config::{RateModelKind, Weighting, ALL_RATE_MODELS};

impl RateModelKind {
    /// Names of the fitted parameters, in order (inverse constants are `1/Ki` and so on).
    pub fn parameter_names(self) -> &'static [&'static str] {
        match self {
            RateModelKind::MichaelisMenten => &["Vmax", "Km"],
            RateModelKind::SubstrateInhibition => &["Vmax", "Km", "1/Ksi"],
            RateModelKind::Hill => &["Vmax", "K", "h"],
            RateModelKind::Competitive | RateModelKind::Noncompetitive => &["Vmax", "Km", "1/Ki"],
            RateModelKind::Uncompetitive => &["Vmax", "Km", "1/Ki_prime"],
            RateModelKind::Mixed => &["Vmax", "Km", "1/Ki", "1/Ki_prime"],
            RateModelKind::Morrison => &["v0", "Ki_app"],
            RateModelKind::Ic50 => &["top", "bottom", "IC50", "h"],
        }
    }

    pub fn n_parameters(self) -> usize {
        self.parameter_names().len()
    }

    /// Indices fitted as logarithms (kept positive).
    pub fn positive_parameters(self) -> Vec<usize> {
        match self {
            RateModelKind::MichaelisMenten | RateModelKind::Morrison => vec![0, 1],
            RateModelKind::Hill => vec![0, 1, 2],
            RateModelKind::Ic50 => vec![2, 3],
            _ => vec![0, 1],
        }
    }

    /// Whether the model needs an inhibitor concentration per point.
    pub fn needs_inhibitor(self) -> bool {
        matches!(
            self,
            RateModelKind::Competitive
                | RateModelKind::Uncompetitive
                | RateModelKind::Noncompetitive
                | RateModelKind::Mixed
                | RateModelKind::Morrison
                | RateModelKind::Ic50
        )
    }

    /// The equation, as written into `fit.json`.
    pub fn equation(self) -> &'static str {
        match self {
            RateModelKind::MichaelisMenten => "v = Vmax S / (Km + S)",
            RateModelKind::SubstrateInhibition => "v = Vmax S / (Km + S (1 + S/Ksi))",
            RateModelKind::Hill => "v = Vmax S^h / (K^h + S^h)",
            RateModelKind::Competitive => "v = Vmax S / (Km (1 + I/Ki) + S)",
            RateModelKind::Uncompetitive => "v = Vmax S / (Km + S (1 + I/Ki_prime))",
            RateModelKind::Noncompetitive => "v = Vmax S / ((Km + S) (1 + I/Ki))",
            RateModelKind::Mixed => "v = Vmax S / (Km (1 + I/Ki) + S (1 + I/Ki_prime))",
            RateModelKind::Morrison => {
                "v = v0 (1 - (E + I + Ki_app - sqrt((E + I + Ki_app)^2 - 4 E I)) / (2 E))"
            }
            RateModelKind::Ic50 => "v = bottom + (top - bottom) / (1 + (I/IC50)^h)",
        }
    }
}

/// Predicted rate at one point, and its gradient with respect to the fitted parameters.
/// `enzyme` is only read by Morrison.
pub fn predict_rate(
    kind: RateModelKind,
    parameters: &[f64],
    substrate: f64,
    inhibitor: f64,
    enzyme: f64,
    gradient: &mut [f64],
) -> f64 {
    match kind {
        RateModelKind::MichaelisMenten => {
            let (vmax, km) = (parameters[0], parameters[1]);
            let denominator = km + substrate;
            gradient[0] = substrate / denominator;
            gradient[1] = -vmax * substrate / (denominator * denominator);
            vmax * substrate / denominator
        }
        RateModelKind::SubstrateInhibition => {
            let (vmax, km, inverse_ksi) = (parameters[0], parameters[1], parameters[2]);
            let denominator = km + substrate + inverse_ksi * substrate * substrate;
            let squared = denominator * denominator;
            gradient[0] = substrate / denominator;
            gradient[1] = -vmax * substrate / squared;
            gradient[2] = -vmax * substrate.powi(3) / squared;
            vmax * substrate / denominator
        }
        RateModelKind::Hill => {
            let (vmax, half, hill) = (parameters[0], parameters[1], parameters[2]);
            if substrate <= 0.0 {
                gradient.iter_mut().for_each(|g| *g = 0.0);
                return 0.0;
            }
            let ratio = substrate / half;
            let power = ratio.powf(hill);
            let fraction = power / (1.0 + power);
            let derivative = vmax / ((1.0 + power) * (1.0 + power));
            gradient[0] = fraction;
            gradient[1] = -derivative * hill * power / half;
            gradient[2] = derivative * power * ratio.ln();
            vmax * fraction
        }
        RateModelKind::Competitive
        | RateModelKind::Uncompetitive
        | RateModelKind::Noncompetitive
        | RateModelKind::Mixed => {
            let (vmax, km) = (parameters[0], parameters[1]);
            let (inverse_ki, inverse_ki_prime) = match kind {
                RateModelKind::Competitive => (parameters[2], 0.0),
                RateModelKind::Uncompetitive => (0.0, parameters[2]),
                RateModelKind::Noncompetitive => (parameters[2], parameters[2]),
                _ => (parameters[2], parameters[3]),
            };
            let km_factor = 1.0 + inverse_ki * inhibitor;
            let s_factor = 1.0 + inverse_ki_prime * inhibitor;
            let denominator = km * km_factor + substrate * s_factor;
            let squared = denominator * denominator;
            gradient[0] = substrate / denominator;
            gradient[1] = -vmax * substrate * km_factor / squared;
            let d_inverse_ki = -vmax * substrate * km * inhibitor / squared;
            let d_inverse_ki_prime = -vmax * substrate * substrate * inhibitor / squared;
            match kind {
                RateModelKind::Competitive => gradient[2] = d_inverse_ki,
                RateModelKind::Uncompetitive => gradient[2] = d_inverse_ki_prime,
                RateModelKind::Noncompetitive => gradient[2] = d_inverse_ki + d_inverse_ki_prime,
                _ => {
                    gradient[2] = d_inverse_ki;
                    gradient[3] = d_inverse_ki_prime;
                }
            }
            vmax * substrate / denominator
        }
        RateModelKind::Morrison => {
            let (v0, ki_app) = (parameters[0], parameters[1]);
            let sum = enzyme + inhibitor + ki_app;
            // Written as 2 I / (sum + root) (the same number) so it stays accurate when 4 E I is
            // tiny beside sum^2: the plain difference sum - root would cancel.
            let root = (sum * sum - 4.0 * enzyme * inhibitor).max(0.0).sqrt();
            let bound_fraction = 2.0 * inhibitor / (sum + root);
            let activity = 1.0 - bound_fraction;
            // d(bound)/dK with bound = (sum - root) / (2E): (1 - sum/root) / (2E), written stably as
            // -bound / root.
            let d_bound_d_k = if root > 0.0 { -bound_fraction / root } else { 0.0 };
            gradient[0] = activity;
            gradient[1] = -v0 * d_bound_d_k;
            v0 * activity
        }
        RateModelKind::Ic50 => {
            let (top, bottom, ic50, hill) = (parameters[0], parameters[1], parameters[2], parameters[3]);
            if inhibitor <= 0.0 {
                gradient[0] = 1.0;
                gradient[1] = 0.0;
                gradient[2] = 0.0;
                gradient[3] = 0.0;
                return top;
            }
            let ratio = inhibitor / ic50;
            let power = ratio.powf(hill);
            let fraction = 1.0 / (1.0 + power);
            let span = top - bottom;
            gradient[0] = fraction;
            gradient[1] = 1.0 - fraction;
            gradient[2] = span * fraction * fraction * hill * power / ic50;
            gradient[3] = -span * fraction * fraction * power * ratio.ln();
            bottom + span * fraction
        }
    }
}

/// Fraction of the median replicate SD below which an SD is raised to it before weighting.
pub const REPLICATE_SD_FLOOR_FRACTION: f64 = 0.25;

/// The floor of replicate SDs: a quarter of their median. Duplicate wells agree closely by chance
/// far more often than their true spread suggests, and `1/sd^2` would then let one condition
/// dominate the fit (common practice: guard weights from few replicates).
pub fn replicate_sd_floor(sd: &[f64]) -> f64 {
    crate::core::stats::median(sd.iter().copied()).map_or(0.0, |median| REPLICATE_SD_FLOOR_FRACTION * median)
}

/// Rates with their conditions. All vectors have one entry per point.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RateData {
    pub substrate: Vec<f64>,
    /// Inhibitor concentration (0 where none); for Morrison and IC50 the varied quantity.
    pub inhibitor: Vec<f64>,
    pub rate: Vec<f64>,
    /// Weights `w_i` (see the module docs), all positive and finite.
    pub weights: Vec<f64>,
    /// Total enzyme concentration in the inhibitor's unit (Morrison only).
    pub enzyme: Option<f64>,
    /// Errors the rates share (corrections estimated once and subtracted from many rates).
    pub shared: SharedRateErrors,
    /// How the rates themselves move with the law they are fitted by (rates corrected by the
    /// group's own fitted law); `None` for rates measured independently of the fit.
    pub feedback: Option<RateFeedback>,
}

/// Rates that depend on the fitted law: `d rate_i / d theta_j` at the fit, for the law `kind` in
/// its fitted parametrisation. At the fixed point of correct-and-refit the estimates solve
/// `J'W (r(theta) - f(theta)) = 0` with the rates `r` themselves functions of `theta`, so
/// (implicit differentiation, Gauss-Newton terms) `d theta = M^-1 J'W d r` with
/// `M = J'W (J - H)`, `H = dr/dtheta`, in place of `(J'WJ)^-1 J'W d r`: the covariance becomes
/// `T C T'` with `T = M^-1 (J'WJ)` ([`RateModel::feedback_transform`]).
///
/// References: the implicit function theorem applied to the estimating equations of a
/// two-stage estimator (a generated-regressor correction; Murphy and Topel 1985, J Bus Econ Stat
/// 3:370, volume and page from memory); the Gauss-Newton approximation as in Bates and Watts
/// 1988.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RateFeedback {
    /// The law the rates were corrected by.
    pub kind: RateModelKind,
    /// Per rate, its derivative in each of the law's parameters.
    pub per_parameter: Vec<Vec<f64>>,
}

/// Errors several rates share: each rate's loading on each error (a row per rate, a column per
/// error) and the errors' covariance. A rate moves by `sum_k loading_k e_k` when the errors are e.
#[derive(Debug, Clone, PartialEq, Default, Serialize)]
pub struct SharedRateErrors {
    /// Per rate, its loading on each error.
    pub loadings: Vec<Vec<f64>>,
    /// The errors' covariance.
    pub covariance: Vec<Vec<f64>>,
}

impl SharedRateErrors {
    /// Whether there is any shared error.
    pub fn is_empty(&self) -> bool {
        self.covariance.is_empty()
    }
}

/// Errors of building weighted rate data.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RateDataError {
    #[error("the {quantity} list has {found} values but there are {expected} rates")]
    Length {
        quantity: &'static str,
        found: usize,
        expected: usize,
    },
    #[error("the {quantity} at point {index} is not a finite number ({value})")]
    NonFinite {
        quantity: &'static str,
        index: usize,
        value: f64,
    },
    #[error("the {quantity} at point {index} is negative ({value})")]
    Negative {
        quantity: &'static str,
        index: usize,
        value: f64,
    },
    #[error("relative weighting needs a rate above zero, but point {index} has {value}")]
    RelativeWeightNeedsPositiveRate { index: usize, value: f64 },
    #[error("replicate-SD weighting needs an SD of zero or more at every point and a median SD above zero; point {index} has {value}")]
    ReplicateSdNotPositive { index: usize, value: f64 },
    #[error("replicate-SD weighting needs an SD column")]
    ReplicateSdMissing,
}

impl RateData {
    /// Builds the data and its weights. `inhibitor` may be empty (no inhibitor anywhere).
    pub fn new(
        substrate: Vec<f64>,
        inhibitor: Vec<f64>,
        rate: Vec<f64>,
        sd: Option<&[f64]>,
        weighting: Weighting,
        enzyme: Option<f64>,
    ) -> Result<RateData, RateDataError> {
        let n = rate.len();
        let inhibitor = if inhibitor.is_empty() {
            vec![0.0; n]
        } else {
            inhibitor
        };
        for (quantity, values) in [("substrate", &substrate), ("inhibitor", &inhibitor)] {
            if values.len() != n {
                return Err(RateDataError::Length {
                    quantity,
                    found: values.len(),
                    expected: n,
                });
            }
            for (index, &value) in values.iter().enumerate() {
                if !value.is_finite() {
                    return Err(RateDataError::NonFinite {
                        quantity,
                        index,
                        value,
                    });
                }
                if value < 0.0 {
                    return Err(RateDataError::Negative {
                        quantity,
                        index,
                        value,
                    });
                }
            }
        }
        for (index, &value) in rate.iter().enumerate() {
            if !value.is_finite() {
                return Err(RateDataError::NonFinite {
                    quantity: "rate",
                    index,
                    value,
                });
            }
        }
        let weights = match weighting {
            // `auto` is resolved per group before the data are built; unresolved it weighs
            // every point alike.
            Weighting::None | Weighting::Auto => vec![1.0; n],
            Weighting::Relative => rate
                .iter()
                .enumerate()
                .map(|(index, &value)| {
                    if value > 0.0 {
                        Ok(1.0 / (value * value))
                    } else {
                        Err(RateDataError::RelativeWeightNeedsPositiveRate { index, value })
                    }
                })
                .collect::<Result<Vec<f64>, _>>()?,
            Weighting::ReplicateSd | Weighting::RateSe => {
                let sd = sd.ok_or(RateDataError::ReplicateSdMissing)?;
                if sd.len() != n {
                    return Err(RateDataError::Length {
                        quantity: "sd",
                        found: sd.len(),
                        expected: n,
                    });
                }
                for (index, &value) in sd.iter().enumerate() {
                    if !(value.is_finite() && value >= 0.0) {
                        return Err(RateDataError::ReplicateSdNotPositive { index, value });
                    }
                }
                let floor = replicate_sd_floor(sd);
                if floor.is_nan() || floor <= 0.0 {
                    return Err(RateDataError::ReplicateSdNotPositive { index: 0, value: 0.0 });
                }
                sd.iter()
                    .map(|&value| {
                        let used = value.max(floor);
                        1.0 / (used * used)
                    })
                    .collect()
            }
        };
        Ok(RateData {
            substrate,
            inhibitor,
            rate,
            weights,
            enzyme,
            shared: SharedRateErrors::default(),
            feedback: None,
        })
    }

    pub fn len(&self) -> usize {
        self.rate.len()
    }

    pub fn is_empty(&self) -> bool {
        self.rate.is_empty()
    }

    /// Distinct values of a list (sorted).
    pub fn distinct(values: &[f64]) -> Vec<f64> {
        let mut sorted = values.to_vec();
        sorted.sort_by(f64::total_cmp);
        sorted.dedup();
        sorted
    }

    /// Whether more than one inhibitor concentration occurs.
    pub fn varies_inhibitor(&self) -> bool {
        RateData::distinct(&self.inhibitor).len() > 1
    }
}

/// A rate law bound to its data, in weighted residual form.
#[derive(Debug, Clone, Copy)]
pub struct RateModel<'data> {
    pub kind: RateModelKind,
    pub data: &'data RateData,
    /// Per-point multipliers of the weights (robust reweighting); `None` means all 1.
    pub extra_weights: Option<&'data [f64]>,
}

impl RateModel<'_> {
    /// The covariance the data's shared errors add to the fitted parameters (see
    /// [`super::least_squares::shared_error_covariance`]), at `parameters`.
    pub fn shared_covariance(&self, parameters: &[f64]) -> Option<DMatrix<f64>> {
        let shared = &self.data.shared;
        if shared.is_empty() {
            return None;
        }
        let n = self.data.len();
        let k = shared.covariance.len();
        let mut jacobian = DMatrix::zeros(n, self.kind.n_parameters());
        self.jacobian(parameters, &mut jacobian);
        // The Jacobian is of the weighted residuals: weigh the loadings alike.
        let loadings = DMatrix::from_fn(n, k, |i, j| {
            self.root_weight(i)
                * shared
                    .loadings
                    .get(i)
                    .and_then(|row| row.get(j))
                    .copied()
                    .unwrap_or(0.0)
        });
        let covariance = DMatrix::from_fn(k, k, |i, j| shared.covariance[i].get(j).copied().unwrap_or(0.0));
        super::least_squares::shared_error_covariance(&jacobian, &loadings, &covariance)
    }

    /// `T = M^-1 (J'WJ)` with `M = J'W (J - H)` ([`RateFeedback`]) at `parameters`, when the
    /// data's rates were corrected by this same law; `None` otherwise or when `M` is singular.
    pub fn feedback_transform(&self, parameters: &[f64]) -> Option<DMatrix<f64>> {
        let feedback = self.data.feedback.as_ref()?;
        let n = self.data.len();
        let p = self.kind.n_parameters();
        if feedback.kind != self.kind || feedback.per_parameter.len() != n {
            return None;
        }
        let mut jacobian = DMatrix::zeros(n, p);
        self.jacobian(parameters, &mut jacobian);
        // The Jacobian is of the weighted residuals `sqrt(w) (f - r)`: H is weighed alike.
        let weighted_feedback = DMatrix::from_fn(n, p, |i, j| {
            self.root_weight(i) * feedback.per_parameter[i].get(j).copied().unwrap_or(0.0)
        });
        let normal = jacobian.transpose() * &jacobian;
        let m = jacobian.transpose() * (&jacobian - weighted_feedback);
        let transform = m.try_inverse()? * normal;
        transform.iter().all(|v| v.is_finite()).then_some(transform)
    }

    fn root_weight(&self, index: usize) -> f64 {
        let extra = self.extra_weights.map_or(1.0, |weights| weights[index]);
        (self.data.weights[index] * extra).sqrt()
    }

    /// Unweighted predictions at every point.
    pub fn predictions(&self, parameters: &[f64]) -> Vec<f64> {
        let mut gradient = vec![0.0; self.kind.n_parameters()];
        (0..self.data.len())
            .map(|index| self.predict(parameters, index, &mut gradient))
            .collect()
    }

    fn predict(&self, parameters: &[f64], index: usize, gradient: &mut [f64]) -> f64 {
        predict_rate(
            self.kind,
            parameters,
            self.data.substrate[index],
            self.data.inhibitor[index],
            self.data.enzyme.unwrap_or(0.0),
            gradient,
        )
    }
}

impl ResidualModel for RateModel<'_> {
    fn n_parameters(&self) -> usize {
        self.kind.n_parameters()
    }
    fn n_observations(&self) -> usize {
        self.data.len()
    }
    fn residuals(&self, parameters: &[f64], residuals: &mut [f64]) {
        let mut gradient = vec![0.0; self.kind.n_parameters()];
        for (index, residual) in residuals.iter_mut().enumerate() {
            let predicted = self.predict(parameters, index, &mut gradient);
            *residual = self.root_weight(index) * (predicted - self.data.rate[index]);
        }
    }
    fn jacobian(&self, parameters: &[f64], jacobian: &mut DMatrix<f64>) {
        let mut gradient = vec![0.0; self.kind.n_parameters()];
        for index in 0..self.data.len() {
            self.predict(parameters, index, &mut gradient);
            let root_weight = self.root_weight(index);
            for (column, &value) in gradient.iter().enumerate() {
                jacobian[(index, column)] = root_weight * value;
            }
        }
    }
}

/// Errors of fitting a rate law (before any solver runs).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ModelFitError {
    #[error("{model} needs the inhibitor varied over at least 2 concentrations; these data have {distinct}")]
    InhibitorNotVaried { model: RateModelKind, distinct: usize },
    #[error("{model} needs at least {required} distinct substrate concentrations above zero; these data have {distinct}")]
    TooFewSubstrateLevels {
        model: RateModelKind,
        distinct: usize,
        required: usize,
    },
    #[error("{model} needs the total enzyme concentration (in the inhibitor's unit), and none was given")]
    EnzymeConcentrationMissing { model: RateModelKind },
    #[error("{model} has {parameters} parameters; {points} points are too few (at least {required})")]
    TooFewPoints {
        model: RateModelKind,
        points: usize,
        parameters: usize,
        required: usize,
    },
    #[error("no rate is above zero, so there is no curve to fit")]
    NoPositiveRate,
    #[error(transparent)]
    Fit(#[from] FitError),
}

/// Checks that a model can be fitted at all on these data.
pub fn check_fittable(kind: RateModelKind, data: &RateData) -> Result<(), ModelFitError> {
    let p = kind.n_parameters();
    if data.len() <= p {
        return Err(ModelFitError::TooFewPoints {
            model: kind,
            points: data.len(),
            parameters: p,
            required: p + 1,
        });
    }
    if !data.rate.iter().any(|&value| value > 0.0) {
        return Err(ModelFitError::NoPositiveRate);
    }
    if kind.needs_inhibitor() {
        let distinct = RateData::distinct(&data.inhibitor).len();
        if distinct < 2 {
            return Err(ModelFitError::InhibitorNotVaried {
                model: kind,
                distinct,
            });
        }
    }
    if !matches!(kind, RateModelKind::Morrison | RateModelKind::Ic50) {
        let positive: Vec<f64> = data.substrate.iter().copied().filter(|&s| s > 0.0).collect();
        let distinct = RateData::distinct(&positive).len();
        let required = match kind {
            RateModelKind::SubstrateInhibition | RateModelKind::Hill => 3,
            _ => 2,
        };
        if distinct < required {
            return Err(ModelFitError::TooFewSubstrateLevels {
                model: kind,
                distinct,
                required,
            });
        }
    }
    if kind == RateModelKind::Morrison && !data.enzyme.is_some_and(|e| e.is_finite() && e > 0.0) {
        return Err(ModelFitError::EnzymeConcentrationMissing { model: kind });
    }
    Ok(())
}

/// `n` log-spaced values from `low` to `high` (both positive).
fn log_grid(low: f64, high: f64, n: usize) -> Vec<f64> {
    let ratio = (high / low).ln();
    (0..n)
        .map(|index| low * (ratio * index as f64 / (n - 1).max(1) as f64).exp())
        .collect()
}

fn positive_range(values: &[f64]) -> Option<(f64, f64)> {
    let positive: Vec<f64> = values
        .iter()
        .copied()
        .filter(|&v| v > 0.0 && v.is_finite())
        .collect();
    let low = positive.iter().copied().fold(f64::INFINITY, f64::min);
    let high = positive.iter().copied().fold(0.0, f64::max);
    (low.is_finite() && high > 0.0).then_some((low, high))
}

/// Weighted RSS of a parameter vector after profiling out the scale parameter (index 0): returns
/// the best scale and the RSS. For the logistic, returns the RSS as is.
fn profiled_rss(model: &RateModel<'_>, parameters: &mut [f64]) -> f64 {
    let data = model.data;
    let mut gradient = vec![0.0; model.kind.n_parameters()];
    if model.kind != RateModelKind::Ic50 {
        parameters[0] = 1.0;
        let mut sum_fv = 0.0;
        let mut sum_ff = 0.0;
        for index in 0..data.len() {
            let shape = model.predict(parameters, index, &mut gradient);
            sum_fv += data.weights[index] * shape * data.rate[index];
            sum_ff += data.weights[index] * shape * shape;
        }
        let scale = sum_fv / sum_ff;
        parameters[0] = if scale.is_finite() && scale > 0.0 {
            scale
        } else {
            1.0
        };
    }
    let mut rss = 0.0;
    for index in 0..data.len() {
        let difference = model.predict(parameters, index, &mut gradient) - data.rate[index];
        rss += data.weights[index] * difference * difference;
    }
    if rss.is_finite() {
        rss
    } else {
        f64::INFINITY
    }
}

/// Candidate starting vectors, best (lowest weighted RSS) first.
pub fn start_candidates(kind: RateModelKind, data: &RateData) -> Vec<Vec<f64>> {
    let model = RateModel {
        kind,
        data,
        extra_weights: None,
    };
    let (s_low, s_high) = positive_range(&data.substrate).unwrap_or((1.0, 1.0));
    let (i_low, i_high) = positive_range(&data.inhibitor).unwrap_or((1.0, 1.0));
    let km_grid = log_grid(s_low / 10.0, s_high * 10.0, 25);
    let inverse_grid = |low: f64, high: f64| {
        let mut grid = vec![0.0];
        grid.extend(log_grid(1.0 / (high * 30.0), 30.0 / low, 15));
        grid
    };
    let mut raw: Vec<Vec<f64>> = Vec::new();
    match kind {
        RateModelKind::MichaelisMenten => {
            for &km in &km_grid {
                raw.push(vec![1.0, km]);
            }
        }
        RateModelKind::SubstrateInhibition => {
            for &km in &km_grid {
                for &c in &inverse_grid(s_low, s_high) {
                    raw.push(vec![1.0, km, c]);
                }
            }
        }
        RateModelKind::Hill => {
            for &k in &km_grid {
                for h in [0.5, 0.75, 1.0, 1.5, 2.0, 3.0, 4.0] {
                    raw.push(vec![1.0, k, h]);
                }
            }
        }
        RateModelKind::Competitive | RateModelKind::Uncompetitive | RateModelKind::Noncompetitive => {
            for &km in &km_grid {
                for &a in &inverse_grid(i_low, i_high) {
                    raw.push(vec![1.0, km, a]);
                }
            }
        }
        RateModelKind::Mixed => {
            let coarse_km = log_grid(s_low / 10.0, s_high * 10.0, 13);
            let grid = inverse_grid(i_low, i_high);
            for &km in &coarse_km {
                for &a in &grid {
                    for &b in &grid {
                        raw.push(vec![1.0, km, a, b]);
                    }
                }
            }
        }
        RateModelKind::Morrison => {
            let enzyme = data.enzyme.unwrap_or(1.0);
            for k in log_grid((i_low / 100.0).min(enzyme / 100.0), i_high * 10.0, 41) {
                raw.push(vec![1.0, k]);
            }
        }
        RateModelKind::Ic50 => {
            let lowest_inhibitor = data.inhibitor.iter().copied().fold(f64::INFINITY, f64::min);
            let highest_inhibitor = data.inhibitor.iter().copied().fold(0.0, f64::max);
            let mean_at = |level: f64| {
                let values: Vec<f64> = data
                    .inhibitor
                    .iter()
                    .zip(&data.rate)
                    .filter(|(&i, _)| i == level)
                    .map(|(_, &v)| v)
                    .collect();
                crate::core::stats::mean(&values).unwrap_or(0.0)
            };
            let top = mean_at(lowest_inhibitor);
            let bottom = mean_at(highest_inhibitor).min(top);
            for ic50 in log_grid(i_low / 10.0, i_high * 10.0, 31) {
                for h in [0.5, 1.0, 2.0] {
                    raw.push(vec![top, bottom, ic50, h]);
                    raw.push(vec![top, 0.0, ic50, h]);
                }
            }
        }
    }
    let mut scored: Vec<(f64, Vec<f64>)> = raw
        .into_iter()
        .map(|mut parameters| {
            let rss = profiled_rss(&model, &mut parameters);
            (rss, parameters)
        })
        .filter(|(rss, parameters)| rss.is_finite() && parameters.iter().all(|p| p.is_finite()))
        .collect();
    scored.sort_by(|left, right| left.0.total_cmp(&right.0));
    scored.into_iter().map(|(_, parameters)| parameters).collect()
}

/// Number of grid starts each fit tries.
pub const STARTS_TRIED: usize = 3;

/// One fitted rate law.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RateModelFit {
    pub kind: RateModelKind,
    /// Names of the fitted parameters (see [`RateModelKind::parameter_names`]).
    pub parameter_names: Vec<&'static str>,
    /// The least-squares result in the fitted parametrisation (weighted RSS).
    pub fit: LeastSquaresFit,
    pub start: Vec<f64>,
}

impl RateModelFit {
    pub fn converged(&self) -> bool {
        self.fit.converged()
    }
}

/// Fits one rate law by weighted least squares from the best of a few data-derived starts (or from
/// `start` if given). `extra_weights` multiplies the weights (robust reweighting).
pub fn fit_rate_model(
    kind: RateModelKind,
    data: &RateData,
    start: Option<&[f64]>,
    extra_weights: Option<&[f64]>,
    options: &LeastSquaresOptions,
) -> Result<RateModelFit, ModelFitError> {
    check_fittable(kind, data)?;
    let model = RateModel {
        kind,
        data,
        extra_weights,
    };
    let options = LeastSquaresOptions {
        positive_parameters: kind.positive_parameters(),
        ..options.clone()
    };
    let starts: Vec<Vec<f64>> = match start {
        Some(start) => vec![start.to_vec()],
        None => start_candidates(kind, data)
            .into_iter()
            .take(STARTS_TRIED)
            .collect(),
    };
    let mut best: Option<RateModelFit> = None;
    let mut first_error: Option<FitError> = None;
    for start in starts {
        match fit_least_squares(&model, &start, &options) {
            Ok(fit) => {
                let better = match &best {
                    None => true,
                    Some(current) => match (fit.converged(), current.fit.converged()) {
                        (true, false) => true,
                        (false, true) => false,
                        _ => fit.rss < current.fit.rss,
                    },
                };
                if better {
                    best = Some(RateModelFit {
                        kind,
                        parameter_names: kind.parameter_names().to_vec(),
                        fit,
                        start,
                    });
                }
            }
            Err(error) => {
                first_error.get_or_insert(error);
            }
        }
    }
    match (best, first_error) {
        (Some(best), _) => Ok(best),
        (None, Some(error)) => Err(error.into()),
        (None, None) => Err(ModelFitError::Fit(FitError::Solver {
            message: "no usable starting values could be derived from the data".to_string(),
        })),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::least_squares::check_jacobian_scaled;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;
    use rand_distr::{Distribution, Normal};

    fn parameters_for(kind: RateModelKind) -> Vec<f64> {
        match kind {
            RateModelKind::MichaelisMenten => vec![10.0, 50.0],
            RateModelKind::SubstrateInhibition => vec![10.0, 50.0, 1.0 / 400.0],
            RateModelKind::Hill => vec![10.0, 50.0, 1.8],
            RateModelKind::Competitive | RateModelKind::Noncompetitive => vec![10.0, 50.0, 1.0 / 3.0],
            RateModelKind::Uncompetitive => vec![10.0, 50.0, 1.0 / 7.0],
            RateModelKind::Mixed => vec![10.0, 50.0, 1.0 / 3.0, 1.0 / 12.0],
            RateModelKind::Morrison => vec![10.0, 0.8],
            RateModelKind::Ic50 => vec![10.0, 0.5, 2.5, 1.2],
        }
    }

    fn matrix_data(substrate: &[f64], inhibitor: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let mut s = Vec::new();
        let mut i = Vec::new();
        for &si in substrate {
            for &ii in inhibitor {
                s.push(si);
                i.push(ii);
            }
        }
        (s, i)
    }

    fn simulated(kind: RateModelKind, truth: &[f64], noise_relative: f64, seed: u64) -> RateData {
        let (substrate, inhibitor) = matrix_data(
            &[10.0, 20.0, 40.0, 80.0, 160.0, 320.0, 640.0],
            &[0.0, 1.0, 3.0, 9.0, 27.0],
        );
        let mut data = RateData::new(
            substrate,
            inhibitor,
            vec![0.0; 35],
            None,
            Weighting::None,
            Some(0.5),
        )
        .unwrap();
        let model = RateModel {
            kind,
            data: &data,
            extra_weights: None,
        };
        let clean = model.predictions(truth);
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let normal = Normal::new(0.0, noise_relative * truth[0]).unwrap();
        data.rate = clean.iter().map(|v| v + normal.sample(&mut rng)).collect();
        data
    }

    #[test]
    fn every_analytic_jacobian_matches_finite_differences() {
        for kind in ALL_RATE_MODELS {
            let data = simulated(kind, &parameters_for(kind), 0.02, 1);
            let weighted = RateData {
                weights: (0..data.len()).map(|i| 0.5 + i as f64 / 10.0).collect(),
                ..data
            };
            let model = RateModel {
                kind,
                data: &weighted,
                extra_weights: None,
            };
            let typical = vec![0.01; kind.n_parameters()];
            let discrepancy = check_jacobian_scaled(&model, &parameters_for(kind), &typical);
            assert!(
                discrepancy.largest_relative_error < 1e-6,
                "{kind}: {discrepancy:?}"
            );
        }
    }

    #[test]
    fn morrison_has_no_inhibition_at_zero_inhibitor_and_titrates_stoichiometrically() {
        let mut gradient = [0.0; 2];
        let at_zero = predict_rate(RateModelKind::Morrison, &[1.0, 0.1], 0.0, 0.0, 1.0, &mut gradient);
        assert!((at_zero - 1.0).abs() < 1e-15);
        // Ki_app << E: activity falls linearly, 1 - I/E, until I = E (the tight-binding limit).
        let half = predict_rate(
            RateModelKind::Morrison,
            &[1.0, 1e-6],
            0.0,
            0.5,
            1.0,
            &mut gradient,
        );
        assert!((half - 0.5).abs() < 1e-5, "{half}");
        // Ki_app >> E: the classical hyperbola Ki/(Ki + I).
        let classical = predict_rate(
            RateModelKind::Morrison,
            &[1.0, 100.0],
            0.0,
            100.0,
            1e-6,
            &mut gradient,
        );
        assert!((classical - 0.5).abs() < 1e-6, "{classical}");
    }

    /// The feedback transform is the derivative of a correct-and-refit fixed point. Rates are
    /// "corrected" by the fitted law itself, `r_i = y_i (1 + c K/(K + S_i))` (a made-up correction
    /// that, like the depletion correction, moves with Km mostly at low [S]); the fixed point
    /// `theta = fit(r(theta))` is found by iteration for the data and for each datum nudged, and
    /// the numerical `d theta / d y` must match `T (J'WJ)^-1 J'W D` (`D = dr/dy`), the formula
    /// behind [`RateFeedback`]; the plain `(J'WJ)^-1 J'W D` must not.
    #[test]
    fn the_feedback_transform_is_the_derivative_of_the_correct_and_refit_fixed_point() {
        let kind = RateModelKind::MichaelisMenten;
        let strength = 0.4;
        let levels = [8.0, 16.0, 32.0, 64.0, 128.0, 256.0, 512.0, 1024.0];
        let substrate: Vec<f64> = levels.iter().flat_map(|s| [*s; 3]).collect();
        let n = substrate.len();
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let noise = Normal::new(0.0, 0.02).unwrap();
        let observed: Vec<f64> = substrate
            .iter()
            .map(|s| {
                0.06 * s / (80.0 + s) * (1.0 + noise.sample(&mut rng)) / (1.0 + strength * 80.0 / (80.0 + s))
            })
            .collect();
        let sds: Vec<f64> = substrate.iter().map(|s| 1e-3 * (1.0 + s / 500.0)).collect();
        let corrected = |y: &[f64], theta: &[f64]| -> Vec<f64> {
            y.iter()
                .zip(&substrate)
                .map(|(y, s)| y * (1.0 + strength * theta[1] / (theta[1] + s)))
                .collect()
        };
        let data_with = |rates: Vec<f64>| {
            RateData::new(
                substrate.clone(),
                vec![0.0; n],
                rates,
                Some(&sds),
                Weighting::RateSe,
                None,
            )
            .unwrap()
        };
        let options = LeastSquaresOptions::default();
        let fixed_point = |y: &[f64]| -> Vec<f64> {
            let mut theta = vec![0.06, 80.0];
            for _ in 0..200 {
                let data = data_with(corrected(y, &theta));
                let next = fit_rate_model(kind, &data, Some(&theta), None, &options)
                    .unwrap()
                    .fit
                    .parameters;
                let change = next
                    .iter()
                    .zip(&theta)
                    .map(|(a, b)| ((a - b) / b).abs())
                    .fold(0.0, f64::max);
                theta = next;
                if change < 1e-13 {
                    break;
                }
            }
            theta
        };
        let theta = fixed_point(&observed);
        // Numerical d theta / d y_j.
        let mut numerical = DMatrix::zeros(2, n);
        for j in 0..n {
            let step = 1e-5 * observed[j];
            let mut up = observed.clone();
            up[j] += step;
            let mut down = observed.clone();
            down[j] -= step;
            let (high, low) = (fixed_point(&up), fixed_point(&down));
            for parameter in 0..2 {
                numerical[(parameter, j)] = (high[parameter] - low[parameter]) / (2.0 * step);
            }
        }
        // The formula at the fixed point.
        let mut data = data_with(corrected(&observed, &theta));
        data.feedback = Some(RateFeedback {
            kind,
            per_parameter: observed
                .iter()
                .zip(&substrate)
                .map(|(y, s)| vec![0.0, y * strength * s / (theta[1] + s).powi(2)])
                .collect(),
        });
        let model = RateModel {
            kind,
            data: &data,
            extra_weights: None,
        };
        let transform = model.feedback_transform(&theta).unwrap();
        let mut jacobian = DMatrix::zeros(n, 2);
        model.jacobian(&theta, &mut jacobian);
        // J'W D e_j = Jw' sqrt(w_j) D_j e_j.
        let scaled = DMatrix::from_fn(n, n, |i, j| {
            if i == j {
                model.root_weight(i) * (1.0 + strength * theta[1] / (theta[1] + substrate[i]))
            } else {
                0.0
            }
        });
        let plain = (jacobian.transpose() * &jacobian).try_inverse().unwrap() * jacobian.transpose() * scaled;
        let predicted = &transform * &plain;
        let relative = |a: &DMatrix<f64>| (a - &numerical).norm() / numerical.norm();
        // Gauss-Newton drops the residuals' second-order term, which is of the residuals' size
        // (2% noise here): agreement to a few parts in 1000 (6e-7 with the noise taken out),
        // against 4% without the feedback.
        assert!(relative(&predicted) < 5e-3, "fed back {:e}", relative(&predicted));
        assert!(relative(&plain) > 0.03, "plain {:e}", relative(&plain));
        // The feedback is negative here (the correction rises with Km where the law falls): Km's
        // variance shrinks.
        assert!(transform[(1, 1)].abs() < 1.0, "{transform}");
    }

    #[test]
    fn each_model_recovers_its_noiseless_truth() {
        for kind in ALL_RATE_MODELS {
            let truth = parameters_for(kind);
            let data = simulated(kind, &truth, 0.0, 1);
            let fit = fit_rate_model(kind, &data, None, None, &LeastSquaresOptions::default()).unwrap();
            assert!(fit.converged(), "{kind}: {}", fit.fit.stop_reason);
            for (index, (&estimate, &true_value)) in fit.fit.parameters.iter().zip(&truth).enumerate() {
                assert!(
                    (estimate - true_value).abs() <= 1e-6 * true_value.abs().max(1e-3),
                    "{kind} parameter {index}: {estimate} vs {true_value}"
                );
            }
        }
    }

    #[test]
    fn weights_follow_the_chosen_scheme_and_bad_weights_are_errors() {
        let data = RateData::new(
            vec![1.0, 2.0],
            vec![],
            vec![2.0, 4.0],
            Some(&[0.5, 0.25]),
            Weighting::Relative,
            None,
        )
        .unwrap();
        assert_eq!(data.weights, vec![0.25, 1.0 / 16.0]);
        let replicate = RateData::new(
            vec![1.0, 2.0],
            vec![],
            vec![2.0, 4.0],
            Some(&[0.5, 0.25]),
            Weighting::ReplicateSd,
            None,
        )
        .unwrap();
        assert_eq!(replicate.weights, vec![4.0, 16.0]);
        // A near-zero SD is raised to a quarter of the median SD (median of 0.5, 0.001, 0.4 is 0.4).
        let floored = RateData::new(
            vec![1.0, 2.0, 3.0],
            vec![],
            vec![2.0, 4.0, 5.0],
            Some(&[0.5, 0.001, 0.4]),
            Weighting::ReplicateSd,
            None,
        )
        .unwrap();
        assert!((floored.weights[1] - 1.0 / (0.1f64 * 0.1)).abs() < 1e-9);
        assert_eq!(
            RateData::new(vec![1.0], vec![], vec![0.0], None, Weighting::Relative, None),
            Err(RateDataError::RelativeWeightNeedsPositiveRate { index: 0, value: 0.0 })
        );
        assert_eq!(
            RateData::new(vec![1.0], vec![], vec![1.0], None, Weighting::ReplicateSd, None),
            Err(RateDataError::ReplicateSdMissing)
        );
        assert!(matches!(
            fit_rate_model(
                RateModelKind::Competitive,
                &RateData::new(
                    vec![1.0, 2.0, 3.0, 4.0],
                    vec![],
                    vec![1.0; 4],
                    None,
                    Weighting::None,
                    None
                )
                .unwrap(),
                None,
                None,
                &LeastSquaresOptions::default()
            ),
            Err(ModelFitError::InhibitorNotVaried { distinct: 1, .. })
        ));
    }

    // NIST/ITL StRD nonlinear regression, Misra1d.dat (https://www.itl.nist.gov/div898/strd/nls/),
    // copied from the project's reference folder: y = b1 b2 x / (1 + b2 x), so Vmax = b1 and
    // Km = 1/b2.
    const MISRA1D_X: [f64; 14] = [
        77.6, 114.9, 141.1, 190.8, 239.9, 289.0, 332.8, 378.4, 434.8, 477.3, 536.8, 593.1, 689.1, 760.0,
    ];
    const MISRA1D_Y: [f64; 14] = [
        10.07, 14.73, 17.94, 23.93, 29.61, 35.18, 40.02, 44.82, 50.76, 55.05, 61.01, 66.40, 75.47, 81.78,
    ];

    #[test]
    fn nist_misra1d_through_the_rate_model_to_six_digits() {
        let data = RateData::new(
            MISRA1D_X.to_vec(),
            vec![],
            MISRA1D_Y.to_vec(),
            None,
            Weighting::None,
            None,
        )
        .unwrap();
        let fit = fit_rate_model(
            RateModelKind::MichaelisMenten,
            &data,
            None,
            None,
            &LeastSquaresOptions::default(),
        )
        .unwrap();
        assert!(fit.converged());
        // Certified: b1 = 4.3736970754E+02 (SD 3.6489174345E+00), b2 = 3.0227324449E-04
        // (SD 2.9334354479E-06); Km = 1/b2 and se(Km) = se(b2)/b2^2 (exact for the asymptotic
        // covariance, which transforms with the Jacobian of the map).
        let b2 = 3.0227324449E-04;
        let se_b2 = 2.9334354479E-06;
        let relative = |a: f64, b: f64| (a / b - 1.0).abs();
        let se = fit.fit.standard_errors.as_ref().unwrap();
        assert!(relative(fit.fit.parameters[0], 4.3736970754E+02) < 1e-7);
        assert!(relative(fit.fit.parameters[1], 1.0 / b2) < 1e-7);
        assert!(relative(se[0], 3.6489174345E+00) < 1e-6);
        assert!(relative(se[1], se_b2 / (b2 * b2)) < 1e-6);
        assert!(relative(fit.fit.residual_standard_deviation.unwrap(), 6.8568272111E-02) < 1e-7);
    }

    #[test]
    fn puromycin_treated_through_the_rate_model_matches_published_estimates() {
        // Puromycin, treated (Treloar 1974; Bates and Watts 1988, Appendix A1.3), as in the R datasets
        // source Puromycin.R, copied from the project's reference folder. Published: Vm = 212.68
        // (SE 6.947), K = 0.06412 (SE 8.281e-03), residual SE 10.93 on 10 df.
        let data = RateData::new(
            vec![
                0.02, 0.02, 0.06, 0.06, 0.11, 0.11, 0.22, 0.22, 0.56, 0.56, 1.10, 1.10,
            ],
            vec![],
            vec![
                76.0, 47.0, 97.0, 107.0, 123.0, 139.0, 159.0, 152.0, 191.0, 201.0, 207.0, 200.0,
            ],
            None,
            Weighting::None,
            None,
        )
        .unwrap();
        let fit = fit_rate_model(
            RateModelKind::MichaelisMenten,
            &data,
            None,
            None,
            &LeastSquaresOptions::default(),
        )
        .unwrap();
        let se = fit.fit.standard_errors.as_ref().unwrap();
        assert!((fit.fit.parameters[0] - 212.68).abs() < 5e-3);
        assert!((fit.fit.parameters[1] - 0.06412).abs() < 5e-6);
        assert!((se[0] - 6.947).abs() < 5e-4);
        assert!((se[1] - 0.008281).abs() < 5e-7);
        assert!((fit.fit.residual_standard_deviation.unwrap() - 10.93).abs() < 5e-3);
    }

    #[test]
    fn weighted_fits_minimise_the_weighted_sum_of_squares() {
        // Relative weights on data with 5% multiplicative scatter: at the optimum the weighted
        // gradient J^T r vanishes, and every small step raises sum w (f - v)^2.
        let truth = [10.0, 50.0];
        let substrate: Vec<f64> = [5.0, 10.0, 25.0, 50.0, 100.0, 250.0, 500.0]
            .iter()
            .flat_map(|&s| [s, s])
            .collect();
        let mut rng = ChaCha8Rng::seed_from_u64(9);
        let scatter = Normal::new(0.0, 0.05).unwrap();
        let rate: Vec<f64> = substrate
            .iter()
            .map(|s| truth[0] * s / (truth[1] + s) * (1.0 + scatter.sample(&mut rng)))
            .collect();
        let data = RateData::new(substrate, vec![], rate, None, Weighting::Relative, None).unwrap();
        let fit = fit_rate_model(
            RateModelKind::MichaelisMenten,
            &data,
            None,
            None,
            &LeastSquaresOptions::default(),
        )
        .unwrap();
        let model = RateModel {
            kind: RateModelKind::MichaelisMenten,
            data: &data,
            extra_weights: None,
        };
        let weighted_rss = |parameters: &[f64]| {
            let mut residuals = vec![0.0; data.len()];
            model.residuals(parameters, &mut residuals);
            residuals.iter().map(|r| r * r).sum::<f64>()
        };
        let best = weighted_rss(&fit.fit.parameters);
        assert!((best - fit.fit.rss).abs() <= 1e-12 * best);
        for (index, sign) in [(0, 1.0), (0, -1.0), (1, 1.0), (1, -1.0)] {
            let mut moved = fit.fit.parameters.clone();
            moved[index] *= 1.0 + sign * 1e-4;
            assert!(weighted_rss(&moved) > best);
        }
        // Against the relative-error truth: Km within 15% at 5% scatter on 14 points (stated tolerance).
        assert!(
            (fit.fit.parameters[1] / 50.0 - 1.0).abs() < 0.15,
            "{:?}",
            fit.fit.parameters
        );
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]
        /// Analytic Jacobians agree with central differences over a wide range of parameter
        /// scales, for every model.
        #[test]
        fn jacobians_match_finite_differences_at_random_parameters(
            scale in 0.1f64..10.0,
            shape in 0.3f64..3.0,
            model_index in 0usize..9,
        ) {
            let kind = ALL_RATE_MODELS[model_index];
            let mut parameters = parameters_for(kind);
            parameters[0] *= scale;
            let last = parameters.len() - 1;
            parameters[last] *= shape;
            let data = simulated(kind, &parameters_for(kind), 0.02, 3);
            let model = RateModel { kind, data: &data, extra_weights: None };
            let typical = vec![0.01; kind.n_parameters()];
            let discrepancy = check_jacobian_scaled(&model, &parameters, &typical);
            proptest::prop_assert!(discrepancy.largest_relative_error < 1e-6, "{kind}: {discrepancy:?}");
        }
    }

    #[test]
    fn names_round_trip() {
        for kind in ALL_RATE_MODELS {
            assert_eq!(RateModelKind::from_name(kind.name()), Some(kind));
        }
        assert_eq!(RateModelKind::from_name("linear"), None);
    }
}
