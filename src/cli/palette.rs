//! Images: `vqforge palette` (one step to an indexed PNG), and the image
//! side of `train`, `encode` and `decode`.

use std::path::{Path, PathBuf};
use std::time::Instant;

use anyhow::{Context, Result};
use serde_json::json;

use vqforge::atomic::{write_all_atomic, write_atomic, AtomicFile};
use vqforge::codebook::Codebook;
use vqforge::colour::{ColourSpace, DisplayFormat};
use vqforge::export::{
    bit_depth_for, c_identifier, c_source, pack_rows, write_indexed_png, write_rgb_png,
    write_rgba_png, CImage,
};
use vqforge::format::{self, ImageInfo, StreamHeader};
use vqforge::kmeans::{Effort, TrainEvent, TrainReport, QUICK_REFINE_PASSES};
use vqforge::load::{read_image, ColourIndex, ImageLimits, RgbaImage};
use vqforge::metrics;
use vqforge::palette::{
    hex, parse_hex, render, train_input, train_palette, AlphaMode, Dither, ImageError, MappedImage,
    Palette, PaletteConfig, PaletteInput, PaletteOrder,
};

use super::args::{
    AlphaArg, ColourArgs, DisplayArg, DitherArg, EncodeArgs, OrderArg, PaletteArgs, SpaceArg,
    TrainArgs,
};
use super::output::{jnum, notices, num, print_json, print_pairs, secs};
use super::train::train_config;
use super::{progress, same_file, usage};

/// True when the file starts like an image (PNG, JPEG, BMP, TIFF, WebP or GIF).
pub fn is_image(path: &Path) -> bool {
    let mut head = [0u8; 12];
    let n = std::fs::File::open(path)
        .and_then(|mut f| std::io::Read::read(&mut f, &mut head))
        .unwrap_or(0);
    let h = &head[..n];
    h.starts_with(b"\x89PNG")
        || h.starts_with(&[0xFF, 0xD8, 0xFF])
        || h.starts_with(b"BM")
        || h.starts_with(b"II*\0")
        || h.starts_with(b"MM\0*")
        || (h.starts_with(b"RIFF") && h.len() >= 12 && &h[8..12] == b"WEBP")
        || h.starts_with(b"GIF8")
}

/// File name endings of the image formats read (and GIF, refused when read).
const IMAGE_EXTENSIONS: [&str; 8] = ["png", "jpg", "jpeg", "bmp", "tif", "tiff", "webp", "gif"];

/// True when the file name ends like an image's (case-insensitive).
fn named_like_image(path: &Path) -> bool {
    path.extension()
        .and_then(|e| e.to_str())
        .is_some_and(|e| IMAGE_EXTENSIONS.iter().any(|x| e.eq_ignore_ascii_case(x)))
}

/// Refuses a file named like an image whose bytes are not one, rather than
/// reading it as CSV records and reporting a confusing CSV error (or,
/// for a renamed table, silently training a record codebook).
pub fn refuse_image_name_without_image(path: &Path) -> Result<()> {
    if named_like_image(path) && path.is_file() && !is_image(path) {
        anyhow::bail!(
            "reading image: {}: the name says image but the content is not a PNG, JPEG, BMP, TIFF or WebP image; if it holds CSV records, give it a .csv name",
            path.display()
        );
    }
    Ok(())
}

fn limits(max_pixels: Option<u64>) -> ImageLimits {
    let mut l = ImageLimits::default();
    if let Some(m) = max_pixels {
        l.max_pixels = m;
    }
    l
}

/// Reads and decodes an image file.
pub fn load_image(path: &Path, max_pixels: Option<u64>) -> Result<RgbaImage> {
    let name = path.display().to_string();
    let bytes = std::fs::read(path).with_context(|| format!("reading image {name}"))?;
    Ok(read_image(&bytes, &name, &limits(max_pixels))?)
}

