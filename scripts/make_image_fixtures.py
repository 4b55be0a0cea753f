#!/usr/bin/env python3
"""Generate the photo fixtures used by vqforge's palette tests.

Run once by a developer; the outputs are committed, so the test suite never
needs Python or the network:

    python3 -m venv /tmp/venv-img
    /tmp/venv-img/bin/pip install -r scripts/requirements-image-fixtures.txt
    /tmp/venv-img/bin/python scripts/make_image_fixtures.py

Outputs (relative to the repository root):

  tests/data/images/astronaut.png   byte copy of skimage/data/astronaut.png
  tests/data/images/chelsea.png     byte copy of skimage/data/chelsea.png
                                    (both shipped inside the scikit-image wheel;
                                    no download, no pooch)
  tests/fixtures/image_reference.json
      per image and palette size k in (16, 64, 256):
        * Pillow Image.quantize (MEDIANCUT, FASTOCTREE, MAXCOVERAGE, no dither)
        * best weighted k-means found by sklearn.cluster.KMeans (lloyd) on the
          image's distinct colours, with float and 8-bit-rounded centres
        * CIEDE2000 (colour-science) of the Pillow median-cut and the rounded
          k-means results against the original

The same figures can be computed for any other 8-bit RGB PNG, for example a
photo kept outside the repository as a held-back check:

    python scripts/make_image_fixtures.py --measure PHOTO.png --out PHOTO.json

Conventions:
  * Pixel values are the 8-bit sRGB code values stored in the PNG (0..255).
    Embedded ICC profiles are not applied.
  * MSE is per channel: mean over pixels and the 3 channels of
    (original - quantised)^2, in 8-bit units. SSE is the matching sum; for
    integer palettes it is an exact integer.
  * Deterministic: fixed random_state, and OpenMP is pinned to 2 threads
    before scikit-learn is imported, so the k-means reduction order does not
    depend on the machine's core count.
  * JSON floats are plain positional decimals (no exponent, no NaN/Infinity)
    with the shortest digits that round-trip the float64 value.
  * Each fixture names the package, function and version that produced it.
"""

import os

# Must be set before scikit-learn (and its OpenMP runtime) is loaded.
os.environ["OMP_NUM_THREADS"] = "2"

import argparse  # noqa: E402
import hashlib  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import shutil  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402
import PIL  # noqa: E402
import skimage  # noqa: E402
import sklearn  # noqa: E402
from PIL import Image  # noqa: E402
from sklearn.cluster import KMeans  # noqa: E402
from fixture_json import fmt_float

with warnings.catch_warnings():
    # colour-science warns at import time that the optional plotting
    # dependency is missing; plotting is not used here.
    warnings.simplefilter("ignore")
    import colour  # noqa: E402

REPO = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
IMG_DIR = os.path.join(REPO, "tests", "data", "images")
FIX_DIR = os.path.join(REPO, "tests", "fixtures")
SKIMAGE_DATA = os.path.join(os.path.dirname(os.path.abspath(skimage.__file__)), "data")

# Photos copied into the repository (file name inside skimage/data).
TEST_IMAGES = ["astronaut.png", "chelsea.png"]

K_VALUES = (16, 64, 256)
# k-means restarts per k: as many as a 2-core machine affords in a few minutes.
N_INIT = {16: 40, 64: 20, 256: 10}
MAX_ITER = 300

PILLOW_METHODS = [
    ("mediancut", Image.Quantize.MEDIANCUT),
    ("fastoctree", Image.Quantize.FASTOCTREE),
    ("maxcoverage", Image.Quantize.MAXCOVERAGE),
]

VERSIONS = {
    "python": sys.version.split()[0],
    "numpy": np.__version__,
    "pillow": PIL.__version__,
    "scikit-image": skimage.__version__,
    "scikit-learn": sklearn.__version__,
    "colour-science": colour.__version__,
}

WRITTEN = []


# --------------------------------------------------------------------------
# JSON helpers (same output conventions as scripts/make_fixtures.py)
# --------------------------------------------------------------------------



def _scalar(v):
    if isinstance(v, (bool, np.bool_)):
        return "true" if v else "false"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        return fmt_float(v)
    if v is None:
        return "null"
    if isinstance(v, str):
        return json.dumps(v)
    raise TypeError(type(v))


def to_json(v, indent=0):
    """Small JSON writer: dicts one key per line, scalar rows on one line."""
    pad = "  " * indent
    if isinstance(v, np.ndarray):
        v = v.tolist()
    if isinstance(v, dict):
        if not v:
            return "{}"
        items = [f'{pad}  {json.dumps(str(k))}: {to_json(val, indent + 1)}'
                 for k, val in v.items()]
        return "{\n" + ",\n".join(items) + "\n" + pad + "}"
    if isinstance(v, (list, tuple)):
        if all(not isinstance(e, (list, tuple, dict, np.ndarray)) for e in v):
            return "[" + ", ".join(_scalar(e) for e in v) + "]"
        items = [pad + "  " + to_json(e, indent + 1) for e in v]
        return "[\n" + ",\n".join(items) + "\n" + pad + "]"
    return _scalar(v)


