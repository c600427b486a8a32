//! Initial rates: per well, the automatic choice of the initial-rate window, the straight-line
//! fit over it, and the flags that say when a rate must not be trusted.
//!
//! # The window rule
//! Reads earlier than `skip` seconds are ignored, and so are reads at and after the first whose
//! raw absorbance exceeds `max_absorbance` (the photometer's linear range is over). Of the
//! remaining readable points, the window is the longest run starting at the first of them that
//! - holds at least `min_points` reads,
//! - converts at most `max_conversion` of the well's substrate by its last read, estimated as
//!   `slope * (t_end + dead time) / S0` (the rate times the time since mixing, as a fraction of
//!   the starting substrate), and
//! - is straight: (1) the quadratic term of y = a + b t + c t^2 over the window is not
//!   significant by a two-sided t test at level `alpha` (default 0.01), and (2) the slopes of the
//!   window's first and second halves agree by a two-sided t test at the same level.
//!
//! Two tests at 1% keep the false rejection of a truly straight window near 2% while catching both
//! smooth curvature (depletion, product inhibition) and a kink.
//!
//! # Straight, or bent only as depletion bends it (the `integrated` estimator)
//! When the initial-rate estimator corrects a window's slope for depletion
//! (`RateSettings::allow_depletion_curvature`), the curvature that depletion alone makes is no
//! reason to end a window: ending windows on it picks them on the noise (a window is cut sooner
//! when its late reads happen to fall low), which biased Km by up to +1.7% (DEVELOPERS.md). For
//! every rate law of Michaelis-Menten form in S at fixed [I], `0 <= dv/dS = v K / (S (K + S)) <=
//! v / S`, so the product curve's second derivative `P'' = -v'(S) v` is no lower than `-v^2 / S`:
//! depletion bends the quadratic term `c` of the window no further down than `-v^2 / (2 S)`. The
//! allowance is `slope^2 / (2 S0 (1 - conversion))` (the window's slope and the substrate left at
//! its end), and both tests then measure the departure from the interval `[-allowance, 0]` instead
//! of from 0 (the half slopes' difference from `[-2 allowance gap, 0]`, `gap` the distance between
//! the halves' mean times). Upward curvature (a lag) and curvature beyond what depletion can make
//! (product inhibition, enzyme losing activity, a kink) still end the window. Without S0 in the
//! values' units there is no allowance.
//!
//! # Flags (plain words, `;`-separated in the outputs)
//! - `unreadable`: some reads had no number (over-range marker, blank cell); they are named.
//! - `nonlinear`: no straight window of `min_points` reads exists.
//! - `lag`: the rate rises at the start (hysteresis, slow mixing, a coupled enzyme not yet at
//!   steady state): the curvature just beyond the window, or over the shortest window, is
//!   significantly upward.
//! - `depleted`: even the shortest window converts more than `max_conversion`.
//! - `saturated`: some read exceeds `max_absorbance` (the window uses only the reads before it).
//! - `noisy` and `weak` need the whole plate (the plate's noise at each absorbance, the blank slope
//!   scatter) and are set by [`apply_plate_flags`].
//!
//! # Which flags leave a well out
//! [`Flag::excludes`]: `nonlinear`, `lag`, `unreadable`, `depleted`, `noisy` and `saturated` leave a
//! well out of means and initial-rate fits (its rate is not a trustworthy initial rate); `weak`
//! only informs: a rate indistinguishable from zero is still a measurement (fully inhibited wells,
//! a slow variant at low [S]) and leaving it out would bias a fit upward.
//!
//! # The initial rate at mixing
//! Besides the window's slope (a chord), the window's quadratic fit gives the tangent at mixing
//! time, `b + 2 c t_mix` with `t_mix = -dead time` (the reads' clock starts after mixing), with its
//! standard error from the covariance of (b, c).
//!
//! # The slope's standard error
//! The window's slope is a least-squares line; its standard error is `s_q / sqrt(Sxx)` with `s_q`
//! the read noise about the window's quadratic, not about the line: `s_q^2 = RSS_q / (n - 3) =
//! s^2 (n - 2) / (n - 3 + t_c^2)` (the line's RSS less the quadratic term's sum of squares,
//! `t_c^2 s_q^2`). A window bent by depletion leaves the line residuals that are curvature, not
//! noise; counted as noise they made the standard error up to 2.5 times the slope's real scatter
//! (the clean simulated design's slow variant at [S] near Km), and every interval built on it too
//! wide (DEVELOPERS.md). The bend itself is what the `integrated` estimator corrects. Where a
//! window is straight, `t_c^2` is about 1 and the two figures agree. Draper and Smith 1998, ch. 2
//! (the extra sum of squares of an added term).
//!
//! # The read noise
//! Each well's read-to-read noise is estimated from third differences of consecutive, evenly
//! spaced usable reads, `d = y[i+2] - 3 y[i+1] + 3 y[i] - y[i-1]` (variance 20 sigma^2 for
//! independent noise, and exactly 0 for any quadratic trend, so the curvature of depletion does
//! not count as noise), robustly: `sigma = 1.4826 MAD(d) / sqrt(20)` (common practice).
//!
//! References: initial-rate conditions and the 10% rule are common practice (see the project's
//! DOMAIN notes); the t tests are standard regression tests (Draper and Smith 1998, ch. 2).

