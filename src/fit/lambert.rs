//! The principal Lambert W branch and the Wright omega function, shared by the plate simulator and
//! the progress-curve fits (one implementation, so simulated truth and fitted model agree exactly).
//!
//! Formulas: `W0(x)` solves `W e^W = x` with `W >= -1` on `[-1/e, inf)` (DLMF 4.13); the Wright
//! omega function is `omega(z) = W0(exp(z))`, the real solution of `w + ln w = z`.
//!
//! Method: for `x` in the double range, `W0` is the `lambert_w` crate's `lambert_w0` (Fukushima's
//! piecewise minimax rational approximation, about 50 bits; measured here to agree with a log-space
//! Halley iteration to 2.5e-15). `omega(z)` for `z <= WRIGHT_OMEGA_ITERATION_FROM_Z` is
//! `W0(exp(z))`; above it `exp(z)` would overflow (beyond about 709.78), so Halley's iteration on
//! `f(w) = w + ln w - z` (`f' = 1 + 1/w`, `f'' = -1/w^2`) runs from `w = z - ln z`, converging
//! cubically (2-3 steps to double precision).
//!
//! Assumptions: real arguments; `W0` is real only for `x >= -1/e` (NaN below).
//!
//! References: Corless, Gonnet, Hare, Jeffrey and Knuth 1996, Adv Comput Math 5:329 (Lambert W);
//! Fukushima 2013, J Comput Appl Math 244:77 (the approximation the crate implements, from
//! memory); Corless and Jeffrey 2002, "The Wright omega function", LNCS 2385 (omega and
//! `omega(z) ~ z - ln z` at large z, from memory); DLMF 4.13; Halley's method (common practice).

/// Above this z, [`wright_omega`] solves `w + ln w = z` itself instead of evaluating
/// `W0(exp(z))`. `exp(z)` overflows a double beyond about 709.78; 500 leaves a wide margin while
/// keeping the direct Lambert W route for every argument it handles without trouble.
pub const WRIGHT_OMEGA_ITERATION_FROM_Z: f64 = 500.0;

/// Halley steps allowed for the large-z Wright omega; from the start `z - ln z` the error is
/// already below `ln z / z`, and Halley's cubic convergence reaches double precision in 2-3 steps.
const WRIGHT_OMEGA_MAX_HALLEY_STEPS: usize = 12;

/// The principal branch `W0(x)`, `x >= -1/e`; NaN below `-1/e` or for NaN. An argument within a
/// few ulps below the branch point (the double nearest -1/e lies just beyond it) gives -1.
pub fn lambert_w0(x: f64) -> f64 {
    let w = lambert_w::lambert_w0(x);
    let branch_point = -1.0 / std::f64::consts::E;
    if w.is_nan() && (x - branch_point).abs() <= 4.0 * f64::EPSILON * branch_point.abs() {
        // W0 = -1 + sqrt(2 (1 + e x)) + ..., so within 4 ulps of -1/e, -1 is right to ~3e-8.
        return -1.0;
    }
    w
}

/// The lower branch `W-1(x)`, `-1/e <= x < 0`; NaN elsewhere. Only the tests and diagnostics use
/// it (a progress curve lives on the principal branch).
pub fn lambert_w_minus_one(x: f64) -> f64 {
    lambert_w::lambert_wm1(x)
}

/// The Wright omega function `omega(z) = W0(exp(z))`, the real solution of `w + ln w = z`.
///
/// Returns NaN for a NaN argument, `+inf` for `+inf`, and 0 where `exp(z)` underflows (there
/// omega(z) = exp(z) is below the smallest double anyway).
pub fn wright_omega(z: f64) -> f64 {
    if z.is_nan() {
        return f64::NAN;
    }
    if z == f64::INFINITY {
        return f64::INFINITY;
    }
    if z <= WRIGHT_OMEGA_ITERATION_FROM_Z {
        return lambert_w::lambert_w0(z.exp());
    }
    wright_omega_by_halley(z)
}

