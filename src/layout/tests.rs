//! Tests of the layout readers and the check against the data.

use std::collections::BTreeSet;

use super::*;
use crate::core::cells::{Cell, DecimalMark};
use crate::core::plate::row_label;
use crate::files::input::{InputFile, InputRole};
use crate::files::sheet::read_text_cells;
use proptest::prelude::*;

// Every layout below is invented for these tests (an invented esterase, "EstX", and its
// variants); the expected values are read off the text written in each test.

fn parse_csv(text: &str, plate: PlateFormat) -> Result<Layout, LayoutError> {
    let grid = read_text_cells(text.as_bytes(), "layout.csv").unwrap();
    parse_layout(&grid, plate)
}

fn well(text: &str) -> WellId {
    WellId::parse(text).unwrap()
}

fn error_text(text: &str, plate: PlateFormat) -> String {
    parse_csv(text, plate).unwrap_err().to_string()
}

fn assert_mentions(message: &str, parts: &[&str]) {
    for part in parts {
        assert!(message.contains(part), "expected '{part}' in: {message}");
    }
}

#[test]
fn control_wells_are_marked_and_are_no_fit_samples() {
    let layout = parse_csv(
        "well,role,substrate [uM],enzyme [nM],variant,control\nA1:A3,sample,10,5,EstX,\nB1,sample,500,5,EstX, Positive \nB2,no-enzyme,500,,,neg\nB3,sample,500,5,EstX,batch-2\n",
        PlateFormat::Wells96,
    )
    .unwrap();
    let setup = |text: &str| &layout.wells[&well(text)];
    assert_eq!(setup("A1").control(), None);
    assert!(setup("A1").is_fit_sample());
    assert_eq!(setup("B1").control(), Some(ControlKind::Positive));
    assert!(
        !setup("B1").is_fit_sample(),
        "a positive control is no fit sample"
    );
    assert_eq!(setup("B2").control(), Some(ControlKind::Negative));
    assert!(!setup("B2").is_fit_sample());
    // Another value of the column is an ordinary factor: the well stays a sample.
    assert_eq!(setup("B3").control(), None);
    assert!(setup("B3").is_fit_sample());
}

#[test]
fn roles_parse_in_every_accepted_spelling() {
    for text in ["no-enzyme", "No Enzyme", "no_enzyme", "NOENZYME", " no  enzyme "] {
        assert_eq!(Role::from_str(text), Ok(Role::NoEnzyme), "{text}");
    }
    assert_eq!(Role::from_str("Sample"), Ok(Role::Sample));
    assert_eq!(Role::from_str("BLANK"), Ok(Role::Blank));
    assert_eq!(Role::from_str("empty"), Ok(Role::Empty));
    let error = Role::from_str("control").unwrap_err();
    assert_mentions(
        &error,
        &["'control'", "sample, blank, no-enzyme, standard, empty"],
    );
    for role in Role::ALL {
        assert_eq!(Role::from_str(&role.to_string()), Ok(role));
    }
}

#[test]
fn tidy_csv_with_single_wells_rectangles_lists_units_factors_and_comments() {
    let text = "\
EstX plate 7 layout (invented lab),,,,,
# substrate: invented p-nitrophenyl ester stock; comment lines are skipped,,,,,
Well,Role,Substrate [\u{b5}M],Enzyme [nM],Variant,pH
A1:A3,blank,,,,7.5
B1 B3 B5,sample,10,5,WT,7.5

C2,No Enzyme,20,,WT,7.5
D1:E2,,50,5,K12A,8
# a comment between lines
H12,empty,,,,
";
    let layout = parse_csv(text, PlateFormat::Wells96).unwrap();
    assert_eq!(layout.form, LayoutForm::Tidy);
    assert_eq!(layout.substrate_unit, Some(ConcentrationUnit::Micromolar));
    assert_eq!(layout.enzyme_unit, Some(ConcentrationUnit::Nanomolar));
    assert_eq!(layout.inhibitor_unit, None);
    assert_eq!(layout.factor_names, vec!["Variant".to_string(), "pH".to_string()]);
    // 3 blanks + 3 listed samples + 1 control + 4 in the rectangle + 1 empty
    assert_eq!(layout.wells.len(), 12);

    let blank = &layout.wells[&well("A2")];
    assert_eq!(
        (blank.role, blank.substrate, blank.enzyme),
        (Role::Blank, None, None)
    );
    assert_eq!(blank.factors["Variant"], "");
    assert_eq!(blank.factors["pH"], "7.5");

    let sample = &layout.wells[&well("B5")];
    assert_eq!(
        (sample.role, sample.substrate, sample.enzyme),
        (Role::Sample, Some(10.0), Some(5.0))
    );
    assert_eq!(sample.factors["Variant"], "WT");
    assert_eq!(sample.position.to_string(), "layout.csv, row 5, column 1 (A)");
    assert!(!layout.wells.contains_key(&well("B2")));

    let control = &layout.wells[&well("C2")];
    assert_eq!(
        (control.role, control.substrate, control.enzyme),
        (Role::NoEnzyme, Some(20.0), None)
    );
    assert_eq!(
        control.position.row, 7,
        "the blank line 6 must keep the line numbers true"
    );

    // An empty role cell means sample; a number in a factor column is kept as its text.
    let rectangle = &layout.wells[&well("E2")];
    assert_eq!((rectangle.role, rectangle.substrate), (Role::Sample, Some(50.0)));
    assert_eq!(rectangle.factors["pH"], "8");
    assert_eq!(rectangle.factors["Variant"], "K12A");

    assert_eq!(layout.wells[&well("H12")].role, Role::Empty);
    assert_eq!(layout.wells_with_role(Role::Sample).count(), 7);
    assert_eq!(
        layout
            .wells_with_role(Role::Blank)
            .map(|(w, _)| w.to_string())
            .collect::<Vec<_>>(),
        ["A1", "A2", "A3"]
    );
}

