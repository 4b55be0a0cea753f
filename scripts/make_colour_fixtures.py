#!/usr/bin/env python3
"""Generate tests/fixtures/colour_science.json: colour conversions and
CIEDE2000 differences computed by colour-science, for vqforge's colour tests.

Run once by a developer; the output is committed, so the test suite never
needs Python or the network:

    python3 -m venv /tmp/venv-colour
    /tmp/venv-colour/bin/pip install -r scripts/requirements-colour.txt
    /tmp/venv-colour/bin/python scripts/make_colour_fixtures.py

The script is deterministic (fixed numpy seeds, no clock, no network) and
prints the largest disagreement between colour-science and the CIEDE2000
table of Sharma, Wu & Dalal (2005) as a cross-check.

Calls, for each 8-bit sRGB triple c (s = c / 255):

  linear     colour.models.eotf_sRGB(s)
             IEC 61966-2-1 decoding. colour-science switches branch at
             eotf_inverse_sRGB(0.0031308) = 0.040449936 instead of the
             standard's 0.04045; no 8-bit value lies between the two.
  xyz        colour.sRGB_to_XYZ(s, illuminant=SRGB.whitepoint,
                                chromatic_adaptation_transform=None,
                                apply_cctf_decoding=True)
             with SRGB = colour.RGB_COLOURSPACES["sRGB"], whose
             matrix_RGB_to_XYZ is the standard's four-decimal matrix and
             whose whitepoint is D65 xy = (0.3127, 0.3290). The illuminant is
             the colourspace's own, so no chromatic adaptation happens.
  lab        colour.XYZ_to_Lab(xyz, illuminant=MATRIX_WHITE_XY): the white is
             XYZ of RGB (1, 1, 1), i.e. the matrix's row sums
             (0.9505, 1, 1.089), given to colour-science as its xy.
  lab_d65_xy colour.XYZ_to_Lab(xyz, illuminant=SRGB.whitepoint): the white
             from the chromaticity (0.3127, 0.3290), Y = 1.
  oklab      colour.XYZ_to_Oklab(xyz): Ottosson's XYZ -> LMS matrix, then
             the cube root and LMS' -> Lab; L in [0, 1].

CIEDE2000: colour.difference.delta_E_CIE2000(lab1, lab2) (kL = kC = kH = 1)
on 30 seeded random pairs and on the 34 pairs of Sharma et al. (2005),
Table 1.

JSON floats are plain positional decimals with the shortest digits that
round-trip the float64 value.
"""

import json
import math
import os
import sys

import numpy as np
import colour
from colour.difference import delta_E_CIE2000
from fixture_json import fmt_float

REPO = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
OUT = os.path.join(REPO, "tests", "fixtures", "colour_science.json")

VERSIONS = {
    "python": sys.version.split()[0],
    "numpy": np.__version__,
    "colour-science": colour.__version__,
}

SRGB = colour.RGB_COLOURSPACES["sRGB"]
MATRIX_WHITE_XYZ = SRGB.matrix_RGB_to_XYZ @ np.ones(3)
MATRIX_WHITE_XY = colour.XYZ_to_xy(MATRIX_WHITE_XYZ)

