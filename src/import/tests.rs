//! Tests of the importer across shapes, delimiters, spreadsheets, errors and policies. All input
//! tables are invented for these tests (invented lab, invented readings); expected values follow
//! from the tables themselves.

use proptest::prelude::*;

use std::path::Path;

use super::*;
use crate::core::plate::WellId;
use crate::files::input::{InputFile, InputRole};
use crate::files::sheet::read_text_cells;

/// Imports a text table given in memory, as if read from `run.csv`.
fn import_text(text: &str, options: &ImportOptions) -> Result<KineticData, ImportError> {
    let grid = read_text_cells(text.as_bytes(), "run.csv")?;
    import_cells(&grid, options)
}

/// Imports with default options and expects success.
fn import_ok(text: &str) -> KineticData {
    import_text(text, &ImportOptions::default()).unwrap()
}

/// Imports with default options and expects an error; returns its message.
fn import_error(text: &str, options: &ImportOptions) -> String {
    import_text(text, options).unwrap_err().to_string()
}

/// The trace of a well given by name.
fn trace<'a>(data: &'a KineticData, well: &str) -> &'a WellTrace {
    let well = WellId::parse(well).unwrap();
    data.wells.iter().find(|trace| trace.well == well).unwrap()
}

/// The well names in order.
fn well_names(data: &KineticData) -> Vec<String> {
    data.wells.iter().map(|trace| trace.well.to_string()).collect()
}

/// An invented export with metadata above, a temperature column, an over-range marker and a
/// summary line below (`fixtures/wide-with-metadata.csv`).
const WIDE_WITH_METADATA: &str = include_str!("../../fixtures/wide-with-metadata.csv");

#[test]
fn wide_with_metadata_above_and_summary_below() {
    let data = import_ok(WIDE_WITH_METADATA);
    assert_eq!(data.shape, DataShape::Wide);
    assert_eq!(data.plate, PlateFormat::Wells96);
    assert_eq!(data.times_s, [0.0, 30.0, 60.0]);
    assert_eq!(
        data.temperatures_c,
        Some(vec![Some(30.0), Some(30.1), Some(30.2)])
    );
    assert_eq!(well_names(&data), ["A1", "A2", "B1"]);
    assert_eq!(trace(&data, "A1").values, [Some(0.1), Some(0.11), Some(0.12)]);
    assert_eq!(trace(&data, "A2").values, [Some(0.2), Some(0.21), None]);
    let unreadable = &trace(&data, "A2").unreadable;
    assert_eq!(unreadable.len(), 1);
    assert_eq!(unreadable[0].read_index, 2);
    assert_eq!(unreadable[0].time_s, 60.0);
    assert_eq!(unreadable[0].text, "OVER");
    assert_eq!(unreadable[0].position.to_string(), "run.csv, row 7, column 4 (D)");
    // The summary line is named, not read.
    assert!(
        data.warnings
            .iter()
            .any(|w| w.contains("rows 9-9") && w.contains("summary")),
        "{:?}",
        data.warnings
    );
}

#[test]
fn empty_lines_end_the_block_and_keep_row_numbers() {
    let data = import_ok("Run 7\n\nTime [s],A1\n0,0.1\n30,OVER\n\nMean,0.15\n");
    assert_eq!(data.times_s, [0.0, 30.0]);
    assert_eq!(
        trace(&data, "A1").unreadable[0].position.to_string(),
        "run.csv, row 5, column 2 (B)"
    );
    assert!(
        data.warnings
            .iter()
            .any(|w| w.contains("reads end at row 5") && w.contains("rows 7-7")),
        "{:?}",
        data.warnings
    );
}

#[test]
fn decimal_comma_with_semicolons_and_minutes() {
    let data = import_ok("Time [min];A1;A2\n0;0,100;0,200\n0,5;0,150;0,250\n1;0,200;0,300\n");
    assert_eq!(data.times_s, [0.0, 30.0, 60.0]);
    assert_eq!(trace(&data, "A2").values, [Some(0.2), Some(0.25), Some(0.3)]);
    assert_eq!(data.temperatures_c, None);
}

#[test]
fn tab_delimited_zero_padded_wells_and_clock_times() {
    let data = import_ok(
        "Time\tA01\tA02\tH12\n0:00:00\t0.1\t0.2\t0.3\n0:01:30\t0.4\t0.5\t0.6\n1:02:03.5\t0.7\t0.8\t0.9\n",
    );
    assert_eq!(data.times_s, [0.0, 90.0, 3723.5]);
    assert_eq!(well_names(&data), ["A1", "A2", "H12"]);
    assert_eq!(trace(&data, "H12").values, [Some(0.3), Some(0.6), Some(0.9)]);
}

