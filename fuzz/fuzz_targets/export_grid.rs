//! Fuzz target: a text export read as the grid shape (see `platekin_fuzz::check_import`).
#![no_main]

use libfuzzer_sys::fuzz_target;
use platekin::import::DataShape;

fuzz_target!(|bytes: &[u8]| {
    platekin_fuzz::check_text_export(bytes, DataShape::Grid);
});
