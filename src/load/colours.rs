//! The distinct colours of a decoded image: how many pixels have each
//! ([`colour_histogram`]), and for every pixel the place of its colour in
//! that list ([`ColourIndex`]), so work done once per colour can be handed
//! to every pixel without hashing.
//!
//! Opaque images (every alpha 255, the usual photo) are counted through a
//! set of the 2²⁴ RGB colours held as a bitmap (2 MiB) with, per 64-bit
//! word, the number of members in the words before it (1 MiB): a colour's
//! place is that number plus one population count, and walking the bitmap
//! lists the colours in sorted order. Other images sort a packed copy of
//! their pixels. Both give the same list.
//!
//! Pure: works on pixels in memory; never decodes, opens files or prints.

use std::collections::HashMap;
use std::fmt;
use std::hash::{BuildHasherDefault, Hasher};
use std::sync::atomic::{AtomicU64, Ordering};

use multiversion::multiversion;
use rayon::prelude::*;

use super::image::RgbaImage;
use crate::error::{Error, ErrorKind, Result};

/// Packs a pixel into the `u32` that orders [`colour_histogram`]:
/// `u32::from_be_bytes([r, g, b, a])`.
fn pack(p: [u8; 4]) -> u32 {
    u32::from_be_bytes(p)
}

/// Images with at least this many pixels are sorted on all threads.
const PARALLEL_SORT_PIXELS: usize = 1 << 16;

/// Opaque images with at least this many pixels (512 × 512) are counted
/// through the RGB bitmap. Below it, clearing and walking the 3 MiB of the
/// bitmap can cost more than sorting: on two photos and a mosaic, cut to
/// 32 768 to 262 144 pixels, the bitmap won from here on and lost by up
/// to 4 ms on one photo at half this size.
const BITMAP_MIN_PIXELS: usize = 1 << 18;

/// Pixels per piece of work when scanning an image on several threads.
pub(super) const CHUNK_PIXELS: usize = 1 << 14;

/// Pixels below which counting does not split across threads: each part
/// clears and sums a count per distinct colour.
const MIN_PART_PIXELS: usize = 1 << 18;

/// 64-bit words in a bitmap of the 2²⁴ RGB colours.
const RGB_WORDS: usize = 1 << 18;

/// Distinct colours with their pixel counts, as [`colour_histogram`]
/// returns them.
type Histogram = Vec<([u8; 4], u64)>;

/// The distinct RGBA values of `image` with how many pixels have each.
///
/// Sorted by the colour packed as `u32::from_be_bytes([r, g, b, a])`, that
/// is by red, then green, then blue, then alpha, so the result is the same
/// for the same pixels in any order. Counts add up to the pixel count.
/// Pixels that differ only in colour but are fully transparent stay
/// distinct: whether they count as one colour is the caller's decision.
///
/// Opaque images are counted through a bitmap of the RGB colours (3 MiB);
/// others by sorting a copy of the packed pixels (4 bytes a pixel). Large
/// images use all threads; the result does not depend on their number.
///
/// ```
/// use vqforge::load::{colour_histogram, RgbaImage};
///
/// let red = [255, 0, 0, 255];
/// let blue = [0, 0, 255, 255];
/// let image = RgbaImage { width: 3, height: 1, pixels: vec![red, blue, red] };
/// assert_eq!(colour_histogram(&image), [(blue, 1), (red, 2)]);
/// ```
pub fn colour_histogram(image: &RgbaImage) -> Vec<([u8; 4], u64)> {
    match opaque_histogram(&image.pixels) {
        Some((colours, _)) => colours,
        None => sorted_histogram(&image.pixels),
    }
}

/// [`colour_histogram`] by sorting a packed copy of the pixels: works for
/// any pixels, and is the reference the bitmap path is tested against.
fn sorted_histogram(pixels: &[[u8; 4]]) -> Vec<([u8; 4], u64)> {
    let mut packed: Vec<u32> = pixels.iter().map(|&p| pack(p)).collect();
    if packed.len() >= PARALLEL_SORT_PIXELS {
        packed.par_sort_unstable();
    } else {
        packed.sort_unstable();
    }
    let mut out: Vec<([u8; 4], u64)> = Vec::new();
    for value in packed {
        match out.last_mut() {
            Some((last, count)) if pack(*last) == value => *count += 1,
            _ => out.push((value.to_be_bytes(), 1)),
        }
    }
    out
}

