//! Palettes for small displays: images → weighted unique colours in a
//! working colour space → a codebook whose every entry the display can show
//! exactly → indices per pixel (optionally dithered) → error figures in
//! 8-bit sRGB and CIEDE2000. Pure: works on decoded images in memory; never
//! opens files (see [`crate::load`] and [`crate::export`]).

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::codebook::{Codebook, Meaning, TrainingFacts};
use crate::colour::{delta_e2000, rgb8_to_lab, ColourSpace, DisplayFormat, Grid};
use crate::encode::{Encoder, Nearest, CHUNK_ROWS};
use crate::error::{Error, ErrorKind, Result};
use crate::kmeans::{train_constrained, CheckedTrainConfig, Constraint, TrainEvent, TrainReport};
use crate::load::{colour_histogram, spread_opaque, ColourIndex, RgbaImage};
use crate::metrics::psnr_db;
use crate::vectors::VectorSet;

const STAGE: &str = "building palette";

/// A colour as the integer that orders it (see [`colour_histogram`]).
fn packed(px: [u8; 4]) -> u64 {
    u32::from_be_bytes(px) as u64
}

fn unpacked(key: u64) -> [u8; 4] {
    (key as u32).to_be_bytes()
}

/// What happens to partly transparent pixels.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum AlphaMode {
    /// Composite over an opaque background colour (8-bit sRGB), then train
    /// on the result. Fully transparent pixels still get the reserved entry.
    Composite { background: [u8; 3] },
    /// Train on RGBA: alpha is a fourth component, scaled to the colour
    /// components' range (see [`alpha_scale`]).
    Keep,
}

/// Error diffusion or ordered dithering while mapping pixels to the palette.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dither {
    /// Every pixel takes its nearest palette entry.
    None,
    /// Floyd & Steinberg (1976) error diffusion (7/16, 3/16, 5/16, 1/16) in
    /// the working space, serpentine scan.
    FloydSteinberg,
    /// Ordered dithering with the 4 × 4 Bayer matrix.
    Bayer4,
    /// Ordered dithering with the 8 × 8 Bayer matrix.
    Bayer8,
}

/// Order of the palette entries in the output.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PaletteOrder {
    /// Most used first.
    Frequency,
    /// Darkest first (CIELAB L*).
    Lightness,
}

/// What the codewords of a palette codebook mean.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PixelLayout {
    /// The working space the codewords live in.
    pub space: ColourSpace,
    /// The display format every entry is exactly showable on.
    pub display: DisplayFormat,
    /// How alpha was handled.
    pub alpha: AlphaMode,
    /// Entry 0 is reserved for fully transparent pixels (alpha 0 in tRNS).
    pub transparent_entry: bool,
    /// Pinned colours the user asked for (8-bit sRGB), all in the palette.
    pub pinned: Vec<[u8; 3]>,
}

impl PixelLayout {
    /// Components per codeword: 3, or 4 with alpha kept.
    pub fn dimension(&self) -> usize {
        match self.alpha {
            AlphaMode::Keep => 4,
            AlphaMode::Composite { .. } => 3,
        }
    }
}

/// Multiplier that puts alpha (0..255) on the scale of the working space's
/// components: 1 for sRGB and linear (0..255), 100/255 for CIELAB and Oklab
/// (lightness 0..100).
pub fn alpha_scale(space: ColourSpace) -> f32 {
    match space {
        ColourSpace::Srgb | ColourSpace::Linear => 1.0,
        ColourSpace::Lab | ColourSpace::Oklab => 100.0 / 255.0,
    }
}

/// Palette parameters with documented defaults.
#[derive(Debug, Clone, PartialEq)]
pub struct PaletteConfig {
    /// Palette entries in all, the reserved transparent entry included.
    pub size: usize,
    /// Working space. Default [`DEFAULT_SPACE`].
    pub space: ColourSpace,
    /// Display format. Default RGB888.
    pub display: DisplayFormat,
    /// Colours that must be in the palette. Default none.
    pub keep: Vec<[u8; 3]>,
    /// Default: composite over white.
    pub alpha: AlphaMode,
    /// Default: most used first.
    pub order: PaletteOrder,
}

/// The working space used unless another is chosen (see the README for the
/// measurements behind it).
pub const DEFAULT_SPACE: ColourSpace = ColourSpace::Lab;

impl PaletteConfig {
    /// Defaults for a palette of `size` entries.
    pub fn new(size: usize) -> Self {
        PaletteConfig {
            size,
            space: DEFAULT_SPACE,
            display: DisplayFormat::Rgb888,
            keep: Vec::new(),
            alpha: AlphaMode::Composite {
                background: [255, 255, 255],
            },
            order: PaletteOrder::Frequency,
        }
    }