use std::fmt;

use super::window_fit::{CurvatureTest, LineFit, WindowSums};
pub use crate::config::RateSettings;
use crate::core::format::{format_seconds, significant};
use crate::core::stats::{median, t_critical, third_difference_noise};

/// A reason not to trust a well's rate.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Flag {
    /// No straight window of the minimum length.
    Nonlinear,
    /// Rate rising at the start.
    Lag,
    /// Reads without a number were dropped.
    Unreadable,
    /// Substrate conversion above the limit even in the shortest window.
    Depleted,
    /// Scatter far above the plate's blank noise.
    Noisy,
    /// Rate not distinguishable from zero.
    Weak,
    /// Absorbance above the limit.
    Saturated,
}

/// Every flag, in order.
pub const ALL_FLAGS: [Flag; 7] = [
    Flag::Nonlinear,
    Flag::Lag,
    Flag::Unreadable,
    Flag::Depleted,
    Flag::Noisy,
    Flag::Weak,
    Flag::Saturated,
];

impl Flag {
    /// Whether the flag leaves a well out of means and initial-rate fits (module docs).
    pub fn excludes(self) -> bool {
        !matches!(self, Flag::Weak)
    }

    /// Why the flag leaves a well out, or why it does not (the table in README and the report).
    pub fn exclusion_reason(self) -> &'static str {
        match self {
            Flag::Nonlinear => "no straight window: the slope is no initial rate",
            Flag::Lag => "the rate rises at the start: the enzyme is not yet at steady state",
            Flag::Unreadable => "reads are missing: the window may not be what the well did",
            Flag::Depleted => "even the shortest window converts too much substrate",
            Flag::Noisy => "scatter far above the plate's noise at that absorbance",
            Flag::Weak => "kept: a rate indistinguishable from zero is still a measurement",
            Flag::Saturated => "reads beyond the photometric range",
        }
    }

    /// The word written in the outputs.
    pub fn word(self) -> &'static str {
        match self {
            Flag::Nonlinear => "nonlinear",
            Flag::Lag => "lag",
            Flag::Unreadable => "unreadable",
            Flag::Depleted => "depleted",
            Flag::Noisy => "noisy",
            Flag::Weak => "weak",
            Flag::Saturated => "saturated",
        }
    }
}

impl fmt::Display for Flag {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.word())
    }
}

/// Joins flags as the outputs write them: `lag;unreadable`, or "" for none.
pub fn flag_words(flags: &[Flag]) -> String {
    flags.iter().map(|flag| flag.word()).collect::<Vec<_>>().join(";")
}

/// One well's trace, ready for the window search.
#[derive(Debug, Clone, Copy)]
pub struct TraceInput<'a> {
    /// Read times in seconds since the reaction started.
    pub times_s: &'a [f64],
    /// Product formed (blank-corrected and sign-corrected), in concentration units when an
    /// extinction coefficient is known, else in absorbance units; None where unreadable.
    pub values: &'a [Option<f64>],
    /// Raw absorbance, for the saturation limit.
    pub raw_absorbance: &'a crate::import::Readings,
    /// Starting substrate in the same units as `values`, when known (for conversion).
    pub substrate_start: Option<f64>,
}

/// A well's read-to-read noise and where on the absorbance scale it was measured.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct ReadNoise {
    /// Noise SD of one read, in the units of the well's values.
    pub sd: f64,
    /// Median raw absorbance of the reads it came from, AU.
    pub absorbance: f64,
    /// The smallest step between two consecutive reads that differ, in the units of the values:
    /// the reader's resolution or finer.
    pub resolution: f64,
}

/// A well's rate and the evidence for it.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct WellRate {
    /// The window's straight-line fit; None when too few readable points exist.
    pub fit: Option<LineFit>,
    /// The tangent at mixing time of the window's quadratic and its standard error (at least 5
    /// reads in the window).
    pub tangent: Option<(f64, f64)>,
    /// The well's read noise (at least 6 usable reads).
    pub noise: Option<ReadNoise>,
    /// Window start and end (s).
    pub window_s: Option<(f64, f64)>,
    /// Fraction of substrate converted by the window's end, when S0 and units allow.
    pub conversion: Option<f64>,
    /// Flags raised.
    pub flags: Vec<Flag>,
    /// Plain-language notes (unreadable reads, why a window ended).
    pub notes: Vec<String>,
}

impl WellRate {
    fn flag(&mut self, flag: Flag) {
        if !self.flags.contains(&flag) {
            self.flags.push(flag);
            self.flags.sort();
        }
    }
}

/// Precomputed critical values, so a plate's thousands of windows do not each invert a t CDF.
#[derive(Debug, Clone)]
pub struct CriticalValues {
    alpha: f64,
    by_dof: Vec<f64>,
}

impl CriticalValues {
    /// Critical values for up to `max_dof` degrees of freedom at level `alpha`.
    pub fn new(alpha: f64, max_dof: usize) -> CriticalValues {
        CriticalValues {
            alpha,
            by_dof: (0..=max_dof).map(|dof| t_critical(alpha, dof)).collect(),
        }
    }

