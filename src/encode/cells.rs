//! Exact nearest search for many three-component queries through candidate
//! lists per cell of space (bounding-box candidate lists). A codeword c can
//! be the nearest to some point of a box B only if (1) its least distance to
//! B is at most the least, over all codewords, of the greatest distance to
//! B, and (2) no other codeword is nearer than c everywhere in B (the set
//! where r is nearer than c is a half-space, so this is one linear bound per
//! pair, tried against the few codewords of least greatest distance). Each
//! query is measured only against the codewords its cell keeps, with
//! [`distance_sq`](super::distance_sq)'s arithmetic, in index order with
//! strict comparisons, so the answer is that of
//! [`nearest_linear`](super::nearest_linear) bit for bit.
//!
//! Space around the codewords is cut into a grid of equal cubes, sized from
//! the codeword spread; every 4 × 4 × 4 of them form a coarse cube. Lists
//! are made when a query first lands in a cube and kept for the next ones:
//! a coarse cube's list from all codewords, a cube's list from its coarse
//! cube's, and a cube whose list is still long is halved along every axis
//! (again when needed, to a fixed depth), each half's list made from its
//! parent's. The cache lives as long as the encoder; threads share it.
//!
//! Queries outside the grid and queries that are not finite are left to the
//! caller.
//!
//! # Why the lists are safe
//!
//! Bounds are computed in `f64` on boxes widened by [`MARGIN_CELLS`] of a
//! cube, which covers the rounding of the cube index of a query (computed in
//! `f64` from values at most [`MAX_CUBES_FROM_ZERO`] cubes from zero, so
//! off by less than 2⁻²⁵ of a cube). For a query x in box B let E(c) be
//! `distance_sq(c, x)` in `f32` and D(c) the exact squared distance.
//! Codeword values are kept below [`MAX_MAGNITUDE`] and the grid within
//! 1.5 times that, so no `f32` distance overflows; then E(c) = D(c)·(1 + δ) + η with
//! |δ| ≤ 6·2⁻²⁴ (two roundings per term and two sums, Higham ch. 3) and
//! |η| ≤ 4·2⁻¹⁵⁰ (underflowing squares and sums). The answer w at x has
//! E(w) ≤ E(c) for every c.
//!
//! (1) Let c* have the least greatest squared distance T to B. Then
//! D(w) ≤ (T(1 + |δ|) + 2|η|) / (1 − |δ|), and the least squared distance
//! of w to B is at most D(w). A list keeps only codewords whose least
//! squared distance is at most T·(1 + [`RELATIVE_SLACK`]) +
//! [`ABSOLUTE_SLACK`], which is wider still, also against the `f64`
//! rounding of the bounds themselves (relative 2⁻⁵⁰ at most).
//!
//! (2) D(c) − D(r) is linear in x; if its least value over B exceeds
//! (Fᵣ + F꜀)·[`RELATIVE_SLACK`] + [`ABSOLUTE_SLACK`] (F: greatest squared
//! distances to B) plus [`SUM_SLACK`] times the sum of its terms'
//! magnitudes (the `f64` rounding of that least value), then at every x of
//! B, E(c) − E(r) ≥ D(c) − D(r) − |δ|(D(c) + D(r)) − 2|η| > 0: c is never
//! the answer in B and is dropped.
//!
//! A child box's list is made from its parent's list, which holds every
//! codeword that can be the answer anywhere in the parent, so in the child
//! too.

use std::sync::OnceLock;

use multiversion::multiversion;

use super::Nearest;

/// Cubes per coarse cube along each axis.
const COARSE: usize = 4;
/// The most cubes along an axis.
const MAX_CELLS_PER_AXIS: usize = 64;
/// Cubes per codeword wanted in the grid (before the axis limit). Measured
/// from 4 to 64 on two images with k = 256 (a photo, a mosaic of 634 000
/// colours): the search time hardly changes; 32 keeps lists short.
const CELLS_PER_CODEWORD: f64 = 32.0;
/// Lists longer than this (two panels) are split further, up to
/// [`MAX_DEPTH`] times.
const SPLIT_ABOVE: usize = 2 * LANES;
/// How many times a cube may be halved.
const MAX_DEPTH: u32 = 4;
/// Widening of every box, in cubes (see the module notes).
const MARGIN_CELLS: f64 = 1.0e-6;
/// Relative widening of the list threshold (see the module notes).
const RELATIVE_SLACK: f64 = 1.0e-5;
/// Absolute widening of the list threshold: far above any underflow.
const ABSOLUTE_SLACK: f64 = 1.0e-36;
/// Codewords tried as the one nearer than another everywhere in a box.
const RIVALS: usize = 4;
/// Allowance for the `f64` rounding of a sum of three products, relative
/// to the sum of their magnitudes.
const SUM_SLACK: f64 = 1.0e-12;
/// The largest codeword magnitude the grid serves: distances stay finite.
const MAX_MAGNITUDE: f64 = 1.0e15;
/// The most cubes a grid may reach from zero: keeps the `f64` rounding of a
/// query's cube index below 2⁻²⁵ of a cube (2²⁶ · 2⁻⁵¹).
const MAX_CUBES_FROM_ZERO: f64 = (1u64 << 26) as f64;

