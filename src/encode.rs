//! Exact nearest-codeword search: a k-d tree over the codewords for low
//! dimensions (colours, short frames), a scan for higher ones (a blocked
//! kernel when many queries come at once, see [`Encoder::nearest_batch`]),
//! candidate lists per cell of space for many batches of colours
//! ([`Encoder::nearest_batch_cached`]), and batch encoding in fixed
//! parallel chunks.
//!
//! Never trains. Distances here are squared Euclidean in `f32`, summed in
//! component order; every method computes them the same way, so all methods
//! return the same index, and ties go to the lowest codeword index.

use std::sync::OnceLock;

use rayon::prelude::*;

use crate::error::{Error, ErrorKind, Result};
use crate::vectors::VectorSet;

mod anchors;
mod batch;
mod cells;
mod direct;
pub(crate) mod lists;

pub use cells::CellLists;

/// The nearest codeword to a query.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Nearest {
    /// Codeword index (the lowest one among equally near codewords).
    pub index: u32,
    /// Squared Euclidean distance to it, summed over components in `f32`.
    pub distance_sq: f32,
}

impl Nearest {
    /// No codeword yet: index `u32::MAX` at infinite distance. A
    /// placeholder for buffers that a batch search fills.
    pub const NONE: Nearest = Nearest {
        index: u32::MAX,
        distance_sq: f32::INFINITY,
    };
}

/// How the encoder searches.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SearchMethod {
    /// Choose by dimension and size: single queries use the tree for
    /// d ≤ 8 with k ≥ 16 and the scan otherwise; batches use the scan
    /// unless d ≤ 3 and k > [`BATCH_SCAN_MAX_CODEWORDS`], where the tree
    /// answers them.
    Auto,
    /// k-d tree over the codewords, for single queries and batches.
    KdTree,
    /// Every codeword in turn. Batches go through a kernel: for up to 3
    /// components, exact differences eight codewords at a time; beyond,
    /// the blocked expanded-form kernel with its exact recheck. (An early
    /// exit on the partial sum was measured slower for single queries: the
    /// branch costs more than the work it saves.)
    Scan,
}

/// The most codewords for which [`SearchMethod::Auto`] answers batches of
/// 1 to 3 components with the scan kernel rather than the tree. Measured
/// single-threaded on the 56 506 distinct colours of a 2-megapixel photo
/// with k = 256 (one run each, on a busy machine): the tree took about
/// 230 ns per query, the blocked expanded-form kernel 110 ns and the
/// exact-difference kernel 57 ns, about 0.22 ns per codeword. The scan
/// grows with k and the tree roughly with log k, so past about a thousand
/// codewords the tree is expected to win (an estimate, not measured).
pub const BATCH_SCAN_MAX_CODEWORDS: usize = 1024;

/// Panics unless `rows` holds exactly `count` rows of `d` values: the
/// contract of every batch search.
fn assert_rows(rows: &[f32], count: usize, d: usize) {
    assert_eq!(
        rows.len(),
        count * d,
        "batch search: {} values are not {count} rows of dimension {d}",
        rows.len()
    );
}

/// Rows per parallel work unit. Fixed, so the split of work (and anything
/// summed per chunk) never depends on the number of threads.
pub const CHUNK_ROWS: usize = 4096;

