//! Writing a 2-megapixel, 256-colour indexed PNG into memory: the last
//! step of `palette`. The image is the photo of `benches/common/photo.rs`
//! mapped to a 256-colour palette trained by the library (so the palette
//! order, and with it how well the indices compress, is the tool's own);
//! `VQFORGE_BENCH_PHOTO=path` picks another photo. Each case prints its
//! file size before timing: a faster writer that makes bigger files is not
//! faster.
//!
//! Cases: `pieces` is [`write_indexed_png`] in rayon's global pool (set
//! `RAYON_NUM_THREADS=2` to match the two-core figures), `pieces_1_thread`
//! the same in a one-thread pool, and `png_crate_default` the `png`
//! crate's own encoder at its default compression with no filtering (one
//! zlib stream on one thread), as this writer worked before; its backend
//! is now zlib-rs (level 6), no longer miniz_oxide.
//!
//! How the level and piece size were chosen: the scanlines of a 1411 × 1411
//! photo mapped to 256 colours (1 992 332 bytes at 8 bits), compressed by
//! each candidate in turn, 25 rounds, on a shared 2-core machine; median
//! wall time (fastest in brackets) and bytes of the zlib stream (the file
//! adds about 850 bytes of chunks). One stream on one thread, and pieces
//! of about 512 KiB (4) and 256 KiB (8) on two threads. The writer before
//! this one was the png crate at its default, miniz_oxide level 6: 549 929
//! bytes in about 100 ms.
//!
//! | compressor, level  | 1 thread, 1 piece       | 2 threads, 4 pieces     | 2 threads, 8 pieces     |
//! |--------------------|-------------------------|-------------------------|-------------------------|
//! | miniz_oxide 2      | 21.6 (20.3) ms, 602 293 | 16.2 (11.8) ms, 603 375 | 15.6 (10.5) ms, 605 085 |
//! | miniz_oxide 3      | 34.4 (33.3) ms, 559 781 | 23.5 (17.9) ms, 561 146 | 23.1 (17.0) ms, 563 418 |
//! | miniz_oxide 6      | 101.5 (97.7) ms, 549 092| 62.1 (49.3) ms, 550 462 | 59.6 (47.8) ms, 552 307 |
//! | zlib-rs 3          | 20.4 (19.5) ms, 579 779 | 14.8 (11.0) ms, 581 493 | 14.5 (9.9) ms, 584 097  |
//! | zlib-rs 4          | 25.5 (24.5) ms, 564 461 | 17.5 (13.7) ms, 566 535 | 17.2 (12.5) ms, 569 527 |
//! | **zlib-rs 5**      | 29.6 (28.1) ms, 557 139 | 20.6 (15.7) ms, 559 259 | 20.2 (14.6) ms, 562 257 |
//! | zlib-rs 6          | 41.7 (39.8) ms, 553 135 | 27.3 (21.2) ms, 555 310 | 26.3 (20.3) ms, 558 413 |
//!
//! Level 5 of zlib-rs is the fastest setting within 2 % of the old size.
//! Every piece starts afresh (no history, new code tables): the stream
//! grows by about 0.4 % at 4 pieces and 1 % at 8, and 8 pieces are no
//! faster. On two threads the other core was often busy during these
//! rounds; the fastest runs show the speed-up of a free core.

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, SamplingMode, Throughput};
use png::{BitDepth, ColorType, Encoder, Filter};
use vqforge::export::{pack_rows, write_indexed_png};
use vqforge::kmeans::TrainConfig;
use vqforge::palette::{train_palette, Dither, Palette, PaletteConfig};

#[path = "common/photo.rs"]
mod photo;
use photo::photo;

const SIZE: usize = 256;

/// An indexed image: size, palette and one index per pixel.
struct Indexed {
    width: u32,
    height: u32,
    palette: Vec<[u8; 3]>,
    alpha: Option<Vec<u8>>,
    indices: Vec<u32>,
}

fn indexed_photo() -> (String, Indexed) {
    let (name, image) = photo();
    let config = PaletteConfig::new(SIZE);
    let train = TrainConfig::new(SIZE).check().expect("valid defaults");
    let trained =
        train_palette(std::slice::from_ref(&image), &config, &train, &|_| {}).expect("a palette");
    let palette = Palette::from_codebook(&trained.codebook).expect("a pixel codebook");
    let indices = palette.map_image(&image, Dither::None).expect("mapped");
    let indexed = Indexed {
        width: image.width,
        height: image.height,
        palette: palette.rgb(),
        alpha: palette.alpha(),
        indices,
    };
    (name, indexed)
}

fn ours(image: &Indexed) -> Vec<u8> {
    let mut png = Vec::new();
    write_indexed_png(
        &mut png,
        image.width,
        image.height,
        &image.palette,
        image.alpha.as_deref(),
        &image.indices,
    )
    .expect("PNG written");
    png
}

/// The png crate's encoder at its default compression, no filtering; tRNS
/// is left out (the photos here are opaque).
fn png_crate_default(image: &Indexed) -> Vec<u8> {
    let packed = pack_rows(&image.indices, image.width, image.height, 8).expect("8-bit rows");
    let mut png = Vec::new();
    let mut encoder = Encoder::new(&mut png, image.width, image.height);
    encoder.set_color(ColorType::Indexed);
    encoder.set_depth(BitDepth::Eight);
    encoder.set_filter(Filter::NoFilter);
    encoder.set_palette(image.palette.as_flattened().to_vec());
    let mut writer = encoder.write_header().expect("header");
    writer.write_image_data(&packed).expect("image data");
    writer.finish().expect("PNG written");
    png
}

fn bench_png_write(c: &mut Criterion) {
    let (name, image) = indexed_photo();
    let one_thread = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .expect("a thread pool");
    let pieces = ours(&image);
    assert_eq!(one_thread.install(|| ours(&image)), pieces);
    eprintln!(
        "{name}: {} × {} pixels, {} colours; pieces: {} bytes; png crate default: {} bytes",
        image.width,
        image.height,
        image.palette.len(),
        pieces.len(),
        png_crate_default(&image).len()
    );

    let mut group = c.benchmark_group("indexed_png_2mp");
    group.sampling_mode(SamplingMode::Flat);
    group.throughput(Throughput::Elements(u64::from(image.width * image.height)));
    group.bench_function("pieces", |b| b.iter(|| ours(black_box(&image))));
    group.bench_function("pieces_1_thread", |b| {
        b.iter(|| one_thread.install(|| ours(black_box(&image))))
    });
    group.bench_function("png_crate_default", |b| {
        b.iter(|| png_crate_default(black_box(&image)))
    });
    group.finish();
}

criterion_group! {
    name = benches;
    config = Criterion::default()
        .sample_size(20)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(4));
    targets = bench_png_write
}
criterion_main!(benches);
