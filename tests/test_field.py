"""Checks of the field outputs: the annual statement (allocator.field.statement), the relay
work list (allocator.field.worklist), the visit order (allocator.field.visits) and their files
and sheets.

Outside references used here, each named again beside its check:

* The armed-load rules (a standard relay trips the feeder's net load, negative while it
  exports; a direction-blocked relay trips max(net, 0)): common practice, no source.  The
  reference shares below are computed from these rules with numpy, in this file, without
  the code under test.
* Brute force over every order of the substation visits (itertools.permutations), each
  state's shares from the rules above: the reference for the visit order's bottleneck.
* Sample percentiles: Hyndman, R. J. & Fan, Y. (1996), "Sample quantiles in statistical
  packages", The American Statistician 50(4), definition 7 (h = (n - 1) p, linear
  interpolation between order statistics); implemented by hand below.
* Commission Regulation (EU) 2017/2196, Art. 50(1) and Art. 12(6)(b) (from memory): the
  statement's citation.
* ISO 8601 local time with the UTC offset (``2025-06-02T03:00+02:00``); Europe/Berlin is
  UTC+2 in June (EU summer time, Directive 2000/84/EC; from memory).
* ECMA-376 Office Open XML, Part 1, SpreadsheetML page setup (section numbers from memory):
  ``pageSetup`` (§18.3.1.63: ``orientation``, ``paperSize`` with 9 = A4 and 1 = Letter,
  ``fitToWidth``, ``fitToHeight`` with 0 = as many pages as needed), ``pageSetUpPr``
  (§18.3.1.65: ``fitToPage``), ``pane`` (§18.3.1.66: the frozen header) and the defined name
  ``_xlnm.Print_Titles`` (§18.2.5: rows repeated on every printed page); read back with
  openpyxl and from the package's XML.
* The input workbook's own blocks sheet, read with openpyxl: the settings the work list
  must show.

All study data is invented test data.
"""

from __future__ import annotations

import itertools
import json
import re
import zipfile
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

from allocator.check import run_checks
from allocator.field.plan import field_plan
from allocator.files import write_check_files, write_field_files
from allocator.report import write_reports
from allocator.report import figures as F
from allocator.field.statement import COLUMNS, statement_table
from allocator.field.visits import EXACT_MAX_SUBSTATIONS, order_words, visit_order, visit_order_table
from allocator.workbook import read_study
from allocator.field.worklist import WORK_LIST_COLUMNS, work_list_table
from allocator.year import Year
from handref import hf7 as _hf7
from wbfactory import BASE_SETTINGS, write_workbook

TZ = "Europe/Berlin"


# --------------------------------------------------------------------------------------------
# helpers (invented data; the reference arithmetic is written from the rules, not the code)
# --------------------------------------------------------------------------------------------
def _feeder(fid, sub, block=None, relay="standard", group=None, customers=10, prio=None):
    return {"feeder_id": fid, "substation": sub, "zone": "Z", "profile": "res", "peak_mw": 10.0,
            "pv_mw": 0.0, "relay": relay, "priority": prio, "allowed_blocks": None,
            "trip_group": group, "current_block": block, "customers": customers}


def _block(name, order, lo, hi, hz, delay=0.1, rocof=None, arm=None):
    return {"block": name, "order": order, "pickup_hz": hz, "delay_s": delay,
            "rocof_hz_per_s": rocof, "rocof_arm_hz": arm, "target_pct": (lo + hi) / 2,
            "min_pct": lo, "max_pct": hi}


def _study(tmp_path, feeders, blocks, name="field.xlsx"):
    s = dict(BASE_SETTINGS)
    s["priority_policy"] = "last_block"
    return read_study(write_workbook(tmp_path / name, settings=s, feeders=feeders,
                                     blocks=blocks))


def _year(study, net, demand, scenario, source="profiles", start="2025-06-02 00:00"):
    """A hand-made hourly Year (local start 2 June 2025, CEST)."""
    net = np.asarray(net, dtype=float)
    n_t = net.shape[1]
    ts = pd.date_range(pd.Timestamp(start, tz=TZ).tz_convert("UTC"), periods=n_t, freq="h")
    z = np.zeros(n_t)
    return Year(ts, TZ, 60, study.feeder_ids, net, np.asarray(demand, dtype=float), z,
                z.astype(np.intp), z.astype(np.int8), source=source, scenario=scenario)


def _ref_shares(net, relays, alloc, n_blocks, demand):
    """Shares [block, interval] from the rules (common practice, no source): standard trips
    the net load, direction_blocked max(net, 0), unarmed nothing; 100 * armed / demand."""
    out = np.zeros((n_blocks, net.shape[1]))
    for f, b in enumerate(alloc):
        if b < 0 or relays[f] == "none":
            continue
        out[b] += net[f] if relays[f] == "standard" else np.maximum(net[f], 0.0)
    return 100.0 * out / demand[None, :]


def _ref_edge(nets, demands, relays, alloc, lo, hi):
    """Largest max(min - share, share - max) over every block, interval and scenario."""
    e = -np.inf
    for net, dem in zip(nets, demands):
        s = _ref_shares(net, relays, alloc, len(lo), dem)
        e = max(e, float(np.max(np.maximum(lo[:, None] - s, s - hi[:, None]))))
    return e


def _ref_state(old, new, visit_sub_of_feeder, visited):
    """Allocation after the visits in ``visited``: a feeder takes its new block when the
    substation where its relay is visited (its trip group's first feeder's) is visited."""
    return np.array([new[f] if visit_sub_of_feeder[f] in visited else old[f]
                     for f in range(len(old))])


def _brute_force(nets, demands, relays, old, new, visit_sub, lo, hi):
    """Every order of the substations with a change: (order, [edge after each visit])."""
    subs = sorted({visit_sub[f] for f in range(len(old)) if old[f] != new[f]})
    out = []
    for perm in itertools.permutations(subs):
        edges = [_ref_edge(nets, demands, relays,
                           _ref_state(old, new, visit_sub, set(perm[:i + 1])), lo, hi)
                 for i in range(len(perm))]
        out.append((perm, edges))
    return out


