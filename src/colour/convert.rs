//! Colour-space conversions on `f64` triples: the sRGB transfer function,
//! linear-light RGB ⇄ CIE XYZ ⇄ CIELAB, and linear RGB ⇄ Oklab.
//!
//! Every function here is total: any finite input gives a finite output, a
//! NaN gives NaN, and nothing is clamped. Out-of-gamut values (negative or
//! above 1) pass through the same formulas; the sRGB transfer function is
//! extended to negative values by odd symmetry, `f(−x) = −f(x)`.

use std::sync::LazyLock;

/// sRGB (IEC 61966-2-1) linear RGB → CIE XYZ matrix, as printed in the
/// standard (four decimals). Rows give X, Y, Z; Y of white is 1.
pub const SRGB_TO_XYZ: [[f64; 3]; 3] = [
    [0.4124, 0.3576, 0.1805],
    [0.2126, 0.7152, 0.0722],
    [0.0193, 0.1192, 0.9505],
];

/// CIE XYZ → linear sRGB: the exact inverse of [`SRGB_TO_XYZ`], computed in
/// `f64` rather than the standard's own four-decimal inverse, so that
/// RGB → XYZ → RGB returns what it was given to within rounding.
pub const XYZ_TO_SRGB: [[f64; 3]; 3] = invert3(SRGB_TO_XYZ);

/// The D65 reference white used for CIELAB: XYZ of linear sRGB (1, 1, 1)
/// under [`SRGB_TO_XYZ`], i.e. the sums of its rows, (0.9505, 1, 1.0890).
///
/// Its chromaticity is x = 0.31272, y = 0.32900, the sRGB white (0.3127,
/// 0.3290) to the matrix's precision. Taking the white from the matrix keeps
/// every R = G = B colour exactly neutral in CIELAB (a* = b* = 0) and sRGB
/// white at L* = 100.
pub const D65_WHITE: [f64; 3] = [
    SRGB_TO_XYZ[0][0] + SRGB_TO_XYZ[0][1] + SRGB_TO_XYZ[0][2],
    SRGB_TO_XYZ[1][0] + SRGB_TO_XYZ[1][1] + SRGB_TO_XYZ[1][2],
    SRGB_TO_XYZ[2][0] + SRGB_TO_XYZ[2][1] + SRGB_TO_XYZ[2][2],
];

/// CIELAB ε = 216/24389 = (6/29)³ (CIE 15): below this relative
/// luminance the lightness function is linear.
pub const CIELAB_EPSILON: f64 = 216.0 / 24389.0;

/// CIELAB κ = 24389/27 = (29/3)³ (CIE 15): the slope of L* in its linear part.
pub const CIELAB_KAPPA: f64 = 24389.0 / 27.0;

// Oklab (Ottosson 2020, "A perceptual color space for image processing"):
// the published linear sRGB → LMS matrix M1, LMS' → Lab matrix M2 and their
// published inverses.
const OKLAB_M1: [[f64; 3]; 3] = [
    [0.4122214708, 0.5363325363, 0.0514459929],
    [0.2119034982, 0.6806995451, 0.1073969566],
    [0.0883024619, 0.2817188376, 0.6299787005],
];
const OKLAB_M2: [[f64; 3]; 3] = [
    [0.2104542553, 0.7936177850, -0.0040720468],
    [1.9779984951, -2.4285922050, 0.4505937099],
    [0.0259040371, 0.7827717662, -0.8086757660],
];
const OKLAB_M2_INV: [[f64; 3]; 3] = [
    [1.0, 0.3963377774, 0.2158037573],
    [1.0, -0.1055613458, -0.0638541728],
    [1.0, -0.0894841775, -1.2914855480],
];
const OKLAB_M1_INV: [[f64; 3]; 3] = [
    [4.0767416621, -3.3077115913, 0.2309699292],
    [-1.2684380046, 2.6097574011, -0.3413193965],
    [-0.0041960863, -0.7034186147, 1.7076147010],
];