/// Halley's iteration for `w + ln w = z`, valid for z > 1 (there w > 1 and the start `z - ln z`
/// is positive).
fn wright_omega_by_halley(z: f64) -> f64 {
    let mut w = z - z.ln();
    for _ in 0..WRIGHT_OMEGA_MAX_HALLEY_STEPS {
        let residual = w + w.ln() - z;
        let first_derivative = 1.0 + 1.0 / w;
        let second_derivative = -1.0 / (w * w);
        let step = residual / (first_derivative - residual * second_derivative / (2.0 * first_derivative));
        w -= step;
        if step.abs() <= 2.0 * f64::EPSILON * w.abs() {
            break;
        }
    }
    w
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    #[allow(clippy::excessive_precision, clippy::approx_constant)]
    fn principal_branch_matches_mpmath_40_digits() {
        // Source: shared/reference/lambert-w.txt: "Lambert W reference values computed with
        // mpmath 1.4.1 at 40 significant digits (mp.lambertw)"; the subset W0(0), W0(e), W0(1),
        // W0(-ln2/2), W0(0.25), W0(-0.25), W0(-1e-4), W0(1000), W0(pi) is also verified there
        // against scipy/scipy scipy/special/tests/test_lambertw.py.
        let e = std::f64::consts::E;
        let rows: [(f64, f64); 18] = [
            (1.0, 0.5671432904097838729999687),
            (e, 1.0),
            (10.0, 1.745528002740699383074301),
            (100.0, 3.385630140290050184888244),
            (1000.0, 5.249602852401596227126056),
            (std::f64::consts::PI, 1.073658194796149172092178),
            (0.25, 0.2038883547022401644431818),
            (-0.25, -0.3574029561813889030688111),
            (-1e-4, -0.0001000100015002667187608023),
            (-std::f64::consts::LN_2 / 2.0, -0.6931471805599453094172321),
            (1e-10, 9.99999999900000000015e-11),
            (1e10, 20.02868541330495078123431),
            (1e100, 224.8431064451185015393731),
            (0.5, 0.3517337112491958260249093),
            (2.0, 0.8526055020137254913464724),
            (-0.3, -0.4894022271802149690362313),
            (-1.0 / e + 1e-10, -0.9999766837414008807143234),
            (0.0, 0.0),
        ];
        for (x, expected) in rows {
            let w = lambert_w0(x);
            if expected == 0.0 {
                assert_eq!(w, 0.0);
            } else if x > -0.36 {
                assert_relative_eq!(w, expected, max_relative = 1e-14);
            } else {
                // Next to the branch point W0 is sqrt-sensitive to x: the double nearest
                // -1/e + 1e-10 is off by ~1e-17 in x, so W0 moves by ~1e-17 / sqrt(2e-10 e).
                assert_relative_eq!(w, expected, max_relative = 1e-8);
            }
        }
        // Source: lambert-w.txt: W0(-1/e) = -1 exactly (DLMF 4.13 branch point).
        assert_relative_eq!(lambert_w0(-1.0 / e), -1.0, max_relative = 1e-7);
        assert!(lambert_w0(-0.5).is_nan(), "no real W0 below -1/e");
    }

    #[test]
    #[allow(clippy::excessive_precision)]
    fn lower_branch_matches_mpmath_40_digits() {
        // Source: shared/reference/lambert-w.txt (mpmath 1.4.1, 40 digits; W-1(-0.25) and
        // W-1(-1e-4) also in scipy's test_lambertw.py).
        for (x, expected) in [
            (-0.25f64, -2.153292364110349649169099f64),
            (-1e-4, -11.66711453256635441837883),
            (-0.3, -1.78133702342162761197417),
        ] {
            assert_relative_eq!(lambert_w_minus_one(x), expected, max_relative = 1e-14);
        }
    }

    #[test]
    #[allow(clippy::excessive_precision)]
    fn wright_omega_where_exp_overflows_matches_mpmath() {
        // Source: shared/reference/integrated-mm.txt, "Wright-omega form (scipy.special.wrightomega)
        // vs mpmath" section: S = Km omega(z) with z = ln(S0/Km) + (S0 - V t)/Km, Km = 1.
        let rows: [(f64, f64, f64); 4] = [
            (1000.0, 10.010050335853501, 989.99999999999995),
            (1000.0, 500.69314718055995, 500.00000000000003),
            (100.0, 50.69314718055995, 50.0),
            (1000000.0, 500000.0, 500000.69314579427),
        ];
        for (s0, t, s_mpmath) in rows {
            let z = s0.ln() + (s0 - t);
            assert_relative_eq!(wright_omega(z), s_mpmath, max_relative = 1e-13);
        }
        assert!(
            996f64.exp().is_infinite(),
            "the first row exercises the overflow case"
        );
    }

    #[test]
    fn both_routes_agree_where_both_apply() {
        // Both routes compute the same function; on 1 < z < 700 exp(z) is finite.
        for step in 0..700 {
            let z = 1.0 + f64::from(step);
            assert_relative_eq!(
                wright_omega_by_halley(z),
                lambert_w::lambert_w0(z.exp()),
                max_relative = 1e-13
            );
        }
    }

    #[test]
    fn wright_omega_solves_its_defining_equation() {
        for z in [-20.0, -1.0, 0.0, 0.5, 3.0, 40.0, 499.0, 501.0, 1.0e4, 1.0e8] {
            let w = wright_omega(z);
            let residual = w + w.ln() - z;
            assert!(
                residual.abs() <= 1e-13 * (1.0 + z.abs()),
                "z = {z}: residual {residual}"
            );
        }
        assert_eq!(wright_omega(-800.0), 0.0);
        assert!(wright_omega(f64::NAN).is_nan());
        assert_eq!(wright_omega(f64::INFINITY), f64::INFINITY);
    }
}
