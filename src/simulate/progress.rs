//! Closed-form Michaelis-Menten progress curves for the plate simulator: the substrate left at a
//! time t through the principal Lambert W branch, with the Wright omega function where the Lambert W
//! argument would overflow, plus the implicit (time-from-substrate) form and the effective time of a
//! well whose activity ramps up (lag).
//!
//! Formula (integrated Michaelis-Menten, dS/dt = -Vmax S / (Km + S), S(0) = S0):
//! implicit `Vmax t = (S0 - S) + Km ln(S0 / S)`, explicit
//! `S(t) = Km W0((S0 / Km) exp((S0 - Vmax t) / Km))`.
//! Writing the argument as `exp(z)` with `z = ln(S0 / Km) + (S0 - Vmax t) / Km` gives
//! `S(t) = Km omega(z)`, where omega is the Wright omega function, `omega(z) = W0(exp(z))`, the
//! solution of `w + ln w = z`. For large z (large S0/Km early in the curve) `exp(z)` overflows a
//! double, but omega(z) is about `z - ln z` and is found by Halley steps on `w + ln w - z = 0`.
//!
//! Assumptions: irreversible reaction, no product inhibition, constant enzyme, [E] much less than
//! [S] (the Michaelis-Menten quasi-steady state). Units only need to be consistent (the simulator
//! uses uM, s and uM/s).
//!
//! References: Schnell and Mendoza 1997, J Theor Biol 187:207 (closed form with Lambert W);
//! Goudar, Sonnad and Duggleby 1999, Biochim Biophys Acta 1429:377; Goudar et al. 2004,
//! J Microbiol Methods 59:317 (Lambert W and large-argument handling); Corless and Jeffrey 2002,
//! "The Wright omega function" (LNCS 2385), for omega and `omega(z) ~ z - ln z` at large z (from
//! memory); Halley's method for the root (common practice). The omega evaluator itself lives in
//! [`crate::progress::lambert`], shared with the progress-curve fits.

pub use crate::progress::closed_form::{substrate_remaining, time_to_reach_substrate};
pub use crate::progress::lambert::{wright_omega, WRIGHT_OMEGA_ITERATION_FROM_Z};

/// Effective time of a well whose activity ramps as `a(t) = 1 - exp(-t/tau)` (a lag: slow
/// mixing, hysteretic activation). With `dS/dt = -a(t) Vmax S/(Km + S)` the integrated rate law
/// is the plain one with `Vmax t` replaced by `Vmax theta(t)`, where
/// `theta(t) = integral_0^t a(u) du = t - tau (1 - exp(-t/tau))`, so the closed form still holds
/// exactly. `tau <= 0` means no lag (`theta = t`).
pub fn lag_effective_time(t: f64, tau: f64) -> f64 {
    if tau <= 0.0 {
        return t;
    }
    // -expm1(-x) = 1 - exp(-x) without cancellation at small t/tau.
    t - tau * (-(-t / tau).exp_m1())
}

