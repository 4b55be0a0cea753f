//! Helpers shared by the command-line integration tests: reading numbers
//! out of a `--json` report and comparing them.

use serde_json::Value;

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
