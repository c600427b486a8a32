//! Rate-law fits per group: sample wells grouped by the layout's free factors and enzyme
//! concentration, fitted on every used replicate well (not the means), with kcat and kcat/Km in
//! SI-style units when the enzyme concentration and an extinction coefficient are known. A group
//! whose wells vary the inhibitor gets one global fit over [S] x [I] (model `auto` unless another is
//! asked for); otherwise the inhibitor concentration also splits groups and Michaelis-Menten is the
//! default. The same [`fit_points`] serves `platekin fit` on rate tables ([`rate_table`]).
//!
//! Every number of a group's report comes from one fit: a plain Michaelis-Menten group is fitted
//! once by the general rate-law fit, and its Michaelis-Menten description (design warnings, Vmax/Km
//! by the reparametrised Jacobian, linearised diagnostics) is made from that same fit.
//!
//! # A plate's rates as the fit weighs them (`rate-se`)
//! * Each rate's variance is its own standard error squared plus what its replicates scatter
//!   beyond it ([`replicate_extra_variance`]). Under the integrated estimator that extra variance
//!   is `a + CV^2 g^2`: `a` a constant (per-well drift), `CV` a relative error of the well's S0
//!   (pipetting) and `g = d rate / d ln S0` from the group's law at the layout's S0, which takes in
//!   the correction's amplification at low [S] and the spontaneous turnover pipetted with the
//!   substrate ([`initial_rate::rate_per_log_substrate`]). Taken from the law, not the well's own
//!   rate, so a weight does not follow its own observation.
//! * Errors the rates share (the blank, each background) are loadings on shared errors
//!   ([`shared_rate_errors`]); a matched control is a well too, so its background carries the
//!   same extra variance as a sample's.
//! * Rates corrected by the group's own law move with it: the law's covariance is fed back
//!   through `M = J'W (J - H)` ([`crate::fit::models::RateFeedback`]), `H` the rates' derivatives in
//!   the law's parameters ([`law_feedback`]).
//!
//! The simulation study behind these choices (coverage of kcat, Km, kcat/Km and Ki over 1000
//! plates a design, and the per-level check) is in DEVELOPERS.md.

pub mod calibration;
pub mod initial_rate;
pub mod rate_table;
pub mod units;

use std::collections::BTreeMap;

use rayon::prelude::*;

use crate::config::{FitSettings, InitialRateEstimator, ModelRequest, RateModelKind, RobustLoss, Weighting};
use crate::core::plate::WellId;
use crate::core::stats::{
    extra_replicate_variance, extra_variance_with_substrate_term, summary, t_quantile_975, ExtraVariance,
};
use crate::core::units::{ConcentrationUnit, MassConcentrationUnit};
use crate::fit::inference::{ConstantEstimate, Dimension, ProfileInterval};
use crate::fit::models::RateData;
use crate::fit::models::SharedRateErrors;
use crate::fit::selection::{analyse_rates, CandidateReport, FTest, ModelAnalysis, ModelSettings};
use crate::fit::{
    describe_michaelis_menten, linearised_estimates, turnover_estimates, vmax_over_km_delta_method,
    LinearisedEstimates,
};
use crate::fit::{ParameterEstimate, StartMethod};
use crate::layout::Layout;
use crate::rates::background::{Background, BackgroundLaw};
use crate::rates::{Flag, PlateAnalysis, WellResult};
use crate::signal::BlankUncertainty;
use initial_rate::{
    corrected_initial_rate, rate_per_chord_at_law, rate_per_log_substrate, rate_shape, WindowChord,
};

/// One value of a group's key: a factor's text or a concentration.
#[derive(Debug, Clone, PartialEq)]
pub enum GroupValue {
    /// A factor's value (a variant, a buffer).
    Text(String),
    /// A concentration (enzyme, or the inhibitor level of a split group).
    Number(f64),
}

/// What a group's wells share: factor values, enzyme and (for a split group) inhibitor
/// concentration, by name (`variant`, `enzyme [nM]`), in name order.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct GroupKey {
    /// The values by name.
    pub values: BTreeMap<String, GroupValue>,
}

impl GroupKey {
    /// The text of a factor, if the key holds it as text.
    pub fn text(&self, name: &str) -> Option<&str> {
        match self.values.get(name) {
            Some(GroupValue::Text(text)) => Some(text),
            _ => None,
        }
    }

    fn insert(&mut self, name: String, value: GroupValue) {
        self.values.insert(name, value);
    }
}

/// Where a left-out point stood.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LeftOutPlace {
    /// A plate well.
    Well(WellId),
    /// A one-based row of a rate table.
    Row(usize),
}

/// Why a point was left out of a fit.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum LeftOutReason {
    /// The well has no rate.
    NoRate,
    /// The well carries flags that exclude it.
    Flagged(Vec<Flag>),
    /// A rate table row marked `used` false by the run that wrote it.
    NotUsedInRun,
    /// A rate table row without a substrate or a rate.
    NoSubstrateOrRate,
}

/// A point left out of a fit, with the reason.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LeftOut {
    /// The well or row.
    pub place: LeftOutPlace,
    /// Why.
    pub reason: LeftOutReason,
}

/// One reported parameter: value, uncertainty and unit (shared by the initial-rate fits and the
/// progress-curve fits).
#[derive(Debug, Clone, PartialEq)]
pub struct ParameterReport {
    /// Best estimate.
    pub value: f64,
    /// Asymptotic standard error.
    pub se: Option<f64>,
    /// Asymptotic 95% interval.
    pub ci95: Option<[f64; 2]>,
    /// Unit, e.g. `uM/s`, `1/s`, `1/(M*s)`.
    pub unit: String,
    /// False when the data cannot pin this parameter down (see the warnings).
    pub determined: bool,
    /// Profile-likelihood 95% interval (a `None` end: unbounded or beyond the search).
    pub ci95_profile: Option<ProfileInterval>,
    /// Bootstrap percentile 95% interval (`--bootstrap N`).
    pub ci95_bootstrap: Option<[f64; 2]>,
    /// Where `se` and `ci95` allow for errors shared by the reads of a well (progress-curve fits):
    /// the standard error and interval that treat every read as independent evidence.
    pub asymptotic: Option<(Option<f64>, Option<[f64; 2]>)>,
}

impl ParameterReport {
    fn from_estimate(estimate: &ParameterEstimate, unit: &str, scale: f64) -> ParameterReport {
        ParameterReport {
            value: estimate.value * scale,
            se: estimate.standard_error.map(|se| se * scale),
            ci95: estimate.ci95.map(|[lo, hi]| [lo * scale, hi * scale]),
            unit: unit.to_string(),
            determined: estimate.determined,
            ci95_profile: None,
            ci95_bootstrap: None,
            asymptotic: None,
        }
    }

    fn from_constant(constant: &ConstantEstimate, unit: &str, scale: f64) -> ParameterReport {
        ParameterReport {
            value: constant.value * scale,
            se: constant.se.map(|se| se * scale),
            ci95: constant.ci95.map(|[lo, hi]| [lo * scale, hi * scale]),
            unit: unit.to_string(),
            determined: constant.determined,
            ci95_profile: constant
                .ci95_profile
                .map(|[lo, hi]| [lo.map(|x| x * scale), hi.map(|x| x * scale)]),
            ci95_bootstrap: constant.ci95_bootstrap.map(|[lo, hi]| [lo * scale, hi * scale]),
            asymptotic: None,
        }
    }
}

/// The bootstrap behind a group's percentile intervals.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct BootstrapSummary {
    /// Replicates asked for.
    pub replicates: usize,
    /// Replicates whose refit converged.
    pub converged: usize,
    /// The seed.
    pub seed: u64,
}

/// One group's fit.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupFit {
    /// What the group's wells share.
    pub group: GroupKey,
    /// The model reported.
    pub model: RateModelKind,
    /// `Vmax`, `Km`, and where possible `kcat`, `kcat_over_Km`, and every other constant fitted.
    pub parameters: BTreeMap<String, ParameterReport>,
    /// Points fitted.
    pub n: usize,
    /// Residual standard deviation, rate units.
    pub residual_sd: Option<f64>,
    /// Correlation of the Vmax and Km estimates.
    pub correlation_vmax_km: Option<f64>,
    /// Lineweaver-Burk, Eadie-Hofstee and Hanes-Woolf estimates (diagnostics, never the answer).
    pub linearised: Option<LinearisedEstimates>,
    /// Whether the solver converged.
    pub converged: bool,
    /// Wells (or rows) fitted.
    pub wells_used: Vec<String>,
    /// Points of the group left out, with the reason.
    pub wells_left_out: Vec<LeftOut>,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
    /// Why no fit could be made, if none was.
    pub error: Option<String>,
    /// The model asked for; `None`: the default rule.
    pub model_requested: Option<ModelRequest>,
    /// The equation of the reported model.
    pub equation: Option<&'static str>,
    /// Every model fitted, with its AICc, delta AICc and Akaike weight.
    pub models_tried: Vec<CandidateReport>,
    /// Extra-sum-of-squares F tests between nested models that were fitted.
    pub f_tests: Vec<FTest>,
    /// Why the reported model, in words.
    pub model_choice: Option<String>,
    /// Weighting used.
    pub weighting: Weighting,
    /// Loss used.
    pub robust_loss: RobustLoss,
    /// The bootstrap behind the percentile intervals, when one ran.
    pub bootstrap: Option<BootstrapSummary>,
    /// How the points' initial rates were estimated (`integrated` falls back to `chord` where the
    /// rate law gives no S dependence or no fit was made).
    pub estimator: InitialRateEstimator,
    /// The wells' initial rates (and standard errors) the fit used, when the estimator made new ones
    /// from the windows (`integrated`); wells left out get one too, for the tables.
    pub initial_rates: Vec<(WellId, f64, f64)>,
    /// The reported rate law as fitted (its parametrisation), for predictions.
    pub law: Option<FittedLaw>,
    /// With `rate-se` weighting: the variance between replicates beyond their standard errors
    /// (rate units squared: a constant and, under the integrated estimator, a relative error of
    /// S0) and its degrees of freedom, added to every point's.
    pub extra_variance: Option<ExtraVariance>,
    /// The fitted wells' `d rate / d ln S0` as their weights took it (the integrated estimator's).
    pub substrate_sensitivities: Vec<(WellId, f64)>,
    /// How many groups' replicates `extra_variance` was estimated from: 1 for the group's own, 2 or
    /// more when pooled over the plate's groups ([`PooledExtraVariance`]), 0 without one.
    pub extra_variance_groups: usize,
}

