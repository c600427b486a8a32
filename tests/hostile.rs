//! Hostile inputs through the real binary: the corpus of `fixtures/hostile/` (one defect a file,
//! listed with what must happen in `fixtures/hostile/cases.tsv`), one test per class of issue 10;
//! exports with one defect injected at one row (mutations of three valid exports, each shape), by
//! the binary and as a property test of the importer; and the output folder under failed writes,
//! leftovers, interrupts and pipes (unix where needed).
//!
//! The promise checked everywhere: a defect is refused with exit code 2, the culprit named and
//! nothing written; or the input is read with nothing lost and the defect said.
//!
//! `PLATEKIN_HOSTILE_BINARY=/path/to/platekin cargo test --release --test hostile -- --ignored
//! --nocapture tally` runs the corpus and the mutations through another build and counts what it
//! mishandles (the numbers of the closing note).

mod common;
use common::{project, text};

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use proptest::prelude::*;

/// The binary under test: this build's, or the one `PLATEKIN_HOSTILE_BINARY` names (tally only).
fn binary() -> PathBuf {
    std::env::var_os("PLATEKIN_HOSTILE_BINARY")
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(env!("CARGO_BIN_EXE_platekin")))
}

/// Runs the binary with `args` in `cwd`.
fn run(args: &[String], cwd: &Path) -> Output {
    Command::new(binary())
        .args(args)
        .current_dir(cwd)
        .output()
        .expect("the platekin binary runs")
}

/// One line of `cases.tsv`.
#[derive(Debug, Clone)]
struct Case {
    file: String,
    class: u32,
    expect: String,
    command: String,
    culprit: String,
    reads: Option<usize>,
    what: String,
}

/// The corpus's cases.
fn cases() -> Vec<Case> {
    let text = std::fs::read_to_string(project("fixtures/hostile/cases.tsv")).unwrap();
    text.lines()
        .filter(|line| !line.starts_with('#') && !line.starts_with("file\t") && !line.trim().is_empty())
        .map(|line| {
            let fields: Vec<&str> = line.split('\t').collect();
            assert_eq!(fields.len(), 7, "cases.tsv line: {line}");
            Case {
                file: fields[0].to_string(),
                class: fields[1].parse().unwrap(),
                expect: fields[2].to_string(),
                command: fields[3].to_string(),
                culprit: fields[4].to_string(),
                reads: fields[5].parse().ok(),
                what: fields[6].to_string(),
            }
        })
        .collect()
}

/// Every output file's text, for culprits an accepted run must name.
fn outputs_text(out: &Path) -> String {
    let mut all = String::new();
    if let Ok(entries) = std::fs::read_dir(out) {
        let mut paths: Vec<PathBuf> = entries.flatten().map(|entry| entry.path()).collect();
        paths.sort();
        for path in paths {
            if path
                .extension()
                .is_some_and(|e| e == "csv" || e == "json" || e == "txt")
            {
                all.push_str(&std::fs::read_to_string(&path).unwrap_or_default());
            }
        }
    }
    all
}

/// The number of reads `inspect` reports.
fn reads_reported(stdout: &str) -> Option<usize> {
    stdout
        .lines()
        .find_map(|line| line.strip_prefix("reads "))
        .and_then(|rest| rest.trim().parse().ok())
}

