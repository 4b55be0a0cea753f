use super::*;
use crate::encode::{Encoder, SearchMethod};
use crate::rng::SeededRng;

/// Kinds of data that stress different parts of the recheck.
#[derive(Debug, Clone, Copy)]
enum Data {
    /// Standard normal values.
    Normal,
    /// Small integers: many exact ties between codewords.
    Grid,
    /// Around 1e4 with differences of about 1: the expanded form cancels.
    Offset,
    /// Around ±1e4 in every direction, codewords in tight clusters: even
    /// after moving by the codeword mean the expanded form cancels badly.
    Spread,
    /// About 1e-20: squares near the bottom of the `f32` range.
    Tiny,
    /// About 1e-42: subnormal values whose squares underflow to zero.
    Subnormal,
}

fn values(rng: &mut SeededRng, data: Data, n: usize, d: usize, centres: &[f32]) -> Vec<f32> {
    (0..n * d)
        .map(|i| {
            let z = rng.normal() as f32;
            match data {
                Data::Normal => z,
                Data::Grid => (z * 2.0).round(),
                Data::Offset => 1.0e4 + z,
                Data::Spread => {
                    let c = (i / d) % (centres.len() / d);
                    centres[c * d + i % d] + z
                }
                Data::Tiny => 1.0e-20 * z,
                Data::Subnormal => 1.0e-42 * z,
            }
        })
        .collect()
}

/// Codewords of `data`, with some of them repeated (equal codewords must
/// resolve to the lowest index).
fn codewords(rng: &mut SeededRng, data: Data, k: usize, d: usize, centres: &[f32]) -> Vec<f32> {
    let mut cw = values(rng, data, k, d, centres);
    for i in 0..k {
        if k > 1 && rng.below(7) == 0 {
            let from = rng.below(k as u64) as usize;
            let copy: Vec<f32> = cw[from * d..(from + 1) * d].to_vec();
            cw[i * d..(i + 1) * d].copy_from_slice(&copy);
        }
    }
    cw
}

fn bits(n: &Nearest) -> (u32, u32) {
    (n.index, n.distance_sq.to_bits())
}

/// Checks both batch searches against the linear oracles, bit for bit.
fn check(cw: &[f32], d: usize, queries: &[f32], what: &str) {
    let n = queries.len() / d;
    let encoder = Encoder::with_method(cw, d, SearchMethod::Scan).unwrap();
    let mut near = vec![Nearest::NONE; n];
    let mut two = vec![NearestTwo::NONE; n];
    encoder.nearest_batch(queries, &mut near);
    encoder.nearest_two_batch(queries, &mut two);
    for (i, q) in queries.chunks_exact(d).enumerate() {
        let want = nearest_linear(cw, d, q);
        assert_eq!(bits(&near[i]), bits(&want), "{what}: query {i}");
        let want_two = nearest_two_linear(cw, d, q);
        assert_eq!(
            bits(&two[i].nearest),
            bits(&want_two.nearest),
            "{what}: two, query {i}"
        );
        assert_eq!(
            two[i].second_distance_sq.to_bits(),
            want_two.second_distance_sq.to_bits(),
            "{what}: runner-up, query {i}"
        );
    }
}

