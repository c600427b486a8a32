//! Writes the invented Amber Fen demo plates (readings in wide, grid and XLSX form, tidy and grid
//! layouts, the truth and a README) into the folder given as the only argument.
//!
//! Usage: `cargo run --example make_demo_plates -- demo-plates`

use std::error::Error;
use std::path::PathBuf;

use platekin::simulate::{demo_files, demo_spec, simulate};

fn main() -> Result<(), Box<dyn Error>> {
    let mut arguments = std::env::args_os().skip(1);
    let folder = match (arguments.next(), arguments.next()) {
        (Some(folder), None) => PathBuf::from(folder),
        _ => return Err("usage: make_demo_plates FOLDER".into()),
    };
    std::fs::create_dir_all(&folder).map_err(|error| format!("creating {}: {error}", folder.display()))?;
    let plate = simulate(&demo_spec())?;
    for (name, bytes) in demo_files(&plate)? {
        let path = folder.join(name);
        std::fs::write(&path, &bytes).map_err(|error| format!("writing {}: {error}", path.display()))?;
        println!("wrote {} ({} bytes)", path.display(), bytes.len());
    }
    Ok(())
}
