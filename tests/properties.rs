//! Property tests: generated inputs checked against invariants that hold
//! for every input, each stated beside its test with the reason it holds.
//!
//! The generator is proptest's ChaCha with a fixed seed and no failure
//! files, so every run (and CI) tries the same cases; counts are small
//! enough for the whole file to take a few seconds.

use proptest::prelude::*;
use proptest::test_runner::{Config, RngAlgorithm, RngSeed};

use vqforge::codebook::{bits_for_size, Codebook, Meaning, TrainingFacts};
use vqforge::encode::{distance_sq, nearest_linear, Encoder, Nearest, SearchMethod};
use vqforge::format::{
    codebook_from_bytes, codebook_to_bytes, stream_from_bytes, stream_to_bytes, StreamHeader,
};
use vqforge::kmeans::{lloyd, seed_random, LloydOptions, Seeding, StopReason};
use vqforge::pack::{pack_indices, packed_len, unpack_indices, BitPacker};
use vqforge::records::decode_vectors;
use vqforge::rng::SeededRng;
use vqforge::vectors::VectorSet;

/// Reproducible runs: fixed seed, deterministic generator, no files.
fn config(cases: u32) -> Config {
    Config {
        cases,
        rng_algorithm: RngAlgorithm::ChaCha,
        rng_seed: RngSeed::Fixed(0x5eed_0f7e57),
        failure_persistence: None,
        ..Config::default()
    }
}

/// Coordinates on a grid of halves in [-3, 3]: small enough that many
/// distances tie exactly, and exact in `f32` so ties are real ties.
fn coordinate() -> impl Strategy<Value = f32> {
    (-6i8..=6).prop_map(|h| f32::from(h) * 0.5)
}

/// `count` rows of `dimension` grid coordinates, flat.
fn rows(
    dimension: usize,
    count: std::ops::RangeInclusive<usize>,
) -> impl Strategy<Value = Vec<f32>> {
    let (lo, hi) = (*count.start(), *count.end());
    prop::collection::vec(coordinate(), lo * dimension..=hi * dimension).prop_map(move |mut v| {
        v.truncate(v.len() / dimension * dimension);
        v
    })
}

/// Codewords and queries of one dimension.
fn codewords_and_queries() -> impl Strategy<Value = (usize, Vec<f32>, Vec<f32>)> {
    (1usize..=6)
        .prop_flat_map(|d| (Just(d), rows(d, 1..=40), rows(d, 0..=60)))
        .prop_filter("at least one codeword", |(_, c, _)| !c.is_empty())
}

fn facts() -> TrainingFacts {
    TrainingFacts {
        seed: 1,
        restarts: 1,
        seeding: Seeding::Random,
        iterations: 1,
        stopped_by: StopReason::Converged,
        vectors: 1,
        distinct_vectors: 1,
        mse_scaled: 0.0,
    }
}

