"""From the accumulated cells to the aligned ``[series, interval]`` values.

Per series, with its resolution (median spacing):

* finer than the study interval: every reading counts in the interval its start falls in,
  and the interval takes the mean of the readings present (sum / count);
* equal: each interval holds its reading;
* coarser: readings start on an interval boundary and are held over the intervals they
  cover, up to the next reading or one resolution step, whichever comes first.  Steps of
  whole days are counted in local days, so a daily reading covers 23 or 25 hours on the
  DST change days.  The last reading before the year may cover its first intervals.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .accumulate import Accumulator
from .model import NAT, NS_PER_DAY
from .quality import flat_runs

CHUNK_ROWS = 256


def cover_end(cs: np.ndarray, t: np.ndarray, res: np.ndarray, tz: str) -> np.ndarray:
    """End (UTC ns) of the time each reading covers: next reading of the series or one
    resolution step, whichever is first; whole-day steps count in local days.  Readings
    sorted by (series, time)."""
    r = res[cs]
    end = t + r
    days = (r % NS_PER_DAY == 0)
    if days.any():
        loc = (pd.DatetimeIndex(t[days].astype("datetime64[ns]")).tz_localize("UTC")
               .tz_convert(tz).tz_localize(None)) + pd.to_timedelta(r[days], unit="ns")
        back = loc.tz_localize(tz, ambiguous="NaT", nonexistent="shift_forward")
        end[days] = np.where(back.isna(), end[days], back.as_unit("ns").asi8)
    nxt = np.full(len(t), np.iinfo(np.int64).max, dtype=np.int64)
    same = cs[1:] == cs[:-1]
    nxt[:-1][same] = t[1:][same]
    return np.minimum(end, nxt)


def means_in_place(acc: Accumulator) -> np.ndarray:
    """The sum array turned into values (NaN where no reading), ``[series, interval]``."""
    vals = acc.sum.reshape(acc.ns, acc.n_iv)
    if acc.cnt is None:  # one reading per cell at most
        return vals
    cnt = acc.cnt.reshape(acc.ns, acc.n_iv)
    for a in range(0, acc.ns, CHUNK_ROWS):
        s, c = vals[a:a + CHUNK_ROWS], cnt[a:a + CHUNK_ROWS]
        np.divide(s, c, out=s, where=c > 1)
    return vals


def hold_coarse(acc: Accumulator, vals: np.ndarray, res: np.ndarray, tz: str,
                flat: tuple[np.ndarray, np.ndarray, np.ndarray]) -> int:
    """Spread readings of series coarser than the interval over the intervals they cover,
    and measure their flat runs (``flat`` arrays, per series, set for these rows).  Returns
    how many readings from before the year reach into it (they count as inside)."""
    rows = np.flatnonzero((res > acc.iv_ns) & ((acc.n_in > 0) | (acc.pre_t != NAT)))
    n_pre_in = 0
    for a in range(0, len(rows), CHUNK_ROWS):
        part = rows[a:a + CHUNK_ROWS]
        starts = ~np.isnan(vals[part])
        r, col = np.nonzero(starts)
        cs, i0, v = part[r], col.astype(np.int64), vals[part[r], col]
        pre = part[acc.pre_t[part] != NAT]
        if len(pre):
            ip = (acc.pre_t[pre] - acc.ts0) // acc.iv_ns
            cs, i0, v = (np.concatenate([pre, cs]), np.concatenate([ip, i0]),
                         np.concatenate([acc.pre_mw[pre], v]))
            o = np.lexsort((i0, cs))
            cs, i0, v = cs[o], i0[o], v[o]
        t = acc.ts0 + i0 * acc.iv_ns
        t[i0 < 0] = acc.pre_t[cs[i0 < 0]]
        end = cover_end(cs, t, res, tz)
        i1 = -((acc.ts0 - end) // acc.iv_ns)  # ceil
        n_pre_in += _count_pre_inside(acc, cs, i0, i1, v)
        _fill(vals, cs, np.clip(i0 + 1, 0, acc.n_iv), np.clip(i1, 0, acc.n_iv), v, i0 < 0)
        _pre_starts(starts, part, cs, i0, i1)
        for out, got in zip(flat, flat_runs(vals[part], starts)):
            out[part] = got
    return n_pre_in


def _pre_starts(starts: np.ndarray, part: np.ndarray, cs, i0, i1) -> None:
    """A reading from before the year that covers cell 0 starts a reading there."""
    inside = (i0 < 0) & (i1 > 0)
    if inside.any():
        starts[np.searchsorted(part, cs[inside]), 0] = True


def _count_pre_inside(acc: Accumulator, cs, i0, i1, v) -> int:
    """A reading from before the year that covers its first interval counts as a reading
    of the year (number, range, out-of-range counts)."""
    inside = (i0 < 0) & (i1 > 0)
    c, m = cs[inside], v[inside]
    acc.n_in[c] += 1
    acc.min[c] = np.minimum(acc.min[c], m)
    acc.max[c] = np.maximum(acc.max[c], m)
    acc.n_high[c] += m > acc.hi[c]
    acc.n_low[c] += m < acc.lo[c]
    return int(inside.sum())


def _fill(vals: np.ndarray, cs, a, b, v, pre) -> None:
    """vals[cs, a:b] = v for every reading (a from i0 + 1: the start cell holds it already;
    a reading before the year starts at cell 0)."""
    a = np.where(pre, 0, a)
    ln = np.maximum(b - a, 0)
    if not ln.sum():
        return
    start_of = np.repeat(np.cumsum(ln) - ln, ln)
    cols = np.repeat(a, ln) + (np.arange(int(ln.sum())) - start_of)
    vals.reshape(-1)[np.repeat(cs, ln) * vals.shape[1] + cols] = np.repeat(v, ln)