/// A box: lower and upper corner.
type Bounds = ([f64; 3], [f64; 3]);

/// Candidates per panel: the width of the scan.
const LANES: usize = 8;

/// Up to [`LANES`] candidates of a list, component by component. Unused
/// lanes hold +∞, which is never nearer than a real candidate to a finite
/// query (their distance is +∞).
#[derive(Debug, Clone, Copy)]
#[repr(C, align(32))]
struct Panel {
    components: [[f32; LANES]; 3],
    index: [u32; LANES],
}

/// What a box holds once its list is made.
#[derive(Debug, Clone)]
enum Node {
    /// The candidates in index order, lane after lane: candidate
    /// p·[`LANES`] + l is lane l of panel p.
    Leaf(Box<[Panel]>),
    /// Too many candidates: the box is halved along every axis.
    Split(Box<Split>),
}

#[derive(Debug, Clone)]
struct Split {
    bounds: Bounds,
    /// Where the box is halved: a query with component j below `middle[j]`
    /// goes to the lower half along j.
    middle: [f32; 3],
    depth: u32,
    /// The box's own list, from which the halves' lists are made.
    list: Box<[u16]>,
    /// Child `bit0 + 2·bit1 + 4·bit2`, bit j set for the upper half along j.
    children: [OnceLock<Node>; 8],
}

/// The grid and its lists (filled on demand).
#[derive(Clone)]
pub(super) struct Cells {
    /// Codewords in `f64`, for the bounds.
    points: Vec<[f64; 3]>,
    /// Codewords as given, for the distances.
    codewords: Vec<[f32; 3]>,
    origin: [f64; 3],
    side: f64,
    inverse_side: f64,
    /// Cubes along each axis.
    counts: [usize; 3],
    /// Coarse cubes along each axis.
    coarse_counts: [usize; 3],
    coarse: Vec<OnceLock<Box<[u16]>>>,
    fine: Vec<OnceLock<Node>>,
}

impl std::fmt::Debug for Cells {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Cells")
            .field("origin", &self.origin)
            .field("side", &self.side)
            .field("counts", &self.counts)
            .finish_non_exhaustive()
    }
}

impl Cells {
    /// A grid for `codewords` (flat, three components each), or `None` when
    /// they are too large, too many for 16-bit lists, or all equal.
    pub(super) fn new(codewords: &[f32]) -> Option<Cells> {
        let k = codewords.len() / 3;
        if k == 0 || k > usize::from(u16::MAX) + 1 {
            return None;
        }
        let codewords: Vec<[f32; 3]> = codewords
            .chunks_exact(3)
            .map(|c| [c[0], c[1], c[2]])
            .collect();
        let points: Vec<[f64; 3]> = codewords.iter().map(|c| c.map(f64::from)).collect();
        let mut low = [f64::INFINITY; 3];
        let mut high = [f64::NEG_INFINITY; 3];
        for p in &points {
            for j in 0..3 {
                low[j] = low[j].min(p[j]);
                high[j] = high[j].max(p[j]);
            }
        }
        let widest = (0..3).map(|j| high[j] - low[j]).fold(0.0, f64::max);
        if widest <= 0.0 || (0..3).any(|j| low[j].abs().max(high[j].abs()) > MAX_MAGNITUDE) {
            return None;
        }
        // The grid reaches a quarter of the widest spread beyond the
        // codewords on every side: queries just outside them (colours past
        // the palette's extremes) are served too.
        let pad = widest / 4.0;
        let extent: [f64; 3] = std::array::from_fn(|j| high[j] - low[j] + 2.0 * pad);
        // Thin axes count as a sixteenth of the widest, so a flat or
        // line-like codebook does not ask for tiny cubes.
        let volume: f64 = extent
            .iter()
            .map(|&e| e.max(extent_floor(&extent)))
            .product();
        let wanted = (volume / (k as f64 * CELLS_PER_CODEWORD)).cbrt();
        let limit = extent.iter().fold(0.0f64, |m, &e| m.max(e)) / MAX_CELLS_PER_AXIS as f64;
        let side = wanted.max(limit);
        let counts: [usize; 3] = std::array::from_fn(|j| {
            ((extent[j] / side).ceil() as usize).clamp(1, MAX_CELLS_PER_AXIS)
        });
        let coarse_counts = counts.map(|n| n.div_ceil(COARSE));
        let origin: [f64; 3] = std::array::from_fn(|j| low[j] - pad);
        let reach = (0..3).fold(0.0f64, |m, j| {
            m.max(origin[j].abs())
                .max((origin[j] + counts[j] as f64 * side).abs())
        });
        if reach / side > MAX_CUBES_FROM_ZERO {
            return None;
        }
        Some(Cells {
            points,
            codewords,
            origin,
            side,
            inverse_side: 1.0 / side,
            counts,
            coarse_counts,
            coarse: (0..coarse_counts.iter().product())
                .map(|_| OnceLock::new())
                .collect(),
            fine: (0..counts.iter().product())
                .map(|_| OnceLock::new())
                .collect(),
        })
    }

