//! Helpers shared by the integration tests that run the real `platekin` binary.

#![allow(dead_code)] // each test file uses its own subset

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// A path inside the project (fixtures, demo plates).
pub fn project(path: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(path)
}

/// Runs the binary with `args` in `cwd`.
pub fn platekin(args: &[&str], cwd: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_platekin"))
        .args(args)
        .current_dir(cwd)
        .output()
        .expect("the platekin binary runs")
}

/// Output bytes as text.
pub fn text(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes).into_owned()
}

/// Checks a refused run: exit code 2, a message on stderr holding every one of `needles`, and
/// nothing written at `out`. Returns the message.
pub fn assert_refused(output: &Output, needles: &[&str], out: &Path) -> String {
    assert_eq!(output.status.code(), Some(2), "{}", text(&output.stdout));
    let message = text(&output.stderr);
    for needle in needles {
        assert!(message.contains(needle), "'{needle}' not in: {message}");
    }
    assert!(!out.exists(), "{} was written", out.display());
    message
}
