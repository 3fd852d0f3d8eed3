"""The study calendar: the intervals of a local calendar year and what kind of day each is.

Intervals run from local midnight on 1 January to local midnight on 1 January of the next
year in the study time zone, spaced in absolute (UTC) time, so the spring DST day has 23
hours of intervals and the autumn one 25.  Public holidays come from the ``holidays``
package and count as Sundays.  Plain functions of the settings; no load, no PV.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .domain import Settings


def study_intervals(year: int, timezone: str, interval_minutes: int) -> pd.DatetimeIndex:
    """Interval starts (UTC) covering the local calendar year in ``timezone``."""
    start = pd.Timestamp(year=year, month=1, day=1, tz=timezone)
    end = pd.Timestamp(year=year + 1, month=1, day=1, tz=timezone)
    n = int((end - start) / pd.Timedelta(minutes=interval_minutes))
    return pd.date_range(start.tz_convert("UTC"), periods=n,
                         freq=pd.Timedelta(minutes=interval_minutes))


def holiday_dates(settings: Settings, year: int | None = None) -> set:
    """Public holidays of the configured country/subdivision for ``year`` (default the
    study year; ``holidays`` package); empty when no country is set."""
    if not settings.holiday_country:
        return set()
    import holidays

    cal = holidays.country_holidays(settings.holiday_country,
                                    subdiv=settings.holiday_subdivision,
                                    years=[settings.year if year is None else year])
    return set(cal.keys())


def day_type_index(local_times: pd.DatetimeIndex, holiday_set: set) -> np.ndarray:
    """``[interval]`` index into DAY_TYPES: Mon–Fri workday, Saturday, Sunday; a public
    holiday counts as Sunday (whatever weekday it falls on)."""
    dow = local_times.day_of_week.to_numpy()
    out = np.where(dow == 6, 2, np.where(dow == 5, 1, 0)).astype(np.int8)
    if holiday_set:
        dates = local_times.tz_localize(None).normalize()
        hol = pd.DatetimeIndex(sorted(pd.Timestamp(d) for d in holiday_set))
        out[dates.isin(hol)] = 2
    return out
