"""vqforge against scikit-learn and faiss on the same data, in one run.

Run through benches/compare/run.sh, which builds vqforge and this script's
Python environment. Every engine gets the same arrays and, where the target
says so, the same starting codewords; all use 2 threads (faiss through
OpenMP, scikit-learn through threadpoolctl, vqforge through rayon).

Data (nothing is downloaded; the photos ship inside scikit-image):
* photo: scikit-image's `retina.jpg` (1411 x 1411, 2.0 megapixels);
* mosaic: eight scikit-image photos resampled to 500 x 500 and tiled
  (2000 x 1000, 2.0 megapixels, over 600 000 distinct colours);
* records: 1 000 000 x 16 seeded synthetic values (64 Gaussian groups plus
  noise, numpy's default_rng(7)).

The table lists, per target of the performance issue, the measured figures,
their ratio and whether the target is met; a target not met names the
reasons this run measured (distinct colours searched, or what filling the
index array alone took), or points to the README where it measured none. Times are wall-clock seconds of one run on a shared
machine: repeat before trusting a difference of less than about 20 %.
"""

import argparse
import datetime
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

THREADS = 2
os.environ.setdefault("OMP_NUM_THREADS", str(THREADS))

import faiss  # noqa: E402
import numpy as np  # noqa: E402
import skimage  # noqa: E402
import sklearn  # noqa: E402
from PIL import Image  # noqa: E402
from sklearn.cluster import KMeans  # noqa: E402
from threadpoolctl import threadpool_limits  # noqa: E402

faiss.omp_set_num_threads(THREADS)
SKIMAGE_DATA = Path(skimage.__file__).parent / "data"
K = 256
ITERATIONS = 20
MOSAIC_TILES = [
    "hubble_deep_field.jpg",
    "motorcycle_left.png",
    "astronaut.png",
    "coffee.png",
    "rocket.jpg",
    "chelsea.png",
    "ihc.png",
    "color.png",
]


def photo(name):
    if name == "photo":
        return np.asarray(Image.open(SKIMAGE_DATA / "retina.jpg").convert("RGB"))
    canvas = np.zeros((1000, 2000, 3), np.uint8)
    for i, tile in enumerate(MOSAIC_TILES):
        im = Image.open(SKIMAGE_DATA / tile).convert("RGB").resize((500, 500), Image.LANCZOS)
        r, c = divmod(i, 4)
        canvas[r * 500:(r + 1) * 500, c * 500:(c + 1) * 500] = np.asarray(im)
    return canvas


def records():
    rng = np.random.default_rng(7)
    centres = rng.normal(0.0, 4.0, size=(64, 16))
    which = rng.integers(0, 64, size=1_000_000)
    x = centres[which] + rng.normal(0.0, 1.0, size=(1_000_000, 16))
    return x.astype(np.float32)


def run(cmd, env=None):
    """Runs a command; returns (stdout, wall seconds, peak RSS in MB).

    The peak comes from the child's own VmHWM in /proc, read every 5 ms
    (the high-water mark only grows, so the last reading is within 5 ms of
    the end); the rusage of a forked child would count this Python process
    too.
    """
    # Output goes to files: a pipe nobody reads while we poll could fill
    # and stall the child.
    with tempfile.TemporaryFile() as out_f, tempfile.TemporaryFile() as err_f:
        started = time.perf_counter()
        proc = subprocess.Popen(cmd, stdout=out_f, stderr=err_f, env=env)
        status = Path(f"/proc/{proc.pid}/status")
        peak_kb = 0
        while proc.poll() is None:
            try:
                for line in status.read_text().splitlines():
                    if line.startswith("VmHWM:"):
                        peak_kb = max(peak_kb, int(line.split()[1]))
            except (OSError, ValueError):
                pass
            time.sleep(0.005)
        seconds = time.perf_counter() - started
        out_f.seek(0)
        err_f.seek(0)
        out = out_f.read().decode()
        err = err_f.read().decode()
    if proc.returncode != 0:
        sys.exit(f"{' '.join(map(str, cmd))} failed:\n{err}")
    return out, seconds, peak_kb / 1024.0


