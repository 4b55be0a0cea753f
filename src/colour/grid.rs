//! Constrained training support: the nearest colour a display format can
//! show to a point of a working colour space.

use super::convert::{
    lab_bounds, linear_bounds_of_lab_box, linear_bounds_of_oklab_box, oklab_bounds,
};
use super::display::{expand_level, nearest_level};
use super::{srgb8_to_linear, srgb_encode, ColourSpace, DisplayFormat, OKLAB_SCALE};
use crate::encode::{distance_sq, KdTree};

/// The colours of one display format, seen from one working space.
///
/// [`snap_working`](Grid::snap_working) moves a working-space point to the
/// format's colour nearest to it *in that space*: squared Euclidean distance
/// on the `f32` working coordinates, ties to the lowest packed code. The
/// search is exact for every format:
///
/// * formats with at most [`Grid::TABLE_LIMIT`] colours (all but RGB666 and
///   RGB888) use a k-d tree over all their colours, built once in
///   [`Grid::new`];
/// * RGB666 and RGB888 use branch and bound over boxes of level indices: a
///   box's colours lie inside bounds computed from its corners (every
///   conversion step is monotone per channel or a fixed linear mix, see the
///   bounds in the conversion module), so a box whose bound is farther than
///   the best colour found so far is skipped. The search starts from a
///   descent from the rounded colour, which is usually already the answer,
///   and only looks inside the box of sRGB colours that the working-space
///   ball around the point (radius: the descent's distance) maps into.
///   Measured cost per query with the test profile: about 10 µs in `Srgb`
///   and `Linear`, 0.1 ms in `Lab` and `Oklab` near the gamut, up to about
///   1 ms for points far outside it.
///
/// Checking only the immediate neighbour levels of the rounded colour would
/// not be exact in a perceptual space: for saturated magentas the green
/// channel barely moves CIELAB near 0, and the nearest RGB565 colour to
/// (255, 0, 211) in CIELAB is (255, 12, 214), three green levels away.
///
/// [`snap_rounded`](Grid::snap_rounded) is the plain route (round to 8-bit
/// sRGB, snap each channel, convert back).
#[derive(Debug, Clone)]
pub struct Grid {
    space: ColourSpace,
    format: DisplayFormat,
    table: Option<Table>,
}

#[derive(Debug, Clone)]
struct Table {
    tree: KdTree,
    /// The format's colours in packed-code order (the tree's indices).
    colours: Vec<[u8; 3]>,
}

/// Allowance, in working-space units of distance, for the `f32` rounding of
/// working coordinates when comparing `f64` box bounds with `f32` distances
/// (coordinates up to 255 carry errors below 2e-5 each).
const BOUND_SLACK: f64 = 1e-4;

/// Boxes with at most this many colours are scanned rather than split.
const SCAN_BOX: u64 = 8;

impl Grid {
    /// Largest colour count searched with a table of all colours.
    pub const TABLE_LIMIT: u32 = 1 << 16;

    /// Prepares the search. For formats with at most [`Grid::TABLE_LIMIT`]
    /// colours this converts all of them to the working space once.
    pub fn new(space: ColourSpace, format: DisplayFormat) -> Grid {
        let tabled = format.is_grey() || format.colour_count() <= Self::TABLE_LIMIT;
        let table = tabled.then(|| {
            let colours: Vec<[u8; 3]> = format.colours().collect();
            let flat: Vec<f32> = colours.iter().flat_map(|&c| space.to_space(c)).collect();
            Table {
                tree: KdTree::build(&flat, 3),
                colours,
            }
        });
        Grid {
            space,
            format,
            table,
        }
    }

    /// The working space.
    pub fn space(&self) -> ColourSpace {
        self.space
    }

    /// The display format.
    pub fn format(&self) -> DisplayFormat {
        self.format
    }

