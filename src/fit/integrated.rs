//! The closed-form Michaelis-Menten progress curve used by the fits and the simulator: the
//! substrate left at time t through the Wright omega function, the implicit (time from substrate)
//! form, and the curve's derivatives with respect to kcat, Km and time by implicit differentiation.
//!
//! Formula (integrated Michaelis-Menten, dS/dt = -Vmax S / (Km + S), S(0) = S0, Vmax = kcat E0):
//! implicit `F(S) = (S0 - S) + Km ln(S0 / S) - Vmax t = 0`, explicit
//! `S(t) = Km W0((S0 / Km) exp((S0 - Vmax t) / Km)) = Km omega(ln(S0 / Km) + (S0 - Vmax t) / Km)`.
//!
//! Derivatives: differentiating F(S(theta), theta) = 0 gives `dS/dtheta = -(dF/dtheta) / (dF/dS)`
//! with `dF/dS = -(S + Km) / S`, so with `g = S / (S + Km)`:
//! `dS/dKm = g ln(S0 / S)`, `dS/dVmax = -g t`, `dS/dkcat = -g E0 t`, `dS/dt = -g Vmax`
//! (the rate law itself). No finite differences are involved, so the Jacobian is exact to rounding.
//!
//! Assumptions: irreversible reaction, no product inhibition, constant enzyme, [E] much less than
//! [S] (the Michaelis-Menten quasi-steady state). Units only need to be consistent.
//!
//! References: Schnell and Mendoza 1997, J Theor Biol 187:207 (closed form with Lambert W);
//! Goudar, Sonnad and Duggleby 1999, Biochim Biophys Acta 1429:377 and Goudar et al. 2004,
//! J Microbiol Methods 59:317 (Lambert W in progress-curve fitting, large-argument handling);
//! implicit differentiation (common practice).

use super::lambert::wright_omega;

/// Substrate left at time `t` of a Michaelis-Menten progress curve started at `s0`:
/// `S(t) = Km omega(ln(S0/Km) + (S0 - Vmax t)/Km)` (equivalently `Km W0((S0/Km) exp((S0 - Vmax
/// t)/Km))`, see the module notes).
///
/// Requires `km > 0`, `s0 >= 0`, `vmax >= 0`, `t >= 0`, all finite; returns NaN otherwise. With
/// `vmax = 0` or `t = 0` the substrate is exactly `s0`.
pub fn substrate_remaining(s0: f64, km: f64, vmax: f64, t: f64) -> f64 {
    let inputs_valid = [s0, km, vmax, t].iter().all(|value| value.is_finite())
        && km > 0.0
        && s0 >= 0.0
        && vmax >= 0.0
        && t >= 0.0;
    if !inputs_valid {
        return f64::NAN;
    }
    if s0 == 0.0 {
        return 0.0;
    }
    if vmax == 0.0 || t == 0.0 {
        return s0;
    }
    let z = (s0 / km).ln() + (s0 - vmax * t) / km;
    // The solution can only fall from s0; the clamp removes a last-bit overshoot at tiny t.
    (km * wright_omega(z)).min(s0)
}

/// The implicit form: the time at which the substrate has fallen from `s0` to `s`,
/// `t = ((S0 - S) + Km ln(S0 / S)) / Vmax`. Requires `0 < s <= s0`, `km > 0`, `vmax > 0`;
/// returns NaN otherwise.
pub fn time_to_reach_substrate(s0: f64, km: f64, vmax: f64, s: f64) -> f64 {
    let inputs_valid = [s0, km, vmax, s].iter().all(|value| value.is_finite())
        && km > 0.0
        && vmax > 0.0
        && s > 0.0
        && s <= s0;
    if !inputs_valid {
        return f64::NAN;
    }
    ((s0 - s) + km * (s0 / s).ln()) / vmax
}

/// The substrate at one time and its derivatives (see the module notes).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CurvePoint {
    /// Substrate left.
    pub substrate: f64,
    /// dS/dkcat.
    pub d_kcat: f64,
    /// dS/dKm.
    pub d_km: f64,
    /// dS/dt (the rate law: minus the rate at that moment).
    pub d_time: f64,
}

