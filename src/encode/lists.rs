//! Codewords by distance from chosen codewords (the centres), and the
//! reach that makes a search of such a list exact.
//!
//! # Why a search of a list is the full scan's
//!
//! Let a be any centre and u = √E(x, a), with E = [`super::distance_sq`]
//! as the scan measures it. The scan's answer m has E(x, m) ≤ E(x, a), so
//! its true distance is at most u, up to `f32` rounding of the two
//! measures (a relative error of a few (d + 2)·2⁻²⁴ each). By the triangle
//! inequality ‖a − m‖ ≤ ‖a − x‖ + ‖x − m‖ ≤ 2u; [`reach`] widens that by
//! the margin of [`rounding_margin`] (far above that rounding) and by
//! [`BOUND_FLOOR`] for squares that underflow. Every codeword that near a
//! — a prefix of a's list, sorted by exact distance from a — is measured
//! with [`super::distance_sq`] and the least wins, lowest index on ties:
//! the scan's rule over a set that holds its answer and every codeword
//! tied with it.
//!
//! The anchored search of the encoder keeps lists for a few spread-out
//! codewords; Lloyd passes keep them for every codeword.

use rayon::prelude::*;

/// Absolute slack for distances so small that `f32` squares underflow.
pub(crate) const BOUND_FLOOR: f64 = 1e-15;

/// Relative error of an `f32` squared distance over `d` components, with a
/// wide margin; applied to distances it is wider still.
pub(crate) fn rounding_margin(d: usize) -> f64 {
    4.0 * (d as f64 + 2.0) * f64::from(f32::EPSILON)
}

/// How far from a centre the codewords that can beat it lie, for a vector
/// at distance `u` (f64, exact) from it: 2u widened by `rel` and the floor.
#[inline]
pub(crate) fn reach(u: f64, rel: f64) -> f64 {
    2.0 * u * (1.0 + rel) + BOUND_FLOOR
}

/// The order of a list: by distance, then index (a total order, so every
/// sort of a list gives the same result).
fn by_gap(x: &(f64, u32), y: &(f64, u32)) -> std::cmp::Ordering {
    x.0.total_cmp(&y.0).then(x.1.cmp(&y.1))
}

/// For each centre, every other codeword as (distance from the centre,
/// index), ascending by distance, then index.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct NeighbourLists {
    rows: Vec<(f64, u32)>,
    /// The codebook index of each list's centre.
    centres: Vec<u32>,
    /// Entries per list: the codebook size less one.
    width: usize,
}

impl NeighbourLists {
    /// Lists for every codeword of a codebook of `k`, whose pairwise
    /// distances `gap` gives.
    pub(crate) fn every(k: usize, gap: impl Fn(usize, usize) -> f64 + Sync) -> Self {
        Self::around(k, (0..k as u32).collect(), gap)
    }

    /// Lists for the codewords `centres` of a codebook of `k`; list r
    /// holds every codeword but `centres[r]`. Built on all threads.
    pub(crate) fn around(
        k: usize,
        centres: Vec<u32>,
        gap: impl Fn(usize, usize) -> f64 + Sync,
    ) -> Self {
        let width = k.saturating_sub(1);
        let mut rows = vec![(0.0f64, 0u32); centres.len() * width];
        if width > 0 {
            rows.par_chunks_mut(width)
                .zip(&centres)
                .for_each(|(row, &a)| {
                    let a = a as usize;
                    let others = (0..k).filter(|&j| j != a);
                    for (slot, j) in row.iter_mut().zip(others) {
                        *slot = (gap(a, j), j as u32);
                    }
                    row.sort_unstable_by(by_gap);
                });
        }
        NeighbourLists {
            rows,
            centres,
            width,
        }
    }

    /// The same lists after the codewords moved: every distance measured
    /// again by `gap(centre, j)`, each list re-sorted from its last order
    /// (nearly sorted when the codewords moved little, which an adaptive
    /// sort takes in about one sweep). Equal to new lists: the order is
    /// total.
    pub(crate) fn refresh(&mut self, gap: impl Fn(usize, usize) -> f64 + Sync) {
        if self.width > 0 {
            self.rows
                .par_chunks_mut(self.width)
                .zip(&self.centres)
                .for_each(|(row, &a)| {
                    for (g, j) in row.iter_mut() {
                        *g = gap(a as usize, *j as usize);
                    }
                    row.sort_by(by_gap);
                });
        }
    }

    /// How many lists (centres) there are.
    pub(crate) fn len(&self) -> usize {
        self.centres.len()
    }

    /// The codebook index of list r's centre.
    #[inline]
    pub(crate) fn centre(&self, r: usize) -> u32 {
        self.centres[r]
    }

    /// List r.
    #[inline]
    pub(crate) fn row(&self, r: usize) -> &[(f64, u32)] {
        &self.rows[r * self.width..(r + 1) * self.width]
    }

    /// Whether more than `count` codewords of list r lie within `reach`
    /// (one look-up, no search).
    #[inline]
    pub(crate) fn more_within(&self, r: usize, reach: f64, count: usize) -> bool {
        self.row(r).get(count).is_some_and(|&(gap, _)| gap <= reach)
    }
}