/// Exact time integral of the substrate over a plain (no lag) progress curve from 0 to the time
/// when the substrate is `s`: `integral S dt = (Km (S0 - S) + (S0^2 - S^2)/2) / Vmax`, from
/// `dt = -(Km + S)/(Vmax S) dS`. Used to check the simulator's quadrature.
pub fn substrate_time_integral_exact(s0: f64, km: f64, vmax: f64, s: f64) -> f64 {
    (km * (s0 - s) + 0.5 * (s0 * s0 - s * s)) / vmax
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use proptest::prelude::*;

    /// One row of the integrated Michaelis-Menten reference table.
    struct ReferenceRow {
        s0: f64,
        km: f64,
        vmax: f64,
        t: f64,
        s_exact: f64,
    }

    fn row(s0: f64, km: f64, vmax: f64, t: f64, s_exact: f64) -> ReferenceRow {
        ReferenceRow {
            s0,
            km,
            vmax,
            t,
            s_exact,
        }
    }

    /// Source: shared/reference/integrated-mm.txt: mpmath 50 digits (S_exact column; the t values
    /// are the table's, computed from round S by the implicit form). Digits kept as printed there.
    #[allow(clippy::excessive_precision)]
    fn integrated_mm_reference_rows() -> Vec<ReferenceRow> {
        vec![
            row(1.0, 1.0, 1.0, 0.020050335853501459, 0.98999999999999999),
            row(1.0, 1.0, 1.0, 0.20536051565782625, 0.90000000000000002),
            row(1.0, 1.0, 1.0, 1.1931471805599453, 0.5),
            row(1.0, 1.0, 1.0, 3.2025850929940456, 0.10000000000000001),
            row(1.0, 1.0, 1.0, 5.5951701859880913, 0.01),
            row(10.0, 1.0, 1.0, 0.11005033585350105, 9.9000000000000004),
            row(10.0, 1.0, 1.0, 1.1053605156578263, 9.0),
            row(10.0, 1.0, 1.0, 5.6931471805599453, 5.0),
            row(10.0, 1.0, 1.0, 11.302585092994046, 1.0),
            row(10.0, 1.0, 1.0, 14.505170185988091, 0.10000000000000001),
            row(0.1, 1.0, 1.0, 0.01105033585350145, 0.099000000000000005),
            row(0.1, 1.0, 1.0, 0.11536051565782623, 0.090000000000000011),
            row(0.1, 1.0, 1.0, 0.74314718055994531, 0.050000000000000003),
            row(0.1, 1.0, 1.0, 2.3925850929940455, 0.010000000000000002),
            row(0.1, 1.0, 1.0, 4.7041701859880914, 0.001),
            row(100.0, 1.0, 1.0, 1.0100503358535014, 99.0),
            row(100.0, 1.0, 1.0, 10.105360515657826, 90.0),
            row(100.0, 1.0, 1.0, 50.693147180559945, 50.0),
            row(100.0, 1.0, 1.0, 92.302585092994046, 10.0),
            row(100.0, 1.0, 1.0, 103.60517018598809, 1.0),
            row(1000.0, 1.0, 1.0, 10.010050335853501, 990.0),
            row(1000.0, 1.0, 1.0, 100.10536051565783, 900.0),
            row(1000.0, 1.0, 1.0, 500.69314718055995, 500.0),
            row(1000.0, 1.0, 1.0, 902.30258509299405, 100.0),
            row(1000.0, 1.0, 1.0, 994.60517018598809, 10.0),
            row(0.2, 0.05, 0.01, 0.25025167926750742, 0.19800000000000001),
            row(0.2, 0.05, 0.01, 2.5268025782891302, 0.18000000000000002),
            row(0.2, 0.05, 0.01, 13.465735902799727, 0.10000000000000001),
            row(0.2, 0.05, 0.01, 29.512925464970228, 0.020000000000000004),
            row(0.2, 0.05, 0.01, 42.825850929940459, 0.002),
        ]
    }

    #[test]
    fn closed_form_matches_integrated_mm_table_mpmath_50_digits() {
        // Source: shared/reference/integrated-mm.txt: mpmath 50 digits.
        for reference in integrated_mm_reference_rows() {
            let s = substrate_remaining(reference.s0, reference.km, reference.vmax, reference.t);
            assert_relative_eq!(s, reference.s_exact, max_relative = 1e-10);
        }
    }

    #[test]
    #[allow(clippy::excessive_precision)]
    fn wright_omega_rows_where_exp_overflows_match_mpmath() {
        // Source: shared/reference/integrated-mm.txt: mpmath 50 digits, Wright-omega section. The
        // first and last rows have exp(z) beyond the double range (naive Lambert W overflows).
        let rows = [
            (
                1000.0f64,
                1.0f64,
                1.0f64,
                10.010050335853501f64,
                989.99999999999995f64,
            ),
            (1000.0, 1.0, 1.0, 500.69314718055995, 500.00000000000003),
            (100.0, 1.0, 1.0, 50.69314718055995, 50.0),
            (1000000.0, 1.0, 1.0, 500000.0, 500000.69314579427),
        ];
        for (s0, km, vmax, t, s_mpmath) in rows {
            let z: f64 = (s0 / km).ln() + (s0 - vmax * t) / km;
            let s = substrate_remaining(s0, km, vmax, t);
            assert_relative_eq!(s, s_mpmath, max_relative = 1e-10);
            if z > 709.8 {
                assert!(z.exp().is_infinite(), "row must exercise the overflow case");
                assert!(z > WRIGHT_OMEGA_ITERATION_FROM_Z);
            }
        }
    }

    #[test]
    fn degenerate_and_invalid_inputs() {
        assert_eq!(substrate_remaining(5.0, 2.0, 0.0, 100.0), 5.0);
        assert_eq!(substrate_remaining(5.0, 2.0, 1.0, 0.0), 5.0);
        assert_eq!(substrate_remaining(0.0, 2.0, 1.0, 3.0), 0.0);
        assert!(substrate_remaining(5.0, 0.0, 1.0, 3.0).is_nan());
        assert!(substrate_remaining(5.0, 1.0, -1.0, 3.0).is_nan());
        assert!(substrate_remaining(f64::NAN, 1.0, 1.0, 3.0).is_nan());
        assert!(time_to_reach_substrate(5.0, 1.0, 1.0, 6.0).is_nan());
    }

    #[test]
    fn lag_effective_time_ramps_then_runs_parallel() {
        // Early: theta ~ t^2 / (2 tau); late: theta ~ t - tau.
        let tau = 60.0;
        assert_relative_eq!(
            lag_effective_time(0.6, tau),
            0.6 * 0.6 / (2.0 * tau),
            max_relative = 1e-2
        );
        assert_relative_eq!(
            lag_effective_time(3000.0, tau),
            3000.0 - tau,
            max_relative = 1e-12
        );
        assert_eq!(lag_effective_time(42.0, 0.0), 42.0);
    }

    proptest! {
        #[test]
        fn implicit_form_reproduces_time_from_simulated_substrate(
            s0 in 0.01f64..5000.0,
            km in 0.5f64..2000.0,
            vmax in 1e-4f64..10.0,
            fraction_of_t99 in 0.0f64..1.0,
        ) {
            // Time range: up to 99% conversion, t99 = (0.99 S0 + Km ln 100) / Vmax.
            let t99 = (0.99 * s0 + km * 100f64.ln()) / vmax;
            let t = fraction_of_t99 * t99;
            let s = substrate_remaining(s0, km, vmax, t);
            prop_assert!(s > 0.0 && s <= s0);
            if s < s0 {
                let t_back = time_to_reach_substrate(s0, km, vmax, s);
                // An error of a few ulps of S0 in S moves t by about dS (1 + Km/S) / Vmax.
                let tolerance = 1e-12 * t99 + 64.0 * f64::EPSILON * s0 * (1.0 + km / s) / vmax;
                prop_assert!((t_back - t).abs() <= tolerance, "t {} back {} tol {}", t, t_back, tolerance);
            }
        }

        #[test]
        fn substrate_falls_monotonically(
            s0 in 0.01f64..5000.0,
            km in 0.5f64..2000.0,
            vmax in 1e-4f64..10.0,
            t in 0.0f64..1e5,
            dt in 0.0f64..1e3,
        ) {
            let earlier = substrate_remaining(s0, km, vmax, t);
            let later = substrate_remaining(s0, km, vmax, t + dt);
            prop_assert!(later <= earlier * (1.0 + 4.0 * f64::EPSILON));
        }
    }
}