/// The histogram and RGB set of `pixels` when they are many enough and all
/// opaque; `None` otherwise.
fn opaque_histogram(pixels: &[[u8; 4]]) -> Option<(Histogram, RgbSet)> {
    let set = opaque_set(pixels)?;
    let colours = set.histogram(pixels);
    Some((colours, set))
}

/// The RGB set of `pixels` when they are many enough for the bitmap and all
/// opaque; `None` otherwise.
fn opaque_set(pixels: &[[u8; 4]]) -> Option<RgbSet> {
    if pixels.len() < BITMAP_MIN_PIXELS {
        return None;
    }
    RgbSet::of_opaque(pixels)
}

/// For mapping a large opaque image without listing its colours first:
/// `values` is handed the image's distinct colours piece by piece, in
/// [`colour_histogram`]'s order, and fills one value per colour, each
/// below `bound`; every pixel, row by row, then gets its colour's value.
/// Pieces are handed out on all threads. `None`, before any call of
/// `values`, when the image is too small for the bitmap or not opaque: then
/// [`ColourIndex`] does the job.
///
/// Values are kept in one byte each when `bound` ≤ 256 (a palette's
/// indices), so the table every pixel looks up is a quarter of the size.
pub(crate) fn spread_opaque<F>(image: &RgbaImage, bound: u32, values: F) -> Option<Vec<u32>>
where
    F: Fn(&[[u8; 4]], &mut [u32]) + Sync,
{
    let pixels = &image.pixels;
    let set = opaque_set(pixels)?;
    // The output's fresh pages are faulted in and written on one thread
    // while the other threads search: faults taken by all threads at once
    // during the spreading cost about as long as on one (they queue in the
    // kernel), so this hides most of their time. Every slot is overwritten.
    let out = || vec![u32::MAX; pixels.len()];
    Some(if bound <= 256 {
        // Values below 256 fit in a byte exactly.
        let (narrow, mut out) = rayon::join(|| set.per_member(&values, |v| v as u8), out);
        set.spread_into(pixels, &narrow, &mut out);
        out
    } else {
        let (wide, mut out) = rayon::join(|| set.per_member(&values, |v| v), out);
        set.spread_into(pixels, &wide, &mut out);
        out
    })
}

/// The 24-bit RGB value of a pixel: `0xRRGGBB`.
#[inline]
fn rgb_of(p: [u8; 4]) -> u32 {
    pack(p) >> 8
}

/// A set of 24-bit RGB colours: bit `rgb % 64` of word `rgb / 64` is set
/// for a member, and `before[w]` counts the members in words before `w`.
/// A member's rank (its place among the members in ascending order) is
/// then one lookup and one population count.
#[derive(Clone)]
struct RgbSet {
    words: Vec<u64>,
    before: Vec<u32>,
    len: usize,
}

impl RgbSet {
    /// The RGB colours of `pixels`, or `None` when a pixel is not opaque.
    fn of_opaque(pixels: &[[u8; 4]]) -> Option<RgbSet> {
        let words: Vec<AtomicU64> = (0..RGB_WORDS).map(|_| AtomicU64::new(0)).collect();
        // Setting a bit is idempotent, so the threads' order does not
        // matter; the load first spares the locked write for colours seen
        // before, which in a photo are nearly all.
        pixels.par_chunks(CHUNK_PIXELS).try_for_each(|chunk| {
            for &p in chunk {
                if p[3] != 255 {
                    return None;
                }
                let rgb = rgb_of(p);
                let word = &words[(rgb >> 6) as usize];
                let bit = 1u64 << (rgb & 63);
                if word.load(Ordering::Relaxed) & bit == 0 {
                    word.fetch_or(bit, Ordering::Relaxed);
                }
            }
            Some(())
        })?;
        let words: Vec<u64> = words.into_iter().map(AtomicU64::into_inner).collect();
        let (before, len) = members_before(&words);
        Some(RgbSet { words, before, len })
    }

    /// Whether `rgb` (`0xRRGGBB`) is a member.
    #[inline]
    fn contains(&self, rgb: u32) -> bool {
        self.words[(rgb >> 6) as usize] & (1u64 << (rgb & 63)) != 0
    }

