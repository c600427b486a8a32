//! The statistics every layer shares, written once: median, mean and sample standard deviation,
//! the ordinary least-squares straight line, Student's t, Fisher's F and chi-square quantiles, AICc
//! and the extra-sum-of-squares F test of nested models, percentiles of a sorted sample, and evenly
//! spaced picks from a long series.
//!
//! # Formulas
//! * Sample SD `s = sqrt(sum (x - mean)^2 / (n - 1))`, standard error of the mean `s / sqrt(n)`.
//! * Straight line by ordinary least squares: `slope = Sxy / Sxx`, `intercept = mean_y - slope mean_x`.
//! * `AICc = n ln(RSS/n) + 2k + 2k(k+1)/(n-k-1)` (Hurvich and Tsai 1989, Biometrika 76:297).
//! * Extra sum of squares, simpler model s (p_s parameters) nested in fuller model f (p_f):
//!   `F = ((RSS_s - RSS_f) / (p_f - p_s)) / (RSS_f / (n - p_f))` on `(p_f - p_s, n - p_f)` degrees of
//!   freedom, p value the upper tail (Bates and Watts 1988, Nonlinear Regression Analysis and Its
//!   Applications, Wiley).
//!
//! Quantiles come from `statrs`' distributions.

use statrs::distribution::{ChiSquared, ContinuousCDF, FisherSnedecor, StudentsT};

/// Why a quantile could not be computed (a caller's bug, not a user's input).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum QuantileError {
    /// Degrees of freedom that are zero, negative or not finite.
    #[error("degrees of freedom must be positive and finite for a quantile, not {dof}")]
    InvalidDegreesOfFreedom {
        /// The value given.
        dof: f64,
    },
    /// A probability outside (0, 1).
    #[error("a probability must lie strictly between 0 and 1, not {probability}")]
    InvalidProbability {
        /// The value given.
        probability: f64,
    },
}

/// The median of the finite values; `None` when there are none.
pub fn median(values: impl IntoIterator<Item = f64>) -> Option<f64> {
    let mut sorted: Vec<f64> = values.into_iter().filter(|v| v.is_finite()).collect();
    if sorted.is_empty() {
        return None;
    }
    sorted.sort_by(f64::total_cmp);
    let middle = sorted.len() / 2;
    Some(if sorted.len().is_multiple_of(2) {
        0.5 * (sorted[middle - 1] + sorted[middle])
    } else {
        sorted[middle]
    })
}

/// The mean; `None` for no values.
pub fn mean(values: &[f64]) -> Option<f64> {
    (!values.is_empty()).then(|| values.iter().sum::<f64>() / values.len() as f64)
}

/// Mean and sample SD of a sample.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Summary {
    /// How many values.
    pub n: usize,
    /// Their mean.
    pub mean: f64,
    /// Sample SD (n - 1 in the denominator); `None` below two values.
    pub sd: Option<f64>,
}

impl Summary {
    /// Standard error of the mean, `sd / sqrt(n)`.
    pub fn sem(&self) -> Option<f64> {
        self.sd.map(|sd| sd / (self.n as f64).sqrt())
    }
}

/// Mean and sample SD; `None` for no values.
pub fn summary(values: &[f64]) -> Option<Summary> {
    let mean = mean(values)?;
    let n = values.len();
    let sd =
        (n >= 2).then(|| (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt());
    Some(Summary { n, mean, sd })
}

/// A straight line `y = intercept + slope x`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Line {
    /// dy/dx.
    pub slope: f64,
    /// y at x = 0.
    pub intercept: f64,
}

impl Line {
    /// The line's value at `x`.
    pub fn at(&self, x: f64) -> f64 {
        self.intercept + self.slope * x
    }
}