#[test]
fn time_units_in_the_header() {
    for (header, factor) in [
        ("Time [s]", 1.0),
        ("time (min)", 60.0),
        ("Time [h]", 3600.0),
        ("Time/s", 1.0),
        ("t (sec)", 1.0),
    ] {
        let data = import_ok(&format!("{header},A1\n1,0.1\n2,0.2\n"));
        assert_eq!(data.times_s, [factor, 2.0 * factor], "{header}");
    }
}

#[test]
fn time_column_need_not_be_first_and_other_columns_are_named() {
    let data = import_ok("Cycle Nr.,Time [s],T [\u{b0}C],A1,Comment\n1,0,29.9,0.1,ok\n2,30,30.0,0.2,ok\n");
    assert_eq!(data.times_s, [0.0, 30.0]);
    assert_eq!(data.temperatures_c, Some(vec![Some(29.9), Some(30.0)]));
    let warning = data.warnings.iter().find(|w| w.contains("not read")).unwrap();
    assert!(
        warning.contains("'Cycle Nr.' (A)") && warning.contains("'Comment' (E)"),
        "{warning}"
    );
    assert!(warning.contains("run.csv, row 1"), "{warning}");
}

#[test]
fn byte_order_mark_and_crlf() {
    let data = import_ok("\u{feff}Time [s],A1\r\n0,0.1\r\n30,0.2\r\n");
    assert_eq!(data.times_s, [0.0, 30.0]);
    assert_eq!(trace(&data, "A1").values, [Some(0.1), Some(0.2)]);
}

#[test]
fn plate_format_from_the_well_ids() {
    let data = import_ok("Time [s],A1,P24\n0,0.1,0.2\n");
    assert_eq!(data.plate, PlateFormat::Wells384);
    let data = import_ok("Time [s],A1,I1\n0,0.1,0.2\n");
    assert_eq!(data.plate, PlateFormat::Wells384);
    let data = import_ok("Time [s],A1,Z48,AA1,AF48\n0,0.1,0.2,0.3,0.4\n");
    assert_eq!(data.plate, PlateFormat::Wells1536);
    assert_eq!(well_names(&data), ["A1", "Z48", "AA1", "AF48"]);
    assert_eq!(trace(&data, "AF48").well, WellId::new(31, 47));
    assert_eq!(trace(&data, "AA1").values, [Some(0.3)]);
    // A given plate is used as given.
    let options = ImportOptions {
        plate: Some(PlateFormat::Wells1536),
        ..ImportOptions::default()
    };
    assert_eq!(
        import_text("Time [s],A1\n0,0.1\n", &options).unwrap().plate,
        PlateFormat::Wells1536
    );
}

/// Issue class: a column headed `T1` (a temperature probe) must not silently make a 96-well plate a
/// 1536-well one; the user settles it with `--plate`, and wells off a plate given are named.
#[test]
fn a_few_wells_beyond_a_smaller_plate_are_asked_about_and_off_plate_wells_named() {
    let text = "Time [s],A1,A2,A3,B1,B2,T1\n0,0.1,0.2,0.3,0.4,0.5,30.1\n30,0.1,0.2,0.3,0.4,0.5,30.2\n";
    let message = import_error(text, &ImportOptions::default());
    assert!(
        message.contains("T1 (run.csv, row 1, column 7 (G))")
            && message.contains("--plate 1536")
            && message.contains("--plate 96"),
        "{message}"
    );
    let options = ImportOptions {
        plate: Some(PlateFormat::Wells96),
        ..ImportOptions::default()
    };
    let data = import_text(text, &options).unwrap();
    assert_eq!(well_names(&data), ["A1", "A2", "A3", "B1", "B2"]);
    assert!(
        data.warnings
            .iter()
            .any(|w| w.contains("'T1' (G)") && w.contains("96-well plate given")),
        "{:?}",
        data.warnings
    );
    let options = ImportOptions {
        plate: Some(PlateFormat::Wells1536),
        ..ImportOptions::default()
    };
    assert_eq!(import_text(text, &options).unwrap().wells.len(), 6);
    // The long shape names the rows of wells off the plate given.
    let options = ImportOptions {
        plate: Some(PlateFormat::Wells96),
        ..ImportOptions::default()
    };
    let data = import_text("well,time [s],value\nA1,0,0.1\nP24,0,0.2\nA1,30,0.2\n", &options).unwrap();
    assert_eq!(well_names(&data), ["A1"]);
    assert!(
        data.warnings.iter().any(|w| w.contains("P24 (row 3)")),
        "{:?}",
        data.warnings
    );
}

#[test]
fn over_range_markers_and_blank_cells_are_unreadable_never_zero() {
    let data = import_ok("Time [s],A1,A2,A3,A4,A5\n0,OVER,Overflow,*****,#SAT,\n30,0.1,0.2,0.3,0.4,0.5\n");
    for (well, text, column) in [
        ("A1", "OVER", 2),
        ("A2", "Overflow", 3),
        ("A3", "*****", 4),
        ("A4", "#SAT", 5),
        ("A5", "", 6),
    ] {
        let trace = trace(&data, well);
        assert_eq!(trace.values.get(0), None, "{well}");
        assert_eq!(trace.unreadable.len(), 1, "{well}");
        assert_eq!(trace.unreadable[0].text, text);
        assert_eq!(trace.unreadable[0].position.row, 2);
        assert_eq!(trace.unreadable[0].position.column, Some(column));
        assert!(trace.values.get(1).is_some());
    }
}

