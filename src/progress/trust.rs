//! When to run the progress-curve analysis, and which analysis of a group to trust, as typed
//! decisions with their reasons as data (sentences are made from them only when rendering).
//!
//! # When `--progress auto` runs the fit (rules of this program)
//! A group's initial rates are suspect, and the progress-curve fit runs, when any of its wells is
//! flagged `depleted` or `nonlinear`, when any window converted more than the conversion limit
//! (a fixed window), or when the wells at or below the group's median S0 convert a median of more
//! than [`LOW_SUBSTRATE_CONVERSION`] of their substrate over their windows: at [S] << Km a chord
//! then reads at least 2% below the initial rate, enough to move Km by more than its usual
//! standard error, so the whole curves are worth fitting as a check even though the integrated
//! estimator corrects the chords.
//!
//! # Which analysis to trust
//! The two analyses are compared, instead of letting one flagged well decide:
//! 1. The whole curves misfit systematically (runs test) in more than a third of the wells: the
//!    rate law fitted to whole curves does not hold over the read. The initial rates, which only
//!    assume it near mixing, are trusted if they are not suspect (`initial-rate`); otherwise
//!    `neither`.
//! 2. No initial-rate Km to compare (its fit failed or has no interval): `progress-curve`.
//! 3. The two 95% intervals of Km overlap: `either` (they agree; the progress-curve fit uses every
//!    read and is usually the narrower).
//! 4. They disagree and the initial rates are suspect, or the window slopes of the lower-S0 wells
//!    fall short of the fitted initial rates (median below [`CHORD_SHORTFALL`]: depletion within
//!    the windows): `progress-curve`.
//! 5. They disagree with clean initial rates: `neither` without checking the rate law, the dead
//!    time, the calibration and the substrate concentrations.
//!
//! A progress-curve fit that could not be made leaves the initial rates (`initial-rate`).

use super::global_fit::ProgressModel;
use crate::core::stats::median;

/// A window's chord slope runs low by about half the fraction it converts when S0 << Km (the
/// rate falls nearly in proportion to S), so windows near the 10% limit give about 95% of the
/// initial rate; a median below 99% in the lower-S0 wells is that signature, not noise.
pub const CHORD_SHORTFALL: f64 = 0.99;

/// The analysis to use.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Trust {
    /// The initial-rate fit.
    InitialRate,
    /// The progress-curve fit.
    ProgressCurve,
    /// Either: they agree.
    Either,
    /// Neither without checking.
    Neither,
}

impl Trust {
    /// The word `progress.json` writes.
    pub fn word(self) -> &'static str {
        match self {
            Trust::InitialRate => "initial-rate",
            Trust::ProgressCurve => "progress-curve",
            Trust::Either => "either",
            Trust::Neither => "neither",
        }
    }
}

/// The median conversion over their windows of the wells at or below a group's median S0 above
/// which its initial rates are suspect (module docs).
pub const LOW_SUBSTRATE_CONVERSION: f64 = 0.04;

/// Why a group's initial rates are suspect: how many wells show each sign.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Suspicion {
    /// Wells flagged `depleted`.
    pub depleted: usize,
    /// Wells flagged `nonlinear`.
    pub nonlinear: usize,
    /// Wells whose window converted more than the limit.
    pub over_limit: usize,
    /// The conversion limit, as a fraction.
    pub max_conversion: f64,
    /// Median conversion over their windows of the wells at or below the median S0, if known.
    pub low_substrate_conversion: Option<f64>,
}

impl Suspicion {
    /// The suspicion, if any well shows a sign (module docs).
    pub fn found(self) -> Option<Suspicion> {
        let converting = self
            .low_substrate_conversion
            .is_some_and(|c| c > LOW_SUBSTRATE_CONVERSION);
        (self.depleted + self.nonlinear + self.over_limit > 0 || converting).then_some(self)
    }
}

/// Why the progress-curve analysis ran for a group, or did not.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RunReason {
    /// `--progress never`.
    Never,
    /// `--progress auto` and the initial rates look sound.
    Sound,
    /// `--progress always`, with the suspicion if there is one.
    Always(Option<Suspicion>),
    /// `--progress auto` and the initial rates are suspect.
    Suspect(Suspicion),
}

impl RunReason {
    /// Whether the analysis runs.
    pub fn runs(self) -> bool {
        matches!(self, RunReason::Always(_) | RunReason::Suspect(_))
    }

    /// The suspicion behind the run, if any.
    pub fn suspicion(self) -> Option<Suspicion> {
        match self {
            RunReason::Always(suspicion) => suspicion,
            RunReason::Suspect(suspicion) => Some(suspicion),
            RunReason::Never | RunReason::Sound => None,
        }
    }
}

/// Km by both analyses, for the reasons.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct KmPair {
    /// From the progress-curve fit.
    pub progress: f64,
    /// From the initial rates.
    pub initial: f64,
}