    /// The two-sided critical t at `dof`.
    pub fn get(&self, dof: usize) -> f64 {
        self.by_dof
            .get(dof)
            .copied()
            .unwrap_or_else(|| t_critical(self.alpha, dof))
    }
}

/// The part of `value` outside the interval `[low, 0]` (`low <= 0`): 0 inside, else the signed
/// distance to the nearer end.
fn beyond_interval(value: f64, low: f64) -> f64 {
    if value < low {
        value - low
    } else if value > 0.0 {
        value
    } else {
        0.0
    }
}

/// The downward curvature (quadratic term per s^2) depletion alone can give a window with this
/// slope that ends having converted `conversion` of `s0` (module docs); 0 without S0 or a rise.
fn depletion_allowance(slope: f64, s0: Option<f64>, conversion: Option<f64>) -> f64 {
    match (s0, conversion) {
        (Some(s0), Some(conversion)) if s0 > 0.0 && slope > 0.0 => {
            // The substrate left is never taken below half of S0: beyond that depletion is the
            // progress fit's business, not a window's.
            let left = s0 * (1.0 - conversion.clamp(0.0, 0.5));
            slope * slope / (2.0 * left)
        }
        _ => 0.0,
    }
}

/// Whether the window `0..=last` of `sums` (over `times`) is straight by both tests, allowing
/// downward curvature down to `-allowance` per s^2 (0: none; module docs).
fn is_straight(
    sums: &WindowSums,
    times: &[f64],
    last: usize,
    critical: &CriticalValues,
    allowance: f64,
) -> bool {
    let n = last + 1;
    if let Some(test) = sums.curvature(0, last) {
        if allowance > 0.0 {
            // The test's quadratic term is in the sums' scaled time, u = (t - t0) / span.
            let span = times[times.len() - 1] - times[0];
            let se = if test.t_statistic.is_finite() && test.t_statistic != 0.0 {
                test.curvature / test.t_statistic
            } else {
                0.0
            };
            let excess = beyond_interval(test.curvature, -allowance * span * span);
            if excess != 0.0
                && test.relative_size > 1e-9
                && (se <= 0.0 || (excess / se).abs() > critical.get(n - 3))
            {
                return false;
            }
        } else if test.is_significant(critical.get(n - 3)) {
            return false;
        }
    }
    // Halves: each needs three points for a slope standard error.
    if n >= 6 {
        let half = n / 2;
        if let (Some(first), Some(second)) = (sums.line(0, half - 1), sums.line(half, last)) {
            let spread = (first.slope_se.powi(2) + second.slope_se.powi(2)).sqrt();
            let dof = n - 4;
            let mut difference = second.slope - first.slope;
            if allowance > 0.0 {
                let mean_time =
                    |from: usize, to: usize| times[from..=to].iter().sum::<f64>() / (to + 1 - from) as f64;
                let gap = mean_time(half, last) - mean_time(0, half - 1);
                difference = beyond_interval(difference, -2.0 * allowance * gap);
            }
            // Slopes equal to rounding agree whatever their (then meaningless) standard errors.
            let negligible = difference.abs() <= 1e-9 * first.slope.abs().max(second.slope.abs());
            if !negligible && (spread == 0.0 || (difference / spread).abs() > critical.get(dof)) {
                return false;
            }
        }
    }
    true
}

