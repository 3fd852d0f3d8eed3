"""Partial metered years, edge years and the annual statement's basis.

* The planner judges a partial metered year on its data span only (Year.judged_span): the
  profile-filled intervals outside it would bind the plan, and do not.
* A leading edge year with under a day of readings is not a year of its own.
* With two metered calendar years the statement has one row set per year, each from that
  year's data, and the work list's MW moved comes from the study year's.
* The statement's shares are of netted demand (net of PV), not gross.

Outside references, each named again beside its check:

* Brute force over every allocation (itertools.product), each scored with numpy straight
  from the definitions (standard relay: its net load is tripped; share = 100 · armed net
  MW / demand, demand = sum of the feeders' net load, on the measured intervals only;
  worst violation = distance outside [min, max] / target), written here without the
  planner's code.
* Hand arithmetic, written out beside the data it is computed from.
* Sample percentiles: Hyndman & Fan (1996) definition 7, by hand (tests/handref.py).
* The statement's content: Commission Regulation (EU) 2017/2196, Art. 50(1) (from memory):
  per block the frequency setting and the share of *netted* demand disconnected at it.
* EU summer time (Directive 2000/84/EC, from memory): Europe/Berlin is UTC+1 in winter,
  UTC+2 in summer.

All study and metered data here is invented test data.
"""

from __future__ import annotations

import itertools
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from allocator.check import run_checks
from allocator.field.plan import field_plan
from allocator.field.statement import statement_table
from allocator.metered.years import read_metered_years
from allocator.plan import plan_allocation
from allocator.plan.solve import Z_TOL
from allocator.scenarios import build_years
from allocator.workbook import read_study
from allocator.year import Year
from handref import hf7
from wbfactory import BASE_SETTINGS, flat_profiles, write_workbook

TZ = "Europe/Berlin"
TOL_Z = 1e-6


def _feeder(fid, peak, profile="res", block=None, pv=0.0, sub="SUB0"):
    return {"feeder_id": fid, "substation": sub, "zone": "Z", "profile": profile,
            "peak_mw": peak, "pv_mw": pv, "relay": "standard", "priority": None,
            "allowed_blocks": None, "trip_group": None, "current_block": block,
            "customers": 100}


def _hours(start: str, end: str) -> pd.DatetimeIndex:
    """Hourly interval starts from local ``start`` to ``end`` (exclusive), in UTC."""
    return pd.date_range(pd.Timestamp(start, tz=TZ).tz_convert("UTC"),
                         pd.Timestamp(end, tz=TZ).tz_convert("UTC"), freq="h",
                         inclusive="left")


def _long_csv(path: Path, t_utc: pd.DatetimeIndex, values: dict) -> str:
    """Long metered file: timestamp (local, with its UTC offset), feeder_id, mw."""
    stamps = t_utc.tz_convert(TZ).strftime("%Y-%m-%dT%H:%M:%S%z")
    frames = [pd.DataFrame({"timestamp": stamps, "feeder_id": fid, "mw": np.round(v, 6)})
              for fid, v in values.items()]
    pd.concat(frames, ignore_index=True).to_csv(path, index=False)
    return str(path)


# ============================================================================================
# 1. the planner judges a partial metered year on its data span only
# ============================================================================================
# Blocks S1, S2: target 10 %, band 8-12 % (wbfactory.BASE_BLOCKS).  No PV anywhere, flat
# profiles: 'res' 1.0 and 'com' 0.5 per unit of peak, so a profile-filled interval holds
# peak × value.  Readings from 1 October 2024 to 31 January 2025: two partial metered
# years (2024: Oct-Dec, 2025: January); the rest of both years is profile-filled.
#   feeder  peak profile  profile-built MW  metered MW (± 2 % daily swing)   now
#   A        10   res          10              10                            S1
#   B        20   res          20              10
#   C        10   com           5              10
#   D        10   res          10              14                            S2
#   E        55   res          55              56
# Demand is about 100 MW either way, so a feeder's share ≈ its MW.  On the measured
# intervals D (≈ 14 %) is out of band and A, B, C (≈ 10 %) are in, so the best plan keeps
# A in S1, drops D and arms B or C in S2 (worst 0, two relays changed).  On the
# profile-filled intervals only A and D are in band (B 20 %, C 5 %), so a planner judging
# the whole year keeps A and D (worst ≈ 0.2 from D on the measured months, no change).
SPAN_FEEDERS = [("A", 10, "res", "S1"), ("B", 20, "res", None), ("C", 10, "com", None),
                ("D", 10, "res", "S2"), ("E", 55, "res", None)]
