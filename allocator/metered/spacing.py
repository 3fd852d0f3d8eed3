"""The resolution of each series: the median spacing of its readings, kept as a histogram.

Spacings between consecutive readings of a series, rounded to whole seconds, are counted in
a sparse histogram of (series, spacing) pairs.  Regular data has very few distinct
spacings per series (its step and a few gap lengths), so the histogram stays small and is
merged batch by batch after run-length encoding (a run of equal spacings is one entry).
The median is then exact, as a median over every spacing of the year (the mean of the
two middle values for an even count).  Should a file with irregular times push the
histogram past :data:`MAX_KEYS` entries, spacings are counted in whole minutes from then on.
"""

from __future__ import annotations

import numpy as np

from .model import NS_PER_S

MAX_KEYS = 2_000_000
_SHIFT = 40  # packed key: series << 40 | spacing (seconds or minutes)
_MASK = (1 << _SHIFT) - 1


class SpacingHistogram:
    def __init__(self):
        self.keys = np.zeros(0, dtype=np.int64)
        self.counts = np.zeros(0, dtype=np.int64)
        self.unit_s = 1

    def add_runs(self, code: np.ndarray, d_ns: np.ndarray, n: np.ndarray) -> None:
        """``n[k]`` spacings of ``d_ns[k]`` ns in series ``code[k]``."""
        if not len(code):
            return
        q = np.rint(d_ns / (NS_PER_S * self.unit_s))
        key = (code.astype(np.int64) << _SHIFT) | np.clip(q, 0, _MASK).astype(np.int64)
        self._merge(key, n)
        if len(self.keys) > MAX_KEYS and self.unit_s == 1:
            self.unit_s = 60
            c, d = self.keys >> _SHIFT, self.keys & _MASK
            k, cnt = (c << _SHIFT) | np.rint(d / 60).astype(np.int64), self.counts
            self.keys, self.counts = np.zeros(0, np.int64), np.zeros(0, np.int64)
            self._merge(k, cnt)

    def _merge(self, key: np.ndarray, n: np.ndarray) -> None:
        u, inv = np.unique(np.concatenate([self.keys, key]), return_inverse=True)
        self.counts = np.bincount(inv, weights=np.concatenate([self.counts, n]),
                                  minlength=len(u)).astype(np.int64)
        self.keys = u

    def median_ns(self, n_series: int, default_ns: int) -> np.ndarray:
        """Median spacing per series in ns (``default_ns`` for a series with < 2 readings)."""
        out = np.full(n_series, default_ns, dtype=np.int64)
        if not len(self.keys):
            return out
        c = self.keys >> _SHIFT
        d = (self.keys & _MASK).astype(float) * self.unit_s
        cum = np.cumsum(self.counts)
        s = np.arange(n_series)
        a = np.searchsorted(c, s, side="left")
        b = np.searchsorted(c, s, side="right")
        has = b > a
        base = np.where(a > 0, cum[np.maximum(a - 1, 0)], 0)
        n = np.where(has, cum[np.maximum(b - 1, 0)] - base, 0)
        lo = np.searchsorted(cum, base + (n - 1) // 2, side="right")
        hi = np.searchsorted(cum, base + n // 2, side="right")
        lo, hi = np.minimum(lo, len(d) - 1), np.minimum(hi, len(d) - 1)
        med = np.rint((d[lo] + d[hi]) / 2 * NS_PER_S).astype(np.int64)
        out[has] = med[has]
        return np.maximum(out, 1)
