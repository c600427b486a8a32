//! From traces and layout to per-well rates: each well's product formed (from the plate's
//! [`PlateSignal`], computed once), the window search of every well (in parallel), the plate's
//! noise model and the `noisy` flag, the no-enzyme background of each sample
//! ([`super::background`]), the `weak` flag, and whether each well is used.
//!
//! Each well keeps its window's slope (a chord) and, when the window allows, the tangent at mixing
//! time; `rate_value` is the initial rate by the chosen estimator: the tangent for `tangent`, else
//! the window's slope (the integrated-rate-law correction of `integrated` needs the group's fit and
//! is applied by [`PlateAnalysis::apply_initial_rates`]).

use std::collections::BTreeMap;

use rayon::prelude::*;

use super::background::{background_for, Background, Control};
use super::well::{
    apply_noise_flag, apply_weak_flag, flag_words, well_rate, CriticalValues, Flag, PlateNoise, TraceInput,
    WellRate,
};
use crate::config::{AnalysisSettings, InitialRateEstimator, SignalKind};
use crate::core::plate::WellId;
use crate::core::stats::summary;
use crate::import::{KineticData, Readings};
use crate::layout::{Layout, Role, WellSetup};
use crate::signal::{BlankUncertainty, PlateSignal};

/// How a well's rate was corrected.
#[derive(Debug, Clone, PartialEq)]
pub struct Correction {
    /// The blank wells averaged at each read (0: no blank correction); `None` for a blank itself.
    pub blank_wells: Option<usize>,
    /// The no-enzyme background (samples only).
    pub background: Option<Background>,
}

/// One analysed well.
#[derive(Debug, Clone)]
pub struct WellResult {
    /// The well.
    pub well: WellId,
    /// What the layout says of it.
    pub setup: WellSetup,
    /// The window, fits and flags.
    pub rate: WellRate,
    /// The window's slope after background subtraction (the chord), in the plate's rate unit.
    pub window_slope: Option<f64>,
    /// Its standard error (the window fit's and the background's).
    pub window_slope_se: Option<f64>,
    /// The initial rate at mixing after background subtraction, by the run's estimator.
    pub rate_value: Option<f64>,
    /// Its standard error.
    pub rate_se: Option<f64>,
    /// How far the rate moves per relative error in the well's S0, `d rate / d ln S0`, from the
    /// group's fitted law (the integrated estimator's; `None` otherwise): the shape of the
    /// pipetting part of the rate's weight.
    pub substrate_sensitivity: Option<f64>,
    /// The no-enzyme background subtracted, if any.
    pub background: Option<f64>,
    /// Which corrections the well got.
    pub correction: Correction,
    /// Whether the rate enters condition means and fits.
    pub used: bool,
    /// The reason a person gave for leaving the well out (`--exclude`, the layout's `exclude`
    /// column); such a well is never used.
    pub excluded_by_hand: Option<String>,
}

impl WellResult {
    /// The flags as the outputs write them.
    pub fn flag_text(&self) -> String {
        flag_words(&self.rate.flags)
    }

    /// Whether the well's flags leave it out (before `--keep-flagged`).
    pub fn excluded_by_flags(&self) -> bool {
        self.rate.flags.iter().any(|flag| flag.excludes())
    }
}

/// All wells of a plate, analysed.
#[derive(Debug, Clone)]
pub struct PlateAnalysis {
    /// Every layout well that is not `empty`, in plate order.
    pub wells: Vec<WellResult>,
    /// How raw readings became product formed (blank, sign, conversion).
    pub signal: PlateSignal,
    /// The noise model used for the flags.
    pub noise: PlateNoise,
    /// The estimator behind `rate_value`.
    pub estimator: InitialRateEstimator,
    /// Plate-level remarks (no blanks, no extinction, samples without a background...).
    pub warnings: Vec<String>,
}

impl PlateAnalysis {
    /// Wells left out of means and fits, with the reason.
    pub fn excluded(&self) -> impl Iterator<Item = (&WellResult, String)> {
        self.wells
            .iter()
            .filter(|well| !well.used && well.setup.role != Role::Empty)
            .map(|well| {
                let reason = if let Some(reason) = &well.excluded_by_hand {
                    format!("excluded: {reason}")
                } else if well.rate_value.is_none() {
                    "no rate".to_string()
                } else {
                    well.flag_text()
                };
                (well, reason)
            })
    }