/// 3×3 inverse by the adjugate; only used at compile time on a
/// well-conditioned matrix.
const fn invert3(m: [[f64; 3]; 3]) -> [[f64; 3]; 3] {
    let c00 = m[1][1] * m[2][2] - m[1][2] * m[2][1];
    let c01 = m[1][2] * m[2][0] - m[1][0] * m[2][2];
    let c02 = m[1][0] * m[2][1] - m[1][1] * m[2][0];
    let det = m[0][0] * c00 + m[0][1] * c01 + m[0][2] * c02;
    [
        [
            c00 / det,
            (m[0][2] * m[2][1] - m[0][1] * m[2][2]) / det,
            (m[0][1] * m[1][2] - m[0][2] * m[1][1]) / det,
        ],
        [
            c01 / det,
            (m[0][0] * m[2][2] - m[0][2] * m[2][0]) / det,
            (m[0][2] * m[1][0] - m[0][0] * m[1][2]) / det,
        ],
        [
            c02 / det,
            (m[0][1] * m[2][0] - m[0][0] * m[2][1]) / det,
            (m[0][0] * m[1][1] - m[0][1] * m[1][0]) / det,
        ],
    ]
}

#[inline]
fn mul3(m: &[[f64; 3]; 3], v: [f64; 3]) -> [f64; 3] {
    [
        m[0][0] * v[0] + m[0][1] * v[1] + m[0][2] * v[2],
        m[1][0] * v[0] + m[1][1] * v[1] + m[1][2] * v[2],
        m[2][0] * v[0] + m[2][1] * v[1] + m[2][2] * v[2],
    ]
}

/// sRGB decoding (IEC 61966-2-1): gamma-encoded value in [0, 1] → linear
/// light in [0, 1]. `v / 12.92` up to 0.04045, `((v + 0.055) / 1.055)^2.4`
/// above; odd-symmetric for negative input.
pub fn srgb_decode(encoded: f64) -> f64 {
    let v = encoded.abs();
    let linear = if v <= 0.04045 {
        v / 12.92
    } else {
        ((v + 0.055) / 1.055).powf(2.4)
    };
    linear.copysign(encoded)
}

/// sRGB encoding (IEC 61966-2-1), the inverse of [`srgb_decode`]:
/// `12.92 · l` up to 0.0031308, `1.055 · l^(1/2.4) − 0.055` above;
/// odd-symmetric for negative input.
pub fn srgb_encode(linear: f64) -> f64 {
    let l = linear.abs();
    let encoded = if l <= 0.0031308 {
        l * 12.92
    } else {
        1.055 * l.powf(1.0 / 2.4) - 0.055
    };
    encoded.copysign(linear)
}

static SRGB8_TO_LINEAR: LazyLock<[f64; 256]> = LazyLock::new(|| {
    let mut table = [0.0; 256];
    for (code, slot) in table.iter_mut().enumerate() {
        *slot = srgb_decode(code as f64 / 255.0);
    }
    table
});

/// Linear light in [0, 1] of an 8-bit sRGB code value, from a 256-entry
/// table (the same numbers as `srgb_decode(code / 255)`).
pub fn srgb8_to_linear(code: u8) -> f64 {
    SRGB8_TO_LINEAR[code as usize]
}

/// Linear light of an 8-bit sRGB colour, each component in [0, 1].
pub fn rgb8_to_linear(rgb8: [u8; 3]) -> [f64; 3] {
    rgb8.map(srgb8_to_linear)
}

/// Linear sRGB (white = 1) → CIE XYZ (D65, Y of white = 1).
pub fn linear_to_xyz(linear: [f64; 3]) -> [f64; 3] {
    mul3(&SRGB_TO_XYZ, linear)
}

/// CIE XYZ (D65, Y of white = 1) → linear sRGB, unclamped.
pub fn xyz_to_linear(xyz: [f64; 3]) -> [f64; 3] {
    mul3(&XYZ_TO_SRGB, xyz)
}

