"""Several metered years in one run: one or more files → one ``MeteredData`` per calendar year.

Rules (README, "Several metered years"):

* The calendar years of the data are those (local, study time zone) from the first to the
  last reading of all files; an edge year with less than one day of readings is not a year
  of its own (its readings are ignored, with a note), and a year in between without any
  reading is skipped.
* One calendar year, or none (data outside the study year only), from one file: exactly
  the one-year case of before (the study year, scenario ``metered``, missing intervals are
  gaps filled per ``gap_fill``).
* Several calendar years (or several files): one :class:`MeteredData` per year, on that
  year's own calendar.  A year is judged only on its *data span*, from the first to the last
  interval with any reading in it; a year whose span is shorter than the year is *partial*
  and says its coverage (%).  Gaps inside the span are filled per ``gap_fill`` as before.
* Several files are joined series by series and interval by interval (a utility may export
  feeders or years to separate files).  Two files with a reading for the same series in the
  same interval are refused (exit 2), naming both files and the line in each, like a
  duplicate inside one file.

Memory: each file is read once per calendar year on that year's grid (a pass per year and
file); the reader checks each year's arrays against the memory available, and before the
first extra pass the arrays of every year together are checked.  The files' problems are
listed on the first pass (the study year's grid), all in one go, as in the one-year case.
"""

from __future__ import annotations

import os
from dataclasses import replace

import numpy as np
import pandas as pd

from .. import memory
from ..domain import Study
from ..errors import InputError, Problem
from .merge import gap_runs
from .model import (MAX_LISTED, NAT, NS_PER_DAY, NS_PER_MIN, MeteredData, local_text,
                    ns_of, series_ids)
from .reader import BATCH_OVERHEAD_BYTES, read_metered

#: an edge year with readings over less than this is not a year of its own
MIN_EDGE_YEAR_NS = NS_PER_DAY


def read_metered_years(paths, study: Study) -> tuple[MeteredData, ...]:
    """Every file of ``paths`` (one path or several) → one MeteredData per calendar year
    (see the module docstring).  Raises InputError for bad files and overlaps."""
    paths = [paths] if isinstance(paths, (str, os.PathLike)) else list(paths)
    s = study.settings
    grid = _grid(study, s.year)
    first = [read_metered(p, study, grid) for p in paths]
    years, dropped = data_years(study, [m.reading_span_ns for m in first])
    if len(paths) == 1 and set(years) <= {s.year}:
        return (first[0],)
    if s.year not in years:
        first = [None] * len(first)  # the study year's arrays are not needed: release them
    _require_total(study, years)
    out, probs = [], []
    for y in years:
        parts = [_without_outside_note(m, s.year) if y == s.year else
                 read_metered(p, study, _grid(study, y), outside_note=False)
                 for p, m in zip(paths, first)]
        first = [None if y == s.year else m for m in first]  # released once used
        more = overlaps(study, parts, paths, _grid(study, y))
        probs += more
        if not more:
            out.append(_with_span(join_files(study, parts), y))
    if probs:
        raise InputError(probs)
    note = _dropped_note(dropped, paths)
    if note and out:
        out[0] = replace(out[0], notes=(note,) + out[0].notes)
    return tuple(out)


def _grid(study: Study, year: int) -> pd.DatetimeIndex:
    from ..timegrid import study_intervals

    return study_intervals(year, study.settings.timezone, study.settings.interval_minutes)


def _year_bounds_ns(study: Study, y0: int, y1: int) -> np.ndarray:
    """Local midnight of 1 January of years y0 .. y1 + 1, UTC ns."""
    tz = study.settings.timezone
    return np.array([pd.Timestamp(year=y, month=1, day=1, tz=tz).value
                     for y in range(y0, y1 + 2)], dtype=np.int64)