    /// The nearest codeword of every row of `rows` (flat, three components
    /// each) inside the grid, into `out`; the positions of the others (not
    /// finite, or outside) go to `outside` and their slots are left as
    /// they were.
    pub(super) fn nearest_batch(
        &self,
        rows: &[f32],
        out: &mut [Nearest],
        outside: &mut Vec<usize>,
    ) {
        nearest_each(self, rows, out, outside);
    }

    /// The nearest codeword of `x`, or `None` when `x` lies outside the grid
    /// (or is not finite).
    #[inline(always)]
    fn nearest(&self, x: &[f32; 3]) -> Option<Nearest> {
        let mut cell = [0usize; 3];
        for j in 0..3 {
            let t = (f64::from(x[j]) - self.origin[j]) * self.inverse_side;
            // Also false for NaN.
            if !(t >= 0.0 && t < self.counts[j] as f64) {
                return None;
            }
            cell[j] = t as usize;
        }
        let at = cell[0] + self.counts[0] * (cell[1] + self.counts[1] * cell[2]);
        let mut node = self.fine[at].get_or_init(|| self.make_fine(cell));
        loop {
            match node {
                Node::Leaf(list) => return Some(nearest_in(list, x)),
                Node::Split(split) => {
                    let child = (0..3)
                        .filter(|&j| x[j] >= split.middle[j])
                        .fold(0, |child, j| child | 1 << j);
                    node = split.children[child].get_or_init(|| self.make_child(split, child));
                }
            }
        }
    }

    /// Box of the `width` × `width` × `width` cubes from cube `first`,
    /// widened by the margin.
    fn cube_bounds(&self, first: [usize; 3], width: usize) -> Bounds {
        let low =
            std::array::from_fn(|j| self.origin[j] + (first[j] as f64 - MARGIN_CELLS) * self.side);
        let high = std::array::from_fn(|j| {
            self.origin[j] + ((first[j] + width) as f64 + MARGIN_CELLS) * self.side
        });
        (low, high)
    }

    fn make_fine(&self, cell: [usize; 3]) -> Node {
        let outer = cell.map(|c| c / COARSE);
        let at = outer[0] + self.coarse_counts[0] * (outer[1] + self.coarse_counts[1] * outer[2]);
        let parent = self.coarse[at].get_or_init(|| {
            let all = (0..self.points.len()).map(|i| i as u16);
            let bounds = self.cube_bounds(outer.map(|c| c * COARSE), COARSE);
            self.candidates(&bounds, all).into_boxed_slice()
        });
        self.make_node(self.cube_bounds(cell, 1), parent, 0)
    }

    fn make_child(&self, split: &Split, child: usize) -> Node {
        let (low, high) = split.bounds;
        let mut bounds = (low, high);
        for j in 0..3 {
            let m = f64::from(split.middle[j]);
            if child & (1 << j) == 0 {
                // Queries here have x[j] < middle[j].
                bounds.1[j] = m.max(low[j]);
            } else {
                // Queries here have x[j] ≥ middle[j].
                bounds.0[j] = m.min(high[j]);
            }
        }
        self.make_node(bounds, &split.list, split.depth + 1)
    }

