//! The per-group progress-curve analysis behind `progress.json`: which groups get the global fit
//! (`--progress auto|always|never`), the wells' curves in signal units, the model choice
//! ([`super::choice`]), identifiability warnings, the side-by-side comparison with the
//! initial-rate analysis, and the trust decision ([`super::trust`]).
//!
//! Signal: per read, raw absorbance minus the plate's blank at that read (from the plate's
//! [`crate::signal::PlateSignal`], computed once), minus the matching no-enzyme background drift
//! (the background rate of the initial-rate analysis, converted back to AU/s, times t); reads before
//! `--skip`, unreadable reads and reads above `--max-absorbance` are left out, and so are wells
//! flagged `lag` (the rate laws assume full activity from the start), `noisy` (the fit weights every
//! read equally) or `saturated`.
//! Signal per unit substrate: `g = -epsilon l c_unit` for a product read (P = S0 - S),
//! `+epsilon l c_unit` for a substrate read, `c_unit` the layout's substrate unit in M.
//!
//! S0 from the signal (substrate readout): the straight line through a well's first reads,
//! extrapolated back to the reaction's start (t = -dead time), divided by `g`; wells where it differs
//! from the layout by more than [`S0_DISAGREEMENT`] are named, and `--s0-from-signal` fits with it.

use std::collections::BTreeMap;

use rayon::prelude::*;

use super::choice::{compare_models, ModelTried};
use super::global_fit::{
    fit_group_from, ErrorShape, GlobalFit, GlobalFitOptions, ProgressModel, SharedErrorBlock,
    SharedSignalError, SharedSignalErrors, WellCurve,
};
use super::trust::{
    decide_trust, RunReason, Suspicion, Trust, TrustDecision, TrustEvidence, TrustReason, WellEvidence,
};
use crate::config::{AnalysisSettings, ProgressMode, Readout};
use crate::core::format::significant;
use crate::core::plate::WellId;
use crate::core::stats::{evenly_spaced_indices, median, straight_line, t_quantile_975};
use crate::groups::{sample_groups, GroupFit, GroupKey, ParameterReport};
use crate::import::KineticData;
use crate::layout::Layout;
use crate::rates::background::{Background, BackgroundLaw};
use crate::rates::{Flag, PlateAnalysis, WellResult};
use crate::signal::{BlankUncertainty, PlateSignal};

/// Relative difference between the layout's S0 and the S0 read from the first signal above which
/// the report names the well (a rule of this program: beyond pipetting precision).
pub const S0_DISAGREEMENT: f64 = 0.10;

/// Correlation above which a pair of parameters is reported as not separable.
pub const CORRELATION_WARNING: f64 = 0.99;

/// The most reads of one well a progress-curve fit takes. A longer trace is fitted on this many
/// reads evenly spaced over it (the first and last always among them). Why: the fit's cost and
/// memory grow with the reads (a 1536-well x 2000-read plate held 1.5 million points per group and
/// took 640 MB and 97 s), while a curve's shape is fixed by far fewer; the interval is clustered by
/// well, so it stays honest whatever the number of reads (a well's reads are not independent
/// evidence about kcat and Km anyway). Every read stays in the tables and the initial rates.
pub const PROGRESS_READS_PER_WELL: usize = 250;

/// Why a sample well is left out of its group's progress-curve fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ProgressLeftOutReason {
    /// The layout gives no substrate concentration.
    NoSubstrate,
    /// The layout gives no enzyme concentration.
    NoEnzyme,
    /// Flagged noisy.
    Noisy,
    /// Flagged lag.
    Lag,
    /// Flagged saturated.
    Saturated,
    /// The data hold no trace for it.
    NoTrace,
    /// Fewer than 3 reads remain.
    TooFewReads,
}

/// A well left out of a progress-curve fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ProgressLeftOut {
    /// The well.
    pub well: WellId,
    /// Why.
    pub reason: ProgressLeftOutReason,
}

/// One fitted well of a group: its S0, its fit diagnostics and the initial-rate comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct ProgressWell {
    /// The well.
    pub well: String,
    /// S0 from the layout.
    pub s0: Option<f64>,
    /// S0 from the first signal (substrate readout).
    pub s0_from_signal: Option<f64>,
    /// S0 the fit used.
    pub s0_used: f64,
    /// Reads fitted.
    pub n: usize,
    /// The fitted signal offset, AU.
    pub signal_offset: f64,
    /// Residual SD, AU.
    pub residual_sd: f64,
    /// Runs of residual signs.
    pub runs: usize,
    /// Runs-test z.
    pub runs_z: Option<f64>,
    /// Whether the runs test finds systematic misfit.
    pub systematic_misfit: bool,
    /// The initial rate the fitted constants imply.
    pub implied_initial_rate: f64,
    /// The initial-rate window slope (after background).
    pub window_rate: Option<f64>,
    /// Window slope over the implied initial rate.
    pub window_over_implied: Option<f64>,
    /// Fraction of S0 converted by the last read, by the fitted curve.
    pub fitted_conversion: f64,
    /// The well's initial-rate flags.
    pub flags: Option<Vec<Flag>>,
}

