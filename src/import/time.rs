//! Reading times and header meanings for kinetic exports: clock text (`h:mm:ss`, `mm:ss`),
//! numbers with a unit (`90 s`, `1.5 min`), header units (`Time [s]`, `time (min)`, `Time/s`),
//! the classification of header cells (time, temperature, well, other) and the per-read lines of a
//! grid export (`Cycle 3, Time 0:01:30`, `t = 90 s`, `Temperature 30.1 °C`).
//!
//! Nothing here guesses a time unit: a plain number stays [`RawTime::Plain`] until the header,
//! the block line or the user's `--time-unit` supplies one. Every shape reads its times through
//! [`raw_time_of_cell`] (a grid block line hands its value text to the same [`raw_time_of_text`]),
//! so a time one shape refuses no other shape reads.

use std::str::FromStr;

use crate::core::cells::{column_letters, Cell, DecimalMark};
use crate::core::plate::WellId;
use crate::core::units::{split_header_unit, TimeUnit};
use crate::files::sheet::{number_shape, parse_number, NumberShape};

/// A time as read from one cell, before any unit from elsewhere is applied.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum RawTime {
    /// Already in seconds: clock text, a spreadsheet time or duration cell, or a number that
    /// carries its own unit (`90 s`).
    Seconds(f64),
    /// A plain number whose unit must come from the header, the block line or `--time-unit`.
    Plain(f64),
}

/// Why a cell holds no time.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum TimeTextError {
    /// The cell is empty.
    Empty,
    /// Text that is no time at all: a label (`Mean`), a marker (`NaN`, `n/a`, `OVER`, `#120`),
    /// a date; the text as written.
    NotATime(String),
    /// Digits and colons that are not a valid `h:mm:ss` / `mm:ss` (the reason says why).
    BadClock(String),
    /// A number followed by a word that is not a time unit.
    UnknownUnit(String),
    /// A number written with a decimal mark the file does not use (`120,5` in a file of `0.5`).
    WrongDecimalMark {
        /// The text as written.
        text: String,
        /// The file's decimal mark.
        mark: DecimalMark,
    },
    /// Two times on one line of a grid export.
    TwoTimes(String),
}

impl TimeTextError {
    /// Why the cell is no time, in words (the reason of [`super::ImportError::BadTime`]).
    pub(crate) fn reason(&self) -> String {
        match self {
            TimeTextError::Empty => "the time cell is empty".to_string(),
            TimeTextError::NotATime(text) => format!("'{text}' is not a time"),
            TimeTextError::BadClock(reason) => reason.clone(),
            TimeTextError::UnknownUnit(unit) => format!("'{unit}' is not a time unit (expected s, min or h)"),
            TimeTextError::WrongDecimalMark { text, mark } => format!(
                "'{text}' is not a number in this file, whose decimal mark is {}",
                mark.describe()
            ),
            TimeTextError::TwoTimes(texts) => format!("the line gives two times ({texts})"),
        }
    }
}

/// Parses clock text: `mm:ss` or `h:mm:ss`, seconds optionally with a fraction (`1:02:03.5`,
/// also with a decimal comma). The leading part may exceed 59 (`90:00` is 90 minutes); the parts
/// after it must be below 60. Returns seconds, or `None` if the text has no colon at all.
///
/// The whole seconds are summed as integers and the fraction added once, so a time written
/// from whole hours, minutes and seconds comes back exactly.
pub(crate) fn parse_clock_text(text: &str) -> Option<Result<f64, TimeTextError>> {
    let text = text.trim();
    if !text.contains(':') {
        return None;
    }
    let bad = |reason: &str| Some(Err(TimeTextError::BadClock(format!("'{text}' {reason}"))));
    let parts: Vec<&str> = text.split(':').collect();
    if parts.len() > 3 {
        return bad("has more than three parts (expected h:mm:ss or mm:ss)");
    }
    let (whole_seconds_text, fraction_text) = match parts[parts.len() - 1].split_once(['.', ',']) {
        Some((whole, fraction)) => (whole, Some(fraction)),
        None => (parts[parts.len() - 1], None),
    };
    let all_digits = |part: &str| !part.is_empty() && part.bytes().all(|b| b.is_ascii_digit());
    if !parts[..parts.len() - 1].iter().all(|part| all_digits(part)) || !all_digits(whole_seconds_text) {
        return bad("is not a time (expected h:mm:ss or mm:ss with digits only)");
    }
    if fraction_text.is_some_and(|fraction| !all_digits(fraction)) {
        return bad("has a bad fraction of a second");
    }
    let number = |part: &str| part.parse::<u64>().ok();
    let mut whole_seconds: u64 = 0;
    for (index, part) in parts[..parts.len() - 1].iter().enumerate() {
        let Some(value) = number(part) else {
            return bad("has a part too large to read");
        };
        if index > 0 && value >= 60 {
            return bad("has minutes of 60 or more");
        }
        whole_seconds = whole_seconds.saturating_mul(60).saturating_add(value);
    }
    let Some(seconds) = number(whole_seconds_text) else {
        return bad("has seconds too large to read");
    };
    if seconds >= 60 {
        return bad("has seconds of 60 or more");
    }
    whole_seconds = whole_seconds.saturating_mul(60).saturating_add(seconds);
    let fraction = match fraction_text {
        Some(fraction) => match format!("0.{fraction}").parse::<f64>() {
            Ok(value) => value,
            Err(_) => return bad("has a bad fraction of a second"),
        },
        None => 0.0,
    };
    Some(Ok(whole_seconds as f64 + fraction))
}

