//! The no-enzyme background of each sample: the rate the substrate shows without enzyme
//! (spontaneous hydrolysis, a contaminating activity, drift the blanks do not share), subtracted from
//! the sample's rate.
//!
//! Rule (a rule of this program; first-order spontaneous turnover is common practice):
//! 1. Controls serve a sample when every factor (and the inhibitor) they state matches the
//!    sample's (an empty factor on a control matches every value). Controls whose rate is not to be
//!    trusted (any flag that leaves a well out, see `Flag::excludes`) are not used, and a sample left
//!    without a background because of them is told which controls and why.
//! 2. Where serving controls cover two or more [S] levels, the background is modelled as first order
//!    in S for every level: `v_bg = k S` by least squares through the origin, or `a + k S` when the
//!    intercept differs from 0 by a two-sided t test at the 1% level; the prediction at the sample's
//!    [S] carries its standard error from the fit. When a blank was subtracted (and three or more
//!    controls allow it), the intercept is always kept: the blank's slope error moves every
//!    control's rate alike, so it is an intercept in their rates by construction, whatever the test
//!    says. Kept, the intercept takes that error up exactly and it cancels from every sample's
//!    background-corrected rate; dropped only when the test misses it, the law would carry part of
//!    it into the slope, and the error's variance would then be owed only on plates where it
//!    happened to be small (selection by the test). The coverage study measured the difference
//!    (DEVELOPERS.md, "Initial-rate estimators, weighting and coverage"). Pooling every control
//!    into one or two constants keeps the background's own noise out of each sample's rate (a
//!    single control's slope is as noisy as the sample's, and subtracted from every replicate and
//!    every read of a progress curve it would add an error they all share).
//! 3. When the controls' rates bend with [S] (a quadratic term added to the law differs from 0 by
//!    a two-sided t test at the 1% level, on the controls' own scatter about the quadratic: a
//!    control's reads cannot show its own well's errors, so its slope's standard error cannot
//!    judge the law), or they stand at one [S] only, the background at a level with controls is
//!    their mean, with its standard error (the SEM of two or more, the slope's SE of one).
//! 4. Otherwise the sample gets no background, and the plate's warnings name it.
//!
//! Subtraction: `v = v_well - v_bg`, `se = sqrt(se_well^2 + se_bg^2)`. A first-order law is
//! evaluated at the substrate the sample has left at the middle of its window, not at its S0
//! (`Background::at_substrate_left`): the controls convert almost none of theirs, but the
//! spontaneous turnover in a sample acts on what its enzyme leaves. At S0 it put kcat 0.08-0.13%
//! low on the coverage study's realistic design (DEVELOPERS.md). A mean of controls at the
//! sample's level says nothing of how the background depends on [S] and is subtracted as it is.

use super::well::Flag;
use crate::core::plate::WellId;
use crate::core::stats::{summary, t_critical};
use crate::layout::WellSetup;

/// Level of the t test that keeps an intercept in the background model.
pub const INTERCEPT_ALPHA: f64 = 0.01;

/// One no-enzyme control as the background model sees it.
#[derive(Debug, Clone, PartialEq)]
pub struct Control<'a> {
    /// The well.
    pub well: WellId,
    /// What the layout says of it.
    pub setup: &'a WellSetup,
    /// Its slope and the slope's standard error, when it has a window.
    pub slope: Option<(f64, f64)>,
    /// Its flags.
    pub flags: Vec<Flag>,
}

/// The background a sample gets.
#[derive(Debug, Clone, PartialEq)]
pub enum Background {
    /// Controls at the sample's own [S]: their mean.
    Matched {
        /// The background rate.
        rate: f64,
        /// Its standard error.
        se: f64,
        /// Controls averaged.
        controls: usize,
    },
    /// The first-order model over the controls' [S] levels.
    Modelled {
        /// The model itself (shared by every sample its controls serve).
        law: BackgroundLaw,
        /// The background rate at the sample's [S].
        rate: f64,
        /// Its standard error.
        se: f64,
        /// Controls in the model.
        controls: usize,
        /// Distinct [S] levels they cover.
        levels: usize,
        /// Whether the model kept an intercept.
        with_intercept: bool,
        /// The [S] at which `rate` is the law's: the sample's S0, or the substrate its window
        /// has left ([`Background::at_substrate_left`]).
        substrate: f64,
    },
    /// No background.
    None(NoBackground),
}

