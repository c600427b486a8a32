//! From traces and layout to per-well rates: blank correction at each read, Beer-Lambert
//! conversion to concentration, the window search of every well (in parallel), plate-level flags,
//! and the subtraction of the matching no-enzyme background.
//!
//! Formulas: c = A / (epsilon l) (Beer-Lambert, c in M, epsilon in M^-1 cm^-1, l in cm); a substrate
//! read falls, so its signal is negated to give product formed and rates are positive turnover.
//! Background: v = v_well - mean(v_no-enzyme) with se = sqrt(se_well^2 + sem_background^2).

use std::collections::{BTreeMap, BTreeSet};

use rayon::prelude::*;

use crate::import::KineticData;
use crate::layout::{Layout, Role, WellSetup};
use crate::plate::WellId;
use crate::rates::{
    apply_plate_flags, median, well_rate, CriticalValues, Flag, PlateNoise, TraceInput, WellRate,
};
use crate::settings::{AnalysisSettings, Readout};
use crate::units::ConcentrationUnit;

/// One analysed well.
#[derive(Debug, Clone, serde::Serialize)]
pub struct WellResult {
    /// The well.
    pub well: WellId,
    /// What the layout says of it.
    #[serde(skip)]
    pub setup: WellSetup,
    /// The window, fit and flags.
    pub rate: WellRate,
    /// The rate after background subtraction, positive turnover, in [`PlateAnalysis::rate_unit`].
    pub rate_value: Option<f64>,
    /// Its standard error.
    pub rate_se: Option<f64>,
    /// The no-enzyme background subtracted, if any.
    pub background: Option<f64>,
    /// Which corrections the well got, in words.
    pub correction: String,
    /// Whether the rate enters condition means and fits.
    pub used: bool,
}

impl WellResult {
    /// The flags as the outputs write them.
    pub fn flag_text(&self) -> String {
        crate::rates::flag_words(&self.rate.flags)
    }
}

/// All wells of a plate, analysed.
#[derive(Debug, Clone)]
pub struct PlateAnalysis {
    /// Every layout well that is not `empty`, in plate order.
    pub wells: Vec<WellResult>,
    /// `uM/s`-style unit of the rates, or `AU/s` without an extinction coefficient.
    pub rate_unit: String,
    /// The unit of rates' numerator when in concentration, for fits.
    pub concentration_unit: Option<ConcentrationUnit>,
    /// Blank noise used for the flags.
    pub noise: PlateNoise,
    /// How many blank wells were averaged at each read.
    pub n_blank_wells: usize,
    /// Plate-level remarks (no blanks, no extinction...).
    pub warnings: Vec<String>,
}

impl PlateAnalysis {
    /// Wells left out of means and fits, with the reason.
    pub fn excluded(&self) -> impl Iterator<Item = (&WellResult, String)> {
        self.wells
            .iter()
            .filter(|well| !well.used && well.setup.role != Role::Empty)
            .map(|well| {
                let reason = if well.rate_value.is_none() {
                    "no rate".to_string()
                } else {
                    well.flag_text()
                };
                (well, reason)
            })
    }
}

/// Whether a no-enzyme control serves a sample: same substrate concentration, and every factor
/// (and the inhibitor) either equal or left empty on the control.
fn control_matches(control: &WellSetup, sample: &WellSetup) -> bool {
    let same_substrate = match (control.substrate, sample.substrate) {
        (Some(a), Some(b)) => (a - b).abs() <= 1e-9 * a.abs().max(b.abs()),
        _ => false,
    };
    let inhibitor_ok = match (control.inhibitor, sample.inhibitor) {
        (None, _) => true,
        (Some(a), Some(b)) => (a - b).abs() <= 1e-9 * a.abs().max(b.abs()),
        (Some(a), None) => a == 0.0,
    };
    let factors_ok = control.factors.iter().all(|(name, value)| {
        value.is_empty()
            || sample
                .factors
                .get(name)
                .is_some_and(|sample_value| sample_value == value)
    });
    same_substrate && inhibitor_ok && factors_ok
}

