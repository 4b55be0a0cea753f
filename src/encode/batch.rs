//! Exact nearest-codeword search for many queries at once, for the scan
//! method: a blocked kernel ranks all codewords of a block of queries with
//! the expanded form ‖x‖² − 2·x·c + ‖c‖² (dot products that vectorise), and
//! every codeword that rounding could make the nearest (or the runner-up)
//! is then measured again with [`distance_sq`]. The answers are those of
//! [`nearest_linear`](super::nearest_linear) and
//! [`nearest_two_linear`](super::nearest_two_linear), bit for bit.
//!
//! Work goes tile by tile: a few queries against all codewords, their
//! scores kept only until those queries are answered (memory: a few rows
//! of k scores, never all queries × all codewords).
//!
//! # Why the recheck window is safe
//!
//! Rounding bounds in the standard model fl(a ∘ b) = (a ∘ b)(1 + δ) + η,
//! |δ| ≤ u = 2⁻²⁴, with |η| ≤ 2⁻¹⁵⁰ for products that underflow and η = 0 for
//! sums, and γₙ = n·u / (1 − n·u) (Higham, *Accuracy and Stability of
//! Numerical Algorithms*, ch. 2–3, from memory: an n-term inner product
//! summed in any order is off by at most γₙ·Σ|xⱼ·yⱼ|; a sum of n
//! non-negative terms by at most γₙ₋₁ times the sum).
//!
//! Queries and codewords are first moved by the codeword mean μ in `f32`:
//! x' = fl(x − μ), c' = fl(c − μ), so data far from the origin does not
//! cancel away. Write M = ‖x'‖ + ‖c'‖ and D = ‖x − c‖² (exact).
//!
//! * Moving: each component of (x' − c') − (x − c) is at most
//!   u' = u / (1 − u) times |x'ⱼ| + |c'ⱼ|, so the error e has ‖e‖ ≤ u'·M and
//!   |‖x' − c'‖² − D| ≤ 2‖x' − c'‖·‖e‖ + ‖e‖² ≤ (2u' + u'²)·M².
//! * Kernel: s = ‖c'‖² + Σⱼ x'ⱼ·(−2c'ⱼ), started from the stored norm and
//!   accumulated in `f32` (−2c' is exact), step by step as a product then a
//!   sum, or as one fused multiply-add where the processor has it (one
//!   rounding instead of two, so the bound below holds for both). The stored norm is a sum in `f64`
//!   rounded once to `f32`: off by at most 2u·‖c'‖². The accumulation is an
//!   inner product of d + 1 terms: off by at most γ_{d+1}·(1 + 2u)·(‖c'‖² +
//!   2‖x'‖·‖c'‖) ≤ γ_{d+1}·(1 + 2u)·M². The true s + ‖x'‖² is ‖x' − c'‖²;
//!   ‖x'‖² is the same for every codeword, so it is never computed.
//! * The exact measure E = [`distance_sq`] (differences, squares, a sum of
//!   d non-negative terms) is off from D by at most γ_{d+2}·D, and
//!   D ≤ (1 + u')²·M².
//! * Underflow adds at most 2⁻¹⁵⁰ per product: d in s, d in E, and the norm's
//!   final rounding; each passes through sums that at most double it.
//!
//! So with A = ‖x'‖² + s (never formed: only differences of s are used),
//! |A − E| ≤ b = κ·M² + (4d + 4)·2⁻¹⁴⁹ with
//! κ = γ_{d+1}(1 + 2u) + 2u + 2u' + u'² + γ_{d+2}(1 + u')², taking M with
//! the largest ‖c'‖ of the codebook. If codeword m has the least E, and the
//! kernel's least s is that of codeword a, then E_m ≤ E_a ≤ A_a + b, and
//! any codeword l with E_l ≤ E_m has A_l ≤ E_l + b ≤ A_a + 2b: every
//! codeword with s_l ≤ s_a + 2b is measured exactly, in index order, which
//! keeps the lowest index on ties. For the runner-up, take the two
//! codewords of least s: one of them is not the nearest, so the runner-up's
//! E is at most the larger of their E, itself at most the second least s
//! plus b (shifted by ‖x'‖²); the window is then 2b above the second least s.
//! When even the second least s lies above the nearest's window, the
//! codeword of least s is the only one in it and is measured alone.
//! Queries whose M² could overflow `f32` (or that are not finite) are
//! measured exactly against every codeword.

use std::sync::OnceLock;

use multiversion::multiversion;

use super::anchors::Anchors;
use super::{assert_rows, distance_sq, nearest_linear, nearest_two_linear, Nearest, NearestTwo};

