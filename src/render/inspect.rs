//! The text `platekin inspect DATA` prints: what was read from a kinetic export (shape, plate,
//! wells, reads, time span and step, temperature, unreadable cells, warnings), one fact per line
//! with aligned labels, and nothing that depends on anything but the data.

use std::fmt::Write as _;

use crate::core::cells::column_letters;
use crate::core::plate::{row_label, WellId};

use crate::import::{KineticData, UnreadableRead};

/// Width of the label column.
const LABEL_WIDTH: usize = 18;
/// How many unreadable cells are listed one by one.
const UNREADABLE_LISTED: usize = 10;
/// Beyond this length a well list is given as counts per plate row instead.
const WELL_LIST_MAX_CHARS: usize = 120;

/// Formats a number with at most `decimals` decimals, trailing zeros dropped.
fn trim_number(value: f64, decimals: usize) -> String {
    let text = format!("{value:.decimals$}");
    let text = if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.')
    } else {
        &text
    };
    if text == "-0" {
        "0".to_string()
    } else {
        text.to_string()
    }
}

/// Seconds, with the clock form added from a minute on: `90 s (0:01:30)`.
fn seconds_text(seconds: f64) -> String {
    let plain = format!("{} s", trim_number(seconds, 3));
    if seconds.abs() < 60.0 || !seconds.is_finite() {
        return plain;
    }
    let whole = seconds.abs().round() as u64;
    let sign = if seconds < 0.0 { "-" } else { "" };
    format!(
        "{plain} ({sign}{}:{:02}:{:02})",
        whole / 3600,
        whole / 60 % 60,
        whole % 60
    )
}

/// A compact description of a sorted well list: `A1-H12` for a full rectangle, else runs per
/// plate row (`A1-A12, B1-B6, B8`), else the count per plate row when that would be long.
pub(crate) fn compact_well_list(wells: &[WellId]) -> String {
    let (Some(first), Some(_)) = (wells.first(), wells.last()) else {
        return "none".to_string();
    };
    let (mut min_row, mut max_row, mut min_column, mut max_column) =
        (first.row, first.row, first.column, first.column);
    for well in wells {
        min_row = min_row.min(well.row);
        max_row = max_row.max(well.row);
        min_column = min_column.min(well.column);
        max_column = max_column.max(well.column);
    }
    let area = usize::from(max_row - min_row + 1) * usize::from(max_column - min_column + 1);
    if area == wells.len() {
        let top_left = WellId::new(min_row, min_column);
        let bottom_right = WellId::new(max_row, max_column);
        return if wells.len() == 1 {
            top_left.to_string()
        } else {
            format!("{top_left}-{bottom_right}")
        };
    }
    let mut runs: Vec<String> = Vec::new();
    let mut index = 0;
    while index < wells.len() {
        let start = wells[index];
        let mut end = start;
        while index + 1 < wells.len()
            && wells[index + 1].row == start.row
            && wells[index + 1].column == end.column + 1
        {
            index += 1;
            end = wells[index];
        }
        runs.push(if start == end {
            start.to_string()
        } else {
            format!("{start}-{end}")
        });
        index += 1;
    }
    let listed = runs.join(", ");
    if listed.len() <= WELL_LIST_MAX_CHARS {
        return listed;
    }
    let mut counts: Vec<(u16, usize)> = Vec::new();
    for well in wells {
        match counts.last_mut() {
            Some((row, count)) if *row == well.row => *count += 1,
            _ => counts.push((well.row, 1)),
        }
    }
    let per_row: Vec<String> = counts
        .iter()
        .map(|(row, count)| format!("{}: {count}", row_label(*row)))
        .collect();
    format!("per plate row {}", per_row.join(", "))
}