fn space_of(s: SpaceArg) -> ColourSpace {
    match s {
        SpaceArg::Srgb => ColourSpace::Srgb,
        SpaceArg::Linear => ColourSpace::Linear,
        SpaceArg::Lab => ColourSpace::Lab,
        SpaceArg::Oklab => ColourSpace::Oklab,
    }
}

fn display_of(d: DisplayArg) -> DisplayFormat {
    match d {
        DisplayArg::Rgb888 => DisplayFormat::Rgb888,
        DisplayArg::Rgb666 => DisplayFormat::Rgb666,
        DisplayArg::Rgb565 => DisplayFormat::Rgb565,
        DisplayArg::Rgb555 => DisplayFormat::Rgb555,
        DisplayArg::Rgb444 => DisplayFormat::Rgb444,
        DisplayArg::Rgb332 => DisplayFormat::Rgb332,
        DisplayArg::Gray8 => DisplayFormat::Gray8,
        DisplayArg::Gray4 => DisplayFormat::Gray4,
        DisplayArg::Gray2 => DisplayFormat::Gray2,
        DisplayArg::Gray1 => DisplayFormat::Gray1,
    }
}

/// The library's dithering choice.
pub fn dither_of(d: DitherArg) -> Dither {
    match d {
        DitherArg::None => Dither::None,
        DitherArg::FloydSteinberg => Dither::FloydSteinberg,
        DitherArg::Bayer4 => Dither::Bayer4,
        DitherArg::Bayer8 => Dither::Bayer8,
    }
}

pub(super) fn dither_name(d: Dither) -> &'static str {
    match d {
        Dither::None => "none",
        Dither::FloydSteinberg => "floyd-steinberg",
        Dither::Bayer4 => "bayer4",
        Dither::Bayer8 => "bayer8",
    }
}

/// Palette parameters from the flags.
pub fn palette_config(size: usize, c: &ColourArgs) -> Result<PaletteConfig> {
    let mut p = PaletteConfig::new(size);
    if let Some(s) = c.space {
        p.space = space_of(s);
    }
    if let Some(d) = c.display {
        p.display = display_of(d);
    }
    if let Some(keep) = &c.keep {
        p.keep = keep
            .iter()
            .map(|k| parse_hex(k).context("--keep"))
            .collect::<Result<_>>()?;
    }
    let background = match &c.background {
        Some(b) => parse_hex(b).context("--background")?,
        None => [255, 255, 255],
    };
    p.alpha = match c.alpha {
        Some(AlphaArg::Keep) => {
            if c.background.is_some() {
                return usage("--background applies to --alpha composite, not --alpha keep");
            }
            AlphaMode::Keep
        }
        _ => AlphaMode::Composite { background },
    };
    if let Some(o) = c.order {
        p.order = match o {
            OrderArg::Frequency => PaletteOrder::Frequency,
            OrderArg::Lightness => PaletteOrder::Lightness,
        };
    }
    p.check()?;
    Ok(p)
}

fn check_png_size(size: usize) -> Result<()> {
    if size == 1 {
        return usage(
            "--size 1 would paint every pixel one colour; use --size 2 or more (2 colours take 1 bit per pixel)",
        );
    }
    if size > 256 {
        return usage(format!(
            "--size {size}: an indexed PNG holds at most 256 colours; use --size 256 or less, or keep a larger codebook with 'train' and 'encode'"
        ));
    }
    Ok(())
}

fn spinner_observer(
    bar: &indicatif::ProgressBar,
    restarts: u32,
) -> impl Fn(TrainEvent) + Sync + '_ {
    move |e| match e {
        TrainEvent::RestartStarted { restart, of } => {
            bar.set_message(format!("restart {}/{of}", restart + 1))
        }
        TrainEvent::Iteration {
            restart, iteration, ..
        } => bar.set_message(format!(
            "restart {}/{restarts}, iteration {iteration}",
            restart + 1
        )),
    }
}

pub(super) fn report_json(e: &ImageError) -> serde_json::Value {
    json!({
        "mse": e.mse,
        "psnr_db": jnum(e.psnr_db),
        "delta_e2000_mean": e.delta_e2000_mean,
        "delta_e2000_p95": e.delta_e2000_p95,
    })
}