    /// The node for box `bounds` from the list of a box that holds it.
    fn make_node(&self, bounds: Bounds, parent: &[u16], depth: u32) -> Node {
        let list = self.candidates(&bounds, parent.iter().copied());
        if list.len() > SPLIT_ABOVE && depth < MAX_DEPTH {
            let (low, high) = bounds;
            let middle = std::array::from_fn(|j| ((low[j] + high[j]) / 2.0) as f32);
            return Node::Split(Box::new(Split {
                bounds,
                middle,
                depth,
                list: list.into_boxed_slice(),
                children: std::array::from_fn(|_| OnceLock::new()),
            }));
        }
        Node::Leaf(
            list.chunks(LANES)
                .map(|part| {
                    let mut panel = Panel {
                        components: [[f32::INFINITY; LANES]; 3],
                        index: [u32::MAX; LANES],
                    };
                    for (l, &i) in part.iter().enumerate() {
                        let c = self.codewords[usize::from(i)];
                        for (j, &v) in c.iter().enumerate() {
                            panel.components[j][l] = v;
                        }
                        panel.index[l] = u32::from(i);
                    }
                    panel
                })
                .collect(),
        )
    }

    /// The codewords of `from` (in index order) that can be nearest to
    /// some point of `bounds`, in the same order.
    fn candidates(&self, bounds: &Bounds, from: impl Iterator<Item = u16>) -> Vec<u16> {
        let (low, high) = bounds;
        // The greatest squared distance from each codeword to the box; the
        // few least of them name the codewords most likely to be nearer
        // than others everywhere in the box.
        let farthest: Vec<(u16, f64)> = from
            .map(|i| {
                let p = &self.points[usize::from(i)];
                let far = (0..3)
                    .map(|j| {
                        let e = (p[j] - low[j]).max(high[j] - p[j]);
                        e * e
                    })
                    .fold(0.0, |sum, e2| sum + e2);
                (i, far)
            })
            .collect();
        let mut rivals = [(f64::INFINITY, 0u16); RIVALS];
        for &(i, far) in &farthest {
            if far < rivals[RIVALS - 1].0 {
                let mut at = RIVALS - 1;
                while at > 0 && rivals[at - 1].0 > far {
                    rivals[at] = rivals[at - 1];
                    at -= 1;
                }
                rivals[at] = (far, i);
            }
        }
        let threshold = rivals[0].0 * (1.0 + RELATIVE_SLACK) + ABSOLUTE_SLACK;
        farthest
            .into_iter()
            .filter(|&(i, far)| {
                let p = &self.points[usize::from(i)];
                let mut near = 0.0;
                for j in 0..3 {
                    let e = (low[j] - p[j]).max(p[j] - high[j]).max(0.0);
                    near += e * e;
                }
                near <= threshold
                    && !rivals
                        .iter()
                        .any(|&(rival_far, r)| r != i && self.beats(r, rival_far, i, far, bounds))
            })
            .map(|(i, _)| i)
            .collect()
    }

    /// Whether codeword `r` is, with the rounding margins of the module
    /// notes, nearer than codeword `c` to every point of `bounds`
    /// (`r_far`, `c_far`: their greatest squared distances to it).
    fn beats(&self, r: u16, r_far: f64, c: u16, c_far: f64, bounds: &Bounds) -> bool {
        if !r_far.is_finite() {
            return false;
        }
        let (low, high) = bounds;
        let (pr, pc) = (&self.points[usize::from(r)], &self.points[usize::from(c)]);
        // D(c) − D(r) = Σⱼ (rⱼ − cⱼ)(2xⱼ − cⱼ − rⱼ): linear in x, least at
        // a corner, chosen axis by axis.
        let mut least = 0.0;
        let mut size = 0.0;
        for j in 0..3 {
            let slope = pr[j] - pc[j];
            let x = if slope > 0.0 { low[j] } else { high[j] };
            let term = slope * (2.0 * x - pc[j] - pr[j]);
            least += term;
            size += term.abs();
        }
        least > (r_far + c_far) * RELATIVE_SLACK + size * SUM_SLACK + ABSOLUTE_SLACK
    }
}

/// The widest extent over sixteen: the least an axis counts for when the
/// grid is sized.
fn extent_floor(extent: &[f64; 3]) -> f64 {
    extent.iter().fold(0.0f64, |m, &e| m.max(e)) / 16.0
}

