"""Checks of the year builder (allocator.year / allocator.solar) against outside sources.

Outside references used here, each named again beside its check:

* BDEW standard load profiles (the older H0/G0-G6/L0-L2 tables and the 2025 G25/H25/L25/P25/
  S25 tables) as shipped, with their own series builder, in the ``demandlib`` package (PyPI,
  version 0.2.2).
* Public holidays: Western Easter from ``dateutil.easter`` (python-dateutil, PyPI) for the
  movable feasts; fixed dates and which state keeps which feast from memory.  (The BDEW
  tests give demandlib the ``holidays`` package's calendar, the same one the tool uses.)
* Solar position: NOAA Global Monitoring Division, "General Solar Position Calculations"
  (declination and equation-of-time Fourier approximations; coefficients from memory), and
  for the PV size the NOAA solar calculator equations (Meeus' low-precision solar
  coordinates, with NOAA's refraction approximation; coefficients from memory).
* Clear-sky irradiance: Haurwitz 1945, GHI = 1098 cos z exp(-0.057 / cos z) (from memory).
* The worked example of the NREL SPA: Reda & Andreas, Solar Energy 76 (2004) (values from
  memory).
* DST transition dates: the IANA time-zone database through Python's ``zoneinfo``; the rules
  themselves (EU: last Sunday of March / October; US: second Sunday of March / first Sunday
  of November since the Energy Policy Act of 2005) from memory.

Workbook data that is not taken from one of these sources (feeders, blocks, the resolution
test shapes) is invented test data.
"""

from __future__ import annotations

import math
import os
import warnings
from datetime import date, datetime, timedelta
from zoneinfo import ZoneInfo

import holidays
import numpy as np
import pandas as pd
import pytest
from demandlib.bdew._profiles25 import _bdew_datapath  # demandlib's BDEW table folder

from allocator.domain import DAY_TYPES, Settings
from allocator.solar import clearsky_ghi_w_per_m2, clearsky_pv_pu, solar_position_deg
from allocator.workbook import read_study
from allocator.timegrid import day_type_index, holiday_dates, study_intervals
from allocator.year import build_year
from wbfactory import BASE_SETTINGS, base_feeders, flat_profiles, write_workbook

SUNDAY = DAY_TYPES.index("sunday")
SATURDAY = DAY_TYPES.index("saturday")
WORKDAY = DAY_TYPES.index("workday")


def _study(tmp_path, name="study.xlsx", settings=None, **tables):
    s = dict(BASE_SETTINGS)
    s.update(settings or {})
    s = {k: v for k, v in s.items() if v is not None}  # None = leave the key out
    return read_study(write_workbook(tmp_path / name, settings=s, **tables))


def _feeder(fid, profile, peak=1.0, pv=0.0):
    return {"feeder_id": fid, "substation": "SUB", "profile": profile, "peak_mw": peak,
            "pv_mw": pv, "relay": "standard"}


def _local_dates(year):
    return np.asarray(year.local_times.tz_localize(None).normalize())


# ============================================================================================
# 1. BDEW standard load profiles vs demandlib
# ============================================================================================
BDEW_YEAR = 2025
BDEW_DAY_TYPES = {"WT": "workday", "SA": "saturday", "FT": "sunday"}  # BDEW names


def _bdew_holidays():
    # same calendar for both sides: German national holidays from the `holidays` package
    return holidays.country_holidays("DE", years=BDEW_YEAR)


def _hhmm(q):
    return f"{q // 4:02d}:{q % 4 * 15:02d}"


def _old_bdew_rows():
    """The older BDEW tables (demandlib's selp_series.csv): period x weekday 1..7 x 96
    quarter-hours.  Returns workbook profile rows (per unit of each profile's table max)."""
    selp = pd.read_csv(os.path.join(_bdew_datapath, "selp_series.csv"))
    names = ["h0", "g0", "g1", "g2", "g3", "g4", "g5", "g6", "l0", "l1", "l2"]
    rows = []
    for p in names:
        peak = selp[p].max()
        for period in ("winter", "transition", "summer"):
            sub = selp[selp["period"] == period]
            by_wd = {wd: sub[sub["weekday"] == wd][p].to_numpy() for wd in range(1, 8)}
            # BDEW defines one workday shape: demandlib repeats it for Monday..Friday.
            # Our format has one 'workday' type, so this must hold for the mapping to be exact.
            for wd in range(2, 6):
                assert np.array_equal(by_wd[1], by_wd[wd]), (p, period, wd)
            for dt, wd in (("workday", 1), ("saturday", 6), ("sunday", 7)):
                assert len(by_wd[wd]) == 96
                for q, v in enumerate(by_wd[wd]):
                    rows.append({"profile": p.upper(), "season": period, "day_type": dt,
                                 "time": _hhmm(q), "value": float(v) / peak})
    return names, rows


def _new_bdew_rows():
    """The 2025 BDEW tables (demandlib's g25/h25/l25/p25/s25.csv): month x {WT, SA, FT} x 96
    quarter-hours, energy per quarter-hour.  Seasons are the twelve months."""
    rows = []
    names = ["G25", "H25", "L25", "P25", "S25"]
    month_names = ["Januar", "Februar", "März", "April", "Mai", "Juni", "Juli", "August",
                   "September", "Oktober", "November", "Dezember"]
    for name in names:
        tab = pd.read_csv(os.path.join(_bdew_datapath, f"{name.lower()}.csv"), header=[0, 1])
        assert len(tab) == 96
        cols = [c for c in tab.columns if c[0] in month_names]
        assert len(cols) == 36
        peak = max(tab[c].max() for c in cols)
        for mname, bdew_dt in cols:
            season = f"m{month_names.index(mname) + 1:02d}"
            for q, v in enumerate(tab[(mname, bdew_dt)].to_numpy()):
                rows.append({"profile": name, "season": season,
                             "day_type": BDEW_DAY_TYPES[bdew_dt], "time": _hhmm(q),
                             "value": float(v) / peak})
    return names, rows