    /// The rank of member `rgb`; for a colour that is not a member, the
    /// rank it would have.
    #[inline]
    fn rank(&self, rgb: u32) -> usize {
        let w = (rgb >> 6) as usize;
        let below = self.words[w] & ((1u64 << (rgb & 63)) - 1);
        self.before[w] as usize + below.count_ones() as usize
    }

    /// The members in ascending order as opaque RGBA, each with how many
    /// of `pixels` (all members) have it.
    fn histogram(&self, pixels: &[[u8; 4]]) -> Histogram {
        let counts = self.count(pixels);
        let mut out = vec![([0u8; 4], 0u64); self.len];
        self.pieces(&mut out).for_each(|(first, stretch)| {
            let mut slots = stretch.iter_mut();
            self.walk(first, |colour| {
                if let Some(slot) = slots.next() {
                    slot.0 = colour;
                }
            });
            let start = self.before[first] as usize;
            for part in &counts {
                for (slot, &n) in stretch.iter_mut().zip(&part[start..]) {
                    slot.1 += u64::from(n);
                }
            }
        });
        out
    }

    /// One value per member, by rank: `values` fills them for the members
    /// of each piece of the bitmap, `narrow` stores each.
    fn per_member<T, F>(&self, values: &F, narrow: fn(u32) -> T) -> Vec<T>
    where
        T: Copy + Default + Send,
        F: Fn(&[[u8; 4]], &mut [u32]) + Sync,
    {
        let mut out = vec![T::default(); self.len];
        self.pieces(&mut out).for_each(|(first, stretch)| {
            let mut colours = Vec::with_capacity(stretch.len());
            self.walk(first, |colour| colours.push(colour));
            let mut found = vec![0u32; colours.len()];
            values(&colours, &mut found);
            for (slot, &v) in stretch.iter_mut().zip(&found) {
                *slot = narrow(v);
            }
        });
        out
    }

    /// The bitmap in pieces of [`WORDS_PER_PIECE`] words, each with the
    /// stretch of `list` (one slot per member, by rank) its members fill,
    /// to be walked on all threads.
    fn pieces<'s, T: Send>(
        &self,
        list: &'s mut [T],
    ) -> impl ParallelIterator<Item = (usize, &'s mut [T])> {
        let mut pieces = Vec::with_capacity(RGB_WORDS / WORDS_PER_PIECE);
        let mut rest = list;
        for first in (0..RGB_WORDS).step_by(WORDS_PER_PIECE) {
            let end = first + WORDS_PER_PIECE;
            let members = self.before.get(end).map_or(self.len, |&b| b as usize)
                - self.before[first] as usize;
            let (stretch, tail) = rest.split_at_mut(members);
            pieces.push((first, stretch));
            rest = tail;
        }
        pieces.into_par_iter()
    }

    /// Calls `visit` with each member in the piece of the bitmap that
    /// starts at word `first`, in ascending order, as opaque RGBA.
    fn walk(&self, first: usize, mut visit: impl FnMut([u8; 4])) {
        for (w, &word) in self.words[first..first + WORDS_PER_PIECE]
            .iter()
            .enumerate()
        {
            let mut bits = word;
            while bits != 0 {
                let rgb = ((first + w) as u32) << 6 | bits.trailing_zeros();
                visit((rgb << 8 | 0xFF).to_be_bytes());
                bits &= bits - 1;
            }
        }
    }

    /// Sets `out[i]` to the value the colour of `pixels[i]` (a member) has
    /// in `per_member`, on all threads.
    fn spread_into<T: Copy + Into<u32> + Sync>(
        &self,
        pixels: &[[u8; 4]],
        per_member: &[T],
        out: &mut [u32],
    ) {
        out.par_chunks_mut(CHUNK_PIXELS)
            .zip(pixels.par_chunks(CHUNK_PIXELS))
            .for_each(|(out, pixels)| spread(self, pixels, per_member, out));
    }

    /// How many of `pixels` (all members) have each member, by rank, in
    /// parts that add up to the counts. Counted on all threads, each part
    /// into its own array; integer sums make the total the same for any
    /// split.
    fn count(&self, pixels: &[[u8; 4]]) -> Vec<Vec<u32>> {
        let parts = rayon::current_num_threads()
            .min(pixels.len().div_ceil(MIN_PART_PIXELS))
            .max(pixels.len().div_ceil(u32::MAX as usize))
            .max(1);
        pixels
            .par_chunks(pixels.len().div_ceil(parts).max(1))
            .map(|part| {
                let mut counts = vec![0u32; self.len];
                count_ranks(self, part, &mut counts);
                counts
            })
            .collect()
    }
}