def _assert_same(a, b, where):
    if isinstance(a, np.ndarray):
        a = a.tolist()
    if isinstance(a, dict):
        assert isinstance(b, dict) and list(a) == list(b), where
        for k in a:
            _assert_same(a[k], b[k], f"{where}.{k}")
    elif isinstance(a, (list, tuple)):
        assert len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b)):
            _assert_same(x, y, f"{where}[{i}]")
    elif isinstance(a, (float, np.floating)):
        assert float(a) == float(b), (where, a, b)
    elif isinstance(a, (int, np.integer)) and not isinstance(a, bool):
        assert int(a) == int(b), (where, a, b)
    else:
        assert a == b, (where, a, b)


def write_json(path, obj):
    text = to_json(obj) + "\n"
    back = json.loads(text)
    _assert_same(obj, back, path)
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(text)
    WRITTEN.append(path)


def sha256(path):
    with open(path, "rb") as fh:
        return hashlib.sha256(fh.read()).hexdigest()


# --------------------------------------------------------------------------
# image helpers
# --------------------------------------------------------------------------

def shipped_path(name):
    """Path of a photo shipped inside the scikit-image wheel (never fetched)."""
    path = os.path.join(SKIMAGE_DATA, name)
    if not os.path.isfile(path):
        raise SystemExit(f"{name} is not shipped in {SKIMAGE_DATA}; refusing to download it")
    return path


def shipped_name_of(path):
    """Name of the skimage/data PNG that is byte-identical to path, or None."""
    digest = sha256(path)
    for name in sorted(os.listdir(SKIMAGE_DATA)):
        p = os.path.join(SKIMAGE_DATA, name)
        if name.endswith(".png") and os.path.isfile(p) and sha256(p) == digest:
            return name
    return None


def load_rgb(path):
    with Image.open(path) as im:
        if im.mode != "RGB":
            raise SystemExit(f"{path}: expected an 8-bit RGB PNG, found mode {im.mode}")
        icc = im.info.get("icc_profile")
        rgb = np.asarray(im.convert("RGB"), dtype=np.uint8).copy()
    icc_desc = None
    if icc:
        import io
        from PIL import ImageCms
        icc_desc = ImageCms.getProfileDescription(
            ImageCms.ImageCmsProfile(io.BytesIO(icc))).strip()
    return rgb, icc_desc


class Colours:
    """Distinct colours of an image, their pixel counts and the pixel->colour map."""

    def __init__(self, rgb):
        flat = rgb.reshape(-1, 3)
        self.shape = rgb.shape
        self.n_pixels = flat.shape[0]
        u, inv, counts = np.unique(flat, axis=0, return_inverse=True, return_counts=True)
        self.unique = u.astype(np.float64)
        self.inverse = inv.reshape(-1)
        self.counts = counts.astype(np.int64)

    def nearest(self, palette, chunk=4096):
        """Index of the nearest palette entry for every distinct colour and the
        squared distance to it (exact float64 differences; the lowest index wins
        a tie)."""
        P = np.asarray(palette, dtype=np.float64)
        idx = np.empty(len(self.unique), dtype=np.int64)
        dist = np.empty(len(self.unique), dtype=np.float64)
        for s in range(0, len(self.unique), chunk):
            diff = self.unique[s:s + chunk, None, :] - P[None, :, :]
            d = np.einsum("nkd,nkd->nk", diff, diff)
            j = np.argmin(d, axis=1)
            idx[s:s + chunk] = j
            dist[s:s + chunk] = d[np.arange(len(j)), j]
        return idx, dist

    def weighted_sum(self, dist):
        return math.fsum((self.counts * dist).tolist())

    def mse(self, sse):
        return sse / (self.n_pixels * 3)


def sse_images(a, b):
    """Exact integer SSE between two uint8 images."""
    d = a.astype(np.int64) - b.astype(np.int64)
    return int(np.sum(d * d))


def lab_d65(rgb_u8):
    """CIE Lab (D65, 2 degree) of 8-bit sRGB code values, via colour-science."""
    rgb = rgb_u8.reshape(-1, 3).astype(np.float64) / 255.0
    xyz = colour.sRGB_to_XYZ(rgb)  # sRGB decoding applied, D65
    d65 = colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]["D65"]
    return colour.XYZ_to_Lab(xyz, illuminant=d65)


