//! Cross-plate fits (`--pool-by FACTOR[,FACTOR]`): the wells of every plate that share the pool
//! factors' values (a variant, a substrate lot) fitted together to Michaelis-Menten with one Km
//! shared by all plates and one kcat per plate.
//!
//! Model: y_pi = k_p S_pi / (Km + S_pi) for well i of plate p, with y the rate per enzyme
//! (rate / [E], 1/s, so k_p is the plate's kcat) where every well's rate is a concentration per
//! second and its enzyme is known, else the rate itself (k_p is the plate's Vmax). Unweighted least
//! squares (Levenberg-Marquardt, [`crate::fit::least_squares`]), all parameters kept positive.
//!
//! Why a kcat per plate and a shared Km: the active enzyme in a well differs from day to day
//! (dilution, storage, a new aliquot), which scales every rate of a plate by one factor; that
//! moves Vmax, and kcat computed from the nominal enzyme, but not Km, a property of the enzyme and
//! substrate under the assay's conditions. One scale per plate absorbs the plate-to-plate activity
//! so that it neither inflates the residuals nor leans on Km, and every plate's substrate series
//! informs the one Km. The between-plate CV of the per-plate kcat (sample SD over mean) then
//! measures the activity's reproducibility.
//!
//! Km's interval is clustered by plate: a plate's wells share more than their activity (its
//! substrate stock and dilution series, its temperature, its reader run, the rate estimator's
//! correction made from the plate's own fit), so its residuals are not independent evidence, and
//! the plates' Km may differ a little from each other beyond their wells' noise. The cluster-robust
//! (sandwich) covariance V = G/(G - 1) B (sum_p J_p' r_p r_p' J_p) B, B = (J'J)^-1, with plates as
//! clusters and the interval Km +- t(0.975, G - 1) SE, lets the plates' own scatter set the width
//! (Liang and Zeger 1986, Biometrika 73:13; Cameron and Miller 2015, J Human Resources 50:317;
//! from memory). It also holds when the wells' errors differ in size (the fit is unweighted). The
//! per-plate scales' own scores vanish at the optimum, so the sandwich says nothing of them: their
//! intervals stay the model-based s^2 (J'J)^-1 with t(n - P - 1) (Bates and Watts 1988, "Nonlinear
//! Regression Analysis and Its Applications", Wiley), which `km_model_based` also gives for Km.
//! The sandwich needs plates: below [`MIN_CLUSTERED_PLATES`] Km keeps the model-based interval
//! with a warning. Checked by simulation (`simulate::pooled_study`: bias and coverage over many
//! simulated campaigns; figures in DEVELOPERS.md).
//!
//! Assumptions: Km the same on every plate up to a scatter the clustering absorbs (check the
//! per-plate Km in the report), plates independent, S known up to pipetting noise.

use std::collections::BTreeMap;

use nalgebra::DMatrix;
use serde::{Deserialize, Serialize};

use super::digest::{Estimate, PlateDigest, PoolPoint};
use crate::core::stats::{chi_squared_quantile, median, summary, t_quantile_975};
use crate::fit::least_squares::{
    cluster_robust_covariance, fit_least_squares, shared_error_covariance, LeastSquaresOptions, ResidualModel,
};

/// The most pool factors `--pool-by` takes.
pub const MAX_POOL_FACTORS: usize = 8;

/// The fewest plates whose scatter sets Km's interval (the cluster-robust covariance); with fewer,
/// the sandwich's meat rests on too few plates to be trusted and Km keeps the model-based interval.
pub const MIN_CLUSTERED_PLATES: usize = 5;

/// How Km's reported interval was made.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum KmInterval {
    /// Cluster-robust by plate, t(G - 1).
    ClusteredByPlate,
    /// Model-based s^2 (J'J)^-1, t(n - P - 1): too few plates for the clustered one.
    ModelBased,
}

/// One plate of a campaign as the pooled fits see it.
#[derive(Debug, Clone, Copy)]
pub struct PoolPlate<'a> {
    /// The plate's id.
    pub plate: &'a str,
    /// The plate's manifest factors by name.
    pub factors: &'a BTreeMap<String, String>,
    /// Its digest.
    pub digest: &'a PlateDigest,
}