/// Whether the case's outcome keeps the promise; `Err` says how it does not.
fn judge(case: &Case) -> Result<(), String> {
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    let args: Vec<String> = case
        .command
        .split_whitespace()
        .map(|word| word.replace("{out}", &out.display().to_string()))
        .collect();
    let output = run(&args, &project("fixtures/hostile"));
    let (stdout, stderr) = (text(&output.stdout), text(&output.stderr));
    if stderr.contains("panicked") || output.status.code().is_none() {
        return Err(format!("crashed: {stderr}"));
    }
    let refused = || -> Result<(), String> {
        if output.status.code() != Some(2) {
            return Err(format!(
                "exit {:?}, not refused; stdout: {stdout}",
                output.status.code()
            ));
        }
        if !stderr.contains(&case.culprit) {
            return Err(format!("the message does not name {:?}: {stderr}", case.culprit));
        }
        if out.exists() {
            return Err("refused, but the output folder was written".to_string());
        }
        Ok(())
    };
    let accepted = || -> Result<(), String> {
        if !output.status.success() {
            return Err(format!("exit {:?}: {stderr}", output.status.code()));
        }
        let all = format!("{stdout}\n{stderr}\n{}", outputs_text(&out));
        match case.culprit.strip_prefix('!') {
            Some(absent) if all.contains(absent) => return Err(format!("{absent:?} appears: {all}")),
            Some(_) => {}
            None if !all.contains(&case.culprit) => {
                return Err(format!("{:?} is not named: {stdout}{stderr}", case.culprit))
            }
            None => {}
        }
        match case.reads {
            Some(reads) if reads_reported(&stdout) != Some(reads) => Err(format!(
                "reads {:?}, not all {reads} kept: {stdout}",
                reads_reported(&stdout)
            )),
            _ => Ok(()),
        }
    };
    match case.expect.as_str() {
        "refuse" => refused(),
        "accept" => accepted(),
        "either" => {
            refused().or_else(|refusal| accepted().map_err(|acceptance| format!("{refusal}; {acceptance}")))
        }
        other => Err(format!("unknown expectation {other}")),
    }
}

/// Runs every case of one class of issue 10 and fails naming each broken promise.
fn check_class(class: u32) {
    let cases: Vec<Case> = cases().into_iter().filter(|case| case.class == class).collect();
    assert!(!cases.is_empty(), "no case of class {class}");
    let failures: Vec<String> = cases
        .iter()
        .filter_map(|case| {
            judge(case)
                .err()
                .map(|why| format!("{} ({}): {why}", case.file, case.what))
        })
        .collect();
    assert!(failures.is_empty(), "{}", failures.join("\n\n"));
}

#[test]
fn class_01_blanks_and_background_are_never_corrected_with_zero_and_say_so() {
    check_class(1);
}

#[test]
fn class_02_a_bad_row_between_reads_is_refused_and_nothing_after_it_is_lost() {
    check_class(2);
}

#[test]
fn class_03_long_tables_read_every_row_or_name_the_bad_one() {
    check_class(3);
}

#[test]
fn class_04_layout_lines_wells_outside_the_layout_and_stray_well_columns_are_named() {
    check_class(4);
}

#[test]
fn class_05_ambiguous_decimal_text_is_named_never_guessed() {
    check_class(5);
}

#[test]
fn class_06_factor_names_never_take_an_output_column_s_place() {
    check_class(6);
}

#[test]
fn class_09_every_size_a_user_gives_has_a_ceiling() {
    check_class(9);
}

#[test]
fn class_10_settings_that_cannot_work_on_the_input_are_refused_naming_both() {
    check_class(10);
}

#[test]
fn class_11_loose_reading_is_refused_or_said() {
    check_class(11);
}

#[test]
fn class_12_messages_name_the_file_row_and_only_flags_the_command_has() {
    check_class(12);
}

// ---------------------------------------------------------------------------------------------
// Mutations: one defect injected at one row of a valid export
// ---------------------------------------------------------------------------------------------

/// A valid export with one defect injected.
#[derive(Debug, Clone)]
struct Mutation {
    /// What was done, for messages.
    name: String,
    /// The file name (its extension tells nothing: all are text).
    file: String,
    /// The export's text.
    text: String,
    /// The one-based row a message must name.
    row: usize,
    /// The reads of the valid export.
    reads: usize,
}

/// The three valid exports the mutations start from: wide (the small plate), long and grid.
fn bases() -> Vec<(&'static str, String)> {
    ["../small-plate.csv", "c03-long-valid.csv", "c11-grid-valid.csv"]
        .into_iter()
        .map(|name| {
            let text = std::fs::read_to_string(project("fixtures/hostile").join(name)).unwrap();
            (name, text)
        })
        .collect()
}