def threads_env(n):
    env = dict(os.environ)
    env["RAYON_NUM_THREADS"] = str(n)
    return env


def mse_rgb8(original, mapped):
    d = original.astype(np.float64) - mapped.astype(np.float64)
    return float((d * d).mean())


def faiss_palette(pixels):
    """faiss k-means (20 iterations, every pixel) plus its search."""
    x = pixels.reshape(-1, 3).astype(np.float32)
    km = faiss.Kmeans(3, K, niter=ITERATIONS, seed=1, max_points_per_centroid=len(x))
    started = time.perf_counter()
    km.train(x)
    train_s = time.perf_counter() - started
    centres = np.clip(np.rint(km.centroids), 0, 255).astype(np.float32)
    index = faiss.IndexFlatL2(3)
    index.add(centres)
    started = time.perf_counter()
    _, labels = index.search(x, 1)
    search_s = time.perf_counter() - started
    mapped = centres[labels[:, 0]]
    return train_s, search_s, mse_rgb8(x, mapped), centres


# sRGB (IEC 61966-2-1) to CIELAB with the D65 white (CIE 15), the
# conversion the `lab` working space uses; common formulas, written here so
# both engines' errors are measured the same way.
SRGB_TO_XYZ = np.array([[0.4124564, 0.3575761, 0.1804375],
                        [0.2126729, 0.7151522, 0.0721750],
                        [0.0193339, 0.1191920, 0.9503041]])
WHITE_D65 = np.array([0.95047, 1.0, 1.08883])
EPS = (6.0 / 29.0) ** 3


def srgb8_to_lab(rgb):
    c = rgb.astype(np.float64) / 255.0
    lin = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    t = (lin @ SRGB_TO_XYZ.T) / WHITE_D65
    f = np.where(t > EPS, np.cbrt(t), t / (3 * (6.0 / 29.0) ** 2) + 4.0 / 29.0)
    return np.stack([116 * f[:, 1] - 16, 500 * (f[:, 0] - f[:, 1]),
                     200 * (f[:, 1] - f[:, 2])], axis=1)


def lab_to_srgb8(lab):
    fy = (lab[:, 0] + 16) / 116
    f = np.stack([fy + lab[:, 1] / 500, fy, fy - lab[:, 2] / 200], axis=1)
    t = np.where(f > 6.0 / 29.0, f ** 3, 3 * (6.0 / 29.0) ** 2 * (f - 4.0 / 29.0))
    lin = np.clip((t * WHITE_D65) @ np.linalg.inv(SRGB_TO_XYZ).T, 0, 1)
    c = np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * lin ** (1 / 2.4) - 0.055)
    return np.clip(np.rint(c * 255), 0, 255)


def faiss_lab_palette(lab):
    """faiss k-means on the pixels' CIELAB values `lab` (20 iterations),
    centres made showable (nearest 8-bit sRGB colour), pixels mapped to the
    nearest one in CIELAB; returns the mean squared CIELAB distance
    (ΔE*ab²) per pixel."""
    lab = lab.astype(np.float32)
    km = faiss.Kmeans(3, K, niter=ITERATIONS, seed=1, max_points_per_centroid=len(lab))
    km.train(lab)
    shown = srgb8_to_lab(lab_to_srgb8(km.centroids.astype(np.float64))).astype(np.float32)
    index = faiss.IndexFlatL2(3)
    index.add(shown)
    dist, _ = index.search(lab, 1)
    return float(dist.mean())


def lab_error(original_lab, mapped):
    """Mean squared CIELAB distance per pixel between CIELAB values and an
    8-bit image."""
    d = original_lab - srgb8_to_lab(mapped.reshape(-1, 3))
    return float((d * d).sum(axis=1).mean())