/// One plate's part of a pooled fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PooledPlate {
    /// The plate.
    pub plate: String,
    /// Its kcat (or Vmax) from the pooled fit; its standard error and interval carry the wells'
    /// scatter (model-based), the plate's shared blank and background errors, and Km's clustered
    /// variance where it exceeds the model-based one (the scale moves with Km).
    pub scale: Estimate,
    /// The part of `scale`'s standard error that the plate's shared blank and background errors
    /// contribute (already in `scale.se`); `None` when the plate shares none.
    #[serde(default)]
    pub shared_se: Option<f64>,
    /// Wells used.
    pub n: usize,
}

/// A pooled fit over the plates sharing the pool factors' values.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PooledFit {
    /// The pool factors' values, by factor name.
    pub key: Vec<(String, String)>,
    /// `kcat` (rates per enzyme) or `Vmax` (rates alone): what each plate's scale is.
    pub scale_name: String,
    /// The plates fitted, in run order.
    pub plates: Vec<PooledPlate>,
    /// The shared Km, with its interval clustered by plate (see `km_interval`).
    pub km: Option<Estimate>,
    /// How `km`'s interval was made.
    pub km_interval: Option<KmInterval>,
    /// The shared Km with the model-based interval (every well independent evidence), for
    /// comparison: narrower than the plates' scatter allows when plates differ.
    pub km_model_based: Option<Estimate>,
    /// Mean of the per-plate scales.
    pub scale_mean: Option<f64>,
    /// Between-plate CV of the per-plate scales (sample SD / mean); `None` below two plates.
    pub scale_cv: Option<f64>,
    /// Between-plate CV of the plates' true scales: `scale_cv` with the scales' own estimation
    /// error taken out (see [`between_plate_cv`]); `None` below three plates or without standard
    /// errors.
    #[serde(default)]
    pub scale_cv_corrected: Option<f64>,
    /// 95% interval of the between-plate CV of the plates' true scales (chi-square on the sample
    /// variance, estimation error taken out; [`between_plate_cv`]).
    #[serde(default)]
    pub scale_cv_ci95: Option<[f64; 2]>,
    /// Points fitted.
    pub n: usize,
    /// Residual SD.
    pub residual_sd: Option<f64>,
    /// What to keep in mind (plates left out, a substrate range that cannot pin Km down).
    pub warnings: Vec<String>,
    /// Why there is no fit, when there is none.
    pub error: Option<String>,
}

/// The shared-Km model in residual form: parameters `[k_1, ..., k_P, Km]`.
struct SharedKmModel<'a> {
    plate_of_point: &'a [usize],
    substrate: &'a [f64],
    observed: &'a [f64],
    n_plates: usize,
}

impl ResidualModel for SharedKmModel<'_> {
    fn n_parameters(&self) -> usize {
        self.n_plates + 1
    }
    fn n_observations(&self) -> usize {
        self.observed.len()
    }
    fn residuals(&self, parameters: &[f64], residuals: &mut [f64]) {
        let km = parameters[self.n_plates];
        for (i, residual) in residuals.iter_mut().enumerate() {
            let s = self.substrate[i];
            *residual = parameters[self.plate_of_point[i]] * s / (km + s) - self.observed[i];
        }
    }
    fn jacobian(&self, parameters: &[f64], jacobian: &mut DMatrix<f64>) {
        let km = parameters[self.n_plates];
        jacobian.fill(0.0);
        for i in 0..self.observed.len() {
            let s = self.substrate[i];
            let plate = self.plate_of_point[i];
            jacobian[(i, plate)] = s / (km + s);
            jacobian[(i, self.n_plates)] = -parameters[plate] * s / ((km + s) * (km + s));
        }
    }
}

/// The points of one plate in one pool.
#[derive(Debug, Clone)]
pub struct PlateSeries {
    /// The plate.
    pub plate: String,
    /// Substrate of each point.
    pub substrate: Vec<f64>,
    /// Rate (or rate per enzyme) of each point.
    pub value: Vec<f64>,
    /// Each point's loadings on the plate's shared errors (blank, background), in the value's
    /// unit per unit error; empty (or rows of a different length) for none.
    pub shared_loadings: Vec<Vec<f64>>,
    /// The shared errors' covariance.
    pub shared_covariance: Vec<Vec<f64>>,
}