def _visit_sub(feeders):
    """Visit substation per feeder by the documented rule: a trip group goes with the
    substation of its first feeder in the sheet."""
    first = {}
    for f in feeders:
        if f["trip_group"]:
            first.setdefault(f["trip_group"], f["substation"])
    return [first[f["trip_group"]] if f["trip_group"] else f["substation"] for f in feeders]


# ============================================================================================
# visit order against brute force over every order (<= 6 substations)
# ============================================================================================
def _random_case(tmp_path, seed):
    """2 to 6 substations, 3 blocks, two scenarios of 24 hours; one trip group across two
    substations; bands set just around the new allocation's shares (and on even seeds the
    current ones') so that the order of the visits matters."""
    rng = np.random.default_rng(seed)
    n_sub = int(rng.integers(2, 7))
    feeders, n_t = [], 24
    for k in range(n_sub):
        for i in range(int(rng.integers(1, 4))):
            relay = "direction_blocked" if rng.random() < 0.3 else "standard"
            feeders.append(_feeder(f"F{k}{i}", f"SUB{k}", relay=relay))
    # a trip group: the last feeder of the last substation with the first of the first
    feeders[-1]["trip_group"] = feeders[0]["trip_group"] = "TG"
    nf = len(feeders)
    relays = [f["relay"] for f in feeders]
    old = rng.integers(-1, 3, nf)
    new = old.copy()
    flip = rng.random(nf) < 0.6
    new[flip] = rng.integers(-1, 3, int(flip.sum()))
    gi = [i for i, f in enumerate(feeders) if f["trip_group"] == "TG"]
    old[gi], new[gi] = old[gi[0]], new[gi[0]]
    if (old == new).all():
        new[1 % nf] = (old[1 % nf] + 2) % 4 - 1
        new[gi] = new[gi[0]]
    t = np.arange(n_t)
    nets, demands = [], []
    for sc in range(2):  # scenario 0 with a PV dip at midday (some exports), 1 without
        base = rng.uniform(1.0, 6.0, nf)[:, None] * (1 + 0.3 * np.sin(2 * np.pi * t / 24))
        dip = (rng.uniform(0, 3.0, nf)[:, None] * np.exp(-0.5 * ((t - 12) / 2.5) ** 2)
               if sc == 0 else 0.0)
        nets.append(base - dip + rng.normal(0, 0.2, (nf, n_t)))
        demands.append(np.full(n_t, 40.0 + 3.0 * nf) + rng.normal(0, 2.0, n_t))
    # bands around the new allocation's shares; on even seeds around the current ones too
    # (then both ends are in band and only the visits in between can break it)
    ends = [new, old] if seed % 2 == 0 else [new]
    fin = np.concatenate([_ref_shares(n, relays, a, 3, d) for n, d in zip(nets, demands)
                          for a in ends], axis=1)
    lo = np.maximum(fin.min(axis=1) - rng.uniform(0, 0.5, 3), 0.0)
    hi = fin.max(axis=1) + rng.uniform(0, 0.5, 3)
    blocks = [_block(f"S{j + 1}", j + 1, round(lo[j], 6), round(hi[j], 6), 49.0 - 0.2 * j)
              for j in range(3)]
    lo = np.array([b["min_pct"] for b in blocks])
    hi = np.array([b["max_pct"] for b in blocks])
    names = ["S1", "S2", "S3"]
    for i, f in enumerate(feeders):
        f["current_block"] = names[old[i]] if old[i] >= 0 else None
    study = _study(tmp_path, feeders, blocks, name=f"rand{seed}.xlsx")
    years = [_year(study, n, d, sc) for n, d, sc in zip(nets, demands, ("sunny", "dull"))]
    return dict(study=study, years=years, nets=nets, demands=demands, relays=relays, old=old,
                new=new, lo=lo, hi=hi, visit_sub=_visit_sub(feeders))


def _check_against_brute_force(c, order):
    """The order's edges are the reference's, and its bottleneck is the brute-force best."""
    ref = _brute_force(c["nets"], c["demands"], c["relays"], c["old"], c["new"],
                       c["visit_sub"], c["lo"], c["hi"])
    subs = [v.substation for v in order.visits]
    assert sorted(subs) == sorted(ref[0][0])
    # every state of the chosen order, from the rules (reference shares written above)
    now = _ref_edge(c["nets"], c["demands"], c["relays"], c["old"], c["lo"], c["hi"])
    assert order.steps[0].edge_pp == pytest.approx(now, abs=1e-9)
    for i, st in enumerate(order.steps[1:], 1):
        alloc = _ref_state(c["old"], c["new"], c["visit_sub"], set(subs[:i]))
        e = _ref_edge(c["nets"], c["demands"], c["relays"], alloc, c["lo"], c["hi"])
        assert st.edge_pp == pytest.approx(e, abs=1e-9), (i, st)
    return ref, now


@pytest.mark.parametrize("seed", range(16))
def test_visit_order_exact_equals_brute_force(tmp_path, seed):
    """Brute force over every permutation of the substations (reference shares from the
    armed-load rules, numpy, in this file): the order found has the smallest possible
    largest edge over its visits, so it keeps the band exactly when some order does."""
    c = _random_case(tmp_path, seed)
    cs = run_checks(c["study"], c["years"], c["new"])
    order = visit_order(cs, c["old"])
    assert len(order.visits) <= 6 <= EXACT_MAX_SUBSTATIONS
    assert order.method == "exact" and order.proven
    ref, now = _check_against_brute_force(c, order)
    best = min(max(e) for _, e in ref)
    assert max(s.edge_pp for s in order.steps[1:]) == pytest.approx(best, abs=1e-9)
    limit = max(now, 0.0)
    some_keeps = any(max(max(e), 0.0) <= limit + 1e-9 for _, e in ref)
    assert order.keeps_band == some_keeps
    # the lower bound is the optimum (proven)
    assert order.lower_bound_pp == pytest.approx(best, abs=1e-9)
    # the work list numbers every relay with the visit of its substation
    wl = work_list_table(cs, order)
    assert sorted(wl["visit"]) == sorted(order.visit_of[s] for s in wl["visit_substation"])
    assert list(wl["visit"]) == sorted(wl["visit"])


