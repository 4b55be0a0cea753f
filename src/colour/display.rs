//! Display formats: what colours a small panel can show, the nearest of them
//! to an 8-bit colour, and the usual packed pixel layouts.

use std::fmt;
use std::str::FromStr;

use serde::{Deserialize, Serialize};

use super::convert::{rgb8_to_linear, srgb_encode, SRGB_TO_XYZ};
use crate::error::{Error, ErrorKind, Result};

/// A pixel format of a display: bits per channel and how pixels pack.
///
/// A channel with b bits shows the 8-bit levels `round(i · 255 / (2^b − 1))`
/// for i = 0 … 2^b − 1, i.e. code i stands for intensity i / (2^b − 1) of
/// full scale, rounded to the nearest 8-bit value. This is the closest
/// 8-bit reading of what the panel's b-bit code means. The cheaper
/// bit-replication expansion used by many display drivers (`v << 3 | v >> 2`
/// for 5 bits) gives the same levels for every depth except 5 bits (4 of 32
/// levels one lower or higher) and 6 bits (10 of 64 levels).
///
/// Grey formats show only R = G = B. A colour's grey is the sRGB encoding of
/// its relative luminance Y (see [`luma8`]), so a grey keeps the lightness
/// of the colour it replaces.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum DisplayFormat {
    /// 8 bits each of red, green and blue: every 8-bit colour (24 bits).
    Rgb888,
    /// 6 bits per channel (18 bits), as on many TFT controllers.
    Rgb666,
    /// 5 bits red, 6 green, 5 blue (16 bits).
    Rgb565,
    /// 5 bits per channel (15 bits; the packed word's top bit is 0).
    Rgb555,
    /// 4 bits per channel (12 bits).
    Rgb444,
    /// 3 bits red, 3 green, 2 blue (8 bits).
    Rgb332,
    /// 256 grey levels.
    Gray8,
    /// 16 grey levels.
    Gray4,
    /// 4 grey levels.
    Gray2,
    /// Black and white.
    Gray1,
}

impl DisplayFormat {
    /// Every format, deepest first within colour and grey.
    pub const ALL: [DisplayFormat; 10] = [
        DisplayFormat::Rgb888,
        DisplayFormat::Rgb666,
        DisplayFormat::Rgb565,
        DisplayFormat::Rgb555,
        DisplayFormat::Rgb444,
        DisplayFormat::Rgb332,
        DisplayFormat::Gray8,
        DisplayFormat::Gray4,
        DisplayFormat::Gray2,
        DisplayFormat::Gray1,
    ];