def _bdew_study(tmp_path, names, rows, seasons):
    return _study(tmp_path, "bdew.xlsx",
                  settings={"year": BDEW_YEAR, "timezone": "Europe/Berlin",
                            "interval_minutes": 15, "holiday_country": "DE",
                            "latitude": 51.0, "longitude": 10.0},
                  feeders=[_feeder(f"F_{n}", n.upper()) for n in names],  # pv_mw 0
                  profiles=rows, seasons=seasons)


def _wall_clock_alignment(year):
    """Our intervals are tz-aware and spaced in UTC; demandlib's index is naive local time
    with 96 quarter-hours every day (no DST).  Align by local wall-clock start: on
    2025-03-30 the wall times 02:00-02:45 do not exist in Europe/Berlin (we have none, so
    demandlib's four values there are not compared), on 2025-10-26 02:00-02:45 occurs twice
    (we take the profile value twice; both are compared with demandlib's single value)."""
    wall = pd.DatetimeIndex(year.local_times.tz_localize(None))
    full = pd.date_range(f"{BDEW_YEAR}-01-01", periods=35040, freq="15min")
    missing = full.difference(wall)
    assert list(missing) == list(pd.date_range("2025-03-30 02:00", periods=4, freq="15min"))
    dup = wall[wall.duplicated()]
    assert list(dup) == list(pd.date_range("2025-10-26 02:00", periods=4, freq="15min"))
    return wall


def _demandlib_elecslp():
    """demandlib 0.2.2's ElecSlp calls ``warnings.simplefilter("error")`` inside its builder,
    which turns pandas 3.1's deprecation warnings (``inplace=``) into exceptions.  We keep
    that call from taking effect (inside a catch_warnings block) - it changes no values."""
    from demandlib import bdew

    real = warnings.simplefilter
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore")
        warnings.simplefilter = lambda *a, **k: None
        try:
            return bdew.ElecSlp(BDEW_YEAR, holidays=_bdew_holidays())
        finally:
            warnings.simplefilter = real


def test_bdew_2025_profiles_match_demandlib(tmp_path):
    # Source: BDEW 2025 standard load profiles (G25, H25, L25, P25, S25) as shipped in
    # demandlib 0.2.2 (tables and its own series builder demandlib.bdew.G25 etc.).
    from demandlib import bdew

    names, rows = _new_bdew_rows()
    seasons = [{"season": f"m{m:02d}", "months": str(m)} for m in range(1, 13)]
    study = _bdew_study(tmp_path, names, rows, seasons)
    year = build_year(study)
    assert year.n_intervals == 35040
    wall = _wall_clock_alignment(year)

    idx = pd.date_range(f"{BDEW_YEAR}-01-01", periods=35040, freq="15min")
    worst = {}
    for i, name in enumerate(names):
        cls = getattr(bdew, name)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # pandas deprecation warnings inside demandlib
            ref = cls(idx, holidays=_bdew_holidays())
        ref = pd.Series(np.asarray(ref, dtype=float), index=idx)
        if issubclass(cls, bdew._profiles25.DynamicBDEW25Profile):
            # H25, P25, S25 are "dynamic": demandlib multiplies the table by the BDEW 4th-order
            # dynamisation polynomial of the day of year.  We do not apply it (a year of
            # profile *shapes* per month), so divide demandlib's own factor back out.
            ref = ref / cls.dynamisation_function(idx)
        ours = year.net_mw[i]
        theirs = ref.reindex(wall).to_numpy()
        # both normalised to sum 1 over the compared intervals
        a = ours / ours.sum()
        b = theirs / theirs.sum()
        rel = np.abs(a / b - 1.0)
        worst[name] = float(rel.max())
    print("BDEW worst relative difference:", worst)
    assert max(worst.values()) < 1e-6, worst


def test_bdew_old_profiles_match_demandlib(tmp_path):
    # Source: BDEW standard load profiles H0, G0-G6, L0-L2 (1999 tables) as shipped in
    # demandlib 0.2.2 (selp_series.csv and demandlib.bdew.ElecSlp).
    # demandlib's periods are date ranges, not whole months: winter 1 Nov-20 Mar, transition
    # 21 Mar-14 May and 15 Sep-31 Oct, summer 15 May-14 Sep.  Whole-month seasons can only
    # approximate that; we put March in winter, May and September in transition.  The days
    # where the two then use different tables are exactly 21-31 Mar, 15-31 May and 1-14 Sep;
    # every other day must agree, and those days must (all, and only they) disagree.
    names, rows = _old_bdew_rows()
    seasons = [{"season": "winter", "months": "1,2,3,11,12"},
               {"season": "transition", "months": "4,5,9,10"},
               {"season": "summer", "months": "6,7,8"}]
    study = _bdew_study(tmp_path, names, rows, seasons)
    year = build_year(study)
    wall = _wall_clock_alignment(year)
    slp = _demandlib_elecslp().get_profiles()
    # H0: compare the static "h0" column; demandlib's "h0_dyn" adds the dynamisation we omit.

    explained = set(pd.date_range("2025-03-21", "2025-03-31").date) | set(
        pd.date_range("2025-05-15", "2025-05-31").date) | set(
        pd.date_range("2025-09-01", "2025-09-14").date)
    day = np.array(wall.date)
    keep = ~np.isin(day, list(explained))
    bad_days: set = set()
    worst = {}
    for i, n in enumerate(names):
        ours = year.net_mw[i]
        theirs = slp[n].reindex(wall).to_numpy()
        a = ours / ours[keep].sum()
        b = theirs / theirs[keep].sum()
        rel = np.abs(a / b - 1.0)
        worst[n] = float(rel[keep].max())
        bad_days |= set(day[rel > 1e-6])
    print("BDEW worst relative difference:", worst)
    assert max(worst.values()) < 1e-6, worst
    assert bad_days == explained


