//! Uncertainty and robustness for the rate laws of `models`: robust loss by iteratively reweighted
//! least squares, profile-likelihood 95% intervals, a seeded residual bootstrap, and the reported
//! constants (inverse constants turned back into Ki, Ki', Ksi).
//!
//! # Methods
//! * Robust loss (Huber): with `r_i` the weighted residuals and `s = 1.4826 MAD(r)`, each point's
//!   weight is multiplied by `min(1, c s / |r_i|)`, `c = 1.345` (95% efficiency under normal
//!   errors), and the fit is repeated until the parameters change by less than `1e-9` relative (at
//!   most 50 rounds). Standard errors then come from the final reweighted fit.
//! * Profile likelihood: for parameter j, `RSS_j(t) = min RSS` with `theta_j = t` fixed and the others
//!   re-optimised; the 95% interval is `{t: RSS_j(t) <= RSS_min (1 + F(0.95; 1, n - p) / (n - p))}`.
//!   Endpoints are bracketed by doubling steps (starting at one standard error, on the log scale
//!   for positive parameters) and refined by the Illinois variant of regula falsi on
//!   `RSS_j(t) - threshold` (the profile is close to quadratic, so a few steps suffice). An inverse constant (1/Ki ...) is not
//!   searched below 0: if the threshold is not crossed at 0, the constant itself is unbounded above.
//!   An endpoint not found within the search is reported as missing (`null`), never invented.
//! * Residual bootstrap: with fitted values `f_i`, weights `w_i` and weighted residuals
//!   `e_i = sqrt(w_i) (v_i - f_i) sqrt(n / (n - p))` (inflated for the degrees of freedom used),
//!   each replicate draws `e*` with replacement, sets `v*_i = f_i + e*_i / sqrt(w_i)`, refits from the
//!   optimum (weights kept fixed), and the 2.5th and 97.5th percentiles of the converged replicates
//!   form the interval. The generator is ChaCha8 seeded by the caller, so a run repeats exactly.
//!
//! Assumptions: as in `models`; the bootstrap assumes exchangeable weighted errors.
//!
//! References: Huber 1964, Ann Math Stat 35:73; Holland and Welsch 1977, Commun Stat A6:813
//! (iteratively reweighted least squares); Bates and Watts 1988, "Nonlinear Regression Analysis and
//! Its Applications", Wiley (profile intervals); Efron and Tibshirani 1993, "An Introduction to the
//! Bootstrap", Chapman & Hall (residual resampling, percentile intervals). Volume and page numbers
//! are from memory.

use nalgebra::DMatrix;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::Serialize;

use super::least_squares::{fit_least_squares, LeastSquaresOptions, ResidualModel};
use super::models::{fit_rate_model, ModelFitError, RateData, RateModel, RateModelFit, RateModelKind};
pub use crate::config::{BootstrapSettings, RobustLoss};
use crate::core::stats::{f_quantile, median, percentile, summary, t_quantile_975};

/// Huber's tuning constant (95% efficiency at the normal distribution).
pub const HUBER_TUNING: f64 = 1.345;
/// MAD to standard deviation at the normal distribution.
const MAD_TO_SD: f64 = 1.4826;
const MAXIMUM_REWEIGHTING_ROUNDS: usize = 50;

/// A fit after optional robust reweighting, with the per-point multipliers it ended with.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RobustFit {
    pub fit: RateModelFit,
    /// Robust multipliers of the weights (`None` for plain least squares).
    pub robust_weights: Option<Vec<f64>>,
    /// Reweighting rounds used.
    pub rounds: usize,
    /// Points whose weight was cut below 1 (possible outliers), by index.
    pub downweighted_points: Vec<usize>,
}

