//! Writes a simulated screen (export and layout) into a folder, to look at a large screen's report:
//! `cargo run --release --example make_screen_plate -- FOLDER [96|384|1536] [COMPOUNDS]`.

use platekin::core::plate::PlateFormat;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let folder = std::path::PathBuf::from(args.next().unwrap_or_else(|| "screen-plate".to_string()));
    let format: PlateFormat = args.next().unwrap_or_else(|| "1536".to_string()).parse()?;
    let compounds: usize = args.next().unwrap_or_else(|| "150".to_string()).parse()?;
    let screen = platekin::simulate::screen::screen_plate(format, compounds, 10, 31, 1536);
    let plate = platekin::simulate::simulate(&screen.spec)?;
    std::fs::create_dir_all(&folder)?;
    std::fs::write(
        folder.join("screen.csv"),
        platekin::simulate::wide_csv(&plate, &platekin::simulate::WideCsvOptions::default()),
    )?;
    std::fs::write(folder.join("screen-layout.csv"), &screen.layout_csv)?;
    Ok(())
}
