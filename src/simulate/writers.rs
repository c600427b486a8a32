//! Writers that turn a simulated plate into the files platekin reads: wide, grid and long
//! kinetic CSV, a wide XLSX workbook, tidy and grid layout CSV, and the truth JSON.
//!
//! Every writer is deterministic: the same plate gives the same bytes (the XLSX creation time is
//! fixed for that reason).

use std::fmt::Write as _;

use rust_xlsxwriter::{DocProperties, ExcelDateTime, Format, Workbook, XlsxError};

use super::{SimulatedPlate, SimulatedReading, WellCondition, WellRole};
use crate::core::plate::{row_label, WellId};

/// Seconds in a day: spreadsheet times are fractions of a day.
const SECONDS_PER_DAY: f64 = 86_400.0;

/// The line written below the data of the wide CSV.
pub const WIDE_CSV_END_LINE: &str = "End of kinetic read";

/// The name of the XLSX sheet with the readings.
pub const XLSX_KINETICS_SHEET: &str = "Kinetics";

/// The name of the XLSX sheet with notes (text only), placed before the readings.
pub const XLSX_NOTES_SHEET: &str = "Notes";

/// A writer failure.
#[derive(Debug, thiserror::Error)]
pub enum SimulationWriteError {
    /// The XLSX library refused a cell or the workbook.
    #[error("writing the XLSX workbook, sheet '{sheet}': {source}")]
    Xlsx {
        /// The sheet being written.
        sheet: &'static str,
        /// The library's error.
        #[source]
        source: XlsxError,
    },
    /// The truth could not be serialised.
    #[error("writing the truth JSON: {0}")]
    Json(#[from] serde_json::Error),
}

/// How times are written in text files.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TimeStyle {
    /// Seconds as a plain number, header `Time [s]`.
    Seconds,
    /// `h:mm:ss` text rounded to whole seconds, header `Time`.
    HoursMinutesSeconds,
}

/// Which wells get a column in the wide formats.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum WellColumns {
    /// Every well of the plate format, in reading order; wells off the layout get empty cells.
    AllPlateWells,
    /// Only the wells of the layout whose role is not `empty`.
    UsedWells,
}

/// Options of [`wide_csv`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct WideCsvOptions {
    /// Write the metadata lines and a blank line above the header.
    pub metadata_lines: bool,
    /// How the time column is written.
    pub time_style: TimeStyle,
    /// Which wells get a column.
    pub well_columns: WellColumns,
    /// Write a `Temperature [C]` column after the time.
    pub temperature_column: bool,
    /// Write a blank line and summary lines below the data.
    pub summary_lines: bool,
}

impl Default for WideCsvOptions {
    fn default() -> Self {
        Self {
            metadata_lines: true,
            time_style: TimeStyle::Seconds,
            well_columns: WellColumns::AllPlateWells,
            temperature_column: true,
            summary_lines: true,
        }
    }
}

/// How each block of the grid CSV names its time.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum GridTimeLabel {
    /// `Time 0:01:30`.
    HoursMinutesSeconds,
    /// `t = 90 s`.
    SecondsEquals,
}

/// Options of [`grid_csv`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct GridCsvOptions {
    /// The time line of each block.
    pub time_label: GridTimeLabel,
    /// Write a `Temperature 30.0 C` line after each time line.
    pub temperature_line: bool,
}

impl Default for GridCsvOptions {
    fn default() -> Self {
        Self {
            time_label: GridTimeLabel::HoursMinutesSeconds,
            temperature_line: true,
        }
    }
}

/// Wide kinetic CSV: optional metadata lines (`Run,...`, `Wavelength [nm],405`, blank line), a
/// header `Time [s],Temperature [C],A1,A2,...`, one row per read, then optionally a blank line and
/// summary lines (`End of kinetic read`, `Reads,25`).
pub fn wide_csv(plate: &SimulatedPlate, options: &WideCsvOptions) -> String {
    let columns = well_columns(plate, options.well_columns);
    let mut text = String::new();
    if options.metadata_lines {
        for (key, value) in &plate.metadata {
            let _ = writeln!(text, "{},{}", csv_field(key), csv_field(value));
        }
        text.push('\n');
    }
    let time_header = match options.time_style {
        TimeStyle::Seconds => "Time [s]",
        TimeStyle::HoursMinutesSeconds => "Time",
    };
    text.push_str(time_header);
    if options.temperature_column {
        text.push_str(",Temperature [C]");
    }
    for (well, _) in &columns {
        let _ = write!(text, ",{well}");
    }
    text.push('\n');
    for (read_index, &time_s) in plate.read_times_s.iter().enumerate() {
        match options.time_style {
            TimeStyle::Seconds => text.push_str(&format_number(time_s)),
            TimeStyle::HoursMinutesSeconds => text.push_str(&format_hours_minutes_seconds(time_s)),
        }
        if options.temperature_column {
            text.push(',');
            text.push_str(&optional_temperature(plate, read_index));
        }
        for (_, readings) in &columns {
            text.push(',');
            if let Some(reading) = readings.and_then(|readings| readings.get(read_index)) {
                text.push_str(&format_reading(reading, plate.reading_decimals));
            }
        }
        text.push('\n');
    }
    if options.summary_lines {
        text.push('\n');
        let _ = writeln!(text, "{WIDE_CSV_END_LINE}");
        let _ = writeln!(text, "Reads,{}", plate.read_times_s.len());
    }
    text
}

