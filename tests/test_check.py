"""Checks of the armed-load check (allocator.check) against worked examples and outside rules.

Outside references used here, each named again beside its check:

* The contribution rules (standard relay trips the feeder's net load, negative while it
  exports; a direction-blocked relay does not trip in reverse power flow, so max(net, 0)):
  common practice, no source.  They are checked on a hand-worked example whose arithmetic is
  written out in the comments, and against a naive per-feeder loop.
* Sample percentiles: Hyndman, R. J. & Fan, Y. (1996), "Sample quantiles in statistical
  packages", The American Statistician 50(4), definition 7 (linear interpolation between
  order statistics, h = (n - 1) p); numpy's default ``method="linear"`` is documented as that
  definition (from memory).  Implemented by hand below.
* Regulation (EU) 2017/2196 (network code on electricity emergency and restoration), Art.
  50(1): the yearly update, by the distribution system operator, of what it communicated
  under Art. 12(6)(b) - the frequency settings at which netted demand disconnection starts
  and the percentage of netted demand disconnected at each (article numbers from memory; not
  checked against the published text here).
* Europe/Berlin: CET = UTC+1, CEST = UTC+2; 2025 DST from 30 March 01:00 UTC to 26 October
  01:00 UTC (EU rule "last Sunday of March / October at 01:00 UTC", Directive 2000/84/EC;
  from memory).
* Public holidays of Bavaria: the ``holidays`` package (PyPI), country DE, subdivision BY.

All study data (feeders, loads, blocks) is invented test data.
"""

from __future__ import annotations

import contextlib
import io
import json
import math
from dataclasses import replace
from pathlib import Path

import holidays
import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given
from hypothesis import settings as hyp_settings
from hypothesis import strategies as hst

from allocator.armed import armed_mw, contribution_mw, share_pct
from allocator.check import (annual_statement, by_substation, exporting_feeders, run_check,
                             shortfall_windows, summary_dict)
from allocator.cli import main as cli_main
from allocator.domain import RELAY_DIRECTION_BLOCKED, RELAY_NONE, RELAY_STANDARD
from allocator.metered import read_metered
from allocator.workbook import read_study
from allocator.timegrid import study_intervals
from allocator.year import Year, build_year
from handref import hf7 as _hf7
from wbfactory import BASE_SETTINGS, flat_profiles, write_workbook

TZ = "Europe/Berlin"
ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "inputs_demo" / "lindmark.xlsx"


# --------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------
def _feeder(fid, sub, relay="standard", block=None, peak=10.0, pv=0.0, **kw):
    row = {"feeder_id": fid, "substation": sub, "zone": "Z", "profile": "res", "peak_mw": peak,
           "pv_mw": pv, "relay": relay, "priority": None, "allowed_blocks": None,
           "trip_group": None, "current_block": block, "customers": 10}
    row.update(kw)
    return row


def _study(tmp_path, feeders, name="wb.xlsx", blocks=None, **settings):
    s = dict(BASE_SETTINGS)
    s.update(settings)
    return read_study(write_workbook(tmp_path / name, settings=s, feeders=feeders,
                                     blocks=blocks))


def _year(study, net, demand, start_local="2025-06-02 00:00"):
    """A hand-made hourly Year: ``net[feeder, interval]`` and ``demand[interval]`` as given."""
    net = np.asarray(net, dtype=float)
    n_t = net.shape[1]
    ts = pd.date_range(pd.Timestamp(start_local, tz=TZ).tz_convert("UTC"), periods=n_t,
                       freq="h")
    z = np.zeros(n_t)
    return Year(ts, TZ, 60, study.feeder_ids, net, np.asarray(demand, dtype=float), z,
                z.astype(np.intp), z.astype(np.int8))


