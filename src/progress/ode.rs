//! Progress curves with no closed form, integrated numerically: competitive product inhibition and
//! first-order enzyme inactivation during the read, with forward sensitivities for the fits'
//! Jacobian.
//!
//! Formula: `dS/dt = f(S, t) = -kcat E(t) S / (Km (1 + q P) + S)` with `P = S0 - S` (no product at
//! the start), `q = 1/Kp` (competitive product inhibition; q = 0 without it) and
//! `E(t) = E0 exp(-k_inact t)` (first-order inactivation; k_inact = 0 without it). Plain
//! Michaelis-Menten is `q = k_inact = 0`. Fitting `q` rather than `Kp` keeps the nested model
//! (no inhibition) at a finite point, q = 0, instead of at Kp = infinity.
//!
//! Sensitivities: with `D = Km (1 + q P) + S`, `u_theta = dS/dtheta` obeys
//! `du_theta/dt = (df/dS) u_theta + df/dtheta`, `u_theta(0) = 0`, where
//! `df/dS = -kcat E Km (1 + q S0) / D^2`, `df/dkcat = -E S / D`,
//! `df/dKm = kcat E S (1 + q P) / D^2`, `df/dq = kcat E S Km P / D^2`,
//! `df/dk_inact = kcat t E S / D`; and `dS/dt = f` itself gives the derivative in the time origin.
//!
//! Method: Dormand-Prince 5(4) with dense output (ode_solvers 0.6 `Dopri5`,
//! `integrate_with_continuous_output_model`, values at the read times from the continuous output
//! model). Tolerances: relative [`OdeTolerances::relative`] (default 1e-9) and absolute
//! `relative * 1e-3 * S0` on every component. The integration runs 1% past the last read so that
//! no read is evaluated at the end of the last step (ode_solvers' last dense point is
//! extrapolated).
//!
//! Assumptions: as for Michaelis-Menten (quasi-steady state, [E] << [S]); the product formed is the
//! inhibitor (one to one); inactivation is first order and independent of substrate.
//!
//! References: Dormand and Prince 1980, J Comput Appl Math 6:19; Hairer, Norsett and Wanner 1993,
//! "Solving Ordinary Differential Equations I", Springer (dense output, forward sensitivities,
//! from memory); Duggleby 1995, Methods Enzymol 249:61 (progress-curve models, from memory).

use nalgebra::{SVector, Vector1};
use ode_solvers::continuous_output_model::ContinuousOutputModel;
use ode_solvers::{Dopri5, System};

/// The constants of one curve.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct CurveConstants {
    /// Turnover number, 1/time.
    pub kcat: f64,
    /// Michaelis constant, concentration.
    pub km: f64,
    /// 1/Kp, competitive product inhibition, 1/concentration (0: none).
    pub inverse_kp: f64,
    /// First-order inactivation rate constant, 1/time (0: none).
    pub k_inact: f64,
}

/// Integration tolerances.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct OdeTolerances {
    /// Relative tolerance of the step control.
    pub relative: f64,
}

impl Default for OdeTolerances {
    fn default() -> Self {
        OdeTolerances { relative: 1e-9 }
    }
}

/// Why an integration failed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum OdeError {
    /// The constants or the start make the rate law undefined.
    #[error("the rate law is undefined for these constants ({reason})")]
    InvalidConstants {
        /// What is wrong.
        reason: String,
    },
    /// The integrator stopped.
    #[error("the ODE integration failed: {message}")]
    Integration {
        /// The integrator's message.
        message: String,
    },
}

/// One point of an integrated curve: the substrate and its derivatives in
/// `[kcat, Km, 1/Kp, k_inact, time origin]` (zeros when sensitivities were not asked for).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OdePoint {
    /// Substrate left.
    pub substrate: f64,
    /// dS/d(kcat, Km, 1/Kp, k_inact, t).
    pub derivatives: [f64; 5],
}

#[derive(Clone, Copy)]
struct RateLaw {
    s0: f64,
    e0: f64,
    constants: CurveConstants,
}

impl RateLaw {
    /// `(f, D, E)` at substrate `s` and time `t`.
    fn rate(&self, s: f64, t: f64) -> (f64, f64, f64) {
        let c = self.constants;
        let enzyme = self.e0 * (-c.k_inact * t).exp();
        let denominator = c.km * (1.0 + c.inverse_kp * (self.s0 - s)) + s;
        (-c.kcat * enzyme * s / denominator, denominator, enzyme)
    }
}