#[test]
fn tidy_without_role_column_makes_every_well_a_sample_and_headers_ignore_case() {
    let text = "  WELL  ; SUBSTRATE (mM) ;inhibitor [pM]; buffer\nA1:B2;0,5;0;HEPES\nC1;1;100;Tris\n";
    let layout = parse_csv(text, PlateFormat::Wells96).unwrap();
    assert_eq!(layout.wells.len(), 5);
    assert!(layout.wells.values().all(|setup| setup.role == Role::Sample));
    assert_eq!(layout.substrate_unit, Some(ConcentrationUnit::Millimolar));
    assert_eq!(layout.inhibitor_unit, Some(ConcentrationUnit::Picomolar));
    assert_eq!(layout.wells[&well("B2")].substrate, Some(0.5));
    assert_eq!(layout.wells[&well("C1")].inhibitor, Some(100.0));
    assert_eq!(layout.factor_names, vec!["buffer".to_string()]);
    assert_eq!(layout.wells[&well("C1")].factors["buffer"], "Tris");
}

#[test]
fn tidy_xlsx_is_read_with_sheet_and_numbers() {
    let directory = tempfile::tempdir().unwrap();
    let path = directory.path().join("layout.xlsx");
    let mut workbook = rust_xlsxwriter::Workbook::new();
    let sheet = workbook.add_worksheet();
    sheet.set_name("Layout").unwrap();
    sheet.write_string(0, 0, "EstX kinetics, invented plate").unwrap();
    for (column, header) in ["well", "role", "substrate [uM]", "enzyme [nM]", "temperature"]
        .iter()
        .enumerate()
    {
        sheet.write_string(2, column as u16, *header).unwrap();
    }
    sheet.write_string(3, 0, "A1:A4").unwrap();
    sheet.write_string(3, 1, "sample").unwrap();
    sheet.write_number(3, 2, 12.5).unwrap();
    sheet.write_number(3, 3, 2.0).unwrap();
    sheet.write_number(3, 4, 25.0).unwrap();
    sheet.write_string(4, 0, "H1 H2").unwrap();
    sheet.write_string(4, 1, "blank").unwrap();
    sheet.write_number(4, 4, 37.5).unwrap();
    workbook.save(&path).unwrap();

    let layout = read_layout(
        &InputFile::read(InputRole::Layout, &path).unwrap(),
        Some("Layout"),
        PlateFormat::Wells96,
    )
    .unwrap();
    assert_eq!(layout.form, LayoutForm::Tidy);
    assert_eq!(layout.source.sheet.as_deref(), Some("Layout"));
    assert_eq!(layout.wells.len(), 6);
    let sample = &layout.wells[&well("A4")];
    assert_eq!((sample.substrate, sample.enzyme), (Some(12.5), Some(2.0)));
    assert_eq!(sample.factors["temperature"], "25");
    assert_eq!(layout.wells[&well("H2")].factors["temperature"], "37.5");
    assert_eq!(layout.wells[&well("H2")].role, Role::Blank);
    assert_eq!(
        sample.position.to_string(),
        format!("{}, sheet 'Layout', row 4, column 1 (A)", path.display())
    );
}