/// Time-cell defects: what instruments and hands write where a time belongs.
const BAD_TIMES: [&str; 12] = [
    "",
    "NaN",
    "n/a",
    "-",
    "#120",
    "OVER",
    "120?",
    "1 20",
    "2024-05-01",
    "\"120,5\"",
    "12O",
    "inf",
];

/// Replaces the first cell of a line.
fn with_first_cell(line: &str, first: &str) -> String {
    match line.split_once(',') {
        Some((_, rest)) => format!("{first},{rest}"),
        None => first.to_string(),
    }
}

/// Every mutation of the three bases (deterministic: the same list each time).
fn mutations() -> Vec<Mutation> {
    let mut all = Vec::new();
    for (base, text) in bases() {
        let lines: Vec<&str> = text.lines().collect();
        let stem = base.trim_start_matches("../").trim_end_matches(".csv");
        // Adds the base with `change` made to its lines; `row` is the row a message must name.
        let mut add = |name: String, row: usize, change: &dyn Fn(&mut Vec<String>)| {
            let mut changed: Vec<String> = lines.iter().map(|line| line.to_string()).collect();
            change(&mut changed);
            all.push(Mutation {
                file: format!("{stem}-{}.csv", all.len()),
                name: format!("{base}: {name}"),
                text: changed.join("\n") + "\n",
                row,
                reads: 10,
            });
        };
        if base.ends_with("small-plate.csv") {
            // Rows 4-13 are the reads (header on row 3).
            for index in 3..13 {
                let row = index + 1;
                for bad in BAD_TIMES {
                    add(format!("time {bad:?} at row {row}"), row, &|c| {
                        c[index] = with_first_cell(&c[index], bad)
                    });
                }
                add(format!("blank line at row {row}"), row, &|c| {
                    c.insert(index, String::new())
                });
                add(format!("delimiters only at row {row}"), row, &|c| {
                    c.insert(index, ",,,,,".into())
                });
                add(format!("header repeated at row {row}"), row, &|c| {
                    let header = c[2].clone();
                    c.insert(index, header)
                });
                add(format!("unclosed quote at row {row}"), row, &|c| {
                    c[index] = format!("\"{}", c[index])
                });
                add(format!("a reading OVER at row {row}"), row, &|c| {
                    let mut cells: Vec<String> = c[index].split(',').map(str::to_string).collect();
                    cells[1] = "OVER".into();
                    c[index] = cells.join(",");
                });
                add(format!("a cell beyond the header at row {row}"), row, &|c| {
                    c[index] = format!("{},0.5", c[index])
                });
                add(format!("row {row} cut short"), row, &|c| {
                    c[index] = c[index].split(',').take(3).collect::<Vec<_>>().join(",")
                });
                add(format!("delimiter switches to ; from row {row}"), row, &|c| {
                    for later in c.iter_mut().skip(index) {
                        *later = later.replace(',', ";");
                    }
                });
            }
        } else if base.starts_with("c03") {
            // Rows 2-51 are well rows; every fifth gets each defect.
            for index in (3..51).step_by(5) {
                let row = index + 1;
                for (what, first) in [
                    ("well 'A 2'", "A 2"),
                    ("well Z99", "Z99"),
                    ("well A0", "A0"),
                    ("no well", ""),
                ] {
                    add(format!("{what} at row {row}"), row, &|c| {
                        c[index] = with_first_cell(&c[index], first)
                    });
                }
                for bad in ["", "NaN", "soon", "1 20"] {
                    add(format!("time {bad:?} at row {row}"), row, &|c| {
                        let cells: Vec<String> = c[index].split(',').map(str::to_string).collect();
                        c[index] = format!("{},{bad},{}", cells[0], cells[2]);
                    });
                }
                add(format!("blank line at row {row}"), row, &|c| {
                    c.insert(index, String::new())
                });
            }
        } else {
            // Ten blocks of five lines: time line, column numbers, rows A and B, a blank.
            for block in 0..10 {
                let time_line = block * 5;
                let (numbers, row_a, row_b) = (time_line + 1, time_line + 2, time_line + 3);
                add(
                    format!("broken time line at row {}", time_line + 1),
                    time_line + 1,
                    &|c| c[time_line] = "Time 0:0x:00".into(),
                );
                add(
                    format!("a cell beyond the column numbers at row {}", row_a + 1),
                    row_a + 1,
                    &|c| c[row_a] = format!("{},9.9", c[row_a]),
                );
                add(
                    format!("rows B and A swapped at row {}", row_a + 2),
                    row_a + 2,
                    &|c| c.swap(row_a, row_b),
                );
                add(
                    format!("column numbers 1,2,50 at row {}", numbers + 1),
                    numbers + 1,
                    &|c| c[numbers] = ",1,2,50".into(),
                );
                add(
                    format!("blank line inside a block at row {}", row_b + 1),
                    row_b + 2,
                    &|c| c.insert(row_b, String::new()),
                );
                add(format!("plate row Q at row {}", row_b + 1), row_b + 1, &|c| {
                    c[row_b] = with_first_cell(&c[row_b], "Q")
                });
            }
        }
    }
    all
}

