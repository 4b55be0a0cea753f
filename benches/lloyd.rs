//! One Lloyd iteration at three shapes, and bit packing of index streams.
//!
//! `lloyd` with an iteration cap of 1 assigns every vector, moves the
//! codewords to their cluster means, then assigns once more so that the
//! returned distortion matches the moved codewords: two assignment passes
//! and one update per timed iteration. Its distortion before and after is
//! printed before timing, since the result is deterministic.
//!
//! Lloyd runs in a rayon pool of `VQFORGE_BENCH_THREADS` threads (default 1,
//! so the figures line up with the single-thread `nearest` bench); results
//! are bit-identical for any thread count.
//!
//! Packing is checked by a round trip and its byte count before timing.

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, SamplingMode, Throughput};
use vqforge::kmeans::{lloyd, seed_random, LloydOptions};
use vqforge::pack::{pack_indices, packed_len, unpack_indices};
use vqforge::rng::SeededRng;
use vqforge::vectors::VectorSet;

const CODEWORDS: usize = 256;
const PACKED_INDICES: usize = 1_000_000;

fn threads() -> usize {
    match std::env::var("VQFORGE_BENCH_THREADS") {
        Ok(s) => s
            .parse()
            .ok()
            .filter(|&n| n > 0)
            .unwrap_or_else(|| panic!("VQFORGE_BENCH_THREADS={s:?} is not a positive count")),
        Err(_) => 1,
    }
}

fn normal_vectors(seed: u64, n: usize, d: usize) -> VectorSet {
    let mut rng = SeededRng::new(seed);
    let data = (0..n * d).map(|_| rng.normal() as f32).collect();
    VectorSet::new(d, data).expect("finite values")
}

fn bench_lloyd(c: &mut Criterion) {
    let threads = threads();
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .expect("thread pool");
    let opts = LloydOptions {
        max_iterations: 1,
        tolerance: 0.0,
    };
    let mut group = c.benchmark_group(format!("lloyd_one_iteration/k{CODEWORDS}"));
    group.sampling_mode(SamplingMode::Flat);
    // The last shape is the records case of the performance targets.
    for (n, d) in [(200_000, 3), (100_000, 16), (1_000_000, 16)] {
        let vectors = normal_vectors(30 + d as u64, n, d);
        let initial = seed_random(&vectors, CODEWORDS, &mut SeededRng::new(40 + d as u64));
        let r = pool.install(|| lloyd(&vectors, &initial, &opts).expect("valid input"));
        let per_component = |total: f64| total / (n * d) as f64;
        println!(
            "quality n={n} d={d} k={CODEWORDS} threads={threads}: distortion {:.1} -> {:.1} \
             (mse per component {:.6} -> {:.6}), stopped by {}",
            r.history[0],
            r.distortion,
            per_component(r.history[0]),
            per_component(r.distortion),
            r.stopped_by.as_str()
        );
        group.throughput(Throughput::Elements(n as u64));
        group.bench_function(format!("n{n}_d{d}"), |b| {
            b.iter(|| pool.install(|| lloyd(black_box(&vectors), &initial, &opts)))
        });
    }
    group.finish();
}

fn bench_pack(c: &mut Criterion) {
    let mut group = c.benchmark_group(format!("pack/{PACKED_INDICES}_indices"));
    group.throughput(Throughput::Elements(PACKED_INDICES as u64));
    for bits in [8u32, 11] {
        let mut rng = SeededRng::new(50 + u64::from(bits));
        let indices: Vec<u32> = (0..PACKED_INDICES)
            .map(|_| rng.below(1 << bits) as u32)
            .collect();
        let bytes = pack_indices(&indices, bits).expect("indices fit");
        let round_trip = unpack_indices(&bytes, indices.len(), bits).expect("well formed");
        assert_eq!(round_trip, indices, "pack/unpack round trip at {bits} bits");
        assert_eq!(
            Some(bytes.len() as u64),
            packed_len(indices.len() as u64, bits)
        );
        println!(
            "quality pack {bits} bits: {} indices -> {} bytes, round trip exact",
            indices.len(),
            bytes.len()
        );
        group.bench_function(format!("pack_{bits}bit"), |b| {
            b.iter(|| pack_indices(black_box(&indices), bits))
        });
        group.bench_function(format!("unpack_{bits}bit"), |b| {
            b.iter(|| unpack_indices(black_box(&bytes), indices.len(), bits))
        });
    }
    group.finish();
}

criterion_group! {
    name = benches;
    // Each Lloyd iteration takes tenths of a second; command-line flags
    // override these.
    config = Criterion::default()
        .sample_size(10)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(5));
    targets = bench_lloyd, bench_pack
}
criterion_main!(benches);
