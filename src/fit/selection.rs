//! Model choice and the whole analysis of one rate table: fit the requested model (or, for
//! `auto`, the sensible candidates), detect a mixed fit that collapsed to a limiting case, rank the
//! candidates by AICc, test nested pairs by the extra-sum-of-squares F test, and attach profile and
//! bootstrap intervals to the chosen model's constants.
//!
//! # Formulas
//! * `AICc = n ln(RSS/n) + 2k + 2k(k+1)/(n-k-1)`, k the number of fitted parameters, RSS the
//!   (weighted) residual sum of squares; Akaike weights `exp(-dAICc/2) / sum exp(-dAICc/2)`.
//! * Extra sum of squares, simpler model s nested in fuller model f:
//!   `F = ((RSS_s - RSS_f) / (p_f - p_s)) / (RSS_f / (n - p_f))` on `(p_f - p_s, n - p_f)` degrees of
//!   freedom.
//! * `auto` keeps, among the models within 2 AICc units of the lowest, the one with the fewest
//!   parameters (parsimony), and says so.
//! * Rule: a model is never preferred on fewer points than parameters plus two (`n >= k + 2`,
//!   which also keeps AICc's correction finite), nor if its fit did not converge.
//! * Collapse (common practice): an inverse constant below `1 / (100 max I)` (for substrate
//!   inhibition `1 / (100 max S)`), i.e. the constant more than 100 times beyond the highest
//!   concentration used, has no visible effect; such a mixed fit is reported as the limiting case
//!   (competitive when Ki' runs off, uncompetitive when Ki does, no inhibition when both do).
//! * Cheng-Prusoff (an assumption, labelled as such in the output): for a competitive inhibitor
//!   under rapid equilibrium with `[I] >> [E]`, `Ki = IC50 / (1 + S/Km)` with S and Km taken as exact.
//!
//! References: Hurvich and Tsai 1989, Biometrika 76:297 (AICc); Burnham and Anderson 2002, "Model
//! Selection and Multimodel Inference", Springer (Akaike weights); Bates and Watts 1988 (extra sum
//! of squares); Cheng and Prusoff 1973, Biochem Pharmacol 22:3099. Volume and page numbers are from
//! memory.

use serde::Serialize;

use super::inference::{
    fit_with_loss, profile_intervals, reported_constants, residual_bootstrap, BootstrapResult,
    BootstrapSettings, ConstantEstimate, Dimension, RobustLoss,
};
use super::least_squares::LeastSquaresOptions;
use super::models::{ModelFitError, RateData, RateModelFit, RateModelKind, Weighting};
pub use crate::config::ModelRequest;
pub use crate::core::stats::aicc;
use crate::core::stats::extra_sum_of_squares;

/// Settings of [`analyse_rates`].
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ModelSettings {
    pub request: ModelRequest,
    /// Recorded in the output (the weights themselves are in the data).
    pub weighting: Weighting,
    pub loss: RobustLoss,
    /// Compute profile-likelihood intervals (default true).
    pub profile: bool,
    pub bootstrap: Option<BootstrapSettings>,
    /// Km (substrate unit) for the Cheng-Prusoff conversion of an IC50.
    pub cheng_prusoff_km: Option<f64>,
    pub least_squares: LeastSquaresOptions,
}

impl Default for ModelSettings {
    fn default() -> Self {
        ModelSettings {
            request: ModelRequest::Auto,
            weighting: Weighting::None,
            loss: RobustLoss::None,
            profile: true,
            bootstrap: None,
            cheng_prusoff_km: None,
            least_squares: LeastSquaresOptions::default(),
        }
    }
}

/// One extra-sum-of-squares F test.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FTest {
    pub simpler: RateModelKind,
    pub fuller: RateModelKind,
    pub f: f64,
    /// `[p_f - p_s, n - p_f]`.
    pub degrees_of_freedom: [usize; 2],
    pub p_value: f64,
}

/// The F test of `simpler` against `fuller` (see the module docs); `None` when it is undefined.
pub fn extra_sum_of_squares_test(
    n: usize,
    simpler: (RateModelKind, usize, f64),
    fuller: (RateModelKind, usize, f64),
) -> Option<FTest> {
    let (simple_kind, simple_p, simple_rss) = simpler;
    let (full_kind, full_p, full_rss) = fuller;
    let test = extra_sum_of_squares(n, (simple_p, simple_rss), (full_p, full_rss))?;
    Some(FTest {
        simpler: simple_kind,
        fuller: full_kind,
        f: test.f,
        degrees_of_freedom: test.degrees_of_freedom,
        p_value: test.p_value,
    })
}

/// Nested pairs (simpler, fuller) among the models.
pub const NESTED_PAIRS: [(RateModelKind, RateModelKind); 8] = [
    (RateModelKind::MichaelisMenten, RateModelKind::SubstrateInhibition),
    (RateModelKind::MichaelisMenten, RateModelKind::Hill),
    (RateModelKind::MichaelisMenten, RateModelKind::Competitive),
    (RateModelKind::MichaelisMenten, RateModelKind::Uncompetitive),
    (RateModelKind::MichaelisMenten, RateModelKind::Noncompetitive),
    (RateModelKind::Competitive, RateModelKind::Mixed),
    (RateModelKind::Uncompetitive, RateModelKind::Mixed),
    (RateModelKind::Noncompetitive, RateModelKind::Mixed),
];