/// Whether a text names one-based `row` (`row 8`, `row(s) 8`, `rows 8-9`, `row 8,`).
fn names_row(text: &str, row: usize) -> bool {
    ["row ", "row(s) ", "rows "].iter().any(|prefix| {
        let needle = format!("{prefix}{row}");
        text.match_indices(&needle)
            .any(|(at, _)| !text[at + needle.len()..].starts_with(|c: char| c.is_ascii_digit()))
    })
}

/// Whether `inspect`'s outcome on a mutation keeps the promise.
fn judge_mutation(mutation: &Mutation, folder: &Path) -> Result<(), String> {
    let path = folder.join(&mutation.file);
    std::fs::write(&path, &mutation.text).unwrap();
    let output = run(&["inspect".to_string(), path.display().to_string()], folder);
    let (stdout, stderr) = (text(&output.stdout), text(&output.stderr));
    if stderr.contains("panicked") || output.status.code().is_none() {
        return Err(format!("crashed: {stderr}"));
    }
    if !output.status.success() {
        return if output.status.code() == Some(2) && names_row(&stderr, mutation.row) {
            Ok(())
        } else {
            Err(format!("refused without naming row {}: {stderr}", mutation.row))
        };
    }
    match reads_reported(&stdout) {
        Some(reads)
            if reads == mutation.reads
                || (reads + 1 == mutation.reads && names_row(&stdout, mutation.row)) =>
        {
            if names_row(&stdout, mutation.row) || stdout.contains("unreadable cells  1") {
                Ok(())
            } else {
                Err(format!("read, but row {} is not named: {stdout}", mutation.row))
            }
        }
        reads => Err(format!("{reads:?} of {} reads kept: {stdout}", mutation.reads)),
    }
}