    /// The lowercase name used in files and on the command line, e.g. `"rgb565"`.
    pub fn name(self) -> &'static str {
        match self {
            DisplayFormat::Rgb888 => "rgb888",
            DisplayFormat::Rgb666 => "rgb666",
            DisplayFormat::Rgb565 => "rgb565",
            DisplayFormat::Rgb555 => "rgb555",
            DisplayFormat::Rgb444 => "rgb444",
            DisplayFormat::Rgb332 => "rgb332",
            DisplayFormat::Gray8 => "gray8",
            DisplayFormat::Gray4 => "gray4",
            DisplayFormat::Gray2 => "gray2",
            DisplayFormat::Gray1 => "gray1",
        }
    }

    /// True for the formats that show only greys.
    pub fn is_grey(self) -> bool {
        matches!(
            self,
            DisplayFormat::Gray8
                | DisplayFormat::Gray4
                | DisplayFormat::Gray2
                | DisplayFormat::Gray1
        )
    }

    /// Bits per channel, red, green, blue. Grey formats give their grey depth
    /// in all three slots (R = G = B, so the slots are not independent).
    pub fn bits(self) -> [u32; 3] {
        match self {
            DisplayFormat::Rgb888 | DisplayFormat::Gray8 => [8, 8, 8],
            DisplayFormat::Rgb666 => [6, 6, 6],
            DisplayFormat::Rgb565 => [5, 6, 5],
            DisplayFormat::Rgb555 => [5, 5, 5],
            DisplayFormat::Rgb444 | DisplayFormat::Gray4 => [4, 4, 4],
            DisplayFormat::Rgb332 => [3, 3, 2],
            DisplayFormat::Gray2 => [2, 2, 2],
            DisplayFormat::Gray1 => [1, 1, 1],
        }
    }

    /// Bits of one packed pixel (the grey depth for grey formats).
    pub fn bits_per_pixel(self) -> u32 {
        let [r, g, b] = self.bits();
        if self.is_grey() {
            r
        } else {
            r + g + b
        }
    }

    /// How many distinct colours the format shows: 2^bits_per_pixel.
    pub fn colour_count(self) -> u32 {
        1 << self.bits_per_pixel()
    }

    /// Levels per channel, 2^bits (grey formats: grey levels in each slot).
    pub fn levels(self) -> [u32; 3] {
        self.bits().map(|b| 1 << b)
    }

    /// The 8-bit values each channel can show, ascending.
    pub fn level_values(self) -> [Vec<u8>; 3] {
        self.bits()
            .map(|b| (0..1u32 << b).map(|i| expand_level(i, b)).collect())
    }

    /// The colour the format shows for `rgb8`: per channel the nearest
    /// level (ties to the lower one); for grey formats the nearest grey
    /// level to [`luma8`]. Every result is a fixed point of `snap`.
    pub fn snap(self, rgb8: [u8; 3]) -> [u8; 3] {
        let bits = self.bits();
        let idx = self.level_indices(rgb8);
        [0, 1, 2].map(|c| expand_level(idx[c], bits[c]))
    }

    /// The packed pixel of the format's colour nearest to `rgb8` (the colour
    /// is snapped first, so `pack(c) == pack(snap(c))`).
    ///
    /// Layouts put red in the high bits: RGB888 `0xRRGGBB`; RGB666 in the
    /// low 18 bits; RGB565 `RRRRRGGGGGGBBBBB`; RGB555 `0RRRRRGGGGGBBBBB`;
    /// RGB444 in the low 12 bits; RGB332 `RRRGGGBB`. Grey formats pack the
    /// grey level index (0 = black).
    pub fn pack(self, rgb8: [u8; 3]) -> u32 {
        let [_, bg, bb] = self.bits();
        let [r, g, b] = self.level_indices(rgb8);
        if self.is_grey() {
            r
        } else {
            (r << (bg + bb)) | (g << bb) | b
        }
    }

    /// The 8-bit colour of a packed pixel; the inverse of [`pack`](Self::pack)
    /// on the format's colours. Fails if `code` has bits set above the
    /// format's [`bits_per_pixel`](Self::bits_per_pixel).
    pub fn unpack(self, code: u32) -> Result<[u8; 3]> {
        if code >> self.bits_per_pixel() != 0 {
            return Err(Error::new(
                "unpacking a pixel",
                ErrorKind::InvalidParameter(format!(
                    "0x{code:x} does not fit {} ({} bits per pixel)",
                    self.name(),
                    self.bits_per_pixel()
                )),
            ));
        }
        Ok(self.unpack_in_range(code))
    }

    /// Every colour the format shows, in packed-code order (code 0 first).
    pub fn colours(self) -> impl Iterator<Item = [u8; 3]> {
        (0..self.colour_count()).map(move |code| self.unpack_in_range(code))
    }

    fn unpack_in_range(self, code: u32) -> [u8; 3] {
        let [br, bg, bb] = self.bits();
        if self.is_grey() {
            return [expand_level(code, br); 3];
        }
        let mask = |bits: u32| (1u32 << bits) - 1;
        [
            expand_level((code >> (bg + bb)) & mask(br), br),
            expand_level((code >> bb) & mask(bg), bg),
            expand_level(code & mask(bb), bb),
        ]
    }

    /// Per-channel index of the nearest level; grey formats repeat the grey's.
    pub(crate) fn level_indices(self, rgb8: [u8; 3]) -> [u32; 3] {
        let bits = self.bits();
        if self.is_grey() {
            [nearest_level(luma8(rgb8), bits[0]); 3]
        } else {
            [0, 1, 2].map(|c| nearest_level(rgb8[c], bits[c]))
        }
    }
}

/// The 8-bit level of code `index` in a `bits`-bit channel:
/// round(index · 255 / (2^bits − 1)), by integer arithmetic (the exact
/// quotient never ends in .5, as 2^bits − 1 is odd).
pub(crate) fn expand_level(index: u32, bits: u32) -> u8 {
    let n = (1u32 << bits) - 1;
    ((2 * index * 255 + n) / (2 * n)) as u8
}