#[test]
fn xlsx_errors_name_the_sheet_and_cell() {
    let directory = tempfile::tempdir().unwrap();
    let path = directory.path().join("bad.xlsx");
    let mut workbook = rust_xlsxwriter::Workbook::new();
    let sheet = workbook.add_worksheet();
    sheet.set_name("Plate 2").unwrap();
    sheet.write_string(0, 0, "well").unwrap();
    sheet.write_string(0, 1, "role").unwrap();
    sheet.write_string(0, 2, "substrate [uM]").unwrap();
    sheet.write_string(1, 0, "C7").unwrap();
    sheet.write_string(1, 1, "reference").unwrap();
    sheet.write_number(1, 2, 5.0).unwrap();
    workbook.save(&path).unwrap();
    let message = read_layout(
        &InputFile::read(InputRole::Layout, &path).unwrap(),
        None,
        PlateFormat::Wells96,
    )
    .unwrap_err()
    .to_string();
    assert_mentions(
        &message,
        &[
            "sheet 'Plate 2', row 2, column 2 (B)",
            "'reference'",
            "C7",
            KNOWN_ROLES,
        ],
    );
}

/// Writes one grid block (96 or 384 wells) from a function giving each well's cell text.
fn grid_block(name: &str, plate: PlateFormat, value: impl Fn(WellId) -> String) -> String {
    let mut text = format!("{name}\n");
    for column in 1..=plate.n_columns() {
        text.push_str(&format!(",{column}"));
    }
    text.push('\n');
    for plate_row in 0..plate.n_rows() {
        text.push_str(&row_label(plate_row));
        for column in 0..plate.n_columns() {
            text.push(',');
            text.push_str(&value(WellId::new(plate_row, column)));
        }
        text.push('\n');
    }
    text
}

#[test]
fn grid_csv_with_role_substrate_and_variant_blocks_for_96_wells() {
    // Row A: blanks; rows B-G: substrate series down columns 1-10 (invented 2-fold series);
    // row H: no-enzyme controls in columns 1-10; column 12 empty except in the variant block.
    let substrate = |well: WellId| -> String {
        if well.row == 0 || well.column >= 10 {
            String::new()
        } else {
            format!("{}", 200.0 / 2f64.powi(i32::from(well.column)))
        }
    };
    let role = |well: WellId| -> String {
        match (well.row, well.column) {
            (0, _) => "blank".into(),
            (7, c) if c < 10 => "no enzyme".into(),
            (_, 10) => "empty".into(),
            // Samples are left empty on purpose: an empty role cell with a substrate is a sample.
            _ => String::new(),
        }
    };
    // Variants only where there is a sample or an empty well (a variant alone would make a
    // well a sample without substrate).
    let variant = |well: WellId| -> String {
        match (well.row, well.column) {
            (1..=3, 0..=10) => "WT".into(),
            (4..=6, 0..=10) => "K12A".into(),
            _ => String::new(),
        }
    };
    let text = format!(
        "EstX Km run (invented)\n# grid form\n\n{}\n{}\n{}",
        grid_block("role", PlateFormat::Wells96, role),
        grid_block("Substrate [uM]", PlateFormat::Wells96, substrate),
        grid_block("variant", PlateFormat::Wells96, variant)
    );
    let layout = parse_csv(&text, PlateFormat::Wells96).unwrap();
    assert_eq!(layout.form, LayoutForm::Grid);
    assert_eq!(layout.substrate_unit, Some(ConcentrationUnit::Micromolar));
    assert_eq!(layout.factor_names, vec!["variant".to_string()]);
    // 12 blanks + 60 samples + 6 empty (B11-G11) + 10 controls + H11; B12-H12 get nothing.
    assert_eq!(layout.wells.len(), 89);
    assert!(!layout.wells.contains_key(&well("B12")));
    assert_eq!(layout.wells[&well("A5")].role, Role::Blank);
    let sample = &layout.wells[&well("C3")];
    assert_eq!((sample.role, sample.substrate), (Role::Sample, Some(50.0)));
    assert_eq!(sample.factors["variant"], "WT");
    // C3's role cell is empty, so the first cell naming it is in the substrate block:
    // lines 1-3 title, comment, blank; 4-13 role block; 14 blank; 15 name; 16 numbers; 19 row C.
    assert_eq!(sample.position.to_string(), "layout.csv, row 19, column 4 (D)");
    let control = &layout.wells[&well("H1")];
    assert_eq!((control.role, control.substrate), (Role::NoEnzyme, Some(200.0)));
    assert_eq!(control.factors["variant"], "");
    assert_eq!(layout.wells[&well("D11")].role, Role::Empty);
    assert_eq!(layout.wells[&well("D11")].factors["variant"], "WT");
    assert_eq!(layout.wells_with_role(Role::Sample).count(), 60);
}

