//! Colour for palettes: sRGB ⇄ linear light ⇄ CIE XYZ ⇄ CIELAB and ⇄ Oklab,
//! the working spaces k-means trains in ([`ColourSpace`]), the pixel formats
//! of small displays ([`DisplayFormat`]), the nearest displayable colour to
//! a working-space point ([`Grid`]) and the CIEDE2000 colour difference.
//!
//! Owns colour arithmetic only: it never does I/O, never prints, and never
//! trains or encodes (it borrows [`crate::encode`]'s k-d tree for the exact
//! nearest-colour search).
//!
//! Conventions: 8-bit colours are sRGB code values; "sRGB unit" values are
//! the same scaled to [0, 1]; linear light has white = 1; CIE XYZ is D65
//! with Y of white = 1; CIELAB is relative to [`D65_WHITE`]. Conversions
//! compute in `f64`; working-space vectors (what k-means sees) are `f32`.
//!
//! # Example
//!
//! ```
//! use vqforge::colour::{delta_e2000_rgb8, ColourSpace, DisplayFormat};
//!
//! // Orange in CIELAB (colour-science 0.4.7: L* = 67.0501), and back to
//! // the same 8-bit colour.
//! let lab = ColourSpace::Lab.to_space([255, 128, 0]);
//! assert!((lab[0] - 67.05).abs() < 0.01);
//! assert_eq!(ColourSpace::Lab.to_rgb8(lab), [255, 128, 0]);
//!
//! // What an RGB565 panel shows for it, and the 16-bit word it is sent as.
//! let panel = DisplayFormat::Rgb565;
//! assert_eq!(panel.snap([255, 128, 0]), [255, 130, 0]);
//! assert_eq!(panel.pack([255, 128, 0]), 0xF800 | (32 << 5));
//!
//! // How visible that change is (CIEDE2000; about 1 is just noticeable).
//! let de = delta_e2000_rgb8([255, 128, 0], [255, 130, 0]);
//! assert!(de > 0.0 && de < 1.0);
//!
//! // Names parse case-insensitively; unknown ones are usage errors.
//! assert_eq!("RGB565".parse::<DisplayFormat>().unwrap(), panel);
//! assert!("cmyk".parse::<ColourSpace>().unwrap_err().is_usage());
//! ```

mod ciede2000;
mod convert;
mod display;
mod grid;

use std::fmt;
use std::str::FromStr;

use serde::{Deserialize, Serialize};

use crate::error::{Error, ErrorKind, Result};

pub use ciede2000::delta_e2000;
pub use convert::{
    lab_to_xyz, linear_to_oklab, linear_to_xyz, oklab_to_linear, rgb8_to_linear, srgb8_to_linear,
    srgb_decode, srgb_encode, xyz_to_lab, xyz_to_linear, CIELAB_EPSILON, CIELAB_KAPPA, D65_WHITE,
    SRGB_TO_XYZ, XYZ_TO_SRGB,
};
pub use display::{luma8, DisplayFormat};
pub use grid::Grid;

/// Oklab is stored ×100 in the working space, so its L runs 0..100 like
/// CIELAB's L*.
const OKLAB_SCALE: f64 = 100.0;

/// The space colour vectors live in while k-means works on them.
///
/// Scales are chosen so that squared errors read in familiar units:
///
/// | space | components | range over the 8-bit sRGB colours |
/// |---|---|---|
/// | `Srgb` | gamma-encoded R, G, B as 8-bit code values | 0..255 |
/// | `Linear` | linear-light R, G, B × 255 | 0..255 |
/// | `Lab` | CIELAB L*, a*, b* (D65) | L* 0..100, a* −86.2..98.2, b* −107.9..94.5 |
/// | `Oklab` | Oklab L, a, b × 100 | L 0..100, a −23.4..27.6, b −31.2..19.9 |
///
/// `Srgb` and `Linear` share the 0..255 scale so their mean squared errors
/// compare directly with 8-bit errors (and PSNR's peak is 255 in both).
/// Oklab is multiplied by 100 so its L shares CIELAB's 0..100 range and the
/// two perceptual spaces print comparable numbers; a uniform scale changes
/// no nearest-codeword decision.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ColourSpace {
    /// sRGB code values, 0..255.
    Srgb,
    /// Linear-light sRGB primaries, 0..255.
    Linear,
    /// CIELAB relative to [`D65_WHITE`], L* 0..100.
    Lab,
    /// Oklab × 100, L 0..100.
    Oklab,
}

