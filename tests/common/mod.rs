//! Shared helpers for the integration tests: one way to start the real binary.
#![allow(dead_code)]
// Helpers outside #[test] fns: clippy's allow-*-in-tests does not reach them.
#![allow(clippy::unwrap_used, clippy::expect_used)]

use std::path::{Path, PathBuf};

/// The built `restvolt` binary with a clean environment: no user profile
/// directory from the caller's shell, and no colour codes in the output.
pub fn restvolt() -> assert_cmd::Command {
    let mut c = assert_cmd::Command::new(env!("CARGO_BIN_EXE_restvolt"));
    c.env_remove("RESTVOLT_PROFILES").env("NO_COLOR", "1");
    c
}

/// A fresh temporary directory, removed when dropped.
pub fn tmp() -> tempfile::TempDir {
    tempfile::tempdir().expect("temporary directory")
}

/// A path inside the repository (profiles/, demo-data/).
pub fn repo(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}

/// A file in tests/fixtures/.
pub fn fixture(name: &str) -> PathBuf {
    repo("tests/fixtures").join(name)
}

/// What one run produced.
#[derive(Debug)]
pub struct Run {
    /// Exit status (None: killed by a signal).
    pub code: Option<i32>,
    /// Standard output.
    pub stdout: String,
    /// Standard error.
    pub stderr: String,
}

/// Run the binary with `args` in the temporary directory `cwd`, and check the
/// one thing every run must satisfy: no panic.
pub fn run_in(cwd: &Path, args: &[&str]) -> Run {
    let out = restvolt()
        .current_dir(cwd)
        .args(args)
        .output()
        .expect("start restvolt");
    let r = Run {
        code: out.status.code(),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    };
    assert!(
        !r.stderr.contains("panicked"),
        "restvolt {args:?} panicked:\n{}",
        r.stderr
    );
    assert!(r.code.is_some(), "restvolt {args:?} was killed by a signal");
    r
}

/// Run in a throwaway temporary directory.
pub fn run(args: &[&str]) -> Run {
    let d = tmp();
    run_in(d.path(), args)
}

/// Run, expect exit 0, and parse standard output as JSON.
pub fn json(args: &[&str]) -> serde_json::Value {
    let r = run(args);
    assert_eq!(r.code, Some(0), "restvolt {args:?} failed:\n{}", r.stderr);
    serde_json::from_str(&r.stdout)
        .unwrap_or_else(|e| panic!("restvolt {args:?}: stdout is not JSON ({e}):\n{}", r.stdout))
}

/// A number from a JSON document by path of keys.
pub fn num(v: &serde_json::Value, key: &str) -> f64 {
    v[key]
        .as_f64()
        .unwrap_or_else(|| panic!("'{key}' is not a number in {v}"))
}

/// The flag codes of a `check` JSON document.
pub fn flags(v: &serde_json::Value) -> Vec<String> {
    v["flags"]
        .as_array()
        .expect("flags array")
        .iter()
        .map(|f| f["code"].as_str().expect("flag code").to_string())
        .collect()
}

/// Every line of a text report within 80 columns (standard output is not a
/// terminal in these tests, so that is the width the text is wrapped to).
pub fn assert_fits_80_columns(text: &str) {
    let long: Vec<&str> = text.lines().filter(|l| l.chars().count() > 80).collect();
    assert!(long.is_empty(), "lines over 80 columns: {long:?}\n{text}");
}