#[test]
fn short_rows_under_both_policies() {
    let text = "Time [s],A1,A2,A3\n0,0.1,0.2,0.3\n30,0.11\n60,0.12,0.22,0.32\n";
    let data = import_ok(text);
    assert_eq!(data.times_s, [0.0, 30.0, 60.0]);
    assert_eq!(trace(&data, "A1").values, [Some(0.1), Some(0.11), Some(0.12)]);
    assert_eq!(trace(&data, "A3").values, [Some(0.3), None, Some(0.32)]);
    let missing = &trace(&data, "A3").unreadable[0];
    assert_eq!((missing.read_index, missing.text.as_str()), (1, ""));
    assert_eq!(missing.position.to_string(), "run.csv, row 3, column 4 (D)");
    let warning = data.warnings.iter().find(|w| w.contains("cut short")).unwrap();
    assert!(
        warning.contains("run.csv, row 3") && warning.contains("2 cells where the header has 4"),
        "{warning}"
    );

    let refuse = ImportOptions {
        short_rows: ShortRowPolicy::Refuse,
        ..ImportOptions::default()
    };
    let message = import_error(text, &refuse);
    assert!(
        message.contains("run.csv, row 3") && message.contains("cut short"),
        "{message}"
    );
}

#[test]
fn a_read_with_every_well_empty_is_an_aborted_read() {
    let text = "Time [s],A1,A2\n0,0.1,0.2\n30,,\n";
    let data = import_ok(text);
    assert_eq!(data.times_s, [0.0, 30.0]);
    assert_eq!(trace(&data, "A2").values, [Some(0.2), None]);
    assert_eq!(
        trace(&data, "A1").unreadable[0].position.to_string(),
        "run.csv, row 3, column 2 (B)"
    );
    assert!(data
        .warnings
        .iter()
        .any(|w| w.contains("run.csv, row 3") && w.contains("every well cell empty")));
    let refuse = ImportOptions {
        short_rows: ShortRowPolicy::Refuse,
        ..ImportOptions::default()
    };
    assert!(import_error(text, &refuse).contains("run.csv, row 3"));
    // A row holding only its time is both short and empty: still one read, named once.
    let data = import_ok("Time [s],A1,A2\n0,0.1,0.2\n30\n");
    assert_eq!(data.times_s.len(), 2);
    assert_eq!(data.warnings.iter().filter(|w| w.contains("row 3")).count(), 1);
}

#[test]
fn time_errors_name_the_cell() {
    let no_unit = import_error("Time,A1\n0,0.1\n30,0.2\n", &ImportOptions::default());
    assert!(
        no_unit.contains("run.csv, row 2, column 1 (A)") && no_unit.contains("--time-unit s|min|h"),
        "{no_unit}"
    );

    let minutes = ImportOptions {
        time_unit: Some(TimeUnit::Minutes),
        ..ImportOptions::default()
    };
    assert_eq!(
        import_text("Time,A1\n0,0.1\n30,0.2\n", &minutes).unwrap().times_s,
        [0.0, 1800.0]
    );
    // Agreeing units are fine; disagreeing ones are an error naming both.
    let seconds = ImportOptions {
        time_unit: Some(TimeUnit::Seconds),
        ..ImportOptions::default()
    };
    assert_eq!(
        import_text("Time [s],A1\n0,0.1\n", &seconds).unwrap().times_s,
        [0.0]
    );
    let conflict = import_error("Time [s],A1\n0,0.1\n", &minutes);
    assert!(conflict.contains("run.csv, row 1, column 1 (A)"), "{conflict}");
    assert!(conflict.contains("as s but --time-unit says min"), "{conflict}");

    let bad = import_error("Time,A1\n0:00:00,0.1\n0:75:00,0.2\n", &ImportOptions::default());
    assert!(
        bad.contains("run.csv, row 3, column 1 (A)") && bad.contains("'0:75:00'"),
        "{bad}"
    );

    let unknown = import_error("Time [ms],A1\n0,0.1\n", &ImportOptions::default());
    assert!(
        unknown.contains("run.csv, row 1, column 1 (A)") && unknown.contains("'ms'"),
        "{unknown}"
    );
}

#[test]
fn times_must_strictly_increase() {
    let repeated = import_error("Time [s],A1\n0,0.1\n30,0.2\n30,0.3\n", &ImportOptions::default());
    assert!(
        repeated.contains("run.csv, row 4, column 1 (A)") && repeated.contains("(row 3)"),
        "{repeated}"
    );
    let decreasing = import_error("Time,A1\n0:01:00,0.1\n0:00:30,0.2\n", &ImportOptions::default());
    assert!(
        decreasing.contains("run.csv, row 3, column 1 (A)"),
        "{decreasing}"
    );
}

