"""Number formatting shared by the fixture scripts: every float is written
as the shortest decimal that reads back as the same double, so the Rust
tests see exactly the values the reference library produced."""

import math

import numpy as np


def fmt_float(x):
    x = float(x)
    if not math.isfinite(x):
        raise ValueError(f"non-finite value {x!r} cannot go into a fixture")
    if x == 0.0:
        return "0.0"
    s = np.format_float_positional(x, unique=True, trim="0")
    assert float(s) == x, (s, x)
    return s