/// Codewords per panel: two 8-wide vector registers per query, so a tile
/// keeps eight independent sums in flight (enough to hide the latency of
/// the additions; one register per query left the kernel waiting on it).
const LANES: usize = 16;
/// Queries scored together: the rows of the micro-kernel's tile.
const TILE_ROWS: usize = 4;

/// The codewords laid out for the blocked kernel, built once per encoder.
#[derive(Debug, Clone)]
pub(super) struct Blocked {
    dimension: usize,
    size: usize,
    /// The codeword mean, subtracted before the expanded form.
    centre: Vec<f32>,
    /// Panels of [`LANES`] codewords: for panel p, component j, lane l the
    /// value −2·c' of codeword p·LANES + l (0 in padding lanes).
    panels: Vec<f32>,
    /// ‖c'‖² per codeword, +∞ in padding lanes so they never rank.
    norms: Vec<f32>,
    /// The largest ‖c'‖ (in `f64`, rounded up a little).
    radius: f64,
    /// κ of the module notes, for this dimension.
    kappa: f64,
    /// The underflow allowance of the module notes.
    floor: f64,
    /// The shortcut for large codebooks ([`Anchors`]), made when
    /// [`Blocked::nearest`] is first called (`None`: too few codewords).
    anchors: OnceLock<Option<Box<Anchors>>>,
}

/// Working space for one tile of queries.
struct Tile {
    /// Moved queries: for component j, row r at j·TILE_ROWS + r.
    moved: Vec<f32>,
    /// ‖x'‖ per row.
    lengths: [f64; TILE_ROWS],
    /// Scores s, row after row, each padded to whole panels.
    scores: Vec<f32>,
    /// Per row, what the kernel found.
    found: [Least; TILE_ROWS],
}

impl Blocked {
    /// Lays out `codewords` (flat, finite, `dimension` per codeword).
    pub(super) fn new(codewords: &[f32], dimension: usize) -> Blocked {
        let d = dimension;
        let k = codewords.len() / d;
        let mut mean = vec![0.0f64; d];
        for c in codewords.chunks_exact(d) {
            for (m, &v) in mean.iter_mut().zip(c) {
                *m += f64::from(v);
            }
        }
        let centre: Vec<f32> = mean.iter().map(|m| (m / k as f64) as f32).collect();
        let panel_count = k.div_ceil(LANES);
        let mut panels = vec![0.0f32; panel_count * d * LANES];
        let mut norms = vec![f32::INFINITY; panel_count * LANES];
        let mut radius = 0.0f64;
        for (i, c) in codewords.chunks_exact(d).enumerate() {
            let (p, l) = (i / LANES, i % LANES);
            let mut norm = 0.0f64;
            for (j, (&v, &m)) in c.iter().zip(&centre).enumerate() {
                let moved = v - m;
                panels[(p * d + j) * LANES + l] = -2.0 * moved;
                norm += f64::from(moved) * f64::from(moved);
            }
            norms[i] = norm as f32;
            radius = radius.max(norm.sqrt());
        }
        let u = f64::from(f32::EPSILON) / 2.0;
        let gamma = |n: usize| {
            let nu = n as f64 * u;
            // Beyond this the bound means nothing; an infinite κ sends every
            // query to the exact scan.
            if nu < 0.5 {
                nu / (1.0 - nu)
            } else {
                f64::INFINITY
            }
        };
        let u1 = u / (1.0 - u);
        let kappa = gamma(d + 1) * (1.0 + 2.0 * u)
            + 2.0 * u
            + 2.0 * u1
            + u1 * u1
            + gamma(d + 2) * (1.0 + u1) * (1.0 + u1);
        Blocked {
            dimension: d,
            size: k,
            centre,
            panels,
            norms,
            // Relative slack for the f64 arithmetic of the bound itself.
            radius: radius * (1.0 + 1e-9),
            kappa: kappa * (1.0 + 1e-9),
            floor: (4 * d + 4) as f64 * 2f64.powi(-149),
            anchors: OnceLock::new(),
        }
    }

    fn tile(&self) -> Tile {
        Tile {
            moved: vec![0.0; TILE_ROWS * self.dimension],
            lengths: [0.0; TILE_ROWS],
            scores: vec![0.0; TILE_ROWS * self.norms.len()],
            found: [Least::NONE; TILE_ROWS],
        }
    }