/// Ordinary least-squares line through `(x, y)`; `None` without two distinct x values (relative to
/// the x values' size) or when the result is not finite.
pub fn straight_line(x: &[f64], y: &[f64]) -> Option<Line> {
    let count = x.len().min(y.len());
    if count < 2 {
        return None;
    }
    let (x, y) = (&x[..count], &y[..count]);
    let mean_x = x.iter().sum::<f64>() / count as f64;
    let mean_y = y.iter().sum::<f64>() / count as f64;
    let mut sum_xx = 0.0;
    let mut sum_xy = 0.0;
    for (&xi, &yi) in x.iter().zip(y) {
        sum_xx += (xi - mean_x) * (xi - mean_x);
        sum_xy += (xi - mean_x) * (yi - mean_y);
    }
    let largest_x = x.iter().fold(0.0_f64, |largest, value| largest.max(value.abs()));
    if sum_xx.is_nan() || sum_xx <= (f64::EPSILON * largest_x).powi(2) * count as f64 {
        return None;
    }
    let slope = sum_xy / sum_xx;
    let intercept = mean_y - slope * mean_x;
    (slope.is_finite() && intercept.is_finite()).then_some(Line { slope, intercept })
}

/// Refuses a probability outside (0, 1) or degrees of freedom that are not positive and finite;
/// else returns the error a distribution that refuses its degrees of freedom should give.
fn check_quantile_arguments(
    probability: f64,
    degrees_of_freedom: f64,
) -> Result<QuantileError, QuantileError> {
    if !(probability > 0.0 && probability < 1.0) {
        return Err(QuantileError::InvalidProbability { probability });
    }
    let invalid = QuantileError::InvalidDegreesOfFreedom {
        dof: degrees_of_freedom,
    };
    if !(degrees_of_freedom > 0.0 && degrees_of_freedom.is_finite()) {
        return Err(invalid);
    }
    Ok(invalid)
}

/// Quantile of Student's t distribution: the `t` with `P(T <= t) = probability`.
pub fn t_quantile(probability: f64, degrees_of_freedom: f64) -> Result<f64, QuantileError> {
    let invalid = check_quantile_arguments(probability, degrees_of_freedom)?;
    let distribution = StudentsT::new(0.0, 1.0, degrees_of_freedom).map_err(|_| invalid)?;
    Ok(distribution.inverse_cdf(probability))
}

/// `t(0.975, dof)`, the multiplier of a two-sided 95% interval.
pub fn t_quantile_975(degrees_of_freedom: usize) -> Result<f64, QuantileError> {
    t_quantile(0.975, degrees_of_freedom as f64)
}

/// The two-sided critical value of Student's t at level `alpha` (the `1 - alpha/2` quantile);
/// infinite for zero degrees of freedom, so a test with no residual freedom never rejects.
pub fn t_critical(alpha: f64, degrees_of_freedom: usize) -> f64 {
    if degrees_of_freedom == 0 {
        return f64::INFINITY;
    }
    t_quantile(1.0 - alpha / 2.0, degrees_of_freedom as f64).unwrap_or(f64::INFINITY)
}

/// Quantile of the F distribution with `(numerator, denominator)` degrees of freedom.
pub fn f_quantile(
    probability: f64,
    numerator_degrees_of_freedom: f64,
    denominator_degrees_of_freedom: f64,
) -> Result<f64, QuantileError> {
    if !(probability > 0.0 && probability < 1.0) {
        return Err(QuantileError::InvalidProbability { probability });
    }
    for dof in [numerator_degrees_of_freedom, denominator_degrees_of_freedom] {
        if !(dof > 0.0 && dof.is_finite()) {
            return Err(QuantileError::InvalidDegreesOfFreedom { dof });
        }
    }
    let distribution = FisherSnedecor::new(numerator_degrees_of_freedom, denominator_degrees_of_freedom)
        .map_err(|_| QuantileError::InvalidDegreesOfFreedom {
            dof: numerator_degrees_of_freedom,
        })?;
    Ok(distribution.inverse_cdf(probability))
}

/// Quantile of the chi-square distribution with `degrees_of_freedom`.
pub fn chi_squared_quantile(probability: f64, degrees_of_freedom: f64) -> Result<f64, QuantileError> {
    let invalid = check_quantile_arguments(probability, degrees_of_freedom)?;
    let distribution = ChiSquared::new(degrees_of_freedom).map_err(|_| invalid)?;
    Ok(distribution.inverse_cdf(probability))
}

