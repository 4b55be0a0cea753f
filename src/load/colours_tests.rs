//! Tests of colour counting. The bitmap path is checked against the sort
//! path (the slow, obviously-right oracle) and both against a `BTreeMap`
//! count, on the two photos stored in tests/data/images (byte copies of
//! scikit-image's `astronaut.png` and `chelsea.png`, see
//! tests/fixtures/README.md) and on seeded random and hand-made pixels.

use std::collections::BTreeMap;

use super::*;
use crate::load::test_photo as photo;
use crate::rng::SeededRng;

fn image(width: u32, pixels: Vec<[u8; 4]>) -> RgbaImage {
    RgbaImage {
        width,
        height: pixels.len() as u32 / width,
        pixels,
    }
}

/// Counts with an ordered map: big-endian packing orders by r, g, b, a,
/// which is the array order `BTreeMap` sorts `[u8; 4]` keys in.
fn map_count(pixels: &[[u8; 4]]) -> Vec<([u8; 4], u64)> {
    let mut oracle: BTreeMap<[u8; 4], u64> = BTreeMap::new();
    for &p in pixels {
        *oracle.entry(p).or_default() += 1;
    }
    oracle.into_iter().collect()
}

/// The bitmap path on `pixels` whatever their number (all opaque).
fn bitmap_histogram(pixels: &[[u8; 4]]) -> Vec<([u8; 4], u64)> {
    RgbSet::of_opaque(pixels).unwrap().histogram(pixels)
}

fn with_threads<T: Send>(threads: usize, f: impl FnOnce() -> T + Send) -> T {
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .unwrap()
        .install(f)
}

/// Every pixel's rank is its colour's place in the list, and
/// `per_pixel` hands each pixel its colour's value.
fn check_ranks(index: &ColourIndex) {
    let colours = index.colours();
    let place = |p: [u8; 4]| {
        colours
            .binary_search_by_key(&pack(p), |(c, _)| pack(*c))
            .ok()
    };
    let values: Vec<u32> = (0..colours.len() as u32).map(|r| r * 3 + 1).collect();
    let spread = index.per_pixel(&values).unwrap();
    for (&p, &v) in index.image().pixels.iter().zip(&spread) {
        let rank = place(p).unwrap();
        assert_eq!(index.rank_of(p), Some(rank), "{p:?}");
        assert_eq!(v, values[rank]);
    }
}

#[test]
fn histogram_counts_distinct_colours_in_packed_order() {
    let a = [0, 0, 0, 255];
    let b = [0, 0, 0, 0];
    let c = [1, 0, 0, 0];
    let image = image(5, vec![c, a, b, a, c]);
    assert_eq!(colour_histogram(&image), [(b, 1), (a, 2), (c, 2)]);
}

#[test]
fn histogram_matches_a_map_on_a_large_image() {
    // Random alpha: large enough for the parallel sort.
    let mut rng = SeededRng::new(7);
    let colours: Vec<[u8; 4]> = (0..37)
        .map(|_| rng.next_u64().to_le_bytes()[..4].try_into().unwrap())
        .collect();
    let pixels: Vec<[u8; 4]> = (0..300 * 300)
        .map(|_| colours[rng.below(37) as usize])
        .collect();
    let image = image(300, pixels);
    let got = colour_histogram(&image);
    assert_eq!(got, map_count(&image.pixels));
    assert_eq!(got.iter().map(|(_, n)| n).sum::<u64>(), 90_000);
}

/// `image` above itself: twice the pixels, the same colours.
fn twice(image: RgbaImage) -> RgbaImage {
    let mut pixels = image.pixels.clone();
    pixels.extend_from_slice(&image.pixels);
    RgbaImage {
        width: image.width,
        height: image.height * 2,
        pixels,
    }
}

#[test]
fn bitmap_equals_sorting_on_the_photos() {
    let chelsea = photo("chelsea");
    // Below the size that picks it, the bitmap gives the same list.
    assert!(chelsea.pixels.len() < BITMAP_MIN_PIXELS);
    assert_eq!(
        bitmap_histogram(&chelsea.pixels),
        sorted_histogram(&chelsea.pixels)
    );
    for (name, image) in [
        ("astronaut", photo("astronaut")),
        ("chelsea twice", twice(chelsea)),
    ] {
        assert!(image.pixels.len() >= BITMAP_MIN_PIXELS, "{name}");
        let (colours, _) = opaque_histogram(&image.pixels).expect("an opaque photo");
        assert_eq!(colours, sorted_histogram(&image.pixels), "{name}");
        assert_eq!(colours, map_count(&image.pixels), "{name}");
        assert_eq!(colour_histogram(&image), colours, "{name}");
        let index = ColourIndex::new(&image);
        assert!(matches!(index.ranks, Ranks::Bitmap(_)));
        check_ranks(&index);
    }
}

#[test]
fn partial_alpha_falls_back_to_sorting() {
    let mut image = photo("chelsea");
    let last = image.pixels.len() - 1;
    image.pixels[last][3] = 254;
    image.pixels[0][3] = 0;
    assert!(opaque_histogram(&image.pixels).is_none());
    let want = map_count(&image.pixels);
    assert_eq!(colour_histogram(&image), want);
    let index = ColourIndex::new(&image);
    assert!(matches!(index.ranks, Ranks::Hashed(_)));
    assert_eq!(index.colours(), want);
    check_ranks(&index);
    // An opaque colour the image has only with alpha 254 is absent.
    let mut opaque = image.pixels[last];
    opaque[3] = 255;
    if !image.pixels.contains(&opaque) {
        assert_eq!(index.rank_of(opaque), None);
    }
}