impl ColourSpace {
    /// Every working space.
    pub const ALL: [ColourSpace; 4] = [
        ColourSpace::Srgb,
        ColourSpace::Linear,
        ColourSpace::Lab,
        ColourSpace::Oklab,
    ];

    /// The lowercase name used in files and on the command line, e.g. `"lab"`.
    pub fn name(self) -> &'static str {
        match self {
            ColourSpace::Srgb => "srgb",
            ColourSpace::Linear => "linear",
            ColourSpace::Lab => "lab",
            ColourSpace::Oklab => "oklab",
        }
    }

    /// Working-space vector of an 8-bit sRGB colour (decoding through a
    /// 256-entry table).
    pub fn to_space(self, rgb8: [u8; 3]) -> [f32; 3] {
        match self {
            ColourSpace::Srgb => rgb8.map(f32::from),
            _ => self.to_space_f64(rgb8).map(|x| x as f32),
        }
    }

    /// [`to_space`](Self::to_space) in full `f64` precision.
    pub fn to_space_f64(self, rgb8: [u8; 3]) -> [f64; 3] {
        let linear = rgb8_to_linear(rgb8);
        match self {
            ColourSpace::Srgb => rgb8.map(f64::from),
            ColourSpace::Linear => linear.map(|x| x * 255.0),
            ColourSpace::Lab => xyz_to_lab(linear_to_xyz(linear)),
            ColourSpace::Oklab => linear_to_oklab(linear).map(|x| x * OKLAB_SCALE),
        }
    }

    /// Working-space vector of an sRGB colour with components in [0, 1]
    /// (values outside are converted as they are, not clamped).
    pub fn srgb_to_space(self, srgb: [f64; 3]) -> [f64; 3] {
        match self {
            ColourSpace::Srgb => srgb.map(|x| x * 255.0),
            ColourSpace::Linear => srgb.map(|x| srgb_decode(x) * 255.0),
            ColourSpace::Lab => xyz_to_lab(linear_to_xyz(srgb.map(srgb_decode))),
            ColourSpace::Oklab => linear_to_oklab(srgb.map(srgb_decode)).map(|x| x * OKLAB_SCALE),
        }
    }

    /// The sRGB colour, components nominally in [0, 1], of a working-space
    /// vector; unclamped, so out-of-gamut vectors give values outside [0, 1].
    pub fn space_to_srgb(self, v: [f64; 3]) -> [f64; 3] {
        match self {
            ColourSpace::Srgb => v.map(|x| x / 255.0),
            ColourSpace::Linear => v.map(|x| srgb_encode(x / 255.0)),
            ColourSpace::Lab => xyz_to_linear(lab_to_xyz(v)).map(srgb_encode),
            ColourSpace::Oklab => oklab_to_linear(v.map(|x| x / OKLAB_SCALE)).map(srgb_encode),
        }
    }

    /// [`space_to_srgb`](Self::space_to_srgb) of an `f32` working-space vector.
    pub fn from_space(self, v: [f32; 3]) -> [f64; 3] {
        self.space_to_srgb(v.map(f64::from))
    }

    /// The 8-bit sRGB colour of a working-space vector: rounded to the
    /// nearest code value and clamped to 0..255 (a NaN component gives 0).
    pub fn to_rgb8(self, v: [f32; 3]) -> [u8; 3] {
        self.from_space(v)
            .map(|x| (x * 255.0).round().clamp(0.0, 255.0) as u8)
    }
}

impl fmt::Display for ColourSpace {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for ColourSpace {
    type Err = Error;