#[test]
fn no_shape_and_no_wells() {
    let message = import_error("hello,world\n1,2\n", &ImportOptions::default());
    assert!(
        message.contains("run.csv") && message.contains("rows 1-2") && message.contains("looked for"),
        "{message}"
    );
    assert!(
        message.contains("wide header") && message.contains("grid block") && message.contains("long table")
    );
    let message = import_error("Time [s],Mean,SD\n0,1,2\n", &ImportOptions::default());
    assert!(
        message.contains("run.csv, row 1, column 1 (A)") && message.contains("no wells"),
        "{message}"
    );
    // A forced shape looks only for that shape.
    let long = ImportOptions {
        shape: Some(DataShape::Long),
        ..ImportOptions::default()
    };
    let message = import_error("Time [s],A1\n0,0.1\n", &long);
    assert!(
        message.contains("long table") && !message.contains("wide header"),
        "{message}"
    );
    let message = import_error("Time [s],A1\n\n", &ImportOptions::default());
    assert!(
        message.contains("run.csv, row 1") && message.contains("no data rows"),
        "{message}"
    );
}

#[test]
fn duplicate_wells_name_both_positions() {
    let message = import_error("Time [s],A1,A2,A01\n0,0.1,0.2,0.3\n", &ImportOptions::default());
    assert!(message.contains("well A1 appears twice"), "{message}");
    assert!(
        message.contains("row 1, column 2 (B)") && message.contains("row 1, column 4 (D)"),
        "{message}"
    );
    let message = import_error(
        "well,time [s],value\nA1,0,0.1\nA2,0,0.2\nA1,0,0.3\n",
        &ImportOptions::default(),
    );
    assert!(
        message.contains("run.csv, row 2, column 1 (A)") && message.contains("run.csv, row 4, column 1 (A)")
    );
}

const GRID_EXPORT: &str = "\
Plate read (invented lab)

Cycle 1, Time 0:00:00
Temperature 30.1 C
,1,2,3
A,0.10,0.20,0.30
B,0.40,OVER,0.60

Cycle 2, Time 0:00:30
Temperature 30.2 C
,1,2,3
A,0.11,0.21,0.31
B,0.41,0.51,
";

#[test]
fn grid_blocks_one_per_read() {
    let data = import_ok(GRID_EXPORT);
    assert_eq!(data.shape, DataShape::Grid);
    assert_eq!(data.times_s, [0.0, 30.0]);
    assert_eq!(data.temperatures_c, Some(vec![Some(30.1), Some(30.2)]));
    assert_eq!(well_names(&data), ["A1", "A2", "A3", "B1", "B2", "B3"]);
    assert_eq!(trace(&data, "A3").values, [Some(0.3), Some(0.31)]);
    assert_eq!(trace(&data, "B2").values, [None, Some(0.51)]);
    assert_eq!(
        trace(&data, "B2").unreadable[0].position.to_string(),
        "run.csv, row 7, column 3 (C)"
    );
    assert_eq!(trace(&data, "B3").unreadable[0].text, "");
    assert_eq!(
        trace(&data, "B3").unreadable[0].position.to_string(),
        "run.csv, row 13, column 4 (D)"
    );
}

#[test]
fn grid_time_lines_in_other_forms() {
    // Semicolons, `t = 90 s`, a label in the column-number row, decimal commas.
    let data = import_ok("t = 0 s\nRow;1;2\nA;0,1;0,2\n\nt = 90 s\nT = 30,5 \u{b0}C\nRow;1;2\nA;0,3;0,4\n");
    assert_eq!(data.times_s, [0.0, 90.0]);
    assert_eq!(data.temperatures_c, Some(vec![None, Some(30.5)]));
    assert_eq!(trace(&data, "A2").values, [Some(0.2), Some(0.4)]);
    // `Time: 1.5 min` and a time split across cells.
    let data = import_ok("Time: 1.5 min\n,1\nA,0.1\nB,0.2\nTime,3,min\n,1\nA,0.3\nB,0.4\n");
    assert_eq!(data.times_s, [90.0, 180.0]);
    assert_eq!(well_names(&data), ["A1", "B1"]);
    // A plain number on the time line needs a unit.
    let text = "Time 0\n,1,2\nA,0.1,0.2\nTime 30\n,1,2\nA,0.3,0.4\n";
    let message = import_error(text, &ImportOptions::default());
    assert!(
        message.contains("run.csv, row 1, column 1 (A)") && message.contains("--time-unit"),
        "{message}"
    );
    let seconds = ImportOptions {
        time_unit: Some(TimeUnit::Seconds),
        ..ImportOptions::default()
    };
    assert_eq!(import_text(text, &seconds).unwrap().times_s, [0.0, 30.0]);
    let minutes = ImportOptions {
        time_unit: Some(TimeUnit::Minutes),
        ..ImportOptions::default()
    };
    let message = import_error("Time 30 s\n,1\nA,0.1\n", &minutes);
    assert!(
        message.contains("run.csv, row 1, column 1 (A)") && message.contains("says min"),
        "{message}"
    );
}

