"""Switched arming: the periods sheet, schedules in ``check``, the switched plan and the
switching calendar.  Invented test data throughout."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pytest

from wbfactory import BASE_SETTINGS, base_feeders, flat_profiles, write_workbook

from allocator.assignment import read_assignment
from allocator.armed import armed_mw
from allocator.check import run_checks
from allocator.year import year_period_index
from allocator.domain import DAY_TYPES, Period
from allocator.errors import InputError
from allocator.periods import coverage_problems, period_index
from allocator.scenarios import build_years
from allocator.workbook import read_study

DAY_NIGHT = [
    {"period": "day", "months": "1,2,3,4,5,6,7,8,9,10,11,12", "from": "06:00", "to": "22:00"},
    {"period": "night", "months": "1,2,3,4,5,6,7,8,9,10,11,12", "from": "22:00", "to": "06:00"},
]


def _shape(p, s, d, m):
    """Invented: 'res' high in the evening, 'com' high by day on workdays."""
    h = m / 60
    if p == "res":
        return 0.4 + (0.5 if 17 <= h < 23 else 0.0)
    return 0.3 + (0.6 if 7 <= h < 19 and d == "workday" else 0.1)


def _study(tmp_path: Path, periods=DAY_NIGHT, switch=(0, 1), settings=None, n=10,
           name="sw.xlsx"):
    fs = base_feeders(n)
    for i in switch:
        fs[i]["remote_switch"] = "yes"
    s = dict(BASE_SETTINGS)
    s.update(settings or {})
    extra = {"periods": periods} if periods else {}
    return write_workbook(tmp_path / name, settings=s, feeders=fs,
                          profiles=flat_profiles(value=_shape), extra_sheets=extra)


def _problems(path) -> list[str]:
    with pytest.raises(InputError) as e:
        read_study(path)
    return [str(p) for p in e.value.problems]


# ---- the periods sheet ---------------------------------------------------------------------
def test_periods_sheet_read(tmp_path):
    st = read_study(_study(tmp_path))
    assert st.period_names == ("day", "night")
    assert st.periods[1].from_min == 22 * 60 and st.periods[1].to_min == 6 * 60
    assert st.is_switchable.tolist() == [True, True] + [False] * 8


def test_no_periods_sheet_is_one_period(tmp_path):
    st = read_study(_study(tmp_path, periods=None, switch=()))
    assert st.period_names == ("all_year",)


def test_gap_and_overlap_named_compactly(tmp_path):
    per = [dict(DAY_NIGHT[0]), dict(DAY_NIGHT[1])]
    per[0]["to"] = "21:00"  # 21:00-22:00 in no period, every month and day type
    per.append({"period": "x", "months": "7", "day_types": "sunday", "from": "05:00",
                "to": "07:00"})  # overlaps night 05-06 and day 06-07 on July Sundays
    probs = _problems(_study(tmp_path, periods=per))
    gap = [p for p in probs if "in no period" in p]
    assert len(gap) == 1 and "months 1-12, workday/saturday/sunday, 21:00-22:00" in gap[0]
    assert any("'day' and 'x' both cover month 7, sunday, 06:00-07:00" in p for p in probs)
    assert any("'night' and 'x' both cover month 7, sunday, 05:00-06:00" in p for p in probs)
    assert all("sheet 'periods'" in p for p in gap)


def test_bad_period_cells_all_reported(tmp_path):
    per = [dict(DAY_NIGHT[0]), dict(DAY_NIGHT[1])]
    per[0]["months"] = "1,13"
    per[1]["day_types"] = "weekday"
    per[1]["from"] = "22:30"  # off the 60-minute grid
    probs = _problems(_study(tmp_path, periods=per))
    assert any("row 2, column 'months'" in p and "'13'" in p for p in probs)
    assert any("row 3, column 'day_types'" in p and "weekday" in p for p in probs)
    assert any("row 3, column 'from'" in p and "interval grid" in p for p in probs)


def test_remote_switch_column_values(tmp_path):
    fs = base_feeders(4)
    fs[0]["remote_switch"] = "perhaps"
    fs[1]["trip_group"] = fs[2]["trip_group"] = "G"
    fs[1]["remote_switch"] = "yes"
    p = write_workbook(tmp_path / "r.xlsx", feeders=fs, extra_sheets={"periods": DAY_NIGHT})
    probs = _problems(p)
    assert any("row 2, column 'remote_switch'" in x and "perhaps" in x for x in probs)
    assert any("trip group 'G' mixes remote_switch" in x for x in probs)


# ---- period in force at each interval ------------------------------------------------------
def _reference_period(t: datetime, day_type: int, periods: tuple[Period, ...]) -> int:
    """Brute force, one timestamp at a time: the period whose months, day types and
    wall-clock window contain local time ``t``."""
    m = t.hour * 60 + t.minute
    hits = []
    for k, p in enumerate(periods):
        if p.from_min < p.to_min:
            inside = p.from_min <= m < p.to_min
        elif p.from_min > p.to_min:
            inside = m >= p.from_min or m < p.to_min
        else:
            inside = True
        if inside and t.month in p.months and day_type in p.day_types:
            hits.append(k)
    assert len(hits) == 1
    return hits[0]


def _reference_periods(st, y) -> np.ndarray:
    """``[interval]`` period in force, one local timestamp at a time by
    :func:`_reference_period`, with the day type written here (Saturday, Sunday or a
    public holiday of the study's country by the ``holidays`` package, else a workday)
    instead of the calendar under test."""
    import holidays

    s = st.settings
    cal = holidays.country_holidays(s.holiday_country, years=range(2024, 2030)) \
        if s.holiday_country else {}
    out = []
    for t in y.local_times.to_pydatetime():
        wd = t.weekday()
        day = 2 if wd == 6 or t.date() in cal else 1 if wd == 5 else 0
        out.append(_reference_period(t, day, st.periods))
    return np.asarray(out)


def test_period_index_matches_brute_force(tmp_path):
    per = [{"period": "w_day", "months": "1,2,3,10,11,12", "day_types": "workday",
            "from": "07:00", "to": "19:00"},
           {"period": "w_rest", "months": "1,2,3,10,11,12", "day_types": "workday",
            "from": "19:00", "to": "07:00"},
           {"period": "w_we", "months": "1,2,3,10,11,12", "day_types": "saturday,sunday"},
           {"period": "summer", "months": "4,5,6,7,8,9"}]
    st = read_study(_study(tmp_path, periods=per))
    assert coverage_problems(st.periods) == []
    y = build_years(st)[0]
    got = year_period_index(st, y)
    lt = y.local_times
    ref = [_reference_period(t, int(d), st.periods)
           for t, d in zip(lt.to_pydatetime(), y.day_type_index)]
    assert got.tolist() == ref


# ---- check with a schedule -----------------------------------------------------------------
def _write(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


def test_schedule_check_uses_block_in_force(tmp_path):
    st = read_study(_study(tmp_path))
    years = build_years(st)
    a = _write(tmp_path / "s.csv", "feeder_id,period,block\nF00,day,S1\nF00,night,S2\n"
               "F01,,S2\nF02,day,S1\nF02,night,S1\nF03,,S1\n")
    sched, _ = read_assignment(a, st)
    chk = run_checks(st, years, sched)
    y = years[0]
    per = _reference_periods(st, y)
    # reference: the armed MW written interval by interval from the rule "the block in
    # force at the interval" (brute force over intervals, feeders all standard relays)
    ref = np.zeros((2, y.n_intervals))
    for t in range(y.n_intervals):
        for f in range(len(st.feeders)):
            b = sched[f, per[t]]
            if b >= 0:
                ref[b, t] += y.net_mw[f, t]
    np.testing.assert_allclose(chk.checks[0].armed_mw, ref)
    assert not np.allclose(ref, armed_mw(y.net_mw, st.relay_code, sched[:, 0], 2))


def test_old_assignment_file_still_works(tmp_path):
    st = read_study(_study(tmp_path))
    idx, _ = read_assignment(_write(tmp_path / "a.csv", "feeder_id,block\nF00,S1\n"), st)
    assert idx.ndim == 1 and idx[0] == 0


def test_bad_schedule_rows(tmp_path):
    st = read_study(_study(tmp_path))
    a = _write(tmp_path / "bad.csv", "feeder_id,period,block\nF00,day,S1\nF00,dusk,S2\n"
               "F05,day,S1\nF05,night,S2\nF06,day,S1\n")
    with pytest.raises(InputError) as e:
        read_assignment(a, st)
    msgs = [(p.row, p.column, p.message) for p in e.value.problems]
    assert any(r == 3 and c == "period" and "unknown period 'dusk'" in m for r, c, m in msgs)
    assert any(r == 4 and c == "block" and "lines 4, 5" in m and "not remote_switch" in m
               for r, c, m in msgs)
    assert any(r == 6 and "no line for period(s) night" in m for r, c, m in msgs)


# ---- the switched plan against exhaustive enumeration ----------------------------------------
DAY_EVENING = [
    {"period": "day", "months": "1,2,3,4,5,6,7,8,9,10,11,12", "from": "07:00", "to": "19:00"},
    {"period": "evening", "months": "1,2,3,4,5,6,7,8,9,10,11,12", "from": "19:00",
     "to": "07:00"}]
WIDE = [{"block": "S1", "order": 1, "pickup_hz": 49.0, "delay_s": 0.1, "target_pct": 20,
         "min_pct": 10, "max_pct": 30},
        {"block": "S2", "order": 2, "pickup_hz": 48.7, "delay_s": 0.1, "target_pct": 20,
         "min_pct": 10, "max_pct": 30}]


def _reference_transitions(per):
    """Period changes between consecutive interval starts, the year repeating (written
    out interval by interval)."""
    n_p = int(per.max()) + 1
    out = np.zeros((n_p, n_p), dtype=int)
    for t in range(len(per)):
        if per[t] != per[t - 1]:
            out[per[t - 1], per[t]] += 1
    return out


def _brute_force(st, years, switch):
    """Every schedule (fixed feeders one option for the year, switchable ones one per
    period): the lexicographic key (worst relative violation, field changes, switching
    operations), each written from its definition; returns the key function and the best."""
    import itertools

    n, nb, n_p = len(st.feeders), len(st.blocks), len(st.periods)
    per = [_reference_periods(st, y) for y in years]
    n_trans = _reference_transitions(per[0])
    rows = []  # [feeder·period, column]: pp of demand the feeder adds in that period
    for y, pe in zip(years, per):
        ok = y.demand_mw > 0
        pp = 100.0 * y.net_mw[:, ok] / y.demand_mw[ok]
        rows.append(np.stack([pp * (pe[ok] == k) for k in range(n_p)], axis=1))
    C = np.concatenate(rows, axis=2).reshape(n * n_p, -1)
    lo = np.array([b.min_pct for b in st.blocks])[:, None]
    hi = np.array([b.max_pct for b in st.blocks])[:, None]
    tg = np.array([b.target_pct for b in st.blocks])[:, None]
    fixed = [f for f in range(n) if f not in switch]

    def key(sched):
        onehot = (sched.reshape(-1)[None, :] == np.arange(nb)[:, None]).astype(float)
        s = onehot @ C
        z = float((np.maximum(np.maximum(lo - s, s - hi), 0.0) / tg).max())
        ch = int((sched[fixed, 0] != st.current_assignment[fixed]).sum())
        ops = int(sum(n_trans[p, q] for f in range(n) for p in range(n_p)
                      for q in range(n_p) if sched[f, p] != sched[f, q]))
        return round(z, 9), ch, ops

    best, opts = None, range(-1, nb)
    for fx in itertools.product(opts, repeat=len(fixed)):
        for sv in itertools.product(opts, repeat=len(switch) * n_p):
            sched = np.zeros((n, n_p), dtype=np.intp)
            sched[fixed, :] = np.array(fx)[:, None]
            sched[list(switch), :] = np.array(sv).reshape(len(switch), n_p)
            k = key(sched)
            best = k if best is None or k < best else best
    return key, best


@pytest.mark.parametrize("profiles, switch, current", [
    (("com", "res", "com", "res", "com"), (0, 1), ("S1",) * 5),
    (("com", "res", "com", "res", "res"), (1, 3, 4), ("S1", "S1", "S2", "S2", None))])
def test_switched_plan_matches_brute_force(tmp_path, profiles, switch, current):
    """Brute force over every schedule of 5 feeders (2-3 switchable, 2 periods): the plan's
    worst violation, field changes and switching operations are the lexicographic best."""
    from allocator.plan.switched import plan_switched

    fs = base_feeders(5)
    for i, (peak, prof, cur) in enumerate(zip((3, 3, 2, 2, 2), profiles, current)):
        fs[i].update(peak_mw=peak, profile=prof, current_block=cur,
                     remote_switch="yes" if i in switch else None)
    s = dict(BASE_SETTINGS, holiday_country=None)
    p = write_workbook(tmp_path / "bf.xlsx", settings=s, blocks=WIDE, feeders=fs,
                       profiles=flat_profiles(value=_shape),
                       extra_sheets={"periods": DAY_EVENING})
    st = read_study(p)
    years = build_years(st)
    key, best = _brute_force(st, years, switch)
    got = plan_switched(st, years, time_limit_s=10, pass_time_s=2)
    k = key(got.schedule)
    assert abs(k[0] - best[0]) < 1e-6 and k[1:] == best[1:], (k, best)
    assert (got.relays_changed, got.switch_ops_per_year) == k[1:]


# ---- the switching calendar across both DST changes ----------------------------------------
AM_PM = [{"period": "a", "months": "1,2,3,4,5,6,7,8,9,10,11,12", "from": "02:00", "to": "12:00"},
         {"period": "b", "months": "1,2,3,4,5,6,7,8,9,10,11,12", "from": "12:00", "to": "02:00"}]


def _calendar(tmp_path, tz, periods, interval=60):
    from allocator.field.switching import switching_table

    s = {"timezone": tz, "interval_minutes": interval, "holiday_country": None}
    st = read_study(_study(tmp_path, periods=periods, switch=(0,), settings=s))
    y = build_years(st)[0]
    sched = np.full((len(st.feeders), 2), -1)
    sched[0] = [0, 1]  # F00: S1 in a, S2 in b
    return switching_table(st, y, sched)


def _on(df, day):
    return [(r.instant_local, r.from_block, r.to_block) for r in df.itertuples()
            if r.instant_local.startswith(day)]


def test_switching_instants_berlin(tmp_path):
    # IANA zone Europe/Berlin (EU rule): summer time from the last Sunday of March to the
    # last Sunday of October, changing at 01:00 UTC (2025: 30 March and 26 October)
    df = _calendar(tmp_path, "Europe/Berlin", AM_PM)
    assert len(df) == 2 * 365 and set(df.feeders) == {"F00"}
    assert _on(df, "2025-01-15") == [("2025-01-15T02:00+01:00", "S2", "S1"),
                                     ("2025-01-15T12:00+01:00", "S1", "S2")]
    # 02:00 does not exist on 30 March: the switch comes at the jump, 03:00 summer time
    assert _on(df, "2025-03-30")[0] == ("2025-03-30T03:00+02:00", "S2", "S1")
    # 02:00 happens twice on 26 October: one switch, at the first (summer-time) 02:00
    assert _on(df, "2025-10-26") == [("2025-10-26T02:00+02:00", "S2", "S1"),
                                     ("2025-10-26T12:00+01:00", "S1", "S2")]


def test_switching_instants_new_york(tmp_path):
    # IANA zone America/New_York (US rule since 2007): daylight time from the second Sunday
    # of March to the first Sunday of November, changing at 02:00 local (2025: 9 March and
    # 2 November)
    df = _calendar(tmp_path, "America/New_York", AM_PM)
    assert len(df) == 2 * 365
    assert _on(df, "2025-03-09")[0] == ("2025-03-09T03:00-04:00", "S2", "S1")
    # 01:00 happens twice on 2 November; 02:00 standard time comes once, after both
    assert _on(df, "2025-11-02") == [("2025-11-02T02:00-05:00", "S2", "S1"),
                                     ("2025-11-02T12:00-05:00", "S1", "S2")]
    assert _on(df, "2025-07-04") == [("2025-07-04T02:00-04:00", "S2", "S1"),
                                     ("2025-07-04T12:00-04:00", "S1", "S2")]


def test_boundary_inside_repeated_hour_switches_once(tmp_path):
    # Europe/Berlin as above; 30-minute intervals, a boundary at 02:30 (inside the hour
    # repeated on 26 October 2025 and the hour skipped on 30 March 2025)
    per = [dict(AM_PM[0], **{"from": "02:30"}), dict(AM_PM[1], to="02:30")]
    df = _calendar(tmp_path, "Europe/Berlin", per, interval=30)
    assert _on(df, "2025-10-26")[0] == ("2025-10-26T02:30+02:00", "S2", "S1")
    assert len(_on(df, "2025-10-26")) == 2
    assert _on(df, "2025-03-30")[0] == ("2025-03-30T03:00+02:00", "S2", "S1")


@pytest.mark.parametrize("caps", [{"max_switch_operations_per_year": 0},
                                  {"max_switched_feeders": 1},
                                  {"max_switch_operations_per_year": 100}])
def test_caps_are_met(tmp_path, caps):
    """The caps hold after the pass, whatever the start: a start schedule where both
    switchable feeders switch every day and night (2 × 730 operations by the calendar)."""
    from dataclasses import replace

    from allocator.plan.heuristic import Band
    from allocator.plan.solve import band_of
    from allocator.plan.switched import (_Pass, column_periods, enforce_caps, expand,
                                         switch_ops, switchable_units, transitions,
                                         unit_schedule)
    from allocator.plan.units import build_units

    st = read_study(_study(tmp_path, periods=DAY_EVENING, settings={"holiday_country": None}))
    st = replace(st, settings=replace(st.settings, **caps))
    years = build_years(st)
    units = build_units(st, years)
    sw = switchable_units(st, units)
    cp = column_periods(st, years, units)
    ex = expand(units, cp, sw, 2)
    opt = np.full(ex.units.n, 2)
    opt[(ex.period == 0)] = 0  # switchable: S1 by day, S2 in the evening
    opt[(ex.period == 1)] = 1
    n_trans = transitions(st, years[0])
    assert n_trans[0, 1] == n_trans[1, 0] == 365  # one change each way per day
    state = _Pass(ex, opt, band_of(st), n_trans, cp)
    assert sum(state.ops(u) for u in state.copies) == 4 * 365
    assert enforce_caps(state, st, np.ones(units.n, dtype=int))
    ops = switch_ops(unit_schedule(ex, state.opt), n_trans)
    switched = int((ops > 0).sum())
    if "max_switch_operations_per_year" in caps:
        assert ops.sum() <= caps["max_switch_operations_per_year"]
    if "max_switched_feeders" in caps:
        assert switched <= caps["max_switched_feeders"]