/// Parses a number followed by a time unit, with or without a space: `90 s`, `90s`, `1,5 min`
/// (in the file's decimal mark). `None` if the text does not start with a number and a word.
pub(crate) fn parse_number_with_unit(text: &str, mark: DecimalMark) -> Option<Result<f64, TimeTextError>> {
    let text = text.trim();
    let unit_start = text.find(|c: char| c.is_alphabetic())?;
    let number_text = text[..unit_start].trim();
    let value = match parse_number(number_text, mark) {
        Some(value) => value,
        None if number_shape(number_text) != NumberShape::NotANumber => {
            return Some(Err(TimeTextError::WrongDecimalMark {
                text: text.to_string(),
                mark,
            }))
        }
        None => return None,
    };
    let unit_text = text[unit_start..].trim();
    Some(match TimeUnit::from_str(unit_text) {
        Ok(unit) => Ok(value * unit.in_seconds()),
        Err(_) => Err(TimeTextError::UnknownUnit(unit_text.to_string())),
    })
}

/// Seconds of a spreadsheet time or duration cell, rounded to the microsecond: spreadsheets
/// store times as binary fractions of a day, so `0:01:30` comes back as 89.99999999999999 s,
/// and no plate reader times its reads finer than a millisecond.
pub(crate) fn duration_seconds(seconds: f64) -> f64 {
    (seconds * 1e6).round() / 1e6
}

/// Reads one time cell: a plain number, a spreadsheet time, clock text or a number with its unit.
/// Anything else is an error saying why it is no time; whether that ends a table or is a defect
/// is for the caller (`super::rows`) to say.
pub(crate) fn raw_time_of_cell(cell: &Cell, mark: DecimalMark) -> Result<RawTime, TimeTextError> {
    match cell {
        Cell::Duration(seconds) => Ok(RawTime::Seconds(duration_seconds(*seconds))),
        Cell::Number(value) => Ok(RawTime::Plain(*value)),
        Cell::Empty => Err(TimeTextError::Empty),
        Cell::Text(text) => raw_time_of_text(text, mark),
    }
}

/// Reads a time written as text (a text cell, or the value of a grid block line).
pub(crate) fn raw_time_of_text(text: &str, mark: DecimalMark) -> Result<RawTime, TimeTextError> {
    let text = text.trim();
    if text.is_empty() {
        return Err(TimeTextError::Empty);
    }
    // Only text that starts with a digit (or a sign or point and a digit) can be a time.
    let digits_start = text.trim_start_matches(['+', '-', '.', ',']);
    if !digits_start.starts_with(|c: char| c.is_ascii_digit()) {
        return Err(TimeTextError::NotATime(text.to_string()));
    }
    if let Some(result) = parse_clock_text(text) {
        return result.map(RawTime::Seconds);
    }
    if let Some(value) = parse_number(text, mark) {
        return Ok(RawTime::Plain(value));
    }
    if number_shape(text) != NumberShape::NotANumber {
        return Err(TimeTextError::WrongDecimalMark {
            text: text.to_string(),
            mark,
        });
    }
    match parse_number_with_unit(text, mark) {
        Some(result) => result.map(RawTime::Seconds),
        None => Err(TimeTextError::NotATime(text.to_string())),
    }
}

