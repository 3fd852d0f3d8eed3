"""Fixed or switched arming, judged fairly: both plans count a remote-settable relay the same
way (set from the control room), the switched plan is never worse than the best fixed plan,
``auto`` switches only where that is strictly better by the objective order, and the visit
order ends with the control room's step in band.

Outside references: exhaustive enumeration of every schedule, written from the definitions
in ``tests/test_switched.py::_brute_force`` (worst relative violation, field changes,
switching operations by the calendar), and shares recomputed here feeder by feeder from the
year's net load.  The switching instants are hand-computed from the IANA zone rules for
Europe/Berlin (EU summer time: last Sunday of March and of October at 01:00 UTC), from
memory.  All feeders, loads and schemes are invented test data.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from test_switched import _brute_force, _calendar, _on, _reference_periods, _shape
from wbfactory import BASE_SETTINGS, base_feeders, flat_profiles, write_workbook

from allocator.check import run_checks
from allocator.field.plan import field_plan
from allocator.pipeline import PlanOptions, PlanRequest, Sources, plan_study
from allocator.pipeline.plan import arming_key
from allocator.scenarios import build_years
from allocator.workbook import read_study

#: workday day 07-17, evening 17-07 (the invented 'com' feeders peak 07-19 on workdays,
#: 'res' feeders 17-23 every day, so the mix of a block moves between the periods)
DAY17 = [{"period": "day", "months": "1,2,3,4,5,6,7,8,9,10,11,12", "from": "07:00",
          "to": "17:00"},
         {"period": "evening", "months": "1,2,3,4,5,6,7,8,9,10,11,12", "from": "17:00",
          "to": "07:00"}]


def _one_block(lo, hi):
    return [{"block": "S1", "order": 1, "pickup_hz": 49.0, "delay_s": 0.1,
             "target_pct": (lo + hi) / 2, "min_pct": lo, "max_pct": hi}]


def _workbook(tmp_path, spec, band, settings=None, name="arm.xlsx", trip=None):
    """``spec``: (profile, peak MW, remote-switchable, current block) per feeder."""
    fs = base_feeders(len(spec))
    for i, (prof, peak, sw, cur) in enumerate(spec):
        fs[i].update(peak_mw=peak, profile=prof, current_block=cur,
                     remote_switch="yes" if sw else None)
    for i in trip or ():
        fs[i]["trip_group"] = "G1"
    s = dict(BASE_SETTINGS, holiday_country=None, **(settings or {}))
    return write_workbook(tmp_path / name, settings=s, blocks=_one_block(*band), feeders=fs,
                          profiles=flat_profiles(value=_shape),
                          extra_sheets={"periods": DAY17})


def _bests(st, years, switch, cap=None):
    """Brute force: the best key over every schedule (switching operations ≤ ``cap``) and
    over the fixed ones (the same block in every period), with the remote-settable relays
    counted as set from the control room in both."""
    key, _ = _brute_force(st, years, switch)
    n, n_p = len(st.feeders), len(st.periods)
    best_all = best_fixed = None
    for v in itertools.product(range(-1, len(st.blocks)), repeat=n * n_p):
        sched = np.array(v).reshape(n, n_p)
        if any((sched[i] != sched[i, 0]).any() for i in range(n) if i not in switch):
            continue
        k = key(sched)
        if cap is None or k[2] <= cap:
            best_all = k if best_all is None or k < best_all else best_all
        if (sched == sched[:, :1]).all():
            best_fixed = k if best_fixed is None or k < best_fixed else best_fixed
    return key, best_all, best_fixed


def _plan(path, arming="auto", **kw):
    return plan_study(PlanRequest(Sources(path), PlanOptions(time_limit_s=8, arming=arming,
                                                             **kw)))


def _close(a, b):
    return abs(a[0] - b[0]) < 1e-6 and a[1:] == b[1:]


# ---- instance A: no fixed allocation holds the band, a schedule does ------------------------
#: one 'com' (5 MW) and one 'res' (4 MW) feeder, both remote-switchable, band 20-60 %: the
#: 'com' feeder alone is 74 % of demand on workday middays, the 'res' one 64 % on evenings;
#: a schedule arming 'res' by day and 'com' in the evening stays within 26-56 %
SPEC_A = [("com", 5, True, None), ("res", 4, True, None)]


@pytest.fixture(scope="module")
def case_a(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("arming_a")
    path = _workbook(tmp, SPEC_A, (20, 60))
    st = read_study(path)
    years = build_years(st)
    return path, st, years, _bests(st, years, (0, 1)), _plan(path)


def test_switching_needed_matches_brute_force(case_a):
    """Switching is needed to stay in band: the switched plan is the brute-force best of all
    schedules, the fixed plan the best fixed one, and auto puts the schedule in service
    (switched arming off, or a switched plan no better than fixed, fails here)."""
    _, _, _, (key, best_all, best_fixed), res = case_a
    assert best_all[0] == 0.0 and best_fixed[0] > 0.05  # the instance is what it claims
    sw, fx = res.candidate("switched"), res.candidate("fixed")
    assert _close(key(sw.switched.schedule), best_all)
    assert _close(key(np.repeat(fx.outcome.block_idx[:, None], 2, axis=1)), best_fixed)
    assert arming_key(sw) < arming_key(fx)
    assert res.record["arming"]["chosen"] == "switched" and res.switched is not None
    assert res.record["switching"]["switch_operations_per_year"] == best_all[2]


def test_if_switching_fails_recomputed(case_a):
    """The shares if the switching stops in each period: that period's column of the
    schedule held all year, the share of S1 summed feeder by feeder here (a stuck case
    computed with the first period everywhere fails)."""
    _, st, years, _, res = case_a
    sched = res.switched.schedule
    cases = res.record["switching"]["if_switching_fails"]["per_period"]
    lo, hi = st.blocks[0].min_pct, st.blocks[0].max_pct
    assert [c["stuck_in_period"] for c in cases] == ["day", "evening"]
    for k, case in enumerate(cases):
        low, high, worst = np.inf, -np.inf, 0.0
        for y in years:
            ok = y.demand_mw > 0
            armed = [f for f in range(len(st.feeders)) if sched[f, k] == 0]
            share = 100.0 * y.net_mw[armed][:, ok].sum(axis=0) / y.demand_mw[ok]
            low, high = min(low, share.min()), max(high, share.max())
            worst = max(worst, float(np.maximum(lo - share, share - hi).max()))
        assert case["lowest_share_pct"]["S1"] == pytest.approx(low, abs=1e-9)
        assert case["highest_share_pct"]["S1"] == pytest.approx(high, abs=1e-9)
        assert case["worst_violation_pp"] == pytest.approx(max(worst, 0.0), abs=1e-9)
    assert cases[0]["lowest_share_pct"] != cases[1]["lowest_share_pct"]


def test_visit_order_ends_with_the_schedule_in_band(case_a):
    """The control room's step is a row of the visit order and the last row is the
    schedule as planned: in band."""
    _, _, _, _, res = case_a
    order = res.field.order
    assert [v.is_remote for v in order.visits].count(True) == 1
    assert order.steps[-1].worst_violation_pp <= 1e-9
    wl = res.field.work_list
    remote = wl[wl["action"] == "set remote schedule"]
    assert len(remote) == 2 and set(remote["visit"]) == {order.visit_of[
        next(v.substation for v in order.visits if v.is_remote)]}


def test_fail_safe_required_keeps_the_fixed_plan(tmp_path):
    """With fail_safe = required a schedule that leaves the band when the switching stops
    is not put in service (here every stuck case is out of band)."""
    path = _workbook(tmp_path, SPEC_A, (20, 60), {"fail_safe": "required"})
    res = _plan(path)
    sw = res.candidate("switched")
    assert max(c["worst_violation_pp"] for c in sw.if_fails["per_period"]) > 0
    assert res.record["arming"]["chosen"] == "fixed" and res.switched is None
    assert "fail_safe required" in res.record["arming"]["reason"]


# ---- instance B: switching trades field changes against operations --------------------------
#: as A plus a small non-switchable 'com' feeder armed now; band 20-65 %: a fixed plan holds
#: the band only by moving that feeder (1 field change), a schedule holds it without
SPEC_B = [("com", 5, True, "S1"), ("res", 5, True, None), ("com", 1, False, "S1")]


def test_switching_trades_field_changes_for_operations(tmp_path):
    """Both plans in band; the schedule needs no field change and 1460 operations, the
    fixed plan one field change: by the objective order (field changes before operations)
    the schedule wins (an order that puts operations first fails here)."""
    path = _workbook(tmp_path, SPEC_B, (20, 65))
    st = read_study(path)
    key, best_all, best_fixed = _bests(st, build_years(st), (0, 1))
    assert best_all[:2] == (0.0, 0) and best_all[2] > 0 and best_fixed[:2] == (0.0, 1)
    res = _plan(path)
    assert res.record["arming"]["chosen"] == "switched"
    assert _close(key(res.switched.schedule), best_all)
    assert res.record["field_relays_changed"] == 0


# ---- instance C: a cap between one and two feeders' yearly operations -----------------------
#: one 'com' (5 MW) and two 'res' (3 MW) feeders, all switchable, band 20-60 %: switching
#: one feeder (730 operations a year, twice a day) brings the block into band
SPEC_C = [("com", 5, True, None), ("res", 3, True, None), ("res", 3, True, None)]


@pytest.mark.parametrize("cap", [700, 1000])
def test_cap_between_one_and_two_feeders(tmp_path, cap):
    path = _workbook(tmp_path, SPEC_C, (20, 60),
                     {"max_switch_operations_per_year": cap})
    st = read_study(path)
    key, best, best_fixed = _bests(st, build_years(st), (0, 1, 2), cap=cap)
    assert best[2] == (730 if cap == 1000 else 0)  # the instance is what it claims
    res = _plan(path, arming="switched")
    k = key(res.switched.schedule)
    assert k[2] <= cap and _close(k, best)
    assert arming_key(res.candidate("switched")) <= arming_key(res.candidate("fixed"))


# ---- the calendar: both switches of the spring DST day and the year's wrap -----------------
def test_spring_dst_day_has_both_switches(tmp_path):
    # Europe/Berlin, 30 March 2025: 02:00 does not exist (the switch comes at 03:00 summer
    # time); the 12:00 switch is in summer time, UTC+02:00
    from test_switched import AM_PM

    df = _calendar(tmp_path, "Europe/Berlin", AM_PM)
    assert _on(df, "2025-03-30") == [("2025-03-30T03:00+02:00", "S2", "S1"),
                                     ("2025-03-30T12:00+02:00", "S1", "S2")]


def test_switch_across_new_year(tmp_path):
    """A period boundary at midnight: the calendar repeats, so the year's first interval
    switches from the block of 31 December's last period (a dropped wrap fails)."""
    halves = [{"period": "a", "months": "1,2,3,4,5,6,7,8,9,10,11,12", "from": "00:00",
               "to": "12:00"},
              {"period": "b", "months": "1,2,3,4,5,6,7,8,9,10,11,12", "from": "12:00",
               "to": "00:00"}]
    df = _calendar(tmp_path, "Europe/Berlin", halves)
    assert _on(df, "2025-01-01")[0] == ("2025-01-01T00:00+01:00", "S2", "S1")
    assert _on(df, "2025-12-31") == [("2025-12-31T00:00+01:00", "S2", "S1"),
                                     ("2025-12-31T12:00+01:00", "S1", "S2")]
    assert len(df) == 2 * 365


