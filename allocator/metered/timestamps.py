"""Timestamps, parsed vectorized: each distinct text of a batch once, then taken per row.

Two forms, one per file: ISO 8601 with a UTC offset (``+02:00``, ``+0200`` or ``Z``), or
local wall-clock time in the study time zone without an offset.  A local time is localised
twice, as summer time and as standard time: where the two differ the time falls in the
repeated autumn hour and the order of the readings decides (see :class:`Ambiguity`); where
summer time does not exist the time falls in the hour skipped in spring.  Parquet timestamp
columns (time-zone aware or naive) need no text parsing.
"""

from __future__ import annotations

from functools import cached_property

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from .model import NAT, np_of

# a time of day followed by a UTC offset or Z at the end of the string
OFFSET_RE = r"\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?\s*(?:[Zz]|[+-]\d{2}(?::?\d{2})?)$"
_LO, _HI = pd.Timestamp("1678-01-01"), pd.Timestamp("2261-12-31")


class Times:
    """Times of a batch, kept per distinct value (``*_u`` arrays) with each row's index
    ``idx`` into them (None: one value per row).  Per row (computed when asked): ``form`` 0
    unreadable, 1 UTC offset, 2 naive local; ``utc`` (form 1) or summer-time reading
    (form 2; NAT in the skipped hour); ``std`` standard-time reading and ``naive`` wall
    clock (form 2); ``blank`` empty text; ``text(pos)`` the texts of some rows."""

    def __init__(self, form_u, utc_u, std_u, naive_u, idx, text, blank_u=None):
        self.form_u, self.utc_u, self.std_u, self.naive_u = form_u, utc_u, std_u, naive_u
        self.idx, self.text, self.blank_u = idx, text, blank_u

    def _rows(self, u):
        return u if self.idx is None else u[self.idx]

    @cached_property
    def form(self) -> np.ndarray:
        return self._rows(self.form_u)

    @cached_property
    def utc(self) -> np.ndarray:
        return self._rows(self.utc_u)

    @cached_property
    def std(self) -> np.ndarray:
        return self._rows(self.std_u)

    @cached_property
    def naive(self) -> np.ndarray:
        return self._rows(self.naive_u)

    @cached_property
    def blank(self) -> np.ndarray | None:
        return None if self.blank_u is None else self._rows(self.blank_u)

    def uniform(self) -> int:
        """The form shared by every value when all are plainly usable (no unreadable or
        blank value, none in the skipped or repeated hour); 0 otherwise."""
        f = self.form_u
        if not len(f) or (f != f[0]).any() or f[0] == 0:
            return 0
        if f[0] == 2 and ((self.utc_u == NAT) | (self.utc_u != self.std_u)).any():
            return 0
        return int(f[0])


def _in_range(d) -> np.ndarray:
    """Parsed times that fit int64 nanoseconds with a margin (years 1678..2261)."""
    lo, hi = _LO, _HI
    if getattr(d.dtype, "tz", None) is not None:
        lo, hi = lo.tz_localize("UTC"), hi.tz_localize("UTC")
    return np.asarray(d.notna() & (d >= lo) & (d <= hi), dtype=bool)


def localise(naive_ns: np.ndarray, tz: str) -> tuple[np.ndarray, np.ndarray]:
    """(summer-time, standard-time) UTC ns of naive wall-clock times; NAT where the local
    time does not exist (distinct values are localised once)."""
    codes, uniq = pd.factorize(naive_ns)
    loc = pd.DatetimeIndex(np.asarray(uniq, dtype="datetime64[ns]"))
    out = []
    for dst in (True, False):
        a = loc.tz_localize(tz, ambiguous=np.full(len(loc), dst), nonexistent="NaT")
        out.append(np.where(a.isna(), NAT, a.as_unit("ns").asi8)[codes])
    return out[0], out[1]


def parse_texts(texts: pa.Array, tz: str) -> tuple[np.ndarray, ...]:
    """(form, utc, std, naive) of distinct stripped texts (an Arrow string array)."""
    n = len(texts)
    form = np.zeros(n, dtype=np.int8)
    utc = np.full(n, NAT, dtype=np.int64)
    naive = np.full(n, NAT, dtype=np.int64)
    has_off = pc.fill_null(pc.match_substring_regex(texts, OFFSET_RE), False)
    has_off = has_off.to_numpy(zero_copy_only=False)
    s = pd.Series(texts.to_pylist(), dtype=object)
    for off in (True, False):
        sel = np.flatnonzero(has_off == off)
        if not len(sel):
            continue
        d = pd.to_datetime(s.iloc[sel], format="ISO8601", utc=off, errors="coerce")
        good = _in_range(d)
        ns = pd.DatetimeIndex(d[good]).as_unit("ns").asi8
        (utc if off else naive)[sel[good]] = ns
        form[sel[good]] = 1 if off else 2
    utc, std = _split_naive(form, utc, naive, tz)
    return form, utc, std, naive