/// Grid kinetic CSV: one block per read, a time line (`Time 0:01:30` or `t = 90 s`), optionally
/// a `Temperature 30.0 C` line, a line with an empty first cell and the column numbers, one line
/// per plate row (`A,0.0512,...`); a blank line between blocks. Wells off the layout are empty
/// cells.
pub fn grid_csv(plate: &SimulatedPlate, options: &GridCsvOptions) -> String {
    let n_rows = plate.format.n_rows();
    let n_columns = plate.format.n_columns();
    let mut text = String::new();
    for (read_index, &time_s) in plate.read_times_s.iter().enumerate() {
        if read_index > 0 {
            text.push('\n');
        }
        match options.time_label {
            GridTimeLabel::HoursMinutesSeconds => {
                let _ = writeln!(text, "Time {}", format_hours_minutes_seconds(time_s));
            }
            GridTimeLabel::SecondsEquals => {
                let _ = writeln!(text, "t = {} s", format_number(time_s));
            }
        }
        if options.temperature_line {
            let _ = writeln!(text, "Temperature {} C", optional_temperature(plate, read_index));
        }
        text.push_str(&column_number_line(n_columns));
        for row in 0..n_rows {
            text.push_str(&row_label(row));
            for column in 0..n_columns {
                text.push(',');
                let readings = plate.readings_of(WellId::new(row, column));
                if let Some(reading) = readings.and_then(|readings| readings.get(read_index)) {
                    text.push_str(&format_reading(reading, plate.reading_decimals));
                }
            }
            text.push('\n');
        }
    }
    text
}

/// Long kinetic CSV: `well,time [s],absorbance`, one line per well and read, wells in reading
/// order, markers written as text.
pub fn long_csv(plate: &SimulatedPlate) -> String {
    let mut text = String::from("well,time [s],absorbance\n");
    for well in &plate.wells {
        for (reading, &time_s) in well.readings.iter().zip(&plate.read_times_s) {
            let _ = writeln!(
                text,
                "{},{},{}",
                well.well,
                format_number(time_s),
                format_reading(reading, plate.reading_decimals)
            );
        }
    }
    text
}

/// Tidy layout CSV: `well,role,substrate [uM],enzyme [nM],variant`, one line per layout group,
/// the well selection written as given (`B3`, `B1:B3`, `B1 B3 B5`); absent values are empty.
pub fn layout_tidy_csv(plate: &SimulatedPlate) -> String {
    // The inhibitor column only where some well holds an inhibitor.
    let with_inhibitor = plate
        .layout
        .iter()
        .any(|group| group.condition.inhibitor_um.is_some());
    let mut text = String::from(if with_inhibitor {
        "well,role,substrate [uM],enzyme [nM],inhibitor [uM],variant\n"
    } else {
        "well,role,substrate [uM],enzyme [nM],variant\n"
    });
    for group in &plate.layout {
        let condition = &group.condition;
        let inhibitor = if with_inhibitor {
            format!("{},", optional_number(condition.inhibitor_um))
        } else {
            String::new()
        };
        let _ = writeln!(
            text,
            "{},{},{},{},{inhibitor}{}",
            csv_field(&group.selection),
            condition.role.label(),
            optional_number(condition.substrate_um),
            optional_number(condition.enzyme_nm),
            csv_field(condition.variant.as_deref().unwrap_or("")),
        );
    }
    text
}

