//! Helpers shared by the integration tests: reading numbers out of a
//! `--json` report and comparing them, and stratified samples of a source.

// Each test file uses some of these helpers, none uses all.
#![allow(dead_code)]

use serde_json::Value;
use vqforge::rng::SeededRng;

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