/// Fits one Km shared by every series and one scale per series. Series with fewer than three
/// points or two distinct substrate concentrations are left out with a warning.
pub fn fit_shared_km(
    series: &[PlateSeries],
    scale_name: &str,
    scale_unit: &str,
    substrate_unit: &str,
) -> PooledFit {
    let mut warnings = Vec::new();
    let mut kept: Vec<&PlateSeries> = Vec::new();
    for plate in series {
        let mut distinct = plate.substrate.clone();
        distinct.sort_by(f64::total_cmp);
        distinct.dedup();
        if plate.substrate.len() < 3 || distinct.len() < 2 {
            warnings.push(format!(
                "plate {} left out: {} usable well(s) at {} substrate concentration(s); a plate needs 3 wells at 2 or more",
                plate.plate,
                plate.substrate.len(),
                distinct.len()
            ));
        } else {
            kept.push(plate);
        }
    }
    let mut fit = PooledFit {
        key: Vec::new(),
        scale_name: scale_name.to_string(),
        plates: Vec::new(),
        km: None,
        km_interval: None,
        km_model_based: None,
        scale_mean: None,
        scale_cv: None,
        scale_cv_corrected: None,
        scale_cv_ci95: None,
        n: kept.iter().map(|p| p.substrate.len()).sum(),
        residual_sd: None,
        warnings,
        error: None,
    };
    let n_plates = kept.len();
    if n_plates == 0 {
        fit.error = Some("no plate has enough usable wells".to_string());
        return fit;
    }
    if fit.n < n_plates + 2 {
        fit.error = Some(format!(
            "{} points are too few for {} parameters and an error estimate",
            fit.n,
            n_plates + 1
        ));
        return fit;
    }
    let mut plate_of_point = Vec::with_capacity(fit.n);
    let mut substrate = Vec::with_capacity(fit.n);
    let mut observed = Vec::with_capacity(fit.n);
    for (index, plate) in kept.iter().enumerate() {
        plate_of_point.extend(std::iter::repeat_n(index, plate.substrate.len()));
        substrate.extend(&plate.substrate);
        observed.extend(&plate.value);
    }
    // Start: Km at the median substrate; each plate's scale from its highest value, corrected for
    // the saturation at its highest substrate.
    let km_start = median(substrate.iter().copied())
        .unwrap_or(1.0)
        .max(f64::MIN_POSITIVE);
    let mut start: Vec<f64> = kept
        .iter()
        .map(|plate| {
            let top = plate.value.iter().copied().fold(f64::MIN, f64::max);
            let s_top = plate.substrate.iter().copied().fold(f64::MIN, f64::max);
            (top.max(f64::MIN_POSITIVE)) * (km_start + s_top) / s_top
        })
        .collect();
    start.push(km_start);
    let model = SharedKmModel {
        plate_of_point: &plate_of_point,
        substrate: &substrate,
        observed: &observed,
        n_plates,
    };
    let options = LeastSquaresOptions {
        positive_parameters: (0..=n_plates).collect(),
        ..LeastSquaresOptions::default()
    };
    let result = match fit_least_squares(&model, &start, &options).and_then(|r| r.require_converged()) {
        Ok(result) => result,
        Err(error) => {
            fit.error = Some(format!("the pooled fit failed: {error}"));
            return fit;
        }
    };
    let quantile = t_quantile_975(result.degrees_of_freedom).ok();
    let estimate = |index: usize, unit: &str| {
        let se = result.standard_errors.as_ref().map(|errors| errors[index]);
        Estimate {
            value: result.parameters[index],
            se,
            ci95: se.zip(quantile).map(|(se, q)| {
                [
                    result.parameters[index] - q * se,
                    result.parameters[index] + q * se,
                ]
            }),
            unit: unit.to_string(),
        }
    };
    let km_model_based = estimate(n_plates, substrate_unit);
    let mut jacobian = DMatrix::zeros(fit.n, n_plates + 1);
    model.jacobian(&result.parameters, &mut jacobian);
    let clusters: Vec<std::ops::Range<usize>> = kept
        .iter()
        .scan(0, |first, plate| {
            let range = *first..*first + plate.substrate.len();
            *first = range.end;
            Some(range)
        })
        .collect();
    // Each plate's scale also carries its own shared errors (a background estimated once and
    // subtracted from all its wells moves them together; the residuals cannot show it, because
    // the plate's scale absorbs most of it). Plates are independent, so their parts add.
    let shared_variance: Vec<Option<f64>> = kept
        .iter()
        .zip(&clusters)
        .enumerate()
        .map(|(index, (plate, range))| {
            plate_shared_covariance(&jacobian, plate, range).map(|covariance| covariance[(index, index)])
        })
        .collect();
    let clustered_se = (n_plates >= MIN_CLUSTERED_PLATES)
        .then(|| cluster_robust_covariance(&jacobian, &result.residuals, &clusters))
        .flatten()
        .map(|covariance| covariance[(n_plates, n_plates)])
        .filter(|variance| variance.is_finite() && *variance > 0.0)
        .map(f64::sqrt);
    fit.plates = kept
        .iter()
        .enumerate()
        .map(|(index, plate)| {
            let mut scale = estimate(index, scale_unit);
            let shared = shared_variance[index].filter(|v| v.is_finite() && *v >= 0.0);
            // The scale moves with Km (by c = cov(k, Km) / var(Km) in the model-based
            // covariance); where the plates' scatter makes Km's clustered variance the larger,
            // that part of the scale's variance takes it.
            let km_excess = match (&result.covariance, clustered_se) {
                (Some(covariance), Some(km_se)) if covariance[(n_plates, n_plates)] > 0.0 => {
                    let km_variance = covariance[(n_plates, n_plates)];
                    let slope = covariance[(index, n_plates)] / km_variance;
                    slope * slope * (km_se * km_se - km_variance).max(0.0)
                }
                _ => 0.0,
            };
            if let Some(se) = scale.se {
                let total = (se * se + shared.unwrap_or(0.0) + km_excess).sqrt();
                scale.se = Some(total);
                scale.ci95 = quantile.map(|q| [scale.value - q * total, scale.value + q * total]);
            }
            PooledPlate {
                plate: plate.plate.clone(),
                scale,
                shared_se: shared.map(f64::sqrt),
                n: plate.substrate.len(),
            }
        })
        .collect();
    let km = match (clustered_se, t_quantile_975(n_plates - 1).ok()) {
        (Some(se), Some(quantile)) => {
            fit.km_interval = Some(KmInterval::ClusteredByPlate);
            let value = result.parameters[n_plates];
            Estimate {
                value,
                se: Some(se),
                ci95: Some([value - quantile * se, value + quantile * se]),
                unit: substrate_unit.to_string(),
            }
        }
        _ => {
            fit.km_interval = Some(KmInterval::ModelBased);
            fit.warnings.push(format!(
                "Km's interval is model-based (every well independent evidence): {n_plates} plate(s) are too few for one that reflects the plate-to-plate scatter (needs {MIN_CLUSTERED_PLATES}); it is likely too narrow"
            ));
            km_model_based.clone()
        }
    };
    let highest = substrate.iter().copied().fold(f64::MIN, f64::max);
    if km.value > highest {
        fit.warnings.push(format!(
            "the pooled Km lies above the highest substrate concentration ({highest} {substrate_unit}): the data do not reach saturation, so Km and the scales are poorly determined"
        ));
    }
    fit.km = Some(km);
    fit.km_model_based = Some(km_model_based);

    let scales: Vec<f64> = result.parameters[..n_plates].to_vec();
    let scale_summary = summary(&scales);
    fit.scale_mean = scale_summary.map(|s| s.mean);
    fit.scale_cv = scale_summary.and_then(|s| s.sd.map(|sd| sd / s.mean));
    let scale_ses: Option<Vec<f64>> = fit.plates.iter().map(|p| p.scale.se).collect();
    if let Some(cv) = scale_ses.and_then(|ses| between_plate_cv(&scales, &ses)) {
        fit.scale_cv_corrected = Some(cv.value);
        fit.scale_cv_ci95 = Some(cv.ci95);
    }
    fit.residual_sd = result.residual_standard_deviation;
    fit
}