/// Fits `kind` with the chosen loss (see the module docs).
pub fn fit_with_loss(
    kind: RateModelKind,
    data: &RateData,
    loss: RobustLoss,
    options: &LeastSquaresOptions,
) -> Result<RobustFit, ModelFitError> {
    let mut fit = fit_rate_model(kind, data, None, None, options)?;
    if loss == RobustLoss::None {
        return Ok(RobustFit {
            fit,
            robust_weights: None,
            rounds: 0,
            downweighted_points: Vec::new(),
        });
    }
    let mut multipliers = vec![1.0; data.len()];
    let mut rounds = 0;
    while rounds < MAXIMUM_REWEIGHTING_ROUNDS {
        rounds += 1;
        let model = RateModel {
            kind,
            data,
            extra_weights: None,
        };
        let predictions = model.predictions(&fit.fit.parameters);
        let residuals: Vec<f64> = predictions
            .iter()
            .zip(&data.rate)
            .zip(&data.weights)
            .map(|((f, v), w)| w.sqrt() * (f - v))
            .collect();
        let centre = median(residuals.iter().copied()).unwrap_or(f64::NAN);
        let scale = MAD_TO_SD * median(residuals.iter().map(|r| (r - centre).abs())).unwrap_or(f64::NAN);
        if !(scale.is_finite() && scale > 0.0) {
            break;
        }
        let new_multipliers: Vec<f64> = residuals
            .iter()
            .map(|r| {
                let standardised = r.abs() / (HUBER_TUNING * scale);
                if standardised <= 1.0 {
                    1.0
                } else {
                    1.0 / standardised
                }
            })
            .collect();
        let refit = fit_rate_model(
            kind,
            data,
            Some(&fit.fit.parameters),
            Some(&new_multipliers),
            options,
        )?;
        let change = refit
            .fit
            .parameters
            .iter()
            .zip(&fit.fit.parameters)
            .map(|(new, old)| (new - old).abs() / old.abs().max(1e-300))
            .fold(0.0, f64::max);
        fit = refit;
        multipliers = new_multipliers;
        if change < 1e-9 {
            break;
        }
    }
    let downweighted_points = multipliers
        .iter()
        .enumerate()
        .filter(|(_, &m)| m < 1.0)
        .map(|(index, _)| index)
        .collect();
    Ok(RobustFit {
        fit,
        robust_weights: Some(multipliers),
        rounds,
        downweighted_points,
    })
}

/// The model with parameter `fixed_index` held at `fixed_value`; the others are free.
struct ProfileModel<'model> {
    model: &'model RateModel<'model>,
    fixed_index: usize,
    fixed_value: f64,
}

impl ProfileModel<'_> {
    fn full(&self, free: &[f64]) -> Vec<f64> {
        let mut full = Vec::with_capacity(free.len() + 1);
        full.extend_from_slice(&free[..self.fixed_index]);
        full.push(self.fixed_value);
        full.extend_from_slice(&free[self.fixed_index..]);
        full
    }
}

impl ResidualModel for ProfileModel<'_> {
    fn n_parameters(&self) -> usize {
        self.model.n_parameters() - 1
    }
    fn n_observations(&self) -> usize {
        self.model.n_observations()
    }
    fn residuals(&self, parameters: &[f64], residuals: &mut [f64]) {
        self.model.residuals(&self.full(parameters), residuals)
    }
    fn jacobian(&self, parameters: &[f64], jacobian: &mut DMatrix<f64>) {
        let mut full = DMatrix::zeros(self.model.n_observations(), self.model.n_parameters());
        self.model.jacobian(&self.full(parameters), &mut full);
        let reduced = full.remove_column(self.fixed_index);
        jacobian.copy_from(&reduced);
    }
}

/// A profile-likelihood interval in the fitted parametrisation; a missing end is `None`.
pub type ProfileInterval = [Option<f64>; 2];

/// Whether a fitted parameter is an inverse constant (1/Ki, 1/Ki_prime, 1/Ksi).
pub fn is_inverse_constant(name: &str) -> bool {
    name.starts_with("1/")
}

const PROFILE_DOUBLINGS: usize = 40;
const PROFILE_REFINEMENTS: usize = 40;