#[test]
fn grid_without_role_block_makes_samples_and_384_wells_work() {
    let substrate = |well: WellId| -> String { format!("{}", f64::from(well.column + 1) * 2.5) };
    let text = grid_block("substrate [mM]", PlateFormat::Wells384, substrate);
    let layout = parse_csv(&text, PlateFormat::Wells384).unwrap();
    assert_eq!(layout.form, LayoutForm::Grid);
    assert_eq!(layout.wells.len(), 384);
    assert!(layout.wells.values().all(|setup| setup.role == Role::Sample));
    assert_eq!(layout.wells[&well("P24")].substrate, Some(60.0));
    assert_eq!(
        layout.wells[&well("P24")].position.to_string(),
        "layout.csv, row 18, column 25 (Y)"
    );
    assert_eq!(layout.substrate_unit, Some(ConcentrationUnit::Millimolar));
    // The same grid read as a 96-well plate: the first off-plate cell is named.
    let message = error_text(&text, PlateFormat::Wells96);
    assert_mentions(&message, &["well A13", "96-well plate", "row 3, column 14 (N)"]);
}

#[test]
fn well_off_the_plate_is_named_with_its_cell() {
    let message = error_text("well,substrate [uM]\nA1,5\nI1,5\n", PlateFormat::Wells96);
    assert_mentions(
        &message,
        &[
            "layout.csv, row 3, column 1 (A)",
            "well I1",
            "96-well plate",
            "rows A to H",
        ],
    );
    let message = error_text("well,substrate [uM]\nA1:A13,5\n", PlateFormat::Wells96);
    assert_mentions(&message, &["row 2, column 1 (A)", "well A13", "columns 1 to 12"]);
}

#[test]
fn well_cell_that_is_no_well_is_named() {
    let message = error_text("well,substrate [uM]\nA1,5\nB1 X9x,5\n", PlateFormat::Wells96);
    assert_mentions(
        &message,
        &[
            "layout.csv, row 3, column 1 (A)",
            "'B1 X9x'",
            "'X9x' is not a well ID",
        ],
    );
    let message = error_text("role,well,substrate [uM]\nsample,12,5\n", PlateFormat::Wells96);
    assert_mentions(&message, &["row 2, column 2 (B)", "'12'"]);
    let message = error_text("well,role,substrate [uM]\n,sample,5\n", PlateFormat::Wells96);
    assert_mentions(&message, &["row 2, column 1 (A)", "'well' cell is empty"]);
}

#[test]
fn conflicting_duplicate_names_both_positions_and_identical_duplicate_is_fine() {
    let message = error_text(
        "well,role,substrate [uM]\nB1:B4,sample,10\nC1,blank,\nB3,sample,20\n",
        PlateFormat::Wells96,
    );
    assert_mentions(
        &message,
        &[
            "well B3",
            "substrate 10 vs 20",
            "row 2, column 1 (A)",
            "row 4, column 1 (A)",
        ],
    );
    let message = error_text(
        "well,role,substrate [uM]\nB1:B4,sample,10\nB2,blank,10\n",
        PlateFormat::Wells96,
    );
    assert_mentions(&message, &["well B2", "role sample vs blank", "row 2", "row 3"]);

    let layout = parse_csv(
        "well,role,substrate [uM]\nB1:B4,sample,10\nB3 B4,sample,10\n",
        PlateFormat::Wells96,
    )
    .unwrap();
    assert_eq!(layout.wells.len(), 4);
    assert_eq!(
        layout.wells[&well("B4")].position.row,
        2,
        "the first cell naming it is kept"
    );
}

#[test]
fn grid_duplicate_blocks_merge_when_they_agree_and_conflict_otherwise() {
    let first = grid_block("substrate [uM]", PlateFormat::Wells96, |w| {
        if w.row == 0 {
            "5".into()
        } else {
            String::new()
        }
    });
    let agreeing = grid_block("substrate [uM]", PlateFormat::Wells96, |w| {
        if w.row == 0 || w.row == 1 {
            "5".into()
        } else {
            String::new()
        }
    });
    let layout = parse_csv(&format!("{first}\n{agreeing}"), PlateFormat::Wells96).unwrap();
    assert_eq!(layout.wells.len(), 24);
    assert_eq!(layout.wells[&well("A1")].position.row, 3);
    assert_eq!(layout.wells[&well("B1")].position.row, 15);

    let clashing = grid_block("substrate [uM]", PlateFormat::Wells96, |w| {
        if w == WellId::new(0, 4) {
            "7".into()
        } else {
            String::new()
        }
    });
    let message = error_text(&format!("{first}\n{clashing}"), PlateFormat::Wells96);
    assert_mentions(
        &message,
        &[
            "well A5",
            "substrate 5 vs 7",
            "row 3, column 6 (F)",
            "row 14, column 6 (F)",
        ],
    );

    let other_unit = grid_block("substrate [mM]", PlateFormat::Wells96, |_| String::new());
    let message = error_text(&format!("{first}\n{other_unit}"), PlateFormat::Wells96);
    assert_mentions(
        &message,
        &[
            "substrate is given in uM",
            "in mM",
            "row 1, column 1 (A)",
            "row 12, column 1 (A)",
        ],
    );
}

