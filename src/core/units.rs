//! Units that users write in headers and flags: concentrations (`M`, `mM`, `uM`/`µM`, `nM`, `pM`),
//! mass concentrations of an enzyme (`mg/mL`, `ug/mL`), time (`s`, `min`, `h`), rates (`uM/min`,
//! a concentration per time, `--rate-unit`), and the splitting of a header such as
//! `substrate [uM]` into its name and unit.
//!
//! Every factor is an SI prefix or a definition of a unit of time (1 min = 60 s, 1 h = 3600 s;
//! the SI Brochure, 9th edition, 2019, tables 7 and 8), so a conversion is exact up to floating
//! point and converting back returns the value.

use std::fmt;
use std::str::FromStr;

/// A molar concentration unit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize, serde::Deserialize)]
pub enum ConcentrationUnit {
    /// mol/L
    #[serde(rename = "M")]
    Molar,
    /// 1e-3 mol/L
    #[serde(rename = "mM")]
    Millimolar,
    /// 1e-6 mol/L
    #[serde(rename = "uM")]
    Micromolar,
    /// 1e-9 mol/L
    #[serde(rename = "nM")]
    Nanomolar,
    /// 1e-12 mol/L
    #[serde(rename = "pM")]
    Picomolar,
}

impl ConcentrationUnit {
    /// How many mol/L one of this unit is.
    pub fn in_molar(self) -> f64 {
        match self {
            Self::Molar => 1.0,
            Self::Millimolar => 1e-3,
            Self::Micromolar => 1e-6,
            Self::Nanomolar => 1e-9,
            Self::Picomolar => 1e-12,
        }
    }

    /// The factor that converts a value in `self` into `target`: `value_in_target = value * factor`.
    pub fn factor_to(self, target: ConcentrationUnit) -> f64 {
        self.in_molar() / target.in_molar()
    }

    /// The ASCII spelling used in output headers (`uM`, never `µM`, so that every tool can read it).
    pub fn symbol(self) -> &'static str {
        match self {
            Self::Molar => "M",
            Self::Millimolar => "mM",
            Self::Micromolar => "uM",
            Self::Nanomolar => "nM",
            Self::Picomolar => "pM",
        }
    }
}

impl fmt::Display for ConcentrationUnit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.symbol())
    }
}

impl FromStr for ConcentrationUnit {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        // Case matters: `mM` and `MM` would otherwise be confusable with mega; accept the usual
        // spellings, including the micro sign (U+00B5) and the Greek mu (U+03BC).
        match text.trim() {
            "M" | "mol/L" | "mol/l" => Ok(Self::Molar),
            "mM" | "mmol/L" | "mmol/l" => Ok(Self::Millimolar),
            "uM" | "\u{b5}M" | "\u{3bc}M" | "umol/L" | "umol/l" => Ok(Self::Micromolar),
            "nM" | "nmol/L" | "nmol/l" => Ok(Self::Nanomolar),
            "pM" | "pmol/L" | "pmol/l" => Ok(Self::Picomolar),
            other => Err(format!(
                "unknown concentration unit '{other}' (expected M, mM, uM, nM or pM)"
            )),
        }
    }
}

/// A time unit for plain-number time columns.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub enum TimeUnit {
    /// seconds
    #[serde(rename = "s")]
    Seconds,
    /// minutes
    #[serde(rename = "min")]
    Minutes,
    /// hours
    #[serde(rename = "h")]
    Hours,
}

impl TimeUnit {
    /// Seconds in one of this unit.
    pub fn in_seconds(self) -> f64 {
        match self {
            Self::Seconds => 1.0,
            Self::Minutes => 60.0,
            Self::Hours => 3600.0,
        }
    }
}

impl fmt::Display for TimeUnit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Self::Seconds => "s",
            Self::Minutes => "min",
            Self::Hours => "h",
        })
    }
}

impl FromStr for TimeUnit {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim().to_ascii_lowercase().as_str() {
            "s" | "sec" | "secs" | "second" | "seconds" => Ok(Self::Seconds),
            "min" | "mins" | "minute" | "minutes" | "m" => Ok(Self::Minutes),
            "h" | "hr" | "hrs" | "hour" | "hours" => Ok(Self::Hours),
            other => Err(format!("unknown time unit '{other}' (expected s, min or h)")),
        }
    }
}

/// A mass concentration, the way enzyme stocks are often given (`enzyme [mg/mL]`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize, serde::Deserialize)]
pub enum MassConcentrationUnit {
    /// mg/mL, which is g/L
    #[serde(rename = "mg/mL")]
    MilligramPerMillilitre,
    /// ug/mL, which is mg/L
    #[serde(rename = "ug/mL")]
    MicrogramPerMillilitre,
}

impl MassConcentrationUnit {
    /// How many g/L (kg/m^3) one of this unit is.
    pub fn in_grams_per_litre(self) -> f64 {
        match self {
            Self::MilligramPerMillilitre => 1.0,
            Self::MicrogramPerMillilitre => 1e-3,
        }
    }