/// [`Cells::nearest_batch`]. Compiled once for the baseline instruction set
/// and once for AVX2, chosen at run time (`multiversion`); the arithmetic is
/// the same in both.
#[multiversion(targets("x86_64+avx2+avx"))]
fn nearest_each(cells: &Cells, rows: &[f32], out: &mut [Nearest], outside: &mut Vec<usize>) {
    for (i, (x, slot)) in rows.chunks_exact(3).zip(out.iter_mut()).enumerate() {
        match cells.nearest(&[x[0], x[1], x[2]]) {
            Some(found) => *slot = found,
            None => outside.push(i),
        }
    }
}

/// The first of the least `distance_sq` over a non-empty list in index
/// order: what the linear scan returns when the list holds its answer.
/// Each lane keeps its own least distance with a strict comparison, so its
/// lowest index; among lanes equally near, the lowest index wins.
#[inline(always)]
fn nearest_in(panels: &[Panel], x: &[f32; 3]) -> Nearest {
    let [x0, x1, x2] = *x;
    let mut least = [f32::INFINITY; LANES];
    let mut index = [u32::MAX; LANES];
    for p in panels {
        let [c0, c1, c2] = &p.components;
        for l in 0..LANES {
            let (d0, d1, d2) = (x0 - c0[l], x1 - c1[l], x2 - c2[l]);
            // distance_sq's order: ((0 + d0²) + d1²) + d2², and 0 + d0²
            // is d0² exactly.
            let v = d0 * d0 + d1 * d1 + d2 * d2;
            // Selects by mask, so the loop vectorises rather than branch.
            let keep = u32::from(v < least[l]).wrapping_neg();
            index[l] = (p.index[l] & keep) | (index[l] & !keep);
            least[l] = f32::from_bits((v.to_bits() & keep) | (least[l].to_bits() & !keep));
        }
    }
    // The least distance (halving the lanes), then the lowest index among
    // the lanes that hold it, without branches. No distance is NaN.
    let mut m = least;
    let mut width = LANES / 2;
    while width > 0 {
        for l in 0..width {
            m[l] = if m[l + width] < m[l] {
                m[l + width]
            } else {
                m[l]
            };
        }
        width /= 2;
    }
    let distance_sq = m[0];
    let mut lowest = [0u32; LANES];
    for l in 0..LANES {
        let here = u32::from(least[l] == distance_sq).wrapping_neg();
        lowest[l] = (index[l] & here) | !here;
    }
    let mut width = LANES / 2;
    while width > 0 {
        for l in 0..width {
            lowest[l] = lowest[l].min(lowest[l + width]);
        }
        width /= 2;
    }
    Nearest {
        index: lowest[0],
        distance_sq,
    }
}

/// How long the lists made so far are: see [`Encoder::cell_lists`](super::Encoder::cell_lists).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CellLists {
    /// Coarse cubes whose list is made.
    pub coarse_cells: usize,
    /// Cubes whose list is made (split or not).
    pub cells: usize,
    /// Boxes halved because their list was long.
    pub splits: usize,
    /// Lists that queries are measured against.
    pub lists: usize,
    /// Their mean length (codewords).
    pub mean_length: f64,
    /// The longest of them.
    pub longest: usize,
}

impl Cells {
    /// Counts the lists made so far.
    pub(super) fn lists(&self) -> CellLists {
        fn walk(node: &Node, stats: &mut CellLists, total: &mut usize) {
            match node {
                Node::Leaf(panels) => {
                    let length = panels
                        .iter()
                        .map(|p| p.index.iter().filter(|&&i| i != u32::MAX).count())
                        .sum::<usize>();
                    stats.lists += 1;
                    stats.longest = stats.longest.max(length);
                    *total += length;
                }
                Node::Split(split) => {
                    stats.splits += 1;
                    for child in split.children.iter().filter_map(OnceLock::get) {
                        walk(child, stats, total);
                    }
                }
            }
        }
        let mut stats = CellLists {
            coarse_cells: self.coarse.iter().filter(|c| c.get().is_some()).count(),
            cells: 0,
            splits: 0,
            lists: 0,
            mean_length: 0.0,
            longest: 0,
        };
        let mut total = 0;
        for node in self.fine.iter().filter_map(OnceLock::get) {
            stats.cells += 1;
            walk(node, &mut stats, &mut total);
        }
        stats.mean_length = total as f64 / stats.lists.max(1) as f64;
        stats
    }
}

#[cfg(test)]
#[path = "cells_tests.rs"]
mod tests;