SPAN_METERED = {"A": 10.0, "B": 10.0, "C": 10.0, "D": 14.0, "E": 56.0}
SPAN_PROFILE = {"A": 10.0, "B": 20.0, "C": 5.0, "D": 10.0, "E": 55.0}


def _span_case(tmp_path):
    feeders = [_feeder(f, p, prof, cur, sub=f"SUB{i % 2}")
               for i, (f, p, prof, cur) in enumerate(SPAN_FEEDERS)]
    profiles = flat_profiles(value=lambda p, s, d, m: 1.0 if p == "res" else 0.5)
    wb = write_workbook(tmp_path / "span.xlsx", settings=dict(BASE_SETTINGS),
                        feeders=feeders, profiles=profiles)
    t = _hours("2024-10-01", "2025-02-01")
    hour = t.tz_convert(TZ).hour.to_numpy()
    values = {f: SPAN_METERED[f] * (1 + 0.02 * np.sin(2 * np.pi * (hour + 5 * k) / 24))
              for k, f in enumerate(SPAN_METERED)}
    return read_study(wb), _long_csv(tmp_path / "part.csv", t, values), values


def _brute_force(study, net, margin=0.0):
    """(allocations K, worst relative violation, relays changed) over every allocation of
    every feeder to S1, S2 or unarmed; ``net[feeder, column]``, demand = column sums."""
    nb = len(study.blocks)
    K = np.array(list(itertools.product(range(-1, nb), repeat=net.shape[0])))
    pct = 100.0 * net / net.sum(axis=0)[None, :]
    share = (K[:, None, :] == np.arange(nb)[None, :, None]).astype(float) @ pct
    lo = np.array([b.min_pct for b in study.blocks])[None, :, None]
    hi = np.array([b.max_pct for b in study.blocks])[None, :, None]
    tg = np.array([b.target_pct for b in study.blocks])[None, :, None]
    worst = (np.maximum(np.maximum(lo - share, share - hi), 0.0) / tg).max(axis=(1, 2))
    names = list(study.block_names)
    cur = np.array([names.index(f.current_block) if f.current_block else -1
                    for f in study.feeders])
    return K, worst, (K != cur[None, :]).sum(axis=1)


def test_planner_judges_a_partial_year_on_its_data_span(tmp_path):
    study, path, values = _span_case(tmp_path)
    years = build_years(study, read_metered_years(path, study), ["metered"])
    assert [y.scenario for y in years] == ["metered 2024", "metered 2025"]
    assert all(y.scenario_info["partial"] for y in years)
    # the measured intervals only: the readings themselves, feeder order of the sheet
    measured = np.array([values[f] for f, *_ in SPAN_FEEDERS])
    K, worst, changes = _brute_force(study, measured)  # brute force from the definitions
    w_star = worst.min()
    c_star = changes[worst <= w_star + Z_TOL].min()
    assert w_star == 0.0 and c_star == 2  # hand arithmetic in the comment above
    # guard: the profile-filled intervals (every one the same: peak × profile value) would
    # bind - judged on the whole year the best plan is another one
    whole = np.concatenate([measured, np.array([[SPAN_PROFILE[f]] for f, *_ in SPAN_FEEDERS])],
                           axis=1)
    _, worst_all, changes_all = _brute_force(study, whole)  # brute force, whole year
    assert worst_all.min() > 0.15 and worst[worst_all <= worst_all.min() + Z_TOL].min() > 0.15
    out = plan_allocation(study, years, time_limit_s=20)
    assert out.full_year["worst_violation_rel"] == pytest.approx(w_star, abs=TOL_Z)
    k = np.flatnonzero((K == out.block_idx[None, :]).all(axis=1))[0]
    assert worst[k] == pytest.approx(w_star, abs=TOL_Z)  # brute force from the definitions
    assert out.relays_changed == changes[k] == c_star
    # A stays in S1, D is dropped, B or C goes to S2, E stays unarmed
    assert out.block_idx[0] == 0 and out.block_idx[3] == -1 and out.block_idx[4] == -1
    assert sorted(out.block_idx[1:3].tolist()) == [-1, 1]
    assert worst_all[k] > worst_all.min()  # not the plan of the whole year


