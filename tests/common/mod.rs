//! Helpers shared by the integration tests: running the binary and reading
//! numbers out of its `--json` report, checking a failing run, and
//! stratified samples of a source.

// Each test file uses some of these helpers, none uses all.
#![allow(dead_code)]

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use serde_json::Value;
use tempfile::TempDir;
use vqforge::rng::SeededRng;

/// Exit code of a usage error.
pub const USAGE: i32 = 2;
/// Exit code of any other failure.
pub const FAILURE: i32 = 1;

/// Runs the binary in `dir` with extra environment variables.
pub fn run_env(dir: &Path, args: &[&str], env: &[(&str, &str)]) -> Output {
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_vqforge"));
    cmd.current_dir(dir).args(args);
    for (k, v) in env {
        cmd.env(k, v);
    }
    cmd.output().expect("the vqforge binary runs")
}

/// [`run_env`] that insists on success without a panic.
pub fn ok_env(dir: &Path, args: &[&str], env: &[(&str, &str)]) -> Output {
    let out = run_env(dir, args, env);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        out.status.success(),
        "vqforge {args:?} failed ({:?}): {stderr}",
        out.status
    );
    assert!(!stderr.contains("panicked"), "{stderr}");
    out
}

/// Runs the binary in `dir`, insists on success and returns the output.
pub fn ok(dir: &Path, args: &[&str]) -> Output {
    ok_env(dir, args, &[])
}

/// Runs a `--json` command with extra environment variables and parses the
/// one object it prints.
pub fn json_env(dir: &Path, args: &[&str], env: &[(&str, &str)]) -> Value {
    let out = ok_env(dir, args, env);
    serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
        panic!(
            "vqforge {args:?} printed no JSON object ({e}): {}",
            String::from_utf8_lossy(&out.stdout)
        )
    })
}

/// Runs a `--json` command and parses the one object it prints.
pub fn json(dir: &Path, args: &[&str]) -> Value {
    json_env(dir, args, &[])
}

/// A committed data file under `tests/data/`.
pub fn data(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data")
        .join(name)
}

/// The number under `key`, or a panic that shows the report.
pub fn num(v: &Value, key: &str) -> f64 {
    v[key]
        .as_f64()
        .unwrap_or_else(|| panic!("{key:?} is not a number in {v}"))
}

/// The whole number under `key`, or a panic that shows the report.
pub fn int(v: &Value, key: &str) -> u64 {
    v[key]
        .as_u64()
        .unwrap_or_else(|| panic!("{key:?} is not a whole number in {v}"))
}

/// Asserts `got` is within `rel` (relative) of `want`.
pub fn assert_close(what: &str, got: f64, want: f64, rel: f64) {
    let scale = want.abs().max(f64::MIN_POSITIVE);
    assert!(
        (got - want).abs() <= rel * scale,
        "{what}: got {got}, want {want} (relative tolerance {rel})"
    );
}

/// `radial × angular` standard-normal values: the Box–Muller transform
/// (Box & Muller 1958, "A note on the generation of random normal deviates")
/// of one uniform point in each cell of a `radial × angular` grid on the unit
/// square. The transform maps the uniform square onto the normal
/// distribution, so stratifying its input stratifies its output. Many radial
/// strata keep the tails, which weigh heavily in the outer cells' error,
/// finely stratified too.
pub fn stratified_normal(rng: &mut SeededRng, radial: usize, angular: usize) -> Vec<f32> {
    let mut out = Vec::with_capacity(radial * angular);
    for i in 0..radial {
        for j in 0..angular {
            // 1 − u lies in (0, 1], so the logarithm is finite.
            let u = 1.0 - (i as f64 + rng.unit_f64()) / radial as f64;
            let v = (j as f64 + rng.unit_f64()) / angular as f64;
            let x = (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * v).cos();
            out.push(x as f32);
        }
    }
    out
}

/// Every file under `root` (folders included, as empty entries) with its bytes.
pub fn snapshot(root: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    let mut files = BTreeMap::new();
    let mut pending = vec![root.to_path_buf()];
    while let Some(folder) = pending.pop() {
        for entry in std::fs::read_dir(&folder).unwrap() {
            let path = entry.unwrap().path();
            let rel = path.strip_prefix(root).unwrap().to_path_buf();
            if path.is_dir() {
                files.insert(rel, Vec::new());
                pending.push(path);
            } else {
                files.insert(rel, std::fs::read(&path).unwrap());
            }
        }
    }
    files
}

/// Runs `args` in `dir` and checks the failure: exit code, one `error:`
/// line holding every phrase, empty stdout, no panic, folder unchanged.
pub fn fails(dir: &TempDir, args: &[&str], code: i32, phrases: &[&str]) {
    let before = snapshot(dir.path());
    let out = Command::new(env!("CARGO_BIN_EXE_vqforge"))
        .current_dir(dir.path())
        .args(args)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(code), "vqforge {args:?}: {stderr}");
    let lines: Vec<&str> = stderr.lines().collect();
    assert_eq!(
        lines.len(),
        1,
        "vqforge {args:?}: stderr is not one line: {stderr}"
    );
    assert!(lines[0].starts_with("error: "), "{stderr}");
    assert!(!stderr.contains("panicked"), "{stderr}");
    assert!(!stderr.contains("RUST_BACKTRACE"), "{stderr}");
    for phrase in phrases {
        assert!(
            lines[0].contains(phrase),
            "vqforge {args:?}: {phrase:?} is not in: {stderr}"
        );
    }
    assert!(
        out.stdout.is_empty(),
        "vqforge {args:?} printed: {}",
        String::from_utf8_lossy(&out.stdout)
    );
    let after = snapshot(dir.path());
    let changed: Vec<_> = after
        .iter()
        .filter(|(path, bytes)| before.get(*path) != Some(bytes))
        .map(|(path, _)| path)
        .collect();
    assert!(
        changed.is_empty(),
        "vqforge {args:?} left files: {changed:?}"
    );
    assert_eq!(before.len(), after.len(), "vqforge {args:?} removed a file");
}