/// Grid layout CSV: four blocks, each headed by a line with the variable name (`role`,
/// `substrate [uM]`, `enzyme [nM]`, `variant`), then a line with an empty first cell and the column
/// numbers, then one line per plate row; blank lines between blocks; an empty cell is no value.
pub fn layout_grid_csv(plate: &SimulatedPlate) -> String {
    type CellText = fn(&WellCondition) -> String;
    let blocks: [(&str, CellText); 4] = [
        ("role", |condition| condition.role.label().to_string()),
        ("substrate [uM]", |condition| {
            optional_number(condition.substrate_um)
        }),
        ("enzyme [nM]", |condition| optional_number(condition.enzyme_nm)),
        ("variant", |condition| {
            csv_field(condition.variant.as_deref().unwrap_or(""))
        }),
    ];
    let n_rows = plate.format.n_rows();
    let n_columns = plate.format.n_columns();
    let mut text = String::new();
    for (block_index, (name, cell_text)) in blocks.iter().enumerate() {
        if block_index > 0 {
            text.push('\n');
        }
        let _ = writeln!(text, "{name}");
        text.push_str(&column_number_line(n_columns));
        for row in 0..n_rows {
            text.push_str(&row_label(row));
            for column in 0..n_columns {
                text.push(',');
                if let Some(condition) = condition_of(plate, WellId::new(row, column)) {
                    text.push_str(&cell_text(condition));
                }
            }
            text.push('\n');
        }
    }
    text
}

/// The truth as pretty-printed JSON (with a final newline).
pub fn truth_json(plate: &SimulatedPlate) -> Result<String, SimulationWriteError> {
    let mut text = serde_json::to_string_pretty(&plate.truth)?;
    text.push('\n');
    Ok(text)
}

/// An XLSX workbook: a `Notes` sheet (text only: run name, a note that the data are invented,
/// the metadata pairs) and then a `Kinetics` sheet in wide form (row 1 the header `Time`,
/// `Temperature [C]`, well IDs; then one row per read) with the time as real time cells (seconds /
/// 86400 with the number format `[h]:mm:ss`) and markers as strings. Every plate well gets a
/// column, like [`WellColumns::AllPlateWells`].
pub fn xlsx_bytes(plate: &SimulatedPlate) -> Result<Vec<u8>, SimulationWriteError> {
    let mut workbook = Workbook::new();
    // A fixed creation time keeps the bytes the same from run to run.
    let creation_time = ExcelDateTime::from_ymd(2024, 1, 1).map_err(|source| SimulationWriteError::Xlsx {
        sheet: XLSX_NOTES_SHEET,
        source,
    })?;
    let properties = DocProperties::new()
        .set_title(plate.run_name.as_str())
        .set_creation_datetime(&creation_time);
    workbook.set_properties(&properties);

    let notes_error = |source| SimulationWriteError::Xlsx {
        sheet: XLSX_NOTES_SHEET,
        source,
    };
    let notes = workbook.add_worksheet();
    notes.set_name(XLSX_NOTES_SHEET).map_err(notes_error)?;
    notes
        .write_string(0, 0, plate.run_name.as_str())
        .map_err(notes_error)?;
    notes
        .write_string(
            1,
            0,
            "Simulated data: every name and value in this workbook is invented",
        )
        .map_err(notes_error)?;
    for (index, (key, value)) in plate.metadata.iter().enumerate() {
        let row = 3 + index as u32;
        notes.write_string(row, 0, key.as_str()).map_err(notes_error)?;
        notes.write_string(row, 1, value.as_str()).map_err(notes_error)?;
    }

    let kinetics_error = |source| SimulationWriteError::Xlsx {
        sheet: XLSX_KINETICS_SHEET,
        source,
    };
    let time_format = Format::new().set_num_format("[h]:mm:ss");
    let temperature_format = Format::new().set_num_format("0.0");
    let decimals = "0".repeat(plate.reading_decimals as usize);
    let reading_format = if decimals.is_empty() {
        Format::new().set_num_format("0")
    } else {
        Format::new().set_num_format(format!("0.{decimals}"))
    };
    let columns = well_columns(plate, WellColumns::AllPlateWells);
    let kinetics = workbook.add_worksheet();
    kinetics.set_name(XLSX_KINETICS_SHEET).map_err(kinetics_error)?;
    kinetics.write_string(0, 0, "Time").map_err(kinetics_error)?;
    kinetics
        .write_string(0, 1, "Temperature [C]")
        .map_err(kinetics_error)?;
    for (index, (well, _)) in columns.iter().enumerate() {
        kinetics
            .write_string(0, 2 + index as u16, well.to_string())
            .map_err(kinetics_error)?;
    }
    for (read_index, &time_s) in plate.read_times_s.iter().enumerate() {
        let row = 1 + read_index as u32;
        kinetics
            .write_number_with_format(row, 0, time_s / SECONDS_PER_DAY, &time_format)
            .map_err(kinetics_error)?;
        if let Some(&temperature) = plate.temperatures_c.get(read_index) {
            kinetics
                .write_number_with_format(row, 1, temperature, &temperature_format)
                .map_err(kinetics_error)?;
        }
        for (index, (_, readings)) in columns.iter().enumerate() {
            let column = 2 + index as u16;
            match readings.and_then(|readings| readings.get(read_index)) {
                Some(SimulatedReading::Number(value)) => {
                    kinetics
                        .write_number_with_format(row, column, *value, &reading_format)
                        .map_err(kinetics_error)?;
                }
                Some(SimulatedReading::Text(marker)) => {
                    kinetics
                        .write_string(row, column, marker.as_str())
                        .map_err(kinetics_error)?;
                }
                None => {}
            }
        }
    }
    workbook.save_to_buffer().map_err(kinetics_error)
}