    /// Nearest codeword of every row of `rows` (flat), into `out`: a
    /// [`Nearest`] each, or only the index (`u32`), which spares measuring
    /// the distance when the scores alone settle the answer. Large
    /// codebooks go through their [`Anchors`] first; the answers are the
    /// same.
    pub(super) fn nearest<T: Answer>(&self, codewords: &[f32], rows: &[f32], out: &mut [T]) {
        let anchors = self
            .anchors
            .get_or_init(|| Anchors::new(codewords, self.dimension).map(Box::new));
        match anchors {
            Some(a) => a.nearest(self, codewords, rows, out),
            None => self.nearest_all(codewords, rows, out),
        }
    }

    /// The anchors [`Blocked::nearest`] uses for `codewords`: for tests.
    #[cfg(test)]
    pub(super) fn anchors(&self, codewords: &[f32]) -> Option<&Anchors> {
        self.anchors
            .get_or_init(|| Anchors::new(codewords, self.dimension).map(Box::new))
            .as_deref()
    }

    /// [`Blocked::nearest`] scoring every codeword.
    pub(super) fn nearest_all<T: Answer>(&self, codewords: &[f32], rows: &[f32], out: &mut [T]) {
        let d = self.dimension;
        let mut found = Vec::new();
        self.each_row(rows, out, |scores, least, x, length, slot| {
            *slot = match self.window(least.first, length) {
                // Only the codeword of least score is in the window (the
                // usual case): no need to look through the scores.
                Some(top) if least.second > top => {
                    let i = lone_least(scores, least);
                    T::of(i as u32, || distance_sq(&codewords[i * d..][..d], x))
                }
                Some(top) => {
                    let mut best = Nearest {
                        index: 0,
                        distance_sq: f32::INFINITY,
                    };
                    at_most(scores, top, &mut found);
                    for &i in &found {
                        let e = distance_sq(&codewords[i * d..][..d], x);
                        if e < best.distance_sq {
                            best = Nearest {
                                index: i as u32,
                                distance_sq: e,
                            };
                        }
                    }
                    T::found(best)
                }
                None => T::found(nearest_linear(codewords, d, x)),
            };
        });
    }

    /// Nearest codeword and runner-up distance of every row, into `out`.
    pub(super) fn nearest_two(&self, codewords: &[f32], rows: &[f32], out: &mut [NearestTwo]) {
        let d = self.dimension;
        let mut found = Vec::new();
        self.each_row(rows, out, |scores, least, x, length, slot| {
            *slot = match self.window(least.first, length) {
                Some(_) => {
                    let top = self.window(least.second, length).unwrap_or(f32::INFINITY);
                    let mut two = NearestTwo::NONE;
                    at_most(scores, top, &mut found);
                    for &i in &found {
                        two.offer(i as u32, distance_sq(&codewords[i * d..][..d], x));
                    }
                    two
                }
                None => nearest_two_linear(codewords, d, x),
            };
        });
    }

    /// The largest score within the recheck window above `score` for a
    /// query of moved length `length`, rounded up to `f32`; `None` when the
    /// bound does not hold (non-finite values, or magnitudes that could
    /// overflow `f32`) and the query must be measured against everything.
    fn window(&self, score: f32, length: f64) -> Option<f32> {
        let m = length + self.radius;
        let m2 = m * m;
        // A NaN length (a NaN query) fails this test too.
        let fits = m2 <= f64::from(f32::MAX) / 4.0;
        if !fits || !score.is_finite() {
            return None;
        }
        let b = self.kappa * m2 + self.floor;
        if !b.is_finite() {
            return None;
        }
        Some(round_up(f64::from(score) + 2.0 * b))
    }

    /// Runs `each(scores, least scores, row, ‖x'‖, out slot)` for every
    /// row, after the kernel has scored the row's tile.
    fn each_row<T>(
        &self,
        rows: &[f32],
        out: &mut [T],
        mut each: impl FnMut(&[f32], Least, &[f32], f64, &mut T),
    ) {
        let d = self.dimension;
        assert_rows(rows, out.len(), d);
        let padded = self.norms.len();
        let mut tile = self.tile();
        for (rows, out) in rows.chunks(TILE_ROWS * d).zip(out.chunks_mut(TILE_ROWS)) {
            self.score_tile(rows, &mut tile);
            for (r, (x, slot)) in rows.chunks_exact(d).zip(out.iter_mut()).enumerate() {
                let scores = &tile.scores[r * padded..][..self.size];
                each(scores, tile.found[r], x, tile.lengths[r], slot);
            }
        }
    }