# ============================================================================================
# 1. hand-worked example: 4 feeders, 2 blocks, 24 hourly intervals
# ============================================================================================
# Hours h = 0..23 of Monday 2 June 2025, local (CEST, UTC+2).  Blocks S1 (order 1) and S2
# (order 2), both with band 8..12 % (target 10 %).  The blocks sheet lists S2 first, so the
# check must sort by `order`.  Demand (a system total, not the four feeders' sum) is 100 MW,
# except 125 MW at h = 22, 23.
#
#   F0  standard           S1  SUBA   6 MW every hour
#   F1  standard           S1  SUBB   7 MW at h0; -1, -2, -1 MW at h11, h12, h13 (exports);
#                                     4 MW otherwise
#   F2  direction_blocked  S2  SUBA  -1, -2 MW at h9, h10 and -0.5 MW at h20 (exports);
#                                     5 MW otherwise
#   F3  standard           S2  SUBB   4 MW at h20; 5 MW otherwise
#
# Armed MW (standard: net; direction-blocked: max(net, 0)):
#   S1 = F0 + F1:  h0 6+7 = 13;  h11 6-1 = 5;  h12 6-2 = 4;  h13 6-1 = 5;  otherwise 6+4 = 10
#   S2 = max(F2,0) + F3:  h9 0+5 = 5;  h10 0+5 = 5;  h20 0+4 = 4;  otherwise 5+5 = 10
# Shares (100 * armed / demand): as the MW where demand = 100; at h22, h23 10/125 = 8 %.
#   S1 = [13, 10 x10 (h1-h10), 5, 4, 5, 10 x8 (h14-h21), 8, 8]
#   S2 = [10 x9 (h0-h8), 5, 5, 10 x9 (h11-h19), 4, 10, 8, 8]
# Cumulative (S1 + S2): h0 23; h9, h10 15; h11 15; h12 14; h13 15; h20 14; h22, h23 16;
#   otherwise 20.
HAND_NET = np.array([
    [6.0] * 24,
    [7.0] + [4.0] * 10 + [-1.0, -2.0, -1.0] + [4.0] * 10,
    [5.0] * 9 + [-1.0, -2.0] + [5.0] * 9 + [-0.5] + [5.0] * 3,
    [5.0] * 20 + [4.0] + [5.0] * 3,
])
HAND_DEMAND = np.array([100.0] * 22 + [125.0, 125.0])
HAND_S1 = np.array([13.0] + [10.0] * 10 + [5.0, 4.0, 5.0] + [10.0] * 8 + [8.0, 8.0])
HAND_S2 = np.array([10.0] * 9 + [5.0, 5.0] + [10.0] * 9 + [4.0, 10.0, 8.0, 8.0])


@pytest.fixture()
def hand(tmp_path):
    blocks = [  # listed out of order on purpose
        {"block": "S2", "order": 2, "pickup_hz": 48.7, "delay_s": 0.2, "rocof_hz_per_s": None,
         "target_pct": 10, "min_pct": 8, "max_pct": 12},
        {"block": "S1", "order": 1, "pickup_hz": 49.0, "delay_s": 0.1, "rocof_hz_per_s": None,
         "target_pct": 10, "min_pct": 8, "max_pct": 12},
    ]
    feeders = [_feeder("F0", "SUBA", block="S1"),
               _feeder("F1", "SUBB", block="S1", pv=15.0),
               _feeder("F2", "SUBA", relay="direction_blocked", block="S2", pv=15.0),
               _feeder("F3", "SUBB", block="S2")]
    study = _study(tmp_path, feeders, blocks=blocks, demand_basis="metered_total")
    year = _year(study, HAND_NET, HAND_DEMAND)
    return study, year, run_check(study, year, study.current_assignment)


def test_hand_example_armed_and_shares(hand):
    study, year, chk = hand
    assert study.block_names == ("S1", "S2")
    np.testing.assert_array_equal(chk.block_idx, [0, 0, 1, 1])
    # armed MW = share x demand / 100 (see the table above)
    exp_s1_mw = np.array([13.0] + [10.0] * 10 + [5.0, 4.0, 5.0] + [10.0] * 10)
    exp_s2_mw = np.array([10.0] * 9 + [5.0, 5.0] + [10.0] * 9 + [4.0, 10.0, 10.0, 10.0])
    np.testing.assert_allclose(chk.armed_mw, [exp_s1_mw, exp_s2_mw], rtol=0, atol=1e-12)
    np.testing.assert_allclose(chk.share_pct, [HAND_S1, HAND_S2], rtol=0, atol=1e-12)
    exp_cum2 = np.array([23.0] + [20.0] * 8 + [15.0, 15.0, 15.0, 14.0, 15.0] + [20.0] * 6
                        + [14.0, 20.0, 16.0, 16.0])
    np.testing.assert_allclose(chk.cum_share_pct, [HAND_S1, exp_cum2], rtol=0, atol=1e-12)
    assert chk.valid.all()