/// The candidates `auto` fits.
pub fn auto_candidates(data: &RateData) -> Vec<RateModelKind> {
    let substrate_levels = RateData::distinct(&data.substrate).len();
    if data.varies_inhibitor() && substrate_levels == 1 {
        // A single-[S] inhibitor series: the dose-response curve, and tight binding if [E] is known.
        let mut candidates = vec![RateModelKind::Ic50];
        if data.enzyme.is_some() {
            candidates.push(RateModelKind::Morrison);
        }
        candidates
    } else if data.varies_inhibitor() {
        vec![
            RateModelKind::MichaelisMenten,
            RateModelKind::Competitive,
            RateModelKind::Uncompetitive,
            RateModelKind::Noncompetitive,
            RateModelKind::Mixed,
        ]
    } else {
        vec![
            RateModelKind::MichaelisMenten,
            RateModelKind::SubstrateInhibition,
            RateModelKind::Hill,
        ]
    }
}

/// `auto` keeps the simplest model within this many AICc units of the lowest (Burnham and Anderson
/// 2002: a difference under 2 is substantial support for both).
pub const PARSIMONY_DELTA_AICC: f64 = 2.0;

/// An inverse constant more than this many times beyond the highest concentration has no effect.
pub const COLLAPSE_FACTOR: f64 = 100.0;

/// The limiting case a fit collapsed to, if any (see the module docs).
pub fn collapsed_case(fit: &RateModelFit, data: &RateData) -> Option<RateModelKind> {
    let highest = |values: &[f64]| values.iter().copied().fold(0.0, f64::max);
    let negligible = |inverse: f64, highest: f64| inverse * highest * COLLAPSE_FACTOR < 1.0;
    let parameters = &fit.fit.parameters;
    let highest_inhibitor = highest(&data.inhibitor);
    match fit.kind {
        RateModelKind::Mixed => {
            let ki_gone = negligible(parameters[2], highest_inhibitor);
            let ki_prime_gone = negligible(parameters[3], highest_inhibitor);
            match (ki_gone, ki_prime_gone) {
                (true, true) => Some(RateModelKind::MichaelisMenten),
                (true, false) => Some(RateModelKind::Uncompetitive),
                (false, true) => Some(RateModelKind::Competitive),
                (false, false) => None,
            }
        }
        RateModelKind::Competitive | RateModelKind::Uncompetitive | RateModelKind::Noncompetitive => {
            negligible(parameters[2], highest_inhibitor).then_some(RateModelKind::MichaelisMenten)
        }
        RateModelKind::SubstrateInhibition => {
            negligible(parameters[2], highest(&data.substrate)).then_some(RateModelKind::MichaelisMenten)
        }
        _ => None,
    }
}

/// One candidate as `models_tried` lists it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CandidateReport {
    pub model: RateModelKind,
    pub n_parameters: usize,
    pub rss: Option<f64>,
    #[serde(rename = "AICc")]
    pub aicc: Option<f64>,
    #[serde(rename = "delta_AICc")]
    pub delta_aicc: Option<f64>,
    pub akaike_weight: Option<f64>,
    pub converged: bool,
    /// May be preferred (converged, `n >= k + 2`, not collapsed).
    pub eligible: bool,
    pub note: Option<String>,
}

/// Everything one rate table's analysis found.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ModelAnalysis {
    pub requested: ModelRequest,
    /// The model reported (after a collapse, the limiting case).
    pub model: RateModelKind,
    pub equation: &'static str,
    pub constants: Vec<ConstantEstimate>,
    pub n: usize,
    /// Weighted RSS of the reported fit.
    pub rss: f64,
    pub residual_sd: Option<f64>,
    pub converged: bool,
    pub weighting: Weighting,
    pub loss: RobustLoss,
    /// Points a robust fit down-weighted (indices into the data).
    pub downweighted_points: Vec<usize>,
    pub models_tried: Vec<CandidateReport>,
    pub f_tests: Vec<FTest>,
    /// Why this model, in words.
    pub choice: String,
    pub bootstrap: Option<BootstrapResult>,
    pub warnings: Vec<String>,
    #[serde(skip)]
    pub fit: Option<RateModelFit>,
}

struct Candidate {
    kind: RateModelKind,
    outcome: Result<super::inference::RobustFit, ModelFitError>,
    collapsed_to: Option<RateModelKind>,
    /// Why `auto` may not prefer it although it fitted (tight binding the data do not demand).
    not_preferred: Option<String>,
}

/// `Ki_app` at or above this multiple of [E] is no tight binding: the enzyme then binds too little
/// of the inhibitor to bend the curve away from the classical hyperbola (the Morrison equation's
/// correction is of order [E]/Ki_app; common practice), so `auto` does not call a series tight
/// binding on the strength of its fewer parameters alone.
pub const TIGHT_BINDING_KI_OVER_ENZYME: f64 = 10.0;

