//! Writes the invented Cobble Lane glimmerase campaign (see `platekin::simulate::campaign`) for
//! `platekin batch`: `cargo run --release --example make_campaign -- FOLDER [PLATES] [READS]`
//! (default 30 plates of 96 wells, 60 reads every 10 s). Writes `manifest.csv`, `layout.csv`,
//! `assay.toml` and `exports/PLATE.csv` into FOLDER, then prints the command that runs it.

use std::path::PathBuf;
use std::process::ExitCode;

use platekin::simulate::campaign::{campaign_plates, write_campaign};

/// The most plates this example writes (each export is about 50 kB).
const MAX_PLATES: usize = 5000;

fn main() -> ExitCode {
    let mut args = std::env::args().skip(1);
    let Some(folder) = args.next().map(PathBuf::from) else {
        eprintln!("usage: make_campaign FOLDER [PLATES] [READS]");
        return ExitCode::from(2);
    };
    let plates: usize = args.next().and_then(|n| n.parse().ok()).unwrap_or(30);
    let reads: usize = args.next().and_then(|n| n.parse().ok()).unwrap_or(60);
    if plates == 0 || plates > MAX_PLATES || !(5..=2000).contains(&reads) {
        eprintln!("PLATES must be 1 to {MAX_PLATES} and READS 5 to 2000");
        return ExitCode::from(2);
    }
    match write_campaign(&folder, &campaign_plates(plates, reads)) {
        Ok(manifest) => {
            println!(
                "wrote {plates} plates; run them with\n  platekin batch {} --assay {} --out campaign-results --pool-by variant",
                manifest.display(),
                folder.join("assay.toml").display()
            );
            ExitCode::SUCCESS
        }
        Err(error) => {
            eprintln!("{error}");
            ExitCode::from(2)
        }
    }
}