fn error_pairs(e: &ImageError) -> Vec<(&'static str, String)> {
    vec![
        ("mse (8-bit)", num(e.mse)),
        ("psnr", super::output::db(e.psnr_db)),
        (
            "ΔE2000",
            format!(
                "mean {}, 95th percentile {}",
                num(e.delta_e2000_mean),
                num(e.delta_e2000_p95)
            ),
        ),
    ]
}

/// The indexed PNG of `image` mapped to `palette`, in memory.
fn png_bytes(image: &RgbaImage, indices: &[u32], palette: &Palette) -> Result<Vec<u8>> {
    let mut bytes = Vec::new();
    let alpha = palette.alpha();
    write_indexed_png(
        &mut bytes,
        image.width,
        image.height,
        &palette.rgb(),
        alpha.as_deref(),
        indices,
    )?;
    Ok(bytes)
}

/// Writes the indexed PNG atomically; returns its bytes.
pub(super) fn write_png(
    path: &Path,
    image: &RgbaImage,
    indices: &[u32],
    palette: &Palette,
) -> Result<u64> {
    let name = path.display().to_string();
    let bytes = png_bytes(image, indices, palette).with_context(|| format!("writing {name}"))?;
    write_atomic(path, &bytes).with_context(|| format!("writing {name}"))?;
    Ok(bytes.len() as u64)
}

/// C source for an indexed image (see [`c_source`]): the palette packed in
/// its display's format and `packed` rows (from [`pack_rows`]). `made_by`
/// lines go into the top comment after the size and palette format.
pub(super) fn c_text(
    symbol: &str,
    width: u32,
    height: u32,
    packed: &[u8],
    palette: &Palette,
    bits: u8,
    made_by: &[String],
) -> Result<String> {
    let layout = palette.layout();
    let display = layout.display;
    let entries: Vec<u32> = palette.rgb().iter().map(|c| display.pack(*c)).collect();
    let mut comment = vec![
        format!(
            "{}×{} pixels, {} palette entries, {} bits per pixel",
            width,
            height,
            palette.len(),
            bits
        ),
        format!(
            "palette entries packed as {} ({} bits each)",
            display.name(),
            display.bits_per_pixel()
        ),
    ];
    comment.extend_from_slice(made_by);
    if layout.transparent_entry {
        comment.push("entry 0 stands for fully transparent pixels".into());
    }
    Ok(c_source(&CImage {
        symbol,
        width,
        height,
        bits_per_pixel: bits,
        palette: &entries,
        palette_entry_bits: display.bits_per_pixel(),
        pixels: packed,
        comment_lines: &comment,
    })?)
}

/// The `--raw` and `--c-source` files asked for, with their bytes.
fn firmware_files(
    a: &PaletteArgs,
    image: &RgbaImage,
    indices: &[u32],
    palette: &Palette,
    bits: u8,
) -> Result<Vec<(PathBuf, Vec<u8>)>> {
    let mut files = Vec::new();
    if a.c_source.is_none() && a.raw.is_none() {
        return Ok(files);
    }
    let packed = pack_rows(indices, image.width, image.height, bits)?;
    if let Some(path) = &a.c_source {
        let stem = path
            .file_stem()
            .map(|s| s.to_string_lossy().to_string())
            .unwrap_or_else(|| "image".into());
        let made_by = [format!(
            "made by vqforge palette from {} (space {}, dither {})",
            a.image.display(),
            palette.layout().space.name(),
            dither_name(dither_of(a.dither))
        )];
        let text = c_text(
            &c_identifier(&stem),
            image.width,
            image.height,
            &packed,
            palette,
            bits,
            &made_by,
        )?;
        files.push((path.clone(), text.into_bytes()));
    }
    if let Some(raw) = &a.raw {
        files.push((raw.clone(), packed));
    }
    Ok(files)
}