/// The correlation of a fit's shared parameters.
#[derive(Debug, Clone, PartialEq)]
pub struct Correlation {
    /// Parameter names, in matrix order.
    pub parameters: Vec<String>,
    /// The matrix, row by row.
    pub matrix: Vec<Vec<f64>>,
}

/// The initial-rate fit of the same group, side by side.
#[derive(Debug, Clone, PartialEq)]
pub struct InitialRateSummary {
    /// kcat of the initial-rate fit.
    pub kcat: Option<ParameterReport>,
    /// Km of the initial-rate fit.
    pub km: Option<ParameterReport>,
    /// Why it failed, if it did.
    pub error: Option<String>,
}

/// One group's progress-curve report.
#[derive(Debug, Clone, PartialEq)]
pub struct ProgressGroupReport {
    /// What the group's wells share (as in `fit.json`).
    pub group: GroupKey,
    /// Why the analysis ran (or did not).
    pub run: RunReason,
    /// Whether a fit was made.
    pub analysed: bool,
    /// The model chosen.
    pub model: Option<ProgressModel>,
    /// kcat, Km, kcat_over_Km, and the chosen extra term.
    pub parameters: BTreeMap<String, ParameterReport>,
    /// Correlation of the shared parameters.
    pub correlation: Option<Correlation>,
    /// Residual SD, AU.
    pub residual_sd: Option<f64>,
    /// AICc of the chosen model.
    pub aicc: Option<f64>,
    /// Reads fitted.
    pub n: usize,
    /// Wells fitted.
    pub n_wells: usize,
    /// Dead time used (fixed or fitted), s.
    pub dead_time_s: Option<f64>,
    /// Every model tried.
    pub models_tried: Vec<ModelTried>,
    /// Per-well diagnostics and the initial-rate comparison.
    pub wells: Vec<ProgressWell>,
    /// Sample wells left out, with the reason.
    pub wells_left_out: Vec<ProgressLeftOut>,
    /// The initial-rate analysis of the same group, side by side.
    pub initial_rate_fit: Option<InitialRateSummary>,
    /// Which analysis to trust, and why.
    pub decision: TrustDecision,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
    /// Why no fit could be made, if none was.
    pub error: Option<String>,
    /// Each fitted well's reads and fitted curve, for the report's plots.
    pub curves: Vec<ProgressCurve>,
    /// How the constants move when the calibration or the substrate is off by 5%.
    pub sensitivity: Vec<CalibrationSensitivity>,
}

/// An input the progress-curve constants depend on (initial-rate Km does not depend on either:
/// a scale error in the rates cancels in Km).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum CalibrationInput {
    /// Extinction coefficient times pathlength (the signal per concentration).
    ExtinctionPathlength,
    /// Every well's starting substrate concentration.
    SubstrateStart,
}

/// The relative change of each constant when one input is multiplied by `factor` and the chosen
/// model refitted.
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationSensitivity {
    /// The input changed.
    pub input: CalibrationInput,
    /// The factor it was multiplied by (0.95 or 1.05).
    pub factor: f64,
    /// Constant name -> refitted value / reported value - 1 (`kcat`, `Km`, `kcat_over_Km`).
    pub relative_change: BTreeMap<String, f64>,
}

/// The factors the sensitivity is computed at: +-5%, a common uncertainty of a plate's
/// extinction x pathlength (meniscus, volume) and of a pipetted substrate stock (common practice).
pub const SENSITIVITY_FACTORS: [f64; 2] = [0.95, 1.05];

/// Refits the chosen model with each input of [`CalibrationInput`] off by each of
/// [`SENSITIVITY_FACTORS`] and reports how kcat, Km and kcat/Km move. A refit that fails is left
/// out (its absence is the message).
fn calibration_sensitivity(
    curves: &[WellCurve],
    chosen: &GlobalFit,
    base: &GlobalFitOptions,
) -> Vec<CalibrationSensitivity> {
    let options = GlobalFitOptions {
        model: chosen.model,
        profile_km: false,
        shared_errors: Default::default(),
        ..base.clone()
    };
    let constants = |fit: &GlobalFit| -> Option<(f64, f64)> {
        Some((fit.parameter("kcat")?.value, fit.parameter("Km")?.value))
    };
    let Some((kcat, km)) = constants(chosen) else {
        return Vec::new();
    };
    let cases: Vec<(CalibrationInput, f64)> = [
        CalibrationInput::ExtinctionPathlength,
        CalibrationInput::SubstrateStart,
    ]
    .into_iter()
    .flat_map(|input| SENSITIVITY_FACTORS.map(|factor| (input, factor)))
    .collect();
    // Four independent refits: in parallel.
    cases
        .into_par_iter()
        .filter_map(|(input, factor)| {
            let perturbed: Vec<WellCurve> = curves
                .iter()
                .map(|curve| match input {
                    CalibrationInput::ExtinctionPathlength => WellCurve {
                        signal_per_substrate: curve.signal_per_substrate * factor,
                        ..curve.clone()
                    },
                    CalibrationInput::SubstrateStart => WellCurve {
                        s0: curve.s0 * factor,
                        ..curve.clone()
                    },
                })
                .collect();
            // Started from the chosen fit: a 5% change moves the optimum a little way.
            let (new_kcat, new_km) = fit_group_from(&perturbed, &options, Some(chosen))
                .ok()
                .as_ref()
                .and_then(constants)?;
            let relative_change = BTreeMap::from([
                ("kcat".to_string(), new_kcat / kcat - 1.0),
                ("Km".to_string(), new_km / km - 1.0),
                (
                    "kcat_over_Km".to_string(),
                    (new_kcat / new_km) / (kcat / km) - 1.0,
                ),
            ]);
            Some(CalibrationSensitivity {
                input,
                factor,
                relative_change,
            })
        })
        .collect()
}

