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
//! A second group times the per-pixel stages alone on the same photo, with
//! the palette trained once: counting the distinct colours, mapping without
//! dithering (each distinct colour searched once, then handed to its
//! pixels), mapping and measuring from the distinct colours as `palette`
//! does, and measuring every pixel (what dithered results need).
//!
//! Runs in rayon's global pool (all cores; set `RAYON_NUM_THREADS=2` to
//! match the two-core figures in the README). Each sample of the first
//! group takes seconds: `cargo bench --bench palette` needs a few minutes.

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, SamplingMode};
use vqforge::export::write_indexed_png;
use vqforge::kmeans::TrainConfig;
use vqforge::load::{colour_histogram, ColourIndex, RgbaImage};
use vqforge::palette::{measure, train_input, Dither, Palette, PaletteConfig, PaletteInput};

#[path = "common/photo.rs"]
mod photo;
use photo::photo;

const SIZE: usize = 256;

/// A palette trained on the distinct colours `colours` counted.
fn fit(colours: &ColourIndex) -> Palette {
    let config = PaletteConfig::new(SIZE);
    let train = TrainConfig::new(SIZE).check().expect("valid defaults");
    let input = PaletteInput::from_histogram(colours.colours(), &config).expect("colours");
    let t = train_input(&input, &config, &train, &|_| {}).expect("a palette");
    Palette::from_codebook(&t.codebook).expect("a pixel codebook")
}

/// The whole job as `palette` does it; returns the MSE and the PNG's size.
fn palette_png(image: &RgbaImage) -> (f64, usize) {
    let colours = ColourIndex::new(image);
    let palette = fit(&colours);
    let mapped = palette.map_colours(&colours).expect("mapped");
    let (indices, err) = (mapped.indices, mapped.error);
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

fn bench_pixels(c: &mut Criterion) {
    let (name, image) = photo();
    let colours = ColourIndex::new(&image);
    let palette = fit(&colours);
    let indices = palette.map_image(&image, Dither::None).expect("mapped");
    let err = measure(&image, &indices, &palette).expect("measured");
    eprintln!(
        "{name}: {} distinct colours, {} palette entries, mse {:.4}, CIEDE2000 mean {:.4}",
        colours.colours().len(),
        palette.len(),
        err.mse,
        err.delta_e2000_mean
    );
    let mut group = c.benchmark_group("pixels_2mp");
    group.sampling_mode(SamplingMode::Flat);
    group.throughput(criterion::Throughput::Elements(image.pixels.len() as u64));
    group.bench_function("distinct_colours", |b| {
        b.iter(|| colour_histogram(black_box(&image)))
    });
    group.bench_function("colour_index", |b| {
        b.iter(|| ColourIndex::new(black_box(&image)))
    });
    group.bench_function("map_plain", |b| {
        b.iter(|| palette.map_image(black_box(&image), Dither::None))
    });
    group.bench_function("map_and_measure_colours", |b| {
        b.iter(|| palette.map_colours(black_box(&colours)))
    });
    group.bench_function("measure_every_pixel", |b| {
        b.iter(|| measure(black_box(&image), &indices, &palette))
    });
    group.finish();
}

criterion_group!(benches, bench_palette, bench_pixels);
criterion_main!(benches);