    /// Checks the rules that do not depend on the image: size ≥ 1, pinned
    /// colours showable on the display and fewer than the size, no duplicates.
    pub fn check(&self) -> Result<()> {
        let bad = |m: String| Err(Error::new(STAGE, ErrorKind::InvalidParameter(m)));
        if self.size == 0 {
            return Err(Error::new(STAGE, ErrorKind::ZeroSize));
        }
        for c in &self.keep {
            let shown = self.display.snap(*c);
            if shown != *c {
                return bad(format!(
                    "pinned colour {} cannot be shown exactly on {}; the nearest it can show is {}",
                    hex(*c),
                    self.display.name(),
                    hex(shown)
                ));
            }
        }
        for (i, c) in self.keep.iter().enumerate() {
            if self.keep[..i].contains(c) {
                return bad(format!("pinned colour {} is given twice", hex(*c)));
            }
        }
        if self.keep.len() > self.size {
            return bad(format!(
                "{} pinned colours do not fit in a palette of {}",
                self.keep.len(),
                self.size
            ));
        }
        Ok(())
    }
}

/// `#rrggbb`.
pub fn hex(c: [u8; 3]) -> String {
    format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2])
}

/// Parses `#rrggbb` or `rrggbb` (case-insensitive).
pub fn parse_hex(text: &str) -> Result<[u8; 3]> {
    let t = text.trim();
    let digits = t.strip_prefix('#').unwrap_or(t);
    let bad = || {
        Error::new(
            "reading colour",
            ErrorKind::InvalidParameter(format!(
                "\"{text}\" is not a colour; write it as #rrggbb, e.g. #ff8000"
            )),
        )
    };
    if digits.len() != 6 || !digits.bytes().all(|b| b.is_ascii_hexdigit()) {
        return Err(bad());
    }
    let v = u32::from_str_radix(digits, 16).map_err(|_| bad())?;
    Ok([(v >> 16) as u8, (v >> 8) as u8, v as u8])
}

/// The pixel as it is after alpha handling: composited RGB and the alpha
/// kept (255 when composited).
fn handled(px: [u8; 4], alpha: AlphaMode) -> [u8; 4] {
    match alpha {
        AlphaMode::Keep => px,
        AlphaMode::Composite { background } => {
            let a = px[3] as u32;
            let mix = |c: u8, b: u8| ((c as u32 * a + b as u32 * (255 - a) + 127) / 255) as u8;
            [
                mix(px[0], background[0]),
                mix(px[1], background[1]),
                mix(px[2], background[2]),
                255,
            ]
        }
    }
}

fn working(px: [u8; 4], layout: &PixelLayout, out: &mut Vec<f32>) {
    out.extend_from_slice(&working_point(px, layout)[..layout.dimension()]);
}

/// The pixel in the working space: its first [`PixelLayout::dimension`]
/// components (alpha fourth when kept, scaled like the colour).
fn working_point(px: [u8; 4], layout: &PixelLayout) -> [f32; 4] {
    let [a, b, c] = layout.space.to_space([px[0], px[1], px[2]]);
    let alpha = if layout.alpha == AlphaMode::Keep {
        px[3] as f32 * alpha_scale(layout.space)
    } else {
        0.0
    };
    [a, b, c, alpha]
}

/// What training a palette produced.
#[derive(Debug, Clone)]
pub struct PaletteTraining {
    /// The palette codebook (entry 0 transparent when reserved).
    pub codebook: Codebook,
    /// The k-means report for the visible entries.
    pub report: TrainReport,
    /// Pixels in all the images.
    pub pixels: u64,
    /// Distinct colours after alpha handling (transparent pixels excluded).
    pub distinct_colours: usize,
    /// Messages for the user.
    pub notices: Vec<String>,
}

/// What a palette is trained on: the distinct colours of some pixels after
/// alpha handling, weighted by how many pixels have them, in the working
/// space, with the pinned colours and the display's grid.
#[derive(Debug, Clone)]
pub struct PaletteInput {
    /// What the palette's codewords will mean.
    pub layout: PixelLayout,
    /// Distinct colours after alpha handling (fully transparent pixels
    /// excluded), sorted, with their pixel counts.
    pub colours: Vec<([u8; 4], u64)>,
    /// `colours` in the working space, weighted by their counts.
    pub vectors: VectorSet,
    /// The pinned colours in the working space, flat, in the order given.
    pub fixed: Vec<f32>,
    /// Pixels counted, fully transparent ones included.
    pub pixels: u64,
    /// Fully transparent pixels.
    pub transparent: u64,
    grid: Grid,
}

impl PaletteInput {
    /// The input of a palette for all `images`.
    pub fn new(images: &[RgbaImage], config: &PaletteConfig) -> Result<PaletteInput> {
        let histogram: Vec<([u8; 4], u64)> = images.iter().flat_map(colour_histogram).collect();
        Self::from_histogram(&histogram, config)
    }