/// One well's observed and fitted progress curve, in the signal units the fit used (AU, blank- and
/// background-corrected).
#[derive(Debug, Clone, PartialEq)]
pub struct ProgressCurve {
    /// The well.
    pub well: String,
    /// S0 from the layout.
    pub s0: Option<f64>,
    /// Read times, s.
    pub times_s: Vec<f64>,
    /// Observed signal, AU.
    pub observed: Vec<f64>,
    /// Fitted signal, AU.
    pub fitted: Vec<f64>,
    /// Runs test on the residual signs: runs and z.
    pub runs: (usize, Option<f64>),
    /// Whether the runs test finds systematic misfit.
    pub systematic_misfit: bool,
}

/// The progress-curve analysis of a plate.
#[derive(Debug, Clone, PartialEq)]
pub struct ProgressAnalysis {
    /// When it ran.
    pub mode: ProgressMode,
    /// One report per group of sample wells.
    pub groups: Vec<ProgressGroupReport>,
}

/// The signs of suspicion in a group's initial rates ([`super::trust`] module docs).
fn suspicion(wells: &[&WellResult], max_conversion: f64) -> Option<Suspicion> {
    let count = |flag: Flag| wells.iter().filter(|w| w.rate.flags.contains(&flag)).count();
    let median_s0 = median(wells.iter().filter_map(|w| w.setup.substrate));
    let low_substrate_conversion = median_s0.and_then(|m| {
        median(
            wells
                .iter()
                .filter(|w| w.setup.substrate.is_some_and(|s| s <= m))
                .filter_map(|w| w.rate.conversion),
        )
    });
    Suspicion {
        depleted: count(Flag::Depleted),
        nonlinear: count(Flag::Nonlinear),
        over_limit: wells
            .iter()
            .filter(|w| w.rate.conversion.is_some_and(|c| c > max_conversion))
            .count(),
        max_conversion,
        low_substrate_conversion,
    }
    .found()
}

/// Analyses every group of sample wells as `settings.progress.mode` says.
pub fn analyse_progress(
    data: &KineticData,
    layout: &Layout,
    analysis: &PlateAnalysis,
    initial_fits: &[GroupFit],
    settings: &AnalysisSettings,
) -> ProgressAnalysis {
    let mode = settings.progress.mode;
    // Groups are independent: fitted in parallel (order kept).
    let groups = sample_groups(analysis, layout)
        .into_par_iter()
        .map(|(group, wells)| {
            let initial = initial_fits.iter().find(|fit| fit.group == group);
            let suspect = suspicion(&wells, settings.rates.max_conversion);
            let run = match (mode, suspect) {
                (ProgressMode::Never, _) => RunReason::Never,
                (ProgressMode::Always, suspicion) => RunReason::Always(suspicion),
                (ProgressMode::Auto, Some(suspicion)) => RunReason::Suspect(suspicion),
                (ProgressMode::Auto, None) => RunReason::Sound,
            };
            let input = GroupInput {
                group,
                wells: &wells,
                data,
                layout,
                analysis,
                settings,
                initial,
            };
            if run.runs() {
                analyse_group(input, run)
            } else {
                empty_report(input.group, run, initial)
            }
        })
        .collect();
    ProgressAnalysis { mode, groups }
}

fn initial_summary(initial: Option<&GroupFit>) -> Option<InitialRateSummary> {
    initial.map(|fit| InitialRateSummary {
        kcat: fit.parameters.get("kcat").cloned(),
        km: fit.parameters.get("Km").cloned(),
        error: fit.error.clone(),
    })
}

