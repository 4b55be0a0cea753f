//! Which vectors or pixels are held out of training, so a curve can show
//! how a codebook does on data it has not seen. Records: contiguous blocks
//! (neighbouring rows of a log are alike, so scattered rows would leak the
//! held-out part into training). Pixels: square tiles drawn with a seed.
//! Only chooses; never trains or measures.

use crate::error::{Error, ErrorKind, Result};
use crate::rng::SeededRng;

/// Blocks the held-out records are cut into (fewer for very short inputs).
pub const HOLDOUT_BLOCKS: usize = 10;

/// Largest held-out fraction: at least a tenth must remain for training.
pub const MAX_HOLDOUT: f64 = 0.9;

const STAGE: &str = "holding out data";

/// Checks that `fraction` is in (0, [`MAX_HOLDOUT`]].
pub fn check_fraction(fraction: f64) -> Result<()> {
    if fraction.is_finite() && fraction > 0.0 && fraction <= MAX_HOLDOUT {
        Ok(())
    } else {
        Err(Error::new(
            STAGE,
            ErrorKind::InvalidParameter(format!(
                "the held-out fraction must be above 0 and at most {MAX_HOLDOUT}, got {fraction}"
            )),
        ))
    }
}

/// How many of `n` items a fraction holds out: rounded, at least 1 and at
/// most n − 1.
fn held_count(n: usize, fraction: f64, what: &str) -> Result<usize> {
    check_fraction(fraction)?;
    if n < 2 {
        return Err(Error::new(
            STAGE,
            ErrorKind::Shape(format!(
                "{n} {what} cannot be split into a training part and a held-out part"
            )),
        ));
    }
    Ok(((n as f64 * fraction).round() as usize).clamp(1, n - 1))
}

/// Which of `n` consecutive vectors are held out (`true`): `fraction` of
/// them, as up to [`HOLDOUT_BLOCKS`] contiguous blocks, block `b` ending the
/// `b`-th of that many equal stretches, so every part of a long log is
/// represented in both the training and the held-out part.
///
/// ```
/// use vqforge::curve::holdout::holdout_blocks;
///
/// let held = holdout_blocks(20, 0.5).unwrap();
/// assert_eq!(held.iter().filter(|&&h| h).count(), 10);
/// assert_eq!(&held[..2], &[false, true]); // stretch 0 is vectors 0 and 1
/// assert!(holdout_blocks(20, 0.95).is_err());
/// ```
pub fn holdout_blocks(n: usize, fraction: f64) -> Result<Vec<bool>> {
    let held = held_count(n, fraction, "vectors")?;
    let blocks = HOLDOUT_BLOCKS.min(held);
    let mut mask = vec![false; n];
    for b in 0..blocks {
        let (start, end) = (b * n / blocks, (b + 1) * n / blocks);
        let take = (b + 1) * held / blocks - b * held / blocks;
        let take = take.min(end - start);
        for m in &mut mask[end - take..end] {
            *m = true;
        }
    }
    Ok(mask)
}

/// Side of the square tiles pixels are held out in; smaller tiles for
/// images with fewer than [`MIN_TILES`] of them.
pub const TILE: u32 = 16;
/// Fewest tiles of side [`TILE`] before smaller ones (side 4) are used.
pub const MIN_TILES: usize = 20;

/// Which pixels of images of the given sizes are held out (one mask per
/// image, row by row): `fraction` of all square tiles, drawn with `seed`.
pub fn holdout_tiles(sizes: &[(u32, u32)], fraction: f64, seed: u64) -> Result<Vec<Vec<bool>>> {
    let tiles_of = |side: u32| -> Vec<(usize, u32, u32)> {
        let mut t = Vec::new();
        for (i, &(w, h)) in sizes.iter().enumerate() {
            for ty in 0..h.div_ceil(side) {
                for tx in 0..w.div_ceil(side) {
                    t.push((i, tx, ty));
                }
            }
        }
        t
    };
    let mut side = TILE;
    let mut tiles = tiles_of(side);
    if tiles.len() < MIN_TILES {
        side = 4;
        tiles = tiles_of(side);
    }
    let held = held_count(tiles.len(), fraction, "image tiles")?;
    // Partial Fisher–Yates shuffle: the first `held` tiles are a uniform draw.
    let mut rng = SeededRng::new(seed);
    for i in 0..held {
        let j = i + rng.below((tiles.len() - i) as u64) as usize;
        tiles.swap(i, j);
    }
    let mut masks: Vec<Vec<bool>> = sizes
        .iter()
        .map(|&(w, h)| vec![false; w as usize * h as usize])
        .collect();
    for &(i, tx, ty) in &tiles[..held] {
        let (w, h) = sizes[i];
        for y in ty * side..((ty + 1) * side).min(h) {
            for x in tx * side..((tx + 1) * side).min(w) {
                masks[i][(y * w + x) as usize] = true;
            }
        }
    }
    Ok(masks)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn blocks_are_contiguous_and_spread() {
        let held = holdout_blocks(1000, 0.2).unwrap();
        assert_eq!(held.iter().filter(|&&h| h).count(), 200);
        let starts = held.windows(2).filter(|w| !w[0] && w[1]).count();
        assert_eq!(starts, 10);
        assert!(held[99] && !held[79] && held[80]);
        assert_eq!(holdout_blocks(3, 0.1).unwrap(), [false, false, true]);
        assert!(holdout_blocks(1, 0.5).is_err());
        for f in [0.0, -0.1, 0.91, f64::NAN] {
            assert!(check_fraction(f).is_err(), "{f}");
        }
    }

    #[test]
    fn tiles_are_seeded_and_sized() {
        let a = holdout_tiles(&[(64, 64), (20, 10)], 0.25, 7).unwrap();
        let b = holdout_tiles(&[(64, 64), (20, 10)], 0.25, 7).unwrap();
        let c = holdout_tiles(&[(64, 64), (20, 10)], 0.25, 8).unwrap();
        assert_eq!(a, b);
        assert_ne!(a, c);
        // 16 + 2 tiles of 16 are too few: tiles of 4, 256 + 15 of them.
        let held: usize = a.iter().map(|m| m.iter().filter(|&&h| h).count()).sum();
        assert!(held > 0 && held < 64 * 64 + 200);
        let per_tile = a[0].iter().filter(|&&h| h).count();
        assert_eq!(per_tile % 16, 0);
        assert!(holdout_tiles(&[(1, 1)], 0.5, 1).is_err());
    }
}
