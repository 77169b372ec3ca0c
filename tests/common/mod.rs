//! Helpers shared by the integration tests: temp dirs, the built binary, and the Python
//! reference stack (numpy, scipy, nibabel, tifffile, statsmodels) in the project's venv.
//!
//! The reference checks never skip: `scripts/test.sh` builds the venv first, and a missing
//! interpreter is a test failure with a message saying how to make it.

#![allow(
    dead_code,
    reason = "each test binary uses a different subset of the helpers"
)]

use std::path::{Path, PathBuf};
use std::process::Command;

/// The project root.
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// The Python interpreter of the reference venv: `$SUTURA_PYTHON`, else `.venv/bin/python`.
pub fn python() -> PathBuf {
    let p = std::env::var_os("SUTURA_PYTHON")
        .map_or_else(|| root().join(".venv/bin/python"), PathBuf::from);
    assert!(
        p.exists(),
        "reference Python not found at {}: run scripts/test.sh (it builds the venv) or set SUTURA_PYTHON",
        p.display()
    );
    p
}

/// Runs `tests/python/<script>` with `args` and parses its stdout as JSON.
pub fn run_python(script: &str, args: &[&str]) -> serde_json::Value {
    let out = Command::new(python())
        .arg(root().join("tests/python").join(script))
        .args(args)
        .output()
        .expect("start python");
    assert!(
        out.status.success(),
        "{script} failed:\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
        panic!(
            "{script} printed no JSON ({e}):\n{}",
            String::from_utf8_lossy(&out.stdout)
        )
    })
}

/// The folder where reference data fetched by `scripts/test.sh` lives (Pillow's sdist images).
pub fn reference_dir() -> PathBuf {
    std::env::var_os("SUTURA_REFDATA").map_or_else(|| root().join("target/refdata"), PathBuf::from)
}

/// The `sutura` binary built for these tests.
pub fn sutura() -> Command {
    Command::new(env!("CARGO_BIN_EXE_sutura"))
}

/// Runs the binary and returns (success, stdout, stderr).
pub fn run_sutura(args: &[&str], cwd: &Path) -> (bool, String, String) {
    let out = sutura()
        .args(args)
        .current_dir(cwd)
        .output()
        .expect("start sutura");
    (
        out.status.success(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}