/// Tight binding (Morrison) is preferred by `auto` only when the data demand it: its fitted
/// Ki_app below [`TIGHT_BINDING_KI_OVER_ENZYME`] x [E] and its AICc lower than the dose-response
/// curve's by at least [`PARSIMONY_DELTA_AICC`]. Marks the Morrison candidate otherwise.
fn require_tight_binding_evidence(candidates: &mut [Candidate], data: &RateData) {
    let aicc_of = |candidate: &Candidate| {
        let fit = &candidate.outcome.as_ref().ok()?.fit.fit;
        aicc(data.len(), candidate.kind.n_parameters(), fit.rss)
    };
    let Some(curve_aicc) = candidates
        .iter()
        .find(|c| c.kind == RateModelKind::Ic50)
        .and_then(aicc_of)
    else {
        return;
    };
    let Some(enzyme) = data.enzyme else { return };
    for candidate in candidates
        .iter_mut()
        .filter(|c| c.kind == RateModelKind::Morrison)
    {
        let Some(morrison_aicc) = aicc_of(candidate) else {
            continue;
        };
        let Some(ki_app) = candidate
            .outcome
            .as_ref()
            .ok()
            .and_then(|r| r.fit.fit.parameters.get(1).copied())
        else {
            continue;
        };
        if ki_app >= TIGHT_BINDING_KI_OVER_ENZYME * enzyme {
            candidate.not_preferred = Some(format!(
                "not tight binding: Ki_app {} is {} or more times [E] {}",
                crate::core::format::significant(ki_app),
                TIGHT_BINDING_KI_OVER_ENZYME,
                crate::core::format::significant(enzyme)
            ));
        } else if morrison_aicc > curve_aicc - PARSIMONY_DELTA_AICC {
            candidate.not_preferred = Some(format!(
                "tight binding not demanded: AICc not {PARSIMONY_DELTA_AICC} below the dose-response curve's"
            ));
        }
    }
}

fn candidate_reports(candidates: &[Candidate], n: usize) -> Vec<CandidateReport> {
    let mut reports: Vec<CandidateReport> = candidates
        .iter()
        .map(|candidate| {
            let k = candidate.kind.n_parameters();
            match &candidate.outcome {
                Ok(robust) => {
                    let fit = &robust.fit.fit;
                    let value = aicc(n, k, fit.rss);
                    let enough_points = n >= k + 2;
                    let mut notes = Vec::new();
                    if !fit.converged() {
                        notes.push(format!("did not converge ({})", fit.stop_reason));
                    }
                    if !enough_points {
                        notes.push(format!("{n} points are fewer than {k} parameters plus two"));
                    }
                    if let Some(limit) = candidate.collapsed_to {
                        notes.push(format!(
                            "collapsed to {limit} (a constant ran off beyond the data)"
                        ));
                    }
                    if let Some(reason) = &candidate.not_preferred {
                        notes.push(reason.clone());
                    }
                    CandidateReport {
                        model: candidate.kind,
                        n_parameters: k,
                        rss: Some(fit.rss),
                        aicc: value,
                        delta_aicc: None,
                        akaike_weight: None,
                        converged: fit.converged(),
                        eligible: fit.converged()
                            && enough_points
                            && value.is_some()
                            && candidate.collapsed_to.is_none()
                            && candidate.not_preferred.is_none(),
                        note: (!notes.is_empty()).then(|| notes.join("; ")),
                    }
                }
                Err(error) => CandidateReport {
                    model: candidate.kind,
                    n_parameters: k,
                    rss: None,
                    aicc: None,
                    delta_aicc: None,
                    akaike_weight: None,
                    converged: false,
                    eligible: false,
                    note: Some(error.to_string()),
                },
            }
        })
        .collect();
    let best = reports
        .iter()
        .filter(|r| r.eligible)
        .filter_map(|r| r.aicc)
        .fold(f64::INFINITY, f64::min);
    if best.is_finite() {
        let total: f64 = reports
            .iter()
            .filter(|r| r.eligible)
            .filter_map(|r| r.aicc)
            .map(|a| (-(a - best) / 2.0).exp())
            .sum();
        for report in &mut reports {
            if let (true, Some(value)) = (report.eligible, report.aicc) {
                report.delta_aicc = Some(value - best);
                report.akaike_weight = Some((-(value - best) / 2.0).exp() / total);
            }
        }
    }
    reports
}

fn fit_candidate(kind: RateModelKind, data: &RateData, settings: &ModelSettings) -> Candidate {
    let outcome = fit_with_loss(kind, data, settings.loss, &settings.least_squares);
    // Checked also when the solver stalled: running into a limit is a common cause of that.
    let collapsed_to = outcome
        .as_ref()
        .ok()
        .and_then(|robust| collapsed_case(&robust.fit, data));
    Candidate {
        kind,
        outcome,
        collapsed_to,
        not_preferred: None,
    }
}