    /// The input of a palette for pixels given as (RGBA colour, pixel
    /// count) pairs, as read (before alpha handling).
    pub fn from_histogram(
        histogram: &[([u8; 4], u64)],
        config: &PaletteConfig,
    ) -> Result<PaletteInput> {
        config.check()?;
        let mut transparent = 0u64;
        let mut pixels = 0u64;
        // Colours after alpha handling with their pixel counts: sorted, then
        // equal ones merged (several images, or compositing, can give one
        // colour twice).
        let mut colours: Vec<([u8; 4], u64)> = Vec::with_capacity(histogram.len());
        for &(c, n) in histogram {
            pixels += n;
            if c[3] == 0 {
                transparent += n;
            } else {
                colours.push((handled(c, config.alpha), n));
            }
        }
        add_up_by_key(&mut colours);
        if colours.is_empty() {
            return Err(Error::new(
                STAGE,
                ErrorKind::Shape(
                    "every pixel is fully transparent; there are no colours to fit".into(),
                ),
            ));
        }
        let layout = PixelLayout {
            space: config.space,
            display: config.display,
            alpha: config.alpha,
            transparent_entry: transparent > 0,
            pinned: config.keep.clone(),
        };
        let d = layout.dimension();
        // Converted on all threads: a CIELAB conversion per colour adds up
        // for images with hundreds of thousands of colours.
        let mut data = vec![0.0f32; colours.len() * d];
        data.par_chunks_mut(d)
            .zip(colours.par_iter())
            .with_min_len(CONVERT_PER_TASK)
            .for_each(|(out, &(c, _))| out.copy_from_slice(&working_point(c, &layout)[..d]));
        let weights: Vec<f64> = colours.iter().map(|(_, n)| *n as f64).collect();
        let vectors = VectorSet::new(d, data)?.with_weights(weights)?;
        let mut fixed = Vec::new();
        for c in &config.keep {
            working([c[0], c[1], c[2], 255], &layout, &mut fixed);
        }
        Ok(PaletteInput {
            grid: Grid::new(config.space, config.display),
            layout,
            colours,
            vectors,
            fixed,
            pixels,
            transparent,
        })
    }

    /// Pixels nearest each of `codewords` (working space, the visible
    /// entries): every colour searched once, on all threads, through the
    /// encoder's cell lists (colours come in ascending order).
    fn use_counts(&self, codewords: &[f32]) -> Result<Vec<u64>> {
        let d = self.layout.dimension();
        let encoder = Encoder::new(codewords, d)?;
        let counts = self
            .vectors
            .as_flat()
            .par_chunks(CHUNK_ROWS * d)
            .zip(self.colours.par_chunks(CHUNK_ROWS))
            .map(|(rows, colours)| {
                let mut found = vec![Nearest::NONE; colours.len()];
                encoder.nearest_batch_cached(rows, &mut found);
                let mut counts = vec![0u64; codewords.len() / d];
                for (f, &(_, n)) in found.iter().zip(colours) {
                    counts[f.index as usize] += n;
                }
                counts
            })
            .reduce_with(|mut a, b| {
                a.iter_mut().zip(&b).for_each(|(x, y)| *x += y);
                a
            });
        Ok(counts.unwrap_or_else(|| vec![0; codewords.len() / d]))
    }

    /// Entries taken by the transparent entry (0 or 1).
    pub fn reserved(&self) -> usize {
        usize::from(self.layout.transparent_entry)
    }

    /// Codewords to train for a palette of `size` entries in all: `size`
    /// less the transparent entry. Fails when nothing is left for colours
    /// or the pinned colours do not fit.
    pub fn trained_size(&self, size: usize) -> Result<usize> {
        let reserved = self.reserved();
        if size <= reserved {
            return Err(Error::new(
                STAGE,
                ErrorKind::InvalidParameter(format!(
                    "the image has fully transparent pixels, which take one palette entry; a palette of {size} leaves none for colours"
                )),
            ));
        }
        if self.layout.pinned.len() + reserved > size {
            return Err(Error::new(
                STAGE,
                ErrorKind::InvalidParameter(format!(
                    "{} pinned colours and the transparent entry do not fit in a palette of {size}",
                    self.layout.pinned.len()
                )),
            ));
        }
        Ok(size - reserved)
    }

    /// Moves one working-space codeword onto the nearest colour the display
    /// shows (alpha, when kept, onto a whole 8-bit step in 1..=255).
    pub fn snap(&self, v: &mut [f32]) {
        let s = self.grid.snap_working(&[v[0], v[1], v[2]]);
        v[..3].copy_from_slice(&s);
        if v.len() == 4 {
            let ascale = alpha_scale(self.layout.space);
            let a = (v[3] / ascale).round().clamp(1.0, 255.0);
            v[3] = a * ascale;
        }
    }

    /// The palette codebook of trained working-space `codewords` (pinned
    /// ones first): entries ordered by `order`, the transparent entry first
    /// when reserved.
    pub fn codebook(
        &self,
        codewords: &[f32],
        training: TrainingFacts,
        order: PaletteOrder,
    ) -> Result<Codebook> {
        let d = self.layout.dimension();
        let space = self.layout.space;
        let k = codewords.len() / d;
        let use_count = match order {
            PaletteOrder::Frequency => self.use_counts(codewords)?,
            PaletteOrder::Lightness => Vec::new(),
        };
        let rgb: Vec<[u8; 3]> = codewords
            .chunks_exact(d)
            .map(|c| space.to_rgb8([c[0], c[1], c[2]]))
            .collect();
        let mut entries: Vec<usize> = (0..k).collect();
        match order {
            PaletteOrder::Frequency => {
                entries.sort_by(|&a, &b| use_count[b].cmp(&use_count[a]).then(a.cmp(&b)))
            }
            PaletteOrder::Lightness => entries.sort_by(|&a, &b| {
                rgb8_to_lab(rgb[a])[0]
                    .total_cmp(&rgb8_to_lab(rgb[b])[0])
                    .then(a.cmp(&b))
            }),
        }
        let mut out = Vec::with_capacity((k + self.reserved()) * d);
        if self.layout.transparent_entry {
            let bg = match self.layout.alpha {
                AlphaMode::Composite { background } => background,
                AlphaMode::Keep => [0, 0, 0],
            };
            working([bg[0], bg[1], bg[2], 0], &self.layout, &mut out);
        }
        for &i in &entries {
            out.extend_from_slice(&codewords[i * d..(i + 1) * d]);
        }
        let codebook = Codebook {
            dimension: d,
            codewords: out,
            meaning: Meaning::Pixels(self.layout.clone()),
            training,
        };
        codebook.validate()?;
        Ok(codebook)
    }
}