    /// Leaves out the wells a person excluded, each with its reason: `used` false, the reason in
    /// the well's notes. Wells not on the plate's analysis are passed over (the caller checks
    /// exclusions against the layout first).
    pub fn apply_exclusions<'a>(&mut self, exclusions: impl IntoIterator<Item = (WellId, &'a str)>) {
        let by_well: BTreeMap<WellId, &str> = exclusions.into_iter().collect();
        for well in &mut self.wells {
            if let Some(reason) = by_well.get(&well.well) {
                well.used = false;
                well.excluded_by_hand = Some((*reason).to_string());
                well.rate.notes.push(format!("excluded: {reason}"));
            }
        }
    }

    /// Replaces wells' initial rates (and standard errors) by better estimates made upstream of
    /// the plate (the group fits' depletion-corrected rates); wells not named keep theirs.
    pub fn apply_initial_rates(&mut self, rates: &BTreeMap<WellId, (f64, f64)>) {
        for well in &mut self.wells {
            if let Some(&(rate, se)) = rates.get(&well.well) {
                well.rate_value = Some(rate);
                well.rate_se = Some(se);
            }
        }
    }

    /// Records the wells' `d rate / d ln S0` from the group fits (see
    /// [`WellResult::substrate_sensitivity`]).
    pub fn apply_substrate_sensitivities(&mut self, sensitivities: &BTreeMap<WellId, f64>) {
        for well in &mut self.wells {
            if let Some(&sensitivity) = sensitivities.get(&well.well) {
                well.substrate_sensitivity = Some(sensitivity);
            }
        }
    }
}

/// For fluorescence and luminescence, the wells whose export holds text where a reading belongs
/// (the reader writes a marker there when the light passes the detector's range; common
/// practice), as raw traces with those reads set to infinity, so that the saturation limit ends
/// the usable reads there. Absorbance keeps such cells unreadable, as before.
fn over_range_traces(data: &KineticData, signal_kind: SignalKind) -> BTreeMap<WellId, Readings> {
    if signal_kind == SignalKind::Absorbance {
        return BTreeMap::new();
    }
    data.wells
        .iter()
        .filter(|trace| trace.unreadable.iter().any(|read| !read.text.trim().is_empty()))
        .map(|trace| {
            let mut limited = trace.values.clone();
            for read in trace
                .unreadable
                .iter()
                .filter(|read| !read.text.trim().is_empty())
            {
                limited.set(read.read_index, Some(f64::INFINITY));
            }
            (trace.well, limited)
        })
        .collect()
}

/// The substrate a sample has left at the middle of its window, `S0 - slope x t_mid` (t_mid
/// counted from mixing, dead time added): the [S] a first-order background acts on over the
/// window (the least-squares slope of `k S(t)` over a window is `k S` at its middle while `S` falls
/// about linearly; [`Background::at_substrate_left`]). `None` without S0, a window, or rates in
/// concentration (the slope must be in the unit of S0).
fn substrate_left_mid_window(
    setup: &WellSetup,
    rate: &WellRate,
    in_concentration: bool,
    settings: &AnalysisSettings,
) -> Option<f64> {
    let s0 = setup.substrate.filter(|s| *s > 0.0 && in_concentration)?;
    let fit = rate.fit?;
    let (start, end) = rate.window_s?;
    let middle = 0.5 * (start + end) + settings.rates.dead_time_s;
    let converted = fit.slope.max(0.0) * middle.max(0.0);
    Some((s0 - converted).max(0.0))
}