def test_hand_example_stats(hand):
    _, _, chk = hand
    s1, s2 = chk.stats
    # S1 sorted: 4, 5, 5, 8, 8, 10 x18, 13 (24 values).
    #   mean = (13 + 5 + 4 + 5 + 8 + 8 + 18*10) / 24 = 223/24
    #   P1: h = 23*0.01 = 0.23 -> 4 + 0.23*(5-4) = 4.23;  P5: h = 1.15 -> 5 + 0.15*(5-5) = 5
    #   P95: h = 21.85 -> x21 = x22 = 10 -> 10
    #   below 8: h11, h12, h13 -> 3 (8 % itself is in band);  above 12: h0 -> 1
    #   shortfall = (8-5) + (8-4) + (8-5) = 10 MWh (at h22, h23: 0.08*125 - 10 = 0)
    #   excess = 13 - 12 = 1 MWh;  worst violation = max(8-4, 13-12) = 4 pp
    assert (s1.block, s1.order, s1.pickup_hz, s1.delay_s) == ("S1", 1, 49.0, 0.1)
    assert s1.min_share_pct == pytest.approx(4.0, abs=1e-12)
    assert s1.p1_share_pct == pytest.approx(4.23, abs=1e-12)
    assert s1.p5_share_pct == pytest.approx(5.0, abs=1e-12)
    assert s1.mean_share_pct == pytest.approx(223 / 24, abs=1e-12)
    assert s1.p95_share_pct == pytest.approx(10.0, abs=1e-12)
    assert s1.max_share_pct == pytest.approx(13.0, abs=1e-12)
    assert (s1.intervals_below_min, s1.intervals_above_max) == (3, 1)
    assert s1.shortfall_mwh == pytest.approx(10.0, abs=1e-12)
    assert s1.excess_mwh == pytest.approx(1.0, abs=1e-12)
    assert s1.worst_violation_pp == pytest.approx(4.0, abs=1e-12)
    assert s1.min_share_local_time == "2025-06-02T12:00+02:00"  # h12, CEST (ISO 8601 local time and offset)
    assert s1.compliant is False
    # S2 sorted: 4, 5, 5, 8, 8, 10 x19.  mean = (4 + 5 + 5 + 8 + 8 + 190)/24 = 220/24
    #   P1 = 4.23, P5 = 5, P95 = 10;  below: h9, h10, h20 -> 3;  above: 0
    #   shortfall = (8-5) + (8-5) + (8-4) = 10 MWh;  worst violation 8 - 4 = 4 pp
    assert s2.min_share_pct == pytest.approx(4.0, abs=1e-12)
    assert s2.p1_share_pct == pytest.approx(4.23, abs=1e-12)
    assert s2.p5_share_pct == pytest.approx(5.0, abs=1e-12)
    assert s2.mean_share_pct == pytest.approx(220 / 24, abs=1e-12)
    assert s2.max_share_pct == pytest.approx(10.0, abs=1e-12)
    assert (s2.intervals_below_min, s2.intervals_above_max) == (3, 0)
    assert s2.shortfall_mwh == pytest.approx(10.0, abs=1e-12)
    assert s2.excess_mwh == 0.0
    assert s2.min_share_local_time == "2025-06-02T20:00+02:00"
    assert chk.compliant is False
    assert chk.worst_violation_pp == pytest.approx(4.0, abs=1e-12)
    # all blocks in band: every hour except h0, h9, h10, h11, h12, h13, h20 -> 17 of 24
    assert chk.all_in_band_fraction == pytest.approx(17 / 24, abs=1e-12)


def test_hand_example_windows(hand):
    _, _, chk = hand
    w = shortfall_windows(chk)
    # Runs outside the band, energy = sum of the gap to the band edge x 1 h:
    #   S1 below: h11-h13 -> 11:00-14:00, 3 h, worst 4 %, (3 + 4 + 3) = 10 MWh
    #   S2 below: h9-h10 -> 09:00-11:00, 2 h, worst 5 %, (3 + 3) = 6 MWh
    #   S2 below: h20    -> 20:00-21:00, 1 h, worst 4 %, 4 MWh
    #   S1 above: h0     -> 00:00-01:00, 1 h, worst 13 %, 1 MWh
    # ranked by energy: 10, 6, 4, 1.
    exp = [
        (1, "S1", "below_min", "2025-06-02T11:00+02:00", "2025-06-02T14:00+02:00", 3.0, 3, 4.0,
         8.0, 10.0),
        (2, "S2", "below_min", "2025-06-02T09:00+02:00", "2025-06-02T11:00+02:00", 2.0, 2, 5.0,
         8.0, 6.0),
        (3, "S2", "below_min", "2025-06-02T20:00+02:00", "2025-06-02T21:00+02:00", 1.0, 1, 4.0,
         8.0, 4.0),
        (4, "S1", "above_max", "2025-06-02T00:00+02:00", "2025-06-02T01:00+02:00", 1.0, 1, 13.0,
         12.0, 1.0),
    ]
    got = w[["rank", "block", "kind", "start_local", "end_local", "duration_h", "intervals",
             "worst_share_pct", "band_pct", "energy_mwh"]]
    assert len(got) == len(exp)
    for row, e in zip(got.itertuples(index=False), exp):
        assert tuple(row)[:5] == e[:5]
        assert int(row.intervals) == e[6]
        np.testing.assert_allclose([row.duration_h, row.worst_share_pct, row.band_pct,
                                    row.energy_mwh], [e[5], e[7], e[8], e[9]], atol=1e-12)
    # the window energies of the below_min kind add up to each block's shortfall MWh
    for s in chk.stats:
        assert w[(w.block == s.block) & (w.kind == "below_min")].energy_mwh.sum() == \
            pytest.approx(s.shortfall_mwh, abs=1e-12)


