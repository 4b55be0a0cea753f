//! `VectorSet`: contiguous `f32` rows of one runtime dimension, with optional
//! per-row weights. Everything downstream of loading works on this.

use std::borrow::Cow;

use rayon::prelude::*;

use crate::error::{Error, ErrorKind, Position, Result};

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
        let mut order: Vec<u32> = (0..self.len() as u32).collect();
        order.par_sort_unstable_by(|&x, &y| self.row_bits(x).cmp(self.row_bits(y)).then(x.cmp(&y)));
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
        // Keys are unique (the row index is part of each), so the parallel
        // sort's order is the sequential one.
        let bin = |width: f64, keyed: &mut Vec<(u64, u32)>| -> usize {
            keyed.clear();
            keyed.extend(self.rows().enumerate().map(|(i, r)| {
                let mut key = 0u64;
                for c in 0..d {
                    let cell = (((r[c] - lo[c]) as f64) / width).floor() as u64;
                    key = (key << bits) | cell.min(levels as u64 - 1);
                }
                (key, i as u32)
            }));
            keyed.par_sort_unstable();
            1 + keyed.windows(2).filter(|w| w[0].0 != w[1].0).count()
        };
        let mut keyed: Vec<(u64, u32)> = Vec::with_capacity(n);
        // Data rarely fill their bounding box, so the width is searched:
        // the occupied count falls as a power of the width, whose exponent
        // (the data's apparent dimension) is estimated from the tries.
        let mut width = (span / (max_cells as f64).powf(1.0 / d as f64)).max(finest);
        let mut exponent = 2.0f64;
        let mut last: Option<(f64, usize)> = None;
        // The narrowest fitting width tried, and whether `keyed` holds its
        // keys (otherwise they are binned again at the end: one buffer).
        let mut fitting: Option<f64> = None;
        let mut holds_fitting = false;
        for _ in 0..8 {
            let occupied = bin(width, &mut keyed);
            if let Some((w0, o0)) = last {
                let ratio = (o0 as f64 / occupied as f64).ln() / (width / w0).ln();
                if ratio.is_finite() && ratio > 0.5 {
                    exponent = ratio.min(d as f64);
                }
            }
            last = Some((width, occupied));
            let fits = occupied <= max_cells;
            holds_fitting = false;
            if fits && fitting.is_none_or(|w| width < w) {
                fitting = Some(width);
                holds_fitting = true;
            }
            if fits && (occupied * 2 >= max_cells || width <= finest) {
                break;
            }
            let aim = 0.75 * max_cells as f64 / occupied as f64;
            let step = aim.powf(-1.0 / exponent).clamp(0.25, 4.0);
            width = (width * step).max(finest);
        }
        match fitting {
            // Still too many cells after the tries: widen until it fits.
            None => loop {
                width *= 2.0;
                if bin(width, &mut keyed) <= max_cells {
                    break;
                }
            },
            Some(w) if !holds_fitting => {
                bin(w, &mut keyed);
            }
            Some(_) => {}
        }
        let mut data = Vec::new();
        let mut weights = Vec::new();
        let mut sums = vec![0.0f64; d];
        for group in keyed.chunk_by(|a, b| a.0 == b.0) {
            sums.iter_mut().for_each(|s| *s = 0.0);
            let mut total = 0.0f64;
            for &(_, i) in group {
                let w = self.weight(i as usize);
                total += w;
                for (s, &x) in sums.iter_mut().zip(self.row(i as usize)) {
                    *s += w * x as f64;
                }
            }
            if total > 0.0 {
                data.extend(sums.iter().map(|s| (s / total) as f32));
                weights.push(total);
            }
        }
        VectorSet {
            dimension: d,
            data,
            weights: Some(weights),
        }
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
