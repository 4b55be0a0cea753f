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
const CHUNK_PIXELS: usize = 1 << 14;

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
    match opaque_histogram(&image.pixels, Counts::Wanted) {
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

/// Whether the bitmap path counts the pixels of each colour: mapping needs
/// only the colours, and counting is a pass over every pixel.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Counts {
    Wanted,
    /// Every count is left at 0.
    Skipped,
}

/// The histogram and RGB set of `pixels` when they are many enough and all
/// opaque; `None` otherwise.
fn opaque_histogram(pixels: &[[u8; 4]], counts: Counts) -> Option<(Histogram, RgbSet)> {
    if pixels.len() < BITMAP_MIN_PIXELS {
        return None;
    }
    let set = RgbSet::of_opaque(pixels)?;
    let colours = set.histogram(pixels, counts);
    Some((colours, set))
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
        let mut before = Vec::with_capacity(RGB_WORDS);
        let len = count_before(&words, &mut before);
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
    /// of `pixels` (all members) have it, or 0 when the counts are skipped.
    fn histogram(&self, pixels: &[[u8; 4]], counts: Counts) -> Histogram {
        let counts = match counts {
            Counts::Wanted => self.count(pixels),
            Counts::Skipped => Vec::new(),
        };
        // The bitmap in pieces, each with the stretch of the list its
        // members fill, walked on all threads.
        let mut out = vec![([0u8; 4], 0u64); self.len];
        let mut pieces = Vec::with_capacity(RGB_WORDS / WORDS_PER_PIECE);
        let mut rest = out.as_mut_slice();
        for first in (0..RGB_WORDS).step_by(WORDS_PER_PIECE) {
            let end = first + WORDS_PER_PIECE;
            let members = self.before.get(end).map_or(self.len, |&b| b as usize)
                - self.before[first] as usize;
            let (stretch, tail) = rest.split_at_mut(members);
            pieces.push((first, stretch));
            rest = tail;
        }
        pieces.into_par_iter().for_each(|(first, stretch)| {
            let mut slots = stretch.iter_mut();
            for (w, &word) in self.words[first..first + WORDS_PER_PIECE]
                .iter()
                .enumerate()
            {
                let mut bits = word;
                while bits != 0 {
                    let rgb = ((first + w) as u32) << 6 | bits.trailing_zeros();
                    if let Some(slot) = slots.next() {
                        slot.0 = (rgb << 8 | 0xFF).to_be_bytes();
                    }
                    bits &= bits - 1;
                }
            }
            let start = self.before[first] as usize;
            for part in &counts {
                for (slot, &n) in stretch.iter_mut().zip(&part[start..]) {
                    slot.1 += u64::from(n);
                }
            }
        });
        out
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

/// Fills `before` with the members in the words before each word of
/// `words`; returns the members in all. (Compiled also for processors with
/// a population-count instruction, chosen at run time, like the loops
/// below: without it a count takes a dozen instructions.)
#[multiversion(targets("x86_64+popcnt"))]
fn count_before(words: &[u64], before: &mut Vec<u32>) -> usize {
    let mut len = 0u32;
    for w in words {
        before.push(len);
        len += w.count_ones();
    }
    len as usize
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
fn spread(set: &RgbSet, pixels: &[[u8; 4]], per_colour: &[u32], out: &mut [u32]) {
    for (slot, &p) in out.iter_mut().zip(pixels) {
        *slot = per_colour[set.rank(rgb_of(p))];
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
        Self::build(image, Counts::Wanted)
    }

    /// Like [`ColourIndex::new`], but the pixel counts of an opaque image
    /// are left at 0 (it saves a pass over the pixels): for mapping, which
    /// needs only the colours and their ranks.
    pub(crate) fn uncounted(image: &'a RgbaImage) -> ColourIndex<'a> {
        Self::build(image, Counts::Skipped)
    }

    fn build(image: &'a RgbaImage, counts: Counts) -> ColourIndex<'a> {
        let (colours, ranks) = match opaque_histogram(&image.pixels, counts) {
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
                out.par_chunks_mut(CHUNK_PIXELS)
                    .zip(pixels.par_chunks(CHUNK_PIXELS))
                    .for_each(|(out, pixels)| spread(set, pixels, per_colour, out));
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
