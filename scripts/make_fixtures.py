#!/usr/bin/env python3
"""Generate the reference fixtures used by vqforge's Rust tests.

Run once by a developer; the outputs are committed, so the test suite never
needs Python or the network:

    python3 -m venv /tmp/venv-fixtures
    /tmp/venv-fixtures/bin/pip install -r scripts/requirements-fixtures.txt
    /tmp/venv-fixtures/bin/python scripts/make_fixtures.py

Outputs (relative to the repository root):

  tests/data/wine.csv              scikit-learn sklearn.datasets.load_wine() features
  tests/data/seattle-weather.csv   byte copy of the CSV shipped inside vega_datasets
                                   (vega_datasets.local_data, no network)
  tests/fixtures/sklearn_lloyd.json  same-start Lloyd runs of sklearn.cluster.KMeans
  tests/fixtures/scipy_vq.json       scipy.cluster.vq.vq encodings
  tests/fixtures/best_kmeans.json    best inertia found by sklearn.cluster.KMeans
                                     with many k-means++ restarts

Conventions:
  * Every input value is rounded to float32 (np.float32, then back to float64)
    before any computation, so a Rust loader that reads f32 sees exactly the
    same inputs as the reference computation, which itself runs in float64.
  * Every random draw uses an explicitly seeded numpy Generator; the script is
    deterministic.
  * JSON floats are written as plain positional decimals (no exponent, no
    NaN/Infinity) using the shortest digits that round-trip the float64 value.
  * Each fixture carries a "source" entry naming the package, function and
    version that produced it.
"""

import argparse
import hashlib
import json
import os
import shutil
import sys
import time

import numpy as np
import pandas as pd
import scipy
import scipy.cluster.vq
import sklearn
import vega_datasets
from sklearn.cluster import KMeans
from sklearn.datasets import load_wine
from sklearn.preprocessing import StandardScaler
from vega_datasets import local_data
from fixture_json import fmt_float

REPO = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
DATA_DIR = os.path.join(REPO, "tests", "data")
FIX_DIR = os.path.join(REPO, "tests", "fixtures")

VERSIONS = {
    "python": sys.version.split()[0],
    "numpy": np.__version__,
    "scipy": scipy.__version__,
    "scikit-learn": sklearn.__version__,
    "pandas": pd.__version__,
    "vega_datasets": vega_datasets.__version__,
}

WRITTEN = []


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------

def f32(a):
    """Round to float32 and return float64 (the values a Rust f32 loader sees)."""
    return np.asarray(a, dtype=np.float64).astype(np.float32).astype(np.float64)




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
    """Small JSON writer: dicts one key per line, numeric rows on one line."""
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


def write_json(path, obj):
    text = to_json(obj) + "\n"
    # Round-trip check: the standard parser must read back exactly what we meant.
    back = json.loads(text)
    _assert_same(obj, back, path)
    os.makedirs(os.path.dirname(path), exist_ok=True)
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(text)
    WRITTEN.append(path)


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


def write_csv(path, header, rows):
    """Write a numeric table with shortest round-trip float formatting."""
    os.makedirs(os.path.dirname(path), exist_ok=True)
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(",".join(header) + "\n")
        for row in rows:
            fh.write(",".join(repr(float(v)) for v in row) + "\n")
    WRITTEN.append(path)


def check_f32_exact(X, what):
    """The table's shortest float64 digits must name the same value as its
    float32 rounding, so an f32 and an f64 loader agree on the CSV."""
    X = np.asarray(X, dtype=np.float64)
    for v in X.ravel():
        s64 = repr(float(v))
        s32 = np.format_float_positional(np.float32(v), unique=True, trim="0")
        if float(s64) != float(s32):
            raise AssertionError(f"{what}: {s64} is not float32-exact ({s32})")


def zscore_population(X):
    """(x - mean) / std with the population std (ddof=0): StandardScaler."""
    return StandardScaler().fit_transform(X)


def sq_dists(X, C):
    """Exact float64 squared distances (no |x|^2 - 2xc + |c|^2 shortcut)."""
    diff = X[:, None, :] - C[None, :, :]
    return np.einsum("nkd,nkd->nk", diff, diff)


def inertia_from_labels(X, C, labels):
    d = X - C[labels]
    return float(np.sum(d * d))


