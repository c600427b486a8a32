//! What a campaign keeps of one plate's results once its own outputs are written: the counts of
//! `plates.csv`, the Z'-factor, each group's kcat and Km with their intervals, and the points the
//! cross-plate fits need. A plate's full results (every read of every well) are dropped after its
//! outputs are written, so a campaign's memory grows with the plates in flight, not with the
//! campaign. The digest is made once from the typed results; it is kept beside the campaign's
//! outputs so that a plate whose inputs and settings did not change is not analysed again.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use super::screening::{z_prime, ControlKind, ZPrime};
use crate::config::InitialRateEstimator;
use crate::core::units::ConcentrationUnit;
use crate::groups::{
    shared_rate_errors, window_chord, FitPoint, GroupKey, GroupValue, ParameterReport, PlateCorrections,
};
use crate::pipeline::RunResults;
use crate::rates::background::Background;
use crate::rates::flag_words;
use crate::signal::BlankUncertainty;

/// A fitted constant: value, standard error, 95% interval and unit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Estimate {
    /// The value.
    pub value: f64,
    /// Its standard error.
    pub se: Option<f64>,
    /// Its 95% interval.
    pub ci95: Option<[f64; 2]>,
    /// Its unit.
    pub unit: String,
}

impl Estimate {
    /// The estimate a fit reports for a parameter.
    pub fn of(parameter: &ParameterReport) -> Estimate {
        Estimate {
            value: parameter.value,
            se: parameter.se,
            ci95: parameter.ci95,
            unit: parameter.unit.clone(),
        }
    }
}

/// One value of a group's key, kept apart from the plate's typed key so the digest can be stored.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum KeyValue {
    /// A factor's text.
    Text(String),
    /// A concentration.
    Number(f64),
}

/// A group's key as (name, value) pairs in name order.
pub type GroupLabel = Vec<(String, KeyValue)>;

/// The key of a group, as the digest keeps it.
pub fn group_label(key: &GroupKey) -> GroupLabel {
    key.values
        .iter()
        .map(|(name, value)| {
            let value = match value {
                GroupValue::Text(text) => KeyValue::Text(text.clone()),
                GroupValue::Number(number) => KeyValue::Number(*number),
            };
            (name.clone(), value)
        })
        .collect()
}

/// One group's constants from its initial-rate fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GroupConstants {
    /// The group.
    pub group: GroupLabel,
    /// The model reported.
    pub model: String,
    /// kcat, where the enzyme concentration is known.
    pub kcat: Option<Estimate>,
    /// Km.
    pub km: Option<Estimate>,
    /// Vmax.
    pub vmax: Option<Estimate>,
}

/// One well's rate as the cross-plate fits take it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PoolPoint {
    /// The well.
    pub well: String,
    /// The well's layout factors.
    pub factors: BTreeMap<String, String>,
    /// Substrate, in the plate's substrate unit.
    pub substrate: f64,
    /// The well's initial rate, in the plate's rate unit.
    pub rate: f64,
    /// The rate per enzyme, 1/s, where rates are concentrations per second and the enzyme is known.
    pub turnover: Option<f64>,
    /// How the rate moves with each of its plate's shared errors (`PlateDigest::shared_errors`),
    /// in the plate's rate unit per unit error: the blank subtracted from every read and the
    /// no-enzyme background subtracted from many wells. Empty when the plate shares none (or
    /// for a digest stored before they were kept).
    #[serde(default)]
    pub shared_loadings: Vec<f64>,
}

/// A flagged well and its flags.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FlaggedWell {
    /// The well.
    pub well: String,
    /// Its flags, as `wells.csv` writes them.
    pub flags: String,
}