/// Squared distance in `f32`. Below [`SPLIT_FROM`] components the squares
/// are summed in component order. From there on, component j goes to
/// partial sum j mod 8 (in order within each) and the eight sums are then
/// added pairwise, (s₀ + s₄) + (s₂ + s₆) + …: independent sums that run
/// side by side in vector registers, instead of one chain of additions
/// each waiting for the last. Either way a sum of non-negative terms, off
/// by at most γ₍d₋₁₎ of the total (the bound the batch kernel allows for);
/// every search measures with this one function, so they agree on ties.
#[inline(always)]
pub fn distance_sq(a: &[f32], b: &[f32]) -> f32 {
    if a.len() < SPLIT_FROM {
        let mut s = 0.0f32;
        for (x, y) in a.iter().zip(b) {
            let d = x - y;
            s += d * d;
        }
        return s;
    }
    let mut s = [0.0f32; 8];
    let (a8, b8) = (a.chunks_exact(8), b.chunks_exact(8));
    let (ta, tb) = (a8.remainder(), b8.remainder());
    for (x, y) in a8.zip(b8) {
        for l in 0..8 {
            let d = x[l] - y[l];
            s[l] += d * d;
        }
    }
    for (l, (x, y)) in ta.iter().zip(tb).enumerate() {
        let d = x - y;
        s[l] += d * d;
    }
    let [s0, s1, s2, s3, s4, s5, s6, s7] = s;
    ((s0 + s4) + (s2 + s6)) + ((s1 + s5) + (s3 + s7))
}

/// The dimension from which [`distance_sq`] sums in eight parts. Colours
/// (3 or 4 components) keep the plain order, which the colour searches
/// repeat in their own vectorised loops.
pub const SPLIT_FROM: usize = 8;

/// Rows `which` of `rows` (flat, `d` per row) copied out in that order,
/// for a batch search of the rows a shortcut left unanswered.
pub(crate) fn gather_rows(rows: &[f32], d: usize, which: &[usize]) -> Vec<f32> {
    which
        .iter()
        .flat_map(|&j| &rows[j * d..(j + 1) * d])
        .copied()
        .collect()
}

/// The slow, obviously right search: every codeword, lowest index on ties.
/// Used as the oracle in tests.
pub fn nearest_linear(codewords: &[f32], dimension: usize, query: &[f32]) -> Nearest {
    let mut best = Nearest {
        index: 0,
        distance_sq: f32::INFINITY,
    };
    for (i, c) in codewords.chunks_exact(dimension).enumerate() {
        let d = distance_sq(c, query);
        if d < best.distance_sq {
            best = Nearest {
                index: i as u32,
                distance_sq: d,
            };
        }
    }
    best
}

/// The nearest codeword and how far the next one is: what bound-based
/// k-means needs to skip vectors whose nearest codeword cannot change.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NearestTwo {
    /// As [`Encoder::nearest`] returns it.
    pub nearest: Nearest,
    /// Squared distance (in `f32`, like `nearest`) to the nearest codeword
    /// other than `nearest.index`; infinite when there is only one.
    pub second_distance_sq: f32,
}

impl NearestTwo {
    /// Codeword `id` at squared distance `dist` as the only one seen so far.
    pub fn of(id: u32, dist: f32) -> Self {
        NearestTwo {
            nearest: Nearest {
                index: id,
                distance_sq: dist,
            },
            second_distance_sq: f32::INFINITY,
        }
    }

    /// No codeword seen yet (index `u32::MAX`, distances infinite): the
    /// start of a search, and a placeholder for buffers a batch search fills.
    pub const NONE: NearestTwo = NearestTwo {
        nearest: Nearest::NONE,
        second_distance_sq: f32::INFINITY,
    };

    /// Offers codeword `id` at squared distance `dist`: it becomes the
    /// nearest if nearer (or as near with a lower index), else perhaps the
    /// runner-up.
    #[inline]
    pub fn offer(&mut self, id: u32, dist: f32) {
        let best = &mut self.nearest;
        if dist < best.distance_sq || (dist == best.distance_sq && id < best.index) {
            if best.index != u32::MAX {
                self.second_distance_sq = self.second_distance_sq.min(best.distance_sq);
            }
            *best = Nearest {
                index: id,
                distance_sq: dist,
            };
        } else {
            self.second_distance_sq = self.second_distance_sq.min(dist);
        }
    }
}

/// [`nearest_linear`] plus the distance to the runner-up.
pub fn nearest_two_linear(codewords: &[f32], dimension: usize, query: &[f32]) -> NearestTwo {
    let mut two = NearestTwo::NONE;
    for (i, c) in codewords.chunks_exact(dimension).enumerate() {
        two.offer(i as u32, distance_sq(c, query));
    }
    two
}

