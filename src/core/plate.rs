//! Microplate geometry and well identifiers: parsing `A1`/`A01`/`AA12`, rectangles `B1:D12` and
//! space-separated lists, and the three standard plate formats.
//!
//! Plate formats follow ANSI/SLAS 4-2004 (Well Positions): 96 = 8 x 12, 384 = 16 x 24,
//! 1536 = 32 x 48, with 1536-well rows running A..Z then AA..AF.

use std::fmt;
use std::str::FromStr;

/// One of the standard plate formats (ANSI/SLAS 4-2004).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize, serde::Deserialize)]
pub enum PlateFormat {
    /// 8 rows x 12 columns.
    #[serde(rename = "96")]
    Wells96,
    /// 16 rows x 24 columns.
    #[serde(rename = "384")]
    Wells384,
    /// 32 rows x 48 columns.
    #[serde(rename = "1536")]
    Wells1536,
}

impl PlateFormat {
    /// Every format, smallest first (the order in which a format is inferred from well IDs).
    pub const ALL: [PlateFormat; 3] = [Self::Wells96, Self::Wells384, Self::Wells1536];

    /// Number of plate rows.
    pub fn n_rows(self) -> u16 {
        match self {
            Self::Wells96 => 8,
            Self::Wells384 => 16,
            Self::Wells1536 => 32,
        }
    }

    /// Number of plate columns.
    pub fn n_columns(self) -> u16 {
        match self {
            Self::Wells96 => 12,
            Self::Wells384 => 24,
            Self::Wells1536 => 48,
        }
    }

    /// Number of wells.
    pub fn n_wells(self) -> usize {
        usize::from(self.n_rows()) * usize::from(self.n_columns())
    }

    /// Whether `well` lies on this plate.
    pub fn contains(self, well: WellId) -> bool {
        well.row < self.n_rows() && well.column < self.n_columns()
    }

    /// The smallest standard format that holds every well given, if any does.
    pub fn smallest_holding<'a>(wells: impl IntoIterator<Item = &'a WellId>) -> Option<PlateFormat> {
        let (mut max_row, mut max_column) = (0u16, 0u16);
        for well in wells {
            max_row = max_row.max(well.row);
            max_column = max_column.max(well.column);
        }
        Self::ALL
            .into_iter()
            .find(|format| max_row < format.n_rows() && max_column < format.n_columns())
    }

    /// Every well of the plate in reading order (A1, A2, ..., B1, ...).
    pub fn wells(self) -> impl Iterator<Item = WellId> {
        (0..self.n_rows())
            .flat_map(move |row| (0..self.n_columns()).map(move |column| WellId { row, column }))
    }
}

impl fmt::Display for PlateFormat {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.n_wells())
    }
}

impl FromStr for PlateFormat {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim() {
            "96" | "8x12" => Ok(Self::Wells96),
            "384" | "16x24" => Ok(Self::Wells384),
            "1536" | "32x48" => Ok(Self::Wells1536),
            other => Err(format!(
                "unknown plate format '{other}' (expected 96, 384 or 1536)"
            )),
        }
    }
}

/// A well position, zero-based: row 0 is `A`, column 0 is `1`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct WellId {
    /// Zero-based row index (A = 0, Z = 25, AA = 26, AF = 31).
    pub row: u16,
    /// Zero-based column index (column `1` = 0).
    pub column: u16,
}

/// The largest row index a well ID may name: `AF` (row 32 of a 1536-well plate).
const MAX_ROW_INDEX: u16 = 31;
/// The largest column a well ID may name: 48 (a 1536-well plate).
const MAX_COLUMN_NUMBER: u16 = 48;

impl WellId {
    /// Builds a well from zero-based row and column.
    pub fn new(row: u16, column: u16) -> Self {
        Self { row, column }
    }

    /// Parses a well ID such as `A1`, `a01`, `P24` or `AF48`. Surrounding spaces are allowed.
    pub fn parse(text: &str) -> Option<WellId> {
        let text = text.trim();
        let letters_end = text.find(|c: char| !c.is_ascii_alphabetic())?;
        let (letters, digits) = text.split_at(letters_end);
        let row = parse_row_letters(letters)?;
        if digits.is_empty() || digits.len() > 3 || !digits.bytes().all(|b| b.is_ascii_digit()) {
            return None;
        }
        let column_number: u16 = digits.parse().ok()?;
        if column_number == 0 || column_number > MAX_COLUMN_NUMBER {
            return None;
        }
        Some(WellId {
            row,
            column: column_number - 1,
        })
    }

    /// The row's letters: `A`..`Z`, then `AA`..`AF`.
    pub fn row_label(self) -> String {
        row_label(self.row)
    }

    /// The one-based column number.
    pub fn column_number(self) -> u16 {
        self.column + 1
    }
}

/// Letters for a zero-based row index: 0 -> `A`, 25 -> `Z`, 26 -> `AA`, 31 -> `AF`.
pub fn row_label(row: u16) -> String {
    if row < 26 {
        char::from(b'A' + row as u8).to_string()
    } else {
        format!("A{}", char::from(b'A' + (row - 26) as u8))
    }
}

/// Parses row letters (`A`..`Z`, `AA`..`AF`, any case) into a zero-based row index.
pub fn parse_row_letters(letters: &str) -> Option<u16> {
    let upper: Vec<u8> = letters.bytes().map(|b| b.to_ascii_uppercase()).collect();
    let row = match upper.as_slice() {
        [single] if single.is_ascii_uppercase() => u16::from(single - b'A'),
        [b'A', second] if second.is_ascii_uppercase() => 26 + u16::from(second - b'A'),
        _ => return None,
    };
    (row <= MAX_ROW_INDEX).then_some(row)
}