#[test]
fn an_export_with_one_defect_is_refused_naming_its_row_or_read_whole() {
    let folder = tempfile::tempdir().unwrap();
    let mutations = mutations();
    assert!(mutations.len() > 300, "{} mutations", mutations.len());
    let failures: Vec<String> = mutations
        .iter()
        .filter_map(|mutation| {
            judge_mutation(mutation, folder.path())
                .err()
                .map(|why| format!("{}: {why}", mutation.name))
        })
        .collect();
    assert!(
        failures.is_empty(),
        "{} of {}:\n{}",
        failures.len(),
        mutations.len(),
        failures.join("\n")
    );
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    // The property of the importer itself: a valid export with one defect injected at any row is
    // refused with an error naming that row, or read with every read kept (the defect then named
    // in a warning or an unreadable cell's position).
    #[test]
    fn one_injected_defect_is_refused_naming_its_row_or_read_with_every_other_read_kept(
        index in 0usize..2000,
    ) {
        let mutations = mutations();
        let mutation = &mutations[index % mutations.len()];
        let grid = platekin::files::sheet::read_text_cells(mutation.text.as_bytes(), "mutated.csv");
        let outcome = grid
            .map_err(|error| error.to_string())
            .and_then(|grid| {
                let data = platekin::import::import_cells(&grid, &platekin::import::ImportOptions::default())
                    .map_err(|error| error.to_string())?;
                let unaccounted = platekin::import::rows_unaccounted(&data, &grid);
                Ok((data, unaccounted))
            });
        match outcome {
            Err(message) => prop_assert!(names_row(&message, mutation.row), "{}: {message}", mutation.name),
            Ok((data, unaccounted)) => {
                prop_assert!(unaccounted.is_empty(), "{}: rows {unaccounted:?} neither read nor named", mutation.name);
                let said = data.warnings.iter().any(|w| names_row(w, mutation.row))
                    || data.wells.iter().any(|trace| trace.unreadable.iter().any(|cell| cell.position.row == mutation.row));
                prop_assert!(
                    data.times_s.len() == mutation.reads || (data.times_s.len() + 1 == mutation.reads && said),
                    "{}: {} of {} reads", mutation.name, data.times_s.len(), mutation.reads
                );
                prop_assert!(said, "{}: row {} not named in {:?}", mutation.name, mutation.row, data.warnings);
            }
        }
    }
}

/// Counts what the binary (`PLATEKIN_HOSTILE_BINARY`, or this build's) mishandles: every corpus
/// case and every mutation, with the broken promise of each.
#[test]
#[ignore = "a measurement for the closing note, run by hand"]
fn tally() {
    let cases = cases();
    let mut mishandled = 0;
    for case in &cases {
        if let Err(why) = judge(case) {
            mishandled += 1;
            println!(
                "MISHANDLED class {} {}: {} -- {}",
                case.class,
                case.file,
                case.what,
                why.lines().next().unwrap_or("")
            );
        }
    }
    let folder = tempfile::tempdir().unwrap();
    let mutations = mutations();
    let mut mutated_mishandled = 0;
    for mutation in &mutations {
        if let Err(why) = judge_mutation(mutation, folder.path()) {
            mutated_mishandled += 1;
            println!(
                "MISHANDLED mutation {}: {}",
                mutation.name,
                why.lines().next().unwrap_or("")
            );
        }
    }
    println!(
        "corpus: {} cases, {mishandled} mishandled; mutations: {} exports, {mutated_mishandled} mishandled",
        cases.len(),
        mutations.len()
    );
}

// ---------------------------------------------------------------------------------------------
// Class 7: the output folder as one unit; class 8: inputs read once (pipes)
// ---------------------------------------------------------------------------------------------

/// Runs the small plate into `out` with extra flags; returns the output.
fn run_small_plate(out: &Path, extra: &[&str]) -> Output {
    let mut args: Vec<String> = [
        "run",
        "small-plate.csv",
        "--assay",
        "assay-small.toml",
        "--out",
        &out.display().to_string(),
    ]
    .iter()
    .map(|word| word.to_string())
    .collect();
    args.extend(extra.iter().map(|word| word.to_string()));
    run(&args, &project("fixtures"))
}

/// Every file of a folder (one level of subfolders), with its bytes.
fn folder_files(folder: &Path) -> std::collections::BTreeMap<String, Vec<u8>> {
    let mut files = std::collections::BTreeMap::new();
    for entry in std::fs::read_dir(folder).unwrap().flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        if entry.path().is_dir() {
            for inner in std::fs::read_dir(entry.path()).unwrap().flatten() {
                let inner_name = format!("{name}/{}", inner.file_name().to_string_lossy());
                files.insert(inner_name, std::fs::read(inner.path()).unwrap_or_default());
            }
        } else {
            files.insert(name, std::fs::read(entry.path()).unwrap());
        }
    }
    files
}