# ============================================================================================
# 2. Holidays against an independent calendar: Easter from dateutil, fixed dates from memory
# ============================================================================================
# Movable feasts are days relative to Western Easter Sunday, computed by python-dateutil's
# ``dateutil.easter.easter`` (a general-purpose library, not the `holidays` package the tool
# uses).  Fixed-date holidays and which feasts each state keeps are from memory.
GOOD_FRIDAY, EASTER_MONDAY, ASCENSION, WHIT_MONDAY, CORPUS_CHRISTI = -2, 1, 39, 50, 60
DE_FIXED = [(1, 1), (5, 1), (10, 3), (12, 25), (12, 26)]  # incl. German Unity Day 3 Oct
DE_MOVABLE = [GOOD_FRIDAY, EASTER_MONDAY, ASCENSION, WHIT_MONDAY]
HOLIDAY_CALENDARS = {
    # (country, subdivision): (time zone, fixed (month, day), Easter offsets, one-off dates)
    ("DE", None): ("Europe/Berlin", DE_FIXED, DE_MOVABLE, {}),
    # Bavaria adds Epiphany, Corpus Christi and All Saints; Assumption (15 Aug) holds there
    # only in the majority-Catholic municipalities, so not state-wide (from memory)
    ("DE", "BY"): ("Europe/Berlin", DE_FIXED + [(1, 6), (11, 1)],
                   DE_MOVABLE + [CORPUS_CHRISTI], {}),
    # Berlin adds International Women's Day (8 Mar, since 2019) and kept 8 May 2025, the
    # 80th anniversary of the end of the Second World War in Europe, once (from memory)
    ("DE", "BE"): ("Europe/Berlin", DE_FIXED + [(3, 8)], DE_MOVABLE, {2025: [(5, 8)]}),
    # Austria (Vienna = subdivision 9): no Good Friday; National Day 26 Oct (from memory)
    ("AT", "9"): ("Europe/Vienna",
                  [(1, 1), (1, 6), (5, 1), (8, 15), (10, 26), (11, 1), (12, 8), (12, 25),
                   (12, 26)], [EASTER_MONDAY, ASCENSION, WHIT_MONDAY, CORPUS_CHRISTI], {}),
    # canton of Zurich: Swiss National Day 1 Aug, Labour Day, St Stephen's Day; 2 January
    # (Berchtoldstag) is widely taken off but, as far as I remember, not a cantonal public
    # holiday there (from memory)
    ("CH", "ZH"): ("Europe/Zurich", [(1, 1), (5, 1), (8, 1), (12, 25), (12, 26)],
                   [GOOD_FRIDAY, EASTER_MONDAY, ASCENSION, WHIT_MONDAY], {}),
}
HOLIDAY_YEARS = (2025, 2026)


def _expected_holidays(country, subdiv, yr) -> set[date]:
    from dateutil.easter import easter  # reference: python-dateutil (Western Easter)

    _, fixed, movable, once = HOLIDAY_CALENDARS[(country, subdiv)]
    e = easter(yr)
    return ({date(yr, m, d) for m, d in fixed + once.get(yr, [])}
            | {e + timedelta(days=k) for k in movable})


def _holiday_settings(country, subdiv, yr) -> Settings:
    return Settings(utility="Test", year=yr, timezone=HOLIDAY_CALENDARS[(country, subdiv)][0],
                    nominal_hz=50.0, interval_minutes=60, latitude_deg=50.0,
                    longitude_deg=10.0, holiday_country=country, holiday_subdivision=subdiv,
                    demand_basis="feeders", pv_derate=0.8, priority_policy="exclude",
                    compliance_rule="every_interval", compliance_percentile=None,
                    max_changes=None, solver_time_limit_s=30.0, mip_gap=0.0)


def _expected_day_types(local_dates: np.ndarray, hol: set[date]) -> np.ndarray:
    """Documented rule (allocator.year.day_type_index): Mon-Fri workday, Saturday, Sunday;
    a public holiday counts as Sunday whatever weekday it falls on - also on a Saturday."""
    d = pd.DatetimeIndex(local_dates)
    wd = d.day_of_week.to_numpy()
    out = np.where(wd == 6, SUNDAY, np.where(wd == 5, SATURDAY, WORKDAY))
    out[d.normalize().isin(pd.DatetimeIndex(sorted(hol)))] = SUNDAY
    return out


@pytest.mark.parametrize("yr", HOLIDAY_YEARS)
@pytest.mark.parametrize("country,subdiv", list(HOLIDAY_CALENDARS))
def test_holidays_and_day_types_match_independent_calendar(country, subdiv, yr):
    want = _expected_holidays(country, subdiv, yr)
    s = _holiday_settings(country, subdiv, yr)
    got = holiday_dates(s)
    assert {pd.Timestamp(d).date() for d in got} == want
    local = study_intervals(yr, s.timezone, 60).tz_convert(s.timezone)
    days = np.asarray(local.tz_localize(None).normalize())
    types = day_type_index(local, got)
    np.testing.assert_array_equal(types, _expected_day_types(days, want))


