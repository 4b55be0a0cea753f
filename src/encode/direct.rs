//! Exact nearest search for many queries of one to three components
//! (colours): eight codewords at a time, each distance formed exactly as
//! [`distance_sq`](super::distance_sq) forms it (differences, squares,
//! summed in component order, no fused multiply-add), so the answers are
//! those of [`nearest_linear`](super::nearest_linear) and
//! [`nearest_two_linear`](super::nearest_two_linear) bit for bit, with no
//! recheck.
//!
//! Each lane keeps its own least distance (and runner-up) over the
//! codewords it sees, in index order with strict comparisons, so it holds
//! its lowest-index nearest; the lanes are merged at the end, the lower
//! index winning among equal distances. A query that no codeword is a
//! finite distance from (overflow, infinite or NaN components) goes to the
//! linear scan, which settles how such ties fall.

use multiversion::multiversion;

use super::{assert_rows, nearest_linear, nearest_two_linear, Nearest, NearestTwo};

/// The most components this kernel serves.
pub const MAX_DIMENSION: usize = 3;
/// Codewords per panel: the kernel's vector width.
const LANES: usize = 8;

/// The codewords laid out in panels, built once per encoder.
#[derive(Debug, Clone)]
pub(super) struct Direct {
    dimension: usize,
    /// Panels of [`LANES`] codewords, each component padded to three: for
    /// panel p, component j, lane l the component j of codeword
    /// p·LANES + l. Padding lanes hold +∞, which is never nearer than a
    /// finite query's real codewords (their distance is +∞ or NaN).
    panels: Vec<f32>,
}

/// Per lane of one query: least distance, its codeword, runner-up.
#[derive(Clone, Copy)]
struct Lanes {
    least: [f32; LANES],
    index: [u32; LANES],
    second: [f32; LANES],
}

impl Direct {
    /// Panels for `codewords` (flat, `dimension` ≤ [`MAX_DIMENSION`]).
    pub(super) fn new(codewords: &[f32], dimension: usize) -> Direct {
        assert!((1..=MAX_DIMENSION).contains(&dimension));
        let k = codewords.len() / dimension;
        let mut panels = vec![f32::INFINITY; k.div_ceil(LANES) * MAX_DIMENSION * LANES];
        for (i, c) in codewords.chunks_exact(dimension).enumerate() {
            let (p, l) = (i / LANES, i % LANES);
            // Unused components are 0 in codewords and queries alike, so
            // they add exactly nothing.
            for j in 0..MAX_DIMENSION {
                panels[(p * MAX_DIMENSION + j) * LANES + l] = c.get(j).copied().unwrap_or(0.0);
            }
        }
        Direct { dimension, panels }
    }

    /// Nearest codeword of every row of `rows` (flat), into `out`.
    /// `codewords` are the ones the panels were made from; a query no
    /// codeword is a finite distance from (overflow, infinite or NaN
    /// components) is measured by the linear scan instead, which settles
    /// how such ties fall.
    pub(super) fn nearest(&self, codewords: &[f32], rows: &[f32], out: &mut [Nearest]) {
        let d = self.dimension;
        self.each_row::<false, _>(rows, out, |lanes, x, slot| {
            let found = merge::<false>(lanes).nearest;
            *slot = if found.distance_sq.is_finite() {
                found
            } else {
                nearest_linear(codewords, d, x)
            };
        });
    }

    /// Nearest codeword and runner-up distance of every row, into `out`
    /// (`codewords` as for [`Direct::nearest`]).
    pub(super) fn nearest_two(&self, codewords: &[f32], rows: &[f32], out: &mut [NearestTwo]) {
        let d = self.dimension;
        self.each_row::<true, _>(rows, out, |lanes, x, slot| {
            let found = merge::<true>(lanes);
            *slot = if found.nearest.distance_sq.is_finite() {
                found
            } else {
                nearest_two_linear(codewords, d, x)
            };
        });
    }

    /// Runs `each(lanes, row, out slot)` for every row after scanning it.
    fn each_row<const TWO: bool, T>(
        &self,
        rows: &[f32],
        out: &mut [T],
        mut each: impl FnMut(&Lanes, &[f32], &mut T),
    ) {
        let d = self.dimension;
        assert_rows(rows, out.len(), d);
        for (x, slot) in rows.chunks_exact(d).zip(out.iter_mut()) {
            let mut query = [0.0f32; MAX_DIMENSION];
            query[..d].copy_from_slice(x);
            each(&scan(&query, &self.panels, TWO), x, slot);
        }
    }
}

/// Every panel against one query. Compiled once for the baseline
/// instruction set and once for AVX2, chosen at run time (`multiversion`);
/// the arithmetic is the same in both.
#[multiversion(targets("x86_64+avx2+avx"))]
fn scan(query: &[f32; MAX_DIMENSION], panels: &[f32], two: bool) -> Lanes {
    if two {
        scan_with::<true>(query, panels)
    } else {
        scan_with::<false>(query, panels)
    }
}

// No closures inside: a closure is compiled apart, without the target
// features of the version that calls it.
#[inline(always)]
fn scan_with<const TWO: bool>(query: &[f32; MAX_DIMENSION], panels: &[f32]) -> Lanes {
    let [x0, x1, x2] = *query;
    let mut first = [0u32; LANES];
    for (l, f) in first.iter_mut().enumerate() {
        *f = l as u32;
    }
    let mut least = [f32::INFINITY; LANES];
    let mut index = first;
    let mut second = [f32::INFINITY; LANES];
    let mut at = first;
    for panel in panels.chunks_exact(MAX_DIMENSION * LANES) {
        let (c0, rest) = panel.split_at(LANES);
        let (c1, c2) = rest.split_at(LANES);
        for l in 0..LANES {
            let (d0, d1, d2) = (x0 - c0[l], x1 - c1[l], x2 - c2[l]);
            // distance_sq's order: ((0 + d0²) + d1²) + d2², and
            // 0 + d0² is d0² exactly.
            let v = d0 * d0 + d1 * d1 + d2 * d2;
            let nearer = v < least[l];
            if TWO {
                let beaten = if nearer { least[l] } else { v };
                second[l] = if beaten < second[l] {
                    beaten
                } else {
                    second[l]
                };
            }
            index[l] = if nearer { at[l] } else { index[l] };
            least[l] = if nearer { v } else { least[l] };
            at[l] += LANES as u32;
        }
    }
    Lanes {
        least,
        index,
        second,
    }
}

/// One query's answer from its lanes: the least distance, the lowest index
/// among equally near codewords; the runner-up is the least of every lane's
/// runner-up and the other lanes' least.
fn merge<const TWO: bool>(lanes: &Lanes) -> NearestTwo {
    let mut best = Nearest {
        index: lanes.index[0],
        distance_sq: lanes.least[0],
    };
    let mut at = 0;
    for l in 1..LANES {
        let (v, i) = (lanes.least[l], lanes.index[l]);
        if v < best.distance_sq || (v == best.distance_sq && i < best.index) {
            best = Nearest {
                index: i,
                distance_sq: v,
            };
            at = l;
        }
    }
    let mut second = f32::INFINITY;
    if TWO {
        for l in 0..LANES {
            second = second.min(lanes.second[l]);
            if l != at {
                second = second.min(lanes.least[l]);
            }
        }
    }
    NearestTwo {
        nearest: best,
        second_distance_sq: second,
    }
}