def test_random_cases_discriminate(tmp_path):
    """Guard on the cases above: in some the order matters (orders differ in their
    bottleneck), in some an order breaks the band that another keeps, in some no order
    keeps it, and a trip group spans two substations in each."""
    differs = keeps_only_some = none_keeps = 0
    for seed in range(16):
        c = _random_case(tmp_path, seed)
        ref = _brute_force(c["nets"], c["demands"], c["relays"], c["old"], c["new"],
                           c["visit_sub"], c["lo"], c["hi"])
        now = _ref_edge(c["nets"], c["demands"], c["relays"], c["old"], c["lo"], c["hi"])
        tops = [max(max(e), 0.0) for _, e in ref]
        differs += max(tops) - min(tops) > 1e-6
        ok = [t <= max(now, 0.0) + 1e-9 for t in tops]
        keeps_only_some += any(ok) and not all(ok)
        none_keeps += not any(ok)
        assert len({c["study"].feeders[i].substation for i in
                    c["study"].trip_groups()["TG"]}) == 2
    assert differs >= 4 and keeps_only_some >= 2 and none_keeps >= 1


@pytest.mark.parametrize("seed", range(8))
def test_visit_order_greedy_steps_and_bound(tmp_path, seed, monkeypatch):
    """With the exact search switched off: each step is the best single next visit by the
    reference shares, and the bound it reports is no more than the brute-force optimum."""
    import allocator.field.visits as V

    monkeypatch.setattr(V, "EXACT_MAX_SUBSTATIONS", 0)
    c = _random_case(tmp_path, seed)
    cs = run_checks(c["study"], c["years"], c["new"])
    order = V.visit_order(cs, c["old"])
    assert order.method == "greedy"
    ref, _ = _check_against_brute_force(c, order)
    subs = [v.substation for v in order.visits]
    for i in range(len(subs)):
        done = set(subs[:i])
        cand = {s: _ref_edge(c["nets"], c["demands"], c["relays"],
                             _ref_state(c["old"], c["new"], c["visit_sub"], done | {s}),
                             c["lo"], c["hi"]) for s in subs[i:]}
        assert cand[subs[i]] <= min(cand.values()) + 1e-9
    best = min(max(e) for _, e in ref)
    assert order.lower_bound_pp <= best + 1e-9
    if order.proven:
        assert max(s.edge_pp for s in order.steps[1:]) == pytest.approx(best, abs=1e-9)


# --------------------------------------------------------------------------------------------
# no order keeps the band: the step that breaks it and by how much (hand arithmetic)
# --------------------------------------------------------------------------------------------
# Blocks S1 and S2, band 8..12 % each; demand 100 MW in each of 4 hours (2 June 2025, CEST).
#   SUBA: a1 4 MW, S1 -> S2;     a2 6 MW in S1 (6.5 MW at h2), unchanged
#   SUBB: b1 3 MW, S2 -> S1;     b2 7.5 MW in S2, unchanged
# Now: S1 = 4 + 6 = 10 (10.5 at h2), S2 = 3 + 7.5 = 10.5: in band (limit 0).
# All done: S1 = 6 + 3 = 9 (9.5 at h2), S2 = 7.5 + 4 = 11.5: in band.
# SUBA first: S1 = 6 (6.5 at h2) -> 2 pp below; S2 = 3 + 7.5 + 4 = 14.5 -> 2.5 pp above.
# SUBB first: S1 = 4 + 6 + 3 = 13 (13.5 at h2) -> 1.5 pp above at h2; S2 = 7.5 -> 0.5 below.
# Every order breaks the band at visit 1; the least bad is SUBB first: block S1, 1.5 pp
# above its maximum at h2 = 2025-06-02T02:00+02:00, 1.5 pp over the limit of 0.
BREAK_FEEDERS = [("a1", "SUBA", "S1"), ("a2", "SUBA", "S1"), ("b1", "SUBB", "S2"),
                 ("b2", "SUBB", "S2")]
BREAK_NET = np.array([[4.0] * 4, [6.0, 6.0, 6.5, 6.0], [3.0] * 4, [7.5] * 4])


def _break_case(tmp_path):
    blocks = [_block("S1", 1, 8, 12, 49.0), _block("S2", 2, 8, 12, 48.8)]
    study = _study(tmp_path, [_feeder(f, s, b) for f, s, b in BREAK_FEEDERS], blocks)
    years = [_year(study, BREAK_NET, np.full(4, 100.0), "only")]
    new = np.array([1, 0, 0, 1])
    return study, years, new


