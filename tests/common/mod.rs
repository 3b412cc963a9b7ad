//! What the command line's end-to-end tests share: where the project and its fixtures are,
//! and running the built `shearbox` binary.

#![allow(dead_code)] // each test binary uses its own part

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// The project's root folder.
pub fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

/// A committed fixture file.
pub fn fixture(name: &str) -> PathBuf {
    root().join("fixtures").join(name)
}

/// Runs the built binary with `args` and waits for it.
pub fn shearbox(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_shearbox")).args(args).output().expect("binary runs")
}
