//! Fitting per-column scaling ([`fit_scales`]) and the whole record layout
//! ([`fit_layout`]) from a table. Sums are taken in `f64`. Never changes
//! the table and never reads files.

use crate::codebook::{ColumnScale, RecordLayout, Scaling};
use crate::error::{Error, ErrorKind, Result};

use super::options::CsvOptions;
use super::table::RecordTable;

/// Fitted column scales and what the user should know about them.
#[derive(Debug, Clone, PartialEq)]
pub struct ScaleFit {
    /// One scale per table column, in column order.
    pub scales: Vec<ColumnScale>,
    /// One notice per constant column, e.g. `column "x" is constant; left unscaled`.
    pub notices: Vec<String>,
}

/// Fits one [`ColumnScale`] per column of `table`:
///
/// * [`Scaling::None`]: offset 0, factor 1;
/// * [`Scaling::ZScore`]: offset the mean, factor the population standard
///   deviation (divide by n, not n − 1);
/// * [`Scaling::MinMax`]: offset the minimum, factor max − min, so values
///   land in [0, 1] (a range too wide for `f64` maps into [−1, 1] instead).
///
/// A column with a single value throughout gets factor 1 (its scaled values
/// are all 0) and a notice; so does every column of a table without rows.
pub fn fit_scales(table: &RecordTable, scaling: Scaling) -> ScaleFit {
    let rows = table.rows();
    let mut notices = Vec::new();
    let scales = table
        .columns
        .iter()
        .enumerate()
        .map(|(j, name)| {
            if scaling == Scaling::None || rows == 0 {
                return ColumnScale::IDENTITY;
            }
            let (offset, factor) = match scaling {
                Scaling::ZScore => mean_and_std(table, j, rows),
                _ => min_and_range(table, j),
            };
            if factor == 0.0 {
                notices.push(format!("column \"{name}\" is constant; left unscaled"));
                ColumnScale {
                    offset,
                    factor: 1.0,
                }
            } else {
                ColumnScale { offset, factor }
            }
        })
        .collect();
    ScaleFit { scales, notices }
}

/// Mean and population standard deviation, two passes in `f64`.
fn mean_and_std(table: &RecordTable, j: usize, rows: usize) -> (f64, f64) {
    let n = rows as f64;
    let mut mean = table.column(j).sum::<f64>() / n;
    if !mean.is_finite() {
        // The sum overflowed; dividing first cannot.
        mean = table.column(j).map(|x| x / n).sum();
    }
    let squares: f64 = table.column(j).map(|x| (x - mean) * (x - mean)).sum();
    let std = (squares / n).sqrt();
    if std.is_finite() {
        return (mean, std);
    }
    // Squares of deviations beyond ~1e154 overflow: measure in units of the
    // largest deviation instead.
    let largest = table
        .column(j)
        .map(|x| (x - mean).abs())
        .fold(0.0, f64::max);
    let ratio_squares: f64 = table
        .column(j)
        .map(|x| ((x - mean) / largest).powi(2))
        .sum();
    (mean, largest * (ratio_squares / n).sqrt())
}

/// Minimum and range. A range too wide for `f64` (beyond about ±9e307)
/// becomes midpoint and half-range instead, which maps the column into
/// [−1, 1] rather than failing.
fn min_and_range(table: &RecordTable, j: usize) -> (f64, f64) {
    let (min, max) = table
        .column(j)
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), x| {
            (lo.min(x), hi.max(x))
        });
    let range = max - min;
    if range.is_finite() {
        (min, range)
    } else {
        (min / 2.0 + max / 2.0, max / 2.0 - min / 2.0)
    }
}

/// A record layout fitted to a table, with the scaling notices.
#[derive(Debug, Clone, PartialEq)]
pub struct FittedLayout {
    /// Columns, frame, scaling and time column name, ready for
    /// [`to_vectors`](super::to_vectors) and the codebook.
    pub layout: RecordLayout,
    /// Notices from [`fit_scales`].
    pub notices: Vec<String>,
}