/// A fitted rate law in its own parametrisation (inverse constants as `1/K`), for predictions.
#[derive(Debug, Clone, PartialEq)]
pub struct FittedLaw {
    /// The law.
    pub kind: RateModelKind,
    /// Its fitted parameters.
    pub parameters: Vec<f64>,
    /// The enzyme concentration in the inhibitor's unit (Morrison), 0 when unknown.
    pub enzyme: f64,
}

impl FittedLaw {
    /// The law's shape at a point's S0 and [I], as the depletion correction needs it.
    fn shape_at(&self, point: &FitPoint) -> initial_rate::RateShape {
        rate_shape(
            self.kind,
            &self.parameters,
            point.substrate,
            point.inhibitor,
            self.enzyme,
        )
    }

    /// The law's rate at a point's S0 and [I] (`gradient` is scratch space).
    fn rate_at(&self, point: &FitPoint, gradient: &mut [f64]) -> f64 {
        crate::fit::models::predict_rate(
            self.kind,
            &self.parameters,
            point.substrate,
            point.inhibitor,
            self.enzyme,
            gradient,
        )
    }

    /// A windowed point's window, the law's shape there and its rate there; `None` without a
    /// window.
    fn at_window<'point>(
        &self,
        point: &'point FitPoint,
        gradient: &mut [f64],
    ) -> Option<(&'point WindowChord, initial_rate::RateShape, f64)> {
        let window = point.window.as_ref()?;
        Some((window, self.shape_at(point), self.rate_at(point, gradient)))
    }
}

/// Rounds of correction and refit before the integrated estimator gives up converging.
const CORRECTION_ROUNDS: usize = 8;

/// Corrected rates are taken as converged when no rate moves by more than this fraction.
const CORRECTION_TOLERANCE: f64 = 1e-7;

/// How initial rates are estimated for the group fits.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct InitialRateOptions {
    /// The estimator.
    pub estimator: InitialRateEstimator,
    /// Time from mixing to the export's time zero, s.
    pub dead_time_s: f64,
    /// The enzyme's molecular weight, kDa (`--enzyme-mw`): kcat from a mass concentration.
    pub enzyme_mw_kda: Option<f64>,
}

impl Default for InitialRateOptions {
    fn default() -> Self {
        InitialRateOptions {
            estimator: InitialRateEstimator::Chord,
            dead_time_s: 0.0,
            enzyme_mw_kda: None,
        }
    }
}

/// Whether a request fits an inhibitor-dependent model (so the inhibitor must not split groups).
pub fn request_uses_inhibitor(request: Option<ModelRequest>) -> bool {
    match request {
        None | Some(ModelRequest::Auto) => true,
        Some(ModelRequest::Fixed(kind)) => kind.needs_inhibitor(),
    }
}

/// The key that splits sample wells into groups; the inhibitor joins it only when asked.
fn group_key(well: &WellResult, layout: &Layout, with_inhibitor: bool) -> GroupKey {
    let mut key = GroupKey::default();
    for name in &layout.factor_names {
        let value = well.setup.factors.get(name).cloned().unwrap_or_default();
        key.insert(name.clone(), GroupValue::Text(value));
    }
    if let (Some(unit), Some(enzyme)) = (layout.enzyme_unit_text(), well.setup.enzyme) {
        key.insert(format!("enzyme [{unit}]"), GroupValue::Number(enzyme));
    }
    if with_inhibitor {
        if let (Some(unit), Some(inhibitor)) = (layout.inhibitor_unit, well.setup.inhibitor) {
            key.insert(format!("inhibitor [{unit}]"), GroupValue::Number(inhibitor));
        }
    }
    key
}

/// Groups items by a key, in first-seen order.
fn group_by<'a, T>(items: impl IntoIterator<Item = (GroupKey, &'a T)>) -> Vec<(GroupKey, Vec<&'a T>)> {
    let mut groups: Vec<(GroupKey, Vec<&T>)> = Vec::new();
    for (key, item) in items {
        match groups.iter_mut().find(|(existing, _)| *existing == key) {
            Some((_, members)) => members.push(item),
            None => groups.push((key, vec![item])),
        }
    }
    groups
}

/// The sample wells split into groups by free factors, enzyme and inhibitor, in first-seen
/// order: the progress-curve analysis fits each such group (one inhibitor level each).
pub fn sample_groups<'a>(
    analysis: &'a PlateAnalysis,
    layout: &Layout,
) -> Vec<(GroupKey, Vec<&'a WellResult>)> {
    group_by(
        analysis
            .wells
            .iter()
            .filter(|w| w.setup.is_fit_sample())
            .map(|well| (group_key(well, layout, true), well)),
    )
}

/// Fits every group of sample wells with the default settings.
pub fn fit_groups(analysis: &PlateAnalysis, layout: &Layout) -> Vec<GroupFit> {
    fit_groups_with(
        analysis,
        layout,
        &FitSettings::default(),
        &InitialRateOptions::default(),
        &mut |_, _| {},
    )
}

/// Fits every group of sample wells. `progress(done, total)` reports bootstrap replicates.
pub fn fit_groups_with(
    analysis: &PlateAnalysis,
    layout: &Layout,
    settings: &FitSettings,
    initial: &InitialRateOptions,
    progress: &mut dyn FnMut(usize, usize),
) -> Vec<GroupFit> {
    let groups = group_by(
        analysis
            .wells
            .iter()
            .filter(|w| w.setup.is_fit_sample())
            .map(|well| (group_key(well, layout, false), well)),
    );
    // A group that varies the inhibitor stays whole only for an inhibitor model (or auto).
    let mut split: Vec<(GroupKey, Vec<&WellResult>)> = Vec::new();
    for (key, wells) in groups {
        let levels = RateData::distinct(
            &wells
                .iter()
                .map(|w| w.setup.inhibitor.unwrap_or(0.0))
                .collect::<Vec<_>>(),
        );
        if levels.len() > 1 && request_uses_inhibitor(settings.model) {
            split.push((key, wells));
            continue;
        }
        for well in wells {
            let key = group_key(well, layout, true);
            match split.iter_mut().find(|(existing, _)| *existing == key) {
                Some((_, members)) => members.push(well),
                None => split.push((key, vec![well])),
            }
        }
    }
    let prepared: Vec<PreparedGroup> = split
        .iter()
        .map(|(key, wells)| prepare_group(key.clone(), wells, analysis, layout, initial))
        .collect();
    // Each group's first fit, to the windows' own rates.
    let firsts: Vec<GroupFit> = prepared
        .iter()
        .map(|group| group.fit(&group.points, settings, true, None, progress))
        .collect();
    if initial.estimator != InitialRateEstimator::Integrated {
        return prepared
            .iter()
            .zip(firsts)
            .map(|(group, mut report)| {
                report.estimator = initial.estimator;
                with_left_out_warning(report, group.n_wells)
            })
            .collect();
    }
    let settle_all = |starts: Vec<Start>, pooled: Option<&PooledExtraVariance>| {
        prepared
            .par_iter()
            .zip(starts)
            .map(|(group, start)| settle_corrected_points(group, start, settings, pooled))
            .collect::<Vec<SettledPoints>>()
    };
    let mut settled = settle_all(
        firsts
            .iter()
            .map(|report| Start::FirstFit(report.law.clone()))
            .collect(),
        None,
    );
    // The plate's wells share one dispenser and one reader: their extra scatter is estimated
    // once from every group's replicates ([`PooledExtraVariance`]), and the groups' rates are
    // settled again with it. The rates the pool is estimated from move a little with the weights
    // (each group's law corrects them), so this repeats until the pool estimated from the settled
    // rates is the one they were settled with, as a rate table of them (`platekin fit wells.csv`)
    // estimates it.
    let mut pooled: Option<PooledExtraVariance> = None;
    for _ in 0..POOLING_PASSES {
        let fitted: Vec<&[FitPoint]> = settled
            .iter()
            .filter(|settled| settled.any_corrected)
            .map(|settled| settled.points.as_slice())
            .collect();
        let Some(next) = pooled_extra_variance(&fitted) else {
            break;
        };
        if pooled.is_some_and(|used| used.model.agrees_with(&next.model, POOLING_TOLERANCE)) {
            break;
        }
        settled = settle_all(settled.into_iter().map(Start::Settled).collect(), Some(&next));
        pooled = Some(next);
    }
    prepared
        .iter()
        .zip(firsts)
        .zip(settled)
        .map(|((group, first), settled)| {
            let report = finish_integrated(group, first, settled, settings, pooled.as_ref(), progress);
            with_left_out_warning(report, group.n_wells)
        })
        .collect()
}

