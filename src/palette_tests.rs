//! Tests of mapping and measuring. The fast paths (mapping each distinct
//! colour once, measuring from the distinct colours, sorting pairs,
//! selecting the percentile) are checked against slow, obviously-right
//! oracles: [`Palette::index_of`] for every pixel, and the error figures
//! computed pixel by pixel with a full sort for the percentile. The photos
//! are tests/data/images/astronaut.png and chelsea.png, byte copies of
//! scikit-image's (see tests/fixtures/README.md).

use super::*;
use crate::kmeans::{Seeding, StopReason};
use crate::load::test_photo as photo;
use crate::rng::SeededRng;

fn chelsea() -> RgbaImage {
    photo("chelsea")
}

/// Chelsea with a fully transparent band (its colours kept, so several
/// transparent colours) and a band of partial alpha.
fn chelsea_with_alpha() -> RgbaImage {
    let mut image = chelsea();
    let w = image.width as usize;
    for (i, p) in image.pixels.iter_mut().enumerate() {
        let (x, y) = (i % w, i / w);
        if y < 20 {
            p[3] = 0;
        } else if y < 60 {
            p[3] = (x * 7 % 256) as u8;
        }
    }
    image
}

/// A palette of `k` visible entries spread over the image's colours (no
/// training: what is tested does not depend on how good it is).
fn palette_for(image: &RgbaImage, config: &PaletteConfig, k: usize) -> Palette {
    let input = PaletteInput::new(std::slice::from_ref(image), config).unwrap();
    let n = input.vectors.len();
    let codewords: Vec<f32> = (0..k)
        .flat_map(|j| input.vectors.row(j * n / k).to_vec())
        .collect();
    let facts = TrainingFacts {
        seed: 0,
        restarts: 1,
        seeding: Seeding::KMeansPlusPlus,
        iterations: 0,
        stopped_by: StopReason::Converged,
        vectors: n as u64,
        distinct_vectors: n as u64,
        mse_scaled: 0.0,
    };
    let book = input
        .codebook(&codewords, facts, PaletteOrder::Frequency)
        .unwrap();
    Palette::from_codebook(&book).unwrap()
}

fn config(space: ColourSpace, alpha: AlphaMode) -> PaletteConfig {
    let mut c = PaletteConfig::new(64);
    c.space = space;
    c.alpha = alpha;
    c
}

/// The cases: astronaut, opaque and large enough for the bitmap path of
/// colour counting, and chelsea with alpha (the hashed path), composited
/// and with alpha kept, in two working spaces.
fn cases() -> Vec<(RgbaImage, Palette)> {
    let composite = AlphaMode::Composite {
        background: [255, 255, 255],
    };
    let mut out = Vec::new();
    for (image, alpha) in [
        (photo("astronaut"), composite),
        (chelsea_with_alpha(), composite),
        (chelsea_with_alpha(), AlphaMode::Keep),
    ] {
        for space in [ColourSpace::Srgb, ColourSpace::Lab] {
            let palette = palette_for(&image, &config(space, alpha), 48);
            out.push((image.clone(), palette));
        }
    }
    out
}

/// The error figures computed pixel by pixel, as `ImageError` defines
/// them: exactly represented transparent pixels left out, the mean over
/// pixels and channels, the 95th percentile of the sorted per-pixel
/// CIEDE2000 values (the ⌈0.95 n⌉-th smallest).
fn error_pixel_by_pixel(image: &RgbaImage, indices: &[u32], palette: &Palette) -> ImageError {
    let used = palette.layout.dimension();
    let mut sq = 0.0f64;
    let mut des = Vec::new();
    for (&p, &i) in image.pixels.iter().zip(indices) {
        if palette.reserved_for(p) == Some(i) {
            continue;
        }
        let c = handled(p, palette.layout.alpha);
        let e = palette.entries[i as usize];
        sq += (0..used)
            .map(|ch| (c[ch] as f64 - e[ch] as f64).powi(2))
            .sum::<f64>();
        let lab = |v: [u8; 4]| rgb8_to_lab([v[0], v[1], v[2]]);
        des.push(delta_e2000(lab(c), lab(e)));
    }
    let n = des.len();
    let mse = sq / (n as f64 * used as f64);
    let mean = des.iter().sum::<f64>() / n as f64;
    des.sort_by(f64::total_cmp);
    let p95 = des[(0.95 * n as f64).ceil() as usize - 1];
    ImageError {
        pixels: n as u64,
        mse,
        psnr_db: psnr_db(255.0, mse),
        delta_e2000_mean: mean,
        delta_e2000_p95: p95,
    }
}

fn assert_close(got: &ImageError, want: &ImageError, what: &str) {
    let close = |a: f64, b: f64| (a - b).abs() <= 1e-12 * b.abs().max(1.0);
    assert_eq!(got.pixels, want.pixels, "{what}");
    assert!(close(got.mse, want.mse), "{what}: {got:?} vs {want:?}");
    assert!(
        close(got.delta_e2000_mean, want.delta_e2000_mean),
        "{what}: {got:?} vs {want:?}"
    );
    assert_eq!(got.delta_e2000_p95, want.delta_e2000_p95, "{what}");
}