/// Profile-likelihood 95% intervals of every fitted parameter (see the module docs). `robust_weights`
/// are the multipliers a robust fit ended with (the profile is taken on that weighted RSS).
pub fn profile_intervals(
    fit: &RateModelFit,
    data: &RateData,
    robust_weights: Option<&[f64]>,
    options: &LeastSquaresOptions,
) -> Vec<Option<ProfileInterval>> {
    let p = fit.fit.n_parameters;
    let n = fit.fit.n_observations;
    let mut intervals = vec![None; p];
    if n <= p || !fit.converged() || p < 2 {
        return intervals;
    }
    let dof = (n - p) as f64;
    let Ok(quantile) = f_quantile(0.95, 1.0, dof) else {
        return intervals;
    };
    let threshold = fit.fit.rss * (1.0 + quantile / dof);
    let model = RateModel {
        kind: fit.kind,
        data,
        extra_weights: robust_weights,
    };
    let positive = fit.kind.positive_parameters();
    for (index, interval) in intervals.iter_mut().enumerate() {
        let is_positive = positive.contains(&index);
        let is_inverse = is_inverse_constant(fit.parameter_names[index]);
        let value = fit.fit.parameters[index];
        let se = fit
            .fit
            .standard_errors
            .as_ref()
            .map(|se| se[index])
            .filter(|se| se.is_finite() && *se > 0.0);
        // Work on the log scale for positive parameters.
        let (centre, step) = if is_positive {
            (value.ln(), se.map_or(0.1, |se| (se / value).clamp(1e-6, 1.0)))
        } else {
            (value, se.unwrap_or(0.1 * value.abs().max(1e-6)))
        };
        let to_value = |z: f64| if is_positive { z.exp() } else { z };
        let free_options = LeastSquaresOptions {
            positive_parameters: positive
                .iter()
                .filter(|&&j| j != index)
                .map(|&j| if j > index { j - 1 } else { j })
                .collect(),
            max_iterations: 200,
            // The threshold test needs RSS to about 1e-10 relative, not to rounding level.
            relative_reduction_tolerance: options.relative_reduction_tolerance.max(1e-12),
            relative_step_tolerance: options.relative_step_tolerance.max(1e-10),
            ..options.clone()
        };
        let mut free_start: Vec<f64> = fit.fit.parameters.clone();
        free_start.remove(index);
        let base_start = free_start.clone();
        let profile_rss = |fixed: f64, warm: &mut Vec<f64>| -> Option<f64> {
            let profile = ProfileModel {
                model: &model,
                fixed_index: index,
                fixed_value: fixed,
            };
            let result = fit_least_squares(&profile, warm, &free_options).ok()?;
            if !result.rss.is_finite() {
                return None;
            }
            *warm = result.parameters.clone();
            Some(result.rss)
        };
        let mut ends = [None, None];
        for (side, direction) in [(0usize, -1.0f64), (1, 1.0)] {
            let mut warm = base_start.clone();
            let mut inside = centre;
            let mut inside_excess = fit.fit.rss - threshold;
            let mut distance = step;
            let mut outside = None;
            let mut hit_zero = false;
            for _ in 0..PROFILE_DOUBLINGS {
                let mut candidate = centre + direction * distance;
                if is_inverse && direction < 0.0 && candidate <= 0.0 {
                    candidate = 0.0;
                    hit_zero = true;
                }
                match profile_rss(to_value(candidate), &mut warm) {
                    Some(rss) if rss > threshold => {
                        outside = Some((candidate, rss - threshold));
                        break;
                    }
                    Some(rss) => {
                        inside = candidate;
                        inside_excess = rss - threshold;
                    }
                    None => break,
                }
                if hit_zero {
                    break;
                }
                distance *= 2.0;
            }
            ends[side] = match outside {
                Some((outer, outer_excess)) => {
                    let mut warm = base_start.clone();
                    Some(to_value(illinois(
                        (inside, inside_excess),
                        (outer, outer_excess),
                        threshold,
                        |z| profile_rss(to_value(z), &mut warm).map(|rss| rss - threshold),
                    )))
                }
                // An inverse constant still inside the region at 0: the lower end is 0 (the
                // constant itself has no upper bound).
                None if hit_zero && inside == 0.0 => Some(0.0),
                None => None,
            };
        }
        *interval = Some(ends);
    }
    intervals
}

/// Root of `g` between `inner` (g <= 0) and `outer` (g > 0) by the Illinois method; stops when
/// `|g| <= 1e-10 scale` or the bracket is negligible; falls back to the bracket's midpoint when `g`
/// cannot be evaluated.
fn illinois(inner: (f64, f64), outer: (f64, f64), scale: f64, mut g: impl FnMut(f64) -> Option<f64>) -> f64 {
    let ((mut a, mut ga), (mut b, mut gb)) = (inner, outer);
    let mut last_side = 0i8;
    for _ in 0..PROFILE_REFINEMENTS {
        let c = if gb != ga {
            b - gb * (b - a) / (gb - ga)
        } else {
            0.5 * (a + b)
        };
        let Some(gc) = g(c) else {
            return 0.5 * (a + b);
        };
        if gc.abs() <= 1e-10 * scale || (b - a).abs() <= 1e-14 * (a.abs() + b.abs()) {
            return c;
        }
        if gc > 0.0 {
            b = c;
            gb = gc;
            if last_side == 1 {
                ga *= 0.5;
            }
            last_side = 1;
        } else {
            a = c;
            ga = gc;
            if last_side == -1 {
                gb *= 0.5;
            }
            last_side = -1;
        }
    }
    if ga.abs() < gb.abs() {
        a
    } else {
        b
    }
}