/// Fits one rate table as `settings` asks (see the module docs). `progress(done, total)` reports
/// bootstrap replicates.
pub fn analyse_rates(
    data: &RateData,
    settings: &ModelSettings,
    progress: &mut dyn FnMut(usize, usize),
) -> Result<ModelAnalysis, ModelFitError> {
    let n = data.len();
    let mut warnings = Vec::new();
    let mut candidates: Vec<Candidate> = match settings.request {
        ModelRequest::Auto => auto_candidates(data)
            .into_iter()
            .map(|kind| fit_candidate(kind, data, settings))
            .collect(),
        ModelRequest::Fixed(kind) => vec![fit_candidate(kind, data, settings)],
    };
    // A requested model that collapsed is reported as its limiting case: fit that too.
    if let ModelRequest::Fixed(kind) = settings.request {
        if let Some(limit) = candidates[0].collapsed_to {
            warnings.push(format!(
                "The {kind} fit collapsed: a constant ran beyond {COLLAPSE_FACTOR} times the highest \
                 concentration, where it has no visible effect; it is reported as {limit}."
            ));
            candidates.push(fit_candidate(limit, data, settings));
        }
    }
    if settings.request == ModelRequest::Auto {
        require_tight_binding_evidence(&mut candidates, data);
    }
    let reports = candidate_reports(&candidates, n);
    let chosen_index = match settings.request {
        ModelRequest::Fixed(_) => {
            // The requested model, or its limiting case when it collapsed.
            let last = candidates.len() - 1;
            if candidates[last].outcome.is_err() && last > 0 {
                0
            } else {
                last
            }
        }
        ModelRequest::Auto => {
            // Parsimony: among the eligible models within PARSIMONY_DELTA_AICC of the lowest AICc,
            // the one with the fewest parameters (then the lower AICc).
            let best = reports
                .iter()
                .enumerate()
                .filter(|(_, r)| r.eligible && r.delta_aicc.is_some_and(|d| d < PARSIMONY_DELTA_AICC))
                .min_by(|a, b| {
                    a.1.n_parameters.cmp(&b.1.n_parameters).then(
                        a.1.aicc
                            .unwrap_or(f64::INFINITY)
                            .total_cmp(&b.1.aicc.unwrap_or(f64::INFINITY)),
                    )
                })
                .map(|(index, _)| index);
            match best {
                Some(index) => index,
                None => {
                    // Nothing may be preferred: report the simplest model that ran, with a warning.
                    warnings.push(
                        "No candidate model may be preferred (each either failed, collapsed or has fewer \
                         points than parameters plus two); the simplest model that ran is shown."
                            .to_string(),
                    );
                    match candidates.iter().position(|c| c.outcome.is_ok()) {
                        Some(index) => index,
                        None => {
                            return Err(candidates
                                .swap_remove(0)
                                .outcome
                                .err()
                                .unwrap_or(ModelFitError::NoPositiveRate))
                        }
                    }
                }
            }
        }
    };
    let f_tests: Vec<FTest> = NESTED_PAIRS
        .iter()
        .filter_map(|&(simple, full)| {
            let find = |kind: RateModelKind| {
                candidates.iter().find(|c| c.kind == kind).and_then(|c| {
                    c.outcome
                        .as_ref()
                        .ok()
                        .filter(|r| r.fit.converged())
                        .map(|r| (kind, kind.n_parameters(), r.fit.fit.rss))
                })
            };
            extra_sum_of_squares_test(n, find(simple)?, find(full)?)
        })
        .collect();
    let choice = choice_text(settings.request, &reports, chosen_index, &f_tests);
    let chosen = candidates.swap_remove(chosen_index);
    let robust = chosen.outcome?;
    let mut fit = robust.fit;
    // Corrections subtracted from many rates at once (a blank, a background) move them together:
    // their uncertainty joins the fit's.
    let model = super::models::RateModel {
        kind: fit.kind,
        data,
        extra_weights: robust.robust_weights.as_deref(),
    };
    let shared = model.shared_covariance(&fit.fit.parameters);
    if let Some(shared) = shared {
        fit.fit.add_shared_covariance(shared);
    }
    // Rates corrected by this same law move with it: the estimates' error is fed back
    // ([`super::models::RateFeedback`]).
    let feedback = model.feedback_transform(&fit.fit.parameters);
    if let Some(transform) = feedback {
        fit.fit.transform_covariance(&transform);
    }
    if !fit.converged() {
        warnings.push(format!(
            "The {} fit did not converge ({}); its constants are where the solver stopped and must not \
             be used.",
            fit.kind, fit.fit.stop_reason
        ));
    }
    let robust_weights = robust.robust_weights.as_deref();
    let profile = settings
        .profile
        .then(|| profile_intervals(&fit, data, robust_weights, &settings.least_squares));
    let bootstrap = settings.bootstrap.map(|bootstrap_settings| {
        residual_bootstrap(
            &fit,
            data,
            robust_weights,
            bootstrap_settings,
            &settings.least_squares,
            progress,
        )
    });
    let mut constants = reported_constants(&fit, profile.as_deref(), bootstrap.as_ref());
    for constant in &constants {
        if !constant.determined && fit.converged() && constant.dimension != Dimension::Rate {
            let unbounded = constant
                .ci95_profile
                .is_some_and(|[lo, hi]| lo.is_none() || hi.is_none());
            warnings.push(format!(
                "{} is not determined by these data{}.",
                constant.name,
                if unbounded {
                    " (its profile-likelihood interval is open: the data are consistent with it being \
                     arbitrarily large or the interval end lies beyond the search)"
                } else {
                    " (relative standard error above 50%, or not positive)"
                }
            ));
        }
    }
    if fit.kind == RateModelKind::Morrison {
        warnings.push(
            "Ki_app from the Morrison equation is an apparent constant at the assay's [S]; for a \
             competitive inhibitor Ki = Ki_app / (1 + S/Km)."
                .to_string(),
        );
    }
    if fit.kind == RateModelKind::Ic50 {
        if let Some(km) = settings.cheng_prusoff_km {
            match cheng_prusoff(&constants, data, km) {
                Ok(ki) => {
                    constants.push(ki);
                    warnings.push(CHENG_PRUSOFF_ASSUMPTION.to_string());
                }
                Err(reason) => warnings.push(format!("No Cheng-Prusoff Ki: {reason}.")),
            }
        }
    }
    if !robust.downweighted_points.is_empty() {
        warnings.push(format!(
            "The robust (Huber) fit down-weighted {} point(s); check them for outliers.",
            robust.downweighted_points.len()
        ));
    }
    Ok(ModelAnalysis {
        requested: settings.request,
        model: fit.kind,
        equation: fit.kind.equation(),
        constants,
        n,
        rss: fit.fit.rss,
        residual_sd: fit.fit.residual_standard_deviation,
        converged: fit.converged(),
        weighting: settings.weighting,
        loss: settings.loss,
        downweighted_points: robust.downweighted_points,
        models_tried: reports,
        f_tests,
        choice,
        bootstrap,
        warnings,
        fit: Some(fit),
    })
}