/// Checks that a folder says one thing: every output `run.json` lists is there with its
/// checksum, and nothing else is there but the marker (no staging leftovers, no stale report).
fn assert_folder_is_one_run(folder: &Path) {
    let files = folder_files(folder);
    let record: serde_json::Value = serde_json::from_slice(&files["run.json"]).unwrap();
    let mut listed: Vec<String> = vec!["run.json".into(), ".platekin-output".into()];
    for output in record["outputs"].as_array().unwrap() {
        let name = output["name"].as_str().unwrap();
        let bytes = files
            .get(name)
            .unwrap_or_else(|| panic!("{name} is listed in run.json but missing"));
        assert_eq!(
            platekin::files::input::sha256_hex(bytes),
            output["sha256"].as_str().unwrap(),
            "{name}: run.json records another checksum"
        );
        listed.push(name.to_string());
    }
    let present: Vec<&String> = files.keys().collect();
    for name in &present {
        assert!(
            listed.contains(name),
            "{name} is in the folder but not in run.json: {present:?}"
        );
    }
}

#[test]
fn class_07_outputs_an_earlier_run_wrote_and_this_one_does_not_are_removed() {
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    assert!(run_small_plate(&out, &["--report", "full"]).status.success());
    assert!(out.join("report.html").exists() && out.join("plots").exists());
    assert_folder_is_one_run(&out);
    assert!(run_small_plate(&out, &["--report", "html"]).status.success());
    assert!(!out.join("plots").exists(), "plots of the earlier run linger");
    assert_folder_is_one_run(&out);
    assert!(run_small_plate(&out, &["--report", "none"]).status.success());
    assert!(!out.join("report.html").exists(), "the earlier report lingers");
    assert_folder_is_one_run(&out);
}

#[test]
fn class_07_a_failed_write_part_way_leaves_the_earlier_outputs_whole_and_says_nothing_was_written() {
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    assert!(run_small_plate(&out, &[]).status.success());
    // progress.json cannot be replaced: a folder of that name stands in its place, so the swap
    // fails after the files before it were moved in.
    std::fs::remove_file(out.join("progress.json")).unwrap();
    std::fs::create_dir_all(out.join("progress.json/in-the-way")).unwrap();
    let before = folder_files(&out);
    let output = run_small_plate(&out, &["--max-conversion", "0.2"]);
    let stderr = text(&output.stderr);
    assert_eq!(output.status.code(), Some(2), "{stderr}");
    assert!(
        stderr.contains("nothing was written") && stderr.contains("progress.json"),
        "{stderr}"
    );
    assert_eq!(folder_files(&out), before, "the earlier outputs changed");
}

#[test]
fn class_07_leftovers_of_an_interrupted_run_are_removed_by_the_next() {
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    // What an interrupted first run leaves: only its staging folder, with a partial file.
    std::fs::create_dir_all(out.join(".platekin-staging-424242")).unwrap();
    std::fs::write(
        out.join(".platekin-staging-424242/wells.csv"),
        vec![b'x'; 100_000],
    )
    .unwrap();
    let output = run_small_plate(&out, &[]);
    assert!(output.status.success(), "{}", text(&output.stderr));
    assert_folder_is_one_run(&out);
}

#[test]
fn class_07_platekin_fit_into_a_run_folder_is_refused_and_the_run_record_stays_true() {
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    assert!(run_small_plate(&out, &[]).status.success());
    let before = folder_files(&out);
    let output = run(
        &[
            "fit".to_string(),
            out.join("wells.csv").display().to_string(),
            "--out".to_string(),
            out.display().to_string(),
        ],
        scratch.path(),
    );
    let stderr = text(&output.stderr);
    assert_eq!(output.status.code(), Some(2), "{stderr}");
    assert!(
        stderr.contains("run.json") && stderr.contains("choose another --out"),
        "{stderr}"
    );
    assert_eq!(folder_files(&out), before);
    assert_folder_is_one_run(&out);
}