/// Settling passes with a plate's pooled extra variance before it is taken as settled (see
/// [`fit_groups_with`]). Each pass changes the pool by about a thousandth of the pass before
/// (on the 1536-well plate: 3e-4, then 3e-7), so two are enough and four a ceiling.
const POOLING_PASSES: usize = 4;

/// Relative change in the pooled extra variance's parts below which it is settled: a 3e-4
/// mismatch between the pool a run used and the one its rates give moved the demo's Km by 3.3e-6
/// of itself; settled to 1e-5, a refit of the run's wells.csv agrees to 3e-9.
const POOLING_TOLERANCE: f64 = 1e-5;

/// One point of a rate table.
#[derive(Debug, Clone, PartialEq)]
pub struct FitPoint {
    /// The well or row it came from.
    pub label: String,
    /// The well, for a plate's point.
    pub well: Option<WellId>,
    /// The window behind the rate, for a plate's point (the integrated estimator corrects it).
    pub window: Option<WindowChord>,
    pub substrate: f64,
    /// 0 where there is no inhibitor.
    pub inhibitor: f64,
    pub rate: f64,
    /// Replicate standard deviation, where known.
    pub sd: Option<f64>,
    /// The rate's own standard error (a well's, from its window), where known.
    pub se: Option<f64>,
    /// The no-enzyme background subtracted from a plate's point, if any.
    pub background: Option<Background>,
    /// How the rate moves with its window's slope (1 for the slope itself; the integrated
    /// estimator's derivative for a corrected rate).
    pub rate_per_chord: f64,
    /// How the rate moves with the well's true S0, `d rate / d ln S0` at the layout's S0, from the
    /// group's fitted law (the integrated estimator sets it; see [`initial_rate`]); the shape of
    /// the pipetting part of the rate's extra variance.
    pub substrate_sensitivity: Option<f64>,
    /// For a rate corrected by the group's own law: that law and the rate's derivative in each of
    /// its parameters (see [`crate::fit::models::RateFeedback`]).
    pub law_feedback: Option<(RateModelKind, Vec<f64>)>,
}

/// What a plate's points share: the blank subtracted from every read and the conversion to
/// concentration, for the errors they carry into every rate (see [`shared_rate_errors`]).
#[derive(Debug, Clone, PartialEq)]
pub struct PlateCorrections {
    /// The blank's uncertainty.
    pub blank: BlankUncertainty,
    /// The export's read times, s.
    pub read_times_s: Vec<f64>,
    /// +1 product read, -1 substrate read.
    pub sign: f64,
    /// Concentration per AU (1 when rates stay in AU).
    pub per_absorbance: f64,
    /// Time from mixing to the export's time zero, s.
    pub dead_time_s: f64,
}

impl PlateCorrections {
    /// A plate's corrections, converted to concentration as `well` is (1 without a well or a
    /// conversion).
    pub fn of(analysis: &PlateAnalysis, well: Option<WellId>, dead_time_s: f64) -> PlateCorrections {
        PlateCorrections {
            blank: analysis.signal.blank_uncertainty.clone(),
            read_times_s: analysis.signal.read_times_s.clone(),
            sign: analysis.signal.sign,
            per_absorbance: well
                .and_then(|well| analysis.signal.conversion_of(well))
                .unwrap_or(1.0),
            dead_time_s,
        }
    }
}

/// The errors a plate's points share, as loadings on each rate (module docs of
/// [`crate::fit::models::SharedRateErrors`]): the blank's (a rate is minus the blank's slope over
/// its window, converted) and each background model's (a rate is minus its background). Points
/// without a window (rate tables) share none.
pub fn shared_rate_errors(
    points: &[FitPoint],
    corrections: &PlateCorrections,
    control_extra_variance: Option<&crate::core::stats::ExtraVariance>,
) -> SharedRateErrors {
    let n = points.len();
    let mut columns: Vec<Vec<f64>> = Vec::new();
    let mut blocks: Vec<Vec<Vec<f64>>> = Vec::new();
    let to_rate = -corrections.sign * corrections.per_absorbance;
    // The window in the export's clock.
    let window = |point: &FitPoint| {
        point.window.map(|w| {
            (
                w.start_s - corrections.dead_time_s,
                w.end_s - corrections.dead_time_s,
            )
        })
    };
    match &corrections.blank {
        BlankUncertainty::None => {}
        BlankUncertainty::Smooth {
            t_scale, covariance, ..
        } => {
            for power in 0..covariance.len() {
                columns.push(
                    points
                        .iter()
                        .map(|point| {
                            // The least-squares slope of (t/T)^k over an even window: 0, 1/T, (t1 + t2)/T^2.
                            // The constant slope 1/T is the same in the controls' windows, so a
                            // background that takes it up whole removes it from the sample's rate.
                            let cancelled = point
                                .background
                                .as_ref()
                                .is_some_and(Background::cancels_blank_slope);
                            let slope = window(point).map_or(0.0, |(t1, t2)| match power {
                                0 => 0.0,
                                1 if cancelled => 0.0,
                                1 => 1.0 / t_scale,
                                _ => (t1 + t2) / (t_scale * t_scale),
                            });
                            to_rate * slope * point.rate_per_chord
                        })
                        .collect(),
                );
            }
            blocks.push(covariance.clone());
        }
        BlankUncertainty::PerRead { variances } => {
            // Each read's blank error enters a window's slope with weight (t - mean t) / Sxx.
            let weights: Vec<Vec<(usize, f64)>> = points
                .iter()
                .map(|point| {
                    let Some((t1, t2)) = window(point) else {
                        return Vec::new();
                    };
                    let reads: Vec<(usize, f64)> = corrections
                        .read_times_s
                        .iter()
                        .enumerate()
                        .filter(|(_, t)| **t >= t1 - 1e-9 && **t <= t2 + 1e-9)
                        .map(|(i, t)| (i, *t))
                        .collect();
                    let mean = reads.iter().map(|(_, t)| t).sum::<f64>() / reads.len().max(1) as f64;
                    let sxx: f64 = reads.iter().map(|(_, t)| (t - mean).powi(2)).sum();
                    if sxx <= 0.0 {
                        return Vec::new();
                    }
                    reads.iter().map(|(i, t)| (*i, (t - mean) / sxx)).collect()
                })
                .collect();
            for (read, variance) in variances.iter().enumerate() {
                let column: Vec<f64> = points
                    .iter()
                    .zip(&weights)
                    .map(|(point, w)| {
                        w.iter()
                            .find(|(i, _)| *i == read)
                            .map_or(0.0, |(_, weight)| to_rate * weight * point.rate_per_chord)
                    })
                    .collect();
                if column.iter().any(|v| *v != 0.0) {
                    columns.push(column);
                    blocks.push(vec![vec![*variance]]);
                }
            }
        }
    }
    // Background models: a rate moves by minus its background's error.
    let mut laws: Vec<BackgroundLaw> = Vec::new();
    // Matched backgrounds: (rate, se, controls averaged).
    let mut matched: Vec<(f64, f64, usize)> = Vec::new();
    for point in points {
        match &point.background {
            Some(Background::Modelled { law, .. }) if !laws.contains(law) => laws.push(*law),
            Some(Background::Matched { rate, se, controls })
                if !matched.iter().any(|(r, s, _)| (*r, *s) == (*rate, *se)) =>
            {
                matched.push((*rate, *se, *controls))
            }
            _ => {}
        }
    }
    for law in laws {
        let serves = |point: &FitPoint| matches!(&point.background, Some(Background::Modelled { law: l, .. }) if *l == law);
        columns.push(
            points
                .iter()
                .map(|p| match &p.background {
                    // The law's slope enters at the [S] it was evaluated at (S0 or what is left).
                    Some(background) if serves(p) => {
                        -background.law_substrate().unwrap_or(p.substrate) * p.rate_per_chord
                    }
                    _ => 0.0,
                })
                .collect(),
        );
        columns.push(
            points
                .iter()
                .map(|p| if serves(p) { -p.rate_per_chord } else { 0.0 })
                .collect(),
        );
        blocks.push(law.covariance.iter().map(|row| row.to_vec()).collect());
    }
    for (rate, se, controls) in matched {
        columns.push(
            points
                .iter()
                .map(|p| match &p.background {
                    Some(Background::Matched { rate: r, se: s, .. }) if (*r, *s) == (rate, se) => {
                        -p.rate_per_chord
                    }
                    _ => 0.0,
                })
                .collect(),
        );
        // The controls are wells too: their drift and the substrate pipetted into their turnover
        // scatter them beyond their slopes' standard errors, and every sample they serve shares it.
        // A control's turnover moves with its own S0 as the samples' does (taken proportional to S).
        let extra =
            control_extra_variance.map_or(0.0, |model| model.at(rate.max(0.0)) / controls.max(1) as f64);
        blocks.push(vec![vec![se * se + extra]]);
    }
    let size: usize = blocks.iter().map(Vec::len).sum();
    let mut covariance = vec![vec![0.0; size]; size];
    let mut at = 0;
    for block in &blocks {
        for (i, row) in block.iter().enumerate() {
            for (j, value) in row.iter().enumerate() {
                covariance[at + i][at + j] = *value;
            }
        }
        at += block.len();
    }
    SharedRateErrors {
        loadings: (0..n)
            .map(|i| columns.iter().map(|column| column[i]).collect())
            .collect(),
        covariance,
    }
}

