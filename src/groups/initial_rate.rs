//! Initial rates at mixing time from the windows' slopes, corrected for substrate depletion by the
//! group's own fitted rate law (the `integrated` estimator).
//!
//! A window's slope is a chord: over a window that converts a fraction c of the substrate at
//! [S] << Km it reads about (1 - c/2) of the initial rate, so uncorrected rates run low at low [S]
//! and Km comes out high. Given the shape of the group's rate law at the well's [S] (and [I]), the
//! initial rate `v0` whose curve has the observed chord over the window is found:
//!
//! * Rate laws of Michaelis-Menten form in S at fixed I (Michaelis-Menten, competitive,
//!   uncompetitive, noncompetitive, mixed: `v = V_app S / (K_app + S)`) use the exact integrated rate
//!   law `S(t) = K omega(ln(S0/K) + (S0 - V t)/K)` ([`crate::fit::integrated`]): `V` solves
//!   `chord = -sum_k (t_k - mean t) S(t_k) / sum_k (t_k - mean t)^2`, the least-squares slope the
//!   curve itself would give over the window's reads `t_k` (taken as evenly spaced from `t1` to
//!   `t2`, the window's ends counted from mixing, dead time added; at most [`SLOPE_NODES`] of
//!   them), by Newton's method with `dS/dV = -t S/(S + K)`, from `V = chord (K + S0)/S0` (the
//!   uncorrected rate, which lies below the root), and `v0 = V S0/(K + S0)`. The secant
//!   `(S(t1) - S(t2)) / (t2 - t1)` used before agrees with that slope only to second order in the
//!   converted fraction: at the 30% the windows may convert, Km came out 0.06% low on the study's
//!   densely read design, where its RMSE is 0.07% (DEVELOPERS.md).
//! * Other laws with an S dependence (substrate inhibition, Hill) use the second-order expansion
//!   `P(t) = v0 t - v0 v'(S0) t^2 / 2`, whose chord is `v0 (1 - L v0 (t1 + t2)/2)` with
//!   `L = d ln v / dS` at S0 from the fitted law: `v0 = (1 - sqrt(1 - 2 L c (t1 + t2))) / (L (t1 + t2))`.
//! * Laws with no S dependence in the data (Morrison, IC50 at one [S]) keep the chord.
//!
//! The standard error is the chord's times `dv0/dchord` (the correction is a smooth one-to-one map;
//! the uncertainty of the rate law's constants enters through the fit's feedback, see
//! [`crate::fit::models::RateFeedback`]). In the group fits `dv0/dchord` is taken where the law
//! puts the well ([`rate_per_chord_at_law`]), so that a weight does not follow the well's own
//! noise; the same holds for the rate's sensitivity to its S0 ([`rate_per_log_substrate`]). The group's fit is
//! iterated with the corrected rates until they change by less than one part in 10^7.
//!
//! References: Schnell and Mendoza 1997, J Theor Biol 187:207 (the closed form); the chord's bias
//! follows from expanding v(S) to first order (common practice; see the project's DOMAIN notes).

use crate::config::RateModelKind;
use crate::fit::integrated::substrate_remaining;
use crate::fit::models::predict_rate;

/// A window's slope and where the window lies, counted from mixing.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WindowChord {
    /// The window's slope after background subtraction.
    pub slope: f64,
    /// Its standard error.
    pub se: f64,
    /// Window start, s since mixing.
    pub start_s: f64,
    /// Window end, s since mixing.
    pub end_s: f64,
    /// Reads in the window (taken as evenly spaced from start to end).
    pub reads: usize,
}

/// The shape of the group's rate law at one well, as the correction needs it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RateShape {
    /// `v = V S / (K + S)` with this (apparent) K.
    MichaelisMenten {
        /// The apparent Km at the well's [I].
        k_app: f64,
    },
    /// Any other law: `d ln v / dS` at the well's S0.
    Local {
        /// `d ln v / dS`, 1 / concentration.
        log_slope: f64,
    },
    /// No S dependence known: the chord stands.
    Unknown,
}