def test_hand_example_exporting_and_substations(hand):
    _, _, chk = hand
    ex = exporting_feeders(chk).set_index("feeder_id")
    # F1 (standard) exports at h11-h13: 3 h, most 2 MW at 12:00, negative contribution
    #   1 + 2 + 1 = 4 MWh.  F2 (direction-blocked) exports at h9, h10, h20: 3 h, most 2 MW at
    #   10:00; it is not tripped while exporting, so its negative contribution is 0.
    assert list(ex.index) == ["F1", "F2"]
    assert ex.loc["F1", "exporting_hours"] == 3 and ex.loc["F2", "exporting_hours"] == 3
    assert ex.loc["F1", "most_export_mw"] == pytest.approx(2.0)
    assert ex.loc["F1", "most_export_local_time"] == "2025-06-02T12:00+02:00"
    assert ex.loc["F1", "negative_contribution_mwh"] == pytest.approx(4.0)
    assert ex.loc["F2", "most_export_mw"] == pytest.approx(2.0)
    assert ex.loc["F2", "most_export_local_time"] == "2025-06-02T10:00+02:00"
    assert ex.loc["F2", "negative_contribution_mwh"] == 0.0
    bs = by_substation(chk).set_index(["substation", "block"])
    # mean contribution over 24 h:  S1/SUBA F0 = 6;  S1/SUBB F1 = (7 - 4 + 20*4)/24 = 83/24;
    #   S2/SUBA F2 = (21*5 + 3*0)/24 = 105/24;  S2/SUBB F3 = (23*5 + 4)/24 = 119/24.
    # at the block's lowest share (S1: h12, S2: h20): F0 6, F1 -2, F2 0 (exporting), F3 4.
    exp = {("SUBA", "S1"): (6.0, 6.0), ("SUBB", "S1"): (83 / 24, -2.0),
           ("SUBA", "S2"): (105 / 24, 0.0), ("SUBB", "S2"): (119 / 24, 4.0)}
    assert set(bs.index) == set(exp)
    for k, (mean, at_min) in exp.items():
        assert bs.loc[k, "mean_armed_mw"] == pytest.approx(mean, abs=1e-12)
        assert bs.loc[k, "armed_mw_at_block_min"] == pytest.approx(at_min, abs=1e-12)
        assert bs.loc[k, "feeders"] == 1


def test_hand_example_annual_statement(hand):
    """Regulation (EU) 2017/2196 Art. 50(1) (see the module docstring): every
    block's frequency setting and % of netted demand disconnected, here mean and minimum."""
    _, _, chk = hand
    st = annual_statement(chk)
    assert [r["block"] for r in st] == ["S1", "S2"]
    assert [r["pickup_hz"] for r in st] == [49.0, 48.7]
    # S1: mean 223/24, min 4;  S2: mean 220/24, min 4;  cumulative after S2: mean
    #   (223 + 220)/24 = 443/24, min 14 (h12 and h20)
    exp = [(223 / 24, 4.0, 223 / 24, 4.0), (220 / 24, 4.0, 443 / 24, 14.0)]
    for r, (mean, mn, cmean, cmin) in zip(st, exp):
        assert r["netted_demand_disconnected_mean_pct"] == pytest.approx(mean, abs=1e-12)
        assert r["netted_demand_disconnected_min_pct"] == pytest.approx(mn, abs=1e-12)
        assert r["cumulative_mean_pct"] == pytest.approx(cmean, abs=1e-12)
        assert r["cumulative_min_pct"] == pytest.approx(cmin, abs=1e-12)
    # and the statement's numbers are the block stats'
    for r, s in zip(st, chk.stats):
        assert r["netted_demand_disconnected_mean_pct"] == s.mean_share_pct
        assert r["netted_demand_disconnected_min_pct"] == s.min_share_pct
        assert r["pickup_hz"] == s.pickup_hz and r["delay_s"] == s.delay_s
    assert summary_dict(chk)["annual_statement"] == st


def test_demand_nonpositive_intervals_reported_never_divided(tmp_path):
    feeders = [_feeder("F0", "A", block="S1"), _feeder("F1", "A", block="S2")]
    study = _study(tmp_path, feeders, demand_basis="metered_total")
    # 6 hours; demand 0 at h2 and -5 at h3 (a net-exporting system); S1 always 5 MW.
    #   valid shares: S1 = 5 % at h0, h1, h4, h5 (demand 100) -> all below 8 %.
    #   shortfall only on valid hours: 4 x (8 - 5) = 12 MWh; windows broken by h2-h3:
    #   h0-h1 (2 h, 6 MWh) and h4-h5 (2 h, 6 MWh), not one 6-hour run.
    #   S2 = 10 MW -> 10 % on the valid hours, in band.
    net = [[5.0] * 6, [10.0] * 6]
    demand = [100.0, 100.0, 0.0, -5.0, 100.0, 100.0]
    year = _year(study, net, demand)
    with np.errstate(all="raise"):  # a division by 0 or a negative demand would raise
        chk = run_check(study, year, study.current_assignment)
        summ = summary_dict(chk)
    np.testing.assert_array_equal(chk.valid, [True, True, False, False, True, True])
    assert np.isnan(chk.share_pct[:, 2:4]).all()
    assert np.isnan(chk.cum_share_pct[:, 2:4]).all()
    np.testing.assert_allclose(chk.share_pct[:, [0, 1, 4, 5]], [[5.0] * 4, [10.0] * 4])
    assert summ["demand_nonpositive_intervals"] == 2
    assert summ["intervals"] == 6
    s1, s2 = chk.stats
    assert (s1.min_share_pct, s1.mean_share_pct, s1.max_share_pct) == (5.0, 5.0, 5.0)
    assert s1.intervals_below_min == 4
    assert s1.shortfall_mwh == pytest.approx(12.0)
    assert s2.compliant and not s1.compliant
    w = shortfall_windows(chk)
    assert list(zip(w.block, w.start_local, w.duration_h, w.energy_mwh.round(9))) == [
        ("S1", "2025-06-02T00:00+02:00", 2.0, 6.0),
        ("S1", "2025-06-02T04:00+02:00", 2.0, 6.0)]
    # all-nonpositive demand: nothing to divide by, nothing compliant
    year0 = _year(study, net, [0.0] * 6)
    with np.errstate(all="raise"):
        chk0 = run_check(study, year0, study.current_assignment)
    assert summary_dict(chk0)["demand_nonpositive_intervals"] == 6
    assert not chk0.compliant and all(math.isnan(s.mean_share_pct) for s in chk0.stats)