/// The fewest plates whose scatter gives the between-plate CV an interval.
pub const MIN_CV_PLATES: usize = 3;

/// The between-plate CV of the plates' true scales and its 95% interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BetweenPlateCv {
    /// The estimate.
    pub value: f64,
    /// Its 95% interval.
    pub ci95: [f64; 2],
}

/// The between-plate CV of the plates' true scales from their estimates `k_p` and standard errors
/// `se_p` (G plates): each estimate is the plate's true scale plus its estimation error, so the
/// estimates' sample variance `s^2` overstates the true scales' variance by about the mean
/// estimation variance `m = mean(se_p^2)`. The estimate is `sqrt(max(s^2 - m, 0)) / mean(k)`;
/// the interval takes the chi-square interval of the estimates' variance,
/// `(G - 1) s^2 / chi2(0.975, G - 1)` to `(G - 1) s^2 / chi2(0.025, G - 1)`, subtracts `m` from
/// both ends (floored at 0), and divides their square roots by `mean(k)`.
///
/// Assumptions: the plates' true scales are a random sample from a normal distribution (plates
/// independent: days, lots and operators that shift groups of plates systematically break this),
/// estimation errors independent of the true scales and of similar size across plates, and the
/// mean known (its own uncertainty, a relative `CV / sqrt(G)`, is left out: small beside the
/// interval's width for G of ten or more). `None` below [`MIN_CV_PLATES`] plates or for a mean
/// that is not positive.
///
/// References: the chi-square interval of a normal variance (any statistics text, e.g. NIST/
/// SEMATECH e-Handbook of Statistical Methods, section 7.2.6.2); the subtraction of the
/// estimation variance is the method-of-moments step of a random-effects variance (as in
/// DerSimonian and Laird 1986, Controlled Clinical Trials 7:177; from memory).
pub fn between_plate_cv(scales: &[f64], standard_errors: &[f64]) -> Option<BetweenPlateCv> {
    let plates = scales.len();
    if plates < MIN_CV_PLATES || standard_errors.len() != plates {
        return None;
    }
    let summary = summary(scales)?;
    let variance = summary.sd?.powi(2);
    let estimation = standard_errors.iter().map(|se| se * se).sum::<f64>() / plates as f64;
    if !(summary.mean > 0.0 && variance.is_finite() && estimation.is_finite()) {
        return None;
    }
    let degrees = (plates - 1) as f64;
    let upper_quantile = chi_squared_quantile(0.975, degrees).ok()?;
    let lower_quantile = chi_squared_quantile(0.025, degrees).ok()?;
    let cv = |total: f64| (total - estimation).max(0.0).sqrt() / summary.mean;
    Some(BetweenPlateCv {
        value: cv(variance),
        ci95: [
            cv(degrees * variance / upper_quantile),
            cv(degrees * variance / lower_quantile),
        ],
    })
}