def test_no_order_keeps_the_band_names_the_step(tmp_path):
    study, years, new = _break_case(tmp_path)
    cs = run_checks(study, years, new)
    order = visit_order(cs, study.current_assignment)
    # hand arithmetic above
    assert [v.substation for v in order.visits] == ["SUBB", "SUBA"]
    assert order.limit_pp == 0.0 and not order.keeps_band and order.proven
    brk = order.first_break
    assert (brk.visit, brk.substation, brk.block, brk.side) == (1, "SUBB", "S1", "max")
    assert brk.worst_violation_pp == pytest.approx(1.5, abs=1e-12)
    assert order.excess_pp(brk) == pytest.approx(1.5, abs=1e-12)
    assert brk.local_time == "2025-06-02T02:00+02:00"  # ISO 8601, CEST
    assert order.steps[2].worst_violation_pp == 0.0 and order.steps[2].edge_pp == \
        pytest.approx(-0.5, abs=1e-12)  # all done: S2 11.5, 0.5 pp from its max
    # brute force agrees that no order keeps it and that 1.5 pp is the least
    nets, dem = [BREAK_NET], [np.full(4, 100.0)]
    ref = _brute_force(nets, dem, ["standard"] * 4, study.current_assignment, new,
                       ["SUBA", "SUBA", "SUBB", "SUBB"], np.array([8.0, 8.0]),
                       np.array([12.0, 12.0]))
    assert min(max(e) for _, e in ref) == pytest.approx(1.5, abs=1e-12)
    words = order_words(order)
    assert "Visit 1 (SUBB) breaks the band" in words and "1.50 pp above its maximum" in words
    assert "No order of the visits keeps the band" in words
    # the CSV names it too
    tab = visit_order_table(order)
    row = tab[tab["status"] == "breaks the band"]
    assert list(row["visit"]) == [1]
    assert float(row["excess_over_limit_pp"].iloc[0]) == pytest.approx(1.5, abs=1e-12)


# --------------------------------------------------------------------------------------------
# two scenarios: the order fine on one breaks the other (hand arithmetic)
# --------------------------------------------------------------------------------------------
# S1 band 8..12 %, S2 band 5..15 % (s2 10 MW: S2 always 10 %, 5 pp of room); demand 100 MW.
#   SUBX: x1 disarmed from S1.  SUBY: y1 armed into S1.  base stays in S1 (at SUBZ).
#   scenario 'sunny':    base 9, x1 1,   y1 1.5: now 10; X first 9 (room 1), Y first 11.5
#                        (room 0.5); all done 10.5.  Alone, X first keeps the most room.
#   scenario 'overcast': base 7.5, x1 3, y1 1.2: now 10.5; X first 7.5 -> 0.5 pp below;
#                        Y first 11.7 (room 0.3); all done 8.7.
# On both: Y first (largest edge -0.3 pp) keeps the band; X first breaks it by 0.5 pp.
TWO_FEEDERS = [("base", "SUBZ", "S1"), ("x1", "SUBX", "S1"), ("y1", "SUBY", None),
               ("s2", "SUBZ", "S2")]


def test_two_scenarios_order_fine_on_one_breaks_the_other(tmp_path):
    blocks = [_block("S1", 1, 8, 12, 49.0), _block("S2", 2, 5, 15, 48.8)]
    study = _study(tmp_path, [_feeder(f, s, b) for f, s, b in TWO_FEEDERS], blocks)
    sunny = np.array([[9.0] * 3, [1.0] * 3, [1.5] * 3, [10.0] * 3])
    overcast = np.array([[7.5] * 3, [3.0] * 3, [1.2] * 3, [10.0] * 3])
    dem = np.full(3, 100.0)
    ys = _year(study, sunny, dem, "sunny")
    yo = _year(study, overcast, dem, "overcast")
    new = np.array([0, -1, 0, 1])
    old = study.current_assignment
    alone = visit_order(run_checks(study, [ys], new), old)
    assert [v.substation for v in alone.visits] == ["SUBX", "SUBY"] and alone.keeps_band
    # that order on the overcast year, by the reference shares: 0.5 pp below S1's minimum
    lo, hi = np.array([8.0, 5.0]), np.array([12.0, 15.0])
    relays = ["standard"] * 4
    x_first = _ref_state(old, new, ["SUBZ", "SUBX", "SUBY", "SUBZ"], {"SUBX"})
    assert _ref_edge([overcast], [dem], relays, x_first, lo, hi) == pytest.approx(0.5)
    both = visit_order(run_checks(study, [ys, yo], new), old)
    assert [v.substation for v in both.visits] == ["SUBY", "SUBX"]
    assert both.keeps_band and both.proven
    assert both.steps[1].edge_pp == pytest.approx(-0.3, abs=1e-12)
    assert (both.steps[1].scenario, both.steps[1].block, both.steps[1].side) == \
        ("overcast", "S1", "max")
    assert both.scenarios == ("sunny", "overcast")
    ref = _brute_force([sunny, overcast], [dem, dem], relays, old, new,
                       ["SUBZ", "SUBX", "SUBY", "SUBZ"], lo, hi)
    assert dict((p, max(e)) for p, e in ref)[("SUBX", "SUBY")] == pytest.approx(0.5)
    assert min(max(e) for _, e in ref) == pytest.approx(-0.3)


# ============================================================================================
# annual statement: hand arithmetic
# ============================================================================================
# 6 hours of 2 June 2025 (CEST).  p in S1 (standard), q in S2 (standard), r in S2
# (direction-blocked: max(net, 0)).  Demand 50 MW, 100 MW at h4.
#   p = 5 6 4 7 5 3            S1 = 100 p / demand        = 10 12  8 14  5  6
#   q = 4 2 5 4 8 6, r = 1 -2 1 1 2 1 -> q + max(r, 0) = 5 2 6 5 10 7
#                               S2                         = 10  4 12 10 10 14
#   cumulative S1 + S2                                     = 20 16 20 24 15 20
# S1: mean 55/6, lowest 5 at h4; sorted 5 6 8 10 12 14: P5 (h = 0.25) 5.25, P95 (h = 4.75)
#     12 + 0.75 * 2 = 13.5 (Hyndman & Fan definition 7)
# S2: mean 60/6 = 10, lowest 4 at h1; sorted 4 10 10 10 12 14: P5 4 + 0.25 * 6 = 5.5,
#     P95 13.5; cumulative mean 115/6, lowest 15 at h4 (not 5 + 4 = 9, the sum of minima)
ST_NET = np.array([[5, 6, 4, 7, 5, 3], [4, 2, 5, 4, 8, 6], [1, -2, 1, 1, 2, 1]], dtype=float)
ST_DEMAND = np.array([50, 50, 50, 50, 100, 50], dtype=float)


