//! How numbers are shown to people (the report and the terminal summary): a display unit chosen
//! per column so that values read as ordinary numbers, four significant digits, and a power of
//! ten only where no unit makes the number ordinary. CSV and JSON keep full precision in their
//! own units; nothing here is ever read back.
//!
//! The rule (this program's): a column keeps its own unit when its typical value (the median of
//! its finite non-zero magnitudes) lies in [0.1, 10 000); otherwise the first unit of its family
//! that puts the typical value in [1, 1000) is used (per second before per minute, so a rate is
//! shown in nM/s before uM/min); a family with no such unit (second-order constants in M^-1 s^-1)
//! keeps its unit and takes out a common power of ten for the column.

use crate::core::units::ConcentrationUnit;

/// A unit a column is shown in: a factor from the stored unit, and a common power of ten.
#[derive(Debug, Clone, PartialEq)]
pub struct DisplayUnit {
    /// Multiplies a stored value into the display unit (before the power of ten).
    pub factor: f64,
    /// The power of ten taken out of every value of the column (0: none).
    pub exponent: i32,
    /// The unit in plain text (`nM/s`, `M^-1 s^-1`).
    plain: String,
    /// The unit in HTML (`M<sup>&minus;1</sup> s<sup>&minus;1</sup>`).
    html: String,
}

/// The families of units a stored unit string belongs to.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Family {
    /// Amount per time: `uM/s` (`Some(unit)`) or `AU/s` (`None`).
    Rate(Option<ConcentrationUnit>),
    /// A concentration.
    Concentration(ConcentrationUnit),
    /// A first-order constant, `1/s`.
    PerSecond,
    /// A second-order constant, `1/(M*s)`.
    PerMolarSecond,
}

fn family_of(unit: &str) -> Option<Family> {
    let unit = unit.trim();
    match unit {
        "1/s" => return Some(Family::PerSecond),
        "1/(M*s)" => return Some(Family::PerMolarSecond),
        "AU/s" => return Some(Family::Rate(None)),
        _ => {}
    }
    if let Some(amount) = unit.strip_suffix("/s") {
        return amount.parse().ok().map(|u| Family::Rate(Some(u)));
    }
    unit.parse().ok().map(Family::Concentration)
}

const CONCENTRATIONS: [ConcentrationUnit; 5] = [
    ConcentrationUnit::Molar,
    ConcentrationUnit::Millimolar,
    ConcentrationUnit::Micromolar,
    ConcentrationUnit::Nanomolar,
    ConcentrationUnit::Picomolar,
];

/// The median of the finite non-zero magnitudes (`None`: no such value).
fn typical_magnitude(values: impl IntoIterator<Item = f64>) -> Option<f64> {
    let magnitudes: Vec<f64> = values
        .into_iter()
        .filter(|v| v.is_finite() && *v != 0.0)
        .map(f64::abs)
        .collect();
    crate::core::stats::median(magnitudes)
}

fn ordinary(magnitude: f64) -> bool {
    (0.1..10_000.0).contains(&magnitude)
}

/// Whether a unit puts the typical value where it reads plainly: [1, 1000), or for first-order
/// constants [0.1, 1000) (0.24 per minute reads better than 14.4 per hour).
fn comfortable(family: Family, magnitude: f64) -> bool {
    let low = if family == Family::PerSecond { 0.1 } else { 1.0 };
    (low..1000.0).contains(&magnitude)
}

impl DisplayUnit {
    /// The stored unit unchanged.
    pub fn unchanged(unit: &str) -> DisplayUnit {
        let html = match family_of(unit) {
            Some(Family::PerMolarSecond) => "M<sup>&minus;1</sup> s<sup>&minus;1</sup>".to_string(),
            Some(Family::PerSecond) => "s<sup>&minus;1</sup>".to_string(),
            _ => crate::render::report::html::escape(unit),
        };
        let plain = match family_of(unit) {
            Some(Family::PerMolarSecond) => "M^-1 s^-1".to_string(),
            Some(Family::PerSecond) => "1/s".to_string(),
            _ => unit.to_string(),
        };
        DisplayUnit {
            factor: 1.0,
            exponent: 0,
            plain,
            html,
        }
    }

    fn plain_unit(factor: f64, plain: String) -> DisplayUnit {
        DisplayUnit {
            factor,
            exponent: 0,
            html: crate::render::report::html::escape(&plain),
            plain,
        }
    }

    /// The display unit of a column of rates stored in the run's internal unit: the unit asked
    /// for (`--rate-unit`) when there is one, else the rule's choice from the internal unit.
    pub fn for_rates(
        rates: &crate::groups::units::RateExpression,
        internal_values: impl IntoIterator<Item = f64>,
    ) -> DisplayUnit {
        if rates.chosen {
            DisplayUnit {
                factor: rates.factor,
                ..DisplayUnit::unchanged(&rates.unit)
            }
        } else {
            DisplayUnit::for_values(&rates.unit, internal_values)
        }
    }