def nearest_margin(X, C):
    """Smallest relative gap between the best and second-best squared distance."""
    D = sq_dists(X, C)
    D.sort(axis=1)
    best, second = D[:, 0], D[:, 1]
    return float(np.min((second - best) / np.maximum(second, 1e-300)))


def vega_local_path(name):
    """Path of a CSV shipped inside vega_datasets (local_data.<name>.filepath)."""
    ds = getattr(local_data, name.replace("-", "_"))
    assert ds.is_local, name
    path = ds.filepath
    assert os.path.exists(path), path
    return path


def sha256(path):
    with open(path, "rb") as fh:
        return hashlib.sha256(fh.read()).hexdigest()


def clean_header(name):
    """Readable CSV header: spaces, '/' and brackets become '_'."""
    out = name.strip()
    for ch in " /()":
        out = out.replace(ch, "_")
    while "__" in out:
        out = out.replace("__", "_")
    return out.strip("_")


# --------------------------------------------------------------------------
# source tables
# --------------------------------------------------------------------------

def wine_table():
    ds = load_wine()
    header = [clean_header(n) for n in ds.feature_names]
    X = np.asarray(ds.data, dtype=np.float64)
    check_f32_exact(X, "wine")
    return header, X


def seattle_weather_table():
    path = vega_local_path("seattle-weather")
    df = pd.read_csv(path)
    return path, df


SRC_WINE = f"scikit-learn {sklearn.__version__} sklearn.datasets.load_wine() (bundled copy, 178 x 13 features)"
SRC_SEATTLE = (f"vega_datasets {vega_datasets.__version__} seattle-weather.csv shipped inside the package "
               "(vega_datasets.local_data.seattle_weather.filepath; no network)")


# --------------------------------------------------------------------------
# 1 + 2: data tables
# --------------------------------------------------------------------------

def make_tables():
    header, X = wine_table()
    assert X.shape == (178, 13) and len(header) == 13
    write_csv(os.path.join(DATA_DIR, "wine.csv"), header, X)

    src, df = seattle_weather_table()
    assert list(df.columns) == ["date", "precipitation", "temp_max", "temp_min", "wind", "weather"]
    dst = os.path.join(DATA_DIR, "seattle-weather.csv")
    os.makedirs(DATA_DIR, exist_ok=True)
    shutil.copyfile(src, dst)
    assert sha256(src) == sha256(dst)
    WRITTEN.append(dst)


# --------------------------------------------------------------------------
# 3: same-start Lloyd comparison
# --------------------------------------------------------------------------

def lloyd_case(name, source, X, k, init_idx, init_note):
    init = X[init_idx].copy()
    km = KMeans(n_clusters=k, init=init, n_init=1, algorithm="lloyd", tol=0.0, max_iter=300)
    km.fit(X)
    C = np.asarray(km.cluster_centers_, dtype=np.float64)
    labels = np.asarray(km.labels_, dtype=np.int64)
    mine = inertia_from_labels(X, C, labels)
    assert abs(mine - km.inertia_) <= 1e-9 * abs(km.inertia_), (name, mine, km.inertia_)
    # Labels must be the nearest centre of the final centres.
    assert np.array_equal(np.argmin(sq_dists(X, C), axis=1), labels), name
    margin = nearest_margin(X, C)
    print(f"  lloyd {name}: k={k} n_iter={km.n_iter_} inertia={km.inertia_:.10g} "
          f"min relative nearest-centre gap={margin:.3g}")
    return {
        "name": name,
        "source": source,
        "reference": (f"scikit-learn {sklearn.__version__} sklearn.cluster.KMeans(n_clusters={k}, "
                      "init=<init rows>, n_init=1, algorithm='lloyd', tol=0.0, max_iter=300).fit(data)"),
        "init_rule": init_note,
        "k": k,
        "dimension": int(X.shape[1]),
        "n": int(X.shape[0]),
        "init_indices": [int(i) for i in init_idx],
        "init": init,
        "final_centres": C,
        "inertia": float(km.inertia_),
        "n_iter": int(km.n_iter_),
        "labels": labels,
        "data": X,
    }