/// Analyses a plate: every layout well present in the data gets a rate, flags and corrections.
pub fn analyse_plate(data: &KineticData, layout: &Layout, settings: &AnalysisSettings) -> PlateAnalysis {
    let n_reads = data.times_s.len();
    let signal = PlateSignal::new(data, layout, settings);
    let mut warnings = signal.warnings.clone();
    let traces: BTreeMap<WellId, &Readings> = data
        .wells
        .iter()
        .map(|trace| (trace.well, &trace.values))
        .collect();
    let over_range = over_range_traces(data, settings.rates.signal);

    let critical = CriticalValues::new(settings.rates.alpha, n_reads);
    let wells_in_play: Vec<(WellId, &WellSetup, &Readings)> = layout
        .wells
        .iter()
        .filter(|(_, setup)| setup.role != Role::Empty)
        .filter_map(|(well, setup)| traces.get(well).map(|trace| (*well, setup, *trace)))
        .collect();
    let mut rates: Vec<WellRate> = wells_in_play
        .par_iter()
        .map(|(well, setup, raw)| {
            let values = signal.well_product_formed(*well, raw);
            let substrate_start = signal.per_absorbance.and(setup.substrate);
            let input = TraceInput {
                times_s: &data.times_s,
                values: &values,
                raw_absorbance: over_range.get(well).map_or(*raw, |limited| limited),
                substrate_start,
            };
            well_rate(input, &settings.rates, &critical)
        })
        .collect();

    // The plate's noise: every well's read noise by absorbance, the blanks' slopes.
    let is_blank = |index: usize| wells_in_play[index].1.role == Role::Blank;
    let blank_slopes: Vec<f64> = rates
        .iter()
        .enumerate()
        .filter(|(index, _)| is_blank(*index))
        .filter_map(|(_, rate)| rate.fit.map(|fit| fit.slope))
        .collect();
    let blank_slope_sd = (blank_slopes.len() >= 3)
        .then(|| summary(&blank_slopes).and_then(|s| s.sd))
        .flatten();
    let blank_read_sds: Vec<f64> = rates
        .iter()
        .enumerate()
        .filter(|(index, _)| is_blank(*index))
        .filter_map(|(_, rate)| rate.noise.map(|noise| noise.sd))
        .collect();
    let noise = PlateNoise::new(
        rates.iter().filter_map(|rate| rate.noise).collect(),
        &blank_read_sds,
        blank_slope_sd,
    );
    // `noisy` first, so that the background sees the controls' full flags.
    for rate in &mut rates {
        apply_noise_flag(rate, &noise);
    }

    let controls: Vec<Control> = wells_in_play
        .iter()
        .zip(&rates)
        .filter(|((_, setup, _), _)| setup.role == Role::NoEnzyme)
        .map(|((well, setup, _), rate)| Control {
            well: *well,
            setup,
            slope: rate.fit.map(|fit| (fit.slope, fit.slope_se)),
            flags: rate.flags.clone(),
        })
        .collect();

    let blank_subtracted = !matches!(signal.blank_uncertainty, BlankUncertainty::None);
    let mut without_background = Vec::new();
    let mut wells = Vec::with_capacity(wells_in_play.len());
    for ((well, setup, _), rate) in wells_in_play.iter().zip(rates.iter_mut()) {
        let blank_wells = (setup.role != Role::Blank).then_some(signal.n_blank_wells);
        // Screening controls are measured like samples, so that % activity compares like with like.
        let gets_background = setup.role == Role::Sample || setup.role.is_screening_control();
        let background = gets_background.then(|| {
            let at_s0 = background_for(setup, &controls, blank_subtracted);
            match substrate_left_mid_window(setup, rate, signal.per_absorbance.is_some(), settings) {
                Some(left) => at_s0.at_substrate_left(left),
                None => at_s0,
            }
        });
        if let Some(Background::None(_)) = &background {
            without_background.push(*well);
        }
        let (bg_rate, bg_se) = background.as_ref().and_then(Background::rate).unzip();
        let subtract = |(value, se): (f64, f64)| {
            (
                value - bg_rate.unwrap_or(0.0),
                (se * se + bg_se.map_or(0.0, |s| s * s)).sqrt(),
            )
        };
        let chord = rate.fit.map(|fit| subtract((fit.slope, fit.slope_se)));
        let initial = match settings.initial_rate {
            InitialRateEstimator::Tangent => rate.tangent.map(subtract),
            InitialRateEstimator::Chord | InitialRateEstimator::Integrated => chord,
        };
        if setup.role == Role::Sample {
            apply_weak_flag(rate, chord, &noise);
        }
        let excluded = rate.flags.iter().any(|flag| flag.excludes());
        let used = initial.is_some() && (!excluded || settings.keep_flagged);
        wells.push(WellResult {
            well: *well,
            setup: (*setup).clone(),
            rate: rate.clone(),
            window_slope: chord.map(|(value, _)| value),
            window_slope_se: chord.map(|(_, se)| se),
            rate_value: initial.map(|(value, _)| value),
            rate_se: initial.map(|(_, se)| se),
            substrate_sensitivity: None,
            background: bg_rate,
            correction: Correction {
                blank_wells,
                background,
            },
            used,
            excluded_by_hand: None,
        });
    }
    if !without_background.is_empty() && !controls.is_empty() {
        let names: Vec<String> = without_background.iter().map(WellId::to_string).collect();
        warnings.push(format!(
            "{} sample well(s) have no no-enzyme background (no usable control serves them): {}",
            names.len(),
            names.join(", ")
        ));
    }
    PlateAnalysis {
        wells,
        signal,
        noise,
        estimator: settings.initial_rate,
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
