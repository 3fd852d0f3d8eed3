"""Readings scattered straight into the preallocated ``[series, interval]`` arrays.

Each reading adds its MW to the interval its start falls in and counts one there (sum and
count per cell: finer readings become their mean at the end, equal ones are the reading
itself, coarser ones are spread over the intervals they cover at the end, when the
series' resolution is known).  Alongside, per series: the spacing histogram (resolution),
the number, minimum and maximum of the readings in the year and how many are out of range,
the last reading before the year (a coarse reading there may cover its first intervals),
and the readings off the interval grid (the first MAX_LISTED of each series kept, since
only the series whose resolution turns out at least the interval must be on the grid).
Memory: the two arrays (8 + 2 bytes per cell) and a few numbers per series.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError, Problem
from .model import MAX_LISTED, NAT
from .spacing import SpacingHistogram

BYTES_PER_CELL = 8 + 2  # float64 sum + uint16 count
_MAX_COUNT = np.iinfo(np.uint16).max


@dataclass
class OffGrid:
    n: np.ndarray  # per series
    kept: list = field(default_factory=list)  # (code, line, text) arrays


class Accumulator:
    def __init__(self, n_series: int, n_iv: int, ts0: int, iv_ns: int, hi_mw: np.ndarray,
                 lo_mw: np.ndarray, file: str):
        self.ns, self.n_iv, self.ts0, self.iv_ns, self.file = n_series, n_iv, ts0, iv_ns, file
        self.sum = np.zeros(n_series * n_iv)
        self.cnt = np.zeros(n_series * n_iv, dtype=np.uint16)
        self.hi, self.lo = hi_mw, lo_mw
        self.last = np.full(n_series, NAT, dtype=np.int64)
        self.hist = SpacingHistogram()
        z = np.zeros(n_series, dtype=np.int64)
        self.n_in, self.n_high, self.n_low = z.copy(), z.copy(), z.copy()
        self.min = np.full(n_series, np.inf)
        self.max = np.full(n_series, -np.inf)
        self.pre_t = np.full(n_series, NAT, dtype=np.int64)
        self.pre_mw = np.zeros(n_series)
        self.n_pre = self.n_post = 0
        self.off = OffGrid(z.copy())

    def add(self, code, t, mw, line, first, text) -> None:
        """Good readings grouped by series (time order within a series); ``first`` marks
        each group's first row; ``text(i)`` gives the timestamp texts of rows ``i``."""
        if not len(code):
            return
        self._spacing(code, t, first)
        i0 = (t - self.ts0) // self.iv_ns
        pre, post = i0 < 0, i0 >= self.n_iv
        self.n_pre += int(pre.sum())
        self.n_post += int(post.sum())
        if pre.any():
            self._before_year(code[pre], t[pre], mw[pre])
        inside = ~(pre | post)
        self._scatter(code[inside], i0[inside], mw[inside])
        self._stats(code[inside], mw[inside])
        self._off_grid(code, t, line, text)

    def _spacing(self, code, t, first) -> None:
        prev = np.empty_like(t)
        prev[1:] = t[:-1]
        prev[first] = self.last[code[first]]
        have = prev != NAT
        self.hist.add(code[have], t[have] - prev[have])
        last = np.append(first[1:], True)
        self.last[code[last]] = t[last]

    def _before_year(self, code, t, mw) -> None:
        last = np.append(code[1:] != code[:-1], True)
        c = code[last]
        newer = t[last] > self.pre_t[c]
        self.pre_t[c[newer]] = t[last][newer]
        self.pre_mw[c[newer]] = mw[last][newer]

    def _scatter(self, code, i0, mw) -> None:
        if not len(code):
            return
        idx = code.astype(np.int64) * self.n_iv + i0
        change = np.empty(len(idx), dtype=bool)
        change[0] = True
        change[1:] = idx[1:] != idx[:-1]
        if change.all():
            self.sum[idx] += mw
            self.cnt[idx] += 1
            return
        starts = np.flatnonzero(change)
        k = np.diff(np.append(starts, len(idx)))
        cells = idx[starts]
        if int(self.cnt[cells].max()) + int(k.max()) > _MAX_COUNT:
            raise InputError([Problem(self.file, f"more than {_MAX_COUNT} readings of one "
                                      "series fall in one interval; aggregate the readings "
                                      "before reading them")])
        self.sum[cells] += np.add.reduceat(mw, starts)
        self.cnt[cells] += k.astype(np.uint16)

    def _stats(self, code, mw) -> None:
        if not len(code):
            return
        change = np.append(True, code[1:] != code[:-1])
        starts = np.flatnonzero(change)
        c = code[starts]
        self.n_in[c] += np.diff(np.append(starts, len(code)))
        self.min[c] = np.minimum(self.min[c], np.minimum.reduceat(mw, starts))
        self.max[c] = np.maximum(self.max[c], np.maximum.reduceat(mw, starts))
        self.n_high += np.bincount(code[mw > self.hi[code]], minlength=self.ns)
        self.n_low += np.bincount(code[mw < self.lo[code]], minlength=self.ns)

    def _off_grid(self, code, t, line, text) -> None:
        off = np.flatnonzero((t - self.ts0) % self.iv_ns != 0)
        if not len(off):
            return
        c = code[off]
        self.off.n += np.bincount(c, minlength=self.ns)
        start = np.append(True, c[1:] != c[:-1])
        seg = np.cumsum(start) - 1
        rank = np.arange(len(c)) - np.flatnonzero(start)[seg]
        already = self.off.n[c] - np.bincount(c, minlength=self.ns)[c]
        keep = off[rank + already < MAX_LISTED]
        if len(keep):
            self.off.kept.append((code[keep], line[keep], np.array(text(keep), dtype=object)))
