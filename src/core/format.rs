//! Number formatting shared by every text the program makes, and the caution every output
//! carries. Only formatting: no decision is ever made from the text these return.

/// The caution every summary and output carries.
pub const CAUTION: &str = "Results support, and do not replace, your lab's validated procedures: check flagged wells and fits before reporting them.";

/// Four significant digits, plain or scientific as the size needs.
pub fn significant(value: f64) -> String {
    if value == 0.0 || !value.is_finite() {
        return format!("{value}");
    }
    let magnitude = value.abs().log10().floor() as i32;
    if (-3..6).contains(&magnitude) {
        let decimals = (3 - magnitude).max(0) as usize;
        format!("{value:.decimals$}")
    } else {
        format!("{value:.3e}")
    }
}

/// Seconds written without trailing zeros, to the millisecond: 90, 1.5, 0.25.
pub fn format_seconds(seconds: f64) -> String {
    let rounded = (seconds * 1000.0).round() / 1000.0;
    format!("{rounded}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn significant_keeps_four_digits_plain_or_scientific() {
        assert_eq!(significant(12.3456), "12.35");
        assert_eq!(significant(0.0012345), "0.001234");
        assert_eq!(significant(123456.0), "123456");
        assert_eq!(significant(1234567.0), "1.235e6");
        assert_eq!(significant(0.0), "0");
    }

    #[test]
    fn seconds_lose_trailing_zeros() {
        assert_eq!(format_seconds(90.0), "90");
        assert_eq!(format_seconds(1.5), "1.5");
        assert_eq!(format_seconds(0.2500001), "0.25");
    }
}