def palette_rows(tmp, vqforge, name):
    pixels = photo(name)
    src = tmp / f"{name}.png"
    Image.fromarray(pixels).save(src)
    mp = pixels.shape[0] * pixels.shape[1] / 1e6
    distinct = len(np.unique(pixels.reshape(-1, 3), axis=0))
    f_train, f_search, f_mse, centres = faiss_palette(pixels)
    rows = []
    results = {}
    for space in ["lab", "srgb"]:
        out = tmp / f"{name}-{space}.png"
        text, seconds, rss = run(
            [vqforge, "palette", src, "--size", str(K), "--space", space,
             "--out", out, "--json"],
            env=threads_env(THREADS),
        )
        report = json.loads(text)
        mapped = np.asarray(Image.open(out).convert("RGB"))
        recomputed = mse_rgb8(pixels, mapped)
        results[space] = (seconds, recomputed, rss, report)
        note = (f"coarse start on {report['coarse_start_cells']} cell means"
                if report.get("coarse_start_cells") else "all distinct colours")
        note = f"{report.get('effort', 'thorough')} effort, {note}"
        faiss_total = f_train + f_search
        ours_text = f"{seconds:.2f} s, mse {recomputed:.2f} ({note})"
        ref_text = f"faiss k-means {ITERATIONS} it. + search {faiss_total:.2f} s, mse {f_mse:.2f}"
        ratio_text = (f"time {seconds / faiss_total:.2f}x (target <= 0.10x), "
                      f"mse {recomputed / f_mse:.3f}x (target <= 1)")
        if space == "lab":
            # The lab palette minimises CIELAB error, not sRGB mse: also
            # compare it with faiss run in the same space.
            lab = srgb8_to_lab(pixels.reshape(-1, 3))
            ours_lab = lab_error(lab, mapped)
            faiss_lab = faiss_lab_palette(lab)
            ours_text += f"; CIELAB mse {ours_lab:.2f}"
            ref_text += f"; faiss in CIELAB: CIELAB mse {faiss_lab:.2f}"
            ratio_text += f"; CIELAB mse {ours_lab / faiss_lab:.3f}x"
        time_ok = seconds / faiss_total <= 0.10
        error_ok = (ours_lab / faiss_lab if space == "lab" else recomputed / f_mse) <= 1
        status = status_text(time_ok and error_ok, [
            None if time_ok else f"time: {distinct} distinct colours, each weighed in every "
            "Lloyd pass, searched and measured",
            None if error_ok else "error above faiss's",
        ])
        rows.append([
            f"1. palette, {name} ({mp:.1f} MP, {distinct} colours), k = {K}, --space {space}",
            ours_text, ref_text, ratio_text, status,
        ])
    decoded_mb = pixels.shape[0] * pixels.shape[1] * 4 / 1e6
    rss = results["lab"][2]
    rows.append([
        f"4. peak memory, palette on {name}",
        f"{rss:.0f} MB",
        f"3 x decoded image + 50 MB = {3 * decoded_mb + 50:.0f} MB",
        f"{rss / (3 * decoded_mb + 50):.2f}x (target <= 1)",
        status_text(rss <= 3 * decoded_mb + 50, []),
    ])
    return rows, pixels, centres


