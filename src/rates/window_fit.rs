//! Ordinary least-squares straight lines and quadratics over growing windows of a time series,
//! computed from running sums so that every window of a well costs O(1) after an O(n) pass.
//!
//! Time is shifted to the window's first point and scaled by the series' span, and the signal is
//! shifted by its first value, before the sums are formed: this keeps the normal equations well
//! conditioned and the residual sum of squares free of cancellation.
//!
//! References: Draper and Smith, Applied Regression Analysis (3rd ed., 1998), ch. 1 and 5
//! (straight line and polynomial least squares, standard errors from s^2 (X'X)^-1).

/// A straight line y = intercept + slope * t fitted by ordinary least squares.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct LineFit {
    /// dy/dt.
    pub slope: f64,
    /// Standard error of the slope, sqrt(s^2 / Sxx).
    pub slope_se: f64,
    /// y at t = 0 (in the caller's time origin).
    pub intercept: f64,
    /// Coefficient of determination, 1 - RSS/TSS (1 for a flat perfect line).
    pub r2: f64,
    /// Residual standard deviation, sqrt(RSS / (n - 2)).
    pub residual_sd: f64,
    /// Points used.
    pub n_points: usize,
}

/// The curvature test of a quadratic y = a + b u + c u^2 over a window.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CurvatureTest {
    /// Sign of the quadratic term: positive means the slope rises through the window.
    pub curvature: f64,
    /// t statistic of the quadratic term, c / se(c), with n - 3 degrees of freedom.
    pub t_statistic: f64,
    /// The quadratic term's whole effect over the window, |c| u_last^2, relative to the RMS of
    /// the signal's rise: below about 1e-9 the "curvature" is rounding, not chemistry, and its t
    /// statistic (0/0 on exact data) means nothing.
    pub relative_size: f64,
}

impl CurvatureTest {
    /// Whether the quadratic term is significant at the given two-sided critical value and
    /// larger than rounding.
    pub fn is_significant(&self, critical: f64) -> bool {
        self.t_statistic.abs() > critical && self.relative_size > 1e-9
    }
}

/// A quadratic y = a + b t + c t^2 over a window, in the caller's time, with the covariance of
/// (b, c) for the slope at any time: `dy/dt (t) = b + 2 c t`,
/// `var = var(b) + 4 t cov(b, c) + 4 t^2 var(c)`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct QuadraticFit {
    /// Coefficient of t.
    pub linear: f64,
    /// Coefficient of t^2.
    pub quadratic: f64,
    /// Covariance matrix of (linear, quadratic): `[var b, cov bc, var c]`.
    pub covariance: [f64; 3],
    /// Residual degrees of freedom, n - 3.
    pub degrees_of_freedom: usize,
}

impl QuadraticFit {
    /// The slope at time `t` and its standard error.
    pub fn slope_at(&self, t: f64) -> (f64, f64) {
        let [var_b, cov_bc, var_c] = self.covariance;
        let slope = self.linear + 2.0 * self.quadratic * t;
        let variance = var_b + 4.0 * t * cov_bc + 4.0 * t * t * var_c;
        (slope, variance.max(0.0).sqrt())
    }
}

/// Running sums of a series, for O(1) least-squares fits over any prefix window `[0, k]`
/// of points starting at index `start`.
#[derive(Debug, Clone)]
pub struct WindowSums {
    t_origin: f64,
    t_scale: f64,
    y_origin: f64,
    // Prefix sums; element k covers points 0..k (exclusive), so element 0 is all zeros.
    prefix: Vec<[f64; 9]>,
}

// Indices into a prefix-sum record.
const N: usize = 0;
const U: usize = 1;
const U2: usize = 2;
const U3: usize = 3;
const U4: usize = 4;
const Y: usize = 5;
const UY: usize = 6;
const U2Y: usize = 7;
const YY: usize = 8;

