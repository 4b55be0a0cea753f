#!/usr/bin/env python3
"""Write tests/fixtures/kneed_knees.json: knees that the `kneed` package
(Kneedle, Satopaa et al. 2011) finds on a few fixed curves, so the Rust
Kneedle can be checked against it.

Run once by a developer; the output is committed, so the test suite never
needs Python or the network:

    python3 -m venv /tmp/venv-curve
    /tmp/venv-curve/bin/pip install -r scripts/requirements-curve-fixtures.txt
    /tmp/venv-curve/bin/python scripts/make_curve_fixtures.py

Every curve is given to kneed.KneeLocator(x, y, S=S, curve=..., direction=...)
with the default interp_method="interp1d" (no smoothing) and online=False
(the first knee found). The JSON keeps the inputs exactly (shortest
round-trip decimals) and kneed's `knee` and `norm_knee`, or null where kneed
finds none.

Curves:
  * closed forms: 1/x, exponential decay, a power law on powers of two
    (the default sizes of a distortion curve), and one curve of each of the
    other three shapes (concave increasing, convex increasing, concave
    decreasing);
  * a straight line (kneed finds no knee);
  * a noisy decreasing curve from a seeded numpy generator, with several
    local maxima of the difference curve, at S = 1 and S = 3;
  * distortion curves of scikit-learn's KMeans (inertia against k) on two
    data sets bundled with scikit-learn: iris (load_iris) and the z-scored
    wine table (load_wine).
"""

import json
import os
import sys

import kneed
import numpy as np
import sklearn
from kneed import KneeLocator
from sklearn.cluster import KMeans
from sklearn.datasets import load_iris, load_wine
from sklearn.preprocessing import StandardScaler
from fixture_json import fmt_float as fmt

REPO = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
OUT = os.path.join(REPO, "tests", "fixtures", "kneed_knees.json")




def row(values):
    return "[" + ", ".join(fmt(v) for v in values) + "]"


def opt(v):
    return "null" if v is None else fmt(v)


def kmeans_curve(X, ks):
    """Best inertia of KMeans over 10 k-means++ restarts for each k."""
    out = []
    for k in ks:
        km = KMeans(n_clusters=k, n_init=10, random_state=0, algorithm="lloyd")
        km.fit(X)
        out.append(float(km.inertia_))
    return out


def curves():
    cs = []
    x = np.arange(1, 21, dtype=float)
    cs.append(("inverse", "1/x for x = 1..20", x, 1.0 / x, 1.0, "convex", "decreasing"))
    x = np.arange(0, 25, dtype=float)
    cs.append(("exponential_decay", "exp(-x/4) for x = 0..24", x, np.exp(-x / 4.0),
               1.0, "convex", "decreasing"))
    x = 2.0 ** np.arange(1, 9)
    cs.append(("power_law_powers_of_two", "x^(-2/3) for x = 2, 4, ..., 256",
               x, x ** (-2.0 / 3.0), 1.0, "convex", "decreasing"))
    x = np.arange(1, 31, dtype=float)
    cs.append(("log_increasing", "ln(x) for x = 1..30", x, np.log(x), 1.0,
               "concave", "increasing"))
    x = np.arange(0, 20, dtype=float)
    cs.append(("square_increasing", "x^2 for x = 0..19", x, x ** 2, 1.0,
               "convex", "increasing"))
    x = np.arange(0, 20, dtype=float)
    cs.append(("square_decreasing", "400 - x^2 for x = 0..19", x, 400.0 - x ** 2, 1.0,
               "concave", "decreasing"))
    x = np.arange(0, 10, dtype=float)
    cs.append(("straight_line", "10 - x for x = 0..9 (no knee)", x, 10.0 - x, 1.0,
               "convex", "decreasing"))
    rng = np.random.default_rng(20110620)
    x = np.arange(1, 41, dtype=float)
    y = 10.0 / x + rng.uniform(0.0, 0.35, size=x.size)
    for s in (1.0, 3.0):
        cs.append((f"noisy_inverse_s{s:g}",
                   f"10/x + uniform(0, 0.35) noise (numpy default_rng(20110620)), S = {s:g}",
                   x, y, s, "convex", "decreasing"))
    ks = np.arange(1, 11)
    iris = load_iris().data.astype(np.float64)
    cs.append(("sklearn_kmeans_iris",
               "KMeans inertia on load_iris() for k = 1..10 (n_init=10, random_state=0)",
               ks.astype(float), kmeans_curve(iris, ks), 1.0, "convex", "decreasing"))
    wine = StandardScaler().fit_transform(load_wine().data.astype(np.float64))
    ks = np.arange(1, 13)
    cs.append(("sklearn_kmeans_wine_zscore",
               "KMeans inertia on z-scored load_wine() for k = 1..12 (n_init=10, random_state=0)",
               ks.astype(float), kmeans_curve(wine, ks), 1.0, "convex", "decreasing"))
    return cs


def main():
    # One thread for scikit-learn's k-means, so the reduction order (and the
    # last digits of the inertia) do not depend on the machine's core count.
    from threadpoolctl import threadpool_limits

    entries = []
    with threadpool_limits(limits=1):
        built = curves()
    for name, what, x, y, s, curve, direction in built:
        kl = KneeLocator(list(x), list(y), S=s, curve=curve, direction=direction)
        knee = None if kl.knee is None else float(kl.knee)
        norm = None if kl.norm_knee is None else float(kl.norm_knee)
        entries.append(
            "    {\n"
            f'      "name": {json.dumps(name)},\n'
            f'      "what": {json.dumps(what)},\n'
            f'      "curve": {json.dumps(curve)},\n'
            f'      "direction": {json.dumps(direction)},\n'
            f'      "S": {fmt(s)},\n'
            f'      "x": {row(x)},\n'
            f'      "y": {row(y)},\n'
            f'      "knee": {opt(knee)},\n'
            f'      "norm_knee": {opt(norm)}\n'
            "    }"
        )
    versions = {
        "python": sys.version.split()[0],
        "kneed": kneed.__version__,
        "numpy": np.__version__,
        "scikit-learn": sklearn.__version__,
    }
    text = (
        "{\n"
        '  "source": "kneed.KneeLocator(x, y, S=S, curve=curve, direction=direction), '
        'interp_method=\\"interp1d\\", online=False; written by scripts/make_curve_fixtures.py",\n'
        f'  "versions": {json.dumps(versions)},\n'
        '  "curves": [\n' + ",\n".join(entries) + "\n  ]\n}\n"
    )
    back = json.loads(text)
    for e, (name, _, x, y, *_rest) in zip(back["curves"], built):
        assert e["name"] == name
        assert [float(v) for v in x] == e["x"] and [float(v) for v in y] == e["y"], name
    os.makedirs(os.path.dirname(OUT), exist_ok=True)
    with open(OUT, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(text)
    for e in back["curves"]:
        print(f'{e["name"]:32} knee {e["knee"]}  norm_knee {e["norm_knee"]}')
    print(f"wrote {OUT} ({len(text)} bytes)")


if __name__ == "__main__":
    main()