/// The closed-form curve at time `t` with its derivatives with respect to kcat, Km and t, for a
/// well started at `s0` with enzyme `e0` (same concentration unit as `s0` and `km`). Before the
/// start (`t <= 0`) the substrate is `s0` and nothing moves. Invalid inputs give NaN.
pub fn michaelis_menten_point(s0: f64, e0: f64, kcat: f64, km: f64, t: f64) -> CurvePoint {
    let vmax = kcat * e0;
    if t <= 0.0 && t.is_finite() {
        return CurvePoint {
            substrate: s0,
            d_kcat: 0.0,
            d_km: 0.0,
            d_time: -vmax * s0 / (km + s0),
        };
    }
    let substrate = substrate_remaining(s0, km, vmax, t);
    if !substrate.is_finite() {
        return CurvePoint {
            substrate: f64::NAN,
            d_kcat: f64::NAN,
            d_km: f64::NAN,
            d_time: f64::NAN,
        };
    }
    if substrate <= 0.0 {
        // All substrate gone (underflow): S ln(S0/S) -> 0, and nothing depends on the constants.
        return CurvePoint {
            substrate: 0.0,
            d_kcat: 0.0,
            d_km: 0.0,
            d_time: 0.0,
        };
    }
    let share = substrate / (substrate + km);
    CurvePoint {
        substrate,
        d_kcat: -share * e0 * t,
        d_km: share * (s0 / substrate).ln(),
        d_time: -share * vmax,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::lambert::WRIGHT_OMEGA_ITERATION_FROM_Z;
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
    fn derivatives_match_central_differences() {
        // Implicit-differentiation derivatives against central differences (common practice:
        // step h = 1e-6 relative, error O(h^2) ~ 1e-12 relative, rounding ~ eps / h ~ 1e-10).
        for (s0, e0, kcat, km, t) in [
            (5.0, 0.01, 20.0, 40.0, 300.0),
            (400.0, 0.02, 15.0, 30.0, 600.0),
            (10.0, 0.1, 50.0, 2.0, 3.0),
            (2000.0, 0.001, 100.0, 5.0, 1000.0),
        ] {
            let point = michaelis_menten_point(s0, e0, kcat, km, t);
            let central = |f: &dyn Fn(f64) -> f64, x: f64| {
                let h = 1e-6 * x;
                (f(x + h) - f(x - h)) / (2.0 * h)
            };
            let by_kcat = central(&|k| michaelis_menten_point(s0, e0, k, km, t).substrate, kcat);
            let by_km = central(&|k| michaelis_menten_point(s0, e0, kcat, k, t).substrate, km);
            let by_time = central(&|u| michaelis_menten_point(s0, e0, kcat, km, u).substrate, t);
            let scale = point.substrate.max(1e-300);
            assert!(
                (point.d_kcat - by_kcat).abs() * kcat <= 1e-7 * scale,
                "kcat {point:?} {by_kcat}"
            );
            assert!(
                (point.d_km - by_km).abs() * km <= 1e-7 * scale,
                "Km {point:?} {by_km}"
            );
            assert!(
                (point.d_time - by_time).abs() * t <= 1e-7 * scale,
                "t {point:?} {by_time}"
            );
        }
    }

    #[test]
    fn before_the_start_nothing_has_turned_over() {
        let point = michaelis_menten_point(10.0, 0.01, 5.0, 10.0, -2.0);
        assert_eq!(point.substrate, 10.0);
        assert_eq!(point.d_kcat, 0.0);
        assert_relative_eq!(point.d_time, -0.025, max_relative = 1e-12);
        assert!(michaelis_menten_point(10.0, 0.01, 5.0, -1.0, 3.0)
            .substrate
            .is_nan());
    }

    proptest! {
        #[test]
        fn derivative_in_time_is_the_rate_law(
            s0 in 0.1f64..2000.0,
            km in 0.5f64..2000.0,
            kcat in 0.1f64..100.0,
            fraction in 0.0f64..0.95,
        ) {
            let e0 = 0.01;
            let vmax = kcat * e0;
            // Pick t from a substrate level through the implicit form.
            let s = s0 * (1.0 - fraction);
            let t = time_to_reach_substrate(s0, km, vmax, s);
            prop_assume!(t.is_finite() && t > 0.0);
            let point = michaelis_menten_point(s0, e0, kcat, km, t);
            prop_assert!((point.substrate - s).abs() <= 1e-9 * s0);
            let rate = vmax * point.substrate / (km + point.substrate);
            prop_assert!((point.d_time + rate).abs() <= 1e-12 * rate.max(1e-300));
        }
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