impl fmt::Display for WellId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}{}", self.row_label(), self.column_number())
    }
}

impl serde::Serialize for WellId {
    fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        serializer.collect_str(self)
    }
}

/// Parses a well selection: one well (`B3`), a rectangle (`B1:D12`, corners in any order) or a
/// list of wells and rectangles separated by spaces or commas (`B1 B3 B5`, `A1:A3, C1`).
///
/// Returns the wells in reading order of the text, or a message saying which part is not a well.
pub fn parse_well_selection(text: &str) -> Result<Vec<WellId>, String> {
    let mut wells = Vec::new();
    let parts: Vec<&str> = text
        .split(|c: char| c.is_whitespace() || c == ',' || c == ';')
        .filter(|part| !part.is_empty())
        .collect();
    if parts.is_empty() {
        return Err("no well given".to_string());
    }
    for part in parts {
        match part.split_once(':') {
            Some((first, last)) => {
                let first_well = WellId::parse(first).ok_or_else(|| format!("'{first}' is not a well ID"))?;
                let last_well = WellId::parse(last).ok_or_else(|| format!("'{last}' is not a well ID"))?;
                let (row_lo, row_hi) = (
                    first_well.row.min(last_well.row),
                    first_well.row.max(last_well.row),
                );
                let (col_lo, col_hi) = (
                    first_well.column.min(last_well.column),
                    first_well.column.max(last_well.column),
                );
                for row in row_lo..=row_hi {
                    for column in col_lo..=col_hi {
                        wells.push(WellId { row, column });
                    }
                }
            }
            None => wells.push(WellId::parse(part).ok_or_else(|| format!("'{part}' is not a well ID"))?),
        }
    }
    Ok(wells)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn parses_common_spellings() {
        assert_eq!(WellId::parse("A1"), Some(WellId::new(0, 0)));
        assert_eq!(WellId::parse("a01"), Some(WellId::new(0, 0)));
        assert_eq!(WellId::parse(" H12 "), Some(WellId::new(7, 11)));
        assert_eq!(WellId::parse("P24"), Some(WellId::new(15, 23)));
        assert_eq!(WellId::parse("AF48"), Some(WellId::new(31, 47)));
        assert_eq!(WellId::parse("AA1"), Some(WellId::new(26, 0)));
    }

    #[test]
    fn refuses_non_wells() {
        for text in [
            "", "A", "1", "A0", "A49", "AG1", "Time", "A1x", "AAA1", "B-1", "Temp", "A1.5",
        ] {
            assert_eq!(WellId::parse(text), None, "{text}");
        }
    }

    #[test]
    fn rectangles_and_lists() {
        let wells = parse_well_selection("B1:C2").unwrap();
        assert_eq!(
            wells.iter().map(|w| w.to_string()).collect::<Vec<_>>(),
            ["B1", "B2", "C1", "C2"]
        );
        let wells = parse_well_selection("C2:B1").unwrap();
        assert_eq!(wells.len(), 4);
        let wells = parse_well_selection("B1 B3, B5").unwrap();
        assert_eq!(
            wells.iter().map(|w| w.to_string()).collect::<Vec<_>>(),
            ["B1", "B3", "B5"]
        );
        assert!(parse_well_selection("B1 Q").unwrap_err().contains("'Q'"));
        assert!(parse_well_selection("  ").is_err());
    }

    #[test]
    fn infers_smallest_format() {
        let wells = [WellId::new(7, 11)];
        assert_eq!(PlateFormat::smallest_holding(&wells), Some(PlateFormat::Wells96));
        let wells = [WellId::new(8, 0)];
        assert_eq!(PlateFormat::smallest_holding(&wells), Some(PlateFormat::Wells384));
        let wells = [WellId::new(0, 24)];
        assert_eq!(
            PlateFormat::smallest_holding(&wells),
            Some(PlateFormat::Wells1536)
        );
        assert_eq!(PlateFormat::Wells1536.wells().count(), 1536);
    }

    proptest! {
        #[test]
        fn display_then_parse_round_trips(row in 0u16..32, column in 0u16..48, zero_pad in any::<bool>(), lower in any::<bool>()) {
            let well = WellId::new(row, column);
            let mut text = if zero_pad {
                format!("{}{:02}", well.row_label(), well.column_number())
            } else {
                well.to_string()
            };
            if lower {
                text = text.to_lowercase();
            }
            prop_assert_eq!(WellId::parse(&text), Some(well));
        }

        #[test]
        fn rectangle_has_area_wells(r1 in 0u16..32, c1 in 0u16..48, r2 in 0u16..32, c2 in 0u16..48) {
            let text = format!("{}:{}", WellId::new(r1, c1), WellId::new(r2, c2));
            let wells = parse_well_selection(&text).unwrap();
            let area = (usize::from(r1.abs_diff(r2)) + 1) * (usize::from(c1.abs_diff(c2)) + 1);
            prop_assert_eq!(wells.len(), area);
            prop_assert!(wells.contains(&WellId::new(r1, c1)));
            prop_assert!(wells.contains(&WellId::new(r2, c2)));
        }

        #[test]
        fn arbitrary_text_never_panics(text in "\\PC{0,12}") {
            let _ = WellId::parse(&text);
            let _ = parse_well_selection(&text);
        }
    }
}