/// What the campaign keeps of a plate.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlateDigest {
    /// Wells analysed (layout wells that are not empty).
    pub wells: usize,
    /// The flagged wells.
    pub flagged: Vec<FlaggedWell>,
    /// Groups of sample wells.
    pub groups: usize,
    /// Groups whose fit converged without an error.
    pub groups_fitted: usize,
    /// Each group's constants.
    pub constants: Vec<GroupConstants>,
    /// The Z'-factor, where the layout marks positive and negative controls.
    pub z_prime: Option<ZPrime>,
    /// The sample wells the cross-plate fits may use (used, with a rate and a substrate, without
    /// inhibitor).
    pub pool_points: Vec<PoolPoint>,
    /// The covariance of the errors the plate's pool points share (the blank's, each background
    /// model's; see `PoolPoint::shared_loadings`), as the single-plate fits propagate them.
    #[serde(default)]
    pub shared_errors: Vec<Vec<f64>>,
    /// The rate unit (`uM/s`, `AU/s`).
    pub rate_unit: String,
    /// The substrate unit, when the layout gives one.
    pub substrate_unit: Option<String>,
}

/// The errors a plate's pool wells share ([`crate::groups::shared_rate_errors`]): each well's
/// loadings and the errors' covariance: each background model's (or matched controls') error for
/// the wells it serves, and the blank's for wells without a background. A well's
/// rate moves with its window's slope by `rate_se / window_slope_se` under the integrated
/// estimator (the correction's derivative, as the group fits take it), else by 1. The blank's
/// loadings use the first pool well's conversion to concentration (a plate's sample wells share
/// one unless standard curves differ by group).
fn pool_shared_errors(
    results: &RunResults,
    wells: &[(&crate::rates::WellResult, f64, f64)],
) -> (Vec<Vec<f64>>, Vec<Vec<f64>>) {
    let analysis = &results.analysis;
    let dead_time_s = results.settings.rates.dead_time_s;
    let integrated = analysis.estimator == InitialRateEstimator::Integrated;
    let points: Vec<FitPoint> = wells
        .iter()
        .map(|&(well, substrate, rate)| {
            let window = window_chord(well, dead_time_s);
            let rate_per_chord = match (integrated, well.rate_se, window) {
                (true, Some(se), Some(chord)) if chord.se > 0.0 => se / chord.se,
                _ => 1.0,
            };
            FitPoint {
                label: well.well.to_string(),
                well: Some(well.well),
                window,
                substrate,
                inhibitor: 0.0,
                rate,
                sd: None,
                se: well.rate_se,
                background: well.correction.background.clone(),
                rate_per_chord,
                substrate_sensitivity: None,
                law_feedback: None,
            }
        })
        .collect();
    let corrections = PlateCorrections::of(analysis, wells.first().map(|(well, ..)| well.well), dead_time_s);
    // The background's errors, for the wells it serves.
    let background = shared_rate_errors(
        &points,
        &PlateCorrections {
            blank: BlankUncertainty::None,
            ..corrections.clone()
        },
        None,
    );
    // The blank's, for the wells without a background only: a background from no-enzyme controls
    // had the same blank subtracted from the controls' reads, so a blank error moves the sample and
    // its background alike and cancels from their difference (exactly for equal windows).
    let unserved: Vec<bool> = points
        .iter()
        .map(|point| point.background.as_ref().and_then(Background::rate).is_none())
        .collect();
    let blank_points: Vec<FitPoint> = points
        .iter()
        .zip(&unserved)
        .filter(|(_, unserved)| **unserved)
        .map(|(point, _)| point.clone())
        .collect();
    let blank = shared_rate_errors(&blank_points, &corrections, None);
    let (blank_errors, background_errors) = (blank.covariance.len(), background.covariance.len());
    if blank_errors + background_errors == 0 {
        return (vec![Vec::new(); wells.len()], Vec::new());
    }
    let mut blank_rows = blank.loadings.into_iter();
    let loadings = unserved
        .iter()
        .zip(background.loadings)
        .map(|(unserved, background_row)| {
            let mut row = if *unserved {
                blank_rows.next().unwrap_or_else(|| vec![0.0; blank_errors])
            } else {
                vec![0.0; blank_errors]
            };
            row.resize(blank_errors, 0.0);
            row.extend(background_row);
            row
        })
        .collect();
    let size = blank_errors + background_errors;
    let mut covariance = vec![vec![0.0; size]; size];
    for (i, row) in blank.covariance.iter().enumerate() {
        covariance[i][..blank_errors].copy_from_slice(row);
    }
    for (i, row) in background.covariance.iter().enumerate() {
        covariance[blank_errors + i][blank_errors..].copy_from_slice(row);
    }
    (loadings, covariance)
}