/// Refuses two outputs that name one file, and an output that is the input.
fn check_outputs(a: &PaletteArgs) -> Result<()> {
    let outputs: Vec<(&str, &PathBuf)> = [
        ("--out", Some(&a.out)),
        ("--c-source", a.c_source.as_ref()),
        ("--raw", a.raw.as_ref()),
    ]
    .into_iter()
    .filter_map(|(flag, out)| out.map(|o| (flag, o)))
    .collect();
    for (i, (flag, out)) in outputs.iter().enumerate() {
        if same_file(&a.image, out) {
            return usage(format!(
                "{flag} {} is the input image; choose another output file",
                a.image.display()
            ));
        }
        if let Some((other, _)) = outputs[..i]
            .iter()
            .find(|(_, earlier)| same_file(earlier, out))
        {
            return usage(format!(
                "{other} and {flag} both name {}; give each output its own file",
                out.display()
            ));
        }
    }
    Ok(())
}

/// `vqforge palette IMAGE --size K --out OUT.png`.
pub fn run(a: PaletteArgs) -> Result<()> {
    let started = Instant::now();
    check_png_size(a.size)?;
    check_outputs(&a)?;
    let config = palette_config(a.size, &a.colour)?;
    let train = train_config(a.size, &a.kmeans, Effort::Quick)?.check()?;
    let image = load_image(&a.image, a.colour.max_pixels)?;
    // Counted once: trained on, then (undithered) mapped and measured.
    let colours = ColourIndex::new(&image);
    let bar = progress::spinner("fitting palette");
    let observe = spinner_observer(&bar, train.get().restarts);
    let t = train_input(
        &PaletteInput::from_histogram(colours.colours(), &config)?,
        &config,
        &train,
        &observe,
    )?;
    bar.set_message("mapping pixels");
    let palette = Palette::from_codebook(&t.codebook)?;
    let dither = dither_of(a.dither);
    let MappedImage {
        indices,
        error: err,
    } = match dither {
        Dither::None => palette.map_colours(&colours)?,
        _ => {
            drop(colours);
            palette.map_measured(&image, dither)?
        }
    };
    bar.finish_and_clear();
    let bits = bit_depth_for(palette.len());
    let png = png_bytes(&image, &indices, &palette)
        .with_context(|| format!("writing {}", a.out.display()))?;
    let output_bytes = png.len() as u64;
    let firmware = firmware_files(&a, &image, &indices, &palette, bits)?;
    let mut files: Vec<(&Path, &[u8])> = vec![(a.out.as_path(), png.as_slice())];
    files.extend(firmware.iter().map(|(p, b)| (p.as_path(), b.as_slice())));
    write_all_atomic(&files).context("writing the outputs")?;
    let seconds = started.elapsed().as_secs_f64();
    notices(&t.notices);
    let layout = palette.layout();
    if a.json {
        let mut v = json!({
            "size": palette.len(),
            "requested_size": a.size,
            "width": image.width,
            "height": image.height,
            "pixels": t.pixels,
            "distinct_colours": t.distinct_colours,
            "bits_per_pixel": bits,
            "output_bytes": output_bytes,
            "space": layout.space.name(),
            "display": layout.display.name(),
            "dither": dither_name(dither),
            "palette": palette.entries.iter().map(|e| hex([e[0], e[1], e[2]])).collect::<Vec<_>>(),
            "seed": t.report.seed,
            "effort": t.report.effort.as_str(),
            "coarse_start_cells": t.report.coarse_vectors,
            "sample_draws": t.report.sample_draws,
            "seconds": seconds,
            "notices": t.notices,
        });
        merge(&mut v, report_json(&err));
        return print_json(&v);
    }
    let mut pairs = vec![
        (
            "image",
            format!(
                "{} ({}×{}, {} distinct colours)",
                a.image.display(),
                image.width,
                image.height,
                t.distinct_colours
            ),
        ),
        (
            "palette",
            format!(
                "{} entries for {}, fitted in {}, dither {}",
                palette.len(),
                layout.display.name(),
                layout.space.name(),
                dither_name(dither)
            ),
        ),
        (
            "output",
            format!(
                "{} ({output_bytes} bytes, {bits} bits per pixel)",
                a.out.display()
            ),
        ),
    ];
    pairs.extend(coarse_start_line(&t.report));
    pairs.extend(error_pairs(&err));
    pairs.push(("time", secs(seconds)));
    print_pairs(&pairs)
}