def test_holiday_calendar_cases_cover_weekends_and_subdivisions():
    """Guard: the cases above include holidays on a Saturday, on a Sunday and on weekdays,
    and subdivisions that really differ from their country, so the checks can fail."""
    wk = {"sat": 0, "sun": 0, "weekday": 0}
    for (c, sd) in HOLIDAY_CALENDARS:
        for yr in HOLIDAY_YEARS:
            for d in _expected_holidays(c, sd, yr):
                wk["sat" if d.weekday() == 5 else "sun" if d.weekday() == 6 else "weekday"] += 1
    assert wk["sat"] >= 3 and wk["sun"] >= 3 and wk["weekday"] >= 50, wk
    de = _expected_holidays("DE", None, 2025)
    assert de < _expected_holidays("DE", "BY", 2025) and de < _expected_holidays("DE", "BE",
                                                                                 2025)
    # a Saturday holiday turns a 'saturday' into a 'sunday' day type (Berlin, 8 Mar 2025)
    assert date(2025, 3, 8).weekday() == 5
    assert date(2025, 3, 8) in _expected_holidays("DE", "BE", 2025) - de


def _holiday_study(tmp_path, subdiv=None, name="hol.xlsx"):
    s = {"holiday_country": "DE", "year": 2025, "interval_minutes": 60}
    if subdiv:
        s["holiday_subdivision"] = subdiv
    return _study(tmp_path, name, settings=s)


@pytest.mark.parametrize("subdiv", [None, "BY", "BE"])
def test_build_year_uses_the_subdivision_calendar(tmp_path, subdiv):
    # the year builder's day types follow the independent calendar above (dateutil Easter,
    # fixed dates from memory): e.g. Epiphany, Mon 6 Jan 2025, is a holiday in Bavaria only
    y = build_year(_holiday_study(tmp_path, subdiv=subdiv, name=f"{subdiv}.xlsx"))
    want = _expected_day_types(_local_dates(y), _expected_holidays("DE", subdiv, 2025))
    np.testing.assert_array_equal(y.day_type_index, want)
    m = _local_dates(y) == np.datetime64("2025-01-06")
    assert set(y.day_type_index[m].tolist()) == {SUNDAY if subdiv == "BY" else WORKDAY}


# ============================================================================================
# 3. Solar geometry vs NOAA "General Solar Position Calculations" (from memory)
# ============================================================================================
def _noaa(times_utc: pd.DatetimeIndex, lat: float, lon: float):
    """Solar elevation (deg) and equation of time (min) from the NOAA approximations
    (NOAA GML "General Solar Position Calculations"; coefficients from memory)."""
    t = times_utc.tz_convert("UTC")
    doy = t.day_of_year.to_numpy()
    hour = (t.hour + t.minute / 60 + t.second / 3600).to_numpy()
    n_days = np.where(t.is_leap_year, 366, 365)
    g = 2 * np.pi / n_days * (doy - 1 + (hour - 12) / 24)
    eot = 229.18 * (0.000075 + 0.001868 * np.cos(g) - 0.032077 * np.sin(g)
                    - 0.014615 * np.cos(2 * g) - 0.040849 * np.sin(2 * g))
    decl = (0.006918 - 0.399912 * np.cos(g) + 0.070257 * np.sin(g)
            - 0.006758 * np.cos(2 * g) + 0.000907 * np.sin(2 * g)
            - 0.002697 * np.cos(3 * g) + 0.00148 * np.sin(3 * g))
    tst = hour * 60 + eot + 4 * lon  # true solar time, minutes (UTC input, tz offset 0)
    ha = np.radians(tst / 4 - 180)
    phi = np.radians(lat)
    cosz = np.sin(phi) * np.sin(decl) + np.cos(phi) * np.cos(decl) * np.cos(ha)
    elev = 90 - np.degrees(np.arccos(np.clip(cosz, -1, 1)))
    return elev, eot


SITES = [(50.0, 10.0), (40.7, -74.0), (-33.9, 18.4), (35.7, 139.7), (64.1, -21.9)]


@pytest.mark.parametrize("lat,lon", SITES)
def test_pv_zero_while_sun_below_horizon(lat, lon):
    # NOAA elevation (from memory, see _noaa); margin 1 deg covers refraction at the horizon
    # (~0.57 deg, common practice, no source) and the approximation error of the formulas.
    ts = study_intervals(2025, "UTC", 15)
    pv = clearsky_pv_pu(ts, 15, lat, lon)
    assert pv.shape == (35040,)
    elev_start, _ = _noaa(ts, lat, lon)
    elev_end, _ = _noaa(ts + pd.Timedelta(minutes=15), lat, lon)
    below = (elev_start < -1.0) & (elev_end < -1.0)
    above = (elev_start > 1.0) & (elev_end > 1.0)
    assert below.sum() > 5000 and above.sum() > 5000
    assert (pv[below] == 0).all()
    assert (pv[above] > 0).all()
    assert (pv >= 0).all() and pv.max() < 1.2


def _one_minute_day(day: str, lon: float):
    # a 24-hour window centred on the approximate UTC solar noon of that longitude
    centre = pd.Timestamp(day, tz="UTC") + pd.Timedelta(hours=12 - lon / 15)
    return pd.date_range(centre - pd.Timedelta(hours=12), periods=1440, freq="1min")


@pytest.mark.parametrize("lat,lon", [(0.0, 0.0), (30.0, 30.0), (50.0, 10.0), (-35.0, 150.0),
                                     (40.7, -74.0)])
def test_equinox_day_length_about_12h(lat, lon):
    # Source: at an equinox (declination ~0) day length is 12 h at every latitude (NOAA
    # sunrise/sunset relation cos H = -tan(lat) tan(decl); from memory); atmospheric
    # refraction lengthens it by a few minutes (common practice, no source).
    t = _one_minute_day("2025-03-20", lon)
    ghi = clearsky_ghi_w_per_m2(t, lat, lon)
    on = np.flatnonzero(ghi > 0)
    length_min = on[-1] - on[0] + 1
    assert 720 <= length_min <= 740, length_min


