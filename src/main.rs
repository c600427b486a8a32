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
    match execute(cli) {
        Ok(text) => print_quietly(&text),
        Err(error) => {
            eprintln!("platekin: error: {error:#}");
            ExitCode::from(2)
        }
    }
}

/// Prints to stdout; a closed pipe (`platekin ... | head`) ends quietly.
fn print_quietly(text: &str) -> ExitCode {
    let mut stdout = std::io::stdout().lock();
    match stdout.write_all(text.as_bytes()).and_then(|()| stdout.flush()) {
        Ok(()) => ExitCode::SUCCESS,
        Err(error) if error.kind() == std::io::ErrorKind::BrokenPipe => ExitCode::SUCCESS,
        Err(error) => {
            eprintln!("platekin: error: cannot write to stdout: {error}");
            ExitCode::from(2)
        }
    }
}

fn execute(cli: Cli) -> anyhow::Result<String> {
    match cli.command {
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