#[test]
fn unknown_role_lists_the_known_ones() {
    let message = error_text(
        "well,role,substrate [uM]\nA1,sample,1\nD4 D5,control,1\n",
        PlateFormat::Wells96,
    );
    assert_mentions(
        &message,
        &["row 3, column 2 (B)", "'control'", "well D4 D5", KNOWN_ROLES],
    );
    let text = format!(
        "{}\n{}",
        grid_block("role", PlateFormat::Wells96, |w| if w == WellId::new(2, 3) {
            "stnadard".into()
        } else {
            String::new()
        }),
        grid_block("substrate [uM]", PlateFormat::Wells96, |_| "1".into())
    );
    assert_mentions(
        &error_text(&text, PlateFormat::Wells96),
        &["row 5, column 5 (E)", "well C4", "'stnadard'", KNOWN_ROLES],
    );
}

#[test]
fn unknown_and_missing_units_are_named() {
    let message = error_text("well,substrate [mg/mL]\nA1,1\n", PlateFormat::Wells96);
    assert_mentions(
        &message,
        &["row 1, column 2 (B)", "'mg/mL'", "M, mM, uM", "nM, pM"],
    );
    let message = error_text("well,Substrate\nA1,1\n", PlateFormat::Wells96);
    assert_mentions(
        &message,
        &["row 1, column 2 (B)", "'Substrate' has no unit", "substrate [uM]"],
    );
    let message = error_text("well,substrate [uM],enzyme []\nA1,1,1\n", PlateFormat::Wells96);
    assert_mentions(&message, &["row 1, column 3 (C)", "enzyme [nM]"]);
    let message = error_text(
        "well,substrate [uM],Substrate [mM]\nA1,1,1\n",
        PlateFormat::Wells96,
    );
    assert_mentions(
        &message,
        &[
            "substrate is given in uM at layout.csv, row 1, column 2 (B)",
            "mM at layout.csv, row 1, column 3 (C)",
        ],
    );
    let message = grid_block("enzyme", PlateFormat::Wells96, |_| "1".into());
    assert_mentions(
        &error_text(&message, PlateFormat::Wells96),
        &["row 1, column 1 (A)", "enzyme [nM]"],
    );
}

#[test]
fn concentration_cells_must_be_numbers_of_at_least_zero() {
    let message = error_text("well,substrate [uM]\nA1,1\nA2:A3,ten\n", PlateFormat::Wells96);
    assert_mentions(
        &message,
        &["row 3, column 2 (B)", "'ten'", "well A2:A3", "not a number"],
    );
    let message = error_text("well,substrate [uM]\nA1,-1\n", PlateFormat::Wells96);
    assert_mentions(&message, &["row 2, column 2 (B)", "-1", "well A1", "negative"]);
    let text = grid_block("substrate [uM]", PlateFormat::Wells96, |w| {
        if w == WellId::new(7, 11) {
            "n/a".into()
        } else {
            "1".into()
        }
    });
    assert_mentions(
        &error_text(&text, PlateFormat::Wells96),
        &["row 10, column 13 (M)", "well H12", "'n/a'"],
    );
}