@pytest.mark.parametrize("day", ["2025-02-11", "2025-03-20", "2025-06-21", "2025-11-03"])
@pytest.mark.parametrize("lon", [0.0, 10.0, -74.0, 139.7])
def test_solar_noon_matches_equation_of_time(day, lon):
    # NOAA: solar noon (UTC, minutes) = 720 - 4 min/deg x longitude - EoT (from memory).
    # EoT is about -14 min on 11 Feb and +16 min on 3 Nov, so 3 min tolerance needs it.
    t = _one_minute_day(day, lon)
    ghi = clearsky_ghi_w_per_m2(t, 45.0, lon)
    t_max = t[int(np.argmax(ghi))]
    _, eot = _noaa(pd.DatetimeIndex([t_max]), 45.0, lon)
    noon = pd.Timestamp(day, tz="UTC") + pd.Timedelta(minutes=720 - 4 * lon - float(eot[0]))
    assert abs((t_max - noon).total_seconds()) <= 180, (t_max, noon)


def test_noaa_equation_of_time_is_material():
    # guard: the dates above really have a large EoT (so the noon check tests the PV model)
    _, eot = _noaa(pd.DatetimeIndex(["2025-02-11 12:00", "2025-11-03 12:00"], tz="UTC"), 0, 0)
    assert eot[0] < -13 and eot[1] > 15


# ============================================================================================
# 3b. PV size: NOAA solar calculator geometry + Haurwitz 1945 clear sky, and the SPA example
# ============================================================================================
HAURWITZ_K = 0.057  # Haurwitz 1945: GHI = 1098 cos z exp(-0.057 / cos z), W/m² (from memory)


def _noaa_calculator_elevation_deg(times_utc: pd.DatetimeIndex, lat: float, lon: float):
    """Apparent solar elevation (deg) by the NOAA solar calculator equations (the low-
    precision solar coordinates of Meeus, Astronomical Algorithms, 1991, as used in NOAA's
    spreadsheet calculator) with NOAA's refraction approximation.  Coefficients from memory."""
    t = times_utc.tz_convert("UTC")
    jd = t.as_unit("ns").asi8 / 86400e9 + 2440587.5  # Julian day (1970-01-01 = JD 2440587.5)
    tc = (jd - 2451545.0) / 36525.0  # Julian centuries since J2000.0
    l0 = np.mod(280.46646 + tc * (36000.76983 + 0.0003032 * tc), 360.0)  # mean longitude
    m = np.radians(357.52911 + tc * (35999.05029 - 0.0001537 * tc))  # mean anomaly
    ecc = 0.016708634 - tc * (0.000042037 + 0.0000001267 * tc)  # orbit eccentricity
    centre = (np.sin(m) * (1.914602 - tc * (0.004817 + 0.000014 * tc))
              + np.sin(2 * m) * (0.019993 - 0.000101 * tc) + np.sin(3 * m) * 0.000289)
    omega = np.radians(125.04 - 1934.136 * tc)
    lam = np.radians(l0 + centre - 0.00569 - 0.00478 * np.sin(omega))  # apparent longitude
    eps0 = 23 + (26 + (21.448 - tc * (46.815 + tc * (0.00059 - tc * 0.001813))) / 60) / 60
    eps = np.radians(eps0 + 0.00256 * np.cos(omega))  # corrected obliquity
    decl = np.arcsin(np.sin(eps) * np.sin(lam))
    y = np.tan(eps / 2) ** 2
    l0r = np.radians(l0)
    eot_min = 4 * np.degrees(y * np.sin(2 * l0r) - 2 * ecc * np.sin(m)
                             + 4 * ecc * y * np.sin(m) * np.cos(2 * l0r)
                             - 0.5 * y * y * np.sin(4 * l0r) - 1.25 * ecc * ecc * np.sin(2 * m))
    minutes = (t.hour * 60 + t.minute + t.second / 60).to_numpy()
    hour_angle = np.radians((minutes + eot_min + 4 * lon) / 4 - 180)  # true solar time
    phi = np.radians(lat)
    cosz = np.sin(phi) * np.sin(decl) + np.cos(phi) * np.cos(decl) * np.cos(hour_angle)
    e = np.degrees(np.arcsin(np.clip(cosz, -1, 1)))
    te = np.tan(np.radians(e))
    with np.errstate(divide="ignore", invalid="ignore"):
        refr_arcsec = np.where(
            e > 85, 0.0,
            np.where(e > 5, 58.1 / te - 0.07 / te ** 3 + 0.000086 / te ** 5,
                     np.where(e > -0.575,
                              1735 + e * (-518.2 + e * (103.4 + e * (-12.79 + e * 0.711))),
                              -20.772 / te)))
    return e + refr_arcsec / 3600


def _reference_ghi_w_per_m2(times_utc, lat, lon):
    """Haurwitz 1945 clear-sky GHI on the NOAA calculator's apparent zenith; 0 at night."""
    c = np.sin(np.radians(_noaa_calculator_elevation_deg(times_utc, lat, lon)))  # cos z
    return np.where(c > 0, 1098.0 * c * np.exp(-HAURWITZ_K / np.maximum(c, 1e-12)), 0.0)


def _reference_pv_pu(interval_start_utc, interval_minutes, lat, lon):
    """Mean of the reference GHI over each interval (1-minute mid-points) / 1000 W/m²."""
    off = pd.to_timedelta(np.arange(interval_minutes) + 0.5, unit="min")
    t = pd.DatetimeIndex((interval_start_utc.tz_convert("UTC").as_unit("ns").asi8[:, None]
                          + off.as_unit("ns").asi8[None, :]).ravel(), tz="UTC")
    ghi = _reference_ghi_w_per_m2(t, lat, lon).reshape(len(interval_start_utc), -1)
    return ghi.mean(axis=1) / 1000.0


