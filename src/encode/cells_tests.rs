//! Every check compares with the linear scan (`nearest_linear`), the exact
//! oracle: same index, same distance bits.

use rayon::prelude::*;

use super::*;
use crate::encode::{nearest_linear, Encoder, CHUNK_ROWS};
use crate::rng::SeededRng;

/// Kinds of codebooks that stress different parts of the lists.
#[derive(Debug, Clone, Copy)]
enum Book {
    /// Spread over 0..255 like a colour palette.
    Spread,
    /// Half-integers in [-3, 3]: many codewords and queries tie exactly.
    HalfGrid,
    /// Most codewords in two tight clusters, a few far away.
    Clustered,
    /// A few distinct codewords, each repeated many times.
    Duplicates,
    /// On the grey diagonal r = g = b: a line in space.
    Line,
    /// One component always 0: a plane.
    Plane,
    /// Around 1e4 with spacings near the `f32` step there.
    Offset,
    /// Subnormal values: squares underflow to zero.
    Subnormal,
    /// Beyond the magnitude the grid serves: every query goes elsewhere.
    Huge,
    /// Near 1e7, a few `f32` steps apart: too far from zero for the grid's
    /// cube index to be computed exactly enough.
    FarTight,
}

const BOOKS: [Book; 10] = [
    Book::Spread,
    Book::HalfGrid,
    Book::Clustered,
    Book::Duplicates,
    Book::Line,
    Book::Plane,
    Book::Offset,
    Book::Subnormal,
    Book::Huge,
    Book::FarTight,
];

fn codebook(rng: &mut SeededRng, book: Book, k: usize) -> Vec<f32> {
    let mut cw = Vec::with_capacity(3 * k);
    for i in 0..k {
        let mut u = || rng.unit_f64();
        let c: [f64; 3] = match book {
            Book::Spread => [u() * 255.0, u() * 255.0, u() * 255.0],
            Book::HalfGrid => [0; 3].map(|_| ((u() * 13.0).floor() - 6.0) * 0.5),
            Book::Clustered => match i % 8 {
                0 => [u() * 255.0, u() * 255.0, u() * 255.0],
                1..=4 => [40.0 + u(), 200.0 + u() * 0.5, 90.0 + u() * 2.0],
                _ => [128.0 + u() * 0.01, 128.0 + u() * 0.01, 128.0 + u() * 0.01],
            },
            Book::Duplicates => {
                let v = (i % 5) as f64 * 37.0;
                [v, 255.0 - v, v * 0.5]
            }
            Book::Line => {
                let v = u() * 255.0;
                [v, v, v]
            }
            Book::Plane => [u() * 255.0, 0.0, u() * 255.0],
            Book::Offset => [0; 3].map(|_| 1.0e4 + (u() * 64.0).floor() / 64.0),
            Book::Subnormal => [0; 3].map(|_| (u() - 0.5) * 1.0e-40),
            Book::Huge => [0; 3].map(|_| (u() - 0.5) * 1.0e30),
            Book::FarTight => [0; 3].map(|_| 1.0e7 + (u() * 2.0).floor()),
        };
        cw.extend(c.map(|v| v as f32));
    }
    cw
}

/// Queries near and around the codewords: random points in the
/// codewords' box and beyond it, codewords themselves, points halfway
/// between two codewords (ties), and values no grid holds.
fn queries(rng: &mut SeededRng, cw: &[f32], n: usize) -> Vec<f32> {
    let k = cw.len() / 3;
    let mut low = [f32::INFINITY; 3];
    let mut high = [f32::NEG_INFINITY; 3];
    for c in cw.chunks_exact(3) {
        for j in 0..3 {
            low[j] = low[j].min(c[j]);
            high[j] = high[j].max(c[j]);
        }
    }
    let special = [
        f32::NAN,
        f32::INFINITY,
        f32::NEG_INFINITY,
        f32::MAX,
        -3.0e38,
        1.0e20,
        1.0e-42,
        -0.0,
    ];
    let mut q = Vec::with_capacity(3 * n);
    for _ in 0..n {
        let pick = |rng: &mut SeededRng| rng.below(k as u64) as usize * 3;
        let x: [f32; 3] = match rng.below(10) {
            0 => {
                let a = pick(rng);
                [cw[a], cw[a + 1], cw[a + 2]]
            }
            1 | 2 => {
                // Halfway between two codewords: ties in exact arithmetic.
                let (a, b) = (pick(rng), pick(rng));
                [0, 1, 2].map(|j| (cw[a + j] + cw[b + j]) / 2.0)
            }
            3 => {
                // Mostly ordinary, one component special.
                let mut x = [0, 1, 2].map(|j| low[j] + (high[j] - low[j]) * rng.unit_f64() as f32);
                x[rng.below(3) as usize] = special[rng.below(special.len() as u64) as usize];
                x
            }
            4 => {
                // Beyond the codewords' box, by up to its width on each side.
                [0, 1, 2].map(|j| {
                    let w = high[j] - low[j];
                    low[j] - w + 3.0 * w * rng.unit_f64() as f32
                })
            }
            _ => [0, 1, 2].map(|j| low[j] + (high[j] - low[j]) * rng.unit_f64() as f32),
        };
        q.extend(x);
    }
    q
}