impl fmt::Debug for RgbSet {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("RgbSet")
            .field("len", &self.len)
            .finish_non_exhaustive()
    }
}

/// Words of the bitmap per piece when listing its members on all threads.
const WORDS_PER_PIECE: usize = 1 << 12;

/// For each word of `words`, the members in the words before it, and the
/// members in all. Pieces of the bitmap are counted on all threads, then
/// each piece's counts are shifted by the members of the pieces before it.
fn members_before(words: &[u64]) -> (Vec<u32>, usize) {
    let mut before = vec![0u32; words.len()];
    let in_pieces: Vec<u32> = before
        .par_chunks_mut(WORDS_PER_PIECE)
        .zip(words.par_chunks(WORDS_PER_PIECE))
        .map(|(before, words)| count_before(words, before))
        .collect();
    let mut starts = Vec::with_capacity(in_pieces.len());
    let mut len = 0u32;
    for n in in_pieces {
        starts.push(len);
        len += n;
    }
    before
        .par_chunks_mut(WORDS_PER_PIECE)
        .zip(starts)
        .skip(1)
        .for_each(|(before, start)| before.iter_mut().for_each(|b| *b += start));
    (before, len as usize)
}

/// Fills `before` with the members in the words of `words` before each;
/// returns the members in all. (Compiled also for processors with a
/// population-count instruction, chosen at run time, like the loops below:
/// without it a count takes a dozen instructions.)
#[multiversion(targets("x86_64+popcnt"))]
fn count_before(words: &[u64], before: &mut [u32]) -> u32 {
    let mut len = 0u32;
    for (b, w) in before.iter_mut().zip(words) {
        *b = len;
        len += w.count_ones();
    }
    len
}

/// Adds one to `counts[rank]` for every pixel of `pixels` (all members of
/// `set`). No branch on runs of equal pixels: a repeated colour's lines are
/// in cache anyway, and without the branch the lookups of many pixels
/// overlap (half as fast with one on a photo).
#[multiversion(targets("x86_64+popcnt"))]
fn count_ranks(set: &RgbSet, pixels: &[[u8; 4]], counts: &mut [u32]) {
    for &p in pixels {
        counts[set.rank(rgb_of(p))] += 1;
    }
}

/// `out[i]` = `per_colour[rank of pixels[i]]`, without branches like
/// [`count_ranks`].
#[multiversion(targets("x86_64+popcnt"))]
fn spread<T: Copy + Into<u32>>(
    set: &RgbSet,
    pixels: &[[u8; 4]],
    per_colour: &[T],
    out: &mut [u32],
) {
    for (slot, &p) in out.iter_mut().zip(pixels) {
        *slot = per_colour[set.rank(rgb_of(p))].into();
    }
}

/// Hashes packed colours with one multiplication (Fibonacci hashing): keys
/// are distinct small integers, not attacker-chosen, and a photo needs
/// millions of lookups.
#[derive(Default)]
struct PackedKeyHasher(u64);

impl Hasher for PackedKeyHasher {
    fn finish(&self) -> u64 {
        let h = self.0.wrapping_mul(0x9E37_79B9_7F4A_7C15);
        h ^ (h >> 29)
    }

    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 = (self.0 << 8) | b as u64;
        }
    }

    fn write_u32(&mut self, v: u32) {
        self.0 = v as u64;
    }
}

/// Packed RGBA colour → rank.
type RankMap = HashMap<u32, u32, BuildHasherDefault<PackedKeyHasher>>;

/// How a pixel's colour finds its rank.
#[derive(Debug, Clone)]
enum Ranks {
    /// Opaque images: the RGB set.
    Bitmap(RgbSet),
    /// Any other image: a hash map of the packed colours.
    Hashed(RankMap),
}