# Tolerance on GHI, 2.5 W/m² (0.0025 per unit of 1000 W/m²), made of two parts:
# * pvlib's haurwitz() uses exp(-0.059 / cos z) where the formula as quoted above has 0.057:
#   the tool is lower by 1098 cos z (exp(-0.057/cos z) - exp(-0.059/cos z)), at most
#   1098 (e^-0.057 - e^-0.059) = 2.07 W/m² (sun at the zenith), less at lower sun;
# * the NOAA calculator geometry against NREL SPA: within about 0.02 deg of elevation and
#   0.06 min of equation of time over 2025 (measured while writing this test), i.e. a few
#   tenths of a W/m² (dGHI/dz is at most ~18 W/m² per degree).
# A 1 % error in PV size at high sun (~9 W/m²) or a 2-minute time shift at mid-morning
# (~5 W/m²) lies outside it.
GHI_TOL_W_PER_M2 = 2.5
PV_SITES = [(50.0, 10.0), (40.7, -74.0), (-33.9, 18.4), (64.1, -21.9), (1.3, 103.8)]


@pytest.mark.parametrize("lat,lon", PV_SITES)
def test_clearsky_ghi_matches_noaa_geometry_and_haurwitz(lat, lon):
    # reference: NOAA solar calculator equations + Haurwitz 1945 (both from memory, above)
    t = pd.date_range("2025-01-01", periods=365 * 96, freq="15min", tz="UTC")
    ref = _reference_ghi_w_per_m2(t, lat, lon)
    ghi = clearsky_ghi_w_per_m2(t, lat, lon)
    assert ref.max() > 700 and (ref > 0).sum() > 10000  # the year really has high sun
    np.testing.assert_allclose(ghi, ref, rtol=0, atol=GHI_TOL_W_PER_M2)


def test_clearsky_ghi_at_chosen_instants():
    # reference: the NOAA calculator + Haurwitz functions above at three instants (Berlin
    # midsummer noon, a winter morning at 50 N 10 E, an equinox afternoon in Cape Town)
    cases = [("2025-06-21 11:08", 52.52, 13.40), ("2025-12-15 09:00", 50.0, 10.0),
             ("2025-03-20 13:30", -33.92, 18.42)]
    for when, lat, lon in cases:
        t = pd.DatetimeIndex([when], tz="UTC")
        ref = float(_reference_ghi_w_per_m2(t, lat, lon)[0])
        got = float(clearsky_ghi_w_per_m2(t, lat, lon)[0])
        assert ref > 150, (when, ref)
        assert got == pytest.approx(ref, abs=GHI_TOL_W_PER_M2), (when, got, ref)
    # and by hand for the first: 11:08 UTC is Berlin's solar noon that day (12:00 - 4 min x
    # 13.40 - EoT of about -1.6 min), declination 23.44° (solstice, from memory), so the sun
    # stands 90 - 52.52 + 23.44 = 60.92° high; cos z = sin 60.92° = 0.8739 and Haurwitz gives
    # 1098 x 0.8739 x exp(-0.057 / 0.8739) = 959.6 x 0.9369 = 899.0 W/m² (0.5 W/m² for the
    # rounding of this arithmetic)
    t = pd.DatetimeIndex(["2025-06-21 11:08"], tz="UTC")
    assert float(_reference_ghi_w_per_m2(t, 52.52, 13.40)[0]) == pytest.approx(899.0, abs=0.5)
    assert float(clearsky_ghi_w_per_m2(t, 52.52, 13.40)[0]) == pytest.approx(
        899.0, abs=GHI_TOL_W_PER_M2 + 0.5)


@pytest.mark.parametrize("interval", [15, 60])
def test_pv_pu_interval_mean_matches_reference(interval):
    # reference: the mean over each interval of the NOAA + Haurwitz GHI (1-minute
    # mid-points), per unit of 1000 W/m² (IEC 61215 STC irradiance; common practice).  The
    # tool averages 5-minute sub-samples; near noon the two means differ by far less than
    # the GHI tolerance, at sunrise by well under it (GHI is then a few W/m²).
    ts = study_intervals(2025, "Europe/Berlin", interval)
    pv = clearsky_pv_pu(ts, interval, 50.0, 10.0)
    ref = _reference_pv_pu(ts, interval, 50.0, 10.0)
    assert ref.max() > 0.75
    np.testing.assert_allclose(pv, ref, rtol=0, atol=GHI_TOL_W_PER_M2 / 1000.0)