/// A first-order background model: `v_bg = intercept + slope S`, with the covariance of
/// (slope, intercept) (the intercept and its variances are 0 for a model through the origin).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BackgroundLaw {
    /// Rate per unit S, 1/s.
    pub slope: f64,
    /// Rate at S = 0.
    pub intercept: f64,
    /// Covariance `[[var slope, cov], [cov, var intercept]]`.
    pub covariance: [[f64; 2]; 2],
    /// Degrees of freedom of the residual variance that scales it (controls - parameters).
    pub degrees_of_freedom: f64,
}

/// Why a sample has no background.
#[derive(Debug, Clone, PartialEq)]
pub enum NoBackground {
    /// No control serves the sample.
    NoControls,
    /// Controls serve it, but every one is flagged.
    ControlsFlagged(Vec<(WellId, Vec<Flag>)>),
    /// No first-order model can be made (controls at one other [S] only, or rates that bend with
    /// [S], rule 3) and no control stands at the sample's [S].
    NoControlAtLevel,
}

impl Background {
    /// Whether subtracting this background also removes the blank's slope error from the sample.
    /// The blank is subtracted from the controls as from the samples, so an error `b` in the
    /// blank's slope is in every control's rate alike: a mean of controls carries `b` whole, and a
    /// law with an intercept takes it up exactly in the intercept (least squares with an
    /// intercept is equivariant under a shift), so the sample's rate less its background is free
    /// of `b`. A law through the origin takes up only part of it.
    pub fn cancels_blank_slope(&self) -> bool {
        matches!(
            self,
            Background::Matched { .. }
                | Background::Modelled {
                    with_intercept: true,
                    ..
                }
        )
    }

    /// The background at the substrate a sample has left over its window, `substrate_left`
    /// (a concentration in the law's unit): a first-order law's spontaneous part `k S` acts on
    /// what the enzyme leaves, not on the S0 its controls (which convert almost none) were read
    /// at. The rate becomes `a + k S'` with variance `var a + 2 S' cov + S'^2 var k`. A mean of
    /// controls says nothing of how it depends on [S], and stands. Nothing changes for a
    /// `substrate_left` that is not finite or is negative.
    pub fn at_substrate_left(&self, substrate_left: f64) -> Background {
        match self {
            Background::Modelled {
                law,
                controls,
                levels,
                with_intercept,
                ..
            } if substrate_left.is_finite() && substrate_left >= 0.0 => {
                let [[var_slope, covariance], [_, var_intercept]] = law.covariance;
                let variance = var_intercept
                    + 2.0 * substrate_left * covariance
                    + substrate_left * substrate_left * var_slope;
                Background::Modelled {
                    law: *law,
                    rate: law.intercept + law.slope * substrate_left,
                    se: variance.max(0.0).sqrt(),
                    controls: *controls,
                    levels: *levels,
                    with_intercept: *with_intercept,
                    substrate: substrate_left,
                }
            }
            other => other.clone(),
        }
    }

    /// The [S] at which the background's first-order law is evaluated, for a modelled one.
    pub fn law_substrate(&self) -> Option<f64> {
        match self {
            Background::Modelled { substrate, .. } => Some(*substrate),
            _ => None,
        }
    }

    /// The rate and its standard error, when there is a background.
    pub fn rate(&self) -> Option<(f64, f64)> {
        match self {
            Background::Matched { rate, se, .. } | Background::Modelled { rate, se, .. } => {
                Some((*rate, *se))
            }
            Background::None(_) => None,
        }
    }
}

fn same_amount(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-9 * a.abs().max(b.abs())
}

