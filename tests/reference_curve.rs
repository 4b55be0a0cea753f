//! Distortion curves against outside references: Shannon's rate-distortion
//! bound and Max's optimal quantisers for a Gaussian source, the knee of a
//! mixture with a known number of clusters, and the knees the `kneed`
//! package finds on fixed curves.

use std::path::Path;

use serde_json::Value;
use vqforge::codebook::Scaling;
use vqforge::curve::kneedle::{knee, Bend, Direction};
use vqforge::curve::{measure_curve, Curve, CurveConfig, CurveSource, RecordSource, Sizes};
use vqforge::kmeans::TrainConfig;
use vqforge::load::{CsvOptions, RecordTable};
use vqforge::rng::SeededRng;

mod common;
use common::stratified_normal;

/// The curve of `dimension`-component vectors (flat), unscaled, one vector per row.
fn curve_of(values: &[f32], dimension: usize, sizes: &str, train: TrainConfig) -> Curve {
    let columns = (0..dimension).map(|c| format!("x{c}")).collect();
    let table = RecordTable::new(columns, values.iter().map(|&v| v as f64).collect());
    let opts = CsvOptions::new().scaling(Scaling::None);
    let config = CurveConfig::new(train)
        .sizes(Sizes::parse(sizes).unwrap())
        .check()
        .unwrap();
    let source = CurveSource::Records(RecordSource::new(&[table], &opts, &config).unwrap());
    measure_curve(&source, &config, &|_| {}).unwrap()
}

fn variance(values: &[f32]) -> f64 {
    let n = values.len() as f64;
    let mean = values.iter().map(|&v| v as f64).sum::<f64>() / n;
    values
        .iter()
        .map(|&v| (v as f64 - mean).powi(2))
        .sum::<f64>()
        / n
}

#[test]
fn gaussian_points_stay_above_shannon_bound_and_near_max_1960() {
    // Shannon's rate-distortion function of a memoryless Gaussian source
    // with variance σ², squared error: D(R) = σ²·2^(−2R) per sample, R in
    // bits per sample (Cover & Thomas, "Elements of Information Theory",
    // 2nd ed., section 10.3.2; section number from memory). No quantiser
    // reaches below it, whether its
    // indices are sent at ⌈log2 k⌉ bits or entropy-coded (the index
    // entropy is then the rate).
    let mut rng = SeededRng::new(1948);
    let samples = stratified_normal(&mut rng, 2000, 100);
    let sigma2 = variance(&samples);
    let train = TrainConfig::new(1)
        .restarts(1)
        .tolerance(0.0)
        .max_iterations(10_000);
    let curve = curve_of(&samples, 1, "2,4,8,16,32", train);
    for p in &curve.points {
        for rate in [p.rate.bits_per_index as f64, p.rate.index_entropy_bits] {
            let bound = sigma2 * 2f64.powf(-2.0 * rate);
            assert!(
                p.mse > bound,
                "size {}: mse {} below D({rate}) = {bound}",
                p.size,
                p.mse
            );
        }
    }
    // J. Max (1960), "Quantizing for minimum distortion", IRE Trans.
    // Information Theory IT-6(1): optimum mean squared error of a
    // unit-variance Gaussian with N = 2, 4, 8 levels (values from memory,
    // as in reference_quantisers.rs). Each size here is grown from the one
    // before, not trained from scratch; the Gaussian's single local optimum
    // (log-concave density) means growing must still land on Max's
    // quantiser. Tolerance as in reference_quantisers.rs.
    for (n, want) in [(2usize, 0.3634), (4, 0.1175), (8, 0.03454)] {
        let p = curve.points.iter().find(|p| p.size == n).unwrap();
        assert!(
            ((p.mse - want) / want).abs() < 0.005,
            "N = {n}: mse {} vs Max's {want}",
            p.mse
        );
    }
}