/// Units and enzyme of a group, for the reports.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupUnits {
    /// Rate unit text, e.g. `uM/s`, `AU/s`, or "" for unitless data.
    pub rate_unit: String,
    /// The concentration in the rate unit, when rates are concentrations per second.
    pub rate_concentration_unit: Option<ConcentrationUnit>,
    pub substrate_unit: Option<ConcentrationUnit>,
    pub inhibitor_unit: Option<ConcentrationUnit>,
    /// Text for a concentration without a unit (`substrate units` for a run, "" for unitless tables).
    pub missing_unit_text: String,
    /// Enzyme concentration and its unit (from a mass concentration through `--enzyme-mw`).
    pub enzyme: Option<(f64, ConcentrationUnit)>,
    /// The enzyme as a mass concentration, when the layout gives it so (for the specific activity).
    pub enzyme_mass: Option<(f64, MassConcentrationUnit)>,
}

/// Why a well is left out of its group's fit, or `None` when it is fitted.
pub fn left_out_reason(well: &WellResult) -> Option<LeftOutReason> {
    match (well.used, well.setup.substrate, well.rate_value) {
        (true, Some(_), Some(_)) => None,
        (_, _, None) => Some(LeftOutReason::NoRate),
        _ => Some(LeftOutReason::Flagged(well.rate.flags.clone())),
    }
}

/// A well's window as a chord counted from mixing.
pub fn window_chord(well: &WellResult, dead_time_s: f64) -> Option<WindowChord> {
    let (start, end) = well.rate.window_s?;
    Some(WindowChord {
        slope: well.window_slope?,
        se: well.window_slope_se?,
        start_s: start + dead_time_s,
        end_s: end + dead_time_s,
        reads: well.rate.fit.map_or(2, |fit| fit.n_points),
    })
}

/// A group's wells as points, with what its fits need.
struct PreparedGroup {
    key: GroupKey,
    /// The fitted wells' points (window chords, or the chords' own rates).
    points: Vec<FitPoint>,
    left_out: Vec<LeftOut>,
    /// Points of the wells left out, for their initial rates in the tables.
    left_out_points: Vec<FitPoint>,
    units: GroupUnits,
    corrections: PlateCorrections,
    n_wells: usize,
}

impl PreparedGroup {
    /// The group's fit to `points` (its own, or corrected), with the plate's shared errors where
    /// `with_shared_errors` (the reported fits; the settling refits need point estimates only).
    fn fit(
        &self,
        points: &[FitPoint],
        settings: &FitSettings,
        with_shared_errors: bool,
        pooled: Option<&PooledExtraVariance>,
        progress: &mut dyn FnMut(usize, usize),
    ) -> GroupFit {
        fit_points(
            self.key.clone(),
            points,
            self.left_out.clone(),
            &self.units,
            settings,
            with_shared_errors.then_some(&self.corrections),
            pooled,
            progress,
        )
    }
}

fn prepare_group(
    key: GroupKey,
    wells: &[&WellResult],
    analysis: &PlateAnalysis,
    layout: &Layout,
    initial: &InitialRateOptions,
) -> PreparedGroup {
    let mut points = Vec::new();
    let mut left_out = Vec::new();
    let mut left_out_points = Vec::new();
    for well in wells {
        let point = |rate: f64, substrate: f64| FitPoint {
            label: well.well.to_string(),
            well: Some(well.well),
            window: window_chord(well, initial.dead_time_s),
            substrate,
            inhibitor: well.setup.inhibitor.unwrap_or(0.0),
            rate,
            sd: None,
            se: well.rate_se,
            background: well.correction.background.clone(),
            rate_per_chord: 1.0,
            substrate_sensitivity: None,
            law_feedback: None,
        };
        let reason = left_out_reason(well);
        if let (Some(_), Some(substrate), Some(rate)) = (&reason, well.setup.substrate, well.rate_value) {
            left_out_points.push(point(rate, substrate));
        }
        match (reason, well.setup.substrate, well.rate_value) {
            (None, Some(substrate), Some(rate)) => points.push(point(rate, substrate)),
            (reason, ..) => left_out.push(LeftOut {
                place: LeftOutPlace::Well(well.well),
                reason: reason.unwrap_or(LeftOutReason::NoRate),
            }),
        }
    }
    replicate_sds(&mut points);
    let enzyme_value = wells.first().and_then(|w| w.setup.enzyme);
    let enzyme = match (enzyme_value, layout.enzyme_unit) {
        (Some(value), Some(unit)) => Some((value, unit)),
        // A mass concentration with the molecular weight: the molar concentration, in M.
        (Some(value), None) => layout
            .enzyme_factor_to(ConcentrationUnit::Molar, initial.enzyme_mw_kda)
            .map(|factor| (value * factor, ConcentrationUnit::Molar)),
        _ => None,
    };
    let enzyme_mass = enzyme_value.zip(layout.enzyme_mass_unit);
    let units = GroupUnits {
        rate_unit: analysis.signal.rate_unit(),
        rate_concentration_unit: analysis.signal.concentration_unit,
        substrate_unit: layout.substrate_unit,
        inhibitor_unit: layout.inhibitor_unit,
        missing_unit_text: "substrate units".to_string(),
        enzyme,
        enzyme_mass,
    };
    let n_wells = wells.len();
    // A group's wells share one standard curve (the curves are keyed by the grouping factors).
    let corrections =
        PlateCorrections::of(analysis, wells.first().map(|well| well.well), initial.dead_time_s);
    PreparedGroup {
        key,
        points,
        left_out,
        left_out_points,
        units,
        corrections,
        n_wells,
    }
}

/// Puts the left-out count first among a report's warnings, when wells were left out.
fn with_left_out_warning(mut report: GroupFit, n_wells: usize) -> GroupFit {
    if !report.wells_left_out.is_empty() {
        report.warnings.insert(
            0,
            format!(
                "{} of {} sample wells left out (flagged or without a rate); see wells_left_out",
                report.wells_left_out.len(),
                n_wells
            ),
        );
    }
    report
}

/// Fills each point's `sd` with the SD of the replicate points at the same [S] and [I] (two or more).
pub fn replicate_sds(points: &mut [FitPoint]) {
    let conditions: Vec<(f64, f64)> = points.iter().map(|p| (p.substrate, p.inhibitor)).collect();
    for (index, &(substrate, inhibitor)) in conditions.iter().enumerate() {
        if points[index].sd.is_some() {
            continue;
        }
        let rates: Vec<f64> = points
            .iter()
            .filter(|p| p.substrate == substrate && p.inhibitor == inhibitor)
            .map(|p| p.rate)
            .collect();
        points[index].sd = summary(&rates).and_then(|s| s.sd);
    }
}

fn empty_report(
    group: GroupKey,
    points: &[FitPoint],
    left_out: Vec<LeftOut>,
    settings: &FitSettings,
) -> GroupFit {
    GroupFit {
        group,
        model: RateModelKind::MichaelisMenten,
        parameters: BTreeMap::new(),
        n: points.len(),
        residual_sd: None,
        correlation_vmax_km: None,
        linearised: None,
        converged: false,
        wells_used: points.iter().map(|p| p.label.clone()).collect(),
        wells_left_out: left_out,
        warnings: Vec::new(),
        error: None,
        model_requested: settings.model,
        equation: None,
        models_tried: Vec::new(),
        f_tests: Vec::new(),
        model_choice: None,
        weighting: settings.weighting,
        robust_loss: settings.loss,
        bootstrap: None,
        estimator: InitialRateEstimator::Chord,
        initial_rates: Vec::new(),
        law: None,
        extra_variance: None,
        substrate_sensitivities: Vec::new(),
        extra_variance_groups: 0,
    }
}

/// Each point's initial rate corrected by `law` from its window (module docs of
/// [`initial_rate`]); `None` where it cannot be.
fn corrected_rates(points: &[FitPoint], law: &FittedLaw) -> Vec<Option<(f64, f64)>> {
    let mut gradient = vec![0.0; law.parameters.len()];
    points
        .iter()
        .map(|point| {
            let (window, shape, law_rate) = law.at_window(point, &mut gradient)?;
            let (rate, own_se) = corrected_initial_rate(window, point.substrate, shape)?;
            let se = rate_per_chord_at_law(window, point.substrate, shape, law_rate)
                .map_or(own_se, |per_chord| window.se * per_chord);
            Some((rate, se))
        })
        .collect()
}

/// Relative step in a law's parameter for [`law_feedback`]'s central differences.
const LAW_PARAMETER_STEP: f64 = 1e-5;