# ============================================================================================
# 2. a leading edge year with under a day of readings is dropped
# ============================================================================================
# Readings from 31 December 2024 20:00 (local) to the end of 2025: four hours of 2024, then
# the whole study year 2025.  2024 has under a day of readings, so it is no year of its own:
# the run is the one-year case, scenario 'metered', the 8,760 hours of 2025 (hand count:
# 365 × 24), whose values are the 2025 readings.
def test_leading_edge_year_under_a_day_is_dropped(tmp_path):
    feeders = [_feeder(f"F{i}", 10.0, block=("S1", "S2", None)[i]) for i in range(3)]
    wb = write_workbook(tmp_path / "edge.xlsx", settings=dict(BASE_SETTINGS),
                        feeders=feeders, profiles=flat_profiles(value=0.5))
    t = _hours("2024-12-31 20:00", "2026-01-01")
    assert (t.tz_convert(TZ).year == 2024).sum() == 4  # hand count: 20:00 to 23:00
    k = np.arange(len(t))
    values = {f"F{i}": 5.0 + i + 0.1 * ((k + i) % 7) for i in range(3)}
    path = _long_csv(tmp_path / "edge.csv", t, values)
    study = read_study(wb)
    mets = read_metered_years(path, study)
    years = build_years(study, mets, ["metered"])
    assert [y.scenario for y in years] == ["metered"]
    y = years[0]
    assert y.calendar_year == 2025 and y.n_intervals == 365 * 24
    assert y.judged.all()
    first = y.timestamps_utc[0]
    assert first == pd.Timestamp("2025-01-01T00:00+01:00")  # CET
    # the year's values are the 2025 readings (the 2024 ones are not in it)
    assert np.array_equal(y.net_mw, np.array([v[4:] for v in values.values()]).round(6))
    chk = run_checks(study, years, study.current_assignment)
    assert chk.names == ("metered",)


# ============================================================================================
# 3. the statement and the work list take the study year's metered year (study year 2025)
# ============================================================================================
# Hourly readings of all of 2024 and 2025; four feeders, each constant over a year except at
# two hours (below).  Blocks S1, S2.  Now: F00 in S1, F01 in S2.  New: F00 in S1, F02 in S2
# (F01 disarmed, F02 armed; both measured at S2's lowest-share interval).
#            F00  F01  F02  F03   demand
#   2024      11   10    9   70     100      (8,784 hours, a leap year)
#     2024-03-05 04:00+01:00: F02 8       ->  99: S1 1100/99, S2 800/99 (S2's lowest)
#     2024-10-15 22:00+02:00: F00 9       ->  98: S1 900/98 (S1's lowest), S2 900/98
#   2025      10    9   11   70     100      (8,760 hours)
#     2025-02-12 03:00+01:00: F00 8.8     ->  98.8: S1 880/98.8 (lowest), S2 1100/98.8
#     2025-07-09 13:00+02:00: F02 8.5     ->  97.5: S1 1000/97.5, S2 850/97.5 (lowest)
BASES = {2024: (11.0, 10.0, 9.0, 70.0), 2025: (10.0, 9.0, 11.0, 70.0)}
DIPS = {2024: [("2024-03-05 04:00", 2, 8.0), ("2024-10-15 22:00", 0, 9.0)],
        2025: [("2025-02-12 03:00", 0, 8.8), ("2025-07-09 13:00", 2, 8.5)]}

# hand arithmetic of the statement per year: (n, S1 mean, S1 min, its time, S2 mean, S2 min,
# its time, cumulative mean, lowest cumulative, its time); P5 = P95 = the base share there
# (two odd hours among thousands, Hyndman & Fan definition 7)
STATEMENT = {
    2024: dict(n=8784,
               s1=((8782 * 11 + 1100 / 99 + 900 / 98) / 8784, 900 / 98,
                   "2024-10-15T22:00+02:00", 11.0),
               s2=((8782 * 9 + 800 / 99 + 900 / 98) / 8784, 800 / 99,
                   "2024-03-05T04:00+01:00", 9.0),
               cum=((8782 * 20 + 1900 / 99 + 1800 / 98) / 8784, 1800 / 98,
                    "2024-10-15T22:00+02:00")),
    2025: dict(n=8760,
               s1=((8758 * 10 + 880 / 98.8 + 1000 / 97.5) / 8760, 880 / 98.8,
                   "2025-02-12T03:00+01:00", 10.0),
               s2=((8758 * 11 + 1100 / 98.8 + 850 / 97.5) / 8760, 850 / 97.5,
                   "2025-07-09T13:00+02:00", 11.0),
               cum=((8758 * 21 + 1980 / 98.8 + 1850 / 97.5) / 8760, 1850 / 97.5,
                    "2025-07-09T13:00+02:00")),
}
# cumulative lowest 2024: 19/99 = 19.19 % vs 18/98 = 18.37 % -> 2024-10-15 22:00;
# 2025: 19.8/98.8 = 20.04 % vs 18.5/97.5 = 18.97 % -> 2025-07-09 13:00 (hand arithmetic)