    /// The display unit of a column of values stored in `unit` (module docs for the rule).
    pub fn for_values(unit: &str, values: impl IntoIterator<Item = f64>) -> DisplayUnit {
        let unchanged = DisplayUnit::unchanged(unit);
        let (Some(family), Some(typical)) = (family_of(unit), typical_magnitude(values)) else {
            return unchanged;
        };
        if ordinary(typical) {
            return unchanged;
        }
        let candidates: Vec<DisplayUnit> = match family {
            Family::Rate(Some(stored)) => [(1.0, "s"), (60.0, "min")]
                .into_iter()
                .flat_map(|(per, time)| {
                    CONCENTRATIONS.into_iter().map(move |amount| {
                        DisplayUnit::plain_unit(stored.factor_to(amount) * per, format!("{amount}/{time}"))
                    })
                })
                .collect(),
            Family::Rate(None) => vec![
                DisplayUnit::plain_unit(1.0, "AU/s".to_string()),
                DisplayUnit::plain_unit(1000.0, "mAU/s".to_string()),
                DisplayUnit::plain_unit(60_000.0, "mAU/min".to_string()),
            ],
            Family::Concentration(stored) => CONCENTRATIONS
                .into_iter()
                .map(|amount| DisplayUnit::plain_unit(stored.factor_to(amount), amount.to_string()))
                .collect(),
            Family::PerSecond => vec![
                DisplayUnit::plain_unit(1.0, "1/s".to_string()),
                DisplayUnit::plain_unit(60.0, "1/min".to_string()),
                DisplayUnit::plain_unit(3600.0, "1/h".to_string()),
            ],
            Family::PerMolarSecond => Vec::new(),
        };
        if let Some(found) = candidates
            .into_iter()
            .find(|candidate| comfortable(family, typical * candidate.factor))
        {
            return DisplayUnit {
                html: if family == Family::PerSecond {
                    found
                        .html
                        .replace("1/s", "s<sup>&minus;1</sup>")
                        .replace("1/min", "min<sup>&minus;1</sup>")
                        .replace("1/h", "h<sup>&minus;1</sup>")
                } else {
                    found.html
                },
                ..found
            };
        }
        DisplayUnit {
            exponent: typical.log10().floor() as i32,
            ..unchanged
        }
    }

    /// The unit as plain text, with the power of ten when there is one (`x 10^5 M^-1 s^-1`).
    pub fn plain(&self) -> String {
        if self.exponent == 0 {
            self.plain.clone()
        } else {
            format!("x 10^{} {}", self.exponent, self.plain)
        }
    }

    /// The unit as HTML, with the power of ten when there is one.
    pub fn html(&self) -> String {
        if self.exponent == 0 {
            self.html.clone()
        } else {
            format!(
                "&times; 10<sup>{}</sup> {}",
                self.exponent.to_string().replace('-', "&minus;"),
                self.html
            )
        }
    }

    /// A stored value in this unit, as a number to read (four significant digits).
    pub fn value(&self, value: f64) -> String {
        number(self.scaled(value))
    }

    /// A stored value in this unit, with the decimals another value of the same row takes (so a
    /// value and its interval line up: `12.01 [11.95, 12.07]`).
    pub fn value_like(&self, value: f64, like: f64) -> String {
        with_decimals(self.scaled(value), decimals_for(self.scaled(like)))
    }

    /// A value with its interval in this unit: `12.01 [11.95, 12.07]`.
    pub fn with_interval(&self, value: f64, interval: Option<[f64; 2]>) -> String {
        match interval {
            Some([low, high]) => format!(
                "{} [{}, {}]",
                self.value(value),
                self.value_like(low, value),
                self.value_like(high, value)
            ),
            None => self.value(value),
        }
    }

    fn scaled(&self, value: f64) -> f64 {
        value * self.factor / 10f64.powi(self.exponent)
    }
}

/// Decimals that give four significant digits to `value` (none for 1000 and above; at most 6).
fn decimals_for(value: f64) -> usize {
    if value == 0.0 || !value.is_finite() {
        return 0;
    }
    let magnitude = value.abs().log10().floor() as i32;
    (3 - magnitude).clamp(0, 6) as usize
}

fn with_decimals(value: f64, decimals: usize) -> String {
    if !value.is_finite() {
        return "-".to_string();
    }
    let text = format!("{value:.decimals$}");
    // `-0.00` reads as a sign that means nothing.
    if text.trim_start_matches('-').chars().all(|c| c == '0' || c == '.') {
        text.trim_start_matches('-').to_string()
    } else {
        text
    }
}

/// A number to read: four significant digits in plain decimals from 0.001 to 10^6, else a
/// mantissa and a power of ten (`1.462 x 10^-5`); a non-finite value is `-`.
pub fn number(value: f64) -> String {
    if !value.is_finite() {
        return "-".to_string();
    }
    if value == 0.0 {
        return "0".to_string();
    }
    let magnitude = value.abs().log10().floor() as i32;
    if (-3..6).contains(&magnitude) {
        with_decimals(value, decimals_for(value))
    } else {
        let mantissa = value / 10f64.powi(magnitude);
        format!("{} x 10^{magnitude}", with_decimals(mantissa, 3))
    }
}