#[test]
fn two_dimensional_gaussian_stays_above_shannon_bound() {
    // Cover & Thomas (section 10.3.3, from memory: independent Gaussian
    // components, reverse water-filling with equal variances):
    // for d independent components of variance σ², a rate of R bits per
    // vector gives at least σ²·2^(−2R/d) per component.
    let mut rng = SeededRng::new(2);
    let a = stratified_normal(&mut rng, 300, 100);
    let mut b = stratified_normal(&mut rng, 300, 100);
    // Pair the two samples in a shuffled order so the components are independent.
    for i in (1..b.len()).rev() {
        let j = rng.below(i as u64 + 1) as usize;
        b.swap(i, j);
    }
    let values: Vec<f32> = a.iter().zip(&b).flat_map(|(&x, &y)| [x, y]).collect();
    let sigma2 = (variance(&a) + variance(&b)) / 2.0;
    let curve = curve_of(&values, 2, "2,4,8,16,32,64", TrainConfig::new(1));
    let mut last = f64::INFINITY;
    for p in &curve.points {
        let bound = sigma2 * 2f64.powf(-2.0 * p.rate.index_entropy_bits / 2.0);
        assert!(p.mse > bound, "size {}: {} ≤ {bound}", p.size, p.mse);
        assert!(p.distortion <= last);
        last = p.distortion;
    }
}

#[test]
fn mixture_of_separated_clusters_has_its_knee_at_the_cluster_count() {
    // A mathematical property, tested on seeded synthetic data: with C
    // clusters equally far apart (on a circle of radius 50) and of spread 1,
    // distortion falls steeply up to C codewords (each splits off a whole
    // cluster) and slowly after (each only splits a cluster's own spread),
    // so the curve bends at C.
    for c in 2..=6usize {
        let mut rng = SeededRng::new(c as u64);
        let centres: Vec<[f64; 2]> = (0..c)
            .map(|i| {
                let t = std::f64::consts::TAU * i as f64 / c as f64;
                [50.0 * t.cos(), 50.0 * t.sin()]
            })
            .collect();
        let values: Vec<f32> = (0..3000)
            .flat_map(|i| {
                let m = centres[i % c];
                [(m[0] + rng.normal()) as f32, (m[1] + rng.normal()) as f32]
            })
            .collect();
        for sizes in ["1..16", "2..16"] {
            let curve = curve_of(&values, 2, sizes, TrainConfig::new(1));
            assert_eq!(curve.knee, Some(c), "{c} clusters, sizes {sizes}");
        }
    }
}

#[test]
fn knees_match_the_kneed_package() {
    // Fixtures: kneed 0.9.0 (PyPI), KneeLocator with the default
    // interp_method="interp1d" and online=False, written by
    // scripts/make_curve_fixtures.py (tests/fixtures/README.md).
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/kneed_knees.json");
    let fixture: Value = serde_json::from_slice(&std::fs::read(path).unwrap()).unwrap();
    let floats = |v: &Value| -> Vec<f64> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect()
    };
    let curves = fixture["curves"].as_array().unwrap();
    assert!(curves.len() >= 10);
    for c in curves {
        let name = c["name"].as_str().unwrap();
        let bend = match c["curve"].as_str().unwrap() {
            "convex" => Bend::Convex,
            _ => Bend::Concave,
        };
        let direction = match c["direction"].as_str().unwrap() {
            "decreasing" => Direction::Decreasing,
            _ => Direction::Increasing,
        };
        let s = c["S"].as_f64().unwrap();
        let got = knee(&floats(&c["x"]), &floats(&c["y"]), s, bend, direction).unwrap();
        match (got, c["knee"].as_f64()) {
            (None, None) => {}
            (Some(k), Some(want)) => {
                assert_eq!(k.x, want, "{name}");
                let norm = c["norm_knee"].as_f64().unwrap();
                assert!(
                    (k.normalised_x - norm).abs() < 1e-12,
                    "{name}: {k:?} vs {norm}"
                );
            }
            (got, want) => panic!("{name}: got {got:?}, kneed found {want:?}"),
        }
    }
}