#[test]
fn tiny_images_sort_and_the_bitmap_agrees() {
    // Colours at the ends of the RGB cube and on both sides of 64-bit word
    // boundaries of the bitmap.
    let edges: Vec<[u8; 4]> = [
        0x000000u32,
        0x00003F,
        0x000040,
        0x00FFFF,
        0x010000,
        0xFFFFBF,
    ]
    .iter()
    .chain(&[0xFFFFC0, 0xFFFFFF, 0x7FFFFF, 0x800000])
    .map(|&rgb| (rgb << 8 | 0xFF).to_be_bytes())
    .collect();
    let mut cases: Vec<Vec<[u8; 4]>> = vec![vec![[1, 2, 3, 255]], vec![[255; 4]; 3]];
    cases.push(edges.clone());
    let mut twice = edges.clone();
    twice.extend(edges.iter().rev());
    cases.push(twice);
    for pixels in cases {
        let want = map_count(&pixels);
        let image = image(pixels.len() as u32, pixels);
        assert_eq!(colour_histogram(&image), want);
        assert_eq!(bitmap_histogram(&image.pixels), want);
        let index = ColourIndex::new(&image);
        assert_eq!(index.colours(), want);
        check_ranks(&index);
    }
}

#[test]
fn many_colours_give_the_same_list_on_any_number_of_threads() {
    // More pixels than one counting part, nearly all of them distinct.
    let mut rng = SeededRng::new(11);
    let pixels: Vec<[u8; 4]> = (0..600 * 600)
        .map(|_| {
            let [r, g, b, ..] = rng.next_u64().to_le_bytes();
            [r, g, b, 255]
        })
        .collect();
    let image = image(600, pixels);
    let want = sorted_histogram(&image.pixels);
    assert_eq!(want, map_count(&image.pixels));
    for threads in [1, 2, 3, 4] {
        let got = with_threads(threads, || colour_histogram(&image));
        assert_eq!(got, want, "{threads} threads");
    }
    check_ranks(&ColourIndex::new(&image));
}

#[test]
fn per_pixel_wants_one_value_per_colour() {
    let image = photo("chelsea");
    let index = ColourIndex::new(&image);
    let n = index.colours().len();
    let e = index.per_pixel(&vec![0; n + 1]).unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::Shape(_)), "{e}");
    assert_eq!(
        e.to_string(),
        format!("mapping pixels: {} values for {n} distinct colours", n + 1)
    );
}

/// The counts before each word as a plain running sum: the oracle for the
/// parallel count.
fn running_before(words: &[u64]) -> (Vec<u32>, usize) {
    let mut before = Vec::with_capacity(words.len());
    let mut len = 0u32;
    for w in words {
        before.push(len);
        len += w.count_ones();
    }
    (before, len as usize)
}

#[test]
fn members_before_is_a_running_sum_on_any_number_of_threads() {
    let mut rng = SeededRng::new(5);
    // Dense, sparse and empty stretches, so pieces hold very different
    // numbers of members.
    let words: Vec<u64> = (0..RGB_WORDS)
        .map(|w| match (w / WORDS_PER_PIECE) % 3 {
            0 => rng.next_u64(),
            1 => rng.next_u64() & rng.next_u64() & rng.next_u64(),
            _ => 0,
        })
        .collect();
    let want = running_before(&words);
    for threads in [1, 2, 3] {
        assert_eq!(
            with_threads(threads, || members_before(&words)),
            want,
            "{threads} threads"
        );
    }
}

/// A value per colour that differs between neighbouring colours and stays
/// below `bound`.
fn value_of(colour: [u8; 4], bound: u32) -> u32 {
    (u32::from_be_bytes(colour) >> 8).wrapping_mul(2_654_435_761) % bound
}

#[test]
fn spreading_without_a_list_equals_the_index_on_the_photos() {
    let chelsea = photo("chelsea");
    for (name, image) in [
        ("astronaut", photo("astronaut")),
        ("chelsea twice", twice(chelsea)),
    ] {
        let index = ColourIndex::new(&image);
        // One byte a value (a palette of up to 256 entries) and four.
        for bound in [256, 70_000] {
            let seen = std::sync::Mutex::new(Vec::new());
            let spread = spread_opaque(&image, bound, |colours, out| {
                seen.lock().unwrap().push(colours.to_vec());
                for (slot, &c) in out.iter_mut().zip(colours) {
                    *slot = value_of(c, bound);
                }
            })
            .expect("an opaque photo");
            // Every colour handed over once, in the list's order.
            let mut seen = seen.into_inner().unwrap();
            seen.sort();
            let listed: Vec<[u8; 4]> = index.colours().iter().map(|&(c, _)| c).collect();
            assert_eq!(seen.concat(), listed, "{name}");
            // The index's own spreading is the oracle.
            let values: Vec<u32> = listed.iter().map(|&c| value_of(c, bound)).collect();
            assert_eq!(spread, index.per_pixel(&values).unwrap(), "{name} {bound}");
        }
    }
}

#[test]
fn spreading_without_a_list_declines_small_or_transparent_images() {
    let never = |_: &[[u8; 4]], _: &mut [u32]| panic!("no colour should be handed over");
    let small = photo("chelsea");
    assert!(spread_opaque(&small, 256, never).is_none());
    let mut clear = twice(small);
    let last = clear.pixels.len() - 1;
    clear.pixels[last][3] = 254;
    assert!(spread_opaque(&clear, 256, never).is_none());
}