def _split_naive(form, utc, naive, tz):
    std = np.full(len(form), NAT, dtype=np.int64)
    nv = form == 2
    if nv.any():
        utc = utc.copy()
        utc[nv], std[nv] = localise(naive[nv], tz)
    return utc, std


def text_times(arr: pa.Array, tz: str) -> Times:
    """Times of a text column (plain or dictionary-encoded); each distinct text parsed once."""
    if not pa.types.is_dictionary(arr.type):
        arr = pc.dictionary_encode(arr)
    values = pc.utf8_trim_whitespace(arr.dictionary.cast(pa.string()))
    idx = np_of(arr.indices.fill_null(-1) if arr.indices.null_count else arr.indices)
    form, utc, std, naive = parse_texts(values, tz)
    blank = pc.equal(values, "").to_numpy(zero_copy_only=False)
    if arr.null_count:  # a null (blank Parquet or wide-CSV cell) takes an appended entry
        idx = np.where(idx < 0, len(form), idx)
        form, utc, std, naive, blank = (np.append(x, v) for x, v in (
            (form, 0), (utc, NAT), (std, NAT), (naive, NAT), (blank, True)))
    text_of = None

    def text(pos: np.ndarray) -> list[str]:
        nonlocal text_of
        text_of = values.to_pylist() + [""] if text_of is None else text_of
        return [text_of[i] for i in idx[pos]]

    return Times(form, utc, std, naive, idx, text, blank)


def typed_times(arr: pa.Array, tz: str) -> Times:
    """Times of a Parquet timestamp column: time-zone aware → form 1, naive → form 2."""
    aware = arr.type.tz is not None
    unit = arr.type.unit
    raw = pc.cast(arr, pa.int64())
    raw = np_of(raw.fill_null(NAT) if raw.null_count else raw)
    per_ns = {"s": 10**9, "ms": 10**6, "us": 10**3, "ns": 1}[unit]
    lo = _LO.as_unit("ns").value // per_ns
    hi = _HI.as_unit("ns").value // per_ns
    if len(raw) and raw.min() >= lo and raw.max() <= hi:  # every value usable
        ns = raw * per_ns if per_ns != 1 else raw
        form = np.full(len(ns), 1 if aware else 2, dtype=np.int8)
    else:
        ok = (raw != NAT) & (raw >= lo) & (raw <= hi)
        ns = np.where(ok, raw * per_ns, NAT)
        form = np.where(ok, 1 if aware else 2, 0).astype(np.int8)
    if aware:  # std and naive matter only for naive times: no arrays made for them
        return Times(form, ns, ns, ns, None, lambda pos: _typed_text(arr, pos))
    utc, std = _split_naive(form, np.full(len(ns), NAT, dtype=np.int64), ns, tz)
    return Times(form, utc, std, ns, None, lambda pos: _typed_text(arr, pos))


def _typed_text(arr: pa.Array, pos: np.ndarray) -> list[str]:
    """Timestamps as pandas prints them (e.g. '9999-12-31 00:00:00+00:00'); NaT for null."""
    tz = arr.type.tz
    out = []
    for v in arr.take(pa.array(np.asarray(pos, dtype=np.int64))).to_pylist():
        if v is None:
            out.append("NaT")
            continue
        t = pd.Timestamp(v)
        out.append(str(t.tz_convert(tz) if tz and t.tzinfo is not None else t))
    return out


def batch_times(arr: pa.Array, tz: str) -> Times:
    """Times of any timestamp column: timestamp types directly, everything else as text."""
    if pa.types.is_timestamp(arr.type):
        return typed_times(arr, tz)
    if pa.types.is_dictionary(arr.type) and pa.types.is_string(arr.type.value_type):
        return text_times(arr, tz)
    if not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
        arr = pc.cast(arr, pa.string())
    return text_times(arr, tz)


class Ambiguity:
    """The repeated autumn hour, resolved by order: per series, the first reading at a local
    time is summer time, the second standard time, a third cannot be placed.  Counts carry
    from batch to batch (only the few rows in the repeated hour are kept)."""

    def __init__(self):
        self.seen: pd.DataFrame | None = None  # columns k, t, n: readings so far

    def order(self, key: list, naive: np.ndarray) -> np.ndarray:
        """0, 1, 2, ... per row: how many earlier rows had this (series key, naive time)."""
        df = pd.DataFrame({"k": pd.Series(key, dtype=object), "t": naive})
        within = df.groupby(["k", "t"], sort=False).cumcount().to_numpy()
        before = np.zeros(len(df), dtype=np.int64)
        if self.seen is not None:
            m = df.merge(self.seen, on=["k", "t"], how="left")["n"]
            before = m.fillna(0).to_numpy(dtype=np.int64)
        counts = df.groupby(["k", "t"], sort=False).size().rename("n").reset_index()
        both = counts if self.seen is None else pd.concat([self.seen, counts])
        self.seen = both.groupby(["k", "t"], sort=False)["n"].sum().reset_index()
        return before + within