    /// mol/L of a protein of molecular weight `kda` (kDa, 1 kDa = 1000 g/mol) at one of this unit.
    pub fn molar_per_unit(self, kda: f64) -> f64 {
        self.in_grams_per_litre() / (kda * 1000.0)
    }

    /// The ASCII spelling used in output headers.
    pub fn symbol(self) -> &'static str {
        match self {
            Self::MilligramPerMillilitre => "mg/mL",
            Self::MicrogramPerMillilitre => "ug/mL",
        }
    }
}

impl fmt::Display for MassConcentrationUnit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.symbol())
    }
}

impl FromStr for MassConcentrationUnit {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim() {
            "mg/mL" | "mg/ml" | "g/L" | "g/l" => Ok(Self::MilligramPerMillilitre),
            "ug/mL" | "ug/ml" | "\u{b5}g/mL" | "\u{b5}g/ml" | "\u{3bc}g/mL" | "\u{3bc}g/ml" | "mg/L"
            | "mg/l" => Ok(Self::MicrogramPerMillilitre),
            other => Err(format!(
                "unknown mass concentration unit '{other}' (expected mg/mL or ug/mL)"
            )),
        }
    }
}

/// The unit of a layout's quantity column: molar, or (for the enzyme) a mass concentration.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum AmountUnit {
    /// A molar concentration.
    Molar(ConcentrationUnit),
    /// A mass concentration.
    Mass(MassConcentrationUnit),
}

impl AmountUnit {
    /// The molar unit, if this is one.
    pub fn molar(self) -> Option<ConcentrationUnit> {
        match self {
            Self::Molar(unit) => Some(unit),
            Self::Mass(_) => None,
        }
    }

    /// The mass concentration unit, if this is one.
    pub fn mass(self) -> Option<MassConcentrationUnit> {
        match self {
            Self::Molar(_) => None,
            Self::Mass(unit) => Some(unit),
        }
    }
}

impl fmt::Display for AmountUnit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Molar(unit) => unit.fmt(f),
            Self::Mass(unit) => unit.fmt(f),
        }
    }
}

/// The unit rates are reported in: a molar concentration per unit of time (`uM/min`, `nM/s`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub struct RateUnit {
    /// The concentration.
    pub concentration: ConcentrationUnit,
    /// Per this time.
    pub time: TimeUnit,
}

/// The rate units `--rate-unit` accepts, for messages.
pub const RATE_UNIT_CHOICES: &str =
    "a concentration (M, mM, uM, nM or pM) per s, min or h, such as uM/s, uM/min, nM/s or mM/min";

impl RateUnit {
    /// The factor that turns a rate in `from` per second into this unit:
    /// `value_here = value * factor`.
    pub fn factor_from_per_second(self, from: ConcentrationUnit) -> f64 {
        from.factor_to(self.concentration) * self.time.in_seconds()
    }
}

impl fmt::Display for RateUnit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}/{}", self.concentration, self.time)
    }
}

impl FromStr for RateUnit {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        let refused = || {
            format!(
                "unknown rate unit '{}' (expected {RATE_UNIT_CHOICES})",
                text.trim()
            )
        };
        let (concentration, time) = text.trim().split_once('/').ok_or_else(refused)?;
        // Only the three plain time symbols: `m` would read as minutes in a time column but as
        // metres or milli- to a reader of `uM/m`.
        let time = match time.trim() {
            "s" => TimeUnit::Seconds,
            "min" => TimeUnit::Minutes,
            "h" => TimeUnit::Hours,
            _ => return Err(refused()),
        };
        // `mol/L`-style spellings hold a slash of their own; a rate takes the symbol alone.
        let concentration = match concentration.trim() {
            symbol @ ("M" | "mM" | "uM" | "\u{b5}M" | "\u{3bc}M" | "nM" | "pM") => {
                ConcentrationUnit::from_str(symbol).map_err(|_| refused())?
            }
            _ => return Err(refused()),
        };
        Ok(RateUnit { concentration, time })
    }
}

