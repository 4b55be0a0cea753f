//! The image part of `vqforge demo`: a 16-colour RGB565 palette for the
//! sample splash screen (Floyd–Steinberg dithered), and one shared
//! 16-colour RGB565 palette for the four sample icons; indexed PNGs and C
//! source for both, and a table of what each asset costs and loses.
//!
//! The icons share one palette because firmware that draws them holds one
//! palette for all of them; so they also share one C header, in which the
//! icons are stacked into one 32 × 128 sheet: one palette array, one pixel
//! array, and each icon a fixed run of rows (named in the header's comment).

use std::path::Path;

use anyhow::{Context, Result};
use serde_json::{json, Value};

use vqforge::atomic::write_atomic;
use vqforge::colour::DisplayFormat;
use vqforge::export::{bit_depth_for, c_identifier, pack_rows, packed_row_bytes};
use vqforge::kmeans::TrainConfig;
use vqforge::load::RgbaImage;
use vqforge::palette::{
    hex, train_palette, AlphaMode, Dither, ImageError, MappedImage, Palette, PaletteConfig,
};

use super::args::DemoArgs;
use super::output::{db, notices, num, print_table};
use super::palette::{c_text, dither_name, load_image, merge, report_json, write_png};
use super::progress;

const COLOURS: usize = 16;
const SPLASH: &str = "splash";
const ICONS: [&str; 4] = ["thermometer", "droplet", "sun", "battery"];
/// The invented reader draws its icons (dark outlines) on a white menu:
/// partly transparent edges are blended with white before fitting, as the
/// display will show them. (Blended with black instead, the dark fringes
/// took four near-black entries; mean ΔE2000 was 1–2.5 higher per icon.)
const ICON_BACKGROUND: [u8; 3] = [255, 255, 255];

/// One written asset and what it measured.
struct Asset {
    name: String,
    image: RgbaImage,
    bits: u8,
    png: String,
    png_bytes: u64,
    packed_bytes: u64,
    error: ImageError,
}

impl Asset {
    fn row(&self) -> Vec<String> {
        vec![
            self.name.clone(),
            format!("{}×{}", self.image.width, self.image.height),
            self.bits.to_string(),
            self.png_bytes.to_string(),
            self.packed_bytes.to_string(),
            num(self.error.mse),
            db(self.error.psnr_db),
            num(self.error.delta_e2000_mean),
        ]
    }

    fn json(&self, palette: &Palette, dither: Dither, c_source: &Path) -> Value {
        let mut v = json!({
            "name": self.name,
            "width": self.image.width,
            "height": self.image.height,
            "size": palette.len(),
            "display": palette.layout().display.name(),
            "dither": dither_name(dither),
            "bits_per_pixel": self.bits,
            "png": self.png,
            "png_bytes": self.png_bytes,
            "packed_bytes": self.packed_bytes,
            "c_source": c_source.display().to_string(),
            "palette": palette.entries.iter().map(|e| hex([e[0], e[1], e[2]])).collect::<Vec<_>>(),
        });
        merge(&mut v, report_json(&self.error));
        v
    }
}

fn read_sample(dir: &Path, file: &str) -> Result<RgbaImage> {
    let path = dir.join(file);
    load_image(&path, None).with_context(|| {
        format!(
            "sample image {} (regenerate the samples with `cargo run --example make_sample_inputs`, or pass --inputs DIR)",
            path.display()
        )
    })
}

/// Maps `image`, writes its indexed PNG, measures it.
fn map_and_write(
    name: String,
    image: RgbaImage,
    palette: &Palette,
    dither: Dither,
    png: &Path,
) -> Result<(Asset, Vec<u32>)> {
    let MappedImage { indices, error } = palette.map_measured(&image, dither)?;
    let png_bytes = write_png(png, &image, &indices, palette)?;
    let bits = bit_depth_for(palette.len());
    let packed_bytes = packed_row_bytes(image.width, bits) * u64::from(image.height);
    let asset = Asset {
        name,
        image,
        bits,
        png: png.display().to_string(),
        png_bytes,
        packed_bytes,
        error,
    };
    Ok((asset, indices))
}

fn fit(images: &[RgbaImage], config: &PaletteConfig) -> Result<Palette> {
    let train = TrainConfig::new(COLOURS).check()?;
    let t = train_palette(images, config, &train, &|_| {})?;
    notices(&t.notices);
    Ok(Palette::from_codebook(&t.codebook)?)
}

fn write_header(path: &Path, text: &str) -> Result<u64> {
    write_atomic(path, text.as_bytes()).with_context(|| format!("writing {}", path.display()))?;
    Ok(text.len() as u64)
}