def encode_row(tmp, harness, mode, name, data, codebook, dim, target):
    data_path = tmp / f"{name}-data.f32"
    book_path = tmp / f"{name}-book.f32"
    out_path = tmp / f"{name}-indices.u32"
    data.astype("<f4").tofile(data_path)
    codebook.astype("<f4").tofile(book_path)
    text, _, _ = run([harness, mode, data_path, book_path, str(dim), out_path],
                     env=threads_env(THREADS))
    ours = json.loads(text)
    ours_idx = np.fromfile(out_path, dtype="<u4")
    index = faiss.IndexFlatL2(dim)
    index.add(codebook.astype(np.float32))
    started = time.perf_counter()
    dist, labels = index.search(data.astype(np.float32), 1)
    faiss_s = time.perf_counter() - started
    differ = ours_idx != labels[:, 0]
    # A differing index is only acceptable as an exact tie.
    d_ours = ((data[differ] - codebook[ours_idx[differ]]) ** 2).sum(1)
    d_faiss = ((data[differ] - codebook[labels[differ, 0]]) ** 2).sum(1)
    worse = int((d_ours > d_faiss * (1 + 1e-6) + 1e-9).sum())
    n = len(data)
    speed = faiss_s / ours["seconds"]
    reasons = []
    if speed < target and ours.get("fresh_output_seconds") is not None:
        if mode == "pixels":
            distinct = len(np.unique(data, axis=0))
            reasons.append(f"{distinct} distinct colours searched")
        reasons.append(f"filling the {4 * n / 1e6:.0f} MB index array anew alone took "
                       f"{ours['fresh_output_seconds'] * 1e3:.1f} ms of "
                       f"{ours['seconds'] * 1e3:.1f} ms")
    if speed < target and mode == "encode":
        reasons.append(wider_vectors_note())
    if worse:
        reasons.append(f"{worse} indices farther than faiss's")
    return [
        f"3. encode, {name}, {n} x {dim}, k = {len(codebook)}",
        f"{n / ours['seconds'] / 1e6:.2f} M vectors/s ({ours['method']})",
        f"faiss flat search {n / faiss_s / 1e6:.2f} M vectors/s",
        f"speed {speed:.2f}x (target >= {target}x); "
        f"{int(differ.sum())} indices differ, {worse} of them farther",
        status_text(speed >= target and worse == 0, reasons),
    ]


def wider_vectors_note():
    """Whether faiss may use 16-wide AVX-512 on this CPU, where vqforge's
    distance kernel is 8-wide AVX2 (empty when not)."""
    try:
        flags = Path("/proc/cpuinfo").read_text()
    except OSError:
        return ""
    options = faiss.get_compile_options().strip()
    if " avx512f" not in flags or "AVX512" not in options:
        return ""
    return (f"this CPU has AVX-512 and faiss is built to use it ({options}); "
            "vqforge's distance kernel is 8-wide AVX2")


def records_rows(tmp, harness):
    x = records()
    n, d = x.shape
    rng = np.random.default_rng(11)
    init = x[rng.choice(n, K, replace=False)].copy()
    data_path = tmp / "records.f32"
    init_path = tmp / "records-init.f32"
    x.astype("<f4").tofile(data_path)
    init.astype("<f4").tofile(init_path)
    ours = {}
    for t in [1, THREADS]:
        text, _, _ = run([harness, "lloyd", data_path, init_path, str(d), str(ITERATIONS)],
                         env=threads_env(t))
        ours[t] = json.loads(text)
    km = faiss.Kmeans(d, K, niter=ITERATIONS, seed=1, max_points_per_centroid=n)
    started = time.perf_counter()
    km.train(x, init_centroids=init)
    faiss_s = time.perf_counter() - started
    index = faiss.IndexFlatL2(d)
    index.add(km.centroids)
    fd, _ = index.search(x, 1)
    faiss_dist = float(fd.astype(np.float64).sum())
    with threadpool_limits(THREADS):
        started = time.perf_counter()
        sk = KMeans(K, init=init, n_init=1, max_iter=ITERATIONS, tol=0.0,
                    algorithm="lloyd").fit(x)
        sk_s = time.perf_counter() - started
    two = ours[THREADS]
    speed_up = ours[1]["seconds"] / two["seconds"]
    capacity = ""
    if speed_up < 1.7:
        capacity = machine_capacity(harness, data_path, init_path, d, ours[1]["seconds"])
    rows = [[
        f"2. Lloyd, records {n} x {d}, k = {K}, {ITERATIONS} iterations, same start",
        f"{two['seconds']:.2f} s, distortion {two['distortion']:.6g}",
        f"faiss {faiss_s:.2f} s, distortion {faiss_dist:.6g}; "
        f"scikit-learn {sk_s:.2f} s, inertia {sk.inertia_:.6g}",
        f"time {two['seconds'] / faiss_s:.2f}x faiss (target <= 0.70x), "
        f"distortion {two['distortion'] / faiss_dist:.5f}x (target within 0.1 %)",
        status_text(two["seconds"] / faiss_s <= 0.70
                    and abs(two["distortion"] / faiss_dist - 1) <= 0.001, []),
    ], [
        "5. threads, the Lloyd run above",
        f"1 thread {ours[1]['seconds']:.2f} s, {THREADS} threads {two['seconds']:.2f} s",
        "same distortion: " + ("yes" if ours[1]["distortion"] == two["distortion"] else "NO"),
        f"speed-up {speed_up:.2f}x (target >= 1.7x)",
        status_text(speed_up >= 1.7 and ours[1]["distortion"] == two["distortion"],
                    [capacity]),
    ]]
    return rows, x, km.centroids