    /// Parses a [`name`](ColourSpace::name), case-insensitively.
    fn from_str(s: &str) -> Result<Self> {
        let wanted = s.trim().to_ascii_lowercase();
        ColourSpace::ALL
            .into_iter()
            .find(|c| c.name() == wanted)
            .ok_or_else(|| {
                Error::new(
                    "choosing a colour space",
                    ErrorKind::InvalidParameter(format!(
                        "unknown colour space \"{s}\"; expected one of srgb, linear, lab, oklab"
                    )),
                )
            })
    }
}

/// CIELAB (relative to [`D65_WHITE`]) of an 8-bit sRGB colour, in `f64`.
pub fn rgb8_to_lab(rgb8: [u8; 3]) -> [f64; 3] {
    ColourSpace::Lab.to_space_f64(rgb8)
}

/// CIEDE2000 difference ([`delta_e2000`]) between two 8-bit sRGB colours.
pub fn delta_e2000_rgb8(a: [u8; 3], b: [u8; 3]) -> f64 {
    delta_e2000(rgb8_to_lab(a), rgb8_to_lab(b))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The 16-step grid (0, 17, …, 255 per channel: 4096 colours) plus
    /// every grey. (The exact 8-bit round trips over the same colours are
    /// checked in `tests/reference_colour.rs`.)
    fn grid_and_greys() -> Vec<[u8; 3]> {
        let steps: Vec<u8> = (0..16).map(|i| (i * 17) as u8).collect();
        let mut out = Vec::with_capacity(4096 + 256);
        for &r in &steps {
            for &g in &steps {
                for &b in &steps {
                    out.push([r, g, b]);
                }
            }
        }
        out.extend((0..=255u8).map(|v| [v; 3]));
        out
    }

    #[test]
    fn f64_and_f32_routes_agree() {
        for space in ColourSpace::ALL {
            for c in grid_and_greys() {
                let a = space.to_space_f64(c);
                let b = space.srgb_to_space(c.map(|x| x as f64 / 255.0));
                let f = space.to_space(c);
                for i in 0..3 {
                    assert!((a[i] - b[i]).abs() < 1e-9, "{space} {c:?}");
                    assert_eq!(f[i], a[i] as f32);
                }
            }
        }
    }

    #[test]
    fn working_ranges_match_the_documented_table() {
        // Extremes over the 16-step grid lie inside the documented ranges.
        for space in ColourSpace::ALL {
            let (lo, hi) = match space {
                ColourSpace::Srgb | ColourSpace::Linear => ([0.0; 3], [255.0; 3]),
                ColourSpace::Lab => ([0.0, -86.2, -107.9], [100.0, 98.3, 94.5]),
                ColourSpace::Oklab => ([0.0, -23.4, -31.2], [100.0, 27.7, 19.9]),
            };
            for c in grid_and_greys() {
                let v = space.to_space_f64(c);
                for i in 0..3 {
                    assert!(
                        v[i] >= lo[i] - 1e-6 && v[i] <= hi[i] + 1e-6,
                        "{space} {c:?} {v:?}"
                    );
                }
            }
        }
    }

    #[test]
    fn out_of_range_vectors_clamp_and_never_panic() {
        assert_eq!(
            ColourSpace::Srgb.to_rgb8([-20.0, 300.0, 127.6]),
            [0, 255, 128]
        );
        assert_eq!(ColourSpace::Lab.to_rgb8([150.0, 0.0, 0.0]), [255, 255, 255]);
        assert_eq!(ColourSpace::Oklab.to_rgb8([-5.0, 0.0, 0.0]), [0, 0, 0]);
        for space in ColourSpace::ALL {
            let _ = space.to_rgb8([f32::NAN, f32::INFINITY, f32::NEG_INFINITY]);
            let _ = space.to_rgb8([f32::MAX, f32::MIN, 0.0]);
        }
        assert_eq!(ColourSpace::Srgb.to_rgb8([f32::NAN, 1.0, 2.0]), [0, 1, 2]);
    }

    #[test]
    fn names_round_trip() {
        for space in ColourSpace::ALL {
            assert_eq!(space.name().parse::<ColourSpace>().unwrap(), space);
            assert_eq!(
                serde_json::to_string(&space).unwrap(),
                format!("\"{}\"", space.name())
            );
        }
        let e = "hsv".parse::<ColourSpace>().unwrap_err();
        assert_eq!(
            e.to_string(),
            "choosing a colour space: unknown colour space \"hsv\"; expected one of srgb, linear, lab, oklab"
        );
    }

    #[test]
    fn rgb8_delta_e_is_zero_only_for_equal_colours() {
        assert_eq!(delta_e2000_rgb8([10, 20, 30], [10, 20, 30]), 0.0);
        assert!(delta_e2000_rgb8([10, 20, 30], [10, 20, 31]) > 0.0);
        // Black to white is ΔL* = 100 at mean L* = 50: S_L = 1, ΔE = 100.
        let de = delta_e2000_rgb8([0, 0, 0], [255, 255, 255]);
        assert!((de - 100.0).abs() < 1e-9, "{de}");
    }
}
