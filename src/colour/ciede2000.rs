//! The CIEDE2000 colour difference ΔE₀₀ with parametric factors
//! kL = kC = kH = 1, following the equations and the hue cases spelled out
//! in Sharma, Wu & Dalal (2005), "The CIEDE2000 color-difference formula:
//! implementation notes, supplementary test data, and mathematical
//! observations", Color Res. Appl. 30(1).

/// Hue differences within this many degrees of 180° count as exactly 180°.
///
/// At exactly 180° apart the paper takes the plain mean hue (its
/// |h′₁ − h′₂| ≤ 180° case) and ΔE jumps as the difference crosses 180°;
/// without a tolerance the last bit of `atan2` would pick the side (the
/// paper's test pair 14 sits exactly there).
const HALF_TURN_TOLERANCE_DEG: f64 = 1e-9;

/// 25⁷, the constant in the chroma weighting G and the rotation term R_C.
const POW25_7: f64 = 6_103_515_625.0;

/// CIEDE2000 colour difference between two CIELAB colours (L*, a*, b*),
/// with kL = kC = kH = 1.
///
/// Symmetric in its arguments, 0 for identical colours, NaN if any input is
/// NaN. Hues of achromatic colours (a′ = b = 0) are taken as 0°, and when
/// either chroma is 0 the hue difference is 0 and the mean hue is the sum of
/// the hues, as the paper prescribes.
pub fn delta_e2000(lab1: [f64; 3], lab2: [f64; 3]) -> f64 {
    let [l1, a1, b1] = lab1;
    let [l2, a2, b2] = lab2;

    // Chroma-dependent stretch of a* (the G factor), then C′ and h′.
    let c_mean = (chroma(a1, b1) + chroma(a2, b2)) / 2.0;
    let c7 = c_mean.powi(7);
    let g = 0.5 * (1.0 - (c7 / (c7 + POW25_7)).sqrt());
    let a1p = (1.0 + g) * a1;
    let a2p = (1.0 + g) * a2;
    let c1p = chroma(a1p, b1);
    let c2p = chroma(a2p, b2);
    let h1p = hue_degrees(a1p, b1);
    let h2p = hue_degrees(a2p, b2);

    // Differences, with the hue difference wrapped to [−180°, 180°] and the
    // mean hue taken on the shorter arc.
    let dl = l2 - l1;
    let dc = c2p - c1p;
    let chroma_product = c1p * c2p;
    let (dh, h_mean) = if chroma_product == 0.0 {
        (0.0, h1p + h2p)
    } else {
        let diff = h2p - h1p;
        let half_turn = (diff.abs() - 180.0).abs() <= HALF_TURN_TOLERANCE_DEG;
        if diff.abs() <= 180.0 || half_turn {
            (diff, (h1p + h2p) / 2.0)
        } else if diff > 180.0 {
            (diff - 360.0, mean_across_zero(h1p, h2p))
        } else {
            (diff + 360.0, mean_across_zero(h1p, h2p))
        }
    };
    let dh_big = 2.0 * chroma_product.sqrt() * (dh / 2.0).to_radians().sin();

    // Weighting functions S_L, S_C, S_H and the rotation term R_T.
    let l_mean = (l1 + l2) / 2.0;
    let cp_mean = (c1p + c2p) / 2.0;
    let t = hue_weight(h_mean);
    let d_theta = 30.0 * (-((h_mean - 275.0) / 25.0).powi(2)).exp();
    let cp7 = cp_mean.powi(7);
    let r_c = 2.0 * (cp7 / (cp7 + POW25_7)).sqrt();
    let l50 = (l_mean - 50.0).powi(2);
    let s_l = 1.0 + 0.015 * l50 / (20.0 + l50).sqrt();
    let s_c = 1.0 + 0.045 * cp_mean;
    let s_h = 1.0 + 0.015 * cp_mean * t;
    let r_t = -(2.0 * d_theta).to_radians().sin() * r_c;

    let tl = dl / s_l;
    let tc = dc / s_c;
    let th = dh_big / s_h;
    // |R_T| ≤ 2 keeps the form non-negative; the guard absorbs rounding at 0
    // and, unlike `f64::max`, lets a NaN through.
    let sum = tl * tl + tc * tc + th * th + r_t * tc * th;
    if sum < 0.0 {
        0.0
    } else {
        sum.sqrt()
    }
}

/// Hue angle in degrees in [0, 360); 0 for a = b = 0.
fn hue_degrees(a: f64, b: f64) -> f64 {
    if a == 0.0 && b == 0.0 {
        return 0.0;
    }
    let h = b.atan2(a).to_degrees();
    if h < 0.0 {
        h + 360.0
    } else {
        h
    }
}

/// Mean of two hues more than 180° apart: the midpoint of the arc through 0°.
fn mean_across_zero(h1: f64, h2: f64) -> f64 {
    if h1 + h2 < 360.0 {
        (h1 + h2 + 360.0) / 2.0
    } else {
        (h1 + h2 - 360.0) / 2.0
    }
}