#[test]
fn grid_errors_and_short_blocks() {
    let message = import_error(",1,2\nA,0.1,0.2\n", &ImportOptions::default());
    assert!(
        message.contains("run.csv, row 1") && message.contains("no time line"),
        "{message}"
    );
    let message = import_error(
        "Time 0:00:30\n,1,2\nA,0.1,0.2\nTime 0:00:30\n,1,2\nA,0.1,0.2\n",
        &ImportOptions::default(),
    );
    assert!(
        message.contains("run.csv, row 4, column 1 (A)") && message.contains("strictly increasing"),
        "{message}"
    );
    let message = import_error(
        "Time 0:00:30\n,1,2\nA,0.1,0.2\nA,0.3,0.4\n",
        &ImportOptions::default(),
    );
    assert!(
        message.contains("well A1 appears twice") && message.contains("row 3, column 2 (B)"),
        "{message}"
    );
    assert!(message.contains("row 4, column 2 (B)"), "{message}");

    // An aborted read: its block stops after row A, and row A is cut short.
    let text = "Time 0:00:00\n,1,2\nA,0.1,0.2\nB,0.3,0.4\nTime 0:00:30\n,1,2\nA,0.5\n";
    let data = import_ok(text);
    assert_eq!(trace(&data, "A2").values, [Some(0.2), None]);
    assert_eq!(
        trace(&data, "A2").unreadable[0].position.to_string(),
        "run.csv, row 7, column 3 (C)"
    );
    assert_eq!(trace(&data, "B1").values, [Some(0.3), None]);
    assert!(data
        .warnings
        .iter()
        .any(|w| w.contains("run.csv, row 6") && w.contains("no plate row B")));
    assert!(data
        .warnings
        .iter()
        .any(|w| w.contains("run.csv, row 7") && w.contains("cut short")));
    let refuse = ImportOptions {
        short_rows: ShortRowPolicy::Refuse,
        ..ImportOptions::default()
    };
    assert!(import_error(text, &refuse).contains("run.csv, row 6"));
}

#[test]
fn grid_with_1536_rows() {
    let mut text = String::from("Time 0:00:00\n");
    text.push(',');
    text.push_str(&(1..=48).map(|c| c.to_string()).collect::<Vec<_>>().join(","));
    text.push('\n');
    for row in 0..32u16 {
        text.push_str(&crate::core::plate::row_label(row));
        for column in 0..48 {
            text.push_str(&format!(",{}", row * 100 + column));
        }
        text.push('\n');
    }
    let data = import_ok(&text);
    assert_eq!(data.plate, PlateFormat::Wells1536);
    assert_eq!(data.wells.len(), 1536);
    assert_eq!(trace(&data, "AF48").values, [Some(3147.0)]);
    assert_eq!(trace(&data, "AA1").values, [Some(2600.0)]);
}

#[test]
fn long_table_with_the_one_numeric_column() {
    let text = "well,time [s],A405,sample\nA1,0,0.1,x\nA2,0,0.2,x\nA1,30,0.11,x\nA2,30,OVER,x\nA1,60,0.12,x\n\nend,,,\n";
    let data = import_ok(text);
    assert_eq!(data.shape, DataShape::Long);
    assert_eq!(data.times_s, [0.0, 30.0, 60.0]);
    assert_eq!(trace(&data, "A1").values, [Some(0.1), Some(0.11), Some(0.12)]);
    assert_eq!(trace(&data, "A2").values, [Some(0.2), None, None]);
    assert_eq!(
        trace(&data, "A2").unreadable[0].position.to_string(),
        "run.csv, row 5, column 3 (C)"
    );
    assert_eq!(trace(&data, "A2").unreadable[0].text, "OVER");
    assert!(data
        .warnings
        .iter()
        .any(|w| w.contains("well A2") && w.contains("1 of 3 reads") && w.contains("t = 60 s")));
    assert!(data.warnings.iter().any(|w| w.contains("'sample' (D)")));
}

#[test]
fn long_table_unsorted_with_named_value_and_temperature() {
    let text = "Well;Time (min);Temp [\u{b0}C];Signal;Plate\nB2;1;30,2;5;7\nB2;0,5;30,1;4;7\nA1;1;30,2;3;7\n";
    let data = import_ok(text);
    assert_eq!(data.times_s, [30.0, 60.0]);
    assert_eq!(data.temperatures_c, Some(vec![Some(30.1), Some(30.2)]));
    assert_eq!(well_names(&data), ["A1", "B2"]);
    assert_eq!(trace(&data, "B2").values, [Some(4.0), Some(5.0)]);
    assert_eq!(trace(&data, "A1").values, [None, Some(3.0)]);
    // Two columns named as values: which one is meant cannot be told.
    let message = import_error(
        "Well;Time (min);Signal;OD\nB2;1;5;0,5\n",
        &ImportOptions::default(),
    );
    assert!(
        message.contains("'Signal' (C)") && message.contains("'OD' (D)"),
        "{message}"
    );
}

