//! A shortcut for the blocked kernel on large codebooks: each query is
//! first ranked against a quarter of the codewords (the anchors, spread
//! over the codebook), and then measured only against the codewords near
//! its nearest anchor.
//!
//! The search of a list is the scan's answer for any anchor, by the
//! argument in [`super::lists`]; the nearest anchor gives the shortest list.
//!
//! A query whose list within reach is long (spread-out data, where the
//! nearest anchor is barely nearer than the rest), or whose distance is
//! not finite, goes through the whole blocked kernel instead; so does the
//! rest of a batch once most of its queries have needed that.

use multiversion::multiversion;

use super::batch::{Answer, Blocked};
use super::lists::{reach, rounding_margin, NeighbourLists};
use super::{distance_sq, gather_rows, Nearest};
use crate::metrics::squared_error;

/// Codebooks from this size on use anchors.
pub(super) const ANCHORED_FROM: usize = 128;

/// Whether a codebook of `k` codewords gets anchors.
pub(super) fn worth_it(k: usize) -> bool {
    k >= ANCHORED_FROM
}
/// At most this many anchors (their lists hold k entries each).
const MAX_ANCHORS: usize = 256;
/// Queries per piece of a batch; after each piece, the batch goes on with
/// anchors only while most of the piece's queries needed no full kernel.
const PIECE: usize = 1024;

/// The anchors of a codebook and each one's list of codewords by distance.
#[derive(Debug, Clone)]
pub(super) struct Anchors {
    /// The kernel over the anchors' codewords.
    kernel: Blocked,
    /// The anchors' codewords, flat.
    codewords: Vec<f32>,
    /// Per anchor, every other codeword by exact distance from it.
    lists: NeighbourLists,
    /// Codebook size.
    size: usize,
    /// Relative margin on the reach, for `f32` rounding.
    rel: f64,
    /// A query measures at most this many codewords of a list; longer
    /// ones go to the full kernel.
    limit: usize,
}

impl Anchors {
    /// Anchors for `codewords` (flat, finite, `d` per codeword), or `None`
    /// for codebooks too small to gain from them.
    pub(super) fn new(codewords: &[f32], d: usize) -> Option<Anchors> {
        let k = codewords.len() / d;
        if !worth_it(k) {
            return None;
        }
        let m = (k / 4).min(MAX_ANCHORS);
        let cw = |i: usize| &codewords[i * d..(i + 1) * d];
        // Farthest-point order from codeword 0: each next anchor is the
        // codeword farthest from those chosen (the first such on ties).
        let mut ids = vec![0u32];
        let mut to_chosen: Vec<f64> = (0..k).map(|j| squared_error(cw(0), cw(j))).collect();
        while ids.len() < m {
            let mut next = 0;
            for (j, &r) in to_chosen.iter().enumerate() {
                if r > to_chosen[next] {
                    next = j;
                }
            }
            ids.push(next as u32);
            for (j, r) in to_chosen.iter_mut().enumerate() {
                *r = r.min(squared_error(cw(next), cw(j)));
            }
        }
        let anchor_words: Vec<f32> = ids.iter().flat_map(|&a| cw(a as usize)).copied().collect();
        Some(Anchors {
            kernel: Blocked::new(&anchor_words, d),
            codewords: anchor_words,
            lists: NeighbourLists::around(k, ids, |a, j| squared_error(cw(a), cw(j)).sqrt()),
            size: k,
            rel: rounding_margin(d),
            limit: k / 8,
        })
    }

    /// Nearest codeword of every row of `rows` (flat) into `out`, as
    /// [`Blocked::nearest`] over the whole codebook (`full`, `codewords`)
    /// answers.
    pub(super) fn nearest<T: Answer>(
        &self,
        full: &Blocked,
        codewords: &[f32],
        rows: &[f32],
        out: &mut [T],
    ) {
        let d = codewords.len() / self.size;
        let n = out.len();
        let mut pending: Vec<usize> = Vec::new();
        let mut near = vec![Nearest::NONE; PIECE.min(n)];
        let mut start = 0;
        while start < n {
            let end = (start + PIECE).min(n);
            let piece = &rows[start * d..end * d];
            let near = &mut near[..end - start];
            self.kernel.nearest_all(&self.codewords, piece, near);
            let before = pending.len();
            search_piece(
                self,
                codewords,
                piece,
                near,
                start,
                &mut out[start..end],
                &mut pending,
            );
            let fell_back = pending.len() - before;
            start = end;
            if 2 * fell_back > near.len() {
                pending.extend(start..n);
                break;
            }
        }
        if pending.is_empty() {
            return;
        }
        let gathered = gather_rows(rows, d, &pending);
        let mut answers: Vec<T> = (0..pending.len())
            .map(|_| T::found(Nearest::NONE))
            .collect();
        full.nearest_all(codewords, &gathered, &mut answers);
        for (&j, a) in pending.iter().zip(answers) {
            out[j] = a;
        }
    }

    /// The scan's answer for `x` from the list of its nearest anchor
    /// (`anchor`: that anchor's position among the anchors and its
    /// [`distance_sq`]), or `None` when the list within reach is longer
    /// than the limit or the distance is not finite.
    #[inline(always)]
    fn search(&self, codewords: &[f32], d: usize, x: &[f32], anchor: Nearest) -> Option<Nearest> {
        let e = anchor.distance_sq;
        if !e.is_finite() {
            return None;
        }
        let a = anchor.index as usize;
        let reach = reach(f64::from(e).sqrt(), self.rel);
        if self.lists.more_within(a, reach, self.limit) {
            return None;
        }
        let mut best = Nearest {
            index: self.lists.centre(a),
            distance_sq: e,
        };
        for &(gap, j) in self.lists.row(a) {
            if gap > reach {
                break;
            }
            let ej = distance_sq(&codewords[j as usize * d..][..d], x);
            if ej < best.distance_sq || (ej == best.distance_sq && j < best.index) {
                best = Nearest {
                    index: j,
                    distance_sq: ej,
                };
            }
        }
        Some(best)
    }

    /// How many of `rows` (flat) the lists answer without the full kernel,
    /// piece by piece as [`Anchors::nearest`] goes: for tests.
    #[cfg(test)]
    pub(super) fn answered_by_lists(&self, codewords: &[f32], rows: &[f32]) -> usize {
        let d = codewords.len() / self.size;
        let n = rows.len() / d;
        let mut near = vec![Nearest::NONE; n];
        self.kernel.nearest_all(&self.codewords, rows, &mut near);
        rows.chunks_exact(d)
            .zip(&near)
            .filter(|(x, a)| self.search(codewords, d, x, **a).is_some())
            .count()
    }
}

/// [`Anchors::search`] for the rows of one piece (`rows`, their nearest
/// anchors `near`), answers into `out`; the positions (from `start`) of
/// rows left to the full kernel go to `pending`. Compiled once for the
/// baseline instruction set and once for AVX2, chosen at run time
/// (`multiversion`), so the measuring vectorises; same arithmetic in both.
#[multiversion(targets("x86_64+avx2+avx"))]
fn search_piece<T: Answer>(
    anchors: &Anchors,
    codewords: &[f32],
    rows: &[f32],
    near: &[Nearest],
    start: usize,
    out: &mut [T],
    pending: &mut Vec<usize>,
) {
    let d = codewords.len() / anchors.size;
    for (j, (x, a)) in rows.chunks_exact(d).zip(near).enumerate() {
        match anchors.search(codewords, d, x, *a) {
            Some(found) => out[j] = T::found(found),
            None => pending.push(start + j),
        }
    }
}