/// The [`RecordLayout`] for training on `table` with the frame and scaling
/// of `opts` (the table's columns, scales fitted by [`fit_scales`], the
/// table's time column name).
///
/// # Errors
///
/// [`ErrorKind::ZeroFrame`] for a frame of 0.
pub fn fit_layout(table: &RecordTable, opts: &CsvOptions) -> Result<FittedLayout> {
    if opts.frame == 0 {
        return Err(Error::new("checking record options", ErrorKind::ZeroFrame));
    }
    let fit = fit_scales(table, opts.scaling);
    Ok(FittedLayout {
        layout: RecordLayout {
            columns: table.columns.clone(),
            frame: opts.frame,
            scaling: opts.scaling,
            scales: fit.scales,
            time_column: table.times.as_ref().map(|t| t.name.clone()),
        },
        notices: fit.notices,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn table(columns: &[&str], values: Vec<f64>) -> RecordTable {
        RecordTable::new(columns.iter().map(|c| c.to_string()).collect(), values)
    }

    #[test]
    fn zscore_uses_population_std() {
        // The column 2, 4, 4, 4, 5, 5, 7, 9 has mean 5 and population
        // standard deviation 2 (the usual worked example; common practice).
        let t = table(&["x"], vec![2.0, 4.0, 4.0, 4.0, 5.0, 5.0, 7.0, 9.0]);
        let fit = fit_scales(&t, Scaling::ZScore);
        assert_eq!(
            fit.scales,
            [ColumnScale {
                offset: 5.0,
                factor: 2.0
            }]
        );
        assert!(fit.notices.is_empty());
        assert_eq!(fit.scales[0].apply(9.0), 2.0);
        assert_eq!(fit.scales[0].undo(-1.5), 2.0);
    }

    #[test]
    fn minmax_maps_onto_unit_interval() {
        let t = table(&["a", "b"], vec![10.0, -1.0, 30.0, 1.0, 20.0, 0.0]);
        let fit = fit_scales(&t, Scaling::MinMax);
        assert_eq!(
            fit.scales,
            [
                ColumnScale {
                    offset: 10.0,
                    factor: 20.0
                },
                ColumnScale {
                    offset: -1.0,
                    factor: 2.0
                }
            ]
        );
        let scaled: Vec<f64> = t.column(0).map(|x| fit.scales[0].apply(x)).collect();
        assert_eq!(scaled, [0.0, 1.0, 0.5]);
    }

    #[test]
    fn constant_column_is_left_unscaled_with_a_notice() {
        let t = table(&["flat", "x"], vec![3.0, 1.0, 3.0, 2.0, 3.0, 4.0]);
        for scaling in [Scaling::ZScore, Scaling::MinMax] {
            let fit = fit_scales(&t, scaling);
            assert_eq!(
                fit.scales[0],
                ColumnScale {
                    offset: 3.0,
                    factor: 1.0
                }
            );
            assert_eq!(fit.notices, ["column \"flat\" is constant; left unscaled"]);
        }
        assert!(fit_scales(&t, Scaling::None).notices.is_empty());
    }

    #[test]
    fn no_scaling_is_identity() {
        let t = table(&["a"], vec![5.0, 7.0]);
        assert_eq!(
            fit_scales(&t, Scaling::None).scales,
            [ColumnScale::IDENTITY]
        );
    }

    #[test]
    fn huge_values_still_give_finite_scales() {
        let t = table(&["a"], vec![-1e308, 1e308, 1e308, -1e308]);
        let z = fit_scales(&t, Scaling::ZScore).scales[0];
        assert_eq!(z.offset, 0.0);
        assert!((z.factor / 1e308 - 1.0).abs() < 1e-12);
        let m = fit_scales(&t, Scaling::MinMax).scales[0];
        assert!(m.factor.is_finite() && m.factor > 0.0);
        assert_eq!(m.apply(1e308), 1.0);
        assert_eq!(m.apply(-1e308), -1.0);
    }

    #[test]
    fn layout_carries_frame_scaling_and_time_name() {
        let t = table(&["a", "b"], vec![1.0, 2.0, 3.0, 4.0]);
        let opts = CsvOptions::new().frame(2).scaling(Scaling::MinMax);
        let fitted = fit_layout(&t, &opts).unwrap();
        assert_eq!(fitted.layout.columns, ["a", "b"]);
        assert_eq!(fitted.layout.frame, 2);
        assert_eq!(fitted.layout.dimension(), 4);
        assert_eq!(fitted.layout.time_column, None);
        let e = fit_layout(&t, &CsvOptions::new().frame(0)).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::ZeroFrame));
    }
}
