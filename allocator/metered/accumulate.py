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

BYTES_PER_CELL = 8 + 2  # float64 sum + uint16 count (the count only for finer readings)
_MAX_COUNT = np.iinfo(np.uint16).max


@dataclass
class OffGrid:
    n: np.ndarray  # per series
    kept: list = field(default_factory=list)  # (code, line, text) arrays


class Accumulator:
    def __init__(self, n_series: int, n_iv: int, ts0: int, iv_ns: int, hi_mw: np.ndarray,
                 lo_mw: np.ndarray, file: str):
        self.ns, self.n_iv, self.ts0, self.iv_ns, self.file = n_series, n_iv, ts0, iv_ns, file
        # NaN = no reading yet.  Written once in order: the pages are mapped now,
        # sequentially, not one by one at scattered first writes (measured on the 2-core
        # machine: 50 ms against up to 0.5 s per batch).  The counts are made only when a
        # cell gets a second reading (readings finer than the interval).
        self.sum = np.empty(n_series * n_iv)
        self.sum.fill(np.nan)
        self.cnt: np.ndarray | None = None
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
        #: first and last reading start in the file, inside the grid or not (UTC ns)
        self.t_first, self.t_last = np.iinfo(np.int64).max, NAT

    def add(self, code, t, mw, pos, line, first, text) -> None:
        """Good readings grouped by series (time order within a series); ``first`` marks
        each group's first row; ``pos`` are their batch rows, ``line`` the batch's lines and
        ``text(rows)`` the timestamp texts of batch rows (for the off-grid listing)."""
        if not len(code):
            return
        self.t_first = min(self.t_first, int(t.min()))
        self.t_last = max(self.t_last, int(t.max()))
        self._spacing(code, t, first)
        i0 = (t - self.ts0) // self.iv_ns
        self._off_grid(code, t - self.ts0 - i0 * self.iv_ns, pos, line, text)
        if i0[0] >= 0 and i0[-1] < self.n_iv and i0.min() >= 0 and i0.max() < self.n_iv:
            self._scatter(code, i0, mw)
            self._stats(code, mw, first)
            return
        pre, post = i0 < 0, i0 >= self.n_iv
        self.n_pre += int(pre.sum())
        self.n_post += int(post.sum())
        if pre.any():
            self._before_year(code[pre], t[pre], mw[pre])
        inside = ~(pre | post)
        c = code[inside]
        self._scatter(c, i0[inside], mw[inside])
        self._stats(c, mw[inside], np.append(True, c[1:] != c[:-1]) if len(c) else c)

    def _spacing(self, code, t, first) -> None:
        """Run-length encoded spacings into the histogram (a run = equal spacings)."""
        n = len(t)
        prev = np.empty_like(t)
        prev[1:] = t[:-1]
        fpos = np.flatnonzero(first)
        prev[fpos] = self.last[code[fpos]]
        d = t - prev
        start = np.empty(n, dtype=bool)
        start[0] = True
        np.not_equal(d[1:], d[:-1], out=start[1:])
        start |= first
        lone = fpos[prev[fpos] == NAT]  # a series' first reading has no spacing
        start[lone[lone + 1 < n] + 1] = True
        starts = np.flatnonzero(start)
        lens = np.diff(np.append(starts, n))
        keep = prev[starts] != NAT
        self.hist.add_runs(code[starts[keep]], d[starts[keep]], lens[keep])
        last = np.append(fpos[1:] - 1, n - 1)
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
        np.not_equal(idx[1:], idx[:-1], out=change[1:])
        single = change.all()
        if single and self.cnt is None:
            old = self.sum[idx]
            if np.isnan(old).all():  # each cell's first reading: the usual case
                self.sum[idx] = mw
                return
        if self.cnt is None:
            self._start_counts()
        starts = np.flatnonzero(change) if not single else np.arange(len(idx))
        k = np.diff(np.append(starts, len(idx)))
        cells = idx[starts]
        if int(self.cnt[cells].max()) + int(k.max()) > _MAX_COUNT:
            raise InputError([Problem(self.file, f"more than {_MAX_COUNT} readings of one "
                                      "series fall in one interval; aggregate the readings "
                                      "before reading them")])
        add = mw if single else np.add.reduceat(mw, starts)
        old = self.sum[cells]
        self.sum[cells] = np.where(np.isnan(old), add, old + add)
        self.cnt[cells] += k.astype(np.uint16)

    def _start_counts(self) -> None:
        """Readings per cell from here on (1 where a reading is already held)."""
        self.cnt = np.empty(len(self.sum), dtype=np.uint16)
        step = 1 << 24
        for a in range(0, len(self.sum), step):
            np.logical_not(np.isnan(self.sum[a:a + step]), out=self.cnt[a:a + step],
                           casting="unsafe")

    def _stats(self, code, mw, first) -> None:
        """Count, min, max and out-of-range counts per series (rows grouped by series)."""
        if not len(code):
            return
        starts = np.flatnonzero(first)
        c = code[starts]
        lens = np.diff(np.append(starts, len(code)))
        self.n_in[c] += lens
        lo_seg, hi_seg = np.minimum.reduceat(mw, starts), np.maximum.reduceat(mw, starts)
        self.min[c] = np.minimum(self.min[c], lo_seg)
        self.max[c] = np.maximum(self.max[c], hi_seg)
        for seg_bad, lim, out, above in ((hi_seg > self.hi[c], self.hi, self.n_high, True),
                                        (lo_seg < self.lo[c], self.lo, self.n_low, False)):
            if seg_bad.any():
                rows = np.repeat(seg_bad, lens)
                cr, mr = code[rows], mw[rows]
                hit = mr > lim[cr] if above else mr < lim[cr]
                out += np.bincount(cr[hit], minlength=self.ns)

    def _off_grid(self, code, rem, pos, line, text) -> None:
        """Readings whose start is not on the interval grid (``rem`` ns past a boundary)."""
        off = np.flatnonzero(rem)
        if not len(off):
            return
        c = code[off]
        this = np.bincount(c, minlength=self.ns)
        already = self.off.n[c]
        self.off.n += this
        start = np.append(True, c[1:] != c[:-1])
        seg = np.cumsum(start) - 1
        rank = np.arange(len(c)) - np.flatnonzero(start)[seg]
        keep = off[rank + already < MAX_LISTED]
        if len(keep):
            rows = pos[keep]
            self.off.kept.append((code[keep], line[rows], np.array(text(rows), dtype=object)))