#[test]
fn samples_and_no_enzyme_controls_need_a_substrate() {
    let message = error_text(
        "well,role,substrate [uM]\nA1,blank,\nB2:B3,sample,\nC1,sample,\n",
        PlateFormat::Wells96,
    );
    assert_mentions(
        &message,
        &[
            "row 3, column 1 (A)",
            "well B2 is a sample well",
            "likewise: B3, C1",
        ],
    );
    let message = error_text(
        "well,role,substrate [uM]\nA1,sample,5\nH1,no-enzyme,\n",
        PlateFormat::Wells96,
    );
    assert_mentions(
        &message,
        &[
            "row 3, column 1 (A)",
            "well H1 is a no-enzyme well",
            "no substrate",
        ],
    );
    // Grid: a well with only a factor value defaults to a sample and so needs a substrate.
    let text = format!(
        "{}\n{}",
        grid_block("substrate [uM]", PlateFormat::Wells96, |w| if w.row == 0 {
            "1".into()
        } else {
            String::new()
        }),
        grid_block("variant", PlateFormat::Wells96, |w| if w == WellId::new(1, 1) {
            "WT".into()
        } else {
            String::new()
        })
    );
    assert_mentions(
        &error_text(&text, PlateFormat::Wells96),
        &["well B2 is a sample well", "row 15, column 3 (C)"],
    );
    // Blanks may go without substrate.
    assert!(parse_csv(
        "well,role,substrate [uM]\nA1,blank,\nA2,sample,3\n",
        PlateFormat::Wells96
    )
    .is_ok());
}

#[test]
fn empty_layouts_and_files_without_a_layout_are_refused() {
    let message = error_text("# nothing yet\nwell,role,substrate [uM]\n", PlateFormat::Wells96);
    assert_mentions(&message, &["layout.csv", "tidy form", "no wells"]);
    let message = error_text("well,role\nA1:H12,empty\n", PlateFormat::Wells96);
    assert_mentions(&message, &["layout.csv", "no wells other than empty"]);
    let message = error_text("Time [s],A1,A2\n0,0.1,0.2\n", PlateFormat::Wells96);
    assert_mentions(&message, &["layout.csv", "no plate layout found"]);
}

#[test]
fn tidy_column_problems_are_named() {
    let message = error_text(
        "well,Variant,variant,substrate [uM]\nA1,a,b,1\n",
        PlateFormat::Wells96,
    );
    assert_mentions(
        &message,
        &["row 1, column 2 (B)", "row 1, column 3 (C)", "'variant'"],
    );
    let message = error_text("well,,substrate [uM]\nA1,note,1\n", PlateFormat::Wells96);
    assert_mentions(&message, &["row 2, column 2 (B)", "'note'", "no header"]);
}

#[test]
fn grid_structure_problems_are_named() {
    // A column-number row with no name line above it.
    let message = error_text("title\n\n,1,2,3\nA,1,2,3\n", PlateFormat::Wells96);
    assert_mentions(&message, &["row 2, column 1 (A)", "must follow a line naming"]);
    // A plate row outside any block (block broken by a blank line).
    let message = error_text("substrate [uM]\n,1,2\nA,1,2\n\nB,1,2\n", PlateFormat::Wells96);
    assert_mentions(&message, &["row 5, column 1 (A)", "plate row 'B'"]);
    // A note after the first block that is not a comment.
    let message = error_text(
        "substrate [uM]\n,1,2\nA,1,2\n\ndilution 1:2\n",
        PlateFormat::Wells96,
    );
    assert_mentions(&message, &["row 5, column 1 (A)", "'dilution 1:2'", "'#'"]);
    // A value right of the numbered columns.
    let message = error_text("substrate [uM]\n,1,2\nA,1,2,3\n", PlateFormat::Wells96);
    assert_mentions(&message, &["row 3, column 4 (D)", "no column number"]);
    // A row letter beyond the plate's rows with a value.
    let message = error_text("substrate [uM]\n,1,2\nA,1,2\nJ,1,\n", PlateFormat::Wells96);
    assert_mentions(&message, &["row 4, column 2 (B)", "well J1", "rows A to H"]);
}

#[test]
fn check_against_data_errors_or_drops_with_a_warning() {
    let text = "well,role,substrate [uM]\nA1:A3,sample,5\nH12,empty,\nB1,blank,\n";
    let data: BTreeSet<WellId> = ["A1", "A2", "B1"].iter().map(|w| well(w)).collect();

    let mut layout = parse_csv(text, PlateFormat::Wells96).unwrap();
    let message = check_against_data(&mut layout, &data, false)
        .unwrap_err()
        .to_string();
    assert_mentions(
        &message,
        &["layout.csv", "1 well(s)", "A3", "row 2, column 1 (A)"],
    );
    assert!(!message.contains("H12"), "empty wells need no data: {message}");
    assert_eq!(layout.wells.len(), 5, "nothing is dropped on error");

    let warnings = check_against_data(&mut layout, &data, true).unwrap();
    assert_eq!(warnings.len(), 1);
    assert_mentions(&warnings[0], &["A3", "left out"]);
    assert!(!layout.wells.contains_key(&well("A3")));
    assert_eq!(layout.wells.len(), 4);
    // Nothing missing any more: no warning.
    assert!(check_against_data(&mut layout, &data, false).unwrap().is_empty());

    // Dropping every well leaves an empty layout, which is an error.
    let mut layout = parse_csv(text, PlateFormat::Wells96).unwrap();
    let error = check_against_data(&mut layout, &BTreeSet::new(), true).unwrap_err();
    assert!(matches!(error, LayoutError::EmptyLayout { .. }), "{error}");
}

