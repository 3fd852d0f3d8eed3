"""A year of per-feeder net load on the study's own calendar: ``Study (+ metered) → Year``.

Intervals run from local midnight on 1 January to local midnight on 1 January of the next
year in the study time zone, at ``interval_minutes``; they are spaced in absolute (UTC) time,
so the spring DST day has 23 hours of intervals and the autumn one 25.  Each interval takes
the profile value of its *local* wall-clock start; the repeated autumn hour takes the same
values twice.  Net load = gross load − PV, in MW, negative when a feeder exports.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from .domain import DAY_TYPES, MINUTES_PER_DAY, FeederFlag, Scenario, Study
from .periods import period_index
from .solar import clearsky_pv_pu
from .timegrid import day_type_index, holiday_dates, study_intervals

if TYPE_CHECKING:  # pragma: no cover
    from .metered import MeteredData

#: rows of the [feeder, interval] array built per chunk (bounds temporaries)
_CHUNK_FEEDERS = 256


@dataclass(frozen=True)
class Year:
    """The study year.  Arrays are ``[feeder, interval]`` (feeder order of the study) or
    ``[interval]``.  ``timestamps_utc`` are the interval *starts*, time-zone aware (UTC)."""

    timestamps_utc: pd.DatetimeIndex
    timezone: str
    interval_minutes: int
    feeder_ids: tuple[str, ...]
    net_mw: np.ndarray  # [feeder, interval]
    demand_mw: np.ndarray  # [interval]
    pv_pu: np.ndarray  # [interval] PV per unit of installed capacity (before derate)
    season_index: np.ndarray  # [interval] index into Study.profiles.seasons
    day_type_index: np.ndarray  # [interval] index into DAY_TYPES
    source: str = "profiles"  # "profiles" | "metered"
    flags: tuple[FeederFlag, ...] = ()
    notes: tuple[str, ...] = field(default_factory=tuple)
    #: the scenario this year is (its name appears in every output)
    scenario: str = "clear_sky"
    #: how the scenario was made, for reports: pv kind, scales, calendar year
    scenario_info: dict = field(default_factory=dict)
    #: ``(first, end)`` intervals judged (a partial metered year, see
    #: :mod:`allocator.metered.years`); None = every interval
    judged_span: tuple[int, int] | None = None

    @property
    def n_intervals(self) -> int:
        return len(self.timestamps_utc)

    @property
    def judged(self) -> np.ndarray:
        """``[interval]`` True where the check judges (all but outside a partial year's
        data span)."""
        out = np.ones(self.n_intervals, dtype=bool)
        if self.judged_span is not None:
            a, b = self.judged_span
            out[:a] = False
            out[b:] = False
        return out

    @property
    def interval_h(self) -> float:
        return self.interval_minutes / 60.0

    @cached_property
    def local_times(self) -> pd.DatetimeIndex:
        return self.timestamps_utc.tz_convert(self.timezone)

    @property
    def calendar_year(self) -> int:
        """The local calendar year the intervals cover."""
        return int(self.local_times[0].year) if self.n_intervals else 0


# --------------------------------------------------------------------------------------------
# builder
# --------------------------------------------------------------------------------------------
def profile_table_pu(study: Study, interval_minutes: int) -> np.ndarray:
    """``[profile, season, day_type, slot]`` per-unit values at the interval resolution:
    a coarser profile is held over the finer intervals, a finer one averaged."""
    v = study.profiles.values_pu
    n_slots = MINUTES_PER_DAY // interval_minutes
    return v.reshape(v.shape[:3] + (n_slots, interval_minutes)).mean(axis=-1)


def gross_load_mw(study: Study, local_times: pd.DatetimeIndex, season_idx: np.ndarray,
                  day_idx: np.ndarray, out: np.ndarray | None = None,
                  rows: np.ndarray | None = None) -> np.ndarray:
    """Gross load ``[feeder, interval]`` MW = peak_mw × profile value at the local time;
    ``rows`` = feeder indices to compute (default all), in that order."""
    iv = study.settings.interval_minutes
    table = profile_table_pu(study, iv)
    n_p, n_s, n_d, n_slots = table.shape
    minute = (local_times.hour * 60 + local_times.minute).to_numpy()
    slot = np.minimum(minute // iv, n_slots - 1)
    key = (season_idx.astype(np.intp) * n_d + day_idx.astype(np.intp)) * n_slots + slot
    flat = table.reshape(n_p, -1)[:, key]  # [profile, interval] - small
    rows = np.arange(len(study.feeders)) if rows is None else np.asarray(rows, dtype=np.intp)
    prof = study.profile_index[rows]
    peak = study.peak_mw[rows]
    n_f = len(rows)
    if out is None:
        out = np.empty((n_f, len(key)), dtype=float)
    for a in range(0, n_f, _CHUNK_FEEDERS):
        b = min(a + _CHUNK_FEEDERS, n_f)
        np.multiply(flat[prof[a:b]], peak[a:b, None], out=out[a:b])
    return out


REFERENCE_SCENARIO = Scenario("clear_sky", "clear_sky", 0)


def scenario_pv_pu(study: Study, scenario: Scenario, ts: pd.DatetimeIndex) -> np.ndarray:
    """``[interval]`` PV per unit of installed capacity for the scenario's PV kind:
    clear sky (:mod:`allocator.solar`), none (zeros) or a weather year
    (:mod:`allocator.weather`, on the plane of ``pv_tilt_deg``/``pv_azimuth_deg``)."""
    s = study.settings
    if scenario.pv == "none":
        return np.zeros(len(ts))
    if scenario.pv == "weather":
        from .weather import read_weather, weather_pv_pu

        return weather_pv_pu(read_weather(scenario.weather_file), ts, s.timezone,
                             s.interval_minutes, tilt_deg=s.pv_tilt_deg,
                             azimuth_deg=s.pv_azimuth_deg)
    return clearsky_pv_pu(ts, s.interval_minutes, s.latitude_deg, s.longitude_deg)


@dataclass(frozen=True)
class Calendar:
    """One year's intervals and what each one is: local time, season, day type, PV."""

    timestamps_utc: pd.DatetimeIndex
    local_times: pd.DatetimeIndex
    season_index: np.ndarray
    day_type_index: np.ndarray
    pv_pu: np.ndarray