#[test]
fn batch_equals_linear_oracle_on_every_kind_of_data() {
    let mut rng = SeededRng::new(71);
    let all = [
        Data::Normal,
        Data::Grid,
        Data::Offset,
        Data::Spread,
        Data::Tiny,
        Data::Subnormal,
    ];
    // (d, k, n): k around the panel width and far beyond it, n not a
    // multiple of the tile or the block.
    let shapes = [
        (1, 1, 5),
        (1, 9, 300),
        (2, 3, 77),
        (3, 17, 513),
        (3, 1, 9),
        (3, 256, 1000),
        (2, 100, 333),
        (4, 600, 131),
        (5, 64, 1000),
        (7, 8, 33),
        (8, 255, 260),
        (9, 256, 301),
        (16, 256, 517),
        (16, 7, 100),
        (17, 100, 203),
        (31, 33, 97),
        (64, 600, 70),
        (64, 1, 11),
    ];
    for &(d, k, n) in &shapes {
        let centres: Vec<f32> = (0..4 * d)
            .map(|_| if rng.below(2) == 0 { 1.0e4 } else { -1.0e4 })
            .collect();
        for data in all {
            let cw = codewords(&mut rng, data, k, d, &centres);
            // Some queries are codewords themselves: distance exactly 0.
            let mut q = values(&mut rng, data, n, d, &centres);
            for i in (0..n).step_by(5) {
                let c = rng.below(k as u64) as usize;
                q[i * d..(i + 1) * d].copy_from_slice(&cw[c * d..(c + 1) * d]);
            }
            check(&cw, d, &q, &format!("{data:?} d={d} k={k} n={n}"));
        }
    }
}

#[test]
fn random_shapes_equal_linear_oracle() {
    // Property-style: shapes and data drawn from a seeded generator.
    let mut rng = SeededRng::new(72);
    let all = [Data::Normal, Data::Grid, Data::Offset, Data::Spread];
    for round in 0..60 {
        let d = 1 + rng.below(64) as usize;
        let k = 1 + rng.below(600) as usize;
        let n = 1 + rng.below(700) as usize;
        let data = all[round % all.len()];
        let centres: Vec<f32> = (0..3 * d).map(|_| (rng.normal() * 1.0e4) as f32).collect();
        let cw = codewords(&mut rng, data, k, d, &centres);
        let q = values(&mut rng, data, n, d, &centres);
        check(
            &cw,
            d,
            &q,
            &format!("round {round}: {data:?} d={d} k={k} n={n}"),
        );
    }
}

#[test]
fn recheck_changes_answers_on_cancelling_data() {
    // Tight clusters of codewords far from the origin in different
    // directions: the kernel's scores are off by far more than the gaps
    // between codewords of one cluster, so its own least score often names
    // the wrong codeword. The batch answer must still be the oracle's.
    let mut rng = SeededRng::new(73);
    let (d, k, n) = (16, 200, 400);
    let centres: Vec<f32> = (0..4 * d)
        .map(|_| if rng.below(2) == 0 { 1.0e4 } else { -1.0e4 })
        .collect();
    let cw = codewords(&mut rng, Data::Spread, k, d, &centres);
    let q = values(&mut rng, Data::Spread, n, d, &centres);
    let blocked = Blocked::new(&cw, d);
    let mut tile = blocked.tile();
    let padded = blocked.norms.len();
    let mut wrong = 0;
    for rows in q.chunks(TILE_ROWS * d) {
        blocked.score_tile(rows, &mut tile);
        for (r, x) in rows.chunks_exact(d).enumerate() {
            let scores = &tile.scores[r * padded..][..k];
            let mut approx = 0;
            for (i, &v) in scores.iter().enumerate() {
                if v < scores[approx] {
                    approx = i;
                }
            }
            let exact = nearest_linear(&cw, d, x).index as usize;
            if approx != exact {
                wrong += 1;
            }
        }
    }
    assert!(wrong > 0, "the data must make the unchecked kernel err");
    check(&cw, d, &q, "cancelling clusters");
}

#[test]
fn ties_between_equal_codewords_go_to_the_lowest_index() {
    // Every codeword twice, queries on the integer grid: each query has
    // at least two nearest codewords at exactly the same distance.
    let mut rng = SeededRng::new(74);
    for &(d, k) in &[(3, 20), (12, 64), (20, 300)] {
        let half = values(&mut rng, Data::Grid, k / 2, d, &[]);
        let mut cw = half.clone();
        cw.extend_from_slice(&half);
        let q = values(&mut rng, Data::Grid, 999, d, &[]);
        check(&cw, d, &q, &format!("doubled d={d} k={k}"));
        let encoder = Encoder::with_method(&cw, d, SearchMethod::Scan).unwrap();
        let mut near = vec![Nearest::NONE; 999];
        encoder.nearest_batch(&q, &mut near);
        assert!(near.iter().all(|n| (n.index as usize) < k / 2));
    }
}

