//! The vqforge side of `benches/compare/run.sh`: times the library on the
//! same raw arrays the Python engines get, so no file parsing is timed.
//!
//! ```text
//! compare_harness lloyd  DATA.f32 INIT.f32 DIM ITERATIONS
//! compare_harness encode DATA.f32 CODEBOOK.f32 DIM INDICES_OUT.u32
//! compare_harness pixels DATA.f32 CODEBOOK.f32 3 INDICES_OUT.u32
//! ```
//!
//! `pixels` takes 8-bit sRGB colours (values 0..=255, as f32) and times what
//! `palette` and image `encode` do with them: an RGB888 palette in the sRGB
//! space maps the decoded image, each distinct colour searched once.
//!
//! Arrays are little-endian `f32`, row after row; indices are written as
//! little-endian `u32`. Prints one JSON object. Threads: rayon's pool, set
//! with `RAYON_NUM_THREADS`.

use std::time::Instant;

use serde_json::json;
use vqforge::codebook::{Codebook, Meaning, TrainingFacts};
use vqforge::colour::{ColourSpace, DisplayFormat};
use vqforge::encode::{Encoder, SearchMethod};
use vqforge::kmeans::{lloyd, LloydOptions};
use vqforge::kmeans::{Seeding, StopReason};
use vqforge::load::RgbaImage;
use vqforge::palette::{AlphaMode, Dither, Palette, PixelLayout};
use vqforge::vectors::VectorSet;

fn read_f32(path: &str) -> Vec<f32> {
    let bytes = std::fs::read(path).unwrap_or_else(|e| panic!("reading {path}: {e}"));
    assert!(bytes.len() % 4 == 0, "{path}: not whole f32 values");
    bytes
        .chunks_exact(4)
        .map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]]))
        .collect()
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let usage =
        "usage: compare_harness lloyd DATA INIT DIM ITERATIONS | encode|pixels DATA BOOK DIM OUT";
    assert!(args.len() == 5, "{usage}");
    let dim: usize = args[3].parse().expect("DIM is a number");
    let data = VectorSet::new(dim, read_f32(&args[1])).expect("finite rows");
    let second = read_f32(&args[2]);
    let threads = rayon::current_num_threads();
    match args[0].as_str() {
        "lloyd" => {
            let iterations: u32 = args[4].parse().expect("ITERATIONS is a number");
            let opts = LloydOptions {
                max_iterations: iterations,
                tolerance: 0.0,
            };
            let started = Instant::now();
            let r = lloyd(&data, &second, &opts).expect("valid input");
            let seconds = started.elapsed().as_secs_f64();
            println!(
                "{}",
                json!({
                    "seconds": seconds,
                    "iterations": r.iterations,
                    "distortion": r.distortion,
                    "mse_per_vector": r.distortion / data.len() as f64,
                    "threads": threads,
                })
            );
        }
        "encode" => {
            let started = Instant::now();
            let encoder = Encoder::new(&second, dim).expect("valid codebook");
            let indices = encoder.encode(&data).expect("same dimension");
            let seconds = started.elapsed().as_secs_f64();
            let method = match encoder.batch_method() {
                SearchMethod::Scan if encoder.uses_anchors() => {
                    "anchor lists, blocked kernel where they are long".to_string()
                }
                SearchMethod::Scan => "blocked kernel".to_string(),
                other => format!("{other:?}"),
            };
            report(&args[4], &indices, seconds, &method, threads, None);
        }
        "pixels" => {
            assert!(dim == 3, "pixels are 3 components");
            let image = RgbaImage {
                width: data.len() as u32,
                height: 1,
                pixels: data
                    .rows()
                    .map(|r| [r[0] as u8, r[1] as u8, r[2] as u8, 255])
                    .collect(),
            };
            let started = Instant::now();
            let palette = Palette::from_codebook(&srgb_codebook(second)).expect("valid palette");
            let indices = palette
                .map_image(&image, Dither::None)
                .expect("whole image");
            let seconds = started.elapsed().as_secs_f64();
            // What writing that many indices into memory the process has
            // not touched yet costs on its own (the kernel hands out and
            // clears each page), for the report's reason when the target
            // is not met.
            let started = Instant::now();
            let fresh = std::hint::black_box(vec![u32::MAX; indices.len()]);
            let fresh_seconds = started.elapsed().as_secs_f64();
            drop(fresh);
            report(
                &args[4],
                &indices,
                seconds,
                "distinct colours (bitmap), then cell candidate lists",
                threads,
                Some(fresh_seconds),
            );
        }
        other => panic!("unknown mode {other:?}; {usage}"),
    }
}

/// Writes the indices and prints the timing (and, when measured, the
/// time to fill an index array of the same size in fresh memory).
fn report(
    path: &str,
    indices: &[u32],
    seconds: f64,
    method: &str,
    threads: usize,
    fresh_seconds: Option<f64>,
) {
    let bytes: Vec<u8> = indices.iter().flat_map(|i| i.to_le_bytes()).collect();
    std::fs::write(path, bytes).unwrap_or_else(|e| panic!("writing {path}: {e}"));
    println!(
        "{}",
        json!({
            "seconds": seconds,
            "vectors": indices.len(),
            "method": method,
            "threads": threads,
            "fresh_output_seconds": fresh_seconds,
        })
    );
}

/// A palette codebook of 8-bit sRGB codewords, shown as they are.
fn srgb_codebook(codewords: Vec<f32>) -> Codebook {
    Codebook {
        dimension: 3,
        codewords,
        meaning: Meaning::Pixels(PixelLayout {
            space: ColourSpace::Srgb,
            display: DisplayFormat::Rgb888,
            alpha: AlphaMode::Composite {
                background: [255, 255, 255],
            },
            transparent_entry: false,
            pinned: Vec::new(),
        }),
        training: TrainingFacts {
            seed: 0,
            restarts: 1,
            seeding: Seeding::KMeansPlusPlus,
            iterations: 0,
            stopped_by: StopReason::Converged,
            vectors: 0,
            distinct_vectors: 0,
            mse_scaled: 0.0,
        },
    }
}
