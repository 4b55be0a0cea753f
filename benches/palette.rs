//! A 2-megapixel photo to a 256-colour indexed PNG, end to end through the
//! library with the `palette` command's defaults: unique colours, training
//! in CIELAB under the RGB888 grid, mapping without dithering, measuring
//! (8-bit MSE and CIEDE2000) and writing the PNG into memory.
//!
//! The photo: `VQFORGE_BENCH_PHOTO=path` if set, else scikit-image's
//! astronaut (tests/data/images/astronaut.png, 512 × 512) enlarged to
//! 1414 × 1414 with the `image` crate's triangle (bilinear) filter; the
//! interpolation makes hundreds of thousands of distinct colours, as a
//! camera photo of that size has. The distinct colour count and the MSE are
//! printed before timing, so a faster run that loses quality shows.
//!
//! Runs in rayon's global pool (all cores; set `RAYON_NUM_THREADS=2` to
//! match the two-core figures in the README). Each sample takes seconds:
//! `cargo bench --bench palette` needs a few minutes.

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, SamplingMode};
use vqforge::export::write_indexed_png;
use vqforge::kmeans::TrainConfig;
use vqforge::load::RgbaImage;
use vqforge::palette::{measure, train_palette, Dither, Palette, PaletteConfig};

#[path = "common/photo.rs"]
mod photo;
use photo::photo;

const SIZE: usize = 256;

/// The whole job; returns the MSE and the PNG's size.
fn palette_png(image: &RgbaImage) -> (f64, usize) {
    let config = PaletteConfig::new(SIZE);
    let train = TrainConfig::new(SIZE).check().expect("valid defaults");
    let t =
        train_palette(std::slice::from_ref(image), &config, &train, &|_| {}).expect("a palette");
    let palette = Palette::from_codebook(&t.codebook).expect("a pixel codebook");
    let indices = palette.map_image(image, Dither::None).expect("mapped");
    let err = measure(image, &indices, &palette).expect("measured");
    let mut png = Vec::new();
    write_indexed_png(
        &mut png,
        image.width,
        image.height,
        &palette.rgb(),
        palette.alpha().as_deref(),
        &indices,
    )
    .expect("PNG written");
    (err.mse, png.len())
}

fn bench_palette(c: &mut Criterion) {
    let (name, image) = photo();
    let distinct = vqforge::load::colour_histogram(&image).len();
    let (mse, bytes) = palette_png(&image);
    eprintln!(
        "{name}: {} × {} pixels, {distinct} distinct colours -> {SIZE} colours, mse {mse:.4}, PNG {bytes} bytes",
        image.width, image.height
    );
    let mut group = c.benchmark_group("palette_2mp");
    group.sampling_mode(SamplingMode::Flat);
    group.sample_size(10);
    group.measurement_time(Duration::from_secs(60));
    group.bench_function(format!("k{SIZE}"), |b| {
        b.iter(|| black_box(palette_png(black_box(&image))))
    });
    group.finish();
}

criterion_group!(benches, bench_palette);
criterion_main!(benches);