def synthetic_mixture():
    """Seeded synthetic data: 2000 points in 4-D from a 6-component Gaussian
    mixture. rng = default_rng(11); centres = rng.uniform(-5, 5, (6, 4));
    component = rng.integers(0, 6, 2000); points = centres[component] +
    rng.standard_normal((2000, 4)); rounded to float32."""
    rng = np.random.default_rng(11)
    centres = rng.uniform(-5.0, 5.0, size=(6, 4))
    comp = rng.integers(0, 6, size=2000)
    pts = centres[comp] + rng.standard_normal((2000, 4))
    return f32(pts)


def make_lloyd():
    cases = []
    # (a) wine, raw values rounded to float32, z-scored with population std
    #     (StandardScaler), z-scored matrix rounded to float32.
    _, Xw = wine_table()
    Z = f32(zscore_population(f32(Xw)))
    idx = np.random.Generator(np.random.PCG64(7)).choice(Z.shape[0], size=5, replace=False)
    cases.append(lloyd_case(
        "wine_zscore_k5",
        SRC_WINE + "; z-scored with sklearn.preprocessing.StandardScaler (population std, ddof=0), "
                   "then rounded to float32. 'data' is the z-scored matrix.",
        Z, 5, idx,
        "rows of data at np.random.Generator(np.random.PCG64(7)).choice(178, size=5, replace=False)"))

    # (b) seeded synthetic Gaussian mixture.
    Xs = synthetic_mixture()
    idx = np.random.Generator(np.random.PCG64(7)).choice(Xs.shape[0], size=8, replace=False)
    cases.append(lloyd_case(
        "synthetic_mixture_4d_k8",
        (f"seeded synthetic data (numpy {np.__version__}): rng=np.random.default_rng(11); "
         "centres=rng.uniform(-5,5,(6,4)); comp=rng.integers(0,6,2000); "
         "data=centres[comp]+rng.standard_normal((2000,4)); rounded to float32"),
        Xs, 8, idx,
        "rows of data at np.random.Generator(np.random.PCG64(7)).choice(2000, size=8, replace=False)"))

    write_json(os.path.join(FIX_DIR, "sklearn_lloyd.json"), {
        "source": (f"scikit-learn {sklearn.__version__} sklearn.cluster.KMeans (Lloyd, explicit init, "
                   "n_init=1, tol=0.0, max_iter=300); generated by scripts/make_fixtures.py"),
        "versions": VERSIONS,
        "notes": ("All inputs are float32-exact; sklearn ran in float64. 'inertia' is sklearn's "
                  "inertia_ (sum of squared distances to the assigned centre), re-checked in float64 "
                  "from labels and final_centres to 1e-9 relative. 'n_iter' is sklearn's n_iter_."),
        "cases": cases,
    })


# --------------------------------------------------------------------------
# 4: scipy vq
# --------------------------------------------------------------------------

def vq_case(name, source, obs, code_book):
    codes, dists = scipy.cluster.vq.vq(obs, code_book)
    codes = np.asarray(codes, dtype=np.int64)
    dists = np.asarray(dists, dtype=np.float64)
    D = sq_dists(obs, code_book)
    assert np.array_equal(np.argmin(D, axis=1), codes), name
    assert np.allclose(np.sqrt(D[np.arange(len(codes)), codes]), dists, rtol=1e-12, atol=0), name
    margin = nearest_margin(obs, code_book)
    print(f"  vq {name}: n={len(obs)} codewords={len(code_book)} "
          f"min relative nearest-codeword gap={margin:.3g}")
    return {
        "name": name,
        "source": source,
        "reference": (f"scipy {scipy.__version__} scipy.cluster.vq.vq(obs, code_book) -> (codes, dists); "
                      "dists are Euclidean (not squared) distances to the chosen codeword"),
        "dimension": int(obs.shape[1]),
        "obs": obs,
        "code_book": code_book,
        "codes": codes,
        "dists": dists,
    }