fn empty_report(group: GroupKey, run: RunReason, initial: Option<&GroupFit>) -> ProgressGroupReport {
    ProgressGroupReport {
        group,
        run,
        analysed: false,
        model: None,
        parameters: BTreeMap::new(),
        correlation: None,
        residual_sd: None,
        aicc: None,
        n: 0,
        n_wells: 0,
        dead_time_s: None,
        models_tried: Vec::new(),
        wells: Vec::new(),
        wells_left_out: Vec::new(),
        initial_rate_fit: initial_summary(initial),
        decision: TrustDecision {
            trust: Trust::InitialRate,
            reason: TrustReason::NotRun(run),
        },
        warnings: Vec::new(),
        error: None,
        curves: Vec::new(),
        sensitivity: Vec::new(),
    }
}

struct GroupInput<'a> {
    group: GroupKey,
    wells: &'a [&'a WellResult],
    data: &'a KineticData,
    layout: &'a Layout,
    analysis: &'a PlateAnalysis,
    settings: &'a AnalysisSettings,
    initial: Option<&'a GroupFit>,
}

/// A fitted well's S0 as the layout gives it and as the first signal gives it, and its background.
struct SubstrateStart {
    layout: f64,
    from_signal: Option<f64>,
    background: Option<Background>,
    /// Concentration per signal unit of the well (its standard curve's, or Beer-Lambert's).
    per_absorbance: f64,
}

/// The errors the group's signals share, from the plate's estimated corrections (the blank and the
/// no-enzyme background), with their covariance: a block per correction.
fn shared_errors(signal: &PlateSignal, starts: &[SubstrateStart]) -> SharedSignalErrors {
    let n = starts.len();
    let mut errors = Vec::new();
    let mut blocks: Vec<(Vec<Vec<f64>>, f64)> = Vec::new();
    // The blank is subtracted from every well alike: the signal moves by minus its error.
    match &signal.blank_uncertainty {
        BlankUncertainty::None => {}
        BlankUncertainty::Smooth {
            t_scale,
            covariance,
            degrees_of_freedom,
        } => {
            for power in 0..covariance.len() {
                // The blank's constant slope (power 1) is in the controls' rates too: a background
                // that takes it up whole (`Background::cancels_blank_slope`) takes it out of the
                // drift subtracted from the well, which leaves the well's signal free of it.
                let well_weights = starts
                    .iter()
                    .map(|start| {
                        let cancelled = start
                            .background
                            .as_ref()
                            .is_some_and(Background::cancels_blank_slope);
                        if power == 1 && cancelled {
                            0.0
                        } else {
                            -1.0
                        }
                    })
                    .collect();
                errors.push(SharedSignalError {
                    well_weights,
                    shape: ErrorShape::Power {
                        power: power as i32,
                        t_scale: *t_scale,
                    },
                });
            }
            blocks.push((covariance.clone(), *degrees_of_freedom));
        }
        BlankUncertainty::PerRead { variances } => {
            // Each read's variance comes from the blank wells' pooled scatter over every read:
            // many degrees of freedom, counted as known.
            for (time, variance) in signal.read_times_s.iter().zip(variances) {
                errors.push(SharedSignalError {
                    well_weights: vec![-1.0; n],
                    shape: ErrorShape::AtTime(*time),
                });
                blocks.push((vec![vec![*variance]], f64::INFINITY));
            }
        }
    }
    // The background drift (rate x t, in AU) is subtracted from each well it serves.
    if signal.per_absorbance.is_none() {
        return assemble(errors, &blocks);
    }
    let to_au = |start: &SubstrateStart| -signal.sign / start.per_absorbance;
    let linear = ErrorShape::Power {
        power: 1,
        t_scale: 1.0,
    };
    let mut laws: Vec<BackgroundLaw> = Vec::new();
    let mut matched: Vec<(f64, f64, usize)> = Vec::new();
    for start in starts {
        match &start.background {
            Some(Background::Modelled { law, .. }) if !laws.contains(law) => laws.push(*law),
            Some(Background::Matched { rate, se, controls })
                if !matched.iter().any(|m| (m.0, m.1) == (*rate, *se)) =>
            {
                matched.push((*rate, *se, *controls));
            }
            _ => {}
        }
    }
    for law in laws {
        let serves = |start: &SubstrateStart| matches!(&start.background, Some(Background::Modelled { law: l, .. }) if *l == law);
        errors.push(SharedSignalError {
            well_weights: starts
                .iter()
                .map(|start| {
                    if serves(start) {
                        // The law's slope enters at the [S] its rate was evaluated at.
                        let at = start
                            .background
                            .as_ref()
                            .and_then(Background::law_substrate)
                            .unwrap_or(start.layout);
                        to_au(start) * at
                    } else {
                        0.0
                    }
                })
                .collect(),
            shape: linear,
        });
        errors.push(SharedSignalError {
            well_weights: starts
                .iter()
                .map(|start| if serves(start) { to_au(start) } else { 0.0 })
                .collect(),
            shape: linear,
        });
        blocks.push((
            law.covariance.iter().map(|row| row.to_vec()).collect(),
            law.degrees_of_freedom,
        ));
    }
    for (rate, se, controls) in matched {
        errors.push(SharedSignalError {
            well_weights: starts
                .iter()
                .map(|start| match &start.background {
                    Some(Background::Matched { rate: r, se: s, .. }) if (*r, *s) == (rate, se) => {
                        to_au(start)
                    }
                    _ => 0.0,
                })
                .collect(),
            shape: linear,
        });
        // Several controls: their mean's SE from their scatter; one: its own slope's SE from its
        // many reads, counted as known.
        let degrees_of_freedom = if controls >= 2 {
            (controls - 1) as f64
        } else {
            f64::INFINITY
        };
        blocks.push((vec![vec![se * se]], degrees_of_freedom));
    }
    assemble(errors, &blocks)
}

