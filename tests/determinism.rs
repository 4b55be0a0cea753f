//! Same seed, same bytes: the real binary writes byte-identical codebooks,
//! streams and palette images whatever the number of worker threads
//! (`RAYON_NUM_THREADS`) and however often it runs. The design promises
//! this (fixed work chunks, partial sums reduced in chunk order); the
//! inputs are large enough to split into several chunks (more than the
//! 4096 vectors of `vqforge::encode::CHUNK_ROWS`), so the threads really
//! share the work.

use std::path::Path;

mod common;
use common::{data, ok_env};

/// Thread counts to compare; the last repeats one to catch run-to-run
/// differences (e.g. from iteration order of a hash map).
const THREADS: [&str; 4] = ["1", "2", "4", "2"];

/// Runs each command of `commands` in a fresh folder holding the files
/// `setup` makes, once per entry of [`THREADS`], and checks that every run
/// wrote the same bytes into each of `outputs`.
fn same_bytes_every_run(setup: impl Fn(&Path), commands: &[&[&str]], outputs: &[&str]) {
    let mut first: Option<Vec<Vec<u8>>> = None;
    for (run, threads) in THREADS.iter().enumerate() {
        let dir = tempfile::tempdir().unwrap();
        setup(dir.path());
        for args in commands {
            ok_env(dir.path(), args, &[("RAYON_NUM_THREADS", threads)]);
        }
        let files: Vec<Vec<u8>> = outputs
            .iter()
            .map(|name| std::fs::read(dir.path().join(name)).unwrap())
            .collect();
        match &first {
            None => first = Some(files),
            Some(want) => {
                for ((name, got), want) in outputs.iter().zip(&files).zip(want) {
                    assert!(
                        got == want,
                        "{name} differs in run {run} ({threads} threads) from run 0 (1 thread)"
                    );
                }
            }
        }
    }
}

#[test]
fn records_train_and_encode_are_byte_identical() {
    // Four copies of the weather table: 5844 rows, two chunks of work for
    // training and for encoding.
    let setup = |d: &Path| {
        let text = std::fs::read_to_string(data("seattle-weather.csv")).unwrap();
        let (header, body) = text.split_once('\n').unwrap();
        let body = body.trim_end_matches('\n');
        let copies = [body; 4].join("\n");
        std::fs::write(d.join("weather.csv"), format!("{header}\n{copies}\n")).unwrap();
    };
    let train: &[&str] = &[
        "train",
        "weather.csv",
        "-k",
        "12",
        "--seed",
        "11",
        "--restarts",
        "2",
        "-o",
        "w.vqb",
    ];
    let encode: &[&str] = &["encode", "weather.csv", "-b", "w.vqb", "-o", "w.vqs"];
    // Split seeding and framing take other code paths through training.
    let train_split: &[&str] = &[
        "train",
        "weather.csv",
        "-k",
        "8",
        "--frame",
        "2",
        "--seeding",
        "split",
        "-o",
        "f.vqb",
    ];
    let encode_split: &[&str] = &["encode", "weather.csv", "-b", "f.vqb", "-o", "f.vqs"];
    same_bytes_every_run(
        setup,
        &[train, encode, train_split, encode_split],
        &["w.vqb", "w.vqs", "f.vqb", "f.vqs"],
    );
}

#[test]
fn image_palette_train_and_encode_are_byte_identical() {
    // A 160 × 120 crop of the committed photo: 19 200 pixels, thousands of
    // distinct colours. The whole astronaut photo (262 144 pixels) is large
    // enough for colour counting through the RGB bitmap.
    let setup = |d: &Path| {
        let photo = image::open(data("images/chelsea.png")).unwrap();
        photo
            .crop_imm(150, 60, 160, 120)
            .to_rgb8()
            .save(d.join("cat.png"))
            .unwrap();
        std::fs::copy(data("images/astronaut.png"), d.join("astronaut.png")).unwrap();
    };
    let palette: &[&str] = &["palette", "cat.png", "-k", "16", "-o", "p.png"];
    let palette_dither: &[&str] = &[
        "palette",
        "cat.png",
        "-k",
        "8",
        "--dither",
        "floyd-steinberg",
        "--seed",
        "3",
        "-o",
        "d.png",
    ];
    let train: &[&str] = &["train", "cat.png", "-k", "16", "-o", "c.vqb"];
    let encode: &[&str] = &["encode", "cat.png", "-b", "c.vqb", "-o", "c.vqs"];
    let encode_large: &[&str] = &["encode", "astronaut.png", "-b", "c.vqb", "-o", "a.vqs"];
    same_bytes_every_run(
        setup,
        &[palette, palette_dither, train, encode, encode_large],
        &["p.png", "d.png", "c.vqb", "c.vqs", "a.vqs"],
    );
}