/// Why the decision fell as it did.
#[derive(Debug, Clone, PartialEq)]
pub enum TrustReason {
    /// The progress-curve fit did not run.
    NotRun(RunReason),
    /// The progress-curve fit could not be made.
    FitFailed(String),
    /// The fitted model misfits many wells (trust the initial rates if they are not suspect).
    ManyMisfits {
        /// The model.
        model: ProgressModel,
        /// Wells with systematic misfit.
        misfits: usize,
        /// Wells fitted.
        wells: usize,
        /// Whether the initial rates are suspect too.
        suspect: bool,
    },
    /// No initial-rate Km with an interval to compare with.
    NoInitialRateKm,
    /// The initial rates are suspect, the curves fit and the analyses disagree.
    SuspectInitialRates {
        /// Why the fit ran (it carries the signs of suspicion).
        run: RunReason,
        /// Median window slope over the fitted initial rate, all wells.
        window_ratio: Option<f64>,
        /// Both Km.
        km: Option<KmPair>,
    },
    /// The analyses disagree and the lower-S0 windows fall short: depletion within the windows.
    DepletionWithinWindows {
        /// Both Km.
        km: Option<KmPair>,
        /// Median window slope over the fitted initial rate in the lower-S0 wells.
        shortfall: f64,
    },
    /// The two analyses' Km agree (their 95% intervals overlap).
    Agree {
        /// Both Km.
        km: Option<KmPair>,
        /// The signs of suspicion the initial rates showed, if any.
        suspicion: Option<Suspicion>,
    },
    /// Clean initial rates but disagreeing Km.
    Disagree {
        /// Both Km.
        km: Option<KmPair>,
    },
}

/// Which analysis to trust, and why.
#[derive(Debug, Clone, PartialEq)]
pub struct TrustDecision {
    /// The analysis.
    pub trust: Trust,
    /// Why.
    pub reason: TrustReason,
}

/// What the decision needs of one fitted well.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WellEvidence {
    /// S0 from the layout.
    pub s0: Option<f64>,
    /// Window slope over the fitted initial rate.
    pub window_over_implied: Option<f64>,
    /// Runs-test misfit.
    pub systematic_misfit: bool,
}

/// The evidence of a group whose progress-curve fit ran.
#[derive(Debug, Clone, PartialEq)]
pub struct TrustEvidence {
    /// The model fitted.
    pub model: ProgressModel,
    /// The run's reason (its suspicion).
    pub run: RunReason,
    /// Each fitted well.
    pub wells: Vec<WellEvidence>,
    /// Km of the progress-curve fit: value and 95% interval.
    pub progress_km: Option<(f64, Option<[f64; 2]>)>,
    /// Km of the initial-rate fit: value and 95% interval.
    pub initial_km: Option<(f64, Option<[f64; 2]>)>,
}

