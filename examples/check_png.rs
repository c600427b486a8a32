//! Checks that a PNG decodes and is not blank (used by `.ci/render-report` on the headless
//! screenshot of `report.html`): more than 1% of pixels differ from the first pixel, and more than
//! 100 pixels are dark (text and lines were drawn). Prints the size; exits 1 on failure.

use std::process::ExitCode;

fn check(path: &str) -> Result<String, String> {
    let file = std::fs::File::open(path).map_err(|error| format!("{path}: {error}"))?;
    let mut reader = png::Decoder::new(std::io::BufReader::new(file))
        .read_info()
        .map_err(|error| format!("{path}: not a PNG: {error}"))?;
    let mut pixels = vec![0; reader.output_buffer_size()];
    let info = reader
        .next_frame(&mut pixels)
        .map_err(|error| format!("{path}: cannot decode: {error}"))?;
    let channels = info.color_type.samples();
    if info.bit_depth != png::BitDepth::Eight || channels < 3 {
        return Err(format!(
            "{path}: expected 8-bit RGB or RGBA, got {:?} {:?}",
            info.bit_depth, info.color_type
        ));
    }
    let pixels: Vec<&[u8]> = pixels[..info.buffer_size()]
        .chunks(channels)
        .map(|p| &p[..3])
        .collect();
    let Some(first) = pixels.first().copied() else {
        return Err(format!("{path}: no pixels"));
    };
    let differing = pixels.iter().filter(|p| **p != first).count();
    let dark = pixels.iter().filter(|p| p.iter().all(|c| *c < 80)).count();
    if differing * 100 <= pixels.len() || dark <= 100 {
        return Err(format!(
            "{path}: looks blank ({differing} of {} pixels differ from the first, {dark} dark)",
            pixels.len()
        ));
    }
    Ok(format!(
        "{path}: {} x {} px, {:.1}% of pixels differ from the first, {dark} dark",
        info.width,
        info.height,
        100.0 * differing as f64 / pixels.len() as f64
    ))
}

fn main() -> ExitCode {
    let Some(path) = std::env::args().nth(1) else {
        eprintln!("usage: check_png FILE.png");
        return ExitCode::from(2);
    };
    match check(&path) {
        Ok(text) => {
            println!("{text}");
            ExitCode::SUCCESS
        }
        Err(text) => {
            eprintln!("{text}");
            ExitCode::from(1)
        }
    }
}