/// The covariance that one plate's shared errors add to the pooled fit's parameters,
/// `A C A^T` with `A = (J^T J)^-1 J_p^T L_p` (first-order propagation as the single-plate fits
/// do: [`shared_error_covariance`]); `None` when the plate shares no error.
fn plate_shared_covariance(
    jacobian: &DMatrix<f64>,
    plate: &PlateSeries,
    rows: &std::ops::Range<usize>,
) -> Option<DMatrix<f64>> {
    let errors = plate.shared_covariance.len();
    if errors == 0
        || plate.shared_loadings.len() != rows.len()
        || plate.shared_loadings.iter().any(|row| row.len() != errors)
        || plate.shared_covariance.iter().any(|row| row.len() != errors)
    {
        return None;
    }
    let mut loadings = DMatrix::zeros(jacobian.nrows(), errors);
    for (offset, row) in plate.shared_loadings.iter().enumerate() {
        for (column, value) in row.iter().enumerate() {
            loadings[(rows.start + offset, column)] = *value;
        }
    }
    let covariance = DMatrix::from_fn(errors, errors, |i, j| plate.shared_covariance[i][j]);
    shared_error_covariance(jacobian, &loadings, &covariance)
}

/// The pool key of a point: each pool factor's value from the well's layout factors, else from the
/// plate's manifest factors; `None` when a factor is on neither.
fn pool_key(
    point: &PoolPoint,
    plate_factors: &BTreeMap<String, String>,
    pool_by: &[String],
) -> Option<Vec<String>> {
    pool_by
        .iter()
        .map(|name| {
            point
                .factors
                .get(name)
                .or_else(|| plate_factors.get(name))
                .cloned()
        })
        .collect()
}