proptest! {
    #![proptest_config(config(128))]

    /// Packing then unpacking gives the indices back, at every width from 1
    /// to 16 bits, in exactly ⌈count × bits / 8⌉ bytes (the layout in
    /// `docs/file-formats.md`), and the streaming packer writes the same
    /// bytes as the batch one. Holds because packing only concatenates the
    /// low `bits` bits of each index: no information is dropped.
    #[test]
    fn packing_round_trips_at_every_width(raw in prop::collection::vec(any::<u32>(), 0..300)) {
        for bits in 1..=16u32 {
            let max = (1u32 << bits) - 1;
            // Keep the largest index in every case: the all-ones pattern.
            let mut indices: Vec<u32> = raw.iter().map(|&x| x & max).collect();
            indices.push(max);
            let packed = pack_indices(&indices, bits).unwrap();
            prop_assert_eq!(
                Some(packed.len() as u64),
                packed_len(indices.len() as u64, bits)
            );
            prop_assert_eq!(
                packed.len() as u64,
                (indices.len() as u64 * u64::from(bits)).div_ceil(8)
            );
            prop_assert_eq!(&unpack_indices(&packed, indices.len(), bits).unwrap(), &indices);
            let mut streaming = BitPacker::new(Vec::new(), bits).unwrap();
            for &i in &indices {
                streaming.push(i).unwrap();
            }
            prop_assert_eq!(streaming.finish().unwrap(), packed);
        }
    }

    /// A stream file of any codebook size up to 2^16 reads back the header
    /// and indices it was written with: the file stores them losslessly
    /// (round trip of the format in `docs/file-formats.md`).
    #[test]
    fn stream_files_round_trip(
        size in 1u64..=65_536,
        raw in prop::collection::vec(any::<u32>(), 0..200),
        fingerprint in any::<u32>(),
        dimension in 1u64..=64,
    ) {
        let indices: Vec<u32> = raw.iter().map(|&x| (u64::from(x) % size) as u32).collect();
        let header = StreamHeader {
            size,
            bits: bits_for_size(size as usize),
            vectors: indices.len() as u64,
            codebook_fingerprint: fingerprint,
            dimension,
            records: None,
            image: None,
        };
        let bytes = stream_to_bytes(&header, &indices).unwrap();
        let (header2, indices2) = stream_from_bytes(&bytes).unwrap();
        prop_assert_eq!(header2, header);
        prop_assert_eq!(indices2, indices);
    }

    /// Every search method (k-d tree, scan, automatic choice; one query at
    /// a time, in batches and in cached batches) returns exactly what the linear scan returns:
    /// the nearest codeword, and among equally near ones the lowest index
    /// (the tie rule documented on `vqforge::encode`). Grid coordinates
    /// make exact ties frequent, including duplicate codewords.
    #[test]
    fn nearest_search_equals_linear_scan((d, codewords, queries) in codewords_and_queries()) {
        let oracle: Vec<Nearest> = queries
            .chunks_exact(d)
            .map(|q| nearest_linear(&codewords, d, q))
            .collect();
        for method in [SearchMethod::KdTree, SearchMethod::Scan, SearchMethod::Auto] {
            let e = Encoder::with_method(&codewords, d, method).unwrap();
            for (q, want) in queries.chunks_exact(d).zip(&oracle) {
                prop_assert_eq!(e.nearest(q), *want, "{:?}, query {:?}", method, q);
                prop_assert_eq!(e.nearest_two(q).nearest, *want, "{:?}", method);
            }
            let mut batch = vec![Nearest::NONE; oracle.len()];
            e.nearest_batch(&queries, &mut batch);
            prop_assert_eq!(&batch, &oracle, "{:?} batch", method);
            // Twice: the second time through the lists the first one made.
            for pass in 0..2 {
                let mut cached = vec![Nearest::NONE; oracle.len()];
                e.nearest_batch_cached(&queries, &mut cached);
                prop_assert_eq!(&cached, &oracle, "{:?} cached batch, pass {}", method, pass);
            }
        }
    }

    /// decode(encode(x)) is the nearest codeword of x: encode through a
    /// codebook file and a stream file, decode the indices, and each
    /// decoded row is a codeword at the minimum distance from its input,
    /// the lowest-index one among ties (linear scan as the oracle).
    #[test]
    fn decode_of_encode_is_the_nearest_codeword((d, codewords, queries) in codewords_and_queries()) {
        prop_assume!(!queries.is_empty());
        let book = Codebook {
            dimension: d,
            codewords,
            meaning: Meaning::Plain,
            training: facts(),
        };
        let book = codebook_from_bytes(&codebook_to_bytes(&book).unwrap()).unwrap();
        let vectors = VectorSet::new(d, queries).unwrap();
        let indices = Encoder::new(&book.codewords, d).unwrap().encode(&vectors).unwrap();
        let header = StreamHeader::for_codebook(&book, indices.len() as u64, None).unwrap();
        let (_, read) = stream_from_bytes(&stream_to_bytes(&header, &indices).unwrap()).unwrap();
        let decoded = decode_vectors(&book.codewords, d, &read);
        prop_assert_eq!(decoded.len(), vectors.as_flat().len());
        for (x, got) in vectors.rows().zip(decoded.chunks_exact(d)) {
            let want = nearest_linear(&book.codewords, d, x);
            prop_assert_eq!(got, book.codeword(want.index as usize));
            prop_assert_eq!(distance_sq(got, x), want.distance_sq);
        }
    }
}

/// Training data for Lloyd: dimension, rows, optional weights, codebook
/// size and the seed of the initial codewords.
fn lloyd_inputs() -> impl Strategy<Value = (usize, Vec<f32>, Option<Vec<f64>>, usize, u64)> {
    (1usize..=3)
        .prop_flat_map(|d| (Just(d), rows(d, 2..=150)))
        .prop_flat_map(|(d, data)| {
            let n = data.len() / d;
            (
                Just(d),
                Just(data),
                prop::option::of(prop::collection::vec(
                    (0u8..=8).prop_map(|w| f64::from(w) * 0.5),
                    n,
                )),
                1usize..=8,
                any::<u64>(),
            )
        })
        .prop_map(|(d, data, weights, k, seed)| {
            // At least one positive weight, so the total is not zero.
            let weights = weights.map(|mut w| {
                w[0] = 1.0;
                w
            });
            (d, data, weights, k, seed)
        })
}

proptest! {
    #![proptest_config(config(128))]

    /// The distortion recorded after each assignment step never rises, and
    /// the final distortion is no larger than the last recorded one. This
    /// is Lloyd's monotonicity (Lloyd 1982; Linde, Buzo & Gray 1980): the
    /// assignment step minimises the distortion over the labels with the
    /// codewords fixed, the update step minimises it over the codewords
    /// with the labels fixed (the weighted mean; an empty cell's codeword
    /// moved onto a vector takes that vector's error to zero), so neither
    /// step can raise it. The labels returned are the nearest codewords.
    #[test]
    fn lloyd_distortion_never_rises((d, data, weights, k, seed) in lloyd_inputs()) {
        let mut vectors = VectorSet::new(d, data).unwrap();
        if let Some(w) = weights {
            vectors = vectors.with_weights(w).unwrap();
        }
        let k = k.min(vectors.len());
        let initial = seed_random(&vectors, k, &mut SeededRng::new(seed));
        let r = lloyd(
            &vectors,
            &initial,
            &LloydOptions { max_iterations: 60, tolerance: 0.0 },
        )
        .unwrap();
        for w in r.history.windows(2) {
            prop_assert!(w[1] <= w[0], "history {:?}", r.history);
        }
        prop_assert!(r.distortion <= *r.history.last().unwrap(), "{} after {:?}", r.distortion, r.history);
        let labels = Encoder::with_method(&r.codewords, d, SearchMethod::Scan)
            .unwrap()
            .encode(&vectors)
            .unwrap();
        prop_assert_eq!(labels, r.labels);
    }
}