def ciede2000_stats(lab_orig, quant_u8):
    de = colour.delta_E(lab_orig, lab_d65(quant_u8), method="CIE 2000")
    return {
        "ciede2000_mean": float(np.mean(de)),
        "ciede2000_p95": float(np.percentile(de, 95)),
    }


def used_palette(p_img):
    """Palette entries that the pixels of a P-mode image actually use, in index order."""
    idx = np.asarray(p_img, dtype=np.int64)
    used = np.unique(idx)
    pal = np.asarray(p_img.getpalette()[:3 * (int(used.max()) + 1)], dtype=np.int64).reshape(-1, 3)
    return pal[used]


# --------------------------------------------------------------------------
# measurements
# --------------------------------------------------------------------------

def pillow_case(img, rgb, cols, k, lab_orig, with_de):
    out = {}
    for name, method in PILLOW_METHODS:
        p = img.convert("RGB").quantize(colors=k, method=method, dither=Image.Dither.NONE)
        q = np.asarray(p.convert("RGB"), dtype=np.uint8)
        sse = sse_images(rgb, q)
        entry = {
            "mse": cols.mse(sse),
            "sse": sse,
            "colours_used": int(len(np.unique(q.reshape(-1, 3), axis=0))),
        }
        if name == "mediancut":
            pal = used_palette(p)
            _, dist = cols.nearest(pal)
            sse_near = int(round(cols.weighted_sum(dist)))
            entry["mse_nearest_remap"] = cols.mse(sse_near)
            entry["sse_nearest_remap"] = sse_near
            if with_de:
                entry.update(ciede2000_stats(lab_orig, q))
            entry["palette"] = pal.tolist()
        out[name] = entry
    return out


def kmeans_case(rgb, cols, k, lab_orig, with_de):
    n_init = N_INIT[k]
    km = KMeans(n_clusters=k, n_init=n_init, algorithm="lloyd", random_state=0,
                max_iter=MAX_ITER, tol=0).fit(cols.unique, sample_weight=cols.counts)
    centres = km.cluster_centers_

    # Float centres: recompute the inertia independently of scikit-learn.
    _, dist = cols.nearest(centres)
    sse_float = cols.weighted_sum(dist)
    rel = abs(sse_float - km.inertia_) / km.inertia_
    if rel > 1e-9:
        raise AssertionError(f"k={k}: recomputed inertia {sse_float} vs sklearn {km.inertia_}")

    # Centres rounded to 8 bits (what a PNG palette holds), pixels reassigned.
    rounded = np.clip(np.rint(centres), 0, 255).astype(np.int64)
    idx, dist_r = cols.nearest(rounded)
    sse_rounded = int(round(cols.weighted_sum(dist_r)))
    q = rounded[idx][cols.inverse].reshape(cols.shape).astype(np.uint8)
    assert sse_images(rgb, q) == sse_rounded

    entry = {
        "n_init": n_init,
        "max_iter": MAX_ITER,
        "n_iter": int(km.n_iter_),
        "inertia": float(km.inertia_),
        "mse_float": cols.mse(sse_float),
        "mse_rounded": cols.mse(sse_rounded),
        "sse_rounded": sse_rounded,
        "distinct_rounded_centres": int(len(np.unique(rounded, axis=0))),
    }
    if with_de:
        entry.update({f"{key}_rounded": v for key, v in ciede2000_stats(lab_orig, q).items()})
    entry["palette_rounded"] = rounded.tolist()
    return entry


def measure(path, label):
    t0 = time.time()
    rgb, icc = load_rgb(path)
    img = Image.fromarray(rgb, "RGB")
    cols = Colours(rgb)
    lab_orig = lab_d65(rgb)
    h, w, _ = rgb.shape
    rec = {
        "width": int(w),
        "height": int(h),
        "pixels": cols.n_pixels,
        "distinct_colours": int(len(cols.unique)),
        "sha256": sha256(path),
        "bytes": os.path.getsize(path),
        "icc_profile": icc if icc else "none",
        "cases": [],
    }
    for k in K_VALUES:
        t1 = time.time()
        case = {
            "k": k,
            "pillow": pillow_case(img, rgb, cols, k, lab_orig, True),
            "sklearn_kmeans": kmeans_case(rgb, cols, k, lab_orig, True),
        }
        rec["cases"].append(case)
        pm = case["pillow"]["mediancut"]["mse"]
        km = case["sklearn_kmeans"]
        print(f"  {label} k={k:3d}: pillow median cut {pm:.3f}, k-means float "
              f"{km['mse_float']:.3f} rounded {km['mse_rounded']:.3f} "
              f"(n_init={km['n_init']}, {time.time() - t1:.0f} s)", flush=True)
    print(f"  {label}: {time.time() - t0:.0f} s", flush=True)
    return rec


