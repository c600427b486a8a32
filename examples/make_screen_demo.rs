//! Writes the screening demo's files (the invented Heron Quay fragment screen) into a folder:
//! `cargo run --release --example make_screen_demo -- demo-plates`. The same seed gives the same
//! bytes; `tests/screen.rs` checks the committed files against this output.

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let folder = std::env::args()
        .nth(1)
        .unwrap_or_else(|| "demo-plates".to_string());
    std::fs::create_dir_all(&folder)?;
    for (name, text) in platekin::simulate::screen::heron_quay_demo_files()? {
        std::fs::write(std::path::Path::new(&folder).join(name), text)?;
    }
    Ok(())
}
