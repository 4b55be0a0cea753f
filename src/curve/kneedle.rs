//! Kneedle (Satopää, Albrecht, Irwin & Raghavan 2011, "Finding a 'Kneedle'
//! in a Haystack: Detecting Knee Points in System Behavior"): the point of
//! a curve where spending more stops paying. Follows the conventions of the
//! `kneed` package (0.9): no smoothing, the first knee found, the same
//! normalisation, difference curve, local-extremum rule and thresholds, so
//! both give the same knee on the same points (checked against fixtures).
//! Pure arithmetic; never reads or prints anything.

use crate::error::{Error, ErrorKind, Result};

/// Whether the curve bends like a bowl (convex) or a dome (concave).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Bend {
    /// Second derivative ≥ 0, e.g. distortion against codebook size (an "elbow").
    Convex,
    /// Second derivative ≤ 0, e.g. the share of variance explained.
    Concave,
}

/// Whether y rises or falls as x grows.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Direction {
    /// y grows with x.
    Increasing,
    /// y falls as x grows.
    Decreasing,
}

/// The knee of a curve.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Knee {
    /// Index of the knee among the points given.
    pub index: usize,
    /// Its x value.
    pub x: f64,
    /// Its x in the normalised, mirrored frame Kneedle works in (what
    /// `kneed` calls `norm_knee`), in [0, 1].
    pub normalised_x: f64,
}

/// Sensitivity S used unless another is given: the value the paper and
/// `kneed` default to.
pub const DEFAULT_SENSITIVITY: f64 = 1.0;

/// The first knee of the curve through `(x[i], y[i])` (x strictly
/// increasing), or `None` when Kneedle finds none (a straight line, a flat
/// curve, fewer than three points …).
///
/// ```
/// use vqforge::curve::kneedle::{knee, Bend, Direction};
///
/// let x: Vec<f64> = (1..=20).map(f64::from).collect();
/// let y: Vec<f64> = x.iter().map(|v| 1.0 / v).collect();
/// let k = knee(&x, &y, 1.0, Bend::Convex, Direction::Decreasing).unwrap().unwrap();
/// assert_eq!(k.x, 5.0); // kneed 0.9 finds 5 too
///
/// // A straight line has no knee; unsorted x is refused.
/// let line: Vec<f64> = x.iter().map(|v| 10.0 - v).collect();
/// assert!(knee(&x, &line, 1.0, Bend::Convex, Direction::Decreasing).unwrap().is_none());
/// assert!(knee(&[2.0, 1.0, 3.0], &[1.0, 2.0, 3.0], 1.0, Bend::Convex, Direction::Decreasing).is_err());
/// ```
///
/// # Errors
///
/// [`ErrorKind::InvalidParameter`] when the lengths differ, x is not strictly
/// increasing, a value is not finite, or the sensitivity is negative.
pub fn knee(
    x: &[f64],
    y: &[f64],
    sensitivity: f64,
    bend: Bend,
    direction: Direction,
) -> Result<Option<Knee>> {
    let bad = |m: String| {
        Err(Error::new(
            "finding the knee",
            ErrorKind::InvalidParameter(m),
        ))
    };
    if x.len() != y.len() {
        return bad(format!("{} x values for {} y values", x.len(), y.len()));
    }
    if x.iter().chain(y).any(|v| !v.is_finite()) {
        return bad("a point is not a finite number".into());
    }
    if x.windows(2).any(|w| w[1] <= w[0]) {
        return bad("x must be strictly increasing".into());
    }
    if !sensitivity.is_finite() || sensitivity < 0.0 {
        return bad(format!("sensitivity {sensitivity} must be ≥ 0"));
    }
    let n = x.len();
    if n < 3 {
        return Ok(None);
    }
    let (Some(xn), Some(yn)) = (normalise(x), normalise(y)) else {
        return Ok(None);
    };
    // Turn every shape into a concave increasing one.
    let yt: Vec<f64> = match (direction, bend) {
        (Direction::Decreasing, Bend::Concave) => yn.iter().rev().copied().collect(),
        (Direction::Decreasing, Bend::Convex) => {
            let top = max(&yn);
            yn.iter().map(|v| top - v).collect()
        }
        (Direction::Increasing, Bend::Convex) => {
            let top = max(&yn);
            yn.iter().rev().map(|v| top - v).collect()
        }
        (Direction::Increasing, Bend::Concave) => yn,
    };
    // Reversing y by index mirrors the curve only for evenly spaced x:
    // mirror x by value as well (x → 1 − x), kept in ascending order.
    let mirrored = matches!(
        (direction, bend),
        (Direction::Decreasing, Bend::Concave) | (Direction::Increasing, Bend::Convex)
    );
    let xn: Vec<f64> = if mirrored {
        xn.iter().rev().map(|v| 1.0 - v).collect()
    } else {
        xn
    };
    let diff: Vec<f64> = yt.iter().zip(&xn).map(|(a, b)| a - b).collect();
    let maxima = extrema(&diff, |a, b| a >= b);
    let minima = extrema(&diff, |a, b| a <= b);
    let Some(&first_max) = maxima.first() else {
        return Ok(None);
    };
    let step = mean_step(&xn);
    let mut threshold = 0.0;
    let mut threshold_index = first_max;
    let mut active = true;
    for i in first_max..n - 1 {
        if maxima.contains(&i) {
            threshold = diff[i] - sensitivity * step;
            threshold_index = i;
            active = true;
        }
        if minima.contains(&i) {
            threshold = 0.0;
            active = false;
        }
        if active && diff[i + 1] < threshold {
            let index = if mirrored {
                n - 1 - threshold_index
            } else {
                threshold_index
            };
            return Ok(Some(Knee {
                index,
                x: x[index],
                normalised_x: xn[threshold_index],
            }));
        }
    }
    Ok(None)
}

