"""The switched plan: remotely switchable units get one block per period.

Each switchable unit u becomes one *period unit* (u, p) per period p, whose contribution is
u's ``pp`` on the columns of period p and 0 elsewhere (an array mask, no loop over
columns); fixed units stay as they are.  On these expanded units the fixed planner
(:func:`allocator.plan.solve.plan_allocation`) solves exactly the switched problem for its
levels: (1) the worst violation over every scenario with the margin, because a period unit
moves its share only in its own period; (2) the field changes, because a period unit has no
change cost (its block is set by the control room: a "set remote schedule" row, not a site
visit); then the deviation from target.  Level (3), the switching operations per year, is
solved afterwards by the exact model of :mod:`allocator.plan.switchops` over the period
units only (the other units held, so the field changes stay), holding the level-1 worst
violation; it is claimed optimal only for that field plan and only when proven.  Without an
answer in its budget a local pass runs instead (a period's block is set to one the unit
uses in another period when that saves operations: a local optimum).  It runs after the
deviation search, so the deviation is whatever remains.

Switching operations per year: the calendar of the study year gives ``N[p, q]``, how many
interval starts move from period p to period q (the first interval of the year counts the
move from the last interval's period, so the schedule repeats year on year); a unit costs
``Σ N[p, q]`` over the pairs where its blocks differ (a trip group is one relay, one
operation).

The caps ``max_switched_feeders`` and ``max_switch_operations_per_year`` are rows of that
model (the best worst violation under them found first); when a cap forces a worse
violation, level 1 is no longer claimed optimal.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace

import numpy as np

from ..domain import UNARMED, Study
from ..year import Year, study_calendar_year, year_period_index
from .heuristic import Band, evaluate, shares, violation_rel
from .solve import PlanOutcome, band_of, plan_allocation
from .units import Units, build_units

#: tolerance on the relative violation when the pass holds level 1
Z_TOL = 1e-7


@dataclass(frozen=True)
class Expanded:
    """Period units on top of the units: ``base[k]`` the unit of period unit k,
    ``period[k]`` its period (−1: a fixed unit, all periods)."""

    units: Units
    base: np.ndarray
    period: np.ndarray
    n_units: int
    n_periods: int


@dataclass
class SwitchedOutcome:
    """A plan with a schedule: ``schedule[feeder, period]`` block index (−1 unarmed)."""

    plan: PlanOutcome
    schedule: np.ndarray
    switch_ops_per_year: int
    switched_feeders: int
    relays_changed: int
    notes: list[str] = field(default_factory=list)
    caps_bound: bool = False


def column_periods(study: Study, years: tuple[Year, ...], units: Units) -> np.ndarray:
    """``[column]`` period in force at each planner column."""
    per = [year_period_index(study, y) for y in years]
    out = np.empty(units.valid_index.size, dtype=np.intp)
    for k, p in enumerate(per):
        sel = units.col_scenario == k
        out[sel] = p[units.valid_index[sel]]
    return out


def switchable_units(study: Study, units: Units) -> np.ndarray:
    """``[unit]`` bool: its relay is set by schedule from the control room
    (:attr:`allocator.domain.Study.is_remote_settable`)."""
    rs = study.is_remote_settable
    return np.array([bool(rs[m].all()) for m in units.members], dtype=bool)


def expand(units: Units, col_period: np.ndarray, sw_unit: np.ndarray, n_p: int) -> Expanded:
    """The expanded units (see the module docstring)."""
    fixed = np.flatnonzero(~sw_unit)
    sw = np.flatnonzero(sw_unit)
    base = np.concatenate([fixed, np.repeat(sw, n_p)])
    period = np.concatenate([np.full(fixed.size, -1), np.tile(np.arange(n_p), sw.size)])
    order = np.argsort(base, kind="stable")  # keep unit order (period units together)
    base, period = base[order], period[order]
    pp = units.pp[base]
    mask = (period[:, None] < 0) | (col_period[None, :] == period[:, None])
    pp = np.where(mask, pp, 0).astype(units.pp.dtype)
    cost = units.change_cost[base].copy()
    cost[period >= 0] = 0.0  # a schedule is set by the control room, not in the field
    first = np.r_[True, base[1:] != base[:-1]]
    owner = np.flatnonzero(first)[np.searchsorted(base[first], units.owner)] \
        if units.owner is not None else None
    exp = Units(tuple(units.members[b] for b in base), pp, units.allowed[base], cost,
                units.current[base], units.valid_index, units.n_blocks, units.n_feeders,
                None if units.substation is None else units.substation[base],
                units.col_scenario,
                None if units.exports_standard is None else units.exports_standard[base],
                owner)
    return Expanded(exp, base, period, units.n, n_p)


def unit_schedule(ex: Expanded, option: np.ndarray) -> np.ndarray:
    """``[unit, period]`` options (B = unarmed) from the expanded option vector."""
    out = np.empty((ex.n_units, ex.n_periods), dtype=np.intp)
    fixed = ex.period < 0
    out[ex.base[fixed], :] = option[fixed][:, None]
    out[ex.base[~fixed], ex.period[~fixed]] = option[~fixed]
    return out


def transitions(study: Study, year: Year) -> np.ndarray:
    """``N[p, q]``: interval starts of the year where period p gives way to q (p ≠ q),
    the first interval counting the move from the last (the calendar repeats)."""
    per = year_period_index(study, year)
    n_p = len(study.periods)
    prev = np.roll(per, 1)
    ch = prev != per
    return np.bincount(prev[ch] * n_p + per[ch], minlength=n_p * n_p).reshape(n_p, n_p)


def switch_ops(sched_u: np.ndarray, n_trans: np.ndarray) -> np.ndarray:
    """``[unit]`` switching operations per year of a ``[unit, period]`` schedule."""
    differ = sched_u[:, :, None] != sched_u[:, None, :]
    return (differ * n_trans[None]).sum(axis=(1, 2))


def feeder_schedule(units: Units, sched_u: np.ndarray) -> np.ndarray:
    """``[feeder, period]`` block index (UNARMED = −1) from ``[unit, period]`` options."""
    owner, _ = units.owner_and_first()
    s = sched_u[owner]
    return np.where(s < units.n_blocks, s, UNARMED).astype(np.intp)


class _Pass:
    """The state of the switching pass: expanded option, shares, and the unit schedule."""

    def __init__(self, ex: Expanded, option: np.ndarray, band: Band, n_trans: np.ndarray,
                 col_period: np.ndarray):
        self.ex, self.band, self.n_trans, self.col_period = ex, band, n_trans, col_period
        self.opt = np.array(option, dtype=np.intp)
        self.s = shares(ex.units, self.opt).copy()
        self.nb = ex.units.n_blocks
        self.copies = {int(u): np.flatnonzero(ex.base == u) for u in np.unique(
            ex.base[ex.period >= 0])}
        self.cols = {p: np.flatnonzero(col_period == p) for p in range(ex.n_periods)}

    def z(self) -> float:
        return float(violation_rel(self.s, self.band).max(initial=0.0))

    def move_z(self, k: int, v: int) -> float:
        """Worst relative violation of the two rows period unit k leaves and joins, on its
        period's columns (the only ones it moves)."""
        cols = self.cols[int(self.ex.period[k])]
        old, row = int(self.opt[k]), self.ex.units.pp[k, cols].astype(float)
        worst = 0.0
        for b, sign in ((old, -1.0), (v, 1.0)):
            if b < self.nb:
                r = self.s[b, cols] + sign * row
                worst = max(worst, float(violation_rel(r[None], Band(
                    self.band.target[b:b + 1], self.band.lo[b:b + 1],
                    self.band.hi[b:b + 1])).max(initial=0.0)))
        return worst

    def apply(self, k: int, v: int) -> None:
        cols = self.cols[int(self.ex.period[k])]
        old, row = int(self.opt[k]), self.ex.units.pp[k, cols].astype(float)
        if old < self.nb:
            self.s[old, cols] -= row
        if v < self.nb:
            self.s[v, cols] += row
        self.opt[k] = v

    def ops(self, u: int) -> int:
        return int(switch_ops(self.opt[self.copies[u]][None], self.n_trans)[0])