/// Issue class 6 through `platekin fit`: a factor named `rate` in the layout is written as
/// `factor:rate`, and fitting the run's own tables reads the real rate, keeping the factor a factor.
#[test]
fn class_06_platekin_fit_reads_the_real_rate_beside_a_factor_named_rate() {
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    let output = run(
        &[
            "run".into(),
            "../small-plate.csv".into(),
            "--layout".into(),
            "c06-layout-factor-rate.csv".into(),
            "--extinction".into(),
            "10000".into(),
            "--pathlength".into(),
            "0.5".into(),
            "--out".into(),
            out.display().to_string(),
        ],
        &project("fixtures/hostile"),
    );
    assert!(output.status.success(), "{}", text(&output.stderr));
    for table in ["wells.csv", "conditions.csv"] {
        let fitted = scratch.path().join(format!("fit-{table}"));
        let output = run(
            &[
                "fit".into(),
                out.join(table).display().to_string(),
                "--out".into(),
                fitted.display().to_string(),
            ],
            scratch.path(),
        );
        assert!(output.status.success(), "{table}: {}", text(&output.stderr));
        let fit: serde_json::Value =
            serde_json::from_slice(&std::fs::read(fitted.join("fit.json")).unwrap()).unwrap();
        let group = &fit["groups"][0];
        assert_eq!(
            group["n"], 3,
            "{table}: the three samples' rates are fitted: {group}"
        );
        assert!(
            group["group"].to_string().contains("rate"),
            "{table}: the factor stays a factor: {}",
            group["group"]
        );
    }
}

#[cfg(unix)]
mod unix {
    use super::*;
    use std::io::Write;
    use std::time::Duration;

    /// The demo plate's files, copied where a run can be interrupted in every phase.
    fn demo_inputs(folder: &Path) -> (PathBuf, PathBuf) {
        let data = folder.join("plate.csv");
        let layout = folder.join("layout.csv");
        std::fs::copy(project("demo-plates/amber-fen-wide.csv"), &data).unwrap();
        std::fs::copy(project("demo-plates/amber-fen-layout.csv"), &layout).unwrap();
        (data, layout)
    }

    #[test]
    fn class_07_an_interrupt_at_any_moment_leaves_one_run_in_the_folder() {
        let scratch = tempfile::tempdir().unwrap();
        let (data, layout) = demo_inputs(scratch.path());
        let out = scratch.path().join("out");
        // Interrupt runs after ever longer delays: before, while and after the outputs are written.
        for (attempt, delay_ms) in [5u64, 40, 120, 300, 600, 900, 1300, 2000].into_iter().enumerate() {
            let mut child = Command::new(binary())
                .args([
                    "run",
                    &data.display().to_string(),
                    "--layout",
                    &layout.display().to_string(),
                ])
                .args([
                    "--extinction",
                    "16800",
                    "--pathlength",
                    "0.55",
                    "--report",
                    "full",
                ])
                .args(["--max-conversion", &format!("0.1{attempt}")])
                .args(["--out", &out.display().to_string()])
                .stdout(std::process::Stdio::null())
                .stderr(std::process::Stdio::null())
                .spawn()
                .unwrap();
            std::thread::sleep(Duration::from_millis(delay_ms));
            // The `kill` command sends SIGINT, as a terminal's Ctrl-C would.
            let _ = Command::new("kill")
                .args(["-INT", &child.id().to_string()])
                .status();
            let _ = child.wait();
            if out.join("run.json").exists() {
                assert_folder_is_one_run_or_leftovers(&out);
            }
        }
        // The next run removes whatever an interrupt left and writes one whole run.
        let output = run(
            &[
                "run".into(),
                data.display().to_string(),
                "--layout".into(),
                layout.display().to_string(),
                "--out".into(),
                out.display().to_string(),
            ],
            scratch.path(),
        );
        assert!(output.status.success(), "{}", text(&output.stderr));
        assert_folder_is_one_run(&out);
    }

