//! `VectorSet`: contiguous `f32` rows of one runtime dimension, with optional
//! per-row weights. Everything downstream of loading works on this.

use std::borrow::Cow;
use std::sync::atomic::{AtomicU64, Ordering};

use rayon::prelude::*;

use crate::error::{Error, ErrorKind, Position, Result};

/// Grids of at most this many cells (a 512 KiB bitmap) count their
/// occupied cells in a bitmap in [`VectorSet::coarsened`].
const COUNT_BITMAP_CELLS: u64 = 1 << 22;

/// Sets of at most this many rows are sorted by a key (16 bytes a row)
/// when looking for repeats; larger ones by row indices alone (4 bytes).
const KEYED_SORT_ROWS: usize = 1 << 24;

/// Rows per piece of work when counting occupied cells on all threads.
const COUNT_CHUNK_ROWS: usize = 1 << 14;

/// Rows of `dimension` components stored one after another, with optional
/// non-negative weights (a weight of 3 counts the row three times).
#[derive(Debug, Clone, PartialEq)]
pub struct VectorSet {
    dimension: usize,
    data: Vec<f32>,
    weights: Option<Vec<f64>>,
}

impl VectorSet {
    /// Rows from a flat buffer. Fails on dimension 0, a buffer that is not a
    /// whole number of rows, or a non-finite value.
    pub fn new(dimension: usize, data: Vec<f32>) -> Result<Self> {
        if dimension == 0 {
            return Err(Error::new(
                "building vectors",
                ErrorKind::InvalidParameter("the dimension must be at least 1".into()),
            ));
        }
        if data.len() % dimension != 0 {
            return Err(Error::new(
                "building vectors",
                ErrorKind::Shape(format!(
                    "{} values do not make whole rows of {dimension}",
                    data.len()
                )),
            ));
        }
        if let Some(i) = data.iter().position(|v| !v.is_finite()) {
            return Err(Error::new(
                "building vectors",
                ErrorKind::NonFinite {
                    value: data[i] as f64,
                },
            )
            .at(Position {
                record: Some((i / dimension) as u64),
                ..Position::default()
            }));
        }
        Ok(VectorSet {
            dimension,
            data,
            weights: None,
        })
    }

    /// The same rows with a weight each. Weights must be finite and ≥ 0, one per row.
    pub fn with_weights(mut self, weights: Vec<f64>) -> Result<Self> {
        if weights.len() != self.len() {
            return Err(Error::new(
                "building vectors",
                ErrorKind::Shape(format!("{} weights for {} rows", weights.len(), self.len())),
            ));
        }
        if let Some(i) = weights.iter().position(|w| !w.is_finite() || *w < 0.0) {
            return Err(Error::new(
                "building vectors",
                ErrorKind::InvalidParameter(format!(
                    "weight {} of row {i} is not a finite non-negative number",
                    weights[i]
                )),
            ));
        }
        self.weights = Some(weights);
        Ok(self)
    }

    /// Components per row.
    pub fn dimension(&self) -> usize {
        self.dimension
    }

    /// Number of rows.
    pub fn len(&self) -> usize {
        self.data.len() / self.dimension
    }

    /// True when there are no rows.
    pub fn is_empty(&self) -> bool {
        self.data.is_empty()
    }

    /// Row `i`.
    pub fn row(&self, i: usize) -> &[f32] {
        &self.data[i * self.dimension..(i + 1) * self.dimension]
    }

    /// All rows, flat.
    pub fn as_flat(&self) -> &[f32] {
        &self.data
    }