/// Trains one palette for all `images`.
pub fn train_palette(
    images: &[RgbaImage],
    config: &PaletteConfig,
    train: &CheckedTrainConfig,
    observe: &(dyn Fn(TrainEvent) + Sync),
) -> Result<PaletteTraining> {
    let input = PaletteInput::new(images, config)?;
    train_input(&input, config, train, observe)
}

/// Trains a palette of `config.size` entries on a prepared input.
pub fn train_input(
    input: &PaletteInput,
    config: &PaletteConfig,
    train: &CheckedTrainConfig,
    observe: &(dyn Fn(TrainEvent) + Sync),
) -> Result<PaletteTraining> {
    let mut notices = Vec::new();
    let size = input.trained_size(config.size)?;
    if input.transparent > 0 {
        notices.push(format!(
            "{} fully transparent pixels share palette entry 0 (alpha 0)",
            input.transparent
        ));
    }
    let snap = |v: &mut [f32]| input.snap(v);
    let constraint = Constraint {
        fixed: &input.fixed,
        snap: Some(&snap),
    };
    let mut cfg = train.get().clone();
    cfg.size = size;
    let checked = cfg.check()?;
    let trained = train_constrained(&input.vectors, &checked, constraint, observe)?;
    notices.extend(trained.report.notices.iter().cloned());
    let codebook = input.codebook(
        &trained.codewords,
        TrainingFacts::from_report(&trained.report),
        config.order,
    )?;
    Ok(PaletteTraining {
        codebook,
        report: trained.report,
        pixels: input.pixels,
        distinct_colours: input.colours.len(),
        notices,
    })
}

/// A palette ready to map pixels: the entries as 8-bit RGBA and an encoder
/// over the visible ones.
#[derive(Debug, Clone)]
pub struct Palette {
    layout: PixelLayout,
    /// Every entry as 8-bit sRGB plus alpha, in index order.
    pub entries: Vec<[u8; 4]>,
    codewords: Vec<f32>,
    encoder: Encoder,
    first_visible: usize,
}

impl Palette {
    /// The palette of a pixel codebook.
    pub fn from_codebook(codebook: &Codebook) -> Result<Palette> {
        let Meaning::Pixels(layout) = &codebook.meaning else {
            return Err(Error::new(
                "checking codebook",
                ErrorKind::Mismatch("this codebook was not trained on images".into()),
            ));
        };
        let d = codebook.dimension;
        if d != layout.dimension() {
            return Err(Error::new(
                "checking codebook",
                ErrorKind::Format(format!(
                    "a palette codebook with dimension {d} does not match its alpha mode"
                )),
            ));
        }
        let first_visible = usize::from(layout.transparent_entry);
        if codebook.size() <= first_visible {
            return Err(Error::new(
                "checking codebook",
                ErrorKind::Format("the palette has no visible entries".into()),
            ));
        }
        let ascale = alpha_scale(layout.space);
        let entries: Vec<[u8; 4]> = codebook
            .codewords
            .chunks_exact(d)
            .enumerate()
            .map(|(i, c)| {
                let [r, g, b] = layout.space.to_rgb8([c[0], c[1], c[2]]);
                let a = if i < first_visible {
                    0
                } else if d == 4 {
                    (c[3] / ascale).round().clamp(0.0, 255.0) as u8
                } else {
                    255
                };
                [r, g, b, a]
            })
            .collect();
        let codewords = codebook.codewords[first_visible * d..].to_vec();
        let encoder = Encoder::new(&codewords, d)?;
        Ok(Palette {
            layout: layout.clone(),
            entries,
            codewords,
            encoder,
            first_visible,
        })
    }

    /// What the codewords mean.
    pub fn layout(&self) -> &PixelLayout {
        &self.layout
    }

    /// Number of entries, the transparent one included.
    pub fn len(&self) -> usize {
        self.entries.len()
    }

    /// Always false: a palette has at least one visible entry.
    pub fn is_empty(&self) -> bool {
        self.entries.is_empty()
    }

    /// RGB of every entry.
    pub fn rgb(&self) -> Vec<[u8; 3]> {
        self.entries.iter().map(|e| [e[0], e[1], e[2]]).collect()
    }

    /// Alpha of every entry, or `None` when all are opaque.
    pub fn alpha(&self) -> Option<Vec<u8>> {
        self.entries
            .iter()
            .any(|e| e[3] < 255)
            .then(|| self.entries.iter().map(|e| e[3]).collect())
    }