# ============================================================================================
# 2. properties of the arithmetic
# ============================================================================================
_MW = hst.floats(-50.0, 50.0, allow_nan=False, allow_infinity=False)


@hst.composite
def _network(draw, min_blocks=1, relays=(RELAY_NONE, RELAY_STANDARD, RELAY_DIRECTION_BLOCKED)):
    nf = draw(hst.integers(1, 12))
    nt = draw(hst.integers(1, 16))
    nb = draw(hst.integers(min_blocks, 4))
    net = np.array(draw(hst.lists(_MW, min_size=nf * nt, max_size=nf * nt))).reshape(nf, nt)
    relay = np.array(draw(hst.lists(hst.sampled_from(relays), min_size=nf, max_size=nf)),
                     dtype=np.int8)
    blk = np.array(draw(hst.lists(hst.integers(-1, nb - 1), min_size=nf, max_size=nf)),
                   dtype=np.intp)
    return net, relay, blk, nb


def _naive_armed(net, relay, blk, nb):
    """The rules written out one feeder at a time (the reference)."""
    out = np.zeros((nb, net.shape[1]))
    for f in range(net.shape[0]):
        if blk[f] < 0 or relay[f] == RELAY_NONE:
            continue
        for t in range(net.shape[1]):
            v = net[f, t]
            if relay[f] == RELAY_DIRECTION_BLOCKED and v < 0:
                v = 0.0
            out[blk[f], t] += v
    return out


def _tol(net):
    return 1e-12 * (1.0 + np.abs(net).sum())


_PROP = hyp_settings(max_examples=150, deadline=None,
                     suppress_health_check=[HealthCheck.too_slow])


@_PROP
@given(_network())
def test_armed_equals_naive_loop(case):
    net, relay, blk, nb = case
    np.testing.assert_allclose(armed_mw(net, relay, blk, nb), _naive_armed(net, relay, blk, nb),
                               rtol=0, atol=_tol(net))


@_PROP
@given(_network(relays=(RELAY_STANDARD,)))
def test_standard_armed_plus_unarmed_is_total(case):
    net, relay, blk, nb = case
    armed_total = armed_mw(net, relay, blk, nb).sum(axis=0)
    unarmed = contribution_mw(net[blk < 0], relay[blk < 0]).sum(axis=0)
    np.testing.assert_allclose(armed_total + unarmed, net.sum(axis=0), rtol=0, atol=_tol(net))


@_PROP
@given(_network())
def test_direction_blocked_never_negative(case):
    net, relay, blk, nb = case
    c = contribution_mw(net, relay)
    db = relay == RELAY_DIRECTION_BLOCKED
    assert (c[db] >= 0).all()
    np.testing.assert_array_equal(c[db], np.maximum(net[db], 0.0))
    assert (c[relay == RELAY_NONE] == 0).all()
    np.testing.assert_array_equal(c[relay == RELAY_STANDARD], net[relay == RELAY_STANDARD])
    only_db = np.where(db, blk, -1)
    assert (armed_mw(net, relay, only_db, nb) >= 0).all()


@_PROP
@given(_network(min_blocks=2), hst.data())
def test_moving_one_feeder_changes_two_rows(case, data):
    net, relay, blk, nb = case
    f = data.draw(hst.integers(0, net.shape[0] - 1))
    old = data.draw(hst.integers(0, nb - 1))
    new = data.draw(hst.integers(0, nb - 1).filter(lambda b: b != old))
    a = blk.copy()
    a[f] = old
    b = a.copy()
    b[f] = new
    ra, rb = armed_mw(net, relay, a, nb), armed_mw(net, relay, b, nb)
    others = [j for j in range(nb) if j not in (old, new)]
    np.testing.assert_array_equal(ra[others], rb[others])  # bit-identical
    c = contribution_mw(net[f:f + 1], relay[f:f + 1])[0]
    np.testing.assert_allclose(rb[old], ra[old] - c, rtol=0, atol=_tol(net))
    np.testing.assert_allclose(rb[new], ra[new] + c, rtol=0, atol=_tol(net))
    if np.abs(c).max() > 1e-6:  # a feeder that contributes something does move
        assert not np.array_equal(ra[old], rb[old]) and not np.array_equal(ra[new], rb[new])