/// What a coarse start did, for the human report.
fn coarse_start_line(r: &TrainReport) -> Option<(&'static str, String)> {
    let cells = r.coarse_vectors?;
    let refined = match r.effort {
        Effort::Quick => format!("with at most {QUICK_REFINE_PASSES} Lloyd passes over"),
        Effort::Thorough => "on".to_string(),
    };
    Some((
        "coarse start",
        format!(
            "restarts ran on {cells} cell means of the colours; the best was refined {refined} all of them"
        ),
    ))
}

pub(super) fn merge(into: &mut serde_json::Value, from: serde_json::Value) {
    if let (Some(a), serde_json::Value::Object(b)) = (into.as_object_mut(), from) {
        a.extend(b);
    }
}

/// `vqforge train IMAGE… --size K --out BOOK`: one palette for all images.
pub fn train_images(a: TrainArgs) -> Result<()> {
    let started = Instant::now();
    if a.shape.columns.is_some() || a.shape.frame != 1 {
        return usage("--columns and --frame apply to CSV records, not images");
    }
    let limits = super::limits(&a.limits, a.colour.max_pixels)?;
    super::check_size("--size", a.size, &limits)?;
    let config = palette_config(a.size, &a.colour)?;
    let train = train_config(a.size, &a.kmeans, Effort::Quick)?.check()?;
    let mut images = Vec::new();
    let mut pixels = 0u64;
    for p in &a.inputs {
        let image = load_image(p, a.colour.max_pixels)?;
        pixels += image.pixels.len() as u64;
        limits.check_vectors("reading images", "the training set", pixels)?;
        images.push(image);
    }
    let bar = progress::spinner("fitting palette");
    let observe = spinner_observer(&bar, train.get().restarts);
    let t = train_palette(&images, &config, &train, &observe)?;
    bar.finish_and_clear();
    format::write_codebook(&a.out, &t.codebook)
        .with_context(|| format!("writing codebook {}", a.out.display()))?;
    let palette = Palette::from_codebook(&t.codebook)?;
    let seconds = started.elapsed().as_secs_f64();
    notices(&t.notices);
    let r = &t.report;
    let mse_scaled = r.mse_per_component;
    if a.json {
        return print_json(&json!({
            "size": palette.len(),
            "requested_size": a.size,
            "dimension": t.codebook.dimension,
            "vectors": t.pixels,
            "distinct_vectors": t.distinct_colours,
            "images": images.len(),
            "mse_scaled": mse_scaled,
            "iterations": r.iterations,
            "stopped_by": r.stopped_by.as_str(),
            "restarts": r.restart_distortions.len(),
            "effort": r.effort.as_str(),
            "coarse_start_cells": r.coarse_vectors,
            "sample_draws": r.sample_draws,
            "seed": r.seed,
            "space": palette.layout().space.name(),
            "display": palette.layout().display.name(),
            "palette": palette.entries.iter().map(|e| hex([e[0], e[1], e[2]])).collect::<Vec<_>>(),
            "out": a.out.display().to_string(),
            "seconds": seconds,
            "notices": t.notices,
        }));
    }
    let mut pairs = vec![
        (
            "palette",
            format!(
                "{} ({} entries for {}, fitted in {})",
                a.out.display(),
                palette.len(),
                palette.layout().display.name(),
                palette.layout().space.name()
            ),
        ),
        (
            "trained on",
            format!(
                "{} image(s), {} pixels, {} distinct colours",
                images.len(),
                t.pixels,
                t.distinct_colours
            ),
        ),
        (
            "k-means",
            format!(
                "{} restart(s), {} effort, seed {}, {} iteration(s), stopped: {}",
                r.restart_distortions.len(),
                r.effort.as_str(),
                r.seed,
                r.iterations,
                r.stopped_by.as_str()
            ),
        ),
    ];
    pairs.extend(coarse_start_line(r));
    pairs.push(("mse (working space)", num(mse_scaled)));
    pairs.push(("time", secs(seconds)));
    print_pairs(&pairs)
}