    fn reserved_for(&self, px: [u8; 4]) -> Option<u32> {
        (px[3] == 0 && self.layout.transparent_entry).then_some(0)
    }

    fn nearest(&self, v: &[f32]) -> u32 {
        self.encoder.nearest(v).index + self.first_visible as u32
    }

    /// Palette index of every pixel of `image`, row by row.
    pub fn map_image(&self, image: &RgbaImage, dither: Dither) -> Result<Vec<u32>> {
        if image.pixels.len() != image.width as usize * image.height as usize {
            return Err(Error::new(
                "mapping pixels",
                ErrorKind::Shape("the pixel count does not match width × height".into()),
            ));
        }
        Ok(match dither {
            Dither::None => self.map_plain(image)?,
            Dither::FloydSteinberg => self.map_diffused(image),
            Dither::Bayer4 => self.map_ordered(image, 4),
            Dither::Bayer8 => self.map_ordered(image, 8),
        })
    }

    /// Palette index of one pixel as read: the transparent entry for a
    /// fully transparent pixel when the palette reserves one, otherwise the
    /// entry nearest its colour after alpha handling, in the working space.
    pub fn index_of(&self, px: [u8; 4]) -> u32 {
        if let Some(i) = self.reserved_for(px) {
            return i;
        }
        let v = working_point(handled(px, self.layout.alpha), &self.layout);
        self.nearest(&v[..self.layout.dimension()])
    }

    /// [`Palette::index_of`] for every colour of `colours` (as read, with
    /// pixel counts), on all threads.
    pub fn indices_of(&self, colours: &[([u8; 4], u64)]) -> Vec<u32> {
        let mut out = vec![0u32; colours.len()];
        // Colours in ascending order: consecutive chunks meet the same
        // cells of colour space in the encoder's cached search.
        out.par_chunks_mut(CHUNK_ROWS)
            .zip(colours.par_chunks(CHUNK_ROWS))
            .for_each(|(out, colours)| self.indices_into(colours.iter().map(|&(c, _)| c), out));
        out
    }

    /// [`Palette::index_of`] for every colour of `colours` into `out`, on
    /// this thread: the colours are searched in batches of working points
    /// through the encoder's cached search (several times faster than one
    /// search per colour; colours in ascending order reuse its cells).
    fn indices_into(&self, colours: impl Iterator<Item = [u8; 4]>, out: &mut [u32]) {
        let d = self.layout.dimension();
        let mut colours = colours.enumerate().peekable();
        let mut points = Vec::with_capacity(CHUNK_ROWS.min(out.len()) * d);
        let mut searched = Vec::with_capacity(CHUNK_ROWS.min(out.len()));
        let mut found = Vec::with_capacity(CHUNK_ROWS.min(out.len()));
        while colours.peek().is_some() {
            points.clear();
            searched.clear();
            for (j, c) in colours.by_ref().take(CHUNK_ROWS) {
                match self.reserved_for(c) {
                    Some(i) => out[j] = i,
                    None => {
                        let v = working_point(handled(c, self.layout.alpha), &self.layout);
                        points.extend_from_slice(&v[..d]);
                        searched.push(j);
                    }
                }
            }
            found.clear();
            found.resize(searched.len(), Nearest::NONE);
            self.encoder.nearest_batch_cached(&points, &mut found);
            for (&j, f) in searched.iter().zip(&found) {
                out[j] = f.index + self.first_visible as u32;
            }
        }
    }

    /// Each distinct colour searched once, then handed to its pixels. A
    /// large opaque image (the usual photo) never lists its colours: they
    /// go from the bitmap of its colours to the search piece by piece.
    fn map_plain(&self, image: &RgbaImage) -> Result<Vec<u32>> {
        let entries = self.len() as u32;
        let spread = spread_opaque(image, entries, |colours, out| {
            self.indices_into(colours.iter().copied(), out)
        });
        match spread {
            Some(indices) => Ok(indices),
            None => {
                let colours = ColourIndex::new(image);
                colours.per_pixel(&self.indices_of(colours.colours()))
            }
        }
    }

    /// [`Palette::map_image`] and [`measure`] in one step. Without
    /// dithering, every distinct colour is searched and measured once
    /// ([`Palette::map_colours`]); the figures are those [`measure`] gives.
    pub fn map_measured(&self, image: &RgbaImage, dither: Dither) -> Result<MappedImage> {
        if dither == Dither::None {
            return self.map_colours(&ColourIndex::new(image));
        }
        let indices = self.map_image(image, dither)?;
        let error = measure(image, &indices, self)?;
        Ok(MappedImage { indices, error })
    }

    /// The image `colours` indexes mapped without dithering and measured:
    /// each distinct colour is searched once ([`Palette::indices_of`]) and
    /// measured once ([`measure_indexed`]), then its index is handed to its
    /// pixels. Indices and figures equal those of [`Palette::map_image`]
    /// with [`Dither::None`] followed by [`measure`].
    pub fn map_colours(&self, colours: &ColourIndex) -> Result<MappedImage> {
        let per_colour = self.indices_of(colours.colours());
        let error = measure_indexed(colours.colours(), &per_colour, self)?;
        let indices = colours.per_pixel(&per_colour)?;
        Ok(MappedImage { indices, error })
    }