def study_calendar(study: Study, scenario: Scenario | None = None) -> Calendar:
    """The calendar of ``scenario``'s year (default the clear-sky study year): its own
    weekdays, holidays, DST days and PV per unit."""
    s = study.settings
    sc = scenario or REFERENCE_SCENARIO
    cal_year = s.year if scenario is None else sc.year
    ts = study_intervals(cal_year, s.timezone, s.interval_minutes)
    local = ts.tz_convert(s.timezone)
    season_idx = study.profiles.month_season[local.month.to_numpy() - 1]
    day_idx = day_type_index(local, holiday_dates(s, cal_year))
    pv_pu = scenario_pv_pu(study, sc, ts)
    return Calendar(ts, local, season_idx, day_idx, pv_pu)


def profile_net_mw(study: Study, cal: Calendar, rows: np.ndarray | None = None,
                   out: np.ndarray | None = None, load_scale: float = 1.0,
                   pv_scale: float = 1.0) -> np.ndarray:
    """Profile-built net load ``[feeder, interval]`` of ``rows`` (default all feeders):
    load_scale × gross − pv_scale × pv_mw × pv_derate × the calendar's PV per unit."""
    rows = np.arange(len(study.feeders)) if rows is None else np.asarray(rows, dtype=np.intp)
    net = gross_load_mw(study, cal.local_times, cal.season_index, cal.day_type_index,
                        out=out, rows=rows)
    if load_scale != 1.0:
        net *= load_scale
    pv_cap = study.pv_mw[rows] * study.settings.pv_derate * pv_scale
    for a in range(0, net.shape[0], _CHUNK_FEEDERS):
        b = min(a + _CHUNK_FEEDERS, net.shape[0])
        net[a:b] -= pv_cap[a:b, None] * cal.pv_pu[None, :]
    return net


