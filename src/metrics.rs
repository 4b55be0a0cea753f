//! What was lost and what it costs: squared error, maximum error, SNR per
//! column and overall, index entropy and rate. Pure arithmetic on in-memory
//! values; sums in `f64`.

/// Error statistics of one column (or of all components together).
#[derive(Debug, Clone, PartialEq)]
pub struct ColumnError {
    /// Mean squared error per value.
    pub mse: f64,
    /// Largest |original − decoded|.
    pub max_abs_error: f64,
    /// 10·log10(variance of the original about its mean / mse); `None` when
    /// the error is 0 (infinite SNR) or the original is constant.
    pub snr_db: Option<f64>,
    /// Mean of the original values.
    pub mean: f64,
    /// Population variance of the original values.
    pub variance: f64,
}

/// Running error statistics over rows of `columns` values, fed row by row so
/// inputs larger than memory can be measured while they stream past.
#[derive(Debug, Clone)]
pub struct ErrorAccumulator {
    columns: usize,
    rows: u64,
    sum_sq_err: Vec<f64>,
    max_abs: Vec<f64>,
    // Welford running mean / M2 for the signal variance: stable for long logs
    // whose values sit far from zero (e.g. a temperature near 20 °C).
    mean: Vec<f64>,
    m2: Vec<f64>,
}

impl ErrorAccumulator {
    /// An empty accumulator for rows of `columns` values.
    pub fn new(columns: usize) -> Self {
        ErrorAccumulator {
            columns,
            rows: 0,
            sum_sq_err: vec![0.0; columns],
            max_abs: vec![0.0; columns],
            mean: vec![0.0; columns],
            m2: vec![0.0; columns],
        }
    }

    /// Adds one row: the original values and their reconstruction.
    pub fn add_row(&mut self, original: &[f64], decoded: &[f64]) {
        debug_assert_eq!(original.len(), self.columns);
        debug_assert_eq!(decoded.len(), self.columns);
        self.rows += 1;
        let n = self.rows as f64;
        for c in 0..self.columns {
            let e = original[c] - decoded[c];
            self.sum_sq_err[c] += e * e;
            self.max_abs[c] = self.max_abs[c].max(e.abs());
            let delta = original[c] - self.mean[c];
            self.mean[c] += delta / n;
            self.m2[c] += delta * (original[c] - self.mean[c]);
        }
    }

    /// Rows added so far.
    pub fn rows(&self) -> u64 {
        self.rows
    }

    /// Statistics of column `c`.
    pub fn column(&self, c: usize) -> ColumnError {
        let n = self.rows.max(1) as f64;
        let mse = self.sum_sq_err[c] / n;
        let variance = self.m2[c] / n;
        ColumnError {
            mse,
            max_abs_error: self.max_abs[c],
            snr_db: snr_db(variance, mse),
            mean: self.mean[c],
            variance,
        }
    }

    /// Statistics over every value of every column: mse per value, the largest
    /// error anywhere, SNR from the summed variances and summed squared errors.
    pub fn overall(&self) -> ColumnError {
        let n = (self.rows.max(1) * self.columns as u64) as f64;
        let mse = self.sum_sq_err.iter().sum::<f64>() / n;
        let variance = self.m2.iter().sum::<f64>() / n;
        ColumnError {
            mse,
            max_abs_error: self.max_abs.iter().copied().fold(0.0, f64::max),
            snr_db: snr_db(variance, mse),
            mean: self.mean.iter().sum::<f64>() / self.columns.max(1) as f64,
            variance,
        }
    }
}

/// 10·log10(signal power / noise power), `None` when undefined or infinite.
pub fn snr_db(signal_power: f64, noise_power: f64) -> Option<f64> {
    if noise_power > 0.0 && signal_power > 0.0 {
        Some(10.0 * (signal_power / noise_power).log10())
    } else {
        None
    }
}

/// Peak signal-to-noise ratio in dB for values with the given peak (255 for
/// 8-bit images); `None` when the error is 0.
pub fn psnr_db(peak: f64, mse: f64) -> Option<f64> {
    snr_db(peak * peak, mse)
}