/// Chooses the window and fits the rate of one well. `critical` must be built at `settings.alpha`.
pub fn well_rate(input: TraceInput<'_>, settings: &RateSettings, critical: &CriticalValues) -> WellRate {
    let mut result = WellRate {
        fit: None,
        tangent: None,
        noise: None,
        window_s: None,
        conversion: None,
        flags: Vec::new(),
        notes: Vec::new(),
    };

    // Unreadable reads are named whatever window is chosen.
    let unreadable: Vec<usize> = (0..input.times_s.len())
        .filter(|&i| input.values[i].is_none())
        .collect();
    if !unreadable.is_empty() {
        result.flag(Flag::Unreadable);
        let named: Vec<String> = unreadable
            .iter()
            .take(8)
            .map(|&i| format!("read {} (t = {} s)", i + 1, format_seconds(input.times_s[i])))
            .collect();
        let more = if unreadable.len() > 8 {
            format!(" and {} more", unreadable.len() - 8)
        } else {
            String::new()
        };
        result
            .notes
            .push(format!("unreadable: {}{}", named.join(", "), more));
    }

    // The reads in play: after the dead time, before saturation, readable.
    let first_saturated = input
        .raw_absorbance
        .iter()
        // An over-range marker arrives as +infinity (`rates::plate`), past even "no limit".
        .position(|value| value.is_some_and(|a| a > settings.max_absorbance || a == f64::INFINITY));
    let end = first_saturated.unwrap_or(input.times_s.len());
    if let Some(index) = first_saturated {
        // Any read past the photometric limit marks the well: the reads before it still give a
        // window (used with --keep-flagged), but the well's optics are suspect.
        result.flag(Flag::Saturated);
        let limit = match settings.signal {
            crate::config::SignalKind::Absorbance => format!("absorbance above {}", settings.max_absorbance),
            other if settings.max_absorbance.is_finite() => format!(
                "{} above {} {} or over the reader's range",
                other.word(),
                settings.max_absorbance,
                other.raw_unit()
            ),
            other => format!("{} over the reader's range", other.word()),
        };
        result.notes.push(format!(
            "{limit} from read {} (t = {} s): later reads not used",
            index + 1,
            format_seconds(input.times_s[index])
        ));
    }
    let (mut times, mut values) = (Vec::with_capacity(end), Vec::with_capacity(end));
    let mut absorbances = Vec::with_capacity(end);
    for i in 0..end {
        let t = input.times_s[i];
        let in_fixed = settings
            .fixed_window_s
            .is_none_or(|(start, stop)| t >= start && t <= stop);
        if t < settings.skip_s || !in_fixed {
            continue;
        }
        if let (Some(value), Some(raw)) = (input.values[i], input.raw_absorbance.get(i)) {
            times.push(t);
            values.push(value);
            absorbances.push(raw);
        }
    }
    result.noise = read_noise(&times, &values, &absorbances);
    let min_points = settings.min_points.max(3);
    if times.len() < min_points {
        // Too few reads: when the absorbance limit is not to blame (already flagged), the data is.
        if first_saturated.is_none() {
            result.flag(Flag::Nonlinear);
        }
        result.notes.push(format!(
            "only {} usable reads (at least {} needed)",
            times.len(),
            min_points
        ));
        if times.len() >= 3 {
            let sums = WindowSums::new(&times, &values);
            result.fit = sums.line(0, times.len() - 1);
            result.window_s = Some((times[0], times[times.len() - 1]));
        }
        return result;
    }

    let sums = WindowSums::new(&times, &values);
    let conversion_at = |last: usize, fit: &LineFit| -> Option<f64> {
        input
            .substrate_start
            .filter(|&s0| s0 > 0.0)
            .map(|s0| fit.slope * (times[last] + settings.dead_time_s) / s0)
    };

    let allowance_at = |last: usize, fit: &LineFit| -> f64 {
        if settings.allow_depletion_curvature {
            depletion_allowance(fit.slope, input.substrate_start, conversion_at(last, fit))
        } else {
            0.0
        }
    };
    let chosen = if settings.fixed_window_s.is_some() {
        let last = times.len() - 1;
        let allowance = sums.line(0, last).map_or(0.0, |fit| allowance_at(last, &fit));
        if !is_straight(&sums, &times, last, critical, allowance) {
            result.flag(Flag::Nonlinear);
        }
        Some(last)
    } else {
        let shortest = min_points - 1;
        let mut accepted = None;
        for last in (shortest..times.len()).rev() {
            let Some(fit) = sums.line(0, last) else { continue };
            if conversion_at(last, &fit).is_some_and(|c| c > settings.max_conversion) {
                continue;
            }
            if is_straight(&sums, &times, last, critical, allowance_at(last, &fit)) {
                accepted = Some(last);
                break;
            }
        }
        if accepted.is_none() {
            let depleted = sums
                .line(0, shortest)
                .and_then(|fit| conversion_at(shortest, &fit))
                .is_some_and(|c| c > settings.max_conversion);
            if depleted {
                result.flag(Flag::Depleted);
            } else {
                result.flag(Flag::Nonlinear);
            }
        }
        // A rate that rises at the start shows as upward curvature just past the window (or,
        // when no window was accepted, over twice the shortest one).
        let probe_last = match accepted {
            Some(last) => (last + min_points).min(times.len() - 1),
            None => (2 * min_points - 1).min(times.len() - 1),
        };
        if accepted != Some(probe_last) {
            if let Some(test) = sums.curvature(0, probe_last) {
                if test.curvature > 0.0 && test.is_significant(critical.get(probe_last + 1 - 3)) {
                    result.flag(Flag::Lag);
                }
            }
        }
        Some(accepted.unwrap_or(shortest))
    };

    if let Some(last) = chosen {
        result.fit = sums.line(0, last).map(|line| match sums.curvature(0, last) {
            Some(test) => with_noise_about_the_quadratic(line, &test),
            None => line,
        });
        result.window_s = Some((times[0], times[last]));
        result.conversion = result.fit.as_ref().and_then(|fit| conversion_at(last, fit));
        // A tangent needs a quadratic with residual freedom to spare: at least 5 reads.
        if last >= 4 {
            result.tangent = sums
                .quadratic(0, last)
                .map(|quadratic| quadratic.slope_at(-settings.dead_time_s));
        }
    }
    result
}

/// The line's slope with its standard error taken from the noise about the window's quadratic
/// (module docs, "The slope's standard error"): `s_q^2 = s^2 (n - 2) / (n - 3 + t_c^2)`, `s` the
/// line's residual SD and `t_c` the quadratic term's t statistic. The residual SD stays the line's.
fn with_noise_about_the_quadratic(line: LineFit, test: &CurvatureTest) -> LineFit {
    let n = line.n_points as f64;
    let t_squared = test.t_statistic * test.t_statistic;
    let shrink = ((n - 2.0) / (n - 3.0 + t_squared)).sqrt();
    if n > 3.0 && shrink.is_finite() && shrink > 0.0 {
        LineFit {
            slope_se: line.slope_se * shrink,
            ..line
        }
    } else {
        line
    }
}