/// (a − min) / (max − min), or `None` when all values are equal.
fn normalise(a: &[f64]) -> Option<Vec<f64>> {
    let lo = a.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = max(a);
    let range = hi - lo;
    (range > 0.0).then(|| a.iter().map(|v| (v - lo) / range).collect())
}

fn max(a: &[f64]) -> f64 {
    a.iter().copied().fold(f64::NEG_INFINITY, f64::max)
}

/// Indices where `keep(d[i], neighbour)` holds for both neighbours, an end
/// point being its own missing neighbour (SciPy's `argrelextrema` with
/// order 1 and clipped edges, as `kneed` calls it).
fn extrema(d: &[f64], keep: impl Fn(f64, f64) -> bool) -> Vec<usize> {
    let n = d.len();
    (0..n)
        .filter(|&i| {
            let before = d[i.saturating_sub(1)];
            let after = d[(i + 1).min(n - 1)];
            keep(d[i], before) && keep(d[i], after)
        })
        .collect()
}

/// |mean of consecutive differences|, summed the way NumPy's `mean` sums
/// (pairwise in blocks of eight), so thresholds agree with `kneed` to the
/// last bit.
fn mean_step(x: &[f64]) -> f64 {
    let steps: Vec<f64> = x.windows(2).map(|w| w[1] - w[0]).collect();
    (pairwise_sum(&steps) / steps.len() as f64).abs()
}

/// NumPy's pairwise summation (`pairwise_sum` in its umath loops): plain
/// sums below 8 values, eight interleaved accumulators up to 128, halves
/// above.
fn pairwise_sum(a: &[f64]) -> f64 {
    let n = a.len();
    if n < 8 {
        a.iter().fold(0.0, |s, v| s + v)
    } else if n <= 128 {
        let mut r = [0.0f64; 8];
        r.copy_from_slice(&a[..8]);
        let mut i = 8;
        while i + 8 <= n {
            for (j, acc) in r.iter_mut().enumerate() {
                *acc += a[i + j];
            }
            i += 8;
        }
        let mut res = ((r[0] + r[1]) + (r[2] + r[3])) + ((r[4] + r[5]) + (r[6] + r[7]));
        for v in &a[i..] {
            res += v;
        }
        res
    } else {
        let mut half = n / 2;
        half -= half % 8;
        pairwise_sum(&a[..half]) + pairwise_sum(&a[half..])
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn flat_short_and_bad_input() {
        let x = [1.0, 2.0, 3.0, 4.0];
        assert_eq!(
            knee(&x, &[5.0; 4], 1.0, Bend::Convex, Direction::Decreasing).unwrap(),
            None
        );
        assert_eq!(
            knee(
                &x[..2],
                &[2.0, 1.0],
                1.0,
                Bend::Convex,
                Direction::Decreasing
            )
            .unwrap(),
            None
        );
        assert!(knee(&x, &[1.0; 3], 1.0, Bend::Convex, Direction::Decreasing).is_err());
        assert!(knee(
            &x,
            &[1.0, f64::NAN, 0.0, 0.0],
            1.0,
            Bend::Convex,
            Direction::Decreasing
        )
        .is_err());
        assert!(knee(
            &x,
            &[4.0, 3.0, 2.0, 1.0],
            -1.0,
            Bend::Convex,
            Direction::Decreasing
        )
        .is_err());
    }

    #[test]
    fn pairwise_sum_matches_plain_sum_on_exact_values() {
        let a: Vec<f64> = (0..300).map(f64::from).collect();
        assert_eq!(pairwise_sum(&a), 299.0 * 300.0 / 2.0);
        assert_eq!(pairwise_sum(&a[..5]), 10.0);
        assert_eq!(pairwise_sum(&a[..20]), 190.0);
    }
}