def _candidates(st: _Pass, u: int, fix_all: bool):
    """(period unit, value) moves of unit u: to a block it uses in another period, or
    (``fix_all``) to any allowed option for its whole schedule."""
    ks = st.copies[u]
    used = set(st.opt[ks].tolist())
    if fix_all:
        vals = set(np.flatnonzero(st.ex.units.allowed[ks[0]]).tolist()) | {st.nb} | used
        return [[(int(k), v) for k in ks if st.opt[k] != v] for v in sorted(vals)]
    return [[(int(k), v)] for k in ks for v in sorted(used) if v != st.opt[k]]


def _try(st: _Pass, moves, need_saving: bool = True) -> tuple[float, int]:
    """(worst violation after, operations saved) of a move list, nothing applied: period
    units of one unit move on disjoint columns, so each move is judged on its own.  With
    ``need_saving`` a move list that saves nothing is not judged (worst = inf)."""
    u = int(st.ex.base[moves[0][0]])
    ks = st.copies[u]
    new = st.opt[ks].copy()
    pos = {int(k): i for i, k in enumerate(ks)}
    for k, v in moves:
        new[pos[k]] = v
    saved = st.ops(u) - int(switch_ops(new[None], st.n_trans)[0])
    if need_saving and saved <= 0:
        return float("inf"), saved
    return max(st.move_z(k, v) for k, v in moves), saved