/// Index of the level nearest to `value` in a `bits`-bit channel, ties to
/// the lower level. Levels sit within half a step of the even grid, so the
/// nearest is the rounded grid position or one of its neighbours.
pub(crate) fn nearest_level(value: u8, bits: u32) -> u32 {
    let n = (1u32 << bits) - 1;
    let guess = (2 * value as u32 * n + 255) / 510;
    let mut best = guess.saturating_sub(1);
    let mut best_gap = u32::MAX;
    for i in guess.saturating_sub(1)..=(guess + 1).min(n) {
        let gap = (expand_level(i, bits) as i32 - value as i32).unsigned_abs();
        if gap < best_gap {
            best = i;
            best_gap = gap;
        }
    }
    best
}

/// The 8-bit grey with the same relative luminance as `rgb8`: Y from the
/// sRGB matrix's luminance row (0.2126, 0.7152, 0.0722, the Rec. 709
/// weights) applied in linear light, then sRGB-encoded and rounded. Greys
/// map to themselves.
pub fn luma8(rgb8: [u8; 3]) -> u8 {
    let lin = rgb8_to_linear(rgb8);
    let w = SRGB_TO_XYZ[1];
    let y = w[0] * lin[0] + w[1] * lin[1] + w[2] * lin[2];
    (srgb_encode(y) * 255.0).round().clamp(0.0, 255.0) as u8
}

impl fmt::Display for DisplayFormat {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for DisplayFormat {
    type Err = Error;