/// The errors with their block-diagonal covariance; each block comes with the degrees of freedom
/// of its estimate.
fn assemble(errors: Vec<SharedSignalError>, blocks: &[(Vec<Vec<f64>>, f64)]) -> SharedSignalErrors {
    let size: usize = blocks.iter().map(|(block, _)| block.len()).sum();
    let mut covariance = vec![vec![0.0; size]; size];
    let mut at = 0;
    for (block, _) in blocks {
        for (i, row) in block.iter().enumerate() {
            for (j, value) in row.iter().enumerate() {
                covariance[at + i][at + j] = *value;
            }
        }
        at += block.len();
    }
    let blocks = blocks
        .iter()
        .map(|(block, degrees_of_freedom)| SharedErrorBlock {
            errors: block.len(),
            degrees_of_freedom: *degrees_of_freedom,
        })
        .collect();
    SharedSignalErrors {
        errors,
        covariance,
        blocks,
    }
}

/// The wells' curves, or why none can be built for the group.
fn well_curves(
    input: &GroupInput,
    left_out: &mut Vec<ProgressLeftOut>,
    warnings: &mut Vec<String>,
    starts: &mut Vec<SubstrateStart>,
) -> Result<Vec<WellCurve>, String> {
    let settings = input.settings;
    let signal = &input.analysis.signal;
    let Some(per_absorbance) = signal.per_absorbance else {
        return Err(
            "no extinction coefficient and pathlength: a progress-curve fit needs the signal in concentration units (give --extinction and --pathlength)"
                .to_string(),
        );
    };
    let s_unit = input
        .layout
        .substrate_unit
        .ok_or("the layout gives no substrate unit, so S0 is unknown")?;
    // The enzyme in the substrate's unit: by its molar unit, or from a mass concentration
    // through the molecular weight.
    let enzyme_factor = match input.layout.enzyme_factor_to(s_unit, settings.enzyme_mw_kda) {
        Some(factor) => factor,
        None if input.layout.enzyme_mass_unit.is_some() => {
            return Err("the enzyme is given as a mass concentration without --enzyme-mw, so kcat cannot be separated from Vmax".to_string())
        }
        None => {
            return Err("the layout gives no enzyme concentration, so kcat cannot be separated from Vmax".to_string())
        }
    };
    let mut curves = Vec::new();
    let mut disagreements = Vec::new();
    // The read counts of the wells whose traces were thinned for the fit.
    let mut thinned_wells: Vec<usize> = Vec::new();
    for well in input.wells {
        let mut leave = |reason: ProgressLeftOutReason| {
            left_out.push(ProgressLeftOut {
                well: well.well,
                reason,
            });
        };
        let Some(s0) = well.setup.substrate.filter(|s| *s > 0.0) else {
            leave(ProgressLeftOutReason::NoSubstrate);
            continue;
        };
        let Some(e0) = well.setup.enzyme.filter(|e| *e > 0.0) else {
            leave(ProgressLeftOutReason::NoEnzyme);
            continue;
        };
        if well.rate.flags.contains(&Flag::Noisy) {
            leave(ProgressLeftOutReason::Noisy);
            continue;
        }
        if well.rate.flags.contains(&Flag::Lag) {
            leave(ProgressLeftOutReason::Lag);
            continue;
        }
        if well.rate.flags.contains(&Flag::Saturated) {
            leave(ProgressLeftOutReason::Saturated);
            continue;
        }
        let Some(trace) = input.data.wells.iter().find(|t| t.well == well.well) else {
            leave(ProgressLeftOutReason::NoTrace);
            continue;
        };
        // Signal per substrate unit (the well's own standard curve where it has one); the signal
        // falls with S for a product read.
        let per_absorbance = signal.conversion_of(well.well).unwrap_or(per_absorbance);
        let per_unit = 1.0 / per_absorbance;
        let signal_per_substrate = -signal.sign * per_unit;
        // The background is in product formed per second; back to AU/s, in the signal's sign.
        let drift = well.background.unwrap_or(0.0) * signal.sign * per_unit;
        let mut times_s = Vec::new();
        let mut values = Vec::new();
        for ((time, value), blank) in input
            .data
            .times_s
            .iter()
            .zip(&trace.values)
            .zip(&signal.blank_per_read)
        {
            if let Some(raw) = value {
                if *time >= settings.rates.skip_s && raw <= settings.rates.max_absorbance {
                    times_s.push(*time);
                    values.push(signal.straightened_signal(well.well, raw - blank) - drift * time);
                }
            }
        }
        if values.len() < 3 {
            leave(ProgressLeftOutReason::TooFewReads);
            continue;
        }
        // A substrate read carries S0 itself: the early straight line extrapolated back to the
        // start of the reaction (t = -dead time), over the signal per unit substrate.
        let s0_signal = (settings.readout == Readout::Substrate)
            .then(|| {
                let n = times_s.len().min(6);
                straight_line(&times_s[..n], &values[..n]).map(|line| line.at(-settings.rates.dead_time_s))
            })
            .flatten()
            .map(|intercept| intercept / signal_per_substrate)
            .filter(|s| s.is_finite() && *s > 0.0);
        if let Some(from_signal) = s0_signal {
            if (from_signal / s0 - 1.0).abs() > S0_DISAGREEMENT {
                disagreements.push(format!(
                    "{} (layout {}, signal {})",
                    well.well,
                    significant(s0),
                    significant(from_signal)
                ));
            }
        }
        if times_s.len() > PROGRESS_READS_PER_WELL {
            thinned_wells.push(times_s.len());
            let kept = evenly_spaced_indices(times_s.len(), PROGRESS_READS_PER_WELL);
            times_s = kept.iter().map(|&i| times_s[i]).collect();
            values = kept.iter().map(|&i| values[i]).collect();
        }
        starts.push(SubstrateStart {
            layout: s0,
            from_signal: s0_signal,
            background: well.correction.background.clone(),
            per_absorbance,
        });
        let s0_used = match (settings.progress.s0_from_signal, s0_signal) {
            (true, Some(from_signal)) => from_signal,
            _ => s0,
        };
        curves.push(WellCurve {
            label: well.well.to_string(),
            times_s,
            signal: values,
            s0: s0_used,
            e0: e0 * enzyme_factor,
            signal_per_substrate,
        });
    }
    if !disagreements.is_empty() {
        warnings.push(format!(
            "S0 from the first signal differs from the layout by more than {:.0}% in {} well(s) (a pipetting or stock error?): {}",
            100.0 * S0_DISAGREEMENT,
            disagreements.len(),
            disagreements.join(", ")
        ));
    }
    if let (Some(fewest), Some(most)) = (thinned_wells.iter().min(), thinned_wells.iter().max()) {
        let reads = if fewest == most {
            fewest.to_string()
        } else {
            format!("{fewest}-{most}")
        };
        warnings.push(format!(
            "{} well(s) hold {reads} reads: the progress fit used {PROGRESS_READS_PER_WELL} of each, evenly spaced from the first to the last (the interval is clustered by well; every read stays in the tables and the initial rates)",
            thinned_wells.len()
        ));
    }
    if settings.progress.s0_from_signal && settings.readout != Readout::Substrate {
        warnings.push("--s0-from-signal needs --readout substrate; the layout's S0 was used".to_string());
    }
    Ok(curves)
}