/// ‖a − b‖² in f64 from explicit differences (no |a|² − 2ab + |b|²
/// shortcut): the figure reports give. The differences and squares of
/// `f32` values are exact in `f64`; only the sum rounds. In component
/// order below [`SPLIT_FROM`](crate::encode::SPLIT_FROM) components; from
/// there on component j goes to partial sum j mod 4, added pairwise at the
/// end, so the additions run side by side rather than in one chain.
#[inline]
pub fn squared_error(a: &[f32], b: &[f32]) -> f64 {
    if a.len() < crate::encode::SPLIT_FROM {
        return a
            .iter()
            .zip(b)
            .map(|(&x, &y)| {
                let e = f64::from(x) - f64::from(y);
                e * e
            })
            .sum();
    }
    let mut s = [0.0f64; 4];
    let (a4, b4) = (a.chunks_exact(4), b.chunks_exact(4));
    let (ta, tb) = (a4.remainder(), b4.remainder());
    for (x, y) in a4.zip(b4) {
        for l in 0..4 {
            let e = f64::from(x[l]) - f64::from(y[l]);
            s[l] += e * e;
        }
    }
    for (l, (x, y)) in ta.iter().zip(tb).enumerate() {
        let e = f64::from(*x) - f64::from(*y);
        s[l] += e * e;
    }
    (s[0] + s[2]) + (s[1] + s[3])
}

/// How often each of `size` codewords is used.
pub fn index_counts(indices: &[u32], size: usize) -> Vec<u64> {
    let mut counts = vec![0u64; size];
    for &i in indices {
        if let Some(c) = counts.get_mut(i as usize) {
            *c += 1;
        }
    }
    counts
}

/// Empirical entropy of the index stream in bits per index: −Σ p·log2 p over
/// the codeword frequencies. What an ideal entropy coder could approach
/// (memoryless model), never more than ⌈log2 k⌉.
pub fn index_entropy_bits(counts: &[u64]) -> f64 {
    let total: u64 = counts.iter().sum();
    if total == 0 {
        return 0.0;
    }
    let t = total as f64;
    let h: f64 = counts
        .iter()
        .filter(|&&c| c > 0)
        .map(|&c| {
            let p = c as f64 / t;
            -p * p.log2()
        })
        .sum();
    h.max(0.0)
}

/// Bytes of a payload of `count` indices at `bits` each, bit-packed.
pub fn packed_bytes(count: u64, bits: u32) -> u64 {
    (count * bits as u64).div_ceil(8)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn entropy_of_known_distributions() {
        // Shannon entropy: a uniform source over 8 symbols carries 3 bits;
        // a (1/2, 1/4, 1/4) source carries 1.5 bits (common practice).
        assert!((index_entropy_bits(&[5; 8]) - 3.0).abs() < 1e-12);
        assert!((index_entropy_bits(&[2, 1, 1]) - 1.5).abs() < 1e-12);
        assert_eq!(index_entropy_bits(&[7, 0, 0]), 0.0);
        assert_eq!(index_entropy_bits(&[]), 0.0);
    }

    #[test]
    fn accumulator_matches_direct_formulas() {
        let orig = [[20.0, 1.0], [22.0, 3.0], [24.0, 5.0]];
        let dec = [[21.0, 1.0], [22.0, 2.0], [22.0, 5.0]];
        let mut a = ErrorAccumulator::new(2);
        for (o, d) in orig.iter().zip(&dec) {
            a.add_row(o, d);
        }
        let c0 = a.column(0);
        assert!((c0.mse - 5.0 / 3.0).abs() < 1e-12);
        assert_eq!(c0.max_abs_error, 2.0);
        assert!((c0.variance - 8.0 / 3.0).abs() < 1e-12);
        assert!((c0.snr_db.unwrap() - 10.0 * (8.0f64 / 5.0).log10()).abs() < 1e-12);
        let all = a.overall();
        assert!((all.mse - 6.0 / 6.0).abs() < 1e-12);
        assert_eq!(all.max_abs_error, 2.0);
        // PSNR of 8-bit data with mse 1: 20·log10(255) ≈ 48.13 dB (common practice)
        assert!((psnr_db(255.0, 1.0).unwrap() - 48.1308).abs() < 1e-3);
        assert_eq!(psnr_db(255.0, 0.0), None);
        assert_eq!(packed_bytes(10, 3), 4);
    }
}