/// Splits a header into its name and the unit written in brackets or parentheses:
/// `substrate [uM]` -> (`substrate`, Some(`uM`)); `Time (min)` -> (`Time`, Some(`min`));
/// `well` -> (`well`, None). The name is trimmed; the unit is trimmed and may be empty.
pub fn split_header_unit(header: &str) -> (&str, Option<&str>) {
    let header = header.trim();
    for (open, close) in [('[', ']'), ('(', ')')] {
        if let (Some(start), true) = (header.rfind(open), header.ends_with(close)) {
            let name = header[..start].trim();
            let unit = header[start + open.len_utf8()..header.len() - close.len_utf8()].trim();
            return (name, Some(unit));
        }
    }
    (header, None)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn concentration_units_convert() {
        assert_eq!(
            ConcentrationUnit::from_str("\u{b5}M"),
            Ok(ConcentrationUnit::Micromolar)
        );
        assert_eq!(
            ConcentrationUnit::from_str("mM"),
            Ok(ConcentrationUnit::Millimolar)
        );
        assert!(ConcentrationUnit::from_str("mg/mL").is_err());
        let factor = ConcentrationUnit::Millimolar.factor_to(ConcentrationUnit::Micromolar);
        assert!((factor - 1000.0).abs() < 1e-9);
    }

    #[test]
    fn headers_split_into_name_and_unit() {
        assert_eq!(split_header_unit("substrate [uM]"), ("substrate", Some("uM")));
        assert_eq!(split_header_unit(" Time (min) "), ("Time", Some("min")));
        assert_eq!(split_header_unit("well"), ("well", None));
        assert_eq!(split_header_unit("T [\u{b0}C]"), ("T", Some("\u{b0}C")));
    }

    /// Rate units against the SI prefixes and the minute and hour (SI Brochure, 9th edition, 2019:
    /// micro 1e-6, nano 1e-9, milli 1e-3; 1 min = 60 s, 1 h = 3600 s).
    #[test]
    fn rate_units_convert_by_si_definitions() {
        let per_minute = RateUnit::from_str("uM/min").unwrap();
        assert_eq!(per_minute.to_string(), "uM/min");
        assert_eq!(
            per_minute.factor_from_per_second(ConcentrationUnit::Micromolar),
            60.0
        );
        let nano = RateUnit::from_str("nM/s").unwrap();
        assert!((nano.factor_from_per_second(ConcentrationUnit::Micromolar) - 1000.0).abs() < 1e-9);
        let milli = RateUnit::from_str("mM/min").unwrap();
        assert!((milli.factor_from_per_second(ConcentrationUnit::Micromolar) - 0.06).abs() < 1e-15);
        let hourly = RateUnit::from_str("\u{b5}M/h").unwrap();
        assert_eq!(hourly.to_string(), "uM/h");
        assert_eq!(
            hourly.factor_from_per_second(ConcentrationUnit::Micromolar),
            3600.0
        );
        for bad in ["uM", "uM/m", "mg/min", "uM/day", "mol/L/s", "/s", ""] {
            let message = RateUnit::from_str(bad).unwrap_err();
            assert!(message.contains(&format!("'{}'", bad.trim())), "{message}");
            assert!(message.contains("uM/min"), "{message}");
        }
    }

    /// mg/mL is g/L and ug/mL is mg/L (SI prefixes; 1 mL = 1e-3 L).
    #[test]
    fn mass_concentration_units_parse() {
        assert_eq!(
            MassConcentrationUnit::from_str("ug/mL").map(MassConcentrationUnit::in_grams_per_litre),
            Ok(1e-3)
        );
        assert_eq!(
            MassConcentrationUnit::from_str("\u{b5}g/ml"),
            Ok(MassConcentrationUnit::MicrogramPerMillilitre)
        );
        assert!(MassConcentrationUnit::from_str("uM").is_err());
    }

    use proptest::prelude::*;

    proptest! {
        /// Any rate expressed in any unit and back returns to itself (to rounding), and the
        /// factors compose: s -> A -> B equals s -> B.
        #[test]
        fn rate_units_round_trip(
            value in -1e6f64..1e6,
            from in 0usize..5,
            a in (0usize..5, 0usize..3),
            b in (0usize..5, 0usize..3),
        ) {
            let concentrations = [
                ConcentrationUnit::Molar,
                ConcentrationUnit::Millimolar,
                ConcentrationUnit::Micromolar,
                ConcentrationUnit::Nanomolar,
                ConcentrationUnit::Picomolar,
            ];
            let times = [TimeUnit::Seconds, TimeUnit::Minutes, TimeUnit::Hours];
            let unit = |(c, t): (usize, usize)| RateUnit { concentration: concentrations[c], time: times[t] };
            let (unit_a, unit_b) = (unit(a), unit(b));
            let from = concentrations[from];
            prop_assert_eq!(RateUnit::from_str(&unit_a.to_string()), Ok(unit_a));
            let in_a = value * unit_a.factor_from_per_second(from);
            let back = in_a / unit_a.factor_from_per_second(from);
            prop_assert!((back - value).abs() <= 1e-12 * value.abs());
            let a_to_b = unit_b.factor_from_per_second(from) / unit_a.factor_from_per_second(from);
            let direct = value * unit_b.factor_from_per_second(from);
            prop_assert!((in_a * a_to_b - direct).abs() <= 1e-12 * direct.abs());
        }
    }

    #[test]
    fn time_units_parse() {
        assert_eq!(TimeUnit::from_str("Min"), Ok(TimeUnit::Minutes));
        assert_eq!(TimeUnit::from_str("h").map(TimeUnit::in_seconds), Ok(3600.0));
        assert!(TimeUnit::from_str("days").is_err());
    }
}