/// Issue class: a line whose first cell starts with `#` is a comment only when it names no well.
#[test]
fn hash_lines_are_comments_only_when_they_name_no_well() {
    let text = "compound,well,role,substrate [uM]\n#7,A1,sample,10\n# a note\nx,A3,sample,30\n";
    let layout = parse_csv(text, PlateFormat::Wells96).unwrap();
    assert_eq!(layout.wells[&well("A1")].factors["compound"], "#7");
    assert!(layout.wells.contains_key(&well("A3")));
    // With the well column first, `#` in the well cell comments the line out.
    let text = "well,role,substrate [uM]\nA1,sample,10\n#A2,sample,20\n";
    let layout = parse_csv(text, PlateFormat::Wells96).unwrap();
    assert!(
        !layout.wells.contains_key(&well("A2")),
        "a line commented out in its well cell"
    );
}

/// Issue class: factors named like output columns are written as `factor:NAME` in both tables,
/// said with their cell; two factors that would share a header are refused naming both.
#[test]
fn factors_named_like_output_columns_are_renamed_once_or_refused() {
    let text = "well,substrate [uM],rate,Flags,variant\nA1,10,1,x,wt\n";
    let layout = parse_csv(text, PlateFormat::Wells96).unwrap();
    assert_eq!(layout.factor_header("rate"), "factor:rate");
    assert_eq!(layout.factor_header("Flags"), "factor:Flags");
    assert_eq!(layout.factor_header("variant"), "variant");
    assert_eq!(layout.notes.len(), 2, "{:?}", layout.notes);
    assert!(
        layout.notes[0].contains("layout.csv, row 1, column 3 (C)"),
        "{:?}",
        layout.notes
    );
    let message = error_text(
        "well,substrate [uM],flags,factor:flags\nA1,10,a,b\n",
        PlateFormat::Wells96,
    );
    assert_mentions(&message, &["column 3 (C)", "column 4 (D)", "'factor:flags'"]);
}

/// Data wells with readings that the layout does not name are said.
#[test]
fn data_wells_outside_the_layout_are_named() {
    let layout = parse_csv("well,substrate [uM]\nA1,10\n", PlateFormat::Wells96).unwrap();
    let data_wells: BTreeSet<WellId> = [well("A1"), well("B7")].into_iter().collect();
    let notes = wells_outside_layout(&layout, &data_wells);
    assert_eq!(notes.len(), 1);
    assert_mentions(&notes[0], &["layout.csv", "1 well(s)", "B7"]);
}

// ---------------------------------------------------------------------------------------
// Property tests: a random layout written in either form parses back to the same setups.
// ---------------------------------------------------------------------------------------

/// role, substrate, enzyme, inhibitor, variant
type Assignment = (Role, Option<f64>, Option<f64>, Option<f64>, String);

fn amount() -> impl Strategy<Value = Option<f64>> {
    prop_oneof![
        Just(None),
        Just(Some(0.0)),
        (0.0f64..1e6).prop_map(Some),
        (1e-9f64..1e-3).prop_map(Some)
    ]
}

fn assignment() -> impl Strategy<Value = Assignment> {
    let roles = prop_oneof![
        Just(Role::Sample),
        Just(Role::Blank),
        Just(Role::NoEnzyme),
        Just(Role::Empty)
    ];
    let variants = prop_oneof![Just(""), Just("WT"), Just("K12A"), Just("7.5"), Just("buffer B")];
    (roles, amount(), amount(), amount(), variants).prop_map(
        |(role, substrate, enzyme, inhibitor, variant)| {
            // Samples and no-enzyme controls need a substrate, or the layout is (rightly) refused.
            let substrate = match role {
                Role::Sample | Role::NoEnzyme => Some(substrate.unwrap_or(1.0)),
                _ => substrate,
            };
            (role, substrate, enzyme, inhibitor, variant.to_string())
        },
    )
}

