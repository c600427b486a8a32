//! Writes a simulated large plate (the demo chemistry on every well, no defects) for timing and
//! memory checks of whole runs: `cargo run --release --example make_large_plate -- FOLDER [1536|384|96] [READS]`.
//! Writes `large-plate.csv` (wide) and `large-layout.csv` (tidy) into FOLDER.

use std::path::PathBuf;
use std::process::ExitCode;

use platekin::core::plate::PlateFormat;
use platekin::simulate::{large_plate_spec, layout_tidy_csv, simulate, wide_csv, WideCsvOptions};

fn main() -> ExitCode {
    let mut args = std::env::args().skip(1);
    let Some(folder) = args.next().map(PathBuf::from) else {
        eprintln!("usage: make_large_plate FOLDER [1536|384|96] [READS]");
        return ExitCode::from(2);
    };
    let format: PlateFormat = match args.next().unwrap_or_else(|| "1536".into()).parse() {
        Ok(format) => format,
        Err(error) => {
            eprintln!("{error}");
            return ExitCode::from(2);
        }
    };
    let reads: usize = args.next().and_then(|n| n.parse().ok()).unwrap_or(200);
    let plate = match simulate(&large_plate_spec(format, reads)) {
        Ok(plate) => plate,
        Err(error) => {
            eprintln!("{error}");
            return ExitCode::from(2);
        }
    };
    let files = [
        ("large-plate.csv", wide_csv(&plate, &WideCsvOptions::default())),
        ("large-layout.csv", layout_tidy_csv(&plate)),
    ];
    if let Err(error) = std::fs::create_dir_all(&folder) {
        eprintln!("{}: {error}", folder.display());
        return ExitCode::from(2);
    }
    for (name, text) in files {
        let path = folder.join(name);
        if let Err(error) = std::fs::write(&path, &text) {
            eprintln!("{}: {error}", path.display());
            return ExitCode::from(2);
        }
        println!("wrote {} ({} bytes)", path.display(), text.len());
    }
    ExitCode::SUCCESS
}
