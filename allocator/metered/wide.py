"""The wide layout, as historians export it: a ``timestamp`` column and one column per
feeder (header = feeder_id; ``TOTAL`` for the system demand).  A blank cell is no reading.

Every value is a reading of its column's feeder at its row's time, so the rows carry the
time rules (one timestamp form, the skipped and the repeated hour, time order, no row
twice) and each cell the value rules (a number, finite), located by file row and the
feeder's column.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..domain import Study
from .columns import match_ids, mw_values
from .model import NAT, TOTAL_ID, np_of
from .rowchecks import Problems, TimeRules, mw_message
from .sources import Batch, Source
from .timestamps import batch_times


def looks_wide(src: Source, study: Study) -> bool:
    """A ``timestamp`` column, no ``feeder_id`` or ``mw`` column, and at least one column
    named after a feeder of the study or TOTAL."""
    low = [n.lower() for n in src.names]
    if "feeder_id" in low or "mw" in low or "timestamp" not in low:
        return False
    code = match_ids(pa.array(src.names, type=pa.string()),
                     pa.array(list(study.feeder_ids), type=pa.string()))
    return bool((code >= 0).any())


@dataclass
class WideRows:
    """Per row: line, UTC ns (NAT where unusable), autumn-hour flag (None: no row), the
    timestamp texts ``text(rows)``; per reading (grouped by series, row order within):
    series code, time, MW and its row."""

    line: np.ndarray
    t: np.ndarray
    amb: np.ndarray | None
    code: np.ndarray
    rt: np.ndarray
    mw: np.ndarray
    row: np.ndarray
    text: Callable[[np.ndarray], list[str]]


def _third(text: str, _pos) -> str:
    return (f"local time '{text}' occurs a third time in the file: in the repeated autumn "
            "hour each local time can appear twice (first summer time, then standard time); "
            "use UTC offsets to be unambiguous")


class WideDecoder:
    def __init__(self, src: Source, study: Study, probs: Problems):
        self.src, self.p = src, probs
        names = src.names
        self.ts = [n.lower() for n in names].index("timestamp")
        self.rules = TimeRules(study.settings.timezone, probs)
        self.value_cols, self.codes = self._header(study, names)

    def _header(self, study: Study, names: list[str]) -> tuple[list[int], np.ndarray]:
        other = [i for i in range(len(names)) if i != self.ts]
        code = match_ids(pa.array([names[i] for i in other], type=pa.string()),
                         pa.array(list(study.feeder_ids), type=pa.string()))
        lower = {x.lower(): x for x in study.feeder_ids}
        keep, seen = [], {}
        for i, c in zip(other, code.tolist()):
            h = names[i]
            if h == "":
                self.p.header.add(f"column {i + 1} has no name in the header; name it after "
                                  "its feeder", row=1)
            elif c < 0:
                hint = f"; did you mean '{lower[h.lower()]}'?" if h.lower() in lower else ""
                self.p.header.add(f"feeder_id '{h}' is not a feeder of the study and not "
                                  f"{TOTAL_ID}{hint}", row=1, column=h)
            elif c in seen:
                self.p.header.add(f"column '{h}' appears twice in the header (also column "
                                  f"{seen[c] + 1})", row=1, column=h)
            else:
                seen[c] = i
                keep.append((i, c))
        return [i for i, _ in keep], np.array([c for _, c in keep], dtype=np.int64)

    @property
    def columns(self) -> list[int]:
        return [self.ts] + self.value_cols

    dict_columns: set = set()

    def decode(self, b: Batch) -> WideRows:
        tm = batch_times(b.arrays[self.ts], self.rules.tz)
        mw, present, texts = self._values(b)
        keep = None  # CSV rows with a blank time and no value are blank lines: dropped
        if tm.blank is not None and tm.blank.any():
            keep = present.any(axis=0) | ~tm.blank
            present &= keep
        ok = np.isfinite(mw)
        bad = present & ~ok
        if bad.any():
            self._value_problems(texts, mw, bad, b.line)
        t, amb = self.rules.resolve(tm, keep, b.line, lambda q: [""] * len(q), _third)
        if (t == NAT).any():
            ok &= (t != NAT)
        n, m = b.n, len(self.codes)
        if ok.all():  # every cell a reading: no index arrays needed
            return WideRows(b.line, t, amb, np.repeat(self.codes, n), np.tile(t, m),
                            mw.ravel(), np.tile(np.arange(n), m), tm.text)
        j, r = np.nonzero(ok)
        return WideRows(b.line, t, amb, self.codes[j], t[r], mw[j, r], r, tm.text)

    def _values(self, b: Batch) -> tuple[np.ndarray, np.ndarray, dict]:
        """``[column, row]`` MW and whether a cell holds anything: numbers as they are (NaN
        or null: no reading), text parsed (blank: no reading); ``texts`` keeps the parsed
        text columns by position, for messages."""
        mw = np.empty((len(self.value_cols), b.n))
        present = np.ones(mw.shape, dtype=bool)
        texts: dict[int, object] = {}
        for j, i in enumerate(self.value_cols):
            arr = b.arrays[i]
            if arr.type == pa.float64():
                mw[j] = np_of(arr)
            elif _numeric(arr):
                mw[j] = np_of(pc.cast(arr, pa.float64()))
            else:
                v = texts[j] = mw_values(arr, self.src.decimal_comma)
                mw[j] = v.mw
                if v.blank is not None:
                    present[j] = ~v.blank
        if len(texts) < len(self.value_cols):
            num = np.ones(len(self.value_cols), dtype=bool)
            num[list(texts)] = False
            present[num] = ~np.isnan(mw[num])
        return mw, present, texts

    def _value_problems(self, texts: dict, mw: np.ndarray, bad: np.ndarray, line) -> None:
        """Cells that hold something other than a finite number, in row order."""
        j, r = np.nonzero(bad)
        o = np.lexsort((j, r))
        j, r = j[o], r[o]
        names = self.src.names

        def written(k: int) -> str:
            jk = int(j[k])
            if jk in texts:
                return texts[jk].text(np.array([r[k]]))[0]
            return f"{mw[jk, r[k]]}"

        self.p.mw.add(np.arange(len(j)), line[r], lambda q: [mw_message(written(k)) for k in q],
                      column=lambda q: [names[self.value_cols[j[k]]] for k in q])


def _numeric(arr: pa.Array) -> bool:
    t = arr.type
    return pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t)