/// Each point's corrected rate's derivative in each of `law`'s parameters (central differences of
/// [`corrected_rates`]); zero for a point the law does not correct.
fn law_feedback(points: &[FitPoint], law: &FittedLaw) -> Vec<Vec<f64>> {
    let mut rows = vec![vec![0.0; law.parameters.len()]; points.len()];
    for parameter in 0..law.parameters.len() {
        let value = law.parameters[parameter];
        let step = LAW_PARAMETER_STEP * value.abs().max(f64::MIN_POSITIVE);
        let moved = |by: f64| {
            let mut moved = law.clone();
            moved.parameters[parameter] = value + by;
            corrected_rates(points, &moved)
        };
        let (up, down) = (moved(step), moved(-step));
        for (row, (high, low)) in rows.iter_mut().zip(up.iter().zip(&down)) {
            if let (Some((high, _)), Some((low, _))) = (high, low) {
                let derivative = (high - low) / (2.0 * step);
                if derivative.is_finite() {
                    row[parameter] = derivative;
                }
            }
        }
    }
    rows
}

/// Each point's `d rate / d ln S0` from `law` at the layout's S0 ([`rate_per_log_substrate`]), the
/// background's first-order part counted as turnover pipetted with the substrate: a matched
/// control's rate (no-enzyme turnover taken as proportional to S), a background law's `k S0`.
fn substrate_sensitivities(points: &[FitPoint], law: &FittedLaw) -> Vec<Option<f64>> {
    let mut gradient = vec![0.0; law.parameters.len()];
    points
        .iter()
        .map(|point| {
            let (window, shape, law_rate) = law.at_window(point, &mut gradient)?;
            let turnover = match &point.background {
                Some(Background::Matched { rate, .. }) => rate.max(0.0),
                Some(Background::Modelled { law, .. }) => (law.slope * point.substrate).max(0.0),
                _ => 0.0,
            };
            rate_per_log_substrate(window, point.substrate, shape, law_rate, turnover)
        })
        .collect()
}

/// Where [`settle_corrected_points`] starts: the first fit's law, or points settled before.
enum Start {
    FirstFit(Option<FittedLaw>),
    Settled(SettledPoints),
}

/// The integrated estimator's rates once settled: each point's window corrected for depletion
/// by the law fitted to the corrected points.
struct SettledPoints {
    /// The points as last corrected (the windows' own where nothing was corrected).
    points: Vec<FitPoint>,
    /// The law that corrected them.
    law: Option<FittedLaw>,
    /// Whether any point was corrected (else the estimator falls back to the chord).
    any_corrected: bool,
}

/// The integrated estimator: corrects each point's window for depletion by the group's law
/// (from the first fit's, or refitted to `previous` settled points with `pooled`) and refits
/// (point estimates only), until the rates settle.
fn settle_corrected_points(
    group: &PreparedGroup,
    start: Start,
    settings: &FitSettings,
    pooled: Option<&PooledExtraVariance>,
) -> SettledPoints {
    let quick = FitSettings {
        profile: false,
        bootstrap: None,
        ..settings.clone()
    };
    let refit_law = |points: &[FitPoint]| group.fit(points, &quick, false, pooled, &mut |_, _| {}).law;
    let points = &group.points;
    // Settled points with new weights: refitted first, then corrected from where they were.
    let (mut current_points, mut law) = match start {
        Start::FirstFit(law) => (points.to_vec(), law),
        Start::Settled(previous) if previous.any_corrected => {
            let law = refit_law(&previous.points);
            (previous.points, law)
        }
        Start::Settled(previous) => (points.to_vec(), previous.law),
    };
    let mut any_corrected = false;
    for _ in 0..CORRECTION_ROUNDS {
        let Some(fitted) = law.as_ref() else { break };
        let corrected = corrected_rates(points, fitted);
        let sensitivities = substrate_sensitivities(points, fitted);
        let mut next = points.to_vec();
        let mut largest_change = 0.0f64;
        for (((point, original), new), sensitivity) in
            next.iter_mut().zip(points).zip(&corrected).zip(&sensitivities)
        {
            point.substrate_sensitivity = *sensitivity;
            if let Some((rate, se)) = new {
                any_corrected = true;
                point.rate = *rate;
                point.se = Some(*se);
                point.rate_per_chord = original.window.map_or(1.0, |w| se / w.se);
            } else {
                point.rate = original.rate;
                point.se = original.se;
                point.rate_per_chord = 1.0;
            }
            // A plate point's SD is its replicates' spread: recomputed from the corrected rates.
            if original.window.is_some() {
                point.sd = None;
            }
        }
        replicate_sds(&mut next);
        for (old, new) in current_points.iter().zip(&next) {
            let scale = old.rate.abs().max(f64::MIN_POSITIVE);
            largest_change = largest_change.max((new.rate - old.rate).abs() / scale);
        }
        current_points = next;
        if !any_corrected || largest_change <= CORRECTION_TOLERANCE {
            break;
        }
        law = refit_law(&current_points);
    }
    if !any_corrected {
        return SettledPoints {
            points: points.to_vec(),
            law,
            any_corrected,
        };
    }
    if let Some(fitted) = law.as_ref() {
        for (point, row) in current_points.iter_mut().zip(law_feedback(points, fitted)) {
            point.law_feedback = Some((fitted.kind, row));
        }
    }
    SettledPoints {
        points: current_points,
        law,
        any_corrected,
    }
}

/// The integrated estimator's last fit, to the settled points with the full intervals, and the
/// wells' initial rates from its law (`first` is the fit to the windows' own rates, reported
/// when nothing was corrected).
fn finish_integrated(
    group: &PreparedGroup,
    mut first: GroupFit,
    settled: SettledPoints,
    settings: &FitSettings,
    pooled: Option<&PooledExtraVariance>,
    progress: &mut dyn FnMut(usize, usize),
) -> GroupFit {
    if !settled.any_corrected {
        first.estimator = InitialRateEstimator::Chord;
        return first;
    }
    let current_points = settled.points;
    let mut final_report = group.fit(&current_points, settings, true, pooled, progress);
    final_report.warnings = first
        .warnings
        .iter()
        .filter(|warning| !final_report.warnings.contains(warning))
        .cloned()
        .chain(final_report.warnings.iter().cloned())
        .collect();
    final_report.estimator = InitialRateEstimator::Integrated;
    final_report.substrate_sensitivities = current_points
        .iter()
        .filter_map(|point| Some((point.well?, point.substrate_sensitivity?)))
        .collect();
    let mut initial_rates: Vec<(WellId, f64, f64)> = Vec::new();
    if let Some(fitted) = final_report.law.clone() {
        for (point, rate) in group.points.iter().zip(corrected_rates(&group.points, &fitted)) {
            if let (Some(well), Some((value, se))) = (point.well, rate) {
                initial_rates.push((well, value, se));
            }
        }
        for (point, rate) in group
            .left_out_points
            .iter()
            .zip(corrected_rates(&group.left_out_points, &fitted))
        {
            if let (Some(well), Some((value, se))) = (point.well, rate) {
                initial_rates.push((well, value, se));
            }
        }
    }
    final_report.initial_rates = initial_rates;
    final_report
}

/// Pure-error degrees of freedom below which the replicates' extra variance is not estimated.
const MIN_REPLICATE_DEGREES_OF_FREEDOM: usize = 3;

/// The variance between replicate points (same [S] and [I]) beyond their standard errors, with
/// its degrees of freedom; `None` with fewer than [`MIN_REPLICATE_DEGREES_OF_FREEDOM`]. Where
/// every point carries its `d rate / d ln S0` (the integrated estimator), a constant part and a
/// relative error of S0 ([`extra_variance_with_substrate_term`]): pipetting moves a rate most at
/// [S] near Km and little at the ends, which one constant spreads evenly over the levels (mid-[S]
/// points, which carry Km, then weigh too much and the top ones, which carry kcat, too little);
/// else the constant alone ([`extra_replicate_variance`]).
fn replicate_extra_variance(points: &[FitPoint], ses: &[f64]) -> Option<ExtraVariance> {
    let replicates = replicate_levels(points, ses);
    let model = if replicates.with_sensitivity {
        extra_variance_with_substrate_term(&replicates.levels)
    } else {
        let members: Vec<Vec<(f64, f64)>> = replicates
            .levels
            .into_iter()
            .map(|(members, _)| members)
            .collect();
        extra_replicate_variance(&members).map(|(tau2, degrees_of_freedom)| ExtraVariance {
            constant: tau2,
            substrate_cv_squared: 0.0,
            degrees_of_freedom,
        })
    };
    model.filter(|model| model.degrees_of_freedom >= MIN_REPLICATE_DEGREES_OF_FREEDOM)
}

/// A group's replicate levels (same [S] and [I]): each level's members `(rate, se)` and their
/// mean `g^2` (`d rate / d ln S0` squared; 0 unless every point carries `g`).
struct ReplicateLevels {
    levels: Vec<(Vec<(f64, f64)>, f64)>,
    /// Whether every point carries `g`.
    with_sensitivity: bool,
}

