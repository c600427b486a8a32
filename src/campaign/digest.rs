//! What a campaign keeps of one plate's results once its own outputs are written: the counts of
//! `plates.csv`, the Z'-factor, each group's kcat and Km with their intervals, and the points the
//! cross-plate fits need. A plate's full results (every read of every well) are dropped after its
//! outputs are written, so a campaign's memory grows with the plates in flight, not with the
//! campaign. The digest is made once from the typed results; it is kept beside the campaign's
//! outputs so that a plate whose inputs and settings did not change is not analysed again.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use super::screening::{z_prime, ControlKind, ZPrime};
use crate::core::units::ConcentrationUnit;
use crate::groups::{GroupKey, GroupValue, ParameterReport};
use crate::pipeline::RunResults;
use crate::rates::flag_words;

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
    /// The rate unit (`uM/s`, `AU/s`).
    pub rate_unit: String,
    /// The substrate unit, when the layout gives one.
    pub substrate_unit: Option<String>,
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
    let pool_points = analysis
        .wells
        .iter()
        .filter(|well| well.setup.is_fit_sample() && well.used)
        .filter(|well| well.setup.inhibitor.is_none_or(|inhibitor| inhibitor == 0.0))
        .filter_map(|well| {
            let substrate = well.setup.substrate.filter(|s| s.is_finite() && *s > 0.0)?;
            let rate = well.rate_value.filter(|r| r.is_finite())?;
            let turnover = match (rate_unit_molar, well.setup.enzyme, enzyme_unit_molar) {
                (Some(rate_molar), Some(enzyme), Some(enzyme_molar)) if enzyme > 0.0 => {
                    Some(rate * rate_molar / (enzyme * enzyme_molar))
                }
                _ => None,
            };
            Some(PoolPoint {
                well: well.well.to_string(),
                factors: well.setup.factors.clone(),
                substrate,
                // The turnover above is made from the internal rate; the rate is written as asked.
                rate: results.rates_in.rate(rate),
                turnover,
            })
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
        rate_unit: results.rates_in.unit.clone(),
        substrate_unit: layout.substrate_unit.map(|unit| unit.to_string()),
    }
}