@_PROP
@given(_network(), hst.floats(1e-3, 1e3), hst.data())
def test_shares_scale_invariant(case, k, data):
    net, relay, blk, nb = case
    nt = net.shape[1]
    demand = np.array(data.draw(hst.lists(
        hst.one_of(hst.floats(1.0, 500.0), hst.sampled_from([0.0, -3.0])),
        min_size=nt, max_size=nt)))
    s1 = share_pct(armed_mw(net, relay, blk, nb), demand)
    s2 = share_pct(armed_mw(k * net, relay, blk, nb), k * demand)
    assert (np.isnan(s1) == (demand <= 0)[None, :]).all()
    bound = 100.0 * np.abs(net).sum(axis=0) / np.where(demand > 0, demand, 1.0)
    np.testing.assert_allclose(s2, s1, rtol=1e-9, atol=1e-12 * (1.0 + bound.max()),
                               equal_nan=True)


# ============================================================================================
# 3. compliance rules on constructed share series
# ============================================================================================
def _rule_check(tmp_path, s1_share, rule, pct=None):
    """Block S1 holds exactly ``s1_share`` (one feeder, demand 100 MW); S2 holds 10 %."""
    feeders = [_feeder("F0", "A", block="S1"), _feeder("F1", "A", block="S2")]
    study = _study(tmp_path, feeders, demand_basis="metered_total")
    study = replace(study, settings=replace(study.settings, compliance_rule=rule,
                                            compliance_percentile=pct))
    n = len(s1_share)
    year = _year(study, [s1_share, [10.0] * n], [100.0] * n)
    return run_check(study, year, study.current_assignment)


def test_rule_every_interval(tmp_path):
    # band 8..12 with both edges allowed
    assert _rule_check(tmp_path, [8.0, 10.0, 12.0], "every_interval").stats[0].compliant
    assert not _rule_check(tmp_path, [8.0, 7.999, 12.0], "every_interval").stats[0].compliant
    assert not _rule_check(tmp_path, [8.0, 12.001, 12.0], "every_interval").compliant


@pytest.mark.parametrize("low,high,ok", [
    # n = 100; P5 by Hyndman-Fan 7: h = 99*0.05 = 4.95 -> x4 + 0.95 (x5 - x4)
    (5, 0, True),    # five 0 %, 95 x 10 %: x4 = 0, x5 = 10 -> 9.5 >= 8
    (6, 0, False),   # six 0 %: x4 = x5 = 0 -> 0 < 8
    # P95: h = 99*0.95 = 94.05 -> x94 + 0.05 (x95 - x94)
    (0, 5, True),    # five 20 %: x94 = 10, x95 = 20 -> 10.5 <= 12
    (0, 6, False),   # six 20 %: x94 = 20 -> 20 > 12
    (5, 5, True),
])
def test_rule_percentile_5(tmp_path, low, high, ok):
    share = [0.0] * low + [10.0] * (100 - low - high) + [20.0] * high
    chk = _rule_check(tmp_path, share, "percentile", 5.0)
    assert chk.rule == "percentile:5"
    s = chk.stats[0]
    assert s.p5_share_pct == pytest.approx(_hf7(share, 5), abs=1e-12)
    assert s.compliant is ok
    assert (_hf7(share, 5) >= 8 and _hf7(share, 95) <= 12) is ok
    # every_interval would refuse any of these that has a value outside the band
    assert _rule_check(tmp_path, share, "every_interval").stats[0].compliant is (
        low == 0 and high == 0)


def test_rule_percentile_band_edges_are_in(tmp_path):
    # P5 = 8 and P95 = 12 exactly: both limits are inclusive (">= min_pct", "<= max_pct")
    share = [8.0] * 50 + [12.0] * 50
    assert _hf7(share, 5) == 8.0 and _hf7(share, 95) == 12.0
    assert _rule_check(tmp_path, share, "percentile", 5.0).compliant
    assert _rule_check(tmp_path, [12.0] * 100, "percentile", 5.0).compliant
    assert _rule_check(tmp_path, [8.0] * 100, "percentile", 5.0).compliant
    assert not _rule_check(tmp_path, [12.0] * 99 + [12.5], "percentile", 0.5).compliant