/// The shape of a fitted rate law (`parameters` in the fitted parametrisation, inverse constants
/// as `1/K`) at a well's S0 and [I].
pub fn rate_shape(
    kind: RateModelKind,
    parameters: &[f64],
    s0: f64,
    inhibitor: f64,
    enzyme: f64,
) -> RateShape {
    let km = || parameters.get(1).copied().unwrap_or(f64::NAN);
    let k_app = match kind {
        RateModelKind::MichaelisMenten | RateModelKind::Noncompetitive => Some(km()),
        RateModelKind::Competitive => Some(km() * (1.0 + parameters[2] * inhibitor)),
        RateModelKind::Uncompetitive => Some(km() / (1.0 + parameters[2] * inhibitor)),
        RateModelKind::Mixed => {
            Some(km() * (1.0 + parameters[2] * inhibitor) / (1.0 + parameters[3] * inhibitor))
        }
        RateModelKind::SubstrateInhibition | RateModelKind::Hill => None,
        RateModelKind::Morrison | RateModelKind::Ic50 => return RateShape::Unknown,
    };
    if let Some(k_app) = k_app {
        return if k_app.is_finite() && k_app > 0.0 {
            RateShape::MichaelisMenten { k_app }
        } else {
            RateShape::Unknown
        };
    }
    let mut gradient = vec![0.0; parameters.len()];
    let step = 1e-4 * s0;
    let mut rate = |s: f64| predict_rate(kind, parameters, s, inhibitor, enzyme, &mut gradient);
    let (low, centre, high) = (rate(s0 - step), rate(s0), rate(s0 + step));
    let log_slope = (high - low) / (2.0 * step * centre);
    if log_slope.is_finite() && centre > 0.0 {
        RateShape::Local { log_slope }
    } else {
        RateShape::Unknown
    }
}

/// Largest Newton steps before giving up on the exact correction.
const NEWTON_STEPS: usize = 60;

/// Most points at which the expected least-squares slope of a window is evaluated (a ceiling on
/// one window's work; windows with more reads are evaluated at this many evenly spaced points
/// across the same span). Fewer points than reads are not a free saving: on a window converting
/// 45% of its substrate, 32 points in place of its 46 reads moved the corrected rate by 2e-4, and
/// 256 in place of 451 by 4e-5.
const SLOPE_NODES: usize = 4096;

/// The least-squares slope over `reads` evenly spaced reads in `[t1, t2]` of the product of a
/// Michaelis-Menten curve with `V`, and its derivative in `V` (the secant for two reads).
fn chord_and_derivative(s0: f64, k: f64, vmax: f64, t1: f64, t2: f64, reads: usize) -> (f64, f64) {
    let nodes = reads.clamp(2, SLOPE_NODES);
    let step = (t2 - t1) / (nodes - 1) as f64;
    let centre = 0.5 * (t1 + t2);
    let (mut slope, mut derivative, mut sxx) = (0.0, 0.0, 0.0);
    for node in 0..nodes {
        let t = t1 + step * node as f64;
        let s = substrate_remaining(s0, k, vmax, t);
        // Product is S0 - S; dS/dV = -t S/(S + K).
        let ds_dv = -t * s / (s + k);
        let offset = t - centre;
        slope -= offset * s;
        derivative -= offset * ds_dv;
        sxx += offset * offset;
    }
    (slope / sxx, derivative / sxx)
}