impl System<f64, Vector1<f64>> for RateLaw {
    fn system(&self, t: f64, y: &Vector1<f64>, dy: &mut Vector1<f64>) {
        dy[0] = self.rate(y[0], t).0;
    }
}

/// The rate law augmented with the sensitivities of S to kcat, Km, 1/Kp and k_inact.
#[derive(Clone, Copy)]
struct WithSensitivities(RateLaw);

impl System<f64, SVector<f64, 5>> for WithSensitivities {
    fn system(&self, t: f64, y: &SVector<f64, 5>, dy: &mut SVector<f64, 5>) {
        let law = self.0;
        let c = law.constants;
        let s = y[0];
        let (f, denominator, enzyme) = law.rate(s, t);
        let product = law.s0 - s;
        let d2 = denominator * denominator;
        let by_s = -c.kcat * enzyme * c.km * (1.0 + c.inverse_kp * law.s0) / d2;
        let by_kcat = -enzyme * s / denominator;
        let by_km = c.kcat * enzyme * s * (1.0 + c.inverse_kp * product) / d2;
        let by_q = c.kcat * enzyme * s * c.km * product / d2;
        let by_k = c.kcat * t * enzyme * s / denominator;
        dy[0] = f;
        dy[1] = by_s * y[1] + by_kcat;
        dy[2] = by_s * y[2] + by_km;
        dy[3] = by_s * y[3] + by_q;
        dy[4] = by_s * y[4] + by_k;
    }
}

fn check_inputs(s0: f64, e0: f64, constants: &CurveConstants, times: &[f64]) -> Result<(), OdeError> {
    let c = constants;
    let finite = [s0, e0, c.kcat, c.km, c.inverse_kp, c.k_inact]
        .iter()
        .all(|v| v.is_finite())
        && times.iter().all(|t| t.is_finite());
    if !finite {
        return Err(OdeError::InvalidConstants {
            reason: "a value is not finite".into(),
        });
    }
    if !(s0 > 0.0 && e0 >= 0.0 && c.kcat >= 0.0 && c.km > 0.0) {
        return Err(OdeError::InvalidConstants {
            reason: format!(
                "need S0 > 0, E0 >= 0, kcat >= 0, Km > 0 (S0 {s0}, E0 {e0}, kcat {}, Km {})",
                c.kcat, c.km
            ),
        });
    }
    // D = Km (1 + q (S0 - S)) + S must stay positive for every S in [0, S0]; it is linear in S,
    // so the two ends decide.
    if c.km * (1.0 + c.inverse_kp * s0) <= 0.0 {
        return Err(OdeError::InvalidConstants {
            reason: format!("1/Kp = {} makes the apparent Km negative", c.inverse_kp),
        });
    }
    Ok(())
}