/// √(a² + b²): CIELAB values are far from overflow, and the plain form
/// costs a fraction of `f64::hypot` (this runs for every distinct colour
/// of an image in the reports).
fn chroma(a: f64, b: f64) -> f64 {
    (a * a + b * b).sqrt()
}

const SIN_COS_6: (f64, f64) = (0.10452846326765347, 0.9945218953682733);
const SIN_COS_30: (f64, f64) = (0.5, 0.8660254037844387);
const SIN_COS_63: (f64, f64) = (0.8910065241883678, 0.4539904997395468);

/// T = 1 − 0.17 cos(H − 30°) + 0.24 cos 2H + 0.32 cos(3H + 6°)
/// − 0.20 cos(4H − 63°), with the multiple angles from one sine and cosine
/// of H (double- and triple-angle identities) instead of four cosines.
fn hue_weight(h_mean_deg: f64) -> f64 {
    let (s1, c1) = h_mean_deg.to_radians().sin_cos();
    let (s2, c2) = (2.0 * s1 * c1, 2.0 * c1 * c1 - 1.0);
    let (s3, c3) = (s1 * (3.0 - 4.0 * s1 * s1), c1 * (4.0 * c1 * c1 - 3.0));
    let (s4, c4) = (2.0 * s2 * c2, 2.0 * c2 * c2 - 1.0);
    // Sines and cosines of the formula's fixed angles, 6°, 30° and 63°
    // (f64 values; the test below checks them against `sin_cos`).
    let (s6, c6) = SIN_COS_6;
    let (s30, c30) = SIN_COS_30;
    let (s63, c63) = SIN_COS_63;
    1.0 - 0.17 * (c1 * c30 + s1 * s30) + 0.24 * c2 + 0.32 * (c3 * c6 - s3 * s6)
        - 0.20 * (c4 * c63 + s4 * s63)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zero_for_identical_and_symmetric() {
        let samples = [
            [50.0, 2.6772, -79.7751],
            [0.0, 0.0, 0.0],
            [100.0, -40.0, 60.0],
            [35.0, 0.0, 12.0],
        ];
        for a in samples {
            assert_eq!(delta_e2000(a, a), 0.0);
            for b in samples {
                assert_eq!(delta_e2000(a, b), delta_e2000(b, a), "{a:?} {b:?}");
            }
        }
        assert!(delta_e2000([f64::NAN, 0.0, 0.0], [50.0, 0.0, 0.0]).is_nan());
    }

    #[test]
    fn lightness_only_difference_uses_s_l() {
        // Neutral colours: ΔE = |ΔL| / S_L with S_L at the mean lightness.
        let de = delta_e2000([40.0, 0.0, 0.0], [60.0, 0.0, 0.0]);
        assert!((de - 20.0).abs() < 1e-12, "{de}");
        let de = delta_e2000([70.0, 0.0, 0.0], [90.0, 0.0, 0.0]);
        let s_l = 1.0 + 0.015 * 900.0 / (20.0f64 + 900.0).sqrt();
        assert!((de - 20.0 / s_l).abs() < 1e-12, "{de}");
    }

    #[test]
    fn hue_weight_matches_the_four_cosines() {
        for (angle, (s, c)) in [(6.0f64, SIN_COS_6), (30.0, SIN_COS_30), (63.0, SIN_COS_63)] {
            let (es, ec) = angle.to_radians().sin_cos();
            assert!((s - es).abs() < 1e-15 && (c - ec).abs() < 1e-15, "{angle}");
        }
        // T as Sharma, Wu & Dalal (2005) write it, eq. (15).
        let cos_deg = |x: f64| x.to_radians().cos();
        for i in 0..=7200 {
            let h = i as f64 * 0.05;
            let t = 1.0 - 0.17 * cos_deg(h - 30.0)
                + 0.24 * cos_deg(2.0 * h)
                + 0.32 * cos_deg(3.0 * h + 6.0)
                - 0.20 * cos_deg(4.0 * h - 63.0);
            assert!((hue_weight(h) - t).abs() < 1e-14, "H = {h}");
        }
    }

    #[test]
    fn hue_angles_cover_the_circle() {
        assert_eq!(hue_degrees(0.0, 0.0), 0.0);
        assert_eq!(hue_degrees(1.0, 0.0), 0.0);
        assert!((hue_degrees(0.0, 1.0) - 90.0).abs() < 1e-12);
        assert!((hue_degrees(-1.0, 0.0) - 180.0).abs() < 1e-12);
        assert!((hue_degrees(0.0, -1.0) - 270.0).abs() < 1e-12);
        assert_eq!(mean_across_zero(10.0, 300.0), 335.0);
        assert_eq!(mean_across_zero(350.0, 100.0), 45.0);
    }
}