#[test]
fn queries_beyond_the_bound_are_measured_exactly() {
    let cw = [0.0f32, 0.0, 1.0, 1.0, -3.0, 2.0];
    let q = [
        f32::NAN,
        0.0,
        f32::INFINITY,
        1.0,
        3.0e19,
        -3.0e19,
        2.0e38,
        2.0e38,
        0.6,
        0.4,
    ];
    check(&cw, 2, &q, "non-finite and huge queries");
    // Codewords so large that every score could overflow.
    let big = [1.0e19f32, 0.0, -1.0e19, 5.0];
    check(&big, 2, &q, "huge codewords");
    // The tree agrees with the linear scan (the oracle) on them too, also
    // where no distance is below +∞ and the scan answers codeword 0.
    for cw in [&cw[..], &big[..]] {
        let tree = Encoder::with_method(cw, 2, SearchMethod::KdTree).unwrap();
        for (i, x) in q.chunks_exact(2).enumerate() {
            assert_eq!(
                bits(&tree.nearest(x)),
                bits(&nearest_linear(cw, 2, x)),
                "tree, query {i}"
            );
        }
    }
}

#[test]
fn tree_encoders_answer_batches_like_single_queries() {
    let mut rng = SeededRng::new(75);
    let cw = values(&mut rng, Data::Grid, 90, 3, &[]);
    let q = values(&mut rng, Data::Grid, 500, 3, &[]);
    let tree = Encoder::with_method(&cw, 3, SearchMethod::KdTree).unwrap();
    let mut near = vec![Nearest::NONE; 500];
    let mut two = vec![NearestTwo::NONE; 500];
    tree.nearest_batch(&q, &mut near);
    tree.nearest_two_batch(&q, &mut two);
    for (i, x) in q.chunks_exact(3).enumerate() {
        assert_eq!(near[i], tree.nearest(x));
        assert_eq!(two[i], tree.nearest_two(x));
    }
}

#[test]
#[should_panic(expected = "batch search")]
fn batch_refuses_a_partial_row() {
    let e = Encoder::with_method(&[0.0, 1.0, 2.0, 3.0], 2, SearchMethod::Scan).unwrap();
    let mut out = vec![Nearest::NONE; 2];
    e.nearest_batch(&[0.0, 1.0, 2.0], &mut out);
}

#[test]
fn round_up_never_rounds_down() {
    for v in [
        0.0f64,
        1e-50,
        -1e-50,
        1.0 + 1e-12,
        -1.0 - 1e-12,
        -1.0 + 1e-12,
        3.0e20 + 1.0,
        f64::from(f32::MAX),
    ] {
        let r = round_up(v);
        assert!(f64::from(r) >= v, "{v} -> {r}");
        // The least such f32: one step down is below v.
        let down = if r > 0.0 {
            f32::from_bits(r.to_bits() - 1)
        } else if r == 0.0 {
            -f32::from_bits(1)
        } else {
            f32::from_bits(r.to_bits() + 1)
        };
        assert!(f64::from(down) < v, "{v} -> {r}");
    }
}

#[test]
fn auto_answers_batches_with_the_tree_only_for_many_colour_codewords() {
    let mut rng = SeededRng::new(76);
    for (d, k, single, batch) in [
        (3, 256, SearchMethod::KdTree, SearchMethod::Scan),
        (3, 2048, SearchMethod::KdTree, SearchMethod::KdTree),
        (5, 256, SearchMethod::KdTree, SearchMethod::Scan),
        (16, 256, SearchMethod::Scan, SearchMethod::Scan),
        (3, 8, SearchMethod::Scan, SearchMethod::Scan),
    ] {
        let e = Encoder::new(&values(&mut rng, Data::Normal, k, d, &[]), d).unwrap();
        assert_eq!(
            (e.method(), e.batch_method()),
            (single, batch),
            "d={d} k={k}"
        );
    }
    let cw = values(&mut rng, Data::Normal, 64, 16, &[]);
    let tree = Encoder::with_method(&cw, 16, SearchMethod::KdTree).unwrap();
    assert_eq!(tree.batch_method(), SearchMethod::KdTree);
}

