//! Times `platekin batch` against the same plates through separate `platekin run` commands:
//! `cargo run --release --example batch_timing -- FOLDER [PLATES] [JOBS] [--runs]`.
//! Writes the invented campaign (96 wells, 60 reads per plate) into FOLDER unless its manifest is
//! there, times one `platekin batch --report none --force --quiet --jobs JOBS`, and with `--runs`
//! also one `platekin run --report none` per plate, one after another, as a shell loop would.
//! Run it under `/usr/bin/time -v` for the batch's peak memory. Figures are printed, never
//! asserted.

use std::path::{Path, PathBuf};
use std::process::{Command, ExitCode};
use std::time::Instant;

use platekin::simulate::campaign::{campaign_plates, write_campaign};

/// The release binary beside this example (`target/release/examples/..` -> `target/release`).
fn platekin_binary() -> Option<PathBuf> {
    let example = std::env::current_exe().ok()?;
    let binary = example.parent()?.parent()?.join("platekin");
    binary.exists().then_some(binary)
}

fn run(binary: &Path, args: &[&str]) -> Result<std::process::ExitStatus, String> {
    Command::new(binary)
        .args(args)
        .stdout(std::process::Stdio::null())
        .status()
        .map_err(|error| format!("cannot start {}: {error}", binary.display()))
}

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let runs = args.iter().any(|a| a == "--runs");
    let positional: Vec<&String> = args.iter().filter(|a| !a.starts_with("--")).collect();
    let Some(folder) = positional.first().map(PathBuf::from) else {
        eprintln!("usage: batch_timing FOLDER [PLATES] [JOBS] [--runs]");
        return ExitCode::from(2);
    };
    let plates: usize = positional.get(1).and_then(|n| n.parse().ok()).unwrap_or(200);
    let jobs: usize = positional.get(2).and_then(|n| n.parse().ok()).unwrap_or(2);
    let Some(binary) = platekin_binary() else {
        eprintln!("build the binary first: cargo build --release");
        return ExitCode::from(2);
    };
    let manifest = folder.join("manifest.csv");
    if !manifest.exists() {
        let started = Instant::now();
        if let Err(error) = write_campaign(&folder, &campaign_plates(plates, 60)) {
            eprintln!("{error}");
            return ExitCode::from(2);
        }
        println!(
            "wrote {plates} plates in {:.1} s",
            started.elapsed().as_secs_f64()
        );
    }
    let out = folder.join("batch-out");
    let assay = folder.join("assay.toml");
    let (manifest_text, out_text, assay_text) = (
        manifest.display().to_string(),
        out.display().to_string(),
        assay.display().to_string(),
    );
    let jobs_text = jobs.to_string();
    let batch = |force: bool| {
        let mut args = vec![
            "batch",
            &manifest_text,
            "--assay",
            &assay_text,
            "--out",
            &out_text,
            "--report",
            "none",
            "--quiet",
            "--jobs",
            &jobs_text,
        ];
        if force {
            args.push("--force");
        }
        let started = Instant::now();
        let status = run(&binary, &args);
        (started.elapsed().as_secs_f64(), status)
    };
    let (batch_seconds, status) = batch(true);
    println!("batch: {plates} plates, {jobs} jobs: {batch_seconds:.2} s ({status:?})");
    let (again_seconds, status) = batch(false);
    println!("batch again, every plate unchanged: {again_seconds:.2} s ({status:?})");
    if runs {
        let layout = folder.join("layout.csv").display().to_string();
        let started = Instant::now();
        for plate in campaign_plates(plates, 60) {
            let data = folder.join("exports").join(format!("{}.csv", plate.plate));
            let plate_out = folder.join("run-out").join(&plate.plate);
            let status = run(
                &binary,
                &[
                    "run",
                    &data.display().to_string(),
                    "--layout",
                    &layout,
                    "--assay",
                    &assay_text,
                    "--out",
                    &plate_out.display().to_string(),
                    "--report",
                    "none",
                ],
            );
            if !matches!(status, Ok(s) if s.success()) {
                eprintln!("run on {} ended with {status:?}", plate.plate);
            }
        }
        let run_seconds = started.elapsed().as_secs_f64();
        println!(
            "{plates} separate runs, one after another: {run_seconds:.2} s; batch is {:.2}x faster",
            run_seconds / batch_seconds
        );
    }
    ExitCode::SUCCESS
}
