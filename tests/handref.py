"""Reference formulas written out by hand for the tests (no call into the code under test)."""

from __future__ import annotations

import math


def hf7(x, p):
    """Sample quantile ``p`` (in %) by Hyndman & Fan (1996) definition 7 (linear interpolation
    between order statistics, h = (n − 1) p), by hand."""
    x = sorted(float(v) for v in x)
    h = (len(x) - 1) * p / 100.0
    lo = math.floor(h)
    hi = min(lo + 1, len(x) - 1)
    return x[lo] + (h - lo) * (x[hi] - x[lo])