fn random_layout() -> impl Strategy<Value = (PlateFormat, String, BTreeMap<WellId, Assignment>)> {
    let units = prop_oneof![
        Just("M"),
        Just("mM"),
        Just("uM"),
        Just("\u{b5}M"),
        Just("nM"),
        Just("pM")
    ];
    (
        prop_oneof![Just(PlateFormat::Wells96), Just(PlateFormat::Wells384)],
        units,
    )
        .prop_flat_map(|(plate, unit)| {
            let wells = (0..plate.n_rows(), 0..plate.n_columns()).prop_map(|(r, c)| WellId::new(r, c));
            // At least one sample so that the layout is never all-empty.
            let sample = (0..plate.n_rows(), 0..plate.n_columns()).prop_map(|(r, c)| WellId::new(r, c));
            (
                Just(plate),
                Just(unit.to_string()),
                prop::collection::btree_map(wells, assignment(), 0..40),
                sample,
            )
                .prop_map(|(plate, unit, mut map, sample)| {
                    map.insert(sample, (Role::Sample, Some(3.0), None, None, "WT".into()));
                    (plate, unit, map)
                })
        })
}

fn cell_text(value: Option<f64>) -> String {
    value.map(|v| v.to_string()).unwrap_or_default()
}

fn write_grid(plate: PlateFormat, unit: &str, map: &BTreeMap<WellId, Assignment>) -> String {
    let block = |name: &str, pick: &dyn Fn(&Assignment) -> String| {
        grid_block(name, plate, |w| map.get(&w).map(pick).unwrap_or_default())
    };
    format!(
        "Random layout\n\n{}\n{}\n{}\n{}\n{}",
        block("role", &|a| a.0.to_string()),
        block(&format!("substrate [{unit}]"), &|a| cell_text(a.1)),
        block("enzyme [nM]", &|a| cell_text(a.2)),
        block("inhibitor [uM]", &|a| cell_text(a.3)),
        block("variant", &|a| a.4.clone()),
    )
}

fn write_tidy(unit: &str, map: &BTreeMap<WellId, Assignment>) -> String {
    let mut text =
        format!("# random layout\nwell,role,substrate [{unit}],enzyme [nM],inhibitor [uM],variant\n");
    for (well, (role, substrate, enzyme, inhibitor, variant)) in map {
        text.push_str(&format!(
            "{well},{role},{},{},{},{variant}\n",
            cell_text(*substrate),
            cell_text(*enzyme),
            cell_text(*inhibitor)
        ));
    }
    text
}

fn parsed_assignments(layout: &Layout) -> BTreeMap<WellId, Assignment> {
    layout
        .wells
        .iter()
        .map(|(well, s)| {
            (
                *well,
                (
                    s.role,
                    s.substrate,
                    s.enzyme,
                    s.inhibitor,
                    s.factors["variant"].clone(),
                ),
            )
        })
        .collect()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    #[test]
    fn grid_text_parses_back_to_the_same_setups((plate, unit, map) in random_layout()) {
        let layout = parse_csv(&write_grid(plate, &unit, &map), plate).unwrap();
        prop_assert_eq!(layout.form, LayoutForm::Grid);
        prop_assert_eq!(layout.substrate_unit, Some(ConcentrationUnit::from_str(&unit).unwrap()));
        prop_assert_eq!(parsed_assignments(&layout), map);
    }

    #[test]
    fn tidy_text_parses_back_to_the_same_setups((plate, unit, map) in random_layout()) {
        let layout = parse_csv(&write_tidy(&unit, &map), plate).unwrap();
        prop_assert_eq!(layout.form, LayoutForm::Tidy);
        prop_assert_eq!(layout.substrate_unit, Some(ConcentrationUnit::from_str(&unit).unwrap()));
        prop_assert_eq!(parsed_assignments(&layout), map);
    }

    #[test]
    fn arbitrary_cells_never_panic_and_accepted_layouts_stay_on_the_plate(
        rows in prop::collection::vec(
            prop::collection::vec(
                prop_oneof![
                    Just(Cell::Empty), Just(Cell::Text("well")), Just(Cell::Text("role")),
                    Just(Cell::Text("substrate [uM]")), Just(Cell::Text("A")),
                    Just(Cell::Text("B1:C3")), Just(Cell::Text("sample")),
                    Just(Cell::Text("#")), (0u8..4).prop_map(|n| Cell::Number(f64::from(n))),
                    Just(Cell::Duration(30.0)), Just(Cell::Number(-1.0)),
                ],
                0..6,
            ),
            0..10,
        )
    ) {
        let source = Source { file: "random.csv".into(), sheet: None };
        let grid = CellGrid::from_rows(source, DecimalMark::Point, &rows);
        if let Ok(layout) = parse_layout(&grid, PlateFormat::Wells96) {
            prop_assert!(layout.wells.keys().all(|w| PlateFormat::Wells96.contains(*w)));
            prop_assert!(layout.wells.values().any(|s| s.role != Role::Empty));
        }
    }
}