SOURCE = (
    "Pillow {pillow} PIL.Image.Image.quantize(colors=k, method=MEDIANCUT|FASTOCTREE|MAXCOVERAGE, "
    "dither=Image.Dither.NONE) on img.convert('RGB'), then .convert('RGB'); "
    "scikit-learn {sklearn} sklearn.cluster.KMeans(n_clusters=k, n_init=N, algorithm='lloyd', "
    "random_state=0, max_iter={max_iter}, tol=0) with the default greedy k-means++ init, fitted on "
    "the image's distinct colours with sample_weight = pixel counts (best inertia_ of N restarts); "
    "colour-science {colour} colour.delta_E(method='CIE 2000') on "
    "colour.XYZ_to_Lab(colour.sRGB_to_XYZ(rgb/255)) with D65; numpy {numpy}; "
    "generated by scripts/make_image_fixtures.py"
)

DEFINITIONS = {
    "pixels": "8-bit sRGB code values as stored in the PNG; embedded ICC profiles are not applied",
    "mse": "sum over pixels and the 3 channels of (original - quantised)^2, divided by pixels*3",
    "sse": "the matching integer sum of squared differences",
    "pillow.mediancut.mse_nearest_remap": ("MSE when every pixel is mapped to the nearest entry of "
                                           "Pillow's median-cut palette instead of Pillow's own mapping"),
    "pillow.mediancut.palette": "palette entries used by the pixels, in Pillow's index order",
    "sklearn_kmeans.inertia": "scikit-learn's inertia_ of the best run (float centres)",
    "sklearn_kmeans.mse_float": "SSE to the nearest float centre, recomputed in float64, divided by pixels*3",
    "sklearn_kmeans.mse_rounded": ("centres rounded half-to-even to integers in 0..255, every pixel "
                                   "reassigned to the nearest rounded centre"),
    "ciede2000_mean/p95": ("per-pixel CIEDE2000 between original and quantised image; p95 is "
                           "numpy.percentile(..., 95) with linear interpolation"),
    "note": "k-means values are the best found, not proven optima",
}


def make_test_images():
    images = {}
    os.makedirs(IMG_DIR, exist_ok=True)
    for name in TEST_IMAGES:
        src = shipped_path(name)
        dst = os.path.join(IMG_DIR, name)
        shutil.copyfile(src, dst)
        assert sha256(src) == sha256(dst)
        WRITTEN.append(dst)
        stem = name[:-4]
        rec = {
            "file": os.path.relpath(dst, REPO).replace(os.sep, "/"),
            "source": (f"scikit-image {skimage.__version__} skimage/data/{name} shipped inside the "
                       f"wheel (skimage.data.{stem}()); byte copy, no download"),
        }
        rec.update(measure(dst, stem))
        images[stem] = rec
    write_json(os.path.join(FIX_DIR, "image_reference.json"), {
        "source": SOURCE.format(pillow=PIL.__version__, sklearn=sklearn.__version__,
                                colour=colour.__version__, numpy=np.__version__,
                                max_iter=MAX_ITER),
        "versions": VERSIONS,
        "k_values": list(K_VALUES),
        "definitions": DEFINITIONS,
        "images": images,
    })


def measure_other(path, out):
    shipped = shipped_name_of(path)
    if shipped:
        src = (f"byte copy of skimage/data/{shipped} shipped inside the scikit-image "
               f"{skimage.__version__} wheel (skimage.data.{shipped[:-4]}())")
    else:
        src = "not a scikit-image shipped file"
    rec = {"file": os.path.basename(path), "source": src}
    rec.update(measure(path, os.path.basename(path)))
    write_json(out, {
        "source": SOURCE.format(pillow=PIL.__version__, sklearn=sklearn.__version__,
                                colour=colour.__version__, numpy=np.__version__,
                                max_iter=MAX_ITER),
        "versions": VERSIONS,
        "k_values": list(K_VALUES),
        "definitions": DEFINITIONS,
        "images": {os.path.splitext(os.path.basename(path))[0]: rec},
    })


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--measure", metavar="PNG",
                    help="compute the same figures for this PNG instead of writing the fixtures")
    ap.add_argument("--out", metavar="JSON", help="where --measure writes its figures")
    args = ap.parse_args()
    if bool(args.measure) != bool(args.out):
        ap.error("--measure and --out go together")
    print("versions:", ", ".join(f"{k} {v}" for k, v in VERSIONS.items()), flush=True)
    t0 = time.time()
    if args.measure:
        measure_other(args.measure, args.out)
    else:
        make_test_images()
    print(f"total {time.time() - t0:.0f} s")
    print("wrote:")
    for p in WRITTEN:
        shown = os.path.relpath(p, REPO) if os.path.abspath(p).startswith(REPO) else p
        print(f"  {shown}  ({os.path.getsize(p)} bytes)")


if __name__ == "__main__":
    main()
