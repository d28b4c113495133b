//! Shared helpers for the end-to-end tests.

use std::ffi::OsStr;
use std::path::{Path, PathBuf};
use std::process::Command;

/// Python in a virtual environment of its own at `dir` with `modules` importable (installed with
/// pip when missing), or why not (no python, venv, pip or network): callers then skip.
pub fn python_with(dir: &Path, modules: &[&str]) -> Result<PathBuf, String> {
    let py = dir.join("bin").join("python");
    if !py.exists() {
        let st = Command::new("python3")
            .args(["-m", "venv"])
            .arg(dir)
            .output()
            .map_err(|e| format!("python3 not runnable: {e}"))?;
        if !st.status.success() {
            return Err(format!(
                "python3 -m venv failed: {}",
                String::from_utf8_lossy(&st.stderr).trim()
            ));
        }
    }
    let import = format!("import {}", modules.join(", "));
    let has = |py: &Path| {
        Command::new(py)
            .args(["-c", &import])
            .output()
            .is_ok_and(|o| o.status.success())
    };
    if !has(&py) {
        let st = Command::new(&py)
            .args(["-m", "pip", "install", "--quiet"])
            .args(modules)
            .output()
            .map_err(|e| format!("pip not runnable: {e}"))?;
        if !st.status.success() || !has(&py) {
            return Err(format!(
                "pip install {} failed: {}",
                modules.join(" "),
                String::from_utf8_lossy(&st.stderr).trim()
            ));
        }
    }
    Ok(py)
}
pub mod faults;

/// Run `py` with `args` and return what it printed on stdout; panics with its stderr when it
/// fails (a reference script that cannot run is a failed check, not a skip).
pub fn run_python<I, S>(py: &Path, args: I) -> Vec<u8>
where
    I: IntoIterator<Item = S>,
    S: AsRef<OsStr>,
{
    let out = Command::new(py).args(args).output().unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    out.stdout
}