// CIE 15 lightness function of a relative value t = X/Xn (or Y/Yn, Z/Zn).
fn lab_f(t: f64) -> f64 {
    if t > CIELAB_EPSILON {
        cube_root(t)
    } else {
        (CIELAB_KAPPA * t + 16.0) / 116.0
    }
}

/// The cube root of `t` for t > 0, within two units in the last place of
/// `f64::cbrt` (checked in the tests), several times faster: the standard
/// library's is correctly rounded, which costs more than CIELAB needs, and
/// it was a tenth of a palette run. A guess from the exponent (its bits
/// divided by three), two Halley steps (each triples the correct bits:
/// about 5 → 15 → 45) and a Newton step (→ full precision). Zero, negative
/// and non-finite `t` go to `f64::cbrt`.
fn cube_root(t: f64) -> f64 {
    if !(t.is_finite() && t >= f64::MIN_POSITIVE) {
        return t.cbrt();
    }
    // Exponent bias: a third of the bits lands the exponent near e/3, and
    // the constant restores two thirds of the bias (1023 · 2/3 · 2⁵²).
    let mut y = f64::from_bits(t.to_bits() / 3 + 0x2AA0_0000_0000_0000);
    for _ in 0..2 {
        let y3 = y * y * y;
        y *= (y3 + 2.0 * t) / (2.0 * y3 + t);
    }
    y - (y * y * y - t) / (3.0 * y * y)
}

// Inverse of `lab_f`; the break point f = 6/29 corresponds to t = ε.
fn lab_f_inv(f: f64) -> f64 {
    if f > 6.0 / 29.0 {
        f * f * f
    } else {
        (116.0 * f - 16.0) / CIELAB_KAPPA
    }
}

/// CIE XYZ (Y of white = 1) → CIELAB (CIE 15) relative to [`D65_WHITE`]:
/// L* in [0, 100] for real colours, a* and b* signed.
pub fn xyz_to_lab(xyz: [f64; 3]) -> [f64; 3] {
    let fx = lab_f(xyz[0] / D65_WHITE[0]);
    let fy = lab_f(xyz[1] / D65_WHITE[1]);
    let fz = lab_f(xyz[2] / D65_WHITE[2]);
    [116.0 * fy - 16.0, 500.0 * (fx - fy), 200.0 * (fy - fz)]
}

/// CIELAB relative to [`D65_WHITE`] → CIE XYZ (Y of white = 1).
pub fn lab_to_xyz(lab: [f64; 3]) -> [f64; 3] {
    let fy = (lab[0] + 16.0) / 116.0;
    let fx = fy + lab[1] / 500.0;
    let fz = fy - lab[2] / 200.0;
    [
        D65_WHITE[0] * lab_f_inv(fx),
        D65_WHITE[1] * lab_f_inv(fy),
        D65_WHITE[2] * lab_f_inv(fz),
    ]
}

/// Linear sRGB (white = 1) → Oklab with L in [0, 1] (the published scale).
pub fn linear_to_oklab(linear: [f64; 3]) -> [f64; 3] {
    let lms = mul3(&OKLAB_M1, linear);
    mul3(&OKLAB_M2, lms.map(f64::cbrt))
}

/// Oklab (L in [0, 1]) → linear sRGB (white = 1), unclamped.
pub fn oklab_to_linear(oklab: [f64; 3]) -> [f64; 3] {
    let lms_root = mul3(&OKLAB_M2_INV, oklab);
    mul3(&OKLAB_M1_INV, lms_root.map(|x| x * x * x))
}