/// The label every Cheng-Prusoff Ki carries.
pub const CHENG_PRUSOFF_ASSUMPTION: &str = "Ki_cheng_prusoff = IC50 / (1 + S/Km) is an assumption, not a \
     measurement: it holds only for a competitive inhibitor under rapid equilibrium with [I] much \
     above [E] (no tight binding), with the given Km and the assay's S taken as exact.";

fn cheng_prusoff(
    constants: &[ConstantEstimate],
    data: &RateData,
    km: f64,
) -> Result<ConstantEstimate, String> {
    if !(km.is_finite() && km > 0.0) {
        return Err(format!("Km must be a positive number, not {km}"));
    }
    let levels = RateData::distinct(&data.substrate);
    if levels.len() != 1 {
        return Err(format!(
            "the IC50 series has {} substrate concentrations; the conversion needs exactly one",
            levels.len()
        ));
    }
    let ic50 = constants
        .iter()
        .find(|c| c.name == "IC50")
        .ok_or_else(|| "no IC50 was fitted".to_string())?;
    let divisor = 1.0 + levels[0] / km;
    let scale = |x: f64| x / divisor;
    Ok(ConstantEstimate {
        name: "Ki_cheng_prusoff".to_string(),
        value: scale(ic50.value),
        dimension: Dimension::Inhibitor,
        se: ic50.se.map(scale),
        ci95: ic50.ci95.map(|[lo, hi]| [scale(lo), scale(hi)]),
        ci95_profile: ic50.ci95_profile.map(|[lo, hi]| [lo.map(scale), hi.map(scale)]),
        ci95_bootstrap: ic50.ci95_bootstrap.map(|[lo, hi]| [scale(lo), scale(hi)]),
        determined: ic50.determined,
    })
}

