"""Metered values into the study year: gaps filled per ``gap_fill``, flags and notes.

``merge_metered`` fills the gaps of the metered array (in place when the array belongs to
the reader, see :class:`~.model.MeteredData`) and asks for profile-built values only for
the feeders that need them (gaps with ``gap_fill = profile``, or no readings at all), a few
rows at a time, so a metered year never holds a second full ``[feeder, interval]`` array.
"""

from __future__ import annotations

from typing import Callable

import numpy as np
import pandas as pd

from ..domain import FeederFlag, Study
from ..errors import InputError, Problem
from .model import (MAX_LISTED, MAX_WINDOWS_LISTED, NS_PER_MIN, TOTAL_ID, MeteredData,
                    local_text, ns_of)
from .quality import quality_flags, runs2d, stats_from_aligned

#: feeder rows filled per step (bounds the temporaries of profile rows and interpolation)
FILL_ROWS = 64
ProfileRows = Callable[[np.ndarray], np.ndarray]


def interpolate_rows(v: np.ndarray) -> np.ndarray:
    """Fill NaN along axis 1 linearly between the neighbouring values; edges held.
    Rows with no value at all stay NaN."""
    v = np.asarray(v, dtype=float)
    n = v.shape[1]
    idx = np.arange(n)
    ok = ~np.isnan(v)
    prev = np.maximum.accumulate(np.where(ok, idx, -1), axis=1)
    nxt = np.minimum.accumulate(np.where(ok, idx, n)[:, ::-1], axis=1)[:, ::-1]
    pv = np.take_along_axis(v, np.clip(prev, 0, n - 1), axis=1)
    nv = np.take_along_axis(v, np.clip(nxt, 0, n - 1), axis=1)
    span = np.where(nxt > prev, nxt - prev, 1)
    out = pv + (nv - pv) * ((idx - prev) / span)
    out = np.where(prev < 0, nv, out)
    out = np.where(nxt >= n, pv, out)
    return np.where(ok, v, out)