/// Makes a plate's digest from its results.
pub fn digest(results: &RunResults) -> PlateDigest {
    let analysis = &results.analysis;
    let layout = &results.layout;
    let flagged = analysis
        .wells
        .iter()
        .filter(|well| !well.rate.flags.is_empty())
        .map(|well| FlaggedWell {
            well: well.well.to_string(),
            flags: flag_words(&well.rate.flags),
        })
        .collect();
    let constants = results
        .fits
        .iter()
        .map(|fit| GroupConstants {
            group: group_label(&fit.group),
            model: fit.model.name().to_string(),
            kcat: fit.parameters.get("kcat").map(Estimate::of),
            km: fit.parameters.get("Km").map(Estimate::of),
            vmax: fit.parameters.get("Vmax").map(Estimate::of),
        })
        .collect();
    let groups_fitted = results
        .fits
        .iter()
        .filter(|fit| fit.error.is_none() && fit.converged)
        .count();
    let mut positive = Vec::new();
    let mut negative = Vec::new();
    for well in &analysis.wells {
        match (well.setup.control(), well.rate_value) {
            (Some(ControlKind::Positive), Some(rate)) if rate.is_finite() => positive.push(rate),
            (Some(ControlKind::Negative), Some(rate)) if rate.is_finite() => negative.push(rate),
            _ => {}
        }
    }
    let rate_unit_molar = analysis
        .signal
        .concentration_unit
        .map(ConcentrationUnit::in_molar);
    let enzyme_unit_molar = layout.enzyme_unit.map(ConcentrationUnit::in_molar);
    let pool_wells: Vec<_> = analysis
        .wells
        .iter()
        .filter(|well| well.setup.is_fit_sample() && well.used)
        .filter(|well| well.setup.inhibitor.is_none_or(|inhibitor| inhibitor == 0.0))
        .filter_map(|well| {
            let substrate = well.setup.substrate.filter(|s| s.is_finite() && *s > 0.0)?;
            let rate = well.rate_value.filter(|r| r.is_finite())?;
            Some((well, substrate, rate))
        })
        .collect();
    let (shared_loadings, shared_errors) = pool_shared_errors(results, &pool_wells);
    let pool_points = pool_wells
        .iter()
        .zip(shared_loadings)
        .map(|(&(well, substrate, rate), shared_loadings)| {
            let turnover = match (rate_unit_molar, well.setup.enzyme, enzyme_unit_molar) {
                (Some(rate_molar), Some(enzyme), Some(enzyme_molar)) if enzyme > 0.0 => {
                    Some(rate * rate_molar / (enzyme * enzyme_molar))
                }
                _ => None,
            };
            PoolPoint {
                well: well.well.to_string(),
                factors: well.setup.factors.clone(),
                substrate,
                // The turnover above is made from the internal rate; the rate is written as asked,
                // and its loadings on the shared errors with it, so the pooled fit sees one unit.
                rate: results.rates_in.rate(rate),
                turnover,
                shared_loadings: shared_loadings
                    .into_iter()
                    .map(|loading| results.rates_in.rate(loading))
                    .collect(),
            }
        })
        .collect();
    PlateDigest {
        wells: analysis.wells.len(),
        flagged,
        groups: results.fits.len(),
        groups_fitted,
        constants,
        // A screening plate's Z' was computed once from its `uninhibited`/`inhibited` controls;
        // other plates mark their controls with the `control` factor.
        z_prime: results
            .screen
            .as_ref()
            .and_then(|screen| screen.quality.z_prime.clone())
            .or_else(|| z_prime(&positive, &negative)),
        pool_points,
        shared_errors,
        rate_unit: results.rates_in.unit.clone(),
        substrate_unit: layout.substrate_unit.map(|unit| unit.to_string()),
    }
}