/// Sorts rows ascending, component by component (as packed RGB colours
/// arrive); NaN rows last.
fn sorted(rows: &[f32]) -> Vec<f32> {
    let mut r: Vec<[f32; 3]> = rows.chunks_exact(3).map(|x| [x[0], x[1], x[2]]).collect();
    r.sort_by(|a, b| {
        a.iter()
            .zip(b)
            .map(|(x, y)| x.total_cmp(y))
            .find(|o| o.is_ne())
            .unwrap_or(std::cmp::Ordering::Equal)
    });
    r.concat()
}

/// The next `f32` above (`towards` = 1) or below (−1) a finite `x`.
fn step(x: f32, towards: i32) -> f32 {
    if x == 0.0 {
        return f32::from_bits(1) * towards as f32;
    }
    let b = x.to_bits();
    let away = (x > 0.0) == (towards > 0);
    f32::from_bits(if away { b + 1 } else { b - 1 })
}

fn bits(n: &Nearest) -> (u32, u32) {
    (n.index, n.distance_sq.to_bits())
}

/// `nearest_batch_cached` in chunks on all threads, then again (lists
/// reused), each answer equal to the oracle's bit for bit.
fn check(encoder: &Encoder, cw: &[f32], rows: &[f32], what: &str) {
    let n = rows.len() / 3;
    let want: Vec<(u32, u32)> = rows
        .chunks_exact(3)
        .map(|x| bits(&nearest_linear(cw, 3, x)))
        .collect();
    for pass in 0..2 {
        let mut out = vec![Nearest::NONE; n];
        out.par_chunks_mut(CHUNK_ROWS / 8)
            .zip(rows.par_chunks(CHUNK_ROWS / 8 * 3))
            .for_each(|(o, r)| encoder.nearest_batch_cached(r, o));
        for (i, (got, want)) in out.iter().zip(&want).enumerate() {
            assert_eq!(
                bits(got),
                *want,
                "{what}, pass {pass}: query {i} {:?}",
                &rows[i * 3..i * 3 + 3]
            );
        }
    }
}

#[test]
fn cached_batches_equal_linear_oracle_on_every_kind_of_codebook() {
    let mut rng = SeededRng::new(81);
    for book in BOOKS {
        for k in [1, 2, 7, 64, 256, 1024, 2000] {
            let cw = codebook(&mut rng, book, k);
            let encoder = Encoder::new(&cw, 3).unwrap();
            let q = queries(&mut rng, &cw, 3000);
            check(
                &encoder,
                &cw,
                &sorted(&q),
                &format!("{book:?} k={k} sorted"),
            );
            // A fresh encoder meeting the queries in random order, and the
            // first encoder again with its lists already made.
            let fresh = Encoder::new(&cw, 3).unwrap();
            check(&fresh, &cw, &q, &format!("{book:?} k={k} unsorted"));
            check(&encoder, &cw, &q, &format!("{book:?} k={k} reused"));
        }
    }
}

#[test]
fn queries_on_cube_faces_equal_linear_oracle() {
    // Queries exactly on the faces of the grid's cubes and of the halved
    // boxes, and one f32 step to either side: where rounding of the cube
    // index or of a box bound would drop a needed codeword.
    let mut rng = SeededRng::new(82);
    for book in [Book::Spread, Book::Clustered, Book::HalfGrid, Book::Line] {
        let cw = codebook(&mut rng, book, 256);
        let cells = Cells::new(&cw).expect("these codewords get a grid");
        let encoder = Encoder::new(&cw, 3).unwrap();
        let mut faces: Vec<Vec<f32>> = (0..3)
            .map(|j| {
                let mut v = Vec::new();
                for i in 0..=cells.counts[j] * 16 {
                    let at = (cells.origin[j] + i as f64 * cells.side / 16.0) as f32;
                    v.extend([step(at, -1), at, step(at, 1)]);
                }
                v
            })
            .collect();
        for f in &mut faces {
            f.dedup();
        }
        let mut q = Vec::new();
        for _ in 0..20_000 {
            for f in &faces {
                q.push(f[rng.below(f.len() as u64) as usize]);
            }
        }
        check(&encoder, &cw, &sorted(&q), &format!("{book:?} faces"));
    }
}

#[test]
fn the_grid_answers_ordinary_colours_itself() {
    // Otherwise the checks above would pass through the fallback alone.
    let mut rng = SeededRng::new(83);
    let cw = codebook(&mut rng, Book::Clustered, 256);
    let encoder = Encoder::new(&cw, 3).unwrap();
    assert_eq!(encoder.cell_lists(), None);
    let q = queries(&mut rng, &cw, 5000);
    let mut out = vec![Nearest::NONE; 5000];
    encoder.nearest_batch_cached(&q, &mut out);
    let lists = encoder.cell_lists().expect("a grid for colour codewords");
    assert!(lists.lists > 0 && lists.splits > 0, "{lists:?}");
    for book in [Book::Huge, Book::FarTight] {
        let cw = codebook(&mut rng, book, 64);
        let encoder = Encoder::new(&cw, 3).unwrap();
        encoder.nearest_batch_cached(&q, &mut out);
        assert_eq!(encoder.cell_lists(), None, "{book:?}");
    }
}
