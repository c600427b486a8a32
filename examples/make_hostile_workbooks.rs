//! Writes the spreadsheet members of the hostile-input corpus (`fixtures/hostile/`): the small
//! invented test plate (`fixtures/small-plate.csv`) and its layout as XLSX workbooks, each with one
//! defect a user could make or an instrument could write. Every number is invented.
//! `cargo run --release --example make_hostile_workbooks -- fixtures/hostile`

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use rust_xlsxwriter::{DocProperties, ExcelDateTime, Format, Formula, Workbook, Worksheet, XlsxError};

/// The small invented plate: 10 reads 30 s apart, wells A1, A2, A3 (samples), B1 (blank), B2
/// (no-enzyme), as in `fixtures/small-plate.csv`.
const READINGS: [[f64; 5]; 10] = [
    [0.0494, 0.0514, 0.0484, 0.0444, 0.0504],
    [0.0556, 0.0621, 0.0636, 0.0446, 0.0509],
    [0.0618, 0.0728, 0.0788, 0.0448, 0.0514],
    [0.0680, 0.0835, 0.0940, 0.0450, 0.0519],
    [0.0742, 0.0942, 0.1092, 0.0452, 0.0524],
    [0.0804, 0.1049, 0.1244, 0.0454, 0.0529],
    [0.0866, 0.1156, 0.1396, 0.0456, 0.0534],
    [0.0915, 0.1250, 0.1535, 0.0445, 0.0526],
    [0.0977, 0.1357, 0.1687, 0.0447, 0.0531],
    [0.1039, 0.1464, 0.1839, 0.0449, 0.0536],
];

/// The wells of [`READINGS`], in column order.
const WELLS: [&str; 5] = ["A1", "A2", "A3", "B1", "B2"];