def _statement_case(tmp_path, metered=False):
    blocks = [_block("S1", 1, 8, 12, 49.0, 0.1, rocof=0.5, arm=49.5),
              _block("S2", 2, 8, 12, 48.8, 0.2)]
    feeders = [_feeder("p", "A", "S1"), _feeder("q", "B", "S2"),
               _feeder("r", "B", "S2", relay="direction_blocked")]
    study = _study(tmp_path, feeders, blocks)
    years = [_year(study, ST_NET, ST_DEMAND, "first"),
             _year(study, ST_NET * 1.1, ST_DEMAND, "second")]
    if metered:  # the metered year is the statement's, wherever it stands
        years = [years[1], _year(study, ST_NET, ST_DEMAND, "metered", source="metered")]
    return study, run_checks(study, years, study.current_assignment)


@pytest.mark.parametrize("metered", [False, True])
def test_statement_hand_arithmetic(tmp_path, metered):
    _, cs = _statement_case(tmp_path, metered)
    df = statement_table(cs)
    assert list(df.columns) == [k for k, _ in COLUMNS]
    assert list(df["scenario"]) == (["metered"] * 2 if metered else ["first"] * 2)
    assert set(df["made_from"]) == ({"metered year"} if metered else
                                    {"first scenario judged (no metered year)"})
    s1, s2 = df.to_dict("records")
    s = 100 * ST_NET[0] / ST_DEMAND
    assert s1["armed_p5_pct"] == pytest.approx(_hf7(s, 5), abs=1e-12) == 5.25
    assert (s1["block"], s1["pickup_hz"], s1["delay_s"], s1["rocof_hz_per_s"],
            s1["rocof_arm_hz"]) == ("S1", 49.0, 0.1, 0.5, 49.5)
    assert np.isnan(s2["rocof_hz_per_s"]) and np.isnan(s2["rocof_arm_hz"])
    exp = [(55 / 6, 5.0, "2025-06-02T04:00+02:00", 5.25, 13.5, 55 / 6, 5.0,
            "2025-06-02T04:00+02:00"),
           (10.0, 4.0, "2025-06-02T01:00+02:00", 5.5, 13.5, 115 / 6, 15.0,
            "2025-06-02T04:00+02:00")]
    for r, (mean, mn, t, p5, p95, cmean, cmin, ct) in zip((s1, s2), exp):
        assert r["armed_mean_pct"] == pytest.approx(mean, abs=1e-12)
        assert r["armed_min_pct"] == pytest.approx(mn, abs=1e-12)
        assert r["armed_min_local_time"] == t  # ISO 8601 local time, CEST = UTC+2
        assert r["armed_p5_pct"] == pytest.approx(p5, abs=1e-12)
        assert r["armed_p95_pct"] == pytest.approx(p95, abs=1e-12)
        assert r["cumulative_mean_pct"] == pytest.approx(cmean, abs=1e-12)
        assert r["lowest_cumulative_pct"] == pytest.approx(cmin, abs=1e-12)
        assert r["lowest_cumulative_local_time"] == ct
    assert s2["lowest_cumulative_pct"] > s1["armed_min_pct"] + s2["armed_min_pct"]


def test_statement_csv_equals_summary_json(tmp_path):
    """statement.csv holds summary.json's values for the statement scenario (6 decimals)."""
    _, cs = _statement_case(tmp_path)
    write_check_files(cs, tmp_path / "out")
    st = pd.read_csv(tmp_path / "out" / "statement.csv", keep_default_na=False)
    summ = json.loads((tmp_path / "out" / "summary.json").read_text(encoding="utf-8"))
    sc = next(s for s in summ["scenarios"] if s["scenario"] == st["scenario"].iloc[0])
    assert sc["scenario"] == "first"
    for r, b, a in zip(st.to_dict("records"), sc["blocks"], sc["annual_statement"]):
        assert r["block"] == b["block"] == a["block"]
        for k, key in (("armed_mean_pct", "mean_share_pct"), ("armed_min_pct", "min_share_pct"),
                       ("armed_p5_pct", "p5_share_pct"), ("armed_p95_pct", "p95_share_pct"),
                       ("pickup_hz", "pickup_hz"), ("delay_s", "delay_s")):
            assert r[k] == pytest.approx(b[key], abs=1e-6), k
        assert r["armed_min_local_time"] == b["min_share_local_time"]
        assert r["cumulative_mean_pct"] == pytest.approx(a["cumulative_mean_pct"], abs=1e-6)
        assert r["lowest_cumulative_pct"] == pytest.approx(a["cumulative_min_pct"], abs=1e-6)


