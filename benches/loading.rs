//! Loading inputs: a CSV table parsed into records, and a PNG photo decoded
//! into pixels with its distinct colours counted (the first steps of
//! `train`/`encode` and of `palette`).
//!
//! Inputs are committed test data: the Seattle weather table (vega-datasets,
//! 1 461 days; repeated 40 times in memory so one parse takes a measurable
//! time, 58 440 rows) and scikit-image's astronaut photo (512 × 512). What
//! was read (rows, columns; pixels, distinct colours) is printed before
//! timing. The loaders are sequential; the colour count runs on rayon's
//! pool (set `RAYON_NUM_THREADS` to choose the threads).

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, SamplingMode, Throughput};
use vqforge::load::{colour_histogram, read_image, read_table, CsvOptions, ImageLimits};

const CSV: &str = concat!(
    env!("CARGO_MANIFEST_DIR"),
    "/tests/data/seattle-weather.csv"
);
const PHOTO: &str = concat!(
    env!("CARGO_MANIFEST_DIR"),
    "/tests/data/images/astronaut.png"
);
const REPEATS: usize = 40;

fn bench_loading(c: &mut Criterion) {
    let text = std::fs::read_to_string(CSV).expect("committed table");
    let (header, body) = text.split_once('\n').expect("a header line");
    let mut csv = format!("{header}\n");
    for _ in 0..REPEATS {
        csv.push_str(body);
    }
    let opts = CsvOptions::new();
    let table = read_table(csv.as_bytes(), "seattle-weather.csv", &opts).expect("valid table");
    println!(
        "csv: {} bytes -> {} rows x {} columns ({})",
        csv.len(),
        table.rows(),
        table.columns.len(),
        table.columns.join(", ")
    );
    let png = std::fs::read(PHOTO).expect("committed photo");
    let limits = ImageLimits::default();
    let image = read_image(&png, "astronaut.png", &limits).expect("valid PNG");
    println!(
        "png: {} bytes -> {} x {} pixels, {} distinct colours",
        png.len(),
        image.width,
        image.height,
        colour_histogram(&image).len()
    );

    let mut group = c.benchmark_group("loading");
    group.sampling_mode(SamplingMode::Flat);
    group.throughput(Throughput::Bytes(csv.len() as u64));
    group.bench_function("csv_table", |b| {
        b.iter(|| read_table(black_box(csv.as_bytes()), "seattle-weather.csv", &opts).unwrap())
    });
    group.throughput(Throughput::Elements(u64::from(image.width * image.height)));
    group.bench_function("png_decode", |b| {
        b.iter(|| read_image(black_box(&png), "astronaut.png", &limits).unwrap())
    });
    group.bench_function("distinct_colours", |b| {
        b.iter(|| colour_histogram(black_box(&image)))
    });
    group.finish();
}

criterion_group! {
    name = benches;
    config = Criterion::default()
        .sample_size(20)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(5));
    targets = bench_loading
}
criterion_main!(benches);