/// The text `platekin inspect DATA` prints.
pub fn inspect_report(data: &KineticData) -> String {
    let mut out = String::new();
    let mut line = |label: &str, value: &str| {
        let _ = writeln!(out, "{label:<LABEL_WIDTH$}{value}");
    };
    line("source", &data.source.to_string());
    line("shape", data.shape.name());
    line(
        "plate",
        &format!(
            "{} wells ({} rows x {} columns)",
            data.plate.n_wells(),
            data.plate.n_rows(),
            data.plate.n_columns()
        ),
    );
    let wells: Vec<WellId> = data.wells.iter().map(|trace| trace.well).collect();
    line(
        "wells found",
        &format!("{}: {}", wells.len(), compact_well_list(&wells)),
    );
    line("reads", &data.times_s.len().to_string());
    if let (Some(first), Some(last)) = (data.times_s.first(), data.times_s.last()) {
        line("first read", &seconds_text(*first));
        line("last read", &seconds_text(*last));
    }
    let mut steps: Vec<f64> = data.times_s.windows(2).map(|pair| pair[1] - pair[0]).collect();
    steps.sort_unstable_by(f64::total_cmp);
    match (steps.first(), steps.last()) {
        (Some(&min_step), Some(&max_step)) => {
            let middle = steps.len() / 2;
            let median = if steps.len() % 2 == 1 {
                steps[middle]
            } else {
                (steps[middle - 1] + steps[middle]) / 2.0
            };
            // Steps within a millionth of the median count as equal (floating-point noise of
            // times written in minutes or hours).
            if max_step - min_step > 1e-6 * median.abs() {
                line("median step", &format!("{} (irregular)", seconds_text(median)));
                line(
                    "step range",
                    &format!("{} to {}", seconds_text(min_step), seconds_text(max_step)),
                );
            } else {
                line("median step", &format!("{} (regular)", seconds_text(median)));
            }
        }
        _ => line("median step", "none (a single read)"),
    }
    let temperatures: Vec<f64> = data.temperatures_c.iter().flatten().flatten().copied().collect();
    match (
        temperatures.iter().copied().reduce(f64::min),
        temperatures.iter().copied().reduce(f64::max),
    ) {
        (Some(low), Some(high)) => line(
            "temperature",
            &format!(
                "{} to {} \u{b0}C ({} of {} reads)",
                trim_number(low, 2),
                trim_number(high, 2),
                temperatures.len(),
                data.times_s.len()
            ),
        ),
        _ => line("temperature", "no temperature recorded"),
    }
    let mut unreadable: Vec<(usize, WellId, &UnreadableRead)> = data
        .wells
        .iter()
        .flat_map(|trace| {
            trace
                .unreadable
                .iter()
                .map(move |cell| (cell.read_index, trace.well, cell))
        })
        .collect();
    unreadable.sort_by_key(|(read_index, well, _)| (*read_index, *well));
    let wells_affected = data
        .wells
        .iter()
        .filter(|trace| !trace.unreadable.is_empty())
        .count();
    if unreadable.is_empty() {
        line("unreadable cells", "0");
    } else {
        line(
            "unreadable cells",
            &format!("{} in {} wells", unreadable.len(), wells_affected),
        );
    }
    for (read_index, well, cell) in unreadable.iter().take(UNREADABLE_LISTED) {
        let text = if cell.text.is_empty() {
            "'' (blank)".to_string()
        } else {
            format!("'{}'", cell.text)
        };
        let column = cell
            .position
            .column
            .map(|column| format!(", column {column} ({})", column_letters(column)))
            .unwrap_or_default();
        line(
            "",
            &format!(
                "{well} read {} (t = {} s): {text} at row {}{column}",
                read_index + 1,
                trim_number(cell.time_s, 3),
                cell.position.row
            ),
        );
    }
    if unreadable.len() > UNREADABLE_LISTED {
        line(
            "",
            &format!("... and {} more", unreadable.len() - UNREADABLE_LISTED),
        );
    }
    line("warnings", &data.warnings.len().to_string());
    for warning in &data.warnings {
        line("", warning);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::plate::PlateFormat;
    use crate::files::sheet::read_text_cells;
    use crate::import::{import_cells, ImportOptions};

    fn import_ok(text: &str) -> KineticData {
        let grid = read_text_cells(text.as_bytes(), "run.csv").unwrap();
        import_cells(&grid, &ImportOptions::default()).unwrap()
    }

    // An invented export: metadata above, a temperature column, an over-range marker, a summary line.
    const WIDE_WITH_METADATA: &str = include_str!("../../fixtures/wide-with-metadata.csv");

    #[test]
    fn inspect_report_states_the_facts() {
        let report = inspect_report(&import_ok(WIDE_WITH_METADATA));
        for expected in [
            "source            run.csv\n",
            "shape             wide\n",
            "plate             96 wells (8 rows x 12 columns)\n",
            "wells found       3: A1-A2, B1\n",
            "reads             3\n",
            "first read        0 s\n",
            "last read         60 s (0:01:00)\n",
            "median step       30 s (regular)\n",
            "temperature       30 to 30.2 \u{b0}C (3 of 3 reads)\n",
            "unreadable cells  1 in 1 wells\n",
            "                  A2 read 3 (t = 60 s): 'OVER' at row 7, column 4 (D)\n",
            "warnings          1\n",
        ] {
            assert!(report.contains(expected), "missing {expected:?} in\n{report}");
        }
        assert_eq!(
            report,
            inspect_report(&import_ok(WIDE_WITH_METADATA)),
            "deterministic"
        );

        let irregular = inspect_report(&import_ok("Time [s],A1\n0,1\n30,1\n61,1\n90,1\n"));
        assert!(
            irregular.contains("median step       30 s (irregular)\n"),
            "{irregular}"
        );
        assert!(
            irregular.contains("step range        29 s to 31 s\n"),
            "{irregular}"
        );
        assert!(
            irregular.contains("temperature       no temperature recorded\n"),
            "{irregular}"
        );
        let single = inspect_report(&import_ok("Time [s],A1\n0,1\n"));
        assert!(
            single.contains("median step       none (a single read)\n"),
            "{single}"
        );
    }

    #[test]
    fn compact_well_lists() {
        let plate: Vec<WellId> = PlateFormat::Wells96.wells().collect();
        assert_eq!(compact_well_list(&plate), "A1-H12");
        let plate: Vec<WellId> = PlateFormat::Wells1536.wells().collect();
        assert_eq!(compact_well_list(&plate), "A1-AF48");
        let some = ["A1", "A2", "A3", "B1", "B3"].map(|w| WellId::parse(w).unwrap());
        assert_eq!(compact_well_list(&some), "A1-A3, B1, B3");
        let scattered: Vec<WellId> = PlateFormat::Wells384
            .wells()
            .filter(|w| w.column % 2 == 0)
            .collect();
        let text = compact_well_list(&scattered);
        assert!(
            text.starts_with("per plate row A: 12, B: 12") && text.ends_with("P: 12"),
            "{text}"
        );
        assert_eq!(compact_well_list(&[]), "none");
    }
}