def _two_years_file(tmp_path) -> str:
    t = _hours("2024-01-01", "2026-01-01")
    local = t.tz_convert(TZ)
    vals = np.empty((4, len(t)))
    for y, base in BASES.items():
        vals[:, local.year == y] = np.array(base)[:, None]
        for when, f, mw in DIPS[y]:
            vals[f, t.get_loc(pd.Timestamp(when, tz=TZ).tz_convert("UTC"))] = mw
    return _long_csv(tmp_path / "two.csv", t, {f"F{i:02d}": vals[i] for i in range(4)})


def test_statement_and_work_list_take_the_study_years_metered_year(tmp_path):
    feeders = [_feeder("F00", 10, block="S1", sub="SUB0"),
               _feeder("F01", 10, block="S2", sub="SUB1"),
               _feeder("F02", 10, sub="SUB0"), _feeder("F03", 60, sub="SUB1")]
    wb = write_workbook(tmp_path / "two.xlsx", settings=dict(BASE_SETTINGS, year=2025),
                        feeders=feeders, profiles=flat_profiles(value=0.5))
    study = read_study(wb)
    years = build_years(study, read_metered_years(_two_years_file(tmp_path), study),
                        ["metered"])
    assert [y.scenario for y in years] == ["metered 2024", "metered 2025"]
    new = np.array([0, -1, 1, -1])
    fp = field_plan(run_checks(study, years, new), study.current_assignment)

    # the statement: one row set per metered year, each from its own year's data
    st = fp.statement  # per Regulation (EU) 2017/2196 Art. 50(1), from memory
    assert list(st["scenario"]) == ["metered 2024"] * 2 + ["metered 2025"] * 2
    for y, ref in STATEMENT.items():  # hand arithmetic (table above)
        rows = st[st["scenario"] == f"metered {y}"].set_index("block")
        for b in ("S1", "S2"):
            mean, low, when, base = ref[b.lower()]
            r = rows.loc[b]
            assert r["armed_mean_pct"] == pytest.approx(mean, abs=1e-9)
            assert r["armed_min_pct"] == pytest.approx(low, abs=1e-9)
            assert r["armed_min_local_time"] == when
            assert r["armed_p5_pct"] == pytest.approx(base, abs=1e-9)
            assert r["armed_p95_pct"] == pytest.approx(base, abs=1e-9)
        cmean, clow, cwhen = ref["cum"]
        assert rows.loc["S2", "cumulative_mean_pct"] == pytest.approx(cmean, abs=1e-9)
        assert rows.loc["S2", "lowest_cumulative_pct"] == pytest.approx(clow, abs=1e-9)
        assert rows.loc["S2", "lowest_cumulative_local_time"] == cwhen
        assert rows.loc["S1", "lowest_cumulative_pct"] == pytest.approx(ref["s1"][1],
                                                                        abs=1e-9)

    # the work list: MW moved from the study year's (2025) data, hand arithmetic:
    #   F01 (disarmed from S2): 9 MW all year; at S2's lowest (2025-07-09 13:00) 9 MW
    #   F02 (armed into S2): mean (8759 × 11 + 8.5) / 8760; at S2's lowest 8.5 MW
    wl = fp.work_list.set_index("feeders")
    assert set(wl.index) == {"F01", "F02"}
    assert set(wl["mw_scenario"]) == {"metered 2025"}
    assert wl.loc["F01", "action"] == "disarm" and wl.loc["F02", "action"] == "arm"
    assert wl.loc["F01", "moved_mean_mw"] == pytest.approx(9.0, abs=1e-9)
    assert wl.loc["F01", "moved_mw_at_block_lowest"] == pytest.approx(9.0, abs=1e-9)
    assert wl.loc["F02", "moved_mean_mw"] == pytest.approx((8759 * 11 + 8.5) / 8760, abs=1e-9)
    assert wl.loc["F02", "moved_mw_at_block_lowest"] == pytest.approx(8.5, abs=1e-9)
    assert set(wl["block_lowest_local_time"]) == {"2025-07-09T13:00+02:00"}