    fn map_diffused(&self, image: &RgbaImage) -> Vec<u32> {
        let (w, h) = (image.width as usize, image.height as usize);
        let d = self.layout.dimension();
        let mut out = vec![0u32; w * h];
        let mut err_here = vec![0.0f32; (w + 2) * d];
        let mut err_next = vec![0.0f32; (w + 2) * d];
        let mut v = Vec::with_capacity(d);
        // Diffused values are clamped to the palette's bounding box: an error
        // the palette can never pay back (a colour outside its hull) would
        // otherwise grow along the row and smear into streaks.
        let mut lo = vec![f32::INFINITY; d];
        let mut hi = vec![f32::NEG_INFINITY; d];
        for cw in self.codewords.chunks_exact(d) {
            for c in 0..d {
                lo[c] = lo[c].min(cw[c]);
                hi[c] = hi[c].max(cw[c]);
            }
        }
        for y in 0..h {
            let forward = y % 2 == 0;
            for step in 0..w {
                let x = if forward { step } else { w - 1 - step };
                let px = image.pixels[y * w + x];
                if let Some(i) = self.reserved_for(px) {
                    out[y * w + x] = i;
                    continue;
                }
                v.clear();
                working(handled(px, self.layout.alpha), &self.layout, &mut v);
                let slot = (x + 1) * d;
                for c in 0..d {
                    v[c] = (v[c] + err_here[slot + c]).clamp(lo[c], hi[c]);
                }
                let idx = self.nearest(&v);
                out[y * w + x] = idx;
                let cw = &self.codewords[(idx as usize - self.first_visible) * d..][..d];
                // Ahead in the scan direction, and the three pixels below.
                let (ahead, behind) = if forward {
                    (slot + d, slot - d)
                } else {
                    (slot - d, slot + d)
                };
                for c in 0..d {
                    let e = v[c] - cw[c];
                    err_here[ahead + c] += e * (7.0 / 16.0);
                    err_next[behind + c] += e * (3.0 / 16.0);
                    err_next[slot + c] += e * (5.0 / 16.0);
                    err_next[ahead + c] += e * (1.0 / 16.0);
                }
            }
            std::mem::swap(&mut err_here, &mut err_next);
            err_next.iter_mut().for_each(|e| *e = 0.0);
        }
        out
    }

    /// Typical distance between neighbouring palette entries: the median of
    /// each entry's distance to its nearest other entry. Ordered dithering
    /// spreads its thresholds over this distance.
    fn spacing(&self) -> f32 {
        let d = self.layout.dimension();
        let k = self.codewords.len() / d;
        if k < 2 {
            return 0.0;
        }
        let mut nn: Vec<f32> = (0..k)
            .map(|i| {
                (0..k)
                    .filter(|&j| j != i)
                    .map(|j| {
                        crate::encode::distance_sq(
                            &self.codewords[i * d..(i + 1) * d],
                            &self.codewords[j * d..(j + 1) * d],
                        )
                    })
                    .fold(f32::INFINITY, f32::min)
                    .sqrt()
            })
            .collect();
        nn.sort_by(f32::total_cmp);
        nn[k / 2]
    }

    fn map_ordered(&self, image: &RgbaImage, n: usize) -> Vec<u32> {
        let matrix = bayer(n);
        let spread = self.spacing();
        let (w, h) = (image.width as usize, image.height as usize);
        let d = self.layout.dimension();
        let mut v = Vec::with_capacity(d);
        let mut out = Vec::with_capacity(w * h);
        for y in 0..h {
            for x in 0..w {
                let px = image.pixels[y * w + x];
                if let Some(i) = self.reserved_for(px) {
                    out.push(i);
                    continue;
                }
                v.clear();
                working(handled(px, self.layout.alpha), &self.layout, &mut v);
                let t = (matrix[(y % n) * n + x % n] as f32 + 0.5) / (n * n) as f32 - 0.5;
                // The same offset on every colour component (not alpha).
                for c in v.iter_mut().take(3) {
                    *c += t * spread;
                }
                out.push(self.nearest(&v));
            }
        }
        out
    }
}

/// The n × n Bayer threshold matrix (n a power of two), values 0..n²−1,
/// built by the usual recursion M(2n) = [4M, 4M+2; 4M+3, 4M+1] (Bayer 1973).
pub fn bayer(n: usize) -> Vec<u32> {
    let mut m = vec![0u32];
    let mut size = 1;
    while size < n {
        let mut next = vec![0u32; 4 * size * size];
        for y in 0..size {
            for x in 0..size {
                let v = 4 * m[y * size + x];
                next[y * 2 * size + x] = v;
                next[y * 2 * size + x + size] = v + 2;
                next[(y + size) * 2 * size + x] = v + 3;
                next[(y + size) * 2 * size + x + size] = v + 1;
            }
        }
        m = next;
        size *= 2;
    }
    m
}