/// Whether a control serves a sample regardless of [S]: every factor (and the inhibitor) either
/// equal or left empty on the control.
fn serves(control: &WellSetup, sample: &WellSetup) -> bool {
    let inhibitor_ok = match (control.inhibitor, sample.inhibitor) {
        (None, _) => true,
        (Some(a), Some(b)) => same_amount(a, b),
        (Some(a), None) => a == 0.0,
    };
    let factors_ok = control.factors.iter().all(|(name, value)| {
        value.is_empty()
            || sample
                .factors
                .get(name)
                .is_some_and(|sample_value| sample_value == value)
    });
    inhibitor_ok && factors_ok
}

/// The background of one sample from the plate's no-enzyme controls (module docs);
/// `blank_subtracted` keeps the first-order law's intercept (rule 2).
pub fn background_for(sample: &WellSetup, controls: &[Control], blank_subtracted: bool) -> Background {
    let serving: Vec<&Control> = controls
        .iter()
        .filter(|control| serves(control.setup, sample))
        .collect();
    if serving.is_empty() {
        return Background::None(NoBackground::NoControls);
    }
    let usable: Vec<(f64, f64, f64)> = serving
        .iter()
        .filter(|control| !control.flags.iter().any(|flag| flag.excludes()))
        .filter_map(|control| {
            let (slope, se) = control.slope?;
            Some((control.setup.substrate?, slope, se))
        })
        .collect();
    if usable.is_empty() {
        return Background::None(NoBackground::ControlsFlagged(
            serving
                .iter()
                .map(|control| (control.well, control.flags.clone()))
                .collect(),
        ));
    }
    let Some(substrate) = sample.substrate else {
        return Background::None(NoBackground::NoControls);
    };
    if let Some(modelled) = first_order_model(&usable, substrate, blank_subtracted) {
        return modelled;
    }
    let at_level: Vec<(f64, f64)> = usable
        .iter()
        .filter(|(s, _, _)| same_amount(*s, substrate))
        .map(|(_, slope, se)| (*slope, *se))
        .collect();
    if !at_level.is_empty() {
        let slopes: Vec<f64> = at_level.iter().map(|(slope, _)| *slope).collect();
        if let Some(stats) = summary(&slopes) {
            // One control: its own slope's standard error stands for the background's.
            let se = stats.sem().unwrap_or(at_level[0].1);
            return Background::Matched {
                rate: stats.mean,
                se,
                controls: at_level.len(),
            };
        }
    }
    Background::None(NoBackground::NoControlAtLevel)
}

/// Level of the lack-of-fit test that rejects the first-order background model.
pub const LACK_OF_FIT_ALPHA: f64 = 0.01;

/// Whether the controls' rates bend with [S] (module docs, rule 3): the quadratic term's t
/// statistic ([`curvature_t`]) beyond the two-sided critical value at [`LACK_OF_FIT_ALPHA`].
fn bends_with_substrate(controls: &[(f64, f64, f64)], with_intercept: bool) -> bool {
    curvature_t(controls, with_intercept).is_some_and(|(t, dof)| t.abs() > t_critical(LACK_OF_FIT_ALPHA, dof))
}