    /// Parses a [`name`](DisplayFormat::name), case-insensitively; `grey`
    /// is accepted for `gray`.
    fn from_str(s: &str) -> Result<Self> {
        let wanted = s.trim().to_ascii_lowercase().replace("grey", "gray");
        DisplayFormat::ALL
            .into_iter()
            .find(|f| f.name() == wanted)
            .ok_or_else(|| {
                let names: Vec<&str> = DisplayFormat::ALL.iter().map(|f| f.name()).collect();
                Error::new(
                    "choosing a display format",
                    ErrorKind::InvalidParameter(format!(
                        "unknown display format \"{s}\"; expected one of {}",
                        names.join(", ")
                    )),
                )
            })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Slow oracle: the nearest level by scanning all of them, ties low.
    fn brute_nearest(value: u8, levels: &[u8]) -> u8 {
        let mut best = levels[0];
        for &l in levels {
            if (l as i32 - value as i32).abs() < (best as i32 - value as i32).abs() {
                best = l;
            }
        }
        best
    }

    #[test]
    fn rgb565_primaries_pack_to_the_usual_words() {
        // RGB565 layout RRRRRGGGGGGBBBBB, red high (common practice).
        let f = DisplayFormat::Rgb565;
        assert_eq!(f.pack([255, 0, 0]), 0xF800);
        assert_eq!(f.pack([0, 255, 0]), 0x07E0);
        assert_eq!(f.pack([0, 0, 255]), 0x001F);
        assert_eq!(f.pack([255, 255, 255]), 0xFFFF);
        assert_eq!(f.pack([0, 0, 0]), 0x0000);
        // RGB555 leaves the top bit 0; RGB332 is RRRGGGBB (common practice).
        assert_eq!(DisplayFormat::Rgb555.pack([255, 255, 255]), 0x7FFF);
        assert_eq!(DisplayFormat::Rgb555.pack([255, 0, 0]), 0x7C00);
        assert_eq!(DisplayFormat::Rgb332.pack([255, 0, 0]), 0xE0);
        assert_eq!(DisplayFormat::Rgb332.pack([0, 0, 255]), 0x03);
        assert_eq!(DisplayFormat::Rgb444.pack([255, 255, 255]), 0xFFF);
        assert_eq!(DisplayFormat::Rgb666.pack([255, 255, 255]), 0x3FFFF);
        assert_eq!(DisplayFormat::Rgb888.pack([0x12, 0x34, 0x56]), 0x123456);
        assert_eq!(DisplayFormat::Gray4.pack([255, 255, 255]), 15);
    }

    #[test]
    fn levels_are_rounded_even_steps() {
        assert_eq!(
            DisplayFormat::Gray2.level_values()[0],
            vec![0, 85, 170, 255]
        );
        assert_eq!(DisplayFormat::Gray1.level_values()[0], vec![0, 255]);
        let five = &DisplayFormat::Rgb565.level_values()[0];
        assert_eq!(five.len(), 32);
        assert_eq!(&five[..4], &[0, 8, 16, 25]);
        assert_eq!(DisplayFormat::Rgb888.level_values()[1].len(), 256);
        for f in DisplayFormat::ALL {
            for (c, values) in f.level_values().iter().enumerate() {
                assert_eq!(values.len() as u32, f.levels()[c]);
                assert!(values.windows(2).all(|w| w[0] < w[1]), "{f}");
                assert_eq!((values[0], values[values.len() - 1]), (0, 255));
            }
        }
    }

    #[test]
    fn snap_is_the_nearest_level_and_idempotent() {
        for f in DisplayFormat::ALL.into_iter().filter(|f| !f.is_grey()) {
            let levels = f.level_values();
            for v in 0..=255u8 {
                let rgb = [v, v.wrapping_mul(7), 255 - v];
                let snapped = f.snap(rgb);
                for c in 0..3 {
                    assert_eq!(snapped[c], brute_nearest(rgb[c], &levels[c]), "{f} {rgb:?}");
                }
                assert_eq!(f.snap(snapped), snapped, "{f} {rgb:?}");
            }
        }
    }

    #[test]
    fn grey_formats_snap_luma_to_the_nearest_grey() {
        for f in DisplayFormat::ALL.into_iter().filter(|f| f.is_grey()) {
            let levels = &f.level_values()[0];
            for v in 0..=255u8 {
                for rgb in [[v; 3], [v, 255 - v, v / 2], [0, v, 0]] {
                    let g = brute_nearest(luma8(rgb), levels);
                    let snapped = f.snap(rgb);
                    assert_eq!(snapped, [g; 3], "{f} {rgb:?}");
                    assert_eq!(f.snap(snapped), snapped);
                }
            }
        }
        // Relative luminance of the primaries: the Y row of the sRGB matrix
        // (IEC 61966-2-1), sRGB-encoded with the same standard's transfer
        // function: 0.2126 → 127.10, 0.7152 → 219.93, 0.0722 → 75.96.
        assert_eq!(luma8([255, 0, 0]), 127);
        assert_eq!(luma8([0, 255, 0]), 220);
        assert_eq!(luma8([0, 0, 255]), 76);
        for v in 0..=255u8 {
            assert_eq!(luma8([v; 3]), v);
        }
    }

    #[test]
    fn pack_and_unpack_invert_on_every_colour() {
        for f in DisplayFormat::ALL
            .into_iter()
            .filter(|f| f.colour_count() <= 1 << 18)
        {
            for (code, colour) in f.colours().enumerate() {
                assert_eq!(f.pack(colour), code as u32, "{f} {colour:?}");
                assert_eq!(f.unpack(code as u32).unwrap(), colour);
                assert_eq!(f.snap(colour), colour, "{f} {colour:?}");
            }
        }
        let f = DisplayFormat::Rgb888;
        assert_eq!(f.unpack(0xABCDEF).unwrap(), [0xAB, 0xCD, 0xEF]);
        assert_eq!(f.pack([0xAB, 0xCD, 0xEF]), 0xABCDEF);
    }

    #[test]
    fn unpack_rejects_codes_wider_than_the_format() {
        let e = DisplayFormat::Rgb565.unpack(0x1_0000).unwrap_err();
        assert_eq!(
            e.to_string(),
            "unpacking a pixel: 0x10000 does not fit rgb565 (16 bits per pixel)"
        );
        assert!(DisplayFormat::Gray1.unpack(2).is_err());
        assert!(DisplayFormat::Rgb888.unpack(1 << 24).is_err());
    }

    #[test]
    fn names_round_trip() {
        for f in DisplayFormat::ALL {
            assert_eq!(f.name().parse::<DisplayFormat>().unwrap(), f);
            assert_eq!(
                serde_json::to_string(&f).unwrap(),
                format!("\"{}\"", f.name())
            );
        }
        assert_eq!(
            "Grey4".parse::<DisplayFormat>().unwrap(),
            DisplayFormat::Gray4
        );
        let e = "rgb999".parse::<DisplayFormat>().unwrap_err();
        assert!(e.is_usage());
        assert!(e.to_string().contains("\"rgb999\""), "{e}");
    }
}