def test_statement_sheet(tmp_path):
    """The statement sheet: citation (Regulation (EU) 2017/2196 Art. 50(1), Art. 12(6)(b);
    from memory), the scenario it is made from, the table with the statement's values, and
    blank prepared-by / checked-by / date fields."""
    _, cs = _statement_case(tmp_path)
    write_reports(cs, tmp_path, formats={"xlsx"})
    write_check_files(cs, tmp_path / "csv")
    summ = json.loads((tmp_path / "csv" / "summary.json").read_text(encoding="utf-8"))
    first = summ["scenarios"][0]
    ws = openpyxl.load_workbook(tmp_path / "report.xlsx")["statement"]
    text = [c.value for row in ws.iter_rows(max_row=7) for c in row if c.value]
    assert any("2017/2196" in t and "Art. 50(1)" in t and "12(6)(b)" in t for t in text)
    assert any("scenario 'first'" in t and "no metered year" in t for t in text)
    assert any("lowest cumulative share over the year" in t for t in text)
    head = [c.value for c in ws[8]]
    assert "lowest cumulative share over the year %" in head
    labels = dict(COLUMNS)
    # the very values summary.json holds for the statement scenario (same rounding)
    for i, (b, a) in enumerate(zip(first["blocks"], first["annual_statement"])):
        row = {h: c.value for h, c in zip(head, ws[9 + i])}
        assert row["scenario"] == first["scenario"] == "first"
        for k, key in (("armed_mean_pct", "mean_share_pct"), ("armed_min_pct", "min_share_pct"),
                       ("armed_p5_pct", "p5_share_pct"), ("armed_p95_pct", "p95_share_pct"),
                       ("pickup_hz", "pickup_hz"), ("delay_s", "delay_s")):
            assert row[labels[k]] == b[key], k
        assert row[labels["cumulative_mean_pct"]] == a["cumulative_mean_pct"]
        assert row[labels["lowest_cumulative_pct"]] == a["cumulative_min_pct"]
        assert row[labels["armed_min_local_time"]] == b["min_share_local_time"]
    labels_at = {ws.cell(r, 1).value: r for r in range(11, ws.max_row + 1)
                 if ws.cell(r, 1).value}
    for word in ("prepared by", "checked by", "date"):
        r = labels_at[word]
        assert all(ws.cell(r, j).value is None for j in range(2, 6))


# ============================================================================================
# work list: hand arithmetic on a tiny case
# ============================================================================================
# Blocks S1 (49.0 Hz, 0.1 s, RoCoF 0.5 Hz/s armed below 49.5 Hz) and S2 (48.8 Hz, 0.2 s).
# 3 hours, demand 100 MW.
#   G1a (SUBP) + G1b (SUBQ): trip group G, standard, S1 -> S2.  net 2 3 4 and 1 1 -1.5:
#        tripped together 3 4 2.5 (the export counts negative): mean 9.5/3
#   H (SUBQ) direction-blocked, unarmed -> S1.  net -1 2 3 -> tripped 0 2 3: mean 5/3
#   K (SUBP) standard, S2 -> unarmed.  net 5 5 4: mean 14/3
#   L (SUBQ) standard, S1, unchanged.  net 6 6 6
# New S1 = H + L = 6 8 9 %: lowest at h0, where H trips 0 MW.
# New S2 = G = 3 4 2.5 %: lowest at h2, where G trips 2.5 MW and K (leaving S2) 4 MW.
WL_FEEDERS = [_feeder("G1a", "SUBP", "S1", group="G", customers=10),
              _feeder("G1b", "SUBQ", "S1", group="G", customers=20),
              _feeder("H", "SUBQ", None, relay="direction_blocked", customers=5),
              _feeder("K", "SUBP", "S2", customers=7, prio="water"),
              _feeder("L", "SUBQ", "S1", customers=1)]
WL_NET = np.array([[2, 3, 4], [1, 1, -1.5], [-1, 2, 3], [5, 5, 4], [6, 6, 6]], dtype=float)
WL_NEW = np.array([1, 1, 0, -1, 0])


@pytest.fixture
def wl_case(tmp_path):
    blocks = [_block("S1", 1, 0, 100, 49.0, 0.1, rocof=0.5, arm=49.5),
              _block("S2", 2, 0, 100, 48.8, 0.2)]
    study = _study(tmp_path, WL_FEEDERS, blocks)
    cs = run_checks(study, [_year(study, WL_NET, np.full(3, 100.0), "only")], WL_NEW)
    return study, cs, tmp_path / "field.xlsx"


def _blocks_sheet(path):
    """The workbook's own blocks sheet (the input), read with openpyxl."""
    ws = openpyxl.load_workbook(path)["blocks"]
    head = [c.value for c in ws[1]]
    return {r[0]: dict(zip(head, r)) for r in ws.iter_rows(min_row=2, values_only=True)}


def test_work_list_hand_arithmetic(wl_case):
    study, cs, path = wl_case
    wl = work_list_table(cs, visit_order(cs, study.current_assignment))
    assert list(wl.columns) == list(WORK_LIST_COLUMNS)
    assert len(wl) == 3  # the trip group is one row
    rows = {r["feeders"]: r for r in wl.to_dict("records")}
    g, h, k = rows["G1a; G1b"], rows["H"], rows["K"]
    assert (g["substations"], g["visit_substation"], g["action"]) == ("SUBP; SUBQ", "SUBP",
                                                                      "move")
    assert (h["action"], k["action"]) == ("arm", "disarm")
    assert (h["visit_substation"], k["visit_substation"]) == ("SUBQ", "SUBP")
    assert g["visit"] == k["visit"] != h["visit"]
    assert (g["relay"], h["relay"]) == ("standard", "direction_blocked")
    # settings now and new against the input workbook's blocks sheet
    bs = _blocks_sheet(path)
    for r, now, new in ((g, "S1", "S2"), (h, None, "S1"), (k, "S2", None)):
        for side, b in (("now", now), ("new", new)):
            if b is None:
                assert r[f"{side}_block"] == "unarmed"
                assert all(np.isnan(r[f"{side}_{x}"]) for x in
                           ("pickup_hz", "delay_s", "rocof_hz_per_s", "rocof_arm_hz"))
                continue
            assert r[f"{side}_block"] == b
            assert r[f"{side}_pickup_hz"] == bs[b]["pickup_hz"]
            assert r[f"{side}_delay_s"] == bs[b]["delay_s"]
            for x in ("rocof_hz_per_s", "rocof_arm_hz"):
                want = bs[b][x]
                assert (np.isnan(r[f"{side}_{x}"]) if want is None else r[f"{side}_{x}"] == want)
    # MW moved by hand (comments above)
    assert g["moved_mean_mw"] == pytest.approx(9.5 / 3, abs=1e-12)
    assert g["moved_mw_at_block_lowest"] == 2.5
    assert g["block_lowest_local_time"] == "2025-06-02T02:00+02:00"
    assert h["moved_mean_mw"] == pytest.approx(5 / 3, abs=1e-12)
    assert h["moved_mw_at_block_lowest"] == 0.0
    assert h["block_lowest_local_time"] == "2025-06-02T00:00+02:00"
    assert k["moved_mean_mw"] == pytest.approx(14 / 3, abs=1e-12)
    assert k["moved_mw_at_block_lowest"] == 4.0
    assert (g["customers"], h["customers"], k["customers"]) == (30, 5, 7)
    assert (k["priority"], g["priority"]) == ("water", "")
    assert set(wl["mw_scenario"]) == {"only"}
    for col in ("done_by", "date", "checked_by"):
        assert set(wl[col]) == {""}