/// The wells that get a column, with their readings (`None` for a plate well off the layout).
fn well_columns(plate: &SimulatedPlate, which: WellColumns) -> Vec<(WellId, Option<&[SimulatedReading]>)> {
    match which {
        WellColumns::AllPlateWells => plate
            .format
            .wells()
            .map(|well| (well, plate.readings_of(well)))
            .collect(),
        WellColumns::UsedWells => plate
            .wells
            .iter()
            .filter(|well| well.condition.role != WellRole::Empty)
            .map(|well| (well.well, Some(well.readings.as_slice())))
            .collect(),
    }
}

/// The temperature of a read with one decimal, or an empty text if the plate has none for it
/// (a hand-built plate; [`super::simulate`] always gives one per read).
fn optional_temperature(plate: &SimulatedPlate, read_index: usize) -> String {
    plate
        .temperatures_c
        .get(read_index)
        .map(|temperature| format!("{temperature:.1}"))
        .unwrap_or_default()
}

fn condition_of(plate: &SimulatedPlate, well: WellId) -> Option<&WellCondition> {
    plate
        .wells
        .binary_search_by(|simulated| simulated.well.cmp(&well))
        .ok()
        .map(|index| &plate.wells[index].condition)
}

/// `,1,2,...,n` and a newline.
fn column_number_line(n_columns: u16) -> String {
    let mut line = String::new();
    for column in 1..=n_columns {
        let _ = write!(line, ",{column}");
    }
    line.push('\n');
    line
}

/// A reading with the reader's decimals, or the marker text.
fn format_reading(reading: &SimulatedReading, decimals: u32) -> String {
    match reading {
        SimulatedReading::Number(value) => format!("{value:.*}", decimals as usize),
        SimulatedReading::Text(text) => csv_field(text),
    }
}

/// A number in its shortest exact form (`90`, `0.5`, `1280`).
fn format_number(value: f64) -> String {
    format!("{value}")
}

fn optional_number(value: Option<f64>) -> String {
    value.map(format_number).unwrap_or_default()
}

/// `h:mm:ss`, rounded to whole seconds (`0:01:30`, `1:05:00`).
pub fn format_hours_minutes_seconds(seconds: f64) -> String {
    let total = seconds.round().max(0.0) as u64;
    format!("{}:{:02}:{:02}", total / 3600, (total / 60) % 60, total % 60)
}