/// Every pooled fit of a campaign: one per combination of the pool factors' values, over the
/// plates (in run order) that hold wells of it. Returns the fits and the pool factors no plate
/// knows.
pub fn pooled_fits(plates: &[PoolPlate<'_>], pool_by: &[String]) -> (Vec<PooledFit>, Vec<String>) {
    let unknown: Vec<String> = pool_by
        .iter()
        .filter(|name| {
            !plates.iter().any(|plate| {
                plate.factors.contains_key(*name)
                    || plate
                        .digest
                        .pool_points
                        .iter()
                        .any(|point| point.factors.contains_key(*name))
            })
        })
        .cloned()
        .collect();
    if !unknown.is_empty() || pool_by.is_empty() {
        return (Vec::new(), unknown);
    }
    // Pool key -> plate index -> points.
    let mut pools: BTreeMap<Vec<String>, BTreeMap<usize, Vec<&PoolPoint>>> = BTreeMap::new();
    for (index, plate) in plates.iter().enumerate() {
        for point in &plate.digest.pool_points {
            if let Some(key) = pool_key(point, plate.factors, pool_by) {
                pools
                    .entry(key)
                    .or_default()
                    .entry(index)
                    .or_default()
                    .push(point);
            }
        }
    }
    let fits = pools
        .into_iter()
        .map(|(key, by_plate)| {
            let mut warnings = Vec::new();
            // Every plate must share the units of the first; a plate with others is left out.
            let first = &plates[*by_plate.keys().next().unwrap_or(&0)].digest;
            let per_enzyme = by_plate
                .values()
                .all(|points| points.iter().all(|point| point.turnover.is_some()));
            let mut series = Vec::new();
            for (index, points) in &by_plate {
                let digest = plates[*index].digest;
                if digest.rate_unit != first.rate_unit || digest.substrate_unit != first.substrate_unit {
                    warnings.push(format!(
                        "plate {} left out: its units ({}, substrate {}) differ from the pool's ({}, substrate {})",
                        plates[*index].plate,
                        digest.rate_unit,
                        digest.substrate_unit.as_deref().unwrap_or("without unit"),
                        first.rate_unit,
                        first.substrate_unit.as_deref().unwrap_or("without unit"),
                    ));
                    continue;
                }
                // A point's value per unit rate (1, or 1 / [E] for turnovers), for its loadings.
                let per_rate = |point: &PoolPoint| match point.turnover {
                    Some(turnover) if per_enzyme && point.rate != 0.0 => turnover / point.rate,
                    _ => 1.0,
                };
                series.push(PlateSeries {
                    plate: plates[*index].plate.to_string(),
                    substrate: points.iter().map(|point| point.substrate).collect(),
                    value: points
                        .iter()
                        .map(|point| {
                            if per_enzyme {
                                point.turnover.unwrap_or(point.rate)
                            } else {
                                point.rate
                            }
                        })
                        .collect(),
                    shared_loadings: points
                        .iter()
                        .map(|point| {
                            let factor = per_rate(point);
                            point.shared_loadings.iter().map(|l| l * factor).collect()
                        })
                        .collect(),
                    shared_covariance: digest.shared_errors.clone(),
                });
            }
            let (scale_name, scale_unit) = if per_enzyme {
                ("kcat", "1/s".to_string())
            } else {
                ("Vmax", first.rate_unit.clone())
            };
            let substrate_unit = first.substrate_unit.clone().unwrap_or_default();
            let mut fit = fit_shared_km(&series, scale_name, &scale_unit, &substrate_unit);
            fit.key = pool_by.iter().cloned().zip(key).collect();
            warnings.append(&mut fit.warnings);
            fit.warnings = warnings;
            fit
        })
        .collect();
    (fits, unknown)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    // Puromycin, treated (Treloar 1974; Bates and Watts 1988, Appendix A1.3), as in the R datasets
    // source Puromycin.R, copied from the project's reference folder.
    const PUROMYCIN_SUBSTRATE: [f64; 12] = [
        0.02, 0.02, 0.06, 0.06, 0.11, 0.11, 0.22, 0.22, 0.56, 0.56, 1.10, 1.10,
    ];
    const PUROMYCIN_RATE: [f64; 12] = [
        76.0, 47.0, 97.0, 107.0, 123.0, 139.0, 159.0, 152.0, 191.0, 201.0, 207.0, 200.0,
    ];

    fn series(plate: &str, substrate: &[f64], value: &[f64]) -> PlateSeries {
        PlateSeries {
            plate: plate.to_string(),
            substrate: substrate.to_vec(),
            value: value.to_vec(),
            shared_loadings: Vec::new(),
            shared_covariance: Vec::new(),
        }
    }

    #[test]
    fn one_plate_reproduces_the_published_puromycin_fit() {
        // Bates and Watts 1988 / R nls(SSmicmen) output in "An Introduction to R", section 11.7:
        // Vm = 212.68370711 (SE 6.947), K = 0.06412123 (SE 8.281e-03) on 10 df.
        let fit = fit_shared_km(
            &[series("treated", &PUROMYCIN_SUBSTRATE, &PUROMYCIN_RATE)],
            "Vmax",
            "counts/min/min",
            "ppm",
        );
        assert!(fit.error.is_none(), "{:?}", fit.error);
        let km = fit.km.unwrap();
        assert_relative_eq!(km.value, 0.06412123, max_relative = 1e-6);
        assert_relative_eq!(km.se.unwrap(), 8.281e-3, max_relative = 1e-3);
        assert_relative_eq!(fit.plates[0].scale.value, 212.68370711, max_relative = 1e-6);
        assert_relative_eq!(fit.plates[0].scale.se.unwrap(), 6.947, max_relative = 1e-3);
        assert_relative_eq!(fit.residual_sd.unwrap(), 10.93, max_relative = 1e-3);
        assert!(fit.scale_cv.is_none(), "one plate has no between-plate CV");
    }

    #[test]
    fn a_plate_with_all_rates_scaled_keeps_km_and_scales_its_own_kcat() {
        // The same data on a second plate whose enzyme was 30% less active: the shared Km is the
        // single-plate Km, the second plate's scale is 0.7 times the first's, and the residual SD
        // reflects both plates' scatter.
        let weaker: Vec<f64> = PUROMYCIN_RATE.iter().map(|v| 0.7 * v).collect();
        let fit = fit_shared_km(
            &[
                series("day1", &PUROMYCIN_SUBSTRATE, &PUROMYCIN_RATE),
                series("day2", &PUROMYCIN_SUBSTRATE, &weaker),
            ],
            "Vmax",
            "u",
            "ppm",
        );
        assert!(fit.error.is_none(), "{:?}", fit.error);
        let km = fit.km.unwrap();
        // Weighted by its own scale, the second plate pulls Km by a hair only: the scaled
        // residuals are not the same size as the first plate's.
        assert_relative_eq!(km.value, 0.06412123, max_relative = 0.02);
        let ratio = fit.plates[1].scale.value / fit.plates[0].scale.value;
        assert_relative_eq!(ratio, 0.7, max_relative = 0.01);
        // CV of (1, 0.7) x scale: SD / mean = (0.3 / sqrt 2) / 0.85.
        assert_relative_eq!(
            fit.scale_cv.unwrap(),
            0.3 / 2f64.sqrt() / 0.85,
            max_relative = 0.01
        );
        let interval = km.ci95.unwrap();
        assert!(interval[0] < km.value && km.value < interval[1]);
    }

    #[test]
    fn km_varying_from_plate_to_plate_widens_the_clustered_interval() {
        // Six copies of the Puromycin series, each plate with its own scale and a Km that differs
        // by a few percent (rates recomputed from the published fit's curve plus the published
        // residuals): the wells of each plate agree with each other better than the plates do.
        let (vmax, km) = (212.68370711, 0.06412123);
        let series: Vec<PlateSeries> = (0..6)
            .map(|plate| {
                let scale = 1.0 + 0.05 * plate as f64;
                let plate_km = km * (1.0 + 0.06 * (plate as f64 - 2.5));
                let values: Vec<f64> = PUROMYCIN_SUBSTRATE
                    .iter()
                    .zip(PUROMYCIN_RATE)
                    .map(|(&s, observed)| {
                        let residual = observed - vmax * s / (km + s);
                        scale * (vmax * s / (plate_km + s) + 0.2 * residual)
                    })
                    .collect();
                series(&format!("p{plate}"), &PUROMYCIN_SUBSTRATE, &values)
            })
            .collect();
        let fit = fit_shared_km(&series, "Vmax", "u", "ppm");
        assert!(fit.error.is_none(), "{:?}", fit.error);
        assert_eq!(fit.km_interval, Some(KmInterval::ClusteredByPlate));
        let clustered = fit.km.unwrap();
        let model_based = fit.km_model_based.unwrap();
        assert_eq!(clustered.value, model_based.value, "one estimate, two intervals");
        assert!(
            clustered.se.unwrap() > model_based.se.unwrap(),
            "{clustered:?} against {model_based:?}"
        );
        // t(0.975, 5) = 2.5706 (any t table, e.g. NIST/SEMATECH e-Handbook 1.3.6.7.2).
        let [low, high] = clustered.ci95.unwrap();
        assert_relative_eq!(
            (high - low) / 2.0,
            2.5706 * clustered.se.unwrap(),
            max_relative = 1e-4
        );
    }

    #[test]
    fn the_between_plate_cv_takes_out_the_estimation_error() {
        // Five plates with scales 9, 10, 11, 10, 10 (mean 10, sample variance 0.5) and standard
        // errors 0.3 (estimation variance 0.09): CV sqrt(0.41) / 10; interval from chi-square(4)
        // quantiles 0.484419 and 11.143287 (standard table values, from memory).
        let cv = between_plate_cv(&[9.0, 10.0, 11.0, 10.0, 10.0], &[0.3; 5]).unwrap();
        assert_relative_eq!(cv.value, 0.41f64.sqrt() / 10.0, max_relative = 1e-12);
        let low = (4.0 * 0.5 / 11.143287 - 0.09f64).sqrt() / 10.0;
        let high = (4.0 * 0.5 / 0.484419 - 0.09f64).sqrt() / 10.0;
        assert_relative_eq!(cv.ci95[0], low, max_relative = 1e-5);
        assert_relative_eq!(cv.ci95[1], high, max_relative = 1e-5);
        // Estimation error as large as the scatter: the estimate and the lower end are 0.
        let noisy = between_plate_cv(&[9.0, 10.0, 11.0, 10.0, 10.0], &[1.0; 5]).unwrap();
        assert_eq!(noisy.value, 0.0);
        assert_eq!(noisy.ci95[0], 0.0);
        assert!(noisy.ci95[1] > 0.0);
        assert!(
            between_plate_cv(&[9.0, 10.0], &[0.3; 2]).is_none(),
            "two plates are too few"
        );
    }

    #[test]
    fn a_plates_shared_background_widens_its_scale_interval_only() {
        // Puromycin on six plates; the third plate's wells share a background error of SD 5 (a
        // loading of -1 on every well: a background estimated once and subtracted from all).
        let plates: Vec<PlateSeries> = (0..6)
            .map(|plate| {
                let mut s = series(&format!("p{plate}"), &PUROMYCIN_SUBSTRATE, &PUROMYCIN_RATE);
                if plate == 2 {
                    s.shared_loadings = vec![vec![-1.0]; PUROMYCIN_SUBSTRATE.len()];
                    s.shared_covariance = vec![vec![25.0]];
                }
                s
            })
            .collect();
        let fit = fit_shared_km(&plates, "Vmax", "u", "ppm");
        assert!(fit.error.is_none(), "{:?}", fit.error);
        let plain = fit.plates[0].scale.se.unwrap();
        let shared = &fit.plates[2];
        assert!(fit.plates[0].shared_se.is_none());
        let part = shared.shared_se.unwrap();
        // A shift of every rate by e moves the plate's scale by about e times its regression on a
        // constant, sum(z) / sum(z^2) with z = S / (Km + S), when Km is held by the other plates.
        let km = fit.km.as_ref().unwrap().value;
        let z: Vec<f64> = PUROMYCIN_SUBSTRATE.iter().map(|s| s / (km + s)).collect();
        let expected = 5.0 * z.iter().sum::<f64>() / z.iter().map(|v| v * v).sum::<f64>();
        assert_relative_eq!(part, expected, max_relative = 0.25);
        assert_relative_eq!(
            shared.scale.se.unwrap(),
            (plain * plain + part * part).sqrt(),
            max_relative = 1e-9
        );
    }

    #[test]
    fn few_plates_keep_the_model_based_interval_and_say_so() {
        let fit = fit_shared_km(
            &[series("treated", &PUROMYCIN_SUBSTRATE, &PUROMYCIN_RATE)],
            "Vmax",
            "u",
            "ppm",
        );
        assert_eq!(fit.km_interval, Some(KmInterval::ModelBased));
        assert_eq!(fit.km, fit.km_model_based);
        assert!(
            fit.warnings.iter().any(|w| w.contains("too few")),
            "{:?}",
            fit.warnings
        );
    }

    #[test]
    fn plates_too_small_are_left_out_with_a_warning() {
        let fit = fit_shared_km(
            &[
                series("good", &PUROMYCIN_SUBSTRATE, &PUROMYCIN_RATE),
                series("tiny", &[0.1, 0.1], &[100.0, 101.0]),
            ],
            "Vmax",
            "u",
            "ppm",
        );
        assert_eq!(fit.plates.len(), 1);
        assert!(
            fit.warnings.iter().any(|w| w.contains("plate tiny left out")),
            "{:?}",
            fit.warnings
        );
        let none = fit_shared_km(&[series("tiny", &[0.1], &[1.0])], "Vmax", "u", "ppm");
        assert!(none.error.is_some());
    }
}