/// The distinct colours of an image ([`colour_histogram`]) with, for any
/// pixel, the rank of its colour in that list: work done once per distinct
/// colour (a nearest-entry search, an error figure) reaches every pixel
/// through [`ColourIndex::per_pixel`].
///
/// Opaque images need 3 MiB beyond the list; others a hash map of it.
///
/// ```
/// use vqforge::load::{ColourIndex, RgbaImage};
///
/// let red = [255, 0, 0, 255];
/// let blue = [0, 0, 255, 255];
/// let image = RgbaImage { width: 3, height: 1, pixels: vec![red, blue, red] };
/// let index = ColourIndex::new(&image);
/// assert_eq!(index.colours(), [(blue, 1), (red, 2)]);
/// assert_eq!(index.rank_of(red), Some(1));
/// assert_eq!(index.rank_of([0, 255, 0, 255]), None);
///
/// // One value per distinct colour, spread over the pixels.
/// assert_eq!(index.per_pixel(&[7, 9])?, [9, 7, 9]);
/// let err = index.per_pixel(&[7]).unwrap_err();
/// assert_eq!(
///     err.to_string(),
///     "mapping pixels: 1 values for 2 distinct colours"
/// );
/// # Ok::<(), vqforge::Error>(())
/// ```
#[derive(Debug, Clone)]
pub struct ColourIndex<'a> {
    image: &'a RgbaImage,
    colours: Vec<([u8; 4], u64)>,
    ranks: Ranks,
}

impl<'a> ColourIndex<'a> {
    /// Counts the colours of `image` (on all threads when it is large).
    pub fn new(image: &'a RgbaImage) -> ColourIndex<'a> {
        let (colours, ranks) = match opaque_histogram(&image.pixels) {
            Some((colours, set)) => (colours, Ranks::Bitmap(set)),
            None => {
                let colours = sorted_histogram(&image.pixels);
                let map = colours
                    .iter()
                    .enumerate()
                    .map(|(rank, (c, _))| (pack(*c), rank as u32))
                    .collect();
                (colours, Ranks::Hashed(map))
            }
        };
        ColourIndex {
            image,
            colours,
            ranks,
        }
    }

    /// The image indexed.
    pub fn image(&self) -> &'a RgbaImage {
        self.image
    }

    /// The distinct colours with their pixel counts, as
    /// [`colour_histogram`] returns them.
    pub fn colours(&self) -> &[([u8; 4], u64)] {
        &self.colours
    }

    /// The place of `pixel`'s colour in [`ColourIndex::colours`], or `None`
    /// when no pixel of the image has it.
    pub fn rank_of(&self, pixel: [u8; 4]) -> Option<usize> {
        match &self.ranks {
            Ranks::Bitmap(set) => {
                let rgb = rgb_of(pixel);
                (pixel[3] == 255 && set.contains(rgb)).then(|| set.rank(rgb))
            }
            Ranks::Hashed(map) => map.get(&pack(pixel)).map(|&r| r as usize),
        }
    }

    /// For every pixel of the image, row by row, the value its colour has
    /// in `per_colour` (one value per distinct colour, in the order of
    /// [`ColourIndex::colours`]). On all threads.
    ///
    /// # Errors
    /// [`ErrorKind::Shape`] when `per_colour` does not hold one value per
    /// distinct colour.
    pub fn per_pixel(&self, per_colour: &[u32]) -> Result<Vec<u32>> {
        if per_colour.len() != self.colours.len() {
            return Err(Error::new(
                "mapping pixels",
                ErrorKind::Shape(format!(
                    "{} values for {} distinct colours",
                    per_colour.len(),
                    self.colours.len()
                )),
            ));
        }
        let pixels = &self.image.pixels;
        Ok(match &self.ranks {
            Ranks::Bitmap(set) => {
                let mut out = vec![0u32; pixels.len()];
                set.spread_into(pixels, per_colour, &mut out);
                out
            }
            Ranks::Hashed(map) => pixels
                .par_iter()
                .with_min_len(CHUNK_PIXELS)
                .map(|&p| per_colour[map[&pack(p)] as usize])
                .collect(),
        })
    }
}

#[cfg(test)]
#[path = "colours_tests.rs"]
mod tests;
