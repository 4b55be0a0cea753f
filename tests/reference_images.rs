//! Palettes for photos and small displays, at library level: quality on two
//! photos against stored reference results, training under a display
//! constraint against rounding afterwards, pinned colours, transparency and
//! dithering.
//!
//! Every error figure is recomputed here from the indices and the palette
//! (8-bit sRGB, mean over pixels and the three channels) and compared with
//! what `palette::measure` reports.

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

use serde_json::Value;

use vqforge::colour::{ColourSpace, DisplayFormat};
use vqforge::kmeans::{Effort, TrainConfig};
use vqforge::load::{read_image, ImageLimits, RgbaImage};
use vqforge::palette::{measure, render, train_palette, AlphaMode, Dither, Palette, PaletteConfig};

fn image_path(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/images")
        .join(format!("{name}.png"))
}

fn load(name: &str) -> RgbaImage {
    let path = image_path(name);
    let bytes = std::fs::read(&path).unwrap();
    read_image(&bytes, &path.display().to_string(), &ImageLimits::default()).unwrap()
}

fn reference() -> Value {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/image_reference.json");
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn num(v: &Value, key: &str) -> f64 {
    v[key]
        .as_f64()
        .unwrap_or_else(|| panic!("{key:?} is not a number in {v}"))
}

/// A palette of `config.size` entries trained on `image` with `restarts`
/// k-means runs from the default master seed.
fn fit(image: &RgbaImage, config: &PaletteConfig, restarts: u32) -> Palette {
    fit_with(image, config, restarts, Effort::Thorough)
}

/// [`fit`] with an explicit effort.
fn fit_with(image: &RgbaImage, config: &PaletteConfig, restarts: u32, effort: Effort) -> Palette {
    let train = TrainConfig::new(config.size)
        .restarts(restarts)
        .effort(effort)
        .check()
        .unwrap();
    let t = train_palette(std::slice::from_ref(image), config, &train, &|_| {}).unwrap();
    Palette::from_codebook(&t.codebook).unwrap()
}

fn srgb_config(size: usize, display: DisplayFormat) -> PaletteConfig {
    let mut c = PaletteConfig::new(size);
    c.space = ColourSpace::Srgb;
    c.display = display;
    c
}

fn sq(a: [u8; 3], b: [u8; 3]) -> f64 {
    (0..3).map(|c| (a[c] as f64 - b[c] as f64).powi(2)).sum()
}

fn rgb(p: [u8; 4]) -> [u8; 3] {
    [p[0], p[1], p[2]]
}

/// Mean squared error per channel, 8-bit sRGB, of an opaque image whose
/// pixel i is shown as `shown(i)`.
fn mse_of(image: &RgbaImage, shown: impl Fn(usize) -> [u8; 3]) -> f64 {
    let sum: f64 = image
        .pixels
        .iter()
        .enumerate()
        .map(|(i, p)| sq(rgb(*p), shown(i)))
        .sum();
    sum / (image.pixels.len() as f64 * 3.0)
}

/// Maps without dithering, recomputes the error and checks that
/// `measure` reports the same figure. Returns the MSE.
fn mapped_mse(image: &RgbaImage, palette: &Palette) -> f64 {
    let indices = palette.map_image(image, Dither::None).unwrap();
    let ours = mse_of(image, |i| rgb(palette.entries[indices[i] as usize]));
    let reported = measure(image, &indices, palette).unwrap().mse;
    assert!(
        (reported - ours).abs() <= 1e-9 * ours,
        "measure says {reported}, recomputed {ours}"
    );
    ours
}

// ---- photos against the stored references --------------------------------

/// Our 8-bit MSE on a photo at `k`, in the sRGB working space (the space
/// both references minimise squared error in), against:
/// * Pillow 13.0.0 `Image.quantize(colors=k, method=Image.Quantize.MEDIANCUT,
///   dither=Image.Dither.NONE)`: ours must be lower;
/// * scikit-learn 1.9.1 `KMeans(n_clusters=k, n_init=N, algorithm="lloyd",
///   random_state=0, max_iter=300, tol=0)` on the distinct colours weighted
///   by pixel count, centres rounded to 8 bits and pixels reassigned to the
///   nearest rounded centre (`mse_rounded`): ours must be within 2 %.
///
/// Both are stored in tests/fixtures/image_reference.json by
/// scripts/make_image_fixtures.py (see tests/fixtures/README.md).
///
/// `restarts` below the default (3) only makes the bound harder to meet:
/// restart 0 uses the same derived seed whatever the count, and the best of
/// several restarts is never worse than restart 0. So a pass with
/// `restarts(1)` implies a pass with the default.
fn photo_case(name: &str, k: usize, restarts: u32) {
    photo_case_with(name, k, restarts, Effort::Thorough, 1.02);
}

/// [`photo_case`] at an effort, with the allowed ratio to scikit-learn's
/// rounded MSE.
fn photo_case_with(name: &str, k: usize, restarts: u32, effort: Effort, within: f64) {
    let refs = reference();
    let entry = &refs["images"][name];
    let case = entry["cases"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["k"].as_u64() == Some(k as u64))
        .unwrap_or_else(|| panic!("no reference for {name} at k = {k}"));
    let image = load(name);
    assert_eq!(image.pixels.len() as f64, num(entry, "pixels"));

    let palette = fit_with(
        &image,
        &srgb_config(k, DisplayFormat::Rgb888),
        restarts,
        effort,
    );
    assert_eq!(palette.len(), k);
    let ours = mapped_mse(&image, &palette);

    let median_cut = num(&case["pillow"]["mediancut"], "mse");
    let sklearn = num(&case["sklearn_kmeans"], "mse_rounded");
    eprintln!(
        "{name} k = {k}: ours {ours:.4}, Pillow median cut {median_cut:.4}, \
         scikit-learn rounded {sklearn:.4}, ratio {:.4}",
        ours / sklearn
    );
    assert!(
        ours < median_cut,
        "{name} k = {k}: mse {ours}, Pillow median cut {median_cut}"
    );
    assert!(
        ours <= within * sklearn,
        "{name} k = {k}, {effort:?}: mse {ours} is {:.4} × scikit-learn's rounded {sklearn}",
        ours / sklearn
    );
}

// Astronaut at k = 16 needs the default 3 restarts: one restart lands
// 2.5 % above scikit-learn's best of 40.
#[test]
fn astronaut_k16() {
    photo_case("astronaut", 16, 3);
}

#[test]
fn astronaut_k64() {
    photo_case("astronaut", 64, 1);
}

#[test]
fn astronaut_k256() {
    photo_case("astronaut", 256, 1);
}

#[test]
fn chelsea_k16() {
    photo_case("chelsea", 16, 3);
}

#[test]
fn chelsea_k64() {
    photo_case("chelsea", 64, 3);
}

#[test]
fn chelsea_k256() {
    photo_case("chelsea", 256, 1);
}

// The quick effort (one restart on a coarse stand-in for the colours, a few
// passes over all of them) trades a little error for time: still below
// median cut, and within 8 % of scikit-learn's best of its restarts (a
// bound of our choosing for the preset, not a published figure).
#[test]
fn quick_effort_photos_k64_and_k256() {
    for name in ["astronaut", "chelsea"] {
        for k in [64, 256] {
            photo_case_with(name, k, 1, Effort::Quick, 1.08);
        }
    }
}

// ---- display constraint --------------------------------------------------

/// Training under the display's constraint against the obvious alternative:
/// train freely at RGB888, snap every entry to the display format, drop
/// duplicates, map every pixel to its nearest snapped entry. Chelsea, k = 16,
/// both in the sRGB working space so training minimises the measured error.
/// Returns (constrained, free-then-snapped) 8-bit MSE after checking that
/// every constrained entry is showable and no entry repeats.
fn constrained_and_snapped(display: DisplayFormat) -> (f64, f64) {
    let image = load("chelsea");
    let constrained = fit(&image, &srgb_config(16, display), 3);
    for e in &constrained.entries {
        assert_eq!(
            display.snap(rgb(*e)),
            rgb(*e),
            "{display}: entry {e:?} is not showable"
        );
    }
    let distinct: BTreeSet<[u8; 3]> = constrained.rgb().into_iter().collect();
    assert_eq!(
        distinct.len(),
        constrained.len(),
        "{display}: repeated entries in {:?}",
        constrained.rgb()
    );
    let ours = mapped_mse(&image, &constrained);

    let free = fit(&image, &srgb_config(16, DisplayFormat::Rgb888), 3);
    let mut snapped: Vec<[u8; 3]> = Vec::new();
    for e in free.rgb() {
        let s = display.snap(e);
        if !snapped.contains(&s) {
            snapped.push(s);
        }
    }
    let nearest = |p: [u8; 3]| {
        *snapped
            .iter()
            .min_by(|a, b| sq(p, **a).total_cmp(&sq(p, **b)))
            .unwrap()
    };
    let baseline = mse_of(&image, |i| nearest(rgb(image.pixels[i])));
    eprintln!(
        "{display}: constrained {ours:.3} ({} entries), free then snapped {baseline:.3} ({} entries)",
        constrained.len(),
        snapped.len()
    );
    (ours, baseline)
}

fn constraint_beats_snapping(display: DisplayFormat) {
    let (ours, baseline) = constrained_and_snapped(display);
    assert!(
        ours < baseline,
        "{display}: constrained mse {ours}, free-then-snapped {baseline}"
    );
}

#[test]
fn constraint_beats_snapping_rgb565() {
    constraint_beats_snapping(DisplayFormat::Rgb565);
}

/// At RGB444 on chelsea, k = 16, constrained training ends exactly on the
/// free palette snapped to the grid (MSE 62.913 both): projected Lloyd cannot
/// leave a grid point whose cluster mean lies within half a level of it. It
/// must never end worse than snapping.
#[test]
fn constraint_never_loses_to_snapping_rgb444() {
    let (ours, baseline) = constrained_and_snapped(DisplayFormat::Rgb444);
    assert!(
        ours <= baseline * (1.0 + 1e-12),
        "rgb444: constrained mse {ours}, free-then-snapped {baseline}"
    );
}

#[test]
fn constraint_beats_snapping_gray4() {
    constraint_beats_snapping(DisplayFormat::Gray4);
}

/// Regression: when the allowed points near the data ran out, repaired
/// codewords stayed on top of others, so a 16-entry Gray2 palette held 3
/// distinct greys 16 times over (and RGB332 10 of 16). The palette must
/// shrink instead, say so, and keep all its entries distinct.
#[test]
fn coarse_display_gives_fewer_entries_not_repeats() {
    let image = load("chelsea");
    let config = srgb_config(16, DisplayFormat::Gray2);
    let train = TrainConfig::new(16).restarts(1).check().unwrap();
    let t = train_palette(std::slice::from_ref(&image), &config, &train, &|_| {}).unwrap();
    let palette = Palette::from_codebook(&t.codebook).unwrap();
    let entries = palette.rgb();
    let distinct: BTreeSet<[u8; 3]> = entries.iter().copied().collect();
    assert_eq!(distinct.len(), entries.len(), "{entries:?}");
    // A 2-bit grey display shows 4 colours.
    assert!(entries.len() <= 4, "{entries:?}");
    assert!(
        t.notices.iter().any(|n| n.contains("instead of 16")),
        "{:?}",
        t.notices
    );
    for e in &entries {
        assert_eq!(DisplayFormat::Gray2.snap(*e), *e);
    }
}

// ---- pinned colours and transparency -------------------------------------

#[test]
fn pinned_colours_are_in_the_palette_exactly() {
    let image = load("chelsea");
    // Pure red and blue are far from every colour of the photo, so no
    // trained entry would land on them by chance.
    let keep = vec![[0, 0, 0], [255, 255, 255], [255, 0, 0], [0, 0, 255]];
    for (space, display) in [
        (ColourSpace::Oklab, DisplayFormat::Rgb888),
        (ColourSpace::Srgb, DisplayFormat::Rgb565),
    ] {
        let mut config = PaletteConfig::new(16);
        config.space = space;
        config.display = display;
        config.keep = keep.clone();
        let palette = fit(&image, &config, 1);
        assert_eq!(palette.len(), 16);
        let entries = palette.rgb();
        for c in &keep {
            assert!(
                entries.contains(c),
                "{space}/{display}: {c:?} is not in {entries:?}"
            );
        }
        let distinct: BTreeSet<[u8; 3]> = entries.iter().copied().collect();
        assert_eq!(distinct.len(), 16, "{space}/{display}: {entries:?}");
    }
}

#[test]
fn transparent_pixels_get_entry_zero_and_partial_alpha_is_composited() {
    // 6 × 4: fully transparent pixels with different hidden colours, three
    // opaque colours, and one half-transparent orange.
    let clear = [[12, 34, 56, 0], [200, 0, 0, 0], [0, 0, 0, 0]];
    let opaque = [[10, 20, 30, 255], [250, 240, 230, 255], [0, 128, 0, 255]];
    let half = [200, 100, 0, 128];
    let mut pixels = Vec::new();
    for i in 0..24 {
        pixels.push(match i % 4 {
            0 => clear[i / 4 % 3],
            _ => opaque[i % 3],
        });
    }
    let half_at = 5;
    pixels[half_at] = half;
    let image = RgbaImage {
        width: 6,
        height: 4,
        pixels,
    };
    let mut config = PaletteConfig::new(8);
    config.alpha = AlphaMode::Composite {
        background: [0, 0, 255],
    };
    let palette = fit(&image, &config, 1);

    // Common practice (the "over" operator with straight alpha):
    // out = a·c + (1 − a)·bg with a = 128/255, bg = (0, 0, 255):
    // R = 200·128/255 = 100.39 → 100, G = 100·128/255 = 50.20 → 50,
    // B = 255·127/255 = 127.
    let composited = [100, 50, 127, 255];

    // Four visible colours fit in 7 entries, so each is kept as it is.
    assert_eq!(palette.len(), 5, "{:?}", palette.entries);
    assert_eq!(palette.entries[0][3], 0, "entry 0 is transparent");
    assert!(palette.entries[1..].iter().all(|e| e[3] == 255));
    for c in opaque.iter().chain([&composited]) {
        assert!(
            palette.entries.contains(c),
            "{c:?} not in {:?}",
            palette.entries
        );
    }
    let alpha = palette.alpha().expect("a transparent entry gives alpha");
    assert_eq!(alpha[0], 0);

    for dither in [Dither::None, Dither::FloydSteinberg, Dither::Bayer8] {
        let indices = palette.map_image(&image, dither).unwrap();
        for (i, (p, &idx)) in image.pixels.iter().zip(&indices).enumerate() {
            if p[3] == 0 {
                assert_eq!(idx, 0, "{dither:?}: transparent pixel {i}");
            } else {
                assert_ne!(idx, 0, "{dither:?}: visible pixel {i} got entry 0");
            }
        }
        // Ordered dithering may move an exact colour to a neighbour entry;
        // the other two keep exact colours exact.
        if dither != Dither::Bayer8 {
            assert_eq!(palette.entries[indices[half_at] as usize], composited);
        }
        let e = measure(&image, &indices, &palette).unwrap();
        assert_eq!(e.pixels, 18, "transparent pixels are left out");
        if dither == Dither::None {
            assert_eq!(e.mse, 0.0);
        }
    }
}

// ---- dithering -----------------------------------------------------------

/// Mean over 8 × 8 blocks of |block mean of a − block mean of b|, for grey
/// images given as one value per pixel.
fn block_mean_error(a: &[f64], b: &[f64], width: usize) -> f64 {
    let height = a.len() / width;
    let mut total = 0.0;
    let mut blocks = 0;
    for by in (0..height).step_by(8) {
        for bx in (0..width).step_by(8) {
            let (mut sa, mut sb) = (0.0, 0.0);
            for y in by..by + 8 {
                for x in bx..bx + 8 {
                    sa += a[y * width + x];
                    sb += b[y * width + x];
                }
            }
            total += (sa - sb).abs() / 64.0;
            blocks += 1;
        }
    }
    total / blocks as f64
}

#[test]
fn dithering_keeps_local_means_of_a_grey_gradient() {
    let (w, h) = (256usize, 16usize);
    let pixels: Vec<[u8; 4]> = (0..w * h)
        .map(|i| {
            let v = (i % w) as u8;
            [v, v, v, 255]
        })
        .collect();
    let image = RgbaImage {
        width: w as u32,
        height: h as u32,
        pixels,
    };
    let palette = fit(&image, &srgb_config(4, DisplayFormat::Gray2), 1);
    // The four grey levels of a 2-bit display: round(i·255/3).
    let levels: BTreeSet<[u8; 3]> = [0u8, 85, 170, 255].iter().map(|&v| [v; 3]).collect();
    let entries: BTreeSet<[u8; 3]> = palette.rgb().into_iter().collect();
    assert_eq!(entries, levels);

    let original: Vec<f64> = image.pixels.iter().map(|p| p[0] as f64).collect();
    let error = |dither: Dither| {
        let indices = palette.map_image(&image, dither).unwrap();
        assert!(indices.iter().all(|&i| (i as usize) < palette.len()));
        let shown = render(&indices, &palette).unwrap();
        for p in &shown {
            assert!(levels.contains(&rgb(*p)), "{dither:?}: {p:?}");
        }
        let grey: Vec<f64> = shown.iter().map(|p| p[0] as f64).collect();
        block_mean_error(&original, &grey, w)
    };
    let plain = error(Dither::None);
    for dither in [Dither::FloydSteinberg, Dither::Bayer4, Dither::Bayer8] {
        let e = error(dither);
        eprintln!("{dither:?}: block-mean error {e:.3}, undithered {plain:.3}");
        assert!(e < plain, "{dither:?}: {e} is not below {plain}");
    }
}
