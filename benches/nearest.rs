//! Nearest-codeword search on one thread: our k-d tree and our scan one
//! query at a time, the blocked batch kernel (`Encoder::nearest_batch` with
//! the scan method) on all queries at once, the linear oracle, and `kiddo`'s
//! immutable k-d tree as an outside reference.
//!
//! Before anything is timed, every method's answer for every query is
//! checked against `nearest_linear`, and the mismatches and the mean squared
//! distance of the answers are printed, so speed is never read without
//! quality beside it. Our methods must agree exactly (the run stops if they
//! do not); kiddo is only reported, splitting its differences into ties
//! (another codeword at exactly the same distance) and strictly worse answers.
//!
//! Each timed iteration answers all queries; divide criterion's time by
//! the query count for time per query.

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, SamplingMode, Throughput};
use kiddo::{ImmutableKdTree, SquaredEuclidean};
use vqforge::encode::{distance_sq, nearest_linear, Encoder, Nearest, SearchMethod};
use vqforge::rng::SeededRng;

const CODEWORDS: usize = 256;
const QUERIES: usize = 100_000;

fn normal_values(seed: u64, n: usize) -> Vec<f32> {
    let mut rng = SeededRng::new(seed);
    (0..n).map(|_| rng.normal() as f32).collect()
}

fn to_arrays<const D: usize>(flat: &[f32]) -> Vec<[f32; D]> {
    flat.chunks_exact(D)
        .map(|r| r.try_into().expect("chunks have D values"))
        .collect()
}

/// How one method's answers compare with the oracle's.
struct Agreement {
    /// Answers whose index differs from the oracle's (lowest-index) answer.
    differ: usize,
    /// Of those, answers that are strictly farther than the oracle's.
    farther: usize,
    /// Mean over queries of the squared distance to the returned codeword.
    mean_distance_sq: f64,
}

fn agreement(
    codewords: &[f32],
    d: usize,
    queries: &[f32],
    want: &[u32],
    mut answer: impl FnMut(&[f32]) -> u32,
) -> Agreement {
    let mut differ = 0;
    let mut farther = 0;
    let mut total = 0.0f64;
    for (q, &w) in queries.chunks_exact(d).zip(want) {
        let got = answer(q) as usize;
        let got_sq = distance_sq(&codewords[got * d..(got + 1) * d], q);
        total += f64::from(got_sq);
        if got as u32 != w {
            differ += 1;
            let w = w as usize;
            if got_sq > distance_sq(&codewords[w * d..(w + 1) * d], q) {
                farther += 1;
            }
        }
    }
    Agreement {
        differ,
        farther,
        mean_distance_sq: total / want.len() as f64,
    }
}

fn report(name: &str, d: usize, a: &Agreement) {
    println!(
        "quality d={d} k={CODEWORDS} {name:<7} differ from oracle: {:>6} of {QUERIES} \
         (strictly farther: {}), mean squared distance {:.6}",
        a.differ, a.farther, a.mean_distance_sq
    );
}

fn bench_dimension<const D: usize>(c: &mut Criterion) {
    let codewords = normal_values(10 + D as u64, CODEWORDS * D);
    let queries = normal_values(20 + D as u64, QUERIES * D);
    let query_arrays = to_arrays::<D>(&queries);

    let tree = Encoder::with_method(&codewords, D, SearchMethod::KdTree).expect("valid codewords");
    let scan = Encoder::with_method(&codewords, D, SearchMethod::Scan).expect("valid codewords");
    let reference: ImmutableKdTree<f32, D> =
        ImmutableKdTree::new_from_slice(&to_arrays::<D>(&codewords));

    let want: Vec<u32> = queries
        .chunks_exact(D)
        .map(|q| nearest_linear(&codewords, D, q).index)
        .collect();
    let ours = [("kdtree", &tree), ("scan", &scan)];
    for (name, encoder) in ours {
        let a = agreement(&codewords, D, &queries, &want, |q| encoder.nearest(q).index);
        report(name, D, &a);
        assert_eq!(a.differ, 0, "{name} must match the linear oracle exactly");
    }
    let mut found = vec![Nearest::NONE; QUERIES];
    scan.nearest_batch(&queries, &mut found);
    let mut next = found.iter();
    let a = agreement(&codewords, D, &queries, &want, |_| {
        next.next().expect("one answer per query").index
    });
    report("batch", D, &a);
    assert_eq!(a.differ, 0, "batch must match the linear oracle exactly");
    let mut next = query_arrays.iter();
    let a = agreement(&codewords, D, &queries, &want, |_| {
        let q = next.next().expect("one array per query");
        reference.nearest_one::<SquaredEuclidean>(q).item as u32
    });
    report("kiddo", D, &a);

    let mut group = c.benchmark_group(format!("nearest/d{D}_k{CODEWORDS}_q{QUERIES}"));
    group
        .throughput(Throughput::Elements(QUERIES as u64))
        .sampling_mode(SamplingMode::Flat);
    for (name, encoder) in ours {
        group.bench_function(name, |b| {
            b.iter(|| {
                let mut sum = 0u64;
                for q in queries.chunks_exact(D) {
                    sum += u64::from(encoder.nearest(black_box(q)).index);
                }
                sum
            })
        });
    }
    group.bench_function("batch", |b| {
        b.iter(|| {
            scan.nearest_batch(black_box(&queries), &mut found);
            found.iter().map(|f| u64::from(f.index)).sum::<u64>()
        })
    });
    group.bench_function("kiddo", |b| {
        b.iter(|| {
            let mut sum = 0u64;
            for q in &query_arrays {
                sum += reference.nearest_one::<SquaredEuclidean>(black_box(q)).item;
            }
            sum
        })
    });
    group.bench_function("linear", |b| {
        b.iter(|| {
            let mut sum = 0u64;
            for q in queries.chunks_exact(D) {
                sum += u64::from(nearest_linear(&codewords, D, black_box(q)).index);
            }
            sum
        })
    });
    group.finish();
}

fn nearest(c: &mut Criterion) {
    // 3 to 8: where the tree and the batch kernel compete for `Auto`.
    bench_dimension::<3>(c);
    bench_dimension::<4>(c);
    bench_dimension::<5>(c);
    bench_dimension::<8>(c);
    bench_dimension::<16>(c);
}

criterion_group! {
    name = benches;
    // Each iteration is 100 000 queries, so few samples already take seconds;
    // command-line flags override these.
    config = Criterion::default()
        .sample_size(10)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(5));
    targets = nearest
}
criterion_main!(benches);