/// Bootstrap results in the fitted parametrisation.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BootstrapResult {
    pub replicates: usize,
    pub converged: usize,
    pub seed: u64,
    /// Percentile 95% interval per fitted parameter (`None` with fewer than 20 converged replicates).
    pub intervals: Vec<Option<[f64; 2]>>,
    /// Standard deviation of the replicates per fitted parameter.
    pub standard_deviations: Vec<Option<f64>>,
}

/// Residual bootstrap (see the module docs). `progress(done, total)` is called after each replicate.
pub fn residual_bootstrap(
    fit: &RateModelFit,
    data: &RateData,
    robust_weights: Option<&[f64]>,
    settings: BootstrapSettings,
    options: &LeastSquaresOptions,
    progress: &mut dyn FnMut(usize, usize),
) -> BootstrapResult {
    let p = fit.fit.n_parameters;
    let n = data.len();
    let model = RateModel {
        kind: fit.kind,
        data,
        extra_weights: robust_weights,
    };
    let fitted = model.predictions(&fit.fit.parameters);
    let inflation = if n > p {
        (n as f64 / (n - p) as f64).sqrt()
    } else {
        1.0
    };
    let residuals: Vec<f64> = fitted
        .iter()
        .zip(&data.rate)
        .zip(&data.weights)
        .map(|((f, v), w)| w.sqrt() * (v - f) * inflation)
        .collect();
    let mut generator = ChaCha8Rng::seed_from_u64(settings.seed);
    let mut samples: Vec<Vec<f64>> = vec![Vec::with_capacity(settings.replicates); p];
    let mut resampled = data.clone();
    for replicate in 0..settings.replicates {
        for ((rate, fitted_value), weight) in resampled.rate.iter_mut().zip(&fitted).zip(&data.weights) {
            let drawn = residuals[generator.random_range(0..n)];
            *rate = fitted_value + drawn / weight.sqrt();
        }
        if let Ok(refit) = fit_rate_model(
            fit.kind,
            &resampled,
            Some(&fit.fit.parameters),
            robust_weights,
            options,
        ) {
            if refit.converged() && refit.fit.parameters.iter().all(|v| v.is_finite()) {
                for (column, value) in samples.iter_mut().zip(&refit.fit.parameters) {
                    column.push(*value);
                }
            }
        }
        progress(replicate + 1, settings.replicates);
    }
    let converged = samples.first().map_or(0, Vec::len);
    let mut intervals = Vec::with_capacity(p);
    let mut standard_deviations = Vec::with_capacity(p);
    for column in &mut samples {
        column.sort_by(f64::total_cmp);
        if column.len() >= 20 {
            intervals.push(Some([percentile(column, 0.025), percentile(column, 0.975)]));
        } else {
            intervals.push(None);
        }
        standard_deviations.push(summary(column).and_then(|s| s.sd));
    }
    BootstrapResult {
        replicates: settings.replicates,
        converged,
        seed: settings.seed,
        intervals,
        standard_deviations,
    }
}

/// What a reported constant measures, for its unit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Dimension {
    /// A rate (Vmax, v0, top, bottom).
    Rate,
    /// A substrate concentration (Km, K, Ksi).
    Substrate,
    /// An inhibitor concentration (Ki, Ki_prime, Ki_app, IC50).
    Inhibitor,
    /// A pure number (h).
    Dimensionless,
}

/// A reported constant with every interval computed for it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ConstantEstimate {
    pub name: String,
    pub value: f64,
    pub dimension: Dimension,
    /// Asymptotic standard error (delta method for constants reported as inverses of fitted ones).
    pub se: Option<f64>,
    /// Asymptotic 95% interval `value +- t(0.975, n - p) se`.
    pub ci95: Option<[f64; 2]>,
    /// Profile-likelihood 95% interval; a `None` end is unbounded or not found.
    pub ci95_profile: Option<ProfileInterval>,
    /// Bootstrap percentile 95% interval.
    pub ci95_bootstrap: Option<[f64; 2]>,
    /// False when the data do not pin this constant down.
    pub determined: bool,
}