# Sharma, Wu & Dalal (2005), Color Res. Appl. 30(1), Table 1: L*a*b* pairs
# and ΔE00, as transcribed in colour-science 0.4.7
# (colour/difference/tests/test_delta_e.py,
# TestDelta_E_CIE2000.test_delta_E_CIE2000_Sharma2004). That test leaves
# pair 14 commented out (numpy's arctan2 puts its hues 180° apart on one
# side or the other depending on the platform); its values are in the same
# file as comments and are used here.
SHARMA_TABLE_1 = [
    ([50.0000, 2.6772, -79.7751], [50.0000, 0.0000, -82.7485], 2.0425),
    ([50.0000, 3.1571, -77.2803], [50.0000, 0.0000, -82.7485], 2.8615),
    ([50.0000, 2.8361, -74.0200], [50.0000, 0.0000, -82.7485], 3.4412),
    ([50.0000, -1.3802, -84.2814], [50.0000, 0.0000, -82.7485], 1.0000),
    ([50.0000, -1.1848, -84.8006], [50.0000, 0.0000, -82.7485], 1.0000),
    ([50.0000, -0.9009, -85.5211], [50.0000, 0.0000, -82.7485], 1.0000),
    ([50.0000, 0.0000, 0.0000], [50.0000, -1.0000, 2.0000], 2.3669),
    ([50.0000, -1.0000, 2.0000], [50.0000, 0.0000, 0.0000], 2.3669),
    ([50.0000, 2.4900, -0.0010], [50.0000, -2.4900, 0.0009], 7.1792),
    ([50.0000, 2.4900, -0.0010], [50.0000, -2.4900, 0.0010], 7.1792),
    ([50.0000, 2.4900, -0.0010], [50.0000, -2.4900, 0.0011], 7.2195),
    ([50.0000, 2.4900, -0.0010], [50.0000, -2.4900, 0.0012], 7.2195),
    ([50.0000, -0.0010, 2.4900], [50.0000, 0.0009, -2.4900], 4.8045),
    ([50.0000, -0.0010, 2.4900], [50.0000, 0.0010, -2.4900], 4.8045),
    ([50.0000, -0.0010, 2.4900], [50.0000, 0.0011, -2.4900], 4.7461),
    ([50.0000, 2.5000, 0.0000], [50.0000, 0.0000, -2.5000], 4.3065),
    ([50.0000, 2.5000, 0.0000], [73.0000, 25.0000, -18.0000], 27.1492),
    ([50.0000, 2.5000, 0.0000], [61.0000, -5.0000, 29.0000], 22.8977),
    ([50.0000, 2.5000, 0.0000], [56.0000, -27.0000, -3.0000], 31.9030),
    ([50.0000, 2.5000, 0.0000], [58.0000, 24.0000, 15.0000], 19.4535),
    ([50.0000, 2.5000, 0.0000], [50.0000, 3.1736, 0.5854], 1.0000),
    ([50.0000, 2.5000, 0.0000], [50.0000, 3.2972, 0.0000], 1.0000),
    ([50.0000, 2.5000, 0.0000], [50.0000, 1.8634, 0.5757], 1.0000),
    ([50.0000, 2.5000, 0.0000], [50.0000, 3.2592, 0.3350], 1.0000),
    ([60.2574, -34.0099, 36.2677], [60.4626, -34.1751, 39.4387], 1.2644),
    ([63.0109, -31.0961, -5.8663], [62.8187, -29.7946, -4.0864], 1.2630),
    ([61.2901, 3.7196, -5.3901], [61.4292, 2.2480, -4.9620], 1.8731),
    ([35.0831, -44.1164, 3.7933], [35.0232, -40.0716, 1.5901], 1.8645),
    ([22.7233, 20.0904, -46.6940], [23.0331, 14.9730, -42.5619], 2.0373),
    ([36.4612, 47.8580, 18.3852], [36.2715, 50.5065, 21.2231], 1.4146),
    ([90.8027, -2.0831, 1.4410], [91.1528, -1.6435, 0.0447], 1.4441),
    ([90.9257, -0.5406, -0.9208], [88.6381, -0.8985, -0.7239], 1.5381),
    ([6.7747, -0.2908, -2.4247], [5.8714, -0.0985, -2.2286], 0.6377),
    ([2.0776, 0.0795, -1.1350], [0.9033, -0.0636, -0.5514], 0.9082),
]




def to_json(v, indent=0):
    """Small JSON writer: dicts one key per line, numeric rows on one line."""
    pad = "  " * indent
    if isinstance(v, np.ndarray):
        v = v.tolist()
    if isinstance(v, dict):
        items = [f"{pad}  {json.dumps(str(k))}: {to_json(val, indent + 1)}" for k, val in v.items()]
        return "{\n" + ",\n".join(items) + "\n" + pad + "}"
    if isinstance(v, (list, tuple)):
        if all(not isinstance(e, (list, tuple, dict, np.ndarray)) for e in v):
            return "[" + ", ".join(to_json(e) for e in v) + "]"
        return "[\n" + ",\n".join(pad + "  " + to_json(e, indent + 1) for e in v) + "\n" + pad + "]"
    if isinstance(v, (bool, np.bool_)):
        return "true" if v else "false"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        return fmt_float(v)
    if isinstance(v, str):
        return json.dumps(v)
    raise TypeError(type(v))


def rgb8_samples():
    """40 triples: cube corners, greys (both sides of the sRGB linear
    segment's end at code 10.3), half-intensity primaries, one orange, and
    seeded random colours."""
    corners = [[r, g, b] for r in (0, 255) for g in (0, 255) for b in (0, 255)]
    greys = [[v, v, v] for v in (1, 10, 11, 17, 64, 119, 128, 192, 254)]
    others = [[128, 0, 0], [0, 128, 0], [0, 0, 128], [255, 128, 0]]
    out = corners + greys + others
    rng = np.random.default_rng(20240611)
    while len(out) < 40:
        c = [int(x) for x in rng.integers(0, 256, size=3)]
        if c not in out:
            out.append(c)
    return out