def test_work_list_and_visit_files(wl_case, tmp_path):
    """work_list.csv and visit_order.csv read back with pandas: one row per relay, blank
    sign-off columns, the visit numbers of visit_order.csv."""
    study, cs, _ = wl_case
    fp = field_plan(cs, study.current_assignment)
    write_field_files(fp, tmp_path / "o")
    order = fp.order
    wl = pd.read_csv(tmp_path / "o" / "work_list.csv", keep_default_na=False)
    vo = pd.read_csv(tmp_path / "o" / "visit_order.csv", keep_default_na=False)
    assert len(wl) == 3 and list(wl.columns) == list(WORK_LIST_COLUMNS)
    assert (wl[["done_by", "date", "checked_by"]] == "").all().all()
    assert list(vo["visit"]) == [0, 1, 2]
    by_sub = dict(zip(vo["substation"], vo["visit"]))
    assert all(by_sub[s] == v for s, v in zip(wl["visit_substation"], wl["visit"]))
    assert order.keeps_band  # bands 0..100 %: every state is in band
    assert set(vo["status"][1:]) == {"in band"}


# ============================================================================================
# the sheets: print setup read back (ECMA-376 SpreadsheetML page setup, see the docstring)
# ============================================================================================
def _sheet_xml(path: Path, name: str) -> tuple[str, str]:
    with zipfile.ZipFile(path) as z:
        wb = z.read("xl/workbook.xml").decode("utf-8")
        rels = z.read("xl/_rels/workbook.xml.rels").decode("utf-8")
        rid = re.search(rf'<sheet[^>]*name="{name}"[^>]*r:id="([^"]+)"', wb).group(1)
        target = re.search(rf'Id="{rid}"[^>]*Target="([^"]+)"', rels) or \
            re.search(rf'Target="([^"]+)"[^>]*Id="{rid}"', rels)
        return z.read("xl/" + target.group(1).lstrip("/").removeprefix("xl/")).decode(), wb


def test_field_sheets_print_setup(wl_case, tmp_path):
    study, cs, _ = wl_case
    write_reports(cs, tmp_path, field=field_plan(cs, study.current_assignment), formats={"xlsx"})
    path = tmp_path / "report.xlsx"
    wb = openpyxl.load_workbook(path)
    assert wb.sheetnames[:4] == ["summary", "statement", "work_list", "visit_order"]
    for name, title_row, freeze in (("work_list", 1, "C2"), ("visit_order", 1, "A2"),
                                    ("statement", 8, None)):
        ws = wb[name]
        # ECMA-376 pageSetup / pageSetUpPr (openpyxl's reading of them)
        assert ws.page_setup.orientation == "landscape"
        assert int(ws.page_setup.paperSize) == 9  # A4
        assert int(ws.page_setup.fitToWidth) == 1 and int(ws.page_setup.fitToHeight) == 0
        assert ws.sheet_properties.pageSetUpPr.fitToPage is True
        assert ws.print_title_rows == f"${title_row}:${title_row}"
        assert ws.freeze_panes == freeze
        # and the package's own XML: the same attributes and the defined name
        xml, wbxml = _sheet_xml(path, name)
        setup = re.search(r"<pageSetup [^>]*>", xml).group(0)
        for attr in ('orientation="landscape"', 'paperSize="9"', 'fitToWidth="1"',
                     'fitToHeight="0"'):
            assert attr in setup, (name, attr)
        assert re.search(r'<pageSetUpPr [^>]*fitToPage="1"', xml)
        sid = wb.sheetnames.index(name)
        assert re.search(rf'<definedName name="_xlnm.Print_Titles" localSheetId="{sid}">'
                         rf"'{name}'!\${title_row}:\${title_row}</definedName>", wbxml)
        if freeze:
            assert re.search(r'<pane [^>]*state="frozen"', xml)
    ws = wb["work_list"]
    head = [c.value for c in ws[1]]
    assert head[:6] == ["visit", "visit at substation", "substation(s)", "feeder(s)",
                        "relay kind", "action"]
    assert head[-3:] == ["done by", "date", "checked by"]
    assert "MW moved: mean (only)" in head
    feeders = [ws.cell(r, 4).value for r in range(2, ws.max_row + 1)]
    assert sorted(feeders) == ["G1a; G1b", "H", "K"]
    assert all(ws.cell(r, j).value is None for r in range(2, 5) for j in (22, 23, 24))


def test_field_sheets_without_changes(wl_case, tmp_path):
    """A check of the allocation in service now: one row on each field sheet says so."""
    study, _, _ = wl_case
    cs = run_checks(study, [_year(study, WL_NET, np.full(3, 100.0), "only")],
                    study.current_assignment)
    write_reports(cs, tmp_path, formats={"xlsx"})
    wb = openpyxl.load_workbook(tmp_path / "report.xlsx")
    for name, words in (("work_list", "No relay changes: this report checks the allocation "
                                      "in service now."),
                        ("visit_order", "No visits")):
        ws = wb[name]
        assert ws.max_row == 2 and ws["A2"].value.startswith(words)
    write_reports(cs, tmp_path / "same", field=field_plan(cs, study.current_assignment),
                  formats={"xlsx"})
    ws = openpyxl.load_workbook(tmp_path / "same" / "report.xlsx")["work_list"]
    assert ws.max_row == 2 and "every relay keeps" in ws["A2"].value