fn replicate_levels(points: &[FitPoint], ses: &[f64]) -> ReplicateLevels {
    let sensitivities: Option<Vec<f64>> = points.iter().map(|p| p.substrate_sensitivity).collect();
    // Levels in order of first appearance: members (rate, se) and the sum of their g^2.
    let mut levels: Vec<(f64, f64)> = Vec::new();
    let mut groups: Vec<(Vec<(f64, f64)>, f64)> = Vec::new();
    for (index, (point, se)) in points.iter().zip(ses).enumerate() {
        let level = (point.substrate, point.inhibitor);
        let g2 = sensitivities.as_ref().map_or(0.0, |g| g[index] * g[index]);
        match levels.iter().position(|known| *known == level) {
            Some(at) => {
                groups[at].0.push((point.rate, *se));
                groups[at].1 += g2;
            }
            None => {
                levels.push(level);
                groups.push((vec![(point.rate, *se)], g2));
            }
        }
    }
    let mean_g2 = groups
        .into_iter()
        .map(|(members, g2)| {
            let mean = g2 / members.len() as f64;
            (members, mean)
        })
        .collect();
    ReplicateLevels {
        levels: mean_g2,
        with_sensitivity: sensitivities.is_some(),
    }
}

/// The extra variance of a plate's (or a rate table's) wells estimated once from the replicates
/// of every group that carries `d rate / d ln S0` (the integrated estimator's groups), and how
/// many groups it pools.
///
/// Why pooled: the extra scatter (per-well drift, the dispenser's relative error in S0) belongs
/// to the plate and its liquid handling, not to one enzyme, and one group's 8 levels in
/// triplicate give its two parts from 16 degrees of freedom, whose plate-to-plate scatter moved
/// the weights enough to cost the realistic design's fast Km about 1.5 points of coverage
/// (DEVELOPERS.md, "Initial-rate estimators"). Each group's fit still scales its covariance by its
/// own residuals, so a group that scatters more than the pool widens its own intervals; the pool
/// sets only how the weights are shaped across the levels.
///
/// Assumptions: the groups share one rate unit and one conversion to it (a constant part in
/// concentration units pooled across standard curves of different slopes is a compromise).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PooledExtraVariance {
    /// The pooled estimate.
    pub model: ExtraVariance,
    /// Groups whose replicates it came from (two or more).
    pub groups: usize,
}

/// The [`PooledExtraVariance`] of `groups` (each group's fitted points); `None` when fewer than two
/// groups carry `g` and a rate SE at every point, or the pool's estimate fails.
pub fn pooled_extra_variance(groups: &[&[FitPoint]]) -> Option<PooledExtraVariance> {
    let mut levels: Vec<(Vec<(f64, f64)>, f64)> = Vec::new();
    let mut contributing = 0;
    for points in groups {
        let Some(ses) = points
            .iter()
            .map(|p| p.se.filter(|se| se.is_finite() && *se > 0.0))
            .collect::<Option<Vec<f64>>>()
        else {
            continue;
        };
        if points.is_empty() {
            continue;
        }
        let replicates = replicate_levels(points, &ses);
        if replicates.with_sensitivity && replicates.levels.iter().any(|(members, _)| members.len() >= 2) {
            contributing += 1;
            levels.extend(replicates.levels);
        }
    }
    if contributing < 2 {
        return None;
    }
    let model = extra_variance_with_substrate_term(&levels)
        .filter(|model| model.degrees_of_freedom >= MIN_REPLICATE_DEGREES_OF_FREEDOM)?;
    Some(PooledExtraVariance {
        model,
        groups: contributing,
    })
}

/// The points' [`RateFeedback`] when every one carries a derivative for the same law.
fn rate_feedback(points: &[FitPoint]) -> Option<crate::fit::models::RateFeedback> {
    let kind = points.first()?.law_feedback.as_ref()?.0;
    let per_parameter: Option<Vec<Vec<f64>>> = points
        .iter()
        .map(|p| {
            p.law_feedback
                .as_ref()
                .filter(|(k, _)| *k == kind)
                .map(|(_, row)| row.clone())
        })
        .collect();
    Some(crate::fit::models::RateFeedback {
        kind,
        per_parameter: per_parameter?,
    })
}

/// Fits one group's points and builds its report (shared by runs and `platekin fit`).
#[allow(clippy::too_many_arguments)]
pub fn fit_points(
    group: GroupKey,
    points: &[FitPoint],
    left_out: Vec<LeftOut>,
    units: &GroupUnits,
    settings: &FitSettings,
    corrections: Option<&PlateCorrections>,
    pooled: Option<&PooledExtraVariance>,
    progress: &mut dyn FnMut(usize, usize),
) -> GroupFit {
    let every_point_has_se = points
        .iter()
        .all(|p| p.se.is_some_and(|se| se.is_finite() && se > 0.0));
    let resolved = FitSettings {
        weighting: settings.weighting.resolve(every_point_has_se),
        ..settings.clone()
    };
    let settings = &resolved;
    let mut report = empty_report(group, points, left_out, settings);
    let substrate: Vec<f64> = points.iter().map(|p| p.substrate).collect();
    let inhibitor: Vec<f64> = points.iter().map(|p| p.inhibitor).collect();
    let rates: Vec<f64> = points.iter().map(|p| p.rate).collect();
    let sds: Option<Vec<f64>> = if settings.weighting == Weighting::RateSe {
        let ses: Option<Vec<f64>> = points.iter().map(|p| p.se).collect();
        // Wells scatter beyond their own standard errors (pipetting, per-well drift): the extra
        // component, from the replicates, joins every point's variance.
        // The plate's pooled estimate where it applies (every point carries g), else the group's own.
        let every_point_has_sensitivity = points.iter().all(|p| p.substrate_sensitivity.is_some());
        match pooled.filter(|_| every_point_has_sensitivity && !points.is_empty()) {
            Some(pooled) => {
                report.extra_variance = Some(pooled.model);
                report.extra_variance_groups = pooled.groups;
            }
            None => {
                report.extra_variance = ses.as_ref().and_then(|ses| replicate_extra_variance(points, ses));
                report.extra_variance_groups = usize::from(report.extra_variance.is_some());
            }
        }
        let extras: Vec<f64> = points
            .iter()
            .map(|p| {
                report
                    .extra_variance
                    .map_or(0.0, |model| model.at(p.substrate_sensitivity.unwrap_or(0.0)))
            })
            .collect();
        ses.map(|ses| {
            ses.iter()
                .zip(&extras)
                .map(|(se, extra)| (se * se + extra).sqrt())
                .collect()
        })
    } else {
        points.iter().map(|p| p.sd).collect()
    };
    if settings.weighting == Weighting::RateSe && sds.is_none() {
        let lacking: Vec<&str> = points
            .iter()
            .filter(|p| p.se.is_none())
            .map(|p| p.label.as_str())
            .collect();
        report.error = Some(format!(
            "no fit: rate-se weighting needs a standard error at every point (a rate_se column, or a plate's wells); none for {}",
            lacking.join(", ")
        ));
        return report;
    }
    if settings.weighting == Weighting::ReplicateSd && sds.is_none() {
        let lacking: Vec<&str> = points
            .iter()
            .filter(|p| p.sd.is_none())
            .map(|p| p.label.as_str())
            .collect();
        report.error = Some(format!(
            "no fit: replicate-SD weighting needs an SD at every point (an sd column, or at least two \
             replicates at the same [S] and [I]); none for {}",
            lacking.join(", ")
        ));
        return report;
    }
    let enzyme_in_inhibitor_unit = match (units.enzyme, units.inhibitor_unit) {
        (Some((value, unit)), Some(inhibitor_unit)) => Some(value * unit.factor_to(inhibitor_unit)),
        _ => None,
    };
    let varies_inhibitor = RateData::distinct(&inhibitor).len() > 1;
    let request = settings.model.unwrap_or(if varies_inhibitor {
        ModelRequest::Auto
    } else {
        ModelRequest::Fixed(RateModelKind::MichaelisMenten)
    });
    report.model_requested = Some(request);
    let data = match RateData::new(
        substrate.clone(),
        inhibitor.clone(),
        rates.clone(),
        sds.as_deref(),
        settings.weighting,
        enzyme_in_inhibitor_unit,
    ) {
        Ok(mut data) => {
            if let Some(corrections) = corrections {
                data.shared = shared_rate_errors(points, corrections, report.extra_variance.as_ref());
            }
            data.feedback = rate_feedback(points);
            data
        }
        Err(error) => {
            report.error = Some(format!("no fit: {error}"));
            return report;
        }
    };
    let model_settings = ModelSettings {
        request,
        weighting: settings.weighting,
        loss: settings.loss,
        profile: settings.profile,
        bootstrap: settings.bootstrap,
        cheng_prusoff_km: settings.cheng_prusoff_km,
        ..ModelSettings::default()
    };
    let analysis = match analyse_rates(&data, &model_settings, progress) {
        Ok(analysis) => analysis,
        Err(error) => {
            report.error = Some(format!("no {} fit: {error}", request.name()));
            return report;
        }
    };
    report.model = analysis.model;
    report.equation = Some(analysis.equation);
    report.models_tried = analysis.models_tried.clone();
    report.f_tests = analysis.f_tests.clone();
    report.model_choice = Some(if settings.model.is_none() && !varies_inhibitor {
        format!(
            "{} (the default where the inhibitor is not varied)",
            analysis.choice
        )
    } else {
        analysis.choice.clone()
    });
    report.bootstrap = analysis.bootstrap.as_ref().map(|b| BootstrapSummary {
        replicates: b.replicates,
        converged: b.converged,
        seed: b.seed,
    });
    report.law = analysis.fit.as_ref().map(|fit| FittedLaw {
        kind: fit.kind,
        parameters: fit.fit.parameters.clone(),
        enzyme: enzyme_in_inhibitor_unit.unwrap_or(0.0),
    });
    let plain_michaelis_menten = analysis.model == RateModelKind::MichaelisMenten
        && settings.weighting == Weighting::None
        && settings.loss == RobustLoss::None;
    if plain_michaelis_menten {
        michaelis_menten_report(&mut report, &substrate, &rates, units, &analysis);
    } else {
        general_report(&mut report, &substrate, &data.inhibitor, &rates, units, &analysis);
    }
    report.warnings.extend(analysis.warnings.iter().cloned());
    report
}