/// `n ln(RSS/n) + 2k + 2k(k+1)/(n-k-1)`; `None` when `n <= k + 1` or RSS is not positive.
pub fn aicc(n: usize, k: usize, rss: f64) -> Option<f64> {
    if n <= k + 1 || !(rss > 0.0 && rss.is_finite()) {
        return None;
    }
    let (n, k) = (n as f64, k as f64);
    Some(n * (rss / n).ln() + 2.0 * k + 2.0 * k * (k + 1.0) / (n - k - 1.0))
}

/// One extra-sum-of-squares F test of a simpler model nested in a fuller one.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ExtraSumOfSquares {
    /// The F statistic (0 when the fuller model fits no better).
    pub f: f64,
    /// `[p_f - p_s, n - p_f]`.
    pub degrees_of_freedom: [usize; 2],
    /// Upper-tail probability of `f`.
    pub p_value: f64,
}

/// The F test of a simpler model (`p_simple` parameters, `rss_simple`) against a fuller one
/// (`p_full`, `rss_full`) on `n` points; `None` when it is undefined (no extra parameter, no residual
/// freedom, or a fuller RSS that is not positive).
pub fn extra_sum_of_squares(
    n: usize,
    (p_simple, rss_simple): (usize, f64),
    (p_full, rss_full): (usize, f64),
) -> Option<ExtraSumOfSquares> {
    if p_full <= p_simple || n <= p_full || rss_full.is_nan() || rss_full <= 0.0 {
        return None;
    }
    let numerator_dof = p_full - p_simple;
    let denominator_dof = n - p_full;
    let f = ((rss_simple - rss_full).max(0.0) / numerator_dof as f64) / (rss_full / denominator_dof as f64);
    let distribution = FisherSnedecor::new(numerator_dof as f64, denominator_dof as f64).ok()?;
    Some(ExtraSumOfSquares {
        f,
        degrees_of_freedom: [numerator_dof, denominator_dof],
        p_value: 1.0 - distribution.cdf(f),
    })
}

/// Consecutive reads count as evenly spaced when their steps differ by less than this fraction.
const EVEN_SPACING_TOLERANCE: f64 = 0.01;

/// MAD to standard deviation at the normal distribution.
const MAD_TO_SD: f64 = 1.4826;

/// The noise SD of a series read at `times` from its third differences over runs of four evenly
/// spaced points, `d = y[i+3] - 3 y[i+2] + 3 y[i+1] - y[i]` (variance 20 sigma^2 for independent
/// noise, exactly 0 for any quadratic trend), robustly: `1.4826 MAD(d) / sqrt(20)`; `None` below
/// four differences (common practice for difference-based noise estimates).
pub fn third_difference_noise(times: &[f64], values: &[f64]) -> Option<f64> {
    let mut differences = Vec::new();
    for i in 0..times.len().min(values.len()).saturating_sub(3) {
        let steps = [
            times[i + 1] - times[i],
            times[i + 2] - times[i + 1],
            times[i + 3] - times[i + 2],
        ];
        let even = steps
            .iter()
            .all(|step| (step - steps[0]).abs() <= EVEN_SPACING_TOLERANCE * steps[0].abs());
        if even {
            differences.push(values[i + 3] - 3.0 * values[i + 2] + 3.0 * values[i + 1] - values[i]);
        }
    }
    if differences.len() < 4 {
        return None;
    }
    let centre = median(differences.iter().copied())?;
    let mad = median(differences.iter().map(|d| (d - centre).abs()))?;
    Some(MAD_TO_SD * mad / 20f64.sqrt())
}