    /// Scores up to [`TILE_ROWS`] rows against every codeword, and finds
    /// each row's least scores.
    fn score_tile(&self, rows: &[f32], t: &mut Tile) {
        let d = self.dimension;
        let n = rows.len() / d;
        move_tile(rows, &self.centre, &mut t.moved, &mut t.lengths);
        score_panels(&t.moved, &self.panels, &self.norms, &mut t.scores);
        let padded = self.norms.len();
        for r in 0..n {
            t.found[r] = least_two(&t.scores[r * padded..][..padded]);
        }
    }
}

/// Moves up to [`TILE_ROWS`] rows by `centre` into `moved` (component by
/// component: row r of component j at j·TILE_ROWS + r; rows past the end
/// stay 0, their scores are computed and ignored) and sets `lengths` to
/// ‖x'‖ of each, summed in `f64`. Compiled like [`score_panels`].
#[multiversion(targets("x86_64+avx2+avx"))]
fn move_tile(rows: &[f32], centre: &[f32], moved: &mut [f32], lengths: &mut [f64; TILE_ROWS]) {
    let d = centre.len();
    moved.fill(0.0);
    for (r, x) in rows.chunks_exact(d).enumerate() {
        for (j, (&v, &m)) in x.iter().zip(centre).enumerate() {
            moved[j * TILE_ROWS + r] = v - m;
        }
    }
    // The rows' sums are independent, so they share vector registers.
    let mut squares = [0.0f64; TILE_ROWS];
    for x in moved.chunks_exact(TILE_ROWS) {
        let x: &[f32; TILE_ROWS] = x.try_into().expect("whole tiles");
        for (s, &v) in squares.iter_mut().zip(x) {
            *s += f64::from(v) * f64::from(v);
        }
    }
    for (length, s) in lengths.iter_mut().zip(squares) {
        *length = s.sqrt();
    }
}

/// What [`Blocked::nearest`] writes per row: the whole answer, or only
/// its index.
pub(super) trait Answer {
    /// The answer with codeword `index`, whose squared distance `distance`
    /// measures when the answer keeps it.
    fn of(index: u32, distance: impl FnOnce() -> f32) -> Self;

    /// The answer of a whole search.
    fn found(n: Nearest) -> Self;
}

impl Answer for Nearest {
    fn of(index: u32, distance: impl FnOnce() -> f32) -> Self {
        Nearest {
            index,
            distance_sq: distance(),
        }
    }

    fn found(n: Nearest) -> Self {
        n
    }
}

impl Answer for u32 {
    fn of(index: u32, _: impl FnOnce() -> f32) -> Self {
        index
    }

    fn found(n: Nearest) -> Self {
        n.index
    }
}

/// The least and second least score of a row (equal when two codewords
/// share the least), and the lane of the least (the first such lane).
#[derive(Debug, Clone, Copy)]
struct Least {
    first: f32,
    second: f32,
    lane: usize,
}

impl Least {
    const NONE: Least = Least {
        first: f32::INFINITY,
        second: f32::INFINITY,
        lane: 0,
    };
}

/// Scores one tile of moved queries (`moved`, component by component)
/// against every panel into `scores` (row after row, each `norms.len()`
/// long).
///
/// Compiled for the baseline instruction set, for AVX2 and for AVX2 with
/// FMA, and the best the processor offers is chosen at run time (the
/// `multiversion` crate), so the vectorised loops use 8-wide registers
/// where they exist without any build flag; the recheck makes the answers
/// exact whichever runs. The least scores are found
/// afterwards ([`least_two`]): tracking them here would take registers the
/// sums need.
#[multiversion(targets("x86_64+avx2+avx+fma", "x86_64+avx2+avx"))]
fn score_panels(moved: &[f32], panels: &[f32], norms: &[f32], scores: &mut [f32]) {
    // Fused multiply-adds only where the processor has them: elsewhere
    // `mul_add` is a slow library call.
    if multiversion::target::target_cfg_f!(target_feature = "fma") {
        score_panels_with::<true>(moved, panels, norms, scores);
    } else {
        score_panels_with::<false>(moved, panels, norms, scores);
    }
}

#[inline(always)]
fn score_panels_with<const FUSED: bool>(
    moved: &[f32],
    panels: &[f32],
    norms: &[f32],
    scores: &mut [f32],
) {
    let d = moved.len() / TILE_ROWS;
    let padded = norms.len();
    for (p, (panel, norms)) in panels
        .chunks_exact(d * LANES)
        .zip(norms.chunks_exact(LANES))
        .enumerate()
    {
        let norms: &[f32; LANES] = norms.try_into().expect("whole panels");
        let acc = tile_scores::<FUSED>(moved, panel, norms);
        for (r, a) in acc.iter().enumerate() {
            scores[r * padded + p * LANES..][..LANES].copy_from_slice(a);
        }
    }
}