def test_visit_order_figure_and_html(wl_case, tmp_path):
    study, cs, _ = wl_case
    paths = write_reports(cs, tmp_path, field=field_plan(cs, study.current_assignment),
                          formats={"png", "html"})
    p = paths["png:visit_order"]
    from matplotlib import image as mpimg

    img = mpimg.imread(p)
    w, h = F.visit_order_size(2)
    assert img.shape[:2] == (round(h * F.DPI), round(w * F.DPI))
    assert float(img[..., :3].var()) > 1e-3
    text = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert 'id="work-list"' in text and 'id="visit-order"' in text and 'id="statement"' in text
    assert "G1a; G1b" in text and "SUBP; SUBQ" in text


# ============================================================================================
# the command line
# ============================================================================================
@pytest.fixture
def cli_wb(tmp_path, monkeypatch):
    from wbfactory import base_feeders, flat_profiles

    monkeypatch.chdir(tmp_path)
    feeders = base_feeders(10)  # peaks 1..10 MW at SUB0 / SUB1
    for i, b in ((0, "S1"), (4, "S1"), (1, "S2"), (3, "S2")):
        feeders[i]["current_block"] = b
    return write_workbook(tmp_path / "study.xlsx", settings=dict(BASE_SETTINGS),
                          feeders=feeders, profiles=flat_profiles())


def test_cli_check_writes_field_files(cli_wb, tmp_path, monkeypatch, capsys):
    from allocator.cli import main

    monkeypatch.setenv("COLUMNS", "80")
    assert main(["check", str(cli_wb), "--out", "now", "--format", "none"]) == 0
    assert (tmp_path / "now" / "statement.csv").is_file()
    assert not (tmp_path / "now" / "work_list.csv").exists()
    assert not (tmp_path / "now" / "visit_order.csv").exists()
    out = capsys.readouterr().out
    assert "Annual statement to the system operator" in out and "Visit order" not in out
    # the same allocation given as a file: still no work list
    same = tmp_path / "same.csv"
    same.write_text("feeder_id,block\nF00,S1\nF04,S1\nF01,S2\nF03,S2\n")
    assert main(["check", str(cli_wb), "--assignment", str(same), "--out", "same",
                 "--format", "none", "--quiet"]) == 0
    assert not (tmp_path / "same" / "work_list.csv").exists()
    # F04 S1 -> S2 (SUB0), F05 armed in S1 (SUB1), F03 disarmed (SUB1)
    moved = tmp_path / "moved.csv"
    moved.write_text("feeder_id,block\nF00,S1\nF04,S2\nF01,S2\nF05,S1\n")
    assert main(["check", str(cli_wb), "--assignment", str(moved), "--out", "moved",
                 "--format", "none"]) == 0
    wl = pd.read_csv(tmp_path / "moved" / "work_list.csv", keep_default_na=False)
    assert sorted(zip(wl["feeders"], wl["action"], wl["now_block"], wl["new_block"])) == [
        ("F03", "disarm", "S2", "unarmed"), ("F04", "move", "S1", "S2"),
        ("F05", "arm", "unarmed", "S1")]
    vo = pd.read_csv(tmp_path / "moved" / "visit_order.csv", keep_default_na=False)
    assert list(vo["visit"]) == [0, 1, 2] and sorted(vo["substation"][1:]) == ["SUB0", "SUB1"]
    out = capsys.readouterr().out
    assert "Visit order" in out and max(len(x) for x in out.splitlines()) <= 80
    assert "…" not in out
    for v in vo["worst_violation_pp"]:
        assert f"{v:.2f}" in out


def test_visit_order_without_any_valid_interval(wl_case, tmp_path):
    """Netted demand never above 0: the visits are listed, not judged, and nothing claims
    the band is kept; the reports are still written (no visit-order figure)."""
    study, _, _ = wl_case
    cs = run_checks(study, [_year(study, WL_NET, np.zeros(3), "only")], WL_NEW)
    order = visit_order(cs, study.current_assignment)
    assert not order.judged and not order.keeps_band and order.method == "none"
    assert {order.status(s) for s in order.steps[1:]} == {"not judged"}
    assert "not judged" in order_words(order)
    paths = write_reports(cs, tmp_path, field=field_plan(cs, study.current_assignment))
    assert "png:visit_order" not in paths and "xlsx" in paths


def test_console_visit_table_is_short_and_names_the_break(monkeypatch):
    """More visits than the console shows: the table stops after SHOWN visits but still
    lists the first one that breaks the band, and says how many are left out."""
    import io

    from rich.console import Console

    import allocator.console.field as FC
    from allocator.field.visits import VisitOrder, VisitStep, Visit

    n = FC.SHOWN + 5
    steps = [VisitStep(0, "", 0, 0, -1.0, "a", "B1", "2025-06-02T00:00+02:00", "min")]
    steps += [VisitStep(i, f"S{i:02d}", 1, 1, 0.75 if i == n else -0.5, "a", "B1",
                        "2025-06-02T00:00+02:00", "min") for i in range(1, n + 1)]
    order = VisitOrder(tuple(Visit(s.substation, ()) for s in steps[1:]), tuple(steps),
                       "greedy", False, -1.0, ("a",), ())
    buf = io.StringIO()
    FC.visit_order_table(Console(file=buf, width=80), order)
    text = buf.getvalue()
    shown = [f"S{i:02d}" for i in range(1, n + 1) if f"S{i:02d}" in text]
    assert shown == [f"S{i:02d}" for i in range(1, FC.SHOWN + 1)] + [f"S{n:02d}"]
    assert f"{n} visits in all, {n - FC.SHOWN - 1} not shown" in text
    assert f"Visit {n} (S{n:02d}) breaks the band" in " ".join(text.split())
    assert "0.75" in text