    /// The format's colour nearest to the working-space point `v` (see the
    /// type's documentation), as 8-bit sRGB. A point with a non-finite
    /// component takes the plain route ([`ColourSpace::to_rgb8`] then
    /// [`DisplayFormat::snap`]).
    pub fn nearest_rgb8(&self, v: &[f32; 3]) -> [u8; 3] {
        let plain = || self.format.snap(self.space.to_rgb8(*v));
        if !v.iter().all(|x| x.is_finite()) {
            return plain();
        }
        match &self.table {
            Some(t) => {
                let found = t.tree.nearest(v);
                t.colours
                    .get(found.index as usize)
                    .copied()
                    .unwrap_or_else(plain)
            }
            None => self.nearest_by_bounds(v),
        }
    }

    /// The working-space coordinates of [`nearest_rgb8`](Grid::nearest_rgb8):
    /// the point moved onto the format's nearest colour.
    pub fn snap_working(&self, v: &[f32; 3]) -> [f32; 3] {
        self.space.to_space(self.nearest_rgb8(v))
    }

    /// The plain route: working → 8-bit sRGB (rounded, clamped) → the
    /// format's per-channel nearest levels → working. Cheaper, and can be a
    /// level or more off the nearest colour in a perceptual space.
    pub fn snap_rounded(&self, v: &[f32; 3]) -> [f32; 3] {
        self.space
            .to_space(self.format.snap(self.space.to_rgb8(*v)))
    }

    fn bits(&self) -> [u32; 3] {
        self.format.bits()
    }

    fn code(&self, idx: [u32; 3]) -> u32 {
        let [_, g, b] = self.bits();
        (idx[0] << (g + b)) | (idx[1] << b) | idx[2]
    }

    fn colour(&self, idx: [u32; 3]) -> [u8; 3] {
        let bits = self.bits();
        [0, 1, 2].map(|c| expand_level(idx[c], bits[c]))
    }

    /// (squared distance, packed code) of the colour at level indices `idx`:
    /// the key every search minimises, lexicographically.
    fn key(&self, idx: [u32; 3], v: &[f32; 3]) -> (f32, u32) {
        let d = distance_sq(&self.space.to_space(self.colour(idx)), v);
        (d, self.code(idx))
    }

    /// Descent over level combinations from the rounded colour: move to the
    /// best of the 26 neighbours while that lowers the key. Each move lowers
    /// it, so the walk ends; the cap is a guard.
    fn descend(&self, v: &[f32; 3]) -> ([u32; 3], (f32, u32)) {
        let top = self.bits().map(|b| (1u32 << b) - 1);
        let mut here = self.format.level_indices(self.space.to_rgb8(*v));
        let mut here_key = self.key(here, v);
        for _ in 0..3 * 256 {
            let mut moved = false;
            let centre = here;
            for dr in 0..3u32 {
                for dg in 0..3u32 {
                    for db in 0..3u32 {
                        let step = [dr, dg, db];
                        let cand = [0, 1, 2].map(|c| (centre[c] + step[c]).wrapping_sub(1));
                        if (0..3).any(|c| cand[c] > top[c]) {
                            continue; // off the cube (wrapped below 0 or above the top)
                        }
                        let key = self.key(cand, v);
                        if key < here_key {
                            (here, here_key, moved) = (cand, key, true);
                        }
                    }
                }
            }
            if !moved {
                break;
            }
        }
        (here, here_key)
    }