/// `vqforge encode IMAGE --book PALETTE --out STREAM`.
pub fn encode_image(a: &EncodeArgs, book: &Codebook) -> Result<()> {
    let started = Instant::now();
    let palette =
        Palette::from_codebook(book).with_context(|| format!("codebook {}", a.book.display()))?;
    // A missing input is left to `load_image`, which names the I/O error.
    if a.input.is_file() && !is_image(&a.input) {
        anyhow::bail!(
            "codebook {} is a palette trained on images, but {} is not an image; encode CSV records with a codebook trained on CSV",
            a.book.display(),
            a.input.display()
        );
    }
    let image = load_image(&a.input, a.max_pixels)?;
    let dither = dither_of(a.dither.unwrap_or(DitherArg::None));
    let MappedImage {
        indices,
        error: err,
    } = palette.map_measured(&image, dither)?;
    let mut header = StreamHeader::for_codebook(book, indices.len() as u64, None)?;
    header.image = Some(ImageInfo {
        width: image.width,
        height: image.height,
    });
    format::write_stream(&a.out, &header, &indices)
        .with_context(|| format!("writing stream {}", a.out.display()))?;
    let stream_bytes = std::fs::metadata(&a.out)?.len();
    let entropy = metrics::index_entropy_bits(&metrics::index_counts(&indices, book.size()));
    let raw_bytes = indices.len() as u64 * 3;
    let seconds = started.elapsed().as_secs_f64();
    if a.json {
        let mut v = json!({
            "size": book.size(),
            "dimension": book.dimension,
            "vectors": indices.len(),
            "width": image.width,
            "height": image.height,
            "pixels": indices.len(),
            "bits_per_index": header.bits,
            "index_entropy_bits": entropy,
            "stream_bytes": stream_bytes,
            "raw_bytes": raw_bytes,
            "compression_ratio": raw_bytes as f64 / stream_bytes as f64,
            "dither": dither_name(dither),
            "out": a.out.display().to_string(),
            "seconds": seconds,
        });
        merge(&mut v, report_json(&err));
        return print_json(&v);
    }
    let mut pairs = vec![
        (
            "stream",
            format!(
                "{} ({}×{} pixels, {} bits per index, {stream_bytes} bytes)",
                a.out.display(),
                image.width,
                image.height,
                header.bits
            ),
        ),
        ("index entropy", format!("{} bits", num(entropy))),
    ];
    pairs.extend(error_pairs(&err));
    pairs.push(("time", secs(seconds)));
    print_pairs(&pairs)
}

/// Writes the image a stream stands for as a true-colour PNG; returns its bytes.
pub fn decode_image(
    header: &StreamHeader,
    indices: &[u32],
    book: &Codebook,
    out: &Path,
) -> Result<u64> {
    let info = header.image.context("the stream holds no image size")?;
    let palette = Palette::from_codebook(book)?;
    let pixels = render(indices, &palette)?;
    let name = out.display().to_string();
    let mut file = AtomicFile::create(out).with_context(|| format!("writing {name}"))?;
    if pixels.iter().any(|p| p[3] < 255) {
        write_rgba_png(&mut file, info.width, info.height, &pixels)
    } else {
        let rgb: Vec<[u8; 3]> = pixels.iter().map(|p| [p[0], p[1], p[2]]).collect();
        write_rgb_png(&mut file, info.width, info.height, &rgb)
    }
    .with_context(|| format!("writing {name}"))?;
    file.commit().with_context(|| format!("writing {name}"))?;
    Ok(std::fs::metadata(out)?.len())
}