fn concentration_unit_text(unit: Option<ConcentrationUnit>, units: &GroupUnits) -> String {
    unit.map_or_else(|| units.missing_unit_text.clone(), |u| u.to_string())
}

fn unit_for(dimension: Dimension, units: &GroupUnits) -> String {
    match dimension {
        Dimension::Rate => units.rate_unit.clone(),
        Dimension::Substrate => concentration_unit_text(units.substrate_unit, units),
        Dimension::Inhibitor => concentration_unit_text(units.inhibitor_unit, units),
        Dimension::Dimensionless => "1".to_string(),
    }
}

/// The enzyme concentration in the substrate unit, when kcat can be given; else the reason not.
fn enzyme_for_kcat(units: &GroupUnits) -> Result<(f64, ConcentrationUnit), &'static str> {
    match (units.rate_concentration_unit, units.substrate_unit, units.enzyme) {
        (Some(rate_unit), Some(s_unit), Some((e, e_unit))) if e > 0.0 && rate_unit == s_unit => {
            Ok((e * e_unit.factor_to(s_unit), s_unit))
        }
        (None, ..) if units.rate_unit.starts_with("AU") => {
            Err("no kcat: rates are in absorbance units (give --extinction and --pathlength)")
        }
        (None, ..) => Err("no kcat: the rates are not in a concentration per second (such as uM/s)"),
        (_, _, None) if units.enzyme_mass.is_some() => Err(
            "no kcat: the enzyme is given as a mass concentration, so its molar concentration is unknown; \
             give the enzyme's molecular weight with --enzyme-mw KDA (the specific activity is reported)",
        ),
        (_, _, None) | (_, None, _) => Err("no kcat: no enzyme concentration is given"),
        (Some(_), Some(_), Some((e, _))) if e <= 0.0 => Err("no kcat: the enzyme concentration is zero"),
        _ => Err("no kcat: the rate and substrate units differ"),
    }
}

/// The Michaelis-Menten report of a plain (unweighted, non-robust) Michaelis-Menten group, made
/// from the one fit behind the analysis: estimates and design warnings, profile and bootstrap
/// intervals, kcat and kcat/Km.
fn michaelis_menten_report(
    report: &mut GroupFit,
    substrate: &[f64],
    rates: &[f64],
    units: &GroupUnits,
    analysis: &ModelAnalysis,
) {
    let Some(rate_fit) = analysis.fit.as_ref() else {
        report.error = Some("no Michaelis-Menten fit: the fit left no result".to_string());
        return;
    };
    let start = [
        rate_fit.start.first().copied().unwrap_or(f64::NAN),
        rate_fit.start.get(1).copied().unwrap_or(f64::NAN),
    ];
    let fit = match describe_michaelis_menten(
        substrate,
        rates,
        &rate_fit.fit,
        start,
        StartMethod::RateLawCandidates,
        true,
    ) {
        Ok(fit) => fit,
        Err(error) => {
            report.error = Some(format!("no Michaelis-Menten fit: {error}"));
            return;
        }
    };
    let km_unit = concentration_unit_text(units.substrate_unit, units);
    let with_intervals = |mut parameter: ParameterReport, name: &str| {
        if let Some(constant) = analysis.constants.iter().find(|c| c.name == name) {
            parameter.ci95_profile = constant.ci95_profile;
            parameter.ci95_bootstrap = constant.ci95_bootstrap;
        }
        parameter
    };
    report.parameters.insert(
        "Vmax".into(),
        with_intervals(
            ParameterReport::from_estimate(&fit.vmax, &units.rate_unit, 1.0),
            "Vmax",
        ),
    );
    report.parameters.insert(
        "Km".into(),
        with_intervals(ParameterReport::from_estimate(&fit.km, &km_unit, 1.0), "Km"),
    );
    report.residual_sd = fit.residual_sd;
    report.correlation_vmax_km = fit.correlation_vmax_km;
    report.converged = fit.converged;
    report.linearised = Some(fit.linearised);
    report.warnings.extend(fit.warnings.iter().cloned());
    match enzyme_for_kcat(units) {
        Ok((enzyme, s_unit)) => match turnover_estimates(&fit, enzyme, 0.0) {
            Ok(turnover) => {
                let mut kcat = ParameterReport::from_estimate(&turnover.kcat, "1/s", 1.0);
                if let Some(vmax) = report.parameters.get("Vmax") {
                    kcat.ci95_profile = vmax
                        .ci95_profile
                        .map(|[lo, hi]| [lo.map(|x| x / enzyme), hi.map(|x| x / enzyme)]);
                    kcat.ci95_bootstrap = vmax.ci95_bootstrap.map(|[lo, hi]| [lo / enzyme, hi / enzyme]);
                }
                report.parameters.insert("kcat".into(), kcat);
                if let Some(specificity) = &turnover.kcat_over_km {
                    // (1/(unit*s)) -> (1/(M*s)).
                    let scale = 1.0 / s_unit.in_molar();
                    report.parameters.insert(
                        "kcat_over_Km".into(),
                        ParameterReport::from_estimate(specificity, "1/(M*s)", scale),
                    );
                }
            }
            Err(error) => report.warnings.push(format!("no kcat: {error}")),
        },
        Err(reason) => report.warnings.push(reason.to_string()),
    }
    insert_specific_activity(report, units);
}

/// Umol per mol, for the enzyme unit (1 U = 1 umol/min).
const MICROMOL_PER_MOL: f64 = 1e6;

/// The factor that turns a rate in `rate_unit` per second, over an enzyme at `mass` of
/// `mass_unit`, into a specific activity in U/mg (1 U = 1 umol/min, IUBMB): umol/(L min) over
/// mg/L. `None` when the enzyme value is not positive.
pub fn specific_activity_factor(
    rate_unit: ConcentrationUnit,
    mass: f64,
    mass_unit: MassConcentrationUnit,
) -> Option<f64> {
    let micromol_per_litre_minute = rate_unit.in_molar() * MICROMOL_PER_MOL * 60.0;
    let milligram_per_litre = mass * mass_unit.in_grams_per_litre() * 1000.0;
    (milligram_per_litre > 0.0 && milligram_per_litre.is_finite())
        .then(|| micromol_per_litre_minute / milligram_per_litre)
}

/// Adds `specific_activity` (Vmax per mg of enzyme, U/mg) when the layout gives the enzyme as a
/// mass concentration and the rates are concentrations per second: Vmax's value, SE and every
/// interval scaled together.
fn insert_specific_activity(report: &mut GroupFit, units: &GroupUnits) {
    let (Some(rate_unit), Some((mass, mass_unit))) = (units.rate_concentration_unit, units.enzyme_mass)
    else {
        return;
    };
    let Some(vmax) = report.parameters.get("Vmax") else {
        return;
    };
    let Some(factor) = specific_activity_factor(rate_unit, mass, mass_unit) else {
        report
            .warnings
            .push("no specific activity: the enzyme concentration is zero".to_string());
        return;
    };
    let mut activity = vmax.clone();
    units::scale(&mut activity, factor);
    activity.unit = "U/mg".to_string();
    report.parameters.insert("specific_activity".into(), activity);
}