# ---- the work list and trip groups -----------------------------------------------------------
def test_remote_rows_only_for_relays_that_change(tmp_path):
    """A remote-settable relay whose schedule equals its block now in every period gets no
    row; one whose schedule differs gets one (rows for every switchable relay fail)."""
    spec = [("com", 5, True, "S1"), ("res", 5, True, "S1"), ("com", 1, False, None)]
    st = read_study(_workbook(tmp_path, spec, (0, 100)))
    years = build_years(st)
    sched = np.array([[0, 0], [0, -1], [-1, -1]])  # F00 as now; F01 unarmed in the evening
    fp = field_plan(run_checks(st, years, sched), st.current_assignment)
    wl = fp.work_list
    assert list(wl.loc[wl["action"] == "set remote schedule", "feeders"]) == ["F01"]
    assert fp.counts.remote_relays == 1 and fp.counts.field_relays == 0


def test_switchable_trip_group_switches_as_one(tmp_path):
    """Instance A with its 'com' feeder split into a trip group of two: the plan gives both
    members one schedule and switching.csv one row per switch naming both."""
    spec = [("com", 2.5, True, None), ("com", 2.5, True, None), ("res", 4, True, None)]
    res = _plan(_workbook(tmp_path, spec, (20, 60), trip=(0, 1)), arming="switched")
    sched = res.switched.schedule
    assert (sched[0] == sched[1]).all() and (sched[0] != sched[0, 0]).any()
    sw = res.field.switching
    assert set(sw["feeders"]) == {"F00; F01", "F02"}
    assert len(sw) == res.record["switching"]["switch_operations_per_year"]
    per = _reference_periods(res.study, res.years[0])  # the period written per timestamp
    assert len(sw[sw["feeders"] == "F00; F01"]) == int((np.roll(per, 1) != per).sum())


# ---- the fixed plan counts a remote-settable relay as the switched plan does ----------------
#: two remote-switchable 'com' feeders and two fixed ones: the band (30-60 %) is reached
#: either by setting the remote relays (no field change) or by a field visit to F02
SPEC_D = [("com", 2, True, None), ("com", 3, True, "S1"), ("com", 1, False, "S1"),
          ("res", 1, False, None)]


def test_fixed_plan_sets_remote_relays_from_the_control_room(tmp_path):
    """Brute force over every fixed allocation with the remote relays free of field cost:
    the fixed plan needs no field change (a planner that counts the remote relays as
    field changes visits F02 instead and fails)."""
    path = _workbook(tmp_path, SPEC_D, (30, 60))
    st = read_study(path)
    key, _, best_fixed = _bests(st, build_years(st), (0, 1))
    assert best_fixed[:2] == (0.0, 0)
    res = _plan(path, arming="fixed")
    got = key(np.repeat(res.outcome.block_idx[:, None], 2, axis=1))
    assert _close(got, best_fixed) and res.record["field_relays_changed"] == 0
    assert res.record["remote_relays_changed"] > 0 and res.switched is None