/// The t statistic of the quadratic term `c` of `v = k S + c S^2` (or `a + k S + c S^2` with an
/// intercept) fitted to the controls' `(S, v, se)` by least squares, with its degrees of freedom
/// `n - p`: `c / sqrt(s^2 [(X'X)^-1]_cc)`, `s^2` the controls' own scatter about the quadratic.
/// That scatter holds each control's own well errors (a well's slow drift, its pipetted S0 times
/// the spontaneous rate), which its reads cannot show, so the test asks only whether the rates
/// bend. Tested against the reads' standard errors instead (a chi-square test of the line's
/// residuals), well errors alone rejected a straight law on a third of the coverage study's
/// realistic plates, whose samples then took one control's slope with a standard error blind to
/// them (DEVELOPERS.md). `None` without a residual degree of freedom; a t of 0 when the quadratic
/// term moves no rate by more than 1e-9 of the largest (an exact line's rounding); an infinite t
/// for rates exactly on a bent curve.
fn curvature_t(controls: &[(f64, f64, f64)], with_intercept: bool) -> Option<(f64, usize)> {
    let n = controls.len();
    let columns = if with_intercept { 3 } else { 2 };
    let dof = n.checked_sub(columns).filter(|dof| *dof > 0)?;
    // [S] over its largest keeps the normal equations well conditioned (t does not depend on it).
    let scale = controls.iter().map(|(s, _, _)| s.abs()).fold(0.0, f64::max);
    if scale <= 0.0 || !scale.is_finite() {
        return None;
    }
    let first_power = if with_intercept { 0 } else { 1 };
    let x = nalgebra::DMatrix::from_fn(n, columns, |row, column| {
        (controls[row].0 / scale).powi((first_power + column) as i32)
    });
    let y = nalgebra::DVector::from_iterator(n, controls.iter().map(|(_, v, _)| *v));
    let inverse = (x.transpose() * &x).try_inverse()?;
    let beta = &inverse * x.transpose() * &y;
    let residuals = &y - &x * &beta;
    let variance = residuals.dot(&residuals) / dof as f64;
    let curvature = beta[columns - 1];
    if curvature.abs() <= 1e-9 * y.amax() {
        return Some((0.0, dof));
    }
    let standard_error = (variance * inverse[(columns - 1, columns - 1)]).sqrt();
    // Controls exactly on a bent curve (no scatter at all) bend beyond any doubt: t is infinite.
    let t = curvature / standard_error;
    (!t.is_nan()).then_some((t, dof))
}

