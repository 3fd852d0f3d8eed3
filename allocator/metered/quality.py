"""Data-quality statistics and flags of the metered series.

Counts, minimum, maximum and the out-of-range counts are taken over the raw readings of
the year while streaming (see :mod:`.accumulate`).  The longest run of identical readings
(flat line) is measured on the aligned intervals: a run is a stretch of consecutive
intervals holding the same non-zero value, with at least two readings in it (a single
daily reading held over its day is not a run); its length is its intervals × the interval
length.  For readings at or coarser than the interval this is the run of raw readings; for
finer readings it is measured in whole intervals (the mean of identical readings).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..domain import FeederFlag, Study
from .model import (FLAT_LINE_MIN_H, NAT, NS_PER_H, RANGE_FACTOR, RANGE_MARGIN_MW, TOTAL_ID,
                    local_text, names)

CHUNK_ROWS = 256


def runs2d(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Runs of True along axis 1 of a 2-D bool array: (row, start, end exclusive)."""
    m = np.zeros((mask.shape[0], mask.shape[1] + 2), dtype=np.int8)
    m[:, 1:-1] = mask
    d = np.diff(m, axis=1)
    r0, c0 = np.nonzero(d == 1)
    _, c1 = np.nonzero(d == -1)
    return r0, c0, c1


def flat_runs(vals: np.ndarray, starts: np.ndarray | None = None) -> tuple[np.ndarray, ...]:
    """Longest flat run per row of ``vals [row, interval]``: (cells, first cell, value); ties
    go to the later run.  ``starts`` marks the intervals where a reading starts (held
    readings cover more); None: every interval with a value is a reading."""
    n, m = vals.shape
    cells = np.zeros(n, dtype=np.int64)
    first = np.zeros(n, dtype=np.int64)
    value = np.full(n, np.nan)
    for a in range(0, n, CHUNK_ROWS):
        v = vals[a:a + CHUNK_ROWS]
        p = np.flatnonzero(v[:, 1:] == v[:, :-1])  # NaN is never equal: gaps break runs
        r, j = np.divmod(p, m - 1)
        nz = v[r, j] != 0
        r, j = r[nz], j[nz]
        if not len(r):
            continue
        brk = np.ones(len(r), dtype=bool)
        brk[1:] = (r[1:] != r[:-1]) | (j[1:] != j[:-1] + 1)
        s = np.flatnonzero(brk)
        rr, c0, c1 = r[s], j[s], j[np.append(s[1:], len(j)) - 1] + 1  # cells c0..c1
        if starts is not None:
            acc = np.cumsum(starts[a:a + CHUNK_ROWS], axis=1, dtype=np.int32)
            n_read = acc[rr, c1] - np.where(c0 > 0, acc[rr, np.maximum(c0 - 1, 0)], 0)
            ok = n_read >= 2
            rr, c0, c1 = rr[ok], c0[ok], c1[ok]
            if not len(rr):
                continue
        ln = c1 - c0 + 1
        o = np.lexsort((c0, ln, rr))
        last = np.append(rr[o][1:] != rr[o][:-1], True)
        pick = o[last]
        cells[rr[pick] + a], first[rr[pick] + a] = ln[pick], c0[pick]
        value[rr[pick] + a] = v[rr[pick], c0[pick]]
    return cells, first, value


def reading_stats(ids: list[str], n_in, mn, mx, n_high, n_low, flat, ts0: int,
                  iv_ns: int) -> pd.DataFrame:
    """One row per series (feeders, then TOTAL) for the flags; ``flat`` = flat_runs(...)."""
    cells, first, value = flat
    h = cells * (iv_ns / NS_PER_H)
    has = n_in > 0
    out = pd.DataFrame({
        "n_readings": np.asarray(n_in, dtype=np.int64),
        "min_mw": np.where(has, mn, np.nan), "max_mw": np.where(has, mx, np.nan),
        "n_high": np.asarray(n_high, dtype=np.int64),
        "n_low": np.asarray(n_low, dtype=np.int64),
        "flat_h": h, "flat_mw": np.where(cells > 0, value, np.nan),
        "flat_start_ns": np.where(cells > 0, ts0 + first * iv_ns, NAT)})
    out.index = pd.Index(ids, name="series")
    return out