def gap_runs(vals: np.ndarray, has: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Runs of intervals without a value of the rows that have data: (row, first, end)."""
    parts = []
    m = vals.shape[1]
    for a in range(0, vals.shape[0], 256):
        gap = np.isnan(vals[a:a + 256])
        gap &= has[a:a + 256, None]
        r, j = np.divmod(np.flatnonzero(gap), m)
        if not len(r):
            continue
        brk = np.ones(len(r), dtype=bool)
        brk[1:] = (r[1:] != r[:-1]) | (j[1:] != j[:-1] + 1)
        s = np.flatnonzero(brk)
        parts.append((r[s] + a, j[s], j[np.append(s[1:], len(j)) - 1] + 1))
    if not parts:
        return (np.zeros(0, np.int64),) * 3
    return tuple(np.concatenate([p[k] for p in parts]).astype(np.int64) for k in range(3))


def set_runs(vals: np.ndarray, runs, value: float) -> None:
    """vals[row, first:end] = value for every run."""
    r, c0, c1 = runs
    ln = c1 - c0
    if not ln.sum():
        return
    start_of = np.repeat(np.cumsum(ln) - ln, ln)
    cols = np.repeat(c0, ln) + (np.arange(int(ln.sum())) - start_of)
    vals.reshape(-1)[np.repeat(r, ln) * vals.shape[1] + cols] = value


def _profile_source(profile_net_mw, n_f: int, n_iv: int) -> ProfileRows:
    if callable(profile_net_mw):
        return profile_net_mw
    prof = np.asarray(profile_net_mw, dtype=float)
    if prof.shape != (n_f, n_iv):
        raise ValueError(f"profile_net_mw has shape {prof.shape}, expected {(n_f, n_iv)}")
    return lambda rows: prof[rows]


def _working_values(study: Study, m: MeteredData, n_iv: int) -> tuple[np.ndarray, np.ndarray]:
    """The array to fill (the reader's own one in place, else a float64 copy in study order,
    with the gaps of an array filled before set back to NaN) and has_data."""
    if tuple(m.feeder_ids) == tuple(study.feeder_ids):
        arr, has = m.values_mw, np.asarray(m.has_data, dtype=bool)
        if m.owns_values and arr.flags.writeable and arr.dtype == np.float64:
            vals = arr
        else:
            vals = np.array(arr, dtype=np.float64, copy=True)
            if m.gap_runs is not None:
                vals[~has] = np.nan
                set_runs(vals, m.gap_runs, np.nan)
    else:
        pos = pd.Index(m.feeder_ids).get_indexer(list(study.feeder_ids))
        vals = np.full((len(pos), n_iv), np.nan)
        has = np.zeros(len(pos), dtype=bool)
        found = pos >= 0
        vals[found] = np.asarray(m.values_mw, dtype=float)[pos[found]]
        has[found] = np.asarray(m.has_data, dtype=bool)[pos[found]]
    if vals.shape[1] != n_iv:
        raise ValueError(f"metered data has {vals.shape[1]} intervals, the study {n_iv}")
    return vals, has


def merge_metered(study: Study, metered: MeteredData, timestamps_utc: pd.DatetimeIndex,
                  profile_net_mw: np.ndarray | ProfileRows
                  ) -> tuple[np.ndarray, np.ndarray | None, list[FeederFlag], list[str]]:
    """Metered values where present; gaps per ``gap_fill``; flags and notes.

    ``profile_net_mw``: the profile-built ``[feeder, interval]`` net load, or a function
    giving it for some feeder rows (``rows -> [len(rows), interval]``), called only for the
    rows that need it.  Returns ``(net_mw, total_mw, flags, notes)``; ``net_mw`` is the
    reader's own array filled in place (see :class:`MeteredData`) or a new float64 array.
    """
    s = study.settings
    n_iv = len(timestamps_utc)
    iv_ns = s.interval_minutes * NS_PER_MIN
    ts_ns = ns_of(timestamps_utc)
    rows_of = _profile_source(profile_net_mw, len(study.feeder_ids), n_iv)
    vals, has = _working_values(study, metered, n_iv)
    runs = metered.gap_runs if metered.gap_runs is not None else gap_runs(vals, has)
    span = metered.span or (0, n_iv)
    runs = clip_runs(runs, span)
    _fill_outside(vals, span, rows_of)
    st = metered.reading_stats
    if st is None:
        st = stats_from_aligned(study, vals, has, ts_ns, iv_ns)
    total, t_r = _total(metered)
    t_r = clip_runs(t_r, span)
    t_err = t_r if s.demand_basis == "metered_total" else (np.zeros(0, np.int64),) * 3
    if s.gap_fill == "error" and (len(runs[0]) or len(t_err[0])):
        _raise_gaps(study, metered.file, runs, t_err, ts_ns, iv_ns)
    gap_n = np.bincount(runs[0], weights=runs[2] - runs[1],
                        minlength=len(has)).astype(np.int64)
    how = _fill(vals, has, gap_n, rows_of, s.gap_fill)
    notes: list[str] = list(metered.notes)
    flags = _gap_flags(study, runs, gap_n, how, ts_ns, notes)
    total = _total_note(total, t_r, s.interval_minutes / 60.0, notes)
    q_flags, q_notes = quality_flags(study, st, has, metered.file)
    flags += q_flags
    notes += q_notes
    flags.sort(key=lambda x: (x[0], x[1]))
    return vals, total, [f for _, _, f in flags], notes


def clip_runs(runs, span: tuple[int, int]):
    """Runs ``(row, first, end)`` cut to the intervals ``span = (first, end)``."""
    r, c0, c1 = runs
    a, b = span
    c0, c1 = np.maximum(c0, a), np.minimum(c1, b)
    keep = c1 > c0
    return r[keep], c0[keep], c1[keep]


def _fill_outside(vals, span: tuple[int, int], rows_of: ProfileRows) -> None:
    """A partial year (:mod:`.years`): the intervals outside its data span take the
    profile-built values (not gaps: they are not judged), FILL_ROWS rows at a time."""
    a, b = span
    if a == 0 and b == vals.shape[1]:
        return
    for r in range(0, vals.shape[0], FILL_ROWS):
        rows = np.arange(r, min(r + FILL_ROWS, vals.shape[0]))
        prof = rows_of(rows)
        vals[rows, :a] = prof[:, :a]
        vals[rows, b:] = prof[:, b:]


def _fill(vals, has, gap_n, rows_of: ProfileRows, gap_fill: str) -> str:
    """Fill gaps (profile or interpolation) and feeders without data (profile), in place."""
    gapped = np.flatnonzero(gap_n > 0)
    interp = gap_fill == "interpolate"
    if interp:
        for a in range(0, len(gapped), FILL_ROWS):
            rows = gapped[a:a + FILL_ROWS]
            vals[rows] = interpolate_rows(vals[rows])
    need = np.union1d(np.flatnonzero(~has), np.array([], np.int64) if interp else gapped)
    for a in range(0, len(need), FILL_ROWS):
        rows = need[a:a + FILL_ROWS].astype(np.intp)
        sub = vals[rows]
        np.copyto(sub, rows_of(rows), where=np.isnan(sub))
        vals[rows] = sub
    return ("by linear interpolation between the neighbouring readings" if interp
            else "from the profile-built values")


def _gap_flags(study, runs, gap_n, how, ts_ns, notes) -> list:
    r0, c0, c1 = runs
    fids, s = study.feeder_ids, study.settings
    n_iv, iv_h = len(ts_ns), s.interval_minutes / 60.0
    longest = np.zeros(len(fids), dtype=np.int64)
    longest_at = np.zeros(len(fids), dtype=np.int64)
    if len(r0):
        ln = c1 - c0
        o = np.lexsort((-ln, r0))  # per row, longest first
        first = np.append(True, r0[o][1:] != r0[o][:-1])
        longest[r0[o][first]] = ln[o][first]
        longest_at[r0[o][first]] = c0[o][first]
    gapped = np.flatnonzero(gap_n > 0)
    flags = []
    if len(gapped):
        at = local_text(ts_ns[longest_at[gapped]], s.timezone)
        for j, i in enumerate(gapped):
            flags.append((i, 0, FeederFlag(
                fids[i], "gaps_filled",
                f"{gap_n[i]} of {n_iv} intervals ({gap_n[i] * iv_h:g} h) had no reading and "
                f"were filled {how}; longest gap {longest[i] * iv_h:g} h from {at[j]}")))
        notes.append(f"metered gaps in {len(gapped)} feeder(s), {int(gap_n.sum())} intervals "
                     f"in all, filled {how} (gap_fill = {s.gap_fill})")
    return flags


def _total(m: MeteredData):
    empty = (np.array([], dtype=np.int64),) * 3
    if m.total_mw is None:
        return None, empty
    total = np.array(m.total_mw, dtype=float)
    if np.isnan(total).all():
        return None, empty
    return total, runs2d(np.isnan(total)[None, :])


def _total_note(total, t_r, iv_h: float, notes: list[str]):
    """TOTAL gaps are interpolated (they are an error only where TOTAL is the demand and
    gap_fill is 'error', checked before)."""
    if total is None or not len(t_r[0]):
        return total
    n_tg = int((t_r[2] - t_r[1]).sum())
    lg = int((t_r[2] - t_r[1]).max())
    notes.append(f"{TOTAL_ID}: {n_tg} interval{'s' if n_tg != 1 else ''} ({n_tg * iv_h:g} h) "
                 f"without a reading interpolated between the neighbouring readings; longest "
                 f"gap {lg * iv_h:g} h")
    return interpolate_rows(total[None, :])[0]


def _raise_gaps(study: Study, file: str, runs, t_r, ts_ns: np.ndarray, iv_ns: int) -> None:
    """gap_fill = error: one problem per series with gaps, naming its gap windows."""
    tz = study.settings.timezone
    iv_h = study.settings.interval_minutes / 60.0
    ids = list(study.feeder_ids) + [TOTAL_ID]
    rows = np.concatenate([runs[0], np.full(len(t_r[0]), len(ids) - 1)]).astype(np.int64)
    c0 = np.concatenate([runs[1], t_r[1]]).astype(np.int64)
    c1 = np.concatenate([runs[2], t_r[2]]).astype(np.int64)
    start = local_text(ts_ns[c0], tz)
    end = local_text(ts_ns[0] + c1 * iv_ns, tz)
    ln = c1 - c0
    win = pd.DataFrame({"r": rows, "w": start + " to " + end, "n": ln})
    g = win.groupby("r", sort=True)
    agg = pd.DataFrame({"k": g.size(), "n": g["n"].sum(),
                        "w": g["w"].agg(lambda x: "; ".join(x.iloc[:MAX_WINDOWS_LISTED]))})
    n_series = len(agg)
    probs = [Problem(study.path, f"gap_fill is 'error' but the metered data has gaps in "
                     f"{n_series} series ({int(ln.sum())} intervals); fill them in the file "
                     "or set gap_fill to 'profile' or 'interpolate'", "settings", None,
                     "value")]
    for r, k, n, w in list(agg.itertuples())[:MAX_LISTED]:
        more = f"; and {k - MAX_WINDOWS_LISTED} more" if k > MAX_WINDOWS_LISTED else ""
        probs.append(Problem(file, f"{ids[r]}: {k} gap{'s' if k != 1 else ''} "
                             f"({n} intervals, {n * iv_h:g} h) without a reading, local time: "
                             f"{w}{more}", None, None, "mw"))
    if n_series > MAX_LISTED:
        probs.append(Problem(file, f"... and {n_series - MAX_LISTED} more series with gaps",
                             None, None, "mw"))
    raise InputError(probs)