/// How far a mapped image is from the original after alpha handling.
/// Fully transparent pixels that got the transparent entry are exact and
/// left out.
#[derive(Debug, Clone, PartialEq)]
pub struct ImageError {
    /// Pixels measured.
    pub pixels: u64,
    /// Mean squared error per channel in 8-bit sRGB values (R, G, B, and
    /// alpha when it is kept).
    pub mse: f64,
    /// 10·log10(255² / mse); `None` when exact.
    pub psnr_db: Option<f64>,
    /// Mean CIEDE2000 difference per pixel.
    pub delta_e2000_mean: f64,
    /// 95th percentile of the per-pixel CIEDE2000 difference.
    pub delta_e2000_p95: f64,
}

/// An image mapped to a palette, and how far the result is from it.
#[derive(Debug, Clone, PartialEq)]
pub struct MappedImage {
    /// Palette index of every pixel, row by row.
    pub indices: Vec<u32>,
    /// The error of the mapped image, as [`measure`] gives it.
    pub error: ImageError,
}

/// Measures `indices` (from [`Palette::map_image`]) against `image`, on
/// all threads. For an undithered mapping, [`Palette::map_colours`] gets
/// the same figures from the distinct colours alone, much faster.
pub fn measure(image: &RgbaImage, indices: &[u32], palette: &Palette) -> Result<ImageError> {
    if indices.len() != image.pixels.len() {
        return Err(Error::new(
            "measuring",
            ErrorKind::Shape(format!(
                "{} indices for {} pixels",
                indices.len(),
                image.pixels.len()
            )),
        ));
    }
    // Each piece of the image sorts its keys and counts their runs; the
    // pieces' sorted counts are merged pairwise, so no more than the
    // distinct pairs of a few pieces is held at once.
    let alpha = palette.layout.alpha;
    let pairs = image
        .pixels
        .par_chunks(MEASURE_PIXELS)
        .zip(indices.par_chunks(MEASURE_PIXELS))
        .map(|(pixels, indices)| {
            let mut keys: Vec<u64> = pixels
                .iter()
                .zip(indices)
                .filter(|&(&p, &i)| palette.reserved_for(p) != Some(i))
                .map(|(&p, &i)| pair_key(handled(p, alpha), i))
                .collect();
            keys.sort_unstable();
            keys.chunk_by(|a, b| a == b)
                .map(|run| (run[0], run.len() as u64))
                .collect()
        })
        .reduce(Vec::new, merge_counts);
    error_of_pairs(pairs, palette)
}

/// Two lists of (key, count), each sorted by distinct keys, as one such
/// list: the counts of a key in both are added.
fn merge_counts(a: Vec<(u64, u64)>, b: Vec<(u64, u64)>) -> Vec<(u64, u64)> {
    if a.is_empty() {
        return b;
    }
    if b.is_empty() {
        return a;
    }
    let mut out = Vec::with_capacity(a.len() + b.len());
    let (mut i, mut j) = (0, 0);
    while i < a.len() && j < b.len() {
        match a[i].0.cmp(&b[j].0) {
            std::cmp::Ordering::Less => {
                out.push(a[i]);
                i += 1;
            }
            std::cmp::Ordering::Greater => {
                out.push(b[j]);
                j += 1;
            }
            std::cmp::Ordering::Equal => {
                out.push((a[i].0, a[i].1 + b[j].1));
                i += 1;
                j += 1;
            }
        }
    }
    out.extend_from_slice(&a[i..]);
    out.extend_from_slice(&b[j..]);
    out
}

/// Pixels per piece of work in [`measure`]: their keys fit in a core's
/// cache while they are sorted.
const MEASURE_PIXELS: usize = 1 << 15;

/// A (colour after alpha handling, palette index) pair as one key.
fn pair_key(c: [u8; 4], i: u32) -> u64 {
    packed(c) << 32 | i as u64
}

/// Measures pixels given as (RGBA colour as read, pixel count) pairs, each
/// mapped to its nearest entry without dithering ([`Palette::index_of`]):
/// the same figures [`measure`] gives for an undithered image of them.
pub fn measure_colours(colours: &[([u8; 4], u64)], palette: &Palette) -> Result<ImageError> {
    measure_indexed(colours, &palette.indices_of(colours), palette)
}

/// [`measure_colours`] with the colours' indices already known (from
/// [`Palette::indices_of`]).
pub fn measure_indexed(
    colours: &[([u8; 4], u64)],
    indices: &[u32],
    palette: &Palette,
) -> Result<ImageError> {
    if indices.len() != colours.len() {
        return Err(Error::new(
            "measuring",
            ErrorKind::Shape(format!(
                "{} indices for {} colours",
                indices.len(),
                colours.len()
            )),
        ));
    }
    let alpha = palette.layout.alpha;
    let pair = |(&(c, n), &i): (&([u8; 4], u64), &u32)| (pair_key(handled(c, alpha), i), n);
    let mut pairs: Vec<(u64, u64)> = if palette.layout.transparent_entry {
        colours
            .par_iter()
            .zip(indices)
            .filter(|(&(c, _), &i)| palette.reserved_for(c) != Some(i))
            .map(pair)
            .collect()
    } else {
        // No entry is reserved, so every colour is measured: one pair per
        // colour, written in place (a filtered collect gathers pieces and
        // copies them).
        let mut pairs = Vec::new();
        colours
            .par_iter()
            .zip(indices)
            .map(pair)
            .collect_into_vec(&mut pairs);
        pairs
    };
    add_up_by_key(&mut pairs);
    error_of_pairs(pairs, palette)
}