    /// Iterator over rows.
    pub fn rows(&self) -> std::slice::ChunksExact<'_, f32> {
        self.data.chunks_exact(self.dimension)
    }

    /// Weight of row `i` (1 when the set is unweighted).
    pub fn weight(&self, i: usize) -> f64 {
        self.weights.as_ref().map_or(1.0, |w| w[i])
    }

    /// The weights, if any.
    pub fn weights(&self) -> Option<&[f64]> {
        self.weights.as_deref()
    }

    /// Sum of weights (the row count when unweighted).
    pub fn total_weight(&self) -> f64 {
        self.weights
            .as_ref()
            .map_or(self.len() as f64, |w| w.iter().sum())
    }

    /// Number of distinct rows (bitwise equal after normalising −0 to +0).
    pub fn distinct_count(&self) -> usize {
        let order = self.sorted_rows();
        let same = |x: u32, y: u32| self.row_bits(x).eq(self.row_bits(y));
        order.windows(2).filter(|w| !same(w[0], w[1])).count() + usize::from(!order.is_empty())
    }

    /// A row's components as bit patterns, −0 made +0.
    fn row_bits(&self, i: u32) -> impl Iterator<Item = u32> + '_ {
        self.row(i as usize).iter().map(|v| (v + 0.0).to_bits())
    }

    /// Row indices sorted so that equal rows are adjacent, the lower index
    /// first among equals.
    fn sorted_rows(&self) -> Vec<u32> {
        let full = |&x: &u32, &y: &u32| self.row_bits(x).cmp(self.row_bits(y)).then(x.cmp(&y));
        let n = self.len();
        // Rows that already come in order (a photo's colours in sRGB).
        if (1..n as u32).all(|i| self.row_bits(i - 1).lt(self.row_bits(i))) {
            return (0..n as u32).collect();
        }
        if n > KEYED_SORT_ROWS {
            let mut order: Vec<u32> = (0..n as u32).collect();
            order.par_sort_unstable_by(full);
            return order;
        }
        // Sorted by a key of the first two components first (a plain
        // integer sort, several times faster than comparing rows through
        // the data); only runs of equal keys need the whole rows.
        let d = self.dimension;
        let mut keyed: Vec<(u64, u32)> = self
            .data
            .par_chunks(d)
            .enumerate()
            .map(|(i, r)| {
                let bits = |c: usize| r.get(c).map_or(0, |v| u64::from((v + 0.0).to_bits()));
                (bits(0) << 32 | bits(1), i as u32)
            })
            .collect();
        keyed.par_sort_unstable();
        let mut order: Vec<u32> = keyed.iter().map(|&(_, i)| i).collect();
        if d > 2 {
            let mut start = 0;
            for run in keyed.chunk_by(|a, b| a.0 == b.0) {
                if run.len() > 1 {
                    order[start..start + run.len()].sort_unstable_by(full);
                }
                start += run.len();
            }
        }
        order
    }

    /// Identical rows merged into one row whose weight is the sum of theirs,
    /// in order of first appearance. Training on this is exact and often much
    /// cheaper (many pixels share a colour; quantised sensors repeat readings).
    /// Sorts row indices rather than hashing rows, which keeps the extra
    /// memory to a few bytes per row.
    pub fn deduplicated(&self) -> VectorSet {
        self.merged(self.sorted_rows())
    }

    /// [`VectorSet::deduplicated`], borrowing `self` when it already is its
    /// own de-duplicated form (weighted, every row distinct, no −0): no
    /// copy of an input that was de-duplicated before (a photo's colours,
    /// records without repeats).
    pub fn distinct(&self) -> Cow<'_, VectorSet> {
        let order = self.sorted_rows();
        let repeats = order
            .windows(2)
            .any(|w| self.row_bits(w[0]).eq(self.row_bits(w[1])));
        let negative_zero = self.data.iter().any(|v| v.to_bits() == (-0.0f32).to_bits());
        if self.weights.is_some() && !repeats && !negative_zero {
            Cow::Borrowed(self)
        } else {
            Cow::Owned(self.merged(order))
        }
    }

    /// The de-duplicated form, given the rows in [`VectorSet::sorted_rows`] order.
    fn merged(&self, order: Vec<u32>) -> VectorSet {
        let d = self.dimension;
        // (first index, summed weight) per run of equal rows; the weights
        // are summed in index order, as a pass in appearance order would.
        let runs = 1 + order
            .windows(2)
            .filter(|w| !self.row_bits(w[0]).eq(self.row_bits(w[1])))
            .count();
        let mut firsts: Vec<(u32, f64)> = Vec::with_capacity(runs.min(order.len()));
        for &row in &order {
            let w = self.weight(row as usize);
            match firsts.last_mut() {
                Some((first, sum)) if self.row_bits(*first).eq(self.row_bits(row)) => *sum += w,
                _ => firsts.push((row, w)),
            }
        }
        drop(order);
        firsts.sort_unstable_by_key(|&(first, _)| first);
        let mut data = Vec::with_capacity(firsts.len() * d);
        for &(first, _) in &firsts {
            data.extend(self.row(first as usize).iter().map(|v| v + 0.0));
        }
        // Collected afresh: an in-place collect would keep the pairs'
        // twice-as-large buffer.
        let weights = firsts.iter().map(|&(_, w)| w).collect();
        drop(firsts);
        VectorSet {
            dimension: d,
            data,
            weights: Some(weights),
        }
    }

    /// Running sums of the weights, row by row (for drawing rows with
    /// probability ∝ weight).
    pub(crate) fn cumulative_weights(&self) -> Vec<f64> {
        (0..self.len())
            .scan(0.0, |s, i| {
                *s += self.weight(i);
                Some(*s)
            })
            .collect()
    }

    /// A seeded sample of `draws` rows drawn with replacement, each with
    /// probability ∝ its weight (an independent sample of the data the
    /// weighted rows stand for); a row drawn several times appears once,
    /// weighted by its count. Rows keep their order.
    pub fn sampled(&self, draws: usize, rng: &mut crate::rng::SeededRng) -> VectorSet {
        let prefix = self.cumulative_weights();
        let mut picks: Vec<usize> = (0..draws).map(|_| rng.draw(&prefix)).collect();
        picks.sort_unstable();
        let mut data = Vec::new();
        let mut weights: Vec<f64> = Vec::new();
        let mut last = usize::MAX;
        for i in picks {
            if i == last {
                *weights.last_mut().expect("a row was kept") += 1.0;
            } else {
                data.extend_from_slice(self.row(i));
                weights.push(1.0);
                last = i;
            }
        }
        VectorSet {
            dimension: self.dimension,
            data,
            weights: Some(weights),
        }
    }

    /// The rows binned on a regular grid of cubic cells, each occupied cell
    /// replaced by the weighted mean of its rows carrying their total weight:
    /// at most `max_cells` rows that keep the first two moments of every
    /// cell. The cell width is the smallest tried (from a geometric ladder
    /// starting at the bounding box) that fits; cells come out in the order
    /// of their grid coordinates. A cheap stand-in for the full set while
    /// codewords are still far from their places; only sensible for a few
    /// components (colours), where cells hold many rows.
    pub fn coarsened(&self, max_cells: usize) -> VectorSet {
        let d = self.dimension;
        let n = self.len();
        // At least one cell: every row fits in one cell of the widest width.
        let max_cells = max_cells.max(1);
        if n <= max_cells || d > 8 {
            return self.clone();
        }
        let mut lo = vec![f32::INFINITY; d];
        let mut hi = vec![f32::NEG_INFINITY; d];
        for r in self.rows() {
            for c in 0..d {
                lo[c] = lo[c].min(r[c]);
                hi[c] = hi[c].max(r[c]);
            }
        }
        let span = (0..d)
            .map(|c| (hi[c] - lo[c]) as f64)
            .fold(0.0f64, f64::max)
            .max(f64::MIN_POSITIVE);
        // Bits per component for the cell key: 64 / d, at most 21.
        let bits = (64 / d).min(21) as u32;
        let levels = (1u64 << bits) as f64;
        let finest = span / (levels - 1.0);
        let grid = CellGrid {
            rows: self,
            lo: &lo,
            hi: &hi,
            last: levels as u64 - 1,
        };
        // Data rarely fill their bounding box, so the width is searched:
        // the occupied count falls as a power of the width, whose exponent
        // (the data's apparent dimension) is estimated from the tries.
        let mut width = (span / (max_cells as f64).powf(1.0 / d as f64)).max(finest);
        let mut exponent = 2.0f64;
        let mut last: Option<(f64, usize)> = None;
        // The narrowest fitting width tried.
        let mut fitting: Option<f64> = None;
        for _ in 0..8 {
            let occupied = grid.occupied(width, bits);
            if let Some((w0, o0)) = last {
                let ratio = (o0 as f64 / occupied as f64).ln() / (width / w0).ln();
                if ratio.is_finite() && ratio > 0.5 {
                    exponent = ratio.min(d as f64);
                }
            }
            last = Some((width, occupied));
            let fits = occupied <= max_cells;
            if fits && fitting.is_none_or(|w| width < w) {
                fitting = Some(width);
            }
            if fits && (occupied * 2 >= max_cells || width <= finest) {
                break;
            }
            let aim = 0.75 * max_cells as f64 / occupied as f64;
            let step = aim.powf(-1.0 / exponent).clamp(0.25, 4.0);
            width = (width * step).max(finest);
        }
        let width = match fitting {
            Some(w) => w,
            // Still too many cells after the tries: widen until it fits.
            None => loop {
                width *= 2.0;
                if grid.occupied(width, bits) <= max_cells {
                    break width;
                }
            },
        };
        let (data, weights) = grid.means(width, bits);
        VectorSet {
            dimension: d,
            data,
            weights: Some(weights),
        }
    }
}