def data_years(study: Study, spans) -> tuple[list[int], list[int]]:
    """The calendar years from the first to the last reading of all files, without edge
    years holding less than a day of readings (returned second)."""
    spans = [sp for sp in spans if sp is not None]
    if not spans:
        return [], []
    t0, t1 = min(sp[0] for sp in spans), max(sp[1] for sp in spans)
    tz = study.settings.timezone
    y0, y1 = (pd.Timestamp(t, tz="UTC").tz_convert(tz).year for t in (t0, t1))
    b = _year_bounds_ns(study, y0, y1)
    years, dropped = list(range(y0, y1 + 1)), []
    if y1 > y0 and t1 - b[-2] < MIN_EDGE_YEAR_NS:
        dropped.append(years.pop())
    if len(years) > 1 and b[1] - t0 < MIN_EDGE_YEAR_NS:
        dropped.insert(0, years.pop(0))
    return years, dropped


def _require_total(study: Study, years: list[int]) -> None:
    ns = len(study.feeder_ids) + 1
    n_iv = sum(len(_grid(study, y)) for y in years)
    memory.require(ns * n_iv * 8 + BATCH_OVERHEAD_BYTES,
                   f"the metered years {', '.join(map(str, years))} together ({ns:,} series × "
                   f"{n_iv:,} intervals × 8 bytes, plus {BATCH_OVERHEAD_BYTES >> 20} MB for "
                   "reading)", study.path)


def _without_outside_note(m: MeteredData, year: int) -> MeteredData:
    tail = f" outside the study year {year} ignored"
    return replace(m, notes=tuple(n for n in m.notes if not n.endswith(tail)))


def _dropped_note(dropped: list[int], paths) -> str | None:
    if not dropped:
        return None
    return (f"{', '.join(map(str, paths))}: readings in {', '.join(map(str, dropped))} "
            "(less than a day of that year) ignored; a calendar year needs at least a day of "
            "readings to be judged")


def _with_span(m: MeteredData, year: int) -> MeteredData:
    """The year and its data span: first to last interval with any reading of any series."""
    any_col = np.zeros(m.values_mw.shape[1], dtype=bool)
    for a in range(0, m.values_mw.shape[0], 256):
        any_col |= ~np.isnan(m.values_mw[a:a + 256]).all(axis=0)
    if m.total_mw is not None:
        any_col |= ~np.isnan(m.total_mw)
    idx = np.flatnonzero(any_col)
    span = (int(idx[0]), int(idx[-1]) + 1) if len(idx) else (0, 0)
    return replace(m, year=year, span=span)


def join_files(study: Study, parts: list[MeteredData]) -> MeteredData:
    """One year read from several files → one MeteredData (call :func:`overlaps` first)."""
    acc = parts[0]
    for p in parts[1:]:
        acc = _join_two(study, acc, p)
    return acc


def _join_two(study: Study, a: MeteredData, b: MeteredData) -> MeteredData:
    vals = a.values_mw
    for r in range(0, vals.shape[0], 256):
        np.copyto(vals[r:r + 256], b.values_mw[r:r + 256],
                  where=np.isnan(vals[r:r + 256]))
    total = a.total_mw if b.total_mw is None else (
        b.total_mw if a.total_mw is None else np.where(np.isnan(a.total_mw), b.total_mw,
                                                       a.total_mw))
    has = a.has_data | b.has_data
    spans = [sp for sp in (a.reading_span_ns, b.reading_span_ns) if sp is not None]
    return replace(a, file=f"{a.file} + {b.file}", values_mw=vals, total_mw=total,
                   has_data=has, notes=a.notes + b.notes,
                   reading_stats=_join_stats(a.reading_stats, b.reading_stats),
                   gap_runs=gap_runs(vals, has),
                   reading_span_ns=(min(s[0] for s in spans), max(s[1] for s in spans))
                   if spans else None)


