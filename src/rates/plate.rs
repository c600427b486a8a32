//! From traces and layout to per-well rates: each well's product formed (from the plate's
//! [`PlateSignal`], computed once), the window search of every well (in parallel), plate-level
//! flags, and the subtraction of the matching no-enzyme background.
//!
//! Background: v = v_well - mean(v_no-enzyme) with se = sqrt(se_well^2 + sem_background^2).

use std::collections::BTreeMap;

use rayon::prelude::*;

use super::well::{
    apply_plate_flags, flag_words, well_rate, CriticalValues, Flag, PlateNoise, TraceInput, WellRate,
};
use crate::config::AnalysisSettings;
use crate::core::plate::WellId;
use crate::core::stats::{median, summary};
use crate::import::KineticData;
use crate::layout::{Layout, Role, WellSetup};
use crate::signal::PlateSignal;

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
        flag_words(&self.rate.flags)
    }
}

/// All wells of a plate, analysed.
#[derive(Debug, Clone)]
pub struct PlateAnalysis {
    /// Every layout well that is not `empty`, in plate order.
    pub wells: Vec<WellResult>,
    /// How raw readings became product formed (blank, sign, conversion).
    pub signal: PlateSignal,
    /// Blank noise used for the flags.
    pub noise: PlateNoise,
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

/// Analyses a plate: every layout well present in the data gets a rate, flags and corrections.
pub fn analyse_plate(data: &KineticData, layout: &Layout, settings: &AnalysisSettings) -> PlateAnalysis {
    let n_reads = data.times_s.len();
    let signal = PlateSignal::new(data, layout, settings);
    let warnings = signal.warnings.clone();
    let rate_unit = signal.rate_unit();
    let traces: BTreeMap<WellId, &[Option<f64>]> = data
        .wells
        .iter()
        .map(|trace| (trace.well, trace.values.as_slice()))
        .collect();

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
            let values = signal.product_formed(raw);
            let substrate_start = signal.per_absorbance.and(setup.substrate);
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
    let blank_slopes: Vec<f64> = blank_fits.iter().map(|f| f.slope).collect();
    let blank_slope_sd = (blank_slopes.len() >= 3)
        .then(|| summary(&blank_slopes).and_then(|s| s.sd))
        .flatten();
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

    let blank_note = if signal.n_blank_wells == 0 {
        "no blank correction".to_string()
    } else {
        format!("blank: mean of {} blank wells at each read", signal.n_blank_wells)
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
            let slopes: Vec<f64> = matching.iter().map(|m| m.0).collect();
            match summary(&slopes) {
                None => correction.push_str("; no background (no matching no-enzyme wells)"),
                Some(stats) => {
                    let mean = stats.mean;
                    // One control: its own slope's standard error stands for the background's.
                    let sem = stats.sem().unwrap_or(matching[0].1);
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
        signal,
        noise,
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
