"""Switching periods: which period of the ``periods`` sheet is in force at each interval.

A period covers some months, some day types (workday / saturday / sunday, a public holiday
counting as the day type :func:`allocator.year.day_type_index` gives it) and a local
wall-clock window ``[from, to)``; ``to <= from`` wraps past midnight (equal: the whole day).
An interval belongs to the period that covers its local wall-clock *start*.  Coverage is
decided on the grid ``[month, day_type, minute of day]`` (every month has every day type),
so "every interval of the year in exactly one period" is a check on 12 × 3 × 1440 cells.

Pure functions; arrays in the names' units (minutes of the local day, month 1..12).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .domain import DAY_TYPES, MINUTES_PER_DAY, Period

#: at most this many cells groups are named in one coverage message
MAX_LISTED = 6


def minute_mask(p: Period) -> np.ndarray:
    """``[month(12), day_type(3), minute(1440)]`` bool: the cells period ``p`` covers."""
    minute = np.arange(MINUTES_PER_DAY)
    if p.from_min < p.to_min:
        in_day = (minute >= p.from_min) & (minute < p.to_min)
    elif p.from_min > p.to_min:
        in_day = (minute >= p.from_min) | (minute < p.to_min)
    else:
        in_day = np.ones(MINUTES_PER_DAY, dtype=bool)
    months = np.zeros(12, dtype=bool)
    months[np.asarray(p.months, dtype=np.intp) - 1] = True
    days = np.zeros(len(DAY_TYPES), dtype=bool)
    days[np.asarray(p.day_types, dtype=np.intp)] = True
    return months[:, None, None] & days[None, :, None] & in_day[None, None, :]


def owner_table(periods: tuple[Period, ...]) -> tuple[np.ndarray, np.ndarray]:
    """(owner, count) ``[12, 3, 1440]``: the first period covering each cell (−1: none)
    and how many periods cover it."""
    masks = np.stack([minute_mask(p) for p in periods])
    count = masks.sum(axis=0)
    owner = np.where(count > 0, masks.argmax(axis=0), -1).astype(np.int16)
    return owner, count


def _hhmm(minute: int) -> str:
    return f"{minute // 60:02d}:{minute % 60:02d}"


def _runs(row: np.ndarray) -> tuple[tuple[int, int], ...]:
    """Half-open minute runs ``(start, end)`` where the bool ``row[1440]`` is True."""
    d = np.diff(np.concatenate(([0], row.astype(np.int8), [0])))
    return tuple(zip(np.flatnonzero(d == 1).tolist(), np.flatnonzero(d == -1).tolist()))


def _month_text(months: list[int]) -> str:
    """'months 1-3, 11' style list of month numbers."""
    parts, start = [], months[0]
    for a, b in zip(months, months[1:] + [None]):
        if b != a + 1:
            parts.append(f"{start}" if start == a else f"{start}-{a}")
            start = b
    return ("month " if len(months) == 1 else "months ") + ", ".join(parts)


def describe_cells(mask: np.ndarray, interval_minutes: int = 1) -> list[str]:
    """Compact text for the cells of ``mask[12, 3, 1440]``: months with the same day type
    and time runs are merged ('months 4-9, sunday, 22:00-24:00')."""
    groups: dict[tuple, list[int]] = {}
    for d in range(len(DAY_TYPES)):
        for m in range(12):
            runs = _runs(mask[m, d])
            if runs:
                groups.setdefault((d, runs), []).append(m + 1)
    merged: dict[tuple, list[str]] = {}
    for (d, runs), months in groups.items():
        merged.setdefault((tuple(months), runs), []).append(DAY_TYPES[d])
    out = []
    for (months, runs), days in merged.items():
        times = ", ".join(f"{_hhmm(a)}-{_hhmm(b)}" for a, b in runs)
        out.append(f"{_month_text(list(months))}, {'/'.join(days)}, {times}")
    return out


def coverage_problems(periods: tuple[Period, ...]) -> list[str]:
    """Messages for cells in no period and for each pair of periods that overlap."""
    masks = np.stack([minute_mask(p) for p in periods])
    out = []
    gaps = describe_cells(~masks.any(axis=0))
    if gaps:
        more = f" (and {len(gaps) - MAX_LISTED} more)" if len(gaps) > MAX_LISTED else ""
        out.append("times in no period: " + "; ".join(gaps[:MAX_LISTED]) + more +
                   "; every interval of the year must be in exactly one period")
    for i in range(len(periods)):
        both = masks[i] & masks[i + 1:]
        for k in np.flatnonzero(both.any(axis=(1, 2, 3))):
            j = i + 1 + int(k)
            cells = describe_cells(both[k])
            more = f" (and {len(cells) - MAX_LISTED} more)" if len(cells) > MAX_LISTED else ""
            out.append(f"periods '{periods[i].name}' and '{periods[j].name}' both cover "
                       + "; ".join(cells[:MAX_LISTED]) + more)
    return out


def period_index(local_times: pd.DatetimeIndex, day_type_idx: np.ndarray,
                 periods: tuple[Period, ...]) -> np.ndarray:
    """``[interval]`` index into ``periods`` of the period in force at each interval start
    (local wall clock); vectorized lookup in :func:`owner_table`.  Periods must cover
    every cell (validated by the workbook reader)."""
    if len(periods) == 1:
        return np.zeros(len(local_times), dtype=np.intp)
    owner, _ = owner_table(periods)
    month = local_times.month.to_numpy() - 1
    minute = local_times.hour.to_numpy() * 60 + local_times.minute.to_numpy()
    out = owner[month, np.asarray(day_type_idx, dtype=np.intp), minute].astype(np.intp)
    return _hold_repeated_hour(local_times, out)


def _hold_repeated_hour(local_times: pd.DatetimeIndex, per: np.ndarray) -> np.ndarray:
    """In the repeated autumn hour the wall clock goes back; its second pass keeps the
    period in force at the end of the first, so a boundary inside that hour switches once
    (at its first occurrence) rather than twice.  A boundary at a spring wall time that
    does not exist takes effect at the first interval after the jump (by construction: that
    interval's wall time is already in the new period)."""
    wall = local_times.tz_localize(None).asi8
    if wall.size < 2:
        return per
    fold = np.r_[False, wall[1:] <= np.maximum.accumulate(wall)[:-1]]
    if not fold.any():
        return per
    last = np.maximum.accumulate(np.where(~fold, np.arange(wall.size), 0))
    out = per.copy()
    out[fold] = per[last[fold]]
    return out


__all__ = ["minute_mask", "owner_table", "coverage_problems", "describe_cells",
           "period_index"]
