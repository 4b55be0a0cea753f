//! Curves of images: the training and held-out pixels (as colour counts)
//! and what a palette of one size costs and loses on them (8-bit sRGB
//! error, PSNR, CIEDE2000, rate). Palettes are fitted in the working space
//! under the display's rules, as `train` fits them. Pure: works on decoded
//! images.

use std::collections::HashMap;

use crate::codebook::bits_for_size;
use crate::error::Result;
use crate::format::{codebook_to_bytes, stream_file_len, ImageInfo, StreamHeader};
use crate::load::RgbaImage;
use crate::metrics::{index_entropy_bits, psnr_db};
use crate::palette::{measure_indexed, Palette, PaletteConfig, PaletteInput, PaletteOrder};
use crate::rng::derive_seed;

use super::grow::Stage;
use super::holdout::holdout_tiles;
use super::{CheckedCurveConfig, CurvePoint, HeldOut, Quality, Rate};

/// Mixed into the master seed for the held-out tiles.
const HOLDOUT_STREAM: u64 = 0x686f_6c64_6f75_7421;

/// Images ready for a curve: the palette input of the training pixels, and
/// the colour counts of the training and held-out pixels.
#[derive(Debug, Clone)]
pub struct ImageSource {
    pub(super) input: PaletteInput,
    /// Training pixels as (colour as read, count).
    training: Vec<([u8; 4], u64)>,
    held: Option<Vec<([u8; 4], u64)>>,
    /// Width and height of each image.
    sizes: Vec<(u32, u32)>,
    /// Messages for the user.
    pub notices: Vec<String>,
}

fn counted(counts: HashMap<[u8; 4], u64>) -> Vec<([u8; 4], u64)> {
    let mut v: Vec<([u8; 4], u64)> = counts.into_iter().collect();
    v.sort_unstable();
    v
}

impl ImageSource {
    /// Prepares `images` for palettes fitted as `palette` says (its size is
    /// not used); with a holdout in `config`, that fraction of square tiles,
    /// drawn with a seed derived from the training's master seed, is held
    /// out ([`holdout_tiles`]).
    pub fn new(
        images: &[RgbaImage],
        palette: &PaletteConfig,
        config: &CheckedCurveConfig,
    ) -> Result<Self> {
        let (holdout, seed) = (config.get().holdout, config.get().train.seed);
        let sizes: Vec<(u32, u32)> = images.iter().map(|i| (i.width, i.height)).collect();
        let masks = match holdout {
            // A stream of its own, apart from the training restarts' seeds.
            Some(f) => Some(holdout_tiles(
                &sizes,
                f,
                derive_seed(seed ^ HOLDOUT_STREAM, 0),
            )?),
            None => None,
        };
        let mut training: HashMap<[u8; 4], u64> = HashMap::new();
        let mut held: HashMap<[u8; 4], u64> = HashMap::new();
        for (i, img) in images.iter().enumerate() {
            for (p, px) in img.pixels.iter().enumerate() {
                let out = masks.as_ref().is_some_and(|m| m[i][p]);
                *(if out { &mut held } else { &mut training })
                    .entry(*px)
                    .or_insert(0) += 1;
            }
        }
        let training = counted(training);
        let held = counted(held);
        let mut input = PaletteInput::from_histogram(&training, palette)?;
        let mut notices = Vec::new();
        if input.transparent > 0 || held.iter().any(|(c, _)| c[3] == 0) {
            input.layout.transparent_entry = true;
            let t: u64 = training
                .iter()
                .chain(&held)
                .filter(|(c, _)| c[3] == 0)
                .map(|(_, n)| n)
                .sum();
            notices.push(format!(
                "{t} fully transparent pixels share palette entry 0 (alpha 0); sizes count it"
            ));
        }
        Ok(ImageSource {
            input,
            training,
            held: masks.map(|_| held),
            sizes,
            notices,
        })
    }

    /// Components per colour: 3, or 4 with alpha kept.
    pub fn dimension(&self) -> usize {
        self.input.layout.dimension()
    }

    /// Pixels in all images.
    pub fn pixels(&self) -> u64 {
        self.training.iter().map(|(_, n)| n).sum::<u64>() + self.held_out()
    }

    /// Held-out pixels.
    pub fn held_out(&self) -> u64 {
        self.held
            .as_ref()
            .map_or(0, |h| h.iter().map(|(_, n)| n).sum())
    }

    /// Palette entries that train nothing (the transparent one).
    pub fn reserved(&self) -> usize {
        self.input.reserved()
    }

    /// The largest palette worth fitting: every distinct training colour,
    /// the pinned colours and the transparent entry.
    pub fn largest(&self) -> usize {
        self.input.colours.len() + self.input.layout.pinned.len() + self.reserved()
    }

    /// Three bytes per pixel (8-bit RGB), the uncompressed image.
    pub fn raw_bytes(&self) -> u64 {
        self.pixels() * 3
    }

    /// What `stage`'s palette costs and loses.
    pub(super) fn measure(&self, stage: &Stage) -> Result<CurvePoint> {
        let d = self.dimension();
        let codebook = self.input.codebook(
            &stage.codewords,
            stage.facts.clone(),
            PaletteOrder::Frequency,
        )?;
        let size = codebook.size();
        let codebook_bytes = codebook_to_bytes(&codebook)?.len() as u64;
        let palette = Palette::from_codebook(&codebook)?;
        // Each distinct colour is looked up once, for the error and the
        // index counts alike.
        let training = palette.indices_of(&self.training);
        let error = measure_indexed(&self.training, &training, &palette)?;
        let held = self.held.as_ref().map(|h| (h, palette.indices_of(h)));
        let mut counts = vec![0u64; size];
        let indexed = self.training.iter().zip(&training);
        let held_indexed = held.iter().flat_map(|(h, i)| h.iter().zip(i));
        for (&(_, n), &i) in indexed.chain(held_indexed) {
            counts[i as usize] += n;
        }
        let mut header = StreamHeader::for_codebook(&codebook, 0, None)?;
        let mut stream_bytes = 0;
        for &(width, height) in &self.sizes {
            header.vectors = u64::from(width) * u64::from(height);
            header.image = Some(ImageInfo { width, height });
            stream_bytes += stream_file_len(&header)?;
        }
        let holdout = match &held {
            Some((h, i)) => Some(HeldOut::new(
                measure_indexed(h, i, &palette)?.mse,
                error.mse,
            )),
            None => None,
        };
        Ok(CurvePoint {
            size,
            distortion: stage.distortion / (self.input.vectors.total_weight() * d as f64),
            mse: error.mse,
            quality: Quality::Images {
                psnr_db: psnr_db(255.0, error.mse),
                delta_e2000_mean: error.delta_e2000_mean,
            },
            rate: Rate::new(
                bits_for_size(size),
                index_entropy_bits(&counts),
                codebook_bytes,
                stream_bytes,
                self.raw_bytes(),
            ),
            holdout,
        })
    }
}