const LEAF_SIZE: usize = 6;

#[derive(Debug, Clone)]
enum Node {
    /// Codewords `start..end` of the tree's permuted order.
    Leaf { start: u32, end: u32 },
    /// Children hold the points with component `axis` below / at-or-above `value`.
    Split {
        axis: u32,
        value: f32,
        below: u32,
        above: u32,
    },
}

/// A k-d tree over codewords, built once; queries allocate nothing.
#[derive(Debug, Clone)]
pub struct KdTree {
    dimension: usize,
    nodes: Vec<Node>,
    /// Codewords in tree order, flat.
    points: Vec<f32>,
    /// Original index of each point in tree order.
    ids: Vec<u32>,
}

impl KdTree {
    /// Builds the tree: split on the component of widest spread at the median.
    pub fn build(codewords: &[f32], dimension: usize) -> KdTree {
        let k = codewords.len() / dimension;
        let mut order: Vec<u32> = (0..k as u32).collect();
        let mut nodes = Vec::new();
        Self::build_node(codewords, dimension, &mut order, 0, &mut nodes);
        let mut points = Vec::with_capacity(codewords.len());
        for &i in &order {
            let i = i as usize;
            points.extend_from_slice(&codewords[i * dimension..(i + 1) * dimension]);
        }
        KdTree {
            dimension,
            nodes,
            points,
            ids: order,
        }
    }

    fn build_node(
        cw: &[f32],
        d: usize,
        order: &mut [u32],
        offset: usize,
        nodes: &mut Vec<Node>,
    ) -> u32 {
        let me = nodes.len() as u32;
        nodes.push(Node::Leaf {
            start: offset as u32,
            end: (offset + order.len()) as u32,
        });
        if order.len() <= LEAF_SIZE {
            return me;
        }
        let mut axis = 0;
        let mut widest = -1.0f32;
        for a in 0..d {
            let (mut lo, mut hi) = (f32::INFINITY, f32::NEG_INFINITY);
            for &i in order.iter() {
                let v = cw[i as usize * d + a];
                lo = lo.min(v);
                hi = hi.max(v);
            }
            if hi - lo > widest {
                widest = hi - lo;
                axis = a;
            }
        }
        if widest <= 0.0 {
            return me; // all points equal: keep as one leaf
        }
        order.sort_unstable_by(|&x, &y| {
            cw[x as usize * d + axis]
                .total_cmp(&cw[y as usize * d + axis])
                .then(x.cmp(&y))
        });
        let mut mid = order.len() / 2;
        let value = cw[order[mid] as usize * d + axis];
        // Everything strictly below `value` goes left, so equal values never straddle.
        while mid > 0 && cw[order[mid - 1] as usize * d + axis] == value {
            mid -= 1;
        }
        if mid == 0 {
            // The lower half is all equal to the median: split just above it instead.
            mid = order.len() / 2;
            while mid < order.len() && cw[order[mid] as usize * d + axis] == value {
                mid += 1;
            }
            if mid == order.len() {
                return me;
            }
        }
        let value = cw[order[mid] as usize * d + axis];
        let (lo, hi) = order.split_at_mut(mid);
        let below = Self::build_node(cw, d, lo, offset, nodes);
        let above = Self::build_node(cw, d, hi, offset + mid, nodes);
        nodes[me as usize] = Node::Split {
            axis: axis as u32,
            value,
            below,
            above,
        };
        me
    }

    /// The nearest codeword and the distance to the runner-up.
    pub fn nearest_two(&self, query: &[f32]) -> NearestTwo {
        let mut two = NearestTwo::NONE;
        self.search(0, query, &mut two);
        two
    }