def test_spa_worked_example_reda_andreas_2004():
    # Source: Reda & Andreas, "Solar position algorithm for solar radiation applications",
    # Solar Energy 76 (2004), worked example (values from memory): 17 October 2003
    # 12:30:30 local time at UTC-7, latitude 39.742476, longitude -105.1786, elevation
    # 1830.14 m, pressure 820 mbar, temperature 11 °C, ΔT 67 s -> topocentric zenith
    # 50.11162° (refraction included) and azimuth 194.34024° (east of north).
    # Tolerance 1e-5 deg: the paper prints 5 decimals; implementations of the same
    # algorithm agree far closer than that (SPA's ±0.0003° is against the real sun).
    t = pd.DatetimeIndex(["2003-10-17 19:30:30"], tz="UTC")  # 12:30:30 at UTC-7
    site = dict(latitude_deg=39.742476, longitude_deg=-105.1786)
    pos = solar_position_deg(t, **site, altitude_m=1830.14, pressure_pa=82000.0,
                             temperature_c=11.0, delta_t_s=67.0)
    assert float(pos["apparent_zenith"].iloc[0]) == pytest.approx(50.11162, abs=1e-5)
    assert float(pos["azimuth"].iloc[0]) == pytest.approx(194.34024, abs=1e-5)
    # The PV model's own call (sea level, 1013.25 hPa, 12 °C) sees the same sun with the
    # refraction of a denser atmosphere.  SPA's refraction (Reda & Andreas eq. 42, from
    # memory): Δe = (P/1010)(283/(273+T)) 1.02 / (60 tan(e0 + 10.3/(e0 + 5.11))), e0 the
    # elevation without refraction.  Δe moves by < 1e-6 deg between the two e0 values, so
    # the example's e0 serves for both.
    e_app = 90.0 - 50.11162
    e0 = e_app - 0.8 / 60  # first guess, then one fixed-point step (Δe ~ 0.016 deg)

    def refraction_deg(p_mbar, t_c, e0_deg):
        return (p_mbar / 1010.0) * (283.0 / (273.0 + t_c)) * 1.02 / (
            60.0 * math.tan(math.radians(e0_deg + 10.3 / (e0_deg + 5.11))))

    e0 = e_app - refraction_deg(820.0, 11.0, e0)
    want_default = 90.0 - (e0 + refraction_deg(1013.25, 12.0, e0))
    default = solar_position_deg(t, **site, delta_t_s=67.0)
    assert float(default["apparent_zenith"].iloc[0]) == pytest.approx(want_default, abs=2e-5)
    assert float(default["azimuth"].iloc[0]) == pytest.approx(194.34024, abs=1e-5)


# ============================================================================================
# 4. DST and year length
# ============================================================================================
def _dst_days(tz: str, yr: int):
    """Local dates whose UTC offset at the next midnight differs (IANA tz database)."""
    z = ZoneInfo(tz)
    out = {}
    for k in range(366 if yr % 4 == 0 else 365):
        d = date(yr, 1, 1) + timedelta(days=k)
        a = datetime(d.year, d.month, d.day, tzinfo=z).utcoffset()
        n = d + timedelta(days=1)
        b = datetime(n.year, n.month, n.day, tzinfo=z).utcoffset()
        if a != b:
            out[d] = 24 - (b - a).total_seconds() / 3600
    return out


@pytest.mark.parametrize("tz,spring,autumn", [
    # EU rule: last Sunday of March / October; US: second Sunday of March / first Sunday of
    # November (both from memory; the dates themselves checked against zoneinfo below)
    ("Europe/Berlin", date(2025, 3, 30), date(2025, 10, 26)),
    ("America/New_York", date(2025, 3, 9), date(2025, 11, 2)),
])
@pytest.mark.parametrize("interval", [5, 10, 15, 30, 60])
def test_dst_days_have_23_and_25_hours(tmp_path, tz, spring, autumn, interval):
    assert _dst_days(tz, 2025) == {spring: 23.0, autumn: 25.0}  # Source: IANA tz (zoneinfo)
    y = build_year(_study(tmp_path, settings={"timezone": tz, "interval_minutes": interval,
                                              "holiday_country": None}))
    assert str(y.timestamps_utc.tz) == "UTC"
    assert str(y.local_times.tz) == tz
    assert (np.diff(y.timestamps_utc.as_unit("ns").asi8) == interval * 60 * 10**9).all()
    assert y.n_intervals == 8760 * 60 // interval
    hours = pd.Series(1, index=_local_dates(y)).groupby(level=0).sum() * interval / 60
    assert len(hours) == 365
    assert hours[pd.Timestamp(spring)] == 23
    assert hours[pd.Timestamp(autumn)] == 25
    others = hours.drop([pd.Timestamp(spring), pd.Timestamp(autumn)])
    assert (others == 24).all()
    # the year runs from local midnight 1 Jan to local midnight 1 Jan of the next year
    assert y.local_times[0] == pd.Timestamp("2025-01-01", tz=tz)
    assert y.local_times[-1] + pd.Timedelta(minutes=interval) == pd.Timestamp("2026-01-01",
                                                                            tz=tz)


@pytest.mark.parametrize("interval,n", [(5, 105120), (10, 52560), (15, 35040), (30, 17520),
                                        (60, 8760)])
def test_no_dst_zone_and_year_length(tmp_path, interval, n):
    # Japan has no DST (IANA tz database, Asia/Tokyo)
    assert _dst_days("Asia/Tokyo", 2025) == {}
    y = build_year(_study(tmp_path, settings={"timezone": "Asia/Tokyo", "latitude": 35.7,
                                              "longitude": 139.7, "holiday_country": "JP",
                                              "interval_minutes": interval}))
    assert y.n_intervals == n
    hours = pd.Series(1, index=_local_dates(y)).groupby(level=0).sum() * interval / 60
    assert len(hours) == 365 and (hours == 24).all()


def test_leap_year_length(tmp_path):
    y = build_year(_study(tmp_path, settings={"year": 2024, "interval_minutes": 60}))
    assert y.n_intervals == 8784  # 366 days (Gregorian leap year)


# ============================================================================================
# 5. Resolution and the net-load formula
# ============================================================================================
def _shape(p, s, d, m):
    # invented test shape: differs by profile, day type and every quarter-hour
    k = {"res": 0.0, "com": 0.1}[p] + 0.05 * DAY_TYPES.index(d)
    return round(0.3 + k + 0.4 * math.sin(m / 1440 * 2 * math.pi) ** 2 + (m % 60) / 600, 6)