/// The blank at each read: the mean of the readable `blank` wells (0 where none is readable),
/// and how many blank wells the layout has in the data.
pub fn blank_per_read(data: &KineticData, layout: &Layout) -> (Vec<f64>, usize) {
    let blank_wells: Vec<&[Option<f64>]> = data
        .wells
        .iter()
        .filter(|trace| {
            layout
                .wells
                .get(&trace.well)
                .is_some_and(|setup| setup.role == Role::Blank)
        })
        .map(|trace| trace.values.as_slice())
        .collect();
    let per_read = (0..data.times_s.len())
        .map(|read| {
            let readable: Vec<f64> = blank_wells.iter().filter_map(|trace| trace[read]).collect();
            if readable.is_empty() {
                0.0
            } else {
                readable.iter().sum::<f64>() / readable.len() as f64
            }
        })
        .collect();
    (per_read, blank_wells.len())
}

/// Analyses a plate: every layout well present in the data gets a rate, flags and corrections.
pub fn analyse_plate(data: &KineticData, layout: &Layout, settings: &AnalysisSettings) -> PlateAnalysis {
    let n_reads = data.times_s.len();
    let mut warnings = Vec::new();
    let traces: BTreeMap<WellId, &[Option<f64>]> = data
        .wells
        .iter()
        .map(|trace| (trace.well, trace.values.as_slice()))
        .collect();

    let (blank_per_read, n_blank_wells) = blank_per_read(data, layout);
    if n_blank_wells == 0 {
        warnings.push("no blank wells: absorbance is not blank-corrected".to_string());
    }

    // Signal to product formed.
    let concentration_unit = layout.substrate_unit;
    let per_absorbance = match (
        settings.extinction_per_molar_cm,
        settings.pathlength_cm,
        concentration_unit,
    ) {
        (Some(epsilon), Some(path), Some(unit)) => Some(1.0 / (epsilon * path) / unit.in_molar()),
        (Some(_), Some(_), None) => {
            warnings.push("the layout gives no substrate unit: rates stay in absorbance units".to_string());
            None
        }
        _ => {
            warnings.push(
                "no extinction coefficient and pathlength: rates are in absorbance units and the conversion limit is not checked"
                    .to_string(),
            );
            None
        }
    };
    let sign = match settings.readout {
        Readout::Product => 1.0,
        Readout::Substrate => -1.0,
    };
    let rate_unit = match (per_absorbance, concentration_unit) {
        (Some(_), Some(unit)) => format!("{unit}/s"),
        _ => "AU/s".to_string(),
    };

    let critical = CriticalValues::new(settings.rates.alpha, n_reads);
    let wells_in_play: Vec<(WellId, &WellSetup, &[Option<f64>])> = layout
        .wells
        .iter()
        .filter(|(_, setup)| setup.role != Role::Empty)
        .filter_map(|(well, setup)| traces.get(well).map(|trace| (*well, setup, *trace)))
        .collect();
    let mut rates: Vec<WellRate> = wells_in_play
        .par_iter()
        .map(|(_, setup, raw)| {
            let values: Vec<Option<f64>> = raw
                .iter()
                .zip(&blank_per_read)
                .map(|(value, blank)| value.map(|a| sign * (a - blank) * per_absorbance.unwrap_or(1.0)))
                .collect();
            let substrate_start = per_absorbance.and(setup.substrate);
            let input = TraceInput {
                times_s: &data.times_s,
                values: &values,
                raw_absorbance: raw,
                substrate_start,
            };
            well_rate(input, &settings.rates, &critical)
        })
        .collect();

    // Plate noise from the blanks' own straight lines.
    let blank_fits: Vec<_> = wells_in_play
        .iter()
        .zip(&rates)
        .filter(|((_, setup, _), _)| setup.role == Role::Blank)
        .filter_map(|(_, rate)| rate.fit)
        .collect();
    let blank_slope_sd = (blank_fits.len() >= 3).then(|| {
        let mean = blank_fits.iter().map(|f| f.slope).sum::<f64>() / blank_fits.len() as f64;
        (blank_fits.iter().map(|f| (f.slope - mean).powi(2)).sum::<f64>() / (blank_fits.len() - 1) as f64)
            .sqrt()
    });
    let noise = PlateNoise {
        blank_residual_sd: median(blank_fits.iter().map(|f| f.residual_sd)),
        blank_slope_sd,
    };

    // No-enzyme backgrounds: the unflagged controls' slopes.
    let controls: Vec<(&WellSetup, f64, f64)> = wells_in_play
        .iter()
        .zip(&rates)
        .filter(|((_, setup, _), rate)| setup.role == Role::NoEnzyme && rate.flags.is_empty())
        .filter_map(|((_, setup, _), rate)| rate.fit.map(|fit| (*setup, fit.slope, fit.slope_se)))
        .collect();

    let blank_note = if n_blank_wells == 0 {
        "no blank correction".to_string()
    } else {
        format!("blank: mean of {n_blank_wells} blank wells at each read")
    };
    let mut wells = Vec::with_capacity(wells_in_play.len());
    for ((well, setup, _), rate) in wells_in_play.iter().zip(rates.iter_mut()) {
        let mut correction = if setup.role == Role::Blank {
            "none (blank)".to_string()
        } else {
            blank_note.clone()
        };
        let mut background = None;
        let (mut value, mut se) = (rate.fit.map(|f| f.slope), rate.fit.map(|f| f.slope_se));
        if setup.role == Role::Sample {
            let matching: Vec<(f64, f64)> = controls
                .iter()
                .filter(|(control, _, _)| control_matches(control, setup))
                .map(|c| (c.1, c.2))
                .collect();
            if matching.is_empty() {
                correction.push_str("; no background (no matching no-enzyme wells)");
            } else {
                let n = matching.len() as f64;
                let mean = matching.iter().map(|m| m.0).sum::<f64>() / n;
                let sem = if matching.len() >= 2 {
                    (matching.iter().map(|m| (m.0 - mean).powi(2)).sum::<f64>() / (n - 1.0) / n).sqrt()
                } else {
                    matching[0].1
                };
                background = Some(mean);
                value = value.map(|v| v - mean);
                se = se.map(|s| (s * s + sem * sem).sqrt());
                correction.push_str(&format!(
                    "; background {:.4e} {} from {} no-enzyme well{}",
                    mean,
                    rate_unit,
                    matching.len(),
                    if matching.len() == 1 { "" } else { "s" }
                ));
            }
        }
        let corrected = value.zip(se);
        apply_plate_flags(rate, corrected, &noise, setup.role == Role::Sample);
        let used = value.is_some() && (rate.flags.is_empty() || settings.keep_flagged);
        wells.push(WellResult {
            well: *well,
            setup: (*setup).clone(),
            rate: rate.clone(),
            rate_value: value,
            rate_se: se,
            background,
            correction,
            used,
        });
    }
    PlateAnalysis {
        wells,
        rate_unit,
        concentration_unit,
        noise,
        n_blank_wells,
        warnings,
    }
}

/// A summary of flagged wells: how many carry each flag.
pub fn flag_counts(wells: &[WellResult]) -> BTreeMap<Flag, usize> {
    let mut counts = BTreeMap::new();
    for well in wells {
        for flag in &well.rate.flags {
            *counts.entry(*flag).or_insert(0) += 1;
        }
    }
    counts
}

/// The set of wells the data holds.
pub fn wells_in_data(data: &KineticData) -> BTreeSet<WellId> {
    data.wells.iter().map(|trace| trace.well).collect()
}