/// Rows around the `centres` (values near a centre with spread 1): the shape of logs that fall into a
/// few regimes, where anchors pay.
fn grouped(rng: &mut SeededRng, n: usize, d: usize, centres: &[f32]) -> Vec<f32> {
    let groups = centres.len() / d;
    let mut v = Vec::with_capacity(n * d);
    for _ in 0..n {
        let g = rng.below(groups as u64) as usize;
        v.extend((0..d).map(|j| centres[g * d + j] + rng.normal() as f32));
    }
    v
}

#[test]
fn anchored_search_equals_linear_oracle_and_answers_most_queries_itself() {
    let mut rng = SeededRng::new(75);
    for &(d, k, groups) in &[(16, 256, 64), (9, 130, 20), (24, 700, 100)] {
        // Codewords drawn from the data itself, some repeated (ties must
        // go to the lowest index), and the queries on the integer grid in
        // one round so that exact ties between distances occur too.
        let centres: Vec<f32> = (0..groups * d).map(|_| 4.0 * rng.normal() as f32).collect();
        for grid in [false, true] {
            let round = |v: Vec<f32>| -> Vec<f32> {
                if grid {
                    v.into_iter().map(f32::round).collect()
                } else {
                    v
                }
            };
            let mut cw = round(grouped(&mut rng, k, d, &centres));
            for i in (0..k).step_by(9) {
                let from = rng.below(k as u64) as usize;
                let copy: Vec<f32> = cw[from * d..(from + 1) * d].to_vec();
                cw[i * d..(i + 1) * d].copy_from_slice(&copy);
            }
            let n = 3000;
            let mut q = round(grouped(&mut rng, n, d, &centres));
            for i in (0..n).step_by(7) {
                let c = rng.below(k as u64) as usize;
                q[i * d..(i + 1) * d].copy_from_slice(&cw[c * d..(c + 1) * d]);
            }
            let what = format!("d={d} k={k} groups={groups} grid={grid}");
            check(&cw, d, &q, &what);
            // The index-only route of encoding answers the same.
            let encoder = Encoder::with_method(&cw, d, SearchMethod::Scan).unwrap();
            let mut labels = Vec::new();
            encoder.encode_flat_into(&q, &mut labels);
            for (i, x) in q.chunks_exact(d).enumerate() {
                assert_eq!(
                    labels[i],
                    nearest_linear(&cw, d, x).index,
                    "{what}: row {i}"
                );
            }
            // And the lists, not the fallback, answered most of them.
            let blocked = Blocked::new(&cw, d);
            let anchors = blocked.anchors(&cw).expect("k is large enough");
            let by_lists = anchors.answered_by_lists(&cw, &q);
            assert!(
                by_lists * 10 > n * 9,
                "{what}: lists answered {by_lists} of {n}"
            );
        }
    }
}

#[test]
fn small_codebooks_have_no_anchors_and_spread_data_falls_back() {
    let mut rng = SeededRng::new(76);
    let d = 32;
    let small = values(
        &mut rng,
        Data::Normal,
        super::super::anchors::ANCHORED_FROM - 1,
        d,
        &[],
    );
    assert!(Blocked::new(&small, d).anchors(&small).is_none());
    // Standard normal codewords and queries in 32 dimensions: every
    // codeword is about as far as any other, so lists within reach are
    // long and the full kernel answers; the answers stay the scan's.
    let k = 300;
    let cw = values(&mut rng, Data::Normal, k, d, &[]);
    let q = values(&mut rng, Data::Normal, 2500, d, &[]);
    let blocked = Blocked::new(&cw, d);
    let by_lists = blocked.anchors(&cw).unwrap().answered_by_lists(&cw, &q);
    assert!(by_lists * 10 < q.len() / d, "lists answered {by_lists}");
    check(&cw, d, &q, "spread data");
}
