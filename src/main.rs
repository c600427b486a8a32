//! The `platekin` binary: parse the command line, hand resolved settings to the library's
//! commands, print what they return, and turn errors into a message and exit code 2.

mod cli;

use std::io::Write;
use std::process::ExitCode;

use anyhow::Context;
use clap::Parser;

use cli::{Cli, Command};
use platekin::config::{resolve_fit, resolve_import, resolve_report, resolve_run_from, SettingLayer};

fn main() -> ExitCode {
    run(Cli::parse())
}

/// Runs one command; the only place that prints.
fn run(cli: Cli) -> ExitCode {
    let outcome = match cli.command {
        Command::Batch(args) => batch(*args),
        command => execute(command).map(|text| (text, ExitCode::SUCCESS)),
    };
    match outcome {
        Ok((text, code)) => print_quietly(&text, code),
        Err(error) => {
            eprintln!("platekin: error: {error:#}");
            ExitCode::from(2)
        }
    }
}

/// Prints to stdout and ends with `code`; a closed pipe (`platekin ... | head`) ends quietly.
fn print_quietly(text: &str, code: ExitCode) -> ExitCode {
    let mut stdout = std::io::stdout().lock();
    match stdout.write_all(text.as_bytes()).and_then(|()| stdout.flush()) {
        Ok(()) => code,
        Err(error) if error.kind() == std::io::ErrorKind::BrokenPipe => code,
        Err(error) => {
            eprintln!("platekin: error: cannot write to stdout: {error}");
            ExitCode::from(2)
        }
    }
}

fn execute(command: Command) -> anyhow::Result<String> {
    match command {
        Command::Run(args) => {
            let assay = match &args.assay {
                Some(path) => Some((path.as_path(), SettingLayer::from_assay_file(path)?)),
                None => None,
            };
            let settings = resolve_run_from(args.data.clone(), args.layer(), assay)?;
            let mut progress = progress_reporter();
            let outcome = platekin::commands::run::run_plate(&settings, &args.out, args.force, &mut progress)
                .with_context(|| {
                    format!(
                        "run on {} not completed; nothing was written",
                        args.data.display()
                    )
                })?;
            Ok(outcome.summary)
        }
        Command::Inspect(args) => {
            let import = resolve_import(&args.read.layer())?;
            Ok(platekin::commands::inspect::inspect(&args.data, &import)?)
        }
        Command::Demo(args) => {
            let report = resolve_report(&SettingLayer {
                report: args.report.clone(),
                ..SettingLayer::default()
            })?;
            Ok(platekin::commands::demo::run_demo(&args.out, report)?.summary)
        }
        Command::Fit(args) => {
            let fit_settings = resolve_fit(&args.models.layer())?;
            let mut progress = progress_reporter();
            let outcome = platekin::commands::fit::fit_table_file(
                &args.table,
                args.sheet.as_deref(),
                &fit_settings,
                &args.out,
                args.force,
                &mut progress,
            )
            .with_context(|| {
                format!(
                    "fit of {} not completed; nothing was written",
                    args.table.display()
                )
            })?;
            Ok(outcome.summary)
        }
        Command::Batch(args) => Ok(batch(*args)?.0),
    }
}

/// `platekin batch`: exit 0 when every plate ran, 3 when some failed (the others complete), 2
/// when the manifest or a flag cannot be used (nothing is written then).
fn batch(args: cli::BatchArgs) -> anyhow::Result<(String, ExitCode)> {
    use platekin::commands::batch::{run_batch, BatchRequest, MAX_JOBS};
    let flags = args.run.layer();
    let settings = match &args.run.assay {
        Some(path) => flags.over(SettingLayer::from_assay_file(path)?),
        None => flags,
    };
    let jobs = args.jobs.unwrap_or_else(|| {
        std::thread::available_parallelism()
            .map_or(1, |n| n.get())
            .min(MAX_JOBS)
    });
    let request = BatchRequest {
        source: args.run.data.clone(),
        out: args.run.out.clone(),
        settings,
        force: args.run.force,
        jobs,
        pool_by: args.pool_by.iter().map(|name| name.trim().to_string()).collect(),
    };
    let progress = BatchProgress::new(args.quiet);
    let outcome = run_batch(&request, &|finished| progress.plate_finished(finished)).with_context(|| {
        format!(
            "batch over {} not completed; no campaign table was written",
            args.run.data.display()
        )
    })?;
    progress.finish();
    let code = if outcome.failed > 0 {
        ExitCode::from(3)
    } else {
        ExitCode::SUCCESS
    };
    Ok((outcome.summary, code))
}

/// How a campaign's progress shows on stderr: a bar on a terminal (plates done, failed, rate,
/// ETA), one plain line per plate otherwise, nothing with `--quiet`; a failed plate is always named.
enum BatchProgress {
    Bar(indicatif::ProgressBar),
    Lines,
    Quiet,
}

impl BatchProgress {
    fn new(quiet: bool) -> BatchProgress {
        use std::io::IsTerminal;
        if quiet {
            BatchProgress::Quiet
        } else if std::io::stderr().is_terminal() {
            // Hidden until the first plate ends and the campaign's size is known.
            let bar =
                indicatif::ProgressBar::with_draw_target(Some(0), indicatif::ProgressDrawTarget::hidden());
            let style = indicatif::ProgressStyle::with_template(
                "{bar:30} {pos}/{len} plates, {msg}, {per_sec}, ETA {eta}",
            );
            if let Ok(style) = style {
                bar.set_style(style);
            }
            bar.set_message("0 failed");
            BatchProgress::Bar(bar)
        } else {
            BatchProgress::Lines
        }
    }

    fn plate_finished(&self, finished: platekin::commands::batch::PlateFinished<'_>) {
        let state = match (finished.error, finished.reused) {
            (Some(_), _) => "failed",
            (None, true) => "kept",
            (None, false) => "ok",
        };
        match self {
            BatchProgress::Bar(bar) => {
                if bar.is_hidden() {
                    bar.set_draw_target(indicatif::ProgressDrawTarget::stderr());
                }
                bar.set_length(finished.total as u64);
                bar.set_position(finished.done as u64);
                bar.set_message(format!("{} failed", finished.failed));
                if let Some(error) = finished.error {
                    bar.println(format!(
                        "platekin batch: plate {} failed: {error}",
                        finished.plate
                    ));
                }
            }
            BatchProgress::Lines => match finished.error {
                Some(error) => eprintln!(
                    "platekin batch: {}/{} plate {} failed: {error}",
                    finished.done, finished.total, finished.plate
                ),
                None => eprintln!(
                    "platekin batch: {}/{} plate {} {state}",
                    finished.done, finished.total, finished.plate
                ),
            },
            BatchProgress::Quiet => {
                if let Some(error) = finished.error {
                    eprintln!("platekin batch: plate {} failed: {error}", finished.plate);
                }
            }
        }
    }

    fn finish(&self) {
        if let BatchProgress::Bar(bar) = self {
            bar.finish();
        }
    }
}

/// Bootstrap progress on stderr, only when stderr is a terminal (a log file gets nothing).
fn progress_reporter() -> impl FnMut(usize, usize) {
    use std::io::IsTerminal;
    let terminal = std::io::stderr().is_terminal();
    move |done: usize, total: usize| {
        if terminal && (done.is_multiple_of(10) || done == total) {
            eprint!("\rbootstrap {done}/{total}");
            if done == total {
                eprintln!();
            }
        }
    }
}
