//! Units that users write in headers and flags: concentrations (`M`, `mM`, `uM`/`µM`, `nM`, `pM`)
//! and time (`s`, `min`, `h`), and the splitting of a header such as `substrate [uM]` into its name
//! and unit.

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

    #[test]
    fn time_units_parse() {
        assert_eq!(TimeUnit::from_str("Min"), Ok(TimeUnit::Minutes));
        assert_eq!(TimeUnit::from_str("h").map(TimeUnit::in_seconds), Ok(3600.0));
        assert!(TimeUnit::from_str("days").is_err());
    }
}