/// Quotes a CSV field when it holds a comma, a quote or a line break (RFC 4180).
fn csv_field(text: &str) -> String {
    if text.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", text.replace('"', "\"\""))
    } else {
        text.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::super::{simulate, LayoutGroup, PlantedDefect, Readout, SimulationSpec, VariantKinetics};
    use super::*;
    use crate::core::plate::{parse_well_selection, PlateFormat};

    fn plate() -> SimulatedPlate {
        let spec = SimulationSpec {
            run_name: "Writer test".to_string(),
            metadata: vec![
                ("Run".to_string(), "Writer test".to_string()),
                ("Wavelength [nm]".to_string(), "405".to_string()),
            ],
            format: PlateFormat::Wells96,
            read_times_s: vec![0.0, 30.0, 90.0, 3725.0],
            wavelength_nm: 405.0,
            temperature_set_point_c: 30.0,
            temperature_jitter_sd_c: 0.05,
            extinction_coefficient_per_m_per_cm: 16_800.0,
            pathlength_cm: 0.55,
            readout: Readout::Product,
            variants: vec![VariantKinetics {
                name: "V, one".to_string(),
                kcat_per_s: 5.0,
                km_um: 30.0,
                ki_um: None,
            }],
            layout: vec![
                LayoutGroup {
                    selection: "B1:B3".to_string(),
                    condition: WellCondition::sample(10.0, 2.5, "V, one"),
                },
                LayoutGroup {
                    selection: "C2 C4".to_string(),
                    condition: WellCondition::no_enzyme(10.0),
                },
                LayoutGroup {
                    selection: "H12".to_string(),
                    condition: WellCondition::blank(),
                },
                LayoutGroup {
                    selection: "A1".to_string(),
                    condition: WellCondition::empty(),
                },
            ],
            defects: vec![(
                WellId::new(1, 1),
                PlantedDefect::OverRange {
                    read_indices: vec![2],
                    marker: "OVER".to_string(),
                },
            )],
            liquid_offset_range_au: (0.04, 0.06),
            empty_offset_range_au: (0.035, 0.045),
            noise_sd_au: 0.002,
            baseline_drift_au_per_s: 0.0,
            spontaneous_hydrolysis_per_s: 1e-6,
            dead_time_s: 0.0,
            substrate_pipetting_cv: 0.0,
            noise_growth_per_au: 0.0,
            well_drift_sd_au_per_s: 0.0,
            reading_decimals: 4,
            seed: 3,
        };
        simulate(&spec).unwrap()
    }

    fn reading_text(plate: &SimulatedPlate, well: &str, read_index: usize) -> String {
        let readings = plate.readings_of(WellId::parse(well).unwrap()).unwrap();
        format_reading(&readings[read_index], 4)
    }

    #[test]
    fn wide_csv_has_metadata_header_rows_and_summary() {
        let plate = plate();
        let text = wide_csv(&plate, &WideCsvOptions::default());
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], "Run,Writer test");
        assert_eq!(lines[1], "Wavelength [nm],405");
        assert_eq!(lines[2], "");
        let header: Vec<&str> = lines[3].split(',').collect();
        assert_eq!(header[..4], ["Time [s]", "Temperature [C]", "A1", "A2"]);
        assert_eq!(header.len(), 2 + 96);
        assert_eq!(*header.last().unwrap(), "H12");
        // Four reads, then a blank line and the two summary lines.
        assert_eq!(lines.len(), 4 + 4 + 3);
        assert_eq!(lines[8], "");
        assert_eq!(lines[9], WIDE_CSV_END_LINE);
        let row: Vec<&str> = lines[6].split(',').collect();
        assert_eq!(row[0], "90");
        let b2 = header.iter().position(|cell| *cell == "B2").unwrap();
        assert_eq!(row[b2], "OVER");
        let b1 = header.iter().position(|cell| *cell == "B1").unwrap();
        assert_eq!(row[b1], reading_text(&plate, "B1", 2));
        // A2 is off the layout: an empty cell.
        assert_eq!(row[3], "");
    }

    #[test]
    fn wide_csv_with_clock_times_and_used_wells_only() {
        let plate = plate();
        let options = WideCsvOptions {
            metadata_lines: false,
            time_style: TimeStyle::HoursMinutesSeconds,
            well_columns: WellColumns::UsedWells,
            temperature_column: false,
            summary_lines: false,
        };
        let text = wide_csv(&plate, &options);
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], "Time,B1,B2,B3,C2,C4,H12");
        assert!(lines[2].starts_with("0:00:30,"));
        assert!(lines[4].starts_with("1:02:05,"));
        assert_eq!(lines.len(), 5);
    }

    #[test]
    fn grid_csv_blocks_round_trip_readings() {
        let plate = plate();
        let text = grid_csv(&plate, &GridCsvOptions::default());
        let blocks: Vec<&str> = text.split("\n\n").collect();
        assert_eq!(blocks.len(), 4);
        for (read_index, block) in blocks.iter().enumerate() {
            let lines: Vec<&str> = block.lines().collect();
            assert_eq!(
                lines[0],
                format!(
                    "Time {}",
                    format_hours_minutes_seconds(plate.read_times_s[read_index])
                )
            );
            assert!(lines[1].starts_with("Temperature ") && lines[1].ends_with(" C"));
            assert_eq!(lines[2], ",1,2,3,4,5,6,7,8,9,10,11,12");
            assert_eq!(lines.len(), 3 + 8);
            let row_b: Vec<&str> = lines[4].split(',').collect();
            assert_eq!(row_b[0], "B");
            assert_eq!(row_b[1], reading_text(&plate, "B1", read_index));
            assert_eq!(row_b[4], "");
        }
        let plain = grid_csv(
            &plate,
            &GridCsvOptions {
                time_label: GridTimeLabel::SecondsEquals,
                temperature_line: false,
            },
        );
        assert!(plain.starts_with("t = 0 s\n,1,2,"));
        assert!(plain.contains("\n\nt = 3725 s\n"));
    }

    #[test]
    fn long_csv_lists_every_reading() {
        let plate = plate();
        let text = long_csv(&plate);
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], "well,time [s],absorbance");
        assert_eq!(lines.len(), 1 + plate.wells.len() * 4);
        assert_eq!(lines[1], format!("A1,0,{}", reading_text(&plate, "A1", 0)));
        assert!(lines.contains(&"B2,90,OVER"));
    }

    #[test]
    fn tidy_layout_expands_to_the_simulated_wells() {
        let plate = plate();
        let text = layout_tidy_csv(&plate);
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], "well,role,substrate [uM],enzyme [nM],variant");
        assert_eq!(lines[1], "B1:B3,sample,10,2.5,\"V, one\"");
        assert_eq!(lines[2], "C2 C4,no-enzyme,10,,");
        assert_eq!(lines[3], "H12,blank,,,");
        let mut wells: Vec<WellId> = plate
            .layout
            .iter()
            .flat_map(|group| parse_well_selection(&group.selection).unwrap())
            .collect();
        wells.sort();
        assert_eq!(
            wells,
            plate.wells.iter().map(|well| well.well).collect::<Vec<_>>()
        );
    }

    #[test]
    fn grid_layout_has_four_blocks_with_values_in_place() {
        let plate = plate();
        let text = layout_grid_csv(&plate);
        let blocks: Vec<Vec<&str>> = text.split("\n\n").map(|block| block.lines().collect()).collect();
        assert_eq!(blocks.len(), 4);
        let names: Vec<&str> = blocks.iter().map(|block| block[0]).collect();
        assert_eq!(names, ["role", "substrate [uM]", "enzyme [nM]", "variant"]);
        assert_eq!(blocks[0][1], ",1,2,3,4,5,6,7,8,9,10,11,12");
        assert_eq!(blocks[0][2], "A,empty,,,,,,,,,,,");
        assert_eq!(blocks[0][3], "B,sample,sample,sample,,,,,,,,,");
        assert_eq!(blocks[0][4], "C,,no-enzyme,,no-enzyme,,,,,,,,");
        assert_eq!(blocks[0][9], "H,,,,,,,,,,,,blank");
        assert_eq!(blocks[1][4], "C,,10,,10,,,,,,,,");
        assert_eq!(blocks[2][3], "B,2.5,2.5,2.5,,,,,,,,,");
        assert_eq!(blocks[3][3], "B,\"V, one\",\"V, one\",\"V, one\",,,,,,,,,");
    }

    #[test]
    fn xlsx_is_a_deterministic_zip() {
        let plate = plate();
        let first = xlsx_bytes(&plate).unwrap();
        let second = xlsx_bytes(&plate).unwrap();
        assert_eq!(first, second);
        assert_eq!(&first[..2], b"PK");
    }

    #[test]
    fn truth_json_names_wells_and_defects() {
        let plate = plate();
        let value: serde_json::Value = serde_json::from_str(&truth_json(&plate).unwrap()).unwrap();
        assert_eq!(value["wells"][0]["well"], "A1");
        assert_eq!(value["wells"][0]["role"], "empty");
        assert_eq!(value["planted_defects"][0]["well"], "B2");
        assert_eq!(value["planted_defects"][0]["defect"]["kind"], "over-range");
        assert_eq!(value["planted_defects"][0]["affected_read_times_s"][0], 90.0);
        assert_eq!(value["settings"]["plate_format"], "96");
        assert_eq!(value["settings"]["readout"], "product");
    }

    #[test]
    fn clock_time_and_quoting() {
        assert_eq!(format_hours_minutes_seconds(0.0), "0:00:00");
        assert_eq!(format_hours_minutes_seconds(90.0), "0:01:30");
        assert_eq!(format_hours_minutes_seconds(3725.4), "1:02:05");
        assert_eq!(csv_field("plain"), "plain");
        assert_eq!(csv_field("a \"b\", c"), "\"a \"\"b\"\", c\"");
    }
}