fn choice_text(request: ModelRequest, reports: &[CandidateReport], chosen: usize, tests: &[FTest]) -> String {
    let chosen_model = reports[chosen].model;
    match request {
        ModelRequest::Fixed(kind) if kind == chosen_model => format!("{kind} as requested"),
        ModelRequest::Fixed(kind) => format!("{kind} was requested and collapsed to {chosen_model}"),
        ModelRequest::Auto => {
            let mut text = match reports[chosen].delta_aicc {
                Some(delta) if reports[chosen].eligible && delta == 0.0 => format!("{chosen_model}: lowest AICc"),
                Some(delta) if reports[chosen].eligible => format!(
                    "{chosen_model}: fewest parameters within {PARSIMONY_DELTA_AICC} AICc units of the lowest \
                     (delta AICc {delta:.2}; parsimony)"
                ),
                _ => format!("{chosen_model}: no model could be preferred"),
            };
            let runner_up = reports
                .iter()
                .enumerate()
                .filter(|(index, r)| *index != chosen && r.eligible)
                .filter_map(|(_, r)| r.delta_aicc.map(|d| (r.model, d)))
                .min_by(|a, b| a.1.total_cmp(&b.1));
            if let Some((model, delta)) = runner_up {
                text.push_str(&format!("; next {model} at delta AICc {delta:.2}"));
                if delta < 2.0 {
                    text.push_str(" (under 2: the data hardly tell them apart)");
                }
            }
            if let Some(weight) = reports[chosen].akaike_weight {
                text.push_str(&format!("; Akaike weight {weight:.3}"));
            }
            for test in tests
                .iter()
                .filter(|t| t.simpler == chosen_model || t.fuller == chosen_model)
            {
                text.push_str(&format!(
                    "; F test {} vs {}: F = {:.3}, p = {:.3e}",
                    test.simpler, test.fuller, test.f, test.p_value
                ));
            }
            text
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::models::RateModel;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;
    use rand_distr::{Distribution, Normal};

    /// An [S] x [I] matrix: 7 substrate levels (0.2 to 8 Km) by 5 inhibitor levels (0 to 8 Ki), in
    /// duplicate, 70 points; noise 2% of Vmax (realistic for plate rates, common practice).
    fn inhibition_matrix(kind: RateModelKind, truth: &[f64], seed: u64) -> RateData {
        let km = truth[1];
        let ki = 10.0;
        let mut substrate = Vec::new();
        let mut inhibitor = Vec::new();
        for s in [0.2, 0.4, 0.8, 1.6, 3.2, 6.4, 8.0] {
            for i in [0.0, 0.5, 1.0, 2.0, 8.0] {
                for _ in 0..2 {
                    substrate.push(s * km);
                    inhibitor.push(i * ki);
                }
            }
        }
        let n = substrate.len();
        let mut data =
            RateData::new(substrate, inhibitor, vec![0.0; n], None, Weighting::None, None).unwrap();
        let clean = RateModel {
            kind,
            data: &data,
            extra_weights: None,
        }
        .predictions(truth);
        let mut generator = ChaCha8Rng::seed_from_u64(seed);
        let noise = Normal::new(0.0, 0.02 * truth[0]).unwrap();
        data.rate = clean.iter().map(|v| v + noise.sample(&mut generator)).collect();
        data
    }

    fn quick_settings() -> ModelSettings {
        ModelSettings {
            profile: false,
            ..ModelSettings::default()
        }
    }

    fn constant<'a>(analysis: &'a ModelAnalysis, name: &str) -> &'a ConstantEstimate {
        analysis.constants.iter().find(|c| c.name == name).unwrap()
    }

    #[test]
    fn f_test_p_value_is_the_upper_tail() {
        // F(1, 10) upper 5% point is 4.9646 (standard F tables, from memory): with RSS_f/(n - p_f)
        // = 10/10 = 1 and an RSS drop of 4.9646 on one degree of freedom, p must be 0.05.
        let exact = extra_sum_of_squares_test(
            14,
            (RateModelKind::Competitive, 3, 10.0 + 4.9646),
            (RateModelKind::Mixed, 4, 10.0),
        )
        .unwrap();
        assert_eq!(exact.degrees_of_freedom, [1, 10]);
        assert!((exact.f - 4.9646).abs() < 1e-9);
        assert!((exact.p_value - 0.05).abs() < 1e-4, "{}", exact.p_value);
    }

    #[test]
    fn each_simulated_mechanism_is_identified_and_its_constants_recovered() {
        // Truth: Vmax 10, Km 50, Ki 10 (and Ki' 10 or 40); tolerances 20% on Ki, Ki' (a stated
        // tolerance at 2% noise on 70 points; common practice for global inhibition fits).
        let cases: [(RateModelKind, Vec<f64>); 4] = [
            (RateModelKind::Competitive, vec![10.0, 50.0, 0.1]),
            (RateModelKind::Uncompetitive, vec![10.0, 50.0, 0.1]),
            (RateModelKind::Noncompetitive, vec![10.0, 50.0, 0.1]),
            (RateModelKind::Mixed, vec![10.0, 50.0, 0.1, 0.025]),
        ];
        for (kind, truth) in cases {
            for seed in 1..=3 {
                let data = inhibition_matrix(kind, &truth, seed);
                let analysis = analyse_rates(&data, &quick_settings(), &mut |_, _| {}).unwrap();
                assert_eq!(analysis.model, kind, "seed {seed}: {}", analysis.choice);
                let ki_name = if kind == RateModelKind::Uncompetitive {
                    "Ki_prime"
                } else {
                    "Ki"
                };
                let expected = 1.0 / truth[2];
                let ki = constant(&analysis, ki_name);
                assert!(
                    (ki.value / expected - 1.0).abs() < 0.2,
                    "{kind} seed {seed}: {ki:?}"
                );
                if kind == RateModelKind::Mixed {
                    let ki_prime = constant(&analysis, "Ki_prime");
                    assert!((ki_prime.value / 40.0 - 1.0).abs() < 0.2, "{ki_prime:?}");
                }
                assert!(analysis.models_tried.len() == 5);
            }
        }
    }

    #[test]
    fn a_mixed_fit_on_competitive_data_is_reported_as_competitive() {
        // Noiseless competitive data: the mixed fit's 1/Ki' goes to 0.
        let truth = [10.0, 50.0, 0.1];
        let mut data = inhibition_matrix(RateModelKind::Competitive, &truth, 1);
        data.rate = RateModel {
            kind: RateModelKind::Competitive,
            data: &data,
            extra_weights: None,
        }
        .predictions(&truth)
        .iter()
        .zip(0..)
        .map(|(v, i)| v * (1.0 + 1e-4 * ((i % 3) as f64 - 1.0)))
        .collect();
        let settings = ModelSettings {
            request: ModelRequest::Fixed(RateModelKind::Mixed),
            ..quick_settings()
        };
        let analysis = analyse_rates(&data, &settings, &mut |_, _| {}).unwrap();
        assert_eq!(analysis.model, RateModelKind::Competitive, "{}", analysis.choice);
        assert!(analysis.warnings.iter().any(|w| w.contains("collapsed")));
        assert!(analysis.constants.iter().all(|c| c.name != "Ki_prime"));
    }

    #[test]
    fn auto_prefers_michaelis_menten_without_inhibitor_effects_and_substrate_inhibition_when_present() {
        let substrate: Vec<f64> = [5.0, 10.0, 20.0, 40.0, 80.0, 160.0, 320.0, 640.0, 1280.0]
            .iter()
            .flat_map(|&s| [s, s, s])
            .collect();
        let n = substrate.len();
        let mut generator = ChaCha8Rng::seed_from_u64(11);
        let noise = Normal::new(0.0, 0.1).unwrap();
        let mm: Vec<f64> = substrate
            .iter()
            .map(|s| 10.0 * s / (50.0 + s) + noise.sample(&mut generator))
            .collect();
        let si: Vec<f64> = substrate
            .iter()
            .map(|s| 10.0 * s / (50.0 + s * (1.0 + s / 300.0)) + noise.sample(&mut generator))
            .collect();
        let plain = RateData::new(substrate.clone(), vec![], mm, None, Weighting::None, None).unwrap();
        let inhibited = RateData::new(substrate, vec![], si, None, Weighting::None, None).unwrap();
        let settings = quick_settings();
        let first = analyse_rates(&plain, &settings, &mut |_, _| {}).unwrap();
        assert_eq!(first.model, RateModelKind::MichaelisMenten, "{}", first.choice);
        let second = analyse_rates(&inhibited, &settings, &mut |_, _| {}).unwrap();
        assert_eq!(
            second.model,
            RateModelKind::SubstrateInhibition,
            "{}",
            second.choice
        );
        let ksi = constant(&second, "Ksi");
        assert!((ksi.value / 300.0 - 1.0).abs() < 0.25, "{ksi:?}");
        assert_eq!(first.n, n);
    }

    #[test]
    fn no_model_is_preferred_on_fewer_points_than_parameters_plus_two() {
        // 5 points: Michaelis-Menten (k = 2) may be preferred, the 3- and 4-parameter models not.
        let data = RateData::new(
            vec![10.0, 20.0, 40.0, 80.0, 160.0],
            vec![],
            vec![1.7, 2.9, 4.4, 6.2, 7.5],
            None,
            Weighting::None,
            None,
        )
        .unwrap();
        let analysis = analyse_rates(&data, &quick_settings(), &mut |_, _| {}).unwrap();
        for report in &analysis.models_tried {
            assert_eq!(
                report.eligible,
                report.n_parameters + 2 <= 5 && report.converged,
                "{report:?}"
            );
        }
        assert_eq!(analysis.model, RateModelKind::MichaelisMenten);
    }

    #[test]
    fn ic50_with_cheng_prusoff_is_labelled_an_assumption() {
        let inhibitor: Vec<f64> = [0.0, 0.1, 0.3, 1.0, 3.0, 10.0, 30.0, 100.0]
            .iter()
            .flat_map(|&i| [i, i])
            .collect();
        let n = inhibitor.len();
        let mut generator = ChaCha8Rng::seed_from_u64(5);
        let noise = Normal::new(0.0, 0.1).unwrap();
        let rate: Vec<f64> = inhibitor
            .iter()
            .map(|i| 0.3 + 9.7 / (1.0 + (i / 2.0f64).powf(1.1)) + noise.sample(&mut generator))
            .collect();
        let data = RateData::new(vec![100.0; n], inhibitor, rate, None, Weighting::None, None).unwrap();
        let settings = ModelSettings {
            request: ModelRequest::Fixed(RateModelKind::Ic50),
            cheng_prusoff_km: Some(50.0),
            ..ModelSettings::default()
        };
        let analysis = analyse_rates(&data, &settings, &mut |_, _| {}).unwrap();
        let ic50 = constant(&analysis, "IC50");
        assert!((ic50.value / 2.0 - 1.0).abs() < 0.2, "{ic50:?}");
        let ki = constant(&analysis, "Ki_cheng_prusoff");
        assert!((ki.value - ic50.value / 3.0).abs() < 1e-12);
        assert!(analysis.warnings.iter().any(|w| w == CHENG_PRUSOFF_ASSUMPTION));
        let [lo, hi] = ic50.ci95_profile.unwrap();
        assert!(lo.unwrap() < ic50.value && ic50.value < hi.unwrap());
    }

    #[test]
    fn tight_binding_series_recovers_ki_app_with_the_morrison_equation() {
        // Invented titration: [E] = 10 nM, Ki_app = 2 nM (so [E] is five times Ki_app and the
        // classical hyperbola would fail), v0 = 1, 2% noise; Ki_app within 25% (stated tolerance).
        let inhibitor: Vec<f64> = [0.0, 2.0, 4.0, 6.0, 8.0, 10.0, 12.0, 15.0, 20.0, 30.0, 50.0]
            .iter()
            .flat_map(|&i| [i, i, i])
            .collect();
        let n = inhibitor.len();
        let mut data = RateData::new(
            vec![100.0; n],
            inhibitor,
            vec![0.0; n],
            None,
            Weighting::None,
            Some(10.0),
        )
        .unwrap();
        let clean = RateModel {
            kind: RateModelKind::Morrison,
            data: &data,
            extra_weights: None,
        }
        .predictions(&[1.0, 2.0]);
        let mut generator = ChaCha8Rng::seed_from_u64(21);
        let noise = Normal::new(0.0, 0.02).unwrap();
        data.rate = clean.iter().map(|v| v + noise.sample(&mut generator)).collect();
        let settings = ModelSettings {
            request: ModelRequest::Fixed(RateModelKind::Morrison),
            ..ModelSettings::default()
        };
        let analysis = analyse_rates(&data, &settings, &mut |_, _| {}).unwrap();
        let ki_app = constant(&analysis, "Ki_app");
        assert!((ki_app.value / 2.0 - 1.0).abs() < 0.25, "{ki_app:?}");
        assert!(ki_app.determined);
        // auto on a single-[S] series with [E] known tries the logistic and Morrison only.
        let auto = analyse_rates(&data, &quick_settings(), &mut |_, _| {}).unwrap();
        let tried: Vec<RateModelKind> = auto.models_tried.iter().map(|m| m.model).collect();
        assert_eq!(tried, vec![RateModelKind::Ic50, RateModelKind::Morrison]);
        assert_eq!(auto.model, RateModelKind::Morrison, "{}", auto.choice);
    }

    #[test]
    fn an_ordinary_micromolar_inhibitor_is_not_called_tight_binding() {
        // Invented series: [E] = 0.01 uM, a classical inhibitor with IC50 = 5 uM (Hill slope 1,
        // full inhibition), 2% noise. Morrison has fewer parameters than the logistic and fits
        // as well (it reduces to the hyperbola when Ki_app >> [E]); auto must still report the
        // dose-response curve.
        let inhibitor: Vec<f64> = [0.0, 0.3, 1.0, 2.0, 4.0, 8.0, 16.0, 32.0, 64.0, 128.0]
            .iter()
            .flat_map(|&i| [i, i, i])
            .collect();
        let mut generator = ChaCha8Rng::seed_from_u64(5);
        let noise = Normal::new(0.0, 0.02).unwrap();
        let rate: Vec<f64> = inhibitor
            .iter()
            .map(|i| 1.0 / (1.0 + i / 5.0) + noise.sample(&mut generator))
            .collect();
        let n = inhibitor.len();
        let data = RateData::new(vec![100.0; n], inhibitor, rate, None, Weighting::None, Some(0.01)).unwrap();
        let auto = analyse_rates(&data, &quick_settings(), &mut |_, _| {}).unwrap();
        assert_eq!(auto.model, RateModelKind::Ic50, "{}", auto.choice);
        let morrison = auto
            .models_tried
            .iter()
            .find(|m| m.model == RateModelKind::Morrison)
            .expect("Morrison tried");
        assert!(!morrison.eligible, "{morrison:?}");
        assert!(
            morrison
                .note
                .as_deref()
                .unwrap_or("")
                .contains("not tight binding"),
            "{morrison:?}"
        );
        let ic50 = constant(&auto, "IC50");
        assert!((ic50.value / 5.0 - 1.0).abs() < 0.15, "{ic50:?}");
    }

    /// Coverage of the profile-likelihood and asymptotic 95% intervals of Ki for a competitive
    /// inhibitor: 200 simulated matrices with known truth. Accepted band 181..=199 of 200 (95% +- 3
    /// binomial standard deviations, sqrt(200 0.95 0.05) = 3.08; common practice for a coverage check).
    #[test]
    fn profile_and_asymptotic_intervals_cover_the_truth_about_95_percent_of_the_time() {
        let truth = [10.0, 50.0, 0.1];
        let settings = ModelSettings {
            request: ModelRequest::Fixed(RateModelKind::Competitive),
            ..ModelSettings::default()
        };
        let mut profile_hits = 0;
        let mut asymptotic_hits = 0;
        for seed in 0..200 {
            let data = inhibition_matrix(RateModelKind::Competitive, &truth, 1000 + seed);
            let analysis = analyse_rates(&data, &settings, &mut |_, _| {}).unwrap();
            let ki = constant(&analysis, "Ki");
            if let Some([Some(lo), Some(hi)]) = ki.ci95_profile {
                if lo <= 10.0 && 10.0 <= hi {
                    profile_hits += 1;
                }
            }
            if let Some([lo, hi]) = ki.ci95 {
                if lo <= 10.0 && 10.0 <= hi {
                    asymptotic_hits += 1;
                }
            }
        }
        eprintln!("Ki coverage over 200 sets: profile {profile_hits}, asymptotic {asymptotic_hits}");
        assert!(
            (181..=199).contains(&profile_hits),
            "profile coverage {profile_hits}/200"
        );
        assert!(
            (181..=199).contains(&asymptotic_hits),
            "asymptotic coverage {asymptotic_hits}/200"
        );
    }
}