def reduce_switching(st: _Pass, z_cap: float, deadline: float) -> None:
    """Sweeps over the switchable units: each takes its move that saves the most operations
    and keeps the rows it touches within ``z_cap``, until a sweep changes nothing."""
    changed = True
    while changed and time.perf_counter() < deadline:
        changed = False
        for u in st.copies:
            if time.perf_counter() >= deadline:
                return
            best = None
            for moves in _candidates(st, u, fix_all=False):
                worst, saved = _try(st, moves)
                if saved > 0 and worst <= z_cap and (best is None or saved > best[0]):
                    best = (saved, moves)
            if best is not None:
                for k, v in best[1]:
                    st.apply(k, v)
                changed = True


def _over_caps(st: _Pass, study: Study, sizes: np.ndarray) -> tuple[bool, bool]:
    s = study.settings
    sched = {u: st.opt[ks] for u, ks in st.copies.items()}
    switched = sum(int(sizes[u]) for u, v in sched.items() if len(set(v.tolist())) > 1)
    ops = sum(st.ops(u) for u in st.copies)
    return (s.max_switched_feeders is not None and switched > s.max_switched_feeders,
            s.max_switch_operations_per_year is not None
            and ops > s.max_switch_operations_per_year)


def enforce_caps(st: _Pass, study: Study, sizes: np.ndarray) -> bool:
    """Meet the caps by the moves that raise the worst violation least; True if any move
    was needed."""
    moved = False
    while True:
        feeders_over, ops_over = _over_caps(st, study, sizes)
        if not (feeders_over or ops_over):
            return moved
        best, z_now = None, st.z()
        for u in st.copies:
            if len(set(st.opt[st.copies[u]].tolist())) < 2:
                continue
            for moves in _candidates(st, u, fix_all=feeders_over):
                worst, saved = _try(st, moves)
                key = (max(worst, z_now), -saved)
                if saved > 0 and (best is None or key < best[0]):
                    best = (key, moves)
        if best is None:
            return moved
        for k, v in best[1]:
            st.apply(k, v)
        moved = True


def _fewest_operations(st: _Pass, study: Study, sizes: np.ndarray, z_cap: float,
                       budget: float, kw: dict) -> tuple[dict, bool]:
    """Lower the switching operations holding the worst violation ``z_cap`` (and meet the
    caps): the exact model of :mod:`allocator.plan.switchops` within ``budget`` seconds,
    else the local pass.  Returns (the level's account, whether the caps raised z)."""
    from .switchops import fewest_operations

    s = study.settings
    caps = {"max_switch_operations_per_year": s.max_switch_operations_per_year,
            "max_switched_feeders": s.max_switched_feeders}
    t0 = time.perf_counter()
    res = fewest_operations(st.ex, st.opt, st.band, st.n_trans, st.col_period, z_cap, caps,
                            sizes, t0 + budget, kw.get("solver") or "highs",
                            int(kw.get("seed") or 0))
    if res is not None:
        st.opt = res.option
        claim = ("optimal (proven) for the field plan: no schedule of the remote relays "
                 "with the other relays as planned needs fewer" if res.proven else
                 f"best found in {budget:.0f} s (not proven)")
        level = {"level": "switching operations", "method": "MILP with column rounds "
                 "(remote relays; the other relays held as planned)", "rounds": res.rounds,
                 "status": res.status, "seconds": time.perf_counter() - t0,
                 "proven_optimal": bool(res.proven), "claim": claim}
        return level, res.z > z_cap + 1e-9
    reduce_switching(st, z_cap, t0 + budget)
    forced = enforce_caps(st, study, sizes)
    return ({"level": "switching operations", "method": "local pass (the exact model gave "
             "no answer in time)", "seconds": time.perf_counter() - t0,
             "proven_optimal": False, "claim": "best found (a local optimum)"}, forced)


