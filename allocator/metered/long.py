"""The long layout: one reading per row, ``timestamp, feeder_id, mw``."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..domain import Study
from .columns import feeder_codes, mw_values
from .listing import UnknownIds
from .model import NAT, REQUIRED_COLUMNS
from .rowchecks import Problems, TimeRules, mw_message, third_for_feeder
from .sources import Batch, Source
from .timestamps import batch_times


@dataclass
class Rows:
    """Per row of a batch: file line, series code (-1 none), UTC ns (NAT where unusable),
    MW, whether the MW is usable, and whether the time was in the repeated autumn hour."""

    line: np.ndarray
    code: np.ndarray
    t: np.ndarray
    mw: np.ndarray
    mw_ok: np.ndarray | None  # None: every row
    amb: np.ndarray | None  # None: no row
    text: Callable[[np.ndarray], list[str]]  # timestamp texts of batch rows


def long_columns(src: Source, probs: Problems) -> dict[str, int]:
    """Column index of each required column (first occurrence); missing ones reported."""
    low = [n.lower() for n in src.names]
    where = {c: low.index(c) for c in REQUIRED_COLUMNS if c in low}
    for c in REQUIRED_COLUMNS:
        if c not in where:
            probs.header.add(f"missing column '{c}' (found: {', '.join(low) or 'none'})",
                             row=1, column=c)
    return where


class LongDecoder:
    def __init__(self, src: Source, study: Study, probs: Problems):
        self.src = src
        self.cols = long_columns(src, probs)
        self.extra = [i for i in range(len(src.names)) if i not in self.cols.values()]
        self.p = probs
        probs.unknown = UnknownIds(study.feeder_ids)
        self.ids = pa.array(list(study.feeder_ids), type=pa.string())
        self.rules = TimeRules(study.settings.timezone, probs)

    @property
    def columns(self) -> list[int]:
        return sorted(self.cols.values()) + (self.extra if self.src.kind == "csv" else [])

    @property
    def dict_columns(self) -> set[int]:
        return {self.cols[c] for c in ("timestamp", "feeder_id") if c in self.cols}

    def decode(self, b: Batch) -> Rows:
        n, line, get = b.n, b.line, b.arrays.get
        fc = feeder_codes(get(self.cols["feeder_id"]), self.ids) if "feeder_id" in self.cols \
            else None
        vals = mw_values(get(self.cols["mw"]), self.src.decimal_comma) if "mw" in self.cols \
            else None
        tm = batch_times(get(self.cols["timestamp"]), self.rules.tz) \
            if "timestamp" in self.cols else None
        keep = self._kept_rows(b, fc, vals, tm)
        code = fc.code if fc is not None else np.full(n, -1, dtype=np.int64)
        if fc is not None:
            self._feeder_problems(fc, keep, line)
        mw = vals.mw if vals is not None else np.full(n, np.nan)
        mw_ok = np.isfinite(mw)
        if keep is not None:
            mw_ok &= keep
        if mw_ok.all():
            mw_ok = None
        elif vals is not None:
            bad = ~mw_ok if keep is None else keep & ~mw_ok
            self.p.mw.add(np.flatnonzero(bad), line,
                          lambda q: [mw_message(x) for x in vals.text(q)])
        if tm is None:
            return Rows(line, code, np.full(n, NAT), mw, mw_ok, None, lambda q: [""] * len(q))
        fid = fc.text if fc is not None else (lambda q: [""] * len(q))
        t, amb = self.rules.resolve(tm, keep, line, fid,
                                    lambda x, i: third_for_feeder(fid([i])[0], x))
        return Rows(line, code, t, mw, mw_ok, amb, tm.text)

    def _feeder_problems(self, fc, keep, line) -> None:
        if fc.blank is not None:
            blank = fc.blank if keep is None else fc.blank & keep
            self.p.fid_blank.add(np.flatnonzero(blank), line,
                                 lambda q: ["feeder_id is blank"] * len(q))
        ids, first, cnt = fc.unknown
        self.p.unknown.add(ids, line[first], cnt)

    def _kept_rows(self, b: Batch, fc, vals, tm) -> np.ndarray | None:
        """CSV rows where every column is empty (blank lines) are dropped, their lines still
        counted: the rows kept, None when that is all of them."""
        if self.src.kind != "csv":
            return None
        parts = [p.blank for p in (fc, vals, tm) if p is not None]
        if not parts or any(x is None for x in parts):
            return None
        blank = np.logical_and.reduce(parts)
        cand = np.flatnonzero(blank)
        if len(cand) and self.extra:
            idx = pa.array(cand)
            for i in self.extra:
                t = pc.utf8_trim_whitespace(b.arrays[i].take(idx))
                blank[cand] &= pc.fill_null(pc.equal(t, ""), True).to_numpy(
                    zero_copy_only=False)
        return ~blank if blank.any() else None
