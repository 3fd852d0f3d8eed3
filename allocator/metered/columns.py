"""Feeder ids and MW values of one batch, decoded without a Python object per row.

Feeder ids are dictionary-encoded once per batch: the few distinct texts are stripped and
looked up among the study's ids (``pyarrow.compute.index_in``), and every row takes its
feeder index from its dictionary index.  MW text is cast to float64 by Arrow; a batch with
a value Arrow does not read (white space, a unit, a word) is read again by pandas'
``to_numeric``, which decides what counts as a number, as before.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from .model import TOTAL_ID, np_of


def _as_dictionary(arr: pa.Array) -> pa.DictionaryArray:
    if not pa.types.is_dictionary(arr.type):
        if not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
            arr = pc.cast(arr, pa.string())
        arr = pc.dictionary_encode(arr)
    return arr


@dataclass
class FeederCodes:
    """Per row: ``code`` (0..nf-1 study feeder, nf TOTAL, -1 blank or unknown), ``blank``
    (None when no row is blank); ``unknown`` = (distinct ids, first batch position, count)
    of ids not in the study."""

    code: np.ndarray
    blank: np.ndarray | None
    unknown: tuple[list[str], np.ndarray, np.ndarray]
    text: Callable[[np.ndarray], list[str]]


def match_ids(values: pa.Array, study_ids: pa.Array) -> np.ndarray:
    """Feeder index of stripped id texts: study order, len(study_ids) for TOTAL (any case,
    unless a feeder is called so), -1 otherwise."""
    nf = len(study_ids)
    code = pc.fill_null(pc.index_in(values, value_set=study_ids), -1)
    code = code.to_numpy(zero_copy_only=False).astype(np.int64)
    is_total = pc.fill_null(pc.equal(pc.utf8_upper(values), TOTAL_ID), False)
    code[is_total.to_numpy(zero_copy_only=False) & (code < 0)] = nf
    return code


def feeder_codes(arr: pa.Array, study_ids: pa.Array) -> FeederCodes:
    d = _as_dictionary(arr)
    values = pc.utf8_trim_whitespace(d.dictionary.cast(pa.string()))
    idx = np_of(d.indices)
    if d.null_count:  # nulls take an appended blank entry
        values = pa.concat_arrays([values, pa.array([""])])
        idx = np_of(d.indices.fill_null(len(values) - 1))
    dcode = match_ids(values, study_ids)
    dblank = pc.equal(values, "").to_numpy(zero_copy_only=False)
    unknown = ([], np.zeros(0, np.int64), np.zeros(0, np.int64))
    unk_entries = np.flatnonzero((dcode < 0) & ~dblank)
    if len(unk_entries):
        rows = np.flatnonzero(np.isin(idx, unk_entries))
        u, first, cnt = np.unique(idx[rows], return_index=True, return_counts=True)
        o = np.argsort(rows[first], kind="stable")
        unknown = (values.take(pa.array(u[o])).to_pylist(), rows[first][o], cnt[o])
    py = None

    def text(pos: np.ndarray) -> list[str]:
        nonlocal py
        py = values.to_pylist() if py is None else py
        return [py[i] for i in idx[pos]]

    return FeederCodes(dcode[idx], dblank[idx] if dblank.any() else None, unknown, text)


@dataclass
class Values:
    """Per row: ``mw`` float64 (NaN where not a number), ``blank`` (empty text or null;
    None when no row is), ``text(pos)`` the value as written, for messages."""

    mw: np.ndarray
    blank: np.ndarray
    text: Callable[[np.ndarray], list[str]]


def _numeric(arr: pa.Array) -> Values:
    if arr.type != pa.float64():
        arr = pc.cast(arr, pa.float64())
    mw = np_of(arr)  # nulls become NaN
    return Values(mw, None, lambda pos: [f"{v}" for v in mw[pos]])


def _from_text(arr: pa.Array, decimal_comma: bool) -> Values:
    txt = pc.utf8_trim_whitespace(arr)
    num = pc.replace_substring(txt, ",", ".") if decimal_comma else txt
    blank = None
    try:
        mw = np_of(pc.cast(num, pa.float64()))  # nulls: NaN
    except pa.ArrowInvalid:
        s = pd.Series(num.to_numpy(zero_copy_only=False), dtype=object)
        mw = pd.to_numeric(s, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    if arr.null_count or np.isnan(mw).any():  # only then can a value be blank
        blank = pc.fill_null(pc.equal(txt, ""), True).to_numpy(zero_copy_only=False)
    return Values(mw, blank, lambda pos: [t if t is not None else "" for t in
                                          txt.take(pa.array(pos)).to_pylist()])


def mw_values(arr: pa.Array, decimal_comma: bool) -> Values:
    """MW of a column: numbers as they are, text parsed (decimal comma after ';')."""
    t = arr.type
    if pa.types.is_dictionary(t):
        arr, t = arr.cast(t.value_type), t.value_type
    if (pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t)):
        return _numeric(arr)
    if pa.types.is_boolean(t):
        txt = pc.if_else(arr, "True", "False").fill_null("")
        return _from_text(txt, False)
    if not (pa.types.is_string(t) or pa.types.is_large_string(t)):
        arr = pc.cast(arr, pa.string())
    return _from_text(arr, decimal_comma)