#[test]
fn long_table_errors() {
    let message = import_error(
        "well,time [s],A405,A600\nA1,0,0.1,0.2\n",
        &ImportOptions::default(),
    );
    assert!(
        message.contains("run.csv, row 1")
            && message.contains("'A405' (C)")
            && message.contains("'A600' (D)")
    );
    // Detected automatically, a `well` column needs a time column beside it.
    let message = import_error("well,value\nA1,0.1\n", &ImportOptions::default());
    assert!(message.contains("no kinetic data found"), "{message}");
    let data = import_ok("Well,200 uL\nTime [s],A1\n0,0.1\n");
    assert_eq!(data.shape, DataShape::Wide);
    // Forced, the missing time column is named.
    let long = ImportOptions {
        shape: Some(DataShape::Long),
        ..ImportOptions::default()
    };
    let message = import_error("well,value\nA1,0.1\n", &long);
    assert!(
        message.contains("run.csv, row 1") && message.contains("no time"),
        "{message}"
    );
    let message = import_error("well,time [s],value\nA1,soon,0.1\n", &ImportOptions::default());
    assert!(
        message.contains("run.csv, row 2, column 2 (B)") && message.contains("'soon'"),
        "{message}"
    );
    let text = "well,time [s],value\nA1,0,0.1\nA1,30\n";
    let data = import_ok(text);
    assert_eq!(trace(&data, "A1").values, [Some(0.1), None]);
    assert!(data
        .warnings
        .iter()
        .any(|w| w.contains("run.csv, row 3") && w.contains("cut short")));
    let refuse = ImportOptions {
        short_rows: ShortRowPolicy::Refuse,
        ..ImportOptions::default()
    };
    assert!(import_error(text, &refuse).contains("run.csv, row 3"));
}

#[test]
fn shapes_and_policies_parse_and_serialise() {
    for shape in DataShape::ALL {
        assert_eq!(shape.to_string().parse::<DataShape>(), Ok(shape));
    }
    assert!("tall".parse::<DataShape>().is_err());
    assert_eq!("Refuse".parse::<ShortRowPolicy>(), Ok(ShortRowPolicy::Refuse));
    assert_eq!(ShortRowPolicy::default(), ShortRowPolicy::TreatAsUnreadable);
    assert_eq!(
        ShortRowPolicy::default().to_string().parse::<ShortRowPolicy>(),
        Ok(ShortRowPolicy::default())
    );
}

/// Reads a file once, as a run does, and imports it.
fn import_file(path: &Path, options: &ImportOptions) -> Result<KineticData, ImportError> {
    import_data(InputFile::read(InputRole::Data, path).unwrap(), options)
}

/// Writes a workbook with a notes sheet, a sheet timed `h:mm:ss` and one timed `[h]:mm:ss`.
fn write_test_workbook(path: &Path) {
    use rust_xlsxwriter::{Format, Workbook};
    const DAY: f64 = 86_400.0;
    let mut workbook = Workbook::new();
    let notes = workbook.add_worksheet();
    notes.set_name("Notes").unwrap();
    notes
        .write_string(0, 0, "Invented lab, kinetic run of an invented enzyme")
        .unwrap();
    notes.write_string(1, 0, "Operator: A. Nonymous").unwrap();

    let clock = Format::new().set_num_format("h:mm:ss");
    let short = workbook.add_worksheet();
    short.set_name("Kinetics").unwrap();
    short.write_string(0, 0, "Run 7").unwrap();
    for (column, header) in ["Time", "Temp (\u{b0}C)", "A1", "B12"].iter().enumerate() {
        short.write_string(2, column as u16, *header).unwrap();
    }
    for read in 0..3u32 {
        let row = 3 + read;
        short
            .write_number_with_format(row, 0, f64::from(read) * 90.0 / DAY, &clock)
            .unwrap();
        short.write_number(row, 1, 30.0 + f64::from(read) / 10.0).unwrap();
        short.write_number(row, 2, 0.1 + f64::from(read) / 100.0).unwrap();
        if read == 1 {
            short.write_string(row, 3, "OVER").unwrap();
        } else {
            short.write_number(row, 3, 1.5).unwrap();
        }
    }

    let duration = Format::new().set_num_format("[h]:mm:ss");
    let long_run = workbook.add_worksheet();
    long_run.set_name("Overnight").unwrap();
    long_run.write_string(0, 0, "Time").unwrap();
    long_run.write_string(0, 1, "C3").unwrap();
    for (read, hours) in [0.0, 12.0, 25.5].iter().enumerate() {
        long_run
            .write_number_with_format(1 + read as u32, 0, hours * 3600.0 / DAY, &duration)
            .unwrap();
        long_run.write_number(1 + read as u32, 1, 0.2).unwrap();
    }
    workbook.save(path).unwrap();
}