def stats_from_aligned(study: Study, vals: np.ndarray, has: np.ndarray, ts_ns: np.ndarray,
                       iv_ns: int) -> pd.DataFrame:
    """Reading statistics when only the aligned array is known (each interval a reading)."""
    ok = ~np.isnan(vals)
    hi = RANGE_FACTOR * study.peak_mw + RANGE_MARGIN_MW
    lo = -(RANGE_FACTOR * study.pv_mw + RANGE_MARGIN_MW)
    with np.errstate(invalid="ignore"):
        st = reading_stats(list(study.feeder_ids), ok.sum(axis=1),
                           np.nanmin(np.where(ok, vals, np.inf), axis=1),
                           np.nanmax(np.where(ok, vals, -np.inf), axis=1),
                           (vals > hi[:, None]).sum(axis=1), (vals < lo[:, None]).sum(axis=1),
                           flat_runs(vals), int(ts_ns[0]), iv_ns)
    return st


def quality_flags(study: Study, st: pd.DataFrame, has: np.ndarray, file: str
                  ) -> tuple[list[tuple[int, int, FeederFlag]], list[str]]:
    """(index, order, flag) per flagged feeder, and notes: all zero, flat-lined, out of
    range, no data."""
    fids, tz = study.feeder_ids, study.settings.timezone
    st = st.reindex(list(fids))
    n_read = st["n_readings"].fillna(0).to_numpy(dtype=np.int64)
    mn, mx = st["min_mw"].to_numpy(dtype=float), st["max_mw"].to_numpy(dtype=float)
    flags: list[tuple[int, int, FeederFlag]] = []
    all_zero = has & (n_read > 0) & (mn == 0) & (mx == 0)
    for i in np.flatnonzero(all_zero):
        flags.append((i, 2, FeederFlag(
            fids[i], "all_zero", f"every reading is exactly 0 MW ({n_read[i]} readings); "
            "check the meter and the feeder id")))
    fh = st["flat_h"].fillna(0).to_numpy(dtype=float)
    flat = has & ~all_zero & (fh >= FLAT_LINE_MIN_H)
    if flat.any():
        fs = local_text(st["flat_start_ns"].to_numpy(dtype=np.int64)[flat], tz)
        fm = st["flat_mw"].to_numpy(dtype=float)[flat]
        for j, i in enumerate(np.flatnonzero(flat)):
            flags.append((i, 1, FeederFlag(
                fids[i], "flat_lined",
                f"the same reading {fm[j]:g} MW for {fh[i]:g} h from {fs[j]} (local); "
                "check for a stuck or estimated meter value")))
    flags += _range_flags(study, st, has, n_read, mn, mx)
    notes = []
    none = np.flatnonzero(~has)
    for i in none:
        flags.append((i, 4, FeederFlag(
            fids[i], "no_metered_data", f"no readings in {Path(file).name} for "
            f"{study.settings.year}; the profile-built values are used")))
    if len(none):
        notes.append(f"metered data for {int(has.sum())} of {len(fids)} feeders; "
                     f"{len(none)} without readings ({names([fids[i] for i in none])}) keep "
                     "the profile-built values")
    return flags, notes


def _range_flags(study, st, has, n_read, mn, mx) -> list[tuple[int, int, FeederFlag]]:
    nh = st["n_high"].fillna(0).to_numpy(dtype=np.int64)
    nl = st["n_low"].fillna(0).to_numpy(dtype=np.int64)
    out = []
    for i in np.flatnonzero(has & ((nh > 0) | (nl > 0))):
        f = study.feeders[i]
        hi = RANGE_FACTOR * f.peak_mw + RANGE_MARGIN_MW
        lo = -(RANGE_FACTOR * f.pv_mw + RANGE_MARGIN_MW)
        out.append((i, 3, FeederFlag(
            f.feeder_id, "out_of_range",
            f"{nh[i] + nl[i]} of {n_read[i]} readings outside {lo:g} to {hi:g} MW "
            f"(1.5 × pv_mw {f.pv_mw:g} export, 1.5 × peak_mw {f.peak_mw:g} load, "
            f"+0.1 MW margin): {nh[i]} above, {nl[i]} below; readings range "
            f"{mn[i]:g} to {mx[i]:g} MW")))
    return out


__all__ = ["runs2d", "flat_runs", "reading_stats", "stats_from_aligned", "quality_flags",
           "TOTAL_ID"]