def test_percentile_stats_match_hyndman_fan_7(tmp_path):
    rng = np.random.default_rng(7)
    share = rng.uniform(0.0, 20.0, 37)
    chk = _rule_check(tmp_path, share, "percentile", 1.0)
    s = chk.stats[0]
    for got, p in ((s.p1_share_pct, 1), (s.p5_share_pct, 5), (s.p95_share_pct, 95)):
        assert got == pytest.approx(_hf7(share, p), abs=1e-9)
        assert got == pytest.approx(float(np.percentile(share, p)), abs=1e-9)
    # percentile:1 - P1 >= 8 and P99 <= 12 by the hand definition
    assert s.compliant is (_hf7(share, 1) >= 8 and _hf7(share, 99) <= 12)
    # a series near the edge: 2.5 % of 40 intervals low flips percentile:2 but not :3
    share = [0.0] + [10.0] * 39
    # P2: h = 39*0.02 = 0.78 -> 0 + 0.78*10 = 7.8 < 8;  P3: h = 1.17 -> 10 >= 8
    assert not _rule_check(tmp_path, share, "percentile", 2.0).compliant
    assert _rule_check(tmp_path, share, "percentile", 3.0).compliant


def test_rule_mean(tmp_path):
    half = [0.0] * 10 + [20.0] * 10  # mean 10, every interval out of band
    assert _rule_check(tmp_path, half, "mean").stats[0].compliant
    assert not _rule_check(tmp_path, half, "every_interval").stats[0].compliant
    assert not _rule_check(tmp_path, half, "percentile", 5.0).stats[0].compliant
    # mean (0*10 + 15.8*10)/20 = 7.9 < 8
    assert not _rule_check(tmp_path, [0.0] * 10 + [15.8] * 10, "mean").stats[0].compliant
    # mean (12*19 + 12.5)/20 = 12.025 > 12
    assert not _rule_check(tmp_path, [12.0] * 19 + [12.5], "mean").stats[0].compliant
    assert _rule_check(tmp_path, [12.0] * 20, "mean").stats[0].compliant  # edges are in
    assert _rule_check(tmp_path, [8.0] * 20, "mean").stats[0].compliant


# ============================================================================================
# 4. metered data equal to the profile-built year give the same check
# ============================================================================================
def _shape(p, s, d, m):
    """Invented daily shape (per unit of peak)."""
    h = m // 60
    return 0.5 + (0.35 if 7 <= h < 21 else 0.0) + (0.05 if p == "com" else 0.0) - (
        0.1 if d == "sunday" else 0.0)


def _pv_study(tmp_path):
    feeders = []
    for i in range(6):
        feeders.append(_feeder(f"F{i}", f"SUB{i % 2}", profile="res" if i % 2 else "com",
                               relay="direction_blocked" if i == 3 else "standard",
                               block=("S1", "S2", None)[i % 3], peak=1.0 + i, pv=2.0 * i))
    s = dict(BASE_SETTINGS, gap_fill="profile")
    return read_study(write_workbook(tmp_path / "pv.xlsx", settings=s, feeders=feeders,
                                     profiles=flat_profiles(value=_shape)))


def _compare(a, b, path="") -> list[str]:
    """Differences between two summary dicts (floats within 1e-9)."""
    if isinstance(a, dict):
        if set(a) != set(b):
            return [f"{path}: keys {sorted(set(a) ^ set(b))}"]
        return [d for k in a for d in _compare(a[k], b[k], f"{path}.{k}")]
    if isinstance(a, (list, tuple)):
        if len(a) != len(b):
            return [f"{path}: length {len(a)} != {len(b)}"]
        return [d for i, (x, y) in enumerate(zip(a, b)) for d in _compare(x, y, f"{path}[{i}]")]
    if isinstance(a, float) or isinstance(b, float):
        if math.isnan(a) and math.isnan(b):
            return []
        return [] if abs(a - b) <= 1e-9 else [f"{path}: {a!r} != {b!r}"]
    return [] if a == b else [f"{path}: {a!r} != {b!r}"]


