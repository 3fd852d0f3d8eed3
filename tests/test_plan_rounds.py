"""The planner's level 1 (worst band violation relative to target) against brute force, on
instances where the interval rounds matter, with a substation share cap, and the
direction-blocked rule by hand arithmetic.

References, each named again beside its check:

* brute-force enumeration: every assignment of the armable feeders to blocks allowed by the
  hard rules (itertools.product over each feeder's options), evaluated with numpy from the
  definitions only - contribution = net load (standard relay), max(net, 0) (direction-
  blocked), 0 (relay none); share = 100 · Σ contribution / demand; violation = distance
  outside [min, max] / target; worst = its maximum over blocks and intervals.  For the cap
  rule the definition of the README / ``max_substation_share_pct``: at each block's interval
  of lowest share, no substation holds more than the cap of the block's armed share.
* hand arithmetic written out in the comments (the direction-blocked case).

Only level 1 is compared (``run_check(...).worst_relative_violation``); levels 2 and 3 are
tested elsewhere.  All feeders, loads and schemes here are invented test data.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest

from allocator.check import run_check
from allocator.domain import UNARMED, Block, Feeder, Profiles, Settings, Study
from allocator.plan import plan_allocation
from allocator.plan.heuristic import systematic_sample
from allocator.plan.units import build_units
from allocator.year import Year

TOL_Z = 1e-6  # on the relative worst violation (solver feasibility tolerance)


# ============================================================================================
# instances built directly (no workbook)
# ============================================================================================
def _settings(sub_cap_pct: float | None = None) -> Settings:
    return Settings(utility="Test", year=2025, timezone="UTC", nominal_hz=50.0,
                    interval_minutes=60, latitude_deg=50.0, longitude_deg=10.0,
                    holiday_country=None, holiday_subdivision=None, demand_basis="feeders",
                    pv_derate=1.0, priority_policy="exclude", compliance_rule="every_interval",
                    compliance_percentile=None, max_changes=None, solver_time_limit_s=30.0,
                    mip_gap=0.0, max_substation_share_pct=sub_cap_pct)


def _block(i: int, target: float, lo: float, hi: float) -> Block:
    return Block(f"B{i + 1}", i + 1, 49.0 - 0.2 * i, 0.1, None, float(target), float(lo),
                 float(hi))


def _feeder(i: int, relay: str = "standard", allowed=None, substation: str = "S",
            current: str | None = None) -> Feeder:
    return Feeder(feeder_id=f"F{i}", substation=substation, zone=None, profile="p",
                  peak_mw=1.0, pv_mw=0.0, relay=relay, priority=None, allowed_blocks=allowed,
                  trip_group=None, current_block=current, customers=None, row=i + 2)


def _make(feeders, blocks, net_mw, sub_cap_pct=None) -> tuple[Study, Year]:
    prof = Profiles(names=("p",), seasons=("all",), values_pu=np.zeros((1, 1, 3, 1440)),
                    month_season=np.zeros(12, dtype=np.intp))
    study = Study(path="rounds", settings=_settings(sub_cap_pct), blocks=tuple(blocks),
                  feeders=tuple(feeders), profiles=prof)
    net = np.asarray(net_mw, dtype=float)
    n_t = net.shape[1]
    ts = pd.date_range("2025-01-01", periods=n_t, freq="h", tz="UTC")
    year = Year(ts, "UTC", 60, study.feeder_ids, net, net.sum(axis=0), np.zeros(n_t),
                np.zeros(n_t, dtype=np.intp), np.zeros(n_t, dtype=np.int8))
    return study, year


# ============================================================================================
# the reference: brute-force enumeration of level 1
# ============================================================================================
def brute_force(study: Study, year: Year):
    """Every assignment within the hard rules used here (relay none, allowed_blocks).
    Returns (K [n, feeder] block index or UNARMED, s [n, block, interval] shares in %,
    pct [feeder, interval] each feeder's contribution in % of demand)."""
    assert not any(f.priority or f.trip_group for f in study.feeders)  # not modelled here
    names = [b.name for b in study.blocks]
    options = []
    for f in study.feeders:
        o = [UNARMED]
        if f.relay != "none":
            o += [b for b in range(len(names))
                  if f.allowed_blocks is None or names[b] in f.allowed_blocks]
        options.append(o)
    K = np.array(list(itertools.product(*options)), dtype=np.intp)
    assert len(K) <= 5000  # keeps the [n, block, interval] array small
    net = year.net_mw
    contrib = np.array([net[i] if f.relay == "standard"
                        else np.maximum(net[i], 0.0) if f.relay == "direction_blocked"
                        else np.zeros_like(net[i]) for i, f in enumerate(study.feeders)])
    assert (year.demand_mw > 0).all()
    pct = 100.0 * contrib / year.demand_mw  # [feeder, interval]
    onehot = (K[:, None, :] == np.arange(len(names))[None, :, None]).astype(float)
    return K, onehot @ pct, pct


def worst_relative(study: Study, s: np.ndarray) -> np.ndarray:
    lo = np.array([b.min_pct for b in study.blocks])[None, :, None]
    hi = np.array([b.max_pct for b in study.blocks])[None, :, None]
    tg = np.array([b.target_pct for b in study.blocks])[None, :, None]
    return (np.maximum(np.maximum(lo - s, s - hi), 0.0) / tg).max(axis=(1, 2))


def substation_rule_ok(study: Study, K: np.ndarray, s: np.ndarray, pct: np.ndarray,
                       cap_pct: float) -> np.ndarray:
    """[n] True where, for every block with armed feeders, at the block's lowest-share
    interval no substation holds more than cap_pct % of the block's share there."""
    subs = sorted({f.substation for f in study.feeders})
    sub_of = np.array([subs.index(f.substation) for f in study.feeders])
    ok = np.ones(len(K), dtype=bool)
    for b in range(len(study.blocks)):
        t_min = np.argmin(s[:, b, :], axis=1)  # [n]
        total = s[np.arange(len(K)), b, t_min]
        for k in range(len(subs)):
            members = (K == b) & (sub_of == k)[None, :]  # [n, feeder]
            held = (members * pct[:, t_min].T).sum(axis=1)
            armed = (K == b).any(axis=1)
            ok &= ~(armed & (total > 0) & (held > cap_pct / 100.0 * total + 1e-9))
    return ok


# ============================================================================================
# 1. instances whose worst intervals are rare spikes: level 1 needs several rounds
# ============================================================================================
def _spiky_instance(chains, n_t: int, seed: int, trap_every_feeder=True):
    """Blocks ``chains`` = [(target, lo, hi, [lowest share of each chain feeder, %],
    trap share %)].  Each chain feeder may sit only in its block and holds a bit less than
    the block's minimum at its lowest (a midday dip on the sunniest day), so one feeder per
    block is best and they rank strictly by that lowest share.  Every chain feeder but the
    last of each chain drops to the trap share at two isolated hours (a rare spike), which
    makes it the worst choice for the full year.  Two feeders together exceed the maximum
    by more than a trap's violation, so no single move leads from one feeder to another:
    a local search that starts from the current allocation (the first, spiky, feeder of
    each chain) stays there.
    The spikes avoid the planner's systematic samples and are offset by a large armable
    feeder that never belongs in a block (its share alone is far above every maximum), so
    the armable total shows nothing unusual there.  A relay-'none' feeder makes up demand."""
    rng = np.random.default_rng(seed)
    h = np.arange(n_t) % 24
    day = np.arange(n_t) // 24
    season = 0.6 + 0.4 * np.sin(np.pi * day / max(day.max(), 1))  # 1 near mid-period
    bell = np.clip(np.cos(np.pi * (h - 13) / 12), 0, None) ** 2
    dip = season * bell  # [interval] in [0, 1], 1 at 13:00 on the middle day
    demand = 80.0 + 20.0 * np.exp(-0.5 * ((h - 19) / 3) ** 2)  # MW, evening peak
    hidden = np.setdiff1d(np.arange(n_t), np.union1d(systematic_sample(n_t, 24),
                                                     systematic_sample(n_t, 400)))
    shares, allowed, current, traps = [], [], [], []
    for b, (_, _, _, lows, trap_pct) in enumerate(chains):
        for j, low in enumerate(lows):
            s = low + 0.4 * (1.0 - dip) + rng.uniform(0, 0.002, n_t)
            if j < len(lows) - 1 or not trap_every_feeder:
                t = rng.choice(hidden, size=2, replace=False)
                s[t] = trap_pct
                traps.append(t)
            shares.append(s)
            allowed.append((f"B{b + 1}",))
            current.append(f"B{b + 1}" if j == 0 else None)
    shares = np.array(shares)
    big = 30.0 + (shares.sum(axis=0).max() - shares.sum(axis=0))  # constant armable total
    pct = np.vstack([shares, big])
    net = pct * demand / 100.0
    net = np.vstack([net, demand - net.sum(axis=0)])  # relay 'none' filler
    assert (net[-1] > 0).all()
    feeders = ([_feeder(i, allowed=a, current=c) for i, (a, c) in enumerate(zip(allowed,
                                                                                current))]
               + [_feeder(len(allowed)), _feeder(len(allowed) + 1, relay="none")])
    blocks = [_block(b, c[0], c[1], c[2]) for b, c in enumerate(chains)]
    study, year = _make(feeders, blocks, net)
    return study, year, np.concatenate(traps)


ROUND_CASES = {
    # one block: five candidates, four with spikes (trap 5 % -> violation 0.4; a pair is
    # >= 17.6 % -> >= 0.66; none armed -> 0.9)
    "one_block": ([(10.0, 9.0, 11.0, [8.95, 8.90, 8.85, 8.80, 8.70], 5.0)], 1500, 1),
    # two blocks, four and three candidates; the second block's last candidate is the
    # binding one for the full year (0.4 / 8 = 0.05 > 0.3 / 10)
    "two_blocks": ([(10.0, 9.0, 11.0, [8.95, 8.90, 8.85, 8.70], 5.0),
                    (8.0, 7.0, 9.0, [6.96, 6.92, 6.60], 4.0)], 2000, 2),
}


@pytest.mark.parametrize("case", list(ROUND_CASES))
def test_level1_rounds_reach_the_brute_force_optimum(case):
    chains, n_t, seed = ROUND_CASES[case]
    study, year, traps = _spiky_instance(chains, n_t, seed)
    assert year.n_intervals >= 1000 and traps.size <= 12  # few spikes among many intervals
    K, s, pct = brute_force(study, year)  # reference: brute-force enumeration
    worst = worst_relative(study, s)
    w_star = float(worst.min())
    # guard: the spikes decide the optimum - without them the best plan is much better
    calm = np.setdiff1d(np.arange(n_t), traps)
    assert worst_relative(study, s[:, :, calm]).min() < w_star - 0.01

    out = plan_allocation(study, year, solver="highs", time_limit_s=30, seed=0)
    rounds = out.levels[0]["rounds"]
    # guard: the heuristic start is not already optimal, so the level-1 rounds must find it
    assert out.heuristic["worst_violation_rel"] > w_star + 0.1, out.heuristic
    got = run_check(study, year, out.block_idx).worst_relative_violation
    assert got == pytest.approx(w_star, abs=TOL_Z), (rounds, got, w_star)
    assert rounds >= 3, out.levels[0]


# ============================================================================================
# 2. max_substation_share_pct vs brute force among rule-abiding assignments
# ============================================================================================
def _substation_instance(seed: int, n_t: int = 720):
    """Two blocks, seven armable feeders on three substations (the four largest on S1),
    a relay-'none' filler; loads with a daily shape, noise and two PV feeders."""
    rng = np.random.default_rng(seed)
    h = np.arange(n_t) % 24
    bell = np.clip(np.cos(np.pi * (h + 0.5 - 12.5) / 12), 0, None) ** 2
    eve = np.exp(-0.5 * ((h - 19) / 3) ** 2)
    sizes = [5.0, 4.6, 4.2, 3.8, 3.0, 2.6, 2.2]
    subs = ["S1", "S1", "S1", "S1", "S2", "S2", "S3"]
    net = np.empty((8, n_t))
    for f, size in enumerate(sizes):
        shape = 0.6 + rng.uniform(0.1, 0.4) * np.roll(eve, int(rng.integers(-4, 5)))
        net[f] = size * shape * (1 + 0.03 * rng.standard_normal(n_t))
    for f in (1, 5):
        net[f] -= rng.uniform(0.3, 0.7) * sizes[f] * bell  # rooftop PV at midday
    net[7] = 60.0 + 10.0 * eve + rng.uniform(0, 1, n_t)  # unarmable rest of the network
    feeders = [_feeder(i, substation=subs[i]) for i in range(7)] + [_feeder(7, relay="none")]
    blocks = [_block(0, 10, 8, 12), _block(1, 10, 8, 12)]
    return feeders, blocks, net


# Known defect (found by this brute force; planner left unchanged here): the planner adds a
# cap row at the lowest-share interval of each plan that breaks the rule and keeps that row
# for every later plan, although the rule binds a plan only at *its own* lowest-share
# interval.  The kept rows can exclude rule-abiding plans: in instance 3 the best of them
# (worst violation 0.316) breaks rows made for earlier plans, and the planner ends at 0.8
# (a block left empty).  It no longer claims a bound or optimality with the rule set (tested
# below); the miss itself stays a known limitation.
CAP_ROWS_DEFECT = pytest.mark.xfail(
    strict=True, reason="max_substation_share_pct rows are kept at fixed intervals for all "
    "later plans, which over-restricts the rule (see the comment above)")


# Instance 4 (cap 60 %) meets the same defect or not depending on the path the search takes
# (which plans break the rule first): since the planner started its fewest-changes search
# from the current allocation it ends at 0.279 there against 0.231 by brute force, so it is
# not in the list (a test that may pass or fail by path would prove nothing either way).
@pytest.mark.parametrize("seed,cap_pct", [(6, 60.0),
                                          pytest.param(3, 60.0, marks=CAP_ROWS_DEFECT)])
def test_substation_cap_matches_brute_force(seed, cap_pct):
    feeders, blocks, net = _substation_instance(seed)
    study, year = _make(feeders, blocks, net, sub_cap_pct=cap_pct)
    K, s, pct = brute_force(study, year)  # reference: brute-force enumeration
    worst = worst_relative(study, s)
    ok = substation_rule_ok(study, K, s, pct, cap_pct)
    w_free, w_cap = float(worst.min()), float(worst[ok].min())
    assert w_cap > w_free + 0.01  # guard: the cap really binds here

    out = plan_allocation(study, year, solver="highs", time_limit_s=30, seed=0)
    # the plan keeps the rule (measured by the brute-force definition) ...
    k_plan = np.flatnonzero((K == out.block_idx[None, :]).all(axis=1))
    assert k_plan.size == 1 and ok[k_plan[0]], out.explanation
    # ... and its worst violation is the best any rule-abiding assignment reaches
    got = run_check(study, year, out.block_idx).worst_relative_violation
    assert got == pytest.approx(w_cap, abs=TOL_Z)


def test_substation_cap_claims_no_bound_or_optimum():
    """With the cap set the planner may miss the best rule-abiding plan (instance 3 above),
    so it must not call any level optimal nor give a bound (reference: brute force shows
    the plan it returns is worse than the best one)."""
    feeders, blocks, net = _substation_instance(3)
    study, year = _make(feeders, blocks, net, sub_cap_pct=60.0)
    K, s, pct = brute_force(study, year)  # reference: brute-force enumeration
    ok = substation_rule_ok(study, K, s, pct, 60.0)
    out = plan_allocation(study, year, solver="highs", time_limit_s=30, seed=0)
    got = run_check(study, year, out.block_idx).worst_relative_violation
    assert got > float(worst_relative(study, s)[ok].min()) + 0.1  # the miss is real here
    assert not out.proven and out.lower_bound_worst is None
    assert not any(lv["proven_optimal"] or "optimal" in lv["claim"] for lv in out.levels)
    text = " ".join(out.explanation)
    assert "no bound is given" in text and "valid for every scenario" not in text


# ============================================================================================
# 3. direction-blocked relays: hand arithmetic
# ============================================================================================
def test_direction_blocked_feeder_contributes_zero_while_exporting():
    # VDE-AR-N 4142 (the German FNN application rule on automatic under-frequency load
    # shedding; from memory) describes direction-dependent tripping: a feeder that feeds
    # back (reverse power flow) is not shed.  Relay 'direction_blocked' models that; a
    # 'standard' relay trips the feeder whatever the flow.
    # Two hours; one block, target 10 %, band 8-12 %.
    #   F0 direction_blocked: net  2 MW at night,  -3 MW at midday (exporting)
    #   F1 standard:          net  4 MW,           -3 MW (exporting)
    #   F2 standard:          net  2 MW,            2 MW
    #   F3 relay none:        net 32 MW,           24 MW
    #   demand = 2 + 4 + 2 + 32 = 40 MW at night,  -3 - 3 + 2 + 24 = 20 MW at midday
    # contributions in % of demand:
    #   F0:  2/40 =  5 %,  0 (blocked while exporting; as a standard relay it would be -15 %)
    #   F1:  4/40 = 10 %, -3/20 = -15 %
    #   F2:  2/40 =  5 %,  2/20 = 10 %
    # so {F0, F2} holds 10 % and 10 %: in band, violation 0; every other choice violates:
    #   {} or {F0}: 0 % at midday -> (8 - 0)/10 = 0.8;  {F2}: 5 % at night -> 0.3;
    #   {F1}: -15 % -> 2.3;  {F1, F2}: -5 % at midday -> 1.3;  {F0, F1, F2}: 20 % -> 0.8
    #   and -5 % -> 1.3.  Were F0 standard, {F0, F2} would hold -5 % at midday (1.3) and
    #   the best plan would be {F2} at 0.3.
    net = [[2.0, -3.0], [4.0, -3.0], [2.0, 2.0], [32.0, 24.0]]
    feeders = [_feeder(0, relay="direction_blocked"), _feeder(1), _feeder(2),
               _feeder(3, relay="none")]
    study, year = _make(feeders, [_block(0, 10, 8, 12)], net)
    np.testing.assert_allclose(year.demand_mw, [40.0, 20.0])
    units = build_units(study, year)
    np.testing.assert_allclose(units.pp, [[5.0, 0.0], [10.0, -15.0], [5.0, 10.0],
                                          [0.0, 0.0]], atol=1e-12)
    out = plan_allocation(study, year, solver="highs", time_limit_s=10, seed=0)
    assert list(out.block_idx) == [0, UNARMED, 0, UNARMED]
    chk = run_check(study, year, out.block_idx)
    np.testing.assert_allclose(chk.share_pct[0], [10.0, 10.0], atol=1e-12)
    assert chk.worst_relative_violation == pytest.approx(0.0, abs=1e-12)