/// The rows of a set on a regular grid of cubic cells over their bounding
/// box `lo..=hi`, for [`VectorSet::coarsened`]. A component's cell index is
/// capped at `last`.
struct CellGrid<'a> {
    rows: &'a VectorSet,
    lo: &'a [f32],
    hi: &'a [f32],
    last: u64,
}

impl CellGrid<'_> {
    /// Component `c`'s cell on a grid of cells `width` wide: it never falls
    /// as the value grows, so the highest value has the last cell. The
    /// quotient is never negative (no value is below `lo`), so the
    /// conversion's truncation is its floor (and spares a library call on
    /// processors without a rounding instruction).
    fn cell(&self, x: f32, c: usize, width: f64) -> u64 {
        ((((x - self.lo[c]) as f64) / width) as u64).min(self.last)
    }

    /// Cells per component when the whole grid has at most
    /// [`COUNT_BITMAP_CELLS`] cells; a row's cell is then numbered in the
    /// order of its coordinates (mixed radix), the order the packed keys of
    /// [`CellGrid::sorted`] sort in.
    fn extent(&self, width: f64) -> Option<Vec<u64>> {
        let extent: Vec<u64> = (0..self.lo.len())
            .map(|c| self.cell(self.hi[c], c, width) + 1)
            .collect();
        let cells = extent.iter().try_fold(1u64, |p, &m| p.checked_mul(m))?;
        (cells <= COUNT_BITMAP_CELLS).then_some(extent)
    }

    fn number(&self, r: &[f32], extent: &[u64], width: f64) -> u64 {
        (0..r.len()).fold(0u64, |at, c| at * extent[c] + self.cell(r[c], c, width))
    }

    /// A bitmap of the occupied cells, marked on all threads.
    fn occupied_cells(&self, extent: &[u64], width: f64) -> Vec<u64> {
        let cells: u64 = extent.iter().product();
        let words: Vec<AtomicU64> = (0..cells.div_ceil(64)).map(|_| AtomicU64::new(0)).collect();
        let d = self.lo.len();
        self.rows
            .data
            .par_chunks(COUNT_CHUNK_ROWS * d)
            .for_each(|rows| {
                for r in rows.chunks_exact(d) {
                    let at = self.number(r, extent, width);
                    let word = &words[(at / 64) as usize];
                    let bit = 1u64 << (at % 64);
                    // Most rows land in a cell already marked: the load
                    // spares the locked write and keeps the line shared.
                    if word.load(Ordering::Relaxed) & bit == 0 {
                        word.fetch_or(bit, Ordering::Relaxed);
                    }
                }
            });
        words.into_iter().map(AtomicU64::into_inner).collect()
    }

    /// How many cells of width `width` hold a row.
    fn occupied(&self, width: f64, bits: u32) -> usize {
        match self.extent(width) {
            Some(extent) => self
                .occupied_cells(&extent, width)
                .iter()
                .map(|w| w.count_ones() as usize)
                .sum(),
            None => {
                let keyed = self.sorted(width, bits);
                1 + keyed.windows(2).filter(|w| w[0].0 != w[1].0).count()
            }
        }
    }

    /// (cell key, row) of every row, sorted: rows of a cell together, in
    /// row order. Keys are unique (the row index is part of each), so the
    /// parallel sort's order is the sequential one.
    fn sorted(&self, width: f64, bits: u32) -> Vec<(u64, u32)> {
        let d = self.lo.len();
        let mut keyed: Vec<(u64, u32)> = self
            .rows
            .rows()
            .enumerate()
            .map(|(i, r)| {
                let key = (0..d).fold(0u64, |key, c| (key << bits) | self.cell(r[c], c, width));
                (key, i as u32)
            })
            .collect();
        keyed.par_sort_unstable();
        keyed
    }

    /// The weighted mean and total weight of each occupied cell of width
    /// `width` (cells with positive weight), in cell order. Each cell's
    /// sums run in row order whichever way the cells are found.
    fn means(&self, width: f64, bits: u32) -> (Vec<f32>, Vec<f64>) {
        let d = self.lo.len();
        let (sums, totals) = match self.extent(width) {
            Some(extent) => self.sums_by_bitmap(&extent, width),
            None => self.sums_by_sorting(width, bits),
        };
        let mut data = Vec::new();
        let mut weights = Vec::new();
        for (cell, &total) in sums.chunks_exact(d).zip(&totals) {
            if total > 0.0 {
                data.extend(cell.iter().map(|s| (s / total) as f32));
                weights.push(total);
            }
        }
        (data, weights)
    }

    /// Weighted sums and total weight per occupied cell, in cell order:
    /// each row's slot is its cell's rank among the occupied cells (found
    /// on all threads), then the sums run in row order.
    fn sums_by_bitmap(&self, extent: &[u64], width: f64) -> (Vec<f64>, Vec<f64>) {
        let d = self.lo.len();
        let occupied = self.occupied_cells(extent, width);
        let mut before = Vec::with_capacity(occupied.len());
        let mut count = 0u32;
        for w in &occupied {
            before.push(count);
            count += w.count_ones();
        }
        let mut slots = vec![0u32; self.rows.len()];
        slots
            .par_chunks_mut(COUNT_CHUNK_ROWS)
            .zip(self.rows.data.par_chunks(COUNT_CHUNK_ROWS * d))
            .for_each(|(slots, rows)| {
                for (slot, r) in slots.iter_mut().zip(rows.chunks_exact(d)) {
                    let at = self.number(r, extent, width);
                    let word = (at / 64) as usize;
                    let below = occupied[word] & ((1u64 << (at % 64)) - 1);
                    *slot = before[word] + below.count_ones();
                }
            });
        let mut sums = vec![0.0f64; count as usize * d];
        let mut totals = vec![0.0f64; count as usize];
        for (i, (r, &slot)) in self.rows.rows().zip(&slots).enumerate() {
            let slot = slot as usize;
            let w = self.rows.weight(i);
            totals[slot] += w;
            for (s, &x) in sums[slot * d..(slot + 1) * d].iter_mut().zip(r) {
                *s += w * x as f64;
            }
        }
        (sums, totals)
    }

    /// [`CellGrid::sums_by_bitmap`] for grids too large for a bitmap: the
    /// rows sorted by cell, each cell's rows in row order.
    fn sums_by_sorting(&self, width: f64, bits: u32) -> (Vec<f64>, Vec<f64>) {
        let d = self.lo.len();
        let keyed = self.sorted(width, bits);
        let mut sums = Vec::new();
        let mut totals = Vec::new();
        for group in keyed.chunk_by(|a, b| a.0 == b.0) {
            let mut cell = vec![0.0f64; d];
            let mut total = 0.0f64;
            for &(_, i) in group {
                let w = self.rows.weight(i as usize);
                total += w;
                for (s, &x) in cell.iter_mut().zip(self.rows.row(i as usize)) {
                    *s += w * x as f64;
                }
            }
            sums.extend(cell);
            totals.push(total);
        }
        (sums, totals)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn distinct_borrows_only_what_needs_no_merging() {
        let weighted = |data: Vec<f32>| {
            let n = data.len();
            VectorSet::new(1, data)
                .unwrap()
                .with_weights(vec![2.0; n])
                .unwrap()
        };
        let plain = weighted(vec![3.0, 1.0, 2.0]);
        assert!(matches!(plain.distinct(), Cow::Borrowed(_)));
        assert_eq!(*plain.distinct(), plain.deduplicated());
        // A repeat, a −0 (merged with +0 and written as +0), no weights:
        // each gives the merged copy.
        for v in [
            weighted(vec![3.0, 1.0, 3.0]),
            weighted(vec![-0.0, 1.0]),
            VectorSet::new(1, vec![3.0, 1.0]).unwrap(),
        ] {
            assert!(matches!(v.distinct(), Cow::Owned(_)));
            assert_eq!(*v.distinct(), v.deduplicated());
        }
    }

    #[test]
    fn a_sample_draws_in_proportion_to_weight() {
        // Weights 1 and 3: about a quarter and three quarters of the draws.
        let v = VectorSet::new(1, vec![0.0, 1.0])
            .unwrap()
            .with_weights(vec![1.0, 3.0])
            .unwrap();
        let mut rng = crate::rng::SeededRng::new(9);
        let s = v.sampled(40_000, &mut rng);
        assert_eq!(s.as_flat(), &[0.0, 1.0]);
        assert_eq!(s.total_weight(), 40_000.0);
        let share = s.weight(1) / 40_000.0;
        assert!((share - 0.75).abs() < 0.01, "{share}");
        // Seeded: the same seed, the same sample.
        let again = v.sampled(40_000, &mut crate::rng::SeededRng::new(9));
        assert_eq!(s, again);
    }

    #[test]
    fn rejects_ragged_and_non_finite() {
        assert!(VectorSet::new(3, vec![1.0; 7]).is_err());
        let e = VectorSet::new(2, vec![1.0, 2.0, f32::NAN, 0.0]).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::NonFinite { .. }));
        assert_eq!(e.position().record, Some(1));
    }

    #[test]
    fn dedup_sums_weights() {
        let v = VectorSet::new(2, vec![1.0, 2.0, 3.0, 4.0, 1.0, 2.0, -0.0, 0.0, 0.0, 0.0]).unwrap();
        let d = v.deduplicated();
        assert_eq!(d.len(), 3);
        assert_eq!(d.weights().unwrap(), &[2.0, 1.0, 2.0]);
        assert_eq!(v.distinct_count(), 3);
        // Three components: rows that share their first two need the third
        // to tell them apart; −0 and +0 are one value.
        let rows = [1.0, 2.0, 5.0, 1.0, 2.0, 3.0, 1.0, 2.0, 5.0];
        let more = [0.0, -0.0, 1.0, 0.0, 0.0, 1.0, 1.0, 2.0, 3.0];
        let v = VectorSet::new(3, [rows, more].concat()).unwrap();
        let d = v.deduplicated();
        assert_eq!(d.as_flat(), &[1.0, 2.0, 5.0, 1.0, 2.0, 3.0, 0.0, 0.0, 1.0]);
        assert_eq!(d.weights().unwrap(), &[2.0, 2.0, 2.0]);
        assert_eq!(v.distinct_count(), 3);
        // Rows already in order come back as they are.
        let sorted = VectorSet::new(3, vec![0.0, 0.0, 1.0, 0.0, 0.0, 2.0, 1.0, 0.0, 0.0]).unwrap();
        assert_eq!(sorted.sorted_rows(), [0, 1, 2]);
        assert_eq!(sorted.distinct_count(), 3);
    }

    #[test]
    fn cells_found_by_bitmap_and_by_sorting_agree() {
        // Weighted normal points plus, in the second set, one far outlier
        // that stretches the bounding box: its grids at narrow widths are
        // too large for the bitmap, at wide ones they fit.
        let mut rng = crate::rng::SeededRng::new(9);
        let mut data: Vec<f32> = (0..3 * 4000).map(|_| rng.normal() as f32).collect();
        let weights: Vec<f64> = (0..4001).map(|i| 0.5 + (i % 4) as f64).collect();
        for outlier in [false, true] {
            if outlier {
                data.extend([4000.0, -3.0, 2.5]);
            }
            let v = VectorSet::new(3, data.clone())
                .unwrap()
                .with_weights(weights[..data.len() / 3].to_vec())
                .unwrap();
            let (mut lo, mut hi) = (vec![f32::INFINITY; 3], vec![f32::NEG_INFINITY; 3]);
            for r in v.rows() {
                for c in 0..3 {
                    lo[c] = lo[c].min(r[c]);
                    hi[c] = hi[c].max(r[c]);
                }
            }
            let grid = CellGrid {
                rows: &v,
                lo: &lo,
                hi: &hi,
                last: (1 << 21) - 1,
            };
            let mut dense = 0;
            for width in [0.001, 0.05, 0.3, 1.0, 7.0, 5000.0] {
                let sorted = grid.sums_by_sorting(width, 21);
                let cells = grid.sorted(width, 21);
                let occupied = 1 + cells.windows(2).filter(|w| w[0].0 != w[1].0).count();
                assert_eq!(sorted.1.len(), occupied);
                assert_eq!(grid.occupied(width, 21), occupied, "width {width}");
                if let Some(extent) = grid.extent(width) {
                    dense += 1;
                    // Bit for bit: the same sums in the same order.
                    assert_eq!(grid.sums_by_bitmap(&extent, width), sorted, "width {width}");
                }
            }
            assert!((1..6).contains(&dense), "{dense} widths on the bitmap");
        }
    }

    #[test]
    fn coarse_cells_keep_weight_and_mean() {
        let mut rng = crate::rng::SeededRng::new(4);
        let data: Vec<f32> = (0..3 * 5000).map(|_| rng.normal() as f32).collect();
        let v = VectorSet::new(3, data)
            .unwrap()
            .with_weights((0..5000).map(|i| 1.0 + (i % 3) as f64).collect())
            .unwrap();
        let c = v.coarsened(300);
        assert!(c.len() <= 300 && c.len() > 30, "{} cells", c.len());
        assert!((c.total_weight() - v.total_weight()).abs() < 1e-9);
        // Cell means keep the overall weighted mean.
        for comp in 0..3 {
            let mean = |s: &VectorSet| {
                (0..s.len())
                    .map(|i| s.weight(i) * s.row(i)[comp] as f64)
                    .sum::<f64>()
                    / s.total_weight()
            };
            assert!((mean(&c) - mean(&v)).abs() < 1e-5);
        }
        // Small sets come back whole.
        assert_eq!(v.coarsened(10_000), v);
        // No room at all still means one cell.
        assert_eq!(v.coarsened(0).len(), 1);
    }
}