def make_vq():
    cases = []
    obs = f32(np.random.default_rng(3).uniform(0.0, 255.0, size=(1000, 3)))
    cb = f32(np.random.default_rng(4).uniform(0.0, 255.0, size=(37, 3)))
    cases.append(vq_case(
        "uniform_3d_1000x37",
        (f"seeded synthetic data (numpy {np.__version__}): obs=np.random.default_rng(3).uniform(0,255,(1000,3)), "
         "code_book=np.random.default_rng(4).uniform(0,255,(37,3)), both rounded to float32"),
        obs, cb))
    obs = f32(np.random.default_rng(5).standard_normal((500, 16)))
    cb = f32(np.random.default_rng(6).standard_normal((64, 16)))
    cases.append(vq_case(
        "normal_16d_500x64",
        (f"seeded synthetic data (numpy {np.__version__}): obs=np.random.default_rng(5).standard_normal((500,16)), "
         "code_book=np.random.default_rng(6).standard_normal((64,16)), both rounded to float32"),
        obs, cb))
    write_json(os.path.join(FIX_DIR, "scipy_vq.json"), {
        "source": (f"scipy {scipy.__version__} scipy.cluster.vq.vq on seeded synthetic float32-exact data; "
                   "generated by scripts/make_fixtures.py"),
        "versions": VERSIONS,
        "cases": cases,
    })


# --------------------------------------------------------------------------
# 5: best k-means with many restarts
# --------------------------------------------------------------------------

def best_case(table, columns, X, k, scaling, n_init, max_iter=500, extra=None):
    t0 = time.time()
    km = KMeans(n_clusters=k, n_init=n_init, algorithm="lloyd", random_state=0,
                max_iter=max_iter, tol=0.0)
    km.fit(X)
    C = np.asarray(km.cluster_centers_, dtype=np.float64)
    labels = np.asarray(km.labels_, dtype=np.int64)
    mine = inertia_from_labels(X, C, labels)
    assert abs(mine - km.inertia_) <= 1e-9 * max(abs(km.inertia_), 1e-300), (table, k, mine, km.inertia_)
    n, d = X.shape
    out = {
        "table": table,
        "columns": list(columns),
        "scaling": scaling,
        "k": k,
        "inertia": float(km.inertia_),
        "mse_per_component": float(km.inertia_) / (n * d),
        "n": int(n),
        "d": int(d),
        "n_init": n_init,
        "max_iter": max_iter,
        "n_iter_of_best": int(km.n_iter_),
    }
    if extra:
        out.update(extra)
    print(f"  best {table} k={k}: inertia={km.inertia_:.10g} n_init={n_init} ({time.time() - t0:.1f}s)")
    return out


BEST_REFERENCE = (f"scikit-learn {sklearn.__version__} sklearn.cluster.KMeans(n_clusters=k, n_init=N, "
                  "algorithm='lloyd', random_state=0, max_iter=500, tol=0) with the default greedy "
                  "k-means++ init; best inertia_ over the N restarts")


def make_best():
    cases = []
    header, Xw = wine_table()
    Zw = zscore_population(f32(Xw))
    for k in (2, 4, 8, 16):
        cases.append(best_case("wine.csv", header, Zw, k, "zscore_population", 100))

    _, df = seattle_weather_table()
    cols = ["precipitation", "temp_max", "temp_min", "wind"]
    Zs = zscore_population(f32(df[cols].to_numpy(dtype=np.float64)))
    for k in (4, 16, 64):
        cases.append(best_case("seattle-weather.csv", cols, Zs, k, "zscore_population", 100))

    write_json(os.path.join(FIX_DIR, "best_kmeans.json"), {
        "source": BEST_REFERENCE + "; generated by scripts/make_fixtures.py",
        "tables": {"wine.csv": SRC_WINE, "seattle-weather.csv": SRC_SEATTLE},
        "versions": VERSIONS,
        "notes": ("Raw values rounded to float32, then z-scored in float64 with the population std "
                  "(ddof=0, sklearn StandardScaler); the z-scored matrix is NOT rounded again. "
                  "inertia = sum of squared errors in z-scored space; mse_per_component = inertia/(n*d). "
                  "These are the best values found, not proven optima."),
        "cases": cases,
    })


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.parse_args()
    print("versions:", ", ".join(f"{k} {v}" for k, v in VERSIONS.items()))
    make_tables()
    make_lloyd()
    make_vq()
    make_best()
    print("wrote:")
    for p in WRITTEN:
        print(f"  {os.path.relpath(p, REPO) if p.startswith(REPO) else p}  ({os.path.getsize(p)} bytes)")


if __name__ == "__main__":
    main()