    /// The nearest codeword to `query` (exact; lowest index on ties).
    pub fn nearest(&self, query: &[f32]) -> Nearest {
        // Started where the linear scan starts, so a query no codeword
        // has a distance below +∞ from (NaN components, or so far out
        // that every distance overflows) gets its answer, codeword 0.
        let mut best = Nearest {
            index: 0,
            distance_sq: f32::INFINITY,
        };
        self.search(0, query, &mut best);
        best
    }

    fn search<S: Candidates>(&self, node: u32, q: &[f32], found: &mut S) {
        match self.nodes[node as usize] {
            Node::Leaf { start, end } => {
                let d = self.dimension;
                for p in start as usize..end as usize {
                    found.offer(
                        self.ids[p],
                        distance_sq(&self.points[p * d..(p + 1) * d], q),
                    );
                }
            }
            Node::Split {
                axis,
                value,
                below,
                above,
            } => {
                let diff = q[axis as usize] - value;
                let (near, far) = if diff < 0.0 {
                    (below, above)
                } else {
                    (above, below)
                };
                self.search(near, q, found);
                // Points on the far side are at least diff² away (in the same
                // f32 arithmetic), so equality must still be visited for ties.
                if diff * diff <= found.radius_sq() {
                    self.search(far, q, found);
                }
            }
        }
    }
}

/// What a tree search collects: codewords offered one by one, and the
/// squared distance beyond which none can matter any more.
trait Candidates {
    fn offer(&mut self, id: u32, dist: f32);
    fn radius_sq(&self) -> f32;
}

impl Candidates for Nearest {
    #[inline]
    fn offer(&mut self, id: u32, dist: f32) {
        if dist < self.distance_sq || (dist == self.distance_sq && id < self.index) {
            *self = Nearest {
                index: id,
                distance_sq: dist,
            };
        }
    }

    fn radius_sq(&self) -> f32 {
        self.distance_sq
    }
}

impl Candidates for NearestTwo {
    #[inline]
    fn offer(&mut self, id: u32, dist: f32) {
        NearestTwo::offer(self, id, dist)
    }

    /// The runner-up may lie beyond the nearest.
    fn radius_sq(&self) -> f32 {
        self.second_distance_sq
    }
}

/// Finds the nearest codeword for every vector. Build once, query many times.
#[derive(Debug, Clone)]
pub struct Encoder {
    dimension: usize,
    codewords: Vec<f32>,
    /// Searched by single queries when present (else they scan), and by
    /// batches when there is no `blocked`.
    tree: Option<KdTree>,
    /// The codewords laid out for a batch kernel.
    blocked: Option<Kernel>,
    /// Candidate lists per cell of space for [`Encoder::nearest_batch_cached`],
    /// made on its first call (`None` inside: no grid for these codewords).
    cells: OnceLock<Option<cells::Cells>>,
}

/// The batch kernel of a scan.
#[derive(Debug, Clone)]
enum Kernel {
    /// Exact differences, for up to [`direct::MAX_DIMENSION`] components.
    Direct(direct::Direct),
    /// The expanded form with an exact recheck, for more.
    Blocked(batch::Blocked),
}

impl Kernel {
    fn new(codewords: &[f32], dimension: usize) -> Kernel {
        if dimension <= direct::MAX_DIMENSION {
            Kernel::Direct(direct::Direct::new(codewords, dimension))
        } else {
            Kernel::Blocked(batch::Blocked::new(codewords, dimension))
        }
    }
}

impl Encoder {
    /// An encoder over `codewords` (flat, `dimension` per codeword), choosing
    /// the search method with [`SearchMethod::Auto`].
    pub fn new(codewords: &[f32], dimension: usize) -> Result<Encoder> {
        Self::with_method(codewords, dimension, SearchMethod::Auto)
    }

