"""The result of reading a metered file, the constants of the rules, and message helpers."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

TOTAL_ID = "TOTAL"
REQUIRED_COLUMNS = ("timestamp", "feeder_id", "mw")
#: problems of one kind listed before the rest are only counted
MAX_LISTED = 50
#: identical readings over at least this long flag a feeder as flat-lined
FLAT_LINE_MIN_H = 24.0
#: out-of-range rule, see the package docstring
RANGE_FACTOR = 1.5
RANGE_MARGIN_MW = 0.1
#: gap windows named per feeder in a gap_fill = error listing
MAX_WINDOWS_LISTED = 5

NS_PER_S = 10**9
NS_PER_MIN = 60 * NS_PER_S
NS_PER_H = 60 * NS_PER_MIN
NS_PER_DAY = 24 * NS_PER_H
NAT = np.iinfo(np.int64).min
LOCAL_FMT = "%Y-%m-%d %H:%M"
EXAMPLE = "e.g. 2025-03-30T03:00:00+02:00, 2025-03-30T01:00:00Z or local 2025-03-30 03:00"


@dataclass(frozen=True)
class MeteredData:
    """Metered readings aligned to the study intervals.

    ``values_mw[feeder, interval]`` in the study's feeder order, NaN where no reading;
    ``total_mw[interval]`` from the TOTAL series (None when the file has none in the year);
    ``has_data[feeder]``: the feeder has at least one reading in the year.
    ``reading_stats`` (one row per feeder id plus TOTAL) summarises the readings for the
    data-quality flags: ``n_readings``, ``min_mw``, ``max_mw``, ``n_high``, ``n_low``
    (out-of-range counts), ``flat_h``, ``flat_mw``, ``flat_start_ns`` (longest run of
    identical readings).  ``gap_runs`` = ``(feeder, first, end)`` index arrays of the runs of
    intervals without a reading of the feeders that have data.

    ``owns_values``: the array was made by :func:`read_metered` and nobody else holds it, so
    :func:`allocator.year.build_year` fills the gaps into it in place and uses it as
    ``Year.net_mw`` (read-only from then on; ``gap_runs`` still says where the gaps were).
    This keeps a metered year at one ``[feeder, interval]`` array.  Pass
    ``dataclasses.replace(m, values_mw=m.values_mw.copy())`` to keep the raw readings.

    Several metered years (:mod:`.years`): ``year`` is the calendar year of the arrays (None:
    the study year, the one-year case) and ``span`` the ``(first, end)`` intervals of the
    data in it, the only ones judged (None: the whole year).  ``reading_span_ns`` = the
    first and last reading start in the file(s), inside the year or not (UTC ns).
    """

    file: str
    feeder_ids: tuple[str, ...]
    values_mw: np.ndarray
    total_mw: np.ndarray | None
    has_data: np.ndarray
    timestamps_utc: pd.DatetimeIndex | None = None
    interval_minutes: int | None = None
    notes: tuple[str, ...] = ()
    reading_stats: pd.DataFrame | None = None
    gap_runs: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
    layout: str = "long"  # "long" | "wide"
    owns_values: bool = False
    year: int | None = None
    span: tuple[int, int] | None = None
    reading_span_ns: tuple[int, int] | None = None

    @property
    def n_feeders_with_data(self) -> int:
        return int(np.count_nonzero(self.has_data))


def np_of(arr) -> np.ndarray:
    """An Arrow array as numpy: without a copy where Arrow allows it (no nulls, not bool).
    (``to_numpy(zero_copy_only=False)`` takes a slow path even for arrays that need no copy:
    measured 62 ms against 0.01 ms for a million int32 dictionary indices.)"""
    if arr.null_count == 0:
        try:
            return arr.to_numpy(zero_copy_only=True)
        except Exception:  # bool, or a type numpy cannot view
            pass
    return arr.to_numpy(zero_copy_only=False)


def ns_of(idx: pd.DatetimeIndex) -> np.ndarray:
    """int64 nanoseconds since the epoch (UTC) of a tz-aware index."""
    return idx.tz_convert("UTC").as_unit("ns").asi8


def local_text(t_ns: np.ndarray, tz: str) -> np.ndarray:
    """ISO 8601 local time with its UTC offset of UTC nanosecond instants (the one time
    format of every output, :func:`allocator.timefmt.iso_local`)."""
    from ..timefmt import iso_local

    idx = pd.DatetimeIndex(np.asarray(t_ns, dtype="datetime64[ns]")).tz_localize("UTC")
    return np.asarray(iso_local(idx, tz), dtype=object)


def fmt_minutes(ns: float) -> str:
    m = ns / NS_PER_MIN
    if m >= 1440 and m % 1440 == 0:
        d = int(m // 1440)
        return f"{d} day{'s' if d != 1 else ''}"
    if m >= 60 and m % 60 == 0:
        return f"{int(m // 60)} h"
    return f"{m:g} min"


def names(ids: list[str], n: int = 5) -> str:
    head = ", ".join(ids[:n])
    return head + (f" and {len(ids) - n} more" if len(ids) > n else "")


def series_ids(study) -> list[str]:
    """Row names of the reader's arrays: the study's feeders, then TOTAL."""
    return list(study.feeder_ids) + [TOTAL_ID]