/// The report of any other model (or of a weighted or robust Michaelis-Menten fit): every constant
/// with its intervals, kcat = Vmax/[E], and kcat/Km from the fit's covariance of Vmax and Km.
fn general_report(
    report: &mut GroupFit,
    substrate: &[f64],
    inhibitor: &[f64],
    rates: &[f64],
    units: &GroupUnits,
    analysis: &ModelAnalysis,
) {
    for constant in &analysis.constants {
        report.parameters.insert(
            constant.name.clone(),
            ParameterReport::from_constant(constant, &unit_for(constant.dimension, units), 1.0),
        );
    }
    report.residual_sd = analysis.residual_sd;
    report.converged = analysis.converged;
    let Some(fit) = analysis.fit.as_ref() else {
        return;
    };
    let names = &fit.parameter_names;
    let has_vmax_km = names.first() == Some(&"Vmax") && names.get(1) == Some(&"Km");
    if has_vmax_km {
        report.correlation_vmax_km = fit.fit.correlation.as_ref().map(|c| c[(0, 1)]);
        // Diagnostics from the points without inhibitor (or at the lowest level).
        let lowest = inhibitor.iter().copied().fold(f64::INFINITY, f64::min);
        let (s0, v0): (Vec<f64>, Vec<f64>) = substrate
            .iter()
            .zip(rates)
            .zip(inhibitor)
            .filter(|(_, &level)| level == lowest)
            .map(|((&s, &v), _)| (s, v))
            .unzip();
        report.linearised = Some(linearised_estimates(&s0, &v0));
    }
    if !names.contains(&"Vmax") {
        return;
    }
    match enzyme_for_kcat(units) {
        Ok((enzyme, s_unit)) => {
            if let Some(vmax) = analysis.constants.iter().find(|c| c.name == "Vmax") {
                report.parameters.insert(
                    "kcat".into(),
                    ParameterReport::from_constant(vmax, "1/s", 1.0 / enzyme),
                );
            }
            if let (true, Some(covariance)) = (has_vmax_km, fit.fit.covariance.as_ref()) {
                let (vmax, km) = (fit.fit.parameters[0], fit.fit.parameters[1]);
                let block = [
                    [covariance[(0, 0)], covariance[(0, 1)]],
                    [covariance[(1, 0)], covariance[(1, 1)]],
                ];
                let (ratio, ratio_se) = vmax_over_km_delta_method(vmax, km, &block);
                let scale = 1.0 / (enzyme * s_unit.in_molar());
                let value = ratio * scale;
                let se = ratio_se * scale;
                let ci95 = t_quantile_975(fit.fit.degrees_of_freedom)
                    .ok()
                    .map(|q| [value - q * se, value + q * se]);
                report.parameters.insert(
                    "kcat_over_Km".into(),
                    ParameterReport {
                        value,
                        se: Some(se),
                        ci95,
                        unit: "1/(M*s)".to_string(),
                        determined: fit.converged() && se <= 0.5 * value.abs(),
                        ci95_profile: None,
                        ci95_bootstrap: None,
                        asymptotic: None,
                    },
                );
            }
        }
        Err(reason) => report.warnings.push(reason.to_string()),
    }
    insert_specific_activity(report, units);
}

#[cfg(test)]
mod tests {
    use super::*;

    /// One group's points: 8 levels in triplicate whose `g` run as `d v / d ln S0` does (scaled by
    /// `scale`, the group's Vmax), se 0.002 x scale, extra variance `a + cv2 g^2` drawn.
    fn pooled_group(scale: f64, a: f64, cv2: f64, generator: &mut rand_chacha::ChaCha8Rng) -> Vec<FitPoint> {
        use rand_distr::{Distribution, Normal};
        let standard = Normal::new(0.0, 1.0).unwrap();
        let shape = [0.09, 0.16, 0.22, 0.25, 0.2, 0.12, 0.06, 0.03];
        let mut points = Vec::new();
        for (level, unit_g) in shape.iter().enumerate() {
            let g = scale * unit_g;
            let se = 0.002 * scale;
            for _ in 0..3 {
                let sd = (se * se + a + cv2 * g * g).sqrt();
                points.push(FitPoint {
                    rate: scale * (1.0 + level as f64) / 9.0 + sd * standard.sample(generator),
                    se: Some(se),
                    substrate_sensitivity: Some(g),
                    ..point(10.0 * (1.0 + level as f64), None)
                });
            }
        }
        points
    }

    #[test]
    fn the_plates_pooled_extra_variance_recovers_its_parts_with_less_scatter_than_one_group() {
        use rand::SeedableRng;
        // Truth known by construction (simulation): two groups whose rates differ 3-fold share
        // a constant part (per-well drift) and a 3% CV on S0, as a plate's two variants do.
        let mut generator = rand_chacha::ChaCha8Rng::seed_from_u64(29);
        let (a, cv2) = (1e-5, 9e-4);
        let (mut own, mut pooled) = (Vec::new(), Vec::new());
        for _ in 0..400 {
            let fast = pooled_group(1.0, a, cv2, &mut generator);
            let slow = pooled_group(3.0, a, cv2, &mut generator);
            let ses: Vec<f64> = slow.iter().map(|p| p.se.unwrap()).collect();
            own.push(replicate_extra_variance(&slow, &ses).unwrap());
            let pool = pooled_extra_variance(&[&fast, &slow]).unwrap();
            assert_eq!(pool.groups, 2);
            assert_eq!(pool.model.degrees_of_freedom, 32);
            pooled.push(pool.model);
        }
        let mean = |models: &[ExtraVariance], part: fn(&ExtraVariance) -> f64| {
            models.iter().map(part).sum::<f64>() / models.len() as f64
        };
        let spread = |models: &[ExtraVariance], part: fn(&ExtraVariance) -> f64, truth: f64| {
            (models.iter().map(|m| (part(m) - truth).powi(2)).sum::<f64>() / models.len() as f64).sqrt()
        };
        let cv2_of = |m: &ExtraVariance| m.substrate_cv_squared;
        let constant_of = |m: &ExtraVariance| m.constant;
        // Unbiased within the draw's noise (the moments are; the truncation at 0 costs a little).
        assert!(
            (mean(&pooled, cv2_of) / cv2 - 1.0).abs() < 0.1,
            "{}",
            mean(&pooled, cv2_of)
        );
        assert!(
            (mean(&pooled, constant_of) / a - 1.0).abs() < 0.25,
            "{}",
            mean(&pooled, constant_of)
        );
        // Twice the replicates: the pooled parts scatter less about the truth than the larger
        // group's own (measured: CV^2 0.82 times, the constant 0.22 times, since the smaller
        // group's levels, where g is small, pin the constant).
        assert!(spread(&pooled, cv2_of, cv2) < 0.9 * spread(&own, cv2_of, cv2));
        assert!(spread(&pooled, constant_of, a) < 0.4 * spread(&own, constant_of, a));
    }

    #[test]
    fn a_pool_needs_two_groups_with_sensitivities() {
        use rand::SeedableRng;
        let mut generator = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let one = pooled_group(1.0, 1e-5, 9e-4, &mut generator);
        let mut without_g = pooled_group(1.0, 1e-5, 9e-4, &mut generator);
        assert!(pooled_extra_variance(&[&one]).is_none());
        // A group without `d rate / d ln S0` (a chord estimate, a table without the column) keeps
        // its own constant and does not join the pool.
        for point in &mut without_g {
            point.substrate_sensitivity = None;
        }
        assert!(pooled_extra_variance(&[&one, &without_g]).is_none());
        let other = pooled_group(2.0, 1e-5, 9e-4, &mut generator);
        assert_eq!(
            pooled_extra_variance(&[&one, &without_g, &other]).unwrap().groups,
            2
        );
    }

    fn point(substrate: f64, background: Option<Background>) -> FitPoint {
        FitPoint {
            label: format!("S {substrate}"),
            well: None,
            window: Some(WindowChord {
                slope: 1e-3,
                se: 1e-5,
                start_s: 0.0,
                end_s: 300.0,
                reads: 16,
            }),
            substrate,
            inhibitor: 0.0,
            rate: 1e-3,
            sd: None,
            se: Some(1e-5),
            background,
            rate_per_chord: 1.0,
            substrate_sensitivity: None,
            law_feedback: None,
        }
    }

    fn law(with_intercept: bool) -> Background {
        Background::Modelled {
            law: BackgroundLaw {
                slope: 2e-6,
                intercept: if with_intercept { 1e-5 } else { 0.0 },
                covariance: [[1e-14, 0.0], [0.0, if with_intercept { 1e-12 } else { 0.0 }]],
                degrees_of_freedom: if with_intercept { 6.0 } else { 7.0 },
            },
            rate: 2e-4,
            se: 1e-6,
            controls: 8,
            levels: 8,
            with_intercept,
            substrate: 100.0,
        }
    }

    #[test]
    fn the_blank_slope_loads_only_where_no_background_takes_it_up() {
        // A straight blank (constant and slope) with unit conversion: the slope's loading on a rate
        // is -1/T whole without a background or under a law through the origin, and 0 under a mean
        // of controls or a law with an intercept (`Background::cancels_blank_slope`).
        let corrections = PlateCorrections {
            blank: BlankUncertainty::Smooth {
                t_scale: 600.0,
                covariance: vec![vec![1e-8, 0.0], vec![0.0, 1e-8]],
                degrees_of_freedom: 29.0,
            },
            read_times_s: (0..31).map(|i| 20.0 * f64::from(i)).collect(),
            sign: 1.0,
            per_absorbance: 1.0,
            dead_time_s: 0.0,
        };
        let matched = Background::Matched {
            rate: 1e-4,
            se: 1e-6,
            controls: 2,
        };
        let points = [
            point(10.0, None),
            point(20.0, Some(law(false))),
            point(40.0, Some(law(true))),
            point(80.0, Some(matched)),
        ];
        let shared = shared_rate_errors(&points, &corrections, None);
        // Column 0 is the blank's constant (no slope), column 1 its slope.
        let slope_loadings: Vec<f64> = shared.loadings.iter().map(|row| row[1]).collect();
        let whole = -1.0 / 600.0;
        assert!((slope_loadings[0] - whole).abs() < 1e-15, "{slope_loadings:?}");
        assert!((slope_loadings[1] - whole).abs() < 1e-15, "{slope_loadings:?}");
        assert_eq!(slope_loadings[2], 0.0);
        assert_eq!(slope_loadings[3], 0.0);
        assert!(shared.loadings.iter().all(|row| row[0] == 0.0));
    }
}