#[test]
fn xlsx_time_cells_sheet_choice_and_text_sheets_skipped() {
    let directory = tempfile::tempdir().unwrap();
    let path = directory.path().join("run.xlsx");
    write_test_workbook(&path);

    // No sheet given: the notes sheet holds no kinetic data and is skipped, with a warning.
    let data = import_file(&path, &ImportOptions::default()).unwrap();
    assert_eq!(data.source.sheet.as_deref(), Some("Kinetics"));
    assert!(
        data.warnings.iter().any(|w| w.contains("sheet 'Notes'")),
        "{:?}",
        data.warnings
    );
    assert_eq!(data.times_s.len(), 3);
    assert_eq!(data.times_s, [0.0, 90.0, 180.0]);
    assert_eq!(data.temperatures_c.as_ref().unwrap()[2], Some(30.2));
    assert_eq!(trace(&data, "A1").values.get(1), Some(0.11));
    let over = &trace(&data, "B12").unreadable[0];
    assert_eq!(over.text, "OVER");
    assert_eq!(
        over.position.to_string(),
        format!("{}, sheet 'Kinetics', row 5, column 4 (D)", path.display())
    );

    // `--sheet` picks a sheet; `[h]:mm:ss` keeps durations beyond a day.
    let overnight = ImportOptions {
        sheet: Some("Overnight".into()),
        ..ImportOptions::default()
    };
    let data = import_file(&path, &overnight).unwrap();
    assert_eq!(data.source.sheet.as_deref(), Some("Overnight"));
    assert_eq!(data.times_s, [0.0, 43_200.0, 91_800.0]);
    assert!(data.warnings.is_empty(), "{:?}", data.warnings);

    // `--sheet Notes` is read as asked, and fails naming the sheet.
    let notes = ImportOptions {
        sheet: Some("Notes".into()),
        ..ImportOptions::default()
    };
    let message = import_file(&path, &notes).unwrap_err().to_string();
    assert!(
        message.contains("sheet 'Notes'") && message.contains("no kinetic data"),
        "{message}"
    );
    let missing = ImportOptions {
        sheet: Some("Absent".into()),
        ..ImportOptions::default()
    };
    assert!(import_file(&path, &missing)
        .unwrap_err()
        .to_string()
        .contains("no sheet named 'Absent'"));
}

/// Builds a wide CSV of `wells` x `reads` with values in six decimals (like an export).
fn wide_csv(wells: &[WellId], reads: usize, zero_pad: bool, value: impl Fn(usize, usize) -> f64) -> String {
    let mut text = String::with_capacity(wells.len() * reads * 10);
    text.push_str("Time [s]");
    for well in wells {
        if zero_pad {
            text.push_str(&format!(",{}{:02}", well.row_label(), well.column_number()));
        } else {
            text.push_str(&format!(",{well}"));
        }
    }
    text.push('\n');
    for read in 0..reads {
        text.push_str(&(read * 30).to_string());
        for index in 0..wells.len() {
            text.push_str(&format!(",{:.6}", value(read, index)));
        }
        text.push('\n');
    }
    text
}

proptest! {
    // A random wide table (random subset of 1536-plate wells, random reads, values written with
    // six decimals) comes back with the same values, as the decimal text reads.
    #[test]
    fn random_wide_table_round_trips(
        wells in proptest::sample::subsequence(PlateFormat::Wells1536.wells().collect::<Vec<_>>(), 1..24),
        reads in 1usize..25,
        seed in proptest::collection::vec(-5.0f64..5.0, 24 * 25),
        zero_pad in any::<bool>(),
    ) {
        let text = wide_csv(&wells, reads, zero_pad, |read, index| seed[read * 24 + index]);
        let plate = PlateFormat::smallest_holding(&wells).unwrap();
        // A few wells alone beyond a smaller plate are asked about (`--plate` settles it).
        let data = match import_text(&text, &ImportOptions::default()) {
            Ok(data) => data,
            Err(ImportError::AmbiguousPlate { larger, .. }) => {
                prop_assert_eq!(larger, plate);
                import_text(&text, &ImportOptions { plate: Some(plate), ..ImportOptions::default() }).unwrap()
            }
            Err(error) => return Err(TestCaseError::fail(error.to_string())),
        };
        prop_assert_eq!(data.wells.len(), wells.len());
        prop_assert_eq!(data.times_s.len(), reads);
        prop_assert_eq!(data.plate, plate);
        for (index, well) in wells.iter().enumerate() {
            let trace = data.wells.iter().find(|trace| trace.well == *well).unwrap();
            for read in 0..reads {
                let expected: f64 = format!("{:.6}", seed[read * 24 + index]).parse().unwrap();
                prop_assert_eq!(trace.values.get(read), Some(expected));
            }
            prop_assert!(trace.unreadable.is_empty());
        }
    }

    // Whatever text a user feeds in, the importer answers (data or an error), never panics.
    #[test]
    fn arbitrary_tables_never_panic(lines in proptest::collection::vec("[A-Ha-h0-9:;,. =\\t]{0,24}", 0..12)) {
        let text = lines.join("\n");
        let _ = import_text(&text, &ImportOptions::default());
    }
}