/// A fitted parameter as reported: its standard error and interval allow for errors shared by
/// the reads of a well (clustered by well), with the read-level ones beside them.
fn parameter(fit: &GlobalFit, name: &str, unit: &str) -> Option<ParameterReport> {
    let p = fit.parameter(name)?;
    let se = p.se_by_well.or(p.se);
    let determined = se.is_some_and(|se| se.is_finite() && se <= 0.5 * p.value.abs());
    Some(ParameterReport {
        value: p.value,
        se,
        ci95: p.ci95_by_well.or(p.ci95),
        unit: unit.to_string(),
        determined,
        ci95_profile: None,
        ci95_bootstrap: None,
        asymptotic: Some((p.se, p.ci95)),
    })
}

fn analyse_group(input: GroupInput, run: RunReason) -> ProgressGroupReport {
    let mut report = empty_report(input.group.clone(), run, input.initial);
    let mut starts = Vec::new();
    let curves = match well_curves(
        &input,
        &mut report.wells_left_out,
        &mut report.warnings,
        &mut starts,
    ) {
        Ok(curves) => curves,
        Err(message) => return failed(report, message),
    };
    let base = GlobalFitOptions {
        dead_time_s: input.settings.rates.dead_time_s,
        fit_dead_time: input.settings.progress.fit_dead_time,
        shared_errors: shared_errors(&input.analysis.signal, &starts),
        ..GlobalFitOptions::default()
    };
    let (chosen, models_tried) = match compare_models(&curves, &base) {
        Ok(result) => result,
        Err(error) => return failed(report, format!("no progress-curve fit: {error}")),
    };
    report.models_tried = models_tried;
    fill_from_fit(&mut report, &chosen, &curves, &starts, &input);
    report.sensitivity = calibration_sensitivity(&curves, &chosen, &base);
    let evidence = TrustEvidence {
        model: chosen.model,
        run,
        wells: report
            .wells
            .iter()
            .map(|w| WellEvidence {
                s0: w.s0,
                window_over_implied: w.window_over_implied,
                systematic_misfit: w.systematic_misfit,
            })
            .collect(),
        progress_km: report.parameters.get("Km").map(|p| (p.value, p.ci95)),
        initial_km: input
            .initial
            .and_then(|f| f.parameters.get("Km"))
            .map(|p| (p.value, p.ci95)),
    };
    report.decision = decide_trust(&evidence);
    report
}

