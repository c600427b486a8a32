//! The simulator's chemistry, integrated numerically and on its own: the product formed in a well
//! from the moment of mixing, by a Dormand-Prince 5(4) integration (ode_solvers' `Dopri5`, relative
//! tolerance 1e-10, dense output) of the well's own rate law. It shares no code with the fitter's
//! closed form or ODE models, so simulations test the fitter against truth it cannot assume.
//!
//! Rate law (t from mixing; concentrations in uM, time in s):
//! `dS/dt = -a(t) Vmax S / (Km + S) - k_spont S`, `dP/dt = -dS/dt`, with `a(t) = 1` or, for a
//! well whose activity ramps up (lag), `a(t) = 1 - exp(-t / tau)`; a no-enzyme control has
//! `Vmax = 0` and then `P(t) = S0 (1 - exp(-k_spont t))` exactly.
//!
//! Assumptions: Michaelis-Menten quasi-steady state ([E] much less than [S]); spontaneous hydrolysis
//! first order in S; no product inhibition, no enzyme inactivation.
//!
//! References: Dormand and Prince 1980, J Comput Appl Math 6:19 (the integrator, from memory);
//! Michaelis and Menten 1913, Biochem Z 49:333 (the rate law).

use nalgebra::Vector2;
use ode_solvers::continuous_output_model::ContinuousOutputModel;
use ode_solvers::{Dopri5, System};

/// Relative tolerance of the integration.
pub const RELATIVE_TOLERANCE: f64 = 1e-10;

/// What a well holds, for its chemistry.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WellKinetics {
    /// Substrate at mixing, uM (0 for blanks and empty wells).
    pub substrate_initial_um: f64,
    /// Michaelis constant, uM.
    pub km_um: f64,
    /// `kcat [E]`, uM/s (0 without enzyme).
    pub vmax_um_per_s: f64,
    /// Time constant of a lag, s (0: none).
    pub lag_tau_s: f64,
    /// First-order rate constant of the uncatalysed reaction, 1/s.
    pub spontaneous_per_s: f64,
}

/// The rate law as an ODE system in (S, P).
struct RateLaw(WellKinetics);

impl RateLaw {
    fn activity(&self, t: f64) -> f64 {
        if self.0.lag_tau_s > 0.0 {
            -(-t / self.0.lag_tau_s).exp_m1()
        } else {
            1.0
        }
    }
}

impl System<f64, Vector2<f64>> for RateLaw {
    fn system(&self, t: f64, y: &Vector2<f64>, dy: &mut Vector2<f64>) {
        let s = y[0].max(0.0);
        let kinetics = &self.0;
        let rate = self.activity(t) * kinetics.vmax_um_per_s * s / (kinetics.km_um + s)
            + kinetics.spontaneous_per_s * s;
        dy[0] = -rate;
        dy[1] = rate;
    }
}

impl WellKinetics {
    /// The initial rate at mixing, uM/s: enzymatic (after any ramp) plus spontaneous.
    pub fn initial_rate(&self) -> f64 {
        let s0 = self.substrate_initial_um;
        self.vmax_um_per_s * s0 / (self.km_um + s0) + self.spontaneous_per_s * s0
    }

    /// Product formed at each time since mixing, uM (times at or before 0 give 0).
    pub fn product_at(&self, times_since_mixing_s: &[f64]) -> Result<Vec<f64>, String> {
        let s0 = self.substrate_initial_um;
        if s0 <= 0.0 {
            return Ok(vec![0.0; times_since_mixing_s.len()]);
        }
        if self.vmax_um_per_s == 0.0 {
            // First order only: exact.
            return Ok(times_since_mixing_s
                .iter()
                .map(|&t| s0 * -(-self.spontaneous_per_s * t.max(0.0)).exp_m1())
                .collect());
        }
        let last = times_since_mixing_s.iter().copied().fold(0.0f64, f64::max);
        if last <= 0.0 {
            return Ok(vec![0.0; times_since_mixing_s.len()]);
        }
        // Integrate a little past the last read so that no read falls on the last dense step's end.
        let end = last * 1.01;
        let mut output: ContinuousOutputModel<f64, Vector2<f64>> = ContinuousOutputModel::new();
        let mut solver = Dopri5::new(
            RateLaw(*self),
            0.0,
            end,
            end,
            Vector2::new(s0, 0.0),
            RELATIVE_TOLERANCE,
            RELATIVE_TOLERANCE * 1e-3 * s0,
        );
        solver
            .integrate_with_continuous_output_model(&mut output)
            .map_err(|error| error.to_string())?;
        times_since_mixing_s
            .iter()
            .map(|&t| {
                if t <= 0.0 {
                    return Ok(0.0);
                }
                output
                    .evaluate(t)
                    .map(|y| y[1].clamp(0.0, s0))
                    .ok_or_else(|| format!("no value at t = {t} s in the integration's output"))
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    /// The integration against the integrated Michaelis-Menten table (shared/reference/
    /// integrated-mm.txt, mpmath 50 digits): S0 = 10, Km = 1, Vmax = 1, S = 5 at t = 5.6931471805599453
    /// and S = 1 at t = 11.302585092994046.
    #[test]
    #[allow(clippy::excessive_precision)]
    fn integration_matches_the_integrated_rate_law_table() {
        let kinetics = WellKinetics {
            substrate_initial_um: 10.0,
            km_um: 1.0,
            vmax_um_per_s: 1.0,
            lag_tau_s: 0.0,
            spontaneous_per_s: 0.0,
        };
        let product = kinetics
            .product_at(&[5.6931471805599453, 11.302585092994046])
            .unwrap();
        assert_relative_eq!(product[0], 5.0, max_relative = 1e-8);
        assert_relative_eq!(product[1], 9.0, max_relative = 1e-8);
    }

    #[test]
    fn spontaneous_only_is_first_order_and_a_lag_slows_the_start() {
        let control = WellKinetics {
            substrate_initial_um: 100.0,
            km_um: 1.0,
            vmax_um_per_s: 0.0,
            lag_tau_s: 0.0,
            spontaneous_per_s: 1e-4,
        };
        let product = control.product_at(&[0.0, 1000.0]).unwrap();
        assert_eq!(product[0], 0.0);
        assert_relative_eq!(product[1], 100.0 * (1.0 - (-0.1f64).exp()), max_relative = 1e-14);
        let plain = WellKinetics {
            substrate_initial_um: 100.0,
            km_um: 50.0,
            vmax_um_per_s: 0.1,
            lag_tau_s: 0.0,
            spontaneous_per_s: 0.0,
        };
        let lagging = WellKinetics {
            lag_tau_s: 60.0,
            ..plain
        };
        let early = plain.product_at(&[30.0]).unwrap()[0];
        let early_lagging = lagging.product_at(&[30.0]).unwrap()[0];
        assert!(early_lagging < 0.3 * early, "{early_lagging} vs {early}");
    }
}