/// The initial rate at mixing and its standard error from a window's chord (module docs); `None`
/// when the chord cannot be corrected (no S0, a chord that is not positive, no consistent root).
pub fn corrected_initial_rate(chord: &WindowChord, s0: f64, shape: RateShape) -> Option<(f64, f64)> {
    let (t1, t2) = (chord.start_s.max(0.0), chord.end_s);
    if !(s0 > 0.0 && chord.slope > 0.0 && t2 > t1 && chord.slope.is_finite()) {
        return None;
    }
    match shape {
        RateShape::Unknown => None,
        RateShape::MichaelisMenten { k_app } => {
            let to_v0 = (k_app + s0) / s0;
            let mut vmax = chord.slope * to_v0;
            let mut converged = false;
            for _ in 0..NEWTON_STEPS {
                let (value, derivative) = chord_and_derivative(s0, k_app, vmax, t1, t2, chord.reads);
                let residual = value - chord.slope;
                if !(derivative.is_finite() && derivative > 0.0) {
                    return None;
                }
                let step = residual / derivative;
                // Newton from below on this concave branch overshoots nowhere; keep V positive.
                vmax = (vmax - step).max(0.5 * vmax);
                if step.abs() <= 1e-12 * vmax {
                    converged = true;
                    break;
                }
            }
            if !converged {
                return None;
            }
            let (_, derivative) = chord_and_derivative(s0, k_app, vmax, t1, t2, chord.reads);
            // v0 = V / to_v0 and d chord / d v0 = derivative * to_v0.
            let v0 = vmax / to_v0;
            let se = chord.se / (derivative * to_v0);
            (v0.is_finite() && se.is_finite()).then_some((v0, se))
        }
        RateShape::Local { log_slope } => {
            let a = 0.5 * log_slope * (t1 + t2);
            if a.abs() < 1e-15 {
                return Some((chord.slope, chord.se));
            }
            let discriminant = 1.0 - 4.0 * a * chord.slope;
            if discriminant <= 0.0 {
                return None;
            }
            let root = discriminant.sqrt();
            let v0 = (1.0 - root) / (2.0 * a);
            // d v0 / d chord = 1 / root.
            Some((v0, chord.se / root))
        }
    }
}

/// How the initial rate moves with the window's chord, `dv0/dchord`, where the group's law puts
/// the well (`law_rate`, its rate at the layout's S0 and the well's [I]) rather than at the well's
/// own chord. A rate's standard error is its chord's times this: taken at the well's own chord,
/// a well whose noise raised its chord would get a larger correction slope and so a larger SE and
/// a smaller weight, and the weighted fit would lean low at low [S] (Km high). `None` where the
/// law gives no correction.
pub fn rate_per_chord_at_law(chord: &WindowChord, s0: f64, shape: RateShape, law_rate: f64) -> Option<f64> {
    let (t1, t2) = (chord.start_s.max(0.0), chord.end_s);
    if !(s0 > 0.0 && t2 > t1 && law_rate > 0.0 && law_rate.is_finite()) {
        return None;
    }
    let per_chord = match shape {
        RateShape::Unknown => return None,
        RateShape::MichaelisMenten { k_app } => {
            let to_v0 = (k_app + s0) / s0;
            let (_, derivative) = chord_and_derivative(s0, k_app, law_rate * to_v0, t1, t2, chord.reads);
            1.0 / (derivative * to_v0)
        }
        RateShape::Local { log_slope } => {
            let a = 0.5 * log_slope * (t1 + t2);
            let law_chord = law_rate * (1.0 - a * law_rate);
            1.0 / (1.0 - 4.0 * a * law_chord).max(f64::MIN_POSITIVE).sqrt()
        }
    };
    (per_chord.is_finite() && per_chord > 0.0).then_some(per_chord)
}

/// Relative step in S0 for [`rate_per_log_substrate`]'s central difference.
const SUBSTRATE_STEP: f64 = 1e-4;