def conversions():
    rows = []
    for c in rgb8_samples():
        s = np.array(c, dtype=np.float64) / 255.0
        linear = colour.models.eotf_sRGB(s)
        xyz = colour.sRGB_to_XYZ(
            s,
            illuminant=SRGB.whitepoint,
            chromatic_adaptation_transform=None,
            apply_cctf_decoding=True,
        )
        # The matrix route must agree with the call above (no adaptation).
        assert np.allclose(xyz, SRGB.matrix_RGB_to_XYZ @ linear, rtol=0, atol=1e-15), c
        rows.append({
            "rgb8": c,
            "linear": linear,
            "xyz": xyz,
            "lab": colour.XYZ_to_Lab(xyz, illuminant=MATRIX_WHITE_XY),
            "lab_d65_xy": colour.XYZ_to_Lab(xyz, illuminant=SRGB.whitepoint),
            "oklab": colour.XYZ_to_Oklab(xyz),
        })
    return rows


def random_lab_pairs():
    """30 pairs, inputs rounded to 4 decimals: 10 anywhere, 10 close
    together, 10 low-chroma pairs with nearly opposite hues (the mean-hue
    cases of CIEDE2000)."""
    rng = np.random.default_rng(20050101)

    def anywhere():
        return [rng.uniform(0, 100), rng.uniform(-100, 100), rng.uniform(-100, 100)]

    pairs = []
    for _ in range(10):
        pairs.append((anywhere(), anywhere()))
    for _ in range(10):
        a = anywhere()
        pairs.append((a, [x + rng.normal(0, 2) for x in a]))
    for _ in range(10):
        l = rng.uniform(20, 80)
        c1, c2 = rng.uniform(0.5, 5, size=2)
        h1 = rng.uniform(0, 360)
        h2 = h1 + 180 + rng.uniform(-3, 3)
        pairs.append((
            [l, c1 * math.cos(math.radians(h1)), c1 * math.sin(math.radians(h1))],
            [l + rng.normal(0, 1), c2 * math.cos(math.radians(h2)), c2 * math.sin(math.radians(h2))],
        ))
    out = []
    for a, b in pairs:
        a = [round(float(x), 4) for x in a]
        b = [round(float(x), 4) for x in b]
        out.append({"lab1": a, "lab2": b, "delta_e": delta_E_CIE2000(np.array(a), np.array(b))})
    return out


def sharma_pairs():
    out = []
    worst = 0.0
    for a, b, table in SHARMA_TABLE_1:
        de = float(delta_E_CIE2000(np.array(a), np.array(b)))
        worst = max(worst, abs(de - table))
        if abs(de - table) > 1e-4:
            print(f"  note: colour-science gives {de:.6f} for {a} / {b}, table {table}")
        out.append({"lab1": a, "lab2": b, "delta_e_table": table, "delta_e": de})
    print(f"  Sharma Table 1: largest |colour-science - table| = {worst:.2e}")
    return out


def main():
    print("versions:", ", ".join(f"{k} {v}" for k, v in VERSIONS.items()))
    fixture = {
        "source": {
            "package": f"colour-science {colour.__version__}",
            "linear": "colour.models.eotf_sRGB(rgb8 / 255)",
            "xyz": "colour.sRGB_to_XYZ(rgb8 / 255, illuminant=RGB_COLOURSPACES['sRGB'].whitepoint, "
                   "chromatic_adaptation_transform=None, apply_cctf_decoding=True)",
            "lab": "colour.XYZ_to_Lab(xyz, illuminant=colour.XYZ_to_xy(matrix_RGB_to_XYZ @ [1, 1, 1]))",
            "lab_d65_xy": "colour.XYZ_to_Lab(xyz, illuminant=RGB_COLOURSPACES['sRGB'].whitepoint)",
            "oklab": "colour.XYZ_to_Oklab(xyz)",
            "delta_e": "colour.difference.delta_E_CIE2000(lab1, lab2)",
            "sharma": "pairs and delta_e_table: Sharma, Wu & Dalal (2005) Table 1, as in colour-science's "
                      "own tests; delta_e: colour-science's value for the pair",
        },
        "versions": VERSIONS,
        "srgb_matrix": SRGB.matrix_RGB_to_XYZ,
        "srgb_whitepoint_xy": SRGB.whitepoint,
        "matrix_white_xyz": MATRIX_WHITE_XYZ,
        "matrix_white_xy": MATRIX_WHITE_XY,
        "colours": conversions(),
        "ciede2000_random": random_lab_pairs(),
        "ciede2000_sharma": sharma_pairs(),
    }
    text = to_json(fixture) + "\n"
    json.loads(text)
    os.makedirs(os.path.dirname(OUT), exist_ok=True)
    with open(OUT, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(text)
    print(f"wrote {os.path.relpath(OUT, REPO)} ({os.path.getsize(OUT)} bytes)")


if __name__ == "__main__":
    main()