/// Decides which analysis to trust (module docs).
pub fn decide_trust(evidence: &TrustEvidence) -> TrustDecision {
    let misfits = evidence.wells.iter().filter(|w| w.systematic_misfit).count();
    let n_wells = evidence.wells.len();
    let suspicion = evidence.run.suspicion();
    let initial_interval = evidence.initial_km.and_then(|(_, interval)| interval);
    // Agreement: the two 95% intervals of Km overlap.
    let agree = match (evidence.progress_km, initial_interval) {
        (Some((_, Some([plo, phi]))), Some([ilo, ihi])) => plo <= ihi && ilo <= phi,
        _ => false,
    };
    let km = match (evidence.progress_km, evidence.initial_km) {
        (Some((progress, _)), Some((initial, _))) => Some(KmPair { progress, initial }),
        _ => None,
    };
    let window_ratio = median(evidence.wells.iter().filter_map(|w| w.window_over_implied));
    // Window slope over implied initial rate in the wells at or below the median S0.
    let median_s0 = median(evidence.wells.iter().filter_map(|w| w.s0));
    let low_substrate_shortfall = median_s0.and_then(|m| {
        median(
            evidence
                .wells
                .iter()
                .filter(|w| w.s0.is_some_and(|s| s <= m))
                .filter_map(|w| w.window_over_implied),
        )
    });
    let (trust, reason) = if 3 * misfits > n_wells {
        let trust = if suspicion.is_none() && evidence.initial_km.is_some() {
            Trust::InitialRate
        } else {
            Trust::Neither
        };
        let reason = TrustReason::ManyMisfits {
            model: evidence.model,
            misfits,
            wells: n_wells,
            suspect: suspicion.is_some(),
        };
        (trust, reason)
    } else if initial_interval.is_none() {
        (Trust::ProgressCurve, TrustReason::NoInitialRateKm)
    } else if agree {
        (Trust::Either, TrustReason::Agree { km, suspicion })
    } else if suspicion.is_some() {
        let reason = TrustReason::SuspectInitialRates {
            run: evidence.run,
            window_ratio,
            km,
        };
        (Trust::ProgressCurve, reason)
    } else if let Some(shortfall) = low_substrate_shortfall.filter(|r| *r < CHORD_SHORTFALL) {
        (
            Trust::ProgressCurve,
            TrustReason::DepletionWithinWindows { km, shortfall },
        )
    } else {
        (Trust::Neither, TrustReason::Disagree { km })
    };
    TrustDecision { trust, reason }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn well(s0: f64, ratio: f64) -> WellEvidence {
        WellEvidence {
            s0: Some(s0),
            window_over_implied: Some(ratio),
            systematic_misfit: false,
        }
    }

    fn evidence(
        run: RunReason,
        wells: Vec<WellEvidence>,
        progress: [f64; 2],
        initial: [f64; 2],
    ) -> TrustEvidence {
        TrustEvidence {
            model: ProgressModel::MichaelisMenten,
            run,
            wells,
            progress_km: Some((0.5 * (progress[0] + progress[1]), Some(progress))),
            initial_km: Some((0.5 * (initial[0] + initial[1]), Some(initial))),
        }
    }

    #[test]
    fn each_outcome_follows_its_rule() {
        let clean = vec![well(10.0, 1.0), well(20.0, 1.0), well(40.0, 1.0)];
        let agree = decide_trust(&evidence(
            RunReason::Always(None),
            clean.clone(),
            [9.0, 11.0],
            [10.0, 12.0],
        ));
        assert_eq!(agree.trust, Trust::Either);
        let disagree = decide_trust(&evidence(
            RunReason::Always(None),
            clean.clone(),
            [9.0, 11.0],
            [12.0, 14.0],
        ));
        assert_eq!(disagree.trust, Trust::Neither);
        // Lower-S0 windows at 95% of the fitted initial rate: depletion within the windows.
        let short = vec![well(10.0, 0.95), well(20.0, 0.96), well(40.0, 1.0)];
        let depletion = decide_trust(&evidence(
            RunReason::Always(None),
            short.clone(),
            [9.0, 11.0],
            [12.0, 14.0],
        ));
        assert_eq!(depletion.trust, Trust::ProgressCurve);
        assert!(matches!(
            depletion.reason,
            TrustReason::DepletionWithinWindows { .. }
        ));
        // The same shortfall with agreeing analyses: either.
        let short_agreeing = decide_trust(&evidence(
            RunReason::Always(None),
            short,
            [9.0, 11.0],
            [10.5, 12.0],
        ));
        assert_eq!(short_agreeing.trust, Trust::Either);
        let suspicion = Suspicion {
            depleted: 2,
            nonlinear: 0,
            over_limit: 0,
            max_conversion: 0.1,
            low_substrate_conversion: None,
        };
        // One flagged well does not decide: suspect initial rates that agree are still either.
        let suspect_agreeing = decide_trust(&evidence(
            RunReason::Suspect(suspicion),
            vec![well(10.0, 1.0), well(20.0, 1.0)],
            [9.0, 11.0],
            [9.0, 11.0],
        ));
        assert_eq!(suspect_agreeing.trust, Trust::Either);
        assert!(matches!(
            suspect_agreeing.reason,
            TrustReason::Agree {
                suspicion: Some(_),
                ..
            }
        ));
        let suspect = decide_trust(&evidence(
            RunReason::Suspect(suspicion),
            vec![well(10.0, 1.0), well(20.0, 1.0)],
            [9.0, 11.0],
            [12.0, 14.0],
        ));
        assert_eq!(suspect.trust, Trust::ProgressCurve);
        assert!(matches!(suspect.reason, TrustReason::SuspectInitialRates { .. }));
        // Whole curves that misfit: the initial rates if they are sound, else neither.
        let mut misfitting = clean;
        misfitting[0].systematic_misfit = true;
        misfitting[1].systematic_misfit = true;
        let sound = decide_trust(&evidence(
            RunReason::Always(None),
            misfitting.clone(),
            [9.0, 11.0],
            [12.0, 14.0],
        ));
        assert_eq!(sound.trust, Trust::InitialRate);
        let neither = decide_trust(&evidence(
            RunReason::Suspect(suspicion),
            misfitting,
            [9.0, 11.0],
            [9.0, 11.0],
        ));
        assert_eq!(neither.trust, Trust::Neither);
        assert!(matches!(
            neither.reason,
            TrustReason::ManyMisfits {
                misfits: 2,
                wells: 3,
                suspect: true,
                ..
            }
        ));
        // No initial-rate interval to compare with: the curves.
        let mut lonely = evidence(
            RunReason::Always(None),
            vec![well(10.0, 1.0), well(20.0, 1.0)],
            [9.0, 11.0],
            [9.0, 11.0],
        );
        lonely.initial_km = Some((10.0, None));
        assert_eq!(decide_trust(&lonely).trust, Trust::ProgressCurve);
    }

    #[test]
    fn low_substrate_conversion_alone_makes_the_rates_suspect() {
        let quiet = Suspicion {
            depleted: 0,
            nonlinear: 0,
            over_limit: 0,
            max_conversion: 0.1,
            low_substrate_conversion: Some(0.03),
        };
        assert_eq!(quiet.found(), None);
        let converting = Suspicion {
            low_substrate_conversion: Some(0.06),
            ..quiet
        };
        assert_eq!(converting.found(), Some(converting));
    }
}