/// The well's read noise from third differences (module docs); `None` below 4 differences.
pub fn read_noise(times: &[f64], values: &[f64], absorbances: &[f64]) -> Option<ReadNoise> {
    let sd = third_difference_noise(times, values)?;
    let resolution = values
        .windows(2)
        .map(|pair| (pair[1] - pair[0]).abs())
        .filter(|step| *step > 0.0)
        .fold(f64::INFINITY, f64::min);
    Some(ReadNoise {
        sd,
        absorbance: median(absorbances.iter().copied())?,
        resolution,
    })
}

/// Plate-level reference values for the `noisy` and `weak` flags: the read noise of every well
/// that has one, by absorbance, and the scatter of the blank wells' slopes.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct PlateNoise {
    /// Every well's read noise, by ascending absorbance.
    pub wells: Vec<ReadNoise>,
    /// Median read noise of the blank wells (signal units of `values`).
    pub blank_read_sd: Option<f64>,
    /// The smallest noise the data can show: the wells' median resolution over sqrt(12) (the SD of
    /// rounding to that step), so that wells read flat to the last printed digit do not make every
    /// other well look noisy.
    pub floor_sd: f64,
    /// SD of the blank wells' slopes (needs at least 3 blanks).
    pub blank_slope_sd: Option<f64>,
}

/// How far above the plate's noise at the same absorbance a well's read noise may go before it is
/// `noisy`.
pub const NOISY_FACTOR: f64 = 5.0;
/// How many standard errors (or blank slope SDs) a rate needs to be distinguishable from zero.
pub const WEAK_FACTOR: f64 = 3.0;

impl PlateNoise {
    /// The plate's noise model from the wells' read noise, the blanks' and the blanks' slopes.
    pub fn new(mut wells: Vec<ReadNoise>, blank_read_sds: &[f64], blank_slope_sd: Option<f64>) -> PlateNoise {
        wells.sort_by(|a, b| a.absorbance.total_cmp(&b.absorbance));
        let floor_sd = median(wells.iter().map(|w| w.resolution).filter(|r| r.is_finite()))
            .map_or(0.0, |resolution| resolution / 12f64.sqrt());
        PlateNoise {
            floor_sd,
            wells,
            blank_read_sd: median(blank_read_sds.iter().copied()),
            blank_slope_sd,
        }
    }

    /// The read noise expected at `absorbance`: the median read noise of the wells nearest in
    /// absorbance (`clamp(n / 6, 8, 24)` of them), so that the noise model follows the photometric
    /// noise's growth with absorbance without assuming its form. `None` with fewer than 3 wells.
    pub fn expected_at(&self, absorbance: f64) -> Option<f64> {
        let n = self.wells.len();
        if n < 3 {
            return None;
        }
        let k = (n / 6).clamp(8, 24).min(n);
        // The k nearest by absorbance form a contiguous run of the sorted list.
        let position = self.wells.partition_point(|w| w.absorbance < absorbance);
        let (mut low, mut high) = (position, position);
        while high - low < k {
            let take_low = match (low.checked_sub(1), (high < n).then_some(high)) {
                (Some(below), Some(above)) => {
                    absorbance - self.wells[below].absorbance <= self.wells[above].absorbance - absorbance
                }
                (Some(_), None) => true,
                (None, _) => false,
            };
            if take_low {
                low -= 1;
            } else {
                high += 1;
            }
        }
        median(self.wells[low..high].iter().map(|w| w.sd)).map(|sd| sd.max(self.floor_sd))
    }
}

/// Sets `noisy`: read noise above [`NOISY_FACTOR`] x the plate's at the same absorbance.
pub fn apply_noise_flag(rate: &mut WellRate, noise: &PlateNoise) {
    if let Some(own) = rate.noise {
        if let Some(expected) = noise.expected_at(own.absorbance).filter(|sd| *sd > 0.0) {
            if own.sd > NOISY_FACTOR * expected {
                rate.flag(Flag::Noisy);
                rate.notes.push(format!(
                    "read noise {} is {:.0}x the plate's {} at {:.2} AU",
                    significant(own.sd),
                    own.sd / expected,
                    significant(expected),
                    own.absorbance
                ));
            }
        }
    }
}