    /// Like [`assert_folder_is_one_run`], with an interrupted run's staging folder allowed.
    fn assert_folder_is_one_run_or_leftovers(folder: &Path) {
        let leftovers: Vec<PathBuf> = std::fs::read_dir(folder)
            .unwrap()
            .flatten()
            .map(|entry| entry.path())
            .filter(|path| {
                path.file_name()
                    .is_some_and(|n| n.to_string_lossy().starts_with(".platekin-staging-"))
            })
            .collect();
        let copy = tempfile::tempdir().unwrap();
        for entry in std::fs::read_dir(folder).unwrap().flatten() {
            if leftovers.contains(&entry.path()) {
                continue;
            }
            let target = copy.path().join(entry.file_name());
            if entry.path().is_dir() {
                std::fs::create_dir_all(&target).unwrap();
                for inner in std::fs::read_dir(entry.path()).unwrap().flatten() {
                    std::fs::copy(inner.path(), target.join(inner.file_name())).unwrap();
                }
            } else {
                std::fs::copy(entry.path(), &target).unwrap();
            }
        }
        assert_folder_is_one_run(copy.path());
    }

    /// The size and SHA-256 `run.json` records for the data.
    fn recorded_data(out: &Path) -> (u64, String) {
        let record: serde_json::Value =
            serde_json::from_slice(&std::fs::read(out.join("run.json")).unwrap()).unwrap();
        let data = record["inputs"]
            .as_array()
            .unwrap()
            .iter()
            .find(|input| input["role"] == "data")
            .unwrap()
            .clone();
        (
            data["bytes"].as_u64().unwrap(),
            data["sha256"].as_str().unwrap().to_string(),
        )
    }

    #[test]
    fn class_08_a_named_pipe_is_read_once_and_recorded_truly() {
        let scratch = tempfile::tempdir().unwrap();
        let pipe = scratch.path().join("plate-pipe");
        assert!(Command::new("mkfifo").arg(&pipe).status().unwrap().success());
        let bytes = std::fs::read(project("fixtures/small-plate.csv")).unwrap();
        let writer = {
            let (pipe, bytes) = (pipe.clone(), bytes.clone());
            std::thread::spawn(move || {
                // One writer, once: a second read of the pipe would find nothing (or hang).
                let mut sink = std::fs::OpenOptions::new().write(true).open(pipe).unwrap();
                sink.write_all(&bytes).unwrap();
            })
        };
        let out = scratch.path().join("out");
        let mut child = Command::new(binary())
            .args(["run", &pipe.display().to_string(), "--assay"])
            .arg(project("fixtures/assay-small.toml"))
            .args(["--out", &out.display().to_string()])
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::piped())
            .spawn()
            .unwrap();
        // A run that hangs on the pipe is a failure, not a stuck test.
        let started = std::time::Instant::now();
        while child.try_wait().unwrap().is_none() {
            assert!(
                started.elapsed() < Duration::from_secs(60),
                "the run hangs on the pipe"
            );
            std::thread::sleep(Duration::from_millis(20));
        }
        writer.join().unwrap();
        assert!(child.wait().unwrap().success());
        assert_eq!(
            recorded_data(&out),
            (bytes.len() as u64, platekin::files::input::sha256_hex(&bytes))
        );
        assert_folder_is_one_run(&out);
    }

    #[test]
    fn class_08_process_substitution_works_for_text_and_spreadsheets() {
        let scratch = tempfile::tempdir().unwrap();
        for (data, extra) in [
            ("fixtures/small-plate.csv", "--assay fixtures/assay-small.toml"),
            (
                "demo-plates/amber-fen.xlsx",
                "--assay demo-plates/amber-fen-assay.toml",
            ),
        ] {
            let out = scratch.path().join(format!("out-{}", data.replace('/', "-")));
            let script = format!(
                "'{}' run <(cat '{data}') {extra} --out '{}'",
                binary().display(),
                out.display()
            );
            let output = Command::new("bash")
                .args(["-c", &script])
                .current_dir(project(""))
                .output()
                .unwrap();
            assert!(output.status.success(), "{data}: {}", text(&output.stderr));
            let bytes = std::fs::read(project(data)).unwrap();
            assert_eq!(
                recorded_data(&out),
                (bytes.len() as u64, platekin::files::input::sha256_hex(&bytes)),
                "{data}"
            );
        }
    }
}
