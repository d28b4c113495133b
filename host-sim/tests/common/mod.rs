//! Helpers shared by the end-to-end tests of the `slotwise` binary.
#![allow(dead_code)] // each test file uses its own share

use std::path::PathBuf;
use std::process::{Command, Output};

/// Run `slotwise` with `args` from the crate's folder.
pub fn slotwise(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_slotwise"))
        .args(args)
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .output()
        .expect("run slotwise")
}

/// Run `slotwise`, require success, return its stdout.
pub fn ok(args: &[&str]) -> String {
    let out = slotwise(args);
    assert!(
        out.status.success(),
        "slotwise {args:?} failed:\n{}\n{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout).into_owned()
}

/// Run `slotwise`, require failure, return its stderr.
pub fn fails(args: &[&str]) -> String {
    let out = slotwise(args);
    assert!(!out.status.success(), "slotwise {args:?} should fail");
    String::from_utf8_lossy(&out.stderr).into_owned()
}

/// A fresh folder for one test, named after the suite, the process and `name`.
pub fn tmp(suite: &str, name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("slotwise-{suite}-{}-{name}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d
}
