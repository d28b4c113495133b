//! Shared helpers for the end-to-end tests.

use std::path::{Path, PathBuf};
use std::process::Command;

/// Python in a virtual environment of its own at `dir` with `package` installed (pip), or why
/// not (no python, venv, pip or network): tests that compare with a reference library print
/// "skipped: <reason>" and pass then.
pub fn python_with(dir: &Path, package: &str) -> Result<PathBuf, String> {
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
    let has = |py: &Path| {
        Command::new(py)
            .args(["-c", &format!("import {package}")])
            .output()
            .is_ok_and(|o| o.status.success())
    };
    if !has(&py) {
        let st = Command::new(&py)
            .args(["-m", "pip", "install", "--quiet", package])
            .output()
            .map_err(|e| format!("pip not runnable: {e}"))?;
        if !st.status.success() || !has(&py) {
            return Err(format!(
                "pip install {package} failed: {}",
                String::from_utf8_lossy(&st.stderr).trim()
            ));
        }
    }
    Ok(py)
}