/// Runs the image part; prints its table unless `--json`; returns one JSON
/// object per asset.
pub fn run(a: &DemoArgs) -> Result<Vec<Value>> {
    let splash = read_sample(&a.inputs, &format!("{SPLASH}.png"))?;
    let icons = ICONS
        .iter()
        .map(|n| read_sample(&a.inputs, &format!("icons/{n}.png")))
        .collect::<Result<Vec<_>>>()?;
    let icon_dir = a.out_dir.join("icons");
    std::fs::create_dir_all(&icon_dir)
        .with_context(|| format!("creating {}", icon_dir.display()))?;
    if !a.json {
        println!(
            "\nSample images in {} (invented: the boot splash and status icons of a made-up garden-sensor reader)",
            a.inputs.display()
        );
        println!(
            "{COLOURS}-colour palettes for an RGB565 display; splash dithered (Floyd–Steinberg), \
             icons share one palette with black and white pinned\n"
        );
    }
    let bar = progress::spinner("fitting palettes");
    let mut json = Vec::new();
    let mut rows = vec![[
        "image",
        "size",
        "bits/px",
        "PNG bytes",
        "packed bytes",
        "mse (8-bit)",
        "psnr",
        "mean ΔE2000",
    ]
    .map(String::from)
    .to_vec()];

    // The splash: its own palette, dithered.
    bar.set_message(SPLASH);
    let mut config = PaletteConfig::new(COLOURS);
    config.display = DisplayFormat::Rgb565;
    let palette = fit(std::slice::from_ref(&splash), &config)?;
    let dither = Dither::FloydSteinberg;
    let stem = format!("{SPLASH}-{COLOURS}");
    let (asset, indices) = map_and_write(
        stem.clone(),
        splash,
        &palette,
        dither,
        &a.out_dir.join(format!("{stem}.png")),
    )?;
    let (w, h) = (asset.image.width, asset.image.height);
    let packed = pack_rows(&indices, w, h, asset.bits)?;
    let made_by = [format!(
        "made by vqforge demo from the invented sample {SPLASH}.png (space {}, dither {})",
        palette.layout().space.name(),
        dither_name(dither)
    )];
    let text = c_text(
        &c_identifier(&stem),
        w,
        h,
        &packed,
        &palette,
        asset.bits,
        &made_by,
    )?;
    let splash_c = a.out_dir.join(format!("{stem}.h"));
    let splash_c_bytes = write_header(&splash_c, &text)?;
    rows.push(asset.row());
    json.push(asset.json(&palette, dither, &splash_c));

    // The icons: one palette for all four, no dithering (at 32 × 32 a
    // dither pattern is noise, not shading).
    bar.set_message("icons");
    let mut config = PaletteConfig::new(COLOURS);
    config.display = DisplayFormat::Rgb565;
    config.keep = vec![[0, 0, 0], [255, 255, 255]];
    config.alpha = AlphaMode::Composite {
        background: ICON_BACKGROUND,
    };
    let palette = fit(&icons, &config)?;
    let dither = Dither::None;
    let stem = format!("icons-{COLOURS}");
    let icons_c = a.out_dir.join(format!("{stem}.h"));
    let mut sheet = Vec::new();
    let mut made_by = vec![
        format!(
            "made by vqforge demo from the invented sample icons (space {}, dither {}, \
             pinned #000000 and #ffffff, edges blended with {})",
            palette.layout().space.name(),
            dither_name(dither),
            hex(ICON_BACKGROUND)
        ),
        String::new(),
        "one sheet of icons stacked top to bottom, sharing one palette:".into(),
    ];
    let mut top = 0;
    let mut icon_assets = Vec::new();
    for (name, image) in ICONS.iter().zip(icons) {
        let png = icon_dir.join(format!("{name}-{COLOURS}.png"));
        let (asset, indices) = map_and_write(
            format!("icons/{name}-{COLOURS}"),
            image,
            &palette,
            dither,
            &png,
        )?;
        let (w, h) = (asset.image.width, asset.image.height);
        made_by.push(format!(
            "  {name}: {w}×{h}, rows {top} to {}, from byte {}",
            top + h - 1,
            packed_row_bytes(w, asset.bits) * u64::from(top)
        ));
        top += h;
        sheet.extend(indices);
        icon_assets.push(asset);
    }
    let width = icon_assets[0].image.width;
    if let Some(odd) = icon_assets.iter().find(|i| i.image.width != width) {
        anyhow::bail!(
            "the sample icons must share one width to be stacked into one sheet: {} is {} pixels wide, {} is {width}",
            odd.name,
            odd.image.width,
            icon_assets[0].name
        );
    }
    let bits = icon_assets[0].bits;
    let packed = pack_rows(&sheet, width, top, bits)?;
    let text = c_text(
        &c_identifier(&stem),
        width,
        top,
        &packed,
        &palette,
        bits,
        &made_by,
    )?;
    let icons_c_bytes = write_header(&icons_c, &text)?;
    for asset in &icon_assets {
        rows.push(asset.row());
        json.push(asset.json(&palette, dither, &icons_c));
    }
    bar.finish_and_clear();

    if !a.json {
        print_table(&rows)?;
        println!(
            "\nPNG bytes: the indexed PNG file; packed bytes: the pixels at bits/px, each row \
             starting on a byte boundary, as in the C source."
        );
        println!(
            "C source: {} ({splash_c_bytes} bytes); {} ({icons_c_bytes} bytes: all {} icons \
             as one {width}×{top} sheet with one palette).",
            splash_c.display(),
            icons_c.display(),
            ICONS.len()
        );
    }
    Ok(json)
}