def machine_capacity(harness, data_path, init_path, d, alone_s):
    """What two cores give here: the 1-thread Lloyd run twice at once, each
    timed against the run alone. Where each takes longer than alone (shared
    caches, memory, or a host that does not give each core its own time),
    no program gets 2x from two threads; the reason cell says how far off."""
    cmd = [harness, "lloyd", data_path, init_path, str(d), str(ITERATIONS)]
    with ThreadPoolExecutor(2) as pool:
        runs = list(pool.map(lambda _: run(cmd, env=threads_env(1)), range(2)))
    together = [json.loads(text)["seconds"] for text, _, _ in runs]
    slower = sum(together) / len(together) / alone_s
    return (f"two 1-thread runs at once each took {slower:.2f}x as long as one alone, "
            f"so this machine's {len(together)} cores gave {len(together) / slower:.2f}x "
            f"the work of one")


def status_text(met, reasons):
    """The status cell: met, or not met with the reasons this run measured
    (where it measured none, the README's "Where the targets stand" gives
    what is known)."""
    if met:
        return "met"
    reasons = [r for r in reasons if r]
    if not reasons:
        return "**not met**: see README, Where the targets stand"
    return "**not met**: " + "; ".join(reasons)


def table(rows):
    head = ("| target, case | vqforge | reference | ratio | status |\n"
            "|---|---|---|---|---|\n")
    return head + "\n".join("| " + " | ".join(r) + " |" for r in rows)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--vqforge", required=True)
    ap.add_argument("--harness", required=True)
    ap.add_argument("--readme", action="store_true",
                    help="replace the table between the compare markers in README.md")
    ap.add_argument("--only", choices=["photo", "mosaic", "records"], action="append",
                    help="run only these cases (default: all)")
    a = ap.parse_args()
    only = a.only or ["photo", "mosaic", "records"]
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        for name in ["photo", "mosaic"]:
            if name not in only:
                continue
            print(f"palette: {name} ...", file=sys.stderr)
            r, pixels, centres = palette_rows(tmp, a.vqforge, name)
            rows += r
            rows.append(encode_row(tmp, a.harness, "pixels", name,
                                   pixels.reshape(-1, 3).astype(np.float32), centres, 3, 10))
        if "records" in only:
            print("records ...", file=sys.stderr)
            r, x, centroids = records_rows(tmp, a.harness)
            rows += r
            rows.append(encode_row(tmp, a.harness, "encode", "records", x, centroids, 16, 1))
    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    stamp = (f"Measured {datetime.date.today().isoformat()} by `benches/compare/run.sh` on "
             f"{os.cpu_count()} cores ({cpu}), {THREADS} threads everywhere; faiss-cpu "
             f"{faiss.__version__}, scikit-learn {sklearn.__version__}. "
             f"Wall-clock seconds of one run on a shared machine.")
    text = stamp + "\n\n" + table(rows)
    print(text)
    if a.readme:
        readme = Path("README.md")
        body = readme.read_text()
        begin, end = "<!-- compare:begin -->", "<!-- compare:end -->"
        if begin not in body or end not in body:
            sys.exit("README.md has no compare markers")
        head, rest = body.split(begin, 1)
        _, tail = rest.split(end, 1)
        readme.write_text(head + begin + "\n" + text + "\n" + end + tail)
        print("README.md updated", file=sys.stderr)


if __name__ == "__main__":
    main()