impl WindowSums {
    /// Builds the running sums of the points `(times[i], values[i])`. `times` must be increasing.
    pub fn new(times: &[f64], values: &[f64]) -> WindowSums {
        let t_origin = times.first().copied().unwrap_or(0.0);
        let span = times.last().copied().unwrap_or(0.0) - t_origin;
        let t_scale = if span > 0.0 { span } else { 1.0 };
        let y_origin = values.first().copied().unwrap_or(0.0);
        let mut prefix = Vec::with_capacity(times.len() + 1);
        let mut running = [0.0f64; 9];
        prefix.push(running);
        for (&t, &value) in times.iter().zip(values) {
            let u = (t - t_origin) / t_scale;
            let y = value - y_origin;
            let u2 = u * u;
            running[N] += 1.0;
            running[U] += u;
            running[U2] += u2;
            running[U3] += u2 * u;
            running[U4] += u2 * u2;
            running[Y] += y;
            running[UY] += u * y;
            running[U2Y] += u2 * y;
            running[YY] += y * y;
            prefix.push(running);
        }
        WindowSums {
            t_origin,
            t_scale,
            y_origin,
            prefix,
        }
    }

    /// Number of points summed.
    pub fn len(&self) -> usize {
        self.prefix.len() - 1
    }

    /// Whether there are no points.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    fn window(&self, first: usize, last: usize) -> [f64; 9] {
        let (hi, lo) = (&self.prefix[last + 1], &self.prefix[first]);
        std::array::from_fn(|i| hi[i] - lo[i])
    }

    /// Straight-line fit over points `first..=last` (at least 3 points for a standard error).
    pub fn line(&self, first: usize, last: usize) -> Option<LineFit> {
        let s = self.window(first, last);
        let n = s[N];
        if n < 2.0 {
            return None;
        }
        let suu = s[U2] - s[U] * s[U] / n;
        if suu <= 0.0 {
            return None;
        }
        let suy = s[UY] - s[U] * s[Y] / n;
        let syy = s[YY] - s[Y] * s[Y] / n;
        let slope_u = suy / suu;
        let intercept_u = (s[Y] - slope_u * s[U]) / n;
        let rss = (syy - slope_u * suy).max(0.0);
        let dof = n - 2.0;
        let residual_sd = if dof > 0.0 { (rss / dof).sqrt() } else { 0.0 };
        let slope_se_u = if dof > 0.0 {
            (rss / dof / suu).sqrt()
        } else {
            f64::NAN
        };
        let r2 = if syy > 0.0 { 1.0 - rss / syy } else { 1.0 };
        // Back to the caller's units: y = y_origin + intercept_u + slope_u (t - t_origin)/t_scale.
        let slope = slope_u / self.t_scale;
        Some(LineFit {
            slope,
            slope_se: slope_se_u / self.t_scale,
            intercept: self.y_origin + intercept_u - slope * self.t_origin,
            r2,
            residual_sd,
            n_points: n as usize,
        })
    }

    /// The quadratic fit over points `first..=last` (at least 4 points), in the caller's time.
    pub fn quadratic(&self, first: usize, last: usize) -> Option<QuadraticFit> {
        let s = self.window(first, last);
        let n = s[N];
        if n < 4.0 {
            return None;
        }
        let gram = nalgebra::Matrix3::new(
            n, s[U], s[U2], //
            s[U], s[U2], s[U3], //
            s[U2], s[U3], s[U4],
        );
        let moments = nalgebra::Vector3::new(s[Y], s[UY], s[U2Y]);
        let inverse = gram.try_inverse()?;
        let beta = inverse * moments;
        let rss = (s[YY] - beta.dot(&moments)).max(0.0);
        let variance = rss / (n - 3.0);
        // In scaled time u = (t - t0)/h: y = a + b_u u + c_u u^2. In the caller's time t:
        // c = c_u / h^2 and b = b_u / h - 2 c t0; cov follows from the same linear map.
        let h = self.t_scale;
        let t0 = self.t_origin;
        let (var_bu, cov_bcu, var_cu) = (
            variance * inverse[(1, 1)],
            variance * inverse[(1, 2)],
            variance * inverse[(2, 2)],
        );
        let c = beta[2] / (h * h);
        let b = beta[1] / h - 2.0 * c * t0;
        // b = b_u/h - 2 t0 c_u/h^2, c = c_u/h^2.
        let (g_b, g_c) = (1.0 / h, -2.0 * t0 / (h * h));
        let var_b = g_b * g_b * var_bu + 2.0 * g_b * g_c * cov_bcu + g_c * g_c * var_cu;
        let cov_bc = (g_b * cov_bcu + g_c * var_cu) / (h * h);
        let var_c = var_cu / (h * h * h * h);
        Some(QuadraticFit {
            linear: b,
            quadratic: c,
            covariance: [var_b, cov_bc, var_c],
            degrees_of_freedom: n as usize - 3,
        })
    }

    /// The quadratic term's t test over points `first..=last` (at least 4 points).
    pub fn curvature(&self, first: usize, last: usize) -> Option<CurvatureTest> {
        let s = self.window(first, last);
        let n = s[N];
        if n < 4.0 {
            return None;
        }
        let gram = nalgebra::Matrix3::new(
            n, s[U], s[U2], //
            s[U], s[U2], s[U3], //
            s[U2], s[U3], s[U4],
        );
        let moments = nalgebra::Vector3::new(s[Y], s[UY], s[U2Y]);
        let inverse = gram.try_inverse()?;
        let beta = inverse * moments;
        let rss = (s[YY] - beta.dot(&moments)).max(0.0);
        let variance = rss / (n - 3.0);
        let se_c = (variance * inverse[(2, 2)]).sqrt();
        let t_statistic = if se_c > 0.0 {
            beta[2] / se_c
        } else if beta[2] == 0.0 {
            0.0
        } else {
            beta[2].signum() * f64::INFINITY
        };
        let last_u = self.prefix[last + 1][U] - self.prefix[last][U];
        let scale = (s[YY] / n).sqrt();
        let relative_size = if scale > 0.0 {
            beta[2].abs() * last_u * last_u / scale
        } else {
            0.0
        };
        Some(CurvatureTest {
            curvature: beta[2],
            t_statistic,
            relative_size,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn line_matches_closed_form_on_exact_data() {
        let times: Vec<f64> = (0..10).map(|i| 30.0 * i as f64 + 15.0).collect();
        let values: Vec<f64> = times.iter().map(|t| 0.05 + 0.002 * t).collect();
        let sums = WindowSums::new(&times, &values);
        let fit = sums.line(0, 9).unwrap();
        assert_relative_eq!(fit.slope, 0.002, max_relative = 1e-10);
        assert_relative_eq!(fit.intercept, 0.05, max_relative = 1e-9);
        assert!(fit.slope_se < 1e-12);
        assert_relative_eq!(fit.r2, 1.0, epsilon = 1e-12);
    }

    /// Reference: the textbook closed form for the slope's standard error, checked on a small
    /// hand-computable set (x = 1..5, y = 2, 4, 5, 4, 5): slope 0.6, intercept 2.2, RSS 2.4,
    /// s^2 = 0.8, Sxx = 10, se = sqrt(0.08) (worked by hand; common practice formula).
    #[test]
    fn slope_standard_error_by_hand() {
        let sums = WindowSums::new(&[1.0, 2.0, 3.0, 4.0, 5.0], &[2.0, 4.0, 5.0, 4.0, 5.0]);
        let fit = sums.line(0, 4).unwrap();
        assert_relative_eq!(fit.slope, 0.6, max_relative = 1e-12);
        assert_relative_eq!(fit.intercept, 2.2, max_relative = 1e-12);
        assert_relative_eq!(fit.slope_se, 0.08f64.sqrt(), max_relative = 1e-12);
        assert_relative_eq!(fit.r2, 1.0 - 2.4 / 6.0, max_relative = 1e-12);
    }

    #[test]
    fn sub_windows_agree_with_fresh_fits() {
        let times: Vec<f64> = (0..30).map(|i| 20.0 * i as f64).collect();
        let values: Vec<f64> = times
            .iter()
            .map(|t| 1.0 + 1e-3 * t - 2e-7 * t * t + (t * 0.37).sin() * 1e-3)
            .collect();
        let all = WindowSums::new(&times, &values);
        let fresh = WindowSums::new(&times[..12], &values[..12]);
        let a = all.line(0, 11).unwrap();
        let b = fresh.line(0, 11).unwrap();
        assert_relative_eq!(a.slope, b.slope, max_relative = 1e-9);
        assert_relative_eq!(a.slope_se, b.slope_se, max_relative = 1e-7);
    }

    #[test]
    fn curvature_sign_and_significance() {
        let times: Vec<f64> = (0..20).map(|i| 30.0 * i as f64).collect();
        let falling: Vec<f64> = times.iter().map(|t| 0.1 + 1e-3 * t - 1e-6 * t * t).collect();
        let rising: Vec<f64> = times.iter().map(|t| 0.1 + 1e-3 * t + 1e-6 * t * t).collect();
        let noise: Vec<f64> = (0..20).map(|i| if i % 2 == 0 { 1e-4 } else { -1e-4 }).collect();
        let falling: Vec<f64> = falling.iter().zip(&noise).map(|(a, b)| a + b).collect();
        let rising: Vec<f64> = rising.iter().zip(&noise).map(|(a, b)| a + b).collect();
        let down = WindowSums::new(&times, &falling).curvature(0, 19).unwrap();
        let up = WindowSums::new(&times, &rising).curvature(0, 19).unwrap();
        assert!(down.curvature < 0.0 && down.t_statistic < -10.0);
        assert!(up.curvature > 0.0 && up.t_statistic > 10.0);
    }

    #[test]
    fn quadratic_recovers_an_exact_parabola_and_its_tangent() {
        // y = 2 + 0.5 t - 0.001 t^2 at t = 100..190: the slope at t = -30 is 0.5 + 0.06 = 0.56.
        let times: Vec<f64> = (0..10).map(|i| 100.0 + 10.0 * f64::from(i)).collect();
        let values: Vec<f64> = times.iter().map(|t| 2.0 + 0.5 * t - 0.001 * t * t).collect();
        let fit = WindowSums::new(&times, &values).quadratic(0, 9).unwrap();
        assert_relative_eq!(fit.linear, 0.5, max_relative = 1e-9);
        assert_relative_eq!(fit.quadratic, -0.001, max_relative = 1e-9);
        let (slope, se) = fit.slope_at(-30.0);
        assert_relative_eq!(slope, 0.56, max_relative = 1e-9);
        // Exact data: only rounding remains (the RSS of the normal equations cancels to ~1e-12).
        assert!(se < 1e-5 * slope, "{se}");
    }

    /// The slope's standard error at any time, against a direct least-squares fit in the caller's
    /// time by nalgebra (a general-purpose reference).
    #[test]
    fn quadratic_slope_standard_error_matches_a_direct_fit() {
        let times: Vec<f64> = (0..12).map(|i| 30.0 + 15.0 * f64::from(i)).collect();
        let values: Vec<f64> = times
            .iter()
            .enumerate()
            .map(|(i, t)| 0.1 + 0.002 * t - 1e-6 * t * t + 1e-3 * ((i as f64 * 2.3).sin()))
            .collect();
        let fit = WindowSums::new(&times, &values).quadratic(0, 11).unwrap();
        let x = nalgebra::DMatrix::from_fn(12, 3, |r, c| times[r].powi(c as i32));
        let y = nalgebra::DVector::from_vec(values.clone());
        let xtx_inv = (x.transpose() * &x).try_inverse().unwrap();
        let beta = &xtx_inv * x.transpose() * &y;
        let residuals = &y - &x * &beta;
        let s2 = residuals.dot(&residuals) / 9.0;
        for t in [-60.0, 0.0, 100.0] {
            let g = nalgebra::DVector::from_vec(vec![0.0, 1.0, 2.0 * t]);
            let expected_se = (s2 * (g.transpose() * &xtx_inv * &g)[(0, 0)]).sqrt();
            let expected_slope = beta[1] + 2.0 * beta[2] * t;
            let (slope, se) = fit.slope_at(t);
            assert_relative_eq!(slope, expected_slope, max_relative = 1e-7);
            assert_relative_eq!(se, expected_se, max_relative = 1e-6);
        }
    }
}