/// The first-order background model at `substrate` (module docs, rule 2); `None` with fewer than
/// two [S] levels or too few controls for a standard error. `keep_intercept` keeps the intercept
/// without testing it (a blank was subtracted).
fn first_order_model(
    controls: &[(f64, f64, f64)],
    substrate: f64,
    keep_intercept: bool,
) -> Option<Background> {
    let mut levels: Vec<f64> = controls.iter().map(|(s, _, _)| *s).collect();
    levels.sort_by(f64::total_cmp);
    levels.dedup_by(|a, b| same_amount(*a, *b));
    let n = controls.len();
    if levels.len() < 2 || n < 2 {
        return None;
    }
    let (s, v): (Vec<f64>, Vec<f64>) = controls.iter().map(|(s, v, _)| (*s, *v)).unzip();
    // Through the origin: k = sum(S v) / sum(S^2), var(k) = s^2 / sum(S^2), s^2 on n - 1.
    let sum_ss: f64 = s.iter().map(|x| x * x).sum();
    let sum_sv: f64 = s.iter().zip(&v).map(|(x, y)| x * y).sum();
    if sum_ss <= 0.0 {
        return None;
    }
    let k = sum_sv / sum_ss;
    let rss_origin: f64 = s.iter().zip(&v).map(|(x, y)| (y - k * x).powi(2)).sum();
    let origin_variance = if n > 1 { rss_origin / (n - 1) as f64 } else { 0.0 };
    // With an intercept (needs three controls for a residual variance): keep it only when the data
    // demand it.
    if n >= 3 {
        let mean_s = s.iter().sum::<f64>() / n as f64;
        let mean_v = v.iter().sum::<f64>() / n as f64;
        let sxx: f64 = s.iter().map(|x| (x - mean_s).powi(2)).sum();
        if sxx > 0.0 {
            let slope = s
                .iter()
                .zip(&v)
                .map(|(x, y)| (x - mean_s) * (y - mean_v))
                .sum::<f64>()
                / sxx;
            let intercept = mean_v - slope * mean_s;
            let rss: f64 = s
                .iter()
                .zip(&v)
                .map(|(x, y)| (y - intercept - slope * x).powi(2))
                .sum();
            let variance = rss / (n - 2) as f64;
            let var_intercept = variance * (1.0 / n as f64 + mean_s * mean_s / sxx);
            let kept = var_intercept > 0.0
                && (keep_intercept
                    || (intercept / var_intercept.sqrt()).abs() > t_critical(INTERCEPT_ALPHA, n - 2));
            if kept {
                if bends_with_substrate(controls, true) {
                    return None;
                }
                let rate = intercept + slope * substrate;
                let se = (variance * (1.0 / n as f64 + (substrate - mean_s).powi(2) / sxx)).sqrt();
                let var_slope = variance / sxx;
                let law = BackgroundLaw {
                    slope,
                    intercept,
                    covariance: [
                        [var_slope, -mean_s * var_slope],
                        [-mean_s * var_slope, var_intercept],
                    ],
                    degrees_of_freedom: (n - 2) as f64,
                };
                return Some(Background::Modelled {
                    law,
                    rate,
                    se,
                    controls: n,
                    levels: levels.len(),
                    with_intercept: true,
                    substrate,
                });
            }
        }
    }
    if bends_with_substrate(controls, false) {
        return None;
    }
    let var_k = origin_variance / sum_ss;
    Some(Background::Modelled {
        law: BackgroundLaw {
            slope: k,
            intercept: 0.0,
            covariance: [[var_k, 0.0], [0.0, 0.0]],
            degrees_of_freedom: (n - 1) as f64,
        },
        rate: k * substrate,
        se: substrate * (origin_variance / sum_ss).sqrt(),
        controls: n,
        levels: levels.len(),
        with_intercept: false,
        substrate,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::cells::{Position, Source};
    use std::collections::BTreeMap;

    fn setup(substrate: f64, variant: &str) -> WellSetup {
        let mut factors = BTreeMap::new();
        factors.insert("variant".to_string(), variant.to_string());
        WellSetup {
            role: crate::layout::Role::NoEnzyme,
            substrate: Some(substrate),
            enzyme: None,
            inhibitor: None,
            standard: None,
            factors,
            position: Position {
                source: Source {
                    file: "l.csv".into(),
                    sheet: None,
                },
                row: 1,
                column: None,
            },
        }
    }

    fn control<'a>(well: &str, setup: &'a WellSetup, slope: f64, flags: Vec<Flag>) -> Control<'a> {
        Control {
            well: WellId::parse(well).unwrap(),
            setup,
            slope: Some((slope, 1e-5)),
            flags,
        }
    }

    #[test]
    fn matched_controls_are_averaged() {
        let (a, b) = (setup(100.0, ""), setup(100.0, ""));
        let controls = [control("A1", &a, 2e-3, vec![]), control("A2", &b, 4e-3, vec![])];
        let sample = setup(100.0, "wt");
        match background_for(&sample, &controls, false) {
            Background::Matched { rate, se, controls } => {
                assert!((rate - 3e-3).abs() < 1e-15);
                // SEM of 2e-3 and 4e-3: SD sqrt(2) 1e-3 over sqrt(2).
                assert!((se - 1e-3).abs() < 1e-15);
                assert_eq!(controls, 2);
            }
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn controls_at_other_levels_give_a_first_order_model() {
        // Truth: v_bg = 2e-5 S exactly, controls at the three highest of eight levels only.
        let setups: Vec<WellSetup> = [400.0, 800.0, 1600.0].iter().map(|s| setup(*s, "")).collect();
        let controls: Vec<Control> = setups
            .iter()
            .enumerate()
            .map(|(i, s)| control(["H6", "H7", "H8"][i], s, 2e-5 * s.substrate.unwrap(), vec![]))
            .collect();
        let sample = setup(50.0, "wt");
        match background_for(&sample, &controls, false) {
            Background::Modelled {
                rate,
                levels,
                with_intercept,
                law,
                ..
            } => {
                assert!((rate - 1e-3).abs() < 1e-12, "{rate}");
                assert_eq!(levels, 3);
                assert!(!with_intercept);
                // Through the origin: one parameter from three controls.
                assert_eq!(law.degrees_of_freedom, 2.0);
            }
            other => panic!("{other:?}"),
        }
    }

    /// No-enzyme controls at 100, 200, 400 and 800.
    fn four_control_levels() -> Vec<WellSetup> {
        [100.0, 200.0, 400.0, 800.0]
            .iter()
            .map(|s| setup(*s, ""))
            .collect()
    }

    /// Controls on `v_bg = 1e-3 + 1e-5 S` with a small scatter (the intercept is 100 standard
    /// errors from 0).
    fn controls_with_a_clear_intercept(setups: &[WellSetup]) -> Vec<Control<'_>> {
        let wiggle = [1e-6, -1e-6, -1e-6, 1e-6];
        setups
            .iter()
            .zip(wiggle)
            .map(|(s, w)| control("H1", s, 1e-3 + 1e-5 * s.substrate.unwrap_or(0.0) + w, vec![]))
            .collect()
    }

    #[test]
    fn a_clear_intercept_is_kept() {
        // v_bg = 1e-3 + 1e-5 S with small scatter: the intercept is 100 standard errors from 0.
        let setups = four_control_levels();
        let controls = controls_with_a_clear_intercept(&setups);
        match background_for(&setup(50.0, "wt"), &controls, false) {
            Background::Modelled {
                rate, with_intercept, ..
            } => {
                assert!(with_intercept);
                assert!((rate - 1.5e-3).abs() < 1e-5, "{rate}");
            }
            other => panic!("{other:?}"),
        }
    }

    /// A law evaluated at the substrate a sample has left is the law at that [S]: the same rate
    /// and standard error as a sample whose S0 was that [S] (the prediction's variance
    /// `s^2 (1/n + (S - mean S)^2 / Sxx)` computed the other way, from the law's covariance).
    #[test]
    fn a_law_at_the_substrate_left_is_the_law_at_that_level() {
        let setups = four_control_levels();
        let controls = controls_with_a_clear_intercept(&setups);
        for keep_intercept in [false, true] {
            let at_s0 = background_for(&setup(50.0, "wt"), &controls, keep_intercept);
            let at_level = background_for(&setup(35.0, "wt"), &controls, keep_intercept);
            let moved = at_s0.at_substrate_left(35.0);
            let ((rate, se), (expected_rate, expected_se)) =
                (moved.rate().unwrap(), at_level.rate().unwrap());
            assert!((rate - expected_rate).abs() <= 1e-15, "{rate} vs {expected_rate}");
            assert!((se / expected_se - 1.0).abs() < 1e-9, "{se} vs {expected_se}");
            assert_eq!(moved.law_substrate(), Some(35.0));
            assert_eq!(at_s0.law_substrate(), Some(50.0));
            // Nothing moves for a substrate left that means nothing.
            assert_eq!(at_s0.at_substrate_left(f64::NAN), at_s0);
            assert_eq!(at_s0.at_substrate_left(-1.0), at_s0);
        }
        // A mean of controls stands.
        let matched = Background::Matched {
            rate: 1e-3,
            se: 1e-4,
            controls: 2,
        };
        assert_eq!(matched.at_substrate_left(10.0), matched);
    }

    #[test]
    fn a_subtracted_blank_keeps_the_intercept_the_test_would_drop() {
        // v_bg = 2e-5 S through the origin with scatter: the intercept is not significant, so the
        // test drops it; with a blank subtracted it stays, and the blank's slope error (added to
        // every control alike) lands in the intercept, leaving the slope as it was.
        let levels = [100.0, 200.0, 400.0, 800.0];
        let setups: Vec<WellSetup> = levels.iter().map(|s| setup(*s, "")).collect();
        let wiggle = [1e-5, -1.5e-5, -0.5e-5, 1e-5];
        let blank_error = 4e-4;
        let controls = |offset: f64| -> Vec<Control> {
            setups
                .iter()
                .enumerate()
                .map(|(i, s)| control("H1", s, 2e-5 * levels[i] + wiggle[i] + offset, vec![]))
                .collect()
        };
        match background_for(&setup(50.0, "wt"), &controls(0.0), false) {
            Background::Modelled { with_intercept, .. } => assert!(!with_intercept),
            other => panic!("{other:?}"),
        }
        let law = |offset: f64| match background_for(&setup(50.0, "wt"), &controls(offset), true) {
            Background::Modelled {
                law, with_intercept, ..
            } => {
                assert!(with_intercept);
                law
            }
            other => panic!("{other:?}"),
        };
        let (without, with) = (law(0.0), law(blank_error));
        assert!((with.intercept - without.intercept - blank_error).abs() < 1e-12);
        assert!((with.slope - without.slope).abs() < 1e-15);
        for (row_with, row_without) in with.covariance.iter().zip(&without.covariance) {
            for (a, b) in row_with.iter().zip(row_without) {
                assert!((a - b).abs() <= 1e-9 * b.abs(), "{a} {b}");
            }
        }
    }

    #[test]
    fn flagged_controls_are_named_and_weak_ones_still_serve() {
        let a = setup(100.0, "");
        let noisy = [control("B7", &a, 2e-3, vec![Flag::Noisy])];
        match background_for(&setup(100.0, "wt"), &noisy, false) {
            Background::None(NoBackground::ControlsFlagged(wells)) => {
                assert_eq!(wells[0].0.to_string(), "B7");
            }
            other => panic!("{other:?}"),
        }
        let weak = [control("B7", &a, 1e-7, vec![Flag::Weak])];
        assert!(matches!(
            background_for(&setup(100.0, "wt"), &weak, false),
            Background::Matched { .. }
        ));
        let other_variant = setup(100.0, "mutant");
        let unmatched = [control("B7", &other_variant, 1e-7, vec![])];
        assert_eq!(
            background_for(&setup(100.0, "wt"), &unmatched, false),
            Background::None(NoBackground::NoControls)
        );
    }

    /// The quadratic term's t against the orthogonal-polynomial route: for five equally spaced
    /// levels the quadratic contrast is (2, -1, -2, -1, 2) and the linear (-2, -1, 0, 1, 2)
    /// (the tabled orthogonal polynomial coefficients, Fisher and Yates' tables; common practice,
    /// from memory), so with an intercept `c` is `sum q y / 14`, the residual sum of squares is
    /// `sum (y - mean)^2 - (sum l y)^2 / 10 - (sum q y)^2 / 14` on 2 degrees of freedom, and
    /// `t = sum q y / sqrt(14 s^2)`.
    #[test]
    fn the_curvature_t_is_the_orthogonal_polynomial_contrast() {
        let rates = [1.0e-3, 1.3e-3, 1.9e-3, 2.2e-3, 3.1e-3];
        let controls: Vec<(f64, f64, f64)> = rates
            .iter()
            .enumerate()
            .map(|(i, v)| (100.0 * (i + 1) as f64, *v, 1e-5))
            .collect();
        let quadratic = [2.0, -1.0, -2.0, -1.0, 2.0];
        let linear = [-2.0, -1.0, 0.0, 1.0, 2.0];
        let dot = |a: &[f64]| a.iter().zip(&rates).map(|(a, y)| a * y).sum::<f64>();
        let mean = rates.iter().sum::<f64>() / 5.0;
        let total: f64 = rates.iter().map(|y| (y - mean).powi(2)).sum();
        let rss = total - dot(&linear).powi(2) / 10.0 - dot(&quadratic).powi(2) / 14.0;
        let expected = dot(&quadratic) / (14.0 * rss / 2.0).sqrt();
        let (t, dof) = curvature_t(&controls, true).unwrap();
        assert_eq!(dof, 2);
        approx::assert_relative_eq!(t, expected, max_relative = 1e-9);
        // An exact line has no curvature; too few controls have no test.
        let line: Vec<(f64, f64, f64)> = (1..=5)
            .map(|i| (f64::from(i), 2e-5 * f64::from(i), 1e-6))
            .collect();
        assert_eq!(curvature_t(&line, false).map(|(t, _)| t), Some(0.0));
        assert_eq!(curvature_t(&controls[..3], true), None);
        // Exactly on a parabola, no scatter: it bends beyond doubt.
        let parabola: Vec<(f64, f64, f64)> = (1..=5)
            .map(|i| (f64::from(i), 1e-3 * f64::from(i * i), 1e-6))
            .collect();
        assert!(bends_with_substrate(&parabola, false));
    }

    /// Eight controls on a straight law through the origin, each off it by its own well error
    /// (SD about 5e-6, five times the 1e-6 its reads give its slope): the law stands. Against the
    /// reads' standard errors the residuals' chi-square is far past its 1% point (the test this
    /// replaced rejected the law for it, and the samples took one control each).
    #[test]
    fn well_errors_beyond_the_reads_do_not_reject_a_straight_law() {
        let well_errors = [4e-6, -6e-6, 3e-6, 7e-6, -5e-6, -2e-6, 6e-6, -4e-6];
        let setups: Vec<WellSetup> = (0..8).map(|k| setup(10.0 * 2f64.powi(k), "")).collect();
        let controls: Vec<Control> = setups
            .iter()
            .zip(well_errors)
            .map(|(s, error)| Control {
                well: WellId::parse("G1").unwrap(),
                setup: s,
                slope: Some((2e-6 * s.substrate.unwrap() + error, 1e-6)),
                flags: vec![],
            })
            .collect();
        let usable: Vec<(f64, f64, f64)> = controls
            .iter()
            .map(|c| (c.setup.substrate.unwrap(), c.slope.unwrap().0, 1e-6))
            .collect();
        let k = usable.iter().map(|(s, v, _)| s * v).sum::<f64>()
            / usable.iter().map(|(s, _, _)| s * s).sum::<f64>();
        let chi_square: f64 = usable.iter().map(|(s, v, se)| ((v - k * s) / se).powi(2)).sum();
        // The chi-square distribution's 99th percentile on 7 degrees of freedom is 18.48 (standard
        // tables).
        assert!(chi_square > 18.48, "{chi_square}");
        match background_for(&setup(40.0, "wt"), &controls, false) {
            Background::Modelled { law, levels, .. } => {
                assert_eq!(levels, 8);
                approx::assert_relative_eq!(law.slope, k, max_relative = 1e-12);
            }
            other => panic!("{other:?}"),
        }
    }

    /// Controls whose rates bend with [S] (`1e-5 S + 2e-8 S^2`, scatter 1e-6): the law is refused,
    /// a sample at a control's level takes that control, one between levels gets none.
    #[test]
    fn controls_that_bend_with_substrate_are_matched_level_by_level() {
        let wiggle = [1e-6, -1e-6, 0.0, 1e-6, -1e-6, 0.0, 1e-6, -1e-6];
        let setups: Vec<WellSetup> = (1..=8).map(|k| setup(100.0 * f64::from(k), "")).collect();
        let controls: Vec<Control> = setups
            .iter()
            .zip(wiggle)
            .map(|(s, w)| {
                let substrate = s.substrate.unwrap();
                control(
                    "G1",
                    s,
                    1e-5 * substrate + 2e-8 * substrate * substrate + w,
                    vec![],
                )
            })
            .collect();
        match background_for(&setup(400.0, "wt"), &controls, false) {
            Background::Matched { rate, controls, .. } => {
                // 1e-5 x 400 + 2e-8 x 400^2, and that control's own wiggle.
                approx::assert_relative_eq!(rate, 4e-3 + 3.2e-3 + 1e-6, max_relative = 1e-9);
                assert_eq!(controls, 1);
            }
            other => panic!("{other:?}"),
        }
        assert_eq!(
            background_for(&setup(150.0, "wt"), &controls, false),
            Background::None(NoBackground::NoControlAtLevel)
        );
    }
}