/// Scores of one tile of queries against one panel of codewords: the
/// register-sized core of the kernel. Each lane sums its own terms in
/// component order, each step a fused multiply-add (one rounding) if
/// `FUSED`, else a product and a sum (two); the bound of the module notes
/// holds for both. The loops over rows and lanes have fixed lengths, so
/// they unroll and vectorise.
#[inline(always)]
fn tile_scores<const FUSED: bool>(
    tile: &[f32],
    panel: &[f32],
    norms: &[f32; LANES],
) -> [[f32; LANES]; TILE_ROWS] {
    let mut acc = [*norms; TILE_ROWS];
    for (x, c) in tile.chunks_exact(TILE_ROWS).zip(panel.chunks_exact(LANES)) {
        let x: &[f32; TILE_ROWS] = x.try_into().expect("whole tiles");
        let c: &[f32; LANES] = c.try_into().expect("whole panels");
        for (a, &xr) in acc.iter_mut().zip(x) {
            for (al, &cl) in a.iter_mut().zip(c) {
                *al = if FUSED {
                    xr.mul_add(cl, *al)
                } else {
                    *al + xr * cl
                };
            }
        }
    }
    acc
}

/// The least scores of one row ([`Least`]). Kept apart from the kernel
/// and compiled like it: lane by lane minima over whole panels, then
/// merged; the codeword is then found by [`lone_least`].
#[multiversion(targets("x86_64+avx2+avx"))]
fn least_two(scores: &[f32]) -> Least {
    let mut lo = [f32::INFINITY; LANES];
    let mut hi = [f32::INFINITY; LANES];
    for panel in scores.chunks_exact(LANES) {
        // Plain comparisons rather than f32::min: scores of finite
        // queries are never NaN, and this form is one instruction.
        for ((l, h), &v) in lo.iter_mut().zip(hi.iter_mut()).zip(panel) {
            let above = if v < *l { *l } else { v };
            *h = if above < *h { above } else { *h };
            *l = if v < *l { v } else { *l };
        }
    }
    // Selects rather than branches: which lane holds the least is random,
    // so branches on it would be mispredicted half the time.
    let (mut first, mut second, mut lane) = (f32::INFINITY, f32::INFINITY, 0);
    for (i, (&l, &h)) in lo.iter().zip(&hi).enumerate() {
        let above = if l < first { first } else { l };
        second = if above < second { above } else { second };
        second = if h < second { h } else { second };
        lane = if l < first { i } else { lane };
        first = if l < first { l } else { first };
    }
    Least {
        first,
        second,
        lane,
    }
}

/// The codeword of least score when no other score equals it: the one in
/// `least.lane` (panels are few, so this is a short walk down one lane).
fn lone_least(scores: &[f32], least: Least) -> usize {
    (least.lane..scores.len())
        .step_by(LANES)
        .find(|&i| scores[i] == least.first)
        .expect("the least score is in its lane")
}

/// Collects into `found` (cleared first) every i with `scores[i] ≤ top`,
/// in increasing order. Kept apart from the exact measuring so this loop
/// stays a few vector compares per chunk (compiled like [`score_panels`]).
#[multiversion(targets("x86_64+avx2+avx"))]
fn at_most(scores: &[f32], top: f32, found: &mut Vec<usize>) {
    const CHUNK: usize = LANES;
    found.clear();
    let mut chunks = scores.chunks_exact(CHUNK);
    for (n, c) in chunks.by_ref().enumerate() {
        // Most chunks hold no candidate: one vector compare says so.
        if c.iter().fold(false, |any, &v| any | (v <= top)) {
            let base = n * CHUNK;
            found.extend((0..CHUNK).filter(|&l| c[l] <= top).map(|l| base + l));
        }
    }
    let base = scores.len() - chunks.remainder().len();
    let tail = chunks.remainder().iter().enumerate();
    found.extend(tail.filter(|&(_, &v)| v <= top).map(|(l, _)| base + l));
}

/// The least `f32` at or above `v` (finite `v`).
fn round_up(v: f64) -> f32 {
    let r = v as f32;
    if f64::from(r) >= v {
        r
    } else if r == 0.0 {
        f32::from_bits(1)
    } else if r > 0.0 {
        f32::from_bits(r.to_bits() + 1)
    } else {
        f32::from_bits(r.to_bits() - 1)
    }
}

#[cfg(test)]
#[path = "batch_tests.rs"]
mod tests;