/// Sorts (key, count) pairs by key and merges equal keys, adding their
/// counts. Distinct sorted colours that alpha handling leaves as they are
/// (the opaque ones) come in order already, which is checked first.
fn add_up_by_key<K: Ord + Copy + Send>(pairs: &mut Vec<(K, u64)>) {
    if !pairs.is_sorted_by_key(|&(key, _)| key) {
        pairs.par_sort_unstable_by_key(|&(key, _)| key);
    }
    pairs.dedup_by(|later, kept| {
        let same = later.0 == kept.0;
        if same {
            kept.1 += later.1;
        }
        same
    });
}

/// Colours per piece of work while converting them to the working space.
const CONVERT_PER_TASK: usize = 4096;

/// Pairs per piece of work while computing colour differences.
const PAIRS_PER_TASK: usize = 1024;

/// The error figures of distinct (colour after alpha handling, palette
/// index) pairs ([`pair_key`]) with their pixel counts, sorted by key.
fn error_of_pairs(pairs: Vec<(u64, u64)>, palette: &Palette) -> Result<ImageError> {
    let keep = palette.layout.alpha == AlphaMode::Keep;
    let channels = if keep { 4.0 } else { 3.0 };
    if let Some(&(key, _)) = pairs
        .iter()
        .find(|(key, _)| *key as u32 as usize >= palette.entries.len())
    {
        return Err(Error::new(
            "measuring",
            ErrorKind::Mismatch(format!("index {} is beyond the palette", key as u32)),
        ));
    }
    let used = if keep { 4 } else { 3 };
    // Sums in key order, so they come out the same on every run.
    let mut sq = 0.0f64;
    let mut n = 0u64;
    for &(key, count) in &pairs {
        let c = unpacked(key >> 32);
        let e = palette.entries[key as u32 as usize];
        let s: f64 = (0..used)
            .map(|ch| {
                let d = c[ch] as f64 - e[ch] as f64;
                d * d
            })
            .sum();
        sq += s * count as f64;
        n += count;
    }
    let entry_lab: Vec<[f64; 3]> = palette
        .entries
        .iter()
        .map(|e| rgb8_to_lab([e[0], e[1], e[2]]))
        .collect();
    // CIEDE2000 per pair. A colour's pairs are neighbours (several when
    // dithered), so each task keeps the last colour's CIELAB.
    let mut des: Vec<(f64, u64)> = pairs
        .par_iter()
        .with_min_len(PAIRS_PER_TASK)
        .map_init(
            || (u64::MAX, [0.0; 3]),
            |last, &(key, count)| {
                let colour = key >> 32;
                if last.0 != colour {
                    let c = unpacked(colour);
                    *last = (colour, rgb8_to_lab([c[0], c[1], c[2]]));
                }
                (delta_e2000(last.1, entry_lab[key as u32 as usize]), count)
            },
        )
        .collect();
    drop(pairs);
    let mse = if n == 0 {
        0.0
    } else {
        sq / (n as f64 * channels)
    };
    let mean = if n == 0 {
        0.0
    } else {
        des.iter().map(|(d, c)| d * *c as f64).sum::<f64>() / n as f64
    };
    let p95 = weighted_percentile(&mut des, (0.95 * n as f64).ceil() as u64);
    Ok(ImageError {
        pixels: n,
        mse,
        psnr_db: psnr_db(255.0, mse),
        delta_e2000_mean: mean,
        delta_e2000_p95: p95,
    })
}

/// The smallest value whose weight, with the weights of all smaller
/// values, reaches `target`: the value where the running weight first
/// reaches `target` along `values` sorted by value. 0 when the weights
/// never reach it. Reorders `values`; takes linear time (selection, not a
/// full sort).
fn weighted_percentile(values: &mut [(f64, u64)], mut target: u64) -> f64 {
    let mut rest = values;
    while !rest.is_empty() {
        let mid = rest.len() / 2;
        let (below, pivot, above) = rest.select_nth_unstable_by(mid, |a, b| a.0.total_cmp(&b.0));
        let below_weight: u64 = below.iter().map(|v| v.1).sum();
        if !below.is_empty() && target <= below_weight {
            rest = below;
        } else if target <= below_weight + pivot.1 {
            return pivot.0;
        } else {
            target -= below_weight + pivot.1;
            rest = above;
        }
    }
    0.0
}

/// The pixels an index image stands for (8-bit RGBA).
pub fn render(indices: &[u32], palette: &Palette) -> Result<Vec<[u8; 4]>> {
    indices
        .iter()
        .map(|&i| {
            palette.entries.get(i as usize).copied().ok_or_else(|| {
                Error::new(
                    "decoding pixels",
                    ErrorKind::Format(format!(
                        "index {i} is beyond the palette of {}",
                        palette.entries.len()
                    )),
                )
            })
        })
        .collect()
}

#[cfg(test)]
#[path = "palette_tests.rs"]
mod tests;