/// Every row of the demo exports that holds a number is read or named (the promise the fuzz
/// targets check on arbitrary input).
#[test]
fn every_row_of_the_demo_exports_is_accounted_for() {
    for (name, text) in [
        (
            "amber-fen-wide.csv",
            include_str!("../../demo-plates/amber-fen-wide.csv"),
        ),
        (
            "amber-fen-grid.csv",
            include_str!("../../demo-plates/amber-fen-grid.csv"),
        ),
        ("wide-with-metadata.csv", WIDE_WITH_METADATA),
    ] {
        let grid = read_text_cells(text.as_bytes(), name).unwrap();
        let data = import_cells(&grid, &ImportOptions::default()).unwrap();
        assert_eq!(rows_unaccounted(&data, &grid), Vec::<usize>::new(), "{name}");
        assert_eq!(data.rows_read.len() % data.times_s.len(), 0, "{name}");
    }
    // A row of readings below the summary lines that looks like a read is refused, so none is lost.
    let text = "Time [s],A1\n0,0.1\n30,0.2\n\nMean,0.15\n,0.3\n";
    assert!(import_error(text, &ImportOptions::default()).contains("run.csv, row 6"));
}

/// Long exports whose wells carry their own time stamps are matched read by read.
#[test]
fn long_exports_with_own_time_stamps_match_reads_by_order() {
    let text = "well,time [s],value\nA1,0,0.1\nA2,2,0.2\nA1,30,0.11\nA2,32,0.21\nA1,60,0.12\nA2,62,0.22\n";
    let data = import_ok(text);
    assert_eq!(data.times_s, [1.0, 31.0, 61.0]);
    assert_eq!(trace(&data, "A2").values, [Some(0.2), Some(0.21), Some(0.22)]);
    assert!(data
        .warnings
        .iter()
        .any(|w| w.contains("own time stamps") && w.contains("up to 1 s")));
    // Read 2 of A2 after read 3 of A1: no order matches them.
    let message = import_error(
        "well,time [s],value\nA1,0,0.1\nA2,2,0.2\nA1,30,0.11\nA2,75,0.21\nA1,60,0.12\nA2,80,0.22\n",
        &ImportOptions::default(),
    );
    assert!(
        message.contains("own time stamps") && message.contains("row 5"),
        "{message}"
    );
}

/// Times beyond the ceiling (or made infinite by their unit) are refused with their cell.
#[test]
fn times_beyond_the_ceiling_are_refused() {
    let message = import_error("Time [h],A1\n0,0.1\n1e306,0.2\n", &ImportOptions::default());
    assert!(
        message.contains("run.csv, row 3, column 1 (A)") && message.contains("longest time"),
        "{message}"
    );
}

#[test]
fn a_long_table_whose_wavelength_column_holds_none_is_refused_naming_the_column() {
    // Found by fuzzing: the refusal said "reads at none" and named no place. Invented table.
    let message = import_error(
        "time [s],wavelength,well,value\n0,,A1,0.10\n30,,A1,0.12\n",
        &ImportOptions::default(),
    );
    assert!(
        message.contains("run.csv")
            && message.contains("row 1, column B")
            && message.contains("holds no wavelength"),
        "{message}"
    );
}

#[test]
fn readings_keep_missing_reads_apart_from_numbers() {
    let mut readings = Readings::missing(3);
    readings.set(1, Some(0.25));
    readings.set(7, Some(1.0)); // past the end: nothing happens
    assert_eq!(readings, [None, Some(0.25), None]);
    assert_eq!(readings.get(1), Some(0.25));
    assert_eq!(readings.get(3), None);
    assert!(readings.any_readable());
    // Missing equals missing (two NaN would not), and a number is never read as missing.
    assert_eq!(readings, Readings::from_values(&[None, Some(0.25), None]));
    assert_ne!(readings, Readings::from_values(&[Some(0.0), Some(0.25), None]));
    assert!(!Readings::missing(2).any_readable());
    // A cell holding NaN is no reading: it is named unreadable, not stored as a number.
    assert_eq!(
        reading_of_cell(Some(Cell::Number(f64::NAN))),
        Err("NaN".to_string())
    );
    assert_eq!(reading_of_cell(Some(Cell::Number(-0.5))), Ok(-0.5));
}