/// The variance between replicates beyond their own standard errors, from groups of replicate
/// measurements `(value, se)`: the method-of-moments estimate
/// `tau^2 = max(0, (sum_j Q_j - sum_j (1 - 1/n_j) sum_i se_ij^2) / sum_j (n_j - 1))` with
/// `Q_j = sum_i (y_ij - mean_j)^2`, since `E[Q_j] = (1 - 1/n_j)(sum_i se_ij^2 + n_j tau^2)` when
/// each `y_ij` has variance `se_ij^2 + tau^2`. Returns `(tau^2, sum_j (n_j - 1))`, `None` without
/// a group of two or more.
///
/// Assumptions: errors independent between replicates; `tau^2` the same at every level (an
/// additive component: pipetting, per-well drift). References: the moment estimator of a
/// between-study variance, DerSimonian and Laird 1986, Control Clin Trials 7:177 (here with
/// replicate groups in place of studies; volume and page from memory).
pub fn extra_replicate_variance(groups: &[Vec<(f64, f64)>]) -> Option<(f64, usize)> {
    let mut scatter = 0.0;
    let mut expected = 0.0;
    let mut degrees_of_freedom = 0usize;
    for group in groups.iter().filter(|g| g.len() >= 2) {
        let n = group.len() as f64;
        let centre = group.iter().map(|(value, _)| value).sum::<f64>() / n;
        scatter += group
            .iter()
            .map(|(value, _)| (value - centre).powi(2))
            .sum::<f64>();
        expected += (1.0 - 1.0 / n) * group.iter().map(|(_, se)| se * se).sum::<f64>();
        degrees_of_freedom += group.len() - 1;
    }
    if degrees_of_freedom == 0 || !(scatter.is_finite() && expected.is_finite()) {
        return None;
    }
    Some((
        ((scatter - expected) / degrees_of_freedom as f64).max(0.0),
        degrees_of_freedom,
    ))
}

/// The variance of a replicate measurement beyond its own standard error, in two parts: a
/// constant (additive errors the same at every level: per-well drift) and a relative error in
/// the well's substrate (pipetting), which moves a rate by its sensitivity `g = d v / d ln S0`:
/// `var = constant + substrate_cv_squared g^2`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ExtraVariance {
    /// The constant part, value units squared.
    pub constant: f64,
    /// The squared relative error of S0 (the pipetting CV squared).
    pub substrate_cv_squared: f64,
    /// Degrees of freedom behind the estimate (`sum_j (n_j - 1)`).
    pub degrees_of_freedom: usize,
}

impl ExtraVariance {
    /// The extra variance of a measurement whose value moves by `sensitivity` per unit `ln S0`.
    pub fn at(&self, sensitivity: f64) -> f64 {
        self.constant + self.substrate_cv_squared * sensitivity * sensitivity
    }

    /// Whether both parts agree with `other`'s within `relative` of the larger (parts that are
    /// both 0 agree).
    pub fn agrees_with(&self, other: &ExtraVariance, relative: f64) -> bool {
        let close = |a: f64, b: f64| (a - b).abs() <= relative * a.abs().max(b.abs());
        close(self.constant, other.constant) && close(self.substrate_cv_squared, other.substrate_cv_squared)
    }
}

/// Rounds of reweighting in [`extra_variance_with_substrate_term`].
const EXTRA_VARIANCE_ROUNDS: usize = 3;