/// Whether a text reads as a label (`Mean`, `Max V`, `End of kinetic read`): it starts with a
/// letter and is not one of the words instruments write for "no reading" (`NaN`, `n/a`, `OVER`,
/// `error`, ...). Rows below a table that start with a label are summary lines; rows that start
/// with anything else and hold readings look like reads and are never passed over quietly.
pub(crate) fn is_label_text(text: &str) -> bool {
    let text = text.trim();
    if !text.starts_with(|c: char| c.is_alphabetic()) {
        return false;
    }
    let folded = text.to_ascii_lowercase();
    !matches!(
        folded.as_str(),
        "nan"
            | "na"
            | "n/a"
            | "null"
            | "none"
            | "inf"
            | "infinity"
            | "over"
            | "overflow"
            | "under"
            | "underflow"
            | "sat"
            | "saturated"
            | "err"
            | "error"
            | "invalid"
            | "masked"
            | "out of range"
    )
}

/// What a header's unit says about time.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum HeaderTimeUnit {
    /// No unit written.
    Absent,
    /// A time unit.
    Unit(TimeUnit),
    /// A clock pattern such as `[h:mm:ss]`: says the cells are clock text, not a unit.
    ClockPattern,
    /// Something that is not a time unit (`[ms]`): an error only if plain numbers need it.
    Unknown(String),
}

/// What a header cell names.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum HeaderKind {
    /// The elapsed-time column, with the unit its header states.
    Time(HeaderTimeUnit),
    /// A temperature column (per-read metadata).
    Temperature,
    /// A well column.
    Well(WellId),
    /// The `well` column of a long table.
    WellName,
    /// Anything else.
    Other,
}

/// Whether a header name (unit already split off, any case) names elapsed time.
fn is_time_name(name: &str) -> bool {
    let name = name.trim().trim_end_matches(':').trim().to_ascii_lowercase();
    matches!(
        name.as_str(),
        "t" | "time" | "elapsed" | "elapsed time" | "time elapsed" | "kinetic time" | "read time"
    ) || name.starts_with("time ")
}

/// Whether a header name names a temperature.
fn is_temperature_name(name: &str) -> bool {
    name.trim().to_ascii_lowercase().starts_with("temp")
}

/// Whether a unit text is degrees Celsius (`°C`, `ºC`, `C`, `deg C`).
pub(crate) fn is_celsius(unit: &str) -> bool {
    let folded: String = unit
        .chars()
        .filter(|c| !c.is_whitespace() && !matches!(c, '\u{b0}' | '\u{ba}'))
        .collect::<String>()
        .to_ascii_lowercase();
    matches!(folded.as_str(), "c" | "degc" | "celsius")
}

/// Whether a header name names the well column of a long table.
fn is_well_name(name: &str) -> bool {
    matches!(
        name.trim().to_ascii_lowercase().as_str(),
        "well" | "well id" | "well_id" | "wellid" | "well position"
    )
}

/// Reads the unit text of a time header.
fn header_time_unit(unit: Option<&str>) -> HeaderTimeUnit {
    match unit {
        None => HeaderTimeUnit::Absent,
        Some(unit) if unit.contains(':') => HeaderTimeUnit::ClockPattern,
        Some(unit) => match TimeUnit::from_str(unit) {
            Ok(unit) => HeaderTimeUnit::Unit(unit),
            Err(_) => HeaderTimeUnit::Unknown(unit.to_string()),
        },
    }
}

/// Classifies one header cell. Only text cells name anything.
pub(crate) fn classify_header(cell: &Cell) -> HeaderKind {
    let Cell::Text(text) = cell else {
        return HeaderKind::Other;
    };
    if let Some(well) = WellId::parse(text) {
        return HeaderKind::Well(well);
    }
    let (name, unit) = split_header_unit(text);
    if is_time_name(name) && !unit.is_some_and(is_celsius) {
        return HeaderKind::Time(header_time_unit(unit));
    }
    if is_temperature_name(name) || (name.eq_ignore_ascii_case("t") && unit.is_some_and(is_celsius)) {
        return HeaderKind::Temperature;
    }
    if is_well_name(name) && unit.is_none() {
        return HeaderKind::WellName;
    }
    // `Time/s` and `time_s`: a unit after a slash or underscore.
    if unit.is_none() {
        if let Some((name, unit)) = text.rsplit_once(['/', '_']) {
            if is_time_name(name) && TimeUnit::from_str(unit).is_ok() {
                return HeaderKind::Time(header_time_unit(Some(unit)));
            }
        }
    }
    HeaderKind::Other
}