def _join_stats(a: pd.DataFrame, b: pd.DataFrame) -> pd.DataFrame:
    """Per series: counts added, extremes of both, the longer flat run (a flat run across
    the two files is not joined)."""
    out = a.copy()
    for c in ("n_readings", "n_high", "n_low"):
        out[c] = a[c] + b[c]
    out["min_mw"] = np.fmin(a["min_mw"], b["min_mw"])
    out["max_mw"] = np.fmax(a["max_mw"], b["max_mw"])
    longer = (b["flat_h"] > a["flat_h"]).to_numpy()
    for c in ("flat_h", "flat_mw", "flat_start_ns"):
        out.loc[longer, c] = b.loc[longer, c]
    return out


def overlaps(study: Study, parts: list[MeteredData], paths, grid) -> list[Problem]:
    """Problems for every pair of files with readings of the same series in the same
    interval of this year: per series its first such interval, the line in each file."""
    probs = []
    for i in range(len(parts)):
        for j in range(i + 1, len(parts)):
            probs += _pair_overlap(study, parts[i], parts[j], paths[i], paths[j], grid)
    return probs


def _both(a: MeteredData, b: MeteredData):
    """(series, first interval, count) of the cells both files fill, per series."""
    rows, c0s, ns = [], [], []
    for r in range(0, a.values_mw.shape[0], 256):
        both = ~np.isnan(a.values_mw[r:r + 256]) & ~np.isnan(b.values_mw[r:r + 256])
        k = np.flatnonzero(both.any(axis=1))
        rows.append(k + r)
        c0s.append(both[k].argmax(axis=1))
        ns.append(both[k].sum(axis=1))
    if a.total_mw is not None and b.total_mw is not None:
        both = ~np.isnan(a.total_mw) & ~np.isnan(b.total_mw)
        if both.any():
            rows.append(np.array([a.values_mw.shape[0]]))
            c0s.append(np.array([both.argmax()]))
            ns.append(np.array([both.sum()]))
    return tuple(np.concatenate(x).astype(np.int64) for x in (rows, c0s, ns))


def _pair_overlap(study, a, b, pa, pb, grid) -> list[Problem]:
    rows, c0, n = _both(a, b)
    if not len(rows):
        return []
    shown = slice(0, MAX_LISTED)
    ts = ns_of(grid)
    end = ts[c0[shown]] + study.settings.interval_minutes * NS_PER_MIN
    la = _lines_at(pa, study, grid, rows[shown], end)
    lb = _lines_at(pb, study, grid, rows[shown], end)
    ids = series_ids(study)
    year = grid[0].tz_convert(study.settings.timezone).year
    at = local_text(ts[c0[shown]], study.settings.timezone)
    probs = [Problem(str(pb), f"{ids[r]}: the interval from {t} has a reading in {pa} "
                     f"(line {x}) and in {pb} (line {y}); {k} interval{'s' if k != 1 else ''} "
                     f"of {ids[r]} in {year} are in both files; a series' interval "
                     "may come from one file only", None, y, "timestamp")
             for r, t, x, y, k in zip(rows[shown], at, la, lb, n[shown])]
    if len(rows) > MAX_LISTED:
        probs.append(Problem(str(pb), f"... and {len(rows) - MAX_LISTED} more series in both "
                             f"{pa} and {pb}", None, None, "timestamp"))
    return probs


def _lines_at(path, study: Study, grid, codes: np.ndarray, t_end: np.ndarray) -> list:
    """Per target the file line of the latest reading of series ``codes[k]`` starting
    before ``t_end[k]`` (the reading that fills the interval ending there)."""
    from pathlib import Path

    from ..errors import Collector
    from .reader import _checked_rows
    from .sources import open_source

    best_t = np.full(len(codes), NAT, dtype=np.int64)
    best_line = [None] * len(codes)
    src = open_source(Path(path), Collector(str(path)))
    for c, t, ln in _checked_rows(src, study, grid):
        for k in range(len(codes)):  # a few targets; each a vector test over the batch
            m = np.flatnonzero((c == codes[k]) & (t < t_end[k]))
            if len(m) and t[m].max() > best_t[k]:
                i = m[np.argmax(t[m])]
                best_t[k], best_line[k] = t[i], int(ln[i])
    return best_line
