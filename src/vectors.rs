//! `VectorSet`: contiguous `f32` rows of one runtime dimension, with optional
//! per-row weights. Everything downstream of loading works on this.

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
        let mut keys: Vec<Vec<u32>> = self
            .rows()
            .map(|r| r.iter().map(|v| (v + 0.0).to_bits()).collect())
            .collect();
        keys.sort_unstable();
        keys.dedup();
        keys.len()
    }

    /// Identical rows merged into one row whose weight is the sum of theirs,
    /// in order of first appearance. Training on this is exact and often much
    /// cheaper (many pixels share a colour; quantised sensors repeat readings).
    pub fn deduplicated(&self) -> VectorSet {
        use std::collections::HashMap;
        let mut first: HashMap<Vec<u32>, usize> = HashMap::new();
        let mut data = Vec::new();
        let mut weights: Vec<f64> = Vec::new();
        for (i, r) in self.rows().enumerate() {
            let key: Vec<u32> = r.iter().map(|v| (v + 0.0).to_bits()).collect();
            let w = self.weight(i);
            match first.get(&key) {
                Some(&j) => weights[j] += w,
                None => {
                    first.insert(key, weights.len());
                    data.extend(r.iter().map(|v| v + 0.0));
                    weights.push(w);
                }
            }
        }
        VectorSet {
            dimension: self.dimension,
            data,
            weights: Some(weights),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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
}