/// Relative standard error above which a constant counts as not determined (as for Michaelis-Menten).
pub const MAXIMUM_RELATIVE_SE: f64 = 0.5;

/// What a rate-law constant is measured in, by its name.
pub fn dimension_of(name: &str) -> Dimension {
    match name {
        "Vmax" | "v0" | "top" | "bottom" => Dimension::Rate,
        "Km" | "K" | "Ksi" => Dimension::Substrate,
        "h" => Dimension::Dimensionless,
        _ => Dimension::Inhibitor,
    }
}

/// Turns fitted parameters into reported constants: inverse constants `1/X` become `X` with
/// `se(X) = se(1/X) / (1/X)^2` and intervals mapped through `1/x` (a lower end of 0 maps to an
/// unbounded upper end).
pub fn reported_constants(
    fit: &RateModelFit,
    profile: Option<&[Option<ProfileInterval>]>,
    bootstrap: Option<&BootstrapResult>,
) -> Vec<ConstantEstimate> {
    let dof = fit.fit.degrees_of_freedom;
    let quantile = t_quantile_975(dof).ok();
    let converged = fit.converged();
    fit.parameter_names
        .iter()
        .enumerate()
        .map(|(index, &fitted_name)| {
            let fitted_value = fit.fit.parameters[index];
            let fitted_se = fit
                .fit
                .standard_errors
                .as_ref()
                .map(|se| se[index])
                .filter(|se| se.is_finite());
            let profile_interval = profile.and_then(|p| p.get(index).copied().flatten());
            let bootstrap_interval = bootstrap.and_then(|b| b.intervals.get(index).copied().flatten());
            let (name, value, se, ci95_profile, ci95_bootstrap) = if is_inverse_constant(fitted_name) {
                let name = fitted_name.trim_start_matches("1/").to_string();
                let value = 1.0 / fitted_value;
                let se = fitted_se.map(|se| se / (fitted_value * fitted_value));
                let invert = |x: Option<f64>| x.filter(|&x| x > 0.0).map(|x| 1.0 / x);
                let profile = profile_interval.map(|[lo, hi]| [invert(hi), invert(lo)]);
                let bootstrap = bootstrap_interval
                    .and_then(|[lo, hi]| (lo > 0.0 && hi > 0.0).then(|| [1.0 / hi, 1.0 / lo]));
                (name, value, se, profile, bootstrap)
            } else {
                (
                    fitted_name.to_string(),
                    fitted_value,
                    fitted_se,
                    profile_interval,
                    bootstrap_interval,
                )
            };
            let ci95 = match (se, quantile) {
                (Some(se), Some(q)) if value.is_finite() => Some([value - q * se, value + q * se]),
                _ => None,
            };
            let relative_ok =
                se.is_some_and(|se| value.is_finite() && se <= MAXIMUM_RELATIVE_SE * value.abs());
            let profile_ok = ci95_profile.is_none_or(|[lo, hi]| lo.is_some() && hi.is_some());
            ConstantEstimate {
                dimension: dimension_of(&name),
                name,
                value,
                se,
                ci95,
                ci95_profile,
                ci95_bootstrap,
                determined: converged && value.is_finite() && value > 0.0 && relative_ok && profile_ok,
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::models::Weighting;
    use rand_distr::{Distribution, Normal};

    fn mm_data(km: f64, noise: f64, seed: u64, outlier: Option<(usize, f64)>) -> RateData {
        let substrate: Vec<f64> = [0.2, 0.5, 1.0, 2.0, 5.0]
            .iter()
            .flat_map(|f| [f * km, f * km, f * km])
            .collect();
        let mut generator = ChaCha8Rng::seed_from_u64(seed);
        let normal = Normal::new(0.0, noise).unwrap();
        let mut rate: Vec<f64> = substrate
            .iter()
            .map(|s| 10.0 * s / (km + s) + normal.sample(&mut generator))
            .collect();
        if let Some((index, shift)) = outlier {
            rate[index] += shift;
        }
        RateData::new(substrate, vec![], rate, None, Weighting::None, None).unwrap()
    }

    #[test]
    fn huber_loss_resists_an_outlier_that_pulls_least_squares() {
        let data = mm_data(50.0, 0.1, 3, Some((14, -4.0)));
        let options = LeastSquaresOptions::default();
        let plain = fit_with_loss(RateModelKind::MichaelisMenten, &data, RobustLoss::None, &options).unwrap();
        let robust =
            fit_with_loss(RateModelKind::MichaelisMenten, &data, RobustLoss::Huber, &options).unwrap();
        let plain_error = (plain.fit.fit.parameters[0] - 10.0).abs();
        let robust_error = (robust.fit.fit.parameters[0] - 10.0).abs();
        assert!(
            robust_error < 0.5 * plain_error,
            "{robust_error} vs {plain_error}"
        );
        assert!(robust.downweighted_points.contains(&14));
    }

    #[test]
    fn profile_interval_brackets_the_estimate_and_sits_on_the_threshold() {
        let data = mm_data(50.0, 0.2, 5, None);
        let options = LeastSquaresOptions::default();
        let fit = fit_rate_model(RateModelKind::MichaelisMenten, &data, None, None, &options).unwrap();
        let intervals = profile_intervals(&fit, &data, None, &options);
        let [lo, hi] = intervals[1].unwrap();
        let (lo, hi) = (lo.unwrap(), hi.unwrap());
        let km = fit.fit.parameters[1];
        assert!(lo < km && km < hi);
        // The profile interval of Km is skewed to the right (Km is bounded below by 0): common
        // practice for saturation curves, and what Bates and Watts show for Puromycin.
        assert!(hi - km > km - lo);
        // At each end the re-optimised RSS equals the threshold.
        let n = data.len() as f64;
        let threshold = fit.fit.rss * (1.0 + f_quantile(0.95, 1.0, n - 2.0).unwrap() / (n - 2.0));
        let model = RateModel {
            kind: RateModelKind::MichaelisMenten,
            data: &data,
            extra_weights: None,
        };
        for end in [lo, hi] {
            let profile = ProfileModel {
                model: &model,
                fixed_index: 1,
                fixed_value: end,
            };
            let refit = fit_least_squares(&profile, &[fit.fit.parameters[0]], &options).unwrap();
            assert!(
                (refit.rss / threshold - 1.0).abs() < 1e-6,
                "{} vs {threshold}",
                refit.rss
            );
        }
    }

    #[test]
    fn bootstrap_is_seeded_and_close_to_the_asymptotic_interval() {
        let data = mm_data(50.0, 0.2, 7, None);
        let options = LeastSquaresOptions::default();
        let fit = fit_rate_model(RateModelKind::MichaelisMenten, &data, None, None, &options).unwrap();
        let settings = BootstrapSettings {
            replicates: 300,
            seed: 42,
        };
        let mut calls = 0;
        let first = residual_bootstrap(&fit, &data, None, settings, &options, &mut |_, _| calls += 1);
        let second = residual_bootstrap(&fit, &data, None, settings, &options, &mut |_, _| {});
        assert_eq!(calls, 300);
        assert_eq!(first, second);
        assert!(first.converged >= 295);
        let se = fit.fit.standard_errors.as_ref().unwrap()[0];
        let bootstrap_sd = first.standard_deviations[0].unwrap();
        assert!((bootstrap_sd / se - 1.0).abs() < 0.25, "{bootstrap_sd} vs {se}");
    }

    #[test]
    fn inverse_constants_are_reported_as_constants() {
        let data = RateData::new(
            vec![10.0, 20.0, 40.0, 80.0, 10.0, 20.0, 40.0, 80.0],
            vec![0.0, 0.0, 0.0, 0.0, 5.0, 5.0, 5.0, 5.0],
            vec![1.6, 2.8, 4.4, 6.1, 1.0, 1.9, 3.2, 4.9],
            None,
            Weighting::None,
            None,
        )
        .unwrap();
        let options = LeastSquaresOptions::default();
        let fit = fit_rate_model(RateModelKind::Competitive, &data, None, None, &options).unwrap();
        let constants = reported_constants(&fit, None, None);
        assert_eq!(constants[2].name, "Ki");
        let inverse = fit.fit.parameters[2];
        assert!((constants[2].value - 1.0 / inverse).abs() < 1e-12);
        let inverse_se = fit.fit.standard_errors.as_ref().unwrap()[2];
        assert!((constants[2].se.unwrap() - inverse_se / inverse.powi(2)).abs() < 1e-12);
        assert_eq!(constants[2].dimension, Dimension::Inhibitor);
    }
}