/// How the time cell of the read at index 4 (sheet row 6) is spoiled.
enum TimeDefect {
    /// A cached error value (`#DIV/0!`), as a formula that failed leaves it.
    ErrorCell,
    /// Text that is no time.
    Text(&'static str),
    /// Nothing in the cell, with the readings beside it.
    Empty,
}

/// A workbook with fixed metadata, so the bytes are the same from run to run.
fn new_workbook() -> Result<Workbook, XlsxError> {
    let mut workbook = Workbook::new();
    let created = ExcelDateTime::from_ymd(2024, 1, 1)?;
    workbook.set_properties(
        &DocProperties::new()
            .set_title("platekin hostile-input corpus (invented)")
            .set_creation_datetime(&created),
    );
    Ok(workbook)
}

/// The wide export on `sheet`: header in row 1, reads below; a reading of well `text_reading.0`
/// at read `text_reading.1` can be written as text instead of a number.
fn write_wide(
    sheet: &mut Worksheet,
    defect: Option<TimeDefect>,
    text_reading: Option<(usize, usize, &str)>,
) -> Result<(), XlsxError> {
    sheet.write_string(0, 0, "Time [s]")?;
    for (column, well) in WELLS.iter().enumerate() {
        sheet.write_string(0, column as u16 + 1, *well)?;
    }
    for (read, values) in READINGS.iter().enumerate() {
        let row = read as u32 + 1;
        match (&defect, read) {
            (Some(TimeDefect::ErrorCell), 4) => {
                sheet.write_formula(row, 0, Formula::new("=1/0").set_result("#DIV/0!"))?;
            }
            (Some(TimeDefect::Text(text)), 4) => {
                sheet.write_string(row, 0, *text)?;
            }
            (Some(TimeDefect::Empty), 4) => {}
            _ => {
                sheet.write_number(row, 0, read as f64 * 30.0)?;
            }
        }
        for (column, value) in values.iter().enumerate() {
            match text_reading {
                Some((well, at, text)) if well == column && at == read => {
                    sheet.write_string(row, column as u16 + 1, text)?;
                }
                _ => {
                    sheet.write_number(row, column as u16 + 1, *value)?;
                }
            }
        }
    }
    Ok(())
}

/// One line of the small layout: well, role, substrate (uM), enzyme (nM), variant.
type LayoutLine = (&'static str, &'static str, Option<f64>, Option<f64>, &'static str);

/// The small layout (`fixtures/small-layout.csv`) on `sheet`, the substrate of A1 given as
/// `substrate_a1` text when asked.
fn write_layout(sheet: &mut Worksheet, substrate_a1: Option<&str>) -> Result<(), XlsxError> {
    for (column, header) in ["well", "role", "substrate [uM]", "enzyme [nM]", "variant"]
        .iter()
        .enumerate()
    {
        sheet.write_string(0, column as u16, *header)?;
    }
    let rows: [LayoutLine; 5] = [
        ("A1", "sample", Some(50.0), Some(5.0), "wt"),
        ("A2", "sample", Some(100.0), Some(5.0), "wt"),
        ("A3", "sample", Some(200.0), Some(5.0), "wt"),
        ("B1", "blank", None, None, ""),
        ("B2", "no-enzyme", Some(100.0), None, ""),
    ];
    for (index, (well, role, substrate, enzyme, variant)) in rows.iter().enumerate() {
        let row = index as u32 + 1;
        sheet.write_string(row, 0, *well)?;
        sheet.write_string(row, 1, *role)?;
        match (index, substrate_a1, substrate) {
            (0, Some(text), _) => {
                sheet.write_string(row, 2, text)?;
            }
            (_, _, Some(value)) => {
                sheet.write_number(row, 2, *value)?;
            }
            _ => {}
        }
        if let Some(value) = enzyme {
            sheet.write_number(row, 3, *value)?;
        }
        if !variant.is_empty() {
            sheet.write_string(row, 4, *variant)?;
        }
    }
    Ok(())
}

/// A layout whose `variant` cells of A1..A3 are one merged cell reading `wt`.
fn write_merged_layout(sheet: &mut Worksheet) -> Result<(), XlsxError> {
    write_layout(sheet, None)?;
    sheet.merge_range(1, 4, 3, 4, "wt", &Format::new())?;
    Ok(())
}

fn write(
    folder: &Path,
    name: &str,
    fill: impl FnOnce(&mut Worksheet) -> Result<(), XlsxError>,
) -> Result<PathBuf, XlsxError> {
    let mut workbook = new_workbook()?;
    let sheet = workbook.add_worksheet();
    sheet.set_name("Kinetics")?;
    fill(sheet)?;
    let path = folder.join(name);
    workbook.save(&path)?;
    Ok(path)
}

fn main() -> ExitCode {
    let Some(folder) = std::env::args().nth(1).map(PathBuf::from) else {
        eprintln!("usage: make_hostile_workbooks FOLDER");
        return ExitCode::from(2);
    };
    let made = (|| -> Result<Vec<PathBuf>, XlsxError> {
        Ok(vec![
            write(&folder, "c02-xlsx-time-error-cell.xlsx", |sheet| {
                write_wide(sheet, Some(TimeDefect::ErrorCell), None)
            })?,
            write(&folder, "c02-xlsx-time-text.xlsx", |sheet| {
                write_wide(sheet, Some(TimeDefect::Text("two minutes")), None)
            })?,
            write(&folder, "c02-xlsx-time-empty.xlsx", |sheet| {
                write_wide(sheet, Some(TimeDefect::Empty), None)
            })?,
            write(&folder, "c05-xlsx-reading-text-thousands.xlsx", |sheet| {
                write_wide(sheet, None, Some((1, 3, "4,940")))
            })?,
            write(
                &folder,
                "c05-xlsx-layout-substrate-text-thousands.xlsx",
                |sheet| write_layout(sheet, Some("1,000")),
            )?,
            write(
                &folder,
                "c11-xlsx-layout-merged-variant.xlsx",
                write_merged_layout,
            )?,
        ])
    })();
    match made {
        Ok(paths) => {
            for path in paths {
                println!("wrote {}", path.display());
            }
            ExitCode::SUCCESS
        }
        Err(error) => {
            eprintln!("{error}");
            ExitCode::from(2)
        }
    }
}