    /// An encoder with an explicit search method.
    pub fn with_method(
        codewords: &[f32],
        dimension: usize,
        method: SearchMethod,
    ) -> Result<Encoder> {
        if dimension == 0 || codewords.is_empty() || codewords.len() % dimension != 0 {
            return Err(Error::new(
                "building encoder",
                ErrorKind::InvalidParameter(format!(
                    "{} values do not make whole codewords of dimension {dimension}",
                    codewords.len()
                )),
            ));
        }
        if codewords.iter().any(|v| !v.is_finite()) {
            return Err(Error::new(
                "building encoder",
                ErrorKind::InvalidParameter("a codeword holds a non-finite value".into()),
            ));
        }
        let k = codewords.len() / dimension;
        let (tree, blocked) = match method {
            SearchMethod::KdTree => (true, false),
            SearchMethod::Scan => (false, true),
            SearchMethod::Auto => (
                dimension <= 8 && k >= 16,
                dimension > direct::MAX_DIMENSION || k <= BATCH_SCAN_MAX_CODEWORDS,
            ),
        };
        Ok(Encoder {
            dimension,
            codewords: codewords.to_vec(),
            tree: tree.then(|| KdTree::build(codewords, dimension)),
            blocked: blocked.then(|| Kernel::new(codewords, dimension)),
            cells: OnceLock::new(),
        })
    }

    /// Components per vector.
    pub fn dimension(&self) -> usize {
        self.dimension
    }

    /// Number of codewords.
    pub fn size(&self) -> usize {
        self.codewords.len() / self.dimension
    }

    /// The method single queries use (never `Auto`).
    pub fn method(&self) -> SearchMethod {
        if self.tree.is_some() {
            SearchMethod::KdTree
        } else {
            SearchMethod::Scan
        }
    }

    /// The method batches use ([`Encoder::nearest_batch`]; never `Auto`):
    /// `Scan` means the blocked kernel.
    pub fn batch_method(&self) -> SearchMethod {
        if self.blocked.is_some() {
            SearchMethod::Scan
        } else {
            SearchMethod::KdTree
        }
    }

    /// Whether batches through the blocked kernel rank each query against
    /// anchors first and measure only the codewords near the nearest one
    /// (codebooks of 128 codewords or more); queries whose lists are long
    /// still go through the whole kernel. The answers are the same.
    pub fn uses_anchors(&self) -> bool {
        matches!(self.blocked, Some(Kernel::Blocked(_))) && anchors::worth_it(self.size())
    }

    /// Nearest codeword of one query of length `dimension`.
    #[inline]
    pub fn nearest(&self, query: &[f32]) -> Nearest {
        match &self.tree {
            Some(t) => t.nearest(query),
            None => nearest_linear(&self.codewords, self.dimension, query),
        }
    }

    /// Nearest codeword of one query and the distance to the runner-up.
    #[inline]
    pub fn nearest_two(&self, query: &[f32]) -> NearestTwo {
        match &self.tree {
            Some(t) => t.nearest_two(query),
            None => nearest_two_linear(&self.codewords, self.dimension, query),
        }
    }

    /// Nearest codewords of many queries: `rows` holds `out.len()` queries
    /// of length `dimension`, flat; `out[i]` receives what
    /// [`Encoder::nearest`] returns for query i, bit for bit. Unless the
    /// tree answers batches (see [`SearchMethod`]), the queries go through
    /// the blocked kernel, several times faster than one query at a time.
    ///
    /// # Panics
    /// If `rows.len()` is not `out.len()` × the dimension.
    pub fn nearest_batch(&self, rows: &[f32], out: &mut [Nearest]) {
        match &self.blocked {
            Some(Kernel::Direct(k)) => k.nearest(&self.codewords, rows, out),
            Some(Kernel::Blocked(b)) => b.nearest(&self.codewords, rows, out),
            None => {
                for (q, o) in self.queries(rows, out.len()).zip(out) {
                    *o = self.nearest(q);
                }
            }
        }
    }