/// Lower and upper bounds of CIELAB over the box of linear RGB colours
/// between `lo` and `hi` (componentwise, `lo ≤ hi`), as `[min, max]` per
/// component. Every entry of [`SRGB_TO_XYZ`] is positive and the lightness
/// function rises, so X, Y, Z and f(X), f(Y), f(Z) take their extremes at
/// the box's corners `lo` and `hi`; L*, a*, b* combine them with fixed signs.
pub(super) fn lab_bounds(lo: [f64; 3], hi: [f64; 3]) -> [[f64; 2]; 3] {
    let f_lo = [0, 1, 2].map(|i| lab_f(linear_to_xyz(lo)[i] / D65_WHITE[i]));
    let f_hi = [0, 1, 2].map(|i| lab_f(linear_to_xyz(hi)[i] / D65_WHITE[i]));
    [
        [116.0 * f_lo[1] - 16.0, 116.0 * f_hi[1] - 16.0],
        [500.0 * (f_lo[0] - f_hi[1]), 500.0 * (f_hi[0] - f_lo[1])],
        [200.0 * (f_lo[1] - f_hi[2]), 200.0 * (f_hi[1] - f_lo[2])],
    ]
}

/// Lower and upper bounds of Oklab (L in [0, 1]) over the box of linear RGB
/// colours between `lo` and `hi`. M1's entries are all positive and the cube
/// root rises, so the LMS′ extremes sit at the corners; M2 then mixes them
/// with coefficients of either sign (interval arithmetic).
pub(super) fn oklab_bounds(lo: [f64; 3], hi: [f64; 3]) -> [[f64; 2]; 3] {
    let p_lo = mul3(&OKLAB_M1, lo).map(f64::cbrt);
    let p_hi = mul3(&OKLAB_M1, hi).map(f64::cbrt);
    mul3_interval(&OKLAB_M2, p_lo, p_hi)
}

/// Interval product `m · [lo, hi]`: bounds of `m · x` over the box.
fn mul3_interval(m: &[[f64; 3]; 3], lo: [f64; 3], hi: [f64; 3]) -> [[f64; 2]; 3] {
    m.map(|row| {
        let mut out = [0.0, 0.0];
        for j in 0..3 {
            let (a, b) = (row[j] * lo[j], row[j] * hi[j]);
            out[0] += a.min(b);
            out[1] += a.max(b);
        }
        out
    })
}

/// Bounds of linear RGB over the box of CIELAB colours between `lo` and
/// `hi`: f(X), f(Y), f(Z) are monotone in L*, a*, b* with fixed signs, X, Y,
/// Z rise with them, and [`XYZ_TO_SRGB`] mixes them (interval arithmetic).
pub(super) fn linear_bounds_of_lab_box(lo: [f64; 3], hi: [f64; 3]) -> [[f64; 2]; 3] {
    let fy = [(lo[0] + 16.0) / 116.0, (hi[0] + 16.0) / 116.0];
    let fx = [fy[0] + lo[1] / 500.0, fy[1] + hi[1] / 500.0];
    let fz = [fy[0] - hi[2] / 200.0, fy[1] - lo[2] / 200.0];
    let f = [fx, fy, fz];
    let xyz_lo = [0, 1, 2].map(|i| D65_WHITE[i] * lab_f_inv(f[i][0]));
    let xyz_hi = [0, 1, 2].map(|i| D65_WHITE[i] * lab_f_inv(f[i][1]));
    mul3_interval(&XYZ_TO_SRGB, xyz_lo, xyz_hi)
}