/// Integrates one well's curve and returns the substrate (and, when `sensitivities`, its
/// derivatives) at each of `times` (any order; times at or before 0 give S0).
pub fn integrate_curve(
    s0: f64,
    e0: f64,
    constants: &CurveConstants,
    times: &[f64],
    sensitivities: bool,
    tolerances: OdeTolerances,
) -> Result<Vec<OdePoint>, OdeError> {
    check_inputs(s0, e0, constants, times)?;
    let law = RateLaw {
        s0,
        e0,
        constants: *constants,
    };
    let last = times.iter().copied().fold(0.0f64, f64::max);
    let at_start = |t: f64| OdePoint {
        substrate: s0,
        derivatives: [0.0, 0.0, 0.0, 0.0, law.rate(s0, t.max(0.0)).0],
    };
    if last <= 0.0 || e0 == 0.0 || constants.kcat == 0.0 {
        return Ok(times.iter().map(|&t| at_start(t)).collect());
    }
    let end = last * 1.01;
    let rtol = tolerances.relative;
    let atol = rtol * 1e-3 * s0;
    let integration_error = |error: ode_solvers::dop_shared::IntegrationError| OdeError::Integration {
        message: error.to_string(),
    };
    let missing = |t: f64| OdeError::Integration {
        message: format!("no value at t = {t} in the continuous output"),
    };
    let mut points = Vec::with_capacity(times.len());
    if sensitivities {
        let mut model: ContinuousOutputModel<f64, SVector<f64, 5>> = ContinuousOutputModel::new();
        let start = SVector::<f64, 5>::from([s0, 0.0, 0.0, 0.0, 0.0]);
        let mut solver = Dopri5::new(WithSensitivities(law), 0.0, end, end, start, rtol, atol);
        solver
            .integrate_with_continuous_output_model(&mut model)
            .map_err(integration_error)?;
        for &t in times {
            if t <= 0.0 {
                points.push(at_start(t));
                continue;
            }
            let y = model.evaluate(t).ok_or_else(|| missing(t))?;
            let s = y[0];
            points.push(OdePoint {
                substrate: s,
                derivatives: [y[1], y[2], y[3], y[4], law.rate(s, t).0],
            });
        }
    } else {
        let mut model: ContinuousOutputModel<f64, Vector1<f64>> = ContinuousOutputModel::new();
        let mut solver = Dopri5::new(law, 0.0, end, end, Vector1::new(s0), rtol, atol);
        solver
            .integrate_with_continuous_output_model(&mut model)
            .map_err(integration_error)?;
        for &t in times {
            if t <= 0.0 {
                points.push(at_start(t));
                continue;
            }
            let y = model.evaluate(t).ok_or_else(|| missing(t))?;
            points.push(OdePoint {
                substrate: y[0],
                derivatives: [0.0; 5],
            });
        }
    }
    Ok(points)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::integrated::{substrate_remaining, time_to_reach_substrate};

    fn plain(kcat: f64, km: f64) -> CurveConstants {
        CurveConstants {
            kcat,
            km,
            inverse_kp: 0.0,
            k_inact: 0.0,
        }
    }

    #[test]
    #[allow(clippy::excessive_precision)]
    fn ode_matches_closed_form_and_integrated_mm_table_to_1e_6() {
        // Source: shared/reference/integrated-mm.txt (mpmath 50 digits): the five (S0, Km, Vmax)
        // cases and their time ranges (to 99% or 99.9% conversion). The ODE at the default
        // tolerance must match the closed form and the table to 1e-6 relative.
        let cases: [(f64, f64, f64, f64, f64); 6] = [
            (1.0, 1.0, 1.0, 5.5951701859880913, 0.01),
            (10.0, 1.0, 1.0, 14.505170185988091, 0.10000000000000001),
            (0.1, 1.0, 1.0, 4.7041701859880914, 0.001),
            (100.0, 1.0, 1.0, 103.60517018598809, 1.0),
            (1000.0, 1.0, 1.0, 994.60517018598809, 10.0),
            (0.2, 0.05, 0.01, 42.825850929940459, 0.002),
        ];
        let mut worst: f64 = 0.0;
        for (s0, km, vmax, t_last, s_last) in cases {
            let times: Vec<f64> = (1..=50).map(|i| t_last * f64::from(i) / 50.0).collect();
            let points =
                integrate_curve(s0, 1.0, &plain(vmax, km), &times, false, OdeTolerances::default()).unwrap();
            for (point, &t) in points.iter().zip(&times) {
                let closed = substrate_remaining(s0, km, vmax, t);
                let relative = (point.substrate - closed).abs() / closed;
                worst = worst.max(relative);
                assert!(
                    relative < 1e-6,
                    "S0 {s0} t {t}: ODE {} closed {closed}",
                    point.substrate
                );
            }
            let last = points.last().unwrap().substrate;
            assert!(
                (last - s_last).abs() / s_last < 1e-6,
                "S0 {s0}: {last} vs table {s_last}"
            );
        }
        assert!(worst > 0.0, "the comparison ran");
    }

    #[test]
    fn product_inhibition_matches_its_implicit_integrated_form() {
        // Separating variables in dS/dt = -V S / (Km (1 + (S0 - S)/Kp) + S) gives
        // V t = Km (1 + S0/Kp) ln(S0/S) + (1 - Km/Kp) (S0 - S) (integration, common practice).
        let (s0, e0, kcat, km, kp): (f64, f64, f64, f64, f64) = (50.0, 0.01, 20.0, 30.0, 10.0);
        let vmax = kcat * e0;
        let fractions = [0.95, 0.8, 0.5, 0.2, 0.05];
        let times: Vec<f64> = fractions
            .iter()
            .map(|f| {
                let s = s0 * f;
                (km * (1.0 + s0 / kp) * (s0 / s).ln() + (1.0 - km / kp) * (s0 - s)) / vmax
            })
            .collect();
        let constants = CurveConstants {
            kcat,
            km,
            inverse_kp: 1.0 / kp,
            k_inact: 0.0,
        };
        let points = integrate_curve(s0, e0, &constants, &times, true, OdeTolerances::default()).unwrap();
        for (point, f) in points.iter().zip(fractions) {
            assert!(
                (point.substrate / (s0 * f) - 1.0).abs() < 1e-6,
                "{point:?} vs {}",
                s0 * f
            );
        }
    }

    #[test]
    fn inactivation_matches_closed_form_with_effective_time() {
        // With E = E0 exp(-k t) the integrated law is the plain one with Vmax t replaced by
        // Vmax (1 - exp(-k t)) / k (integration, common practice).
        let (s0, e0, kcat, km, k) = (80.0, 0.02, 10.0, 25.0, 2e-3);
        let times: Vec<f64> = (1..=30).map(|i| 40.0 * f64::from(i)).collect();
        let constants = CurveConstants {
            kcat,
            km,
            inverse_kp: 0.0,
            k_inact: k,
        };
        let points = integrate_curve(s0, e0, &constants, &times, false, OdeTolerances::default()).unwrap();
        for (point, &t) in points.iter().zip(&times) {
            let effective = -(-k * t).exp_m1() / k;
            let closed = substrate_remaining(s0, km, kcat * e0, effective);
            assert!(
                (point.substrate / closed - 1.0).abs() < 1e-6,
                "t {t}: {} vs {closed}",
                point.substrate
            );
        }
    }

    #[test]
    fn sensitivities_match_finite_differences() {
        // Forward sensitivities against central differences of the ODE solution at tight
        // tolerance (common practice; agreement to 1e-5 relative of the largest derivative).
        let base = CurveConstants {
            kcat: 12.0,
            km: 20.0,
            inverse_kp: 0.05,
            k_inact: 1e-3,
        };
        let (s0, e0) = (30.0, 0.02);
        let times = [60.0, 300.0, 900.0];
        let tight = OdeTolerances { relative: 1e-12 };
        let points = integrate_curve(s0, e0, &base, &times, true, tight).unwrap();
        let perturb = |index: usize, h: f64| {
            let mut c = base;
            match index {
                0 => c.kcat += h,
                1 => c.km += h,
                2 => c.inverse_kp += h,
                _ => c.k_inact += h,
            }
            integrate_curve(s0, e0, &c, &times, false, tight).unwrap()
        };
        let values = [base.kcat, base.km, base.inverse_kp, base.k_inact];
        for (index, value) in values.iter().enumerate() {
            let h = 1e-5 * value;
            let up = perturb(index, h);
            let down = perturb(index, -h);
            for (j, point) in points.iter().enumerate() {
                let numeric = (up[j].substrate - down[j].substrate) / (2.0 * h);
                let analytic = point.derivatives[index];
                assert!(
                    (numeric - analytic).abs() <= 1e-5 * analytic.abs().max(1e-8),
                    "parameter {index} t {}: analytic {analytic} numeric {numeric}",
                    times[j]
                );
            }
        }
        // Time-origin derivative is the rate law.
        let shifted = integrate_curve(s0, e0, &base, &[300.0 + 1e-3, 300.0 - 1e-3], false, tight).unwrap();
        let numeric = (shifted[0].substrate - shifted[1].substrate) / 2e-3;
        assert!((numeric - points[1].derivatives[4]).abs() < 1e-6 * numeric.abs());
    }

    #[test]
    fn invalid_constants_are_refused_and_idle_wells_stay_put() {
        let times = [10.0, 20.0];
        assert!(integrate_curve(
            10.0,
            0.01,
            &plain(1.0, -1.0),
            &times,
            false,
            OdeTolerances::default()
        )
        .is_err());
        let negative_kp = CurveConstants {
            inverse_kp: -1.0,
            ..plain(1.0, 5.0)
        };
        assert!(integrate_curve(10.0, 0.01, &negative_kp, &times, true, OdeTolerances::default()).is_err());
        let idle = integrate_curve(
            10.0,
            0.0,
            &plain(1.0, 5.0),
            &times,
            true,
            OdeTolerances::default(),
        )
        .unwrap();
        assert!(idle.iter().all(|p| p.substrate == 10.0));
        // The implicit form is consistent with the ODE start: a tiny time moves S by V t.
        let t = time_to_reach_substrate(10.0, 5.0, 0.01, 9.999);
        let early = integrate_curve(
            10.0,
            0.01,
            &plain(1.0, 5.0),
            &[t],
            false,
            OdeTolerances::default(),
        )
        .unwrap();
        assert!((early[0].substrate - 9.999).abs() < 1e-8);
    }
}