/// An axis tick: four significant digits without trailing zeros (`0.002`, `100`, `1.5e-5`).
pub fn tick(value: f64) -> String {
    if !value.is_finite() {
        return String::new();
    }
    if value == 0.0 {
        return "0".to_string();
    }
    let magnitude = value.abs().log10().floor() as i32;
    let scale = 10f64.powi(3 - magnitude);
    let rounded = (value * scale).round() / scale;
    if (-4..6).contains(&magnitude) {
        format!("{rounded}")
    } else {
        format!("{rounded:e}")
    }
}

/// [`number`] for HTML (`1.462 &times; 10<sup>&minus;5</sup>`).
pub fn number_html(value: f64) -> String {
    let text = number(value);
    match text.split_once(" x 10^") {
        Some((mantissa, power)) => format!(
            "{mantissa} &times; 10<sup>{}</sup>",
            power.replace('-', "&minus;")
        ),
        None => text,
    }
}

/// A coefficient of variation (a fraction) as a percentage; none (a mean too near zero for a
/// CV to mean anything, see `rates::conditions`) is an empty cell.
pub fn cv_percent(cv: Option<f64>) -> String {
    cv.filter(|cv| cv.is_finite())
        .map_or(String::new(), |cv| format!("{}%", with_decimals(100.0 * cv, 1)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_read_as_ordinary_numbers() {
        assert_eq!(number(12.0123), "12.01");
        assert_eq!(number(0.008427), "0.008427");
        assert_eq!(number(0.0008427), "8.427 x 10^-4");
        assert_eq!(number(145861.0), "145861");
        assert_eq!(number(5.201e-19), "5.201 x 10^-19");
        assert_eq!(number(-0.00001), "-1.000 x 10^-5");
        assert_eq!(number(f64::NAN), "-");
        assert_eq!(number_html(1.46e7), "1.460 &times; 10<sup>7</sup>");
        assert_eq!(with_decimals(-0.0001, 2), "0.00");
        for (value, text) in [
            (100.0, "100"),
            (0.002, "0.002"),
            (0.30000000000000004, "0.3"),
            (1.5e-5, "1.5e-5"),
            (-2.5, "-2.5"),
            (0.0, "0"),
        ] {
            assert_eq!(tick(value), text);
        }
    }

    #[test]
    fn small_rates_move_to_a_unit_that_reads_plainly() {
        let unit = DisplayUnit::for_values("uM/s", [8.4e-4, 2.0e-3, 5.0e-3]);
        assert_eq!(unit.plain(), "nM/s");
        assert_eq!(unit.value(8.427e-4), "0.8427");
        assert_eq!(unit.value(2.0e-3), "2.000");
        // Ordinary values keep the stored unit.
        let unit = DisplayUnit::for_values("uM/s", [0.05, 0.2]);
        assert_eq!(unit.plain(), "uM/s");
        // A rate so slow that even pM/s gives below 1 goes per minute.
        let unit = DisplayUnit::for_values("uM/s", [1e-7]);
        assert_eq!(unit.plain(), "pM/min");
        assert_eq!(unit.value(1e-7), "6.000");
        let unit = DisplayUnit::for_values("AU/s", [3e-5, 4e-5]);
        assert_eq!(unit.plain(), "mAU/min");
    }

    #[test]
    fn second_order_constants_take_a_power_of_ten() {
        let unit = DisplayUnit::for_values("1/(M*s)", [149150.0, 15931.0]);
        assert_eq!(unit.exponent, 4);
        assert_eq!(unit.plain(), "x 10^4 M^-1 s^-1");
        assert_eq!(
            unit.with_interval(149160.0, Some([147055.0, 151246.0])),
            "14.92 [14.71, 15.12]"
        );
        assert!(unit.html().contains("10<sup>4</sup> M<sup>&minus;1</sup>"));
        let unit = DisplayUnit::for_values("1/(M*s)", [1500.0]);
        assert_eq!((unit.exponent, unit.plain()), (0, "M^-1 s^-1".to_string()));
    }

    #[test]
    fn slow_turnover_reads_per_minute_and_concentrations_change_prefix() {
        let unit = DisplayUnit::for_values("1/s", [0.004]);
        assert_eq!(unit.plain(), "1/min");
        assert_eq!(unit.value(0.004), "0.2400");
        assert!(unit.html().contains("min<sup>&minus;1</sup>"));
        let unit = DisplayUnit::for_values("uM", [0.02, 0.03]);
        assert_eq!(unit.plain(), "nM");
        assert_eq!(unit.value(0.02), "20.00");
        let unit = DisplayUnit::for_values("widgets", [1e-9]);
        assert_eq!(unit.plain(), "widgets");
    }

    #[test]
    fn a_cv_is_a_percentage_or_empty() {
        assert_eq!(cv_percent(Some(0.0312)), "3.1%");
        assert_eq!(cv_percent(None), "");
    }
}