/// [`ExtraVariance`] from groups of replicates `(members (value, se), mean g^2)`, by weighted
/// moments: each group's `d_j = (Q_j - (1 - 1/n_j) sum_i se_ij^2) / (n_j - 1)` (unbiased for the
/// group's extra variance, as in [`extra_replicate_variance`]) is regressed on `(1, g_j^2)` with
/// weights `(n_j - 1) / v_j^2`, `v_j` the group's total variance at the current estimate
/// (inverse-variance weights for a sample variance), in a few rounds from equal weights. Both
/// parts are kept non-negative: when the pair is not, the better of the two one-part fits is
/// taken. `None` with fewer than two groups of two or more.
///
/// Assumptions: replicates independent, with variance `se^2 + a + b g^2` and `g` the same for a
/// group's members. References: weighted moment estimation of variance components as in
/// DerSimonian and Laird 1986 (Control Clin Trials 7:177) extended to a meta-regression of the
/// variance on a covariate (common practice; from memory).
pub fn extra_variance_with_substrate_term(groups: &[(Vec<(f64, f64)>, f64)]) -> Option<ExtraVariance> {
    let mut rows: Vec<(f64, f64, f64, f64)> = Vec::new();
    let mut degrees_of_freedom = 0usize;
    for (group, g2) in groups.iter().filter(|(g, _)| g.len() >= 2) {
        let n = group.len() as f64;
        let centre = group.iter().map(|(value, _)| value).sum::<f64>() / n;
        let q: f64 = group.iter().map(|(value, _)| (value - centre).powi(2)).sum();
        let e: f64 = (1.0 - 1.0 / n) * group.iter().map(|(_, se)| se * se).sum::<f64>();
        let mean_se2 = group.iter().map(|(_, se)| se * se).sum::<f64>() / n;
        rows.push(((q - e) / (n - 1.0), *g2, n - 1.0, mean_se2));
        degrees_of_freedom += group.len() - 1;
    }
    if rows.len() < 2
        || rows
            .iter()
            .any(|(d, x, _, v)| !(d.is_finite() && x.is_finite() && v.is_finite()))
    {
        return None;
    }
    let (mut a, mut b) = (0.0, 0.0);
    for _ in 0..EXTRA_VARIANCE_ROUNDS {
        let weight = |x: f64, m: f64, se2: f64| {
            let v = se2 + a + b * x;
            m / (v * v).max(f64::MIN_POSITIVE)
        };
        let (mut s11, mut s12, mut s22, mut t1, mut t2) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for &(d, x, m, se2) in &rows {
            let w = weight(x, m, se2);
            s11 += w;
            s12 += w * x;
            s22 += w * x * x;
            t1 += w * d;
            t2 += w * x * d;
        }
        let constant_only = (t1 / s11).max(0.0);
        let substrate_only = if s22 > 0.0 { (t2 / s22).max(0.0) } else { 0.0 };
        let misfit = |a1: f64, b1: f64| {
            rows.iter()
                .map(|&(d, x, m, se2)| weight(x, m, se2) * (d - a1 - b1 * x).powi(2))
                .sum::<f64>()
        };
        let determinant = s11 * s22 - s12 * s12;
        let both = (determinant > 1e-12 * s11 * s22).then(|| {
            (
                (s22 * t1 - s12 * t2) / determinant,
                (s11 * t2 - s12 * t1) / determinant,
            )
        });
        (a, b) = match both {
            Some((a, b)) if a >= 0.0 && b >= 0.0 => (a, b),
            _ if misfit(constant_only, 0.0) <= misfit(0.0, substrate_only) => (constant_only, 0.0),
            _ => (0.0, substrate_only),
        };
    }
    (a.is_finite() && b.is_finite()).then_some(ExtraVariance {
        constant: a,
        substrate_cv_squared: b,
        degrees_of_freedom,
    })
}

/// `count` indices evenly spaced over `0..len`: the first and the last among them, increasing and
/// distinct; every index when `count >= len`, and the first `count` when `count < 2`. Index `i` is
/// `round(i (len - 1) / (count - 1))`, so steps differ by at most one.
pub fn evenly_spaced_indices(len: usize, count: usize) -> Vec<usize> {
    if count >= len {
        return (0..len).collect();
    }
    if count < 2 {
        return (0..count).collect();
    }
    (0..count)
        .map(|i| (i * (len - 1) + (count - 1) / 2) / (count - 1))
        .collect()
}