def _expected_gross(year, peak, p, step, interval):
    """Expected value per interval from the local start time: mean of the profile's values
    over [start, start + interval), each held for ``step`` minutes."""
    lt = year.local_times
    minute = (lt.hour * 60 + lt.minute).to_numpy()
    out = np.empty(year.n_intervals)
    for k in range(year.n_intervals):
        d = DAY_TYPES[year.day_type_index[k]]
        vals = [_shape(p, "all", d, (mm // step) * step)
                for mm in range(minute[k], minute[k] + interval)]
        out[k] = peak * sum(vals) / len(vals)
    return out


def test_quarter_hour_profile_averaged_into_hours(tmp_path):
    y = build_year(_study(tmp_path, settings={"interval_minutes": 60},
                          profiles=flat_profiles(value=_shape, step_minutes=15)))
    feeders = base_feeders()
    for i in (0, 1):
        p, peak = feeders[i]["profile"], feeders[i]["peak_mw"]
        lt = y.local_times
        # the hourly value is the mean of the four quarter-hour values of that hour
        want = np.array([peak * np.mean([_shape(p, "all", DAY_TYPES[y.day_type_index[k]],
                                                lt[k].hour * 60 + q) for q in (0, 15, 30, 45)])
                         for k in range(y.n_intervals)])
        np.testing.assert_allclose(y.net_mw[i], want, rtol=1e-12, atol=0)
        np.testing.assert_allclose(y.net_mw[i], _expected_gross(y, peak, p, 15, 60),
                                   rtol=1e-12)


def test_hourly_profile_held_at_quarter_hours(tmp_path):
    y = build_year(_study(tmp_path, settings={"interval_minutes": 15},
                          profiles=flat_profiles(value=_shape, step_minutes=60)))
    lt = y.local_times
    peak = base_feeders()[1]["peak_mw"]
    want = np.array([peak * _shape("res", "all", DAY_TYPES[y.day_type_index[k]],
                                   lt[k].hour * 60) for k in range(y.n_intervals)])
    np.testing.assert_allclose(y.net_mw[1], want, rtol=1e-12, atol=0)
    # the four quarter-hours of an ordinary hour are equal
    q = y.net_mw[1][:96].reshape(24, 4)
    assert (q == q[:, :1]).all()


def test_five_minute_profile_averaged_into_quarter_hours(tmp_path):
    y = build_year(_study(tmp_path, settings={"interval_minutes": 15},
                          profiles=flat_profiles(value=_shape, step_minutes=5)))
    f = base_feeders()[0]
    np.testing.assert_allclose(y.net_mw[0], _expected_gross(y, f["peak_mw"], f["profile"], 5,
                                                            15), rtol=1e-12)


@pytest.mark.parametrize("interval", [5, 10])
def test_hourly_and_quarter_hour_profiles_held_at_5_and_10_minutes(tmp_path, interval):
    for step in (60, 15 if interval == 5 else 30):
        y = build_year(_study(tmp_path, name=f"s{step}.xlsx",
                              settings={"interval_minutes": interval},
                              profiles=flat_profiles(value=_shape, step_minutes=step)))
        f = base_feeders()[1]
        np.testing.assert_allclose(y.net_mw[1], _expected_gross(y, f["peak_mw"], f["profile"],
                                                                step, interval), rtol=1e-12)
        k = step // interval  # intervals per profile step: all equal on an ordinary day
        block = y.net_mw[1][: 1440 // interval].reshape(-1, k)
        assert (block == block[:, :1]).all()


@pytest.mark.parametrize("interval,n_sub", [(5, 1), (10, 2)])
def test_pv_at_5_and_10_minutes_against_pvlib(interval, n_sub):
    """Per-unit PV is the mean of Haurwitz clear-sky GHI / 1000 W/m² at 5-minute sub-sample
    mid-points, computed here with pvlib directly (NREL SPA position, Haurwitz model)."""
    import pvlib

    starts = pd.date_range("2025-06-21 10:00", periods=12, freq=f"{interval}min", tz="UTC")
    got = clearsky_pv_pu(starts, interval, 48.1, 11.6)
    mids = pd.DatetimeIndex([t + pd.Timedelta(minutes=2.5 + 5 * j) for t in starts
                             for j in range(n_sub)])
    pos = pvlib.solarposition.get_solarposition(mids, 48.1, 11.6, method="nrel_numpy")
    ghi = pvlib.clearsky.haurwitz(pos["apparent_zenith"])["ghi"].to_numpy()
    want = ghi.reshape(len(starts), n_sub).mean(axis=1) / 1000.0
    np.testing.assert_allclose(got, want, rtol=1e-9)
    assert 0.5 < got.min()  # a June late morning in Bavaria: well lit (sanity, no source)


def test_net_is_gross_minus_derated_pv(tmp_path):
    feeders = base_feeders(4)
    feeders[0]["pv_mw"] = 0.7
    feeders[2]["pv_mw"] = 5.0  # exports at midday (pv > peak: a warning, not an error)
    s = {"interval_minutes": 30, "pv_derate": 0.85}
    y = build_year(_study(tmp_path, settings=s, feeders=feeders,
                          profiles=flat_profiles(value=_shape, step_minutes=30)))
    # PV per unit from the outside reference (NOAA calculator + Haurwitz, section 3b), not
    # from the year's own pv_pu; the tolerance scales the GHI one by each feeder's PV MW
    ref_pu = _reference_pv_pu(y.timestamps_utc, 30, BASE_SETTINGS["latitude"],
                              BASE_SETTINGS["longitude"])
    assert ref_pu.max() > 0.5 and (ref_pu == 0).sum() > 5000
    for i, f in enumerate(feeders):
        gross = _expected_gross(y, f["peak_mw"], f["profile"], 30, 30)
        want = gross - f["pv_mw"] * 0.85 * ref_pu
        atol = f["pv_mw"] * 0.85 * GHI_TOL_W_PER_M2 / 1000.0 + 1e-12
        np.testing.assert_allclose(y.net_mw[i], want, rtol=0, atol=atol)
    assert y.net_mw[2].min() < 0
    np.testing.assert_allclose(y.demand_mw, y.net_mw.sum(axis=0), rtol=1e-12)