def build_year(study: Study, metered: "MeteredData | None" = None,
               scenario: Scenario | None = None) -> Year:
    """Build one year of per-feeder net load: the scenario's calendar year, PV and scales.

    Profile path: net = load_scale × peak_mw × profile(season, day type, local time)
    − pv_scale × pv_mw × pv_derate × PV per unit (clear sky, none or a weather year).
    ``scenario`` None is the clear-sky study year.  With ``metered`` data (the metered
    scenario, in the study year; ``scenario`` is ignored), metered values are used where
    present and gaps are filled by ``gap_fill`` from the clear-sky profiles (see
    :mod:`allocator.metered`); profile values are computed only for the feeders that need
    them, and the metered array read by :func:`~allocator.metered.read_metered` becomes
    ``net_mw`` (filled in place).  Demand per ``demand_basis``: ``feeders`` = sum of all
    feeders' net load; ``metered_total`` = the metered TOTAL series.
    """
    s = study.settings
    if metered is not None:
        scenario = None if metered.year is None else Scenario(
            f"metered {metered.year}", "clear_sky", metered.year)
    sc = scenario or REFERENCE_SCENARIO
    cal = study_calendar(study, scenario)
    flags: tuple[FeederFlag, ...] = ()
    notes: list[str] = []
    source = "profiles"
    total = None
    if metered is not None:
        from .metered import merge_metered

        net, total, flags, more = merge_metered(
            study, metered, cal.timestamps_utc, lambda rows: profile_net_mw(study, cal, rows))
        notes += more
        source = "metered"
    else:
        from .memory import require

        n_f, n_iv = len(study.feeders), len(cal.timestamps_utc)
        require(n_f * n_iv * 8, f"the year of net load ({n_f:,} feeders × {n_iv:,} intervals "
                "× 8 bytes)", study.path)
        net = profile_net_mw(study, cal, load_scale=sc.load_scale, pv_scale=sc.pv_scale)
    if s.demand_basis == "metered_total":
        if total is None:
            from .errors import InputError, Problem

            raise InputError([Problem(study.path, "demand_basis is 'metered_total' but no "
                                      "metered file with TOTAL rows was given (use --metered)",
                                      "settings", None, "value")])
        demand = total
    else:
        demand = net.sum(axis=0)
    net.setflags(write=False)
    demand = np.asarray(demand, dtype=float)
    demand.setflags(write=False)
    name = sc.name if metered is None or metered.year is not None else "metered"
    info = ({"pv": "metered", "pv_scale": 1.0, "load_scale": 1.0, "year": sc.year
             if scenario is not None else s.year} if metered is not None else
            {"pv": sc.pv_text, "pv_scale": sc.pv_scale, "load_scale": sc.load_scale,
             "year": sc.year if scenario is not None else s.year})
    span = None if metered is None else metered.span
    if span is not None:
        info.update(_coverage(cal, span, s.timezone))
        notes += [n for n in (_coverage_note(info),) if n]
    return Year(cal.timestamps_utc, s.timezone, s.interval_minutes, study.feeder_ids, net,
                demand, cal.pv_pu, cal.season_index, cal.day_type_index, source,
                tuple(flags), tuple(notes), name, info, span)


def _coverage(cal: Calendar, span: tuple[int, int], tz: str) -> dict:
    """A metered year's data span for reports: judged intervals, coverage %, first and end
    local times (ISO 8601 with offset), partial or not."""
    from .timefmt import iso_local

    a, b = span
    ts = cal.timestamps_utc
    step = ts[1] - ts[0]
    return {"judged_intervals": b - a, "coverage_pct": 100.0 * (b - a) / len(ts),
            "partial": b - a < len(ts),
            "judged_from": iso_local(ts[min(a, len(ts) - 1)], tz),
            "judged_to": iso_local(ts[max(b, 1) - 1] + step, tz)}


def _coverage_note(info: dict) -> str | None:
    if not info["partial"]:
        return None
    return (f"partial year: judged only on its metered data span from {info['judged_from']} "
            f"to {info['judged_to']} ({info['judged_intervals']:,} intervals, "
            f"{info['coverage_pct']:.1f} % of {info['year']})")


def on_study_calendar(study: Study, year: Year) -> bool:
    """True when ``year`` covers the study's own calendar year (``settings.year``): the year
    whose calendar the switching operations are counted on, ``--at`` times refer to and the
    work list's metered figures come from."""
    return year.calendar_year == study.settings.year


def study_calendar_year(study: Study, years) -> Year:
    """The year on the study calendar among ``years`` (:func:`on_study_calendar`), else the
    first."""
    years = tuple(years)
    return next((y for y in years if on_study_calendar(study, y)), years[0])


def year_period_index(study: Study, year: Year) -> np.ndarray:
    """``[interval]`` period in force at each interval of ``year`` (study.periods)."""
    return period_index(year.local_times, year.day_type_index, study.periods)


def year_summary(study: Study, year: Year) -> pd.DataFrame:
    """One row per feeder: mean/min/max net MW, exporting hours, flags - for the summary CSV."""
    net = year.net_mw if year.judged_span is None else year.net_mw[:, slice(*year.judged_span)]
    h = year.interval_h
    flag_map: dict[str, list[str]] = {}
    for fl in year.flags:
        flag_map.setdefault(fl.feeder_id, []).append(fl.flag)
    return pd.DataFrame({
        "feeder_id": list(study.feeder_ids),
        "substation": [f.substation for f in study.feeders],
        "profile": [f.profile for f in study.feeders],
        "relay": [f.relay for f in study.feeders],
        "peak_mw": study.peak_mw,
        "pv_mw": study.pv_mw,
        "mean_net_mw": net.mean(axis=1),
        "min_net_mw": net.min(axis=1),
        "max_net_mw": net.max(axis=1),
        "energy_mwh": net.sum(axis=1) * h,
        "exporting_hours": (net < 0).sum(axis=1) * h,
        "flags": [";".join(flag_map.get(f, [])) for f in study.feeder_ids],
    })


__all__ = ["Year", "FeederFlag", "Calendar", "build_year", "study_calendar",
           "profile_table_pu", "gross_load_mw",
           "profile_net_mw", "year_summary", "year_period_index", "on_study_calendar",
           "study_calendar_year", "DAY_TYPES"]