/// The `fraction` percentile of an ascending sample by linear interpolation between order
/// statistics (position `fraction (n - 1)`); NaN for an empty sample.
pub fn percentile(sorted: &[f64], fraction: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let position = fraction.clamp(0.0, 1.0) * (sorted.len() - 1) as f64;
    let below = position.floor() as usize;
    let above = position.ceil() as usize;
    let weight = position - below as f64;
    sorted[below] * (1.0 - weight) + sorted[above] * weight
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use statrs::distribution::{ContinuousCDF, StudentsT};

    #[test]
    fn extra_replicate_variance_recovers_a_known_component() {
        // By hand: one pair (1, 3) with se 1 each: Q = 2, expected (1/2)(2) = 1, tau^2 = 1.
        let (tau2, df) = extra_replicate_variance(&[vec![(1.0, 1.0), (3.0, 1.0)]]).unwrap();
        assert_relative_eq!(tau2, 1.0);
        assert_eq!(df, 1);
        // Scatter below the standard errors: no extra component.
        let (tau2, _) = extra_replicate_variance(&[vec![(1.0, 1.0), (1.1, 1.0)]]).unwrap();
        assert_eq!(tau2, 0.0);
        assert!(extra_replicate_variance(&[vec![(1.0, 1.0)]]).is_none());
        // Simulation (a seeded generator; truth tau^2 = 0.25 with se 0.5): the estimate is
        // unbiased, so 4000 triplicates average within a few percent of the truth.
        use rand::SeedableRng;
        use rand_distr::{Distribution, Normal};
        let mut generator = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let standard = Normal::new(0.0, 1.0).unwrap();
        let mut normal = || standard.sample(&mut generator);
        let groups: Vec<Vec<(f64, f64)>> = (0..4000)
            .map(|_| (0..3).map(|_| (0.5 * normal() + 0.5 * normal(), 0.5)).collect())
            .collect();
        let (tau2, df) = extra_replicate_variance(&groups).unwrap();
        assert_eq!(df, 8000);
        assert!((tau2 / 0.25 - 1.0).abs() < 0.06, "{tau2}");
    }

    #[test]
    fn extra_variance_with_a_substrate_term_recovers_both_parts_and_falls_back_to_one() {
        use rand::SeedableRng;
        use rand_distr::{Distribution, Normal};
        let mut generator = rand_chacha::ChaCha8Rng::seed_from_u64(17);
        let standard = Normal::new(0.0, 1.0).unwrap();
        // Eight levels whose sensitivities g run from 1 to 0.05 (as d v / d ln S0 does from low
        // [S] to the top), triplicates with se 0.01: extra variance a + b g^2.
        let sensitivities = [1.0, 0.9, 0.7, 0.5, 0.3, 0.15, 0.08, 0.05];
        let mut simulate = |a: f64, b: f64, plates: usize| -> Vec<(Vec<(f64, f64)>, f64)> {
            (0..plates)
                .flat_map(|_| sensitivities.to_vec())
                .map(|g: f64| {
                    let sd = (1e-4 + a + b * g * g).sqrt();
                    let members = (0..3)
                        .map(|_| (sd * standard.sample(&mut generator), 0.01))
                        .collect();
                    (members, g * g)
                })
                .collect()
        };
        // Both parts (a = 4e-4, b = 9e-4: a 3% CV on S0): 500 plates' worth recovers each within a
        // few percent.
        let both = extra_variance_with_substrate_term(&simulate(4e-4, 9e-4, 500)).unwrap();
        assert_eq!(both.degrees_of_freedom, 500 * 8 * 2);
        assert!((both.constant / 4e-4 - 1.0).abs() < 0.1, "{both:?}");
        assert!((both.substrate_cv_squared / 9e-4 - 1.0).abs() < 0.1, "{both:?}");
        assert_relative_eq!(both.at(0.5), both.constant + 0.25 * both.substrate_cv_squared);
        // Pipetting alone: the constant is (close to) nothing and b is recovered.
        let pipetting = extra_variance_with_substrate_term(&simulate(0.0, 9e-4, 500)).unwrap();
        assert!(pipetting.constant < 2e-5, "{pipetting:?}");
        assert!(
            (pipetting.substrate_cv_squared / 9e-4 - 1.0).abs() < 0.1,
            "{pipetting:?}"
        );
        // A constant alone: b is (close to) nothing.
        let constant = extra_variance_with_substrate_term(&simulate(4e-4, 0.0, 500)).unwrap();
        assert!((constant.constant / 4e-4 - 1.0).abs() < 0.1, "{constant:?}");
        assert!(constant.substrate_cv_squared < 4e-5, "{constant:?}");
        // Neither part is ever negative; one group is not enough.
        for _ in 0..50 {
            let noisy = extra_variance_with_substrate_term(&simulate(0.0, 0.0, 1)).unwrap();
            assert!(
                noisy.constant >= 0.0 && noisy.substrate_cv_squared >= 0.0,
                "{noisy:?}"
            );
        }
        assert!(extra_variance_with_substrate_term(&[(vec![(1.0, 0.1), (1.2, 0.1)], 1.0)]).is_none());
    }

    #[test]
    fn median_of_even_and_odd_counts_skips_non_finite_values() {
        assert_eq!(median([3.0, 1.0, 2.0]), Some(2.0));
        assert_eq!(median([4.0, 1.0, 3.0, 2.0]), Some(2.5));
        assert_eq!(median([f64::NAN, 5.0]), Some(5.0));
        assert_eq!(median(Vec::<f64>::new()), None);
    }

    #[test]
    fn summary_gives_the_sample_sd_and_sem() {
        // 2, 4, 4, 4, 5, 5, 7, 9: mean 5, sum of squares 32, sample SD sqrt(32/7).
        let s = summary(&[2.0, 4.0, 4.0, 4.0, 5.0, 5.0, 7.0, 9.0]).unwrap();
        assert_eq!(s.mean, 5.0);
        assert_relative_eq!(s.sd.unwrap(), (32.0_f64 / 7.0).sqrt(), max_relative = 1e-15);
        assert_relative_eq!(
            s.sem().unwrap(),
            (32.0_f64 / 7.0 / 8.0).sqrt(),
            max_relative = 1e-15
        );
        assert_eq!(summary(&[1.0]).unwrap().sd, None);
        assert!(summary(&[]).is_none());
    }

    #[test]
    fn straight_line_recovers_an_exact_line_and_refuses_one_x() {
        let x = [0.0, 1.0, 2.0, 3.0];
        let y: Vec<f64> = x.iter().map(|v| 1.5 - 0.25 * v).collect();
        let line = straight_line(&x, &y).unwrap();
        assert_relative_eq!(line.slope, -0.25, max_relative = 1e-14);
        assert_relative_eq!(line.intercept, 1.5, max_relative = 1e-14);
        assert_relative_eq!(line.at(4.0), 0.5, max_relative = 1e-14);
        assert!(straight_line(&[2.0, 2.0], &[1.0, 3.0]).is_none());
    }

    #[test]
    fn quantiles_match_tables_and_invert_the_cdf() {
        // t(0.975, 10) = 2.228138852 and F(0.95; 1, 10) = 4.964602744: standard table values (from
        // memory), cross-checked below by the distribution functions themselves.
        let t = t_quantile_975(10).unwrap();
        assert!((t - 2.228_138_851_986).abs() < 1e-8, "t = {t}");
        let f = f_quantile(0.95, 1.0, 10.0).unwrap();
        assert!((f - 4.964_602_743_730_711).abs() < 1e-7, "F = {f}");
        // F(1, d) is the square of t(d): F(0.95; 1, 10) = t(0.975, 10)^2.
        assert!((f - t * t).abs() < 1e-8);
        // Chi-square with 29 degrees of freedom: 16.047 and 45.722 at 0.025 and 0.975 (standard
        // table values, from memory); chi-square(1) is the square of a standard normal, so its 0.95
        // quantile is 1.959964^2 = 3.841459.
        assert!((chi_squared_quantile(0.025, 29.0).unwrap() - 16.047).abs() < 1e-3);
        assert!((chi_squared_quantile(0.975, 29.0).unwrap() - 45.722).abs() < 1e-3);
        assert!((chi_squared_quantile(0.95, 1.0).unwrap() - 1.959_964f64.powi(2)).abs() < 1e-5);
        assert!(chi_squared_quantile(0.5, 0.0).is_err());
        for dof in [1.0, 2.0, 4.0, 7.0, 12.0, 30.0, 100.0] {
            for probability in [0.6, 0.9, 0.975, 0.995] {
                let quantile = t_quantile(probability, dof).unwrap();
                let distribution = StudentsT::new(0.0, 1.0, dof).unwrap();
                assert!((distribution.cdf(quantile) - probability).abs() < 1e-10);
            }
        }
        assert!(matches!(
            t_quantile(1.0, 3.0),
            Err(QuantileError::InvalidProbability { .. })
        ));
        assert!(matches!(
            t_quantile_975(0),
            Err(QuantileError::InvalidDegreesOfFreedom { .. })
        ));
        assert!(matches!(
            f_quantile(0.5, 1.0, f64::NAN),
            Err(QuantileError::InvalidDegreesOfFreedom { .. })
        ));
        assert_eq!(t_critical(0.05, 0), f64::INFINITY);
        assert!((t_critical(0.05, 10) - t).abs() < 1e-12);
        // 0.975 quantile at 1 df: 12.706 (NIST/SEMATECH e-Handbook of Statistical Methods, table
        // 1.3.6.7.2).
        assert!((t_critical(0.05, 1) - 12.706).abs() < 1e-3);
    }

    #[test]
    fn aicc_matches_its_formula_and_refuses_too_few_points() {
        let expected = 10.0 * (2.0_f64 / 10.0).ln() + 4.0 + 2.0 * 2.0 * 3.0 / 7.0;
        assert_relative_eq!(aicc(10, 2, 2.0).unwrap(), expected, max_relative = 1e-14);
        assert_eq!(aicc(3, 2, 1.0), None);
        assert_eq!(aicc(10, 2, 0.0), None);
    }

    #[test]
    fn f_test_p_value_is_the_upper_tail() {
        // F = ((10 - 4) / 1) / (4 / 8) = 12 on (1, 8): the p value is the F(1, 8) upper tail at 12.
        let test = extra_sum_of_squares(10, (1, 10.0), (2, 4.0)).unwrap();
        assert_relative_eq!(test.f, 12.0, max_relative = 1e-14);
        assert_eq!(test.degrees_of_freedom, [1, 8]);
        let quantile = f_quantile(1.0 - test.p_value, 1.0, 8.0).unwrap();
        assert_relative_eq!(quantile, 12.0, max_relative = 1e-8);
        assert!(extra_sum_of_squares(10, (2, 1.0), (2, 1.0)).is_none());
    }

    #[test]
    fn percentiles_interpolate() {
        let sorted = [1.0, 2.0, 3.0, 4.0, 5.0];
        assert_eq!(percentile(&sorted, 0.5), 3.0);
        assert_eq!(percentile(&sorted, 0.25), 2.0);
        assert_relative_eq!(percentile(&sorted, 0.1), 1.4, max_relative = 1e-14);
        assert!(percentile(&[], 0.5).is_nan());
    }

    #[test]
    fn evenly_spaced_indices_keep_both_ends_and_are_distinct_and_increasing() {
        for len in 0..300 {
            for count in [0, 1, 2, 3, 7, 120, 299] {
                let kept = evenly_spaced_indices(len, count);
                assert_eq!(kept.len(), count.min(len), "len {len} count {count}");
                assert!(
                    kept.windows(2).all(|pair| pair[0] < pair[1]),
                    "len {len} count {count}"
                );
                if count >= 2 && len >= 2 {
                    assert_eq!((kept[0], kept[kept.len() - 1]), (0, len - 1));
                }
            }
        }
        // 2000 reads thinned to 250: steps of 8 or 9 reads (2000 / 250 = 8.0 by hand).
        let kept = evenly_spaced_indices(2000, 250);
        assert!(kept.windows(2).all(|pair| (8..=9).contains(&(pair[1] - pair[0]))));
    }
}