/// How the well's corrected initial rate moves with its true S0 when the correction takes the
/// layout's S0: `d v0 / d ln S0_true`, from the group's law alone (`law_rate`, the law's rate at
/// the layout's S0 and the well's [I]), so that it shapes a variance without following the well's
/// own observation. Three parts move together:
///
/// * the enzyme's rate, `S dv/dS = v K/(K + S)` for a law of Michaelis-Menten form;
/// * the correction, which reads the chord against the layout's S0: a well given more substrate
///   converts a smaller fraction over the window, so its chord is nearer its initial rate, and the
///   correction (made for the layout's S0) amplifies the difference (by about `1/(1 - c/2)` at
///   [S] << Km for a window converting c);
/// * the spontaneous turnover pipetted with the substrate, `turnover_per_log_substrate` (the
///   background's first-order part, `k S0`), subtracted at the layout's S0.
///
/// For laws of Michaelis-Menten form the chord's own move comes from the exact chord of
/// [`chord_and_derivative`] at `S0 (1 +- h)` with the law's V (central difference, `h` =
/// [`SUBSTRATE_STEP`]), taken with the turnover through the correction's `dv0/dchord` at the law's
/// chord ([`rate_per_chord_at_law`]); for other laws `S dv/dS` and the turnover go through the
/// second-order expansion's `dv0/dchord`. `None` for laws with no S dependence or a window that cannot be
/// corrected.
pub fn rate_per_log_substrate(
    chord: &WindowChord,
    s0: f64,
    shape: RateShape,
    law_rate: f64,
    turnover_per_log_substrate: f64,
) -> Option<f64> {
    let (t1, t2) = (chord.start_s.max(0.0), chord.end_s);
    if !(s0 > 0.0 && t2 > t1 && law_rate > 0.0 && law_rate.is_finite()) {
        return None;
    }
    match shape {
        RateShape::Unknown => None,
        RateShape::MichaelisMenten { k_app } => {
            // d v0 / d ln S0_true = (d v0 / d chord at the law's chord) x (d chord / d ln S0_true
            // at the law's V, plus the turnover): the chain rule through the correction, which
            // takes the layout's S0.
            let vmax = law_rate * (k_app + s0) / s0;
            let law_chord_at = |relative: f64| {
                chord_and_derivative(s0 * (1.0 + relative), k_app, vmax, t1, t2, chord.reads).0
            };
            let chord_per_log_substrate =
                (law_chord_at(SUBSTRATE_STEP) - law_chord_at(-SUBSTRATE_STEP)) / (2.0 * SUBSTRATE_STEP);
            let per_chord = rate_per_chord_at_law(chord, s0, shape, law_rate)?;
            let sensitivity = per_chord * (chord_per_log_substrate + turnover_per_log_substrate);
            sensitivity.is_finite().then_some(sensitivity)
        }
        RateShape::Local { log_slope } => {
            // The chord of the law's curve to second order, and dv0/dchord = 1/root there.
            let a = 0.5 * log_slope * (t1 + t2);
            let law_chord = law_rate * (1.0 - a * law_rate);
            let root = (1.0 - 4.0 * a * law_chord).max(f64::MIN_POSITIVE).sqrt();
            let sensitivity = (law_rate * log_slope * s0 + turnover_per_log_substrate) / root;
            sensitivity.is_finite().then_some(sensitivity)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::simulate::kinetics::WellKinetics;

    /// A well of the simulator with plain Michaelis-Menten kinetics.
    fn michaelis_menten_well(s0: f64, km: f64, vmax: f64) -> WellKinetics {
        WellKinetics {
            substrate_initial_um: s0,
            km_um: km,
            vmax_um_per_s: vmax,
            lag_tau_s: 0.0,
            spontaneous_per_s: 0.0,
        }
    }

    /// The chord of a curve from the simulator's own numerical integration (independent of the
    /// closed form used here) is corrected back to the true initial rate.
    #[test]
    fn a_depleting_window_is_corrected_to_the_true_initial_rate() {
        for (s0, km, vmax, dead) in [
            (10.0, 80.0, 0.05, 0.0),
            (10.0, 80.0, 0.05, 30.0),
            (400.0, 80.0, 0.05, 30.0),
        ] {
            let kinetics = michaelis_menten_well(s0, km, vmax);
            let times: Vec<f64> = (0..10).map(|i| dead + 20.0 * f64::from(i)).collect();
            let product = kinetics.product_at(&times).unwrap();
            let line = crate::core::stats::straight_line(&times, &product).unwrap();
            let truth = vmax * s0 / (km + s0);
            let chord = WindowChord {
                slope: line.slope,
                se: 1e-6,
                start_s: times[0],
                end_s: times[9],
                reads: times.len(),
            };
            let (v0, se) =
                corrected_initial_rate(&chord, s0, RateShape::MichaelisMenten { k_app: km }).unwrap();
            assert!(
                (v0 / truth - 1.0).abs() < 2e-4,
                "S0 {s0} dead {dead}: {v0} vs {truth} (chord {})",
                line.slope
            );
            assert!((1e-6..1.2e-6).contains(&se), "{se}");
            // The expansion form agrees closely for a Michaelis-Menten law.
            let log_slope = km / (s0 * (km + s0));
            let (local, _) = corrected_initial_rate(&chord, s0, RateShape::Local { log_slope }).unwrap();
            assert!((local / truth - 1.0).abs() < 5e-3, "local {local} vs {truth}");
        }
    }

    /// The corrected rate's sensitivity to the well's true S0 matches what the simulator's
    /// numerical integration gives: wells with S0 (1 +- 1%) and spontaneous turnover, their
    /// least-squares slopes less a background taken at the layout's S0, corrected at the layout's
    /// S0. At low [S] the correction amplifies `S dv/dS`; at high [S] the turnover adds to it.
    /// (At high [S] the chord's own sensitivity is also a few percent above the law's `S dv/dS`
    /// at S0, since the window reads the curve where `dv/dS` is larger: 4% at [S] = 13 Km here.)
    #[test]
    fn the_substrate_sensitivity_matches_wells_pipetted_off_their_layout() {
        let times: Vec<f64> = (0..46).map(|i| 30.0 + 20.0 * f64::from(i)).collect();
        for (s0, km, vmax, turnover_per_s) in [
            (25.0, 250.0, 0.2, 2e-6),
            (8.0, 80.0, 0.06, 0.0),
            (250.0, 250.0, 0.2, 2e-6),
            (3250.0, 250.0, 0.2, 2e-6),
        ] {
            let shape = RateShape::MichaelisMenten { k_app: km };
            let corrected_for = |relative: f64| {
                let kinetics = WellKinetics {
                    spontaneous_per_s: turnover_per_s,
                    ..michaelis_menten_well(s0 * (1.0 + relative), km, vmax)
                };
                let product = kinetics.product_at(&times).unwrap();
                let line = crate::core::stats::straight_line(&times, &product).unwrap();
                let chord = WindowChord {
                    slope: line.slope - turnover_per_s * s0,
                    se: 1e-6,
                    start_s: times[0],
                    end_s: times[45],
                    reads: times.len(),
                };
                corrected_initial_rate(&chord, s0, shape).unwrap().0
            };
            let simulated = (corrected_for(0.01) - corrected_for(-0.01)) / 0.02;
            let law_rate = vmax * s0 / (km + s0);
            let chord = WindowChord {
                slope: law_rate,
                se: 1e-6,
                start_s: times[0],
                end_s: times[45],
                reads: times.len(),
            };
            let sensitivity =
                rate_per_log_substrate(&chord, s0, shape, law_rate, turnover_per_s * s0).unwrap();
            assert!(
                (sensitivity / simulated - 1.0).abs() < 5e-3,
                "S0 {s0}: {sensitivity} vs simulated {simulated}"
            );
            let rate_law_part = law_rate * km / (km + s0);
            if s0 < km / 2.0 {
                assert!(
                    sensitivity > 1.05 * rate_law_part,
                    "S0 {s0}: {sensitivity} vs {rate_law_part}"
                );
            }
            if s0 > 10.0 * km {
                // The turnover pipetted with the substrate adds its own k S0 (the correction is
                // nearly 1 up here).
                let without = rate_per_log_substrate(&chord, s0, shape, law_rate, 0.0).unwrap();
                let added = (sensitivity - without) / (turnover_per_s * s0);
                assert!((0.99..1.05).contains(&added), "turnover share {added}");
            }
        }
    }

    /// The correction's slope taken at the law's chord equals the well's own where the well sits
    /// on the law, and does not follow a well whose noise moved its chord.
    #[test]
    fn the_rate_per_chord_is_taken_where_the_law_puts_the_well() {
        let (s0, km, vmax) = (8.0, 80.0, 0.06);
        let shape = RateShape::MichaelisMenten { k_app: km };
        let law_rate = vmax * s0 / (km + s0);
        let (t1, t2, reads) = (30.0, 930.0, 46);
        let (law_chord, _) = chord_and_derivative(s0, km, vmax, t1, t2, reads);
        let window = |slope: f64| WindowChord {
            slope,
            se: 1e-5,
            start_s: t1,
            end_s: t2,
            reads,
        };
        let at_law = rate_per_chord_at_law(&window(law_chord), s0, shape, law_rate).unwrap();
        let (v0, own_se) = corrected_initial_rate(&window(law_chord), s0, shape).unwrap();
        assert!((v0 / law_rate - 1.0).abs() < 1e-9, "{v0} vs {law_rate}");
        assert!(
            (at_law * 1e-5 / own_se - 1.0).abs() < 1e-9,
            "{at_law} vs {}",
            own_se / 1e-5
        );
        // A chord 10% high: the well's own correction slope is steeper (its SE larger), the law's
        // is the same.
        let (_, high_se) = corrected_initial_rate(&window(1.1 * law_chord), s0, shape).unwrap();
        assert!(high_se > 1.01 * own_se, "{high_se} vs {own_se}");
        assert_eq!(
            rate_per_chord_at_law(&window(1.1 * law_chord), s0, shape, law_rate),
            Some(at_law)
        );
    }

    /// A window converting about 30% of a low S0 (the most the integrated estimator's windows
    /// convert): the least-squares slope the closed form gives over the window's reads matches the
    /// data's slope, where the secant between the window's ends is off (the curve from the
    /// simulator's numerical integration, independent of the closed form).
    #[test]
    fn a_window_converting_a_third_is_corrected_through_its_least_squares_slope() {
        for (reads, step) in [(46usize, 20.0), (451, 2.0)] {
            let (s0, km, vmax) = (25.0, 250.0, 0.2);
            let kinetics = michaelis_menten_well(s0, km, vmax);
            let times: Vec<f64> = (0..reads).map(|i| step * i as f64).collect();
            let product = kinetics.product_at(&times).unwrap();
            let converted = product[reads - 1] / s0;
            assert!((0.25..0.5).contains(&converted), "converted {converted}");
            let line = crate::core::stats::straight_line(&times, &product).unwrap();
            let truth = vmax * s0 / (km + s0);
            let chord = |reads| WindowChord {
                slope: line.slope,
                se: 1e-6,
                start_s: times[0],
                end_s: times[times.len() - 1],
                reads,
            };
            let shape = RateShape::MichaelisMenten { k_app: km };
            let (by_slope, _) = corrected_initial_rate(&chord(reads), s0, shape).unwrap();
            let (by_secant, _) = corrected_initial_rate(&chord(2), s0, shape).unwrap();
            let slope_error = (by_slope / truth - 1.0).abs();
            let secant_error = (by_secant / truth - 1.0).abs();
            assert!(
                slope_error < 2e-5,
                "{reads} reads: least-squares slope off by {slope_error}"
            );
            assert!(
                secant_error > 10.0 * slope_error,
                "{reads} reads: secant off by {secant_error}"
            );
        }
    }

    #[test]
    fn shapes_follow_the_rate_law() {
        // Competitive: K_app = Km (1 + I/Ki) = 50 (1 + 10/5) = 150.
        assert_eq!(
            rate_shape(RateModelKind::Competitive, &[1.0, 50.0, 0.2], 20.0, 10.0, 0.0),
            RateShape::MichaelisMenten { k_app: 150.0 }
        );
        assert_eq!(
            rate_shape(RateModelKind::Ic50, &[100.0, 0.0, 1.0, 1.0], 20.0, 10.0, 0.0),
            RateShape::Unknown
        );
        match rate_shape(RateModelKind::Hill, &[1.0, 50.0, 1.0], 20.0, 0.0, 0.0) {
            // Hill with h = 1 is Michaelis-Menten: d ln v/dS = K / (S (K + S)).
            RateShape::Local { log_slope } => assert!((log_slope - 50.0 / (20.0 * 70.0)).abs() < 1e-6),
            other => panic!("{other:?}"),
        }
    }
}