# ============================================================================================
# 4. the statement's shares are of netted demand (net of PV), not gross
# ============================================================================================
# Four hours of 2 June 2025 from 10:00 (CEST).  pv_derate 0.8 (wbfactory).  PV per unit of
# installed capacity 0.25, 0.5, 1.0, 0.75.
#   feeder block  pv_mw  PV MW (pv_mw × 0.8 × pu)   gross MW            net MW
#   A      S1      0      0                         4 4 4 4             4 4 4 4
#   B      S1      5      1   2   4   3             7 7 7 7             6 5 3 4
#   C      S2      2.5    0.5 1   2   1.5           10 10 10 10         9.5 9 8 8.5
#   D      -       0      0                         80.5 82 85 83.5     80.5 82 85 83.5
# Netted demand (sum of net) = 100 MW each hour; gross demand = 101.5, 103, 106, 104.5.
# Shares of netted demand: S1 = A + B = 10 9 7 8 %, S2 = C = 9.5 9 8 8.5 %,
# cumulative 19.5 18 15 16.5 %.
#   S1: mean 34/4 = 8.5, lowest 7 at 12:00; sorted 7 8 9 10: P5 (h = 0.15) 7.15,
#       P95 (h = 2.85) 9 + 0.85 = 9.85
#   S2: mean 35/4 = 8.75, lowest 8 at 12:00; sorted 8 8.5 9 9.5: P5 8.075, P95 9.425
#   cumulative: mean 69/4 = 17.25, lowest 15 at 12:00
# (of gross demand S1 would be 10/101.5 = 9.85 %, ... : not the statement's figures)
PV_PU = np.array([0.25, 0.5, 1.0, 0.75])
GROSS = np.array([[4.0] * 4, [7.0] * 4, [10.0] * 4, [80.5, 82.0, 85.0, 83.5]])
PV_MW = np.array([0.0, 5.0, 2.5, 0.0])


def test_statement_shares_are_of_netted_demand(tmp_path):
    feeders = [_feeder("A", 10, block="S1"), _feeder("B", 10, block="S1", pv=5.0),
               _feeder("C", 15, block="S2", pv=2.5), _feeder("D", 100)]
    wb = write_workbook(tmp_path / "pv.xlsx", settings=dict(BASE_SETTINGS), feeders=feeders)
    study = read_study(wb)
    assert study.settings.pv_derate == 0.8
    net = GROSS - PV_MW[:, None] * 0.8 * PV_PU[None, :]
    assert np.allclose(net[1], [6, 5, 3, 4]) and np.allclose(net[2], [9.5, 9, 8, 8.5])
    demand = net.sum(axis=0)
    assert np.allclose(demand, 100.0) and np.allclose(GROSS.sum(axis=0),
                                                      [101.5, 103, 106, 104.5])
    ts = pd.date_range(pd.Timestamp("2025-06-02 10:00", tz=TZ).tz_convert("UTC"), periods=4,
                       freq="h")
    z = np.zeros(4)
    year = Year(ts, TZ, 60, study.feeder_ids, net, demand, PV_PU, z.astype(np.intp),
                z.astype(np.int8), scenario="hand")
    st = statement_table(run_checks(study, [year], study.current_assignment))
    rows = st.set_index("block")
    # hand arithmetic (table above); shares of netted demand per Regulation (EU) 2017/2196
    # Art. 50(1), from memory
    exp = {"S1": (8.5, 7.0, 7.15, 9.85), "S2": (8.75, 8.0, 8.075, 9.425)}
    for b, (mean, low, p5, p95) in exp.items():
        r = rows.loc[b]
        assert r["armed_mean_pct"] == pytest.approx(mean, abs=1e-9)
        assert r["armed_min_pct"] == pytest.approx(low, abs=1e-9)
        assert r["armed_min_local_time"] == "2025-06-02T12:00+02:00"
        assert r["armed_p5_pct"] == pytest.approx(p5, abs=1e-9)
        assert r["armed_p95_pct"] == pytest.approx(p95, abs=1e-9)
    assert hf7([10, 9, 7, 8], 5) == pytest.approx(7.15)  # Hyndman & Fan def. 7, by hand
    assert rows.loc["S2", "cumulative_mean_pct"] == pytest.approx(17.25, abs=1e-9)
    assert rows.loc["S2", "lowest_cumulative_pct"] == pytest.approx(15.0, abs=1e-9)
    assert rows.loc["S2", "lowest_cumulative_local_time"] == "2025-06-02T12:00+02:00"