    /// Like [`Encoder::nearest_batch`], bit for bit, for encoders that answer
    /// many batches of three-component queries lying close together, such
    /// as the distinct colours of an image in ascending order. Space around
    /// the codewords is cut into cells, and each query is measured only
    /// against the codewords that can be nearest somewhere in its cell. The
    /// lists are made when a query first lands in a cell and kept in the
    /// encoder for later queries and batches (on any thread), so the first
    /// batches pay for them. Queries outside the cells (far from all
    /// codewords, or not finite) go through the scan kernel, or the tree
    /// when it answers batches; so for three components every answer is
    /// [`nearest_linear`]'s,
    /// bit for bit. Encoders of another dimension answer as
    /// [`Encoder::nearest_batch`].
    ///
    /// # Panics
    /// If `rows.len()` is not `out.len()` × the dimension.
    pub fn nearest_batch_cached(&self, rows: &[f32], out: &mut [Nearest]) {
        if self.dimension != 3 {
            return self.nearest_batch(rows, out);
        }
        assert_rows(rows, out.len(), 3);
        let mut missed = Vec::new();
        match self
            .cells
            .get_or_init(|| cells::Cells::new(&self.codewords))
        {
            Some(cells) => cells.nearest_batch(rows, out, &mut missed),
            None => missed.extend(0..out.len()),
        }
        if missed.is_empty() {
            return;
        }
        if self.blocked.is_none() {
            for &i in &missed {
                out[i] = self.nearest(&rows[i * 3..i * 3 + 3]);
            }
            return;
        }
        let rows: Vec<f32> = missed
            .iter()
            .flat_map(|&i| rows[i * 3..i * 3 + 3].iter().copied())
            .collect();
        let mut found = vec![Nearest::NONE; missed.len()];
        self.nearest_batch(&rows, &mut found);
        for (&i, f) in missed.iter().zip(found) {
            out[i] = f;
        }
    }

    /// How long the candidate lists [`Encoder::nearest_batch_cached`] has
    /// made so far are, or `None` before its first call or when it does not
    /// use cells: what decides its speed.
    pub fn cell_lists(&self) -> Option<CellLists> {
        self.cells.get()?.as_ref().map(cells::Cells::lists)
    }

    /// Like [`Encoder::nearest_batch`], with the distance to the runner-up:
    /// `out[i]` is what [`Encoder::nearest_two`] returns for query i.
    ///
    /// # Panics
    /// If `rows.len()` is not `out.len()` × the dimension.
    pub fn nearest_two_batch(&self, rows: &[f32], out: &mut [NearestTwo]) {
        match &self.blocked {
            Some(Kernel::Direct(k)) => k.nearest_two(&self.codewords, rows, out),
            Some(Kernel::Blocked(b)) => b.nearest_two(&self.codewords, rows, out),
            None => {
                for (q, o) in self.queries(rows, out.len()).zip(out) {
                    *o = self.nearest_two(q);
                }
            }
        }
    }