/// One field of a grid block's per-read line.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct BlockTime {
    /// The time as written.
    pub raw: RawTime,
    /// The unit written on the line for a plain number (`t = 90 s` says seconds).
    pub unit: Option<TimeUnit>,
    /// Zero-based column of the cell holding the time value.
    pub column: usize,
}

/// What a grid block's per-read line says: its time, its temperature, or both.
#[derive(Debug, Clone, PartialEq, Default)]
pub(crate) struct BlockLine {
    /// The read's time, if the line gives one.
    pub time: Option<BlockTime>,
    /// The read's temperature in degrees Celsius, if the line gives one.
    pub temperature_c: Option<f64>,
}

/// An error in a block line, with the zero-based column it is in.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct BlockLineError {
    /// Zero-based column of the offending cell.
    pub column: usize,
    /// What is wrong.
    pub error: TimeTextError,
}

/// A token of a block line.
#[derive(Debug, Clone, PartialEq)]
enum Token {
    /// A run of letters (lowercased ASCII; other letters such as `°` kept).
    Word(String),
    /// A run starting with a digit: a number or clock text as written.
    Numeric(String),
    /// A number cell.
    Number(f64),
    /// A time or duration cell, in seconds.
    Duration(f64),
    /// One punctuation character.
    Punct(char),
}

/// Splits a text cell into tokens, each tagged with the cell's column.
fn tokenize_text(text: &str, column: usize, tokens: &mut Vec<(Token, usize)>) {
    let chars: Vec<char> = text.chars().collect();
    let mut index = 0;
    while index < chars.len() {
        let c = chars[index];
        if c.is_whitespace() {
            index += 1;
        } else if c.is_ascii_digit()
            || (matches!(c, '-' | '+' | '.')
                && chars.get(index + 1).is_some_and(|next| next.is_ascii_digit()))
        {
            let start = index;
            index += 1;
            while index < chars.len()
                && (chars[index].is_ascii_digit() || matches!(chars[index], '.' | ',' | ':'))
            {
                index += 1;
            }
            // Clock text run into letters (`0:12:1O`) is one broken time, not a time and a word.
            let clock = chars[start..index].contains(&':');
            if clock && chars.get(index).is_some_and(|c| c.is_alphanumeric()) {
                while index < chars.len()
                    && (chars[index].is_alphanumeric() || matches!(chars[index], '.' | ',' | ':'))
                {
                    index += 1;
                }
            }
            // A trailing separator (`Cycle 3,`) belongs to the punctuation, not the number.
            let mut end = index;
            while end > start + 1 && matches!(chars[end - 1], '.' | ',' | ':') {
                end -= 1;
            }
            tokens.push((Token::Numeric(chars[start..end].iter().collect()), column));
            index = end;
        } else if c.is_alphabetic() || matches!(c, '\u{b0}' | '\u{ba}') {
            let start = index;
            while index < chars.len()
                && (chars[index].is_alphabetic() || matches!(chars[index], '\u{b0}' | '\u{ba}'))
            {
                index += 1;
            }
            let word: String = chars[start..index].iter().collect();
            tokens.push((Token::Word(word.to_ascii_lowercase()), column));
        } else {
            tokens.push((Token::Punct(c), column));
            index += 1;
        }
    }
}

/// Words that may label a read before its time (`Cycle 3`, `Read 2`, `Kinetic read 5`).
fn is_read_label_word(word: &str) -> bool {
    matches!(
        word,
        "cycle" | "read" | "reading" | "kinetic" | "measurement" | "loop"
    )
}

/// The error for a line with a second time in zero-based `second` (the first in `first`).
fn two_times(first: usize, second: usize) -> BlockLineError {
    BlockLineError {
        column: second,
        error: TimeTextError::TwoTimes(format!(
            "columns {} and {}",
            column_letters(first + 1),
            column_letters(second + 1)
        )),
    }
}