def plan_switched(study: Study, years, pass_time_s: float | None = None,
                  **kw) -> SwitchedOutcome:
    """Plan a schedule (see the module docstring); ``kw`` go to ``plan_allocation``."""
    years = (years,) if isinstance(years, Year) else tuple(years)
    units = build_units(study, years)
    sw = switchable_units(study, units)
    cp = column_periods(study, years, units)
    ex = expand(units, cp, sw, len(study.periods))
    out = plan_allocation(study, years, units=ex.units, **kw)
    band = band_of(study, out.margin_pp + ex.units.guard_pp)
    n_trans = transitions(study, study_calendar_year(study, years))
    st = _Pass(ex, out.option, band, n_trans, cp)
    z_cap = st.z() + Z_TOL
    budget = pass_time_s if pass_time_s is not None else max(
        2.0, 0.1 * float(kw.get("time_limit_s") or study.settings.solver_time_limit_s))
    sizes = np.array([m.size for m in units.members])
    ops_level, forced = _fewest_operations(st, study, sizes, z_cap, budget, kw)
    sched_u = unit_schedule(ex, st.opt)
    schedule = feeder_schedule(units, sched_u)
    ops = int(switch_ops(sched_u, n_trans).sum())
    switched = int(sum(sizes[u] for u in range(units.n)
                       if len(set(sched_u[u].tolist())) > 1))
    notes = [f"switching operations: {ops} per year on {switched} feeder(s), "
             f"{ops_level['claim']}"]
    levels = list(out.levels) + [ops_level]
    if forced:
        notes.append("the caps max_switched_feeders / max_switch_operations_per_year raise "
                     "the worst violation; level 1 is not claimed optimal")
        levels = [dict(lv, proven_optimal=False, claim="not claimed: the switching caps "
                       "raise the worst violation") if lv.get("level") == "worst violation"
                  else lv for lv in levels]
    out = replace(out, proven=out.proven and not forced, levels=levels)
    field = study.field_allocation(schedule)
    fc = study.relays_changed(field)
    k = evaluate(ex.units, st.opt, band)
    out = replace(out, full_year=dict(zip(("worst_violation_rel", "mad_pp", "changes"), k)),
                  status="in_band" if k[0] <= 1e-9 and out.status == "in_band" else
                  "out_of_band", option=st.opt, block_idx=schedule[:, 0], relays_changed=fc,
                  feeders_changed=int((field != study.current_assignment).sum()))
    return SwitchedOutcome(out, schedule, ops, switched, fc, notes, forced)


def as_switched(study: Study, years, outcome: PlanOutcome, seconds: float,
                note: str) -> SwitchedOutcome:
    """A fixed plan as a schedule: the same block in every period, no switching operations
    (``seconds``: the time the switched search took, added to the plan's)."""
    schedule = np.repeat(np.asarray(outcome.block_idx)[:, None], len(study.periods), axis=1)
    fc = study.relays_changed(study.field_allocation(schedule))
    plan = replace(outcome, seconds=outcome.seconds + seconds, relays_changed=fc,
                   events=list(outcome.events) + [note])
    return SwitchedOutcome(plan, schedule, 0, 0, fc, [note], False)


__all__ = ["plan_switched", "as_switched", "reduce_switching", "enforce_caps", "Expanded", "SwitchedOutcome", "column_periods", "switchable_units", "expand",
           "unit_schedule", "transitions", "switch_ops", "feeder_schedule"]