    /// Exact search by branch and bound over boxes of level indices, seeded
    /// by [`descend`](Self::descend); only used for colour formats.
    fn nearest_by_bounds(&self, v: &[f32; 3]) -> [u8; 3] {
        let (mut best_idx, mut best) = self.descend(v);
        if !best.0.is_finite() {
            // So far away that squared distances overflow `f32`: no bound
            // can prune, and every colour is equally (infinitely) far.
            return self.colour(best_idx);
        }
        let vd = v.map(f64::from);
        let radius = f64::from(best.0).sqrt() + BOUND_SLACK;
        let (lo, hi) = self.box_around(&vd, radius);
        let mut stack = vec![(0.0f64, lo, hi)];
        while let Some((bound, lo, hi)) = stack.pop() {
            if bound.sqrt() > f64::from(best.0).sqrt() + BOUND_SLACK {
                continue;
            }
            let volume: u64 = (0..3).map(|c| u64::from(hi[c] - lo[c] + 1)).product();
            if volume <= SCAN_BOX {
                for r in lo[0]..=hi[0] {
                    for g in lo[1]..=hi[1] {
                        for b in lo[2]..=hi[2] {
                            let key = self.key([r, g, b], v);
                            if key < best {
                                (best_idx, best) = ([r, g, b], key);
                            }
                        }
                    }
                }
                continue;
            }
            let axis = (0..3).max_by_key(|&c| (hi[c] - lo[c], 3 - c)).unwrap_or(0);
            let mid = lo[axis] + (hi[axis] - lo[axis]) / 2;
            let (mut hi_a, mut lo_b) = (hi, lo);
            hi_a[axis] = mid;
            lo_b[axis] = mid + 1;
            let a = (self.box_bound(lo, hi_a, &vd), lo, hi_a);
            let b = (self.box_bound(lo_b, hi, &vd), lo_b, hi);
            // Depth first, nearer half on top of the stack.
            if a.0 <= b.0 {
                stack.extend([b, a]);
            } else {
                stack.extend([a, b]);
            }
        }
        self.colour(best_idx)
    }

    /// A box of level indices holding every colour within working distance
    /// `radius` of `v`: the working-space cube around `v` mapped back to
    /// sRGB by interval bounds, widened by one level on each side. The
    /// whole cube of levels if anything is not finite.
    fn box_around(&self, v: &[f64; 3], radius: f64) -> ([u32; 3], [u32; 3]) {
        let bits = self.bits();
        let top = bits.map(|b| (1u32 << b) - 1);
        let lo = v.map(|x| x - radius);
        let hi = v.map(|x| x + radius);
        let encode = |r: [f64; 2]| [srgb_encode(r[0]), srgb_encode(r[1])];
        let srgb: [[f64; 2]; 3] = match self.space {
            ColourSpace::Srgb => [0, 1, 2].map(|c| [lo[c] / 255.0, hi[c] / 255.0]),
            ColourSpace::Linear => [0, 1, 2].map(|c| encode([lo[c] / 255.0, hi[c] / 255.0])),
            ColourSpace::Lab => linear_bounds_of_lab_box(lo, hi).map(encode),
            ColourSpace::Oklab => {
                linear_bounds_of_oklab_box(lo.map(|x| x / OKLAB_SCALE), hi.map(|x| x / OKLAB_SCALE))
                    .map(encode)
            }
        };
        let mut out = ([0u32; 3], top);
        for c in 0..3 {
            let (a, b) = (srgb[c][0] * 255.0, srgb[c][1] * 255.0);
            if !(a.is_finite() && b.is_finite()) {
                return ([0; 3], top);
            }
            let a = a.floor().clamp(0.0, 255.0) as u8;
            let b = b.ceil().clamp(0.0, 255.0) as u8;
            out.0[c] = nearest_level(a, bits[c]).saturating_sub(1);
            out.1[c] = (nearest_level(b, bits[c]) + 1).min(top[c]);
        }
        out
    }