#[test]
fn plain_mapping_is_index_of_every_pixel() {
    for (n, (image, palette)) in cases().iter().enumerate() {
        let want: Vec<u32> = image.pixels.iter().map(|&p| palette.index_of(p)).collect();
        assert_eq!(
            palette.map_image(image, Dither::None).unwrap(),
            want,
            "case {n}"
        );
        let mapped = palette.map_colours(&ColourIndex::new(image)).unwrap();
        assert_eq!(mapped.indices, want, "case {n}");
    }
}

#[test]
fn use_counts_equal_one_search_per_colour() {
    // The counts that order a palette by frequency, against each distinct
    // colour searched alone (`Encoder::nearest`, lowest index on ties).
    let composite = AlphaMode::Composite {
        background: [255, 255, 255],
    };
    for (image, alpha) in [
        (photo("astronaut"), composite),
        (chelsea_with_alpha(), AlphaMode::Keep),
    ] {
        for space in [ColourSpace::Srgb, ColourSpace::Lab] {
            let input =
                PaletteInput::new(std::slice::from_ref(&image), &config(space, alpha)).unwrap();
            let (n, d) = (input.vectors.len(), input.vectors.dimension());
            let codewords: Vec<f32> = (0..48)
                .flat_map(|j| input.vectors.row(j * n / 48).to_vec())
                .collect();
            let encoder = Encoder::new(&codewords, d).unwrap();
            let mut want = vec![0u64; 48];
            for (row, &(_, count)) in input.vectors.rows().zip(&input.colours) {
                want[encoder.nearest(row).index as usize] += count;
            }
            assert_eq!(
                input.use_counts(&codewords).unwrap(),
                want,
                "{space:?} {alpha:?}"
            );
            assert_eq!(want.iter().sum::<u64>(), input.pixels - input.transparent);
        }
    }
}

#[test]
fn measuring_the_distinct_colours_equals_measuring_every_pixel() {
    for (n, (image, palette)) in cases().iter().enumerate() {
        let indices = palette.map_image(image, Dither::None).unwrap();
        let every_pixel = measure(image, &indices, palette).unwrap();
        assert_close(
            &every_pixel,
            &error_pixel_by_pixel(image, &indices, palette),
            &format!("case {n}"),
        );
        // The same pairs reach the same sums in the same order: equal bits.
        let mapped = palette.map_measured(image, Dither::None).unwrap();
        assert_eq!(mapped.indices, indices, "case {n}");
        assert_eq!(mapped.error, every_pixel, "case {n}");
        let colours = colour_histogram(image);
        assert_eq!(
            measure_colours(&colours, palette).unwrap(),
            every_pixel,
            "case {n}"
        );
    }
}

#[test]
fn measuring_dithered_pixels_matches_the_pixel_by_pixel_figures() {
    for (n, (image, palette)) in cases().iter().enumerate().step_by(2) {
        for dither in [Dither::FloydSteinberg, Dither::Bayer4] {
            let mapped = palette.map_measured(image, dither).unwrap();
            assert_eq!(mapped.indices, palette.map_image(image, dither).unwrap());
            assert_close(
                &mapped.error,
                &error_pixel_by_pixel(image, &mapped.indices, palette),
                &format!("case {n}, {dither:?}"),
            );
        }
    }
}

#[test]
fn measuring_refuses_indices_that_do_not_fit() {
    let image = chelsea();
    let palette = palette_for(&image, &config(ColourSpace::Srgb, AlphaMode::Keep), 8);
    let mut indices = palette.map_image(&image, Dither::None).unwrap();
    let e = measure(&image, &indices[1..], &palette).unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::Shape(_)), "{e}");
    indices[500] = 8;
    let e = measure(&image, &indices, &palette).unwrap_err();
    assert_eq!(e.to_string(), "measuring: index 8 is beyond the palette");
    let colours = colour_histogram(&image);
    let mut per_colour = palette.indices_of(&colours);
    per_colour[3] = 9;
    let e = measure_indexed(&colours, &per_colour, &palette).unwrap_err();
    assert_eq!(e.to_string(), "measuring: index 9 is beyond the palette");
}

/// The percentile as the old code found it: sort by value, walk the
/// running weight.
fn percentile_by_sorting(values: &[(f64, u64)], target: u64) -> f64 {
    let mut sorted = values.to_vec();
    sorted.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut seen = 0;
    for (v, w) in sorted {
        seen += w;
        if seen >= target {
            return v;
        }
    }
    0.0
}

#[test]
fn percentile_by_selection_equals_sorting() {
    let mut rng = SeededRng::new(5);
    assert_eq!(weighted_percentile(&mut [], 0), 0.0);
    assert_eq!(weighted_percentile(&mut [(2.5, 3)], 3), 2.5);
    assert_eq!(weighted_percentile(&mut [(2.5, 3)], 4), 0.0);
    for len in [1, 2, 3, 10, 100, 1000] {
        for _ in 0..20 {
            // Few distinct values, so many ties.
            let values: Vec<(f64, u64)> = (0..len)
                .map(|_| (rng.below(17) as f64 * 0.25, 1 + rng.below(9)))
                .collect();
            let total: u64 = values.iter().map(|v| v.1).sum();
            for target in [1, total / 2, (0.95 * total as f64).ceil() as u64, total] {
                let want = percentile_by_sorting(&values, target);
                let got = weighted_percentile(&mut values.clone(), target);
                assert_eq!(got, want, "len {len}, target {target}");
            }
        }
    }
}