/// Parses a grid block's per-read line. `Ok(None)` when the row is no such line.
///
/// Grammar (case-insensitive): an optional read label (`Cycle 3`, `Read no. 2`), then one or more
/// fields `KEYWORD [UNIT]? (:|=)? VALUE UNIT?`, where KEYWORD is `time`, `temperature`, `temp`
/// or `t`. A bare `t` needs `=` or `:`, and is a temperature when its unit is °C. Fields may be
/// split across cells. Values are read with the file's decimal mark and the one time reader
/// ([`raw_time_of_text`]). A second time on the line (a second time field, or a clock time right
/// after the first) is an error; anything else after the last field is ignored.
pub(crate) fn parse_block_line(
    cells: &[Cell],
    mark: DecimalMark,
) -> Result<Option<BlockLine>, BlockLineError> {
    let mut tokens: Vec<(Token, usize)> = Vec::new();
    for (column, cell) in cells.iter().enumerate() {
        match cell {
            Cell::Empty => {}
            Cell::Number(value) => tokens.push((Token::Number(*value), column)),
            Cell::Duration(seconds) => tokens.push((Token::Duration(*seconds), column)),
            Cell::Text(text) => tokenize_text(text, column, &mut tokens),
        }
    }
    let is_separator = |token: &Token| matches!(token, Token::Punct(',' | ';' | '.' | '-' | '#' | '|'));
    let mut index = 0;
    let skip_separators = |index: &mut usize| {
        while tokens.get(*index).is_some_and(|(token, _)| is_separator(token)) {
            *index += 1;
        }
    };
    skip_separators(&mut index);
    // The optional read label.
    if let Some((Token::Word(word), _)) = tokens.get(index) {
        if is_read_label_word(word) {
            let mut look = index + 1;
            while let Some((Token::Word(_) | Token::Punct('.' | '#'), _)) = tokens.get(look) {
                if look > index + 3 {
                    break;
                }
                look += 1;
            }
            let is_integer = |token: &Token| match token {
                Token::Numeric(text) => text.bytes().all(|b| b.is_ascii_digit()),
                Token::Number(value) => value.fract() == 0.0,
                _ => false,
            };
            if tokens.get(look).is_some_and(|(token, _)| is_integer(token)) {
                index = look + 1;
                skip_separators(&mut index);
            }
        }
    }
    let mut line = BlockLine::default();
    let mut found_any = false;
    while let Some((Token::Word(keyword), _)) = tokens.get(index) {
        let keyword = keyword.as_str();
        let is_time_keyword = keyword == "time";
        let is_temperature_keyword = matches!(keyword, "temperature" | "temp");
        let is_bare_t = keyword == "t";
        if !is_time_keyword && !is_temperature_keyword && !is_bare_t {
            break;
        }
        let mut look = index + 1;
        // An optional bracketed unit: `Time [s]`, `Temperature (°C)`.
        let mut bracket_unit: Option<String> = None;
        if let Some((Token::Punct(open @ ('[' | '(')), _)) = tokens.get(look) {
            let close = if *open == '[' { ']' } else { ')' };
            let mut unit_text = String::new();
            let mut inner = look + 1;
            while let Some((token, _)) = tokens.get(inner) {
                match token {
                    Token::Punct(c) if *c == close => break,
                    Token::Word(word) => unit_text.push_str(word),
                    Token::Numeric(text) => unit_text.push_str(text),
                    Token::Punct(c) => unit_text.push(*c),
                    Token::Number(_) | Token::Duration(_) => {}
                }
                inner += 1;
            }
            if tokens.get(inner).is_some() {
                bracket_unit = Some(unit_text);
                look = inner + 1;
            }
        }
        let had_assignment = matches!(tokens.get(look), Some((Token::Punct(':' | '='), _)));
        if had_assignment {
            look += 1;
        }
        if is_bare_t && !had_assignment {
            break;
        }
        let Some((value_token, value_column)) = tokens.get(look) else {
            break;
        };
        let value_column = *value_column;
        // The unit after the value, if any.
        let unit_after = match tokens.get(look + 1) {
            Some((Token::Word(word), _))
                if !matches!(word.as_str(), "time" | "temperature" | "temp" | "t") =>
            {
                Some(word.clone())
            }
            _ => None,
        };
        let stated_unit = unit_after.clone().or(bracket_unit);
        let is_temperature =
            is_temperature_keyword || (is_bare_t && stated_unit.as_deref().is_some_and(is_celsius));
        let consumed_unit = usize::from(unit_after.is_some());
        if is_temperature {
            let value = match value_token {
                Token::Number(value) => Some(*value),
                Token::Numeric(text) => parse_number(text, mark),
                _ => None,
            };
            let Some(value) = value else {
                break;
            };
            line.temperature_c = Some(value);
        } else {
            let raw = match value_token {
                Token::Duration(seconds) => RawTime::Seconds(duration_seconds(*seconds)),
                Token::Number(value) => RawTime::Plain(*value),
                Token::Numeric(text) => raw_time_of_text(text, mark).map_err(|error| BlockLineError {
                    column: value_column,
                    error,
                })?,
                // `Time zone: UTC` and the like: not a read's time.
                Token::Word(_) | Token::Punct(_) => break,
            };
            // A clock or duration value needs no unit; a word written after it is not read.
            let unit = match (raw, stated_unit.as_deref()) {
                (RawTime::Plain(_), Some(unit)) if !unit.contains(':') => {
                    Some(TimeUnit::from_str(unit).map_err(|_| BlockLineError {
                        column: value_column,
                        error: TimeTextError::UnknownUnit(unit.to_string()),
                    })?)
                }
                _ => None,
            };
            if let Some(first) = &line.time {
                return Err(two_times(first.column, value_column));
            }
            line.time = Some(BlockTime {
                raw,
                unit,
                column: value_column,
            });
        }
        found_any = true;
        index = look + 1 + consumed_unit;
        skip_separators(&mut index);
    }
    // A clock time right after the line's time (`Time 0:01:30 0:02:00`) is a second time, not a
    // note: taking either would be a guess.
    if let (Some(first), Some((token, column))) = (&line.time, tokens.get(index)) {
        let is_time = match token {
            Token::Numeric(text) => text.contains(':'),
            Token::Duration(_) => true,
            _ => false,
        };
        if is_time {
            return Err(two_times(first.column, *column));
        }
    }
    Ok(found_any.then_some(line))
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    const POINT: DecimalMark = DecimalMark::Point;

    fn text_cells<'a>(texts: &[&'a str]) -> Vec<Cell<'a>> {
        texts
            .iter()
            .map(|text| crate::files::sheet::text_cell(text, DecimalMark::Comma))
            .collect()
    }

    #[test]
    fn clock_text_in_its_usual_forms() {
        assert_eq!(parse_clock_text("0:01:30"), Some(Ok(90.0)));
        assert_eq!(parse_clock_text("01:30"), Some(Ok(90.0)));
        assert_eq!(parse_clock_text("1:02:03.5"), Some(Ok(3723.5)));
        assert_eq!(parse_clock_text("1:02:03,25"), Some(Ok(3723.25)));
        assert_eq!(parse_clock_text("90:00"), Some(Ok(5400.0)));
        assert_eq!(parse_clock_text("26:00:00"), Some(Ok(93_600.0)));
        assert_eq!(parse_clock_text("90"), None);
    }

    #[test]
    fn broken_clock_text_is_an_error_not_a_guess() {
        for text in [
            "0:75:00",
            "0:01:60",
            "1:2:3:4",
            "0:0x:10",
            "1:",
            ":30",
            "0:01:30.x",
        ] {
            assert!(
                matches!(parse_clock_text(text), Some(Err(TimeTextError::BadClock(_)))),
                "{text}"
            );
        }
    }

    #[test]
    fn time_cells() {
        assert_eq!(
            raw_time_of_cell(&Cell::Number(90.0), POINT),
            Ok(RawTime::Plain(90.0))
        );
        assert_eq!(
            raw_time_of_cell(&Cell::Duration(90.0), POINT),
            Ok(RawTime::Seconds(90.0))
        );
        assert_eq!(
            raw_time_of_cell(&Cell::Text("1.5 min"), POINT),
            Ok(RawTime::Seconds(90.0))
        );
        assert_eq!(
            raw_time_of_cell(&Cell::Text("90s"), POINT),
            Ok(RawTime::Seconds(90.0))
        );
        assert_eq!(
            raw_time_of_cell(&Cell::Text("Mean"), POINT),
            Err(TimeTextError::NotATime("Mean".into()))
        );
        assert_eq!(raw_time_of_cell(&Cell::Empty, POINT), Err(TimeTextError::Empty));
        assert!(matches!(
            raw_time_of_cell(&Cell::Text("90 ms"), POINT),
            Err(TimeTextError::UnknownUnit(_))
        ));
    }

    /// Issue class: every shape reads its times with one parser, so what one refuses none reads.
    #[test]
    fn broken_times_are_errors_in_every_form() {
        for text in [
            "NaN",
            "n/a",
            "-",
            "#120",
            "OVER",
            "120?",
            "1 20",
            "2024-05-01",
            "0:12:1O",
        ] {
            assert!(raw_time_of_text(text, POINT).is_err(), "{text}");
        }
        assert_eq!(
            raw_time_of_text("120,5", POINT),
            Err(TimeTextError::WrongDecimalMark {
                text: "120,5".into(),
                mark: POINT
            })
        );
        assert_eq!(
            raw_time_of_text("120,5", DecimalMark::Comma),
            Ok(RawTime::Plain(120.5))
        );
        // The grid's block line hands its value to the same reader.
        let error = parse_block_line(&text_cells(&["Time 0:12:1O"]), POINT).unwrap_err();
        assert!(matches!(error.error, TimeTextError::BadClock(_)), "{error:?}");
        let error = parse_block_line(&text_cells(&["Time 0:01:30 0:02:00"]), POINT).unwrap_err();
        assert!(matches!(error.error, TimeTextError::TwoTimes(_)), "{error:?}");
        let error = parse_block_line(&text_cells(&["Time 0:01:30", "Time 0:02:00"]), POINT).unwrap_err();
        assert_eq!(error.column, 1);
        assert!(is_label_text("Mean") && is_label_text("Max V"));
        assert!(!is_label_text("NaN") && !is_label_text("OVER") && !is_label_text("#120"));
    }

    #[test]
    fn headers_are_classified() {
        let kind = |text: &str| classify_header(&Cell::Text(text));
        assert_eq!(
            kind("Time [s]"),
            HeaderKind::Time(HeaderTimeUnit::Unit(TimeUnit::Seconds))
        );
        assert_eq!(
            kind("time (min)"),
            HeaderKind::Time(HeaderTimeUnit::Unit(TimeUnit::Minutes))
        );
        assert_eq!(
            kind("Time [h]"),
            HeaderKind::Time(HeaderTimeUnit::Unit(TimeUnit::Hours))
        );
        assert_eq!(
            kind("Time/s"),
            HeaderKind::Time(HeaderTimeUnit::Unit(TimeUnit::Seconds))
        );
        assert_eq!(
            kind("t (sec)"),
            HeaderKind::Time(HeaderTimeUnit::Unit(TimeUnit::Seconds))
        );
        assert_eq!(kind("Time"), HeaderKind::Time(HeaderTimeUnit::Absent));
        assert_eq!(
            kind("Time [hh:mm:ss]"),
            HeaderKind::Time(HeaderTimeUnit::ClockPattern)
        );
        assert_eq!(
            kind("Time [ms]"),
            HeaderKind::Time(HeaderTimeUnit::Unknown("ms".into()))
        );
        assert_eq!(kind("Temperature [C]"), HeaderKind::Temperature);
        assert_eq!(kind("Temp (\u{b0}C)"), HeaderKind::Temperature);
        assert_eq!(kind("T [\u{b0}C]"), HeaderKind::Temperature);
        assert_eq!(kind("A01"), HeaderKind::Well(WellId::new(0, 0)));
        assert_eq!(kind("AF48"), HeaderKind::Well(WellId::new(31, 47)));
        assert_eq!(kind("Well"), HeaderKind::WellName);
        assert_eq!(kind("Cycle Nr."), HeaderKind::Other);
        assert_eq!(kind("Date/Time"), HeaderKind::Other);
        assert_eq!(classify_header(&Cell::Number(1.0)), HeaderKind::Other);
    }

    #[test]
    fn block_lines_in_their_usual_forms() {
        let time_of = |texts: &[&str]| {
            parse_block_line(&text_cells(texts), POINT)
                .unwrap()
                .and_then(|line| line.time)
                .map(|time| (time.raw, time.unit))
        };
        assert_eq!(time_of(&["Time 0:01:30"]), Some((RawTime::Seconds(90.0), None)));
        assert_eq!(
            time_of(&["Time: 90 s"]),
            Some((RawTime::Plain(90.0), Some(TimeUnit::Seconds)))
        );
        assert_eq!(
            time_of(&["t = 90 s"]),
            Some((RawTime::Plain(90.0), Some(TimeUnit::Seconds)))
        );
        assert_eq!(
            time_of(&["Cycle 3, Time 0:01:30"]),
            Some((RawTime::Seconds(90.0), None))
        );
        assert_eq!(
            time_of(&["Cycle 3", "Time", "0:01:30"]),
            Some((RawTime::Seconds(90.0), None))
        );
        assert_eq!(
            time_of(&["Time 1.5 min"]),
            Some((RawTime::Plain(1.5), Some(TimeUnit::Minutes)))
        );
        assert_eq!(
            time_of(&["Time [s]:", "90"]),
            Some((RawTime::Plain(90.0), Some(TimeUnit::Seconds)))
        );
        assert_eq!(time_of(&["Time", "90"]), Some((RawTime::Plain(90.0), None)));
        assert_eq!(
            time_of(&["t=90s"]),
            Some((RawTime::Plain(90.0), Some(TimeUnit::Seconds)))
        );
        assert_eq!(
            time_of(&["Read no. 2 - Time 30 s"]),
            Some((RawTime::Plain(30.0), Some(TimeUnit::Seconds)))
        );
        let line = parse_block_line(&[Cell::Text("Time"), Cell::Duration(90.0)], POINT)
            .unwrap()
            .unwrap();
        assert_eq!(
            line.time.map(|time| (time.raw, time.column)),
            Some((RawTime::Seconds(90.0), 1))
        );
    }

    #[test]
    fn temperature_lines() {
        let temperature_of = |texts: &[&str]| {
            parse_block_line(&text_cells(texts), POINT)
                .unwrap()
                .and_then(|line| line.temperature_c)
        };
        assert_eq!(temperature_of(&["Temperature 30.1 C"]), Some(30.1));
        assert_eq!(temperature_of(&["T = 30.1 \u{b0}C"]), Some(30.1));
        assert_eq!(temperature_of(&["Temperature:", "30.1", "\u{b0}C"]), Some(30.1));
        let both = parse_block_line(
            &text_cells(&["Time 0:00:30; Temp 29,5 \u{b0}C"]),
            DecimalMark::Comma,
        )
        .unwrap()
        .unwrap();
        assert_eq!(both.temperature_c, Some(29.5));
        assert_eq!(both.time.map(|time| time.raw), Some(RawTime::Seconds(30.0)));
    }

    #[test]
    fn other_lines_are_not_block_lines() {
        for texts in [
            &["Start time: 10:32:05"][..],
            &["Time zone: UTC"],
            &["Plate 1"],
            &["T 30"],
            &["Date/Time", "2024-05-01"],
        ] {
            assert_eq!(parse_block_line(&text_cells(texts), POINT), Ok(None), "{texts:?}");
        }
    }

    #[test]
    fn broken_block_times_are_errors() {
        let error = parse_block_line(&text_cells(&["Time", "0:61:00"]), POINT).unwrap_err();
        assert_eq!(error.column, 1);
        assert!(matches!(error.error, TimeTextError::BadClock(_)));
        let error = parse_block_line(&text_cells(&["Time 90 ms"]), POINT).unwrap_err();
        assert_eq!(error.error, TimeTextError::UnknownUnit("ms".into()));
    }

    proptest! {
        // Round trip: whole hours, minutes, seconds and milliseconds formatted as h:mm:ss.fff
        // (and mm:ss when under an hour) parse back to exactly h*3600 + m*60 + s + ms/1000.
        #[test]
        fn clock_text_round_trips_exactly(hours in 0u64..200, minutes in 0u64..60, seconds in 0u64..60,
                                          millis in 0u64..1000, with_fraction in any::<bool>()) {
            let whole = hours * 3600 + minutes * 60 + seconds;
            let (text, expected) = if with_fraction {
                (format!("{hours}:{minutes:02}:{seconds:02}.{millis:03}"), whole as f64 + millis as f64 / 1000.0)
            } else {
                (format!("{hours}:{minutes:02}:{seconds:02}"), whole as f64)
            };
            prop_assert_eq!(parse_clock_text(&text), Some(Ok(expected)));
            if hours == 0 && !with_fraction {
                prop_assert_eq!(parse_clock_text(&format!("{minutes:02}:{seconds:02}")), Some(Ok(whole as f64)));
            }
        }

        #[test]
        fn arbitrary_text_never_panics(text in "\\PC{0,16}") {
            let _ = parse_clock_text(&text);
            let _ = parse_number_with_unit(&text, POINT);
            let _ = raw_time_of_text(&text, DecimalMark::Unknown);
            let _ = parse_block_line(&[Cell::Text(&text), Cell::Text(&text)], POINT);
        }
    }
}