/// Bounds of linear RGB over the box of Oklab colours (L in [0, 1]) between
/// `lo` and `hi`: the published inverse matrices by interval arithmetic
/// around the (rising) cube.
pub(super) fn linear_bounds_of_oklab_box(lo: [f64; 3], hi: [f64; 3]) -> [[f64; 2]; 3] {
    let roots = mul3_interval(&OKLAB_M2_INV, lo, hi);
    let cube = |x: f64| x * x * x;
    mul3_interval(
        &OKLAB_M1_INV,
        roots.map(|r| cube(r[0])),
        roots.map(|r| cube(r[1])),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    fn max_abs_diff(a: [f64; 3], b: [f64; 3]) -> f64 {
        (0..3).map(|i| (a[i] - b[i]).abs()).fold(0.0, f64::max)
    }

    #[test]
    fn cube_root_is_within_two_ulps_of_the_standard_library() {
        // Oracle: `f64::cbrt`, correctly rounded. Log-spaced over the
        // whole range CIELAB meets (t above ε ≈ 0.0089, up to far
        // out-of-gamut values), plus exact cubes.
        let ulps = |a: f64, b: f64| (a.to_bits() as i64 - b.to_bits() as i64).unsigned_abs();
        let mut worst = 0;
        for i in 0..=200_000 {
            let t = 10f64.powf(-6.0 + 12.0 * i as f64 / 200_000.0);
            worst = worst.max(ulps(cube_root(t), t.cbrt()));
        }
        for k in 1..=1000 {
            let c = k as f64 / 100.0;
            worst = worst.max(ulps(cube_root(c * c * c), (c * c * c).cbrt()));
        }
        assert!(worst <= 2, "{worst} ulps");
        assert_eq!(cube_root(0.0), 0.0);
        assert!(cube_root(f64::NAN).is_nan());
        assert_eq!(cube_root(f64::INFINITY), f64::INFINITY);
        assert_eq!(cube_root(-8.0), -2.0);
    }

    #[test]
    fn table_matches_the_formula_for_every_code() {
        for code in 0..=255u8 {
            assert_eq!(srgb8_to_linear(code), srgb_decode(code as f64 / 255.0));
        }
    }

    #[test]
    fn transfer_function_pieces_meet_and_invert() {
        // IEC 61966-2-1: the two pieces of the decoding meet at 0.04045
        // (to about 1e-8, the standard's rounding of the break point).
        let below = 0.04045 / 12.92;
        let above = ((0.04045f64 + 0.055) / 1.055).powf(2.4);
        assert!((below - above).abs() < 1e-8, "{below} vs {above}");
        for i in -100..=1100 {
            let e = i as f64 / 1000.0;
            assert!((srgb_encode(srgb_decode(e)) - e).abs() < 1e-12, "{e}");
        }
        assert_eq!(srgb_decode(-0.5), -srgb_decode(0.5));
        assert!(srgb_decode(f64::NAN).is_nan());
    }

    #[test]
    fn matrix_inverse_is_exact_to_rounding() {
        for i in 0..3 {
            let mut e = [0.0; 3];
            e[i] = 1.0;
            let back = xyz_to_linear(linear_to_xyz(e));
            assert!(max_abs_diff(back, e) < 1e-15, "{back:?}");
        }
    }

    #[test]
    fn white_and_greys_are_neutral_in_lab() {
        let white = xyz_to_lab(linear_to_xyz([1.0, 1.0, 1.0]));
        assert!(max_abs_diff(white, [100.0, 0.0, 0.0]) < 1e-12, "{white:?}");
        for code in 0..=255u8 {
            let lab = xyz_to_lab(linear_to_xyz(rgb8_to_linear([code; 3])));
            assert!(
                lab[1].abs() < 1e-12 && lab[2].abs() < 1e-12,
                "{code}: {lab:?}"
            );
        }
    }

    #[test]
    fn lab_round_trips_on_both_sides_of_the_break() {
        // Y/Yn on both sides of ε, plus out-of-gamut and negative values.
        for &y in &[0.0, 1e-4, 0.008, CIELAB_EPSILON, 0.009, 0.2, 1.0, 1.5] {
            for &(x, z) in &[(0.3, 0.2), (-0.01, 0.5), (y, y)] {
                let xyz = [x, y, z];
                let back = lab_to_xyz(xyz_to_lab(xyz));
                assert!(max_abs_diff(back, xyz) < 1e-12, "{xyz:?} -> {back:?}");
            }
        }
        // L* is continuous at the break: κ·ε = 8 exactly.
        assert!((CIELAB_KAPPA * CIELAB_EPSILON - 8.0).abs() < 1e-12);
    }

    #[test]
    fn oklab_published_matrices_invert_each_other() {
        // The published inverses agree with the forward matrices to their
        // printed precision (10 decimals; M2's first column to about 4e-8).
        for i in 0..3 {
            let mut e = [0.0; 3];
            e[i] = 1.0;
            assert!(max_abs_diff(mul3(&OKLAB_M1_INV, mul3(&OKLAB_M1, e)), e) < 1e-9);
            assert!(max_abs_diff(mul3(&OKLAB_M2_INV, mul3(&OKLAB_M2, e)), e) < 1e-7);
        }
        let white = linear_to_oklab([1.0, 1.0, 1.0]);
        assert!(max_abs_diff(white, [1.0, 0.0, 0.0]) < 1e-7, "{white:?}");
        // Round trips inherit that: about 2e-7, far below an 8-bit step
        // (the smallest linear step between 8-bit codes is 3e-4).
        for &rgb in &[[0.2, 0.5, 0.9], [1.2, -0.1, 0.3], [0.0; 3]] {
            let back = oklab_to_linear(linear_to_oklab(rgb));
            assert!(max_abs_diff(back, rgb) < 1e-6, "{rgb:?} -> {back:?}");
        }
    }

    #[test]
    fn box_bounds_contain_every_colour_of_the_box() {
        let mut rng = crate::rng::SeededRng::new(5);
        for _ in 0..2000 {
            let mut lo = [0.0; 3];
            let mut hi = [0.0; 3];
            for c in 0..3 {
                let (a, b) = (rng.unit_f64(), rng.unit_f64());
                lo[c] = a.min(b);
                hi[c] = a.max(b);
            }
            let lab = lab_bounds(lo, hi);
            let ok = oklab_bounds(lo, hi);
            for _ in 0..5 {
                let p = [0, 1, 2].map(|c| lo[c] + (hi[c] - lo[c]) * rng.unit_f64());
                let (l, o) = (xyz_to_lab(linear_to_xyz(p)), linear_to_oklab(p));
                for c in 0..3 {
                    assert!(
                        lab[c][0] - 1e-9 <= l[c] && l[c] <= lab[c][1] + 1e-9,
                        "{p:?}"
                    );
                    assert!(
                        ok[c][0] - 1e-12 <= o[c] && o[c] <= ok[c][1] + 1e-12,
                        "{p:?}"
                    );
                }
            }
        }
    }

    #[test]
    fn inverse_box_bounds_contain_every_colour_of_the_box() {
        let mut rng = crate::rng::SeededRng::new(6);
        let span = |rng: &mut crate::rng::SeededRng, lo: f64, hi: f64| {
            let (a, b) = (rng.unit_f64(), rng.unit_f64());
            let w = hi - lo;
            [lo + w * a.min(b), lo + w * a.max(b)]
        };
        for _ in 0..2000 {
            let lab = [
                span(&mut rng, 0.0, 100.0),
                span(&mut rng, -90.0, 100.0),
                span(&mut rng, -110.0, 95.0),
            ];
            let ok = [
                span(&mut rng, 0.0, 1.0),
                span(&mut rng, -0.25, 0.3),
                span(&mut rng, -0.32, 0.2),
            ];
            let lab_b = linear_bounds_of_lab_box(lab.map(|r| r[0]), lab.map(|r| r[1]));
            let ok_b = linear_bounds_of_oklab_box(ok.map(|r| r[0]), ok.map(|r| r[1]));
            for _ in 0..5 {
                let pick = |rng: &mut crate::rng::SeededRng, r: [[f64; 2]; 3]| {
                    r.map(|[a, b]| a + (b - a) * rng.unit_f64())
                };
                let from_lab = xyz_to_linear(lab_to_xyz(pick(&mut rng, lab)));
                let from_ok = oklab_to_linear(pick(&mut rng, ok));
                for c in 0..3 {
                    let (x, b) = (from_lab[c], lab_b[c]);
                    assert!(b[0] - 1e-12 <= x && x <= b[1] + 1e-12, "lab {x} {b:?}");
                    let (x, b) = (from_ok[c], ok_b[c]);
                    assert!(b[0] - 1e-12 <= x && x <= b[1] + 1e-12, "oklab {x} {b:?}");
                }
            }
        }
    }
}