@pytest.mark.parametrize("form", ["offset", "naive_local"])
def test_metered_equal_to_profiles_gives_equal_check(tmp_path, form):
    study = _pv_study(tmp_path)
    prof_year = build_year(study)
    assert (prof_year.net_mw < 0).any()  # PV makes some feeders export
    ts = prof_year.timestamps_utc
    local = ts.tz_convert(TZ)
    if form == "offset":  # ISO 8601 with +01:00 / +02:00
        t = pd.Series(local.strftime("%Y-%m-%dT%H:%M:%S%z"))
        text = (t.str[:-2] + ":" + t.str[-2:]).to_numpy()
    else:  # local wall clock; the repeated autumn hour appears twice, summer time first
        text = np.asarray(local.strftime("%Y-%m-%d %H:%M"))
    nf, nt = prof_year.net_mw.shape
    keep = np.ones((nf, nt), dtype=bool)
    rng = np.random.default_rng(3)
    keep[rng.integers(0, nf, 300), rng.integers(0, nt, 300)] = False
    keep[2, 4000:4024] = False  # a whole day missing for F2
    # gaps around the DST changes: the first hours after the spring switch (03:00 CEST on
    # 30 March = 01:00 UTC) and after the autumn one (02:00 CET = 01:00 UTC on 26 October)
    spring = ts.get_loc(pd.Timestamp("2025-03-30 01:00", tz="UTC"))
    autumn = ts.get_loc(pd.Timestamp("2025-10-26 01:00", tz="UTC"))
    keep[0, spring:spring + 2] = False
    keep[1, autumn + 1:autumn + 3] = False
    if form == "naive_local":
        # in the repeated hour a naive reading is placed by its order, so a gap there would
        # move the next reading: keep both readings of 02:00 for every feeder
        dup = pd.Series(text).duplicated(keep=False).to_numpy()
        assert dup.sum() == 2  # 02:00 on 26 October, CEST then CET
        keep[:, dup] = True
    fi, ti = np.nonzero(keep.T)[1], np.nonzero(keep.T)[0]  # time-major order
    df = pd.DataFrame({"timestamp": text[ti], "feeder_id": np.array(study.feeder_ids)[fi],
                       "mw": prof_year.net_mw[fi, ti]})
    csv = tmp_path / "metered.csv"
    df.to_csv(csv, index=False, float_format="%.17g")
    met = read_metered(csv, study, study_intervals(2025, TZ, 60))
    met_year = build_year(study, met)
    assert met_year.source == "metered"
    assert any(f.flag == "gaps_filled" for f in met_year.flags)
    a = study.current_assignment
    c_prof, c_met = run_check(study, prof_year, a), run_check(study, met_year, a)
    d_prof, d_met = summary_dict(c_prof), summary_dict(c_met)
    d_prof.pop("data_source"), d_met.pop("data_source")
    assert _compare(d_prof, d_met) == []
    np.testing.assert_allclose(c_met.armed_mw, c_prof.armed_mw, rtol=0, atol=1e-9)

    # control: the metered values are used - 5 MW more on F0 (block S1) at one present hour
    t0 = int(np.flatnonzero(keep[0])[5000])
    df.loc[(df.feeder_id == "F0") & (df.timestamp == text[t0]), "mw"] += 5.0
    df.to_csv(csv, index=False, float_format="%.17g")
    c_alt = run_check(study, build_year(study, read_metered(csv, study, ts)), a)
    diff = c_alt.armed_mw - c_prof.armed_mw
    assert diff[0, t0] == pytest.approx(5.0, abs=1e-9)
    assert np.abs(np.delete(diff[0], t0)).max() <= 1e-9 and np.abs(diff[1]).max() <= 1e-9


# ============================================================================================
# 5. the demo: block B2's planted shortfall on spring/summer weekend middays
# ============================================================================================
@pytest.fixture(scope="module")
def demo_check(tmp_path_factory):
    d = tmp_path_factory.mktemp("demo")
    out = d / "out"
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        rc = cli_main(["check", str(DEMO), "--out", str(out), "--format", "none"])
    return rc, out, buf.getvalue()


def test_demo_shows_planted_b2_shortfall(demo_check):
    rc, out, text = demo_check
    assert rc == 0
    summ = json.loads((out / "summary.json").read_text())
    blocks = {b["block"]: b for b in summ["blocks"]}
    assert set(blocks) == {"B1", "B2", "B3", "B4", "B5"}
    assert summ["compliant"] is False
    assert blocks["B2"]["compliant"] is False and blocks["B2"]["intervals_below_min"] > 0
    assert blocks["B2"]["shortfall_mwh"] > 0
    for b in ("B1", "B3", "B4", "B5"):
        assert blocks[b]["compliant"] is True, b
        assert blocks[b]["intervals_below_min"] == 0 and blocks[b]["intervals_above_max"] == 0

    # weekend or public holiday (Bavaria, via the `holidays` package), April-September
    hol = holidays.country_holidays("DE", subdiv="BY", years=2025)

    def weekend_or_holiday(ts):
        return ts.day_of_week >= 5 or ts.date() in hol

    w = pd.read_csv(out / "shortfalls.csv")
    b2 = w[(w.block == "B2") & (w.kind == "below_min")].sort_values("rank")
    assert len(b2) > 0 and set(w.block) == {"B2"}
    worst = b2.iloc[0]  # the window with the most missing energy
    start = pd.Timestamp(worst.start_local.rsplit(" ", 1)[0])
    end = pd.Timestamp(worst.end_local.rsplit(" ", 1)[0])
    assert weekend_or_holiday(start) and 4 <= start.month <= 9, worst.start_local
    assert start.date() == end.date() and start.hour <= 12 and end.hour >= 13  # spans midday
    # the lowest B2 share of the year: a weekend/holiday midday in April-September
    t_min = pd.Timestamp(blocks["B2"]["min_share_local_time"])
    assert weekend_or_holiday(t_min) and 4 <= t_min.month <= 9 and 10 <= t_min.hour <= 15
    # every B2 window of the top ten is on a weekend or holiday in spring/summer
    for r in b2.head(10).itertuples():
        s = pd.Timestamp(r.start_local.rsplit(" ", 1)[0])
        assert weekend_or_holiday(s) and 3 <= s.month <= 9, r.start_local
    assert "NOT COMPLIANT" in text