    /// Lower bound, in `f64`, on the squared working-space distance from
    /// `v` to any colour whose level indices lie in the box `lo..=hi`.
    fn box_bound(&self, lo: [u32; 3], hi: [u32; 3], v: &[f64; 3]) -> f64 {
        let low = self.colour(lo);
        let high = self.colour(hi);
        let linear = |c: [u8; 3]| c.map(srgb8_to_linear);
        let ranges: [[f64; 2]; 3] = match self.space {
            ColourSpace::Srgb => [0, 1, 2].map(|c| [f64::from(low[c]), f64::from(high[c])]),
            ColourSpace::Linear => {
                let (l, h) = (linear(low), linear(high));
                [0, 1, 2].map(|c| [l[c] * 255.0, h[c] * 255.0])
            }
            ColourSpace::Lab => lab_bounds(linear(low), linear(high)),
            ColourSpace::Oklab => {
                oklab_bounds(linear(low), linear(high)).map(|r| r.map(|x| x * OKLAB_SCALE))
            }
        };
        (0..3)
            .map(|c| {
                let gap = (ranges[c][0] - v[c]).max(v[c] - ranges[c][1]).max(0.0);
                gap * gap
            })
            .sum()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::SeededRng;

    /// Seeded working-space points: 8-bit colours converted and jittered by
    /// a few units, plus points well outside the gamut.
    fn sample_points(space: ColourSpace, n: usize, seed: u64) -> Vec<[f32; 3]> {
        let mut rng = SeededRng::new(seed);
        let mut out = Vec::with_capacity(n + 4);
        for _ in 0..n {
            let c = [0; 3].map(|_: u8| rng.below(256) as u8);
            let v = space.to_space_f64(c);
            out.push([0, 1, 2].map(|i| (v[i] + 3.0 * rng.normal()) as f32));
        }
        let far = match space {
            ColourSpace::Srgb | ColourSpace::Linear => 400.0,
            ColourSpace::Lab => 150.0,
            ColourSpace::Oklab => 60.0,
        };
        out.extend([
            [far, -far, far],
            [-far, far, 0.0],
            [50.0, far, -far],
            [0.0, 0.0, 0.0],
        ]);
        out
    }

    /// The format's colours converted once, for the brute-force oracle.
    fn all_colours(space: ColourSpace, format: DisplayFormat) -> Vec<([u8; 3], [f32; 3])> {
        format.colours().map(|c| (c, space.to_space(c))).collect()
    }

    /// Slow oracle: every colour of the format, squared distance in f32 as
    /// the tree computes it, ties to the lowest code.
    fn brute_nearest(colours: &[([u8; 3], [f32; 3])], v: &[f32; 3]) -> [u8; 3] {
        let mut best = ([0u8; 3], f32::INFINITY);
        for (c, w) in colours {
            let d = distance_sq(w, v);
            if d < best.1 {
                best = (*c, d);
            }
        }
        best.0
    }

    #[test]
    fn exact_search_matches_brute_force() {
        let formats = [
            DisplayFormat::Rgb565,
            DisplayFormat::Rgb444,
            DisplayFormat::Rgb332,
            DisplayFormat::Gray8,
            DisplayFormat::Gray2,
            DisplayFormat::Gray1,
        ];
        for space in ColourSpace::ALL {
            for format in formats {
                let grid = Grid::new(space, format);
                let colours = all_colours(space, format);
                let n = if format == DisplayFormat::Rgb565 {
                    60
                } else {
                    300
                };
                for v in sample_points(space, n, 11) {
                    let got = grid.nearest_rgb8(&v);
                    assert_eq!(got, brute_nearest(&colours, &v), "{space} {format} {v:?}");
                    assert_eq!(format.snap(got), got);
                    let w = grid.snap_working(&v);
                    assert_eq!(
                        grid.snap_working(&w),
                        w,
                        "{space} {format}: not a fixed point"
                    );
                }
            }
        }
    }

    #[test]
    fn bounded_search_matches_the_tree() {
        // The branch-and-bound search run on RGB565, whose tree is exact.
        for space in ColourSpace::ALL {
            let grid = Grid::new(space, DisplayFormat::Rgb565);
            for v in sample_points(space, 400, 12) {
                assert_eq!(
                    grid.nearest_by_bounds(&v),
                    grid.nearest_rgb8(&v),
                    "{space} {v:?}"
                );
            }
        }
    }

    #[test]
    fn rgb666_matches_brute_force() {
        for space in [ColourSpace::Lab, ColourSpace::Oklab] {
            let grid = Grid::new(space, DisplayFormat::Rgb666);
            let colours = all_colours(space, DisplayFormat::Rgb666);
            for v in sample_points(space, 12, 13) {
                assert_eq!(
                    grid.nearest_rgb8(&v),
                    brute_nearest(&colours, &v),
                    "{space} {v:?}"
                );
            }
        }
    }

    #[test]
    fn rgb888_matches_a_wide_brute_force_window() {
        // Oracle: every 8-bit colour within ±12 codes per channel of the
        // rounded colour (25³ candidates), ties to the lowest code. Outside
        // the gamut the nearest colour can lie beyond the window: then the
        // search must find one at least as near.
        for space in ColourSpace::ALL {
            let grid = Grid::new(space, DisplayFormat::Rgb888);
            for v in sample_points(space, 60, 15) {
                let centre = space.to_rgb8(v);
                let window: [std::ops::RangeInclusive<u8>; 3] =
                    centre.map(|x| x.saturating_sub(12)..=x.saturating_add(12));
                let mut best = ([0u8; 3], f32::INFINITY);
                for r in window[0].clone() {
                    for g in window[1].clone() {
                        for b in window[2].clone() {
                            let d = distance_sq(&space.to_space([r, g, b]), &v);
                            if d < best.1 {
                                best = ([r, g, b], d);
                            }
                        }
                    }
                }
                let found = grid.nearest_rgb8(&v);
                if (0..3).all(|c| window[c].contains(&found[c])) {
                    assert_eq!(found, best.0, "{space} {v:?}");
                } else {
                    assert!(
                        distance_sq(&space.to_space(found), &v) < best.1,
                        "{space} {v:?}"
                    );
                }
            }
        }
    }

    #[test]
    fn nearest_in_lab_can_be_several_levels_from_the_rounded_colour() {
        // The example in the type's documentation.
        let grid = Grid::new(ColourSpace::Lab, DisplayFormat::Rgb565);
        let v = ColourSpace::Lab.to_space([255, 0, 211]);
        assert_eq!(grid.nearest_rgb8(&v), [255, 12, 214]);
        let rounded = grid.snap_rounded(&v);
        assert_eq!(ColourSpace::Lab.to_rgb8(rounded), [255, 0, 214]);
        assert!(distance_sq(&grid.snap_working(&v), &v) < distance_sq(&rounded, &v));
    }

    #[test]
    fn rgb888_snaps_8_bit_colours_to_themselves() {
        for space in ColourSpace::ALL {
            let grid = Grid::new(space, DisplayFormat::Rgb888);
            for c in [[0, 0, 0], [255, 255, 255], [1, 2, 3], [250, 7, 128]] {
                let v = space.to_space(c);
                assert_eq!(grid.nearest_rgb8(&v), c, "{space}");
                assert_eq!(grid.snap_working(&v), v);
            }
        }
    }

    #[test]
    fn exact_is_never_farther_than_the_rounded_route() {
        for space in ColourSpace::ALL {
            let grid = Grid::new(space, DisplayFormat::Rgb332);
            for v in sample_points(space, 500, 14) {
                let exact = distance_sq(&grid.snap_working(&v), &v);
                let rounded = distance_sq(&grid.snap_rounded(&v), &v);
                assert!(exact <= rounded, "{space} {v:?}");
            }
        }
    }

    #[test]
    fn non_finite_points_take_the_plain_route() {
        for space in ColourSpace::ALL {
            for format in [DisplayFormat::Rgb565, DisplayFormat::Rgb888] {
                let grid = Grid::new(space, format);
                for v in [
                    [f32::NAN, 0.0, 0.0],
                    [f32::INFINITY, 1.0, 1.0],
                    [f32::MAX, f32::MIN, 0.0],
                ] {
                    let c = grid.nearest_rgb8(&v);
                    assert_eq!(format.snap(c), c);
                }
            }
        }
    }
}
