"""One time format for every output: ISO 8601 local time with its UTC offset.

Every CSV and JSON file writes instants as ``2025-06-02T03:00+02:00`` (local wall-clock time
of the study zone to the minute, then the offset from UTC that was in force), so a reader in
any country sees the year, the date in ISO order and which side of a DST change an interval
lies on.  Excel cells carry no zone, so the xlsx writer stores real datetime cells plus a
separate offset column (see :mod:`allocator.report.excel`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: strftime pattern of the local part; the offset is appended as ``+HH:MM``
_LOCAL = "%Y-%m-%dT%H:%M"


def _offset_text(idx: pd.DatetimeIndex) -> np.ndarray:
    """``+HH:MM`` / ``-HH:MM`` per instant of a zone-aware index (vectorized)."""
    off_min = ((idx.tz_localize(None) - idx.tz_convert("UTC").tz_localize(None))
               .to_numpy().astype("timedelta64[m]").astype(np.int64))
    sign = np.where(off_min < 0, "-", "+")
    a = np.abs(off_min)
    hh = np.char.zfill((a // 60).astype(str), 2)
    mm = np.char.zfill((a % 60).astype(str), 2)
    return np.char.add(np.char.add(np.char.add(sign, hh), ":"), mm)


def iso_local(times: pd.DatetimeIndex | pd.Timestamp, timezone: str | None = None):
    """ISO 8601 local time to the minute with its UTC offset, e.g. ``2025-06-02T03:00+02:00``.

    ``times`` must be zone-aware; ``timezone`` converts first (e.g. UTC instants to the study
    zone).  A single Timestamp gives a ``str``, an index gives an object array of ``str``.
    """
    if isinstance(times, pd.Timestamp):
        return str(iso_local(pd.DatetimeIndex([times]), timezone)[0])
    idx = pd.DatetimeIndex(times)
    if idx.tz is None:
        raise ValueError("iso_local needs zone-aware times")
    if timezone is not None:
        idx = idx.tz_convert(timezone)
    if len(idx) == 0:
        return np.array([], dtype=object)
    local = np.asarray(idx.strftime(_LOCAL), dtype=str)
    return np.char.add(local, _offset_text(idx)).astype(object)


def iso_utc(times: pd.DatetimeIndex) -> np.ndarray:
    """ISO 8601 UTC to the second with ``Z``, e.g. ``2024-12-31T23:00:00Z`` (object array)."""
    idx = pd.DatetimeIndex(times)
    if idx.tz is None:
        raise ValueError("iso_utc needs zone-aware times")
    return np.asarray(idx.tz_convert("UTC").strftime("%Y-%m-%dT%H:%M:%SZ"), dtype=object)


def offset_hours(times: pd.DatetimeIndex) -> np.ndarray:
    """UTC offset in hours per instant of a zone-aware index (for the xlsx offset column)."""
    idx = pd.DatetimeIndex(times)
    return ((idx.tz_localize(None) - idx.tz_convert("UTC").tz_localize(None))
            .to_numpy().astype("timedelta64[m]").astype(np.int64) / 60.0)


def split_iso(texts) -> tuple[pd.DatetimeIndex, np.ndarray]:
    """ISO 8601 local times with offset (the :func:`iso_local` form) → (local wall-clock
    times without a zone, UTC offset in hours), for the xlsx date cells and their offset
    column.  Blank or missing texts give NaT and NaN.  Vectorized on the fixed layout
    ``YYYY-MM-DDTHH:MM±HH:MM``."""
    s = pd.Series(list(texts), dtype=object).fillna("").astype(str)
    ok = s.str.len() == 22
    wall = pd.to_datetime(s.where(ok).str[:16], format=_LOCAL, errors="coerce")
    sign = np.where(s.str[16] == "-", -1.0, 1.0)
    hh = pd.to_numeric(s.where(ok).str[17:19], errors="coerce").to_numpy(dtype=float)
    mm = pd.to_numeric(s.where(ok).str[20:22], errors="coerce").to_numpy(dtype=float)
    return pd.DatetimeIndex(wall), sign * (hh + mm / 60.0)


def iso_now() -> str:
    """The computer's current local time in the same form (a run record's date-time)."""
    import datetime

    return iso_local(pd.Timestamp(datetime.datetime.now().astimezone()))


__all__ = ["iso_local", "iso_utc", "offset_hours", "split_iso", "iso_now"]