    /// The `count` queries of `rows`, checked to be exactly that many.
    fn queries<'a>(&self, rows: &'a [f32], count: usize) -> std::slice::ChunksExact<'a, f32> {
        assert_rows(rows, count, self.dimension);
        rows.chunks_exact(self.dimension)
    }

    fn check(&self, dimension: usize) -> Result<()> {
        if dimension != self.dimension {
            return Err(Error::new(
                "encoding",
                ErrorKind::DimensionMismatch {
                    expected: self.dimension,
                    found: dimension,
                },
            ));
        }
        Ok(())
    }

    /// Indices of the nearest codewords of all vectors.
    pub fn encode(&self, vectors: &VectorSet) -> Result<Vec<u32>> {
        let mut out = Vec::new();
        self.encode_into(vectors, &mut out)?;
        Ok(out)
    }

    /// Like [`Encoder::encode`], reusing `out` (cleared first).
    pub fn encode_into(&self, vectors: &VectorSet, out: &mut Vec<u32>) -> Result<()> {
        self.check(vectors.dimension())?;
        self.encode_flat_into(vectors.as_flat(), out);
        Ok(())
    }

    /// Encodes flat rows of this encoder's dimension into `out` (cleared first).
    /// The caller guarantees `flat.len()` is a multiple of the dimension.
    pub fn encode_flat_into(&self, flat: &[f32], out: &mut Vec<u32>) {
        let d = self.dimension;
        out.clear();
        out.resize(flat.len() / d, 0);
        out.par_chunks_mut(CHUNK_ROWS)
            .zip(flat.par_chunks(CHUNK_ROWS * d))
            .for_each(|(labels, rows)| match &self.blocked {
                // Indices only: the kernel skips distances it need not measure.
                Some(Kernel::Blocked(b)) => b.nearest(&self.codewords, rows, labels),
                _ => {
                    let mut found = vec![Nearest::NONE; labels.len()];
                    self.nearest_batch(rows, &mut found);
                    for (l, f) in labels.iter_mut().zip(&found) {
                        *l = f.index;
                    }
                }
            });
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::SeededRng;

    fn random(rng: &mut SeededRng, n: usize, grid: Option<f64>) -> Vec<f32> {
        (0..n)
            .map(|_| match grid {
                // coarse grids make many exact ties
                Some(g) => (rng.unit_f64() * g).floor() as f32,
                None => rng.normal() as f32,
            })
            .collect()
    }

    #[test]
    fn tree_and_scan_equal_linear_oracle_including_ties() {
        let mut rng = SeededRng::new(9);
        for &(d, k) in &[(1, 5), (2, 40), (3, 256), (4, 17), (8, 100), (16, 64)] {
            for grid in [None, Some(4.0)] {
                let cw = random(&mut rng, d * k, grid);
                let tree = Encoder::with_method(&cw, d, SearchMethod::KdTree).unwrap();
                let scan = Encoder::with_method(&cw, d, SearchMethod::Scan).unwrap();
                for _ in 0..2000 {
                    let q = random(&mut rng, d, grid);
                    let want = nearest_linear(&cw, d, &q);
                    assert_eq!(tree.nearest(&q), want, "tree d={d} k={k}");
                    assert_eq!(scan.nearest(&q), want, "scan d={d} k={k}");
                    // Runner-up: the smallest distance over the other codewords.
                    let second = cw
                        .chunks_exact(d)
                        .enumerate()
                        .filter(|&(i, _)| i as u32 != want.index)
                        .map(|(_, c)| distance_sq(c, &q))
                        .fold(f32::INFINITY, f32::min);
                    for e in [&tree, &scan] {
                        let two = e.nearest_two(&q);
                        assert_eq!(two.nearest, want, "two d={d} k={k}");
                        assert_eq!(two.second_distance_sq, second, "runner-up d={d} k={k}");
                    }
                }
            }
        }
    }

    #[test]
    fn duplicate_codewords_resolve_to_lowest_index() {
        let cw = vec![1.0, 1.0, 0.0, 0.0, 1.0, 1.0, 0.0, 0.0];
        for m in [SearchMethod::KdTree, SearchMethod::Scan] {
            let e = Encoder::with_method(&cw, 2, m).unwrap();
            assert_eq!(e.nearest(&[0.9, 0.9]).index, 0);
            assert_eq!(e.nearest(&[0.1, 0.0]).index, 1);
            // equidistant from (0,0) and (1,1): the lower index wins
            assert_eq!(e.nearest(&[0.5, 0.5]).index, 0);
        }
    }

    #[test]
    fn batch_encode_checks_dimension() {
        let e = Encoder::new(&[0.0, 1.0], 1).unwrap();
        let v = VectorSet::new(1, vec![0.2, 0.9, 0.6]).unwrap();
        assert_eq!(e.encode(&v).unwrap(), vec![0, 1, 1]);
        let v2 = VectorSet::new(2, vec![0.0, 0.0]).unwrap();
        assert!(matches!(
            e.encode(&v2).unwrap_err().kind(),
            ErrorKind::DimensionMismatch {
                expected: 1,
                found: 2
            }
        ));
        assert!(Encoder::new(&[], 3).is_err());
    }
}