/// Sets `weak` on a rate that should be non-zero: |rate| below [`WEAK_FACTOR`] x its standard
/// error or x the blank slope SD. `corrected_slope` is the slope after background subtraction.
pub fn apply_weak_flag(rate: &mut WellRate, corrected_slope: Option<(f64, f64)>, noise: &PlateNoise) {
    let Some(fit) = rate.fit else { return };
    let (slope, se) = corrected_slope.unwrap_or((fit.slope, fit.slope_se));
    let by_se = se.is_finite() && slope.abs() < WEAK_FACTOR * se;
    let by_blanks = noise
        .blank_slope_sd
        .is_some_and(|sd| slope.abs() < WEAK_FACTOR * sd);
    if by_se || by_blanks {
        rate.flag(Flag::Weak);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn reads(n: usize, step: f64) -> Vec<f64> {
        (0..n).map(|i| step * i as f64).collect()
    }

    /// Deterministic pseudo-noise (a fixed sequence, so the tests cannot flake).
    fn wiggle(i: usize, amplitude: f64) -> f64 {
        let x = ((i as f64 + 1.0) * 12.9898).sin() * 43_758.545;
        (x - x.floor() - 0.5) * 2.0 * amplitude
    }

    fn rate_of(times: &[f64], values: &[f64], s0: Option<f64>, settings: &RateSettings) -> WellRate {
        let values: Vec<Option<f64>> = values.iter().copied().map(Some).collect();
        // Raw absorbance well inside the photometric range, so saturation plays no part.
        let raw: crate::import::Readings = vec![Some(0.1); values.len()].into_iter().collect();
        let critical = CriticalValues::new(settings.alpha, times.len());
        well_rate(
            TraceInput {
                times_s: times,
                values: &values,
                raw_absorbance: &raw,
                substrate_start: s0,
            },
            settings,
            &critical,
        )
    }

    #[test]
    fn straight_trace_uses_every_read() {
        let times = reads(25, 30.0);
        let values: Vec<f64> = times
            .iter()
            .enumerate()
            .map(|(i, t)| 0.01 * t + wiggle(i, 0.02))
            .collect();
        let rate = rate_of(&times, &values, Some(1000.0), &RateSettings::default());
        assert!(rate.flags.is_empty(), "{:?}", rate.flags);
        assert_eq!(rate.fit.unwrap().n_points, 25);
        assert!((rate.fit.unwrap().slope - 0.01).abs() < 1e-4);
    }

    #[test]
    fn depletion_shortens_the_window_to_the_conversion_limit() {
        // First-order loss of substrate: P = S0 (1 - exp(-k t)), S0 = 10, k = 4e-4 /s, so 10%
        // is converted at t = -ln(0.9)/k = 263 s (by construction). Noise 0.1% of S0.
        let times = reads(25, 30.0);
        let values: Vec<f64> = times
            .iter()
            .enumerate()
            .map(|(i, t)| 10.0 * (1.0 - (-4e-4 * t).exp()) + wiggle(i, 0.01))
            .collect();
        let chord = RateSettings {
            max_conversion: 0.10,
            allow_depletion_curvature: false,
            ..RateSettings::default()
        };
        let rate = rate_of(&times, &values, Some(10.0), &chord);
        let (_, end) = rate.window_s.unwrap();
        assert!(rate.conversion.unwrap() <= 0.10, "{rate:?}");
        assert!(
            (150.0..=270.0).contains(&end),
            "window should stop near 10% conversion, ended at {end}"
        );
        assert!(!rate.flags.contains(&Flag::Depleted));
    }

    #[test]
    fn depletion_bends_a_window_without_ending_it_when_the_estimator_corrects_for_it() {
        // The same first-order loss of substrate (the most curved shape depletion can give, S0
        // << Km) with noise 0.01% of S0, small enough that the curvature is highly significant
        // against a line. By 720 s the chord converts 25%, inside the integrated estimator's 30%.
        let times = reads(25, 30.0);
        let values: Vec<f64> = times
            .iter()
            .enumerate()
            .map(|(i, t)| 10.0 * (1.0 - (-4e-4 * t).exp()) + wiggle(i, 0.001))
            .collect();
        let integrated = RateSettings::default();
        assert!(integrated.allow_depletion_curvature);
        let rate = rate_of(&times, &values, Some(10.0), &integrated);
        assert_eq!(rate.fit.unwrap().n_points, 25, "{rate:?}");
        assert!(rate.flags.is_empty(), "{:?}", rate.flags);
        // Without the allowance the same reads end the window within the first few minutes.
        let line_only = RateSettings {
            allow_depletion_curvature: false,
            ..RateSettings::default()
        };
        let rate = rate_of(&times, &values, Some(10.0), &line_only);
        assert!(rate.fit.unwrap().n_points < 15, "{rate:?}");
    }

    #[test]
    fn the_slope_standard_error_measures_the_noise_not_the_bend() {
        // Simulation with known truth (seeded): 2000 windows of 46 reads 20 s apart, the product
        // curve of a well converting 25% of its substrate by the window's end (P = v t - c t^2
        // with 2 c T / v = 0.25, the bend depletion makes), plus white noise of SD 5e-4. The
        // slope's real scatter over the draws is the truth; the standard error from the noise
        // about the quadratic must match it, the line's residual SD overstates it.
        use rand::SeedableRng;
        use rand_distr::{Distribution, Normal};
        let times = reads(46, 20.0);
        let span = 900.0;
        let v = 1e-4;
        let c = 0.25 * v / (2.0 * span);
        let noise = Normal::new(0.0, 5e-4).unwrap();
        let mut generator = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        let draws = 2000;
        let (mut slopes, mut reported, mut line_based) = (Vec::new(), 0.0, 0.0);
        for _ in 0..draws {
            let values: Vec<f64> = times
                .iter()
                .map(|t| v * t - c * t * t + noise.sample(&mut generator))
                .collect();
            let sums = WindowSums::new(&times, &values);
            let line = sums.line(0, 45).unwrap();
            let test = sums.curvature(0, 45).unwrap();
            let corrected = with_noise_about_the_quadratic(line, &test);
            slopes.push(line.slope);
            reported += corrected.slope_se.powi(2);
            line_based += line.slope_se.powi(2);
        }
        let mean = slopes.iter().sum::<f64>() / draws as f64;
        let scatter = (slopes.iter().map(|s| (s - mean).powi(2)).sum::<f64>() / (draws - 1) as f64).sqrt();
        let reported = (reported / draws as f64).sqrt();
        let line_based = (line_based / draws as f64).sqrt();
        // Sampling error of a 2000-draw SD is about 1.6%.
        assert!((reported / scatter - 1.0).abs() < 0.05, "{reported} vs {scatter}");
        assert!(line_based > 1.5 * scatter, "{line_based} vs {scatter}");
        // A straight window: the two figures agree.
        let values: Vec<f64> = times
            .iter()
            .enumerate()
            .map(|(i, t)| v * t + wiggle(i, 0.002))
            .collect();
        let sums = WindowSums::new(&times, &values);
        let line = sums.line(0, 45).unwrap();
        let corrected = with_noise_about_the_quadratic(line, &sums.curvature(0, 45).unwrap());
        assert!((corrected.slope_se / line.slope_se - 1.0).abs() < 0.05);
    }

    #[test]
    fn curvature_beyond_depletion_still_ends_the_window() {
        // Enzyme losing activity at 2e-3 /s with plenty of substrate (S0 = 1000, 1.5% converted
        // by 720 s): P = (v0 / kd) (1 - exp(-kd t)) bends far more than depletion of 1000 can,
        // so the window ends early even with the allowance.
        let times = reads(25, 30.0);
        let values: Vec<f64> = times
            .iter()
            .enumerate()
            .map(|(i, t)| (0.05 / 2e-3) * (1.0 - (-2e-3 * t).exp()) + wiggle(i, 0.002))
            .collect();
        let rate = rate_of(&times, &values, Some(1000.0), &RateSettings::default());
        assert!(rate.fit.unwrap().n_points < 15, "{rate:?}");
    }

    #[test]
    fn the_departure_is_measured_from_the_allowed_interval() {
        assert_eq!(beyond_interval(-0.5, -1.0), 0.0);
        assert_eq!(beyond_interval(0.0, -1.0), 0.0);
        assert_eq!(beyond_interval(-1.5, -1.0), -0.5);
        assert_eq!(beyond_interval(0.25, -1.0), 0.25);
        // v = 0.01 per s, S0 = 10, 20% converted: 0.01^2 / (2 x 8).
        assert!((depletion_allowance(0.01, Some(10.0), Some(0.2)) - 6.25e-6).abs() < 1e-18);
        assert_eq!(depletion_allowance(0.01, None, Some(0.2)), 0.0);
        assert_eq!(depletion_allowance(-0.01, Some(10.0), Some(0.2)), 0.0);
    }

    #[test]
    fn fast_depletion_is_flagged() {
        let times = reads(25, 30.0);
        let values: Vec<f64> = times
            .iter()
            .enumerate()
            .map(|(i, t)| 10.0 * (1.0 - (-2e-2 * t).exp()) + wiggle(i, 0.01))
            .collect();
        let rate = rate_of(&times, &values, Some(10.0), &RateSettings::default());
        assert!(rate.flags.contains(&Flag::Depleted), "{:?}", rate.flags);
    }

    #[test]
    fn curvature_without_known_substrate_is_caught_by_the_tests() {
        let times = reads(25, 30.0);
        let values: Vec<f64> = times
            .iter()
            .enumerate()
            .map(|(i, t)| 10.0 * (1.0 - (-2e-3 * t).exp()) + wiggle(i, 1e-3))
            .collect();
        let rate = rate_of(&times, &values, None, &RateSettings::default());
        let n = rate.fit.unwrap().n_points;
        assert!((5..25).contains(&n), "window of {n} points");
        assert!(!rate.flags.contains(&Flag::Lag));
    }

    #[test]
    fn lag_is_flagged() {
        // Activity ramps up as 1 - exp(-t/tau): P = v (t - tau (1 - exp(-t/tau))).
        let times = reads(25, 30.0);
        let tau = 150.0;
        let values: Vec<f64> = times
            .iter()
            .enumerate()
            .map(|(i, t)| 0.01 * (t - tau * (1.0 - (-t / tau).exp())) + wiggle(i, 0.005))
            .collect();
        let rate = rate_of(&times, &values, Some(1000.0), &RateSettings::default());
        assert!(rate.flags.contains(&Flag::Lag), "{:?}", rate.flags);
    }

    #[test]
    fn unreadable_reads_are_named_and_skipped() {
        let times = reads(10, 30.0);
        let mut values: Vec<Option<f64>> = times.iter().map(|t| Some(0.01 * t)).collect();
        values[3] = None;
        let critical = CriticalValues::new(0.01, 10);
        let rate = well_rate(
            TraceInput {
                times_s: &times,
                values: &values,
                raw_absorbance: &crate::import::Readings::from_values(&values),
                substrate_start: None,
            },
            &RateSettings::default(),
            &critical,
        );
        assert_eq!(rate.flags, vec![Flag::Unreadable]);
        assert!(rate.notes[0].contains("read 4 (t = 90 s)"), "{:?}", rate.notes);
        assert_eq!(rate.fit.unwrap().n_points, 9);
    }

    #[test]
    fn saturation_ends_the_usable_reads() {
        let times = reads(10, 30.0);
        let values: Vec<Option<f64>> = times.iter().map(|t| Some(2.0 + 0.01 * t)).collect();
        let critical = CriticalValues::new(0.01, 10);
        let rate = well_rate(
            TraceInput {
                times_s: &times,
                values: &values,
                raw_absorbance: &crate::import::Readings::from_values(&values),
                substrate_start: None,
            },
            &RateSettings::default(),
            &critical,
        );
        assert!(rate.flags.contains(&Flag::Saturated), "{:?}", rate.flags);
    }

    #[test]
    fn fixed_window_is_honoured() {
        let times = reads(25, 30.0);
        let values: Vec<f64> = times.iter().map(|t| 0.01 * t).collect();
        let settings = RateSettings {
            fixed_window_s: Some((60.0, 300.0)),
            ..RateSettings::default()
        };
        let rate = rate_of(&times, &values, None, &settings);
        assert_eq!(rate.window_s, Some((60.0, 300.0)));
        assert_eq!(rate.fit.unwrap().n_points, 9);
    }

    #[test]
    fn plate_flags_noisy_and_weak() {
        let times = reads(25, 30.0);
        let values: Vec<f64> = times
            .iter()
            .enumerate()
            .map(|(i, t)| 1e-5 * t + wiggle(i, 0.05))
            .collect();
        let mut rate = rate_of(&times, &values, None, &RateSettings::default());
        // The plate's other wells read with noise 0.001 at the same absorbance (0.1 AU).
        let quiet: Vec<ReadNoise> = (0..20)
            .map(|_| ReadNoise {
                sd: 0.001,
                absorbance: 0.1,
                resolution: 1e-6,
            })
            .collect();
        let noise = PlateNoise::new(quiet, &[0.001], None);
        apply_noise_flag(&mut rate, &noise);
        apply_weak_flag(&mut rate, None, &noise);
        assert!(rate.flags.contains(&Flag::Noisy), "{:?}", rate);
        assert!(rate.flags.contains(&Flag::Weak));
    }

    /// Curvature is not noise: a depleting curve (a tenth of what is left converted per read, as
    /// at S0 well below Km) reads as nearly noise-free, and the same curve with Gaussian noise of
    /// SD 0.002 reads about 0.002; the straight-line residual SD the flag used before is several
    /// times the noise on the same curve.
    #[test]
    fn read_noise_ignores_curvature_and_measures_scatter() {
        use rand::SeedableRng;
        use rand_distr::{Distribution, Normal};
        let times = reads(40, 20.0);
        let depleting: Vec<f64> = times.iter().map(|t| 0.3 * (1.0 - (-t / 200.0).exp())).collect();
        let absorbance = vec![0.5; times.len()];
        let clean = read_noise(&times, &depleting, &absorbance).unwrap();
        // Third differences of 0.3 (1 - exp(-t/200)) at step 20 s are at most 0.3 (0.1)^3.
        assert!(clean.sd < 1e-4, "{clean:?}");
        let mut generator = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        let normal = Normal::new(0.0, 0.002).unwrap();
        let noisy: Vec<f64> = depleting
            .iter()
            .map(|v| v + normal.sample(&mut generator))
            .collect();
        let estimated = read_noise(&times, &noisy, &absorbance).unwrap().sd;
        assert!(estimated > 0.0014 && estimated < 0.0028, "{estimated}");
        let line = WindowSums::new(&times, &noisy).line(0, times.len() - 1).unwrap();
        assert!(
            line.residual_sd > 3.0 * estimated,
            "{} vs {estimated}",
            line.residual_sd
        );
    }

    /// The noise expected at an absorbance follows the wells near it, so a well at 2 AU is judged
    /// against the (larger) photometric noise there, not against the blanks.
    #[test]
    fn the_noise_model_follows_absorbance() {
        let mut wells = Vec::new();
        for i in 0..30 {
            wells.push(ReadNoise {
                sd: 0.001,
                absorbance: 0.1 + 0.001 * f64::from(i),
                resolution: 1e-4,
            });
            wells.push(ReadNoise {
                sd: 0.008,
                absorbance: 2.0 + 0.001 * f64::from(i),
                resolution: 1e-4,
            });
        }
        let model = PlateNoise::new(wells, &[0.001], None);
        assert_eq!(model.expected_at(0.12), Some(0.001));
        assert_eq!(model.expected_at(2.01), Some(0.008));
        assert!(PlateNoise::new(Vec::new(), &[], None).expected_at(1.0).is_none());
    }
}
