"""``read_metered``: one streaming pass over the file (a second one only to place readings
that go back in time), every problem listed, then the aligned arrays."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd

from .. import memory
from ..domain import Study
from ..errors import Collector
from .accumulate import BYTES_PER_CELL, Accumulator
from .align import hold_coarse, means_in_place
from .listing import Listing
from .long import LongDecoder
from .merge import gap_runs
from .model import (MAX_LISTED, NAT, NS_PER_MIN, RANGE_FACTOR, RANGE_MARGIN_MW, MeteredData,
                    fmt_minutes, names, ns_of, series_ids)
from .quality import flat_runs, reading_stats
from .rowchecks import Problems
from .sequence import SequenceCheck
from .sources import RestartExact, Source, batches, open_source
from .wide import WideDecoder, looks_wide

#: memory for batches and their temporaries, beyond the arrays
BATCH_OVERHEAD_BYTES = 256 << 20


def read_metered(path: str | os.PathLike, study: Study,
                 timestamps_utc: pd.DatetimeIndex, outside_note: bool = True) -> MeteredData:
    """Read, validate and align a metered file to ``timestamps_utc`` (the study intervals,
    or one calendar year of several, :mod:`.years`; ``outside_note`` False drops the note on
    readings outside it).

    Raises :class:`~allocator.errors.InputError` listing every problem found in the file,
    or when the arrays would not fit in the memory available.
    """
    p = Path(path)
    src = open_source(p, Collector(str(p)))
    with memory.reuse_freed_memory():
        try:
            return _read(src, study, timestamps_utc, False, outside_note)
        except RestartExact:
            pass  # read again below, once the first pass's arrays are released
        return _read(src, study, timestamps_utc, True, outside_note)


class _Plan:
    """What one pass needs: the layout's decoder, the problems, the study's grid."""

    def __init__(self, src: Source, study: Study, timestamps_utc: pd.DatetimeIndex):
        self.src, self.study, self.file = src, study, str(src.path)
        self.probs = Problems(Collector(self.file))
        self.wide = looks_wide(src, study)
        self.dec = (WideDecoder if self.wide else LongDecoder)(src, study, self.probs)
        self.ns = len(study.feeder_ids) + 1
        self.n_iv = len(timestamps_utc)
        self.ts0 = int(ns_of(timestamps_utc[:1])[0]) if self.n_iv else 0
        self.iv_ns = study.settings.interval_minutes * NS_PER_MIN

    def batches(self, exact: bool):
        return batches(self.src, self.dec.columns, self.dec.dict_columns, self.probs.header,
                       self.probs.shape, exact, self.wide)


def _read(src: Source, study: Study, timestamps_utc, exact: bool,
          outside_note: bool) -> MeteredData:
    pl = _Plan(src, study, timestamps_utc)
    memory.require(pl.ns * pl.n_iv * BYTES_PER_CELL + BATCH_OVERHEAD_BYTES,
                   f"the metered data ({pl.ns:,} series × {pl.n_iv:,} intervals × "
                   f"{BYTES_PER_CELL} bytes, plus {BATCH_OVERHEAD_BYTES >> 20} MB for reading)",
                   pl.file)
    hi = np.append(RANGE_FACTOR * study.peak_mw + RANGE_MARGIN_MW, np.inf)
    lo = np.append(-(RANGE_FACTOR * study.pv_mw + RANGE_MARGIN_MW), -np.inf)
    acc = Accumulator(pl.ns, pl.n_iv, pl.ts0, pl.iv_ns, hi, lo, pl.file)
    seq = SequenceCheck(1 if pl.wide else pl.ns, series_ids(study), study.settings.timezone,
                        pl.wide)
    for b in pl.batches(exact):
        _feed(pl, pl.dec.decode(b), seq, acc)
    if seq.needs_second_read:
        seq.resolve(lambda: _checked_rows(src, study, timestamps_utc))
    res = acc.hist.median_ns(pl.ns, pl.iv_ns)
    col = Collector(pl.file)
    col.extend(pl.probs.header.problems)
    for listing in pl.probs.rows_listings():
        if listing is not None:
            listing.emit(col)
    seq.emit(col)
    _off_grid(pl, acc, res).emit(col)
    col.raise_if_any()
    return _finish(pl, acc, res, timestamps_utc, outside_note)


def _grouped(code: np.ndarray) -> np.ndarray | None:
    """A stable order grouping the rows by series; None when they are grouped already
    (a file written series by series).  A batch of a file written time step by time step
    (the same feeders in the same order at every time) is grouped by a transpose; anything
    else by a stable sort."""
    n = len(code)
    if n < 2:
        return None
    change = np.count_nonzero(code[1:] != code[:-1])
    if change + 1 == np.count_nonzero(np.bincount(code)):
        return None
    again = np.flatnonzero(code[1:] == code[0])
    p = int(again[0]) + 1 if len(again) else n
    if 1 < p < n:
        perm = _periodic(code, p)
        if perm is not None:
            return perm
    return np.argsort(code, kind="stable")


def _periodic(code: np.ndarray, p: int) -> np.ndarray | None:
    """The grouping order when ``code`` repeats one sequence of ``p`` distinct series."""
    n = len(code)
    head = code[:p]
    full, tail = divmod(n, p)
    if np.count_nonzero(np.bincount(head)) != p:
        return None
    if not (code[:full * p].reshape(full, p) == head).all() or \
            not (code[full * p:] == head[:tail]).all():
        return None
    idx = np.arange((full + 1) * p, dtype=np.int64).reshape(full + 1, p)
    order = idx.T.ravel()
    return order[order < n]


def _starts(code: np.ndarray) -> np.ndarray:
    first = np.ones(len(code), dtype=bool)
    first[1:] = code[1:] != code[:-1]
    return first


def _feed(pl: _Plan, rows, seq: SequenceCheck, acc: Accumulator) -> None:
    """One decoded batch into the order check and the accumulator."""
    if pl.wide:
        ok = np.flatnonzero(rows.t != NAT)
        zero = np.zeros(len(ok), dtype=np.int64)
        seq.update(zero, rows.t[ok], ok, rows.line, None if rows.amb is None
                   else rows.amb[ok], _starts(zero))
        acc.add(rows.code, rows.rt, rows.mw, rows.row, rows.line, _starts(rows.code),
                rows.text)
        return
    sel = (rows.code >= 0) & (rows.t != NAT)
    if sel.all():
        g = _grouped(rows.code)
        pos = np.arange(len(sel)) if g is None else g
    else:
        pos = np.flatnonzero(sel)
        g = _grouped(rows.code[pos])
        pos = pos if g is None else pos[g]
    c, t = rows.code[pos], rows.t[pos]
    first = _starts(c)
    seq.update(c, t, pos, rows.line, None if rows.amb is None else rows.amb[pos], first)
    if rows.mw_ok is not None:
        m = rows.mw_ok[pos]
        pos, c, t = pos[m], c[m], t[m]
        first = _starts(c)
    acc.add(c, t, rows.mw[pos], pos, rows.line, first, rows.text)


def _checked_rows(src: Source, study: Study, timestamps_utc):
    """The file again, as (series, time, line) of the rows the order check looked at."""
    pl = _Plan(src, study, timestamps_utc)
    for b in pl.batches(exact=True):
        rows = pl.dec.decode(b)
        if pl.wide:
            ok = rows.t != NAT
            yield np.zeros(int(ok.sum()), dtype=np.int64), rows.t[ok], rows.line[ok]
            continue
        ok = (rows.t != NAT) & (rows.code >= 0)
        yield rows.code[ok], rows.t[ok], rows.line[ok]


def _off_grid(pl: _Plan, acc: Accumulator, res: np.ndarray) -> Listing:
    """Readings off the interval grid of the series that must be on it (resolution at least
    the interval), in line order."""
    out = Listing("timestamp", "a timestamp off the interval grid")
    coarse = res >= pl.iv_ns
    kept = [(c, ln, t) for c, ln, t in acc.off.kept]
    if not kept or not (acc.off.n[coarse] > 0).any():
        return out
    c = np.concatenate([k[0] for k in kept])
    ln = np.concatenate([k[1] for k in kept])
    txt = np.concatenate([k[2] for k in kept])
    sel = np.flatnonzero(coarse[c])
    sel = sel[np.argsort(ln[sel], kind="stable")][:MAX_LISTED]
    iv = pl.study.settings.interval_minutes
    out.rows = [(int(ln[i]), f"timestamp '{txt[i]}' is not on a {iv}-minute interval "
                 f"boundary of the study; readings every {fmt_minutes(res[c[i]])} must start "
                 "on an interval", "timestamp") for i in sel]
    out.n = int(acc.off.n[coarse].sum())
    return out


def _finish(pl: _Plan, acc: Accumulator, res: np.ndarray, timestamps_utc,
            outside_note: bool) -> MeteredData:
    study, nf = pl.study, pl.ns - 1
    vals = means_in_place(acc)
    acc.cnt = None
    flat = flat_runs(vals)  # coarse series: measured again with their reading starts
    n_pre_in = hold_coarse(acc, vals, res, study.settings.timezone, flat)
    has_all = acc.n_in > 0
    notes = _notes(pl, res, has_all, (acc.n_pre + acc.n_post - n_pre_in) * outside_note)
    stats = reading_stats(series_ids(study), acc.n_in, acc.min, acc.max, acc.n_high,
                          acc.n_low, flat, pl.ts0, pl.iv_ns)
    values = vals[:nf]
    total = vals[nf].copy() if has_all[nf] else None
    return MeteredData(pl.file, tuple(study.feeder_ids), values, total, has_all[:nf].copy(),
                       timestamps_utc, study.settings.interval_minutes, tuple(notes), stats,
                       gap_runs(values, has_all[:nf]), "wide" if pl.wide else "long",
                       owns_values=True, reading_span_ns=(
                           (acc.t_first, acc.t_last) if acc.t_last != NAT else None))


def _notes(pl: _Plan, res: np.ndarray, has: np.ndarray, n_out: int) -> list[str]:
    s, file = pl.study.settings, pl.file
    ids = series_ids(pl.study)
    notes = []
    if n_out:
        notes.append(f"{file}: {n_out} reading{'s' if n_out != 1 else ''} outside the study "
                     f"year {s.year} ignored")
    iv_min = s.interval_minutes
    for mask, text in (
            ((res < pl.iv_ns) & has, "averaged into the {iv}-minute intervals (mean of the "
                                     "readings present in each)"),
            ((res > pl.iv_ns) & has, "coarser than the {iv}-minute intervals: each reading "
                                     "is held over the intervals it covers")):
        if mask.any():
            for r in np.unique(res[mask]):
                who = [ids[i] for i in np.flatnonzero(mask & (res == r))]
                notes.append(f"{file}: readings every {fmt_minutes(r)} for {len(who)} "
                             f"series ({names(who)}) " + text.format(iv=iv_min))
    return notes


__all__ = ["read_metered"]
