//! Writes the invented Hollin Moss fluorescence demo plate (HmpA, a fluorogenic peptide, product
//! standards in duplicate on the plate; RFU with a slight inner-filter bend at the top) into the
//! folder given as the only argument: `hollin-moss-wide.csv` and `hollin-moss-layout.csv`.
//!
//! Usage: `cargo run --release --example make_fluorescence_plate -- demo-plates`

use std::error::Error;
use std::path::PathBuf;

use platekin::simulate::fluorescence::fluorescence_plate;

/// The demo plate's seed.
const SEED: u64 = 20_261_203;

fn main() -> Result<(), Box<dyn Error>> {
    let mut arguments = std::env::args_os().skip(1);
    let folder = match (arguments.next(), arguments.next()) {
        (Some(folder), None) => PathBuf::from(folder),
        _ => return Err("usage: make_fluorescence_plate FOLDER".into()),
    };
    std::fs::create_dir_all(&folder).map_err(|error| format!("creating {}: {error}", folder.display()))?;
    let plate = fluorescence_plate(SEED)?;
    for (name, text) in [
        ("hollin-moss-wide.csv", &plate.export_csv),
        ("hollin-moss-layout.csv", &plate.layout_csv),
    ] {
        let path = folder.join(name);
        std::fs::write(&path, text).map_err(|error| format!("writing {}: {error}", path.display()))?;
        println!("wrote {} ({} bytes)", path.display(), text.len());
    }
    Ok(())
}