fn failed(mut report: ProgressGroupReport, message: String) -> ProgressGroupReport {
    report.decision = TrustDecision {
        trust: Trust::InitialRate,
        reason: TrustReason::FitFailed(message.clone()),
    };
    report.error = Some(message);
    report
}

fn fill_from_fit(
    report: &mut ProgressGroupReport,
    fit: &GlobalFit,
    curves: &[WellCurve],
    starts: &[SubstrateStart],
    input: &GroupInput,
) {
    let s_unit = input
        .layout
        .substrate_unit
        .map_or_else(|| "substrate units".into(), |u| u.to_string());
    report.analysed = true;
    report.model = Some(fit.model);
    report.residual_sd = Some(fit.residual_sd);
    report.aicc = Some(fit.aicc);
    report.n = fit.n_observations;
    report.n_wells = fit.n_wells;
    report.dead_time_s = Some(
        fit.parameter("dead_time")
            .map_or(input.settings.rates.dead_time_s, |p| p.value),
    );
    if let Some(kcat) = parameter(fit, "kcat", "1/s") {
        report.parameters.insert("kcat".into(), kcat);
    }
    if let Some(mut km) = parameter(fit, "Km", &s_unit) {
        km.ci95_profile = fit.km_profile_ci95;
        if let Some([lo, hi]) = fit.km_profile_ci95 {
            match (lo, hi) {
                (Some(_), Some(_)) => {}
                (None, _) => report.warnings.push(
                    "Km's profile-likelihood interval is open below: the data give only an upper bound"
                        .into(),
                ),
                (_, None) => report.warnings.push(
                    "Km's profile-likelihood interval is open above: the data give only a lower bound".into(),
                ),
            }
            if lo.is_none() || hi.is_none() {
                km.determined = false;
            }
        }
        report.parameters.insert("Km".into(), km);
    }
    // kcat/Km by the delta method on the fitted covariance, in 1/(M*s).
    if let (Some(kcat), Some(km), Some(unit)) = (
        fit.parameter("kcat"),
        fit.parameter("Km"),
        input.layout.substrate_unit,
    ) {
        let ratio = kcat.value / km.value;
        let scale = 1.0 / unit.in_molar();
        // Delta method: var(k/K) = (k/K)^2 (var k/k^2 + var K/K^2 - 2 cov(k, K)/(k K)).
        let delta = |var_k: f64, var_km: f64, cov: f64| {
            let (k, km_value) = (kcat.value, km.value);
            ratio
                * (var_k / (k * k) + var_km / (km_value * km_value) - 2.0 * cov / (k * km_value))
                    .max(0.0)
                    .sqrt()
        };
        let correlation = fit.correlation.as_ref().map_or(0.0, |c| c[0][1]);
        let se_asymptotic = kcat
            .se
            .zip(km.se)
            .map(|(sk, sm)| delta(sk * sk, sm * sm, correlation * sk * sm));
        let se_by_well = fit
            .covariance_by_well
            .as_ref()
            .map(|c| delta(c[0][0], c[1][1], c[0][1]))
            .filter(|s| s.is_finite());
        let interval = |se: Option<f64>, quantile: Option<f64>| {
            se.zip(quantile)
                .map(|(s, q)| [(ratio - q * s) * scale, (ratio + q * s) * scale])
        };
        let read_quantile = t_quantile_975(fit.degrees_of_freedom.max(1)).ok();
        // The effective degrees of freedom of the ratio's clustered variance (gradient of k/K).
        let mut gradient = vec![0.0; fit.parameters.len()];
        gradient[0] = 1.0 / km.value;
        gradient[1] = -kcat.value / (km.value * km.value);
        let well_quantile = fit
            .well_leverage
            .as_ref()
            .and_then(|leverage| leverage.quantile_975(&gradient))
            .or_else(|| t_quantile_975(fit.n_wells.saturating_sub(1).max(1)).ok());
        let se = se_by_well.or(se_asymptotic);
        report.parameters.insert(
            "kcat_over_Km".into(),
            ParameterReport {
                value: ratio * scale,
                se: se.map(|s| s * scale),
                ci95: if se_by_well.is_some() {
                    interval(se_by_well, well_quantile)
                } else {
                    interval(se_asymptotic, read_quantile)
                },
                ci95_profile: None,
                ci95_bootstrap: None,
                asymptotic: Some((
                    se_asymptotic.map(|s| s * scale),
                    interval(se_asymptotic, read_quantile),
                )),
                unit: "1/(M*s)".into(),
                determined: se.is_some_and(|s| s <= 0.5 * ratio),
            },
        );
    }
    let inverse_unit = format!("1/{s_unit}");
    for (name, unit) in [
        ("inverse_Kp", inverse_unit.as_str()),
        ("k_inact", "1/s"),
        ("dead_time", "s"),
    ] {
        if let Some(p) = parameter(fit, name, unit) {
            if name == "inverse_Kp" && p.value > 0.0 {
                let kp_ci = p
                    .ci95
                    .and_then(|[lo, hi]| (lo > 0.0).then(|| [1.0 / hi, 1.0 / lo]));
                report.parameters.insert(
                    "Kp".into(),
                    ParameterReport {
                        value: 1.0 / p.value,
                        se: p.se.map(|s| s / (p.value * p.value)),
                        ci95: kp_ci,
                        ci95_profile: None,
                        ci95_bootstrap: None,
                        asymptotic: None,
                        unit: s_unit.clone(),
                        determined: p.determined,
                    },
                );
            }
            report.parameters.insert(name.into(), p);
        }
    }
    let names: Vec<&str> = fit.parameters.iter().map(|p| p.name.as_str()).collect();
    if let Some(matrix) = &fit.correlation {
        for i in 0..names.len() {
            for j in (i + 1)..names.len() {
                if matrix[i][j].abs() > CORRELATION_WARNING {
                    report.warnings.push(format!(
                        "{} and {} are correlated {:.4}: the data do not separate them well",
                        names[i], names[j], matrix[i][j]
                    ));
                }
            }
        }
        report.correlation = Some(Correlation {
            parameters: names.iter().map(|n| n.to_string()).collect(),
            matrix: matrix.clone(),
        });
    }
    // Identifiability against the S0 range.
    if let Some(km) = fit.parameter("Km") {
        let s_max = curves.iter().map(|c| c.s0).fold(0.0, f64::max);
        let s_min = curves.iter().map(|c| c.s0).fold(f64::INFINITY, f64::min);
        if s_max < km.value {
            report.warnings.push(format!(
                "every S0 lies below the fitted Km (largest S0 {} vs Km {} {s_unit}): the curves fix kcat/Km far better than kcat and Km apart",
                significant(s_max),
                significant(km.value)
            ));
        } else if s_min > km.value {
            report.warnings.push(format!(
                "every S0 lies above the fitted Km (smallest S0 {} vs Km {} {s_unit}): Km rests on the late, low-substrate part of the curves",
                significant(s_min),
                significant(km.value)
            ));
        }
    }
    for name in ["kcat", "Km"] {
        if report.parameters.get(name).is_some_and(|p| !p.determined) {
            report
                .warnings
                .push(format!("{name} is not determined by these data (wide interval)"));
        }
    }
    // Per well, with the initial-rate window slope beside the implied initial rate.
    let mut misfits = Vec::new();
    for ((diagnostics, curve), start) in fit.wells.iter().zip(curves).zip(starts) {
        let well = input
            .wells
            .iter()
            .find(|w| w.well.to_string() == diagnostics.well);
        // The window's own slope (the chord), not the corrected initial rate: its shortfall is the
        // signature of depletion within the window.
        let window_rate = well.and_then(|w| w.window_slope);
        let ratio = window_rate.map(|r| r / diagnostics.implied_initial_rate);
        if diagnostics.systematic_misfit {
            misfits.push(diagnostics.well.clone());
        }
        report.curves.push(ProgressCurve {
            well: diagnostics.well.clone(),
            s0: well.and_then(|w| w.setup.substrate),
            times_s: diagnostics.times_s.clone(),
            observed: diagnostics.observed.clone(),
            fitted: diagnostics.fitted.clone(),
            runs: (diagnostics.runs, diagnostics.runs_z),
            systematic_misfit: diagnostics.systematic_misfit,
        });
        report.wells.push(ProgressWell {
            well: diagnostics.well.clone(),
            s0: Some(start.layout),
            s0_from_signal: start.from_signal,
            s0_used: curve.s0,
            n: diagnostics.n,
            signal_offset: diagnostics.signal_offset,
            residual_sd: diagnostics.residual_sd,
            runs: diagnostics.runs,
            runs_z: diagnostics.runs_z,
            systematic_misfit: diagnostics.systematic_misfit,
            implied_initial_rate: diagnostics.implied_initial_rate,
            window_rate,
            window_over_implied: ratio,
            fitted_conversion: diagnostics.fitted_conversion,
            flags: well.map(|w| w.rate.flags.clone()),
        });
    }
    if !misfits.is_empty() {
        report.warnings.push(format!(
            "systematic misfit (runs test, 1% level) in {} of {} wells: {}",
            misfits.len(),
            fit.wells.len(),
            misfits.join(", ")
        ));
    }
    if !report.wells_left_out.is_empty() {
        report.warnings.push(format!(
            "{} sample well(s) left out of the progress-curve fit; see wells_left_out",
            report.wells_left_out.len()
        ));
    }
}
